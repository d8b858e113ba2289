"""Sparse nodal analysis of a channel network.

Each channel is a hydraulic conductance ``g = 1 / R`` between its two nodes (laminar, fully
developed flow, :func:`chipflow.physics.duct.resistance`). Mass conservation at every node
gives the weighted graph Laplacian system ``L p = q``. Nodes with a fixed pressure are
eliminated: the reduced matrix over the free nodes is assembled directly, in one vectorised
step, and solved with a sparse direct (LU) solver. Everything per channel then follows from
:func:`chipflow.physics.duct.flow_state`.

The reduced matrix is symmetric positive definite as long as every connected part of the
network holds at least one pressure port; otherwise the pressure there is undetermined and
:class:`~chipflow.errors.NetworkError` names the part.

Examples
--------
Two equal channels in parallel, fed at 10 uL/min, the outlet open (0 Pa):

>>> from chipflow.network.model import NetworkBuilder
>>> from chipflow.physics.fluid import water
>>> b = NetworkBuilder()
>>> b.channel("upper", "in", "out", width=200e-6, depth=50e-6, length=10e-3)
>>> b.channel("lower", "in", "out", width=200e-6, depth=50e-6, length=10e-3)
>>> sol = solve(b.build(), water(), pressures={"out": 0.0}, flows={"in": 10e-9 / 60})
>>> [round(float(q) * 60e9, 6) for q in sol.flow]   # uL/min
[5.0, 5.0]
>>> round(float(sol.pressure[0]), 1)               # Pa, as for one channel at 5 uL/min
475.6
>>> round(sol.port_flow["out"] * 60e9, 6)    # leaves at the outlet
-10.0
"""

from __future__ import annotations

import functools
import warnings
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from numbers import Real

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components
from scipy.sparse.linalg import spsolve

from chipflow.errors import ArgumentError, NetworkError
from chipflow.network.model import Network, NodeKey, listing
from chipflow.network.residual import Residual, check_network_solution
from chipflow.physics.duct import METHODS, DuctFlow, flow_state, resistance
from chipflow.physics.fluid import Fluid

__all__ = ["Solution", "PortFlows", "solve", "reduced_system", "ReducedSystem"]


class PortFlows(Mapping):
    """Flow entering the network at each port node [m^3/s], keyed by node name.

    Also accepts node indices as keys. Iteration yields node names: pressure ports first, then
    flow ports, each in the order given to :func:`solve`.
    """

    def __init__(self, network: Network, nodes: np.ndarray, flows: np.ndarray) -> None:
        self._network = network
        self.nodes = nodes
        self.flows = flows
        self._pos = {int(n): i for i, n in enumerate(nodes)}

    def __getitem__(self, key: NodeKey) -> float:
        index = self._network.node_index(key)
        if index not in self._pos:
            raise KeyError(key)
        return float(self.flows[self._pos[index]])

    def __iter__(self) -> Iterator[str]:
        return (self._network.node_names[int(n)] for n in self.nodes)

    def __len__(self) -> int:
        return len(self.nodes)

    def __repr__(self) -> str:
        return f"PortFlows({dict(self)!r})"


