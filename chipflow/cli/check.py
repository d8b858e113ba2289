"""``chipflow check``: solve a design's network and show pressures, flows and wall shear.

The command dispatches on the top-level keys of the design file: explicit networks
(``[[channels]]`` / ``[[tubes]]``) are handled by :func:`check_network`; tree designs
(``[tree]``) are sized, drawn in memory and tabled by :func:`chipflow.design.table.tree_check`;
both run the checks of a build, so ``check`` and ``build`` agree.
"""

from __future__ import annotations

import json
import math

import click

from chipflow.checks.conditions import network_warnings
from chipflow.cli.common import echo_table
from chipflow.design.table import tree_check
from chipflow.errors import SpecError
from chipflow.network import Solution, generation_rows
from chipflow.network.residual import RESIDUAL_UNITS
from chipflow.network.summary import channel_rows
from chipflow.report.console import channel_table
from chipflow.spec.bundled import resolve_design
from chipflow.spec.network import NetworkDesign, is_network_design, load_network_design
from chipflow.spec.reader import Table, read_design_file
from chipflow.units import lab_number, tidy, units_of

__all__ = ["command", "check_network", "network_report", "SI_UNITS"]

#: Units of the SI values in ``chipflow check --json``.
SI_UNITS = units_of(
    "pressure",
    "flow",
    "pressure_drop",
    "mean_velocity",
    "wall_shear_floor",
    "wall_shear_mean",
    "wall_shear_max",
    "reynolds",
    "residence_time",
    "viscosity",
    "density",
    "temperature",
    *RESIDUAL_UNITS,
)

_UL_MIN = 6e10  # m^3/s -> uL/min


def _finite(value: float) -> float | None:
    """JSON has no infinity: a channel without flow has no residence time (null); floats are
    rounded to 12 significant digits."""
    return tidy(float(value))


def network_report(design: NetworkDesign, solution: Solution) -> dict:
    """The SI structure printed by ``chipflow check --json`` for an explicit network.

    Keys: ``design``, ``fluid``, ``nodes``, ``channels``, ``ports``, ``units``.
    """
    net = solution.network
    names = net.channel_names()
    fluid = design.fluid
    fields = (
        "flow",
        "pressure_drop",
        "mean_velocity",
        "wall_shear_floor",
        "wall_shear_mean",
        "wall_shear_max",
        "reynolds",
        "residence_time",
    )
    columns = {key: getattr(solution, key).tolist() for key in fields}
    channels = [
        {
            "name": names[i],
            "from": net.node_names[a],
            "to": net.node_names[b],
            **{key: _finite(columns[key][i]) for key in fields},
        }
        for i, (a, b) in enumerate(zip(net.node_a.tolist(), net.node_b.tolist(), strict=True))
    ]
    ports = []
    for node in solution.port_flow:
        supply = design.supplies.get(node)
        ports.append(
            {
                "node": node,
                "supply": supply.label if supply else "",
                "pressure": solution.node_pressure(node),
                "flow": solution.port_flow[node],
            }
        )
    return {
        "design": design.name,
        "fluid": {
            "name": fluid.name,
            "viscosity": fluid.viscosity,
            "density": fluid.density,
            "temperature": fluid.temperature,
        },
        "nodes": [
            {"name": name, "pressure": float(p)}
            for name, p in zip(net.node_names, solution.pressure.tolist(), strict=True)
        ],
        "channels": channels,
        "ports": ports,
        "units": SI_UNITS,
    }


def _g(value: float, scale: float = 1.0) -> str:
    return lab_number(value * scale) if math.isfinite(value) else "-"


