"""Gaussian-process wind field: observations fused over a background, with uncertainty and correlated samples.

The GP models the residual r = observation - background for u and v (two independent GPs sharing one
kernel, see ``gp_kernels.py``) in local coordinates [east_km, north_km, alt_km, time_h] about a centre
(azimuthal-equidistant projection, ``geodesy.LocalProjection``). Without observations the field is the
background with a prior-only error model (``BackgroundErrorField``). Samples for the ensemble come from
``gp_sample.py``. The model, equations, bounds and defaults are documented in docs/winds-gp.md.

References
----------
[RW2006] C. E. Rasmussen & C. K. I. Williams, Gaussian Processes for Machine Learning, MIT Press 2006:
    Algorithm 2.1 p. 19; §8.3.3 (projected process / DTC approximation).
[QCR2005] J. Quinonero-Candela & C. E. Rasmussen, "A unifying view of sparse approximate Gaussian process
    regression", JMLR 6:1939-1959 (2005) (DTC); from memory.
[Lorenc1981] A. C. Lorenc, "A global three-dimensional multivariate statistical interpolation scheme",
    Mon. Wea. Rev. 109:701-721 (1981) (superobservations as averages of nearby reports); from memory.
"""

from __future__ import annotations

import io
import json
import warnings
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
from scipy.linalg import cho_solve, solve_triangular

from balloonpath.errors import DataQualityWarning, FitWarning, InputDataError, input_error
from balloonpath.fileio import atomic_path
from balloonpath.geodesy import LocalProjection, normalize_longitude
from balloonpath.winds.field import Coverage, WindField
from balloonpath.winds.gp_io import background_spec_of, default_background_loader
from balloonpath.winds.gp_kernels import (
    BOUNDS,
    GPHyperparameters,
    NoiseCovariance,
    log_marginal_likelihood,
    optimize_hyperparameters,
    robust_cholesky,
    se_kernel,
)
from balloonpath.winds.gp_sample import (
    BATCH_MEMBERS,
    MAX_NODES,
    MEMORY_BUDGET_BYTES,
    CorridorGrid,
    FastProjection,
    GridMemberWinds,
    GridSampler,
    MemberSampler,
    choose_grid,
)
from balloonpath.winds.observations import WindObservations

FORMAT = "balloonpath-gp-wind-field"
FORMAT_VERSION = 2  # 2: kernel with an altitude profile (version-1 files load with profile "uniform")

#: Background error model (from memory; order of magnitude of global-model upper-air vector-wind RMSE,
#: about 3.5 m/s at analysis time growing to 7-8 m/s at two days): per-component sd
#: sigma(lead) = min(SIGMA0 + GROWTH * lead_h, SIGMA_MAX).
BACKGROUND_SIGMA0_M_S = 2.5
BACKGROUND_GROWTH_M_S_PER_H = 0.06
BACKGROUND_SIGMA_MAX_M_S = 10.0
#: Lead time assumed when neither the caller nor the background gives one, h.
DEFAULT_LEAD_TIME_H = 12.0

#: Fewer (super)observations than this: hyperparameters are not learned (defaults are used).
MIN_OBS_TO_LEARN = 20
#: Exact GP up to this many (super)observations; beyond, the DTC inducing-point approximation.
MAX_EXACT = 5000
#: Inducing points of the DTC approximation.
N_INDUCING = 1500
#: Observations used in the hyperparameter search (a seeded random subset beyond that).
MAX_OPTIMIZE_POINTS = 600
#: Superobservation cell (east/north km, alt km, time h) used when there are more than MAX_EXACT rows.
SUPEROB_CELL = np.array([10.0, 10.0, 0.25, 0.5])
#: Observations closer than this (km, km, km, h) are duplicates and always merged.
DUPLICATE_CELL = np.array([1e-3, 1e-3, 1e-3, 1e-4])
#: Default corridor: half-width around the centre (km), altitude range (m), time half-range (h).
CORRIDOR_RADIUS_KM = 300.0
CORRIDOR_ALT_MAX_M = 40_000.0
CORRIDOR_HALF_TIME_H = 12.0


#: Residual heading error of an aircraft after the heading-bias correction (1 sd, degrees; from memory:
#: biases below the 1 degree correction threshold stay, [deHaan2013] in aircraft.py) and cruise TAS (m/s).
AIRCRAFT_HEADING_RESIDUAL_DEG = 0.5
AIRCRAFT_CRUISE_TAS_M_S = 230.0


def aircraft_shared_error_sigma(heading_residual_deg: float = AIRCRAFT_HEADING_RESIDUAL_DEG,
                                true_airspeed_m_s: float = AIRCRAFT_CRUISE_TAS_M_S) -> float:
    """Per-component sd (m/s) of the wind error shared by all observations of one aircraft.

    Notes
    -----
    A heading error d psi rotates the air vector and gives a wind error of magnitude 2 TAS sin(d psi / 2)
    across the aircraft's track (wind triangle, REFERENCES §6; ``aircraft.wind_from_triangle``). It is the
    same for every report of the aircraft, so it does not average out. Spread over both components (the
    track direction is not carried by the observations): tau = 2 TAS sin(d psi / 2) / sqrt(2); with
    d psi = 0.5 deg and TAS = 230 m/s, tau = 1.42 m/s.
    """
    return float(2.0 * true_airspeed_m_s * np.sin(np.radians(heading_residual_deg) / 2.0) / np.sqrt(2.0))


def platform_groups(source: np.ndarray) -> np.ndarray:
    """Platform index of each observation from its source label (``"<kind>:<platform>"``), -1 if none.

    Observations whose label has a ``:`` (aircraft-derived winds are ``aircraft-report:<icao>`` or
    ``aircraft-modes:<icao>``) share an error with the other observations of the same label.
    """
    labels = np.asarray(source).astype(str)
    has = np.char.find(labels, ":") >= 0
    group = np.full(labels.size, -1, dtype=np.int64)
    if np.any(has):
        _, inverse = np.unique(labels[has], return_inverse=True)
        group[has] = np.asarray(inverse).ravel()
    return group


