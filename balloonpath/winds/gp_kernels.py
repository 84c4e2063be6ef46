"""Kernel, log marginal likelihood with analytic gradient, and hyperparameter search for the wind GP.

The GP works in local coordinates ``X = [east_km, north_km, alt_km, time_h]`` (see ``gp.py``). The kernel is an
anisotropic squared exponential with one horizontal, one vertical and one time length scale, whose amplitude
varies with altitude through a fixed profile g(z) of background-error amplitude (:func:`altitude_profile`):

    k(a, b) = s^2 g(z_a) g(z_b) exp(-1/2 [ ((dx^2 + dy^2) / l_h^2) + dz^2 / l_z^2 + dt^2 / l_t^2 ])

(a stationary kernel times g(z_a) g(z_b) is a valid, non-stationary covariance: the covariance of
g(z) f(x) for a stationary f.) It is still a product of one-dimensional kernels, the altitude factor being
diag(g) K_z diag(g), which ``gp_sample.py`` exploits (Kronecker structure on a grid).
The u and v residuals are two independent GPs sharing this kernel, so one Cholesky factor serves both.

References
----------
[RW2006] C. E. Rasmussen & C. K. I. Williams, Gaussian Processes for Machine Learning, MIT Press 2006:
    Algorithm 2.1 p. 19 (Cholesky prediction and log marginal likelihood), eq. 5.9 p. 114 (gradient of the
    log marginal likelihood), eq. 4.9 (squared exponential with automatic relevance determination).
[NWPverif] Typical verification of global NWP wind forecasts against radiosondes (WMO/CBS exchanged scores,
    ECMWF and Met Office verification pages): vector-wind RMSE of short-range forecasts is largest at the
    jet level (~250 hPa, ~10 km), roughly half that near 50 hPa (~20 km) and in the lower troposphere;
    common practice, figures from memory (see :data:`NWP_PROFILE`).
[Byrd1995] R. H. Byrd, P. Lu, J. Nocedal & C. Zhu, "A limited memory algorithm for bound constrained
    optimization", SIAM J. Sci. Comput. 16:1190-1208 (1995) (L-BFGS-B, used through scipy.optimize).
"""

from __future__ import annotations

import warnings
from dataclasses import asdict, dataclass

import numpy as np
from scipy.linalg import cho_solve, cholesky, solve_triangular
from scipy.optimize import minimize

from balloonpath.errors import FitWarning

#: Bounds of the hyperparameters, chosen as physically sensible ranges (see docs/winds-gp.md):
#: horizontal 20-1000 km (mesoscale to synoptic), vertical 0.2-5 km (shear layers to deep
#: troposphere), time 0.5-24 h, signal sd 0.5-15 m/s (per wind component).
BOUNDS = {
    "length_h_km": (20.0, 1000.0),
    "length_z_km": (0.2, 5.0),
    "length_t_h": (0.5, 24.0),
    "sigma_m_s": (0.5, 15.0),
}

#: Jitter ladder added to the diagonal when a Cholesky factorisation fails (m^2/s^2).
JITTERS = (0.0, 1e-8, 1e-6, 1e-4, 1e-2)


#: Altitude profile of background-error amplitude (shape h(z), 1 at its peak, the jet level). From memory,
#: common NWP verification practice ([NWPverif]): short-range vector-wind RMSE against radiosondes in the
#: mid-latitudes, relative to its jet-level (~250 hPa) value, is about 0.55-0.6 near the ground and at
#: 850 hPa (~1.5 km), 0.75 at 500 hPa (~5.5 km), 1 at 250 hPa (~10.5 km), 0.65 at 100 hPa (~16 km) and
#: 0.45-0.5 at 50-10 hPa (20-30 km). Represented by two half-Gaussians about the jet level z_j (C1 at z_j):
#: g(z) = f + (1 - f) exp(-(z - z_j)^2 / (2 w^2)) with (f, w) = (0.5, 5 km) below z_j and (0.45, 4 km)
#: above. The kernel uses g = h / rms(h), rms over the balloon column 0-30 km (uniform in altitude), so
#: the signal sd s and the background error sd keep their meaning of a column-average sd (the total error
#: variance of the column is that of the stationary model with the same s); the jet-level sd is s / rms(h).
NWP_PROFILE = {"jet_km": 10.5, "floor_below": 0.5, "width_below_km": 5.0, "floor_above": 0.45,
               "width_above_km": 4.0, "column_km": (0.0, 30.0)}
#: Profiles by name: "nwp" (default, :data:`NWP_PROFILE`) and "uniform" (g = 1: the stationary kernel).
PROFILES = ("nwp", "uniform")


