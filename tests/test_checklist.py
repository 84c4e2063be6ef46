"""Checks of the pre-flight checklist: payload classes at every threshold, notice timing, sunset,
outputs.

Sources (REFERENCES.md §9 and §13): 14 CFR 101.1(a)(4) (read), 101.35 (read), 101.37(a) timing
(read),
101.37(b) (from memory), 101.39 (read); ICAO Annex 2 App. 5 classes as in UK retained SERA App. 2
§1.1 (read);
ICAO notification timing (from memory); astral 3.2 documentation example and the Boulder date
pitfall.
Scenario places (Corvel Meadow, Lake Ostrin) are invented.
"""

from __future__ import annotations

import json
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from balloonpath.checklist import (
    DISCLAIMER,
    build_checklist,
    checklist_json,
    in_darkness,
    read_forecast,
    render_markdown,
    sun_times,
    surface_wind_from_track,
)
from balloonpath.checklist_rules import classify_payload, load_profile, notice_schedule
from balloonpath.cli import main
from balloonpath.errors import InputDataError, PlanError
from balloonpath.geodesy import forward
from balloonpath.plan import load_plan
from balloonpath.units import INCH_M, OUNCE_KG, POUND_FORCE_N, POUND_KG

US = load_profile("us-part101")
ICAO = load_profile("icao-annex2")

BELOW, AT, ABOVE = 1 - 1e-3, 1.0, 1 + 1e-3


def pkg(mass_kg: float, area_cm2: float | None = 1000.0, name: str = "box") -> dict:
    return {"name": name, "mass_kg": mass_kg, "smallest_face_area_cm2": area_cm2}


def area_cm2_for(mass_kg: float, density_kg_m2: float) -> float:
    return mass_kg / density_kg_m2 * 1e4


OZ_IN2 = OUNCE_KG / INCH_M**2  # 3 oz/in2 = 13.18 g/cm2 (REFERENCES.md §9a, computed)


# ----------------------------------------------------------------------------- US 14 CFR
# 101.1(a)(4)

US_CASES = [
    # (i) "more than four pounds" with a weight/size ratio "more than three ounces per square inch":
    # 14 CFR
    # 101.1(a)(4)(i) (read). Mass at the edge, density well above 3 oz/in2.
    ("101.1(a)(4)(i) mass below", [pkg(4 * POUND_KG * BELOW, 20.0)], 10.0, "outside-subpart-d"),
    ("101.1(a)(4)(i) mass at", [pkg(4 * POUND_KG * AT, 20.0)], 10.0, "outside-subpart-d"),
    ("101.1(a)(4)(i) mass above", [pkg(4 * POUND_KG * ABOVE, 20.0)], 10.0, "subpart-d"),
    # (i) density at the edge with a 5 lb package.
    (
        "101.1(a)(4)(i) density below",
        [pkg(5 * POUND_KG, area_cm2_for(5 * POUND_KG, 3 * OZ_IN2 * BELOW))],
        10.0,
        "outside-subpart-d",
    ),
    (
        "101.1(a)(4)(i) density at",
        [pkg(5 * POUND_KG, area_cm2_for(5 * POUND_KG, 3 * OZ_IN2))],
        10.0,
        "outside-subpart-d",
    ),
    (
        "101.1(a)(4)(i) density above",
        [pkg(5 * POUND_KG, area_cm2_for(5 * POUND_KG, 3 * OZ_IN2 * ABOVE))],
        10.0,
        "subpart-d",
    ),
    # (ii) "more than six pounds": 14 CFR 101.1(a)(4)(ii) (read); large face so (i) does not apply.
    ("101.1(a)(4)(ii) below", [pkg(6 * POUND_KG * BELOW, 5000.0)], 10.0, "outside-subpart-d"),
    ("101.1(a)(4)(ii) at", [pkg(6 * POUND_KG * AT, 5000.0)], 10.0, "outside-subpart-d"),
    ("101.1(a)(4)(ii) above", [pkg(6 * POUND_KG * ABOVE, 5000.0)], 10.0, "subpart-d"),
    # (iii) two or more packages "more than 12 pounds": 14 CFR 101.1(a)(4)(iii) (read); 3 x 4 lb
    # light boxes.
    ("101.1(a)(4)(iii) below", [pkg(4 * POUND_KG * BELOW, 5000.0)] * 3, 10.0, "outside-subpart-d"),
    ("101.1(a)(4)(iii) at", [pkg(4 * POUND_KG, 5000.0)] * 3, 10.0, "outside-subpart-d"),
    (
        "101.1(a)(4)(iii) above",
        [pkg(4 * POUND_KG, 5000.0)] * 2 + [pkg(4 * POUND_KG * 1.003, 5000.0)],
        10.0,
        "subpart-d",
    ),
    # (iv) suspension needing "more than 50 pounds" impact force: 14 CFR 101.1(a)(4)(iv) (read).
    ("101.1(a)(4)(iv) below", [pkg(0.5)], 50 * POUND_FORCE_N * BELOW, "outside-subpart-d"),
    ("101.1(a)(4)(iv) at", [pkg(0.5)], 50 * POUND_FORCE_N, "outside-subpart-d"),
    ("101.1(a)(4)(iv) above", [pkg(0.5)], 50 * POUND_FORCE_N * ABOVE, "subpart-d"),
]


