"""``chipflow vary``: how fabrication and operating tolerances spread the chip's numbers."""

from __future__ import annotations

import click

from chipflow.cli.common import WHOLE, settings_option
from chipflow.cli.progress import progress_bar
from chipflow.errors import SpecError
from chipflow.spec.tolerances import DISTRIBUTIONS, MAX_SAMPLES, parse_tolerance

__all__ = ["command", "TOLERANCE"]


class TOLERANCE(click.ParamType):
    """A tolerance option: a fraction (``10%``) or, where allowed, a length (``2um``)."""

    name = "tolerance"

    def __init__(self, field: str) -> None:
        self.field = field

    def convert(self, value, param, ctx):
        if isinstance(value, tuple):
            return value
        try:
            parsed = parse_tolerance(value, self.field, f"--{self.field}-tolerance")
        except SpecError as exc:
            self.fail(str(exc), param, ctx)
        return parsed if self.field == "depth" else parsed[0]


@click.command("vary")
@click.argument("design", type=click.Path(dir_okay=False, path_type=str))
@click.option("--samples", type=WHOLE(), help=f"Default 1000 (at most {MAX_SAMPLES:,}).")
@click.option("--seed", type=WHOLE(), help="Random seed, 0 to 2^32-1 (default 0).")
@click.option(
    "--depth-tolerance", "depth", type=TOLERANCE("depth"), help="Per mould level: 10% or 5um."
)
@click.option("--width-tolerance", "width", type=TOLERANCE("width"), help="Mask bias, e.g. 2um.")
@click.option("--flow-tolerance", "flow", type=TOLERANCE("flow"), help="Inlet supply, e.g. 2%.")
@click.option("--viscosity-tolerance", "viscosity", type=TOLERANCE("viscosity"), help="e.g. 5%.")
@click.option("--distribution", type=click.Choice(DISTRIBUTIONS), help="Default uniform.")
@click.option(
    "-o",
    "--output",
    "outdir",
    type=click.Path(file_okay=False, path_type=str),
    help="Output folder (default: <design name>-tolerances).",
)
@click.option("--json", "as_json", is_flag=True, help="Print the results as JSON (SI units).")
@click.option("--scheduler", metavar="ADDRESS", help="Run on this Dask distributed scheduler.")
@click.option("--workers", type=WHOLE(), help="Local processes (default: one per CPU).")
@click.option(
    "--allow-large",
    is_flag=True,
    help="Run even when the samples need more memory than this process may use.",
)
@settings_option
def command(
    design: str,
    samples: int | None,
    seed: int | None,
    depth,
    width,
    flow,
    viscosity,
    distribution: str | None,
    outdir: str | None,
    as_json: bool,
    scheduler: str | None,
    workers: int | None,
    settings: tuple[str, ...],
    allow_large: bool,
) -> int:
    """Spread DESIGN's floor shear, residence time and pressures over its tolerances.

    One depth error per mould level, one width bias for the whole mask, one supply and one
    viscosity error per chip; options override the design's [tolerances] section. Writes
    report.html, results.json and one figure per level into OUTDIR. A run estimated to take
    more than ten seconds says how long first; one that needs more memory than this process
    may use is refused with its estimate (--allow-large runs it anyway).

    \b
    Example:
      chipflow vary demo_endothelial_bed --depth-tolerance 10% \\
          --width-tolerance 2um --samples 10000 -o demo-tolerances
    """
    from chipflow.export.variation import vary_to_folder
    from chipflow.report.variation import variation_summary
    from chipflow.spec.bundled import resolve_design

    options = {
        "depth": depth,
        "width": width,
        "flow": flow,
        "viscosity": viscosity,
        "distribution": distribution,
        "samples": samples,
        "seed": seed,
    }
    with progress_bar("samples", quiet=as_json) as progress:
        variation, files = vary_to_folder(
            resolve_design(design),
            options,
            outdir,
            scheduler=scheduler,
            workers=workers,
            progress=progress,
            settings=settings,
            allow_large=allow_large,
            notice=lambda text: click.echo(f"chipflow: {text}", err=True),
        )
    if as_json:
        from chipflow.export.variation import results_text

        click.echo(results_text(variation.results), nl=False)
        return 0
    click.echo(variation_summary(variation.results))
    click.echo(f"wrote {len(files)} files to {files[0].parent}/")
    return 0
