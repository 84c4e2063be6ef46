"""Gridded forecast files (NetCDF, GRIB2) as a :class:`~balloonpath.winds.field.WindField`.

A forecast file holds u and v on pressure levels with the geopotential (or geopotential height) of
each level, on a latitude-longitude grid, at one or more times. :meth:`GridField.open` reads only
the corridor's subset (a bounding box and a time range) into memory once; evaluation is then pure
numpy.

Interpolation (``docs/winds.md``, "Gridded files"):

1. Each grid column's geopotential height H is converted to geometric altitude Z = r0 H / (r0 - H)
   ([NOAA1976] eq. 18). Geopotential in m2 s-2 is first divided by g0 = 9.80665 m s-2 (the WMO
   definition of geopotential height).
2. Each column's u and v are interpolated linearly in Z onto one common set of equally spaced
   altitudes (``dz_m``, 100 m by default); below the column's lowest level its lowest wind is held,
   above its top its top wind.
3. A query point is then interpolated multilinearly in (time, altitude, latitude, longitude) on that
   regular 4-D cube. This equals "linear in altitude in each of the 16 surrounding columns, then
   bilinear and linear in time" except within one ``dz_m`` cell around each column's pressure-level
   heights, where the piecewise-linear profile's corner is cut: the error there is at most dz_m / 4
   times the jump in vertical shear (0.25 m/s for a shear change of 0.01 s-1 with dz_m = 100 m) and
   zero elsewhere.

References
----------
[NOAA1976] U.S. Standard Atmosphere, 1976, eq. 18: geopotential H = r0 Z / (r0 + Z),
    r0 = 6 356 766 m.
[CF] NetCDF Climate and Forecast Metadata Conventions (standard names eastward_wind, northward_wind,
    geopotential_height, geopotential, air_pressure, latitude, longitude, time).
[WMO306] WMO-No. 306, Manual on Codes, FM 92 GRIB edition 2 (read through ecCodes and cfgrib).
"""

from __future__ import annotations

import warnings
from pathlib import Path
from typing import Any

import numpy as np

from balloonpath.atmosphere import G0, altitude_from_pressure, geometric_from_geopotential
from balloonpath.errors import DataQualityWarning, InputDataError, input_error
from balloonpath.winds.field import Coverage, CoveragePolicy, check_coverage

#: Below a column's lowest pressure level its lowest wind is held silently down to this many metres
#: lower.
HOLD_BELOW_M = 500.0
#: The common altitude grid is coarsened so that the cube holds at most this many cells (per
#: component).
MAX_CUBE_CELLS = 15_000_000

_U_NAMES = ("u", "ua", "uwnd", "u_wind", "ugrd", "u_component_of_wind", "eastward_wind")
_V_NAMES = ("v", "va", "vwnd", "v_wind", "vgrd", "v_component_of_wind", "northward_wind")
_GH_NAMES = ("gh", "zg", "hgt", "geopotential_height", "height")
_Z_NAMES = ("z", "geopotential", "phi")
_LEVEL_NAMES = ("isobaricinhpa", "level", "plev", "pressure", "lev", "pressure_level", "isobaric")
_LAT_NAMES = ("latitude", "lat", "y")
_LON_NAMES = ("longitude", "lon", "x")
_TIME_NAMES = ("valid_time", "time", "step")

_SPEED_UNITS = {"ms-1", "m/s", "m.s-1", "meterspersecond", "metrespersecond", "m/sec", "msec-1"}
_KNOT_UNITS = {"kt", "kts", "knot", "knots"}
_GEOPOTENTIAL_UNITS = {"m2s-2", "m2/s2", "m^2/s^2", "m2.s-2", "j/kg", "jkg-1"}
_HEIGHT_UNITS = {"m", "gpm", "metres", "meters", "geopotentialmeters", "geopotentialmetres", "m'"}
_HPA_UNITS = {"hpa", "mbar", "millibar", "millibars", "mb"}
_PA_UNITS = {"pa", "pascal", "pascals"}


def _unit_key(text: Any) -> str:
    return str(text).replace(" ", "").replace("**", "").replace("^", "").lower()


