"""The drawing engine: a network with coordinates (:class:`~chipflow.layout.sketch.Sketch`)
drawn as mask layers, ports, channels with exact lengths and the pieces where they meet.

Every design is drawn here: a tree through its generator (:mod:`chipflow.layout.tree`), an
explicit network with coordinates through :mod:`chipflow.layout.routes`. The engine works per
channel group and template (a tree level is one group), vectorised over the members, so a
tree of 2^16 bed channels costs a few dozen array operations, not a loop over channels.

What it does, in order:

1. **Channels.** Each member's centreline is its template moved into place; its outline is
   the exact offset of the centreline by half the width on each side (flat ends at the
   nodes); its length is the template's exact length, arcs as true circles.
2. **Junctions.** At every node where two or more channels meet (not a port), a disc as wide
   as the widest arm where the arms do not meet at multiples of 90 degrees, reaching past
   any acute wall tip between neighbouring arms (:func:`~chipflow.layout.pieces.
   junction_disc`); where the arms' depths differ, the deepest layer covers the shallower
   arms for ``alignment_margin`` beyond the disc (or beyond half the widest arm). Nodes of
   one class (a tree level) are alike: their geometry is worked out once per class.
3. **Ports.** Each punched hole is drawn as a pad of the punch diameter joined to its
   channels by necks as wide as they are.
4. **Mask layers.** One layer per depth, shallowest first. The fragments (channel outlines
   cut across a straight run near their end, discs, overlaps, pads) are merged in linear
   time neighbourhood by neighbourhood (:func:`~chipflow.layout.merge.merge_layer`) and put on
   the grid.
5. **Widths.** Every channel's width is measured on the merged, snapped layers
   (:mod:`chipflow.layout.widths`): across an axis-aligned run it must be the solved width to
   1 nm; oblique runs are measured and counted at their mask width in the channel's
   hydraulic length.
6. **Pieces.** The junctions and port steps with their geometry keys
   (:class:`~chipflow.layout.model.Pieces`), from which the network takes its equivalent
   lengths (:mod:`chipflow.layout.extract`).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import shapely

from chipflow.errors import LayoutError
from chipflow.layout.junctions import STUB_WIDTHS
from chipflow.layout.merge import merge_layer, snap_to_grid
from chipflow.layout.model import DrawnChannels, Layout, MaskLayer, Pieces
from chipflow.layout.pieces import PortKey, junction_disc, junction_key, key_arms
from chipflow.layout.sketch import IDENTITY, ChannelGroup, PieceSpec, Sketch
from chipflow.layout.trace import offset_ring, reversed_pieces, split_trace
from chipflow.layout.widths import check_mask_widths, measure_across

__all__ = ["draw_sketch", "layer_name", "arm_geometry"]


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


def _place(points: np.ndarray, group: ChannelGroup) -> np.ndarray:
    """Template points already moved by ``start`` (..., 2), mapped into the chip frame [m]."""
    if group.matrix == IDENTITY and tuple(group.shift) == (0.0, 0.0):
        return points
    (a, b), (c, d) = group.matrix
    sx, sy = group.shift
    x, y = points[..., 0], points[..., 1]
    if b == 0 and c == 0:  # a mirror along the axes: exact
        return np.stack((a * x + sx, d * y + sy), axis=-1)
    return np.stack((a * x + b * y + sx, c * x + d * y + sy), axis=-1)


def arm_geometry(group: ChannelGroup, member: int, end: int) -> tuple[float, tuple]:
    """Direction [rad] in which a member leaves its node at ``end`` (0: ``node_a``, 1:
    ``node_b``) in the chip frame, and its centreline from there as pieces."""
    t = group.templates[int(group.variant[member])]
    at_start = (end == 1) if group.reverse else (end == 0)
    if at_start:
        heading, pieces = t.heading0, t.pieces
    else:
        heading, pieces = float(t.heading[-1]) + math.pi, reversed_pieces(t.pieces)
    (a, b), (c, d) = group.matrix
    dx, dy = math.cos(heading), math.sin(heading)
    heading = math.atan2(c * dx + d * dy, a * dx + b * dy)
    if group.mirrored:
        pieces = tuple(p if p[0] == "L" else ("A", p[1], -p[2]) for p in pieces)
    return heading, pieces


def _hoods(n_nodes: int, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Each node's neighbourhood: the smallest node joined to it by uncut channels."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    link = coo_matrix((np.ones(a.size), (a, b)), shape=(n_nodes, n_nodes))
    _, label = connected_components(link, directed=False)
    first = np.full(label.max() + 1, n_nodes)
    np.minimum.at(first, label, np.arange(n_nodes))
    return first[label]


def _neck(x0: float, y0: float, x1: float, y1: float, half: float) -> shapely.Polygon:
    """A strip of half-width ``half`` [m] from (x0, y0) to (x1, y1)."""
    if abs(y1 - y0) <= 1e-15:
        return shapely.box(min(x0, x1), y0 - half, max(x0, x1), y0 + half)
    if abs(x1 - x0) <= 1e-15:
        return shapely.box(x0 - half, min(y0, y1), x0 + half, max(y0, y1))
    t = np.array([x1 - x0, y1 - y0]) / math.hypot(x1 - x0, y1 - y0)
    n = np.array([-t[1], t[0]]) * half
    p0, p1 = np.array([x0, y0]), np.array([x1, y1])
    return shapely.Polygon([p0 + n, p1 + n, p1 - n, p0 - n])


def draw_sketch(sketch: Sketch, *, masks: bool = True) -> Layout:
    """Draw a network with coordinates.

    Parameters
    ----------
    sketch : Sketch
    masks : bool, optional
        Merge the mask layers and measure the widths on them (default). False leaves both
        out (no layers, no mask widths): the channels with their lengths and the pieces
        only, for a network to solve while a drawing is still being decided (the feeders of
        culture regions, :mod:`chipflow.layout.regions`).

    Returns
    -------
    Layout
        Channels in group order with their identities and exact lengths [m], mask layers
        (one per depth, shallowest first), ports, nodes, the pieces where channels meet.

    Raises
    ------
    LayoutError
        When a channel's width does not survive merging and snapping (a drawing fault).
    """
    rules = sketch.rules
    grid = rules.grid
    groups = sketch.groups
    n_nodes = len(sketch.node_names)
    node_xy = np.asarray(sketch.node_xy, dtype=float)

    # -- 1. channels, group by group and template by template ------------------------------
    parts: list[dict] = []
    frags: list[tuple[np.ndarray, float, np.ndarray]] = []  # (polygons, depth, node)
    oblique: list[tuple[np.ndarray, ...]] = []  # straight runs off the grid axes
    first_channel = np.cumsum([0] + [g.size for g in groups])
    for gi, g in enumerate(groups):  # loop over groups (tree levels), vectorised over members
        k = g.size
        centre = np.empty(k, dtype=object)
        outline = np.empty(k, dtype=object)
        head = np.empty(k, dtype=object)
        tail = np.empty(k, dtype=object)
        length = np.empty(k)
        bends = np.empty(k, dtype=int)
        for v in np.unique(g.variant):  # loop over the group's templates
            sel = np.flatnonzero(g.variant == v)
            t = g.templates[int(v)]
            start = g.start[sel][:, None, :]
            xy = _place(t.xy[None] + start, g)
            straight = t.heading[1:] == t.heading[:-1]
            if g.reverse:
                xy = xy[:, ::-1]
                straight = straight[::-1]
            centre[sel] = shapely.linestrings(xy)
            outline[sel] = shapely.polygons(_place(offset_ring(t, g.width)[None] + start, g))
            if g.cut is not None:
                th, tt = split_trace(t, g.cut)
                head[sel] = shapely.polygons(_place(offset_ring(th, g.width)[None] + start, g))
                tail[sel] = shapely.polygons(_place(offset_ring(tt, g.width)[None] + start, g))
            length[sel] = t.length
            bends[sel] = t.bends
            # straight runs that lie along neither grid axis: measured on the mask later (the
            # members are moved copies of one template: its runs' directions decide)
            d0 = np.diff(xy[0], axis=0)
            off_axis = straight & (np.abs(d0[:, 0]) > 1e-12) & (np.abs(d0[:, 1]) > 1e-12)
            if off_axis.any():
                seg = np.flatnonzero(off_axis)
                run = np.diff(xy, axis=1)[:, seg].reshape(-1, 2)
                mem = np.repeat(np.arange(sel.size), seg.size)
                seg_len = np.hypot(run[:, 0], run[:, 1])
                normal = np.column_stack((-run[:, 1], run[:, 0])) / seg_len[:, None]
                mid = xy[:, seg].reshape(-1, 2) + run / 2
                oblique.append((first_channel[gi] + sel[mem], mid, normal, seg_len))
        first, last = (g.node_b, g.node_a) if g.reverse else (g.node_a, g.node_b)
        if g.cut is None:
            frags.append((outline, g.depth, first))
        else:
            frags.append((head, g.depth, first))
            frags.append((tail, g.depth, last))
        parts.append(
            dict(
                centreline=centre,
                outline=outline,
                length=length,
                width=np.full(k, g.width),
                depth=np.full(k, g.depth),
                generation=np.full(k, g.generation),
                role=np.full(k, g.role, dtype=object),
                index=np.asarray(g.index),
                node_a=np.asarray(g.node_a),
                node_b=np.asarray(g.node_b),
                bends=bends,
                names=np.asarray(g.names if g.names is not None else [""] * k, dtype=object),
                region=np.full(k, g.region, dtype=object),
                kind=np.full(k, g.kind, dtype=object),
                group=np.full(k, gi),
                member=np.arange(k),
                variant=np.asarray(g.variant),
            )
        )
    cat = {key: np.concatenate([p[key] for p in parts]) for key in parts[0]}
    n_ch = cat["width"].size

    chamber_depths = [float(cp.key.depth) for cp in sketch.chambers]
    depths = np.unique(np.round(np.r_[cat["depth"], chamber_depths], 12))
    layer = np.searchsorted(depths, np.round(cat["depth"], 12))

    # -- 2. junctions: per class of alike nodes --------------------------------------------
    port_node = {sketch.node_names.index(p.name) for p in sketch.ports}
    end_node = np.concatenate((cat["node_a"], cat["node_b"]))
    end_ch = np.concatenate((np.arange(n_ch), np.arange(n_ch)))
    end_side = np.concatenate((np.zeros(n_ch, int), np.ones(n_ch, int)))
    count = np.bincount(end_node, minlength=n_nodes)
    if sketch.node_class is not None:
        node_class = np.asarray(sketch.node_class)
        specs = sketch.pieces or ()
    else:
        node_class = np.full(n_nodes, -1)
        specs = ()
    # nodes the generator says nothing about: each its own class with a general junction
    loose = np.flatnonzero((node_class < 0) & (count >= 2))
    loose = loose[~np.isin(loose, list(port_node))]
    classes = [
        (int(c), np.flatnonzero(node_class == c)) for c in np.unique(node_class[node_class >= 0])
    ]
    classes += [(-1, np.array([n])) for n in loose]

    node_pts = shapely.points(node_xy)
    piece_rows: list[tuple] = []
    keys: dict = {}
    by_node = np.argsort(end_node, kind="stable")
    node_start = np.searchsorted(end_node[by_node], np.arange(n_nodes + 1))
    for c, members in classes:  # loop over classes of alike nodes (tree levels, or nodes)
        spec = specs[c] if 0 <= c < len(specs) else None
        rep = int(members[0])
        here = by_node[node_start[rep] : node_start[rep + 1]]
        if spec is not None:
            arm_ch = _spec_channels(spec, members, cat, first_channel)
        else:
            arm_ch = end_ch[here][None, :]
        arm_side = _sides(arm_ch, members, cat)
        rep_ch, rep_side = arm_ch[0], arm_side[0]
        geom = [
            arm_geometry(groups[cat["group"][ch]], int(cat["member"][ch]), int(e))
            for ch, e in zip(rep_ch, rep_side, strict=True)
        ]
        headings = np.array([h for h, _ in geom])
        widths, arm_depths = cat["width"][rep_ch], cat["depth"][rep_ch]
        disc = junction_disc(headings, widths, rules.min_feature)
        deep = float(arm_depths.max())
        if disc > 0:
            frags.append((shapely.buffer(node_pts[members], disc, quad_segs=16), deep, members))
        stepped = not np.allclose(arm_depths, deep, rtol=1e-9, atol=0)
        reach = max(disc, float(widths.max()) / 2) + rules.alignment_margin
        if stepped:
            shallow = arm_depths < deep * (1 - 1e-9)
            chans = arm_ch[:, shallow].ravel()
            ends = np.repeat(members, int(shallow.sum()))
            order = np.argsort(chans, kind="stable")
            chans, ends = chans[order], ends[order]
            cover = shapely.buffer(node_pts[ends], reach, quad_segs=16)
            frags.append((shapely.intersection(cat["outline"][chans], cover), deep, ends))
        if spec is not None:
            kind, key, rotation, mirror = spec.kind, spec.key, spec.rotation, spec.mirror
        elif (
            headings.size == 2
            and abs(abs(math.remainder(headings[0] - headings[1], 2 * math.pi)) - math.pi) < 1e-9
            and widths[0] == widths[1]
            and arm_depths[0] == arm_depths[1]
        ):
            continue  # a node on a straight channel of one width: nothing to correct
        else:
            stub_reach = STUB_WIDTHS * float(widths.max())
            arms = [
                (h, float(w), float(d), key_arms(p, stub_reach))
                for (h, p), w, d in zip(geom, widths, arm_depths, strict=True)
            ]
            key, order, rotation, mirror = junction_key(arms, disc, reach if stepped else 0.0)
            arm_ch, arm_side = arm_ch[:, order], arm_side[:, order]
            kind = "junction"
        kid = keys.setdefault(key, len(keys))
        piece_rows.append((kind, kid, members, rotation, mirror, arm_ch, arm_side))

    # -- 3. ports: pads of the punch diameter joined to their channels -----------------------
    cl_start = shapely.get_coordinates(shapely.get_point(cat["centreline"], 0))
    cl_end = shapely.get_coordinates(shapely.get_point(cat["centreline"], -1))
    for port in sketch.ports:  # a handful of ports
        node = sketch.node_names.index(port.name)
        here = by_node[node_start[node] : node_start[node + 1]]
        hole = shapely.Point(port.x, port.y).buffer(port.diameter / 2, quad_segs=32)
        for ch, side in zip(end_ch[here], end_side[here], strict=True):
            rim = cl_start[ch] if side == 0 else cl_end[ch]
            neck = _neck(port.x, port.y, rim[0], rim[1], cat["width"][ch] / 2)
            frags.append(
                (np.array([shapely.union(hole, neck)]), cat["depth"][ch], np.array([node]))
            )
            key = PortKey(
                round(port.diameter, 12),
                round(grid, 12),
                round(float(cat["width"][ch]), 12),
                round(float(cat["depth"][ch]), 12),
            )
            kid = keys.setdefault(key, len(keys))
            rotation = math.atan2(rim[1] - port.y, rim[0] - port.x)
            piece_rows.append(
                (
                    "port",
                    kid,
                    np.array([node]),
                    rotation,
                    False,
                    np.array([[ch]]),
                    np.array([[side]]),
                )
            )

    # -- 3b. chambers: their outlines, the overlaps at depth steps, one piece each ----------
    drawn_chambers, chamber_centres = [], []
    link_a, link_b = [], []
    for cp in sketch.chambers:  # a handful of chambers
        outline, covers, centre = _chamber_outlines(cp, rules)
        frags.append((np.array([outline]), float(cp.key.depth), np.array([cp.port_nodes[0]])))
        for cover, depth in covers:
            frags.append((np.array([cover]), depth, np.array([cp.port_nodes[0]])))
        arm_ch = []
        for node in cp.port_nodes:  # the channel of each port
            here = end_ch[by_node[node_start[node] : node_start[node + 1]]]
            if here.size != 1:
                raise LayoutError(
                    f"chamber {cp.name!r}: its port at node {sketch.node_names[node]!r} joins "
                    f"{here.size} channels; a chamber's port joins exactly one"
                )
            arm_ch.append(int(here[0]))
        arm_ch = np.array([arm_ch])
        kid = keys.setdefault(cp.key, len(keys))
        rotation = math.remainder(cp.turns * math.pi / 2, 2 * math.pi)
        arm_side = np.where(cat["node_a"][arm_ch] == np.array(cp.port_nodes)[None, :], 0, 1)
        piece_rows.append(
            ("chamber", kid, np.array([cp.port_nodes[0]]), rotation, False, arm_ch, arm_side)
        )
        chamber_centres.append(centre)
        link_a += [cp.port_nodes[0]] * (len(cp.port_nodes) - 1)
        link_b += list(cp.port_nodes[1:])
        drawn_chambers.append((cp, outline, tuple(int(c) for c in arm_ch[0]), centre))

    # -- 4. mask layers -------------------------------------------------------------------
    if not masks and not sketch.chambers:  # a chamber's piece is measured on its mask
        return _unmasked(sketch, cat, depths, layer, piece_rows, keys, node_xy)
    uncut = np.concatenate([np.full(g.size, g.cut is None) for g in groups])
    hood = _hoods(
        n_nodes,
        np.r_[cat["node_a"][uncut], np.asarray(link_a, dtype=int)],
        np.r_[cat["node_b"][uncut], np.asarray(link_b, dtype=int)],
    )
    any_cut = any(g.cut is not None for g in groups) or bool(sketch.chambers)
    geoms = np.concatenate([f[0] for f in frags])
    f_layer = np.concatenate(
        [np.full(f[0].size, np.searchsorted(depths, np.round(f[1], 12))) for f in frags]
    )
    f_hood = np.concatenate([hood[f[2]] for f in frags])
    layers = []
    for li, depth in enumerate(depths):  # loop over mask levels
        sel = f_layer == li
        merged = merge_layer(geoms[sel], f_hood[sel] if any_cut else None)
        merged = snap_to_grid(merged, grid)
        layers.append(MaskLayer(layer_name(li + 1, float(depth)), float(depth), merged))
    layers = tuple(layers)

    channels = _drawn_channels(cat, layer)

    # -- 5. widths on the mask -------------------------------------------------------------
    mask = check_mask_widths(channels, layers, min(1e-9, grid * 1e-3))
    hydraulic = None
    if oblique:
        ch_o = np.concatenate([o[0] for o in oblique])
        mid_o = np.concatenate([o[1] for o in oblique])
        normal_o = np.concatenate([o[2] for o in oblique])
        len_o = np.concatenate([o[3] for o in oblique])
        measured = np.full(ch_o.size, np.nan)
        for li, lay in enumerate(layers):  # loop over mask levels
            on = layer[ch_o] == li
            if on.any():
                reach_o = channels.width[ch_o[on]] / 2 + 2 * grid
                measured[on] = measure_across(lay.geometry, mid_o[on], normal_o[on], reach_o)
        if np.any(np.isnan(measured)) or np.any(np.abs(measured - channels.width[ch_o]) > 2 * grid):
            bad = int(np.flatnonzero(~(np.abs(measured - channels.width[ch_o]) <= 2 * grid))[0])
            i = int(ch_o[bad])
            raise LayoutError(
                f"channel {_label(channels, i)}: its oblique run at ({mid_o[bad, 0] * 1e3:.3f}, "
                f"{mid_o[bad, 1] * 1e3:.3f}) mm is {measured[bad] * 1e6:.4g} um wide on the mask "
                f"instead of {channels.width[i] * 1e6:.4g} um"
            )
        from chipflow.physics.duct import resistance

        w, h = channels.width[ch_o], channels.depth[ch_o]
        ratio = np.asarray(resistance(measured, h, 1.0, 1.0)) / np.asarray(
            resistance(w, h, 1.0, 1.0)
        )
        hydraulic = channels.length.copy()
        np.add.at(hydraulic, ch_o, len_o * (ratio - 1.0))
        # a channel with no axis-aligned run: its width is the one of its longest oblique run
        none = np.isnan(mask)
        if none.any():
            order = np.lexsort((len_o, ch_o))
            last = np.r_[ch_o[order][1:] != ch_o[order][:-1], True]
            best = order[last]
            fill = np.full(n_ch, np.nan)
            fill[ch_o[best]] = measured[best]
            mask = np.where(none, fill, mask)
    channels = dataclasses.replace(channels, mask_width=mask, hydraulic_length=hydraulic)

    chambers = tuple(
        _drawn_chamber(cp, outline, arms, centre, layers[int(np.searchsorted(depths, round(
            float(cp.key.depth), 12)))].geometry, grid)
        for cp, outline, arms, centre in drawn_chambers
    )  # fmt: skip

    # -- 6. pieces ---------------------------------------------------------------------------
    pieces = _pieces_table(piece_rows, tuple(keys), node_xy, sketch, chamber_centres)
    return Layout(
        name=sketch.name,
        outline=shapely.box(0.0, 0.0, sketch.chip.width, sketch.chip.height),
        margin=sketch.chip.margin,
        grid=grid,
        layers=layers,
        ports=tuple(sketch.ports),
        channels=channels,
        node_xy=node_xy,
        node_names=tuple(sketch.node_names),
        warnings=tuple(sketch.warnings),
        pieces=pieces,
        notes=tuple(sketch.notes),
        culture_regions=tuple(sketch.culture_regions),
        chambers=chambers,
    )


def _drawn_channels(cat: dict, layer: np.ndarray) -> DrawnChannels:
    names = cat["names"].astype(str)
    blank = names == ""
    if np.any(~blank) and np.any(blank):  # some groups named (a mesh bed): the others by level
        default = np.char.add(
            np.char.add(np.char.add(cat["role"].astype(str), cat["generation"].astype(str)), "."),
            cat["index"].astype(str),
        )
        names = np.where(blank, default, names)
    return DrawnChannels(
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
        names=names if np.any(names != "") else None,
        region=cat["region"].astype(str) if np.any(cat["region"] != "") else None,
        kind=cat["kind"].astype(str) if np.any(cat["kind"] != "channel") else None,
    )


def _unmasked(sketch, cat, depths, layer, piece_rows, keys, node_xy) -> Layout:
    """The layout of ``draw_sketch(..., masks=False)``: channels and pieces, no layers."""
    return Layout(
        name=sketch.name,
        outline=shapely.box(0.0, 0.0, sketch.chip.width, sketch.chip.height),
        margin=sketch.chip.margin,
        grid=sketch.rules.grid,
        layers=(),
        ports=tuple(sketch.ports),
        channels=_drawn_channels(cat, layer),
        node_xy=node_xy,
        node_names=tuple(sketch.node_names),
        warnings=tuple(sketch.warnings),
        pieces=_pieces_table(piece_rows, tuple(keys), node_xy, sketch),
        notes=tuple(sketch.notes),
        culture_regions=tuple(sketch.culture_regions),
    )


def _label(channels: DrawnChannels, i: int) -> str:
    if channels.names is not None:
        return repr(str(channels.names[i]))
    return f"{channels.role[i]} generation {channels.generation[i]} #{channels.index[i]}"


def _spec_channels(
    spec: PieceSpec, members: np.ndarray, cat: dict, first_channel: np.ndarray
) -> np.ndarray:
    """(members, arms) the channel of each arm of ``spec`` at each member node."""
    out = np.empty((members.size, len(spec.arms)), dtype=int)
    for j, (gi, variant, end) in enumerate(spec.arms):  # loop over the arms of one piece
        lo, hi = first_channel[gi], first_channel[gi + 1]
        chans = np.arange(lo, hi)
        if variant >= 0:  # -1: any of the group's templates
            chans = chans[cat["variant"][lo:hi] == variant]
        nodes = (cat["node_a"] if end == 0 else cat["node_b"])[chans]
        order = np.argsort(nodes, kind="stable")
        at = np.searchsorted(nodes[order], members)
        found = chans[order][np.clip(at, 0, chans.size - 1)]
        if chans.size == 0 or np.any(
            (cat["node_a"] if end == 0 else cat["node_b"])[found] != members
        ):
            raise LayoutError(f"piece arm {j} has no channel of group {gi} at some of its nodes")
        out[:, j] = found
    return out


def _sides(arm_ch: np.ndarray, members: np.ndarray, cat: dict) -> np.ndarray:
    """Which end (0: node_a, 1: node_b) of each arm's channel lies at its member node."""
    return np.where(cat["node_a"][arm_ch] == members[:, None], 0, 1)


