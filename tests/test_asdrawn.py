"""What is drawn is what is solved: widths measured on the written DXF, the bed wall, the fold."""

from __future__ import annotations

import tempfile
from pathlib import Path

import ezdxf
import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from chipflow.design.model import Level, TreeDesign
from chipflow.errors import SpecError
from chipflow.export.dxf import write_dxf
from chipflow.layout import Chip, LayoutRules, check_rules, draw, extract_network
from chipflow.layout.widths import straight_cuts
from chipflow.physics.fluid import fluid_preset
from chipflow.spec.reader import parse_design_text
from chipflow.spec.tree import load_tree_spec

FLOW = 1e-10


def tree(widths, depth, bed_length, *, gap=None, max_straight=None):
    """A mirrored tree built by hand (the sizing is not under test here)."""
    n = len(widths) - 1
    levels = [Level(g, "distribution", 2**g, widths[g], depth, 1e-3, FLOW / 2**g) for g in range(n)]
    levels.append(Level(n, "bed", 2**n, widths[n], depth, bed_length, FLOW / 2**n))
    levels += [
        Level(g, "collection", 2**g, widths[g], depth, 1e-3, FLOW / 2**g)
        for g in range(n - 1, -1, -1)
    ]
    return TreeDesign(
        "t",
        fluid_preset("medium"),
        FLOW,
        tuple(levels),
        max_straight_length=max_straight,
        bed_gap=gap,
    )


def dxf_layers(path: Path) -> dict[str, shapely.Geometry]:
    """Every mask layer of a written DXF as one shapely geometry [um], read with ezdxf."""
    doc = ezdxf.readfile(path)
    rings: dict[str, list] = {}
    for e in doc.modelspace().query("LWPOLYLINE"):
        if e.dxf.layer.startswith("MASK"):
            pts = [(p[0], p[1]) for p in e.get_points("xy")]
            rings.setdefault(e.dxf.layer, []).append(shapely.Polygon(pts))
    return {name: shapely.union_all(polys) for name, polys in rings.items()}


grid_and_widths = st.sampled_from([0.5, 1.0, 5.0]).flatmap(
    lambda grid: st.tuples(
        st.just(grid),
        st.lists(st.integers(int(30 / grid), int(240 / grid)), min_size=2, max_size=4),
    )
)


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(grid_and_widths, st.floats(1e-3, 12e-3), st.sampled_from([None, 3e-3]))
def test_every_channel_width_on_the_written_dxf_is_the_solved_width(gw, bed_length, limit):
    grid_um, steps = gw
    # widths of odd and even numbers of grid steps, widest at the trunk
    steps = sorted(steps, reverse=True)
    widths = [s * grid_um * 1e-6 for s in steps]
    design = tree(widths, 50e-6, bed_length, max_straight=limit)
    rules = LayoutRules(grid=grid_um * 1e-6, min_feature=20e-6)
    layout = draw(design, Chip(width=120e-3, height=60e-3), rules)
    net = extract_network(layout, junctions=False)  # the widths solved
    with tempfile.TemporaryDirectory() as tmp:
        layers = dxf_layers(write_dxf(layout, Path(tmp) / "t.dxf"))
    ch = layout.channels
    # cross-cut perpendicular to the centreline in the middle of its longest straight run
    # along x (the walls of bends are chords of arcs on the grid, not lines of fixed width)
    mid, run = straight_cuts(ch.centreline)
    assert np.all(run > 0)
    reach = ch.width / 2 + 0.9 * rules.min_gap  # neighbours keep at least min_gap away
    x, y = mid[:, 0] * 1e6, mid[:, 1] * 1e6
    cuts = shapely.linestrings(
        np.stack(
            (np.column_stack((x, y - reach * 1e6)), np.column_stack((x, y + reach * 1e6))),
            axis=1,
        )
    )
    names = [layout.layers[i].name for i in ch.layer]
    measured = np.array(
        [
            next(
                p.length
                for p in shapely.get_parts(shapely.intersection(cut, layers[name]))
                if p.distance(shapely.Point(xi, yi)) < 1e-9
            )
            for cut, name, xi, yi in zip(cuts, names, x, y, strict=True)
        ]
    )
    # 1 nm = 1e-3 um
    np.testing.assert_allclose(measured, net.width * 1e6, rtol=0, atol=1e-3)
    np.testing.assert_allclose(ch.mask_width, net.width, rtol=0, atol=1e-12)


def bed_walls(layout) -> np.ndarray:
    """PDMS wall between neighbouring bed channels [m], across their straight runs."""
    ch = layout.channels
    bed = np.flatnonzero(ch.role == "bed")
    y = np.sort(straight_cuts(ch.centreline[bed])[0][:, 1])
    return np.diff(y) - ch.width[bed][0]


@pytest.mark.parametrize("gap", [100e-6, 120e-6, 180e-6])
def test_bed_gap_sets_the_wall_between_bed_channels(gap):
    design = tree([400e-6, 201e-6, 95e-6, 35e-6], 50e-6, 3e-3, gap=gap)
    layout = draw(design)
    walls = bed_walls(layout)
    # at least the gap; the pitch is rounded up to two grid steps and the half-grid steps that
    # keep odd widths on the grid (3 generations change parity here) may add up to 4 um
    assert walls.min() >= gap - 1e-12
    assert walls.max() <= gap + 2e-6 + 2 * 3 * 0.5e-6 + 1e-12
    assert check_rules(layout, LayoutRules()) == ()


