"""Lift planning for a latex sounding balloon: gas amount, launch size, ascent rate, burst altitude.

Terms as the trade uses them (all in kilograms, i.e. forces divided by g):

- gross lift G = mass of displaced air - mass of gas;
- neck lift N = G - envelope mass (what a scale at the neck reads, payload not attached);
- free lift L = N - payload mass (must be > 0 for the balloon to rise).

References
----------
[NOAA1976] U.S. Standard Atmosphere, 1976 (NOAA-S/T 76-1562): the atmosphere and Sutherland's
    viscosity law.
[WMO8] WMO Guide to Instruments and Methods of Observation (WMO-No. 8), balloon-techniques
    chapter: the steady-ascent drag balance v = q L^(1/2) / (L + W)^(1/3) (from memory;
    REFERENCES.md §5 derives it).
[Hoerner1965] S. F. Hoerner, Fluid-Dynamic Drag, 1965: subcritical sphere Cd ~ 0.47
    (REFERENCES.md §3a; from memory).
[Achenbach1972] E. Achenbach, J. Fluid Mech. 54:565 (1972): the sphere's drag crisis near
    Re ~ 3-4e5 (from memory).
[Gallice2011] A. Gallice et al., Atmos. Meas. Tech. 4:2235-2253 (2011),
    doi:10.5194/amt-4-2235-2011: balloon drag coefficient versus Reynolds number (cited for
    further reading; not used for numbers).

Assumptions (see docs/physics.md): ideal gas at ambient temperature and pressure (no superheat, no
superpressure), a spherical envelope, steady ascent (drag balances the free lift's weight, no
inertia or added mass), standard gravity g0 at all altitudes, and an ascent drag law
(:mod:`balloonpath.flight.drag`): one drag coefficient for the whole ascent (``"constant"``) or a
drag coefficient that follows the Reynolds number through the drag crisis (``"reynolds"``).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.optimize import brentq

from balloonpath.atmosphere import (
    G0,
    MAX_ALTITUDE_M,
    Atmosphere,
    StandardAtmosphere,
    dynamic_viscosity_pa_s,
)
from balloonpath.errors import PhysicsError, PracticeWarning, input_error
from balloonpath.flight.drag import (
    DRAG_MODELS,
    ascent_drag_coefficient,
    drag_balance_speed_m_s,
    drag_crisis_shape,
    solve_ascent_speed,
)
from balloonpath.flight.gas import (
    gas_density_kg_m3,
    gas_volume_m3,
    lift_per_mole_kg_mol,
    lifting_gas,
    mixture_molar_mass_kg_mol,
)

#: Default ascent drag coefficient of a latex sounding balloon (see :data:`DRAG_COEFFICIENT_NOTE`).
DEFAULT_ASCENT_DRAG_COEFFICIENT = 0.30

DRAG_COEFFICIENT_NOTE = (
    "ascent drag coefficient constant over the whole ascent; default 0.30 lies between a smooth "
    "sphere's subcritical 0.47 (Re < 2e5) and its supercritical 0.1-0.2 (Re > 4e5) because a "
    "sounding balloon crosses the drag crisis during ascent (Re ~ 6e5 at launch, < 1e5 near "
    "burst); calibrate it from flown tracks"
)

#: Default ascent drag law (see docs/physics.md, "The ascent drag law", for the evidence).
DEFAULT_DRAG_MODEL = "reynolds"

REYNOLDS_DRAG_NOTE = (
    "ascent drag coefficient follows the Reynolds number through the drag crisis: "
    "Cd(Re) = Cd_launch S(Re) / S(Re_launch), S a logistic step in ln Re from 0.20 "
    "(supercritical) to 0.47 (subcritical) centred at Re 2.63e5 (flight/drag.py); the drag "
    "coefficient given is the one at launch (default 0.30); calibrate it from flown tracks"
)

#: Common practice for the launch ascent rate of team flights (m/s); radiosondes fly at about 5 m/s.
PRACTICE_ASCENT_RANGE_M_S = (3.0, 8.0)
#: Below this burst altitude (m) a sounding-balloon flight is unusually short (common practice).
PRACTICE_MIN_BURST_ALTITUDE_M = 15_000.0

_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(5)


# ------------------------------------------------------------------------------------------------
# Small pure functions
# ------------------------------------------------------------------------------------------------


def sphere_diameter_m(volume_m3: np.ndarray | float) -> np.ndarray:
    """Diameter (m) of a sphere of volume ``volume_m3``: D = (6 V / pi)^(1/3)."""
    return np.cbrt(6.0 * np.asarray(volume_m3, dtype=float) / np.pi)


def sphere_volume_m3(diameter_m: np.ndarray | float) -> np.ndarray:
    """Volume (m3) of a sphere of diameter ``diameter_m``: V = pi D^3 / 6."""
    return np.pi * np.asarray(diameter_m, dtype=float) ** 3 / 6.0


def gross_lift(
    volume_m3: np.ndarray | float,
    air_density_kg_m3: np.ndarray | float,
    gas_density_kg_m3_: np.ndarray | float,
) -> np.ndarray:
    """Gross lift (kg): G = V (rho_air - rho_gas), the displaced air's mass minus the gas's mass."""
    return np.asarray(volume_m3, dtype=float) * (
        np.asarray(air_density_kg_m3, dtype=float) - np.asarray(gas_density_kg_m3_, dtype=float)
    )


def neck_lift(
    gross_lift_kg: np.ndarray | float, envelope_mass_kg: np.ndarray | float
) -> np.ndarray:
    """Neck lift (kg): N = G - envelope mass (a scale at the neck, payload not attached)."""
    return np.asarray(gross_lift_kg, dtype=float) - np.asarray(envelope_mass_kg, dtype=float)


def free_lift(neck_lift_kg: np.ndarray | float, payload_mass_kg: np.ndarray | float) -> np.ndarray:
    """Free lift (kg): L = N - payload mass; the balloon rises only if L > 0."""
    return np.asarray(neck_lift_kg, dtype=float) - np.asarray(payload_mass_kg, dtype=float)


def steady_ascent_rate(
    free_lift_kg: np.ndarray | float,
    air_density_kg_m3: np.ndarray | float,
    drag_coefficient: np.ndarray | float,
    diameter_m: np.ndarray | float,
    gravity_m_s2: float = G0,
) -> np.ndarray:
    """Steady ascent rate (m/s) at which drag balances the free lift's weight.

    Parameters
    ----------
    free_lift_kg : array_like
        Free lift L, kg (> 0).
    air_density_kg_m3 : array_like
        Ambient air density rho.
    drag_coefficient : array_like
        Drag coefficient Cd on the frontal area.
    diameter_m : array_like
        Balloon diameter D; frontal area A = pi D^2 / 4.
    gravity_m_s2 : float
        Acceleration of gravity (default standard gravity g0 = 9.80665).

    Notes
    -----
    L g = 1/2 rho v^2 Cd A, so v = sqrt(2 L g / (rho Cd A)) (REFERENCES.md §5; [WMO8] in its
    pilot-balloon form).
    """
    area = np.pi * np.asarray(diameter_m, dtype=float) ** 2 / 4.0
    return drag_balance_speed_m_s(free_lift_kg, air_density_kg_m3, drag_coefficient, area, gravity_m_s2)


def reynolds_number(
    speed_m_s: np.ndarray | float,
    diameter_m: np.ndarray | float,
    air_density_kg_m3: np.ndarray | float,
    temperature_k: np.ndarray | float,
) -> np.ndarray:
    """Reynolds number Re = rho v D / mu of a sphere, mu by Sutherland's law ([NOAA1976] eq. 51)."""
    return (
        np.asarray(air_density_kg_m3, dtype=float)
        * np.asarray(speed_m_s, dtype=float)
        * np.asarray(diameter_m, dtype=float)
        / dynamic_viscosity_pa_s(temperature_k)
    )


