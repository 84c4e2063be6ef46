"""Where the wind uncertainty is right or wrong: drift errors by altitude layer in the skill benchmark's cases.

For each case of ``benchmarks/skill.py`` (same invented truth, background, aircraft and fields), along the
truth flight's path (time steps dt_k at points p_k) and for each layer L of the ascent and of the descent:

- actual drift error of a forecast's mean wind: e_L = sum_{k in L} (u_truth - u_mean)(p_k) dt_k (east and
  north);
- predicted sd of that drift: sqrt(w_L^T C w_L), C the field's posterior covariance between the path
  points (:meth:`GPWindField.covariance`, one component), w_L the time steps inside L.

The ratio z = e / sd should have rms 1 in every layer when the uncertainty model is right; above 1 the
model is over-confident there, below 1 over-dispersed. The path is the truth's, so feedback of the wind
on the path is left out (first order). Run::

    .venv/bin/python benchmarks/skill_layers.py --cases 48 --workers 2
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
import warnings
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from skill import build_case  # noqa: E402

#: Altitude layers, km (ascent and descent separately).
LAYERS_KM = ((0, 3), (3, 8), (8, 13), (13, 20), (20, 27))


def layer_rows(case: int) -> dict:
    """Per-layer drift errors and predicted sds of both forecasts for one case."""
    warnings.simplefilter("ignore")
    with tempfile.TemporaryDirectory() as tmp:
        c = build_case(case, Path(tmp), members=2)
    tr = c.truth_trajectory.tracks
    lat, lon, z, t = (np.asarray(tr[k][0]) for k in ("lat", "lon", "alt_m", "time_s"))
    ok = np.isfinite(lat)
    lat, lon, z, t = lat[ok], lon[ok], z[ok], t[ok]
    dt = np.gradient(t)
    rising = np.arange(z.size) <= np.argmax(z)
    ut, vt = c.truth.wind(lat, lon, z, t)
    masks = [(f"{'up' if up else 'down'} {lo}-{hi} km", (rising == up) & (z >= lo * 1e3) & (z < hi * 1e3))
             for up in (True, False) for lo, hi in LAYERS_KM]
    masks.append(("whole flight", np.ones(z.size, bool)))
    out: dict = {"case": case, "sigma_m_s": c.fused.hyperparameters.sigma_m_s}
    for name, field in (("background", c.prior), ("fused", c.fused)):
        um, vm = field.wind(lat, lon, z, t)
        cov = field.covariance(lat, lon, z, t)
        rows = {}
        for label, m in masks:
            if not m.any():
                continue
            w = dt * m
            rows[label] = {"error_m": [float(np.sum((ut - um) * w)), float(np.sum((vt - vm) * w))],
                           "sd_m": float(np.sqrt(max(w @ cov @ w, 0.0)))}
        out[name] = rows
    return out


def summarise(results: list[dict]) -> dict:
    """rms z, rms error and rms predicted sd per layer, for both forecasts."""
    out: dict = {}
    for name in ("background", "fused"):
        table = {}
        for label in results[0][name]:
            rows = [r[name][label] for r in results if label in r[name]]
            e = np.array([x["error_m"] for x in rows])
            sd = np.array([x["sd_m"] for x in rows])
            zz = (e / sd[:, None]).ravel()
            table[label] = {"cases": len(rows), "rms_z": float(np.sqrt(np.mean(zz**2))),
                            "median_abs_z_over_0.674": float(np.median(np.abs(zz)) / 0.6745),
                            "rms_error_km": float(np.sqrt(np.mean(e**2)) / 1e3),
                            "rms_sd_km": float(np.sqrt(np.mean(sd**2)) / 1e3)}
        out[name] = table
    return out


def main(argv: list[str] | None = None) -> int:
    """Run the cases and print the table."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=24)
    ap.add_argument("--first", type=int, default=0, help="first case number")
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--json", type=Path, default=None)
    args = ap.parse_args(argv)
    start = time.perf_counter()
    cases = list(range(args.first, args.first + args.cases))
    if args.workers > 1:
        with ProcessPoolExecutor(max_workers=args.workers) as pool:
            results = list(pool.map(layer_rows, cases))
    else:
        results = [layer_rows(c) for c in cases]
    s = summarise(results)
    print(f"cases {args.first}..{args.first + args.cases - 1}, {time.perf_counter() - start:.0f} s; "
          "z = drift error / predicted sd (1 = honest; > 1 over-confident, < 1 over-dispersed)")
    for name in ("background", "fused"):
        print(f"\n{name}:\n{'layer':>16} {'rms z':>6} {'med|z|/.674':>11} {'rms err km':>10} {'rms sd km':>9}")
        for label, d in s[name].items():
            print(f"{label:>16} {d['rms_z']:>6.2f} {d['median_abs_z_over_0.674']:>11.2f} "
                  f"{d['rms_error_km']:>10.2f} {d['rms_sd_km']:>9.2f}")
    if args.json is not None:
        args.json.write_text(json.dumps({"cases": results, "summary": s}, indent=1) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
