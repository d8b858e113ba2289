"""The short console summary of a build: a per-generation table and the checks."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from chipflow import display
from chipflow.report.transport import transport_lines

__all__ = [
    "console_summary",
    "level_table",
    "level_cells",
    "totals_and_checks",
    "verdict_line",
    "format_table",
    "channel_table",
    "chamber_table",
    "CHANNEL_COLUMNS",
    "CHAMBER_COLUMNS",
    "LEVEL_COLUMNS",
]

#: Columns of the per-level table: header, results key, kind of quantity (its display unit
#: is chosen per column by :func:`chipflow.display.column`; None: shown as it is).
LEVEL_COLUMNS = (
    ("n", "count", None),
    ("width", "width", "width"),
    ("depth", "depth", "width"),
    ("length", "length", "length"),
    ("flow/ch", "flow_per_channel", "flow"),
    ("u_mean", "mean_velocity", "velocity"),
    ("floor shear", "wall_shear_floor", "shear"),
    ("Re", "reynolds", "number"),
    ("t_res", "residence_time", "time"),
    ("p_in", "pressure_in", "pressure"),
)
#: How a status shows in tables and check lines.
_MARK = {"pass": "ok", "warn": "WARN", "fail": "FAIL"}

#: Columns of the per-channel table of an explicit network: header, key, kind of quantity.
#: Flows are signed along the direction ``from -> to``.
CHANNEL_COLUMNS = (
    ("channel", "channel", None),
    ("from", "from", None),
    ("to", "to", None),
    ("width", "width", "width"),
    ("depth", "depth", "width"),
    ("length", "length", "length"),
    ("flow", "flow", "flow"),
    ("u_mean", "mean_velocity", "velocity"),
    ("floor shear", "wall_shear_floor", "shear"),
    ("peak shear", "wall_shear_max", "shear"),
    ("Re", "reynolds", "number"),
    ("t_res", "residence_time", "time"),
    ("p_in", "pressure_in", "pressure"),
    ("p_out", "pressure_out", "pressure"),
)

#: Columns of the chamber table: header, key (``floor_shear`` percentiles flattened), kind.
CHAMBER_COLUMNS = (
    ("chamber", "name", None),
    ("width", "width", "length"),
    ("length", "length", "length"),
    ("depth", "depth", "width"),
    ("pillars", "pillar_text", None),
    ("flow", "flow", "flow"),
    ("resistance", "resistance", "resistance"),
    ("t_res", "residence_time", "time"),
    ("p05", "p05", "shear"),
    ("p50", "p50", "shear"),
    ("p95", "p95", "shear"),
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


def _columns(rows: Sequence[Mapping[str, Any]], columns) -> tuple[list[str], list[list[str]]]:
    """The unit line and the cells of ``columns`` over ``rows``, one unit per column."""
    units, cells = [], []
    for _, key, kind in columns:  # a dozen columns
        values = [row.get(key) for row in rows]
        if kind is None:
            units.append("")
            cells.append(["-" if v is None else str(v) for v in values])
        elif kind == "number":
            units.append("")
            cells.append([display.number(v) for v in values])
        else:
            unit, texts = display.column(values, kind)
            units.append(f"[{unit}]")
            cells.append(texts)
    return units, [list(r) for r in zip(*cells, strict=True)] if rows else []


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
    units, body = _columns(channels, CHANNEL_COLUMNS)
    return format_table([units, *body], header, "lll" + "r" * (len(CHANNEL_COLUMNS) - 3))


def chamber_table(chambers: Sequence[Mapping[str, Any]], checks=()) -> str:
    """The chambers of an explicit network in lab units: shape, flow, resistance, floor shear
    percentiles over the floor, the share of the floor inside the window and the verdict of
    each chamber's floor check (``checks``: the build's checks).

    >>> text = chamber_table([{"name": "A", "width": 2e-3, "length": 8e-3, "depth": 1e-4,
    ...     "pillars": {"diameter": 1.5e-4, "pitch": 4e-4, "pattern": "hex", "count": 60},
    ...     "flow": 1.667e-11, "resistance": 1.1e11, "residence_time": 96.0,
    ...     "floor_shear": {"p05": 0.0015, "p50": 0.005, "p95": 0.0083},
    ...     "inside_window": 0.977}])
    >>> text.splitlines()[2].split()[:11]
    ['A', '2', '8', '100', '60', 'hex', '150/400', '1', '110', '96', '0.0015']
    >>> text.splitlines()[2].split()[11:]
    ['0.005', '0.0083', '97.7', '%', '-']
    """
    from chipflow.checks.result import level_statuses

    rows = []
    for c in chambers:  # a handful of chambers
        p = c.get("pillars")
        text = "-" if not p else (
            f"{p['count']} {p['pattern']} {p['diameter'] * 1e6:.4g}/{p['pitch'] * 1e6:.4g}"
        )  # fmt: skip
        rows.append({**c, **(c.get("floor_shear") or {}), "pillar_text": text})
    units, body = _columns(rows, CHAMBER_COLUMNS)
    units[4] = "[um]"
    verdicts = level_statuses(list(checks))
    for row, cells in zip(rows, body, strict=True):  # a handful of chambers
        cells.append(display.fraction(row.get("inside_window")))
        cells.append(_MARK.get(verdicts.get(f"chamber {row['name']}"), "-"))
    header = [h for h, *_ in CHAMBER_COLUMNS] + ["in window", "verdict"]
    align = "lrrrl" + "r" * (len(CHAMBER_COLUMNS) - 5) + "rl"
    return format_table([[*units, "", ""], *body], header, align)


def _window_text(check: Mapping[str, Any]) -> str:
    low, high = check.get("limit_low"), check.get("limit")
    if low is not None and high is not None:
        return f"{display.number(low, 3)}-{display.number(high, 3)}"
    if high is not None:
        return f"<= {display.number(high, 3)}"
    return f">= {display.number(check.get('value'), 3)}" if low is None else f">= {low:.3g}"


def level_table(results: Mapping[str, Any]) -> str:
    """The per-level table of a build in lab units, with each level's shear window and
    verdict (empty text when the build has no levels).

    The verdict of a level is the worst status of the checks that name it
    (:func:`chipflow.checks.level_statuses`): the table, the check count and the exit status
    come from the same checks. ``chipflow build`` and ``chipflow check`` print this table.

    >>> rows = [{"generation": 0, "role": "bed", "count": 8, "width": 5.1e-5, "depth": 5e-5,
    ...          "length": 0.0041, "flow_per_channel": 6.6e-12, "mean_velocity": 0.00259,
    ...          "wall_shear_floor": 0.4701, "reynolds": 0.1386, "residence_time": 1.58,
    ...          "pressure_in": 120.0}]
    >>> checks = [{"name": "floor shear: bed", "status": "warn", "value": 0.4701,
    ...            "limit": 1.0, "limit_low": 0.5, "unit": "Pa", "level": "bed"}]
    >>> text = level_table({"generations": rows, "checks": checks}).splitlines()
    >>> text[1].split()
    ['[um]', '[um]', '[mm]', '[uL/min]', '[mm/s]', '[Pa]', '[s]', '[Pa]', '[Pa]']
    >>> " ".join(text[2].split())
    'bed 8 51 50 4.1 0.396 2.59 0.4701 0.1386 1.58 120 0.5-1 WARN'
    """
    cells = level_cells(results)
    if cells is None:
        return ""
    header, units, body = cells
    table = [["", *units], *body]
    return format_table(table, header, "l" + "r" * (len(header) - 2) + "l")


def level_cells(
    results: Mapping[str, Any],
) -> tuple[list[str], list[str], list[list[str]]] | None:
    """The level table's header, unit line and rows of text (None without levels): the one
    table that the console, the notebook view and ``chipflow check`` show."""
    # here, not at the top: `chipflow channel` loads this module and neither the checks nor
    # the network (tests/test_startup.py)
    from chipflow.checks.result import level_statuses
    from chipflow.network.summary import generation_labels

    rows = list(results.get("generations") or [])
    if not rows:
        return None
    labels = generation_labels(rows)
    checks = list(results.get("checks") or [])
    verdicts = level_statuses(checks)
    windows: dict[str, str] = {}
    for check in checks:  # the first shear window that names a level is the cells' own
        level = check.get("level")
        if level and check.get("unit") == "Pa" and level not in windows:
            windows[level] = _window_text(check)
    units, body = _columns(rows, LEVEL_COLUMNS)
    out = []
    for label, cells in zip(labels, body, strict=True):  # loop over levels
        verdict = verdicts.get(label)
        out.append([label, *cells, windows.get(label, ""), _MARK.get(verdict, "-")])
    header = ["level", *(h for h, *_ in LEVEL_COLUMNS), "window", "verdict"]
    return header, [*units, "[Pa]", ""], out


def console_summary(results: Mapping[str, Any]) -> str:
    """Plain-text summary in lab units: the level table, the per-channel table of an
    explicit network, totals and every check.

    Checks that pass are counted in one line; warnings and failures carry their message.
    """
    lines: list[str] = []
    table = level_table(results)
    if table:
        lines += ["generations, inlet to outlet", table, ""]
    channels = list(results.get("channels") or [])
    if channels:
        lines += ["channels (flow is negative against from -> to)", channel_table(channels), ""]
    chambers = list(results.get("chambers") or [])
    if chambers:
        table = chamber_table(chambers, results.get("checks") or [])
        lines += ["chambers (floor shear over each chamber's floor, pillars left out)", table, ""]
    lines += totals_and_checks(results).splitlines()
    return "\n".join(lines)


def verdict_line(results: Mapping[str, Any]) -> str:
    """The count of the checks by status: ``checks: 9 pass, 2 warn, 0 fail``."""
    checks = list(results.get("checks") or [])
    counts = {s: sum(c["status"] == s for c in checks) for s in ("pass", "warn", "fail")}
    return f"checks: {counts['pass']} pass, {counts['warn']} warn, {counts['fail']} fail"


def region_lines(results: Mapping[str, Any]) -> list[str]:
    """One line per culture region: its share of the flow as solved and as asked, its bed
    channels, its footprint and the drawn extent of its bed (nothing for a design of one
    bed without a footprint)."""
    regions = results.get("regions") or []
    lines = []
    for r in regions:
        if not r["name"] and r["footprint"] is None:
            continue
        along, across = r["bed_extent"]
        bed = f"bed {display.quantity(along, 'length')} x {display.quantity(across, 'length')}"
        if r["footprint"] is not None:
            fa, fc = r["footprint"]
            bed += f" in its {display.quantity(fa, 'length')} x "
            bed += f"{display.quantity(fc, 'length')} footprint"
        head = f"region {r['name']}: " if r["name"] else "bed: "
        share = ""
        if r["name"]:
            share = (
                f"{display.fraction(r['flow_fraction'], 4)} of the flow (target "
                f"{display.fraction(r['flow_fraction_target'], 4)}), "
            )
        lines.append(f"{head}{share}{r['bed_channels']} bed channels, {bed}")
    return lines


def totals_and_checks(results: Mapping[str, Any]) -> str:
    """The lines under the tables: supply pressure and flow, sizing notes and the checks."""
    lines: list[str] = []
    totals = results.get("totals", {})
    if totals.get("total_flow"):
        line = (
            f"supply pressure {display.quantity(totals['inlet_pressure'], 'pressure', 4)}, "
            f"total flow {display.quantity(totals['total_flow'], 'flow', 4)}"
        )
        if totals.get("transit_time"):
            line += f", transit through the chip {display.quantity(totals['transit_time'], 'time')}"
        if totals.get("tubing_transit_time"):
            tubing = display.quantity(totals["tubing_transit_time"], "time")
            line += f" (plus {tubing} in the tubing)"
        lines.append(line)
    field = results.get("field")
    if field:
        ratio = field["resistance"] / field["network_resistance"] - 1.0
        lines.append(
            f"field: chip resistance {display.fraction(ratio, 2, signed=True)} against the "
            f"network, {display.fraction(field['area_outside_window'])} of the seeded floor "
            f"outside the shear window ({field['mesh_triangles']} triangles)"
        )
    composed = results.get("composed_field")
    if composed:
        ratio = composed["resistance"] / composed["network_resistance"] - 1.0
        shear = " / ".join(
            display.quantity(composed["floor_shear"][q], "shear", 3) for q in ("p05", "p50", "p95")
        )
        outside = display.fraction(composed["area_outside_window"])
        lines.append(
            f"field composed from {composed['pieces']} pieces ({composed['kinds']} solved) and "
            f"{composed['bodies']} straight bodies: chip resistance "
            f"{display.fraction(ratio, 2, signed=True)} against the network, floor shear "
            f"{shear} (p05 / median / p95), {outside} of the floor outside the shear window"
        )
    lines += region_lines(results)
    lines += transport_lines(results)
    for warning in results.get("warnings") or []:
        lines.append(f"sizing: {warning}")
    lines.append(verdict_line(results))
    for c in results.get("checks") or []:
        if c["status"] != "pass":
            lines.append(f"  {_MARK[c['status']]} {c['name']}: {c['message']}")
    return "\n".join(lines)
