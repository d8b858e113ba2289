"""The ``[export]`` section of a design file: how the mask files are written.

.. code-block:: toml

    [export]
    units = "um"              # DXF drawing unit: "um" (default) or "mm"
    dxf_version = "R2000"     # "R2000" (default, records the unit) ... "R2018", or "R12"
    holes = "split"           # islands: "split" (default) into hole-free pieces, or "keyhole"
    polarity = "channels"     # "channels" (default) or "inverse" (all but the channels)
    mirror = false            # true: mirrored, the chip as seen from the chrome side
    gds_vertex_limit = 8190   # most vertices per GDSII polygon (199 for old readers)

Polarity, mirroring and hole handling apply to both the DXF and the GDSII file.
"""

from __future__ import annotations

from dataclasses import dataclass

from chipflow.export.dxf import DXF_UNITS, DXF_VERSIONS, DxfOptions
from chipflow.export.gds import GdsOptions
from chipflow.export.geometry import HOLES, POLARITIES
from chipflow.spec.reader import Table

__all__ = ["ExportSettings", "read_export", "EXPORT_KEYS"]

EXPORT_KEYS = ("units", "dxf_version", "holes", "polarity", "mirror", "gds_vertex_limit")


@dataclass(frozen=True)
class ExportSettings:
    """Options for both mask files.

    Attributes
    ----------
    dxf : DxfOptions
    gds : GdsOptions
    """

    dxf: DxfOptions = DxfOptions()
    gds: GdsOptions = GdsOptions()


def read_export(top: Table, design_hash: str = "") -> ExportSettings:
    """Read ``[export]`` from the top-level table (all defaults when absent).

    Parameters
    ----------
    top : Table
        The top-level table of the design file.
    design_hash : str
        Hash of the design file (see :func:`chipflow.export.dxf.design_hash`) for the notes.

    Examples
    --------
    >>> from chipflow.spec.reader import parse_design_text
    >>> s = read_export(parse_design_text('[export]\\npolarity = "inverse"\\nmirror = true'))
    >>> s.dxf.polarity, s.dxf.mirror, s.gds.polarity, s.dxf.units, s.dxf.version
    ('inverse', True, 'inverse', 'um', 'R2000')
    """
    table = top.table("export", None)
    if table is None:
        return ExportSettings(
            DxfOptions(design_hash=design_hash), GdsOptions(design_hash=design_hash)
        )
    table.only(EXPORT_KEYS)
    default_dxf, default_gds = DxfOptions(), GdsOptions()
    polarity = table.choice("polarity", POLARITIES, default_dxf.polarity)
    mirror = table.boolean("mirror", default_dxf.mirror)
    holes = table.choice("holes", HOLES, default_dxf.holes)
    dxf = DxfOptions(
        units=table.choice("units", tuple(DXF_UNITS), default_dxf.units),
        version=table.choice("dxf_version", DXF_VERSIONS, default_dxf.version),
        holes=holes,
        polarity=polarity,
        mirror=mirror,
        design_hash=design_hash,
    )
    limit = table.number(
        "gds_vertex_limit", default_gds.vertex_limit, integer=True, minimum=5, maximum=8190
    )
    gds = GdsOptions(
        vertex_limit=limit, polarity=polarity, mirror=mirror, design_hash=design_hash, holes=holes
    )
    return ExportSettings(dxf, gds)
