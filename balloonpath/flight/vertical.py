"""The vertical-motion model for the ensemble integrator: member parameters and vertical speeds.

Phases per member: ascent -> optional float (``[float]`` altitude_m for duration_min) -> burst or
cut-down (``[cutdown]`` altitude_m or after_min) -> descent -> landed. The integrator
(``balloonpath.ensemble``) owns the phase transitions and event timing, using ``burst_altitude_m``,
``float_*`` and ``cutdown_*`` from :class:`VerticalParams`; this module gives the parameters and the
vertical speed in each phase.

Two modes, one interface:

- ``"rates"``: constant ascent rate; burst at a given altitude; descent speed given at sea-level
  density.
- ``"physics"``: the ascent rate follows the drag balance of a balloon holding a fixed amount of gas
  (:func:`balloonpath.flight.lift.ascent_rate_at_altitude`) under the plan's ascent drag law
  (``[balloon] drag_model``, :mod:`balloonpath.flight.drag`); burst altitude from the burst diameter;
  the sea-level descent speed from the parachute and the payload mass
  (:mod:`balloonpath.flight.descent`).

In both modes the descent speed at altitude is v0 sqrt(rho0 / rho(z)), rho0 = 1.2250 kg m-3
(USSA 1976).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, fields, replace

import numpy as np

from balloonpath.atmosphere import SEA_LEVEL_DENSITY, Atmosphere
from balloonpath.errors import PhysicsWarning, PlanError, input_error
from balloonpath.flight.descent import parachute_descent_rate
from balloonpath.flight.drag import DRAG_MODELS
from balloonpath.flight.gas import gas_volume_m3
from balloonpath.flight.lift import (
    LiftPlan,
    ascent_speed_drag_law,
    plan_lift,
    sphere_diameter_m,
)
from balloonpath.flight.phases import ASCENT, DESCENT, FLOAT, LANDED  # noqa: F401  (re-exported codes)
from balloonpath.plan import Plan

MODES = ("rates", "physics")
_STRING_FIELDS = ("mode", "drag_model")


@dataclass(frozen=True, eq=False)
class VerticalParams:
    """Per-member vertical-model parameters; every array has shape (N,).

    Attributes
    ----------
    mode : str
        ``"rates"`` or ``"physics"`` (one mode for all members).
    ascent_rate_m_s : ndarray
        Rates mode: the constant ascent rate. Physics mode: the launch ascent rate (for reports).
    free_lift_kg, gas_amount_mol, ascent_drag_coefficient : ndarray
        Physics mode: free lift (kg), gas amount (mol) and ascent drag coefficient; NaN in rates
        mode.
    burst_altitude_m : ndarray
        Altitude at which the ascent ends in burst, m.
    descent_sea_level_m_s : ndarray
        Descent speed at sea-level USSA density (physics mode: from the parachute), m/s, positive.
    float_altitude_m, float_duration_s : ndarray
        Float altitude (NaN = no float) and time spent there, s.
    cutdown_altitude_m, cutdown_after_s : ndarray
        Cut-down on reaching this altitude, or this long after launch (s); NaN = none.
    payload_mass_kg : ndarray
        Payload mass below the neck (kg); NaN in rates mode unless a ``[payload]`` table is given.
    drag_model : str
        Ascent drag law of all members: ``"constant"`` (default) or ``"reynolds"``
        (:mod:`balloonpath.flight.drag`); used in physics mode only.
    drag_reference_reynolds : ndarray, optional
        ``"reynolds"``: the Reynolds number at which Cd equals ``ascent_drag_coefficient`` (the
        nominal fill's launch Reynolds number); NaN (default) otherwise.
    """

    mode: str
    ascent_rate_m_s: np.ndarray
    free_lift_kg: np.ndarray
    gas_amount_mol: np.ndarray
    ascent_drag_coefficient: np.ndarray
    burst_altitude_m: np.ndarray
    descent_sea_level_m_s: np.ndarray
    float_altitude_m: np.ndarray
    float_duration_s: np.ndarray
    cutdown_altitude_m: np.ndarray
    cutdown_after_s: np.ndarray
    payload_mass_kg: np.ndarray
    drag_model: str = "constant"
    drag_reference_reynolds: np.ndarray | None = None

    def __post_init__(self) -> None:
        if self.mode not in MODES:
            raise ValueError(f"VerticalParams: mode {self.mode!r} is not one of {MODES}")
        if self.drag_model not in DRAG_MODELS:
            raise ValueError(
                f"VerticalParams: drag_model {self.drag_model!r} is not one of {DRAG_MODELS}"
            )
        if self.drag_reference_reynolds is None:
            object.__setattr__(
                self, "drag_reference_reynolds", np.full(np.shape(self.burst_altitude_m), np.nan)
            )
        n = None
        for f in fields(self):
            if f.name in _STRING_FIELDS:
                continue
            arr = np.atleast_1d(np.asarray(getattr(self, f.name), dtype=float))
            if arr.ndim != 1:
                raise ValueError(
                    f"VerticalParams: {f.name} must be one-dimensional, got shape {arr.shape}"
                )
            if n is None:
                n = arr.shape[0]
            elif arr.shape[0] != n:
                raise ValueError(
                    f"VerticalParams: {f.name} has {arr.shape[0]} members, expected {n}"
                )
            object.__setattr__(self, f.name, arr)

    @property
    def n_members(self) -> int:
        """Number of members N."""
        return int(self.burst_altitude_m.shape[0])

    def _map(self, fn) -> VerticalParams:  # noqa: ANN001
        values = {
            f.name: fn(getattr(self, f.name)) for f in fields(self) if f.name not in _STRING_FIELDS
        }
        return VerticalParams(mode=self.mode, drag_model=self.drag_model, **values)

    def take(self, idx: np.ndarray | list[int] | slice) -> VerticalParams:
        """A subset (or reordering) of members."""
        if isinstance(idx, slice):
            return self._map(lambda a: a[idx])
        index = np.atleast_1d(np.asarray(idx))
        return self._map(lambda a: a[index])

    def repeat(self, n: int) -> VerticalParams:
        """Broadcast N = 1 parameters to ``n`` identical members.

        Raises
        ------
        ValueError
            If the parameters do not have exactly one member.
        """
        if self.n_members != 1:
            raise ValueError(f"VerticalParams.repeat: needs 1 member, has {self.n_members}")
        return self._map(lambda a: np.repeat(a, int(n)))


def lift_plan_of(plan: Plan, atmosphere: Atmosphere | None = None, warn: bool = True) -> LiftPlan:
    """The lift plan (:func:`balloonpath.flight.lift.plan_lift`) of a physics-mode plan.

    Raises
    ------
    PlanError
        When the plan has no ``[balloon]`` and ``[payload]`` tables (rates mode).
    """
    b, p = plan.balloon, plan.payload
    if b is None or p is None:
        raise input_error(plan.path, "[balloon]", "is missing: the plan is in rates mode",
                          "give [balloon] and [payload] for lift planning", cls=PlanError)
    return plan_lift(
        b.envelope_mass_kg, p.mass_kg, b.burst_diameter_m, neck_lift_kg=b.neck_lift_kg,
        target_ascent_m_s=b.target_ascent_m_s, gas=b.gas, purity=b.gas_purity,
        drag_coefficient=b.drag_coefficient, launch_altitude_m=plan.launch.elevation_m,
        atmosphere=atmosphere, warn=warn, source=plan.path, drag_model=b.drag_model,
    )


def vertical_params_from_plan(plan: Plan, atmosphere: Atmosphere | None = None) -> VerticalParams:
    """Nominal (N = 1) vertical parameters from a flight plan.

    Parameters
    ----------
    plan : Plan
        A loaded plan in rates mode (``[rates]``) or physics mode (``[balloon]``, ``[payload]``,
        ``[parachute]``); ``[float]`` and ``[cutdown]`` are optional.
    atmosphere : Atmosphere, optional
        The air used for the physics-mode burst altitude and the solved neck lift (default USSA
        1976).

    Notes
    -----
    Physics mode calls :func:`balloonpath.flight.lift.plan_lift` at the launch elevation (solving
    the neck lift for ``target_ascent_m_s`` when given) with the plan's ``drag_model`` (the
    ``"reynolds"`` law's reference Reynolds number is the nominal launch one) and takes the sea-level descent speed from
    the parachute with the payload mass only (envelope remnants not counted; see
    :mod:`balloonpath.flight.descent`). Practice warnings (ascent rate outside 3-8 m/s, burst below
    15 km) are emitted as :class:`~balloonpath.errors.PracticeWarning`.

    Raises
    ------
    PlanError
        When a physics-mode float altitude is not below the computed burst altitude.
    PhysicsError
        When the balloon cannot rise or its burst diameter is not above its launch diameter.
    """
    nan = np.array([np.nan])
    payload = np.array([plan.payload.mass_kg]) if plan.payload is not None else nan
    drag = dict(drag_model="constant", drag_reference_reynolds=nan)
    if plan.rates is not None:
        r = plan.rates
        values = dict(
            ascent_rate_m_s=[r.ascent_m_s],
            free_lift_kg=nan,
            gas_amount_mol=nan,
            ascent_drag_coefficient=nan,
            burst_altitude_m=[r.burst_altitude_m],
            descent_sea_level_m_s=[r.descent_sea_level_m_s],
        )
    else:
        b, p, chute = plan.balloon, plan.payload, plan.parachute
        assert (
            b is not None and p is not None and chute is not None
        )  # guaranteed by plan validation
        lp = lift_plan_of(plan, atmosphere)
        v0 = float(parachute_descent_rate(p.mass_kg, chute.diameter_m, chute.drag_coefficient))
        values = dict(
            ascent_rate_m_s=[lp.launch_ascent_rate_m_s],
            free_lift_kg=[lp.free_lift_kg],
            gas_amount_mol=[lp.gas_amount_mol],
            ascent_drag_coefficient=[lp.drag_coefficient],
            burst_altitude_m=[lp.burst_altitude_m],
            descent_sea_level_m_s=[v0],
        )
        drag = dict(drag_model=lp.drag_model, drag_reference_reynolds=[lp.launch_reynolds_number])
    burst = float(values["burst_altitude_m"][0])
    fl, cd = plan.float, plan.cutdown
    if fl is not None and fl.altitude_m >= burst:
        raise input_error(
            plan.path,
            f"[float] altitude_m = {fl.altitude_m!r}",
            f"is not below the burst altitude {burst:.0f} m",
            "float lower, or use a larger balloon",
            cls=PlanError,
        )
    if cd is not None and cd.altitude_m is not None and cd.altitude_m >= burst:
        warnings.warn(
            f"[cutdown] altitude_m {cd.altitude_m:.0f} m is above the burst altitude "
            f"{burst:.0f} m; "
            "the balloon bursts first",
            PhysicsWarning,
            stacklevel=2,
        )
    return VerticalParams(
        mode=plan.mode,
        float_altitude_m=[fl.altitude_m if fl is not None else np.nan],
        float_duration_s=[fl.duration_min * 60.0 if fl is not None else np.nan],
        cutdown_altitude_m=[
            cd.altitude_m if cd is not None and cd.altitude_m is not None else np.nan
        ],
        cutdown_after_s=[
            cd.after_min * 60.0 if cd is not None and cd.after_min is not None else np.nan
        ],
        payload_mass_kg=payload,
        **drag,
        **values,
    )


def perturbed(
    params: VerticalParams,
    ascent_factor: np.ndarray,
    burst_factor: np.ndarray,
    descent_factor: np.ndarray,
    atmosphere: Atmosphere | None = None,
) -> VerticalParams:
    """Members with multiplicative perturbations of ascent, burst and descent.

    Parameters
    ----------
    params : VerticalParams
        N members, or one member broadcast to the factors' length.
    ascent_factor, burst_factor, descent_factor : array_like
        Factors f_a, f_b, f_d, shape (N,).
    atmosphere : Atmosphere, optional
        Unused (the scalings are exact); kept so that callers need not know the mode.

    Notes
    -----
    - Rates mode: ascent rate x f_a. Physics mode: free lift x f_a^2 with the gas amount held, so
      the balloon's size is unchanged; it stands for the uncertainty of both the fill and the drag
      coefficient. Under the ``"constant"`` drag law the ascent rate scales by exactly f_a at every
      altitude (v ~ sqrt(L)), the same as dividing Cd by f_a^2. Under ``"reynolds"`` the drag law
      (Cd as a function of Re, with its reference Reynolds number) belongs to the envelope and is
      kept, so a member with more lift flies at a higher Re and a slightly different Cd: its speed
      scales by about f_a (within a few per cent through the drag crisis). The reported launch
      ascent rate is scaled by f_a (exact for ``"constant"``).
    - Burst altitude x f_b in both modes (the altitude, not the burst diameter, is perturbed, so the
      spread is the same in both modes).
    - Sea-level descent speed x f_d.
    """
    fa = np.atleast_1d(np.asarray(ascent_factor, dtype=float))
    fb = np.atleast_1d(np.asarray(burst_factor, dtype=float))
    fd = np.atleast_1d(np.asarray(descent_factor, dtype=float))
    n = max(fa.size, fb.size, fd.size)
    p = params.repeat(n) if params.n_members == 1 and n != 1 else params
    fa, fb, fd = (np.broadcast_to(f, (p.n_members,)) for f in (fa, fb, fd))
    changes = dict(
        ascent_rate_m_s=p.ascent_rate_m_s * fa,
        burst_altitude_m=p.burst_altitude_m * fb,
        descent_sea_level_m_s=p.descent_sea_level_m_s * fd,
    )
    if p.mode == "physics":
        changes["free_lift_kg"] = p.free_lift_kg * fa**2
    return replace(p, **changes)


def vertical_speed_m_s(
    phase: np.ndarray,
    alt_m: np.ndarray,
    params: VerticalParams,
    members: np.ndarray,
    atmosphere: Atmosphere,
) -> np.ndarray:
    """Vertical speed (m/s, positive up) of each element.

    Parameters
    ----------
    phase : ndarray of int
        Phase codes (:mod:`balloonpath.flight.phases`).
    alt_m : ndarray
        Geometric altitudes, m.
    params : VerticalParams
        Member parameters.
    members : ndarray of int
        Element k concerns member ``members[k]`` at ``alt_m[k]`` in ``phase[k]``.
    atmosphere : Atmosphere
        Anything with ``.state(z_m)``.

    Returns
    -------
    ndarray
        Ascent speed in ASCENT (rates mode: the member's constant rate; physics mode:
        v = sqrt(2 L g0 / (rho Cd pi D^2 / 4)) with D from V = n R* T / p of the air at the
        altitude and Cd from the drag law), 0 in FLOAT and LANDED, and -v0 sqrt(rho0 / rho(z)) in
        DESCENT (rho0 = 1.2250 kg m-3).

    Notes
    -----
    One atmosphere evaluation for the moving elements: cost O(N). The ``"constant"`` law needs no
    root finding; ``"reynolds"`` solves v^2 Cd(Re(v)) = 2 L g0 / (rho A) for all ascending elements
    at once with safeguarded Newton steps in ln v (step tolerance 1e-9, cap 30 iterations, about 6
    typical; :func:`balloonpath.flight.drag.solve_ascent_speed`).
    """
    ph = np.asarray(phase)
    z = np.asarray(alt_m, dtype=float)
    m = np.asarray(members, dtype=np.intp)
    w = np.zeros(z.shape, dtype=float)
    up = ph == ASCENT
    down = ph == DESCENT
    moving = up | down
    if not moving.any():
        return w
    all_moving = bool(moving.all())
    zs = z if all_moving else z[moving]
    ms = m if all_moving else m[moving]
    ups = up if all_moving else up[moving]
    need_state = params.mode == "physics" or not ups.all()
    speed = np.empty(zs.shape, dtype=float)
    if need_state:
        st = atmosphere.state(zs)
        rho = np.asarray(st.density_kg_m3, dtype=float)
    if params.mode == "rates":
        speed[ups] = params.ascent_rate_m_s[ms[ups]]
    elif ups.any():
        mu = ms[ups]
        t = np.asarray(st.temperature_k, dtype=float)[ups]
        p = np.asarray(st.pressure_pa, dtype=float)[ups]
        volume = gas_volume_m3(params.gas_amount_mol[mu], t, p)
        speed[ups] = ascent_speed_drag_law(
            params.free_lift_kg[mu],
            rho[ups],
            t,
            sphere_diameter_m(volume),
            params.ascent_drag_coefficient[mu],
            params.drag_model,
            params.drag_reference_reynolds[mu],
        )
    downs = ~ups
    if downs.any():
        speed[downs] = -params.descent_sea_level_m_s[ms[downs]] * np.sqrt(
            SEA_LEVEL_DENSITY / rho[downs]
        )
    if all_moving:
        return speed
    w[moving] = speed
    return w
