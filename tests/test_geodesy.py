"""WGS84 geodesy (balloonpath.geodesy).

Sources
-------
- [Karney2013] C. F. F. Karney, "Algorithms for geodesics", J. Geodesy 87:43-55, through
  ``pyproj.Geod(ellps="WGS84")`` (pyproj 3.7.2 / PROJ 9.5.1) as the reference solver.
- Published GeographicLib examples (REFERENCES.md §12, read): Wellington -> Salamanca inverse,
  Perth direct, JFK -> LHR.
- REFERENCES.md §12 radii of curvature (standard formulas, memory; values computed) and WGS84
  defining constants (NGA TR8350.2).
- PROJ Mercator (``+proj=merc``) as the reference for rhumb lines: a loxodrome is a straight line
  on the Mercator projection.
"""

from __future__ import annotations

import numpy as np
import pytest
from pyproj import Geod, Transformer

from balloonpath import geodesy as geo

GEOD = Geod(ellps="WGS84")


# ----------------------------------------------------------------------------------------------
# Ellipsoid and radii of curvature
# ----------------------------------------------------------------------------------------------


def test_wgs84_constants_match_pyproj():
    # NGA TR8350.2 / pyproj: a = 6 378 137 m, 1/f = 298.257223563; e^2 = 0.00669437999014 (§12)
    assert geo.WGS84_A == GEOD.a
    assert geo.WGS84_F == pytest.approx(GEOD.f, rel=1e-15)
    assert geo.WGS84_E2 == pytest.approx(0.00669437999014, abs=5e-15)


@pytest.mark.parametrize(
    ("lat", "m", "n", "deg_lat", "deg_lon"),
    [  # REFERENCES.md §12 (computed from the standard formulas)
        (0.0, 6_335_439.327, 6_378_137.000, 110_574.276, 111_319.491),
        (45.0, 6_367_381.816, 6_388_838.290, 111_131.777, 78_846.835),
        (52.0, 6_375_149.741, 6_391_435.268, 111_267.353, 68_678.016),
        (90.0, 6_399_593.626, 6_399_593.626, 111_693.980, 0.0),
    ],
)
def test_radii_of_curvature_table(lat, m, n, deg_lat, deg_lon):
    mm, nn = geo.radii_of_curvature(lat)
    assert float(mm) == pytest.approx(m, abs=0.001)
    assert float(nn) == pytest.approx(n, abs=0.001)
    assert float(mm) * np.pi / 180 == pytest.approx(deg_lat, abs=0.001)
    assert float(nn) * np.cos(np.radians(lat)) * np.pi / 180 == pytest.approx(deg_lon, abs=0.001)


def test_meridian_radius_is_the_derivative_of_pyproj_meridian_arc():
    # Independent of the formula: M = ds/dphi along a meridian, ds from pyproj's geodesic inverse.
    lat = np.array([-70.0, -20.0, 0.0, 33.0, 61.0, 85.0])
    d = 0.01
    _, _, s = GEOD.inv(np.zeros(6), lat - d, np.zeros(6), lat + d)
    m, _ = geo.radii_of_curvature(lat)
    np.testing.assert_allclose(m, s / np.radians(2 * d), rtol=1e-8)


# ----------------------------------------------------------------------------------------------
# inverse / forward against published values
# ----------------------------------------------------------------------------------------------


def test_inverse_wellington_salamanca():
    # GeographicLib documentation example ([Karney2013]): s12 = 19 959 679.267 m (read);
    # az1 = 161.06767 deg (computed with pyproj, REFERENCES §12).
    dist, az = geo.inverse(-41.32, 174.81, 40.96, -5.50)
    assert float(dist) == pytest.approx(19_959_679.267, abs=0.001)
    assert float(az) == pytest.approx(161.06767, abs=1e-5)


