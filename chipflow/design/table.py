"""The per-generation table of a sized tree: geometry, flow, shear and the target window.

:func:`generation_table` gives one row per level (inlet to outlet) in SI units;
:func:`generation_table_dict` a JSON-able form and :func:`generation_table_text` the table in
lab units that ``chipflow check`` prints for tree designs.

Values come from a solved network (:func:`chipflow.design.tree_network.solve_tree` by default,
or a solution of the drawn layout whose channels carry the same roles and generations):
per level the mean over its channels, and the pass/fail check uses the smallest and largest
shear of the level's channels against the window.
"""

from __future__ import annotations

from chipflow.design.model import TreeDesign
from chipflow.network import Solution
from chipflow.network.summary import level_rows
from chipflow.report.console import format_table
from chipflow.spec.reader import Table
from chipflow.units import lab_number, units_of

__all__ = [
    "generation_table",
    "generation_table_dict",
    "generation_table_text",
    "tree_check",
    "SI_UNITS",
]

#: SI unit of every numeric column.
SI_UNITS = units_of(
    "count",
    "width",
    "depth",
    "length",
    "flow_per_channel",
    "total_area",
    "mean_velocity",
    "wall_shear_floor",
    "wall_shear_mean",
    "wall_shear_max",
    "reynolds",
    "residence_time",
    "pressure_drop",
    "flow_total",
    "pressure_in",
    "pressure_out",
    "shear_target",
    "shear_min",
    "shear_max",
)

_KIND_FIELD = {"floor": "wall_shear_floor", "mean": "wall_shear_mean", "max": "wall_shear_max"}


def generation_table(design: TreeDesign, solution: Solution | None = None) -> list[dict]:
    """One row per level, inlet to outlet, in SI units (see :data:`SI_UNITS`).

    Parameters
    ----------
    design : TreeDesign
    solution : Solution, optional
        A solved network whose channels carry ``role`` and ``generation``; by default the
        design's own tree with nominal lengths, fed with the design flow.

    Returns
    -------
    list of dict
        The per-level means of :func:`chipflow.network.summary.level_rows`, plus
        ``shear_target``, ``shear_min``, ``shear_max``, ``shear_kind`` and ``status``
        ("pass", "fail", or "" when no window applies).
    """
    if solution is None:
        from chipflow.design.tree_network import solve_tree

        solution = solve_tree(design)
    by_level = {(r["role"], r["generation"]): r for r in level_rows(solution)}
    field = _KIND_FIELD[design.shear_kind]
    rows = []
    for level in design.levels:
        row = by_level.get((level.role, level.generation))
        if row is None:
            continue
        low, high = level.shear_min, level.shear_max
        status = ""
        if low is not None or high is not None:
            shear = row[field]
            ok = (low is None or shear >= low * (1 - 1e-9)) and (
                high is None or shear <= high * (1 + 1e-9)
            )
            status = "pass" if ok else "fail"
        rows.append(
            {
                **row,
                "shear_target": level.shear_target,
                "shear_min": low,
                "shear_max": high,
                "shear_kind": design.shear_kind,
                "status": status,
            }
        )
    return rows


def generation_table_dict(design: TreeDesign, solution: Solution | None = None) -> dict:
    """JSON-able form: name, flow, fluid, rows, warnings, units and the overall status."""
    rows = generation_table(design, solution)
    return {
        "name": design.name,
        "total_flow": design.total_flow,
        "fluid": {
            "name": design.fluid.name,
            "viscosity": design.fluid.viscosity,
            "density": design.fluid.density,
        },
        "shear_kind": design.shear_kind,
        "levels": rows,
        "warnings": list(design.warnings),
        "status": "fail" if any(r["status"] == "fail" for r in rows) else "pass",
        "units": SI_UNITS,
    }


_COLUMNS = (
    ("gen", "generation", "", None),
    ("role", "role", "", None),
    ("n", "count", "", None),
    ("width", "width", "um", 1e6),
    ("depth", "depth", "um", 1e6),
    ("flow/ch", "flow_per_channel", "uL/min", 6e10),
    ("area", "total_area", "mm^2", 1e6),
    ("u_mean", "mean_velocity", "mm/s", 1e3),
    ("floor", "wall_shear_floor", "Pa", 1.0),
    ("mean", "wall_shear_mean", "Pa", 1.0),
    ("max", "wall_shear_max", "Pa", 1.0),
    ("Re", "reynolds", "", 1.0),
)


