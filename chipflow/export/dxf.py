"""DXF mask file for the cleanroom.

What the file holds:

- one layer per mask level, named ``MASK<n>_DEPTH_<depth>UM`` (``P`` for the decimal point,
  e.g. ``MASK2_DEPTH_12P5UM``), holding only closed zero-width polylines: merged per level (no
  overlaps), no self-crossings, no repeated consecutive vertices, no hatches, every vertex on
  the mask grid; islands resolved so that no filled shape contains another;
- ``CHIP_OUTLINE`` (the chip edge), ``PORT_MARKS`` (punch positions, circles as polygons with
  a chord error below one grid step) and ``NOTES`` (text stating design, units, polarity,
  mirroring, hole handling, grid, mask levels and the design hash), and ``CULTURE_REGION``
  (each culture region's outline, the rectangle its bed lies in, when the design has one: a
  ``[bed] footprint`` or ``[[regions]]``; not a mask level). Nothing is drawn on layer ``0``;
- no timestamps or random identifiers: the same layout and options give the same bytes.
"""

from __future__ import annotations

import array
import contextlib
import hashlib
import logging
import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from chipflow.errors import SpecError
from chipflow.export._files import atomic_write
from chipflow.export.geometry import HOLES, POLARITIES, PreparedLayout, prepare_layout
from chipflow.layout.model import Layout

__all__ = [
    "DxfOptions",
    "write_dxf",
    "design_hash",
    "DXF_UNITS",
    "DXF_VERSIONS",
    "OUTLINE_LAYER",
    "PORT_LAYER",
    "NOTES_LAYER",
    "REGION_LAYER",
]

#: Drawing units: name -> (nanometres per drawing unit, $INSUNITS code, word for the notes).
DXF_UNITS = {"um": (1000, 13, "micrometre"), "mm": (1_000_000, 4, "millimetre")}
#: DXF versions we write. R12 has no $INSUNITS (units are stated in the notes only).
DXF_VERSIONS = ("R12", "R2000", "R2004", "R2007", "R2010", "R2013", "R2018")
OUTLINE_LAYER = "CHIP_OUTLINE"
PORT_LAYER = "PORT_MARKS"
#: Layer of the culture regions' outlines (not a mask level).
REGION_LAYER = "CULTURE_REGION"
NOTES_LAYER = "NOTES"

# Colour numbers (DXF colour index) for the mask levels, in level order, then cycling.
_MASK_COLOURS = (5, 1, 3, 6, 4, 30)


@dataclass(frozen=True)
class DxfOptions:
    """How the DXF mask file is written.

    Attributes
    ----------
    units : {"um", "mm"}
        Drawing unit. Default "um": mask features are tens of micrometres and the grid is a
        fraction of one, so micrometre numbers are short and exact.
    version : str
        DXF version, "R12" or newer ("R2000", ..., "R2018"). Default "R2000": the oldest
        version that records the drawing unit in the header ($INSUNITS), so a reader cannot
        silently scale the chip by 1000; it is read by practically every CAD and mask
        conversion tool. "R12" is accepted by even older tools; the units are then stated in
        the notes only.
    holes : {"split", "keyhole"}
        Default "split": islands are removed by cutting shapes into hole-free simple polygons,
        the form every reader fills correctly. "keyhole" joins each island to its outline by a
        zero-width cut, one outline per connected shape.
    polarity : {"channels", "inverse"}
        "channels" (default): drawn shapes are the channels, as the design is drawn.
        "inverse": drawn shapes are everything inside the chip outline except the channels.
    mirror : bool
        Mirror left to right about the chip centre (the chip as seen from the chrome side of
        the mask). Default False: the chip as drawn.
    design_hash : str
        Hash of the design file, written in the notes (see :func:`design_hash`).
    """

    units: str = "um"
    version: str = "R2000"
    holes: str = "split"
    polarity: str = "channels"
    mirror: bool = False
    design_hash: str = ""

    def __post_init__(self) -> None:
        for name, valid in (
            ("units", tuple(DXF_UNITS)),
            ("version", DXF_VERSIONS),
            ("holes", HOLES),
            ("polarity", POLARITIES),
        ):
            value = getattr(self, name)
            if value not in valid:
                raise SpecError(
                    f"DXF option {name}: unknown value {value!r} (valid: {', '.join(valid)})"
                )
        if not isinstance(self.mirror, bool):
            raise SpecError(f"DXF option mirror: expected true or false, got {self.mirror!r}")


def design_hash(data: bytes | str) -> str:
    """Short fingerprint of a design file for the mask notes.

    Examples
    --------
    >>> design_hash("[tree]\\n")
    'sha256:247f3db159e99118'
    """
    raw = data.encode("utf-8") if isinstance(data, str) else data
    return "sha256:" + hashlib.sha256(raw).hexdigest()[:16]


@contextlib.contextmanager
def _fixed_metadata() -> Iterator[None]:
    """Let ezdxf write fixed dates and identifiers instead of the clock and random GUIDs."""
    import ezdxf

    old = ezdxf.options.write_fixed_meta_data_for_testing
    ezdxf.options.write_fixed_meta_data_for_testing = True
    try:
        yield
    finally:
        ezdxf.options.write_fixed_meta_data_for_testing = old


def _ascii(text: str) -> str:
    return text.encode("ascii", "replace").decode("ascii")


