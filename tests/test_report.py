"""Tests of balloonpath.report: the self-contained report.html.

The forecast here is synthetic (seeded) and set at the invented launch site "Brambleford Common" of
tests/conftest.py; the zones come from balloonpath.zones.compute_zones and the summary from
balloonpath.forecast.summary_dict, so the report sees what the pipeline gives it.
"""

from __future__ import annotations

import base64
import io
import json
import math
import re
import shutil
import subprocess
from datetime import UTC, datetime
from html.parser import HTMLParser
from pathlib import Path
from zoneinfo import ZoneInfo

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

from balloonpath import report  # noqa: E402
from balloonpath.geodesy import LocalProjection, forward  # noqa: E402
from balloonpath.plan import load_plan  # noqa: E402
from balloonpath.result import ForecastResult, Points, Track  # noqa: E402

LAUNCH = datetime(2027, 5, 14, 12, 30, tzinfo=UTC)  # the time of conftest.MINIMAL_PLAN
LAT0, LON0, ELEV0 = 47.25, 8.5, 420.0

from conftest import MINIMAL_PLAN as RATES_PLAN  # noqa: E402  (one shared minimal plan)


def _write_plan(tmp: Path, text: str) -> Path:
    """Write the plan and touch its (empty) sounding file, as conftest's ``write_plan`` does."""
    (tmp / "sounding.csv").touch()
    path = tmp / "plan.toml"
    path.write_text(text, encoding="utf-8")
    return path


AVOID = {
    "type": "FeatureCollection",
    "features": [{
        "type": "Feature",
        "properties": {"name": "Millpond Reservoir"},
        "geometry": {"type": "Polygon", "coordinates": [[
            [9.3, 47.2], [9.6, 47.2], [9.6, 47.6], [9.3, 47.6], [9.3, 47.2],
        ]]},
    }],
}


