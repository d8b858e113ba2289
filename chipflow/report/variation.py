"""Reports of a tolerance run (``chipflow vary``): level figures, the HTML page, console text.

Everything is read from the variation results dict (SI floats, see
:func:`chipflow.variation.vary.vary_build`) and, for the figures, from the per-sample floor
shear the run produced; nothing is recomputed.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from chipflow import display
from chipflow.report.console import format_table
from chipflow.report.figures import _INK, _TEAL, _WINDOW, svg_text
from chipflow.report.html import _CSS, CAUTIONS, _e, _inline_svg, _num, _table

__all__ = ["level_figure", "level_figures", "variation_html", "variation_summary", "factor_text"]

_BINS = 40


def factor_text(name: str, value: float) -> str:
    """A factor's value in lab units: the width bias in um, the others in percent.

    >>> factor_text("width bias", -2e-6), factor_text("supply", 0.02)
    ('-2 um', '+2 %')
    """
    if name == "width bias":
        text = display.quantity(value, "width", unit="um")
        return text if text.startswith(("-", "0 ")) else "+" + text
    return display.fraction(value, signed=True)


def level_figure(
    shear: np.ndarray, level: Mapping[str, Any], window: Mapping[str, Any] | None, name: str = ""
):
    """Histogram of one level's floor shear over the samples, against the window band.

    Parameters
    ----------
    shear : numpy.ndarray
        The level's mean floor shear in every sample [Pa].
    level : mapping
        The level's entry of the results (``label``, ``floor_shear`` percentiles, ...).
    window : mapping or None
        ``shear_window`` of the results.
    name : str
        Design name for the title.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure

    fig = Figure(figsize=(5.2, 2.6))
    ax = fig.subplots()
    values = np.asarray(shear, dtype=float)
    low, high = float(values.min()), float(values.max())
    if window and window.get("min") is not None and window.get("max") is not None:
        ax.axvspan(
            float(window["min"]),
            float(window["max"]),
            color=_WINDOW,
            zorder=0,
            lw=0,
            label=f"window ({window.get('cell_type', 'cells')})",
        )
        low, high = min(low, float(window["min"])), max(high, float(window["max"]))
    pad = 0.05 * (high - low) if high > low else 0.05 * max(abs(high), 1e-12)
    bins = np.linspace(low - pad, high + pad, _BINS + 1)
    counts, _ = np.histogram(values, bins=bins)
    ax.stairs(counts, bins, fill=True, color=_TEAL, alpha=0.85, zorder=2)
    p = level["floor_shear"]
    ax.axvline(p["p50"], color=_INK, ls="-", lw=1.1, zorder=3, label="median (p50)")
    ax.axvline(p["p05"], color=_INK, ls=":", lw=1.1, zorder=3, label="p05 and p95")
    ax.axvline(p["p95"], color=_INK, ls=":", lw=1.1, zorder=3)
    ax.axvline(p["nominal"], color=_INK, ls="--", lw=0.8, zorder=3, label="nominal design")
    label = level.get("label", "")
    seeded = " (seeded)" if level.get("seeded") else ""
    ax.set_title(
        f"{name + ': ' if name else ''}floor shear of {label}{seeded} over the samples",
        loc="left",
        fontsize=8.5,
        color=_INK,
    )
    ax.set_xlabel("floor wall shear [Pa]", fontsize=8)
    ax.set_ylabel("samples", fontsize=8)
    ax.tick_params(labelsize=7)
    ax.legend(loc="upper right", fontsize=7, frameon=False)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    fig.subplots_adjust(left=0.12, right=0.97, bottom=0.17, top=0.88)
    return fig


_QUARTET = ("p05", "p50", "p95", "nominal")


def _spread(p: Mapping[str, Any] | None, kind: str) -> tuple[str, list[str]]:
    """The unit and the four values (p05, p50, p95, nominal) of one spread, in one unit."""
    if not p:
        return "", ["&ndash;"] * 4
    if kind == "fraction":
        return "%", [_e(display.fraction(p.get(k)).removesuffix(" %")) for k in _QUARTET]
    unit, texts = display.column([p.get(k) for k in _QUARTET], kind, 3)
    return unit, [("&ndash;" if x == "-" else _e(x)) for x in texts]


def _yield_bound(results: Mapping[str, Any]) -> str:
    """The yield's one-sided 95 % lower bound in words (with how it was found)."""
    bound = results.get("yield_lower_95")
    if bound is None:
        return "&ndash;"
    how = (
        "rule of three: no failing sample in n bounds the failure rate below 3/n, Hanley &amp; "
        "Lippman-Hand 1983"
        if results.get("yield_bound") == "rule of three"
        else "Clopper-Pearson, with a Monte Carlo standard error of "
        f"{display.fraction(results['yield_standard_error'], 2)}"
    )
    return f"{display.fraction(bound, 4)} ({how})"


