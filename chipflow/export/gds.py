"""GDSII mask file for the mask maker.

One cell named after the design; database unit 1 nm, user unit 1 um. Mask level ``n``
(shallowest first) is GDSII layer ``n``, datatype 0. GDSII polygons have no holes: islands are
resolved as in the DXF file (by default cut into hole-free pieces that meet edge to edge, so
both files carry the same shapes and the chip is prepared once for both; ``holes="keyhole"``
joins each island to its outline instead), and polygons with more vertices than the limit are
fractured. The chip
outline, the port marks and a text label with the notes go on separate layers
(:data:`OUTLINE_GDS_LAYER`, :data:`PORT_GDS_LAYER`, :data:`NOTES_GDS_LAYER`) that are not mask
levels, as do the culture regions' outlines (:data:`REGION_GDS_LAYER`). The file carries a
fixed timestamp, so the same layout gives the same bytes.
"""

from __future__ import annotations

import datetime
import os
import re
from dataclasses import dataclass
from pathlib import Path

from chipflow.errors import SpecError
from chipflow.export._files import atomic_write
from chipflow.export.geometry import HOLES, POLARITIES, prepare_layout
from chipflow.layout.model import Layout

__all__ = [
    "GdsOptions",
    "write_gds",
    "GDS_UNIT",
    "GDS_PRECISION",
    "OUTLINE_GDS_LAYER",
    "PORT_GDS_LAYER",
    "NOTES_GDS_LAYER",
    "REGION_GDS_LAYER",
    "FIXED_TIMESTAMP",
]

GDS_UNIT = 1e-6  # user unit [m]
GDS_PRECISION = 1e-9  # database unit [m]
OUTLINE_GDS_LAYER = 100
PORT_GDS_LAYER = 101
NOTES_GDS_LAYER = 102
#: The culture regions' outlines (not a mask level).
REGION_GDS_LAYER = 103
#: Written as the library's creation and modification time, so that files are reproducible.
FIXED_TIMESTAMP = datetime.datetime(2000, 1, 1, 0, 0, 0)


@dataclass(frozen=True)
class GdsOptions:
    """How the GDSII file is written.

    Attributes
    ----------
    vertex_limit : int
        Most vertices per polygon; larger polygons are fractured. Default 8190, the most one
        GDSII XY record can hold (8191 points with the closing one). 199 (the limit of the
        original stream format) for old readers; any value from 5 to 8190 is accepted.
    polarity : {"channels", "inverse"}
        As :class:`chipflow.export.dxf.DxfOptions`; default "channels".
    mirror : bool
        As :class:`chipflow.export.dxf.DxfOptions`; default False.
    design_hash : str
        Hash of the design file, written in the notes label.
    holes : {"split", "keyhole"}
        As :class:`chipflow.export.dxf.DxfOptions`; default "split", the same hole-free
        pieces as the DXF file.
    """

    vertex_limit: int = 8190
    polarity: str = "channels"
    mirror: bool = False
    design_hash: str = ""
    holes: str = "split"

    def __post_init__(self) -> None:
        limit = self.vertex_limit
        if isinstance(limit, bool) or not isinstance(limit, int) or not 5 <= limit <= 8190:
            raise SpecError(
                f"GDSII option vertex_limit: expected a whole number from 5 to 8190 "
                f"(8190 usual, 199 for old readers), got {limit!r}"
            )
        if self.polarity not in POLARITIES:
            raise SpecError(
                f"GDSII option polarity: unknown value {self.polarity!r} "
                f"(valid: {', '.join(POLARITIES)})"
            )
        if not isinstance(self.mirror, bool):
            raise SpecError(f"GDSII option mirror: expected true or false, got {self.mirror!r}")
        if self.holes not in HOLES:
            raise SpecError(
                f"GDSII option holes: unknown value {self.holes!r} (valid: {', '.join(HOLES)})"
            )


def cell_name(name: str) -> str:
    """A GDSII cell name from the design name: letters, digits and ``_``, at most 32 characters.

    Examples
    --------
    >>> cell_name("liver bed v2.1")
    'LIVER_BED_V2_1'
    """
    clean = re.sub(r"[^A-Za-z0-9_]+", "_", name).strip("_").upper()
    return (clean or "CHIP")[:32]


def write_gds(layout: Layout, path: str | os.PathLike, options: GdsOptions = GdsOptions()) -> Path:
    """Write the mask levels of a layout to a GDSII file.

    Parameters
    ----------
    layout : Layout
        The drawn chip (coordinates [m], on the mask grid ``layout.grid`` [m]).
    path : str or path-like
        Output file; written atomically.
    options : GdsOptions
        Vertex limit, polarity, mirroring and design hash.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    import gdstk

    prepared = prepare_layout(
        layout, polarity=options.polarity, mirror=options.mirror, holes=options.holes
    )
    um = prepared.grid_nm / 1000  # micrometres per grid unit
    lib = gdstk.Library("CHIPFLOW", unit=GDS_UNIT, precision=GDS_PRECISION)
    cell = lib.new_cell(cell_name(layout.name))
    for level, layer in enumerate(prepared.layers, start=1):
        cell.add(*(gdstk.Polygon(ring * um, layer=level, datatype=0) for ring in layer.rings))
    cell.add(gdstk.Polygon(prepared.outline * um, layer=OUTLINE_GDS_LAYER, datatype=0))
    for _, ring in prepared.ports:
        cell.add(gdstk.Polygon(ring * um, layer=PORT_GDS_LAYER, datatype=0))
    for _, ring in prepared.regions:
        cell.add(gdstk.Polygon(ring * um, layer=REGION_GDS_LAYER, datatype=0))
    notes = [
        f"design {layout.name}",
        "units um",
        f"polarity {options.polarity}",
        f"mirror {'yes, chrome side' if options.mirror else 'no'}",
        f"hash {options.design_hash or 'not given'}",
    ]
    x0, y0 = prepared.outline.min(axis=0) * um
    cell.add(gdstk.Label("; ".join(notes), (x0, y0), anchor="nw", layer=NOTES_GDS_LAYER))
    for (name, _), centre in zip(prepared.ports, prepared.port_centres, strict=True):
        cell.add(gdstk.Label(name, tuple(centre * um), layer=PORT_GDS_LAYER))

    def save(tmp: Path) -> None:
        lib.write_gds(tmp, max_points=options.vertex_limit, timestamp=FIXED_TIMESTAMP)

    return atomic_write(path, save, "GDSII mask file")
