"""Ascent drag laws of a latex balloon: constant Cd, or a Reynolds-number-dependent drag crisis.

A sounding balloon starts its ascent above a smooth sphere's drag crisis (Re ~ 6e5 to 1.4e6 at
launch) and ends below it (Re < 1e5 near burst) (REFERENCES.md §3a). Two laws are offered:

- ``"constant"``: Cd = ``drag_coefficient`` at every Reynolds number.
- ``"reynolds"``: Cd(Re) = ``drag_coefficient`` * S(Re) / S(Re_ref), where S is a smooth
  drag-crisis curve (:func:`drag_crisis_shape`) and Re_ref the Reynolds number at launch of the
  nominal fill; ``drag_coefficient`` is then the drag coefficient **at launch**, and the curve
  only sets how Cd changes from there.

The speed at which drag balances the free lift's weight, v^2 Cd(Re(v)) = 2 L g0 / (rho A) with
Re = rho v D / mu, is found by :func:`solve_ascent_speed` (safeguarded Newton steps in ln v,
vectorised).

References
----------
[Morrison2013] F. A. Morrison, An Introduction to Fluid Mechanics, Cambridge University Press,
    2013: smooth-sphere drag correlation, as implemented in ``fluids.drag.Morrison`` (fluids
    1.3.1, read in the installed source); its drag-crisis term is
    0.411 (Re/263000)^-7.94 / (1 + (Re/263000)^-8), a logistic step in ln Re of steepness about 8
    centred at Re = 2.63e5.
[Barati2014] R. Barati et al., Powder Technology 257:11-19 (2014), doi:10.1016/j.powtec.2014.02.045:
    high-accuracy sphere correlation ("Barati_high" in fluids), Cd(1e6) = 0.213 (REFERENCES.md §3a).
[Hoerner1965] S. F. Hoerner, Fluid-Dynamic Drag (1965): subcritical sphere Cd ~ 0.47 (from memory).
[Achenbach1972] E. Achenbach, J. Fluid Mech. 54:565 (1972): critical Re ~ 3-3.7e5, Cd recovering
    to ~0.2 at Re ~ 1e6 after the minimum (from memory).
"""

from __future__ import annotations

import numpy as np

from balloonpath.atmosphere import G0

DRAG_MODELS = ("constant", "reynolds")

#: Subcritical sphere drag coefficient, Re ~ 1e3-2e5 [Hoerner1965] (from memory; REFERENCES.md §3a).
SUBCRITICAL_DRAG_COEFFICIENT = 0.47
#: Supercritical sphere drag coefficient after the crisis minimum, Re ~ 1e6 [Achenbach1972] (from
#: memory) and Barati_high's 0.213 at 1e6 (REFERENCES.md §3a).
SUPERCRITICAL_DRAG_COEFFICIENT = 0.20
#: Centre of the drag crisis: Morrison's crisis term [Morrison2013].
CRITICAL_REYNOLDS_NUMBER = 2.63e5
#: Steepness of the crisis step in ln Re: Morrison's crisis-term exponent [Morrison2013].
CRISIS_STEEPNESS = 8.0

#: Newton iteration cap and tolerance (on ln v) of :func:`solve_ascent_speed`.
SOLVE_MAX_ITERATIONS = 30
SOLVE_TOLERANCE = 1e-9


def drag_balance_speed_m_s(
    mass_kg: np.ndarray | float,
    air_density_kg_m3: np.ndarray | float,
    drag_coefficient: np.ndarray | float,
    area_m2: np.ndarray | float,
    gravity_m_s2: float = G0,
) -> np.ndarray:
    """Speed (m/s, positive) at which drag balances the weight of ``mass_kg``.

    Notes
    -----
    m g = 1/2 rho v^2 Cd A, so v = sqrt(2 m g / (rho Cd A)) ([NASATerminal], [Potvin], [Knacke1991] §4).
    The one drag balance of the project: a parachute's terminal velocity (m = the falling mass) and a
    balloon's steady ascent (m = the free lift) both use it.
    """
    return np.sqrt(
        2.0 * np.asarray(mass_kg, dtype=float) * gravity_m_s2
        / (np.asarray(air_density_kg_m3, dtype=float) * np.asarray(drag_coefficient, dtype=float)
           * np.asarray(area_m2, dtype=float))
    )


