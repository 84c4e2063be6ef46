"""Aircraft-derived winds: wind triangle, heights, quality control, error model and super-observations.

Every airliner is a wind sensor: the wind is the ground velocity minus the air velocity (the wind triangle).
Inputs are report tables (CSV, one row per aircraft state) or raw Mode-S/ADS-B messages (``modes.py``); both
become an :class:`AircraftStates` table, which :func:`quality_control` screens and
:func:`superobservations` thins into :class:`~balloonpath.winds.observations.WindObservations`.
The library entry point is :func:`derive_observations`. Rules, thresholds and sources are in
``docs/aircraft-winds.md``.

References
----------
[PHAK] FAA, Pilot's Handbook of Aeronautical Knowledge (FAA-H-8083-25), chapter "Navigation", wind
    triangle (true course 090, TAS 120 kt, wind 045 at 40 kt gives GS 88 kt).
[NOAA1976] U.S. Standard Atmosphere 1976: pressure altitude is the standard-atmosphere height of a pressure.
[deHaan2016] de Haan, S. (2016), Estimation of vertical wind error of Mode-S EHS derived winds by triple
    collocation, Atmos. Meas. Tech. 9, 4141-4150, doi:10.5194/amt-9-4141-2016 (abstract: component error
    below 1.4 +/- 0.1 m/s near the surface, 1.1 +/- 0.3 m/s at 500 hPa).
[Benjamin1999] Benjamin, S. G., Schwartz, B. E. and Cole, R. E. (1999), Accuracy of ACARS wind and
    temperature observations determined by collocation, Wea. Forecasting 14, 1032-1038 (1.1 m/s near the
    surface, 1.8 m/s at 10 km per component; as cited in [deHaan2016]).
[deHaan2013] de Haan, S. (2013), KNMI TR-338: per-aircraft heading corrections ("Errors due to outdated
    magnetic variance tables").
[Jacobs2014] Jacobs, N. A. et al. (2014), J. Atmos. Oceanic Technol. 31, 1733-1747: heading-bias
    correction reduced wind errors by 22-68 %.
"""

from __future__ import annotations

import csv
import math
import tempfile
import warnings
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import asdict, dataclass, field, fields
from pathlib import Path
from typing import IO

import numpy as np

from balloonpath.atmosphere import (
    Atmosphere,
    geometric_from_geopotential,
    usa1976,
)
from balloonpath.errors import CoverageError, DataQualityWarning, InputDataError, input_error
from balloonpath.timeutil import parse_iso
from balloonpath.units import m_from_ft, m_s_from_kt
from balloonpath.winds.field import WindField, uv_from_direction_speed
from balloonpath.winds.magnetic import declination_deg, true_from_magnetic_heading
from balloonpath.winds.observations import WindObservations

KIND_DERIVED = 0  # wind from ground velocity minus air velocity
KIND_REPORTED = 1  # wind reported as such (meteorological report, BDS 4,4)


# --------------------------------------------------------------------------------------------------------
# Physics: the wind triangle and heights
# --------------------------------------------------------------------------------------------------------
def wind_from_triangle(
    ground_speed_m_s: np.ndarray | float,
    track_deg: np.ndarray | float,
    true_airspeed_m_s: np.ndarray | float,
    heading_true_deg: np.ndarray | float,
) -> tuple[np.ndarray, np.ndarray]:
    """Wind (u east, v north; m/s) = ground velocity - air velocity.

    Parameters
    ----------
    ground_speed_m_s, track_deg : array_like
        Ground speed and true track (degrees clockwise from true north).
    true_airspeed_m_s, heading_true_deg : array_like
        True airspeed and true heading.

    Notes
    -----
    u = GS sin(chi) - TAS sin(psi), v = GS cos(chi) - TAS cos(psi), with chi the track and psi the heading
    ([PHAK] wind triangle, solved for the wind). A heading error d psi gives a wind error of
    2 TAS sin(d psi / 2), about 4 m/s per degree at 230 m/s cruise speed.
    """
    gs = np.asarray(ground_speed_m_s, dtype=float)
    chi = np.radians(np.asarray(track_deg, dtype=float))
    tas = np.asarray(true_airspeed_m_s, dtype=float)
    psi = np.radians(np.asarray(heading_true_deg, dtype=float))
    return gs * np.sin(chi) - tas * np.sin(psi), gs * np.cos(chi) - tas * np.cos(psi)


def heading_and_ground_speed(
    true_airspeed_m_s: np.ndarray | float,
    course_deg: np.ndarray | float,
    wind_u_m_s: np.ndarray | float,
    wind_v_m_s: np.ndarray | float,
) -> tuple[np.ndarray, np.ndarray]:
    """True heading (degrees) and ground speed (m/s) that hold a true course in a wind.

    Notes
    -----
    With the cross-wind c = u cos(chi) - v sin(chi) and the along-track wind a = u sin(chi) + v cos(chi),
    the wind-correction angle is WCA = -asin(c / TAS), heading psi = chi + WCA and ground speed
    GS = TAS cos(WCA) + a ([PHAK] wind triangle). NaN where the cross-wind exceeds the airspeed.
    """
    tas = np.asarray(true_airspeed_m_s, dtype=float)
    chi = np.radians(np.asarray(course_deg, dtype=float))
    u = np.asarray(wind_u_m_s, dtype=float)
    v = np.asarray(wind_v_m_s, dtype=float)
    cross = u * np.cos(chi) - v * np.sin(chi)
    along = u * np.sin(chi) + v * np.cos(chi)
    with np.errstate(invalid="ignore"):
        wca = -np.arcsin(cross / tas)
    heading = (np.degrees(chi + wca)) % 360.0
    return heading, tas * np.cos(wca) + along


def altitude_from_pressure_altitude(
    pressure_altitude_m: np.ndarray | float, atmosphere: Atmosphere | None = None
) -> np.ndarray:
    """Geometric altitude (m) of a pressure altitude.

    Parameters
    ----------
    pressure_altitude_m : array_like
        Pressure altitude in metres (feet x 0.3048): the geopotential height at which the standard atmosphere
        has the measured static pressure.
    atmosphere : Atmosphere, optional
        The day's air with actual heights (e.g. :class:`~balloonpath.atmosphere.SoundingAtmosphere`). When
        given, the result is the height where *this* atmosphere has that pressure; otherwise the standard
        atmosphere's geometric height.

    Notes
    -----
    Pressure altitude is defined on the standard atmosphere ([NOAA1976] eqs. 33a/b, geopotential H):
    p = p_std(H_p); without a background, z = r0 H_p / (r0 - H_p) ([NOAA1976] eq. 18 inverted), about
    +19 m at 11 km. With a background, z solves p_atm(z) = p, by interpolation of log p on a 5 m grid
    from -500 m to 25 km (log p is smooth and monotonic; the interpolation error is below 0.1 m).
    """
    h = np.asarray(pressure_altitude_m, dtype=float)
    z_std = geometric_from_geopotential(h)
    if atmosphere is None:
        return z_std
    p = usa1976(np.clip(z_std, -5_000.0, 86_000.0)).pressure_pa
    grid = np.arange(-500.0, 25_000.0 + 5.0, 5.0)
    logp_grid = np.log(np.asarray(atmosphere.state(grid).pressure_pa, dtype=float))
    # np.interp needs increasing x: log p decreases with height.
    return np.interp(-np.log(p), -logp_grid, grid, left=np.nan, right=np.nan)


def observation_sigma_m_s(alt_m: np.ndarray | float, kind: np.ndarray | int) -> np.ndarray:
    """Default standard deviation (m/s) of one wind component of one aircraft observation.

    Notes
    -----
    Derived (Mode-S / report heading + airspeed + ground velocity): 1.4 m/s at the surface and 1.1 m/s at
    5.5 km (500 hPa) [deHaan2016], 1.8 m/s at 10 km and above (by analogy with AMDAR [Benjamin1999]; no
    published Mode-S figure at cruise was read, and the error grows with airspeed). Reported winds (AMDAR,
    BDS 4,4): 1.1 m/s at the surface rising to 1.8 m/s at 10 km [Benjamin1999], held above. Linear in
    altitude between the points.
    """
    z = np.asarray(alt_m, dtype=float)
    derived = np.interp(z, [0.0, 5_500.0, 10_000.0], [1.4, 1.1, 1.8])
    reported = np.interp(z, [0.0, 10_000.0], [1.1, 1.8])
    return np.where(np.asarray(kind) == KIND_REPORTED, reported, derived)


