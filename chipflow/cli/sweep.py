"""``chipflow sweep``: a grid over design-file keys, every point built and checked."""

from __future__ import annotations

from pathlib import Path

import click

from chipflow.cli.common import WHOLE, format_table, settings_option
from chipflow.cli.progress import progress_bar

__all__ = ["command"]


@click.command("sweep")
@click.argument("design", type=click.Path(dir_okay=False, path_type=str))
@click.option(
    "--vary",
    "specs",
    multiple=True,
    required=True,
    metavar="KEY=VALUES",
    help="A key and its values: FROM..TO:N or a comma list; once or twice.",
)
@click.option(
    "-o",
    "--output",
    "outdir",
    type=click.Path(file_okay=False, path_type=str),
    help="Output folder (default: <design name>-sweep).",
)
@click.option("--scheduler", metavar="ADDRESS", help="Run on this Dask distributed scheduler.")
@click.option("--workers", type=WHOLE(), help="Local processes (default: one per CPU).")
@click.option(
    "--allow-large",
    is_flag=True,
    help="Run even when the workers need more memory than this process may use.",
)
@settings_option
def command(
    design: str,
    specs: tuple[str, ...],
    outdir: str | None,
    scheduler: str | None,
    workers,
    settings: tuple[str, ...],
    allow_large: bool,
) -> int:
    """Size, draw and check DESIGN at every point of a grid over one or two keys.

    Writes sweep.csv (one row per point) and sweep.svg (a heat map of the worst margin of
    the floor shear to the window, with each point's status) into OUTDIR.

    \b
    Example:
      chipflow sweep demo_endothelial_bed \\
          --vary tree.flow=8uL/min..16uL/min:5 \\
          --vary "fabrication.depths=[50um],[60um]"
    """
    from chipflow.export.sweep import sweep_to_folder
    from chipflow.spec.bundled import resolve_design

    with progress_bar("grid points") as progress:
        sweep, files = sweep_to_folder(
            resolve_design(design),
            specs,
            outdir,
            scheduler=scheduler,
            workers=workers,
            progress=progress,
            settings=settings,
            allow_large=allow_large,
            notice=lambda text: click.echo(f"chipflow: {text}", err=True),
        )
    from chipflow.display import fraction
    from chipflow.variation.grid import value_text

    rows = []
    for r in sweep.rows:
        margin = r["worst_shear_margin"]
        rows.append([*map(value_text, r["values"]), r["status"], fraction(margin, signed=True)])
    header = [a.key for a in sweep.axes] + ["status", "worst margin"]
    click.echo(format_table(rows, header, "l" * len(sweep.axes) + "lr"))
    counts = {
        s: sum(r["status"] == s for r in sweep.rows) for s in ("pass", "warn", "fail", "error")
    }
    click.echo(", ".join(f"{n} {s}" for s, n in counts.items()))
    click.echo(f"wrote {len(files)} files to {Path(files[0]).parent}/")
    return 0
