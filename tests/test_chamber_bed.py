"""A tree that ends in a culture chamber (``[bed] kind = "chamber"``): its drawing on the
written mask, its links against its 2D conductance matrix and an independent multi-port 2D
solve, the symmetry of its port flows, and the refusals of its keys."""

from __future__ import annotations

import json
import re
import tomllib
from pathlib import Path

import numpy as np
import pytest
import shapely
from click.testing import CliRunner

from chipflow.build import DesignSource, build_design
from chipflow.cli import main
from chipflow.layout.chamber import (
    ChamberKey,
    ChamberPort,
    chamber_polygon,
    pillar_centres,
    placed_polygon,
    solve_chamber,
)

ROOT = Path(__file__).resolve().parents[1]
GRID = 1e-6

#: A small tree into a chamber (two ports on each end wall): cheap to build.
SMALL = """
name = "small chamber tree"
[tree]
flow = "20 uL/min"
generations = 1
rule = "equal-shear"
trunk_width = "300 um"
trunk_depth = "100 um"
length = "2 mm"
[bed]
kind = "chamber"
width = "1.2 mm"
length = "3 mm"
depth = "100 um"
pillars = { diameter = "150 um", pitch = "400 um" }
[fabrication]
depths = ["100 um"]
"""


def _small(old: str = "", new: str = "") -> str:
    if old:
        assert old in SMALL
    return SMALL.replace(old, new, 1) if old else SMALL


def _build(text: str, field: bool = False):
    return build_design(DesignSource.from_dict(tomllib.loads(text), "bed.toml"), field=field)


def _dxf_layers(path: Path) -> dict[str, shapely.Geometry]:
    """Every mask layer of a written DXF as one geometry [m], read with ezdxf (the pieces that
    hole handling "split" cuts meet edge to edge, so their union has the pillars as holes)."""
    import ezdxf

    rings: dict[str, list] = {}
    for e in ezdxf.readfile(path).modelspace().query("LWPOLYLINE"):
        if e.dxf.layer.startswith("MASK"):
            pts = [(p[0] * 1e-6, p[1] * 1e-6) for p in e.get_points("xy")]  # written in um
            rings.setdefault(e.dxf.layer, []).append(shapely.Polygon(pts))
    return {name: shapely.union_all(polys) for name, polys in rings.items()}


#: A tree of two generations into a pillar chamber: four ports on each end wall.
MEDIUM = (
    _small()
    .replace("generations = 1", "generations = 2")
    .replace('width = "1.2 mm"', 'width = "2 mm"')
    .replace('flow = "20 uL/min"', 'flow = "40 uL/min"')
)


@pytest.fixture(scope="module")
def bundled(tmp_path_factory):
    from chipflow.export.bundle import write_build

    build = _build(MEDIUM)
    out = tmp_path_factory.mktemp("tree-chamber")
    write_build(build, out)
    return build, out


# -- the drawing -----------------------------------------------------------------------------
def test_the_chamber_on_the_written_dxf_is_the_solved_one(bundled):
    """The chamber on the written DXF, pillars as holes, is the polygon of its solved key
    (placed on the chip), to a sliver of the grid; its ports sit in the middles of four
    equal strips of its width."""
    build, out = bundled
    (chamber,) = build.layout.chambers
    key = chamber.key
    assert key.n_ports == 8 and [p.side for p in key.ports] == [0] * 4 + [1] * 4
    solved = placed_polygon(chamber_polygon(key), chamber.origin, chamber.turns)
    (layer,) = _dxf_layers(next(out.glob("*.dxf"))).values()
    drawn = shapely.intersection(layer, shapely.box(*solved.bounds))
    assert shapely.symmetric_difference(drawn, solved).area < 1e-4 * solved.area
    pieces = list(getattr(drawn, "geoms", [drawn]))
    holes = sum(len(p.interiors) for p in pieces)
    row = build.results["chambers"][0]
    assert holes == len(pillar_centres(key)) == row["pillars"]["count"] > 20
    # every hole is one pillar of the key: centred on it, as large as its circle (to the
    # chord error of the drawn polygon)
    from chipflow.layout.chamber import place

    found = [shapely.Polygon(h) for p in pieces for h in p.interiors]
    centres = np.array([[h.centroid.x, h.centroid.y] for h in found])
    want = place(pillar_centres(key), chamber.origin, chamber.turns)
    gap = np.hypot(*(centres[:, None, :] - want[None, :, :]).transpose(2, 0, 1)).min(axis=1)
    assert gap.max() < GRID
    d = key.pillars[0]
    assert np.array([h.area for h in found]) == pytest.approx(np.pi * d**2 / 4, rel=0.01)
    strip = key.width / 4
    inlet = np.array([p.offset for p in key.ports[:4]])
    assert np.abs(inlet - (np.arange(4) + 0.5) * strip).max() < 4 * GRID
    assert [p.offset for p in key.ports[4:]] == inlet.tolist()  # the outlet wall mirrors it
    # the mask width across the chamber's middle is the key's (measured by the engine)
    assert abs(chamber.mask_width - key.width) < 1e-9