@pytest.mark.parametrize(
    "packages,suspension_n,expected", [c[1:] for c in US_CASES], ids=[c[0] for c in US_CASES]
)
def test_us_part101_thresholds(packages, suspension_n, expected):
    # Strict "more than" in every criterion of 14 CFR 101.1(a)(4) (read): at the threshold is
    # outside.
    result = classify_payload(packages, US, suspension_n=suspension_n)
    assert result.class_name == expected
    assert result.regulated == (expected == "subpart-d")
    assert not result.assumed


# ----------------------------------------------------------------------- ICAO Annex 2 Appendix 5
# classes

ICAO_CASES = [
    # Heavy (1): combined mass >= 6 kg; Annex 2 App. 5 / UK SERA App. 2 §1.1(c)(1) (read). Packages
    # of 2 kg,
    # light faces, so (2) and (3) stay out.
    ("App5 heavy(1) below", [pkg(2.0, 5000.0)] * 2 + [pkg(2.0 * 0.997, 5000.0)], 10.0, "medium"),
    ("App5 heavy(1) at", [pkg(2.0, 5000.0)] * 3, None, "heavy"),
    ("App5 heavy(1) above", [pkg(2.0, 5000.0)] * 2 + [pkg(2.0 * ABOVE, 5000.0)], 10.0, "heavy"),
    # Heavy (2): any package >= 3 kg; §1.1(c)(2) (read).
    ("App5 heavy(2) below", [pkg(3.0 * BELOW, 5000.0)], 10.0, "light"),
    ("App5 heavy(2) at", [pkg(3.0, 5000.0)], 10.0, "heavy"),
    ("App5 heavy(2) above", [pkg(3.0 * ABOVE, 5000.0)], 10.0, "heavy"),
    # Heavy (3): a package >= 2 kg with area density > 13 g/cm2; §1.1(c)(3) (read). Mass at its
    # edge...
    ("App5 heavy(3) mass below", [pkg(2.0 * BELOW, 100.0)], 10.0, "light"),
    ("App5 heavy(3) mass at", [pkg(2.0, 100.0)], 10.0, "heavy"),
    ("App5 heavy(3) mass above", [pkg(2.0 * ABOVE, 100.0)], 10.0, "heavy"),
    # ...and density at its edge (13 g/cm2 = 130 kg/m2) with a 2.5 kg package.
    ("App5 heavy(3) density below", [pkg(2.5, area_cm2_for(2.5, 130.0 * BELOW))], 10.0, "light"),
    ("App5 heavy(3) density at", [pkg(2.5, area_cm2_for(2.5, 130.0))], 10.0, "light"),
    ("App5 heavy(3) density above", [pkg(2.5, area_cm2_for(2.5, 130.0 * ABOVE))], 10.0, "heavy"),
    # Heavy (4): suspension needing >= 230 N; §1.1(c)(4) (read).
    ("App5 heavy(4) below", [pkg(0.5)], 230.0 * BELOW, "light"),
    ("App5 heavy(4) at", [pkg(0.5)], 230.0, "heavy"),
    ("App5 heavy(4) above", [pkg(0.5)], 230.0 * ABOVE, "heavy"),
    # Medium: two or more packages, combined >= 4 kg and < 6 kg; §1.1(b) (read). Light below 4 kg,
    # §1.1(a).
    ("App5 medium below", [pkg(2.0 * BELOW, 5000.0), pkg(2.0, 5000.0)], 10.0, "light"),
    ("App5 medium at", [pkg(2.0, 5000.0), pkg(2.0, 5000.0)], 10.0, "medium"),
    ("App5 medium above", [pkg(2.0 * ABOVE, 5000.0), pkg(2.0, 5000.0)], 10.0, "medium"),
]


