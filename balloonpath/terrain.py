"""Ground elevation under the balloon: flat ground, SRTM ``.hgt`` tiles, GeoTIFF rasters.

Every terrain object answers ``elevation_m(lat, lon) -> ndarray`` (metres above mean sea level) for
arrays of any broadcastable shape, by bilinear interpolation between grid posts.

SRTM ``.hgt`` tiles ([SRTM], the published format of the Shuttle Radar Topography Mission files):
a square grid of big-endian signed 16-bit integers, rows from north to south, columns from west to
east, 1201 x 1201 posts (3 arc-second) or 3601 x 3601 posts (1 arc-second) covering one degree, with
the posts on the tile's edges shared by neighbouring tiles. The file is named after its south-west
corner, e.g. ``N38W099.hgt`` covers 38..39 N, 99..98 W. Voids are -32768.

**Voids** are filled with the value of the nearest valid post (Euclidean distance in posts; a
:class:`~balloonpath.errors.DataQualityWarning` reports how many); a tile with no valid post at all
is read as 0 m with a warning.

GeoTIFF ([GeoTIFF10]): a single-band raster in geographic coordinates (degrees), north-up, with the
GeoTIFF tags ModelTiepointTag (33922) and ModelPixelScaleTag (33550); ModelTransformationTag (34264)
is accepted only without rotation. ``GTRasterTypeGeoKey`` (1025) selects pixel-is-area (default:
the tie point is the corner of the first pixel, values sit at pixel centres) or pixel-is-point.
The GDAL no-data tag (42113) marks voids, which are filled as for ``.hgt``.

Points outside every tile or raster raise :class:`~balloonpath.errors.CoverageError` naming the tile
(or the raster's extent) that is needed.
"""

from __future__ import annotations

import re
import warnings
from collections.abc import Sequence
from pathlib import Path

import numpy as np
from scipy.ndimage import distance_transform_edt

from balloonpath.errors import CoverageError, DataQualityWarning, InputDataError, input_error

HGT_VOID = -32768
_HGT_SIZES = {1201 * 1201 * 2: 1201, 3601 * 3601 * 2: 3601}
_HGT_NAME = re.compile(r"^([NS])(\d{2})([EW])(\d{3})$", re.IGNORECASE)

# GeoTIFF tag codes (GeoTIFF 1.0 specification; GDAL for the no-data tag).
_TAG_PIXEL_SCALE = 33550
_TAG_TIEPOINT = 33922
_TAG_TRANSFORMATION = 34264
_TAG_GEOKEYS = 34735
_TAG_GDAL_NODATA = 42113
_KEY_MODEL_TYPE = 1024  # GTModelTypeGeoKey: 1 projected, 2 geographic
_KEY_RASTER_TYPE = 1025  # GTRasterTypeGeoKey: 1 pixel-is-area, 2 pixel-is-point


def fill_voids(grid: np.ndarray, void: np.ndarray, name: str) -> np.ndarray:
    """Replace void posts by the nearest valid post (warns with the count).

    Parameters
    ----------
    grid : ndarray
        2-D elevations.
    void : ndarray of bool
        True where ``grid`` has no data.
    name : str
        File name for the warning.

    Returns
    -------
    ndarray
        float64 grid without voids (all zeros, with a warning, if nothing is valid).
    """
    out = np.asarray(grid, dtype=float).copy()
    n_void = int(void.sum())
    if n_void == 0:
        return out
    if n_void == void.size:
        warnings.warn(f"terrain {name}: every post is void; elevation taken as 0 m",
                      DataQualityWarning, stacklevel=3)
        return np.zeros_like(out)
    _, (ii, jj) = distance_transform_edt(void, return_distances=True, return_indices=True)
    out = out[ii, jj]
    warnings.warn(f"terrain {name}: {n_void} void posts filled from the nearest valid post",
                  DataQualityWarning, stacklevel=3)
    return out


