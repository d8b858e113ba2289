"""`chipflow build`, `demo` and `new` end to end: every bundled design builds, its results are
consistent with the network solution, outputs are complete, atomic and reproducible."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner

from chipflow.build import build_design
from chipflow.checks import cell_types
from chipflow.cli import main
from chipflow.errors import ExportError
from chipflow.export.bundle import build_to_folder, output_names

ROOT = Path(__file__).resolve().parents[1]
DESIGNS = sorted((ROOT / "designs").glob("*.toml"))
TREE_DESIGNS = [p for p in DESIGNS if "[tree]" in p.read_text()]
DEMO = ROOT / "designs" / "demo_endothelial_bed.toml"

GENERATION_KEYS = {
    "generation", "role", "count", "width", "depth", "length", "total_area", "flow_per_channel",
    "mean_velocity", "wall_shear_floor", "wall_shear_mean", "wall_shear_max", "reynolds",
    "residence_time", "pressure_drop",
}  # fmt: skip


@pytest.fixture(scope="module")
def built(bundled_builds) -> dict[str, tuple]:
    """Each bundled design built once into its own folder (shared with other test files)."""
    return bundled_builds


def run(*args: str):
    return CliRunner().invoke(main, list(args))


def test_there_are_the_three_kinds_of_bundled_design() -> None:
    texts = {p.name: p.read_text() for p in DESIGNS}
    single = [n for n, t in texts.items() if "[tree]" in t and 'depths = ["50 um"]' in t]
    multi = [n for n, t in texts.items() if "[tree]" in t and 'depths = ["50 um", "100 um"]' in t]
    explicit = [n for n, t in texts.items() if "[[tubes]]" in t and "head" in t]
    assert single and multi and explicit


def test_demo_copy_in_the_package_is_the_designs_file() -> None:
    packaged = ROOT / "chipflow" / "data" / "demo.toml"
    assert packaged.read_bytes() == DEMO.read_bytes()


@pytest.mark.parametrize("path", DESIGNS, ids=lambda p: p.stem)
def test_every_design_builds_with_complete_results(built, path: Path) -> None:
    build, files = built[path.name]
    assert [f.name for f in files] == output_names(build)
    assert all(f.is_file() and f.stat().st_size > 0 for f in files)
    data = json.loads((files[0].parent / "results.json").read_text())
    assert {"design", "fluid", "supply", "totals", "generations", "checks", "fabrication",
            "units"} <= set(data)  # fmt: skip
    assert data["design"]["sha256"] == build.source.sha256
    for key in ("name", "viscosity", "density", "temperature"):
        assert key in data["fluid"]
    for key in ("inlet_pressure", "total_flow", "total_resistance", "transit_time"):
        assert key in data["totals"]
    for row in data["generations"]:
        assert GENERATION_KEYS <= set(row)
    for check in data["checks"]:
        assert {"name", "status", "value", "limit", "source", "message"} <= set(check)
        assert check["status"] in ("pass", "warn", "fail") and check["source"]


@pytest.mark.parametrize("path", TREE_DESIGNS, ids=lambda p: p.stem)
def test_results_agree_with_the_network_solution(built, path: Path) -> None:
    build, files = built[path.name]
    data = json.loads((files[0].parent / "results.json").read_text())
    rows = data["generations"]
    total = data["totals"]["total_flow"]
    # Mass conservation (continuity): every generation in series carries the total flow (a
    # culture region's generations their region's share of it, as solved).
    share = {r["name"]: r["flow_fraction"] for r in data["regions"]}
    share[""] = 1.0
    for row in rows:
        flow = total * share[row["region"]]
        assert row["count"] * row["flow_per_channel"] == pytest.approx(flow, rel=1e-9)
        assert row["mean_velocity"] * row["total_area"] == pytest.approx(flow, rel=1e-9)
    # The generation pressure drops along one path add up to the inlet-to-outlet drop.
    sol = build.solution
    net = sol.network
    p_in = sol.pressure[net.node_index("inlet")]
    p_out = sol.pressure[net.node_index("outlet")]
    path_rows = [r for r in rows if r["region"] in ("", data["regions"][0]["name"])]
    # (a chamber a tree ends in: from the mean of its inlet ports to the mean of its outlets)
    chamber = sum(c["pressure_in"] - c["pressure_out"] for c in data.get("chambers") or [])
    drops = sum(r["pressure_drop"] for r in path_rows) + chamber
    assert drops == pytest.approx(p_in - p_out, rel=1e-9)
    # The drawing is what the solver sees: bed channel lengths in the results are the drawn ones
    # (a tree that ends in a chamber: its last generation's).
    last = max(r["generation"] for r in rows)
    beds = [r for r in rows if r["role"] == "bed"] or [r for r in rows if r["generation"] == last]
    bed = beds[0]
    drawn = build.layout.channels
    mine = (drawn.role == bed["role"]) & (drawn.generation == bed["generation"])
    if drawn.region is not None:  # the first culture region's bed
        mine &= drawn.region == bed["region"]
    if data.get("mesh"):  # a mesh bed: chains of segments, with the rows' junction corrections
        solved = net.length[net.role == "bed"].sum() / bed["count"]
        assert bed["length"] == pytest.approx(solved, rel=1e-12)
        rows_width = data["mesh"]["rows"] * bed["width"]
        assert bed["length"] == pytest.approx(
            drawn.length[mine].sum() / bed["count"], abs=rows_width
        )
        return
    assert bed["length"] == pytest.approx(drawn.length[mine].mean(), rel=1e-12)


def test_channel_csv_has_one_row_per_channel(built) -> None:
    build, files = built[DEMO.name]
    lines = (files[0].parent / "channels.csv").read_text().splitlines()
    assert len(lines) == 1 + build.solution.network.n_channels
    assert lines[0].startswith("channel,role,generation,from,to,width [m]")


def test_report_holds_cautions_settings_checks_and_figures(built) -> None:
    build, files = built[DEMO.name]
    html = (files[0].parent / "report.html").read_text()
    for text in ("Cautions", "biosafety", "bead", "polarity", "MASK", "floor shear"):
        assert text.lower() in html.lower(), text
    assert html.count("<svg") >= 3  # profile, layout, shear map
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//)""", html)  # offline