def _chamber_outlines(cp, rules):
    """A chamber's outline in the chip frame, the covers of its depth steps and the bridges
    to channels ending short of it ((outline, depth) each) and its middle [m]."""
    from chipflow.layout.chamber import (
        chamber_polygon,
        chamber_regions,
        place,
        placed_polygon,
        port_bridges,
    )

    key = cp.key
    outline = placed_polygon(chamber_polygon(key), cp.origin, cp.turns)
    covers = [(placed_polygon(strip, cp.origin, cp.turns), d) for strip, d in port_bridges(key)]
    if key.overlap > 0:
        regions = chamber_regions(key)[0]
        for region in regions[1 + len(key.ports) :]:  # the covers after chamber and stubs
            covers.append((placed_polygon(region.polygon, cp.origin, cp.turns), region.depth))
    centre = place(np.array([[key.length / 2, key.width / 2]]), cp.origin, cp.turns)[0]
    return outline, covers, (float(centre[0]), float(centre[1]))


def _drawn_chamber(cp, outline, arms, centre, layer, grid):
    """The drawn chamber with its width measured on the merged mask across its middle."""
    from chipflow.layout.chamber import place
    from chipflow.layout.model import DrawnChamber

    key = cp.key
    x = key.length / 2
    ends = place(np.array([[x, -2 * grid], [x, key.width + 2 * grid]]), cp.origin, cp.turns)
    cut = shapely.intersection(shapely.LineString(ends), layer)
    pts = shapely.get_coordinates(cut)
    width = float("nan")
    if len(pts):
        direction = (ends[1] - ends[0]) / np.hypot(*(ends[1] - ends[0]))
        along = (pts - ends[0]) @ direction
        width = float(along.max() - along.min())
    if not abs(width - key.width) <= min(1e-9, grid * 1e-3):
        raise LayoutError(
            f"chamber {cp.name!r}: it is {width * 1e6:.4f} um wide on the mask across its middle "
            f"at ({centre[0] * 1e3:.3f}, {centre[1] * 1e3:.3f}) mm instead of "
            f"{key.width * 1e6:.4f} um (a drawing fault)"
        )
    return DrawnChamber(cp.name, key, cp.origin, cp.turns, outline, tuple(cp.port_nodes), arms,
                        centre, cp.role, cp.region, width)  # fmt: skip


