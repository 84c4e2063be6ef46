"""Landing and burst zones of an ensemble forecast: ellipses, regions, probabilities.

The ensemble's landing points are projected into a local azimuthal-equidistant plane centred on
their mean (:class:`balloonpath.geodesy.LocalProjection`, x east, y north, metres). In that plane:

- :func:`ellipse_from_points` fits the sample mean and covariance and scales the covariance ellipse
  by the chi-square (2 degrees of freedom) quantile, so that a bivariate normal puts ``probability``
  inside it ([Wang2015], REFERENCES.md §10);
- :func:`density_region` draws the highest-density region of a kernel density estimate
  ([Hyndman1996]), which follows spreads that are not Gaussian (two wind regimes, a bent ridge);
- :func:`probability_in_polygons` and :func:`water_fraction` count the members that land inside user
  polygons or on water.

Statistics use the random members 1 .. N-1; member 0 (the nominal run: mean wind, nominal
parameters) is not a draw from the spread and is used only when it is the only member.

References
----------
[Wang2015] B. Wang, W. Shi, Z. Miao, "Confidence analysis of standard deviational ellipse and its
    extension into higher dimensional Euclidean space", PLoS ONE 10(3): e0118537 (2015): the ellipse
    (x - mu)^T S^-1 (x - mu) <= chi2_2(p) holds probability p of a bivariate normal (from memory;
    the factors themselves are checked against ``scipy.stats.chi2``).
[Hyndman1996] R. J. Hyndman, "Computing and graphing highest density regions", The American
    Statistician 50(2): 120-126 (1996): the 100p % HDR is {f >= f_p}, f_p the (1 - p) quantile of f
    at the sample points (from memory).
[Scott1992] D. W. Scott, Multivariate Density Estimation, Wiley 1992: bandwidth factor n^(-1/(d+4))
    times the sample covariance (from memory; as in ``scipy.stats.gaussian_kde``).
[GLOBE1999] GLOBE Task Team, The Global One-km Base Elevation (GLOBE) Digital Elevation Model,
    Version 1.0, NOAA National Geophysical Data Center (1999): 30 arc-second grid; the land mask of
    the ``global-land-mask`` package is derived from it (package documentation, read).
"""

from __future__ import annotations

import importlib.util
import json
import math
import warnings
import zipfile
from collections import OrderedDict
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np

from balloonpath.errors import FitWarning, InputDataError, input_error
from balloonpath.geodesy import LocalProjection, normalize_longitude
from balloonpath.result import ForecastResult
from balloonpath.timeutil import iso_from_posix

DEFAULT_PROBABILITIES = (0.5, 0.9, 0.95)
REGION_PROBABILITY = 0.9


# ----------------------------------------------------------------------------------- ellipses
def chi2_scale(probability: float) -> float:
    """Radius, in standard deviations, of the ellipse holding ``probability`` of a bivariate normal.

    Parameters
    ----------
    probability : float
        Probability inside the ellipse, 0 < p < 1.

    Returns
    -------
    float
        k = sqrt(chi2_2^-1(p)).

    Notes
    -----
    The squared Mahalanobis distance of a bivariate normal is chi-square with 2 degrees of freedom,
    whose distribution function is 1 - exp(-r^2 / 2), so k = sqrt(-2 ln(1 - p)) in closed form
    ([Wang2015]; REFERENCES.md §10: k = 1.177410 for 0.50, 2.145966 for 0.90, 2.447747 for 0.95).
    The one-dimensional factor (1.959964 for 0.95) is wrong here.
    """
    p = float(probability)
    if not 0.0 < p < 1.0:
        raise input_error(
            None,
            "probability",
            f"must be strictly between 0 and 1, got {p}",
            "give a probability such as 0.9",
            cls=InputDataError,
        )
    return math.sqrt(-2.0 * math.log1p(-p))