def test_demo_command_and_console_table(tmp_path: Path) -> None:
    result = run("demo", "-o", str(tmp_path / "demo"))
    assert result.exit_code == 0, result.output
    assert "bed" in result.output and "checks:" in result.output
    assert (tmp_path / "demo" / "report.html").is_file()


def test_shear_window_violation_exits_1_with_outputs_written(tmp_path: Path) -> None:
    # Size within 0.5-1.0 Pa but declare a 0.1-0.3 Pa culture window (an invented override of
    # the endothelial row, Dewey et al. 1981): the floor-shear checks must fail.
    text = DEMO.read_text().replace(
        'shear_kind = "floor"', 'shear_kind = "floor"\nshear_min = "0.5 Pa"\nshear_max = "1 Pa"'
    ).replace('cell_type = "endothelial"', 'cell_type = "endothelial"\nshear_max = "0.3 Pa"\n'
              'shear_min = "0.1 Pa"')  # fmt: skip
    design = tmp_path / "narrow.toml"
    design.write_text(text)
    result = run("build", str(design), "-o", str(tmp_path / "out"))
    assert result.exit_code == 1, result.output
    assert "FAIL floor shear" in result.output
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    assert data["status"] == "fail"
    failed = [c["name"] for c in data["checks"] if c["status"] == "fail"]
    assert any(name.startswith("floor shear") for name in failed)


def test_malformed_design_exits_2_and_writes_nothing(tmp_path: Path) -> None:
    design = tmp_path / "bad.toml"
    design.write_text(DEMO.read_text().replace('flow = "12 uL/min"', 'flow = "12 uL"'))
    result = run("build", str(design), "-o", str(tmp_path / "out"))
    assert result.exit_code == 2
    assert result.stderr.count("\n") == 1 and "bad.toml: tree.flow" in result.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml"]


def test_failure_inside_an_exporter_leaves_the_output_folder_as_it_was(
    tmp_path: Path, monkeypatch
) -> None:
    out = tmp_path / "out"
    build_to_folder(DEMO, out)
    before = {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in out.iterdir()}

    def broken(*args, **kwargs):
        raise ExportError("disk full (injected)")

    monkeypatch.setattr("chipflow.export.gds.write_gds", broken)
    with pytest.raises(ExportError, match="injected"):
        build_to_folder(DEMO, out)
    after = {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in out.iterdir()}
    assert after == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]  # no staging left behind


