"""Layout: drawn geometry, equal paths, lengths, layers, network extraction, [chip] section."""

from __future__ import annotations

import math

import networkx as nx
import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st

from chipflow.design.model import Level, TreeDesign
from chipflow.errors import LayoutError, SpecError
from chipflow.layout import Chip, LayoutRules, check_rules, draw, extract_network, layer_name
from chipflow.layout.extract import junction_lengths
from chipflow.network import solve
from chipflow.physics.duct import wall_shear_floor
from chipflow.physics.fluid import fluid_preset
from chipflow.spec.chip import read_chip
from chipflow.spec.reader import parse_design_text

FLOW = 1e-10  # 6 uL/min


def tree(n, widths, depths, bed_length, name="demo"):
    """A mirrored tree built by hand (the sizing is not under test here)."""
    levels = [
        Level(g, "distribution", 2**g, widths[g], depths[g], 1e-3, FLOW / 2**g) for g in range(n)
    ]
    levels.append(Level(n, "bed", 2**n, widths[n], depths[n], bed_length, FLOW / 2**n))
    levels += [
        Level(g, "collection", 2**g, widths[g], depths[g], 1e-3, FLOW / 2**g)
        for g in range(n - 1, -1, -1)
    ]
    return TreeDesign(name, fluid_preset("medium"), FLOW, tuple(levels))


def demo():
    """Demo-like: 4 generations, 50 um deep, 400 um trunk, 100 um bed on a slide."""
    return tree(4, [400e-6, 300e-6, 200e-6, 150e-6, 100e-6], [50e-6] * 5, 5e-3)


def turning_from_geometry(line) -> float:
    """Total absolute turning of a centreline [rad], measured from its vertices alone."""
    xy = np.asarray(line.coords)
    seg = np.diff(xy, axis=0)
    heading = np.arctan2(seg[:, 1], seg[:, 0])
    return float(np.abs(np.angle(np.exp(1j * np.diff(heading)))).sum())


def path_totals(layout):
    """Length and bends of every inlet-to-outlet path through each bed channel (networkx)."""
    ch = layout.channels
    turning = np.array([turning_from_geometry(c) for c in ch.centreline])
    g = nx.DiGraph()
    for a, b, length, nb, tu in zip(
        ch.node_a, ch.node_b, ch.length, ch.bends, turning, strict=True
    ):
        g.add_edge(int(a), int(b), length=float(length), bends=int(nb), turning=float(tu))
    names = list(layout.node_names)
    inlet, outlet = names.index("inlet"), names.index("outlet")
    bed = np.flatnonzero(ch.role == "bed")
    out = {}
    for key in ("length", "bends", "turning"):
        up = nx.single_source_dijkstra_path_length(g, inlet, weight=key)
        down = nx.single_source_dijkstra_path_length(g.reverse(), outlet, weight=key)
        out[key] = np.array(
            [
                up[ch.node_a[i]] + g[ch.node_a[i]][ch.node_b[i]][key] + down[ch.node_b[i]]
                for i in bed
            ]
        )
    return out


@settings(max_examples=12, deadline=None)
@given(
    n=st.integers(1, 10),
    bed_width=st.sampled_from([20e-6, 35e-6, 60e-6]),
    growth=st.floats(1.0, 2.0),
    bed_length=st.floats(0.5e-3, 20e-3),
)
def test_every_path_has_the_same_length_and_bends_and_flow(n, bed_width, growth, bed_length):
    # law: a symmetric drawing gives every bed channel the same path, hence the same flow
    widths = [min(bed_width * growth ** (n - g), 1e-3) for g in range(n + 1)]
    design = tree(n, widths, [50e-6] * (n + 1), bed_length)
    rules = LayoutRules(min_gap=20e-6, min_feature=10e-6)
    layout = draw(design, Chip(width=0.4, height=0.12), rules)
    totals = path_totals(layout)
    assert np.ptp(totals["length"]) <= 1e-12 * totals["length"].max()
    assert np.ptp(totals["bends"]) == 0
    # the turning measured from the drawn vertices alone is the same on every path too
    assert np.ptp(totals["turning"]) <= 1e-9 * max(totals["turning"].max(), 1.0)
    solution = solve(
        # the junction corrections are one per level, alike for every path; tests of their
        # values are in test_junctions.py, so the random trees here skip their 2D solves
        extract_network(layout, junctions=False),
        design.fluid,
        pressures={"outlet": 0.0},
        flows={"inlet": FLOW},
    )
    bed = solution.flow[layout.channels.role == "bed"]
    assert np.ptp(bed) <= 1e-9 * bed.mean()
    assert bed.sum() == pytest.approx(FLOW, rel=1e-9)  # conservation
    assert all(layer.geometry.is_valid for layer in layout.layers)