def test_bed_gap_below_min_gap_is_refused():
    text = """
[tree]
flow = "10 uL/min"
generations = 2
rule = "equal-shear"
[bed]
length = "2 mm"
gap = "80 um"
[targets]
shear = "0.8 Pa"
[fabrication]
min_gap = "100 um"
"""
    with pytest.raises(SpecError, match="gap.*thinner than .*min_gap"):
        load_tree_spec(parse_design_text(text, "g.toml"))


def test_max_straight_length_folds_the_bed_into_equal_runs():
    straight = draw(tree([300e-6, 150e-6, 80e-6], 50e-6, 20e-3))
    folded = draw(tree([300e-6, 150e-6, 80e-6], 50e-6, 20e-3, max_straight=4e-3))
    bed_s, bed_f = straight.channels.role == "bed", folded.channels.role == "bed"
    assert np.all(straight.channels.bends[bed_s] == 2)  # the bed fits straight on a slide
    runs = folded.channels.bends[bed_f] - 1
    assert np.all(runs == runs[0]) and runs[0] >= 5  # 20 mm in runs of <= 4 mm
    # every straight run of every bed channel within the limit, every channel alike
    xy, idx = shapely.get_coordinates(folded.channels.centreline[bed_f], return_index=True)
    seg = np.hypot(*np.diff(xy, axis=0).T)[idx[1:] == idx[:-1]]
    assert seg.max() <= 4e-3 + 1e-12
    assert np.ptp(folded.channels.length[bed_f]) <= 1e-12
    assert straight.warnings == () and folded.warnings == ()


def test_a_fold_forced_by_the_chip_width_is_warned():
    layout = draw(tree([300e-6, 150e-6, 80e-6], 50e-6, 120e-3))
    assert any("to fit the chip's width" in w for w in layout.warnings)


def test_demo_reports_the_bed_spread_of_its_drawn_widths():
    import csv
    import dataclasses
    import io

    from chipflow.build import build_design
    from chipflow.export.bundle import channels_csv
    from chipflow.network import solve
    from chipflow.network.supply import boundary_conditions, with_tubing
    from chipflow.spec.supply import read_supply

    build = build_design(Path(__file__).parents[1] / "designs" / "demo_endothelial_bed.toml")
    rows = list(csv.DictReader(io.StringIO(channels_csv(build))))
    chip = [r for r in rows if r["role"] != "tubing"]
    mask = np.array([float(r["mask_width [m]"]) for r in chip])
    np.testing.assert_array_equal(mask, [float(r["width [m]"]) for r in chip])
    np.testing.assert_array_equal(mask, build.results["fabrication"]["mask_width"])
    # re-solve with the widths measured on the mask: the bed spread is the reported one
    supply = read_supply(build.source.top, build.design.total_flow)
    drawn = dataclasses.replace(extract_network(build.layout), width=mask)
    net, feed, drain = with_tubing(
        drawn, supply.tubing_diameter, supply.inlet_tubing, supply.outlet_tubing
    )
    pressures, flows = boundary_conditions({feed: supply.inlet, drain: supply.outlet}, build.fluid)
    again = solve(net, build.fluid, pressures, flows)
    bed = net.role == "bed"
    reported = next(c for c in build.results["checks"] if c["name"] == "bed flow uniformity")
    cv_again = np.std(again.flow[bed]) / np.mean(again.flow[bed])
    assert abs(reported["value"] - cv_again) < 1e-12
    assert cv_again < 1e-9  # the drawing is symmetric and exact: every bed channel alike


def test_a_bed_too_short_to_fold_is_drawn_straight_with_a_warning():
    # 3.8 mm of 120 um bed channel: a serpentine's two half-turns and leads alone need more
    layout = draw(tree([240e-6, 120e-6], 50e-6, 3.8e-3, max_straight=3e-3))
    bed = layout.channels.role == "bed"
    assert np.all(layout.channels.bends[bed] == 2)
    assert any("too short to fold" in w for w in layout.warnings)


@pytest.mark.parametrize(
    "widths,depth",
    [
        ([301e-6, 181e-6, 75e-6], 50e-6),  # odd widths: half-grid axes; a Y into the bed
        ([400e-6, 240e-6, 150e-6, 90e-6], 60e-6),
    ],
)
def test_chip_resistance_matches_a_2d_solve_of_the_drawn_polygon(widths, depth):
    # the network of the drawing (junctions counted once) against the 2D depth-averaged solve
    # of the very mask polygons, ports at the rims of the punched holes (the done-when check of
    # the drawing: within 1.5 %; without the junction corrections it is several % high)
    from chipflow.field.chip import solve_layout
    from chipflow.network import solve

    layout = draw(tree(widths, depth, 3e-3))
    field = solve_layout(layout, {"inlet": 1.0, "outlet": 0.0}, 1e-3)
    r_2d = 1.0 / field.port_flows["inlet"]
    fluid = fluid_preset("water")
    fluid = type(fluid)("w", 1e-3, 1000.0, None)
    ratios = []
    for junctions in (True, False):
        net = extract_network(layout, junctions=junctions)
        sol = solve(net, fluid, {"inlet": 1.0, "outlet": 0.0}, None)
        ratios.append((1.0 / sol.port_flow["inlet"]) / r_2d - 1)
    assert abs(ratios[0]) < 0.015
    assert ratios[1] > 0.02
