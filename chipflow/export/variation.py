"""The output folder of a tolerance run (``chipflow vary``), written together or not at all.

==========================  =====================================================================
``report.html``             yield, per-level percentiles, worst corner, ranking, figures, cautions
``results.json``            the same in SI units with a "units" map
``shear-<level>.svg``       one figure per seeded level: the floor-shear spread against the window
==========================  =====================================================================

The folder is staged (:mod:`chipflow.export.outdir`): files replace those of OUTDIR only when
every one of them was written. The same design, tolerances and seed give the same bytes.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from chipflow.export.bundle import _finite, _slug
from chipflow.export.outdir import staged_folder
from chipflow.variation.vary import Variation

__all__ = ["write_variation", "vary_to_folder", "results_text"]


def write_variation(variation: Variation, outdir: str | Path) -> list[Path]:
    """Write the report, the results and the level figures of ``variation`` into ``outdir``.

    Returns the files written.
    """
    from chipflow.report.variation import level_figures, variation_html

    outdir = Path(outdir)
    figures = level_figures(variation.results, variation.samples.shear)
    captions = {
        f"Floor shear of {lv['label']} over the samples": figures[f"shear-{lv['label']}.svg"]
        for lv in variation.results["levels"]
        if f"shear-{lv['label']}.svg" in figures
    }
    names = ["report.html", "results.json", *figures]
    with staged_folder(outdir) as stage:
        for name, svg in figures.items():
            (stage / name).write_bytes(svg.encode("utf-8"))
        html = variation_html(variation.results, captions)
        (stage / "report.html").write_bytes(html.encode("utf-8"))
        (stage / "results.json").write_bytes(results_text(variation.results).encode("utf-8"))
    return [outdir / n for n in names]


def results_text(results: dict[str, Any]) -> str:
    """The results as JSON text (SI units, null for non-finite values)."""
    return json.dumps(_finite(results), indent=2, allow_nan=False) + "\n"


def vary_to_folder(
    design: str | Path,
    options: dict[str, Any],
    outdir: str | Path | None = None,
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    progress: Callable[[int, int], None] | None = None,
    settings: Sequence[str] = (),
    allow_large: bool = False,
    notice: Callable[[str], None] | None = None,
) -> tuple[Variation, list[Path]]:
    """Build a design file, run its tolerances and write the outputs (``chipflow vary``).

    Parameters
    ----------
    design : str or path-like
        The design file; its ``[tolerances]`` section gives the defaults.
    options : dict
        Command-line values overriding the section (see
        :meth:`chipflow.spec.tolerances.Tolerances.with_options`); None leaves a value alone.
    outdir : str or path-like, optional
        Output folder; default ``<design name>-tolerances``.
    scheduler, workers, progress, allow_large, notice
        See :func:`chipflow.variation.vary.vary_build`.
    settings : sequence of str, optional
        ``KEY=VALUE`` changes to the design file's values (``--set``).
    """
    from chipflow.build import build_design, read_design_source
    from chipflow.spec.tolerances import read_tolerances
    from chipflow.variation.execute import check_scheduler
    from chipflow.variation.vary import vary_build

    source = read_design_source(design, settings)
    tolerances = read_tolerances(source.top).with_options(**options)
    check_scheduler(scheduler)  # a bad address is one line now, not after the build
    build = build_design(source, field=False)  # the field plays no part in the tolerances
    variation = vary_build(
        build,
        tolerances,
        scheduler=scheduler,
        workers=workers,
        progress=progress,
        allow_large=allow_large,
        notice=notice,
    )
    target = Path(outdir) if outdir is not None else Path(f"{_slug(build.name)}-tolerances")
    return variation, write_variation(variation, target)
