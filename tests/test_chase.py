"""The in-flight loop: robust fits, wind from fixes, phase detection, replay in a known truth field, CLI.

Everything is invented: the launch field "Brambleford Common", the truth wind field (seeded
SyntheticAtmosphereField) and its perturbed "forecast".
"""

from __future__ import annotations

import json
import warnings
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest

from balloonpath.atmosphere import StandardAtmosphere
from balloonpath.chase import (
    WIND_SIGMA_FLOOR_M_S,
    ChaseSession,
    FollowFeed,
    _burst_from_fill,
    estimate_flight_state,
    parse_position,
    robust_line,
    truncate_track,
    wind_observations_from_track,
)
from balloonpath.ensemble import State, integrate
from balloonpath.errors import InputDataError
from balloonpath.flight.phases import ASCENT, DESCENT, FLOAT, LANDED
from balloonpath.flight.vertical import perturbed, vertical_params_from_plan
from balloonpath.forecast import LoadedWinds
from balloonpath.geodesy import inverse, step_east_north
from balloonpath.plan import load_plan, parse_plan
from balloonpath.terrain import FlatTerrain
from balloonpath.track import FlownTrack
from balloonpath.winds.field import MeanMemberWinds
from balloonpath.winds.gp import BackgroundErrorField, background_error_sigma
from balloonpath.winds.synthetic import SyntheticAtmosphereField, write_sounding_csv

ATM = StandardAtmosphere()
T0 = 1_810_297_800.0  # 2027-05-14T12:30:00Z
LAT0, LON0, GROUND = 47.25, 8.5, 420.0

PLAN = """\
[launch]
latitude = 47.25
longitude = 8.5
time = 2027-05-14T12:30:00Z
elevation_m = 420.0
site_name = "Brambleford Common"

[rates]
ascent_m_s = 5.0
burst_altitude_m = 26000.0
descent_sea_level_m_s = 5.5

[winds]
sounding = "sounding.csv"

[ensemble]
members = 60
seed = 3
time_step_s = 30
"""


def _plan(tmp_path: Path, text: str = PLAN):  # noqa: ANN202
    truth = SyntheticAtmosphereField(LAT0, LON0, T0, seed=11, ground_m=GROUND, n_eddies=6)
    write_sounding_csv(truth.perturbed(5, 3.0, n_modes=6), LAT0, LON0, T0, tmp_path / "sounding.csv")
    (tmp_path / "plan.toml").write_text(text, encoding="utf-8")
    return load_plan(tmp_path / "plan.toml")


# ------------------------------------------------------------------------------------ small functions
def test_robust_line_matches_least_squares_and_resists_outliers() -> None:
    rng = np.random.default_rng(4)
    t = np.arange(0.0, 100.0, 10.0)
    y = 3.0 + 7.5 * t + rng.normal(0.0, 2.0, t.size)
    slope, _, _, _ = robust_line(t, y, 20.0)
    ref = np.polyfit(t, y, 1)[0]  # numpy least squares: Huber weights are all 1 when |r| < 1.345 sigma
    assert slope == pytest.approx(ref, rel=1e-9)
    _, _, sd, _ = robust_line(t, y, 2.0)
    assert sd == pytest.approx(2.0 / np.sqrt(np.sum((t - t.mean()) ** 2)), rel=0.35)
    y[-1] += 400.0  # one wild fix at the end (where it levers the slope most)
    slope_r, _, _, _ = robust_line(t, y, 2.0)
    assert abs(slope_r - 7.5) < 0.15 < 1.0 < abs(np.polyfit(t, y, 1)[0] - 7.5)


def test_wind_from_fixes_recovers_wind_and_is_calibrated() -> None:
    # Balloon drifting with a constant wind (10, -4) m/s, GPS noise 5 m, pendulum swing 5 m at 7 s.
    rng = np.random.default_rng(7)
    t = T0 + np.arange(0.0, 6000.0, 10.0)
    e_true, n_true = 10.0 * (t - T0), -4.0 * (t - T0)
    e = e_true + rng.normal(0, 5, t.size) + 5 * np.sin(2 * np.pi * t / 7.0 + 0.3)
    n = n_true + rng.normal(0, 5, t.size) + 5 * np.cos(2 * np.pi * t / 7.0)
    lat, lon = step_east_north(np.full(t.size, LAT0), np.full(t.size, LON0), e, n)
    track = FlownTrack(t, lat, lon, GROUND + 5.0 * (t - T0), "test")
    obs = wind_observations_from_track(track, position_sigma_m=5.0, shear_s=0.0)
    assert len(obs) > 50
    assert abs(np.mean(obs.u) - 10.0) < 0.1 and abs(np.mean(obs.v) + 4.0) < 0.1
    # the measurement part of the error model is calibrated: normalised errors have an rms near 1 (the
    # floor stands for the balloon-follows-the-wind assumption, exact here, so it is taken out)
    noise = np.sqrt(obs.sigma**2 - WIND_SIGMA_FLOOR_M_S**2)
    zu, zv = (obs.u - 10.0) / noise, (obs.v + 4.0) / noise
    assert 0.4 < np.sqrt(np.mean(np.concatenate([zu, zv]) ** 2)) < 1.3
    # the step_east_north round trip is the geodesy module's; check the distance independently (pyproj)
    from pyproj import Geod

    dist = Geod(ellps="WGS84").inv(LON0, LAT0, lon[-1], lat[-1])[2]
    assert dist == pytest.approx(np.hypot(e[-1], n[-1]), rel=1e-3)


