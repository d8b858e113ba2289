"""The field of a drawn chip composed from its pieces, each distinct piece solved once.

Stokes flow is linear and a drawn chip repeats a few geometries. The composition cuts the
straight, axis-aligned runs of its channels across, away from anything that disturbs the flow
(a junction, a bend, a port, a chamber), and keeps the part of a run between two cuts as a
**straight body**. What is left of the chip falls apart into **pieces** (junctions, bends,
fans, ports, bed ends, chambers, each with the straight stubs up to its cuts). Pieces that are
the same up to a shift, a quarter turn or a mirror share one solve.

- Each distinct piece is meshed and solved once, as the whole chip would be meshed there
  (snapped and sampled at the chip's scale, its cuts no walls), with one unit solution per
  port: 1 Pa at that port, 0 Pa at the others (one factorisation). Its conductance matrix
  ``G`` gives the flows into it for any port pressures. Pieces are kept in the field cache.
- Each body has developed flow: its resistance per length and its floor shear across the
  width come from a straight tile of the same width and depth (32 widths or 128 depths
  long, so that its mesh lies as a long channel's does) solved like a piece.
- A small nodal problem joins them: the pieces' conductance matrices and the bodies'
  conductances between the cuts, with the chip's ports at their pressures. Its cut pressures
  weight each piece's unit solutions; its flows scale the bodies.

The floor shear of the chip is the pieces' (each instance's triangles, from its own port
pressures) and the bodies' (their tile's triangles scaled by the body's flow and length),
sampled :data:`~chipflow.field.shear.SAMPLE_LEVEL` squared times per triangle and gathered
area-weighted into a :class:`~chipflow.field.shear.ShearHistogram`.

When is it exact? A cut leaves :data:`STUB_WIDTHS` widths of clean straight channel (checked
on the drawn mask: nothing but the channel's own strip) on both sides, so the flow across it
is developed up to the disturbance of the nearest piece, which falls like ``exp(-pi x / w)``
along a channel of width ``w``: under 1e-4 at three widths. The composition then reproduces
the monolithic solve of the same model up to that and to the two meshes' discretisation.
Compact trees have no such runs between their junctions; there the runs are cut in the middle
of their clean stretch where it leaves at least :data:`CLOSE_WIDTHS` widths each side (a
disturbance of about ``exp(-pi / 2)`` of the flow's at the cut, local to it): no longer exact,
and measured (``tests/test_field_compose.py``, ``benchmarks/field.py``). Copies drawn off the
mask grid snap a grid step apart in places; pieces whose vertices all lie within
:data:`SAME_WITHIN` grid steps are solved once. Runs too short, oblique or too near their
neighbours are not cut; a chip with no cut is one piece: the monolithic solve.

References
----------
H. Bruus, *Theoretical Microfluidics*, Oxford University Press, 2008, ch. 3-4 (Stokes flow,
the decay of entrance disturbances, hydraulic circuits).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import shapely

from chipflow.errors import FieldError
from chipflow.field.assemble import p2_values
from chipflow.field.cache import cached
from chipflow.field.calibration import floor_factor
from chipflow.field.chip import layout_ports
from chipflow.field.mesh import build_mesh
from chipflow.field.model import FieldPort, FieldRegion
from chipflow.field.shear import SAMPLE_LEVEL, ShearHistogram, ShearStats, sample_points
from chipflow.field.solve import check_field_flows, field_system, solve_reduced
from chipflow.layout.model import Layout

__all__ = [
    "STUB_WIDTHS",
    "CLOSE_WIDTHS",
    "SAME_WITHIN",
    "Decomposition",
    "ComposedField",
    "decompose",
    "compose_field",
]

#: Clean straight channel kept on each side of a cut [channel widths].
STUB_WIDTHS = 3.0
#: Runs too short for two such stubs are cut in the middle of their clean stretch where it
#: leaves at least this much on each side [channel widths] (see :func:`decompose`).
CLOSE_WIDTHS = 0.5
#: Pieces whose vertices all lie within this many mask grid steps of each other's are one
#: kind (copies drawn off the grid snap a step apart in places) [-].
SAME_WITHIN = 1.0
#: Length of a thin body, the shortest cut [channel widths].
MIN_BODY_WIDTHS = 0.25
#: The cut strips reach this far past the channel's walls [channel widths].
_CUT_MARGIN = 0.1
#: Length of the straight tile solved for the bodies of one width and depth [widths] (at
#: most four times as many depths: a wide shallow channel's mesh is set by its depth).
_TILE_WIDTHS = 32.0
_CHUNK = 2_000_000  # floor-shear values formed at once


@dataclass(frozen=True)
class Decomposition:
    """A drawn chip cut into pieces and straight bodies.

    Attributes
    ----------
    pieces : numpy.ndarray of shapely geometry
        Every piece in the chip's frame [m]: a polygon, or the polygons of its parts in
        several mask layers (which overlap where the layers do).
    kind : numpy.ndarray of int
        Index of each piece's distinct geometry.
    slots : list of numpy.ndarray
        Per distinct geometry, (instances, ports) node of each instance's port, in the
        geometry's own port order.
    instances : list of numpy.ndarray
        Per distinct geometry, the pieces that are it.
    frames : list of shapely geometry
        Per distinct geometry, its first piece moved to its centroid [m].
    frame_ports : list of list of shapely.Geometry
        Per distinct geometry, its ports in its own frame: cut lines, or port holes [m].
    body_nodes : numpy.ndarray
        (bodies, 2) nodes at each body's two cuts.
    body_length, body_width, body_depth : numpy.ndarray
        [m].
    body_channel : numpy.ndarray of int
        The drawn channel each body lies in.
    node_port : numpy.ndarray of str
        Per node the chip port it is ("" for a cut).
    cut_lines : numpy.ndarray of shapely.LineString
        Per node that is a cut, the cut across the channel [m] (None for a chip port).
    frame_depths : list of list of (shapely.Polygon, float)
        Per distinct geometry, its parts in its own frame [m] with their depths [m]: what is
        meshed and solved.
    """

    pieces: np.ndarray
    kind: np.ndarray
    slots: list
    instances: list
    frames: list
    frame_ports: list
    body_nodes: np.ndarray
    body_length: np.ndarray
    body_width: np.ndarray
    body_depth: np.ndarray
    body_channel: np.ndarray
    node_port: np.ndarray
    cut_lines: np.ndarray
    frame_depths: list = field(default_factory=list)

    @property
    def distinct(self) -> int:
        """Number of distinct pieces (solves)."""
        return len(self.frames)


@dataclass(frozen=True)
class ComposedField:
    """The composed field of a chip at given port pressures.

    Attributes
    ----------
    port_pressures : dict of str to float
        [Pa].
    port_flows : dict of str to float
        Flow into the chip through each port [m^3/s].
    floor : ShearStats
        Floor shear over the whole floor (window fractions when a window was given).
    node_pressure : numpy.ndarray
        Pressure at every cut and port [Pa] (nodes of :class:`Decomposition`).
    body_flow : numpy.ndarray
        Flow along each straight body [m^3/s].
    decomposition : Decomposition
    stats : dict
        ``pieces``, ``distinct``, ``bodies``, ``triangles`` (meshed and solved),
        ``body_area`` (the bodies' share of the floor), timings ``cut_seconds``,
        ``solve_seconds``, ``join_seconds``, ``shear_seconds`` [s].
    """

    port_pressures: dict[str, float]
    port_flows: dict[str, float]
    floor: ShearStats
    node_pressure: np.ndarray
    body_flow: np.ndarray
    decomposition: Decomposition
    stats: dict = field(default_factory=dict, repr=False)

    def resistance(self, high: str, low: str) -> float:
        """``(p_high - p_low) / Q_high`` [Pa s/m^3]."""
        dp = self.port_pressures[high] - self.port_pressures[low]
        return dp / self.port_flows[high]


# -- cutting -----------------------------------------------------------------------------------


def _runs(layout: Layout):
    """The axis-aligned straight runs of every channel's centreline.

    Returns start and end points (n, 2) [m], the channel of each, and whether each run starts
    or ends at its channel's end.
    """
    ch = layout.channels
    xy, idx = shapely.get_coordinates(ch.centreline, return_index=True)
    same = idx[1:] == idx[:-1]
    a, b, c = xy[:-1][same], xy[1:][same], idx[:-1][same]
    d = b - a
    length = np.hypot(d[:, 0], d[:, 1])
    ok = length > 0
    a, b, c, d, length = a[ok], b[ok], c[ok], d[ok], length[ok]
    u = d / length[:, None]
    axis = np.abs(u).min(axis=1) < 1e-9
    # a run: consecutive segments of one channel in one axis direction
    joined = (c[1:] == c[:-1]) & axis[1:] & axis[:-1] & (np.abs(u[1:] - u[:-1]).max(axis=1) < 1e-9)
    run = np.concatenate([[0], np.cumsum(~joined)])
    first = np.r_[0, np.nonzero(~joined)[0] + 1]
    last = np.r_[first[1:] - 1, len(c) - 1]
    keep = axis[first]
    first, last = first[keep], last[keep]
    starts_channel = np.r_[True, c[1:] != c[:-1]][first]
    ends_channel = np.r_[c[1:] != c[:-1], True][last]
    del run
    return a[first], b[last], c[first], starts_channel, ends_channel


def _node_reach(layout: Layout) -> np.ndarray:
    """Radius around each node within which its junction (or port hole) disturbs [m]."""
    ch = layout.channels
    reach = np.zeros(len(layout.node_xy))
    half = 0.5 * ch.width * (1.0 + 2e-3)  # and a hair, so that runs at a node never meet
    np.maximum.at(reach, ch.node_a, half)
    np.maximum.at(reach, ch.node_b, half)
    names = list(layout.node_names)
    for port in layout.ports:
        if port.name in names:
            i = names.index(port.name)
            reach[i] = max(reach[i], port.diameter / 2 + 2 * layout.grid)
    return reach


def _strip(a: np.ndarray, b: np.ndarray, half: np.ndarray) -> np.ndarray:
    """Axis-aligned rectangles along ``a`` to ``b`` reaching ``half`` either side [m]."""
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    vertical = np.abs(b[:, 0] - a[:, 0]) < np.abs(b[:, 1] - a[:, 1])
    grow = np.where(
        vertical[:, None], np.column_stack([half, 0 * half]), np.column_stack([0 * half, half])
    )
    return shapely.box(*(lo - grow).T, *(hi + grow).T)


def _bodies(layout: Layout, layers: list, stub: float, close: float | None):
    """The straight bodies: cut points ``a``, ``b`` [m], channel and width [m] of each."""
    ch = layout.channels
    start, end, c, at_start, at_end = _runs(layout)
    w = ch.width[c]
    length = np.hypot(*(end - start).T)
    u = (end - start) / np.maximum(length, 1e-300)[:, None]
    reach = _node_reach(layout)
    node_xy = layout.node_xy

    def clear(point, node, at_node):  # what the junction at a node takes of the run
        extra = reach[node] - np.hypot(*(point - node_xy[node]).T)
        return np.where(at_node, np.maximum(extra, 0.0), 0.0)

    # the clean stretch of each run (the centreline runs from node_a to node_b)
    s0 = clear(start, ch.node_a[c], at_start)
    s1 = length - clear(end, ch.node_b[c], at_end)
    grid = layout.grid
    along = np.abs(u) > 0.5  # the run's own axis: cuts on the mask grid along it
    found = np.zeros(len(c), bool)
    a, b = np.zeros((len(c), 2)), np.zeros((len(c), 2))
    todo = np.ones(len(c), bool)
    for _ in range(2):  # the second round moves the stretches off the depth steps found
        a_, b_, keep_, ok = _place(start, end, u, w, s0, s1, along, grid, stub, close)
        idx = np.nonzero(ok & todo)[0]
        # the drawn outline's straight edges may start a grid step or two past the
        # centreline's (the snapped polygon of a bend): whole up to two steps short
        good, f_body, f_span = _clean(
            layers, a_[idx], b_[idx], u[idx], w[idx], keep_[idx],
            np.minimum(2 * grid, keep_[idx]), ch.layer[c[idx]],
        )  # fmt: skip
        take = idx[good]
        found[take] = True
        a[take], b[take] = a_[take], b_[take]
        # a run refused for another depth in its stretch: the stretch ends where that begins
        runs = idx[f_body]
        offset = np.einsum("ij,ij->i", a_[runs] - start[runs], u[runs])
        lo, hi = f_span[:, 0] + offset, f_span[:, 1] + offset
        first = 0.5 * (lo + hi) < 0.5 * (s0[runs] + s1[runs])
        np.maximum.at(s0, runs[first], hi[first])
        np.minimum.at(s1, runs[~first], lo[~first])
        todo = np.zeros(len(c), bool)
        todo[runs] = True
        todo &= ~found
        if not todo.any():
            break
    return a[found], b[found], c[found], w[found]


def _place(start, end, u, w, s0, s1, along, grid, stub, close):
    """Cuts in each run's clean stretch ``s0`` to ``s1`` [m along it]: a body a stub from
    either end, or where the stretch is too short a thin one in its middle."""
    length = np.hypot(*(end - start).T)
    room = s1 - s0
    long = room >= (2 * stub + MIN_BODY_WIDTHS) * w
    thin = MIN_BODY_WIDTHS * w
    near = ~long & (close is not None) & (room >= (2 * (close or 0.0)) * w + thin)
    keep = np.where(long, stub * w, 0.5 * (room - thin))
    ok = long | near
    d0 = np.where(ok, s0 + keep, 0.0)
    d1 = np.where(ok, length - s1 + keep, 0.0)

    def snap(p: np.ndarray) -> np.ndarray:
        return np.where(along, np.round(p / grid) * grid, p)

    a = snap(start + d0[:, None] * u)
    b = snap(end - d1[:, None] * u)
    # what the snapped cuts leave of the clean stretch on their outer sides
    keep = np.minimum(
        np.einsum("ij,ij->i", a - start, u) - s0, s1 - np.einsum("ij,ij->i", b - start, u)
    )
    return a, b, keep, ok & (keep >= 0)


def _clean(layers, a, b, u, w, keep, slack, own):
    """Which bodies see nothing of the mask but their channel's strip in its own layer
    ``own`` (an index into ``layers``, the mask layers less the port holes): across the cut
    strip (which reaches past the walls) and along the clean channel ``keep`` [m] beyond each
    cut, the channel whole there up to ``slack`` [m] from the ends. Anything else (a fillet,
    a branch, a neighbour too near, a hole, another depth) and the run is left whole.

    Returns which are clean, and for the parts of other depths met: the body of each and
    where it lies along the body's run from ``a`` (nearest, furthest) [m]."""
    if not len(a):
        return np.zeros(0, bool), np.zeros(0, int), np.zeros((0, 2))
    tip = keep[:, None] * u
    shapes = shapely.union(
        _strip(a, b, (0.5 + _CUT_MARGIN) * w), _strip(a - tip, b + tip, 0.5 * w * (1 + 1e-3))
    )
    # shapes that meet (two runs round a short bend) are both refused
    tree = shapely.STRtree(shapes)
    i, j = tree.query(shapes, predicate="intersects")
    alone = np.bincount(i[i != j], minlength=len(a)) == 0
    strip = _strip(a - tip, b + tip, 0.5 * w)
    inner = (keep - slack)[:, None] * u
    whole = _strip(a - inner, b + inner, 0.5 * w * (1 - 1e-6))
    # each layer is met tile by tile: no overlay of a whole layer (slow for a large chip)
    n = len(a)
    own_parts, own_of = [], []
    foreign = np.zeros(n, bool)
    f_body, f_part = [], []
    for k, layer in enumerate(layers):
        tiles = _tiles(layer)
        box, tile = shapely.STRtree(tiles).query(shapes, predicate="intersects")
        got = shapely.intersection(tiles[tile], shapes[box])
        real = shapely.area(got) > 0
        mine = (own[box] == k) & real
        own_parts.append(got[mine])
        own_of.append(box[mine])
        other = (own[box] != k) & real
        foreign[box[other]] = True
        f_body.append(box[other])
        f_part.append(got[other])
    parts, box = np.concatenate(own_parts), np.concatenate(own_of).astype(int)
    mine = np.empty(n, dtype=object)
    mine[:] = shapely.Polygon()
    count = np.bincount(box, minlength=n)
    one = count[box] == 1  # one part per body, but where a tile's edge crosses it
    mine[box[one]] = parts[one]
    for k in np.unique(box[~one]):
        mine[k] = shapely.union_all(parts[box == k])
    tol = 1e-6 * w * w
    extra = shapely.area(shapely.difference(mine, strip)) < tol
    full = shapely.area(shapely.difference(whole, mine)) < tol
    fb = np.concatenate(f_body).astype(int)
    parts = np.concatenate(f_part) if fb.size else np.zeros(0, dtype=object)
    x0, y0, x1, y1 = shapely.bounds(parts).T.reshape(4, -1)
    ends = np.stack(
        [
            np.einsum("ij,ij->i", np.column_stack([x0, y0]) - a[fb], u[fb]),
            np.einsum("ij,ij->i", np.column_stack([x1, y1]) - a[fb], u[fb]),
        ],
        axis=1,
    )
    span = np.sort(ends, axis=1)
    return alone & ~foreign & extra & full, fb, span


# -- sameness ----------------------------------------------------------------------------------

#: The eight quarter turns and mirrors of the plane.
_D4 = np.array(
    [
        [[1, 0], [0, 1]],
        [[0, -1], [1, 0]],
        [[-1, 0], [0, -1]],
        [[0, 1], [-1, 0]],
        [[1, 0], [0, -1]],
        [[0, 1], [1, 0]],
        [[-1, 0], [0, 1]],
        [[0, -1], [-1, 0]],
    ],
    dtype=np.int64,
)


# -- decomposition -----------------------------------------------------------------------------


def decompose(
    layout: Layout,
    *,
    stub: float = STUB_WIDTHS,
    close: float | None = CLOSE_WIDTHS,
    same_within: float = SAME_WITHIN,
) -> Decomposition:
    """Cut a drawn chip into pieces and straight bodies (see the module's text).

    Parameters
    ----------
    layout : Layout
    stub : float
        Clean straight channel kept on each side of a cut [channel widths].
    close : float or None
        Also cut runs too short for two stubs, in the middle of their clean stretch, where
        it leaves at least this much on each side [channel widths]: smaller pieces that
        repeat more, and a composition that is no longer exact (the disturbance at such a
        cut is about ``exp(-pi close)`` of the flow's; what it does to the resistance and
        the floor shear is measured in ``benchmarks/field.py``). None: exact cuts only.
    same_within : float
        Pieces are one kind, solved once, where every vertex of one lies within this many
        mask grid steps of the other's (turned or mirrored) [-]: copies drawn at positions
        off the grid snap a step apart here and there. 0: only exact copies.
    """
    ch = layout.channels
    holes = {p.name: p.boundary for p in layout_ports(layout, {p.name: 0.0 for p in layout.ports})}
    punched = shapely.union_all(list(holes.values())) if holes else shapely.Polygon()
    layers = [
        layer.geometry.difference(punched)
        if shapely.intersects(layer.geometry, punched)
        else layer.geometry
        for layer in layout.layers
    ]
    a, b, c, w = _bodies(layout, layers, stub, close)
    strips = _strip(a, b, (0.5 + _CUT_MARGIN) * w)
    i, j = shapely.STRtree(strips).query(strips, predicate="intersects")
    apart = np.bincount(i[i != j], minlength=len(c)) == 0  # cuts moved in a second round
    a, b, c, w, strips = a[apart], b[apart], c[apart], w[apart], strips[apart]
    n_body = len(c)
    cuts = shapely.multipolygons(strips)  # disjoint: a valid multipolygon without a union
    parts, part_layer = [], []
    for k, layer in enumerate(layers):
        got = np.asarray(shapely.get_parts(layer.difference(cuts) if n_body else layer))
        got = got[shapely.area(got) > 0]
        parts.append(got)
        part_layer.append(np.full(len(got), k))
    parts, part_layer = np.concatenate(parts), np.concatenate(part_layer)
    pieces, part_piece = _join_layers(parts, 1e-3 * layout.grid)
    # nodes: the bodies' cuts (2 i at a, 2 i + 1 at b), then the chip's ports
    u = (b - a) / np.maximum(np.hypot(*(b - a).T), 1e-300)[:, None]
    # a cut spans the channel's width, wall to wall
    across = np.column_stack([-u[:, 1], u[:, 0]]) * (0.5 * w)[:, None]
    ends = np.stack([a, b], axis=1).reshape(-1, 2)
    span = np.repeat(across, 2, axis=0)
    cut_lines = shapely.linestrings(np.stack([ends - span, ends + span], axis=1))
    port_names = list(holes)
    node_port = np.array([""] * (2 * n_body) + port_names, dtype=object)
    tree = shapely.STRtree(pieces)
    near = 1e-3 * layout.grid  # the cut lies on its piece's outline, up to rounding
    cut_i, piece_i = tree.query(cut_lines, predicate="dwithin", distance=near)
    if np.bincount(cut_i, minlength=2 * n_body).max(initial=1) != 1 or len(cut_i) != 2 * n_body:
        raise FieldError("the chip could not be cut into pieces cleanly (a cut meets two pieces)")
    hole_geoms = np.array([holes[n] for n in port_names], dtype=object)
    hole_i, hole_piece = (
        tree.query(hole_geoms, predicate="dwithin", distance=near) if port_names else ([], [])
    )
    port_node = np.r_[cut_i, 2 * n_body + np.asarray(hole_i, int)].astype(int)
    port_piece = np.r_[piece_i, np.asarray(hole_piece, int)].astype(int)
    # where each port sits: a cut's middle, a hole's centre
    marks = np.concatenate(
        [ends, shapely.get_coordinates(shapely.centroid(hole_geoms))] if port_names else [ends]
    )[port_node]

    is_hole = port_node >= 2 * n_body
    order = np.argsort(port_piece, kind="stable")
    port_node, port_piece, marks, is_hole = (
        port_node[order],
        port_piece[order],
        marks[order],
        is_hole[order],
    )
    starts = np.searchsorted(port_piece, np.arange(len(pieces) + 1))
    tol = same_within * layout.grid
    areas = np.zeros((len(pieces), len(layers)))
    np.add.at(areas, (part_piece, part_layer), shapely.area(parts))
    kind, slot_order = _kinds(pieces, areas, marks, is_hole, starts, tol)
    instances, slots, frames, frame_ports, frame_depths = [], [], [], [], []
    for k in range(int(kind.max(initial=-1)) + 1):
        inst = np.nonzero(kind == k)[0]
        rows = np.vstack([starts[i] + slot_order[i] for i in inst])
        slots.append(port_node[rows])
        instances.append(inst)
        first = inst[0]
        geoms = [
            cut_lines[j] if j < 2 * n_body else hole_geoms[j - 2 * n_body]
            for j in port_node[starts[first] + slot_order[first]]
        ]
        own = part_piece == first
        depths = [float(layout.layers[layer].depth) for layer in part_layer[own]]
        frame, ports, depths = _frame(pieces[first], parts[own], depths, geoms)
        frames.append(frame)
        frame_ports.append(ports)
        frame_depths.append(depths)
    return Decomposition(
        pieces=pieces,
        kind=kind,
        slots=slots,
        instances=instances,
        frames=frames,
        frame_ports=frame_ports,
        body_nodes=np.arange(2 * n_body).reshape(-1, 2),
        body_length=np.hypot(*(b - a).T),
        body_width=w,
        body_depth=ch.depth[c].astype(float),
        body_channel=c,
        node_port=node_port,
        cut_lines=np.r_[cut_lines, [None] * len(port_names)],
        frame_depths=frame_depths,
    )


def _kinds(pieces, layers: np.ndarray, marks, is_hole, starts, tol: float):
    """Sort the pieces into kinds: the same outline, ports and depths up to a shift, a
    quarter turn or a mirror, every vertex within ``tol`` [m].

    Returns each piece's kind and the order of its ports that matches its kind's first
    piece's.
    """
    from scipy.spatial import cKDTree

    xy, owner = shapely.get_coordinates(pieces, return_index=True)
    centre = shapely.get_coordinates(shapely.centroid(pieces))
    count = np.bincount(owner, minlength=len(pieces))
    first = np.r_[0, np.cumsum(count)]
    area = shapely.area(pieces)
    slack = shapely.length(pieces) * tol + 1e-12 * area
    kind = np.full(len(pieces), -1)
    slot_order: list = [None] * len(pieces)
    reps: dict = {}  # (vertices, ports, holes) -> [(kind, trees, port marks, piece)]
    for i in range(len(pieces)):
        own = xy[first[i] : first[i + 1]] - centre[i]
        pm = marks[starts[i] : starts[i + 1]] - centre[i]
        holes = int(is_hole[starts[i] : starts[i + 1]].sum())
        group = reps.setdefault((len(own), len(pm), holes), [])
        for k, trees, rep_marks, r in group:
            if abs(area[i] - area[r]) > slack[r] or np.abs(layers[i] - layers[r]).max() > slack[r]:
                continue
            for t, tree in enumerate(trees):
                if tree.query(own, distance_upper_bound=tol * 1.01 + 1e-15)[0].max() <= tol * 1.01:
                    # the rep's ports, turned: which of this piece's is each
                    d, near = cKDTree(pm).query(rep_marks @ _D4[t].T.astype(float))
                    if d.max() <= tol * 1.01 + 1e-15 and len(set(near)) == len(near):
                        kind[i], slot_order[i] = k, near
                        break
            if kind[i] >= 0:
                break
        if kind[i] < 0:
            k = int(kind.max(initial=-1)) + 1
            kind[i], slot_order[i] = k, np.arange(len(pm))
            trees = [cKDTree(own @ m.T.astype(float)) for m in _D4]
            group.append((k, trees, pm, i))
    return kind, slot_order


#: A layer is cut into tiles of about this many vertices for local overlays.
_TILE_VERTICES = 2000


def _tiles(geometry) -> np.ndarray:
    """``geometry`` clipped to a square grid of tiles (an array of small geometries)."""
    n = int(np.ceil(np.sqrt(shapely.get_num_coordinates(geometry) / _TILE_VERTICES)))
    x0, y0, x1, y1 = geometry.bounds
    if n <= 1:
        return np.array([geometry], dtype=object)
    xs, ys = np.linspace(x0, x1, n + 1), np.linspace(y0, y1, n + 1)
    boxes = [(xs[i], ys[j], xs[i + 1], ys[j + 1]) for i in range(n) for j in range(n)]
    tiles = np.array([shapely.clip_by_rect(geometry, *box) for box in boxes], dtype=object)
    return tiles[~shapely.is_empty(tiles)]


def _join_layers(parts: np.ndarray, near: float) -> tuple[np.ndarray, np.ndarray]:
    """Parts of the mask layers joined where they touch (within ``near`` [m]) into pieces:
    each piece (its parts as one multipolygon, overlapping where layers do) and the piece of
    each part."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    i, j = shapely.STRtree(parts).query(parts, predicate="dwithin", distance=near)
    graph = coo_matrix((np.ones(len(i)), (i, j)), shape=(len(parts), len(parts)))
    n, label = connected_components(graph, directed=False)
    pieces = np.empty(n, dtype=object)
    count = np.bincount(label, minlength=n)
    single = count[label] == 1
    pieces[label[single]] = parts[single]
    for k in np.nonzero(count > 1)[0]:  # kept as parts: a union of many is slow
        pieces[k] = shapely.multipolygons(shapely.get_parts(parts[label == k]))
    return pieces, label


def _frame(piece, parts, depths, ports):
    """A piece, its ports and its parts of one depth, moved to the piece's centroid [m]."""
    x, y = shapely.get_coordinates(piece.centroid)[0]
    move = lambda g: shapely.affinity.translate(g, -x, -y)  # noqa: E731
    regions = [(move(g), d) for g, d in zip(parts, depths, strict=True)]
    return move(piece), [move(p) for p in ports], regions


# -- solving -----------------------------------------------------------------------------------


#: A piece keeps its unit solutions' sampled velocities up to this size [bytes]; a larger one
#: (a fan or a chamber with many ports) keeps its conductances only and is solved again, once,
#: at its instances' own port pressures.
_VELOCITY_BYTES = 256 * 2**20
_COLUMNS = 16  # right-hand sides solved at once


class _PieceSystem:
    """A piece meshed and assembled (viscosity 1 Pa s), solved for any port pressures."""

    def __init__(self, regions, ports, across: float, solver: str, scale: float) -> None:
        from chipflow.field.solve import choose_solver

        self.names = [f"p{i}" for i in range(len(ports))]
        field_ports = [FieldPort(n, g, 0.0) for n, g in zip(self.names, ports, strict=True)]
        self.mesh = build_mesh(
            [FieldRegion(g, d) for g, d in regions],
            field_ports,
            across=across,
            open_lines=True,
            scale=scale,
        )
        self.system = field_system(self.mesh, dict.fromkeys(self.names, 0.0), 1.0)
        self.solver = choose_solver(self.system.size) if solver == "auto" else solver
        self._lu = None
        fixed = np.zeros(self.system.space.n_points, bool)
        for nodes in self.system.port_nodes.values():
            fixed[nodes] = True
        where = np.nonzero(fixed)[0]
        self._ports = np.zeros((where.size, len(self.names)))  # pressure nodes of each port
        for j, name in enumerate(self.names):
            self._ports[np.searchsorted(where, self.system.port_nodes[name]), j] = 1.0

    def solve(self, pressures: np.ndarray) -> np.ndarray:
        """Reduced solutions for port pressures (ports, columns) [Pa]."""
        system = self.system
        lx, ly = system.lift
        p_fixed = self._ports @ pressures
        free = np.zeros((system.pressure_free.size, p_fixed.shape[1]))
        rhs = np.concatenate([-(lx.T @ p_fixed), -(ly.T @ p_fixed), free])
        if self.solver in ("direct", "splu"):
            from scipy.sparse.linalg import splu

            if self._lu is None:  # one factorisation for every right-hand side
                self._lu = splu(system.matrix(), permc_spec="COLAMD")
            xs = self._lu.solve(rhs)
        else:
            xs = solve_reduced(system, self.solver, mesh=self.mesh, viscosity=1.0, rhs=rhs)
        xs = xs.reshape(len(rhs), -1)
        if not np.all(np.isfinite(xs)):
            raise FieldError("a piece's field solve failed (singular system)")
        return xs

    def inflows(self, xs: np.ndarray) -> np.ndarray:
        """Flow into the piece at each port (ports, columns) [m^3/s per Pa]."""
        nv = self.system.velocity_free.size
        fx = np.vstack([self.system.port_flux[n][0] for n in self.names])
        fy = np.vstack([self.system.port_flux[n][1] for n in self.names])
        return -(fx @ xs[:nv] + fy @ xs[nv : 2 * nv])

    def velocity(self, xs: np.ndarray) -> np.ndarray:
        """Sampled velocity (columns, triangles x samples, 2) [m/s per Pa]."""
        space, nv = self.system.space, self.system.velocity_free.size
        phi = p2_values(sample_points())  # (samples, 6)
        vel = np.empty((xs.shape[1], len(self.mesh.triangles), len(phi), 2))
        for c in range(2):
            full = np.zeros((space.n_nodes, xs.shape[1]))
            full[self.system.velocity_free] = xs[c * nv : (c + 1) * nv]
            vel[..., c] = np.tensordot(full[space.nodes], phi, axes=([1], [1])).transpose(1, 0, 2)
        return vel.reshape(xs.shape[1], -1, 2)

    def floor(self) -> tuple[np.ndarray, np.ndarray]:
        """Per sample its area [m^2] and floor-shear factor ``F / h`` [1/m]."""
        m = SAMPLE_LEVEL**2
        mesh = self.mesh
        return (
            np.repeat(mesh.area / m, m),
            np.repeat(floor_factor(mesh.depth, mesh.width) / mesh.depth, m),
        )


def _unit_piece(regions, ports, across: float, solver: str, scale: float) -> dict:
    """Unit solutions of one piece (viscosity 1 Pa s): its conductance matrix ``G``
    [m^3/(s Pa)], the samples' areas [m^2] and floor-shear factors ``F / h`` [1/m], and
    unless the piece is large (:data:`_VELOCITY_BYTES`) the sampled velocity of each port's
    unit solution [m/s per Pa]."""
    piece = _PieceSystem(regions, ports, across, solver, scale)
    k = len(piece.names)
    area, factor = piece.floor()
    keep = k * area.size * 16 <= _VELOCITY_BYTES
    g = np.empty((k, k))
    vel = np.empty((k, area.size, 2)) if keep else None
    eye = np.eye(k)
    for s in range(0, k, _COLUMNS):
        xs = piece.solve(eye[:, s : s + _COLUMNS])
        g[:, s : s + _COLUMNS] = piece.inflows(xs)
        if keep:
            vel[s : s + _COLUMNS] = piece.velocity(xs)
    out = {"g": g, "area": area, "factor": factor}
    if keep:
        out["velocity"] = vel
    return out


def _piece_key(regions, ports) -> tuple:
    return (
        [(shapely.to_wkb(g), d) for g, d in regions],
        [shapely.to_wkb(p) for p in ports],
    )


def _tile(width: float, depth: float, across: float, solver: str, scale: float) -> dict:
    """A straight tile of developed flow: resistance per length ``r`` [Pa s/m^4 per Pa s],
    and per triangle the floor shear per unit flow and viscosity ``s`` [1/m^3] and area per
    length of body ``a`` [m]."""
    # long enough that its mesh lies as a long channel's does (a wide shallow channel's
    # triangles are set by its depth: 64 of its depths)
    length = max(2.0 * width, min(_TILE_WIDTHS * width, 4.0 * _TILE_WIDTHS * depth))
    box = shapely.box(0.0, 0.0, length, width)
    ports = [
        shapely.LineString([(0, 0), (0, width)]),
        shapely.LineString([(length, 0), (length, width)]),
    ]

    def compute():
        unit = _unit_piece([(box, depth)], ports, across, solver, scale)
        q = unit["g"][0, 0]
        speed = np.hypot(*unit["velocity"][0].T)
        return {
            "r": 1.0 / (q * length),
            "s": unit["factor"] * speed / q,
            "a": unit["area"] / length,
        }

    return cached(
        "tile",
        ((width, depth), _piece_key([(box, depth)], ports)),
        compute,
        {"across": across, "samples": SAMPLE_LEVEL, "scale": scale},
    )


def _floor(dec, units, tiles, p, body_flow, viscosity, window, piece_args):
    """The floor shear of the pieces (each instance at its ports' pressures ``p`` [Pa]) and
    of the bodies (their tile at their flow [m^3/s]), and the bodies' floor area [m^2]."""
    hist = ShearHistogram()
    for kind, (unit, slot) in enumerate(zip(units, dec.slots, strict=True)):
        factor, area = unit["factor"], unit["area"]
        nt = area.size
        step = max(1, _CHUNK // nt)
        if "velocity" in unit:
            flat = unit["velocity"].reshape(len(unit["g"]), -1)
            speeds = (
                (p[slot[s : s + step]] @ flat).reshape(-1, nt, 2) for s in range(0, len(slot), step)
            )
        else:  # a large piece: solved again at its instances' port pressures
            piece = _PieceSystem(dec.frame_depths[kind], dec.frame_ports[kind], *piece_args)
            step = min(step, _COLUMNS)
            speeds = (
                piece.velocity(piece.solve(p[slot[s : s + step]].T))
                for s in range(0, len(slot), step)
            )
        for v in speeds:
            hist.add(factor * np.hypot(v[..., 0], v[..., 1]), np.broadcast_to(area, v.shape[:2]))
    body_area = 0.0
    for pair, tile in tiles.items():
        mine = np.nonzero((dec.body_width == pair[0]) & (dec.body_depth == pair[1]))[0]
        step = max(1, _CHUNK // len(tile["s"]))
        for s in range(0, len(mine), step):
            j = mine[s : s + step]
            hist.add(
                np.abs(body_flow[j])[:, None] * viscosity * tile["s"],
                dec.body_length[j][:, None] * tile["a"],
            )
        body_area += float(dec.body_length[mine].sum() * tile["a"].sum())
    return hist.stats(window), body_area


def compose_field(
    layout: Layout,
    pressures: dict[str, float],
    viscosity: float,
    *,
    window: tuple[float, float] | None = None,
    across: float = 4.0,
    solver: str = "auto",
    stub: float = STUB_WIDTHS,
    close: float | None = CLOSE_WIDTHS,
    same_within: float = SAME_WITHIN,
    decomposition: Decomposition | None = None,
    with_floor: bool = True,
) -> ComposedField:
    """The chip's field at the given port pressures, composed from its pieces.

    Parameters
    ----------
    layout : Layout
    pressures : dict of str to float
        Pressure at every port of the chip [Pa].
    viscosity : float
        [Pa s].
    window : (float, float), optional
        The cells' floor-shear window [Pa], for the fractions below and above it.
    across : float
        Triangle edges across a channel (as :func:`chipflow.field.solve.solve_field`) [-].
    solver : str
        How each piece is solved (:func:`chipflow.field.solve.solve_reduced`).
    stub, close, same_within : float
        As :func:`decompose`.
    decomposition : Decomposition, optional
        The chip already cut (:func:`decompose`).
    with_floor : bool
        Gather the floor shear; without it ``floor`` is NaN (flows and pressures only).

    Raises
    ------
    FieldError
        A port without a pressure, a piece that does not solve, or composed flows that do
        not balance (:func:`chipflow.field.solve.check_field_flows`).
    """
    from scipy import sparse
    from scipy.sparse.linalg import spsolve

    if not (np.isfinite(viscosity) and viscosity > 0):
        raise FieldError(f"viscosity must be positive, got {viscosity!r} Pa s")
    missing = [p.name for p in layout.ports if p.name not in pressures]
    if missing:
        raise FieldError(f"the composed field needs a pressure at every port; none for {missing}")
    t0 = time.perf_counter()
    dec = (
        decomposition
        if decomposition is not None
        else decompose(layout, stub=stub, close=close, same_within=same_within)
    )
    t1 = time.perf_counter()
    # the pieces are snapped, sampled and told apart from their ports at the chip's scale,
    # as the monolithic solve of the chip is
    box = shapely.bounds([layer.geometry for layer in layout.layers])  # no union: large
    x0, y0 = box[:, :2].min(axis=0)
    x1, y1 = box[:, 2:].max(axis=0)
    scale = float(np.hypot(x1 - x0, y1 - y0))
    settings = {"across": across, "samples": SAMPLE_LEVEL, "scale": scale}
    units = [
        cached(
            "piece",
            _piece_key(dec.frame_depths[k], dec.frame_ports[k]),
            lambda k=k: _unit_piece(dec.frame_depths[k], dec.frame_ports[k], across, solver, scale),
            settings,
        )
        for k in range(dec.distinct)
    ]
    pairs = sorted(
        {(float(w), float(d)) for w, d in zip(dec.body_width, dec.body_depth, strict=True)}
    )
    tiles = {pair: _tile(*pair, across, solver, scale) for pair in pairs}
    piece_args = (across, solver, scale)
    t2 = time.perf_counter()

    # the nodal problem: pieces' conductances and bodies' between cuts, ports held
    n = len(dec.node_port)
    rows, cols, vals = [], [], []
    for unit, slot in zip(units, dec.slots, strict=True):
        k = slot.shape[1]
        rows.append(np.repeat(slot, k, axis=1).ravel())
        cols.append(np.tile(slot, (1, k)).ravel())
        vals.append(np.tile(unit["g"].ravel(), len(slot)))
    r_body = np.array(
        [
            tiles[(float(w), float(d))]["r"]
            for w, d in zip(dec.body_width, dec.body_depth, strict=True)
        ]
    )
    g_body = 1.0 / (r_body * dec.body_length) if len(r_body) else np.zeros(0)
    na, nb = dec.body_nodes.T if len(r_body) else (np.zeros(0, int), np.zeros(0, int))
    rows += [na, nb, na, nb]
    cols += [na, nb, nb, na]
    # each cut: the flow into its piece and into its body sum to zero
    vals += [g_body, g_body, -g_body, -g_body]
    k_matrix = sparse.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n)
    )
    fixed = np.array([name != "" for name in dec.node_port])
    p = np.zeros(n)
    p[fixed] = [pressures[name] for name in dec.node_port[fixed]]
    free = ~fixed
    if free.any():
        a_ff = k_matrix[free][:, free].tocsc()
        p[free] = spsolve(a_ff, -(k_matrix[free][:, fixed] @ p[fixed]))
    if not np.all(np.isfinite(p)):
        raise FieldError(
            "the composed field's joining problem is singular: a part not joined to a port"
        )
    inflow = k_matrix @ p / viscosity  # flow into the pieces at each node
    port_flows = {name: float(inflow[i]) for i, name in enumerate(dec.node_port) if name}
    check_field_flows(port_flows, {k: float(v) for k, v in pressures.items()})
    body_flow = g_body * (p[na] - p[nb]) / viscosity
    t3 = time.perf_counter()

    if with_floor:
        floor, body_area = _floor(dec, units, tiles, p, body_flow, viscosity, window, piece_args)
    else:
        floor, body_area = ShearStats(np.nan, np.nan, np.nan, np.nan, np.nan, np.nan), np.nan
    t4 = time.perf_counter()
    stats = {
        "pieces": int(len(dec.pieces)),
        "distinct": dec.distinct,
        "bodies": int(len(dec.body_length)),
        "triangles": int(
            sum(u["area"].size for u in units) + sum(t["s"].size for t in tiles.values())
        )
        // SAMPLE_LEVEL**2,
        "body_area": body_area / floor.area if floor.area else 0.0,  # nan without the floor
        "cut_seconds": t1 - t0,
        "solve_seconds": t2 - t1,
        "join_seconds": t3 - t2,
        "shear_seconds": t4 - t3,
    }
    return ComposedField(
        port_pressures={k: float(v) for k, v in pressures.items()},
        port_flows=port_flows,
        floor=floor,
        node_pressure=p,
        body_flow=body_flow,
        decomposition=dec,
        stats=stats,
    )
