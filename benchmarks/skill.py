"""Skill benchmark: what the aircraft winds add, in twin experiments on invented cases.

For each case (all invented, seeded by the case number):

1. a truth wind field (:class:`~balloonpath.winds.synthetic.SyntheticAtmosphereField`: jet with a
   meandering axis, shear, horizontal gradients, eddies that change in time) around an invented launch
   site;
2. a background forecast = the truth plus smooth seeded errors of rms ``background_error_sigma(lead)``
   per component (the error the forecast's own uncertainty model claims at that lead time);
3. simulated aircraft flying through the truth (:func:`~balloonpath.winds.traffic.simulate_traffic`), their
   report table written and turned into wind observations by
   :func:`~balloonpath.winds.aircraft.derive_observations` (noise, heading biases and quality control
   included), fused by :func:`~balloonpath.winds.gp.fit_wind_field`;
4. the truth flight: the plan's balloon flown through the truth field (mean winds only);
5. two forecasts with the pipeline (:func:`~balloonpath.forecast.run_forecast`): background only (its
   prior error model) and fused; each scored against the truth landing with :mod:`balloonpath.verify`.

6. spread calibration (``--calibrate-cases K``, default 48): the method of ``verify --many``
   (:func:`balloonpath.verify.fit_spread`: maximum likelihood of a scaled normal or Student-t on the truth
   landings' Mahalanobis distances from their ensembles) fits scale and tails per forecast on K training
   cases numbered from ``TRAIN_FIRST`` (never the scored ones); each scored case is then also forecast with
   that calibration applied to its field (``with_spread_factor(c, nu)``, what ``[ensemble]
   wind_spread_factor`` and ``wind_spread_tail_dof`` do) and scored as ``<name>_calibrated``. This is an
   out-of-sample test of the calibration a team would run on its past flights.

The vertical model is held exact (ensemble ascent/burst/descent spreads set to zero and the truth flies
the plan's rates), so the coverage tests the WIND uncertainty alone, which is what the GP must get right.

Printed: per case the landing errors, the cut in percent and whether the truth landed inside the
50/90/95 % zones; then the median cut and the coverage of each zone for both forecasts, the mean rank
and the mean energy score [GneitingRaftery2007]. Run::

    .venv/bin/python benchmarks/skill.py --workers 2               # 24 scored + 48 training cases
    .venv/bin/python benchmarks/skill.py --cases 96 --calibrate-cases 96 --workers 2 --json A.json
    .venv/bin/python benchmarks/skill.py --calibrate-cases 0       # no calibration (half the time)
    .venv/bin/python benchmarks/skill.py --pool A.json B.json      # cross-validated calibration of saved runs
    .venv/bin/python benchmarks/skill.py --refit-folds A.json B.json --workers 2   # the same, forecasts re-run

With 24 cases the coverage of one zone has a binomial standard deviation of about 10 points at 50 % and 4-6
points at 90-95 % (96 cases: 5 / 3 / 2): read the rank (PIT) mean and histogram beside it.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import tempfile
import time
import warnings
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from balloonpath.atmosphere import StandardAtmosphere
from balloonpath.forecast import LoadedWinds, fly_nominal, run_forecast
from balloonpath.geodesy import inverse
from balloonpath.plan import parse_plan
from balloonpath.verify import (
    ZONE_PROBABILITIES,
    energy_score,
    fit_spread,
    inside_ellipses,
    mahalanobis_d2,
    mahalanobis_rank,
    spread_radius2,
)
from balloonpath.winds.aircraft import derive_observations
from balloonpath.winds.gp import background_error_sigma, fit_wind_field
from balloonpath.winds.gp_kernels import GPHyperparameters
from balloonpath.winds.observations import WindObservations
from balloonpath.winds.synthetic import SyntheticAtmosphereField, misforecast
from balloonpath.winds.traffic import simulate_traffic, write_report_table
from balloonpath.zones import compute_zones

BASE_TIME_S = 1_815_000_000.0  # an invented day in 2027
#: First training case of the spread calibration (its cases never overlap the scored cases 0..N-1).
TRAIN_FIRST = 1_000
LEAD_TIME_H = 12.0
#: Aircraft per case and their reporting (modest counts keep a case to seconds).
N_AIRCRAFT = 16
TRAFFIC_HOURS = 2.0


def _plan(folder: Path, lat: float, lon: float, t0: float, members: int, seed: int):
    """A rates-mode plan with exact vertical parameters (the wind is the only uncertainty)."""
    (folder / "unused.csv").touch()  # the plan needs a wind file; the winds are handed in directly
    from datetime import UTC, datetime

    data = {
        "launch": {"latitude": lat, "longitude": lon, "time": datetime.fromtimestamp(t0, tz=UTC),
                   "elevation_m": 0.0},
        "rates": {"ascent_m_s": 5.0, "burst_altitude_m": 26_000.0, "descent_sea_level_m_s": 5.0},
        "winds": {"sounding": "unused.csv"},
        "ensemble": {"members": members, "seed": seed, "ascent_sigma_fraction": 0.0,
                     "burst_sigma_fraction": 0.0, "descent_sigma_fraction": 0.0, "time_step_s": 20.0},
    }
    return parse_plan(data, folder / "plan.toml")


def _score(result, truth_lat: float, truth_lon: float) -> dict:
    zones = compute_zones(result)
    proj = zones.projection()
    tx, ty = proj.to_local(truth_lat, truth_lon)
    pts = np.column_stack([zones.landing_x_m, zones.landing_y_m])
    err, _ = inverse(result.landing.lat[0], result.landing.lon[0], truth_lat, truth_lon)
    return {
        "d2": mahalanobis_d2(pts, [float(tx), float(ty)]),
        "landing_error_m": float(err),
        "inside": {f"{p:.2f}": v for p, v in inside_ellipses(zones.ellipses, float(tx), float(ty)).items()},
        "rank": mahalanobis_rank(pts, [float(tx), float(ty)]),
        "energy_score_m": energy_score(pts, [float(tx), float(ty)]),
        "zone90_semi_major_m": float(zones.ellipses[1].semi_major_m),
    }


def background_of(truth: SyntheticAtmosphereField, case: int, sigma_m_s: float,
                  error_model: str = "jet+eddies") -> SyntheticAtmosphereField:
    """The background forecast of a case: the truth with a plausible, seeded error.

    ``"eddies"``: the truth plus smooth eddies of rms ``sigma_m_s`` per component
    (:meth:`SyntheticAtmosphereField.perturbed`: horizontal wavelengths 400-1600 km, vertical 3-12 km,
    periods 12-72 h). ``"jet+eddies"`` (default): the jet itself is also misplaced, as in real forecasts
    whose largest errors are a jet a little too strong, too weak, too high or turned: the background is the
    same field (same seed, so the same eddies and meander) with the jet speed off by N(0, (0.06 v_jet)^2),
    its altitude by N(0, (300 m)^2) and its direction by N(0, (3 deg)^2), plus eddies of rms 0.8 sigma; the
    jet error is coherent through the troposphere (vertical scales > 10 km), which the eddies lack.
    """
    if error_model == "eddies":
        return truth.perturbed(seed=1_000 + case, amplitude_m_s=sigma_m_s)
    return misforecast(truth, [7, case], 1_000 + case, 0.8 * sigma_m_s)


@dataclass
class Case:
    """One twin experiment's set-up: truth, background, aircraft winds, both fields, the plan, the truth flight."""

    number: int
    lat0: float
    lon0: float
    t0: float
    jet_alt_m: float
    truth: SyntheticAtmosphereField
    background: SyntheticAtmosphereField
    obs: WindObservations
    fused: object
    prior: object
    plan: object
    truth_trajectory: object
    timings: dict


