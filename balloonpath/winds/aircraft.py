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
import warnings
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field, fields
from pathlib import Path

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


def fit_reference(
    states: AircraftStates, u: np.ndarray, v: np.ndarray, use: np.ndarray,
    background: WindField | None = None, knot_m: float = 1000.0, with_bias: bool = True,
    bias_prior_deg: float = 5.0, iterations: int = 40,
) -> tuple[np.ndarray, np.ndarray, dict[str, tuple[float, float, int]]]:
    """Reference wind at every row and per-aircraft heading biases, fitted jointly to the rows in ``use``.

    Returns ``(ref_u, ref_v, {aircraft: (bias_deg, standard_error_deg, n_rows)})``.

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
    scale 1.4826 MAD of the residuals, at least 0.3 m/s). Memory is O(rows x p), never rows x aircraft.
    Standard errors are scale / sqrt(sum w TAS^2 + prior), ignoring the small profile covariance.
    Aircraft magnetic tables are often out of date and flux valves drift
    ([deHaan2013], [Jacobs2014]).
    """
    n = len(states)
    sel = np.nonzero(use & np.isfinite(u) & np.isfinite(v))[0]
    bg_u = np.zeros(n)
    bg_v = np.zeros(n)
    if background is not None:
        try:
            bu, bv = background.wind(states.lat, states.lon, states.alt_m, states.time_s)
            bg_u = np.broadcast_to(np.asarray(bu, dtype=float), (n,)).copy()
            bg_v = np.broadcast_to(np.asarray(bv, dtype=float), (n,)).copy()
        except CoverageError as exc:
            warnings.warn(f"aircraft winds: background does not cover the reports ({exc}); QC uses a profile "
                          "fitted to the aircraft winds alone", DataQualityWarning, stacklevel=3)
    if sel.size == 0:
        return bg_u, bg_v, {}
    z = states.alt_m
    knots = np.arange(np.floor(z[sel].min() / knot_m) * knot_m, z[sel].max() + knot_m, knot_m)
    lat0, lon0 = float(np.mean(states.lat[sel])), float(np.mean(states.lon[sel]))
    x = (((states.lon - lon0 + 180.0) % 360.0) - 180.0) * 111_320.0 * math.cos(math.radians(lat0))
    y = (states.lat - lat0) * 110_540.0
    t = states.time_s - float(np.mean(states.time_s[sel]))
    scales = [max(float(np.std(a[sel])), 1.0) for a in (x, y, t)]
    side = np.column_stack([x / scales[0], y / scales[1], t / scales[2]])
    smooth = np.hstack([_hat_basis(z, knots), side])
    p = smooth.shape[1]
    names, ac_idx = np.unique(states.aircraft[sel].astype(str), return_inverse=True)
    ac_idx = np.asarray(ac_idx).ravel()
    derived_sel = (states.kind[sel] == KIND_DERIVED) & with_bias
    basis = smooth[sel]
    psi = np.radians(np.where(derived_sel, states.heading_true_deg[sel], 0.0))
    tas = np.where(derived_sel, states.true_airspeed_m_s[sel], 0.0)
    # Effect of a unit bias (radians) on the derived wind: -TAS (cos psi, -sin psi).
    eu, ev = -tas * np.cos(psi), tas * np.sin(psi)
    du, dv = u[sel] - bg_u[sel], v[sel] - bg_v[sel]
    delta = np.zeros(names.size)
    wu = np.ones(sel.size)
    wv = np.ones(sel.size)
    scale = 1.0
    coef_u = np.zeros(p)
    coef_v = np.zeros(p)
    ridge = np.eye(p) * 1e-9

    def huber(resid: np.ndarray, s: float) -> np.ndarray:
        r = np.abs(resid) / (1.5 * s)
        return np.where(r <= 1.0, 1.0, 1.0 / np.maximum(r, 1e-12))

    for _ in range(iterations):
        # (1) profile given the biases: weighted least squares, per component (p columns only).
        bu = du - eu * delta[ac_idx]
        bv = dv - ev * delta[ac_idx]
        coef_u = np.linalg.solve((basis.T * wu) @ basis + ridge, basis.T @ (wu * bu))
        coef_v = np.linalg.solve((basis.T * wv) @ basis + ridge, basis.T @ (wv * bv))
        ru = du - basis @ coef_u
        rv = dv - basis @ coef_v
        # (2) each aircraft's bias given the profile: 1-D weighted least squares with a ridge prior.
        prior_w = (scale / math.radians(bias_prior_deg)) ** 2
        if with_bias:
            num = np.bincount(ac_idx, weights=wu * eu * ru + wv * ev * rv, minlength=names.size)
            den = np.bincount(ac_idx, weights=wu * eu * eu + wv * ev * ev, minlength=names.size) + prior_w
            delta = num / den
        resid_u = ru - eu * delta[ac_idx]
        resid_v = rv - ev * delta[ac_idx]
        both = np.concatenate([resid_u, resid_v])
        scale = max(1.4826 * float(np.median(np.abs(both - np.median(both)))), 0.3)
        wu, wv = huber(resid_u, scale), huber(resid_v, scale)
    biases: dict[str, tuple[float, float, int]] = {}
    if with_bias:
        info = np.bincount(ac_idx, weights=wu * eu * eu + wv * ev * ev, minlength=names.size)
        counts = np.bincount(ac_idx, weights=derived_sel.astype(float), minlength=names.size)
        se = scale / np.sqrt(info + (scale / math.radians(bias_prior_deg)) ** 2)
        for j, name in enumerate(names):
            biases[str(name)] = (math.degrees(delta[j]), math.degrees(se[j]), int(counts[j]))
    return bg_u + smooth @ coef_u, bg_v + smooth @ coef_v, biases


