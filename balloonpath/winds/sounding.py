"""Sounding tables: one or several vertical wind profiles as a ``WindField``.

File format (our own, documented in ``docs/winds.md``): a CSV table with a header row; lines
starting with ``#`` are comments, and comment lines of the form ``# key = value`` before the header
carry the sounding's site and time (``site_latitude``, ``site_longitude``, ``time`` in ISO 8601 UTC,
optionally ``site_elevation_m``).

Columns (order free, unknown columns ignored):

- vertical: ``altitude_m`` (geometric, above mean sea level) or ``pressure_hpa`` (heights then from
  the hypsometric equation with the sounding's temperature, or from USSA 1976 when no temperature is
  given);
- wind: ``wind_direction_deg`` (FROM, degrees true, [WMO8]) with ``wind_speed_m_s`` or
  ``wind_speed_kt``, or ``u_m_s`` with ``v_m_s``;
- optional: ``temperature_c``, ``dewpoint_c`` (and ``pressure_hpa`` beside ``altitude_m``).

An empty cell, ``nan`` or ``na`` is a missing value; rows without wind or height are skipped with a
warning.

References
----------
[WMO8] WMO-No. 8, Guide to Instruments and Methods of Observation: wind direction is the
    direction FROM which the wind blows, degrees clockwise from true north.
[WH2006] J. M. Wallace & P. V. Hobbs, Atmospheric Science: An Introductory Survey, 2nd ed., Academic
    Press 2006, §3.2: hypsometric equation Z2 - Z1 = (Rd / g0) Tv_mean ln(p1 / p2) (eq. 3.29) and
    virtual temperature Tv = T / (1 - (e / p)(1 - eps)), eps = 0.622 (eq. 3.16) (from memory).
[Bolton1980] D. Bolton, "The computation of equivalent potential temperature", Mon. Wea. Rev.
    108:1046-1053 (1980), eq. 10: e(Td) = 6.112 exp(17.67 Td / (Td + 243.5)) hPa, Td in deg C (from
    memory).
[DWD-CDC] Deutscher Wetterdienst, Climate Data Center: high-resolution radiosonde data (column names
    STATIONS_ID, BEZUGSDATUM_SYNOP, MESSZEITPUNKT, AE_GPM, AE_P, AE_TT, AE_TD, AE_FF, AE_DD, ...).
"""

from __future__ import annotations

import csv
import io
import warnings
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from balloonpath.atmosphere import (
    G0,
    R_AIR,
    SoundingAtmosphere,
    altitude_from_pressure,
    geometric_from_geopotential,
    geopotential_from_geometric,
)
from balloonpath.errors import DataQualityWarning, PhysicsError, input_error
from balloonpath.timeutil import parse_iso
from balloonpath.track import FlownTrack
from balloonpath.units import k_from_c, m_s_from_kt, pa_from_hpa
from balloonpath.winds.field import (
    Coverage,
    CoveragePolicy,
    check_coverage,
    uv_from_direction_speed,
)

#: Below a sounding's lowest level its lowest wind is held silently down to this many metres lower
#: (a launch
#: site slightly below the first reported level, or the first level reported a little above the
#: ground).
HOLD_BELOW_M = 500.0

#: Inverse-distance weights use max(d^2, this) so that a point at a site (within 1 m) takes that
#: site's wind.
_MIN_DISTANCE2_M2 = 1.0
_EARTH_RADIUS_M = 6_371_008.8  # mean Earth radius (IUGG), for inverse-distance weights only
_EPSILON = 0.622  # Rd / Rv, [WH2006]

_MISSING = {"", "nan", "na", "n/a"}
_HEADER_KEYS = ("site_latitude", "site_longitude", "time", "site_elevation_m")


