"""Tree design files: the ``[tree]``, ``[bed]``, ``[targets]`` and ``[fabrication]`` sections.

A tree design file describes a mirrored perfusion tree: one inlet, ``n`` distributing
generations, each splitting every channel into 2 to 5 (``splits``), a bed of as many parallel
channels as the product of the splits, and ``n`` collecting generations back to one outlet.
:func:`load_tree_spec` reads it into a frozen :class:`TreeSpec` (SI floats only);
:func:`chipflow.design.sizing.size_tree` turns that into a sized
:class:`~chipflow.design.model.TreeDesign`.

.. code-block:: toml

    name = "endothelial-tree"
    description = "free text"

    [fluid]                      # see chipflow.spec.fluid (culture medium at 37 C by default)
    kind = "medium"

    [tree]
    flow = "10 uL/min"           # total design flow through the trunk
    generations = 4              # bifurcating generations n, or:
    # bed_channels = 48          # any count whose prime factors are 2, 3 or 5, or:
    # splits = [3, 2, 2, 2, 2]   # the branching factor (2 to 5) of each generation
    rule = "equal-shear"         # "equal-shear" | "shear-target" | "area-growth" | "table"
    shape = "rectangular"        # or "round" (tubes for comparison with Murray's law; not drawable)
    trunk_width = "400 um"       # optional start of equal-shear / area-growth (else [targets])
    trunk_depth = "100 um"       # depth of that trunk (one of fabrication.depths)
    growth = 1.5                 # area-growth: total cross-section factor per generation
    velocity_ratio = 20          # area-growth instead of growth: trunk / bed mean velocity
    widths = ["400 um", ...]     # table: one width per generation 0..n (bed last)
    depths = ["100 um", ...]     # table: one depth per generation 0..n, or one for all
                                 # (optional with a single fabrication depth)
    length = "3 mm"              # nominal length of distribution/collection channels
    lengths = ["4 mm", ...]      # or one per distribution generation 0..n-1

    [bed]
    kind = "channels"            # "channels" (default), "mesh" or "chamber"
    residence_time = "1 s"       # bed length = residence_time * mean velocity ...
    length = "800 um"            # ... or the bed channel length directly (exactly one of them)
    max_straight_length = "5 mm" # longer bed channels are folded by the layout
    gap = "100 um"               # wall between neighbouring bed channels (default min_gap)
    footprint = ["10 mm", "8 mm"] # the bed lies inside this rectangle (along, across the flow)
    # kind = "mesh": the bed channels joined by rows of straight cross-connections
    # cross_pitch = "1 mm"       # distance between rows along the bed channels
    # cross_width = "40 um"      # width of a cross-connection (the bed's depth)

    # several culture regions instead of one [bed] (see chipflow.spec.regions):
    # [[regions]]
    # name = "liver"
    # flow_fraction = 0.25
    # bed_channels = 16          # or splits = [...]
    # residence_time = "60 s"    # and the other [bed] keys
    # cell_type = "hepatocyte"   # optional: this region's own cells

    [targets]
    shear_kind = "floor"         # "floor" (centre of the floor, default), "mean" or "max"
    shear = "0.75 Pa"            # one target, or a list per generation 0..n
    shear_min = "0.5 Pa"         # window; a missing target is the middle of the window
    shear_max = "1.0 Pa"
    levels = "all"               # the window applies to "all" levels or only to the "bed"
    tolerance = 0.02             # relative miss after grid snapping that is only a warning
                                 # no shear numbers: the window of [culture] cell_type

    [fabrication]
    depths = ["50 um", "100 um"] # mould depths available (one per mask level)
    grid = "1 um"                # mask grid widths are snapped to
    min_feature = "25 um"        # smallest feature the mask resolves
    min_width = "25 um"          # narrowest channel (default min_feature)
    max_width = "5 mm"           # widest channel
    max_width_to_depth = 10      # roof-sag limit on width / depth
    max_depth_to_width = 2       # tall-wall limit on depth / width (Delamarche et al. 1997)
    min_gap = "100 um"           # wall between unconnected channels
    bend_radius = 2              # bend centreline radius, as a multiple of the channel width
    alignment_margin = "10 um"   # overlap of channels where the depth steps between levels

Defaults and their sources: ``max_depth_to_width = 2`` from Delamarche et al., Adv. Mater.
9 (1997) 741 (PDMS stamps with depth/width above 2 were unusable); ``max_width_to_depth = 10``
from common practice (roofs sag beyond 10-20, from memory); ``min_feature = 25 um`` about the
limit of a 16k dpi film mask (mask vendors' guidance, common practice); ``min_gap = 100 um``,
``bend_radius = 2``, ``alignment_margin = 10 um``, ``max_width = 5 mm`` and the single default
depth of 50 um are common practice for single-layer SU-8 moulds, not measured values.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

from chipflow.physics.fluid import Fluid
from chipflow.spec.fluid import read_fluid
from chipflow.spec.reader import Table

__all__ = [
    "Fabrication",
    "BedSpec",
    "BED_KINDS",
    "Footprint",
    "read_bed",
    "Targets",
    "TreeSpec",
    "RULES",
    "SHAPES",
    "SHEAR_KINDS",
    "read_fabrication",
    "load_tree_spec",
    "split_order",
    "counts_that_work",
    "SPLIT_RANGE",
]

RULES = ("equal-shear", "shear-target", "area-growth", "table")
SHAPES = ("rectangular", "round")
SHEAR_KINDS = ("floor", "mean", "max")
#: Kinds of bed: parallel channels, channels joined by cross-connections, one chamber.
BED_KINDS = ("channels", "mesh", "chamber")
#: Keys of a mesh bed, refused with another kind.
MESH_KEYS = ("cross_pitch", "cross_width")

#: Top-level keys of a tree design file; the last six belong to the build (layout, supply,
#: checks, export) and to ``chipflow vary`` (tolerances) and are read by their own modules.
TOP_KEYS = (
    "name",
    "description",
    "fluid",
    "tree",
    "bed",
    "targets",
    "fabrication",
    "chip",
    "supply",
    "culture",
    "limits",
    "export",
    "tolerances",
    "walls",
    "solutes",
    "regions",
)
TREE_KEYS = (
    "flow",
    "generations",
    "bed_channels",
    "splits",
    "rule",
    "shape",
    "trunk_width",
    "trunk_depth",
    "growth",
    "velocity_ratio",
    "widths",
    "depths",
    "length",
    "lengths",
)
#: Keys of one bed: the ``[bed]`` table, and the same keys in each ``[[regions]]`` table;
#: with ``kind = "chamber"`` the chamber keys (:mod:`chipflow.spec.chamber`), with
#: ``kind = "mesh"`` the mesh keys.
BED_KEYS = (
    "kind",
    "residence_time",
    "length",
    "max_straight_length",
    "gap",
    "footprint",
    "width",
    "depth",
    "corner_radius",
    "taper",
    "pillars",
    "cross_pitch",
    "cross_width",
)
#: Bed keys of parallel channels that a chamber bed has no use for.
CHANNEL_BED_KEYS = ("residence_time", "max_straight_length", "gap", "footprint")
#: Keys of a chamber bed that parallel channels have no use for (``length`` serves both).
CHAMBER_BED_KEYS = ("width", "depth", "corner_radius", "taper", "pillars")
TARGET_KEYS = ("shear_kind", "shear", "shear_min", "shear_max", "levels", "tolerance")
FABRICATION_KEYS = (
    "depths",
    "grid",
    "min_feature",
    "min_width",
    "max_width",
    "max_width_to_depth",
    "max_depth_to_width",
    "min_gap",
    "bend_radius",
    "alignment_margin",
)


@dataclass(frozen=True)
class Fabrication:
    """What the mould and mask can make.

    Attributes
    ----------
    depths : tuple of float
        Allowed mould depths [m], shallowest first, no repeats.
    grid : float
        Mask grid [m].
    min_feature : float
        Smallest feature the mask resolves [m].
    min_width, max_width : float
        Narrowest and widest channel [m].
    max_width_to_depth : float
        Roof-sag limit on width/depth [-].
    max_depth_to_width : float
        Tall-wall limit on depth/width [-].
    min_gap : float
        Smallest wall between unconnected channels [m].
    bend_radius : float
        Bend centreline radius as a multiple of the channel width [-].
    alignment_margin : float
        Overlap of channels at a depth step between mask levels [m].
    """

    depths: tuple[float, ...] = (50e-6,)
    grid: float = 1e-6
    min_feature: float = 25e-6
    min_width: float = 25e-6
    max_width: float = 5e-3
    max_width_to_depth: float = 10.0
    max_depth_to_width: float = 2.0
    min_gap: float = 100e-6
    bend_radius: float = 2.0
    alignment_margin: float = 10e-6

    def width_limits(self, depth: float) -> tuple[float, str, float, str]:
        """Drawable widths at ``depth`` [m]: ``(lowest, its rule, highest, its rule)`` [m].

        The rules are named as in messages ("minimum width", "mask minimum feature",
        "tall-wall limit depth/width", "maximum width", "roof-sag limit width/depth").

        >>> Fabrication().width_limits(100e-6)[1:]
        ('tall-wall limit depth/width <= 2', 0.001, 'roof-sag limit width/depth <= 10')
        """
        lows = (
            (self.min_feature, "mask minimum feature"),
            (self.min_width, "minimum width"),
            (
                depth / self.max_depth_to_width,
                f"tall-wall limit depth/width <= {self.max_depth_to_width:g}",
            ),
        )
        highs = (
            (self.max_width, "maximum width"),
            (
                depth * self.max_width_to_depth,
                f"roof-sag limit width/depth <= {self.max_width_to_depth:g}",
            ),
        )
        lo = max(lows, key=lambda item: item[0])
        hi = min(highs, key=lambda item: item[0])
        return lo[0], lo[1], hi[0], hi[1]


@dataclass(frozen=True)
class Footprint:
    """The rectangle a bed must lie in, folds included.

    Attributes
    ----------
    along, across : float
        Its size along the flow (x) and across it (y) [m].
    key : str
        Where the design file gives it, for messages (``"[bed] footprint"``,
        ``"footprint of region 'liver'"``).
    """

    along: float
    across: float
    key: str = "[bed] footprint"


@dataclass(frozen=True)
class BedSpec:
    """The bed of parallel channels: the ``[bed]`` table, or the bed keys of a region.

    Attributes
    ----------
    kind : str
        What the bed is (:data:`BED_KINDS`): "channels" (parallel bed channels, the
        default), "mesh" (the bed channels joined by rows of cross-connections,
        :mod:`chipflow.layout.mesh`) or "chamber" (the last distributing generation's
        channels end in the inlet wall of one culture chamber and the collecting tree starts
        from its outlet wall; ``chamber`` holds its shape).
    residence_time : float or None
        Target transit time through a bed channel [s].
    length : float or None
        Bed channel length [m] (exactly one of ``length`` and ``residence_time`` is set).
    max_straight_length : float or None
        Longest straight run of a bed channel [m]; longer bed channels are folded by the
        layout into a serpentine of equal runs no longer than this (None: folded only when
        the chip is too short for a straight bed).
    gap : float or None
        Wall between neighbouring bed channels and between the runs of a folded bed channel
        [m], at least ``Fabrication.min_gap`` (None: ``Fabrication.min_gap``). The drawing
        keeps at least this wall; a wider upper generation or half-grid steps that keep the
        walls on the grid may widen it.
    footprint : Footprint or None
        The rectangle the bed must lie in (None: anywhere on the chip).
    chamber : ChamberShape or None
        The chamber of a ``kind = "chamber"`` bed (:mod:`chipflow.spec.chamber`); ``length``
        is then its length.
    cross_pitch : float or None
        A mesh bed's distance along the bed channels between successive rows of
        cross-connections [m] (None for other kinds).
    cross_width : float or None
        Width of a mesh bed's cross-connections [m]; their depth is the bed's.
    """

    kind: str = "channels"
    residence_time: float | None = None
    length: float | None = None
    max_straight_length: float | None = None
    gap: float | None = None
    footprint: Footprint | None = None
    chamber: object = None
    cross_pitch: float | None = None
    cross_width: float | None = None


@dataclass(frozen=True)
class Targets:
    """Wall shear targets.

    Attributes
    ----------
    kind : str
        Which wall shear the targets mean: "floor", "mean" or "max".
    values : tuple of float or None
        One target per generation 0..n [Pa], or a single value for all, or None.
    minimum, maximum : float or None
        Tolerated window [Pa].
    levels : str
        "all" or "bed": where the window applies.
    tolerance : float
        Relative miss after grid snapping reported as a warning [-].
    cell : str or None
        The cell type whose window (from ``[culture] cell_type``) was used, if any.
    """

    kind: str = "floor"
    values: tuple[float, ...] | None = None
    minimum: float | None = None
    maximum: float | None = None
    levels: str = "all"
    tolerance: float = 0.02
    cell: str | None = None

    def target(self, generation: int) -> float | None:
        """The target [Pa] for ``generation``: given value, else the middle of the window."""
        if self.values is not None:
            return self.values[0] if len(self.values) == 1 else self.values[generation]
        if self.minimum is not None and self.maximum is not None:
            return 0.5 * (self.minimum + self.maximum)
        return self.minimum if self.minimum is not None else self.maximum

    def window(self, generation: int, bed_generation: int) -> tuple[float | None, float | None]:
        """The window ``(min, max)`` [Pa] for a level (``(None, None)`` when none applies)."""
        if self.levels == "bed" and generation != bed_generation:
            return None, None
        return self.minimum, self.maximum


@dataclass(frozen=True)
class TreeSpec:
    """A validated tree design file (SI floats).

    Attributes
    ----------
    name, description : str
    fluid : Fluid
    flow : float
        Total design flow [m^3/s].
    generations : int
        Splitting generations ``n``.
    splits : tuple of int
        Branching factor of each generation 0..n-1, 2 to 5 (the bed has their product).
    rule, shape : str
        See :data:`RULES`, :data:`SHAPES`.
    trunk_width, trunk_depth : float or None
        Given trunk geometry [m].
    growth : float or None
        Area-growth factor of the total cross-section per generation [-].
    widths, depths : tuple of float or None
        Table rule: geometry per generation 0..n [m].
    lengths : tuple of float
        Nominal length per distribution generation 0..n-1 [m].
    bed : BedSpec
    targets : Targets
    fabrication : Fabrication
    source : str
        File name for messages.
    regions : tuple of RegionSpec
        The culture regions (:mod:`chipflow.spec.regions`); empty for one bed (``[bed]``).
        With regions, ``splits`` is empty and ``bed`` unused: each region has its own.
    """

    name: str
    description: str
    fluid: Fluid
    flow: float
    generations: int
    rule: str
    shape: str
    trunk_width: float | None
    trunk_depth: float | None
    growth: float | None
    widths: tuple[float, ...] | None
    depths: tuple[float, ...] | None
    lengths: tuple[float, ...]
    bed: BedSpec
    targets: Targets
    fabrication: Fabrication
    source: str = "<design>"
    splits: tuple[int, ...] | None = None
    split_note: str = ""
    regions: tuple = ()

    def __post_init__(self) -> None:
        if self.splits is None:  # a bifurcating tree
            object.__setattr__(self, "splits", (2,) * self.generations)

    @property
    def bed_channels(self) -> int:
        """Number of bed channels: the product of the splits."""
        return math.prod(self.splits)

    def count(self, generation: int) -> int:
        """Number of channels of ``generation`` (0: the trunk)."""
        return math.prod(self.splits[:generation])


def _picometre(depth: float | None) -> float | None:
    """A depth [m] rounded to 1 pm, so that one depth written in two units ("50 um",
    "0.05 mm") is one number.

    >>> _picometre(0.05e-3) == _picometre(50e-6) == 5e-05
    True
    """
    return None if depth is None else round(depth * 1e12) / 1e12


def read_fabrication(top: Table) -> Fabrication:
    """Read ``[fabrication]`` from the top-level table (defaults when absent).

    >>> from chipflow.spec.reader import parse_design_text
    >>> fab = read_fabrication(parse_design_text('[fabrication]\\ndepths = ["100 um", "50 um"]'))
    >>> fab.depths, fab.max_width_to_depth
    ((5e-05, 0.0001), 10.0)
    """
    table = top.table("fabrication", None)
    if table is None:
        return Fabrication()
    table.only(FABRICATION_KEYS)
    base = Fabrication()
    depths = [_picometre(d) for d in table.quantities("depths", "length", list(base.depths))]
    if len(set(depths)) != len(depths):
        raise table.error("depths", "a depth is listed twice (perhaps in different units)")
    min_feature = table.quantity("min_feature", "length", base.min_feature)
    fab = Fabrication(
        depths=tuple(sorted(depths)),
        grid=table.quantity("grid", "length", base.grid),
        min_feature=min_feature,
        min_width=table.quantity("min_width", "length", min_feature),
        max_width=table.quantity("max_width", "length", base.max_width),
        max_width_to_depth=float(
            table.number("max_width_to_depth", base.max_width_to_depth, minimum=1e-9)
        ),
        max_depth_to_width=float(
            table.number("max_depth_to_width", base.max_depth_to_width, minimum=1e-9)
        ),
        min_gap=table.quantity("min_gap", "length", base.min_gap),
        bend_radius=float(table.number("bend_radius", base.bend_radius, minimum=0.5)),
        alignment_margin=table.quantity(
            "alignment_margin", "length", base.alignment_margin, positive=False, minimum=0.0
        ),
    )
    if fab.min_width > fab.max_width:
        raise table.error("min_width", "is larger than max_width")
    if fab.grid > fab.min_feature:
        raise table.error("grid", "is coarser than min_feature")
    return fab


def _culture_targets(top: Table) -> Targets:
    """Targets from the shear window of the ``[culture]`` cell type (none without one)."""
    from chipflow.spec.culture import read_culture

    window = read_culture(top).window
    if window is None:
        return Targets()
    low = window.min if window.min > 0.0 else None
    high = window.max if math.isfinite(window.max) else None
    return Targets(minimum=low, maximum=high, cell=window.cell_type)


def _read_targets(top: Table, n: int) -> Targets:
    table = top.table("targets", None)
    if table is None:
        return _culture_targets(top)
    table.only(TARGET_KEYS)
    values = table.quantities("shear", "pressure", None)
    if values is not None and len(values) not in (1, n + 1):
        raise table.error(
            "shear",
            f"give one target or one per generation 0..{n} ({n + 1} values), got {len(values)}",
        )
    minimum = table.quantity("shear_min", "pressure", None)
    maximum = table.quantity("shear_max", "pressure", None)
    if minimum is not None and maximum is not None and minimum > maximum:
        raise table.error("shear_min", "is larger than shear_max")
    cell = None
    if values is None and minimum is None and maximum is None:
        fallback = _culture_targets(top)
        minimum, maximum, cell = fallback.minimum, fallback.maximum, fallback.cell
    return Targets(
        kind=table.choice("shear_kind", SHEAR_KINDS, "floor"),
        values=None if values is None else tuple(values),
        minimum=minimum,
        maximum=maximum,
        levels=table.choice("levels", ("all", "bed"), "all"),
        tolerance=float(table.number("tolerance", 0.02, minimum=0.0, maximum=1.0)),
        cell=cell,
    )


def _read_bed(top: Table, fab: Fabrication) -> BedSpec:
    table = top.table("bed", None)
    if table is None:
        raise top.error("bed", "missing section [bed]: give residence_time or length")
    table.only(BED_KEYS)
    return read_bed(table, fab)


def read_bed(table: Table, fab: Fabrication, label: str = "[bed]") -> BedSpec:
    """The bed keys of ``table`` (``[bed]``, or a ``[[regions]]`` entry, which may hold other
    keys too): :data:`BED_KEYS`.

    ``label`` names the bed in messages (``"[bed]"``, ``"region 'liver'"``).

    >>> from chipflow.spec.reader import parse_design_text
    >>> top = parse_design_text('[bed]\\nlength = "2 mm"\\nfootprint = ["10 mm", "8 mm"]')
    >>> read_bed(top.table("bed"), Fabrication()).footprint
    Footprint(along=0.01, across=0.008, key='[bed] footprint')
    """
    kind = table.choice("kind", BED_KINDS, "channels")
    if kind == "chamber":
        return _chamber_bed(table, fab, label)
    if kind != "channels" and label != "[bed]":
        raise table.error("kind", f'{label}: a culture region\'s bed is "channels" only')
    for key in CHAMBER_BED_KEYS:
        if key in table:
            raise table.error(
                key, f'is a key of a chamber bed; give kind = "chamber" or leave {key} out'
            )
    residence = table.quantity("residence_time", "time", None)
    length = table.quantity("length", "length", None)
    if (residence is None) == (length is None):
        raise table.error(None, "give exactly one of residence_time and length")
    gap = table.quantity("gap", "length", fab.min_gap)
    if gap < fab.min_gap * (1 - 1e-9):
        raise table.error(
            "gap",
            f"a wall of {gap * 1e6:.4g} um is thinner than [fabrication].min_gap "
            f"{fab.min_gap * 1e6:.4g} um; give at least that, or lower min_gap",
        )
    footprint = None
    if "footprint" in table:
        sides = table.quantities("footprint", "length")
        if len(sides) != 2:
            raise table.error(
                "footprint",
                f'give two lengths, along the flow and across it (e.g. ["10 mm", "8 mm"]), '
                f"got {len(sides)}",
            )
        key = "[bed] footprint" if label == "[bed]" else f"footprint of {label}"
        footprint = Footprint(float(sides[0]), float(sides[1]), key)
    pitch = cross = None
    if kind == "mesh":
        pitch, cross = _read_mesh(table, fab, length)
    else:
        for key in MESH_KEYS:
            if key in table:
                raise table.error(key, f'belongs to a mesh bed (kind = "mesh"), not {kind!r}')
    return BedSpec(
        kind=kind,
        residence_time=residence,
        length=length,
        max_straight_length=table.quantity("max_straight_length", "length", None),
        gap=gap,
        footprint=footprint,
        cross_pitch=pitch,
        cross_width=cross,
    )


def _chamber_bed(table: Table, fab: Fabrication, label: str) -> BedSpec:
    """A ``kind = "chamber"`` bed: the chamber keys (:func:`chipflow.spec.chamber.read_chamber`,
    its depth one of the mould depths); the keys of parallel channels are refused."""
    from chipflow.spec.chamber import read_chamber

    if label != "[bed]":
        raise table.error(
            "kind", f'{label}: a chamber bed is available in [bed] only; give kind = "channels"'
        )
    for key in (*CHANNEL_BED_KEYS, *MESH_KEYS):
        if key in table:
            raise table.error(
                key,
                'has no meaning for kind = "chamber" (the chamber\'s own keys width, length, '
                "depth, corner_radius, taper and pillars describe it); leave it out",
            )
    shape = read_chamber(table, fab.min_feature, fab.depths)
    return BedSpec(kind="chamber", length=shape.length, chamber=shape)


def _read_mesh(table: Table, fab: Fabrication, length: float | None) -> tuple[float, float]:
    """``cross_pitch`` and ``cross_width`` of a mesh bed [m], validated as far as the file
    allows (the bed's depth and drawn length are checked again by the layout)."""
    for key in MESH_KEYS:
        if key not in table:
            raise table.error(key, 'missing: a mesh bed (kind = "mesh") needs cross_pitch and '
                              "cross_width")  # fmt: skip
    pitch = table.quantity("cross_pitch", "length")
    width = table.quantity("cross_width", "length")
    lows = [fab.width_limits(d) for d in fab.depths]
    low = min(lo[0] for lo in lows)
    high = max(lo[2] for lo in lows)
    if not low * (1 - 1e-9) <= width <= high * (1 + 1e-9):
        raise table.error(
            "cross_width",
            f"{width * 1e6:.4g} um cannot be made at any of the fabrication depths: give "
            f"{low * 1e6:.4g} to {high * 1e6:.4g} um",
        )
    least = width + fab.min_gap
    if pitch < least * (1 - 1e-9):
        raise table.error(
            "cross_pitch",
            f"{pitch * 1e6:.4g} um leaves less than [fabrication].min_gap between rows of "
            f"{width * 1e6:.4g} um cross-connections; give at least {least * 1e6:.4g} um",
        )
    if length is not None and pitch >= length:
        raise table.error(
            "cross_pitch",
            f"{pitch * 1e3:.4g} mm is not shorter than the bed length {length * 1e3:.4g} mm: "
            "no row of cross-connections fits; give a shorter pitch",
        )
    return pitch, width


#: Branching factors a junction may have [-].
SPLIT_RANGE = (2, 5)


def counts_that_work(count: int) -> tuple[int, int]:
    """The nearest bed channel counts below and above ``count`` whose prime factors are all
    2, 3 or 5 (at least 2).

    >>> counts_that_work(49), counts_that_work(7)
    ((48, 50), (6, 8))
    """

    def works(c: int) -> bool:
        for p in (2, 3, 5):
            while c % p == 0:
                c //= p
        return c == 1

    below = next((c for c in range(count - 1, 1, -1) if works(c)), 2)
    above = next(c for c in range(count + 1, 2 * count + 3) if works(c))
    return below, above


def split_order(count: int) -> tuple[tuple[int, ...], str]:
    """The splits chipflow draws for ``count`` bed channels, and why, in one sentence.

    Binary splits need no compensation (their two children are mirror images); a split into
    3 or 5 does: its children differ in shape, and the shorter ones get a detour whose length
    evens out every child's resistance. A detour needs room beside its channel, which the
    generations near the trunk have most of (their children lie a whole subtree apart). So a
    count is split into its prime factors, the 5s first, then the 3s, then the 2s.

    >>> split_order(48)[0], split_order(45)[0], split_order(16)[0]
    ((3, 2, 2, 2, 2), (5, 3, 3), (2, 2, 2, 2))
    """
    factors = []
    c = count
    for p in (5, 3, 2):
        while c % p == 0:
            factors.append(p)
            c //= p
    splits = tuple(factors)
    if set(splits) <= {2}:
        return splits, ""
    shown = ", ".join(str(f) for f in splits)
    note = (
        f"splits {shown} for {count} bed channels: the splits into 3 or 5 come first, near the "
        "trunk, where their children lie far enough apart for the detours that even out "
        "their resistances; the binary splits, which need none, follow towards the bed"
    )
    return splits, note


def _splits(tree: Table) -> tuple[tuple[int, ...], str]:
    given = [k for k in ("generations", "bed_channels", "splits") if k in tree]
    if len(given) != 1:
        raise tree.error(None, "give exactly one of generations, bed_channels and splits")
    if "generations" in tree:
        n = int(tree.number("generations", integer=True, minimum=0, maximum=20))
        return (2,) * n, ""
    if "splits" in tree:
        raw = tree._get("splits", None)
        lo, hi = SPLIT_RANGE
        if (
            not isinstance(raw, list)
            or not raw
            or not all(isinstance(v, int) and not isinstance(v, bool) for v in raw)
        ):
            raise tree.error(
                "splits", f"give a list of whole numbers {lo} to {hi}, one per generation"
            )
        if not all(lo <= v <= hi for v in raw):
            bad = next(v for v in raw if not lo <= v <= hi)
            raise tree.error(
                "splits", f"{bad} is not a branching factor from {lo} to {hi} (e.g. [3, 2, 2])"
            )
        if len(raw) > 20 or math.prod(raw) > 2**20:
            raise tree.error("splits", f"at most 20 generations and {2**20:,} bed channels")
        return tuple(raw), ""
    count = int(tree.number("bed_channels", integer=True, minimum=1, maximum=2**20))
    if count == 1:
        return (), ""
    splits, note = split_order(count)
    if math.prod(splits) != count:
        below, above = counts_that_work(count)
        raise tree.error(
            "bed_channels",
            f"{count} bed channels cannot be reached by splits of 2 to 5 (its prime factors "
            f"must all be 2, 3 or 5); nearest counts that work: {below} or {above}",
        )
    return splits, note


def load_tree_spec(top: Table) -> TreeSpec:
    """Read a tree design from the top-level table of a design file.

    Parameters
    ----------
    top : Table
        The parsed file (see :func:`chipflow.spec.reader.read_design_file`).

    Returns
    -------
    TreeSpec

    Raises
    ------
    SpecError
        On a missing, unknown or malformed key, with file and key path.
    """
    top.only(TOP_KEYS)
    tree = top.table("tree")
    tree.only(TREE_KEYS)
    fab = read_fabrication(top)
    regional = "regions" in top
    if regional:
        _refuse_one_tree_keys(top, tree)
        splits, split_note = (), ""
    else:
        splits, split_note = _splits(tree)
    n = len(splits)
    rule = tree.choice("rule", RULES)
    shape = tree.choice("shape", SHAPES, "rectangular")
    given = top.data.get("targets")
    if regional and isinstance(given, dict) and isinstance(given.get("shear"), list):
        if len(given["shear"]) > 1:
            raise top.error(
                "targets.shear",
                "with [[regions]] give one shear target (each region's tree has its own "
                "number of generations)",
            )
    targets = _read_targets(top, n)
    trunk_width = tree.quantity("trunk_width", "length", None)
    trunk_depth = _picometre(tree.quantity("trunk_depth", "length", None))
    if shape == "round":
        if trunk_depth is not None:
            raise tree.error("trunk_depth", "a round tube has only a diameter: use trunk_width")
        if rule not in ("equal-shear", "shear-target"):
            raise tree.error("shape", "round tubes support the rules equal-shear and shear-target")
    elif trunk_width is not None and trunk_depth is None:
        if len(fab.depths) != 1:
            raise tree.error(
                "trunk_depth",
                "missing: with several fabrication depths, say which one the given trunk_width has",
            )
        trunk_depth = fab.depths[0]
    if trunk_depth is not None and trunk_depth not in fab.depths:
        raise tree.error("trunk_depth", "must be one of fabrication.depths")

    growth = tree.number("growth", None, minimum=1e-6)
    ratio = tree.number("velocity_ratio", None, minimum=1e-6)
    if rule == "area-growth":
        if (growth is None) == (ratio is None):
            raise tree.error(None, "area-growth needs exactly one of growth and velocity_ratio")
        if ratio is not None and not regional:
            if n == 0:
                raise tree.error("velocity_ratio", "needs at least one generation")
            growth = float(ratio) ** (1.0 / n)
    elif growth is not None or ratio is not None:
        key = "growth" if growth is not None else "velocity_ratio"
        raise tree.error(key, 'only used by rule = "area-growth"')

    widths = depths = None
    if rule == "table":
        widths = tuple(tree.quantities("widths", "length"))
        if "depths" in tree:
            depths = tuple(_picometre(d) for d in tree.quantities("depths", "length"))
        elif len(fab.depths) == 1:
            depths = fab.depths  # one mould depth: every generation has it
        else:
            raise tree.error(
                "depths",
                "missing: with several fabrication depths, give one depth per generation "
                "(or one depth for all)",
            )
        if len(depths) == 1:
            depths = depths * (n + 1)
        for key, values in (("widths", widths), ("depths", depths)):
            if len(values) != n + 1:
                raise tree.error(
                    key, f"give one value per generation 0..{n} ({n + 1} values), got {len(values)}"
                )
    needs_target = rule == "shear-target" or (
        rule in ("equal-shear", "area-growth") and trunk_width is None
    )

    if needs_target and targets.target(0) is None:
        raise top.error(
            "targets",
            f"rule {rule!r} without trunk_width needs a shear target: "
            "give targets.shear or targets.shear_min/shear_max",
        )
    if rule == "equal-shear" and trunk_width is None and targets.values and len(targets.values) > 1:
        raise top.error(
            "targets.shear", "equal-shear takes one target; use shear-target for a list"
        )

    if "lengths" in tree and "length" in tree:
        raise tree.error("lengths", "give either length or lengths")
    if "lengths" in tree:
        lengths = tuple(tree.quantities("lengths", "length"))
        if len(lengths) != n:
            raise tree.error("lengths", f"give one length per distribution generation 0..{n - 1}")
    else:
        lengths = (tree.quantity("length", "length", 3e-3),) * n
    fluid = read_fluid(top)
    spec = TreeSpec(
        name=top.label("name", "tree"),
        description=top.text("description", ""),
        fluid=fluid,
        flow=tree.quantity("flow", "flow"),
        generations=n,
        rule=rule,
        shape=shape,
        trunk_width=trunk_width,
        trunk_depth=trunk_depth,
        growth=None if growth is None else float(growth),
        widths=widths,
        depths=depths,
        lengths=lengths,
        bed=BedSpec() if regional else _read_bed(top, fab),
        targets=targets,
        fabrication=fab,
        source=top.source,
        splits=splits,
        split_note=split_note,
    )
    if spec.bed.kind == "chamber" and shape == "round":
        raise tree.error(
            "shape", 'round tubes cannot be drawn, and a chamber bed is drawn; use "rectangular"'
        )
    if not regional:
        return spec
    from chipflow.spec.regions import read_regions

    nominal = tree.quantity("length", "length", 3e-3)
    regions = read_regions(top, spec, fab, None if ratio is None else float(ratio), nominal)
    return dataclasses.replace(spec, regions=regions)


def _refuse_one_tree_keys(top: Table, tree: Table) -> None:
    """With ``[[regions]]``, the keys that describe one tree's bed are the regions' own."""
    for key in ("generations", "bed_channels", "splits"):
        if key in tree:
            raise tree.error(
                key, "with [[regions]], each region gives its own bed_channels or splits"
            )
    if "bed" in top:
        raise top.error(
            "bed",
            "with [[regions]], each region has its own bed keys (residence_time or length, gap, "
            "max_straight_length, footprint): move them from [bed] into the regions",
        )
    if tree.data.get("rule") == "table":
        raise tree.error(
            "rule",
            'rule = "table" gives the widths of one tree; with [[regions]] use equal-shear, '
            "shear-target or area-growth",
        )
    if tree.data.get("shape") == "round":
        raise tree.error("shape", "round tubes cannot be drawn; [[regions]] need a chip")
    if "lengths" in tree:
        raise tree.error(
            "lengths", "with [[regions]] give one nominal length (each region has its own tree)"
        )
