"""Tests of balloonpath.zones: ellipses, the non-parametric region, probabilities, land mask."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
import shapely
from scipy.stats import chi2
from shapely.geometry import Polygon
from support.synthetic_result import make_result

from balloonpath.errors import FitWarning, InputDataError
from balloonpath.geodesy import LocalProjection
from balloonpath.zones import (
    Ellipse,
    chi2_scale,
    compute_zones,
    density_region,
    ellipse_from_points,
    is_water,
    probability_in_polygons,
    water_fraction,
)


def _rotated_cov(sigma_major: float, sigma_minor: float, azimuth_deg: float) -> np.ndarray:
    th = math.radians(azimuth_deg)
    major = np.array([math.sin(th), math.cos(th)])
    minor = np.array([math.cos(th), -math.sin(th)])
    return sigma_major**2 * np.outer(major, major) + sigma_minor**2 * np.outer(minor, minor)


# ---------------------------------------------------------------------------------- scale factors
@pytest.mark.parametrize("p", [0.5, 0.6827, 0.9, 0.95, 0.99])
def test_chi2_scale_matches_scipy(p: float) -> None:
    # Reference: scipy.stats.chi2.ppf(p, df=2) (scipy), k = sqrt(quantile).
    assert chi2_scale(p) == pytest.approx(math.sqrt(chi2.ppf(p, 2)), rel=1e-12)


@pytest.mark.parametrize(("p", "k"), [(0.5, 1.177410), (0.9, 2.145966), (0.95, 2.447747)])
def test_chi2_scale_published_table(p: float, k: float) -> None:
    # REFERENCES.md §10 (computed with scipy.stats.chi2, scipy 1.17.1), printed to 6 decimals.
    assert chi2_scale(p) == pytest.approx(k, abs=5e-7)
    # The 1-D factor 1.959964 (scipy.stats.norm.ppf(0.975)) is not the 2-D one.
    assert abs(chi2_scale(0.95) - 1.959964) > 0.4


@pytest.mark.parametrize("p", [0.0, 1.0, -0.1, 1.5])
def test_chi2_scale_rejects_bad_probability(p: float) -> None:
    with pytest.raises(InputDataError, match="probability: must be strictly between 0 and 1"):
        chi2_scale(p)


# ------------------------------------------------------------------------------------- ellipses
@pytest.mark.parametrize("p", [0.5, 0.9, 0.95])
def test_ellipse_contains_its_probability_of_fresh_gaussian_samples(p: float) -> None:
    rng = np.random.default_rng(20240611)
    cov = _rotated_cov(3_000.0, 1_000.0, 30.0)
    fit = rng.multivariate_normal([500.0, -200.0], cov, size=10_000)
    fresh = rng.multivariate_normal([500.0, -200.0], cov, size=10_000)
    e = ellipse_from_points(fit[:, 0], fit[:, 1], p)
    frac = float(np.mean(e.contains(fresh[:, 0], fresh[:, 1])))
    # Binomial tolerance: 4 sd of a proportion over 10 000 draws, plus the fit's own error (same
    # order).
    sd = math.sqrt(p * (1 - p) / 10_000)
    assert abs(frac - p) < 4 * math.sqrt(2) * sd


def test_ellipse_axes_and_orientation_recover_the_covariance() -> None:
    # The eigen-decomposition of a known covariance (analytic): semi-axes k sigma along azimuth 30
    # deg.
    rng = np.random.default_rng(5)
    pts = rng.multivariate_normal([0.0, 0.0], _rotated_cov(3_000.0, 1_000.0, 30.0), size=20_000)
    e = ellipse_from_points(pts[:, 0], pts[:, 1], 0.9)
    k = chi2_scale(0.9)
    assert e.semi_major_m == pytest.approx(k * 3_000.0, rel=0.02)
    assert e.semi_minor_m == pytest.approx(k * 1_000.0, rel=0.02)
    assert e.major_axis_azimuth_deg == pytest.approx(30.0, abs=1.0)
    assert 0.0 <= e.major_axis_azimuth_deg < 180.0


def test_ellipse_area_ring_and_containment_are_consistent() -> None:
    e = Ellipse(100.0, -50.0, 5_000.0, 2_000.0, 120.0, 0.9)
    assert e.area_m2 == pytest.approx(math.pi * 5_000.0 * 2_000.0, rel=1e-15)
    x, y = e.polygon_xy(720)
    ring = Polygon(np.column_stack([x, y]))
    # Shapely's polygon area; a regular 720-gon inscribed in the ellipse has area
    # (n / 2) sin(2 pi / n) a b, 1.3e-5 below pi a b.
    assert ring.area == pytest.approx(e.area_m2, rel=2e-5)
    assert ring.exterior.is_ccw and ring.is_valid
    assert x[0] == x[-1] and y[0] == y[-1]
    # Ends of the major axis lie along azimuth 120 deg (clockwise from north).
    d = np.array([math.sin(math.radians(120)), math.cos(math.radians(120))])
    assert bool(e.contains(*(np.array([100.0, -50.0]) + 0.999 * 5_000.0 * d)))
    assert not bool(e.contains(*(np.array([100.0, -50.0]) + 1.001 * 5_000.0 * d)))
    side = np.array([d[1], -d[0]])  # along the minor axis
    assert bool(e.contains(*(np.array([100.0, -50.0]) + 0.999 * 2_000.0 * side)))
    assert not bool(e.contains(*(np.array([100.0, -50.0]) + 1.001 * 2_000.0 * side)))
    assert bool(e.contains(100.0, -50.0))


def test_degenerate_spreads_give_zero_size_with_warning() -> None:
    with pytest.warns(FitWarning, match="coincide"):
        e = ellipse_from_points(np.full(10, 3.0), np.full(10, 4.0), 0.9)
    assert (e.semi_major_m, e.semi_minor_m, e.area_m2) == (0.0, 0.0, 0.0)
    assert bool(e.contains(3.0, 4.0)) and not bool(e.contains(3.5, 4.0))
    with pytest.warns(FitWarning, match="only 2 point"):
        e2 = ellipse_from_points(np.array([0.0, 10.0]), np.array([0.0, 0.0]), 0.9)
    assert e2.area_m2 == 0.0 and (e2.center_x, e2.center_y) == (5.0, 0.0)
    with pytest.warns(FitWarning, match="on a line"):
        e3 = ellipse_from_points(np.arange(10.0), 2 * np.arange(10.0), 0.9)
    assert e3.semi_minor_m == 0.0 and e3.semi_major_m > 0.0
    assert e3.major_axis_azimuth_deg == pytest.approx(math.degrees(math.atan2(1, 2)), abs=1e-6)


@pytest.mark.parametrize("n", [1, 2, 3])
def test_compute_zones_with_few_or_identical_members_does_not_crash(n: int) -> None:
    result = make_result(landing_xy=np.zeros((n, 2)))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        z = compute_zones(result)
    assert any(issubclass(w.category, FitWarning) for w in caught)
    assert all(e.area_m2 == 0.0 for e in z.ellipses)
    assert z.region_90_area_m2 == 0.0 and z.region_90_rings == ()
    assert z.center_lat == pytest.approx(47.55, abs=1e-9)
    summary = z.to_summary()
    assert summary["ensemble"]["ellipses"][1]["semi_major_m"] == 0.0
    json.dumps(summary, allow_nan=False)


# ------------------------------------------------------------------------------ density region
def test_density_region_of_gaussian_is_close_to_the_ellipse() -> None:
    rng = np.random.default_rng(11)
    cov = _rotated_cov(4_000.0, 1_500.0, 70.0)
    pts = rng.multivariate_normal([0.0, 0.0], cov, size=2_000)
    fresh = rng.multivariate_normal([0.0, 0.0], cov, size=5_000)
    region = density_region(pts[:, 0], pts[:, 1], 0.9)
    e = ellipse_from_points(pts[:, 0], pts[:, 1], 0.9)
    # For a normal the 90 % highest-density region IS the 90 % ellipse (Hyndman 1996, from memory):
    # the kernel estimate smooths a little, so allow 15 %.
    assert region.method == "kde" and len(region.rings_xy) == 1
    assert region.area_m2 == pytest.approx(e.area_m2, rel=0.15)
    poly = Polygon(region.rings_xy[0])
    assert poly.exterior.is_ccw and poly.area == pytest.approx(region.area_m2, rel=1e-9)
    inside = shapely.contains_xy(poly, fresh[:, 0], fresh[:, 1])
    # 5 000 fresh draws (binomial sd 0.004); smoothing makes the region a little generous.
    assert 0.88 < inside.mean() < 0.93


def test_density_region_splits_two_wind_regimes() -> None:
    rng = np.random.default_rng(12)
    a = rng.normal(size=(500, 2)) * 400.0
    b = rng.normal(size=(500, 2)) * 400.0 + [12_000.0, 4_000.0]
    pts = np.vstack([a, b])
    region = density_region(pts[:, 0], pts[:, 1], 0.9)
    e = ellipse_from_points(pts[:, 0], pts[:, 1], 0.9)
    assert len(region.rings_xy) == 2
    assert region.area_m2 < 0.5 * e.area_m2
    # Neither cluster centre is outside, and the empty middle is not inside.
    polys = [Polygon(r) for r in region.rings_xy]
    from shapely.geometry import Point

    assert any(p.contains(Point(0.0, 0.0)) for p in polys)
    assert any(p.contains(Point(12_000.0, 4_000.0)) for p in polys)
    assert not any(p.contains(Point(6_000.0, 2_000.0)) for p in polys)
    hull = density_region(pts[:, 0], pts[:, 1], 0.9, method="hull")
    assert hull.method == "hull" and hull.area_m2 > 0


# -------------------------------------------------------------------------------- probabilities
def _write_geojson(tmp_path, features) -> str:  # noqa: ANN001
    path = tmp_path / "areas.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features}))
    return str(path)


def _square(lon0: float, lat0: float, half: float) -> dict:
    ring = [
        [lon0 - half, lat0 - half],
        [lon0 + half, lat0 - half],
        [lon0 + half, lat0 + half],
        [lon0 - half, lat0 + half],
        [lon0 - half, lat0 - half],
    ]
    return {"type": "Polygon", "coordinates": [ring]}


def test_probability_in_polygons(tmp_path) -> None:  # noqa: ANN001
    rng = np.random.default_rng(3)
    lat = 47.5 + 0.05 * rng.standard_normal(300)
    lon = 9.1 + 0.05 * rng.standard_normal(300)
    lat[17], lon[17] = 48.5, 10.5  # an isolated member far from the others
    world = {
        "type": "Polygon",
        "coordinates": [[[-180, -90], [180, -90], [180, 90], [-180, 90], [-180, -90]]],
    }
    east = {
        "type": "Polygon",
        "coordinates": [[[9.1, 40], [20, 40], [20, 55], [9.1, 55], [9.1, 40]]],
    }
    path = _write_geojson(
        tmp_path,
        [
            {"type": "Feature", "properties": {"name": "Everything"}, "geometry": world},
            {
                "type": "Feature",
                "properties": {"name": "Old quarry"},
                "geometry": _square(10.5, 48.5, 0.01),
            },
            {"type": "Feature", "properties": {"name": "East of 9.1"}, "geometry": east},
        ],
    )
    p = probability_in_polygons(lat, lon, path)
    assert list(p) == ["Everything", "Old quarry", "East of 9.1"]
    assert p["Everything"] == 1.0
    assert p["Old quarry"] == pytest.approx(1 / 300)
    # Independent count with numpy of the members east of 9.1 (all are inside 40..55 N).
    assert p["East of 9.1"] == pytest.approx(np.count_nonzero(lon >= 9.1) / 300)


@pytest.mark.parametrize(
    ("features", "match"),
    [
        (
            [{"type": "Feature", "properties": {}, "geometry": _square(0, 0, 1)}],
            r"areas.geojson: features\[0\].properties.name: is missing or empty; fix: give every",
        ),
        (
            [
                {"type": "Feature", "properties": {"name": "A"}, "geometry": _square(0, 0, 1)},
                {"type": "Feature", "properties": {"name": "A"}, "geometry": _square(0, 0, 1)},
            ],
            r"features\[1\].properties.name: duplicate name 'A'",
        ),
        (
            [
                {
                    "type": "Feature",
                    "properties": {"name": "A"},
                    "geometry": {"type": "Point", "coordinates": [0, 0]},
                }
            ],
            r"features\[0\].geometry.type: expected Polygon or MultiPolygon, got 'Point'",
        ),
    ],
)
def test_avoid_file_errors(tmp_path, features, match) -> None:  # noqa: ANN001
    path = _write_geojson(tmp_path, features)
    with pytest.raises(InputDataError, match=match):
        probability_in_polygons(np.zeros(3), np.zeros(3), path)


def test_avoid_file_not_a_feature_collection(tmp_path) -> None:  # noqa: ANN001
    path = tmp_path / "areas.geojson"
    path.write_text(json.dumps(_square(0, 0, 1)))
    with pytest.raises(
        InputDataError, match="areas.geojson: type: expected a GeoJSON FeatureCollection"
    ):
        probability_in_polygons(np.zeros(3), np.zeros(3), path)


# ----------------------------------------------------------------------------------- land mask
# Known points. Sea: Point Nemo, the oceanic pole of inaccessibility (48.8767 S, 123.3933 W; from
# memory), 0 N 0 E in the Gulf of Guinea, 30 N 40 W in the central North Atlantic, 35 N 18 E in the
# Ionian Sea (any atlas; common knowledge). Land: the summit of Mount Everest (27.9881 N, 86.9250 E;
# from memory), the central Sahara (23 N, 13 E), central Australia near Uluru (25.34 S, 131.04 E),
# central Greenland (72 N, 40 W). Lake Superior (47.7 N, 87.5 W) and Lake Baikal (53.5 N, 108 E)
# count as land in this mask (global-land-mask documentation: "most lakes are considered on land").
KNOWN = [
    (-48.8767, -123.3933, True),
    (0.0, 0.0, True),
    (30.0, -40.0, True),
    (35.0, 18.0, True),
    (27.9881, 86.9250, False),
    (23.0, 13.0, False),
    (-25.3444, 131.0369, False),
    (72.0, -40.0, False),
    (47.7, -87.5, False),
    (53.5, 108.0, False),
]


def test_land_mask_known_points() -> None:
    lat = np.array([k[0] for k in KNOWN])
    lon = np.array([k[1] for k in KNOWN])
    expected = np.array([k[2] for k in KNOWN])
    np.testing.assert_array_equal(is_water(lat, lon), expected)
    assert water_fraction(lat, lon + 360.0) == pytest.approx(expected.mean())  # longitudes wrapped


def test_compute_zones_water_and_avoid(tmp_path) -> None:  # noqa: ANN001
    # Invented flight ending over the open North Atlantic (30 N, 40 W): every member lands on water.
    result = make_result(n=200, lat0=30.3, lon0=-40.5, land_lat=30.0, land_lon=-40.0)
    path = _write_geojson(
        tmp_path,
        [
            {
                "type": "Feature",
                "properties": {"name": "Whole ocean box"},
                "geometry": _square(-40, 30, 2),
            },
        ],
    )
    z = compute_zones(result, avoid_path=path, water=True)
    s = z.to_summary()
    assert s["probabilities"] == {"water": 1.0, "avoid": {"Whole ocean box": 1.0}}
    assert z.n_used == 199  # member 0 (the nominal run) is not a draw


def test_summary_has_the_design_keys() -> None:
    z = compute_zones(make_result(n=300))
    s = z.to_summary()
    assert set(s) == {"ensemble", "probabilities"}
    assert set(s["ensemble"]) == {
        "members",
        "seed",
        "landing_mean",
        "ellipses",
        "region_90_area_km2",
        "landing_time_p05",
        "landing_time_p95",
        "burst_ellipses",
    }
    assert [e["probability"] for e in s["ensemble"]["ellipses"]] == [0.5, 0.9, 0.95]
    assert set(s["ensemble"]["ellipses"][0]) == {
        "probability",
        "semi_major_m",
        "semi_minor_m",
        "major_axis_azimuth_deg",
    }
    assert s["probabilities"] == {"water": None, "avoid": {}}
    assert s["ensemble"]["landing_time_p05"] < s["ensemble"]["landing_time_p95"]
    json.dumps(s, allow_nan=False)


def test_zones_across_the_antimeridian_match_zones_elsewhere() -> None:
    # The same local spread put at 179.99 E and at 9.1 E: ellipses agree (the projection is local).
    here = compute_zones(
        make_result(n=300, seed=4, lat0=47.2, lon0=179.5, land_lat=47.55, land_lon=179.99)
    )
    there = compute_zones(make_result(n=300, seed=4))
    for a, b in zip(here.ellipses, there.ellipses, strict=True):
        assert a.semi_major_m == pytest.approx(b.semi_major_m, rel=1e-3)
        assert a.major_axis_azimuth_deg == pytest.approx(b.major_axis_azimuth_deg, abs=0.1)
    assert abs(here.center_lon) > 179.9
    proj = LocalProjection(here.center_lat, here.center_lon)
    x, y = proj.to_local(here.ellipse_rings[1].lat, here.ellipse_rings[1].lon)
    assert float(np.max(np.hypot(x, y))) == pytest.approx(here.ellipses[1].semi_major_m, rel=1e-3)
