"""Lift planning: worked example, drag balance, burst, timing, properties, the `lift` command."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.integrate import quad

from balloonpath.atmosphere import G0, GAS_CONSTANT_USSA, SoundingAtmosphere, usa1976
from balloonpath.cli import main
from balloonpath.errors import PhysicsError, PracticeWarning
from balloonpath.flight.lift import (
    ascent_rate_at_altitude,
    burst_altitude_for,
    drag_coefficient_from_track,
    integrate_inverse_speed,
    neck_lift_for_ascent_rate,
    plan_lift,
    reynolds_number,
    sphere_diameter_m,
)

# USSA 1976 layer bases converted to geometric altitude (REFERENCES.md §1b), for quad breakpoints.
LAYER_BASES_M = [11_019.0, 20_063.0, 32_162.0, 47_350.0]


def worked_example(cd: float = 0.30, burst_d: float = 6.0):
    """REFERENCES.md §5 worked example: 3.0 m3 He at ISA sea level, envelope 1.2, payload 1.0 kg."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PracticeWarning)
        return plan_lift(1.2, 1.0, burst_d, neck_lift_kg=1.9672, drag_coefficient=cd)


def test_worked_example_lifts_and_size() -> None:
    # REFERENCES.md §5 (computed; He ideal gas, ISA sea level): D0 1.7894 m, gross 3.1672 kg,
    # neck 1.9672 kg, free 0.9672 kg for V0 = 3.0 m3. Inputs are the printed 4-decimal values.
    lp = worked_example()
    assert lp.gas_volume_m3 == pytest.approx(3.0, rel=1e-4)
    assert lp.launch_diameter_m == pytest.approx(1.7894, rel=1e-4)
    assert np.pi * lp.launch_diameter_m**2 / 4 == pytest.approx(2.5148, rel=1e-4)
    assert lp.gross_lift_kg == pytest.approx(3.1672, rel=1e-5)
    assert lp.free_lift_kg == pytest.approx(0.9672, rel=1e-5)


@pytest.mark.parametrize(("cd", "rate"), [(0.25, 4.963), (0.30, 4.530), (0.47, 3.620)])
def test_worked_example_launch_ascent_rate(cd: float, rate: float) -> None:
    # REFERENCES.md §5: launch ascent rate 4.963 / 4.530 / 3.620 m/s for Cd 0.25 / 0.30 / 0.47
    assert worked_example(cd).launch_ascent_rate_m_s == pytest.approx(rate, rel=3e-4)


def test_wmo_pilot_balloon_form_agrees() -> None:
    # WMO form v = q L^(1/2) / (L + W)^(1/3) with q = 6.7653 (SI, Cd 0.3) gives 4.530 m/s
    # (REFERENCES.md §5, computed; the WMO-No. 8 wording is from memory). L + W = total lift.
    lp = worked_example(0.30)
    total = lp.envelope_mass_kg + lp.payload_mass_kg + lp.free_lift_kg
    wmo = 6.7653 * np.sqrt(lp.free_lift_kg) / np.cbrt(total)
    assert lp.launch_ascent_rate_m_s == pytest.approx(wmo, rel=2e-4)


@pytest.mark.parametrize(("burst_d", "z_burst"), [(6.0, 26_337.0), (8.0, 31_926.0)])
def test_worked_example_burst_altitude(burst_d: float, z_burst: float) -> None:
    # REFERENCES.md §5: D_b 6.0 m -> z_b = 26 337 m; D_b 8.0 m -> 31 926 m (USSA76, ideal gas)
    assert worked_example(burst_d=burst_d).burst_altitude_m == pytest.approx(z_burst, abs=3.0)


def test_burst_state_of_worked_example() -> None:
    # REFERENCES.md §5: at D_b = 6 m, P/T = 9.3275 Pa/K, P = 2078.9 Pa, T = 222.88 K
    s = usa1976(worked_example().burst_altitude_m)
    assert float(s.pressure_pa / s.temperature_k) == pytest.approx(9.3275, rel=2e-4)
    assert float(s.pressure_pa) == pytest.approx(2078.9, rel=3e-4)
    assert float(s.temperature_k) == pytest.approx(222.88, abs=0.02)


