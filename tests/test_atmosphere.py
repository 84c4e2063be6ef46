"""US Standard Atmosphere 1976 and the sounding atmosphere (balloonpath.atmosphere).

Sources
-------
- [NOAA1976] U.S. Standard Atmosphere 1976, NOAA-S/T 76-1562: layer-base table (Table 4) and the
  property table, as transcribed in /work/shared/REFERENCES.md §1b (read) and §1c (computed from the
  defining constants; equal to the printed 5-digit table where compared).
- fluids 1.3.1, ``fluids.atmosphere.ATMOSPHERE_1976``: an independent USSA 1976 implementation with
  the same constants (agrees to ~1e-12 relative below 86 km).
- ambiance 1.3.1, ``ambiance.Atmosphere``: ICAO Standard Atmosphere 1993 (Doc 7488/3), identical in
  definition to USSA 1976 below 32 km and numerically within ~1e-5 relative up to 80 km (ambiance
  rounds some internal constants).
"""

from __future__ import annotations

import numpy as np
import pytest

from balloonpath import atmosphere as atm
from balloonpath.errors import PhysicsError

# ----------------------------------------------------------------------------------------------
# Published table values
# ----------------------------------------------------------------------------------------------

# [NOAA1976] Table 4 layer bases (REFERENCES.md §1b, read): geopotential base H_b (m'), T_b (K),
# P_b (Pa) as printed (6 significant figures), geometric base altitude Z_b (km, 3 decimals).
LAYER_BASES = [
    # H_b,    T_b,    P_b,       Z_b km
    (0.0, 288.15, 101_325.0, 0.000),
    (11_000.0, 216.65, 22_632.1, 11.019),
    (20_000.0, 216.65, 5_474.89, 20.063),
    (32_000.0, 228.65, 868.019, 32.162),
    (47_000.0, 270.65, 110.906, 47.350),
    (51_000.0, 270.65, 66.9389, 51.413),
    (71_000.0, 214.65, 3.95642, 71.802),
]


def _half_unit_of_last_digit(x: float, significant: int = 6) -> float:
    """Half a unit in the last printed digit of a value printed to ``significant`` figures."""
    return 0.5 * 10.0 ** (np.floor(np.log10(abs(x))) - significant + 1)


@pytest.mark.parametrize(("h_b", "t_b", "p_b", "z_b_km"), LAYER_BASES)
def test_layer_bases_match_ussa1976_table4(h_b, t_b, p_b, z_b_km):
    # Source: [NOAA1976] Table 4 via REFERENCES.md §1b (read). Tolerances: the printed precision.
    z_b = atm.geometric_from_geopotential(h_b)
    # 0.0006 km rather than half a digit: the reproduced table prints 51.413 km for
    # H = 51 000 m', while r0 H / (r0 - H) = 51.41248 km (it rounds a 51.4125 intermediate up).
    assert float(z_b) / 1000.0 == pytest.approx(z_b_km, abs=0.0006)
    state = atm.usa1976(z_b)
    assert float(state.temperature_k) == pytest.approx(t_b, abs=0.005)
    assert float(state.pressure_pa) == pytest.approx(p_b, abs=_half_unit_of_last_digit(p_b))


