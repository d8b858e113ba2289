"""Culture regions at set shares of the flow, and footprints: the bed inside its rectangle.

The shares are re-solved here from channels.csv (a nodal analysis from the ``from``/``to``,
widths, depths and lengths with the test's own duct series, Bruus 2008, ch. 4); the
footprints are read back from the DXF file's CULTURE_REGION layer with ezdxf.
"""

from __future__ import annotations

import json
from pathlib import Path

import ezdxf
import numpy as np
import pytest
import shapely
from click.testing import CliRunner
from csv_resolve import resolve_csv
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from chipflow.build import build_design, read_design_source
from chipflow.cli import main
from chipflow.errors import LayoutError, SpecError
from chipflow.export.bundle import write_build
from chipflow.spec.reader import parse_design_text
from chipflow.spec.tree import load_tree_spec

ROOT = Path(__file__).resolve().parents[1]
DUAL = ROOT / "designs" / "dual_region_beds.toml"
FOLDED = ROOT / "designs" / "folded_bed_24.toml"


def region_outlines(path: Path) -> list[shapely.Polygon]:
    """The closed polylines of the DXF's CULTURE_REGION layer [um]."""
    doc = ezdxf.readfile(path)
    assert "CULTURE_REGION" in doc.layers
    out = []
    for e in doc.modelspace().query("LWPOLYLINE"):
        if e.dxf.layer == "CULTURE_REGION":
            assert e.closed
            out.append(shapely.Polygon([(p[0], p[1]) for p in e.get_points("xy")]))
    return out


def bed_masks(path: Path) -> shapely.Geometry:
    """Every mask polygon of the DXF [um]."""
    doc = ezdxf.readfile(path)
    polys = [
        shapely.Polygon([(p[0], p[1]) for p in e.get_points("xy")])
        for e in doc.modelspace().query("LWPOLYLINE")
        if e.dxf.layer.startswith("MASK")
    ]
    return shapely.union_all(polys)


@pytest.fixture(scope="module")
def dual(tmp_path_factory):
    build = build_design(DUAL, field=False)
    out = tmp_path_factory.mktemp("dual") / "out"
    write_build(build, out)
    return build, out


def test_two_regions_get_their_shares_as_solved_and_as_re_solved_from_channels_csv(dual):
    build, out = dual
    data = json.loads((out / "results.json").read_text())
    regions = {r["name"]: r for r in data["regions"]}
    assert list(regions) == ["venous", "arteriolar"]
    for r in data["regions"]:
        assert set(r) >= {"name", "flow_fraction_target", "flow_fraction", "bed_channels"}
        assert r["flow_fraction"] == pytest.approx(r["flow_fraction_target"], rel=1e-6)
    assert regions["venous"]["flow_fraction_target"] == 0.25
    assert (regions["venous"]["bed_channels"], regions["arteriolar"]["bed_channels"]) == (12, 24)
    total = build.results["totals"]["total_flow"]
    rows, flow = resolve_csv(out / "channels.csv", build.fluid.viscosity, total, "pump", "outlet")
    region = np.array([r["region"] for r in rows])
    bed = np.array([r["role"] == "bed" for r in rows])
    for name, target in (("venous", 0.25), ("arteriolar", 0.75)):
        share = np.abs(flow[bed & (region == name)]).sum() / total
        assert share == pytest.approx(target, rel=0.005)  # the 0.5 %
        mine = np.abs(flow[bed & (region == name)])
        assert np.std(mine) / np.mean(mine) < 0.005  # every region's bed evenly perfused
    # shared trunks carry no region; every other channel names its own
    trunk = np.array([r["generation"] == "0" for r in rows])
    assert set(region[trunk]) == {""}
    assert set(region[~trunk & (np.array([r["role"] for r in rows]) != "tubing")]) == {
        "venous",
        "arteriolar",
    }
    labels = {(g["region"], g["role"]) for g in data["generations"]}
    assert {("venous", "bed"), ("arteriolar", "bed"), ("", "distribution")} <= labels


