"""The hydraulic network of a drawn chip.

Nodes are the layout's nodes: the inlet and outlet (at the rim of the port holes, since the
punched hole itself adds no resistance) and every junction centre. Each drawn channel becomes
one network channel between its two nodes, with its width, depth and the exact length of its
drawn centreline, arcs counted as true circular arcs.

How junctions are counted: centrelines run from junction centre to junction centre, so the
junction area is shared out to the channels that meet there, each up to the centre, and each
junction is then counted once by its equivalent-length correction
(:mod:`chipflow.layout.junctions`): a 2D solve of the junction as drawn gives the excess
resistance over those centreline lengths, added to the length of the parent channel (the one
on the trunk's side). So a channel's network ``length`` is its drawn centreline length plus,
for a tree channel that ends in a split (or starts at a merge), that junction's correction.
The widths are the drawn ones (a whole number of grid steps, checked on the mask).
"""

from __future__ import annotations

import numpy as np

from chipflow.errors import LayoutError
from chipflow.layout.junctions import junction_excess_length
from chipflow.layout.model import Layout
from chipflow.network import Network

__all__ = ["extract_network", "junction_lengths", "unsolved_junctions"]


def junction_lengths(layout: Layout) -> np.ndarray:
    """Equivalent-length correction of every drawn channel [m] (0 where none applies).

    Raises
    ------
    LayoutError
        When a correction would leave a channel with no positive length.
    """
    ch = layout.channels
    extra = np.zeros(ch.length.size)
    for role, generation, junction in layout.junctions:  # one per level, not per channel
        sel = (ch.role == role) & (ch.generation == generation)
        extra[sel] = junction_excess_length(junction)
    extra = np.nan_to_num(extra, nan=0.0)  # unsolved junctions: see unsolved_junctions()
    short = ch.length + extra <= 0
    if np.any(short):
        i = int(np.flatnonzero(short)[0])
        raise LayoutError(
            f"{ch.role[i]} generation {ch.generation[i]}: the junction correction "
            f"{extra[i] * 1e6:.1f} um exceeds the drawn length {ch.length[i] * 1e6:.1f} um"
        )
    return extra


def unsolved_junctions(layout: Layout) -> list[str]:
    """Warnings for the junctions whose 2D solve failed: their channels keep the plain
    centre-to-centre lengths (the solves are cached, so asking again costs nothing)."""
    return [
        f"the junction at the end of {role} generation {generation} could not be solved in "
        "2D: its channels keep their centre-to-centre lengths, which overstate the "
        "resistance by a few percent"
        for role, generation, junction in layout.junctions
        if np.isnan(junction_excess_length(junction))
    ]


def extract_network(layout: Layout, junctions: bool = True) -> Network:
    """The channel network of a drawn layout, for :func:`chipflow.network.solve`.

    Parameters
    ----------
    layout : Layout
        A drawn chip (see :func:`chipflow.layout.draw`).
    junctions : bool
        Add each junction's equivalent-length correction to its parent channel (default);
        False gives the plain centre-to-centre lengths.

    Returns
    -------
    Network
        One channel per drawn channel, in the same order, named ``<role><generation>.<index>``;
        nodes named as in ``layout.node_names`` ("inlet", "outlet", "split<k>.<i>",
        "merge<k>.<i>").
    """
    ch = layout.channels
    names = np.char.add(
        np.char.add(np.char.add(ch.role.astype(str), ch.generation.astype(str)), "."),
        ch.index.astype(str),
    )
    length = ch.length + (junction_lengths(layout) if junctions else 0.0)
    return Network.from_arrays(
        ch.node_a,
        ch.node_b,
        ch.width,
        ch.depth,
        length,
        names=list(names),
        generation=ch.generation,
        role=ch.role,
        node_names=layout.node_names,
    )