def check_drag_model(model: str, source: str | Path | None = None) -> str:
    """Return ``model`` if it is a known drag law, else raise a one-line :class:`PhysicsError`."""
    if model not in DRAG_MODELS:
        raise input_error(source, "drag_model", f"is {model!r}, not one of {', '.join(DRAG_MODELS)}",
                          'give drag_model = "constant" or "reynolds"', cls=PhysicsError)
    return model


def ascent_speed_drag_law(
    free_lift_kg: np.ndarray | float,
    air_density_kg_m3: np.ndarray | float,
    temperature_k: np.ndarray | float,
    diameter_m: np.ndarray | float,
    drag_coefficient: np.ndarray | float,
    drag_model: str = "constant",
    reference_reynolds: np.ndarray | float = np.nan,
) -> np.ndarray:
    """Steady ascent speed (m/s) under an ascent drag law (:mod:`balloonpath.flight.drag`).

    Parameters
    ----------
    free_lift_kg, air_density_kg_m3, temperature_k, diameter_m : array_like
        Free lift (kg), air density and temperature, balloon diameter (broadcast together).
    drag_coefficient : array_like
        ``"constant"``: the Cd; ``"reynolds"``: Cd at ``reference_reynolds`` (the launch).
    drag_model : str
        ``"constant"`` or ``"reynolds"``.
    reference_reynolds : array_like
        Launch Reynolds number of the nominal fill (``"reynolds"`` only).

    Notes
    -----
    ``"constant"``: v = sqrt(2 L g0 / (rho Cd A)) (:func:`steady_ascent_rate`). ``"reynolds"``:
    v^2 Cd(Re(v)) = 2 L g0 / (rho A) with Re = rho v D / mu(T), mu by Sutherland's law
    ([NOAA1976]), solved by :func:`balloonpath.flight.drag.solve_ascent_speed` (safeguarded Newton
    in ln v, step tolerance 1e-9, at most 30 iterations, about 6 typical).
    """
    if drag_model == "constant":
        return steady_ascent_rate(free_lift_kg, air_density_kg_m3, drag_coefficient, diameter_m)
    check_drag_model(drag_model)
    rho = np.asarray(air_density_kg_m3, dtype=float)
    d = np.asarray(diameter_m, dtype=float)
    area = np.pi * d**2 / 4.0
    force_ratio = 2.0 * np.asarray(free_lift_kg, dtype=float) * G0 / (rho * area)
    per_speed = rho * d / dynamic_viscosity_pa_s(temperature_k)
    speed, _ = solve_ascent_speed(force_ratio, per_speed, drag_coefficient, reference_reynolds)
    return speed


