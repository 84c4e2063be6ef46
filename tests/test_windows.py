"""Tests of the launch-window planner (balloonpath.windows and `balloonpath windows`).

All places are invented ("Brambleford Common"); the sun checks use the published values of
REFERENCES.md §13 (astral documentation example, NOAA algorithm, and the west-longitude date pitfall).
"""

from __future__ import annotations

import csv
import json
import math
import re
from pathlib import Path

import numpy as np
import pytest

from balloonpath.atmosphere import StandardAtmosphere
from balloonpath.errors import CoverageError, PlanError
from balloonpath.forecast import LoadedWinds, run_forecast
from balloonpath.plan import load_plan
from balloonpath.timeutil import parse_iso
from balloonpath.windows import (
    launch_times,
    parse_every,
    parse_time,
    sun_at_landing,
    sweep_windows,
    window_score,
)
from balloonpath.winds.field import Coverage, UniformField
from balloonpath.zones import compute_zones

PLAN = """\
[launch]
latitude = {lat}
longitude = {lon}
time = 2027-05-14T08:00:00Z
elevation_m = 0.0
site_name = "Brambleford Common (invented)"
{tz}
[rates]
ascent_m_s = 5.0
burst_altitude_m = 9000.0
descent_sea_level_m_s = 6.0

[winds]
sounding = "sounding.csv"

[ensemble]
members = 20
seed = 3
wind_uncertainty = {unc}
{extra}
"""


def _plan(write_plan, tmp_path: Path, lat: float = 47.25, lon: float = 8.5, unc: str = "false",
          extra: str = "", tz: str = 'time_zone = "Europe/Zurich"', sounding: bool = False):
    path = write_plan(tmp_path, PLAN.format(lat=lat, lon=lon, unc=unc, extra=extra, tz=tz))
    if sounding:
        from balloonpath.winds.synthetic import write_sounding_csv

        write_sounding_csv(UniformField(6.0, 3.0), lat, lon, parse_iso("2027-05-14T06:00:00Z"),
                           tmp_path / "sounding.csv")
    return load_plan(path)


def _winds(field) -> LoadedWinds:  # noqa: ANN001
    return LoadedWinds(field, StandardAtmosphere(), {"sources": ["test field"]})


class TurningField:
    """Uniform wind of speed S blowing TOWARD azimuth theta(t) = theta0 + omega (t - t_ref)."""

    def __init__(self, speed: float, theta0_deg: float, omega_deg_h: float, t_ref: float) -> None:
        self.speed, self.theta0, self.omega, self.t_ref = speed, theta0_deg, omega_deg_h, t_ref

    def theta_deg(self, t: np.ndarray | float) -> np.ndarray:
        return self.theta0 + self.omega * (np.asarray(t, float) - self.t_ref) / 3600.0

    def wind(self, lat, lon, alt_m, time_s):  # noqa: ANN001, ANN201
        shape = np.broadcast(np.asarray(lat), np.asarray(lon), np.asarray(alt_m), np.asarray(time_s)).shape
        th = np.radians(np.broadcast_to(self.theta_deg(time_s), shape))
        return self.speed * np.sin(th), self.speed * np.cos(th)

    def coverage(self) -> Coverage:
        return Coverage()


T0 = parse_iso("2027-05-14T06:00:00Z")


# ---------------------------------------------------------------------------------- parsing
def test_every_and_times_parse_and_errors() -> None:
    assert parse_every("30m") == 1800.0
    assert parse_every("1h") == 3600.0
    assert parse_every("90m") == 5400.0
    assert parse_every("1h30m") == 5400.0
    with pytest.raises(PlanError, match=r"--every: cannot read '2x' as a duration; fix: write e\.g\. 30m"):
        parse_every("2x")
    with pytest.raises(PlanError, match="shorter than one minute"):
        parse_every("20s")
    assert parse_time("2027-05-14T09:00:00-05:00") == parse_iso("2027-05-14T14:00:00Z")
    with pytest.raises(PlanError, match=r"--start: .* with a time zone; fix:"):
        parse_time("2027-05-14T09:00", "--start")
    t = launch_times(T0, T0 + 3 * 3600, 3600)
    np.testing.assert_array_equal(t - T0, [0, 3600, 7200, 10800])
    with pytest.raises(PlanError, match="--end: .* is before --start"):
        launch_times(T0, T0 - 60, 600)


