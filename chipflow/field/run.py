"""The field step of a build: solve a drawn chip at its supply's operating point, compare."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from chipflow.field.chip import solve_layout
from chipflow.field.compare import FieldComparison, compare_with_network, comparison_dict
from chipflow.field.model import FieldSolution
from chipflow.field.solve import scaled
from chipflow.layout.model import Layout

__all__ = ["FieldRun", "run_field", "port_pair"]


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


def port_pair(layout: Layout, network_solution) -> tuple[str, str]:
    """The ports between which a chip's resistance is given: a tree's inlet and outlet, else
    the ports of highest and lowest pressure in the network's solution."""
    names = {p.name for p in layout.ports}
    if {"inlet", "outlet"} <= names:
        return "inlet", "outlet"
    nodes = list(network_solution.network.node_names)
    ranked = sorted(names, key=lambda n: float(network_solution.pressure[nodes.index(n)]))
    return ranked[-1], ranked[0]


def run_field(
    layout: Layout,
    network_solution,
    viscosity: float,
    window,
    seeded: str = "all",
    *,
    flow_driven: bool | None = True,
    **options,
) -> FieldRun:
    """Solve the field of ``layout`` at the operating point of the network's supply.

    The field is solved at the network's port node pressures. For a tree (an inlet and an
    outlet), it is then scaled (it is linear) to the flow the supply would drive through the
    field's own resistance: the network's flow for a flow-driven supply (a syringe pump), or
    the supply's pressure over the tubing plus the field resistance for a pressure-driven one.
    Resistances do not depend on the scaling.

    Parameters
    ----------
    layout : Layout
    network_solution : chipflow.network.Solution
        The chip's network solution (tubing included); its port node pressures drive the
        field, so flows and shear compare one to one.
    viscosity : float
        [Pa s].
    window : ShearWindow or (float, float) or None
        The cells' floor shear window [Pa].
    seeded : {"all", "bed"}
    flow_driven : bool or None
        True when the supply sets the flow, False when it sets a pressure (or a head); None:
        the field stays at the network's port pressures (an explicit network's supplies).
    **options
        Passed to :func:`chipflow.field.solve_field` (``across``, ``mesh_size``).
    """
    names = list(network_solution.network.node_names)
    high, low = port_pair(layout, network_solution)
    pressures = {
        p.name: float(network_solution.pressure[names.index(p.name)]) for p in layout.ports
    }
    if window is not None and not isinstance(window, tuple):
        window = (float(window.min), float(window.max))
    solution = solve_layout(layout, pressures, viscosity, **options)
    n_ch = len(layout.channels.width)
    ch = layout.channels
    node = names.index(high)
    q_net = float(abs(network_solution.flow[:n_ch][ch.node_a == node]).sum())
    q_net -= float(network_solution.flow[:n_ch][ch.node_b == node].sum())
    q_field = solution.port_flows[high]
    if flow_driven is None:
        q_op = q_field
    elif flow_driven:
        q_op = q_net
    else:  # the supply's pressure across tubing (network) and chip (field) in series
        p_supply = float(network_solution.pressure.max() - network_solution.pressure.min())
        r_tubing = (p_supply - (pressures[high] - pressures[low])) / q_net
        q_op = p_supply / (r_tubing + solution.resistance(high, low))
    solution = scaled(solution, q_op / q_field)
    comparison = compare_with_network(
        solution, layout, network_solution, window, seeded, ports=(high, low)
    )
    return FieldRun(solution, comparison, window, comparison_dict(comparison))
