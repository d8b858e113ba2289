"""The as-drawn network of a build, prepared for many perturbed solves.

:func:`variation_problem` takes a :class:`~chipflow.build.Build` and its tolerances and returns
a :class:`Problem`: the network's arrays, the fixed sparsity pattern of its reduced nodal
system, the groups of channels reported per level, the window and the pressure limits. Every
perturbed sample changes only numbers, never the pattern, so a batch of samples is assembled
in one vectorised step (:mod:`chipflow.variation.batch`).

What a sample changes, following the tolerances model (:mod:`chipflow.spec.tolerances`):

- the width of every on-chip (rectangular) channel by one bias for the whole mask;
- the depth of every channel of a mould level by that level's own error;
- the inlet supply's imposed value (flow of a syringe pump, pressure of a controller, pressure
  of a reservoir) and the viscosity by one error each.

A drawn chamber (:mod:`chipflow.layout.chamber`) is perturbed as a whole: its links' conductances
by the sensitivities of its 2D solve to its mould level's depth error and the width bias
(:func:`chipflow.field.chambers.chamber_sensitivity`, two re-solves kept in the field cache),
its floor shear by its flow and by the same re-solves' shear per unit flow, every percentile
alike (the floor-shear distribution keeps its shape).

Tubing keeps its size. Channel lengths stay as drawn. Each channel's resistance is taken
from the nominal solution as a *hydraulic length*, ``1 / (g mu r1)`` with ``g`` the conductance
the solver used (flow over pressure drop) and ``r1`` the duct resistance per unit length and
viscosity: equal to the drawn length for a plain duct, longer where the network adds junction
corrections. Under perturbation that length is held, so junction corrections keep their
nominal equivalent lengths while the cross-sections change.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from chipflow.build import Build
from chipflow.checks.pressure import PUMP_MARGIN
from chipflow.errors import SpecError
from chipflow.network.summary import generation_labels, level_groups, series_chains
from chipflow.physics.duct import resistance
from chipflow.spec.culture import read_culture, read_limits
from chipflow.spec.tolerances import Tolerances

__all__ = ["Problem", "variation_problem", "seeded_levels", "factor_names"]


def seeded_levels(roles: list[str], seeded: str, chambers: bool = False) -> np.ndarray:
    """Which levels carry cells: the bed levels for ``seeded = "bed"`` (all levels when there is
    no bed and no chamber: with ``chambers`` the cells are in them, not in a channel level),
    every level for ``"all"``; as for the build's floor-shear checks.

    >>> seeded_levels(["distribution", "bed", "collection"], "bed").tolist()
    [False, True, False]
    >>> seeded_levels(["distribution", "collection"], "bed", chambers=True).tolist()
    [False, False]
    """
    roles_arr = np.asarray(roles, dtype=str)
    beds = roles_arr == "bed"
    if seeded == "bed" and (beds.any() or chambers):
        return beds
    return np.ones(roles_arr.size, dtype=bool)


def factor_names(level_depths: np.ndarray) -> list[str]:
    """Names of the perturbed factors, in the column order of a parameter matrix.

    >>> factor_names(np.array([50e-6, 100e-6]))
    ['depth of mould level 1 (50 um)', 'depth of mould level 2 (100 um)', 'width bias', \
'supply', 'viscosity']
    """
    depths = [
        f"depth of mould level {i + 1} ({d * 1e6:.4g} um)" for i, d in enumerate(level_depths)
    ]
    return [*depths, "width bias", "supply", "viscosity"]


@dataclass(frozen=True, eq=False)
class Problem:
    """Everything a batch of perturbed solves needs, as plain arrays (picklable).

    Channel arrays have one entry per channel (C), node arrays one per node (N), class
    arrays one per distinct nominal cross-section (K), level arrays one per reported level
    (G, inlet to outlet). Lengths [m], pressures [Pa], flows [m^3/s], viscosity [Pa s].

    Attributes
    ----------
    node_a, node_b, length, cls : numpy.ndarray
        Channel ends, drawn lengths and cross-section class.
    hydraulic_length : numpy.ndarray
        Length that gives each channel its nominal resistance (see the module notes) [m].
    class_width, class_depth, class_round, class_level : numpy.ndarray
        Nominal width and depth of each class, whether it is a tube, and its mould level
        (-1: not perturbed).
    level_depths : numpy.ndarray
        Nominal depth of each mould level [m].
    viscosity : float
    n_nodes : int
    free, position : numpy.ndarray
        The free node of each row of the reduced system, and each node's row (-1 where the
        pressure is fixed).
    fixed_pressure, injected : numpy.ndarray
        Nominal imposed pressures and flows at every node.
    inlet_node : int
        The port whose supply carries the supply tolerance.
    pattern_rows, pattern_cols : numpy.ndarray
        Sparsity pattern of the reduced matrix: the diagonal, then the both-free channels
        twice.
    both_free : numpy.ndarray
        Channels whose two ends are free.
    incidence : scipy.sparse.csr_matrix
        (C, F): 1 where a channel end meets a free node (sums conductances on the diagonal).
    boundary : scipy.sparse.csr_matrix
        (C, F): 1 at the free end of a channel whose other end is fixed.
    fixed_end : numpy.ndarray
        The fixed end node of each channel (0 where none; used with ``boundary``).
    order, starts, counts : numpy.ndarray
        Channels sorted by level, where each level starts, and its size.
    labels, roles, generations : tuple
        Per level.
    level_widths : numpy.ndarray
        Nominal mean channel width of each level [m].
    seeded : numpy.ndarray of bool
        Per level: cells grow there (checked against the window).
    window : tuple of float or None
        Floor-shear window ``(low, high)`` [Pa]; a one-sided window has ``low = 0`` or
        ``high = inf``.
    bond_allowed, pump_allowed : float
        Highest passing chip pressure and supply pressure [Pa] (inf: no limit).
    chip_nodes, port_nodes, bed : numpy.ndarray
        On-chip nodes, port nodes, bed channels.
    names : tuple of str
        The perturbed factors (see :func:`factor_names`).
    chamber_of : numpy.ndarray
        (C,) the chamber each channel is a link of (-1: none).
    chamber_inflow : numpy.ndarray
        (H, C) the weights that give each of the H chambers' flow from the channel flows
        (+1 or -1 on the links from its inlet ports to its outlet ports).
    chamber_level : numpy.ndarray
        (H,) the mould level of each chamber.
    chamber_sensitivity : numpy.ndarray
        (H, 4) each chamber's :class:`~chipflow.field.chambers.ChamberSensitivity`.
    chamber_flow : numpy.ndarray
        (H,) nominal flow through each chamber [m^3/s].
    chamber_shear : numpy.ndarray
        (H, 3) its nominal floor-shear p05, p50, p95 [Pa].
    chamber_cdf : tuple of (numpy.ndarray, numpy.ndarray)
        Per chamber its floor shear in rising order [Pa] and the share of the floor at or
        below each [1].
    chamber_names : tuple of str
    outside_limit : float
        Largest share of a chamber's floor outside the window of a passing sample [1].
    chains : numpy.ndarray or None
        Per level, its number of channels counted as chains of segments in series (a mesh
        bed's bed channels, :func:`chipflow.network.summary.series_chains`): residence times
        and pressure drops add up along a chain. None: every channel its own.
    """

    node_a: np.ndarray
    node_b: np.ndarray
    length: np.ndarray
    hydraulic_length: np.ndarray
    cls: np.ndarray
    class_width: np.ndarray
    class_depth: np.ndarray
    class_round: np.ndarray
    class_level: np.ndarray
    level_depths: np.ndarray
    viscosity: float
    n_nodes: int
    free: np.ndarray
    position: np.ndarray
    fixed_pressure: np.ndarray
    injected: np.ndarray
    inlet_node: int
    pattern_rows: np.ndarray
    pattern_cols: np.ndarray
    both_free: np.ndarray
    incidence: sp.csr_matrix
    boundary: sp.csr_matrix
    fixed_end: np.ndarray
    order: np.ndarray
    starts: np.ndarray
    counts: np.ndarray
    labels: tuple[str, ...]
    roles: tuple[str, ...]
    generations: tuple[int, ...]
    level_widths: np.ndarray
    seeded: np.ndarray
    window: tuple[float, float] | None
    bond_allowed: float
    pump_allowed: float
    chip_nodes: np.ndarray
    port_nodes: np.ndarray
    bed: np.ndarray
    names: tuple[str, ...]
    chains: np.ndarray | None = None
    chamber_of: np.ndarray = None
    chamber_inflow: np.ndarray = None
    chamber_level: np.ndarray = None
    chamber_sensitivity: np.ndarray = None
    chamber_flow: np.ndarray = None
    chamber_shear: np.ndarray = None
    chamber_cdf: tuple = ()
    chamber_names: tuple[str, ...] = ()
    outside_limit: float = 0.5

    @property
    def n_chambers(self) -> int:
        """Number of chambers."""
        return len(self.chamber_names)

    @property
    def n_levels(self) -> int:
        """Number of mould levels."""
        return int(self.level_depths.size)

    @property
    def n_factors(self) -> int:
        """Number of perturbed factors (columns of a parameter matrix)."""
        return self.n_levels + 3

    @property
    def n_channels(self) -> int:
        """Number of channels."""
        return int(self.node_a.size)

    def tolerance_vector(self, tolerances: Tolerances) -> np.ndarray:
        """One tolerance per factor: relative depth error per level [-], width bias [m],
        supply and viscosity errors [-]."""
        if tolerances.depth_relative:
            depth = np.full(self.n_levels, tolerances.depth)
        else:
            depth = tolerances.depth / self.level_depths
        return np.concatenate([depth, [tolerances.width, tolerances.flow, tolerances.viscosity]])


def _hydraulic_length(build: Build) -> np.ndarray:
    """The length [m] that gives each channel the resistance the nominal solve used."""
    sol = build.solution
    net = sol.network
    drop = sol.pressure[net.node_a] - sol.pressure[net.node_b]
    unit = np.asarray(resistance(net.width, net.depth, 1.0, 1.0, net.round))
    moving = (sol.flow != 0) & (drop != 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        used = np.where(moving, drop / sol.flow / (unit * sol.fluid.viscosity), net.length)
    return np.asarray(used, dtype=float)


#: Lengths parsed from text carry float noise ("50 um" is 4.9999999999999996e-05 m): a
#: tolerance within this factor of a depth or width counts as equal to it.
_ROUNDING = 1.0 - 1e-9


def _check_range(problem: Problem, tolerances: Tolerances) -> None:
    """Refuse tolerances whose extreme draw would leave a channel without width or depth."""
    reach = tolerances.extreme
    what = "" if reach == 1 else f" ({reach:g} standard deviations, where normal draws are cut)"
    rect = ~problem.class_round
    if problem.n_chambers:  # a chamber's links are no drawn channels (its own rules below)
        links = np.zeros(rect.size, dtype=bool)
        links[problem.cls[problem.chamber_of >= 0]] = True
        rect &= ~links
    if rect.any():
        shallowest = float(problem.level_depths.min())
        narrowest = float(problem.class_width[rect].min())
        if not tolerances.depth_relative and reach * tolerances.depth >= shallowest * _ROUNDING:
            raise SpecError(
                f"{tolerances.where('depth')}: depth tolerance {tolerances.depth * 1e6:.4g} um"
                f"{what} must stay below the shallowest mould depth {shallowest * 1e6:.4g} um"
            )
        if reach * tolerances.width >= narrowest * _ROUNDING:
            raise SpecError(
                f"{tolerances.where('width')}: width bias {tolerances.width * 1e6:.4g} um{what} "
                f"must stay below the narrowest channel width {narrowest * 1e6:.4g} um"
            )
    for name in ("depth", "flow", "viscosity"):
        value = getattr(tolerances, name)
        relative = name != "depth" or tolerances.depth_relative
        if relative and reach * value >= 1.0:
            raise SpecError(
                f"{tolerances.where(name)}: {name} tolerance {value:.3g}{what} would reach "
                "100 %; give a smaller tolerance or the uniform distribution"
            )


def _fill_reducing_positions(
    a: np.ndarray, b: np.ndarray, fixed: np.ndarray, free: np.ndarray
) -> np.ndarray:
    """Each node's row in the reduced system, in a fill-reducing order (-1 for fixed nodes).

    The order is SuperLU's minimum-degree ordering of ``A + A^T`` for the pattern, found once;
    every block of a batch then keeps it and the batch is factorised without reordering.
    """
    from scipy.sparse.linalg import splu

    n = fixed.size
    position = np.full(n, -1, dtype=np.int64)
    position[free] = np.arange(free.size)
    if free.size < 2:
        return position
    ia, ib = position[a], position[b]
    both = (ia >= 0) & (ib >= 0)
    diag = np.arange(free.size)
    rows = np.concatenate([diag, ia[both], ib[both]])
    cols = np.concatenate([diag, ib[both], ia[both]])
    # a diagonally dominant stand-in with the same pattern: the ordering depends on it alone
    values = np.concatenate([np.full(free.size, 4.0 * n), -np.ones(2 * int(both.sum()))])
    pattern = sp.csc_matrix((values, (rows, cols)), shape=(free.size, free.size))
    # SuperLU factors A Pc with Pc[i, perm_c[i]] = 1: old unknown i becomes unknown perm_c[i]
    position[free] = splu(pattern, permc_spec="MMD_AT_PLUS_A").perm_c
    return position


def variation_problem(build: Build, tolerances: Tolerances) -> Problem:
    """Prepare the drawn network of ``build`` for perturbed solves.

    Parameters
    ----------
    build : Build
        A built design: a tree or an explicit network (drawn or not); its solved network.
    tolerances : Tolerances
        Checked against the design: the extreme draw must leave every width and depth positive.

    Raises
    ------
    SpecError
        For out-of-range tolerances.
    """
    solution = build.solution
    net = solution.network
    rect = ~net.round
    level_depths = np.unique(net.depth[rect])
    # distinct cross-sections: channels of one class stay alike in every sample
    keys = np.column_stack([net.width, net.depth, net.round.astype(float)])
    classes, cls = np.unique(keys, axis=0, return_inverse=True)
    class_round = classes[:, 2] > 0.5
    class_level = np.where(
        class_round, -1, np.searchsorted(level_depths, classes[:, 1]).clip(0, None)
    )

    # ports as solved by the build
    p_nodes = np.array([net.node_index(n) for n in solution.port_pressure], dtype=np.int64)
    p_values = np.array(list(solution.port_pressure.values()), dtype=float)
    port_nodes = np.asarray(solution.port_flow.nodes, dtype=np.int64)
    q_mask = ~np.isin(port_nodes, p_nodes)
    q_nodes = port_nodes[q_mask]
    q_values = np.asarray(solution.port_flow.flows, dtype=float)[q_mask]
    n = net.n_nodes
    fixed_pressure = np.zeros(n)
    fixed_pressure[p_nodes] = p_values
    injected = np.zeros(n)
    injected[q_nodes] = q_values
    if q_nodes.size and q_values.max() > 0:
        inlet_node = int(q_nodes[np.argmax(q_values)])
    else:
        inlet_node = int(p_nodes[np.argmax(p_values)])

    fixed = np.zeros(n, dtype=bool)
    fixed[p_nodes] = True
    free = np.flatnonzero(~fixed)
    a, b = net.node_a, net.node_b
    position = _fill_reducing_positions(a, b, fixed, free)
    free = free[np.argsort(position[free])]  # the node of each row of the reduced system
    ia, ib = position[a], position[b]
    fa, fb = ia >= 0, ib >= 0
    both = np.flatnonzero(fa & fb)
    f = free.size
    c = net.n_channels
    ends = np.concatenate([np.flatnonzero(fa), np.flatnonzero(fb)])
    incidence = sp.csr_matrix(
        (np.ones(ends.size), (ends, np.concatenate([ia[fa], ib[fb]]))), shape=(c, f)
    )
    only_a, only_b = np.flatnonzero(fa & ~fb), np.flatnonzero(fb & ~fa)
    boundary = sp.csr_matrix(
        (
            np.ones(only_a.size + only_b.size),
            (np.concatenate([only_a, only_b]), np.concatenate([ia[only_a], ib[only_b]])),
        ),
        shape=(c, f),
    )
    fixed_end = np.zeros(c, dtype=np.int64)
    fixed_end[only_a] = b[only_a]
    fixed_end[only_b] = a[only_b]
    diag = np.arange(f)
    pattern_rows = np.concatenate([diag, ia[both], ib[both]])
    pattern_cols = np.concatenate([diag, ib[both], ia[both]])

    groups = level_groups(net)
    rows = build.results["generations"]
    roles = [g[0] for g in groups]
    culture, limits = read_culture(build.source.top), read_limits(build.source.top)
    window = build.results.get("shear_window")
    members = [g[2] for g in groups]
    counts = np.array([m.size for m in members], dtype=np.int64)
    chains = np.array([int(series_chains(net, m).max()) + 1 for m in members], dtype=np.int64)
    on_chip = net.role != "tubing"
    problem = Problem(
        node_a=a,
        node_b=b,
        length=np.asarray(net.length, dtype=float),
        hydraulic_length=_hydraulic_length(build),
        cls=cls.astype(np.int64).ravel(),
        class_width=classes[:, 0],
        class_depth=classes[:, 1],
        class_round=class_round,
        class_level=class_level.astype(np.int64),
        level_depths=level_depths,
        viscosity=float(build.fluid.viscosity),
        n_nodes=n,
        free=free,
        position=position,
        fixed_pressure=fixed_pressure,
        injected=injected,
        inlet_node=inlet_node,
        pattern_rows=pattern_rows,
        pattern_cols=pattern_cols,
        both_free=both,
        incidence=incidence,
        boundary=boundary,
        fixed_end=fixed_end,
        order=np.concatenate(members) if members else np.zeros(0, np.int64),
        starts=np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64),
        counts=counts,
        chains=chains,
        labels=tuple(generation_labels(rows)),
        roles=tuple(roles),
        generations=tuple(int(g[1]) for g in groups),
        level_widths=np.array([float(net.width[m].mean()) for m in members]),
        seeded=seeded_levels(roles, culture.seeded, bool(build.results.get("chambers"))),
        window=None if not window else window_bounds(window),
        bond_allowed=float(limits.bond_pressure / limits.safety_factor),
        pump_allowed=(
            np.inf if limits.pump_pressure is None else float(PUMP_MARGIN * limits.pump_pressure)
        ),
        chip_nodes=np.union1d(a[on_chip], b[on_chip]),
        port_nodes=port_nodes,
        bed=np.flatnonzero(net.role == "bed"),
        names=tuple(factor_names(level_depths)),
        outside_limit=float(culture.outside_window_limit),
        **_chambers(build, level_depths),
    )
    _check_range(problem, tolerances)
    return problem


def _chambers(build: Build, level_depths: np.ndarray) -> dict:
    """The :class:`Problem` fields of the build's drawn chambers (see the module notes)."""
    from chipflow.field.chambers import chamber_sensitivity, floor_distribution

    net = build.solution.network
    c = net.n_channels
    chambers = [] if build.layout is None else list(build.layout.chambers)
    rows = {r["name"]: r for r in build.results.get("chambers") or []}
    of = np.full(c, -1, dtype=np.int64)
    inflow = np.zeros((len(chambers), c))
    level, sens, flow, shear, cdf, names = [], [], [], [], [], []
    sol = build.solution
    for h, ch in enumerate(chambers):  # a handful of chambers
        key = ch.key
        nodes = np.array([net.node_index(build.layout.node_names[n]) for n in ch.port_nodes])
        inlet = nodes[[p.side == 0 for p in key.ports]]
        links = np.flatnonzero(
            (net.role == "chamber") & np.isin(net.node_a, nodes) & np.isin(net.node_b, nodes)
        )
        of[links] = h
        inflow[h, links] = np.isin(net.node_a[links], inlet).astype(float) - np.isin(
            net.node_b[links], inlet
        )
        port_in = np.array(
            [sol.flow[links][net.node_a[links] == k].sum()
             - sol.flow[links][net.node_b[links] == k].sum() for k in nodes]
        )  # fmt: skip
        mu = sol.fluid.viscosity
        cdf.append(floor_distribution(key, sol.pressure[nodes], port_in, mu))
        s = chamber_sensitivity(key)
        sens.append([s.conductance_depth, s.conductance_width, s.shear_depth, s.shear_width])
        level.append(int(np.argmin(np.abs(level_depths - key.depth))))
        flow.append(float(inflow[h] @ sol.flow))
        row = rows[ch.name]["floor_shear"]
        shear.append([row["p05"], row["p50"], row["p95"]])
        names.append(ch.name)
    return {
        "chamber_of": of,
        "chamber_inflow": inflow,
        "chamber_level": np.array(level, dtype=np.int64),
        "chamber_sensitivity": np.array(sens, dtype=float).reshape(-1, 4),
        "chamber_flow": np.array(flow, dtype=float),
        "chamber_shear": np.array(shear, dtype=float).reshape(-1, 3),
        "chamber_cdf": tuple(cdf),
        "chamber_names": tuple(names),
    }


def window_bounds(window: dict) -> tuple[float, float]:
    """``(low, high)`` of a results window [Pa]; a missing end is 0 or infinity."""
    low, high = window.get("min"), window.get("max")
    return (0.0 if low is None else float(low), np.inf if high is None else float(high))
