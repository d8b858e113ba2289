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

from collections.abc import Mapping, Sequence
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
    "channel_rows",
    "channel_columns",
    "CHANNEL_KEYS",
    "port_pressure_range",
    "ROLE_ORDER",
    "generation_labels",
    "series_chains",
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
    are left out. A network of several culture regions (``Network.region``) has one group
    per (region, role, generation): the shared channels towards the regions first, then each
    region's levels (in the order of their first channel), then the shared channels after
    them. The grouping is vectorised; only the handful of groups is looped over.
    """
    tagged = np.flatnonzero(network.generation >= 0)
    if tagged.size == 0:
        return []
    roles, role_id = np.unique(network.role[tagged], return_inverse=True)
    names, region_id = np.unique(network.regions()[tagged], return_inverse=True)
    n_gen = int(network.generation.max()) + 1
    n_role = roles.size
    key = (region_id.astype(np.int64) * n_role + role_id) * n_gen + network.generation[tagged]
    order = np.argsort(key, kind="stable")
    keys, starts = np.unique(key[order], return_index=True)
    members = np.split(tagged[order], starts[1:])
    first = {}  # each region's rank: the order of its first channel
    for k, m in zip(keys, members, strict=True):  # a handful of groups
        name = str(names[int(k) // (n_role * n_gen)])
        first[name] = min(first.get(name, m[0]), m[0])
    rank = {name: i for i, name in enumerate(sorted((n for n in first if n), key=first.get))}
    groups = []
    for k, m in zip(keys, members, strict=True):
        region = str(names[int(k) // (n_role * n_gen)])
        role = str(roles[(int(k) // n_gen) % n_role])
        if region:
            bucket = 1 + rank[region]
        else:
            bucket = 0 if role in ("tubing", "port", "distribution") else 1 + len(rank)
        groups.append((bucket, role, int(k) % n_gen, m))
    groups.sort(key=lambda g: (g[0], *_order(g[1], g[2])))
    return [(role, generation, m) for _, role, generation, m in groups]


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


def series_chains(network: Network, members: np.ndarray) -> np.ndarray:
    """Which chain of segments in series each of a level's channels belongs to.

    A node where exactly one of the level's channels ends (``node_b``) and exactly one starts
    (``node_a``) joins the two in series: the segments of one bed channel of a mesh bed,
    split at its cross-connections (:mod:`chipflow.layout.mesh`). Without such nodes every
    channel is a chain of its own.

    Returns
    -------
    numpy.ndarray of int
        (len(members),) chain number of each member, 0 .. chains - 1, in order of first member.

    >>> from chipflow.network import NetworkBuilder
    >>> b = NetworkBuilder()
    >>> for name, a, z in (("p", "i", "m"), ("q", "m", "o"), ("r", "i", "o")):
    ...     b.channel(name, a, z, width=1e-4, depth=5e-5, length=1e-3)
    >>> series_chains(b.build(), np.arange(3)).tolist()
    [0, 0, 1]
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    members = np.asarray(members)
    a, b = network.node_a[members], network.node_b[members]
    n = network.n_nodes
    ends = np.bincount(b, minlength=n)
    starts = np.bincount(a, minlength=n)
    joint = (ends == 1) & (starts == 1)
    if not joint.any():
        return np.arange(members.size)
    into = np.full(n, -1)
    into[b] = np.arange(members.size)
    nxt = np.flatnonzero(joint[a])  # member whose start is a joint: joined to the one ending there
    link = coo_matrix((np.ones(nxt.size), (nxt, into[a[nxt]])), shape=(members.size, members.size))
    _, label = connected_components(link, directed=False)
    _, first = np.unique(label, return_index=True)
    rank = np.empty(first.size, dtype=int)
    rank[np.argsort(first)] = np.arange(first.size)
    return rank[label]


def level_rows(solution: Solution) -> list[dict[str, Any]]:
    """One row per (role, generation) from inlet to outlet, means over the level's channels.

    With culture regions, one row per (region, role, generation) (see :func:`level_groups`);
    every row's ``region`` names its region ("" for shared channels).

    Channels without a generation (tubing, plain channels, a mesh bed's cross-connections)
    are left out. Pressures at the level's upstream and downstream ends are the means of its
    end-node pressures [Pa]. Where a level's channels are chains of segments in series (a mesh
    bed, :func:`series_chains`), a channel is a chain: ``count``, ``length``, ``total_area``,
    ``flow_total``, ``residence_time``, ``pressure_drop`` and the pressures at the ends are
    those of whole chains (a chain's flow: the mean over its segments); widths, velocities,
    shear and the per-channel extremes of flow and shear are over the segments.
    """
    net = solution.network
    rows = []
    region = net.regions()
    for role, generation, members in level_groups(net):
        flow = solution.flow[members]
        q = np.abs(flow)
        chain = series_chains(net, members)
        k = int(chain.max()) + 1
        per = np.bincount(chain, minlength=k)

        def total(values, chain=chain, k=k):
            return np.bincount(chain, weights=values, minlength=k)

        p_a = solution.pressure[net.node_a[members]]
        p_b = solution.pressure[net.node_b[members]]
        forward = flow >= 0
        p_in = np.where(forward, p_a, p_b)
        p_out = np.where(forward, p_b, p_a)
        if k < members.size:  # the ends of each chain: its first and last segment
            order = np.argsort(chain, kind="stable")
            head = order[np.r_[0, np.cumsum(per)[:-1]]]
            tail = order[np.cumsum(per) - 1]
            p_in = np.where(forward[head], p_a[head], p_b[tail])
            p_out = np.where(forward[head], p_b[tail], p_a[head])
        w, h = net.width[members], net.depth[members]
        area = cross_section_area(w, h, net.round[members])
        residence = total(solution.residence_time[members])
        rows.append(
            {
                "generation": int(generation),
                "role": str(role),
                "region": str(region[members[0]]),
                "count": k,
                "width": float(w.mean()),
                "depth": float(h.mean()),
                "length": float(total(net.length[members]).mean()),
                "total_area": float((total(area) / per).sum()),
                "flow_per_channel": float(q.mean()),
                "flow_total": float((total(q) / per).sum()),
                "mean_velocity": float(np.abs(solution.mean_velocity[members]).mean()),
                "wall_shear_floor": float(solution.wall_shear_floor[members].mean()),
                "wall_shear_mean": float(solution.wall_shear_mean[members].mean()),
                "wall_shear_max": float(solution.wall_shear_max[members].mean()),
                "reynolds": float(solution.reynolds[members].max()),
                "residence_time": float(residence.mean()),
                "pressure_drop": float(total(np.abs(solution.pressure_drop[members])).mean()),
                "pressure_in": float(p_in.mean()),
                "pressure_out": float(p_out.mean()),
                # per-channel extremes of the level (equal to the mean in an even tree)
                "flow_min": float(q.min()),
                "flow_max": float(q.max()),
                "wall_shear_floor_min": float(solution.wall_shear_floor[members].min()),
                "wall_shear_floor_max": float(solution.wall_shear_floor[members].max()),
                "residence_time_min": float(residence.min()),
                "residence_time_max": float(residence.max()),
            }
        )
    return rows


