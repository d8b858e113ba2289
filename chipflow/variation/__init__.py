"""Tolerances and design sweeps on the network that is drawn.

- :mod:`~chipflow.variation.problem`: the as-drawn network of a build, prepared for many
  perturbed solves (fixed sparsity pattern, cross-section classes, level groups, limits);
- :mod:`~chipflow.variation.sampling`: random draws, corners, one-at-a-time steps;
- :mod:`~chipflow.variation.batch`: one batch of perturbed networks solved at once;
- :mod:`~chipflow.variation.statistics`: percentiles, yield, worst corner, ranking;
- :mod:`~chipflow.variation.execute`: tasks here, in local processes or on a Dask cluster;
- :mod:`~chipflow.variation.vary`: the Monte Carlo of ``chipflow vary``;
- :mod:`~chipflow.variation.grid` and :mod:`~chipflow.variation.sweep`: the grid of
  ``chipflow sweep`` and its points.
"""

from chipflow.variation.vary import Variation, vary_build

__all__ = ["Variation", "vary_build"]