def test_forward_perth():
    # GeographicLib documentation example: from Perth (-32.06, 115.74) azimuth 225 deg, 20 000 km,
    # arrives at (32.11195529, -63.95925278) (read).
    lat, lon = geo.forward(-32.06, 115.74, 225.0, 20_000e3)
    assert float(lat) == pytest.approx(32.11195529, abs=1e-8)
    assert float(lon) == pytest.approx(-63.95925278, abs=1e-8)


def test_inverse_jfk_lhr():
    # GeographicLib C++ example prints 5551.76 km (read); 5 551 759.400319 m, az 51.198883 deg
    # (computed, REFERENCES §12).
    dist, az = geo.inverse(40.6, -73.8, 51.6, -0.5)
    assert float(dist) / 1000 == pytest.approx(5551.76, abs=0.005)
    assert float(dist) == pytest.approx(5_551_759.400319, abs=1e-5)
    assert float(az) == pytest.approx(51.198883, abs=1e-6)


@pytest.mark.parametrize(
    ("lat", "lon", "az", "dist", "lat2", "lon2"),
    [  # REFERENCES.md §12 check lines (computed with pyproj 3.7.2)
        (52.0, 5.0, 45.0, 100e3, 52.630891335, 6.044356834),
        (52.0, 5.0, 45.0, 1000e3, 57.814903024, 16.934207550),
        (40.0, -105.0, 90.0, 100e3, 39.994084352, -103.829022940),
        (40.0, -105.0, 90.0, 1000e3, 39.412090694, -93.355917074),
    ],
)
def test_forward_check_lines(lat, lon, az, dist, lat2, lon2):
    la, lo = geo.forward(lat, lon, az, dist)
    assert float(la) == pytest.approx(lat2, abs=1e-9)
    assert float(lo) == pytest.approx(lon2, abs=1e-9)


def test_inverse_check_lines_and_vectorised():
    # REFERENCES §12: meridian arcs 40->40.9 N = 99 938.9667 m, 40->49 N = 1 000 098.6019 m;
    # (52 N, 5 E) -> (58 N, 15 E) = 923 201.9225 m, az1 39.754215 deg.
    dist, az = geo.inverse([40.0, 40.0, 52.0], [0.0, 0.0, 5.0], [40.9, 49.0, 58.0],
                           [0.0, 0.0, 15.0])
    np.testing.assert_allclose(dist, [99_938.9667, 1_000_098.6019, 923_201.9225], atol=1e-4)
    assert az[2] == pytest.approx(39.754215, abs=1e-6)
    assert az.shape == (3,)


def test_inverse_azimuth_range():
    # westward and due south come back as ~270 and 180, not -90 / -180
    _, az = geo.inverse([10.0, 10.0], [10.0, 10.0], [10.0, 9.0], [9.9, 10.0])
    np.testing.assert_allclose(az, [270.0, 180.0], atol=0.01)
    assert np.all((az >= 0) & (az < 360))


# ----------------------------------------------------------------------------------------------
# step_east_north: the integrator's step
# ----------------------------------------------------------------------------------------------


def test_10km_steps_agree_with_karney_geodesics():
    # 400 seeded random 10 km steps with |lat| <= 80 deg. Reference: pyproj.Geod inverse
    # ([Karney2013]) between start and end. The distance must equal hypot(east, north) and the
    # direction must be atan2(east, north), both to < 0.5 m (issue [1]). The step follows a rhumb
    # line, whose azimuth is the mean of the geodesic chord's start and end azimuths to second
    # order, so that mean is the direction compared (the chord's start azimuth alone differs
    # from the rhumb by s tan(phi) / (2N), 8 m at 45 deg over 10 km).
    rng = np.random.default_rng(20270514)
    n = 400
    lat = rng.uniform(-80.0, 80.0, n)
    lon = rng.uniform(-180.0, 180.0, n)
    bearing = rng.uniform(0.0, 360.0, n)
    east, north = 1e4 * np.sin(np.radians(bearing)), 1e4 * np.cos(np.radians(bearing))
    lat2, lon2 = geo.step_east_north(lat, lon, east, north)
    az12, az21, dist = GEOD.inv(lon, lat, lon2, lat2)
    assert np.max(np.abs(dist - 1e4)) < 0.5
    mean_az = np.degrees(np.angle(np.exp(1j * np.radians(az12))
                                  + np.exp(1j * np.radians(az21 + 180.0))))
    lateral_m = 1e4 * np.radians(np.abs((mean_az - bearing + 180.0) % 360.0 - 180.0))
    assert np.max(lateral_m) < 0.5
    # measured: distance error 0.031 m and lateral 0.018 m at worst; the 0.5 m bound is issue [1]'s