def ascent_rate_at_altitude(
    alt_m: np.ndarray | float,
    free_lift_kg: np.ndarray | float,
    gas_amount_mol_: np.ndarray | float,
    drag_coefficient: np.ndarray | float,
    atmosphere: Atmosphere | None = None,
    drag_model: str = "constant",
    reference_reynolds: np.ndarray | float = np.nan,
) -> np.ndarray:
    """Steady ascent rate (m/s) of a balloon holding a fixed amount of gas, at altitudes ``alt_m``.

    Parameters
    ----------
    alt_m : array_like
        Geometric altitudes, m.
    free_lift_kg, gas_amount_mol_, drag_coefficient : array_like
        Free lift (kg), amount of gas (mol) and ascent drag coefficient (``"reynolds"``: the one at
        ``reference_reynolds``); broadcast against ``alt_m``.
    atmosphere : Atmosphere, optional
        Air state by altitude (default US Standard Atmosphere 1976).
    drag_model : str
        ``"constant"`` (default here, for backward compatibility) or ``"reynolds"``.
    reference_reynolds : array_like
        Launch Reynolds number of the nominal fill (``"reynolds"`` only).

    Notes
    -----
    V(z) = n R* T(z) / p(z) (ideal gas at ambient temperature and pressure), D = (6 V / pi)^(1/3)
    and v = sqrt(2 L g0 / (rho Cd pi D^2 / 4)) (:func:`ascent_speed_drag_law`). The free lift L is
    constant with altitude because the gross lift n (M_air - M_gas) is. With constant Cd this gives
    v(z) = v0 (rho0 / rho(z))^(1/6) (REFERENCES.md §5).
    """
    atm = atmosphere if atmosphere is not None else StandardAtmosphere()
    state = atm.state(alt_m)
    volume = gas_volume_m3(gas_amount_mol_, state.temperature_k, state.pressure_pa)
    return ascent_speed_drag_law(
        free_lift_kg, state.density_kg_m3, state.temperature_k, sphere_diameter_m(volume),
        drag_coefficient, drag_model, reference_reynolds,
    )


def burst_altitude_for(
    gas_amount_mol_: float,
    burst_diameter_m: float,
    atmosphere: Atmosphere | None = None,
    launch_altitude_m: float = 0.0,
    source: str | Path | None = None,
) -> float:
    """Altitude (m) at which the envelope's diameter reaches the burst diameter.

    Parameters
    ----------
    gas_amount_mol_ : float
        Amount of gas in the envelope, mol.
    burst_diameter_m : float
        Diameter at which the envelope bursts, m.
    atmosphere : Atmosphere, optional
        Default US Standard Atmosphere 1976.
    launch_altitude_m : float
        Lower end of the search (the launch altitude).
    source : str or Path, optional
        File named in error messages.

    Notes
    -----
    Solves n R* T(z) / p(z) = pi D_b^3 / 6 for z, i.e. p/T = (p0/T0)(D0/D_b)^3 (REFERENCES.md §5),
    with Brent's method on [launch altitude, 85 km], xtol 1 mm; the gas volume grows monotonically
    with altitude because air density falls.

    Raises
    ------
    PhysicsError
        If the burst diameter is not larger than the launch diameter, or if it is not reached below
        85 km.
    """
    atm = atmosphere if atmosphere is not None else StandardAtmosphere()
    v_burst = float(sphere_volume_m3(burst_diameter_m))
    top = MAX_ALTITUDE_M - 1_000.0

    def excess(z: float) -> float:
        s = atm.state(np.atleast_1d(z))
        return float(
            np.log(gas_volume_m3(gas_amount_mol_, s.temperature_k, s.pressure_pa)[0] / v_burst)
        )

    if excess(launch_altitude_m) >= 0.0:
        s = atm.state(np.atleast_1d(launch_altitude_m))
        d0 = float(
            sphere_diameter_m(gas_volume_m3(gas_amount_mol_, s.temperature_k, s.pressure_pa))[0]
        )
        raise input_error(
            source,
            "burst_diameter_m",
            f"burst diameter {burst_diameter_m:g} m is not larger than the launch diameter "
            f"{d0:.2f} m",
            "check the balloon's burst diameter or reduce the gas",
            cls=PhysicsError,
        )
    if excess(top) < 0.0:
        raise input_error(
            source,
            "burst_diameter_m",
            f"burst diameter {burst_diameter_m:g} m is not reached below {top / 1000:.0f} km",
            "check the burst diameter (metres) or add gas",
            cls=PhysicsError,
        )
    return float(brentq(excess, launch_altitude_m, top, xtol=1e-3, rtol=1e-12, maxiter=200))