@pytest.mark.parametrize("path", DESIGNS, ids=lambda p: p.stem)
def test_two_builds_give_identical_bytes(built, tmp_path: Path, path: Path) -> None:
    _, first = built[path.name]
    _, second = build_to_folder(path, tmp_path / "again")
    assert [f.name for f in first] == [f.name for f in second]
    for a, b in zip(first, second, strict=True):
        assert a.read_bytes() == b.read_bytes(), a.name


def test_new_writes_a_starter_that_builds(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    assert run("new", "liver-bed").exit_code == 0
    assert run("new", "liver-bed").exit_code == 2  # never over an existing file
    build = build_design(tmp_path / "liver-bed.toml")
    assert build.name == "liver-bed" and build.status in ("pass", "warn")


def test_cell_type_table_rows_all_cite_a_source() -> None:
    assert all(row.source.strip() for row in cell_types().values())


def test_demo_mask_files_read_back_clean(built) -> None:
    # The demo's own DXF and GDSII pass the exporters' read-back checks (issue 6): ezdxf's
    # audit, closed hole-free non-overlapping valid shapes whose union is the drawn mask
    # within perimeter x grid, and the same layers and areas read back by gdstk.
    import ezdxf
    import gdstk
    import shapely
    from test_export_dxf import mask_polygons

    build, files = built[DEMO.name]
    layout = build.layout
    folder = files[0].parent
    doc = ezdxf.readfile(folder / "demo-endothelial-bed.dxf")
    assert not doc.audit().has_errors
    cells = gdstk.read_gds(folder / "demo-endothelial-bed.gds").cells
    assert len(cells) == 1
    for level, mask in enumerate(layout.layers, start=1):
        pieces = mask_polygons(doc, mask.name)
        assert pieces and all(p.is_valid and not p.interiors for p in pieces)
        union = shapely.union_all(pieces)
        assert sum(p.area for p in pieces) == pytest.approx(union.area, rel=1e-12)
        target = mask.geometry
        assert shapely.symmetric_difference(union, target).area <= target.length * layout.grid
        gds = [p for p in cells[0].polygons if p.layer == level]
        assert sum(p.area() for p in gds) * 1e-12 == pytest.approx(target.area, rel=1e-9)
        assert max(len(p.points) for p in gds) <= 8190


def test_version_and_every_help_shows_an_example() -> None:
    assert run("--version").output.startswith("chipflow ")
    for command in ("channel", "size", "check", "build", "demo", "new"):
        result = run(command, "--help")
        assert result.exit_code == 0 and "Example" in result.output, command


def test_a_piped_build_keeps_stderr_empty(tmp_path: Path) -> None:
    # progress is shown only on a terminal; CliRunner's stderr is not one
    result = run("build", str(DEMO), "-o", str(tmp_path / "out"))
    assert result.exit_code == 0 and result.stderr == ""


def test_supply_tubing_drop_is_hagen_poiseuille(built) -> None:
    # Analytic: Hagen-Poiseuille, dp = 128 mu L Q / (pi d^4), for the demo's 30 cm of 0.5 mm
    # tubing between the syringe pump and the inlet port.
    import math

    build, _ = built[DEMO.name]
    sol = build.solution
    net = sol.network
    mu, q = build.fluid.viscosity, build.results["totals"]["total_flow"]
    drop = sol.pressure[net.node_index("pump")] - sol.pressure[net.node_index("inlet")]
    assert drop == pytest.approx(128 * mu * 0.30 * q / (math.pi * 0.5e-3**4), rel=1e-12)
    assert build.results["totals"]["inlet_pressure"] == pytest.approx(
        sol.pressure[net.node_index("pump")], rel=1e-12
    )


def test_round_tube_trees_are_refused_by_the_drawing(tmp_path: Path) -> None:
    # Round channels size a Murray's-law comparison; a moulded chip cannot have them.
    design = tmp_path / "round.toml"
    design.write_text(
        DEMO.read_text().replace('rule = "equal-shear"', 'rule = "equal-shear"\nshape = "round"')
    )
    result = run("build", str(design), "-o", str(tmp_path / "out"))
    assert result.exit_code == 2
    assert "round.toml" in result.stderr and "cannot be drawn" in result.stderr
    assert not (tmp_path / "out").exists()
    checked = run("check", str(design))
    assert checked.exit_code == 0  # the comparison itself still works
    assert "lengths are nominal" in checked.output  # and says it was not drawn
