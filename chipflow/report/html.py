"""The build report: one self-contained HTML file, readable offline.

Everything comes from the results dict (the content of results.json, SI floats) and the SVG
figures the caller passes in; nothing is recomputed. The page has no scripts, no external
resources and no timestamps: the same results give the same bytes.
"""

from __future__ import annotations

import html
import math
import os
import re
from collections.abc import Mapping
from typing import Any

from chipflow import display
from chipflow.errors import ExportError
from chipflow.export._files import atomic_write
from chipflow.report.operation import operation_html
from chipflow.report.transport import transport_html

__all__ = ["write_report", "report_html", "write_markdown_summary", "CAUTIONS"]

#: The Cautions section, one paragraph each (title, text).
CAUTIONS = (
    (
        "Pressure and bond failure",
        "A pressurised chip can delaminate or burst and spray medium. Keep the inlet pressure "
        "below the bond limit in the checks above (with its safety margin), put a pressure "
        "relief or a pressure-limited pump in the line, start at a low flow and raise it "
        "stepwise, and wear eye protection while priming and running the chip.",
    ),
    (
        "Sterile and biosafety handling",
        "Cells, medium and anything that touched them are biological material. Prime, seed and "
        "perfuse the chip with sterile technique in a biosafety cabinet, treat spills and "
        "waste by the rules for the biosafety level of your cells, and decontaminate the chip, "
        "tubing and pump before disposal.",
    ),
    (
        "Model values must be confirmed on the bench",
        "The numbers in this report come from a model of fully developed laminar flow in "
        "channels of the drawn size. Moulded depths, bond squeeze, bubbles, cell layers and "
        "tubing change them. Measure the flow and the pressure on the real chip (for example "
        "by bead velocimetry in the bed and a pressure sensor at the inlet) before relying on "
        "the shear and residence times shown here.",
    ),
    (
        "Local rules prevail",
        "Local codes, your institution's biosafety rules and the fabrication facility's design "
        "rules take precedence over this report and over chipflow's defaults.",
    ),
)

_MARK = {"pass": "&#10003; pass", "warn": "! warn", "fail": "&#10007; fail"}

_CSS = """
:root { --ink: #24313d; --muted: #5c6b78; --rule: #d5dce2; --pass: #1f6f43;
  --warn: #8a5a00; --fail: #a3262a; --pass-bg: #e3f2e8; --warn-bg: #fbefd5;
  --fail-bg: #f8dede; --band: #f5f7f9; }
body { font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif;
  color: var(--ink); max-width: 100rem; margin: 2rem auto; padding: 0 1.2rem; }
p, ul, figcaption { max-width: 60rem; }
h1 { font-size: 1.6rem; margin-bottom: 0.2rem; }
h2 { font-size: 1.15rem; border-bottom: 2px solid var(--rule); padding-bottom: 0.2rem;
  margin-top: 2.2rem; }
.meta { color: var(--muted); font-size: 0.85rem; word-break: break-all; }
.verdict { display: inline-block; padding: 0.3rem 0.8rem; border-radius: 0.3rem;
  font-weight: 600; margin: 0.6rem 0; }
table { border-collapse: collapse; font-size: 0.85rem; margin: 0.6rem 0; }
th, td { padding: 0.25rem 0.4rem; border-bottom: 1px solid var(--rule); text-align: right;
  vertical-align: top; }
th { background: var(--band); font-weight: 600; vertical-align: bottom; }
td.text, th.text { text-align: left; overflow-wrap: break-word; }
tr.bed td { background: #fbf5e8; }
.status { white-space: nowrap; font-weight: 600; border-radius: 0.2rem; padding: 0 0.3rem; }
.pass { color: var(--pass); background: var(--pass-bg); }
.warn { color: var(--warn); background: var(--warn-bg); }
.fail { color: var(--fail); background: var(--fail-bg); }
.source { color: var(--muted); font-size: 0.78rem; }
figure { margin: 1rem 0; }
figure svg { max-width: 100%; height: auto; }
.wide { overflow-x: auto; }
figcaption { color: var(--muted); font-size: 0.85rem; }
.cautions { border-left: 4px solid var(--warn); background: var(--warn-bg);
  padding: 0.4rem 1rem; }
.cautions h3 { font-size: 0.98rem; margin: 0.7rem 0 0.1rem; }
.cautions p { margin: 0.1rem 0 0.5rem; }
footer { color: var(--muted); font-size: 0.8rem; margin-top: 2.5rem; }
@page { size: landscape; margin: 10mm; }
@media print {
  body { font-size: 9pt; max-width: none; margin: 0; padding: 0; }
  h2 { break-after: avoid; margin-top: 1.2rem; }
  h3 { break-after: avoid; }
  .wide { overflow: visible; }
  table { font-size: 6.8pt; width: 100%; }
  th, td { padding: 0.1rem 0.25rem; }
  th { white-space: normal; }
  tr, figure { break-inside: avoid; }
  figure svg { max-width: 100%; max-height: 165mm; }
  .verdict, .status, tr.bed td, th { print-color-adjust: exact; -webkit-print-color-adjust: exact; }
}
"""


