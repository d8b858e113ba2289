"""The output folder of a design sweep (``chipflow sweep``), written together or not at all.

==========================  =====================================================================
``sweep.csv``               one row per grid point: the swept values, status, worst window
                            margin, floor shear, pressures, bed residence time and flow spread
``sweep.svg``               heat map of the worst window margin with every point's status
==========================  =====================================================================
"""

from __future__ import annotations

import csv
import io
from collections.abc import Sequence
from pathlib import Path

from chipflow.export.bundle import _csv_column
from chipflow.export.outdir import staged_folder
from chipflow.variation.sweep import ROW_KEYS, Sweep

__all__ = ["sweep_csv", "write_sweep", "sweep_to_folder", "SWEEP_FILES"]

SWEEP_FILES = ("sweep.csv", "sweep.svg")


def sweep_csv(sweep: Sweep) -> str:
    """The sweep as CSV text: SI units in the header, empty cells where a value is undefined."""
    import numpy as np

    header = ["point", *(a.key for a in sweep.axes), "status"]
    header += [f"{k} [{u}]" for k, u in ROW_KEYS.items()] + ["failed_checks", "message"]
    columns = [[str(i) for i in range(len(sweep.rows))]]
    for j in range(len(sweep.axes)):
        columns.append([r["values"][j] for r in sweep.rows])
    columns.append([r["status"] for r in sweep.rows])
    for key in ROW_KEYS:
        values = np.array([np.nan if r[key] is None else r[key] for r in sweep.rows], dtype=float)
        columns.append(_csv_column(values))
    columns.append(["; ".join(r["failed"]) for r in sweep.rows])
    columns.append([" ".join(str(r["message"]).split()) for r in sweep.rows])
    text = io.StringIO()
    writer = csv.writer(text, lineterminator="\n")
    writer.writerow(header)
    writer.writerows(zip(*columns, strict=True))
    return text.getvalue()


def write_sweep(sweep: Sweep, outdir: str | Path) -> list[Path]:
    """Write sweep.csv and the heat map sweep.svg into ``outdir`` (staged); return the files."""
    from chipflow.report.figures import svg_text
    from chipflow.report.sweep import heat_map

    outdir = Path(outdir)
    with staged_folder(outdir) as stage:
        (stage / "sweep.csv").write_bytes(sweep_csv(sweep).encode("utf-8"))
        (stage / "sweep.svg").write_bytes(svg_text(heat_map(sweep)).encode("utf-8"))
    return [outdir / n for n in SWEEP_FILES]


def sweep_to_folder(
    design: str | Path,
    specs,
    outdir: str | Path | None = None,
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    progress=None,
    settings: Sequence[str] = (),
    allow_large: bool = False,
    notice=None,
) -> tuple[Sweep, list[Path]]:
    """Parse the ``--vary`` options, run the sweep of a design file and write its outputs.

    ``settings`` (``--set KEY=VALUE``) change the design's values first, as editing the file
    would. Default output folder: ``<design name>-sweep``.
    """
    from chipflow.build import read_design_source
    from chipflow.export.bundle import _slug
    from chipflow.variation.grid import parse_axis
    from chipflow.variation.sweep import sweep_design

    axes = [parse_axis(s) for s in specs]
    if len(axes) > 2:
        from chipflow.errors import SpecError

        raise SpecError("--vary: at most two keys (a heat map has two axes)")
    from chipflow.variation.execute import check_scheduler

    source = read_design_source(design, settings)
    check_scheduler(scheduler)  # a bad address is one line now, not after the first point
    sweep = sweep_design(
        source,
        axes,
        scheduler=scheduler,
        workers=workers,
        progress=progress,
        allow_large=allow_large,
        notice=notice,
    )
    target = Path(outdir) if outdir is not None else Path(f"{_slug(sweep.name)}-sweep")
    return sweep, write_sweep(sweep, target)
