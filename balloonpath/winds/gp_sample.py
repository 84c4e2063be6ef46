"""Correlated wind realisations for the ensemble: posterior draws on a corridor grid, then interpolation.

Method (see docs/winds-gp.md, "Correlated samples"):

1. A regular grid covers the corridor in local coordinates [east_km, north_km, alt_km, time_h], spacing about
   a third of each length scale, node count capped by a memory budget.
2. Prior draw on the grid exploiting the Kronecker structure of the separable squared-exponential kernel:
   g = s (A_x (x) A_y (x) A_z (x) A_t) xi, xi ~ N(0, I), with A_d A_d^T = K_d the 1-D correlation matrix
   (eigen-square-root, negative round-off eigenvalues clipped). Cost O(G sum_d n_d) per field.
3. The field between nodes is the multilinear interpolation, rescaled by c(x) so that its prior variance is
   exactly s^2 (the variance of a linear interpolant of correlated node values factorises over dimensions).
4. Matheron's rule ([Wilson2020]): the posterior deviation is e = f~ + k~(., P) c with
   c = -(K + Lambda)^-1 (f~(P) + eps) (exact GP, eps ~ N(0, Lambda)) or the sparse analogue; the cross term
   k~(., P) c is computed on the grid as K_gg W^T c (scatter, then Kronecker matrix product).
5. Member k's wind = background + gridded posterior mean + g(z) x deviation of member k (float32 storage).

Altitude profile: the kernel is s^2 g(z) g(z') k0 with k0 the stationary separable kernel (``gp_kernels``),
i.e. the covariance of g(z) f0(x), f0 stationary. The grid holds deviations of the *normalised* process
e0 = e / g(z) (prior f0, stationary, so steps 2-3 are unchanged) and ``GridMemberWinds`` multiplies by
g(z) at the evaluation point. In the update the observation rows carry g(z_i): with G_P = diag(g(z_P)),
f~(P) = G_P W f0, K~ = s^2 G_P K0~ G_P, and e0 = s f0~ + s^2 K0_gg W^T G_P c.

References
----------
[Wilson2020] J. T. Wilson, V. Borovitskiy, A. Terenin, P. Mostowsky & M. P. Deisenroth, "Efficiently sampling
    functions from Gaussian process posteriors", Proc. 37th ICML, PMLR 119 (2020) (Matheron's rule /
    pathwise conditioning).
[Saatci2012] Y. Saatci, Scalable inference for structured Gaussian process models, PhD thesis, Cambridge
    2012, ch. 5 (Kronecker matrix-vector products for separable kernels on grids); from memory.
[Shah2014] A. Shah, A. G. Wilson & Z. Ghahramani, "Student-t processes as alternatives to Gaussian
    processes", Proc. 17th AISTATS, PMLR 33 (2014): a Student-t process as a Gaussian process whose scale
    has an inverse-gamma prior (the calibrated spread's members, :func:`member_spread_multipliers`); from
    memory.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from scipy import sparse
from scipy.linalg import cho_solve

from balloonpath.errors import FitWarning
from balloonpath.geodesy import LocalProjection, normalize_longitude
from balloonpath.winds.gp_kernels import altitude_profile, robust_cholesky

if TYPE_CHECKING:
    from balloonpath.winds.field import WindField
    from balloonpath.winds.gp import Posterior

#: Memory budget for all members' deviation grids (bytes) and the cap on grid nodes per field.
MEMORY_BUDGET_BYTES = 128 * 2**20
MAX_NODES = 60_000
#: Target grid spacing as a fraction of each length scale.
SPACING_FRACTION = 1.0 / 3.0
#: Members drawn per batch (bounds the working memory). Per-member draws (:class:`MemberSampler`) use
#: batches aligned to multiples of this number, so results do not depend on how members are chunked.
BATCH_MEMBERS = 32
#: Child index of a member's SeedSequence that feeds its wind realisation (see :func:`member_wind_generator`).
WIND_STREAM_CHILD = 1
#: Child of a member's seed sequence that draws its spread multiplier (:func:`member_spread_multipliers`).
SPREAD_STREAM_CHILD = 2


class FastProjection:
    """Cubic polynomial fit of the azimuthal-equidistant projection over a box, for per-step speed.

    ``pyproj`` costs about 0.5 ms per call for 1000 points, too slow for the integrator's inner loop. Over
    the corridor box the cubic in (dlat, dlon) reproduces ``LocalProjection`` to well under 0.1 km
    (checked in tests); the wind field varies on scales of 20 km or more.
    """

    def __init__(self, projection: LocalProjection, lat_min: float, lat_max: float, dlon_half: float) -> None:
        self.lat0 = projection.lat0
        self.lon0 = projection.lon0
        lat = np.linspace(lat_min, lat_max, 25)
        dlon = np.linspace(-dlon_half, dlon_half, 25)
        la, lo = np.meshgrid(lat, dlon, indexing="ij")
        x, y = projection.to_local(la.ravel(), self.lon0 + lo.ravel())
        feats = self._features(la.ravel(), lo.ravel())
        coef, *_ = np.linalg.lstsq(feats, np.column_stack([x, y]) / 1000.0, rcond=None)
        self.coef = coef  # (10, 2)

    def _features(self, lat: np.ndarray, dlon: np.ndarray) -> np.ndarray:
        a = lat - self.lat0
        b = dlon
        f = np.empty((a.size, 10))
        f[:, 0] = 1.0
        f[:, 1] = a
        f[:, 2] = b
        np.multiply(a, a, out=f[:, 3])
        np.multiply(a, b, out=f[:, 4])
        np.multiply(b, b, out=f[:, 5])
        np.multiply(f[:, 3], a, out=f[:, 6])
        np.multiply(f[:, 3], b, out=f[:, 7])
        np.multiply(f[:, 5], a, out=f[:, 8])
        np.multiply(f[:, 5], b, out=f[:, 9])
        return f

    def to_local_km(self, lat: np.ndarray, lon: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """East and north km (approximation of ``LocalProjection.to_local`` / 1000)."""
        dlon = normalize_longitude(np.ravel(lon).astype(float) - self.lon0)
        xy = self._features(np.ravel(lat).astype(float), dlon) @ self.coef
        return xy[:, 0], xy[:, 1]


@dataclass(frozen=True)
class CorridorGrid:
    """A regular grid in [east_km, north_km, alt_km, time_h]: origin, spacing and node count per axis."""

    origin: np.ndarray
    spacing: np.ndarray
    shape: tuple[int, int, int, int]

    @property
    def size(self) -> int:
        """Number of nodes."""
        return int(np.prod(self.shape))

    def axis(self, d: int) -> np.ndarray:
        """Node coordinates along axis d."""
        return self.origin[d] + self.spacing[d] * np.arange(self.shape[d])

    def strides(self) -> np.ndarray:
        """Flat-index stride of each axis (C order)."""
        s = np.ones(4, dtype=np.int64)
        for d in (2, 1, 0):
            s[d] = s[d + 1] * self.shape[d + 1]
        return s


def choose_grid(lo: np.ndarray, hi: np.ndarray, lengths: np.ndarray, max_nodes: int) -> CorridorGrid:
    """Grid over the box [lo, hi] with spacing ~ length/3, coarsened uniformly until it has <= max_nodes.

    Warns ``FitWarning`` when the spacing had to exceed the length scale on some axis (samples then lose
    small-scale variability; the variance is still restored by the interpolation correction).
    """
    lo = np.asarray(lo, dtype=float)
    hi = np.asarray(hi, dtype=float)
    extent = np.maximum(hi - lo, 1e-6)
    factor = SPACING_FRACTION
    while True:
        h = lengths * factor
        n = np.maximum(np.ceil(extent / h).astype(int) + 1, 2)
        if np.prod(n) <= max_nodes or factor > 1e3:
            break
        factor *= 1.1
    spacing = extent / (n - 1)
    ratio = spacing / lengths
    if np.any(ratio > 1.0):
        warnings.warn(
            f"wind GP samples: the corridor grid ({'x'.join(map(str, n))} nodes) is coarser than the length "
            f"scales (spacing/length up to {ratio.max():.2f}); narrow the corridor or use fewer members",
            FitWarning,
            stacklevel=3,
        )
    return CorridorGrid(lo.copy(), spacing, (int(n[0]), int(n[1]), int(n[2]), int(n[3])))


def interpolation_weights(
    grid: CorridorGrid, pts: np.ndarray, lengths: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Multilinear interpolation stencil with the variance-restoring factor.

    Parameters
    ----------
    grid : CorridorGrid
    pts : ndarray, shape (k, 4)
        Points in grid coordinates; points outside the grid are held at its edge.
    lengths : ndarray, shape (4,)
        Length scales (for the variance correction).

    Returns
    -------
    index : ndarray of int64, shape (k, 16)
        Flat node indices of the 16 corners.
    weight : ndarray, shape (k, 16)
        Multilinear weights (sum 1).
    scale : ndarray, shape (k,)
        c(x) = 1 / sqrt(prod_d (w0^2 + w1^2 + 2 w0 w1 rho_d)), rho_d = exp(-h_d^2 / (2 l_d^2)): the
        interpolant of a stationary separable process with unit variance has variance prod_d(...).
    """
    shape = np.asarray(grid.shape)
    u = (pts - grid.origin) / grid.spacing
    np.clip(u, 0.0, shape - 1.0, out=u)
    i0 = np.minimum(u.astype(np.int64), shape - 2)  # u >= 0, so truncation is floor
    f = u - i0
    base = i0 @ grid.strides()
    index = base[:, None] + _corner_offsets(grid)[None, :]
    g = 1.0 - f
    # weights of the 16 corners, corner bits in C order (axis 0 slowest), as an outer product per point
    w01 = np.stack([g[:, 0], f[:, 0]], axis=1)[:, :, None] * np.stack([g[:, 1], f[:, 1]], axis=1)[:, None, :]
    w23 = np.stack([g[:, 2], f[:, 2]], axis=1)[:, :, None] * np.stack([g[:, 3], f[:, 3]], axis=1)[:, None, :]
    weight = (w01.reshape(-1, 4)[:, :, None] * w23.reshape(-1, 4)[:, None, :]).reshape(-1, 16)
    rho = np.exp(-0.5 * (grid.spacing / lengths) ** 2)
    var = np.prod(1.0 - 2.0 * f * g * (1.0 - rho), axis=1)  # = f^2 + g^2 + 2 f g rho
    return index, weight, 1.0 / np.sqrt(var)


