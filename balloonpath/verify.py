"""Verification of forecasts against flown flights, calibration of the vertical model, and scores.

A team's flight log (a :class:`~balloonpath.track.FlownTrack`) is compared with the forecast the plan
would have given at launch: landing error, burst errors, vertical speeds by altitude band, horizontal
error against time, where the flown landing falls in the ensemble (zones and rank), and a least-squares
calibration of the drag coefficients (or the rates) to use next time. Over many flights the scores are
pooled into one table (:func:`verify_many`).

Scores
------
- **Energy score** of the landing position (the multivariate CRPS, [GneitingRaftery2007] §4.3; from
  memory): ES(F, y) = E||X - y|| - 1/2 E||X - X'||, X, X' independent draws from the forecast, here the
  ensemble's empirical distribution in the local east/north plane (metres). Lower is better; for a
  point forecast it is the distance error; in one dimension it equals the CRPS.
- **CRPS of the landing distance from launch** ([GneitingRaftery2007] kernel form of the CRPS, eq. 21
  there from memory): CRPS(F, y) = E|X - y| - 1/2 E|X - X'|.
- **Rank (PIT) of the landing**: the fraction of members whose squared Mahalanobis distance from the
  ensemble mean (ensemble covariance, local plane) is smaller than the flown landing's (ties count
  one half). For a calibrated ensemble it is uniform on [0, 1]; the flown landing is inside the p
  ellipse of :mod:`balloonpath.zones` exactly when its Mahalanobis radius is below sqrt(chi2_2(p)),
  so the rank and the zone coverage tell the same story, the rank without binning.

References
----------
[GneitingRaftery2007] T. Gneiting and A. E. Raftery, "Strictly proper scoring rules, prediction, and
    estimation", J. Amer. Statist. Assoc. 102(477):359-378 (2007): the CRPS in kernel form, the
    closed form for a normal forecast and the energy score (from memory).
[KotzNadarajah2004] S. Kotz and S. Nadarajah, Multivariate t Distributions and Their Applications, Cambridge
    University Press 2004: for a p-variate t with nu degrees of freedom, the squared Mahalanobis distance
    over p is F(p, nu) distributed (from memory).
[Gneiting2005] T. Gneiting, A. E. Raftery, A. H. Westveld and T. Goldman, "Calibrated probabilistic
    forecasting using ensemble model output statistics and minimum CRPS estimation", Mon. Wea. Rev.
    133:1098-1118 (2005): spread parameters fitted by minimising a proper score over past cases (from memory).
[NASATerminal], [Knacke1991]: terminal velocity v = sqrt(2 m g / (rho Cd A)) (see
    :mod:`balloonpath.flight.descent`).
"""

from __future__ import annotations

import dataclasses
import json
import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from balloonpath import __version__
from balloonpath.atmosphere import G0, SEA_LEVEL_DENSITY, Atmosphere
from balloonpath.errors import DataQualityWarning, FitWarning, InputDataError, input_error
from balloonpath.fileio import atomic_write_text
from balloonpath.geodesy import inverse
from balloonpath.result import ForecastResult
from balloonpath.timeutil import iso_from_posix
from balloonpath.track import FlownTrack

#: Probabilities of the zones whose coverage is reported.
ZONE_PROBABILITIES = (0.5, 0.9, 0.95)
#: Height of the altitude bands of the vertical-speed comparison, m.
BAND_HEIGHT_M = 2_000.0
#: Descent fixes this soon after burst are left out of the parachute fit (canopy opening, tumbling), s.
DESCENT_SKIP_S = 60.0
#: A track whose last fix is this far above the ground has not landed (warning), m.
LANDED_TOLERANCE_M = 300.0
#: Times (minutes after launch) at which the horizontal track error is shown in the summary.
SUMMARY_MINUTES = (10, 20, 30, 45, 60, 90, 120, 150, 180)


# ------------------------------------------------------------------------------------------ scores
def crps_ensemble(members: np.ndarray, observation: np.ndarray | float) -> np.ndarray:
    """CRPS of an ensemble (its empirical distribution) for a scalar observation.

    Parameters
    ----------
    members : array_like, shape (..., N)
        Ensemble values along the last axis (non-finite values are not allowed).
    observation : array_like, shape (...)
        The verifying value.

    Returns
    -------
    ndarray, shape (...)
        CRPS in the unit of the data (0 for a perfect point forecast).

    Notes
    -----
    Kernel form ([GneitingRaftery2007]): CRPS(F, y) = E|X - y| - 1/2 E|X - X'|. For the empirical
    distribution of x_1..x_N, E|X - X'| = (2 / N^2) sum_i (2 i - N - 1) x_(i) with the sorted values
    x_(1) <= ... <= x_(N), so the cost is O(N log N).
    """
    x = np.sort(np.asarray(members, dtype=float), axis=-1)
    y = np.asarray(observation, dtype=float)[..., None]
    n = x.shape[-1]
    if n == 0:
        raise input_error(None, "members", "the ensemble is empty", "give at least one member")
    first = np.mean(np.abs(x - y), axis=-1)
    i = np.arange(1, n + 1, dtype=float)
    spread = 2.0 / n**2 * np.sum((2.0 * i - n - 1.0) * x, axis=-1)
    return first - 0.5 * spread


def crps_gaussian(mean: np.ndarray | float, sd: np.ndarray | float,
                  observation: np.ndarray | float) -> np.ndarray:
    """CRPS of a normal forecast N(mean, sd^2) in closed form.

    Notes
    -----
    With z = (y - mu) / sigma ([GneitingRaftery2007], the normal case; from memory):
    CRPS = sigma [z (2 Phi(z) - 1) + 2 phi(z) - 1 / sqrt(pi)].
    """
    from scipy.stats import norm

    mu = np.asarray(mean, dtype=float)
    s = np.asarray(sd, dtype=float)
    z = (np.asarray(observation, dtype=float) - mu) / s
    return s * (z * (2.0 * norm.cdf(z) - 1.0) + 2.0 * norm.pdf(z) - 1.0 / math.sqrt(math.pi))


def energy_score(members_xy: np.ndarray, observation_xy: np.ndarray, chunk: int = 1024) -> float:
    """Energy score of an ensemble of points for an observed point (any dimension).

    Parameters
    ----------
    members_xy : array_like, shape (N, d)
        Member points (e.g. east/north metres of the landings).
    observation_xy : array_like, shape (d,)
        The observed point.
    chunk : int
        Rows per block of the pairwise distances (memory O(chunk N)).

    Returns
    -------
    float
        ES = (1/N) sum_i ||x_i - y|| - 1 / (2 N^2) sum_ij ||x_i - x_j|| ([GneitingRaftery2007], the
        energy score with beta = 1); equal to :func:`crps_ensemble` when d = 1.
    """
    x = np.atleast_2d(np.asarray(members_xy, dtype=float))
    y = np.asarray(observation_xy, dtype=float).ravel()
    n = x.shape[0]
    if n == 0:
        raise input_error(None, "members", "the ensemble is empty", "give at least one member")
    first = float(np.mean(np.linalg.norm(x - y, axis=1)))
    return first - 0.5 * mean_pairwise_distance(x, chunk)


def mean_pairwise_distance(points: np.ndarray, chunk: int = 1024) -> float:
    """(1 / N^2) sum_ij ||x_i - x_j|| of points (N, d), in blocks of ``chunk`` rows (memory O(chunk N))."""
    x = np.atleast_2d(np.asarray(points, dtype=float))
    n = x.shape[0]
    pair = 0.0
    for a in range(0, n, chunk):
        block = x[a:a + chunk]
        pair += float(np.sum(np.sqrt(np.sum((block[:, None, :] - x[None, :, :]) ** 2, axis=-1))))
    return pair / n**2


