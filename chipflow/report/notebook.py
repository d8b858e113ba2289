"""Rich display in a notebook: a build or a tolerance run as HTML (``_repr_html_``).

A :class:`~chipflow.build.Build` shows its verdict, the level table of ``chipflow build``
(:func:`chipflow.report.console.level_cells`: each level's window and verdict from the checks)
and the profile figure; a tolerance run (:class:`~chipflow.variation.vary.Variation`) shows its
yield, the floor-shear spread of every level and the nominal build's profile figure. Nothing is
recomputed: both read the results dicts.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from chipflow import display
from chipflow.report.console import level_cells, verdict_line
from chipflow.report.html import _e, _inline_svg, _table

__all__ = ["build_html", "variation_html_view"]

_STYLE = (
    "<style>.chipflow-view table{border-collapse:collapse;font-size:0.85em}"
    ".chipflow-view td,.chipflow-view th{padding:0.15em 0.5em;text-align:right}"
    ".chipflow-view .text{text-align:left}.chipflow-view svg{max-width:100%;height:auto}"
    "</style>"
)


def _profile(results: Mapping[str, Any]) -> str:
    if not results.get("generations"):
        return ""
    from chipflow.report.figures import profile_figure, svg_text

    return f"<figure>{_inline_svg(svg_text(profile_figure(results)))}</figure>"


def _levels(results: Mapping[str, Any]) -> str:
    cells = level_cells(results)
    if cells is None:
        return ""
    header, units, rows = cells
    header = [h if not u else f"{h} {u}" for h, u in zip(header, ["", *units], strict=True)]
    body = [[_e(c) for c in row] for row in rows]
    return _table([_e(h) for h in header], body, text_columns=(0, len(header) - 1))


def build_html(results: Mapping[str, Any]) -> str:
    """A build's results as one HTML fragment: verdict, level table, profile figure.

    >>> text = build_html({"design": {"name": "x"}, "checks": [], "generations": []})
    >>> "<h3>x</h3>" in text and "checks: 0 pass, 0 warn, 0 fail" in text
    True
    """
    name = results.get("design", {}).get("name", "design")
    parts = [
        _STYLE,
        '<div class="chipflow-view">',
        f"<h3>{_e(name)}</h3>",
        f"<p>{_e(verdict_line(results))}</p>",
        _levels(results),
        _profile(results),
        "</div>",
    ]
    return "\n".join(p for p in parts if p)


def variation_html_view(results: Mapping[str, Any], nominal: Mapping[str, Any]) -> str:
    """A tolerance run as one HTML fragment: yield, each level's floor-shear spread, and the
    nominal build's profile figure.

    >>> shear = {"p05": 0.6, "p50": 0.7, "p95": 0.8, "nominal": 0.7}
    >>> results = {"design": {"name": "x"}, "samples": 10, "seed": 0, "yield": 1.0,
    ...            "yield_standard_error": 0.0,
    ...            "levels": [{"label": "bed", "seeded": True, "floor_shear": shear}]}
    >>> "100 %" in variation_html_view(results, {"generations": []})
    True
    """
    name = results.get("design", {}).get("name", "design")
    rows = [
        [_e(lv["label"]) + (" (seeded)" if lv.get("seeded") else "")]
        + [_e(display.number(lv["floor_shear"].get(k))) for k in ("p05", "p50", "p95", "nominal")]
        for lv in results.get("levels", [])
    ]
    header = ["level", *(f"floor shear {k} [Pa]" for k in ("p05", "p50", "p95", "nominal"))]
    error = display.fraction(results.get("yield_standard_error"), 2)
    parts = [
        _STYLE,
        '<div class="chipflow-view">',
        f"<h3>{_e(name)}: tolerances</h3>",
        f"<p>{results.get('samples')} samples (seed {results.get('seed')}): yield "
        f"{_e(display.fraction(results.get('yield')))} &plusmn; {_e(error)}</p>",
        _table(header, rows, text_columns=1),
        "<p>The nominal build:</p>",
        _profile(nominal),
        "</div>",
    ]
    return "\n".join(p for p in parts if p)
