"""``chipflow build`` and ``chipflow demo``: the whole job, design file to mask files and report."""

from __future__ import annotations

import sys
import time
from importlib import resources
from pathlib import Path

import click

from chipflow.cli.common import settings_option
from chipflow.export.bundle import build_to_folder
from chipflow.report.console import console_summary
from chipflow.spec.bundled import resolve_design

__all__ = ["command", "demo_command", "DEMO_DESIGN"]

#: The bundled demo design (a copy of designs/demo_endothelial_bed.toml).
DEMO_DESIGN = "demo.toml"


class _StageLine:
    """Shows the current stage on one line of a terminal's stderr; silent when piped."""

    def __init__(self, stream=None) -> None:
        self.stream = stream or sys.stderr
        self.live = bool(getattr(self.stream, "isatty", lambda: False)())
        self.start = time.perf_counter()

    def __call__(self, stage: str) -> None:
        if self.live:
            elapsed = time.perf_counter() - self.start
            self.stream.write(f"\r\033[Kchipflow: {stage} ... ({elapsed:.1f} s)")
            self.stream.flush()

    def done(self) -> None:
        if self.live:
            self.stream.write("\r\033[K")
            self.stream.flush()


def _run(
    design: str | Path,
    outdir: str | None,
    allow_large: bool = False,
    field: bool | None = None,
    settings: tuple[str, ...] = (),
) -> int:
    stages = _StageLine()
    try:
        build, files = build_to_folder(
            design, outdir, stages, allow_large=allow_large, field=field, settings=settings
        )
    finally:
        stages.done()
    click.echo(console_summary(build.results))
    folder = files[0].parent if files else Path(outdir or ".")
    click.echo(f"wrote {len(files)} files to {folder}/")
    return 1 if build.status == "fail" else 0


@click.command("build")
@click.argument("design", type=click.Path(dir_okay=False, path_type=str))
@click.option(
    "-o",
    "--output",
    "outdir",
    type=click.Path(file_okay=False, path_type=str),
    help="Output folder (default: a folder named after the design). It is replaced as a "
    "whole: no file of an earlier build stays beside the new ones.",
)
@click.option(
    "--allow-large",
    is_flag=True,
    help="Build a tree, and solve its field, even when they need more memory than this "
    "process may use.",
)
@click.option(
    "--field/--no-field",
    default=None,
    help="Solve the 2D flow field of the drawing and compare it with the network (default: "
    "when it is estimated to take at most 10 s and 1 GB).",
)
@settings_option
@click.option(
    "--watch",
    is_flag=True,
    help="Rebuild on every save of DESIGN (and of a waveform CSV it names) and serve the "
    "output folder on 127.0.0.1 with a report that reloads itself; Ctrl-C stops.",
)
@click.option(
    "--port",
    type=click.IntRange(0, 65535),
    default=8765,
    show_default=True,
    help="With --watch: the port of the report's address (0: any free port).",
)
def command(
    design: str,
    outdir: str | None,
    allow_large: bool,
    field: bool | None,
    settings: tuple[str, ...],
    watch: bool,
    port: int,
) -> int:
    """Size, draw, solve and check DESIGN; write mask files, previews, report and results.

    \b
    Example:
      chipflow build tree_vessel -o vessel-out

    DESIGN is a design file, or the name of a bundled design (`chipflow designs`).

    Exit status: 0 when every check passes (warnings allowed), 1 when the design was built but
    a check failed (the outputs are written and the failure is marked in them), 2 for bad
    input, a tree too large for this machine's memory, or an output folder that cannot be
    written (nothing is written). With --watch: 0 when stopped by Ctrl-C.
    """
    if watch:
        return _watch(resolve_design(design), outdir, allow_large, field, settings, port)
    return _run(resolve_design(design), outdir, allow_large, field, settings)


def _watch(
    design: Path,
    outdir: str | None,
    allow_large: bool,
    field: bool | None,
    settings: tuple[str, ...],
    port: int,
) -> int:
    """``build --watch``: the folder is fixed when the watch starts (a renamed design keeps
    writing where the page is served)."""
    from chipflow.build import read_design_source
    from chipflow.cli.watch import watch
    from chipflow.export.bundle import _slug
    from chipflow.report.console import verdict_line

    name = str(read_design_source(design, settings).top.data.get("name") or design.stem)
    target = Path(outdir) if outdir is not None else Path(_slug(name))

    def build():
        built, _ = build_to_folder(
            design, target, allow_large=allow_large, field=field, settings=settings
        )
        return built.results

    return watch(design, target, build, port=port, verdict=verdict_line, name=name)


@click.command("demo")
@click.option(
    "-o",
    "--output",
    "outdir",
    type=click.Path(file_okay=False, path_type=str),
    help="Output folder (default: a folder named after the demo design).",
)
@click.option(
    "--field/--no-field",
    default=None,
    help="Solve the 2D flow field of the drawing (default: when it is estimated to take at "
    "most 10 s and 1 GB; the demo's needs about 1.05 GB, so ask for it).",
)
def demo_command(outdir: str | None, field: bool | None) -> int:
    """Build the bundled demo design: an endothelial bed on a slide-sized chip.

    \b
    Example:
      chipflow demo -o demo-out
    """
    with resources.as_file(resources.files("chipflow.data") / DEMO_DESIGN) as path:
        return _run(path, outdir, field=field)