def build_case(case: int, folder: Path, members: int = 200, hyperparameters: dict | None = None,
               heading_bias_fraction: float = 0.15, error_model: str = "jet+eddies",
               qc_reference: str = "background", shared_platform_error: bool | None = None) -> Case:
    """Steps 1-4 of the module docstring for case ``case`` (deterministic); files go to ``folder``."""
    rng = np.random.default_rng([2027, case])
    lat0 = float(rng.uniform(32.0, 56.0))
    lon0 = float(rng.uniform(-115.0, 25.0))
    t0 = BASE_TIME_S + case * 86_400.0 + float(rng.uniform(0.0, 86_400.0))
    jet_alt = float(rng.uniform(9_500.0, 12_000.0))
    truth = SyntheticAtmosphereField(
        lat0, lon0, t0, seed=100 + case, jet_speed_m_s=float(rng.uniform(30.0, 60.0)),
        jet_altitude_m=jet_alt, jet_direction_deg=float(rng.uniform(240.0, 300.0)),
        surface_wind_m_s=float(rng.uniform(2.0, 8.0)),
    )
    sigma_b = background_error_sigma(LEAD_TIME_H)
    background = background_of(truth, case, sigma_b, error_model)
    timings = {}
    clock = time.perf_counter()
    traffic = simulate_traffic(truth, lat0, lon0, t0 - TRAFFIC_HOURS * 3600.0, TRAFFIC_HOURS * 3600.0, rng,
                               n_aircraft=N_AIRCRAFT, step_s=4.0, heading_bias_fraction=heading_bias_fraction)
    table = write_report_table(traffic, folder / "reports.csv", rng, interval_s=20.0)
    obs, _report = derive_observations([table], background=background if qc_reference == "background" else None)
    timings["aircraft_s"] = time.perf_counter() - clock
    clock = time.perf_counter()
    hp = GPHyperparameters(**hyperparameters) if hyperparameters else None
    shared = {} if shared_platform_error is None else {"shared_platform_error": shared_platform_error}
    fused = fit_wind_field(obs, background, center=(lat0, lon0), lead_time_h=LEAD_TIME_H,
                           hyperparameters=hp, optimize=hp is None, **shared)
    prior = fit_wind_field(WindObservations.empty(), background, center=(lat0, lon0), lead_time_h=LEAD_TIME_H)
    timings["fit_s"] = time.perf_counter() - clock
    plan = _plan(folder, lat0, lon0, t0, members, seed=case + 1)
    truth_traj, _ = fly_nominal(plan, LoadedWinds(truth, StandardAtmosphere(), {}))
    return Case(case, lat0, lon0, t0, jet_alt, truth, background, obs, fused, prior, plan, truth_traj, timings)


