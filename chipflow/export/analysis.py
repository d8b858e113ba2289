"""Files of ``chipflow analyse``: results.json and the field shear map, all or nothing."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from chipflow.export.outdir import staged_folder

__all__ = ["write_analysis"]


def write_analysis(
    analysis, results: dict[str, Any], outdir: str | Path, oxygen=None
) -> list[Path]:
    """Write ``results.json`` and ``field.svg`` of a mask analysis into ``outdir`` (and
    ``oxygen.svg`` with an oxygen map).

    Parameters
    ----------
    analysis : MaskAnalysis
    results : dict
        The JSON-able results (SI values and their units).
    outdir : str or path-like
    oxygen : FieldTransport, optional
        The oxygen on the field (:func:`chipflow.transport.field.mask_oxygen`).

    Returns
    -------
    list of pathlib.Path
    """
    from chipflow.report import svg_text
    from chipflow.report.field_figure import field_shear_figure

    outdir = Path(outdir)
    figure = svg_text(field_shear_figure(analysis.solution, analysis.window))
    names = ["results.json", "field.svg"]
    texts = [json.dumps(results, indent=2, sort_keys=True, allow_nan=False) + "\n", figure]
    if oxygen is not None:
        from chipflow.report.transport_figure import oxygen_map_figure

        names.append("oxygen.svg")
        texts.append(svg_text(oxygen_map_figure(oxygen)))
    with staged_folder(outdir) as stage:
        for name, text in zip(names, texts, strict=True):  # two or three files
            (stage / name).write_bytes(text.encode("utf-8"))
    return [outdir / name for name in names]