@dataclass(frozen=True)
class Sounding:
    """One vertical profile, levels sorted by strictly increasing geometric altitude.

    Attributes
    ----------
    alt_m : numpy.ndarray
        Geometric altitude above mean sea level, m.
    u, v : numpy.ndarray
        Wind components (east, north), m/s.
    temperature_k, pressure_pa : numpy.ndarray
        Temperature (K) and pressure (Pa) per level; NaN where absent.
    lat, lon : float or None
        Site, degrees (None when neither the file nor the caller gave it).
    time_s : float or None
        Observation time, POSIX seconds UTC (None when not given).
    path : str or None
        The file it was read from.
    dewpoint_k : numpy.ndarray or None
        Dew point (K) per level, NaN where absent; None when the file has no dew point.
    """

    alt_m: np.ndarray
    u: np.ndarray
    v: np.ndarray
    temperature_k: np.ndarray
    pressure_pa: np.ndarray
    lat: float | None
    lon: float | None
    time_s: float | None
    path: str | None
    dewpoint_k: np.ndarray | None = None

    @property
    def has_thermo(self) -> bool:
        """True when at least two levels have both temperature and pressure."""
        good = np.isfinite(self.temperature_k) & np.isfinite(self.pressure_pa)
        return int(good.sum()) >= 2

    def wind_at(self, alt_m: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
        """u, v linearly interpolated in altitude (end values held outside the profile)."""
        z = np.asarray(alt_m, dtype=float)
        return np.interp(z, self.alt_m, self.u), np.interp(z, self.alt_m, self.v)


def _wrap_lon(lon: np.ndarray | float) -> np.ndarray:
    """Longitude in [-180, 180); values already inside are returned unchanged."""
    x = np.asarray(lon, dtype=float)
    inside = (x >= -180.0) & (x < 180.0)
    return np.where(inside, x, (x + 180.0) % 360.0 - 180.0)


# ----------------------------------------------------------------------------------------- physics
def vapour_pressure_pa(dewpoint_k: np.ndarray | float) -> np.ndarray:
    """Water-vapour pressure (Pa) from the dew point.

    Notes
    -----
    [Bolton1980] eq. 10: e = 6.112 exp(17.67 Td / (Td + 243.5)) hPa with Td in deg C (accurate to
    0.1 % between -35 and +35 deg C).
    """
    td_c = np.asarray(dewpoint_k, dtype=float) - 273.15
    return 611.2 * np.exp(17.67 * td_c / (td_c + 243.5))


def virtual_temperature_k(
    temperature_k: np.ndarray | float,
    pressure_pa: np.ndarray | float,
    dewpoint_k: np.ndarray | float,
) -> np.ndarray:
    """Virtual temperature (K): Tv = T / (1 - (e / p)(1 - eps)), eps = 0.622 ([WH2006] eq. 3.16).

    Where the dew point is NaN the (dry) temperature is returned.
    """
    t = np.asarray(temperature_k, dtype=float)
    p = np.asarray(pressure_pa, dtype=float)
    e = vapour_pressure_pa(dewpoint_k)
    tv = t / (1.0 - (e / p) * (1.0 - _EPSILON))
    return np.where(np.isfinite(tv), tv, t)


def hypsometric_heights_m(
    pressure_pa: np.ndarray, temperature_k: np.ndarray, base_alt_m: float
) -> np.ndarray:
    """Geometric altitudes of pressure levels by integrating the hypsometric equation upward.

    Parameters
    ----------
    pressure_pa : numpy.ndarray
        Pressures, strictly decreasing (the first level is the lowest).
    temperature_k : numpy.ndarray
        (Virtual) temperature at each level, K.
    base_alt_m : float
        Geometric altitude of the first level, m.

    Returns
    -------
    numpy.ndarray
        Geometric altitude of each level, m.

    Notes
    -----
    Between levels i and i+1, with the temperature taken linear in ln p, the geopotential thickness
    is exactly dH = (R / g0) (T_i + T_{i+1}) / 2 ln(p_i / p_{i+1}) ([WH2006] eq. 3.29, with R =
    R*/M0 of
    [NOAA1976] and g0 = 9.80665 m s-2, so that H is in geopotential metres); geopotential is
    converted to geometric altitude with Z = r0 H / (r0 - H) ([NOAA1976] eq. 18).
    """
    p = np.asarray(pressure_pa, dtype=float)
    t = np.asarray(temperature_k, dtype=float)
    dh = (R_AIR / G0) * 0.5 * (t[1:] + t[:-1]) * np.log(p[:-1] / p[1:])
    h0 = float(geopotential_from_geometric(base_alt_m))
    h = h0 + np.concatenate([[0.0], np.cumsum(dh)])
    return geometric_from_geopotential(h)


# ------------------------------------------------------------------------------------------ reader
def _parse_header_value(path: Path, line_no: int, key: str, value: str) -> float:
    if key == "time":
        try:
            return parse_iso(value)
        except ValueError as exc:
            raise input_error(
                path,
                f"line {line_no}: time",
                f"'{value}' is not an ISO 8601 UTC time ({exc})",
                "write e.g. '# time = 2027-05-14T12:00:00Z'",
            ) from None
    try:
        number = float(value)
    except ValueError:
        raise input_error(
            path,
            f"line {line_no}: {key}",
            f"'{value}' is not a number",
            f"write e.g. '# {key} = 38.6'",
        ) from None
    limits = {
        "site_latitude": (-90, 90),
        "site_longitude": (-180, 360),
        "site_elevation_m": (-450, 9000),
    }
    low, high = limits[key]
    if not (low <= number <= high) or not np.isfinite(number):
        raise input_error(
            path,
            f"line {line_no}: {key}",
            f"{number} is outside {low}..{high}",
            "check the header value",
        )
    return number


def _cell(path: Path, line_no: int, column: str, text: str, low: float, high: float) -> float:
    cleaned = text.strip()
    if cleaned.lower() in _MISSING:
        return np.nan
    try:
        value = float(cleaned)
    except ValueError:
        raise input_error(
            path,
            f"line {line_no}: column {column}",
            f"'{cleaned}' is not a number",
            "write a number, or leave the cell empty for a missing value",
        ) from None
    if not (low <= value <= high):
        raise input_error(
            path,
            f"line {line_no}: column {column}",
            f"{value:g} is outside {low:g}..{high:g}",
            "check the value and the column's unit",
        )
    return value


# Allowed ranges of each known column (units of the column name).
_COLUMN_RANGES = {
    "altitude_m": (-500.0, 60_000.0),
    "pressure_hpa": (0.1, 1_100.0),
    "wind_direction_deg": (0.0, 360.0),
    "wind_speed_m_s": (0.0, 200.0),
    "wind_speed_kt": (0.0, 390.0),
    "u_m_s": (-200.0, 200.0),
    "v_m_s": (-200.0, 200.0),
    "temperature_c": (-120.0, 60.0),
    "dewpoint_c": (-150.0, 60.0),
}


def read_sounding(
    path: str | Path,
    site_lat: float | None = None,
    site_lon: float | None = None,
    time_s: float | None = None,
) -> Sounding:
    """Read a sounding table (format in the module docstring and ``docs/winds.md``).

    Parameters
    ----------
    path : str or Path
        The CSV file.
    site_lat, site_lon : float, optional
        The site, degrees; when given they override the file's ``# site_latitude`` / ``#
        site_longitude``.
    time_s : float, optional
        Observation time, POSIX seconds UTC; overrides the file's ``# time``.

    Returns
    -------
    Sounding
        Levels sorted by increasing geometric altitude, u and v in m/s.

    Raises
    ------
    InputDataError
        Naming the file, the line and the column, for unreadable cells, missing columns, values out
        of range and soundings with fewer than two usable levels.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise input_error(
            path, "file", "is not UTF-8 text", "save the table as UTF-8 CSV"
        ) from None
    header: dict[str, float] = {}
    columns: list[str] | None = None
    rows: list[tuple[int, list[str]]] = []
    for line_no, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            body = stripped.lstrip("#").strip()
            if columns is None and "=" in body:
                key, _, value = body.partition("=")
                key = key.strip().lower()
                if key in _HEADER_KEYS:
                    header[key] = _parse_header_value(path, line_no, key, value.strip())
            continue
        cells = next(csv.reader(io.StringIO(line)))
        if columns is None:
            columns = [c.strip().lower() for c in cells]
            continue
        if len(cells) != len(columns):
            raise input_error(
                path,
                f"line {line_no}",
                f"has {len(cells)} cells but the header has {len(columns)}",
                "give every row one cell per header column",
            )
        rows.append((line_no, cells))
    if columns is None:
        raise input_error(
            path, "header", "no header row found", "start the table with a row of column names"
        )

    has = set(columns)
    if "altitude_m" not in has and "pressure_hpa" not in has:
        raise input_error(
            path,
            "header",
            "has neither altitude_m nor pressure_hpa",
            "add a column altitude_m (geometric, m) or pressure_hpa",
        )
    if {"u_m_s", "v_m_s"} <= has:
        wind_mode = "uv"
    elif "wind_direction_deg" in has and ({"wind_speed_m_s", "wind_speed_kt"} & has):
        wind_mode = "dir_speed"
    else:
        raise input_error(
            path,
            "header",
            "has no wind columns",
            "add wind_direction_deg with wind_speed_m_s (or wind_speed_kt), or u_m_s with v_m_s",
        )

    wanted = [c for c in _COLUMN_RANGES if c in has]
    index = {c: columns.index(c) for c in wanted}
    data = {c: np.full(len(rows), np.nan) for c in wanted}
    for r, (line_no, cells) in enumerate(rows):
        for c in wanted:
            low, high = _COLUMN_RANGES[c]
            data[c][r] = _cell(path, line_no, c, cells[index[c]], low, high)
    line_numbers = np.array([ln for ln, _ in rows], dtype=int)

    if wind_mode == "uv":
        u, v = data["u_m_s"], data["v_m_s"]
    else:
        if "wind_speed_m_s" in data:
            speed = data["wind_speed_m_s"]
        else:
            speed = np.asarray(m_s_from_kt(data["wind_speed_kt"]), dtype=float)
        u, v = uv_from_direction_speed(data["wind_direction_deg"], speed)
    nan = np.full(len(rows), np.nan)
    temperature = np.asarray(k_from_c(data.get("temperature_c", nan)), dtype=float)
    dewpoint = (
        np.asarray(k_from_c(data["dewpoint_c"]), dtype=float) if "dewpoint_c" in data else None
    )
    pressure = np.asarray(pa_from_hpa(data.get("pressure_hpa", nan)), dtype=float)

    vertical = "altitude_m" if "altitude_m" in data else "pressure_hpa"
    usable = np.isfinite(u) & np.isfinite(v) & np.isfinite(data[vertical])
    if not np.all(usable):
        skipped = line_numbers[~usable]
        warnings.warn(
            f"{path.name}: skipped {skipped.size} row(s) without wind or {vertical} "
            f"(first at line {skipped[0]})",
            DataQualityWarning,
            stacklevel=2,
        )
    keep = usable
    u, v, temperature, pressure = u[keep], v[keep], temperature[keep], pressure[keep]
    dewpoint = dewpoint[keep] if dewpoint is not None else None
    lines_kept = line_numbers[keep]

    if vertical == "altitude_m":
        alt = data["altitude_m"][keep]
    else:
        alt = _heights_from_pressure(
            path, pressure, temperature, dewpoint, header.get("site_elevation_m")
        )

    if alt.size < 2:
        raise input_error(
            path,
            vertical,
            f"has {alt.size} usable level(s); a sounding needs at least two",
            "give winds on two or more levels (one level cannot be interpolated in altitude)",
        )
    order = np.argsort(alt, kind="stable")
    alt, u, v, temperature, pressure = (
        alt[order],
        u[order],
        v[order],
        temperature[order],
        pressure[order],
    )
    dewpoint = dewpoint[order] if dewpoint is not None else None
    lines_kept = lines_kept[order]
    distinct = np.concatenate([[True], np.diff(alt) > 0])
    if not np.all(distinct):
        warnings.warn(
            f"{path.name}: {vertical}: {int((~distinct).sum())} level(s) repeat an altitude "
            f"already given (first at line {lines_kept[~distinct][0]}); the first of each is kept",
            DataQualityWarning,
            stacklevel=2,
        )
        alt, u, v, temperature, pressure = (a[distinct] for a in (alt, u, v, temperature, pressure))
        dewpoint = dewpoint[distinct] if dewpoint is not None else None
        if alt.size < 2:
            raise input_error(
                path,
                vertical,
                "has fewer than two distinct levels",
                "give winds on two or more different altitudes",
            )

    lat = site_lat if site_lat is not None else header.get("site_latitude")
    lon = site_lon if site_lon is not None else header.get("site_longitude")
    if lon is not None:
        lon = float(_wrap_lon(lon))
    when = time_s if time_s is not None else header.get("time")
    return Sounding(
        alt_m=alt,
        u=u,
        v=v,
        temperature_k=temperature,
        pressure_pa=pressure,
        lat=None if lat is None else float(lat),
        lon=lon,
        time_s=None if when is None else float(when),
        path=str(path),
        dewpoint_k=dewpoint,
    )


def _heights_from_pressure(
    path: Path,
    pressure_pa: np.ndarray,
    temperature_k: np.ndarray,
    dewpoint_k: np.ndarray | None,
    site_elevation_m: float | None,
) -> np.ndarray:
    """Geometric altitudes of a pressure-only sounding (hypsometric, else USSA 1976)."""
    if pressure_pa.size == 0:
        return pressure_pa.copy()
    order = np.argsort(-pressure_pa, kind="stable")
    p = pressure_pa[order]
    if np.any(np.diff(p) == 0):
        raise input_error(
            path,
            "pressure_hpa",
            "repeats a pressure level",
            "give each pressure level once",
        )
    t = temperature_k[order]
    if site_elevation_m is None:
        try:
            base = float(altitude_from_pressure(p[0]))
        except PhysicsError:
            raise input_error(
                path,
                "pressure_hpa",
                f"{p[0] / 100:g} hPa is outside the standard atmosphere",
                "check the pressure column (hPa)",
            ) from None
    else:
        base = float(site_elevation_m)
    finite_t = np.isfinite(t)
    if not np.any(finite_t):
        heights = altitude_from_pressure(p)
        if site_elevation_m is not None:
            heights = heights - heights[0] + base
    else:
        logp = np.log(p)
        # Fill missing temperatures linearly in ln p (np.interp needs increasing x: use -ln p).
        t_filled = np.interp(-logp, -logp[finite_t], t[finite_t])
        if dewpoint_k is not None:
            t_filled = virtual_temperature_k(t_filled, p, dewpoint_k[order])
        heights = hypsometric_heights_m(p, t_filled, base)
    out = np.empty_like(heights)
    out[order] = heights
    return out


# ----------------------------------------------------------------------------- DWD radiosonde
_DWD_COLUMNS = (
    "BEZUGSDATUM_SYNOP",
    "MESSZEITPUNKT",
    "AE_GB_POS",
    "AE_GL_POS",
    "AE_GPM",
    "AE_P",
    "AE_TT",
    "AE_TD",
    "AE_FF",
    "AE_DD",
)


def read_dwd_highres(path: str | Path) -> tuple[Sounding, FlownTrack]:
    """Read a DWD high-resolution radiosonde file ([DWD-CDC]): sounding and flown track.

    Parameters
    ----------
    path : str or Path
        CSV with DWD's column names, separated by ``,`` or ``;`` (cells may be padded with spaces);
        ``-999`` marks a missing value.

    Returns
    -------
    (Sounding, FlownTrack)
        The sounding: winds from ``AE_FF`` (m/s) and ``AE_DD`` (FROM, degrees), geometric altitude
        from the geopotential height ``AE_GPM`` by Z = r0 H / (r0 - H) ([NOAA1976] eq. 18),
        temperature, dew point and pressure; site = launch position (first row), time = nominal time
        ``BEZUGSDATUM_SYNOP``. Levels are the rows whose altitude exceeds every earlier row's (the
        sonde's strictly rising envelope), so brief pendulum or descent episodes do not make the
        profile multivalued.
        The track: every row with a position and height, time = nominal time + ``MESSZEITPUNKT``
        (seconds since launch). The file holds no launch time, so track times are offset from the
        real clock by the difference between launch and nominal time (launches precede nominal time
        by up to about an hour).

    Raises
    ------
    InputDataError
        For missing columns, unreadable cells, or fewer than two usable levels.
    """
    path = Path(path)
    text = path.read_text(encoding="latin-1")
    lines = [ln for ln in text.splitlines() if ln.strip()]
    if not lines:
        raise input_error(
            path, "file", "is empty", "give a DWD high-resolution radiosonde CSV file"
        )
    sep = ";" if lines[0].count(";") > lines[0].count(",") else ","
    columns = [c.strip() for c in lines[0].split(sep)]
    missing = [c for c in _DWD_COLUMNS if c not in columns]
    if missing:
        raise input_error(
            path,
            f"column {missing[0]}",
            "is missing from the header",
            "give the DWD high-resolution radiosonde file with its original header",
        )
    idx = {c: columns.index(c) for c in _DWD_COLUMNS}
    n = len(lines) - 1
    values = {c: np.full(n, np.nan) for c in _DWD_COLUMNS}
    for r, line in enumerate(lines[1:]):
        cells = line.split(sep)
        if len(cells) < len(columns) - 1:  # the trailing 'eor' cell may be absent
            raise input_error(
                path,
                f"line {r + 2}",
                f"has {len(cells)} cells but the header has {len(columns)}",
                "give the file as downloaded",
            )
        for c in _DWD_COLUMNS:
            cell = cells[idx[c]].strip()
            try:
                value = float(cell)
            except ValueError:
                raise input_error(
                    path,
                    f"line {r + 2}: column {c}",
                    f"'{cell}' is not a number",
                    "give the file as downloaded",
                ) from None
            values[c][r] = np.nan if value == -999 else value
    nominal = values["BEZUGSDATUM_SYNOP"][0]
    if not np.isfinite(nominal):
        raise input_error(
            path, "line 2: column BEZUGSDATUM_SYNOP", "is missing", "give the file as downloaded"
        )
    stamp = f"{int(nominal):010d}"
    try:
        moment = datetime(
            int(stamp[:4]), int(stamp[4:6]), int(stamp[6:8]), int(stamp[8:10]), tzinfo=UTC
        )
    except ValueError:
        raise input_error(
            path,
            "column BEZUGSDATUM_SYNOP",
            f"'{stamp}' is not a YYYYMMDDHH time",
            "give the file as downloaded",
        ) from None
    t_nominal = moment.timestamp()

    alt = geometric_from_geopotential(values["AE_GPM"])
    lat, lon = values["AE_GB_POS"], values["AE_GL_POS"]
    secs = values["MESSZEITPUNKT"]
    on_track = np.isfinite(alt) & np.isfinite(lat) & np.isfinite(lon) & np.isfinite(secs)
    track = FlownTrack(
        time_s=t_nominal + secs[on_track],
        lat=lat[on_track],
        lon=_wrap_lon(lon[on_track]),
        alt_m=alt[on_track],
        source=f"{path.name} (DWD high-resolution radiosonde)",
    )

    has_wind = np.isfinite(alt) & np.isfinite(values["AE_FF"]) & np.isfinite(values["AE_DD"])
    rows = np.flatnonzero(has_wind)
    if rows.size:
        running_max = np.maximum.accumulate(alt[rows])
        rising = np.concatenate([[True], alt[rows][1:] > running_max[:-1]])
        rows = rows[rising]
    if rows.size < 2:
        raise input_error(
            path,
            "AE_FF/AE_DD",
            f"has {rows.size} usable wind level(s)",
            "give a file with a wind profile",
        )
    u, v = uv_from_direction_speed(values["AE_DD"][rows], values["AE_FF"][rows])
    first = int(np.flatnonzero(on_track)[0]) if np.any(on_track) else int(rows[0])
    sounding = Sounding(
        alt_m=alt[rows],
        u=u,
        v=v,
        temperature_k=np.asarray(k_from_c(values["AE_TT"][rows]), dtype=float),
        pressure_pa=np.asarray(pa_from_hpa(values["AE_P"][rows]), dtype=float),
        lat=float(lat[first]),
        lon=float(_wrap_lon(lon[first])),
        time_s=t_nominal,
        path=str(path),
        dewpoint_k=np.asarray(k_from_c(values["AE_TD"][rows]), dtype=float),
    )
    return sounding, track


# -------------------------------------------------------------------------------------- field
class SoundingField:
    """Winds from one or several soundings, a :class:`~balloonpath.winds.field.WindField`.

    Scheme (``docs/winds.md``, "Several soundings"):

    - vertically, u and v of each sounding are interpolated linearly in geometric altitude (never
      direction and speed); below a sounding's lowest level its lowest wind is held, above its top
      its top wind;
    - one sounding: the wind is constant in time and horizontally;
    - soundings at one site (same latitude and longitude to 1e-4 deg) are interpolated linearly in
      time between the two nearest observation times; before the first and after the last the
      nearest is held;
    - several sites are combined by inverse-distance-squared weights (Shepard's method) on the local
      equirectangular distance; a point within 1 m of a site takes that site's wind.

    Coverage: altitude from ``HOLD_BELOW_M`` (500 m) below the lowest level of any sounding to the
    highest top; latitude, longitude and time are unbounded (the nearest data are held). Outside the
    altitude range ``outside`` decides: ``"error"`` raises
    :class:`~balloonpath.errors.CoverageError`, ``"hold"`` holds the edge value with a
    :class:`~balloonpath.errors.CoverageWarning`.

    Parameters
    ----------
    soundings : list of Sounding
        At least one; with several sites each needs ``lat`` and ``lon``.
    outside : {"error", "hold"}
        Coverage policy.
    """

    def __init__(self, soundings: list[Sounding], outside: CoveragePolicy = "error") -> None:
        if not soundings:
            raise input_error(
                None, "[winds] sounding", "no sounding given", "give one or more sounding files"
            )
        if outside not in ("error", "hold"):
            raise input_error(
                None, "[winds] outside", f"'{outside}' is not error or hold", "use error or hold"
            )
        self.soundings = list(soundings)
        self.outside: CoveragePolicy = outside
        self._levels = np.unique(np.concatenate([s.alt_m for s in self.soundings]))
        self._u = np.stack([np.interp(self._levels, s.alt_m, s.u) for s in self.soundings])
        self._v = np.stack([np.interp(self._levels, s.alt_m, s.v) for s in self.soundings])
        tops = np.array([s.alt_m[-1] for s in self.soundings])
        bottoms = np.array([s.alt_m[0] for s in self.soundings])
        self._coverage = Coverage(
            alt_min_m=float(bottoms.min() - HOLD_BELOW_M), alt_max_m=float(tops.max())
        )
        self._sites: list[tuple[float, float]] = []
        self._site_of: list[int] = []
        self._time_weights: list[
            tuple[np.ndarray, np.ndarray]
        ] = []  # per site: (times, member indices)
        self._build_sites()
        if len(self.soundings) > 1:
            low_tops = [
                s for s, top in zip(self.soundings, tops, strict=True) if top < tops.max() - 1_000.0
            ]
            for s in low_tops:
                warnings.warn(
                    f"{Path(s.path).name if s.path else 'sounding'}: ends at {s.alt_m[-1]:.0f} m, "
                    f"below the highest sounding ({tops.max():.0f} m); its top wind is held above",
                    DataQualityWarning,
                    stacklevel=2,
                )

    def _name(self, s: Sounding) -> str:
        return Path(s.path).name if s.path else "sounding"

    def _build_sites(self) -> None:
        several = len(self.soundings) > 1
        keys: dict[tuple[float, float], int] = {}
        for s in self.soundings:
            if s.lat is None or s.lon is None:
                if several:
                    raise input_error(
                        s.path,
                        "site",
                        "has no latitude/longitude, needed to combine several soundings",
                        "add '# site_latitude = ...' and '# site_longitude = ...' lines",
                    )
                key = (0.0, 0.0)
            else:
                key = (round(s.lat, 4), round(s.lon, 4))
            if key not in keys:
                keys[key] = len(self._sites)
                self._sites.append(key)
            self._site_of.append(keys[key])
        self._site_of_arr = np.array(self._site_of)
        for site in range(len(self._sites)):
            members = np.flatnonzero(self._site_of_arr == site)
            if members.size == 1:
                self._time_weights.append((np.zeros(0), members))
                continue
            times = [self.soundings[k].time_s for k in members]
            if any(t is None for t in times):
                k = members[[t is None for t in times].index(True)]
                raise input_error(
                    self.soundings[k].path,
                    "time",
                    "is missing, needed for several soundings at one site",
                    "add a '# time = 2027-05-14T12:00:00Z' line to the file",
                )
            times_arr = np.array(times, dtype=float)
            order = np.argsort(times_arr)
            if np.any(np.diff(times_arr[order]) == 0):
                k = members[order[np.flatnonzero(np.diff(times_arr[order]) == 0)[0] + 1]]
                raise input_error(
                    self.soundings[k].path,
                    "time",
                    "repeats another sounding's site and time",
                    "give each site and time once",
                )
            self._time_weights.append((times_arr[order], members[order]))
        lats = np.array([s[0] for s in self._sites])
        self._site_lat = lats
        self._site_lon = np.array([s[1] for s in self._sites])

    def coverage(self) -> Coverage:
        """Altitude range (see the class notes); space and time unbounded."""
        return self._coverage

    def _weights(self, lat: np.ndarray, lon: np.ndarray, time_s: np.ndarray) -> np.ndarray:
        """Weights (n_soundings, n_points), summing to one over soundings."""
        n = lat.size
        k_total = len(self.soundings)
        if k_total == 1:
            return np.ones((1, n))
        if len(self._sites) == 1:
            site_w = np.ones((1, n))
        else:
            dlat = np.radians(lat[None, :] - self._site_lat[:, None])
            dlon = np.radians((lon[None, :] - self._site_lon[:, None] + 180.0) % 360.0 - 180.0)
            mean_lat = np.radians(0.5 * (lat[None, :] + self._site_lat[:, None]))
            d2 = (_EARTH_RADIUS_M**2) * (dlat**2 + (np.cos(mean_lat) * dlon) ** 2)
            site_w = 1.0 / np.maximum(d2, _MIN_DISTANCE2_M2)
            site_w /= site_w.sum(axis=0, keepdims=True)
        w = np.zeros((k_total, n))
        for site, (times, members) in enumerate(self._time_weights):
            if times.size == 0:
                w[members[0]] = site_w[site]
                continue
            eye = np.eye(times.size)
            for j, k in enumerate(members):
                w[k] = site_w[site] * np.interp(time_s, times, eye[j])
        return w

    def wind(
        self, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """u, v (m/s) at the points (arrays broadcast together)."""
        b = np.broadcast(np.asarray(lat), np.asarray(lon), np.asarray(alt_m), np.asarray(time_s))
        shape = b.shape
        la, lo, z, t = (
            np.broadcast_to(np.asarray(a, dtype=float), shape).ravel()
            for a in (lat, lon, alt_m, time_s)
        )
        la, lo, z, t = check_coverage(self._coverage, la, lo, z, t, self.outside, "sounding winds")
        levels = self._levels
        i = np.clip(np.searchsorted(levels, z, side="right") - 1, 0, levels.size - 2)
        f = np.clip((z - levels[i]) / (levels[i + 1] - levels[i]), 0.0, 1.0)
        u_k = self._u[:, i] * (1.0 - f) + self._u[:, i + 1] * f
        v_k = self._v[:, i] * (1.0 - f) + self._v[:, i + 1] * f
        if len(self.soundings) == 1:
            return u_k[0].reshape(shape), v_k[0].reshape(shape)
        w = self._weights(la, lo, t)
        return (w * u_k).sum(axis=0).reshape(shape), (w * v_k).sum(axis=0).reshape(shape)


def _sounding_paths(paths: str | Path | list[str | Path]) -> list[Path]:
    if isinstance(paths, str | Path):
        paths = [paths]
    out: list[Path] = []
    for p in paths:
        p = Path(p)
        if p.is_dir():
            found = sorted(p.glob("*.csv"))
            if not found:
                raise input_error(
                    p, "folder", "holds no .csv sounding", "put sounding CSV files in it"
                )
            out.extend(found)
        elif p.exists():
            out.append(p)
        else:
            raise FileNotFoundError(f"{p}: sounding file not found")
    return out


def read_soundings(paths: str | Path | list[str | Path]) -> list[Sounding]:
    """Read sounding files; a folder stands for every ``*.csv`` in it (sorted by name)."""
    return [read_sounding(p) for p in _sounding_paths(paths)]


def sounding_field_from_paths(
    paths: str | Path | list[str | Path], outside: CoveragePolicy = "error"
) -> SoundingField:
    """A :class:`SoundingField` from files or folders of soundings (see :func:`read_soundings`)."""
    return SoundingField(read_soundings(paths), outside=outside)


def atmosphere_from_soundings(
    soundings: list[Sounding],
    lat: float | None = None,
    lon: float | None = None,
    time_s: float | None = None,
) -> SoundingAtmosphere | None:
    """The day's air from the sounding nearest the launch that has temperature and pressure.

    Nearest means: smallest distance to (``lat``, ``lon``) when both are given and the soundings
    have sites, then smallest time difference to ``time_s`` when given; otherwise the first such
    sounding.

    Returns
    -------
    SoundingAtmosphere or None
        None when no sounding has temperature and pressure on at least two levels.
    """
    candidates = [s for s in soundings if s.has_thermo]
    if not candidates:
        return None

    def key(s: Sounding) -> tuple[float, float]:
        d = 0.0
        if lat is not None and lon is not None and s.lat is not None and s.lon is not None:
            dlon = ((lon - s.lon + 180.0) % 360.0 - 180.0) * np.cos(np.radians(lat))
            d = float(np.hypot(lat - s.lat, dlon))
        dt = abs(time_s - s.time_s) if time_s is not None and s.time_s is not None else 0.0
        return (round(d, 6), dt)

    best = min(candidates, key=key)
    try:
        return SoundingAtmosphere(best.alt_m, best.temperature_k, best.pressure_pa)
    except PhysicsError:
        return None
