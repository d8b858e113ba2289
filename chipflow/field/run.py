"""The field step of a build: solve a drawn chip at the network's port pressures, compare."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from chipflow.field.chip import solve_layout
from chipflow.field.compare import FieldComparison, compare_with_network, comparison_dict
from chipflow.field.model import FieldSolution
from chipflow.layout.model import Layout

__all__ = ["FieldRun", "run_field"]


@dataclass(frozen=True)
class FieldRun:
    """A chip's field and its comparison with the network.

    Attributes
    ----------
    solution : FieldSolution
    comparison : FieldComparison
    window : (float, float) or None
        The floor shear window [Pa] the field was judged against.
    results : dict
        :func:`chipflow.field.compare.comparison_dict` of the comparison (SI values).
    """

    solution: FieldSolution
    comparison: FieldComparison
    window: tuple[float, float] | None
    results: dict[str, Any]

    def zoom(self, layout: Layout) -> tuple[float, float, float]:
        """Centre x, y and half-size [m] of a close-up on the first bed end (or junction)."""
        ch = layout.channels
        bed = np.nonzero(ch.role == "bed")[0]
        first = int(bed[0]) if bed.size else 0
        node = int(ch.node_a[first])
        meeting = (ch.node_a == node) | (ch.node_b == node)
        half = 4.0 * float(ch.width[meeting].max())
        x, y = layout.node_xy[node]
        return float(x), float(y), half


def run_field(
    layout: Layout, network_solution, viscosity: float, window, seeded: str = "all", **options
) -> FieldRun:
    """Solve the field of ``layout`` with the inlet and outlet pressures of the solved network.

    Parameters
    ----------
    layout : Layout
    network_solution : chipflow.network.Solution
        The chip's network solution (tubing included); its ``inlet`` and ``outlet`` node
        pressures drive the field, so flows and shear compare one to one.
    viscosity : float
        [Pa s].
    window : ShearWindow or (float, float) or None
        The cells' floor shear window [Pa].
    seeded : {"all", "bed"}
    **options
        Passed to :func:`chipflow.field.solve_field` (``across``, ``mesh_size``).
    """
    names = list(network_solution.network.node_names)
    pressures = {
        port: float(network_solution.pressure[names.index(port)]) for port in ("inlet", "outlet")
    }
    if window is not None and not isinstance(window, tuple):
        window = (float(window.min), float(window.max))
    solution = solve_layout(layout, pressures, viscosity, **options)
    comparison = compare_with_network(solution, layout, network_solution, window, seeded)
    return FieldRun(solution, comparison, window, comparison_dict(comparison))
