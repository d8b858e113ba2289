"""The flows of a mesh bed: its cross-connections, and what narrowing one bed channel does.

A mesh bed (``[bed] kind = "mesh"``, :mod:`chipflow.layout.mesh`) joins neighbouring bed
channels by cross-connections (role ``"cross"``). Where every bed channel sees the same
resistance along its length, the pressures of neighbouring channels are equal at every row
and the cross-connections carry nothing; where they do not (the outermost channels meet a
T at each row, the others a four-arm junction; a channel narrowed by a blocked stretch or a
fabrication fault), liquid crosses over. :func:`cross_flows` measures that on a solved
network; :func:`narrowed_bed` re-solves the same network with one bed channel's width
scaled, to show the redistribution.

Shares are of the mean flow of one bed channel (the bed's total flow over its number of
channels), so "1e-3" means a cross-connection carries a thousandth of what a bed channel does.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from chipflow.errors import ArgumentError
from chipflow.network.model import Network, NodeKey
from chipflow.network.solver import Solution, solve
from chipflow.network.summary import level_groups, series_chains

__all__ = ["CROSS_ROLE", "bed_channels", "cross_flows", "narrowed_bed"]

#: Role of a cross-connection (the same as :data:`chipflow.layout.mesh.CROSS_ROLE`).
CROSS_ROLE = "cross"


def _bed_chains(network: Network) -> tuple[np.ndarray, np.ndarray]:
    """The bed level's channels and the bed channel (chain of segments) of each."""
    beds = [m for role, _, m in level_groups(network) if role == "bed"]
    if not beds:
        raise ArgumentError("the network has no bed channels (role 'bed')")
    members = np.concatenate(beds)
    return members, series_chains(network, members)


def bed_channels(network: Network) -> tuple[list[str], list[np.ndarray]]:
    """The bed channels of a tree's network: each one's name and its segments' indices.

    A mesh bed's channel ``bed<n>.<i>`` is the chain of segments ``bed<n>.<i>.<k>``; a plain
    bed's channel is one network channel of that name.

    Raises
    ------
    ArgumentError
        When the network has no bed level.
    """
    members, chain = _bed_chains(network)
    order = np.argsort(chain, kind="stable")  # each chain's segments together, in order
    cut = np.flatnonzero(np.diff(chain[order])) + 1
    out_members = np.split(members[order], cut)
    names = network.channel_names()
    first = members[order[np.r_[0, cut]]]
    out_names = [  # one name per bed channel
        str(names[int(f)]).rsplit(".", 1)[0] if m.size > 1 else str(names[int(f)])
        for f, m in zip(first, out_members, strict=True)
    ]
    return out_names, out_members


def cross_flows(solution: Solution) -> dict[str, Any] | None:
    """The cross-connection flows of a solved mesh bed (None without cross-connections).

    Returns
    -------
    dict
        ``cross_connections`` (count), ``bed_channel_flow`` (mean flow of one bed channel
        [m^3/s]), ``cross_flow_max`` (the largest absolute flow of a cross-connection [m^3/s]),
        ``cross_flow_max_share`` (that over ``bed_channel_flow`` [-]) and
        ``cross_flow_max_channel`` (its name).
    """
    net = solution.network
    cross = np.flatnonzero(net.role == CROSS_ROLE)
    if cross.size == 0:
        return None
    beds, chain = _bed_chains(net)
    q = np.abs(solution.flow)
    # the mean over bed channels of each channel's mean over its segments
    per_channel = float(np.mean(np.bincount(chain, q[beds]) / np.bincount(chain)))
    i = int(cross[np.argmax(q[cross])])
    return {
        "cross_connections": int(cross.size),
        "bed_channel_flow": per_channel,
        "cross_flow_max": float(q[i]),
        "cross_flow_max_share": float(q[i] / per_channel) if per_channel > 0 else 0.0,
        "cross_flow_max_channel": net.channel_name(i),
    }


def narrowed_bed(
    solution: Solution,
    channel: str,
    factor: float,
    pressures: Mapping[NodeKey, float] | None = None,
    flows: Mapping[NodeKey, float] | None = None,
) -> dict[str, Any]:
    """Re-solve ``solution``'s network with one bed channel's width scaled by ``factor``.

    Every segment of the bed channel named ``channel`` (``bed<n>.<i>``) gets ``factor`` times
    its width; lengths, junction corrections and the boundary conditions stay as they are
    (a network what-if: the narrowed channel is not redrawn, and its junction corrections are
    those of its drawn width). The solve is the same rigid nodal analysis
    (:func:`chipflow.network.solve`).

    Parameters
    ----------
    solution : Solution
        The solved network.
    channel : str
        A bed channel's name (see :func:`bed_channels`).
    factor : float
        Width factor, 0 < factor <= 1 for a narrowed channel [-].
    pressures, flows : mapping, optional
        The boundary conditions ``solution`` was solved with (node to pressure [Pa], node to
        inflow [m^3/s]).

    Returns
    -------
    dict
        ``channel``, ``width_factor``, ``cross_flow_max_share`` (of the re-solved network,
        as in :func:`cross_flows`), ``solution`` (the re-solved :class:`Solution`) and
        ``channels``: the narrowed channel and its neighbours across the bed, each with
        ``channel``, ``flow`` and ``flow_narrowed`` (the mean absolute flow of its segments
        [m^3/s]).

    Raises
    ------
    ArgumentError
        An unknown bed channel or a factor outside (0, 1].
    """
    if not 0.0 < factor <= 1.0:
        raise ArgumentError(f"width factor {factor!r}: give a number in (0, 1]")
    net = solution.network
    names, members = bed_channels(net)
    if channel not in names:
        raise ArgumentError(f"{channel!r} is not a bed channel; they are {names[0]} to {names[-1]}")
    k = names.index(channel)
    width = net.width.copy()
    width[members[k]] *= factor
    scaled = Network.from_arrays(
        net.node_a,
        net.node_b,
        width,
        net.depth,
        net.length,
        round=net.round,
        names=net.channel_names(),
        generation=net.generation,
        role=net.role,
        node_names=net.node_names,
        region=net.region,
    )
    after = solve(scaled, solution.fluid, pressures=pressures, flows=flows)
    q0, q1 = np.abs(solution.flow), np.abs(after.flow)
    rows = []
    for j in range(max(k - 1, 0), min(k + 2, len(names))):  # the channel and its neighbours
        rows.append(
            {
                "channel": names[j],
                "flow": float(q0[members[j]].mean()),
                "flow_narrowed": float(q1[members[j]].mean()),
            }
        )
    found = cross_flows(after)
    return {
        "channel": channel,
        "width_factor": float(factor),
        "cross_flow_max_share": None if found is None else found["cross_flow_max_share"],
        "channels": rows,
        "solution": after,
    }