def _corner_offsets(grid: CorridorGrid) -> np.ndarray:
    bits = (np.arange(16)[:, None] >> np.arange(4)[None, ::-1]) & 1  # (16, 4), axis 0 is the high bit
    return (bits @ grid.strides()).astype(np.int64)


def interpolated_kernel(
    grid: CorridorGrid, pts: np.ndarray, lengths: np.ndarray, sigma: float, corr: list[np.ndarray],
    block: int = 1024,
) -> np.ndarray:
    """Covariance k~(p_i, p_j) of the interpolated, variance-corrected grid process between points.

    Notes
    -----
    With f~(x) = c(x) sum_a w_a(x) g_a and Cov g = s^2 (K_0 (x) ... (x) K_3), the weights and the kernel
    factorise over dimensions, so
    k~(p, q) = s^2 c(p) c(q) prod_d sum_{alpha, beta in {0,1}} w_d,alpha(p) w_d,beta(q) K_d[i_d(p)+alpha,
    i_d(q)+beta]: 16 gathers of 1-D correlations per pair instead of 256. Built in row blocks.
    """
    shape = np.asarray(grid.shape)
    u = np.clip((pts - grid.origin) / grid.spacing, 0.0, shape - 1.0)
    i0 = np.minimum(u.astype(np.int64), shape - 2)
    f = u - i0
    _, _, c = interpolation_weights(grid, pts, lengths)
    n = pts.shape[0]
    out = np.empty((n, n))
    for r0 in range(0, n, block):
        r = slice(r0, min(r0 + block, n))
        acc = np.full((r.stop - r0, n), sigma**2)
        for d in range(4):
            wa = (1.0 - f[r, d], f[r, d])
            wb = (1.0 - f[:, d], f[:, d])
            kd = np.zeros_like(acc)
            for a in (0, 1):
                for b in (0, 1):
                    kd += (wa[a][:, None] * wb[b][None, :]) * corr[d][i0[r, d][:, None] + a, i0[:, d][None, :] + b]
            acc *= kd
        out[r] = acc * c[r][:, None] * c[None, :]
    return out


