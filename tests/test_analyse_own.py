"""``chipflow analyse`` on chipflow's own DXF and GDSII, against the build that wrote them.

The build's network gives the chip's resistance between its ports from the exact duct series
of each channel plus the junctions' 2D solves; analyse solves the 2D depth-averaged field of
the mask read back from the files. The two are independent models of the same chip, so they
agree to the field model's accuracy (about 0.5 % at its default mesh, docs/guide/physics.rst);
a wrong depth, a lost level or an inverted fill moves the resistance by tens of percent.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner

from chipflow.cli import main
from chipflow.export.bundle import build_to_folder
from chipflow.spec.mask_read import read_mask

ROOT = Path(__file__).resolve().parents[1]


def _build(builds: dict, design: str):
    """A bundled design's results, chip resistance [Pa s/m^3], DXF and GDSII files."""
    _, files = builds[f"{design}.toml"]
    results = json.loads(next(f for f in files if f.name == "results.json").read_text())
    totals = results["totals"]
    chip = (totals["chip_inlet_pressure"] - totals["outlet_pressure"]) / totals["total_flow"]
    dxf = next(f for f in files if f.suffix == ".dxf")
    return results, chip, dxf, dxf.with_suffix(".gds")


@pytest.fixture(scope="module")
def demo(bundled_builds):
    return _build(bundled_builds, "demo_endothelial_bed")


@pytest.fixture(scope="module")
def twin(bundled_builds):
    """A two-level chip: 50 um manifold, 100 um culture channels."""
    return _build(bundled_builds, "twin_culture_manifold")


def analyse(*args: str):
    result = CliRunner().invoke(main, ["analyse", *args, "--json"])
    return result, (json.loads(result.output) if result.exit_code == 0 else None)


def test_results_json_ports_are_where_the_mask_files_put_them(demo) -> None:
    results, _, dxf, gds = demo
    ports = results["ports"]
    assert [p["name"] for p in ports] == ["inlet", "outlet"]
    for path in (dxf, gds):
        marks = {p.name: p for p in read_mask(path).ports}
        for port in ports:
            mark = marks[port["name"]]
            assert (mark.x, mark.y) == pytest.approx((port["x"], port["y"]), abs=1e-9)
            assert mark.diameter == pytest.approx(port["diameter"], rel=1e-3)


def test_mirrored_masks_carry_mirrored_ports(tmp_path_factory, demo) -> None:
    out = tmp_path_factory.mktemp("mirrored") / "out"
    design = ROOT / "designs" / "demo_endothelial_bed.toml"
    build_to_folder(design, out, settings=["export.mirror=true"])
    results = json.loads((out / "results.json").read_text())
    dxf = next(out.glob("*.dxf"))
    plain = {p["name"]: p for p in demo[0]["ports"]}
    x0 = results["fabrication"]["chip"]["width"]  # the chip starts at x = 0
    for port in results["ports"]:
        assert port["x"] == pytest.approx(x0 - plain[port["name"]]["x"], abs=1e-9)
        assert port["y"] == pytest.approx(plain[port["name"]]["y"], abs=1e-9)
    marks = {p.name: p for p in read_mask(dxf).ports}
    assert marks["inlet"].x == pytest.approx(results["ports"][0]["x"], abs=1e-9)


# each analyse of the demo mask solves its field and skeleton (about 30 s): the default suite
# reads the DXF of a smaller tree (28k triangles, 4 s) and the two-depth mask; the demo's DXF
# and GDSII run under -m slow
@pytest.fixture(scope="module")
def small_tree(bundled_builds):
    return _build(bundled_builds, "tree_endothelial")


@pytest.mark.parametrize(
    ("design", "kind"),
    [
        ("small_tree", "dxf"),
        pytest.param("demo", "dxf", marks=pytest.mark.slow),
        pytest.param("demo", "gds", marks=pytest.mark.slow),
    ],
)
def test_analyse_reads_chipflows_own_mask_and_matches_the_build(request, design, kind) -> None:
    results, chip, dxf, gds = request.getfixturevalue(design)
    flow = "12uL/min"
    if kind == "dxf":  # no --layer, --depth, --inlet or --outlet: the file says them
        result, data = analyse(str(dxf), "--flow", flow)
    else:  # GDSII layer names carry no depth
        result, data = analyse(str(gds), "--flow", flow, "--depth", "50um")
    assert result.exit_code == 0, result.output
    assert data["resistance"] == pytest.approx(chip, rel=0.005)
    # the chip outline did not invert the fill: the floor is the mask level's area
    layers = results["fabrication"]["layers"]  # the small tree's trunk is on a second level
    assert [lv["depth"] for lv in data["levels"]] == pytest.approx([lv["depth"] for lv in layers])
    assert data["levels"][0]["area"] < 0.1 * results["fabrication"]["chip"]["width"] ** 2


