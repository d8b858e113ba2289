"""The drawing of a chip with several culture regions, at set shares of the flow.

What it looks like
------------------
The inlet trunk runs along +x to a split that feeds the regions, stacked across the chip
(the first ``[[regions]]`` entry on top). Each region is drawn as a tree of its own by the
tree generator (:func:`chipflow.layout.tree.tree_sketch`): its feeder, its splits, its bed,
its collecting tree; the regions lie side by side along y, centred on one x. The feeders
leave the split as a fan (:mod:`chipflow.layout.plan`: the outermost as a T or Y, a middle
one straight on, inner ones of four or five on one wide arc) and run along +x to their
region's first junction; on the outlet side the regions' collecting feeders meet in the
mirror image of that fan, and the outlet trunk runs to the outlet port.

How every region gets its share
-------------------------------
Between the split ``S`` and the merge ``M`` the regions are parallel branches: region ``k``
carries ``Q_k = (p_S - p_M) / R_k``, so it gets its share ``f_k`` when ``f_k R_k`` is the same
for every region. The feeders are sized for their own flow at the trunk's shear
(:mod:`chipflow.design.regions`), so their widths are fixed; their **lengths** make up the
difference, as the detours of a fan do (:func:`chipflow.layout.plan.detour`):

1. the chip is drawn with the shortest feeders (channels and pieces only, no mask layers) and
   its network solved between ``S`` and ``M``: each region's branch resistance ``R_k``, with
   every junction's equivalent lengths from its 2D solve, the asymmetric split's and merge's
   per-arm corrections from their N-port solves included;
2. the branch of largest ``f_k R_k`` keeps its feeders; every other region's feeders are
   lengthened by detours (loops of arcs and straight legs beside the feeder, inside the
   region's own band of the chip) adding exactly ``(max f R / f_k - R_k) / R'_k``, split
   between its inlet and outlet feeder (``R'_k`` the feeder's resistance per length); where a
   detour needs more room along x than the feeder has, every region moves further from the
   split and the lengths are worked out again;
3. the chip is drawn again with the detours, its network solved, and the shares checked;
   should any miss its target by more than :data:`SHARE_TOLERANCE` (a junction that came out
   otherwise than foreseen), the lengths are corrected from that solve and the chip drawn
   once more.

The detours lie beyond the reach of the split's 2D piece, so lengthening a feeder does not
change the pieces: the corrections of the first drawing hold for the last, and the shares
come out exact to the solver's precision (far inside the 0.5 % the build checks).

Length rather than width, as for fans: a feeder's width is what its flow and the trunk's
shear give, and a width moves only by whole grid steps (about 1 % of the resistance of a
100 um channel per 1 um step), while a length can be matched to well below a nanometre.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from chipflow.design.regions import RegionsDesign
from chipflow.errors import LayoutError
from chipflow.layout.footprint import check_culture_regions, culture_region, sketch_box
from chipflow.layout.junctions import STUB_WIDTHS
from chipflow.layout.model import Layout, PortMark
from chipflow.layout.plan import (
    _fan_route,
    ceil_grid,
    detour,
    detour_pieces,
    detour_size,
    drawn_width,
    half_offset,
)
from chipflow.layout.rules import Chip, LayoutRules
from chipflow.layout.sketch import ChannelGroup, PieceSpec, Sketch
from chipflow.layout.trace import trace

__all__ = ["draw_regions", "regions_sketch", "SHARE_TOLERANCE"]

#: Largest relative miss of a region's share of the flow after which the feeders are
#: corrected once more [-].
SHARE_TOLERANCE = 1e-9
#: Room tried above and below each region's tree for its feeders' detours [m]: the one that
#: needs the least room along the chip is drawn.
PADS = (0.0, 0.5e-3, 1e-3, 2e-3, 4e-3)
#: Largest miss of a region's share after the last round of drawing [-]: beyond it the
#: drawing fails (the build's tests demand 0.5 %).
SHARE_LIMIT = 1e-6
#: Most rounds of drawing, solving and correcting the feeders.
MAX_ROUNDS = 6
#: Most loops of one feeder's detour.
MAX_FEEDER_LOOPS = 400


def _snap(value: float, grid: float) -> float:
    return round(value / grid) * grid


@dataclass(frozen=True)
class _Region:
    """One region's tree, drawn by the tree generator, in its own frame."""

    name: str
    sketch: Sketch
    first: int  # its first split node (where the feeder ends), in the sketch
    last: int  # its last merge node (where the collecting feeder starts)
    width: float  # feeder width [m]
    depth: float
    radius: float  # feeder bend radius [m]
    clear: float  # straight the feeder keeps before the region's first junction [m]
    box: tuple[float, float, float, float]  # the tree's channels and its outline [m]
    outline: object  # its CultureRegion (in the sketch's frame)