def _profile_track(tmp_path: Path, f_up: float, f_down: float):  # noqa: ANN202
    plan = _plan(tmp_path)
    p0 = vertical_params_from_plan(plan, ATM)
    p = perturbed(p0, f_up, 25_000.0 / 26_000.0, f_down)
    st = State.at_launch(LAT0, LON0, GROUND, T0, 1)
    tr = integrate(st, p, MeanMemberWinds(SyntheticAtmosphereField(LAT0, LON0, T0, seed=1)), FlatTerrain(GROUND),
                   ATM, dt_s=5.0)
    k = np.isfinite(tr.tracks["time_s"][0])
    pre = np.arange(-300.0, 0.0, 20.0)  # on the ground before launch
    t = np.concatenate([T0 + pre, tr.tracks["time_s"][0][k][::4]])
    lat = np.concatenate([np.full(pre.size, LAT0), tr.tracks["lat"][0][k][::4]])
    lon = np.concatenate([np.full(pre.size, LON0), tr.tracks["lon"][0][k][::4]])
    z = np.concatenate([np.full(pre.size, GROUND), tr.tracks["alt_m"][0][k][::4]])
    return plan, FlownTrack(t, lat, lon, z, "test"), tr


def test_phase_burst_and_rates_are_detected(tmp_path: Path) -> None:
    plan, track, tr = _profile_track(tmp_path, 1.10, 0.90)
    burst_t = float(tr.burst_time_s[0])
    est = estimate_flight_state(truncate_track(track, T0 - 60), plan, ATM)
    assert est.phase == ASCENT and not est.launched
    est = estimate_flight_state(truncate_track(track, T0 + 1800), plan, ATM)
    assert est.phase == ASCENT and est.launched and est.launch_time_s == pytest.approx(T0, abs=25)
    assert est.ascent_factor == pytest.approx(1.10, abs=0.01)
    assert est.vertical_speed_m_s == pytest.approx(5.5, abs=0.1)
    assert est.burst_alt_expected_m == pytest.approx(26_000.0)
    est = estimate_flight_state(truncate_track(track, burst_t + 900), plan, ATM)
    assert est.phase == DESCENT and est.burst
    assert est.burst_alt_m == pytest.approx(25_000.0, abs=150.0)
    assert est.burst_time_s == pytest.approx(burst_t, abs=25.0)
    assert est.descent_factor == pytest.approx(0.90, abs=0.02)
    # on the ground after landing: level after burst
    t_land = float(tr.landing_time_s[0])
    extra = FlownTrack(
        np.concatenate([track.time_s, t_land + np.arange(20.0, 400.0, 20.0)]),
        np.concatenate([track.lat, np.full(19, track.lat[-1])]),
        np.concatenate([track.lon, np.full(19, track.lon[-1])]),
        np.concatenate([track.alt_m, np.full(19, GROUND)]), "test")
    assert estimate_flight_state(extra, plan, ATM).phase == LANDED


def test_float_is_detected(tmp_path: Path) -> None:
    plan = _plan(tmp_path)
    t = T0 + np.arange(0.0, 7200.0, 30.0)
    z = np.minimum(GROUND + 5.0 * (t - T0), 18_000.0)
    est = estimate_flight_state(FlownTrack(t, np.full(t.size, LAT0), np.full(t.size, LON0), z, "f"), plan, ATM)
    assert est.phase == FLOAT
    assert est.phase_start_s == pytest.approx(T0 + (18_000.0 - GROUND) / 5.0, abs=60.0)


