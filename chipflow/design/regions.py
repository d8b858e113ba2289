"""Sizing a chip of several culture regions: the shared trunk, the feeders, each region's tree.

A chip with ``[[regions]]`` (:mod:`chipflow.spec.regions`) is sized in three parts:

- the **trunk** (generation 0) carries the whole flow and is sized by the design's ``[tree]``
  rule at its ``[targets]`` (or the window of ``[culture]``), as the trunk of one tree;
- each region's **feeder** (generation 1, the first channel of the region) carries the
  region's share of the flow and is sized for its own flow at the same shear as the trunk:
  the shear rule where it can apply, whatever the region's cells (the feeder carries the
  region's flow past unseeded floor, and a feeder sized at a low-shear region's window would
  be so wide and conduct so well that no drawable length could hold the region to its
  share);
- each region's **tree** below the feeder (generations 2 onwards) is sized as a tree of its own:
  the ``[tree]`` rule at the region's flow, its splits and bed, and the window of its own
  ``cell_type`` (else the design's targets).

The feeders' drawn lengths are decided by the drawing (:mod:`chipflow.layout.regions`), which
gives every region its share of the flow.

Where the feeders leave the trunk's split together, their walls must lie on the mask grid at
one point: every feeder is drawn with the wall parity of the trunk (a width of an even number
of grid steps when the trunk's is even), one grid step off its snapped width where needed,
with a note.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass

from chipflow.design.model import Level, TreeDesign
from chipflow.design.sizing import (
    BedGrade,
    _choose,
    _snap,
    candidates,
    size_tree,
    wall_shear,
)
from chipflow.errors import DesignError
from chipflow.physics.fluid import Fluid
from chipflow.spec.tree import Fabrication, TreeSpec
from chipflow.units import format_quantity

__all__ = ["RegionDesign", "RegionsDesign", "size_regions"]


@dataclass(frozen=True)
class RegionDesign:
    """One sized culture region.

    Attributes
    ----------
    name : str
    flow_fraction : float
        Its target share of the trunk's flow [-].
    tree : TreeDesign
        The region's tree: generation 0 is its feeder (drawn and solved as generation 1 of
        the chip), then its own splits, bed and collecting tree.
    cell_type : str or None
        Its own cell type (None: the design's ``[culture]``).
    """

    name: str
    flow_fraction: float
    tree: TreeDesign
    cell_type: str | None = None


@dataclass(frozen=True)
class RegionsDesign:
    """A sized chip of several culture regions.

    Attributes
    ----------
    name : str
    fluid : Fluid
    total_flow : float
        Flow through the trunk [m^3/s].
    trunk : Level
        The shared trunk (distributing generation 0; the collecting trunk is alike).
    regions : tuple of RegionDesign
    warnings : tuple of str
        Sizing notes of the trunk, the feeders and every region's tree.
    shear_kind : str
    fabrication : Fabrication
    """

    name: str
    fluid: Fluid
    total_flow: float
    trunk: Level
    regions: tuple[RegionDesign, ...]
    warnings: tuple[str, ...] = ()
    shear_kind: str = "floor"
    fabrication: Fabrication | None = None

    @property
    def channel_count(self) -> int:
        """Number of channels of the chip (both trunks, every region's levels)."""
        return 2 + sum(lv.count for r in self.regions for lv in r.tree.levels)

    def levels_by_region(self) -> dict[tuple[str, str, int], Level]:
        """Every level by (region, role, generation) as drawn and solved: the shared trunks
        (region "", generation 0), each region's levels one generation further on (its
        feeder is generation 1 of the chip)."""
        out = {
            ("", "distribution", 0): self.trunk,
            ("", "collection", 0): dataclasses.replace(self.trunk, role="collection"),
        }
        for r in self.regions:  # a handful of regions
            for lv in r.tree.levels:
                generation = lv.generation + 1
                out[(r.name, lv.role, generation)] = dataclasses.replace(lv, generation=generation)
        return out


def _trunk_target(spec: TreeSpec) -> float | None:
    """The shear the trunk is sized for [Pa]: a given trunk's own, else the design's target."""
    if spec.trunk_width is not None:
        return float(
            wall_shear(
                spec.targets.kind, spec.trunk_width, spec.trunk_depth, spec.flow,
                spec.fluid.viscosity,
            )
        )  # fmt: skip
    return spec.targets.target(0)


def _size_channel(spec: TreeSpec, flow: float, what: str, depths, target: float) -> tuple:
    """Width and depth [m] of one channel of ``flow`` [m^3/s] at the ``target`` shear [Pa]:
    the design's choice rule over one generation (exact, else a compromise inside the
    window), and a note when compromised."""
    fab, mu, kind = spec.fabrication, spec.fluid.viscosity, spec.targets.kind
    window = spec.targets.window(0, 1)
    row = [candidates(flow, h, fab, mu, kind, shear=target, window=window) for h in depths]
    pick = _choose([row])
    if pick is None:
        best = min(
            (c for c in row if not math.isnan(c.width)),
            key=lambda c: abs(math.log(c.shear / target)),
            default=row[0],
        )
        raise DesignError(
            f"{spec.source}: {what} ({format_quantity(flow, 'uL/min')}): {kind} shear "
            f"{format_quantity(target, 'Pa')} needs width {format_quantity(best.ideal, 'um')} "
            f"at depth {format_quantity(best.depth, 'um')}, beyond the {best.binding}; change "
            "the [tree] flow or the targets, or add a mould depth"
        )
    c = pick[0]
    note = ""
    if c.status == 1:
        note = (
            f"{what}: {kind} shear {format_quantity(target, 'Pa')} needs width "
            f"{format_quantity(c.ideal, 'um')} at depth {format_quantity(c.depth, 'um')}, beyond "
            f"the {c.binding}; drawn {format_quantity(c.width, 'um')} wide, giving {kind} shear "
            f"{format_quantity(c.shear, 'Pa')}"
        )
    return c.width, c.depth, note


def _parity_width(width: float, ideal: float, depth: float, parity: int, fab: Fabrication):
    """``width`` [m] moved by one grid step to the wall parity ``parity`` (0 even, 1 odd
    number of grid steps), towards ``ideal`` where both neighbours are drawable."""
    grid = fab.grid
    steps = round(width / grid)
    if steps % 2 == parity:
        return width
    lo, _, hi, _ = fab.width_limits(depth)
    options = [s for s in (steps - 1, steps + 1) if s >= 1 and lo <= s * grid <= hi + 1e-15]
    if not options:
        options = [steps + 1]
    best = min(options, key=lambda s: abs(s * grid - ideal))
    return best * grid


def size_regions(
    spec: TreeSpec,
    bed_grades: Mapping[str, BedGrade] | None = None,
) -> RegionsDesign:
    """Size the trunk, the feeders and every region's tree (see the module notes).

    Parameters
    ----------
    spec : TreeSpec
        A tree design with ``regions``.
    bed_grades : mapping of str to callable, optional
        Per region name, the grader of its bed's depth choice (see
        :func:`chipflow.design.sizing.size_tree`).

    Returns
    -------
    RegionsDesign

    Raises
    ------
    DesignError
        When the trunk, a feeder or a region's tree cannot be sized within the fabrication
        limits.
    """
    fab, mu, kind = spec.fabrication, spec.fluid.viscosity, spec.targets.kind
    grades = bed_grades or {}
    warnings: list[str] = []
    target = _trunk_target(spec)
    if target is None:
        raise DesignError(
            f"{spec.source}: rule {spec.rule!r} without trunk_width needs a shear target for "
            "the trunk and the feeders: give targets.shear or targets.shear_min/shear_max"
        )
    if spec.trunk_width is not None:
        trunk_w, trunk_h = spec.trunk_width, spec.trunk_depth
    else:
        trunk_w, trunk_h, note = _size_channel(spec, spec.flow, "the trunk", fab.depths, target)
        if note:
            warnings.append(note)
    trunk_w = _snap(trunk_w, trunk_h, fab)
    parity = round(trunk_w / fab.grid) % 2
    low, high = spec.targets.window(0, 1)
    trunk = Level(0, "distribution", 1, trunk_w, trunk_h, spec.lengths[0] if spec.lengths
                  else 3e-3, spec.flow, False, target, low, high)  # fmt: skip
    regions = []
    for region in spec.regions:  # a handful of regions
        tree_spec = region.tree
        if tree_spec.targets.target(0) is None and tree_spec.rule != "table":
            tree_spec = dataclasses.replace(
                tree_spec, targets=dataclasses.replace(tree_spec.targets, values=(target,))
            )
        design = size_tree(tree_spec, bed_grade=grades.get(region.name))
        flow = tree_spec.flow
        what = f"the feeder of region {region.name!r}"
        width, depth, note = _size_channel(spec, flow, what, fab.depths, target)
        if note:
            warnings.append(note)
        snapped = _parity_width(_snap(width, depth, fab), width, depth, parity, fab)
        if not math.isclose(snapped, _snap(width, depth, fab), rel_tol=0, abs_tol=1e-15):
            warnings.append(
                f"{what}: drawn {format_quantity(snapped, 'um')} wide (not "
                f"{format_quantity(_snap(width, depth, fab), 'um')}) so that its walls lie on "
                "the mask grid where it leaves the trunk together with the other feeders"
            )
        shear = float(wall_shear(kind, snapped, depth, flow, mu))
        feeder = dict(width=snapped, depth=depth, flow=flow, shear_target=target,
                      shear_min=low, shear_max=high, round=False)  # fmt: skip
        levels = tuple(
            dataclasses.replace(lv, **feeder) if lv.generation == 0 else lv for lv in design.levels
        )
        notes = [f"region {region.name!r}: {w}" for w in design.warnings]
        notes.append(
            f"{what}: {format_quantity(snapped, 'um')} x {format_quantity(depth, 'um')} for "
            f"{format_quantity(flow, 'uL/min')} ({region.flow_fraction:.4g} of the flow), "
            f"{kind} shear {format_quantity(shear, 'Pa')}, the trunk's target"
        )
        warnings += notes
        tree = dataclasses.replace(design, name=region.name, levels=levels, warnings=())
        regions.append(RegionDesign(region.name, region.flow_fraction, tree, region.cell_type))
    return RegionsDesign(
        name=spec.name,
        fluid=spec.fluid,
        total_flow=spec.flow,
        trunk=trunk,
        regions=tuple(regions),
        warnings=tuple(warnings),
        shear_kind=kind,
        fabrication=fab,
    )
