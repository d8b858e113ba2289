"""Figures of a build, drawn from the results dict (the content of results.json).

The figures never recompute physics: they plot what the results hold. matplotlib is imported
inside the functions and used without pyplot (a bare :class:`~matplotlib.figure.Figure` on the
Agg canvas), so nothing depends on a display or on global figure state.
"""

from __future__ import annotations

import io
import re
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

__all__ = ["profile_figure", "svg_text", "generation_labels", "PROFILE_PANELS"]

#: Panel titles of the profile figure, top to bottom.
PROFILE_PANELS = (
    "pressure",
    "flow rate",
    "total cross-section",
    "mean velocity",
    "floor wall shear",
    "residence time",
)

# Our own palette: ink for lines, a teal for totals, a warm sand for the bed band and a soft
# green for the shear window.
_INK = "#24313d"
_TEAL = "#1f7a7a"
_BED = "#f3e7cf"
_WINDOW = "#cfe8c9"
_SPAN_FOR_LOG = 30.0
# Figure margins left, right, top, bottom, the gap between panels and the distance of the
# y-axis labels from the axes [inch].
_MARGINS = (0.95, 0.15, 0.55, 0.55)
_PANEL_GAP = 0.35
_LABEL_OFFSET = 0.6


def generation_labels(generations: Sequence[Mapping[str, Any]]) -> list[str]:
    """Short labels along the path: ``d0, d1, ...`` (distribution), ``bed``, ``c1, c0``
    (collection); other roles keep their name and generation.

    >>> generation_labels([{"generation": 0, "role": "distribution"},
    ...                    {"generation": 1, "role": "bed"},
    ...                    {"generation": 0, "role": "collection"}])
    ['d0', 'bed', 'c0']
    """
    out = []
    for g in generations:
        role = str(g.get("role", ""))
        number = g.get("generation", "")
        if role == "bed":
            out.append("bed")
        elif role in ("distribution", "collection"):
            out.append(f"{role[0]}{number}")
        else:
            out.append(f"{role} {number}".strip())
    return out


def _column(generations: Sequence[Mapping[str, Any]], key: str) -> np.ndarray:
    return np.array(
        [np.nan if g.get(key) is None else float(g[key]) for g in generations], dtype=float
    )


def _use_log(*arrays: np.ndarray) -> bool:
    values = np.concatenate([np.abs(a[np.isfinite(a)]) for a in arrays])
    if values.size == 0 or np.any(values <= 0):
        return False
    return float(values.max() / values.min()) > _SPAN_FOR_LOG


def _log_axis(ax) -> None:
    """A logarithmic y axis labelled in plain numbers (0.1, 1, 10), which needs no math-text
    typesetting."""
    from matplotlib.ticker import LogFormatter

    ax.set_yscale("log")
    ax.yaxis.set_major_formatter(LogFormatter())
    ax.yaxis.set_minor_formatter(LogFormatter(labelOnlyBase=False))


def _steps(ax, x: np.ndarray, y: np.ndarray, **style) -> None:
    """Draw one flat step per generation, from x - 0.5 to x + 0.5."""
    xs = np.repeat(x, 2) + np.tile([-0.5, 0.5], x.size)
    ax.plot(xs, np.repeat(y, 2), **style)