# ------------------------------------------------------------------------------ spread calibration
#: Fewer verified flights than this: no spread is fitted.
MIN_FLIGHTS_FOR_SPREAD = 5
#: Allowed range of the fitted scale (the plan key's bounds).
SPREAD_FACTOR_BOUNDS = (0.1, 10.0)
#: Degrees of freedom searched for the tails (log-spaced grid); at the top end the fit is called Gaussian.
TAIL_DOF_GRID = np.geomspace(2.5, 1000.0, 61)
#: A fitted nu at or above this is reported as Gaussian (no tail key in the plan lines).
TAIL_DOF_GAUSSIAN = 200.0


def spread_negative_log_likelihood(d2: np.ndarray, scale: float, tail_dof: float | None) -> float:
    """-log likelihood of squared Mahalanobis distances under a scaled bivariate normal or Student-t.

    Parameters
    ----------
    d2 : array_like
        Squared Mahalanobis distances of the flown landings from their ensembles (ensemble mean and
        covariance, :func:`mahalanobis_d2`).
    scale : float
        c: the landing error is distributed as c times the ensemble's spread.
    tail_dof : float or None
        nu of a bivariate Student-t with scale matrix c^2 S; None: normal with covariance c^2 S.

    Returns
    -------
    float
        -sum log f(d2_i), with f the density of d2: normal: exp(-q / (2 c^2)) / (2 c^2) (chi-square with 2
        degrees of freedom, scaled); Student-t: (1 + q / (nu c^2))^(-nu/2 - 1) / (2 c^2) (q / (2 c^2) is
        F(2, nu) distributed) [KotzNadarajah2004] (from memory; checked against scipy.stats.f in the tests).
    """
    q = np.asarray(d2, dtype=float)
    c2 = float(scale) ** 2
    if tail_dof is None:
        return float(np.sum(np.log(2.0 * c2) + q / (2.0 * c2)))
    nu = float(tail_dof)
    return float(np.sum(np.log(2.0 * c2) + (0.5 * nu + 1.0) * np.log1p(q / (nu * c2))))


def spread_radius2(probability: float, scale: float, tail_dof: float | None) -> float:
    """Squared Mahalanobis radius holding ``probability`` of the scaled normal / Student-t of
    :func:`spread_negative_log_likelihood`: c^2 chi2_2^-1(p) = -2 c^2 ln(1 - p), or nu c^2 ((1 - p)^(-2/nu) - 1)."""
    p, c2 = float(probability), float(scale) ** 2
    if tail_dof is None:
        return -2.0 * c2 * math.log1p(-p)
    nu = float(tail_dof)
    return nu * c2 * ((1.0 - p) ** (-2.0 / nu) - 1.0)


def _best_scale(q: np.ndarray, nu: float | None) -> tuple[float, float]:
    from scipy.optimize import minimize_scalar

    if nu is None:  # closed form: c^2 = mean(q) / 2
        c = float(np.clip(math.sqrt(max(float(np.mean(q)), 1e-300) / 2.0), *SPREAD_FACTOR_BOUNDS))
        return c, spread_negative_log_likelihood(q, c, None)
    lo, hi = (math.log(b) for b in SPREAD_FACTOR_BOUNDS)
    res = minimize_scalar(lambda lc: spread_negative_log_likelihood(q, math.exp(lc), nu), bounds=(lo, hi),
                          method="bounded", options={"xatol": 1e-5})
    return float(math.exp(res.x)), float(res.fun)


def _fit(q: np.ndarray) -> tuple[float, float | None]:
    """(scale, nu or None) maximising the likelihood: profile over the nu grid and the normal limit."""
    best_c, best_f = _best_scale(q, None)
    best_nu: float | None = None
    for nu in TAIL_DOF_GRID:
        c, f = _best_scale(q, float(nu))
        if f < best_f - 1e-9:
            best_c, best_f, best_nu = c, f, float(nu)
    if best_nu is not None and best_nu >= TAIL_DOF_GAUSSIAN:
        best_c, best_nu = _best_scale(q, None)[0], None
    return best_c, best_nu


@dataclass(frozen=True)
class SpreadFit:
    """Scale and tails of the landing error relative to the ensemble's spread, fitted over flights.

    ``scale`` c and ``tail_dof`` nu (None: normal) are maximum-likelihood estimates; the intervals are 5-95 %
    bootstrap intervals over flights (``tail_dof_interval`` upper end ``inf`` when resamples called it
    normal). ``coverage`` is the share of flights inside each zone as forecast, ``coverage_fitted`` with the
    fitted radii (in sample).
    """

    scale: float
    scale_interval: tuple[float, float]
    tail_dof: float | None
    tail_dof_interval: tuple[float, float]
    flights: int
    coverage: dict[str, float]
    coverage_fitted: dict[str, float]
    bootstrap: int

    def as_dict(self) -> dict[str, Any]:
        """Plain dict (JSON; an infinite bound as null)."""
        def fin(x: float) -> float | None:
            return x if math.isfinite(x) else None

        return {"scale": self.scale, "scale_interval_5_95": list(self.scale_interval), "tail_dof": self.tail_dof,
                "tail_dof_interval_5_95": [fin(x) for x in self.tail_dof_interval], "flights": self.flights,
                "coverage": self.coverage, "coverage_fitted": self.coverage_fitted,
                "bootstrap_resamples": self.bootstrap,
                "method": "maximum likelihood, bivariate normal or Student-t scale mixture of the ensemble spread"}


def fit_spread(d2: np.ndarray, n_bootstrap: int = 200, seed: int = 0) -> SpreadFit:
    """Fit the scale and tails of the flown landings' distances from their ensembles.

    Parameters
    ----------
    d2 : array_like
        One squared Mahalanobis distance per verified flight (:func:`mahalanobis_d2`), relative to the
        ensemble's own (uncalibrated) spread.
    n_bootstrap : int
        Resamples of the flights for the intervals (seeded: deterministic).
    seed : int
        Seed of the resampling.

    Returns
    -------
    SpreadFit

    Notes
    -----
    Model: the flown landing minus the ensemble mean is bivariate normal with covariance c^2 S, or Student-t
    with scale c^2 S and nu degrees of freedom (a normal whose variance varies from flight to flight, as
    when the forecast error of the day is uncertain), S the ensemble covariance. Maximum likelihood on the
    squared distances (:func:`spread_negative_log_likelihood`): closed form for the normal, profile over a
    log grid of nu (2.5-1000, 61 values) with a bounded 1-D search of c for the Student-t; nu >= 200 is
    reported as normal. This is the distributional calibration of ensemble output by scoring past cases,
    as in [Gneiting2005] (which fits a normal spread by minimum CRPS); a scale alone cannot fix zones whose
    core is too wide while their tails are right, which the tails parameter can. Apply with ``[ensemble]
    wind_spread_factor = c`` and ``wind_spread_tail_dof = nu`` (:func:`spread_advice`).
    """
    q = np.asarray(d2, dtype=float)
    q = q[np.isfinite(q)]
    if q.size < MIN_FLIGHTS_FOR_SPREAD:
        raise input_error(None, "flights", f"{q.size} verified flights are too few to fit the spread",
                          f"verify at least {MIN_FLIGHTS_FOR_SPREAD} flights")
    c, nu = _fit(q)
    rng = np.random.default_rng(seed)
    cs, nus = [], []
    for _ in range(n_bootstrap):
        cb, nub = _fit(q[rng.integers(0, q.size, q.size)])
        cs.append(cb)
        nus.append(math.inf if nub is None else nub)
    keys = [f"{p:.2f}" for p in ZONE_PROBABILITIES]
    return SpreadFit(
        scale=c, scale_interval=tuple(float(v) for v in np.quantile(cs, [0.05, 0.95])) if cs else (c, c),
        tail_dof=nu,
        tail_dof_interval=(tuple(float(v) for v in np.quantile(nus, [0.05, 0.95], method="inverted_cdf"))
                           if nus else (math.inf, math.inf)),
        flights=int(q.size),
        coverage={k: float(np.mean(q <= spread_radius2(p, 1.0, None))) for k, p in zip(keys, ZONE_PROBABILITIES,
                                                                                        strict=True)},
        coverage_fitted={k: float(np.mean(q <= spread_radius2(p, c, nu))) for k, p in zip(keys, ZONE_PROBABILITIES,
                                                                                           strict=True)},
        bootstrap=int(n_bootstrap),
    )