# -- formatting ----------------------------------------------------------------------------
def _e(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _num(value: Any, digits: int = 3) -> str:
    """A plain number (noise shown as 0, :func:`chipflow.display.number`)."""
    if value is None:
        return "&ndash;"
    try:
        number = float(value)
    except (TypeError, ValueError):
        return _e(value)
    if math.isnan(number):
        return "&ndash;"
    if math.isinf(number):
        return "&infin;" if number > 0 else "&minus;&infin;"
    return display.number(number, digits)


def _quantity(value: Any, kind: str, digits: int = 3) -> str:
    """An SI value in the unit its magnitude calls for (:func:`chipflow.display.quantity`)."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "&ndash;"
    return _e(display.quantity(value, kind, digits))


def _column(values: list[Any], kind: str, digits: int = 3) -> tuple[str, list[str]]:
    """One table column in one unit chosen by its largest value: (unit, cells)."""
    unit, texts = display.column(values, kind, digits)
    return _e(unit), [("&ndash;" if t == "-" else _e(t)) for t in texts]


#: Kind of quantity of each SI unit a check reports its value in.
_CHECK_KINDS = {"Pa": "pressure", "m": "length", "m^3/s": "flow", "s": "time"}


def _check_value(value: Any, limit: Any, unit: str) -> tuple[str, str]:
    """Value and limit of a check in lab units, each in the unit its magnitude calls for."""
    if unit in _CHECK_KINDS:
        kind = _CHECK_KINDS[unit]
        return _quantity(value, kind), _quantity(limit, kind)
    if unit == "1":  # a ratio or fraction
        shown = [("&ndash;" if v is None else _e(display.fraction(v))) for v in (value, limit)]
        return shown[0], shown[1]
    suffix = f" {_e(unit)}" if unit else ""
    return (
        _num(value) + ("" if value is None else suffix),
        _num(limit) + ("" if limit is None else suffix),
    )


def _table(
    header: list[str],
    rows: list[list[str]],
    text_columns: int | tuple[int, ...] = 1,
    row_classes: list[str] | None = None,
) -> str:
    """An HTML table; ``text_columns`` (the first n, or these indices) are left-aligned text."""
    text = set(range(text_columns)) if isinstance(text_columns, int) else set(text_columns)

    def cell(tag: str, i: int, content: str) -> str:
        cls = ' class="text"' if i in text else ""
        return f"<{tag}{cls}>{content}</{tag}>"

    out = [
        '<div class="wide"><table>',
        "<tr>" + "".join(cell("th", i, h) for i, h in enumerate(header)) + "</tr>",
    ]
    for k, row in enumerate(rows):
        cls = f' class="{row_classes[k]}"' if row_classes and row_classes[k] else ""
        out.append(f"<tr{cls}>" + "".join(cell("td", i, c) for i, c in enumerate(row)) + "</tr>")
    out.append("</table></div>")
    return "\n".join(out)


def _inline_svg(text: str) -> str:
    """Strip what may not stand inside HTML (XML declaration, DOCTYPE, comments before <svg)."""
    start = text.find("<svg")
    if start < 0:
        raise ExportError("a report figure is not SVG text (no <svg> element found)")
    return _METADATA.sub("", text[start:]).strip()


_METADATA = re.compile(r"\s*<metadata>.*?</metadata>", re.DOTALL)


# -- sections ------------------------------------------------------------------------------
def _summary(results: Mapping[str, Any]) -> str:
    checks = results.get("checks", [])
    counts = {s: sum(1 for c in checks if c.get("status") == s) for s in ("pass", "warn", "fail")}
    verdict = "fail" if counts["fail"] else "warn" if counts["warn"] else "pass"
    words = {
        "pass": "Every check passes.",
        "warn": "No check fails; some warn - read them before fabrication.",
        "fail": "At least one check fails - see the checks below before fabrication.",
    }
    return (
        f'<p class="verdict {verdict}">{words[verdict]}</p>'
        f"<p>{counts['pass']} pass, {counts['warn']} warn, {counts['fail']} fail.</p>"
    )


def _operating_point(results: Mapping[str, Any]) -> str:
    fluid = results.get("fluid", {})
    supply = results.get("supply", {})
    totals = results.get("totals", {})
    temperature = fluid.get("temperature")
    viscosity = fluid.get("viscosity")
    resistance = totals.get("total_resistance")
    rows = [
        ["fluid", _e(fluid.get("name", ""))],
        ["viscosity", "&ndash;" if viscosity is None else f"{_num(viscosity * 1e3, 4)} mPa s"],
        [
            "density",
            "&ndash;"
            if fluid.get("density") is None
            else f"{_num(fluid['density'], 4)} kg/m\u00b3",
        ],
        [
            "temperature",
            "&ndash;" if temperature is None else f"{_num(temperature - 273.15, 4)} \u00b0C",
        ],
        ["supply", _e(supply.get("mode", ""))],
        ["total flow", _quantity(totals.get("total_flow"), "flow")],
        ["supply pressure", _quantity(totals.get("inlet_pressure"), "pressure")],
        ["chip inlet pressure", _quantity(totals.get("chip_inlet_pressure"), "pressure")],
        ["outlet pressure", _quantity(totals.get("outlet_pressure"), "pressure")],
        [
            "total hydraulic resistance",
            "&ndash;" if resistance is None else f"{_num(resistance * 1e-9 / 60)} Pa/(uL/min)",
        ],
        ["transit time through the chip", _quantity(totals.get("transit_time"), "time")],
        ["time in the supply tubing", _quantity(totals.get("tubing_transit_time"), "time")],
    ]
    return _table(["quantity", "value"], rows, text_columns=1)


#: Columns of the generations table: header, results key, kind of quantity (None: a count).
_LEVEL_COLUMNS = (
    ("channels", "count", None),
    ("width", "width", "width"),
    ("depth", "depth", "width"),
    ("length", "length", "length"),
    ("total cross-section", "total_area", "area"),
    ("flow per channel", "flow_per_channel", "flow"),
    ("mean velocity", "mean_velocity", "velocity"),
    ("floor shear", "wall_shear_floor", "shear"),
    ("mean shear", "wall_shear_mean", "shear"),
    ("peak shear", "wall_shear_max", "shear"),
    ("Reynolds", "reynolds", "number"),
    ("residence time", "residence_time", "time"),
    ("pressure drop", "pressure_drop", "pressure"),
    ("inlet pressure", "pressure_in", "pressure"),
)


def _columns(items: list[Mapping[str, Any]], columns) -> tuple[list[str], list[list[str]]]:
    """Headers with their units and the cells of ``columns`` over ``items``, by column."""
    headers, cells = [], []
    for header, key, kind in columns:  # a dozen columns
        values = [item.get(key) for item in items]
        if kind is None:
            headers.append(header)
            cells.append([_num(v, 6) for v in values])
        elif kind == "number":
            headers.append(f"{header} [-]")
            cells.append([_num(v) for v in values])
        else:
            unit, texts = _column(values, kind)
            headers.append(f"{header} [{unit}]")
            cells.append(texts)
    return headers, [list(row) for row in zip(*cells, strict=True)]


def _generations(results: Mapping[str, Any]) -> str:
    generations = list(results.get("generations", []))
    from chipflow.network.summary import generation_labels  # light startup: see console

    labels = generation_labels(generations)
    headers, body = _columns(generations, _LEVEL_COLUMNS)
    rows = [
        [_e(label), _e(g.get("role", "")), *cells]
        for label, g, cells in zip(labels, generations, body, strict=True)
    ]
    classes = ["bed" if g.get("role") == "bed" else "" for g in generations]
    return _table(["generation", "role", *headers], rows, text_columns=2, row_classes=classes)


def _regions(results: Mapping[str, Any]) -> str:
    """The culture regions: share of the flow asked and solved, bed channels, footprint and
    the bed's drawn extent (nothing for one bed without a footprint)."""
    regions = [r for r in results.get("regions") or [] if r["name"] or r["footprint"]]
    if not regions:
        return ""

    def size(pair) -> str:
        if pair is None:
            return "&ndash;"
        return f"{_quantity(pair[0], 'length')} &times; {_quantity(pair[1], 'length')}"

    rows = [
        [
            _e(r["name"] or "bed"),
            _num(100 * r["flow_fraction_target"], 4) + " %",
            _num(100 * r["flow_fraction"], 6) + " %",
            str(r["bed_channels"]),
            size(r["footprint"]),
            size(r["bed_extent"]),
        ]
        for r in regions
    ]
    headers = ["culture region", "flow share asked", "as solved", "bed channels",
               "footprint (along &times; across)", "bed as drawn"]  # fmt: skip
    return "<h3>Culture regions</h3>" + _table(headers, rows, text_columns=1)


def _mesh(results: Mapping[str, Any]) -> str:
    """A mesh bed: its cross-connections, the largest cross flow, and one bed channel
    narrowed to half its width (nothing for other beds)."""
    mesh = results.get("mesh")
    if not mesh:
        return ""
    from chipflow import display

    text = (
        f"<h3>Mesh bed</h3>\n<p>{mesh['rows']} rows of cross-connections "
        f"{_quantity(mesh['cross_pitch'], 'length')} apart join neighbouring bed channels "
        f"({mesh['cross_connections']} cross-connections "
        f"{_quantity(mesh['cross_width'], 'width')} wide). The largest cross-connection flow is "
        f"{_e(display.fraction(mesh['cross_flow_max_share']))} of a bed channel's flow "
        f"({_e(mesh['cross_flow_max_channel'])}); in a symmetric bed it comes from the "
        "outermost bed channels, which meet a T at every row instead of a four-arm junction. "
        "Cross-connections carrying next to nothing are nearly stagnant: their cells see next "
        "to no shear.</p>\n"
    )
    narrowed = mesh.get("narrowed")
    if not narrowed:
        return text
    rows = []
    for r in narrowed["channels"]:  # the narrowed channel and its two neighbours
        change = r["flow_narrowed"] / r["flow"] - 1.0 if r["flow"] > 0 else None
        name = r["channel"] + (" (narrowed)" if r["channel"] == narrowed["channel"] else "")
        rows.append(
            [
                _e(name),
                _quantity(r["flow"], "flow"),
                _quantity(r["flow_narrowed"], "flow"),
                _e(display.fraction(change, signed=True)),
            ]
        )
    factor = _e(display.fraction(narrowed["width_factor"]))
    return (
        text + f"<p>One bed channel narrowed to {factor} of its width (a network what-if, the "
        "drawing unchanged): its flow and its neighbours' (the mean over their segments); the "
        "largest cross-connection flow becomes "
        f"{_e(display.fraction(narrowed['cross_flow_max_share']))} of a bed channel's "
        "flow.</p>\n" + _table(["bed channel", "flow", "narrowed", "change"], rows, text_columns=1)
    )


#: Columns of the channel table of an explicit network (after channel, from and to).
_CHANNEL_COLUMNS = (
    ("width", "width", "width"),
    ("depth", "depth", "width"),
    ("length", "length", "length"),
    ("flow", "flow", "flow"),
    ("mean velocity", "mean_velocity", "velocity"),
    ("floor shear", "wall_shear_floor", "shear"),
    ("peak shear", "wall_shear_max", "shear"),
    ("Reynolds", "reynolds", "number"),
    ("residence time", "residence_time", "time"),
    ("inlet pressure", "pressure_in", "pressure"),
    ("outlet pressure", "pressure_out", "pressure"),
)


def _channels(results: Mapping[str, Any]) -> str:
    """The per-channel table of an explicit network (every channel, tubing included)."""
    channels = list(results.get("channels") or [])
    if not channels:
        return ""
    headers, body = _columns(channels, _CHANNEL_COLUMNS)
    header = ["channel", "from", "to", *headers]
    rows = [
        [_e(c.get("channel", "")), _e(c.get("from", "")), _e(c.get("to", "")), *cells]
        for c, cells in zip(channels, body, strict=True)
    ]
    classes = ["bed" if c.get("role") == "bed" else "" for c in channels]
    return (
        "<h2>Channels</h2>\n<p>Every channel of the network (a flow against the from &rarr; to "
        "direction is negative; tubing shows its inner diameter as width and depth).</p>\n"
        + _table(header, rows, text_columns=3, row_classes=classes)
    )


#: Columns of the chamber table (after chamber and pillars); floor shear over its floor.
_CHAMBER_COLUMNS = (
    ("width", "width", "length"),
    ("length", "length", "length"),
    ("depth", "depth", "width"),
    ("flow", "flow", "flow"),
    ("resistance", "resistance", "resistance"),
    ("residence time", "residence_time", "time"),
    ("floor shear p05", "p05", "shear"),
    ("p50", "p50", "shear"),
    ("p95", "p95", "shear"),
)


def _chambers(results: Mapping[str, Any]) -> str:
    """The chambers of an explicit network: shape, flow, resistance and the floor shear
    percentiles and share inside the window from each chamber's 2D solve."""
    chambers = list(results.get("chambers") or [])
    if not chambers:
        return ""
    from chipflow import display

    flat = [{**c, **(c.get("floor_shear") or {})} for c in chambers]
    headers, body = _columns(flat, _CHAMBER_COLUMNS)
    rows = []
    for c, cells in zip(chambers, body, strict=True):  # a handful of chambers
        p = c.get("pillars")
        pillars = "none"
        if p:
            d, pitch = p["diameter"] * 1e6, p["pitch"] * 1e6
            pillars = f"{p['count']} {p['pattern']}, {d:.4g} um on {pitch:.4g} um"
        inside = display.fraction(c.get("inside_window"))
        rows.append([_e(c.get("name", "")), _e(pillars), *cells, _e(inside)])
    return (
        "<h2>Chambers</h2>\n<p>Each chamber's floor shear from the 2D solve of its drawn shape "
        "at the operating point, area-weighted over its floor (pillars left out).</p>\n"
        + _table(["chamber", "pillars", *headers, "inside window"], rows, text_columns=2)
    )


def _extremes(results: Mapping[str, Any]) -> str:
    """Per level, the lowest and highest channel values: the spread the means hide."""
    generations = [g for g in results.get("generations", []) if g.get("flow_min") is not None]
    if not generations:
        return ""
    from chipflow.network.summary import generation_labels  # light startup: see console

    labels = generation_labels(generations)
    spans = []
    for key, kind in (("flow", "flow"), ("wall_shear_floor", "shear"), ("residence_time", "time")):
        low = [g.get(key + "_min") for g in generations]
        unit, texts = _column(low + [g.get(key + "_max") for g in generations], kind)
        spans.append((unit, texts[: len(low)], texts[len(low) :]))
    header = [
        "generation",
        "channels",
        f"flow per channel, lowest - highest [{spans[0][0]}]",
        f"floor shear, lowest - highest [{spans[1][0]}]",
        f"residence time, lowest - highest [{spans[2][0]}]",
    ]
    rows = [
        [_e(label), _num(g.get("count"), 6)]
        + [f"{low[i]} &ndash; {high[i]}" for _, low, high in spans]
        for i, (label, g) in enumerate(zip(labels, generations, strict=True))
    ]
    classes = ["bed" if g.get("role") == "bed" else "" for g in generations]
    return "<h3>Per-channel extremes of each generation</h3>\n" + _table(
        header, rows, text_columns=1, row_classes=classes
    )


def _window(results: Mapping[str, Any]) -> str:
    window = results.get("shear_window")
    if not window:
        return "<p>No cell type or shear window is given in the design: no shear check.</p>"
    return (
        f"<p>Cells: <strong>{_e(window.get('cell_type', ''))}</strong>; floor wall shear "
        f"window {_e(window.get('text', ''))}.<br>"
        f'<span class="source">Source: {_e(window.get("source", ""))}</span></p>'
    )


def _checks(results: Mapping[str, Any]) -> str:
    rows = []
    classes = []
    for check in results.get("checks", []):  # a few dozen at most
        status = str(check.get("status", ""))
        value, limit = _check_value(check.get("value"), check.get("limit"), check.get("unit", ""))
        if check.get("limit_low") is not None:  # a window: both bounds, the same on every row
            low, _ = _check_value(check["limit_low"], check.get("limit"), check.get("unit", ""))
            limit = (
                f"{low.split(' ')[0]} &ndash; {limit}"
                if check.get("limit") is not None
                else f"at least {low}"
            )
        rows.append(
            [
                f'<span class="status {_e(status)}">{_MARK.get(status, _e(status))}</span>',
                _e(check.get("name", "")),
                value,
                limit,
                f"{_e(check.get('message', ''))}<br>"
                f'<span class="source">Limit: {_e(check.get("source", ""))}</span>',
            ]
        )
        classes.append("")
    if not rows:
        return "<p>No checks were run.</p>"
    return _table(["status", "check", "value", "limit", "finding"], rows, text_columns=(0, 1, 4))


def _notes(results: Mapping[str, Any]) -> str:
    """Sizing and drawing notes: targets met only at a limit, lengths the drawing changed."""
    notes = results.get("warnings") or []
    if not notes:
        return ""
    items = "".join(f"<li>{_e(n)}</li>" for n in notes)
    return f'<h3>Notes from sizing and drawing</h3>\n<ul class="notes">{items}</ul>'


def _figures(figures: Mapping[str, str]) -> str:
    parts = []
    for name, svg in figures.items():  # a handful of figures, in the caller's order
        parts.append(f"<figure>{_inline_svg(svg)}<figcaption>{_e(name)}</figcaption></figure>")
    return "\n".join(parts) if parts else "<p>No figures.</p>"


def _fabrication(results: Mapping[str, Any]) -> str:
    fab = results.get("fabrication")
    if fab is None:
        return (
            "<p>This design is an explicit channel network without a drawing: no mask files "
            "were written. Its channels' cross-sections are checked against the fabrication "
            "rules that need no drawing (minimum feature, roof sag, tall walls).</p>"
        )
    mirror = fab.get("mirror")
    rows = [
        ["drawing units", _e(fab.get("units", ""))],
        ["polarity", _e(fab.get("polarity", ""))],
        ["mirrored", _e({True: "yes", False: "no"}.get(mirror, mirror if mirror else ""))],
        ["DXF version", _e(fab.get("dxf_version", ""))],
        ["mask grid", _quantity(fab.get("grid"), "width")],
    ]
    out = [_table(["setting", "value"], rows)]
    layers = fab.get("layers", [])
    if layers:
        unit, depths = _column([layer.get("depth") for layer in layers], "width", 4)
        rows = [[_e(layer.get("name", "")), d] for layer, d in zip(layers, depths, strict=True)]
        out.append(_table(["layer", f"depth [{unit}]"], rows))
    findings = fab.get("findings", [])
    out.append(
        f"<p>{len(findings)} fabrication rule finding{'s' if len(findings) != 1 else ''} "
        "(listed among the checks above).</p>"
    )
    return "\n".join(out)


def _junctions(results: Mapping[str, Any]) -> str:
    """The junction and bend section: the 2D field against the network."""
    field = results.get("field")
    if not field and results.get("fabrication") is None:
        return (
            "<p>This network is not drawn (its nodes have no positions), so it has no 2D "
            "field to solve.</p>"
        )
    composed = results.get("composed_field")
    if not field and composed:
        ratio = composed["resistance"] / composed["network_resistance"] - 1.0
        shear, split = composed["floor_shear"], composed["bed_split"]
        return (
            "<p>The whole chip's 2D field would not fit in this machine's memory, so it was "
            f"composed from the chip's pieces: {composed['pieces']} junctions, bends, bed ends "
            f"and ports, of which {composed['kinds']} distinct ones were solved "
            f"({composed['triangles']:,} triangles), joined by {composed['bodies']} straight "
            "channel bodies of developed flow. Chip resistance: "
            f"{_quantity(composed['resistance'], 'resistance')} against "
            f"{_quantity(composed['network_resistance'], 'resistance')} in the network "
            f"({display.fraction(ratio, 2, signed=True)}). Floor shear over the whole floor: "
            f"5 % of the area below {_num(shear['p05'])} Pa, median {_num(shear['p50'])} Pa, "
            f"5 % above {_num(shear['p95'])} Pa; "
            f"{display.fraction(composed['area_outside_window'])} of it outside the shear "
            "window (not graded: it is the whole floor, not the seeded one). Bed flow split: "
            f"coefficient of variation {display.fraction(split['field_cv'])} "
            f"({display.fraction(split['network_cv'])} in the network). The composition has no "
            "map; <code>--field --allow-large</code> solves the whole chip.</p>"
        )
    if not field:
        return (
            "<p>The 2D field was not solved for this build (large chips only with "
            "<code>--field</code>).</p>"
        )
    ratio = field["resistance"] / field["network_resistance"] - 1.0
    shear = field["floor_shear"]
    intro = (
        f"<p>A 2D depth-averaged solve of the drawn channels ({field['mesh_triangles']} "
        "triangles) at the supply's operating point: the pump's flow, or the supply pressure "
        "shared between the tubing and the field's own resistance. The field sees what "
        "the channel table cannot: the far wall of a junction, the inside of a bend, the ends "
        f"of the bed. Chip resistance: {_quantity(field['resistance'], 'resistance')} "
        f"against {_quantity(field['network_resistance'], 'resistance')} in the network "
        f"({display.fraction(ratio, 2, signed=True)}). Floor shear over the seeded floor: 5 % "
        f"of the area below {_num(shear['p05'])} Pa, median {_num(shear['p50'])} Pa, 5 % above "
        f"{_num(shear['p95'])} Pa; {display.fraction(field['area_outside_window'])} of it lies "
        "outside the shear window (graded among the checks). The floor shear falls to zero "
        "along every side wall, so a strip of each channel's floor lies below any window; the "
        "table says where the rest lies.</p>"
    )
    zones = {name: z for name, z in field["zones"].items() if z["area"] > 0}
    area_unit, areas = _column([z["area"] for z in zones.values()], "area")
    rows = [
        [
            _e(name),
            area,
            _num(z["p05"]),
            _num(z["p50"]),
            _num(z["p95"]),
            _e(display.fraction(z["outside"])),
            _e(display.fraction(field["outside_by_zone"].get(name, 0.0))),
        ]
        for (name, z), area in zip(zones.items(), areas, strict=True)
    ]
    zone_table = _table(
        [
            "where",
            f"floor [{area_unit}]",
            "p05 [Pa]",
            "median [Pa]",
            "p95 [Pa]",
            "outside window",
            "share of seeded floor outside",
        ],
        rows,
    )
    level_rows = [
        [
            _e(f"{lv['role']} {lv['generation']}"),
            _num(lv["network_shear"]),
            _num(lv["field_shear"]),
            _e(display.fraction(lv["field_shear"] / lv["network_shear"] - 1.0, 2, signed=True))
            if lv["network_shear"]
            else "",
        ]
        for lv in field["levels"]
    ]
    level_table = _table(
        ["level", "network floor shear [Pa]", "field floor shear [Pa]", "field vs network"],
        level_rows,
    )
    split = field["bed_split"]
    note = (
        "<p>Floor shear at the middle of each channel, averaged over its level. Bed flow split: "
        f"coefficient of variation {display.fraction(split['field_cv'])} in the field "
        f"({display.fraction(split['network_cv'])} in the network); the largest difference of "
        f"one bed channel's share is {display.fraction(split['max_deviation'])}. The field model "
        "(depth-averaged Stokes flow with a friction term calibrated to the exact duct series) "
        "is exact in straight channels to about 0.5 % at its default mesh; it neglects inertia "
        "and the 3D flow at depth steps.</p>"
    )
    return intro + zone_table + level_table + note


def _cautions() -> str:
    parts = ['<div class="cautions">']
    for title, text in CAUTIONS:
        parts.append(f"<h3>{_e(title)}</h3><p>{_e(text)}</p>")
    parts.append("</div>")
    return "\n".join(parts)


def report_html(results: Mapping[str, Any], figures: Mapping[str, str] | None = None) -> str:
    """The report as HTML text (see :func:`write_report`)."""
    from chipflow import __version__ as version

    design = results.get("design", {})
    name = design.get("name", "design")
    description = str(design.get("description", "")).strip()
    paragraphs = [p.strip() for p in re.split(r"\n\s*\n", description) if p.strip()]
    body = [
        f"<h1>{_e(name)}</h1>",
        "".join(f"<p>{_e(p)}</p>" for p in paragraphs),
        f'<p class="meta">Design file: {_e(design.get("file", ""))}'
        f"<br>SHA-256: {_e(design.get('sha256', ''))}</p>",
        _summary(results),
        "<h2>Operating point</h2>",
        _operating_point(results),
        "<h2>Generations, inlet to outlet</h2>",
        _generations(results),
        _regions(results),
        _mesh(results),
        _extremes(results),
        _channels(results),
        _chambers(results),
        _notes(results),
        operation_html(results),
        transport_html(results),
        "<h2>Checks</h2>",
        _window(results),
        _checks(results),
        "<h2>Junctions and bends</h2>",
        _junctions(results),
        "<h2>Figures</h2>",
        _figures(figures or {}),
        "<h2>Fabrication settings</h2>",
        _fabrication(results),
        "<h2>Cautions</h2>",
        _cautions(),
        f"<footer>Report of chipflow {_e(version)}. Values in lab units; results.json holds "
        "them in SI units.</footer>",
    ]
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>{_e(name)} - chipflow report</title>\n<style>{_CSS}</style>\n</head>\n<body>\n"
        + "\n".join(body)
        + "\n</body>\n</html>\n"
    )