def _kron_apply(mats: list[np.ndarray], arr: np.ndarray) -> np.ndarray:
    """(M0 (x) M1 (x) M2 (x) M3) applied to each column of arr, returned transposed.

    Parameters
    ----------
    mats : four matrices, shapes (m_d, n_d).
    arr : ndarray, shape (G, B), G = n0 n1 n2 n3 in C order.

    Returns
    -------
    ndarray, shape (B, m0 m1 m2 m3).

    Notes
    -----
    Each factor is one GEMM that also rotates the axes: viewing the data as (n_d, rest), Y = X^T M^T has
    shape (rest, n_d), i.e. axis d moves to the end. After four factors the layout is (B, n0, n1, n2, n3).
    Cost O(B G sum_d n_d) ([Saatci2012] ch. 5).
    """
    out = np.ascontiguousarray(arr)
    for m in mats:
        out = out.reshape(m.shape[1], -1).T @ m.T
    return out.reshape(arr.shape[1], -1)


def _corr_1d(axis: np.ndarray, length: float) -> np.ndarray:
    d = (axis[:, None] - axis[None, :]) / length
    return np.exp(-0.5 * d * d)


def _sqrt_psd(k: np.ndarray, rtol: float = 1e-7) -> np.ndarray:
    """Low-rank square root R (n, r) with R R^T ~ k: eigenvalues below rtol x the largest are dropped
    (their share of the variance is below n rtol)."""
    lam, q = np.linalg.eigh(k)
    keep = lam > rtol * lam[-1]
    return np.ascontiguousarray(q[:, keep] * np.sqrt(lam[keep])[None, :])