def mahalanobis_d2(members_xy: np.ndarray, observation_xy: np.ndarray) -> float:
    """Squared Mahalanobis distance of a point from an ensemble of points (mean and covariance, N - 1).

    The covariance is regularised as in :func:`mahalanobis_rank`.
    """
    x = np.atleast_2d(np.asarray(members_xy, dtype=float))
    x = x[np.all(np.isfinite(x), axis=1)]
    if x.shape[0] < 3:
        raise input_error(None, "members", f"{x.shape[0]} points are too few for a distance",
                          "run the forecast with more members")
    d = np.asarray(observation_xy, dtype=float).ravel() - x.mean(axis=0)
    s = np.cov(x, rowvar=False, ddof=1)
    s = s + (1e-9 * np.trace(s) + 1.0) * np.eye(s.shape[0])
    return float(d @ np.linalg.solve(s, d))


def mahalanobis_rank(members_xy: np.ndarray, observation_xy: np.ndarray) -> float:
    """Rank (PIT value) of an observed point among ensemble points by Mahalanobis distance.

    Parameters
    ----------
    members_xy : array_like, shape (N, 2)
        Member points in a local plane, m.
    observation_xy : array_like, shape (2,)
        The observed point in the same plane.

    Returns
    -------
    float
        (number of members with d^2 < d^2_obs + half the number with d^2 = d^2_obs) / N, where
        d^2 = (x - m)^T S^-1 (x - m) with the ensemble mean m and covariance S (divisor N - 1). 0 means
        the observation is at the ensemble's centre, 1 that it is farther out than every member.

    Notes
    -----
    For a calibrated ensemble the value is uniform on [0, 1]; too many values near 1 mean the ensemble
    is too narrow (over-confident), too many near 0 that it is too wide. A singular covariance (all
    members on a line or a point) is regularised by 1e-9 of its trace (plus 1 m^2).
    """
    x = np.atleast_2d(np.asarray(members_xy, dtype=float))
    y = np.asarray(observation_xy, dtype=float).ravel()
    if x.shape[0] < 3:
        raise input_error(None, "members", f"{x.shape[0]} points are too few for a rank",
                          "run the forecast with more members")
    m = x.mean(axis=0)
    s = np.cov(x, rowvar=False, ddof=1)
    s = s + (1e-9 * np.trace(s) + 1.0) * np.eye(s.shape[0])
    inv = np.linalg.inv(s)
    d = x - m
    d2 = np.einsum("ij,jk,ik->i", d, inv, d)
    e = y - m
    d2y = float(e @ inv @ e)
    tol = 1e-12 * max(d2y, 1.0)
    below = np.count_nonzero(d2 < d2y - tol)
    tie = np.count_nonzero(np.abs(d2 - d2y) <= tol)
    return float((below + 0.5 * tie) / x.shape[0])


def inside_ellipses(ellipses: Any, x: float, y: float) -> dict[float, bool]:
    """Which probability ellipses contain the local point (x, y): {probability: inside}."""
    return {float(e.probability): bool(e.contains(x, y)) for e in ellipses}


# ----------------------------------------------------------------------------------- track reading
def read_flown_track(path: str | Path) -> FlownTrack:
    """Read a flown track (CSV ``time,latitude,longitude,altitude_m``, APRS log or DWD radiosonde file).

    Thin wrapper of :func:`balloonpath.telemetry.read_track` (format detection, skipped-line counts);
    lines the reader skipped are reported as one :class:`~balloonpath.errors.DataQualityWarning`.
    """
    from balloonpath.telemetry import read_track

    track, report = read_track(path)
    if report.total_skipped:
            warnings.warn(report.describe(), DataQualityWarning, stacklevel=2)
    if len(track) < 3:
        raise input_error(path, "fixes", f"only {len(track)} usable fixes", "give the whole flight")
    return track


def write_track_csv(track: FlownTrack, path: str | Path) -> Path:
    """Write a flown track as ``time,latitude,longitude,altitude_m`` (readable by :func:`read_flown_track`)."""
    from datetime import UTC, datetime

    lines = ["time,latitude,longitude,altitude_m"]
    for t, la, lo, z in zip(track.time_s, track.lat, track.lon, track.alt_m, strict=True):
        stamp = datetime.fromtimestamp(float(t), tz=UTC).isoformat(timespec="microseconds").replace("+00:00", "Z")
        lines.append(f"{stamp},{la:.8f},{lo:.8f},{z:.3f}")
    return atomic_write_text(path, "\n".join(lines) + "\n")


# ------------------------------------------------------------------------------- flight features
@dataclass(frozen=True)
class FlightEvents:
    """Indices of the phases of a track: ``burst`` is where descent begins (highest point; for a float,
    its last point), ``landing`` is the last fix."""

    burst: int
    landing: int


def flight_events(alt_m: np.ndarray, tolerance_m: float = 25.0) -> FlightEvents:
    """Burst (start of descent) and landing indices of a track.

    The start of descent is the last fix within ``tolerance_m`` of the track's highest altitude (the
    highest point for a burst; the end of a float), found after the first maximum.
    """
    z = np.asarray(alt_m, dtype=float)
    top = int(np.nanargmax(z))
    near = np.flatnonzero(z[top:] >= z[top] - tolerance_m)
    # Stop at the first gap: the descent leaves the top band for good.
    run = near[: np.argmax(np.diff(np.concatenate([near, [near[-1] + 2]])) > 1) + 1]
    return FlightEvents(burst=top + int(run[-1]), landing=int(z.size - 1))


def band_speeds(time_s: np.ndarray, alt_m: np.ndarray, edges_m: np.ndarray, rising: bool) -> np.ndarray:
    """Mean vertical speed (m/s, positive) through each altitude band of one branch of a flight.

    Parameters
    ----------
    time_s, alt_m : array_like
        The branch (ascent: launch to burst; descent: burst to landing), time increasing.
    edges_m : array_like, shape (B + 1,)
        Band edges, increasing.
    rising : bool
        True for the ascent branch.

    Returns
    -------
    ndarray, shape (B,)
        Band height / time to cross it; NaN for bands the branch does not fully cross.

    Notes
    -----
    The crossing times of the edges are interpolated linearly in altitude on the branch made monotone
    (running maximum for the ascent, running minimum for the descent), so brief reversals from noise
    do not break the interpolation.
    """
    t = np.asarray(time_s, dtype=float)
    z = np.asarray(alt_m, dtype=float)
    e = np.asarray(edges_m, dtype=float)
    if t.size < 2:
        return np.full(e.size - 1, np.nan)
    if rising:
        zm = np.maximum.accumulate(z)
        tz = np.interp(e, zm, t, left=np.nan, right=np.nan)
    else:
        zm = np.minimum.accumulate(z)
        tz = np.interp(e, zm[::-1], t[::-1], left=np.nan, right=np.nan)
    lo, hi = z.min(), z.max()
    tz = np.where((e >= lo) & (e <= hi), tz, np.nan)
    dt = np.abs(np.diff(tz))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(dt > 0, np.diff(e) / dt, np.nan)


