"""The hydraulic network of a drawn chip.

Nodes are the layout's nodes: the ports (a tree's inlet and outlet at the rim of their punched
holes, an explicit network's port nodes at the hole's centre, its channels starting at the
rim) and every junction centre. Each drawn channel becomes one network channel between its two
nodes, with its width, depth and the exact length of its drawn centreline, arcs counted as
true circular arcs (a run whose walls the grid moves counts at the width the mask has: see
:attr:`~chipflow.layout.model.DrawnChannels.hydraulic_length`).

How pieces are counted: centrelines run from junction centre to junction centre, so the area
of a junction is shared out to the channels that meet there, each up to the centre; and a
channel leaving a port starts at the rim of the punched hole. Each piece of the drawing
(:class:`~chipflow.layout.model.Pieces`) is then counted once by its equivalent lengths from
a 2D solve of the piece as drawn (:mod:`chipflow.layout.pieces`): a symmetric split of a tree
adds its correction to the parent channel (the one on the trunk's side), any other junction
one correction to each arm's channel (the arms of a star equivalent to the 2D piece), a port
step one to its channel. So a channel's network ``length`` is its drawn length plus the
corrections of the pieces at its two ends. The widths are the drawn ones (a whole number of
grid steps, checked on the mask).
"""

from __future__ import annotations

import numpy as np

from chipflow.errors import LayoutError
from chipflow.layout import pieces as _pieces
from chipflow.layout.model import Layout
from chipflow.network import Network

__all__ = [
    "extract_network",
    "piece_lengths",
    "junction_lengths",
    "unsolved_pieces",
    "unsolved_junctions",
    "channel_names",
    "chamber_channels",
    "with_chambers",
]


def channel_names(layout: Layout) -> list[str]:
    """Network names of the drawn channels: the design's names, else
    ``<role><generation>.<index>``, after ``<region>:`` for a culture region's channels."""
    ch = layout.channels
    if ch.names is not None:
        return [str(s) for s in ch.names]
    names = np.char.add(
        np.char.add(np.char.add(ch.role.astype(str), ch.generation.astype(str)), "."),
        ch.index.astype(str),
    )
    if ch.region is not None:
        region = ch.region.astype(str)
        names = np.where(region != "", np.char.add(np.char.add(region, ":"), names), names)
    return list(names)


def piece_lengths(layout: Layout, kinds: tuple[str, ...] | None = None) -> np.ndarray:
    """Equivalent-length correction of every drawn channel [m] (0 where none applies).

    Parameters
    ----------
    layout : Layout
    kinds : tuple of str, optional
        Only pieces of these kinds ("fan", "junction", "port"); default all.

    Raises
    ------
    LayoutError
        When the corrections would leave a channel with no positive length.
    """
    ch = layout.channels
    extra = np.zeros(ch.length.size)
    pieces = layout.pieces
    if pieces is None or pieces.size == 0:
        return extra
    for kid, key in enumerate(pieces.keys):  # one solve per distinct geometry
        sel = pieces.key == kid
        if kinds is not None and not np.any(np.isin(pieces.kind[sel], kinds)):
            continue
        lengths = np.nan_to_num(np.asarray(_pieces.solve_piece(key).lengths, float), nan=0.0)
        for arm, dl in enumerate(lengths):  # a handful of arms
            chans = pieces.arm_channel[sel, arm]
            np.add.at(extra, chans[chans >= 0], dl)
    base = ch.length if ch.hydraulic_length is None else ch.hydraulic_length
    short = base + extra <= 0
    if np.any(short):
        i = int(np.flatnonzero(short)[0])
        label = (
            repr(str(ch.names[i]))
            if ch.names is not None
            else f"{ch.role[i]} generation {ch.generation[i]}"
        )
        raise LayoutError(
            f"{label}: the junction corrections {extra[i] * 1e6:.1f} um exceed the drawn length "
            f"{ch.length[i] * 1e6:.1f} um; draw the channel longer (its junctions are closer "
            "than a few channel widths)"
        )
    return extra


#: The name this function had when only tree junctions were counted.
junction_lengths = piece_lengths


def _where(layout: Layout, kind: str, arm_channel: np.ndarray, node: int) -> str:
    ch = layout.channels
    first = int(arm_channel[arm_channel >= 0][0])
    label = (
        f"channel {str(ch.names[first])!r}"
        if ch.names is not None
        else f"{ch.role[first]} generation {ch.generation[first]}"
    )
    if kind == "port":
        return f"the step from the {layout.node_names[node]} port into {label}"
    if kind == "fan":
        return f"the junction at the end of {label}"
    return f"the junction at node {layout.node_names[node]!r}"


def unsolved_pieces(layout: Layout) -> list[str]:
    """Warnings for the pieces whose 2D solve failed: their channels keep the plain
    centre-to-centre (rim-to-centre) lengths (the solves are cached, so asking again costs
    nothing)."""
    pieces = layout.pieces
    if pieces is None:
        return []
    out = []
    for kid, key in enumerate(pieces.keys):  # one per distinct geometry
        if not np.any(np.isnan(_pieces.solve_piece(key).lengths)):
            continue
        first = int(np.flatnonzero(pieces.key == kid)[0])
        place = _where(
            layout, str(pieces.kind[first]), pieces.arm_channel[first], pieces.node[first]
        )
        out.append(
            f"{place} could not be solved in 2D: its channels keep their centre-to-centre "
            "lengths, which misstate the resistance by up to a few percent"
        )
    return out


