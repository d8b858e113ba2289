"""Branching rules and fabrication-aware inverse sizing of a mirrored bifurcating tree.

Rules (``[tree] rule``), each giving width, depth, count and flow per generation ``g = 0..n``
(the bed is generation ``n``; every channel of generation ``g`` carries ``Q / N_g``, where
``N_g`` is the product of the splits of the generations before it, ``2**g`` for a bifurcating
tree):

``equal-shear``
    Every generation has the same wall shear as the trunk (the trunk given by ``trunk_width``,
    or sized to the shear target). For round tubes this is Murray's law, ``d**3`` proportional
    to the flow (Murray, PNAS 12 (1926) 207), for any number of children: a parent splitting
    into ``k`` alike children has ``d_parent**3 = k d_child**3``. For rectangular channels it is the
    generalisation to constant-depth channels (Emerson et al., Lab Chip 6 (2006) 447), solved
    here with the exact duct series rather than the parallel-plate formula.
``shear-target``
    Each generation is sized to its own target (one value or one per generation).
``area-growth``
    The total cross-section grows by ``growth`` per generation, so the mean velocity falls by
    exactly that factor per generation (continuity), as in a vascular bed; each channel of
    generation ``g`` has ``1 / N_g`` of it.
``table``
    Widths and depths given per generation; only checked against the fabrication limits.

Inverse sizing: for each generation and each allowed mould depth the width that gives the
target shear is found by root finding (Illinois false position) on the exact duct physics
of :mod:`chipflow.physics.duct`. A width is *exact* when it lies inside the drawable widths of
that depth (:meth:`~chipflow.spec.tree.Fabrication.width_limits`); otherwise the nearest
drawable width is a *compromise* when its shear still lies inside the target window, and
*infeasible* when not.

Choice rule for the depths (documented in the report): among all subsets of the allowed depths
that give every generation an exact or compromise width,

0. when the bed can be graded against the culture and transport checks (``bed_grade``: the
   hypoxic share and the lowest floor oxygen of one bed channel marched by the build's 1D
   transport, :func:`chipflow.checks.suite.bed_grader`), the fewest of those checks that
   fail, then that warn;
1. the fewest generations with a compromise,
2. then the fewest distinct depths (each depth is one more mask and SU-8 layer),
3. then, per generation (trunk first), the shallowest depth of the subset that reaches the best
   status: at a fixed wall shear a shallower channel is wider (``w ~ 1/h**2``), which gives more
   floor area for cells and a longer residence time.

Widths are then snapped to the mask grid (kept inside the drawable range) and the shear after
snapping is reported; a miss larger than ``targets.tolerance`` is a warning. A generation that
no depth can serve raises :class:`~chipflow.errors.DesignError` naming the generation, the
binding constraint, the closest achievable shear and what to change.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from chipflow.design.model import Level, TreeDesign
from chipflow.errors import ArgumentError, DesignError
from chipflow.physics import duct
from chipflow.physics.fluid import Fluid
from chipflow.spec.tree import Fabrication, TreeSpec
from chipflow.units import format_quantity

__all__ = [
    "wall_shear",
    "width_for_shear",
    "size_channel",
    "size_tree",
    "Candidate",
    "candidates",
]

_EXACT, _COMPROMISE, _INFEASIBLE = 0, 1, 2
_RATIO_SPAN = 1e4  # widths searched from depth/1e4 to depth*1e4


def wall_shear(kind, width, depth, flow, viscosity, round=False):
    """Wall shear stress of a given kind [Pa].

    Parameters
    ----------
    kind : {"floor", "mean", "max"}
        Centre of the floor (the wall of width ``w``), perimeter mean, or peak.
    width, depth : array_like
        [m] (a round tube: both its diameter).
    flow : array_like
        Flow per channel [m^3/s].
    viscosity : float
        [Pa s].

    Examples
    --------
    Parallel-plate limit: a very wide channel gives ``6 mu Q / (w h^2)``.

    >>> round(wall_shear("floor", 1.0, 1e-3, 1e-6, 1e-3) / (6e-9 / 1e-6), 3)
    1.0
    """
    if kind == "floor":
        return duct.wall_shear_floor(width, depth, flow, viscosity, round)
    if kind == "max":
        return duct.wall_shear_max(width, depth, flow, viscosity, round)
    if kind == "mean":
        r = duct.resistance(width, depth, 1.0, viscosity, round)
        area = duct.cross_section_area(width, depth, round)
        return np.abs(flow) * r * area / duct.wetted_perimeter(width, depth, round)
    raise ArgumentError(f"unknown shear kind {kind!r} (valid: floor, mean, max)")


def width_for_shear(
    flow: float, depth: float, shear: float, viscosity: float, kind: str = "floor"
) -> float:
    """Width [m] of a channel of ``depth`` [m] whose wall shear of ``kind`` is ``shear`` [Pa].

    Root finding on the exact duct series (any aspect ratio, tall or wide). Returns ``nan``
    when the width would lie outside ``depth/1e4 .. depth*1e4``.

    Parameters
    ----------
    flow : float
        Flow per channel [m^3/s].
    depth : float
        [m].
    shear : float
        Target [Pa].
    viscosity : float
        [Pa s].
    kind : {"floor", "mean", "max"}

    Examples
    --------
    >>> w = width_for_shear(1e-10, 50e-6, 1.0, 1e-3)
    >>> round(float(wall_shear("floor", w, 50e-6, 1e-10, 1e-3)), 9)
    1.0
    """

    def miss(log_w: float) -> float:
        return math.log(float(wall_shear(kind, math.exp(log_w), depth, flow, viscosity)) / shear)

    lo, hi = math.log(depth / _RATIO_SPAN), math.log(depth * _RATIO_SPAN)
    f_lo, f_hi = miss(lo), miss(hi)
    if f_lo * f_hi > 0:
        return float("nan")
    return math.exp(_bracketed_root(miss, lo, hi, f_lo, f_hi))


def _bracketed_root(f, a: float, b: float, fa: float, fb: float, tol: float = 1e-14) -> float:
    """A root of ``f`` between ``a`` and ``b`` (``fa``, ``fb`` of opposite signs), to ``tol``.

    The Illinois variant of the false-position method: superlinear like the secant method and
    the bracket is kept (Dowell and Jarratt, BIT 11 (1971) 168-174); a few lines instead of
    importing scipy.optimize for one root per generation.

    >>> round(_bracketed_root(lambda x: x * x - 2.0, 0.0, 2.0, -2.0, 2.0), 12)
    1.414213562373
    """
    for _ in range(200):
        if fa == 0.0:
            return a
        if fb == 0.0 or abs(b - a) <= tol * max(1.0, abs(b)):
            return b
        c = b - fb * (b - a) / (fb - fa)
        if not (min(a, b) < c < max(a, b)):
            c = 0.5 * (a + b)  # rounding pushed the secant out of the bracket
        fc = f(c)
        if fc * fb < 0:
            a, fa = b, fb  # the root lies between b and c
        else:
            fa *= 0.5  # Illinois: halve the stale end's value
        b, fb = c, fc
    return b


def size_channel(
    flow: float,
    depth: float,
    shear: float,
    fluid: Fluid,
    kind: str = "floor",
    grid: float | None = None,
) -> dict[str, float]:
    """One channel sized for a wall shear target, with its resulting flow state.

    Parameters
    ----------
    flow : float
        Flow rate [m^3/s].
    depth : float
        Depth [m].
    shear : float
        Target wall shear [Pa] of ``kind`` ("floor", "mean" or "max").
    fluid : Fluid
    grid : float, optional
        Mask grid [m] the width is rounded to (the shears are those of the rounded width).

    Returns
    -------
    dict
        SI values: ``width``, ``depth``, ``flow``, ``target_shear``, ``wall_shear_floor``,
        ``wall_shear_mean``, ``wall_shear_max``, ``mean_velocity``, ``max_velocity``,
        ``reynolds``, ``aspect_ratio`` (width/depth), ``viscosity``, ``density``.

    Raises
    ------
    DesignError
        When no width between depth/1e4 and depth*1e4 gives the target.

    Examples
    --------
    >>> from chipflow.physics.fluid import water
    >>> v = size_channel(2e-9 / 60, 50e-6, 0.75, water(310.15))
    >>> round(v["width"] * 1e6, 1), round(v["wall_shear_floor"], 6)
    (100.0, 0.75)
    """
    width = width_for_shear(flow, depth, shear, fluid.viscosity, kind)
    if math.isnan(width):
        raise DesignError(
            f"no channel {format_quantity(depth, 'um')} deep gives {kind} shear "
            f"{format_quantity(shear, 'Pa')} at {format_quantity(flow, 'uL/min')}: the width would "
            "be over 10000 times the depth or under 1/10000 of it; change the depth or the flow"
        )
    if grid is not None:
        width = max(round(width / grid), 1) * grid
    state = duct.flow_state(width, depth, 1.0, flow, fluid.viscosity, fluid.density)
    return {
        "width": float(width),
        "depth": float(depth),
        "flow": float(flow),
        "target_shear": float(shear),
        "wall_shear_floor": float(state.wall_shear_floor),
        "wall_shear_mean": float(state.wall_shear_mean),
        "wall_shear_max": float(state.wall_shear_max),
        "mean_velocity": float(state.mean_velocity),
        "max_velocity": float(state.max_velocity),
        "reynolds": float(state.reynolds),
        "aspect_ratio": float(width / depth),
        "viscosity": fluid.viscosity,
        "density": fluid.density,
    }


def _diameter_for_shear(flow: float, shear: float, viscosity: float) -> float:
    """Round tube: ``tau = 32 mu Q / (pi d^3)`` solved for ``d`` [m]."""
    return (32.0 * viscosity * flow / (math.pi * shear)) ** (1.0 / 3.0)


@dataclass(frozen=True)
class Candidate:
    """One generation at one depth.

    Attributes
    ----------
    depth : float
        [m].
    ideal : float
        Width that meets the requirement exactly [m] (nan if none exists).
    width : float
        Drawable width used (the ideal one, or the nearest drawable) [m].
    status : int
        0 exact, 1 compromise inside the window, 2 infeasible.
    binding : str
        The limit that binds ("" when exact).
    shear : float
        Shear reached with ``width`` [Pa] (nan for area requirements).
    """

    depth: float
    ideal: float
    width: float
    status: int
    binding: str
    shear: float


def candidates(
    flow: float,
    depth: float,
    fab: Fabrication,
    viscosity: float,
    kind: str,
    shear: float | None = None,
    area: float | None = None,
    window: tuple[float | None, float | None] = (None, None),
) -> Candidate:
    """Size one generation at one depth for a shear target [Pa] or a cross-section [m^2].

    Parameters
    ----------
    flow : float
        Flow per channel [m^3/s].
    depth : float
        [m].
    fab : Fabrication
    viscosity : float
        [Pa s].
    kind : str
        Shear kind of the target.
    shear, area : float, optional
        Exactly one requirement: wall shear [Pa] or cross-section per channel [m^2].
    window : tuple
        Tolerated shear window ``(min, max)`` [Pa]; enables compromises.
    """
    lo, lo_rule, hi, hi_rule = fab.width_limits(depth)
    ideal = (
        area / depth if area is not None else width_for_shear(flow, depth, shear, viscosity, kind)
    )
    if lo > hi:
        binding = f"{lo_rule} and {hi_rule} leave no width at depth " + format_quantity(depth, "um")
        return Candidate(depth, ideal, float("nan"), _INFEASIBLE, binding, float("nan"))
    if math.isnan(ideal):  # beyond the search span: far too wide or far too narrow
        too_wide = shear < _shear(kind, hi, depth, flow, viscosity)
        ideal = depth * _RATIO_SPAN if too_wide else depth / _RATIO_SPAN
    if lo <= ideal <= hi:
        got = _shear(kind, ideal, depth, flow, viscosity)
        return Candidate(depth, ideal, ideal, _EXACT, "", got)
    width, binding = (lo, lo_rule) if ideal < lo else (hi, hi_rule)
    got = _shear(kind, width, depth, flow, viscosity)
    low, high = window
    inside = area is None and (low is not None or high is not None)
    inside = inside and (low is None or got >= low) and (high is None or got <= high)
    return Candidate(depth, ideal, width, _COMPROMISE if inside else _INFEASIBLE, binding, got)


def _shear(kind, width, depth, flow, viscosity) -> float:
    return float(wall_shear(kind, width, depth, flow, viscosity))


def _advice(binding: str, role: str, generation: int = 0) -> str:
    if "roof-sag" in binding or "maximum width" in binding:
        more = "more generations before this one, " if generation > 0 else ""
        return (
            f"add a deeper mould level, lower the flow, {more}or allow wider channels "
            "(support posts against roof sag / a larger max_width)"
        )
    if "tall-wall" in binding or "minimum" in binding or "no width" in binding:
        return (
            "add a shallower mould level, raise the flow, use fewer generations (more flow "
            "per bed channel), or a finer mask (smaller min_feature / min_width)"
        )
    return "change the targets or the fabrication limits"


def _window_text(window) -> str:
    low, high = window
    if low is None and high is None:
        return "no window given"
    show = [format_quantity(v, "Pa") if v is not None else "-" for v in (low, high)]
    return f"window {show[0]} to {show[1]}"


def _fail(spec: TreeSpec, g: int, options: list[Candidate], need: str, window) -> DesignError:
    n = spec.generations
    role = "bed" if g == n else "distribution"
    drawable = [c for c in options if not math.isnan(c.width)]
    where = (
        f"{spec.source}: generation {g} ({role}, {spec.count(g)} channel{'s' * (g > 0)}, "
        f"{format_quantity(spec.flow / spec.count(g), 'uL/min')} each)"
    )
    if not drawable:
        binding = options[0].binding
        return DesignError(f"{where}: {binding}; {_advice(binding, role, g)}")

    def closeness(c: Candidate) -> float:
        if need.startswith("area"):
            return abs(math.log(c.width / c.ideal))
        return abs(math.log(c.shear / spec_target(spec, g)))

    best = min(drawable, key=closeness)
    unit = "um"
    text = (
        f"{where}: {need} needs width {format_quantity(best.ideal, unit)} at depth "
        f"{format_quantity(best.depth, unit)}, but the {best.binding} allows "
        f"{format_quantity(best.width, unit)}"
    )
    if not need.startswith("area"):
        text += (
            f"; closest achievable {spec.targets.kind} shear "
            f"{format_quantity(best.shear, 'Pa')} ({_window_text(window)})"
        )
    return DesignError(f"{text}. To meet it: {_advice(best.binding, role, g)}")


def spec_target(spec: TreeSpec, g: int) -> float:
    """Shear target of generation ``g`` for shear rules [Pa] (trunk value for equal-shear)."""
    mu, kind = spec.fluid.viscosity, spec.targets.kind
    if spec.rule == "equal-shear" and spec.trunk_width is not None:
        depth = spec.trunk_width if spec.shape == "round" else spec.trunk_depth
        return float(
            wall_shear(kind, spec.trunk_width, depth, spec.flow, mu, spec.shape == "round")
        )
    if spec.rule == "equal-shear":
        return spec.targets.target(0)
    return spec.targets.target(g)


#: Grades a bed candidate against the culture and transport checks: ``(depth, width) ->
#: (fails, warnings, reason)`` (see :func:`size_tree`).
BedGrade = Callable[[float, float], tuple[int, int, str]]


def _choose(
    table: list[list[Candidate]], bed_grade: BedGrade | None = None
) -> list[Candidate] | None:
    """Apply the choice rule to ``table[g][d]`` (see the module docstring); with
    ``bed_grade``, the bed's (last row's) failed and warned checks come first."""
    n_depths = len(table[0])
    bed = len(table) - 1

    def grade(g: int, c: Candidate) -> tuple[int, int]:
        if bed_grade is None or g != bed or c.status == _INFEASIBLE:
            return (0, 0)
        fails, warns, _ = bed_grade(c.depth, c.width)
        return (fails, warns)

    best_score, best = None, None
    for k in range(1, n_depths + 1):
        for subset in itertools.combinations(range(n_depths), k):
            picks = []
            for g, row in enumerate(table):
                usable = [row[d] for d in subset if row[d].status != _INFEASIBLE]
                if not usable:
                    break
                # best grade, then best status, then the shallowest depth of the subset
                picks.append(min(usable, key=lambda c, g=g: (grade(g, c), c.status, c.depth)))
            else:
                graded = [grade(g, c) for g, c in enumerate(picks)]
                fails, warns = sum(f for f, _ in graded), sum(w for _, w in graded)
                compromises = sum(c.status == _COMPROMISE for c in picks)
                score = (fails, warns, compromises, k, tuple(c.depth for c in picks))
                if best_score is None or score < best_score:
                    best_score, best = score, picks
    return best


def _depth_note(picks: list[Candidate], plain: list[Candidate], bed_grade: BedGrade | None) -> str:
    """Why the depths are what they are (for the sizing notes)."""
    um = [round(c.depth * 1e6, 6) for c in picks]
    groups: dict[float, list[int]] = {}
    for g, d in enumerate(um):
        groups.setdefault(d, []).append(g)
    bed = len(picks) - 1
    parts = []
    for d, gens in groups.items():
        names = ["bed" if g == bed else str(g) for g in gens]
        parts.append(f"{d:g} um for generation{'s' if len(gens) > 1 else ''} {', '.join(names)}")
    note = "depth choice: " + "; ".join(parts)
    if bed_grade is not None and plain is not None and plain[bed].depth != picks[bed].depth:
        _, _, reason = bed_grade(plain[bed].depth, plain[bed].width)
        note += (
            f". The bed is {picks[bed].depth * 1e6:g} um rather than "
            f"{plain[bed].depth * 1e6:g} um deep, as the fabrication-only rule would choose, "
            f"because at {plain[bed].depth * 1e6:g} um {reason}"
        )
    else:
        note += (
            ": after the fabrication limits, the fewest checks of the bed that fail or warn, "
            "then the fewest compromises, then the fewest depths (each is one more mask), "
            "then the shallowest"
        )
        if bed_grade is not None:
            fails, warns, reason = bed_grade(picks[bed].depth, picks[bed].width)
            if fails or warns:
                note += f"; even so, at {picks[bed].depth * 1e6:g} um {reason}"
    return note


def _snap(width: float, depth: float, fab: Fabrication) -> float:
    grid = fab.grid
    lo, _, hi, _ = fab.width_limits(depth)
    snapped = round(width / grid) * grid
    lo_g, hi_g = math.ceil(lo / grid - 1e-9) * grid, math.floor(hi / grid + 1e-9) * grid
    if lo_g <= hi_g:
        snapped = min(max(snapped, lo_g), hi_g)
    return float(snapped)


def _size_round(spec: TreeSpec, flows: np.ndarray) -> list[tuple[float, float, float]]:
    fab, mu = spec.fabrication, spec.fluid.viscosity
    out = []
    for g, q in enumerate(flows):
        target = spec_target(spec, g)
        d = _diameter_for_shear(q, target, mu)
        lo, hi = max(fab.min_width, fab.min_feature), fab.max_width
        if not lo <= d <= hi:
            rule = "minimum width" if d < lo else "maximum width"
            raise DesignError(
                f"{spec.source}: generation {g}: a round tube for {format_quantity(target, 'Pa')} "
                f"needs diameter {format_quantity(d, 'um')}, outside the {rule}; "
                f"{_advice(rule, 'distribution')}"
            )
        out.append((d, d, target, False))
    return out


def size_tree(
    spec: TreeSpec, *, snap: bool = True, bed_grade: BedGrade | None = None
) -> TreeDesign:
    """Size every generation of a tree design.

    Parameters
    ----------
    spec : TreeSpec
        From :func:`chipflow.spec.tree.load_tree_spec`.
    snap : bool
        Snap widths to the mask grid (default). ``False`` keeps the exact widths (for
        verification).
    bed_grade : callable, optional
        ``bed_grade(depth, width) -> (fails, warnings, reason)``: how many culture and
        transport checks the bed fails and warns at that depth and width [m], and why in one
        phrase. When given and several depths are allowed, the depth choice first minimises
        those (see the module docstring), and the sizing notes say why the depths were
        chosen. :func:`chipflow.checks.suite.bed_grader` makes one from the design's culture.

    Returns
    -------
    TreeDesign
        Levels inlet to outlet: distribution 0..n-1, bed n, collection n-1..0.

    Raises
    ------
    DesignError
        When a generation cannot be sized within the fabrication limits.
    """
    n, fab, mu = spec.generations, spec.fabrication, spec.fluid.viscosity
    kind, targets = spec.targets.kind, spec.targets
    counts = np.array([spec.count(g) for g in range(n + 1)])
    flows = spec.flow / counts
    warnings: list[str] = [spec.split_note] if spec.split_note else []
    windows = [targets.window(g, n) for g in range(n + 1)]
    round_tubes = spec.shape == "round"
    sized_targets: list[float | None] = [None] * (n + 1)

    if round_tubes:
        geometry = _size_round(spec, flows)
        sized_targets = [t for _, _, t, _ in geometry]
    elif spec.rule == "table":
        geometry = []
        for g in range(n + 1):
            w, h = spec.widths[g], spec.depths[g]
            lo, lo_rule, hi, hi_rule = fab.width_limits(h)
            if h not in fab.depths:
                raise DesignError(
                    f"{spec.source}: tree.depths[{g}]: depth "
                    f"{format_quantity(h, 'um')} is not one of fabrication.depths"
                )
            if not lo <= w <= hi:
                rule = lo_rule if w < lo else hi_rule
                bound = lo if w < lo else hi
                raise DesignError(
                    f"{spec.source}: tree.widths[{g}]: width {format_quantity(w, 'um')} at depth "
                    f"{format_quantity(h, 'um')} breaks the {rule} (limit "
                    f"{format_quantity(bound, 'um')}); drawable widths at this depth are "
                    f"{format_quantity(lo, 'um')} to {format_quantity(hi, 'um')}"
                )
            geometry.append((w, h, targets.target(g), False))
        sized_targets = [t for _, _, t, _ in geometry]
    else:
        geometry = _size_rectangular(spec, flows, windows, warnings, bed_grade)
        sized_targets = [t for _, _, t, _ in geometry]

    widths, depths = [], []
    for g, (w, h, target, compromised) in enumerate(geometry):
        if snap:
            w_snapped = _snap(w, h, fab)
            h = w_snapped if round_tubes else h
            if target is not None and not compromised:
                got = _shear(kind, w_snapped, h, flows[g], mu)
                miss = got / target - 1.0
                if abs(miss) > targets.tolerance:
                    grid, before, after = (
                        format_quantity(v, "um") for v in (fab.grid, w, w_snapped)
                    )
                    warnings.append(
                        f"generation {g}: snapping the width to the {grid} grid ({before} -> "
                        f"{after}) gives {kind} shear {format_quantity(got, 'Pa')}, "
                        f"{100 * miss:+.1f} % from the target {format_quantity(target, 'Pa')}"
                    )
            w = w_snapped
        widths.append(w)
        depths.append(w if round_tubes else h)

    bed_area = duct.cross_section_area(widths[n], depths[n], round_tubes)
    bed_length = spec.bed.length
    if bed_length is None:
        bed_length = spec.bed.residence_time * flows[n] / bed_area
    levels = []
    for g in range(n + 1):
        role = "bed" if g == n else "distribution"
        length = bed_length if g == n else spec.lengths[g]
        low, high = windows[g]
        levels.append(
            Level(
                g,
                role,
                int(counts[g]),
                float(widths[g]),
                float(depths[g]),
                float(length),
                float(flows[g]),
                round_tubes,
                sized_targets[g],
                low,
                high,
            )
        )
    levels += [
        Level(
            lv.generation,
            "collection",
            lv.count,
            lv.width,
            lv.depth,
            lv.length,
            lv.flow,
            lv.round,
            lv.shear_target,
            lv.shear_min,
            lv.shear_max,
        )
        for lv in reversed(levels[:n])
    ]
    return TreeDesign(
        name=spec.name,
        fluid=spec.fluid,
        total_flow=spec.flow,
        levels=tuple(levels),
        warnings=tuple(warnings),
        shear_kind=kind,
        max_straight_length=spec.bed.max_straight_length,
        bed_gap=spec.bed.gap,
        fabrication=fab,
        footprint=spec.bed.footprint,
        chamber=spec.bed.chamber,
        mesh=((spec.bed.cross_pitch, spec.bed.cross_width) if spec.bed.kind == "mesh" else None),
    )


def _size_rectangular(spec, flows, windows, warnings, bed_grade=None) -> list[tuple]:
    """Shear or area rules for rectangular channels: candidates, choice, compromises."""
    n, fab, mu, kind = spec.generations, spec.fabrication, spec.fluid.viscosity, spec.targets.kind
    depths = list(fab.depths)
    area0 = None
    if spec.rule == "area-growth":
        if spec.trunk_width is not None:
            area0 = spec.trunk_width * spec.trunk_depth
        else:
            trunk = [
                candidates(
                    flows[0], h, fab, mu, kind, shear=spec.targets.target(0), window=windows[0]
                )
                for h in depths
            ]
            pick = _choose([trunk])
            if pick is None:
                raise _fail(
                    spec,
                    0,
                    trunk,
                    f"{kind} shear {format_quantity(spec.targets.target(0), 'Pa')}",
                    windows[0],
                )
            area0 = pick[0].width * pick[0].depth
    table, needs = [], []
    for g in range(n + 1):
        allowed = depths
        if g == 0 and spec.trunk_depth is not None:
            allowed = [spec.trunk_depth]
        if area0 is not None:
            if set(spec.splits) <= {2}:
                area = area0 * (spec.growth / 2.0) ** g
            else:
                area = area0 * spec.growth**g / spec.count(g)
            need = f"area {format_quantity(area, 'um^2')}"
            row = [candidates(flows[g], h, fab, mu, kind, area=area) for h in allowed]
        else:
            target = spec_target(spec, g)
            need = f"{kind} shear {format_quantity(target, 'Pa')}"
            row = [
                candidates(flows[g], h, fab, mu, kind, shear=target, window=windows[g])
                for h in allowed
            ]
        # pad to the full depth list so every row has one column per depth
        row = [
            next((c for c in row if c.depth == h), None)
            or Candidate(
                h, float("nan"), float("nan"), _INFEASIBLE, "trunk depth is fixed", float("nan")
            )
            for h in depths
        ]
        if all(c.status == _INFEASIBLE for c in row):
            raise _fail(
                spec, g, [c for c in row if c.binding != "trunk depth is fixed"], need, windows[g]
            )
        table.append(row)
        needs.append(need)
    picks = _choose(table, bed_grade if area0 is None else None)
    if len(depths) > 1 and area0 is None:
        warnings.append(_depth_note(picks, _choose(table), bed_grade))
    out = []
    for g, c in enumerate(picks):
        target = None if area0 is not None else spec_target(spec, g)
        if c.status == _COMPROMISE:
            warnings.append(
                f"generation {g}: {needs[g]} needs width {format_quantity(c.ideal, 'um')} at "
                f"depth {format_quantity(c.depth, 'um')}, beyond the {c.binding}; drawn "
                f"{format_quantity(c.width, 'um')} wide, giving {kind} shear "
                f"{format_quantity(c.shear, 'Pa')} ({_window_text(windows[g])})"
            )
        out.append((c.width, c.depth, target, c.status == _COMPROMISE))
    return out