@dataclass(frozen=True)
class _Frame:
    """Where everything lies for one spread (see :func:`_frame`)."""

    dx: np.ndarray  # (K,) translation of each region's tree [m]
    dy: np.ndarray
    x_s: float
    y_s: float
    x_m: float
    y_m: float
    port_in: tuple[float, float]
    port_out: tuple[float, float]
    routes_in: tuple  # per region (theta, lead, bend, reach)
    routes_out: tuple
    room_in: np.ndarray  # (K,) length along x free for a detour on each feeder [m]
    room_out: np.ndarray
    side: np.ndarray  # (K,) where each feeder's detour bulges (+1 up, -1 down)
    bulge: np.ndarray  # (K,) how far it may bulge [m]
    origin: tuple[float, float]  # shift that centres the whole on the chip [m]
    reach_key: float  # straight a feeder keeps next to the split or merge [m]
    clear: np.ndarray  # (K,) straight it keeps next to its region's tree [m]


def _region(region, chip: Chip, rules: LayoutRules) -> _Region:
    from chipflow.layout.tree import tree_sketch

    design = region.tree
    sketch = tree_sketch(design, chip, rules)
    trunk = sketch.groups[0]
    out = sketch.groups[-1]
    width = drawn_width(trunk.width, rules.grid)
    first, last = int(trunk.node_b[0]), int(out.node_a[0])
    piece = sketch.pieces[int(sketch.node_class[first])]
    disc = float(getattr(piece.key, "disc", 0.0))
    child = sketch.groups[1]
    clear = (
        STUB_WIDTHS * max(width, child.width, 2 * disc)
        + 2 * (disc + rules.alignment_margin)
        + rules.grid
    )
    inner = dataclasses.replace(sketch, groups=sketch.groups[1:-1])
    x0, y0, x1, y1 = sketch_box(inner, ("distribution", "bed", "collection"))
    outline = culture_region(region.name, sketch_box(sketch), design.footprint, rules.grid)
    ox0, oy0, ox1, oy1 = outline.outline.bounds
    box = (min(x0, ox0), min(y0, oy0), max(x1, ox1), max(y1, oy1))
    return _Region(
        region.name, sketch, first, last, width, trunk.depth,
        ceil_grid(rules.bend_radius * width, rules.grid), clear, box, outline,
    )  # fmt: skip


def _fans(offsets: np.ndarray, radius: np.ndarray) -> list[tuple]:
    """(theta, lead, bend, reach) of each feeder leaving a split at ``offsets`` [m] from its
    axis, as the children of a fan (:func:`chipflow.layout.plan._fan_route`): the outermost
    as a T (or Y), the middle one of an odd number straight on, inner ones on one wide arc."""
    k = offsets.size
    order = np.argsort(offsets, kind="stable")
    out: list = [None] * k
    for rank, j in enumerate(order):  # a handful of feeders
        r = float(radius[j])
        a = abs(float(offsets[j]))
        top = (k - 1) / 2
        centred = rank - top
        if a == 0 or centred == 0:
            out[j] = (0.0, 0.0, r, 0.0)
            continue
        # one child of a fan whose ranks put this one where it is, at its own offset
        pitch = a / abs(centred)
        _, theta, lead, reach, bend = _fan_route(1, k, 1.0, 0.0, r, pitch)
        sign = 1.0 if offsets[j] > 0 else -1.0
        out[j] = (sign * abs(float(theta[rank])), float(lead[rank]), float(bend[rank]),
                  float(reach[rank]))  # fmt: skip
    return out