def track_error_vs_time(forecast_time_s: np.ndarray, forecast_lat: np.ndarray, forecast_lon: np.ndarray,
                        flown: FlownTrack, launch_time_s: float, flown_launch_time_s: float,
                        step_s: float = 60.0) -> tuple[np.ndarray, np.ndarray]:
    """Horizontal distance between forecast and flown positions at equal times after launch.

    Returns
    -------
    (minutes, distance_m) : ndarrays
        Every ``step_s`` from launch to the end of the shorter of the two tracks. Positions are
        interpolated linearly in latitude and (unwrapped) longitude between fixes.
    """
    ft = np.asarray(forecast_time_s, dtype=float) - launch_time_s
    tt = np.asarray(flown.time_s, dtype=float) - flown_launch_time_s
    end = min(ft[-1], tt[-1])
    if end <= 0:
        return np.zeros(0), np.zeros(0)
    grid = np.arange(0.0, end + 1e-9, step_s)
    if grid[-1] < end:
        grid = np.append(grid, end)

    def at(times: np.ndarray, lat: np.ndarray, lon: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        lon_u = np.degrees(np.unwrap(np.radians(np.asarray(lon, dtype=float))))
        return np.interp(grid, times, lat), np.interp(grid, times, lon_u)

    a_lat, a_lon = at(ft, forecast_lat, forecast_lon)
    b_lat, b_lon = at(tt, flown.lat, flown.lon)
    dist, _ = inverse(a_lat, a_lon, b_lat, b_lon)
    return grid / 60.0, np.asarray(dist, dtype=float)


# ------------------------------------------------------------------------------------ calibration
@dataclass(frozen=True)
class RateFit:
    """A speed law fitted by least squares: value, its standard error, residual rms, intervals used."""

    value: float
    standard_error: float
    rms_residual_m_s: float
    n_intervals: int


def _intervals(time_s: np.ndarray, alt_m: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    t = np.asarray(time_s, dtype=float)
    z = np.asarray(alt_m, dtype=float)
    dt = np.diff(t)
    ok = dt > 0
    w = np.where(ok, np.diff(z) / np.where(ok, dt, 1.0), np.nan)
    return 0.5 * (z[1:] + z[:-1]), w, ok


def sea_level_descent_rate_from_track(time_s: np.ndarray, alt_m: np.ndarray,
                                      atmosphere: Atmosphere) -> RateFit:
    """Fit the sea-level descent rate v0 of the law v = v0 sqrt(rho0 / rho(z)) to a flown descent.

    Parameters
    ----------
    time_s, alt_m : array_like
        Descent fixes (time increasing), without the first moments after burst.
    atmosphere : Atmosphere
        The air (the day's sounding if the forecast had one).

    Returns
    -------
    RateFit
        v0 (m/s) with its standard error.

    Notes
    -----
    Observed speeds w_i = -dz/dt at interval midpoints z_i; with g_i = sqrt(rho0 / rho(z_i)) the least
    squares estimate of v0 in w = v0 g is v0 = sum g_i w_i / sum g_i^2, and its standard error
    s / sqrt(sum g_i^2) with s^2 = sum (w_i - v0 g_i)^2 / (n - 1) (ordinary least squares, one
    parameter). The intervals are treated as independent; successive GPS fixes are not quite, so the
    standard error is a lower bound. rho0 = 1.2250 kg m-3 [NOAA1976].
    """
    zm, w, ok = _intervals(time_s, alt_m)
    w = -w
    use = ok & np.isfinite(w) & (w > 0)
    if np.count_nonzero(use) < 3:
        raise input_error(None, "flown track", "has fewer than three descending intervals",
                          "give the descent fixes down to the ground", cls=InputDataError)
    rho = np.asarray(atmosphere.state(zm[use]).density_kg_m3, dtype=float)
    g = np.sqrt(SEA_LEVEL_DENSITY / rho)
    w = w[use]
    v0 = float(np.sum(g * w) / np.sum(g * g))
    res = w - v0 * g
    n = w.size
    s = float(np.sqrt(np.sum(res**2) / max(n - 1, 1)))
    return RateFit(v0, s / float(np.sqrt(np.sum(g * g))), float(np.sqrt(np.mean(res**2))), n)


def parachute_drag_coefficient(sea_level_rate_m_s: float, mass_kg: float, diameter_m: float) -> float:
    """Parachute drag coefficient (nominal area) giving a sea-level descent rate.

    Notes
    -----
    From m g0 = 1/2 rho0 v0^2 Cd S0 ([NASATerminal], [Knacke1991] §4): Cd = 2 m g0 / (rho0 S0 v0^2),
    S0 = pi D0^2 / 4.
    """
    area = math.pi * diameter_m**2 / 4.0
    return 2.0 * mass_kg * G0 / (SEA_LEVEL_DENSITY * area * sea_level_rate_m_s**2)


def ascent_rate_from_track(time_s: np.ndarray, alt_m: np.ndarray) -> tuple[RateFit, RateFit]:
    """Effective ascent-rate law w = a + b (z - z_mid) of a flown ascent (rates mode).

    Returns
    -------
    (mean, slope) : RateFit
        ``mean.value`` = a, the time-weighted mean ascent rate (m/s) = (z_top - z_start) / (t_top -
        t_start); ``slope.value`` = b in m/s per km from the least-squares line of the interval rates
        against altitude, with standard errors from the residuals (intervals taken as independent).
    """
    t = np.asarray(time_s, dtype=float)
    z = np.asarray(alt_m, dtype=float)
    zm, w, ok = _intervals(t, z)
    use = ok & np.isfinite(w)
    if np.count_nonzero(use) < 3:
        raise input_error(None, "flown track", "has fewer than three ascending intervals",
                          "give the ascent fixes from launch to burst", cls=InputDataError)
    dt = np.diff(t)[use]
    a = float((z[-1] - z[0]) / (t[-1] - t[0]))
    zk = (zm[use] - np.average(zm[use], weights=dt)) / 1e3
    ww = w[use]
    design = np.column_stack([np.ones_like(zk), zk])
    coef, *_ = np.linalg.lstsq(design * np.sqrt(dt)[:, None], ww * np.sqrt(dt), rcond=None)
    res = ww - design @ coef
    n = ww.size
    s2 = float(np.sum(dt * res**2) / max(np.sum(dt), 1e-9) * n / max(n - 2, 1))
    cov = s2 * np.linalg.inv(design.T @ (design * (dt / dt.mean())[:, None]))
    rms = float(np.sqrt(np.mean(res**2)))
    return (RateFit(a, float(np.sqrt(cov[0, 0])), rms, n), RateFit(float(coef[1]), float(np.sqrt(cov[1, 1])), rms, n))


@dataclass(frozen=True)
class Calibration:
    """Vertical-model values fitted to a flown track, with the plan lines to use next time.

    ``values`` maps a name to {"value", "standard_error", "plan_value", ...}; ``plan_lines`` is TOML.
    """

    mode: str
    values: dict[str, dict[str, float]]
    plan_lines: str
    notes: tuple[str, ...] = ()


def calibrate(plan: Any, params: Any, flown: FlownTrack, atmosphere: Atmosphere,
              events: FlightEvents | None = None) -> Calibration:
    """Fit the ascent and descent laws of the plan's mode to a flown vertical profile.

    Physics mode: the ascent drag coefficient by :func:`balloonpath.flight.lift.drag_coefficient_from_track`
    (with the plan's free lift and gas amount) and the parachute drag coefficient from the fitted
    sea-level descent rate (:func:`sea_level_descent_rate_from_track`, :func:`parachute_drag_coefficient`).
    Rates mode: the effective ascent rate (with its trend in altitude), the flown burst altitude and the
    sea-level descent rate.

    Notes
    -----
    Standard error of the ascent Cd: the fit solves for s = Cd^(-1/2) in w = k(z) s (closed-form least
    squares), se(s) = sigma_res / sqrt(sum k^2), and by the delta method se(Cd) = 2 Cd se(s) / s. The
    parachute Cd follows from v0 the same way: se(Cd) = 2 Cd se(v0) / v0.
    """
    ev = events or flight_events(flown.alt_m)
    t = np.asarray(flown.time_s, dtype=float)
    z = np.asarray(flown.alt_m, dtype=float)
    up_t, up_z = t[: ev.burst + 1], z[: ev.burst + 1]
    after = (t > t[ev.burst] + DESCENT_SKIP_S) & (np.arange(t.size) >= ev.burst)
    down_t, down_z = t[after], z[after]
    notes: list[str] = []
    values: dict[str, dict[str, float]] = {}
    lines: list[str] = []
    descent = sea_level_descent_rate_from_track(down_t, down_z, atmosphere)
    values["descent_sea_level_m_s"] = {
        "value": descent.value, "standard_error": descent.standard_error,
        "plan_value": float(params.descent_sea_level_m_s[0]), "rms_residual_m_s": descent.rms_residual_m_s,
        "intervals": descent.n_intervals,
    }
    if params.mode == "physics":
        from balloonpath.flight.lift import drag_coefficient_from_track

        fit = drag_coefficient_from_track(up_z, up_t, float(params.free_lift_kg[0]),
                                          float(params.gas_amount_mol[0]), atmosphere=atmosphere,
                                          drag_model=params.drag_model,
                                          reference_reynolds=float(params.drag_reference_reynolds[0]))
        k = fit.ascent_rate_m_s * np.sqrt(fit.local_drag_coefficient)
        s = 1.0 / math.sqrt(fit.drag_coefficient)
        n = fit.ascent_rate_m_s.size
        sigma = fit.rms_residual_m_s * math.sqrt(n / max(n - 1, 1))
        se_s = sigma / float(np.sqrt(np.sum(k * k)))
        values["ascent_drag_coefficient"] = {
            "value": fit.drag_coefficient, "standard_error": 2.0 * fit.drag_coefficient * se_s / s,
            "plan_value": float(params.ascent_drag_coefficient[0]), "rms_residual_m_s": fit.rms_residual_m_s,
            "intervals": n,
        }
        chute = plan.parachute
        mass = plan.payload.mass_kg
        cd = parachute_drag_coefficient(descent.value, mass, chute.diameter_m)
        values["parachute_drag_coefficient"] = {
            "value": cd, "standard_error": 2.0 * cd * descent.standard_error / descent.value,
            "plan_value": float(chute.drag_coefficient), "rms_residual_m_s": descent.rms_residual_m_s,
            "intervals": descent.n_intervals,
        }
        a = values["ascent_drag_coefficient"]
        pc = values["parachute_drag_coefficient"]
        lines += ["[balloon]",
                  f"drag_coefficient = {a['value']:.3f}    # fitted +- {a['standard_error']:.3f} "
                  f"(plan {a['plan_value']:.3f})",
                  "", "[parachute]",
                  f"drag_coefficient = {cd:.3f}    # fitted +- {pc['standard_error']:.3f}"
                  f" (plan {chute.drag_coefficient:.3f})"]
        notes.append("the ascent fit takes the plan's fill (free lift, gas amount) as exact; an error in "
                     "the measured neck lift shows up as a different drag coefficient")
    else:
        mean, slope = ascent_rate_from_track(up_t, up_z)
        values["ascent_m_s"] = {"value": mean.value, "standard_error": mean.standard_error,
                                "plan_value": float(params.ascent_rate_m_s[0]),
                                "rms_residual_m_s": mean.rms_residual_m_s, "intervals": mean.n_intervals}
        values["ascent_trend_m_s_per_km"] = {"value": slope.value, "standard_error": slope.standard_error,
                                             "plan_value": 0.0, "rms_residual_m_s": slope.rms_residual_m_s,
                                             "intervals": slope.n_intervals}
        values["burst_altitude_m"] = {"value": float(z[ev.burst]), "standard_error": float("nan"),
                                      "plan_value": float(params.burst_altitude_m[0]),
                                      "rms_residual_m_s": float("nan"), "intervals": 1}
        lines += ["[rates]",
                  f"ascent_m_s = {mean.value:.2f}    # flown mean +- {mean.standard_error:.2f} "
                  f"(plan {params.ascent_rate_m_s[0]:.2f})",
                  f"burst_altitude_m = {z[ev.burst]:.0f}    # flown (plan {params.burst_altitude_m[0]:.0f})",
                  f"descent_sea_level_m_s = {descent.value:.2f}    # fitted +- {descent.standard_error:.2f} "
                  f"(plan {params.descent_sea_level_m_s[0]:.2f})"]
        if abs(slope.value) > 2.0 * slope.standard_error and abs(slope.value) > 0.05:
            notes.append(f"the ascent rate changed by {slope.value:+.2f} m/s per km of altitude; a constant "
                         "rate is an approximation (physics mode models the change)")
    return Calibration(params.mode, values, "\n".join(lines), tuple(notes))


# ----------------------------------------------------------------------------------- verification
@dataclass(frozen=True)
class Verification:
    """Everything :func:`verify_flight` found; :meth:`to_dict` is ``verify.json``."""

    plan: str
    track_source: str
    launch_time_s: float
    members: int
    seed: int
    forecast_landing: tuple[float, float]
    flown_landing: tuple[float, float]
    landing_error_m: float
    landing_error_bearing_deg: float  # NaN when the error is under 1 m
    landing_error_east_m: float
    landing_error_north_m: float
    landing_time_error_s: float
    burst_altitude_error_m: float
    burst_time_error_s: float
    burst_position_error_m: float
    band_edges_m: np.ndarray
    ascent_speed_forecast_m_s: np.ndarray
    ascent_speed_flown_m_s: np.ndarray
    descent_speed_forecast_m_s: np.ndarray
    descent_speed_flown_m_s: np.ndarray
    error_minutes: np.ndarray
    error_distance_m: np.ndarray
    inside: dict[float, bool]
    rank: float
    mahalanobis_d2: float
    energy_score_m: float
    crps_distance_m: float
    calibration: Calibration | None
    warnings: tuple[str, ...] = field(default_factory=tuple)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (finite floats rounded, NaN as null)."""

        def r(x: float, nd: int = 3) -> float | None:
            return None if x is None or not math.isfinite(float(x)) else round(float(x), nd) + 0.0

        def arr(a: np.ndarray, nd: int = 3) -> list[float | None]:
            return [r(v, nd) for v in np.asarray(a, dtype=float)]

        bands = [
            {"bottom_m": r(lo, 1), "top_m": r(hi, 1),
             "ascent_forecast_m_s": r(af), "ascent_flown_m_s": r(ao), "ascent_error_m_s": r(ao - af),
             "descent_forecast_m_s": r(df), "descent_flown_m_s": r(do), "descent_error_m_s": r(do - df)}
            for lo, hi, af, ao, df, do in zip(
                self.band_edges_m[:-1], self.band_edges_m[1:], self.ascent_speed_forecast_m_s,
                self.ascent_speed_flown_m_s, self.descent_speed_forecast_m_s, self.descent_speed_flown_m_s,
                strict=True)
            if math.isfinite(af) or math.isfinite(ao) or math.isfinite(df) or math.isfinite(do)
        ]
        cal = None
        if self.calibration is not None:
            cal = {"mode": self.calibration.mode,
                   "values": {k: {kk: r(vv, 4) for kk, vv in v.items()} for k, v in self.calibration.values.items()},
                   "plan_lines": self.calibration.plan_lines, "notes": list(self.calibration.notes)}
        return {
            "balloonpath_version": __version__,
            "plan": self.plan,
            "track": self.track_source,
            "launch_time": iso_from_posix(self.launch_time_s),
            "members": self.members,
            "seed": self.seed,
            "landing": {
                "forecast": {"latitude": r(self.forecast_landing[0], 6), "longitude": r(self.forecast_landing[1], 6)},
                "flown": {"latitude": r(self.flown_landing[0], 6), "longitude": r(self.flown_landing[1], 6)},
                "error_m": r(self.landing_error_m, 1),
                "error_bearing_deg": r(self.landing_error_bearing_deg, 2),
                "error_east_m": r(self.landing_error_east_m, 1),
                "error_north_m": r(self.landing_error_north_m, 1),
                "time_error_s": r(self.landing_time_error_s, 1),
            },
            "burst": {"altitude_error_m": r(self.burst_altitude_error_m, 1),
                      "time_error_s": r(self.burst_time_error_s, 1),
                      "position_error_m": r(self.burst_position_error_m, 1)},
            "vertical_speed_bands": bands,
            "track_error": {"minutes": arr(self.error_minutes, 2), "distance_m": arr(self.error_distance_m, 1)},
            "ensemble": {"inside_zone": {f"{p:.2f}": v for p, v in self.inside.items()},
                         "rank": r(self.rank, 4),
                         "mahalanobis_d2": r(self.mahalanobis_d2, 4),
                         "energy_score_m": r(self.energy_score_m, 1),
                         "crps_distance_m": r(self.crps_distance_m, 1),
                         "scores_reference": "GneitingRaftery2007"},
            "calibration": cal,
            "warnings": list(self.warnings),
            "note": "flown minus forecast for every error; bearing from the forecast landing to the flown one",
        }


def launch_time_from_track(flown: FlownTrack, launch_elevation_m: float, ascent_rate_m_s: float) -> float:
    """Release time implied by a track: the first fix's time, less the climb from the launch elevation.

    A log that starts at the ground gives its first time; one that starts aloft (telemetry found late) is
    moved back by (first altitude - launch elevation) / nominal ascent rate when that height exceeds 50 m.
    """
    t0 = float(flown.time_s[0])
    height = float(flown.alt_m[0]) - float(launch_elevation_m)
    if height > 50.0 and ascent_rate_m_s > 0:
        return t0 - height / ascent_rate_m_s
    return t0


def verify_flight(plan: Any, flown: FlownTrack, members: int | None = None, seed: int | None = None,
                  winds: Any = None, launch_time_s: float | None = None,
                  calibrate_vertical: bool = True) -> tuple[Verification, ForecastResult, Any]:
    """Re-run the forecast as at launch and compare it with a flown track.

    Parameters
    ----------
    plan : Plan
        The flight's plan (its winds are the forecast's winds).
    flown : FlownTrack
        The flight log, launch to landing.
    members, seed : int, optional
        Ensemble size and seed (plan defaults).
    winds : LoadedWinds, optional
        Loaded winds to reuse.
    launch_time_s : float, optional
        Release time; default from the track (:func:`launch_time_from_track`).
    calibrate_vertical : bool
        Fit the vertical model to the flown profile (:func:`calibrate`).

    Returns
    -------
    (Verification, ForecastResult, Zones)
    """
    from balloonpath.errors import WarningLog, recording_warnings
    from balloonpath.flight.vertical import vertical_params_from_plan
    from balloonpath.forecast import load_winds, run_forecast
    from balloonpath.zones import compute_zones

    log = WarningLog()
    with recording_warnings(log):
        if len(flown) < 3:
            raise input_error(flown.source, "track", f"has {len(flown)} fixes", "give the whole flight")
        if winds is None:
            winds = load_winds(plan, log)
        params = vertical_params_from_plan(plan, winds.atmosphere)
        t0 = launch_time_s if launch_time_s is not None else launch_time_from_track(
            flown, plan.launch.elevation_m, float(params.ascent_rate_m_s[0]))
        result = run_forecast(plan, members=members, seed=seed, winds=winds, launch_time_s=t0)
        log.messages.extend(w for w in result.warnings if w not in log.messages)
        zones = compute_zones(result)
        ev = flight_events(flown.alt_m)
        fl_lat, fl_lon = float(flown.lat[ev.landing]), float(flown.lon[ev.landing])
        fc_lat, fc_lon = float(result.landing.lat[0]), float(result.landing.lon[0])
        ground = float(result.landing.alt_m[0])
        if float(flown.alt_m[ev.landing]) - ground > LANDED_TOLERANCE_M:
            warnings.warn(f"{flown.source}: the track ends {flown.alt_m[ev.landing] - ground:.0f} m above the "
                          "forecast ground; the landing error compares the last fix", DataQualityWarning,
                          stacklevel=2)
        dist, bearing = inverse(fc_lat, fc_lon, fl_lat, fl_lon)
        dist, bearing = float(dist), float(bearing)
        east, north = dist * math.sin(math.radians(bearing)), dist * math.cos(math.radians(bearing))
        nominal = result.nominal
        fev = flight_events(nominal.alt_m)
        b_alt = float(result.burst.alt_m[0])
        b_time = float(result.burst.time_s[0])
        burst_pos, _ = inverse(float(result.burst.lat[0]), float(result.burst.lon[0]),
                               float(flown.lat[ev.burst]), float(flown.lon[ev.burst]))
        top = max(float(np.max(flown.alt_m)), float(np.max(nominal.alt_m)))
        bottom = min(float(np.min(flown.alt_m)), float(np.min(nominal.alt_m)))
        first = math.floor(bottom / BAND_HEIGHT_M + 1.0) * BAND_HEIGHT_M
        edges = np.concatenate([[bottom], np.arange(first, top + BAND_HEIGHT_M, BAND_HEIGHT_M)])
        ft, fz = np.asarray(nominal.time_s, float), np.asarray(nominal.alt_m, float)
        tt, tz = np.asarray(flown.time_s, float), np.asarray(flown.alt_m, float)
        asc_fc = band_speeds(ft[: fev.burst + 1], fz[: fev.burst + 1], edges, True)
        asc_fl = band_speeds(tt[: ev.burst + 1], tz[: ev.burst + 1], edges, True)
        des_fc = band_speeds(ft[fev.burst:], fz[fev.burst:], edges, False)
        des_fl = band_speeds(tt[ev.burst:], tz[ev.burst:], edges, False)
        minutes, err = track_error_vs_time(ft, nominal.lat, nominal.lon, flown, result.launch_time_s, t0)

        proj = zones.projection()
        tx, ty = proj.to_local(fl_lat, fl_lon)
        inside = inside_ellipses(zones.ellipses, float(tx), float(ty))
        pts = np.column_stack([zones.landing_x_m, zones.landing_y_m])
        rank = mahalanobis_rank(pts, [float(tx), float(ty)]) if pts.shape[0] >= 3 else float("nan")
        d2 = mahalanobis_d2(pts, [float(tx), float(ty)]) if pts.shape[0] >= 3 else float("nan")
        es = energy_score(pts, [float(tx), float(ty)])
        rows = np.arange(1, result.n_members) if result.n_members > 1 else np.arange(1)
        d_members, _ = inverse(result.launch_lat, result.launch_lon, result.landing.lat[rows],
                               result.landing.lon[rows])
        d_flown, _ = inverse(result.launch_lat, result.launch_lon, fl_lat, fl_lon)
        ok = np.isfinite(d_members)
        crps = float(crps_ensemble(np.asarray(d_members)[ok], float(d_flown)))
        cal = None
        if calibrate_vertical:
            try:
                cal = calibrate(plan, params, flown, winds.atmosphere, ev)
            except InputDataError as exc:
                warnings.warn(f"calibration skipped: {exc}", FitWarning, stacklevel=2)
        ver = Verification(
            plan=Path(plan.path).name, track_source=flown.source, launch_time_s=float(t0),
            members=result.n_members, seed=result.seed,
            forecast_landing=(fc_lat, fc_lon), flown_landing=(fl_lat, fl_lon),
            landing_error_m=dist, landing_error_bearing_deg=bearing if dist >= 1.0 else float("nan"),
            landing_error_east_m=east, landing_error_north_m=north,
            landing_time_error_s=float(flown.time_s[ev.landing]) - float(result.landing.time_s[0]),
            burst_altitude_error_m=float(flown.alt_m[ev.burst]) - b_alt,
            burst_time_error_s=float(flown.time_s[ev.burst]) - b_time,
            burst_position_error_m=float(burst_pos),
            band_edges_m=edges, ascent_speed_forecast_m_s=asc_fc, ascent_speed_flown_m_s=asc_fl,
            descent_speed_forecast_m_s=des_fc, descent_speed_flown_m_s=des_fl,
            error_minutes=minutes, error_distance_m=err, inside=inside, rank=rank, mahalanobis_d2=d2,
            energy_score_m=es, crps_distance_m=crps, calibration=cal,
        )
    return dataclasses.replace(ver, warnings=tuple(log.messages)), result, zones


# ------------------------------------------------------------------------------------------ output
def summary_lines(ver: Verification) -> list[str]:
    """The readable summary, line by line (plain text; the CLI colours it)."""
    out = [f"Verification of {ver.plan} against {ver.track_source}",
           f"Launch {iso_from_posix(ver.launch_time_s)}, {ver.members} members, seed {ver.seed}", ""]
    toward = f"{ver.landing_error_bearing_deg:.0f} deg" if math.isfinite(ver.landing_error_bearing_deg) else "-"
    out.append(f"Landing error   {ver.landing_error_m / 1e3:.2f} km toward {toward} "
               f"(east {ver.landing_error_east_m / 1e3:+.2f} km, north {ver.landing_error_north_m / 1e3:+.2f} km), "
               f"time {ver.landing_time_error_s / 60:+.1f} min")
    out.append(f"Burst error     altitude {ver.burst_altitude_error_m:+.0f} m, time "
               f"{ver.burst_time_error_s / 60:+.1f} min, position {ver.burst_position_error_m / 1e3:.2f} km")
    zones = ", ".join(f"{p:.0%} {'inside' if v else 'outside'}" for p, v in ver.inside.items())
    out.append(f"Ensemble        flown landing {zones}; rank {ver.rank:.2f} (0 centre, 1 beyond all members)")
    out.append(f"Scores          energy score {ver.energy_score_m / 1e3:.2f} km, CRPS of the landing distance "
               f"{ver.crps_distance_m / 1e3:.2f} km [GneitingRaftery2007]")
    marks = [(m, d) for m, d in zip(ver.error_minutes, ver.error_distance_m, strict=True)
             if any(abs(m - s) < 1e-6 for s in SUMMARY_MINUTES)]
    if marks:
        out.append("Track error     " + ", ".join(f"{m:.0f} min {d / 1e3:.1f} km" for m, d in marks))
    out += ["", "Vertical speed by band (m/s, flown vs forecast):"]
    for lo, hi, af, ao, df, do in zip(ver.band_edges_m[:-1], ver.band_edges_m[1:], ver.ascent_speed_forecast_m_s,
                                      ver.ascent_speed_flown_m_s, ver.descent_speed_forecast_m_s,
                                      ver.descent_speed_flown_m_s, strict=True):
        if not any(math.isfinite(v) for v in (af, ao, df, do)):
            continue
        out.append(f"  {lo / 1e3:4.0f}-{hi / 1e3:<4.0f} km  ascent {_f(ao)} vs {_f(af)}   descent {_f(do)} vs {_f(df)}")
    if ver.calibration is not None:
        out += ["", "Calibration (least squares on the flown profile):"]
        for name, v in ver.calibration.values.items():
            se = v["standard_error"]
            se_text = f" +- {se:.3f}" if math.isfinite(se) else ""
            out.append(f"  {name}: {v['value']:.3f}{se_text} (plan {v['plan_value']:.3f})")
        out += [f"  note: {n}" for n in ver.calibration.notes]
        out += ["", "Plan lines to use next time:", *("  " + ln for ln in ver.calibration.plan_lines.splitlines())]
    return out


def _f(v: float) -> str:
    return f"{v:5.2f}" if math.isfinite(v) else "  -  "


def plot_verification(ver: Verification, result: ForecastResult, zones: Any, flown: FlownTrack,
                      path: str | Path) -> Path:
    """verify.png: map of the forecast and flown tracks with the landing zones, and altitude profiles."""
    from balloonpath.plots import (
        ELLIPSE_STYLES,
        PALETTE,
        new_figure,
        save_png,
        set_equal_distance_aspect,
        unwrap_longitude,
    )

    fig = new_figure(12.0, 5.5)
    ax = fig.add_subplot(1, 2, 1)
    ref = float(result.launch_lon)
    nom = result.nominal
    ax.plot(unwrap_longitude(result.landing.lon[1:], ref), result.landing.lat[1:], ".", ms=2,
            color=PALETTE["member_landing"], alpha=0.4, label="Member landings", zorder=2)
    for k, (e, ring) in enumerate(zip(zones.ellipses, zones.ellipse_rings, strict=True)):
        ax.plot(unwrap_longitude(ring.lon, ref), ring.lat, color=PALETTE["landing_ellipse"],
                ls=ELLIPSE_STYLES[k % len(ELLIPSE_STYLES)], lw=1.2, label=f"{e.probability:.0%} zone", zorder=3)
    ax.plot(unwrap_longitude(nom.lon, ref), nom.lat, color=PALETTE["track"], lw=1.8, label="Forecast", zorder=4)
    ax.plot(unwrap_longitude(flown.lon, ref), flown.lat, color=PALETTE["burst"], lw=1.6, ls="--", label="Flown",
            zorder=5)
    ax.plot(ref, result.launch_lat, "^", color=PALETTE["launch"], ms=9, label="Launch", zorder=6)
    ax.plot(unwrap_longitude(ver.forecast_landing[1], ref), ver.forecast_landing[0], "X", color=PALETTE["track"],
            ms=9, zorder=6)
    ax.plot(unwrap_longitude(ver.flown_landing[1], ref), ver.flown_landing[0], "X", color=PALETTE["burst"],
            mec="black", ms=10, zorder=7)
    set_equal_distance_aspect(ax, float(result.launch_lat))
    ax.set_title(f"Landing error {ver.landing_error_m / 1e3:.1f} km", fontsize=11)
    ax.legend(loc="best", fontsize=7, framealpha=0.9)
    ax.grid(True, lw=0.3, alpha=0.5)

    ax2 = fig.add_subplot(1, 2, 2)
    t0 = ver.launch_time_s
    ax2.plot((np.asarray(nom.time_s) - result.launch_time_s) / 60.0, np.asarray(nom.alt_m) / 1e3,
             color=PALETTE["track"], lw=1.8, label="Forecast")
    ax2.plot((np.asarray(flown.time_s) - t0) / 60.0, np.asarray(flown.alt_m) / 1e3, color=PALETTE["burst"],
             lw=1.8, label="Flown")
    ax2.set_xlabel(f"Minutes after launch ({iso_from_posix(t0)})")
    ax2.set_ylabel("Altitude above sea level (km)")
    ax2.set_title("Altitude profiles", fontsize=11)
    ax2.grid(True, lw=0.3, alpha=0.5)
    ax2.legend(loc="upper right", fontsize=8)
    fig.tight_layout()
    return save_png(fig, path)


def write_verification(ver: Verification, result: ForecastResult, zones: Any, flown: FlownTrack,
                       out_dir: str | Path, plot: bool = True) -> tuple[Path, ...]:
    """Write ``verify.json``, ``verify.txt`` (the summary) and ``verify.png`` into ``out_dir``."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = [atomic_write_text(out / "verify.json", json.dumps(ver.to_dict(), indent=2) + "\n"),
             atomic_write_text(out / "verify.txt", "\n".join(summary_lines(ver)) + "\n")]
    if plot:
        files.append(plot_verification(ver, result, zones, flown, out / "verify.png"))
    return tuple(Path(f) for f in files)