def quality_control(
    states: AircraftStates, background: WindField | None = None, config: QCConfig | None = None,
) -> tuple[AircraftStates, np.ndarray, dict]:
    """Screen aircraft states; correct per-aircraft heading bias.

    Returns the states (headings corrected), a boolean accepted mask, and counts per rule plus the
    detected biases (``{"stale_pair": int, ..., "heading_bias_deg": {aircraft: deg}}``).

    Notes
    -----
    Rules in order (a row is counted under the first it fails): stale pair (pair_age_s > max_pair_age_s);
    implausible speed (TAS outside [min, max] or GS > max); turning (|roll| > max_roll_deg or track rate >
    max_track_rate_deg_s, the rate from BDS 5,0 or from consecutive rows); |wind| > max_wind_m_s; then,
    after the heading-bias correction, gross outliers: robust z = (r - median r) / max(1.4826 MAD, floor)
    of each component of the residual against the reference, rejected when |z| > outlier_z.
    """
    cfg = config or QCConfig()
    n = len(states)
    derived = states.kind == KIND_DERIVED
    ok = np.ones(n, dtype=bool)
    counts: dict = {}

    def apply(name: str, bad: np.ndarray) -> None:
        nonlocal ok
        bad = np.asarray(bad, dtype=bool) & ok
        counts[name] = int(bad.sum())
        ok &= ~bad

    apply("stale_pair", derived & (states.pair_age_s > cfg.max_pair_age_s))
    with np.errstate(invalid="ignore"):
        apply("implausible_speed", derived & (
            (states.true_airspeed_m_s < cfg.min_true_airspeed_m_s)
            | (states.true_airspeed_m_s > cfg.max_true_airspeed_m_s)
            | (states.ground_speed_m_s > cfg.max_ground_speed_m_s) | (states.ground_speed_m_s < 0)))
        rate = np.where(np.isfinite(states.track_rate_deg_s), np.abs(states.track_rate_deg_s),
                        track_rate_from_sequence(states))
        apply("turning", derived & ((np.abs(states.roll_deg) > cfg.max_roll_deg)
                                    | (rate > cfg.max_track_rate_deg_s)))
        u, v = states.winds()
        apply("wind_too_strong", ~np.isfinite(u) | ~np.isfinite(v) | (np.hypot(u, v) > cfg.max_wind_m_s))

    biases: dict[str, float] = {}
    bias_rows = 0
    if cfg.heading_bias and np.any(ok & derived):
        _, _, found = fit_reference(states, u, v, ok, background, cfg.reference_knot_m, with_bias=True)
        heading = states.heading_true_deg.copy()
        for name, (bias, se, count) in found.items():
            if count >= cfg.heading_bias_min_rows and \
                    abs(bias) > max(cfg.heading_bias_min_deg, cfg.heading_bias_sigmas * se):
                rows = derived & (states.aircraft.astype(str) == name)
                heading[rows] = (heading[rows] - bias) % 360.0
                biases[name] = bias
                bias_rows += int(rows.sum())
        if biases:
            states = AircraftStates(**{**{f.name: getattr(states, f.name) for f in fields(states)},
                                       "heading_true_deg": heading})
            u, v = states.winds()

    ub, vb, _ = fit_reference(states, u, v, ok, background, cfg.reference_knot_m, with_bias=False)
    outlier = np.zeros(n, dtype=bool)
    if np.any(ok):
        for r in (u - ub, v - vb):
            med = np.median(r[ok])
            scale = max(1.4826 * float(np.median(np.abs(r[ok] - med))), cfg.outlier_scale_floor_m_s)
            with np.errstate(invalid="ignore"):
                outlier |= np.abs(r - med) / scale > cfg.outlier_z
    apply("outlier", outlier)
    counts["heading_bias_deg"] = biases
    counts["heading_bias_rows"] = bias_rows
    return states, ok, counts


