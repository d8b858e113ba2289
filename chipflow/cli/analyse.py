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
    "pressure",
    "x",
    "y",
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


class _Port(_Point):
    """A port, ``X,Y`` or ``PORT``, optionally with what drives it: ``X,Y=10uL/min`` (a
    flow, into the chip at an inlet, out of it at an outlet) or ``X,Y=2kPa`` (a pressure)."""

    name = "X,Y|PORT[=DRIVE]"

    def convert(self, value, param, ctx):
        if isinstance(value, tuple) and len(value) == 2 and not isinstance(value[0], float):
            return value
        where, sep, drive = str(value).partition("=")
        point = super().convert(where, param, ctx)
        if not sep:
            return point, None
        from chipflow.errors import UnitError
        from chipflow.limits import check_value
        from chipflow.units import to_si

        for kind in ("flow", "pressure"):
            try:
                si = to_si(drive.strip(), kind, where=f"--{param.name if param else 'port'}")
                check_value(si, kind, key=kind, where=f"--{param.name if param else 'port'}")
            except UnitError as exc:
                if "wrong kind of unit" in str(exc):
                    continue  # a pressure, or neither
                self.fail(str(exc), param, ctx)
            return point, (kind, si)
        self.fail(
            f"expected a flow (10uL/min) or a pressure (2kPa) after '=', got {drive!r}",
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
    "inlets",
    type=_Port(),
    multiple=True,
    help="Inlet port centre X,Y, or a port's name in chipflow's own mask (default: inlet); "
    "repeat for several, each with its own drive: X,Y=5uL/min or X,Y=2kPa.",
)
@click.option(
    "--outlet",
    "outlets",
    type=_Port(),
    multiple=True,
    help="Outlet port centre X,Y, or a port's name (default: outlet); repeatable; at 0 Pa "
    "unless given =FLOW (withdrawn) or =PRESSURE.",
)
@click.option(
    "--flow", type=QUANTITY("flow"), help="Flow into the chip at its inlet, e.g. 10uL/min."
)
@click.option(
    "--pressure",
    type=QUANTITY("pressure"),
    help="Inlet pressure above the outlets, e.g. 2kPa (of every inlet without its own).",
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
    inlets,
    outlets,
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
    GDSII are read level by level, with their port marks. Several inlets and outlets are
    repeated options, each driven by its own flow or pressure (outlets not driven are open at
    0 Pa). What is not read is named in a note.
    With --cell-type the oxygen the cells leave on the floor is solved on the same field. A
    mesh too large for this process's memory is refused with its estimate.

    MASK may name a mask installed with chipflow (straight_channel.dxf, a 200 um wide
    channel between pads at 0,0 and 20,0 mm) when no such file exists.

    \b
    Examples:
      chipflow analyse straight_channel.dxf --depth 50um --inlet 0,0 --outlet 20,0 \\
        --flow 10uL/min
      chipflow analyse straight_channel.dxf --depth 50um --inlet 0,0=5uL/min \\
        --inlet 20,0=1kPa --outlet 10,0
    """
    from chipflow.checks.cell_types import cell_type as lookup
    from chipflow.cli.progress import progress_bar
    from chipflow.field.analyse import analyse_ports
    from chipflow.spec.mask_read import mask_levels, resolve_mask

    if flow is not None and pressure is not None:
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
    ports = mask_ports(inlets, outlets, flow, pressure, m)
    with progress_bar("analyse", quiet=as_json, unit="step") as progress:
        analysis = analyse_ports(
            m.geometry,
            levels[0][1],
            ports,
            punch,
            fluid.viscosity,
            window=window,
            levels=levels,
            allow_large=allow_large,
            progress=progress,
            where=mask,
        )
    results = {**analysis.to_dict(), "viscosity": fluid.viscosity, "mask_units": m.units}
    results["notes"] = [*m.notes, *analysis.notes]
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

        radius = math.sqrt(port_holes(m.geometry, [ports[0].xy], punch)[0].area / math.pi)
        given = {p.name: p.given for p in analysis.ports}
        solved = analysis.solution
        text = network_toml(
            analysis.channels,
            [(p.name, p.xy, radius) for p in analysis.ports],
            {  # each port as driven: a flow into the chip, or its pressure
                name: (
                    kind,
                    solved.port_flows[name] if kind == "flow" else solved.port_pressures[name],
                )
                for name, kind in given.items()
            },  # fmt: skip
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
    for note in results["notes"]:
        click.echo(f"note: {note}")
    click.echo(f"mask {mask}: {m.units} drawing, channel floor {analysis.area * 1e6:.4g} mm^2")
    if analysis.resistance is not None:
        click.echo(
            f"inlet pressure {analysis.inlet_pressure:.4g} Pa, flow "
            f"{analysis.flow * 6e10:.4g} uL/min, resistance {analysis.resistance * 1e-9:.4g} "
            "Pa s/uL"
        )
    else:
        _echo_ports(results["ports"], analysis.flow)
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


def mask_ports(inlets, outlets, flow, pressure, mask) -> list:
    """The ports of the command line as :class:`~chipflow.field.analyse.MaskPort` [SI].

    ``inlets`` and ``outlets`` hold ``(point or port name, drive or None)``; ``--flow``
    drives the one inlet without its own drive, ``--pressure`` every such inlet. One SpecError
    line where a drive is missing or would go unused.
    """
    from chipflow.field.analyse import MaskPort

    inlets = inlets or ((None, None),)
    outlets = outlets or ((None, None),)
    bare = [k for k, (_, drive) in enumerate(inlets) if drive is None]
    if flow is not None and len(bare) > 1:
        raise SpecError(
            f"--flow drives one inlet, not {len(bare)}: give each its own, e.g. --inlet X,Y=5uL/min"
        )
    if (flow is not None or pressure is not None) and not bare:
        option = "--flow" if flow is not None else "--pressure"
        raise SpecError(f"{option} drives no inlet: every inlet has its own drive")
    if bare and flow is None and pressure is None:
        raise SpecError(
            "give either --flow or --pressure, or each inlet its own drive (--inlet X,Y=10uL/min)"
        )
    ports, taken = [], set()
    for role, given in (("inlet", inlets), ("outlet", outlets)):
        for k, (point, drive) in enumerate(given, 1):
            xy = _port_xy(point, role, mask)
            name = point if isinstance(point, str) else role if len(given) == 1 else f"{role} {k}"
            if name in taken:
                raise SpecError(f"--{role}: the port {name!r} is given twice")
            taken.add(name)
            if drive is None and role == "inlet":
                drive = ("flow", flow) if flow is not None else ("pressure", pressure)
            kind, value = drive or ("pressure", 0.0)
            ports.append(MaskPort(name, xy, role, **{kind: value}))
    return ports


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


def _echo_ports(rows: list[dict], flow: float) -> None:
    """Each port's pressure and flow into the chip, the given one marked."""
    from chipflow.display import column, quantity

    p_unit, pressures = column([r["pressure"] for r in rows], "pressure")
    q_unit, flows = column([r["flow"] for r in rows], "flow")
    click.echo(f"flow through the chip {quantity(flow, 'flow', 4)}, {len(rows)} ports (* given):")
    width = max(len(r["name"]) for r in rows)
    click.echo(
        f"  {'port':<{width}}  {'role':<6}  {'pressure ' + p_unit:>14}  {'inflow ' + q_unit:>14}"
    )
    for r, p, q in zip(rows, pressures, flows, strict=True):
        p += "*" if r["given"] == "pressure" else " "
        q += "*" if r["given"] == "flow" else " "
        click.echo(f"  {r['name']:<{width}}  {r['role']:<6}  {p:>14}  {q:>14}".rstrip())


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
