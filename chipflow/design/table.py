"""The per-generation table of a sized tree: geometry, flow, shear and the target window.

:func:`generation_table` gives one row per level (inlet to outlet) in SI units and
:func:`generation_table_dict` a JSON-able form. Values come from a solved network
(:func:`chipflow.design.tree_network.solve_tree` by default, or a solution of the drawn layout
whose channels carry the same roles and generations): per level the mean over its channels.

The rows carry numbers only; whether a level passes is the checks' verdict
(:func:`chipflow.checks.level_statuses`), shown by the tables of :mod:`chipflow.report.console`.
"""

from __future__ import annotations

from chipflow.design.model import TreeDesign
from chipflow.network import Solution
from chipflow.network.summary import level_rows
from chipflow.units import units_of

__all__ = ["generation_table", "generation_table_dict", "SI_UNITS"]

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


def generation_table(design: TreeDesign, solution: Solution | None = None) -> list[dict]:
    """One row per level, inlet to outlet, in SI units (see :data:`SI_UNITS`).

    Parameters
    ----------
    design : TreeDesign or RegionsDesign
    solution : Solution, optional
        A solved network whose channels carry ``role`` and ``generation``; by default the
        design's own tree with nominal lengths, fed with the design flow.

    Returns
    -------
    list of dict
        The per-level means of :func:`chipflow.network.summary.level_rows`, plus the
        design's ``shear_target``, ``shear_min``, ``shear_max`` and ``shear_kind``.
    """
    if solution is None:
        from chipflow.design.tree_network import solve_tree

        solution = solve_tree(design)
    levels = _levels(design)
    rows = []
    for row in level_rows(solution):
        level = levels.get((row["region"], row["role"], row["generation"]))
        if level is None:
            continue
        rows.append(
            {
                **row,
                "shear_target": level.shear_target,
                "shear_min": level.shear_min,
                "shear_max": level.shear_max,
                "shear_kind": design.shear_kind,
            }
        )
    return rows


def _levels(design) -> dict:
    """The design's levels by (region, role, generation): a tree's (region ""), or those of
    a chip of several culture regions
    (:meth:`chipflow.design.regions.RegionsDesign.levels_by_region`)."""
    if hasattr(design, "levels_by_region"):
        return design.levels_by_region()
    out = {("", lv.role, lv.generation): lv for lv in design.levels}
    if getattr(design, "chamber", None) is not None:  # the last generation meets the chamber
        bed = design.bed
        out[("", "distribution", bed.generation)] = out[("", "collection", bed.generation)] = bed
    return out


def generation_table_dict(design: TreeDesign, solution: Solution | None = None) -> dict:
    """JSON-able form: name, flow, fluid, rows, warnings and units."""
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
        "units": SI_UNITS,
    }