def variation_html(results: Mapping[str, Any], figures: Mapping[str, str]) -> str:
    """The tolerance report as one self-contained HTML page (no scripts, no timestamps)."""
    from chipflow import __version__ as version

    design = results["design"]
    tol = results["tolerances"]
    depth = "&plusmn;" + (
        display.fraction(tol["depth"])
        if tol["depth_kind"] == "fraction"
        else display.quantity(tol["depth"], "width", unit="um")
    )
    spread = "uniform within" if results["distribution"] == "uniform" else "normal, 1 sd ="
    tol_rows = [
        ["depth of each mould level", depth],
        [
            "width bias of the mask (total change of each channel width; each side wall "
            "moves by half)",
            f"&plusmn;{display.quantity(tol['width'], 'width', unit='um')}",
        ],
        ["inlet supply", f"&plusmn;{display.fraction(tol['flow'])}"],
        ["viscosity", f"&plusmn;{display.fraction(tol['viscosity'])}"],
    ]
    y = results["yield"]
    verdict = "pass" if y >= 0.95 else "warn" if y >= 0.5 else "fail"
    levels = results["levels"]
    quartet = list(_QUARTET)
    # one unit per column: the residence times and pressure drops of every level together
    columns = {}
    for key, kind in (("residence_time", "time"), ("pressure_drop", "pressure")):
        values = [lv[key].get(k) for lv in levels for k in quartet if lv.get(key)]
        columns[key] = display.unit_for(kind, values)
    level_rows = [
        [
            _e(lv["label"]) + (" (seeded)" if lv["seeded"] else ""),
            *_spread(lv["floor_shear"], "shear")[1],
            *(_num(lv["residence_time"].get(k) / columns["residence_time"][1]) for k in quartet),
            *(_num(lv["pressure_drop"].get(k) / columns["pressure_drop"][1]) for k in quartet),
            "&ndash;"
            if lv.get("inside_window") is None
            else _e(display.fraction(lv["inside_window"]).removesuffix(" %")),
        ]
        for lv in levels
    ]
    level_header = (
        ["level"]
        + [f"floor shear {k} [Pa]" for k in quartet]
        + [f"residence {k} [{columns['residence_time'][0]}]" for k in quartet]
        + [f"pressure drop {k} [{columns['pressure_drop'][0]}]" for k in quartet]
        + ["inside window [%]"]
    )
    overall = []
    for name, key, kind in (
        ("supply pressure", "supply_pressure", "pressure"),
        ("highest chip pressure", "chip_pressure", "pressure"),
        ("flow per bed channel", "bed_flow", "flow"),
        ("bed flow spread (CV)", "bed_flow_spread", "fraction"),
        ("window margin", "shear_margin", "fraction"),
    ):
        if key == "shear_margin" and not results.get(key):
            continue
        unit, texts = _spread(results[key], kind)
        overall.append([f"{name} [{unit}]", *texts])
    corner = results["worst_corner"]
    corner_rows = [[_e(k), factor_text(k, v)] for k, v in corner["factors"].items()]
    corner_rows += [
        ["passes", "yes" if corner["passes"] else "no"],
        [
            "window margin",
            "&ndash;"
            if corner["shear_margin"] is None
            else display.fraction(corner["shear_margin"]),
        ],
        ["supply pressure", display.quantity(corner["supply_pressure"], "pressure", 4)],
        ["highest chip pressure", display.quantity(corner["chip_pressure"], "pressure", 4)],
    ]
    rank_rows = [
        [
            str(i + 1),
            _e(s["factor"]),
            factor_text(s["factor"], s["tolerance"]).lstrip("+"),
            _num(s["elasticity"]),
            _e(s["elasticity_level"]),
            _e(display.fraction(s["shear_change"]).removesuffix(" %")),
        ]
        for i, s in enumerate(results["sensitivity"])
    ]
    figure_html = "".join(
        f"<figure>{_inline_svg(svg)}<figcaption>{_e(caption)}</figcaption></figure>"
        for caption, svg in figures.items()
    )
    body = [
        f"<h1>{_e(design['name'])}: tolerances</h1>",
        f'<p class="meta">Design file: {_e(design["file"])}<br>SHA-256: {_e(design["sha256"])}'
        f"<br>{results['samples']} samples, seed {results['seed']}, {spread} the tolerance</p>",
        f'<p class="verdict {verdict}">Yield {display.fraction(y, 4)} of {results["samples"]} '
        f"samples; one-sided 95 % lower bound {_yield_bound(results)}</p>",
        "<p>A sample passes when every seeded level's floor shear lies inside the window in "
        "every channel and the pressure checks pass (bond with its safety factor, pump).</p>",
        "<h2>Tolerances</h2>",
        _table(["tolerance", "value"], tol_rows, text_columns=1),
        f"<p>{_e(results['model'])}</p>",
        "<h2>Levels, inlet to outlet</h2>",
        _table(level_header, level_rows, text_columns=1),
        "<h2>Pressures and bed flow</h2>",
        _table(["quantity", *quartet], overall, text_columns=1),
        "<h2>Worst corner</h2>",
        f"<p>Of the {corner['corners']} corners (every tolerance at one of its ends), the one "
        "with the smallest window margin (without a window: the highest chip pressure).</p>",
        _table(["factor", "value"], corner_rows, text_columns=1),
        "<h2>Which tolerance matters most</h2>",
        "<p>Shear change: the largest relative change of a seeded level's floor shear with "
        "that tolerance alone at either end. Elasticity: d ln(shear) / d ln(factor) at the "
        "nominal design, for the level where it is largest (for the width bias, relative to "
        "that level's width).</p>",
        _table(
            ["rank", "factor", "tolerance", "elasticity", "at level", "shear change [%]"],
            rank_rows,
            text_columns=(1, 2, 4),
        ),
        "<h2>Figures</h2>",
        figure_html,
        "<h2>Cautions</h2>",
        '<div class="cautions">'
        + "".join(f"<h3>{_e(t)}</h3><p>{_e(x)}</p>" for t, x in CAUTIONS)
        + "</div>",
        f"<footer>Tolerance report of chipflow {_e(version)}. results.json holds every value "
        "in SI units.</footer>",
    ]
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>{_e(design['name'])} - chipflow tolerances</title>\n<style>{_CSS}</style>\n"
        "</head>\n<body>\n" + "\n".join(body) + "\n</body>\n</html>\n"
    )