# -- the network -----------------------------------------------------------------------------
def _inflows(build) -> tuple[np.ndarray, np.ndarray]:
    """The network's flow into the chamber through each port [m^3/s] and the port pressures."""
    (chamber,) = build.layout.chambers
    sol = build.solution
    net = sol.network
    nodes = np.array([net.node_index(build.layout.node_names[n]) for n in chamber.port_nodes])
    links = np.flatnonzero(net.role == "chamber")
    inflow = np.array(
        [
            sol.flow[links][net.node_a[links] == k].sum()
            - sol.flow[links][net.node_b[links] == k].sum()
            for k in nodes
        ]
    )
    return inflow, sol.pressure[nodes]


def test_port_flows_are_the_chambers_conductance_matrix(bundled):
    """The network's links (a link between every two of the 8 ports) give each port the
    flow of the chamber's 2D conductance matrix between the mouths at the solved pressures,
    and reproduce that matrix at random port pressures (to rounding)."""
    build, _ = bundled
    (chamber,) = build.layout.chambers
    sol = solve_chamber(chamber.key)
    mu = build.fluid.viscosity
    inflow, p = _inflows(build)
    # to the network solve's rounding: p is some 100 Pa, its differences a few Pa
    assert inflow == pytest.approx(sol.chamber @ p / mu, rel=1e-6)
    total = build.results["totals"]["total_flow"]
    assert inflow[:4].sum() == pytest.approx(total, rel=1e-9)
    assert inflow[4:].sum() == pytest.approx(-total, rel=1e-9)
    # the links reproduce the matrix: their Laplacian at random pressures
    assert len(sol.links) == 8 * 7 // 2 and sol.fit_error == 0.0
    lap = np.zeros((8, 8))
    i, j = sol.links.T
    np.add.at(lap, (i, j), -sol.link_conductance)
    np.add.at(lap, (j, i), -sol.link_conductance)
    lap[np.diag_indices(8)] = -lap.sum(axis=1)
    q = np.random.default_rng(3).normal(size=(8, 5))
    # (to the rows of the matrix adding up to zero: conservation, 1e-9 of its flows)
    assert np.abs(sol.chamber.sum(axis=1)).max() < 1e-8 * np.abs(sol.chamber).max()
    want = sol.chamber @ q
    assert np.abs(lap @ q - want).max() < 1e-8 * np.abs(want).max()
    # the chamber result's flow is the tree's flow; its resistance inlet mean to outlet mean
    row = build.results["chambers"][0]
    assert row["flow"] == pytest.approx(total, rel=1e-9) and row["flow_residual"] < 1e-6


def test_the_transit_through_the_chip_crosses_the_chamber(bundled):
    """One path through the chip: every level's residence time plus the chamber's, its
    volume over its flow (the floor measured on the written DXF times the depth: the
    chamber's mask polygon, pillars as holes)."""
    import ezdxf
    import shapely

    build, out = bundled
    results = json.loads((out / "results.json").read_text())
    (c,) = results["chambers"]
    (chamber,) = build.layout.chambers
    doc = ezdxf.readfile(next(out.glob("*.dxf")))
    scale = 1e-6 if doc.header.get("$INSUNITS") == 13 else 1e-3
    rings = [
        shapely.Polygon(np.asarray(e.get_points("xy")) * scale)
        for e in doc.modelspace().query("LWPOLYLINE")
        if e.closed and e.dxf.layer.startswith("MASK")
    ]
    filled = shapely.Polygon()
    for ring in rings:  # even-odd fill: outlines and the pillars' holes
        filled = filled.symmetric_difference(ring)
    # the chamber's floor between its end walls and side walls
    floor = filled.intersection(shapely.box(*chamber.outline.bounds)).area
    assert floor == pytest.approx(c["floor_area"], rel=0.01)
    levels = sum(row["residence_time"] for row in results["generations"])
    chamber_time = floor * c["depth"] / c["flow"]
    assert results["totals"]["transit_time"] == pytest.approx(levels + chamber_time, rel=0.01)
    assert chamber_time > 2 * levels  # the culture chamber holds the medium longest


