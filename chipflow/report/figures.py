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

__all__ = [
    "profile_figure",
    "svg_text",
    "path_edges",
    "PROFILE_PANELS",
    "OXYGEN_PANEL",
]

#: Panel titles of the profile figure, top to bottom.
PROFILE_PANELS = (
    "pressure",
    "flow rate",
    "total cross-section",
    "mean velocity",
    "floor wall shear",
    "residence time",
)
#: Title of the panel added below them when the results hold the oxygen transport.
OXYGEN_PANEL = "oxygen along the path"

# Our own palette: ink for lines, a teal for totals, a warm sand for the bed band and a soft
# green for the shear window.
_INK = "#24313d"
_TEAL = "#1f7a7a"
_BED = "#f3e7cf"
_WINDOW = "#cfe8c9"
_SPAN_FOR_LOG = 30.0
# Figure margins left, right, top, bottom, the gap between panels and the distance of the
# y-axis labels from the axes [inch].
_MARGINS = (0.95, 0.15, 0.7, 0.55)
_PANEL_GAP = 0.35
_LABEL_OFFSET = 0.6


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


def _steps(ax, start: np.ndarray, end: np.ndarray, y: np.ndarray, **style) -> None:
    """Draw one flat step per generation, from its start to its end along the path."""
    xs = np.ravel(np.column_stack([start, end]))
    ax.plot(xs, np.repeat(y, 2), **style)


def _band(
    ax, start: np.ndarray, end: np.ndarray, low: np.ndarray, high: np.ndarray, label: str | None
) -> None:
    """Shade ``low``..``high`` as one flat step per generation (a time-varying supply's range)."""
    xs = np.ravel(np.column_stack([start, end]))
    ax.fill_between(
        xs, np.repeat(low, 2), np.repeat(high, 2), color=_TEAL, alpha=0.22, lw=0, label=label
    )


def _swing(generations: Sequence[Mapping[str, Any]]) -> tuple[np.ndarray, np.ndarray] | None:
    """Per level, the lowest and highest floor shear over time relative to the table's value
    (the flow and the velocity swing by the same factors); None for a steady supply."""
    if not generations or any(g.get("min") is None for g in generations):
        return None
    mean = _column(generations, "wall_shear_floor")
    with np.errstate(divide="ignore", invalid="ignore"):
        return _column(generations, "min") / mean, _column(generations, "max") / mean


def path_edges(generations: Sequence[Mapping[str, Any]]) -> np.ndarray:
    """Distance [m] along one path from the inlet at each generation boundary (n + 1 values).

    Each generation contributes the (mean) length of its channels, so the profile's x axis is
    the distance the liquid travels.

    >>> path_edges([{"length": 0.002}, {"length": 0.005}, {"length": 0.002}]).tolist()
    [0.0, 0.002, 0.007, 0.009000000000000001]
    """
    lengths = _column(generations, "length")
    lengths = np.where(np.isfinite(lengths), lengths, 0.0)
    return np.concatenate([[0.0], np.cumsum(lengths)])