def test_drag_balance_and_burst_volume_at_exact_ussa_state() -> None:
    # The computed ascent rate satisfies L g0 = 1/2 rho v^2 Cd A with the exact USSA76 state, and
    # the burst altitude satisfies V(z_b) = pi D_b^3 / 6 (REFERENCES.md §5 equations).
    lp = worked_example()
    z = np.array([0.0, 3_000.0, 11_000.0, 20_000.0, lp.burst_altitude_m])
    v = ascent_rate_at_altitude(z, lp.free_lift_kg, lp.gas_amount_mol, lp.drag_coefficient)
    s = usa1976(z)
    volume = lp.gas_amount_mol * GAS_CONSTANT_USSA * s.temperature_k / s.pressure_pa
    area = np.pi * sphere_diameter_m(volume) ** 2 / 4
    np.testing.assert_allclose(
        0.5 * s.density_kg_m3 * v**2 * lp.drag_coefficient * area, lp.free_lift_kg * G0, rtol=1e-12
    )
    assert volume[-1] == pytest.approx(np.pi * 6.0**3 / 6, rel=1e-7)


def test_ascent_rate_scales_as_density_to_minus_one_sixth() -> None:
    # REFERENCES.md §5: v(z)/v0 = 1.0885 (5 km), 1.1984 (10 km), 1.5483 (20 km), 2.0130 (30 km)
    lp = worked_example()
    z = np.array([0.0, 5_000.0, 10_000.0, 20_000.0, 30_000.0])
    v = ascent_rate_at_altitude(z, lp.free_lift_kg, lp.gas_amount_mol, lp.drag_coefficient)
    np.testing.assert_allclose(v[1:] / v[0], [1.0885, 1.1984, 1.5483, 2.0130], rtol=1e-4)


def test_time_to_burst_against_quad() -> None:
    # Independent quadrature of t = integral dz / v(z) with scipy.integrate.quad: agree to < 0.5 %.
    lp = worked_example()

    def inv(z: float) -> float:
        return 1.0 / float(ascent_rate_at_altitude(z, lp.free_lift_kg, lp.gas_amount_mol, 0.30))

    ref, _ = quad(inv, 0.0, lp.burst_altitude_m, points=LAYER_BASES_M[:2], limit=200)
    assert abs(lp.time_to_burst_s / ref - 1.0) < 1e-5  # required: < 0.5 %; measured 4e-9
    # The profile's cumulative times end at the same value and increase.
    assert lp.profile.time_s[-1] == pytest.approx(lp.time_to_burst_s, rel=1e-12)
    assert np.all(np.diff(lp.profile.time_s) > 0)


def test_integrate_inverse_speed_exact_for_linear_speed() -> None:
    # Analytic: for v = a + b z, integral dz / v = ln(v1 / v0) / b.
    a, b = 4.0, 2e-4
    t = integrate_inverse_speed(np.array([0.0, 1_000.0, 30_000.0]), lambda z: a + b * z)
    assert t[-1] == pytest.approx(np.log((a + b * 30_000.0) / a) / b, rel=1e-10)
    assert t[1] == pytest.approx(np.log((a + b * 1_000.0) / a) / b, rel=1e-10)


def test_neck_lift_for_target_ascent_rate() -> None:
    # Round trip on the worked example: 4.530 m/s with Cd 0.30 needs neck lift 1.9672 kg
    # (REFERENCES.md §5)
    nl = neck_lift_for_ascent_rate(4.530, 1.2, 1.0, drag_coefficient=0.30)
    assert nl == pytest.approx(1.9672, rel=2e-4)
    lp = plan_lift(1.2, 1.0, 6.0, target_ascent_m_s=5.0)
    assert lp.neck_lift_solved
    assert lp.launch_ascent_rate_m_s == pytest.approx(5.0, rel=1e-9)