# ------------------------------------------------------------------------- analytic checks
def test_time_invariant_field_gives_identical_landings_and_warns(write_plan, tmp_path: Path) -> None:
    # A constant sounding loaded through the plan (background-error uncertainty model, members drawn).
    plan = _plan(write_plan, tmp_path, unc="true", sounding=True)
    sweep = sweep_windows(plan, T0, T0 + 4 * 3600, 7200, members=20)
    assert not sweep.time_varying
    assert any("does not vary in time" in w for w in sweep.warnings)
    lat = np.array([r.landing_lat for r in sweep.rows])
    lon = np.array([r.landing_lon for r in sweep.rows])
    assert np.all(lat == lat[0]) and np.all(lon == lon[0])
    # Daylight still differs: the later launches land closer to sunset.
    before = [r.minutes_before_sunset for r in sweep.rows]
    np.testing.assert_allclose(np.diff(before), -120.0, atol=1e-6)


def test_wind_turning_linearly_in_time_turns_the_landings(write_plan, tmp_path: Path) -> None:
    # Analytic: a uniform wind of speed S toward theta(t) = theta0 + omega t carries the balloon along
    # the chord of an arc: displacement S * 2 sin(omega D / 2) / omega toward theta(T + D / 2), for a
    # flight of duration D launched at T (the vertical motion does not depend on the wind).
    plan = _plan(write_plan, tmp_path)
    field = TurningField(speed=4.0, theta0_deg=30.0, omega_deg_h=12.0, t_ref=T0)
    sweep = sweep_windows(plan, T0, T0 + 3 * 3600, 3600, members=5, winds=_winds(field))
    assert sweep.time_varying
    assert not any("does not vary in time" in w for w in sweep.warnings)
    d_s = np.array([r.flight_time_s for r in sweep.rows])
    np.testing.assert_allclose(d_s, d_s[0], rtol=1e-9)  # same vertical flight at every launch time
    bearing = np.array([r.bearing_deg for r in sweep.rows])
    expected = field.theta_deg(np.array([r.launch_time_s for r in sweep.rows]) + d_s / 2.0)
    # 0.1 deg: the geodesic bearing over ~10 km differs from the local-plane chord by < 0.05 deg
    np.testing.assert_allclose(bearing, expected, atol=0.1)
    np.testing.assert_allclose(np.diff(bearing), 12.0, atol=0.02)  # turns at omega per hour
    w = math.radians(12.0) / 3600.0
    chord_km = 4.0 * 2.0 * math.sin(w * d_s[0] / 2.0) / w / 1e3
    np.testing.assert_allclose([r.distance_km for r in sweep.rows], chord_km, rtol=2e-3)


def test_stacked_sweep_matches_single_forecasts(write_plan, tmp_path: Path) -> None:
    # The stacked integration (all launch times in one call) equals run_forecast per launch time,
    # launch delays and member parameters included.
    plan = _plan(write_plan, tmp_path, extra="launch_delay_sigma_min = 10.0\n")
    winds = _winds(TurningField(speed=5.0, theta0_deg=80.0, omega_deg_h=-20.0, t_ref=T0))
    sweep = sweep_windows(plan, T0, T0 + 5400, 2700, members=12, winds=winds)
    for row, zones in zip(sweep.rows, sweep.zones, strict=True):
        single = run_forecast(plan, members=12, winds=winds, launch_time_s=row.launch_time_s)
        z = compute_zones(single)
        assert row.landing_lat == pytest.approx(float(single.landing.lat[0]), abs=1e-12)
        assert row.landing_time_s == pytest.approx(float(single.landing.time_s[0]), abs=1e-6)
        assert zones.center_lat == pytest.approx(z.center_lat, abs=1e-12)
        assert zones.ellipses[1].semi_major_m == pytest.approx(z.ellipses[1].semi_major_m, rel=1e-9)


# ----------------------------------------------------------------------------- constraints
AVOID = {"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {"name": "Quarry range"},
         "geometry": {"type": "Polygon", "coordinates": [[[7.5, 46.5], [10.5, 46.5], [10.5, 48.5],
                                                          [7.5, 48.5], [7.5, 46.5]]]}}]}


