"""Ascent drag laws: the sphere correlation, the drag-crisis law, the speed solve, a real ascent."""

from __future__ import annotations

import pickle
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.optimize import brentq

from balloonpath.atmosphere import G0, SoundingAtmosphere, StandardAtmosphere, dynamic_viscosity_pa_s
from balloonpath.errors import PhysicsError, PracticeWarning
from balloonpath.flight.drag import (
    ascent_drag_coefficient,
    drag_crisis_log_slope,
    drag_crisis_shape,
    morrison_drag_coefficient,
    solve_ascent_speed,
)
from balloonpath.flight.lift import (
    ascent_rate_at_altitude,
    drag_coefficient_from_track,
    integrate_inverse_speed,
    plan_lift,
    sphere_diameter_m,
)
from balloonpath.flight.phases import ASCENT
from balloonpath.flight.vertical import VerticalParams, perturbed, vertical_speed_m_s

ATM = StandardAtmosphere()
DWD_FILE = Path("/work/shared/data/dwd-radiosonde-04928-2021060112.csv")


def reynolds_plan(**kw):  # noqa: ANN003, ANN201
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PracticeWarning)
        args = dict(target_ascent_m_s=5.0, drag_model="reynolds")
        args.update(kw)
        return plan_lift(0.8, 0.3, 8.0, **args)


# REFERENCES.md §3a, computed with fluids 1.3.1 `fluids.drag.drag_sphere(Re, Method="Morrison")`
@pytest.mark.parametrize(
    ("re", "cd"),
    [(1e3, 0.484), (1e4, 0.394), (1e5, 0.425), (2e5, 0.412), (3e5, 0.168), (3.5e5, 0.106),
     (4e5, 0.087), (5e5, 0.088), (1e6, 0.141)],
)
def test_morrison_against_fluids_table(re: float, cd: float) -> None:
    assert float(morrison_drag_coefficient(re)) == pytest.approx(cd, abs=6e-4)


def test_drag_crisis_shape_against_sphere_regimes() -> None:
    # REFERENCES.md §3a (fluids 1.3.1, Morrison and Barati_high columns): subcritical 1e3-2e5 is
    # 0.41-0.48 (Hoerner's 0.47, from memory); past the crisis, at 1e6, 0.14 (Morrison) to 0.21
    # (Barati_high). Our law: 0.47 -> 0.20 with Morrison's centre 2.63e5 and steepness 8.
    s = drag_crisis_shape(np.array([1e3, 1e4, 1e5, 2e5, 5e5, 1e6]))
    assert np.all((s[:3] > 0.46) & (s[:3] <= 0.47))
    assert 0.41 < s[3] < 0.48  # Morrison 0.412, Barati_high 0.473 at 2e5
    assert 0.141 <= s[5] <= 0.213 and s[4] < 0.21
    # Both the law and Morrison fall by half of their step between 2e5 and 3e5 (crisis position).
    m = morrison_drag_coefficient(np.array([2e5, 3e5]))
    half_law = float(drag_crisis_shape(2.63e5))
    assert m[1] < 0.5 * (0.41 + 0.09) < m[0]
    assert half_law == pytest.approx(0.5 * (0.47 + 0.20), rel=1e-12)


def test_drag_force_grows_with_speed_so_the_balance_has_one_root() -> None:
    # d ln(Cd Re^2) / d ln Re = 2 + d ln Cd / d ln Re > 0 everywhere (finite differences agree
    # with the analytic slope); Morrison's smooth sphere violates it in the crisis (3e5 -> 3.5e5).
    re = np.logspace(3, 7, 4001)
    slope = drag_crisis_log_slope(re)
    assert slope.min() > -1.75 and 2.0 + slope.min() > 0.25
    fd = np.gradient(np.log(drag_crisis_shape(re)), np.log(re))
    np.testing.assert_allclose(slope[1:-1], fd[1:-1], atol=2e-3)
    force = morrison_drag_coefficient(np.array([3e5, 3.5e5])) * np.array([3e5, 3.5e5]) ** 2
    assert force[1] < force[0]


def test_reynolds_law_equals_drag_coefficient_at_reference() -> None:
    cd = ascent_drag_coefficient(np.array([6e5, 1e5]), 0.30, 6e5, "reynolds")
    assert cd[0] == pytest.approx(0.30, rel=1e-14)
    assert cd[1] == pytest.approx(0.30 * 0.47 / float(drag_crisis_shape(6e5)), rel=1e-3)
    np.testing.assert_array_equal(ascent_drag_coefficient(np.array([6e5, 1e5]), 0.3, np.nan), 0.3)
    with pytest.raises(ValueError, match="drag model 'cubic' is not one of"):
        ascent_drag_coefficient(1e5, 0.3, 6e5, "cubic")


