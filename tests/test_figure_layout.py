"""The figures' layout: nothing overlaps or is cut, the bed gets a close-up, the window a band.

Extents are measured on the drawn figure (matplotlib's own text and axes boxes, in display
pixels), so a title that runs into an axis label or a label that leaves the figure fails. The
fractions compared are the figures' own geometry (no outside source).
"""

from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from chipflow.build import build_design
from chipflow.export.preview import bed_close_up, mark_window, plot_layout
from chipflow.report.field_figure import field_shear_figure

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def demo():
    return build_design(ROOT / "designs" / "demo_endothelial_bed.toml", field=False)


def _drawn(fig):
    """Draw ``fig`` on an Agg canvas and return its renderer (extents in display pixels)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    return canvas.get_renderer()


def _inside(inner, outer, slack: float = 1.0) -> bool:
    return (
        inner.x0 >= outer.x0 - slack
        and inner.y0 >= outer.y0 - slack
        and inner.x1 <= outer.x1 + slack
        and inner.y1 <= outer.y1 + slack
    )


def _field_solution(demo):
    """A stand-in field solution: the demo's bed region as a triangle mesh, shear by x."""
    import matplotlib.tri as mtri

    x0, y0, x1, y1 = demo.layout.outline.bounds
    gx, gy = np.meshgrid(np.linspace(x0, x1, 30), np.linspace(y0, y1, 12))
    points = np.column_stack([gx.ravel(), gy.ravel()])
    triangles = mtri.Triangulation(points[:, 0], points[:, 1]).triangles
    shear = np.linspace(0.0, 1.6, len(triangles))
    return SimpleNamespace(
        mesh=SimpleNamespace(points=points, triangles=triangles), floor_shear=shear
    )


def test_field_figure_close_up_title_clears_the_main_panel_and_the_bar_label_fits(demo):
    solution = _field_solution(demo)
    zoom = (*demo.layout.node_xy[0], 1e-3)
    fig = field_shear_figure(solution, (0.5, 1.0), zoom)
    renderer = _drawn(fig)
    main, close = fig.axes[0], fig.axes[1]
    title = close.title.get_window_extent(renderer)
    label = main.xaxis.label.get_window_extent(renderer)
    ticks = main.xaxis.get_tightbbox(renderer)
    assert not title.overlaps(label) and not title.overlaps(ticks)
    bar = fig.axes[-1]
    whole = fig.bbox
    assert _inside(bar.yaxis.label.get_window_extent(renderer), whole)
    assert "window 0.5-1 Pa" in bar.yaxis.label.get_text()
    for ax in (main, close):  # every axis label inside the figure
        assert _inside(ax.get_tightbbox(renderer), whole)


def test_field_figure_without_close_up_keeps_its_bar_label(demo):
    fig = field_shear_figure(_field_solution(demo), (0.5, 1.0), None)
    renderer = _drawn(fig)
    assert _inside(fig.axes[-1].yaxis.label.get_window_extent(renderer), fig.bbox)


def test_layout_and_shear_figures_carry_a_bed_close_up(demo):
    layout = demo.layout
    box = bed_close_up(layout)
    assert box is not None
    bed = layout.channels.role == "bed"
    # the box holds the start of the first bed channel and is far smaller than the view
    x, y = layout.node_xy[layout.channels.node_a[np.flatnonzero(bed)[0]]]
    assert box[0] < x < box[2] and box[1] < y < box[3]
    assert box[2] - box[0] < 0.25 * (layout.outline.bounds[2] - layout.outline.bounds[0])
    for values in (None, np.linspace(0.2, 1.2, len(layout.channels.width))):
        plot = plot_layout(layout, values=values)
        assert plot.close_up is not None
        lo, hi = plot.close_up.get_xlim()
        assert lo == pytest.approx(box[0] * 1e3) and hi == pytest.approx(box[2] * 1e3)
        drawn = plot.close_up.collections if values is not None else plot.close_up.patches
        assert len(drawn) >= 1  # the close-up shows channels
        fig = plot.ax.figure
        renderer = _drawn(fig)
        main = plot.ax.get_window_extent(renderer)
        assert not main.overlaps(plot.close_up.get_window_extent(renderer))
        for ax in fig.axes:
            assert _inside(ax.get_tightbbox(renderer), fig.bbox, slack=2.0)


def test_wide_bed_channels_need_no_close_up(demo):
    layout = demo.layout
    from dataclasses import replace

    wide = replace(layout.channels, width=np.full_like(layout.channels.width, 1e-3))
    assert bed_close_up(replace(layout, channels=wide)) is None


def test_window_is_a_band_on_the_shear_colour_bar(demo):
    layout = demo.layout
    plot = plot_layout(layout, values=np.linspace(0.2, 1.2, len(layout.channels.width)))
    before = len(plot.colorbar.ax.patches)
    mark_window(plot.colorbar, (0.5, 1.0))
    bands = plot.colorbar.ax.patches[before:]
    assert len(bands) == 1
    ys = bands[0].get_path().transformed(bands[0].get_patch_transform()).vertices[:, 1]
    # axhspan: data y on the bar, axes x
    assert min(ys) == pytest.approx(0.5) and max(ys) == pytest.approx(1.0)
    assert any(t.get_text() == "window" for t in plot.colorbar.ax.texts)
