"""Transfer across the depth: from the bulk (mixing-cup) concentration to the floor and the roof.

Between two plates a depth ``h`` apart in laminar flow, a species taken up at the floor (or
let in at the roof) forms a concentration layer that grows from the channel entrance
(Leveque 1928) and fills the depth downstream (Graetz). The local Sherwood number
``Sh = k h / D`` relates the wall flux to the difference between bulk and wall
concentrations. It is written in the Graetz coordinate ``x^ = x D / (U h^2)`` of the
parallel-plate flow with the wall's shear rate ``gamma = 6 U / h``: ``x^ = 6 x D / (gamma h^3)``.
In a rectangular channel ``gamma`` is the floor-centre shear rate of the exact duct flow, so the
entrance layer sees the shear the floor has; the fully developed values are those of
parallel plates (channels wider than deep).

Published limits (Shah & London, *Laminar Flow Forced Convection in Ducts*, Academic Press,
1978, parallel plates, one wall active and the other adiabatic, via the heat-mass transfer
analogy; Nusselt numbers on the hydraulic diameter ``2h`` are halved for ``Sh`` on ``h``):

- fully developed: ``Sh`` = 5.385 / 2 at a uniform wall flux, 4.861 / 2 at a uniform wall
  concentration;
- entrance (Leveque): ``Nu_x`` = 1.490 ``x*^(-1/3)`` (flux) and 1.233 ``x*^(-1/3)``
  (concentration) with ``x* = x^ / 4``; the concentration case is Leveque's
  ``k = D / (Gamma(4/3) (9 D x / gamma)^(1/3))``;
- unequal fluxes at the two plates: ``Nu_1 = 5.385 / (1 - 0.346 q_2 / q_1)``, the influence
  coefficient 0.346: the roof's flux moves the floor against the bulk by ``0.346 / 2.6925``
  ``h / D`` per unit flux, fully developed; near the entrance the floor does not see it yet and
  the bulk moves by ``q x / (U h)`` alone (mass balance).

Round tubes (tubing): fully developed ``Sh`` on the diameter 4.364 (flux) and 3.657
(concentration) (Shah & London 1978).

This module's own calibration (not published values): the entrance and developed limits are
joined by ``Sh = (Sh_fd^5 + (C x^^(-1/3))^5)^(1/5)``; a wall whose uptake depends on its
concentration (Michaelis-Menten, a permeable roof) lies between the flux and concentration
limits with the weight ``1 / (1 + Bi / (2 Sh))`` of the flux limit, ``Bi = (dJ/dc) h / D``; the
roof's influence on the floor joins its two limits as ``(x^^-3 + B_fd^-3)^(-1/3)``. With them the
floor concentration of :mod:`chipflow.transport.march` stays within 2 % of the inlet
concentration of a two-dimensional finite-difference solution over Peclet 1-1000 and
Damkohler 0.01-10 (tests/test_transport_graetz.py).

Examples
--------
Far downstream the flux limit of Shah & London; near the entrance the concentration limit of
Leveque's asymptote, ``Sh x^^(1/3)`` = 1.233 / 2 x 4^(1/3) = 0.9786 (Leveque's own
``1 / (Gamma(4/3) 1.5^(1/3))`` = 0.9783):

>>> import numpy as np
>>> round(float(plate_sherwood(np.array(100.0), np.array(0.0))), 4)
2.6925
>>> round(float(plate_sherwood(np.array(1e-6), np.array(1e9))) * 1e-6 ** (1 / 3), 4)
0.9786
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "SH_FLUX",
    "SH_CONCENTRATION",
    "LEVEQUE_FLUX",
    "LEVEQUE_CONCENTRATION",
    "INFLUENCE",
    "TUBE_SH_FLUX",
    "TUBE_SH_CONCENTRATION",
    "graetz_coordinate",
    "plate_sherwood",
    "plate_limits",
    "robin_sherwood",
    "tube_sherwood",
    "cross_resistance",
]

#: Fully developed Sherwood number on the depth, one plate at a uniform flux, the other
#: impermeable (Shah & London 1978: Nu = 5.385 on D_h = 2h).
SH_FLUX = 5.385 / 2.0
#: The same at a uniform wall concentration (Shah & London 1978: Nu = 4.861).
SH_CONCENTRATION = 4.861 / 2.0
#: Leveque coefficients of ``Sh = C x^^(-1/3)`` from Shah & London's ``Nu_x = C' x*^(-1/3)``
#: (C' = 1.490 flux, 1.233 concentration; x* = x^/4, Nu on 2h).
LEVEQUE_FLUX = 1.490 / 2.0 * 4.0 ** (1.0 / 3.0)
LEVEQUE_CONCENTRATION = 1.233 / 2.0 * 4.0 ** (1.0 / 3.0)
#: Influence coefficient of parallel plates at unequal wall fluxes (Shah & London 1978).
INFLUENCE = 0.346
#: Fully developed Sherwood numbers of a round tube on its diameter (Shah & London 1978).
TUBE_SH_FLUX = 4.364
TUBE_SH_CONCENTRATION = 3.657

# this module's calibration (see the module notes)
_BLEND = 5.0
_ROBIN = 0.5
_CROSS_BLEND = 3.0
_CROSS_DEVELOPED = INFLUENCE / SH_FLUX
_TINY = 1e-12


def graetz_coordinate(x, diffusivity: float, shear_rate, depth) -> np.ndarray:
    """``x^ = 6 x D / (gamma h^3)`` [-] at distance ``x`` [m] from the entrance of a channel of
    depth ``h`` [m] with floor shear rate ``gamma`` [1/s] (for parallel plates ``x D/(U h^2)``)."""
    return (
        6.0 * np.asarray(x, float) * diffusivity / (np.asarray(shear_rate) * np.asarray(depth) ** 3)
    )


def _joined(developed: float, leveque: float, xhat: np.ndarray) -> np.ndarray:
    x = np.maximum(xhat, _TINY)
    return (developed**_BLEND + (leveque * x ** (-1.0 / 3.0)) ** _BLEND) ** (1.0 / _BLEND)


def plate_limits(xhat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Local Sherwood numbers on the depth at Graetz coordinate ``xhat`` at a uniform wall flux
    and at a uniform wall concentration."""
    return (
        _joined(SH_FLUX, LEVEQUE_FLUX, xhat),
        _joined(SH_CONCENTRATION, LEVEQUE_CONCENTRATION, xhat),
    )


