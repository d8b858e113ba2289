"""Oxygen in the incubator, in the medium and through PDMS: the gas-side numbers of transport.

- **Incubator air.** A humidified incubator at 37 degC with 5 % CO2 holds water-saturated air
  diluted by the CO2, so its oxygen partial pressure is
  ``(p_atm - p_H2O(37 degC)) x 0.95 x 0.2095`` = 18.9 kPa (142 mmHg), with the standard
  atmosphere ``p_atm`` = 101325 Pa (a definition), the saturation pressure of water from the
  IAPWS-IF97 equation (Wagner et al. 2000) and 20.95 % oxygen in dry air (common practice).
- **Solubility.** Henry's law ``c = H p``, with ``H`` from the oxygen solubility of fresh water
  under one atmosphere of water-saturated air of Benson & Krause (Limnol Oceanogr 29 (1984)
  620-632; the equation of the standard dissolved-oxygen tables, 0-40 degC):
  ``H = C* / (0.2095 (p_atm - p_H2O))``. At 37 degC ``C*`` = 6.73 mg/L and
  ``H`` = 1.056e-5 mol/(m^3 Pa), so medium equilibrated with the incubator air holds
  0.200 mol/m^3: the "about 0.2 mol/m^3 air-equilibrated" of Sci Rep 2017;7:42113, Table 1.
  (Sander's compilation, Atmos Chem Phys 23 (2023) 10901, gives 1.3e-5 mol/(m^3 Pa) at 25 degC
  with 1500 K: 1.07e-5 at 37 degC, within 2 %.) Culture medium dissolves a few per cent less
  oxygen than water (salts and proteins); give ``o2_inlet`` when it is measured.
- **PDMS.** Oxygen permeability of poly(dimethylsiloxane) about 800 Barrer at 35 degC
  (Merkel, Bondar, Nagai, Freeman & Pinnau, J Polym Sci B 38 (2000) 415-434; from memory,
  medium confidence), 1 Barrer = 3.346e-16 mol/(m s Pa) (1e-10 cm^3(STP) cm / (cm^2 s cmHg)).

Examples
--------
>>> round(water_vapour_pressure(310.15))          # Pa at 37 degC (IAPWS-IF97)
6282
>>> round(incubator_o2_pressure())                 # Pa, 37 degC, 5 % CO2, humidified
18916
>>> round(float(o2_solubility(310.15)) * incubator_o2_pressure(), 4)   # mol/m^3
0.1997
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "STANDARD_ATMOSPHERE",
    "O2_IN_DRY_AIR",
    "INCUBATOR_CO2",
    "INCUBATOR_TEMPERATURE",
    "BARRER",
    "PDMS_O2_PERMEABILITY",
    "PDMS_O2_SOURCE",
    "AMBIENT_SOURCE",
    "SOLUBILITY_SOURCE",
    "O2_MOLAR_MASS",
    "water_vapour_pressure",
    "o2_solubility",
    "incubator_o2_pressure",
    "equilibrium_o2",
]

#: Standard atmosphere [Pa] (a definition).
STANDARD_ATMOSPHERE = 101325.0
#: Mole fraction of oxygen in dry air [-] (common practice).
O2_IN_DRY_AIR = 0.2095
#: CO2 fraction of a cell-culture incubator's gas [-] (common practice).
INCUBATOR_CO2 = 0.05
#: Temperature of a cell-culture incubator [K] (37 degC, common practice).
INCUBATOR_TEMPERATURE = 310.15
#: One Barrer in SI [mol/(m s Pa)]: 1e-10 cm^3(STP) cm / (cm^2 s cmHg), with 22414 cm^3/mol
#: of ideal gas at STP and 1 cmHg = 1333.22 Pa.
BARRER = 1e-10 * (1e-6 / 22.414e-3) * 1e-2 / (1e-4 * 1333.22)
#: Oxygen permeability of PDMS [mol/(m s Pa)]: about 800 Barrer.
PDMS_O2_PERMEABILITY = 800.0 * BARRER
PDMS_O2_SOURCE = (
    "PDMS oxygen permeability about 800 Barrer at 35 degC, Merkel et al., J Polym Sci B 38 "
    "(2000) 415 (from memory, medium confidence): give a measured value"
)
AMBIENT_SOURCE = (
    "humidified incubator at 37 degC with 5 % CO2: (101325 Pa - p_H2O(37 degC), IAPWS-IF97) "
    "x 0.95 x 0.2095"
)
SOLUBILITY_SOURCE = (
    "oxygen solubility of fresh water, Benson & Krause, Limnol Oceanogr 1984 (the standard "
    "dissolved-oxygen tables)"
)
#: Molar mass of O2 [g/mol].
O2_MOLAR_MASS = 31.9988

# IAPWS-IF97 region 4 (saturation line) coefficients n1..n10 (Wagner et al., J Eng Gas
# Turbines Power 122 (2000) 150-182, Table 34)
_IF97 = (
    0.11670521452767e4,
    -0.72421316703206e6,
    -0.17073846940092e2,
    0.12020824702470e5,
    -0.32325550322333e7,
    0.14915108613530e2,
    -0.48232657361591e4,
    0.40511340542057e6,
    -0.23855557567849,
    0.65017534844798e3,
)
# Benson & Krause (1984): ln C* [mg/L] = a0 + a1/T + a2/T^2 + a3/T^3 + a4/T^4 under 1 atm of
# water-saturated air
_BENSON_KRAUSE = (-139.34411, 1.575701e5, -6.642308e7, 1.243800e10, -8.621949e11)


def water_vapour_pressure(temperature: float) -> float:
    """Saturation pressure of water [Pa] at ``temperature`` [K] (IAPWS-IF97 [IF97]_,
    273.15-647.1 K).

    References
    ----------
    .. [IF97] W. Wagner et al., "The IAPWS industrial formulation 1997 for the thermodynamic
       properties of water and steam", J. Eng. Gas Turbines Power 122 (2000) 150-182, eq. 30.
    """
    n = _IF97
    t = float(temperature)
    theta = t + n[8] / (t - n[9])
    a = theta * theta + n[0] * theta + n[1]
    b = n[2] * theta * theta + n[3] * theta + n[4]
    c = n[5] * theta * theta + n[6] * theta + n[7]
    return float((2.0 * c / (-b + math.sqrt(b * b - 4.0 * a * c))) ** 4 * 1e6)


def o2_solubility(temperature: float | np.ndarray) -> float | np.ndarray:
    """Henry's law solubility of oxygen in water ``c / p`` [mol/(m^3 Pa)] at ``temperature``
    [K]: Benson & Krause's (1984) saturation concentration under one atmosphere of humid air
    over the oxygen partial pressure it stands for (see the module notes; fitted over
    0-40 degC)."""
    t = np.asarray(temperature, float)
    a = _BENSON_KRAUSE
    saturated = np.exp(a[0] + a[1] / t + a[2] / t**2 + a[3] / t**3 + a[4] / t**4)  # mg/L
    p_w = np.vectorize(water_vapour_pressure)(t)
    return saturated / O2_MOLAR_MASS / (O2_IN_DRY_AIR * (STANDARD_ATMOSPHERE - p_w))


def incubator_o2_pressure(
    temperature: float = INCUBATOR_TEMPERATURE, co2: float = INCUBATOR_CO2
) -> float:
    """Oxygen partial pressure [Pa] of humidified incubator air at ``temperature`` [K] with a
    ``co2`` fraction [-]: ``(p_atm - p_H2O(T)) (1 - co2) 0.2095``."""
    return (STANDARD_ATMOSPHERE - water_vapour_pressure(temperature)) * (1.0 - co2) * O2_IN_DRY_AIR


def equilibrium_o2(partial_pressure: float, temperature: float) -> float:
    """Oxygen concentration [mol/m^3] of water in equilibrium with ``partial_pressure`` [Pa] of
    oxygen at ``temperature`` [K]."""
    return float(o2_solubility(temperature) * partial_pressure)
