"""Placing a sized tree on the chip: centrelines, channel outlines, mask layers, ports.

What the drawing looks like
---------------------------
Flow runs along +x. The inlet port sits on the left, the outlet port on the right. The trunk
(generation 0) leaves the inlet rim straight along +x to the first junction. At every junction
the parent ends and its two children leave symmetrically, one turning up and one turning down:
each child leaves the junction at an angle ``theta`` (90 degrees - a T - when the lateral
offset allows it, less otherwise), turns back to +x on one circular arc of centreline radius
``bend_radius * width`` and runs straight to the next junction. Every channel of a generation
is the same shape, mirrored for the lower child, so every inlet-to-bed path has the same
length and the same bends. The bed channels lie side by side at a uniform pitch (at least
width + gap, more if a wider upper generation needs it), run along +x and are met by the
collecting tree, which is the distribution tree mirrored about the middle of the bed.

A bed channel longer than the room between the trees folds into a serpentine of an odd number
of runs joined by half-turns (every bed channel folds alike, stacked upwards in its own lane);
the collecting tree and the outlet then sit higher by the serpentine's rise.

Where the children leave at 90 degrees the junction is a T with a flat far wall. Where they
leave at a smaller angle (a Y), the junction gets a disc as wide as the widest channel meeting
there: it rounds the parent's end and blunts the wall tip between the two children, so no
sliver of PDMS is left. Port holes are
drawn as pads of the punch diameter joined to their channel.

Lengths and junctions
---------------------
Centrelines run from junction centre to junction centre (the inlet and outlet channels start
at the rim of the port hole, since the punched hole itself has no resistance). Each channel's
``length`` is the exact length of its centreline with its arcs as true circles; the junction
area is thus shared out half to each side of the node, and no length is counted twice or lost.

Mask layers
-----------
One layer per depth, named ``D<depth in um>UM`` with a ``P`` for a decimal point (50 um ->
``MASK1_DEPTH_50UM``, a second level of 12.5 um -> ``MASK2_DEPTH_12P5UM``; see
:func:`layer_name`), shallowest first. Where a shallow channel meets a deeper
one at a junction, the deeper layer gets the junction disc and also covers the shallow channel
for ``alignment_margin`` beyond the disc, so a misaligned second exposure cannot leave a step
that narrows the channel. The shallow layer draws its channel up to the junction centre.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely

from chipflow.design.model import TreeDesign
from chipflow.errors import LayoutError
from chipflow.layout.model import DrawnChannels, Layout, MaskLayer, PortMark
from chipflow.layout.rules import Chip, LayoutRules

__all__ = ["draw", "layer_name"]

_MAX_RUNS = 401  # serpentine runs tried before giving up


def layer_name(level: int, depth: float) -> str:
    """Mask layer name: the mask level number (1 for the shallowest) and its depth [m].

    Only letters, digits and underscores (``P`` for a decimal point), so that every DXF
    version and GDSII reader accepts it; the exporters write these names as they are.

    Examples
    --------
    >>> layer_name(1, 50e-6), layer_name(2, 12.5e-6)
    ('MASK1_DEPTH_50UM', 'MASK2_DEPTH_12P5UM')
    """
    text = f"{depth * 1e6:.3f}".rstrip("0").rstrip(".")
    return f"MASK{level}_DEPTH_{text.replace('.', 'P')}UM"


# -- centreline templates -------------------------------------------------------------------
@dataclass(frozen=True)
class _Trace:
    """A centreline starting at (0, 0): points, tangent heading at each point, exact length."""

    xy: np.ndarray  # (m, 2)
    heading: np.ndarray  # (m,)
    length: float
    bends: int


def _trace(heading0: float, pieces: list[tuple], tol: float) -> _Trace:
    """Follow ``pieces`` (``("L", length)`` or ``("A", radius, signed angle)``, + = left)."""
    pts = [(0.0, 0.0)]
    hs = [heading0]
    x = y = 0.0
    h = heading0
    total = 0.0
    bends = 0
    for piece in pieces:
        if piece[0] == "L":
            length = piece[1]
            if length <= 0:
                continue
            x += length * math.cos(h)
            y += length * math.sin(h)
            pts.append((x, y))
            hs.append(h)
            total += length
        else:
            _, radius, angle = piece
            if angle == 0:
                continue
            bends += 1
            step = 2 * math.acos(max(1 - tol / radius, -1.0))
            nseg = max(2, math.ceil(abs(angle) / step))
            side = math.copysign(1.0, angle)
            cx = x - side * radius * math.sin(h)
            cy = y + side * radius * math.cos(h)
            for j in range(1, nseg + 1):
                hj = h + angle * j / nseg
                pts.append((cx + side * radius * math.sin(hj), cy - side * radius * math.cos(hj)))
                hs.append(hj)
            x, y = pts[-1]
            h = h + angle
            total += radius * abs(angle)
    return _Trace(np.array(pts), np.array(hs), total, bends)


def _offset_ring(trace: _Trace, width: float) -> np.ndarray:
    """Closed outline (2m, 2) of a channel of ``width`` around ``trace``: exact offsets."""
    normal = np.column_stack((-np.sin(trace.heading), np.cos(trace.heading)))
    left = trace.xy + 0.5 * width * normal
    right = trace.xy - 0.5 * width * normal
    return np.concatenate((left, right[::-1]))


def _split(trace: _Trace, cut: float) -> tuple[_Trace, _Trace]:
    """``trace`` cut ``cut`` [m] before its end, inside its last straight run along +x.

    Both parts share the very same cut point, so their outlines share two exact vertices.
    """
    point = trace.xy[-1] - (cut, 0.0)
    head_xy = np.concatenate((trace.xy[:-1], point[None]))
    tail_xy = np.stack((point, trace.xy[-1]))
    head = _Trace(head_xy, trace.heading, trace.length - cut, trace.bends)
    return head, _Trace(tail_xy, trace.heading[-2:], cut, 0)


def _fork(a: float, radius: float) -> tuple[float, float]:
    """Exit angle [rad] and straight lead [m] of a child offset sideways by ``a``."""
    if a >= radius:
        return math.pi / 2, a - radius
    return math.acos(1 - a / radius), 0.0


def _ceil_grid(value: float, grid: float) -> float:
    return math.ceil(value / grid - 1e-9) * grid


# -- the plan: every dimension of the drawing, decided before any geometry is built ---------
@dataclass(frozen=True)
class _Plan:
    n: int
    pitch: float
    runs: int
    run_length: float  # length of each serpentine run (or the one straight run)
    lead: float  # straight before/after the serpentine
    turn: float  # centre spacing of serpentine runs
    radius: np.ndarray  # (n+1,) bend radius per generation
    straight: np.ndarray  # (n+1,) straight run after the bend (trees)
    theta: np.ndarray  # (n+1,) exit angle per generation 1..n (index 0 unused)
    lead_in: np.ndarray  # (n+1,) straight before the bend
    advance: np.ndarray  # (n+1,) x advance of a generation's channel
    trunk: float
    width_needed: float
    height_needed: float
    bed_min_length: float


def _plan(design: TreeDesign, chip: Chip, rules: LayoutRules, runs: int) -> _Plan:
    n = design.generations
    grid = rules.grid
    gap = rules.min_gap
    dist = design.distribution
    coll = {lv.generation: lv for lv in design.collection}
    bed = design.bed
    # widest of the distributing and collecting channel of each generation sets the geometry
    width = np.array(
        [max(dist[g].width, coll[g].width) for g in range(n)] + [bed.width], dtype=float
    )
    radius = np.array([_ceil_grid(rules.bend_radius * w, grid) for w in width])
    turn = _ceil_grid(max(2 * radius[n], width[n] + gap), 2 * grid)
    lane = (runs - 1) * turn
    need = [(width[g] + gap) / 2 ** (n - g) for g in range(1, n + 1)]
    pitch = _ceil_grid(max(max(need), lane + width[n] + gap), 2 * grid)
    theta = np.zeros(n + 1)
    lead_in = np.zeros(n + 1)
    straight = np.zeros(n + 1)
    advance = np.zeros(n + 1)
    for g in range(1, n + 1):
        a = 2 ** (n - g - 1) * pitch
        theta[g], lead_in[g] = _fork(a, radius[g])
        nxt = width[g + 1] if g < n else 0.0
        if g < n:  # straight run after the bend; it rounds the advance up to the grid
            reach = radius[g] * math.sin(theta[g])
            straight[g] = _ceil_grid(reach + max(width[g], nxt) + gap, grid) - reach
        advance[g] = radius[g] * math.sin(theta[g]) + straight[g]
    keep = chip.punch_diameter / 2 + rules.port_keepout
    trunk = _ceil_grid(rules.port_keepout + max(width[0], width[min(1, n)]) + gap, grid)
    bend_len = lead_in[n] + radius[n] * theta[n]  # one S-half of a bed channel
    fixed_x = 2 * (chip.margin + keep + chip.punch_diameter / 2 + trunk + advance[1:n].sum())
    fixed_x += 2 * radius[n] * math.sin(theta[n])
    lead = _ceil_grid(turn / 2 + width[n] + gap, grid) if runs > 1 else 0.0
    target = max(bed.length, 2 * bend_len)
    straight_total = target - 2 * bend_len  # serpentine part incl. leads and half-turns
    run_length = (straight_total - 2 * lead - (runs - 1) * math.pi * turn / 2) / runs
    extent_x = run_length + 2 * lead
    span = (2**n - 1) * pitch + lane + width[n]
    height = max(span, lane + 2 * keep) + 2 * chip.margin
    return _Plan(
        n,
        pitch,
        runs,
        run_length,
        lead,
        turn,
        radius,
        straight,
        theta,
        lead_in,
        advance,
        trunk,
        fixed_x + extent_x,
        height,
        2 * bend_len,
    )


def _cuts(design: TreeDesign, plan: _Plan, rules: LayoutRules) -> list[float | None]:
    """Where to cut the channels of each generation 0..n-1 for merging the mask layers.

    A channel of generation g ends with a straight run along +x into the junction of
    generation g (the trunk is all straight; its collecting mirror starts with it). It is cut
    across that run, ``cut`` [m] before the junction, clear of everything drawn around the
    junction: the children's flat ends and the disc (half the widest width) and the
    alignment overlap (plus ``alignment_margin``). All None when some run is too short.
    """
    n = design.generations
    coll = {lv.generation: lv for lv in design.collection}
    width = [max(design.distribution[g].width, coll[g].width) for g in range(n)]
    width.append(design.bed.width)
    cuts: list[float | None] = []
    for g in range(n):
        run = plan.trunk if g == 0 else float(plan.straight[g])
        clear = max(width[g], width[g + 1]) / 2 + rules.alignment_margin
        if not clear + rules.grid < run:
            return [None] * n
        cuts.append(0.5 * (clear + run))
    return cuts


def _choose_plan(design: TreeDesign, chip: Chip, rules: LayoutRules) -> _Plan:
    first = _plan(design, chip, rules, 1)
    for runs in range(1, _MAX_RUNS + 1, 2):
        plan = first if runs == 1 else _plan(design, chip, rules, runs)
        if plan.height_needed > chip.height + 1e-12 or plan.run_length < 0:
            break
        if plan.width_needed <= chip.width + 1e-12:
            return plan
    raise LayoutError(
        f"design '{design.name}' with {2**first.n} bed channels does not fit on the "
        f"{chip.width * 1e3:g} x {chip.height * 1e3:g} mm chip: drawn with straight bed "
        f"channels it needs at least {first.width_needed * 1e3:.1f} x "
        f"{first.height_needed * 1e3:.1f} mm (folding the bed into a serpentine did not help); "
        "use a larger chip, fewer generations, or shorter or narrower bed channels"
    )


# -- drawing --------------------------------------------------------------------------------
def draw(design: TreeDesign, chip: Chip | None = None, rules: LayoutRules | None = None) -> Layout:
    """Draw a sized tree design on a chip.

    Parameters
    ----------
    design : TreeDesign
        The sized, mirrored bifurcating tree (at least one generation).
    chip : Chip, optional
        Footprint, edge margin and punch (default a 75 x 25 mm slide).
    rules : LayoutRules, optional
        Grid, walls, bend radius, alignment margin, port keep-out.

    Returns
    -------
    Layout
        Channels with their identities and exact lengths [m], mask layers (one per depth,
        shallowest first), ports, nodes.

    Raises
    ------
    LayoutError
        When the design does not fit on the chip (the message gives the size it needs).
    """
    chip = chip or Chip()
    rules = rules or LayoutRules()
    n = design.generations
    if n < 1:
        raise LayoutError(f"design '{design.name}': a tree needs at least one generation")
    if any(level.round for level in design.levels):
        raise LayoutError(
            f"design '{design.name}': round channels (tree.shape = \"round\") cannot be drawn "
            "on a moulded chip; they size a comparison with Murray's law. Use chipflow check "
            'for the comparison, or shape = "rectangular" to build a chip'
        )
    plan = _choose_plan(design, chip, rules)
    grid = rules.grid
    tol = grid / 4
    n_bed = 2**n
    rise = (plan.runs - 1) * plan.turn
    keep = chip.punch_diameter / 2 + rules.port_keepout
    r_hole = chip.punch_diameter / 2

    # x positions: centre the drawing on the chip; the inlet side is on the grid, the outlet
    # side is its exact mirror image about the middle of the bed
    x_in = _snap(chip.width / 2 - plan.width_needed / 2 + chip.margin + keep, grid)
    x_rim = x_in + r_hole
    x_node = np.empty(n)
    x_node[0] = x_rim + plan.trunk
    for k in range(1, n):
        x_node[k] = _snap(x_node[k - 1] + plan.advance[k], grid)
    bed_extent = 2 * plan.radius[n] * math.sin(plan.theta[n]) + plan.run_length + 2 * plan.lead
    x_mid = x_node[n - 1] + bed_extent / 2
    # y positions: centre the bed lanes
    y_lane0 = _snap(chip.height / 2 - ((n_bed - 1) * plan.pitch + rise) / 2, grid)
    y_in = y_lane0 + (n_bed - 1) * plan.pitch / 2

    # nodes: 0 inlet, 1 outlet, distribution levels, collection levels
    level_start = np.cumsum([0] + [2**k for k in range(n)])
    n_level = int(level_start[-1])
    d0, c0 = 2, 2 + n_level
    node_xy = np.empty((2 + 2 * n_level, 2))
    node_xy[0] = (x_rim, y_in)
    node_xy[1] = (2 * x_mid - x_rim, y_in + rise)
    for k in range(n):
        i = np.arange(2**k)
        y = y_lane0 + (i * 2 ** (n - k) + (2 ** (n - k) - 1) / 2) * plan.pitch
        sl = slice(level_start[k], level_start[k + 1])
        node_xy[d0 + sl.start : d0 + sl.stop] = np.column_stack((np.full(i.size, x_node[k]), y))
        node_xy[c0 + sl.start : c0 + sl.stop] = np.column_stack(
            (np.full(i.size, 2 * x_mid - x_node[k]), y + rise)
        )
    names = ["inlet", "outlet"]
    names += [f"split{k}.{i}" for k in range(n) for i in range(2**k)]
    names += [f"merge{k}.{i}" for k in range(n) for i in range(2**k)]

    dist = design.distribution
    coll = {lv.generation: lv for lv in design.collection}
    bed = design.bed

    parts: list[dict] = []  # one entry per level, in channel order
    # fragments of the mask layers: (polygons, depth, node whose neighbourhood they join)
    frags: list[tuple[np.ndarray, float, np.ndarray]] = []
    cuts = _cuts(design, plan, rules)

    def add(role, level, traces, starts, node_a, node_b, index, mirror=False, cut=None):
        """All channels of one level from its up/down templates, vectorised.

        ``cut`` (distance from the template's end [m], within its last straight run along
        +x) splits each outline into two fragments for the mask layers: the part up to the
        cut joins the junction where the template starts, the rest the one where it ends.
        """
        sign = np.asarray(traces["sign"])  # (count,) +1 upper, -1 lower
        up, down = traces[1], traces[-1]
        xy = np.where(sign[:, None, None] > 0, up.xy[None], down.xy[None]) + starts[:, None, :]

        def rings(tr_up, tr_down):
            ring_up, ring_down = (
                _offset_ring(tr_up, level.width),
                _offset_ring(tr_down, level.width),
            )
            ring = np.where(sign[:, None, None] > 0, ring_up[None], ring_down[None])
            ring = ring + starts[:, None, :]
            if mirror:  # collection: mirror about x_mid, lift by the serpentine rise
                ring = np.stack((2 * x_mid - ring[..., 0], ring[..., 1] + rise), axis=-1)
            return shapely.polygons(ring)

        if mirror:  # collection: mirror about x_mid, lift by the serpentine rise, reverse
            xy = np.stack((2 * x_mid - xy[..., 0], xy[..., 1] + rise), axis=-1)[:, ::-1]
        outline = rings(up, down)
        # the template starts at node_a (node_b when mirrored, as the flow runs backwards)
        first, last = (node_b, node_a) if mirror else (node_a, node_b)
        if cut is None:
            frags.append((outline, level.depth, first))
        else:
            (head_up, tail_up), (head_down, tail_down) = _split(up, cut), _split(down, cut)
            frags.append((rings(head_up, head_down), level.depth, first))
            frags.append((rings(tail_up, tail_down), level.depth, last))
        count = sign.size
        parts.append(
            dict(
                centreline=shapely.linestrings(xy),
                outline=outline,
                length=np.full(count, up.length),
                width=np.full(count, level.width),
                depth=np.full(count, level.depth),
                generation=np.full(count, level.generation),
                role=np.full(count, role, dtype=object),
                index=index,
                node_a=node_a,
                node_b=node_b,
                bends=np.full(count, up.bends),
            )
        )

    def tree_traces(g: int, count: int) -> dict:
        th, lead, r = plan.theta[g], plan.lead_in[g], plan.radius[g]
        out = {"sign": np.where(np.arange(count) % 2 == 1, 1.0, -1.0)}
        for s in (1, -1):
            out[s] = _trace(s * th, [("L", lead), ("A", r, -s * th), ("L", plan.straight[g])], tol)
        return out

    # distribution
    trunk = {"sign": np.ones(1), 1: _trace(0.0, [("L", plan.trunk)], tol)}
    trunk[-1] = trunk[1]
    dist_nodes = [d0 + level_start[k] + np.arange(2**k) for k in range(n)]
    coll_nodes = [c0 + level_start[k] + np.arange(2**k) for k in range(n)]
    trunk_nodes = (np.array([0]), dist_nodes[0], np.array([0]))
    add("distribution", dist[0], trunk, node_xy[[0]], *trunk_nodes, cut=cuts[0])
    for g in range(1, n):
        i = np.arange(2**g)
        tr = tree_traces(g, i.size)
        parent = dist_nodes[g - 1][i // 2]
        add("distribution", dist[g], tr, node_xy[parent], parent, dist_nodes[g], i, cut=cuts[g])
    # bed
    i = np.arange(n_bed)
    th, lead, r = plan.theta[n], plan.lead_in[n], plan.radius[n]
    bed_tr = {"sign": np.where(i % 2 == 1, 1.0, -1.0)}
    for s in (1, -1):
        pieces = [("L", lead), ("A", r, -s * th)]
        if plan.runs == 1:
            pieces.append(("L", plan.run_length))
        else:
            pieces.append(("L", plan.lead))
            for j in range(plan.runs):
                pieces.append(("L", plan.run_length))
                if j < plan.runs - 1:
                    pieces.append(("A", plan.turn / 2, math.pi if j % 2 == 0 else -math.pi))
            pieces.append(("L", plan.lead))
        pieces += [("A", r, -s * th), ("L", lead)]
        bed_tr[s] = _trace(s * th, pieces, tol)
    parent = dist_nodes[n - 1][i // 2]
    add("bed", bed, bed_tr, node_xy[parent], parent, coll_nodes[n - 1][i // 2], i)
    # collection: mirror images of the distribution channels, flow towards the outlet
    for g in range(n - 1, 0, -1):
        i = np.arange(2**g)
        tr = tree_traces(g, i.size)
        parent = dist_nodes[g - 1][i // 2]
        add(
            "collection",
            coll[g],
            tr,
            node_xy[parent],
            coll_nodes[g],
            coll_nodes[g - 1][i // 2],
            i,
            mirror=True,
            cut=cuts[g],
        )
    add(
        "collection",
        coll[0],
        trunk,
        node_xy[[0]],
        coll_nodes[0],
        np.array([1]),
        np.array([0]),
        mirror=True,
        cut=cuts[0],
    )

    cat = {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}

    # layers
    depths = np.unique(np.round(cat["depth"], 12))
    layer = np.searchsorted(depths, np.round(cat["depth"], 12))

    # junction discs and alignment overlaps, node by node level (vectorised per level)
    node_pts = shapely.points(node_xy)
    for k, a_sel, b_sel in _junction_pairs(cat, n):
        # a_sel: channels ending at the junctions; b_sel: channels starting there
        nodes = np.unique(cat["node_b"][a_sel])
        wa, wb = cat["width"][a_sel][0], cat["width"][b_sel][0]
        da, db = cat["depth"][a_sel][0], cat["depth"][b_sel][0]
        deep = max(da, db)
        radius = max(wa, wb) / 2
        if plan.theta[k + 1] < math.pi / 2 - 1e-9:  # a Y: blunt the wall tip between children
            frags.append((shapely.buffer(node_pts[nodes], radius, quad_segs=16), deep, nodes))
        if not math.isclose(da, db, rel_tol=1e-9):
            shallow = np.flatnonzero(b_sel if da > db else a_sel)
            # the overlap reaches alignment_margin past the junction disc along each channel
            ends = cat["node_a"][shallow] if da > db else cat["node_b"][shallow]
            reach = shapely.buffer(node_pts[ends], radius + rules.alignment_margin, quad_segs=16)
            frags.append((shapely.intersection(cat["outline"][shallow], reach), deep, ends))

    # ports: hole-sized pads joined to their channel
    ports = (
        PortMark("inlet", x_in, y_in, chip.punch_diameter, keep),
        PortMark("outlet", 2 * x_mid - x_in, y_in + rise, chip.punch_diameter, keep),
    )
    for node, (port, ch) in enumerate(zip(ports, (0, cat["width"].size - 1), strict=True)):
        half, rim = cat["width"][ch] / 2, node_xy[node, 0]
        neck = shapely.box(min(port.x, rim), port.y - half, max(port.x, rim), port.y + half)
        pad = shapely.union(shapely.Point(port.x, port.y).buffer(r_hole, quad_segs=32), neck)
        frags.append((np.array([pad]), cat["depth"][ch], np.array([node])))

    # every fragment joins the neighbourhood of one junction; the two ends of a pair of bed
    # channels form one neighbourhood (the pair encloses the wall between them)
    hood = np.arange(node_xy.shape[0])
    hood[coll_nodes[n - 1]] = dist_nodes[n - 1]
    geoms = np.concatenate([f[0] for f in frags])
    f_layer = np.concatenate(
        [np.full(f[0].size, np.searchsorted(depths, np.round(f[1], 12))) for f in frags]
    )
    f_hood = np.concatenate([hood[f[2]] for f in frags])
    layers = []
    for li, depth in enumerate(depths):
        sel = f_layer == li
        merged = _merge_layer(geoms[sel], f_hood[sel] if cuts[0] is not None else None)
        merged = _snap_to_grid(merged, grid)
        layers.append(MaskLayer(layer_name(li + 1, float(depth)), float(depth), merged))

    channels = DrawnChannels(
        centreline=cat["centreline"],
        length=cat["length"].astype(float),
        width=cat["width"].astype(float),
        depth=cat["depth"].astype(float),
        generation=cat["generation"].astype(int),
        role=cat["role"].astype(str),
        index=cat["index"].astype(int),
        node_a=cat["node_a"].astype(int),
        node_b=cat["node_b"].astype(int),
        layer=layer.astype(int),
        outline=cat["outline"],
        bends=cat["bends"].astype(int),
    )
    warnings = ()
    if bed.length < plan.bed_min_length - 1e-12:
        warnings = (
            f"bed channels drawn {plan.bed_min_length * 1e6:.0f} um long instead of the "
            f"designed {bed.length * 1e6:.0f} um: their two bends alone need that length",
        )
    return Layout(
        name=design.name,
        outline=shapely.box(0.0, 0.0, chip.width, chip.height),
        margin=chip.margin,
        grid=grid,
        layers=tuple(layers),
        ports=ports,
        channels=channels,
        node_xy=node_xy,
        node_names=tuple(names),
        warnings=warnings,
    )


def _snap_to_grid(geometry: shapely.Geometry, grid: float) -> shapely.Geometry:
    """Round every vertex to the mask grid, keeping the geometry valid.

    Rounding vertex by vertex is linear in the number of vertices; walls and arc chords are
    far longer than the grid, so it almost never spoils validity. Should it, the full
    snap-rounding of GEOS (much slower on layers with thousands of holes) takes over.
    """
    snapped = shapely.remove_repeated_points(
        shapely.set_precision(geometry, grid, mode="pointwise"), 0.0
    )
    if snapped.is_valid:
        return snapped
    snapped = shapely.set_precision(geometry, grid)
    return snapped if snapped.is_valid else shapely.make_valid(snapped)


def _snap(value: float, grid: float) -> float:
    return round(value / grid) * grid


def _merge_layer(geoms: np.ndarray, hood: np.ndarray | None) -> shapely.Geometry:
    """Union of the fragments of one mask layer [m], in linear time.

    Fragments overlap only near the junction whose neighbourhood ``hood`` they join, and
    neighbourhoods meet only along the cuts across straight runs, where both sides share the
    same two vertices (see :func:`_cuts`). So each neighbourhood is merged on its own (a
    handful of small polygons), and the merged neighbourhoods, which then form a polygonal
    coverage, are joined by a coverage union, which only drops their shared edges. One big
    overlay of the whole layer is superlinear: the walls between bed channels make thousands
    of holes. Should the pieces not form a clean coverage (or ``hood`` is None, when a cut
    did not fit), the plain union of all fragments is taken instead.
    """
    geoms = np.asarray(geoms, dtype=object)
    keep = ~shapely.is_empty(geoms)
    geoms = geoms[keep]
    if hood is None or geoms.size == 0:
        return shapely.union_all(geoms)
    hood = hood[keep]
    order = np.argsort(hood, kind="stable")
    _, start, count = np.unique(hood[order], return_index=True, return_counts=True)
    table = np.full((start.size, int(count.max())), None, dtype=object)
    column = np.arange(order.size) - np.repeat(start, count)
    table[np.repeat(np.arange(start.size), count), column] = geoms[order]
    local = shapely.union_all(table, axis=1)
    merged = _stitch(local)
    area = shapely.area(local).sum()
    if merged is not None and merged.is_valid and abs(merged.area - area) <= 1e-9 * area:
        return merged
    return shapely.union_all(geoms)


def _stitch(local: np.ndarray) -> shapely.Geometry | None:
    """Join polygons that meet only along whole shared edges (a coverage) [m], in numpy.

    Every ring edge shared by two polygons (run once each way) is dropped, the other edges
    are chained into rings vertex to vertex, and each ring goes to the polygon of its
    connected group, as shell (the orientation of the input shells) or hole. Vertices that
    only served the shared edges and lie on a straight run are dropped too. None when the
    input is no such coverage (a vertex with two ways on).
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    local = local[~shapely.is_empty(local)]
    polys = shapely.get_parts(local)
    rings, ring_poly = shapely.get_rings(polys, return_index=True)
    xy, ring_of = shapely.get_coordinates(rings, return_index=True)
    # edges a -> b inside each closed ring
    last = np.r_[ring_of[1:] != ring_of[:-1], True]
    a_xy, b_xy = xy[:-1][~last[:-1]], xy[1:][~last[:-1]]
    edge_poly = ring_poly[ring_of[:-1][~last[:-1]]]
    ends = np.concatenate((a_xy, b_xy))
    # vertices compared exactly: a complex number sorts by x, then y
    vert, vid = np.unique(ends[:, 0] + 1j * ends[:, 1], return_inverse=True)
    vert, vid = np.column_stack((vert.real, vert.imag)), vid.ravel()
    a, b = vid[: a_xy.shape[0]], vid[a_xy.shape[0] :]
    nv = vert.shape[0]
    # shared edges: the same pair of vertices, once each way
    key = np.minimum(a, b).astype(np.int64) * nv + np.maximum(a, b)
    _, inv, cnt = np.unique(key, return_inverse=True, return_counts=True)
    shared = cnt[inv] == 2
    if np.any(cnt > 2):
        return None
    # polygons joined by shared edges form one output polygon
    sa = np.flatnonzero(shared)
    order = np.argsort(key[sa], kind="stable")
    pairs = sa[order].reshape(-1, 2)
    sb = edge_poly[pairs]
    n_poly = polys.size
    link = coo_matrix((np.ones(len(sb)), (sb[:, 0], sb[:, 1])), shape=(n_poly, n_poly))
    _, group = connected_components(link, directed=False)
    keep = ~shared
    a, b, e_group = a[keep], b[keep], group[edge_poly[keep]]
    succ = np.full(nv, -1)
    succ[a] = b
    if np.bincount(a, minlength=nv).max() > 1 or np.bincount(b, minlength=nv).max() > 1:
        return None
    grp_of_v = np.full(nv, -1)
    grp_of_v[a] = e_group
    # drop vertices that only served shared edges and lie on a straight horizontal run
    pred = np.full(nv, -1)
    pred[b] = a
    on_cut = np.zeros(nv, dtype=bool)
    on_cut[np.concatenate((vid[: a_xy.shape[0]][shared], vid[a_xy.shape[0] :][shared]))] = True
    used = succ >= 0
    flat = used & on_cut
    flat[flat] = (vert[pred[flat], 1] == vert[flat, 1]) & (vert[succ[flat], 1] == vert[flat, 1])
    # rings: cycles of succ; label them, start each at its smallest vertex, rank by doubling
    verts = np.flatnonzero(used)
    cyc = coo_matrix((np.ones(verts.size), (verts, succ[verts])), shape=(nv, nv))
    _, label = connected_components(cyc, directed=True, connection="strong")
    first = np.full(label.max() + 1, nv)
    np.minimum.at(first, label[verts], verts)
    nxt = succ.copy()
    nxt[pred[first[label[verts]]][np.isin(verts, first)]] = -1  # break each cycle before start
    tail = np.flatnonzero(used & (nxt < 0))
    nxt[tail] = tail
    rank = np.where(used, 1, 0)
    rank[tail] = 0
    while True:
        jump = nxt[nxt]
        if np.array_equal(jump, nxt):
            break
        rank = rank + np.where(used, rank[nxt], 0)
        nxt = jump
    sel = verts[~flat[verts]]
    sel = sel[np.lexsort((-rank[sel], label[sel]))]
    ring_label = label[sel]
    # orientation of each output ring; shells turn as the input shells do
    ring_ids, start, count = np.unique(ring_label, return_index=True, return_counts=True)
    if np.any(count < 3):
        return None
    x, y = vert[sel, 0], vert[sel, 1]
    nxt_i = np.arange(sel.size) + 1
    nxt_i[start + count - 1] = start
    area = np.add.reduceat(x * y[nxt_i] - x[nxt_i] * y, start) / 2
    ext = shapely.get_coordinates(shapely.get_exterior_ring(polys[0]))
    shell_sign = np.sign(np.sum(ext[:-1, 0] * ext[1:, 1] - ext[1:, 0] * ext[:-1, 1]))
    is_shell = np.sign(area) == shell_sign
    r_group = grp_of_v[sel[start]]
    shells_per_group = np.bincount(r_group[is_shell], minlength=group.max() + 1)
    if np.any(shells_per_group != 1):
        return None
    # polygons: shell first, then holes, ordered by the shell's first vertex
    shell_rank = np.full(group.max() + 1, 0)
    shell_rank[r_group[is_shell]] = np.argsort(np.argsort(sel[start][is_shell]))
    ring_order = np.lexsort((~is_shell, shell_rank[r_group]))
    ring_geoms = shapely.linearrings(
        np.column_stack((x, y)), indices=np.repeat(np.arange(ring_ids.size), count)
    )
    ring_geoms = ring_geoms[ring_order]
    out = shapely.polygons(ring_geoms, indices=shell_rank[r_group][ring_order])
    return out[0] if out.size == 1 else shapely.multipolygons(out)


def _junction_pairs(cat: dict, n: int):
    """(ending, starting) channel selections at each junction level, as boolean masks."""
    gen, role = cat["generation"], cat["role"]
    dist = role == "distribution"
    coll = role == "collection"
    bed = role == "bed"
    for k in range(n):
        ending = dist & (gen == k)
        starting = (dist & (gen == k + 1)) if k < n - 1 else bed
        yield k, ending, starting
        ending_c = (coll & (gen == k + 1)) if k < n - 1 else bed
        yield k, ending_c, coll & (gen == k)
