"""The heat map of a design sweep: the worst window margin and the status of every point."""

from __future__ import annotations

import re
import textwrap
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from chipflow.report.figures import _INK

__all__ = ["heat_map", "point_reasons"]

_STATUS_MARK = {"pass": "pass", "warn": "warn", "fail": "FAIL", "error": "not built"}
_FILE = re.compile(r"^\S+\.toml: ")
#: Characters per line of the notes under the map, and at most this many lines per note.
_NOTE_WIDTH, _NOTE_LINES = 110, 3


def point_reasons(rows: Sequence[Mapping[str, Any]]) -> tuple[list[int | None], list[str]]:
    """Why each point failed or was not built, as note numbers into a list of distinct reasons.

    A point that was not built has its error message; a failing point the names of its
    failing checks; the other points no note (None). Equal reasons share one note.

    >>> rows = [{"status": "pass"}, {"status": "error", "message": "chip.toml: too deep"},
    ...         {"status": "fail", "failed": ["bond"], "message": ""},
    ...         {"status": "error", "message": "too deep"}]
    >>> point_reasons(rows)
    ([None, 1, 2, 1], ['not built: too deep', 'fails: bond'])
    """
    notes: list[str] = []
    numbers: list[int | None] = []
    for row in rows:  # one reason per grid point
        if row.get("status") == "error":  # the design file's path left out: the CSV has it
            message = _FILE.sub("", " ".join(str(row.get("message", "")).split()), count=1)
            reason = "not built: " + message
        elif row.get("status") == "fail":
            reason = "fails: " + (", ".join(row.get("failed") or []) or str(row.get("message")))
        else:
            numbers.append(None)
            continue
        if reason not in notes:
            notes.append(reason)
        numbers.append(notes.index(reason) + 1)
    return numbers, notes


def heat_map(sweep):
    """A grid coloured by the worst margin of the seeded floor shear to the window [%].

    The first swept key runs along x, the second (if any) along y. Every cell is labelled with
    its status (pass, warn, FAIL, or "not built"), its margin and, for a failing point or one
    that could not be built, the number of its reason, listed under the map (the failing
    checks, or the build's error message; see :func:`point_reasons`). Cells without a margin
    (no window, or not built) are grey.

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
    numbers, reasons = point_reasons(sweep.rows)
    note = np.array(numbers, dtype=object).reshape(nx, ny).T
    lines = []
    for k, reason in enumerate(reasons, start=1):  # distinct reasons, a handful
        wrapped = textwrap.wrap(
            f"[{k}] {reason}", _NOTE_WIDTH, subsequent_indent="    ", break_on_hyphens=False
        )
        if len(wrapped) > _NOTE_LINES:
            wrapped = [*wrapped[: _NOTE_LINES - 1], wrapped[_NOTE_LINES - 1][:-4] + " ..."]
        lines += wrapped
    notes_height = 0.16 * len(lines) + (0.15 if lines else 0.0)  # [inch]
    width = max(6.0 if lines else 4.5, 0.75 * nx + 2.5)
    height = max(2.4, 0.5 * ny + 1.8) + notes_height
    fig = Figure(figsize=(width, height))
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
            if note[j, i] is not None:
                text += f" [{note[j, i]}]"
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
    if lines:
        fig.text(0.01, (notes_height - 0.08) / height, "\n".join(lines), fontsize=6.5,
                 color=_INK, va="top", ha="left", family="monospace")  # fmt: skip
    fig.tight_layout(rect=(0.0, notes_height / height, 1.0, 1.0))
    return fig
