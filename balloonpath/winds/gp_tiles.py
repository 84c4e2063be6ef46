"""Region-partitioned GP fit for large observation sets: local exact GPs on overlapping tiles, blended.

For a continent's aircraft messages one exact GP (O(n^3)) is out of reach and one inducing-point set
(``gp.py``'s DTC) smooths away local detail. Here the horizontal plane is cut into square tiles; each tile
fits an exact GP ([RW2006] Alg. 2.1, ``gp.Posterior``) to the observations within its core, its overlap
halo and a data margin, as one Dask task per tile (:class:`balloonpath.scale.Engine`); predictions are
blended with a smooth partition of unity.

Method
------
Tile t has a core [a_x, b_x] x [a_y, b_y] (tiles' cores abut) and an overlap halo h. Its weight is

    w_t(x, y) = S((x - a_x + h) / h) S((b_x + h - x) / h) S((y - a_y + h) / h) S((b_y + h - y) / h),

S(s) = 0 (s <= 0), 3 s^2 - 2 s^3 (0 < s < 1), 1 (s >= 1) (the C1 "smoothstep"); outer edges of the tiling
are open (weight 1 to infinity). The weights sum to >= 1 everywhere, and the blended posterior is

    m(x) = sum_t w_t(x) m_t(x) / sum_t w_t(x),   v(x) = sum_t w_t(x) v_t(x) / sum_t w_t(x),

with m_t, v_t the tile GP's mean and latent variance ([Park2011] use the same idea of local GPs joined
smoothly; our blend is the simple partition of unity, from memory). Each tile conditions on data up to
``margin_km`` (default two horizontal length scales) beyond its halo, so inside the halo it sees nearly
all the data that matter to the exact GP: the loss against the exact GP is reported by
:func:`accuracy_against_exact` (tests/test_scale.py, benchmarks/scale.py, docs/scale.md).

The variance blend is an approximation (a mixture's variance would add the spread of the means, which is
small where the tiles agree). Samples for the ensemble still come from ``gp.py`` (exact or DTC); the
tiled posterior serves the mean and sd of large fits.

References
----------
[RW2006] C. E. Rasmussen & C. K. I. Williams, Gaussian Processes for Machine Learning, MIT Press 2006.
[Park2011] C. Park, J. Z. Huang & Y. Ding, "Domain decomposition approach for fast Gaussian process
    regression of large spatial data sets", JMLR 12:1697-1728 (2011); from memory.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from balloonpath.winds.gp import Posterior
from balloonpath.winds.gp_kernels import GPHyperparameters

#: Default tile core size, km, and halo as a multiple of the horizontal length scale.
TILE_KM = 600.0
HALO_LENGTHS = 1.0
MARGIN_LENGTHS = 2.0


def smoothstep(s: np.ndarray) -> np.ndarray:
    """S(s) = 3 s^2 - 2 s^3 on [0, 1], 0 below, 1 above (C1 continuous)."""
    s = np.clip(np.asarray(s, dtype=float), 0.0, 1.0)
    return s * s * (3.0 - 2.0 * s)


@dataclass(frozen=True)
class Tile:
    """A tile's core in local km (infinite on the open outer edges) and its halo width, km."""

    x0: float
    x1: float
    y0: float
    y1: float
    halo_km: float

    def weight(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Partition-of-unity weight w_t at (x, y) km (before normalisation)."""
        h = self.halo_km
        w = np.ones(np.shape(x))
        if math.isfinite(self.x0):
            w = w * smoothstep((x - self.x0 + h) / h)
        if math.isfinite(self.x1):
            w = w * smoothstep((self.x1 + h - x) / h)
        if math.isfinite(self.y0):
            w = w * smoothstep((y - self.y0 + h) / h)
        if math.isfinite(self.y1):
            w = w * smoothstep((self.y1 + h - y) / h)
        return w

    def data_mask(self, x: np.ndarray, y: np.ndarray, margin_km: float) -> np.ndarray:
        """Observations the tile's GP conditions on: core + halo + margin."""
        d = self.halo_km + margin_km
        return (x >= self.x0 - d) & (x <= self.x1 + d) & (y >= self.y0 - d) & (y <= self.y1 + d)


def make_tiles(x: np.ndarray, tile_km: float, halo_km: float) -> list[Tile]:
    """Square tiles of ``tile_km`` covering the observations' east/north extent (outer edges open)."""
    lo, hi = x[:, :2].min(axis=0), x[:, :2].max(axis=0)
    nx, ny = (max(1, int(math.ceil((hi[d] - lo[d]) / tile_km))) for d in (0, 1))
    ex = lo[0] + (hi[0] - lo[0]) * np.arange(nx + 1) / nx
    ey = lo[1] + (hi[1] - lo[1]) * np.arange(ny + 1) / ny
    tiles = []
    for i in range(nx):
        for j in range(ny):
            tiles.append(Tile(
                -math.inf if i == 0 else float(ex[i]), math.inf if i == nx - 1 else float(ex[i + 1]),
                -math.inf if j == 0 else float(ey[j]), math.inf if j == ny - 1 else float(ey[j + 1]),
                float(halo_km),
            ))
    return tiles


def fit_tile(x: np.ndarray, r: np.ndarray, noise_var: np.ndarray, hp: GPHyperparameters) -> Posterior | None:
    """Exact GP of one tile's observations (a work unit; None when the tile has no data)."""
    if x.shape[0] == 0:
        return None
    return Posterior(x, r, noise_var, hp)


class TiledPosterior:
    """Blended local GPs; ``mean_var`` has the interface of ``gp.Posterior.mean_var``."""

    def __init__(self, tiles: list[Tile], posteriors: list[Posterior | None], hp: GPHyperparameters,
                 n_outputs: int) -> None:
        self.tiles = tiles
        self.posteriors = posteriors
        self.hp = hp
        self.n_outputs = int(n_outputs)

    @property
    def n_points(self) -> int:
        """Observations held by all tiles together (halo copies counted)."""
        return int(sum(p.points.shape[0] for p in self.posteriors if p is not None))

    def mean_var(self, xs: np.ndarray, want_var: bool = True) -> tuple[np.ndarray, np.ndarray | None]:
        """Blended posterior mean (k, outputs) and latent variance (k,) at local points xs (k, 4)."""
        k = xs.shape[0]
        num = np.zeros((k, self.n_outputs))
        vnum = np.zeros(k)
        den = np.zeros(k)
        prior_all = self.hp.sigma_m_s**2 * self.hp.g(xs[:, 2]) ** 2  # prior variance s^2 g(z)^2
        for tile, post in zip(self.tiles, self.posteriors, strict=True):
            w = tile.weight(xs[:, 0], xs[:, 1])
            rows = np.flatnonzero(w > 0.0)
            if rows.size == 0:
                continue
            if post is None:
                m, v = np.zeros((rows.size, self.n_outputs)), prior_all[rows]
            else:
                m, v = post.mean_var(xs[rows], want_var)
            num[rows] += w[rows, None] * m
            if want_var:
                vnum[rows] += w[rows] * v
            den[rows] += w[rows]
        den = np.where(den > 0, den, 1.0)
        return num / den[:, None], (vnum / den if want_var else None)


def fit_tiled(x: np.ndarray, r: np.ndarray, noise_var: np.ndarray, hp: GPHyperparameters,
              tile_km: float = TILE_KM, halo_km: float | None = None, margin_km: float | None = None,
              engine: Any = None) -> TiledPosterior:
    """Fit local exact GPs on overlapping tiles, one task per tile on ``engine`` (default: here).

    Parameters
    ----------
    x : ndarray (n, 4)
        Observation points in local coordinates [east_km, north_km, alt_km, time_h] (``gp._to_local``).
    r : ndarray (n, outputs)
        Residuals (observation - background), e.g. u and v.
    noise_var : ndarray (n,)
        Observation error variances.
    hp : GPHyperparameters
        Kernel (learned on a subset beforehand, e.g. by ``gp.fit_wind_field`` on a sample).
    tile_km, halo_km, margin_km : float
        Tile core size; overlap halo (default one horizontal length scale) and data margin beyond the
        halo (default two length scales).
    engine : balloonpath.scale.Engine, optional
        An entered engine; tiles are fitted as its tasks.
    """
    x = np.asarray(x, dtype=float)
    r = np.asarray(r, dtype=float).reshape(x.shape[0], -1)
    noise_var = np.asarray(noise_var, dtype=float)
    halo = HALO_LENGTHS * hp.length_h_km if halo_km is None else float(halo_km)
    margin = MARGIN_LENGTHS * hp.length_h_km if margin_km is None else float(margin_km)
    tiles = make_tiles(x, float(tile_km), halo)
    futures = []
    for tile in tiles:
        keep = tile.data_mask(x[:, 0], x[:, 1], margin)
        args = (x[keep], r[keep], noise_var[keep], hp)
        futures.append(engine.submit(fit_tile, *args, name="gp-tile") if engine is not None else fit_tile(*args))
    posteriors = [engine.result(f) for f in futures] if engine is not None else futures
    return TiledPosterior(tiles, posteriors, hp, r.shape[1])


def accuracy_against_exact(x: np.ndarray, r: np.ndarray, noise_var: np.ndarray, hp: GPHyperparameters,
                           xs: np.ndarray, tiled: TiledPosterior) -> dict[str, float]:
    """Loss of the tiled fit against the exact GP of the same observations at test points ``xs``.

    Returns RMS and max |mean difference| (m/s), the RMS difference relative to the exact posterior sd,
    and the RMS of sd_tiled / sd_exact - 1. Use a subset of a few thousand observations (exact cost n^3).
    """
    exact = Posterior(np.asarray(x, float), np.asarray(r, float).reshape(len(x), -1), noise_var, hp)
    me, ve = exact.mean_var(xs)
    mt, vt = tiled.mean_var(xs)
    diff = mt - me
    sd_e = np.sqrt(np.maximum(ve, 1e-12))
    sd_t = np.sqrt(np.maximum(vt, 1e-12))
    return {
        "points": float(x.shape[0]),
        "rms_mean_diff_m_s": float(np.sqrt(np.mean(diff**2))),
        "max_mean_diff_m_s": float(np.max(np.abs(diff))),
        "rms_diff_over_sd": float(np.sqrt(np.mean((diff / sd_e[:, None]) ** 2))),
        "rms_sd_ratio_minus_1": float(np.sqrt(np.mean((sd_t / sd_e - 1.0) ** 2))),
    }