def run_case(case: int, members: int = 200, hyperparameters: dict | None = None,
             heading_bias_fraction: float = 0.15, error_model: str = "jet+eddies",
             qc_reference: str = "background", spread_factors: dict | None = None,
             shared_platform_error: bool | None = None, calibrated_only: bool = False) -> dict:
    """One twin experiment; returns the scores of both forecasts (deterministic in ``case``).

    ``spread_factors`` ({"background": (c, nu), "fused": (c, nu)}, fitted on other cases): also run each
    forecast with its field's spread calibrated (``with_spread_factor(c, nu)``; nu None: normal), scored as
    ``"<name>_calibrated"``; ``calibrated_only`` skips the uncalibrated forecasts.
    """
    warnings.simplefilter("ignore")
    with tempfile.TemporaryDirectory() as tmp:
        c = build_case(case, Path(tmp), members, hyperparameters, heading_bias_fraction, error_model, qc_reference,
                       shared_platform_error)
        lat0, lon0, jet_alt, obs, timings, plan = c.lat0, c.lon0, c.jet_alt_m, c.obs, c.timings, c.plan
        prior, fused, truth_traj = c.prior, c.fused, c.truth_trajectory
        clock = time.perf_counter()
        atm = StandardAtmosphere()
        t_lat, t_lon = float(truth_traj.landing_lat[0]), float(truth_traj.landing_lon[0])
        out = {}
        for name, field in (("background", prior), ("fused", fused)):
            if not calibrated_only:
                result = run_forecast(plan, winds=LoadedWinds(field, atm, {"sources": [name]}))
                out[name] = _score(result, t_lat, t_lon)
            if spread_factors:
                c, nu = spread_factors[name]
                scaled = field.with_spread_factor(c, nu)
                result = run_forecast(plan, winds=LoadedWinds(scaled, atm, {"sources": [name], "spread_tail_dof": nu}))
                out[f"{name}_calibrated"] = _score(result, t_lat, t_lon)
        timings["forecasts_s"] = time.perf_counter() - clock
    z = np.asarray(obs.alt_m)
    return {
        "case": case, "latitude": round(lat0, 3), "longitude": round(lon0, 3), "jet_altitude_m": round(jet_alt),
        "observations": len(obs), "obs_near_jet": int(np.count_nonzero(np.abs(z - jet_alt) < 1_500.0)),
        "truth_distance_m": float(inverse(lat0, lon0, t_lat, t_lon)[0]),
        "hyperparameters": fused.hyperparameters.as_dict(), "timings": timings, **out,
    }


