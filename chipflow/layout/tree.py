"""The tree generator: a sized tree design as a network with coordinates for the engine.

See :mod:`chipflow.layout.draw` for what the drawing of a tree looks like; every dimension is
decided by :mod:`chipflow.layout.plan`. Each level of the tree is one channel group of the
engine (its channels are a few templates, moved and mirrored), each level of junctions one
node class with its piece.
"""

from __future__ import annotations

import math

import numpy as np

from chipflow.design.model import TreeDesign
from chipflow.errors import LayoutError
from chipflow.layout.junctions import STUB_WIDTHS, Junction
from chipflow.layout.model import PortMark
from chipflow.layout.plan import (
    choose_plan,
    detour_pieces,
    drawn_width,
    fan_key,
    half_offset,
    merge_cuts,
)
from chipflow.layout.rules import Chip, LayoutRules
from chipflow.layout.sketch import ChannelGroup, PieceSpec, Sketch
from chipflow.layout.trace import trace

__all__ = ["tree_sketch"]


def _snap(value: float, grid: float) -> float:
    return round(value / grid) * grid


def _binary_piece(plan, rules, k, side, pg, cg, group_of, parent_key, child_key) -> PieceSpec:
    """A symmetric binary split: the :class:`Junction` of today's trees (correction to the
    parent from one solve with both children at one pressure)."""
    theta = float(plan.theta[k + 1])
    is_y = theta < math.pi / 2 - 1e-9
    radius = max(pg.width, cg.width) / 2
    same = math.isclose(pg.depth, cg.depth, rel_tol=1e-9)
    key = Junction(
        float(pg.width),
        float(pg.depth),
        float(cg.width),
        float(cg.depth),
        theta,
        radius if is_y else 0.0,
        0.0 if same else radius + rules.alignment_margin,
        min(float(plan.lead_in[k + 1]), STUB_WIDTHS * float(cg.width)),
        float(plan.radius[k + 1]),
    )
    if side == "split":  # the parent arrives from -x, as in the key's frame
        arms = ((group_of[parent_key], -1, 1), (group_of[child_key], 1, 0),
                (group_of[child_key], 0, 0))  # fmt: skip
        return PieceSpec("fan", key, arms)
    # the parent leaves towards +x: the key's frame mirrored and turned
    arms = ((group_of[parent_key], -1, 0), (group_of[child_key], 1, 1),
            (group_of[child_key], 0, 1))  # fmt: skip
    return PieceSpec("fan", key, arms, math.pi, True)