def test_burst_from_fill_agrees_with_lift_planning(tmp_path: Path) -> None:
    # A fuller balloon climbs faster and bursts lower: solving the fill from the measured ascent factor must
    # give the burst altitude that lift planning gives for that fill (constant Cd: the speed ratio is the
    # same at every altitude).
    from balloonpath.flight.lift import plan_lift

    (tmp_path / "s.csv").write_text("invented\n")
    plan = parse_plan({
        "launch": {"latitude": 44.1, "longitude": -96.3, "elevation_m": 400.0,
                   "time": datetime(2031, 5, 4, 12, 0, tzinfo=UTC), "site_name": "Tollen Flats"},
        "winds": {"sounding": ["s.csv"]},
        "balloon": {"envelope_mass_kg": 1.2, "burst_diameter_m": 6.0, "target_ascent_m_s": 5.0},
        "payload": {"mass_kg": 1.0}, "parachute": {"diameter_m": 1.0, "drag_coefficient": 0.75},
    }, tmp_path / "plan.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        p0 = vertical_params_from_plan(plan, ATM)
        fuller = plan_lift(1.2, 1.0, 6.0, target_ascent_m_s=5.5, launch_altitude_m=400.0)
    b = _burst_from_fill(plan, p0, 5.5 / 5.0, ATM)
    assert b == pytest.approx(fuller.burst_altitude_m, abs=5.0)
    assert b < p0.burst_altitude_m[0]


@pytest.mark.parametrize(("text", "expected"), [
    ("-33.85,151.2", (-33.85, 151.2)),
    ("33.85S, 151.2E", (-33.85, 151.2)),
    ("47.25,-8.5", (47.25, -8.5)),
    ("\u221233.85,151.2", (-33.85, 151.2)),
    ("47.25 N,8.5 W", (47.25, -8.5)),
])
def test_parse_position(text: str, expected: tuple[float, float]) -> None:
    assert parse_position(text) == pytest.approx(expected)


def test_parse_position_error() -> None:
    with pytest.raises(InputDataError, match=r"--crew: '47\.25' is not LAT,LON; fix: write --crew"):
        parse_position("47.25")


# ------------------------------------------------------------------------------------ truth replay
def test_replay_in_truth_field_sharpens_and_covers(tmp_path: Path) -> None:
    """Replay of an invented flight in a known truth field (synthetic truth, perturbed background).

    Checks (issue [9]): the landing error falls as the flight goes on; after burst it is at most 30 % of
    the pre-launch error; the truth lands inside the 95 % ellipse at >= 90 % of the updates.
    """
    plan = _plan(tmp_path)
    truth = SyntheticAtmosphereField(LAT0, LON0, T0, seed=11, ground_m=GROUND, n_eddies=6)
    background = truth.perturbed(5, 3.0, n_modes=6)
    field = BackgroundErrorField(background, background_error_sigma(12.0), center=(LAT0, LON0, T0))
    winds = LoadedWinds(field, ATM, {"sources": ["synthetic background"]})
    # the real balloon climbs 6 % faster, bursts 4 % lower and falls 8 % faster than planned
    p = perturbed(vertical_params_from_plan(plan, ATM), 1.06, 0.96, 1.08)
    tr = integrate(State.at_launch(LAT0, LON0, GROUND, T0, 1), p, MeanMemberWinds(truth), FlatTerrain(GROUND),
                   ATM, dt_s=2.0)
    k = np.isfinite(tr.tracks["time_s"][0])
    t, la, lo, z = (tr.tracks[n][0][k][::10] for n in ("time_s", "lat", "lon", "alt_m"))  # a fix every 20 s
    rng = np.random.default_rng(1)
    e = rng.normal(0, 4, t.size) + 4 * np.sin(2 * np.pi * t / 7.0)  # GPS noise and pendulum swing
    n = rng.normal(0, 4, t.size) + 4 * np.cos(2 * np.pi * t / 7.0)
    la, lo = step_east_north(la, lo, e, n)
    track = FlownTrack(t, la, lo, z + rng.normal(0, 5, t.size), "truth")
    land = (float(tr.landing_lat[0]), float(tr.landing_lon[0]))
    burst_t, land_t = float(tr.burst_time_s[0]), float(tr.landing_time_s[0])

    session = ChaseSession(plan, winds=winds, members=60, seed=3, dt_s=30.0, crew=(47.3, 9.0))

    def error_and_cover(u) -> tuple[float, bool]:  # noqa: ANN001
        x, y = u.zones.projection().to_local(*land)
        e95 = [e for e in u.zones.ellipses if abs(e.probability - 0.95) < 1e-9][0]
        return float(inverse(u.landing_lat, u.landing_lon, *land)[0]), bool(e95.contains(x, y))

    pre_err, pre_in = error_and_cover(session.prelaunch())
    errs, inside, after = [], [pre_in], []
    for frac in np.linspace(0.1, 0.95, 8):
        cut = T0 + frac * (land_t - T0)
        u = session.update(truncate_track(track, cut))
        err, ok = error_and_cover(u)
        errs.append(err)
        inside.append(ok)
        if cut > burst_t + 120:
            after.append(err)
            assert u.state.burst
        assert u.crew_distance_m is not None and u.time_left_s > 0
    assert pre_err > 3000.0  # the background is wrong enough for the check to mean something
    assert np.mean(errs[4:]) < np.mean(errs[:4]) < pre_err
    assert len(after) >= 2 and max(after) <= 0.30 * pre_err
    assert np.mean(inside) >= 0.9


# ------------------------------------------------------------------------------------ CLI and live feed
def _write_flight_csv(path: Path, broken: bool = True) -> None:
    rows = ["time,latitude,longitude,altitude_m"]
    from balloonpath.timeutil import iso_from_posix

    for i in range(0, 40):
        t = T0 + 30.0 * i
        rows.append(f"{iso_from_posix(t)},{LAT0 + 0.0004 * i:.6f},{LON0 + 0.0012 * i:.6f},{GROUND + 150.0 * i:.1f}")
        if broken and i == 10:
            rows += ["garbage", f"{iso_from_posix(t)},{LAT0:.6f},{LON0:.6f},{GROUND:.1f}", "2027-13-01T00:00:00Z,1,2,3"]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")


def test_cli_replay_end_to_end(tmp_path: Path) -> None:
    from lxml import etree

    from balloonpath.cli import main

    _plan(tmp_path, PLAN.replace("members = 60", "members = 12"))
    _write_flight_csv(tmp_path / "flight.csv")
    out = tmp_path / "out"
    args = ["chase", str(tmp_path / "plan.toml"), "--replay", str(tmp_path / "flight.csv"), "--speed", "0",
            "--every", "300", "--max-updates", "3", "--crew", "-47.2,8.4", "--out"]
    assert main([*args, str(out)]) == 0
    assert main([*args, str(tmp_path / "again")]) == 0
    for name in ("chase.geojson", "chase.kml", "chase.json"):  # same inputs and seed: same bytes
        assert (out / name).read_bytes() == (tmp_path / "again" / name).read_bytes()
    summary = json.loads((out / "chase.json").read_text())
    assert summary["state"]["phase_name"] == "ascent"
    assert summary["telemetry"]["skipped"] == {"bad_time": 1, "duplicate": 1, "malformed": 1}
    assert summary["crew"]["latitude"] == -47.2
    kinds = {f["properties"]["kind"] for f in json.loads((out / "chase.geojson").read_text())["features"]}
    assert {"flown_track", "balloon", "predicted_track", "predicted_landing", "landing_ellipse", "crew"} <= kinds
    root = etree.fromstring((out / "chase.kml").read_bytes())
    assert root.tag.endswith("kml")
    assert not list(out.glob(".*.part"))  # atomic writes leave no temporary files


def test_cli_bad_crew_is_one_line_error(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from balloonpath.cli import main

    _plan(tmp_path)
    _write_flight_csv(tmp_path / "flight.csv", broken=False)
    code = main(["chase", str(tmp_path / "plan.toml"), str(tmp_path / "flight.csv"), "--crew", "north"])
    assert code == 2
    assert "error: --crew: 'north' is neither LAT,LON nor an existing file" in capsys.readouterr().err


def test_follow_feed_keeps_running_through_bad_lines(tmp_path: Path) -> None:
    full = tmp_path / "full.csv"
    _write_flight_csv(full)
    lines = full.read_text(encoding="utf-8").splitlines(keepends=True)
    path = tmp_path / "live.csv"
    path.write_text("".join(lines[:5]), encoding="utf-8")
    rest = iter(lines[5:])

    def receiver_writes(_seconds: float) -> None:  # each poll pause, the receiver appends a line
        line = next(rest, None)
        if line is not None:
            with open(path, "a", encoding="utf-8") as fh:
                fh.write(line)

    clock = iter(np.arange(0.0, 1000.0, 1.0))
    feed = FollowFeed(path, every_s=300.0, poll_s=0.0, idle_timeout_s=20.0, sleep=receiver_writes,
                      clock=lambda: float(next(clock)))
    got = list(feed)
    assert len(got) >= 3
    spacing = np.diff([float(tr.time_s[-1]) for tr, _ in got])
    assert np.all(spacing[:-1] >= 300.0)  # at most one update per 300 s of flight; the last flushes the tail
    track, report = got[-1]
    assert len(track) == 40 and report.total_skipped == 3
