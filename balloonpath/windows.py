"""Launch-window planner: the forecast for many launch times with one loaded wind field.

For each launch time of a sweep (``start``, ``start + every``, ... up to ``end``) the planner gives the
nominal landing (point, time in UTC and local time, distance and bearing from the launch site and from
the recovery base), the size of the 90 % landing zone, the probabilities of landing on water and in each
avoid area, the landing time against sunset at the landing point, the maximum altitude and the flight
time. The plan's ``[windows]`` constraints mark each launch time fit or not, with the reasons, and a
score ranks the fit ones (lower is better; see :func:`window_score` and docs/windows.md).

How it runs (see docs/windows.md)
---------------------------------
1. The winds are loaded once (:func:`balloonpath.forecast.load_winds`).
2. The nominal balloon (member 0: mean wind, nominal parameters) is flown for every launch time in ONE
   call of the integrator, one row per launch time (each row has its own clock).
3. The wind realisations are drawn ONCE for the whole sweep, on a corridor that covers every nominal
   flight and the whole time span, and every launch time uses the same N realisations and the same
   member parameters (common random numbers): the differences between two launch times come from the
   winds' change in time, not from sampling noise.
4. The members of all launch times are stacked into few integrator calls (rows = launch time x member,
   each row starting at its own launch time), so the per-step overhead is paid once, not once per launch
   time.
5. Zones and probabilities per launch time (:func:`balloonpath.zones.compute_zones`), the sun at each
   landing point, constraints, score and rank.

On a Dask engine (``sweep_windows(..., engine=...)``) steps 4 and 5 run as work units
(:func:`fly_window_chunk` per flight block x member chunk, :func:`finish_window_block` per zone block;
:func:`window_units`), with the corridor field scattered once per worker and per-member random streams,
so the rows are the same bits as in this process.

References
----------
[NOAA-SUN] NOAA ESRL/SRRB "Solar Calculation Details" (Meeus algorithms; 0.833 deg of refraction and
    semi-diameter at rise and set), as implemented by astral 3.2; see
    :func:`balloonpath.checklist.sun_times` (REFERENCES.md §13).
"""

from __future__ import annotations

import csv
import dataclasses
import io
import math
import re
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from functools import lru_cache
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from balloonpath.ensemble import State, Trajectories, draw_member_factors, integrate
from balloonpath.errors import (
    CoverageError,
    DataQualityWarning,
    PlanError,
    WarningLog,
    input_error,
    recording_warnings,
)
from balloonpath.fileio import atomic_write_text
from balloonpath.flight.vertical import perturbed, vertical_params_from_plan
from balloonpath.forecast import CORRIDOR_MARGIN_M, LoadedWinds, draw_member_winds, load_winds
from balloonpath.geodesy import inverse
from balloonpath.plan import Plan
from balloonpath.result import ForecastResult, Points, Track
from balloonpath.terrain import terrain_from_plan
from balloonpath.timeutil import iso_from_posix, parse_iso
from balloonpath.winds.field import MeanMemberWinds, MemberWinds
from balloonpath.zones import Zones, compute_zones

if TYPE_CHECKING:
    from balloonpath.scale import Engine

__all__ = [
    "MAX_LAUNCH_TIMES",
    "SCORE_DEFAULTS",
    "SunAtLanding",
    "SweepTimings",
    "WindowBlock",
    "WindowChunk",
    "WindowRow",
    "WindowSweep",
    "launch_times",
    "parse_every",
    "parse_time",
    "sun_at_landing",
    "sweep_windows",
    "time_zone_at",
    "finish_window_block",
    "fly_window_chunk",
    "window_score",
    "window_units",
    "windows_csv_text",
    "windows_geojson",
    "write_windows_csv",
    "write_windows_geojson",
    "write_windows_outputs",
    "plot_windows",
]

MAX_LAUNCH_TIMES = 2000
"""Largest number of launch times in one sweep (a week every 5 minutes)."""

CHUNK_ROWS = 20_000
"""Largest number of (launch time x member) rows integrated in one call (bounds the memory)."""

SCORE_DEFAULTS = {
    "distance_scale_km": 100.0,
    "zone_scale_km": 20.0,
    "risk_weight": 10.0,
    "darkness_penalty": 2.0,
}
"""Scales and weights of :func:`window_score` when the plan gives no limit (ours, not from a source)."""

TIME_INVARIANT_TOLERANCE_M_S = 1e-6
"""Largest change of the mean wind between launch times for a field to count as time-invariant, m/s."""


# ------------------------------------------------------------------------------------ times
_EVERY_RE = re.compile(r"^\s*(?:(\d+(?:\.\d+)?)\s*h)?\s*(?:(\d+(?:\.\d+)?)\s*m(?:in)?)?\s*(?:(\d+(?:\.\d+)?)\s*s)?\s*$")


def parse_every(text: str) -> float:
    """Seconds of a step such as ``30m``, ``1h``, ``90m``, ``1h30m``, ``45min`` or ``600s``.

    Raises
    ------
    PlanError
        If the text is not such a duration or is not positive.
    """
    m = _EVERY_RE.match(str(text).lower())
    if m is None or not any(m.groups()):
        raise input_error(None, "--every", f"cannot read {text!r} as a duration",
                          "write e.g. 30m, 1h, 90m or 1h30m", cls=PlanError)
    h, mi, s = (float(g) if g else 0.0 for g in m.groups())
    seconds = 3600.0 * h + 60.0 * mi + s
    if seconds < 60.0:
        raise input_error(None, "--every", f"{text!r} is shorter than one minute",
                          "use a step of at least 1m", cls=PlanError)
    return seconds


def parse_time(text: str, option: str = "--start") -> float:
    """POSIX seconds of an ISO 8601 time with ``Z`` or an offset (e.g. ``2027-05-14T09:00:00Z``).

    Raises
    ------
    PlanError
        If the text is not ISO 8601 or has no time zone.
    """
    try:
        return parse_iso(str(text))
    except ValueError:
        raise input_error(None, option, f"cannot read {text!r} as an ISO 8601 time with a time zone",
                          "write e.g. 2027-05-14T09:00:00Z or 2027-05-14T04:00:00-05:00",
                          cls=PlanError) from None


def launch_times(start_s: float, end_s: float, every_s: float) -> np.ndarray:
    """Launch times ``start, start + every, ...`` up to and including ``end`` (POSIX seconds).

    Raises
    ------
    PlanError
        If ``end`` is before ``start``, the step is not positive, or there are more than
        :data:`MAX_LAUNCH_TIMES` launch times.
    """
    start_s, end_s, every_s = float(start_s), float(end_s), float(every_s)
    if not (math.isfinite(every_s) and every_s > 0.0):
        raise input_error(None, "--every", f"must be a positive duration, got {every_s} s",
                          "write e.g. 30m", cls=PlanError)
    if end_s < start_s:
        raise input_error(None, "--end", f"{iso_from_posix(end_s)} is before --start {iso_from_posix(start_s)}",
                          "give an end time after the start time", cls=PlanError)
    count = int(math.floor((end_s - start_s) / every_s + 1e-9)) + 1
    if count > MAX_LAUNCH_TIMES:
        raise input_error(None, "--every", f"gives {count} launch times (at most {MAX_LAUNCH_TIMES})",
                          "use a longer step or a shorter span", cls=PlanError)
    return start_s + every_s * np.arange(count, dtype=float)


# -------------------------------------------------------------------------------------- sun
@lru_cache(maxsize=1)
def _finder() -> Any:
    from timezonefinder import TimezoneFinder

    return TimezoneFinder()


@lru_cache(maxsize=4096)
def _zone_name_at(lat_r: float, lon_r: float) -> str | None:
    try:
        return _finder().timezone_at(lat=lat_r, lng=lon_r)
    except Exception:  # noqa: BLE001 - optional lookup; the caller falls back
        return None


def time_zone_at(lat: float, lon: float, fallback: str = "") -> str:
    """IANA time zone at a point (timezonefinder), else ``fallback``, else ``"UTC"``.

    The point is rounded to 0.01 deg (about 1 km) for the lookup cache.
    """
    name = _zone_name_at(round(float(lat), 2), round(float(lon), 2))
    return name or fallback or "UTC"


