"""The vertical model: plan parameters, speeds by phase, perturbations, consistency with lift."""

from __future__ import annotations

import warnings
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest

from balloonpath.atmosphere import SoundingAtmosphere, StandardAtmosphere, usa1976
from balloonpath.errors import PlanError, PracticeWarning
from balloonpath.flight.lift import ascent_rate_at_altitude, plan_lift
from balloonpath.flight.phases import ASCENT, DESCENT, FLOAT, LANDED
from balloonpath.flight.vertical import (
    VerticalParams,
    perturbed,
    vertical_params_from_plan,
    vertical_speed_m_s,
)
from balloonpath.plan import parse_plan

ATM = StandardAtmosphere()


def make_plan(tmp_path: Path, **tables: dict):  # noqa: ANN201
    """An invented plan (launch at the made-up 'Tollen Flats' field) with the given tables."""
    (tmp_path / "s.csv").write_text("invented\n")
    data = {
        "launch": {
            "latitude": 44.1,
            "longitude": -96.3,
            "elevation_m": 400.0,
            "time": datetime(2031, 5, 4, 12, 0, tzinfo=UTC),
            "site_name": "Tollen Flats",
        },
        "winds": {"sounding": ["s.csv"]},
    }
    data.update(tables)
    return parse_plan(data, tmp_path / "plan.toml")


PHYSICS = {
    "balloon": {"envelope_mass_kg": 1.2, "burst_diameter_m": 6.0, "target_ascent_m_s": 5.0},
    "payload": {"mass_kg": 1.0},
    "parachute": {"diameter_m": 1.0, "drag_coefficient": 0.75},
}


def test_rates_plan_to_params(tmp_path: Path) -> None:
    plan = make_plan(
        tmp_path,
        rates={"ascent_m_s": 5.5, "burst_altitude_m": 28_000.0, "descent_sea_level_m_s": 4.0},
        float={"altitude_m": 20_000.0, "duration_min": 30.0},
        cutdown={"after_min": 150.0},
    )
    p = vertical_params_from_plan(plan)
    assert p.mode == "rates" and p.n_members == 1
    assert p.ascent_rate_m_s[0] == 5.5 and p.burst_altitude_m[0] == 28_000.0
    assert p.descent_sea_level_m_s[0] == 4.0
    assert p.float_altitude_m[0] == 20_000.0 and p.float_duration_s[0] == 1_800.0
    assert np.isnan(p.cutdown_altitude_m[0]) and p.cutdown_after_s[0] == 9_000.0
    assert np.isnan(p.free_lift_kg[0]) and np.isnan(p.payload_mass_kg[0])


def test_physics_plan_to_params(tmp_path: Path) -> None:
    plan = make_plan(tmp_path, **PHYSICS)
    p = vertical_params_from_plan(plan)
    lp = plan_lift(1.2, 1.0, 6.0, target_ascent_m_s=5.0, launch_altitude_m=400.0)
    assert p.mode == "physics"
    assert p.ascent_rate_m_s[0] == pytest.approx(5.0, rel=1e-9)
    assert p.free_lift_kg[0] == pytest.approx(lp.free_lift_kg, rel=1e-12)
    assert p.gas_amount_mol[0] == pytest.approx(lp.gas_amount_mol, rel=1e-12)
    assert p.burst_altitude_m[0] == pytest.approx(lp.burst_altitude_m, abs=1e-3)
    # Sea-level descent: 1 kg under a 1 m, Cd 0.75 canopy -> 5.214 m/s (REFERENCES.md §3c)
    assert p.descent_sea_level_m_s[0] == pytest.approx(5.214, rel=2e-4)
    assert p.payload_mass_kg[0] == 1.0
    assert np.isnan(p.float_altitude_m[0]) and np.isnan(p.cutdown_after_s[0])