def _pieces_table(
    rows: list[tuple],
    keys: tuple,
    node_xy: np.ndarray,
    sketch: Sketch,
    centres: list | None = None,
) -> Pieces:
    if not rows:
        empty = np.zeros(0)
        return Pieces(
            keys,
            np.zeros(0, dtype=str),
            empty.astype(int),
            empty.astype(int),
            empty,
            empty,
            empty,
            empty.astype(bool),
            np.zeros((0, 1), int),
            np.zeros((0, 1), int),
        )
    width = max(r[5].shape[1] for r in rows)
    kind, key, node, rot, mir, arm_ch, arm_end = [], [], [], [], [], [], []
    for r_kind, kid, members, rotation, mirror, ach, aside in rows:  # loop over classes
        m = members.size
        kind.append(np.full(m, r_kind, dtype=object))
        key.append(np.full(m, kid))
        node.append(members)
        rot.append(np.full(m, rotation))
        mir.append(np.full(m, mirror))
        pad = np.full((m, width), -1)
        pad[:, : ach.shape[1]] = ach
        arm_ch.append(pad)
        pad = np.full((m, width), -1)
        pad[:, : aside.shape[1]] = aside
        arm_end.append(pad)
    node = np.concatenate(node)
    xy = node_xy[node].copy()
    port_at = {sketch.node_names.index(p.name): (p.x, p.y) for p in sketch.ports}
    kinds = np.concatenate(kind).astype(str)
    for i in np.flatnonzero(kinds == "port"):  # a handful of ports
        xy[i] = port_at[int(node[i])]
    for i, centre in zip(np.flatnonzero(kinds == "chamber"), centres or [], strict=True):
        xy[i] = centre
    return Pieces(
        keys,
        kinds,
        np.concatenate(key),
        node,
        xy[:, 0],
        xy[:, 1],
        np.concatenate(rot),
        np.concatenate(mir),
        np.concatenate(arm_ch),
        np.concatenate(arm_end),
    )
