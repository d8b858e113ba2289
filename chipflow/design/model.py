"""The sized design: per-generation geometry of a branching tree, inlet to outlet.

This is the contract between sizing (``chipflow.design``) and drawing (``chipflow.layout``):
pure numbers, no geometry.
"""

from __future__ import annotations

from dataclasses import dataclass

from chipflow.physics.fluid import Fluid
from chipflow.spec.tree import Fabrication, Footprint

__all__ = ["Level", "TreeDesign", "ROLES"]

#: Channel roles along the path from inlet to outlet.
ROLES = ("distribution", "bed", "collection")


@dataclass(frozen=True)
class Level:
    """One generation of the tree; all its channels are alike.

    Attributes
    ----------
    generation : int
        0 for the trunk at the inlet, ``n`` for the bed of a tree with ``n`` bifurcating
        generations; collecting levels mirror the distributing ones (``n - 1`` down to 0).
    role : str
        One of :data:`ROLES`.
    count : int
        Number of parallel channels in this level (the product of the splits before it).
    width, depth : float
        Channel cross-section [m].
    length : float
        Sizing length of each channel [m]. For the bed this is the designed length (from the
        residence-time target or given); for the trees it is nominal - the layout replaces it
        with the drawn length.
    flow : float
        Design flow rate per channel [m^3/s].
    round : bool
        True for a round tube (``width == depth ==`` diameter); used to compare with Murray's
        law, not drawable by soft lithography.
    shear_target : float or None
        The wall shear this level was sized for [Pa] (kind: ``TreeDesign.shear_kind``).
    shear_min, shear_max : float or None
        The tolerated wall shear window of this level [Pa], when one applies.
    """

    generation: int
    role: str
    count: int
    width: float
    depth: float
    length: float
    flow: float
    round: bool = False
    shear_target: float | None = None
    shear_min: float | None = None
    shear_max: float | None = None


@dataclass(frozen=True)
class TreeDesign:
    """A sized, mirrored tree.

    Attributes
    ----------
    name : str
        Design name.
    fluid : Fluid
        The perfusion fluid.
    total_flow : float
        Flow through the trunk [m^3/s].
    levels : tuple of Level
        Every level on the path from inlet to outlet: distribution generations 0..n-1, the
        bed (generation n), then collection generations n-1..0.
    warnings : tuple of str
        Soft misses found while sizing (e.g. a target met only within tolerance after snapping
        to the mask grid).
    shear_kind : str
        Which wall shear the levels' targets mean: "floor" (centre of the floor), "mean" or
        "max".
    max_straight_length : float or None
        Longest straight run of a bed channel [m]; the layout folds longer bed channels.
    bed_gap : float or None
        Wall between neighbouring bed channels [m].
    fabrication : Fabrication or None
        The fabrication limits the design was sized for (``chipflow.spec.tree.Fabrication``).
    footprint : Footprint or None
        The rectangle the bed must lie in, folds included (``[bed] footprint`` or a region's);
        None: anywhere on the chip.
    chamber : ChamberShape or None
        A tree that ends in a culture chamber (``[bed] kind = "chamber"``,
        :class:`chipflow.spec.chamber.ChamberShape`): the bed level is then the last
        generation's channels, which meet the chamber's inlet wall (and leave its outlet
        wall) side by side, and its length is the chamber's; None: a bed of parallel channels.
    mesh : tuple of float or None
        A mesh bed's ``(cross_pitch, cross_width)`` [m] (``[bed] kind = "mesh"``): its bed
        channels are joined by rows of cross-connections (:mod:`chipflow.layout.mesh`); None:
        parallel bed channels.
    """

    name: str
    fluid: Fluid
    total_flow: float
    levels: tuple[Level, ...]
    warnings: tuple[str, ...] = ()
    shear_kind: str = "floor"
    max_straight_length: float | None = None
    bed_gap: float | None = None
    fabrication: Fabrication | None = None
    footprint: Footprint | None = None
    chamber: object = None
    mesh: tuple[float, float] | None = None

    @property
    def generations(self) -> int:
        """Number of splitting generations ``n``."""
        return self.bed.generation

    @property
    def splits(self) -> tuple[int, ...]:
        """Branching factor of each generation 0..n-1 (the number of children of each of its
        channels)."""
        counts = [lv.count for lv in self.distribution] + [self.bed.count]
        return tuple(b // a for a, b in zip(counts[:-1], counts[1:], strict=True))

    @property
    def bed(self) -> Level:
        """The capillary bed level."""
        return next(level for level in self.levels if level.role == "bed")

    @property
    def distribution(self) -> tuple[Level, ...]:
        """Distribution levels, trunk first."""
        return tuple(level for level in self.levels if level.role == "distribution")

    @property
    def collection(self) -> tuple[Level, ...]:
        """Collection levels, from the bed towards the outlet."""
        return tuple(level for level in self.levels if level.role == "collection")
