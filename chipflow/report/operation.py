"""The report's section on time-varying operation, from ``results["operation"]``.

Nothing is recomputed: the section shows what :func:`chipflow.operation.operate` put in the
results, in lab units (%, Pa, s, Hz, uL).
"""

from __future__ import annotations

import html
from collections.abc import Mapping
from typing import Any

from chipflow import display

__all__ = ["operation_html"]

_COLUMNS = (
    # key, header, scale, digits
    ("pulsation", "floor-shear pulsation [%]", 100.0, 3),
    ("damping", "relative to the pump [%]", 100.0, 3),
    ("min", "floor shear min [Pa]", 1.0, 3),
    ("max", "floor shear max [Pa]", 1.0, 3),
    ("time_averaged_shear", "time-averaged |floor shear| [Pa]", 1.0, 3),
    ("time_in_window", "time in window [%]", 100.0, 3),
    ("womersley", "Womersley [-]", 1.0, 2),
    ("resistance_change", "resistance change from the roof's bulge [%]", 100.0, 2),
)


def _n(value: Any, scale: float = 1.0, digits: int = 3) -> str:
    if value is None:
        return "&ndash;"
    return html.escape(display.number(float(value) * scale, digits))


def _facts(op: Mapping[str, Any]) -> list[str]:
    mode = op.get("mode")
    facts = []
    if mode == "pulsatile":
        for node, s in (op.get("supplies") or {}).items():
            facts.append(
                f"{html.escape(str(s.get('mode', '')))} at {html.escape(node)}: "
                f"pulsation {_n(s.get('pulsation'), 100)} % of the mean"
            )
        facts.append(
            f"fundamental {_n(op.get('frequency'))} Hz, {op.get('harmonics')} harmonic(s); peak "
            f"on-chip pressure during a pulse {_n(op.get('peak_chip_pressure'), 1e-3)} kPa; flow "
            f"reversal: {'yes' if op.get('reversal') else 'no'}"
        )
    elif mode == "rocker":
        facts.append(
            f"rocking platform: {_n(op.get('tilt_angle'), 57.29577951308232)} deg every "
            f"{_n(op.get('period'))} s, reservoirs {_n(op.get('reservoir_spacing'), 1e3)} mm "
            f"apart; peak head difference {_n(op.get('peak_head_difference'), 1e3)} mm; levels "
            f"relax with a time constant of {_n(op.get('time_constant'))} s; lowest liquid level "
            f"{_n(op.get('lowest_level'), 1e3)} mm; the flow reverses every half cycle"
        )
    elif mode == "draining":
        facts.append(
            f"draining reservoirs: time constant {_n(op.get('time_constant'))} s; heads within "
            f"10 % of level after {_n(op.get('time_to_level'))} s; refill every "
            f"{_n(op.get('refill_interval'), 1 / 3600)} h"
        )
    c = op.get("compliance") or {}
    if any(c.values()):
        parts = [f"{k} {_n(v)} m&sup3;/Pa" for k, v in c.items() if v]
        facts.append("compliance: " + ", ".join(parts))
    walls = op.get("walls")
    if walls:
        facts.append(
            f"soft roof: {html.escape(str(walls.get('material')))}, modulus "
            f"{_n(walls.get('modulus'), 1e-6)} MPa, {_n(walls.get('roof_thickness'), 1e3)} mm "
            f"thick (source: {html.escape(str(walls.get('source')))})"
        )
    return facts


def operation_html(results: Mapping[str, Any]) -> str:
    """The section as HTML text; empty for steady operation on rigid walls."""
    op = results.get("operation") or {}
    if op.get("mode", "steady") == "steady" and not op.get("walls"):
        return ""
    levels = op.get("levels") or []
    out = ["<h2>Time-varying operation</h2>"]
    out.append("<ul>" + "".join(f"<li>{f}</li>" for f in _facts(op)) + "</ul>")
    keys = [c for c in _COLUMNS if any(level.get(c[0]) is not None for level in levels)]
    if levels and keys:
        head = "".join(f"<th>{h}</th>" for _, h, _, _ in keys)
        rows = [f'<tr><th class="text">generation</th>{head}</tr>']
        for level in levels:  # a handful of generations
            cells = "".join(f"<td>{_n(level.get(k), s, d)}</td>" for k, _, s, d in keys)
            rows.append(f'<tr><td class="text">{html.escape(str(level["label"]))}</td>{cells}</tr>')
        out.append('<div class="wide"><table>' + "".join(rows) + "</table></div>")
    return "\n".join(out)
