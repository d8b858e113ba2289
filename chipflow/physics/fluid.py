"""Fluid properties: water from the IAPWS 2008 viscosity formulation, culture medium, custom.

References
----------
.. [1] IAPWS R12-08, "Release on the IAPWS Formulation 2008 for the Viscosity of Ordinary
   Water Substance", International Association for the Properties of Water and Steam, 2008.
.. [2] G. S. Kell, "Density, thermal expansivity, and compressibility of liquid water from
   0 to 150 C", J. Chem. Eng. Data 20 (1975) 97-105 (density correlation at 1 atm).
.. [3] Culture medium with 10 % serum at 37 C is roughly 0.93-0.97 mPa s and its viscosity
   rises with serum content (Poon, bioRxiv 10.1101/2020.08.25.266221). The default below is a
   value from memory of low confidence: use a measured value whenever you have one.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from chipflow.errors import ArgumentError, SpecError

__all__ = [
    "Fluid",
    "water",
    "culture_medium",
    "custom_fluid",
    "fluid_preset",
    "water_viscosity",
    "water_density",
    "MEDIUM_VISCOSITY_37C",
    "MEDIUM_DENSITY_37C",
]

#: Culture medium with about 10 % serum at 37 C [Pa s] (from memory, low confidence [3]_).
MEDIUM_VISCOSITY_37C = 0.95e-3
#: Culture medium density at 37 C [kg/m^3] (from memory: a few kg/m^3 above water).
MEDIUM_DENSITY_37C = 1007.0

_T_STAR = 647.096  # [K]
_RHO_STAR = 322.0  # [kg/m^3]
_MU_STAR = 1.0e-6  # [Pa s]
_H0 = np.array([1.67752, 2.20462, 0.6366564, -0.241605])
# H1[i, j] of IAPWS R12-08 Table 2: i is the power of (1/T - 1), j the power of (rho - 1).
_H1 = np.array(
    [
        [5.20094e-1, 2.22531e-1, -2.81378e-1, 1.61913e-1, -3.25372e-2, 0.0, 0.0],
        [8.50895e-2, 9.99115e-1, -9.06851e-1, 2.57399e-1, 0.0, 0.0, 0.0],
        [-1.08374, 1.88797, -7.72479e-1, 0.0, 0.0, 0.0, 0.0],
        [-2.89555e-1, 1.26613, -4.89837e-1, 0.0, 6.98452e-2, 0.0, -4.35673e-3],
        [0.0, 0.0, -2.57040e-1, 0.0, 0.0, 8.72102e-3, 0.0],
        [0.0, 1.20573e-1, 0.0, 0.0, 0.0, 0.0, -5.93264e-4],
    ]
)


@dataclass(frozen=True)
class Fluid:
    """A Newtonian liquid.

    Attributes
    ----------
    name : str
        Shown in tables and reports.
    viscosity : float
        Dynamic viscosity [Pa s].
    density : float
        Density [kg/m^3].
    temperature : float or None
        Temperature [K] the properties belong to, if known.
    """

    name: str
    viscosity: float
    density: float
    temperature: float | None = None

    def __post_init__(self) -> None:
        for label, value in (("viscosity", self.viscosity), ("density", self.density)):
            if isinstance(value, bool) or not isinstance(value, int | float | np.floating):
                raise ArgumentError(
                    f"fluid '{self.name}': {label} must be a number in SI units, got {value!r:.60}"
                )
            if not (np.isfinite(value) and value > 0):
                raise ArgumentError(f"fluid '{self.name}': {label} must be a positive number")
        if self.temperature is not None and not (
            isinstance(self.temperature, int | float | np.floating)
            and np.isfinite(self.temperature)
            and self.temperature > 0
        ):
            raise ArgumentError(
                f"fluid '{self.name}': temperature must be a positive number of kelvin or None"
            )


def water_viscosity(temperature: float, density: float) -> float:
    """Viscosity of water from the IAPWS 2008 formulation [1]_ (critical enhancement omitted).

    Parameters
    ----------
    temperature : float
        Temperature [K].
    density : float
        Density [kg/m^3].

    Returns
    -------
    float
        Dynamic viscosity [Pa s].

    Examples
    --------
    The check value of IAPWS R12-08, Table 4:

    >>> round(water_viscosity(298.15, 998.0) * 1e6, 6)
    889.7351
    """
    _require_positive(temperature=temperature, density=density)
    t = temperature / _T_STAR
    rho = density / _RHO_STAR
    mu0 = 100.0 * np.sqrt(t) / np.sum(_H0 / t ** np.arange(4))
    x = (1.0 / t - 1.0) ** np.arange(6)
    y = (rho - 1.0) ** np.arange(7)
    mu1 = np.exp(rho * (x @ _H1 @ y))
    return float(_MU_STAR * mu0 * mu1)


def water_density(temperature: float) -> float:
    """Density of liquid water at 101.325 kPa from Kell's correlation [2]_.

    Parameters
    ----------
    temperature : float
        Temperature [K], 273.15 to 373.15.

    Returns
    -------
    float
        Density [kg/m^3].

    Examples
    --------
    >>> round(water_density(293.15), 2)
    998.2
    """
    _check_liquid_range(temperature, "water density")
    c = temperature - 273.15
    numerator = (
        999.83952
        + 16.945176 * c
        - 7.9870401e-3 * c**2
        - 46.170461e-6 * c**3
        + 105.56302e-9 * c**4
        - 280.54253e-12 * c**5
    )
    return float(numerator / (1.0 + 16.879850e-3 * c))


def _require_positive(**values: float) -> None:
    for name, value in values.items():
        if isinstance(value, bool) or not isinstance(value, int | float | np.floating):
            raise ArgumentError(f"{name} must be a number in SI units, got {value!r:.60}")
        if not (np.isfinite(value) and value > 0):
            raise ArgumentError(f"{name} must be finite and greater than zero, got {value!r}")


def _check_liquid_range(temperature: float, what: str) -> None:
    if isinstance(temperature, bool) or not isinstance(temperature, int | float | np.floating):
        raise ArgumentError(
            f"{what}: temperature must be a number of kelvin, got {temperature!r:.60}"
        )
    if not (np.isfinite(temperature) and 273.15 <= temperature <= 373.15):
        raise SpecError(
            f"{what}: temperature {temperature - 273.15:.6g} degC is outside 0-100 degC "
            "(liquid water at atmospheric pressure)"
        )


def water(temperature: float = 293.15) -> Fluid:
    """Water at ``temperature`` [K] and atmospheric pressure.

    Examples
    --------
    >>> w = water(310.15)
    >>> round(w.viscosity * 1e6, 1), round(w.density, 2)
    (691.3, 993.33)
    """
    _check_liquid_range(temperature, "water")
    density = water_density(temperature)
    return Fluid("water", water_viscosity(temperature, density), density, temperature)


def culture_medium(
    temperature: float = 310.15,
    viscosity: float | None = None,
    density: float | None = None,
) -> Fluid:
    """Serum-supplemented culture medium.

    Without a measured ``viscosity`` [Pa s], the default is the 37 C value
    :data:`MEDIUM_VISCOSITY_37C` scaled with temperature like water (viscosity ratio of water
    at ``temperature`` [K] and 37 C). The default is from memory of low confidence and serum
    content changes it: give a measured value when you have one.

    Examples
    --------
    >>> culture_medium().viscosity
    0.00095
    """
    _check_liquid_range(temperature, "culture medium")
    if viscosity is None:
        viscosity = MEDIUM_VISCOSITY_37C * (water(temperature).viscosity / water(310.15).viscosity)
    if density is None:
        density = MEDIUM_DENSITY_37C + water_density(temperature) - water_density(310.15)
    _require_positive(viscosity=viscosity, density=density)
    return Fluid("culture medium", float(viscosity), float(density), temperature)


def custom_fluid(
    name: str, viscosity: float, density: float, temperature: float | None = None
) -> Fluid:
    """A liquid with given viscosity [Pa s] and density [kg/m^3]."""
    _require_positive(viscosity=viscosity, density=density)
    return Fluid(name, float(viscosity), float(density), temperature)


def fluid_preset(
    name: str,
    temperature: float | None = None,
    viscosity: float | None = None,
    density: float | None = None,
) -> Fluid:
    """A fluid by preset name (``"water"`` or ``"medium"``) with optional overrides.

    Parameters
    ----------
    name : str
        ``"water"`` (default 20 C) or ``"medium"`` (default 37 C).
    temperature : float, optional
        [K].
    viscosity, density : float, optional
        Overrides [Pa s], [kg/m^3].
    """
    overrides = {"viscosity": viscosity, "density": density}
    _require_positive(**{k: v for k, v in overrides.items() if v is not None})
    if name == "water":
        base = water(293.15 if temperature is None else temperature)
    elif name == "medium":
        base = culture_medium(310.15 if temperature is None else temperature, viscosity, density)
    else:
        raise SpecError(f"unknown fluid {name!r} (valid: water, medium)")
    return Fluid(
        base.name,
        base.viscosity if viscosity is None else float(viscosity),
        base.density if density is None else float(density),
        base.temperature,
    )
