"""Reports of a tolerance run (``chipflow vary``): level figures, the HTML page, console text.

Everything is read from the variation results dict (SI floats, see
:func:`chipflow.variation.vary.vary_build`) and, for the figures, from the per-sample floor
shear the run produced; nothing is recomputed.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

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
        return f"{value * 1e6:+.3g} um".replace("+0 um", "0 um")
    return f"{value * 100:+.3g} %".replace("+0 %", "0 %")


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
    for key, style in (("p05", ":"), ("p50", "-"), ("p95", ":")):
        ax.axvline(p[key], color=_INK, ls=style, lw=1.1, zorder=3)
    ax.axvline(p["nominal"], color=_INK, ls="--", lw=0.8, zorder=3, label="nominal")
    label = level.get("label", "")
    seeded = " (seeded)" if level.get("seeded") else ""
    ax.set_title(
        f"{name + ': ' if name else ''}floor shear of {label}{seeded}, p05 / p50 / p95",
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


def _spread(p: Mapping[str, Any] | None, scale: float = 1.0, digits: int = 3) -> list[str]:
    if not p:
        return ["&ndash;"] * 4
    keys = ("p05", "p50", "p95", "nominal")
    return [_num(None if p.get(k) is None else p[k] * scale, digits) for k in keys]


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
        f"{results['yield_standard_error'] * 100:.2g} %"
    )
    return f"{bound * 100:.4g} % ({how})"


def variation_html(results: Mapping[str, Any], figures: Mapping[str, str]) -> str:
    """The tolerance report as one self-contained HTML page (no scripts, no timestamps)."""
    from chipflow import __version__ as version

    design = results["design"]
    tol = results["tolerances"]
    depth = (
        f"&plusmn;{tol['depth'] * 100:.3g} %"
        if tol["depth_kind"] == "fraction"
        else f"&plusmn;{tol['depth'] * 1e6:.3g} um"
    )
    spread = "uniform within" if results["distribution"] == "uniform" else "normal, 1 sd ="
    tol_rows = [
        ["depth of each mould level", depth],
        [
            "width bias of the mask (total change of each channel width; each side wall "
            "moves by half)",
            f"&plusmn;{tol['width'] * 1e6:.3g} um",
        ],
        ["inlet supply", f"&plusmn;{tol['flow'] * 100:.3g} %"],
        ["viscosity", f"&plusmn;{tol['viscosity'] * 100:.3g} %"],
    ]
    y = results["yield"]
    verdict = "pass" if y >= 0.95 else "warn" if y >= 0.5 else "fail"
    levels = results["levels"]
    level_rows = [
        [
            _e(lv["label"]) + (" (seeded)" if lv["seeded"] else ""),
            *_spread(lv["floor_shear"]),
            *_spread(lv["residence_time"]),
            *_spread(lv["pressure_drop"]),
            _num(None if lv.get("inside_window") is None else lv["inside_window"] * 100),
        ]
        for lv in levels
    ]
    quartet = ["p05", "p50", "p95", "nominal"]
    level_header = (
        ["level"]
        + [f"floor shear {k} [Pa]" for k in quartet]
        + [f"residence {k} [s]" for k in quartet]
        + [f"pressure drop {k} [Pa]" for k in quartet]
        + ["inside window [%]"]
    )
    overall = [
        ["supply pressure [kPa]", *_spread(results["supply_pressure"], 1e-3)],
        ["highest chip pressure [kPa]", *_spread(results["chip_pressure"], 1e-3)],
        ["flow per bed channel [uL/min]", *_spread(results["bed_flow"], 6e10)],
        ["bed flow spread (CV) [%]", *_spread(results["bed_flow_spread"], 100.0)],
    ]
    if results.get("shear_margin"):
        overall.append(["window margin [%]", *_spread(results["shear_margin"], 100.0)])
    corner = results["worst_corner"]
    corner_rows = [[_e(k), factor_text(k, v)] for k, v in corner["factors"].items()]
    corner_rows += [
        ["passes", "yes" if corner["passes"] else "no"],
        [
            "window margin",
            "&ndash;"
            if corner["shear_margin"] is None
            else f"{corner['shear_margin'] * 100:.3g} %",
        ],
        ["supply pressure", f"{corner['supply_pressure'] / 1e3:.4g} kPa"],
        ["highest chip pressure", f"{corner['chip_pressure'] / 1e3:.4g} kPa"],
    ]
    rank_rows = [
        [
            str(i + 1),
            _e(s["factor"]),
            factor_text(s["factor"], s["tolerance"]).lstrip("+"),
            _num(s["elasticity"]),
            _e(s["elasticity_level"]),
            _num(s["shear_change"] * 100),
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
        f'<p class="verdict {verdict}">Yield {y * 100:.4g} % of {results["samples"]} samples; '
        f"one-sided 95 % lower bound {_yield_bound(results)}</p>",
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
    """SVG text of every level's figure, keyed by file name ``shear-<label>.svg``."""
    name = results["design"]["name"]
    window = results.get("shear_window")
    return {
        f"shear-{lv['label']}.svg": svg_text(level_figure(shear[:, g], lv, window, name))
        for g, lv in enumerate(results["levels"])  # loop over levels
    }


def variation_summary(results: Mapping[str, Any]) -> str:
    """Plain-text summary in lab units: yield, floor shear per level, worst corner, ranking."""
    y = results["yield"]
    lines = [
        f"{results['samples']} samples (seed {results['seed']}, {results['distribution']}): "
        f"yield {y * 100:.4g} %, one-sided 95 % lower bound "
        f"{results.get('yield_lower_95', 0.0) * 100:.4g} % "
        f"({results.get('yield_bound', 'Clopper-Pearson')})",
        "width bias: " + results.get("width_bias", ""),
        "",
    ]
    rows = [
        [
            lv["label"] + (" *" if lv["seeded"] else ""),
            *(f"{lv['floor_shear'][k]:.4g}" for k in ("p05", "p50", "p95", "nominal")),
            f"{lv['residence_time']['p50']:.3g}",
        ]
        for lv in results["levels"]
    ]
    header = ["level", "p05", "p50", "p95", "nominal", "t_res p50"]
    lines.append("floor shear [Pa] per level (* seeded):")
    lines.append(format_table(rows, header, "l" + "r" * 5))
    sp = results["supply_pressure"]
    lines.append(
        f"supply pressure p05/p50/p95: {sp['p05'] / 1e3:.4g} / {sp['p50'] / 1e3:.4g} / "
        f"{sp['p95'] / 1e3:.4g} kPa"
    )
    corner = results["worst_corner"]
    where = ", ".join(f"{k} {factor_text(k, v)}" for k, v in corner["factors"].items())
    margin = corner["shear_margin"]
    lines.append(
        f"worst corner: {where}: {'passes' if corner['passes'] else 'FAILS'}"
        + ("" if margin is None else f" (window margin {margin * 100:.3g} %)")
    )
    lines.append("ranking by floor-shear change at the tolerance:")
    for i, s in enumerate(results["sensitivity"], start=1):
        lines.append(
            f"  {i}. {s['factor']}: {s['shear_change'] * 100:.3g} % "
            f"(elasticity {s['elasticity']:.3g} at {s['elasticity_level']})"
        )
    return "\n".join(lines)
