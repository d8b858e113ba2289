"""The hydraulic network of a sized tree, before layout (nominal lengths).

Used to verify a :class:`~chipflow.design.model.TreeDesign` with the network solver and for the
per-generation table of ``chipflow check``. Once the layout exists, the network extracted from
the drawing replaces this one (same channel roles and generations, drawn lengths).

Node numbering: 0 is the inlet, 1 the outlet; the split nodes after distribution generation
``g`` and the merge nodes before collection generation ``g`` follow, one per channel of the
generation. Channel ``j`` of a level whose channels split into ``s`` connects to node
``j // s`` of the level before, so the whole tree is built with integer arithmetic on arrays.
"""

from __future__ import annotations

import numpy as np

from chipflow.design.model import TreeDesign
from chipflow.network import Network, Solution, solve

__all__ = ["tree_arrays", "tree_network", "solve_tree"]


def tree_arrays(design: TreeDesign) -> dict[str, np.ndarray]:
    """Per-channel arrays of the mirrored tree (inlet to outlet, level by level).

    Returns
    -------
    dict
        ``node_a``, ``node_b`` (int), ``width``, ``depth``, ``length`` [m], ``round`` (bool),
        ``generation`` (int), ``role`` (str), ``level`` (index into ``design.levels``), and
        ``n_nodes``.

    Examples
    --------
    >>> from chipflow.design.model import Level, TreeDesign
    >>> from chipflow.physics.fluid import water
    >>> lv = [Level(0, "distribution", 1, 2e-4, 5e-5, 1e-3, 1e-9),
    ...       Level(1, "bed", 2, 1e-4, 5e-5, 1e-3, 5e-10),
    ...       Level(0, "collection", 1, 2e-4, 5e-5, 1e-3, 1e-9)]
    >>> a = tree_arrays(TreeDesign("t", water(), 1e-9, tuple(lv)))
    >>> a["node_a"].tolist(), a["node_b"].tolist()
    ([0, 2, 2, 3], [2, 3, 3, 1])
    """
    n = design.generations
    splits = design.splits
    counts = np.cumprod([1, *splits])  # channels per generation 0..n
    # first node index of the split nodes after distribution generation g, and of the merge
    # nodes before collection generation g (one per channel of generation g)
    split = 2 + np.concatenate(([0], np.cumsum(counts[:n])))[:n]
    inner = int(counts[:n].sum())
    merge = 2 + inner + split - 2
    n_nodes = 2 + 2 * inner
    a_parts, b_parts, level_parts = [], [], []
    for index, level in enumerate(design.levels):
        g, j = level.generation, np.arange(level.count)
        s = splits[g - 1] if g > 0 else 1  # children per channel of the generation before
        if level.role == "distribution":
            a = np.zeros(level.count, int) if g == 0 else split[g - 1] + j // s
            b = split[g] + j
        elif level.role == "bed":
            a = np.zeros(level.count, int) if n == 0 else split[n - 1] + j // s
            b = np.ones(level.count, int) if n == 0 else merge[n - 1] + j // s
        else:
            a = merge[g] + j
            b = np.ones(level.count, int) if g == 0 else merge[g - 1] + j // s
        a_parts.append(a)
        b_parts.append(b)
        level_parts.append(np.full(level.count, index))
    level_of = np.concatenate(level_parts)
    pick = np.array(
        [(lv.width, lv.depth, lv.length, lv.round, lv.generation) for lv in design.levels],
        dtype=float,
    )[level_of]
    roles = np.array([lv.role for lv in design.levels])[level_of]
    return {
        "node_a": np.concatenate(a_parts).astype(int),
        "node_b": np.concatenate(b_parts).astype(int),
        "width": pick[:, 0],
        "depth": pick[:, 1],
        "length": pick[:, 2],
        "round": pick[:, 3].astype(bool),
        "generation": pick[:, 4].astype(int),
        "role": roles,
        "level": level_of,
        "n_nodes": np.int64(n_nodes),
    }


def tree_network(design: TreeDesign) -> Network:
    """A :class:`~chipflow.network.Network` of the design with nodes "inlet" and "outlet"."""
    arr = tree_arrays(design)
    names = ["inlet", "outlet"] + [f"j{i}" for i in range(2, int(arr["n_nodes"]))]
    return Network.from_arrays(
        arr["node_a"],
        arr["node_b"],
        arr["width"],
        arr["depth"],
        arr["length"],
        round=arr["round"],
        generation=arr["generation"],
        role=arr["role"],
        node_names=names,
    )


def solve_tree(design: TreeDesign) -> Solution:
    """Solve the design's network with the design flow into the inlet, outlet at 0 Pa."""
    return solve(
        tree_network(design),
        design.fluid,
        pressures={"outlet": 0.0},
        flows={"inlet": design.total_flow},
    )