# ------------------------------------------------------------------------------------- many flights
TRACK_NAMES = ("flown.csv", "flown.txt", "flown.aprs", "flown.log")


@dataclass(frozen=True)
class FlightCase:
    """One flight of a ``--many`` folder: its name, plan file and track file."""

    name: str
    plan_path: Path
    track_path: Path


def find_flights(folder: str | Path) -> list[FlightCase]:
    """The flights of a folder: each sub-folder with one plan (``*.toml``) and one track (``flown.*``).

    Sub-folders without both are skipped with a warning; they are taken in name order.
    """
    root = Path(folder)
    if not root.is_dir():
        raise input_error(root, "folder", "is not a folder", "give a folder with one sub-folder per flight")
    cases = []
    for sub in sorted(p for p in root.iterdir() if p.is_dir()):
        plans = sorted(sub.glob("*.toml"))
        tracks = sorted(p for p in sub.iterdir() if p.name.lower().startswith("flown."))
        if len(plans) != 1 or len(tracks) != 1:
            warnings.warn(f"{sub.name}: skipped (needs one *.toml plan and one flown.* track, found "
                          f"{len(plans)} and {len(tracks)})", DataQualityWarning, stacklevel=2)
            continue
        cases.append(FlightCase(sub.name, plans[0], tracks[0]))
    if not cases:
        raise input_error(root, "sub-folders", "contain no flight (a *.toml plan beside a flown.* track)",
                          "put each flight in its own sub-folder as docs/verify.md describes")
    return cases


