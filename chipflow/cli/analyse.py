"""``chipflow analyse``: the flow field and floor shear of a mask drawn elsewhere (DXF)."""

from __future__ import annotations

import json
import math

import click

from chipflow.cli.common import QUANTITY, fluid_options
from chipflow.errors import SpecError
from chipflow.units import units_of

__all__ = ["command", "SI_UNITS"]

#: Keys of ``chipflow analyse --json`` and their SI units.
SI_UNITS = units_of(
    "inlet_pressure",
    "flow",
    "resistance",
    "p05",
    "p50",
    "p95",
    "area",
    "area_outside_window",
    "mesh_triangles",
    "viscosity",
    "length",
    "width",
    "depth",
    "pressure_drop",
    "field_shear",
    "network_resistance",
    "o2_inlet",
    "o2_critical",
    "o2_floor_min",
    "o2_out",
    "o2_uptake",
    "hypoxic_fraction",
)


class _Point(click.ParamType):
    """``X,Y`` in the drawing's units."""

    name = "X,Y"

    def convert(self, value, param, ctx):
        if isinstance(value, tuple):
            return value
        parts = str(value).replace(" ", "").split(",")
        try:
            if len(parts) != 2:
                raise ValueError
            xy = float(parts[0]), float(parts[1])
            if not all(math.isfinite(v) for v in xy):
                raise ValueError
            return xy
        except ValueError:
            self.fail(
                f"expected two finite numbers X,Y in the drawing's units, got {value!r}",
                param,
                ctx,
            )