def tree_sketch(design: TreeDesign, chip: Chip, rules: LayoutRules) -> Sketch:
    """The network with coordinates of a sized tree (see :func:`chipflow.layout.draw`)."""
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
    splits = design.splits
    counts = [1, *np.cumprod(splits).tolist()]  # channels per generation 0..n
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
    # y positions: the trunk's axis has its wall parity; every child's axis lies its route's
    # offset above or below its parent's
    y_in = _snap(chip.height / 2 - rise / 2, grid) + half_offset(plan.width[0], grid)

    # nodes: 0 inlet, 1 outlet, distribution levels, collection levels (one node per channel
    # of the generation whose channels end there)
    level_start = np.cumsum([0] + counts[:n])
    n_level = int(level_start[-1])
    d0, c0 = 2, 2 + n_level
    node_xy = np.empty((2 + 2 * n_level, 2))
    node_xy[0] = (x_rim, y_in)
    node_xy[1] = (2 * x_mid - x_rim, y_in + rise)
    node_class = np.full(2 + 2 * n_level, -1)
    rel = np.zeros(1)  # sideways offsets of a level's nodes from the trunk's axis
    for k in range(n):
        if k > 0:  # loop over levels, vectorised over nodes
            i = np.arange(counts[k])
            rel = rel[i // splits[k - 1]] + plan.routes[k].offset[i % splits[k - 1]]
        y = y_in + rel
        sl = slice(level_start[k], level_start[k + 1])
        node_xy[d0 + sl.start : d0 + sl.stop] = np.column_stack((np.full(y.size, x_node[k]), y))
        node_xy[c0 + sl.start : c0 + sl.stop] = np.column_stack(
            (np.full(y.size, 2 * x_mid - x_node[k]), y + rise)
        )
        node_class[d0 + sl.start : d0 + sl.stop] = 2 * k
        node_class[c0 + sl.start : c0 + sl.stop] = 2 * k + 1
    names = ["inlet", "outlet"]
    names += [f"split{k}.{i}" for k in range(n) for i in range(counts[k])]
    names += [f"merge{k}.{i}" for k in range(n) for i in range(counts[k])]

    dist = design.distribution
    coll = {lv.generation: lv for lv in design.collection}
    bed = design.bed
    cuts = merge_cuts(design, plan, rules)
    drawn = {}  # (role, generation) -> (designed, drawn) width where the grid changed it
    groups: list[ChannelGroup] = []
    mirror = ((-1.0, 0.0), (0.0, 1.0))
    shift = (2 * x_mid, rise)

    def add(role, level, templates, variant, starts, node_a, node_b, index, cut, back=False):
        width = drawn_width(level.width, grid)
        if not math.isclose(width, level.width, rel_tol=0, abs_tol=1e-12):
            drawn[(role, level.generation)] = (level.width, width)
        groups.append(
            ChannelGroup(
                templates=tuple(templates),
                width=width,
                depth=level.depth,
                role=role,
                generation=level.generation,
                variant=np.asarray(variant, dtype=int),
                start=np.asarray(starts, dtype=float),
                node_a=np.asarray(node_a, dtype=int),
                node_b=np.asarray(node_b, dtype=int),
                index=np.asarray(index, dtype=int),
                matrix=mirror if back else ((1.0, 0.0), (0.0, 1.0)),
                shift=shift if back else (0.0, 0.0),
                reverse=back,
                cut=cut,
            )
        )
        return len(groups) - 1

    def fork(g: int, j: int) -> list:
        """The start of child ``j`` of generation ``g``: lead, arc back to +x, detour."""
        route, r = plan.routes[g], plan.radius[g]
        th = float(route.theta[j])
        bend = r if route.bend[j] == r else float(route.bend[j])
        pieces = [("L", float(route.lead[j])), ("A", bend, -th)]
        if route.phi[j] > 0:
            pieces.append(("L", route.start - float(route.reach[j])))
            pieces += detour_pieces(
                float(route.phi[j]), float(route.leg[j]), r, route.side[j], int(route.loops[j])
            )
        return pieces

    def fork_templates(g: int) -> list:
        route = plan.routes[g]
        out = []
        for j in range(route.count):  # loop over the children of one split
            pieces = fork(g, j)
            if route.phi[j] > 0:
                end = plan.straight[g] + route.reach[0]
                pieces.append(("L", end - route.start - route.along[j]))
            elif route.reach[j] == route.reach[0]:
                pieces.append(("L", plan.straight[g]))
            else:
                pieces.append(("L", plan.straight[g] + route.reach[0] - route.reach[j]))
            out.append(trace(float(route.theta[j]), pieces, tol))
        return out

    # distribution
    trunk = [trace(0.0, [("L", plan.trunk)], tol)]
    dist_nodes = [d0 + level_start[k] + np.arange(counts[k]) for k in range(n)]
    coll_nodes = [c0 + level_start[k] + np.arange(counts[k]) for k in range(n)]
    group_of = {}
    group_of[("distribution", 0)] = add(
        "distribution", dist[0], trunk, [0], node_xy[[0]], [0], dist_nodes[0], [0], cuts[0]
    )
    for g in range(1, n):
        i = np.arange(counts[g])
        s = splits[g - 1]
        parent = dist_nodes[g - 1][i // s]
        group_of[("distribution", g)] = add(
            "distribution",
            dist[g],
            fork_templates(g),
            i % s,
            node_xy[parent],
            parent,
            dist_nodes[g],
            i,
            cuts[g],
        )
    # bed
    i = np.arange(counts[n])
    s = splits[n - 1]
    route = plan.routes[n]
    body = []
    if plan.runs == 1:
        body.append(("L", plan.run_length))
    else:
        body.append(("L", plan.lead))
        for j in range(plan.runs):
            body.append(("L", plan.run_length))
            if j < plan.runs - 1:
                body.append(("A", plan.turn / 2, math.pi if j % 2 == 0 else -math.pi))
        body.append(("L", plan.lead))
    bed_templates, halves = [], []
    for j in range(route.count):  # loop over the children of the last split
        half = fork(n, j)
        if route.phi[j] > 0:
            half.append(("L", plan.bed_pre - route.start - float(route.along[j])))
        else:
            half.append(("L", plan.bed_pre - float(route.reach[j])))
        halves.append(half)
        pieces = half + body + half[::-1]
        bed_templates.append(trace(float(route.theta[j]), pieces, tol))
    parent = dist_nodes[n - 1][i // s]
    chambers = ()
    bed_key = ("bed", n)
    if design.chamber is None:
        group_of[bed_key] = add(
            "bed",
            bed,
            bed_templates,
            i % s,
            node_xy[parent],
            parent,
            coll_nodes[n - 1][i // s],
            i,
            None,
        )
    else:  # the last generation's channels end in the chamber's inlet wall and leave its outlet
        halves = [trace(float(route.theta[j]), half, tol) for j, half in enumerate(halves)]
        ends = node_xy[parent] + np.array([h.xy[-1] for h in halves])[i % s]
        mirrored = np.column_stack((2 * x_mid - ends[:, 0], ends[:, 1] + rise))
        first = len(node_xy)
        node_xy = np.vstack((node_xy, ends, mirrored))
        node_class = np.r_[node_class, np.full(2 * i.size, -1)]
        names += [f"chamber in{k}" for k in range(i.size)]
        names += [f"chamber out{k}" for k in range(i.size)]
        port_in = first + i
        port_out = first + i.size + i
        group_of[("distribution", n)] = add(
            "distribution", bed, halves, i % s, node_xy[parent], parent, port_in, i, None
        )
        group_of[("collection", n)] = add(
            "collection", bed, halves, i % s, node_xy[parent], port_out,
            coll_nodes[n - 1][i // s], i, None, back=True,
        )  # fmt: skip
        chambers = (_chamber_place(design, ends, float(groups[-1].width), bed.depth, port_in,
                                   port_out, rules, x_mid),)  # fmt: skip
        bed_key = ("distribution", n)
    # collection: mirror images of the distribution channels, flow towards the outlet
    for g in range(n - 1, 0, -1):
        i = np.arange(counts[g])
        s = splits[g - 1]
        parent = dist_nodes[g - 1][i // s]
        group_of[("collection", g)] = add(
            "collection",
            coll[g],
            fork_templates(g),
            i % s,
            node_xy[parent],
            coll_nodes[g],
            coll_nodes[g - 1][i // s],
            i,
            cuts[g],
            back=True,
        )
    group_of[("collection", 0)] = add(
        "collection", coll[0], trunk, [0], node_xy[[0]], coll_nodes[0], [1], [0], cuts[0], back=True
    )

    # the junction of each level: a binary split is symmetric (one 2D solve, the correction
    # to the parent); a split into 3 to 5 is an N-port with a correction on every arm
    pieces: list[PieceSpec] = []
    last_c = ("bed", n) if design.chamber is None else ("collection", n)
    for k in range(n):
        child = bed_key if k == n - 1 else ("distribution", k + 1)
        child_c = last_c if k == n - 1 else ("collection", k + 1)
        route = plan.routes[k + 1]
        for side, parent_key, child_key in (
            ("split", ("distribution", k), child),
            ("merge", ("collection", k), child_c),
        ):
            pg, cg = groups[group_of[parent_key]], groups[group_of[child_key]]
            p_end, c_end = (1, 0) if side == "split" else (0, 1)
            if route.count == 2:
                pieces.append(_binary_piece(plan, rules, k, side, pg, cg, group_of, parent_key,
                                            child_key))  # fmt: skip
                continue
            key, order, rotation, flip = fan_key(
                route.theta,
                route.lead,
                route.bend,
                (pg.width, cg.width),
                (pg.depth, cg.depth),
                rules,
            )
            arms = tuple(
                (group_of[parent_key], -1, p_end) if a == 0 else (group_of[child_key], a - 1, c_end)
                for a in order
            )
            if side == "merge":  # the split's frame mirrored about the y axis
                rotation, flip = math.pi - rotation, not flip
            pieces.append(PieceSpec("junction", key, arms, rotation, flip))

    ports = (
        PortMark("inlet", x_in, y_in, chip.punch_diameter, keep),
        PortMark("outlet", 2 * x_mid - x_in, y_in + rise, chip.punch_diameter, keep),
    )
    warnings = list(fold_warnings)
    if design.chamber is None and bed.length < plan.bed_min_length - 1e-12:
        warnings.append(
            f"bed channels drawn {plan.bed_min_length * 1e6:.0f} um long instead of the "
            f"designed {bed.length * 1e6:.0f} um: their two bends alone need that length"
        )
    for (role, g), (designed, width) in drawn.items():
        warnings.append(
            f"{role} generation {g}: width {designed * 1e6:.4g} um is not a whole number of "
            f"{grid * 1e6:g} um grid steps; drawn and solved {width * 1e6:.4g} um wide"
        )
    sketch = Sketch(
        name=design.name,
        chip=chip,
        rules=rules,
        node_xy=node_xy,
        node_names=tuple(names),
        groups=tuple(groups),
        ports=ports,
        node_class=node_class,
        pieces=tuple(pieces),
        warnings=tuple(warnings),
        notes=plan.notes,
        chambers=chambers,
    )
    if design.mesh is None:
        return sketch
    if plan.runs > 1:
        raise LayoutError(
            f"design '{design.name}': [bed] kind = \"mesh\" needs straight bed channels, but "
            f"they are folded into {plan.runs} runs (max_straight_length or the chip's width); "
            "raise max_straight_length or widen the chip"
        )
    from chipflow.layout.mesh import mesh_sketch

    bed_route = plan.routes[n]
    return mesh_sketch(
        sketch,
        group_of[("bed", n)],
        halves,
        bed_route.theta,
        bed_route.offset,
        plan.bed_pre,
        plan.run_length,
        *design.mesh,
    )


def _chamber_place(design, ends, width, depth, port_in, port_out, rules, x_mid):
    """The chamber a tree ends in: its inlet wall where the last generation's channels end
    (``ends``, chip frame [m], each ``width`` wide and ``depth`` deep), centred on them across
    the flow, its walls on the grid; its outlet wall the mirror image about ``x_mid``."""
    import dataclasses

    from chipflow.layout.chamber import ChamberPort, chamber_key
    from chipflow.layout.sketch import ChamberPlace

    grid = rules.grid
    shape = design.chamber
    w_chamber = drawn_width(shape.width, grid)
    length = round(shape.length / grid) * grid
    x0 = _snap(x_mid - length / 2, grid)  # the inlet wall (on the grid: see the plan)
    y = ends[:, 1]
    y0 = _snap((y.min() + y.max()) / 2 - w_chamber / 2, grid)
    low = float(y.min() - width / 2 - y0)
    high = float(y0 + w_chamber - (y.max() + width / 2))
    # beside the outermost ports a wall of min_gap, and a flat end wall (no taper) clear of
    # the rounded corners
    wall = max(rules.min_gap, shape.corner_radius if shape.taper == 0 else 0.0)
    if min(low, high) < wall - 1e-12:
        # the ports sit in the middles of as many equal strips (see the plan): each strip
        # holds one port and its two walls
        strip = math.ceil((width + 2 * wall) / (2 * grid) - 1e-9) * 2 * grid
        need = max(y.size * strip, float(y.max() - y.min()) + width + 2 * wall)
        raise LayoutError(
            f"design '{design.name}': [bed] width: a chamber {w_chamber * 1e6:.6g} um wide "
            f"cannot hold the {y.size} channels of the last generation ({width * 1e6:.6g} um "
            f"wide, {float(np.diff(np.sort(y)).min()) * 1e6:.6g} um apart) with "
            f"{wall * 1e6:.6g} um beside them ([fabrication] min_gap, or the corner_radius "
            f"of a chamber without taper): a width of "
            f"{math.ceil(need / grid - 1e-9) * grid * 1e6:.6g} um holds them"
        )
    ports = [ChamberPort(0, float(v - y0), width, depth, float(e - x0)) for v, e in
             zip(y, ends[:, 0], strict=True)]  # fmt: skip
    ports += [ChamberPort(1, float(v - y0), width, depth, float(e - x0)) for v, e in
              zip(y, ends[:, 0], strict=True)]  # fmt: skip
    key = chamber_key(
        dataclasses.replace(shape, width=w_chamber, length=length),
        ports,
        grid,
        rules.alignment_margin,
    )
    order = np.r_[np.asarray(port_in)[np.argsort(y, kind="stable")],
                  np.asarray(port_out)[np.argsort(y, kind="stable")]]  # fmt: skip
    return ChamberPlace("chamber", key, (float(x0), float(y0)), 0,
                        tuple(int(k) for k in order))  # fmt: skip
