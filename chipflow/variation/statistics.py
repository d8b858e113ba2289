"""From per-sample results to what a designer reads: percentiles, yield, corners, ranking.

All functions are pure and vectorised over samples (loops run over the handful of levels or
factors only).

Definitions (chipflow's own):

- a sample *passes* when every channel of every seeded level has its floor shear inside the
  window (bounds included), every chamber at most ``[culture] outside_window_limit`` of its
  floor outside it (as its build check), and both pressure checks pass: the highest on-chip
  pressure is at most the bond limit over its safety factor, the supply pressure at most the
  pump's passing share of its rating (:mod:`chipflow.checks.pressure`);
- the *yield* is the fraction of samples that pass; its Monte Carlo standard error is
  ``sqrt(y (1 - y) / n)`` (binomial), which is zero when every sample passes, so the yield
  also carries a one-sided 95 % lower bound (:func:`yield_lower_bound`): ``1 - 3/n`` when
  all ``n`` samples pass (the rule of three, Hanley & Lippman-Hand, JAMA 249 (1983)
  1743-1745), else the exact binomial bound of Clopper & Pearson (Biometrika 26 (1934)
  404-413);
- the *margin* of a sample is its worst relative distance to the window over the seeded
  levels, ``min(tau_min / low - 1, 1 - tau_max / high)``: positive inside, negative outside;
- the *elasticity* of a level's shear to a factor is ``d ln tau / d ln x`` at the nominal
  design (central differences; for the width bias, ``x`` is the level's width);
- the *shear change* of a factor is the largest relative change of any seeded level's shear
  when that factor alone sits at either end of its tolerance. Factors are ranked by it.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from chipflow.variation.batch import BatchResult
from chipflow.variation.problem import Problem

__all__ = [
    "PERCENTILES",
    "yield_lower_bound",
    "ELASTICITY_STEP",
    "percentiles",
    "sample_passes",
    "shear_margin",
    "sensitivity",
    "worst_corner",
]

#: Reported percentiles [%].
PERCENTILES = (5, 50, 95)
#: Relative step of the central differences for elasticities [-].
ELASTICITY_STEP = 1e-4


def yield_lower_bound(passed: int, samples: int) -> float:
    """One-sided 95 % lower bound of the yield [1].

    With every sample passing, the rule of three: no failure in ``n`` trials bounds the
    failure rate below ``3 / n`` at 95 % (Hanley & Lippman-Hand 1983; ``-ln 0.05 = 2.996``).
    Otherwise the Clopper-Pearson bound ``B(0.05; k, n - k + 1)``.

    >>> yield_lower_bound(1000, 1000), yield_lower_bound(0, 10)
    (0.997, 0.0)
    >>> round(yield_lower_bound(95, 100), 4)   # Clopper-Pearson, one-sided 95 %
    0.8977
    """
    if samples <= 0:
        return 0.0
    if passed >= samples:
        return max(0.0, 1.0 - 3.0 / samples)
    if passed <= 0:
        return 0.0
    from scipy.stats import beta

    return float(beta.ppf(0.05, passed, samples - passed + 1))


def percentiles(values: np.ndarray, nominal: float | None = None) -> dict[str, float | None]:
    """``p05``, ``p50`` and ``p95`` of ``values`` (linear interpolation), with the nominal value.

    >>> percentiles(np.arange(101.0))
    {'p05': 5.0, 'p50': 50.0, 'p95': 95.0}
    """
    p = np.percentile(np.asarray(values, dtype=float), PERCENTILES)
    out: dict[str, float | None] = {
        f"p{q:02d}": float(v) for q, v in zip(PERCENTILES, p, strict=True)
    }
    if nominal is not None:
        out["nominal"] = float(nominal)
    return out


def shear_margin(problem: Problem, result: BatchResult) -> np.ndarray | None:
    """Worst relative margin to the window over the seeded levels, per sample [-] (None
    without a window)."""
    if problem.window is None or not problem.seeded.any():
        return None
    low, high = problem.window
    seeded = problem.seeded
    return window_margin(result.shear_min[:, seeded], result.shear_max[:, seeded], low, high).min(
        axis=1
    )


def window_margin(tau_min: np.ndarray, tau_max: np.ndarray, low: float, high: float) -> np.ndarray:
    """Relative margin of shears to a window, elementwise [-]: positive inside.

    A one-sided window (``low = 0`` or ``high = inf``) has a margin on its one end only.

    >>> window_margin(np.array([0.5]), np.array([0.5]), 0.25, np.inf).tolist()
    [1.0]
    """
    margin = np.full(np.broadcast(tau_min, tau_max).shape, np.inf)
    if low > 0.0:
        margin = np.minimum(margin, tau_min / low - 1.0)
    if np.isfinite(high):
        margin = np.minimum(margin, 1.0 - tau_max / high)
    return margin


def sample_passes(problem: Problem, result: BatchResult) -> np.ndarray:
    """Whether each sample passes (see the module notes): (S,) bool."""
    ok = (result.chip_pressure <= problem.bond_allowed) & (
        result.supply_pressure <= problem.pump_allowed
    )
    if problem.window is not None:
        low, high = problem.window
        seeded = problem.seeded
        inside = (result.shear_min[:, seeded] >= low) & (result.shear_max[:, seeded] <= high)
        ok &= inside.all(axis=1)
        # a chamber: at most the culture's outside_window_limit of its floor outside
        ok &= (result.chamber_inside >= 1.0 - problem.outside_limit - 1e-12).all(axis=1)
    return ok


def sensitivity(
    problem: Problem,
    tolerance: np.ndarray,
    steps: np.ndarray,
    nominal: BatchResult,
    small: BatchResult,
    ends: BatchResult,
) -> list[dict[str, Any]]:
    """Elasticities and shear changes per factor, ranked (largest shear change first).

    Parameters
    ----------
    problem : Problem
    tolerance : numpy.ndarray
        Tolerance of each factor (relative, or [m] for the width bias).
    steps : numpy.ndarray
        The small steps of ``small`` (same units).
    nominal : BatchResult
        One row: the nominal design.
    small, ends : BatchResult
        Rows of :func:`~chipflow.variation.sampling.one_at_a_time` with ``steps`` and with
        ``tolerance``.
    """
    m = problem.n_levels
    tau0 = nominal.shear[0]
    seeded = problem.seeded if problem.seeded.any() else np.ones_like(problem.seeded)
    out = []
    for i, name in enumerate(problem.names):  # loop over the few factors
        lo, hi = small.shear[2 * i], small.shear[2 * i + 1]
        if i == m:  # width bias: relative to each level's own width
            w = problem.level_widths
            dlnx = np.log((w + steps[i]) / (w - steps[i]))
        else:
            dlnx = np.full(tau0.size, np.log((1.0 + steps[i]) / (1.0 - steps[i])))
        elasticity = np.log(hi / lo) / dlnx
        change = np.abs(ends.shear[2 * i : 2 * i + 2] / tau0 - 1.0).max(axis=0)
        where = np.flatnonzero(seeded)
        # the level where it is largest; ties within rounding go to the first of them
        top = where[np.argmax(np.round(np.abs(elasticity[seeded]), 6))]
        out.append(
            {
                "factor": name,
                "tolerance": float(tolerance[i]),
                "unit": "m" if i == m else "1",
                "elasticity": float(elasticity[top]),
                "elasticity_level": problem.labels[top],
                "elasticities": [float(e) for e in elasticity],
                "shear_change": float(change[seeded].max()) if tolerance[i] > 0 else 0.0,
            }
        )
    out.sort(key=lambda row: (-row["shear_change"], -abs(row["elasticity"])))
    return out


def worst_corner(
    problem: Problem, rows: np.ndarray, result: BatchResult, passes: np.ndarray
) -> dict[str, Any]:
    """The corner with the smallest window margin (the highest chip pressure without a window).

    Parameters
    ----------
    rows : numpy.ndarray
        (n, factors) parameter rows of the corners.
    result : BatchResult
        Their results.
    passes : numpy.ndarray
        Whether each corner passes.
    """
    margin = shear_margin(problem, result)
    index = int(np.argmax(result.chip_pressure) if margin is None else np.argmin(margin))
    return {
        "factors": {name: float(v) for name, v in zip(problem.names, rows[index], strict=True)},
        "passes": bool(passes[index]),
        "shear_margin": None if margin is None else float(margin[index]),
        "supply_pressure": float(result.supply_pressure[index]),
        "chip_pressure": float(result.chip_pressure[index]),
        "levels": [
            {
                "generation": problem.generations[g],
                "role": problem.roles[g],
                "wall_shear_floor": float(result.shear[index, g]),
            }
            for g in range(len(problem.labels))
        ],
        "corners": int(rows.shape[0]),
    }