def test_1000km_constant_bearing_path_is_the_loxodrome():
    # 100 steps of 10 km at a constant bearing of 60 deg from (40 N, 105 W): a constant east/north
    # displacement is a rhumb line (loxodrome). References, both outside this module:
    # - its length equals the meridian arc between the end latitudes / cos(bearing); the meridian
    #   arc comes from pyproj.Geod ([Karney2013]). Must hold to < 0.1 % (issue [1]);
    # - on PROJ's Mercator projection a loxodrome is a straight line at the bearing, so
    #   delta lon = tan(bearing) * delta y / a.
    lat0, lon0, bearing = 40.0, -105.0, 60.0
    lat, lon = np.array([lat0]), np.array([lon0])
    e, n = 1e4 * np.sin(np.radians(bearing)), 1e4 * np.cos(np.radians(bearing))
    for _ in range(100):
        lat, lon = geo.step_east_north(lat, lon, e, n)
    _, _, meridian_arc = GEOD.inv(lon0, lat0, lon0, float(lat[0]))
    rhumb_length = meridian_arc / np.cos(np.radians(bearing))
    assert abs(rhumb_length - 1e6) / 1e6 < 1e-3
    assert abs(rhumb_length - 1e6) < 1.0  # measured 4e-5 m
    merc = Transformer.from_crs("EPSG:4326", "+proj=merc +datum=WGS84 +units=m", always_xy=True)
    _, y0 = merc.transform(lon0, lat0)
    _, y1 = merc.transform(float(lon[0]), float(lat[0]))
    lon_rhumb = lon0 + np.degrees(np.tan(np.radians(bearing)) * (y1 - y0) / geo.WGS84_A)
    _, _, miss = GEOD.inv(float(lon[0]), float(lat[0]), lon_rhumb, float(lat[0]))
    assert miss < 1.0  # measured 0.06 m after 1000 km


def test_step_is_vectorised_over_members():
    lat = np.full(5, 47.0)
    lon = np.linspace(8.0, 9.0, 5)
    east = np.array([0.0, 100.0, -100.0, 0.0, 0.0])
    north = np.array([0.0, 0.0, 0.0, 100.0, -100.0])
    lat2, lon2 = geo.step_east_north(lat, lon, east, north)
    assert lat2.shape == lon2.shape == (5,)
    assert lat2[0] == lat[0] and lon2[0] == lon[0]
    assert lon2[1] > lon[1] and lon2[2] < lon[2] and lat2[3] > 47.0 and lat2[4] < 47.0
    # broadcasting a (members, 1) column against a (1, times) row
    la, lo = geo.step_east_north(np.full((3, 1), 10.0), 0.0, np.ones((1, 4)), 0.0)
    assert la.shape == lo.shape == (3, 4)


def test_step_at_altitude_subtends_a_smaller_angle():
    # 10 km north at 30 km height: the ground track is shorter by R / (R + h).
    lat2, _ = geo.step_east_north(45.0, 0.0, 0.0, 1e4, height_m=30_000.0)
    _, _, ground = GEOD.inv(0.0, 45.0, 0.0, float(lat2))
    m, _ = geo.radii_of_curvature(45.0)
    assert ground == pytest.approx(1e4 * float(m) / (float(m) + 30_000.0), abs=0.05)