# REFERENCES.md §1c (computed from the USSA 1976 constants; checked there against fluids to 9e-16
# and consistent with the printed USSA 1976 Table I, e.g. 5.5293E+3 Pa, 8.8910E-2 kg/m3 at 20 km).
# Z km, H m', T K, P Pa, rho kg m-3, mu Pa s, g m s-2
TABLE_1C = [
    (0, 0.00, 288.150, 101_325.0, 1.22500, 1.7894e-5, 9.80665),
    (5, 4_996.07, 255.676, 54_048.3, 0.736428, 1.6282e-5, 9.79124),
    (11, 10_981.00, 216.774, 22_700.0, 0.364802, 1.4223e-5, 9.77280),
    (20, 19_937.27, 216.650, 5_529.31, 0.0889099, 1.4216e-5, 9.74523),
    (25, 24_902.06, 221.552, 2_549.22, 0.0400839, 1.4484e-5, 9.72997),
    (32, 31_839.72, 228.490, 889.064, 0.0135552, 1.4859e-5, 9.70866),
    (40, 39_749.87, 250.350, 287.144, 0.00399568, 1.6009e-5, 9.68439),
    # 47 km lies in the +2.8 K/km layer (H = 46 655 m' < 47 000 m'): a code that used geometric
    # altitude in place of geopotential would return the 270.65 K isothermal layer here.
    (47, 46_655.05, 269.684, 115.851, 0.00149652, 1.6989e-5, 9.66323),
]


@pytest.mark.parametrize(("z_km", "h", "t", "p", "rho", "mu", "g"), TABLE_1C)
def test_properties_match_ussa1976_table(z_km, h, t, p, rho, mu, g):
    # Source: REFERENCES.md §1c ([NOAA1976] properties). Tolerances: half a unit of the last
    # printed digit of each column.
    z = z_km * 1000.0
    state = atm.usa1976(z)
    assert float(atm.geopotential_from_geometric(z)) == pytest.approx(h, abs=0.005)
    assert float(state.temperature_k) == pytest.approx(t, abs=0.0005)
    assert float(state.pressure_pa) == pytest.approx(p, abs=_half_unit_of_last_digit(p))
    assert float(state.density_kg_m3) == pytest.approx(rho, abs=_half_unit_of_last_digit(rho))
    assert float(atm.dynamic_viscosity_pa_s(state.temperature_k)) == pytest.approx(
        mu, abs=_half_unit_of_last_digit(mu, 5))
    assert float(atm.gravity_m_s2(z)) == pytest.approx(g, abs=0.000005)


def test_47km_is_not_isothermal():
    # Geometric/geopotential trap (REFERENCES.md §1c note): T(47 km) = 269.684 K, not 270.65 K.
    assert float(atm.temperature_k(47_000.0)) < 270.0
    assert float(atm.temperature_k(atm.geometric_from_geopotential(47_000.0))) == pytest.approx(
        270.65, abs=1e-9)


def test_sea_level_speed_of_sound():
    # [NOAA1976] Table I: sea-level speed of sound 340.29 m/s (from memory; consistent with
    # c = sqrt(1.4 R T0) and fluids' v_sonic below).
    assert float(atm.speed_of_sound_m_s(0.0)) == pytest.approx(340.294, abs=0.001)


# REFERENCES.md §1 "Pressure levels in USSA76" (computed, brentq on fluids), printed to 0.1 m.
PRESSURE_LEVELS = [(50_000.0, 5_579.3), (30_000.0, 9_177.2), (10_000.0, 16_221.0),
                   (5_000.0, 20_643.0), (1_000.0, 31_207.1)]


def test_altitude_from_pressure_reference_levels():
    p = np.array([pl for pl, _ in PRESSURE_LEVELS])
    z = atm.altitude_from_pressure(p)
    np.testing.assert_allclose(z, [zl for _, zl in PRESSURE_LEVELS], atol=0.06)


def test_altitude_from_pressure_inverts_pressure_everywhere():
    z = np.linspace(atm.MIN_ALTITUDE_M, atm.MAX_ALTITUDE_M, 911)
    np.testing.assert_allclose(atm.altitude_from_pressure(atm.pressure_pa(z)), z, atol=1e-5)
    # layer bases themselves (the searchsorted edge) invert exactly
    zb = atm.geometric_from_geopotential(np.array([h for h, *_ in LAYER_BASES]))
    np.testing.assert_allclose(atm.altitude_from_pressure(atm.pressure_pa(zb)), zb, atol=1e-5)