def _profile_shape(z: np.ndarray) -> np.ndarray:
    """h(z) of :data:`NWP_PROFILE` (1 at the jet level)."""
    p = NWP_PROFILE
    below = z < p["jet_km"]
    floor = np.where(below, p["floor_below"], p["floor_above"])
    width = np.where(below, p["width_below_km"], p["width_above_km"])
    return floor + (1.0 - floor) * np.exp(-0.5 * ((z - p["jet_km"]) / width) ** 2)


def _column_rms() -> float:
    z = np.linspace(*NWP_PROFILE["column_km"], 30_001)
    h2 = _profile_shape(z) ** 2
    return float(np.sqrt(np.sum(0.5 * (h2[1:] + h2[:-1]) * np.diff(z)) / (z[-1] - z[0])))


#: rms of h(z) over the column (trapezoid rule, 1 m steps): g = h / PROFILE_COLUMN_RMS.
PROFILE_COLUMN_RMS = _column_rms()


def altitude_profile(alt_km: np.ndarray | float, profile: str = "nwp") -> np.ndarray:
    """Relative amplitude g(z) of the background wind error at altitude z (column rms 1 over 0-30 km).

    Parameters
    ----------
    alt_km : array_like
        Altitude, km (any shape).
    profile : {"nwp", "uniform"}
        ``"uniform"`` returns ones (stationary kernel).

    Returns
    -------
    ndarray
        g(z), same shape as ``alt_km``, positive; its peak (jet level) is 1 / PROFILE_COLUMN_RMS.

    Notes
    -----
    g(z) = h(z) / rms_{0-30 km}(h), h(z) = f + (1 - f) exp(-(z - z_j)^2 / (2 w^2)), (f, w) = (0.5, 5 km)
    for z < z_j and (0.45, 4 km) above, z_j = 10.5 km (:data:`NWP_PROFILE`; shape from common NWP
    verification practice, figures from memory, [NWPverif]). Smooth (C1 at z_j, C-infinity elsewhere),
    bounded away from 0.
    """
    z = np.asarray(alt_km, dtype=float)
    if profile == "uniform":
        return np.ones_like(z)
    if profile != "nwp":
        raise ValueError(f"unknown altitude profile {profile!r}; choose one of {PROFILES}")
    return _profile_shape(z) / PROFILE_COLUMN_RMS


@dataclass(frozen=True)
class GPHyperparameters:
    """Kernel hyperparameters: length scales and signal standard deviation (per wind component).

    Defaults (used when too few observations to learn them) are from memory, order-of-magnitude values for
    the correlation of forecast wind errors in the free troposphere: 150 km horizontally, 1.5 km
    vertically, 6 h in time; the signal sd is set from the background error model. ``sigma_m_s`` is the
    column-rms sd (0-30 km) of the altitude profile; at altitude z the prior sd is
    ``sigma_m_s * altitude_profile(z, profile)`` (about 1.45 sigma_m_s at the jet level). ``profile`` is
    a fixed model choice, not learned.
    """

    length_h_km: float = 150.0
    length_z_km: float = 1.5
    length_t_h: float = 6.0
    sigma_m_s: float = 3.0
    profile: str = "nwp"

    def __post_init__(self) -> None:
        if self.profile not in PROFILES:
            raise ValueError(f"unknown altitude profile {self.profile!r}; choose one of {PROFILES}")

    def g(self, alt_km: np.ndarray | float) -> np.ndarray:
        """The altitude profile g(z) of this kernel (:func:`altitude_profile`)."""
        return altitude_profile(alt_km, self.profile)

    def lengths(self) -> np.ndarray:
        """Length scale per input column [east, north, alt, time] (km, km, km, h)."""
        return np.array([self.length_h_km, self.length_h_km, self.length_z_km, self.length_t_h])

    def to_log(self) -> np.ndarray:
        """log of (length_h_km, length_z_km, length_t_h, sigma_m_s)."""
        return np.log([self.length_h_km, self.length_z_km, self.length_t_h, self.sigma_m_s])

    @staticmethod
    def from_log(theta: np.ndarray, profile: str = "nwp") -> GPHyperparameters:
        """Inverse of :meth:`to_log` (the profile is given separately)."""
        e = np.exp(np.asarray(theta, dtype=float))
        return GPHyperparameters(float(e[0]), float(e[1]), float(e[2]), float(e[3]), profile)

    def as_dict(self) -> dict[str, float | str]:
        """Plain dict (JSON)."""
        return {k: (v if isinstance(v, str) else float(v)) for k, v in asdict(self).items()}


