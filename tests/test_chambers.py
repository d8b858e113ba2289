"""Culture chambers: their keys, their drawing, their 2D solve against independent solutions,
their rules and their results in a build."""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
import shapely
from chamber_resolve import independent_conductance_matrix

from chipflow.build import DesignSource, build_design
from chipflow.errors import SpecError
from chipflow.layout.chamber import (
    ChamberKey,
    ChamberPort,
    chamber_polygon,
    pillar_centres,
    solve_chamber,
)
from chipflow.layout.check import chamber_findings
from chipflow.layout.rules import LayoutRules
from chipflow.physics.duct import resistance

ROOT = Path(__file__).resolve().parents[1]
PAIRED = ROOT / "designs" / "paired_culture_chambers.toml"
GRID = 1e-6


def _build(text: str, field: bool = False):
    source = DesignSource.from_dict(tomllib.loads(text), "chambers.toml")
    return build_design(source, field=field)


def _key(width, length, depth, port_width, pillars=None, taper=0.0) -> ChamberKey:
    ports = (
        ChamberPort(0, width / 2, port_width, depth),
        ChamberPort(1, width / 2, port_width, depth),
    )
    return ChamberKey(width, length, depth, 0.0, taper, pillars, ports, GRID)


# -- the 2D solve ----------------------------------------------------------------------------
def test_plain_chamber_is_the_exact_rectangular_duct():
    """A chamber fed by channels as wide as itself is a straight duct: its resistance between
    the mouths equals the exact series for a rectangular duct (H. Bruus, Theoretical
    Microfluidics, 2008, eq. 4.46, chipflow.physics.duct) within 0.5 %, at width/depth 10 and
    40 (the pillars removed from a pillar chamber of these proportions)."""
    for width, depth in ((1e-3, 1e-4), (2e-3, 5e-5)):
        key = _key(width, 4e-3, depth, width)
        sol = solve_chamber(key)
        exact = float(resistance(width, depth, 4e-3, 1.0))
        assert sol.resistance == pytest.approx(exact, rel=5e-3)
        # conservation: no flow is lost in the 2D solve; reciprocity: Y is symmetric
        assert np.abs(sol.conductance.sum(axis=0)).max() < 1e-6 * np.abs(sol.conductance).max()
        assert sol.fit_error == 0.0


def _independent_conductance(key: ChamberKey, size: float) -> float:
    """The stub-end to stub-end conductance of the chamber's 2D domain [m^3/(Pa s) at 1 Pa s],
    solved independently of chipflow.field (:mod:`chamber_resolve`: the same depth-averaged
    Stokes-Brinkman equations, Taylor-Hood P2-P1 on a triangle-library mesh of its own with
    triangles of about ``size`` [m], assembled by scikit-fem)."""
    return -float(independent_conductance_matrix(key, size, driven=[0])[1, 0])


@pytest.mark.parametrize("pattern", ["hex", pytest.param("square", marks=pytest.mark.slow)])
def test_pillar_chamber_against_an_independent_2d_solve(pattern):
    """A chamber with a pillar array: the chipflow solve against the independent 2D solve
    written above, on the same polygon, within 2 % (measured: 0.04 % at 25 um triangles,
    0.002 % at 16 um for the hex array; the 3,808 triangles of chipflow's own mesh)."""
    key = _key(1.2e-3, 2.0e-3, 1e-4, 3e-4, pillars=(1.5e-4, 4e-4, pattern))
    assert len(pillar_centres(key)) >= 6
    ours = -float(solve_chamber(key).conductance[1, 0])
    theirs = _independent_conductance(key, 20e-6)
    assert ours == pytest.approx(theirs, rel=0.02)
    # the pillars block flow: the chamber without them conducts more
    plain = -float(solve_chamber(_key(1.2e-3, 2.0e-3, 1e-4, 3e-4)).conductance[1, 0])
    assert plain > ours * 1.05


# -- the keys ---------------------------------------------------------------------------------
def _paired(old: str = "", new: str = "") -> str:
    text = PAIRED.read_text()
    if old:
        assert old in text
        text = text.replace(old, new, 1)
    return text


PILLARS = 'pillars = { diameter = "150 um", pitch = "400 um", pattern = "hex" }'


