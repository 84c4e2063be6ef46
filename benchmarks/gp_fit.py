"""Benchmark of the GP wind field: fit time and peak memory, approximation accuracy, sample costs.

Prints figures; asserts nothing. Run: .venv/bin/python benchmarks/gp_fit.py [--quick]

Figures:
1. fit time (hyperparameter search + posterior) and peak traced memory (tracemalloc: numpy buffers) for
   1k, 5k and 50k invented observations (50k: superobservations + DTC inducing points).
2. accuracy loss of the DTC approximation against the exact GP on a 5k subset: RMS difference of the mean
   and ratio of the sd at 2000 test points, relative to the exact GP's prior sd.
3. sample(1000 members) setup time and memory, and the cost of one MemberWinds.wind call with 1000 points
   (one per member), the integrator's inner loop.
"""

from __future__ import annotations

import sys
import time
import tracemalloc
import warnings

import numpy as np

from balloonpath.errors import BalloonpathWarning
from balloonpath.geodesy import LocalProjection
from balloonpath.winds.field import UniformField
from balloonpath.winds.gp import fit_wind_field
from balloonpath.winds.observations import WindObservations

T0 = 1_800_000_000.0
LAT0, LON0 = 52.1, -3.4  # invented scenario centre


def invented_observations(n: int, rng: np.random.Generator) -> WindObservations:
    """Aircraft-like observations of a smooth invented field: tracks at cruise and climb levels."""
    proj = LocalProjection(LAT0, LON0)
    x = rng.uniform(-250e3, 250e3, n)
    y = rng.uniform(-250e3, 250e3, n)
    z = np.where(rng.random(n) < 0.7, rng.uniform(9000, 12000, n), rng.uniform(500, 9000, n))
    t = T0 + rng.uniform(-4, 4, n) * 3600
    lat, lon = proj.to_geographic(x, y)
    u = 8 * np.sin(x / 200e3) + 0.002 * z + 2 * np.cos(t / 20000.0) + rng.normal(0, 1.5, n)
    v = 5 * np.cos(y / 150e3) - 0.001 * z + rng.normal(0, 1.5, n)
    return WindObservations(t, lat, lon, z, u, v, np.full(n, 1.5), np.array(["aircraft"] * n, dtype=object))


def timed_fit(obs: WindObservations, **kw):
    tracemalloc.start()
    t = time.perf_counter()
    field = fit_wind_field(obs, UniformField(5.0, 0.0), center=(LAT0, LON0, T0), rng=np.random.default_rng(0), **kw)
    dt = time.perf_counter() - t
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return field, dt, peak


def main(quick: bool = False) -> None:
    warnings.simplefilter("ignore", BalloonpathWarning)
    rng = np.random.default_rng(1)
    sizes = (1000, 5000) if quick else (1000, 5000, 50_000)
    print("1. fit (hyperparameters learned on <= 600 points, 3 starts; exact <= 5000, DTC beyond)")
    print(f"{'n_obs':>8} {'mode':>6} {'points':>7} {'fit_s':>7} {'peak_MB':>8}")
    fields = {}
    for n in sizes:
        obs = invented_observations(n, rng)
        field, dt, peak = timed_fit(obs)
        fields[n] = (obs, field)
        print(f"{n:8d} {field.info['mode']:>6} {field.info['points']:7d} {dt:7.2f} {peak / 2**20:8.1f}")
    print("   reference (issue #5): scikit-learn GaussianProcessRegressor, 2000 points, anisotropic RBF with "
          "restarts: about 73 s on this machine")

    print("2. DTC (1500 inducing points) vs exact GP, same 5000 observations and hyperparameters")
    obs, exact = fields[5000]
    t = time.perf_counter()
    approx = fit_wind_field(obs, UniformField(5.0, 0.0), center=(LAT0, LON0, T0), hyperparameters=exact.hyperparameters,
                            optimize=False, max_exact=2000, rng=np.random.default_rng(0))
    dt = time.perf_counter() - t
    proj = LocalProjection(LAT0, LON0)
    m = 2000
    lat, lon = proj.to_geographic(rng.uniform(-200e3, 200e3, m), rng.uniform(-200e3, 200e3, m))
    alt = rng.uniform(1000, 12000, m)
    tt = T0 + rng.uniform(-3, 3, m) * 3600
    ue, _ = exact.wind(lat, lon, alt, tt)
    ua, _ = approx.wind(lat, lon, alt, tt)
    se, _ = exact.std(lat, lon, alt, tt)
    sa, _ = approx.std(lat, lon, alt, tt)
    s = exact.hyperparameters.sigma_m_s
    print(f"   DTC fit {dt:.2f} s; mean RMS difference {np.sqrt(np.mean((ue - ua) ** 2)):.3f} m/s "
          f"({np.sqrt(np.mean((ue - ua) ** 2)) / s:.1%} of the prior sd {s:.2f}); "
          f"sd ratio DTC/exact median {np.median(sa / se):.3f}, 5-95 % {np.percentile(sa / se, 5):.3f}-"
          f"{np.percentile(sa / se, 95):.3f}")

    print("3. samples for the ensemble (1000 members) and per-call cost")
    for n in sizes[:2]:
        field = fields[n][1].with_corridor(LAT0 - 2, LAT0 + 2, LON0 - 3, LON0 + 3, 35_000.0,
                                           T0 - 3 * 3600, T0 + 6 * 3600)
        tracemalloc.start()
        t = time.perf_counter()
        members = field.sample(1000, np.random.default_rng(2))
        dt = time.perf_counter() - t
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        k = 1000
        idx = np.arange(k)
        plat = LAT0 + rng.uniform(-1, 1, k)
        plon = LON0 + rng.uniform(-1.5, 1.5, k)
        palt = rng.uniform(0, 30000, k)
        pt = T0 + rng.uniform(0, 3, k) * 3600
        members.wind(idx, plat, plon, palt, pt)
        reps = 300
        t = time.perf_counter()
        for _ in range(reps):
            members.wind(idx, plat, plon, palt, pt)
        per_call = (time.perf_counter() - t) / reps
        print(f"   n_obs {n}: grid {'x'.join(map(str, members.grid.shape))} ({members.grid.size} nodes), "
              f"setup {dt:.2f} s, grids {members.nbytes / 2**20:.0f} MB, peak {peak / 2**20:.0f} MB; "
              f"wind() with 1000 points: {per_call * 1e6:.0f} us per call")


if __name__ == "__main__":
    main(quick="--quick" in sys.argv)
