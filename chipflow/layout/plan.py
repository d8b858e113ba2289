"""The plan of a drawing: every dimension (pitch, bends, straights, serpentine) decided from
the sized design before any geometry is built."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from chipflow.design.model import TreeDesign
from chipflow.errors import LayoutError
from chipflow.layout.rules import Chip, LayoutRules

__all__ = [
    "Plan",
    "Route",
    "detour",
    "detour_pieces",
    "detour_size",
    "fan_key",
    "plan_layout",
    "merge_cuts",
    "choose_plan",
    "fork",
    "ceil_grid",
    "drawn_width",
    "half_offset",
    "MAX_RUNS",
]

MAX_RUNS = 401  # serpentine runs tried before giving up


def fork(a: float, radius: float) -> tuple[float, float]:
    """Exit angle [rad] and straight lead [m] of a child offset sideways by ``a``."""
    if a >= radius:
        return math.pi / 2, a - radius
    return math.acos(1 - a / radius), 0.0


def ceil_grid(value: float, grid: float, offset: float = 0.0) -> float:
    """The smallest ``offset + k * grid`` (k whole) not below ``value`` [m]."""
    return math.ceil((value - offset) / grid - 1e-9) * grid + offset


def drawn_width(width: float, grid: float) -> float:
    """The width [m] a channel has on a mask of ``grid`` [m]: a whole number of grid steps.

    >>> round(drawn_width(35e-6, 1e-6) * 1e6, 9), round(drawn_width(35.3e-6, 0.5e-6) * 1e6, 9)
    (35.0, 35.5)
    """
    return max(round(width / grid), 1) * grid


def half_offset(width: float, grid: float) -> float:
    """Where a centreline of ``width`` [m] sits relative to the grid [m] so that both walls
    lie on it: on the grid for an even number of grid steps, half a step off for an odd one.

    >>> half_offset(36e-6, 1e-6), half_offset(35e-6, 1e-6)
    (0.0, 5e-07)
    """
    return 0.5 * grid * (round(width / grid) % 2)


def detour(extra: float, radius: float) -> tuple[float, float]:
    """Arc angle [rad] and leg [m] of a detour that adds ``extra`` [m] to a straight run.

    The detour is four arcs of ``radius`` [m], turning by +phi, -phi, -phi, +phi, with a
    straight leg of length ``leg`` between the first two and between the last two: it leaves
    its run and comes back to it, ``4 r (phi - sin phi) + 2 leg (1 - cos phi)`` longer than
    the run it replaces. Up to ``4 r (pi/2 - 1)`` the legs are empty and ``phi`` is found by
    root finding; beyond, ``phi`` is a right angle and the legs take the rest.

    >>> phi, leg = detour(10e-6, 100e-6)
    >>> round(4 * 100e-6 * (phi - math.sin(phi)) * 1e6, 9), leg
    (10.0, 0.0)
    >>> detour(1e-3, 100e-6)[0] == math.pi / 2
    True
    """
    from scipy.optimize import brentq

    if extra <= 0:
        return 0.0, 0.0
    most = 4 * radius * (math.pi / 2 - 1)
    if extra >= most:
        return math.pi / 2, (extra - most) / 2
    phi = brentq(lambda a: 4 * radius * (a - math.sin(a)) - extra, 1e-9, math.pi / 2, xtol=1e-15)
    return float(phi), 0.0


#: Most loops a detour is split into to keep its bulge within the room beside it [-].
MAX_LOOPS = 12


def detour_pieces(
    phi: float, leg: float, radius: float, side: float, loops: int = 1
) -> list[tuple]:
    """The pieces of a :func:`detour` bulging to the left (``side`` +1) or right (-1),
    repeated ``loops`` times."""
    if phi <= 0:
        return []
    a = side * phi
    one = [("A", radius, a), ("L", leg), ("A", radius, -a), ("A", radius, -a), ("L", leg),
           ("A", radius, a)]  # fmt: skip
    return one * int(loops)


def detour_size(phi: float, leg: float, radius: float) -> tuple[float, float]:
    """How far a detour bulges sideways and its length along its run [m]."""
    if phi <= 0:
        return 0.0, 0.0
    side = 2 * radius * (1 - math.cos(phi)) + leg * math.sin(phi)
    along = 4 * radius * math.sin(phi) + (2 * leg * math.cos(phi) if phi < math.pi / 2 else 0.0)
    return side, along


@dataclass(frozen=True)
class Route:
    """How the children of one split leave their parent's node (one generation, 1..n).

    Child ``j`` (0 lowest) lies ``offset[j]`` to the side of the parent's axis. It leaves the
    node at ``theta[j]`` (pi/2, a T, where the offset allows; inner children of a split into
    four or five at a smaller angle, so that children on one side do not overlap), runs
    ``lead[j]`` straight, turns back to +x on one arc of radius ``bend[j]``, and so reaches
    ``reach[j]`` along x.
    Children whose path (junction correction included) is shorter than the longest get a
    :func:`detour` of angle ``phi[j]`` and leg ``leg[j]``, ``loops[j]`` times in a row, bulging
    to ``side[j]`` (away from the middle of the split), starting ``start`` [m] along x from
    the node.
    """

    offset: np.ndarray
    theta: np.ndarray
    lead: np.ndarray
    reach: np.ndarray
    phi: np.ndarray
    leg: np.ndarray
    side: np.ndarray
    start: float
    extra: np.ndarray  # length each child's detour adds [m]
    along: np.ndarray  # x length of each child's detour [m]
    loops: np.ndarray | None = None  # loops of each child's detour
    fit_error: float = 0.0
    bend: np.ndarray | None = None  # radius of each child's arc back to +x [m]
    disc: float = 0.0  # radius of the disc drawn at the split's node [m]

    @property
    def count(self) -> int:
        return int(self.offset.size)


# -- the plan: every dimension of the drawing, decided before any geometry is built ---------
@dataclass(frozen=True)
class Plan:
    """Every dimension of a drawing [m], per generation 0..n (the bed is generation n).

    Grid-exactness: a straight run of width w along x lies at a y whose offset from the grid
    is :func:`half_offset` (w), so both its walls lie on the grid; the same for the x of a
    run along y. The sideways offset of a child from its parent's axis is the uniform-pitch
    offset plus half a grid step where parent and child differ in that parity; the advances
    of the generations and the bed's length along x are chosen likewise. The per-generation
    scalars (``theta``, ``lead_in``, ``offset``, ``straight``) are those of the outermost
    child; ``routes`` has every child of every split.
    """

    n: int
    pitch: float
    runs: int
    run_length: float  # length of each serpentine run (or the one straight run)
    lead: float  # straight before/after the serpentine
    turn: float  # centre spacing of serpentine runs
    width: np.ndarray  # (n+1,) drawn width per generation (widest of distribution/collection)
    radius: np.ndarray  # (n+1,) bend radius per generation
    straight: np.ndarray  # (n+1,) straight run after the bend (trees)
    theta: np.ndarray  # (n+1,) exit angle per generation 1..n (index 0 unused)
    lead_in: np.ndarray  # (n+1,) straight before the bend
    advance: np.ndarray  # (n+1,) x advance of a generation's channel
    offset: np.ndarray  # (n+1,) sideways offset of a child's axis from its parent's axis
    trunk: float
    bed_extent: float  # x extent of a bed channel, a whole number of grid steps
    bed_gap: float  # wall kept between neighbouring bed channels (and serpentine runs)
    width_needed: float
    height_needed: float
    bed_min_length: float
    splits: tuple[int, ...] = ()
    routes: tuple = ()  # (n+1,) Route per generation 1..n (index 0: None)
    bed_pre: float = 0.0  # x from the split node to where every bed channel's body starts
    notes: tuple[str, ...] = ()


def _fan_route(g, s, rank_pitch, delta, radius, pitch):
    """Offsets, exit angles, leads, reaches and arc radii of the ``s`` children of generation
    ``g``: the outermost children by :func:`fork`; inner children of a split into 4 or 5
    leave at an angle of their own and turn back on one wider arc, with no straight lead (a
    straight run at an angle would have walls off the grid); the middle one of an odd split
    runs straight on (or, half a grid step off, on a slight fork)."""
    rank = np.arange(s) - (s - 1) / 2
    top = np.abs(rank).max()
    offset = np.empty(s)
    theta = np.empty(s)
    lead = np.empty(s)
    reach = np.empty(s)
    bend = np.full(s, float(radius))
    for j in range(s):  # loop over the children of one split (2 to 5)
        r = rank[j]
        a = abs(r) * rank_pitch * pitch + delta
        sign = 1.0 if r >= 0 else -1.0
        if abs(r) == top or r == 0:
            th, ld = fork(a, radius) if a > 0 else (0.0, 0.0)
        else:
            target = math.pi / 2 * abs(r) / top
            wide = a / (1 - math.cos(target))
            if wide >= radius:
                th, ld, bend[j] = target, 0.0, wide
            else:
                th, ld = fork(a, radius)
        offset[j] = sign * a
        theta[j] = sign * th
        lead[j] = ld
        reach[j] = bend[j] * math.sin(th) + (ld * math.cos(th) if th < math.pi / 2 else 0.0)
    return offset, theta, lead, reach, bend


def fan_arms(route_theta, lead, bend, widths, depths) -> list[tuple]:
    """The arms (heading, width, depth, pieces from the node) of one split in the key's
    frame: the parent arriving from -x, then the children (their lead and arc)."""
    from chipflow.layout.junctions import STUB_WIDTHS
    from chipflow.layout.pieces import key_arms

    reach = STUB_WIDTHS * max(widths)
    arms = [(math.pi, widths[0], depths[0], ())]
    for th, ld, r in zip(route_theta, lead, bend, strict=True):
        pieces = [("L", float(ld))] if ld > 0 else []
        if th != 0:
            pieces.append(("A", float(r), -float(th)))
        arms.append((float(th), widths[1], depths[1], key_arms(tuple(pieces), reach)))
    return arms


def fan_key(route_theta, lead, bend, widths, depths, rules: LayoutRules):
    """The geometry key of one split (:func:`chipflow.layout.pieces.junction_key`), with the
    key's arm order, rotation and mirror."""
    from chipflow.layout.pieces import junction_disc, junction_key

    arms = fan_arms(route_theta, lead, bend, widths, depths)
    headings = np.array([a[0] for a in arms])
    w = np.array([a[1] for a in arms])
    disc = junction_disc(headings, w, rules.min_feature)
    stepped = not math.isclose(depths[0], depths[1], rel_tol=1e-9)
    overlap = max(disc, float(w.max()) / 2) + rules.alignment_margin if stepped else 0.0
    return junction_key(arms, disc, overlap)


