"""Ensemble speed: the vectorised integrator against a per-member scipy.integrate.solve_ivp loop.

    .venv/bin/python benchmarks/ensemble.py [--members 1000] [--reference-members 40]

Runs the bundled plains scenario (GP-fused winds from aircraft reports over a gridded forecast) and prints:
wall time of the vectorised ensemble flight for N members (winds loaded and realisations drawn beforehand,
timed separately), the time per member of a reference loop that flies each member alone with
``scipy.integrate.solve_ivp`` (RK45, rtol 1e-8) through the SAME wind realisation and vertical model, the
speed ratio, and the median landing difference between the two. The reference is run on a subset of members
(default 40) and its time is extrapolated linearly to N; the subset is stated in the output.
Targets (issue [6]): <= 2 s for 1000 members on 2 cores, >= 100x faster than the loop, landing
difference < 50 m.
"""

from __future__ import annotations

import argparse
import dataclasses
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from balloonpath.ensemble import State, draw_member_factors, integrate
from balloonpath.flight.phases import ASCENT, DESCENT
from balloonpath.flight.vertical import perturbed, vertical_speed_m_s
from balloonpath.forecast import draw_member_winds, fly_nominal, load_winds, set_corridor
from balloonpath.geodesy import inverse, radii_of_curvature
from balloonpath.plan import load_plan
from balloonpath.terrain import terrain_from_plan

PLAN = Path(__file__).resolve().parents[1] / "scenarios" / "prairie" / "plan.toml"


def reference_member(k, member_id, params, winds, atmosphere, plan, t0):
    """Fly one member with solve_ivp: ascent to burst, then descent to the flat ground."""
    ground = plan.launch.elevation_m
    burst = float(params.burst_altitude_m[k])
    idx = np.array([k])
    mid = np.array([member_id])

    def rhs(t, y, phase):
        lat, lon, z = y
        u, v = winds.wind(mid, np.array([lat]), np.array([lon]), np.array([z]), np.array([t]))
        w = vertical_speed_m_s(np.array([phase], np.int8), np.array([z]), params, idx, atmosphere)[0]
        m, n = radii_of_curvature(lat)
        return [np.degrees(float(v[0]) / (m + z)), np.degrees(float(u[0]) / ((n + z) * np.cos(np.radians(lat)))),
                float(w)]

    def at_burst(t, y, phase):
        return y[2] - burst

    def at_ground(t, y, phase):
        return y[2] - ground

    at_burst.terminal, at_ground.terminal = True, True
    up = solve_ivp(rhs, (t0, t0 + 4e4), [plan.launch.latitude, plan.launch.longitude, plan.launch.elevation_m],
                   args=(ASCENT,), events=at_burst, rtol=1e-8, atol=1e-7, max_step=60.0)
    down = solve_ivp(rhs, (up.t_events[0][0], up.t_events[0][0] + 4e4), up.y_events[0][0], args=(DESCENT,),
                     events=at_ground, rtol=1e-8, atol=1e-7, max_step=60.0)
    lat, lon, _ = down.y_events[0][0]
    return lat, lon


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--members", type=int, default=1000)
    ap.add_argument("--reference-members", type=int, default=40)
    args = ap.parse_args()
    n = args.members
    plan = load_plan(PLAN)
    t = time.perf_counter()
    winds = load_winds(plan)
    t_load = time.perf_counter() - t
    t0 = plan.launch_time_s
    t = time.perf_counter()
    nominal, params0 = fly_nominal(plan, winds)
    winds = dataclasses.replace(winds, field=set_corridor(winds.field, plan, nominal))
    member_winds = draw_member_winds(winds, n, plan.ensemble.seed)
    t_draw = time.perf_counter() - t
    ens = plan.ensemble
    f = draw_member_factors(np.arange(n), ens.seed, ens.ascent_sigma_fraction, ens.burst_sigma_fraction,
                            ens.descent_sigma_fraction, 0.0)
    params = perturbed(params0.repeat(n), f.ascent, f.burst, f.descent, atmosphere=winds.atmosphere)
    state = State.at_launch(plan.launch.latitude, plan.launch.longitude, plan.launch.elevation_m, t0, n)
    ground = terrain_from_plan(plan)
    t = time.perf_counter()
    traj = integrate(state, params, member_winds, ground, winds.atmosphere, dt_s=ens.time_step_s)
    t_vec = time.perf_counter() - t

    k_ref = min(args.reference_members, n)
    rng = np.random.default_rng(0)
    subset = np.sort(rng.choice(n, size=k_ref, replace=False))
    t = time.perf_counter()
    ref = [reference_member(k, k, params, member_winds, winds.atmosphere, plan, t0) for k in subset]
    t_ref_sub = time.perf_counter() - t
    ref_lat, ref_lon = np.array(ref).T
    diff, _ = inverse(ref_lat, ref_lon, traj.landing_lat[subset], traj.landing_lon[subset])
    t_ref_all = t_ref_sub / k_ref * n
    print(f"scenario: {PLAN.parent.name}, {n} members, step {ens.time_step_s:g} s, {traj.steps} steps")
    print(f"wind load (grid + aircraft + GP fit):      {t_load:8.2f} s (once per forecast)")
    print(f"nominal run + corridor + realisations:     {t_draw:8.2f} s")
    print(f"vectorised ensemble flight:                {t_vec:8.2f} s   (target <= 2 s for 1000 members)")
    print(f"per-member solve_ivp loop: {k_ref} members in {t_ref_sub:.1f} s -> {t_ref_all:.1f} s for {n} "
          f"(extrapolated)")
    print(f"speed ratio (loop / vectorised):           {t_ref_all / t_vec:8.0f} x  (target >= 100 x)")
    print(f"landing difference, median / max:          {np.median(diff):8.1f} / {np.max(diff):.1f} m "
          f"(target median < 50 m)")


if __name__ == "__main__":
    main()