@pytest.mark.parametrize(
    "packages,suspension_n,expected", [c[1:] for c in ICAO_CASES], ids=[c[0] for c in ICAO_CASES]
)
def test_icao_annex2_thresholds(packages, suspension_n, expected):
    # "≥" for masses and force, strict ">" for the 13 g/cm2 area density (UK SERA App. 2 §1.1,
    # read).
    result = classify_payload(packages, ICAO, suspension_n=suspension_n)
    assert result.class_name == expected
    assert result.regulated == (expected in ("medium", "heavy"))


def test_unit_conversions_match_references():
    # REFERENCES.md §9a (computed): 4 lb = 1.814 kg; 50 lbf = 222.4 N; 3 oz/in2 = 13.18 g/cm2.
    crit = {c.label[:4]: c for cls in US.classes for c in cls.criteria}
    assert crit["(i) "].conditions[0].value_si == pytest.approx(1.814, abs=5e-4)
    assert crit["(i) "].conditions[1].value_si / 10.0 == pytest.approx(13.18, abs=5e-3)
    assert crit["(iv)"].conditions[0].value_si == pytest.approx(222.4, abs=0.05)


def test_missing_area_assumes_higher_class():
    # A 5 lb package without its face area could meet 101.1(a)(4)(i): the higher class is assumed
    # and flagged.
    result = classify_payload([pkg(5 * POUND_KG, None)], US, suspension_n=10.0)
    assert result.class_name == "subpart-d" and result.assumed
    assert "[[payload.package]] smallest_face_area_cm2" in result.missing
    # The same package below 4 lb cannot meet any criterion, whatever its area.
    light = classify_payload([pkg(3 * POUND_KG, None)], US, suspension_n=10.0)
    assert light.class_name == "outside-subpart-d" and not light.assumed


# -------------------------------------------------------------------------------------- notice
# timing


def test_us_notice_window_across_time_zone_and_date_change():
    # 14 CFR 101.37(a) (read): pre-launch notice 6 to 24 h before launch. Launch 22:00 CDT on 13 May
    # is
    # 03:00Z on 14 May, so the local and UTC dates differ.
    launch = datetime(2027, 5, 14, 3, 0, tzinfo=UTC)
    items = {
        n.id: n for n in notice_schedule(launch, US, "America/Chicago", class_name="subpart-d")
    }
    pre = items["prelaunch"]
    assert pre.opens == datetime(2027, 5, 13, 3, 0, tzinfo=UTC)
    assert pre.due == datetime(2027, 5, 13, 21, 0, tzinfo=UTC)
    from balloonpath.checklist_rules import describe_notice_timing

    text = describe_notice_timing(pre, "America/Chicago")
    assert "2027-05-12 22:00 CDT" in text and "2027-05-13 16:00 CDT" in text
    # 101.37(b) (from memory): launch notice within 30 min after launch.
    assert items["launch"].due - launch == timedelta(minutes=30)
    # Outside Subpart D the notices are listed but do not apply.
    outside = notice_schedule(launch, US, "America/Chicago", class_name="outside-subpart-d")
    assert not any(n.applies for n in outside)


def test_notice_window_across_daylight_saving_change():
    # US daylight saving began 2027-03-14 02:00 local. A launch at 12:00 MDT that day: 24 h earlier
    # is
    # 11:00 MST on the 13th (elapsed hours, 14 CFR 101.37(a) read), not 12:00.
    launch = datetime(2027, 3, 14, 12, 0, tzinfo=load_zone("America/Denver"))
    pre = notice_schedule(launch, US, "America/Denver")[0]
    local_open = pre.opens.astimezone(load_zone("America/Denver"))
    assert (local_open.day, local_open.hour) == (13, 11)
    assert launch - pre.opens == timedelta(hours=24)


