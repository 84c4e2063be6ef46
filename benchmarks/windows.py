"""Benchmark of the launch-window sweep: 48 launch times x 200 members on the invented prairie scenario.

Target (issue 8): 48 x 200 in at most 20 s on the 2-core machine, with the wind field loaded once.
Prints the wind load time separately, then the sweep's parts (nominal flights, one draw of the wind
realisations, the stacked member flights, zones per launch time), the total and the time per launch time,
as wall clock and as this process's CPU time (the machine is shared: CPU time is the figure an idle
machine would show, approximately).

Usage: ``.venv/bin/python benchmarks/windows.py [--times 48] [--members 200] [--every 10m]``
"""

from __future__ import annotations

import argparse
import time
import warnings
from pathlib import Path

from balloonpath.errors import BalloonpathWarning
from balloonpath.forecast import load_winds
from balloonpath.plan import load_plan
from balloonpath.timeutil import iso_from_posix, parse_iso
from balloonpath.windows import parse_every, sweep_windows

PLAN = Path(__file__).resolve().parents[1] / "scenarios" / "prairie" / "plan.toml"
# The prairie forecast grid covers 2027-05-14 09:30Z to 21:30Z; 48 launches every 10 min from 09:30Z
# land before 19:30Z.
START = "2027-05-14T09:30:00Z"


def main() -> None:
    """Run the benchmark and print the figures."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--times", type=int, default=48)
    ap.add_argument("--members", type=int, default=200)
    ap.add_argument("--every", default="10m")
    args = ap.parse_args()
    warnings.simplefilter("ignore", BalloonpathWarning)
    plan = load_plan(PLAN)
    every = parse_every(args.every)
    start = parse_iso(START)
    end = start + every * (args.times - 1)

    w0, c0 = time.perf_counter(), time.process_time()
    winds = load_winds(plan)
    load_wall, load_cpu = time.perf_counter() - w0, time.process_time() - c0

    w0, c0 = time.perf_counter(), time.process_time()
    sweep = sweep_windows(plan, start, end, every, members=args.members, winds=winds)
    wall, cpu = time.perf_counter() - w0, time.process_time() - c0
    t = sweep.timings
    n = len(sweep.rows)
    print(f"scenario: {PLAN.parent.name}; {n} launch times {iso_from_posix(start)} .. {iso_from_posix(end)} "
          f"every {args.every}; {args.members} members each ({n * args.members} flights)")
    print(f"wind load (once, not in the sweep): {load_wall:7.2f} s wall, {load_cpu:7.2f} s CPU")
    c = t.cpu
    print(f"  nominal flights (1 call, {n} rows): {t.nominal_s:7.2f} s wall, {c['nominal']:7.2f} s CPU")
    print(f"  wind realisations (1 draw):        {t.draw_s:7.2f} s wall, {c['draw']:7.2f} s CPU")
    print(f"  member flights (stacked):          {t.members_s:7.2f} s wall, {c['members']:7.2f} s CPU")
    print(f"  zones + sun + score, all times:    {sum(t.zones_s):7.2f} s wall, {c['zones']:7.2f} s CPU "
          f"({sum(t.zones_s) / n:.3f} s wall per launch time)")
    print(f"sweep total: {wall:7.2f} s wall, {cpu:7.2f} s CPU (target <= 20 s)")
    print(f"time per launch time: {wall / n:.3f} s wall, {cpu / n:.3f} s CPU")
    print(f"fit launch times: {sweep.n_fit} of {n}; time-varying field: {sweep.time_varying}")


if __name__ == "__main__":
    main()
