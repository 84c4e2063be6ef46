"""Recovery dispatch: re-predict the landing during the flight from telemetry.

Every new position report says where the balloon is, how fast it climbs or falls, and, by its drift, what
the wind is at its altitude. One update (:meth:`ChaseSession.update`) does:

1. :func:`estimate_flight_state`: phase (ascent, float, descent, landed), vertical speed by a robust
   (Theil-Sen) fit over recent fixes, burst from the altitude trend, the actual ascent rate and, while the
   balloon still rises, the likely burst altitude ([2]'s physics in physics mode), the actual descent
   speed after burst.
2. :func:`wind_observations_from_track`: the drift over short windows (robust line fits, Huber weights)
   as wind observations with an error model (position noise, pendulum, layer averaging).
3. :func:`condition_field`: the wind field conditioned on the pre-flight observations plus the telemetry
   winds, at the pre-flight field's FIXED hyperparameters (one Cholesky, no hyperparameter search).
4. :func:`repredict`: the ensemble flown from the latest fix (any phase) with member parameters around
   the estimates and wind realisations of the updated field; zones by
   :func:`balloonpath.zones.compute_zones`.

The model, the error model and the limits are in docs/chase.md.

References
----------
[Sen1968] P. K. Sen, "Estimates of the regression coefficient based on Kendall's tau", J. Amer. Stat.
    Assoc. 63:1379-1389 (1968) (Theil-Sen slope, via ``scipy.stats.theilslopes``); from memory.
[Huber1964] P. J. Huber, "Robust estimation of a location parameter", Ann. Math. Stat. 35:73-101 (1964):
    weights min(1, c / |r|), c = 1.345 sigma (95 % efficiency at the normal); from memory.
[RW2006] C. E. Rasmussen & C. K. I. Williams, Gaussian Processes for Machine Learning (2006), Alg. 2.1:
    the conditioning is an exact GP regression (``balloonpath.winds.gp``).
"""

from __future__ import annotations

import dataclasses
import math
import time as _time
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from scipy.special import ndtr, ndtri
from scipy.stats import theilslopes

from balloonpath.atmosphere import Atmosphere
from balloonpath.ensemble import State, Trajectories, draw_member_factors, integrate
from balloonpath.errors import PhysicsWarning, WarningLog, input_error, recording_warnings
from balloonpath.flight.phases import ASCENT, DESCENT, FLOAT, LANDED, PHASE_NAMES
from balloonpath.flight.vertical import VerticalParams, perturbed, vertical_params_from_plan
from balloonpath.forecast import NominalFirst
from balloonpath.geodesy import inverse, normalize_longitude, radii_of_curvature
from balloonpath.plan import Plan
from balloonpath.result import ForecastResult, Points, Track
from balloonpath.terrain import terrain_from_plan
from balloonpath.track import FlownTrack
from balloonpath.winds.field import MeanMemberWinds, MemberWinds
from balloonpath.winds.observations import WindObservations

# ---------------------------------------------------------------------------------------- constants
#: Recent fixes used for the current vertical speed, s of telemetry time.
PHASE_WINDOW_S = 120.0
#: |vertical speed| below this (m/s) counts as level (float, on the ground).
LEVEL_SPEED_M_S = 0.8
#: Burst: the robust vertical speed is below -BURST_SPEED_M_S and the altitude this far below its maximum.
BURST_SPEED_M_S = 2.0
BURST_DROP_M = 150.0
#: A drop this large below the maximum is a burst (or cut-down) whatever the current speed.
BURST_DROP_LARGE_M = 1_000.0
#: The launch: the first fix from which the altitude stays this far above the first fix's.
LAUNCH_RISE_M = 30.0
#: Ascent / descent speed estimates use the fixes of this last stretch of the phase, s.
RATE_WINDOW_S = 1_800.0
#: Fixes right after burst (tangled remnants, parachute opening) left out of the descent-speed estimate, s.
AFTER_BURST_SKIP_S = 60.0
#: Floors of the relative sd of the measured ascent and descent factors (model-form error: the real
#: rate's shape with altitude differs from the model's).
ASCENT_FACTOR_SIGMA_FLOOR = 0.02
DESCENT_FACTOR_SIGMA_FLOOR = 0.03

#: Wind from fixes: window length (s) and largest altitude span of one window (m).
WIND_WINDOW_S = 90.0
WIND_MAX_DZ_M = 400.0
#: Pendulum: amplitude (m) of the payload's swing under the balloon, treated as extra position noise of
#: variance A^2 / 2 (fix intervals of seconds alias the swing of a 10-20 m line, period 6-9 s). Common
#: practice (order of magnitude), not a measured value.
PENDULUM_AMPLITUDE_M = 5.0
#: Typical vertical shear of the horizontal wind (s^-1, 4 m/s per km), for the layer-average error.
TYPICAL_SHEAR_S = 0.004
#: Floor of a telemetry wind's sd (m/s): the balloon-follows-the-wind assumption itself.
WIND_SIGMA_FLOOR_M_S = 0.3

#: Corridor margin of the wind realisations around the remaining nominal flight (m, s).
CORRIDOR_MARGIN_M = 100_000.0
CORRIDOR_MARGIN_S = 3 * 3600.0
#: Member tracks kept for the map.
TRACKS_FOR_MAP = 20


# ---------------------------------------------------------------------------------------- robust fits
def robust_line(
    t: np.ndarray, y: np.ndarray, sigma: float, iterations: int = 6, c: float = 1.345
) -> tuple[float, float, float, float]:
    """Straight line y = a + b (t - mean t) by iteratively reweighted least squares with Huber weights.

    Parameters
    ----------
    t, y : array_like, shape (n,), n >= 2
        Abscissae (s) and values (m).
    sigma : float
        Assumed 1-sigma noise of y (sets the Huber threshold c sigma).
    iterations : int
        IRLS iterations (a fixed number: the weights settle in 3-4 for a handful of outliers).
    c : float
        Huber tuning constant ([Huber1964]; 1.345 gives 95 % efficiency for normal noise).

    Returns
    -------
    (slope, intercept_at_mean_t, slope_sd, residual_rms)
        ``slope_sd`` = sigma_eff / sqrt(sum w (t - tbar)^2 / mean w), sigma_eff = max(sigma, the weighted
        residual rms with n - 2 degrees of freedom when n >= 4).

    Notes
    -----
    Weights w_i = min(1, c sigma / |r_i|); weighted least squares for (a, b) at each iteration.
    """
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    tm = t - t.mean()
    w = np.ones_like(t)
    a = b = 0.0
    for _ in range(max(int(iterations), 1)):
        sw = w.sum()
        tb = float((w * tm).sum() / sw)
        yb = float((w * y).sum() / sw)
        sxx = float((w * (tm - tb) ** 2).sum())
        b = float((w * (tm - tb) * (y - yb)).sum() / sxx) if sxx > 0 else 0.0
        a = yb - b * tb
        r = y - (a + b * tm)
        w = np.minimum(1.0, c * sigma / np.maximum(np.abs(r), 1e-12))
    r = y - (a + b * tm)
    n = t.size
    rms = float(np.sqrt(np.sum(w * r * r) / max(n - 2, 1))) if n >= 4 else 0.0
    sig = max(float(sigma), rms)
    sxx = float((w * (tm - (w * tm).sum() / w.sum()) ** 2).sum() / w.mean())
    sd = sig / math.sqrt(sxx) if sxx > 0 else math.inf
    return b, a, sd, rms


