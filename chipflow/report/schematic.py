"""A drawn schematic of an explicit network: nodes, channels, flows and floor wall shear.

An explicit network has no drawing on a chip, so the report draws its graph instead. Nodes are
placed in columns by their distance (in channels) downstream of the inlets, following the
solved flow direction, and ordered within a column next to the nodes that feed them; each
channel is a line from node to node whose colour is its floor wall shear (on the scale of the
cell type's window, :func:`shear_scale`), whose thickness grows with its flow, with an arrow
in the direction of the flow and a label giving its name, flow and shear. Tubing is dashed.

Everything comes from the results dict (``results["channels"]``, SI floats); nothing is
recomputed. matplotlib is imported inside the functions and used without pyplot.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

__all__ = ["network_schematic", "node_positions", "shear_scale", "LABEL_LIMIT"]

#: Above this many channels the schematic leaves out the per-channel labels.
LABEL_LIMIT = 60

_INK = "#24313d"


def shear_scale(window: Mapping[str, Any] | None, values: np.ndarray) -> tuple[float, float]:
    """The colour range [Pa] for floor wall shear: from zero to twice the window's top.

    With a window the scale is fixed by the cells, not by the values, so channels inside the
    window are mid-scale and a few percent of difference shows as a few percent of colour.
    Without a window the range is zero to the largest value.

    >>> shear_scale({"min": 0.5, "max": 1.0}, np.array([0.74, 0.80]))
    (0.0, 2.0)
    >>> shear_scale(None, np.array([0.74, 0.80]))
    (0.0, 0.8)
    """
    if window and window.get("max") is not None:
        return 0.0, 2.0 * float(window["max"])
    finite = np.abs(values[np.isfinite(values)])
    top = float(finite.max()) if finite.size else 1.0
    return 0.0, top if top > 0 else 1.0


def node_positions(
    upstream: np.ndarray, downstream: np.ndarray, n_nodes: int, active: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Column and row of every node of a flow-oriented graph.

    Parameters
    ----------
    upstream, downstream : numpy.ndarray of int
        The upstream and downstream node of each channel (by the solved flow direction).
    n_nodes : int
    active : numpy.ndarray of bool
        Channels that carry flow; still channels do not order their ends.

    Returns
    -------
    column, row : numpy.ndarray of float
        Column: the longest chain of flowing channels from an inlet to the node (the flow
        graph has no cycle, since pressure falls along every flowing channel). Row: centred
        within the column, nodes ordered by the mean row of the nodes that feed them.

    Examples
    --------
    A split into two branches that join again:

    >>> up, down = np.array([0, 1, 1, 2, 3]), np.array([1, 2, 3, 4, 4])
    >>> column, row = node_positions(up, down, 5, np.ones(5, bool))
    >>> column.tolist(), row.tolist()
    ([0.0, 1.0, 2.0, 2.0, 3.0], [0.0, 0.0, -0.5, 0.5, 0.0])
    """
    column = np.zeros(n_nodes)
    u, d = upstream[active], downstream[active]
    for _ in range(n_nodes):  # relaxation: at most one pass per node along the longest chain
        new = column.copy()
        np.maximum.at(new, d, column[u] + 1)
        if np.array_equal(new, column):
            break
        column = new
    row = np.zeros(n_nodes)
    order = np.arange(n_nodes, dtype=float)  # first-named nodes first in the first column
    a = np.concatenate([upstream, downstream])
    b = np.concatenate([downstream, upstream])
    for c in np.unique(column):  # one pass per column, not per channel
        members = np.flatnonzero(column == c)
        feeding = (column[b] < c) & np.isin(a, members)
        total = np.zeros(n_nodes)
        count = np.zeros(n_nodes)
        np.add.at(total, a[feeding], row[b[feeding]])
        np.add.at(count, a[feeding], 1)
        key = np.where(count[members] > 0, total[members] / np.maximum(count[members], 1), 0.0)
        ranked = members[np.lexsort((order[members], key))]
        row[ranked] = np.arange(ranked.size) - (ranked.size - 1) / 2
    return column, row


def _label_places(segments: np.ndarray) -> list[tuple[float, float, str, str]]:
    """Where each channel's label goes: beside its line, at the middle or a third of the way
    along, on the side and at the place whose box overlaps no label placed before it.

    Greedy over the labels (at most :data:`LABEL_LIMIT`), in data units: one column of nodes is
    one unit wide, one row one unit high, and a two-line label about 1.1 x 0.35 units.
    """
    box_w, box_h, gap = 1.1, 0.35, 0.06
    step = segments[:, 1] - segments[:, 0]
    length = np.hypot(step[:, 0], step[:, 1])
    unit = step / np.where(length > 0, length, 1.0)[:, None]
    placed: list[tuple[float, float]] = []  # box centres
    out = []
    for i in range(len(segments)):  # labels only, capped at LABEL_LIMIT
        options = []
        for t in (0.5, 0.35, 0.65, 0.25, 0.75):
            for side in (-1.0, 1.0) if i % 2 == 0 else (1.0, -1.0):
                nx, ny = -unit[i, 1] * side, unit[i, 0] * side
                if length[i] == 0:
                    nx, ny = 0.0, -side
                px, py = segments[i, 0] + t * step[i]
                h = "left" if nx > 0.3 else "right" if nx < -0.3 else "center"
                v = "bottom" if ny >= 0 else "top"
                ax_, ay_ = px + gap * nx, py + gap * ny
                cx = ax_ + {"left": box_w / 2, "right": -box_w / 2, "center": 0.0}[h]
                cy = ay_ + (box_h / 2 if v == "bottom" else -box_h / 2)
                clash = sum(abs(cx - qx) < box_w and abs(cy - qy) < box_h for qx, qy in placed)
                options.append((clash, (ax_, ay_, h, v), (cx, cy)))
        clash, place, centre = min(options, key=lambda o: o[0])
        placed.append(centre)
        out.append(place)
    return out