def _echo_text(design: NetworkDesign, solution: Solution) -> None:
    net = solution.network
    fluid = design.fluid
    click.echo(f"design: {design.name}")
    if design.description:
        click.echo(f"  {design.description}")
    temp = f", {fluid.temperature - 273.15:.4g} degC" if fluid.temperature else ""
    click.echo(
        f"fluid: {fluid.name}{temp}, viscosity {fluid.viscosity * 1e3:.4g} mPa*s, "
        f"density {fluid.density:.5g} kg/m^3"
    )
    click.echo("")
    click.echo("ports")
    rows = []
    for node in solution.port_flow:
        supply = design.supplies.get(node)
        rows.append(
            (
                node,
                supply.label if supply else "",
                _g(solution.node_pressure(node)),
                _g(solution.port_flow[node], _UL_MIN),
            )
        )
    echo_table(rows, ("node", "supply", "pressure [Pa]", "inflow [uL/min]"))
    click.echo("")
    click.echo("nodes")
    echo_table(
        [(name, _g(p)) for name, p in zip(net.node_names, solution.pressure.tolist(), strict=True)],
        ("node", "pressure [Pa]"),
    )
    click.echo("")
    click.echo("channels (flow is negative against from -> to)")
    click.echo(channel_table(channel_rows(solution)))
    generations = generation_rows(solution)
    if generations:
        click.echo("")
        click.echo("generations")
        echo_table(
            [
                (
                    r.role,
                    str(r.generation),
                    str(r.count),
                    _g(r.flow_total, _UL_MIN),
                    f"{_g(r.flow_min, _UL_MIN)}-{_g(r.flow_max, _UL_MIN)}",
                    f"{_g(r.velocity_min, 1e3)}-{_g(r.velocity_max, 1e3)}",
                    f"{_g(r.shear_floor_min)}-{_g(r.shear_floor_max)}",
                    _g(r.pressure_drop_mean),
                    f"{_g(r.residence_min)}-{_g(r.residence_max)}",
                )
                for r in generations
            ],
            (
                "role",
                "gen",
                "count",
                "total flow [uL/min]",
                "flow each [uL/min]",
                "velocity [mm/s]",
                "shear floor [Pa]",
                "dp [Pa]",
                "residence [s]",
            ),
        )
    click.echo("")
    click.echo(self_check_line(solution))


def self_check_line(solution: Solution) -> str:
    """The solve's self-check in one line (see :mod:`chipflow.network.residual`)."""
    c = solution.check
    if c is None:
        return f"largest mass-conservation residual: {solution.residual:.2g} (relative)"
    return (
        f"self-check: mass residual {c.mass_residual:.2g}, channel law {c.law_residual:.2g} "
        f"(relative; tolerance {c.tolerance:.2g} from condition {c.condition:.3g})"
    )


def check_network(top: Table, as_json: bool) -> bool:
    """Solve and check an explicit-network design; print the tables (or the JSON structure).

    The checks are the build's (:func:`chipflow.build.build_design`), so ``check`` and
    ``build`` give the same verdict. Returns False when a check fails.
    """
    from chipflow.build import DesignSource, build_design
    from chipflow.report.console import totals_and_checks

    design = load_network_design(top)
    build = build_design(DesignSource(top.source, top, ""))
    solution = build.solution
    warnings = network_warnings(solution)
    if as_json:
        report = network_report(design, solution)
        report["residual"] = {
            k: build.results["totals"][k] for k in RESIDUAL_UNITS if k in build.results["totals"]
        }
        report["checks"] = build.results["checks"]
        report["status"] = build.status
        report["warnings"] = warnings
        click.echo(json.dumps(report, indent=2))
    else:
        _echo_text(design, solution)
        click.echo("")
        click.echo(totals_and_checks(build.results))
        for line in warnings:
            click.echo(f"warning: {line}")
    return build.status != "fail"


def check_tree(top: Table, as_json: bool) -> bool:
    """Size a tree design (``[tree]``), solve its nominal tree and print the generation table.

    Returns False when a level misses its shear window.
    """
    text, ok = tree_check(top, as_json=as_json)
    click.echo(text)
    return ok


@click.command("check")
@click.argument("design", type=click.Path(dir_okay=False, path_type=str))
@click.option("--json", "as_json", is_flag=True, help="Print SI values as one JSON object.")
def command(design: str, as_json: bool) -> None:
    """Solve DESIGN's channel network: pressures, flows, velocity and wall shear.

    \b
    Example:
      chipflow check bench_loop_network

    DESIGN is a design file, or the name of a bundled design (`chipflow designs`).

    A tree design is drawn in memory (nothing is written), so the numbers and the verdict are
    those of `chipflow build`. Exit status: 0 when every check passes (warnings allowed), 1
    when a check fails, 2 for bad input.
    """
    top = read_design_file(resolve_design(design))
    if "tree" in top:
        if not check_tree(top, as_json):
            click.get_current_context().exit(1)
    elif is_network_design(top):
        if not check_network(top, as_json):
            click.get_current_context().exit(1)
    else:
        raise SpecError(
            f"{top.source}: nothing to check: expected a [tree] table or an explicit network "
            "([[channels]] and/or [[tubes]] with [[ports]])"
        )
