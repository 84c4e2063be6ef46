"""Terrain: SRTM .hgt tiles and GeoTIFF rasters written here; bilinear values checked exactly."""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest
import tifffile

from balloonpath.errors import CoverageError, DataQualityWarning, InputDataError
from balloonpath.plan import parse_plan
from balloonpath.terrain import (
    FlatTerrain,
    GeoTiffTerrain,
    HgtTerrain,
    LayeredTerrain,
    bilinear,
    hgt_tile_name,
    parse_hgt_name,
    terrain_from_plan,
)


def write_hgt(path: Path, grid: np.ndarray) -> Path:
    """SRTM layout: big-endian int16, rows north to south (published .hgt format)."""
    np.asarray(grid, dtype=">i2").tofile(path)
    return path


def plane_grid(n: int, a: float = 100.0, b: float = 2.0, c: float = 3.0) -> np.ndarray:
    """Posts f[i, j] = a + b i + c j (i row from north, j column from west)."""
    i, j = np.mgrid[0:n, 0:n]
    return a + b * i + c * j


def test_hgt_plane_is_interpolated_exactly(tmp_path: Path) -> None:
    # Bilinear interpolation reproduces a plane exactly: f(lat, lon) = 100 + 2 i + 3 j with
    # i = (lat0 + 1 - lat) * 1200 and j = (lon - lon0) * 1200 for a 3 arc-second tile.
    t = HgtTerrain([write_hgt(tmp_path / "N38W099.hgt", plane_grid(1201))])
    rng = np.random.default_rng(7)
    lat = rng.uniform(38.0, 39.0, 200)
    lon = rng.uniform(-99.0, -98.0, 200)
    expected = 100 + 2 * (39.0 - lat) * 1200 + 3 * (lon + 99.0) * 1200
    np.testing.assert_allclose(t.elevation_m(lat, lon), expected, rtol=1e-12)
    # Orientation: row 0 is the north edge, column 0 the west edge.
    assert t.elevation_m(39.0, -99.0) == 100.0
    assert t.elevation_m(38.0, -99.0) == 100.0 + 2 * 1200
    assert t.elevation_m(39.0, -98.0) == 100.0 + 3 * 1200
    assert t.elevation_m(np.full((2, 3), 38.5), -98.5).shape == (2, 3)


def test_bilinear_cross_term_on_random_cells() -> None:
    # The bilinear formula f = (1-a)(1-b) f00 + (1-a) b f01 + a (1-b) f10 + a b f11 checked by hand.
    rng = np.random.default_rng(11)
    grid = rng.integers(-50, 3000, size=(9, 9)).astype(float)
    i, j = rng.integers(0, 8, 50), rng.integers(0, 8, 50)
    a, b = rng.uniform(0, 1, 50), rng.uniform(0, 1, 50)
    f = (
        (1 - a) * (1 - b) * grid[i, j]
        + (1 - a) * b * grid[i, j + 1]
        + a * (1 - b) * grid[i + 1, j]
        + a * b * grid[i + 1, j + 1]
    )
    np.testing.assert_allclose(bilinear(grid, i + a, j + b), f, rtol=1e-12)


def test_one_arc_second_tile_and_south_east_names(tmp_path: Path) -> None:
    assert parse_hgt_name("S01E010.hgt") == (-1, 10)
    assert hgt_tile_name(-1, 10) == "S01E010.hgt" and hgt_tile_name(38, -99) == "N38W099.hgt"
    grid = plane_grid(3601, a=5.0, b=1.0, c=0.5)
    t = HgtTerrain([write_hgt(tmp_path / "S01E010.hgt", grid)])
    lat, lon = -0.25, 10.75
    expected = 5.0 + (0.0 - lat) * 3600 + 0.5 * (lon - 10.0) * 3600
    assert float(t.elevation_m(lat, lon)) == pytest.approx(expected, rel=1e-12)


def test_neighbouring_tiles_meet_and_edges_are_shared(tmp_path: Path) -> None:
    # Two tiles of the same plane in absolute coordinates agree on the shared meridian.
    n = 1201
    i, j = np.mgrid[0:n, 0:n]
    west = 10.0 * i + 4.0 * j  # lon -99..-98
    east = 10.0 * i + 4.0 * (j + 1200)  # lon -98..-97
    t = HgtTerrain(
        [write_hgt(tmp_path / "N38W099.hgt", west), write_hgt(tmp_path / "N38W098.hgt", east)]
    )
    lat = np.array([38.3, 38.3, 38.3])
    lon = np.array([-98.0 - 1e-9, -98.0, -97.5])
    np.testing.assert_allclose(
        t.elevation_m(lat, lon), 10 * (39 - lat) * 1200 + 4 * (lon + 99) * 1200, rtol=1e-9
    )
    # A point on the north edge of N38 is served by N38 although N39 is not loaded.
    assert float(t.elevation_m(39.0, -98.5)) == pytest.approx(4.0 * 600)