# --------------------------------------------------------------------------------------------------------
# Tables
# --------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class AircraftStates:
    """Aircraft states with everything the wind triangle and QC need; arrays of one length, SI units.

    Attributes
    ----------
    time_s : POSIX seconds. aircraft : object array of ids. lat, lon : degrees. alt_m : geometric altitude.
    ground_speed_m_s, track_deg : ground velocity (true track). true_airspeed_m_s, heading_true_deg : air
    velocity (true heading). roll_deg, track_rate_deg_s : NaN when unknown. pair_age_s : largest time
    difference between the pieces paired into the row (0 for a report row). wind_u, wind_v : the reported
    wind for KIND_REPORTED rows (NaN otherwise). kind : KIND_DERIVED or KIND_REPORTED. source : label.
    """

    time_s: np.ndarray
    aircraft: np.ndarray
    lat: np.ndarray
    lon: np.ndarray
    alt_m: np.ndarray
    ground_speed_m_s: np.ndarray
    track_deg: np.ndarray
    true_airspeed_m_s: np.ndarray
    heading_true_deg: np.ndarray
    roll_deg: np.ndarray
    track_rate_deg_s: np.ndarray
    pair_age_s: np.ndarray
    wind_u: np.ndarray
    wind_v: np.ndarray
    kind: np.ndarray
    source: np.ndarray

    def __len__(self) -> int:
        return int(np.asarray(self.time_s).size)

    @staticmethod
    def from_columns(columns: dict[str, list]) -> AircraftStates:
        """Build from lists keyed by field name (missing float fields become NaN)."""
        n = len(columns["time_s"])
        values = {}
        for f in fields(AircraftStates):
            data = columns.get(f.name)
            if f.name in ("aircraft", "source"):
                values[f.name] = np.array(data if data is not None else [""] * n, dtype=object)
            elif f.name == "kind":
                values[f.name] = np.array(data if data is not None else [0] * n, dtype=np.int8)
            else:
                values[f.name] = (np.array(data, dtype=float) if data is not None else np.full(n, np.nan))
        return AircraftStates(**values)

    def concat(self, other: AircraftStates) -> AircraftStates:
        """Both tables, this one first."""
        return AircraftStates(**{
            f.name: np.concatenate([getattr(self, f.name), getattr(other, f.name)]) for f in fields(self)
        })

    def select(self, mask: np.ndarray) -> AircraftStates:
        """Rows where ``mask`` is true (or the given indices)."""
        return AircraftStates(**{f.name: getattr(self, f.name)[mask] for f in fields(self)})

    def winds(self) -> tuple[np.ndarray, np.ndarray]:
        """u, v of every row: reported, or by the wind triangle."""
        u, v = wind_from_triangle(self.ground_speed_m_s, self.track_deg, self.true_airspeed_m_s,
                                  self.heading_true_deg)
        reported = self.kind == KIND_REPORTED
        return np.where(reported, self.wind_u, u), np.where(reported, self.wind_v, v)


@dataclass
class ReadCounts:
    """Counters filled while reading (mutable; frozen into :class:`QCReport` at the end)."""

    lines: int = 0
    malformed: int = 0
    crc_failed: int = 0
    unverified_address: int = 0
    ambiguous_bds: int = 0
    missing_values: int = 0
    unpaired: int = 0
    short_skipped: int = 0
    unknown_columns: set[str] = field(default_factory=set)


@dataclass(frozen=True)
class QCConfig:
    """Quality-control and thinning settings (defaults and their reasons in docs/aircraft-winds.md)."""

    max_roll_deg: float = 5.0
    max_track_rate_deg_s: float = 0.5
    min_true_airspeed_m_s: float = 50.0
    max_true_airspeed_m_s: float = 320.0
    max_ground_speed_m_s: float = 400.0
    max_wind_m_s: float = 120.0
    max_pair_age_s: float = 2.0
    outlier_z: float = 5.0
    outlier_scale_floor_m_s: float = 1.0
    reference_knot_m: float = 1000.0
    heading_bias: bool = True
    heading_bias_min_rows: int = 5
    heading_bias_min_deg: float = 1.0
    heading_bias_sigmas: float = 3.0
    heading_bias_cell_s: float = 300.0
    heading_bias_cell_m: float = 300.0
    heading_bias_radius_km: float = 100.0
    heading_bias_radius_m: float = 400.0
    heading_bias_radius_s: float = 3600.0
    heading_bias_min_cells: int = 3
    reference_error_m_s: float = 3.0
    superob_time_s: float = 120.0
    superob_alt_m: float = 300.0
    superob_correlated_fraction: float = 0.5


@dataclass(frozen=True)
class QCReport:
    """Counts per reading step and QC rule. Each rejected row is counted under the first rule it fails."""

    lines_read: int = 0
    malformed_lines: int = 0
    crc_failed: int = 0
    unverified_address: int = 0
    ambiguous_bds: int = 0
    missing_values: int = 0
    unpaired: int = 0
    short_skipped: int = 0
    unknown_columns: tuple[str, ...] = ()
    rows: int = 0
    stale_pair: int = 0
    implausible_speed: int = 0
    turning: int = 0
    wind_too_strong: int = 0
    outlier: int = 0
    accepted: int = 0
    heading_bias_aircraft: int = 0
    heading_bias_rows: int = 0
    heading_bias_deg: tuple[tuple[str, float], ...] = ()
    aircraft: int = 0
    superobservations: int = 0

    def as_dict(self) -> dict:
        """Plain dict for summary.json."""
        out = asdict(self)
        out["unknown_columns"] = list(self.unknown_columns)
        out["heading_bias_deg"] = {k: round(v, 3) for k, v in self.heading_bias_deg}
        return out

    def lines(self) -> list[str]:
        """Human-readable lines for the terminal."""
        out = [
            f"read        {self.lines_read} lines: {self.malformed_lines} malformed, {self.crc_failed} bad CRC, "
            f"{self.unverified_address} unverified address, {self.ambiguous_bds} ambiguous BDS, "
            f"{self.missing_values} missing/NaN values, {self.unpaired} unpaired, "
            f"{self.short_skipped} short (DF 0/4/5/11) skipped",
        ]
        if self.unknown_columns:
            out.append(f"ignored     unknown columns: {', '.join(self.unknown_columns)}")
        out += [
            f"rows        {self.rows} aircraft states from {self.aircraft} aircraft",
            f"rejected    stale pair {self.stale_pair}, implausible speed {self.implausible_speed}, "
            f"turning {self.turning}, |wind| too strong {self.wind_too_strong}, outlier {self.outlier}",
            f"heading     bias corrected on {self.heading_bias_aircraft} aircraft "
            f"({self.heading_bias_rows} rows)",
            f"accepted    {self.accepted} rows -> {self.superobservations} super-observations",
        ]
        return out


# --------------------------------------------------------------------------------------------------------
# Report tables
# --------------------------------------------------------------------------------------------------------
KNOWN_REPORT_COLUMNS = (
    "time", "aircraft", "latitude", "longitude", "pressure_altitude_ft", "altitude_m", "ground_speed_kt",
    "track_deg", "true_airspeed_kt", "heading_deg", "heading_reference", "wind_u_m_s", "wind_v_m_s",
    "roll_deg", "track_rate_deg_s", "pair_age_s",
)