def test_altitude_from_pressure_rejects_hpa_and_nonsense():
    with pytest.raises(PhysicsError, match=r"pressure outside .* Pa; fix: check that pressures are "
                                           r"in Pa \(hPa x 100\)"):
        atm.altitude_from_pressure(np.array([0.05]))  # 0.05 Pa is above 86 km
    with pytest.raises(PhysicsError, match="pressure outside"):
        atm.altitude_from_pressure(200_000.0)
    with pytest.raises(PhysicsError, match="pressure outside"):
        atm.altitude_from_pressure(np.nan)


# ----------------------------------------------------------------------------------------------
# Reference libraries at many altitudes
# ----------------------------------------------------------------------------------------------


def test_agrees_with_fluids_atmosphere_1976():
    # Source: fluids 1.3.1 fluids.atmosphere.ATMOSPHERE_1976 (independent USSA 1976 code).
    # Stop just below 86 km: at Z = 86 km fluids switches to its next layer, whose base
    # temperature 186.946 K is the table's rounded value (ours: 186.94591 K by the -2 K/km lapse).
    fluids_atm = pytest.importorskip("fluids.atmosphere")
    z = np.linspace(-5_000.0, 85_900.0, 120)
    ref = [fluids_atm.ATMOSPHERE_1976(float(zi)) for zi in z]
    st = atm.usa1976(z)
    rtol = 1e-9
    np.testing.assert_allclose(st.temperature_k, [r.T for r in ref], rtol=rtol)
    np.testing.assert_allclose(st.pressure_pa, [r.P for r in ref], rtol=rtol)
    np.testing.assert_allclose(st.density_kg_m3, [r.rho for r in ref], rtol=rtol)
    np.testing.assert_allclose(atm.speed_of_sound_m_s(z), [r.v_sonic for r in ref], rtol=rtol)
    np.testing.assert_allclose(atm.dynamic_viscosity_pa_s(st.temperature_k), [r.mu for r in ref],
                               rtol=rtol)
    np.testing.assert_allclose(atm.gravity_m_s2(z), [r.g for r in ref], rtol=rtol)
    np.testing.assert_allclose(atm.geopotential_from_geometric(z), [r.H for r in ref], rtol=rtol,
                               atol=1e-9)


def test_agrees_with_ambiance_icao():
    # Source: ambiance 1.3.1 (ICAO 1993 standard atmosphere; the same model as USSA 1976 below
    # 80 km; ambiance's own rounding leaves ~1e-5 relative in pressure and density).
    ambiance = pytest.importorskip("ambiance")
    z = np.linspace(-5_000.0, 80_000.0, 171)
    ref = ambiance.Atmosphere(z)
    st = atm.usa1976(z)
    np.testing.assert_allclose(st.temperature_k, ref.temperature, rtol=1e-9)
    np.testing.assert_allclose(st.pressure_pa, ref.pressure, rtol=2e-5)
    np.testing.assert_allclose(st.density_kg_m3, ref.density, rtol=2e-5)
    np.testing.assert_allclose(atm.speed_of_sound_m_s(z), ref.speed_of_sound, rtol=1e-6)
    np.testing.assert_allclose(atm.dynamic_viscosity_pa_s(st.temperature_k),
                               ref.dynamic_viscosity, rtol=1e-9)
    np.testing.assert_allclose(atm.gravity_m_s2(z), ref.grav_accel, rtol=1e-9)
    np.testing.assert_allclose(atm.geopotential_from_geometric(z), ref.H, rtol=1e-9, atol=1e-6)


# ----------------------------------------------------------------------------------------------
# Invariants, shapes, range
# ----------------------------------------------------------------------------------------------


def test_geopotential_round_trip_and_definition():
    # H = r0 Z / (r0 + Z) with r0 = 6 356 766 m ([NOAA1976]; REFERENCES.md §1a)
    z = np.array([-5_000.0, 0.0, 11_019.0, 86_000.0])
    h = atm.geopotential_from_geometric(z)
    np.testing.assert_allclose(h, 6_356_766.0 * z / (6_356_766.0 + z), rtol=1e-15)
    np.testing.assert_allclose(atm.geometric_from_geopotential(h), z, atol=1e-8)