@pytest.mark.parametrize(
    ("old", "new", "words"),
    [
        (PILLARS, 'pillars = { diameter = "400 um", pitch = "400 um" }', "as large as their pitch"),
        (PILLARS, 'pillars = { diameter = "150 um", pitch = "400 um", pattern = "ring" }', "ring"),
        ('taper = "1.5 mm"', 'taper = "6 mm"', "two tapers"),
        ('corner_radius = "200 um"', 'corner_radius = "600 um"', "more than half"),
        ('to = "upper out"\nwidth = "1 mm"', 'to = "lower in"\nwidth = "1 mm"', "already an end"),
        (
            'length = "12 mm"                 # checked',
            'length = "14 mm"  # checked',
            "12 mm apart",
        ),
    ],
)
def test_bad_chamber_keys_say_where(old, new, words):
    with pytest.raises(SpecError, match=words) as info:
        _build(_paired(old, new))
    assert "chambers" in str(info.value)


def test_a_chamber_node_joins_one_channel():
    """A chamber's node is fed by exactly one channel: a second one is refused, naming it."""
    extra = '\n[[channels]]\nname = "bypass"\nfrom = "split"\nto = "upper in"\nwidth = "300 um"\n'
    extra += 'depth = "50 um"\nvia = [["18 mm", "12.5 mm"], ["18 mm", "16.5 mm"]]\n'
    text = _paired("[[ports]]", extra + "\n[[ports]]")
    with pytest.raises(SpecError, match="joins 2 channels"):
        _build(text)


# -- drawn and built ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def paired():
    return _build(PAIRED.read_text())


def test_paired_chambers_drawn_and_built(paired):
    layout, results = paired.layout, paired.results
    open_c, pillared = layout.chambers
    # drawn as wide as given on the merged 100 um mask, the pillars as holes in it
    assert abs(open_c.mask_width - 1e-3) < 1e-9 and abs(pillared.mask_width - 2.5e-3) < 1e-9
    deep = layout.layers[1].geometry
    polys = list(getattr(deep, "geoms", [deep]))
    holes = sum(len(p.interiors) for p in polys)
    rows = {c["name"]: c for c in results["chambers"]}
    assert holes == rows["pillar chamber"]["pillars"]["count"] == len(pillar_centres(pillared.key))
    # the network's link of each chamber is the chamber's 2D resistance, mouth to mouth
    net = paired.solution.network
    for c in layout.chambers:
        i = net.channel_names().index(c.name)
        mu = paired.fluid.viscosity
        link = float(resistance(net.width[i], net.depth[i], net.length[i], mu))
        assert link == pytest.approx(solve_chamber(c.key).resistance * mu, rel=1e-6)
        assert rows[c.name]["resistance"] == pytest.approx(link, rel=1e-6)
        assert rows[c.name]["flow_residual"] < 1e-5
    # the floor shear percentiles are ordered and inside the hepatocyte window here
    for row in rows.values():
        s = row["floor_shear"]
        assert 0 < s["p05"] <= s["p50"] <= s["p95"]
        assert row["inside_window"] > 0.9
    checks = {c["name"]: c for c in results["checks"]}
    assert checks["chamber floor shear: pillar chamber"]["status"] == "pass"
    # the pillars hold the roof: its unsupported span is far below the chamber's width
    assert rows["pillar chamber"]["unsupported_span"] < 0.3 * 2.5e-3
    assert results["fabrication"]["findings"] == []


def test_a_wide_chamber_without_pillars_fails_roof_sag_where_it_is():
    """A 2 mm wide, 100 um deep chamber (width/depth 20 against the limit 10) fails the roof
    sag rule, placed inside the chamber; with pillars it passes."""
    text = _paired(PILLARS + "\n", "").replace('width = "2.5 mm"', 'width = "2 mm"')
    build = _build(text)
    found = [f for f in build.results["fabrication"]["findings"] if f["rule"] == "roof_sag"]
    assert len(found) == 1 and build.status == "fail"
    assert 22e-3 < found[0]["x"] < 34e-3 and 7.5e-3 < found[0]["y"] < 9.5e-3
    assert "pillar chamber" in found[0]["message"]
    assert found[0]["value"] == pytest.approx(20.0, rel=1e-3)


