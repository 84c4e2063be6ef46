"""The vectorised ensemble integrator: N members advanced together, one numpy step at a time.

Each member has its own state (position, altitude, phase, time), its own flight parameters and its own wind
realisation (one smooth function drawn once per member). Landed members are masked out of the step. Events
(float altitude, burst, cut-down, end of float, touchdown) are located inside the step and the member is
advanced exactly to the event with a partial step, so event times do not depend on the step size to first
order.

Numerical method
----------------
Explicit midpoint rule (second-order Runge-Kutta) in time for (lat, lon, alt):
k1 = f(x, t); x_mid = x + dt/2 k1; k2 = f(x_mid, t + dt/2); x_new = x + dt k2, where the horizontal part of
each update is a step on the WGS84 ellipsoid (:func:`balloonpath.geodesy.step_east_north`, scaled by
R / (R + h) for the height h above the ellipsoid, approximated by the altitude above sea level). The default
step is 10 s; docs/forecast.md records the convergence check (halving the step moves the demo landing by
less than 20 m).

Touchdown is found by the secant rule on g = alt - ground(lat, lon) inside the last step (two iterations),
then the member is set on the ground.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol

import numpy as np

from balloonpath.atmosphere import Atmosphere
from balloonpath.errors import PhysicsError
from balloonpath.flight.phases import ASCENT, DESCENT, FLOAT, LANDED
from balloonpath.flight.vertical import VerticalParams, vertical_speed_m_s
from balloonpath.geodesy import step_east_north
from balloonpath.winds.field import MemberWinds


class Ground(Protocol):
    """Anything with ``elevation_m(lat, lon) -> ndarray`` (see :mod:`balloonpath.terrain`)."""

    def elevation_m(self, lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
        """Ground elevation above sea level, m."""
        ...


@dataclass(frozen=True)
class State:
    """State of N members: arrays of shape (N,).

    Attributes
    ----------
    lat, lon : degrees. alt_m : geometric altitude above sea level, m. phase : int8 phase codes.
    time_s : POSIX seconds (each member has its own clock). launch_time_s : each member's release time
    (for cut-down after a delay). phase_start_s : when the current phase began (for float durations).
    members : index of each row into the parameters and wind realisations.
    """

    lat: np.ndarray
    lon: np.ndarray
    alt_m: np.ndarray
    phase: np.ndarray
    time_s: np.ndarray
    launch_time_s: np.ndarray
    phase_start_s: np.ndarray
    members: np.ndarray

    @staticmethod
    def at_launch(
        lat: float, lon: float, alt_m: float, time_s: np.ndarray | float, n_members: int
    ) -> State:
        """All members on the ground at the launch site, in ascent, at their release times."""
        t = np.broadcast_to(np.asarray(time_s, dtype=float), (n_members,)).copy()
        return State(
            lat=np.full(n_members, float(lat)),
            lon=np.full(n_members, float(lon)),
            alt_m=np.full(n_members, float(alt_m)),
            phase=np.full(n_members, ASCENT, dtype=np.int8),
            time_s=t,
            launch_time_s=t.copy(),
            phase_start_s=t.copy(),
            members=np.arange(n_members),
        )


@dataclass(frozen=True)
class Trajectories:
    """What the integrator produced.

    ``burst_*`` is where descent began (burst, cut-down or end of float): NaN for members that started in
    descent. ``landing_*`` is the touchdown; ``landing_alt_m`` is the ground elevation there.
    ``tracks`` holds the recorded members' paths: arrays (K, T) with NaN after landing, and
    ``track_members`` their member indices. ``landing_speed_m_s`` is the vertical speed at touchdown.
    ``max_alt_m`` is each member's highest altitude.
    """

    burst_lat: np.ndarray
    burst_lon: np.ndarray
    burst_alt_m: np.ndarray
    burst_time_s: np.ndarray
    landing_lat: np.ndarray
    landing_lon: np.ndarray
    landing_alt_m: np.ndarray
    landing_time_s: np.ndarray
    landing_speed_m_s: np.ndarray
    max_alt_m: np.ndarray
    track_members: np.ndarray
    tracks: dict[str, np.ndarray]
    steps: int


def integrate(
    state: State,
    params: VerticalParams,
    winds: MemberWinds,
    ground: Ground,
    atmosphere: Atmosphere,
    dt_s: float = 10.0,
    record: np.ndarray | None = None,
    max_flight_s: float = 3.0 * 86_400.0,
    progress: Callable[[int, int], None] | None = None,
) -> Trajectories:
    """Fly N members from ``state`` until all have landed.

    Parameters
    ----------
    state : State
        Start state (a launch, or any mid-flight state: recovery re-prediction and cut-down reuse this).
    params : VerticalParams
        Per-member flight parameters, indexed by ``state.members``.
    winds : MemberWinds
        One wind realisation per member, indexed by ``state.members``.
    ground : object with ``elevation_m(lat, lon)``
        Terrain for the touchdown.
    atmosphere : Atmosphere
        Air density and temperature for the vertical speeds.
    dt_s : float
        Time step, s.
    record : array of int, optional
        Rows of ``state`` whose full tracks are recorded (default: row 0).
    max_flight_s : float
        A member still airborne this long after the start is an error (e.g. an endless float).
    progress : callable, optional
        Called as ``progress(n_landed, n_total)`` after each step.

    Returns
    -------
    Trajectories

    Raises
    ------
    PhysicsError
        If members are still airborne after ``max_flight_s``, or the state is not finite.
    """
    n = state.lat.size
    lat = state.lat.astype(float).copy()
    lon = state.lon.astype(float).copy()
    alt = state.alt_m.astype(float).copy()
    phase = state.phase.astype(np.int8).copy()
    t = state.time_s.astype(float).copy()
    launch_t = state.launch_time_s.astype(float).copy()
    phase_start = state.phase_start_s.astype(float).copy()
    members = np.asarray(state.members, dtype=int)
    if not (np.all(np.isfinite(lat)) and np.all(np.isfinite(lon)) and np.all(np.isfinite(alt))):
        raise PhysicsError("integrator: start state has NaN positions; fix: check the start state")
    p = params.take(members)  # row-aligned parameters

    burst = {k: np.full(n, np.nan) for k in ("lat", "lon", "alt", "time")}
    land = {k: np.full(n, np.nan) for k in ("lat", "lon", "alt", "time", "speed")}
    max_alt = alt.copy()
    landed0 = phase == LANDED
    if np.any(landed0):
        land["lat"][landed0], land["lon"][landed0] = lat[landed0], lon[landed0]
        land["alt"][landed0], land["time"][landed0] = alt[landed0], t[landed0]
        land["speed"][landed0] = 0.0

    rec = np.array([0] if record is None else record, dtype=int)
    rec_rows: list[list[np.ndarray]] = [[] for _ in range(5)]

    def snapshot() -> None:
        for store, arr in zip(rec_rows, (t, lat, lon, alt, phase), strict=True):
            store.append(arr[rec].astype(float))

    snapshot()
    t_start = t.copy()
    steps = 0

    def rates(rows: np.ndarray, la: np.ndarray, lo: np.ndarray, z: np.ndarray, tt: np.ndarray,
              ph: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        u, v = winds.wind(members[rows], la, lo, z, tt)
        w = vertical_speed_m_s(ph, z, p, rows, atmosphere)
        return np.asarray(u, float), np.asarray(v, float), np.asarray(w, float)

    def rk2(rows: np.ndarray, dt: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Midpoint step of the given rows by per-row dt; phases held fixed inside the step."""
        la, lo, z, tt, ph = lat[rows], lon[rows], alt[rows], t[rows], phase[rows]
        u1, v1, w1 = rates(rows, la, lo, z, tt, ph)
        half = 0.5 * dt
        la_m, lo_m = step_east_north(la, lo, u1 * half, v1 * half, z)
        z_m = z + w1 * half
        u2, v2, w2 = rates(rows, la_m, lo_m, z_m, tt + half, ph)
        la_n, lo_n = step_east_north(la, lo, u2 * dt, v2 * dt, z_m)
        return la_n, lo_n, z + w2 * dt, w2

    while True:
        active = np.flatnonzero(phase != LANDED)
        if active.size == 0:
            break
        if np.any(t[active] - t_start[active] > max_flight_s):
            raise PhysicsError(
                f"integrator: members still airborne {max_flight_s / 3600:.0f} h after the start; "
                "fix: check the float duration, cut-down and descent settings"
            )
        dt = np.full(active.size, float(dt_s))
        la_n, lo_n, z_n, w_end = rk2(active, dt)
        ph = phase[active]
        frac = np.ones(active.size)
        new_phase = ph.copy()
        kind = np.zeros(active.size, dtype=np.int8)  # 1: start float, 2: descent begins, 3: touchdown

        # -- events in ascent: float altitude, then burst / cut-down altitude (the lowest one reached first)
        asc = ph == ASCENT
        if np.any(asc):
            idx = active[asc]
            z0 = alt[idx]
            z1 = z_n[asc]
            float_alt = p.float_altitude_m[idx]
            term_alt = np.fmin(p.burst_altitude_m[idx], p.cutdown_altitude_m[idx])
            has_float = np.isfinite(float_alt) & (float_alt < term_alt) & (z0 < float_alt)
            target = np.where(has_float, float_alt, term_alt)
            hit = z1 >= target
            f = np.clip((target - z0) / np.maximum(z1 - z0, 1e-12), 0.0, 1.0)
            sel = np.flatnonzero(asc)
            frac[sel[hit]] = f[hit]
            new_phase[sel[hit]] = np.where(has_float[hit], FLOAT, DESCENT)
            kind[sel[hit]] = np.where(has_float[hit], 1, 2)

        # -- end of float by duration
        flt = ph == FLOAT
        if np.any(flt):
            idx = active[flt]
            t_end = phase_start[idx] + p.float_duration_s[idx]
            hit = t[idx] + dt[flt] >= t_end
            f = np.clip((t_end - t[idx]) / dt[flt], 0.0, 1.0)
            sel = np.flatnonzero(flt)
            frac[sel[hit]] = np.minimum(frac[sel[hit]], f[hit])
            new_phase[sel[hit]] = DESCENT
            kind[sel[hit]] = 2

        # -- cut-down after a time, in any airborne phase before descent
        pre = (ph == ASCENT) | (ph == FLOAT)
        if np.any(pre):
            idx = active[pre]
            t_cut = launch_t[idx] + p.cutdown_after_s[idx]
            hit = np.isfinite(t_cut) & (t[idx] + dt[pre] >= t_cut)
            f = np.clip((t_cut - t[idx]) / dt[pre], 0.0, 1.0)
            sel = np.flatnonzero(pre)
            earlier = hit & (f < frac[sel])
            frac[sel[earlier]] = f[earlier]
            new_phase[sel[earlier]] = DESCENT
            kind[sel[earlier]] = 2

        # -- touchdown in descent: secant rule on g = alt - ground inside the step
        des = ph == DESCENT
        if np.any(des):
            idx = active[des]
            g0 = alt[idx] - ground.elevation_m(lat[idx], lon[idx])
            g1 = z_n[des] - ground.elevation_m(la_n[des], lo_n[des])
            hit = g1 <= 0.0
            if np.any(hit):
                sel = np.flatnonzero(des)[hit]
                f = np.clip(g0[hit] / np.maximum(g0[hit] - g1[hit], 1e-12), 0.0, 1.0)
                for _ in range(2):  # refine: the ground under the partial step differs from the full step's
                    la_f, lo_f, z_f, _w = rk2(active[sel], dt[sel] * f)
                    g_f = z_f - ground.elevation_m(la_f, lo_f)
                    slope = (g0[hit] - g_f) / np.maximum(f, 1e-9)
                    f = np.clip(f + g_f / np.maximum(slope, 1e-12), 0.0, 1.0)
                frac[sel] = f
                new_phase[sel] = LANDED
                kind[sel] = 3

        # -- partial steps for members with an event, full steps for the rest
        part = np.flatnonzero(frac < 1.0)
        if part.size:
            la_p, lo_p, z_p, w_p = rk2(active[part], dt[part] * frac[part])
            la_n[part], lo_n[part], z_n[part], w_end[part] = la_p, lo_p, z_p, w_p
        dt_used = dt * frac
        lat[active], lon[active], alt[active] = la_n, lo_n, z_n
        t[active] = t[active] + dt_used
        max_alt[active] = np.maximum(max_alt[active], alt[active])

        changed = kind > 0
        if np.any(changed):
            rows = active[changed]
            phase[rows] = new_phase[changed]
            phase_start[rows] = t[rows]
            b = active[kind == 2]
            burst["lat"][b], burst["lon"][b], burst["alt"][b], burst["time"][b] = lat[b], lon[b], alt[b], t[b]
            end_rows = active[kind == 3]
            ground_z = ground.elevation_m(lat[end_rows], lon[end_rows])
            alt[end_rows] = ground_z
            land["lat"][end_rows], land["lon"][end_rows] = lat[end_rows], lon[end_rows]
            land["alt"][end_rows], land["time"][end_rows] = ground_z, t[end_rows]
            land["speed"][end_rows] = np.abs(w_end[kind == 3])
            # Members whose float/burst event ends exactly at the float altitude hold it.
            fl = active[kind == 1]
            alt[fl] = p.float_altitude_m[fl]
        steps += 1
        snapshot()
        if progress is not None:
            progress(int(np.count_nonzero(phase == LANDED)), n)

    tracks = {
        name: np.stack(store, axis=1)
        for name, store in zip(("time_s", "lat", "lon", "alt_m", "phase"), rec_rows, strict=True)
    }
    # After landing, keep one landed point per track and mask the rest with NaN.
    landed_before = np.concatenate(
        [np.zeros((rec.size, 1), bool), tracks["phase"][:, :-1] == LANDED], axis=1
    )
    for name in ("time_s", "lat", "lon", "alt_m"):
        tracks[name] = np.where(landed_before, np.nan, tracks[name])
    return Trajectories(
        burst_lat=burst["lat"], burst_lon=burst["lon"], burst_alt_m=burst["alt"], burst_time_s=burst["time"],
        landing_lat=land["lat"], landing_lon=land["lon"], landing_alt_m=land["alt"],
        landing_time_s=land["time"], landing_speed_m_s=land["speed"], max_alt_m=max_alt,
        track_members=members[rec], tracks=tracks, steps=steps,
    )