class GridSampler:
    """Draws posterior deviations of the wind GP on a corridor grid (u and v independent, shared kernel)."""

    def __init__(
        self,
        grid: CorridorGrid,
        lengths: np.ndarray,
        sigma_m_s: float,
        posterior: Posterior | None,
        use: np.ndarray | None = None,
        profile: str = "uniform",
    ) -> None:
        """``use`` (bool per posterior point) selects the observations that condition the exact-GP samples
        (those near the corridor); the DTC path always uses all inducing points. ``profile``: the kernel's
        altitude profile; the draws are deviations of the normalised process e / g(z)."""
        self.grid = grid
        self.lengths = np.asarray(lengths, dtype=float)
        self.sigma = float(sigma_m_s)
        self.posterior = posterior
        self.profile = profile
        corr = [_corr_1d(grid.axis(d), self.lengths[d]) for d in range(4)]
        self.corr = corr
        self.roots = [_sqrt_psd(k) for k in corr]
        self.roots_t = [np.ascontiguousarray(r.T) for r in self.roots]
        self.rank_size = int(np.prod([r.shape[1] for r in self.roots]))
        self.s_chol = None
        if posterior is not None and posterior.n_points > 0:
            pts = posterior.points
            self.use = np.ones(len(pts), bool) if (use is None or posterior.sparse) else np.asarray(use, bool)
            pts = pts[self.use]
            self.noise_var = None if posterior.sparse else posterior.noise_var[self.use]
            self.noise = None if posterior.sparse else posterior.noise.subset(self.use)
            self.g_obs = altitude_profile(pts[:, 2], profile)  # g(z_i) of the conditioning points
            idx, w, c = interpolation_weights(grid, pts, self.lengths)
            n = idx.shape[0]
            rows = np.repeat(np.arange(n), 16)
            self.w_obs = sparse.csr_matrix(
                ((w * c[:, None]).ravel(), (rows, idx.ravel())), shape=(n, grid.size)
            )
            self.w_obs_t = self.w_obs.T.tocsr()
            if not posterior.sparse:
                # Condition the interpolated process on the data with its own kernel k~ (consistent
                # Matheron update): S = K~(X, X) + Lambda.
                s_mat = interpolated_kernel(grid, pts, self.lengths, self.sigma, corr)
                s_mat *= self.g_obs[:, None]
                s_mat *= self.g_obs[None, :]
                self.noise.add_to(s_mat)
                self.s_chol, _ = robust_cholesky(s_mat, "interpolated kernel matrix for the samples")
        else:
            self.w_obs = None
            self.w_obs_t = None

    def draw(self, n_fields: int, rng: np.random.Generator) -> np.ndarray:
        """Posterior deviations at the grid nodes, shape (n_fields, G), float64.

        Notes
        -----
        Prior: g = s (R_0 (x) ... (x) R_3) xi with R_d (n_d x r_d) the low-rank square root of K_d.
        Matheron update ([Wilson2020]): e = g + s^2 (K_0 (x) ... (x) K_3) W^T G_P c with
        c = -(K~ + Lambda)^-1 (G_P W g + eps) (exact GP) or ``posterior.sample_coefficients`` (DTC),
        G_P = diag(g(z_P)). The result is the deviation of the normalised process (divide by g(z)).
        """
        xi = rng.standard_normal((self.rank_size, n_fields))
        return self.draw_from_normals(xi, None, rng)

    @property
    def n_update_normals(self) -> int:
        """Standard normals per field used by the Matheron update (0 without observations)."""
        if self.w_obs is None:
            return 0
        return int(self.w_obs.shape[0]) if self.s_chol is not None else int(self.posterior.n_points)

    def draw_from_normals(
        self, xi: np.ndarray, update_normals: np.ndarray | None, rng: np.random.Generator | None = None
    ) -> np.ndarray:
        """Posterior deviations (n_fields, G) from given standard normals.

        ``xi`` (rank_size, n_fields) drives the prior draw; ``update_normals`` (n_update_normals, n_fields)
        drives the update (observation noise eps / sqrt(Lambda), or the DTC xi). When ``update_normals`` is
        None they are drawn from ``rng`` (the :meth:`draw` path, unchanged order of draws).
        """
        g = self.sigma * _kron_apply(self.roots, xi)  # (n_fields, G)
        if self.w_obs is not None:
            f_at_points = self.w_obs @ g.T  # (n, n_fields)
            f_at_points *= self.g_obs[:, None]
            if update_normals is None:
                update_normals = rng.standard_normal(f_at_points.shape)
            if self.s_chol is not None:
                eps = self.noise.draw(update_normals)
                coef = -cho_solve((self.s_chol, True), f_at_points + eps, check_finite=False)
            else:
                coef = self.posterior.sample_coefficients(f_at_points, None, normals=update_normals)
            # K_gg W^T G_P coef with K_d = R_d R_d^T: compress by R^T, then expand by R
            low = _kron_apply(self.roots_t, self.w_obs_t @ (coef * self.g_obs[:, None]))  # (n_fields, r)
            g += self.sigma**2 * _kron_apply(self.roots, np.ascontiguousarray(low.T))
        return g