#: The name this function had when only tree junctions were counted.
unsolved_junctions = unsolved_pieces


def chamber_channels(name: str, key, nodes) -> dict[str, np.ndarray | list]:
    """The network channels of one chamber: its links (:func:`~chipflow.layout.chamber.
    chamber_links`), each an equivalent duct of the chamber's depth whose floor is its share
    of the chamber's (:func:`~chipflow.layout.chamber.link_floors`; together they have the
    chamber's floor and volume).

    Parameters
    ----------
    name : str
        The chamber's name: its one link's name, or the prefix of ``NAME.in1-out2``, ...
    key : ChamberKey
    nodes : sequence of int
        The network node of each port of the key.

    Raises
    ------
    LayoutError
        When the chamber cannot be meshed or solved in 2D (it has no network without).
    """
    from chipflow.errors import FieldError
    from chipflow.layout.chamber import chamber_links, link_floors, link_widths, solve_chamber
    from chipflow.physics.duct import resistance

    try:
        pairs, g, _ = chamber_links(key)
    except FieldError as exc:
        raise LayoutError(f"chamber {name!r} could not be solved in 2D: {exc}") from None
    sol = solve_chamber(key)
    width = link_widths(g, key.depth, link_floors(key, pairs, g, sol.floor_area))
    length = 1.0 / (g * np.asarray(resistance(width, key.depth, 1.0, 1.0), float))
    sides = [p.side for p in key.ports]
    labels, counter = [], [0, 0]
    for side in sides:  # a handful of ports
        counter[side] += 1
        labels.append(f"{'in' if side == 0 else 'out'}{counter[side]}")
    names = (
        [name]
        if len(pairs) == 1
        else [f"{name}.{labels[i]}-{labels[j]}" for i, j in pairs.tolist()]
    )
    nodes = np.asarray(nodes, dtype=int)
    return {
        "node_a": nodes[pairs[:, 0]],
        "node_b": nodes[pairs[:, 1]],
        "width": width,
        "depth": np.full(len(pairs), float(key.depth)),
        "length": length,
        "names": names,
    }


def with_chambers(network: Network, chambers) -> Network:
    """``network`` with each chamber's links appended after its channels (role "chamber",
    no generation).

    Parameters
    ----------
    network : Network
    chambers : sequence of (name, key, nodes)
        Each chamber's name, :class:`~chipflow.layout.chamber.ChamberKey` and the network
        node (index or name) of each of its ports.
    """
    if not chambers:
        return network
    parts = []
    for name, key, nodes in chambers:  # a handful of chambers
        index = [network.node_index(n) for n in nodes]
        parts.append(chamber_channels(name, key, index))
    cat = {k: np.concatenate([p[k] for p in parts]) for k in ("node_a", "node_b", "width",
                                                               "depth", "length")}  # fmt: skip
    names = [n for p in parts for n in p["names"]]
    k = cat["width"].size
    return Network.from_arrays(
        np.r_[network.node_a, cat["node_a"]],
        np.r_[network.node_b, cat["node_b"]],
        np.r_[network.width, cat["width"]],
        np.r_[network.depth, cat["depth"]],
        np.r_[network.length, cat["length"]],
        round=np.r_[network.round, np.zeros(k, bool)],
        names=[*network.channel_names(), *names],
        generation=np.r_[network.generation, np.full(k, -1)],
        role=np.r_[network.role, np.full(k, "chamber")],
        node_names=network.node_names,
    )


def extract_network(layout: Layout, junctions: bool = True) -> Network:
    """The channel network of a drawn layout, for :func:`chipflow.network.solve`.

    Parameters
    ----------
    layout : Layout
        A drawn chip (see :func:`chipflow.layout.draw`).
    junctions : bool
        Add each piece's equivalent-length corrections to its channels (default); False gives
        the plain drawn lengths.

    Returns
    -------
    Network
        One channel per drawn channel, in the same order, named as given by the design or
        ``<role><generation>.<index>``; then each chamber's links (:func:`with_chambers`);
        nodes named as in ``layout.node_names`` (a tree's "inlet", "outlet", "split<k>.<i>",
        "merge<k>.<i>").
    """
    ch = layout.channels
    base = ch.length if ch.hydraulic_length is None else ch.hydraulic_length
    length = base + (piece_lengths(layout) if junctions else 0.0)
    network = Network.from_arrays(
        ch.node_a,
        ch.node_b,
        ch.width,
        ch.depth,
        length,
        names=channel_names(layout),
        generation=ch.generation,
        role=ch.role,
        node_names=layout.node_names,
        region=ch.region,
    )
    return with_chambers(network, [(c.name, c.key, c.port_nodes) for c in layout.chambers])