def test_each_region_is_checked_with_its_own_cells(dual):
    build, _ = dual
    by_level = {}
    for c in build.results["checks"]:
        by_level.setdefault(c.get("level"), []).append(c)
    venous = [c for c in by_level["venous:bed"] if "shear" in c["name"]]
    arteriolar = [c for c in by_level["arteriolar:bed"] if "shear" in c["name"]]
    # venous-endothelium 0.1-0.6 Pa for its own region, endothelial 0.5-1.0 Pa for the other
    window = [(c["limit_low"], c["limit"]) for c in venous]
    assert window == [(0.1, 0.6)] and "venous-endothelium" in venous[0]["message"]
    assert [(c["limit_low"], c["limit"]) for c in arteriolar] == [(0.5, 1.0)]
    names = [c["name"] for c in build.results["checks"]]
    assert "bed flow uniformity (venous)" in names and "bed residence time (arteriolar)" in names


def test_the_footprints_are_read_back_from_the_dxf_and_hold_their_beds(dual):
    build, out = dual
    outlines = region_outlines(out / "dual-region-beds.dxf")
    assert len(outlines) == 2
    sizes = sorted(
        (round(o.bounds[2] - o.bounds[0]), round(o.bounds[3] - o.bounds[1])) for o in outlines
    )
    assert sizes == [(8000, 5000), (12000, 6000)]  # [um], as asked
    ch = build.layout.channels
    masks = bed_masks(out / "dual-region-beds.dxf")
    for name, size in (("venous", (8000, 5000)), ("arteriolar", (12000, 6000))):
        outline = next(
            o
            for o in outlines
            if (round(o.bounds[2] - o.bounds[0]), round(o.bounds[3] - o.bounds[1])) == size
        )
        beds = shapely.union_all(ch.outline[(ch.role == "bed") & (ch.region == name)])
        beds_um = shapely.affinity.scale(beds, 1e6, 1e6, origin=(0, 0))
        assert outline.buffer(1e-3).contains(beds_um)
        # the mask itself has bed channels inside the outline
        assert masks.intersection(outline).area > 0.9 * beds_um.area
    footprints = {r["name"]: r["footprint"] for r in build.results["regions"]}
    assert footprints["venous"] == pytest.approx([8e-3, 5e-3])


def test_the_drawn_widths_are_the_solved_widths_on_a_chip_of_regions(dual):
    build, _ = dual
    ch = build.layout.channels
    assert np.max(np.abs(ch.mask_width - ch.width)) <= 1e-9


def test_two_builds_of_regions_give_the_same_bytes(dual, tmp_path):
    build, out = dual
    again = build_design(DUAL, field=False)
    write_build(again, tmp_path / "b")
    for name in ("dual-region-beds.dxf", "dual-region-beds.gds", "channels.csv"):
        assert (out / name).read_bytes() == (tmp_path / "b" / name).read_bytes()


# -- one bed in a footprint -----------------------------------------------------------------
def test_a_bed_is_folded_into_its_footprint_and_read_back_from_the_dxf(tmp_path):
    build = build_design(FOLDED, field=False)
    write_build(build, tmp_path / "out")
    (outline,) = region_outlines(tmp_path / "out" / "folded-bed-24.dxf")
    x0, y0, x1, y1 = outline.bounds
    assert (round(x1 - x0), round(y1 - y0)) == (6000, 12000)
    ch = build.layout.channels
    beds = shapely.union_all(ch.outline[ch.role == "bed"])
    assert outline.buffer(1e-3).contains(shapely.affinity.scale(beds, 1e6, 1e6, origin=(0, 0)))
    (region,) = build.results["regions"]
    assert region["name"] == "" and region["footprint"] == pytest.approx([6e-3, 12e-3])
    along, across = region["bed_extent"]
    assert along <= 6e-3 and across <= 12e-3
    # straight, the bed channels would not fit: they were folded, and the notes say so
    bed = next(g for g in build.results["generations"] if g["role"] == "bed")
    assert bed["length"] > 6e-3
    assert any(
        "so that the bed lies in its [bed] footprint" in w for w in build.results["warnings"]
    )
    q = np.abs(build.solution.flow[build.solution.network.role == "bed"])
    assert np.std(q) / np.mean(q) < 0.005