def test_reynolds_number_of_a_sounding_balloon() -> None:
    # REFERENCES.md §3a: a 1.79 m balloon at 5 m/s at sea level has Re = 6.1e5 (supercritical)
    s = usa1976(0.0)
    assert float(reynolds_number(5.0, 1.79, s.density_kg_m3, s.temperature_k)) == pytest.approx(
        6.1e5, rel=0.01
    )
    # ... and the worked example crosses the drag crisis (~3e5, REFERENCES.md §3a) during ascent.
    lp = worked_example()
    assert lp.launch_reynolds_number > 4e5 > 2e5 > lp.burst_reynolds_number


def test_sounding_atmosphere_changes_the_burst_altitude() -> None:
    # A sounding identical to USSA76 gives the same burst; a 10 K warmer one (same pressures) a
    # higher one, since V = n R T / p grows with T (ideal gas).
    z = np.arange(0.0, 40_001.0, 250.0)
    s = usa1976(z)
    same = SoundingAtmosphere(z, s.temperature_k, s.pressure_pa)
    warm = SoundingAtmosphere(z, s.temperature_k + 10.0, s.pressure_pa)
    lp = worked_example()
    z_same = burst_altitude_for(lp.gas_amount_mol, 6.0, same)
    assert z_same == pytest.approx(lp.burst_altitude_m, abs=5.0)
    assert burst_altitude_for(lp.gas_amount_mol, 6.0, warm) < z_same


def test_drag_coefficient_recovered_from_a_track() -> None:
    # Calibration invariant: a track flown with Cd = 0.41 gives back Cd = 0.41.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PracticeWarning)
        lp = plan_lift(
            1.2, 1.0, 6.0, neck_lift_kg=1.9672, drag_coefficient=0.41, profile_step_m=200.0
        )
    fit = drag_coefficient_from_track(
        lp.profile.altitude_m, lp.profile.time_s, lp.free_lift_kg, lp.gas_amount_mol
    )
    assert fit.drag_coefficient == pytest.approx(0.41, rel=1e-3)
    np.testing.assert_allclose(fit.local_drag_coefficient, 0.41, rtol=5e-3)
    assert fit.reynolds_number[0] > fit.reynolds_number[-1]


def test_practice_warnings() -> None:
    # Common practice: team ascent 3-8 m/s (radiosondes ~5 m/s); burst below 15 km is unusual.
    with pytest.warns(PracticeWarning, match="launch ascent rate 9.00 m/s is outside the 3-8 m/s"):
        plan_lift(1.2, 1.0, 6.0, target_ascent_m_s=9.0)
    with pytest.warns(PracticeWarning, match="burst altitude .* is below 15000 m"):
        plan_lift(1.2, 1.0, 2.5, target_ascent_m_s=5.0)


# ---- properties (hypothesis) ------------------------------------------------------------------

masses = st.floats(0.2, 3.0)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(me=masses, mp=masses, extra=st.floats(0.1, 3.0), more=st.floats(0.01, 2.0))
def test_more_free_lift_rises_faster(me: float, mp: float, extra: float, more: float) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PracticeWarning)
        slow = plan_lift(me, mp, 12.0, neck_lift_kg=mp + extra)
        fast = plan_lift(me, mp, 12.0, neck_lift_kg=mp + extra + more)
    assert fast.free_lift_kg > slow.free_lift_kg
    assert fast.launch_ascent_rate_m_s > slow.launch_ascent_rate_m_s


@settings(max_examples=25, deadline=None)
@given(n=st.floats(50.0, 300.0), d=st.floats(4.0, 10.0), dd=st.floats(0.05, 3.0))
def test_bigger_burst_diameter_bursts_higher(n: float, d: float, dd: float) -> None:
    assert burst_altitude_for(n, d + dd) > burst_altitude_for(n, d)


@settings(max_examples=25, deadline=None)
@given(m=st.floats(-5.0, 0.0))
def test_negative_envelope_mass_is_rejected(m: float) -> None:
    with pytest.raises(PhysicsError, match="envelope_mass_kg: is .*, must be > 0; fix"):
        plan_lift(m, 1.0, 6.0, neck_lift_kg=2.0)


