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
length and the same bends. The bed channels lie side by side, at least width + ``[bed].gap``
apart (more if a wider upper generation needs it), run along +x and are met by the collecting
tree, which is the distribution tree mirrored about the middle of the bed.

A bed channel longer than ``max_straight_length``, or than the room between the trees, folds
into a serpentine of an odd number of equal runs joined by half-turns (every bed channel folds
alike, stacked upwards in its own lane, its runs ``gap`` apart); the collecting tree and the
outlet then sit higher by the serpentine's rise. A fold that only the chip's width forces is
said in the layout's warnings.

On the grid without moving a wall
---------------------------------
Every straight run's axis sits where both its walls fall on the mask grid: on the grid for a
width of an even number of grid steps, half a step off for an odd number (see
:class:`~chipflow.layout.plan.Plan`). A child whose parity differs from its parent's leaves
half a step further sideways (so the lanes of the bed may differ from a uniform pitch by a few
half steps, never below the gap), each generation advances along x by a length of its
children's parity, and the bed's x extent is a whole number of steps, so the mirrored
collecting side lands on the grid too. Rounding the outlines to the grid then moves only arc
vertices and points along the walls, never a wall; widths that are not a whole number of grid
steps are drawn (and solved) at the nearest one, with a warning. After merging, every
channel's width on the mask is measured (:mod:`chipflow.layout.widths`) and must equal its
solved width to 1 nm.

Where the children leave at 90 degrees the junction is a T with a flat far wall. Where they
leave at a smaller angle (a Y), the junction gets a disc as wide as the widest channel meeting
there: it rounds the parent's end and blunts the wall tip between the two children, so no
sliver of PDMS is left. Port holes are
drawn as pads of the punch diameter joined to their channel.