class GridMemberWinds:
    """N wind realisations: background + gridded posterior mean + one gridded deviation per member.

    ``wind(members, lat, lon, alt_m, time_s)`` evaluates member ``members[k]`` at point k. Points outside
    the corridor grid are held at its edge for the GP part (the background is evaluated at the true point).
    Deviations are stored as float32, shape (N, G, 2), normalised by the altitude profile: the deviation at
    a point is g(z) times the interpolated grid value (``profile``, see ``gp_kernels.altitude_profile``).
    """

    def __init__(
        self,
        background: WindField,
        projection: FastProjection,
        time_ref_s: float,
        grid: CorridorGrid,
        lengths: np.ndarray,
        mean_nodes: np.ndarray,
        deviations: np.ndarray,
        member_ids: np.ndarray | None = None,
        profile: str = "uniform",
        member_scale: np.ndarray | float = 1.0,
    ) -> None:
        """``member_ids`` (optional, distinct, >= 0): the member number of each row of ``deviations``
        (a chunk of a larger ensemble); default rows 0..N-1. ``profile``: altitude profile that scales the
        deviations at the evaluation point. ``member_scale``: multiplier of each row's deviation (scalar or
        one per row; a calibration of the spread, :func:`member_spread_multipliers`); the mean is unchanged."""
        self.background = background
        self.profile = profile
        scale = np.asarray(member_scale, dtype=float)
        self.member_scale = None if scale.ndim == 0 and float(scale) == 1.0 else np.broadcast_to(
            scale, (deviations.shape[0],)).copy()
        self.projection = projection
        self.time_ref_s = float(time_ref_s)
        self.grid = grid
        self.lengths = np.asarray(lengths, dtype=float)
        self.mean_nodes = np.ascontiguousarray(mean_nodes, dtype=np.float32)  # (G, 2)
        self.deviations = deviations  # (N, G, 2) float32
        self.n_members = int(deviations.shape[0])
        self._flat = deviations.reshape(-1, 2)
        self._size = grid.size
        self.member_ids = None
        self._row = None
        if member_ids is not None:
            ids = np.asarray(member_ids, dtype=np.int64).ravel()
            if ids.size != self.n_members or (ids.size and ids.min() < 0) or np.unique(ids).size != ids.size:
                raise ValueError("GridMemberWinds: member_ids must be distinct, >= 0, one per deviation row")
            self.member_ids = ids
            self._row = np.full(int(ids.max()) + 1 if ids.size else 0, -1, dtype=np.int64)
            self._row[ids] = np.arange(ids.size)

    @property
    def nbytes(self) -> int:
        """Memory held by the grids, bytes."""
        return int(self.deviations.nbytes + self.mean_nodes.nbytes)

    def perturbation(
        self, members: np.ndarray, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """The GP part only (gridded posterior mean correction + member deviation), m/s."""
        members = np.asarray(members, dtype=np.int64).ravel()
        if self._row is not None:
            ok = (members >= 0) & (members < self._row.size)
            rows = np.where(ok, self._row[np.where(ok, members, 0)], -1)
            if np.any(rows < 0):
                raise ValueError(f"GridMemberWinds: member {int(members[rows < 0][0])} is not in this chunk")
            members = rows
        x, y = self.projection.to_local_km(np.ravel(lat), np.ravel(lon))
        pts = np.empty((members.size, 4))
        pts[:, 0] = x
        pts[:, 1] = y
        pts[:, 2] = np.ravel(alt_m) * 1e-3
        pts[:, 3] = (np.ravel(time_s) - self.time_ref_s) / 3600.0
        idx, w, c = interpolation_weights(self.grid, pts, self.lengths)
        w3 = w[:, None, :]
        mean = np.matmul(w3, np.take(self.mean_nodes, idx, axis=0))[:, 0, :]
        dev = np.matmul(w3, np.take(self._flat, idx + (members * self._size)[:, None], axis=0))[:, 0, :]
        if self.profile != "uniform":
            c = c * altitude_profile(pts[:, 2], self.profile)
        if self.member_scale is not None:
            c = c * self.member_scale[members]
        out = mean + c[:, None] * dev
        return out[:, 0], out[:, 1]

    def wind(
        self, members: np.ndarray, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """u, v of member ``members[k]`` at point k (arrays of one shape), m/s."""
        members, lat, lon, alt_m, time_s = np.broadcast_arrays(members, lat, lon, alt_m, time_s)
        ub, vb = self.background.wind(lat, lon, alt_m, time_s)
        du, dv = self.perturbation(members, lat, lon, alt_m, time_s)
        return np.asarray(ub) + du.reshape(lat.shape), np.asarray(vb) + dv.reshape(lat.shape)


def member_wind_generator(seed: int, member: int) -> np.random.Generator:
    """The random stream of member ``member``'s wind realisation.

    ``SeedSequence(seed, spawn_key=(member, 1))``: child 1 of the member's own sequence
    (``balloonpath.ensemble.member_generator`` draws the flight-parameter factors from the parent), so the
    wind and parameter draws of a member are independent, and neither depends on the other members, the
    chunking or the worker.
    """
    return np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(int(member), WIND_STREAM_CHILD)))