def _compensate(route, widths, depths, radius, rules, room):
    """Detours that give every child of a split the same path resistance (see Route).

    ``room`` (s,) [m] is how far each child may bulge. A detour is split into as many loops
    (at most :data:`MAX_LOOPS`) as keep it within its room; the bulge of each child is
    returned too (the plan widens the pitch when a detour does not fit in any number)."""
    from chipflow.layout import pieces as _pieces
    from chipflow.layout.junctions import STUB_WIDTHS

    offset, theta, lead, reach, bend = route
    s = offset.size
    key, order, _, _ = fan_key(theta, lead, bend, widths, depths, rules)
    sol = _pieces.solve_piece(key)
    per_arm = np.empty(s + 1)
    per_arm[order] = np.asarray(sol.lengths, float)
    if np.any(np.isnan(per_arm)):
        per_arm = np.zeros(s + 1)  # unsolved: counted as drawn (said by the build)
    excess = lead + bend * np.abs(theta) - reach  # length beyond the x advance
    total = excess + per_arm[1:]
    extra = total.max() - total
    extra[extra < 1e-12] = 0.0
    phi, leg, along, loops = np.zeros(s), np.zeros(s), np.zeros(s), np.zeros(s, dtype=int)
    bulge = np.zeros(s)
    for j in np.flatnonzero(extra > 0):  # loop over the children of one split
        for count in range(1, MAX_LOOPS + 1):  # the fewest loops that fit beside the child
            a, b = detour(float(extra[j]) / count, radius)
            side_, one = detour_size(a, b, radius)
            if side_ <= room[j] or count == MAX_LOOPS:
                break
        phi[j], leg[j], loops[j] = a, b, count
        bulge[j], along[j] = side_, one * count
    side = np.where(offset > 0, 1.0, np.where(offset < 0, -1.0, 1.0))
    start = float(reach.max()) + STUB_WIDTHS * max(widths)
    return (
        Route(
            offset,
            theta,
            lead,
            reach,
            phi,
            leg,
            side,
            start,
            extra,
            along,
            loops,
            sol.fit_error,
            bend,
        ),  # fmt: skip
        bulge,
    )


