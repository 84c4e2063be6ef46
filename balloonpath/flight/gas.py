"""Lifting gases: molar masses, ideal-gas densities, amounts and volumes.

All functions are small pure numpy functions in SI units and accept any array shape.

References
----------
[IUPAC] Standard atomic weights (IUPAC CIAAW): He 4.002602 g/mol; H2 2.01588 g/mol (values as
    tabulated by the ``chemicals`` library, REFERENCES.md §2).
[NOAA1976] U.S. Standard Atmosphere, 1976: R* = 8.31432 J mol-1 K-1 and M0 = 28.9644 g/mol
    (Table 2).

Notes
-----
The gas inside a latex envelope is taken at **ambient** temperature and pressure (no superheat, no
superpressure: the envelope's elastic overpressure is a few hundred pascals at most). We use the
USSA 1976 gas constant R* for the lifting gas as well as for the air, so that the gas and the
displaced air obey the same equation of state: the gross lift of a fixed amount of gas, n (M_air -
M_gas), is then exactly independent of altitude. R* differs from the CODATA value 8.314462618 by
1.7e-5 relative, far below the 5e-4 by which real helium departs from an ideal gas at 0 °C
(REFERENCES.md §2, CoolProp).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from balloonpath.atmosphere import GAS_CONSTANT_USSA, MOLAR_MASS_AIR
from balloonpath.errors import PhysicsError


@dataclass(frozen=True)
class LiftingGas:
    """A lifting gas: name and molar mass (kg/mol)."""

    name: str
    molar_mass_kg_mol: float


HELIUM = LiftingGas("helium", 4.002602e-3)  # [IUPAC]
HYDROGEN = LiftingGas("hydrogen", 2.01588e-3)  # [IUPAC], H2
GASES: dict[str, LiftingGas] = {g.name: g for g in (HELIUM, HYDROGEN)}


def lifting_gas(name: str) -> LiftingGas:
    """The :class:`LiftingGas` called ``name`` ("helium" or "hydrogen").

    Raises
    ------
    PhysicsError
        For an unknown gas name.
    """
    try:
        return GASES[name.lower()]
    except KeyError:
        raise PhysicsError(
            f"gas: {name!r} is not a known lifting gas; fix: use one of {', '.join(GASES)}"
        ) from None


def mixture_molar_mass_kg_mol(
    gas: str | LiftingGas, purity: np.ndarray | float = 1.0
) -> np.ndarray:
    """Molar mass of lifting gas contaminated with air (kg/mol).

    Parameters
    ----------
    gas : str or LiftingGas
        The lifting gas.
    purity : array_like
        Mole fraction x of lifting gas in the envelope, 0 < x <= 1; the rest is air.

    Notes
    -----
    M = x M_gas + (1 - x) M_air, with M_air = 28.9644 g/mol [NOAA1976].

    Raises
    ------
    PhysicsError
        If a purity is outside (0, 1].
    """
    g = gas if isinstance(gas, LiftingGas) else lifting_gas(gas)
    x = np.asarray(purity, dtype=float)
    if np.any(~(x > 0.0)) or np.any(x > 1.0):
        raise PhysicsError(
            f"gas: purity {x.min():g}..{x.max():g} is outside (0, 1]; "
            "fix: give the mole fraction of lifting gas, e.g. 0.98"
        )
    return x * g.molar_mass_kg_mol + (1.0 - x) * MOLAR_MASS_AIR


def ideal_gas_density_kg_m3(
    molar_mass_kg_mol: np.ndarray | float,
    temperature_k: np.ndarray | float,
    pressure_pa: np.ndarray | float,
) -> np.ndarray:
    """Density of an ideal gas (kg m-3).

    Notes
    -----
    rho = p M / (R* T), R* = 8.31432 J mol-1 K-1 [NOAA1976].
    """
    return (
        np.asarray(pressure_pa, dtype=float)
        * np.asarray(molar_mass_kg_mol, dtype=float)
        / (GAS_CONSTANT_USSA * np.asarray(temperature_k, dtype=float))
    )


def gas_density_kg_m3(
    gas: str | LiftingGas,
    temperature_k: np.ndarray | float,
    pressure_pa: np.ndarray | float,
    purity: np.ndarray | float = 1.0,
) -> np.ndarray:
    """Density of a lifting gas (with air contamination) at temperature and pressure, ideal gas (kg
    m-3).

    Parameters
    ----------
    gas : str or LiftingGas
        "helium" or "hydrogen".
    temperature_k, pressure_pa : array_like
        Gas temperature (K) and pressure (Pa); ambient values for a latex balloon.
    purity : array_like
        Mole fraction of lifting gas (rest air).

    Notes
    -----
    rho = p M / (R* T) with M from :func:`mixture_molar_mass_kg_mol`. At 0 °C and 101 325 Pa this
    gives 0.17858 kg m-3 for helium and 0.08994 kg m-3 for hydrogen; handbook values are 0.1786 and
    0.0899 ([CRC]; REFERENCES.md §2).
    """
    return ideal_gas_density_kg_m3(
        mixture_molar_mass_kg_mol(gas, purity), temperature_k, pressure_pa
    )


def gas_amount_mol(
    volume_m3: np.ndarray | float,
    temperature_k: np.ndarray | float,
    pressure_pa: np.ndarray | float,
) -> np.ndarray:
    """Amount of gas (mol) filling ``volume_m3`` at temperature and pressure: n = p V / (R* T)."""
    return (
        np.asarray(pressure_pa, dtype=float)
        * np.asarray(volume_m3, dtype=float)
        / (GAS_CONSTANT_USSA * np.asarray(temperature_k, dtype=float))
    )


def gas_volume_m3(
    amount_mol: np.ndarray | float,
    temperature_k: np.ndarray | float,
    pressure_pa: np.ndarray | float,
) -> np.ndarray:
    """Volume (m3) of ``amount_mol`` of ideal gas at temperature and pressure: V = n R* T / p."""
    return (
        np.asarray(amount_mol, dtype=float)
        * GAS_CONSTANT_USSA
        * np.asarray(temperature_k, dtype=float)
        / np.asarray(pressure_pa, dtype=float)
    )


def lift_per_mole_kg_mol(gas: str | LiftingGas, purity: np.ndarray | float = 1.0) -> np.ndarray:
    """Gross lift per mole of gas (kg/mol): the displaced air's mass minus the gas's mass.

    Notes
    -----
    At the same temperature and pressure one mole of gas displaces one mole of air, so
    gross lift / n = M_air - M_mixture. This holds at every altitude for gas at ambient temperature.
    """
    return MOLAR_MASS_AIR - mixture_molar_mass_kg_mol(gas, purity)