def member_spread_multipliers(seed: int, members: np.ndarray, factor: float = 1.0,
                              tail_dof: float | None = None) -> np.ndarray:
    """Multiplier of each member's wind deviation: ``factor`` (Gaussian) or ``factor * sqrt(nu / V)``.

    Parameters
    ----------
    seed : int
        The ensemble's seed.
    members : array_like of int
        Member numbers.
    factor : float
        Scale c of the spread (``[ensemble] wind_spread_factor``).
    tail_dof : float, optional
        Degrees of freedom nu > 2 of a Student-t spread (``[ensemble] wind_spread_tail_dof``); None: Gaussian.

    Returns
    -------
    ndarray
        One multiplier per member. With ``tail_dof``, V ~ chi-square(nu) from
        ``SeedSequence(seed, spawn_key=(member, SPREAD_STREAM_CHILD))``, so each member's multiplier depends
        on (seed, member) only.

    Notes
    -----
    A Gaussian draw times sqrt(nu / V), V ~ chi2(nu) independent, is Student-t with nu degrees of freedom
    (the normal / inverse-gamma scale mixture; the Student-t process of [Shah2014] in the same
    representation), so the members' deviations follow a t process with scale c times the GP posterior:
    heavier tails and a narrower core than the Gaussian of the same variance, c^2 nu / (nu - 2) times the
    GP's.
    """
    ids = np.asarray(members, dtype=np.int64).ravel()
    if tail_dof is None:
        return np.full(ids.size, float(factor))
    nu = float(tail_dof)
    v = np.array([np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(int(i), SPREAD_STREAM_CHILD)))
                  .chisquare(nu) for i in ids])
    return float(factor) * np.sqrt(nu / v)