def bilinear(grid: np.ndarray, row: np.ndarray, col: np.ndarray) -> np.ndarray:
    """Bilinear interpolation of ``grid`` at fractional indices (row, col), clamped to the grid.

    Notes
    -----
    f = (1-a)(1-b) f00 + (1-a) b f01 + a (1-b) f10 + a b f11, with a, b the fractional parts of the
    row and column indices (the standard bilinear form).
    """
    n_rows, n_cols = grid.shape
    r = np.clip(np.asarray(row, dtype=float), 0.0, n_rows - 1.0)
    c = np.clip(np.asarray(col, dtype=float), 0.0, n_cols - 1.0)
    i = np.minimum(np.floor(r).astype(np.intp), max(n_rows - 2, 0))
    j = np.minimum(np.floor(c).astype(np.intp), max(n_cols - 2, 0))
    a = r - i
    b = c - j
    i1 = np.minimum(i + 1, n_rows - 1)
    j1 = np.minimum(j + 1, n_cols - 1)
    return ((1 - a) * (1 - b) * grid[i, j] + (1 - a) * b * grid[i, j1]
            + a * (1 - b) * grid[i1, j] + a * b * grid[i1, j1])


def _normalize_lon(lon: np.ndarray) -> np.ndarray:
    return (lon + 180.0) % 360.0 - 180.0


class FlatTerrain:
    """Flat ground at one elevation (m above mean sea level)."""

    def __init__(self, elevation_m: float = 0.0) -> None:
        self.elevation = float(elevation_m)
        self.name = f"flat {self.elevation:g} m"

    def elevation_m(self, lat: np.ndarray | float, lon: np.ndarray | float) -> np.ndarray:
        """The constant elevation, broadcast to the shape of ``lat`` and ``lon``."""
        shape = np.broadcast_shapes(np.shape(lat), np.shape(lon))
        return np.full(shape, self.elevation)

    def contains(self, lat: np.ndarray | float, lon: np.ndarray | float) -> np.ndarray:
        """Flat ground covers everything."""
        return np.ones(np.broadcast_shapes(np.shape(lat), np.shape(lon)), dtype=bool)


def hgt_tile_name(lat0: int, lon0: int) -> str:
    """SRTM tile name for the south-west corner (lat0, lon0), e.g. ``N38W099.hgt``."""
    ns = "N" if lat0 >= 0 else "S"
    ew = "E" if lon0 >= 0 else "W"
    return f"{ns}{abs(lat0):02d}{ew}{abs(lon0):03d}.hgt"


def parse_hgt_name(path: str | Path) -> tuple[int, int]:
    """South-west corner (lat0, lon0) from an SRTM tile name such as ``N38W099.hgt``.

    Raises
    ------
    InputDataError
        If the name does not follow the pattern.
    """
    stem = Path(path).name.split(".")[0]
    m = _HGT_NAME.match(stem)
    if not m:
        raise input_error(path, "file name", "is not an SRTM tile name like N38W099.hgt",
                          "keep the tile's original name (its south-west corner)")
    lat0 = int(m.group(2)) * (1 if m.group(1).upper() == "N" else -1)
    lon0 = int(m.group(4)) * (1 if m.group(3).upper() == "E" else -1)
    if not (-90 <= lat0 < 90 and -180 <= lon0 < 180):
        raise input_error(path, "file name", f"corner {lat0}, {lon0} is outside the globe",
                          "check the tile name")
    return lat0, lon0


def read_hgt(path: str | Path) -> np.ndarray:
    """Read an SRTM ``.hgt`` tile as float64 metres, rows north to south, voids filled.

    Raises
    ------
    InputDataError
        If the file size is not that of a 1 or 3 arc-second tile.
    """
    p = Path(path)
    size = p.stat().st_size
    if size not in _HGT_SIZES:
        raise input_error(p, "size", f"{size} bytes is not a 3 arc-second (1201 x 1201) or "
                          "1 arc-second (3601 x 3601) tile of 16-bit samples",
                          "use an unzipped SRTM .hgt file")
    n = _HGT_SIZES[size]
    raw = np.fromfile(p, dtype=">i2").reshape(n, n)
    return fill_voids(raw, raw == HGT_VOID, p.name)