def _frame(regions: list[_Region], trunk_width: float, chip: Chip, rules: LayoutRules,
           spread: float, pad: float = 0.0) -> _Frame:  # fmt: skip
    """Place the regions' trees, the split, the merge and the ports for ``spread`` [m] of
    extra room between the fans and the trees (whole grid steps), each region's band widened
    by ``pad`` [m] above and below its tree (room for its feeders' detours to bulge)."""
    grid = rules.grid
    gap = rules.min_gap
    k = len(regions)
    # across: stack the bands, the first region on top, min_gap apart (whole grid steps)
    dy = np.zeros(k)
    top = 0.0
    for i, reg in enumerate(regions):  # a handful of regions
        x0, y0, x1, y1 = reg.box
        y0, y1 = y0 - pad, y1 + pad
        dy[i] = _snap(top - y1, grid)
        top = y0 + dy[i] - gap
    y_in = np.array([reg.sketch.node_xy[reg.first, 1] for reg in regions]) + dy
    y_out = np.array([reg.sketch.node_xy[reg.last, 1] for reg in regions]) + dy
    parity = half_offset(trunk_width, grid)

    def axis(ys: np.ndarray) -> float:
        mid = k // 2
        if k % 2:
            return float(ys[mid])
        centre = 0.5 * (ys[mid - 1] + ys[mid])
        return _snap(centre - parity, grid) + parity

    y_s, y_m = axis(y_in), axis(y_out)
    radius = np.array([reg.radius for reg in regions])
    routes_in = _fans(y_in - y_s, radius)
    routes_out = _fans(y_out - y_m, radius)
    widths = np.array([reg.width for reg in regions])
    reach_key = STUB_WIDTHS * max(float(widths.max()), trunk_width)
    clear = np.array([reg.clear for reg in regions])

    # along: the split's x on the feeders' wall parity, the trees centred on one x
    r_hole = chip.punch_diameter / 2
    keep = r_hole + rules.port_keepout
    overlap = max(float(widths.max()), trunk_width) / 2 + rules.alignment_margin
    trunk = ceil_grid(
        max(rules.port_keepout + max(trunk_width, float(widths.max())) + gap,
            2 * overlap + grid),
        grid,
        (parity - r_hole) % grid,
    )  # fmt: skip
    x_port = 0.0
    x_s = x_port + r_hole + trunk
    reach_in = np.array([r[3] for r in routes_in])
    reach_out = np.array([r[3] for r in routes_out])
    first_x = np.array([reg.sketch.node_xy[reg.first, 0] for reg in regions])
    last_x = np.array([reg.sketch.node_xy[reg.last, 0] for reg in regions])
    extent = last_x - first_x
    need = reach_in + reach_key + grid + clear  # the least run from the split to a tree
    centre = float(np.max(x_s + need + extent / 2)) + spread
    dx = np.array([_snap(centre - extent[i] / 2 - first_x[i], grid) for i in range(k)])
    x_first = first_x + dx
    x_last = last_x + dx
    need_out = reach_out + reach_key + grid + clear
    x_m = ceil_grid(float(np.max(x_last + need_out)) + spread, grid, x_s % grid)
    # x_m has the split's wall parity: its feeders' vertical runs keep their walls on the grid
    room_in = x_first - x_s - need
    room_out = x_m - x_last - need_out
    x_port_out = x_m + trunk + r_hole
    # the detours bulge inside each region's band, away from the split's axis
    lo = np.array([reg.box[1] for reg in regions]) + dy - pad
    hi = np.array([reg.box[3] for reg in regions]) + dy + pad
    up = hi - np.maximum(y_in, y_out) - widths / 2 - gap
    down = np.minimum(y_in, y_out) - lo - widths / 2 - gap
    side = np.where(up >= down, 1.0, -1.0)
    bulge = np.maximum(np.maximum(up, down), 0.0)
    # centre the whole on the chip (whole grid steps)
    x_lo = min(x_port - keep, float(np.min([r.box[0] for r in regions] + dx)))
    x_hi = max(x_port_out + keep, float(np.max([r.box[2] for r in regions] + dx)))
    y_lo = min(float(lo.min()), y_s - keep, y_m - keep)
    y_hi = max(float(hi.max()), y_s + keep, y_m + keep)
    width_needed = x_hi - x_lo + 2 * chip.margin
    height_needed = y_hi - y_lo + 2 * chip.margin
    if width_needed > chip.width + 1e-12 or height_needed > chip.height + 1e-12:
        raise LayoutError(
            f"the {k} culture regions need {width_needed * 1e3:.1f} x "
            f"{height_needed * 1e3:.1f} mm on the chip (their trees stacked across it, the "
            f"feeders and ports included), more than the {chip.width * 1e3:g} x "
            f"{chip.height * 1e3:g} mm [chip]; use a larger chip, smaller footprints, or "
            "shorter beds (max_straight_length folds them)"
        )
    ox = _snap(chip.width / 2 - (x_lo + x_hi) / 2, grid)
    oy = _snap(chip.height / 2 - (y_lo + y_hi) / 2, grid)
    return _Frame(
        dx, dy, x_s, y_s, x_m, y_m, (x_port, y_s), (x_port_out, y_m),
        tuple(routes_in), tuple(routes_out), room_in, room_out, side, bulge, (ox, oy),
        reach_key + grid, clear,
    )  # fmt: skip


