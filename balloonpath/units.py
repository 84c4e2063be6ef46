"""Unit conversions used once, at the readers (exact definitions).

References: international foot = 0.3048 m exactly; international knot = 1852 m/h exactly
(both by definition, NIST SP 811, appendix B); 1 hPa = 100 Pa; 0 °C = 273.15 K; 1 lb = 0.45359237 kg.
"""

from __future__ import annotations

import numpy as np

FOOT_M = 0.3048
KNOT_M_S = 1852.0 / 3600.0
POUND_KG = 0.45359237
OUNCE_KG = POUND_KG / 16.0
INCH_M = 0.0254
POUND_FORCE_N = POUND_KG * 9.80665


def m_from_ft(feet: np.ndarray | float) -> np.ndarray | float:
    """Metres from international feet."""
    return np.asarray(feet, dtype=float) * FOOT_M


def ft_from_m(metres: np.ndarray | float) -> np.ndarray | float:
    """International feet from metres."""
    return np.asarray(metres, dtype=float) / FOOT_M


def m_s_from_kt(knots: np.ndarray | float) -> np.ndarray | float:
    """Metres per second from knots."""
    return np.asarray(knots, dtype=float) * KNOT_M_S


def kt_from_m_s(speed: np.ndarray | float) -> np.ndarray | float:
    """Knots from metres per second."""
    return np.asarray(speed, dtype=float) / KNOT_M_S


def pa_from_hpa(hpa: np.ndarray | float) -> np.ndarray | float:
    """Pascal from hectopascal."""
    return np.asarray(hpa, dtype=float) * 100.0


def k_from_c(celsius: np.ndarray | float) -> np.ndarray | float:
    """Kelvin from degrees Celsius."""
    return np.asarray(celsius, dtype=float) + 273.15


def m_s_from_ft_min(ft_per_min: np.ndarray | float) -> np.ndarray | float:
    """Metres per second from feet per minute."""
    return np.asarray(ft_per_min, dtype=float) * FOOT_M / 60.0