def test_physics_float_above_burst_is_a_plan_error(tmp_path: Path) -> None:
    plan = make_plan(tmp_path, float={"altitude_m": 40_000.0, "duration_min": 10.0}, **PHYSICS)
    with pytest.raises(
        PlanError,
        match=r"plan.toml: \[float\] altitude_m = 40000.0: is not below "
        "the burst altitude .* m; fix",
    ):
        vertical_params_from_plan(plan)


def test_speeds_by_phase_rates_mode() -> None:
    nan = np.nan
    p = VerticalParams(
        "rates",
        [5.0, 6.0],
        [nan] * 2,
        [nan] * 2,
        [nan] * 2,
        [30e3, 31e3],
        [4.0, 5.0],
        [nan] * 2,
        [nan] * 2,
        [nan] * 2,
        [nan] * 2,
        [nan] * 2,
    )
    z = np.array([1_000.0, 20_000.0, 25_000.0, 20_000.0, 300.0])
    phase = np.array([ASCENT, ASCENT, FLOAT, DESCENT, LANDED])
    members = np.array([0, 1, 1, 0, 1])
    w = vertical_speed_m_s(phase, z, p, members, ATM)
    # Descent at 20 km: v0 sqrt(rho0 / rho) with rho(20 km) = 0.0889099 (REFERENCES.md §1c)
    np.testing.assert_allclose(
        w, [5.0, 6.0, 0.0, -4.0 * np.sqrt(1.225 / 0.0889099), 0.0], rtol=1e-5
    )
    # No moving element: zeros, and no atmosphere call is needed.
    assert np.all(
        vertical_speed_m_s(
            np.array([FLOAT, LANDED]), np.array([1e3, 0.0]), p, np.array([0, 1]), None
        )
        == 0.0
    )


def test_speeds_physics_mode_follow_the_drag_balance() -> None:
    lp = plan_lift(1.2, 1.0, 6.0, target_ascent_m_s=5.0)
    base = VerticalParams(
        "physics",
        [lp.launch_ascent_rate_m_s],
        [lp.free_lift_kg],
        [lp.gas_amount_mol],
        [0.30],
        [lp.burst_altitude_m],
        [5.0],
        [np.nan],
        [np.nan],
        [np.nan],
        [np.nan],
        [1.0],
    )
    fa = np.array([1.0, 0.9, 1.2])
    p = perturbed(base, fa, np.array([1.0, 0.95, 1.05]), np.array([1.0, 1.1, 0.8]))
    assert p.n_members == 3
    z = np.array([0.0, 8_000.0, 15_000.0, 22_000.0, 12_000.0, 12_000.0])
    members = np.array([0, 1, 2, 0, 1, 2])
    phase = np.array([ASCENT] * 4 + [DESCENT] * 2)
    w = vertical_speed_m_s(phase, z, p, members, ATM)
    expected_up = (
        ascent_rate_at_altitude(z[:4], lp.free_lift_kg, lp.gas_amount_mol, 0.30) * fa[members[:4]]
    )
    np.testing.assert_allclose(w[:4], expected_up, rtol=1e-12)
    assert w[0] == pytest.approx(5.0, rel=1e-9)
    rho = usa1976(12_000.0).density_kg_m3
    np.testing.assert_allclose(
        w[4:], -5.0 * np.array([1.1, 0.8]) * np.sqrt(1.225 / rho), rtol=1e-12
    )
    np.testing.assert_allclose(
        p.burst_altitude_m, lp.burst_altitude_m * np.array([1.0, 0.95, 1.05])
    )
    np.testing.assert_allclose(p.free_lift_kg, lp.free_lift_kg * fa**2)
    np.testing.assert_allclose(p.ascent_rate_m_s, lp.launch_ascent_rate_m_s * fa)