def test_a_symmetric_tree_gives_mirror_ports_equal_flows(bundled, monkeypatch):
    """The drawn tree is its own mirror image across its axis: with the chamber's matrix made
    exactly mirror-symmetric (its 2D mesh is not), the flows through ports mirrored across
    the axis are equal to 1e-9; the real matrix differs from its mirror image by its mesh
    alone."""
    import chipflow.layout.chamber as chamber_module
    from chipflow.layout.extract import with_chambers
    from chipflow.network import solve

    build, _ = bundled
    (chamber,) = build.layout.chambers
    key = chamber.key
    sol = solve_chamber(key)
    mirror = np.r_[np.arange(3, -1, -1), np.arange(7, 3, -1)]
    sym = 0.5 * (sol.chamber + sol.chamber[np.ix_(mirror, mirror)])
    assert np.abs(sym - sol.chamber).max() < 2e-3 * np.abs(sol.chamber).max()
    links, g, error = chamber_module._links_of(sym)
    fake = type(sol)(**{**sol.__dict__, "chamber": sym, "links": links, "link_conductance": g})
    monkeypatch.setitem(chamber_module._solved, key, fake)

    net = build.solution.network
    keep = np.flatnonzero(net.role != "chamber")
    plain = type(net).from_arrays(
        net.node_a[keep], net.node_b[keep], net.width[keep], net.depth[keep], net.length[keep],
        round=net.round[keep], names=[net.channel_names()[k] for k in keep],
        generation=net.generation[keep], role=net.role[keep], node_names=net.node_names,
    )  # fmt: skip
    nodes = [build.layout.node_names[n] for n in chamber.port_nodes]
    network = with_chambers(plain, [("chamber", key, nodes)])
    held = {n: float(build.solution.node_pressure(n)) for n in ("inlet", "outlet")}
    mirrored = solve(network, build.fluid, held)
    links = np.flatnonzero(network.role == "chamber")
    index = np.array([network.node_index(n) for n in nodes])
    inflow = np.array(
        [
            mirrored.flow[links][network.node_a[links] == k].sum()
            - mirrored.flow[links][network.node_b[links] == k].sum()
            for k in index
        ]
    )
    assert inflow == pytest.approx(inflow[mirror], rel=1e-9)
    assert np.all(inflow[:4] > 0)


# -- the 2D solve of a chamber with several ports on each end wall ---------------------------
def test_multi_port_chamber_against_an_independent_2d_solve():
    """A pillar chamber with two ports on each end wall, placed unevenly: chipflow's
    conductance matrix between the stub ends against the tests' own scikit-fem solve on the
    same polygon (:mod:`chamber_resolve`), every entry within 2 % of the largest (measured
    0.07 % against its solve at 25 um triangles, 0.15 % at 16 um)."""
    from chamber_resolve import independent_conductance_matrix

    w, depth = 1e-4, 1e-4
    ports = (
        ChamberPort(0, 3e-4, w, depth),
        ChamberPort(0, 9e-4, w, depth),
        ChamberPort(1, 4e-4, w, depth),
        ChamberPort(1, 9.5e-4, w, depth),
    )
    key = ChamberKey(1.2e-3, 2e-3, depth, 0.0, 0.0, (1.5e-4, 4e-4, "hex"), ports, GRID)
    ours = solve_chamber(key).conductance
    theirs = independent_conductance_matrix(key, 25e-6, driven=[0, 1, 2])
    theirs[:, 3] = -theirs[:, :3].sum(axis=1)  # conservation gives the last column
    scale = np.abs(theirs).max()
    assert np.abs(ours - theirs).max() < 0.02 * scale
    # the entries that matter are all there: both ports of one wall exchange flow too
    assert -theirs[1, 0] > 0.05 * scale and -theirs[3, 0] > 0.05 * scale


