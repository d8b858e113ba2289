"""Calibration of the depth-averaged model against the exact rectangular-duct series.

The field solves the depth-averaged Stokes equations with a Brinkman friction term,

    -grad p + beta mu lap u - k mu u = 0,    div(h u) = 0,

for the depth-averaged velocity ``u``. The friction is the parallel-plate (Hele-Shaw) value
``k = 12 / h^2``, which depends on the depth alone. Across a straight channel of width ``w``
the solution is ``u(y) = U0 [1 - cosh(y / delta) / cosh(w / (2 delta))]`` with
``delta = h sqrt(beta / 12)`` (analytic), so the resistance per unit length is

    R' = 12 mu / (w h^3 g(s)),   g(s) = 1 - tanh(s) / s,   s = w / (2 delta).

The lateral viscosity factor ``beta`` is this method's calibration (not a published value):
it is chosen so that ``R'`` equals the exact series of :func:`chipflow.physics.duct.resistance`
for the local aspect ratio ``h / w``. For ``w >= h`` it stays within 0.6 % of 1.1916, the value
that matches the series' first-order term ``12 (1 + 0.630 h / w)`` (Bruus 2008), so for
channels wider than deep the calibration depends on depth alone in effect; tall channels
(``w < h``) need the local width, and get it from the mesh.

The floor shear is ``F mu |u| / h``. For parallel plates the depth profile is a parabola and
``F = 6``; ``F`` here is calibrated so that the floor shear at the centre line of a straight
channel equals :func:`chipflow.physics.duct.wall_shear_floor` of the exact series (``F -> 6``
for wide channels). The shear falls towards the side walls with the depth-averaged velocity.

References
----------
.. [1] H. Bruus, *Theoretical Microfluidics*, Oxford University Press, 2008, ch. 4.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from chipflow.physics import duct

__all__ = ["friction", "lateral_factor", "floor_factor", "BETA_WIDE"]

#: Lateral viscosity factor of wide channels: (6 * 0.6302)^2 / 12 from the series' first term.
BETA_WIDE = 1.1916


def friction(depth: ArrayLike) -> np.ndarray:
    """Brinkman friction coefficient ``k = 12 / h^2`` [1/m^2] (parallel plates, analytic)."""
    return 12.0 / np.asarray(depth, float) ** 2


def _g(s: np.ndarray) -> np.ndarray:
    """``1 - tanh(s) / s``, accurate for small ``s``."""
    s = np.asarray(s, float)
    small = s < 1e-3
    safe = np.where(small, 1.0, s)
    return np.where(small, s * s / 3.0, 1.0 - np.tanh(safe) / safe)


def _s_of_ratio(ratio: np.ndarray) -> np.ndarray:
    """The half-width over boundary-layer thickness ``s`` that matches the series."""
    r = np.asarray(ratio, float)
    # the series as R' w h^3 / mu; 12 / g(s) must equal it
    target = duct.resistance(1.0, r, 1.0, 1.0) * r**3
    want = 12.0 / target
    lo, hi = np.full_like(r, 1e-6), np.full_like(r, 1e6)
    for _ in range(200):  # bisection in log s; g is increasing
        mid = np.sqrt(lo * hi)
        up = _g(mid) < want
        lo, hi = np.where(up, mid, lo), np.where(up, hi, mid)
    return np.sqrt(lo * hi)


def _per_distinct(ratio: ArrayLike, fn) -> np.ndarray:
    r = np.asarray(ratio, float)
    finite = np.isfinite(r) & (r > 0)
    out = np.empty(r.shape)
    keys = np.round(np.log(np.where(finite, r, 1.0)), 4)  # 0.01 % steps in the ratio
    distinct, inverse = np.unique(keys.ravel(), return_inverse=True)
    out_flat = fn(np.exp(distinct))[inverse].reshape(r.shape)
    out[...] = out_flat
    return out, finite


def lateral_factor(depth: ArrayLike, width: ArrayLike) -> np.ndarray:
    """Lateral viscosity factor ``beta`` [-] for the local depth and channel width [m].

    Examples
    --------
    >>> print(f"{float(lateral_factor(50e-6, 1e-3)):.4f}")
    1.1916
    """
    ratio = np.asarray(depth, float) / np.asarray(width, float)

    def beta(r: np.ndarray) -> np.ndarray:
        s = _s_of_ratio(r)
        return 3.0 / (r * s) ** 2

    out, finite = _per_distinct(ratio, beta)
    return np.where(finite, out, BETA_WIDE)


def floor_factor(depth: ArrayLike, width: ArrayLike) -> np.ndarray:
    """Floor-shear profile factor ``F`` [-]: floor shear = ``F mu |u| / h``.

    Examples
    --------
    >>> print(f"{float(floor_factor(50e-6, 1e-2)):.3f}")   # wide channel: parallel plates
    6.0
    """
    ratio = np.asarray(depth, float) / np.asarray(width, float)

    def factor(r: np.ndarray) -> np.ndarray:
        s = _s_of_ratio(r)
        g = _g(s)
        centre_over_mean = (1.0 - 1.0 / np.cosh(np.minimum(s, 700.0))) / g
        # exact floor shear at the centre for unit mean velocity, width 1, depth r, viscosity 1
        tau = duct.wall_shear_floor(1.0, r, r, 1.0)
        return tau * r / centre_over_mean

    out, finite = _per_distinct(ratio, factor)
    return np.where(finite, out, 6.0)