def test_a_footprint_too_small_exits_2_naming_the_smallest_and_the_key(tmp_path):
    result = CliRunner().invoke(
        main, ["build", str(FOLDED), "--set", 'bed.footprint=["2 mm", "3 mm"]', "-o",
               str(tmp_path / "out")],
    )  # fmt: skip
    assert result.exit_code == 2, result.output
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in result.output
    assert "does not fit its [bed] footprint of 2 x 3 mm" in lines[0]
    assert "the smallest it reaches is" in lines[0] and "enlarge the [bed] footprint" in lines[0]
    assert not (tmp_path / "out").exists()
    # the smallest footprint named is one the bed does fit
    smallest = lines[0].split("the smallest it reaches is ")[1].split(" mm")[0]
    along, across = (f"{float(v) + 0.1:g} mm" for v in smallest.split(" x "))
    source = read_design_source(FOLDED, [f'bed.footprint=["{along}", "{across}"]'])
    assert build_design(source, field=False).results["regions"][0]["footprint"]


def test_a_region_footprint_too_small_names_the_region(tmp_path):
    text = DUAL.read_text().replace('footprint = ["8 mm", "5 mm"]', 'footprint = ["1 mm", "1 mm"]')
    path = tmp_path / "small.toml"
    path.write_text(text)
    with pytest.raises(LayoutError, match=r"footprint of region 'venous' of 1 x 1 mm"):
        build_design(path, field=False)


# -- the design file ---------------------------------------------------------------------------
BASE = """
[tree]
flow = "4 uL/min"
rule = "equal-shear"
[targets]
shear = "0.5 Pa"
"""


def region(name: str, fraction, extra: str = 'bed_channels = 4\nlength = "2 mm"') -> str:
    return f'[[regions]]\nname = "{name}"\nflow_fraction = {fraction}\n{extra}\n'


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (BASE + region("a", 0.25) + region("b", 0.7), r"flow fractions sum to 0\.95"),
        (BASE + region("a", 0.5) + region("a", 0.5), r"named twice"),
        (BASE + region("a", 1.0), r"give 2 to 5 \[\[regions\]\]"),
        (BASE + region("a", 0.5) + region("b", 0.5, 'length = "2 mm"'), r"no bed count"),
        (BASE + region("a b", 0.5) + region("b", 0.5), r"not a region name"),
        (BASE + '[bed]\nlength = "2 mm"\n' + region("a", 0.5) + region("b", 0.5),
         r"move them from \[bed\] into the regions"),
        (BASE.replace('rule = "equal-shear"', 'rule = "equal-shear"\nbed_channels = 8')
         + region("a", 0.5) + region("b", 0.5), r"each region gives its own bed_channels"),
        (BASE + region("a", 0.5) + region("b", 0.5, 'bed_channels = 7\nlength = "2 mm"'),
         r"bed_channels"),
        (BASE + region("a", 0.5, 'bed_channels = 4\nlength = "2 mm"\nfootprint = ["1 mm"]')
         + region("b", 0.5), r"give two lengths"),
        (BASE + region("a", 0.5, 'bed_channels = 4\nlength = "2 mm"\ncell_type = "nope"')
         + region("b", 0.5), r"nope"),
    ],
)  # fmt: skip
def test_bad_regions_are_refused_in_one_clear_message(text: str, message: str):
    with pytest.raises(SpecError, match=message):
        load_tree_spec(parse_design_text(text, "regions.toml"))