def _loops(extra: float, radius: float, bulge: float) -> tuple[float, float, int, float]:
    """The detour (angle [rad], leg [m], loops) adding ``extra`` [m] within ``bulge`` [m] of
    its run, in the fewest loops, and its length along the run [m]."""
    if extra <= 0:
        return 0.0, 0.0, 0, 0.0
    for count in range(1, MAX_FEEDER_LOOPS + 1):  # the fewest loops that fit beside the run
        phi, leg = detour(extra / count, radius)
        side, along = detour_size(phi, leg, radius)
        if side <= bulge:
            return phi, leg, count, along * count
    raise LayoutError(
        f"a feeder needs {extra * 1e3:.1f} mm more length than {MAX_FEEDER_LOOPS} loops beside "
        f"it can hold within {bulge * 1e3:.2f} mm; give the regions more room across the chip"
    )


def _moved(group: ChannelGroup, dx: float, dy: float, **changes) -> ChannelGroup:
    return dataclasses.replace(group, shift=(group.shift[0] + dx, group.shift[1] + dy), **changes)


def regions_sketch(
    design: RegionsDesign,
    chip: Chip,
    rules: LayoutRules,
    spread: float = 0.0,
    extras: np.ndarray | None = None,
    parts: list[_Region] | None = None,
    pad: float = 0.0,
) -> tuple[Sketch, dict]:
    """The network with coordinates of a chip of several regions (see the module notes).

    Parameters
    ----------
    design : RegionsDesign
    chip : Chip
    rules : LayoutRules
    spread : float
        Extra room between the fans and the trees [m] (whole grid steps).
    pad : float
        Room added above and below each region's tree for its feeders' detours [m].
    extras : numpy.ndarray, optional
        (K, 2) length each region's inlet and outlet feeder gains by its detour [m].
    parts : list, optional
        The regions' trees as drawn by the tree generator (from an earlier call).

    Returns
    -------
    sketch : Sketch
    info : dict
        ``feeders``: (K, 2) channel index of each region's inlet and outlet feeder;
        ``lengths``: (K, 2) their drawn lengths [m]; ``room``: (K, 2) x length free for their
        detours [m]; ``bulge``: (K,) how far a detour may bulge [m]; ``radius``: (K,) the
        feeders' bend radii [m]; ``parts``.
    """
    grid = rules.grid
    k = len(design.regions)
    if parts is None:
        parts = [_region(r, chip, rules) for r in design.regions]
    extras = np.zeros((k, 2)) if extras is None else np.asarray(extras, float)
    trunk_w = drawn_width(design.trunk.width, grid)
    f = _frame(parts, trunk_w, chip, rules, spread, pad)
    ox, oy = f.origin
    r_hole = chip.punch_diameter / 2
    keep = r_hole + rules.port_keepout
    tol = grid / 4

    nodes = [(f.port_in[0] + r_hole, f.y_s), (f.port_out[0] - r_hole, f.y_m), (f.x_s, f.y_s),
             (f.x_m, f.y_m)]  # fmt: skip
    names = ["inlet", "outlet", "split0.0", "merge0.0"]
    node_class: list[int] = [-1, -1, -1, -1]
    groups: list[ChannelGroup] = []
    pieces: list[PieceSpec | None] = []
    warnings: list[str] = []
    notes: list[str] = []
    outlines = []
    feeders = np.zeros((k, 2), dtype=int)
    feeder_groups = np.zeros((k, 2), dtype=int)
    trunk = trace(0.0, [("L", f.x_s - nodes[0][0])], tol)
    groups.append(
        ChannelGroup((trunk,), trunk_w, design.trunk.depth, "distribution", 0, np.zeros(1, int),
                     np.array([nodes[0]]), np.array([0]), np.array([2]), np.array([0]))
    )  # fmt: skip
    channel = 1
    for i, (reg, region) in enumerate(zip(parts, design.regions, strict=True)):
        sk = reg.sketch
        dx, dy = float(f.dx[i]), float(f.dy[i])
        base = len(nodes) - 2  # sketch node j >= 2 -> chip node base + j
        remap = np.arange(len(sk.node_names)) + base
        group_base = len(groups)  # sketch group g -> chip group group_base + g
        class_base = len(pieces)
        xy = sk.node_xy[2:] + (dx, dy)
        nodes += [tuple(p) for p in xy]
        names += [f"{reg.name}:{_shifted(n)}" for n in sk.node_names[2:]]
        node_class += [c + class_base if c >= 0 else -1 for c in sk.node_class[2:].tolist()]
        for spec in sk.pieces:  # a handful of levels
            arms = tuple((g + group_base, v, e) for g, v, e in spec.arms)
            pieces.append(dataclasses.replace(spec, arms=arms))
        p_in = (float(sk.node_xy[reg.first, 0] + dx), float(sk.node_xy[reg.first, 1] + dy))
        p_out = (float(sk.node_xy[reg.last, 0] + dx), float(sk.node_xy[reg.last, 1] + dy))
        parity = half_offset(reg.width, grid)
        # the inlet feeder: the fork from the split, a straight, the detour, a straight
        bounds = (f.reach_key, float(f.clear[i]))
        t_in = _feeder(f.routes_in[i], float(extras[i, 0]), reg.radius, float(f.side[i]),
                       float(f.bulge[i]), f.x_s, p_in[0], grid, parity, tol,
                       bounds)  # fmt: skip
        groups.append(
            ChannelGroup((t_in,), reg.width, reg.depth, "distribution", 1, np.zeros(1, int),
                         np.array([(f.x_s, f.y_s)]), np.array([2]),
                         np.array([int(remap[reg.first])]), np.array([0]), region=reg.name)
        )  # fmt: skip
        feeders[i, 0] = channel
        feeder_groups[i, 0] = len(groups) - 1
        channel += 1
        for g in sk.groups[1:-1]:  # the region's own levels
            groups.append(
                _moved(g, dx, dy, node_a=remap[g.node_a], node_b=remap[g.node_b],
                       generation=g.generation + 1, region=reg.name)
            )  # fmt: skip
            channel += g.size
        # the outlet feeder: from the region's last merge, mirrored: straight, detour,
        # straight, the fork's mirror image into the merge
        t_out = _feeder(f.routes_out[i], float(extras[i, 1]), reg.radius, float(f.side[i]),
                        float(f.bulge[i]), p_out[0], f.x_m, grid, parity, tol,
                        bounds[::-1], outlet=True)  # fmt: skip
        groups.append(
            ChannelGroup((t_out,), reg.width, reg.depth, "collection", 1, np.zeros(1, int),
                         np.array([p_out]), np.array([int(remap[reg.last])]), np.array([3]),
                         np.array([0]), region=reg.name)
        )  # fmt: skip
        feeders[i, 1] = channel
        feeder_groups[i, 1] = len(groups) - 1
        channel += 1
        warnings += [f"region {reg.name!r}: {w}" for w in sk.warnings]
        notes += [f"region {reg.name!r}: {n}" for n in sk.notes]
        box = sketch_box(_only(groups[-(len(sk.groups)) : -1]), ("bed",))
        outlines.append(culture_region(reg.name, box, region.tree.footprint, grid))
    out_trunk = trace(0.0, [("L", nodes[1][0] - f.x_m)], tol)
    groups.append(
        ChannelGroup((out_trunk,), trunk_w, design.trunk.depth, "collection", 0,
                     np.zeros(1, int), np.array([(f.x_m, f.y_m)]), np.array([3]),
                     np.array([1]), np.array([0]))
    )  # fmt: skip
    ports = (
        PortMark("inlet", f.port_in[0], f.port_in[1], chip.punch_diameter, keep),
        PortMark("outlet", f.port_out[0], f.port_out[1], chip.punch_diameter, keep),
    )
    # everything moved by the origin that centres it on the chip
    groups = [_moved(g, ox, oy) for g in groups]
    node_xy = np.asarray(nodes, float) + (ox, oy)
    ports = tuple(dataclasses.replace(p, x=p.x + ox, y=p.y + oy) for p in ports)
    outlines = [_shifted_outline(c, ox, oy) for c in outlines]
    sketch = Sketch(
        name=design.name,
        chip=chip,
        rules=rules,
        node_xy=node_xy,
        node_names=tuple(names),
        groups=tuple(groups),
        ports=ports,
        node_class=np.asarray(node_class),
        pieces=tuple(pieces),
        warnings=tuple(warnings),
        notes=tuple(notes),
        culture_regions=tuple(outlines),
    )
    lengths = np.array([[groups[g].templates[0].length for g in row] for row in feeder_groups])
    info = {
        "feeders": feeders,
        "lengths": lengths,
        "room": np.column_stack((f.room_in, f.room_out)),
        "bulge": f.bulge,
        "radius": np.array([reg.radius for reg in parts]),
        "parts": parts,
    }
    return sketch, info


