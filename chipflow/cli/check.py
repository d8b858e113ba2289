"""``chipflow check``: solve a design's network and show pressures, flows and wall shear.

The command dispatches on the top-level keys of the design file: explicit networks
(``[[channels]]`` / ``[[tubes]]``) are handled by :func:`check_network`; tree designs
(``[tree]``) are sized, drawn in memory and tabled by :func:`tree_check`; both run the checks of
a build and print its level table (:func:`chipflow.report.console.level_table`), so ``check``
and ``build`` agree.
"""

from __future__ import annotations

import json

import click

from chipflow import display
from chipflow.checks.conditions import network_warnings
from chipflow.cli.common import echo_table, settings_option
from chipflow.errors import SpecError
from chipflow.network import Solution
from chipflow.network.residual import RESIDUAL_UNITS
from chipflow.report.console import console_summary
from chipflow.spec.bundled import resolve_design
from chipflow.spec.network import NetworkDesign, is_network_design, load_network_design
from chipflow.spec.reader import Table, read_design_file
from chipflow.units import tidy, units_of

__all__ = ["command", "check_network", "tree_check", "network_report", "SI_UNITS"]

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


def _echo_text(design: NetworkDesign, solution: Solution) -> None:
    """The design, its fluid, ports and node pressures (the tables of a build follow)."""
    net = solution.network
    fluid = design.fluid
    click.echo(f"design: {design.name}")
    if design.description:
        click.echo(f"  {design.description}")
    temp = f", {display.lab_number(fluid.temperature - 273.15)} degC" if fluid.temperature else ""
    click.echo(
        f"fluid: {fluid.name}{temp}, viscosity {display.lab_number(fluid.viscosity * 1e3)} "
        f"mPa*s, density {display.lab_number(fluid.density, 5)} kg/m^3"
    )
    click.echo("")
    click.echo("ports")
    pressures = [solution.node_pressure(node) for node in solution.port_flow]
    p_unit, p_text = display.column(pressures, "pressure")
    q_unit, q_text = display.column(list(solution.port_flow.values()), "flow")
    rows = []
    for i, node in enumerate(solution.port_flow):
        supply = design.supplies.get(node)
        rows.append((node, supply.label if supply else "", p_text[i], q_text[i]))
    echo_table(rows, ("node", "supply", f"pressure [{p_unit}]", f"inflow [{q_unit}]"))
    click.echo("")
    click.echo("nodes")
    n_unit, n_text = display.column(solution.pressure.tolist(), "pressure")
    echo_table(list(zip(net.node_names, n_text, strict=True)), ("node", f"pressure [{n_unit}]"))
    click.echo("")


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
        click.echo(console_summary(build.results))
        click.echo(self_check_line(solution))
        for line in warnings:
            click.echo(f"warning: {line}")
    return build.status != "fail"


def tree_check(top: Table, *, as_json: bool = False) -> tuple[str, bool]:
    """What ``chipflow check`` prints for a tree design file (a file with ``[tree]``).

    The design is sized, drawn on the chip (in memory: nothing is written), extracted, fed
    through its supply and tubing, solved and checked exactly as ``chipflow build`` does, so
    the numbers, the table and the verdict are the build's: lengths as drawn, not nominal. A
    round-tube tree (a comparison with Murray's law) cannot be drawn: its table is solved with
    the nominal lengths and says so (:func:`chipflow.build.nominal_tree`).

    Parameters
    ----------
    top : Table
        The parsed design file (:func:`chipflow.spec.reader.read_design_file`).
    as_json : bool
        JSON text (SI units) instead of the lab-unit tables.

    Returns
    -------
    text : str
        The level table with each level's window and verdict, then the supply pressure, the
        sizing and drawing notes and the checks (or the JSON: the table's ``levels`` with
        each level's ``status``, ``checks``, ``totals`` and the build's ``status``).
    ok : bool
        False when a check fails (as ``chipflow build`` would exit 1).

    Raises
    ------
    SpecError, DesignError, LayoutError
        Bad file, targets that the fabrication limits cannot meet, a tree that does not fit.
    """
    from chipflow.build import DesignSource, build_design, nominal_tree
    from chipflow.checks import level_statuses
    from chipflow.design.table import generation_table_dict
    from chipflow.network.summary import generation_labels
    from chipflow.report.console import level_table, totals_and_checks
    from chipflow.spec.tree import load_tree_spec

    source = DesignSource(top.source, top, "")
    if load_tree_spec(top).shape == "round":  # cannot be drawn
        design, solution, results = nominal_tree(source)
        note = (
            "lengths are nominal: a round-tube tree is not drawn (no supply or tubing either), "
            "so these numbers are the tree's alone"
        )
    else:
        build = build_design(source)
        design, solution, results = build.design, build.solution, build.results
        note = "lengths as drawn on the chip, with the supply and tubing (as `chipflow build`)"
    ok = results["status"] != "fail"
    if as_json:
        table = generation_table_dict(design, solution)
        verdicts = level_statuses(results["checks"])
        for label, row in zip(generation_labels(table["levels"]), table["levels"], strict=True):
            row["status"] = verdicts.get(label, "")
        if load_tree_spec(top).shape == "round":
            table["lengths"] = "nominal"
        table["warnings"] = list(results["warnings"])
        table["checks"] = results["checks"]
        table["totals"] = results["totals"]
        table["status"] = results["status"]
        table["chambers"] = results.get("chambers") or []
        return json.dumps(table, indent=2), ok
    table = level_table(results)
    chambers = ""
    if results.get("chambers"):  # a tree that ends in a chamber
        from chipflow.report.console import chamber_table

        rows = chamber_table(results["chambers"], results["checks"])
        chambers = f"\nchambers (floor shear over each chamber's floor, pillars left out)\n{rows}\n"
    head = f"generations, inlet to outlet\n{table}\n{note}\n{chambers}"
    return f"{head}\n{totals_and_checks(results)}", ok


def check_tree(top: Table, as_json: bool) -> bool:
    """Print :func:`tree_check` of a tree design; False when a check fails."""
    text, ok = tree_check(top, as_json=as_json)
    click.echo(text)
    return ok


@click.command("check")
@click.argument("design", type=click.Path(dir_okay=False, path_type=str))
@click.option("--json", "as_json", is_flag=True, help="Print SI values as one JSON object.")
@settings_option
def command(design: str, as_json: bool, settings: tuple[str, ...]) -> None:
    """Solve DESIGN's channel network: pressures, flows, velocity and wall shear.

    \b
    Example:
      chipflow check bench_loop_network

    DESIGN is a design file, or the name of a bundled design (`chipflow designs`).

    A tree design is drawn in memory (nothing is written), so the numbers and the verdict are
    those of `chipflow build`. Exit status: 0 when every check passes (warnings allowed), 1
    when a check fails, 2 for bad input.
    """
    if settings:
        from chipflow.build import read_design_source

        top = read_design_source(resolve_design(design), settings).top
    else:
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
