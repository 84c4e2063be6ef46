"""Scale-out benchmark: a 48-launch-time sweep on 1 and 2 local workers, the cost model, the tiled GP.

Run:  .venv/bin/python benchmarks/scale.py [members_per_forecast] [launch_times] [windows]
      (``windows`` as third argument: only the launch-window sweep figures)

Prints
- wall time of the sweep (invented scenario "Gannet Bay", scenarios/coastal) in this process (1 worker)
  and on a local Dask cluster of 2 worker processes, the speed-up 2 vs 1, and the throughput in
  member-steps per second per core (a member-step is one member advanced by one 10 s time step);
- the cost model: busy time per member-step inside the work units, peak memory per worker, wind-draw cost
  per member of a GP field with observations;
- the tiled GP fit against the exact GP on a subset (speed and accuracy loss);
- ``balloonpath.windows.sweep_windows`` over the same launch times (one stacked sweep, common random
  numbers) in this process and on 2 local workers, the speed-up, and a check that the rows are identical.
The figures depend on the machine and its load; docs/scale.md records one run.
"""

from __future__ import annotations

import os
import sys
import time
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def sweep(engine_workers: int, members: int, n_times: int) -> dict[str, float]:
    from balloonpath.forecast import load_winds
    from balloonpath.plan import load_plan
    from balloonpath.scale import Engine, Job, run_jobs, throughput

    plan = load_plan(ROOT / "scenarios" / "coastal" / "plan.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        winds = load_winds(plan)
    times = plan.launch_time_s + 1800.0 * np.arange(n_times)
    with Engine(workers=engine_workers, chunk_members=members) as engine:
        t0 = time.perf_counter()
        handle = engine.scatter(winds)
        jobs = [Job(0, float(t), members, 7) for t in times]

        def keep(result, plan, chunks):  # noqa: ANN001, ANN202 - runs on the worker
            return throughput(chunks)

        rows = run_jobs(engine, [plan], [handle], jobs, finish=keep)
        wall = time.perf_counter() - t0
        rss = 0.0
        if engine.client is not None:
            import psutil

            peaks = engine.client.run(lambda: psutil.Process().memory_info().rss)
            rss = max(peaks.values()) / 2**20
    steps = sum(r["member_steps"] for r in rows)
    busy = sum(r["busy_s"] for r in rows)
    return {"wall_s": wall, "member_steps": steps, "busy_s": busy, "rss_mib": rss}


def window_sweep(engine_workers: int, members: int, n_times: int) -> tuple[dict[str, float], object]:
    """``sweep_windows`` of the coastal scenario on ``engine_workers`` (1: in this process, no engine)."""
    from balloonpath.forecast import load_winds
    from balloonpath.plan import load_plan
    from balloonpath.scale import Engine
    from balloonpath.windows import sweep_windows

    plan = load_plan(ROOT / "scenarios" / "coastal" / "plan.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        winds = load_winds(plan)
    args = (plan, plan.launch_time_s, plan.launch_time_s + 1800.0 * (n_times - 1), 1800.0)
    t0 = time.perf_counter()
    if engine_workers == 1:
        sweep = sweep_windows(*args, members=members, winds=winds, seed=7)
        start = 0.0
    else:
        with Engine(workers=engine_workers) as engine:
            start = time.perf_counter() - t0
            sweep = sweep_windows(*args, members=members, winds=winds, seed=7, engine=engine)
    wall = time.perf_counter() - t0
    return {"wall_s": wall, "engine_start_s": start, "zones_busy_s": sum(sweep.timings.zones_s)}, sweep


def windows_figures(members: int, n_times: int) -> None:
    from balloonpath.windows import windows_csv_text

    one, s1 = window_sweep(1, members, n_times)
    two, s2 = window_sweep(2, members, n_times)
    same = windows_csv_text(s1) == windows_csv_text(s2)
    print(f"windows sweep: {n_times} launch times x {members} members, scenario coastal (invented)")
    print(f"  in this process          wall {one['wall_s']:6.1f} s  (zones {one['zones_busy_s']:.1f} s)")
    print(f"  2 workers (local dask)   wall {two['wall_s']:6.1f} s  (of which cluster start "
          f"{two['engine_start_s']:.1f} s; zones busy {two['zones_busy_s']:.1f} s on the workers)")
    print(f"  speed-up 2 vs 1: {one['wall_s'] / two['wall_s']:.2f} "
          f"(without the cluster start {one['wall_s'] / (two['wall_s'] - two['engine_start_s']):.2f}); "
          f"windows.csv identical: {same}")


def wind_draw_cost() -> dict[str, float]:
    from balloonpath.winds.field import UniformField
    from balloonpath.winds.gp import fit_wind_field
    from balloonpath.winds.gp_kernels import GPHyperparameters
    from balloonpath.winds.observations import WindObservations

    rng = np.random.default_rng(2)
    n, t0, lat0, lon0 = 400, 1_800_000_000.0, 47.0, 9.0
    obs = WindObservations(t0 + rng.uniform(-3, 3, n) * 3600, lat0 + rng.uniform(-1, 1, n),
                           lon0 + rng.uniform(-1.3, 1.3, n), rng.uniform(3000, 12000, n),
                           rng.normal(0, 3, n), rng.normal(0, 3, n), np.ones(n), np.array(["b"] * n, dtype=object))
    field = fit_wind_field(obs, UniformField(5, 0), optimize=False, center=(lat0, lon0, t0),
                           hyperparameters=GPHyperparameters(150.0, 1.5, 6.0, 3.0))
    field = field.with_corridor(lat0 - 1.5, lat0 + 1.5, lon0 - 2, lon0 + 2, 35_000.0, t0 - 3600, t0 + 6 * 3600)
    t = time.perf_counter()
    sampler = field.member_sampler(1000)
    setup = time.perf_counter() - t
    t = time.perf_counter()
    m = sampler.draw(np.arange(128), seed=1)
    per = (time.perf_counter() - t) / 128
    return {"setup_s": setup, "per_member_s": per, "grid_nodes": float(sampler.grid.size),
            "bytes_per_member": float(m.deviations[0].nbytes)}


def tiled_gp(n: int = 6000) -> dict[str, float]:
    from balloonpath.scale import Engine
    from balloonpath.winds.gp import Posterior
    from balloonpath.winds.gp_kernels import GPHyperparameters
    from balloonpath.winds.gp_tiles import accuracy_against_exact, fit_tiled

    rng = np.random.default_rng(4)
    hp = GPHyperparameters(80.0, 1.0, 6.0, 3.0)
    x = np.column_stack([rng.uniform(0, 1500, n), rng.uniform(0, 1500, n), rng.uniform(8, 11, n),
                         rng.uniform(-2, 2, n)])
    d = 2000
    w = rng.normal(size=(d, 4)) / np.array([80.0, 80.0, 1.0, 6.0])
    b = rng.uniform(0, 2 * np.pi, d)
    r = 3.0 * np.sqrt(2.0 / d) * np.cos(x @ w.T + b) @ rng.normal(size=(d, 2)) + rng.normal(0, 1, (n, 2))
    with Engine(workers=2) as engine:
        t = time.perf_counter()
        tiled = fit_tiled(x, r, np.ones(n), hp, tile_km=300.0, engine=engine)
        tiled_s = time.perf_counter() - t
    t = time.perf_counter()
    Posterior(x, r, np.ones(n), hp)
    exact_s = time.perf_counter() - t
    # accuracy on a subset (exact GP of 2500 points), test points inside it
    sub = np.flatnonzero((x[:, 0] < 750) & (x[:, 1] < 750))[:2500]
    tsub = fit_tiled(x[sub], r[sub], np.ones(sub.size), hp, tile_km=250.0)
    xs = np.column_stack([rng.uniform(0, 750, 1000), rng.uniform(0, 750, 1000), rng.uniform(8, 11, 1000),
                          rng.uniform(-2, 2, 1000)])
    acc = accuracy_against_exact(x[sub], r[sub], np.ones(sub.size), hp, xs, tsub)
    return {"n": float(n), "tiles": float(len(tiled.tiles)), "tiled_fit_s_2_workers": tiled_s,
            "exact_fit_s": exact_s, **{f"subset_{k}": v for k, v in acc.items()}}


def main() -> None:
    members = int(sys.argv[1]) if len(sys.argv) > 1 else 33
    n_times = int(sys.argv[2]) if len(sys.argv) > 2 else 48
    if len(sys.argv) > 3 and sys.argv[3] == "windows":
        windows_figures(members, n_times)
        return
    print(f"sweep: {n_times} launch times x {members} members, scenario coastal (invented), cores {os.cpu_count()}")
    one = sweep(1, members, n_times)
    two = sweep(2, members, n_times)
    for name, r, cores in (("1 worker (in process)", one, 1), ("2 workers (local dask)", two, 2)):
        print(f"  {name:24s} wall {r['wall_s']:7.1f} s  member-steps {r['member_steps']:.0f}  "
              f"{r['member_steps'] / r['wall_s'] / cores:8.0f} member-steps/s/core  "
              f"busy {r['busy_s'] / r['member_steps'] * 1e6:6.1f} us/member-step  worker RSS {r['rss_mib']:.0f} MiB")
    print(f"  speed-up 2 vs 1 worker: {one['wall_s'] / two['wall_s']:.2f}")
    w = wind_draw_cost()
    print(f"wind draws (GP, 400 obs, 1000-member grid of {w['grid_nodes']:.0f} nodes): setup {w['setup_s']:.2f} s, "
          f"{w['per_member_s'] * 1e3:.1f} ms and {w['bytes_per_member'] / 2**20:.2f} MiB per member")
    t = tiled_gp()
    print("tiled GP: " + ", ".join(f"{k} {v:.4g}" for k, v in t.items()))
    windows_figures(members, n_times)


if __name__ == "__main__":
    main()