@pytest.mark.parametrize(("windows", "where", "reason"), [
    ("max_distance_km = 1.0", None, r"lands \d+\.\d km from the launch site \(max_distance_km 1\)"),
    ("max_zone_km = 0.001", None, r"90 % zone \d+\.\d km \(max_zone_km 0\.001\)"),
    ("avoid_probability_max = 0.5", "avoid", r"P\(Quarry range\) 100% \(avoid_probability_max 0\.5\)"),
    ("max_water_probability = 0.2", "sea", r"P\(water\) 100% \(max_water_probability 0\.2\)"),
    ("latest_landing_before_sunset_min = 60", None,
     r"lands \d+ min (after|before) sunset \(latest_landing_before_sunset_min 60\)"),
])
def test_each_constraint_rejects_with_its_reason(write_plan, tmp_path: Path, windows: str, where: str | None,
                                                 reason: str) -> None:
    extra = f"[windows]\n{windows}\n"
    lat, lon, tz = 47.25, 8.5, 'time_zone = "Europe/Zurich"'
    if where == "avoid":
        (tmp_path / "avoid.geojson").write_text(json.dumps(AVOID))
        extra += '[zones]\navoid = "avoid.geojson"\n'
    if where == "sea":  # invented launch from a ship in the open North Atlantic (no land within 500 km)
        lat, lon, tz = 45.0, -40.0, ""
    plan = _plan(write_plan, tmp_path, lat=lat, lon=lon, extra=extra, tz=tz)
    # Launches at 06:00Z and 18:00Z: the first lands in the morning, the second near or after sunset.
    sweep = sweep_windows(plan, T0, T0 + 12 * 3600, 12 * 3600, members=20,
                          winds=_winds(UniformField(5.0, 2.0)))
    rejected = [r for r in sweep.rows if not r.fit]
    assert rejected, "the constraint rejects at least one launch time"
    for r in rejected:
        assert len(r.reasons) == 1 and r.rank is None
        assert re.fullmatch(reason, r.reasons[0]), r.reasons[0]
    if "sunset" in windows:  # the morning launch is fit and ranked first, the evening one not
        assert sweep.rows[0].fit and sweep.rows[0].rank == 1 and not sweep.rows[1].fit


def test_score_orders_and_ranks_fit_windows(write_plan, tmp_path: Path) -> None:
    extra = "[windows]\nmax_distance_km = 500.0\n[recovery]\nbase_latitude = 47.30\nbase_longitude = 8.70\n"
    plan = _plan(write_plan, tmp_path, extra=extra)
    field = TurningField(speed=4.0, theta0_deg=0.0, omega_deg_h=45.0, t_ref=T0)
    sweep = sweep_windows(plan, T0, T0 + 4 * 3600, 3600, members=10, winds=_winds(field))
    assert all(r.fit for r in sweep.rows)
    assert sorted(r.rank for r in sweep.rows) == list(range(1, 6))
    best = sweep.rows[sweep.ranked()[0]]
    assert best.rank == 1 and best.score == min(r.score for r in sweep.rows)
    # The base lies to the east-north-east: the best launch lands closest to it.
    assert best.base_distance_km == min(r.base_distance_km for r in sweep.rows)
    assert best.score == pytest.approx(window_score(best, sweep.constraints))


def test_time_outside_the_winds_coverage_is_a_clear_error(write_plan, tmp_path: Path) -> None:
    plan = _plan(write_plan, tmp_path)
    field = TurningField(4.0, 0.0, 0.0, T0)
    field.coverage = lambda: Coverage(time_min_s=T0, time_max_s=T0 + 6 * 3600)  # type: ignore[method-assign]
    with pytest.raises(CoverageError, match=r"--end: .* at or after the end of the winds' time coverage"):
        sweep_windows(plan, T0, T0 + 7 * 3600, 3600, members=2, winds=_winds(field))


# ------------------------------------------------------------------------------------- sun
def test_sun_matches_astral_documentation_example() -> None:
    # REFERENCES.md §13: astral documentation example, London (51.5, -0.116), 2009-04-22, UTC:
    # sunrise 04:50:16.52, sunset 19:08:41.22 (NOAA/Meeus algorithm; docs vs astral 3.2 < 1 s).
    sun = sun_at_landing(51.5, -0.116, parse_iso("2009-04-22T12:00:00Z"), "UTC")
    assert sun.sunrise_s == pytest.approx(parse_iso("2009-04-22T04:50:16.52Z"), abs=60)
    assert sun.sunset_s == pytest.approx(parse_iso("2009-04-22T19:08:41.22Z"), abs=60)
    assert sun.daylight is True
    assert sun.minutes_before_sunset == pytest.approx((19 * 60 + 8 + 41.22 / 60) - 12 * 60, abs=1.0)