def synthetic_result(plan_path: Path, n: int = 301, seed: int = 11, observations: bool = True,
                     ) -> ForecastResult:
    """A plausible forecast: 5 m/s to 30 km, drift toward 75 deg, seeded spread of the members."""
    rng = np.random.default_rng(seed)
    t0 = LAUNCH.timestamp()
    t_burst = (30_000.0 - ELEV0) / 5.0
    t_land = t_burst + 2_400.0
    time_s = t0 + np.arange(0.0, t_land + 1.0, 60.0)
    frac = (time_s - t0) / t_land
    alt = np.where(time_s - t0 <= t_burst, ELEV0 + 5.0 * (time_s - t0),
                   30_000.0 - (30_000.0 - ELEV0) * (time_s - t0 - t_burst) / 2_400.0)
    lat, lon = forward(np.full_like(frac, LAT0), np.full_like(frac, LON0), 75.0, 62_000.0 * frac)
    phase = np.where(time_s - t0 <= t_burst, 0, 2).astype(np.int8)
    phase[-1] = 3
    nominal = Track(time_s, np.asarray(lat), np.asarray(lon), alt, phase)

    proj_land = LocalProjection(float(lat[-1]), float(lon[-1]))
    lx = np.concatenate([[0.0], rng.normal(0.0, 6_000.0, n - 1)])
    ly = np.concatenate([[0.0], rng.normal(0.0, 3_000.0, n - 1)])
    llat, llon = proj_land.to_geographic(lx, ly)
    i_b = int(np.argmax(alt))
    proj_burst = LocalProjection(float(lat[i_b]), float(lon[i_b]))
    blat, blon = proj_burst.to_geographic(
        np.concatenate([[0.0], rng.normal(0.0, 3_000.0, n - 1)]),
        np.concatenate([[0.0], rng.normal(0.0, 1_500.0, n - 1)]),
    )
    burst_alt = 30_000.0 * np.concatenate([[1.0], 1.0 + 0.05 * rng.standard_normal(n - 1)])
    ascent = 5.0 * np.concatenate([[1.0], 1.0 + 0.05 * rng.standard_normal(n - 1)])
    descent = 5.5 * np.concatenate([[1.0], 1.0 + 0.10 * rng.standard_normal(n - 1)])
    t_b = t0 + (burst_alt - ELEV0) / ascent
    t_l = t_b + 2_400.0 * (5.5 / descent)
    k = 8
    offsets = rng.normal(0.0, 0.02, (k, 1))
    member_tracks = {"time_s": np.tile(time_s, (k, 1)), "lat": lat[None, :] + offsets,
                     "lon": lon[None, :] + 2 * offsets, "alt_m": np.tile(alt, (k, 1))}

    z = np.linspace(ELEV0, 31_000.0, 121)
    profile = {
        "alt_m": z,
        "u": 4.0 + 22.0 * np.exp(-(((z - 11_000.0) / 4_000.0) ** 2)),
        "v": 3.0 * np.sin(z / 5_000.0),
        "u_std": 1.0 + z / 20_000.0,
        "v_std": 0.8 + z / 25_000.0,
    }
    if observations:
        profile.update({"obs_alt_m": rng.uniform(2_000.0, 12_000.0, 60),
                        "obs_lat": LAT0 + rng.normal(0, 0.3, 60),
                        "obs_lon": LON0 + rng.normal(0, 0.3, 60)})
    wind_info = {
        "sources": ["sounding brambleford_0600.csv", "observations corridor_obs.csv"],
        "observations": 60 if observations else 0,
        "gp": {"length_h_km": 142.5, "length_z_km": 1.31, "length_t_h": 5.5, "sigma_m_s": 2.25}
        if observations else None,
        "aircraft_qc": {"lines_read": 120, "crc_failed": 0, "unknown_columns": [], "accepted": 101},
    }
    return ForecastResult(
        launch_lat=LAT0, launch_lon=LON0, launch_alt_m=ELEV0, launch_time_s=t0, nominal=nominal,
        burst=Points(np.asarray(blat), np.asarray(blon), burst_alt, t_b),
        landing=Points(np.asarray(llat), np.asarray(llon), np.full(n, 455.0), t_l),
        member_params={"ascent_rate_m_s": ascent, "burst_altitude_m": burst_alt,
                       "descent_sea_level_m_s": descent, "launch_delay_s": np.zeros(n),
                       "max_altitude_m": burst_alt},
        member_tracks=member_tracks, landing_speed_m_s=5.3, payload_mass_kg=1.2,
        wind_info=wind_info, seed=seed, plan_path=str(plan_path), mode="rates",
        warnings=("FitWarning: a hyperparameter reached its bound (synthetic)",),
        wind_profile=profile,
    )


def make_forecast_folder(tmp: Path, plan_text: str, write_plan, observations: bool = True,
                         pictures: bool = True) -> tuple:
    """Plan, result, zones, summary and (optionally) map.png/profile.png in ``tmp / "fc"``."""
    from balloonpath.forecast import summary_dict
    from balloonpath.zones import compute_zones

    plan_path = write_plan(tmp, plan_text)
    plan = load_plan(plan_path)
    result = synthetic_result(plan_path, observations=observations)
    avoid = tmp / "avoid.geojson"
    avoid.write_text(json.dumps(AVOID), encoding="utf-8")
    zones = compute_zones(result, avoid_path=avoid)
    summary = summary_dict(result, zones)
    folder = tmp / "fc"
    folder.mkdir()
    if pictures:
        from balloonpath import plots

        plots.plot_map(result, zones, folder / "map.png")
        plots.plot_profile(result, folder / "profile.png")
    return folder, result, zones, summary, plan