def morrison_drag_coefficient(reynolds: np.ndarray | float) -> np.ndarray:
    """Smooth-sphere drag coefficient by Morrison's correlation [Morrison2013].

    Parameters
    ----------
    reynolds : array_like
        Reynolds number Re = rho v D / mu (> 0), any shape; stated range Re <= 1e6.

    Returns
    -------
    ndarray
        Cd on the frontal area.

    Notes
    -----
    Cd = 24/Re + 2.6 (Re/5) / (1 + (Re/5)^1.52) + 0.411 (Re/2.63e5)^-7.94 / (1 + (Re/2.63e5)^-8)
    + Re^0.8 / 461000, in the form of ``fluids.drag.Morrison`` (fluids 1.3.1, read in the
    installed source). Morrison's own handout writes the last term as
    0.25 (Re/1e6) / (1 + Re/1e6) (from memory); the two differ by < 0.013 for Re <= 1e6.
    Used as a reference curve (tests, docs); the balloon law is :func:`drag_crisis_shape`, because
    Morrison's crisis is so deep (Cd 0.41 -> 0.09) that the drag force falls with speed through it
    and the drag balance has several roots.
    """
    re = np.asarray(reynolds, dtype=float)
    x = re / 263000.0
    return (
        24.0 / re
        + 2.6 * (re / 5.0) / (1.0 + (re / 5.0) ** 1.52)
        + 0.411 * x**-7.94 / (1.0 + x**-8.0)
        + re**0.8 / 461000.0
    )


def drag_crisis_shape(
    reynolds: np.ndarray | float,
    subcritical: float = SUBCRITICAL_DRAG_COEFFICIENT,
    supercritical: float = SUPERCRITICAL_DRAG_COEFFICIENT,
    critical_reynolds: float = CRITICAL_REYNOLDS_NUMBER,
    steepness: float = CRISIS_STEEPNESS,
) -> np.ndarray:
    """Smooth drag-crisis curve: a logistic step in ln Re from the subcritical to the supercritical Cd.

    Parameters
    ----------
    reynolds : array_like
        Reynolds number (> 0), any shape.
    subcritical, supercritical : float
        Cd well below and well above the crisis (defaults 0.47 [Hoerner1965] and 0.20
        [Achenbach1972], [Barati2014]).
    critical_reynolds, steepness : float
        Centre Re_c and steepness k of the step (defaults Morrison's 2.63e5 and 8 [Morrison2013]).

    Returns
    -------
    ndarray
        S(Re) = Cd_sup + (Cd_sub - Cd_sup) / (1 + (Re / Re_c)^k).

    Notes
    -----
    The curve keeps the sphere's two regimes and Morrison's crisis position and sharpness but not
    the deep, narrow minimum (0.07-0.1) of a smooth sphere, which a non-rigid, not quite smooth
    envelope does not show as strongly (the local Cd of the DWD ascent, docs/physics.md, rises by
    a factor of about 2.3 through the crisis, not 4.7). With these defaults the drag force
    Cd(Re) Re^2 grows strictly with speed (d ln Cd / d ln Re >= -1.69 > -2, at Re = 2.77e5;
    :func:`drag_crisis_log_slope`), so the drag balance has exactly one root.
    """
    re = np.asarray(reynolds, dtype=float)
    q = (re / critical_reynolds) ** steepness
    return supercritical + (subcritical - supercritical) / (1.0 + q)


def drag_crisis_log_slope(
    reynolds: np.ndarray | float,
    subcritical: float = SUBCRITICAL_DRAG_COEFFICIENT,
    supercritical: float = SUPERCRITICAL_DRAG_COEFFICIENT,
    critical_reynolds: float = CRITICAL_REYNOLDS_NUMBER,
    steepness: float = CRISIS_STEEPNESS,
) -> np.ndarray:
    """Logarithmic slope d ln S / d ln Re of :func:`drag_crisis_shape`.

    Notes
    -----
    With q = (Re/Re_c)^k: dS/d ln Re = -(Cd_sub - Cd_sup) k q / (1 + q)^2, divided by S.
    """
    re = np.asarray(reynolds, dtype=float)
    q = (re / critical_reynolds) ** steepness
    shape = supercritical + (subcritical - supercritical) / (1.0 + q)
    return -(subcritical - supercritical) * steepness * q / (1.0 + q) ** 2 / shape


def ascent_drag_coefficient(
    reynolds: np.ndarray | float,
    drag_coefficient: np.ndarray | float,
    reference_reynolds: np.ndarray | float,
    model: str = "constant",
) -> np.ndarray:
    """Ascent drag coefficient at Reynolds number ``reynolds`` under a drag law.

    Parameters
    ----------
    reynolds : array_like
        Reynolds number.
    drag_coefficient : array_like
        ``"constant"``: the Cd. ``"reynolds"``: the Cd at ``reference_reynolds`` (the launch).
    reference_reynolds : array_like
        Reynolds number at which Cd equals ``drag_coefficient`` (``"reynolds"`` only).
    model : str
        ``"constant"`` or ``"reynolds"``.

    Notes
    -----
    ``"reynolds"``: Cd(Re) = Cd_ref S(Re) / S(Re_ref) with S from :func:`drag_crisis_shape`.
    """
    cd = np.asarray(drag_coefficient, dtype=float)
    re = np.asarray(reynolds, dtype=float)
    if model == "constant":
        return np.broadcast_to(cd, np.broadcast_shapes(cd.shape, re.shape)).copy()
    if model != "reynolds":
        raise ValueError(f"drag model {model!r} is not one of {DRAG_MODELS}")
    return cd * drag_crisis_shape(re) / drag_crisis_shape(reference_reynolds)


