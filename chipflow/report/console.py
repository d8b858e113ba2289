"""The short console summary of a build: a per-generation table and the checks."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from chipflow.report.figures import generation_labels

__all__ = ["console_summary", "format_table"]

_COLUMNS = (
    # header, unit, key, scale
    ("level", "", None, None),
    ("n", "", "count", None),
    ("width", "um", "width", 1e6),
    ("depth", "um", "depth", 1e6),
    ("length", "mm", "length", 1e3),
    ("flow/ch", "uL/min", "flow_per_channel", 6e10),
    ("u_mean", "mm/s", "mean_velocity", 1e3),
    ("floor shear", "Pa", "wall_shear_floor", 1.0),
    ("Re", "", "reynolds", 1.0),
    ("t_res", "s", "residence_time", 1.0),
    ("p_in", "Pa", "pressure_in", 1.0),
)
_MARK = {"pass": "ok  ", "warn": "WARN", "fail": "FAIL"}


def format_table(
    rows: Sequence[Sequence[str]],
    header: Sequence[str] | None = None,
    align: str | None = None,
) -> str:
    """Lay out text cells in columns.

    ``align`` holds one letter per column, ``l`` or ``r``; by default the first and the last
    columns are left-aligned (a label and a unit) and the others right-aligned (numbers).

    >>> print(format_table([("flow", "5", "uL/min")], ("quantity", "value", "unit")))
    quantity  value  unit
    flow          5  uL/min
    """
    table = ([tuple(header)] if header else []) + [tuple(r) for r in rows]
    n = len(table[0])
    align = align or "l" + "r" * (n - 2) + "l" if n > 1 else "l"
    widths = [max(len(row[i]) for row in table) for i in range(n)]
    lines = []
    for row in table:
        cells = [
            cell.ljust(width) if a == "l" else cell.rjust(width)
            for cell, width, a in zip(row, widths, align, strict=True)
        ]
        lines.append("  ".join(cells).rstrip())
    return "\n".join(lines)


def _cell(value: Any, scale: float | None) -> str:
    if value is None:
        return "-"
    if scale is None:
        return str(value)
    return f"{value * scale:.4g}"


def console_summary(results: Mapping[str, Any]) -> str:
    """Plain-text summary in lab units: the generation table, totals and every check.

    Checks that pass are listed in one line each; warnings and failures carry their message.
    """
    rows = list(results.get("generations") or [])
    lines: list[str] = []
    if rows:
        labels = generation_labels(rows)
        table = [[f"[{u}]" if u else "" for _, u, *_ in _COLUMNS]]
        for label, row in zip(labels, rows, strict=True):
            table.append([label] + [_cell(row.get(k), s) for _, _, k, s in _COLUMNS[1:]])
        header = [h for h, *_ in _COLUMNS]
        lines += [format_table(table, header, "l" + "r" * (len(_COLUMNS) - 1)), ""]
    totals = results.get("totals", {})
    if totals.get("total_flow"):
        line = (
            f"supply pressure {totals['inlet_pressure']:.4g} Pa, total flow "
            f"{totals['total_flow'] * 6e10:.4g} uL/min"
        )
        if totals.get("transit_time"):
            line += f", transit through the chip {totals['transit_time']:.3g} s"
        if totals.get("tubing_transit_time"):
            line += f" (plus {totals['tubing_transit_time']:.3g} s in the tubing)"
        lines.append(line)
    field = results.get("field")
    if field:
        ratio = field["resistance"] / field["network_resistance"] - 1.0
        lines.append(
            f"field: chip resistance {ratio:+.1%} against the network, "
            f"{field['area_outside_window']:.1%} of the seeded floor outside the shear window "
            f"({field['mesh_triangles']} triangles)"
        )
    for warning in results.get("warnings") or []:
        lines.append(f"sizing: {warning}")
    checks = list(results.get("checks") or [])
    counts = {s: sum(c["status"] == s for c in checks) for s in ("pass", "warn", "fail")}
    lines.append(f"checks: {counts['pass']} pass, {counts['warn']} warn, {counts['fail']} fail")
    for c in checks:
        if c["status"] != "pass":
            lines.append(f"  {_MARK[c['status']]} {c['name']}: {c['message']}")
    return "\n".join(lines)