def summarise(rows: list[dict]) -> dict:
    """Median cut, coverage, rank and energy score of both forecasts over the cases."""
    out: dict = {"cases": len(rows)}
    bg = np.array([r["background"]["landing_error_m"] for r in rows])
    fu = np.array([r["fused"]["landing_error_m"] for r in rows])
    cut = 100.0 * (1.0 - fu / bg)
    covered = np.array([r["obs_near_jet"] > 0 for r in rows])
    out["median_error_background_km"] = float(np.median(bg) / 1e3)
    out["median_error_fused_km"] = float(np.median(fu) / 1e3)
    out["median_cut_percent"] = float(np.median(cut))
    out["cut_of_median_errors_percent"] = float(100.0 * (1.0 - np.median(fu) / np.median(bg)))
    out["median_cut_percent_jet_covered"] = float(np.median(cut[covered])) if covered.any() else None
    for name in ("background", "fused", "background_calibrated", "fused_calibrated"):
        if name not in rows[0]:
            continue
        keys = [f"{p:.2f}" for p in ZONE_PROBABILITIES]
        cov = {k: float(np.mean([r[name]["inside"][k] for r in rows])) for k in keys}
        ranks = np.array([r[name]["rank"] for r in rows])
        out[name] = {"coverage": cov, "mean_rank": float(np.mean(ranks)),
                     "rank_histogram": np.histogram(ranks, bins=5, range=(0, 1))[0].tolist(),
                     "mean_energy_score_km": float(np.mean([r[name]["energy_score_m"] for r in rows]) / 1e3),
                     "median_zone90_semi_major_km": float(np.median([r[name]["zone90_semi_major_m"]
                                                                      for r in rows]) / 1e3)}
    return out