def generation_table_text(design: TreeDesign, solution: Solution | None = None) -> str:
    """The table in lab units (um, uL/min, mm^2, mm/s, Pa), with window and pass/fail.

    Examples
    --------
    >>> from chipflow.design.model import Level, TreeDesign
    >>> from chipflow.physics.fluid import water
    >>> lv = [Level(0, "bed", 1, 2e-4, 5e-5, 1e-2, 5e-9 / 60, shear_min=1.0, shear_max=2.0)]
    >>> text = generation_table_text(TreeDesign("t", water(), 5e-9 / 60, tuple(lv)))
    >>> text.splitlines()[2].split()[8:]  # floor, mean, max shear, Re, window, shear, check
    ['1.185', '0.9511', '1.185', '0.6644', '1', '-', '2', 'floor', 'pass']
    """
    rows = generation_table(design, solution)
    header = [c[0] for c in _COLUMNS] + ["window [Pa]", "shear", "check"]
    units = ["", "", "", "um", "um", "uL/min", "mm^2", "mm/s", "Pa", "Pa", "Pa", "", "", "", ""]
    body = []
    for r in rows:
        cells = []
        for _, key, _, scale in _COLUMNS:
            value = r[key]
            cells.append(str(value) if scale is None else lab_number(value * scale))
        low, high = r["shear_min"], r["shear_max"]
        if low is None and high is None:
            window = ""
        elif low is None:
            window = f"<= {high:.3g}"
        elif high is None:
            window = f">= {low:.3g}"
        else:
            window = f"{low:.3g} - {high:.3g}"
        cells += [window, r["shear_kind"] if window else "", r["status"]]
        body.append(cells)
    lines = [format_table([units, *body], header, "rl" + "r" * (len(header) - 2))]
    for warning in design.warnings:
        lines.append(f"warning: {warning}")
    return "\n".join(lines)


def tree_check(top: Table, *, as_json: bool = False) -> tuple[str, bool]:
    """What ``chipflow check`` prints for a tree design file (a file with ``[tree]``).

    The design is sized, drawn on the chip (in memory: nothing is written), extracted, fed
    through its supply and tubing, solved and checked exactly as ``chipflow build`` does, so
    the numbers and the verdict are the build's: lengths as drawn, not nominal. A round-tube
    tree (a comparison with Murray's law) cannot be drawn: its table is solved with the
    nominal lengths and says so.

    Parameters
    ----------
    top : Table
        The parsed design file (:func:`chipflow.spec.reader.read_design_file`).
    as_json : bool
        JSON text (SI units) instead of the lab-unit table.

    Returns
    -------
    text : str
        The per-level table with its shear windows, then the supply pressure, the sizing and
        drawing notes and the checks (or the JSON: the table's ``levels``, ``checks`` and
        the build's ``status``).
    ok : bool
        False when a check fails (as ``chipflow build`` would exit 1).

    Raises
    ------
    SpecError, DesignError, LayoutError
        Bad file, targets that the fabrication limits cannot meet, a tree that does not fit.
    """
    import json

    from chipflow.build import DesignSource, build_design
    from chipflow.design.sizing import size_tree
    from chipflow.design.tree_network import solve_tree
    from chipflow.report.console import totals_and_checks
    from chipflow.spec.tree import load_tree_spec

    spec = load_tree_spec(top)
    if spec.shape == "round":
        # a round-tube tree is a comparison with Murray's law and cannot be drawn
        design = size_tree(spec)
        solution = solve_tree(design)
        table = generation_table_dict(design, solution)
        table["lengths"] = "nominal"
        ok = table["status"] == "pass"
        if as_json:
            return json.dumps(table, indent=2), ok
        note = (
            "lengths are nominal: a round-tube tree is not drawn (no supply or tubing either), "
            "so these numbers are the tree's alone"
        )
        return f"{generation_table_text(design, solution)}\n{note}", ok
    build = build_design(DesignSource(top.source, top, ""), field=False)  # no field in check
    ok = build.status != "fail"
    table = generation_table_dict(build.design, build.solution)
    if as_json:
        table["warnings"] = list(build.results["warnings"])
        table["checks"] = build.results["checks"]
        table["totals"] = build.results["totals"]
        table["status"] = build.status
        return json.dumps(table, indent=2), ok
    text = generation_table_text(build.design, build.solution).split("\nwarning: ")[0]
    note = "lengths as drawn on the chip, with the supply and tubing (as `chipflow build`)"
    return f"{text}\n{note}\n\n{totals_and_checks(build.results)}", ok