# -- the keys and the rules ------------------------------------------------------------------
REFUSED = {
    ('kind = "chamber"', 'kind = "mesh"'): "is a key of a chamber bed",
    ('kind = "chamber"', 'kind = "channels"'): "is a key of a chamber bed",
    ('kind = "chamber"', 'kind = "chamber"\nresidence_time = "1 s"'): "residence_time: has no",
    ('kind = "chamber"', 'kind = "chamber"\ngap = "150 um"'): "gap: has no meaning",
    ('kind = "chamber"', 'kind = "chamber"\nfootprint = ["5 mm", "5 mm"]'): "footprint: has no",
    ('kind = "chamber"', 'kind = "chamber"\nmax_straight_length = "4 mm"'): "has no meaning",
    ('kind = "chamber"', 'kind = "cavity"'): "unknown value 'cavity'",
    ('depth = "100 um"\npillars', 'depth = "80 um"\npillars'): "must be one of [fabrication]",
    ('width = "1.2 mm"', 'width = "700 um"'): "um holds them",
    ('trunk_depth = "100 um"', 'shape = "round"'): "round tubes cannot",
}


@pytest.mark.parametrize(("change", "words"), list(REFUSED.items()), ids=lambda v: str(v)[:30])
def test_bad_chamber_bed_keys_are_one_line_exit_2(change, words, tmp_path):
    path = tmp_path / "bed.toml"
    path.write_text(_small(*change))
    out = CliRunner().invoke(main, ["build", str(path), "-o", str(tmp_path / "out")])
    assert out.exit_code == 2, out.output
    lines = out.output.strip().splitlines()
    assert len(lines) == 1 and words in lines[0] and "Traceback" not in out.output
    assert not (tmp_path / "out").exists()


def test_a_chamber_too_narrow_for_its_ports_names_a_width_that_works():
    """The ports sit in the middles of equal strips, each holding a port and a wall of
    min_gap either side: the width the refusal names builds, two steps of the strips' pitch
    grid less (4 um) do not."""
    from chipflow.errors import LayoutError

    with pytest.raises(LayoutError, match=r"a width of (\d+) um holds them") as caught:
        _build(_small('width = "1.2 mm"', 'width = "700 um"'))
    need = int(re.search(r"a width of (\d+) um", str(caught.value)).group(1))
    build = _build(_small('width = "1.2 mm"', f'width = "{need} um"'))
    (chamber,) = build.layout.chambers
    walls = [p.offset - p.width / 2 for p in chamber.key.ports[:2]]
    assert (
        min(walls[0], need * 1e-6 - chamber.key.ports[1].offset - chamber.key.ports[1].width / 2)
        >= 100e-6 - 1e-12
    )
    with pytest.raises(LayoutError, match="holds them"):
        _build(_small('width = "1.2 mm"', f'width = "{need - 4} um"'))


def test_a_region_cannot_be_a_chamber(tmp_path):
    text = """
name = "regions"
[tree]
flow = "10 uL/min"
rule = "equal-shear"
[targets]
shear = "0.5 Pa"
[[regions]]
name = "a"
flow_fraction = 0.5
bed_channels = 2
kind = "chamber"
length = "2 mm"
[[regions]]
name = "b"
flow_fraction = 0.5
bed_channels = 2
length = "2 mm"
"""
    path = tmp_path / "regions.toml"
    path.write_text(text)
    out = CliRunner().invoke(main, ["check", str(path)])
    assert out.exit_code == 2 and "a chamber bed is available in [bed] only" in out.output


def test_the_chamber_of_a_tree_meets_the_fabrication_rules():
    """Without its pillars the 1.2 mm wide, 100 um deep chamber (width/depth 12 against the
    limit 10) fails the roof-sag rule, placed inside it; with them it passes, and its floor
    shear is graded against the cells' window with its percentiles."""
    build = _build(_small() + '[culture]\ncell_type = "venous-endothelium"\n')
    assert build.results["fabrication"]["findings"] == []
    (row,) = build.results["chambers"]
    assert row["ports"] == 4 and row["unsupported_span"] < 0.6e-3
    s = row["floor_shear"]
    assert 0 < s["p05"] <= s["p50"] <= s["p95"] and row["inside_window"] is not None
    names = [c["name"] for c in build.results["checks"]]
    assert "chamber floor shear: chamber" in names
    bare = _build(_small('pillars = { diameter = "150 um", pitch = "400 um" }\n', ""))
    (found,) = [f for f in bare.results["fabrication"]["findings"] if f["rule"] == "roof_sag"]
    assert "chamber 'chamber'" in found["message"] and found["value"] == pytest.approx(12.0)
    (c,) = bare.layout.chambers
    x0, y0 = c.origin
    assert x0 < found["x"] < x0 + c.key.length and y0 < found["y"] < y0 + c.key.width
    assert bare.status == "fail"


