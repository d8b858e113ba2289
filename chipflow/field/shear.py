"""Floor wall-shear statistics of a field solution, against a cell type's shear window."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ShearStats", "weighted_percentiles", "shear_stats"]


def weighted_percentiles(values: np.ndarray, weights: np.ndarray, q) -> np.ndarray:
    """Area-weighted percentiles ``q`` (0-100) of ``values``: the value below which that
    percentage of the total weight lies (midpoint rule on the sorted values).

    >>> weighted_percentiles(np.array([1.0, 2.0, 3.0]), np.array([1.0, 1.0, 2.0]), [50]).round(4)
    array([2.3333])
    """
    order = np.argsort(values)
    v, w = np.asarray(values, float)[order], np.asarray(weights, float)[order]
    cum = (np.cumsum(w) - 0.5 * w) / w.sum()
    return np.interp(np.asarray(q, float) / 100.0, cum, v)


@dataclass(frozen=True)
class ShearStats:
    """Floor shear over a part of the floor.

    Attributes
    ----------
    area : float
        Floor area considered [m^2].
    p05, p50, p95 : float
        Area-weighted percentiles of the floor shear [Pa].
    below, above : float
        Fractions of the area below the window's lower and above its upper limit [1]
        (0 without a window).
    """

    area: float
    p05: float
    p50: float
    p95: float
    below: float
    above: float

    @property
    def outside(self) -> float:
        """Fraction of the area outside the window [1]."""
        return self.below + self.above


def shear_stats(
    shear: np.ndarray,
    area: np.ndarray,
    window: tuple[float, float] | None = None,
) -> ShearStats:
    """Statistics of the floor shear ``shear`` [Pa] on triangles of area ``area`` [m^2].

    ``window`` is the cell type's (lower, upper) floor shear [Pa].
    """
    total = float(area.sum())
    if total <= 0:
        return ShearStats(0.0, np.nan, np.nan, np.nan, 0.0, 0.0)
    p05, p50, p95 = weighted_percentiles(shear, area, [5, 50, 95])
    below = above = 0.0
    if window is not None:
        below = float(area[shear < window[0]].sum() / total)
        above = float(area[shear > window[1]].sum() / total)
    return ShearStats(total, float(p05), float(p50), float(p95), below, above)