@dataclass(frozen=True)
class SunAtLanding:
    """The sun at a landing point on the local date of the landing.

    Attributes
    ----------
    time_zone : IANA name used for the local date.
    sunrise_s, sunset_s : POSIX seconds (None when the sun does not rise or set that day).
    minutes_before_sunset : (sunset - landing) / 60; negative after sunset (None without a sunset).
    daylight : landing between sunrise and sunset (None in polar day or night).
    """

    time_zone: str
    sunrise_s: float | None
    sunset_s: float | None
    minutes_before_sunset: float | None
    daylight: bool | None


def sun_at_landing(lat: float, lon: float, landing_time_s: float, tz: str) -> SunAtLanding:
    """Sunrise, sunset and daylight at a landing point and time.

    Parameters
    ----------
    lat, lon : float
        Landing point, degrees.
    landing_time_s : float
        Landing time, POSIX seconds.
    tz : str
        IANA time zone of the landing point; it fixes the *local* date whose sunrise and sunset are used.

    Notes
    -----
    astral takes a date in the time zone passed to it; with a UTC date, west of Greenwich the
    "sunset" of an afternoon landing falls on the previous local evening (REFERENCES.md §13, the
    Boulder pitfall). The local date of the landing is therefore taken in ``tz`` and passed with it
    (:func:`balloonpath.checklist.sun_times`). Rise and set use 0.833 deg of refraction and
    semi-diameter [NOAA-SUN]; NOAA gives the times as accurate to 1 min within +-72 deg latitude.
    """
    from balloonpath.checklist import sun_times
    from balloonpath.checklist_rules import resolve_zone

    zone = resolve_zone(tz)
    moment = datetime.fromtimestamp(float(landing_time_s), tz=UTC)
    local = moment.astimezone(zone)
    rise, set_ = sun_times(float(lat), float(lon), local.date(), zone)
    rise_s = rise.timestamp() if rise is not None else None
    set_s = set_.timestamp() if set_ is not None else None
    before = (set_s - float(landing_time_s)) / 60.0 if set_s is not None else None
    daylight = None
    if rise_s is not None and set_s is not None:
        daylight = bool(rise_s <= float(landing_time_s) <= set_s)
    return SunAtLanding(zone.key, rise_s, set_s, before, daylight)


# ------------------------------------------------------------------------------------ result
@dataclass(frozen=True)
class WindowRow:
    """Everything the planner knows about one launch time.

    Attributes
    ----------
    launch_time_s : launch time, POSIX s. launch_time_zone : IANA zone of the launch site.
    landing_lat, landing_lon, landing_elevation_m, landing_time_s : nominal landing (member 0).
    landing_time_zone : IANA zone of the landing point (local times and the sun).
    distance_km, bearing_deg : nominal landing from the launch site (geodesic, initial azimuth).
    base_distance_km, base_bearing_deg : from the recovery base (None without ``[recovery]``).
    zone_semi_major_km, zone_semi_minor_km : 90 % landing ellipse. region_area_km2 : area of the
        non-parametric 90 % region. landing_time_p95_s : 95 % quantile of the members' landing times.
    p_water : P(landing on water) (None when not computed). p_avoid : (name, probability) per avoid area.
    sunrise_s, sunset_s, minutes_before_sunset, daylight : see :class:`SunAtLanding`.
    max_altitude_m, flight_time_s : nominal run.
    fit : meets every ``[windows]`` constraint. reasons : one text per broken constraint.
    score : :func:`window_score` (lower is better). rank : 1 = best fit window; None if not fit.
    """

    launch_time_s: float
    launch_time_zone: str
    landing_lat: float
    landing_lon: float
    landing_elevation_m: float
    landing_time_s: float
    landing_time_zone: str
    distance_km: float
    bearing_deg: float
    base_distance_km: float | None
    base_bearing_deg: float | None
    zone_semi_major_km: float
    zone_semi_minor_km: float
    region_area_km2: float
    landing_time_p95_s: float
    p_water: float | None
    p_avoid: tuple[tuple[str, float], ...]
    sunrise_s: float | None
    sunset_s: float | None
    minutes_before_sunset: float | None
    daylight: bool | None
    max_altitude_m: float
    flight_time_s: float
    fit: bool = True
    reasons: tuple[str, ...] = ()
    score: float = float("nan")
    rank: int | None = None

    @property
    def recovery_distance_km(self) -> float:
        """Distance the crew drives: from the recovery base if there is one, else from the launch."""
        return self.base_distance_km if self.base_distance_km is not None else self.distance_km

    @property
    def p_avoid_max(self) -> float | None:
        """Largest avoid-area probability (None without avoid areas)."""
        return max((p for _n, p in self.p_avoid), default=None)


@dataclass(frozen=True)
class SweepTimings:
    """Where the time went, seconds: wall clock, and this process's CPU time in ``cpu`` (same keys
    ``load``, ``nominal``, ``draw``, ``members``, ``zones``, ``total``; on a shared machine the CPU time
    is the better speed figure)."""

    load_s: float
    nominal_s: float
    draw_s: float
    members_s: float
    zones_s: tuple[float, ...]
    total_s: float
    cpu: dict[str, float] = field(default_factory=dict)

    @property
    def per_launch_time_s(self) -> float:
        """Sweep time (without loading the winds) divided by the number of launch times."""
        n = max(len(self.zones_s), 1)
        return (self.total_s - self.load_s) / n


@dataclass(frozen=True)
class WindowSweep:
    """A launch-window sweep: rows in launch-time order, their zones, and how it ran.

    ``rows[k]`` and ``zones[k]`` belong to ``rows[k].launch_time_s``. ``time_varying`` is False when
    the mean wind did not change between launch times (then only the daylight differs).
    """

    plan_path: str
    launch_lat: float
    launch_lon: float
    base: tuple[float, float] | None
    start_s: float
    end_s: float
    every_s: float
    members: int
    seed: int
    time_varying: bool
    rows: tuple[WindowRow, ...]
    zones: tuple[Zones, ...]
    constraints: dict[str, float] = field(default_factory=dict)
    timings: SweepTimings | None = None
    warnings: tuple[str, ...] = ()

    def ranked(self) -> list[int]:
        """Row indices, best first: fit rows by rank, then the others by score, then by time."""
        def key(i: int) -> tuple[int, float, float]:
            r = self.rows[i]
            s = r.score if math.isfinite(r.score) else math.inf
            return (0 if r.fit else 1, s, r.launch_time_s)

        return sorted(range(len(self.rows)), key=key)

    @property
    def n_fit(self) -> int:
        """Number of launch times that meet every constraint."""
        return sum(1 for r in self.rows if r.fit)


# ------------------------------------------------------------------------------- constraints
def _constraints(plan: Plan) -> dict[str, float]:
    w = plan.windows
    out = {}
    for name in ("max_distance_km", "max_water_probability", "latest_landing_before_sunset_min",
                 "avoid_probability_max", "max_zone_km"):
        value = getattr(w, name)
        if value is not None:
            out[name] = float(value)
    return out


