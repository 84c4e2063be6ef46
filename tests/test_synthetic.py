"""Synthetic truth fields: determinism, realistic structure, perturbed variants, deterministic
writers."""

from __future__ import annotations

import numpy as np

from balloonpath.winds.field import WindField
from balloonpath.winds.synthetic import (
    SyntheticAtmosphereField,
    write_grid_netcdf,
    write_sounding_csv,
)

T0 = 1_800_000_000.0


def test_deterministic_and_seeded():
    a = SyntheticAtmosphereField(38.6, -98.9, T0, seed=4)
    b = SyntheticAtmosphereField(38.6, -98.9, T0, seed=4)
    c = SyntheticAtmosphereField(38.6, -98.9, T0, seed=5)
    rng = np.random.default_rng(0)
    q = (
        rng.uniform(35, 42, 200),
        rng.uniform(-103, -95, 200),
        rng.uniform(0, 30_000, 200),
        T0 + rng.uniform(0, 86_400, 200),
    )
    assert isinstance(a, WindField)
    np.testing.assert_array_equal(a.wind(*q)[0], b.wind(*q)[0])
    assert np.max(np.abs(a.wind(*q)[0] - c.wind(*q)[0])) > 0.5


def test_realistic_structure():
    # Common practice (textbook climatology): mid-latitude jet cores of roughly 30-60 m/s near
    # 10-12 km, weak winds near the ground and in the lower stratosphere.
    f = SyntheticAtmosphereField(45.0, 10.0, T0, seed=0, eddy_rms_m_s=0.0)
    z = np.arange(0.0, 30_001.0, 100.0)
    u, v = f.wind(45.0, 10.0, z, T0)
    speed = np.hypot(u, v)
    z_peak = z[np.argmax(speed)]
    assert 9_000 <= z_peak <= 13_000 and 30.0 <= speed.max() <= 60.0
    assert speed[0] < 8.0 and speed[z == 25_000][0] < 15.0
    # Westerly jet: positive u at the core; wind backs toward the ground (NH Ekman turning).
    assert u[np.argmax(speed)] > 0
    d_ground = np.degrees(np.arctan2(u[1], v[1]))
    d_top = np.degrees(np.arctan2(u[12], v[12]))
    assert ((d_top - d_ground + 180) % 360 - 180) > 5.0
    # Horizontal gradients over ~500 km and slow change over hours, but smooth over 10 km / 10 min.
    u_far, _ = f.wind(45.0 + 5.0, 10.0, 11_000.0, T0)
    u_near, _ = f.wind(45.0 + 0.09, 10.0, 11_000.0, T0)
    u_here, _ = f.wind(45.0, 10.0, 11_000.0, T0)
    assert abs(float(u_far - u_here)) > 3.0 and abs(float(u_near - u_here)) < 1.0
    u_later, _ = f.wind(45.0, 10.0, 11_000.0, T0 + 12 * 3600.0)
    assert abs(float(u_later - u_here)) > 0.5


def test_perturbed_variant_has_the_requested_smooth_error():
    truth = SyntheticAtmosphereField(38.6, -98.9, T0, seed=1)
    fc = truth.perturbed(seed=7, amplitude_m_s=2.0)
    rng = np.random.default_rng(3)
    n = 4000
    q = (
        rng.uniform(30, 47, n),
        rng.uniform(-110, -88, n),
        rng.uniform(2_000, 15_000, n),
        T0 + rng.uniform(0, 3 * 86_400, n),
    )
    du = fc.wind(*q)[0] - truth.wind(*q)[0]
    assert 1.2 < np.sqrt(np.mean(du**2)) < 2.8
    # Smooth: 5 km away horizontally the error has barely changed.
    q2 = (q[0] + 0.045, *q[1:])
    du2 = fc.wind(*q2)[0] - truth.wind(*q2)[0]
    assert np.corrcoef(du, du2)[0, 1] > 0.98
    np.testing.assert_array_equal(truth.perturbed(7, 2.0).wind(*q)[0], fc.wind(*q)[0])


def test_writers_are_byte_identical(tmp_path):
    f = SyntheticAtmosphereField(38.6, -98.9, T0, seed=2)
    for name in ("a", "b"):
        write_sounding_csv(f, 38.6, -98.9, T0, tmp_path / f"{name}.csv")
        write_grid_netcdf(
            f,
            tmp_path / f"{name}.nc",
            np.arange(37.0, 40.1, 1.0),
            np.arange(-100.0, -96.9, 1.0),
            times_s=[T0],
        )
    assert (tmp_path / "a.csv").read_bytes() == (tmp_path / "b.csv").read_bytes()
    assert (tmp_path / "a.nc").read_bytes() == (tmp_path / "b.nc").read_bytes()
    text = (tmp_path / "a.csv").read_text()
    assert "# site_latitude = 38.60000" in text and "# time = 2027-01-15T08:00:00Z" in text