def test_channel_areas_and_lengths():
    layout = draw(demo())
    ch = layout.channels
    # a ribbon of width w along a centreline of length L has area w*L exactly (Pappus for the
    # arcs); the drawn arcs are polygons with sagitta <= grid/4, hence the tolerance
    area = shapely.area(ch.outline)
    np.testing.assert_allclose(area, ch.width * ch.length, rtol=2e-3)
    # extracted lengths are the drawn ones (plus each junction's correction, on the channel
    # on the trunk's side of it); chords of the arcs are a little shorter
    np.testing.assert_array_equal(extract_network(layout, junctions=False).length, ch.length)
    extra = junction_lengths(layout)
    np.testing.assert_array_equal(extract_network(layout).length, ch.length + extra)
    tree_side = (ch.role != "bed") & ~((ch.role == "distribution") & (ch.generation == 4))
    assert np.all(extra[ch.role == "bed"] == 0)
    assert np.all(extra[tree_side] < 0)  # a junction conducts better than two channels meeting
    assert np.all(extra[tree_side] > -ch.width[tree_side])
    chord = shapely.length(ch.centreline)
    assert np.all(chord <= ch.length * (1 + 1e-12))
    np.testing.assert_allclose(chord, ch.length, rtol=1e-3)
    # the trunk is straight: its length is the distance between its ends
    trunk = ch.centreline[0]
    (x0, y0), (x1, y1) = trunk.coords[0], trunk.coords[-1]
    assert ch.length[0] == pytest.approx(math.hypot(x1 - x0, y1 - y0), rel=1e-12)
    # centrelines run node to node (no junction length counted twice or lost)
    start = shapely.get_coordinates(shapely.get_point(ch.centreline, 0))
    end = shapely.get_coordinates(shapely.get_point(ch.centreline, -1))
    np.testing.assert_allclose(start, layout.node_xy[ch.node_a], atol=1e-12)
    np.testing.assert_allclose(end, layout.node_xy[ch.node_b], atol=1e-12)
    for layer in layout.layers:
        assert layer.geometry.is_valid and layer.geometry.geom_type == "Polygon"
        # on the mask grid
        xy = shapely.get_coordinates(layer.geometry) / layout.grid
        np.testing.assert_allclose(xy, np.round(xy), atol=1e-6)


def test_bed_geometry_pitch_and_bend_radius():
    design = demo()
    layout = draw(design)
    ch = layout.channels
    bed = np.flatnonzero(ch.role == "bed")
    mid = shapely.line_interpolate_point(ch.centreline[bed], 0.5, normalized=True)
    y = np.sort(shapely.get_y(mid))
    pitch = np.diff(y)
    assert np.ptp(pitch) < 1e-12
    assert pitch[0] >= 100e-6 + 100e-6 - 1e-12  # width + gap
    # the demo has no errors (done-when condition of the issue)
    assert check_rules(layout, LayoutRules()) == ()
    # the inlet and outlet are inside the chip, on the left and right
    inlet, outlet = layout.ports
    assert 0 < inlet.x < outlet.x < 75e-3


def test_demo_shear_per_generation_matches_sizing():
    # drawn lengths change pressures, not the flow split of a symmetric tree, so the wall
    # shear of every generation equals the sizing's (duct formula at the design flow)
    design = demo()
    layout = draw(design)
    solution = solve(
        extract_network(layout), design.fluid, pressures={"outlet": 0.0}, flows={"inlet": FLOW}
    )
    ch = layout.channels
    for level in design.levels:
        sel = (ch.role == level.role) & (ch.generation == level.generation)
        expected = wall_shear_floor(level.width, level.depth, level.flow, design.fluid.viscosity)
        np.testing.assert_allclose(solution.wall_shear_floor[sel], expected, rtol=0.01)


def test_two_depths_make_two_layers_with_alignment_overlap():
    design = tree(3, [300e-6, 200e-6, 150e-6, 100e-6], [80e-6, 80e-6, 80e-6, 40e-6], 4e-3)
    rules = LayoutRules(alignment_margin=20e-6)
    layout = draw(design, rules=rules)
    assert [layer.name for layer in layout.layers] == ["MASK1_DEPTH_40UM", "MASK2_DEPTH_80UM"]
    shallow, deep = layout.layers
    ch = layout.channels
    assert set(ch.layer[ch.role == "bed"]) == {0}
    assert set(ch.layer[ch.role != "bed"]) == {1}
    # the deep layer covers the first bed channel up to about (disc + margin) from the node
    i = int(np.flatnonzero(ch.role == "bed")[0])
    node = shapely.Point(layout.node_xy[ch.node_a[i]])
    reach = 150e-6 / 2 + 20e-6
    line = ch.centreline[i]
    inside = line.interpolate(reach - 5e-6)
    outside = line.interpolate(reach + 5e-6)
    assert node.distance(inside) < reach and deep.geometry.contains(inside)
    assert not deep.geometry.contains(outside)
    assert shallow.geometry.contains(outside)
    assert check_rules(layout, rules) == ()
    assert layer_name(2, 12.5e-6) == "MASK2_DEPTH_12P5UM"