def integrate_inverse_speed(
    edges_m: np.ndarray, speed_m_s, max_step_m: float = 250.0
) -> np.ndarray:
    """Time (s) to travel between successive altitudes, ``t_i = integral of dz / |w(z)|`` over each
    interval.

    Parameters
    ----------
    edges_m : array_like
        Increasing or decreasing altitudes (M + 1 values).
    speed_m_s : callable
        ``speed_m_s(z) -> ndarray`` vertical speed magnitude at altitudes ``z`` (vectorised, > 0).
    max_step_m : float
        Each interval is split into sub-intervals no longer than this.

    Returns
    -------
    ndarray
        Cumulative time at each edge (M + 1 values, the first 0).

    Notes
    -----
    Composite 5-point Gauss-Legendre quadrature (exact for polynomials of degree 9 on each
    sub-interval); with 250 m sub-intervals the error is far below 1e-4 relative for the smooth
    speed profiles here, including the kinks at the atmosphere's layer boundaries. One vectorised
    call of ``speed_m_s``.
    """
    edges = np.asarray(edges_m, dtype=float)
    widths = np.diff(edges)
    counts = np.maximum(1, np.ceil(np.abs(widths) / max_step_m).astype(int))
    starts = np.repeat(edges[:-1], counts)
    sub_index = np.concatenate([np.arange(c) for c in counts]) if counts.size else np.zeros(0)
    h = np.repeat(widths / counts, counts)
    a = starts + sub_index * h
    mid = a + 0.5 * h
    z = mid[:, None] + 0.5 * h[:, None] * _GL_NODES[None, :]
    w = np.abs(np.asarray(speed_m_s(z.ravel()), dtype=float)).reshape(z.shape)
    sub = 0.5 * np.abs(h) * np.sum(_GL_WEIGHTS[None, :] / w, axis=1)
    per_interval = (
        np.add.reduceat(sub, np.concatenate([[0], np.cumsum(counts)[:-1]])) if sub.size else sub
    )
    return np.concatenate([[0.0], np.cumsum(per_interval)])


def _check_masses(
    envelope_mass_kg: float, payload_mass_kg: float, source: str | Path | None
) -> None:
    if not (np.isfinite(envelope_mass_kg) and envelope_mass_kg > 0.0):
        raise input_error(
            source,
            "envelope_mass_kg",
            f"is {envelope_mass_kg!r}, must be > 0",
            "give the envelope's mass in kg",
            cls=PhysicsError,
        )
    if not (np.isfinite(payload_mass_kg) and payload_mass_kg >= 0.0):
        raise input_error(
            source,
            "payload_mass_kg",
            f"is {payload_mass_kg!r}, must be >= 0",
            "give the payload's mass in kg",
            cls=PhysicsError,
        )


def _check_positive(value: float, name: str, fix: str, source: str | Path | None) -> None:
    if not (np.isfinite(value) and value > 0.0):
        raise input_error(source, name, f"is {value!r}, must be > 0", fix, cls=PhysicsError)


def _launch_ascent_rate(
    neck_lift_kg: float,
    envelope_mass_kg: float,
    payload_mass_kg: float,
    lift_per_mol: float,
    drag_coefficient: float,
    temperature_k: float,
    pressure_pa: float,
    density: float,
) -> float:
    n = (neck_lift_kg + envelope_mass_kg) / lift_per_mol
    d0 = sphere_diameter_m(gas_volume_m3(n, temperature_k, pressure_pa))
    fl = max(neck_lift_kg - payload_mass_kg, 0.0)
    return float(steady_ascent_rate(fl, density, drag_coefficient, d0))