def profile_figure(results: Mapping[str, Any], *, width: float = 7.5, panel_height: float = 1.55):
    """Stacked panels along the path from inlet to outlet, one step per generation.

    Panels (top to bottom): pressure at each generation's ends (kPa or Pa), flow per channel
    and total flow (uL/min), total cross-section (mm^2), mean velocity (mm/s), floor wall shear
    (Pa; mean and peak shear too, the cell type's window shaded) and residence time (s). Axes
    whose values span more than a factor of 30 are logarithmic. The bed is shaded in every panel.

    Parameters
    ----------
    results : mapping
        The results dict (see :mod:`chipflow.report`); uses ``generations``, ``shear_window``
        and ``design.name``.
    width : float
        Figure width [inch].
    panel_height : float
        Height of each panel [inch].

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure

    generations = list(results["generations"])
    n = len(generations)
    x = np.arange(n, dtype=float)
    labels = generation_labels(generations)
    count = _column(generations, "count")
    fig = Figure(figsize=(width, panel_height * len(PROFILE_PANELS) + 0.8))
    axes = fig.subplots(len(PROFILE_PANELS), 1, sharex=True)
    name = results.get("design", {}).get("name", "")
    fig.suptitle(
        f"{name}: profile from inlet to outlet" if name else "profile from inlet to outlet",
        fontsize=11,
        color=_INK,
    )

    # pressure: a straight fall across each generation
    p_in, p_out = _column(generations, "pressure_in"), _column(generations, "pressure_out")
    p_unit, p_scale = ("kPa", 1e-3) if np.nanmax(np.abs(p_in)) >= 1e3 else ("Pa", 1.0)
    xs = np.ravel(np.column_stack([x - 0.5, x + 0.5]))
    ps = np.ravel(np.column_stack([p_in, p_out])) * p_scale
    axes[0].plot(xs, ps, color=_INK, lw=1.6, marker="o", ms=2.5)
    axes[0].set_ylabel(f"pressure\n[{p_unit}]")

    # flow per channel and total
    q = _column(generations, "flow_per_channel") * 6e10  # m^3/s -> uL/min
    q_total = q * count
    _steps(axes[1], x, q, color=_INK, lw=1.6, label="per channel")
    _steps(axes[1], x, q_total, color=_TEAL, lw=1.6, ls="--", label="total")
    axes[1].set_ylabel("flow\n[uL/min]")
    axes[1].legend(loc="best", fontsize=7, frameon=False)
    if _use_log(q, q_total):
        _log_axis(axes[1])

    series = [
        (2, _column(generations, "total_area") * 1e6, "total\ncross-section\n[mm\u00b2]"),
        (3, _column(generations, "mean_velocity") * 1e3, "mean velocity\n[mm/s]"),
        (5, _column(generations, "residence_time"), "residence\ntime [s]"),
    ]
    for row, values, ylabel in series:
        _steps(axes[row], x, values, color=_INK, lw=1.6)
        axes[row].set_ylabel(ylabel)
        if _use_log(values):
            _log_axis(axes[row])

    # floor wall shear with the window
    floor = _column(generations, "wall_shear_floor")
    peak = _column(generations, "wall_shear_max")
    ax = axes[4]
    window = results.get("shear_window") or {}
    shown = [floor, peak]
    bounds = [float(window[k]) for k in ("min", "max") if window.get(k) is not None]
    if bounds:
        # a one-sided window shades from its bound to the edge of the data
        data = np.concatenate([floor, peak])
        data = data[np.isfinite(data) & (data > 0)]
        low = float(window["min"]) if window.get("min") is not None else min(data.min(), *bounds)
        high = float(window["max"]) if window.get("max") is not None else max(data.max(), *bounds)
        ax.axhspan(
            low, high, color=_WINDOW, zorder=0, label=f"window ({window.get('cell_type', 'cells')})"
        )
        shown.append(np.array(bounds))
    _steps(ax, x, floor, color=_INK, lw=1.6, label="floor")
    _steps(ax, x, peak, color=_TEAL, lw=1.0, ls=":", label="peak")
    ax.set_ylabel("wall shear\n[Pa]")
    ax.legend(loc="best", fontsize=7, frameon=False)
    if _use_log(*shown):
        _log_axis(ax)

    roles = [g.get("role") for g in generations]
    for axis, title in zip(axes, PROFILE_PANELS, strict=True):
        for i, role in enumerate(roles):  # loop over generations
            if role == "bed":
                axis.axvspan(i - 0.5, i + 0.5, color=_BED, zorder=-1, lw=0)
        axis.set_title(title, loc="left", fontsize=8, color=_INK, pad=2)
        axis.tick_params(labelsize=7)
        axis.yaxis.label.set_size(7.5)
        axis.grid(True, which="major", axis="y", color="#dde3e8", lw=0.6)
        for side in ("top", "right"):
            axis.spines[side].set_visible(False)
    axes[-1].set_xticks(x, labels)
    axes[-1].set_xlim(-0.5, n - 0.5)
    axes[-1].set_xlabel(
        "generation along the path, inlet to outlet (d: distribution, c: collection)", fontsize=7.5
    )
    # Fixed margins [inch] and label positions instead of measuring every label's extent (a
    # tight layout and label alignment would take most of the figure's drawing time).
    height = fig.get_figheight()
    for axis in axes:
        axis.yaxis.set_label_coords(-_LABEL_OFFSET / width, 0.5)
    fig.subplots_adjust(
        left=_MARGINS[0] / width,
        right=1 - _MARGINS[1] / width,
        top=1 - _MARGINS[2] / height,
        bottom=_MARGINS[3] / height,
        hspace=_PANEL_GAP / (panel_height - _PANEL_GAP),
    )
    return fig


def svg_text(fig) -> str:
    """Render a matplotlib figure to deterministic SVG text.

    The SVG id salt is fixed, the metadata block (date, creator) is left out and text stays
    text (``svg.fonttype`` none), so the same figure gives the same bytes on every run.
    """
    import matplotlib

    buffer = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": "chipflow", "svg.fonttype": "none"}):
        fig.savefig(buffer, format="svg", metadata={"Date": None, "Creator": "chipflow"})
    text = re.sub(r"\s*<metadata>.*?</metadata>", "", buffer.getvalue(), flags=re.DOTALL)
    return re.sub(r"[ \t]+\n", "\n", text)