def notes_lines(layout: Layout, prepared: PreparedLayout, options: DxfOptions) -> list[str]:
    """The annotation text, one line per entry."""
    _, _, word = DXF_UNITS[options.units]
    polarity = {
        "channels": "drawn shapes are the channels",
        "inverse": "drawn shapes are everything inside the chip outline except the channels",
    }[options.polarity]
    mirror = (
        "yes, mirrored left to right (chip as seen from the chrome side)"
        if options.mirror
        else "no (chip as drawn, seen from the channel side)"
    )
    holes = {
        "split": "islands cut into hole-free pieces that meet edge to edge",
        "keyhole": "islands joined to their outlines by zero-width keyhole cuts",
    }[options.holes]
    grid_um = prepared.grid_nm / 1000
    lines = [
        f"chipflow mask, design: {_ascii(layout.name)}",
        f"units: 1 drawing unit = 1 {word} ({options.units})",
        f"polarity: {polarity}",
        f"mirror: {mirror}",
        f"holes: {holes}",
        f"grid: {grid_um:g} um",
        f"design hash: {options.design_hash or 'not given'}",
    ]
    for layer in prepared.layers:
        lines.append(f"layer {layer.name}: mask level {layer.depth * 1e6:g} um deep")
    lines.append(f"layer {OUTLINE_LAYER}: chip outline (not a mask level)")
    lines.append(f"layer {PORT_LAYER}: punched ports (not a mask level)")
    if prepared.regions:
        lines.append(f"layer {REGION_LAYER}: culture region outlines (not a mask level)")
    return lines


def _set_points(entity, points: np.ndarray) -> None:
    """Give an empty LWPOLYLINE its vertices ((n, 2) array) in one step.

    ezdxf keeps a polyline's vertices as one flat array of (x, y, start width, end width,
    bulge); filling it from numpy gives the same entity as adding the points one by one
    (``add_lwpolyline(points, format="xy")``) without the Python work per vertex. Should the
    storage be other than expected, the points are added one by one.
    """
    store = getattr(getattr(entity, "lwpoints", None), "values", None)
    if not isinstance(store, array.array) or store.typecode != "d" or len(store):
        entity.set_points(points.tolist(), format="xy")
        return
    flat = np.zeros((len(points), 5))
    flat[:, :2] = points
    store.frombytes(flat.tobytes())


def write_dxf(layout: Layout, path: str | os.PathLike, options: DxfOptions = DxfOptions()) -> Path:
    """Write the mask levels of a layout to a DXF file.

    Parameters
    ----------
    layout : Layout
        The drawn chip (coordinates [m], on the mask grid ``layout.grid`` [m]).
    path : str or path-like
        Output file; written atomically.
    options : DxfOptions
        Units, DXF version, hole handling, polarity, mirroring and design hash.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    import ezdxf

    prepared = prepare_layout(
        layout, polarity=options.polarity, mirror=options.mirror, holes=options.holes
    )
    nm_per_unit, insunits, _ = DXF_UNITS[options.units]
    scale = prepared.grid_nm  # nanometres per grid unit (a whole number)

    def coords(ring) -> list[list[float]]:
        # whole nanometres (exact in int64), then one correctly rounded division each
        return ((ring.astype("int64") * scale) / nm_per_unit).tolist()

    r12 = options.version == "R12"
    with _fixed_metadata():
        if r12:
            # R12 has no $INSUNITS: ezdxf.new() sets one anyway and logs that it is dropped
            ezdxf_log = logging.getLogger("ezdxf")
            level = ezdxf_log.level
            ezdxf_log.setLevel(logging.ERROR)
            try:
                doc = ezdxf.new(options.version, setup=False)
            finally:
                ezdxf_log.setLevel(level)
        else:
            doc = ezdxf.new(options.version, setup=False, units=insunits)
            doc.header["$MEASUREMENT"] = 1  # metric
        for i, layer in enumerate(prepared.layers):
            doc.layers.add(layer.name, color=_MASK_COLOURS[i % len(_MASK_COLOURS)])
        doc.layers.add(OUTLINE_LAYER, color=8)
        doc.layers.add(PORT_LAYER, color=2)
        doc.layers.add(NOTES_LAYER, color=7)
        if prepared.regions:
            doc.layers.add(REGION_LAYER, color=3)
        msp = doc.modelspace()

        def polyline(ring, layer: str) -> None:
            if r12:
                msp.add_polyline2d(coords(ring), close=True, dxfattribs={"layer": layer})
                return
            entity = msp.add_lwpolyline((), format="xy", close=True, dxfattribs={"layer": layer})
            _set_points(entity, (ring.astype("int64") * scale) / nm_per_unit)

        for layer in prepared.layers:
            for ring in layer.rings:
                polyline(ring, layer.name)
        polyline(prepared.outline, OUTLINE_LAYER)
        for _, ring in prepared.ports:
            polyline(ring, PORT_LAYER)
        for _, ring in prepared.regions:
            polyline(ring, REGION_LAYER)
        # port names beside the marks, and the notes below the chip
        ymin = prepared.outline[:, 1].min()
        xmin = prepared.outline[:, 0].min()
        height_units = max(1, round((prepared.outline[:, 1].max() - ymin) / 50))
        height = height_units * scale / nm_per_unit
        for (name, ring), centre in zip(prepared.ports, prepared.port_centres, strict=True):
            x = ring[:, 0].max() + height_units
            insert = coords(centre.reshape(1, 2))[0]
            insert = ((x * scale) / nm_per_unit, insert[1])
            msp.add_text(
                _ascii(name), height=height, dxfattribs={"layer": PORT_LAYER, "insert": insert}
            )
        for k, line in enumerate(notes_lines(layout, prepared, options)):
            y = ymin - round(2 * (k + 2) * height_units)
            insert = (int(xmin) * scale / nm_per_unit, int(y) * scale / nm_per_unit)
            msp.add_text(line, height=height, dxfattribs={"layer": NOTES_LAYER, "insert": insert})

        def save(tmp: Path) -> None:
            doc.saveas(tmp)

        return atomic_write(path, save, "DXF mask file")
