"""Placing a sized tree on the chip: centrelines, channel outlines, mask layers, ports.

What the drawing looks like
---------------------------
Flow runs along +x. The inlet port sits on the left, the outlet port on the right. The trunk
(generation 0) leaves the inlet rim straight along +x to the first junction. At a binary
junction the parent ends and its two children leave symmetrically, one turning up and one
turning down: each child leaves the junction at an angle ``theta`` (90 degrees - a T - when
the lateral offset allows it, less otherwise), turns back to +x on one circular arc of
centreline radius ``bend_radius * width`` and runs straight to the next junction. Every
channel of a generation is the same shape, mirrored for the lower child, so every
inlet-to-bed path has the same length and the same bends. A split into 3 to 5 is a fan: its
outermost children leave as a T (or Y), the inner ones of a split into 4 or 5 at a smaller
angle on one wider arc, the middle one of an odd split straight on; the children whose path
(junction correction included) is shorter than the longest get a detour of arcs that evens
out every child's resistance (see :class:`~chipflow.layout.plan.Route`). The bed channels lie
side by side, at least width + ``[bed].gap`` apart (more if a wider upper generation or a
detour needs it), run along +x and are met by the collecting tree, which is the distribution
tree mirrored about the middle of the bed.

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
sliver of PDMS is left (where neighbouring arms meet at less than 90 degrees the disc reaches
past the tip; see :func:`~chipflow.layout.pieces.junction_disc`). Port holes are drawn as pads
of the punch diameter joined to their channel.

Lengths and junctions
---------------------
Centrelines run from junction centre to junction centre (the inlet and outlet channels start
at the rim of the port hole). Each channel's ``length`` is the exact length of its centreline
with its arcs as true circles. The layout also records its pieces: the junction of each level
(a binary split as a :class:`~chipflow.layout.junctions.Junction`, a fan as an N-arm
:class:`~chipflow.layout.pieces.JunctionKey`) and the step at each port, from which the network
takes the equivalent-length corrections, so that every junction and port step is counted once
(see :mod:`chipflow.layout.extract`).

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

from chipflow.design.model import TreeDesign
from chipflow.layout.engine import draw_sketch, layer_name
from chipflow.layout.model import Layout
from chipflow.layout.rules import Chip, LayoutRules

__all__ = ["draw", "layer_name"]


def draw(design: TreeDesign, chip: Chip | None = None, rules: LayoutRules | None = None) -> Layout:
    """Draw a sized tree design on a chip.

    The tree generator (:func:`chipflow.layout.tree.tree_sketch`) turns the design into a
    network with coordinates, which the drawing engine
    (:func:`chipflow.layout.engine.draw_sketch`) draws like any other.

    Parameters
    ----------
    design : TreeDesign
        The sized, mirrored tree (at least one generation; splits of 2 to 5).
    chip : Chip, optional
        Footprint, edge margin and punch (default a 75 x 25 mm slide).
    rules : LayoutRules, optional
        Grid, walls, bend radius, alignment margin, port keep-out.

    Returns
    -------
    Layout
        Channels with their identities and exact lengths [m], mask layers (one per depth,
        shallowest first), ports, nodes, pieces.

    Raises
    ------
    LayoutError
        When the design does not fit on the chip (the message gives the size it needs), or
        its bed does not fit its footprint (the message gives the smallest it reaches).
    """
    from chipflow.layout.tree import tree_sketch

    rules = rules or LayoutRules()
    sketch = tree_sketch(design, chip or Chip(), rules)
    footprint = getattr(design, "footprint", None)
    if footprint is None:
        return draw_sketch(sketch)
    import dataclasses

    from chipflow.layout.footprint import check_culture_regions, culture_region, sketch_box

    region = culture_region("", sketch_box(sketch), footprint, rules.grid)
    layout = draw_sketch(dataclasses.replace(sketch, culture_regions=(region,)))
    check_culture_regions(layout)
    return layout
