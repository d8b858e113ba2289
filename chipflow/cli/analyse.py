"""``chipflow analyse``: the flow field and floor shear of a mask drawn elsewhere (DXF)."""

from __future__ import annotations

import json
import math
from pathlib import Path

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
    """``X,Y`` in the drawing's units, or the name of a port mark of chipflow's own mask."""

    name = "X,Y|PORT"

    def convert(self, value, param, ctx):
        if isinstance(value, tuple):
            return value
        parts = str(value).replace(" ", "").split(",")
        if len(parts) == 1 and parts[0] and parts[0][0] not in "+-.0123456789":
            return parts[0]  # a port's name
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


class _Depth(click.ParamType):
    """``50um`` (the mask's one level) or ``LAYER=50um`` (one level per named layer)."""

    name = "[LAYER=]DEPTH"

    def convert(self, value, param, ctx):
        if isinstance(value, tuple):
            return value
        layer, sep, text = str(value).rpartition("=")
        if sep and not layer.strip():
            self.fail(f"expected LAYER=DEPTH with a layer name, got {value!r}", param, ctx)
        return (layer.strip() or None), QUANTITY("length").convert(text.strip(), param, ctx)


@click.command("analyse")
@click.argument("mask", type=click.Path(path_type=str))
@click.option(
    "--depth",
    "depths",
    type=_Depth(),
    multiple=True,
    help="Channel depth, e.g. 50um; or LAYER=DEPTH, repeated, one mask level per layer "
    "(default: the depths chipflow's own DXF states in its layer names).",
)
@click.option(
    "--inlet",
    type=_Point(),
    help="Inlet port centre X,Y, or a port's name in chipflow's own mask (default: inlet).",
)
@click.option(
    "--outlet",
    type=_Point(),
    help="Outlet port centre X,Y, or a port's name in chipflow's own mask (default: outlet).",
)
@click.option("--flow", type=QUANTITY("flow"), help="Flow through the chip, e.g. 10uL/min.")
@click.option(
    "--pressure", type=QUANTITY("pressure"), help="Inlet pressure above the outlet, e.g. 2kPa."
)
@click.option(
    "--layer", help="Read only this layer: DXF layer name, GDSII layer number (default: all)."
)
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
@click.option(
    "--region",
    help="Floor-shear statistics over the polygons of this layer (e.g. a chamber floor); the "
    "layer is not read as channels.",
)
@click.option(
    "--network-out",
    type=click.Path(dir_okay=False),
    help="Write the skeleton as an explicit network design file (.toml) for chipflow check.",
)
@click.option("-o", "--output", "outdir", type=click.Path(file_okay=False), help="Write files.")
@click.option("--json", "as_json", is_flag=True, help="Print SI values as JSON.")
@fluid_options
def command(
    mask,
    depths,
    inlet,
    outlet,
    flow,
    pressure,
    layer,
    punch,
    units,
    cell_type,
    o2_inlet,
    region,
    network_out,
    outdir,
    as_json,
    fluid,
    allow_large,
) -> None:
    """Solve the flow field of MASK, a DXF or GDSII mask drawn in any CAD program.

    Closed outlines are channels (polylines, splines, ellipses, hatches, solids, GDSII
    polygons; block references expanded), circles port pads; the ports are holes of the punch's
    diameter at --inlet and --outlet (coordinates in the file's units). chipflow's own DXF and
    GDSII are read level by level, with their port marks. What is not read is named in a note.
    With --cell-type the oxygen the cells leave on the floor is solved on the same field. A
    mesh too large for this process's memory is refused with its estimate.

    MASK may name a mask installed with chipflow (straight_channel.dxf, a 200 um wide
    channel between pads at 0,0 and 20,0 mm) when no such file exists.

    \b
    Example:
      chipflow analyse straight_channel.dxf --depth 50um --inlet 0,0 --outlet 20,0 \\
        --flow 10uL/min
    """
    from chipflow.checks.cell_types import cell_type as lookup
    from chipflow.cli.progress import progress_bar
    from chipflow.field.analyse import analyse_mask
    from chipflow.spec.mask_read import mask_levels, resolve_mask

    if (flow is None) == (pressure is None):
        raise SpecError("give either --flow or --pressure")
    if o2_inlet is not None and cell_type is None:
        raise SpecError("--o2-inlet needs --cell-type (whose cells take up the oxygen)")
    window = None
    if cell_type is not None:
        cells = lookup(cell_type, where="--cell-type")
        window = (cells.shear_min, cells.shear_max)
    named = {name: d for name, d in depths if name is not None}
    plain = [d for name, d in depths if name is None]
    if len(plain) > 1 or (plain and named):
        raise SpecError(
            "give one --depth for the whole mask, or one LAYER=DEPTH per mask level, not both"
        )
    if named and layer is not None:
        raise SpecError("--layer reads one layer; with LAYER=DEPTH depths name the layers there")
    path = str(resolve_mask(mask))
    m, levels = mask_levels(path, named, plain[0] if plain else None, layer, units, region)
    with progress_bar("analyse", quiet=as_json, unit="step") as progress:
        analysis = analyse_mask(
            m.geometry,
            levels[0][1],
            _port_xy(inlet, "inlet", m),
            _port_xy(outlet, "outlet", m),
            punch,
            fluid.viscosity,
            flow=flow,
            pressure=pressure,
            window=window,
            levels=levels,
            allow_large=allow_large,
            progress=progress,
            where=mask,
        )
    results = {**analysis.to_dict(), "viscosity": fluid.viscosity, "mask_units": m.units}
    results["notes"] = list(m.notes)
    results["levels"] = [
        {"name": level.name, "depth": d, "area": g.area}
        for level, (g, d) in zip(m.levels, levels, strict=True)
    ]
    oxygen = None
    if cell_type is not None:
        from chipflow.transport.field import mask_oxygen

        oxygen, results["transport"] = mask_oxygen(
            analysis.solution, cells, fluid.temperature, o2_inlet
        )
    if region is not None:
        from chipflow.field.region import region_shear
        from chipflow.spec.mask_read import read_mask

        where = read_mask(path, region, units).geometry
        results["region"] = {"layer": region, **region_shear(analysis.solution, where, window)}
    results["units"] = SI_UNITS
    if network_out is not None:
        from chipflow.export.network_out import network_toml, write_network
        from chipflow.field.analyse import port_holes

        ends = (_port_xy(inlet, "inlet", m), _port_xy(outlet, "outlet", m))
        radius = math.sqrt(port_holes(m.geometry, ends, punch)[0].area / math.pi)
        text = network_toml(
            analysis.channels,
            [("inlet", ends[0], radius), ("outlet", ends[1], radius)],
            {"inlet": ("flow", analysis.flow)},
            fluid,
            Path(network_out).stem,
            Path(mask).name,
        )
        write_network(text, network_out)
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
    if region is not None:
        r = results["region"]
        click.echo(
            f"region {region} ({r['area'] * 1e6:.4g} mm^2 of floor): p05 {r['p05']:.3g} Pa, "
            f"median {r['p50']:.3g} Pa, p95 {r['p95']:.3g} Pa"
            + ("" if window is None else f", {r['outside']:.1%} outside the window")
        )
    _echo_channels(analysis.channels)
    if outdir is not None:
        extra = " and oxygen.svg" if oxygen is not None else ""
        click.echo(f"wrote results.json, field.svg{extra} to {outdir}/")


def _port_xy(value, role: str, mask) -> tuple[float, float]:
    """A port centre [m]: X,Y in the drawing's units, or a port mark of chipflow's own mask."""
    if isinstance(value, tuple):
        return value[0] * mask.scale, value[1] * mask.scale
    name = role if value is None else value
    for port in mask.ports:  # a handful
        if port.name == name:
            return port.x, port.y
    if not mask.ports:
        raise SpecError(f"give --{role} X,Y: the mask has no port marks to take it from")
    names = ", ".join(p.name for p in mask.ports)
    raise SpecError(f"--{role}: the mask has no port named {name!r} (its ports: {names})")


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