@dataclass(frozen=True)
class ManySummary:
    """Scores pooled over flights: per-flight rows and the aggregate."""

    rows: tuple[dict[str, Any], ...]
    aggregate: dict[str, Any]


def pool_scores(rows: list[dict[str, Any]]) -> dict[str, Any]:
    """Median landing error, zone coverage, mean scores and rank statistics of per-flight rows."""
    err = np.array([r["landing_error_m"] for r in rows], dtype=float)
    out: dict[str, Any] = {"flights": len(rows),
                           "median_landing_error_m": float(np.median(err)) if err.size else None,
                           "mean_landing_error_m": float(np.mean(err)) if err.size else None}
    cover = {}
    for p in ZONE_PROBABILITIES:
        key = f"{p:.2f}"
        vals = [r["inside"][key] for r in rows if key in r["inside"]]
        cover[key] = float(np.mean(vals)) if vals else None
    out["coverage"] = cover
    for name in ("energy_score_m", "crps_distance_m"):
        v = np.array([r[name] for r in rows], dtype=float)
        out[f"mean_{name}"] = float(np.mean(v)) if v.size else None
    ranks = np.array([r["rank"] for r in rows], dtype=float)
    ranks = ranks[np.isfinite(ranks)]
    out["mean_rank"] = float(np.mean(ranks)) if ranks.size else None
    out["rank_histogram"] = np.histogram(ranks, bins=5, range=(0.0, 1.0))[0].tolist()
    return out