def test_physics_speed_uses_the_given_atmosphere() -> None:
    # A warmer day (same pressures): the balloon is bigger and the air thinner at each altitude.
    z = np.arange(0.0, 40_001.0, 500.0)
    s = usa1976(z)
    warm = SoundingAtmosphere(z, s.temperature_k + 15.0, s.pressure_pa)
    lp = plan_lift(1.2, 1.0, 6.0, target_ascent_m_s=5.0)
    p = VerticalParams(
        "physics",
        [5.0],
        [lp.free_lift_kg],
        [lp.gas_amount_mol],
        [0.3],
        [26e3],
        [5.0],
        [np.nan],
        [np.nan],
        [np.nan],
        [np.nan],
        [1.0],
    )
    zz = np.array([3_000.0, 18_000.0])
    w = vertical_speed_m_s(np.array([ASCENT, ASCENT]), zz, p, np.array([0, 0]), warm)
    np.testing.assert_allclose(
        w, ascent_rate_at_altitude(zz, lp.free_lift_kg, lp.gas_amount_mol, 0.3, warm), rtol=1e-12
    )
    assert np.all(
        np.abs(w / ascent_rate_at_altitude(zz, lp.free_lift_kg, lp.gas_amount_mol, 0.3) - 1.0)
        > 1e-3
    )


def test_rates_mode_perturbation() -> None:
    nan = [np.nan]
    p = VerticalParams("rates", [5.0], nan, nan, nan, [30e3], [4.0], nan, nan, nan, nan, nan)
    q = perturbed(p, np.array([1.1, 0.9]), np.array([1.0, 1.02]), np.array([0.9, 1.0]))
    np.testing.assert_allclose(q.ascent_rate_m_s, [5.5, 4.5])
    np.testing.assert_allclose(q.burst_altitude_m, [30e3, 30.6e3])
    np.testing.assert_allclose(q.descent_sea_level_m_s, [3.6, 4.0])
    assert np.all(np.isnan(q.free_lift_kg))


def test_take_and_repeat() -> None:
    nan = [np.nan]
    p = VerticalParams("rates", [5.0], nan, nan, nan, [30e3], [4.0], nan, nan, nan, nan, nan)
    r = p.repeat(4)
    assert r.n_members == 4 and np.all(r.ascent_rate_m_s == 5.0)
    q = perturbed(r, np.array([1.0, 1.1, 1.2, 1.3]), np.ones(4), np.ones(4))
    sub = q.take(np.array([3, 1]))
    np.testing.assert_allclose(sub.ascent_rate_m_s, [6.5, 5.5])
    with pytest.raises(ValueError, match="repeat: needs 1 member, has 4"):
        q.repeat(2)
    with pytest.raises(ValueError, match="burst_altitude_m has 2 members, expected 1"):
        VerticalParams("rates", [5.0], nan, nan, nan, [1.0, 2.0], [4.0], nan, nan, nan, nan, nan)


def test_integrating_the_vertical_speed_reproduces_time_to_burst() -> None:
    # Consistency: stepping dz/dt = w(z) (RK4, dt = 2 s) reaches the burst altitude at the time that
    # plan_lift obtained by quadrature (< 0.5 %).
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PracticeWarning)
        lp = plan_lift(1.2, 1.0, 6.0, target_ascent_m_s=5.0)
    p = VerticalParams(
        "physics",
        [5.0],
        [lp.free_lift_kg],
        [lp.gas_amount_mol],
        [0.3],
        [lp.burst_altitude_m],
        [5.0],
        [np.nan],
        [np.nan],
        [np.nan],
        [np.nan],
        [1.0],
    )
    ph, mem = np.array([ASCENT]), np.array([0])

    def w(z: float) -> float:
        return float(vertical_speed_m_s(ph, np.array([z]), p, mem, ATM)[0])

    z, t, dt = 0.0, 0.0, 2.0
    while True:
        k1 = w(z)
        k2 = w(z + 0.5 * dt * k1)
        k3 = w(z + 0.5 * dt * k2)
        k4 = w(z + dt * k3)
        z_new = z + dt * (k1 + 2 * k2 + 2 * k3 + k4) / 6
        if z_new >= lp.burst_altitude_m:
            t += dt * (lp.burst_altitude_m - z) / (z_new - z)
            break
        z, t = z_new, t + dt
    assert abs(t / lp.time_to_burst_s - 1.0) < 5e-3