def level_figures(results: Mapping[str, Any], shear: np.ndarray) -> dict[str, str]:
    """SVG text of the seeded levels' figures, keyed by file name ``shear-<label>.svg``.

    Only the levels that carry cells get a figure (the tables list every level); a design
    without a seeded level gets one for every level.
    """
    name = results["design"]["name"]
    window = results.get("shear_window")
    levels = list(enumerate(results["levels"]))
    shown = [(g, lv) for g, lv in levels if lv.get("seeded")] or levels
    return {
        f"shear-{lv['label']}.svg": svg_text(level_figure(shear[:, g], lv, window, name))
        for g, lv in shown  # loop over levels
    }


def variation_summary(results: Mapping[str, Any]) -> str:
    """Plain-text summary in lab units: yield, floor shear per level, worst corner, ranking."""
    y = results["yield"]
    lines = [
        f"{results['samples']} samples (seed {results['seed']}, {results['distribution']}): "
        f"yield {display.fraction(y, 4)}, one-sided 95 % lower bound "
        f"{display.fraction(results.get('yield_lower_95', 0.0), 4)} "
        f"({results.get('yield_bound', 'Clopper-Pearson')})",
        "width bias: " + results.get("width_bias", ""),
        "",
    ]
    rows = [
        [
            lv["label"] + (" *" if lv["seeded"] else ""),
            *(display.number(lv["floor_shear"][k]) for k in _QUARTET),
            display.quantity(lv["residence_time"]["p50"], "time"),
        ]
        for lv in results["levels"]
    ]
    header = ["level", "p05", "p50", "p95", "nominal", "t_res p50"]
    lines.append("floor shear [Pa] per level (* seeded):")
    lines.append(format_table(rows, header, "l" + "r" * 5))
    sp = results["supply_pressure"]
    unit, texts = display.column([sp["p05"], sp["p50"], sp["p95"]], "pressure")
    lines.append(f"supply pressure p05/p50/p95: {' / '.join(texts)} {unit}")
    corner = results["worst_corner"]
    where = ", ".join(f"{k} {factor_text(k, v)}" for k, v in corner["factors"].items())
    margin = corner["shear_margin"]
    lines.append(
        f"worst corner: {where}: {'passes' if corner['passes'] else 'FAILS'}"
        + ("" if margin is None else f" (window margin {display.fraction(margin)})")
    )
    lines.append("ranking by floor-shear change at the tolerance:")
    for i, s in enumerate(results["sensitivity"], start=1):
        lines.append(
            f"  {i}. {s['factor']}: {display.fraction(s['shear_change'])} "
            f"(elasticity {display.number(s['elasticity'], 3)} at {s['elasticity_level']})"
        )
    return "\n".join(lines)