def main(argv: list[str] | None = None) -> int:
    """Run the benchmark and print the table."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=24)
    ap.add_argument("--first", type=int, default=0, help="number of the first scored case")
    ap.add_argument("--cross-validate", type=int, default=8, metavar="K",
                    help="also print the K-fold cross-validated coverage of the spread calibration over all raw "
                    "cases (scored and training), computed from the distances (no re-run)")
    ap.add_argument("--members", type=int, default=200)
    ap.add_argument("--workers", type=int, default=1, help="processes (the cases are independent)")
    ap.add_argument("--learn", choices=("each", "once"), default="each",
                    help="learn the GP hyperparameters in every case (as the pipeline does), or once on case 0 "
                    "and reuse them (faster)")
    ap.add_argument("--heading-bias-fraction", type=float, default=0.15,
                    help="fraction of aircraft with a 2-4 degree heading bias (traffic generator default 0.15)")
    ap.add_argument("--error-model", choices=("jet+eddies", "eddies"), default="jet+eddies",
                    help="structure of the background error (see background_of)")
    ap.add_argument("--qc-reference", choices=("background", "aircraft"), default="background",
                    help="reference of the aircraft quality control: the background (as the pipeline does) or "
                    "the aircraft's own median profile")
    ap.add_argument("--sigma", type=float, default=None,
                    help="diagnosis: replace the learned signal sd by this value (m/s) in the reused hyperparameters")
    ap.add_argument("--calibrate-cases", type=int, default=48,
                    help=f"training cases (numbered from {TRAIN_FIRST}, disjoint from the scored cases) on which the "
                    "spread factor of each forecast is fitted (verify --many's method); 0: no calibration")
    ap.add_argument("--shared-platform-error", choices=("on", "off"), default=None,
                    help="diagnosis: force the GP's per-aircraft shared error on or off (default: the pipeline's)")
    ap.add_argument("--json", type=Path, default=None, help="also write the rows and summary here")
    ap.add_argument("--refit-folds", type=Path, nargs="+", default=None, metavar="JSON",
                    help="cross-validation with re-run forecasts: pool the cases of earlier --json files, split "
                    "them by case parity, calibrate each half on the other half's distances and re-run its "
                    "forecasts with that calibration")
    ap.add_argument("--pool", type=Path, nargs="+", default=None, metavar="JSON",
                    help="no run: pool the rows (scored and training) of earlier --json files and print the "
                    "--cross-validate K coverage over them (default K = 8)")
    args = ap.parse_args(argv)
    if args.refit_folds:
        return _refit_folds(args)
    if args.pool:
        pooled = load_rows(args.pool)
        k = args.cross_validate if args.cross_validate > 1 else 8
        for name in ("background", "fused"):
            q = [r[name]["d2"] for r in pooled]
            raw = {f"{p:.2f}": float(np.mean([r[name]["inside"][f"{p:.2f}"] for r in pooled]))
                   for p in ZONE_PROBABILITIES}
            fit = fit_spread(q)
            cv = cross_validated_coverage(q, k)
            nu = "normal" if fit.tail_dof is None else f"{fit.tail_dof:.1f}"
            print(f"{name}: {len(pooled)} cases; raw coverage " + "/".join(f"{100 * v:.0f}" for v in raw.values())
                  + f" %; fit on all: scale {fit.scale:.3f} ({fit.scale_interval[0]:.3f}-{fit.scale_interval[1]:.3f}),"
                  f" tails {nu}; {k}-fold cross-validated calibrated coverage "
                  + "/".join(f"{100 * v:.1f}" for v in cv.values()) + " %")
        return 0
    if args.shared_platform_error is not None:
        args.shared_platform_error = args.shared_platform_error == "on"
    start = time.perf_counter()
    factors, fits = None, {}
    train: list[dict] = []
    if args.calibrate_cases > 0:
        train = _run_cases(list(range(TRAIN_FIRST, TRAIN_FIRST + args.calibrate_cases)), args, None, None)
        for name in ("background", "fused"):
            fits[name] = fit_spread([r[name]["d2"] for r in train])
        factors = {name: (fit.scale, fit.tail_dof) for name, fit in fits.items()}
        for name, fit in fits.items():
            nu = "normal" if fit.tail_dof is None else f"{fit.tail_dof:.1f}"
            print(f"spread fitted on {fit.flights} training cases, {name}: scale {fit.scale:.3f} (5-95 %: "
                  f"{fit.scale_interval[0]:.3f}-{fit.scale_interval[1]:.3f}), tails {nu} (5-95 %: "
                  f"{fit.tail_dof_interval[0]:.1f}-{fit.tail_dof_interval[1]:.1f}); training coverage "
                  + "/".join(f"{100 * v:.0f}" for v in fit.coverage.values()) + " % -> "
                  + "/".join(f"{100 * v:.0f}" for v in fit.coverage_fitted.values()) + " %")
    cases = list(range(args.first, args.first + args.cases))
    rows: list[dict] = []
    hp = None
    if args.learn == "once":
        first = run_case(cases[0], args.members, None, args.heading_bias_fraction, args.error_model, args.qc_reference,
                         factors, args.shared_platform_error)
        rows.append(first)
        hp = dict(first["hyperparameters"])
        if args.sigma is not None:
            hp["sigma_m_s"] = float(args.sigma)
        cases = cases[1:]
    rows += _run_cases(cases, args, hp, factors)
    rows.sort(key=lambda r: r["case"])
    elapsed = time.perf_counter() - start

    print(f"{'case':>4} {'obs':>5} {'jet':>4} {'dist km':>8} {'bg err km':>9} {'fused km':>9} {'cut %':>6}"
          f"  bg in 50/90/95  fused in 50/90/95  bg rank  fused rank")
    for r in rows:
        b, f = r["background"], r["fused"]
        cut = 100.0 * (1.0 - f["landing_error_m"] / b["landing_error_m"])

        def flags(s: dict) -> str:
            return "/".join("y" if s["inside"][f"{p:.2f}"] else "n" for p in ZONE_PROBABILITIES)

        cal = (f"  calibrated: bg {flags(r['background_calibrated'])} fused {flags(r['fused_calibrated'])}"
               if "fused_calibrated" in r else "")
        print(f"{r['case']:>4} {r['observations']:>5} {r['obs_near_jet']:>4} {r['truth_distance_m'] / 1e3:>8.1f} "
              f"{b['landing_error_m'] / 1e3:>9.2f} {f['landing_error_m'] / 1e3:>9.2f} {cut:>6.0f}  "
              f"{flags(b):>15}  {flags(f):>17}  {b['rank']:>7.2f}  {f['rank']:>10.2f}{cal}")
    s = summarise(rows)
    print()
    print(f"cases {s['cases']}, members {args.members}, hyperparameters learned {args.learn}, heading-bias "
          f"fraction {args.heading_bias_fraction}, background error {args.error_model}, QC reference "
          f"{args.qc_reference}, "
          f"{elapsed:.0f} s on {args.workers} worker(s)")
    print(f"median landing error: background {s['median_error_background_km']:.2f} km, fused "
          f"{s['median_error_fused_km']:.2f} km; median cut {s['median_cut_percent']:.0f} % (goal >= 60 %), "
          f"cut of the median errors {s['cut_of_median_errors_percent']:.0f} %")
    for name in ("background", "fused", "background_calibrated", "fused_calibrated"):
        if name not in s:
            continue
        d = s[name]
        cov = d["coverage"]
        print(f"{name:>21}: coverage 50/90/95 % zones = " + "/".join(f"{100 * cov[k]:.0f}" for k in cov)
              + f" %; mean rank {d['mean_rank']:.2f} (0.50 calibrated), rank histogram {d['rank_histogram']}, "
              f"mean energy score {d['mean_energy_score_km']:.2f} km, median 90 % semi-major "
              f"{d['median_zone90_semi_major_km']:.1f} km")
    for name in ("background", "fused"):
        if name in fits:
            s[f"{name}_spread_fit"] = fits[name].as_dict()
    if args.cross_validate > 1 and len(rows) + len(train) < max(10, args.cross_validate):
        print(f"cross-validation skipped: {len(rows) + len(train)} cases (needs at least "
              f"{max(10, args.cross_validate)})")
    elif args.cross_validate > 1:
        for name in ("background", "fused"):
            cv = cross_validated_coverage([r[name]["d2"] for r in rows + train], args.cross_validate)
            s[f"{name}_cross_validated"] = cv
            print(f"{name:>21}: {args.cross_validate}-fold cross-validated calibrated coverage over "
                  f"{len(rows) + len(train)} cases = " + "/".join(f"{100 * v:.0f}" for v in cv.values()) + " %")
    n = s["cases"]
    print("binomial sd of a coverage with this many cases: "
          + ", ".join(f"{100 * math.sqrt(p * (1 - p) / n):.0f} pts at {p:.0%}" for p in ZONE_PROBABILITIES))
    if args.json is not None:
        args.json.write_text(json.dumps({"rows": rows, "training_rows": train, "summary": s, "elapsed_s": elapsed},
                                        indent=1) + "\n")
    return 0


def load_rows(paths: list[Path]) -> list[dict]:
    """The case rows (scored and training) of earlier ``--json`` files, each case once, in case order."""
    rows: list[dict] = []
    for path in paths:
        doc = json.loads(path.read_text())
        rows += doc["rows"] + doc.get("training_rows", [])
    return sorted({r["case"]: r for r in rows}.values(), key=lambda r: r["case"])


def _refit_folds(args: argparse.Namespace) -> int:
    """``--refit-folds``: two folds by case parity, each calibrated on the other and re-run."""
    start = time.perf_counter()
    pooled = load_rows(args.refit_folds)
    rows: list[dict] = []
    for fold in (0, 1):
        other = [r for r in pooled if r["case"] % 2 != fold]
        fits = {name: fit_spread([r[name]["d2"] for r in other], n_bootstrap=0) for name in ("background", "fused")}
        factors = {name: (fit.scale, fit.tail_dof) for name, fit in fits.items()}
        print(f"fold {fold}: calibrated on {len(other)} cases: " + "; ".join(
            f"{name} scale {c:.3f}, tails {'normal' if nu is None else f'{nu:.1f}'}"
            for name, (c, nu) in factors.items()))
        rows += _run_cases([r["case"] for r in pooled if r["case"] % 2 == fold], args, None, factors,
                           calibrated_only=True)
    out = {}
    for name in ("background_calibrated", "fused_calibrated"):
        cov = {f"{p:.2f}": float(np.mean([r[name]["inside"][f"{p:.2f}"] for r in rows])) for p in ZONE_PROBABILITIES}
        ranks = [r[name]["rank"] for r in rows]
        out[name] = {"coverage": cov, "mean_rank": float(np.mean(ranks)),
                     "rank_histogram": np.histogram(ranks, bins=5, range=(0, 1))[0].tolist()}
        print(f"{name:>21}: re-run 2-fold cross-validated coverage over {len(rows)} cases = "
              + "/".join(f"{100 * v:.1f}" for v in cov.values()) + f" %; mean rank {out[name]['mean_rank']:.2f}, "
              f"rank histogram {out[name]['rank_histogram']}")
    print(f"{time.perf_counter() - start:.0f} s on {args.workers} worker(s)")
    if args.json is not None:
        args.json.write_text(json.dumps({"rows": rows, "summary": out}, indent=1) + "\n")
    return 0


def cross_validated_coverage(d2: list[float], k: int, seed: int = 0) -> dict[str, float]:
    """Share of cases inside the calibrated 50/90/95 % zones when each fold is calibrated on the others.

    The cases are split into ``k`` seeded random folds; for each, :func:`balloonpath.verify.fit_spread` on
    the other folds gives (c, nu) and a held-out case is inside zone p when its d^2 is below
    ``spread_radius2(p, c, nu)``. This is the zone a calibrated forecast would draw if its members were
    exactly the scaled normal or Student-t (landings respond almost linearly to the winds; the re-run
    forecasts of ``--calibrate-cases`` check it without that approximation).
    """
    q = np.asarray(d2, dtype=float)
    folds = np.random.default_rng(seed).permutation(q.size) % k
    inside = {f"{p:.2f}": 0 for p in ZONE_PROBABILITIES}
    for f in range(k):
        fit = fit_spread(q[folds != f], n_bootstrap=0)
        for p in ZONE_PROBABILITIES:
            inside[f"{p:.2f}"] += int(np.count_nonzero(q[folds == f] <= spread_radius2(p, fit.scale, fit.tail_dof)))
    return {key: v / q.size for key, v in inside.items()}


def _run_cases(cases: list[int], args: argparse.Namespace, hp: dict | None, factors: dict | None,
               calibrated_only: bool = False) -> list[dict]:
    """run_case over ``cases`` (in ``args.workers`` processes), in case order."""
    k = len(cases)
    extra = ([args.members] * k, [hp] * k, [args.heading_bias_fraction] * k, [args.error_model] * k,
             [args.qc_reference] * k, [factors] * k, [args.shared_platform_error] * k, [calibrated_only] * k)
    if args.workers > 1:
        with ProcessPoolExecutor(max_workers=args.workers) as pool:
            return list(pool.map(run_case, cases, *extra))
    return [run_case(c, *(e[i] for e in extra)) for i, c in enumerate(cases)]


if __name__ == "__main__":
    sys.exit(main())