def generation_labels(generations: Sequence[Mapping[str, Any]]) -> list[str]:
    """Short labels of levels along the path: ``d0, d1, ...`` (distribution), ``bed``, ``c1, c0``
    (collection); other roles keep their name and generation. A level of a culture region
    (a row whose ``region`` is not empty) is labelled after it: ``liver:d1``, ``liver:bed``.

    >>> generation_labels([{"generation": 0, "role": "distribution"},
    ...                    {"generation": 1, "role": "bed"},
    ...                    {"generation": 0, "role": "collection"}])
    ['d0', 'bed', 'c0']
    >>> generation_labels([{"generation": 2, "role": "bed", "region": "liver"}])
    ['liver:bed']
    """
    out = []
    for g in generations:
        role = str(g.get("role", ""))
        number = g.get("generation", "")
        region = str(g.get("region", "") or "")
        head = f"{region}:" if region else ""
        if role == "bed":
            out.append(f"{head}bed")
        elif role in ("distribution", "collection"):
            out.append(f"{head}{role[0]}{number}")
        else:
            out.append(f"{head}{role} {number}".strip())
    return out


#: Keys of :func:`channel_rows`, in order.
CHANNEL_KEYS = (
    "channel",
    "role",
    "generation",
    "from",
    "to",
    "width",
    "depth",
    "length",
    "round",
    "flow",
    "pressure_in",
    "pressure_out",
    "mean_velocity",
    "wall_shear_floor",
    "wall_shear_mean",
    "wall_shear_max",
    "reynolds",
    "residence_time",
    "region",
)


def channel_columns(solution: Solution) -> dict[str, np.ndarray]:
    """Every channel of the solved network as columns keyed by :data:`CHANNEL_KEYS` (SI).

    ``from``/``to`` are the end nodes as given; ``flow`` is signed (positive from ``from`` to
    ``to``); ``pressure_in``/``pressure_out`` are the upstream and downstream end pressures;
    ``region`` is the channel's culture region ("" for shared channels and tubing).
    """
    net = solution.network
    nodes = np.asarray(net.node_names, dtype=object)
    forward = solution.flow >= 0
    p_a, p_b = solution.pressure[net.node_a], solution.pressure[net.node_b]
    return {
        "channel": np.asarray(net.channel_names(), dtype=object),
        "role": net.role,
        "generation": net.generation,
        "from": nodes[net.node_a],
        "to": nodes[net.node_b],
        "width": net.width,
        "depth": net.depth,
        "length": net.length,
        "round": net.round,
        "flow": solution.flow,
        "pressure_in": np.where(forward, p_a, p_b),
        "pressure_out": np.where(forward, p_b, p_a),
        "mean_velocity": solution.mean_velocity,
        "wall_shear_floor": solution.wall_shear_floor,
        "wall_shear_mean": solution.wall_shear_mean,
        "wall_shear_max": solution.wall_shear_max,
        "reynolds": solution.reynolds,
        "residence_time": solution.residence_time,
        "region": net.regions(),
    }


def channel_rows(solution: Solution) -> list[dict[str, Any]]:
    """One JSON-able dict per channel (SI floats), in the network's channel order.

    >>> from chipflow.network import NetworkBuilder, solve
    >>> from chipflow.physics.fluid import water
    >>> b = NetworkBuilder()
    >>> b.channel("a", "in", "out", width=200e-6, depth=50e-6, length=5e-3)
    >>> row = channel_rows(solve(b.build(), water(), pressures={"in": 100.0, "out": 0.0}))[0]
    >>> row["channel"], row["from"], row["to"], row["pressure_in"], row["round"]
    ('a', 'in', 'out', 100.0, False)
    """
    columns = {k: v.tolist() for k, v in channel_columns(solution).items()}
    return [
        dict(zip(CHANNEL_KEYS, values, strict=True))
        for values in zip(*columns.values(), strict=True)
    ]


def port_pressure_range(solution: Solution) -> tuple[float, float]:
    """Highest and lowest port pressure [Pa]: what the pump gives and where the liquid leaves."""
    nodes = [solution.network.node_index(name) for name in solution.port_flow]
    values = solution.pressure[nodes]
    return float(values.max()), float(values.min())
