"""Tests of the GeoJSON export against RFC 7946 rules, checked with shapely."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from shapely.geometry import shape
from support.synthetic_result import make_result

from balloonpath.export.geojson import (
    forecast_geojson,
    polygon_geometry,
    split_antimeridian,
    write_geojson,
)
from balloonpath.geodesy import LocalProjection
from balloonpath.zones import Ring, compute_zones

KINDS = {
    "track",
    "launch",
    "burst",
    "landing",
    "landing_mean",
    "landing_ellipse",
    "landing_region",
    "burst_ellipse",
    "member_landings",
    "member_bursts",
}


@pytest.fixture(scope="module")
def forecast():  # noqa: ANN201
    result = make_result(n=300, seed=21)
    zones = compute_zones(result)
    return result, zones, forecast_geojson(result, zones)


def _rings(geom: dict) -> list[list[list[float]]]:
    if geom["type"] == "Polygon":
        return geom["coordinates"]
    return [r for poly in geom["coordinates"] for r in poly]


def test_every_feature_has_a_kind_and_valid_geometry(forecast) -> None:  # noqa: ANN001
    _result, _zones, gj = forecast
    assert gj["type"] == "FeatureCollection"
    kinds = [f["properties"]["kind"] for f in gj["features"]]
    assert set(kinds) == KINDS
    assert kinds.count("landing_ellipse") == 3 and kinds.count("burst_ellipse") == 3
    for f in gj["features"]:
        geom = shape(f["geometry"])
        assert geom.is_valid, f["properties"]["kind"]
        if f["geometry"]["type"] in ("Polygon", "MultiPolygon"):
            for ring in _rings(f["geometry"]):
                assert ring[0] == ring[-1] and len(ring) >= 4  # RFC 7946 §3.1.6: closed linear ring
            # Right-hand rule (RFC 7946 §3.1.6): exterior rings counter-clockwise (shapely is_ccw).
            polys = [geom] if geom.geom_type == "Polygon" else list(geom.geoms)
            assert all(p.exterior.is_ccw for p in polys)


def test_coordinate_order_is_lon_lat_alt(forecast) -> None:  # noqa: ANN001
    result, _zones, gj = forecast
    by_kind = {f["properties"]["kind"]: f for f in gj["features"]}
    # The invented launch is at 47.2 N, 8.4 E (latitude and longitude differ, so order is testable).
    assert by_kind["launch"]["geometry"]["coordinates"] == [8.4, 47.2, 100.0]
    track = by_kind["track"]["geometry"]
    assert track["type"] == "LineString"
    first = track["coordinates"][0]
    assert first[0] == pytest.approx(result.nominal.lon[0]) and first[1] == pytest.approx(47.2)
    assert len(track["coordinates"]) == len(result.nominal)
    assert [c[2] for c in track["coordinates"]] == pytest.approx(result.nominal.alt_m, abs=0.05)
    mp = by_kind["member_landings"]["geometry"]
    assert mp["type"] == "MultiPoint" and len(mp["coordinates"]) == result.n_members
    first_ellipse = next(f for f in gj["features"] if f["properties"]["kind"] == "landing_ellipse")
    assert first_ellipse["properties"]["probability"] == 0.5
    assert by_kind["landing"]["properties"]["time"].endswith("Z")


def test_ellipse_polygon_lies_on_the_ellipse(forecast) -> None:  # noqa: ANN001
    _result, zones, gj = forecast
    feats = [f for f in gj["features"] if f["properties"]["kind"] == "landing_ellipse"]
    e = zones.ellipses[1]
    assert feats[1]["properties"]["semi_major_m"] == pytest.approx(e.semi_major_m, abs=0.05)
    ring = np.array(feats[1]["geometry"]["coordinates"][0])
    proj = LocalProjection(zones.center_lat, zones.center_lon)
    x, y = proj.to_local(ring[:, 1], ring[:, 0])
    th = math.radians(e.major_axis_azimuth_deg)
    u = (x - e.center_x) * math.sin(th) + (y - e.center_y) * math.cos(th)
    w = (x - e.center_x) * math.cos(th) - (y - e.center_y) * math.sin(th)
    r = (u / e.semi_major_m) ** 2 + (w / e.semi_minor_m) ** 2
    np.testing.assert_allclose(r, 1.0, atol=1e-3)  # 6-decimal rounding moves a vertex <= 0.08 m


def test_split_antimeridian_line() -> None:
    # RFC 7946 §3.1.9 example: a line crossing 180 becomes a MultiLineString meeting at +-180.
    parts = split_antimeridian(
        np.array([170.0, 179.0, -179.0, -170.0]),
        np.array([0.0, 1.0, 2.0, 3.0]),
        np.array([10.0, 20.0, 30.0, 40.0]),
    )
    assert parts == [
        [[170.0, 0.0, 10.0], [179.0, 1.0, 20.0], [180.0, 1.5, 25.0]],
        [[-180.0, 1.5, 25.0], [-179.0, 2.0, 30.0], [-170.0, 3.0, 40.0]],
    ]
    back = split_antimeridian(np.array([-170.0, -179.5, 179.5]), np.array([0.0, 0.0, 1.0]))
    assert back == [[[-170.0, 0.0], [-179.5, 0.0], [-180.0, 0.5]], [[180.0, 0.5], [179.5, 1.0]]]
    assert split_antimeridian(np.array([1.0, 2.0]), np.array([3.0, 4.0])) == [
        [[1.0, 3.0], [2.0, 4.0]]
    ]


def test_forecast_across_the_antimeridian_is_split() -> None:
    result = make_result(n=200, seed=2, lat0=-41.0, lon0=179.6, land_lat=-41.3, land_lon=-179.98)
    zones = compute_zones(result)
    gj = forecast_geojson(result, zones)
    by_kind = {}
    for f in gj["features"]:
        by_kind.setdefault(f["properties"]["kind"], []).append(f)
    track = by_kind["track"][0]["geometry"]
    assert track["type"] == "MultiLineString" and len(track["coordinates"]) == 2
    assert track["coordinates"][0][-1][0] == 180.0 and track["coordinates"][1][0][0] == -180.0
    for f in gj["features"]:
        for lon, lat, *_ in _all_positions(f["geometry"]):
            assert -180.0 <= lon <= 180.0 and -90.0 <= lat <= 90.0
    # The 95 % landing ellipse straddles 180: two parts whose total area is the ellipse's (in
    # degrees^2, by shapely, compared with the unsplit ring unwrapped around 180).
    e95 = by_kind["landing_ellipse"][2]["geometry"]
    assert e95["type"] == "MultiPolygon"
    ring = zones.ellipse_rings[2]
    unwrapped = shape(
        {
            "type": "Polygon",
            "coordinates": [[[lo % 360.0, la] for la, lo in zip(ring.lat, ring.lon, strict=True)]],
        }
    )
    assert shape(e95).area == pytest.approx(unwrapped.area, rel=1e-6)


def _all_positions(geom: dict) -> list[list[float]]:
    def walk(c):  # noqa: ANN001, ANN202
        if isinstance(c[0], (int, float)):
            yield c
        else:
            for x in c:
                yield from walk(x)

    return list(walk(geom["coordinates"]))


def test_polygon_geometry_skips_zero_area() -> None:
    ring = Ring(np.full(5, 10.0), np.full(5, 20.0))
    assert polygon_geometry([ring]) is None


def test_write_geojson_is_byte_identical_and_parses(tmp_path, forecast) -> None:  # noqa: ANN001
    result, zones, gj = forecast
    a = write_geojson(gj, tmp_path / "a.geojson").read_bytes()
    b = write_geojson(
        forecast_geojson(result, compute_zones(result)), tmp_path / "b.geojson"
    ).read_bytes()
    assert a == b
    assert json.loads(a) == gj
    assert b"NaN" not in a
    assert [p.name for p in tmp_path.iterdir() if p.suffix == ".part"] == []
