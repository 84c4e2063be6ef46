"""Verification against flown tracks: self-verification, exact shifts, drag calibration, scores.

All places and flights are invented ("Thistlewick Downs" does not exist). Score checks use the closed
form of the CRPS of a normal forecast ([GneitingRaftery2007], from memory) and its definition as an
integral, evaluated independently with scipy.integrate.quad.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np
import pytest
from scipy import integrate, stats

from balloonpath.ensemble import State
from balloonpath.ensemble import integrate as fly
from balloonpath.errors import InputDataError
from balloonpath.flight.descent import parachute_descent_rate
from balloonpath.flight.vertical import vertical_params_from_plan
from balloonpath.forecast import fly_nominal, load_winds
from balloonpath.geodesy import forward, inverse
from balloonpath.plan import load_plan
from balloonpath.terrain import terrain_from_plan
from balloonpath.track import FlownTrack
from balloonpath.verify import (
    crps_ensemble,
    crps_gaussian,
    energy_score,
    find_flights,
    fit_spread,
    inside_ellipses,
    mahalanobis_d2,
    mahalanobis_rank,
    read_flown_track,
    spread_advice,
    spread_negative_log_likelihood,
    spread_radius2,
    verify_flight,
    verify_many,
    write_track_csv,
    write_verification,
)
from balloonpath.winds.field import MeanMemberWinds
from balloonpath.winds.synthetic import SyntheticAtmosphereField, write_sounding_csv
from balloonpath.zones import chi2_scale, ellipse_from_points

pytestmark = pytest.mark.filterwarnings("ignore:wind GP. no usable observations")

T0 = 1_810_000_000.0  # 2027-05-11T01:46:40Z, an invented flight
LAT0, LON0, ELEV = 51.20, -1.75, 150.0

RATES = """\
[launch]
latitude = 51.20
longitude = -1.75
time = {time}
elevation_m = 150.0
site_name = "Thistlewick Downs"

[rates]
ascent_m_s = 6.0
burst_altitude_m = 16000.0
descent_sea_level_m_s = 5.0

[winds]
sounding = "sounding.csv"

[ensemble]
members = 30
seed = 3
time_step_s = 20.0
"""

PHYSICS = """\
[launch]
latitude = 51.20
longitude = -1.75
time = {time}
elevation_m = 150.0

[balloon]
envelope_mass_kg = 0.6
burst_diameter_m = 6.0
neck_lift_kg = 1.9
drag_coefficient = 0.30

[payload]
mass_kg = 1.0

[parachute]
diameter_m = 1.0
drag_coefficient = 0.75

[winds]
sounding = "sounding.csv"