def test_notice_window_across_new_year_east_of_greenwich():
    # Launch 00:30 JST on 1 January 2027 = 15:30Z on 31 December 2026; 6 h before is 18:30 JST on 31
    # Dec.
    launch = datetime(2027, 1, 1, 0, 30, tzinfo=load_zone("Asia/Tokyo"))
    pre = notice_schedule(launch, US, "Asia/Tokyo")[0]
    assert pre.due == datetime(2026, 12, 31, 9, 30, tzinfo=UTC)
    assert pre.due.astimezone(load_zone("Asia/Tokyo")).date() == date(2026, 12, 31)


def test_descent_and_position_reports():
    # 14 CFR 101.39(a) (read): positions at least every 2 h; report 1 h before descent begins.
    launch = datetime(2027, 5, 14, 12, 0, tzinfo=UTC)
    burst = launch + timedelta(hours=2, minutes=10)
    landing = launch + timedelta(hours=5, minutes=1)
    items = {
        n.id: n
        for n in notice_schedule(launch, US, "UTC", descent_time=burst, landing_time=landing)
    }
    assert items["descent"].due == burst - timedelta(hours=1)
    assert items["position"].times == (launch + timedelta(hours=2), launch + timedelta(hours=4))
    assert items["end"].opens == landing


def test_icao_notifications_from_memory():
    # ICAO Annex 2 App. 5 §4 (from memory): pre-flight notification about 7 days ahead; launch
    # notification immediately after launch. Light balloons: none.
    launch = datetime(2027, 6, 2, 9, 0, tzinfo=UTC)
    items = {n.id: n for n in notice_schedule(launch, ICAO, "Europe/London", class_name="heavy")}
    assert launch - items["preflight"].due == timedelta(days=7)
    assert items["launch"].due == launch and items["launch"].how == "memory"
    assert not any(n.applies for n in notice_schedule(launch, ICAO, "UTC", class_name="light"))


def load_zone(name):
    from zoneinfo import ZoneInfo

    return ZoneInfo(name)


# ------------------------------------------------------------------------------------------------
# sunset


def test_sunset_astral_documentation_example():
    # astral 3.2 documentation: London (51.5, -0.116), 2009-04-22 UTC: sunrise 04:50:16.52, sunset
    # 19:08:41.22
    # (REFERENCES.md §13, read); tolerance 60 s.
    rise, set_ = sun_times(51.5, -0.116, date(2009, 4, 22), "UTC")
    assert abs((rise - datetime(2009, 4, 22, 4, 50, 16, 520000, tzinfo=UTC)).total_seconds()) < 60
    assert abs((set_ - datetime(2009, 4, 22, 19, 8, 41, 220000, tzinfo=UTC)).total_seconds()) < 60


def test_sunset_uses_the_local_date_west_of_greenwich():
    # REFERENCES.md §13 pitfall: astral with a UTC date gives Boulder's "sunset" at 01:12:16Z on
    # 2025-03-20,
    # the evening of the local 19th. With the local zone the sunset is on the evening of the 20th,
    # about
    # 24 h later (day length grows about 1 min per day near the equinox).
    rise, set_ = sun_times(40.015, -105.27, date(2025, 3, 20), "America/Denver")
    pitfall = datetime(2025, 3, 20, 1, 12, 16, tzinfo=UTC)
    assert set_.date() == date(2025, 3, 20) and set_ > rise
    assert timedelta(hours=23, minutes=58) < set_ - pitfall < timedelta(hours=24, minutes=3)
    evening = datetime(2025, 3, 20, 20, 0, tzinfo=load_zone("America/Denver"))
    afternoon = datetime(2025, 3, 20, 17, 0, tzinfo=load_zone("America/Denver"))
    assert in_darkness(40.015, -105.27, evening, "America/Denver") is True
    assert in_darkness(40.015, -105.27, afternoon, "America/Denver") is False


# ------------------------------------------------------------------------------- plans and
# forecasts

LAUNCH = (41.25, -96.40, 350.0)  # Corvel Meadow (invented)