def _number(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        return math.nan
    return value


def read_report_table(path: str | Path, counts: ReadCounts, atmosphere: Atmosphere | None = None,
                      declination_resolution_deg: float = 0.02) -> AircraftStates:
    """Read a report table (CSV), streaming row by row; bad rows are counted and skipped.

    Columns: ``time`` (ISO 8601 UTC), ``aircraft``, ``latitude``, ``longitude``, ``pressure_altitude_ft`` or
    ``altitude_m`` (geometric), then either ``ground_speed_kt, track_deg, true_airspeed_kt, heading_deg,
    heading_reference`` (``true``/``magnetic``) or ``wind_u_m_s, wind_v_m_s`` (taken as they are). Optional:
    ``roll_deg``, ``track_rate_deg_s``, ``pair_age_s``. Other columns are counted and ignored.

    Raises
    ------
    InputDataError
        If a required column is missing.
    """
    path = Path(path)
    cols: dict[str, list] = {k: [] for k in (
        "time_s", "aircraft", "lat", "lon", "alt_m", "pressure_altitude_m", "ground_speed_m_s", "track_deg",
        "true_airspeed_m_s", "heading_deg", "magnetic", "roll_deg", "track_rate_deg_s", "pair_age_s",
        "wind_u", "wind_v", "kind")}
    with path.open(encoding="utf-8", newline="") as handle:
        rows = csv.reader(line for line in handle if line.strip() and not line.lstrip().startswith("#"))
        header = next(rows, None)
        if header is None:
            raise input_error(path, "header", "the file is empty",
                              "write a header line: time,aircraft,latitude,longitude,...")
        header = [h.strip() for h in header]
        index = {name: i for i, name in enumerate(header)}
        counts.unknown_columns.update(h for h in header if h and h not in KNOWN_REPORT_COLUMNS)
        for required in ("time", "aircraft", "latitude", "longitude"):
            if required not in index:
                raise input_error(path, f"column {required}", "is missing",
                                  "use the columns listed in docs/aircraft-winds.md")
        if "pressure_altitude_ft" not in index and "altitude_m" not in index:
            raise input_error(path, "column pressure_altitude_ft", "is missing (and no altitude_m)",
                              "give pressure_altitude_ft or altitude_m")
        triangle = ("ground_speed_kt", "track_deg", "true_airspeed_kt", "heading_deg")
        has_triangle = all(c in index for c in triangle)
        has_wind = "wind_u_m_s" in index and "wind_v_m_s" in index
        if not has_triangle and not has_wind:
            missing = next(c for c in triangle if c not in index)
            raise input_error(path, f"column {missing}", "is missing (and no wind_u_m_s, wind_v_m_s)",
                              "give ground_speed_kt,track_deg,true_airspeed_kt,heading_deg,heading_reference")
        if has_triangle and "heading_reference" not in index:
            raise input_error(path, "column heading_reference", "is missing",
                              "add heading_reference with 'true' or 'magnetic' on every row")

        def get(row: list[str], name: str) -> str:
            i = index.get(name)
            return row[i].strip() if i is not None and i < len(row) else ""

        for row in rows:
            counts.lines += 1
            if len(row) != len(header):
                counts.malformed += 1
                continue
            try:
                t = parse_iso(get(row, "time"))
            except ValueError:
                counts.malformed += 1
                continue
            lat, lon = _number(get(row, "latitude")), _number(get(row, "longitude"))
            alt = _number(get(row, "altitude_m"))
            palt_ft = _number(get(row, "pressure_altitude_ft"))
            aircraft = get(row, "aircraft")
            if not (math.isfinite(lat) and math.isfinite(lon) and abs(lat) <= 90) or not aircraft or (
                    not math.isfinite(alt) and not math.isfinite(palt_ft)):
                counts.missing_values += 1
                continue
            wu, wv = _number(get(row, "wind_u_m_s")), _number(get(row, "wind_v_m_s"))
            kind = KIND_REPORTED if math.isfinite(wu) and math.isfinite(wv) else KIND_DERIVED
            gs, trk = _number(get(row, "ground_speed_kt")), _number(get(row, "track_deg"))
            tas, hdg = _number(get(row, "true_airspeed_kt")), _number(get(row, "heading_deg"))
            ref = get(row, "heading_reference").lower()
            if kind == KIND_DERIVED:
                if not all(math.isfinite(x) for x in (gs, trk, tas, hdg)) or ref not in ("true", "magnetic"):
                    counts.missing_values += 1
                    continue
            cols["time_s"].append(t)
            cols["aircraft"].append(aircraft)
            cols["lat"].append(lat)
            cols["lon"].append(((lon + 180.0) % 360.0) - 180.0)
            cols["alt_m"].append(alt)
            cols["pressure_altitude_m"].append(m_from_ft(palt_ft))
            cols["ground_speed_m_s"].append(m_s_from_kt(gs))
            cols["track_deg"].append(trk)
            cols["true_airspeed_m_s"].append(m_s_from_kt(tas))
            cols["heading_deg"].append(hdg)
            cols["magnetic"].append(ref == "magnetic")
            cols["roll_deg"].append(_number(get(row, "roll_deg")))
            cols["track_rate_deg_s"].append(_number(get(row, "track_rate_deg_s")))
            age = _number(get(row, "pair_age_s"))
            cols["pair_age_s"].append(age if math.isfinite(age) else 0.0)
            cols["wind_u"].append(wu)
            cols["wind_v"].append(wv)
            cols["kind"].append(kind)
    alt = np.array(cols.pop("alt_m"), dtype=float)
    palt = np.array(cols.pop("pressure_altitude_m"), dtype=float)
    use_palt = ~np.isfinite(alt)
    if np.any(use_palt):
        alt[use_palt] = altitude_from_pressure_altitude(palt[use_palt], atmosphere)
    heading = np.array(cols.pop("heading_deg"), dtype=float)
    magnetic = np.array(cols.pop("magnetic"), dtype=bool)
    lat = np.array(cols["lat"], dtype=float)
    lon = np.array(cols["lon"], dtype=float)
    time_s = np.array(cols["time_s"], dtype=float)
    if np.any(magnetic):
        heading[magnetic] = true_from_magnetic_heading(
            heading[magnetic],
            declination_deg(lat[magnetic], lon[magnetic], np.nan_to_num(alt[magnetic]), time_s[magnetic],
                            resolution_deg=declination_resolution_deg),
        )
    cols["alt_m"] = alt
    cols["heading_true_deg"] = heading
    kind = np.array(cols["kind"], dtype=np.int8)
    cols["source"] = np.where(kind == KIND_REPORTED, "aircraft-report-wind", "aircraft-report")
    return AircraftStates.from_columns(cols)


# --------------------------------------------------------------------------------------------------------
# Quality control
# --------------------------------------------------------------------------------------------------------
def _wrap180(angle_deg: np.ndarray) -> np.ndarray:
    return (np.asarray(angle_deg) + 180.0) % 360.0 - 180.0


def track_rate_from_sequence(states: AircraftStates, max_gap_s: float = 60.0) -> np.ndarray:
    """Track rate (deg/s) of each row from its neighbours of the same aircraft (NaN if none within a gap).

    Notes
    -----
    rate_i = max(|wrap(chi_{i+1} - chi_i)| / dt, |wrap(chi_i - chi_{i-1})| / dt) over consecutive rows of one
    aircraft in time order, for gaps of at most ``max_gap_s``.
    """
    n = len(states)
    rate = np.full(n, np.nan)
    if n < 2:
        return rate
    order = np.lexsort((states.time_s, states.aircraft.astype(str)))
    ac = states.aircraft[order]
    t = states.time_s[order]
    trk = states.track_deg[order]
    dt = np.diff(t)
    same = (ac[1:] == ac[:-1]) & (dt > 0) & (dt <= max_gap_s)
    with np.errstate(invalid="ignore", divide="ignore"):
        step = np.where(same, np.abs(_wrap180(np.diff(trk))) / np.where(dt > 0, dt, 1.0), np.nan)
    sorted_rate = np.fmax(np.concatenate([step, [np.nan]]), np.concatenate([[np.nan], step]))
    rate[order] = sorted_rate
    return rate


def _hat_basis(z: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Linear B-spline (hat function) basis on ``knots``, shape (len(z), len(knots)); constant outside."""
    zc = np.clip(z, knots[0], knots[-1])
    basis = np.zeros((z.size, knots.size))
    if knots.size == 1:
        basis[:, 0] = 1.0
        return basis
    j = np.clip(np.searchsorted(knots, zc, side="right") - 1, 0, knots.size - 2)
    w = (zc - knots[j]) / (knots[j + 1] - knots[j])
    rows = np.arange(z.size)
    basis[rows, j] = 1.0 - w
    basis[rows, j + 1] = w
    return basis


# --------------------------------------------------------------------------------------------------------
# Robust statistics over a stream of chunks (exact, bounded memory)
# --------------------------------------------------------------------------------------------------------
SELECT_CAP = 1 << 20  # values held at once by the streaming median (8 MB); above it, histogram selection
SPILL_CHUNK_ROWS = 65_536  # rows held in memory / read back from a spill file per chunk


def _order_statistics(values: Callable[[], Iterable[np.ndarray]], ranks: Sequence[int],
                      cap: int | None = None) -> list[float]:
    """Exact order statistics (0-based ascending ranks) of a re-readable stream of arrays.

    Notes
    -----
    Selection by distribution counting (common practice): each pass over ``values()`` keeps the values inside
    an interval known to hold the wanted ranks, with the count of values below it. While more than ``cap``
    values fall inside, a 4096-bin histogram of the interval narrows it to the bins holding the ranks; once at
    most ``cap`` remain they are sorted. Memory is O(cap), independent of the stream's length.
    """
    cap = SELECT_CAP if cap is None else cap
    lo, hi, below = -math.inf, math.inf, 0
    r_min, r_max = min(ranks), max(ranks)
    for attempt in range(80):
        force = attempt >= 64
        kept: list[np.ndarray] = []
        n_in, vmin, vmax = 0, math.inf, -math.inf
        for chunk in values():
            c = chunk[(chunk >= lo) & (chunk <= hi)]
            if c.size == 0:
                continue
            n_in += c.size
            vmin, vmax = min(vmin, float(c.min())), max(vmax, float(c.max()))
            if n_in <= cap or force:
                kept.append(c)
            else:
                kept = []
        if vmin == vmax and n_in > 0 and not kept:
            return [vmin] * len(ranks)
        if n_in <= cap or force:
            inside = np.sort(np.concatenate(kept)) if kept else np.empty(0)
            return [float(inside[r - below]) for r in ranks]
        edges = np.linspace(vmin, vmax, 4097)
        hist = np.zeros(4096, dtype=np.int64)
        for chunk in values():
            hist += np.histogram(chunk[(chunk >= vmin) & (chunk <= vmax)], bins=edges)[0]
        cum = np.cumsum(hist)
        b1 = int(np.searchsorted(cum, r_min - below, side="right"))
        b2 = int(np.searchsorted(cum, r_max - below, side="right"))
        below += int(cum[b1 - 1]) if b1 > 0 else 0
        lo, hi = float(edges[b1]), float(edges[min(b2 + 1, 4096)])
    raise AssertionError("order statistics did not converge")  # pragma: no cover


def _stream_median_mad(values: Callable[[], Iterable[np.ndarray]], n: int,
                       cap: int | None = None) -> tuple[float, float]:
    """Median and median absolute deviation of ``n`` streamed values (exactly as numpy's median)."""
    cap = SELECT_CAP if cap is None else cap
    if n <= cap:
        both = np.concatenate(list(values()))
        med = float(np.median(both))
        return med, float(np.median(np.abs(both - med)))

    def median(source: Callable[[], Iterable[np.ndarray]]) -> float:
        if n % 2:
            return _order_statistics(source, [n // 2], cap)[0]
        a, b = _order_statistics(source, [n // 2 - 1, n // 2], cap)
        return (a + b) / 2.0

    med = median(values)
    return med, median(lambda: (np.abs(c - med) for c in values()))


# --------------------------------------------------------------------------------------------------------
# Reference profile and heading biases (fitted over re-readable chunks of rows)
# --------------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Smooth:
    """Design of the smooth reference: hat functions in altitude plus scaled east, north and time."""

    knots: np.ndarray
    lat0: float
    lon0: float
    t0: float
    scales: tuple[float, float, float]

    def offsets(self, lat: np.ndarray, lon: np.ndarray, t: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        x = (((lon - self.lon0 + 180.0) % 360.0) - 180.0) * 111_320.0 * math.cos(math.radians(self.lat0))
        return x, (lat - self.lat0) * 110_540.0, t - self.t0

    def basis(self, lat: np.ndarray, lon: np.ndarray, z: np.ndarray, t: np.ndarray) -> np.ndarray:
        x, y, tt = self.offsets(lat, lon, t)
        side = np.column_stack([x / self.scales[0], y / self.scales[1], tt / self.scales[2]])
        return np.hstack([_hat_basis(z, self.knots), side])


@dataclass(frozen=True)
class _FitRows:
    """Rows entering a reference fit: position, residual against the background, bias sensitivity."""

    lat: np.ndarray
    lon: np.ndarray
    z: np.ndarray
    t: np.ndarray
    du: np.ndarray
    dv: np.ndarray
    eu: np.ndarray
    ev: np.ndarray
    ac: np.ndarray
    derived: np.ndarray

    @staticmethod
    def build(states: AircraftStates, ac: np.ndarray, bg_u: np.ndarray, bg_v: np.ndarray,
              with_bias: bool) -> _FitRows:
        u, v = states.winds()
        keep = np.isfinite(u) & np.isfinite(v)
        derived = (states.kind == KIND_DERIVED) & with_bias
        psi = np.radians(np.where(derived, states.heading_true_deg, 0.0))
        tas = np.where(derived, states.true_airspeed_m_s, 0.0)
        # Effect of a unit bias (radians) on the derived wind: -TAS (cos psi, -sin psi).
        eu, ev = -tas * np.cos(psi), tas * np.sin(psi)
        return _FitRows(states.lat[keep], states.lon[keep], states.alt_m[keep], states.time_s[keep],
                        (u - bg_u)[keep], (v - bg_v)[keep], eu[keep], ev[keep],
                        np.asarray(ac)[keep].astype(np.intp), derived[keep])


def _huber(resid: np.ndarray, s: float) -> np.ndarray:
    r = np.abs(resid) / (1.5 * s)
    return np.where(r <= 1.0, 1.0, 1.0 / np.maximum(r, 1e-12))


def _fit_profile(
    rows: Callable[[], Iterable[_FitRows]], n_aircraft: int, knot_m: float, with_bias: bool,
    bias_prior_deg: float = 5.0, iterations: int = 40,
) -> tuple[_Smooth | None, np.ndarray, np.ndarray, dict[int, tuple[float, float, int]]]:
    """Joint robust fit of the smooth reference and per-aircraft heading biases (see fit_reference).

    ``rows()`` yields the rows in chunks; it is read once. Up to ``SPILL_CHUNK_ROWS`` rows are kept in memory,
    more go to a temporary file in a compact form (69 bytes a row) read back once per pass, so memory is one
    chunk plus O(p^2 + aircraft). Returns the design, the coefficients per component and
    ``{aircraft index: (bias_deg, standard_error_deg, n_derived_rows)}``.
    """
    kept: list[_FitRows] = []
    n_kept = 0
    with tempfile.TemporaryFile(prefix="balloonpath-fit-") as spill:
        spilled = False
        for c in rows():
            if not spilled and n_kept + c.z.size <= SPILL_CHUNK_ROWS:
                kept.append(c)
                n_kept += c.z.size
                continue
            for part in ([*kept, c] if not spilled else [c]):
                record = np.empty(part.z.size, dtype=_FIT_DTYPE)
                for name in _FIT_DTYPE.names:
                    record[name] = getattr(part, name)
                spill.write(record.tobytes())
            kept, spilled = [], True

        def cached() -> Iterable[_FitRows]:
            if not spilled:
                return kept
            return _read_fit_rows(spill)

        return _fit_profile_rows(cached, n_aircraft, knot_m, with_bias, bias_prior_deg, iterations)


_FIT_DTYPE = np.dtype([(name, "<f8") for name in ("lat", "lon", "z", "t", "du", "dv", "eu", "ev")]
                      + [("ac", "<i4"), ("derived", "?")])


def _read_fit_rows(spill: IO[bytes]) -> Iterator[_FitRows]:
    spill.seek(0)
    while data := spill.read(SPILL_CHUNK_ROWS * _FIT_DTYPE.itemsize):
        rec = np.frombuffer(data, dtype=_FIT_DTYPE)
        yield _FitRows(*(rec[name] for name in _FIT_DTYPE.names[:8]), rec["ac"].astype(np.intp),
                       rec["derived"])


def _fit_profile_rows(
    rows: Callable[[], Iterable[_FitRows]], n_aircraft: int, knot_m: float, with_bias: bool,
    bias_prior_deg: float, iterations: int,
) -> tuple[_Smooth | None, np.ndarray, np.ndarray, dict[int, tuple[float, float, int]]]:
    """The solver of :func:`_fit_profile` over re-readable chunks (``rows()`` is read once per pass)."""
    n, zmin, zmax, slat, slon, st = 0, math.inf, -math.inf, 0.0, 0.0, 0.0
    for c in rows():
        if c.z.size:
            n += c.z.size
            zmin, zmax = min(zmin, float(c.z.min())), max(zmax, float(c.z.max()))
            slat, slon, st = slat + float(np.sum(c.lat)), slon + float(np.sum(c.lon)), st + float(np.sum(c.t))
    if n == 0:
        return None, np.zeros(0), np.zeros(0), {}
    knots = np.arange(np.floor(zmin / knot_m) * knot_m, zmax + knot_m, knot_m)
    design = _Smooth(knots, slat / n, slon / n, st / n, (1.0, 1.0, 1.0))
    sums = np.zeros(3)
    for c in rows():
        sums += [float(np.sum(a)) for a in design.offsets(c.lat, c.lon, c.t)]
    means = sums / n
    squares = np.zeros(3)
    for c in rows():
        squares += [float(np.sum((a - m) ** 2)) for a, m in zip(design.offsets(c.lat, c.lon, c.t), means,
                                                                  strict=True)]
    scales = tuple(max(float(np.sqrt(s / n)), 1.0) for s in squares)
    design = _Smooth(knots, design.lat0, design.lon0, design.t0, scales)  # type: ignore[arg-type]
    p = knots.size + 3
    delta = np.zeros(n_aircraft)
    scale = 1.0
    coef_u, coef_v = np.zeros(p), np.zeros(p)
    previous: tuple[np.ndarray, np.ndarray, np.ndarray, float] | None = None
    ridge = np.eye(p) * 1e-9
    prior = math.radians(bias_prior_deg)

    def weights(c: _FitRows, basis: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        if previous is None:
            return np.ones(c.z.size), np.ones(c.z.size)
        pu, pv, pd, ps = previous
        return (_huber(c.du - basis @ pu - c.eu * pd[c.ac], ps),
                _huber(c.dv - basis @ pv - c.ev * pd[c.ac], ps))

    def residuals() -> Iterator[np.ndarray]:
        for c in rows():
            basis = design.basis(c.lat, c.lon, c.z, c.t)
            yield np.concatenate([c.du - basis @ coef_u - c.eu * delta[c.ac],
                                  c.dv - basis @ coef_v - c.ev * delta[c.ac]])

    for _ in range(iterations):
        # (1) profile given the biases: weighted least squares, per component (p columns only).
        gu, gv, hu, hv = np.zeros((p, p)), np.zeros((p, p)), np.zeros(p), np.zeros(p)
        for c in rows():
            basis = design.basis(c.lat, c.lon, c.z, c.t)
            wu, wv = weights(c, basis)
            gu += (basis.T * wu) @ basis
            gv += (basis.T * wv) @ basis
            hu += basis.T @ (wu * (c.du - c.eu * delta[c.ac]))
            hv += basis.T @ (wv * (c.dv - c.ev * delta[c.ac]))
        coef_u = np.linalg.solve(gu + ridge, hu)
        coef_v = np.linalg.solve(gv + ridge, hv)
        # (2) each aircraft's bias given the profile: 1-D weighted least squares with a ridge prior.
        if with_bias:
            num, den = np.zeros(n_aircraft), np.zeros(n_aircraft)
            for c in rows():
                basis = design.basis(c.lat, c.lon, c.z, c.t)
                wu, wv = weights(c, basis)
                ru, rv = c.du - basis @ coef_u, c.dv - basis @ coef_v
                num += np.bincount(c.ac, weights=wu * c.eu * ru + wv * c.ev * rv, minlength=n_aircraft)
                den += np.bincount(c.ac, weights=wu * c.eu * c.eu + wv * c.ev * c.ev, minlength=n_aircraft)
            delta = num / (den + (scale / prior) ** 2)
        # (3) robust scale of both components' residuals, then the Huber weights of the next pass.
        _, mad = _stream_median_mad(residuals, 2 * n)
        scale = max(1.4826 * mad, 0.3)
        previous = (coef_u, coef_v, delta, scale)
    biases: dict[int, tuple[float, float, int]] = {}
    if with_bias:
        info, count, present = np.zeros(n_aircraft), np.zeros(n_aircraft), np.zeros(n_aircraft)
        for c in rows():
            wu, wv = weights(c, design.basis(c.lat, c.lon, c.z, c.t))
            info += np.bincount(c.ac, weights=wu * c.eu * c.eu + wv * c.ev * c.ev, minlength=n_aircraft)
            count += np.bincount(c.ac, weights=c.derived.astype(float), minlength=n_aircraft)
            present += np.bincount(c.ac, minlength=n_aircraft)
        se = scale / np.sqrt(info + (scale / prior) ** 2)
        for j in np.nonzero(present)[0]:
            biases[int(j)] = (math.degrees(delta[j]), math.degrees(se[j]), int(count[j]))
    return design, coef_u, coef_v, biases


def _background_wind(states: AircraftStates, background: WindField | None
                     ) -> tuple[np.ndarray, np.ndarray] | None:
    """Background wind at the rows; None (with a warning) when it does not cover them."""
    n = len(states)
    if background is None:
        return np.zeros(n), np.zeros(n)
    try:
        bu, bv = background.wind(states.lat, states.lon, states.alt_m, states.time_s)
    except CoverageError as exc:
        warnings.warn(f"aircraft winds: background does not cover the reports ({exc}); QC uses a profile "
                      "fitted to the aircraft winds alone", DataQualityWarning, stacklevel=3)
        return None
    return (np.broadcast_to(np.asarray(bu, dtype=float), (n,)).copy(),
            np.broadcast_to(np.asarray(bv, dtype=float), (n,)).copy())


def fit_reference(
    states: AircraftStates, u: np.ndarray, v: np.ndarray, use: np.ndarray,
    background: WindField | None = None, knot_m: float = 1000.0, with_bias: bool = True,
    bias_prior_deg: float = 5.0, iterations: int = 40,
) -> tuple[np.ndarray, np.ndarray, dict[str, tuple[float, float, int]]]:
    """Reference wind at every row and per-aircraft heading biases, fitted jointly to the rows in ``use``.

    Returns ``(ref_u, ref_v, {aircraft: (bias_deg, standard_error_deg, n_rows)})``. ``u, v`` must be the
    winds of ``states`` (kept in the signature for callers; the rows' own winds are used).

    Notes
    -----
    Model (per component c = u, v; on the residual against the background when one is given):
    c_i = sum_k a_ck B_k(z_i) + g_cx x_i + g_cy y_i + g_ct t_i + e_ci, with B_k linear B-splines in altitude
    (knots every ``knot_m``), x, y local east/north offsets and t time about their means. A reported heading
    psi + delta_a rotates the air vector and changes the derived wind by -TAS delta_a (cos psi, -sin psi) to
    first order, so derived rows of aircraft a add -TAS cos(psi) delta_a to the u equation and
    +TAS sin(psi) delta_a to the v equation. Aircraft fly different headings, so profile and biases are
    jointly identifiable; a weak ridge prior (``bias_prior_deg``) keeps a lone aircraft's bias from absorbing
    the profile. Solved by block-coordinate iteratively reweighted least squares: each of ``iterations``
    passes fits the profile given the biases (a p-column weighted least squares per component), then each
    aircraft's bias given the profile (one-dimensional), then updates Huber weights (k = 1.5 robust scales;
    scale 1.4826 MAD of the residuals, at least 0.3 m/s). Memory is O(rows x p), never rows x aircraft;
    the same solver runs over chunks read from disk in :func:`derive_observations` (O(chunk x p)).
    Standard errors are scale / sqrt(sum w TAS^2 + prior), ignoring the small profile covariance.
    Aircraft magnetic tables are often out of date and flux valves drift
    ([deHaan2013], [Jacobs2014]).
    """
    del u, v
    n = len(states)
    bg = _background_wind(states, background)
    bg_u, bg_v = bg if bg is not None else (np.zeros(n), np.zeros(n))
    names, ac = np.unique(states.aircraft.astype(str), return_inverse=True)
    ac = np.asarray(ac).ravel()
    use = np.asarray(use, dtype=bool)
    chunk = _FitRows.build(states.select(use), ac[use], bg_u[use], bg_v[use], with_bias)
    design, coef_u, coef_v, found = _fit_profile(lambda: [chunk], names.size, knot_m, with_bias,
                                                 bias_prior_deg, iterations)
    if design is None:
        return bg_u, bg_v, {}
    basis = design.basis(states.lat, states.lon, states.alt_m, states.time_s)
    return bg_u + basis @ coef_u, bg_v + basis @ coef_v, {str(names[j]): b for j, b in found.items()}


# --------------------------------------------------------------------------------------------------------
# Quality control
# --------------------------------------------------------------------------------------------------------
SCREEN_RULES = ("stale_pair", "implausible_speed", "turning", "wind_too_strong")
TRACK_RATE_GAP_S = 60.0  # neighbours further apart than this give no track rate


def screen_states(states: AircraftStates, config: QCConfig | None = None,
                  track_rate_deg_s: np.ndarray | None = None) -> np.ndarray:
    """Row-local QC rules: 0 where a row passes, k where it first fails ``SCREEN_RULES[k - 1]``.

    ``track_rate_deg_s`` is the rate from consecutive rows (default: :func:`track_rate_from_sequence` on
    ``states``); a row's own BDS 5,0 rate takes precedence.
    """
    cfg = config or QCConfig()
    derived = states.kind == KIND_DERIVED
    status = np.zeros(len(states), dtype=np.int8)

    def apply(k: int, bad: np.ndarray) -> None:
        status[(status == 0) & np.asarray(bad, dtype=bool)] = k

    apply(1, derived & (states.pair_age_s > cfg.max_pair_age_s))
    with np.errstate(invalid="ignore"):
        apply(2, derived & (
            (states.true_airspeed_m_s < cfg.min_true_airspeed_m_s)
            | (states.true_airspeed_m_s > cfg.max_true_airspeed_m_s)
            | (states.ground_speed_m_s > cfg.max_ground_speed_m_s) | (states.ground_speed_m_s < 0)))
        sequence = track_rate_from_sequence(states, TRACK_RATE_GAP_S) if track_rate_deg_s is None \
            else track_rate_deg_s
        rate = np.where(np.isfinite(states.track_rate_deg_s), np.abs(states.track_rate_deg_s), sequence)
        apply(3, derived & ((np.abs(states.roll_deg) > cfg.max_roll_deg) | (rate > cfg.max_track_rate_deg_s)))
        u, v = states.winds()
        apply(4, ~np.isfinite(u) | ~np.isfinite(v) | (np.hypot(u, v) > cfg.max_wind_m_s))
    return status


class _BiasCells:
    """Running sums per (aircraft, time cell, altitude cell) for the heading-bias estimate (memory grows with
    the number of cells only; sums do not depend on the order of the chunks up to rounding)."""

    FIELDS = ("n", "ex", "ey", "ez", "t", "z", "du", "dv", "eu", "ev", "derived")

    def __init__(self, cfg: QCConfig) -> None:
        self.cfg = cfg
        self.index: dict[tuple[int, int, int], int] = {}
        self.keys: list[tuple[int, int, int]] = []
        self.sums = np.zeros((len(self.FIELDS), 0))

    def add(self, c: _FitRows) -> None:
        if c.z.size == 0:
            return
        keys = np.rec.fromarrays([c.ac.astype(np.int64), np.floor(c.t / self.cfg.heading_bias_cell_s).astype(np.int64),
                                  np.floor(c.z / self.cfg.heading_bias_cell_m).astype(np.int64)])
        unique, group = np.unique(keys, return_inverse=True)
        group = np.asarray(group).ravel()
        target = np.empty(unique.size, dtype=np.intp)
        for j, key in enumerate(unique.tolist()):
            i = self.index.get(key)
            if i is None:
                i = self.index[key] = len(self.keys)
                self.keys.append(key)
            target[j] = i
        if len(self.keys) > self.sums.shape[1]:
            grown = np.zeros((len(self.FIELDS), max(2 * self.sums.shape[1], len(self.keys), 64)))
            grown[:, :self.sums.shape[1]] = self.sums
            self.sums = grown
        lat, lon = np.radians(c.lat), np.radians(c.lon)
        columns = (np.ones(c.z.size), np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat), c.t, c.z,
                   c.du, c.dv, c.eu, c.ev, c.derived.astype(float))
        for row, x in enumerate(columns):
            self.sums[row, target] += np.bincount(group, weights=x, minlength=unique.size)

    def estimate(self, n_aircraft: int) -> dict[int, tuple[float, float, int]]:
        """``{aircraft: (bias_deg, standard_error_deg, n_cells)}`` against the other aircraft (see _qc_fit)."""
        from scipy.spatial import cKDTree

        m = len(self.keys)
        if m == 0:
            return {}
        cfg = self.cfg
        s = self.sums[:, :m]
        n = s[0]
        mean = s[1:] / n
        ac = np.array([k[0] for k in self.keys], dtype=np.intp)
        order = np.lexsort((np.array([k[2] for k in self.keys]), np.array([k[1] for k in self.keys]), ac))
        ac, mean, n = ac[order], mean[:, order], n[order]
        unit = mean[0:3] / np.linalg.norm(mean[0:3], axis=0)
        coords = np.column_stack([unit.T * 6_371.0 / cfg.heading_bias_radius_km,
                                  mean[4] / cfg.heading_bias_radius_m, mean[3] / cfg.heading_bias_radius_s])
        tree = cKDTree(coords)
        hood = tree.query_ball_point(coords, r=1.0, p=np.inf)
        d = np.vstack([mean[5], mean[6]])  # residual against the background (2, m)
        e = np.vstack([mean[7], mean[8]])  # effect of a unit bias (radians)
        delta = np.zeros(n_aircraft)
        ref = np.full((2, m), np.nan)
        for _ in range(5):
            corrected = d - e * delta[ac]
            for i, js in enumerate(hood):
                js = np.asarray(js, dtype=np.intp)
                js = js[ac[js] != ac[i]]
                if js.size:
                    ref[:, i] = corrected[:, js] @ n[js] / n[js].sum()
            have = np.isfinite(ref[0]) & (mean[9] > 0.5)
            diff = np.where(have, d - ref, 0.0)
            num = np.bincount(ac, weights=np.where(have, np.sum(e * diff, axis=0), 0.0), minlength=n_aircraft)
            den = np.bincount(ac, weights=np.where(have, np.sum(e * e, axis=0), 0.0), minlength=n_aircraft)
            delta = np.where(den > 0, num / np.where(den > 0, den, 1.0), 0.0)
        have = np.isfinite(ref[0]) & (mean[9] > 0.5)
        resid = np.where(have, d - ref - e * delta[ac], 0.0)
        cells = np.bincount(ac, weights=have.astype(float), minlength=n_aircraft)
        sq = np.bincount(ac, weights=np.sum(resid * resid, axis=0), minlength=n_aircraft)
        out: dict[int, tuple[float, float, int]] = {}
        for j in np.nonzero(cells >= max(cfg.heading_bias_min_cells, 1))[0]:
            s2 = sq[j] / max(2.0 * cells[j] - 1.0, 1.0)
            se = math.sqrt(s2 / den[j]) if den[j] > 0 else math.inf
            out[int(j)] = (math.degrees(delta[j]), math.degrees(se), int(cells[j]))
        return out


@dataclass(frozen=True)
class _QCFit:
    bias_deg: np.ndarray  # per aircraft index; 0 where not corrected
    design: _Smooth | None
    coef_u: np.ndarray
    coef_v: np.ndarray
    median: tuple[float, float]
    scale: tuple[float, float]


def _correct_heading(states: AircraftStates, ac: np.ndarray, bias_deg: np.ndarray) -> AircraftStates:
    rows = (states.kind == KIND_DERIVED) & (bias_deg[ac] != 0.0)
    if not np.any(rows):
        return states
    heading = states.heading_true_deg.copy()
    heading[rows] = (heading[rows] - bias_deg[ac[rows]]) % 360.0
    return AircraftStates(**{**{f.name: getattr(states, f.name) for f in fields(states)},
                             "heading_true_deg": heading})


def _residual(states: AircraftStates, bg_u: np.ndarray, bg_v: np.ndarray, fit: _QCFit
              ) -> tuple[np.ndarray, np.ndarray]:
    u, v = states.winds()
    ru, rv = u - bg_u, v - bg_v
    if fit.design is not None:
        basis = fit.design.basis(states.lat, states.lon, states.alt_m, states.time_s)
        ru, rv = u - (bg_u + basis @ fit.coef_u), v - (bg_v + basis @ fit.coef_v)
    return ru, rv


def _outlier(states: AircraftStates, bg_u: np.ndarray, bg_v: np.ndarray, fit: _QCFit,
             cfg: QCConfig) -> np.ndarray:
    ru, rv = _residual(states, bg_u, bg_v, fit)
    with np.errstate(invalid="ignore"):
        return ((np.abs(ru - fit.median[0]) / fit.scale[0] > cfg.outlier_z)
                | (np.abs(rv - fit.median[1]) / fit.scale[1] > cfg.outlier_z))


RowChunks = Callable[[], Iterable[tuple[AircraftStates, np.ndarray, np.ndarray, np.ndarray]]]


def _qc_fit(chunks: RowChunks, n_aircraft: int, derived_rows: np.ndarray, cfg: QCConfig) -> _QCFit:
    """Heading biases, reference and outlier statistics from the screened rows.

    ``chunks()`` yields ``(rows, aircraft index, background u, background v)`` for the rows that passed
    :func:`screen_states`; it is read once per pass (about 8 per robust iteration).

    Heading bias against the other aircraft: rows are averaged into cells (aircraft, 300 s, 300 m); each
    cell's residual d_c (against the background, or zero) is compared with the count-weighted mean residual
    of the OTHER aircraft's cells within 100 km, 400 m and 1 h (their current bias estimates removed), so
    an error of the background, shared by neighbours, cancels. Per aircraft, delta = sum e_c . (d_c - ref_c)
    / sum |e_c|^2 over its cells with neighbours (e_c = -TAS (cos psi, -sin psi), the change of the derived
    wind per radian of heading bias, [PHAK] wind triangle to first order); 5 Jacobi iterations. Standard
    error from the scatter of the cell residuals (cells, not rows, are the independent pieces). Aircraft
    with fewer than ``heading_bias_min_cells`` such cells fall back to the joint profile fit
    (:func:`_fit_profile`) with the reference's own error ``reference_error_m_s`` / TAS added to the
    standard error. Corrected when |delta| > max(heading_bias_min_deg, heading_bias_sigmas x se).
    """
    bias = np.zeros(n_aircraft)
    if cfg.heading_bias and any(np.any(s.kind == KIND_DERIVED) for s, *_ in chunks()):
        cells = _BiasCells(cfg)
        tas_sum, tas_n = np.zeros(n_aircraft), np.zeros(n_aircraft)
        for s, a, bu, bv in chunks():
            cells.add(_FitRows.build(s, a, bu, bv, True))
            d = s.kind == KIND_DERIVED
            tas_sum += np.bincount(a[d], weights=s.true_airspeed_m_s[d], minlength=n_aircraft)
            tas_n += np.bincount(a[d], minlength=n_aircraft)
        found = cells.estimate(n_aircraft)
        if any(j not in found and tas_n[j] > 0 for j in range(n_aircraft)):
            # Aircraft with no other aircraft near: the joint profile fit against the reference, whose own
            # error (reference_error_m_s, correlated along the track) adds to the standard error.
            _, _, _, alone = _fit_profile(
                lambda: (_FitRows.build(s, a, bu, bv, True) for s, a, bu, bv in chunks()),
                n_aircraft, cfg.reference_knot_m, True)
            for j, (b, se, count) in alone.items():
                if j not in found and tas_n[j] > 0:
                    se_ref = math.degrees(cfg.reference_error_m_s / (tas_sum[j] / tas_n[j]))
                    found[j] = (b, math.hypot(se, se_ref), count)
        for j, (b, se, _) in found.items():
            if derived_rows[j] >= cfg.heading_bias_min_rows and \
                    abs(b) > max(cfg.heading_bias_min_deg, cfg.heading_bias_sigmas * se):
                bias[j] = b

    def corrected() -> Iterator[tuple[AircraftStates, np.ndarray, np.ndarray, np.ndarray]]:
        for s, a, bu, bv in chunks():
            yield _correct_heading(s, a, bias), a, bu, bv

    design, coef_u, coef_v, _ = _fit_profile(
        lambda: (_FitRows.build(s, a, bu, bv, False) for s, a, bu, bv in corrected()),
        n_aircraft, cfg.reference_knot_m, False)
    fit = _QCFit(bias, design, coef_u, coef_v, (0.0, 0.0), (1.0, 1.0))
    n = sum(len(s) for s, *_ in chunks())
    median, scale = [0.0, 0.0], [1.0, 1.0]
    if n:
        for k in (0, 1):
            med, mad = _stream_median_mad(
                lambda k=k: (_residual(s, bu, bv, fit)[k] for s, _, bu, bv in corrected()), n)
            median[k], scale[k] = med, max(1.4826 * mad, cfg.outlier_scale_floor_m_s)
    return _QCFit(bias, design, coef_u, coef_v, (median[0], median[1]), (scale[0], scale[1]))


def quality_control(
    states: AircraftStates, background: WindField | None = None, config: QCConfig | None = None,
) -> tuple[AircraftStates, np.ndarray, dict]:
    """Screen aircraft states; correct per-aircraft heading bias (all rows in memory).

    Returns the states (headings corrected), a boolean accepted mask, and counts per rule plus the
    detected biases (``{"stale_pair": int, ..., "heading_bias_deg": {aircraft: deg}}``).

    Notes
    -----
    Rules in order (a row is counted under the first it fails): stale pair (pair_age_s > max_pair_age_s);
    implausible speed (TAS outside [min, max] or GS > max); turning (|roll| > max_roll_deg or track rate >
    max_track_rate_deg_s, the rate from BDS 5,0 or from consecutive rows); |wind| > max_wind_m_s; then,
    after the heading-bias correction, gross outliers: robust z = (r - median r) / max(1.4826 MAD, floor)
    of each component of the residual against the reference (:func:`fit_reference`), rejected when
    |z| > outlier_z. :func:`derive_observations` runs the same steps over time windows and a disk spill.
    """
    cfg = config or QCConfig()
    status = screen_states(states, cfg)
    counts: dict = {name: int(np.sum(status == k + 1)) for k, name in enumerate(SCREEN_RULES)}
    ok = status == 0
    names, ac = np.unique(states.aircraft.astype(str), return_inverse=True)
    ac = np.asarray(ac).ravel().astype(np.intp)
    screened = states.select(ok)
    bg = _background_wind(screened, background)
    bg_u, bg_v = bg if bg is not None else (np.zeros(len(screened)), np.zeros(len(screened)))
    derived_rows = np.bincount(ac[states.kind == KIND_DERIVED], minlength=names.size)
    fit = _qc_fit(lambda: [(screened, ac[ok], bg_u, bg_v)], names.size, derived_rows, cfg)
    corrected = _correct_heading(states, ac, fit.bias_deg)
    outlier = np.zeros(len(states), dtype=bool)
    if np.any(ok):
        outlier[ok] = _outlier(corrected.select(ok), bg_u, bg_v, fit, cfg)
    counts["outlier"] = int(outlier.sum())
    ok &= ~outlier
    biased = np.nonzero(fit.bias_deg)[0]
    counts["heading_bias_deg"] = {str(names[j]): float(fit.bias_deg[j]) for j in biased}
    counts["heading_bias_rows"] = int(derived_rows[biased].sum())
    return corrected, ok, counts


# --------------------------------------------------------------------------------------------------------
# Super-observations
# --------------------------------------------------------------------------------------------------------
class _SuperobSums:
    """Running sums per (source, aircraft, time bin, altitude bin); memory grows with the output only."""

    def __init__(self, cfg: QCConfig) -> None:
        self.cfg = cfg
        self.index: dict[tuple, int] = {}
        self.keys: list[tuple] = []
        self.sums = np.zeros((9, 0))

    def add(self, states: AircraftStates) -> None:
        if len(states) == 0:
            return
        cfg = self.cfg
        u, v = states.winds()
        keys = np.rec.fromarrays([
            states.source.astype(str), states.aircraft.astype(str),
            np.floor(states.time_s / cfg.superob_time_s).astype(np.int64),
            np.floor(states.alt_m / cfg.superob_alt_m).astype(np.int64),
        ])
        unique, group = np.unique(keys, return_inverse=True)
        group = np.asarray(group).ravel()
        target = np.empty(unique.size, dtype=np.intp)
        for j, key in enumerate(unique.tolist()):
            i = self.index.get(key)
            if i is None:
                i = self.index[key] = len(self.keys)
                self.keys.append(key)
            target[j] = i
        if len(self.keys) > self.sums.shape[1]:
            grown = np.zeros((9, max(2 * self.sums.shape[1], len(self.keys), 64)))
            grown[:, :self.sums.shape[1]] = self.sums
            self.sums = grown
        lon_r = np.radians(states.lon)
        columns = (np.ones(len(states)), states.time_s, states.lat, np.sin(lon_r), np.cos(lon_r), states.alt_m,
                   u, v, observation_sigma_m_s(states.alt_m, states.kind))
        for row, x in enumerate(columns):
            self.sums[row, target] += np.bincount(group, weights=x, minlength=unique.size)

    def result(self) -> WindObservations:
        m = len(self.keys)
        if m == 0:
            return WindObservations.empty()
        s = self.sums[:, :m]
        count = s[0]
        time_s, lat, sin_lon, cos_lon, alt, u, v, sigma_row = (s[k] / count for k in range(1, 9))
        lon = np.degrees(np.arctan2(sin_lon, cos_lon))
        rho = self.cfg.superob_correlated_fraction
        sigma = sigma_row * np.sqrt(rho + (1.0 - rho) / count)
        # "<kind>:<aircraft>": the GP treats observations of one aircraft as sharing an error (gp.platform_groups).
        source = np.array([f"{k[0]}:{k[1]}" for k in self.keys], dtype=object)
        aircraft = np.array([k[1] for k in self.keys])
        order = np.lexsort((alt, aircraft, time_s))
        return WindObservations(
            time_s[order], lat[order], ((lon + 180.0) % 360.0 - 180.0)[order], alt[order], u[order], v[order],
            sigma[order], source[order],
        )


def superobservations(states: AircraftStates, config: QCConfig | None = None) -> WindObservations:
    """Average accepted rows per (source, aircraft, time bin, altitude bin) into super-observations.

    Notes
    -----
    Each super-observation takes the mean time, position, altitude, u and v of its rows. Its error is
    sigma_sup = sigma sqrt(rho + (1 - rho) / n), with sigma the mean per-row default error
    (:func:`observation_sigma_m_s`) and rho the correlated fraction of the error variance (heading and
    calibration errors of one aircraft do not average out; rho = 0.5 is our choice, not a published value).
    Longitude is averaged as a circular mean. Output is sorted by time, then aircraft and altitude.
    """
    sums = _SuperobSums(config or QCConfig())
    sums.add(states)
    return sums.result()


# --------------------------------------------------------------------------------------------------------
# Streaming: time windows for the row-local rules, a disk spill for the file-wide fit
# --------------------------------------------------------------------------------------------------------
RAW_CHUNK_ROWS = 4096  # decoded rows handed from the raw-message reader at a time
_SPILL_FLOATS = ("time_s", "lat", "lon", "alt_m", "ground_speed_m_s", "track_deg", "true_airspeed_m_s",
                 "heading_true_deg", "roll_deg", "track_rate_deg_s", "pair_age_s", "wind_u", "wind_v")
_SPILL_DTYPE = np.dtype([(name, "<f8") for name in (*_SPILL_FLOATS, "bg_u", "bg_v")]
                        + [("ac", "<i4"), ("source", "<i2"), ("kind", "i1")])


class _WindowScreen:
    """Applies :func:`screen_states` window by window to a stream of rows in (roughly) time order.

    Windows are ``window_s`` of row time, aligned to multiples of ``window_s``. A window is screened once the
    stream's watermark (no later row will be older) passes its end by ``TRACK_RATE_GAP_S``, with the rows
    up to ``TRACK_RATE_GAP_S`` either side as neighbours for the track rate, so the rate of every row is the
    one the whole file would give. Rows are kept in arrival order (ties in time resolve as in memory).
    """

    def __init__(self, cfg: QCConfig, window_s: float,
                 sink: Callable[[AircraftStates, np.ndarray], None]) -> None:
        self.cfg, self.window_s, self.sink = cfg, float(window_s), sink
        self.pending: list[tuple[AircraftStates, np.ndarray]] = []
        self.context: tuple[AircraftStates, np.ndarray] | None = None
        self.seq = 0

    def add(self, states: AircraftStates, watermark: float) -> None:
        if len(states):
            self.pending.append((states, np.arange(self.seq, self.seq + len(states))))
            self.seq += len(states)
        while self.pending:
            tmin = min(float(s.time_s.min()) for s, _ in self.pending)
            limit = (math.floor(tmin / self.window_s) + 1.0) * self.window_s
            if watermark < limit + TRACK_RATE_GAP_S:
                return
            self._screen(limit)

    def finish(self) -> None:
        self.add(AircraftStates.from_columns({"time_s": []}), math.inf)
        self.context = None

    @staticmethod
    def _join(parts: list[tuple[AircraftStates, np.ndarray]]) -> tuple[AircraftStates, np.ndarray]:
        states = parts[0][0]
        for s, _ in parts[1:]:
            states = states.concat(s)
        return states, np.concatenate([q for _, q in parts])

    def _screen(self, limit: float) -> None:
        rows, seq = self._join(self.pending)
        take = rows.time_s < limit
        near = ~take & (rows.time_s < limit + TRACK_RATE_GAP_S)
        done_parts = ([self.context] if self.context is not None else []) + [(rows.select(take), seq[take])]
        hood, hood_seq = self._join([*done_parts, (rows.select(near), seq[near])])
        order = np.argsort(hood_seq, kind="stable")
        rate = np.empty(len(hood))
        rate[order] = track_rate_from_sequence(hood.select(order), TRACK_RATE_GAP_S)
        n_ctx = len(self.context[0]) if self.context is not None else 0
        screened = rows.select(take)
        self.sink(screened, screen_states(screened, self.cfg, rate[n_ctx:n_ctx + len(screened)]))
        done, done_seq = self._join(done_parts)
        keep = done.time_s >= limit - TRACK_RATE_GAP_S
        self.context = (done.select(keep), done_seq[keep])
        self.pending = [(rows.select(~take), seq[~take])] if np.any(~take) else []


def _is_raw_message_file(path: Path) -> bool:
    with path.open(encoding="utf-8", errors="replace") as handle:
        for line in handle:
            text = line.strip()
            if not text or text.startswith("#"):
                continue
            parts = [p.strip() for p in text.split(",")]
            if [p.lower() for p in parts] == ["time", "message"]:
                return True
            return len(parts) == 2 and len(parts[1]) in (14, 28) and all(
                c in "0123456789abcdefABCDEF" for c in parts[1])
    return False


def derive_observations(
    paths: Sequence[str | Path] | str | Path,
    background: WindField | None = None,
    *,
    atmosphere: Atmosphere | None = None,
    config: QCConfig | None = None,
    pair_window_s: float | None = None,
    reference: tuple[float, float] | None = None,
    window_s: float = 900.0,
) -> tuple[WindObservations, QCReport]:
    """Wind observations from report tables and/or raw Mode-S message files, in bounded memory.

    Parameters
    ----------
    paths : path or sequence of paths
        Report tables (CSV with a ``time,aircraft,...`` header) or raw messages (CSV ``time,message``); the
        kind is detected from the first line.
    background : WindField, optional
        Reference for the gross-outlier test (default: a smooth profile fitted to the aircraft winds). Heading
        biases are estimated against the other aircraft nearby (residuals against this reference, whose
        error the neighbours share; see :func:`_qc_fit`).
    atmosphere : Atmosphere, optional
        The day's air with actual heights for converting pressure altitude (default: standard atmosphere).
    config : QCConfig, optional
        Thresholds. ``pair_window_s`` overrides ``config.max_pair_age_s`` (raw messages: how far apart in time
        the air- and ground-velocity pieces of one wind may be).
    reference : (lat, lon), optional
        Receiver position for single-frame CPR decoding of raw messages (within 180 NM).
    window_s : float
        Length of the time windows (s of message time) in which the row-local QC rules run; only memory
        depends on it, not the result.

    Returns
    -------
    (WindObservations, QCReport)

    Raises
    ------
    InputDataError
        If no input gives a usable wind.

    Notes
    -----
    Same result as :func:`quality_control` then :func:`superobservations` on all rows at once (up to
    floating-point summation order), with memory independent of the input's length: raw messages are
    decoded as a stream; rows are screened per time window (:class:`_WindowScreen`); the rows that pass are
    written to a temporary binary file (about 130 bytes each) from which the file-wide reference and
    heading-bias fit, the outlier test and the super-observation sums read them back in chunks of
    ``SPILL_CHUNK_ROWS``. Medians are exact (:func:`_order_statistics`). Details: docs/aircraft-winds.md.
    """
    from balloonpath.winds.modes import iter_raw_message_states

    cfg = config or QCConfig()
    if pair_window_s is not None:
        cfg = QCConfig(**{**asdict(cfg), "max_pair_age_s": float(pair_window_s)})
    if not (math.isfinite(window_s) and window_s > 0):
        raise input_error(None, "window_s", f"is {window_s}", "give a positive window length in seconds")
    if isinstance(paths, str | Path):
        paths = [paths]
    paths = [Path(p) for p in paths]
    if not paths:
        raise input_error(None, "inputs", "no input files were given", "name report tables or message files")
    counts = ReadCounts()
    names: dict[str, int] = {}
    sources: dict[str, int] = {}
    derived_rows: list[int] = []
    rules = np.zeros(len(SCREEN_RULES), dtype=np.int64)
    tally = {"rows": 0, "screened": 0}
    background_ok = [background is not None]

    with tempfile.TemporaryFile(prefix="balloonpath-aircraft-") as spill:

        def sink(states: AircraftStates, status: np.ndarray) -> None:
            ac = np.array([names.setdefault(a, len(names)) for a in states.aircraft.astype(str).tolist()],
                          dtype=np.int64)
            derived_rows.extend([0] * (len(names) - len(derived_rows)))
            per_aircraft = np.bincount(ac[states.kind == KIND_DERIVED], minlength=len(names))
            for j in np.nonzero(per_aircraft)[0].tolist():
                derived_rows[j] += int(per_aircraft[j])
            tally["rows"] += len(states)
            rules[:] += np.bincount(status, minlength=len(SCREEN_RULES) + 1)[1:]
            ok = status == 0
            if not np.any(ok):
                return
            good = states.select(ok)
            record = np.zeros(len(good), dtype=_SPILL_DTYPE)
            for name in _SPILL_FLOATS:
                record[name] = getattr(good, name)
            if background_ok[0]:
                bg = _background_wind(good, background)
                if bg is None:
                    background_ok[0] = False
                else:
                    record["bg_u"], record["bg_v"] = bg
            record["ac"] = ac[ok]
            record["source"] = [sources.setdefault(s, len(sources)) for s in good.source.astype(str).tolist()]
            record["kind"] = good.kind
            spill.write(record.tobytes())
            tally["screened"] += len(good)

        screen = _WindowScreen(cfg, window_s, sink)
        for path in paths:
            if _is_raw_message_file(path):
                parts = iter_raw_message_states(path, counts, atmosphere=atmosphere, reference=reference,
                                                chunk_rows=RAW_CHUNK_ROWS)
            else:
                table = read_report_table(path, counts, atmosphere=atmosphere)
                parts = iter([(table, math.inf)])
            for part, watermark in parts:
                screen.add(part.select(np.isfinite(part.alt_m)), watermark)
            screen.finish()  # the track rate looks at neighbours within one file
        if counts.unknown_columns:
            warnings.warn(f"aircraft reports: ignored unknown columns {', '.join(sorted(counts.unknown_columns))}",
                          DataQualityWarning, stacklevel=2)
        skipped = counts.malformed + counts.crc_failed + counts.missing_values
        if skipped:
            warnings.warn(f"aircraft reports: skipped {counts.malformed} malformed lines, {counts.crc_failed} "
                          f"with a bad CRC and {counts.missing_values} with missing or NaN values",
                          DataQualityWarning, stacklevel=2)
        label = ", ".join(p.name for p in paths)
        if tally["rows"] == 0:
            raise input_error(label, "rows", f"no usable wind in {counts.lines} lines",
                              "give rows with ground speed, track, true airspeed and heading (or a wind), or "
                              "raw messages with airborne velocity and BDS 5,0/6,0 replies", cls=InputDataError)
        name_list = np.array(list(names), dtype=object)
        source_list = np.array(list(sources), dtype=object)
        use_background = background_ok[0]

        def chunks() -> Iterator[tuple[AircraftStates, np.ndarray, np.ndarray, np.ndarray]]:
            spill.seek(0)
            while True:
                data = spill.read(SPILL_CHUNK_ROWS * _SPILL_DTYPE.itemsize)
                if not data:
                    return
                rec = np.frombuffer(data, dtype=_SPILL_DTYPE)
                ac = rec["ac"].astype(np.intp)
                columns = {name: rec[name] for name in _SPILL_FLOATS}
                states = AircraftStates(**columns, aircraft=name_list[ac], kind=rec["kind"],
                                        source=source_list[rec["source"]])
                zero = np.zeros(rec.size)
                yield (states, ac, rec["bg_u"] if use_background else zero,
                       rec["bg_v"] if use_background else zero)

        fit = _qc_fit(chunks, len(names), np.asarray(derived_rows), cfg)
        sums = _SuperobSums(cfg)
        outliers = 0
        for states, ac, bg_u, bg_v in chunks():
            corrected = _correct_heading(states, ac, fit.bias_deg)
            bad = _outlier(corrected, bg_u, bg_v, fit, cfg)
            outliers += int(bad.sum())
            sums.add(corrected.select(~bad))
    accepted = tally["screened"] - outliers
    if accepted == 0:
        raise input_error(label, "rows", f"all {tally['rows']} aircraft states failed quality control",
                          "check units (knots, degrees) and heading_reference, or loosen [winds] QC settings")
    obs = sums.result()
    biased = np.nonzero(fit.bias_deg)[0]
    report = QCReport(
        lines_read=counts.lines, malformed_lines=counts.malformed, crc_failed=counts.crc_failed,
        unverified_address=counts.unverified_address, ambiguous_bds=counts.ambiguous_bds,
        missing_values=counts.missing_values, unpaired=counts.unpaired, short_skipped=counts.short_skipped,
        unknown_columns=tuple(sorted(counts.unknown_columns)), rows=tally["rows"],
        stale_pair=int(rules[0]), implausible_speed=int(rules[1]), turning=int(rules[2]),
        wind_too_strong=int(rules[3]), outlier=outliers, accepted=accepted,
        heading_bias_aircraft=int(biased.size),
        heading_bias_rows=int(sum(derived_rows[j] for j in biased)),
        heading_bias_deg=tuple(sorted((str(name_list[j]), float(fit.bias_deg[j])) for j in biased)),
        aircraft=len(names), superobservations=len(obs),
    )
    return obs, report


__all__ = [
    "AircraftStates", "QCConfig", "QCReport", "ReadCounts", "SCREEN_RULES", "altitude_from_pressure_altitude",
    "derive_observations", "fit_reference", "heading_and_ground_speed", "observation_sigma_m_s",
    "quality_control", "read_report_table", "screen_states", "superobservations", "uv_from_direction_speed",
    "wind_from_triangle",
]