class MemberSampler:
    """Everything a set of members needs to draw their realisations on one grid (built once, reused).

    Member i's realisation uses only the normals of :func:`member_wind_generator` ``(seed, i)``, in the
    order [prior u (rank), prior v (rank), update u (n_update), update v (n_update)]. The linear algebra
    runs on batches of ``BATCH_MEMBERS`` members aligned to member numbers (batch k holds members
    32k..32k+31), so a member's deviation is computed by exactly the same operations whichever chunk asks
    for it: chunked draws are bit-identical to one draw of all members (given the same BLAS library and
    thread count; float32 storage rounds any residual difference of the last double bit away in all but
    rare ties).
    """

    def __init__(
        self,
        background: WindField,
        projection: FastProjection,
        time_ref_s: float,
        sampler: GridSampler,
        mean_nodes: np.ndarray,
        spread_factor: float = 1.0,
        tail_dof: float | None = None,
    ) -> None:
        self.spread_factor = float(spread_factor)
        self.tail_dof = tail_dof
        self.background = background
        self.projection = projection
        self.time_ref_s = float(time_ref_s)
        self.sampler = sampler
        self.grid = sampler.grid
        self.mean_nodes = np.ascontiguousarray(mean_nodes, dtype=np.float32)

    def _normals(self, seed: int, member: int) -> tuple[np.ndarray, np.ndarray]:
        rng = member_wind_generator(seed, member)
        r, m = self.sampler.rank_size, self.sampler.n_update_normals
        prior = rng.standard_normal((2, r))
        update = rng.standard_normal((2, m))
        return prior, update

    def draw(self, member_ids: np.ndarray, seed: int) -> GridMemberWinds:
        """Realisations of the given members (any subset, any order), as a :class:`GridMemberWinds`."""
        ids = np.asarray(member_ids, dtype=np.int64).ravel()
        if ids.size == 0 or ids.min() < 0 or np.unique(ids).size != ids.size:
            raise ValueError("MemberSampler.draw: member ids must be distinct and >= 0 (at least one)")
        dev = np.empty((ids.size, self.grid.size, 2), dtype=np.float32)
        r, m = self.sampler.rank_size, self.sampler.n_update_normals
        for block in np.unique(ids // BATCH_MEMBERS):
            block_ids = np.arange(block * BATCH_MEMBERS, (block + 1) * BATCH_MEMBERS)
            b = block_ids.size
            xi = np.empty((r, 2 * b))
            upd = np.empty((m, 2 * b)) if m else None
            for k, member in enumerate(block_ids):
                prior, update = self._normals(seed, int(member))
                xi[:, k], xi[:, b + k] = prior[0], prior[1]
                if upd is not None:
                    upd[:, k], upd[:, b + k] = update[0], update[1]
            fields = self.sampler.draw_from_normals(xi, upd)
            want = np.flatnonzero(ids // BATCH_MEMBERS == block)
            pos = ids[want] - block * BATCH_MEMBERS
            dev[want, :, 0] = fields[pos]
            dev[want, :, 1] = fields[b + pos]
        return GridMemberWinds(
            self.background, self.projection, self.time_ref_s, self.grid, self.sampler.lengths,
            self.mean_nodes, dev, member_ids=ids, profile=self.sampler.profile,
            member_scale=member_spread_multipliers(seed, ids, self.spread_factor, self.tail_dof),
        )