def write_plan(
    tmp_path: Path,
    *,
    gas: str = "hydrogen",
    rules: str = "us-part101",
    extra: str = "",
    checklist_extra: str = "",
    avoid: bool = False,
    launch_time: str = "2027-05-14T15:00:00Z",
) -> Path:
    (tmp_path / "sounding.csv").write_text("placeholder\n")
    zones = '[zones]\navoid = "avoid.geojson"\n' if avoid else ""
    text = f"""
[launch]
latitude = {LAUNCH[0]}
longitude = {LAUNCH[1]}
time = {launch_time}
elevation_m = {LAUNCH[2]}
time_zone = "America/Chicago"
site_name = "Corvel Meadow"

[balloon]
envelope_mass_kg = 1.2
burst_diameter_m = 7.0
gas = "{gas}"
neck_lift_kg = 3.4

[payload]
mass_kg = 2.9
suspension_breaking_strength_n = 180.0
suspension_length_m = 12.0
[[payload.package]]
name = "tracker"
mass_kg = 0.6
smallest_face_area_cm2 = 80.0
[[payload.package]]
name = "camera"
mass_kg = 1.9
smallest_face_area_cm2 = 100.0

[parachute]
diameter_m = 1.5

[winds]
sounding = ["sounding.csv"]

{zones}
{extra}

[checklist]
rules = "{rules}"
contact = "Ostrin launch desk, +1 555 0147"
balloon_id = "CORVEL-7"
{checklist_extra}
"""
    path = tmp_path / "plan.toml"
    path.write_text(text)
    return path