def _only(groups) -> Sketch:
    """A stand-in sketch holding ``groups`` (for :func:`sketch_box`)."""
    return Sketch("", Chip(), LayoutRules(), np.zeros((0, 2)), (), tuple(groups), ())


def _shifted(name: str) -> str:
    """A region tree's node name with its generation counted from the chip's trunk:
    ``split0.3`` -> ``split1.3``."""
    for head in ("split", "merge"):
        if name.startswith(head):
            level, _, index = name[len(head) :].partition(".")
            return f"{head}{int(level) + 1}.{index}"
    return name


def _shifted_outline(region, dx: float, dy: float):
    import shapely

    return dataclasses.replace(region, outline=shapely.affinity.translate(region.outline, dx, dy))


def _feeder(route, extra, radius, side, bulge, x_from, x_to, grid, parity, tol, ends,
            outlet=False):  # fmt: skip
    """The centreline of a feeder (see :func:`regions_sketch`).

    An inlet feeder starts at the split ``x_from`` [m]: its fork, a straight, its detour
    (``extra`` [m] more length, bulging to ``side`` within ``bulge``), a straight to the
    tree's first junction at ``x_to``. An outlet feeder starts at the tree's last merge and
    ends with the fork's mirror image into the merge at ``x_to``. ``ends`` [m] are the least
    straights before and after the detour; the detour starts where its legs' walls lie on the
    grid (``parity`` [m])."""
    theta, lead, bend, reach = route
    phi, leg, loops, along = _loops(extra, radius, bulge)
    run = x_to - x_from - reach
    if loops:
        start = x_from + (0.0 if outlet else reach)
        x0 = ceil_grid(start + ends[0], grid, parity % grid)
        first = x0 - start
        if run - first - along < ends[1] - 1e-12:
            raise LayoutError("a feeder's detour has no room (a drawing fault)")
        body = [("L", first), *detour_pieces(phi, leg, radius, side, loops)]
        body.append(("L", run - first - along))
    else:
        body = [("L", run)]
    if not outlet:
        fork = ([("L", lead)] if lead > 0 else []) + ([("A", bend, -theta)] if theta else [])
        return trace(theta, fork + body, tol)
    back = ([("A", bend, -theta)] if theta else []) + ([("L", lead)] if lead > 0 else [])
    return trace(0.0, body + back, tol)