@pytest.mark.slow
def test_ports_given_as_coordinates_from_results_json(demo) -> None:
    results, chip, dxf, _ = demo
    inlet, outlet = (p["x"] * 1e6 for p in results["ports"])  # the files are in um
    y = results["ports"][0]["y"] * 1e6
    result, data = analyse(
        str(dxf), "--flow", "12uL/min", "--inlet", f"{inlet},{y}", "--outlet", f"{outlet},{y}"
    )
    assert result.exit_code == 0, result.output
    assert data["resistance"] == pytest.approx(chip, rel=0.005)


def test_two_depth_mask_matches_the_two_level_build(twin) -> None:
    results, chip, dxf, gds = twin
    depths = [layer["depth"] for layer in results["fabrication"]["layers"]]
    assert depths == pytest.approx([50e-6, 100e-6])
    result, from_dxf = analyse(str(dxf), "--flow", "2uL/min")
    assert result.exit_code == 0, result.output
    result, from_gds = analyse(
        str(gds), "--flow", "2uL/min", "--depth", "1=50um", "--depth", "2=100um"
    )
    assert result.exit_code == 0, result.output
    for data in (from_dxf, from_gds):
        assert [lv["depth"] for lv in data["levels"]] == pytest.approx(depths)
        assert data["resistance"] == pytest.approx(chip, rel=0.005)
    # the depths matter: swapped, the resistance is far off (the test can fail)
    result, swapped = analyse(
        str(gds), "--flow", "2uL/min", "--depth", "1=100um", "--depth", "2=50um"
    )
    assert abs(swapped["resistance"] / chip - 1) > 0.2


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--depth", "50um"], "2 mask levels"),
        (["--depth", "1=50um", "--depth", "60um"], "not both"),
        (["--depth", "1=50um", "--depth", "2=100um", "--inlet", "pump"], "no port named 'pump'"),
        (["--depth", "7=50um"], "no polygon on layer 7"),
        ([], "states no depth"),
    ],
)
def test_bad_depths_and_ports_exit_2_with_one_line(twin, args, message) -> None:
    _, _, _, gds = twin
    result = CliRunner().invoke(main, ["analyse", str(gds), "--flow", "2uL/min", *args])
    assert result.exit_code == 2, result.output
    assert message in result.output and "Traceback" not in result.output