# ----------------------------------------------------------------------------------------------
# Antimeridian
# ----------------------------------------------------------------------------------------------


def test_normalize_longitude():
    lon = geo.normalize_longitude([180.0, -180.0, 540.0, 359.5, -190.0, 0.0, 179.5])
    np.testing.assert_allclose(lon, [-180.0, -180.0, -180.0, -0.5, 170.0, 0.0, 179.5])
    wild = geo.normalize_longitude(np.random.default_rng(1).uniform(-1e4, 1e4, 10_000))
    assert np.all((wild >= -180.0) & (wild < 180.0))


def test_step_across_the_antimeridian():
    # east from 179.99 E and west from 179.99 W: longitudes stay in [-180, 180) and the distance
    # travelled is unchanged (pyproj.Geod inverse handles the wrap itself).
    lat2, lon2 = geo.step_east_north([10.0, -35.0], [179.99, -179.99], [5_000.0, -5_000.0], 0.0)
    assert np.all((lon2 >= -180.0) & (lon2 < 180.0))
    assert -180.0 < lon2[0] < -179.9 and 179.9 < lon2[1] < 180.0
    _, _, dist = GEOD.inv([179.99, -179.99], [10.0, -35.0], lon2, lat2)
    np.testing.assert_allclose(dist, 5_000.0, atol=0.01)


def test_forward_and_projection_across_the_antimeridian():
    lat, lon = geo.forward(-17.0, 179.9, 90.0, 50_000.0)
    assert -180.0 <= float(lon) < -179.0
    proj = geo.LocalProjection(-17.0, 179.9)
    x, y = proj.to_local(lat, lon)
    assert float(x) == pytest.approx(50_000.0, abs=1e-3) and abs(float(y)) < 1e-3
    lat_back, lon_back = proj.to_geographic(x, y)
    assert float(lat_back) == pytest.approx(float(lat), abs=1e-9)
    assert float(lon_back) == pytest.approx(float(lon), abs=1e-9)
    assert geo.LocalProjection(0.0, 190.0).lon0 == -170.0


# ----------------------------------------------------------------------------------------------
# Poles
# ----------------------------------------------------------------------------------------------


def test_step_north_across_the_north_pole():
    # 20 km "north" from 89.95 N, 20 E: over the pole and down the 160 W meridian. Reference:
    # pyproj.Geod direct problem with azimuth 0 from the start point.
    lat2, lon2 = geo.step_east_north(89.95, 20.0, 0.0, 20_000.0)
    ref_lon, ref_lat, _ = GEOD.fwd(20.0, 89.95, 0.0, 20_000.0)
    assert float(lat2) == pytest.approx(ref_lat, abs=1e-9)
    assert float(lon2) == pytest.approx(-160.0, abs=1e-9)
    assert float(lat2) < 90.0


def test_mixed_step_across_the_south_pole_matches_geodesic():
    # 3 km south and 400 m east from 1.1 km short of the South Pole: the end point is the geodesic
    # direct problem with azimuth atan2(east, north) (pyproj), not a spin of tens of degrees.
    lat0, lon0, east, north = -89.99, 10.0, 400.0, -3_000.0
    lat2, lon2 = geo.step_east_north(lat0, lon0, east, north)
    az = np.degrees(np.arctan2(east, north))
    ref_lon, ref_lat, _ = GEOD.fwd(lon0, lat0, az, np.hypot(east, north))
    _, _, miss = GEOD.inv(float(lon2), float(lat2), ref_lon, ref_lat)
    assert miss < 0.01
    assert -90.0 <= float(lat2) <= -89.9