def solve_ascent_speed(
    force_ratio: np.ndarray,
    reynolds_per_speed: np.ndarray,
    drag_coefficient: np.ndarray,
    reference_reynolds: np.ndarray,
    tol: float = SOLVE_TOLERANCE,
    max_iterations: int = SOLVE_MAX_ITERATIONS,
) -> tuple[np.ndarray, int]:
    """Steady ascent speed under the ``"reynolds"`` drag law (vectorised).

    Parameters
    ----------
    force_ratio : ndarray
        K = 2 L g0 / (rho A), m2 s-2: the balance is v^2 Cd(Re) = K.
    reynolds_per_speed : ndarray
        a = rho D / mu, s m-1: Re = a v.
    drag_coefficient, reference_reynolds : ndarray
        Cd at the reference Reynolds number, and that number (see :func:`ascent_drag_coefficient`).
    tol : float
        Stop when every |Newton step| in ln v is below ``tol`` (default 1e-9; the step is applied,
        so the remaining error is of order its square).
    max_iterations : int
        Iteration cap (default 30; about 6 are typical).

    Returns
    -------
    (ndarray, int)
        Speeds (m/s) and the number of iterations used.

    Notes
    -----
    h(x) = 2 x + ln Cd(a e^x) - ln K = 0 in x = ln v; h'(x) = 2 + d ln S / d ln Re lies in
    [0.31, 2] (:func:`drag_crisis_shape`), so h is strictly increasing and its root is unique. Since
    Cd lies between c_lo = Cd_ref S_min / S_ref and c_hi = Cd_ref S_max / S_ref, the root is
    bracketed by x in [ln(K / c_hi) / 2, ln(K / c_lo) / 2]; Newton steps that leave the current
    bracket are replaced by bisection, and the bracket shrinks with the sign of h. Start: the
    constant-Cd speed sqrt(K / Cd_ref) (exact at the reference Reynolds number) followed by one
    fixed-point step x = (ln K - ln Cd(a e^x)) / 2. Cost for 700 elements: about 0.35 ms
    (measured; 6 iterations).
    """
    log_k = np.log(np.asarray(force_ratio, dtype=float))
    log_a = np.log(np.asarray(reynolds_per_speed, dtype=float))
    cd_ref = np.asarray(drag_coefficient, dtype=float)
    re_ref = np.asarray(reference_reynolds, dtype=float)
    log_k, log_a, cd_ref, re_ref = np.broadcast_arrays(log_k, log_a, cd_ref, re_ref)
    sub, sup = SUBCRITICAL_DRAG_COEFFICIENT, SUPERCRITICAL_DRAG_COEFFICIENT
    steep, delta = CRISIS_STEEPNESS, sub - sup
    log_scale = np.log(cd_ref) - np.log(drag_crisis_shape(re_ref))
    target = log_k - log_scale  # h(x) = 2 x + ln S(a e^x) - target
    lo = 0.5 * (target - np.log(max(sub, sup)))
    hi = 0.5 * (target - np.log(min(sub, sup)))
    offset = steep * (log_a - np.log(CRITICAL_REYNOLDS_NUMBER))
    x = 0.5 * (log_k - np.log(cd_ref))  # constant-Cd speed, then one fixed-point step:
    x = 0.5 * (target - np.log(sup + delta / (1.0 + np.exp(np.minimum(steep * x + offset, 700.0)))))
    iterations = 0
    for iterations in range(1, max_iterations + 1):  # noqa: B007  (count kept)
        q = np.exp(np.minimum(steep * x + offset, 700.0))  # (Re / Re_c)^k
        inv = 1.0 / (1.0 + q)
        shape = sup + delta * inv
        h = 2.0 * x + np.log(shape) - target
        slope = 2.0 - delta * steep * q * inv * inv / shape
        new = x - h / slope
        lo = np.where(h < 0.0, x, lo)
        hi = np.where(h > 0.0, x, hi)
        bad = (new < lo) | (new > hi)
        if bad.any():
            new = np.where(bad, 0.5 * (lo + hi), new)
        done = bool(np.all(np.abs(new - x) < tol))
        x = new
        if done:
            break
    return np.exp(x), iterations
