"""Files of ``chipflow analyse``: results.json and the field shear map, all or nothing."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from chipflow.export.outdir import staged_folder

__all__ = ["write_analysis"]


def write_analysis(analysis, results: dict[str, Any], outdir: str | Path) -> list[Path]:
    """Write ``results.json`` and ``field.svg`` of a mask analysis into ``outdir``.

    Parameters
    ----------
    analysis : MaskAnalysis
    results : dict
        The JSON-able results (SI values and their units).
    outdir : str or path-like

    Returns
    -------
    list of pathlib.Path
    """
    from chipflow.report import svg_text
    from chipflow.report.field_figure import field_shear_figure

    outdir = Path(outdir)
    figure = svg_text(field_shear_figure(analysis.solution, analysis.window))
    text = json.dumps(results, indent=2, sort_keys=True, allow_nan=False) + "\n"
    with staged_folder(outdir) as stage:
        (stage / "results.json").write_bytes(text.encode("utf-8"))
        (stage / "field.svg").write_bytes(figure.encode("utf-8"))
    return [outdir / "results.json", outdir / "field.svg"]
