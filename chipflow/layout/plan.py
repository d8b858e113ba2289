"""The plan of a drawing: every dimension (pitch, bends, straights, serpentine) decided from
the sized design before any geometry is built."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from chipflow.design.model import TreeDesign
from chipflow.errors import LayoutError
from chipflow.layout.rules import Chip, LayoutRules

__all__ = [
    "Plan",
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


# -- the plan: every dimension of the drawing, decided before any geometry is built ---------
@dataclass(frozen=True)
class Plan:
    """Every dimension of a drawing [m], per generation 0..n (the bed is generation n).

    Grid-exactness: a straight run of width w along x lies at a y whose offset from the grid
    is :func:`half_offset` (w), so both its walls lie on the grid; the same for the x of a
    run along y. The sideways offset ``offset[g]`` of a child from its parent's axis is the
    uniform-pitch offset plus half a grid step where parent and child differ in that parity;
    the advances of the generations and the bed's length along x are chosen likewise.
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


def plan_layout(design: TreeDesign, chip: Chip, rules: LayoutRules, runs: int) -> Plan:
    """The plan of ``design`` with its bed folded into ``runs`` (odd) serpentine runs."""
    n = design.generations
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
    half = np.array([half_offset(w, grid) for w in width])
    # half a grid step more sideways where a child's wall parity differs from its parent's
    delta = np.r_[0.0, np.abs(half[1:] - half[:-1])]
    radius = np.array([ceil_grid(rules.bend_radius * w, grid) for w in width])
    turn = ceil_grid(max(2 * radius[n], width[n] + bed_gap), 2 * grid)
    lane = (runs - 1) * turn
    slack = 2 * delta.sum()  # lanes move by at most this from a uniform pitch
    need = [(width[g] + gap) / 2 ** (n - g) for g in range(1, n)]
    need.append(lane + width[n] + bed_gap)
    pitch = ceil_grid(max(need) + slack, 2 * grid)
    theta = np.zeros(n + 1)
    lead_in = np.zeros(n + 1)
    straight = np.zeros(n + 1)
    advance = np.zeros(n + 1)
    offset = np.zeros(n + 1)
    for g in range(1, n + 1):
        offset[g] = 2 ** (n - g - 1) * pitch + delta[g]
        theta[g], lead_in[g] = fork(offset[g], radius[g])
        if g < n:  # straight run after the bend; it sets the advance on the grid
            reach = radius[g] * math.sin(theta[g])
            parity = (half[g + 1] - half[g]) % grid
            straight[g] = ceil_grid(reach + max(width[g], width[g + 1]) + gap, grid, parity)
            straight[g] -= reach
        advance[g] = radius[g] * math.sin(theta[g]) + straight[g]
    keep = chip.punch_diameter / 2 + rules.port_keepout
    r_hole = chip.punch_diameter / 2
    # the first junction's x (port centre on the grid) has the parity of generation 1
    trunk = ceil_grid(
        rules.port_keepout + max(width[0], width[min(1, n)]) + gap,
        grid,
        (half[min(1, n)] - r_hole) % grid,
    )
    bend_len = lead_in[n] + radius[n] * theta[n]  # one S-half of a bed channel
    fixed_x = 2 * (chip.margin + keep + r_hole + trunk + advance[1:n].sum())
    reach_n = radius[n] * math.sin(theta[n])
    lead = ceil_grid(turn / 2 + width[n] + bed_gap, grid) if runs > 1 else 0.0
    target = max(bed.length, 2 * bend_len)
    straight_total = target - 2 * bend_len  # serpentine part incl. leads and half-turns
    run_length = (straight_total - 2 * lead - (runs - 1) * math.pi * turn / 2) / runs
    # the bed's x extent a whole number of grid steps, so the collecting side mirrors exactly
    bed_extent = ceil_grid(2 * reach_n + run_length + 2 * lead, grid)
    run_length = bed_extent - 2 * reach_n - 2 * lead
    span = (2**n - 1) * pitch + lane + width[n] + slack
    height = max(span, lane + 2 * keep) + 2 * chip.margin
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
        clear = max(width[g], width[g + 1]) / 2 + rules.alignment_margin
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
    for runs in range(1, MAX_RUNS + 1, 2):
        plan = plan_layout(design, chip, rules, runs)
        too_short = plan.run_length < 0
        if plan.height_needed > chip.height + 1e-12 or too_short:
            break
        plans.append(plan)
    fits = [p for p in plans if p.width_needed <= chip.width + 1e-12]
    if not fits:
        first = plans[0] if plans else plan_layout(design, chip, rules, 1)
        raise LayoutError(
            f"design '{design.name}' with {2**first.n} bed channels does not fit on the "
            f"{chip.width * 1e3:g} x {chip.height * 1e3:g} mm chip: drawn with straight bed "
            f"channels it needs at least {first.width_needed * 1e3:.1f} x "
            f"{first.height_needed * 1e3:.1f} mm (folding the bed into a serpentine did not "
            "help); use a larger chip, fewer generations, or shorter or narrower bed channels"
        )
    within = [p for p in plans if limit is None or p.run_length <= limit + 1e-12]
    chosen = next((p for p in fits if limit is None or p.run_length <= limit + 1e-12), None)
    if chosen is None:  # the limit cannot be met on this chip: the shortest runs that fit
        chosen = fits[-1]
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