def test_ideal_gas_law_and_gas_constant():
    # rho = P M0 / (R* T) with R* = 8.31432 and M0 = 28.9644 g/mol ([NOAA1976]; REFERENCES §1a).
    z = np.linspace(0.0, 80_000.0, 9)
    st = atm.usa1976(z)
    np.testing.assert_allclose(st.density_kg_m3,
                               st.pressure_pa * 28.9644e-3 / (8.31432 * st.temperature_k),
                               rtol=1e-12)


def test_hydrostatic_balance():
    # dP/dz = -rho g: a finite-difference check that pressure, density and gravity belong together.
    z = np.linspace(1_000.0, 84_000.0, 50)
    dz = 0.5
    dpdz = (atm.pressure_pa(z + dz) - atm.pressure_pa(z - dz)) / (2 * dz)
    np.testing.assert_allclose(dpdz, -atm.density_kg_m3(z) * atm.gravity_m_s2(z), rtol=1e-6)


def test_any_shape_and_scalars():
    z = np.linspace(0.0, 30_000.0, 12).reshape(3, 4)
    st = atm.usa1976(z)
    assert st.temperature_k.shape == st.pressure_pa.shape == st.density_kg_m3.shape == (3, 4)
    assert atm.speed_of_sound_m_s(z).shape == (3, 4)
    assert np.ndim(atm.temperature_k(1_000.0)) == 0
    np.testing.assert_allclose(st.pressure_pa[1, 2], atm.pressure_pa(float(z[1, 2])), rtol=0)


@pytest.mark.parametrize("z", [-5_001.0, 86_001.0, np.nan, np.inf])
def test_outside_range_raises(z):
    with pytest.raises(PhysicsError, match=r"standard atmosphere: altitude .*; fix: "):
        atm.usa1976(np.array([0.0, z]))


def test_range_ends_are_accepted():
    st = atm.usa1976(np.array([-5_000.0, 86_000.0]))
    assert np.all(np.isfinite(st.pressure_pa))
    # -5 km extends the first layer: T = 288.15 + 6.5e-3 * 5003.94 m' ([NOAA1976] eq. 23 region)
    assert float(st.temperature_k[0]) == pytest.approx(288.15 + 6.5e-3 * 5_003.9359, abs=1e-4)


def test_standard_atmosphere_object():
    z = np.array([0.0, 12_345.0])
    st = atm.StandardAtmosphere().state(z)
    np.testing.assert_array_equal(st.pressure_pa, atm.pressure_pa(z))


# ----------------------------------------------------------------------------------------------
# Sounding atmosphere
# ----------------------------------------------------------------------------------------------


def _invented_sounding():
    # An invented warm day: USSA 1976 + 8 K, pressures from the standard profile scaled by 1.01.
    z = np.array([150.0, 1_000.0, 3_000.0, 6_000.0, 10_000.0, 16_000.0, 24_000.0])
    t = atm.temperature_k(z) + 8.0
    p = atm.pressure_pa(z) * 1.01
    return z, t, p


def test_sounding_density_from_ideal_gas_law():
    z, t, p = _invented_sounding()
    air = atm.SoundingAtmosphere(z, t, p)
    st = air.state(z)
    np.testing.assert_allclose(st.temperature_k, t, rtol=1e-14)
    np.testing.assert_allclose(st.pressure_pa, p, rtol=1e-12)
    # ideal-gas law with the USSA dry-air constant R = R*/M0 = 287.0531 J/(kg K) (REFERENCES §1a)
    np.testing.assert_allclose(st.density_kg_m3, p / (287.0531 * t), rtol=1e-6)