@click.command("analyse")
@click.argument("mask", type=click.Path(exists=True, dir_okay=False, path_type=str))
@click.option("--depth", type=QUANTITY("length"), required=True, help="Channel depth, e.g. 50um.")
@click.option("--inlet", type=_Point(), required=True, help="Inlet port centre X,Y.")
@click.option("--outlet", type=_Point(), required=True, help="Outlet port centre X,Y.")
@click.option("--flow", type=QUANTITY("flow"), help="Flow through the chip, e.g. 10uL/min.")
@click.option(
    "--pressure", type=QUANTITY("pressure"), help="Inlet pressure above the outlet, e.g. 2kPa."
)
@click.option("--layer", help="Read only this DXF layer (default: all).")
@click.option(
    "--punch", type=QUANTITY("length"), default="1mm", show_default=True, help="Port punch."
)
@click.option(
    "--units",
    type=click.Choice(["mm", "um", "cm", "m", "in", "mil"]),
    help="Drawing units (default: the file's $INSUNITS; without it, inferred from the "
    "drawing's size where only one of mm and um fits a chip).",
)
@click.option(
    "--allow-large",
    is_flag=True,
    help="Solve even a mesh that needs more memory than this process may use.",
)
@click.option(
    "--cell-type",
    help="Judge the floor shear against this cell type's window, and map the oxygen its "
    "cells (1e5 per cm^2) leave on the floor against their critical value.",
)
@click.option(
    "--o2-inlet",
    type=QUANTITY("concentration"),
    help="Oxygen in the medium at the inlet, e.g. 0.2mol/m^3 (default: in equilibrium with "
    "incubator air; needs --cell-type).",
)
@click.option("-o", "--output", "outdir", type=click.Path(file_okay=False), help="Write files.")
@click.option("--json", "as_json", is_flag=True, help="Print SI values as JSON.")
@fluid_options
def command(
    mask,
    depth,
    inlet,
    outlet,
    flow,
    pressure,
    layer,
    punch,
    units,
    cell_type,
    o2_inlet,
    outdir,
    as_json,
    fluid,
    allow_large,
) -> None:
    """Solve the flow field of MASK, a DXF drawn in any CAD program.

    Closed outlines are channels (polylines, splines, ellipses, hatches, solids; block
    references expanded), circles port pads; the ports are holes of the punch's diameter at
    --inlet and --outlet (coordinates in the file's units). What is not read is named in a
    note. With --cell-type the oxygen the cells leave on the floor is solved on the
    same field. A mesh too large for this process's memory is refused with its estimate.

    \b
    Example:
      chipflow analyse chip.dxf --depth 50um --inlet 0,0 --outlet 20,0 --flow 10uL/min
    """
    from chipflow.checks.cell_types import cell_type as lookup
    from chipflow.cli.progress import progress_bar
    from chipflow.field.analyse import analyse_mask
    from chipflow.spec.mask_dxf import read_mask_dxf

    if (flow is None) == (pressure is None):
        raise SpecError("give either --flow or --pressure")
    if o2_inlet is not None and cell_type is None:
        raise SpecError("--o2-inlet needs --cell-type (whose cells take up the oxygen)")
    window = None
    if cell_type is not None:
        cells = lookup(cell_type, where="--cell-type")
        window = (cells.shear_min, cells.shear_max)
    m = read_mask_dxf(mask, layer, units)
    with progress_bar("analyse", quiet=as_json, unit="step") as progress:
        analysis = analyse_mask(
            m.geometry,
            depth,
            (inlet[0] * m.scale, inlet[1] * m.scale),
            (outlet[0] * m.scale, outlet[1] * m.scale),
            punch,
            fluid.viscosity,
            flow=flow,
            pressure=pressure,
            window=window,
            allow_large=allow_large,
            progress=progress,
            where=mask,
        )
    results = {**analysis.to_dict(), "viscosity": fluid.viscosity, "mask_units": m.units}
    results["notes"] = list(m.notes)
    oxygen = None
    if cell_type is not None:
        from chipflow.transport.field import mask_oxygen

        oxygen, results["transport"] = mask_oxygen(
            analysis.solution, cells, fluid.temperature, o2_inlet
        )
    results["units"] = SI_UNITS
    if outdir is not None:
        from chipflow.export.analysis import write_analysis

        write_analysis(analysis, results, outdir, oxygen)
    if as_json:
        click.echo(json.dumps(results, indent=2, sort_keys=True))
        return
    s = results["floor_shear"]
    for note in m.notes:
        click.echo(f"note: {note}")
    click.echo(f"mask {mask}: {m.units} drawing, channel floor {analysis.area * 1e6:.4g} mm^2")
    click.echo(
        f"inlet pressure {analysis.inlet_pressure:.4g} Pa, flow {analysis.flow * 6e10:.4g} uL/min, "
        f"resistance {analysis.resistance * 1e-9:.4g} Pa s/uL"
    )
    click.echo(
        f"floor shear: p05 {s['p05']:.3g} Pa, median {s['p50']:.3g} Pa, p95 {s['p95']:.3g} Pa"
    )
    if window is not None:
        click.echo(
            f"{cell_type} window {window[0]:.3g}-{window[1]:.3g} Pa: "
            f"{analysis.floor.below:.1%} of the floor below, {analysis.floor.above:.1%} above"
        )
    if oxygen is not None:
        t = results["transport"]
        click.echo(
            f"oxygen: {t['o2_inlet']:.3g} mol/m^3 in, lowest floor {t['o2_floor_min']:.3g} "
            f"mol/m^3, {t['hypoxic_fraction']:.1%} of the floor below the {cell_type} critical "
            f"{t['o2_critical']:.3g} mol/m^3, {t['o2_out']:.3g} mol/m^3 out"
        )
    _echo_channels(analysis.channels)
    if outdir is not None:
        extra = " and oxygen.svg" if oxygen is not None else ""
        click.echo(f"wrote results.json, field.svg{extra} to {outdir}/")


def _echo_channels(table) -> None:
    """The skeleton's channel table, or the one line saying why there is none."""
    if table.reason is not None:
        click.echo(table.reason)
        return
    click.echo("channels from the skeleton (field drop against the 1D series' resistance x flow):")
    click.echo(
        f"{'#':>3} {'length mm':>10} {'width um':>9} {'flow uL/min':>12} {'drop Pa':>9} "
        f"{'1D drop Pa':>10} {'shear Pa':>9}"
    )
    rows = zip(
        table.length,
        table.width,
        table.flow,
        table.pressure_drop,
        table.resistance_1d * table.flow,
        table.floor_shear,
        strict=True,
    )
    for i, (length, width, flow, drop, drop_1d, shear) in enumerate(rows, 1):
        click.echo(
            f"{i:>3} {length * 1e3:>10.4g} {width * 1e6:>9.4g} {flow * 6e10:>12.4g} "
            f"{drop:>9.4g} {drop_1d:>10.4g} {shear:>9.3g}"
        )
