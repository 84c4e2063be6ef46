"""Descent under a parachute: terminal velocity by altitude, landing speed and energy, descent time.

References
----------
[NASATerminal] NASA Glenn Research Center, "Terminal Velocity": drag equals weight,
    V = sqrt(2 W / (Cd rho A)).
[Potvin] J. Potvin, Parks College Parachute Research Group, "Calculating the descent rate of a
    round parachute": the same balance; flat circular canopy Cd0 ~ 0.75 on the nominal area.
[Knacke1991] T. W. Knacke, Parachute Recovery Systems Design Manual, NWC TP 6575 (1991), Table 5-1
    (canopy drag coefficients; from memory, REFERENCES.md §3b) and the rate-of-descent equation
    (§4).
[NOAA1976] U.S. Standard Atmosphere, 1976: rho0 = 1.2250 kg m-3, g0 = 9.80665 m s-2.

Assumptions: the payload falls at its terminal velocity at every altitude (no transient after burst
or opening, no canopy breathing), the drag coefficient is constant, and standard gravity applies at
all altitudes. In physics mode the falling mass is the payload mass from ``[payload] mass_kg``
(which includes the parachute and lines); **remnants of the burst envelope are not counted**: they
add mass (faster) and drag (slower) in unknown proportion, and the ensemble's descent spread covers
them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from balloonpath.atmosphere import G0, SEA_LEVEL_DENSITY, Atmosphere, StandardAtmosphere
from balloonpath.errors import PhysicsError, input_error
from balloonpath.flight.drag import drag_balance_speed_m_s
from balloonpath.flight.lift import integrate_inverse_speed


def terminal_velocity_m_s(
    mass_kg: np.ndarray | float,
    air_density_kg_m3: np.ndarray | float,
    drag_coefficient: np.ndarray | float,
    area_m2: np.ndarray | float,
    gravity_m_s2: float = G0,
) -> np.ndarray:
    """Terminal (steady) fall speed (m/s, positive) of a body under drag.

    Notes
    -----
    m g = 1/2 rho v^2 Cd A, so v = sqrt(2 m g / (rho Cd A)) ([NASATerminal], [Potvin],
    [Knacke1991] §4).
    A is the canopy's nominal area S0 = pi D0^2 / 4 (vents included) when Cd is the nominal Cd0.
    """
    return drag_balance_speed_m_s(mass_kg, air_density_kg_m3, drag_coefficient, area_m2, gravity_m_s2)


def parachute_descent_rate(
    mass_kg: np.ndarray | float,
    diameter_m: np.ndarray | float,
    drag_coefficient: np.ndarray | float,
    air_density_kg_m3: np.ndarray | float = SEA_LEVEL_DENSITY,
) -> np.ndarray:
    """Descent speed (m/s, positive) of ``mass_kg`` under a round parachute of nominal diameter
    ``diameter_m``.

    Notes
    -----
    v = sqrt(2 m g0 / (rho Cd0 S0)), S0 = pi D0^2 / 4 (see :func:`terminal_velocity_m_s`). With the
    default sea-level density 1.225 kg m-3 this is the *sea-level descent rate* used by the vertical
    model.
    """
    area = np.pi * np.asarray(diameter_m, dtype=float) ** 2 / 4.0
    return terminal_velocity_m_s(mass_kg, air_density_kg_m3, drag_coefficient, area)


def descent_rate_at_density(
    sea_level_rate_m_s: np.ndarray | float, air_density_kg_m3: np.ndarray | float
) -> np.ndarray:
    """Descent speed (m/s, positive) at density rho from the sea-level speed v0.

    Notes
    -----
    At fixed weight and Cd the terminal velocity scales as rho^(-1/2) (REFERENCES.md §3c), so
    v = v0 sqrt(rho0 / rho) with rho0 = 1.2250 kg m-3 [NOAA1976].
    """
    return np.asarray(sea_level_rate_m_s, dtype=float) * np.sqrt(
        SEA_LEVEL_DENSITY / np.asarray(air_density_kg_m3, dtype=float)
    )


def kinetic_energy_j(mass_kg: np.ndarray | float, speed_m_s: np.ndarray | float) -> np.ndarray:
    """Kinetic energy (J): E = 1/2 m v^2."""
    return 0.5 * np.asarray(mass_kg, dtype=float) * np.asarray(speed_m_s, dtype=float) ** 2


def descent_time_s(
    top_altitude_m: float,
    ground_altitude_m: float,
    sea_level_rate_m_s: float,
    atmosphere: Atmosphere | None = None,
) -> float:
    """Time (s) to fall from ``top_altitude_m`` to ``ground_altitude_m`` at the terminal velocity.

    Notes
    -----
    t = integral from ground to top of dz / v(z), v(z) = v0 sqrt(rho0 / rho(z)), by composite
    Gauss-Legendre quadrature (:func:`balloonpath.flight.lift.integrate_inverse_speed`).
    """
    atm = atmosphere if atmosphere is not None else StandardAtmosphere()
    if top_altitude_m <= ground_altitude_m:
        return 0.0

    def speed(z: np.ndarray) -> np.ndarray:
        return descent_rate_at_density(sea_level_rate_m_s, atm.state(z).density_kg_m3)

    return float(integrate_inverse_speed(np.array([ground_altitude_m, top_altitude_m]), speed)[-1])


@dataclass(frozen=True)
class DescentPlan:
    """Descent under the parachute: speeds (m/s, positive down), landing energy (J), time (s)."""

    payload_mass_kg: float
    parachute_diameter_m: float
    drag_coefficient: float
    sea_level_rate_m_s: float
    start_altitude_m: float
    start_rate_m_s: float
    landing_elevation_m: float
    landing_rate_m_s: float
    landing_kinetic_energy_j: float
    descent_time_s: float


def plan_descent(
    payload_mass_kg: float,
    parachute_diameter_m: float,
    drag_coefficient: float = 0.75,
    start_altitude_m: float = 30_000.0,
    landing_elevation_m: float = 0.0,
    atmosphere: Atmosphere | None = None,
) -> DescentPlan:
    """Descent speeds, landing speed and energy, and time from ``start_altitude_m`` (e.g. burst) to
    the ground.

    Parameters
    ----------
    payload_mass_kg : float
        Falling mass (payload incl. parachute), kg; envelope remnants are not counted.
    parachute_diameter_m : float
        Nominal (flat) diameter D0, m.
    drag_coefficient : float
        Cd0 on the nominal area; default 0.75, a flat circular canopy ([Potvin]; [Knacke1991]
        0.75-0.80).
    start_altitude_m, landing_elevation_m : float
        Top and bottom of the descent, m.
    atmosphere : Atmosphere, optional
        Default US Standard Atmosphere 1976.

    Raises
    ------
    PhysicsError
        For non-positive mass, diameter or drag coefficient.
    """
    for name, value in (
        ("payload_mass_kg", payload_mass_kg),
        ("parachute_diameter_m", parachute_diameter_m),
        ("drag_coefficient", drag_coefficient),
    ):
        if not (np.isfinite(value) and value > 0.0):
            raise input_error(
                None,
                name,
                f"is {value!r}, must be > 0",
                f"give a positive {name}",
                cls=PhysicsError,
            )
    atm = atmosphere if atmosphere is not None else StandardAtmosphere()
    v0 = float(parachute_descent_rate(payload_mass_kg, parachute_diameter_m, drag_coefficient))
    rho = atm.state(np.array([start_altitude_m, landing_elevation_m])).density_kg_m3
    v_top, v_land = (float(x) for x in descent_rate_at_density(v0, rho))
    return DescentPlan(
        payload_mass_kg=float(payload_mass_kg),
        parachute_diameter_m=float(parachute_diameter_m),
        drag_coefficient=float(drag_coefficient),
        sea_level_rate_m_s=v0,
        start_altitude_m=float(start_altitude_m),
        start_rate_m_s=v_top,
        landing_elevation_m=float(landing_elevation_m),
        landing_rate_m_s=v_land,
        landing_kinetic_energy_j=float(kinetic_energy_j(payload_mass_kg, v_land)),
        descent_time_s=descent_time_s(start_altitude_m, landing_elevation_m, v0, atm),
    )
