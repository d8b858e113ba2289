"""Floor wall-shear statistics of a field solution, against a cell type's shear window."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "ShearStats",
    "weighted_percentiles",
    "shear_stats",
    "SAMPLE_LEVEL",
    "sample_points",
    "sampled_velocity",
    "ShearHistogram",
    "sampled_floor_stats",
]


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


#: Each triangle's floor shear is sampled at the centres of this many squared equal parts
#: (the quadratic velocity there): percentiles of the field itself, not of one value per
#: triangle, which depend on how the mesh happens to lie (by up to 5 % on the 5th
#: percentile of a straight channel at four triangles across).
SAMPLE_LEVEL = 3


def sample_points(level: int = SAMPLE_LEVEL) -> np.ndarray:
    """Barycentric centres ``(level**2, 3)`` of a triangle's ``level**2`` equal parts.

    >>> sample_points(2).shape
    (4, 3)
    """
    n = level
    pts = [((i + 1 / 3) / n, (j + 1 / 3) / n) for i in range(n) for j in range(n - i)]
    pts += [((i + 2 / 3) / n, (j + 2 / 3) / n) for i in range(n - 1) for j in range(n - 1 - i)]
    xy = np.array(pts)
    return np.column_stack([1.0 - xy.sum(axis=1), xy])


def sampled_velocity(nodes: np.ndarray, u: np.ndarray, level: int = SAMPLE_LEVEL) -> np.ndarray:
    """The quadratic velocity ``u`` (x then y coefficients, ``2 n_nodes``) [m/s] of the
    triangles with P2 ``nodes`` (n, 6) at their :func:`sample_points`: (n, level**2, 2)."""
    from chipflow.field.assemble import p2_values

    phi = p2_values(sample_points(level))  # (m, 6)
    nn = u.size // 2
    ux, uy = u[:nn][nodes], u[nn:][nodes]  # (n, 6)
    return np.stack([ux @ phi.T, uy @ phi.T], axis=-1)


class ShearHistogram:
    """Area-weighted floor shear [Pa] gathered in logarithmic bins, for the percentiles of
    more values than are worth keeping (a composed field of thousands of channels).

    :data:`BINS` bins from 1e-12 to 1e6 Pa each span 4e-5 of their value, the resolution
    of the percentiles; zero has a bin of its own.

    >>> h = ShearHistogram()
    >>> h.add(np.array([1.0, 2.0, 3.0]), np.array([1.0, 1.0, 2.0]))
    >>> round(h.stats(None).p50, 3)  # half the area is at 2 Pa or less
    2.0
    """

    BINS = 1 << 20
    RANGE = (1e-12, 1e6)

    def __init__(self) -> None:
        lo, hi = self.RANGE
        self.edges = np.geomspace(lo, hi, self.BINS + 1)
        self._log = (np.log(lo), np.log(hi))
        self.weight = np.zeros(self.BINS + 2)

    def add(self, values: np.ndarray, weights: np.ndarray) -> None:
        """Add floor shear ``values`` [Pa] on areas ``weights`` [m^2]."""
        v = np.ravel(values)
        lo, hi = self._log
        with np.errstate(divide="ignore"):
            x = (np.log(v) - lo) / (hi - lo) * self.BINS
        i = np.where(v > 0, np.clip(np.floor(x), -1, self.BINS), -1).astype(np.int64) + 1
        self.weight += np.bincount(i, weights=np.ravel(weights), minlength=len(self.weight))

    def stats(self, window: tuple[float, float] | None) -> ShearStats:
        """The statistics of what was added (``window`` [Pa] as :func:`shear_stats`)."""
        total = float(self.weight.sum())
        if total <= 0:
            return ShearStats(0.0, np.nan, np.nan, np.nan, 0.0, 0.0)
        cum = np.cumsum(self.weight) / total
        # bin 0 holds zero, bin i + 1 holds [edges[i], edges[i + 1]): interpolate within it
        upper = np.r_[0.0, self.edges[1:], self.edges[-1]]
        lower = np.r_[0.0, self.edges[:-1], self.edges[-1]]

        def quantile(f: float) -> float:
            i = int(np.searchsorted(cum, f))
            before = cum[i - 1] if i else 0.0
            share = (f - before) / max(cum[i] - before, 1e-300)
            return float(lower[i] + share * (upper[i] - lower[i]))

        def below(value: float) -> float:  # the share in bins wholly below ``value``
            return float(cum[int(np.searchsorted(upper, value, side="right")) - 1])

        low = high = 0.0
        if window is not None:
            low = below(window[0])
            at = int(np.searchsorted(lower, window[1], side="right")) - 1  # holds window[1]
            high = float(1.0 - cum[at])
        return ShearStats(total, quantile(0.05), quantile(0.5), quantile(0.95), low, high)


def sampled_floor_stats(solution, window=None, level: int = SAMPLE_LEVEL) -> ShearStats:
    """Floor-shear statistics of a solved field from its quadratic velocity sampled
    ``level**2`` times per triangle (:func:`sampled_velocity`)."""
    from chipflow.field.assemble import p2_space
    from chipflow.field.calibration import floor_factor

    mesh = solution.mesh
    nodes = p2_space(mesh.points, mesh.triangles).nodes
    factor = floor_factor(mesh.depth, mesh.width) * solution.viscosity / mesh.depth
    share = mesh.area / level**2
    hist = ShearHistogram()
    step = 200_000
    for s in range(0, len(nodes), step):
        v = sampled_velocity(nodes[s : s + step], solution.dofs, level)
        speed = np.hypot(v[..., 0], v[..., 1])
        hist.add(
            factor[s : s + step, None] * speed,
            np.broadcast_to(share[s : s + step, None], speed.shape),
        )
    return hist.stats(window)