def test_missing_tile_names_the_tile(tmp_path: Path) -> None:
    t = HgtTerrain([write_hgt(tmp_path / "N38W099.hgt", plane_grid(1201))])
    with pytest.raises(
        CoverageError, match=r"outside the loaded SRTM tiles .*fix: add N39W099.hgt"
    ):
        t.elevation_m(np.array([38.5, 39.5]), np.array([-98.5, -98.5]))
    assert t.contains(np.array([38.5, 39.5]), -98.5).tolist() == [True, False]


def test_voids_are_filled_from_the_nearest_post(tmp_path: Path) -> None:
    grid = np.full((1201, 1201), 250, dtype=np.int64)
    grid[600, 600] = -32768  # published SRTM void value
    grid[600, 601] = 300
    t = HgtTerrain([write_hgt(tmp_path / "N10E020.hgt", grid)])
    with pytest.warns(
        DataQualityWarning, match="N10E020.hgt: 1 void posts filled from the nearest"
    ):
        z = t.elevation_m(10.5, 20.5)  # post (600, 600)
    assert float(z) in (250.0, 300.0)
    all_void = np.full((1201, 1201), -32768)
    t2 = HgtTerrain([write_hgt(tmp_path / "N11E020.hgt", all_void)])
    with pytest.warns(DataQualityWarning, match="every post is void; elevation taken as 0 m"):
        assert float(t2.elevation_m(11.5, 20.5)) == 0.0


def test_bad_hgt_files(tmp_path: Path) -> None:
    with pytest.raises(InputDataError, match="not an SRTM tile name like N38W099.hgt; fix"):
        HgtTerrain([tmp_path / "dem.hgt"])
    p = tmp_path / "N01E001.hgt"
    np.zeros(100, dtype=">i2").tofile(p)
    with pytest.raises(InputDataError, match="200 bytes is not a 3 arc-second"):
        HgtTerrain([p]).elevation_m(1.5, 1.5)


def write_geotiff(
    path: Path,
    data: np.ndarray,
    tie: tuple,
    scale: tuple,
    raster_type: int = 1,
    model_type: int = 2,
    nodata: str | None = None,
    transform=None,
) -> Path:  # noqa: ANN001
    """A GeoTIFF with the tags of the GeoTIFF 1.0 specification (33550, 33922, 34735)."""
    keys = [1, 1, 0, 3, 1024, 0, 1, model_type, 1025, 0, 1, raster_type, 2048, 0, 1, 4326]
    tags = [(34735, "H", len(keys), keys, False)]
    if transform is None:
        tags += [(33550, "d", 3, scale, False), (33922, "d", 6, tie, False)]
    else:
        tags += [(34264, "d", 16, transform, False)]
    if nodata is not None:
        tags.append((42113, "s", 0, nodata, False))
    tifffile.imwrite(path, data, extratags=tags)
    return path


def test_geotiff_pixel_is_area(tmp_path: Path) -> None:
    # 40 x 60 pixels of 0.01 deg, north-west corner (45.0 N, 7.0 E); value 1000 + 5 row + 2 col at
    # pixel centres, so f(lat, lon) = 1000 + 5 ((45 - lat)/0.01 - 0.5) + 2 ((lon - 7)/0.01 - 0.5).
    i, j = np.mgrid[0:40, 0:60]
    data = (1000 + 5 * i + 2 * j).astype(np.float32)
    t = GeoTiffTerrain(
        write_geotiff(tmp_path / "valley.tif", data, (0, 0, 0, 7.0, 45.0, 0), (0.01, 0.01, 0.0))
    )
    rng = np.random.default_rng(3)
    lat = rng.uniform(44.605, 44.995, 100)
    lon = rng.uniform(7.005, 7.595, 100)
    expected = 1000 + 5 * ((45 - lat) / 0.01 - 0.5) + 2 * ((lon - 7) / 0.01 - 0.5)
    np.testing.assert_allclose(t.elevation_m(lat, lon), expected, rtol=1e-9)
    # Within the outer half pixel the edge value is held; outside the raster: CoverageError.
    assert float(t.elevation_m(44.9999, 7.0001)) == 1000.0
    with pytest.raises(
        CoverageError, match=r"valley.tif: point 45.10000, 7.30000 is outside the raster"
    ):
        t.elevation_m(45.1, 7.3)


