"""Previews of the chip: mask levels in colour, ports, a scale bar; optionally channels coloured
by a solved quantity (floor wall shear, ...) with a colour bar.

matplotlib is imported inside the functions, and figures are made without pyplot (no global
state, Agg rendering). :func:`write_preview` writes SVG or PNG with fixed metadata so that the
same layout gives the same bytes.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import shapely

from chipflow.errors import ExportError
from chipflow.export._files import atomic_write
from chipflow.layout.model import Layout

__all__ = [
    "LayoutPlot",
    "plot_layout",
    "write_preview",
    "write_previews",
    "LAYER_COLOURS",
    "RASTER_VERTICES",
    "bed_close_up",
    "mark_window",
]

#: Fill colours of the mask levels, shallowest first (our own palette), then cycling.
LAYER_COLOURS = ("#3a7ca5", "#e07a2f", "#5c9e52", "#9a5fb0", "#c8455b", "#8a8a3c")
_OUTLINE_COLOUR = "#4d4d4d"
_PORT_COLOUR = "#222222"
#: Above this many drawn vertices (mask shapes and channel fills together) those shapes are
#: embedded in vector previews as one image at the preview resolution, so that the SVG of a
#: bed of thousands of channels stays a few hundred kilobytes; outline, ports, text and the
#: colour bar stay vector.
RASTER_VERTICES = 20_000


@dataclass(frozen=True)
class LayoutPlot:
    """What :func:`plot_layout` drew.

    Attributes
    ----------
    ax : matplotlib.axes.Axes
        The axes holding the chip (coordinates in mm).
    colorbar : matplotlib.colorbar.Colorbar or None
        The colour bar of the channel values, when values were given.
    layer_patches : tuple
        One patch per mask level.
    channel_collection : matplotlib.collections.PolyCollection or None
        The channels coloured by value, when values were given.
    scale_bar_length : float
        Length of the scale bar [m].
    close_up : matplotlib.axes.Axes or None
        The bed close-up panel, when the bed is too fine to read at chip scale.
    """

    ax: Any
    colorbar: Any
    layer_patches: tuple
    channel_collection: Any
    scale_bar_length: float
    close_up: Any = None


def _nice_length(span: float) -> float:
    """The largest 1-2-5 length not above a fifth of ``span`` [m].

    Examples
    --------
    >>> _nice_length(20e-3)
    0.002
    >>> _nice_length(3e-3)
    0.0005
    """
    target = span / 5
    exp = math.floor(math.log10(target))
    for step in (5, 2, 1):
        if step * 10.0**exp <= target:
            return step * 10.0**exp
    return 10.0**exp  # pragma: no cover


def _path_of(geom: shapely.Geometry, scale: float):
    """One compound matplotlib Path of all rings of ``geom`` (holes wind the other way)."""
    from matplotlib.path import Path as MplPath

    polys = shapely.get_parts(geom)
    polys = polys[shapely.get_type_id(polys) == 3]
    if polys.size == 0:
        return None
    polys = shapely.orient_polygons(polys)
    rings = shapely.get_rings(polys)
    xy, idx = shapely.get_coordinates(rings, return_index=True)
    codes = np.full(len(xy), MplPath.LINETO, dtype=np.uint8)
    starts = np.r_[0, np.flatnonzero(np.diff(idx)) + 1]
    ends = np.r_[starts[1:] - 1, len(xy) - 1]
    codes[starts] = MplPath.MOVETO
    codes[ends] = MplPath.CLOSEPOLY
    return MplPath(xy * scale, codes)


def _channel_outlines(channels) -> np.ndarray:
    """Each channel's own outline [m]: the one drawn with the layout, or (for a layout without
    them) the centreline widened by half the width on each side, with flat ends."""
    if channels.outline is not None:
        return np.asarray(channels.outline)
    return shapely.buffer(np.asarray(channels.centreline), channels.width / 2, cap_style="flat")


def _view_bounds(layout: Layout) -> tuple[float, float, float, float]:
    """What the preview shows [m]: the whole chip, or the drawn network when it covers less
    than a quarter of the chip (the whole chip then goes into an inset)."""
    chip = layout.outline.bounds
    parts = [m.geometry for m in layout.layers if not m.geometry.is_empty]
    parts += [shapely.Point(p.x, p.y).buffer(p.diameter / 2) for p in layout.ports]
    parts += [cr.outline for cr in layout.culture_regions]
    if not parts:
        return chip
    x0, y0, x1, y1 = shapely.total_bounds(np.array(parts, dtype=object)).tolist()
    if (x1 - x0) * (y1 - y0) >= 0.25 * (chip[2] - chip[0]) * (chip[3] - chip[1]):
        return chip
    pad = 0.1 * max(x1 - x0, y1 - y0)
    return (
        max(x0 - pad, chip[0]),
        max(y0 - pad, chip[1]),
        min(x1 + pad, chip[2]),
        min(y1 + pad, chip[3]),
    )


#: A bed whose narrowest channel is below this share of the view's span gets a close-up.
CLOSE_UP_BELOW = 0.01


def bed_close_up(layout: Layout, view: tuple[float, float, float, float] | None = None):
    """The square [m] (x0, y0, x1, y1) a close-up of the bed shows, or None.

    Centred where the first bed channel starts (its junction with the distribution side),
    large enough for four widths of the widest channel meeting there and for the next three
    bed channels; None when the drawing has no bed or its channels are wide enough (at least
    :data:`CLOSE_UP_BELOW` of the view's span) to read at chip scale.
    """
    ch = layout.channels
    bed = np.flatnonzero(ch.role == "bed")
    if bed.size == 0:
        return None
    x0, y0, x1, y1 = view or _view_bounds(layout)
    span = max(x1 - x0, y1 - y0)
    if float(ch.width[bed].min()) >= CLOSE_UP_BELOW * span:
        return None
    node = int(ch.node_a[bed[0]])
    meeting = (ch.node_a == node) | (ch.node_b == node)
    cx, cy = (float(v) for v in layout.node_xy[node])
    starts = layout.node_xy[ch.node_a[bed]]
    gaps = np.sort(np.hypot(starts[:, 0] - cx, starts[:, 1] - cy))
    half = max(4.0 * float(ch.width[meeting].max()), 1.1 * float(gaps[min(3, gaps.size - 1)]))
    half = min(half, 0.1 * span)
    return cx - half, cy - half, cx + half, cy + half


def _close_up(ax: Any, layout: Layout, box, fills: tuple | None, mm: float) -> None:
    """Draw the mask levels and the valued channels inside ``box`` [m] on ``ax``.

    ``fills`` is (polygons [mm], owning channel of each, the main panel's collection) or None.
    """
    from matplotlib.collections import PolyCollection
    from matplotlib.patches import PathPatch

    for i, mask in enumerate(layout.layers):  # a few mask levels
        path = _path_of(shapely.clip_by_rect(mask.geometry, *box), mm)
        if path is not None:
            colour = LAYER_COLOURS[i % len(LAYER_COLOURS)]
            alpha = 0.25 if fills is not None else 0.85
            ax.add_artist(PathPatch(path, facecolor=colour, edgecolor="none", alpha=alpha))
    if fills is not None:
        polys, owner, main = fills
        inside = shapely.intersects(_channel_outlines(layout.channels), shapely.box(*box))
        keep = inside[owner]
        drawn = PolyCollection(
            [p for p, k in zip(polys, keep.tolist(), strict=True) if k],
            cmap=main.get_cmap(), norm=main.norm, edgecolors="face", linewidths=0.6,
        )  # fmt: skip
        drawn.set_array(np.asarray(main.get_array())[keep])
        ax.add_collection(drawn, autolim=False)
    ax.set_xlim(box[0] * mm, box[2] * mm)
    ax.set_ylim(box[1] * mm, box[3] * mm)
    ax.set_aspect("equal")
    ax.tick_params(labelsize=7)
    ax.set_xlabel("x [mm]", fontsize=8)
    ax.set_title("bed close-up\n(the box on the chip)", fontsize=8)


def _chip_inset(ax: Any, layout: Layout, view: tuple[float, ...], mm: float) -> None:
    """A small map of the whole chip with the shown region marked."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Rectangle

    inset = ax.inset_axes([0.70, 0.03, 0.28, 0.28])
    ox, oy = layout.outline.exterior.xy
    inset.add_line(Line2D(np.asarray(ox) * mm, np.asarray(oy) * mm, color=_OUTLINE_COLOUR, lw=0.8))
    x0, y0, x1, y1 = view
    inset.add_patch(
        Rectangle((x0 * mm, y0 * mm), (x1 - x0) * mm, (y1 - y0) * mm, color=LAYER_COLOURS[0])
    )
    bx0, by0, bx1, by1 = layout.outline.bounds
    inset.set_xlim(bx0 * mm, bx1 * mm)
    inset.set_ylim(by0 * mm, by1 * mm)
    inset.set_aspect("equal")
    inset.set_xticks([])
    inset.set_yticks([])
    inset.set_title("whole chip", fontsize=7)


def mark_window(colorbar: Any, marks: Sequence[float]) -> None:
    """Show the cells' window on a vertical colour bar: a band between two marks, a line at one.

    The band is hatched in white with white edges over the colours and labelled "window"
    beside the bar, so the colours inside the window stay visible.
    """
    marks = sorted(float(m) for m in marks)
    if not marks:
        return
    bar = colorbar.ax
    if len(marks) == 1:
        bar.axhline(marks[0], color="white", lw=1.4)
        bar.axhline(marks[0], color="black", lw=0.6, ls="--")
        return
    low, high = marks[0], marks[-1]
    bar.axhspan(low, high, facecolor="none", edgecolor="white", hatch="////", lw=1.4)
    for edge in (low, high):
        bar.axhline(edge, color="black", lw=0.7)
    bar.annotate(
        "window",
        xy=(0.0, (low + high) / 2),
        xycoords=("axes fraction", "data"),
        xytext=(-3, 0),
        textcoords="offset points",
        rotation=90,
        ha="right",
        va="center",
        fontsize=7,
    )


def plot_layout(
    layout: Layout,
    ax: Any = None,
    values: np.ndarray | None = None,
    value_label: str = "floor wall shear [Pa]",
    raster_above: int | None = None,
    value_range: tuple[float, float] | None = None,
    value_marks: Sequence[float] = (),
    floors: Sequence[tuple[np.ndarray, np.ndarray]] = (),
) -> LayoutPlot:
    """Draw the chip: mask levels, outline, ports with names, a scale bar.

    When the network covers less than a quarter of the chip, the view zooms onto it and a
    small map of the whole chip marks where it sits. Each mask level is one path and the
    channels coloured by value are one collection, however many channels there are.

    Parameters
    ----------
    layout : Layout
        The drawn chip [m].
    ax : matplotlib.axes.Axes, optional
        Where to draw; a new figure (without pyplot) when omitted.
    values : numpy.ndarray, optional
        One value per drawn channel (same order as ``layout.channels``), e.g. floor wall shear
        [Pa]; the channels are then filled by value, with a colour bar.
    value_label : str
        Colour-bar label, with its unit.
    raster_above : int, optional
        When the mask shapes and channel fills have more vertices than this (default
        :data:`RASTER_VERTICES`), they are marked for rasterising: vector files then embed
        them as an image at the preview resolution.
    value_range : tuple of float, optional
        Fixed colour range (e.g. tied to the cells' shear window, so that a few percent of
        difference shows as a few percent of colour); by default the values' own range.
    value_marks : sequence of float
        Values marked by a line on the colour bar (e.g. the window's ends).
    floors : sequence of (numpy.ndarray, numpy.ndarray)
        With ``values``: chambers' floors filled by value on the same colour scale, each the
        (n, 3, 2) corners of its triangles [m] and one value per triangle.

    Returns
    -------
    LayoutPlot
    """
    from matplotlib.collections import PolyCollection
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Circle, PathPatch, Rectangle

    mm = 1e3
    view = _view_bounds(layout)
    box = close = None
    if ax is None:
        minx, miny, maxx, maxy = layout.outline.bounds
        aspect = (maxy - miny) / max(maxx - minx, 1e-12)
        box = bed_close_up(layout, view)
        if box is None:
            fig = Figure(figsize=(8.0, max(2.5, 8.0 * aspect + 1.2)), dpi=100)
            ax = fig.add_subplot()
        else:  # the chip and, beside it, the bed close-up; laid out by matplotlib
            size = (10.5, max(3.2, 8.0 * aspect + 1.2))
            fig = Figure(figsize=size, dpi=100, layout="constrained")
            fig.get_layout_engine().set(h_pad=0.12, w_pad=0.08)
            grid = fig.add_gridspec(1, 2, width_ratios=(3.0, 1.0))
            ax, close = fig.add_subplot(grid[0]), fig.add_subplot(grid[1])
    ax.set_aspect("equal")
    ox, oy = layout.outline.exterior.xy
    ax.add_line(Line2D(np.asarray(ox) * mm, np.asarray(oy) * mm, color=_OUTLINE_COLOUR, lw=1.0))

    faded = values is not None
    patches = []
    drawn = []
    for i, mask in enumerate(layout.layers):
        path = _path_of(mask.geometry, mm)
        if path is None:
            continue
        drawn.append(len(path.vertices))
        colour = LAYER_COLOURS[i % len(LAYER_COLOURS)]
        patch = PathPatch(
            path,
            facecolor=colour,
            edgecolor="none",
            alpha=0.25 if faded else 0.85,
            label=f"{mask.name} ({mask.depth * 1e6:g} um deep)",
        )
        # add_artist, not add_patch: the view limits are set below, and updating the data
        # limits from a path walks every vertex in Python
        ax.add_artist(patch)
        patches.append(patch)

    collection = colorbar = None
    extra: list = []
    if values is not None:
        ch = layout.channels
        vals = np.asarray(values, dtype=float)
        if vals.shape != (len(ch.width),):
            raise ExportError(
                f"preview of {layout.name!r}: got {vals.size} values for "
                f"{len(ch.width)} channels; give one value per channel"
            )
        shapes = _channel_outlines(ch)
        parts, owner = shapely.get_parts(shapes, return_index=True)
        rings = shapely.get_exterior_ring(parts)
        xy, idx = shapely.get_coordinates(rings, return_index=True)
        cuts = np.flatnonzero(np.diff(idx)) + 1
        # an outline in the fill colour keeps channels narrower than a pixel visible
        polys = np.split(xy * mm, cuts)
        collection = PolyCollection(polys, cmap="viridis", edgecolors="face", linewidths=0.6)
        collection.set_array(vals[owner])
        if value_range is not None:
            collection.set_clim(*value_range)
        ax.add_collection(collection, autolim=False)
        drawn.append(len(xy))
        for corners, tau in floors:  # a handful of chambers: their floors by value
            # edges in the fill colour, not antialiased: no seams between the triangles
            floor = PolyCollection(np.asarray(corners) * mm, cmap="viridis", edgecolors="face",
                                   linewidths=0.05, antialiased=False)  # fmt: skip
            floor.set_array(np.asarray(tau, dtype=float))
            floor.set_clim(*collection.get_clim())
            ax.add_collection(floor, autolim=False)
            drawn.append(3 * len(tau))
            extra.append(floor)
        above = value_range is not None and bool(np.nanmax(vals) > value_range[1])
        colorbar = ax.figure.colorbar(
            collection,
            ax=ax if close is None else [ax, close],
            shrink=0.8,
            extend="max" if above else "neither",
        )
        colorbar.set_label(value_label)
        mark_window(colorbar, value_marks)

    if sum(drawn) > (RASTER_VERTICES if raster_above is None else raster_above):
        for artist in (*patches, collection, *extra):
            if artist is not None:
                artist.set_rasterized(True)

    for port in layout.ports:
        ax.add_patch(
            Circle(
                (port.x * mm, port.y * mm),
                port.diameter / 2 * mm,
                fill=False,
                edgecolor=_PORT_COLOUR,
                lw=1.0,
            )
        )
        ax.text(
            port.x * mm,
            (port.y + 0.6 * port.diameter) * mm,
            port.name,
            ha="center",
            va="bottom",
            fontsize=9,
        )

    for cr in layout.culture_regions:  # the culture regions' outlines, dashed (not masks)
        x0, y0, x1, y1 = cr.outline.bounds
        ax.add_patch(
            Rectangle((x0 * mm, y0 * mm), (x1 - x0) * mm, (y1 - y0) * mm, fill=False,
                      edgecolor="0.4", lw=0.8, ls="--")
        )  # fmt: skip
        if cr.name:
            ax.text(x0 * mm, y1 * mm, f" {cr.name}", ha="left", va="bottom", fontsize=8)

    if close is not None:
        fills = None if collection is None else (polys, owner, collection)
        _close_up(close, layout, box, fills, mm)
        ax.add_patch(
            Rectangle(
                (box[0] * mm, box[1] * mm),
                (box[2] - box[0]) * mm,
                (box[3] - box[1]) * mm,
                fill=False,
                edgecolor="black",
                lw=0.8,
            )
        )
    if view != layout.outline.bounds:
        _chip_inset(ax, layout, view, mm)
    minx, miny, maxx, maxy = view
    pad = 0.05 * max(maxx - minx, maxy - miny)
    ax.set_xlim((minx - pad) * mm, (maxx + pad) * mm)
    ax.set_ylim((miny - 2 * pad) * mm, (maxy + pad) * mm)
    bar = _nice_length(maxx - minx)
    x0, y0 = minx * mm, (miny - 1.2 * pad) * mm
    ax.add_patch(Rectangle((x0, y0), bar * mm, 0.15 * pad * mm, color="black"))
    label = f"{bar * 1e3:g} mm" if bar >= 1e-3 else f"{bar * 1e6:g} um"
    ax.text(x0 + bar * mm / 2, y0 + 0.3 * pad * mm, label, ha="center", va="bottom", fontsize=8)
    ax.set_xlabel("x [mm]")
    ax.set_ylabel("y [mm]")
    ax.set_title(layout.name, y=1.0)  # placed, not searched for (no axis above it)
    if patches:
        ax.legend(handles=patches, loc="upper right", fontsize=7, framealpha=0.8)
    if close is not None:
        _freeze_layout(ax.figure)
    return LayoutPlot(ax, colorbar, tuple(patches), collection, bar, close)


def _freeze_layout(fig: Any) -> None:
    """Lay the figure out once and keep the positions, so that every file saved from it (SVG,
    PNG) has the layout a file saved alone has. The shapes are hidden meanwhile: the layout
    depends on the axes' text only, and drawing thousands of channels once more is slow."""
    shapes = [a for ax in fig.axes for a in (*ax.patches, *ax.collections) if a.get_visible()]
    for artist in shapes:
        artist.set_visible(False)
    fig.draw_without_rendering()
    fig.set_layout_engine("none")
    for artist in shapes:
        artist.set_visible(True)


def write_preview(
    layout: Layout,
    path: str | os.PathLike,
    values: np.ndarray | None = None,
    value_label: str = "floor wall shear [Pa]",
    value_range: tuple[float, float] | None = None,
    value_marks: Sequence[float] = (),
) -> Path:
    """Write an SVG or PNG preview of the chip (chosen by the file suffix).

    The files carry fixed metadata (no date, no library version) and, for SVG, fixed element
    identifiers, so the same layout gives the same bytes.

    Parameters
    ----------
    layout : Layout
    path : str or path-like
        ``.svg`` or ``.png``; written atomically.
    values : numpy.ndarray, optional
        One value per channel for colouring (see :func:`plot_layout`).
    value_label : str
        Colour-bar label, with its unit.
    """
    (written,) = write_previews(
        layout,
        [path],
        values=values,
        value_label=value_label,
        value_range=value_range,
        value_marks=value_marks,
    )
    return written


def write_previews(
    layout: Layout,
    paths: Sequence[str | os.PathLike],
    values: np.ndarray | None = None,
    value_label: str = "floor wall shear [Pa]",
    raster_above: int | None = None,
    value_range: tuple[float, float] | None = None,
    value_marks: Sequence[float] = (),
    floors: Sequence[tuple[np.ndarray, np.ndarray]] = (),
) -> list[Path]:
    """Draw the chip once and write it to several files, e.g. ``shear.svg`` and ``shear.png``.

    Each file has the same bytes as :func:`write_preview` gives for it alone; drawing once
    saves the figure set-up for every further format.

    Parameters
    ----------
    layout : Layout
    paths : sequence of str or path-like
        ``.svg`` or ``.png`` files; each written atomically.
    values : numpy.ndarray, optional
        One value per channel for colouring (see :func:`plot_layout`).
    value_label : str
        Colour-bar label, with its unit.
    raster_above, value_range, value_marks, floors : optional
        As :func:`plot_layout`.

    Returns
    -------
    list of pathlib.Path
        The written files, in the order given.
    """
    import matplotlib

    paths = [Path(p) for p in paths]
    for path in paths:
        if path.suffix.lower() not in (".svg", ".png"):
            raise ExportError(f"{path}: a preview is written as .svg or .png, not {path.suffix!r}")
    written = []
    # text stays text in SVG (as in the report figures): no glyph outlines to build and store
    with matplotlib.rc_context({"svg.hashsalt": "chipflow", "svg.fonttype": "none"}):
        plot = plot_layout(
            layout,
            values=values,
            value_label=value_label,
            raster_above=raster_above,
            value_range=value_range,
            value_marks=value_marks,
            floors=floors,
        )
        fig = plot.ax.figure
        for path in paths:
            fmt = path.suffix.lower().lstrip(".")
            metadata = (
                {"Date": None, "Creator": "chipflow"} if fmt == "svg" else {"Software": "chipflow"}
            )

            def save(tmp: Path, fmt: str = fmt, metadata: dict = metadata) -> None:
                fig.savefig(tmp, format=fmt, metadata=metadata, dpi=150)

            written.append(atomic_write(path, save, f"{fmt.upper()} preview"))
    return written