def background_error_sigma(lead_time_h: float) -> float:
    """Standard deviation (m/s) of each wind component's background-forecast error at a lead time.

    Notes
    -----
    sigma(tau) = min(2.5 + 0.06 tau, 10) m/s with tau in hours. From memory, not from a cited table:
    upper-air vector-wind RMSE of global forecasts is of order 3-4 m/s at analysis time and grows to
    7-8 m/s at two days; one component's sd is the vector RMSE / sqrt(2), plus representativeness.
    """
    tau = max(float(lead_time_h), 0.0)
    return float(min(BACKGROUND_SIGMA0_M_S + BACKGROUND_GROWTH_M_S_PER_H * tau, BACKGROUND_SIGMA_MAX_M_S))


# ----------------------------------------------------------------------------------------------------------
# Posterior


class Posterior:
    """GP posterior of the residuals: exact (Algorithm 2.1) or DTC with inducing points.

    mean(x) = k(x, P) beta (beta has one column per output), var(x) = s^2 g(z)^2 - k^T B k with
    exact: P = X, beta = (K + Lambda)^-1 y, B = (K + Lambda)^-1;
    DTC ([RW2006] §8.3.3): P = Z, A = K_ZZ + K_ZX Lambda^-1 K_XZ, beta = A^-1 K_ZX Lambda^-1 y,
    B = K_ZZ^-1 - A^-1.
    """

    def __init__(
        self,
        x: np.ndarray,
        y: np.ndarray,
        noise_var: np.ndarray,
        hp: GPHyperparameters,
        inducing: np.ndarray | None = None,
        noise_group: np.ndarray | None = None,
        group_var: float = 0.0,
    ) -> None:
        self.x = np.asarray(x, dtype=float)
        self.y = np.asarray(y, dtype=float)
        self.noise_var = np.asarray(noise_var, dtype=float)
        self.hp = hp
        self.sparse = inducing is not None
        # Exact GP: Lambda = diag(noise_var) + tau^2 Z Z^T (per-platform shared error). DTC ignores the
        # shared term (Lambda stays diagonal there; docs/winds-gp.md).
        self.noise = NoiseCovariance(self.noise_var, noise_group, group_var if not self.sparse else 0.0)
        if not self.sparse:
            ky = se_kernel(self.x, self.x, hp)
            self.noise.add_to(ky)
            self.chol, self.jitter = robust_cholesky(ky)
            del ky
            self.points = self.x
            self.beta = cho_solve((self.chol, True), self.y, check_finite=False)
        else:
            z = np.asarray(inducing, dtype=float)
            kzz = se_kernel(z, z, hp)
            self.chol_zz, self.jitter = robust_cholesky(kzz, "inducing-point kernel matrix")
            a = kzz.copy()
            rhs = np.zeros((z.shape[0], self.y.shape[1]))
            for s in range(0, self.x.shape[0], 4096):  # bounded memory: m x 4096 blocks
                kzx = se_kernel(z, self.x[s : s + 4096], hp) / np.sqrt(self.noise_var[s : s + 4096])
                a += kzx @ kzx.T
                rhs += kzx @ (self.y[s : s + 4096] / np.sqrt(self.noise_var[s : s + 4096])[:, None])
            self.chol_a, _ = robust_cholesky(a, "inducing-point system matrix")
            self.points = z
            self.beta = cho_solve((self.chol_a, True), rhs, check_finite=False)

    @property
    def n_points(self) -> int:
        """Number of points carrying the posterior (observations, or inducing points)."""
        return int(self.points.shape[0])

    def mean_var(self, xs: np.ndarray, want_var: bool = True) -> tuple[np.ndarray, np.ndarray | None]:
        """Posterior mean (k, 2) and latent variance (k,) at points xs (k, 4), in blocks of 2048."""
        mean = np.empty((xs.shape[0], self.beta.shape[1]))
        var = np.empty(xs.shape[0]) if want_var else None
        s2 = self.hp.sigma_m_s**2 * self.hp.g(xs[:, 2]) ** 2 if want_var else None
        for s in range(0, xs.shape[0], 2048):
            ks = se_kernel(self.points, xs[s : s + 2048], self.hp)  # (n, b)
            mean[s : s + 2048] = ks.T @ self.beta
            if want_var:
                if not self.sparse:
                    v = solve_triangular(self.chol, ks, lower=True, check_finite=False)
                    red = np.sum(v * v, axis=0)
                else:
                    v1 = solve_triangular(self.chol_zz, ks, lower=True, check_finite=False)
                    v2 = solve_triangular(self.chol_a, ks, lower=True, check_finite=False)
                    red = np.sum(v1 * v1, axis=0) - np.sum(v2 * v2, axis=0)
                var[s : s + 2048] = np.maximum(s2[s : s + 2048] - red, 0.0)
        return mean, var

    def covariance(self, xs: np.ndarray) -> np.ndarray:
        """Posterior covariance (k, k) of one output between points xs (k, 4) (u and v alike), m^2/s^2.

        exact: K** - V^T V, V = L^-1 K_X*; DTC: K** - Q** + K*Z A^-1 K_Z* ([RW2006] eq. 2.24 and §8.3.3),
        with Q = K*Z K_ZZ^-1 K_Z*. Its diagonal is :meth:`mean_var`'s variance. Memory O(k^2 + n k).
        """
        ks = se_kernel(self.points, xs, self.hp)
        cov = se_kernel(xs, xs, self.hp)
        if not self.sparse:
            v = solve_triangular(self.chol, ks, lower=True, check_finite=False)
            cov -= v.T @ v
        else:
            v1 = solve_triangular(self.chol_zz, ks, lower=True, check_finite=False)
            v2 = solve_triangular(self.chol_a, ks, lower=True, check_finite=False)
            cov -= v1.T @ v1
            cov += v2.T @ v2
        return 0.5 * (cov + cov.T)

    def mean_on_grid(self, grid: CorridorGrid) -> np.ndarray:
        """Exact posterior mean at every grid node, shape (G, 2), using the kernel's separability.

        mean[a,b,c,d] = sum_i s^2 kx[a,i] ky[b,i] kz[c,i] kt[d,i] beta_i, computed as one matrix product
        (n_x n_y, n) @ (n, n_z n_t) per output; the altitude factor kz carries g(z_c) g(z_i).
        """
        ell = self.hp.lengths()
        k1 = [np.exp(-0.5 * ((grid.axis(d)[:, None] - self.points[None, :, d]) / ell[d]) ** 2) for d in range(4)]
        k1[2] *= self.hp.g(grid.axis(2))[:, None] * self.hp.g(self.points[:, 2])[None, :]
        left = (k1[0][:, None, :] * k1[1][None, :, :]).reshape(-1, self.n_points)
        right = (k1[2][:, None, :] * k1[3][None, :, :]).reshape(-1, self.n_points)
        out = np.empty((grid.size, self.beta.shape[1]))
        for o in range(self.beta.shape[1]):
            out[:, o] = ((left * self.beta[:, o]) @ right.T).ravel() * self.hp.sigma_m_s**2
        return out

    def sample_coefficients(
        self, f_at_points: np.ndarray, rng: np.random.Generator | None, normals: np.ndarray | None = None
    ) -> np.ndarray:
        """Matheron coefficients c with e(x) = f(x) + k(x, P) c a posterior deviation ([Wilson2020]).

        exact: c = -(K + Lambda)^-1 (f(X) + eps), eps ~ N(0, Lambda) (Lambda with its per-platform blocks).
        DTC:   c = A^-T/2 xi - K_ZZ^-1 f(Z), xi ~ N(0, I) (so Cov e = k - Q + k^T A^-1 k).
        ``normals`` (same shape as ``f_at_points``) replaces the draw from ``rng`` (per-member streams).
        """
        z = rng.standard_normal(f_at_points.shape) if normals is None else np.asarray(normals, dtype=float)
        if not self.sparse:
            eps = self.noise.draw(z)
            return -cho_solve((self.chol, True), f_at_points + eps, check_finite=False)
        xi = z
        return solve_triangular(self.chol_a, xi, lower=True, trans="T", check_finite=False) - cho_solve(
            (self.chol_zz, True), f_at_points, check_finite=False
        )


