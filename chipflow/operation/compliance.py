"""Compliance and inertia of the fluid path: soft channel roofs, tubing walls, trapped air.

A compliance ``C = dV/dp`` [m^3/Pa] stores liquid when the pressure rises; with the
resistance of the channels downstream it forms a low-pass filter that damps a pump's
pulsation. Three sources are modelled:

- the **roof of a channel** moulded in a soft elastomer (PDMS), bending as a plate clamped at
  the channel's side walls (the profile of Christov et al. 2018, see
  :mod:`chipflow.operation.deformation`);
- the **wall of the supply tubing**, a thick-walled cylinder under internal pressure (Lame);
- **trapped air** (a bubble or an air-filled damper), isothermal: ``C = V / p_abs``.

The liquid's inertia adds an inertance ``L = rho l / A`` in series with each channel's
resistance; the Womersley number says when it matters.

References
----------
.. [1] H. Bruus, *Theoretical Microfluidics*, Oxford University Press (2008), ch. 4:
   hydraulic compliance, inertance and equivalent circuits.
.. [2] I. C. Christov, V. Cognet, T. C. Shidhore, H. A. Stone, "Flow rate-pressure drop
   relation for deformable shallow microfluidic channels", J. Fluid Mech. 841 (2018) 267-286.
.. [3] S. Timoshenko, J. N. Goodier, *Theory of Elasticity*, McGraw-Hill (1951): the thick-
   walled cylinder (Lame), open ends (from memory).
.. [4] J. R. Womersley, J. Physiol. 127 (1955) 553-563: the Womersley number.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from chipflow.physics.duct import cross_section_area, hydraulic_diameter

__all__ = [
    "ATMOSPHERE",
    "plate_rigidity",
    "roof_compliance",
    "tube_compliance",
    "air_compliance",
    "inertance",
    "womersley_number",
]

#: Standard atmosphere [Pa] (ISO 2533), the absolute pressure of a gauge 0 Pa.
ATMOSPHERE = 101325.0

#: Integral of the clamped-plate profile (1/4 - xi^2)^2 over -1/2..1/2 (exactly 1/30).
PROFILE_AREA = 1.0 / 30.0


def plate_rigidity(modulus: ArrayLike, thickness: ArrayLike, poisson: ArrayLike = 0.5):
    """Bending rigidity of a plate ``B = E t^3 / (12 (1 - nu^2))`` [N m].

    Parameters
    ----------
    modulus : array_like
        Young's modulus [Pa].
    thickness : array_like
        Plate (roof) thickness [m].
    poisson : array_like
        Poisson's ratio [1].

    >>> round(float(plate_rigidity(12.0, 1.0, 0.0)), 12)
    1.0
    """
    return (
        np.asarray(modulus) * np.asarray(thickness) ** 3 / (12.0 * (1.0 - np.asarray(poisson) ** 2))
    )


def roof_compliance(width: ArrayLike, length: ArrayLike, rigidity: ArrayLike):
    """Compliance of a channel whose roof bends as a plate clamped at the side walls [m^3/Pa].

    The roof deflects as ``u(x) = p w^4 / (24 B) (1/4 - x^2/w^2)^2`` [2]_, so the
    cross-section grows by ``p w^5 / (720 B)`` and the channel stores
    ``C = l w^5 / (720 B)`` per pascal.

    Parameters
    ----------
    width, length : array_like
        Channel width and length [m].
    rigidity : array_like
        Bending rigidity of the roof [N m] (:func:`plate_rigidity`).
    """
    w = np.asarray(width, dtype=float)
    return np.asarray(length) * w**5 * PROFILE_AREA / (24.0 * np.asarray(rigidity))


def tube_compliance(
    inner_diameter: ArrayLike,
    outer_diameter: ArrayLike,
    length: ArrayLike,
    modulus: ArrayLike,
    poisson: ArrayLike = 0.5,
):
    """Compliance of a thick-walled elastic tube under internal pressure [m^3/Pa].

    Lame's solution with open ends [3]_ gives the inner radius' growth
    ``u(a) = p a [(1 - nu) a^2 + (1 + nu) b^2] / (E (b^2 - a^2))``, hence
    ``C = 2 pi a l u(a) / p``. For a thin wall ``t = b - a`` it tends to
    ``2 pi a^3 l / (E t)``.

    Parameters
    ----------
    inner_diameter, outer_diameter : array_like
        [m].
    length : array_like
        [m].
    modulus : array_like
        Young's modulus of the tubing [Pa].
    poisson : array_like
        Poisson's ratio [1].
    """
    a = np.asarray(inner_diameter, dtype=float) / 2.0
    b = np.asarray(outer_diameter, dtype=float) / 2.0
    nu = np.asarray(poisson, dtype=float)
    growth = a * ((1.0 - nu) * a**2 + (1.0 + nu) * b**2) / (np.asarray(modulus) * (b**2 - a**2))
    return 2.0 * np.pi * a * np.asarray(length) * growth


def air_compliance(volume: ArrayLike, gauge_pressure: ArrayLike = 0.0):
    """Isothermal compliance of trapped air ``C = V / p_abs`` [m^3/Pa] (ideal gas, [1]_).

    Parameters
    ----------
    volume : array_like
        Air volume at the operating pressure [m^3].
    gauge_pressure : array_like
        Mean gauge pressure of the air [Pa].

    >>> float(air_compliance(1e-9)) * ATMOSPHERE
    1e-09
    """
    return np.asarray(volume, dtype=float) / (ATMOSPHERE + np.asarray(gauge_pressure))


def inertance(width: ArrayLike, depth: ArrayLike, length: ArrayLike, density: float, round=False):
    """Inertance ``L = rho l / A`` [Pa s^2/m^3] of the liquid in a channel (plug flow, [1]_)."""
    return density * np.asarray(length) / cross_section_area(width, depth, round)


def womersley_number(
    width: ArrayLike, depth: ArrayLike, omega: float, density: float, viscosity: float, round=False
):
    """Womersley number ``(D_h / 2) sqrt(omega rho / mu)`` [1] ([4]_, on the hydraulic diameter).

    Below about 1 the velocity profile follows the pulsation quasi-steadily and the
    liquid's inertia is negligible (common practice).
    """
    d_h = np.asarray(hydraulic_diameter(width, depth, round))
    return d_h / 2.0 * np.sqrt(omega * density / viscosity)