def neck_lift_for_ascent_rate(
    target_ascent_m_s: float,
    envelope_mass_kg: float,
    payload_mass_kg: float,
    gas: str = "helium",
    purity: float = 1.0,
    drag_coefficient: float = DEFAULT_ASCENT_DRAG_COEFFICIENT,
    launch_altitude_m: float = 0.0,
    atmosphere: Atmosphere | None = None,
    source: str | Path | None = None,
) -> float:
    """Neck lift (kg) that gives the wanted launch ascent rate.

    Parameters
    ----------
    target_ascent_m_s : float
        Wanted ascent rate at launch, m/s.
    envelope_mass_kg, payload_mass_kg : float
        Envelope and payload masses, kg.
    gas, purity : str, float
        Lifting gas and its mole fraction.
    drag_coefficient : float
        Ascent drag coefficient.
    launch_altitude_m : float
        Launch altitude (the air there sets the launch volume and density).
    atmosphere : Atmosphere, optional
        Default US Standard Atmosphere 1976.
    source : str or Path, optional
        File named in error messages.

    Notes
    -----
    v0(N)^2 = 2 g0 (N - m_p) / (rho0 Cd pi D0(N)^2 / 4) with D0 proportional to (N + m_e)^(1/3); v0
    grows strictly with N (d v0^2/dN is proportional to N/3 + m_e + 2 m_p / 3 > 0), so the root is
    unique. It is bracketed between N = m_p (v0 = 0) and an upper bound doubled until v0 exceeds the
    target (at most 40 doublings), then found with Brent's method (xtol 1e-9 kg).
    """
    _check_masses(envelope_mass_kg, payload_mass_kg, source)
    _check_positive(
        target_ascent_m_s, "target_ascent_m_s", "give the wanted ascent rate in m/s", source
    )
    _check_positive(
        drag_coefficient, "drag_coefficient", "give a drag coefficient such as 0.3", source
    )
    atm = atmosphere if atmosphere is not None else StandardAtmosphere()
    s = atm.state(np.atleast_1d(launch_altitude_m))
    t0, p0, rho0 = float(s.temperature_k[0]), float(s.pressure_pa[0]), float(s.density_kg_m3[0])
    lpm = float(lift_per_mole_kg_mol(gas, purity))

    def excess(nl: float) -> float:
        return (
            _launch_ascent_rate(
                nl, envelope_mass_kg, payload_mass_kg, lpm, drag_coefficient, t0, p0, rho0
            )
            - target_ascent_m_s
        )

    low = payload_mass_kg
    high = payload_mass_kg + envelope_mass_kg + 1.0
    for _ in range(40):
        if excess(high) > 0.0:
            break
        high *= 2.0
    else:  # pragma: no cover - v0 grows without bound, so 40 doublings suffice for sane inputs
        raise input_error(
            source,
            "target_ascent_m_s",
            f"{target_ascent_m_s:g} m/s cannot be reached",
            "lower the target ascent rate",
            cls=PhysicsError,
        )
    return float(brentq(excess, low, high, xtol=1e-9, rtol=1e-13, maxiter=200))


# ------------------------------------------------------------------------------------------------
# The plan
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class AscentProfile:
    """Ascent rate, size, Reynolds number and elapsed time at altitudes from launch to burst.

    All arrays have the same length; ``time_s`` is the time since launch; ``drag_coefficient`` is
    the ascent drag coefficient of the drag law at each altitude.
    """

    altitude_m: np.ndarray
    ascent_rate_m_s: np.ndarray
    diameter_m: np.ndarray
    reynolds_number: np.ndarray
    air_density_kg_m3: np.ndarray
    time_s: np.ndarray
    drag_coefficient: np.ndarray | None = None


@dataclass(frozen=True, eq=False)
class LiftPlan:
    """Everything a team needs to know about the fill and the ascent.

    Masses and lifts in kg, volumes in m3 at launch conditions, speeds in m/s, times in s.
    ``neck_lift_solved`` is True when the neck lift was found from ``target_ascent_m_s``.
    ``drag_coefficient`` is the Cd at launch; ``drag_model`` the ascent drag law and
    ``launch_reynolds_number`` its reference Reynolds number (``"reynolds"``).
    """

    gas: str
    purity: float
    drag_coefficient: float
    envelope_mass_kg: float
    payload_mass_kg: float
    burst_diameter_m: float
    launch_altitude_m: float
    neck_lift_kg: float
    neck_lift_solved: bool
    gross_lift_kg: float
    free_lift_kg: float
    gas_amount_mol: float
    gas_mass_kg: float
    gas_volume_m3: float
    gas_density_kg_m3: float
    air_density_kg_m3: float
    launch_diameter_m: float
    launch_ascent_rate_m_s: float
    launch_reynolds_number: float
    burst_altitude_m: float
    burst_volume_m3: float
    burst_ascent_rate_m_s: float
    burst_reynolds_number: float
    time_to_burst_s: float
    mean_ascent_rate_m_s: float
    profile: AscentProfile
    atmosphere_name: str
    assumptions: tuple[str, ...]
    drag_model: str = "constant"
    burst_drag_coefficient: float = float("nan")