@dataclass(frozen=True, eq=False)
class Solution:
    """Pressures and flows in a solved network; per-channel fields are arrays in SI units.

    The pressures, flows, port flows and residual are computed by :func:`solve`; the other
    per-channel fields come from one call of :func:`chipflow.physics.duct.flow_state` made on
    first access (so a design sweep that needs only pressures and flows does not pay for it).

    Attributes
    ----------
    network : Network
        The solved network.
    fluid : Fluid
        The liquid.
    pressure : numpy.ndarray
        Gauge pressure at every node [Pa].
    flow : numpy.ndarray
        Flow rate in every channel [m^3/s], positive from ``node_a`` to ``node_b``.
    port_flow : PortFlows
        Flow entering the network at each port node [m^3/s] (negative where it leaves).
    port_pressure : dict
        Node name to imposed pressure [Pa], for the pressure ports.
    residual : float
        Largest net flow into a free node over the largest flow in the network
        (``check.mass_residual``): about 1e-16 for a well-posed network.
    method : str
        Resistance method used ("series" or "approx").
    check : Residual
        The solution's self-check (:mod:`chipflow.network.residual`): mass and channel-law
        residuals, the condition estimate and the tolerance they passed.
    """

    network: Network
    fluid: Fluid
    pressure: np.ndarray
    flow: np.ndarray
    port_flow: PortFlows
    port_pressure: dict
    residual: float
    method: str = "series"
    check: Residual | None = None

    @functools.cached_property
    def state(self) -> DuctFlow:
        """Everything per channel, from :func:`~chipflow.physics.duct.flow_state`."""
        net = self.network
        return flow_state(
            net.width,
            net.depth,
            net.length,
            self.flow,
            self.fluid.viscosity,
            self.fluid.density,
            net.round,
            self.method,
        )

    @property
    def pressure_drop(self) -> np.ndarray:
        """Pressure drop from ``node_a`` to ``node_b`` [Pa], signed like ``flow``."""
        return np.asarray(self.state.pressure_drop)

    @property
    def resistance(self) -> np.ndarray:
        """Hydraulic resistance [Pa s/m^3]."""
        return np.asarray(self.state.resistance)

    @property
    def mean_velocity(self) -> np.ndarray:
        """Mean velocity [m/s], signed like ``flow``."""
        return np.asarray(self.state.mean_velocity)

    @property
    def max_velocity(self) -> np.ndarray:
        """Peak (centreline) velocity [m/s], signed like ``flow``."""
        return np.asarray(self.state.max_velocity)

    @property
    def wall_shear_mean(self) -> np.ndarray:
        """Perimeter-averaged wall shear stress [Pa]."""
        return np.asarray(self.state.wall_shear_mean)

    @property
    def wall_shear_max(self) -> np.ndarray:
        """Peak wall shear stress [Pa]."""
        return np.asarray(self.state.wall_shear_max)

    @property
    def wall_shear_floor(self) -> np.ndarray:
        """Wall shear stress at the centre of the floor [Pa] (what cells there feel)."""
        return np.asarray(self.state.wall_shear_floor)

    @property
    def reynolds(self) -> np.ndarray:
        """Reynolds number on the hydraulic diameter [-]."""
        return np.asarray(self.state.reynolds)

    @property
    def residence_time(self) -> np.ndarray:
        """Time to cross each channel at the mean velocity [s] (inf without flow)."""
        return np.asarray(self.state.residence_time)

    @property
    def hydraulic_diameter(self) -> np.ndarray:
        """Hydraulic diameter [m]."""
        return np.asarray(self.state.hydraulic_diameter)

    def node_pressure(self, key: NodeKey) -> float:
        """Pressure at a node given by index or name [Pa]."""
        return float(self.pressure[self.network.node_index(key)])


@dataclass(frozen=True, eq=False)
class ReducedSystem:
    """The assembled linear system over the free (not pressure-fixed) nodes.

    Attributes
    ----------
    matrix : scipy.sparse.csc_matrix
        Reduced weighted Laplacian [m^3/(Pa s)], symmetric positive definite.
    rhs : numpy.ndarray
        Injected flows plus the inflow from fixed-pressure neighbours [m^3/s].
    free : numpy.ndarray of int
        Node index of each unknown.
    pressure : numpy.ndarray
        Node pressures [Pa] with the fixed values filled in and zeros elsewhere.
    injected : numpy.ndarray
        Imposed flow into every node [m^3/s] (zero where none).
    conductance : numpy.ndarray
        ``1 / R`` of every channel [m^3/(Pa s)].
    pressure_nodes, flow_nodes : numpy.ndarray of int
        Nodes of the pressure ports and of the flow ports, in the order given.
    """

    matrix: sp.csc_matrix
    rhs: np.ndarray
    free: np.ndarray
    pressure: np.ndarray
    injected: np.ndarray
    conductance: np.ndarray
    pressure_nodes: np.ndarray
    flow_nodes: np.ndarray


