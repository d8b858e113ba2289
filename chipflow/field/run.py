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

__all__ = ["FieldRun", "run_field", "port_pair", "ComposedRun", "run_composed_field"]


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


def _ports_and_window(layout: Layout, network_solution, window):
    """The port pair, every port's network pressure [Pa] and the window as (min, max) [Pa]."""
    names = list(network_solution.network.node_names)
    high, low = port_pair(layout, network_solution)
    pressures = {
        p.name: float(network_solution.pressure[names.index(p.name)]) for p in layout.ports
    }
    if window is not None and not isinstance(window, tuple):
        window = (float(window.min), float(window.max))
    return high, low, pressures, window


def _network_inflow(layout: Layout, network_solution, port: str) -> float:
    """The network's flow into the chip at ``port`` [m^3/s]."""
    ch = layout.channels
    n_ch = len(ch.width)
    node = list(network_solution.network.node_names).index(port)
    q_net = float(abs(network_solution.flow[:n_ch][ch.node_a == node]).sum())
    return q_net - float(network_solution.flow[:n_ch][ch.node_b == node].sum())


def _operating_flow(
    layout: Layout,
    network_solution,
    high: str,
    low: str,
    pressures,
    q_field,
    resistance,
    flow_driven: bool | None,
) -> float:
    """The flow [m^3/s] the supply drives through a field that carries ``q_field`` at the
    network's port pressures and has ``resistance`` [Pa s/m^3] (see :func:`run_field`)."""
    q_net = _network_inflow(layout, network_solution, high)
    if flow_driven is None:
        return q_field
    if flow_driven:
        return q_net
    # the supply's pressure across tubing (network) and chip (field) in series
    p_supply = float(network_solution.pressure.max() - network_solution.pressure.min())
    r_tubing = (p_supply - (pressures[high] - pressures[low])) / q_net
    return p_supply / (r_tubing + resistance)


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
    high, low, pressures, window = _ports_and_window(layout, network_solution, window)
    solution = solve_layout(layout, pressures, viscosity, **options)
    q_field = solution.port_flows[high]
    q_op = _operating_flow(
        layout, network_solution, high, low, pressures, q_field,
        solution.resistance(high, low), flow_driven,
    )  # fmt: skip
    solution = scaled(solution, q_op / q_field)
    comparison = compare_with_network(
        solution, layout, network_solution, window, seeded, ports=(high, low)
    )
    return FieldRun(solution, comparison, window, comparison_dict(comparison))


@dataclass(frozen=True)
class ComposedRun:
    """A chip's field composed from its pieces (:mod:`chipflow.field.compose`), at the
    supply's operating point.

    Attributes
    ----------
    field : chipflow.field.compose.ComposedField
    results : dict
        The ``composed_field`` entry of a build's results (SI values): ``resistance`` and
        ``network_resistance`` [Pa s/m^3], ``flow`` [m^3/s], ``floor_shear`` (``p05``,
        ``p50``, ``p95`` over the whole floor [Pa]), ``floor_area`` [m^2],
        ``area_outside_window``, ``below_window``, ``above_window`` [1], ``bed_split``
        (as the whole field's), ``pieces``, ``kinds``, ``bodies``, ``triangles``.
    """

    field: Any
    results: dict[str, Any]


def run_composed_field(
    layout: Layout, network_solution, viscosity: float, window, flow_driven: bool | None
) -> ComposedRun:
    """The composed field of ``layout`` at the operating point of the network's supply, as
    :func:`run_field` takes it: solved at the network's port pressures, then scaled to the
    flow the supply would drive through the composed field's own resistance."""
    from chipflow.field.compose import compose_field, decompose

    high, low, pressures, window = _ports_and_window(layout, network_solution, window)
    pieces = decompose(layout)
    field = compose_field(
        layout, pressures, viscosity, decomposition=pieces, with_floor=False
    )  # its flows and resistance: the operating point
    q_field = field.port_flows[high]
    resistance = field.resistance(high, low)
    q_op = _operating_flow(
        layout, network_solution, high, low, pressures, q_field, resistance, flow_driven
    )
    scale = q_op / q_field  # linear: the same pieces at scaled pressures (no new solve)
    low_p = min(pressures.values())
    scaled_p = {k: low_p + scale * (v - low_p) for k, v in pressures.items()}
    field = compose_field(layout, scaled_p, viscosity, window=window, decomposition=pieces)
    split = {"max_deviation": float("nan"), "field_cv": float("nan"), "network_cv": float("nan")}
    n_ch = len(layout.channels.width)
    bed = layout.channels.role[pieces.body_channel] == "bed"
    if bed.any():
        # one body per bed channel (the first where a channel has several)
        channel, first = np.unique(pieces.body_channel[bed], return_index=True)
        qf = np.abs(field.body_flow[bed][first])
        qn = np.abs(network_solution.flow[:n_ch][channel])
        split = {
            "max_deviation": float(np.max(np.abs(qf / qf.mean() - qn / qn.mean()))),
            "field_cv": float(qf.std() / qf.mean()),
            "network_cv": float(qn.std() / qn.mean()),
        }
    floor = field.floor
    q_net = _network_inflow(layout, network_solution, high)
    results = {
        "resistance": resistance,
        "network_resistance": (pressures[high] - pressures[low]) / q_net,
        "flow": q_op,
        "floor_shear": {"p05": floor.p05, "p50": floor.p50, "p95": floor.p95},
        "floor_area": floor.area,
        "area_outside_window": floor.outside,
        "below_window": floor.below,
        "above_window": floor.above,
        "bed_split": split,
        "pieces": field.stats["pieces"],
        "kinds": field.stats["distinct"],
        "bodies": field.stats["bodies"],
        "triangles": field.stats["triangles"],
    }
    return ComposedRun(field, results)