def _branch_flows(layout: Layout, fluid, feeders: np.ndarray) -> np.ndarray:
    """Flow of each region's inlet feeder with 1 Pa between the split and the merge
    [m^3/s], from the network of ``layout`` (every piece's correction included)."""
    from chipflow.layout.extract import extract_network
    from chipflow.network import solve

    sol = solve(extract_network(layout), fluid, pressures={"split0.0": 1.0, "merge0.0": 0.0})
    return np.abs(np.asarray(sol.flow)[feeders[:, 0]])


def _room(design, chip, rules, parts, pad, r0, per, length0, fraction):
    """The spread [m] that gives every feeder's detour its room along x with bands widened
    by ``pad`` [m], and the detours' lengths ((K, 2) [m], inlet and outlet halves)."""
    spread = 0.0
    for _ in range(100):  # each round widens the room; a few rounds at most
        _, info = regions_sketch(design, chip, rules, spread, None, parts, pad)
        base = r0 + per * (info["lengths"].sum(axis=1) - length0)
        extra = (np.max(fraction * base) / fraction - base) / per
        extra[extra < 1e-15] = 0.0
        halves = np.column_stack((extra / 2, extra / 2))
        need = _need(halves, info, rules.grid)
        if need <= 0:
            return spread, halves
        spread += ceil_grid(need, 2 * rules.grid)
    raise LayoutError("the feeders' detours found no room on the chip (a drawing fault)")