[ensemble]
members = 40
seed = 5
"""


def _plan(tmp_path: Path, text: str):
    from balloonpath.timeutil import iso_from_posix

    truth = SyntheticAtmosphereField(LAT0, LON0, T0, seed=4, jet_speed_m_s=30.0, ground_m=ELEV)
    write_sounding_csv(truth, LAT0, LON0, T0, tmp_path / "sounding.csv", levels_m=np.arange(0.0, 40_001.0, 500.0))
    path = tmp_path / "plan.toml"
    path.write_text(text.format(time=iso_from_posix(T0)), encoding="utf-8")
    return load_plan(path)


def _nominal_track(plan, winds) -> FlownTrack:
    traj, _ = fly_nominal(plan, winds)
    tr = traj.tracks
    keep = np.isfinite(tr["time_s"][0])
    return FlownTrack(tr["time_s"][0][keep], tr["lat"][0][keep], tr["lon"][0][keep], tr["alt_m"][0][keep],
                      "nominal run")


# ------------------------------------------------------------------------------ self-verification
def test_nominal_track_verifies_with_zero_error_and_shift_is_exact(tmp_path: Path) -> None:
    plan = _plan(tmp_path, RATES)
    winds = load_winds(plan)
    flown = _nominal_track(plan, winds)
    # Through the CSV reader too (times written to the microsecond, positions to 1e-7 degree ~ 1 cm).
    write_track_csv(flown, tmp_path / "flown.csv")
    flown = read_flown_track(tmp_path / "flown.csv")
    ver, result, zones = verify_flight(plan, flown, members=20, winds=winds)
    assert ver.landing_error_m < 0.05
    assert abs(ver.burst_altitude_error_m) < 0.01
    assert abs(ver.burst_time_error_s) < 1e-3
    assert abs(ver.landing_time_error_s) < 1e-3
    assert np.nanmax(ver.error_distance_m) < 0.05
    both = np.isfinite(ver.ascent_speed_flown_m_s)
    assert both.sum() >= 5
    np.testing.assert_allclose(ver.ascent_speed_flown_m_s[both], ver.ascent_speed_forecast_m_s[both], atol=1e-6)
    # Rates mode: the calibration gives back the plan's rates (6.0 m/s up, 5.0 m/s at sea level down).
    cal = ver.calibration.values
    assert cal["ascent_m_s"]["value"] == pytest.approx(6.0, rel=1e-3)
    assert cal["descent_sea_level_m_s"]["value"] == pytest.approx(5.0, rel=0.01)
    assert cal["burst_altitude_m"]["value"] == pytest.approx(16_000.0, abs=0.01)

    # A copy shifted 3.2 km toward 65 degrees (every point along the geodesic) lands exactly there.
    lat, lon = forward(flown.lat, flown.lon, 65.0, 3_200.0)
    shifted = dataclasses.replace(flown, lat=np.asarray(lat), lon=np.asarray(lon), source="shifted")
    ver2, _, _ = verify_flight(plan, shifted, members=20, winds=winds)
    assert ver2.landing_error_m == pytest.approx(3_200.0, abs=0.05)
    # The azimuth at the forecast landing equals the shift's azimuth there (same geodesic).
    d, az = inverse(ver2.forecast_landing[0], ver2.forecast_landing[1], lat[-1], lon[-1])
    assert ver2.landing_error_bearing_deg == pytest.approx(float(az), abs=1e-6)
    assert float(az) == pytest.approx(65.0, abs=1e-4)  # the CSV round trip moves points by ~1 mm
    assert np.nanmax(np.abs(ver2.error_distance_m - 3_200.0)) < 0.5

    # A copy delayed by 5 minutes: burst and landing times late by exactly 300 s.
    late = dataclasses.replace(flown, time_s=flown.time_s + 300.0)
    ver3, _, _ = verify_flight(plan, late, members=20, winds=winds, launch_time_s=float(flown.time_s[0]))
    assert ver3.burst_time_error_s == pytest.approx(300.0, abs=1e-6)
    assert ver3.landing_time_error_s == pytest.approx(300.0, abs=1e-6)

    files = write_verification(ver, result, zones, flown, tmp_path / "out")
    doc = json.loads((tmp_path / "out" / "verify.json").read_text())
    assert doc["landing"]["error_m"] < 0.05
    assert doc["ensemble"]["scores_reference"] == "GneitingRaftery2007"
    assert {f.name for f in files} == {"verify.json", "verify.txt", "verify.png"}
    assert "[rates]" in (tmp_path / "out" / "verify.txt").read_text()


# --------------------------------------------------------------------------------- calibration
def test_drag_calibration_recovers_known_coefficients(tmp_path: Path) -> None:
    plan = _plan(tmp_path, PHYSICS)
    winds = load_winds(plan)
    params = vertical_params_from_plan(plan, winds.atmosphere)
    cd_true, chute_true = 0.38, 0.95  # the "real" balloon differs from the plan's 0.30 and 0.75
    v0 = float(parachute_descent_rate(plan.payload.mass_kg, plan.parachute.diameter_m, chute_true))
    truth = dataclasses.replace(params, ascent_drag_coefficient=np.array([cd_true]),
                                descent_sea_level_m_s=np.array([v0]))
    state = State.at_launch(LAT0, LON0, ELEV, T0, 1)
    traj = fly(state, truth, MeanMemberWinds(winds.field), terrain_from_plan(plan), winds.atmosphere, dt_s=5.0)
    tr = traj.tracks
    keep = np.isfinite(tr["time_s"][0])
    flown = FlownTrack(tr["time_s"][0][keep], tr["lat"][0][keep], tr["lon"][0][keep], tr["alt_m"][0][keep], "synthetic")
    ver, _, _ = verify_flight(plan, flown, members=20, winds=winds)
    cal = ver.calibration.values
    assert cal["ascent_drag_coefficient"]["value"] == pytest.approx(cd_true, rel=0.05)
    assert cal["parachute_drag_coefficient"]["value"] == pytest.approx(chute_true, rel=0.05)
    assert cal["ascent_drag_coefficient"]["plan_value"] == pytest.approx(0.30)
    fitted = cal["ascent_drag_coefficient"]["value"]
    assert f"[balloon]\ndrag_coefficient = {fitted:.3f}" in ver.calibration.plan_lines
    # The slower real balloon bursts later than forecast.
    assert ver.burst_time_error_s > 0


# ------------------------------------------------------------------------------ zones and rank
def test_rank_and_zone_membership_on_a_constructed_ensemble() -> None:
    # 4 points on each of K circles of radius r_j (angles 0, 90, 180, 270 deg): mean 0, covariance
    # diag(s^2, s^2) with s^2 = 2 sum r_j^2 / (4K - 1), so a point at radius r has Mahalanobis radius r / s.
    k = 50
    radii = np.arange(1, k + 1) * 100.0
    ang = np.radians([0.0, 90.0, 180.0, 270.0])
    x = (radii[:, None] * np.sin(ang)[None, :]).ravel()
    y = (radii[:, None] * np.cos(ang)[None, :]).ravel()
    s = math.sqrt(2.0 * np.sum(radii**2) / (4 * k - 1))
    # Truth between circles 30 and 31, at 45 degrees: exactly 120 of 200 members are closer.
    r_truth = 3_050.0
    tx, ty = r_truth * math.sin(math.radians(45)), r_truth * math.cos(math.radians(45))
    assert mahalanobis_rank(np.column_stack([x, y]), [tx, ty]) == pytest.approx(120 / 200, abs=1e-12)
    assert mahalanobis_rank(np.column_stack([x, y]), [0.0, 0.0]) == 0.0
    assert mahalanobis_rank(np.column_stack([x, y]), [1e6, 0.0]) == 1.0
    # The ellipses of zones.py are circles of radius sqrt(chi2_2(p)) s ([Wang2015]).
    ellipses = [ellipse_from_points(x, y, p) for p in (0.5, 0.9, 0.95)]
    m = r_truth / s
    expect = {p: m <= chi2_scale(p) for p in (0.5, 0.9, 0.95)}
    assert inside_ellipses(ellipses, tx, ty) == expect
    assert expect == {0.5: False, 0.9: True, 0.95: True}  # the construction puts it between the two


def test_rank_is_uniform_for_a_calibrated_gaussian_ensemble() -> None:
    rng = np.random.default_rng(11)
    cov = np.array([[4.0, 1.5], [1.5, 2.0]]) * 1e6
    ranks = [mahalanobis_rank(rng.multivariate_normal([0, 0], cov, 300), rng.multivariate_normal([0, 0], cov))
             for _ in range(400)]
    # Kolmogorov-Smirnov against U(0, 1) (scipy.stats.kstest); p > 0.01 for a calibrated ensemble.
    assert stats.kstest(ranks, "uniform").pvalue > 0.01


# ------------------------------------------------------------------------------------------ CRPS
def test_crps_gaussian_closed_form_matches_the_integral_definition() -> None:
    # CRPS(F, y) = integral (F(x) - 1{x >= y})^2 dx ([GneitingRaftery2007]); quad evaluates it.
    for mu, sd, y in ((0.0, 1.0, 0.3), (2.0, 3.0, -4.0), (10.0, 0.5, 10.0)):
        def sq(x: float, mu: float = mu, sd: float = sd, y: float = y) -> float:
            return (stats.norm.cdf(x, mu, sd) - (1.0 if x >= y else 0.0)) ** 2

        ref = integrate.quad(sq, mu - 12 * sd, y, limit=200)[0] + integrate.quad(sq, y, mu + 12 * sd, limit=200)[0]
        assert float(crps_gaussian(mu, sd, y)) == pytest.approx(ref, rel=1e-7)


def test_crps_ensemble_matches_gaussian_and_energy_score_reduces_to_crps() -> None:
    rng = np.random.default_rng(5)
    sample = rng.normal(1.0, 2.0, 200_000)
    for y in (-1.0, 1.0, 4.0):
        # Monte Carlo error of the kernel form at N = 2e5 is about 1e-3 of sd.
        assert float(crps_ensemble(sample, y)) == pytest.approx(float(crps_gaussian(1.0, 2.0, y)), abs=8e-3)
    # A one-member ensemble: CRPS = |x - y|; the energy score of points on a line = CRPS of the line.
    assert float(crps_ensemble([3.0], 5.5)) == pytest.approx(2.5)
    pts = rng.normal(0.0, 1.0, 300)
    assert energy_score(np.column_stack([pts, np.zeros_like(pts)]), [0.7, 0.0]) == pytest.approx(
        float(crps_ensemble(pts, 0.7)), rel=1e-10)
    assert energy_score(np.column_stack([pts, pts]) / math.sqrt(2), [0.5, 0.5]) == pytest.approx(
        float(crps_ensemble(pts, 1 / math.sqrt(2))), rel=1e-10)


# ----------------------------------------------------------------------------- reading and many
def test_track_reader_and_many_folder(tmp_path: Path) -> None:
    bad = tmp_path / "bad.csv"
    bad.write_text("time,latitude,longitude\n2027-05-14T12:00:00Z,1,2\n", encoding="utf-8")
    with pytest.raises(InputDataError, match=r"bad\.csv: .*altitude_m.*; fix"):
        read_flown_track(bad)
    root = tmp_path / "season"
    (root / "flight-a").mkdir(parents=True)
    (root / "empty").mkdir()
    plan = _plan(root / "flight-a", RATES)
    write_track_csv(_nominal_track(plan, load_winds(plan)), root / "flight-a" / "flown.csv")
    with pytest.warns(Warning, match="empty: skipped"):
        cases = find_flights(root)
    assert [c.name for c in cases] == ["flight-a"]
    with pytest.warns(Warning, match="empty: skipped"):
        many = verify_many(root, tmp_path / "out", members=30)
    agg = many.aggregate
    assert agg["flights"] == 1 and agg["median_landing_error_m"] < 0.05
    assert agg["spread"]["fitted"] is False and "at least 5" in agg["spread"]["reason"]
    assert math.isfinite(many.rows[0]["mahalanobis_d2"])
    assert (tmp_path / "out" / "many.csv").read_text().startswith("flight,landing_error_km")
    with pytest.raises(InputDataError, match="contain no flight"):
        find_flights(root / "empty")


def test_cli_verify_needs_a_plan_and_a_track(capsys: pytest.CaptureFixture[str]) -> None:
    from balloonpath.cli import main

    assert main(["verify", "--out", "unused"]) == 2
    assert "verify: needs a plan and --flown TRACK; fix:" in capsys.readouterr().err


# ------------------------------------------------------------------------------ spread calibration
def _flights_d2(rng: np.random.Generator, n_flights: int, scale: float, tail_dof: float | None,
                n_members: int = 150) -> np.ndarray:
    """Squared distances of invented flights: ensembles N(0, S_k), flown error c S_k^1/2 z (/ sqrt(V / nu))."""
    out = []
    for _ in range(n_flights):
        a = rng.normal(0.0, 1.0, (2, 2)) * rng.uniform(1e3, 8e3)  # spreads and shapes differ between flights
        members = rng.normal(0.0, 1.0, (n_members, 2)) @ a.T
        e = scale * (a @ rng.normal(0.0, 1.0, 2))
        if tail_dof is not None:
            e = e / math.sqrt(rng.chisquare(tail_dof) / tail_dof)
        out.append(mahalanobis_d2(members, e))
    return np.array(out)


def test_spread_densities_and_radii_match_scipy() -> None:
    # For a bivariate Student-t with scale c^2 S, q / (2 c^2) ~ F(2, nu) ([KotzNadarajah2004], from memory);
    # for the normal q / c^2 ~ chi2(2). scipy.stats gives the densities and quantiles independently.
    q = np.array([0.05, 0.7, 2.0, 9.0])
    for c, nu in ((0.7, 4.0), (1.3, 12.0)):
        ref = -np.sum(np.log(stats.f.pdf(q / (2 * c * c), 2, nu) / (2 * c * c)))
        assert spread_negative_log_likelihood(q, c, nu) == pytest.approx(ref, rel=1e-10)
        ref_n = -np.sum(np.log(stats.chi2.pdf(q / (c * c), 2) / (c * c)))
        assert spread_negative_log_likelihood(q, c, None) == pytest.approx(ref_n, rel=1e-10)
        for p in (0.5, 0.9, 0.95):
            assert spread_radius2(p, c, nu) == pytest.approx(2 * c * c * stats.f.ppf(p, 2, nu), rel=1e-9)
            assert spread_radius2(p, c, None) == pytest.approx(c * c * stats.chi2.ppf(p, 2), rel=1e-12)


@pytest.mark.parametrize(("scale", "tail_dof"), [(0.7, None), (1.0, None), (1.4, None), (0.7, 4.0)])
def test_fit_spread_recovers_known_scale_and_tails(scale: float, tail_dof: float | None) -> None:
    # 400 invented flights whose flown landings are c times the ensemble's spread (normal or Student-t).
    # Maximum likelihood is consistent; tolerances from the estimates over 20 other seeds (measured: scale
    # sd 1.7 % for normal flights, 5 % for t(4) ones; normal flights gave nu >= 30 or "normal"; nu = 4 was
    # estimated 3.1-6.8), so 11 % is 2.2 sd at the worst.
    d2 = _flights_d2(np.random.default_rng(int(scale * 10) + (0 if tail_dof is None else 1)), 400, scale, tail_dof)
    fit = fit_spread(d2, n_bootstrap=60)
    assert fit.scale == pytest.approx(scale, rel=0.11)
    assert fit.scale_interval[0] <= scale * 1.02 and scale * 0.98 <= fit.scale_interval[1]
    if tail_dof is None:
        assert fit.tail_dof is None or fit.tail_dof > 25.0
    else:
        assert fit.tail_dof is not None and 2.5 <= fit.tail_dof <= 8.0
    # In sample, the fitted radii hold about p of the flights (binomial sd 2.5 / 1.5 / 1.1 points).
    for k, p in (("0.50", 0.5), ("0.90", 0.9), ("0.95", 0.95)):
        assert fit.coverage_fitted[k] == pytest.approx(p, abs=0.075)
    assert fit_spread(d2, n_bootstrap=60) == fit  # deterministic (seeded bootstrap)


def test_spread_advice_gives_plan_lines_and_refuses_too_few_flights() -> None:
    d2 = _flights_d2(np.random.default_rng(9), 80, 0.8, None)
    advice = spread_advice(list(d2), [(1.0, None)] * 80)
    assert advice["fitted"] and advice["plan_table"] == "ensemble" and not advice["already_calibrated"]
    assert advice["plan_lines"][0] == f"wind_spread_factor = {advice['scale']:.2f}"
    # Flights forecast with the spread already doubled: their distances are 4 times smaller; the advice
    # is the same absolute value.
    again = spread_advice(list(d2 / 4.0), [(2.0, None)] * 80)
    assert again["scale"] == pytest.approx(advice["scale"], rel=1e-6) and again["already_calibrated"]
    few = spread_advice(list(d2[:4]), [(1.0, None)] * 4)
    assert few["fitted"] is False and "at least 5" in few["reason"]
    with pytest.raises(InputDataError, match="too few"):
        fit_spread(d2[:4])


def test_student_t_members_and_empirical_zones() -> None:
    from balloonpath.winds.gp_sample import member_spread_multipliers
    from balloonpath.zones import ellipse_from_points

    ids = np.arange(1, 4001)
    m = member_spread_multipliers(7, ids, 0.8, 5.0)
    # (c / m)^2 nu = V ~ chi2(nu): Kolmogorov-Smirnov against scipy.stats.chi2(5).
    assert stats.kstest((0.8 / m) ** 2 * 5.0, stats.chi2(5.0).cdf).pvalue > 0.01
    # Each member's multiplier depends on (seed, member) only: a chunk gets the same values.
    np.testing.assert_array_equal(member_spread_multipliers(7, ids[100:200], 0.8, 5.0), m[100:200])
    np.testing.assert_array_equal(member_spread_multipliers(7, ids[:10], 0.8, None), np.full(10, 0.8))
    # The empirical ellipse holds the stated share of a heavy-tailed cloud (the normal radius does not).
    rng = np.random.default_rng(4)
    pts = rng.normal(0.0, 1.0, (4000, 2)) * m[:, None] * np.array([3e3, 1e3])
    for p in (0.5, 0.9, 0.95):
        inside = ellipse_from_points(pts[:, 0], pts[:, 1], p, radius="empirical").contains(pts[:, 0], pts[:, 1])
        assert abs(float(np.mean(inside)) - p) <= 1.0 / 4000 + 1e-12
    normal50 = ellipse_from_points(pts[:, 0], pts[:, 1], 0.5).contains(pts[:, 0], pts[:, 1])
    assert float(np.mean(normal50)) > 0.55  # a t(5) cloud's core is narrower than its covariance says


def test_wind_spread_factor_scales_the_wind_spread_and_keeps_the_mean(tmp_path: Path) -> None:
    from balloonpath.forecast import run_forecast

    # Vertical spreads off: the landing spread is then the wind's alone.
    exact = RATES.replace("time_step_s = 20.0", "time_step_s = 20.0\nascent_sigma_fraction = 0.0\n"
                          "burst_sigma_fraction = 0.0\ndescent_sigma_fraction = 0.0")
    base = _plan(tmp_path, exact)
    text = (tmp_path / "plan.toml").read_text(encoding="utf-8").replace(
        "time_step_s = 20.0", "time_step_s = 20.0\nwind_spread_factor = 0.5")
    (tmp_path / "half.toml").write_text(text, encoding="utf-8")
    half = load_plan(tmp_path / "half.toml")
    w1, w2 = load_winds(base), load_winds(half)
    assert w2.info["spread_factor"] == 0.5 and w1.info["spread_factor"] == 1.0
    pts = (np.array([LAT0, LAT0 + 0.3]), np.array([LON0, LON0 - 0.2]), np.array([3e3, 15e3]), np.array([T0, T0]))
    assert np.allclose(w2.field.std(*pts)[0], 0.5 * w1.field.std(*pts)[0], rtol=1e-12)
    r1 = run_forecast(base, members=80, winds=w1)
    r2 = run_forecast(half, members=80, winds=w2)
    # Member 0 flies the mean wind: identical. The members use the same normals, so their wind deviations
    # are exactly halved; the landings respond almost linearly (spread ratio 0.5 within 5 %).
    assert r1.landing.lat[0] == r2.landing.lat[0] and r1.landing.lon[0] == r2.landing.lon[0]

    def spread(r) -> float:
        d, _ = inverse(r.landing.lat[0], r.landing.lon[0], r.landing.lat[1:], r.landing.lon[1:])
        return float(np.sqrt(np.mean(np.asarray(d) ** 2)))

    ratio = spread(r2) / spread(r1)
    assert ratio == pytest.approx(0.5, rel=0.05), ratio

    # Student-t members: the plan's tails reach the forecast, and its zones hold their share of the members.
    (tmp_path / "heavy.toml").write_text(text.replace("wind_spread_factor = 0.5", "wind_spread_tail_dof = 4.0"),
                                         encoding="utf-8")
    heavy = load_plan(tmp_path / "heavy.toml")
    w3 = load_winds(heavy)
    assert w3.info["spread_tail_dof"] == 4.0 and w3.field.spread_tail_dof == 4.0
    assert np.allclose(w3.field.std(*pts)[0], math.sqrt(2.0) * w1.field.std(*pts)[0], rtol=1e-12)  # nu/(nu-2)
    r3 = run_forecast(heavy, members=81, winds=w3)
    from balloonpath.zones import compute_zones

    z3 = compute_zones(r3)
    for e in z3.ellipses:
        share = float(np.mean(e.contains(z3.landing_x_m, z3.landing_y_m)))
        assert abs(share - e.probability) <= 1.0 / 80 + 1e-12


def test_cli_many_prints_the_spread_factor_and_plan_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """Five invented flights of one plan, flown tracks shifted from the nominal run by 0-8 km."""
    import shutil

    from balloonpath.cli import main

    src = tmp_path / "src"
    src.mkdir()
    plan = _plan(src, RATES)
    flown = _nominal_track(plan, load_winds(plan))
    root = tmp_path / "season"
    for k, (az, dist) in enumerate(((0.0, 0.0), (80.0, 2_000.0), (200.0, 4_000.0), (310.0, 6_000.0),
                                    (20.0, 8_000.0))):
        day = root / f"flight-{k}"
        day.mkdir(parents=True)
        shutil.copy(src / "plan.toml", day / "plan.toml")
        shutil.copy(src / "sounding.csv", day / "sounding.csv")
        lat, lon = forward(flown.lat, flown.lon, az, dist)
        write_track_csv(dataclasses.replace(flown, lat=np.asarray(lat), lon=np.asarray(lon)), day / "flown.csv")
    assert main(["verify", "--many", str(root), "--out", str(tmp_path / "out"), "--members", "25"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "5 flights" in text and "fit the ensemble spread times" in text
    assert "put in the plan's [ensemble] table: wind_spread_factor = " in text
    spread = json.loads((tmp_path / "out" / "many.json").read_text())["aggregate"]["spread"]
    assert spread["fitted"] and spread["flights"] == 5
    assert spread["plan_lines"][0] == f"wind_spread_factor = {spread['scale']:.2f}"