def _theil_sen(t: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Theil-Sen slope ([Sen1968]) and its 1-sigma from the 68 % confidence interval."""
    if t.size < 2:
        return math.nan, math.inf
    if t.size == 2:
        return float((y[1] - y[0]) / (t[1] - t[0])), math.inf
    res = theilslopes(y, t, alpha=0.6827)
    return float(res[0]), float(0.5 * (res[3] - res[2]))


# ---------------------------------------------------------------------------------------- flight state
@dataclass(frozen=True)
class FlightState:
    """What the telemetry says about the flight at its latest fix.

    Attributes
    ----------
    time_s, lat, lon, alt_m : the latest fix.
    phase : phase code (``balloonpath.flight.phases``); ``launched`` False before the balloon rises.
    vertical_speed_m_s, vertical_speed_sigma_m_s : robust fit over the last :data:`PHASE_WINDOW_S`.
    launch_time_s : first fix of the rise (the plan's launch time before launch).
    phase_start_s : when the current phase began (the float's start for the float duration).
    max_alt_m : highest fix. burst : True once burst (or cut-down) is detected; burst_time_s and
    burst_alt_m are then the time and altitude of the highest fix.
    ascent_factor, ascent_factor_sigma : measured ascent speed / the plan's model speed at the same
        altitudes (1 and the plan's sd until measured). ascent_rate_m_s : the measured ascent speed at the
        current altitude (NaN before launch).
    burst_alt_expected_m, burst_alt_sigma_m : the burst altitude expected (the observed one after burst).
    descent_factor, descent_factor_sigma : measured sea-level descent speed / the plan's (1 and the plan's
        sd until measured).
    n_fixes : fixes in the track.
    """

    time_s: float
    lat: float
    lon: float
    alt_m: float
    phase: int
    launched: bool
    vertical_speed_m_s: float
    vertical_speed_sigma_m_s: float
    launch_time_s: float
    phase_start_s: float
    max_alt_m: float
    burst: bool
    burst_time_s: float
    burst_alt_m: float
    ascent_factor: float
    ascent_factor_sigma: float
    ascent_rate_m_s: float
    burst_alt_expected_m: float
    burst_alt_sigma_m: float
    descent_factor: float
    descent_factor_sigma: float
    n_fixes: int

    @property
    def phase_name(self) -> str:
        """Phase as text ("ascent", "float", "descent", "landed"; "waiting" before launch)."""
        return PHASE_NAMES[self.phase] if self.launched else "waiting"

    def as_dict(self) -> dict[str, Any]:
        """Plain dict (finite floats rounded) for chase.json."""
        out: dict[str, Any] = {}
        for f in dataclasses.fields(self):
            v = getattr(self, f.name)
            if isinstance(v, float):
                v = round(v, 4) if math.isfinite(v) else None
            out[f.name] = v
        out["phase_name"] = self.phase_name
        return out


def _model_speed(params: VerticalParams, phase: int, alt_m: np.ndarray, atmosphere: Atmosphere) -> np.ndarray:
    """|vertical speed| of the plan's nominal member (row 0) at altitudes, in one phase."""
    from balloonpath.flight.vertical import vertical_speed_m_s

    z = np.asarray(alt_m, dtype=float)
    w = vertical_speed_m_s(np.full(z.shape, phase, dtype=np.int8), z, params, np.zeros(z.shape, int), atmosphere)
    return np.abs(np.asarray(w, dtype=float))


def _speed_factor(t: np.ndarray, z: np.ndarray, params: VerticalParams, phase: int,
                  atmosphere: Atmosphere) -> tuple[float, float]:
    """Observed / model vertical speed over fixes (t, z) of one phase, robustly.

    The model's "clock" tau(z) = integral dz / |w_model(z)| runs at f seconds per second when the real speed
    is f times the model's; f is the Theil-Sen slope of tau against t. Works for any altitude profile of
    the model speed (rates mode: constant; physics mode: rho^(-1/6); descent: rho^(-1/2)).
    """
    if t.size < 3:
        return math.nan, math.inf
    lo, hi = float(np.min(z)), float(np.max(z))
    if hi - lo < 50.0:
        return math.nan, math.inf
    grid = np.linspace(lo, hi, 200)
    inv = 1.0 / np.maximum(_model_speed(params, phase, grid, atmosphere), 1e-3)
    tau_grid = np.concatenate([[0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(grid))])
    tau = np.interp(z, grid, tau_grid)
    if phase == DESCENT:
        tau = -tau
    f, sd = _theil_sen(t, tau)
    return f, sd


def _burst_from_fill(plan: Plan, params: VerticalParams, factor: float, atmosphere: Atmosphere) -> float:
    """Physics mode: burst altitude if the measured ascent factor came from the fill (gas amount).

    The ascent speed scales as sqrt(L) / D with L = L0 + (n - n0) g_mol (g_mol: gross lift per mole) and
    D ~ n^(1/3) ([2], docs/physics.md), so f = sqrt(L(n) / L0) (n0 / n)^(1/3); solve for n (Brent), then
    the altitude where the envelope reaches its burst diameter
    (:func:`balloonpath.flight.lift.burst_altitude_for`).
    """
    from scipy.optimize import brentq

    from balloonpath.flight.gas import lift_per_mole_kg_mol
    from balloonpath.flight.lift import burst_altitude_for

    b = plan.balloon
    assert b is not None
    n0 = float(params.gas_amount_mol[0])
    l0 = float(params.free_lift_kg[0])
    g_mol = float(lift_per_mole_kg_mol(b.gas, b.gas_purity))

    def mismatch(n: float) -> float:
        lift = l0 + (n - n0) * g_mol
        return math.sqrt(max(lift, 1e-9) / l0) * (n0 / n) ** (1.0 / 3.0) - factor

    lo_n = max(n0 - 0.95 * l0 / g_mol, 1e-6)
    try:
        n = brentq(mismatch, lo_n, 4.0 * n0, xtol=1e-6 * n0)
    except ValueError:
        return math.nan
    try:
        return burst_altitude_for(n, b.burst_diameter_m, atmosphere, plan.launch.elevation_m)
    except ValueError:
        return math.nan


def estimate_flight_state(
    track: FlownTrack, plan: Plan, atmosphere: Atmosphere, params: VerticalParams | None = None
) -> FlightState:
    """Phase, vertical speed, burst, ascent and descent factors and expected burst altitude from a track.

    Parameters
    ----------
    track : FlownTrack
        Time-sorted fixes (``balloonpath.telemetry.read_track``).
    plan : Plan
        The flight plan (nominal rates, burst altitude, sigmas).
    atmosphere : Atmosphere
        Air for the model speeds.
    params : VerticalParams, optional
        The plan's nominal parameters (default ``vertical_params_from_plan``).

    Notes
    -----
    - Vertical speed: Theil-Sen slope ([Sen1968]) of altitude over the fixes of the last 120 s (at least
      the last 3 fixes); its sd from the 68 % interval.
    - Launch: the first fix after which the altitude stays 30 m above the first fix.
    - Burst (or cut-down): the altitude is 150 m below its maximum and falling faster than 2 m/s, or
      1000 m below it whatever the speed. Burst time and altitude are those of the highest fix.
    - Float: level (|w| < 0.8 m/s) after launch and before burst. Landed: level after burst.
    - Ascent / descent factors: the Theil-Sen slope of the model's clock tau(z) against time
      (:func:`_speed_factor`) over the phase's last 30 min (descent: from 60 s after burst).
    - Expected burst altitude while rising: rates mode, the plan's; physics mode, halfway between the plan's
      (the speed difference due to drag) and the one implied by the fill (:func:`_burst_from_fill`), with
      sd sqrt(plan sd^2 + (difference / 2)^2). It is at least the current altitude.
    """
    if len(track) == 0:
        raise input_error(track.source, "track", "has no fixes", "wait for the first position report")
    p0 = params if params is not None else vertical_params_from_plan(plan, atmosphere)
    ens = plan.ensemble
    t = np.asarray(track.time_s, dtype=float)
    z = np.asarray(track.alt_m, dtype=float)
    t_now, z_now = float(t[-1]), float(z[-1])
    recent = t >= t_now - PHASE_WINDOW_S
    if np.count_nonzero(recent) < 3:
        recent = np.zeros(t.size, bool)
        recent[-3:] = True
    w, w_sd = _theil_sen(t[recent], z[recent])
    if not math.isfinite(w):
        w, w_sd = 0.0, math.inf
    # launch: the first run of 3 consecutive fixes (or a run reaching the latest fix) above the ground
    # level (median of the first 3 fixes) + LAUNCH_RISE_M
    above = z > float(np.median(z[:3])) + LAUNCH_RISE_M
    i_launch, launched = t.size - 1, False
    run = 0
    for i in range(t.size):  # first qualifying run: a scan over the fixes, once per update
        run = run + 1 if above[i] else 0
        if run >= 3 or (run >= 1 and i == t.size - 1):
            i_launch, launched = i - run + 1, True
            break
    t_launch = float(t[max(i_launch - 1, 0)]) if launched else max(plan.launch_time_s, t_now)
    i_max = int(np.argmax(z))
    z_max, t_max = float(z[i_max]), float(t[i_max])
    drop = z_max - z_now
    burst = launched and ((drop > BURST_DROP_M and w < -BURST_SPEED_M_S) or drop > BURST_DROP_LARGE_M)
    level = abs(w) < LEVEL_SPEED_M_S
    if not launched:
        phase = ASCENT
    elif burst:
        phase = LANDED if level else DESCENT
    elif level:
        phase = FLOAT
    elif w < 0:
        phase = DESCENT  # falling but not yet far below the top: an early burst
        burst = True
    else:
        phase = ASCENT
    phase_start = t_launch
    if phase == FLOAT:
        moving = np.flatnonzero(np.abs(np.gradient(z, t)) >= LEVEL_SPEED_M_S) if t.size > 1 else np.array([0])
        phase_start = float(t[moving[-1]]) if moving.size else t_launch
    elif phase in (DESCENT, LANDED):
        phase_start = t_max

    # ascent factor
    fa, fa_sd = 1.0, ens.ascent_sigma_fraction
    asc = (t >= t_launch) & (t <= (t_max if burst else t_now)) & (t >= (t_max if burst else t_now) - RATE_WINDOW_S)
    if launched and np.count_nonzero(asc) >= 3:
        f, sd = _speed_factor(t[asc], z[asc], p0, ASCENT, atmosphere)
        if math.isfinite(f) and f > 0.2:
            fa, fa_sd = f, max(sd, ASCENT_FACTOR_SIGMA_FLOOR)
    rate_now = fa * float(_model_speed(p0, ASCENT, np.array([z_now]), atmosphere)[0]) if launched else math.nan

    # descent factor
    fd, fd_sd = 1.0, ens.descent_sigma_fraction
    if burst:
        des = (t >= t_max + AFTER_BURST_SKIP_S) & (t >= t_now - RATE_WINDOW_S)
        if np.count_nonzero(des) >= 3:
            f, sd = _speed_factor(t[des], z[des], p0, DESCENT, atmosphere)
            if math.isfinite(f) and f > 0.2:
                fd, fd_sd = f, max(sd, DESCENT_FACTOR_SIGMA_FLOOR)

    # expected burst altitude
    plan_burst = float(p0.burst_altitude_m[0])
    b_sd = ens.burst_sigma_fraction * plan_burst
    if burst:
        b_exp, b_sd = z_max, 0.0
    else:
        b_exp = plan_burst
        if p0.mode == "physics" and launched and fa != 1.0 and plan.balloon is not None:
            fill = _burst_from_fill(plan, p0, fa, atmosphere)
            if math.isfinite(fill):
                b_exp = 0.5 * (plan_burst + fill)
                b_sd = math.hypot(b_sd, 0.5 * (fill - plan_burst))
        b_exp = max(b_exp, z_now)
    return FlightState(
        time_s=t_now, lat=float(track.lat[-1]), lon=float(track.lon[-1]), alt_m=z_now, phase=int(phase),
        launched=launched, vertical_speed_m_s=float(w), vertical_speed_sigma_m_s=float(w_sd),
        launch_time_s=t_launch, phase_start_s=float(phase_start), max_alt_m=z_max, burst=bool(burst),
        burst_time_s=t_max if burst else math.nan, burst_alt_m=z_max if burst else math.nan,
        ascent_factor=float(fa), ascent_factor_sigma=float(fa_sd), ascent_rate_m_s=float(rate_now),
        burst_alt_expected_m=float(b_exp), burst_alt_sigma_m=float(b_sd),
        descent_factor=float(fd), descent_factor_sigma=float(fd_sd), n_fixes=len(track),
    )


def prelaunch_state(plan: Plan, atmosphere: Atmosphere) -> FlightState:
    """The state before any telemetry: at the launch site at the plan's launch time, nothing measured."""
    p0 = vertical_params_from_plan(plan, atmosphere)
    ens = plan.ensemble
    la = plan.launch
    t0 = plan.launch_time_s
    burst = float(p0.burst_altitude_m[0])
    return FlightState(
        time_s=t0, lat=la.latitude, lon=la.longitude, alt_m=la.elevation_m, phase=ASCENT, launched=False,
        vertical_speed_m_s=0.0, vertical_speed_sigma_m_s=math.inf, launch_time_s=t0, phase_start_s=t0,
        max_alt_m=la.elevation_m, burst=False, burst_time_s=math.nan, burst_alt_m=math.nan,
        ascent_factor=1.0, ascent_factor_sigma=ens.ascent_sigma_fraction, ascent_rate_m_s=math.nan,
        burst_alt_expected_m=burst, burst_alt_sigma_m=ens.burst_sigma_fraction * burst,
        descent_factor=1.0, descent_factor_sigma=ens.descent_sigma_fraction, n_fixes=0,
    )


# ---------------------------------------------------------------------------------------- wind from fixes
def wind_observations_from_track(
    track: FlownTrack,
    position_sigma_m: float = 5.0,
    window_s: float = WIND_WINDOW_S,
    max_dz_m: float = WIND_MAX_DZ_M,
    pendulum_amplitude_m: float = PENDULUM_AMPLITUDE_M,
    shear_s: float = TYPICAL_SHEAR_S,
    start_s: float | None = None,
    end_s: float | None = None,
) -> WindObservations:
    """Wind observations from a balloon's drift: one per non-overlapping window of fixes.

    Parameters
    ----------
    track : FlownTrack
        Time-sorted fixes.
    position_sigma_m : float
        1-sigma position noise of a fix per horizontal axis (``ReadReport.position_sigma_m``).
    window_s, max_dz_m : float
        A window holds consecutive fixes spanning at most ``window_s`` seconds and ``max_dz_m`` metres
        of altitude (at least two fixes).
    pendulum_amplitude_m : float
        Swing amplitude of the payload (see :data:`PENDULUM_AMPLITUDE_M`).
    shear_s : float
        Typical vertical wind shear for the layer-average term, s^-1.
    start_s, end_s : float, optional
        Use only fixes in this time range (the airborne part: from launch, to landing).

    Returns
    -------
    WindObservations
        ``source`` "telemetry"; position, altitude and time are the window's means.

    Notes
    -----
    Assumption: the balloon's horizontal velocity equals the wind (no lag: a sounding balloon's horizontal
    response time is seconds, far below the windows). In each window the east and north positions in a
    local plane are fitted by straight lines in time with Huber weights (:func:`robust_line`); the slopes
    are u and v. Error model, per component:

        sigma^2 = s_eff^2 / S_tt + (shear dz)^2 / 12 + floor^2,   s_eff^2 = s_pos^2 + A^2 / 2,

    S_tt = sum (t - tbar)^2 over the window, A the pendulum amplitude (its swing aliased into noise), dz the
    window's altitude span (the fit averages the wind over a layer: uniform-distribution variance) and floor
    = 0.3 m/s. When the fit residuals are larger than s_eff (4 or more fixes), they replace it.
    Windows do not overlap, so their errors are independent, as the GP assumes.
    """
    t = np.asarray(track.time_s, dtype=float)
    sel = np.ones(t.size, dtype=bool)
    if start_s is not None:
        sel &= t >= start_s
    if end_s is not None:
        sel &= t <= end_s
    idx = np.flatnonzero(sel)
    out = {k: [] for k in ("time_s", "lat", "lon", "alt_m", "u", "v", "sigma")}
    if idx.size < 2:
        return WindObservations.empty()
    lat = np.asarray(track.lat, dtype=float)[idx]
    lon = np.asarray(track.lon, dtype=float)[idx]
    z = np.asarray(track.alt_m, dtype=float)[idx]
    t = t[idx]
    s_eff = math.sqrt(position_sigma_m**2 + 0.5 * pendulum_amplitude_m**2)
    i = 0
    n = t.size
    while i < n - 1:
        j = i + 1
        while j + 1 < n and t[j + 1] - t[i] <= window_s and abs(z[j + 1] - z[i]) <= max_dz_m:
            j += 1
        sl = slice(i, j + 1)
        i = j + 1
        tt = t[sl]
        if tt[-1] - tt[0] <= 0.0 or tt[-1] - tt[0] > 3.0 * window_s:
            continue  # a gap: the drift over it is not one wind
        # local east/north metres about the window's first fix (windows span < 20 km: the tangent-plane
        # error is below 1e-5 relative)
        lat0, lon0 = float(lat[sl][0]), float(lon[sl][0])
        r_m, r_n = radii_of_curvature(lat0)
        x = np.radians(normalize_longitude(lon[sl] - lon0)) * float(r_n) * math.cos(math.radians(lat0))
        y = np.radians(lat[sl] - lat0) * float(r_m)
        u, _, su, _ = robust_line(tt, x, s_eff)
        v, _, sv, _ = robust_line(tt, y, s_eff)
        dz = float(np.ptp(z[sl]))
        rep2 = (shear_s * dz) ** 2 / 12.0
        sig = math.sqrt(max(su, sv) ** 2 + rep2 + WIND_SIGMA_FLOOR_M_S**2)
        out["time_s"].append(float(np.mean(tt)))
        out["lat"].append(float(np.mean(lat[sl])))
        out["lon"].append(float(normalize_longitude(lon0 + np.mean(normalize_longitude(lon[sl] - lon0)))))
        out["alt_m"].append(float(np.mean(z[sl])))
        out["u"].append(u)
        out["v"].append(v)
        out["sigma"].append(sig)
    m = len(out["u"])
    if m == 0:
        return WindObservations.empty()
    return WindObservations(**{k: np.asarray(vals, dtype=float) for k, vals in out.items()},
                            source=np.full(m, "telemetry", dtype=object))


# ---------------------------------------------------------------------------------------- conditioning
def preflight_observations(field: Any) -> WindObservations:
    """The (super)observations a GP field was conditioned on, back in geographic form.

    Rebuilt from the field's posterior training set (local coordinates and background residuals), so that
    a field loaded from a file (without its raw observations) can be updated as well; empty for a field
    without observations.
    """
    post = getattr(field, "posterior", None)
    if post is None or getattr(post, "sparse", False) and not hasattr(post, "x"):
        return WindObservations.empty()
    x = np.asarray(post.x, dtype=float)
    if x.shape[0] == 0:
        return WindObservations.empty()
    lat, lon = field.projection.to_geographic(x[:, 0] * 1e3, x[:, 1] * 1e3)
    alt = x[:, 2] * 1e3
    ts = field.corridor.time_ref_s + x[:, 3] * 3600.0
    ub, vb = field.background.wind(lat, lon, alt, ts)
    y = np.asarray(post.y, dtype=float)
    return WindObservations(
        time_s=np.asarray(ts, float), lat=np.asarray(lat, float), lon=np.asarray(lon, float), alt_m=alt,
        u=np.ravel(ub) + y[:, 0], v=np.ravel(vb) + y[:, 1], sigma=np.sqrt(np.asarray(post.noise_var, float)),
        source=np.full(x.shape[0], "preflight", dtype=object),
    )


def condition_field(field: Any, preflight: WindObservations, telemetry: WindObservations) -> Any:
    """The wind field conditioned on pre-flight plus telemetry observations at FIXED hyperparameters.

    Parameters
    ----------
    field : GPWindField
        The pre-flight field (fitted or background-error only); its background, hyperparameters and local
        frame are kept.
    preflight : WindObservations
        What ``field`` was conditioned on (:func:`preflight_observations`).
    telemetry : WindObservations
        Winds from the flight (:func:`wind_observations_from_track`).

    Returns
    -------
    GPWindField
        ``gp.fit_wind_field(preflight + telemetry, background, hyperparameters=field's, optimize=False)``:
        one exact GP regression ([RW2006] Alg. 2.1), cost O(n^3) with n a few hundred (docs/chase.md gives
        the measured time). Fields without a GP (no ``hyperparameters``) are returned unchanged.
    """
    from balloonpath.winds import gp

    if not hasattr(field, "hyperparameters") or len(telemetry) == 0:
        return field
    obs = preflight.concat(telemetry) if len(preflight) else telemetry
    c = field.corridor
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # duplicate merges of the rebuilt set are expected and harmless
        new = gp.fit_wind_field(
            obs, field.background, center=(c.lat0, c.lon0, c.time_ref_s),
            hyperparameters=field.hyperparameters, optimize=False,
            lead_time_h=field.info.get("lead_time_h"),
            background_spec=getattr(field, "background_spec", None),
        )
    new.info = dict(new.info, telemetry_observations=len(telemetry), preflight_observations=len(preflight))
    factor, nu = float(getattr(field, "spread_factor", 1.0)), getattr(field, "spread_tail_dof", None)
    return new.with_spread_factor(factor, nu) if (factor != 1.0 or nu is not None) else new


# ---------------------------------------------------------------------------------------- re-prediction
def _truncated_factor(z: np.ndarray, mean: float, sd: float, lower: float) -> np.ndarray:
    """mean + sd * z' with z' the standard normal z mapped onto the part above ``lower`` (inverse CDF)."""
    if sd <= 0.0:
        return np.full(z.shape, max(mean, lower))
    a = (lower - mean) / sd
    pa = float(ndtr(a))
    if pa <= 0.0:
        return mean + sd * z
    u = pa + ndtr(z) * (1.0 - pa)
    return mean + sd * ndtri(np.clip(u, 1e-12, 1.0 - 1e-12))


def member_parameters(plan: Plan, p0: VerticalParams, est: FlightState, n: int, seed: int) -> VerticalParams:
    """Parameters of members 0..n-1 around the estimates (member 0: the estimates themselves).

    Ascent factor ~ N(f_a, sd_a), burst altitude ~ N(expected, sd_b) truncated above the current altitude
    (the balloon has not burst yet), descent factor ~ N(f_d, sd_d); standard normals from
    :func:`balloonpath.ensemble.draw_member_factors` (each member's own stream, clipped at 3 sd).
    """
    if n > 1:
        f = draw_member_factors(np.arange(1, n), seed, 1.0, 1.0, 1.0, 0.0)
        za, zb, zd = (np.concatenate([[0.0], g - 1.0]) for g in (f.ascent, f.burst, f.descent))
    else:
        za = zb = zd = np.zeros(1)
    fa = np.maximum(est.ascent_factor * (1.0 + est.ascent_factor_sigma * za), 0.2)
    fd = np.maximum(est.descent_factor * (1.0 + est.descent_factor_sigma * zd), 0.2)
    plan_burst = float(p0.burst_altitude_m[0])
    burst = _truncated_factor(zb, est.burst_alt_expected_m, est.burst_alt_sigma_m, est.alt_m + 1.0)
    burst[0] = max(est.burst_alt_expected_m, est.alt_m + 1.0)
    return perturbed(p0.repeat(n), fa, burst / plan_burst, fd)


def _start_state(est: FlightState, members: np.ndarray) -> State:
    k = members.size
    return State(
        lat=np.full(k, est.lat), lon=np.full(k, est.lon), alt_m=np.full(k, est.alt_m),
        phase=np.full(k, est.phase, dtype=np.int8),
        time_s=np.full(k, max(est.time_s, est.launch_time_s) if not est.launched else est.time_s),
        launch_time_s=np.full(k, est.launch_time_s), phase_start_s=np.full(k, est.phase_start_s),
        members=members.astype(int),
    )


def _corridor(field: Any, est: FlightState, nominal: Trajectories) -> Any:
    if not hasattr(field, "with_corridor"):
        return field
    lats = np.concatenate([[est.lat], nominal.tracks["lat"][0]])
    lons = np.concatenate([[est.lon], nominal.tracks["lon"][0]])
    ok = np.isfinite(lats) & np.isfinite(lons)
    lats, lons = lats[ok], lons[ok]
    dlat = math.degrees(CORRIDOR_MARGIN_M / 6.371e6)
    dlon = dlat / max(math.cos(math.radians(float(np.mean(lats)))), 0.05)
    top = max(float(np.nanmax(nominal.max_alt_m)), est.alt_m)
    t_end = float(np.nanmax(nominal.landing_time_s))
    return field.with_corridor(
        float(lats.min() - dlat), float(lats.max() + dlat), float(lons.min() - dlon), float(lons.max() + dlon),
        alt_max_m=top * 1.15 + 1000.0, time_min_s=est.time_s - 1800.0, time_max_s=t_end + CORRIDOR_MARGIN_S,
    )


def repredict(
    plan: Plan,
    field: Any,
    atmosphere: Atmosphere,
    est: FlightState,
    members: int,
    seed: int,
    dt_s: float | None = None,
    wind_info: dict[str, Any] | None = None,
) -> ForecastResult:
    """Fly the ensemble from the latest fix to the ground.

    Parameters
    ----------
    plan : Plan
    field : UncertainWindField
        The (updated) wind field; realisations are drawn from it around the remaining nominal flight.
    atmosphere : Atmosphere
    est : FlightState
        Start point, phase and estimated parameters.
    members, seed : int
        Ensemble size (member 0: mean wind, estimated parameters) and seed.
    dt_s : float, optional
        Integration step (default the plan's).
    wind_info : dict, optional
        Stored in the result.

    Returns
    -------
    ForecastResult
        ``launch_*`` is the START of the re-prediction (the latest fix), ``nominal`` the remaining track.
        Members that start in descent have NaN burst points.
    """
    p0 = vertical_params_from_plan(plan, atmosphere)
    dt = float(dt_s or plan.ensemble.time_step_s)
    ground = terrain_from_plan(plan)
    n = max(int(members), 1)
    params = member_parameters(plan, p0, est, n, seed)
    if est.phase == FLOAT and not np.isfinite(params.float_duration_s[0]):
        warnings.warn(
            "chase: the balloon floats but the plan has no [float] table; the prediction assumes the "
            "descent starts now (earliest landing)", PhysicsWarning, stacklevel=2,
        )
        est = dataclasses.replace(est, phase=DESCENT, phase_start_s=est.time_s)
    if est.phase == LANDED:
        pts = Points(*(np.full(n, v) for v in (est.lat, est.lon, est.alt_m, est.time_s)))
        nan = Points(*(np.full(n, np.nan) for _ in range(4)))
        track = Track(np.array([est.time_s]), np.array([est.lat]), np.array([est.lon]), np.array([est.alt_m]),
                      np.array([LANDED], np.int8))
        empty = {k: np.zeros((0, 1)) for k in ("time_s", "lat", "lon", "alt_m")}
        return _result(plan, est, track, nan, pts, params, empty, 0.0, seed, wind_info)
    nominal = integrate(_start_state(est, np.array([0])), params, MeanMemberWinds(field, n), ground, atmosphere,
                        dt_s=dt)
    if n > 1:
        cfield = _corridor(field, est, nominal)
        if hasattr(cfield, "sample") and plan.ensemble.wind_uncertainty:
            rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(2**32 - 1,)))
            mw: MemberWinds = NominalFirst(cfield, cfield.sample(n, rng))
        else:
            mw = MeanMemberWinds(field, n)
        rest = np.arange(1, n)
        others = integrate(_start_state(est, rest), params, mw, ground, atmosphere, dt_s=dt,
                           record=np.arange(min(TRACKS_FOR_MAP, n - 1)))
    else:
        others = None
    tr = nominal.tracks
    keep = np.isfinite(tr["time_s"][0])
    track = Track(tr["time_s"][0][keep], tr["lat"][0][keep], tr["lon"][0][keep], tr["alt_m"][0][keep],
                  tr["phase"][0][keep].astype(np.int8))

    def cat(name: str) -> np.ndarray:
        a = getattr(nominal, name)
        return a if others is None else np.concatenate([a, getattr(others, name)])

    burst = Points(*(cat(f"burst_{k}") for k in ("lat", "lon", "alt_m", "time_s")))
    landing = Points(*(cat(f"landing_{k}") for k in ("lat", "lon", "alt_m", "time_s")))
    mt = ({k: others.tracks[k] for k in ("time_s", "lat", "lon", "alt_m")} if others is not None
          else {k: tr[k][:0] for k in ("time_s", "lat", "lon", "alt_m")})
    return _result(plan, est, track, burst, landing, params, mt, float(nominal.landing_speed_m_s[0]), seed,
                   wind_info, cat("max_alt_m"))


def _result(plan: Plan, est: FlightState, track: Track, burst: Points, landing: Points, params: VerticalParams,
            member_tracks: dict[str, np.ndarray], speed: float, seed: int, wind_info: dict[str, Any] | None,
            max_alt: np.ndarray | None = None) -> ForecastResult:
    n = landing.lat.size
    return ForecastResult(
        launch_lat=est.lat, launch_lon=est.lon, launch_alt_m=est.alt_m,
        launch_time_s=float(track.time_s[0]) if len(track) else est.time_s,
        nominal=track, burst=burst, landing=landing,
        member_params={
            "ascent_rate_m_s": np.asarray(params.ascent_rate_m_s, float),
            "burst_altitude_m": np.asarray(params.burst_altitude_m, float),
            "descent_sea_level_m_s": np.asarray(params.descent_sea_level_m_s, float),
            "launch_delay_s": np.zeros(n),
            "max_altitude_m": max_alt if max_alt is not None else np.full(n, est.max_alt_m),
        },
        member_tracks=member_tracks, landing_speed_m_s=speed,
        payload_mass_kg=plan.payload.mass_kg if plan.payload is not None else None,
        wind_info=dict(wind_info or {}), seed=int(seed), plan_path=str(plan.path), mode=plan.mode,
    )


# ---------------------------------------------------------------------------------------- the session
@dataclass(frozen=True)
class ChaseUpdate:
    """One re-prediction and what the crew needs from it.

    Attributes
    ----------
    state : FlightState
    result : ForecastResult (start = latest fix). zones : balloonpath.zones.Zones.
    landing_lat, landing_lon : predicted landing (mean of the members = centre of the zones).
    landing_time_s : nominal landing time; time_left_s : landing time - latest fix time.
    zone_95_km : semi-major axis of the 95 % ellipse, km (the zone size).
    crew_lat, crew_lon : crew position (None if unknown); crew_distance_m, crew_bearing_deg from the crew
        to the predicted landing.
    wind_observations : telemetry wind observations used. update_s : wall time of the whole update, s;
    fit_s : of the wind-field conditioning alone, s.
    track : FlownTrack so far. read_report : the reader's report (or None). warnings : recorded warnings.
    """

    state: FlightState
    result: ForecastResult
    zones: Any
    landing_lat: float
    landing_lon: float
    landing_time_s: float
    time_left_s: float
    zone_95_km: float
    crew_lat: float | None
    crew_lon: float | None
    crew_distance_m: float | None
    crew_bearing_deg: float | None
    wind_observations: int
    update_s: float
    fit_s: float
    track: FlownTrack | None = None
    read_report: Any = None
    warnings: tuple[str, ...] = field(default_factory=tuple)

    def summary(self) -> dict[str, Any]:
        """The content of chase.json (no wall-clock timings: same inputs and seed, same bytes)."""
        from balloonpath.timeutil import iso_from_posix

        def r(x: float | None, nd: int) -> float | None:
            return None if x is None or not math.isfinite(x) else round(float(x), nd)

        z = self.zones
        return {
            "time": iso_from_posix(self.state.time_s),
            "state": self.state.as_dict(),
            "landing": {"latitude": r(self.landing_lat, 6), "longitude": r(self.landing_lon, 6),
                        "time": iso_from_posix(self.landing_time_s) if math.isfinite(self.landing_time_s) else None,
                        "time_left_s": r(self.time_left_s, 0),
                        "time_p05": iso_from_posix(z.landing_time_p05) if math.isfinite(z.landing_time_p05) else None,
                        "time_p95": iso_from_posix(z.landing_time_p95) if math.isfinite(z.landing_time_p95) else None},
            "zone_95_semi_major_km": r(self.zone_95_km, 3),
            "zones": z.to_summary()["ensemble"],
            "crew": None if self.crew_lat is None else {
                "latitude": r(self.crew_lat, 6), "longitude": r(self.crew_lon, 6),
                "distance_m": r(self.crew_distance_m, 1), "bearing_deg": r(self.crew_bearing_deg, 1)},
            "wind_observations": self.wind_observations,
            "telemetry": self.read_report.as_dict() if self.read_report is not None else None,
            "warnings": list(self.warnings),
        }


class ChaseSession:
    """The in-flight loop's state: the plan, the pre-flight winds (loaded once) and the settings.

    Parameters
    ----------
    plan : Plan
    winds : balloonpath.forecast.LoadedWinds, optional
        Pre-flight winds (default: ``load_winds(plan)``).
    members, seed : int, optional
        Ensemble size and seed (default: the plan's ``[ensemble]``).
    dt_s : float, optional
        Integration step (default the plan's).
    crew : (lat, lon), optional
        A fixed crew position (the plan's ``[recovery]`` base when not given).
    wind_window_s, pendulum_amplitude_m : float
        Wind-from-fixes settings (:func:`wind_observations_from_track`).
    """

    def __init__(self, plan: Plan, winds: Any = None, members: int | None = None, seed: int | None = None,
                 dt_s: float | None = None, crew: tuple[float, float] | None = None,
                 wind_window_s: float = WIND_WINDOW_S, pendulum_amplitude_m: float = PENDULUM_AMPLITUDE_M) -> None:
        if winds is None:
            from balloonpath.forecast import load_winds

            winds = load_winds(plan)
        self.plan = plan
        self.winds = winds
        self.members = int(members if members is not None else plan.ensemble.members)
        self.seed = int(seed if seed is not None else plan.ensemble.seed)
        self.dt_s = dt_s
        rec = plan.recovery
        if crew is None and rec.base_latitude is not None and rec.base_longitude is not None:
            crew = (rec.base_latitude, rec.base_longitude)
        self.crew = crew
        self.wind_window_s = float(wind_window_s)
        self.pendulum_amplitude_m = float(pendulum_amplitude_m)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            self.params0 = vertical_params_from_plan(plan, winds.atmosphere)
        self.preflight = preflight_observations(winds.field)

    def prelaunch(self) -> ChaseUpdate:
        """The prediction before any telemetry (background and pre-flight observations only)."""
        est = prelaunch_state(self.plan, self.winds.atmosphere)
        return self._predict(est, self.winds.field, 0, 0.0, None, None, _time.perf_counter())

    def update(self, track: FlownTrack, report: Any = None, crew: tuple[float, float] | None = None) -> ChaseUpdate:
        """Re-predict from a track (all fixes so far).

        Parameters
        ----------
        track : FlownTrack
        report : telemetry.ReadReport, optional
            Gives the position noise of the fixes and is passed on to the outputs.
        crew : (lat, lon), optional
            The crew's latest position (overrides the session's).
        """
        start = _time.perf_counter()
        log = WarningLog()
        with recording_warnings(log):
            est = estimate_flight_state(track, self.plan, self.winds.atmosphere, self.params0)
            sigma = float(getattr(report, "position_sigma_m", 5.0))
            end = est.time_s
            if est.phase == LANDED:  # winds only from the airborne fixes: up to the last one above the ground
                airborne = np.flatnonzero(np.asarray(track.alt_m) > est.alt_m + LAUNCH_RISE_M)
                end = float(track.time_s[airborne[-1]]) if airborne.size else est.time_s
            obs = wind_observations_from_track(
                track, sigma, self.wind_window_s, pendulum_amplitude_m=self.pendulum_amplitude_m,
                start_s=est.launch_time_s if est.launched else est.time_s + 1.0, end_s=end,
            )
            t_fit = _time.perf_counter()
            field_now = condition_field(self.winds.field, self.preflight, obs)
            fit_s = _time.perf_counter() - t_fit
        out = self._predict(est, field_now, len(obs), fit_s, track, report, start, crew)
        return dataclasses.replace(out, warnings=tuple(log.messages) + out.warnings)

    def _predict(self, est: FlightState, field_now: Any, n_obs: int, fit_s: float, track: FlownTrack | None,
                 report: Any, start: float, crew: tuple[float, float] | None = None) -> ChaseUpdate:
        from balloonpath import zones as zones_mod

        log = WarningLog()
        with recording_warnings(log):
            info = dict(self.winds.info, telemetry_observations=n_obs)
            result = repredict(self.plan, field_now, self.winds.atmosphere, est, self.members, self.seed,
                               self.dt_s, info)
            z = zones_mod.compute_zones(result, avoid_path=self.plan.zones.avoid, water=self.plan.zones.water)
        crew = crew if crew is not None else self.crew
        lat, lon = z.center_lat, z.center_lon
        t_land = float(result.landing.time_s[0])
        zone = max((e.semi_major_m for e in z.ellipses if abs(e.probability - 0.95) < 1e-9), default=math.nan)
        dist = bearing = None
        if crew is not None:
            d, b = inverse(crew[0], crew[1], lat, lon)
            dist, bearing = float(d), float(b)
        return ChaseUpdate(
            state=est, result=result, zones=z, landing_lat=lat, landing_lon=lon, landing_time_s=t_land,
            time_left_s=t_land - est.time_s, zone_95_km=zone / 1e3,
            crew_lat=None if crew is None else float(crew[0]), crew_lon=None if crew is None else float(crew[1]),
            crew_distance_m=dist, crew_bearing_deg=bearing, wind_observations=n_obs,
            update_s=_time.perf_counter() - start, fit_s=fit_s, track=track, read_report=report,
            warnings=tuple(log.messages),
        )


def crew_position_at(track: FlownTrack | None, time_s: float) -> tuple[float, float] | None:
    """The crew's last reported position at or before ``time_s`` (their first fix if none is earlier)."""
    if track is None or len(track) == 0:
        return None
    i = int(np.searchsorted(np.asarray(track.time_s), time_s, side="right")) - 1
    i = min(max(i, 0), len(track) - 1)
    return float(track.lat[i]), float(track.lon[i])


def truncate_track(track: FlownTrack, until_s: float) -> FlownTrack:
    """The fixes of a track up to and including ``until_s`` (for replays and tests)."""
    k = int(np.searchsorted(np.asarray(track.time_s), until_s, side="right"))
    return FlownTrack(track.time_s[:k], track.lat[:k], track.lon[:k], track.alt_m[:k], track.source)


def rewrite_outputs(update: ChaseUpdate, out_dir: str | Path) -> list[Path]:
    """Write chase.geojson, chase.kml and chase.json atomically (a map viewer never sees half a file)."""
    import json

    from balloonpath.export.geojson import write_geojson
    from balloonpath.fileio import atomic_write_text

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    return [
        write_geojson(chase_geojson(update), out / "chase.geojson"),
        atomic_write_text(out / "chase.kml", chase_kml(update)),
        atomic_write_text(out / "chase.json", json.dumps(update.summary(), indent=2, allow_nan=False) + "\n"),
    ]


# ---------------------------------------------------------------------------------------- map files
def _c(lon: float, lat: float, alt: float | None = None) -> list[float]:
    out = [round(float(lon), 6) + 0.0, round(float(lat), 6) + 0.0]
    if alt is not None and math.isfinite(alt):
        out.append(round(float(alt), 1) + 0.0)
    return out


def _line(lons: np.ndarray, lats: np.ndarray, alts: np.ndarray | None) -> dict[str, Any] | None:
    from balloonpath.export.geojson import split_antimeridian

    parts = [p for p in split_antimeridian(lons, lats, alts) if len(p) >= 2]
    if not parts:
        return None
    if len(parts) == 1:
        return {"type": "LineString", "coordinates": parts[0]}
    return {"type": "MultiLineString", "coordinates": parts}


def _num(x: float | None, nd: int) -> float | None:
    return None if x is None or not math.isfinite(float(x)) else round(float(x), nd) + 0.0


def chase_geojson(update: ChaseUpdate) -> dict[str, Any]:
    """The chase map as an RFC 7946 FeatureCollection.

    Features (``kind``): ``flown_track``, ``balloon`` (latest fix), ``predicted_track`` (remaining nominal
    track), ``predicted_landing`` (mean of the members), ``landing_ellipse`` (50/90/95 %),
    ``landing_region`` (90 %), ``crew`` and ``crew_to_landing`` when the crew position is known.
    """
    from balloonpath.export.geojson import polygon_geometry
    from balloonpath.timeutil import iso_from_posix

    s, z, res = update.state, update.zones, update.result
    feats: list[dict[str, Any]] = []

    def add(geom: dict[str, Any] | None, props: dict[str, Any]) -> None:
        if geom is not None:
            feats.append({"type": "Feature", "geometry": geom, "properties": props})

    if update.track is not None and len(update.track) >= 2:
        tr = update.track
        add(_line(tr.lon, tr.lat, tr.alt_m), {"kind": "flown_track", "name": "Flown track", "fixes": len(tr)})
    add({"type": "Point", "coordinates": _c(s.lon, s.lat, s.alt_m)}, {
        "kind": "balloon", "name": f"Balloon ({s.phase_name})", "time": iso_from_posix(s.time_s),
        "phase": s.phase_name, "altitude_m": _num(s.alt_m, 1),
        "vertical_speed_m_s": _num(s.vertical_speed_m_s, 2)})
    nt = res.nominal
    add(_line(nt.lon, nt.lat, nt.alt_m), {"kind": "predicted_track", "name": "Predicted track (nominal)"})
    add({"type": "Point", "coordinates": _c(update.landing_lon, update.landing_lat)}, {
        "kind": "predicted_landing", "name": "Predicted landing",
        "time": iso_from_posix(update.landing_time_s) if math.isfinite(update.landing_time_s) else None,
        "minutes_left": _num(update.time_left_s / 60.0, 1),
        "landing_time_p05": iso_from_posix(z.landing_time_p05) if math.isfinite(z.landing_time_p05) else None,
        "landing_time_p95": iso_from_posix(z.landing_time_p95) if math.isfinite(z.landing_time_p95) else None})
    for e, ring in zip(z.ellipses, z.ellipse_rings, strict=True):
        if e.area_m2 > 0:
            add(polygon_geometry([ring]), {
                "kind": "landing_ellipse", "name": f"Landing {e.probability:.0%} ellipse",
                "probability": _num(e.probability, 4), "semi_major_m": _num(e.semi_major_m, 1),
                "semi_minor_m": _num(e.semi_minor_m, 1), "major_axis_azimuth_deg": _num(e.major_axis_azimuth_deg, 1)})
    add(polygon_geometry(z.region_90_rings), {
        "kind": "landing_region", "name": "Landing 90% region", "probability": 0.9,
        "area_km2": _num(z.region_90_area_m2 / 1e6, 3)})
    if update.crew_lat is not None and update.crew_lon is not None:
        add({"type": "Point", "coordinates": _c(update.crew_lon, update.crew_lat)}, {
            "kind": "crew", "name": "Crew", "distance_km": _num((update.crew_distance_m or 0.0) / 1e3, 2),
            "bearing_deg": _num(update.crew_bearing_deg, 1)})
        add(_line(np.array([update.crew_lon, update.landing_lon]), np.array([update.crew_lat, update.landing_lat]),
                  None), {"kind": "crew_to_landing", "name": "Crew to predicted landing"})
    return {"type": "FeatureCollection", "features": feats}


def chase_kml(update: ChaseUpdate) -> str:
    """The chase map as KML 2.2 text: folders Balloon, Prediction, Landing zones, Crew (deterministic)."""
    import simplekml

    from balloonpath.export.geojson import polygon_geometry
    from balloonpath.export.kml import DISCLAIMER, _renumber_ids, kml_color
    from balloonpath.plots import PALETTE
    from balloonpath.timeutil import iso_from_posix

    s, z, res = update.state, update.zones, update.result
    kml = simplekml.Kml(name="balloonpath chase")
    kml.document.description = (
        f"Re-prediction from the fix of {iso_from_posix(s.time_s)} ({s.phase_name}, {s.alt_m:.0f} m). "
        + DISCLAIMER)

    def style(color: str, width: float, fill: float | None = None, icon: float | None = None) -> simplekml.Style:
        st = simplekml.Style()
        st.linestyle.color = kml_color(color)
        st.linestyle.width = width
        if fill is None:
            st.polystyle.fill = 0
        else:
            st.polystyle.color = kml_color(color, fill)
        if icon is not None:
            st.iconstyle.color = kml_color(color)
            st.iconstyle.scale = icon
        return st

    def coords(lons: np.ndarray, lats: np.ndarray, alts: np.ndarray | None = None) -> list[tuple[float, ...]]:
        ok = np.isfinite(lons) & np.isfinite(lats)
        if alts is None:
            return [(round(float(a), 6), round(float(b), 6)) for a, b in zip(lons[ok], lats[ok], strict=True)]
        return [(round(float(a), 6), round(float(b), 6), round(float(c), 1))
                for a, b, c in zip(lons[ok], lats[ok], alts[ok], strict=True)]

    fb = kml.newfolder(name="Balloon")
    if update.track is not None and len(update.track) >= 2:
        ln = fb.newlinestring(name="Flown track")
        ln.coords = coords(update.track.lon, update.track.lat, update.track.alt_m)
        ln.altitudemode = simplekml.AltitudeMode.absolute
        ln.style = style(PALETTE["burst"], 3)
    pt = fb.newpoint(name=f"Balloon {s.alt_m:.0f} m", coords=[(round(s.lon, 6), round(s.lat, 6), round(s.alt_m, 1))])
    pt.altitudemode = simplekml.AltitudeMode.absolute
    pt.description = (f"{iso_from_posix(s.time_s)}: {s.phase_name}, {s.alt_m:.0f} m, vertical speed "
                      f"{s.vertical_speed_m_s:+.1f} m/s")
    pt.style = style(PALETTE["burst"], 1, icon=1.2)
    fp = kml.newfolder(name="Prediction")
    nt = res.nominal
    if len(nt) >= 2:
        ln = fp.newlinestring(name="Predicted track")
        ln.coords = coords(nt.lon, nt.lat, nt.alt_m)
        ln.altitudemode = simplekml.AltitudeMode.absolute
        ln.style = style(PALETTE["track"], 3)
    pt = fp.newpoint(name="Predicted landing", coords=[(round(update.landing_lon, 6), round(update.landing_lat, 6))])
    when = iso_from_posix(update.landing_time_s) if math.isfinite(update.landing_time_s) else "n/a"
    pt.description = f"Landing about {when} ({update.time_left_s / 60:.0f} min left); 95 % zone " \
                     f"{update.zone_95_km:.1f} km (semi-major axis)."
    pt.style = style(PALETTE["landing"], 1, icon=1.3)
    fz = kml.newfolder(name="Landing zones")
    rings = [(f"Landing {e.probability:.0%} ellipse", [r]) for e, r in zip(z.ellipses, z.ellipse_rings, strict=True)
             if e.area_m2 > 0]
    if z.region_90_rings:
        rings.append(("Landing 90% region", list(z.region_90_rings)))
    for name, rr in rings:
        geom = polygon_geometry(rr)
        if geom is None:
            continue
        parts = [geom["coordinates"]] if geom["type"] == "Polygon" else geom["coordinates"]
        for part in parts:
            pol = fz.newpolygon(name=name)
            pol.outerboundaryis = [tuple(c) for c in part[0]]
            pol.altitudemode = simplekml.AltitudeMode.clamptoground
            pol.tessellate = 1
            pol.style = style(PALETTE["landing_ellipse"], 2, fill=0.1)
    if update.crew_lat is not None and update.crew_lon is not None:
        fc = kml.newfolder(name="Crew")
        pt = fc.newpoint(name="Crew", coords=[(round(update.crew_lon, 6), round(update.crew_lat, 6))])
        pt.description = (f"{(update.crew_distance_m or 0.0) / 1e3:.1f} km to the predicted landing, bearing "
                          f"{update.crew_bearing_deg or 0.0:.0f} deg")
        pt.style = style(PALETTE["launch"], 1, icon=1.1)
        ln = fc.newlinestring(name="Crew to predicted landing")
        ln.coords = [(round(update.crew_lon, 6), round(update.crew_lat, 6)),
                     (round(update.landing_lon, 6), round(update.landing_lat, 6))]
        ln.tessellate = 1
        ln.style = style(PALETTE["launch"], 2)
    return _renumber_ids(kml.kml())




# ---------------------------------------------------------------------------------------- live feeds
def parse_position(text: str) -> tuple[float, float]:
    """``"LAT,LON"`` in decimal degrees; a sign, or a hemisphere letter N/S/E/W after the number.

    ``"-33.85,151.2"``, ``"33.85S,151.2E"``, ``"33.85 S, 151.2 E"`` and a Unicode minus all work.

    Raises
    ------
    InputDataError
        If the text is not two numbers in range.
    """
    raw = text.replace("\u2212", "-").replace(";", ",").strip()
    parts = [p.strip() for p in raw.split(",")]
    fix = "write --crew LAT,LON in degrees, e.g. --crew=-33.85,151.2 or --crew 33.85S,151.2E"
    if len(parts) != 2:
        raise input_error(None, "--crew", f"'{text}' is not LAT,LON", fix)
    values = []
    for part, (pos, neg) in zip(parts, (("N", "S"), ("E", "W")), strict=True):
        sign = 1.0
        up = part.upper().replace(" ", "")
        if up.endswith((pos, neg)):
            sign = -1.0 if up.endswith(neg) else 1.0
            up = up[:-1]
        try:
            values.append(sign * float(up))
        except ValueError:
            raise input_error(None, "--crew", f"'{part}' is not a number", fix) from None
    lat, lon = values
    if not (-90.0 <= lat <= 90.0 and -180.0 <= lon <= 360.0):
        raise input_error(None, "--crew", f"{lat}, {lon} is out of range", fix)
    return lat, float(normalize_longitude(lon))


class ReplayFeed:
    """A recorded flight released fix by fix as if received live (for practice and tests).

    Fix i is released at wall time start + (t_i - t_0) / speed (``speed`` 0: no waiting). An update is
    due when the newest released fix is at least ``every_s`` seconds of flight time after the last
    update's (the last fix always gives one). Iterating yields ``(track so far, report)``.
    """

    def __init__(self, path: str | Path, callsign: str | None = None, speed: float = 60.0,
                 every_s: float = 60.0, sleep: Any = _time.sleep, clock: Any = _time.monotonic) -> None:
        from balloonpath.telemetry import read_track

        self.track, self.report = read_track(path, callsign=callsign)
        self.speed = float(speed)
        self.every_s = float(every_s)
        self._sleep, self._clock = sleep, clock

    def __iter__(self) -> Any:
        t = np.asarray(self.track.time_s)
        start = self._clock()
        last = -math.inf
        for i in range(t.size):
            if t[i] - last < self.every_s and i != t.size - 1:
                continue
            if self.speed > 0:
                wait = start + (t[i] - t[0]) / self.speed - self._clock()
                if wait > 0:
                    self._sleep(wait)
            last = float(t[i])
            yield truncate_track(self.track, last), self.report


class FollowFeed:
    """Watch a growing telemetry file; yield ``(track, report)`` when new fixes make an update due.

    Polls every ``poll_s`` seconds (no extra dependencies). An update is due when the newest fix is at
    least ``every_s`` seconds of flight time after the last update's. Stops after ``idle_timeout_s``
    seconds without new fixes (None: never).
    """

    def __init__(self, path: str | Path, callsign: str | None = None, every_s: float = 30.0,
                 poll_s: float = 2.0, idle_timeout_s: float | None = None, sleep: Any = _time.sleep,
                 clock: Any = _time.monotonic) -> None:
        from balloonpath.telemetry import TrackFollower

        self.follower = TrackFollower(path, callsign=callsign)
        self.every_s = float(every_s)
        self.poll_s = float(poll_s)
        self.idle_timeout_s = idle_timeout_s
        self._sleep, self._clock = sleep, clock

    def __iter__(self) -> Any:
        last = -math.inf
        idle_since = self._clock()
        while True:
            grew = self.follower.poll()
            track = self.follower.track
            if grew:
                idle_since = self._clock()
            if track is not None and float(track.time_s[-1]) - last >= self.every_s:
                last = float(track.time_s[-1])
                yield track, self.follower.read_report
                continue
            if self.idle_timeout_s is not None and self._clock() - idle_since > self.idle_timeout_s:
                if track is not None and float(track.time_s[-1]) > last:
                    yield track, self.follower.read_report
                return
            self._sleep(self.poll_s)


__all__ = [
    "ChaseSession", "ChaseUpdate", "FlightState", "condition_field", "crew_position_at",
    "estimate_flight_state", "member_parameters", "preflight_observations", "prelaunch_state", "repredict",
    "rewrite_outputs", "robust_line", "truncate_track", "wind_observations_from_track",
    "chase_geojson", "chase_kml", "parse_position", "ReplayFeed", "FollowFeed",
]
