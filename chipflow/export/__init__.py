"""Fabrication export: DXF for the cleanroom, GDSII for the mask maker, SVG/PNG previews.

Every command that writes a folder writes it through :func:`staged_folder`, which replaces
the folder as a whole. Exporters read a :class:`chipflow.layout.model.Layout` (and, for
colouring previews only, an array of per-channel values); they never recompute physics. The
names below are imported from their modules on first use, so importing one exporter does not
load the others.
"""

from __future__ import annotations

import importlib
from typing import Any

_WHERE = {
    "DxfOptions": "chipflow.export.dxf",
    "design_hash": "chipflow.export.dxf",
    "write_dxf": "chipflow.export.dxf",
    "GdsOptions": "chipflow.export.gds",
    "write_gds": "chipflow.export.gds",
    "plot_layout": "chipflow.export.preview",
    "write_preview": "chipflow.export.preview",
    "staged_folder": "chipflow.export.outdir",
}

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


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        return getattr(importlib.import_module(_WHERE[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted({*globals(), *__all__})