Lengths and junctions
---------------------
Centrelines run from junction centre to junction centre (the inlet and outlet channels start
at the rim of the port hole, since the punched hole itself has no resistance). Each channel's
``length`` is the exact length of its centreline with its arcs as true circles. The layout
also records the geometry of each level's junction (:class:`~chipflow.layout.junctions.
Junction`), from which the network takes each junction's equivalent-length correction, so
that the junction area is counted once (see :mod:`chipflow.layout.extract`).

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

import dataclasses
import math

import numpy as np
import shapely

from chipflow.design.model import TreeDesign
from chipflow.errors import LayoutError
from chipflow.layout.junctions import STUB_WIDTHS, Junction
from chipflow.layout.merge import merge_layer, snap_to_grid
from chipflow.layout.model import DrawnChannels, Layout, MaskLayer, PortMark
from chipflow.layout.plan import choose_plan, drawn_width, half_offset, merge_cuts
from chipflow.layout.rules import Chip, LayoutRules
from chipflow.layout.trace import offset_ring, split_trace, trace
from chipflow.layout.widths import check_mask_widths

__all__ = ["draw", "layer_name"]


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
    plan, fold_warnings = choose_plan(design, chip, rules)
    grid = rules.grid
    tol = grid / 4
    n_bed = 2**n
    rise = (plan.runs - 1) * plan.turn
    keep = chip.punch_diameter / 2 + rules.port_keepout
    r_hole = chip.punch_diameter / 2

    # x positions: centre the drawing on the chip, the port on the grid; each junction's x
    # has the wall parity of the children leaving it (see Plan); the outlet side is the exact
    # mirror image about the middle of the bed, whose x extent is a whole number of steps
    x_in = _snap(chip.width / 2 - plan.width_needed / 2 + chip.margin + keep, grid)
    x_rim = x_in + r_hole
    x_node = x_rim + plan.trunk + np.r_[0.0, np.cumsum(plan.advance[1:n])]
    x_mid = x_node[n - 1] + plan.bed_extent / 2
    # y positions: the trunk's axis has its wall parity; every child's axis lies
    # plan.offset[g] above or below its parent's
    y_in = _snap(chip.height / 2 - rise / 2, grid) + half_offset(plan.width[0], grid)

    # nodes: 0 inlet, 1 outlet, distribution levels, collection levels
    level_start = np.cumsum([0] + [2**k for k in range(n)])
    n_level = int(level_start[-1])
    d0, c0 = 2, 2 + n_level
    node_xy = np.empty((2 + 2 * n_level, 2))
    node_xy[0] = (x_rim, y_in)
    node_xy[1] = (2 * x_mid - x_rim, y_in + rise)
    for k in range(n):
        i = np.arange(2**k)
        y = y_in + _side_offsets(i, k, plan.offset)
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
    cuts = merge_cuts(design, plan, rules)

    drawn = {}  # (role, generation) -> (designed, drawn) width where the grid changed it

    def add(role, level, traces, starts, node_a, node_b, index, mirror=False, cut=None):
        """All channels of one level from its up/down templates, vectorised.

        ``cut`` (distance from the template's end [m], within its last straight run along
        +x) splits each outline into two fragments for the mask layers: the part up to the
        cut joins the junction where the template starts, the rest the one where it ends.
        """
        sign = np.asarray(traces["sign"])  # (count,) +1 upper, -1 lower
        width = drawn_width(level.width, grid)
        if not math.isclose(width, level.width, rel_tol=0, abs_tol=1e-12):
            drawn[(role, level.generation)] = (level.width, width)
        up, down = traces[1], traces[-1]
        xy = np.where(sign[:, None, None] > 0, up.xy[None], down.xy[None]) + starts[:, None, :]

        def rings(tr_up, tr_down):
            ring_up, ring_down = (
                offset_ring(tr_up, width),
                offset_ring(tr_down, width),
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
            (head_up, tail_up), (head_down, tail_down) = (
                split_trace(up, cut),
                split_trace(down, cut),
            )
            frags.append((rings(head_up, head_down), level.depth, first))
            frags.append((rings(tail_up, tail_down), level.depth, last))
        count = sign.size
        parts.append(
            dict(
                centreline=shapely.linestrings(xy),
                outline=outline,
                length=np.full(count, up.length),
                width=np.full(count, width),
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
            out[s] = trace(s * th, [("L", lead), ("A", r, -s * th), ("L", plan.straight[g])], tol)
        return out

    # distribution
    trunk = {"sign": np.ones(1), 1: trace(0.0, [("L", plan.trunk)], tol)}
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
        bed_tr[s] = trace(s * th, pieces, tol)
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
    junctions: list[tuple[str, int, Junction]] = []
    for k, a_sel, b_sel in _junction_pairs(cat, n):
        # a_sel: channels ending at the junctions; b_sel: channels starting there
        nodes = np.unique(cat["node_b"][a_sel])
        wa, wb = cat["width"][a_sel][0], cat["width"][b_sel][0]
        da, db = cat["depth"][a_sel][0], cat["depth"][b_sel][0]
        deep = max(da, db)
        radius = max(wa, wb) / 2
        is_y = plan.theta[k + 1] < math.pi / 2 - 1e-9
        if is_y:  # a Y: blunt the wall tip between children
            frags.append((shapely.buffer(node_pts[nodes], radius, quad_segs=16), deep, nodes))
        # the parent is the channel on the trunk's side of the junction
        dist_side = cat["role"][a_sel][0] == "distribution" and cat["generation"][a_sel][0] == k
        (pw, pd, ps), (cw, cd) = (
            ((wa, da, a_sel), (wb, db)) if dist_side else ((wb, db, b_sel), (wa, da))
        )
        junctions.append(
            (
                str(cat["role"][ps][0]),
                k,
                Junction(
                    float(pw),
                    float(pd),
                    float(cw),
                    float(cd),
                    float(plan.theta[k + 1]),
                    radius if is_y else 0.0,
                    0.0 if math.isclose(da, db, rel_tol=1e-9) else radius + rules.alignment_margin,
                    min(float(plan.lead_in[k + 1]), STUB_WIDTHS * float(cw)),
                    float(plan.radius[k + 1]),
                ),
            )
        )
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
        merged = merge_layer(geoms[sel], f_hood[sel] if cuts[0] is not None else None)
        merged = snap_to_grid(merged, grid)
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
    # what is drawn is what is solved: every wall where the solved width puts it
    mask = check_mask_widths(channels, tuple(layers), min(1e-9, grid * 1e-3))
    channels = dataclasses.replace(channels, mask_width=mask)
    warnings = list(fold_warnings)
    if bed.length < plan.bed_min_length - 1e-12:
        warnings.append(
            f"bed channels drawn {plan.bed_min_length * 1e6:.0f} um long instead of the "
            f"designed {bed.length * 1e6:.0f} um: their two bends alone need that length"
        )
    for (role, g), (designed, width) in drawn.items():
        warnings.append(
            f"{role} generation {g}: width {designed * 1e6:.4g} um is not a whole number of "
            f"{grid * 1e6:g} um grid steps; drawn and solved {width * 1e6:.4g} um wide"
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
        warnings=tuple(warnings),
        junctions=tuple(junctions),
    )


def _snap(value: float, grid: float) -> float:
    return round(value / grid) * grid


def _side_offsets(i: np.ndarray, k: int, offset: np.ndarray) -> np.ndarray:
    """Sideways position [m] of the nodes ``i`` of level ``k`` from the trunk's axis.

    Node ``i`` of level ``k`` took the upper branch at level ``g`` (1..k) when bit ``k - g``
    of ``i`` is set (odd children turn up), and every branch moves by ``offset[g]``.
    """
    y = np.zeros(i.size)
    for g in range(1, k + 1):  # loop over levels, vectorised over nodes
        up = (i >> (k - g)) & 1
        y += np.where(up == 1, 1.0, -1.0) * offset[g]
    return y


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