def verify_many(folder: str | Path, out_dir: str | Path, members: int | None = None,
                seed: int | None = None, plot: bool = False,
                progress: Any = None) -> ManySummary:
    """Verify every flight of a folder (:func:`find_flights`) and pool the scores.

    Each flight's files go to ``out_dir/<name>/``; ``many.csv`` and ``many.json`` hold the table.
    """
    from balloonpath.plan import load_plan

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    rows: list[dict[str, Any]] = []
    d2: list[float] = []
    calibrations: list[tuple[float, float | None]] = []
    cases = find_flights(folder)
    for k, case in enumerate(cases):
        plan = load_plan(case.plan_path)
        flown = read_flown_track(case.track_path)
        ver, result, zones = verify_flight(plan, flown, members=members, seed=seed)
        write_verification(ver, result, zones, flown, out / case.name, plot=plot)
        if math.isfinite(ver.mahalanobis_d2):
            d2.append(ver.mahalanobis_d2)
            calibrations.append((float(plan.ensemble.wind_spread_factor), plan.ensemble.wind_spread_tail_dof))
        rows.append({"flight": case.name, "landing_error_m": ver.landing_error_m,
                     "landing_error_bearing_deg": ver.landing_error_bearing_deg,
                     "burst_altitude_error_m": ver.burst_altitude_error_m,
                     "inside": {f"{p:.2f}": v for p, v in ver.inside.items()}, "rank": ver.rank,
                     "mahalanobis_d2": ver.mahalanobis_d2,
                     "energy_score_m": ver.energy_score_m, "crps_distance_m": ver.crps_distance_m})
        if progress is not None:
            progress(k + 1, len(cases))
    agg = pool_scores(rows)
    agg["spread"] = spread_advice(d2, calibrations)
    head = ["flight", "landing_error_km", "bearing_deg", "burst_altitude_error_m", "in_50", "in_90", "in_95",
            "rank", "energy_score_km", "crps_distance_km"]
    lines = [",".join(head)]
    for r in rows:
        ins = r["inside"]
        lines.append(",".join([
            r["flight"], f"{r['landing_error_m'] / 1e3:.3f}", _cell(r["landing_error_bearing_deg"], 1),
            f"{r['burst_altitude_error_m']:.0f}",
            *(str(int(ins.get(f"{p:.2f}", False))) for p in ZONE_PROBABILITIES),
            f"{r['rank']:.4f}", f"{r['energy_score_m'] / 1e3:.3f}", f"{r['crps_distance_m'] / 1e3:.3f}"]))
    atomic_write_text(out / "many.csv", "\n".join(lines) + "\n")
    doc = {"balloonpath_version": __version__, "flights": rows, "aggregate": agg,
           "scores_reference": "GneitingRaftery2007"}
    atomic_write_text(out / "many.json", json.dumps(_jsonable(doc), indent=2) + "\n")
    return ManySummary(tuple(rows), agg)