def test_a_design_with_regions_exits_2_on_a_bad_sum_through_the_cli(tmp_path):
    text = DUAL.read_text().replace("flow_fraction = 0.75", "flow_fraction = 0.7")
    path = tmp_path / "bad.toml"
    path.write_text(text)
    result = CliRunner().invoke(main, ["build", str(path), "-o", str(tmp_path / "out")])
    assert result.exit_code == 2
    assert "sum to 0.95" in result.output and "within 1e-09" in result.output
    assert len(result.output.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists()


def test_each_region_is_sized_for_its_share_with_its_own_splits():
    text = BASE + region("a", 0.25) + region("b", '"75 %"', 'splits = [3, 2]\nlength = "2 mm"')
    spec = load_tree_spec(parse_design_text(text, "two.toml"))
    a, b = spec.regions
    assert (a.tree.splits, b.tree.splits) == ((2, 2), (3, 2))
    assert a.tree.flow == pytest.approx(spec.flow * 0.25, rel=1e-15)
    assert b.tree.flow == pytest.approx(spec.flow * 0.75, rel=1e-15)


def test_the_console_and_the_report_show_the_regions(dual):
    from chipflow.report.console import totals_and_checks

    build, out = dual
    text = totals_and_checks(build.results)
    assert "region venous: 25 % of the flow (target 25 %), 12 bed channels" in text
    assert "in its 8 mm x 5 mm footprint" in text
    page = (out / "report.html").read_text()
    assert "<h3>Culture regions</h3>" in page and "arteriolar" in page
    assert "venous:bed" in page  # the generations table labels each region's levels


# -- random regions --------------------------------------------------------------------------
def regions_design(fractions, counts, lengths, grid_um: float) -> str:
    text = (
        '[tree]\nflow = "10 uL/min"\nrule = "equal-shear"\nlength = "2 mm"\n'
        '[targets]\nshear = "0.7 Pa"\n[fabrication]\ndepths = ["50 um"]\n'
        f'grid = "{grid_um} um"\nmin_feature = "5 um"\nmax_width_to_depth = 16\n'
        "max_depth_to_width = 10\n"
    )
    for i, (f, n, length) in enumerate(zip(fractions, counts, lengths, strict=True)):
        text += (
            f'[[regions]]\nname = "r{i}"\nflow_fraction = {f!r}\nbed_channels = {n}\n'
            f'length = "{length} mm"\n'
        )
    return text


@st.composite
def random_regions(draw):
    k = draw(st.integers(2, 4))
    weights = draw(st.lists(st.floats(0.15, 1.0), min_size=k, max_size=k))
    fractions = [w / sum(weights) for w in weights]
    fractions[-1] = 1.0 - sum(fractions[:-1])
    counts = draw(st.lists(st.sampled_from([2, 4, 6, 8, 9, 12, 16]), min_size=k, max_size=k))
    lengths = draw(st.lists(st.sampled_from([1, 2, 3]), min_size=k, max_size=k))
    return fractions, counts, lengths, draw(st.sampled_from([0.5, 1.0]))


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(random_regions())
def test_random_regions_get_their_shares_and_keep_their_widths(case):
    from unittest import mock

    from chipflow.design.regions import size_regions
    from chipflow.layout import Chip, LayoutRules, extract_network
    from chipflow.layout import pieces as pieces_module
    from chipflow.layout.regions import draw_regions
    from chipflow.network import solve
    from conftest import _stand_in_piece

    fractions, counts, lengths, grid_um = case
    spec = load_tree_spec(parse_design_text(regions_design(*case), "random.toml"))
    design = size_regions(spec)
    rules = LayoutRules.from_fabrication(design.fabrication)
    with mock.patch.object(pieces_module, "solve_piece", _stand_in_piece):
        layout = draw_regions(design, Chip(width=0.12, height=0.05), rules)
        net = extract_network(layout)
    # widths on the mask are the solved widths, to 1 nm
    np.testing.assert_allclose(layout.channels.mask_width, net.width, rtol=0, atol=1e-9)
    sol = solve(net, design.fluid, flows={"inlet": design.total_flow}, pressures={"outlet": 0})
    q, region, bed = np.abs(sol.flow), net.regions(), net.role == "bed"
    for r, n, f in zip(design.regions, counts, fractions, strict=True):
        mine = q[bed & (region == r.name)]
        assert mine.size == n
        assert mine.sum() / design.total_flow == pytest.approx(f, rel=1e-6)
        assert np.std(mine) / np.mean(mine) < 0.005


@pytest.mark.slow
def test_the_field_of_a_chip_of_regions_agrees_with_its_network():
    # the 2D field of the whole drawn chip against the network extracted from the drawing
    build = build_design(DUAL, field=True)
    field = build.results["field"]
    assert field["resistance"] == pytest.approx(field["network_resistance"], rel=0.01)