@settings(max_examples=25, deadline=None)
@given(m=st.floats(-5.0, -1e-6))
def test_negative_payload_mass_is_rejected(m: float) -> None:
    with pytest.raises(PhysicsError, match="payload_mass_kg: is .*, must be >= 0; fix"):
        plan_lift(1.0, m, 6.0, neck_lift_kg=2.0)


@settings(max_examples=25, deadline=None)
@given(mp=st.floats(0.5, 5.0), short=st.floats(0.0, 0.49))
def test_no_free_lift_is_rejected(mp: float, short: float) -> None:
    with pytest.raises(
        PhysicsError, match="free lift is .* <= 0 and the balloon will not rise; fix"
    ):
        plan_lift(1.0, mp, 6.0, neck_lift_kg=mp - short)


@settings(max_examples=15, deadline=None)
@given(d=st.floats(0.3, 1.7))
def test_burst_diameter_below_launch_diameter_is_rejected(d: float) -> None:
    # The worked example's launch diameter is 1.79 m.
    with pytest.raises(
        PhysicsError,
        match="burst_diameter_m: burst diameter .* is not larger than the "
        "launch diameter 1.79 m; fix",
    ):
        plan_lift(1.2, 1.0, d, neck_lift_kg=1.9672)


# ---- the command ------------------------------------------------------------------------------


PLAN = """
[launch]
latitude = 41.25
longitude = -101.5
time = 2031-06-02T14:00:00Z
elevation_m = 0.0
site_name = "Marrowfield school yard"

[winds]
sounding = ["s.csv"]

[balloon]
envelope_mass_kg = 1.2
burst_diameter_m = 6.0
neck_lift_kg = 1.9672

[payload]
mass_kg = 1.0

[parachute]
diameter_m = 1.0
drag_coefficient = 0.75
"""


def test_lift_command_with_options(capsys: pytest.CaptureFixture[str]) -> None:
    code = main(
        [
            "lift",
            "--envelope-mass",
            "1.2",
            "--payload-mass",
            "1.0",
            "--burst-diameter",
            "6",
            "--neck-lift",
            "1.9672",
            "--parachute-diameter",
            "1.0",
        ]
    )
    out = capsys.readouterr().out
    assert code == 0
    assert "burst altitude" in out and "26337 m" in out  # REFERENCES.md §5
    assert "4.53 m/s" in out  # launch ascent rate, Cd 0.30 (REFERENCES.md §5)
    assert "5.21 m/s" in out  # landing speed 5.214 m/s, 1 kg under 1 m Cd 0.75 (REFERENCES.md §3c)
    assert "Assumptions" in out and "no superpressure" in out


def test_lift_command_with_plan(tmp_path, capsys: pytest.CaptureFixture[str]) -> None:  # noqa: ANN001
    (tmp_path / "s.csv").write_text("invented\n")
    (tmp_path / "plan.toml").write_text(PLAN)
    code = main(["lift", "--plan", str(tmp_path / "plan.toml"), "--burst-diameter", "8"])
    out = capsys.readouterr().out
    assert code == 0
    assert "31926 m" in out  # D_b 8 m override, REFERENCES.md §5


def test_lift_command_reports_errors(capsys: pytest.CaptureFixture[str]) -> None:
    code = main(
        [
            "lift",
            "--envelope-mass",
            "1.2",
            "--payload-mass",
            "3.0",
            "--burst-diameter",
            "6",
            "--neck-lift",
            "2.0",
        ]
    )
    err = capsys.readouterr().err
    assert code == 2
    assert err.startswith("error: neck_lift_kg: neck lift 2 kg is not above the payload mass 3 kg")
    code = main(["lift", "--envelope-mass", "1.2", "--payload-mass", "1.0", "--neck-lift", "2.0"])
    assert code == 2
    assert "burst_diameter_m: is missing; fix: give --burst-diameter" in capsys.readouterr().err