def check_constraints(row: WindowRow, constraints: dict[str, float], has_base: bool) -> tuple[str, ...]:
    """The reasons a window breaks the ``[windows]`` constraints (empty: fit).

    ``max_distance_km`` applies to the distance from the recovery base when the plan has one, else
    from the launch site; ``latest_landing_before_sunset_min`` also rejects landings before sunrise
    and landings where the sun does not rise or set (decide those by hand).
    """
    reasons: list[str] = []
    c = constraints
    if "max_distance_km" in c:
        d = row.recovery_distance_km
        if not d <= c["max_distance_km"]:
            where = "the recovery base" if has_base else "the launch site"
            reasons.append(f"lands {d:.1f} km from {where} (max_distance_km {c['max_distance_km']:g})")
    if "max_water_probability" in c and row.p_water is not None and not row.p_water <= c["max_water_probability"]:
        reasons.append(f"P(water) {row.p_water:.0%} (max_water_probability {c['max_water_probability']:g})")
    if "avoid_probability_max" in c:
        for name, p in row.p_avoid:
            if not p <= c["avoid_probability_max"]:
                reasons.append(f"P({name}) {p:.0%} (avoid_probability_max {c['avoid_probability_max']:g})")
    if "max_zone_km" in c and not row.zone_semi_major_km <= c["max_zone_km"]:
        reasons.append(f"90 % zone {row.zone_semi_major_km:.1f} km (max_zone_km {c['max_zone_km']:g})")
    if "latest_landing_before_sunset_min" in c:
        need = c["latest_landing_before_sunset_min"]
        if row.minutes_before_sunset is None or row.daylight is None:
            reasons.append("no sunrise or sunset at the landing point that day (decide by hand)")
        elif row.sunrise_s is not None and row.landing_time_s < row.sunrise_s:
            reasons.append(f"lands {(row.sunrise_s - row.landing_time_s) / 60:.0f} min before sunrise, in darkness")
        elif row.minutes_before_sunset < need:
            if row.minutes_before_sunset < 0:
                what = f"lands {-row.minutes_before_sunset:.0f} min after sunset"
            else:
                what = f"lands {row.minutes_before_sunset:.0f} min before sunset"
            reasons.append(f"{what} (latest_landing_before_sunset_min {need:g})")
    return tuple(reasons)


def window_score(row: WindowRow, constraints: dict[str, float]) -> float:
    """Score of a launch time, lower is better (our own definition, docs/windows.md).

    Notes
    -----
    score = d / D + a / A + W (P_water + sum_k P_avoid,k) + K [landing in darkness]

    d: nominal landing distance from the recovery base (from the launch site without one), km;
    D: ``max_distance_km`` or 100 km. a: semi-major axis of the 90 % landing ellipse, km;
    A: ``max_zone_km`` or 20 km. W = 10: a 10 % risk costs as much as a drive of D.
    K = 2: a landing before sunrise or after sunset costs as much as two drives of D.
    Probabilities that were not computed count as 0. The weights are choices, not from a source.
    """
    d_scale = constraints.get("max_distance_km", SCORE_DEFAULTS["distance_scale_km"])
    a_scale = constraints.get("max_zone_km", SCORE_DEFAULTS["zone_scale_km"])
    risk = (row.p_water or 0.0) + sum(p for _n, p in row.p_avoid)
    dark = 1.0 if row.daylight is False else 0.0
    return float(
        row.recovery_distance_km / d_scale
        + row.zone_semi_major_km / a_scale
        + SCORE_DEFAULTS["risk_weight"] * risk
        + SCORE_DEFAULTS["darkness_penalty"] * dark
    )