# ----------------------------------------------------------------------------------------------------------
# Corridor and coordinates


@dataclass(frozen=True)
class Corridor:
    """Where samples are drawn: a box in local coordinates about (lat0, lon0), times in POSIX s."""

    lat0: float
    lon0: float
    time_ref_s: float
    x_min_km: float
    x_max_km: float
    y_min_km: float
    y_max_km: float
    alt_min_m: float
    alt_max_m: float
    time_min_s: float
    time_max_s: float

    def box(self) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper corners in [east_km, north_km, alt_km, time_h]."""
        lo = [self.x_min_km, self.y_min_km, self.alt_min_m / 1e3, (self.time_min_s - self.time_ref_s) / 3600]
        hi = [self.x_max_km, self.y_max_km, self.alt_max_m / 1e3, (self.time_max_s - self.time_ref_s) / 3600]
        return np.array(lo), np.array(hi)


def _to_local(proj: LocalProjection, t_ref: float, lat, lon, alt_m, time_s) -> np.ndarray:
    lat, lon, alt_m, time_s = (np.ravel(a).astype(float) for a in np.broadcast_arrays(lat, lon, alt_m, time_s))
    x, y = proj.to_local(lat, lon)
    return np.column_stack([x / 1e3, y / 1e3, alt_m / 1e3, (time_s - t_ref) / 3600.0])


def _merge_cells(x: np.ndarray, r: np.ndarray, var: np.ndarray, cell: np.ndarray, group: np.ndarray):
    """Inverse-variance average of rows falling in one cell (superobservations, [Lorenc1981]).

    The merged error variance is 1 / sum(1/var_i), floored at (min_i sd_i / 2)^2 because reports from
    one aircraft have correlated errors (from memory; documented in docs/winds-gp.md). Rows of different
    platforms (``group``) are never merged, so the per-platform error term stays well defined.
    """
    keys = np.column_stack([np.floor(x / cell).astype(np.int64), group])
    uniq, inverse, counts = np.unique(keys, axis=0, return_inverse=True, return_counts=True)
    inverse = inverse.ravel()
    if counts.size == x.shape[0]:
        return x, r, var, group, 0
    w = 1.0 / var
    sw = np.bincount(inverse, w)
    xm = np.column_stack([np.bincount(inverse, w * x[:, d]) / sw for d in range(4)])
    rm = np.column_stack([np.bincount(inverse, w * r[:, o]) / sw for o in range(r.shape[1])])
    vmin = np.full(sw.size, np.inf)
    np.minimum.at(vmin, inverse, var)
    vm = np.maximum(1.0 / sw, vmin / 4.0)
    return xm, rm, vm, uniq[:, -1].copy(), int(x.shape[0] - sw.size)


# ----------------------------------------------------------------------------------------------------------
# Fields


class GPWindField:
    """Background + GP posterior correction, with posterior sd and correlated samples.

    Attributes
    ----------
    background : WindField
    hyperparameters : GPHyperparameters
    corridor : Corridor
        Region of the sample grids (set at fit time; change with :meth:`with_corridor`).
    info : dict
        Fit summary for ``summary.json["winds"]["gp"]``.
    spread_factor, spread_tail_dof : float, float or None
        Calibration of the spread (set with :meth:`with_spread_factor`, e.g. from ``verify --many``):
        sampled deviations from the mean are multiplied by ``spread_factor`` (Gaussian) or by
        ``spread_factor * sqrt(nu / V)``, V ~ chi2(nu), nu = ``spread_tail_dof`` (Student-t);
        1 and None: the model's own uncertainty.
    """

    spread_factor: float = 1.0
    spread_tail_dof: float | None = None

    @property
    def spread_variance_factor(self) -> float:
        """Multiplier of the posterior variance implied by the calibration: c^2, or c^2 nu / (nu - 2)."""
        nu = self.spread_tail_dof
        return self.spread_factor**2 * (1.0 if nu is None else nu / (nu - 2.0))

    def __init__(
        self,
        background: WindField,
        hyperparameters: GPHyperparameters,
        corridor: Corridor,
        posterior: Posterior | None = None,
        info: dict | None = None,
        background_spec: dict | None = None,
        obs_points: np.ndarray | None = None,
    ) -> None:
        self.background = background
        self.hyperparameters = hyperparameters
        self.corridor = corridor
        self.posterior = posterior
        self.info = dict(info or {})
        self.background_spec = background_spec if background_spec is not None else background_spec_of(background)
        self.projection = LocalProjection(corridor.lat0, corridor.lon0)
        self.obs_points = np.zeros((0, 4)) if obs_points is None else np.asarray(obs_points, dtype=float)

    # -- the WindField protocol
    def _local(self, lat, lon, alt_m, time_s) -> np.ndarray:
        return _to_local(self.projection, self.corridor.time_ref_s, lat, lon, alt_m, time_s)

    def wind(self, lat, lon, alt_m, time_s) -> tuple[np.ndarray, np.ndarray]:
        """Posterior mean u, v (m/s): background plus the GP mean of the residual."""
        ub, vb = self.background.wind(lat, lon, alt_m, time_s)
        if self.posterior is None:
            return np.asarray(ub, dtype=float), np.asarray(vb, dtype=float)
        shape = np.broadcast(np.asarray(lat), np.asarray(lon), np.asarray(alt_m), np.asarray(time_s)).shape
        mean, _ = self.posterior.mean_var(self._local(lat, lon, alt_m, time_s), want_var=False)
        return ub + mean[:, 0].reshape(shape), vb + mean[:, 1].reshape(shape)

    def std(self, lat, lon, alt_m, time_s) -> tuple[np.ndarray, np.ndarray]:
        """Posterior (latent) standard deviation of u and v, m/s (equal for both components).

        Without observations: the prior sd ``sigma_m_s * g(z)`` (``gp_kernels.altitude_profile``).
        """
        shape = np.broadcast(np.asarray(lat), np.asarray(lon), np.asarray(alt_m), np.asarray(time_s)).shape
        if self.posterior is None:
            z_km = np.broadcast_to(np.asarray(alt_m, dtype=float), shape) / 1e3
            s = self.hyperparameters.sigma_m_s * self.hyperparameters.g(z_km) * np.sqrt(self.spread_variance_factor)
            return s, s.copy()
        _, var = self.posterior.mean_var(self._local(lat, lon, alt_m, time_s))
        s = np.sqrt(var * self.spread_variance_factor).reshape(shape)
        return s, s.copy()

    def covariance(self, lat, lon, alt_m, time_s) -> np.ndarray:
        """Posterior covariance (k, k) of one wind component (u and v alike) between k points, m^2/s^2.

        Includes :attr:`spread_variance_factor`; its diagonal is :meth:`std` squared. Used to compute the
        predicted error of a quantity that integrates the wind along a path (e.g. a balloon's drift through
        a layer: w^T C w with w the time steps), as in ``benchmarks/skill_layers.py``.
        """
        xs = self._local(np.ravel(lat), np.ravel(lon), np.ravel(alt_m), np.ravel(time_s))
        if self.posterior is None:
            cov = se_kernel(xs, xs, self.hyperparameters)
        else:
            cov = self.posterior.covariance(xs)
        return cov * self.spread_variance_factor

    def coverage(self) -> Coverage:
        """The background's coverage."""
        return self.background.coverage()

    # -- corridor and samples
    def with_spread_factor(self, factor: float, tail_dof: float | None = None) -> GPWindField:
        """The same field with a calibrated spread: sampled deviations times ``factor`` (and, with
        ``tail_dof`` = nu > 2, times sqrt(nu / V), V ~ chi2(nu) per member: Student-t members).

        A calibration learned from verified flights (``balloonpath verify --many``,
        :func:`balloonpath.verify.fit_spread`); the mean wind is unchanged; :meth:`std` and
        :meth:`covariance` carry :attr:`spread_variance_factor`.
        """
        factor = float(factor)
        if not (np.isfinite(factor) and factor > 0.0):
            raise ValueError(f"spread factor must be finite and > 0, got {factor}")
        if tail_dof is not None and not (np.isfinite(tail_dof) and tail_dof > 2.0):
            raise ValueError(f"spread tail degrees of freedom must be > 2, got {tail_dof}")
        return self._with(spread_factor=factor, spread_tail_dof=None if tail_dof is None else float(tail_dof))

    def _with(self, **attributes: object) -> GPWindField:
        """A shallow copy of this field (same class) with some attributes replaced."""
        out = self.__class__.__new__(self.__class__)
        out.__dict__.update(self.__dict__)
        out.__dict__.update(attributes)
        return out

    def with_corridor(
        self,
        lat_min: float,
        lat_max: float,
        lon_min: float,
        lon_max: float,
        alt_max_m: float,
        time_min_s: float,
        time_max_s: float,
        alt_min_m: float = 0.0,
    ) -> GPWindField:
        """The same field with the sample corridor covering a lat/lon box, altitudes and times.

        The box's corners and edge midpoints are projected into the field's local coordinates; the corridor
        is their bounding rectangle. Longitudes may cross the antimeridian (lon_min > lon_max).
        """
        span = normalize_longitude(lon_max - lon_min) if lon_max != lon_min else 0.0
        span = float(span) % 360.0
        lons = normalize_longitude(lon_min + np.linspace(0.0, span, 5))
        lats = np.linspace(lat_min, lat_max, 5)
        la, lo = np.meshgrid(lats, lons)
        x, y = self.projection.to_local(la.ravel(), lo.ravel())
        c = replace(
            self.corridor,
            x_min_km=float(x.min() / 1e3), x_max_km=float(x.max() / 1e3),
            y_min_km=float(y.min() / 1e3), y_max_km=float(y.max() / 1e3),
            alt_min_m=float(alt_min_m), alt_max_m=float(alt_max_m),
            time_min_s=float(time_min_s), time_max_s=float(time_max_s),
        )
        return self._with(corridor=c)

    def sample_grid(self, n_members: int, memory_budget_bytes: int = MEMORY_BUDGET_BYTES) -> CorridorGrid:
        """The grid used for ``n_members`` members (node budget from the memory budget)."""
        return self._sample_grid_and_points(n_members, memory_budget_bytes)[0]

    def _sample_grid_and_points(
        self, n_members: int, memory_budget_bytes: int
    ) -> tuple[CorridorGrid, np.ndarray | None]:
        """Grid over the corridor, widened to the posterior points within 2 length scales of it.

        Points farther than that (correlation below exp(-2) = 0.14 per axis at the corridor edge) do not
        condition the exact-GP samples (slightly wider spread near the edge: the conservative side).
        """
        lo, hi = self.corridor.box()
        ell = self.hyperparameters.lengths()
        use = None
        if self.posterior is not None:
            pts = self.posterior.points
            use = np.all((pts >= lo - 2 * ell) & (pts <= hi + 2 * ell), axis=1)
            if np.any(use):
                lo = np.minimum(lo, pts[use].min(axis=0))
                hi = np.maximum(hi, pts[use].max(axis=0))
        budget = int(min(MAX_NODES, memory_budget_bytes // (8 * max(int(n_members), 1))))
        return choose_grid(lo, hi, ell, max(budget, 16)), use

    def member_sampler(
        self, n_total: int, memory_budget_bytes: int = MEMORY_BUDGET_BYTES
    ) -> MemberSampler:
        """The grid, sampler and gridded mean for per-member draws of an ensemble of ``n_total`` members.

        The grid depends on ``n_total`` (memory budget) and the corridor only, never on which members a
        chunk draws. Build once per (field, corridor, ensemble size) and call ``.draw(member_ids, seed)``.
        """
        n_total = int(n_total)
        if n_total < 1:
            raise input_error(None, "members", f"must be >= 1, got {n_total}", "ask for at least one member")
        grid, use = self._sample_grid_and_points(n_total, memory_budget_bytes)
        hp = self.hyperparameters
        sampler = GridSampler(grid, hp.lengths(), hp.sigma_m_s, self.posterior, use, hp.profile)
        mean = self.posterior.mean_on_grid(grid) if self.posterior is not None else np.zeros((grid.size, 2))
        return MemberSampler(self.background, self._fast_projection(), self.corridor.time_ref_s, sampler, mean,
                             self.spread_factor, self.spread_tail_dof)

    def sample_members(
        self, member_ids: np.ndarray, seed: int, n_total: int | None = None,
        memory_budget_bytes: int = MEMORY_BUDGET_BYTES,
    ) -> GridMemberWinds:
        """Realisations of the members ``member_ids`` of an ensemble of ``n_total`` (default max id + 1).

        Member i's realisation depends only on (field, corridor, n_total, seed, i): its normals come from
        ``gp_sample.member_wind_generator(seed, i)``, so members drawn in chunks, on any worker, equal the
        same members drawn at once (bit-identical; tested in tests/test_scale.py).
        """
        ids = np.asarray(member_ids, dtype=np.int64).ravel()
        n = int(n_total) if n_total is not None else int(ids.max()) + 1
        return self.member_sampler(n, memory_budget_bytes).draw(ids, seed)

    def _fast_projection(self) -> FastProjection:
        lo, hi = self.corridor.box()
        lat_c, lon_c = self.projection.to_geographic(
            np.array([lo[0], hi[0], lo[0], hi[0], 0.0]) * 1e3, np.array([lo[1], lo[1], hi[1], hi[1], 0.0]) * 1e3
        )
        dlon = normalize_longitude(lon_c - self.corridor.lon0)
        return FastProjection(
            self.projection, float(lat_c.min()) - 0.2, float(lat_c.max()) + 0.2, float(np.abs(dlon).max()) + 0.2
        )

    def sample(
        self, n_members: int, rng: np.random.Generator, memory_budget_bytes: int = MEMORY_BUDGET_BYTES
    ) -> GridMemberWinds:
        """Draw ``n_members`` correlated posterior realisations (see ``gp_sample.py``).

        Deterministic function of the generator state and ``n_members``. Member deviations are drawn in
        batches of ``BATCH_MEMBERS`` (u fields then v fields of each batch). The grid nodes are capped so
        that the float32 deviations of all members fit ``memory_budget_bytes`` (default 128 MiB).
        """
        n_members = int(n_members)
        if n_members < 1:
            raise input_error(None, "members", f"must be >= 1, got {n_members}", "ask for at least one member")
        grid, use = self._sample_grid_and_points(n_members, memory_budget_bytes)
        hp = self.hyperparameters
        sampler = GridSampler(grid, hp.lengths(), hp.sigma_m_s, self.posterior, use, hp.profile)
        dev = np.empty((n_members, grid.size, 2), dtype=np.float32)
        for m0 in range(0, n_members, BATCH_MEMBERS):
            b = min(BATCH_MEMBERS, n_members - m0)
            fields = sampler.draw(2 * b, rng)
            dev[m0 : m0 + b, :, 0] = fields[:b]
            dev[m0 : m0 + b, :, 1] = fields[b:]
        mean = self.posterior.mean_on_grid(grid) if self.posterior is not None else np.zeros((grid.size, 2))
        return GridMemberWinds(
            self.background, self._fast_projection(), self.corridor.time_ref_s, grid, hp.lengths(), mean, dev,
            profile=hp.profile, member_scale=self._sample_scales(n_members, rng),
        )

    def _sample_scales(self, n_members: int, rng: np.random.Generator) -> np.ndarray | float:
        """Spread multipliers of :meth:`sample`'s members (drawn from ``rng`` after the deviations)."""
        if self.spread_tail_dof is None:
            return self.spread_factor
        nu = self.spread_tail_dof
        return self.spread_factor * np.sqrt(nu / rng.chisquare(nu, n_members))

    # -- persistence
    def save(self, path: str | Path) -> Path:
        """Write the field to a ``.npz`` file (atomic): training data, hyperparameters, corridor, background.

        The file holds the (super)observations as residuals and the background's description; the posterior
        is refactored on load (deterministic), so the file stays small.
        """
        meta = {
            "format": FORMAT, "version": FORMAT_VERSION, "kind": type(self).__name__,
            "hyperparameters": self.hyperparameters.as_dict(), "corridor": self.corridor.__dict__,
            "background": self.background_spec, "info": self.info,
            "sparse": bool(self.posterior is not None and self.posterior.sparse),
        }
        arrays = {"meta": np.frombuffer(json.dumps(meta, sort_keys=True).encode(), dtype=np.uint8)}
        arrays["obs_points"] = self.obs_points
        if self.posterior is not None:
            arrays.update(x=self.posterior.x, y=self.posterior.y, noise_var=self.posterior.noise_var,
                          noise_group=self.posterior.noise.group,
                          noise_group_var=np.array([self.posterior.noise.group_var]))
            if self.posterior.sparse:
                arrays["inducing"] = self.posterior.points
        buf = io.BytesIO()
        np.savez(buf, **arrays)
        with atomic_path(path) as tmp:
            tmp.write_bytes(buf.getvalue())
        return Path(path)


class BackgroundErrorField(GPWindField):
    """The background with a prior-only error model: sd ``sigma_m_s * g(z)``, correlated as the kernel.

    Parameters
    ----------
    background : WindField
    sigma_m_s : float
        Per-component error sd, column rms over 0-30 km of the altitude profile (the sd at altitude z is
        ``sigma_m_s * altitude_profile(z)``, about 1.45 sigma_m_s at the jet level), e.g.
        ``background_error_sigma(lead_time_h)``.
    profile : {"nwp", "uniform"}
        Altitude profile g(z) of the error amplitude (``gp_kernels.altitude_profile``); default "nwp", the
        same as fitted fields.
    length_h_km, length_z_km, length_t_h : float
        Correlation length scales of the error (defaults: ``GPHyperparameters`` defaults, from memory).
    center : (lat, lon) or (lat, lon, time_s)
        Centre of the local coordinates and of the default corridor.
    corridor_radius_km, alt_max_m, time_min_s, time_max_s
        Default sample corridor.
    """

    def __init__(
        self,
        background: WindField,
        sigma_m_s: float,
        length_h_km: float = GPHyperparameters.length_h_km,
        length_z_km: float = GPHyperparameters.length_z_km,
        length_t_h: float = GPHyperparameters.length_t_h,
        center: tuple[float, ...] = (0.0, 0.0),
        corridor_radius_km: float = CORRIDOR_RADIUS_KM,
        alt_max_m: float | None = None,
        time_min_s: float | None = None,
        time_max_s: float | None = None,
        info: dict | None = None,
        background_spec: dict | None = None,
        profile: str = "nwp",
    ) -> None:
        hp = GPHyperparameters(float(length_h_km), float(length_z_km), float(length_t_h), float(sigma_m_s),
                               profile)
        corridor = default_corridor(background, center, corridor_radius_km, alt_max_m, time_min_s, time_max_s)
        info = dict(info or {})
        info.setdefault("mode", "background-error")
        info.setdefault("observations", 0)
        super().__init__(background, hp, corridor, None, info, background_spec)


def default_corridor(
    background: WindField,
    center: tuple[float, ...],
    radius_km: float,
    alt_max_m: float | None,
    time_min_s: float | None,
    time_max_s: float | None,
    obs_times: np.ndarray | None = None,
) -> Corridor:
    """Corridor about ``center``: +-radius_km, 0..alt_max_m (default 40 km or the background's top),
    times from the arguments, else the background's coverage, else the observations' span +-3 h, else
    the centre time +-12 h."""
    cov = background.coverage()
    lat0, lon0 = float(center[0]), float(normalize_longitude(center[1]))
    t_ref = float(center[2]) if len(center) > 2 else None
    if time_min_s is None or time_max_s is None:
        if cov.time_min_s is not None and cov.time_max_s is not None:
            time_min_s, time_max_s = cov.time_min_s, cov.time_max_s
        elif obs_times is not None and obs_times.size:
            time_min_s, time_max_s = float(obs_times.min()) - 3 * 3600.0, float(obs_times.max()) + 3 * 3600.0
        else:
            t = t_ref if t_ref is not None else 0.0
            time_min_s, time_max_s = t - CORRIDOR_HALF_TIME_H * 3600.0, t + CORRIDOR_HALF_TIME_H * 3600.0
    if t_ref is None:
        t_ref = 0.5 * (time_min_s + time_max_s)
    top = alt_max_m if alt_max_m is not None else (
        min(cov.alt_max_m, CORRIDOR_ALT_MAX_M) if cov.alt_max_m is not None else CORRIDOR_ALT_MAX_M
    )
    bottom = max(cov.alt_min_m, 0.0) if cov.alt_min_m is not None else 0.0
    r = float(radius_km)
    return Corridor(lat0, lon0, t_ref, -r, r, -r, r, bottom, float(top), float(time_min_s), float(time_max_s))


# ----------------------------------------------------------------------------------------------------------
# Fit


def _clean(obs: WindObservations) -> WindObservations:
    arrays = [np.asarray(getattr(obs, f), dtype=float) for f in ("time_s", "lat", "lon", "alt_m", "u", "v", "sigma")]
    ok = np.all([np.isfinite(a) for a in arrays], axis=0) & (arrays[-1] > 0)
    if not np.all(ok):
        warnings.warn(
            f"wind GP: dropped {int((~ok).sum())} of {ok.size} observations with NaN/inf values or sigma <= 0",
            DataQualityWarning,
            stacklevel=3,
        )
        obs = obs.select(ok)
    return obs


def _center_of(obs: WindObservations) -> tuple[float, float, float]:
    lat = float(np.mean(obs.lat))
    ang = np.radians(obs.lon)
    lon = float(np.degrees(np.arctan2(np.mean(np.sin(ang)), np.mean(np.cos(ang)))))
    return lat, lon, float(np.median(obs.time_s))


def fit_wind_field(
    obs: WindObservations,
    background: WindField,
    *,
    center: tuple[float, ...] | None = None,
    hyperparameters: GPHyperparameters | None = None,
    optimize: bool = True,
    rng: np.random.Generator | None = None,
    lead_time_h: float | None = None,
    corridor_radius_km: float = CORRIDOR_RADIUS_KM,
    alt_max_m: float | None = None,
    max_exact: int = MAX_EXACT,
    n_inducing: int = N_INDUCING,
    background_spec: dict | None = None,
    shared_platform_error: bool = False,
) -> GPWindField:
    """Fuse wind observations over a background: GP regression on the residuals (u, v).

    Parameters
    ----------
    obs : WindObservations
        Observations (rows with NaN or sigma <= 0 are dropped with a ``DataQualityWarning``).
    background : WindField
        The prior mean.
    center : (lat, lon) or (lat, lon, time_s), optional
        Origin of the local coordinates and of the corridor; default: the observations' centroid and median
        time (or (0, 0) without observations).
    hyperparameters : GPHyperparameters, optional
        Starting values (the warm start); with ``optimize=False`` they are used as given. Default: the
        documented defaults with sigma from the background error model.
    optimize : bool
        Learn the hyperparameters by maximising the log marginal likelihood (when >= 20 observations).
    rng : numpy.random.Generator, optional
        For the extra optimiser starts and subsets; default ``numpy.random.default_rng(0)`` (deterministic).
    lead_time_h : float, optional
        Background lead time for its error model; default: ``background.lead_time_h`` if present, else 12 h.
    corridor_radius_km, alt_max_m
        Default sample corridor (see :func:`default_corridor`).
    max_exact, n_inducing
        Exact GP up to ``max_exact`` (super)observations; DTC with ``n_inducing`` points beyond.
    background_spec : dict, optional
        How to reload the background (stored by :meth:`GPWindField.save`); default from the background.
    shared_platform_error : bool
        Add to the noise covariance the error shared by all observations of one platform (source labels
        ``"<kind>:<platform>"``, :func:`platform_groups`), tau = :func:`aircraft_shared_error_sigma`
        (exact GP only; the DTC approximation keeps a diagonal noise). Off by default: in the skill benchmark
        it widened the fused zones without improving the scores (docs/winds-gp.md, "Shared aircraft error").

    Returns
    -------
    GPWindField
        A ``BackgroundErrorField`` when there are no usable observations.
    """
    rng = np.random.default_rng(0) if rng is None else rng
    if lead_time_h is None:
        lead_time_h = float(getattr(background, "lead_time_h", DEFAULT_LEAD_TIME_H) or DEFAULT_LEAD_TIME_H)
    sigma_b = background_error_sigma(lead_time_h)
    hp0 = hyperparameters if hyperparameters is not None else GPHyperparameters(sigma_m_s=sigma_b)
    obs = _clean(obs)
    n_raw = len(obs)
    if n_raw == 0:
        warnings.warn(
            "wind GP: no usable observations; the field is the background with its error model "
            f"(sd {hp0.sigma_m_s:.2f} m/s per component, column rms of its altitude profile)",
            FitWarning,
            stacklevel=2,
        )
        return BackgroundErrorField(
            background, hp0.sigma_m_s, hp0.length_h_km, hp0.length_z_km, hp0.length_t_h,
            center=center if center is not None else (0.0, 0.0), corridor_radius_km=corridor_radius_km,
            alt_max_m=alt_max_m, info={"lead_time_h": lead_time_h}, background_spec=background_spec,
            profile=hp0.profile,
        )
    center = _center_of(obs) if center is None else tuple(center)
    if len(center) < 3:
        center = (*center, float(np.median(obs.time_s)))
    corridor = default_corridor(
        background, center, corridor_radius_km, alt_max_m, None, None, np.asarray(obs.time_s, dtype=float)
    )
    proj = LocalProjection(corridor.lat0, corridor.lon0)
    x = _to_local(proj, corridor.time_ref_s, obs.lat, obs.lon, obs.alt_m, obs.time_s)
    ub, vb = background.wind(obs.lat, obs.lon, obs.alt_m, obs.time_s)
    r = np.column_stack([np.asarray(obs.u) - np.ravel(ub), np.asarray(obs.v) - np.ravel(vb)])
    if not np.all(np.isfinite(r)):
        raise input_error(None, "background", "gives NaN wind at some observation points",
                          "use a background that covers the observations", cls=InputDataError)
    var = np.asarray(obs.sigma, dtype=float) ** 2
    group = platform_groups(obs.source)
    tau2 = aircraft_shared_error_sigma() ** 2 if shared_platform_error else 0.0
    x, r, var, group, n_dup = _merge_cells(x, r, var, DUPLICATE_CELL, group)
    if n_dup:
        warnings.warn(f"wind GP: merged {n_dup} duplicate observations", DataQualityWarning, stacklevel=2)
    n_super = 0
    if x.shape[0] > max_exact:
        n0 = x.shape[0]
        x, r, var, group, _ = _merge_cells(x, r, var, SUPEROB_CELL, group)
        n_super = n0 - x.shape[0]
    n = x.shape[0]
    info: dict = {
        "mode": "exact", "observations": n_raw, "points": n, "superobserved": n_super,
        "duplicates_merged": n_dup, "lead_time_h": float(lead_time_h), "learned": [],
    }
    hp = hp0
    if optimize and n >= MIN_OBS_TO_LEARN:
        hp, info = _learn(x, r, NoiseCovariance(var, group, tau2), hp0, rng, info)
    elif optimize:
        warnings.warn(
            f"wind GP: only {n} observations (< {MIN_OBS_TO_LEARN}); hyperparameters not learned, using "
            f"defaults {_fmt_hp(hp0)}",
            FitWarning,
            stacklevel=2,
        )
    inducing = None
    if n > max_exact:
        pick = np.sort(rng.choice(n, size=min(n_inducing, n), replace=False))
        inducing = x[pick]
        info["mode"] = "dtc"
        info["inducing_points"] = int(pick.size)
    posterior = Posterior(x, r, var, hp, inducing, group, tau2)
    info["platforms"] = int(np.unique(group[group >= 0]).size)
    info["platform_error_sd_m_s"] = float(np.sqrt(tau2)) if not posterior.sparse else 0.0
    if not posterior.sparse:
        noise = posterior.noise.dense() if posterior.noise.correlated else posterior.noise.diagonal()
        info["log_marginal_likelihood"] = float(
            log_marginal_likelihood(hp.to_log(), x, r, noise, np.zeros(4, bool), hp.profile)[0]
        ) if n <= 2000 else None
    info["hyperparameters"] = hp.as_dict()
    obs_points = np.column_stack([obs.lat, obs.lon, obs.alt_m, obs.time_s])
    return GPWindField(background, hp, corridor, posterior, info, background_spec, obs_points)


def _fmt_hp(hp: GPHyperparameters) -> str:
    return (f"horizontal {hp.length_h_km:.0f} km, vertical {hp.length_z_km:.2f} km, time {hp.length_t_h:.1f} h, "
            f"sigma {hp.sigma_m_s:.2f} m/s")


def _learn(x, r, noise: NoiseCovariance, hp0, rng, info):
    """Hyperparameter search on a seeded subset; dimensions the data cannot inform stay at their start."""
    span = x.max(axis=0) - x.min(axis=0)
    span_h = float(np.hypot(span[0], span[1]))
    free = np.array([
        span_h >= BOUNDS["length_h_km"][0], span[2] >= BOUNDS["length_z_km"][0],
        span[3] >= BOUNDS["length_t_h"][0], True,
    ])
    names = ("horizontal", "vertical", "time")
    fixed = [names[i] for i in range(3) if not free[i]]
    if fixed:
        warnings.warn(
            "wind GP: the observations span too little in " + ", ".join(fixed)
            + " to learn that length scale; kept the default (" + _fmt_hp(hp0) + ")",
            FitWarning,
            stacklevel=3,
        )
    sub = np.arange(x.shape[0])
    if sub.size > MAX_OPTIMIZE_POINTS:
        sub = np.sort(rng.choice(sub.size, size=MAX_OPTIMIZE_POINTS, replace=False))
    part = noise.subset(sub)
    res = optimize_hyperparameters(x[sub], r[sub], part.dense() if part.correlated else part.diagonal(), hp0,
                                   free, rng)
    if res.at_bounds:
        warnings.warn(
            "wind GP: learned " + ", ".join(res.at_bounds) + " at the edge of its allowed range "
            f"({_fmt_hp(res.hyperparameters)})",
            FitWarning,
            stacklevel=3,
        )
    info = dict(info, learned=list(res.learned), optimizer_points=int(sub.size), optimizer_starts=res.n_starts,
                at_bounds=list(res.at_bounds))
    return res.hyperparameters, info


# ----------------------------------------------------------------------------------------------------------
# Background description and loading


def load_wind_field(
    path: str | Path, background_loader: Callable[[dict], WindField] | None = None
) -> GPWindField:
    """Read a field written by :meth:`GPWindField.save`.

    Parameters
    ----------
    path : str or Path
    background_loader : callable(spec) -> WindField, optional
        Rebuilds the background from the stored description; default :func:`default_background_loader`.

    Raises
    ------
    InputDataError
        When the file is not a balloonpath GP wind field.
    """
    path = Path(path)
    try:
        with np.load(path, allow_pickle=False) as data:
            arrays = {k: data[k] for k in data.files}
        meta = json.loads(arrays["meta"].tobytes().decode())
    except (OSError, ValueError, KeyError) as exc:
        raise input_error(path, "file", f"is not a fitted wind field ({type(exc).__name__})",
                          "give a file written by `balloonpath winds fit`") from None
    if meta.get("format") != FORMAT:
        raise input_error(path, "format", f"expected {FORMAT}, got {meta.get('format')}",
                          "give a file written by `balloonpath winds fit`")
    loader = background_loader or default_background_loader
    background = loader(meta["background"])
    hp_meta = dict(meta["hyperparameters"])
    if int(meta.get("version", 1)) < 2:
        hp_meta.setdefault("profile", "uniform")  # version 1: stationary kernel
    hp = GPHyperparameters(**hp_meta)
    corridor = Corridor(**meta["corridor"])
    posterior = None
    if "x" in arrays:
        group_var = float(arrays["noise_group_var"][0]) if "noise_group_var" in arrays else 0.0
        posterior = Posterior(arrays["x"], arrays["y"], arrays["noise_var"], hp, arrays.get("inducing"),
                              arrays.get("noise_group"), group_var)
    field = GPWindField(background, hp, corridor, posterior, meta["info"], meta["background"], arrays["obs_points"])
    return field
