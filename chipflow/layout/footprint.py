"""Footprints: the rectangle a bed must lie in, and the culture regions' outlines.

A design's ``[bed] footprint`` (or a region's) asks that the bed, folds included, lies inside
a rectangle of a given size along the flow (x) and across it (y). The drawing meets it by its
choice of fold (:func:`chipflow.layout.plan.choose_plan`): a bed folded into more runs is
shorter along the flow and wider across it, so chipflow takes the fewest runs that fit the
footprint (and the chip, and ``max_straight_length``). Where no fold fits, the build stops
and names the smallest footprint it could reach.

The outline of each culture region (the asked footprint placed around its bed, or the bed's
own extent where none was asked for) is drawn on a layer of its own, ``CULTURE_REGION``, not
a mask level. After drawing, every bed channel's outline is checked to lie inside its region's
outline.
"""

from __future__ import annotations

import math

import numpy as np
import shapely

from chipflow.errors import LayoutError
from chipflow.layout.model import CultureRegion, Layout
from chipflow.layout.plan import Plan, half_offset
from chipflow.layout.sketch import Sketch
from chipflow.layout.trace import offset_ring

__all__ = [
    "plan_bed_box",
    "plan_fits",
    "footprint_error",
    "sketch_box",
    "culture_region",
    "check_culture_regions",
    "bed_extent",
]


def plan_bed_box(plan: Plan, grid: float) -> tuple[float, float]:
    """Size of the bed of ``plan`` along and across the flow [m], an upper bound.

    Along: from the last split's node to the first merge's, plus a bed channel's width (its
    flat ends at the nodes). Across: the bed channels' lanes, the serpentine's rise of the
    highest one, a bed channel's width, and the half grid steps (``grid`` [m]) by which lanes
    may differ from a uniform pitch (see :class:`~chipflow.layout.plan.Plan`).
    """
    n = plan.n
    half = np.array([half_offset(float(w), grid) for w in plan.width])
    slack = 2 * float(np.abs(half[1:] - half[:-1]).sum())
    count = math.prod(plan.splits) if plan.splits else 1
    lane = (plan.runs - 1) * plan.turn
    along = plan.bed_extent + float(plan.width[n])
    across = (count - 1) * plan.pitch + lane + float(plan.width[n]) + slack
    return along, across


def plan_fits(plan: Plan, footprint, grid: float) -> bool:
    """Whether the bed of ``plan`` fits ``footprint`` (:class:`~chipflow.spec.tree.Footprint`)
    on a mask of ``grid`` [m]."""
    along, across = plan_bed_box(plan, grid)
    return along <= footprint.along + 1e-12 and across <= footprint.across + 1e-12


def footprint_error(
    name: str, bed_count: int, plans: list[Plan], footprint, grid: float
) -> LayoutError:
    """The error for a footprint no fold of the bed fits: the smallest footprint reached.

    ``plans`` are the folds tried (fewest runs first), on a mask of ``grid`` [m]."""
    boxes = [(p, *plan_bed_box(p, grid)) for p in plans]
    best = min(boxes, key=lambda b: max(b[1] / footprint.along, b[2] / footprint.across))
    straight = boxes[0]
    mm = 1e3
    tried = (
        f"; straight it needs {straight[1] * mm:.1f} x {straight[2] * mm:.1f} mm"
        if best[0] is not straight[0]
        else ""
    )
    return LayoutError(
        f"design '{name}': the bed of {bed_count} channels does not fit its {footprint.key} "
        f"of {footprint.along * mm:g} x {footprint.across * mm:g} mm (along x across the flow): "
        f"the smallest it reaches is {best[1] * mm:.1f} x {best[2] * mm:.1f} mm, folded in "
        f"{best[0].runs} run(s){tried}; enlarge the {footprint.key}, or shorten the bed "
        "(residence_time or length), narrow its gap, or use fewer bed channels"
    )


def sketch_box(sketch: Sketch, roles: tuple[str, ...] = ("bed",), region: str | None = None):
    """Bounding box ``(x0, y0, x1, y1)`` [m] of the outlines of the sketch's channels of
    ``roles`` (of ``region`` when given), from their templates (vectorised per template)."""
    lo = np.array([np.inf, np.inf])
    hi = -lo
    for g in sketch.groups:  # a handful of groups per level
        if g.role not in roles or (region is not None and g.region != region):
            continue
        (a, b), (c, d) = g.matrix
        for v in np.unique(g.variant):  # the group's templates
            ring = offset_ring(g.templates[int(v)], g.width)
            start = g.start[g.variant == v]
            corners = np.array(
                [[ring[:, 0].min(), ring[:, 1].min()], [ring[:, 0].max(), ring[:, 1].max()]]
            )
            pts = corners[None, :, :] + start[:, None, :]  # (members, 2, 2)
            x = a * pts[..., 0] + b * pts[..., 1] + g.shift[0]
            y = c * pts[..., 0] + d * pts[..., 1] + g.shift[1]
            lo = np.minimum(lo, [x.min(), y.min()])
            hi = np.maximum(hi, [x.max(), y.max()])
    return float(lo[0]), float(lo[1]), float(hi[0]), float(hi[1])