class _Collector(HTMLParser):
    """Stdlib parse: tags with attributes, text, and the CSS."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []
        self.css: list[str] = []
        self._in: str | None = None

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        self._in = tag

    def handle_endtag(self, tag):
        self._in = None

    def handle_data(self, data):
        (self.css if self._in == "style" else self.text).append(data)


def _parse(text: str) -> _Collector:
    c = _Collector()
    c.feed(text)
    c.close()
    return c


def _norm(text: str) -> str:
    return re.sub(r"\s+", " ", text.replace("\u202f", " "))


def expected_key_numbers(summary: dict, result: ForecastResult) -> list[str]:
    """Key numbers formatted as the report shows them, computed from outside references."""
    from pyproj import Geod

    land = summary["landing"]
    # Distance and bearing: pyproj.Geod (WGS84, Karney's algorithm) as the outside reference.
    az, _, dist = Geod(ellps="WGS84").inv(LON0, LAT0, result.landing.lon[0], result.landing.lat[0])
    flight_min = round((result.landing.time_s[0] - result.launch_time_s) / 60.0)
    t_land = datetime.fromtimestamp(round(result.landing.time_s[0] / 60.0) * 60.0, tz=UTC)
    return [
        f"{land['latitude']:.5f}, {land['longitude']:.5f}",
        f"{dist / 1000.0:.1f} km",
        f"bearing {az % 360.0:.0f}°",
        f"{round(result.burst.alt_m[0]):,} m".replace(",", " "),
        f"{flight_min // 60} h {flight_min % 60:02d} min",
        t_land.strftime("%H:%M UTC"),
        f"{100 * summary['probabilities']['avoid']['Millpond Reservoir']:.1f} %",
        f"{summary['ensemble']['region_90_area_km2']:.1f} km²",
    ]


# ------------------------------------------------------------------------------ pure functions
def test_compass_points_follow_22_5_degree_sectors():
    # Common practice: 16 points, each centred on a multiple of 22.5 deg, sectors +-11.25 deg.
    assert report.compass_point(0.0) == "N"
    assert report.compass_point(11.24) == "N"
    assert report.compass_point(11.26) == "NNE"
    assert report.compass_point(67.5) == "ENE"
    assert report.compass_point(180.0) == "S"
    assert report.compass_point(348.74) == "NNW"
    assert report.compass_point(348.76) == "N"
    assert report.compass_point(-90.0) == "W"


def test_number_time_and_duration_formats():
    nb = "\u202f"
    assert report.fmt_number(31204.4, 0, "m") == f"31{nb}204{nb}m"
    assert report.fmt_number(-0.04, 1) == "0.0"
    assert report.fmt_number(float("nan"), 1) == "\u2014"
    assert report.fmt_number(None) == "\u2014"
    assert report.fmt_percent(0.0321) == f"3.2{nb}%"
    assert report.fmt_duration(9061) == f"2{nb}h 31{nb}min"
    assert report.fmt_duration(59 * 60 + 29) == f"59{nb}min"
    t = datetime(2027, 5, 14, 23, 59, 40, tzinfo=UTC).timestamp()
    ref = datetime(2027, 5, 14, 12, 0, tzinfo=UTC).timestamp()
    assert report.fmt_time(t, None, ref) == "2027-05-15 00:00 UTC"  # rounds into the next day
    # Europe/Zurich keeps central European summer time (UTC+2) in May (IANA tz database).
    assert report.fmt_time(ref, ZoneInfo("Europe/Zurich"), ref) == "14:00 CEST"


def test_local_zone_is_looked_up_when_the_plan_has_none():
    # timezonefinder at the launch point: 47.25 N, 8.5 E lies in the Europe/Zurich zone
    # (IANA tz database boundaries, from memory).
    assert report.local_zone("", LAT0, LON0).key == "Europe/Zurich"
    assert report.local_zone("America/Chicago", LAT0, LON0).key == "America/Chicago"
    from balloonpath.errors import DataQualityWarning

    with pytest.warns(DataQualityWarning, match="unknown time zone 'Mars/Olympus'"):
        assert report.local_zone("Mars/Olympus", LAT0, LON0) is None


def test_speed_sd_matches_monte_carlo():
    # Outside check: sample u, v from independent normals and take the sd of the speed
    # (numpy, seeded); the first-order formula holds to about 1 % when sd << speed.
    rng = np.random.default_rng(3)
    u, v, su, sv = 10.0, -5.0, 0.6, 0.9
    draws = np.hypot(rng.normal(u, su, 400_000), rng.normal(v, sv, 400_000))
    s, s_sd = report.speed_with_sd(u, v, su, sv)
    assert float(s) == pytest.approx(math.hypot(u, v))
    assert float(s_sd) == pytest.approx(float(np.std(draws)), rel=0.02)
    # Calm: the linearisation is undefined; the band is the rms of the component sds.
    _, calm_sd = report.speed_with_sd(0.0, 0.0, 0.6, 0.8)
    assert float(calm_sd) == pytest.approx(math.sqrt(0.5 * (0.36 + 0.64)))


def test_ensemble_statistics_against_direct_numpy_and_pyproj(tmp_path, write_plan,
                                                             minimal_plan_text):
    from pyproj import Geod

    result = synthetic_result(write_plan(tmp_path, minimal_plan_text))
    rows = {r.label: r for r in report.ensemble_statistics(result)}
    # Distances from pyproj.Geod (the outside reference), members 1..N-1 as in balloonpath.zones.
    n = result.n_members
    _, _, d = Geod(ellps="WGS84").inv(np.full(n, LON0), np.full(n, LAT0), result.landing.lon,
                                      result.landing.lat)
    d_km = d[1:] / 1000.0
    r = rows["Landing distance from launch"]
    assert r.count == result.n_members - 1
    assert r.nominal == pytest.approx(d[0] / 1000.0, rel=1e-9)
    assert r.mean == pytest.approx(d_km.mean(), rel=1e-9)
    assert r.sd == pytest.approx(d_km.std(ddof=1), rel=1e-9)
    assert (r.p05, r.p50, r.p95) == pytest.approx(tuple(np.percentile(d_km, [5, 50, 95])), rel=1e-9)
    b = rows["Burst altitude"]
    assert b.p50 == pytest.approx(float(np.median(result.burst.alt_m[1:])))
    assert "Launch delay" not in rows  # all zero: not shown


def _relative_luminance(hex_colour: str) -> float:
    # WCAG 2.1, definition of relative luminance (sRGB linearisation), from memory.
    c = np.array([int(hex_colour.lstrip("#")[i:i + 2], 16) / 255.0 for i in (0, 2, 4)])
    lin = np.where(c <= 0.03928, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    return float(np.dot([0.2126, 0.7152, 0.0722], lin))


def test_stylesheet_text_colours_meet_the_contrast_minimum():
    # WCAG 2.1 success criterion 1.4.3: contrast (L1 + 0.05) / (L2 + 0.05) >= 4.5 for body text
    # (from memory). Pairs: each text colour on the backgrounds it is used on.
    css = report._stylesheet()
    var = dict(re.findall(r"--([a-z-]+):\s*(#[0-9a-fA-F]{6})", css))
    pairs = [("ink", "#ffffff"), ("ink", var["panel"]), ("muted", "#ffffff"),
             ("muted", var["panel"]), ("accent", "#ffffff"), ("caution-ink", var["caution-bg"]),
             ("attention", "#ffffff"), ("attention", var["panel"]), ("good", "#ffffff"),
             ("good", var["panel"])]
    for fg, bg in pairs:
        hi, lo = sorted((_relative_luminance(var[fg]), _relative_luminance(bg)), reverse=True)
        assert (hi + 0.05) / (lo + 0.05) >= 4.5, (fg, bg)


# --------------------------------------------------------------------------------- the document
@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """One report with every part present (browser and document tests share it)."""
    tmp = tmp_path_factory.mktemp("report")
    folder, result, zones, summary, plan = make_forecast_folder(tmp, RATES_PLAN, _write_plan)
    path = report.write_report(result, zones, summary, plan, folder / "report.html")
    return {"path": path, "text": path.read_text(encoding="utf-8"), "result": result,
            "zones": zones, "summary": summary, "plan": plan, "folder": folder}


def test_report_parses_strictly_and_is_self_contained(built):
    import html5lib
    from PIL import Image

    text = built["text"]
    # html5lib in strict mode raises on any parse error of the HTML5 algorithm.
    html5lib.HTMLParser(strict=True).parse(text)
    doc = _parse(text)
    tags = [t for t, _ in doc.tags]
    assert "script" not in tags and "iframe" not in tags and "object" not in tags
    assert "link" not in tags  # no external stylesheet or font
    css = "".join(doc.css)
    assert "@import" not in css and "url(" not in css and "@font-face" not in css
    assert "@page" in css and "A4" in css and "@media print" in css
    for tag, attrs in doc.tags:
        for name, value in attrs.items():
            if name == "href":  # links only within the page
                assert value is not None and value.startswith("#"), (tag, name, value)
            elif name in ("src", "srcset", "poster", "data", "action", "background"):
                assert value is not None and value.startswith("data:image/png;base64,"), (tag, name)
            assert not re.search(r"(?i)\b(https?|ftp|file)://", value or ""), (tag, name, value)
    imgs = [a for t, a in doc.tags if t == "img"]
    assert len(imgs) == 3  # map.png, profile.png and the wind profile
    for a in imgs:
        png = base64.b64decode(a["src"].split(",", 1)[1], validate=True)
        with Image.open(io.BytesIO(png)) as im:
            im.verify()
        assert a.get("alt")
    embedded = {base64.b64decode(a["src"].split(",", 1)[1]) for a in imgs}
    assert (built["folder"] / "map.png").read_bytes() in embedded
    assert (built["folder"] / "profile.png").read_bytes() in embedded


def test_report_shows_the_key_numbers_and_sections(built):
    text = _norm(" ".join(_parse(built["text"]).text))
    for needle in expected_key_numbers(built["summary"], built["result"]):
        assert _norm(needle) in text, needle
    # Local time: Brambleford Common lies in Europe/Zurich; 12:30Z in May is 14:30 CEST (IANA).
    assert "14:30 CEST" in text and "UTC+02:00" in text
    for heading in ("Key numbers", "Before you fly", "Wind above the launch site", "Plan",
                    "Ensemble statistics", "Checklist", "Warnings", "How this forecast was made"):
        assert heading in text
    assert "not legal advice" in text and "aviation authority decides" in text
    assert "Millpond Reservoir" in text
    assert "not computed" in text  # water was not asked for
    assert "not run" in text
    assert "balloonpath checklist plan.toml --forecast DIR --out DIR/checklist.md" in text
    assert "length_h_km" in text and "142.5" in text  # GP hyperparameters
    assert "sounding brambleford_0600.csv" in text
    assert "Aircraft-report quality control lines read 120; accepted 101" in text  # zeros left out
    assert "a hyperparameter reached its bound" in text
    assert f"seed {built['result'].seed}" in text
    assert "Brambleford Common" in text


def test_same_inputs_give_identical_bytes(built, tmp_path):
    # Another folder with the same map.png and profile.png: the page does not depend on where it
    # is written.
    folder = tmp_path / "elsewhere"
    folder.mkdir()
    for name in ("map.png", "profile.png"):
        shutil.copy(built["folder"] / name, folder / name)
    again = report.write_report(built["result"], built["zones"], built["summary"], built["plan"],
                                folder / "report.html")
    assert again.read_bytes() == built["path"].read_bytes()


def test_text_from_inputs_is_escaped(tmp_path, write_plan, minimal_plan_text):
    hostile = minimal_plan_text.replace(
        'site_name = "Brambleford Common"',
        'site_name = "<script>alert(1)</script> & \\"Ridge\\" <b>"',
    )
    folder, result, zones, summary, plan = make_forecast_folder(tmp_path, hostile, write_plan,
                                                                pictures=False)
    summary["warnings"] = ["DataQualityWarning: row 3 has <img src=x onerror=alert(1)>"]
    text = report.render_report(result, zones, summary, plan, folder)
    doc = _parse(text)
    assert not [t for t, _ in doc.tags if t in ("script", "b")]
    assert len([t for t, _ in doc.tags if t == "img"]) == 1  # only the wind profile
    joined = " ".join(doc.text)
    assert '<script>alert(1)</script> & "Ridge" <b>' in joined
    assert "<img src=x onerror=alert(1)>" in joined


def test_missing_pictures_and_profile_are_reported_not_broken(tmp_path, write_plan,
                                                              minimal_plan_text):
    import dataclasses

    folder, result, zones, summary, plan = make_forecast_folder(
        tmp_path, minimal_plan_text, write_plan, observations=False, pictures=False)
    result = dataclasses.replace(result, wind_profile={})
    text = _norm(" ".join(_parse(report.render_report(result, zones, summary, plan, folder)).text))
    assert "map.png was not found" in text and "profile.png was not found" in text
    assert "carries no wind profile" in text
    assert "No wind observations were fused" in text
    assert "GP correction none" in text


def test_wind_figure_marks_observations_or_says_there_were_none(tmp_path, write_plan,
                                                                minimal_plan_text):
    from PIL import Image

    with_obs = synthetic_result(write_plan(tmp_path, minimal_plan_text))
    png = report.wind_profile_png(with_obs.wind_profile, 30_000.0)
    assert png == report.wind_profile_png(with_obs.wind_profile, 30_000.0)  # deterministic
    assert b"Software" not in png[:4096]  # no software-version metadata chunk
    with Image.open(io.BytesIO(png)) as im:
        rgb = np.asarray(im.convert("RGB"), dtype=float)
    # The observation histogram uses the palette's observation colour: some pixels carry it.
    colour = report._palette()["observations"].lstrip("#")
    target = np.array([int(colour[i:i + 2], 16) for i in (0, 2, 4)], dtype=float)
    # Bars are drawn with alpha 0.85 on white: expect the blended colour.
    blended = 0.85 * target + 0.15 * 255.0
    assert np.count_nonzero(np.all(np.abs(rgb - blended) < 6, axis=-1)) > 200
    no_obs = dict(with_obs.wind_profile)
    no_obs.pop("obs_alt_m")
    png2 = report.wind_profile_png(no_obs, 30_000.0)
    with Image.open(io.BytesIO(png2)) as im:
        rgb2 = np.asarray(im.convert("RGB"), dtype=float)
    assert np.count_nonzero(np.all(np.abs(rgb2 - blended) < 6, axis=-1)) == 0


def test_checklist_status_is_shown_when_checklist_json_exists(tmp_path, write_plan,
                                                              minimal_plan_text):
    from balloonpath.checklist import build_checklist, checklist_json

    folder, result, zones, summary, plan = make_forecast_folder(
        tmp_path, minimal_plan_text, write_plan, pictures=False)
    checklist = build_checklist(plan)
    doc = checklist_json(checklist)
    (folder / "checklist.json").write_text(json.dumps(doc), encoding="utf-8")
    text = _norm(" ".join(_parse(report.render_report(result, zones, summary, plan, folder)).text))
    assert "not run" not in text
    counts = doc["counts"]
    for status, word in (("pass", "pass"), ("fail", "fail"), ("warn", "check"), ("info", "note")):
        assert f"{word} {counts[status]}" in text
    assert doc["verdict"] in text
    for item in doc["items"]:
        if item["status"] in ("fail", "warn"):
            assert _norm(item["title"]) in text
    assert "out of date" not in text
    doc["launch_time"] = "2027-05-15T08:00:00Z"
    (folder / "checklist.json").write_text(json.dumps(doc), encoding="utf-8")
    text = _norm(" ".join(_parse(report.render_report(result, zones, summary, plan, folder)).text))
    assert "out of date" in text and "2027-05-15T08:00:00Z" in text


PHYSICS_PLAN = """\
[launch]
latitude = 47.25
longitude = 8.5
time = 2027-05-14T12:30:00Z
elevation_m = 420.0
time_zone = "America/Chicago"