def test_chamber_rules_without_a_drawing():
    key = _key(2e-3, 8e-3, 1e-4, 2e-4)
    (f,) = chamber_findings("A", key, LayoutRules())
    assert f.rule == "roof_sag" and math.isnan(f.x)
    thin = _key(2e-3, 8e-3, 1e-4, 2e-4, pillars=(2e-5, 4e-5, "square"))
    rules = {f.rule for f in chamber_findings("A", thin, LayoutRules())}
    assert {"pillar_diameter", "pillar_gap", "tall_wall"} <= rules


def test_pillars_keep_a_gap_from_the_walls():
    key = _key(1.2e-3, 3e-3, 1e-4, 3e-4, pillars=(1.5e-4, 4e-4, "hex"), taper=5e-4)
    centres = pillar_centres(key)
    outline = chamber_polygon(key, pillars=False)
    gap = shapely.distance(outline.exterior, shapely.points(centres)) - 0.75e-4
    assert gap.min() >= 2.5e-4 - 2 * GRID
    # symmetric about the chamber's middle lines
    mirrored = np.column_stack((3e-3 - centres[:, 0], centres[:, 1]))
    assert np.allclose(np.sort(mirrored, axis=0), np.sort(centres, axis=0), atol=GRID)


@pytest.mark.slow
def test_paired_chip_field_agrees_with_the_network():
    """The whole chip's 2D field (channels, chambers and pillars meshed together) against the
    network with the chambers' links: within 1 % (measured +0.08 %)."""
    from chipflow.spec.bundled import resolve_design

    field = build_design(resolve_design("paired_culture_chambers"), field=True).results["field"]
    assert field["resistance"] == pytest.approx(field["network_resistance"], rel=0.01)


def test_the_console_and_the_report_show_the_chambers(paired):
    from chipflow.report.console import console_summary
    from chipflow.report.html import report_html

    text = console_summary(paired.results)
    line = next(x for x in text.splitlines() if x.startswith("pillar chamber") and "hex" in x)
    s = paired.results["chambers"][1]["floor_shear"]
    assert f"{s['p50']:.4g}" in line and line.endswith("ok")
    html = report_html(paired.results)
    assert "<h2>Chambers</h2>" in html and "150 hex, 150 um on 400 um" in html


@pytest.mark.slow
def test_vary_takes_the_drawn_paired_chambers(tmp_path):
    """vary perturbs drawn chambers (its model is checked in tests/test_chamber_bed.py): the
    two chambers of the paired design, each with its percentiles (about 20 s: the two
    chambers' re-solves)."""
    import json

    from click.testing import CliRunner

    from chipflow.cli import main

    args = ["vary", str(PAIRED), "--samples", "20", "-o", str(tmp_path / "v")]
    out = CliRunner().invoke(main, args)
    assert out.exit_code == 0, out.output
    data = json.loads((tmp_path / "v" / "results.json").read_text())
    assert [c["name"] for c in data["chambers"]] == ["open chamber", "pillar chamber"]


UNDRAWN = """
name = "one chamber"
[[channels]]
name = "feed"
from = "a"
to = "b"
width = "300 um"
depth = "100 um"
length = "5 mm"
[[chambers]]
name = "cells"
from = "b"
to = "c"
width = "1.2 mm"
length = "3 mm"
depth = "100 um"
[[channels]]
name = "drain"
from = "c"
to = "d"
width = "300 um"
depth = "100 um"
length = "5 mm"
[[ports]]
node = "a"
flow = "2 uL/min"
[[ports]]
node = "d"
pressure = "0 Pa"
"""