def test_sounding_interpolation_is_log_linear_in_pressure():
    air = atm.SoundingAtmosphere([0.0, 2_000.0], [280.0, 270.0], [100_000.0, 80_000.0])
    st = air.state(1_000.0)
    assert float(st.temperature_k) == pytest.approx(275.0)
    assert float(st.pressure_pa) == pytest.approx(np.sqrt(100_000.0 * 80_000.0), rel=1e-12)


def test_sounding_above_top_uses_ussa_matched_in_pressure():
    z, t, p = _invented_sounding()
    air = atm.SoundingAtmosphere(z, t, p)
    above = np.array([30_000.0, 40_000.0])
    st = air.state(above)
    np.testing.assert_allclose(st.temperature_k, atm.temperature_k(above))
    np.testing.assert_allclose(st.pressure_pa, 1.01 * atm.pressure_pa(above), rtol=1e-10)
    # continuous in pressure at the top
    top = air.state(np.array([z[-1] - 1e-6, z[-1] + 1e-6])).pressure_pa
    assert top[1] == pytest.approx(top[0], rel=1e-8)
    # scalar above the top
    assert float(air.state(35_000.0).temperature_k) == pytest.approx(float(atm.temperature_k(35e3)))


def test_sounding_cleans_unsorted_duplicate_and_missing_levels():
    air = atm.SoundingAtmosphere([3_000.0, 0.0, np.nan, 0.0, 1_000.0],
                                 [270.0, 288.0, 250.0, 287.0, 281.0],
                                 [70_000.0, 101_000.0, 50_000.0, 100_900.0, 90_000.0])
    assert list(air.alt_m) == [0.0, 1_000.0, 3_000.0]


def test_sounding_needs_two_levels():
    with pytest.raises(PhysicsError, match=r"fewer than two levels .*; fix: give temperature_c and "
                                           r"pressure_hpa on at least two levels"):
        atm.SoundingAtmosphere([0.0, 1_000.0], [288.0, np.nan], [101_325.0, 90_000.0])


def test_altitude_of_pressure_in_sounding():
    z, t, p = _invented_sounding()
    air = atm.SoundingAtmosphere(z, t, p)
    target = float(p[3])
    assert atm.altitude_of_pressure_in(air, target) == pytest.approx(z[3], abs=0.02)
    # in the standard atmosphere it agrees with the closed-form inverse
    std = atm.StandardAtmosphere()
    assert atm.altitude_of_pressure_in(std, 10_000.0) == pytest.approx(
        float(atm.altitude_from_pressure(10_000.0)), abs=0.02)
    with pytest.raises(PhysicsError, match=r"pressure 10\.0 Pa is not between"):
        atm.altitude_of_pressure_in(std, 10.0)


def test_sounding_below_lowest_level_is_hydrostatic():
    # Below the first level: isothermal hydrostatic extension p = p0 exp(g0 dz / (R T0)), the
    # hypsometric equation for a constant-temperature layer ([WH2006] §3.2; from memory).
    air = atm.SoundingAtmosphere([300.0, 2_000.0], [290.0, 280.0], [97_000.0, 79_000.0])
    st = air.state(np.array([200.0, 300.0]))
    # R = R*/M0 = 287.0531 J/(kg K) as printed (REFERENCES §1a, 7 digits): rel 1e-6
    expected = 97_000.0 * np.exp(9.80665 * 100.0 / (287.0531 * 290.0))
    assert st.pressure_pa[0] == pytest.approx(expected, rel=1e-6)
    assert st.temperature_k[0] == 290.0
    # continuity with the hydrostatic balance just above the first level: dp/dz = -rho g0
    dz = 0.01
    p_lo, p_hi = air.state(np.array([300.0 - dz, 300.0])).pressure_pa
    assert (p_hi - p_lo) / dz == pytest.approx(-float(st.density_kg_m3[1]) * 9.80665, rel=1e-4)
