"""Unit and time conversions (balloonpath.units, balloonpath.timeutil).

Sources: the exact definitions of NIST SP 811 appendix B (international foot 0.3048 m, knot
1852 m/h, avoirdupois pound 0.45359237 kg), cross-checked against ``scipy.constants`` (which
carries the same CODATA/NIST values); REFERENCES.md §4 and §9a for the rounded practice values;
POSIX times against the standard library's ``calendar.timegm``.
"""

from __future__ import annotations

import calendar
from datetime import UTC, datetime, timedelta, timezone

import numpy as np
import pytest
from scipy import constants

from balloonpath import timeutil, units


def test_constants_match_scipy():
    # scipy.constants: foot, knot, pound, inch, ounce, pound_force, zero_Celsius
    assert units.FOOT_M == pytest.approx(constants.foot, rel=1e-15)
    assert units.KNOT_M_S == pytest.approx(constants.knot, rel=1e-15)
    assert units.POUND_KG == pytest.approx(constants.pound, rel=1e-15)
    assert units.INCH_M == pytest.approx(constants.inch, rel=1e-15)
    assert units.OUNCE_KG == pytest.approx(constants.ounce, rel=1e-15)
    assert units.POUND_FORCE_N == pytest.approx(constants.pound_force, rel=1e-15)
    assert float(units.k_from_c(0.0)) == constants.zero_Celsius


def test_conversions_and_inverses():
    x = np.array([[0.0, 1.0], [1000.0, -250.5]])
    np.testing.assert_allclose(units.m_from_ft(x), x * 0.3048, rtol=1e-15)
    np.testing.assert_allclose(units.ft_from_m(units.m_from_ft(x)), x, rtol=1e-15)
    np.testing.assert_allclose(units.m_s_from_kt(x), x * 1852.0 / 3600.0, rtol=1e-15)
    np.testing.assert_allclose(units.kt_from_m_s(units.m_s_from_kt(x)), x, rtol=1e-15, atol=1e-15)
    np.testing.assert_allclose(units.pa_from_hpa(x), x * 100.0)
    assert units.m_from_ft(x).shape == (2, 2)


def test_practice_values():
    # NAVEDTRA 14270 (REFERENCES §4, read): 900-1000 ft/min is 4.6-5.1 m/s.
    np.testing.assert_allclose(units.m_s_from_ft_min([900.0, 1000.0]), [4.572, 5.08], rtol=1e-12)
    # 60 000 ft (14 CFR 101.35(b)) = 18 288 m exactly; 120 kt (PHAK wind triangle) = 61.73 m/s
    assert float(units.m_from_ft(60_000.0)) == pytest.approx(18_288.0, abs=1e-9)
    assert float(units.m_s_from_kt(120.0)) == pytest.approx(61.733, abs=5e-4)
    # 14 CFR 101.1(a)(4) thresholds (REFERENCES §9a, computed): 4 lb = 1.814 kg, 6 lb = 2.722 kg,
    # 12 lb = 5.443 kg, 50 lbf = 222.4 N, 3 oz/in^2 = 13.18 g/cm^2
    np.testing.assert_allclose(np.array([4, 6, 12]) * units.POUND_KG, [1.814, 2.722, 5.443],
                               atol=5e-4)
    assert 50 * units.POUND_FORCE_N == pytest.approx(222.4, abs=0.05)
    oz_per_in2_g_cm2 = units.OUNCE_KG * 1000 / (units.INCH_M * 100) ** 2
    assert 3 * oz_per_in2_g_cm2 == pytest.approx(13.18, abs=0.005)


def test_posix_from_datetime_against_timegm():
    moment = datetime(2027, 5, 14, 12, 30, 15, tzinfo=UTC)
    assert timeutil.posix_from_datetime(moment) == calendar.timegm((2027, 5, 14, 12, 30, 15))
    plus2 = datetime(2027, 5, 14, 14, 30, 15, tzinfo=timezone(timedelta(hours=2)))
    assert timeutil.posix_from_datetime(plus2) == calendar.timegm((2027, 5, 14, 12, 30, 15))
    with pytest.raises(ValueError, match="has no timezone"):
        timeutil.posix_from_datetime(datetime(2027, 5, 14, 12, 30))


def test_iso_round_trip():
    s = calendar.timegm((2031, 12, 31, 23, 59, 59))
    assert timeutil.iso_from_posix(s) == "2031-12-31T23:59:59Z"
    assert timeutil.iso_from_posix(s + 0.4) == "2031-12-31T23:59:59Z"
    assert timeutil.parse_iso("2031-12-31T23:59:59Z") == s
    assert timeutil.parse_iso(" 2032-01-01T01:59:59+02:00 ") == s
    assert timeutil.datetime_from_posix(s) == datetime(2031, 12, 31, 23, 59, 59, tzinfo=UTC)
    np.testing.assert_array_equal(
        timeutil.parse_iso_array(["2000-01-01T00:00:00Z", "2000-01-01T00:00:01.5z"]),
        [946_684_800.0, 946_684_801.5])  # calendar.timegm((2000, 1, 1, 0, 0, 0)) = 946 684 800


def test_parse_iso_needs_a_timezone():
    with pytest.raises(ValueError, match="has no timezone"):
        timeutil.parse_iso("2027-05-14T12:30:00")
    with pytest.raises(ValueError):
        timeutil.parse_iso("14/05/2027 12:30")