def test_sun_own_check_value_de_bilt_local_zone() -> None:
    # REFERENCES.md §13, own check value (computed, astral 3.2): De Bilt (52.10, 5.18), 2025-06-21,
    # sunrise 03:18:54Z, sunset 20:03:24Z; a landing at 20:30Z is 27 min after sunset, in darkness.
    sun = sun_at_landing(52.10, 5.18, parse_iso("2025-06-21T20:30:00Z"), "Europe/Amsterdam")
    assert sun.sunset_s == pytest.approx(parse_iso("2025-06-21T20:03:24Z"), abs=60)
    assert sun.sunrise_s == pytest.approx(parse_iso("2025-06-21T03:18:54Z"), abs=60)
    assert sun.daylight is False
    assert sun.minutes_before_sunset == pytest.approx(-26.6, abs=1.0)


def test_sun_west_longitude_date_pitfall() -> None:
    # REFERENCES.md §13 pitfall: Boulder (40.015, -105.27), astral with date 2025-03-20 in UTC returns
    # sunset 2025-03-20T01:12:16Z, the evening of the local 19th. A landing at 14:00 MDT on the 20th
    # (20:00Z) must be compared with the sunset of the LOCAL 20th, about one day later.
    wrong = parse_iso("2025-03-20T01:12:16Z")
    landing = parse_iso("2025-03-20T20:00:00Z")
    sun = sun_at_landing(40.015, -105.27, landing, "America/Denver")
    assert sun.sunset_s - wrong == pytest.approx(86_400.0, abs=180.0)  # sunsets ~1 min later per day
    assert sun.sunrise_s == pytest.approx(parse_iso("2025-03-20T13:04:04Z"), abs=60)
    assert sun.daylight is True and sun.minutes_before_sunset > 300.0


