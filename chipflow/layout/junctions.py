"""Junction corrections: the equivalent length of each distinct junction, from a 2D solve.

Centrelines run junction centre to junction centre, so the 1D network charges the area of a
T or Y junction to the parent up to the centre and to each child from the centre. The flow in
the junction is not that of either straight channel: it turns, spreads and meets a far wall.
The difference is the junction's excess pressure drop, which in Stokes flow is proportional
to the flow, so it is one number per junction geometry: the equivalent length ``dL`` of the
parent channel that has the same excess resistance (the minor-loss or excess-pressure-drop
description of junctions in Stokes flow; Bruus 2008, ch. 4, hydraulic resistance of
compound geometries). It is usually negative here: the junction area offers the flow more
room than two straight channels meeting at a point.

How it is obtained: the junction as drawn (parent end, the two children leaving at their exit
angle with their straight lead and their bend back to the parent's direction, the disc that
blunts a Y, the deeper layer's overlap at a depth step), with straight stubs of a few channel
widths on each side, is solved in 2D with the depth-averaged Stokes
model with Brinkman friction of :mod:`chipflow.field` (a Hele-Shaw model with the lateral
viscous term, calibrated so that a straight channel has the exact duct resistance; REFERENCES
section "Second round"). The parent stub's end is held at a pressure, the children's ends at
zero (the tree is symmetric, so both children end at the same pressure). The 1D resistance of
the centrelines (parent stub plus the two children in parallel, each with its lead, arc and
stub; exact duct series) is subtracted and the rest divided by the parent's resistance per
unit length:

    dL = (R_2D - R_parent(L_s) - R_child(L_child) / 2) / R'_parent

The children's bends are part of the solve because in a Y they start at the junction itself;
a T's lead is cut to a few widths (further on the junction no longer matters). So the
correction holds the junction and its children's bends; the half-turns of a folded bed are
counted at their centreline length (their excess is about -1 % of the arc's length).

It does not depend on the viscosity or the flow (Stokes flow is linear). A tree repeats one
junction geometry per generation, so there are at most as many solves as generations, and each
is kept in the on-disk field cache (:mod:`chipflow.field.cache`): a later build of the same
design, in any process, solves none. The collecting tree's merges are the mirror images of the
splits with the flow reversed, which in Stokes flow has the same resistance (reversibility), so
they take the same correction.

References
----------
H. Bruus, *Theoretical Microfluidics*, Oxford University Press, 2008, ch. 4 (hydraulic
resistance, compound channels) and ch. 2 (reversibility of Stokes flow).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely

__all__ = ["Junction", "junction_excess_length", "STUB_WIDTHS", "ACROSS"]

#: Length of the straight stubs around a junction, in widths of the widest channel [-].
STUB_WIDTHS = 3.0
#: Triangle edges across a channel in the junction solve [-] (the field solver's setting).
ACROSS = 8.0


@dataclass(frozen=True)
class Junction:
    """One junction geometry of a drawn tree.

    Attributes
    ----------
    parent_width, parent_depth : float
        The channel ending at the junction [m].
    child_width, child_depth : float
        The two children leaving it [m].
    theta : float
        Exit angle of the children from the parent's axis [rad] (pi/2 for a T).
    disc : float
        Radius of the disc drawn at the junction centre [m] (0 for a T).
    overlap : float
        How far the deeper layer covers the shallower channel past the junction centre [m]
        (0 when both have the same depth).
    lead : float
        Straight run of each child before its bend [m] (as drawn, at most a few widths: the
        junction's influence has died out further on).
    radius : float
        Centreline radius of the child's bend back to the parent's direction [m] (0: the
        children run straight on).
    """

    parent_width: float
    parent_depth: float
    child_width: float
    child_depth: float
    theta: float
    disc: float = 0.0
    overlap: float = 0.0
    lead: float = 0.0
    radius: float = 0.0

    def key(self) -> tuple[float, ...]:
        """The geometry rounded to 1 pm and 1e-12 rad, for caching."""
        values = (
            self.parent_width,
            self.parent_depth,
            self.child_width,
            self.child_depth,
            self.theta,
            self.disc,
            self.overlap,
            self.lead,
            self.radius,
        )
        return tuple(round(v, 12) for v in values)


def _stub(start: np.ndarray, heading: float, length: float, width: float):
    t = np.array([math.cos(heading), math.sin(heading)])
    n = np.array([-t[1], t[0]])
    end = start + length * t
    ring = [start + n * width / 2, end + n * width / 2, end - n * width / 2, start - n * width / 2]
    return shapely.Polygon(ring), shapely.LineString([end + n * width / 2, end - n * width / 2])


def _child_trace(j: Junction, side: float, stub: float):
    from chipflow.layout.trace import trace

    pieces = [("L", j.lead)]
    if j.radius > 0:
        pieces.append(("A", j.radius, -side * j.theta))
    pieces.append(("L", stub))
    return trace(side * j.theta, pieces, max(j.radius, j.child_width) * 1e-4)


def junction_regions(j: Junction, stub: float):
    """The junction as drawn, with a straight parent stub of ``stub`` [m] and the children
    (their lead, their bend back to the parent's direction, then ``stub``): field regions and
    ports (parent ``"in"`` at 1 Pa, children ``"up"``/``"down"`` at 0)."""
    from chipflow.field import FieldPort, FieldRegion
    from chipflow.layout.trace import offset_ring

    parent = shapely.box(-stub, -j.parent_width / 2, 0.0, j.parent_width / 2)
    p_end = shapely.LineString([(-stub, j.parent_width / 2), (-stub, -j.parent_width / 2)])
    children, ends = [], []
    for side in (1.0, -1.0):
        path = _child_trace(j, side, stub)
        ring = offset_ring(path, j.child_width)
        m = path.xy.shape[0]
        children.append(shapely.Polygon(ring))
        ends.append(shapely.LineString([ring[m - 1], ring[m]]))
    child_poly = shapely.union_all(children)
    deep = max(j.parent_depth, j.child_depth)
    regions = [FieldRegion(parent, j.parent_depth), FieldRegion(child_poly, j.child_depth)]
    if j.disc > 0:
        disc = shapely.Point(0.0, 0.0).buffer(j.disc, quad_segs=16)
        regions.append(FieldRegion(disc, deep))
    if j.overlap > 0 and not math.isclose(j.parent_depth, j.child_depth, rel_tol=1e-9):
        shallow = parent if j.parent_depth < j.child_depth else child_poly
        reach = shapely.Point(0.0, 0.0).buffer(j.overlap, quad_segs=16)
        regions.append(FieldRegion(shapely.intersection(shallow, reach), deep))
    ports = [
        FieldPort("in", p_end, 1.0),
        FieldPort("up", ends[0], 0.0),
        FieldPort("down", ends[1], 0.0),
    ]
    return regions, ports


def junction_excess_length(j: Junction) -> float:
    """Equivalent length [m] of the parent channel that the junction ``j`` adds (negative
    when the junction conducts better than the two straight channels meeting at a point);
    NaN when the junction cannot be meshed or solved in 2D."""
    from chipflow.field.cache import cached

    settings = {"across": ACROSS, "stub_widths": STUB_WIDTHS}
    key = j.key()
    return float(cached("junction", key, lambda: {"excess": _excess(key)}, settings)["excess"])


def _excess(key: tuple) -> float:
    from chipflow.errors import FieldError
    from chipflow.field import solve_field
    from chipflow.physics.duct import resistance

    j = Junction(*key)
    mu = 1.0
    stub = STUB_WIDTHS * max(j.parent_width, j.child_width, 2 * j.disc)
    regions, ports = junction_regions(j, stub)
    try:
        sol = solve_field(regions, ports, mu, across=ACROSS)
    except FieldError:
        return math.nan  # the caller keeps the plain lengths and says so
    r_2d = 1.0 / sol.port_flows["in"]
    r_p = float(resistance(j.parent_width, j.parent_depth, 1.0, mu))
    r_c = float(resistance(j.child_width, j.child_depth, 1.0, mu))
    child = _child_trace(j, 1.0, stub).length  # its centreline: lead, arc, stub
    return (r_2d - r_p * stub - r_c * child / 2) / r_p