def profile_figure(results: Mapping[str, Any], *, width: float = 7.5, panel_height: float = 1.55):
    """Stacked panels along the path from inlet to outlet, one step per generation, against
    the distance along the path (each generation as long as its channels).

    Panels (top to bottom): pressure at each generation's ends (kPa or Pa), flow per channel
    and total flow (uL/min), total cross-section (mm^2), mean velocity (mm/s), floor wall shear
    (Pa; mean and peak shear too, the cell type's window shaded), residence time (s) and, when
    the results hold the transport (``transport.profile``), the oxygen along the path (bulk and
    lowest floor, mol/m^3, with the cells' critical value). Axes
    whose values span more than a factor of 30 are logarithmic. The bed is shaded in every panel.
    For a time-varying supply (results rows with ``min``/``max``) the flow, velocity and floor
    shear panels shade the range each level sweeps over time around the table's value.

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
    edges = path_edges(generations) * 1e3  # mm
    start, end = edges[:-1], edges[1:]
    from chipflow.network.summary import generation_labels  # light startup: see console

    labels = generation_labels(generations)
    count = _column(generations, "count")
    transport = results.get("transport") or {}
    oxygen = bool(transport.get("profile")) and len(transport.get("levels", [])) == len(generations)
    titles = (*PROFILE_PANELS, OXYGEN_PANEL) if oxygen else PROFILE_PANELS
    fig = Figure(figsize=(width, panel_height * len(titles) + 0.8))
    axes = fig.subplots(len(titles), 1, sharex=True)
    name = results.get("design", {}).get("name", "")
    fig.suptitle(
        f"{name}: profile from inlet to outlet" if name else "profile from inlet to outlet",
        fontsize=11,
        color=_INK,
    )

    # pressure: a straight fall across each generation
    p_in, p_out = _column(generations, "pressure_in"), _column(generations, "pressure_out")
    p_unit, p_scale = ("kPa", 1e-3) if np.nanmax(np.abs(p_in)) >= 1e3 else ("Pa", 1.0)
    xs = np.ravel(np.column_stack([start, end]))
    ps = np.ravel(np.column_stack([p_in, p_out])) * p_scale
    axes[0].plot(xs, ps, color=_INK, lw=1.6, marker="o", ms=2.5)
    axes[0].set_ylabel(f"pressure\n[{p_unit}]")

    # flow per channel and total
    q = _column(generations, "flow_per_channel") * 6e10  # m^3/s -> uL/min
    q_total = q * count
    swing = _swing(generations)
    if swing is not None:
        _band(axes[1], start, end, q * swing[0], q * swing[1], "per channel, min-max over time")
    _steps(axes[1], start, end, q, color=_INK, lw=1.6, label="per channel")
    _steps(axes[1], start, end, q_total, color=_TEAL, lw=1.6, ls="--", label="total")
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
        if swing is not None and row == 3:
            _band(axes[row], start, end, values * swing[0], values * swing[1], None)
        _steps(axes[row], start, end, values, color=_INK, lw=1.6)
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
    if swing is not None:
        low, high = _column(generations, "min"), _column(generations, "max")
        _band(ax, start, end, low, high, "floor, min-max over time")
        shown += [low[low > 0], high[high > 0]]
    _steps(ax, start, end, floor, color=_INK, lw=1.6, label="floor")
    _steps(ax, start, end, peak, color=_TEAL, lw=1.0, ls=":", label="peak")
    ax.set_ylabel("wall shear\n[Pa]")
    ax.legend(loc="best", fontsize=7, frameon=False)
    if _use_log(*shown):
        _log_axis(ax)
    if oxygen:
        _oxygen_panel(axes[len(PROFILE_PANELS)], transport, start, end)

    roles = [g.get("role") for g in generations]
    for axis, title in zip(axes, titles, strict=True):
        for i, role in enumerate(roles):  # loop over generations
            if role == "bed":
                axis.axvspan(start[i], end[i], color=_BED, zorder=-1, lw=0)
        axis.set_title(title, loc="left", fontsize=8, color=_INK, pad=2)
        axis.tick_params(labelsize=7)
        axis.yaxis.label.set_size(7.5)
        axis.grid(True, which="major", axis="y", color="#dde3e8", lw=0.6)
        for side in ("top", "right"):
            axis.spines[side].set_visible(False)
    axes[-1].set_xlim(edges[0], edges[-1])
    axes[-1].set_xlabel(
        "distance along the path from inlet to outlet [mm]; generations marked on top "
        "(d: distribution, c: collection)",
        fontsize=7.5,
    )
    # Fixed margins [inch] and label positions instead of measuring every label's extent (a
    # tight layout and label alignment would take most of the figure's drawing time).
    top = axes[0].secondary_xaxis("top")
    top.set_xticks((start + end) / 2, labels)
    top.tick_params(labelsize=6, length=0, pad=1)
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


def _oxygen_panel(ax, transport: Mapping[str, Any], start: np.ndarray, end: np.ndarray) -> None:
    """Bulk and lowest floor oxygen along the path, each level drawn over its own stretch."""
    profile = transport["profile"]
    s = np.asarray(profile["stations"], float)
    for i, level in enumerate(profile["levels"]):  # loop over generations
        x = start[i] + s * (end[i] - start[i])
        first = i == 0
        ax.plot(x, level["bulk"], color=_INK, lw=1.4, label="bulk (mean)" if first else None)
        ax.plot(
            x, level["floor_lowest"], color=_TEAL, lw=1.2, ls="--",
            label="floor (lowest channel)" if first else None,
        )  # fmt: skip
    critical = transport.get("o2_critical")
    if critical is not None:
        ax.axhline(critical, color="#a3262a", lw=0.9, ls=":", label="critical for the cells")
    ax.set_ylabel("oxygen\n[mol/m\u00b3]")
    ax.set_ylim(bottom=0.0)
    ax.legend(loc="best", fontsize=7, frameon=False)


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