def test_geotiff_pixel_is_point_and_nodata(tmp_path: Path) -> None:
    i, j = np.mgrid[0:11, 0:11]
    data = (10.0 * i + j).astype(np.float32)
    data[5, 5] = -9999.0
    path = write_geotiff(
        tmp_path / "hill.tif",
        data,
        (0, 0, 0, -3.0, 52.0, 0),
        (0.1, 0.1, 0.0),
        raster_type=2,
        nodata="-9999",
    )
    with pytest.warns(DataQualityWarning, match="hill.tif: 1 void posts filled"):
        t = GeoTiffTerrain(path)
    # Pixel-is-point: post (0, 0) sits exactly on the tie point (52 N, 3 W).
    assert float(t.elevation_m(52.0, -3.0)) == 0.0
    assert float(t.elevation_m(51.0, -2.0)) == 110.0
    assert float(t.elevation_m(51.75, -2.85)) == pytest.approx(10 * 2.5 + 1.5, rel=1e-9)
    assert float(t.elevation_m(51.5, -2.5)) in (45.0, 54.0, 56.0, 65.0)  # void: a neighbour


def test_geotiff_must_be_north_up_and_geographic(tmp_path: Path) -> None:
    data = np.zeros((4, 4), dtype=np.float32)
    rotated = [0.01, 0.002, 0, 7.0, 0.002, -0.01, 0, 45.0, 0, 0, 0, 0, 0, 0, 0, 1]
    with pytest.raises(InputDataError, match="ModelTransformationTag: has rotation terms; fix"):
        GeoTiffTerrain(write_geotiff(tmp_path / "r.tif", data, (), (), transform=rotated))
    with pytest.raises(InputDataError, match=r"ModelPixelScaleTag: scale .* is not north-up"):
        GeoTiffTerrain(
            write_geotiff(tmp_path / "s.tif", data, (0, 0, 0, 7.0, 45.0, 0), (0.01, -0.01, 0.0))
        )
    with pytest.raises(InputDataError, match="GTModelTypeGeoKey: is not geographic .* EPSG:4326"):
        GeoTiffTerrain(
            write_geotiff(
                tmp_path / "p.tif",
                data,
                (0, 0, 0, 500000.0, 4.9e6, 0),
                (30.0, 30.0, 0.0),
                model_type=1,
            )
        )
    unrotated = [0.01, 0, 0, 7.0, 0, -0.01, 0, 45.0, 0, 0, 0, 0, 0, 0, 0, 1]
    t = GeoTiffTerrain(
        write_geotiff(
            tmp_path / "u.tif", np.arange(16.0).reshape(4, 4), (), (), transform=unrotated
        )
    )
    assert float(t.elevation_m(45.0 - 0.015, 7.015)) == pytest.approx(5.0)  # centre of pixel (1, 1)


def test_flat_and_plan_terrain(tmp_path: Path) -> None:
    assert FlatTerrain(312.0).elevation_m(np.zeros((3, 2)), 0.0).tolist() == [[312.0] * 2] * 3
    (tmp_path / "s.csv").write_text("invented\n")
    write_hgt(tmp_path / "N38W099.hgt", plane_grid(1201))
    i, j = np.mgrid[0:10, 0:10]
    write_geotiff(
        tmp_path / "ridge.tif",
        (i + j).astype(np.float32),
        (0, 0, 0, -97.0, 39.0, 0),
        (0.1, 0.1, 0.0),
    )
    base = {
        "launch": {
            "latitude": 38.5,
            "longitude": -98.5,
            "elevation_m": 640.0,
            "time": datetime(2031, 5, 4, 12, 0, tzinfo=UTC),
        },
        "winds": {"sounding": ["s.csv"]},
        "rates": {"ascent_m_s": 5.0, "burst_altitude_m": 3e4},
    }

    def terrain(table: dict):  # noqa: ANN202
        return terrain_from_plan(parse_plan({**base, "terrain": table}, tmp_path / "plan.toml"))

    assert float(terrain({}).elevation_m(38.5, -98.5)) == 640.0
    assert float(terrain({"flat_elevation_m": 12.0}).elevation_m(38.5, -98.5)) == 12.0
    assert isinstance(terrain({"files": ["N38W099.hgt"]}), HgtTerrain)
    both = terrain({"files": ["N38W099.hgt", "ridge.tif"]})
    assert isinstance(both, LayeredTerrain)
    z = both.elevation_m(np.array([38.5, 38.55]), np.array([-98.5, -96.55]))
    assert z[0] == pytest.approx(100 + 2 * 600 + 3 * 600)
    assert z[1] == pytest.approx(8.0)  # pixel-is-area: (row, col) = (4, 4), value i + j
    with pytest.raises(CoverageError, match="fix: add N40W099.hgt"):
        both.elevation_m(40.5, -98.5)