def test_vary_writes_a_tree_into_a_chamber(tmp_path):
    path = tmp_path / "bed.toml"
    path.write_text(_small() + '[culture]\ncell_type = "venous-endothelium"\n')
    args = ["vary", str(path), "--samples", "50", "--depth-tolerance", "5%", "-o", "v"]
    out = CliRunner().invoke(main, [*args[:-1], str(tmp_path / "v")])
    assert out.exit_code == 0, out.output
    data = json.loads((tmp_path / "v" / "results.json").read_text())
    (row,) = data["chambers"]
    p50 = row["floor_shear"]["p50"]
    assert p50["p05"] < p50["nominal"] < p50["p95"] and row["inside_window"]["p50"] > 0
    assert "2D re-solves" in data["model"] and data["units"]["flow"] == "m^3/s"


# -- chipflow vary ---------------------------------------------------------------------------
def test_vary_moves_a_chamber_as_its_2d_re_solve_does():
    """vary scales a chamber's conductance and floor shear per unit flow with the
    sensitivities of two 2D re-solves (5 % deeper, 2 um wider): at a sample away from those
    steps (7 % shallower, 4 um wider), the 2D solve of that chamber redone exactly agrees with
    the model within 1 % (measured 0.32 % for the conductance and 0.60 % for the median floor
    shear per unit flow); a mould 40 % deeper takes the chamber's floor out of the window and fails
    the sample."""
    from chipflow.field.chambers import _through, perturbed_key
    from chipflow.spec.tolerances import read_tolerances
    from chipflow.variation.batch import solve_batch
    from chipflow.variation.problem import variation_problem
    from chipflow.variation.statistics import sample_passes

    build = _build(_small() + '[culture]\ncell_type = "venous-endothelium"\n')
    problem = variation_problem(build, read_tolerances(build.source.top))
    assert problem.n_chambers == 1 and problem.n_levels == 1
    a, b, c, d = problem.chamber_sensitivity[0]
    assert 2.0 < a < 3.0 and -2.2 < c < -1.8  # Hele-Shaw: 3 and -2, the pillars lower a
    key = build.layout.chambers[0].key
    q0, t0 = _through(key)
    q1, t1 = _through(perturbed_key(key, 0.93, 4e-6))
    assert q1 / q0 == pytest.approx(np.exp(a * np.log(0.93) + b * 4e-6), rel=0.01)
    assert (t1 / q1) / (t0 / q0) == pytest.approx(np.exp(c * np.log(0.93) + d * 4e-6), rel=0.01)
    # in the batch: the syringe holds the flow, so the floor shear moves by the shear per flow
    rows = np.zeros((3, problem.n_factors))
    rows[1, 0], rows[1, 1] = -0.07, 4e-6
    rows[2, 0] = 0.4
    out = solve_batch(problem, rows)
    nominal = build.results["chambers"][0]
    assert out.chamber_shear[0, 0, 1] == pytest.approx(nominal["floor_shear"]["p50"], rel=1e-6)
    assert out.chamber_flow[1, 0] == pytest.approx(out.chamber_flow[0, 0], rel=1e-9)
    ratio = out.chamber_shear[1, 0, 1] / out.chamber_shear[0, 0, 1]
    assert ratio == pytest.approx((t1 / q1) / (t0 / q0), rel=0.01)
    assert sample_passes(problem, out).tolist() == [True, True, False]
    assert out.chamber_inside[2, 0] < 1.0 - problem.outside_limit


def test_the_shear_map_colours_the_chamber_floor(bundled):
    """The shear map fills the chamber's floor triangles by their floor shear at the
    operating point, on the channels' colour scale."""
    from chipflow.export.bundle import _chamber_floors
    from chipflow.export.preview import plot_layout

    build, _ = bundled
    ((corners, tau),) = _chamber_floors(build)
    (chamber,) = build.layout.chambers
    inside = shapely.contains_xy(chamber.outline.buffer(1e-9), *corners.mean(axis=1).T)
    assert inside.all() and corners.shape == (tau.size, 3, 2)
    row = build.results["chambers"][0]["floor_shear"]
    assert row["p05"] <= float(np.median(tau)) <= row["p95"]
    shear = build.solution.wall_shear_floor[: build.layout.channels.length.size]
    plot = plot_layout(build.layout, values=shear, floors=[(corners, tau)])
    floor = plot.ax.collections[-1]
    assert np.array_equal(floor.get_array(), tau)
    assert floor.get_clim() == plot.channel_collection.get_clim()
