"""Hand-built layouts for the exporter tests (reusable: ``from test_export_helpers import ...``).

``comb_layout`` draws a perfusion bed the way the layout step does: a comb of parallel bed
channels joined by two manifolds, so the merged channel outline of the bed level has one hole
per wall between neighbouring bed channels; a deeper second level carries the feeders from the
ports (with a rounded bend, so that not every edge is axis-parallel). Everything is snapped to
the mask grid, as ``chipflow.layout`` promises.
"""

from __future__ import annotations

import numpy as np
import shapely

from chipflow.layout.draw import layer_name
from chipflow.layout.model import DrawnChannels, Layout, MaskLayer, PortMark

UM = 1e-6


def _snap(geom: shapely.Geometry, grid: float) -> shapely.Geometry:
    snapped = shapely.set_precision(shapely.transform(geom, lambda c: c / grid), 1.0)
    return shapely.transform(snapped, lambda c: c * grid)


def comb_layout(
    n_bed: int = 8,
    bed_width: float = 100 * UM,
    wall: float = 80 * UM,
    bed_length: float = 4000 * UM,
    grid: float = 0.1 * UM,
    name: str = "comb test chip",
) -> Layout:
    """A two-level chip: ``n_bed`` bed channels between manifolds, feeders to two ports.

    Parameters
    ----------
    n_bed : int
        Number of bed channels (``n_bed - 1`` holes in the bed level).
    bed_width, wall, bed_length : float
        Bed channel width, wall between bed channels and bed length [m].
    grid : float
        Mask grid [m].
    """
    chip_w, chip_h = 20000 * UM, 10000 * UM
    pitch = bed_width + wall
    bed_h = n_bed * bed_width + (n_bed - 1) * wall
    x0 = (chip_w - bed_length) / 2
    y0 = (chip_h - bed_h) / 2
    manifold = 300 * UM
    ys = y0 + bed_width / 2 + pitch * np.arange(n_bed)
    bed_lines = shapely.linestrings(
        np.stack(
            [
                np.column_stack([np.full(n_bed, x0), ys]),
                np.column_stack([np.full(n_bed, x0 + bed_length), ys]),
            ],
            axis=1,
        )
    )
    bed = shapely.union_all(
        [
            *shapely.buffer(bed_lines, bed_width / 2, cap_style="flat"),
            shapely.box(x0 - manifold, y0, x0, y0 + bed_h),
            shapely.box(x0 + bed_length, y0, x0 + bed_length + manifold, y0 + bed_h),
        ]
    )
    inlet = PortMark("inlet", 2000 * UM, 2500 * UM, 1500 * UM, 1200 * UM)
    outlet = PortMark("outlet", chip_w - 2000 * UM, chip_h / 2, 1500 * UM, 1200 * UM)
    feed_in = shapely.LineString(
        [(inlet.x, inlet.y), (inlet.x + 1500 * UM, inlet.y), (x0 - manifold / 2, chip_h / 2)]
    )
    feed_out = shapely.LineString(
        [(x0 + bed_length + manifold / 2, chip_h / 2), (outlet.x, outlet.y)]
    )
    feeder_width = 200 * UM
    feeders = shapely.union_all(
        shapely.buffer(
            np.array([feed_in, feed_out]), feeder_width / 2, cap_style="flat", join_style="round"
        )
    )
    layers = (
        MaskLayer(layer_name(1, 50 * UM), 50 * UM, _snap(bed, grid)),
        MaskLayer(layer_name(2, 120 * UM), 120 * UM, _snap(feeders, grid)),
    )
    centrelines = np.array([feed_in, *bed_lines, feed_out], dtype=object)
    channels = DrawnChannels(
        centreline=centrelines,
        length=shapely.length(centrelines),
        width=np.r_[feeder_width, np.full(n_bed, bed_width), feeder_width],
        depth=np.r_[120 * UM, np.full(n_bed, 50 * UM), 120 * UM],
        generation=np.r_[0, np.ones(n_bed, int), 0],
        role=np.array(["distribution", *["bed"] * n_bed, "collection"]),
        index=np.r_[0, np.arange(n_bed), 0],
        node_a=np.r_[0, np.full(n_bed, 1), 2],
        node_b=np.r_[1, np.full(n_bed, 2), 3],
        layer=np.r_[1, np.zeros(n_bed, int), 1],
    )
    node_xy = np.array(
        [
            [inlet.x, inlet.y],
            [x0 - manifold / 2, chip_h / 2],
            [x0 + bed_length + manifold / 2, chip_h / 2],
            [outlet.x, outlet.y],
        ]
    )
    return Layout(
        name=name,
        outline=shapely.box(0, 0, chip_w, chip_h),
        margin=1000 * UM,
        grid=grid,
        layers=layers,
        ports=(inlet, outlet),
        channels=channels,
        node_xy=node_xy,
        node_names=("inlet", "split", "merge", "outlet"),
    )


def test_comb_bed_level_has_one_hole_per_wall():
    # the helper must really produce the geometry the exporters are tested on
    layout = comb_layout(n_bed=8)
    bed = layout.layers[0].geometry
    assert bed.is_valid and bed.geom_type == "Polygon"
    assert len(bed.interiors) == 7
    assert layout.layers[1].geometry.is_valid
    # area identity: 8 channels + 2 manifolds (comb geometry, computed by hand)
    expected = 8 * 100e-6 * 4000e-6 + 2 * 300e-6 * (8 * 100e-6 + 7 * 80e-6)
    assert abs(bed.area - expected) < 1e-12


def test_comb_coordinates_are_on_the_grid():
    layout = comb_layout(grid=0.1 * UM)
    xy = shapely.get_coordinates(layout.layers[1].geometry) / layout.grid
    assert np.allclose(xy, np.rint(xy), atol=1e-6)