def plan_lift(
    envelope_mass_kg: float,
    payload_mass_kg: float,
    burst_diameter_m: float,
    *,
    neck_lift_kg: float | None = None,
    target_ascent_m_s: float | None = None,
    gas: str = "helium",
    purity: float = 1.0,
    drag_coefficient: float = DEFAULT_ASCENT_DRAG_COEFFICIENT,
    launch_altitude_m: float = 0.0,
    atmosphere: Atmosphere | None = None,
    profile_step_m: float = 1_000.0,
    warn: bool = True,
    source: str | Path | None = None,
    drag_model: str = "constant",
) -> LiftPlan:
    """Answer a team's fill question: how much gas, how fast up, how high, how long.

    Parameters
    ----------
    envelope_mass_kg, payload_mass_kg : float
        Envelope mass (> 0) and payload mass below the neck (>= 0), kg.
    burst_diameter_m : float
        The envelope's burst diameter, m.
    neck_lift_kg, target_ascent_m_s : float
        Exactly one: the neck lift measured at the fill, or the wanted launch ascent rate (the neck
        lift is solved for with :func:`neck_lift_for_ascent_rate`).
    gas, purity : str, float
        "helium" or "hydrogen", and the mole fraction of lifting gas (rest air).
    drag_coefficient : float
        Ascent drag coefficient (default :data:`DEFAULT_ASCENT_DRAG_COEFFICIENT`); with
        ``drag_model="reynolds"`` the coefficient **at launch**.
    launch_altitude_m : float
        Launch altitude above sea level, m.
    atmosphere : Atmosphere, optional
        Default US Standard Atmosphere 1976; a :class:`~balloonpath.atmosphere.SoundingAtmosphere`
        for the day.
    profile_step_m : float
        Altitude step of the ascent profile table.
    warn : bool
        Emit :class:`~balloonpath.errors.PracticeWarning` for an ascent rate outside 3-8 m/s or a
        burst below 15 km (common practice).
    source : str or Path, optional
        File named in error messages.
    drag_model : str
        Ascent drag law: ``"constant"`` (default of this function) or ``"reynolds"``
        (:mod:`balloonpath.flight.drag`; the plan's default is :data:`DEFAULT_DRAG_MODEL`).

    Returns
    -------
    LiftPlan

    Notes
    -----
    - gas amount n = (N + m_e) / (M_air - M_gas);
    - launch volume V0 = n R* T0 / p0 and diameter D0 = (6 V0 / pi)^(1/3);
    - free lift L = N - m_p; launch ascent rate v0 = sqrt(2 L g0 / (rho0 Cd pi D0^2 / 4)) with
      both drag laws (under ``"reynolds"`` Cd equals ``drag_coefficient`` at the launch Reynolds
      number Re0 = rho0 v0 D0 / mu0 by definition, so the neck lift solved for a target ascent rate
      is the same root under both laws);
    - v(z) at altitude from the drag law (:func:`ascent_speed_drag_law`);
    - burst where n R* T / p = pi D_b^3 / 6 (:func:`burst_altitude_for`; the drag law plays no
      part);
    - time to burst = integral of dz / v(z) from launch to burst (:func:`integrate_inverse_speed`).

    Raises
    ------
    PhysicsError
        For non-positive masses or diameters, free lift <= 0, or a burst diameter not above the
        launch diameter.
    """
    _check_masses(envelope_mass_kg, payload_mass_kg, source)
    _check_positive(
        drag_coefficient, "drag_coefficient", "give a drag coefficient such as 0.3", source
    )
    _check_positive(
        burst_diameter_m, "burst_diameter_m", "give the burst diameter in metres", source
    )
    check_drag_model(drag_model, source)
    if (neck_lift_kg is None) == (target_ascent_m_s is None):
        raise input_error(
            source,
            "neck_lift_kg / target_ascent_m_s",
            "need exactly one of the two",
            "give the measured neck lift or the wanted ascent rate",
            cls=PhysicsError,
        )
    g = lifting_gas(gas)
    atm = atmosphere if atmosphere is not None else StandardAtmosphere()
    solved = neck_lift_kg is None
    if neck_lift_kg is None:
        assert target_ascent_m_s is not None
        neck_lift_kg = neck_lift_for_ascent_rate(
            target_ascent_m_s,
            envelope_mass_kg,
            payload_mass_kg,
            g.name,
            purity,
            drag_coefficient,
            launch_altitude_m,
            atm,
            source,
        )
    _check_positive(neck_lift_kg, "neck_lift_kg", "give the neck lift in kg", source)
    fl = float(free_lift(neck_lift_kg, payload_mass_kg))
    if fl <= 0.0:
        raise input_error(
            source,
            "neck_lift_kg",
            f"neck lift {neck_lift_kg:g} kg is not above the payload mass {payload_mass_kg:g} kg, "
            "so the free "
            f"lift is {fl:g} kg <= 0 and the balloon will not rise",
            "add gas until the neck lift exceeds the payload mass",
            cls=PhysicsError,
        )
    s0 = atm.state(np.atleast_1d(launch_altitude_m))
    t0, p0, rho0 = float(s0.temperature_k[0]), float(s0.pressure_pa[0]), float(s0.density_kg_m3[0])
    gross = neck_lift_kg + envelope_mass_kg
    n = gross / float(lift_per_mole_kg_mol(g, purity))
    v0_gas = float(gas_volume_m3(n, t0, p0))
    rho_gas = float(gas_density_kg_m3(g, t0, p0, purity))
    d0 = float(sphere_diameter_m(v0_gas))
    z_burst = burst_altitude_for(n, burst_diameter_m, atm, launch_altitude_m, source)
    v_launch = float(steady_ascent_rate(fl, rho0, drag_coefficient, d0))
    re_launch = float(reynolds_number(v_launch, d0, rho0, t0))

    def speed(z: np.ndarray) -> np.ndarray:
        return ascent_rate_at_altitude(z, fl, n, drag_coefficient, atm, drag_model, re_launch)

    step = max(float(profile_step_m), 1.0)
    first = (np.floor(launch_altitude_m / step) + 1.0) * step
    inner = np.arange(first, z_burst, step)
    inner = inner[inner < z_burst - 1e-6]
    alts = np.concatenate([[launch_altitude_m], inner, [z_burst]])
    times = integrate_inverse_speed(alts, speed)
    st = atm.state(alts)
    diam = sphere_diameter_m(gas_volume_m3(n, st.temperature_k, st.pressure_pa))
    rates = ascent_speed_drag_law(fl, st.density_kg_m3, st.temperature_k, diam, drag_coefficient,
                                  drag_model, re_launch)
    re = reynolds_number(rates, diam, st.density_kg_m3, st.temperature_k)
    cds = ascent_drag_coefficient(re, drag_coefficient, re_launch, drag_model)
    profile = AscentProfile(alts, rates, diam, re, st.density_kg_m3, times, cds)
    gas_molar_mass = float(mixture_molar_mass_kg_mol(g, purity))
    assumptions = (
        "ideal gas at ambient temperature and pressure (no superheat, no superpressure)",
        "spherical envelope; steady ascent (drag balances the free lift's weight); "
        "standard gravity g0",
        (f"{DRAG_COEFFICIENT_NOTE}; Cd used = {drag_coefficient:g}" if drag_model == "constant"
         else f"{REYNOLDS_DRAG_NOTE}; Cd at launch = {drag_coefficient:g} (Re {re_launch:.2g}), "
              f"at burst {float(cds[-1]):.2f} (Re {float(re[-1]):.2g})"),
        f"gas {g.name}, purity {purity:g} (rest air); "
        "gas constant R* = 8.31432 J/(mol K) of USSA 1976",
        f"atmosphere: {getattr(atm, 'name', type(atm).__name__)}",
        "burst when the diameter reaches the burst diameter (no envelope creep or ageing)",
    )
    plan = LiftPlan(
        gas=g.name,
        purity=float(purity),
        drag_coefficient=float(drag_coefficient),
        envelope_mass_kg=float(envelope_mass_kg),
        payload_mass_kg=float(payload_mass_kg),
        burst_diameter_m=float(burst_diameter_m),
        launch_altitude_m=float(launch_altitude_m),
        neck_lift_kg=float(neck_lift_kg),
        neck_lift_solved=solved,
        gross_lift_kg=float(gross),
        free_lift_kg=fl,
        gas_amount_mol=float(n),
        gas_mass_kg=float(n * gas_molar_mass),
        gas_volume_m3=v0_gas,
        gas_density_kg_m3=rho_gas,
        air_density_kg_m3=rho0,
        launch_diameter_m=d0,
        launch_ascent_rate_m_s=float(rates[0]),
        launch_reynolds_number=float(re[0]),
        burst_altitude_m=z_burst,
        burst_volume_m3=float(sphere_volume_m3(burst_diameter_m)),
        burst_ascent_rate_m_s=float(rates[-1]),
        burst_reynolds_number=float(re[-1]),
        time_to_burst_s=float(times[-1]),
        mean_ascent_rate_m_s=float((z_burst - launch_altitude_m) / times[-1]),
        profile=profile,
        atmosphere_name=str(getattr(atm, "name", type(atm).__name__)),
        assumptions=assumptions,
        drag_model=drag_model,
        burst_drag_coefficient=float(cds[-1]),
    )
    if warn:
        for message in practice_notes(plan):
            warnings.warn(message, PracticeWarning, stacklevel=2)
    return plan


