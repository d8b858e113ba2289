"""Several culture regions: the ``[[regions]]`` tables of a tree design.

A chip may feed several culture regions at set shares of the flow, each with its own bed (its
count of channels, its length or residence time, its footprint) and, optionally, its own
cells. The trunk from the inlet splits towards the regions; each region is a tree of its own
from its feeding channel to its bed and back, and the regions' collecting channels meet again
before the outlet (see :mod:`chipflow.layout.regions` for the drawing and
:mod:`chipflow.design.regions` for the sizing).

.. code-block:: toml

    [tree]                       # flow, rule, trunk and nominal length as for one bed
    flow = "4 uL/min"
    rule = "equal-shear"

    [[regions]]
    name = "liver"               # letters, digits, '_' and '-'; unique
    flow_fraction = 0.25         # share of the trunk's flow (all regions: sum 1 within 1e-9)
    bed_channels = 16            # or splits = [2, 2, 2, 2] (at least 2 bed channels)
    residence_time = "60 s"      # the [bed] keys: residence_time or length, gap,
    footprint = ["10 mm", "8 mm"] # max_straight_length, footprint
    cell_type = "hepatocyte"     # optional: the region's own cells (else those of [culture])

    [[regions]]
    name = "vessels"
    flow_fraction = 0.75
    ...

With ``[[regions]]`` there is no ``[bed]`` table and ``[tree]`` gives no ``generations``,
``bed_channels`` or ``splits``: every region has its own. The ``rule = "table"`` (widths per
generation of one tree), round tubes and per-generation ``lengths`` or shear targets belong to
one tree and are refused.

>>> from chipflow.spec.reader import parse_design_text
>>> from chipflow.spec.tree import load_tree_spec
>>> text = '''
... [tree]
... flow = "4 uL/min"
... rule = "equal-shear"
... [targets]
... shear = "0.5 Pa"
... [[regions]]
... name = "a"
... flow_fraction = 0.25
... bed_channels = 4
... length = "2 mm"
... [[regions]]
... name = "b"
... flow_fraction = "75 %"
... splits = [3, 2]
... length = "2 mm"
... '''
>>> spec = load_tree_spec(parse_design_text(text, "two.toml"))
>>> [(r.name, r.flow_fraction, r.tree.splits) for r in spec.regions]
[('a', 0.25, (2, 2)), ('b', 0.75, (3, 2))]
>>> round(spec.regions[1].tree.flow * 6e10, 9)
3.0
"""

from __future__ import annotations

import dataclasses
import math
import re
from dataclasses import dataclass

from chipflow.spec.reader import Table
from chipflow.spec.tree import (
    BED_KEYS,
    Fabrication,
    Targets,
    TreeSpec,
    _splits,
    read_bed,
)

__all__ = [
    "RegionSpec",
    "REGION_KEYS",
    "FRACTION_TOLERANCE",
    "MAX_REGIONS",
    "read_regions",
]

#: Keys of a ``[[regions]]`` table: its own and those of a bed.
REGION_KEYS = ("name", "flow_fraction", "bed_channels", "splits", "cell_type", *BED_KEYS)
#: How far the flow fractions may sum from 1 [-].
FRACTION_TOLERANCE = 1e-9
#: Most regions one split feeds (a fan of 2 to 5 feeders, as the splits of a tree).
MAX_REGIONS = 5
_NAME = re.compile(r"^[A-Za-z0-9_-]{1,40}$")


@dataclass(frozen=True)
class RegionSpec:
    """One culture region.

    Attributes
    ----------
    name : str
        Its name (letters, digits, ``_`` and ``-``), as in ``channels.csv`` and results.json.
    flow_fraction : float
        Its share of the trunk's flow [-].
    tree : TreeSpec
        The region's own tree: the design's ``[tree]`` rule at ``flow_fraction`` of its flow,
        the region's splits and bed, and its targets (those of its ``cell_type`` when it has
        one). Its trunk is the region's feeding channel.
    cell_type : str or None
        The region's own cell type (None: the cells of ``[culture]``).
    where : str
        The region's table in the design file, for messages (``"regions[0]"``).
    """

    name: str
    flow_fraction: float
    tree: TreeSpec
    cell_type: str | None = None
    where: str = ""

    @property
    def bed_channels(self) -> int:
        """Number of the region's bed channels."""
        return self.tree.bed_channels