def member_generator(seed: int, member: int) -> np.random.Generator:
    """The random stream of one member, independent of how members are split into chunks.

    ``SeedSequence(seed, spawn_key=(member,))`` is child ``member`` of ``SeedSequence(seed)``, so member i
    draws the same numbers whether the run has 10 or 10 000 members, on one worker or many.
    """
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(int(member),)))


@dataclass(frozen=True)
class MemberFactors:
    """Multiplicative perturbations and launch delays per member (member 0: nominal)."""

    ascent: np.ndarray
    burst: np.ndarray
    descent: np.ndarray
    launch_delay_s: np.ndarray


def draw_member_factors(
    members: np.ndarray, seed: int, ascent_sigma: float, burst_sigma: float, descent_sigma: float,
    launch_delay_sigma_s: float,
) -> MemberFactors:
    """Draw each member's perturbation factors from its own stream (:func:`member_generator`).

    Factors are 1 + sigma * z with z ~ N(0, 1) truncated to |z| <= 3 (a factor can never reach zero or
    flip sign); the launch delay is half-normal, |N(0, sigma)|. Member 0 is the nominal run: factors 1,
    delay 0. The defaults (plan [ensemble]) are common practice for latex sounding balloons: ascent rate
    +-5 %, burst altitude +-5 %, descent rate +-10 % (one standard deviation).
    """
    members = np.asarray(members, dtype=int)
    z = np.zeros((members.size, 4))
    for k, m in enumerate(members):
        if m != 0:
            z[k] = member_generator(seed, int(m)).standard_normal(4)
    z[:, :3] = np.clip(z[:, :3], -3.0, 3.0)
    return MemberFactors(
        ascent=1.0 + ascent_sigma * z[:, 0],
        burst=1.0 + burst_sigma * z[:, 1],
        descent=1.0 + descent_sigma * z[:, 2],
        launch_delay_s=np.abs(z[:, 3]) * launch_delay_sigma_s,
    )