def plan_layout(
    design: TreeDesign,
    chip: Chip,
    rules: LayoutRules,
    runs: int,
    pitch_floor: float = 0.0,
    compensate: bool = True,
) -> Plan:
    """The plan of ``design`` with its bed folded into ``runs`` (odd) serpentine runs.

    ``pitch_floor`` [m] is a least bed pitch (the room a detour asked for on a first try).
    ``compensate`` False leaves out the detours of splits into 3 to 5 (and their 2D solves):
    a quick estimate of the size, for choosing the fold.
    """
    n = design.generations
    splits = design.splits
    below = [math.prod(splits[g:]) for g in range(n + 1)]  # bed channels under a channel
    grid = rules.grid
    gap = rules.min_gap
    bed_gap = max(design.bed_gap or gap, gap)
    dist = design.distribution
    coll = {lv.generation: lv for lv in design.collection}
    bed = design.bed
    # widest of the distributing and collecting channel of each generation sets the geometry
    width = np.array(
        [drawn_width(max(dist[g].width, coll[g].width), grid) for g in range(n)]
        + [drawn_width(bed.width, grid)],
        dtype=float,
    )
    depth = np.array([lv.depth for lv in dist] + [bed.depth])
    half = np.array([half_offset(w, grid) for w in width])
    # half a grid step more sideways where a child's wall parity differs from its parent's
    delta = np.r_[0.0, np.abs(half[1:] - half[:-1])]
    radius = np.array([ceil_grid(rules.bend_radius * w, grid) for w in width])
    turn = ceil_grid(max(2 * radius[n], width[n] + bed_gap), 2 * grid)
    lane = (runs - 1) * turn
    slack = 2 * delta.sum()  # lanes move by at most this from a uniform pitch
    need = [(width[g] + gap) / below[g] for g in range(1, n)]
    need.append(lane + width[n] + bed_gap)
    chamber = getattr(design, "chamber", None)
    if chamber is not None:  # the ports in the middles of as many equal strips of the chamber
        strip = drawn_width(chamber.width, grid) / below[0]
        need.append(math.floor(strip / (2 * grid) + 1e-9) * 2 * grid - slack)
    for g in range(1, n + 1):  # inner children of a split into 4 or 5 pass the outer arcs
        if splits[g - 1] >= 4:
            need.append((radius[g] + width[g] + (gap if g < n else bed_gap)) / below[g])
    pitch = ceil_grid(max(max(need), pitch_floor) + slack, 2 * grid)

    def disc_of(route) -> float:
        """The disc at a split's node, as the engine will draw it."""
        from chipflow.layout.pieces import junction_disc

        headings = np.r_[math.pi, route.theta]
        return junction_disc(headings, np.r_[width[g - 1], np.full(route.count, width[g])],
                             rules.min_feature)  # fmt: skip

    routes: list = [None]
    theta = np.zeros(n + 1)
    lead_in = np.zeros(n + 1)
    offset = np.zeros(n + 1)
    floor = 0.0
    for g in range(1, n + 1):
        s = splits[g - 1]
        route = _fan_route(g, s, below[g], delta[g], radius[g], pitch)
        zero = np.zeros(s)
        if s > 2 and compensate:
            # each detour bulges towards a neighbouring lane: half of the room for the
            # outermost children, whose neighbours of the next split may bulge towards them
            wall = gap if g < n else bed_gap
            outer = np.abs(np.arange(s) - (s - 1) / 2) == (s - 1) / 2
            room = (below[g] * pitch - width[g] - wall) / np.where(outer, 2.0, 1.0)
            w_pair = (float(width[g - 1]), float(width[g]))
            d_pair = (float(depth[g - 1]), float(depth[g]))
            full, bulge = _compensate(route, w_pair, d_pair, float(radius[g]), rules, room)
            share = np.where(outer, 2.0, 1.0)
            floor = max(floor, float(np.max((share * bulge + width[g] + wall) / below[g])))
        else:
            o, t, ld, rc, bend = route
            full = Route(o, t, ld, rc, zero, zero, np.sign(o), float(rc.max()), zero, zero,
                         None, 0.0, bend)  # fmt: skip
        full = dataclasses.replace(full, disc=disc_of(full))
        routes.append(full)
        theta[g], lead_in[g], offset[g] = abs(full.theta[0]), full.lead[0], abs(full.offset[0])
    if floor + slack > pitch + 1e-12:  # a detour does not fit beside its child: wider lanes
        return plan_layout(design, chip, rules, runs, max(floor, pitch_floor + 2 * grid))

    straight = np.zeros(n + 1)
    advance = np.zeros(n + 1)
    for g in range(1, n):  # straight run after the bend; it sets the advance on the grid
        route = routes[g]
        parity = (half[g + 1] - half[g]) % grid
        span = float(route.reach.max()) + max(width[g], width[g + 1]) + gap
        # the run into the next junction reaches past its disc: its middle, where its width is
        # measured, and the cut for merging lie clear of it
        clear = 2 * (routes[g + 1].disc + rules.alignment_margin) + grid
        span = max(span, float(route.reach.max()) + clear)
        if np.any(route.along > 0):  # the detours, then room for the next junction
            end = route.start + float(route.along.max())
            span = max(span, end + max(width[g], width[g + 1]) + gap, end + clear)
        straight[g] = ceil_grid(span, grid, parity)
        straight[g] -= float(route.reach[0])
        advance[g] = float(route.reach[0]) + straight[g]
    keep = chip.punch_diameter / 2 + rules.port_keepout
    r_hole = chip.punch_diameter / 2
    # the first junction's x (port centre on the grid) has the parity of generation 1
    trunk = ceil_grid(
        max(
            rules.port_keepout + max(width[0], width[min(1, n)]) + gap,
            2 * (routes[1].disc + rules.alignment_margin) + grid if n else 0.0,
        ),
        grid,
        (half[min(1, n)] - r_hole) % grid,
    )
    bed_route = routes[n]
    bed_pre = float(bed_route.reach.max())
    if np.any(bed_route.along > 0):
        bed_pre = bed_route.start + float(bed_route.along.max())
    # one S-half of the outermost bed channel: its fork and the straight to the body
    bend_len = lead_in[n] + radius[n] * theta[n] + (bed_pre - float(bed_route.reach[0]))
    fixed_x = 2 * (chip.margin + keep + r_hole + trunk + advance[1:n].sum())
    lead = ceil_grid(turn / 2 + width[n] + bed_gap, grid) if runs > 1 else 0.0
    target = max(bed.length, 2 * bend_len)
    straight_total = target - 2 * bend_len  # serpentine part incl. leads and half-turns
    run_length = (straight_total - 2 * lead - (runs - 1) * math.pi * turn / 2) / runs
    # the bed's x extent a whole number of grid steps, so the collecting side mirrors exactly
    bed_extent = ceil_grid(2 * bed_pre + run_length + 2 * lead, grid)
    run_length = bed_extent - 2 * bed_pre - 2 * lead
    span = (below[0] - 1) * pitch + lane + width[n] + slack
    if chamber is not None:
        # the last split's node lies at the bed channels' wall parity (``half[n]``): the
        # chamber's inlet wall, where those channels end, on the grid past their forks and a
        # straight run as long as the chamber solve's stubs (so its ports meet it as solved);
        # the chamber in place of the bed's straight run
        from chipflow.layout.chamber import STUB_WIDTHS as CHAMBER_STUB

        bed_pre = ceil_grid(bed_pre + CHAMBER_STUB * width[n], grid, (-half[n]) % grid)
        run_length = round(chamber.length / grid) * grid
        bed_extent = 2 * bed_pre + run_length
        span = max(span, drawn_width(chamber.width, grid))
    height = max(span, lane + 2 * keep) + 2 * chip.margin
    notes = []
    for g in range(1, n + 1):
        route = routes[g]
        if np.any(route.extra > 0):
            shown = ", ".join(f"{e * 1e6:.1f}" for e in route.extra)
            notes.append(
                f"generation {g} (a split into {route.count}): detours of {shown} um give "
                "every child the same path resistance, junction included"
            )
    return Plan(
        n,
        pitch,
        runs,
        run_length,
        lead,
        turn,
        width,
        radius,
        straight,
        theta,
        lead_in,
        advance,
        offset,
        trunk,
        bed_extent,
        bed_gap,
        fixed_x + bed_extent,
        height,
        2 * bend_len,
        tuple(splits),
        tuple(routes),
        bed_pre,
        tuple(notes),
    )