def _cell_targets(base: Targets, cell: str, table: Table) -> Targets:
    """The region's targets: the window of its cell type, with the design's kind of shear,
    levels and tolerance."""
    from chipflow.checks.cell_types import cell_type

    window = cell_type(cell, where=table.where("cell_type")).window()
    low = window.min if window.min > 0.0 else None
    high = window.max if math.isfinite(window.max) else None
    return dataclasses.replace(base, values=None, minimum=low, maximum=high, cell=window.cell_type)


def read_regions(
    top: Table, base: TreeSpec, fab: Fabrication, ratio: float | None, length: float
) -> tuple:
    """The ``[[regions]]`` of a tree design (see the module notes).

    Parameters
    ----------
    top : Table
        The design file.
    base : TreeSpec
        The design's ``[tree]`` as read for its shared trunk (no splits).
    fab : Fabrication
    ratio : float or None
        ``[tree] velocity_ratio`` when given (area-growth: each region's growth per generation
        follows from its own count of generations).
    length : float
        ``[tree] length``: the nominal length of the regions' distributing channels [m].

    Returns
    -------
    tuple of RegionSpec

    Raises
    ------
    SpecError
        A region without a name, a flow fraction or a bed count; names that repeat; flow
        fractions that do not sum to 1; fewer than 2 or more than :data:`MAX_REGIONS` regions.
    """
    tables = top.tables("regions")
    if not 2 <= len(tables) <= MAX_REGIONS:
        raise top.error(
            "regions",
            f"give 2 to {MAX_REGIONS} [[regions]] (got {len(tables)}); a single culture "
            "region is the [bed] table, which also takes a footprint",
        )
    out = []
    seen: set[str] = set()
    for i, table in enumerate(tables):  # a handful of regions
        table.only(REGION_KEYS)
        name = table.string("name")
        if not _NAME.match(name):
            raise table.error(
                "name",
                f"{name!r} is not a region name: 1 to 40 letters, digits, '_' or '-' (it "
                "names the region's channels and nodes)",
            )
        if name in seen:
            raise table.error("name", f"region {name!r} is named twice; every region needs its own")
        seen.add(name)
        fraction = float(table.quantity("flow_fraction", "dimensionless", maximum=1.0))
        if not any(k in table for k in ("bed_channels", "splits", "generations")):
            raise table.error(
                None,
                f"region {name!r} has no bed count: give bed_channels (e.g. 16) or splits "
                "(e.g. [2, 2, 2, 2])",
            )
        splits, note = _splits(table)
        if not splits:
            raise table.error("bed_channels", f"region {name!r} needs at least 2 bed channels")
        label = f"region {name!r}"
        bed = read_bed(table, fab, label)
        cell = table.string("cell_type", None)
        targets = base.targets if cell is None else _cell_targets(base.targets, cell, table)
        n = len(splits)
        growth = base.growth if ratio is None else float(ratio) ** (1.0 / n)
        tree = dataclasses.replace(
            base,
            name=f"{base.name} ({label})",
            flow=base.flow * fraction,
            generations=n,
            splits=splits,
            split_note=note,
            bed=bed,
            targets=targets,
            trunk_width=None,
            trunk_depth=None,
            growth=growth,
            lengths=(length,) * n,
            regions=(),
        )
        out.append(RegionSpec(name, fraction, tree, cell, table.path or f"regions[{i}]"))
    total = math.fsum(r.flow_fraction for r in out)
    if abs(total - 1.0) > FRACTION_TOLERANCE:
        shown = " + ".join(f"{r.name} {r.flow_fraction:.6g}" for r in out)
        raise top.error(
            "regions",
            f"the flow fractions sum to {total:.12g} ({shown}); they must sum to 1 within "
            f"{FRACTION_TOLERANCE:g}",
        )
    return tuple(out)