def _ports(
    network: Network, pressures: Mapping | None, flows: Mapping | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    def resolve(mapping: Mapping | None, what: str) -> tuple[np.ndarray, np.ndarray]:
        mapping = mapping or {}
        nodes = np.array([network.node_index(k) for k in mapping], dtype=np.int64)
        values = np.array([float(v) for v in mapping.values()], dtype=float)
        if not np.all(np.isfinite(values)):
            bad = [network.node_name(int(n)) for n in nodes[~np.isfinite(values)]]
            raise NetworkError(f"{what} at node {listing(bad)} is not a finite number")
        uniq, counts = np.unique(nodes, return_counts=True)
        if np.any(counts > 1):
            dup = [network.node_name(int(n)) for n in uniq[counts > 1]]
            raise NetworkError(f"node {listing(dup)} is given more than one {what}")
        return nodes, values

    p_nodes, p_vals = resolve(pressures, "pressure")
    q_nodes, q_vals = resolve(flows, "flow")
    both = np.intersect1d(p_nodes, q_nodes)
    if both.size:
        names = listing([network.node_name(int(n)) for n in both])
        raise NetworkError(
            f"node {names} has both a pressure and a flow; a port imposes one or the other"
        )
    return p_nodes, p_vals, q_nodes, q_vals


def _check_determined(
    network: Network, p_nodes: np.ndarray, q_nodes: np.ndarray, injected: np.ndarray
) -> None:
    names = network.node_names
    if p_nodes.size == 0:
        if q_nodes.size:
            net = injected.sum()
            balance = (
                f"and they do not balance (net {net * 6e10:.4g} uL/min in)"
                if abs(net) > 1e-9 * np.abs(injected).sum()
                else "so the pressure level is undetermined"
            )
            raise NetworkError(
                f"only flow ports ({listing([names[int(n)] for n in q_nodes])}) {balance}; "
                "give at least one port a pressure, e.g. an outlet open to the atmosphere (0 Pa)"
            )
        raise NetworkError(
            "no ports: give at least one node a pressure (e.g. an outlet at 0 Pa) and drive "
            "the network with a pressure or a flow"
        )
    n = network.n_nodes
    adjacency = sp.csr_matrix(
        (np.ones(network.n_channels), (network.node_a, network.node_b)), shape=(n, n)
    )
    n_parts, labels = connected_components(adjacency, directed=False)
    if n_parts == 1:
        return
    anchored = np.bincount(labels[p_nodes], minlength=n_parts) > 0
    if anchored.all():
        return
    part = int(np.flatnonzero(~anchored)[0])
    members = np.flatnonzero(labels == part)
    shown = listing([names[int(i)] for i in members[:8]], total=members.size)
    inflow = injected[members]
    if np.any(inflow != 0):
        net = inflow.sum()
        if abs(net) > 1e-9 * np.abs(inflow).sum():
            raise NetworkError(
                f"flow ports cannot balance: a net {net * 6e10:.4g} uL/min is forced into the "
                f"part of the network with nodes {shown}, which has no path to a pressure port; "
                "connect it, or give one of its ports a pressure"
            )
        raise NetworkError(
            f"the part of the network with nodes {shown} has only flow ports and no path to a "
            "pressure port, so its pressure is undetermined; connect it or give it a pressure port"
        )
    raise NetworkError(
        f"the part of the network with nodes {shown} has no path to a pressure port "
        f"({n_parts} separate parts in all); connect it or remove it"
    )


def reduced_system(
    network: Network,
    fluid: Fluid,
    pressures: Mapping | None = None,
    flows: Mapping | None = None,
    *,
    method: str = "series",
) -> ReducedSystem:
    """Assemble the reduced nodal system without solving it (used by :func:`solve`).

    Parameters are those of :func:`solve`. Validates the ports and the connectivity.
    """
    p_nodes, p_vals, q_nodes, q_vals = _ports(network, pressures, flows)
    n = network.n_nodes
    injected = np.zeros(n)
    injected[q_nodes] = q_vals
    _check_determined(network, p_nodes, q_nodes, injected)

    g = 1.0 / np.asarray(
        resistance(
            network.width, network.depth, network.length, fluid.viscosity, network.round, method
        )
    )
    fixed = np.zeros(n, dtype=bool)
    fixed[p_nodes] = True
    pressure = np.zeros(n)
    pressure[p_nodes] = p_vals
    free = np.flatnonzero(~fixed)
    # 32-bit indices are what SuperLU takes; they halve the memory traffic of assembly.
    index = np.int32 if n < 2**31 - 1 and 2 * network.n_channels + n < 2**31 - 1 else np.int64
    position = np.full(n, -1, dtype=index)
    position[free] = np.arange(free.size, dtype=index)

    a, b = network.node_a, network.node_b
    ia, ib = position[a], position[b]
    fa, fb = ia >= 0, ib >= 0
    if fa.all() and fb.all():  # no channel touches a fixed node
        both = slice(None)
        diagonal = np.bincount(ia, g, free.size) + np.bincount(ib, g, free.size)
    else:
        both = fa & fb
        diagonal = np.bincount(ia[fa], g[fa], free.size) + np.bincount(ib[fb], g[fb], free.size)
    # Diagonal: sum of conductances at each free node; off-diagonal: -g between free nodes.
    ia_both, ib_both, g_both = ia[both], ib[both], g[both]
    diag_index = np.arange(free.size, dtype=index)
    rows = np.concatenate((diag_index, ia_both, ib_both))
    cols = np.concatenate((diag_index, ib_both, ia_both))
    data = np.concatenate((diagonal, -g_both, -g_both))
    matrix = sp.csc_matrix((data, (rows, cols)), shape=(free.size, free.size))
    # Right-hand side: imposed flows plus g * p_fixed from fixed neighbours.
    rhs = injected[free].copy()
    only_a, only_b = fa & ~fb, fb & ~fa
    rhs += np.bincount(ia[only_a], g[only_a] * pressure[b[only_a]], free.size)
    rhs += np.bincount(ib[only_b], g[only_b] * pressure[a[only_b]], free.size)
    return ReducedSystem(matrix, rhs, free, pressure, injected, g, p_nodes, q_nodes)


def _check_arguments(network, fluid, pressures, flows, method) -> None:
    """Refuse arguments of the wrong type with an :class:`ArgumentError` saying what is
    expected (bad values inside valid arguments are :class:`NetworkError`)."""
    if not isinstance(network, Network):
        raise ArgumentError(f"network must be a Network, got {type(network).__name__}")
    if not isinstance(fluid, Fluid):
        raise ArgumentError(
            f"fluid must be a Fluid (e.g. chipflow.physics.fluid.water()), got {fluid!r:.60}"
        )
    if method not in METHODS:
        raise ArgumentError(f"unknown resistance method {method!r} (valid: {', '.join(METHODS)})")
    for what, mapping in (("pressures", pressures), ("flows", flows)):
        if mapping is None:
            continue
        if not isinstance(mapping, Mapping):
            raise ArgumentError(f"{what} must map node names to numbers, got {mapping!r:.60}")
        for node, value in mapping.items():
            if isinstance(value, bool) or not isinstance(value, Real):
                raise ArgumentError(
                    f"{what}[{node!r}] must be a number in SI units "
                    f"({'Pa' if what == 'pressures' else 'm^3/s'}), got {value!r:.60}; "
                    "convert text with chipflow.units.to_si"
                )


def solve(
    network: Network,
    fluid: Fluid,
    pressures: Mapping[NodeKey, float] | None = None,
    flows: Mapping[NodeKey, float] | None = None,
    *,
    method: str = "series",
) -> Solution:
    """Pressures at every node and the flow in every channel.

    Parameters
    ----------
    network : Network
        The channels.
    fluid : Fluid
        The liquid (viscosity and density).
    pressures : mapping, optional
        Node (index or name) to imposed gauge pressure [Pa]: pressure controllers, gravity
        reservoirs (``rho g head``), outlets open to the atmosphere (0 Pa).
    flows : mapping, optional
        Node (index or name) to imposed flow rate into the network [m^3/s]: syringe pumps
        (negative to withdraw). See :mod:`chipflow.network.supply` to turn bench supplies
        into these two mappings.
    method : {"series", "approx"}
        Resistance formula for rectangular channels (see :func:`~chipflow.physics.duct.resistance`).

    Returns
    -------
    Solution

    Raises
    ------
    NetworkError
        Unknown nodes, a node with two boundary values, no pressure port (only flow ports),
        flow ports that cannot balance, a part of the network without a path to a
        pressure port (its nodes are listed), or a solution that fails its self-check
        (:func:`chipflow.network.residual.check_solution`: not conserved, or a system too
        ill-conditioned for floating point, naming the channel).
    """
    _check_arguments(network, fluid, pressures, flows, method)
    system = reduced_system(network, fluid, pressures, flows, method=method)
    pressure = system.pressure
    levels = pressure[system.pressure_nodes]
    if not (np.ptp(levels) > 0 or np.any(system.injected != 0)):
        # no drive (one pressure everywhere, no imposed flow): the exact solution, not the
        # rounding noise of a solve
        pressure[system.free] = levels[0]
    elif system.free.size:
        # Sparse direct LU (SuperLU, column minimum-degree ordering) on the CSC matrix; a
        # singular matrix gives non-finite pressures, judged by the check below.
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            pressure[system.free] = spsolve(system.matrix, system.rhs)
    a, b = network.node_a, network.node_b
    with np.errstate(all="ignore"):
        q = system.conductance * (pressure[a] - pressure[b])
    fixed = np.zeros(network.n_nodes, dtype=bool)
    fixed[system.pressure_nodes] = True
    check = check_network_solution(
        network, pressure, q, 1.0 / system.conductance, injected=system.injected, fixed=fixed
    )
    n = network.n_nodes
    out = np.bincount(a, q, n) - np.bincount(b, q, n)  # net flow leaving each node by channel
    p_nodes, q_nodes = system.pressure_nodes, system.flow_nodes
    port_nodes = np.concatenate((p_nodes, q_nodes))
    port_flows = np.concatenate((out[p_nodes], system.injected[q_nodes]))
    return Solution(
        network=network,
        fluid=fluid,
        pressure=pressure,
        flow=q,
        port_flow=PortFlows(network, port_nodes, port_flows),
        port_pressure={network.node_names[int(i)]: float(pressure[i]) for i in p_nodes},
        residual=check.mass_residual,
        method=method,
        check=check,
    )