[balloon]
envelope_mass_kg = 1.2
burst_diameter_m = 8.0
gas = "hydrogen"
neck_lift_kg = 2.1

[payload]
mass_kg = 1.4

[parachute]
diameter_m = 1.2

[winds]
sounding = "sounding.csv"
"""


def test_physics_plan_rows_and_plan_time_zone(tmp_path, write_plan):
    folder, result, zones, summary, plan = make_forecast_folder(tmp_path, PHYSICS_PLAN, write_plan,
                                                                pictures=False)
    text = _norm(" ".join(_parse(report.render_report(result, zones, summary, plan, folder)).text))
    assert "Envelope mass 1 200 g" in text
    assert "Burst diameter 8.00 m" in text
    assert "hydrogen, purity 100.0 %" in text
    assert "Neck lift 2 100 g" in text
    assert "Payload (below the neck) 1 400 g" in text
    assert "1.20 m diameter, drag coefficient 0.75" in text
    # America/Chicago is on CDT (UTC-5) in May (IANA tz database): 12:30Z is 07:30 CDT.
    assert "07:30 CDT" in text and "UTC-05:00" in text
    assert "launch at 47.250, 8.500" in text  # no site name given


# --------------------------------------------------------------------------------- real browser
def _browser() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome", "chrome"):
        found = shutil.which(name)
        if found:
            return found
    return None


def _run_browser(browser: str, profile: Path, *args: str) -> subprocess.CompletedProcess:
    cmd = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           "--disable-quic", f"--user-data-dir={profile}", *args]
    return subprocess.run(cmd, capture_output=True, timeout=60, check=False)


@pytest.fixture(scope="module")
def rendered(built, tmp_path_factory):
    """Render report.html once in headless Chromium: a screenshot, the DOM and an A4 PDF."""
    browser = _browser()
    if browser is None:
        pytest.skip("no Chromium browser installed (.ci/run installs the Debian package "
                    "'chromium'); the real-browser check of report.html did not run")
    tmp = tmp_path_factory.mktemp("browser")
    url = built["path"].resolve().as_uri()
    shot = tmp / "shot.png"
    pdf = tmp / "print.pdf"
    r1 = _run_browser(browser, tmp / "p1", f"--screenshot={shot}", "--window-size=1100,1600",
                      "--hide-scrollbars", url)
    r2 = _run_browser(browser, tmp / "p2", "--dump-dom", url)
    r3 = _run_browser(browser, tmp / "p3", f"--print-to-pdf={pdf}", "--no-pdf-header-footer", url)
    for r in (r1, r2, r3):
        assert r.returncode == 0, r.stderr.decode(errors="replace")[-2000:]
    return {"shot": shot, "dom": r2.stdout.decode("utf-8"), "pdf": pdf}


def test_browser_renders_a_page_that_is_not_blank(rendered):
    from PIL import Image

    with Image.open(rendered["shot"]) as im:
        rgb = np.asarray(im.convert("RGB"))
    assert rgb.shape[0] >= 1000 and rgb.shape[1] >= 1000
    packed = rgb.astype(np.int64) @ np.array([1 << 16, 1 << 8, 1])
    colours, counts = np.unique(packed, return_counts=True)
    top = int(colours[np.argmax(counts)])
    background = np.array([top >> 16, (top >> 8) & 255, top & 255], dtype=float)
    differs = np.any(np.abs(rgb - background) > 30, axis=-1)
    # A blank or unstyled page has one or two colours; text, cards and figures cover a good part of
    # this one (about 13 % of the pixels differ clearly from the background) in many colours.
    assert differs.mean() > 0.06
    assert colours.shape[0] > 500
    # The figures are drawn: the top half holds the key numbers and the start of the map.
    assert differs[: rgb.shape[0] // 2].mean() > 0.04


def test_browser_dom_holds_the_key_numbers(rendered, built):
    dom = rendered["dom"]
    text = _norm(" ".join(_parse(dom).text))
    assert "Balloon flight forecast" in text
    for needle in expected_key_numbers(built["summary"], built["result"]):
        assert _norm(needle) in text, needle
    imgs = [a for t, a in _parse(dom).tags if t == "img"]
    assert len(imgs) == 3 and all(a["src"].startswith("data:image/png;base64,") for a in imgs)


def test_browser_prints_on_a4(rendered):
    data = rendered["pdf"].read_bytes()
    assert data.startswith(b"%PDF")
    boxes = re.findall(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", data)
    assert boxes
    # ISO 216: A4 is 210 mm x 297 mm = 595.28 pt x 841.89 pt (1 pt = 1/72 in).
    for w, h in boxes:
        assert float(w) == pytest.approx(210 / 25.4 * 72, abs=1.5)
        assert float(h) == pytest.approx(297 / 25.4 * 72, abs=1.5)
    assert 1 <= len(boxes) <= 6  # the whole forecast on a few pages