def se_kernel(a: np.ndarray, b: np.ndarray, hp: GPHyperparameters) -> np.ndarray:
    """Anisotropic squared-exponential covariance between point sets.

    Parameters
    ----------
    a : ndarray, shape (n, 4)
        Points [east_km, north_km, alt_km, time_h].
    b : ndarray, shape (m, 4)
        Points.
    hp : GPHyperparameters
        Length scales and signal sd.

    Returns
    -------
    ndarray, shape (n, m)
        k(a_i, b_j) in m^2/s^2.

    Notes
    -----
    k(a, b) = s^2 g(z_a) g(z_b) exp(-r^2 / 2), r^2 = sum_d (a_d - b_d)^2 / l_d^2 ([RW2006] eq. 4.9, ARD
    form; g = :func:`altitude_profile`, 1 for ``profile="uniform"``).
    """
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    ell = hp.lengths()
    # Distances are translation invariant: centring on a's mean before the expansion |a|^2 + |b|^2 - 2 a.b
    # avoids the cancellation that coordinates far from the origin (e.g. hours since 1970) would cause.
    off = a.mean(axis=0) if a.shape[0] else 0.0
    sa = (a - off) / ell
    sb = (b - off) / ell
    r2 = (
        np.sum(sa**2, axis=1)[:, None] + np.sum(sb**2, axis=1)[None, :] - 2.0 * sa @ sb.T
    )
    np.maximum(r2, 0.0, out=r2)
    out = np.exp(-0.5 * r2)
    out *= hp.sigma_m_s**2
    if hp.profile != "uniform":
        out *= hp.g(a[:, 2])[:, None]
        out *= hp.g(b[:, 2])[None, :]
    return out


def robust_cholesky(matrix: np.ndarray, what: str = "kernel matrix") -> tuple[np.ndarray, float]:
    """Lower Cholesky factor, adding the smallest jitter of :data:`JITTERS` that makes it succeed.

    Returns the factor and the jitter used; warns ``FitWarning`` when a jitter was needed.

    Raises
    ------
    numpy.linalg.LinAlgError
        When even the largest jitter fails (the matrix has NaN or is far from positive definite).
    """
    n = matrix.shape[0]
    scale = max(float(np.mean(np.diag(matrix))), 1e-12) if n else 1.0
    for jitter in JITTERS:
        try:
            a = matrix if jitter == 0.0 else matrix + np.eye(n) * jitter * scale
            factor = cholesky(a, lower=True, check_finite=False)
            if not np.all(np.isfinite(np.diag(factor))):
                raise np.linalg.LinAlgError("non-finite factor")
            if jitter > 0.0:
                warnings.warn(
                    f"wind GP: {what} was not positive definite; added jitter {jitter:g} x mean diagonal "
                    "(duplicate or near-duplicate observations?)",
                    FitWarning,
                    stacklevel=3,
                )
            return factor, jitter * scale
        except (np.linalg.LinAlgError, ValueError):
            continue
    raise np.linalg.LinAlgError(f"wind GP: {what} is not positive definite even with jitter")


