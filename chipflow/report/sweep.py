"""The heat map of a design sweep: the worst window margin and the status of every point."""

from __future__ import annotations

import numpy as np

from chipflow.report.figures import _INK

__all__ = ["heat_map"]

_STATUS_MARK = {"pass": "pass", "warn": "warn", "fail": "FAIL", "error": "n/a"}


def heat_map(sweep):
    """A grid coloured by the worst margin of the seeded floor shear to the window [%].

    The first swept key runs along x, the second (if any) along y. Every cell is labelled with
    its status (pass, warn, FAIL, or n/a where the point could not be built) and its margin;
    cells without a margin (no window, or not built) are grey.

    Parameters
    ----------
    sweep : chipflow.variation.sweep.Sweep

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib import colormaps
    from matplotlib.colors import TwoSlopeNorm
    from matplotlib.figure import Figure

    axes = sweep.axes
    nx = len(axes[0].values)
    ny = len(axes[1].values) if len(axes) > 1 else 1
    margin = (
        np.array(
            [
                np.nan if r["worst_shear_margin"] is None else r["worst_shear_margin"]
                for r in sweep.rows
            ],
            dtype=float,
        )
        .reshape(nx, ny)
        .T
        * 100.0
    )
    status = np.array([r["status"] for r in sweep.rows], dtype=object).reshape(nx, ny).T
    fig = Figure(figsize=(max(4.5, 0.75 * nx + 2.5), max(2.4, 0.5 * ny + 1.8)))
    ax = fig.subplots()
    finite = margin[np.isfinite(margin)]
    span = max(float(np.abs(finite).max()) if finite.size else 1.0, 1.0)
    norm = TwoSlopeNorm(vcenter=0.0, vmin=-span, vmax=span)
    cmap = colormaps["PuOr"].with_extremes(bad="#d9dde1")
    image = ax.imshow(
        np.ma.masked_invalid(margin), cmap=cmap, norm=norm, origin="lower", aspect="auto"
    )
    for j in range(ny):  # loop over grid cells for their labels
        for i in range(nx):
            text = _STATUS_MARK.get(status[j, i], status[j, i])
            if np.isfinite(margin[j, i]):
                text += f"\n{margin[j, i]:+.0f}%"
            shade = cmap(norm(margin[j, i])) if np.isfinite(margin[j, i]) else (0.85,) * 3
            light = 0.299 * shade[0] + 0.587 * shade[1] + 0.114 * shade[2] > 0.5
            ax.text(
                i, j, text, ha="center", va="center", fontsize=6.5, color=_INK if light else "white"
            )
    from chipflow.variation.grid import value_text

    ax.set_xticks(range(nx), [value_text(v) for v in axes[0].values], rotation=45, ha="right")
    ax.set_xlabel(axes[0].key, fontsize=8)
    if len(axes) > 1:
        ax.set_yticks(range(ny), [value_text(v) for v in axes[1].values])
        ax.set_ylabel(axes[1].key, fontsize=8)
    else:
        ax.set_yticks([])
    ax.tick_params(labelsize=7)
    bar = fig.colorbar(image, ax=ax, fraction=0.05, pad=0.02)
    bar.set_label("worst margin to the window [%]", fontsize=7.5)
    bar.ax.tick_params(labelsize=7)
    ax.set_title(
        f"{sweep.name}: worst floor-shear margin and status per point",
        loc="left",
        fontsize=8.5,
        color=_INK,
    )
    fig.tight_layout()
    return fig
