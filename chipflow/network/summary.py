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

import numpy as np

from chipflow.network.solver import Solution

__all__ = ["GenerationRow", "generation_rows", "ROLE_ORDER"]

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


def generation_rows(solution: Solution) -> tuple[GenerationRow, ...]:
    """Per (role, generation) summary of the channels that carry a generation.

    Returns an empty tuple when no channel has a generation.
    """
    net = solution.network
    tagged = np.flatnonzero(net.generation >= 0)
    if tagged.size == 0:
        return ()
    roles, role_id = np.unique(net.role[tagged], return_inverse=True)
    key = role_id.astype(np.int64) * (int(net.generation.max()) + 1) + net.generation[tagged]
    groups, inverse = np.unique(key, return_inverse=True)
    sort = np.argsort(inverse, kind="stable")
    starts = np.searchsorted(inverse[sort], np.arange(groups.size))
    idx = tagged[sort]

    def reduce(values: np.ndarray, ufunc) -> np.ndarray:
        return ufunc.reduceat(values[idx], starts)

    q = np.abs(solution.flow)
    u = np.abs(solution.mean_velocity)
    counts = np.diff(np.append(starts, idx.size))
    stats = {
        "flow_total": reduce(q, np.add),
        "flow_min": reduce(q, np.minimum),
        "flow_max": reduce(q, np.maximum),
        "velocity_min": reduce(u, np.minimum),
        "velocity_max": reduce(u, np.maximum),
        "shear_floor_min": reduce(solution.wall_shear_floor, np.minimum),
        "shear_floor_max": reduce(solution.wall_shear_floor, np.maximum),
        "shear_max": reduce(solution.wall_shear_max, np.maximum),
        "pressure_drop_mean": reduce(np.abs(solution.pressure_drop), np.add) / counts,
        "residence_min": reduce(solution.residence_time, np.minimum),
        "residence_max": reduce(solution.residence_time, np.maximum),
        "reynolds_max": reduce(solution.reynolds, np.maximum),
    }
    n_gen = int(net.generation.max()) + 1
    rows = [
        GenerationRow(
            role=str(roles[int(k) // n_gen]),
            generation=int(k) % n_gen,
            count=int(counts[i]),
            **{name: float(values[i]) for name, values in stats.items()},
        )
        for i, k in enumerate(groups)
    ]
    return tuple(sorted(rows, key=lambda r: _order(r.role, r.generation)))