def log_marginal_likelihood(
    theta: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    noise_var: np.ndarray,
    free: np.ndarray | None = None,
    profile: str = "nwp",
) -> tuple[float, np.ndarray]:
    """Log marginal likelihood of the u and v residuals and its gradient in log hyperparameters.

    Parameters
    ----------
    theta : ndarray, shape (4,)
        log of (length_h_km, length_z_km, length_t_h, sigma_m_s).
    x : ndarray, shape (n, 4)
        Inputs.
    y : ndarray, shape (n, k)
        Residuals, one column per output (k = 2: u, v); outputs are independent and share the kernel.
    noise_var : ndarray, shape (n,) or (n, n)
        Observation error variance per point (heteroscedastic, fixed), or the full error covariance
        (e.g. :meth:`NoiseCovariance.dense`, correlated errors of one platform).
    free : ndarray of bool, shape (4,), optional
        Which gradient entries to compute (others are returned as 0).
    profile : str
        Altitude profile of the kernel (:func:`altitude_profile`; fixed, not a parameter).

    Returns
    -------
    lml : float
        sum over outputs of log p(y_o | X, theta).
    grad : ndarray, shape (4,)
        d lml / d theta.

    Notes
    -----
    [RW2006] Algorithm 2.1: L = chol(K + diag(noise)), alpha = L^T \\ (L \\ y),
    log p = -1/2 y^T alpha - sum log L_ii - n/2 log 2 pi (per output).
    [RW2006] eq. 5.9: d log p / d theta_j = 1/2 tr((alpha alpha^T - K^-1) dK/dtheta_j); summed over the k
    outputs this is 1/2 tr((A A^T - k K^-1) dK/dtheta_j) with A = [alpha_1 .. alpha_k].
    For the squared exponential, dK/dlog l_d = K_f * (dx_d / l_d)^2 (elementwise; the horizontal scale
    collects east and north), dK/dlog s = 2 K_f. The altitude profile multiplies K_f by the fixed
    diag(g) . diag(g), which does not depend on theta, so these formulas hold unchanged.
    """
    hp = GPHyperparameters.from_log(theta, profile)
    n, k_out = y.shape
    kf = se_kernel(x, x, hp)
    ky = kf + (np.diag(noise_var) if np.ndim(noise_var) == 1 else noise_var)
    factor, _ = robust_cholesky(ky, "kernel matrix during the hyperparameter search")
    alpha = cho_solve((factor, True), y, check_finite=False)
    lml = float(
        -0.5 * np.sum(y * alpha)
        - k_out * np.sum(np.log(np.diag(factor)))
        - 0.5 * n * k_out * np.log(2.0 * np.pi)
    )
    free = np.ones(4, dtype=bool) if free is None else np.asarray(free, dtype=bool)
    grad = np.zeros(4)
    if not np.any(free):
        return lml, grad
    linv = solve_triangular(factor, np.eye(n), lower=True, check_finite=False)
    kinv = linv.T @ linv
    w = alpha @ alpha.T - k_out * kinv  # A A^T - k K^-1
    w *= kf  # elementwise with K_f: every dK/dtheta is K_f times something
    ell = hp.lengths()
    if free[0]:
        d2 = _sqdist(x[:, 0], ell[0]) + _sqdist(x[:, 1], ell[1])
        grad[0] = 0.5 * np.sum(w * d2)
    if free[1]:
        grad[1] = 0.5 * np.sum(w * _sqdist(x[:, 2], ell[2]))
    if free[2]:
        grad[2] = 0.5 * np.sum(w * _sqdist(x[:, 3], ell[3]))
    if free[3]:
        grad[3] = np.sum(w)  # 1/2 tr(W 2 K_f)
    return lml, grad


def _sqdist(col: np.ndarray, ell: float) -> np.ndarray:
    s = col / ell
    return (s[:, None] - s[None, :]) ** 2


@dataclass(frozen=True)
class OptimizeResult:
    """Outcome of the hyperparameter search."""

    hyperparameters: GPHyperparameters
    lml: float
    n_points: int
    n_starts: int
    learned: tuple[str, ...]
    at_bounds: tuple[str, ...]


NAMES = ("length_h_km", "length_z_km", "length_t_h", "sigma_m_s")


def optimize_hyperparameters(
    x: np.ndarray,
    y: np.ndarray,
    noise_var: np.ndarray,
    initial: GPHyperparameters,
    free: np.ndarray,
    rng: np.random.Generator,
    n_starts: int = 3,
    max_iter: int = 80,
) -> OptimizeResult:
    """Maximise the log marginal likelihood with L-BFGS-B ([Byrd1995]) in log space, several starts.

    Parameters
    ----------
    x, y, noise_var
        As in :func:`log_marginal_likelihood`.
    initial : GPHyperparameters
        First start (the warm start); fixed parameters keep this value.
    free : ndarray of bool, shape (4,)
        Which of (length_h, length_z, length_t, sigma) to learn.
    rng : numpy.random.Generator
        Draws the other starts uniformly in log space inside :data:`BOUNDS`.
    n_starts : int
        Number of starts (the first is ``initial``).
    max_iter : int
        L-BFGS-B iteration cap per start.

    Notes
    -----
    Method: L-BFGS-B with the analytic gradient of [RW2006] eq. 5.9; tolerance ``ftol=1e-9``; the best
    start wins. A learned value within 1 % of a bound is reported in ``at_bounds`` (the caller warns).
    """
    lo = np.log([BOUNDS[nm][0] for nm in NAMES])
    hi = np.log([BOUNDS[nm][1] for nm in NAMES])
    theta0 = np.clip(initial.to_log(), lo, hi)
    free = np.asarray(free, dtype=bool)
    idx = np.flatnonzero(free)
    if idx.size == 0:
        lml, _ = log_marginal_likelihood(theta0, x, y, noise_var, free, initial.profile)
        return OptimizeResult(GPHyperparameters.from_log(theta0, initial.profile), lml, len(x), 0, (), ())

    def objective(p: np.ndarray) -> tuple[float, np.ndarray]:
        theta = theta0.copy()
        theta[idx] = p
        try:
            lml, grad = log_marginal_likelihood(theta, x, y, noise_var, free, initial.profile)
        except np.linalg.LinAlgError:
            return 1e25, np.zeros(idx.size)
        return -lml, -grad[idx]

    starts = [theta0[idx]]
    for _ in range(max(n_starts, 1) - 1):
        starts.append(rng.uniform(lo[idx], hi[idx]))
    best = None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FitWarning)
        for p0 in starts:
            res = minimize(
                objective, p0, jac=True, method="L-BFGS-B",
                bounds=list(zip(lo[idx], hi[idx], strict=True)),
                options={"maxiter": max_iter, "ftol": 1e-9},
            )
            if best is None or res.fun < best.fun:
                best = res
    theta = theta0.copy()
    theta[idx] = best.x
    at = tuple(NAMES[i] for i in idx if min(theta[i] - lo[i], hi[i] - theta[i]) < 0.01)
    return OptimizeResult(
        GPHyperparameters.from_log(theta, initial.profile), -float(best.fun), len(x), len(starts),
        tuple(NAMES[i] for i in idx), at,
    )