def test_solved_speed_satisfies_the_drag_balance() -> None:
    # L g0 = 1/2 rho v^2 Cd(Re(v)) A with Re = rho v D / mu(T) (Sutherland, NOAA 1976), rtol 1e-9.
    lp = reynolds_plan()
    z = np.linspace(0.0, lp.burst_altitude_m, 400)
    v = ascent_rate_at_altitude(z, lp.free_lift_kg, lp.gas_amount_mol, 0.30, ATM, "reynolds",
                                lp.launch_reynolds_number)
    s = ATM.state(z)
    d = sphere_diameter_m(lp.gas_amount_mol * 8.31432 * s.temperature_k / s.pressure_pa)
    re = s.density_kg_m3 * v * d / dynamic_viscosity_pa_s(s.temperature_k)
    cd = ascent_drag_coefficient(re, 0.30, lp.launch_reynolds_number, "reynolds")
    drag = 0.5 * s.density_kg_m3 * v**2 * cd * np.pi * d**2 / 4.0
    np.testing.assert_allclose(drag, lp.free_lift_kg * G0, rtol=1e-9)
    # The solve converges in a few iterations from the constant-Cd start.
    k = 2 * lp.free_lift_kg * G0 / (s.density_kg_m3 * np.pi * d**2 / 4)
    _, iterations = solve_ascent_speed(k, re / v, 0.30, lp.launch_reynolds_number)
    assert iterations <= 8


def test_more_free_lift_rises_faster_at_every_altitude() -> None:
    lp = reynolds_plan()
    z = np.linspace(0.0, 30_000.0, 301)
    slow = ascent_rate_at_altitude(z, lp.free_lift_kg, lp.gas_amount_mol, 0.3, ATM, "reynolds",
                                   lp.launch_reynolds_number)
    for more in (1.001, 1.1, 2.0):
        fast = ascent_rate_at_altitude(z, lp.free_lift_kg * more, lp.gas_amount_mol, 0.3, ATM,
                                       "reynolds", lp.launch_reynolds_number)
        assert np.all(fast > slow)


def test_time_to_burst_against_quad() -> None:
    # Independent quadrature with scipy.integrate.quad agrees with plan_lift (< 0.5 % required).
    lp = reynolds_plan()

    def inv(z: float) -> float:
        return 1.0 / float(ascent_rate_at_altitude(z, lp.free_lift_kg, lp.gas_amount_mol, 0.3,
                                                   ATM, "reynolds", lp.launch_reynolds_number))

    ref, _ = quad(inv, 0.0, lp.burst_altitude_m, points=[11_019.0, 20_063.0], limit=400)
    assert abs(lp.time_to_burst_s / ref - 1.0) < 1e-4  # required < 0.5 %


def test_plan_lift_under_both_laws() -> None:
    # Same fill, launch rate and burst altitude (the law is anchored at launch); the reynolds law
    # crosses the drag crisis, so Cd grows and the climb is slower and steadier aloft.
    const = reynolds_plan(drag_model="constant")
    rey = reynolds_plan()
    assert rey.neck_lift_kg == pytest.approx(const.neck_lift_kg, rel=1e-12)
    assert rey.launch_ascent_rate_m_s == pytest.approx(5.0, rel=1e-9)
    assert rey.burst_altitude_m == const.burst_altitude_m
    assert rey.launch_reynolds_number > 4e5 > 1e5 > rey.burst_reynolds_number  # REFERENCES §3a
    assert rey.profile.drag_coefficient[0] == pytest.approx(0.30, rel=1e-12)
    assert rey.burst_drag_coefficient > 0.6
    np.testing.assert_array_equal(const.profile.drag_coefficient, 0.30)
    assert rey.time_to_burst_s > 1.2 * const.time_to_burst_s
    assert rey.burst_ascent_rate_m_s < 0.75 * const.burst_ascent_rate_m_s
    assert "Reynolds number through the drag crisis" in " ".join(rey.assumptions)
    with pytest.raises(PhysicsError, match="drag_model: is 'cubic', not one of constant, reynolds"):
        plan_lift(0.8, 0.3, 8.0, target_ascent_m_s=5.0, drag_model="cubic")


def test_vertical_speed_and_perturbation_under_reynolds_law() -> None:
    lp = reynolds_plan()
    base = VerticalParams(
        "physics", [5.0], [lp.free_lift_kg], [lp.gas_amount_mol], [0.30], [lp.burst_altitude_m],
        [5.0], [np.nan], [np.nan], [np.nan], [np.nan], [0.3],
        drag_model="reynolds", drag_reference_reynolds=[lp.launch_reynolds_number],
    )
    fa = np.array([1.0, 0.9, 1.1])
    p = perturbed(base, fa, np.ones(3), np.ones(3))
    assert p.drag_model == "reynolds" and p.n_members == 3
    np.testing.assert_allclose(p.free_lift_kg, lp.free_lift_kg * fa**2)  # free lift x f^2
    np.testing.assert_allclose(p.gas_amount_mol, lp.gas_amount_mol)  # gas held
    z = np.array([0.0, 12_000.0, 25_000.0] * 3)
    members = np.repeat(np.arange(3), 3)
    w = vertical_speed_m_s(np.full(9, ASCENT), z, p, members, ATM)
    expected = ascent_rate_at_altitude(z, p.free_lift_kg[members], lp.gas_amount_mol, 0.30, ATM,
                                       "reynolds", lp.launch_reynolds_number)
    np.testing.assert_allclose(w, expected, rtol=1e-12)
    assert w[0] == pytest.approx(5.0, rel=1e-9)
    assert np.all(w[3:6] < w[:3]) and np.all(w[6:] > w[:3])
    q = pickle.loads(pickle.dumps(p.take([2, 0])))
    assert q.drag_model == "reynolds"
    np.testing.assert_array_equal(q.drag_reference_reynolds, lp.launch_reynolds_number)


