"""What is carried and what the cells take: species and their uptake on the floor.

A :class:`Species` is oxygen or a solute the design declares: its diffusivity, the
concentration entering at the supply, and the uptake of the cells seeded on the floor as
Michaelis-Menten kinetics per floor area,

    J(c_f) = V c_f / (K_m + c_f),        V = cell density x uptake per cell,

with ``c_f`` the concentration at the floor (zero-order uptake, ``K_m = 0``, takes ``V`` until
the floor runs dry). A gas (oxygen) also has an ``ambient`` concentration: the concentration in
equilibrium with the incubator air, towards which a gas-permeable roof or tubing pulls it.

The floor concentration follows from the balance between the transfer from the bulk across
the concentration layer, ``(c_e - c_f) / R``, and the uptake ``J(c_f)``: a quadratic in
``c_f`` solved in closed form by :func:`floor_concentration`.

Examples
--------
Zero-order uptake of 1e-7 mol/(m^2 s) behind a transfer resistance of 1e5 s/m: the floor lies
``V R`` = 0.01 mol/m^3 below the bulk:

>>> import numpy as np
>>> float(floor_concentration(np.array(0.2), np.array(1e5), 1e-7, 0.0)[0])
0.19
>>> float(uptake_flux(np.array(0.19), 1e-7, 0.0))
1e-07
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Species", "floor_concentration", "uptake_flux", "uptake_slope"]


@dataclass(frozen=True)
class Species:
    """One carried species.

    Attributes
    ----------
    name : str
        "oxygen" or the name the design gives a solute.
    diffusivity : float
        Diffusivity in the medium [m^2/s].
    inlet : float
        Concentration of the medium entering at the supply [mol/m^3].
    uptake : float
        Largest uptake of the seeded floor, cell density x uptake per cell [mol/(m^2 s)]
        (0: the cells take none).
    km : float
        Michaelis-Menten constant [mol/m^3] (0: zero-order uptake).
    ambient : float or None
        Concentration in equilibrium with the incubator gas [mol/m^3] (a gas); None for a
        solute, which neither a roof nor tubing lets through.
    critical : float or None
        Floor concentration below which the cells count as starved (hypoxic for oxygen)
        [mol/m^3]; None when the design has none.
    """

    name: str
    diffusivity: float
    inlet: float
    uptake: float = 0.0
    km: float = 0.0
    ambient: float | None = None
    critical: float | None = None


def uptake_flux(floor: np.ndarray, uptake: float | np.ndarray, km: float) -> np.ndarray:
    """Michaelis-Menten uptake ``V c / (K_m + c)`` [mol/(m^2 s)] at floor concentrations
    ``floor`` [mol/m^3]; zero-order (``km`` = 0) takes ``V`` while ``c > 0``."""
    c = np.maximum(np.asarray(floor, float), 0.0)
    # a dry floor (c = 0) takes nothing: the denominator is kept non-zero there
    return np.asarray(uptake, float) * (c / (km + c + (c <= 0.0)))


def uptake_slope(floor: np.ndarray, uptake: float | np.ndarray, km: float) -> np.ndarray:
    """``dJ / dc_f`` of :func:`uptake_flux` [m/s] (0 for zero-order uptake on a wet floor)."""
    c = np.maximum(np.asarray(floor, float), 0.0)
    v = np.asarray(uptake, float)
    if km <= 0.0:
        return np.zeros(np.broadcast(c, v).shape)
    return v * km / (km + c) ** 2


def floor_concentration(
    effective: np.ndarray, resistance: np.ndarray, uptake: float | np.ndarray, km: float
) -> tuple[np.ndarray, np.ndarray]:
    """Floor concentration where transfer meets uptake, and its slope.

    Solves ``(c_e - c_f) / R = V c_f / (K_m + c_f)`` for ``c_f >= 0``:
    ``k c_f^2 - B c_f - k c_e K_m = 0`` with ``k = 1/R`` and ``B = k c_e - k K_m - V``.

    Parameters
    ----------
    effective : numpy.ndarray
        The concentration the floor would have without uptake, ``c_e`` [mol/m^3] (>= 0).
    resistance : numpy.ndarray
        Transfer resistance between it and the floor, ``R`` [s/m].
    uptake : float or numpy.ndarray
        ``V`` [mol/(m^2 s)].
    km : float
        ``K_m`` [mol/m^3].

    Returns
    -------
    floor : numpy.ndarray
        ``c_f`` [mol/m^3].
    slope : numpy.ndarray
        ``d c_f / d c_e`` [-].
    """
    ce = np.maximum(np.asarray(effective, float), 0.0)
    k = 1.0 / np.asarray(resistance, float)
    b = k * ce - k * km - np.asarray(uptake, float)
    root = np.sqrt(b * b + 4.0 * k * k * ce * km)
    # the two forms of the larger root, each free of cancellation on its side of B = 0
    negative = b < 0.0
    cf = np.where(
        negative, 2.0 * k * ce * km / np.where(negative, root - b, 1.0), (b + root) * (0.5 / k)
    )
    live = root > 0.0
    slope = np.where(live, k * (cf + km) / np.where(live, root, 1.0), np.where(b > 0.0, 1.0, 0.0))
    return np.maximum(cf, 0.0), slope