def test_the_installed_mask_is_found_by_name_from_any_folder(tmp_path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    args = ["--depth", "50um", "--inlet", "0,0", "--outlet", "20,0", "--flow", "10uL/min"]
    result, data = analyse("straight_channel.dxf", *args)
    assert result.exit_code == 0, result.output
    # a 200 um x 50 um channel, 20 mm between the port centres: the drop is that of the
    # straight channel between the holes' rims within a few percent (the skeleton's 1D
    # series for the same branch; the ends inside the pads add little)
    (row,) = data["channels"]
    assert row["width"] == pytest.approx(200e-6, rel=0.02)
    assert data["resistance"] == pytest.approx(row["network_resistance"], rel=0.05)
    missing = CliRunner().invoke(main, ["analyse", "no_such_mask.dxf", *args])
    assert missing.exit_code == 2
    assert "no such file" in missing.output and "straight_channel.dxf" in missing.output


@pytest.mark.slow
def test_network_out_round_trip_checks_within_one_percent_of_analyse(demo, tmp_path) -> None:
    """The skeleton written as a network: `chipflow check` of that file gives the inlet
    pressure analyse found, within 1 % (the branches carry the field's resistance)."""
    _, _, dxf, _ = demo
    out = tmp_path / "skeleton.toml"
    result, data = analyse(str(dxf), "--flow", "12uL/min", "--network-out", str(out))
    assert result.exit_code == 0, result.output
    assert out.read_text().startswith("# chipflow analyse --network-out")
    checked = CliRunner().invoke(main, ["check", str(out), "--json"])
    assert checked.exit_code in (0, 1), checked.output  # 1: a fabrication check fails
    solved = json.loads(checked.output)
    inlet = next(n["pressure"] for n in solved["nodes"] if n["name"] == "inlet")
    assert inlet == pytest.approx(data["inlet_pressure"], rel=0.01)
    # every skeleton branch is a channel of the written network
    assert out.read_text().count("[[channels]]") == len(data["channels"]) > 60
    # and the file's lengths are what makes it agree: the centreline lengths alone do not
    text = out.read_text()
    plain = re.sub(r'length = "[^"]+"  # centreline ([0-9.e+-]+) mm', r'length = "\1 mm"', text)
    (tmp_path / "plain.toml").write_text(plain)
    solved = json.loads(
        CliRunner().invoke(main, ["check", str(tmp_path / "plain.toml"), "--json"]).output
    )
    plain_inlet = next(n["pressure"] for n in solved["nodes"] if n["name"] == "inlet")
    assert abs(plain_inlet / data["inlet_pressure"] - 1) > 0.02


def test_network_out_refuses_a_mask_without_a_skeleton(twin, tmp_path) -> None:
    _, _, dxf, _ = twin
    out = tmp_path / "skeleton.toml"
    result = CliRunner().invoke(
        main, ["analyse", str(dxf), "--flow", "2uL/min", "--network-out", str(out)]
    )
    assert result.exit_code == 2 and "more than one depth" in result.output
    assert not out.exists()


def _with_region(dxf: Path, out: Path, box) -> Path:
    """The demo's DXF with a rectangle (x0, y0, x1, y1) [um] on a layer BED_FLOOR."""
    import ezdxf

    doc = ezdxf.readfile(dxf)
    x0, y0, x1, y1 = box
    doc.modelspace().add_lwpolyline(
        [(x0, y0), (x1, y0), (x1, y1), (x0, y1)], close=True, dxfattribs={"layer": "BED_FLOOR"}
    )
    doc.saveas(out)
    return out


@pytest.mark.slow
def test_region_statistics_cover_the_floor_inside_the_layers_polygons(demo, tmp_path) -> None:
    import shapely

    results, _, dxf, _ = demo
    mask = read_mask(dxf)
    floor = mask.geometry
    for p in mask.ports:  # the punched holes are not floor
        floor = floor.difference(shapely.Point(p.x, p.y).buffer(p.diameter / 2))
    x0, y0, x1, y1 = floor.bounds
    box = (x0 + 0.35 * (x1 - x0), y0, x0 + 0.65 * (x1 - x0), y1)  # the middle of the bed [m]
    marked = _with_region(dxf, tmp_path / "marked.dxf", [v * 1e6 for v in box])
    whole = (x0 - 1e-3, y0 - 1e-3, x1 + 1e-3, y1 + 1e-3)
    covered = _with_region(dxf, tmp_path / "whole.dxf", [v * 1e6 for v in whole])
    args = ["--flow", "12uL/min", "--cell-type", "endothelial"]
    result, part = analyse(str(marked), "--region", "BED_FLOOR", *args)
    assert result.exit_code == 0, result.output
    result, every = analyse(str(covered), "--region", "BED_FLOOR", *args)
    assert result.exit_code == 0, result.output
    # the region's floor is the channel floor inside the rectangle (shapely, independently)
    inside = floor.intersection(shapely.box(*box)).area
    assert part["region"]["area"] == pytest.approx(inside, rel=0.02)
    # the region layer is not read as channels: the floor and the resistance are unchanged
    assert part["area"] == pytest.approx(every["area"], rel=1e-9)
    plain = analyse(str(dxf), *args)[1]
    assert part["resistance"] == pytest.approx(plain["resistance"], rel=1e-9)
    # a region over the whole chip has the whole floor's statistics
    r = every["region"]
    assert r["area"] == pytest.approx(every["area"], rel=1e-9)
    assert (r["p05"], r["p50"], r["p95"]) == pytest.approx(
        (every["floor_shear"]["p05"], every["floor_shear"]["p50"], every["floor_shear"]["p95"])
    )
    assert r["outside"] == pytest.approx(every["area_outside_window"])
    # the bed's middle: straight bed channels, whose floor shear peaks mid-channel at the
    # network's floor shear and falls to zero at the side walls
    bed = next(g for g in results["generations"] if g["role"] == "bed")
    assert part["region"]["p05"] < part["region"]["p50"] < part["region"]["p95"]
    assert part["region"]["p95"] == pytest.approx(bed["wall_shear_floor"], rel=0.1)
    missing = CliRunner().invoke(main, ["analyse", str(marked), "--region", "NONE", *args])
    assert missing.exit_code == 2 and "NONE" in missing.output