@dataclass(frozen=True)
class Ellipse:
    """A probability ellipse in a local east/north plane.

    Attributes
    ----------
    center_x, center_y : centre, m east and north of the projection centre.
    semi_major_m, semi_minor_m : semi-axes, m (zero for a degenerate spread).
    major_axis_azimuth_deg : direction of the major axis, degrees clockwise from north, in [0, 180).
    probability : probability mass of the fitted bivariate normal inside the ellipse.
    """

    center_x: float
    center_y: float
    semi_major_m: float
    semi_minor_m: float
    major_axis_azimuth_deg: float
    probability: float

    @property
    def area_m2(self) -> float:
        """Area pi a b, m^2."""
        return math.pi * self.semi_major_m * self.semi_minor_m

    def _axes(self) -> tuple[np.ndarray, np.ndarray]:
        theta = math.radians(self.major_axis_azimuth_deg)
        major = np.array([math.sin(theta), math.cos(theta)])  # (east, north) of the major axis
        minor = np.array([math.cos(theta), -math.sin(theta)])
        return major, minor

    def polygon_xy(self, n: int = 72) -> tuple[np.ndarray, np.ndarray]:
        """Closed counter-clockwise ring of ``n`` vertices (``n + 1`` points, last = first), m."""
        t = np.linspace(0.0, 2.0 * np.pi, int(n) + 1)
        t[-1] = 0.0
        major, minor = self._axes()
        # Counter-clockwise in (east, north): the minor axis is the major axis turned 90 deg
        # clockwise, so go along -minor for positive sin(t).
        u = self.semi_major_m * np.cos(t)
        w = -self.semi_minor_m * np.sin(t)
        x = self.center_x + u * major[0] + w * minor[0]
        y = self.center_y + u * major[1] + w * minor[1]
        return x, y

    def contains(self, x: np.ndarray | float, y: np.ndarray | float) -> np.ndarray:
        """True where (x, y) lies inside or on the ellipse (any array shape).

        A zero-size ellipse contains its centre only; one with a zero minor axis contains its
        major-axis segment.
        """
        dx = np.asarray(x, dtype=float) - self.center_x
        dy = np.asarray(y, dtype=float) - self.center_y
        major, minor = self._axes()
        u = dx * major[0] + dy * major[1]
        w = dx * minor[0] + dy * minor[1]
        a, b = self.semi_major_m, self.semi_minor_m
        tol = 1e-9 * max(a, 1.0)
        if a == 0.0:
            return (np.abs(u) <= tol) & (np.abs(w) <= tol)
        if b == 0.0:
            return (np.abs(u) <= a + tol) & (np.abs(w) <= tol)
        return (u / a) ** 2 + (w / b) ** 2 <= 1.0 + 1e-12


