"""Per-generation summaries of a solved network.

Channels that carry a generation (``generation >= 0``) are grouped by (role, generation):
a mirrored tree has distribution generations 0..n-1, the bed, then collection generations
n-1..0, and rows come out in that order (other roles after them). Grouping is vectorised;
only the handful of groups is looped over.

Examples
--------
>>> from chipflow.network import NetworkBuilder, solve
>>> from chipflow.physics.fluid import water
>>> b = NetworkBuilder()
>>> b.channel("trunk", "in", "j", width=200e-6, depth=50e-6, length=5e-3, generation=0,
...           role="distribution")
>>> for name in ("left", "right"):
...     b.channel(name, "j", "out", width=100e-6, depth=50e-6, length=5e-3, generation=1,
...               role="bed")
>>> sol = solve(b.build(), water(), pressures={"in": 1000.0, "out": 0.0})
>>> [(r.role, r.generation, r.count) for r in generation_rows(sol)]
[('distribution', 0, 1), ('bed', 1, 2)]
>>> rows = generation_rows(sol)
>>> abs(rows[0].flow_total - rows[1].flow_total) < 1e-12 * rows[0].flow_total   # continuity
True
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from chipflow.network.model import Network
from chipflow.network.solver import Solution
from chipflow.physics.duct import cross_section_area

__all__ = [
    "GenerationRow",
    "generation_rows",
    "level_groups",
    "level_rows",
    "port_pressure_range",
    "ROLE_ORDER",
]

#: Order of roles along the path from inlet to outlet.
ROLE_ORDER = ("tubing", "port", "distribution", "bed", "collection")


@dataclass(frozen=True)
class GenerationRow:
    """One generation of one role; flows and velocities are magnitudes.

    Attributes
    ----------
    role : str
    generation : int
    count : int
        Number of channels.
    flow_total : float
        Sum of channel flows [m^3/s].
    flow_min, flow_max : float
        Smallest and largest channel flow [m^3/s].
    velocity_min, velocity_max : float
        Mean velocity range over the channels [m/s].
    shear_floor_min, shear_floor_max : float
        Floor-centre wall shear range [Pa].
    shear_max : float
        Largest peak wall shear [Pa].
    pressure_drop_mean : float
        Mean pressure drop along one channel [Pa].
    residence_min, residence_max : float
        Residence time range [s].
    reynolds_max : float
        Largest Reynolds number [-].
    """

    role: str
    generation: int
    count: int
    flow_total: float
    flow_min: float
    flow_max: float
    velocity_min: float
    velocity_max: float
    shear_floor_min: float
    shear_floor_max: float
    shear_max: float
    pressure_drop_mean: float
    residence_min: float
    residence_max: float
    reynolds_max: float


def _order(role: str, generation: int) -> tuple:
    rank = ROLE_ORDER.index(role) if role in ROLE_ORDER else len(ROLE_ORDER)
    return (rank, -generation if role == "collection" else generation, role)


def level_groups(network: Network) -> list[tuple[str, int, np.ndarray]]:
    """The channels of each (role, generation), in order from inlet to outlet.

    Returns a list of ``(role, generation, channel indices)``; channels without a generation
    are left out. The grouping is vectorised; only the handful of groups is looped over.
    """
    tagged = np.flatnonzero(network.generation >= 0)
    if tagged.size == 0:
        return []
    roles, role_id = np.unique(network.role[tagged], return_inverse=True)
    n_gen = int(network.generation.max()) + 1
    key = role_id.astype(np.int64) * n_gen + network.generation[tagged]
    order = np.argsort(key, kind="stable")
    keys, starts = np.unique(key[order], return_index=True)
    members = np.split(tagged[order], starts[1:])
    groups = [
        (str(roles[int(k) // n_gen]), int(k) % n_gen, m) for k, m in zip(keys, members, strict=True)
    ]
    return sorted(groups, key=lambda g: _order(g[0], g[1]))


def generation_rows(solution: Solution) -> tuple[GenerationRow, ...]:
    """Per (role, generation) summary of the channels that carry a generation.

    Returns an empty tuple when no channel has a generation.
    """
    q = np.abs(solution.flow)
    u = np.abs(solution.mean_velocity)
    rows = []
    for role, generation, m in level_groups(solution.network):
        rows.append(
            GenerationRow(
                role=role,
                generation=generation,
                count=int(m.size),
                flow_total=float(q[m].sum()),
                flow_min=float(q[m].min()),
                flow_max=float(q[m].max()),
                velocity_min=float(u[m].min()),
                velocity_max=float(u[m].max()),
                shear_floor_min=float(solution.wall_shear_floor[m].min()),
                shear_floor_max=float(solution.wall_shear_floor[m].max()),
                shear_max=float(solution.wall_shear_max[m].max()),
                pressure_drop_mean=float(np.abs(solution.pressure_drop[m]).mean()),
                residence_min=float(solution.residence_time[m].min()),
                residence_max=float(solution.residence_time[m].max()),
                reynolds_max=float(solution.reynolds[m].max()),
            )
        )
    return tuple(rows)


def level_rows(solution: Solution) -> list[dict[str, Any]]:
    """One row per (role, generation) from inlet to outlet, means over the level's channels.

    Channels without a generation (tubing, plain channels) are left out. Pressures at the
    level's upstream and downstream ends are the means of its end-node pressures [Pa].
    """
    net = solution.network
    rows = []
    for role, generation, members in level_groups(net):
        q = np.abs(solution.flow[members])
        p_a = solution.pressure[net.node_a[members]]
        p_b = solution.pressure[net.node_b[members]]
        forward = solution.flow[members] >= 0
        p_in = np.where(forward, p_a, p_b)
        p_out = np.where(forward, p_b, p_a)
        w, h = net.width[members], net.depth[members]
        area = cross_section_area(w, h, net.round[members])
        rows.append(
            {
                "generation": int(generation),
                "role": str(role),
                "count": int(members.size),
                "width": float(w.mean()),
                "depth": float(h.mean()),
                "length": float(net.length[members].mean()),
                "total_area": float(area.sum()),
                "flow_per_channel": float(q.mean()),
                "flow_total": float(q.sum()),
                "mean_velocity": float(np.abs(solution.mean_velocity[members]).mean()),
                "wall_shear_floor": float(solution.wall_shear_floor[members].mean()),
                "wall_shear_mean": float(solution.wall_shear_mean[members].mean()),
                "wall_shear_max": float(solution.wall_shear_max[members].mean()),
                "reynolds": float(solution.reynolds[members].max()),
                "residence_time": float(solution.residence_time[members].mean()),
                "pressure_drop": float(np.abs(solution.pressure_drop[members]).mean()),
                "pressure_in": float(p_in.mean()),
                "pressure_out": float(p_out.mean()),
            }
        )
    return rows


def port_pressure_range(solution: Solution) -> tuple[float, float]:
    """Highest and lowest port pressure [Pa]: what the pump gives and where the liquid leaves."""
    nodes = [solution.network.node_index(name) for name in solution.port_flow]
    values = solution.pressure[nodes]
    return float(values.max()), float(values.min())
