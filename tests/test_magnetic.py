"""Magnetic declination against the WMM2025 official test values."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import pytest

from balloonpath.errors import DataQualityWarning
from balloonpath.winds.magnetic import (
    decimal_year_from_posix,
    declination_deg,
    true_from_magnetic_heading,
)


def _posix_of_decimal_year(year: float) -> float:
    whole = int(year)
    start = datetime(whole, 1, 1, tzinfo=UTC).timestamp()
    end = datetime(whole + 1, 1, 1, tzinfo=UTC).timestamp()
    return start + (year - whole) * (end - start)


# WMM2025 report, Table 6 / WMM2025_TEST_VALUES.txt (REFERENCES.md section 8, read via a third-party
# transcription): decimal year, height above the ellipsoid (km), latitude, longitude, declination (deg, 2 dp).
WMM2025_TEST_VALUES = [
    (2025.0, 0, 80, 0, 1.28), (2025.0, 0, 0, 120, -0.16), (2025.0, 0, -80, 240, 68.78),
    (2025.0, 100, 80, 0, 0.85), (2025.0, 100, 0, 120, -0.15), (2025.0, 100, -80, 240, 68.21),
    (2027.5, 0, 80, 0, 2.59), (2027.5, 0, 0, 120, -0.24), (2027.5, 0, -80, 240, 68.49),
    (2027.5, 100, 80, 0, 2.16), (2027.5, 100, 0, 120, -0.23), (2027.5, 100, -80, 240, 67.93),
]


def test_declination_matches_wmm2025_test_values() -> None:
    table = np.array(WMM2025_TEST_VALUES, dtype=float)
    times = np.array([_posix_of_decimal_year(y) for y in table[:, 0]])
    d = declination_deg(table[:, 2], table[:, 3], table[:, 1] * 1000.0, times)
    # Published to 2 decimals: tolerance half a unit of the last digit plus float slack.
    np.testing.assert_allclose(d, table[:, 4], atol=0.0051)


def test_declination_broadcasts_and_rounding_option_is_close() -> None:
    t = _posix_of_decimal_year(2027.4)
    lat = np.linspace(45.0, 46.0, 7)[:, None]
    lon = np.linspace(6.0, 8.0, 5)[None, :]
    exact = declination_deg(lat, lon, 10_000.0, t)
    rounded = declination_deg(lat, lon, 10_000.0, t, resolution_deg=0.02)
    assert exact.shape == (7, 5)
    # Mid-latitude gradient is below about 0.01 deg/km, so 0.02 deg rounding changes D by < 0.03 deg.
    assert np.max(np.abs(exact - rounded)) < 0.03


def test_decimal_year_and_outside_lifespan_warning() -> None:
    # 2027.5 is 2 July 2027 12:00 UTC (2027 has 365 days): the WMM's time argument.
    t = datetime(2027, 7, 2, 12, tzinfo=UTC).timestamp()
    assert decimal_year_from_posix(t) == pytest.approx(2027.5, abs=1e-9)
    with pytest.warns(DataQualityWarning, match="outside the WMM2025 validity"):
        declination_deg(45.0, 7.0, 0.0, datetime(2031, 6, 1, tzinfo=UTC).timestamp())


def test_true_heading_adds_east_declination() -> None:
    # Definition of declination (WMM2025 report): true = magnetic + D, D positive east.
    assert true_from_magnetic_heading(355.0, 10.0) == pytest.approx(5.0)
    assert true_from_magnetic_heading(5.0, -10.0) == pytest.approx(355.0)
