"""The short console summary of a build: a per-generation table and the checks."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from chipflow.report.figures import generation_labels
from chipflow.report.transport import transport_lines
from chipflow.units import lab_number

__all__ = [
    "console_summary",
    "totals_and_checks",
    "format_table",
    "channel_table",
    "CHANNEL_COLUMNS",
]

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

#: Columns of the per-channel table of an explicit network: header, unit, key, scale.
#: Flows are magnitudes along the direction ``from -> to`` of the "flow" column's sign.
CHANNEL_COLUMNS = (
    ("channel", "", "channel", None),
    ("from", "", "from", None),
    ("to", "", "to", None),
    ("width", "um", "width", 1e6),
    ("depth", "um", "depth", 1e6),
    ("length", "mm", "length", 1e3),
    ("flow", "uL/min", "flow", 6e10),
    ("u_mean", "mm/s", "mean_velocity", 1e3),
    ("floor shear", "Pa", "wall_shear_floor", 1.0),
    ("peak shear", "Pa", "wall_shear_max", 1.0),
    ("Re", "", "reynolds", 1.0),
    ("t_res", "s", "residence_time", 1.0),
    ("p_in", "Pa", "pressure_in", 1.0),
    ("p_out", "Pa", "pressure_out", 1.0),
)


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
    return lab_number(value * scale)


def channel_table(channels: Sequence[Mapping[str, Any]]) -> str:
    """The per-channel table of an explicit network in lab units (one row per channel).

    A round tube shows its inner diameter as width and depth; a flow against the ``from ->
    to`` direction is negative.

    >>> text = channel_table([{"channel": "a", "from": "in", "to": "out", "width": 2e-4,
    ...     "depth": 5e-5, "length": 0.004, "flow": 8.333e-11, "mean_velocity": 0.008333,
    ...     "wall_shear_floor": 1.1, "wall_shear_max": 1.1, "reynolds": 0.6,
    ...     "residence_time": 0.48, "pressure_in": 500.0, "pressure_out": 250.0}])
    >>> text.splitlines()[2].split()
    ['a', 'in', 'out', '200', '50', '4', '5', '8.333', '1.1', '1.1', '0.6', '0.48', '500', '250']
    """
    header = [h for h, *_ in CHANNEL_COLUMNS]
    table = [[f"[{u}]" if u else "" for _, u, *_ in CHANNEL_COLUMNS]]
    for row in channels:  # the rows are already formed; this only lays them out
        table.append([_cell(row.get(k), s) for _, _, k, s in CHANNEL_COLUMNS])
    return format_table(table, header, "lll" + "r" * (len(CHANNEL_COLUMNS) - 3))


def console_summary(results: Mapping[str, Any]) -> str:
    """Plain-text summary in lab units: the generation table, the per-channel table of an
    explicit network, totals and every check.

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
    channels = list(results.get("channels") or [])
    if channels:
        lines += ["channels (flow is negative against from -> to)", channel_table(channels), ""]
    lines += totals_and_checks(results).splitlines()
    return "\n".join(lines)


def totals_and_checks(results: Mapping[str, Any]) -> str:
    """The lines under the tables: supply pressure and flow, sizing notes and the checks."""
    lines: list[str] = []
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
    lines += transport_lines(results)
    for warning in results.get("warnings") or []:
        lines.append(f"sizing: {warning}")
    checks = list(results.get("checks") or [])
    counts = {s: sum(c["status"] == s for c in checks) for s in ("pass", "warn", "fail")}
    lines.append(f"checks: {counts['pass']} pass, {counts['warn']} warn, {counts['fail']} fail")
    for c in checks:
        if c["status"] != "pass":
            lines.append(f"  {_MARK[c['status']]} {c['name']}: {c['message']}")
    return "\n".join(lines)
