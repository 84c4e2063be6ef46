"""Integrator checks: exact landings in uniform winds, shear against a fine-step reference, ensemble spread.

References named beside each check: scipy.integrate.quad / solve_ivp as independent integrators, pyproj.Geod
(Karney 2013) for distances on WGS84, USSA 1976 densities through balloonpath.atmosphere (itself tested
against fluids and ambiance in test_atmosphere.py).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp

from balloonpath.atmosphere import SEA_LEVEL_DENSITY, StandardAtmosphere, density_kg_m3
from balloonpath.ensemble import State, draw_member_factors, integrate
from balloonpath.errors import PhysicsError
from balloonpath.flight.phases import ASCENT, DESCENT, LANDED
from balloonpath.flight.vertical import VerticalParams
from balloonpath.geodesy import inverse, radii_of_curvature
from balloonpath.terrain import FlatTerrain
from balloonpath.winds.field import MeanMemberWinds, OffsetMemberWinds, UniformField

ATM = StandardAtmosphere()


def rates_params(n: int = 1, ascent: float = 5.0, burst: float = 30_000.0, descent: float = 5.0,
                 float_alt: float = np.nan, float_s: float = 0.0, cut_alt: float = np.nan,
                 cut_after: float = np.nan) -> VerticalParams:
    nan = np.full(n, np.nan)
    return VerticalParams(
        mode="rates",
        ascent_rate_m_s=np.full(n, ascent), free_lift_kg=nan, gas_amount_mol=nan,
        ascent_drag_coefficient=nan, burst_altitude_m=np.full(n, burst),
        descent_sea_level_m_s=np.full(n, descent), float_altitude_m=np.full(n, float_alt),
        float_duration_s=np.full(n, float_s), cutdown_altitude_m=np.full(n, cut_alt),
        cutdown_after_s=np.full(n, cut_after), payload_mass_kg=nan,
    )


def descent_speed(z: float, v0: float = 5.0) -> float:
    """Simple-mode descent speed v0 sqrt(rho0 / rho(z)) with USSA 1976 densities."""
    return v0 * float(np.sqrt(SEA_LEVEL_DENSITY / density_kg_m3(z)))


def fly(params: VerticalParams, field, lat=38.6, lon=-98.9, alt=560.0, ground=560.0, dt=10.0, n=1,
        winds=None):
    state = State.at_launch(lat, lon, alt, 1.8e9, n)
    return integrate(state, params, winds or MeanMemberWinds(field, n), FlatTerrain(ground), ATM, dt_s=dt)


def test_uniform_north_wind_lands_at_quadrature_distance():
    # Reference: independent quadrature (scipy.integrate.quad) of the ground distance
    # v * [int M/(M+z) dz / v_ascent + int M/(M+z) dz / v_descent(z)], M the meridian radius of curvature
    # (the integrator scales horizontal motion by R/(R+h); the same factor is applied here).
    # Distance measured with pyproj.Geod (Karney 2013) through balloonpath.geodesy.inverse.
    v_wind, z0, zb = 8.0, 560.0, 30_000.0
    traj = fly(rates_params(), UniformField(0.0, v_wind), dt=10.0)
    m, _ = radii_of_curvature(38.6)
    t_up = quad(lambda z: m / (m + z) / 5.0, z0, zb, epsabs=1e-9)[0]
    t_down = quad(lambda z: m / (m + z) / descent_speed(z), z0, zb, epsabs=1e-9, limit=200)[0]
    ref = v_wind * (t_up + t_down)
    dist, az = inverse(38.6, -98.9, traj.landing_lat[0], traj.landing_lon[0])
    assert abs(float(dist) - ref) < 1.0 + 1e-4 * ref
    assert float(az) == pytest.approx(0.0, abs=1e-6)
    # flight time against the same quadrature without the geometric factor
    t_ref = (zb - z0) / 5.0 + quad(lambda z: 1 / descent_speed(z), z0, zb, limit=200)[0]
    assert traj.landing_time_s[0] - 1.8e9 == pytest.approx(t_ref, abs=0.5)
    assert traj.burst_alt_m[0] == pytest.approx(zb, abs=1e-6)
    assert traj.landing_alt_m[0] == pytest.approx(560.0)


def test_uniform_east_wind_across_antimeridian_southern_hemisphere():
    # Reference: along a parallel the longitude advances by u dt / ((N + h) cos(phi)); quadrature of
    # dt / (N + z) over the flight (scipy.integrate.quad), N the prime-vertical radius of curvature.
    lat0, lon0, u = -40.0, 179.8, 20.0
    traj = fly(rates_params(burst=20_000.0), UniformField(u, 0.0), lat=lat0, lon=lon0, alt=0.0, ground=0.0)
    _, n = radii_of_curvature(lat0)
    s_up = quad(lambda z: 1 / ((n + z) * 5.0), 0.0, 20_000.0)[0]
    s_down = quad(lambda z: 1 / ((n + z) * descent_speed(z)), 0.0, 20_000.0, limit=200)[0]
    dlon = np.degrees(u * (s_up + s_down) / np.cos(np.radians(lat0)))
    expected = (lon0 + dlon + 180.0) % 360.0 - 180.0
    assert traj.landing_lat[0] == pytest.approx(lat0, abs=1e-9)
    assert traj.landing_lon[0] == pytest.approx(expected, abs=1e-5)
    assert -180.0 <= traj.landing_lon[0] < 0.0  # crossed the antimeridian, normalised


def test_north_wind_near_80_north_matches_meridian_arc():
    # Reference: pyproj.Geod meridian arc (Karney 2013) equals the quadrature ground distance.
    v = 15.0
    traj = fly(rates_params(burst=25_000.0), UniformField(0.0, v), lat=80.0, lon=10.0, alt=0.0, ground=0.0)
    m, _ = radii_of_curvature(80.0)
    t_up = quad(lambda z: m / (m + z) / 5.0, 0.0, 25_000.0)[0]
    t_down = quad(lambda z: m / (m + z) / descent_speed(z), 0.0, 25_000.0, limit=200)[0]
    ref = v * (t_up + t_down)
    dist, _ = inverse(80.0, 10.0, traj.landing_lat[0], traj.landing_lon[0])
    assert abs(float(dist) - ref) < 1.0 + 1e-4 * ref
    assert traj.landing_lon[0] == pytest.approx(10.0, abs=1e-9)


class ShearField:
    """u grows linearly with height and v turns with time (an analytic field)."""

    def wind(self, lat, lon, alt_m, time_s):
        alt = np.asarray(alt_m, dtype=float)
        t = np.asarray(time_s, dtype=float)
        u = 2.0 + 1.2e-3 * alt + 3.0 * np.sin(alt / 4000.0)
        v = -1.0 + 0.5e-3 * alt + 1e-4 * (t - 1.8e9)
        return u + 0 * t, v + 0 * alt

    def coverage(self):
        from balloonpath.winds.field import Coverage

        return Coverage()


def test_shear_field_against_fine_step_reference():
    # Reference: scipy.integrate.solve_ivp (RK45, rtol 1e-11) on the same equations of motion written
    # independently in geographic coordinates: dlat/dt = v / (M(lat) + z), dlon/dt = u / ((N(lat) + z)
    # cos(lat)), dz/dt = w, with the WGS84 radii of curvature (balloonpath.geodesy, checked against
    # REFERENCES §12 in test_geodesy.py); events for burst and touchdown.
    field = ShearField()
    traj = fly(rates_params(burst=24_000.0), field, lat=10.0, lon=20.0, alt=0.0, ground=0.0, dt=10.0)

    def rhs(t, y, phase):
        lat, lon, z = y
        m, n = radii_of_curvature(lat)
        u, v = field.wind(lat, lon, z, 1.8e9 + t)
        w = 5.0 if phase == "up" else -descent_speed(max(z, 0.0))
        return [np.degrees(float(v) / (m + z)), np.degrees(float(u) / ((n + z) * np.cos(np.radians(lat)))), w]

    def burst(t, y, phase):
        return y[2] - 24_000.0

    def ground(t, y, phase):
        return y[2]

    burst.terminal, ground.terminal = True, True
    up = solve_ivp(rhs, (0, 1e5), [10.0, 20.0, 0.0], args=("up",), events=burst, rtol=1e-11, atol=1e-9)
    t_b = up.t_events[0][0]
    down = solve_ivp(rhs, (t_b, 1e5), up.y_events[0][0], args=("down",), events=ground, rtol=1e-11,
                     atol=1e-9)
    lat_ref, lon_ref, _ = down.y_events[0][0]
    miss, _ = inverse(lat_ref, lon_ref, traj.landing_lat[0], traj.landing_lon[0])
    total, _ = inverse(10.0, 20.0, lat_ref, lon_ref)
    assert float(total) > 50_000  # the test is meaningful: a long drift
    assert float(miss) < 5.0 + 1e-4 * float(total)
    assert traj.landing_time_s[0] - 1.8e9 == pytest.approx(down.t_events[0][0], abs=1.0)


def test_halving_the_step_changes_landing_by_less_than_20_m():
    # Convergence check documented in docs/forecast.md.
    field = ShearField()
    a = fly(rates_params(burst=24_000.0), field, lat=10.0, lon=20.0, alt=0.0, ground=0.0, dt=10.0)
    b = fly(rates_params(burst=24_000.0), field, lat=10.0, lon=20.0, alt=0.0, ground=0.0, dt=5.0)
    d, _ = inverse(a.landing_lat[0], a.landing_lon[0], b.landing_lat[0], b.landing_lon[0])
    assert float(d) < 20.0


def test_constant_offset_per_member_gives_sigma_times_flight_time():
    # Invariant (docs/design.md, ARCHITECTURE.md): a wind error drawn once per member as a constant offset
    # with sd sigma displaces each landing by offset * T_flight, so the spread is sigma * T (within 10 %
    # for 400 members: the sample sd has about 3.5 % relative error). Fresh noise per step would give a
    # spread smaller by about sqrt(T / dt) and fail this.
    n, sigma = 400, 2.0
    rng = np.random.default_rng(7)
    du, dv = rng.normal(0, sigma, n), rng.normal(0, sigma, n)
    base = UniformField(5.0, 0.0)
    traj = fly(rates_params(n), base, n=n, winds=OffsetMemberWinds(base, du, dv))
    t_flight = traj.landing_time_s - 1.8e9
    m, nn = radii_of_curvature(38.6)
    north = np.radians(traj.landing_lat - 38.6) * m
    assert np.std(north) == pytest.approx(sigma * np.mean(t_flight), rel=0.10)
    assert np.allclose(t_flight, t_flight[0])


def test_float_then_descent_and_cutdown_after_time():
    p = rates_params(float_alt=20_000.0, float_s=1800.0)
    traj = fly(p, UniformField(0.0, 0.0))
    # ascent 19 440 m at 5 m/s, then 30 min float, then descent from the float altitude
    assert traj.burst_alt_m[0] == pytest.approx(20_000.0, abs=1e-6)
    assert traj.burst_time_s[0] - 1.8e9 == pytest.approx((20_000 - 560) / 5 + 1800, abs=1e-6)
    cut = fly(rates_params(cut_after=1200.0), UniformField(0.0, 0.0))
    assert cut.burst_time_s[0] - 1.8e9 == pytest.approx(1200.0, abs=1e-6)
    assert cut.burst_alt_m[0] == pytest.approx(560 + 5 * 1200.0, abs=1e-6)


def test_zero_wind_lands_under_the_launch_on_terrain():
    class Slope:
        def elevation_m(self, lat, lon):
            return 500.0 + 0.0 * np.asarray(lat) + 2000.0 * (np.asarray(lon) + 98.9)

    state = State.at_launch(38.6, -98.9, 500.0, 1.8e9, 1)
    traj = integrate(state, rates_params(), MeanMemberWinds(UniformField(0, 0)), Slope(), ATM)
    assert traj.landing_lat[0] == pytest.approx(38.6, abs=1e-12)
    assert traj.landing_alt_m[0] == pytest.approx(500.0, abs=1e-6)


def test_start_mid_flight_in_descent():
    state = State(lat=np.array([38.6]), lon=np.array([-98.9]), alt_m=np.array([10_000.0]),
                  phase=np.array([DESCENT], np.int8), time_s=np.array([1.8e9]),
                  launch_time_s=np.array([1.8e9 - 3000]), phase_start_s=np.array([1.8e9]),
                  members=np.array([0]))
    traj = integrate(state, rates_params(), MeanMemberWinds(UniformField(0, 0)), FlatTerrain(0.0), ATM)
    t_ref = quad(lambda z: 1 / descent_speed(z), 0.0, 10_000.0, limit=200)[0]
    assert traj.landing_time_s[0] - 1.8e9 == pytest.approx(t_ref, abs=0.5)
    assert np.isnan(traj.burst_alt_m[0])
    assert traj.tracks["phase"][0, -1] == LANDED and traj.tracks["phase"][0, 0] == DESCENT


def test_endless_float_is_a_clear_error():
    p = rates_params(float_alt=20_000.0, float_s=1e9)
    with pytest.raises(PhysicsError, match="still airborne"):
        integrate(State.at_launch(0, 0, 0, 0.0, 1), p, MeanMemberWinds(UniformField(0, 0)),
                  FlatTerrain(0.0), ATM, max_flight_s=6 * 3600.0)


def test_member_factors_do_not_depend_on_chunking():
    a = draw_member_factors(np.arange(1, 50), 3, 0.05, 0.05, 0.1, 600.0)
    b = draw_member_factors(np.arange(20, 50), 3, 0.05, 0.05, 0.1, 600.0)
    assert np.array_equal(a.ascent[19:], b.ascent)
    assert np.array_equal(a.launch_delay_s[19:], b.launch_delay_s)
    assert np.all(a.launch_delay_s >= 0)
    nominal = draw_member_factors(np.array([0]), 3, 0.05, 0.05, 0.1, 600.0)
    assert nominal.ascent[0] == 1.0 and nominal.launch_delay_s[0] == 0.0


def test_phase_codes():
    assert (ASCENT, DESCENT, LANDED) == (0, 2, 3)