def merge_cuts(design: TreeDesign, plan: Plan, rules: LayoutRules) -> list[float | None]:
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
        if g > 0 and plan.routes:
            route = plan.routes[g]
            if np.any(route.along > 0) or np.ptp(route.reach) > 0:
                # every child's last straight run into the next junction
                end = plan.straight[g] + route.reach[0]
                last = np.where(route.along > 0, end - route.start - route.along, end - route.reach)
                run = float(last.min())
        clear = max(width[g], width[g + 1]) / 2 + rules.alignment_margin
        if plan.routes:  # past the disc of the next junction too
            clear = max(clear, plan.routes[g + 1].disc + rules.alignment_margin)
        if not clear + rules.grid < run:
            return [None] * n
        cuts.append(0.5 * (clear + run))
    return cuts


def choose_plan(design: TreeDesign, chip: Chip, rules: LayoutRules) -> tuple[Plan, tuple[str, ...]]:
    """The plan with the fewest serpentine runs that keeps every run within the design's
    ``max_straight_length`` and fits the chip, and the warnings about the fold.

    A bed folded further than ``max_straight_length`` asks, only to fit the chip's width, is
    said in a warning; so is a limit that cannot be met (a bed too short to fold, its half-turns
    and leads needing more length than it has, or more folds than the chip holds), and the
    bed is then drawn with the shortest runs that fit. Raises
    :class:`LayoutError` when no fold fits the chip.
    """
    limit = design.max_straight_length
    plans = []
    too_short = False  # the folding stopped because the bed ran out of length (not height)
    # a chamber in place of the bed is never folded
    tries = 1 if getattr(design, "chamber", None) is not None else MAX_RUNS
    for runs in range(1, tries + 1, 2):  # sizes estimated without the detours
        plan = plan_layout(design, chip, rules, runs, compensate=False)
        too_short = plan.run_length < 0
        if plan.height_needed > chip.height + 1e-12 or too_short:
            break
        plans.append(plan)
    fits = [p for p in plans if p.width_needed <= chip.width + 1e-12]
    bed_count = math.prod(design.splits)
    footprint = getattr(design, "footprint", None)
    fewest = fits[0].runs if fits else 0
    if footprint is not None and fits:  # the bed must lie in its footprint: the folds that do
        from chipflow.layout.footprint import footprint_error, plan_fits

        inside = [p for p in fits if plan_fits(p, footprint, rules.grid)]
        if not inside:
            raise footprint_error(design.name, bed_count, fits, footprint, rules.grid)
        fits = inside
    if not fits:
        first = plans[0] if plans else plan_layout(design, chip, rules, 1, compensate=False)
        raise LayoutError(
            f"design '{design.name}' with {bed_count} bed channels does not fit on the "
            f"{chip.width * 1e3:g} x {chip.height * 1e3:g} mm chip: drawn with straight bed "
            f"channels it needs at least {first.width_needed * 1e3:.1f} x "
            f"{first.height_needed * 1e3:.1f} mm (folding the bed into a serpentine did not "
            "help); use a larger chip, fewer generations, or shorter or narrower bed channels"
        )
    within = [p for p in plans if limit is None or p.run_length <= limit + 1e-12]
    ok = [p for p in fits if limit is None or p.run_length <= limit + 1e-12]
    # in order of preference: the fewest runs within the limit, else the shortest runs
    candidates = ok + [p for p in reversed(fits) if p not in ok]
    chosen = None
    on_chip = []  # the folds that fit the chip with their detours (not necessarily the footprint)
    for estimate in candidates:  # the detours of splits into 3 to 5 may need more room
        final = estimate
        if any(k > 2 for k in design.splits):
            final = plan_layout(design, chip, rules, estimate.runs)
        if final.width_needed <= chip.width + 1e-12 and final.height_needed <= chip.height + 1e-12:
            on_chip.append(final)
            if footprint is None or plan_fits(final, footprint, rules.grid):
                chosen = final
                break
    if chosen is None and on_chip:  # the detours push the bed out of its footprint
        from chipflow.layout.footprint import footprint_error

        on_chip.sort(key=lambda p: p.runs)
        raise footprint_error(design.name, bed_count, on_chip, footprint, rules.grid)
    if chosen is None:
        final = plan_layout(design, chip, rules, candidates[0].runs)
        raise LayoutError(
            f"design '{design.name}' with {bed_count} bed channels does not fit on the "
            f"{chip.width * 1e3:g} x {chip.height * 1e3:g} mm chip: with the detours that "
            f"even out its splits into {', '.join(str(k) for k in design.splits)} it needs "
            f"{final.width_needed * 1e3:.1f} x {final.height_needed * 1e3:.1f} mm; use a "
            "larger chip, or let chipflow order the splits (bed_channels instead of splits)"
        )
    if limit is not None and chosen.run_length > limit + 1e-12:
        # the limit cannot be met on this chip: the shortest runs that fit
        why = (
            f"the bed is too short to fold into runs of at most {limit * 1e3:g} mm (the "
            "half-turns and leads of a serpentine need more length)"
            if too_short and not within
            else f"runs of at most {limit * 1e3:g} mm need more folds than the chip's height "
            "or width allows"
        )
        return chosen, (
            f"bed channels drawn in {chosen.runs} run(s) of {chosen.run_length * 1e3:.3g} mm, "
            f"longer than max_straight_length: {why}",
        )
    asked = within[0].runs
    if footprint is not None and chosen.runs > max(asked, fewest):  # folded for the footprint
        note = (
            f"bed channels folded into {chosen.runs} runs of {chosen.run_length * 1e3:.3g} mm "
            f"so that the bed lies in its {footprint.key} of {footprint.along * 1e3:g} x "
            f"{footprint.across * 1e3:g} mm"
        )
        return dataclasses.replace(chosen, notes=(*chosen.notes, note)), ()
    if chosen.runs <= asked:
        return chosen, ()
    why = (
        f"max_straight_length {limit * 1e3:g} mm needs only {asked}"
        if limit is not None
        else "no max_straight_length is set"
    )
    return chosen, (
        f"bed channels folded into {chosen.runs} runs of {chosen.run_length * 1e3:.3g} mm to "
        f"fit the chip's width of {chip.width * 1e3:g} mm ({why}); the serpentine adds "
        f"{chosen.runs - 1} half-turns to every bed channel",
    )