def test_step_from_the_pole_itself_moves_the_point():
    # At a pole east/north are undefined; "north" is the meridian `lon` continued over the pole,
    # as in GeographicLib. A 1 km step must leave the pole by 1 km (pyproj inverse).
    lat2, lon2 = geo.step_east_north([90.0, 90.0, -90.0], [0.0, 0.0, 30.0], [1_000.0, 0.0, 0.0],
                                     [0.0, -1_000.0, 1_000.0])
    _, _, dist = GEOD.inv([0.0, 0.0, 30.0], [90.0, 90.0, -90.0], lon2, lat2)
    np.testing.assert_allclose(dist, 1_000.0, atol=1e-6)
    np.testing.assert_allclose(lon2, [90.0, 0.0, 30.0], atol=1e-9)


def test_steps_near_the_pole_are_finite_and_continuous():
    # 500 m steps in all directions either side of the 89.5 deg switch to geodesic steps: finite,
    # within [-90, 90], and the two methods agree to < 3 m (rhumb-geodesic separation).
    bearing = np.radians(np.arange(0.0, 360.0, 15.0))
    e, n = 500.0 * np.sin(bearing), 500.0 * np.cos(bearing)
    lat_a, lon_a = geo.step_east_north(89.5 - 1e-9, 40.0, e, n)
    lat_b, lon_b = geo.step_east_north(89.5, 40.0, e, n)
    for la, lo in ((lat_a, lon_a), (lat_b, lon_b)):
        assert np.all(np.isfinite(la)) and np.all(np.isfinite(lo))
        assert np.all(np.abs(la) <= 90.0)
    _, _, gap = GEOD.inv(lon_a, lat_a, lon_b, lat_b)
    assert np.max(gap) < 3.0
    # everywhere in the polar cap the step length is kept
    lat = np.array([89.6, 89.9, 89.999, 90.0])
    la, lo = geo.step_east_north(lat, 0.0, 300.0, 400.0)
    _, _, dist = GEOD.inv(np.zeros(4), lat, lo, la)
    np.testing.assert_allclose(dist, 500.0, atol=1e-6)


# ----------------------------------------------------------------------------------------------
# Local azimuthal-equidistant projection
# ----------------------------------------------------------------------------------------------


def test_local_projection_is_equidistant_from_the_centre():
    # aeqd property: distance and azimuth from the centre are the geodesic ones ([Karney2013]).
    proj = geo.LocalProjection(52.0, 5.0)
    az = np.array([0.0, 45.0, 135.0, 270.0])
    d = np.array([1e3, 50e3, 200e3, 500e3])
    lat, lon = geo.forward(52.0, 5.0, az, d)
    x, y = proj.to_local(lat, lon)
    np.testing.assert_allclose(np.hypot(x, y), d, rtol=1e-9)
    np.testing.assert_allclose(np.degrees(np.arctan2(x, y)) % 360.0, az, atol=1e-7)
    lat_back, lon_back = proj.to_geographic(x, y)
    np.testing.assert_allclose(lat_back, lat, atol=1e-9)
    np.testing.assert_allclose(lon_back, lon, atol=1e-9)


@pytest.mark.parametrize("d", [100e3, 500e3])
def test_local_projection_distortion_across_the_radius(d):
    # Along a circle around the centre the aeqd scale is (d/R)/sin(d/R) ~ 1 + (d/R)^2/6 (sphere
    # approximation; standard map-projection result): 0.004 % at 100 km, 0.1 % at 500 km. Measured
    # as planar / geodesic length of a 1 km arc perpendicular to the radius (pyproj inverse).
    proj = geo.LocalProjection(45.0, 10.0)
    dtheta = 1_000.0 / d
    az = np.degrees([np.pi / 2 - dtheta / 2, np.pi / 2 + dtheta / 2])
    lat, lon = geo.forward(45.0, 10.0, az, d)
    x, y = proj.to_local(lat, lon)
    _, _, geodesic = GEOD.inv(lon[0], lat[0], lon[1], lat[1])
    scale = np.hypot(x[1] - x[0], y[1] - y[0]) / geodesic
    r = np.sqrt(np.prod(geo.radii_of_curvature(45.0)))
    expected = (d / r) / np.sin(d / r)
    assert scale - 1 == pytest.approx(expected - 1, rel=0.02)
