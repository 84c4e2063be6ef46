"""Parachute descent against the worked examples of REFERENCES.md §3c and scipy quadrature."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import quad

from balloonpath.atmosphere import usa1976
from balloonpath.errors import PhysicsError
from balloonpath.flight.descent import (
    descent_rate_at_density,
    descent_time_s,
    kinetic_energy_j,
    parachute_descent_rate,
    plan_descent,
    terminal_velocity_m_s,
)
from balloonpath.units import FOOT_M, POUND_KG

# REFERENCES.md §3c worked example (computed, USSA76 rho): m = 1.0 kg, D0 = 1.0 m, Cd0 = 0.75
EXAMPLE_Z = np.array([0.0, 1_000.0, 5_000.0, 10_000.0, 20_000.0, 30_000.0])
EXAMPLE_V = np.array([5.214, 5.473, 6.724, 8.973, 19.352, 42.528])
EXAMPLE_RHO = np.array([1.22500, 1.11166, 0.73643, 0.41351, 0.08891, 0.01841])


def test_terminal_velocity_metric_worked_example() -> None:
    # REFERENCES.md §3c metric table, printed to 4 significant figures
    rho = usa1976(EXAMPLE_Z).density_kg_m3
    np.testing.assert_allclose(rho, EXAMPLE_RHO, rtol=1e-4)
    v = terminal_velocity_m_s(1.0, rho, 0.75, np.pi * 1.0**2 / 4)
    np.testing.assert_allclose(v, EXAMPLE_V, rtol=2e-4)


def test_terminal_velocity_english_units_example() -> None:
    # REFERENCES.md §3c (Potvin's conventions): W = 10 lbf, 6 ft canopy (S = 28.27 ft2),
    # rho = 0.002377 slug/ft3, Cd 0.75 -> 19.92 ft/s.
    # 1 slug = 14.5939 kg (NIST SP 811; from memory).
    rho = 0.002377 * 14.5939029 / FOOT_M**3
    v = parachute_descent_rate(10 * POUND_KG, 6 * FOOT_M, 0.75, rho)
    assert float(v) / FOOT_M == pytest.approx(19.92, rel=5e-4)


def test_sea_level_mode_scales_with_ussa_density() -> None:
    # v(z) = v0 sqrt(rho0 / rho(z)) with USSA76 densities printed in REFERENCES.md §1c
    z = np.array([0.0, 5_000.0, 11_000.0, 20_000.0, 25_000.0, 32_000.0, 40_000.0, 47_000.0])
    rho_table = np.array(
        [1.22500, 0.736428, 0.364802, 0.0889099, 0.0400839, 0.0135552, 0.00399568, 0.00149652]
    )
    v0 = 4.6
    got = descent_rate_at_density(v0, usa1976(z).density_kg_m3)
    np.testing.assert_allclose(got, v0 * np.sqrt(1.225 / rho_table), rtol=1e-5)
    # ... and the parachute mode is the same law: the example's sea-level rate, scaled, gives
    # the table.
    v_sl = parachute_descent_rate(1.0, 1.0, 0.75)
    np.testing.assert_allclose(
        descent_rate_at_density(v_sl, usa1976(EXAMPLE_Z).density_kg_m3), EXAMPLE_V, rtol=2e-4
    )


def test_descent_time_against_quad() -> None:
    # Independent scipy.integrate.quad of t = integral dz / v(z): agree to < 0.5 %.
    v0 = 5.214

    def inv(z: float) -> float:
        return 1.0 / float(descent_rate_at_density(v0, usa1976(z).density_kg_m3))

    ref, _ = quad(inv, 350.0, 30_000.0, points=[11_019.0, 20_063.0], limit=200)
    assert abs(descent_time_s(30_000.0, 350.0, v0) / ref - 1.0) < 1e-5  # required < 0.5 %
    assert descent_time_s(100.0, 350.0, v0) == 0.0


def test_plan_descent_landing_speed_and_energy() -> None:
    # REFERENCES.md §3c: 5.214 m/s at sea level for 1 kg; kinetic energy 1/2 m v^2 = 13.59 J.
    d = plan_descent(1.0, 1.0, 0.75, start_altitude_m=30_000.0, landing_elevation_m=0.0)
    assert d.landing_rate_m_s == pytest.approx(5.214, rel=2e-4)
    assert d.start_rate_m_s == pytest.approx(42.528, rel=2e-4)
    assert d.landing_kinetic_energy_j == pytest.approx(0.5 * 1.0 * 5.214**2, rel=5e-4)
    assert float(kinetic_energy_j(2.0, 3.0)) == 9.0
    # Landing higher up (1000 m) is faster: 5.473 m/s (REFERENCES.md §3c).
    assert plan_descent(1.0, 1.0, 0.75, 30_000.0, 1_000.0).landing_rate_m_s == pytest.approx(
        5.473, rel=2e-4
    )


def test_plan_descent_rejects_bad_inputs() -> None:
    with pytest.raises(PhysicsError, match="payload_mass_kg: is -1.0, must be > 0; fix"):
        plan_descent(-1.0, 1.0)
    with pytest.raises(PhysicsError, match="parachute_diameter_m: is 0.0, must be > 0; fix"):
        plan_descent(1.0, 0.0)


@settings(max_examples=30, deadline=None)
@given(m=st.floats(0.1, 10.0), k=st.floats(1.01, 4.0), d=st.floats(0.3, 3.0))
def test_heavier_payload_falls_faster_as_root_of_mass(m: float, k: float, d: float) -> None:
    # v ~ sqrt(m) at fixed canopy and density (terminal-velocity formula, REFERENCES.md §3c)
    ratio = parachute_descent_rate(k * m, d, 0.75) / parachute_descent_rate(m, d, 0.75)
    assert float(ratio) == pytest.approx(np.sqrt(k), rel=1e-12)