def practice_notes(plan: LiftPlan) -> list[str]:
    """Messages for values outside common practice (ascent 3-8 m/s; burst at or above 15 km)."""
    notes = []
    lo, hi = PRACTICE_ASCENT_RANGE_M_S
    v = plan.launch_ascent_rate_m_s
    if not lo <= v <= hi:
        notes.append(
            f"launch ascent rate {v:.2f} m/s is outside the {lo:g}-{hi:g} m/s common for team "
            "flights "
            "(operational radiosondes fly at about 5 m/s); check the neck lift"
        )
    if plan.burst_altitude_m < PRACTICE_MIN_BURST_ALTITUDE_M:
        notes.append(
            f"burst altitude {plan.burst_altitude_m:.0f} m is below "
            f"{PRACTICE_MIN_BURST_ALTITUDE_M:.0f} m; "
            "check the burst diameter and the amount of gas"
        )
    return notes


# ------------------------------------------------------------------------------------------------
# Calibrating the drag coefficient from a flown track
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class DragFit:
    """Drag coefficient fitted to an observed ascent.

    ``drag_coefficient`` is the single value that best reproduces the observed ascent rates (least
    squares in speed); the arrays give, at the midpoint of each observed interval, the altitude, the
    observed rate, the Reynolds number and the local drag coefficient that would balance it (for a
    Cd(Re) calibration).
    """

    drag_coefficient: float
    altitude_m: np.ndarray
    ascent_rate_m_s: np.ndarray
    reynolds_number: np.ndarray
    local_drag_coefficient: np.ndarray
    rms_residual_m_s: float