def spread_advice(d2: list[float], calibrations: list[tuple[float, float | None]]) -> dict[str, Any]:
    """The fitted spread and the plan lines it suggests (``{"fitted": False, "reason": ...}`` if none).

    ``d2`` are the flights' squared Mahalanobis distances from their ensembles as forecast; ``calibrations``
    the (``wind_spread_factor``, ``wind_spread_tail_dof``) each flight was forecast with. Distances from an
    already calibrated ensemble are brought back to the uncalibrated spread by the ensemble's variance
    factor c0^2 (normal) or c0^2 nu0 / (nu0 - 2) (Student-t), an approximation (landings respond almost
    linearly to the winds) that makes the suggested values absolute, not relative.
    """
    if len(d2) < MIN_FLIGHTS_FOR_SPREAD:
        return {"fitted": False, "reason": f"{len(d2)} flights with an ensemble; at least "
                f"{MIN_FLIGHTS_FOR_SPREAD} are needed to fit the spread"}
    var = [c0**2 * (1.0 if nu0 is None else nu0 / (nu0 - 2.0)) for c0, nu0 in calibrations]
    fit = fit_spread(np.asarray(d2, dtype=float) * np.asarray(var))
    lines = [f"wind_spread_factor = {min(max(fit.scale, SPREAD_FACTOR_BOUNDS[0]), SPREAD_FACTOR_BOUNDS[1]):.2f}"]
    if fit.tail_dof is not None:
        lines.append(f"wind_spread_tail_dof = {fit.tail_dof:.1f}")
    return {"fitted": True, **fit.as_dict(), "plan_table": "ensemble", "plan_lines": lines,
            "already_calibrated": any(c != (1.0, None) for c in calibrations)}


def _cell(value: float, decimals: int) -> str:
    return f"{value:.{decimals}f}" if math.isfinite(value) else ""


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.generic):
        return _jsonable(obj.item())
    if isinstance(obj, float):
        return round(obj, 4) if math.isfinite(obj) else None
    return obj


__all__ = [
    "Calibration", "FlightCase", "FlightEvents", "ManySummary", "RateFit", "SpreadFit", "Verification",
    "ascent_rate_from_track", "band_speeds", "calibrate", "crps_ensemble", "crps_gaussian", "energy_score",
    "find_flights", "fit_spread", "flight_events", "inside_ellipses", "launch_time_from_track",
    "mahalanobis_d2", "mahalanobis_rank", "mean_pairwise_distance", "parachute_drag_coefficient",
    "plot_verification", "pool_scores", "read_flown_track", "sea_level_descent_rate_from_track",
    "spread_advice", "spread_negative_log_likelihood", "spread_radius2", "summary_lines", "track_error_vs_time",
    "verify_flight", "verify_many", "write_track_csv", "write_verification",
]