# ---------------------------------------------------------------------------------- the field
class GridField:
    """Winds from a gridded forecast, evaluated on a precomputed regular 4-D cube.

    Build it with :meth:`open` (a file) or :meth:`from_pressure_levels` (arrays).

    Parameters
    ----------
    times_s : numpy.ndarray
        Valid times, POSIX seconds, strictly increasing (one time: the wind is constant in time).
    alt0_m, dz_m : float
        The common altitude grid is ``alt0_m + dz_m * k``, k = 0 .. nz - 1.
    lats : numpy.ndarray
        Strictly increasing latitudes, degrees (at least two).
    lons : numpy.ndarray
        Strictly increasing longitudes, unwrapped (may pass 180 or start below -180), at least two.
    wind : numpy.ndarray
        Complex u + i v, shape (nt, nz, ny, nx).
    coverage_alt : (float, float)
        Altitude range covered (see the class notes of :meth:`from_pressure_levels`).
    outside : {"error", "hold"}
        Coverage policy.
    source : str
        Name for messages.
    """

    def __init__(
        self,
        times_s: np.ndarray,
        alt0_m: float,
        dz_m: float,
        lats: np.ndarray,
        lons: np.ndarray,
        wind: np.ndarray,
        coverage_alt: tuple[float, float],
        outside: CoveragePolicy = "error",
        source: str = "gridded winds",
        global_lon: bool = False,
    ) -> None:
        if outside not in ("error", "hold"):
            raise input_error(
                None, "[winds] outside", f"'{outside}' is not error or hold", "use error or hold"
            )
        self.times_s = np.asarray(times_s, dtype=float)
        self.alt0_m = float(alt0_m)
        self.dz_m = float(dz_m)
        self.lats = np.asarray(lats, dtype=float)
        self.lons = np.asarray(lons, dtype=float)
        self._cube = np.ascontiguousarray(wind, dtype=complex)
        self.outside: CoveragePolicy = outside
        self.source = source
        self.global_lon = bool(global_lon)
        nt, nz, ny, nx = self._cube.shape
        if (nt, ny, nx) != (self.times_s.size, self.lats.size, self.lons.size) or nz < 2:
            raise ValueError("GridField: cube shape does not match its axes")
        self._flat = self._cube.ravel()
        self._strides = np.array([nz * ny * nx, ny * nx, nx, 1], dtype=np.int64)
        self._coverage_alt = (float(coverage_alt[0]), float(coverage_alt[1]))
        self._box = Coverage(
            alt_min_m=self._coverage_alt[0],
            alt_max_m=self._coverage_alt[1],
            time_min_s=float(self.times_s[0]) if nt > 1 else None,
            time_max_s=float(self.times_s[-1]) if nt > 1 else None,
            lat_min=float(self.lats[0]),
            lat_max=float(self.lats[-1]),
            lon_min=None if self.global_lon else float(self.lons[0]),
            lon_max=None if self.global_lon else float(self.lons[-1]),
        )

    # -------------------------------------------------------------------------------- construction
    @classmethod
    def from_pressure_levels(
        cls,
        times_s: np.ndarray,
        lats: np.ndarray,
        lons: np.ndarray,
        alt_m: np.ndarray,
        u: np.ndarray,
        v: np.ndarray,
        outside: CoveragePolicy = "error",
        dz_m: float = 100.0,
        source: str = "gridded winds",
    ) -> GridField:
        """Build the field from columns of levels.

        Parameters
        ----------
        times_s : numpy.ndarray, shape (nt,)
            Valid times, POSIX seconds, strictly increasing.
        lats : numpy.ndarray, shape (ny,)
            Strictly monotonic latitudes (descending is reversed here).
        lons : numpy.ndarray, shape (nx,)
            Strictly increasing unwrapped longitudes; a global grid (nx spacing covering 360 deg)
            gets its first column repeated at +360 so that interpolation crosses the seam.
        alt_m, u, v : numpy.ndarray, shape (nt, nl, ny, nx)
            Geometric altitude of each level and the wind there; levels in any order but each
            column's altitudes strictly monotonic in the same direction.
        dz_m : float
            Spacing of the common altitude grid (coarsened if the cube would exceed
            ``MAX_CUBE_CELLS``).

        Notes
        -----
        Coverage in altitude: from ``HOLD_BELOW_M`` below the highest lowest-level altitude of all
        columns up to the lowest top-level altitude of all columns (so that every column has data
        there).
        """
        times = np.asarray(times_s, dtype=float)
        lat = np.asarray(lats, dtype=float)
        lon = np.asarray(lons, dtype=float)
        z = np.asarray(alt_m, dtype=float)
        uu = np.asarray(u, dtype=float)
        vv = np.asarray(v, dtype=float)
        if lat.size >= 2 and lat[0] > lat[-1]:
            lat, z, uu, vv = lat[::-1], z[:, :, ::-1], uu[:, :, ::-1], vv[:, :, ::-1]
        if lat.size < 2 or lon.size < 2 or np.any(np.diff(lat) <= 0) or np.any(np.diff(lon) <= 0):
            raise input_error(
                source,
                "latitude/longitude",
                "needs at least two strictly monotonic latitudes and longitudes in the region",
                "widen the bounding box or check the file's grid",
            )
        if times.size > 1 and np.any(np.diff(times) <= 0):
            raise input_error(
                source, "time", "is not strictly increasing", "give sorted, distinct times"
            )
        mean_alt = np.nanmean(z, axis=(0, 2, 3))
        order = np.argsort(mean_alt)
        z, uu, vv = z[:, order], uu[:, order], vv[:, order]
        if z.shape[1] < 2:
            raise input_error(
                source, "levels", "has a single pressure level", "give winds on two or more levels"
            )
        if np.any(np.diff(z, axis=1) <= 0):
            raise input_error(
                source,
                "geopotential",
                "is not monotonic with pressure in some grid column",
                "check the height variable and the level order",
            )
        dx = float(np.median(np.diff(lon)))
        global_lon = bool(abs(lon.size * dx - 360.0) < 0.5 * dx and lon[-1] - lon[0] < 360.0)
        if global_lon:
            lon = np.concatenate([lon, [lon[0] + 360.0]])
            z, uu, vv = (np.concatenate([a, a[..., :1]], axis=-1) for a in (z, uu, vv))
        nt, nl, ny, nx = z.shape
        bottom = z[:, 0]
        top = z[:, -1]
        z_lo, z_hi = float(bottom.min()), float(top.max())
        ncol = nt * ny * nx
        dz = float(dz_m)
        while ncol * (int(np.ceil((z_hi - z_lo) / dz)) + 1) > MAX_CUBE_CELLS:
            dz *= 1.5
        nz = int(np.ceil((z_hi - z_lo) / dz)) + 1
        levels = z_lo + dz * np.arange(nz)
        zc = np.moveaxis(z, 1, -1).reshape(ncol, nl)
        uc = np.moveaxis(uu, 1, -1).reshape(ncol, nl)
        vc = np.moveaxis(vv, 1, -1).reshape(ncol, nl)
        cube = np.empty((ncol, nz), dtype=complex)
        for k in range(ncol):
            cube[k].real = np.interp(levels, zc[k], uc[k])
            cube[k].imag = np.interp(levels, zc[k], vc[k])
        cube = np.moveaxis(cube.reshape(nt, ny, nx, nz), -1, 1)
        coverage_alt = (float(bottom.max()) - HOLD_BELOW_M, float(top.min()))
        return cls(times, z_lo, dz, lat, lon, cube, coverage_alt, outside, source, global_lon)

    @classmethod
    def open(
        cls,
        path: str | Path,
        bbox: tuple[float, float, float, float] | None = None,
        time_range: tuple[float, float] | None = None,
        outside: CoveragePolicy = "error",
        dz_m: float = 100.0,
    ) -> GridField:
        """Open a NetCDF (CF) or GRIB2 forecast file and load the corridor's subset.

        Parameters
        ----------
        path : str or Path
            NetCDF (by xarray with netCDF4) or GRIB2 (by cfgrib with ecCodes: ``pip install
            balloonpath[grib]``), recognised by the file's first bytes.
        bbox : (lat_min, lat_max, lon_min, lon_max), optional
            The region to load, degrees; ``lon_min > lon_max`` means the box crosses the
            antimeridian. One grid cell of margin is added on every side. None loads the whole grid.
        time_range : (t_min, t_max), optional
            POSIX seconds; the times bracketing the range are loaded too. None loads every time.
        outside : {"error", "hold"}
            Coverage policy.
        dz_m : float
            Spacing of the common altitude grid, m.

        Raises
        ------
        InputDataError
            For missing variables or coordinates, wrong units, NaN values in the region, a single
            level, or an unknown file format.
        """
        path = Path(path)
        if not path.exists():
            raise FileNotFoundError(f"{path}: forecast file not found")
        ds = _open_dataset(path)
        try:
            return _load_subset(cls, ds, path, bbox, time_range, outside, dz_m)
        finally:
            ds.close()

    # ----------------------------------------------------------------------------------- interface
    def coverage(self) -> Coverage:
        """Region and time covered.

        Longitudes are wrapped into [-180, 180); ``lon_min > lon_max`` means the region crosses the
        antimeridian. A global grid has no longitude bounds, a one-time file no time bounds.
        """
        box = self._box
        if box.lon_min is None or box.lon_max is None:
            return box
        wrap = lambda x: float((x + 180.0) % 360.0 - 180.0)  # noqa: E731
        return Coverage(
            box.alt_min_m,
            box.alt_max_m,
            box.time_min_s,
            box.time_max_s,
            box.lat_min,
            box.lat_max,
            wrap(box.lon_min),
            wrap(box.lon_max),
        )

    def wind(
        self, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray, time_s: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """u, v (m/s) at the points (arrays broadcast together)."""
        shape = np.broadcast(
            np.asarray(lat), np.asarray(lon), np.asarray(alt_m), np.asarray(time_s)
        ).shape
        la, lo, z, t = (
            np.broadcast_to(np.asarray(a, dtype=float), shape).ravel()
            for a in (lat, lon, alt_m, time_s)
        )
        x0 = self.lons[0]
        x = (lo - x0) % 360.0 + x0  # into the cube's unwrapped longitude range
        la, x, z, t = check_coverage(self._box, la, x, z, t, self.outside, self.source)
        w = self._interpolate(la, x, z, t)
        return w.real.reshape(shape), w.imag.reshape(shape)

    def _interpolate(
        self, la: np.ndarray, x: np.ndarray, z: np.ndarray, t: np.ndarray
    ) -> np.ndarray:
        """Multilinear interpolation on the cube (points already inside)."""
        nt, nz, ny, nx = self._cube.shape
        # altitude: regular grid
        s = (z - self.alt0_m) / self.dz_m
        iz = np.clip(np.floor(s), 0, nz - 2).astype(np.int64)
        fz = np.clip(s - iz, 0.0, 1.0)
        iy, fy = _bracket(self.lats, la)
        ix, fx = _bracket(self.lons, x)
        if nt > 1:
            it, ft = _bracket(self.times_s, t)
            st = self._strides[0]
        else:
            it = np.zeros(z.shape, dtype=np.int64)
            ft = np.zeros(z.shape)
            st = 0
        sz, sy = self._strides[1], self._strides[2]
        base = it * self._strides[0] + iz * sz + iy * sy + ix
        flat = self._flat
        # Interpolate in longitude, then latitude, altitude and time (16 corners in all).
        t_terms = ((0, 1.0 - ft), (st, ft)) if nt > 1 else ((0, None),)
        out = np.zeros(z.shape, dtype=complex)
        for dt_, wt in t_terms:
            for dz_, wz in ((0, 1.0 - fz), (sz, fz)):
                b = base + dt_ + dz_
                row0 = flat[b] * (1.0 - fx) + flat[b + 1] * fx
                row1 = flat[b + sy] * (1.0 - fx) + flat[b + sy + 1] * fx
                weight = wz if wt is None else wz * wt
                out += (row0 * (1.0 - fy) + row1 * fy) * weight
        return out


def _bracket(axis: np.ndarray, q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index i and fraction f with axis[i] <= q <= axis[i+1] (clamped to the ends)."""
    i = np.clip(np.searchsorted(axis, q, side="right") - 1, 0, axis.size - 2)
    f = np.clip((q - axis[i]) / (axis[i + 1] - axis[i]), 0.0, 1.0)
    return i.astype(np.int64), f


# ------------------------------------------------------------------------------------ reading
def _open_dataset(path: Path) -> Any:
    import xarray as xr

    with path.open("rb") as fh:
        magic = fh.read(4)
    if magic == b"GRIB":
        try:
            import cfgrib  # noqa: F401
        except Exception:  # ImportError, or ecCodes missing its library
            raise input_error(
                path,
                "format",
                "is GRIB but cfgrib/ecCodes are not installed",
                "pip install 'balloonpath[grib]', or convert the file to NetCDF",
            ) from None
        try:
            return xr.open_dataset(
                path,
                engine="cfgrib",
                decode_timedelta=True,
                backend_kwargs={
                    "indexpath": "",
                    "filter_by_keys": {"typeOfLevel": "isobaricInhPa"},
                },
            )
        except Exception as exc:  # cfgrib raises many kinds
            raise input_error(
                path,
                "GRIB",
                f"cannot be read ({type(exc).__name__}: {exc})",
                "give GRIB2 messages of u, v and gh on isobaric levels",
            ) from None
    if magic[:3] == b"CDF" or magic == b"\x89HDF":
        try:
            return xr.open_dataset(path, engine="netcdf4", cache=False)
        except Exception as exc:
            raise input_error(
                path,
                "NetCDF",
                f"cannot be read ({type(exc).__name__}: {exc})",
                "give a CF NetCDF file",
            ) from None
    raise input_error(
        path, "format", "is neither NetCDF nor GRIB2", "give a NetCDF (.nc) or GRIB2 forecast file"
    )


def _find_var(ds: Any, names: tuple[str, ...], standard_names: tuple[str, ...]) -> str | None:
    for name, var in ds.data_vars.items():
        if var.attrs.get("standard_name") in standard_names:
            return str(name)
    lower = {str(n).lower(): str(n) for n in ds.data_vars}
    for n in names:
        if n in lower:
            return lower[n]
    return None


def _find_dim(
    ds: Any, dims: tuple[str, ...], names: tuple[str, ...], std: tuple[str, ...]
) -> str | None:
    for d in dims:
        coord = ds.coords.get(d)
        if coord is not None and coord.attrs.get("standard_name") in std:
            return d
    for d in dims:
        if d.lower() in names:
            return d
    return None


def _posix(values: np.ndarray, path: Path, name: str) -> np.ndarray:
    arr = np.asarray(values)
    if not np.issubdtype(arr.dtype, np.datetime64):
        raise input_error(
            path,
            name,
            "is not a decodable CF time axis",
            "give the time variable CF units such as 'hours since 2027-05-14 00:00:00'",
        )
    return arr.astype("datetime64[ns]").astype(np.int64) / 1e9


def _load_subset(
    cls: type[GridField],
    ds: Any,
    path: Path,
    bbox: tuple[float, float, float, float] | None,
    time_range: tuple[float, float] | None,
    outside: CoveragePolicy,
    dz_m: float,
) -> GridField:
    u_name = _find_var(ds, _U_NAMES, ("eastward_wind",))
    v_name = _find_var(ds, _V_NAMES, ("northward_wind",))
    for label, name in (("u (eastward_wind)", u_name), ("v (northward_wind)", v_name)):
        if name is None:
            raise input_error(
                path,
                label,
                "variable is missing",
                "give a file with u and v (standard_name eastward_wind / northward_wind)",
            )
    assert u_name is not None and v_name is not None
    u_var = ds[u_name]
    dims = tuple(str(d) for d in u_var.dims)
    lat_dim = _find_dim(ds, dims, _LAT_NAMES, ("latitude",))
    lon_dim = _find_dim(ds, dims, _LON_NAMES, ("longitude",))
    lev_dim = _find_dim(ds, dims, _LEVEL_NAMES, ("air_pressure",))
    time_dim = _find_dim(ds, dims, _TIME_NAMES, ("time",))
    for label, d in (("latitude", lat_dim), ("longitude", lon_dim), ("pressure level", lev_dim)):
        if d is None:
            raise input_error(
                path,
                f"{u_name}: {label}",
                f"dimension not found among {list(dims)}",
                "give u and v on (time, pressure level, latitude, longitude)",
            )
    assert lat_dim is not None and lon_dim is not None and lev_dim is not None
    extra = [d for d in dims if d not in (lat_dim, lon_dim, lev_dim, time_dim)]
    sel: dict[str, Any] = {}
    for d in extra:
        if u_var.sizes[d] != 1:
            raise input_error(
                path,
                f"{u_name}: {d}",
                f"is an extra dimension of size {u_var.sizes[d]}",
                "give one forecast (no ensemble or extra axis), or select one with xarray first",
            )
        sel[d] = 0

    # speed units
    unit_scale = 1.0
    for name in (u_name, v_name):
        units = ds[name].attrs.get("units")
        if units is None:
            warnings.warn(
                f"{path.name}: {name}: has no units attribute; m/s assumed",
                DataQualityWarning,
                stacklevel=3,
            )
        elif _unit_key(units) in _KNOT_UNITS:
            unit_scale = 1852.0 / 3600.0
        elif _unit_key(units) not in _SPEED_UNITS:
            raise input_error(
                path,
                f"{name}: units",
                f"'{units}' is not a wind speed unit (m s-1 expected)",
                "give u and v in m s-1",
            )

    # pressure levels
    lev_coord = ds[lev_dim]
    lev_units = _unit_key(lev_coord.attrs.get("units", ""))
    if lev_units in _HPA_UNITS:
        p_scale = 100.0
    elif lev_units in _PA_UNITS:
        p_scale = 1.0
    else:
        raise input_error(
            path,
            f"{lev_dim}: units",
            f"'{lev_coord.attrs.get('units', '')}' is not a pressure unit",
            "give the level coordinate units 'hPa' or 'Pa'",
        )
    pressure_pa = np.atleast_1d(np.asarray(lev_coord.values, dtype=float)) * p_scale

    # times
    if time_dim is not None:
        if time_dim == "step" and "valid_time" in ds.coords:
            times = _posix(ds["valid_time"].values, path, "valid_time")
        else:
            times = _posix(ds[time_dim].values, path, time_dim)
        t_index = np.arange(times.size)
        if times.size > 1 and np.any(np.diff(times) <= 0):
            raise input_error(path, time_dim, "is not strictly increasing", "sort the file by time")
        if time_range is not None:
            t_lo, t_hi = float(time_range[0]), float(time_range[1])
            i0 = max(int(np.searchsorted(times, t_lo, side="right")) - 1, 0)
            i1 = min(int(np.searchsorted(times, t_hi, side="left")), times.size - 1)
            i1 = max(i1, i0)
            t_index = np.arange(i0, i1 + 1)
        sel[time_dim] = slice(int(t_index[0]), int(t_index[-1]) + 1)
        times = times[t_index]
    else:
        tname = next((n for n in ("valid_time", "time") if n in ds.coords), None)
        if tname is None:
            raise input_error(
                path, "time", "coordinate not found", "give the file a CF time coordinate"
            )
        times = np.atleast_1d(_posix(ds[tname].values, path, tname))

    # latitude
    lat_all = np.asarray(ds[lat_dim].values, dtype=float)
    if bbox is not None:
        lat_min, lat_max, lon_min, lon_max = (float(b) for b in bbox)
        dlat = float(np.max(np.abs(np.diff(lat_all)))) if lat_all.size > 1 else 0.0
        inside = np.flatnonzero((lat_all >= lat_min - dlat) & (lat_all <= lat_max + dlat))
        if inside.size == 0:
            raise input_error(
                path,
                "latitude",
                f"the grid ({lat_all.min():g}..{lat_all.max():g}) misses the region "
                f"{lat_min:g}..{lat_max:g}",
                "use a forecast file that covers the flight",
                cls=InputDataError,
            )
        sel[lat_dim] = slice(int(inside.min()), int(inside.max()) + 1)
        lat = lat_all[sel[lat_dim]]
    else:
        lat = lat_all
        lon_min = lon_max = None

    # longitude: runs of file indices in unwrapped order
    lon_all = np.asarray(ds[lon_dim].values, dtype=float)
    dlon = float(np.median(np.abs(np.diff(lon_all)))) if lon_all.size > 1 else 1.0
    if bbox is None or lon_min is None or lon_max is None:
        a = float(np.min(lon_all))
        span = 360.0
    else:
        a = lon_min - dlon
        b = lon_max + (360.0 if lon_max < lon_min else 0.0) + dlon
        span = b - a
    x_all = (lon_all - a) % 360.0 + a
    picked = np.flatnonzero(x_all <= a + min(span, 360.0 - 1e-9))
    picked = picked[np.argsort(x_all[picked], kind="stable")]
    if picked.size < 2:
        raise input_error(
            path,
            "longitude",
            "the region holds fewer than two grid longitudes",
            "widen the bounding box or use a file that covers the flight",
        )
    runs = np.split(picked, np.flatnonzero(np.diff(picked) != 1) + 1)
    x = x_all[picked]

    # heights
    h_name = _find_var(ds, _GH_NAMES, ("geopotential_height",))
    g_name = _find_var(ds, _Z_NAMES, ("geopotential",))
    height_name = h_name if h_name is not None else g_name

    def load(name: str) -> np.ndarray:
        var = ds[name]
        order = [d for d in (time_dim, lev_dim, lat_dim, lon_dim) if d is not None]
        local_sel = {d: s for d, s in sel.items() if d in var.dims}
        parts = [
            var.isel({**local_sel, lon_dim: slice(int(r[0]), int(r[-1]) + 1)})
            .transpose(*order, *[d for d in var.dims if d not in order])
            .values
            for r in runs
        ]
        arr = np.concatenate(parts, axis=len(order) - 1) if len(parts) > 1 else parts[0]
        arr = np.asarray(arr, dtype=float).reshape(arr.shape[: len(order)])
        if time_dim is None:
            arr = arr[None]
        return arr

    u = load(u_name) * unit_scale
    v = load(v_name) * unit_scale
    for name, arr in ((u_name, u), (v_name, v)):
        _check_finite(path, name, arr, pressure_pa)
    if height_name is None:
        warnings.warn(
            f"{path.name}: no geopotential or geopotential height variable; level heights taken "
            "from US Standard Atmosphere 1976 pressure altitudes",
            DataQualityWarning,
            stacklevel=3,
        )
        alt = np.broadcast_to(altitude_from_pressure(pressure_pa)[None, :, None, None], u.shape)
    else:
        units = ds[height_name].attrs.get("units")
        key = _unit_key(units) if units is not None else ("m2s-2" if height_name == g_name else "m")
        if key in _GEOPOTENTIAL_UNITS:
            scale = 1.0 / G0
        elif key in _HEIGHT_UNITS:
            scale = 1.0
        else:
            raise input_error(
                path,
                f"{height_name}: units",
                f"'{units}' is neither geopotential (m2 s-2) nor geopotential height (m, gpm)",
                "give the height variable CF units",
            )
        h = load(height_name) * scale
        _check_finite(path, height_name, h, pressure_pa)
        if h.shape != u.shape:
            raise input_error(
                path,
                height_name,
                f"has shape {h.shape}, u has {u.shape}",
                "give heights on the same grid and levels as the winds",
            )
        alt = geometric_from_geopotential(h)
    return cls.from_pressure_levels(times, lat, x, alt, u, v, outside, dz_m, source=path.name)


def _check_finite(path: Path, name: str, arr: np.ndarray, pressure_pa: np.ndarray) -> None:
    bad = ~np.isfinite(arr)
    if np.any(bad):
        level = int(np.flatnonzero(bad.any(axis=(0, 2, 3)))[0])
        raise input_error(
            path,
            name,
            f"has missing (NaN) values on the {pressure_pa[level] / 100:g} hPa level in the region",
            "use a file without gaps there, or narrow the bounding box",
        )