def write_report(
    results: Mapping[str, Any], path: str | os.PathLike, figures: Mapping[str, str] | None = None
) -> None:
    """Write the build report as one self-contained HTML file.

    Parameters
    ----------
    results : mapping
        The results dict (the content of results.json, SI floats).
    path : path-like
        The HTML file to write (replaced atomically).
    figures : mapping of str to str, optional
        Figure caption -> SVG text, embedded inline in the given order.

    Raises
    ------
    ExportError
        When the file cannot be written or a figure is not SVG.
    """
    text = report_html(results, figures)
    atomic_write(path, lambda tmp: tmp.write_bytes(text.encode("utf-8")), "report")


def write_markdown_summary(results: Mapping[str, Any], path: str | os.PathLike) -> None:
    """Write a short Markdown summary: the generations and the checks, in lab units."""
    design = results.get("design", {})
    lines = [f"# {design.get('name', 'design')}", ""]
    if design.get("description"):
        lines += [str(design["description"]).strip(), ""]
    generations = list(results.get("generations", []))
    columns = (
        ("width", "width", "width"),
        ("depth", "depth", "width"),
        ("floor shear", "wall_shear_floor", "shear"),
        ("mean velocity", "mean_velocity", "velocity"),
        ("residence time", "residence_time", "time"),
    )
    header, cells = ["generation", "channels"], []
    for name, key, kind in columns:  # five columns, each in one unit
        unit, texts = display.column([g.get(key) for g in generations], kind)
        header.append(f"{name} [{unit}]")
        cells.append(texts)
    lines += ["| " + " | ".join(header) + " |", "|---|" + "---:|" * (len(header) - 1)]
    from chipflow.network.summary import generation_labels

    for i, (label, g) in enumerate(zip(generation_labels(generations), generations, strict=True)):
        row = [label, str(g.get("count")), *(column[i] for column in cells)]
        lines.append("| " + " | ".join(row) + " |")
    lines += ["", "| status | check | finding |", "|---|---|---|"]
    for check in results.get("checks", []):
        message = str(check.get("message", "")).replace("|", "/")
        lines.append(f"| {check.get('status')} | {check.get('name')} | {message} |")
    lines += ["", "## Cautions", ""]
    lines += [f"- **{title}.** {text}" for title, text in CAUTIONS]
    summary = "\n".join(lines) + "\n"
    atomic_write(path, lambda tmp: tmp.write_bytes(summary.encode("utf-8")), "summary")