# --------------------------------------------------------------------------------------------------------
# Super-observations
# --------------------------------------------------------------------------------------------------------
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
    cfg = config or QCConfig()
    if len(states) == 0:
        return WindObservations.empty()
    u, v = states.winds()
    sigma_row = observation_sigma_m_s(states.alt_m, states.kind)
    keys = np.rec.fromarrays([
        states.source.astype(str), states.aircraft.astype(str),
        np.floor(states.time_s / cfg.superob_time_s).astype(np.int64),
        np.floor(states.alt_m / cfg.superob_alt_m).astype(np.int64),
    ])
    _, group = np.unique(keys, return_inverse=True)
    group = np.asarray(group).ravel()
    m = int(group.max()) + 1
    count = np.bincount(group, minlength=m).astype(float)

    def mean(x: np.ndarray) -> np.ndarray:
        return np.bincount(group, weights=x, minlength=m) / count

    lon_r = np.radians(states.lon)
    lon = np.degrees(np.arctan2(mean(np.sin(lon_r)), mean(np.cos(lon_r))))
    rho = cfg.superob_correlated_fraction
    sigma = mean(sigma_row) * np.sqrt(rho + (1.0 - rho) / count)
    first = np.zeros(m, dtype=np.int64)
    first[group[::-1]] = np.arange(len(states))[::-1]
    source = states.source[first]
    aircraft = states.aircraft[first].astype(str)
    time_s, alt = mean(states.time_s), mean(states.alt_m)
    order = np.lexsort((alt, aircraft, time_s))
    return WindObservations(
        time_s[order], mean(states.lat)[order], ((lon + 180.0) % 360.0 - 180.0)[order], alt[order],
        mean(u)[order], mean(v)[order], sigma[order], np.asarray(source, dtype=object)[order],
    )


