"""Gridded forecast files: exact interpolation of linear fields, longitude conventions, subsets,
GRIB2."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from balloonpath.atmosphere import altitude_from_pressure
from balloonpath.errors import CoverageError, CoverageWarning, InputDataError
from balloonpath.winds.grid import GridField
from balloonpath.winds.synthetic import (
    SyntheticAtmosphereField,
    write_grid_grib2,
    write_grid_netcdf,
)

T0 = 1_800_000_000.0  # 2027-01-15T08:00:00Z
LEVELS = (1000.0, 850.0, 700.0, 500.0, 300.0, 200.0, 100.0, 50.0)


class LinearField:
    """u, v linear in (lat, lon, geometric altitude, time); level heights vary by column."""

    def __init__(self, rng: np.random.Generator) -> None:
        self.cu = rng.uniform(-1, 1, 5) * [10, 2, 2, 1e-3, 1e-4]
        self.cv = rng.uniform(-1, 1, 5) * [10, 2, 2, 1e-3, 1e-4]

    def wind(self, lat, lon, alt_m, time_s):
        lat, lon, z, t = np.broadcast_arrays(
            *(np.asarray(a, float) for a in (lat, lon, alt_m, time_s))
        )
        terms = (np.ones_like(z), lat - 40.0, lon + 100.0, z, t - T0)
        return (
            sum(c * x for c, x in zip(self.cu, terms, strict=True)),
            sum(c * x for c, x in zip(self.cv, terms, strict=True)),
        )

    def level_altitude_m(self, pressure_pa, lat, lon, time_s):
        # Heights differ from column to column (and in time) by up to ~2 %.
        z = altitude_from_pressure(pressure_pa)
        return z * (
            1.0
            + 0.01 * np.sin(np.radians(7 * lat))
            + 0.01 * np.cos(np.radians(5 * lon))
            + 1e-7 * (time_s - T0) / 3600.0
        )


def _points(rng, n, lat=(38.2, 41.8), lon=(-101.8, -98.2), alt=(1_000.0, 19_000.0), hours=6.0):
    return (
        rng.uniform(*lat, n),
        rng.uniform(*lon, n),
        rng.uniform(*alt, n),
        T0 + rng.uniform(0.0, hours * 3600.0, n),
    )


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_linear_fields_are_reproduced_through_a_netcdf_file(tmp_path, seed):
    # Property: multilinear interpolation reproduces any field linear in (lat, lon, z, t) exactly,
    # whatever the column heights; z is written as geopotential (m2 s-2) and must come back as
    # geometric altitude (USSA 1976 eq. 18), otherwise the d * z term would be off by up to 60 m *
    # d.
    rng = np.random.default_rng(seed)
    field = LinearField(rng)
    lats = np.arange(37.0, 43.01, 1.0)
    lons = np.arange(-103.0, -96.99, 1.5)
    path = tmp_path / "lin.nc"
    write_grid_netcdf(
        field,
        path,
        lats,
        lons,
        LEVELS,
        T0 + np.array([0.0, 3.0, 6.0]) * 3600.0,
        height="z" if seed % 2 == 0 else "gh",
        dtype="float64",
    )
    grid = GridField.open(path)
    q = _points(rng, 500)
    u, v = grid.wind(*q)
    u_true, v_true = field.wind(*q)
    np.testing.assert_allclose(u, u_true, atol=1e-6)
    np.testing.assert_allclose(v, v_true, atol=1e-6)


def test_longitude_conventions_descending_latitudes_and_antimeridian(tmp_path):
    field = SyntheticAtmosphereField(52.0, 179.0, T0, seed=2)
    lats = np.arange(44.0, 60.01, 2.0)
    lons360 = np.arange(0.0, 359.99, 2.0)  # global, 0..360
    lons180 = (lons360 + 180.0) % 360.0 - 180.0
    order = np.argsort(lons180)
    write_grid_netcdf(field, tmp_path / "a.nc", lats, lons360, LEVELS, [T0])
    write_grid_netcdf(field, tmp_path / "b.nc", lats[::-1], lons180[order], LEVELS, [T0])
    a = GridField.open(tmp_path / "a.nc")
    b = GridField.open(tmp_path / "b.nc")
    boxed = GridField.open(tmp_path / "a.nc", bbox=(48.0, 56.0, 170.0, -172.0))
    rng = np.random.default_rng(4)
    lat = rng.uniform(48.0, 56.0, 300)
    lon = np.concatenate([rng.uniform(170.0, 180.0, 150), rng.uniform(-180.0, -172.0, 150)])
    alt = rng.uniform(1_000.0, 20_000.0, 300)
    ua, va = a.wind(lat, lon, alt, T0)
    ub, vb = b.wind(lat, lon + 360.0 * (lon < 0), alt, T0)  # 0..360 queries are accepted as well
    uc, vc = boxed.wind(lat, lon, alt, T0)
    np.testing.assert_allclose(ub, ua, atol=1e-9)
    # The subset's common altitude grid starts at another altitude, so the documented dz/4 corner
    # cutting differs slightly (docs/winds.md): agreement to 0.05 m/s, not to rounding.
    np.testing.assert_allclose(uc, ua, atol=0.05)
    np.testing.assert_allclose(vc, va, atol=0.05)
    # Continuity across the seam: 179.999 and -179.999 differ by a tiny fraction of the wind.
    u1, _ = a.wind(52.0, 179.999, 10_000.0, T0)
    u2, _ = a.wind(52.0, -179.999, 10_000.0, T0)
    assert abs(float(u1 - u2)) < 0.05
    # The bounding box loads a few columns, not the globe (lazy subset), and reports its coverage.
    assert boxed._cube.shape[3] <= 12 and a._cube.shape[3] == 181
    cov = boxed.coverage()
    assert cov.lon_min > cov.lon_max  # crossing the antimeridian
    # Interpolated winds stay close to the truth on a 2-degree grid (loose: interpolation error).
    ut, vt = field.wind(lat, lon, alt, T0)
    assert np.sqrt(np.mean((ua - ut) ** 2 + (va - vt) ** 2)) < 5.0


def test_coverage_error_and_hold(tmp_path):
    field = SyntheticAtmosphereField(40.0, -100.0, T0, seed=1)
    path = tmp_path / "g.nc"
    write_grid_netcdf(
        field,
        path,
        np.arange(36.0, 44.1, 1.0),
        np.arange(-104.0, -95.9, 1.0),
        LEVELS,
        T0 + np.array([0.0, 6 * 3600.0]),
    )
    grid = GridField.open(path, bbox=(38.0, 42.0, -102.0, -98.0), time_range=(T0, T0 + 3600.0))
    with pytest.raises(CoverageError, match=r"g\.nc: longitude -90 is outside"):
        grid.wind(40.0, -90.0, 5_000.0, T0)
    with pytest.raises(CoverageError, match="alt_m 40000"):
        grid.wind(40.0, -100.0, 40_000.0, T0)
    with pytest.raises(CoverageError, match="time_s 2027"):
        grid.wind(40.0, -100.0, 5_000.0, T0 + 7 * 3600.0)
    held = GridField.open(path, outside="hold")
    with pytest.warns(CoverageWarning):
        u, _ = held.wind(40.0, -100.0, 40_000.0, T0)
    assert np.isfinite(u)


def _base_dataset(tmp_path):
    field = SyntheticAtmosphereField(40.0, -100.0, T0, seed=1)
    path = tmp_path / "base.nc"
    write_grid_netcdf(
        field, path, np.arange(38.0, 42.1, 1.0), np.arange(-102.0, -97.9, 1.0), LEVELS, [T0]
    )
    return xr.load_dataset(path)


def _broken(tmp_path, ds, name="bad.nc"):
    path = tmp_path / name
    ds.to_netcdf(path)
    return path


def test_bad_files(tmp_path):
    ds = _base_dataset(tmp_path)
    with pytest.raises(InputDataError, match=r"bad\.nc: v \(northward_wind\): variable is missing"):
        GridField.open(_broken(tmp_path, ds.drop_vars("v")))
    wrong = ds.copy()
    wrong["u"].attrs["units"] = "km h-1"
    with pytest.raises(InputDataError, match=r"u: units: 'km h-1' is not a wind speed unit"):
        GridField.open(_broken(tmp_path, wrong, "units.nc"))
    gap = ds.copy(deep=True)
    gap["v"][:, 2] = np.nan
    with pytest.raises(InputDataError, match=r"v: has missing \(NaN\) values on the 700 hPa level"):
        GridField.open(_broken(tmp_path, gap, "nan.nc"))
    with pytest.raises(InputDataError, match="single pressure level"):
        GridField.open(_broken(tmp_path, ds.isel(level=[3]), "one.nc"))
    text = tmp_path / "text.nc"
    text.write_text("not a forecast")
    with pytest.raises(InputDataError, match="neither NetCDF nor GRIB2"):
        GridField.open(text)


def test_grib2_matches_netcdf(tmp_path):
    pytest.importorskip("eccodes", reason="ecCodes not installed (pip install 'balloonpath[grib]')")
    pytest.importorskip("cfgrib", reason="cfgrib not installed (pip install 'balloonpath[grib]')")
    field = SyntheticAtmosphereField(40.0, -100.0, T0, seed=3)
    lats = np.arange(43.0, 36.9, -1.0)  # GRIB's usual north-to-south scan
    lons = np.arange(-104.0, -95.9, 1.0)  # written as 256..264 in the GRIB2 grid definition
    times = T0 + np.array([0.0, 3.0]) * 3600.0
    write_grid_grib2(field, tmp_path / "g.grib2", lats, lons, LEVELS, times)
    write_grid_netcdf(
        field, tmp_path / "g.nc", lats, lons, LEVELS, times, height="gh", dtype="float64"
    )
    g = GridField.open(tmp_path / "g.grib2", bbox=(38.0, 42.0, -102.0, -98.0))
    n = GridField.open(tmp_path / "g.nc", bbox=(38.0, 42.0, -102.0, -98.0))
    rng = np.random.default_rng(9)
    q = _points(rng, 200, lat=(38.0, 42.0), lon=(-102.0, -98.0), hours=3.0)
    ug, vg = g.wind(*q)
    un, vn = n.wind(*q)
    # 24-bit packing of u, v (range < 100 m/s) and gh (range ~ 20 km) -> errors far below 0.01 m/s.
    np.testing.assert_allclose(ug, un, atol=0.01)
    np.testing.assert_allclose(vg, vn, atol=0.01)
    assert not list(tmp_path.glob("*.idx"))  # cfgrib opened with indexpath=""
