"""The report's section on oxygen, solutes and the dosing delay, from ``results["transport"]``.

Nothing is recomputed: the section shows what :func:`chipflow.transport.run_transport` put in
the results, in lab units (mol/m^3 as uM where it reads better, %, s, min).
"""

from __future__ import annotations

import html
from collections.abc import Mapping
from typing import Any

from chipflow import display

__all__ = ["transport_html", "transport_lines"]


def _n(value: Any, scale: float = 1.0, digits: int = 3) -> str:
    if value is None:
        return "&ndash;"
    return display.number(float(value) * scale, digits)


def _pct(value: Any) -> str:
    return "&ndash;" if value is None else display.fraction(value)


def _time(seconds: float) -> str:
    """Seconds, or minutes from two minutes on."""
    return (
        f"{display.lab_number(seconds / 60, 3)} min"
        if seconds >= 120
        else f"{display.lab_number(seconds, 3)} s"
    )


def _where(entry: Mapping[str, Any] | None) -> str:
    if not entry:
        return ""
    return f"channel {entry['channel']} ({entry['role']})"


def _dosing_words(dosing: Mapping[str, Any]) -> str:
    slow = dosing.get("slowest")
    if not slow:
        return ""
    return (
        f"A step change of {dosing['solute']} (diffusivity {_n(dosing['diffusivity'])} m^2/s) at "
        f"the pump brings the slowest bed outlet ({_where(slow)}) to 50 % after "
        f"{_time(slow['t50'])} and to 90 % after {_time(slow['t90'])}; of the 50 % time "
        f"{_time(slow['tubing_t50'])} ({display.fraction(slow['tubing_share'], 2)}) is the supply "
        "tubing."
    )


def transport_lines(results: Mapping[str, Any]) -> list[str]:
    """Console lines: the floor oxygen, the hypoxic share and the dosing delay."""
    t = results.get("transport")
    if not t:
        return []
    lines = []
    if t.get("o2_floor_min") is not None:
        line = (
            f"oxygen: {display.number(t['o2_chip_inlet'])} mol/m^3 at the chip inlet, lowest floor "
            f"{display.number(t['o2_floor_min'])} mol/m^3 ({_where(t.get('lowest'))})"
        )
        if t.get("hypoxic_fraction") is not None:
            line += (
                f", {display.fraction(t['hypoxic_fraction'])} of the seeded floor below "
                f"{display.number(t['o2_critical'], 3)} mol/m^3"
            )
        lines.append(line)
    field = t.get("field")
    if field:
        share = field.get("hypoxic_fraction")
        lines.append(
            f"oxygen field: lowest floor {display.number(field['o2_floor_min'], 3)} mol/m^3"
            + (
                f", {display.fraction(share)} of the seeded floor hypoxic"
                if share is not None
                else ""
            )
        )
    slow = (t.get("dosing") or {}).get("slowest")
    if slow:
        lines.append(
            f"dosing: 50 % at the slowest bed outlet after {_time(slow['t50'])}, 90 % after "
            f"{_time(slow['t90'])} ({display.fraction(slow['tubing_share'], 2)} of the 50 % "
            "time in the tubing)"
        )
    return lines


def _levels_table(t: Mapping[str, Any]) -> str:
    levels = t.get("levels") or []
    if not levels:
        return ""
    from chipflow.network.summary import generation_labels  # light startup: see console

    labels = generation_labels(levels)
    dosing = {(d["role"], d["generation"]): d for d in (t.get("dosing") or {}).get("levels", [])}
    head = (
        '<tr><th class="text">level</th><th>oxygen in [mol/m&sup3;]</th>'
        "<th>oxygen out [mol/m&sup3;]</th><th>lowest floor oxygen [mol/m&sup3;]</th>"
        "<th>Peclet [-]</th><th>Damkohler [-]</th><th>hypoxic share of seeded floor</th>"
        "<th>dosing 50 % [s]</th><th>dosing 90 % [s]</th></tr>"
    )
    rows = []
    for label, lv in zip(labels, levels, strict=True):  # loop over levels
        d = dosing.get((lv["role"], lv["generation"]), {})
        cls = ' class="bed"' if lv["role"] == "bed" else ""
        rows.append(
            f'<tr{cls}><td class="text">{html.escape(label)}</td><td>{_n(lv["o2_in"], 1, 4)}'
            f"</td><td>{_n(lv['o2_out'], 1, 4)}</td><td>{_n(lv['o2_floor_min'], 1, 4)}</td>"
            f"<td>{_n(lv['peclet'])}</td><td>{_n(lv['damkohler'])}</td>"
            f"<td>{_pct(lv['hypoxic_fraction'])}</td><td>{_n(d.get('t50'))}</td>"
            f"<td>{_n(d.get('t90'))}</td></tr>"
        )
    return '<div class="wide"><table>' + head + "".join(rows) + "</table></div>"