def test_vary_refuses_undrawn_chambers_and_sweep_takes_their_keys(tmp_path):
    """vary refuses the chambers of a network without positions in one line, exit 2 (it
    perturbs drawn chambers); a sweep builds every point, so it takes a chamber's keys, and
    its margin spans each chamber's p05 to p95."""
    from click.testing import CliRunner

    from chipflow.cli import main

    runner = CliRunner()
    undrawn = tmp_path / "undrawn.toml"
    undrawn.write_text(UNDRAWN)
    out = runner.invoke(main, ["vary", str(undrawn), "-o", str(tmp_path / "u")])
    assert out.exit_code == 2 and "does not yet vary the chambers of a network" in out.output
    assert "Traceback" not in out.output and not (tmp_path / "u").exists()
    out = runner.invoke(
        main,
        ["sweep", str(PAIRED), "--vary", "chambers.pillar chamber.depth=80um,100um",
         "--workers", "1", "-o", str(tmp_path / "s")],
    )  # fmt: skip
    assert out.exit_code == 0, out.output
    rows = (tmp_path / "s" / "sweep.csv").read_text().splitlines()
    assert len(rows) == 3
    shallow, deep = (r.split(",") for r in rows[1:])
    # a shallower chamber: more shear on its floor (the lowest floor shear of the chip rises)
    assert float(shallow[4]) > float(deep[4])


def _upright(down: bool, odd: bool = False) -> dict:
    """A chamber along y between two punched ports (upwards, or downwards)."""
    ys = [5.0, 8.0, 14.0, 17.0][:: -1 if down else 1]
    width = "301 um" if odd else "300 um"
    nodes = [{"name": n, "at": ["10 mm", f"{y} mm"]}
             for n, y in zip(("in", "a", "b", "out"), ys, strict=True)]  # fmt: skip
    return {
        "name": "upright",
        "fluid": {"kind": "medium"},
        "nodes": nodes,
        "channels": [
            {"name": "feed", "from": "in", "to": "a", "width": width, "depth": "100 um"},
            {"name": "drain", "from": "b", "to": "out", "width": width, "depth": "100 um"},
        ],
        "chambers": [{**CHAMBER_KEYS, "pillars": {"diameter": "150 um", "pitch": "400 um"}}],
        "ports": [{"node": "in", "flow": "1 uL/min"}, {"node": "out", "pressure": "0 Pa"}],
        "culture": {"cell_type": "hepatocyte"},
        "chip": {"width": "20 mm", "height": "22 mm", "margin": "2 mm", "punch": "1 mm"},
    }


CHAMBER_KEYS = {"name": "c", "from": "a", "to": "b", "width": "1.6 mm", "length": "6 mm",
                "depth": "100 um", "taper": "1 mm"}  # fmt: skip


@pytest.mark.parametrize(("down", "odd"), [(False, False), (True, False), (False, True)])
def test_a_chamber_along_y_is_the_same_solve_turned(down, odd):
    """Drawn upwards or downwards (a quarter turn either way), a chamber is its key turned:
    the same 2D solve as along x, its mask as wide as given; an odd-width feed (its centreline
    half a grid step off) meets it all the same."""
    build = build_design(DesignSource.from_dict(_upright(down, odd), "u.toml"), field=False)
    (c,) = build.layout.chambers
    assert c.turns == (3 if down else 1)
    assert abs(c.mask_width - 1.6e-3) < 1e-9
    row = build.results["chambers"][0]
    assert row["resistance"] == pytest.approx(
        solve_chamber(c.key).resistance * build.fluid.viscosity, rel=1e-9
    )
    assert row["flow"] == pytest.approx(1e-9 / 60, rel=1e-6)
    assert row["flow_residual"] < 1e-5 and build.results["fabrication"]["findings"] == []
    # the pillars drawn in the chip frame are the key's, turned and moved
    deep = build.layout.layers[0].geometry
    holes = sum(len(p.interiors) for p in getattr(deep, "geoms", [deep]))
    assert holes == len(pillar_centres(c.key)) > 0
    # one connected mask: no sliver of wall between the chamber and its channels
    assert len(getattr(deep, "geoms", [deep])) == 1


def test_a_chamber_off_axis_or_fed_from_the_side_is_refused():
    from chipflow.errors import LayoutError

    data = _upright(False)
    data["nodes"][2]["at"] = ["11 mm", "14 mm"]
    data["nodes"][3]["at"] = ["11 mm", "17 mm"]
    with pytest.raises((LayoutError, SpecError), match="lies along x or along y"):
        build_design(DesignSource.from_dict(data, "u.toml"), field=False)
    data = _upright(False)
    data["nodes"][0]["at"] = ["5 mm", "8 mm"]  # the feed arrives along x
    with pytest.raises((LayoutError, SpecError), match="from the side"):
        build_design(DesignSource.from_dict(data, "u.toml"), field=False)