def test_long_bed_folds_into_equal_serpentines():
    design = tree(3, [300e-6, 200e-6, 150e-6, 100e-6], [50e-6] * 4, 150e-3)
    layout = draw(design)
    ch = layout.channels
    bed = ch.role == "bed"
    # 150 mm of bed channel cannot run straight on a 75 mm slide
    assert np.all(ch.bends[bed] > 2)
    # every bed channel alike; each run is lengthened by less than one grid step so that the
    # bed's x extent is a whole number of steps (the collecting side then mirrors on the grid)
    runs = ch.bends[bed][0] - 1
    assert np.ptp(ch.length[bed]) <= 1e-12
    assert 150e-3 <= ch.length[bed][0] < 150e-3 + runs * 1e-6
    totals = path_totals(layout)
    assert np.ptp(totals["length"]) <= 1e-12 * totals["length"].max()
    assert all(layer.geometry.is_valid for layer in layout.layers)
    assert check_rules(layout, LayoutRules()) == ()


def test_design_that_does_not_fit_says_what_chip_it_needs():
    design = tree(8, [1e-3] + [200e-6] * 8, [50e-6] * 9, 5e-3)
    with pytest.raises(LayoutError, match=r"needs at least [\d.]+ x [\d.]+ mm"):
        draw(design)


def test_short_bed_is_drawn_at_its_minimum_and_says_so():
    layout = draw(tree(2, [300e-6, 200e-6, 100e-6], [50e-6] * 3, 10e-6))
    assert layout.warnings and "instead of the designed 10 um" in layout.warnings[0]


def test_chip_section():
    chip, keep = read_chip(
        parse_design_text('[chip]\nwidth = "50 mm"\nmargin = "1 mm"\nport_keepout = "0.3 mm"')
    )
    assert (chip.width, chip.height, chip.margin, keep) == (0.05, 0.025, 0.001, pytest.approx(3e-4))
    assert read_chip(parse_design_text("")) == (Chip(), None)
    with pytest.raises(SpecError, match="punch: 0.8 mm is not a standard biopsy punch"):
        read_chip(parse_design_text('[chip]\npunch = "0.8 mm"'))
    with pytest.raises(SpecError, match="did you mean 'margin'"):
        read_chip(parse_design_text('[chip]\nmargn = "1 mm"'))
    with pytest.raises(SpecError, match="missing unit"):
        read_chip(parse_design_text("[chip]\nwidth = 50"))


def test_rules_from_fabrication_duck_typed():
    from types import SimpleNamespace

    fab = SimpleNamespace(
        grid=0.5e-6,
        min_feature=20e-6,
        min_gap=60e-6,
        bend_radius=3.0,
        alignment_margin=5e-6,
        max_width_to_depth=8.0,
        max_depth_to_width=1.5,
    )
    rules = LayoutRules.from_fabrication(fab, port_keepout=1e-3)
    assert (rules.grid, rules.min_gap, rules.bend_radius, rules.port_keepout) == (
        0.5e-6,
        60e-6,
        3.0,
        1e-3,
    )


@pytest.mark.parametrize("depths", [[50e-6] * 5, [80e-6, 80e-6, 80e-6, 40e-6, 40e-6]])
def test_mask_layers_match_a_plain_union_of_the_drawn_pieces(depths):
    # the layers are merged junction by junction and stitched along shared edges; the
    # reference here is one overlay of all channel outlines of the layer by GEOS (shapely)
    design = tree(4, [400e-6, 300e-6, 200e-6, 150e-6, 100e-6], depths, 5e-3)
    layout = draw(design)
    ch = layout.channels
    for li, layer in enumerate(layout.layers):
        geometry = layer.geometry
        assert geometry.is_valid
        reference = shapely.union_all(ch.outline[ch.layer == li])
        # the layer adds only port pads, junction discs and alignment overlaps
        missing = shapely.difference(reference, geometry).area
        # grid snapping moves each vertex by at most half a grid step: a band along the edges
        assert missing <= 0.5 * layout.grid * reference.length
        # the walls between bed channels are holes of the bed's layer: one wall between each
        # two neighbouring bed channels of the same shallow subtree (counted by hand: one
        # subtree of 16 bed channels, or four subtrees of 4 below the 80 um generations)
        if li == ch.layer[ch.role == "bed"][0]:
            holes = sum(len(p.interiors) for p in getattr(geometry, "geoms", [geometry]))
            assert holes == (16 - 1 if len(layout.layers) == 1 else 4 * (4 - 1))
    # the same design draws the same vertices in the same order
    again = draw(design)
    for a, b in zip(layout.layers, again.layers, strict=True):
        assert shapely.to_wkb(a.geometry) == shapely.to_wkb(b.geometry)
