"""Pre-flight checklist computed from a flight plan, a jurisdiction profile and (optionally) a
forecast.

The checklist says which class of the profile the payload meets as entered, which notices fall due
and when,
fills in a draft of the information they ask for, and checks the forecast's risks, the launch
conditions and
the equipment the profile names. It never states that a flight is allowed or harmless: every output
carries
:data:`DISCLAIMER`, and the local aviation authority decides.

Blocking items (a failing one makes ``balloonpath checklist`` exit 1): equipment the profile
requires that the
plan states is absent; a team limit in ``[checklist]`` exceeded (surface wind, free-lift margin,
landing speed
or energy); the nominal track over an avoid area below the low-altitude check height. Limits taken
from
``[windows]`` (probabilities, zone size, landing before sunset) fail without blocking.

References
----------
[CFR101], [ICAO-A2] : see :mod:`balloonpath.checklist_rules`.
[NOAA-SUN] NOAA ESRL/SRRB "Solar Calculation Details" (Meeus algorithms; 0.833 deg of refraction and
    semi-diameter at rise and set), as implemented by astral 3.2 (``astral.sun.sun``).
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np

from balloonpath.checklist_rules import (
    Classification,
    NoticeItem,
    RuleProfile,
    classify_payload,
    describe_notice_timing,
    format_time,
    load_profile,
    notice_schedule,
    resolve_zone,
)
from balloonpath.errors import BalloonpathError, input_error
from balloonpath.geodesy import inverse
from balloonpath.plan import Plan
from balloonpath.timeutil import parse_iso
from balloonpath.units import FOOT_M, INCH_M, OUNCE_KG, POUND_FORCE_N, POUND_KG

__all__ = [
    "DISCLAIMER",
    "Checklist",
    "ChecklistItem",
    "ForecastData",
    "build_checklist",
    "checklist_json",
    "classify_payload",
    "in_darkness",
    "load_profile",
    "notice_schedule",
    "read_forecast",
    "render_markdown",
    "sun_times",
]

DISCLAIMER = (
    "Rules vary between countries and change over time. This checklist is not legal advice "
    "and does not clear a flight: the local aviation authority decides. "
    "Check with your aviation authority."
)

STATUSES = ("pass", "fail", "warn", "info")

#: Height (m above launch) of the lowest track rows used as the forecast near-surface wind.
SURFACE_LAYER_M = 100.0
#: 60 000 ft, the altitude that US notices mention (time to cruise altitude or 60 000 ft).
FT60000_M = 60_000 * FOOT_M


@dataclass(frozen=True)
class ChecklistItem:
    """One line of the checklist.

    ``status`` is one of pass / fail / warn / info; ``blocking`` marks an item whose failure should
    stop a
    launch script; ``source`` names the rule or the team setting it comes from, ``how`` is "read",
    "memory",
    "team", "forecast" or "common practice".
    """

    section: str
    title: str
    status: str
    text: str
    blocking: bool = False
    source: str = ""
    how: str = ""


@dataclass(frozen=True)
class Checklist:
    """The checklist, frozen. Render with :func:`render_markdown` and :func:`checklist_json`."""

    plan_name: str
    profile: RuleProfile
    disclaimer: str
    time_zone: str
    launch_time: datetime
    classification: Classification | None
    notices: tuple[NoticeItem, ...]
    draft: tuple[tuple[str, str, str], ...]
    items: tuple[ChecklistItem, ...]
    forecast_dir: str | None

    @property
    def blocking_failures(self) -> tuple[ChecklistItem, ...]:
        """Items that fail and block."""
        return tuple(i for i in self.items if i.status == "fail" and i.blocking)

    @property
    def counts(self) -> dict[str, int]:
        """Number of items per status."""
        return {s: sum(1 for i in self.items if i.status == s) for s in STATUSES}


# ----------------------------------------------------------------------------------------------
# forecast


@dataclass(frozen=True)
class ForecastData:
    """What the checklist reads from a forecast folder: ``summary.json`` and the nominal
    ``track.csv``.
    """

    directory: str
    summary: dict[str, Any]
    time_s: np.ndarray | None
    lat: np.ndarray | None
    lon: np.ndarray | None
    alt_m: np.ndarray | None
    phase: tuple[str, ...] | None


def read_forecast(directory: str | Path) -> ForecastData:
    """Read a forecast folder written by ``balloonpath forecast`` (shapes in docs/design.md).

    Raises
    ------
    InputDataError
        If summary.json is missing or not JSON, or track.csv lacks a column or has a bad row.
    """
    folder = Path(directory)
    summary_path = folder / "summary.json"
    if not summary_path.exists():
        raise input_error(
            summary_path,
            "file",
            f"not found in {folder}",
            "run balloonpath forecast PLAN --out DIR first and pass --forecast DIR",
        )
    try:
        summary = json.loads(summary_path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise input_error(
            summary_path,
            "file",
            f"is not valid JSON ({exc})",
            "run the forecast again to rewrite it",
        ) from None
    if not isinstance(summary, dict):
        raise input_error(
            summary_path, "top level", "is not a JSON object", "run the forecast again"
        )
    track_path = folder / "track.csv"
    if not track_path.exists():
        return ForecastData(str(folder), summary, None, None, None, None, None)
    with track_path.open(encoding="utf-8", newline="") as fh:
        reader = csv.DictReader(fh)
        need = ("time", "latitude", "longitude", "altitude_m", "phase")
        missing = [c for c in need if c not in (reader.fieldnames or [])]
        if missing:
            raise input_error(
                track_path,
                "header",
                f"lacks column(s) {', '.join(missing)}",
                "use the track.csv written by balloonpath forecast",
            )
        rows = list(reader)
    t, la, lo, al, ph = [], [], [], [], []
    for i, row in enumerate(rows, start=2):
        try:
            t.append(parse_iso(row["time"]))
            la.append(float(row["latitude"]))
            lo.append(float(row["longitude"]))
            al.append(float(row["altitude_m"]))
        except (TypeError, ValueError):
            raise input_error(
                track_path,
                f"line {i}",
                "has a value that is not a time or number",
                "use the track.csv written by balloonpath forecast",
            ) from None
        ph.append(row["phase"])
    return ForecastData(
        str(folder), summary, np.array(t), np.array(la), np.array(lo), np.array(al), tuple(ph)
    )


def _dig(d: Any, *keys: str) -> Any:
    for k in keys:
        if not isinstance(d, dict) or k not in d:
            return None
        d = d[k]
    return d


def _time(text: Any) -> datetime | None:
    if not isinstance(text, str) or not text:
        return None
    try:
        return datetime.fromtimestamp(parse_iso(text), tz=UTC)
    except ValueError:
        return None


# ------------------------------------------------------------------------------------------------
# the sun


def sun_times(
    lat: float, lon: float, day: date, tz: str | ZoneInfo
) -> tuple[datetime | None, datetime | None]:
    """Sunrise and sunset on the *local* date ``day`` at a point (None when the sun does not rise or
    set).

    Notes
    -----
    astral's ``sun()`` takes the date in the time zone passed as ``tzinfo``; without it the date is
    a UTC
    date, and west of Greenwich the "sunset" returned falls on the previous local evening
    (REFERENCES.md §13,
    the Boulder pitfall). Rise and set use 0.833 deg of refraction plus semi-diameter [NOAA-SUN].
    """
    from astral import Observer
    from astral.sun import sunrise, sunset

    zone = resolve_zone(tz)
    obs = Observer(latitude=float(lat), longitude=float(lon))
    try:
        rise = sunrise(obs, date=day, tzinfo=zone)
    except ValueError:
        rise = None
    try:
        set_ = sunset(obs, date=day, tzinfo=zone)
    except ValueError:
        set_ = None
    return rise, set_


def in_darkness(lat: float, lon: float, moment: datetime, tz: str | ZoneInfo) -> bool | None:
    """True when ``moment`` is before sunrise or after sunset of its local date at the point.

    None when the sun neither rises nor sets that day (polar day or night; decide by hand).
    """
    zone = resolve_zone(tz)
    local = moment.astimezone(zone)
    rise, set_ = sun_times(lat, lon, local.date(), zone)
    if rise is None or set_ is None:
        return None
    return bool(local < rise or local > set_)


def _time_zone_at(lat: float, lon: float, fallback: str) -> str:
    try:
        from timezonefinder import TimezoneFinder

        name = TimezoneFinder().timezone_at(lat=float(lat), lng=float(lon))
    except Exception:  # noqa: BLE001 - optional lookup; fall back to the plan's zone
        name = None
    return name or fallback


# --------------------------------------------------------------------------------------------
# formatting


def _m_ft(m: float) -> str:
    return f"{m:,.0f} m ({m / FOOT_M:,.0f} ft)"


def _kg_lb(kg: float) -> str:
    return f"{kg:.3f} kg ({kg / POUND_KG:.2f} lb)"


def _dur(seconds: float) -> str:
    minutes = int(round(seconds / 60.0))
    return f"{minutes // 60} h {minutes % 60:02d} min"


def _latlon(lat: float, lon: float) -> str:
    return f"{abs(lat):.4f}°{'N' if lat >= 0 else 'S'} {abs(lon):.4f}°{'E' if lon >= 0 else 'W'}"


def _pct(p: float) -> str:
    return f"{100.0 * p:.1f} %"


# ----------------------------------------------------------------------------------------- track
# helpers


def _time_to_altitude(fc: ForecastData, target_m: float) -> float | None:
    if fc.alt_m is None or fc.time_s is None or fc.alt_m.size < 2:
        return None
    above = np.nonzero(fc.alt_m >= target_m)[0]
    if above.size == 0:
        return None
    k = int(above[0])
    if k == 0:
        return 0.0
    z0, z1, t0, t1 = fc.alt_m[k - 1], fc.alt_m[k], fc.time_s[k - 1], fc.time_s[k]
    frac = 0.0 if z1 == z0 else (target_m - z0) / (z1 - z0)
    return float(t0 + frac * (t1 - t0) - fc.time_s[0])


def surface_wind_from_track(fc: ForecastData, launch_elevation_m: float) -> float | None:
    """Mean horizontal speed (m/s) of the nominal track over its first ``SURFACE_LAYER_M`` of
    ascent.

    The balloon drifts with the air, so its ground speed near the surface is the forecast wind
    there.
    Uses the rows from launch up to the first row at or above the layer top (at least two rows).
    """
    if fc.time_s is None or fc.time_s.size < 2:
        return None
    agl = fc.alt_m - launch_elevation_m
    top = np.nonzero(agl >= SURFACE_LAYER_M)[0]
    k = int(top[0]) if top.size else fc.time_s.size - 1
    k = max(k, 1)
    dt = float(fc.time_s[k] - fc.time_s[0])
    if dt <= 0:
        return None
    dist, _ = inverse(fc.lat[0], fc.lon[0], fc.lat[k], fc.lon[k])
    return float(dist) / dt


def _low_segments(
    fc: ForecastData, launch_elev: float, landing_elev: float, height_m: float
) -> list[tuple[str, np.ndarray, np.ndarray]]:
    """(label, lon, lat) pieces of the nominal track below ``height_m`` above launch / landing
    ground.
    """
    out = []
    if fc.time_s is None or fc.time_s.size < 2:
        return out
    ph = np.array(fc.phase)
    z = fc.alt_m
    ascent = np.nonzero(ph == "ascent")[0]
    if ascent.size:
        agl = z - launch_elev
        end = int(ascent[0])
        while end + 1 < z.size and agl[end] < height_m:
            end += 1
        out.append(("ascent", fc.lon[: end + 1], fc.lat[: end + 1]))
    descent = np.nonzero((ph == "descent") | (ph == "landed"))[0]
    if descent.size:
        agl = z - landing_elev
        start = z.size - 1
        while start - 1 >= int(descent[0]) and agl[start] < height_m:
            start -= 1
        out.append(("descent", fc.lon[start:], fc.lat[start:]))
    return out


# ---------------------------------------------------------------------------------------------
# building


class _Items:
    def __init__(self) -> None:
        self.items: list[ChecklistItem] = []

    def add(
        self,
        section: str,
        title: str,
        status: str,
        text: str,
        *,
        blocking: bool = False,
        source: str = "",
        how: str = "",
    ) -> None:
        assert status in STATUSES
        self.items.append(
            ChecklistItem(section, title, status, " ".join(text.split()), blocking, source, how)
        )


def _packages(plan: Plan) -> tuple[list[Any], str]:
    if plan.payload is None:
        return [], "no [payload] table"
    if plan.payload.package:
        return list(plan.payload.package), ""
    return (
        [
            {
                "name": "whole payload",
                "mass_kg": plan.payload.mass_kg,
                "smallest_face_area_cm2": None,
            }
        ],
        "no [[payload.package]] entries: the whole payload is treated as one package",
    )


def _lift(plan: Plan) -> dict[str, Any]:
    """Free lift (and, without a forecast, burst altitude, time to burst, landing speed) in physics
    mode.
    """
    out: dict[str, Any] = {}
    if plan.balloon is None or plan.payload is None:
        return out
    b, p = plan.balloon, plan.payload
    try:
        from balloonpath.flight.vertical import lift_plan_of

        lp = lift_plan_of(plan, warn=False)
        out.update(
            neck_lift_kg=lp.neck_lift_kg,
            free_lift_kg=lp.free_lift_kg,
            solved=lp.neck_lift_solved,
            burst_altitude_m=lp.burst_altitude_m,
            time_to_burst_s=lp.time_to_burst_s,
            ascent_m_s=lp.launch_ascent_rate_m_s,
            how="balloonpath.flight.lift.plan_lift",
        )
    except ImportError:
        if b.neck_lift_kg is not None:
            out.update(
                neck_lift_kg=b.neck_lift_kg,
                free_lift_kg=b.neck_lift_kg - p.mass_kg,
                solved=False,
                how="neck lift - payload mass",
            )
    except BalloonpathError as exc:
        out.update(error=str(exc))
    if plan.parachute is not None and p.mass_kg > 0:
        try:
            from balloonpath.flight.descent import plan_descent

            dp = plan_descent(
                p.mass_kg,
                plan.parachute.diameter_m,
                plan.parachute.drag_coefficient,
                start_altitude_m=out.get("burst_altitude_m", 30_000.0),
                landing_elevation_m=plan.launch.elevation_m,
            )
            out.update(
                landing_speed_m_s=dp.landing_rate_m_s, landing_energy_j=dp.landing_kinetic_energy_j
            )
        except (ImportError, BalloonpathError):
            pass
    return out


def _classification_items(it: _Items, plan: Plan, profile: RuleProfile) -> Classification | None:
    sec = "Payload class"
    pk, note = _packages(plan)
    if not profile.classes:
        it.add(
            sec,
            "Payload class",
            "info",
            f"The {profile.name} profile has no thresholds of its own; ask "
            f"{profile.authority} the questions listed below.",
            source=profile.name,
        )
        if not pk:
            return None
    if not pk:
        it.add(
            sec,
            "Payload class",
            "warn",
            "The plan has no [payload] table, so the payload cannot be "
            "classified; add [payload] mass_kg and [[payload.package]] entries (name, mass_kg, "
            "smallest_face_area_cm2).",
            source="plan",
        )
        return None
    susp = plan.payload.suspension_breaking_strength_n if plan.payload else None
    cls = classify_payload(pk, profile, susp)
    if note:
        it.add(
            sec,
            "Packages",
            "warn",
            note + "; add [[payload.package]] entries to classify each package.",
            source="plan",
        )
    for p in cls.packages:
        if p.area_density_kg_m2 is None:
            dens = "smallest face not entered"
        else:
            a_in2 = p.smallest_face_area_cm2 * 1e-4 / INCH_M**2
            dens = (
                f"smallest face {p.smallest_face_area_cm2:g} cm² ({a_in2:.2f} in²), "
                f"{p.area_density_kg_m2 / 10.0:.2f} g/cm² "
                f"({p.area_density_kg_m2 * INCH_M**2 / OUNCE_KG:.2f} "
                "oz/in²)"
            )
        it.add(sec, f"Package '{p.name}'", "info", f"{_kg_lb(p.mass_kg)}; {dens}.", source="plan")
    total = f"{len(cls.packages)} package(s), {_kg_lb(cls.total_mass_kg)} in total"
    if plan.payload is not None:
        total += f"; whole payload below the neck {_kg_lb(plan.payload.mass_kg)}"
    it.add(sec, "Total payload", "info", total + ".", source="plan")
    if susp is None:
        it.add(
            sec,
            "Suspension",
            "warn",
            "Breaking strength of the suspension not entered; set [payload] "
            "suspension_breaking_strength_n (force needed to separate payload and balloon).",
            source="plan",
        )
    else:
        it.add(
            sec,
            "Suspension",
            "info",
            f"Separates at {susp:,.0f} N ({susp / POUND_FORCE_N:.1f} lbf) as entered.",
            source="plan",
        )
    if profile.classes:
        met = [r for r in cls.results if r.met]
        why = "; ".join(f"{r.label} [{r.source}]" for r in met if r.class_name == cls.class_name)
        text = f"Class '{cls.class_name}' as entered: {cls.meaning}."
        if why:
            text += f" Criteria met: {why}."
        if cls.assumed:
            text += (
                " Some criteria could not be decided, so the higher class is assumed; enter "
                + ", ".join(cls.missing)
                + "."
            )
        text += " Check with your aviation authority."
        it.add(
            sec,
            "Payload class",
            "warn" if cls.assumed else "info",
            text,
            source=profile.name,
            how="memory" if any(r.how == "memory" for r in met) else "read",
        )
    return cls


def _equipment_items(
    it: _Items, plan: Plan, profile: RuleProfile, cls: Classification | None, darkness: bool | None
) -> None:
    if cls is None:
        return
    sec = "Equipment"
    for rule in profile.equipment:
        if cls.class_name not in rule.applies_to:
            continue
        if rule.when == "darkness" and darkness is False:
            it.add(
                sec,
                rule.label,
                "info",
                f"{rule.title}: not needed for a flight entirely in daylight as "
                "forecast; needed if the launch slips toward sunset or sunrise.",
                source=rule.source,
                how=rule.how,
            )
            continue
        cond = (
            ""
            if rule.when == "always"
            else (
                " (part of the flight is between sunset and sunrise)"
                if darkness
                else " (needed if any part of the flight is between sunset and sunrise)"
            )
        )
        value = getattr(plan.checklist, rule.plan_key)
        if value is None:
            it.add(
                sec,
                rule.label,
                "warn",
                f"Required for class '{cls.class_name}'{cond}: {rule.title}. Not "
                f"entered: set [checklist] {rule.plan_key}.",
                source=rule.source,
                how=rule.how,
            )
            continue
        ok = (
            value >= rule.minimum
            if rule.minimum is not None and not isinstance(value, bool)
            else bool(value)
        )
        if ok:
            it.add(
                sec,
                rule.label,
                "pass",
                f"{rule.title}{cond}: fitted as entered ({rule.plan_key} = {str(value).lower()}).",
                source=rule.source,
                how=rule.how,
            )
        elif rule.either_or:
            it.add(
                sec,
                rule.label,
                "warn",
                f"{rule.title}{cond}: {rule.plan_key} = {str(value).lower()}; the "
                "profile accepts an alternative, make sure you have it.",
                source=rule.source,
                how=rule.how,
            )
        else:
            it.add(
                sec,
                rule.label,
                "fail",
                f"Required for class '{cls.class_name}'{cond}: {rule.title}. The "
                f"plan says {rule.plan_key} = {str(value).lower()}.",
                blocking=True,
                source=rule.source,
                how=rule.how,
            )


def _forecast_items(
    it: _Items, plan: Plan, fc: ForecastData | None, profile: RuleProfile, landing_tz: str
) -> None:
    sec = "Forecast risks"
    if fc is None:
        it.add(
            sec,
            "Forecast",
            "info",
            "No forecast given: run balloonpath forecast and pass --forecast DIR "
            "to check landing risks, sunset and the low-altitude track.",
            source="checklist",
        )
        return
    s, w = fc.summary, plan.windows
    pw = _dig(s, "probabilities", "water")
    if pw is None:
        it.add(
            sec,
            "Water landing",
            "info",
            "Probability of landing in water not computed; set [zones] "
            "water = true and run the forecast again.",
            source="forecast",
        )
    else:
        lim = w.max_water_probability
        bad = lim is not None and pw > lim
        it.add(
            sec,
            "Water landing",
            "fail" if bad else ("warn" if pw > 0 else "pass"),
            f"Probability of landing in water {_pct(pw)}"
            + (f" (team limit {_pct(lim)})." if lim is not None else "."),
            source="[windows] max_water_probability" if lim is not None else "forecast",
            how="forecast",
        )
    avoid = _dig(s, "probabilities", "avoid") or {}
    for name in sorted(avoid):
        p = avoid[name]
        if p is None:
            continue
        lim = w.avoid_probability_max
        bad = lim is not None and p > lim
        it.add(
            sec,
            f"Landing in '{name}'",
            "fail" if bad else ("warn" if p > 0 else "pass"),
            f"Probability of landing in avoid area '{name}' {_pct(p)}"
            + (f" (team limit {_pct(lim)})." if lim is not None else "."),
            source="[windows] avoid_probability_max" if lim is not None else "forecast",
            how="forecast",
        )
    area = _dig(s, "ensemble", "region_90_area_km2")
    ell = [
        e
        for e in (_dig(s, "ensemble", "ellipses") or [])
        if abs(float(e.get("probability", 0)) - 0.9) < 1e-6
    ]
    if area is not None or ell:
        parts = []
        if area is not None:
            parts.append(f"90 % landing region {area:,.1f} km²")
        if ell:
            parts.append(
                f"90 % ellipse {ell[0]['semi_major_m'] / 1e3:.1f} × "
                f"{ell[0]['semi_minor_m'] / 1e3:.1f} km "
                "(semi-axes)"
            )
        lim = w.max_zone_km
        bad = lim is not None and ell and ell[0]["semi_major_m"] / 1e3 > lim
        it.add(
            sec,
            "Landing zone size",
            "fail" if bad else "info",
            "; ".join(parts)
            + (f" (team limit {lim:g} km semi-major)." if lim is not None else "."),
            source="[windows] max_zone_km" if lim is not None else "forecast",
            how="forecast",
        )
    lat, lon = _dig(s, "landing", "latitude"), _dig(s, "landing", "longitude")
    t_land = _time(_dig(s, "landing", "time"))
    if lat is not None and lon is not None and t_land is not None:
        zone = resolve_zone(landing_tz)
        local = t_land.astimezone(zone)
        rise, set_ = sun_times(lat, lon, local.date(), zone)
        p95 = _time(_dig(s, "ensemble", "landing_time_p95"))
        if set_ is None or rise is None:
            it.add(
                sec,
                "Landing and sunset",
                "warn",
                "The sun does not rise or set at the landing point that "
                "day; plan the recovery light by hand.",
                source="astral",
            )
        else:
            margin_min = (set_ - t_land).total_seconds() / 60.0
            need = w.latest_landing_before_sunset_min
            text = (
                f"Nominal landing {format_time(t_land, zone)}; sunset at the landing point "
                f"{format_time(set_, zone)} ({margin_min:+.0f} min before sunset)"
            )
            if p95 is not None:
                text += f"; 95 % of members have landed by {format_time(p95, zone)}"
            dark = t_land > set_ or t_land < rise or (p95 is not None and p95 > set_)
            if need is not None and margin_min < need:
                status = "fail"
                text += f"; team wants {need:g} min before sunset"
            else:
                status = "warn" if dark else "pass"
            if dark:
                text += "; recovery may be in darkness"
            it.add(
                sec,
                "Landing and sunset",
                status,
                text + ".",
                source="[windows] latest_landing_before_sunset_min"
                if need is not None
                else "astral",
                how="forecast",
            )
    _low_altitude_item(it, plan, fc, profile)


def _low_altitude_item(it: _Items, plan: Plan, fc: ForecastData, profile: RuleProfile) -> None:
    sec = "Forecast risks"
    height = plan.checklist.low_altitude_check_m
    rule_note = ""
    if profile.low_altitude_rule_m is not None and profile.low_altitude_rule_m > height:
        height = profile.low_altitude_rule_m
        rule_note = f" (raised to the profile's {profile.low_altitude_rule_m:g} m)"
    src = profile.low_altitude_rule_source or "[checklist] low_altitude_check_m"
    how = profile.low_altitude_rule_how if profile.low_altitude_rule_source else "team"
    if plan.zones.avoid is None:
        it.add(
            sec,
            "Low-altitude track",
            "info",
            f"No avoid areas in the plan ([zones] avoid): check by eye "
            f"that the first {height:g} m of ascent and the last {height:g} m of descent "
            "do not cross "
            "towns, crowds, airfields or roads"
            + (f"; {profile.low_altitude_rule_text}" if profile.low_altitude_rule_text else "")
            + ".",
            source=src,
            how=how,
        )
        return
    if fc.time_s is None:
        it.add(
            sec,
            "Low-altitude track",
            "info",
            "The forecast folder has no track.csv; the low-altitude check needs it.",
            source="forecast",
        )
        return
    from shapely.geometry import LineString, Point

    from balloonpath.zones import _load_avoid

    areas = _load_avoid(plan.zones.avoid)
    launch_elev = float(_dig(fc.summary, "launch", "elevation_m") or plan.launch.elevation_m)
    land_elev = _dig(fc.summary, "landing", "elevation_m")
    land_elev = float(land_elev) if land_elev is not None else launch_elev
    hits = []
    for label, lon, lat in _low_segments(fc, launch_elev, land_elev, height):
        geom = LineString(np.column_stack([lon, lat])) if lon.size > 1 else Point(lon[0], lat[0])
        for name, shp in areas:
            if geom.intersects(shp):
                hits.append(f"{label} crosses '{name}'")
    if hits:
        it.add(
            sec,
            "Low-altitude track",
            "fail",
            f"Below {height:g} m above ground{rule_note} the nominal "
            f"track {'; '.join(hits)}. Move the launch site or wait for other winds.",
            blocking=True,
            source=src,
            how=how,
        )
    else:
        it.add(
            sec,
            "Low-altitude track",
            "pass",
            f"Below {height:g} m above ground{rule_note} the nominal "
            f"track crosses none of the {len(areas)} avoid area(s) as forecast.",
            source=src,
            how=how,
        )


def _launch_items(it: _Items, plan: Plan, fc: ForecastData | None, lift: dict[str, Any]) -> None:
    sec = "Launch conditions"
    c = plan.checklist
    wind = surface_wind_from_track(fc, plan.launch.elevation_m) if fc is not None else None
    if wind is None:
        it.add(
            sec,
            "Surface wind",
            "info",
            f"Measure the wind at the site before filling; the team limit is "
            f"{c.max_surface_wind_m_s:g} m/s.",
            source="[checklist] max_surface_wind_m_s",
            how="team",
        )
    else:
        bad = wind > c.max_surface_wind_m_s
        it.add(
            sec,
            "Surface wind",
            "fail" if bad else "pass",
            f"Forecast wind over the first {SURFACE_LAYER_M:g} m {wind:.1f} m/s "
            f"({wind * 3600 / 1852:.0f} kt), team limit {c.max_surface_wind_m_s:g} m/s; "
            "measure it at the "
            "site too.",
            blocking=bad,
            source="[checklist] max_surface_wind_m_s",
            how="team",
        )
    if plan.mode == "rates":
        it.add(
            sec,
            "Free lift",
            "info",
            "Rates mode: weigh the neck lift at the fill; the free lift must be "
            "positive with margin.",
            source="[checklist] min_free_lift_fraction",
            how="team",
        )
    elif "error" in lift:
        it.add(
            sec,
            "Free lift",
            "fail",
            f"Lift could not be computed: {lift['error']}",
            blocking=True,
            source="balloonpath.flight.lift",
        )
    elif "free_lift_kg" in lift and plan.payload is not None:
        fl, m = lift["free_lift_kg"], plan.payload.mass_kg
        need = c.min_free_lift_fraction * m
        frac = fl / m if m > 0 else math.inf
        bad = fl <= 0 or fl < need
        how = "solved for the target ascent rate" if lift.get("solved") else "from the neck lift"
        it.add(
            sec,
            "Free lift",
            "fail" if bad else "pass",
            f"Free lift {fl:.3f} kg ({how}; {lift['how']}) = {frac:.0%} of the payload; "
            "the team minimum "
            f"is {c.min_free_lift_fraction:.0%} ({need:.3f} kg).",
            blocking=bad,
            source="[checklist] min_free_lift_fraction",
            how="team",
        )
    speed = energy = None
    origin = ""
    if fc is not None:
        speed = _dig(fc.summary, "landing", "vertical_speed_m_s")
        energy = _dig(fc.summary, "landing", "kinetic_energy_j")
        origin = "forecast"
    if speed is None and "landing_speed_m_s" in lift:
        speed, energy, origin = (
            lift["landing_speed_m_s"],
            lift["landing_energy_j"],
            "parachute model",
        )
    if speed is None:
        it.add(
            sec,
            "Landing speed",
            "info",
            "Landing speed not known (no forecast, no parachute in the "
            "plan); check it with a drop test or the forecast.",
            source="checklist",
        )
        return
    speed = abs(float(speed))
    lims = []
    bad = False
    if c.max_landing_speed_m_s is not None:
        lims.append(f"team limit {c.max_landing_speed_m_s:g} m/s")
        bad |= speed > c.max_landing_speed_m_s
    text = (
        f"Under the parachute the payload lands at {speed:.1f} m/s "
        f"({speed / FOOT_M * 60:,.0f} ft/min)"
    )
    if energy is not None:
        text += f" with {float(energy):,.0f} J"
        if c.max_landing_energy_j is not None:
            lims.append(f"team limit {c.max_landing_energy_j:g} J")
            bad |= float(energy) > c.max_landing_energy_j
    text += f" ({origin}" + (", " + ", ".join(lims) if lims else "") + ")."
    it.add(
        sec,
        "Landing speed and energy",
        "fail" if bad else ("pass" if lims else "info"),
        text,
        blocking=bad,
        source="[checklist] max_landing_speed_m_s / max_landing_energy_j" if lims else origin,
        how="team" if lims else "forecast",
    )


def _caution_items(it: _Items, plan: Plan) -> None:
    sec = "Cautions"
    gas = plan.balloon.gas if plan.balloon is not None else None
    if gas in ("hydrogen", None):
        pre = (
            ""
            if gas == "hydrogen"
            else "The plan does not name the gas ([balloon] gas); if it is hydrogen: "
        )
        src = "common practice"
        it.add(
            sec,
            "Hydrogen: ignition",
            "warn",
            pre + "Hydrogen burns in air over a wide range of mixtures "
            "and its flame is nearly invisible by day: no smoking, open flames, sparks or "
            "running engines "
            "near the fill; keep phones and radios away from the neck.",
            source=src,
            how="common practice",
        )
        it.add(
            sec,
            "Hydrogen: static",
            "warn",
            pre + "Ground the cylinder, regulator and filling hose; fillers "
            "wear cotton, not synthetic clothing, and touch a grounded point before handling "
            "the neck.",
            source=src,
            how="common practice",
        )
        it.add(
            sec,
            "Hydrogen: ventilation",
            "warn",
            pre + "Fill outdoors or in a well ventilated shelter; "
            "hydrogen rises and gathers under roofs; keep cylinders upright, chained and shaded.",
            source=src,
            how="common practice",
        )
    it.add(
        sec,
        "Power lines",
        "warn",
        "Launch well clear of overhead lines and trees downwind; never try to "
        "recover a payload caught on a power line: call the line operator.",
        source="common practice",
        how="common practice",
    )
    it.add(
        sec,
        "Recovery: private land",
        "info",
        "Ask the landowner before entering fields or yards; leave "
        "gates as found; stay out of crops and livestock.",
        source="common practice",
        how="common practice",
    )
    it.add(
        sec,
        "Recovery: roads",
        "info",
        "Park off the road, wear high-visibility clothing, do not chase "
        "the balloon while driving; the driver only drives.",
        source="common practice",
        how="common practice",
    )


def _watch_items(it: _Items, profile: RuleProfile, cls: Classification | None) -> None:
    sec = "Watch on the day"
    for w in profile.watch:
        if cls is None or not w.applies_to or cls.class_name in w.applies_to:
            it.add(sec, "Operating limit", "info", w.text, source=w.source, how=w.how)
    for q in profile.questions:
        it.add("Ask the authority", "Question", "info", q, source=profile.name, how="")


def _draft(
    plan: Plan, fc: ForecastData | None, lift: dict[str, Any], tz: str, launch_time: datetime
) -> tuple[tuple[str, str, str], ...]:
    """(key, label, value) rows of the draft notice; missing values say so."""
    c, lt = plan.checklist, plan.launch
    s = fc.summary if fc is not None else {}
    todo = "(enter before filing)"
    site = (lt.site_name + ", " if lt.site_name else "") + _latlon(lt.latitude, lt.longitude)
    site += f", ground {_m_ft(lt.elevation_m)}"
    max_alt = _dig(s, "max_altitude_m")
    t_top = _dig(s, "time_to_burst_s")
    if max_alt is None:
        if plan.rates is not None:
            max_alt = plan.rates.burst_altitude_m
            t_top = (max_alt - lt.elevation_m) / plan.rates.ascent_m_s
        else:
            max_alt, t_top = lift.get("burst_altitude_m"), lift.get("time_to_burst_s")
        if plan.float is not None:
            max_alt = (
                plan.float.altitude_m if max_alt is None else min(max_alt, plan.float.altitude_m)
            )
        if plan.cutdown is not None and plan.cutdown.altitude_m is not None and max_alt is not None:
            max_alt = min(max_alt, plan.cutdown.altitude_m)
    cruise = todo if max_alt is None else _m_ft(float(max_alt)) + " (burst or float altitude)"
    if t_top is None:
        t_cruise = todo
    else:
        t_cruise = f"{_dur(float(t_top))} after launch"
        if fc is not None and max_alt is not None and float(max_alt) > FT60000_M:
            t60 = _time_to_altitude(fc, FT60000_M)
            if t60 is not None:
                t_cruise += f"; {_dur(t60)} to 60,000 ft ({FT60000_M:,.0f} m)"
    b = _dig(s, "burst")
    land = _dig(s, "landing") or {}
    if fc is not None and land.get("latitude") is not None:
        parts = []
        if b and b.get("latitude") is not None:
            parts.append(
                f"rises to burst near {_latlon(b['latitude'], b['longitude'])}"
                + (f" at {format_time(_time(b.get('time')), tz)}" if b.get("time") else "")
            )
        parts.append(
            f"descends to land {land.get('distance_m', 0) / 1e3:,.1f} km from the launch site, "
            f"bearing {land.get('bearing_deg', 0):.0f}° true"
        )
        trajectory = "; ".join(parts)
        land_at = format_time(_time(land.get("time")), tz)
        landing = f"{_latlon(land['latitude'], land['longitude'])} at {land_at}"
        ell = [
            e
            for e in (_dig(s, "ensemble", "ellipses") or [])
            if abs(float(e.get("probability", 0)) - 0.9) < 1e-6
        ]
        if ell:
            semi = ell[0]["semi_major_m"] / 1e3
            landing += f"; 90 % of forecast landings within {semi:.1f} km of the centre"
        p05, p95 = (
            _time(_dig(s, "ensemble", "landing_time_p05")),
            _time(_dig(s, "ensemble", "landing_time_p95")),
        )
        if p05 is not None and p95 is not None:
            landing += f"; landing between {format_time(p05, tz)} and {format_time(p95, tz)}"
    else:
        trajectory = landing = "(run balloonpath forecast and pass --forecast DIR)"
    ft = _dig(s, "flight_time_s")
    duration = _dur(float(ft)) if ft is not None else todo
    if plan.balloon is not None:
        bl = plan.balloon
        balloon = (
            f"latex sounding balloon, envelope {bl.envelope_mass_kg * 1000:.0f} g, bursts at about "
            f"{bl.burst_diameter_m:g} m diameter, filled with {bl.gas}"
        )
    else:
        balloon = (
            f"latex sounding balloon, ascent about {plan.rates.ascent_m_s:g} m/s"
            if plan.rates
            else todo
        )
    p = plan.payload
    if p is not None:
        names = (
            ", ".join(f"{k.name} {k.mass_kg:g} kg" for k in p.package)
            if p.package
            else "one package"
        )
        payload = f"{_kg_lb(p.mass_kg)} below the neck ({names})"
        if plan.parachute is not None:
            payload += f"; parachute {plan.parachute.diameter_m:g} m"
        susp = (
            f"{p.suspension_length_m:g} m ({p.suspension_length_m / FOOT_M:.0f} ft)"
            if (p.suspension_length_m is not None)
            else todo
        )
        if p.suspension_breaking_strength_n is not None:
            susp += f", separates at {p.suspension_breaking_strength_n:,.0f} N"
    else:
        payload = susp = todo
    rows = [
        ("identification", "Flight identification", c.balloon_id or todo),
        ("launch_site", "Launch site", site),
        ("launch_time", "Planned launch time", format_time(launch_time, tz)),
        ("cruise_altitude", "Highest altitude", cruise),
        ("time_to_cruise", "Time to reach it", t_cruise),
        ("trajectory", "Forecast track", trajectory),
        ("landing", "Forecast landing", landing),
        ("duration", "Flight duration", duration),
        ("balloon", "Balloon", balloon),
        ("suspension", "Suspension line", susp),
        ("payload", "Payload", payload),
        ("contact", "Operator contact", c.contact or todo),
    ]
    return tuple(rows)


def build_checklist(
    plan: Plan,
    forecast_dir: str | Path | None = None,
    profile: RuleProfile | str | Path | None = None,
) -> Checklist:
    """Compute the checklist for a plan, optionally with a forecast folder and another profile.

    Parameters
    ----------
    plan : Plan
    forecast_dir : str or Path, optional
        Folder written by ``balloonpath forecast`` (summary.json, track.csv).
    profile : RuleProfile, str or Path, optional
        A loaded profile, a built-in name or a TOML path; default the plan's ``[checklist] rules``.

    Returns
    -------
    Checklist
    """
    if not isinstance(profile, RuleProfile):
        name = profile if profile is not None else plan.checklist.rules
        if (
            isinstance(name, str)
            and name not in ("us-part101", "icao-annex2", "generic")
            and not Path(name).is_absolute()
        ):
            candidate = plan.path.parent / name
            name = candidate if candidate.exists() else name
        profile = load_profile(name)
    fc = read_forecast(forecast_dir) if forecast_dir is not None else None
    lt = plan.launch
    tz = lt.time_zone or _time_zone_at(lt.latitude, lt.longitude, "UTC")
    resolve_zone(tz)
    launch_time = _time(_dig(fc.summary, "launch", "time")) if fc is not None else None
    launch_time = launch_time or lt.time.astimezone(UTC)
    it = _Items()
    cls = _classification_items(it, plan, profile)
    lift = _lift(plan)
    s = fc.summary if fc is not None else {}
    t_burst, t_land = _time(_dig(s, "burst", "time")), _time(_dig(s, "landing", "time"))
    notices = notice_schedule(
        launch_time,
        profile,
        tz,
        descent_time=t_burst,
        landing_time=t_land,
        class_name=cls.class_name if cls is not None else None,
    )
    sec = "Notices"
    applicable = [n for n in notices if n.applies]
    if cls is not None and profile.notices and not applicable:
        it.add(
            sec,
            "Notices",
            "info",
            f"The profile lists no notice for class '{cls.class_name}' as entered. "
            "Many teams still tell the nearest air traffic unit before a launch (common practice); "
            "check with your aviation authority.",
            source=profile.name,
            how="common practice",
        )
    land_lat, land_lon = _dig(s, "landing", "latitude"), _dig(s, "landing", "longitude")
    landing_tz = tz
    if land_lat is not None and land_lon is not None:
        landing_tz = _time_zone_at(land_lat, land_lon, tz)
    dark_launch = in_darkness(lt.latitude, lt.longitude, launch_time, tz)
    darkness: bool | None = dark_launch
    if t_land is not None and land_lat is not None:
        dark_land = in_darkness(land_lat, land_lon, t_land, landing_tz)
        p95 = _time(_dig(s, "ensemble", "landing_time_p95"))
        dark_p95 = in_darkness(land_lat, land_lon, p95, landing_tz) if p95 is not None else False
        long_flight = (t_land - launch_time) > timedelta(hours=12)
        flags = [dark_launch, dark_land, dark_p95]
        darkness = (
            True
            if any(f is True for f in flags) or long_flight
            else (None if any(f is None for f in flags) else False)
        )
    elif dark_launch is False:
        darkness = None  # landing time unknown: part of the flight could reach sunset
    _equipment_items(it, plan, profile, cls, darkness)
    _forecast_items(it, plan, fc, profile, landing_tz)
    _launch_items(it, plan, fc, lift)
    if dark_launch:
        it.add(
            "Launch conditions",
            "Launch in darkness",
            "warn",
            "The planned launch is between sunset and "
            "sunrise at the site; lights on the payload and the ground crew.",
            source="astral",
        )
    _caution_items(it, plan)
    _watch_items(it, profile, cls)
    draft = _draft(plan, fc, lift, tz, launch_time)
    return Checklist(
        plan_name=plan.path.name,
        profile=profile,
        disclaimer=DISCLAIMER,
        time_zone=str(tz),
        launch_time=launch_time,
        classification=cls,
        notices=tuple(notices),
        draft=draft,
        items=tuple(it.items),
        forecast_dir=str(forecast_dir) if forecast_dir else None,
    )


# --------------------------------------------------------------------------------------------
# rendering


_MARK = {"pass": "ok", "fail": "FAIL", "warn": "check", "info": "note"}


def _status_word(item: ChecklistItem) -> str:
    return "FAIL (blocking)" if item.status == "fail" and item.blocking else _MARK[item.status]


def verdict(checklist: Checklist) -> str:
    """One sentence on the blocking items, never a clearance."""
    n = len(checklist.blocking_failures)
    if n:
        return (
            f"{n} blocking item(s) fail: resolve them before launch. Check with your aviation "
            "authority."
        )
    return (
        "No blocking item fails as entered. This is not a clearance: check with your aviation "
        "authority."
    )


def _md_cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def render_markdown(checklist: Checklist) -> str:
    """The checklist as Markdown, laid out to print on about one page."""
    c, p = checklist, checklist.profile
    lines = [
        f"# Pre-flight checklist: {c.plan_name}",
        "",
        f"> **{c.disclaimer}**",
        "",
        f"- Launch: {format_time(c.launch_time, c.time_zone)}, time zone {c.time_zone}",
        f"- Rules profile: {p.title} ({p.name}); authority: {p.authority}",
    ]
    if c.classification is not None:
        cl = c.classification
        lines.append(
            f"- Payload class as entered: **{cl.class_name}**"
            + (" (assumed: data missing)" if cl.assumed else "")
        )
    lines.append(f"- Forecast: {c.forecast_dir or 'none given'}")
    lines += ["", f"**{verdict(c)}**", ""]
    applicable = [n for n in c.notices if n.applies]
    if applicable:
        lines += ["## Notices to file", "", "| Notice | To | When | Source |", "|---|---|---|---|"]
        for n in applicable:
            src = n.source + (" (from memory)" if n.how == "memory" else "")
            when = describe_notice_timing(n, c.time_zone) + (f"; {n.note}" if n.note else "")
            lines.append(
                f"| {_md_cell(n.title)} | {_md_cell(n.to)} | {_md_cell(when)} | {_md_cell(src)} |"
            )
        lines.append("")
    lines += [
        "## Draft notice (our wording; check it against what your authority asks for)",
        "",
        "| Field | Value |",
        "|---|---|",
    ]
    lines += [f"| {label} | {_md_cell(value)} |" for _, label, value in c.draft]
    lines.append("")
    memory = sorted({n.source for n in applicable if n.content and n.content_how == "memory"})
    if memory:
        lines += [
            f"_What the notice asks for is listed from memory ({', '.join(memory)}); ask the "
            "authority for its own form._",
            "",
        ]
    sections: dict[str, list[ChecklistItem]] = {}
    for item in c.items:
        sections.setdefault(item.section, []).append(item)
    for name, items in sections.items():
        lines += [f"## {name}", ""]
        for i in items:
            src = ""
            if i.source:
                src = f" [{i.source}" + (", from memory" if i.how == "memory" else "") + "]"
            box = "[x]" if i.status == "pass" else "[ ]"
            lines.append(f"- {box} **{_status_word(i)}** {i.title}: {i.text}{src}")
        lines.append("")
    if c.classification is not None and p.classes:
        lines += [
            "## Classification detail",
            "",
            "| Class | Criterion | Threshold | Met | Source |",
            "|---|---|---|---|---|",
        ]
        for r in c.classification.results:
            met = {True: "yes", False: "no", None: "unknown"}[r.met]
            src = r.source + (" (from memory)" if r.how == "memory" else "")
            lines.append(
                f"| {r.class_name} | {_md_cell(r.label)} | {_md_cell(r.detail)} | {met} "
                f"| {_md_cell(src)} |"
            )
        lines.append("")
    if p.note:
        lines += [f"_{p.note}_", ""]
    lines += ["---", "", c.disclaimer, ""]
    return "\n".join(lines)


def checklist_json(checklist: Checklist) -> dict[str, Any]:
    """The checklist as a JSON-ready dict (stable keys; times ISO 8601 UTC)."""
    c = checklist

    def iso(t: datetime | None) -> str | None:
        return None if t is None else t.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")

    cls = c.classification
    return {
        "disclaimer": c.disclaimer,
        "plan": c.plan_name,
        "profile": {
            "name": c.profile.name,
            "title": c.profile.title,
            "authority": c.profile.authority,
        },
        "launch_time": iso(c.launch_time),
        "time_zone": c.time_zone,
        "forecast": c.forecast_dir,
        "verdict": verdict(c),
        "blocking_failures": len(c.blocking_failures),
        "counts": c.counts,
        "classification": None
        if cls is None
        else {
            "class": cls.class_name,
            "meaning": cls.meaning,
            "regulated": cls.regulated,
            "assumed": cls.assumed,
            "missing": list(cls.missing),
            "total_mass_kg": round(cls.total_mass_kg, 6),
            "suspension_n": cls.suspension_n,
            "packages": [
                {
                    "name": k.name,
                    "mass_kg": k.mass_kg,
                    "smallest_face_area_cm2": k.smallest_face_area_cm2,
                    "area_density_g_cm2": None
                    if k.area_density_kg_m2 is None
                    else round(k.area_density_kg_m2 / 10.0, 6),
                }
                for k in cls.packages
            ],
            "criteria": [
                {
                    "class": r.class_name,
                    "label": r.label,
                    "threshold": r.detail,
                    "met": r.met,
                    "source": r.source,
                    "how": r.how,
                }
                for r in cls.results
            ],
        },
        "notices": [
            {
                "id": n.id,
                "title": n.title,
                "to": n.to,
                "applies": n.applies,
                "opens": iso(n.opens),
                "due": iso(n.due),
                "times": [iso(t) for t in n.times],
                "every_h": n.every_h,
                "anchor": n.anchor,
                "when": describe_notice_timing(n, c.time_zone),
                "source": n.source,
                "how": n.how,
            }
            for n in c.notices
        ],
        "draft": {k: {"label": label, "value": value} for k, label, value in c.draft},
        "items": [
            {
                "section": i.section,
                "title": i.title,
                "status": i.status,
                "blocking": i.blocking,
                "text": i.text,
                "source": i.source,
                "how": i.how,
            }
            for i in c.items
        ],
    }


def render_terminal(checklist: Checklist) -> list[Any]:
    """rich renderables for a terminal: header, notices, draft and one compact table per section."""
    from rich.panel import Panel
    from rich.table import Table
    from rich.text import Text

    c = checklist
    out: list[Any] = [
        Panel(Text(c.disclaimer, style="bold"), title=f"Pre-flight checklist: {c.plan_name}")
    ]
    head = Text()
    head.append(f"Launch {format_time(c.launch_time, c.time_zone)}  ·  profile {c.profile.name}")
    if c.classification is not None:
        head.append(
            f"  ·  class {c.classification.class_name}"
            + (" (assumed)" if c.classification.assumed else "")
        )
    out.append(head)
    out.append(Text(verdict(c), style="bold red" if c.blocking_failures else "bold"))
    applicable = [n for n in c.notices if n.applies]
    if applicable:
        t = Table(title="Notices to file", expand=True, title_justify="left")
        t.add_column("Notice", ratio=2)
        t.add_column("When", ratio=3)
        t.add_column("Source", ratio=1)
        for n in applicable:
            when = describe_notice_timing(n, c.time_zone) + (f"; {n.note}" if n.note else "")
            t.add_row(
                Text(f"{n.title} ({n.to})"),
                Text(when),
                Text(n.source + (" (memory)" if n.how == "memory" else ""), style="dim"),
            )
        out.append(t)
    d = Table(
        title="Draft notice (our wording)", expand=True, title_justify="left", show_header=False
    )
    d.add_column("Field", style="bold", ratio=1)
    d.add_column("Value", ratio=4)
    for _, label, value in c.draft:
        d.add_row(Text(label), Text(value))
    out.append(d)
    styles = {"pass": "green", "fail": "bold red", "warn": "yellow", "info": ""}
    sections: dict[str, list[ChecklistItem]] = {}
    for item in c.items:
        sections.setdefault(item.section, []).append(item)
    for name, items in sections.items():
        t = Table(
            title=name,
            expand=True,
            title_justify="left",
            show_header=False,
            box=None,
            padding=(0, 1),
        )
        t.add_column("Status", width=9, no_wrap=True)
        t.add_column("Item", ratio=1)
        t.add_column("Details", ratio=4)
        for i in items:
            detail = Text(i.text)
            if i.source:
                detail.append(
                    f"  [{i.source}" + (", from memory" if i.how == "memory" else "") + "]",
                    style="dim",
                )
            t.add_row(
                Text(_status_word(i).replace(" (blocking)", "!"), style=styles[i.status]),
                Text(i.title),
                detail,
            )
        out.append(t)
    out.append(Text(c.disclaimer, style="bold"))
    return out