def culture_region(name: str, box, footprint, grid: float) -> CultureRegion:
    """The outline of a culture region around its bed's ``box`` [m]: the ``footprint``
    (:class:`~chipflow.spec.tree.Footprint`, rounded to the grid) centred on the bed, or the
    bed's own extent (rounded out to the grid) when ``footprint`` is None."""
    x0, y0, x1, y1 = box
    extent = (x1 - x0, y1 - y0)
    if footprint is None:
        gx0, gy0 = (math.floor(v / grid + 1e-9) * grid for v in (x0, y0))
        gx1, gy1 = (math.ceil(v / grid - 1e-9) * grid for v in (x1, y1))
        return CultureRegion(
            name, shapely.box(gx0, gy0, gx1, gy1), (gx1 - gx0, gy1 - gy0), extent, False
        )
    sides = []
    for lo, hi, size in ((x0, x1, footprint.along), (y0, y1, footprint.across)):
        size = max(round(size / grid), 1) * grid
        start = round(((lo + hi) / 2 - size / 2) / grid) * grid
        if start > lo + 1e-12:
            start = math.floor(lo / grid + 1e-9) * grid
        if start + size < hi - 1e-12:
            start = math.ceil((hi - size) / grid - 1e-9) * grid
        sides.append((start, size))
    (sx, ax), (sy, ay) = sides
    return CultureRegion(name, shapely.box(sx, sy, sx + ax, sy + ay), (ax, ay), extent, True)


def check_culture_regions(layout: Layout) -> None:
    """Every bed channel's outline lies inside its culture region's outline, and every
    outline on the chip.

    Raises
    ------
    LayoutError
        A bed channel outside its region (a drawing fault), or an outline that the chip
        cannot hold (a footprint larger than the chip).
    """
    ch = layout.channels
    chip = layout.outline
    region = ch.region if ch.region is not None else np.full(ch.width.size, "", dtype=object)
    for cr in layout.culture_regions:  # a handful of regions
        if not chip.buffer(1e-12).contains(cr.outline):
            bx = chip.bounds
            raise LayoutError(
                f"the {'footprint' if cr.asked else 'bed'} of "
                f"{('region ' + repr(cr.name)) if cr.name else 'the bed'} "
                f"({cr.footprint[0] * 1e3:g} x {cr.footprint[1] * 1e3:g} mm) does not fit on the "
                f"{(bx[2] - bx[0]) * 1e3:g} x {(bx[3] - bx[1]) * 1e3:g} mm chip; give a larger "
                "[chip] or a smaller footprint"
            )
        beds = np.flatnonzero((ch.role == "bed") & (region == cr.name))
        if beds.size == 0 or ch.outline is None:
            continue
        bounds = shapely.bounds(ch.outline[beds])
        x0, y0, x1, y1 = cr.outline.bounds
        tol = layout.grid * 1e-3
        inside = (
            (bounds[:, 0] >= x0 - tol)
            & (bounds[:, 1] >= y0 - tol)
            & (bounds[:, 2] <= x1 + tol)
            & (bounds[:, 3] <= y1 + tol)
        )
        if not inside.all():
            k = int(np.flatnonzero(~inside)[0])
            raise LayoutError(
                f"bed channel {int(beds[k])} of "
                f"{('region ' + repr(cr.name)) if cr.name else 'the bed'} reaches outside its "
                f"culture region's outline near ({bounds[k, 0] * 1e3:.3f}, "
                f"{bounds[k, 1] * 1e3:.3f}) mm (a drawing fault)"
            )


def bed_extent(layout: Layout, region: str = "") -> tuple[float, float]:
    """Size of the drawn bed of ``region`` ("" for a design of one bed) along the flow (x)
    and across it (y) [m]: the bounding box of its bed channels' outlines, folds included
    ((0, 0) when nothing is drawn)."""
    ch = layout.channels
    mine = ch.role == "bed"
    if ch.region is not None:
        mine &= ch.region == region
    elif region:
        mine &= False
    if ch.outline is None or not mine.any():
        return 0.0, 0.0
    b = shapely.bounds(ch.outline[mine])
    return float(b[:, 2].max() - b[:, 0].min()), float(b[:, 3].max() - b[:, 1].min())
