"""Every output file of a build, written together or not at all.

:func:`write_build` writes, into a staged folder that replaces the output folder's files only
when everything succeeded (see :mod:`chipflow.export.outdir`):

==========================  =====================================================================
``<name>.dxf``              mask file for the cleanroom (tree designs)
``<name>.gds``              the same masks as GDSII (tree designs)
``layout.svg``/``.png``     preview of the chip: mask layers, ports, scale bar (tree designs)
``shear.svg``/``.png``      the chip coloured by floor wall shear [Pa] (tree designs)
``profile.svg``             pressure, flow, cross-section, velocity, shear and residence time
                            along the path from inlet to outlet
``network.svg``             the graph of an explicit network with flows and floor shear
``report.html``             one self-contained report: tables, checks, figures, cautions
``results.json``            the results in SI units with a "units" map
``channels.csv``            one row per channel, SI units named in the header
``oxygen.svg``              with the field: the floor oxygen of the 2D field, against the cells'
                            critical oxygen
==========================  =====================================================================

Every file is deterministic: the same design file gives the same bytes.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import re
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from chipflow.build import Build
from chipflow.errors import ArgumentError
from chipflow.export._files import atomic_write
from chipflow.export.outdir import staged_folder
from chipflow.network.summary import CHANNEL_KEYS, channel_columns
from chipflow.units import RESULT_UNITS, tidy

__all__ = ["write_build", "output_names", "CSV_COLUMNS"]

#: Columns of channels.csv; numeric ones carry their SI unit in the header: every channel key,
#: with the width measured on the mask after the width, then the oxygen of the transport
#: (bulk at the upstream and downstream ends, lowest floor value; no floor for tubing).
TRANSPORT_COLUMNS = ("o2_in", "o2_out", "o2_floor_min")
CSV_COLUMNS = (*CHANNEL_KEYS[:6], "mask_width", *CHANNEL_KEYS[6:], *TRANSPORT_COLUMNS)


def _slug(name: str) -> str:
    """A file-name-safe form of the design name.

    >>> _slug("Liver bed / v2")
    'Liver-bed-v2'
    """
    slug = re.sub(r"[^A-Za-z0-9_.-]+", "-", name).strip("-.")
    return slug or "design"


def output_names(build: Build) -> list[str]:
    """The names of the files :func:`write_build` writes for ``build``, in writing order."""
    names = []
    if build.layout is not None:
        slug = _slug(build.name)
        names += [
            f"{slug}.dxf",
            f"{slug}.gds",
            "layout.svg",
            "layout.png",
            "shear.svg",
            "shear.png",
        ]
    if build.field is not None:
        names.append("field.svg")
    if getattr(build.transport, "field", None) is not None:
        names.append("oxygen.svg")
    if build.results["generations"]:
        names.append("profile.svg")
    if build.results.get("channels"):
        names.append("network.svg")
    return names + ["report.html", "results.json", "channels.csv"]


def _finite(value: Any) -> Any:
    """JSON has no infinity or NaN: they become null (e.g. the residence time of a still
    channel); floats are rounded to 12 significant digits (:func:`chipflow.units.tidy`)."""
    if isinstance(value, float):
        return tidy(value)
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def results_json(build: Build) -> str:
    """The results as JSON text (SI units, a "units" map, null for non-finite values)."""
    return json.dumps(_finite(build.results), indent=2, allow_nan=False) + "\n"


def channels_csv(build: Build) -> str:
    """One row per channel of the solved network (tubing included), SI units in the header."""
    columns = channel_columns(build.solution)
    columns["round"] = np.where(columns["round"], "yes", "no")
    # the width on the written mask polygons, measured after drawing (empty for tubing)
    mask = np.full(columns["width"].size, np.nan)
    drawn = None if build.layout is None else build.layout.channels.mask_width
    if drawn is not None:
        mask[: drawn.size] = drawn
    columns["mask_width"] = mask
    n = columns["width"].size
    transport = {} if build.transport is None else build.transport.columns()
    for key in TRANSPORT_COLUMNS:
        columns[key] = np.asarray(transport.get(key, np.full(n, np.nan)), float)
    text = io.StringIO()
    writer = csv.writer(text, lineterminator="\n")
    writer.writerow(f"{k} [{RESULT_UNITS[k]}]" if k in RESULT_UNITS else k for k in CSV_COLUMNS)
    writer.writerows(zip(*(_csv_column(columns[k]) for k in CSV_COLUMNS), strict=True))
    return text.getvalue()


def _csv_column(values: np.ndarray) -> list:
    """One column's cells: floats as they are (the csv module writes ``repr``), non-finite
    floats blank, anything else as text."""
    values = np.asarray(values)
    if values.dtype.kind == "f":
        return [repr(tidy(v)) if math.isfinite(v) else "" for v in values.tolist()]
    return [str(v) for v in values.tolist()]


def _write_text(path: Path, text: str, what: str) -> None:
    atomic_write(path, lambda tmp: tmp.write_bytes(text.encode("utf-8")), what)


def write_build(build: Build, outdir: str | Path, progress: Callable[[str], None] | None = None):
    """Write every output of ``build`` into ``outdir`` (created if needed), all or nothing.

    Parameters
    ----------
    build : Build
    outdir : str or path-like
        Output folder. It is replaced as a whole (see :mod:`chipflow.export.outdir`): no file
        of a previous build survives beside the new ones.
    progress : callable, optional
        Called with the name of each writing stage.

    Returns
    -------
    list of pathlib.Path
        The files written, in :func:`output_names` order.
    """
    from chipflow.export.dxf import write_dxf
    from chipflow.export.gds import write_gds
    from chipflow.export.preview import write_previews
    from chipflow.report import profile_figure, svg_text, write_report

    if not isinstance(build, Build):
        raise ArgumentError(f"write_build needs a Build (from build_design), got {build!r:.80}")
    if not isinstance(outdir, str | os.PathLike) or not str(outdir):
        raise ArgumentError(f"write_build needs an output folder path, got {outdir!r:.80}")
    progress = progress or (lambda stage: None)
    outdir = Path(outdir)
    figures: dict[str, str] = {}
    with staged_folder(outdir) as stage, warnings.catch_warnings():
        # a design name in a script the figure font lacks is drawn as boxes, not warned about
        # once per character
        warnings.filterwarnings("ignore", r"Glyph \d+ .* missing from", UserWarning)
        layout = build.layout
        if layout is not None:
            slug = _slug(build.name)
            progress("dxf")
            write_dxf(layout, stage / f"{slug}.dxf", build.export.dxf)
            progress("gds")
            write_gds(layout, stage / f"{slug}.gds", build.export.gds)
            progress("previews")
            from chipflow.report.schematic import shear_scale

            shear = build.solution.wall_shear_floor[: layout.channels.length.size]
            window = build.results.get("shear_window") or {}
            marks = [window[k] for k in ("min", "max") if window.get(k) is not None]
            write_previews(layout, [stage / "layout.svg", stage / "layout.png"])
            write_previews(
                layout,
                [stage / "shear.svg", stage / "shear.png"],
                shear,
                value_range=shear_scale(window, shear),
                value_marks=marks,
                floors=_chamber_floors(build),
            )
            figures["The chip as drawn"] = (stage / "layout.svg").read_text(encoding="utf-8")
            figures["Floor wall shear on the chip"] = (stage / "shear.svg").read_text(
                encoding="utf-8"
            )
        if build.field is not None:
            from chipflow.report.field_figure import field_shear_figure

            progress("field figure")
            run = build.field
            text = svg_text(field_shear_figure(run.solution, run.window, run.zoom(layout)))
            (stage / "field.svg").write_bytes(text.encode("utf-8"))
            figures["Floor wall shear of the 2D field, against the cell window"] = text
        oxygen_map = getattr(build.transport, "field", None)
        if oxygen_map is not None:
            from chipflow.report.transport_figure import oxygen_map_figure

            progress("oxygen figure")
            zoom = None if layout is None or build.field is None else build.field.zoom(layout)
            text = svg_text(oxygen_map_figure(oxygen_map, zoom))
            (stage / "oxygen.svg").write_bytes(text.encode("utf-8"))
            figures["Floor oxygen of the 2D field, against the cells' critical oxygen"] = text
        progress("report")
        profile = svg_text(profile_figure(build.results)) if build.results["generations"] else None
        if profile is not None:
            figures = {"Profile from inlet to outlet": profile, **figures}
            _write_text(stage / "profile.svg", profile, "profile figure")
        if build.results.get("channels"):
            from chipflow.report.schematic import network_schematic

            schematic = svg_text(network_schematic(build.results))
            figures["The network: flows and floor wall shear"] = schematic
            _write_text(stage / "network.svg", schematic, "network schematic")
        write_report(build.results, stage / "report.html", figures)
        _write_text(stage / "results.json", results_json(build), "results")
        _write_text(stage / "channels.csv", channels_csv(build), "channel table")
    return [outdir / n for n in output_names(build)]


def build_to_folder(
    design: str | Path,
    outdir: str | Path | None = None,
    progress: Callable[[str], None] | None = None,
    *,
    allow_large: bool = False,
    field: bool | None = None,
    settings: Sequence[str] = (),
) -> tuple[Build, list[Path]]:
    """Build a design file and write all its outputs (the whole job of ``chipflow build``).

    Parameters
    ----------
    design : str, path-like or DesignSource
        The design file (or one already read).
    outdir : str or path-like, optional
        Output folder; by default a folder named after the design, in the current folder.
    progress : callable, optional
        Called with the name of each stage.
    allow_large : bool, optional
        Build a tree even when it needs more memory than the machine can spare.
    field : bool, optional
        Solve the 2D field (see :func:`chipflow.build.build_design`; default: small chips).
    settings : sequence of str, optional
        ``KEY=VALUE`` changes to the design file's values (``--set``), as editing the file
        would make them (:func:`chipflow.build.read_design_source`).

    Returns
    -------
    build : Build
    files : list of pathlib.Path
        The files written.
    """
    from chipflow.build import DesignSource, build_design, read_design_source

    if settings and not isinstance(design, DesignSource):
        design = read_design_source(design, settings)
    build = build_design(design, progress, allow_large=allow_large, field=field)
    target = Path(outdir) if outdir is not None else Path(_slug(build.name))
    return build, write_build(build, target, progress)


def _chamber_floors(build: Build) -> list:
    """Each drawn chamber's floor triangles on the chip [m] with their floor shear [Pa]."""
    from chipflow.layout.chamber import place

    runs = {r.name: r for r in build.chambers}
    out = []
    for c in build.layout.chambers:  # a handful of chambers
        run = runs.get(c.name)
        if run is not None and run.floor_map:
            corners, shear = run.floor_map
            out.append((place(corners, c.origin, c.turns), shear))
    return out
