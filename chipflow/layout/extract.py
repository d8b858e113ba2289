"""The hydraulic network of a drawn chip.

Nodes are the layout's nodes: the inlet and outlet (at the rim of the port holes, since the
punched hole itself adds no resistance) and every junction centre. Each drawn channel becomes
one network channel between its two nodes, with its width, depth and the exact length of its
drawn centreline, arcs counted as true circular arcs.

How junctions are counted: centrelines run from junction centre to junction centre, so the
junction area is shared out to the channels that meet there, each up to the centre. Nothing
is counted twice (no channel runs past a centre) and nothing is lost (every stretch of
centreline between two centres belongs to exactly one channel). The junction's own small
minor loss is neglected, as is usual at the low Reynolds numbers of perfusion chips.
"""

from __future__ import annotations

import numpy as np

from chipflow.layout.model import Layout
from chipflow.network import Network

__all__ = ["extract_network"]


def extract_network(layout: Layout) -> Network:
    """The channel network of a drawn layout, for :func:`chipflow.network.solve`.

    Parameters
    ----------
    layout : Layout
        A drawn chip (see :func:`chipflow.layout.draw`).

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
    return Network.from_arrays(
        ch.node_a,
        ch.node_b,
        ch.width,
        ch.depth,
        ch.length,
        names=list(names),
        generation=ch.generation,
        role=ch.role,
        node_names=layout.node_names,
    )
