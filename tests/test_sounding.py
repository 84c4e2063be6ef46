"""Sounding tables: reading, heights from pressure, interpolation, several soundings, coverage."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from balloonpath.atmosphere import SoundingAtmosphere
from balloonpath.errors import CoverageError, CoverageWarning, InputDataError
from balloonpath.timeutil import parse_iso
from balloonpath.winds.sounding import (
    Sounding,
    SoundingField,
    atmosphere_from_soundings,
    read_sounding,
    sounding_field_from_paths,
)
from balloonpath.winds.synthetic import SyntheticAtmosphereField, write_sounding_csv

HEADER = "# site_latitude = 38.6\n# site_longitude = -98.9\n# time = 2027-05-14T12:00:00Z\n"


def _write(tmp_path, text, name="s.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


def _sounding(alt, u, v, lat=None, lon=None, time_s=None):
    alt = np.asarray(alt, dtype=float)
    nan = np.full(alt.shape, np.nan)
    return Sounding(
        alt, np.asarray(u, float), np.asarray(v, float), nan, nan, lat, lon, time_s, None
    )


def test_direction_from_convention(tmp_path):
    # WMO-No. 8 (reported direction is where the wind blows FROM): from 270 deg at 10 m/s -> u =
    # +10, v = 0.
    p = _write(
        tmp_path, HEADER + "altitude_m,wind_direction_deg,wind_speed_m_s\n0,270,10\n1000,180,10\n"
    )
    s = read_sounding(p)
    np.testing.assert_allclose([s.u[0], s.v[0]], [10.0, 0.0], atol=1e-12)
    # From 180 deg (south) the air moves north: v = +10.
    np.testing.assert_allclose([s.u[1], s.v[1]], [0.0, 10.0], atol=1e-12)
    assert s.lat == 38.6 and s.lon == -98.9
    assert s.time_s == parse_iso("2027-05-14T12:00:00Z")


def test_knots_are_converted(tmp_path):
    # International knot = 1852 m / 3600 s exactly (NIST SP 811, appendix B).
    p = _write(tmp_path, "altitude_m,wind_direction_deg,wind_speed_kt\n0,90,10\n1000,90,20\n")
    s = read_sounding(p)
    np.testing.assert_allclose(s.u, [-10 * 1852 / 3600, -20 * 1852 / 3600], rtol=1e-12)


def test_uv_columns_and_arguments_override_header(tmp_path):
    p = _write(tmp_path, HEADER + "altitude_m,u_m_s,v_m_s\n100,1,2\n900,3,4\n")
    s = read_sounding(p, site_lat=10.0, site_lon=200.0, time_s=5.0)
    assert (s.lat, s.lon, s.time_s) == (10.0, -160.0, 5.0)
    np.testing.assert_array_equal(s.u, [1.0, 3.0])


def test_interpolates_components_not_direction_and_speed():
    # From north at 10 m/s below, from south at 10 m/s above: halfway the components cancel (u = v
    # = 0);
    # interpolating speed would wrongly give 10 m/s.
    field = SoundingField([_sounding([1000, 2000], [0, 0], [-10, 10])])
    u, v = field.wind(0.0, 0.0, 1500.0, 0.0)
    assert abs(float(u)) < 1e-12 and abs(float(v)) < 1e-12


@settings(max_examples=40, deadline=None)
@given(
    levels=st.lists(st.floats(0, 30_000), min_size=2, max_size=30, unique=True),
    a=st.floats(-30, 30),
    b=st.floats(-3e-3, 3e-3),
    c=st.floats(-30, 30),
    d=st.floats(-3e-3, 3e-3),
)
def test_linear_profiles_are_reproduced_exactly(levels, a, b, c, d):
    z = np.sort(np.asarray(levels))
    if np.min(np.diff(z)) < 1.0:
        return
    field = SoundingField([_sounding(z, a + b * z, c + d * z)])
    q = np.linspace(z[0], z[-1], 57)
    u, v = field.wind(np.zeros_like(q), 0.0, q, 0.0)
    np.testing.assert_allclose(u, a + b * q, atol=1e-9)
    np.testing.assert_allclose(v, c + d * q, atol=1e-9)


def test_pressure_only_heights_follow_ussa1976(tmp_path):
    # REFERENCES.md §1 "Pressure levels in USSA76" (computed with fluids): 500 hPa 5579.3 m, 300 hPa
    # 9177.2 m, 100 hPa 16221.0 m, 10 hPa 31207.1 m.
    text = (
        "pressure_hpa,wind_direction_deg,wind_speed_m_s\n"
        "500,270,10\n300,270,20\n100,270,5\n10,90,3\n"
    )
    s = read_sounding(_write(tmp_path, text))
    np.testing.assert_allclose(s.alt_m, [5579.3, 9177.2, 16221.0, 31207.1], atol=0.2)


def test_hypsometric_heights_with_temperature(tmp_path):
    # A sounding with the USSA 1976 temperatures on dense pressure levels must put the levels at the
    # standard's heights (REFERENCES.md §1, computed with fluids); the hypsometric equation
    # (Wallace &
    # Hobbs 2006 eq. 3.29) with the layer-mean temperature is accurate to a few metres here.
    from balloonpath.atmosphere import altitude_from_pressure, temperature_k

    p = np.concatenate([np.arange(1000.0, 100.0, -10.0), np.arange(100.0, 9.0, -2.0)])
    t_c = temperature_k(altitude_from_pressure(p * 100)) - 273.15
    rows = "\n".join(f"{pp:g},{tt:.2f},270,10" for pp, tt in zip(p, t_c, strict=True))
    path = _write(
        tmp_path,
        "# site_elevation_m = 110.9\n"
        "pressure_hpa,temperature_c,wind_direction_deg,wind_speed_m_s\n" + rows + "\n",
    )
    s = read_sounding(path)
    heights = dict(zip(np.round(s.pressure_pa / 100).astype(int), s.alt_m, strict=True))
    for level, expected in ((500, 5579.3), (300, 9177.2), (100, 16221.0), (10, 31207.1)):
        assert heights[level] == pytest.approx(expected, abs=5.0)
    # Warmer air is thicker: +10 K everywhere raises the 100 hPa level by several hundred metres.
    rows_warm = "\n".join(f"{pp:g},{tt + 10:.2f},270,10" for pp, tt in zip(p, t_c, strict=True))
    warm = read_sounding(
        _write(
            tmp_path,
            "# site_elevation_m = 110.9\n"
            "pressure_hpa,temperature_c,wind_direction_deg,wind_speed_m_s\n" + rows_warm + "\n",
            "w.csv",
        )
    )
    assert warm.alt_m[-1] > s.alt_m[-1] + 500


@pytest.mark.parametrize(
    "body, match",
    [
        (
            "altitude_m,wind_direction_deg,wind_speed_m_s\n0,270,10\n1000,270,abc\n",
            r"s\.csv: line 3: column wind_speed_m_s: 'abc' is not a number",
        ),
        (
            "altitude_m,wind_direction_deg,wind_speed_m_s\n0,270,10\n",
            r"wind_direction_deg.*1 usable level.*at least two|at least two",
        ),
        (
            "altitude_m,wind_direction_deg,wind_speed_m_s\n0,370,10\n1000,270,10\n",
            r"line 2: column wind_direction_deg: 370 is outside 0\.\.360",
        ),
        ("altitude_m,temperature_c\n0,10\n1000,5\n", r"header: has no wind columns"),
        ("wind_direction_deg,wind_speed_m_s\n270,10\n", r"has neither altitude_m nor pressure_hpa"),
        ("altitude_m,wind_direction_deg,wind_speed_m_s\n0,270\n", r"line 2: has 2 cells"),
        ("# time = tomorrow\naltitude_m,u_m_s,v_m_s\n0,1,1\n9,1,1\n", r"line 1: time: 'tomorrow'"),
    ],
)
def test_bad_files_give_one_line_errors(tmp_path, body, match):
    with pytest.raises(InputDataError, match=match) as info:
        read_sounding(_write(tmp_path, body))
    assert "\n" not in str(info.value) and "fix:" in str(info.value)


def test_one_level_sounding_is_refused(tmp_path):
    body = "altitude_m,wind_direction_deg,wind_speed_m_s\n0,270,10\n"
    with pytest.raises(
        InputDataError, match=r"altitude_m: has 1 usable level\(s\); a sounding needs"
    ):
        read_sounding(_write(tmp_path, body))


def test_missing_wind_rows_are_skipped_with_warning(tmp_path):
    body = "altitude_m,wind_direction_deg,wind_speed_m_s\n0,270,10\n500,,\n1000,270,20\n"
    with pytest.warns(UserWarning, match=r"skipped 1 row\(s\).*line 3"):
        s = read_sounding(_write(tmp_path, body))
    np.testing.assert_array_equal(s.alt_m, [0.0, 1000.0])


def test_coverage_hold_below_and_policy_above():
    s = _sounding([1000, 5000], [1, 5], [0, 0])
    field = SoundingField([s])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        u, _ = field.wind(0.0, 0.0, 600.0, 0.0)  # 400 m below the first level: held silently
    assert float(u) == 1.0
    with pytest.raises(CoverageError, match="alt_m 400 is outside"):
        field.wind(0.0, 0.0, 400.0, 0.0)
    with pytest.raises(CoverageError, match="alt_m 6000"):
        field.wind(0.0, 0.0, 6000.0, 0.0)
    held = SoundingField([s], outside="hold")
    with pytest.warns(CoverageWarning, match="edge values held"):
        u, _ = held.wind(0.0, 0.0, 6000.0, 0.0)
    assert float(u) == 5.0


def test_several_soundings_time_and_space():
    t0 = 1_800_000_000.0
    a0 = _sounding([0, 10_000], [10, 10], [0, 0], 40.0, -100.0, t0)
    a1 = _sounding([0, 10_000], [20, 20], [0, 0], 40.0, -100.0, t0 + 12 * 3600)
    b = _sounding([0, 10_000], [0, 0], [6, 6], 40.0, -98.0, t0)
    field = SoundingField([a0, a1, b])
    # At site A, linear in time between its two soundings, held outside.
    u, v = field.wind(40.0, -100.0, 5000.0, np.array([t0, t0 + 6 * 3600, t0 + 48 * 3600]))
    np.testing.assert_allclose(u, [10, 15, 20], atol=1e-6)
    np.testing.assert_allclose(v, 0.0, atol=1e-6)
    # Halfway between the sites (equal distances) at t0: the mean of A and B.
    u, v = field.wind(40.0, -99.0, 5000.0, t0)
    np.testing.assert_allclose([float(u), float(v)], [5.0, 3.0], atol=1e-3)


def test_several_soundings_need_sites(tmp_path):
    with pytest.raises(InputDataError, match="site: has no latitude/longitude"):
        SoundingField(
            [_sounding([0, 1], [0, 0], [0, 0]), _sounding([0, 1], [0, 0], [0, 0], 1.0, 1.0)]
        )


def test_round_trip_through_synthetic_writer_and_folder(tmp_path):
    field = SyntheticAtmosphereField(38.6, -98.9, 1.8e9, seed=5)
    write_sounding_csv(field, 38.6, -98.9, 1.8e9, tmp_path / "a.csv")
    write_sounding_csv(field, 39.6, -97.9, 1.8e9, tmp_path / "b.csv", with_thermo=False)
    sf = sounding_field_from_paths(tmp_path)
    assert len(sf.soundings) == 2
    s = sf.soundings[0]
    u_true, v_true = field.wind(38.6, -98.9, s.alt_m, 1.8e9)
    # Rounding of the table: speed 0.1 m/s, direction 1 deg -> error <= 0.05 + speed * sin(0.5 deg).
    tol = 0.05 + np.hypot(u_true, v_true) * np.sin(np.radians(0.5)) + 1e-9
    assert np.all(np.hypot(s.u - u_true, s.v - v_true) <= tol)
    u, v = sf.wind(38.6, -98.9, s.alt_m, 1.8e9)
    np.testing.assert_allclose(u, s.u, atol=1e-6)
    atm = atmosphere_from_soundings(sf.soundings, 38.6, -98.9, 1.8e9)
    assert isinstance(atm, SoundingAtmosphere)
    assert atmosphere_from_soundings([sf.soundings[1]]) is None