# ------------------------------------------------------------------------------------ engine
class _RowWinds:
    """Member winds of stacked rows: row k flies realisation ``realisation[k]``."""

    def __init__(self, inner: MemberWinds, realisation: np.ndarray) -> None:
        self.inner = inner
        self.realisation = np.asarray(realisation, dtype=int)
        self.n_members = int(self.realisation.size)

    def wind(self, members: np.ndarray, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray,
             time_s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return self.inner.wind(self.realisation[np.asarray(members, dtype=int)], lat, lon, alt_m, time_s)


def _sweep_corridor(field: Any, plan: Plan, nominal: Trajectories) -> Any:
    """The field whose sample corridor covers every nominal flight of the sweep (+ margins).

    Same margins as :func:`balloonpath.forecast.set_corridor`, over all launch times at once. Fields
    whose ``with_corridor`` returns the changed field are used through the returned object.
    """
    if not hasattr(field, "with_corridor"):
        return field
    tr = nominal.tracks
    lats = np.concatenate([[plan.launch.latitude], tr["lat"].ravel()])
    lons = np.concatenate([[plan.launch.longitude], tr["lon"].ravel()])
    ok = np.isfinite(lats) & np.isfinite(lons)
    lats, lons = lats[ok], lons[ok]
    # Longitudes relative to the launch, so a sweep over the antimeridian stays one box.
    rel = (lons - plan.launch.longitude + 180.0) % 360.0 - 180.0
    dlat = math.degrees(CORRIDOR_MARGIN_M / 6.371e6)
    dlon = dlat / max(math.cos(math.radians(float(np.mean(lats)))), 0.05)
    from balloonpath.forecast import CORRIDOR_MARGIN_S

    lon0 = plan.launch.longitude
    out = field.with_corridor(
        float(lats.min() - dlat), float(lats.max() + dlat),
        float((lon0 + rel.min() - dlon + 180.0) % 360.0 - 180.0),
        float((lon0 + rel.max() + dlon + 180.0) % 360.0 - 180.0),
        alt_max_m=float(np.nanmax(nominal.max_alt_m)) * 1.25 + 1000.0,
        time_min_s=float(np.nanmin(tr["time_s"])) - 3600.0,
        time_max_s=float(np.nanmax(nominal.landing_time_s)) + CORRIDOR_MARGIN_S,
    )
    return out if out is not None else field


def _is_time_varying(field: Any, nominal: Trajectories, times: np.ndarray) -> bool:
    """True when the mean wind along the first nominal track changes when the track is shifted in time."""
    if times.size < 2:
        return True
    tr = nominal.tracks
    keep = np.isfinite(tr["time_s"][0])
    step = max(int(np.count_nonzero(keep)) // 60, 1)
    lat, lon = tr["lat"][0][keep][::step], tr["lon"][0][keep][::step]
    alt, t = tr["alt_m"][0][keep][::step], tr["time_s"][0][keep][::step]
    shift = np.linspace(0.0, float(times[-1] - times[0]), min(times.size, 9))
    la = np.broadcast_to(lat, (shift.size, lat.size)).ravel()
    lo = np.broadcast_to(lon, (shift.size, lon.size)).ravel()
    al = np.broadcast_to(alt, (shift.size, alt.size)).ravel()
    tt = (t[None, :] + shift[:, None]).ravel()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            u, v = field.wind(la, lo, al, tt)
    except CoverageError:
        return True
    u = np.asarray(u, float).reshape(shift.size, -1)
    v = np.asarray(v, float).reshape(shift.size, -1)
    change = max(float(np.max(np.abs(u - u[0]))), float(np.max(np.abs(v - v[0]))))
    return not change <= TIME_INVARIANT_TOLERANCE_M_S


def _check_time_coverage(plan: Plan, winds: LoadedWinds, times: np.ndarray) -> None:
    """Launch times before the start or after the end of the winds' time coverage are an error."""
    if plan.winds.outside != "error":
        return
    cov = winds.field.coverage()
    if cov.time_min_s is not None and times[0] < cov.time_min_s:
        raise input_error(plan.path, "--start", f"{iso_from_posix(times[0])} is before the winds' time "
                          f"coverage (from {iso_from_posix(cov.time_min_s)})",
                          "choose a later --start", cls=CoverageError)
    if cov.time_max_s is not None and times[-1] >= cov.time_max_s:
        raise input_error(plan.path, "--end", f"{iso_from_posix(times[-1])} is at or after the end of the "
                          f"winds' time coverage ({iso_from_posix(cov.time_max_s)})",
                          "choose an earlier --end", cls=CoverageError)


def _slice_traj(tr: Trajectories, rows: slice) -> dict[str, np.ndarray]:
    return {k: getattr(tr, k)[rows] for k in (
        "burst_lat", "burst_lon", "burst_alt_m", "burst_time_s", "landing_lat", "landing_lon",
        "landing_alt_m", "landing_time_s", "max_alt_m")}


def _window_result(plan: Plan, winds: LoadedWinds, nominal: Trajectories, j: int,
                   members: dict[str, np.ndarray] | None, member_params: dict[str, np.ndarray],
                   seed: int, t0: float) -> ForecastResult:
    """A ForecastResult of launch time ``j`` (member 0 from the nominal pass, the rest stacked)."""
    tr = nominal.tracks
    keep = np.isfinite(tr["time_s"][j])
    track = Track(tr["time_s"][j][keep], tr["lat"][j][keep], tr["lon"][j][keep], tr["alt_m"][j][keep],
                  tr["phase"][j][keep].astype(np.int8))

    def cat(name: str) -> np.ndarray:
        head = np.asarray(getattr(nominal, name)[j : j + 1], float)
        return head if members is None else np.concatenate([head, members[name]])

    burst = Points(cat("burst_lat"), cat("burst_lon"), cat("burst_alt_m"), cat("burst_time_s"))
    landing = Points(cat("landing_lat"), cat("landing_lon"), cat("landing_alt_m"), cat("landing_time_s"))
    params = dict(member_params)
    params["max_altitude_m"] = cat("max_alt_m")
    empty = np.zeros((0, 0))
    return ForecastResult(
        launch_lat=plan.launch.latitude, launch_lon=plan.launch.longitude,
        launch_alt_m=plan.launch.elevation_m, launch_time_s=float(t0), nominal=track, burst=burst,
        landing=landing, member_params=params,
        member_tracks={k: empty for k in ("time_s", "lat", "lon", "alt_m")},
        landing_speed_m_s=float(nominal.landing_speed_m_s[j]),
        payload_mass_kg=plan.payload.mass_kg if plan.payload is not None else None,
        wind_info=winds.info, seed=seed, plan_path=str(plan.path), mode=plan.mode,
    )


def _rows_of(plan: Plan, winds: LoadedWinds, nominal: Trajectories, times: np.ndarray,
             member_rows: list[dict[str, np.ndarray] | None], mp: dict[str, np.ndarray], seed: int,
             water: bool, base: tuple[float, float] | None, launch_tz: str,
             constraints: dict[str, float]) -> tuple[list[WindowRow], list[Zones], list[float]]:
    """Zones, sun, constraints and score of launch times ``times`` (row j of ``nominal`` is ``times[j]``).

    The rows are not ranked yet (the rank needs every launch time). Used in this process and by
    :func:`finish_window_block` on a worker, so both give the same rows.
    """
    rows: list[WindowRow] = []
    zones_list: list[Zones] = []
    zones_s: list[float] = []
    for j in range(times.size):
        t0 = time.perf_counter()
        result = _window_result(plan, winds, nominal, j, member_rows[j], mp, seed, float(times[j]))
        zones = compute_zones(result, avoid_path=plan.zones.avoid, water=water)
        row = _row(plan, result, zones, base, launch_tz, float(times[j]))
        reasons = check_constraints(row, constraints, base is not None)
        row = dataclasses.replace(row, fit=not reasons, reasons=reasons, score=window_score(row, constraints))
        rows.append(row)
        zones_list.append(zones)
        zones_s.append(time.perf_counter() - t0)
    return rows, zones_list, zones_s


# ------------------------------------------------------------------------------ work units
_DRAWN: list[tuple[Any, int, int, bytes, MemberWinds]] = []  # (field, n_total, seed, ids, member winds)
DRAWN_CACHE_SIZE = 2
"""Member-chunk realisations kept per worker process (the units of one chunk share them)."""


@dataclass(frozen=True)
class WindowChunk:
    """Members ``members`` of the launch times ``times`` (a work unit's output).

    ``arrays`` maps burst_*, landing_*, max_alt_m to arrays of shape (len(times), len(members)).
    ``steps``: integrator steps; ``elapsed_s``: busy time of the unit; ``worker``: host:pid.
    """

    times: np.ndarray
    members: np.ndarray
    arrays: dict[str, np.ndarray]
    steps: int
    elapsed_s: float
    worker: str
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class WindowBlock:
    """Unranked rows, zones and zone timings of a block of launch times (a work unit's output).

    ``flight_warnings``: those of the block's member chunks; ``warnings``: those of the zones and rows.
    """

    times: np.ndarray
    rows: tuple[WindowRow, ...]
    zones: tuple[Zones, ...]
    zones_s: tuple[float, ...]
    flight_warnings: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()


def _unit_member_winds(plan: Plan, winds: LoadedWinds, ids: np.ndarray, n_total: int, seed: int) -> MemberWinds:
    """Realisations of members ``ids`` on the sweep corridor, as the whole-sweep draw gives them.

    Fields with a member sampler build it once per worker (:func:`balloonpath.scale.cached_member_sampler`)
    and the drawn chunk is kept for the next unit of the same members (another launch-time block).
    """
    if not plan.ensemble.wind_uncertainty:
        return MeanMemberWinds(winds.field, n_total)
    field_c = winds.field
    key = ids.tobytes()
    for f, n, sd, k, cached in _DRAWN:
        if f is field_c and n == n_total and sd == seed and k == key:
            return cached
    if hasattr(field_c, "member_sampler"):
        from balloonpath.forecast import NominalFirst
        from balloonpath.scale import cached_member_sampler

        drawn: MemberWinds = NominalFirst(field_c, cached_member_sampler(field_c, n_total).draw(ids, seed))
    else:
        drawn = draw_member_winds(winds, n_total, seed, member_ids=ids)
    _DRAWN.insert(0, (field_c, n_total, seed, key, drawn))
    del _DRAWN[DRAWN_CACHE_SIZE:]
    return drawn


def fly_window_chunk(plan: Plan, winds: LoadedWinds, times: np.ndarray, members: np.ndarray, n_total: int,
                     seed: int) -> WindowChunk:
    """Fly members ``members`` (all >= 1) of an ensemble of ``n_total`` at each launch time of ``times``.

    A pure function of picklable inputs: ``winds`` carries the sweep's corridor field (scattered once
    per worker), and each member's parameters, launch delay and wind realisation come from its own
    random streams (``ensemble.member_generator(seed, i)``, ``gp_sample.member_wind_generator(seed, i)``),
    so the arrays equal those of the in-process sweep bit for bit, whatever the blocks, chunks or worker.
    """
    import os

    t_begin = time.perf_counter()
    times = np.asarray(times, dtype=float)
    ids = np.asarray(members, dtype=int)
    if ids.size == 0 or ids.min() < 1 or ids.max() >= n_total:
        raise ValueError(f"fly_window_chunk: members must lie in 1..{n_total - 1}")
    ens = plan.ensemble
    log = WarningLog()
    with recording_warnings(log):
        params = vertical_params_from_plan(plan, winds.atmosphere)
        f = draw_member_factors(ids, seed, ens.ascent_sigma_fraction, ens.burst_sigma_fraction,
                                ens.descent_sigma_fraction, ens.launch_delay_sigma_min * 60.0)
        mparams = perturbed(params.repeat(ids.size), f.ascent, f.burst, f.descent, atmosphere=winds.atmosphere)
        member_winds = _unit_member_winds(plan, winds, ids, n_total, seed)
        col = np.tile(np.arange(ids.size), times.size)
        start = np.repeat(times, ids.size) + f.launch_delay_s[col]
        st = State.at_launch(plan.launch.latitude, plan.launch.longitude, plan.launch.elevation_m, start,
                             col.size)
        out = integrate(st, mparams.take(col), _RowWinds(member_winds, ids[col]), terrain_from_plan(plan),
                        winds.atmosphere, dt_s=ens.time_step_s, record=np.arange(0))
    arrays = {k: v.reshape(times.size, ids.size) for k, v in _slice_traj(out, slice(None)).items()}
    return WindowChunk(times, ids, arrays, int(out.steps), time.perf_counter() - t_begin,
                       f"{os.uname().nodename}:{os.getpid()}", tuple(log.messages))


def _take_rows(tr: Trajectories, idx: np.ndarray) -> Trajectories:
    """Rows ``idx`` of a Trajectories whose every row is recorded (the sweep's nominal flights)."""
    names = ("burst_lat", "burst_lon", "burst_alt_m", "burst_time_s", "landing_lat", "landing_lon",
             "landing_alt_m", "landing_time_s", "landing_speed_m_s", "max_alt_m")
    return Trajectories(**{k: np.asarray(getattr(tr, k))[idx] for k in names},
                        track_members=np.arange(idx.size), tracks={k: v[idx] for k, v in tr.tracks.items()},
                        steps=tr.steps)


def finish_window_block(plan: Plan, winds: LoadedWinds, nominal: Trajectories, times: np.ndarray,
                        mp: dict[str, np.ndarray], seed: int, options: dict[str, Any],
                        *chunks: WindowChunk) -> WindowBlock:
    """Zones, sun, constraints and score of a block of launch times, from the member chunks that flew them.

    ``nominal`` holds the block's nominal flights (row j = ``times[j]``); ``mp`` the member parameters of
    the whole ensemble; ``options`` the keywords ``water``, ``base``, ``launch_tz``, ``constraints``.
    ``chunks`` (any order) must hold every member 1..N-1 of each of ``times``; they may cover other launch
    times too (their rows are picked by launch time).
    """
    times = np.asarray(times, dtype=float)
    parts = sorted(chunks, key=lambda c: (int(c.members[0]), float(c.times[0])))
    member_rows: list[dict[str, np.ndarray] | None] = [None] * times.size
    if parts:
        for j, t in enumerate(times):
            have = [(c, int(np.flatnonzero(c.times == t)[0])) for c in parts if np.any(c.times == t)]
            member_rows[j] = {k: np.concatenate([c.arrays[k][i] for c, i in have]) for k in parts[0].arrays}
    log = WarningLog()
    with recording_warnings(log):
        rows, zones, zones_s = _rows_of(plan, winds, nominal, times, member_rows, mp, seed, **options)
    flown = tuple(dict.fromkeys(m for c in parts for m in c.warnings))
    return WindowBlock(times, tuple(rows), tuple(zones), tuple(zones_s), flown, tuple(log.messages))


def window_units(n_times: int, n_total: int, workers: int, chunk_members: int | None = None
                 ) -> tuple[list[np.ndarray], list[np.ndarray], list[np.ndarray]]:
    """How a sweep is cut for an engine: flight blocks, member chunks and zone blocks.

    Returns ``(flight_blocks, chunks, zone_blocks)``: blocks are arrays of launch-time indices, chunks
    arrays of member numbers. A flight unit flies one chunk at every launch time of one flight block; a
    zone unit computes the rows of one zone block.

    - Member chunks follow :func:`balloonpath.scale.member_chunks` (aligned to the wind-draw batches;
      default 128 members).
    - The launch times are split into flight blocks only as far as needed: to keep a unit at most
      :data:`CHUNK_ROWS` rows, and to give every worker a unit when there are fewer chunks than
      workers. Each extra block draws its chunk's realisations again (once per worker, cached).
    - Zone blocks: two per worker (the zones and the land mask cost as much as the flights in a small
      sweep), each an independent unit.
    """
    from balloonpath.scale import DEFAULT_CHUNK_MEMBERS, member_chunks

    w = max(int(workers), 1)
    chunks = member_chunks(n_total, chunk_members or DEFAULT_CHUNK_MEMBERS) if n_total > 1 else []
    widest = max((c.size for c in chunks), default=1)
    n_flight = max(math.ceil(n_times / max(1, CHUNK_ROWS // widest)), math.ceil(w / max(len(chunks), 1)))
    flight = [b for b in np.array_split(np.arange(n_times), min(n_flight, n_times)) if b.size]
    zone = [b for b in np.array_split(np.arange(n_times), min(2 * w, n_times)) if b.size]
    return (flight if chunks else []), chunks, zone


def _sweep_on_engine(engine: Engine, plan: Plan, winds_c: LoadedWinds, nominal: Trajectories,
                     times: np.ndarray, n: int, seed: int, mp: dict[str, np.ndarray], options: dict[str, Any],
                     progress: Callable[[int, int], None] | None) -> tuple[list[WindowBlock], list[str]]:
    """Steps 3 and 4 of the sweep as work units: (flight block x chunk) flights, then zones per zone block.

    Returns the zone blocks in launch-time order and the units' warnings (deduplicated: those of the
    flights, then those of the zones, as in this process).
    """
    flight_blocks, chunks, zone_blocks = window_units(times.size, n, engine.n_workers, engine.chunk_members)
    handle = engine.scatter(winds_c)
    total = times.size * (n - 1) or 1
    pending: dict[Any, int] = {}
    flights: list[tuple[np.ndarray, Any]] = []
    for b in flight_blocks:
        for ids in chunks:
            fut = engine.submit(fly_window_chunk, plan, handle, times[b], ids, n, seed, name="window-chunk")
            pending[fut] = b.size * ids.size
            flights.append((b, fut))
    finals: list[Any] = []
    for z in zone_blocks:
        lo, hi = int(z[0]), int(z[-1])
        needs = [f for b, f in flights if int(b[0]) <= hi and int(b[-1]) >= lo]
        final = engine.submit(finish_window_block, plan, handle, _take_rows(nominal, z), times[z], mp, seed,
                              options, *needs, name="window-zones")
        pending[final] = 0
        finals.append(final)
    del flights
    done = 0
    try:
        for fut in engine.as_completed(list(pending)):
            engine.result(fut)
            count = pending.pop(fut)
            if count:
                done += count
                if progress is not None:
                    progress(done, total)
    except BaseException:
        if engine.client is not None:
            engine.client.cancel([f for f in pending if hasattr(f, "cancel")])
        raise
    out = [engine.result(f) for f in finals]
    messages = [m for b in out for m in b.flight_warnings] + [m for b in out for m in b.warnings]
    return out, list(dict.fromkeys(messages))


def sweep_windows(
    plan: Plan,
    start_s: float,
    end_s: float,
    every_s: float,
    members: int | None = None,
    winds: LoadedWinds | None = None,
    progress: Callable[[int, int], None] | None = None,
    seed: int | None = None,
    engine: Engine | None = None,
) -> WindowSweep:
    """Forecast every launch time from ``start_s`` to ``end_s`` (inclusive) every ``every_s``.

    Parameters
    ----------
    plan : Plan
        The flight plan; ``[windows]`` holds the constraints, ``[recovery]`` the crew's base,
        ``[zones]`` the avoid areas and the water option.
    start_s, end_s, every_s : float
        First and last launch time (POSIX seconds) and the step, s (:func:`launch_times`).
    members : int, optional
        Ensemble members per launch time (default ``[ensemble] members``; member 0 is the nominal run).
    winds : LoadedWinds, optional
        Winds already loaded; default: :func:`balloonpath.forecast.load_winds` (once).
    progress : callable, optional
        ``progress(n_landed, n_total)`` over all (launch time x member) rows, after each step.
    seed : int, optional
        Override ``[ensemble] seed``.
    engine : balloonpath.scale.Engine, optional
        An entered engine with workers (a local Dask cluster or a scheduler): the members fly in work
        units of (launch-time block x member chunk) and the zones in one unit per block; the corridor
        field is scattered once per worker. The rows are the same as in this process, bit for bit.
        None, or an engine of one worker (``inline``): everything runs here, stacked (the default).

    Returns
    -------
    WindowSweep
        Frozen; rows in launch-time order with fit flag, reasons, score and rank.

    Notes
    -----
    All launch times share the same N wind realisations and the same member parameters (common random
    numbers), so differences between launch times are not sampling noise. P(water) is computed when
    ``[zones] water = true`` or ``[windows] max_water_probability`` is set.
    """
    t_begin, c_begin = time.perf_counter(), time.process_time()
    cpu: dict[str, float] = {}
    times = launch_times(start_s, end_s, every_s)
    n = int(members if members is not None else plan.ensemble.members)
    if n < 1:
        raise input_error(plan.path, "--members", f"must be >= 1, got {n}", "ask for at least 1 member",
                          cls=PlanError)
    s = int(seed if seed is not None else plan.ensemble.seed)
    constraints = _constraints(plan)
    log = WarningLog()
    with recording_warnings(log):
        if "avoid_probability_max" in constraints and plan.zones.avoid is None:
            warnings.warn("[windows] avoid_probability_max is set but [zones] avoid names no areas; "
                          "the constraint checks nothing", DataQualityWarning, stacklevel=2)
        t0, c0 = time.perf_counter(), time.process_time()
        if winds is None:
            winds = load_winds(plan, log)
        load_s, cpu["load"] = time.perf_counter() - t0, time.process_time() - c0
        ens = plan.ensemble
        ground = terrain_from_plan(plan)
        params = vertical_params_from_plan(plan, winds.atmosphere)
        lat0, lon0, z0 = plan.launch.latitude, plan.launch.longitude, plan.launch.elevation_m
        n_times = times.size

        # 1. nominal flights of every launch time: one integrator call, one row per launch time
        t0, c0 = time.perf_counter(), time.process_time()
        _check_time_coverage(plan, winds, times)
        state = State.at_launch(lat0, lon0, z0, times, n_times)
        try:
            nominal = integrate(state, params.repeat(n_times), MeanMemberWinds(winds.field, n_times), ground,
                                winds.atmosphere, dt_s=ens.time_step_s, record=np.arange(n_times))
        except CoverageError as exc:
            cov = winds.field.coverage()
            if cov.time_max_s is None:
                raise
            raise input_error(
                plan.path, "--end", f"a flight launched by {iso_from_posix(times[-1])} leaves the winds' time "
                f"coverage (to {iso_from_posix(cov.time_max_s)}): {exc}",
                "choose an earlier --end, or set [winds] outside = \"hold\"", cls=CoverageError,
            ) from None
        nominal_s, cpu["nominal"] = time.perf_counter() - t0, time.process_time() - c0
        time_varying = _is_time_varying(winds.field, nominal, times)
        if not time_varying:
            warnings.warn(
                "the wind field does not vary in time: every launch time gets the same nominal landing; "
                "only the daylight (and the members' random wind errors) change",
                DataQualityWarning, stacklevel=2,
            )

        # 2. one draw of wind realisations and member parameters for the whole sweep
        t0, c0 = time.perf_counter(), time.process_time()
        rest = np.arange(1, n)
        f = draw_member_factors(rest, s, ens.ascent_sigma_fraction, ens.burst_sigma_fraction,
                                ens.descent_sigma_fraction, ens.launch_delay_sigma_min * 60.0)
        member_params = perturbed(
            params.repeat(n), np.concatenate([[1.0], f.ascent]), np.concatenate([[1.0], f.burst]),
            np.concatenate([[1.0], f.descent]), atmosphere=winds.atmosphere,
        )
        delays = np.concatenate([[0.0], f.launch_delay_s])
        distributed = engine is not None and not engine.inline
        field_c = winds.field
        member_winds: MemberWinds = MeanMemberWinds(winds.field, n)
        if n > 1 and ens.wind_uncertainty:
            field_c = _sweep_corridor(winds.field, plan, nominal)
            if not distributed:  # on an engine each unit draws its own members' realisations
                member_winds = draw_member_winds(dataclasses.replace(winds, field=field_c), n, s)
        draw_s, cpu["draw"] = time.perf_counter() - t0, time.process_time() - c0
        mp = {
            "ascent_rate_m_s": np.asarray(member_params.ascent_rate_m_s, float),
            "burst_altitude_m": np.asarray(member_params.burst_altitude_m, float),
            "descent_sea_level_m_s": np.asarray(member_params.descent_sea_level_m_s, float),
            "launch_delay_s": np.asarray(delays, float),
        }
        water = bool(plan.zones.water or "max_water_probability" in constraints)
        base = None
        if plan.recovery.base_latitude is not None and plan.recovery.base_longitude is not None:
            base = (float(plan.recovery.base_latitude), float(plan.recovery.base_longitude))
        launch_tz = plan.launch.time_zone or time_zone_at(lat0, lon0)
        options = {"water": water, "base": base, "launch_tz": launch_tz, "constraints": constraints}

        # 3. members 1..n-1 of all launch times, stacked (rows = launch time x member)
        t0, c0 = time.perf_counter(), time.process_time()
        per = n - 1
        member_rows: list[dict[str, np.ndarray] | None] = [None] * n_times
        if distributed:
            # 3 + 4 as work units; the units' busy time goes to zones_s, the wall time to members_s
            assert engine is not None
            blocks, unit_warnings = _sweep_on_engine(
                engine, plan, dataclasses.replace(winds, field=field_c), nominal, times, n, s, mp, options,
                progress)
            for m in unit_warnings:
                if m not in log.messages:
                    log.messages.append(m)
            rows = [r for b in blocks for r in b.rows]
            zones_list = [z for b in blocks for z in b.zones]
            zones_s = [x for b in blocks for x in b.zones_s]
        elif per > 0:
            per_chunk = max(1, CHUNK_ROWS // per)
            total_rows = n_times * per
            done = 0
            for first in range(0, n_times, per_chunk):
                js = np.arange(first, min(first + per_chunk, n_times))
                realisation = np.tile(rest, js.size)
                start = np.repeat(times[js], per) + delays[realisation]
                st = State.at_launch(lat0, lon0, z0, start, realisation.size)
                cb = None
                if progress is not None:
                    offset = done
                    def cb(landed: int, _total: int, offset: int = offset) -> None:
                        progress(offset + landed, total_rows)
                out = integrate(st, member_params.take(realisation), _RowWinds(member_winds, realisation),
                                ground, winds.atmosphere, dt_s=ens.time_step_s, record=np.arange(0),
                                progress=cb)
                for k, j in enumerate(js):
                    member_rows[int(j)] = _slice_traj(out, slice(k * per, (k + 1) * per))
                done += realisation.size
        members_s, cpu["members"] = time.perf_counter() - t0, time.process_time() - c0
        c0 = time.process_time()

        # 4. zones, sun, constraints, score per launch time
        if not distributed:
            rows, zones_list, zones_s = _rows_of(plan, winds, nominal, times, member_rows, mp, s, **options)
        order = sorted((i for i, r in enumerate(rows) if r.fit), key=lambda i: (rows[i].score, i))
        for rank, i in enumerate(order, start=1):
            rows[i] = dataclasses.replace(rows[i], rank=rank)
        cpu["zones"] = time.process_time() - c0
    cpu["total"] = time.process_time() - c_begin
    timings = SweepTimings(load_s, nominal_s, draw_s, members_s, tuple(zones_s), time.perf_counter() - t_begin,
                           cpu)
    return WindowSweep(
        plan_path=str(plan.path), launch_lat=lat0, launch_lon=lon0, base=base,
        start_s=float(times[0]), end_s=float(end_s), every_s=float(every_s), members=n, seed=s,
        time_varying=time_varying, rows=tuple(rows), zones=tuple(zones_list), constraints=constraints,
        timings=timings, warnings=tuple(log.messages),
    )


def _ellipse_90(zones: Zones) -> tuple[float, float]:
    for e in zones.ellipses:
        if abs(e.probability - 0.9) < 1e-9:
            return e.semi_major_m / 1e3, e.semi_minor_m / 1e3
    return float("nan"), float("nan")


def _row(plan: Plan, result: ForecastResult, zones: Zones, base: tuple[float, float] | None,
         launch_tz: str, t0: float) -> WindowRow:
    land = result.landing
    lat, lon, t_land = float(land.lat[0]), float(land.lon[0]), float(land.time_s[0])
    if not (math.isfinite(lat) and math.isfinite(lon) and math.isfinite(t_land)):
        raise input_error(plan.path, "landing", f"the nominal flight launched at {iso_from_posix(t0)} "
                          "has no landing point", "check the warnings (coverage, terrain)")
    dist, bearing = inverse(plan.launch.latitude, plan.launch.longitude, lat, lon)
    b_dist = b_bear = None
    if base is not None:
        bd, bb = inverse(base[0], base[1], lat, lon)
        b_dist, b_bear = float(bd) / 1e3, float(bb) % 360.0
    tz = time_zone_at(lat, lon, plan.launch.time_zone)
    sun = sun_at_landing(lat, lon, t_land, tz)
    a, b = _ellipse_90(zones)
    return WindowRow(
        launch_time_s=t0, launch_time_zone=launch_tz, landing_lat=lat, landing_lon=lon,
        landing_elevation_m=float(land.alt_m[0]), landing_time_s=t_land, landing_time_zone=sun.time_zone,
        distance_km=float(dist) / 1e3, bearing_deg=float(bearing) % 360.0,
        base_distance_km=b_dist, base_bearing_deg=b_bear,
        zone_semi_major_km=a, zone_semi_minor_km=b, region_area_km2=zones.region_90_area_m2 / 1e6,
        landing_time_p95_s=float(zones.landing_time_p95),
        p_water=zones.p_water, p_avoid=tuple((str(k), float(v)) for k, v in zones.p_avoid.items()),
        sunrise_s=sun.sunrise_s, sunset_s=sun.sunset_s, minutes_before_sunset=sun.minutes_before_sunset,
        daylight=sun.daylight, max_altitude_m=float(result.member_params["max_altitude_m"][0]),
        flight_time_s=result.flight_time_s,
    )


# ------------------------------------------------------------------------------------ writers
def local_iso(seconds: float | None, tz: str) -> str:
    """``2027-05-14T07:30:00-05:00``: local ISO 8601 time with its offset ("" for None)."""
    if seconds is None or not math.isfinite(float(seconds)):
        return ""
    from balloonpath.checklist_rules import resolve_zone

    moment = datetime.fromtimestamp(round(float(seconds)), tz=UTC).astimezone(resolve_zone(tz))
    return moment.isoformat()


def _fmt(x: float | None, nd: int) -> str:
    if x is None or not math.isfinite(float(x)):
        return ""
    return f"{float(x):.{nd}f}"


CSV_COLUMNS = (
    "rank", "fit", "score", "launch_time", "launch_time_local", "landing_time", "landing_time_local",
    "landing_time_zone", "landing_latitude", "landing_longitude", "landing_elevation_m", "distance_km",
    "bearing_deg", "base_distance_km", "base_bearing_deg", "zone90_semi_major_km", "zone90_semi_minor_km",
    "region90_area_km2", "landing_time_p95", "p_water",
)
CSV_TAIL = ("sunrise_local", "sunset_local", "minutes_before_sunset", "daylight", "max_altitude_m",
            "flight_time_min", "reasons")


def windows_csv_text(sweep: WindowSweep) -> str:
    """``windows.csv``: one row per launch time, in launch-time order (columns in docs/windows.md)."""
    names = sorted({n for r in sweep.rows for n, _p in r.p_avoid})
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([*CSV_COLUMNS, *(f"p_avoid:{nm}" for nm in names), *CSV_TAIL])
    for r in sweep.rows:
        avoid = dict(r.p_avoid)
        w.writerow([
            r.rank if r.rank is not None else "", "yes" if r.fit else "no", _fmt(r.score, 4),
            iso_from_posix(r.launch_time_s), local_iso(r.launch_time_s, r.launch_time_zone),
            iso_from_posix(r.landing_time_s), local_iso(r.landing_time_s, r.landing_time_zone),
            r.landing_time_zone, _fmt(r.landing_lat, 6), _fmt(r.landing_lon, 6), _fmt(r.landing_elevation_m, 1),
            _fmt(r.distance_km, 3), _fmt(r.bearing_deg, 2), _fmt(r.base_distance_km, 3),
            _fmt(r.base_bearing_deg, 2), _fmt(r.zone_semi_major_km, 3), _fmt(r.zone_semi_minor_km, 3),
            _fmt(r.region_area_km2, 3),
            iso_from_posix(r.landing_time_p95_s) if math.isfinite(r.landing_time_p95_s) else "",
            _fmt(r.p_water, 4), *(_fmt(avoid.get(nm), 4) for nm in names),
            local_iso(r.sunrise_s, r.landing_time_zone), local_iso(r.sunset_s, r.landing_time_zone),
            _fmt(r.minutes_before_sunset, 1), "" if r.daylight is None else ("yes" if r.daylight else "no"),
            _fmt(r.max_altitude_m, 1), _fmt(r.flight_time_s / 60.0, 1), "; ".join(r.reasons),
        ])
    return buf.getvalue()


def write_windows_csv(sweep: WindowSweep, path: str | Path) -> Path:
    """Write ``windows.csv`` atomically."""
    return atomic_write_text(path, windows_csv_text(sweep))


def _num(x: float | None, nd: int) -> float | None:
    if x is None or not math.isfinite(float(x)):
        return None
    return round(float(x), nd) + 0.0


def windows_geojson(sweep: WindowSweep) -> dict[str, Any]:
    """RFC 7946 FeatureCollection: launch site, recovery base, and per launch time the nominal landing
    (``kind`` ``nominal_landing``) and the 90 % landing ellipse (``kind`` ``zone_90``), each with its
    ``launch_time``, ``rank``, ``fit`` and ``score``."""
    from balloonpath.export.geojson import polygon_geometry

    def pt(lat: float, lon: float) -> dict[str, Any]:
        return {"type": "Point", "coordinates": [round(float(lon), 6) + 0.0, round(float(lat), 6) + 0.0]}

    feats: list[dict[str, Any]] = [
        {"type": "Feature", "geometry": pt(sweep.launch_lat, sweep.launch_lon),
         "properties": {"kind": "launch", "name": "launch site"}},
    ]
    if sweep.base is not None:
        feats.append({"type": "Feature", "geometry": pt(*sweep.base),
                      "properties": {"kind": "recovery_base", "name": "recovery base"}})
    for r, z in zip(sweep.rows, sweep.zones, strict=True):
        common = {"launch_time": iso_from_posix(r.launch_time_s), "rank": r.rank, "fit": r.fit,
                  "score": _num(r.score, 4)}
        feats.append({"type": "Feature", "geometry": pt(r.landing_lat, r.landing_lon), "properties": {
            "kind": "nominal_landing", **common, "landing_time": iso_from_posix(r.landing_time_s),
            "distance_km": _num(r.distance_km, 3), "bearing_deg": _num(r.bearing_deg, 2),
            "p_water": _num(r.p_water, 4), "p_avoid": {k: _num(v, 4) for k, v in r.p_avoid},
            "minutes_before_sunset": _num(r.minutes_before_sunset, 1), "reasons": list(r.reasons)}})
        rings = [ring for e, ring in zip(z.ellipses, z.ellipse_rings, strict=True)
                 if abs(e.probability - 0.9) < 1e-9]
        geom = polygon_geometry(rings)
        if geom is not None:
            feats.append({"type": "Feature", "geometry": geom, "properties": {
                "kind": "zone_90", **common, "semi_major_km": _num(r.zone_semi_major_km, 3),
                "semi_minor_km": _num(r.zone_semi_minor_km, 3)}})
    return {"type": "FeatureCollection", "features": feats}


def write_windows_geojson(sweep: WindowSweep, path: str | Path) -> Path:
    """Write ``windows.geojson`` atomically."""
    from balloonpath.export.geojson import write_geojson

    return write_geojson(windows_geojson(sweep), path)


def write_windows_outputs(sweep: WindowSweep, out_dir: str | Path) -> tuple[Path, ...]:
    """Write ``windows.csv``, ``windows.geojson`` and ``windows.png`` into ``out_dir``."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    return (
        write_windows_csv(sweep, out / "windows.csv"),
        write_windows_geojson(sweep, out / "windows.geojson"),
        plot_windows(sweep, out / "windows.png"),
    )


# ------------------------------------------------------------------------------------- figure
WINDOW_COLORS = ("#0072B2", "#56B4E9", "#009E73", "#E69F00", "#D55E00")
"""Colour ramp for launch times, early to late (Okabe-Ito colours [Okabe2008] of
:mod:`balloonpath.plots`, ordered by balloonpath)."""


def plot_windows(sweep: WindowSweep, path: str | Path) -> Path:
    """``windows.png``: landing distance and risk against launch time, and a map of the nominal
    landings coloured by launch time (filled: fit; open: rejected; numbers: rank of the best five).

    Axes of the map are degrees with equal distances east and north at the launch
    (:func:`balloonpath.plots.set_equal_distance_aspect`); no background map (offline).
    """
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import LinearSegmentedColormap, Normalize
    from matplotlib.dates import DateFormatter
    from matplotlib.ticker import MaxNLocator

    from balloonpath.plots import (
        PALETTE,
        draw_north_arrow,
        draw_range_rings,
        new_figure,
        nice_ring_radii,
        save_png,
        set_equal_distance_aspect,
        unwrap_longitude,
    )

    rows = sweep.rows
    cmap = LinearSegmentedColormap.from_list("balloonpath_windows", list(WINDOW_COLORS))
    t = np.array([r.launch_time_s for r in rows])
    norm = Normalize(vmin=float(t.min()), vmax=float(max(t.max(), t.min() + 1.0)))
    colors = [cmap(norm(x)) for x in t]
    when = [datetime.fromtimestamp(float(x), tz=UTC).replace(tzinfo=None) for x in t]
    fit = np.array([r.fit for r in rows])

    fig = new_figure(13.0, 7.5)
    gs = fig.add_gridspec(2, 2, width_ratios=(1.0, 1.1), hspace=0.3, wspace=0.22, left=0.06, right=0.95,
                          top=0.94, bottom=0.12)
    ax_d = fig.add_subplot(gs[0, 0])
    ax_r = fig.add_subplot(gs[1, 0], sharex=ax_d)
    ax_m = fig.add_subplot(gs[:, 1])

    def series(ax: Any, y: np.ndarray, label: str, color: str, marker: str) -> None:
        ax.plot(when, y, color=color, lw=1.2, label=label, zorder=2)
        yf = np.where(fit, y, np.nan)
        yu = np.where(~fit, y, np.nan)
        ax.plot(when, yf, ls="none", marker=marker, color=color, ms=5, zorder=3)
        ax.plot(when, yu, ls="none", marker=marker, mfc="white", mec=color, ms=5, zorder=3)

    series(ax_d, np.array([r.distance_km for r in rows]), "from the launch site", PALETTE["track"], "o")
    if sweep.base is not None:
        series(ax_d, np.array([r.base_distance_km for r in rows], float), "from the recovery base",
               PALETTE["burst"], "s")
    series(ax_d, np.array([r.zone_semi_major_km for r in rows]), "90 % zone semi-major axis",
           PALETTE["landing_ellipse"], "^")
    if "max_distance_km" in sweep.constraints:
        ax_d.axhline(sweep.constraints["max_distance_km"], color=PALETTE["rings"], ls="--", lw=1,
                     label="max_distance_km")
    ax_d.set_ylabel("km")
    ax_d.set_title("Nominal landing distance and zone size")
    ax_d.legend(fontsize=7, loc="best")
    ax_d.grid(alpha=0.3)
    ax_d.tick_params(labelbottom=False)

    plotted = False
    if any(r.p_water is not None for r in rows):
        series(ax_r, np.array([r.p_water if r.p_water is not None else np.nan for r in rows], float),
               "P(water)", PALETTE["region"], "o")
        plotted = True
    names = sorted({n for r in rows for n, _p in r.p_avoid})
    avoid_colors = (PALETTE["landing_ellipse"], "#CC79A7", PALETTE["burst"], PALETTE["launch"])
    for k, name in enumerate(names):
        y = np.array([dict(r.p_avoid).get(name, np.nan) for r in rows], float)
        series(ax_r, y, f"P({name})", avoid_colors[k % len(avoid_colors)], "s")
        plotted = True
    dark = np.array([1.0 if r.daylight is False else 0.0 for r in rows])
    if np.any(dark > 0):
        ax_r.fill_between(when, 0, dark, step="mid", color=PALETTE["text"], alpha=0.12,
                          label="lands in darkness")
        plotted = True
    if not plotted:
        ax_r.text(0.5, 0.5, "no water or avoid-area probabilities asked for", transform=ax_r.transAxes,
                  ha="center", va="center", fontsize=8, color=PALETTE["text"])
    ax_r.set_ylim(-0.02, 1.02)
    ax_r.set_ylabel("probability")
    ax_r.set_xlabel("Launch time (UTC)")
    ax_r.set_title("Landing risks")
    ax_r.xaxis.set_major_formatter(DateFormatter("%d %H:%M"))
    for label in ax_r.get_xticklabels():
        label.set_rotation(30)
        label.set_ha("right")
    if plotted:
        ax_r.legend(fontsize=7, loc="best")
    ax_r.grid(alpha=0.3)

    lon0, lat0 = sweep.launch_lon, sweep.launch_lat
    lat = np.array([r.landing_lat for r in rows])
    lon = unwrap_longitude(np.array([r.landing_lon for r in rows]), lon0)
    for z, c in zip(sweep.zones, colors, strict=True):
        for e, ring in zip(z.ellipses, z.ellipse_rings, strict=True):
            if abs(e.probability - 0.9) < 1e-9:
                ax_m.plot(unwrap_longitude(ring.lon, lon0), ring.lat, color=c, lw=0.6, alpha=0.5, zorder=2)
    if np.any(fit):
        ax_m.scatter(lon[fit], lat[fit], c=t[fit], cmap=cmap, norm=norm, s=36, edgecolors=PALETTE["text"],
                     linewidths=0.5, zorder=4, label="nominal landing (fit)")
    if np.any(~fit):
        ax_m.scatter(lon[~fit], lat[~fit], facecolors="white", edgecolors=[c for c, f in zip(colors, fit,
                     strict=True) if not f], s=36, linewidths=1.2, zorder=4, label="nominal landing (rejected)")
    for i in sweep.ranked()[:3]:
        r = rows[i]
        if r.rank is not None:
            ax_m.annotate(str(r.rank), (float(lon[i]), float(lat[i])), xytext=(4, 4), textcoords="offset points",
                          fontsize=8, fontweight="bold", color=PALETTE["text"], zorder=5)
    ax_m.plot([lon0], [lat0], marker="^", color=PALETTE["launch"], ms=10, ls="none", label="launch", zorder=5)
    if sweep.base is not None:
        ax_m.plot([float(unwrap_longitude(sweep.base[1], lon0))], [sweep.base[0]], marker="P",
                  color=PALETTE["burst"], ms=10, ls="none", label="recovery base", zorder=5)
    # Extent: launch, base, landings and ellipses, with a margin; rings are clipped to it.
    xs = [np.atleast_1d(lon), [lon0]]
    ys = [np.atleast_1d(lat), [lat0]]
    if sweep.base is not None:
        xs.append([float(unwrap_longitude(sweep.base[1], lon0))])
        ys.append([sweep.base[0]])
    for z in sweep.zones:
        for e, ring in zip(z.ellipses, z.ellipse_rings, strict=True):
            if abs(e.probability - 0.9) < 1e-9:
                xs.append(unwrap_longitude(ring.lon, lon0))
                ys.append(np.asarray(ring.lat))
    x_all, y_all = np.concatenate(xs), np.concatenate(ys)
    x_all, y_all = x_all[np.isfinite(x_all)], y_all[np.isfinite(y_all)]
    pad_y = max(0.1 * float(np.ptp(y_all)), 0.02)
    pad_x = max(0.1 * float(np.ptp(x_all)), 0.02)
    far = max([r.distance_km for r in rows] + [1.0]) * 1e3
    draw_range_rings(ax_m, lat0, lon0, nice_ring_radii(far, 3), lon_ref=lon0)
    ax_m.set_xlim(float(x_all.min()) - pad_x, float(x_all.max()) + pad_x)
    ax_m.set_ylim(float(y_all.min()) - pad_y, float(y_all.max()) + pad_y)
    set_equal_distance_aspect(ax_m, lat0)
    ax_m.xaxis.set_major_locator(MaxNLocator(5))
    draw_north_arrow(ax_m)
    sm = ScalarMappable(norm=norm, cmap=cmap)
    cb = fig.colorbar(sm, ax=ax_m, shrink=0.7, pad=0.02)
    ticks = np.linspace(norm.vmin, norm.vmax, min(len(rows), 6))
    cb.set_ticks(ticks)
    cb.set_ticklabels([iso_from_posix(x)[8:16].replace("T", " ") + "Z" for x in ticks])
    cb.set_label("Launch time (UTC)")
    ax_m.set_title(f"Nominal landings of {len(rows)} launch times ({sweep.n_fit} fit)")
    ax_m.legend(fontsize=7, loc="lower left")
    ax_m.grid(alpha=0.3)
    return save_png(fig, path)
