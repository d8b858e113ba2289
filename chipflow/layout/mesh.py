"""A mesh bed: the bed channels of a tree joined by rows of straight cross-connections.

``[bed] kind = "mesh"`` (see :mod:`chipflow.spec.tree`) keeps the tree and its bed channels
and adds, every ``cross_pitch`` along the straight part of the bed, a *row* of
cross-connections: at one x, every pair of neighbouring bed channels is joined by a short
straight channel of ``cross_width`` (the bed's depth) across the wall between them, like the
anastomoses of a capillary bed.

How it is drawn and counted (one drawing engine, :mod:`chipflow.layout.engine`):

- Each bed channel becomes a chain of *segments* between its cross-connection nodes (role
  "bed", named ``bed<n>.<i>.<k>``: bed channel ``i``, segment ``k`` from the inlet side); the
  first and last segments carry the channel's fork from and into the tree, the others are
  straight runs of one pitch. The segments of one channel add up exactly to the bed channel
  it would be without the mesh.
- Each cross-connection is a channel of its own, role "cross", no generation, named
  ``cross<r>.<i>`` (row ``r``, from bed channel ``i`` to ``i + 1``), drawn from the axis of
  one bed channel to the axis of the next (flow from ``i`` to ``i + 1`` is positive).
- Where a row meets a bed channel there is a junction piece: a T at the outermost channels, a
  cross (four arms) at the others. Each is a :class:`~chipflow.layout.pieces.JunctionKey`
  solved once in 2D as an N-port; its equivalent lengths go to the segments and
  cross-connections meeting there (:mod:`chipflow.layout.extract`), as for every junction.
- The rows are centred on the straight part of the bed, ``cross_pitch`` apart (rounded to the
  mask grid), as many as fit while the outermost rows keep ``2 * STUB_WIDTHS`` widths of
  straight channel from the ends of the straight part (so no row's junction reaches the arcs
  of the tree's forks, and the 2D pieces on either side do not overlap). Every row's x puts
  the cross-connections' walls on the grid.

A bed folded into a serpentine (``max_straight_length``, or a chip too short for a straight
bed) is not meshed: the build refuses it in one line.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from chipflow.errors import LayoutError
from chipflow.layout.junctions import STUB_WIDTHS
from chipflow.layout.pieces import junction_key
from chipflow.layout.plan import drawn_width, half_offset
from chipflow.layout.sketch import ChannelGroup, PieceSpec, Sketch
from chipflow.layout.trace import trace

__all__ = ["mesh_sketch", "CROSS_ROLE", "mesh_rows"]

#: Role of a cross-connection in the network, channels.csv and results.json.
CROSS_ROLE = "cross"


def mesh_rows(
    body_start: float, body_length: float, pitch: float, width: float, bed_width: float,
    grid: float,
) -> tuple[np.ndarray, float]:  # fmt: skip
    """The x of every row of cross-connections [m] and the drawn pitch [m].

    Parameters
    ----------
    body_start, body_length : float
        Where the straight part of the bed channels starts along x, and its length [m].
    pitch, width : float
        ``cross_pitch`` and the drawn ``cross_width`` [m].
    bed_width : float
        Drawn width of the bed channels [m].
    grid : float
        Mask grid [m].

    Returns
    -------
    x : numpy.ndarray
        (m,) row positions, centred on the straight part, each with the cross-connections'
        walls on the grid [m].
    pitch : float
        The pitch rounded to the grid [m].

    Raises
    ------
    LayoutError
        When not one row fits.

    >>> x, p = mesh_rows(0.0, 3e-3, 1e-3, 40e-6, 50e-6, 1e-6)
    >>> np.round(x * 1e6, 6).tolist(), round(p * 1e6, 6)
    ([500.0, 1500.0, 2500.0], 1000.0)
    """
    clear = 2 * STUB_WIDTHS * max(width, bed_width)
    drawn = max(round(pitch / grid), 1) * grid
    room = body_length - 2 * clear
    if room < 0:
        raise LayoutError(
            f"[bed] cross_pitch: the straight part of the bed channels is "
            f"{body_length * 1e3:.4g} mm long, too short for a row of cross-connections "
            f"{clear * 1e6:.4g} um clear of both its ends; make the bed longer"
        )
    m = int(math.floor(room / drawn + 1e-9)) + 1
    first = body_start + body_length / 2 - (m - 1) * drawn / 2
    ho = half_offset(width, grid)
    first = round((first - ho) / grid) * grid + ho
    return first + drawn * np.arange(m), drawn


def _junction(arms: list[tuple]) -> tuple:
    key, order, rotation, mirror = junction_key([(h, w, d, ()) for h, w, d, _ in arms])
    return PieceSpec("junction", key, tuple(arms[o][3] for o in order), rotation, mirror)


def mesh_sketch(
    sketch: Sketch,
    bed: int,
    halves: list[list[tuple]],
    theta: np.ndarray,
    offsets: np.ndarray,
    body_start: float,
    body_length: float,
    pitch: float,
    cross_width: float,
) -> Sketch:
    """``sketch`` (a tree's) with its bed channels joined by rows of cross-connections.

    Parameters
    ----------
    sketch : Sketch
        The tree's sketch; its group ``bed`` holds the bed channels, one template per child
        of the last split (``half + body + half[::-1]``).
    bed : int
        Index of the bed group.
    halves : list of list
        Per child ``j`` of the last split, the pieces from the split's node to the straight
        part of the bed (the last one a straight run).
    theta : numpy.ndarray
        (s,) heading of each child at the split's node [rad].
    offsets : numpy.ndarray
        (s,) sideways offset of each child's straight part from its parent's axis [m].
    body_start, body_length : float
        x of the straight part's start from the split's node, and its length [m].
    pitch, cross_width : float
        ``[bed] cross_pitch`` and ``cross_width`` [m].

    Returns
    -------
    Sketch
        The bed group replaced by the bed segments, a group of cross-connections added after
        it, the row nodes (``mesh<r>.<i>``) and their junction pieces added.
    """
    rules = sketch.rules
    grid = rules.grid
    tol = grid / 4
    g = sketch.groups[bed]
    s = len(halves)
    count = g.size
    width = drawn_width(cross_width, grid)
    warnings = list(sketch.warnings)
    if not math.isclose(width, cross_width, rel_tol=0, abs_tol=1e-12):
        warnings.append(
            f"[bed] cross_width {cross_width * 1e6:.4g} um is not a whole number of "
            f"{grid * 1e6:g} um grid steps; drawn and solved {width * 1e6:.4g} um wide"
        )
    parent_xy = sketch.node_xy[g.node_a]
    x0 = float(parent_xy[0, 0]) + body_start
    x, drawn = mesh_rows(x0, body_length, pitch, width, g.width, grid)
    if not math.isclose(drawn, pitch, rel_tol=0, abs_tol=1e-12):
        warnings.append(
            f"[bed] cross_pitch {pitch * 1e6:.6g} um drawn as {drawn * 1e6:.6g} um, a whole "
            f"number of {grid * 1e6:g} um grid steps"
        )
    reach = 2 * STUB_WIDTHS * max(width, g.width)
    if drawn < reach - 1e-12:
        warnings.append(
            f"[bed] cross_pitch {drawn * 1e6:.4g} um is shorter than {reach * 1e6:.4g} um "
            "(the reach of two junction pieces): neighbouring rows' junctions interact, which "
            "their separately solved corrections do not count"
        )
    m = x.size
    j = np.asarray(g.variant, dtype=int)
    y = parent_xy[:, 1] + np.asarray(offsets, dtype=float)[j]
    if np.any(np.diff(y) <= 0):
        raise LayoutError("mesh bed: the bed channels are not in order across the bed")
    n0 = len(sketch.node_names)
    row_xy = np.column_stack((np.tile(x, count), np.repeat(y, m)))  # node (i, r): n0 + i m + r
    names = [f"mesh{r}.{i}" for i in range(count) for r in range(m)]

    # bed segments: first (template j), middle (template s), last (template s + 1 + j)
    templates = []
    for jj in range(s):  # loop over the children of the last split
        half = halves[jj]
        run = float(half[-1][1]) + (x[0] - x0)
        templates.append(trace(float(theta[jj]), [*half[:-1], ("L", run)], tol))
    templates.append(trace(0.0, [("L", drawn)], tol))
    for jj in range(s):
        back = halves[jj][::-1]
        run = float(back[0][1]) + (x0 + body_length - x[-1])
        templates.append(trace(0.0, [("L", run), *back[1:]], tol))
    i = np.repeat(np.arange(count), m + 1)
    k = np.tile(np.arange(m + 1), count)
    node = n0 + i * m  # the channel's first row node
    variant = np.where(k == 0, j[i], np.where(k == m, s + 1 + j[i], s))
    start = np.where((k == 0)[:, None], parent_xy[i], row_xy[np.clip(node + k - 1 - n0, 0, None)])
    node_a = np.where(k == 0, g.node_a[i], node + k - 1)
    node_b = np.where(k == m, g.node_b[i], node + k)
    seg_names = tuple(f"bed{g.generation}.{a}.{b}" for a, b in zip(i, k, strict=True))
    segments = dataclasses.replace(
        g,
        templates=tuple(templates),
        variant=variant,
        start=start,
        node_a=node_a,
        node_b=node_b,
        index=i,
        names=seg_names,
    )
    # cross-connections: row r joins channel i to i + 1 (one template per distinct spacing)
    ci = np.tile(np.arange(count - 1), m)
    cr = np.repeat(np.arange(m), count - 1)
    dy = np.round(y[1:] - y[:-1], 12)
    spans, which = np.unique(dy, return_inverse=True)
    cross = ChannelGroup(
        templates=tuple(trace(math.pi / 2, [("L", float(d))], tol) for d in spans),
        width=width,
        depth=g.depth,
        role=CROSS_ROLE,
        generation=-1,
        variant=which[ci],
        start=row_xy[ci * m + cr],
        node_a=n0 + ci * m + cr,
        node_b=n0 + (ci + 1) * m + cr,
        index=np.arange(ci.size),
        names=tuple(f"cross{r}.{a}" for r, a in zip(cr, ci, strict=True)),
    )
    groups = list(sketch.groups)
    groups[bed] = segments
    groups.insert(bed + 1, cross)
    c = bed + 1

    def shifted(arms):  # groups after the bed moved by one; the merge side's last segments
        out = []
        for gi, v, end in arms:
            if gi == bed and end == 1 and v >= 0:
                v = s + 1 + v
            out.append((gi + 1 if gi > bed else gi, v, end))
        return tuple(out)

    pieces = [
        None if p is None else dataclasses.replace(p, arms=shifted(p.arms))
        for p in (sketch.pieces or ())
    ]
    # the junctions of the rows: a T at the outermost channels, a cross between
    w, d = g.width, g.depth
    bed_in = (math.pi, w, d, (bed, -1, 1))
    bed_out = (0.0, w, d, (bed, -1, 0))
    up = (math.pi / 2, width, d, (c, -1, 0))
    down = (-math.pi / 2, width, d, (c, -1, 1))
    first_class = len(pieces)
    pieces += [_junction([bed_in, bed_out, up]), _junction([bed_in, bed_out, down])]
    kind = np.zeros(count, dtype=int)
    kind[-1] = 1
    if count > 2:
        pieces.append(_junction([bed_in, bed_out, up, down]))
        kind[1:-1] = 2
    node_class = np.full(n0 + count * m, -1)
    if sketch.node_class is not None:
        node_class[:n0] = sketch.node_class
    node_class[n0:] = first_class + np.repeat(kind, m)
    notes = (
        *sketch.notes,
        f"mesh bed: {m} row(s) of cross-connections {drawn * 1e6:.6g} um apart joining the "
        f"{count} bed channels ({m * (count - 1)} cross-connections {width * 1e6:.4g} um wide)",
    )
    return dataclasses.replace(
        sketch,
        node_xy=np.vstack((sketch.node_xy, row_xy)),
        node_names=(*sketch.node_names, *names),
        groups=tuple(groups),
        node_class=node_class,
        pieces=tuple(pieces),
        warnings=tuple(warnings),
        notes=notes,
    )