def network_schematic(results: Mapping[str, Any], *, width: float = 10.0):
    """The schematic figure of an explicit network (see the module docstring).

    Parameters
    ----------
    results : mapping
        The results dict; uses ``channels``, ``shear_window`` and ``design.name``.
    width : float
        Figure width [inch].

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.collections import LineCollection
    from matplotlib.colors import Normalize
    from matplotlib.figure import Figure

    channels: Sequence[Mapping[str, Any]] = results["channels"]
    names = np.array([c["from"] for c in channels] + [c["to"] for c in channels], dtype=object)
    nodes, index = np.unique(names, return_inverse=True)
    first = np.full(nodes.size, names.size)
    np.minimum.at(first, index, np.arange(names.size))
    rank = np.argsort(np.argsort(first))  # node numbers in order of first mention
    n = len(channels)
    a, b = rank[index[:n]], rank[index[n:]]
    nodes = nodes[np.argsort(rank)]
    flow = np.array([c["flow"] or 0.0 for c in channels], dtype=float)
    shear = np.array([np.nan if c["wall_shear_floor"] is None else c["wall_shear_floor"]
                      for c in channels], dtype=float)  # fmt: skip
    tube = np.array([bool(c.get("round")) for c in channels])
    forward = flow >= 0
    up, down = np.where(forward, a, b), np.where(forward, b, a)
    column, row = node_positions(up, down, nodes.size, np.abs(flow) > 0)

    height = max(3.4, 1.5 * (np.ptp(row) + 1) + 1.4)
    fig = Figure(figsize=(width, height))
    ax = fig.add_subplot()
    xy = np.column_stack([column, row])
    segments = np.stack([xy[up], xy[down]], axis=1)
    q = np.abs(flow)
    widths = 1.0 + 5.0 * q / (q.max() if q.max() > 0 else 1.0)
    window = results.get("shear_window")
    low, high = shear_scale(window, shear)
    norm = Normalize(low, high)
    lines = LineCollection(
        segments,
        cmap="viridis",
        norm=norm,
        linewidths=widths,
        linestyles=[(0, (4, 2)) if t else "solid" for t in tube.tolist()],
        capstyle="round",
    )
    lines.set_array(shear)
    ax.add_collection(lines)
    mid = segments.mean(axis=1)
    step = segments[:, 1] - segments[:, 0]
    length = np.hypot(step[:, 0], step[:, 1])
    unit = step / np.where(length > 0, length, 1.0)[:, None]
    ax.quiver(
        mid[:, 0], mid[:, 1], unit[:, 0], unit[:, 1], color=_INK, angles="xy",
        scale_units="xy", scale=6.0, width=0.004, headwidth=4, pivot="mid", zorder=3,
    )  # fmt: skip
    ax.scatter(column, row, s=28, color="white", edgecolors=_INK, zorder=4)
    for name, x, y in zip(nodes.tolist(), column.tolist(), row.tolist(), strict=True):
        ax.annotate(name, (x, y), xytext=(5, 5), textcoords="offset points", ha="left",
                    fontsize=7, color=_INK, weight="bold", zorder=5)  # fmt: skip
    if n <= LABEL_LIMIT:
        labels = [
            f"{c['channel']}\n{abs(c['flow'] or 0) * 6e10:.3g} uL/min, "
            f"{'-' if c['wall_shear_floor'] is None else format(c['wall_shear_floor'], '.3g')} Pa"
            for c in channels
        ]
        for text, (x, y, h, v) in zip(labels, _label_places(segments), strict=True):
            ax.text(x, y, text, ha=h, va=v, fontsize=6, color=_INK, zorder=5)
    colorbar = fig.colorbar(lines, ax=ax, shrink=0.85, extend="max" if window else "neither")
    colorbar.set_label("floor wall shear [Pa]", fontsize=8)
    colorbar.ax.tick_params(labelsize=7)
    if window:
        from chipflow.export.preview import mark_window

        bounds = [float(window[k]) for k in ("min", "max") if window.get(k) is not None]
        mark_window(colorbar, bounds)
    ax.set_xlim(-0.4, column.max() + 0.4)
    ax.set_ylim(row.min() - 0.8, row.max() + 0.6)
    ax.set_xticks([])
    ax.set_yticks([])
    for side in ax.spines.values():
        side.set_visible(False)
    name = results.get("design", {}).get("name", "")
    ax.set_title(
        f"{name}: channels as a graph, flow left to right (line width ~ flow; tubing dashed)",
        fontsize=9,
        color=_INK,
        loc="left",
    )
    fig.tight_layout()
    return fig