def robin_sherwood(s_flux: np.ndarray, s_conc: np.ndarray, biot) -> np.ndarray:
    """Between the limits of :func:`plate_limits` for a wall of Biot number ``biot``."""
    weight = 1.0 / (1.0 + _ROBIN * np.asarray(biot) / s_flux)
    return weight * s_flux + (1.0 - weight) * s_conc


def plate_sherwood(xhat: np.ndarray, biot: np.ndarray) -> np.ndarray:
    """Local Sherwood number on the depth at Graetz coordinate ``xhat`` for a wall whose flux
    changes with its concentration at the rate ``biot = (dJ/dc) h / D`` [-] (0: a uniform flux;
    large: a uniform concentration)."""
    return robin_sherwood(*plate_limits(xhat), biot)


def tube_sherwood(biot: np.ndarray) -> np.ndarray:
    """Fully developed Sherwood number of a round tube on its diameter, for a wall of Biot
    number ``biot = k_wall d / D`` [-] (between the flux and concentration limits)."""
    weight = 1.0 / (1.0 + _ROBIN * np.asarray(biot) / TUBE_SH_FLUX)
    return weight * TUBE_SH_FLUX + (1.0 - weight) * TUBE_SH_CONCENTRATION


def cross_resistance(xhat: np.ndarray) -> np.ndarray:
    """How far one plate's flux moves the other plate's concentration against the bulk, per unit
    flux, in units of ``h / D`` [-]: ``x^`` at the entrance (the bulk moves, the far plate does
    not), ``0.346 / 2.6925`` fully developed (Shah & London's influence coefficient)."""
    x = np.maximum(xhat, _TINY)
    return (x ** (-_CROSS_BLEND) + _CROSS_DEVELOPED ** (-_CROSS_BLEND)) ** (-1.0 / _CROSS_BLEND)