def write_forecast(
    folder: Path,
    *,
    east_m_s: float = 3.0,
    water: float | None = 0.02,
    landing_time: str = "2027-05-14T17:40:00Z",
) -> Path:
    """A small forecast folder: eastward drift at ``east_m_s``, 5 m/s up, burst at 27.4 km."""
    folder.mkdir(parents=True, exist_ok=True)
    t0 = datetime(2027, 5, 14, 15, 0, tzinfo=UTC).timestamp()
    rows = ["time,latitude,longitude,altitude_m,phase"]
    for k in range(0, 13):  # first 120 s of ascent, every 10 s
        lat, lon = forward(LAUNCH[0], LAUNCH[1], 90.0, east_m_s * 10.0 * k)
        stamp = datetime.fromtimestamp(t0 + 10 * k, tz=UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
        rows.append(
            f"{stamp},{float(lat):.7f},{float(lon):.7f},{LAUNCH[2] + 5.0 * 10 * k:.1f},ascent"
        )
    lat, lon = forward(LAUNCH[0], LAUNCH[1], 90.0, 60_000.0)
    rows.append(f"2027-05-14T16:31:20Z,{float(lat):.6f},{float(lon):.6f},27400.0,descent")
    lat2, lon2 = forward(LAUNCH[0], LAUNCH[1], 90.0, 80_000.0)
    rows.append(f"{landing_time},{float(lat2):.6f},{float(lon2):.6f},330.0,landed")
    (folder / "track.csv").write_text("\n".join(rows) + "\n")
    summary = {
        "balloonpath_version": "0.1.0",
        "plan": "plan.toml",
        "mode": "physics",
        "seed": 1,
        "launch": {
            "latitude": LAUNCH[0],
            "longitude": LAUNCH[1],
            "elevation_m": LAUNCH[2],
            "time": "2027-05-14T15:00:00Z",
        },
        "burst": {
            "latitude": float(lat),
            "longitude": float(lon),
            "altitude_m": 27400.0,
            "time": "2027-05-14T16:31:20Z",
        },
        "landing": {
            "latitude": float(lat2),
            "longitude": float(lon2),
            "elevation_m": 330.0,
            "time": landing_time,
            "distance_m": 80000.0,
            "bearing_deg": 90.0,
            "vertical_speed_m_s": -5.8,
            "kinetic_energy_j": 48.8,
        },
        "flight_time_s": 9600.0,
        "max_altitude_m": 27400.0,
        "time_to_burst_s": 5480.0,
        "ensemble": {
            "members": 200,
            "seed": 1,
            "landing_mean": {"latitude": float(lat2), "longitude": float(lon2)},
            "ellipses": [
                {
                    "probability": 0.5,
                    "semi_major_m": 4000.0,
                    "semi_minor_m": 2000.0,
                    "major_axis_azimuth_deg": 80.0,
                },
                {
                    "probability": 0.9,
                    "semi_major_m": 9000.0,
                    "semi_minor_m": 4500.0,
                    "major_axis_azimuth_deg": 80.0,
                },
            ],
            "region_90_area_km2": 120.5,
            "landing_time_p05": "2027-05-14T17:30:00Z",
            "landing_time_p95": "2027-05-14T17:55:00Z",
            "burst_ellipses": [],
        },
        "probabilities": {"water": water, "avoid": {"Lake Ostrin": 0.04}},
        "winds": {"sources": ["sounding.csv"], "observations": 0, "gp": None},
        "warnings": [],
    }
    (folder / "summary.json").write_text(json.dumps(summary, indent=2))
    return folder


def write_avoid(
    tmp_path: Path, east_from_m: float, east_to_m: float, name: str = "Ostrin village"
) -> None:
    lat_s, _ = forward(LAUNCH[0], LAUNCH[1], 180.0, 200.0)
    lat_n, _ = forward(LAUNCH[0], LAUNCH[1], 0.0, 200.0)
    _, lon_w = forward(LAUNCH[0], LAUNCH[1], 90.0, east_from_m)
    _, lon_e = forward(LAUNCH[0], LAUNCH[1], 90.0, east_to_m)
    ring = [
        [float(lon_w), float(lat_s)],
        [float(lon_e), float(lat_s)],
        [float(lon_e), float(lat_n)],
        [float(lon_w), float(lat_n)],
        [float(lon_w), float(lat_s)],
    ]
    doc = {
        "type": "FeatureCollection",
        "features": [
            {
                "type": "Feature",
                "properties": {"name": name},
                "geometry": {"type": "Polygon", "coordinates": [ring]},
            }
        ],
    }
    (tmp_path / "avoid.geojson").write_text(json.dumps(doc))


def items_by_title(ck):
    return {i.title: i for i in ck.items}


def test_hydrogen_cautions_only_with_hydrogen(tmp_path):
    (tmp_path / "h").mkdir()
    (tmp_path / "he").mkdir()
    h = build_checklist(load_plan(write_plan(tmp_path / "h", gas="hydrogen")))
    he = build_checklist(load_plan(write_plan(tmp_path / "he", gas="helium")))
    assert any(i.title.startswith("Hydrogen") for i in h.items)
    assert "Hydrogen" in render_markdown(h)
    assert not any(i.title.startswith("Hydrogen") for i in he.items)
    assert "hydrogen" not in render_markdown(he).lower()
    # Cautions always shown, whatever the gas (common practice).
    for ck in (h, he):
        titles = items_by_title(ck)
        assert {"Power lines", "Recovery: private land", "Recovery: roads"} <= set(titles)


def test_draft_contains_plan_and_forecast_values(tmp_path):
    plan = load_plan(write_plan(tmp_path))
    ck = build_checklist(plan, write_forecast(tmp_path / "fc"))
    draft = {k: v for k, _, v in ck.draft}
    assert draft["identification"] == "CORVEL-7"
    assert draft["contact"] == "Ostrin launch desk, +1 555 0147"
    assert "Corvel Meadow" in draft["launch_site"] and "41.2500°N 96.4000°W" in draft["launch_site"]
    assert "2027-05-14 10:00 CDT (2027-05-14 15:00Z)" == draft["launch_time"]
    assert "27,400 m (89,895 ft)" in draft["cruise_altitude"]  # 27 400 m / 0.3048 = 89 895.0 ft
    assert "1 h 31 min" in draft["time_to_cruise"]  # 5 480 s
    assert "80.0 km" in draft["trajectory"] and "bearing 90°" in draft["trajectory"]
    assert "12:40 CDT" in draft["landing"] and "9.0 km" in draft["landing"]
    assert "12 m (39 ft)" in draft["suspension"] and "180 N" in draft["suspension"]
    assert "tracker 0.6 kg" in draft["payload"] and "hydrogen" in draft["balloon"]
    # The package over 4 lb with 19 g/cm2 (> 3 oz/in2 = 13.18 g/cm2) meets 101.1(a)(4)(i).
    assert ck.classification.class_name == "subpart-d"
    notices = {n.id: n for n in ck.notices}
    assert notices["descent"].due == datetime(2027, 5, 14, 15, 31, 20, tzinfo=UTC)


def test_forecast_risks_and_limits(tmp_path):
    extra = "[windows]\nmax_water_probability = 0.01\nlatest_landing_before_sunset_min = 60\n"
    plan = load_plan(
        write_plan(
            tmp_path,
            extra=extra,
            checklist_extra="cutdown_systems = 2\nhas_radar_reflector = true\n"
            "night_lighting = true\n",
        )
    )
    ck = build_checklist(plan, write_forecast(tmp_path / "fc", water=0.02))
    it = items_by_title(ck)
    assert it["Water landing"].status == "fail" and not it["Water landing"].blocking
    assert it["Landing in 'Lake Ostrin'"].status == "warn"
    assert it["Landing zone size"].status == "info" and "120.5 km²" in it["Landing zone size"].text
    # Landing 12:40 CDT in May, hours before sunset: the margin is met.
    assert it["Landing and sunset"].status == "pass"
    assert it["Cut-down systems"].status == "pass"
    assert it["Surface wind"].status == "pass" and "3.0 m/s" in it["Surface wind"].text
    assert it["Landing speed and energy"].text.startswith(
        "Under the parachute the payload lands at 5.8 m/s"
    )
    assert not ck.blocking_failures


def test_surface_wind_from_track(tmp_path):
    fc = read_forecast(write_forecast(tmp_path / "fc", east_m_s=9.5))
    # Geodesic distance over 100 m of ascent at 5 m/s (20 s) of a 9.5 m/s drift: 9.5 m/s (pyproj
    # Geod); the
    # fixture rounds positions to 1e-7 deg (about 1 cm), hence rel 1e-4.
    assert surface_wind_from_track(fc, LAUNCH[2]) == pytest.approx(9.5, rel=1e-4)


def test_cli_exit_status_blocking_and_outputs(tmp_path, capsys):
    # Blocking: the ascent crosses an avoid area 100-400 m east of the launch below 300 m (it
    # reaches 300 m
    # at 60 s, 180 m east), equipment stated absent, and the surface wind over the team limit.
    write_avoid(tmp_path, 100.0, 400.0)
    plan_path = write_plan(
        tmp_path, avoid=True, checklist_extra="cutdown_systems = 1\nmax_surface_wind_m_s = 5\n"
    )
    fc = write_forecast(tmp_path / "fc", east_m_s=6.0)
    out = tmp_path / "out" / "checklist.md"
    code = main(
        ["checklist", str(plan_path), "--forecast", str(fc), "--out", str(out), "--width", "120"]
    )
    assert code == 1
    printed = capsys.readouterr().out
    assert "not legal advice" in printed
    ck = build_checklist(load_plan(plan_path), fc)
    blocking = {i.title for i in ck.blocking_failures}
    assert blocking == {"Low-altitude track", "Cut-down systems", "Surface wind"}
    low = items_by_title(ck)["Low-altitude track"]
    assert "304.8 m" in low.text and low.source == "14 CFR 101.33(d)"  # 1 000 ft, from memory
    md = out.read_text()
    data = json.loads(out.with_suffix(".json").read_text())
    assert DISCLAIMER in md and data["disclaimer"] == DISCLAIMER
    assert data["blocking_failures"] == 3
    assert "FAIL (blocking)" in md

    # The same plan with the area far to the north, the equipment fitted and a calm day: exit 0.
    write_avoid(tmp_path, 5_000.0, 6_000.0)
    plan_path = write_plan(
        tmp_path, avoid=True, checklist_extra="cutdown_systems = 2\nhas_radar_reflector = true\n"
    )
    fc = write_forecast(tmp_path / "fc", east_m_s=2.0)
    assert main(["checklist", str(plan_path), "--forecast", str(fc), "--out", str(out)]) == 0
    assert (
        items_by_title(build_checklist(load_plan(plan_path), fc))["Low-altitude track"].status
        == "pass"
    )


def test_outputs_never_give_a_verdict_and_are_reproducible(tmp_path):
    plan = load_plan(write_plan(tmp_path))
    fc = write_forecast(tmp_path / "fc")
    for rules in ("us-part101", "icao-annex2", "generic"):
        ck = build_checklist(plan, fc, profile=rules)
        md = render_markdown(ck)
        js = json.dumps(checklist_json(ck))
        for text in (md.lower(), js.lower()):
            assert "safe" not in text and "compliant" not in text
            assert text.count("legal") == text.count("not legal advice")
        assert DISCLAIMER in md and DISCLAIMER in js
        assert render_markdown(build_checklist(plan, fc, profile=rules)) == md
    generic = build_checklist(plan, fc, profile="generic")
    assert any(i.section == "Ask the authority" for i in generic.items)


def test_rates_mode_plan_without_payload(tmp_path):
    (tmp_path / "s.csv").write_text("x\n")
    path = tmp_path / "r.toml"
    path.write_text(
        "[launch]\nlatitude = 10\nlongitude = 20\ntime = 2027-01-02T08:00:00Z\n"
        '[rates]\nascent_m_s = 5\nburst_altitude_m = 25000\n[winds]\nsounding = ["s.csv"]\n'
    )
    ck = build_checklist(load_plan(path), profile="icao-annex2")
    it = items_by_title(ck)
    assert it["Payload class"].status == "warn" and ck.classification is None
    # Gas not stated: the hydrogen cautions are shown with a note.
    assert it["Hydrogen: ignition"].text.startswith("The plan does not name the gas")
    # 25 000 m from sea level at 5 m/s = 5 000 s.
    assert "1 h 23 min" in dict((k, v) for k, _, v in ck.draft)["time_to_cruise"]


def test_errors_name_file_field_and_fix(tmp_path):
    with pytest.raises(PlanError, match=r"rules 'mars-rules'.*fix: use one of us-part101"):
        load_profile("mars-rules")
    bad = tmp_path / "bad.toml"
    bad.write_text(
        '[profile]\nname="x"\ntitle="x"\nauthority="x"\n[[class]]\nname="a"\nrank=1\n'
        '[[class.criterion]]\nlabel="l"\nsource="s"\nhow="read"\n'
        'conditions=[{quantity="package_mass", op="=>", value=1, unit="kg"}]\n'
    )
    with pytest.raises(
        PlanError, match=r"bad.toml: class\[0\].criterion\[0\].conditions\[0\].op: is '=>'.*fix"
    ):
        load_profile(bad)
    bad.write_text(bad.read_text().replace('"=>"', '">"').replace('"kg"', '"stone"'))
    with pytest.raises(PlanError, match=r"unit: is 'stone', not one of kg, g, lb"):
        load_profile(bad)
    with pytest.raises(
        InputDataError, match=r"summary.json: file: not found.*fix: run balloonpath forecast"
    ):
        read_forecast(tmp_path)


def test_custom_profile_file(tmp_path):
    # A jurisdiction profile written by a team (docs/checklist.md): one class over 1 kg total.
    custom = tmp_path / "ostrin.toml"
    custom.write_text(
        '[profile]\nname="ostrin"\ntitle="Ostrin test rules"\nauthority="Ostrin ATS"\n'
        'regulated_class=["big"]\n'
        '[[class]]\nname="small"\nrank=0\n[[class]]\nname="big"\nrank=1\n'
        '[[class.criterion]]\nlabel="over 1 kg"\nsource="invented"\nhow="read"\n'
        'conditions=[{quantity="total_mass", op=">", value=1000, unit="g"}]\n'
        '[[notice]]\nid="pre"\ntitle="Call"\nanchor="launch"\ndue_h=-48\n'
        'applies_to=["big"]\nsource="invented"\nhow="read"\n'
    )
    prof = load_profile(custom)
    assert classify_payload([pkg(1.0)], prof).class_name == "small"
    assert classify_payload([pkg(1.001)], prof).class_name == "big"
    launch = datetime(2027, 5, 14, 3, 0, tzinfo=UTC)
    assert notice_schedule(launch, prof)[0].due == launch - timedelta(hours=48)
    assert np.isclose(prof.classes[1].criteria[0].conditions[0].value_si, 1.0)