class HgtTerrain:
    """Elevation from SRTM ``.hgt`` tiles (1 or 3 arc-second), loaded on first use.

    Parameters
    ----------
    paths : sequence of path
        Tile files, each named after its south-west corner (``N38W099.hgt``).

    Raises
    ------
    InputDataError
        For a badly named file or two files for the same tile.
    """

    def __init__(self, paths: Sequence[str | Path]) -> None:
        self.paths: dict[tuple[int, int], Path] = {}
        for path in paths:
            corner = parse_hgt_name(path)
            if corner in self.paths:
                raise input_error(path, "tile", f"duplicates {self.paths[corner].name}",
                                  "give each tile once")
            self.paths[corner] = Path(path)
        self._keys = np.array([_corner_key(a, b) for a, b in self.paths], dtype=np.int64)
        self._grids: dict[tuple[int, int], np.ndarray] = {}
        self.name = f"{len(self.paths)} SRTM tile(s)"

    def _grid(self, corner: tuple[int, int]) -> np.ndarray:
        if corner not in self._grids:
            self._grids[corner] = read_hgt(self.paths[corner])
        return self._grids[corner]

    def _corners(self, lat: np.ndarray, lon: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Tile corner for each point; a point on a tile edge may use the neighbour that exists."""
        lat0 = np.floor(lat).astype(int)
        lon0 = np.floor(lon).astype(int)
        have = self._have(lat0, lon0)
        # Points on a shared north/east edge of a tile that exists belong to it as well.
        for dlat, dlon in ((-1, 0), (0, -1), (-1, -1)):
            alt_lat = lat0 + dlat
            alt_lon = lon0 + dlon
            on_edge = ((dlat == 0) | (lat == lat0)) & ((dlon == 0) | (lon == lon0))
            use = ~have & on_edge & self._have(alt_lat, _wrap_lon0(alt_lon))
            lat0 = np.where(use, alt_lat, lat0)
            lon0 = np.where(use, _wrap_lon0(alt_lon), lon0)
            have = have | use
        return lat0, lon0

    def _have(self, lat0: np.ndarray, lon0: np.ndarray) -> np.ndarray:
        return np.isin(_corner_key(lat0, lon0), self._keys)

    def contains(self, lat: np.ndarray | float, lon: np.ndarray | float) -> np.ndarray:
        """True where a loaded tile covers the point."""
        la, lo = np.broadcast_arrays(np.asarray(lat, float), _normalize_lon(np.asarray(lon, float)))
        lat0, lon0 = self._corners(la, lo)
        return self._have(lat0, lon0)

    def elevation_m(self, lat: np.ndarray | float, lon: np.ndarray | float) -> np.ndarray:
        """Bilinear elevation (m) at the points.

        Raises
        ------
        CoverageError
            Naming the first missing tile, e.g. ``N38W099.hgt``.
        """
        la, lo = np.broadcast_arrays(np.asarray(lat, float), _normalize_lon(np.asarray(lon, float)))
        out = np.empty(la.shape, dtype=float)
        if la.size == 0:
            return out
        lat0, lon0 = self._corners(la, lo)
        have = self._have(lat0, lon0)
        if not have.all():
            k = np.flatnonzero(~have.ravel())[0]
            need = hgt_tile_name(int(lat0.ravel()[k]), int(lon0.ravel()[k]))
            raise CoverageError(
                f"terrain: point {la.ravel()[k]:.5f}, {lo.ravel()[k]:.5f} is outside the loaded "
                f"SRTM tiles ({int((~have).sum())} points); fix: add {need} to [terrain] files"
            )
        key = _corner_key(lat0, lon0)
        for kv in np.unique(key):
            sel = key == kv
            corner = (int(kv // 1000) - 90, int(kv % 1000) - 180)
            grid = self._grid(corner)
            n = grid.shape[0] - 1
            row = (corner[0] + 1 - la[sel]) * n
            col = (lo[sel] - corner[1]) * n
            out[sel] = bilinear(grid, row, col)
        return out


def _corner_key(lat0: np.ndarray | int, lon0: np.ndarray | int) -> np.ndarray:
    """One integer per 1-degree tile: (lat0 + 90) * 1000 + (lon0 + 180)."""
    return (np.asarray(lat0, dtype=np.int64) + 90) * 1000 + (np.asarray(lon0, dtype=np.int64) + 180)


def _wrap_lon0(lon0: np.ndarray) -> np.ndarray:
    return np.where(lon0 < -180, lon0 + 360, lon0)


class GeoTiffTerrain:
    """Elevation from a north-up GeoTIFF in geographic coordinates (degrees), bilinear.

    Parameters
    ----------
    path : path
        The GeoTIFF file (single band; the first page is used).

    Raises
    ------
    InputDataError
        If the georeferencing tags are missing, the raster is rotated or not north-up, or the
        coordinates are projected rather than geographic.
    """

    def __init__(self, path: str | Path) -> None:
        import tifffile

        self.path = Path(path)
        self.name = self.path.name
        with tifffile.TiffFile(self.path) as tif:
            page = tif.pages[0]
            tags = {tag.code: tag.value for tag in page.tags.values()}
            data = page.asarray()
        if data.ndim == 3:
            data = data[..., 0] if data.shape[-1] < data.shape[0] else data[0]
        if data.ndim != 2:
            raise input_error(self.path, "image", f"has shape {data.shape}, not a 2-D band",
                              "save a single-band elevation raster")
        geokeys = _geokeys(tags.get(_TAG_GEOKEYS))
        if geokeys.get(_KEY_MODEL_TYPE, 2) != 2:
            raise input_error(self.path, "GTModelTypeGeoKey", "is not geographic (lat/lon)",
                              "reproject the raster to EPSG:4326 (degrees)")
        sx, sy, x0, y0, i0, j0 = self._georeference(tags)
        if not (sx > 0 and sy > 0):
            raise input_error(self.path, "ModelPixelScaleTag",
                              f"scale ({sx}, {sy}) is not north-up (both must be > 0)",
                              "warp the raster to north-up (rows from north to south)")
        area = geokeys.get(_KEY_RASTER_TYPE, 1) == 1
        offset = 0.5 if area else 0.0
        # Longitude and latitude of the centre of pixel (row 0, column 0).
        self.lon_first = x0 + (offset - i0) * sx
        self.lat_first = y0 - (offset - j0) * sy
        self.dlon, self.dlat = sx, sy
        self.n_rows, self.n_cols = data.shape
        # The raster's extent (cell edges for pixel-is-area, outer posts for pixel-is-point).
        self.lon_min = self.lon_first - offset * sx
        self.lon_max = self.lon_first + (self.n_cols - 1 + offset) * sx
        self.lat_max = self.lat_first + offset * sy
        self.lat_min = self.lat_first - (self.n_rows - 1 + offset) * sy
        if not (-90.5 <= self.lat_min and self.lat_max <= 90.5):
            raise input_error(self.path, "ModelTiepointTag",
                              f"latitudes {self.lat_min:g}..{self.lat_max:g} are not degrees",
                              "reproject the raster to EPSG:4326 (degrees)")
        grid = np.asarray(data, dtype=float)
        void = ~np.isfinite(grid)
        nodata = tags.get(_TAG_GDAL_NODATA)
        if nodata is not None:
            try:
                void |= grid == float(str(nodata).strip().strip("\x00"))
            except ValueError:
                pass
        self.grid = fill_voids(grid, void, self.path.name)

    def _georeference(self, tags: dict) -> tuple[float, float, float, float, float, float]:
        if _TAG_TRANSFORMATION in tags and _TAG_TIEPOINT not in tags:
            m = np.asarray(tags[_TAG_TRANSFORMATION], dtype=float).reshape(4, 4)
            if m[0, 1] != 0.0 or m[1, 0] != 0.0:
                raise input_error(self.path, "ModelTransformationTag", "has rotation terms",
                                  "warp the raster to north-up without rotation")
            return m[0, 0], -m[1, 1], m[0, 3], m[1, 3], 0.0, 0.0
        if _TAG_TIEPOINT not in tags or _TAG_PIXEL_SCALE not in tags:
            raise input_error(self.path, "GeoTIFF tags",
                              "ModelTiepointTag or ModelPixelScaleTag is missing",
                              "use a georeferenced GeoTIFF (e.g. export with its GeoTIFF tags)")
        tie = np.asarray(tags[_TAG_TIEPOINT], dtype=float)
        scale = np.asarray(tags[_TAG_PIXEL_SCALE], dtype=float)
        if tie.size != 6:
            raise input_error(self.path, "ModelTiepointTag", f"has {tie.size // 6} tie points",
                              "use a raster georeferenced by one tie point and a pixel scale")
        i0, j0, _, x0, y0, _ = tie
        return scale[0], scale[1], x0, y0, i0, j0

    def contains(self, lat: np.ndarray | float, lon: np.ndarray | float) -> np.ndarray:
        """True inside the raster's extent."""
        la, lo = np.broadcast_arrays(np.asarray(lat, float), np.asarray(lon, float))
        lo = self._lon_in_frame(lo)
        return (la >= self.lat_min) & (la <= self.lat_max) & (lo >= self.lon_min) & (
            lo <= self.lon_max)

    def _lon_in_frame(self, lon: np.ndarray) -> np.ndarray:
        """Longitudes shifted by 360 degrees where that brings them into the raster's frame."""
        out = np.asarray(lon, dtype=float)
        out = np.where(out < self.lon_min, out + 360.0, out)
        return np.where(out > self.lon_max, out - 360.0, out)

    def elevation_m(self, lat: np.ndarray | float, lon: np.ndarray | float) -> np.ndarray:
        """Bilinear elevation (m) at the points (held at the edge pixel within the outer half cell).

        Raises
        ------
        CoverageError
            For points outside the raster's extent.
        """
        la, lo = np.broadcast_arrays(np.asarray(lat, float), np.asarray(lon, float))
        lo = self._lon_in_frame(lo)
        inside = self.contains(la, lo)
        if not inside.all():
            k = np.flatnonzero(~inside.ravel())[0]
            raise CoverageError(
                f"terrain {self.name}: point {la.ravel()[k]:.5f}, {lo.ravel()[k]:.5f} is outside "
                f"the raster (lat {self.lat_min:.4f}..{self.lat_max:.4f}, lon {self.lon_min:.4f}.."
                f"{self.lon_max:.4f}); fix: add a raster or tile covering it to [terrain] files"
            )
        row = (self.lat_first - la) / self.dlat
        col = (lo - self.lon_first) / self.dlon
        return bilinear(self.grid, row, col)


def _geokeys(value: object) -> dict[int, int]:
    """GeoKeyDirectory as {key id: short value} (only keys stored directly in the directory)."""
    if value is None:
        return {}
    arr = np.asarray(value, dtype=np.int64).ravel()
    if arr.size < 4:
        return {}
    n = int(arr[3])
    keys = {}
    for k in range(n):
        key_id, location, _count, offset = arr[4 + 4 * k: 8 + 4 * k]
        if location == 0:
            keys[int(key_id)] = int(offset)
    return keys


class LayeredTerrain:
    """Several terrain sources; each point takes the first source that covers it."""

    def __init__(self, layers: Sequence) -> None:
        self.layers = list(layers)
        self.name = " + ".join(getattr(x, "name", type(x).__name__) for x in self.layers)

    def contains(self, lat: np.ndarray | float, lon: np.ndarray | float) -> np.ndarray:
        """True where any layer covers the point."""
        la, lo = np.broadcast_arrays(np.asarray(lat, float), np.asarray(lon, float))
        cov = np.zeros(la.shape, dtype=bool)
        for layer in self.layers:
            cov |= layer.contains(la, lo)
        return cov

    def elevation_m(self, lat: np.ndarray | float, lon: np.ndarray | float) -> np.ndarray:
        """Elevation from the first covering layer; CoverageError from the last layer otherwise."""
        la, lo = np.broadcast_arrays(np.asarray(lat, float), np.asarray(lon, float))
        out = np.full(la.shape, np.nan)
        todo = np.ones(la.shape, dtype=bool)
        for layer in self.layers:
            if not todo.any():
                break
            here = todo & layer.contains(la, lo)
            if here.any():
                out[here] = layer.elevation_m(la[here], lo[here])
                todo &= ~here
        if todo.any():
            # Let the first layer name what is missing.
            self.layers[0].elevation_m(la[todo], lo[todo])
        return out


def terrain_from_plan(plan) -> FlatTerrain | HgtTerrain | GeoTiffTerrain | LayeredTerrain:  # noqa: ANN001
    """Terrain described by a plan's ``[terrain]`` table.

    ``files`` empty: flat ground at ``flat_elevation_m`` or, if not given, the launch elevation.
    ``.hgt`` files form one :class:`HgtTerrain`; each ``.tif``/``.tiff`` is a
    :class:`GeoTiffTerrain`; several sources are layered in the order given (tiles first).

    Raises
    ------
    InputDataError
        For a file that is neither ``.hgt`` nor ``.tif``/``.tiff``.
    """
    spec = plan.terrain
    files = [Path(f) for f in spec.files]
    if not files:
        elevation = spec.flat_elevation_m
        return FlatTerrain(plan.launch.elevation_m if elevation is None else elevation)
    hgt = [f for f in files if f.suffix.lower() == ".hgt"]
    tif = [f for f in files if f.suffix.lower() in (".tif", ".tiff")]
    other = [f for f in files if f not in hgt and f not in tif]
    if other:
        raise input_error(plan.path, "[terrain] files", f"{other[0].name} is not .hgt or .tif",
                          "give SRTM .hgt tiles or GeoTIFF files", cls=InputDataError)
    layers: list = ([HgtTerrain(hgt)] if hgt else []) + [GeoTiffTerrain(t) for t in tif]
    return layers[0] if len(layers) == 1 else LayeredTerrain(layers)
