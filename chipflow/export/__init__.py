"""Fabrication export: DXF for the cleanroom, GDSII for the mask maker, SVG/PNG previews.

Every command that writes a folder writes it through :func:`staged_folder`, which replaces
the folder as a whole. Exporters read a :class:`chipflow.layout.model.Layout` (and, for
colouring previews only, an array of per-channel values); they never recompute physics.
"""

from chipflow.export.dxf import DxfOptions, design_hash, write_dxf
from chipflow.export.gds import GdsOptions, write_gds
from chipflow.export.outdir import staged_folder
from chipflow.export.preview import plot_layout, write_preview

__all__ = [
    "DxfOptions",
    "GdsOptions",
    "design_hash",
    "plot_layout",
    "write_dxf",
    "write_gds",
    "write_preview",
    "staged_folder",
]