def _need(halves: np.ndarray, info: dict, grid: float) -> float:
    """How much more room along x [m] the feeders' detours of ``halves`` [m] need than they
    have (<= 0: they fit); a detour starts on the grid, up to one step later than its room
    begins."""
    k = halves.shape[0]
    need = -math.inf
    for i in range(k):  # a handful of regions
        for j in range(2):
            _, _, loops, along = _loops(
                float(halves[i, j]), float(info["radius"][i]), float(info["bulge"][i])
            )
            if loops:
                need = max(need, along + grid - float(info["room"][i, j]))
    return need


def _make_room(design, chip, rules, parts, pad, spread, halves) -> float:
    """``spread`` [m], widened until every feeder's detour of ``halves`` [m] fits."""
    for _ in range(100):  # each round widens the room; a few rounds at most
        _, info = regions_sketch(design, chip, rules, spread, None, parts, pad)
        need = _need(halves, info, rules.grid)
        if need <= 0:
            return spread
        spread += ceil_grid(need, 2 * rules.grid)
    raise LayoutError("the feeders' detours found no room on the chip (a drawing fault)")


def draw_regions(design: RegionsDesign, chip: Chip, rules: LayoutRules) -> Layout:
    """Draw a chip of several regions, each fed its share of the flow (see the module notes).

    Returns
    -------
    Layout
        As :func:`chipflow.layout.draw`, with every region's channels named after it
        (``DrawnChannels.region``), its culture region's outline (``Layout.culture_regions``)
        and a note of the feeders' detours.

    Raises
    ------
    LayoutError
        When the regions do not fit on the chip, or a footprint does not hold its bed.
    """
    from chipflow.layout.engine import draw_sketch
    from chipflow.physics.duct import resistance

    fraction = np.array([r.flow_fraction for r in design.regions])
    sketch, info = regions_sketch(design, chip, rules)
    parts, feeders, length0 = info["parts"], info["feeders"], info["lengths"].sum(axis=1)
    # 1. the shortest feeders: each region's branch resistance, every piece included
    r0 = 1.0 / _branch_flows(draw_sketch(sketch, masks=False), design.fluid, feeders)
    mu = design.fluid.viscosity
    per = np.array([float(resistance(p.width, p.depth, 1.0, mu)) for p in parts])
    # 2. the detours that even out f_k R_k, and the room for them: along x (spread) and
    # across (pad: each region's band widened, so that its detours bulge further in fewer
    # loops); the least spread, then the least pad, of a few pads that fit on the chip
    best, first_error = None, None
    for pad in PADS:  # a handful of pads
        try:
            spread, halves = _room(design, chip, rules, parts, pad, r0, per, length0, fraction)
        except LayoutError as exc:  # too wide or too tall: the next pad may do
            first_error = first_error or exc
            continue
        if best is None or spread < best[0] - 1e-12:
            best = (spread, halves, pad)
    if best is None:
        raise first_error
    spread, halves, pad = best
    # 3. drawn with the detours, solved, checked (and corrected where the pieces came out
    # otherwise than foreseen: a wider band moves the fans' arms; a detour that outgrows its
    # room gets more, and the next round evens out the longer straights)
    miss = math.inf
    for _ in range(MAX_ROUNDS):  # two or three rounds at most, as a rule
        spread = _make_room(design, chip, rules, parts, pad, spread, halves)
        sketch, info = regions_sketch(design, chip, rules, spread, halves, parts, pad)
        layout = draw_sketch(sketch)
        q = _branch_flows(layout, design.fluid, feeders)
        miss = float(np.max(np.abs(q / q.sum() / fraction - 1.0)))
        if miss <= SHARE_TOLERANCE:
            break
        r = 1.0 / q
        more = (np.max(fraction * r) / fraction - r) / per
        halves = halves + np.column_stack((more / 2, more / 2))
    if miss > SHARE_LIMIT:
        raise LayoutError(
            f"the feeders of the culture regions give shares {miss:.2%} off their flow "
            f"fractions after {MAX_ROUNDS} rounds of drawing (a drawing fault)"
        )
    check_culture_regions(layout)
    added = info["lengths"].sum(axis=1) - length0
    shown = ", ".join(
        f"{r.name} {a * 1e3:.3f} mm" for r, a in zip(design.regions, added, strict=True)
    )
    note = (
        f"regions: feeders lengthened by {shown} (inlet and outlet together, detours "
        "included) so that every region gets its share of the flow, every junction's "
        "correction included"
    )
    return dataclasses.replace(layout, notes=(*layout.notes, note))