# --------------------------------------------------------------------------------------------------------
# Entry point
# --------------------------------------------------------------------------------------------------------
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
) -> tuple[WindObservations, QCReport]:
    """Wind observations from report tables and/or raw Mode-S message files.

    Parameters
    ----------
    paths : path or sequence of paths
        Report tables (CSV with a ``time,aircraft,...`` header) or raw messages (CSV ``time,message``); the
        kind is detected from the first line.
    background : WindField, optional
        Reference for the gross-outlier test and the heading-bias estimate (default: the median of the
        aircraft winds per 500 m altitude bin).
    atmosphere : Atmosphere, optional
        The day's air with actual heights for converting pressure altitude (default: standard atmosphere).
    config : QCConfig, optional
        Thresholds. ``pair_window_s`` overrides ``config.max_pair_age_s`` (raw messages: how far apart in time
        the air- and ground-velocity pieces of one wind may be).
    reference : (lat, lon), optional
        Receiver position for single-frame CPR decoding of raw messages (within 180 NM).

    Returns
    -------
    (WindObservations, QCReport)

    Raises
    ------
    InputDataError
        If no input gives a usable wind.
    """
    from balloonpath.winds.modes import read_raw_messages

    cfg = config or QCConfig()
    if pair_window_s is not None:
        cfg = QCConfig(**{**asdict(cfg), "max_pair_age_s": float(pair_window_s)})
    if isinstance(paths, str | Path):
        paths = [paths]
    paths = [Path(p) for p in paths]
    if not paths:
        raise input_error(None, "inputs", "no input files were given", "name report tables or message files")
    counts = ReadCounts()
    states: AircraftStates | None = None
    for path in paths:
        if _is_raw_message_file(path):
            part = read_raw_messages(path, counts, atmosphere=atmosphere, pair_window_s=cfg.max_pair_age_s,
                                     reference=reference)
        else:
            part = read_report_table(path, counts, atmosphere=atmosphere)
        states = part if states is None else states.concat(part)
    assert states is not None
    if counts.unknown_columns:
        warnings.warn(f"aircraft reports: ignored unknown columns {', '.join(sorted(counts.unknown_columns))}",
                      DataQualityWarning, stacklevel=2)
    skipped = counts.malformed + counts.crc_failed + counts.missing_values
    if skipped:
        warnings.warn(f"aircraft reports: skipped {counts.malformed} malformed lines, {counts.crc_failed} with a "
                      f"bad CRC and {counts.missing_values} with missing or NaN values", DataQualityWarning,
                      stacklevel=2)
    states = states.select(np.isfinite(states.alt_m))
    names = ", ".join(p.name for p in paths)
    if len(states) == 0:
        raise input_error(names, "rows", f"no usable wind in {counts.lines} lines",
                          "give rows with ground speed, track, true airspeed and heading (or a wind), or raw "
                          "messages with airborne velocity and BDS 5,0/6,0 replies", cls=InputDataError)
    corrected, ok, qc = quality_control(states, background, cfg)
    accepted = corrected.select(ok)
    if len(accepted) == 0:
        raise input_error(names, "rows", f"all {len(states)} aircraft states failed quality control",
                          "check units (knots, degrees) and heading_reference, or loosen [winds] QC settings")
    obs = superobservations(accepted, cfg)
    report = QCReport(
        lines_read=counts.lines, malformed_lines=counts.malformed, crc_failed=counts.crc_failed,
        unverified_address=counts.unverified_address, ambiguous_bds=counts.ambiguous_bds,
        missing_values=counts.missing_values, unpaired=counts.unpaired, short_skipped=counts.short_skipped,
        unknown_columns=tuple(sorted(counts.unknown_columns)), rows=len(states),
        stale_pair=qc["stale_pair"], implausible_speed=qc["implausible_speed"], turning=qc["turning"],
        wind_too_strong=qc["wind_too_strong"], outlier=qc["outlier"], accepted=int(ok.sum()),
        heading_bias_aircraft=len(qc["heading_bias_deg"]), heading_bias_rows=qc["heading_bias_rows"],
        heading_bias_deg=tuple(sorted((k, float(b)) for k, b in qc["heading_bias_deg"].items())),
        aircraft=int(np.unique(states.aircraft.astype(str)).size), superobservations=len(obs),
    )
    return obs, report


__all__ = [
    "AircraftStates", "QCConfig", "QCReport", "ReadCounts", "altitude_from_pressure_altitude",
    "derive_observations", "fit_reference", "heading_and_ground_speed", "observation_sigma_m_s",
    "quality_control", "read_report_table", "superobservations", "uv_from_direction_speed",
    "wind_from_triangle",
]
