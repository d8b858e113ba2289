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
    ("pulsation_relative_to_source", "over the source's pulsation [%]", 100.0, 3),
    ("floor_shear_signed_mean", "signed mean floor shear [Pa]", 1.0, 3),
    ("min", "floor shear min [Pa]", 1.0, 3),
    ("max", "floor shear max [Pa]", 1.0, 3),
    ("floor_shear_peak", "peak |floor shear| [Pa]", 1.0, 3),
    ("time_averaged_shear", "time-averaged |floor shear| [Pa]", 1.0, 3),
    ("osi", "oscillatory shear index [-]", 1.0, 3),
    ("time_in_window", "time in window [%]", 100.0, 3),
    ("womersley", "Womersley [-]", 1.0, 2),
    ("wall_shear_floor_rigid", "floor shear, rigid roof [Pa]", 1.0, 3),
    ("resistance_change", "resistance change, roof bulge [%]", 100.0, 3),
    ("resistance_change_one_pass", "one pass at rigid pressures [%]", 100.0, 3),
    ("roof_to_width", "roof / width [-]", 1.0, 3),
)
_TEXT_COLUMNS = (("wall_model", "roof model"), ("wall_model_range", "outside its range"))


def _n(value: Any, scale: float = 1.0, digits: int = 3) -> str:
    if value is None:
        return "&ndash;"
    return html.escape(display.number(float(value) * scale, digits))


def _source_fact(node: str, s: Mapping[str, Any]) -> str:
    kind = s.get("kind", "flow")
    return (
        f"{html.escape(str(s.get('mode', '')))} at {html.escape(node)}: its {kind} pulsates by "
        f"{_n(s.get('pulsation'), 100)} % of its mean {kind} (amplitude at the fundamental "
        "over the mean; the pulsation in the table below is the floor shear's, and its ratio "
        f"to the source's is taken against this {kind} pulsation)"
    )


def _walls_facts(op: Mapping[str, Any]) -> list[str]:
    walls = op.get("walls")
    if not walls:
        return []
    facts = [
        f"soft roof: {html.escape(str(walls.get('material')))}, modulus "
        f"{_n(walls.get('modulus'), 1e-6)} MPa, {_n(walls.get('roof_thickness'), 1e3)} mm "
        f"thick (source: {html.escape(str(walls.get('source')))}); roof model"
        f"{'s' if len(walls.get('models') or []) > 1 else ''}: "
        + html.escape("; ".join(walls.get("models") or ["none"]))
    ]
    solve = walls.get("solve") or {}
    facts.append(
        "the chip is solved with its roofs bulged, self-consistently "
        f"({html.escape(str(solve.get('method', '')))}: {solve.get('iterations')} step(s) to a "
        f"relative node imbalance of {_n(solve.get('residual'), 1, 2)}, tolerance "
        f"{_n(solve.get('tolerance'), 1, 2)}; self-check: node imbalance "
        f"{_n(solve.get('mass_residual'), 1, 2)} of the largest flow); every shear, pressure "
        "and check of this report is the deformed chip's. Largest resistance change "
        f"{_n(op.get('resistance_change_max'), 100)} %; a single pass at the rigid chip's "
        f"pressures would say {_n(op.get('resistance_change_one_pass_max'), 100)} % "
        "(diagnostic only)"
    )
    return facts


def _damper_fact(op: Mapping[str, Any]) -> list[str]:
    d = op.get("damper")
    if not d:
        return []
    what = (
        f"{_n(d.get('air_volume'), 1e9)} uL of trapped air"
        if d.get("air_volume") is not None
        else f"a compliance of {_n(d.get('compliance'))} m&sup3;/Pa"
    )
    sized = ""
    if d.get("target_pulsation") is not None:
        sized = (
            f", the smallest that brings the seeded levels' floor-shear pulsation to "
            f"{_n(d['target_pulsation'], 100)} % (re-solved: "
            f"{_n(d.get('pulsation_at_target'), 100, 4)} %)"
        )
    tubing = (
        f"; it stores as much as {_n(d['equivalent_tubing'], 100)} cm more of the supply tubing"
        if d.get("equivalent_tubing") is not None
        else ""
    )
    return [
        f"damper at {html.escape(str(d.get('node')))}: {what}{sized}{tubing}; start-up time "
        f"constant {_n(d.get('start_up_time_constant'))} s with it, "
        f"{_n(d.get('start_up_time_constant_without'))} s without (the damper's own "
        f"C R = {_n(d.get('damper_time_constant'))} s)"
    ]


def _facts(op: Mapping[str, Any]) -> list[str]:
    mode = op.get("mode")
    facts = []
    if mode == "pulsatile":
        for node, s in (op.get("supplies") or {}).items():
            facts.append(_source_fact(node, s))
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
    if mode in ("pulsatile", "rocker", "draining"):
        facts.append(
            "extremes, time-averaged magnitudes, oscillatory shear index (OSI, Ku et al. 1985) "
            "and time in window come from the exact crossing times of the solution, not from "
            f"samples; a level whose OSI exceeds {_n(op.get('osi_threshold'))} is not graded "
            "against a window measured in steady one-way flow"
        )
    c = op.get("compliance") or {}
    if any(c.values()):
        parts = [f"{k} {_n(v)} m&sup3;/Pa" for k, v in c.items() if v]
        facts.append("compliance: " + ", ".join(parts))
    return facts + _damper_fact(op) + _walls_facts(op)


def operation_html(results: Mapping[str, Any]) -> str:
    """The section as HTML text; empty for steady operation on rigid walls without a
    damper."""
    op = results.get("operation") or {}
    if op.get("mode", "steady") == "steady" and not op.get("walls") and not op.get("damper"):
        return ""
    levels = op.get("levels") or []
    out = ["<h2>Time-varying operation</h2>"]
    out.append("<ul>" + "".join(f"<li>{f}</li>" for f in _facts(op)) + "</ul>")
    keys = [c for c in _COLUMNS if any(level.get(c[0]) is not None for level in levels)]
    texts = [c for c in _TEXT_COLUMNS if any(level.get(c[0]) for level in levels)]
    if levels and (keys or texts):
        head = "".join(f"<th>{h}</th>" for _, h, _, _ in keys)
        head += "".join(f'<th class="text">{h}</th>' for _, h in texts)
        rows = [f'<tr><th class="text">generation</th>{head}</tr>']
        for level in levels:  # a handful of generations
            cells = "".join(f"<td>{_n(level.get(k), s, d)}</td>" for k, _, s, d in keys)
            cells += "".join(
                f'<td class="text">{html.escape(str(level.get(k) or ""))}</td>' for k, _ in texts
            )
            rows.append(f'<tr><td class="text">{html.escape(str(level["label"]))}</td>{cells}</tr>')
        out.append('<div class="wide"><table>' + "".join(rows) + "</table></div>")
    return "\n".join(out)
