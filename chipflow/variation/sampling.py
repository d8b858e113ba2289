"""Random and designed points in the space of tolerances.

A *parameter matrix* has one row per sample and one column per factor (see
:func:`chipflow.variation.problem.factor_names`): the relative depth error of each mould level
[-], the width bias [m], the relative supply error [-] and the relative viscosity error [-].

Random samples are drawn all at once from one generator seeded by the user, every factor in
every sample (also those whose tolerance is zero), so the same seed gives the same matrix
whatever the tolerances, the batch size or the machine that solves it.

Examples
--------
>>> z = standard_draws(4, 3, seed=0)
>>> z.shape, bool(abs(z).max() <= 1.0)
((4, 3), True)
>>> corners(2).tolist()
[[-1.0, -1.0], [-1.0, 1.0], [1.0, -1.0], [1.0, 1.0]]
"""

from __future__ import annotations

import numpy as np

from chipflow.spec.tolerances import NORMAL_CUT

__all__ = ["standard_draws", "corners", "one_at_a_time"]


def standard_draws(
    samples: int, factors: int, seed: int, distribution: str = "uniform"
) -> np.ndarray:
    """Draws in units of the tolerance: uniform on [-1, 1], or standard normal cut at
    :data:`~chipflow.spec.tolerances.NORMAL_CUT`.

    Parameters
    ----------
    samples, factors : int
        Shape of the result.
    seed : int
        Seed of numpy's PCG64 generator.
    distribution : {"uniform", "normal"}

    Returns
    -------
    numpy.ndarray
        ``(samples, factors)`` [-].
    """
    rng = np.random.default_rng(seed)
    if distribution == "uniform":
        return rng.uniform(-1.0, 1.0, size=(samples, factors))
    if distribution == "normal":
        return np.clip(rng.standard_normal(size=(samples, factors)), -NORMAL_CUT, NORMAL_CUT)
    raise ValueError(f"unknown distribution {distribution!r} (valid: uniform, normal)")


def corners(factors: int) -> np.ndarray:
    """Every corner of the cube ``[-1, 1]^factors``: ``(2**factors, factors)``, in binary order."""
    bits = (np.arange(2**factors)[:, None] >> np.arange(factors - 1, -1, -1)) & 1
    return np.where(bits == 1, 1.0, -1.0)


def one_at_a_time(steps: np.ndarray) -> np.ndarray:
    """Rows that move one factor at a time by ``-step`` then ``+step``: ``(2 k, k)``.

    >>> one_at_a_time(np.array([0.1, 2.0])).tolist()
    [[-0.1, 0.0], [0.1, 0.0], [0.0, -2.0], [0.0, 2.0]]
    """
    k = steps.size
    rows = np.zeros((2 * k, k))
    index = np.arange(k)
    rows[2 * index, index] = -steps
    rows[2 * index + 1, index] = steps
    return rows