# ------------------------------------------------------------------------------------- CLI
def test_cli_end_to_end_writes_ranked_outputs(write_plan, tmp_path: Path, capsys) -> None:  # noqa: ANN001
    from balloonpath.cli import main

    extra = "[windows]\nlatest_landing_before_sunset_min = 30\n"
    plan = _plan(write_plan, tmp_path, unc="true", extra=extra, sounding=True)
    out = tmp_path / "win"
    args = ["windows", str(plan.path), "--start", "2027-05-14T06:00:00Z", "--end", "2027-05-14T19:00:00Z",
            "--every", "390m", "--out", str(out), "--members", "20", "--quiet"]
    assert main(args) == 0
    text = capsys.readouterr().out
    assert "Launch windows, best first (2 of 3 fit)" in text
    assert "rejected" in text and "after sunset" in text and "Caution" in text
    with (out / "windows.csv").open() as f:
        rows = list(csv.DictReader(f))
    assert [r["launch_time"] for r in rows] == ["2027-05-14T06:00:00Z", "2027-05-14T12:30:00Z",
                                               "2027-05-14T19:00:00Z"]
    assert [r["fit"] for r in rows] == ["yes", "yes", "no"] and rows[2]["rank"] == ""
    assert rows[0]["launch_time_local"] == "2027-05-14T08:00:00+02:00"
    gj = json.loads((out / "windows.geojson").read_text())
    kinds = [f["properties"]["kind"] for f in gj["features"]]
    assert kinds.count("nominal_landing") == 3 and kinds.count("zone_90") == 3
    assert (out / "windows.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    first = {name: (out / name).read_bytes() for name in ("windows.csv", "windows.geojson", "windows.png")}
    assert main(args) == 0  # same inputs and seed -> byte-identical files
    assert all((out / name).read_bytes() == data for name, data in first.items())
    bad = ["windows", str(plan.path), "--start", "2027-05-14T06:00:00Z", "--end", "2027-05-14T05:00:00Z",
           "--out", str(out)]
    assert main(bad) == 2
    assert "error: --end: 2027-05-14T05:00:00Z is before --start" in capsys.readouterr().err


# ---------------------------------------------------------------------------------- engines
# The reference of an engine run is the same sweep in this process: same plan, winds and seed, the same
# bits (docs/scale.md: per-member random streams). Dask clusters listen on 127.0.0.1 only.
def _same_sweep(a, b) -> None:  # noqa: ANN001
    from balloonpath.windows import windows_csv_text

    assert [r.rank for r in a.rows] == [r.rank for r in b.rows]
    for ra, rb in zip(a.rows, b.rows, strict=True):
        assert (ra.landing_lat, ra.landing_lon, ra.landing_time_s) == (rb.landing_lat, rb.landing_lon,
                                                                       rb.landing_time_s)
        assert (ra.zone_semi_major_km, ra.zone_semi_minor_km, ra.region_area_km2, ra.landing_time_p95_s,
                ra.p_avoid, ra.score, ra.fit, ra.reasons) == (
            rb.zone_semi_major_km, rb.zone_semi_minor_km, rb.region_area_km2, rb.landing_time_p95_s,
            rb.p_avoid, rb.score, rb.fit, rb.reasons)
    for za, zb in zip(a.zones, b.zones, strict=True):
        np.testing.assert_array_equal(za.landing_x_m, zb.landing_x_m)
        np.testing.assert_array_equal(za.landing_y_m, zb.landing_y_m)
    assert windows_csv_text(a) == windows_csv_text(b)
    assert sorted(a.warnings) == sorted(b.warnings)


def test_sweep_on_a_dask_cluster_equals_the_sweep_in_this_process(write_plan, tmp_path: Path) -> None:
    from distributed import LocalCluster

    from balloonpath.scale import Engine
    from balloonpath.winds.gp import BackgroundErrorField
    from balloonpath.winds.synthetic import SyntheticAtmosphereField

    (tmp_path / "avoid.geojson").write_text(json.dumps(AVOID))
    extra = ("launch_delay_sigma_min = 5.0\n[zones]\navoid = \"avoid.geojson\"\n[windows]\nmax_distance_km = 60.0\n"
             "latest_landing_before_sunset_min = 30\n[recovery]\nbase_latitude = 47.35\nbase_longitude = 8.9\n")
    plan = _plan(write_plan, tmp_path, unc="true", extra=extra)
    # invented time-varying truth (meander period 12 h) with a background-error model of 2 m/s
    truth = SyntheticAtmosphereField(47.25, 8.5, T0, seed=4, meander_period_s=12 * 3600.0)
    field = BackgroundErrorField(truth, 2.0, center=(47.25, 8.5, T0), alt_max_m=12_000.0,
                                 time_min_s=T0 - 3600.0, time_max_s=T0 + 14 * 3600.0)
    winds = _winds(field)
    args = (plan, T0, T0 + 11 * 3600, 3600)
    ref = sweep_windows(*args, members=40, winds=winds)
    assert ref.time_varying and ref.n_fit >= 1
    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                           dashboard_address=None, scheduler_kwargs={"dashboard": False})
    try:
        seen: list[tuple[int, int]] = []
        # chunks of 32 members: members 1-31 and 32-39 in two flight units (each over all 12 launch
        # times, so each chunk's realisations are drawn once), zones in 4 units of 3 launch times
        with Engine(scheduler=cluster.scheduler_address, chunk_members=32) as engine:
            remote = sweep_windows(*args, members=40, winds=winds, engine=engine,
                                   progress=lambda done, total: seen.append((done, total)))
    finally:
        cluster.close()
    _same_sweep(ref, remote)
    assert len(seen) == 2 and seen[-1] == (12 * 39, 12 * 39)  # the bar follows the 2 flight units
    with Engine(workers=1) as inline:  # one worker: the stacked sweep in this process
        _same_sweep(ref, sweep_windows(*args, members=40, winds=winds, engine=inline))


def test_cli_windows_on_two_local_workers_writes_the_same_table(write_plan, tmp_path: Path) -> None:
    from balloonpath.cli import main
    from balloonpath.windows import windows_csv_text

    plan = _plan(write_plan, tmp_path, unc="true", sounding=True,
                 extra="[windows]\nlatest_landing_before_sunset_min = 30\n")
    ref = sweep_windows(plan, T0, T0 + 6 * 3600, 1800, members=24)
    out = tmp_path / "two"
    assert main(["windows", str(plan.path), "--start", "2027-05-14T06:00:00Z", "--end", "2027-05-14T12:00:00Z",
                 "--every", "30m", "--members", "24", "--out", str(out), "--quiet", "--workers", "2"]) == 0
    assert (out / "windows.csv").read_text() == windows_csv_text(ref)
