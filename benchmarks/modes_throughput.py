"""Throughput and memory of raw Mode-S decoding to wind observations (streamed, bounded memory).

Generates invented traffic (balloonpath.winds.traffic) at a fixed density (about 250 000 raw-message lines
per hour of message time, in one-hour blocks) and writes about N lines to a temporary folder, then runs
`derive_observations` on it in a fresh child process and prints messages per second and the child's peak
resident memory (VmHWM from /proc; see _rss_kb) next to its resident memory after the imports. Two sizes are
run (N/4 and N: one hour and four hours of the same traffic) to show that memory does not grow with the
length of the recording: messages are decoded as a stream, QC runs per time window, and the rows that pass
are spilled to a temporary file for the file-wide fit (docs/aircraft-winds.md, "Throughput and memory").

Usage: python benchmarks/modes_throughput.py [--lines 1000000] [--seed 1]
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


class _BenchWind:
    """Analytic truth: westerly jet near 10.5 km, gentle gradients."""

    def wind(self, lat, lon, alt_m, time_s):
        z = np.asarray(alt_m, dtype=float)
        u = 10.0 + 35.0 * np.exp(-(((z - 10_500.0) / 3_000.0) ** 2)) + 0.3 * (np.asarray(lat) - 46.5)
        v = 3.0 - 1e-4 * z + 0.3 * (np.asarray(lon) - 9.0) + 0 * np.asarray(time_s)
        return u, v


LINES_PER_HOUR = 250_000


def generate(path: Path, lines: int, seed: int) -> tuple[int, float]:
    from balloonpath.timeutil import parse_iso
    from balloonpath.winds.traffic import simulate_traffic, write_raw_messages

    t0 = parse_iso("2027-05-14T05:00:00Z")
    hours = max(1, round(lines / LINES_PER_HOUR))
    # About 2.6 messages per aircraft-second (position, velocity, two Comm-B every 4 s, some BDS 4,4);
    # about 22 % of the simulated aircraft-time falls inside the hour (measured).
    n_aircraft = max(4, int(lines / hours / (2.6 * 3600.0 * 0.22)))
    start = time.perf_counter()
    count = 0
    with path.open("w", encoding="utf-8") as out:
        out.write("time,message\n")
        for hour in range(hours):
            rng = np.random.default_rng([seed, hour])
            traffic = simulate_traffic(_BenchWind(), 46.5, 9.0, t0 + 3600.0 * hour, 3600.0, rng,
                                       n_aircraft=n_aircraft)
            block = path.with_name(f"block_{hour}.csv")
            _, n = write_raw_messages(traffic, block, np.random.default_rng([seed, hour, 1]),
                                      corrupt_fraction=0.001, malformed_fraction=0.0005)
            with block.open(encoding="utf-8") as part:
                next(part)
                for line in part:
                    out.write(line)
            block.unlink()
            count += n
    return count, time.perf_counter() - start


def _rss_kb(field: str) -> float:
    """``VmRSS`` (now) or ``VmHWM`` (peak) in kB from /proc (Linux); else ru_maxrss.

    ru_maxrss of a child started by fork + exec also counts the parent's pages at the fork (here the traffic
    generator's), so the peak of this process's own address space, VmHWM, is used where available.
    """
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith(field + ":"):
                return float(line.split()[1])
    except OSError:
        pass
    return float(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)


def decode_child(path: str) -> None:
    import warnings

    from balloonpath.winds.aircraft import derive_observations

    warnings.simplefilter("ignore")
    import pyModeS  # noqa: F401  (imported here so that the baseline includes it)

    baseline_kb = _rss_kb("VmRSS")
    start = time.perf_counter()
    obs, report = derive_observations(path)
    elapsed = time.perf_counter() - start
    peak_kb = _rss_kb("VmHWM")
    print(json.dumps({"seconds": elapsed, "lines": report.lines_read, "observations": len(obs),
                      "rows": report.rows, "peak_rss_mb": peak_kb / 1024.0,
                      "baseline_rss_mb": baseline_kb / 1024.0, "qc": report.lines()}))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--lines", type=int, default=1_000_000)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--decode-only", default=None, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.decode_only:
        decode_child(args.decode_only)
        return
    with tempfile.TemporaryDirectory() as folder:
        for size in (args.lines // 4, args.lines):
            path = Path(folder) / f"messages_{size}.csv"
            count, gen_s = generate(path, size, args.seed)
            out = subprocess.run([sys.executable, __file__, "--decode-only", str(path)], check=True,
                                 capture_output=True, text=True).stdout
            result = json.loads(out.strip().splitlines()[-1])
            print(f"{count:>9} lines ({path.stat().st_size / 1e6:.0f} MB, generated in {gen_s:.1f} s): "
                  f"{result['lines'] / result['seconds']:,.0f} messages/s, {result['seconds']:.1f} s, "
                  f"peak RSS {result['peak_rss_mb']:.0f} MB (after imports {result['baseline_rss_mb']:.0f} MB), "
                  f"{result['rows']} aircraft states -> "
                  f"{result['observations']} observations")
            for line in result["qc"]:
                print("           " + line)


if __name__ == "__main__":
    main()