def _mean_cov(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    pts = np.column_stack([x, y])
    mean = pts.mean(axis=0)
    if pts.shape[0] < 2:
        return mean, np.zeros((2, 2))
    return mean, np.cov(pts, rowvar=False, ddof=1)


def ellipse_from_points(x_m: np.ndarray, y_m: np.ndarray, probability: float, radius: str = "normal") -> Ellipse:
    """Probability ellipse of points in a local plane from their sample mean and covariance.

    Parameters
    ----------
    x_m, y_m : array_like, shape (N,)
        East and north coordinates, m. Non-finite points are ignored.
    probability : float
        Probability of the fitted bivariate normal inside the ellipse (``radius="normal"``), or the fraction
        of the points inside it (``radius="empirical"``).
    radius : {"normal", "empirical"}
        Mahalanobis radius k of the ellipse: ``"normal"`` k = :func:`chi2_scale` (the points are taken as
        a bivariate normal sample); ``"empirical"`` k^2 = the ``probability`` quantile of the points' own
        squared Mahalanobis distances (numpy's linear interpolation), for clouds that are not normal (the
        Student-t members of a calibrated spread, ``[ensemble] wind_spread_tail_dof``).

    Returns
    -------
    Ellipse

    Notes
    -----
    With S the sample covariance (divisor N - 1), eigenvalues l1 >= l2 and k as above,
    the semi-axes are k sqrt(l1) and k sqrt(l2) along the eigenvectors ([Wang2015]). This is the
    ellipse of the fitted distribution, not a prediction region for one more member: for N members
    the prediction factor is larger by about (1 + 1/N)^(1/2) (under 0.1 % for N = 500). Fewer than 3
    points, or points that all coincide or lie on a line, give a zero-size (or zero-width) ellipse
    and a :class:`FitWarning`.
    """
    x = np.asarray(x_m, dtype=float).ravel()
    y = np.asarray(y_m, dtype=float).ravel()
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    k = chi2_scale(probability)
    if x.size == 0:
        raise input_error(
            None,
            "points",
            "no finite points to fit an ellipse to",
            "check that the ensemble members landed",
            cls=InputDataError,
        )
    mean, cov = _mean_cov(x, y)
    if x.size < 3:
        warnings.warn(
            f"only {x.size} point(s) for the {probability:.0%} ellipse; its size is set to zero",
            FitWarning,
            stacklevel=2,
        )
        return Ellipse(float(mean[0]), float(mean[1]), 0.0, 0.0, 0.0, float(probability))
    evals, evecs = np.linalg.eigh(cov)  # ascending
    evals = np.clip(evals, 0.0, None)
    scale = max(float(evals[1]), 1e-300)
    if evals[1] <= 1e-18 * max(1.0, float(np.max(np.abs(np.column_stack([x, y]))) ** 2)):
        warnings.warn(
            f"all {x.size} points coincide; the {probability:.0%} ellipse has zero size",
            FitWarning,
            stacklevel=2,
        )
        return Ellipse(float(mean[0]), float(mean[1]), 0.0, 0.0, 0.0, float(probability))
    if evals[0] <= 1e-12 * scale:
        warnings.warn(
            f"the points lie on a line; the {probability:.0%} ellipse has zero width",
            FitWarning,
            stacklevel=2,
        )
        evals[0] = 0.0
    if radius == "empirical" and evals[0] > 0.0:
        d = np.column_stack([x, y]) - mean
        proj = d @ evecs  # coordinates along the eigenvectors
        d2 = proj[:, 0] ** 2 / evals[0] + proj[:, 1] ** 2 / evals[1]
        k = math.sqrt(float(np.quantile(d2, probability)))
    elif radius not in ("normal", "empirical"):
        raise ValueError(f"unknown ellipse radius {radius!r}; choose 'normal' or 'empirical'")
    ex, ny = evecs[0, 1], evecs[1, 1]
    azimuth = math.degrees(math.atan2(ex, ny)) % 180.0
    if azimuth >= 180.0 - 1e-9:
        azimuth = 0.0
    return Ellipse(
        center_x=float(mean[0]),
        center_y=float(mean[1]),
        semi_major_m=float(k * math.sqrt(evals[1])),
        semi_minor_m=float(k * math.sqrt(evals[0])),
        major_axis_azimuth_deg=float(azimuth),
        probability=float(probability),
    )


# ---------------------------------------------------------------------- non-parametric region
@dataclass(frozen=True)
class Region:
    """A region of the local plane made of one or more closed counter-clockwise rings.

    Attributes
    ----------
    rings_xy : tuple of (M, 2) arrays (x, y in m), closed (last = first), counter-clockwise; empty
    for a
        degenerate spread. Holes of the density region are filled (the region only grows).
    area_m2 : total area, m^2. probability : target probability. method : "kde" or "hull".
    """

    rings_xy: tuple[np.ndarray, ...]
    area_m2: float
    probability: float
    method: str


def _rings_from_geometry(geom: Any) -> tuple[np.ndarray, ...]:
    from shapely.geometry import MultiPolygon, Polygon
    from shapely.geometry.polygon import orient

    if isinstance(geom, Polygon):
        polys = [geom]
    elif isinstance(geom, MultiPolygon):
        polys = list(geom.geoms)
    else:
        polys = [g for g in getattr(geom, "geoms", []) if isinstance(g, Polygon)]
    out = []
    for p in polys:
        if p.is_empty or p.area <= 0.0:
            continue
        ring = np.asarray(orient(Polygon(p.exterior), sign=1.0).exterior.coords, dtype=float)
        out.append(ring)
    out.sort(key=lambda r: (-float(np.min(r[:, 1])), float(np.min(r[:, 0]))))
    return tuple(out)


def _hull_region(x: np.ndarray, y: np.ndarray, probability: float) -> Region:
    """Convex hull of the ceil(p N) points nearest the mean (Mahalanobis, Euclidean if singular)."""
    from shapely.geometry import MultiPoint

    mean, cov = _mean_cov(x, y)
    d = np.column_stack([x, y]) - mean
    try:
        dist = np.einsum("ij,jk,ik->i", d, np.linalg.inv(cov), d)
        if not np.all(np.isfinite(dist)):
            raise np.linalg.LinAlgError
    except np.linalg.LinAlgError:
        dist = np.einsum("ij,ij->i", d, d)
    keep = np.argsort(dist, kind="stable")[: max(1, math.ceil(probability * x.size))]
    hull = MultiPoint(np.column_stack([x[keep], y[keep]])).convex_hull
    rings = _rings_from_geometry(hull)
    area = float(sum(_ring_area(r) for r in rings))
    return Region(rings, area, float(probability), "hull")


def _ring_area(ring: np.ndarray) -> float:
    x, y = ring[:, 0], ring[:, 1]
    return 0.5 * abs(float(np.dot(x[:-1], y[1:]) - np.dot(x[1:], y[:-1])))


def density_region(
    x_m: np.ndarray, y_m: np.ndarray, probability: float = REGION_PROBABILITY, method: str = "kde"
) -> Region:
    """Non-parametric region holding ``probability`` of the points.

    Parameters
    ----------
    x_m, y_m : array_like, shape (N,)
        Points in a local plane, m (non-finite ones ignored).
    probability : float
        Target probability, 0 < p < 1.
    method : {"kde", "hull"}
        ``"kde"``: highest-density region of a Gaussian kernel density estimate ([Hyndman1996]);
        ``"hull"``: convex hull of the ceil(p N) points nearest the mean in Mahalanobis distance.

    Returns
    -------
    Region

    Notes
    -----
    KDE: the points are whitened with the Cholesky factor L of their sample covariance (z = L^-1 (x
    - mu)), so that the Gaussian kernel with covariance h^2 S ([Scott1992], h = N^(-1/6), the
    ``scipy.stats.gaussian_kde`` default) becomes isotropic with standard deviation h. The density
    is estimated on a grid by binning the points (cell = h / 8, at most 1024 cells a side) and
    smoothing with a Gaussian filter of h / cell cells (O(N + G^2) instead of O(N G^2)); its value
    at each point is read back by bilinear interpolation. The level f_p is the (1 - p) quantile of
    those values ([Hyndman1996]), and the region is the filled contour f >= f_p (``contourpy``),
    mapped back to metres; holes are filled. Binning moves a point by at most cell / sqrt(2) = 0.09
    h, far below the kernel width. Fewer than 5 points or a singular covariance fall back to
    ``"hull"`` (with a :class:`FitWarning`); fewer than 3 distinct points give an empty region.
    """
    from shapely.geometry import Polygon
    from shapely.ops import unary_union

    x = np.asarray(x_m, dtype=float).ravel()
    y = np.asarray(y_m, dtype=float).ravel()
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    p = float(probability)
    chi2_scale(p)  # validates p
    if method not in ("kde", "hull"):
        raise input_error(
            None, "method", f"must be 'kde' or 'hull', got {method!r}", "use 'kde' or 'hull'"
        )
    n = x.size
    if n < 3 or np.unique(np.column_stack([x, y]), axis=0).shape[0] < 3:
        warnings.warn(
            f"only {n} point(s) ({'distinct ' if n >= 3 else ''}fewer than 3): the "
            f"{p:.0%} region is empty (zero area)",
            FitWarning,
            stacklevel=2,
        )
        return Region((), 0.0, p, method)
    if method == "hull":
        return _hull_region(x, y, p)
    mean, cov = _mean_cov(x, y)
    try:
        chol = np.linalg.cholesky(cov)
        if np.linalg.cond(chol) > 1e6:
            raise np.linalg.LinAlgError("ill-conditioned")
    except np.linalg.LinAlgError:
        chol = None
    if n < 5 or chol is None:
        warnings.warn(
            f"{n} points with "
            f"{'a singular covariance' if chol is None else 'too few for a density'}: "
            f"the {p:.0%} region is the hull of the nearest points",
            FitWarning,
            stacklevel=2,
        )
        return _hull_region(x, y, p)

    pts = np.column_stack([x, y]) - mean
    z = np.linalg.solve(chol, pts.T).T  # whitened, identity covariance
    h = n ** (-1.0 / 6.0)  # [Scott1992] factor for d = 2
    pad = 4.0 * h
    lo = z.min(axis=0) - pad
    hi = z.max(axis=0) + pad
    cell = max(float(np.max(hi - lo)) / 1024.0, h / 8.0)
    nbins = np.maximum(np.ceil((hi - lo) / cell).astype(int), 8)
    hi = lo + nbins * cell
    hist, ex, ey = np.histogram2d(
        z[:, 0], z[:, 1], bins=nbins, range=[[lo[0], hi[0]], [lo[1], hi[1]]]
    )
    from scipy.ndimage import gaussian_filter, map_coordinates

    dens = gaussian_filter(hist, sigma=h / cell, mode="constant", truncate=4.0) / (n * cell * cell)
    cx = 0.5 * (ex[:-1] + ex[1:])
    cy = 0.5 * (ey[:-1] + ey[1:])
    fi = (z[:, 0] - cx[0]) / cell
    fj = (z[:, 1] - cy[0]) / cell
    at_points = map_coordinates(dens, [fi, fj], order=1, mode="nearest")
    level = float(np.quantile(at_points, 1.0 - p))

    import contourpy

    gen = contourpy.contour_generator(cy, cx, dens, fill_type=contourpy.FillType.OuterOffset)
    # contourpy takes z[row=y, col=x]: dens is indexed [x, y], so pass (x=cy, y=cx) and swap back
    # below.
    polys_pts, _offsets = gen.filled(level, np.inf)
    polygons = []
    for arr, offs in zip(polys_pts, _offsets, strict=True):
        outer = arr[offs[0] : offs[1]]
        zz = np.column_stack([outer[:, 1], outer[:, 0]])
        xy = zz @ chol.T + mean
        poly = Polygon(xy)
        if not poly.is_valid:
            poly = poly.buffer(0)
        if poly.area > 0:
            polygons.append(poly)
    if not polygons:
        warnings.warn(
            f"the density contour for {p:.0%} is empty; using the hull of the nearest points",
            FitWarning,
            stacklevel=2,
        )
        return _hull_region(x, y, p)
    rings = _rings_from_geometry(unary_union(polygons))
    area = float(sum(_ring_area(r) for r in rings))
    return Region(rings, area, p, "kde")


# ---------------------------------------------------------------------------------- probabilities
def _load_avoid(geojson_path: str | Path) -> list[tuple[str, Any]]:
    from shapely.geometry import shape

    path = Path(geojson_path)
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise input_error(
            path, "file", f"is not valid JSON ({exc})", "save the areas as GeoJSON"
        ) from None
    if (
        not isinstance(doc, dict)
        or doc.get("type") != "FeatureCollection"
        or not isinstance(doc.get("features"), list)
    ):
        raise input_error(
            path,
            "type",
            "expected a GeoJSON FeatureCollection with a features list",
            'wrap the areas in {"type": "FeatureCollection", "features": [...]}',
        )
    out: list[tuple[str, Any]] = []
    seen: set[str] = set()
    for i, feat in enumerate(doc["features"]):
        where = f"features[{i}]"
        props = (feat or {}).get("properties") or {}
        name = props.get("name")
        if not isinstance(name, str) or not name.strip():
            raise input_error(
                path,
                f"{where}.properties.name",
                "is missing or empty",
                'give every area a "name" property',
            )
        if name in seen:
            raise input_error(
                path,
                f"{where}.properties.name",
                f"duplicate name {name!r}",
                "give every area a different name",
            )
        seen.add(name)
        geom = (feat or {}).get("geometry") or {}
        if geom.get("type") not in ("Polygon", "MultiPolygon"):
            raise input_error(
                path,
                f"{where}.geometry.type",
                f"expected Polygon or MultiPolygon, got {geom.get('type')!r}",
                "draw the area as a polygon",
            )
        try:
            shp = shape(geom)
        except Exception as exc:  # noqa: BLE001 - shapely raises several types for bad coordinates
            raise input_error(
                path,
                f"{where}.geometry.coordinates",
                f"cannot be read ({exc})",
                "write rings as [[lon, lat], ...] closed on the first point",
            ) from None
        if not shp.is_valid:
            shp = shp.buffer(0)
        out.append((name, shp))
    return out


def probability_in_polygons(
    lat: np.ndarray, lon: np.ndarray, geojson_path: str | Path
) -> dict[str, float]:
    """Fraction of points inside each named polygon of a GeoJSON file.

    Parameters
    ----------
    lat, lon : array_like, shape (N,)
        Points (member landings), degrees. Non-finite points are ignored.
    geojson_path : str or Path
        A FeatureCollection of Polygon / MultiPolygon features, each with a ``name`` property
        (RFC 7946: longitude first; areas crossing the antimeridian cut in two).

    Returns
    -------
    dict
        name -> probability, in file order. A point on a boundary counts as inside.
    """
    import shapely

    la = np.asarray(lat, dtype=float).ravel()
    lo = normalize_longitude(np.asarray(lon, dtype=float).ravel())
    ok = np.isfinite(la) & np.isfinite(lo)
    la, lo = la[ok], lo[ok]
    areas = _load_avoid(geojson_path)
    result: dict[str, float] = {}
    for name, shp in areas:
        if la.size == 0:
            result[name] = float("nan")
            continue
        inside = shapely.intersects_xy(shp, lo, la)
        result[name] = float(np.count_nonzero(inside)) / la.size
    return result


# Land mask: the 30" GLOBE-derived mask shipped inside the global-land-mask wheel, read row by row.
_MASK_ROW_CACHE: OrderedDict[int, np.ndarray] = OrderedDict()
_MASK_ROW_CACHE_MAX = 1024  # rows of 43 200 bytes: at most 44 MB
_MASK_INFO: dict[str, Any] = {}


def _npy_header(f: Any) -> tuple[tuple[int, ...], bool, np.dtype]:
    version = np.lib.format.read_magic(f)
    if version == (1, 0):
        return np.lib.format.read_array_header_1_0(f)
    return np.lib.format.read_array_header_2_0(f)


def _mask_file() -> Path:
    spec = importlib.util.find_spec("global_land_mask")
    if spec is None or spec.origin is None:
        raise input_error(
            None,
            "[zones] water",
            "needs the land mask of the global-land-mask package, which is not installed",
            "pip install global-land-mask (a balloonpath dependency), or set water = false",
        )
    path = Path(spec.origin).parent / "globe_combined_mask_compressed.npz"
    if not path.exists():
        raise input_error(
            path,
            "[zones] water",
            "the land-mask data file is missing from the package",
            "reinstall global-land-mask",
        )
    return path


def _mask_axes() -> dict[str, Any]:
    if not _MASK_INFO:
        path = _mask_file()
        with np.load(path) as npz:
            lat = npz["lat"]
            lon = npz["lon"]
        with zipfile.ZipFile(path) as zf, zf.open("mask.npy") as f:
            shape, fortran, dtype = _npy_header(f)
        if fortran or dtype != np.bool_ or shape != (lat.size, lon.size):
            raise input_error(
                path, "mask.npy", f"unexpected layout {shape} {dtype}", "reinstall global-land-mask"
            )
        _MASK_INFO.update(
            path=path,
            lat0=float(lat[0]),
            dlat=float(lat[1] - lat[0]),
            lat_min=float(lat.min()),
            lat_max=float(lat.max()),
            lon0=float(lon[0]),
            dlon=float(lon[1] - lon[0]),
            lon_min=float(lon.min()),
            lon_max=float(lon.max()),
            nrows=int(lat.size),
            ncols=int(lon.size),
        )
    return _MASK_INFO


def _lookup_mask(li: np.ndarray, lj: np.ndarray) -> np.ndarray:
    """Ocean flags (True = ocean) of cells (li, lj), flat int arrays; rows streamed and cached."""
    info = _mask_axes()
    out = np.empty(li.size, dtype=bool)
    order = np.argsort(li, kind="stable")
    rows, starts = np.unique(li[order], return_index=True)
    ends = np.append(starts[1:], li.size)
    missing: dict[int, tuple[int, int]] = {}
    for r, a, b in zip(rows.tolist(), starts.tolist(), ends.tolist(), strict=True):
        if r in _MASK_ROW_CACHE:
            _MASK_ROW_CACHE.move_to_end(r)
            sel = order[a:b]
            out[sel] = _MASK_ROW_CACHE[r][lj[sel]]
        else:
            missing[r] = (a, b)
    if missing:
        ncols, nrows = info["ncols"], info["nrows"]
        last = max(missing)
        block = 256  # rows per read: 11 MB
        with zipfile.ZipFile(info["path"]) as zf, zf.open("mask.npy") as f:
            _npy_header(f)
            for start in range(0, last + 1, block):
                count = min(block, nrows - start)
                buf = f.read(count * ncols)
                here = [r for r in range(start, start + count) if r in missing]
                if not here:
                    continue
                arr = np.frombuffer(buf, dtype=np.bool_).reshape(count, ncols)
                for r in here:
                    a, b = missing[r]
                    sel = order[a:b]
                    out[sel] = arr[r - start][lj[sel]]
                    if len(_MASK_ROW_CACHE) >= _MASK_ROW_CACHE_MAX:
                        _MASK_ROW_CACHE.popitem(last=False)
                    _MASK_ROW_CACHE[r] = arr[r - start].copy()
    return out


def is_water(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """True where a point lies on sea water according to the 30-arc-second land mask.

    Parameters
    ----------
    lat, lon : array_like
        Degrees (any shape; longitudes are wrapped into [-180, 180)).

    Returns
    -------
    ndarray of bool

    Notes
    -----
    The mask of the ``global-land-mask`` package (derived from GLOBE, [GLOBE1999]) has 21 600 x 43
    200 cells of 30 arc-seconds (0.93 km north-south; 0.93 cos(lat) km east-west). Inland lakes and
    most large lakes are land; coasts are exact to about one cell. The package's own import
    decompresses the whole 0.9 GB array; this function instead streams the compressed file row by
    row (about 0.6 s for a full pass, a few MB of memory) and keeps only the rows it needs (up to
    1024 cached rows, 44 MB). Cell lookup follows the package's ``is_ocean`` exactly (index =
    floor((lat - lat0) / dlat), clipped to the grid).
    """
    la = np.asarray(lat, dtype=float)
    lo = normalize_longitude(np.asarray(lon, dtype=float))
    if np.any(~np.isfinite(la)) or np.any(np.abs(la) > 90.0):
        raise input_error(
            None, "latitude", "must be finite and within [-90, 90]", "check the points"
        )
    info = _mask_axes()
    li = ((np.clip(la, info["lat_min"], info["lat_max"]) - info["lat0"]) / info["dlat"]).astype(int)
    lj = ((np.clip(lo, info["lon_min"], info["lon_max"]) - info["lon0"]) / info["dlon"]).astype(int)
    li = np.clip(li, 0, info["nrows"] - 1)
    lj = np.clip(lj, 0, info["ncols"] - 1)
    return _lookup_mask(li.ravel(), lj.ravel()).reshape(li.shape)


def water_fraction(lat: np.ndarray, lon: np.ndarray) -> float:
    """Fraction of points (member landings) on sea water; see :func:`is_water` for the mask and its
    limits.

    Non-finite points are ignored; NaN when none is left.
    """
    la = np.asarray(lat, dtype=float).ravel()
    lo = np.asarray(lon, dtype=float).ravel()
    ok = np.isfinite(la) & np.isfinite(lo)
    if not np.any(ok):
        return float("nan")
    return float(np.count_nonzero(is_water(la[ok], lo[ok]))) / int(np.count_nonzero(ok))


# ------------------------------------------------------------------------------------------- zones
class Ring(NamedTuple):
    """A closed geographic ring (last point = first), counter-clockwise seen from above."""

    lat: np.ndarray
    lon: np.ndarray


@dataclass(frozen=True)
class EllipseSet:
    """Ellipses of one set of points (landings or bursts) in their own local projection.

    Attributes
    ----------
    center_lat, center_lon : projection centre (the points' mean), degrees.
    ellipses : Ellipse objects in that projection. rings : their geographic rings (same order).
    """

    center_lat: float
    center_lon: float
    ellipses: tuple[Ellipse, ...]
    rings: tuple[Ring, ...]


@dataclass(frozen=True)
class Zones:
    """Landing and burst zones of an ensemble forecast (see :func:`compute_zones`).

    Attributes
    ----------
    center_lat, center_lon : landing projection centre = mean landing point, degrees.
    n_members : members in the result (member 0 included). n_used : members in the statistics.
    seed : the forecast's seed.
    ellipses, ellipse_rings : landing ellipses (local metres) and their geographic rings.
    region_90_rings : geographic rings of the non-parametric region; region_90_xy : the same in
    metres.
    region_90_area_m2, region_90_method : its area and method ("kde" or "hull").
    burst : EllipseSet of the burst points.
    p_water : probability of landing on water (None if not asked).
    p_avoid : area name -> probability of landing inside.
    landing_time_p05, landing_time_p95 : 5 % and 95 % quantiles of the landing time, POSIX s.
    landing_x_m, landing_y_m : the used members' landings in the landing projection (for plots).
    """

    center_lat: float
    center_lon: float
    n_members: int
    n_used: int
    seed: int
    ellipses: tuple[Ellipse, ...]
    ellipse_rings: tuple[Ring, ...]
    region_90_rings: tuple[Ring, ...]
    region_90_xy: tuple[np.ndarray, ...]
    region_90_area_m2: float
    region_90_method: str
    burst: EllipseSet
    p_water: float | None
    p_avoid: dict[str, float] = field(default_factory=dict)
    landing_time_p05: float = float("nan")
    landing_time_p95: float = float("nan")
    landing_x_m: np.ndarray = field(default_factory=lambda: np.zeros(0))
    landing_y_m: np.ndarray = field(default_factory=lambda: np.zeros(0))

    @property
    def landing_mean(self) -> tuple[float, float]:
        """Mean landing point (lat, lon), degrees."""
        return self.center_lat, self.center_lon

    def projection(self) -> LocalProjection:
        """The landing projection (azimuthal equidistant around the mean landing)."""
        return LocalProjection(self.center_lat, self.center_lon)

    def to_summary(self) -> dict[str, Any]:
        """The ``"ensemble"`` and ``"probabilities"`` parts of ``summary.json`` (docs/design.md)."""

        def ell(e: Ellipse) -> dict[str, float]:
            return {
                "probability": round(e.probability, 4),
                "semi_major_m": round(e.semi_major_m, 1),
                "semi_minor_m": round(e.semi_minor_m, 1),
                "major_axis_azimuth_deg": round(e.major_axis_azimuth_deg, 1),
            }

        def when(t: float) -> str | None:
            return iso_from_posix(t) if math.isfinite(t) else None

        def prob(p: float | None) -> float | None:
            return None if p is None or not math.isfinite(p) else round(float(p), 6)

        return {
            "ensemble": {
                "members": int(self.n_members),
                "seed": int(self.seed),
                "landing_mean": {
                    "latitude": round(self.center_lat, 6),
                    "longitude": round(self.center_lon, 6),
                },
                "ellipses": [ell(e) for e in self.ellipses],
                "region_90_area_km2": round(self.region_90_area_m2 / 1e6, 3),
                "landing_time_p05": when(self.landing_time_p05),
                "landing_time_p95": when(self.landing_time_p95),
                "burst_ellipses": [ell(e) for e in self.burst.ellipses],
            },
            "probabilities": {
                "water": prob(self.p_water),
                "avoid": {name: prob(p) for name, p in self.p_avoid.items()},
            },
        }


def _statistics_rows(n: int) -> np.ndarray:
    return np.arange(1, n) if n > 1 else np.arange(n)


def _projected_mean(lat: np.ndarray, lon: np.ndarray) -> tuple[float, float]:
    """Mean of geographic points, taken in a local plane (correct across the antimeridian)."""
    first = LocalProjection(float(lat[0]), float(lon[0]))
    x, y = first.to_local(lat, lon)
    mlat, mlon = first.to_geographic(float(np.mean(x)), float(np.mean(y)))
    return float(mlat), float(mlon)


def _ellipse_set(
    lat: np.ndarray,
    lon: np.ndarray,
    probabilities: tuple[float, ...],
    what: str,
    n_vertices: int = 72,
    radius: str = "normal",
) -> tuple[EllipseSet, LocalProjection, np.ndarray, np.ndarray]:
    clat, clon = _projected_mean(lat, lon)
    proj = LocalProjection(clat, clon)
    x, y = proj.to_local(lat, lon)
    ellipses = []
    rings = []
    for p in probabilities:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            e = ellipse_from_points(x, y, p, radius)
        for w in caught[:1] if p == probabilities[0] else []:
            warnings.warn(f"{what}: {w.message}", w.category, stacklevel=3)
        ex, ey = e.polygon_xy(n_vertices)
        rlat, rlon = proj.to_geographic(ex, ey)
        ellipses.append(e)
        rings.append(Ring(np.asarray(rlat), np.asarray(rlon)))
    return EllipseSet(clat, clon, tuple(ellipses), tuple(rings)), proj, x, y


def compute_zones(
    result: ForecastResult,
    avoid_path: str | Path | None = None,
    water: bool = False,
    probabilities: tuple[float, ...] = DEFAULT_PROBABILITIES,
    region_method: str = "kde",
) -> Zones:
    """Landing and burst zones, landing-time window and area probabilities of a forecast.

    Parameters
    ----------
    result : ForecastResult
        The forecast. Statistics use members 1 .. N-1 (member 0 alone when N = 1); members whose
        landing is not finite are left out with a warning.
    avoid_path : str or Path, optional
        GeoJSON of areas to avoid (``[zones] avoid``); each feature needs a ``name``.
    water : bool
        Compute the probability of landing on water (reads the land mask; see :func:`is_water`).
    probabilities : tuple of float
        Probabilities of the ellipses (landing and burst).
    region_method : {"kde", "hull"}
        Method of the non-parametric 90 % region (:func:`density_region`).

    Returns
    -------
    Zones
    """
    rows = _statistics_rows(result.n_members)
    lat = np.asarray(result.landing.lat, dtype=float)[rows]
    lon = np.asarray(result.landing.lon, dtype=float)[rows]
    t_land = np.asarray(result.landing.time_s, dtype=float)[rows]
    ok = np.isfinite(lat) & np.isfinite(lon)
    if not np.any(ok):
        raise input_error(
            result.plan_path or None,
            "landing",
            "no ensemble member has a finite landing point",
            "check the warnings of the forecast (coverage, terrain)",
        )
    if not np.all(ok):
        warnings.warn(
            f"{int(np.count_nonzero(~ok))} of {ok.size} members have no landing point and are "
            "left out of the zones",
            FitWarning,
            stacklevel=2,
        )
    lat, lon, t_land = lat[ok], lon[ok], t_land[ok]
    # Student-t members (a calibrated spread) are not a normal cloud: their ellipses hold the stated share
    # of the members instead of using the normal distribution's radius.
    radius = "empirical" if (result.wind_info or {}).get("spread_tail_dof") is not None else "normal"
    landing_set, proj, x, y = _ellipse_set(lat, lon, tuple(probabilities), "landing", radius=radius)

    region = density_region(x, y, REGION_PROBABILITY, method=region_method)
    region_rings = []
    for ring in region.rings_xy:
        rlat, rlon = proj.to_geographic(ring[:, 0], ring[:, 1])
        region_rings.append(Ring(np.asarray(rlat), np.asarray(rlon)))

    b_lat = np.asarray(result.burst.lat, dtype=float)[rows]
    b_lon = np.asarray(result.burst.lon, dtype=float)[rows]
    b_ok = np.isfinite(b_lat) & np.isfinite(b_lon)
    if np.any(b_ok):
        burst_set, _, _, _ = _ellipse_set(b_lat[b_ok], b_lon[b_ok], tuple(probabilities), "burst", radius=radius)
    else:
        burst_set = EllipseSet(float("nan"), float("nan"), (), ())

    p_avoid = probability_in_polygons(lat, lon, avoid_path) if avoid_path is not None else {}
    p_water = water_fraction(lat, lon) if water else None
    t_ok = t_land[np.isfinite(t_land)]
    p05, p95 = np.quantile(t_ok, [0.05, 0.95]) if t_ok.size else (np.nan, np.nan)
    return Zones(
        center_lat=landing_set.center_lat,
        center_lon=landing_set.center_lon,
        n_members=result.n_members,
        n_used=int(lat.size),
        seed=int(result.seed),
        ellipses=landing_set.ellipses,
        ellipse_rings=landing_set.rings,
        region_90_rings=tuple(region_rings),
        region_90_xy=region.rings_xy,
        region_90_area_m2=region.area_m2,
        region_90_method=region.method,
        burst=burst_set,
        p_water=p_water,
        p_avoid=p_avoid,
        landing_time_p05=float(p05),
        landing_time_p95=float(p95),
        landing_x_m=np.asarray(x),
        landing_y_m=np.asarray(y),
    )