# ----------------------------------------------------------------------------------------------------------
# Observation-error covariance with a per-platform random effect


class NoiseCovariance:
    """Observation-error covariance Sigma = diag(var) + tau^2 Z Z^T (Z: platform indicator).

    Parameters
    ----------
    var : ndarray, shape (n,)
        Independent error variance of each observation (m^2/s^2).
    group : ndarray of int, shape (n,), optional
        Platform (e.g. aircraft) of each observation; -1 = its own platform (no shared error).
    group_var : float
        tau^2, the variance of the error shared by all observations of one platform (a random effect).

    Notes
    -----
    Observations of one platform share an error e_a ~ N(0, tau^2) per component (for aircraft the
    residual heading error, docs/winds-gp.md), so Cov(eps_i, eps_j) = tau^2 when i and j belong to the same
    platform. Sigma is block diagonal after sorting by platform; draws use a Cholesky factor per block.
    """

    def __init__(self, var: np.ndarray, group: np.ndarray | None = None, group_var: float = 0.0) -> None:
        self.var = np.asarray(var, dtype=float)
        n = self.var.size
        self.group = np.full(n, -1, dtype=np.int64) if group is None else np.asarray(group, dtype=np.int64)
        self.group_var = float(group_var)
        self.blocks: list[np.ndarray] = []
        if self.group_var > 0.0:
            ids = np.unique(self.group[self.group >= 0])
            self.blocks = [np.nonzero(self.group == g)[0] for g in ids]
            self.blocks = [b for b in self.blocks if b.size > 1]

    @property
    def correlated(self) -> bool:
        """True when some observations share an error."""
        return bool(self.blocks)

    def diagonal(self) -> np.ndarray:
        """Total error variance of each observation (var + tau^2 for platform members)."""
        extra = np.where(self.group >= 0, self.group_var, 0.0)
        return self.var + extra

    def add_to(self, matrix: np.ndarray) -> np.ndarray:
        """matrix += Sigma (in place; returns it)."""
        matrix[np.diag_indices_from(matrix)] += self.diagonal()
        for b in self.blocks:
            block = matrix[np.ix_(b, b)]
            block += self.group_var
            block[np.diag_indices_from(block)] -= self.group_var  # the diagonal already holds tau^2
            matrix[np.ix_(b, b)] = block
        return matrix

    def dense(self) -> np.ndarray:
        """Sigma as an (n, n) matrix."""
        return self.add_to(np.zeros((self.var.size, self.var.size)))

    def subset(self, use: np.ndarray) -> NoiseCovariance:
        """The covariance of the observations in ``use`` (mask or indices)."""
        return NoiseCovariance(self.var[use], self.group[use], self.group_var)

    def draw(self, normals: np.ndarray) -> np.ndarray:
        """eps = L z ~ N(0, Sigma) from standard normals z of shape (n, k) (L: blockwise Cholesky)."""
        z = np.asarray(normals, dtype=float)
        eps = z * np.sqrt(self.diagonal())[:, None]
        for b in self.blocks:
            cov = np.full((b.size, b.size), self.group_var)
            cov[np.diag_indices_from(cov)] += self.var[b]
            eps[b] = cholesky(cov, lower=True, check_finite=False) @ z[b]
        return eps
