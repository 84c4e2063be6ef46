"""US Standard Atmosphere 1976 and an atmosphere built from a sounding.

All functions take **geometric** altitude ``z_m`` (metres above mean sea level) and any array shape.

References
----------
[NOAA1976] U.S. Standard Atmosphere, 1976. NOAA-S/T 76-1562, NOAA/NASA/USAF, Washington DC, 1976.
    Defining constants (Table 2 of Part 1), layer bases and gradients below 86 km (Table 4), the
    geopotential relation H = r0 Z / (r0 + Z) (eq. 18), gravity g = g0 (r0 / (r0 + Z))^2 (eq. 17),
    hydrostatic pressure in a layer (eqs. 33a, 33b), density (eq. 42), speed of sound (eq. 50) and
    Sutherland's viscosity law (eq. 51).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import numpy as np
from scipy.optimize import brentq

from balloonpath.errors import PhysicsError

# Defining constants, [NOAA1976] Part 1, Table 2.
GAS_CONSTANT_USSA = 8.31432  # R*, J mol-1 K-1 (the standard's value, not CODATA's 8.314462618)
MOLAR_MASS_AIR = 28.9644e-3  # M0, kg mol-1
G0 = 9.80665  # m s-2
EARTH_RADIUS_GEOPOTENTIAL = 6_356_766.0  # r0, m
R_AIR = GAS_CONSTANT_USSA / MOLAR_MASS_AIR  # 287.0531 J kg-1 K-1
GAMMA_AIR = 1.4
SUTHERLAND_BETA = 1.458e-6  # kg m-1 s-1 K-1/2
SUTHERLAND_S = 110.4  # K
SEA_LEVEL_PRESSURE = 101_325.0
SEA_LEVEL_TEMPERATURE = 288.15
SEA_LEVEL_DENSITY = 1.2250

# Layer bases below 86 km, [NOAA1976] Table 4: geopotential base H_b (m'), lapse rate L_b (K/m').
_LAYER_BASE_H = np.array([0.0, 11_000.0, 20_000.0, 32_000.0, 47_000.0, 51_000.0, 71_000.0])
_LAYER_LAPSE = np.array([-6.5e-3, 0.0, 1.0e-3, 2.8e-3, 0.0, -2.8e-3, -2.0e-3])

MIN_ALTITUDE_M = -5_000.0
MAX_ALTITUDE_M = 86_000.0


def _layer_base_states() -> tuple[np.ndarray, np.ndarray]:
    """Base temperature and pressure of each layer by the hydrostatic recursion ([NOAA1976] eq. 33)."""
    temps = [SEA_LEVEL_TEMPERATURE]
    press = [SEA_LEVEL_PRESSURE]
    k = G0 / R_AIR
    for b in range(len(_LAYER_BASE_H) - 1):
        dh = _LAYER_BASE_H[b + 1] - _LAYER_BASE_H[b]
        t_b, p_b, lapse = temps[-1], press[-1], _LAYER_LAPSE[b]
        t_next = t_b + lapse * dh
        if lapse == 0.0:
            p_next = p_b * np.exp(-k * dh / t_b)
        else:
            p_next = p_b * (t_b / t_next) ** (k / lapse)
        temps.append(t_next)
        press.append(p_next)
    return np.array(temps), np.array(press)


_LAYER_BASE_T, _LAYER_BASE_P = _layer_base_states()


@dataclass(frozen=True)
class AtmosphereState:
    """Temperature (K), pressure (Pa) and density (kg m-3) at a set of altitudes."""

    temperature_k: np.ndarray
    pressure_pa: np.ndarray
    density_kg_m3: np.ndarray


def geopotential_from_geometric(z_m: np.ndarray | float) -> np.ndarray:
    """Geopotential altitude H (m') from geometric altitude Z (m): H = r0 Z / (r0 + Z), [NOAA1976] eq. 18."""
    z = np.asarray(z_m, dtype=float)
    return EARTH_RADIUS_GEOPOTENTIAL * z / (EARTH_RADIUS_GEOPOTENTIAL + z)


def geometric_from_geopotential(h_m: np.ndarray | float) -> np.ndarray:
    """Geometric altitude Z (m) from geopotential altitude H (m'): Z = r0 H / (r0 - H)."""
    h = np.asarray(h_m, dtype=float)
    return EARTH_RADIUS_GEOPOTENTIAL * h / (EARTH_RADIUS_GEOPOTENTIAL - h)


def _check_range(z: np.ndarray) -> None:
    if np.any(~np.isfinite(z)):
        raise PhysicsError("standard atmosphere: altitude is NaN or infinite; fix: check the inputs")
    if z.size and (z.min() < MIN_ALTITUDE_M or z.max() > MAX_ALTITUDE_M):
        raise PhysicsError(
            f"standard atmosphere: altitude {z.min():.0f}..{z.max():.0f} m is outside the "
            f"US Standard Atmosphere 1976 range {MIN_ALTITUDE_M:.0f}..{MAX_ALTITUDE_M:.0f} m; "
            "fix: keep the flight below 86 km"
        )


def usa1976(z_m: np.ndarray | float) -> AtmosphereState:
    """US Standard Atmosphere 1976 at geometric altitudes from -5 km to 86 km.

    Parameters
    ----------
    z_m : array_like
        Geometric altitude above mean sea level, m.

    Returns
    -------
    AtmosphereState
        Temperature (K), pressure (Pa) and density (kg m-3), arrays of the shape of ``z_m``.

    Notes
    -----
    In each layer b with base H_b, T_b, P_b and gradient L_b ([NOAA1976] Table 4):
    T = T_b + L_b (H - H_b); P = P_b (T_b / T)^(g0 M0 / (R* L_b)) if L_b != 0, otherwise
    P = P_b exp(-g0 M0 (H - H_b) / (R* T_b)) (eqs. 33a, 33b); rho = P M0 / (R* T) (eq. 42).
    Below 0 m the first layer is extended, as the standard does down to -5 km.

    Raises
    ------
    PhysicsError
        Outside -5 km .. 86 km or for non-finite altitudes.
    """
    z = np.asarray(z_m, dtype=float)
    _check_range(z)
    h = geopotential_from_geometric(z)
    b = np.clip(np.searchsorted(_LAYER_BASE_H, h, side="right") - 1, 0, len(_LAYER_BASE_H) - 1)
    lapse = _LAYER_LAPSE[b]
    t_b = _LAYER_BASE_T[b]
    p_b = _LAYER_BASE_P[b]
    dh = h - _LAYER_BASE_H[b]
    temperature = t_b + lapse * dh
    k = G0 / R_AIR
    isothermal = lapse == 0.0
    safe_lapse = np.where(isothermal, 1.0, lapse)
    pressure = np.where(
        isothermal,
        p_b * np.exp(-k * dh / t_b),
        p_b * (t_b / temperature) ** (k / safe_lapse),
    )
    density = pressure / (R_AIR * temperature)
    return AtmosphereState(temperature, pressure, density)


def temperature_k(z_m: np.ndarray | float) -> np.ndarray:
    """USSA 1976 temperature (K) at geometric altitude ``z_m``."""
    return usa1976(z_m).temperature_k


def pressure_pa(z_m: np.ndarray | float) -> np.ndarray:
    """USSA 1976 pressure (Pa) at geometric altitude ``z_m``."""
    return usa1976(z_m).pressure_pa


def density_kg_m3(z_m: np.ndarray | float) -> np.ndarray:
    """USSA 1976 density (kg m-3) at geometric altitude ``z_m``."""
    return usa1976(z_m).density_kg_m3


def speed_of_sound_m_s(z_m: np.ndarray | float) -> np.ndarray:
    """USSA 1976 speed of sound (m/s): c = sqrt(gamma R* T / M0), [NOAA1976] eq. 50, gamma = 1.4."""
    return np.sqrt(GAMMA_AIR * R_AIR * temperature_k(z_m))


def dynamic_viscosity_pa_s(temperature: np.ndarray | float) -> np.ndarray:
    """Dynamic viscosity of air (Pa s) by Sutherland's law, [NOAA1976] eq. 51.

    mu = beta T^(3/2) / (T + S) with beta = 1.458e-6 kg m-1 s-1 K-1/2 and S = 110.4 K.
    """
    t = np.asarray(temperature, dtype=float)
    return SUTHERLAND_BETA * t**1.5 / (t + SUTHERLAND_S)


def gravity_m_s2(z_m: np.ndarray | float) -> np.ndarray:
    """Acceleration of gravity (m s-2) at geometric altitude: g = g0 (r0 / (r0 + Z))^2, [NOAA1976] eq. 17."""
    z = np.asarray(z_m, dtype=float)
    return G0 * (EARTH_RADIUS_GEOPOTENTIAL / (EARTH_RADIUS_GEOPOTENTIAL + z)) ** 2


def altitude_from_pressure(p_pa: np.ndarray | float) -> np.ndarray:
    """Geometric altitude (m) at which the USSA 1976 pressure equals ``p_pa`` (inverse, closed form per layer).

    This is also the definition of *pressure altitude* used by aircraft altimeters (converted to geometric).

    Raises
    ------
    PhysicsError
        For pressures outside the range of -5 km .. 86 km or non-positive pressures.
    """
    p = np.asarray(p_pa, dtype=float)
    p_top = float(usa1976(MAX_ALTITUDE_M).pressure_pa)
    p_bottom = float(usa1976(MIN_ALTITUDE_M).pressure_pa)
    if np.any(~np.isfinite(p)) or (p.size and (p.min() < p_top or p.max() > p_bottom)):
        raise PhysicsError(
            f"standard atmosphere: pressure outside {p_top:.3f}..{p_bottom:.0f} Pa; "
            "fix: check that pressures are in Pa (hPa x 100)"
        )
    # Layer index: pressure decreases with height, so search the reversed base pressures.
    b = np.clip(
        len(_LAYER_BASE_P) - 1 - np.searchsorted(_LAYER_BASE_P[::-1], p, side="left"), 0,
        len(_LAYER_BASE_P) - 1
    )
    b = np.where(p > SEA_LEVEL_PRESSURE, 0, b)
    t_b, p_b, lapse = _LAYER_BASE_T[b], _LAYER_BASE_P[b], _LAYER_LAPSE[b]
    k = G0 / R_AIR
    isothermal = lapse == 0.0
    safe_lapse = np.where(isothermal, 1.0, lapse)
    dh = np.where(
        isothermal,
        -t_b / k * np.log(p / p_b),
        t_b / safe_lapse * ((p / p_b) ** (-safe_lapse / k) - 1.0),
    )
    return geometric_from_geopotential(_LAYER_BASE_H[b] + dh)


class Atmosphere(Protocol):
    """Anything that gives the air's state at geometric altitudes."""

    def state(self, z_m: np.ndarray | float) -> AtmosphereState:
        """Temperature, pressure and density at ``z_m``."""
        ...


class StandardAtmosphere:
    """The US Standard Atmosphere 1976 as an :class:`Atmosphere` object."""

    name = "US Standard Atmosphere 1976"

    def state(self, z_m: np.ndarray | float) -> AtmosphereState:
        """USSA 1976 state at ``z_m``."""
        return usa1976(z_m)


class SoundingAtmosphere:
    """The real day's air from a sounding: temperature and pressure by geometric altitude.

    Temperature is interpolated linearly in altitude and pressure log-linearly (exact for an isothermal
    layer); density follows from the ideal-gas law rho = p / (R T) with the USSA 1976 gas constant of dry air
    (humidity is neglected: at 30 °C and 100 % relative humidity virtual temperature is about 3 % higher, so
    near-surface density is overestimated by up to 3 %). Below the lowest level the lowest temperature is
    held and pressure follows the isothermal hydrostatic law p = p0 exp(-g0 (z0 - z) / (R T0)) (holding
    the pressure instead would make the air 1.2 % too thin 100 m below the first level); above the top
    the USSA 1976 profile is used, with its pressure scaled to match the sounding at the top.

    Parameters
    ----------
    alt_m, temperature_k, pressure_pa : array_like
        Geometric altitude (strictly increasing after sorting), temperature and pressure at each level.
    """

    name = "sounding"

    def __init__(self, alt_m: np.ndarray, temperature_k: np.ndarray, pressure_pa: np.ndarray) -> None:
        z = np.asarray(alt_m, dtype=float)
        t = np.asarray(temperature_k, dtype=float)
        p = np.asarray(pressure_pa, dtype=float)
        good = np.isfinite(z) & np.isfinite(t) & np.isfinite(p) & (p > 0) & (t > 0)
        z, t, p = z[good], t[good], p[good]
        order = np.argsort(z)
        z, t, p = z[order], t[order], p[order]
        keep = np.concatenate([[True], np.diff(z) > 0])
        self.alt_m, self.temperature_k, self.pressure_pa = z[keep], t[keep], p[keep]
        if self.alt_m.size < 2:
            raise PhysicsError(
                "sounding atmosphere: fewer than two levels with finite temperature and pressure; "
                "fix: give temperature_c and pressure_hpa on at least two levels"
            )
        self._top = float(self.alt_m[-1])
        top_std = usa1976(min(self._top, MAX_ALTITUDE_M))
        self._pressure_scale = float(self.pressure_pa[-1] / top_std.pressure_pa)

    def state(self, z_m: np.ndarray | float) -> AtmosphereState:
        """Temperature, pressure and density at geometric altitudes ``z_m``."""
        z = np.asarray(z_m, dtype=float)
        t = np.interp(z, self.alt_m, self.temperature_k)
        logp = np.interp(z, self.alt_m, np.log(self.pressure_pa))
        z0, t0 = self.alt_m[0], self.temperature_k[0]
        logp = np.where(z < z0, np.log(self.pressure_pa[0]) + G0 * (z0 - z) / (R_AIR * t0), logp)
        p = np.exp(logp)
        above = z > self._top
        if np.any(above):
            std = usa1976(np.clip(z[above], MIN_ALTITUDE_M, MAX_ALTITUDE_M))
            t = t.copy() if t.ndim else np.array(t)
            p = p.copy() if p.ndim else np.array(p)
            t[above] = std.temperature_k
            p[above] = std.pressure_pa * self._pressure_scale
        return AtmosphereState(t, p, p / (R_AIR * t))


def altitude_of_pressure_in(atmosphere: Atmosphere, p_pa: float, low_m: float = -500.0,
                            high_m: float = 60_000.0) -> float:
    """Geometric altitude where ``atmosphere`` has pressure ``p_pa`` (Brent's method, xtol 0.01 m).

    Raises
    ------
    PhysicsError
        If the pressure is not bracketed between ``low_m`` and ``high_m``.
    """

    def f(z: float) -> float:
        return float(np.log(atmosphere.state(z).pressure_pa) - np.log(p_pa))

    if f(low_m) < 0 or f(high_m) > 0:
        raise PhysicsError(
            f"atmosphere: pressure {p_pa:.1f} Pa is not between {low_m:.0f} and {high_m:.0f} m; "
            "fix: check the pressure units"
        )
    return float(brentq(f, low_m, high_m, xtol=0.01, maxiter=200))
