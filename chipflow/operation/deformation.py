"""Steady bulging of a soft channel roof and the fall of the channel's resistance.

Christov et al. [1]_ treat the roof of a long shallow channel (``h << w << l``) as a plate of
thickness ``t`` clamped at the side walls: at a local pressure ``p`` it deflects as

    u(x) = p w^4 / (24 B) (1/4 - x^2/w^2)^2,      B = E t^3 / (12 (1 - nu^2)),

and lubrication flow under that roof gives the flow rate as a quartic polynomial of the
pressure (the form Gervais et al. [2]_ observed; here without a fitted parameter):

    Q = w / (12 mu l) [G(p_in) - G(p_out)],
    G(p) = h^3 p + h^2 phi p^2 / 20 + h phi^2 p^3 / 630 + phi^3 p^4 / 48048,   phi = w^4 / (24 B).

The coefficients are the integrals of the profile's powers across the width,
``int (1/4 - xi^2)^(2n) dxi = 1/30, 1/630, 1/12012`` for n = 1, 2, 3. With no pressure (or no
compliance) the relation is the rigid parallel-plate one.

chipflow applies the model as a ratio: the resistance of the rigid channel (exact series)
times ``R_soft / R_rigid`` of the model. The model assumes a roof thinner than the channel is
wide (plate theory); a thick slab deforms more than a plate of its thickness would (Wang &
Christov [3]_), so treat the numbers for thick roofs as a lower bound.

References
----------
.. [1] I. C. Christov, V. Cognet, T. C. Shidhore, H. A. Stone, J. Fluid Mech. 841 (2018)
   267-286.
.. [2] T. Gervais, J. El-Ali, A. Guenther, K. F. Jensen, Lab Chip 6 (2006) 500-507.
.. [3] X. Wang, I. C. Christov, Proc. R. Soc. A 475 (2019) 20190513.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["roof_deflection", "deflection_scale", "pressure_integral", "resistance_ratio"]

#: int_{-1/2}^{1/2} (1/4 - xi^2)^(2n) dxi for n = 1, 2, 3 (exact).
PROFILE_MOMENTS = (1.0 / 30.0, 1.0 / 630.0, 1.0 / 12012.0)


def deflection_scale(width: ArrayLike, rigidity: ArrayLike):
    """``phi = w^4 / (24 B)`` [m/Pa]: the roof deflection per pascal, per unit of profile."""
    return np.asarray(width, dtype=float) ** 4 / (24.0 * np.asarray(rigidity))


def roof_deflection(x: ArrayLike, width: float, pressure: float, rigidity: float):
    """Deflection of a clamped roof at ``x`` [m] from the centre line [m] ([1]_).

    The centre deflection is ``p w^4 / (384 B)``, that of a clamped strip under a uniform
    load.
    """
    xi = np.asarray(x, dtype=float) / width
    return pressure * deflection_scale(width, rigidity) * (0.25 - xi**2) ** 2


def pressure_integral(pressure: ArrayLike, depth: ArrayLike, phi: ArrayLike):
    """``G(p) = int_0^p (1/w) int h(x, p')^3 dx dp'`` [m^3 Pa] of the deformed channel."""
    p = np.asarray(pressure, dtype=float)
    h = np.asarray(depth, dtype=float)
    f = np.asarray(phi, dtype=float)
    m1, m2, m3 = PROFILE_MOMENTS
    return (
        h**3 * p
        + 3.0 * h**2 * f * m1 * p**2 / 2.0
        + 3.0 * h * f**2 * m2 * p**3 / 3.0
        + f**3 * m3 * p**4 / 4.0
    )


def resistance_ratio(p_in: ArrayLike, p_out: ArrayLike, depth: ArrayLike, phi: ArrayLike):
    """``R_soft / R_rigid`` of channels whose ends are at ``p_in`` and ``p_out`` [Pa].

    Equal end pressures give the limit ``h^3 / h(p)^3`` averaged over the width, i.e. the
    derivative of ``G``. Zero pressure or zero ``phi`` gives exactly 1.
    """
    p_in, p_out, h, f = np.broadcast_arrays(
        np.asarray(p_in, float),
        np.asarray(p_out, float),
        np.asarray(depth, float),
        np.asarray(phi, float),
    )
    m1, m2, m3 = PROFILE_MOMENTS
    drop = p_in - p_out
    g = pressure_integral(p_in, h, f) - pressure_integral(p_out, h, f)
    # dG/dp at the mean pressure for channels without a pressure drop
    p = (p_in + p_out) / 2.0
    slope = h**3 + 3 * h**2 * f * m1 * p + 3 * h * f**2 * m2 * p**2 + f**3 * m3 * p**3
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(np.abs(drop) > 0, h**3 * drop / g, h**3 / slope)
    return ratio