def test_drag_fit_recovers_the_launch_coefficient_of_the_reynolds_law() -> None:
    # Calibration invariant: a track flown under the reynolds law with Cd_launch 0.36 gives back
    # 0.36 with drag_model="reynolds"; a single constant Cd does not fit it as well.
    lp = reynolds_plan(drag_coefficient=0.36, profile_step_m=200.0)
    args = (lp.profile.altitude_m, lp.profile.time_s, lp.free_lift_kg, lp.gas_amount_mol)
    fit = drag_coefficient_from_track(*args, drag_model="reynolds",
                                      reference_reynolds=lp.launch_reynolds_number)
    assert fit.drag_coefficient == pytest.approx(0.36, rel=2e-3)
    const = drag_coefficient_from_track(*args)
    assert const.rms_residual_m_s > 10 * fit.rms_residual_m_s


# ---- evidence: a real radiosonde ascent ---------------------------------------------------------


@pytest.mark.skipif(not DWD_FILE.exists(), reason="real DWD ascent not present")
def test_default_law_reproduces_a_real_ascent() -> None:
    # Real data: Deutscher Wetterdienst, Climate Data Center, high-resolution radiosonde ascent,
    # station 4928, 2021-06-01 12 UTC (one row every 2 s to 30.6 km). The balloon (0.8 kg envelope,
    # 0.3 kg payload, common practice for a radiosonde) is filled so that each model matches the
    # real time to climb the lowest 5 km (the lowest 600 m are climbed at 8-9 m/s in the
    # boundary layer's thermals, so a point launch rate would be misleading); the day's sounding is
    # the atmosphere. Measured: time to 30 km 97.0 min real, 90.5 min "reynolds", 71.3 min
    # "constant"; RMS time-to-altitude error 4.0 / 13.2 min.
    from balloonpath.plan import BalloonSpec
    from balloonpath.winds.sounding import read_dwd_highres

    default = BalloonSpec.__dataclass_fields__["drag_model"].default
    other = "constant" if default == "reynolds" else "reynolds"
    snd, trk = read_dwd_highres(DWD_FILE)
    atm = SoundingAtmosphere(snd.alt_m, snd.temperature_k, snd.pressure_pa)
    t = trk.time_s - trk.time_s[0]
    z = np.maximum.accumulate(trk.alt_m) + np.arange(t.size) * 1e-9  # strictly rising envelope
    z0 = float(trk.alt_m[0])
    edges = np.concatenate([np.arange(z0, 30_000.0, 500.0), [30_000.0]])
    observed = np.interp(edges, z, t)
    match = int(np.searchsorted(edges, z0 + 5_000.0))

    def times(model: str, rate: float) -> np.ndarray:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PracticeWarning)
            lp = plan_lift(0.8, 0.3, 14.0, target_ascent_m_s=rate, launch_altitude_m=z0,
                           atmosphere=atm, drag_model=model)

        def speed(zz: np.ndarray) -> np.ndarray:
            return ascent_rate_at_altitude(zz, lp.free_lift_kg, lp.gas_amount_mol, 0.30, atm,
                                           model, lp.launch_reynolds_number)

        return integrate_inverse_speed(edges, speed)

    errors = {}
    for model in (default, other):
        rate = brentq(lambda r, m=model: times(m, r)[match] - observed[match], 2.0, 12.0,
                      xtol=1e-6)
        modelled = times(model, rate)
        errors[model] = (modelled[-1] / observed[-1] - 1.0,
                         float(np.sqrt(np.mean((modelled - observed) ** 2))))
    assert abs(errors[default][0]) < 0.10  # time to 30 km within 10 % (measured -6.7 %)
    assert abs(errors[other][0]) > 2 * abs(errors[default][0])  # the other law does worse
    assert errors[other][1] > 2 * errors[default][1]  # also in RMS time-to-altitude
    # The real mean ascent rate to 30.6 km is 5.12 m/s (data README); check the reading.
    assert (trk.alt_m[-1] - z0) / t[-1] == pytest.approx(5.12, abs=0.01)
