"""The plan of a drawing: every dimension (pitch, bends, straights, serpentine) decided from
the sized design before any geometry is built."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from chipflow.design.model import TreeDesign
from chipflow.errors import LayoutError
from chipflow.layout.rules import Chip, LayoutRules

__all__ = ["Plan", "plan_layout", "merge_cuts", "choose_plan", "fork", "ceil_grid", "MAX_RUNS"]

MAX_RUNS = 401  # serpentine runs tried before giving up


def fork(a: float, radius: float) -> tuple[float, float]:
    """Exit angle [rad] and straight lead [m] of a child offset sideways by ``a``."""
    if a >= radius:
        return math.pi / 2, a - radius
    return math.acos(1 - a / radius), 0.0


def ceil_grid(value: float, grid: float) -> float:
    return math.ceil(value / grid - 1e-9) * grid


# -- the plan: every dimension of the drawing, decided before any geometry is built ---------
@dataclass(frozen=True)
class Plan:
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


def plan_layout(design: TreeDesign, chip: Chip, rules: LayoutRules, runs: int) -> Plan:
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
    radius = np.array([ceil_grid(rules.bend_radius * w, grid) for w in width])
    turn = ceil_grid(max(2 * radius[n], width[n] + gap), 2 * grid)
    lane = (runs - 1) * turn
    need = [(width[g] + gap) / 2 ** (n - g) for g in range(1, n + 1)]
    pitch = ceil_grid(max(max(need), lane + width[n] + gap), 2 * grid)
    theta = np.zeros(n + 1)
    lead_in = np.zeros(n + 1)
    straight = np.zeros(n + 1)
    advance = np.zeros(n + 1)
    for g in range(1, n + 1):
        a = 2 ** (n - g - 1) * pitch
        theta[g], lead_in[g] = fork(a, radius[g])
        nxt = width[g + 1] if g < n else 0.0
        if g < n:  # straight run after the bend; it rounds the advance up to the grid
            reach = radius[g] * math.sin(theta[g])
            straight[g] = ceil_grid(reach + max(width[g], nxt) + gap, grid) - reach
        advance[g] = radius[g] * math.sin(theta[g]) + straight[g]
    keep = chip.punch_diameter / 2 + rules.port_keepout
    trunk = ceil_grid(rules.port_keepout + max(width[0], width[min(1, n)]) + gap, grid)
    bend_len = lead_in[n] + radius[n] * theta[n]  # one S-half of a bed channel
    fixed_x = 2 * (chip.margin + keep + chip.punch_diameter / 2 + trunk + advance[1:n].sum())
    fixed_x += 2 * radius[n] * math.sin(theta[n])
    lead = ceil_grid(turn / 2 + width[n] + gap, grid) if runs > 1 else 0.0
    target = max(bed.length, 2 * bend_len)
    straight_total = target - 2 * bend_len  # serpentine part incl. leads and half-turns
    run_length = (straight_total - 2 * lead - (runs - 1) * math.pi * turn / 2) / runs
    extent_x = run_length + 2 * lead
    span = (2**n - 1) * pitch + lane + width[n]
    height = max(span, lane + 2 * keep) + 2 * chip.margin
    return Plan(
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


def choose_plan(design: TreeDesign, chip: Chip, rules: LayoutRules) -> Plan:
    first = plan_layout(design, chip, rules, 1)
    for runs in range(1, MAX_RUNS + 1, 2):
        plan = first if runs == 1 else plan_layout(design, chip, rules, runs)
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