def _solutes(t: Mapping[str, Any]) -> str:
    out = []
    for s in t.get("solutes") or []:  # a handful of solutes
        levels = s["levels"]
        low = min(lv["c_floor_min"] for lv in levels) if levels else None
        out.append(
            f"<li><strong>{html.escape(s['name'])}</strong>: {_n(s['inlet_concentration'])} "
            f"mol/m&sup3; at the supply, uptake {_n(s['uptake_per_cell'])} mol/s per cell"
            + (f", lowest floor {_n(low, 1, 4)} mol/m&sup3;" if low is not None else "")
            + ".</li>"
        )
    return f"<ul>{''.join(out)}</ul>" if out else ""


def transport_html(results: Mapping[str, Any]) -> str:
    """The "Oxygen and dosing" section (empty when the results hold no transport)."""
    t = results.get("transport")
    if not t:
        return ""
    parts = ["<h2>Oxygen and dosing</h2>"]
    facts = [
        f"Oxygen at the supply {_n(t['o2_supply'], 1, 4)} mol/m&sup3;, at the chip inlet "
        f"{_n(t['o2_chip_inlet'], 1, 4)} mol/m&sup3; (air in the incubator: "
        f"{_n(t['o2_ambient'], 1e-3)} kPa of oxygen, {_n(t['o2_equilibrium'], 1, 4)} "
        "mol/m&sup3; in equilibrium)."
    ]
    if t.get("o2_uptake"):
        facts.append(
            f"The cells take up to {_n(t['o2_uptake'])} mol/(m&sup2; s) of floor (Michaelis "
            f"constant {_n(t['o2_km'])} mol/m&sup3;); they use {_pct(t.get('o2_used_fraction'))} "
            "of the oxygen the flow brings."
        )
    if t.get("hypoxic_fraction") is not None:
        facts.append(
            f"Lowest floor oxygen {_n(t['o2_floor_min'], 1, 4)} mol/m&sup3; "
            f"({html.escape(_where(t.get('lowest')))}); {_pct(t['hypoxic_fraction'])} of the "
            f"seeded floor lies below the critical {_n(t['o2_critical'])} mol/m&sup3; "
            f'<span class="source">({html.escape(str(t.get("o2_critical_source") or ""))})'
            "</span>."
        )
    roof = t.get("roof_conductance") or 0.0
    facts.append(
        f"Roof: {'lets oxygen in' if roof > 0 else 'impermeable'} "
        f'<span class="source">({html.escape(str(t.get("roof_source") or ""))})</span>'
        + (f"; {_n(t['roof_influx'] * 1e12)} pmol/s enter through it." if roof > 0 else ".")
    )
    parts.append("<p>" + " ".join(facts) + "</p>")
    parts.append(_levels_table(t))
    context = t.get("context")
    if context:
        parts.append(
            "<p>Lumped estimates, for context (not graded): oxygen crosses the bed's depth in "
            f"about {_n(context['diffusion_time'])} s against a residence time of "
            f"{_n(context['residence_time'])} s; at the inlet concentration the bed's cells "
            f"would use {_pct(context['oxygen_use_fraction'])} of the oxygen the flow brings.</p>"
        )
    field = t.get("field")
    if field:
        parts.append(
            "<p>On the 2D field (depth-averaged advection, diffusion and uptake on the flow "
            f"field's {field['mesh_triangles']} triangles): lowest floor oxygen "
            f"{_n(field['o2_floor_min'], 1, 4)} mol/m&sup3;, "
            f"{_pct(field['hypoxic_fraction'])} of the seeded floor below the critical value, "
            f"{_n(field['o2_out'], 1, 4)} mol/m&sup3; at the outlet. The field sees the slow "
            "liquid along the side walls and around the junctions that the channel model "
            "averages away.</p>"
        )
    solutes = _solutes(t)
    if solutes:
        parts.append("<h3>Solutes</h3>" + solutes)
    words = _dosing_words(t.get("dosing") or {})
    if words:
        parts.append(
            f"<h3>Dosing delay</h3><p>{words} The spread of the front comes from Taylor-Aris "
            "dispersion (Taylor 1953; Aris 1956) in every channel and tube on the way; in "
            "tubing crossed faster than diffusion crosses its bore it is an estimate.</p>"
        )
    parts.append(
        '<p class="source">Model: the bulk oxygen marched along each channel with the '
        "uptake of the floor and the permeation of the roof; the floor concentration from the "
        "developing concentration layer (Leveque 1928) and its developed limit (Shah &amp; "
        "London 1978); flow-weighted mixing at junctions. Peclet number U h / D, Damkohler "
        "number V h / (D c0) (Roy et al., Ann Biomed Eng 2001).</p>"
    )
    return "\n".join(parts)