def drag_coefficient_from_track(
    alt_m: np.ndarray,
    time_s: np.ndarray,
    free_lift_kg: float,
    gas_amount_mol_: float,
    atmosphere: Atmosphere | None = None,
    drag_model: str = "constant",
    reference_reynolds: float | None = None,
) -> DragFit:
    """Fit the ascent drag coefficient to a flown ascent (altitude against time).

    Parameters
    ----------
    alt_m, time_s : array_like
        Altitudes and times of the ascent fixes (time increasing).
    free_lift_kg, gas_amount_mol_ : float
        The flight's free lift and gas amount (from its fill, e.g. via :func:`plan_lift`).
    atmosphere : Atmosphere, optional
        Default US Standard Atmosphere 1976; a sounding of the day is better.
    drag_model : str
        ``"constant"`` (default): fit the one Cd of the whole ascent. ``"reynolds"``: fit the Cd at
        ``reference_reynolds`` of the drag-crisis law (:mod:`balloonpath.flight.drag`), i.e. the
        plan's ``drag_coefficient`` under that law.
    reference_reynolds : float, optional
        ``"reynolds"`` only: the launch Reynolds number of the flight's fill (``LiftPlan.
        launch_reynolds_number``); default the Reynolds number of the first observed interval.

    Notes
    -----
    Observed rates w_i = dz/dt by finite differences at interval midpoints. The model is
    w = k(z) Cd^(-1/2) with k = sqrt(2 L g0 / (rho pi D^2 / 4)); minimising sum (k_i s - w_i)^2
    over s = Cd^(-1/2) gives s = sum k_i w_i / sum k_i^2 (closed form). Intervals with w <= 0 are
    skipped. Under ``"reynolds"``, Cd_i = Cd_ref r_i with r_i = S(Re_i) / S(Re_ref) evaluated at
    the observed Reynolds numbers Re_i = rho w_i D / mu, so k_i is replaced by k_i r_i^(-1/2) and
    the same closed form gives s = Cd_ref^(-1/2). The local drag coefficients returned are the
    model-free (k_i / w_i)^2 in both cases.

    Raises
    ------
    PhysicsError
        If fewer than two ascending intervals remain.
    """
    z = np.asarray(alt_m, dtype=float)
    t = np.asarray(time_s, dtype=float)
    w = np.diff(z) / np.diff(t)
    zm = 0.5 * (z[1:] + z[:-1])
    ok = np.isfinite(w) & (w > 0)
    if ok.sum() < 2:
        raise input_error(
            None,
            "track",
            "has fewer than two ascending intervals",
            "give altitude and time fixes of the ascent",
            cls=PhysicsError,
        )
    zm, w = zm[ok], w[ok]
    atm = atmosphere if atmosphere is not None else StandardAtmosphere()
    st = atm.state(zm)
    diam = sphere_diameter_m(gas_volume_m3(gas_amount_mol_, st.temperature_k, st.pressure_pa))
    k = steady_ascent_rate(free_lift_kg, st.density_kg_m3, 1.0, diam)
    re_obs = reynolds_number(w, diam, st.density_kg_m3, st.temperature_k)
    check_drag_model(drag_model)
    kk = k
    if drag_model == "reynolds":
        re_ref = float(re_obs[0]) if reference_reynolds is None else float(reference_reynolds)
        kk = k / np.sqrt(drag_crisis_shape(re_obs) / drag_crisis_shape(re_ref))
    s = float(np.sum(kk * w) / np.sum(kk * kk))
    cd = 1.0 / s**2
    return DragFit(
        drag_coefficient=cd,
        altitude_m=zm,
        ascent_rate_m_s=w,
        reynolds_number=re_obs,
        local_drag_coefficient=(k / w) ** 2,
        rms_residual_m_s=float(np.sqrt(np.mean((kk * s - w) ** 2))),
    )
