"""Wind observations: the table that aircraft-derived winds, telemetry and reports feed to the GP."""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from balloonpath.errors import input_error
from balloonpath.fileio import atomic_write_text
from balloonpath.timeutil import iso_from_posix, parse_iso

COLUMNS = ("time", "latitude", "longitude", "altitude_m", "u_m_s", "v_m_s", "sigma_m_s", "source")


@dataclass(frozen=True)
class WindObservations:
    """Point observations of the wind, arrays of one length.

    Attributes
    ----------
    time_s : POSIX seconds UTC. lat, lon : degrees. alt_m : geometric altitude, m.
    u, v : wind components, m/s. sigma : standard deviation of each component's error, m/s.
    source : text label per observation (e.g. "aircraft", "telemetry", "report").
    """

    time_s: np.ndarray
    lat: np.ndarray
    lon: np.ndarray
    alt_m: np.ndarray
    u: np.ndarray
    v: np.ndarray
    sigma: np.ndarray
    source: np.ndarray

    def __len__(self) -> int:
        return int(np.asarray(self.u).size)

    @staticmethod
    def empty() -> WindObservations:
        """An empty table."""
        z = np.zeros(0)
        return WindObservations(z, z, z, z, z, z, z, np.zeros(0, dtype=object))

    def concat(self, other: WindObservations) -> WindObservations:
        """Both tables, this one first."""
        return WindObservations(
            *(np.concatenate([getattr(self, f), getattr(other, f)]) for f in _FIELDS)
        )

    def select(self, mask: np.ndarray) -> WindObservations:
        """The rows where ``mask`` is true (or the given indices)."""
        return WindObservations(*(np.asarray(getattr(self, f))[mask] for f in _FIELDS))


_FIELDS = ("time_s", "lat", "lon", "alt_m", "u", "v", "sigma", "source")


def read_observations(path: str | Path) -> WindObservations:
    """Read a wind-observation CSV (columns ``time,latitude,longitude,altitude_m,u_m_s,v_m_s,sigma_m_s,source``).

    Raises
    ------
    InputDataError
        Naming the file, line and column, for a missing column or a value that does not parse or is NaN.
    """
    path = Path(path)
    text = path.read_text(encoding="utf-8")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise input_error(path, "header", "the file is empty", "write a header line with " + ",".join(COLUMNS))
    reader = csv.DictReader(io.StringIO("\n".join(lines)))
    header = [h.strip() for h in (reader.fieldnames or [])]
    missing = [c for c in COLUMNS[:-1] if c not in header]
    if missing:
        raise input_error(path, f"column {missing[0]}", "is missing", "use the columns " + ",".join(COLUMNS))
    cols: dict[str, list] = {c: [] for c in COLUMNS}
    for lineno, row in enumerate(reader, start=2):
        row = {k.strip(): (v or "").strip() for k, v in row.items() if k is not None}
        for c in COLUMNS:
            value = row.get(c, "")
            if c == "source":
                cols[c].append(value or "unknown")
            elif c == "time":
                try:
                    cols[c].append(parse_iso(value))
                except ValueError:
                    raise input_error(path, f"line {lineno}, column time", f"'{value}' is not ISO 8601 UTC",
                                      "write times like 2027-05-14T09:30:00Z") from None
            else:
                try:
                    number = float(value)
                except ValueError:
                    number = float("nan")
                if not np.isfinite(number):
                    raise input_error(path, f"line {lineno}, column {c}", f"'{value}' is not a finite number",
                                      "remove the row or fill in the value")
                cols[c].append(number)
    sigma = np.array(cols["sigma_m_s"], dtype=float)
    if np.any(sigma <= 0):
        raise input_error(path, "column sigma_m_s", "values must be > 0", "give each observation's error in m/s")
    return WindObservations(
        np.array(cols["time"], dtype=float), np.array(cols["latitude"], dtype=float),
        np.array(cols["longitude"], dtype=float), np.array(cols["altitude_m"], dtype=float),
        np.array(cols["u_m_s"], dtype=float), np.array(cols["v_m_s"], dtype=float), sigma,
        np.array(cols["source"], dtype=object),
    )


def write_observations(obs: WindObservations, path: str | Path) -> Path:
    """Write observations as CSV (atomic); fixed decimals so equal inputs give identical bytes."""
    out = io.StringIO()
    out.write(",".join(COLUMNS) + "\n")
    for i in range(len(obs)):
        out.write(
            f"{iso_from_posix(obs.time_s[i])},{obs.lat[i]:.5f},{obs.lon[i]:.5f},{obs.alt_m[i]:.1f},"
            f"{obs.u[i]:.3f},{obs.v[i]:.3f},{obs.sigma[i]:.3f},{obs.source[i]}\n"
        )
    return atomic_write_text(path, out.getvalue())
