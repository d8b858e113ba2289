"""Fabrication rule checks: each rule broken on purpose, found at the right place."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import shapely

from chipflow.layout import LayoutRules, PortMark, check_rules, draw
from tests.test_layout import demo, tree


def rules_of(findings, rule):
    return [f for f in findings if f.rule == rule]


def test_clean_demo_has_no_findings():
    assert check_rules(draw(demo()), LayoutRules()) == ()


def test_min_width_against_mask_feature():
    layout = draw(demo())
    found = rules_of(check_rules(layout, LayoutRules(min_feature=120e-6)), "min_width")
    # only the 100 um bed channels are below a 120 um feature
    assert len(found) == 1
    f = found[0]
    bed = np.flatnonzero(layout.channels.role == "bed")
    assert f.channels == tuple(bed) and f.value == pytest.approx(100e-6)
    mid = layout.channels.centreline[bed[0]].interpolate(0.5, normalized=True)
    assert (f.x, f.y) == pytest.approx((mid.x, mid.y))


def test_min_gap_between_unconnected_bed_channels():
    layout = draw(demo())  # drawn with 100 um walls: bed pitch 200 um, 100 um wide
    found = rules_of(check_rules(layout, LayoutRules(min_gap=150e-6)), "min_gap")
    ch = layout.channels
    pairs = {f.channels for f in found}
    # bed channels 1 and 2 share no node (siblings 0/1 and 2/3 do): their wall is flagged
    b = np.flatnonzero(ch.role == "bed")
    assert (int(b[1]), int(b[2])) in pairs
    assert (int(b[0]), int(b[1])) not in pairs  # siblings are connected
    f = next(f for f in found if f.channels == (int(b[1]), int(b[2])))
    assert f.value == pytest.approx(100e-6, abs=1e-9)
    y1 = shapely.get_y(ch.centreline[b[1]].interpolate(0.5, normalized=True))
    y2 = shapely.get_y(ch.centreline[b[2]].interpolate(0.5, normalized=True))
    assert f.y == pytest.approx((y1 + y2) / 2, abs=2e-6)


def test_overlap_of_unconnected_channels():
    layout = draw(demo())
    ch = layout.channels
    b = np.flatnonzero(ch.role == "bed")
    pitch = shapely.get_y(ch.centreline[b[2]].interpolate(0.5, normalized=True)) - shapely.get_y(
        ch.centreline[b[1]].interpolate(0.5, normalized=True)
    )
    outline = ch.outline.copy()
    outline[b[2]] = shapely.affinity.translate(outline[b[2]], 0.0, -pitch / 2)
    moved = dataclasses.replace(layout, channels=dataclasses.replace(ch, outline=outline))
    found = rules_of(check_rules(moved, LayoutRules()), "overlap")
    f = next(f for f in found if f.channels == (int(b[1]), int(b[2])))
    assert f.value == 0.0
    overlap = shapely.intersection(outline[b[1]], outline[b[2]])
    assert overlap.area > 0 and overlap.distance(shapely.Point(f.x, f.y)) < 1e-9


def test_outline_margin():
    layout = draw(demo())
    ch = layout.channels
    top = int(np.argmax(shapely.bounds(ch.outline)[:, 3]))
    y_top = shapely.bounds(ch.outline)[top, 3]
    # a chip whose top edge leaves only 1 mm above the topmost channel, with a 2 mm margin
    small = dataclasses.replace(layout, outline=shapely.box(0, 0, 75e-3, y_top + 1e-3))
    found = rules_of(check_rules(small, LayoutRules()), "outline")
    assert found and top in found[0].channels
    assert found[0].value == pytest.approx(1e-3, rel=1e-6)
    assert found[0].y > y_top + 1e-3 - 2e-3  # inside the margin band


def test_port_keepout():
    layout = draw(demo())
    inlet = layout.ports[0]
    wide = PortMark(inlet.name, inlet.x, inlet.y, inlet.diameter, 3e-3)
    moved = dataclasses.replace(layout, ports=(wide, layout.ports[1]))
    found = rules_of(check_rules(moved, LayoutRules()), "port_keepout")
    assert len(found) == 1
    ch = layout.channels
    involved = set(found[0].channels)
    assert 0 not in involved  # the port's own trunk may enter
    assert set(np.flatnonzero((ch.role == "distribution") & (ch.generation == 1))) <= involved
    assert np.hypot(found[0].x - inlet.x, found[0].y - inlet.y) <= 3e-3 + 1e-9


def test_roof_sag_and_tall_wall():
    # trunk 400 um over 25 um deep: width/depth 16 > 10; bed 40 um wide, 100 um deep: 2.5 > 2
    design = tree(2, [400e-6, 200e-6, 40e-6], [25e-6, 25e-6, 100e-6], 3e-3)
    layout = draw(design)
    found = check_rules(layout, LayoutRules())
    sag = rules_of(found, "roof_sag")
    tall = rules_of(found, "tall_wall")
    ch = layout.channels
    trunk_sag = next(f for f in sag if 0 in f.channels)
    assert trunk_sag.value == pytest.approx(16.0) and trunk_sag.limit == 10.0
    assert len(tall) == 1 and tall[0].value == pytest.approx(2.5)
    assert tall[0].channels == tuple(np.flatnonzero(ch.role == "bed"))
