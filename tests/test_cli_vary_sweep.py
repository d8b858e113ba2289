"""`chipflow vary` and `chipflow sweep` end to end: outputs, reproducibility, every bundled tree
design, each sweep point equal to its own build, and bad input (exit 2, one line, nothing
written)."""

from __future__ import annotations

import csv
import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from chipflow.build import build_design, read_design_source
from chipflow.cli import main
from chipflow.errors import DesignError, SpecError
from chipflow.spec.reader import parse_design_text
from chipflow.spec.tolerances import read_tolerances
from chipflow.variation.grid import parse_axis
from chipflow.variation.sweep import ROW_KEYS, point_row, sweep_design

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "designs" / "demo_endothelial_bed.toml"
TREE_DESIGNS = sorted(p for p in (ROOT / "designs").glob("*.toml") if "[tree]" in p.read_text())


def run(*args: str):
    return CliRunner().invoke(main, list(args))


# -- vary ------------------------------------------------------------------------------------
def test_vary_writes_report_results_and_a_figure_per_level(tmp_path: Path) -> None:
    out = tmp_path / "tol"
    args = [str(DEMO), "--depth-tolerance", "10%", "--width-tolerance", "2um", "--samples", "400"]
    result = run("vary", *args, "-o", str(out))
    assert result.exit_code == 0, result.output
    assert "yield" in result.output and "worst corner" in result.output
    data = json.loads((out / "results.json").read_text())
    assert data["samples"] == 400 and data["seed"] == 0 and 0.0 <= data["yield"] <= 1.0
    for level in data["levels"]:
        assert {"generation", "role", "floor_shear", "residence_time", "pressure_drop"} <= set(
            level
        )
        p = level["floor_shear"]
        assert p["p05"] <= p["p50"] <= p["p95"]
        assert (out / f"shear-{level['label']}.svg").is_file()  # the demo seeds every level
    assert data["units"]["floor_shear"] == "Pa"
    page = (out / "report.html").read_text()
    assert "Yield" in page
    figure = (out / "shear-bed.svg").read_text()
    for entry in ("median (p50)", "p05 and p95", "nominal design"):  # the legend names the lines
        assert entry in figure
    for table in re.findall(r"<table>(.*?)</table>", page, flags=re.DOTALL):
        header, *rows = re.findall(r"<tr[^>]*>(.*?)</tr>", table, flags=re.DOTALL)
        width = header.count("<th")
        assert rows and all(row.count("<td") == width for row in rows), header
    # the same seed gives the same bytes
    again = tmp_path / "again"
    assert run("vary", *args, "-o", str(again)).exit_code == 0
    for name in ("results.json", "report.html", "shear-bed.svg"):
        assert (out / name).read_bytes() == (again / name).read_bytes()


def test_vary_draws_only_the_seeded_levels(tmp_path: Path) -> None:
    out = tmp_path / "tol"
    args = [str(DEMO), "--set", "culture.seeded=bed", "--samples", "50", "-o", str(out)]
    result = run("vary", *args)
    assert result.exit_code == 0, result.output
    levels = json.loads((out / "results.json").read_text())["levels"]
    assert [lv["label"] for lv in levels if lv["seeded"]] == ["bed"] and len(levels) > 5
    assert sorted(p.name for p in out.glob("shear-*.svg")) == ["shear-bed.svg"]
    page = (out / "report.html").read_text()
    assert page.count("<figure>") == 1
    assert page.count("<tr>") > len(levels)  # the tables still list every level


def test_vary_json_prints_the_results_and_nothing_on_stderr(tmp_path: Path) -> None:
    result = CliRunner().invoke(
        main,
        ["vary", str(DEMO), "--depth-tolerance", "5um", "--samples", "50", "--json"]
        + ["-o", str(tmp_path / "o")],
    )
    assert result.exit_code == 0
    data = json.loads(result.stdout)
    assert data["tolerances"]["depth"] == pytest.approx(5e-6)
    assert data["tolerances"]["depth_kind"] == "length"
    assert result.stderr == ""  # no progress bar when not on a terminal


def test_tolerances_section_gives_the_defaults_and_options_override(tmp_path: Path) -> None:
    section = (
        '\n[tolerances]\ndepth = "8 %"\nwidth = "1.5 um"\nflow = "3 %"\nviscosity = 0.04\n'
        'distribution = "normal"\nsamples = 30\nseed = 4\n'
    )
    text = DEMO.read_text() + section
    design = tmp_path / "d.toml"
    design.write_text(text)
    assert build_design(design).status == "pass"  # the build accepts the section
    result = run("vary", str(design), "--flow-tolerance", "1%", "--json", "-o", str(tmp_path / "o"))
    data = json.loads(result.stdout)
    assert data["samples"] == 30 and data["seed"] == 4
    assert data["tolerances"]["depth"] == pytest.approx(0.08)
    assert data["tolerances"]["flow"] == pytest.approx(0.01)
    assert data["tolerances"]["width"] == pytest.approx(1.5e-6)
    assert data["tolerances"]["viscosity"] == pytest.approx(0.04)
    assert data["distribution"] == "normal"


BAD_SECTION = {
    'depth = "-1 %"': "cannot be negative",
    'depth = "1.2"': "below 100 %",
    'depth = "5 uL/min"': "fraction such as",
    'width = "3 %"': "expected a length",
    'flow = "2 um"': "wrong kind of unit",
    'viscosity = "100 %"': "below 100 %",
    'distribution = "flat"': "unknown value",
    "samples = 0": "at least 1",
    "samples = 2.5": "whole number",
    "seed = -1": "at least 0",
}


@pytest.mark.parametrize("line", BAD_SECTION)
def test_tolerances_section_values_are_validated(line: str) -> None:
    top = parse_design_text(f"[tolerances]\n{line}\n", "t.toml")
    with pytest.raises(SpecError, match=BAD_SECTION[line]):
        read_tolerances(top)


@pytest.mark.parametrize(
    "path",
    # a tree into a chamber: vary re-solves its 16-port chamber twice (about 20 s; the
    # model is checked on a small chamber in test_chamber_bed.py)
    [pytest.param(p, marks=pytest.mark.slow) if "chamber" in p.stem else p for p in TREE_DESIGNS],
    ids=lambda p: p.stem,
)
def test_vary_and_sweep_work_on_every_bundled_tree_design(path: Path, tmp_path: Path) -> None:
    result = run(
        "vary", str(path), "--depth-tolerance", "5%", "--width-tolerance", "1um",
        "--flow-tolerance", "2%", "--viscosity-tolerance", "5%", "--samples", "100",
        "-o", str(tmp_path / "v"),
    )  # fmt: skip
    assert result.exit_code == 0, result.output
    data = json.loads((tmp_path / "v" / "results.json").read_text())
    build = build_design(path)
    assert len(data["levels"]) == len(build.results["generations"])
    flow = parse_design_text(path.read_text(), str(path)).table("tree").data["flow"]
    number, unit = re.match(r"([\d.]+)\s*(.*)", flow).groups()
    axis = f"tree.flow={float(number) * 0.9:g}{unit}..{float(number) * 1.1:g}{unit}:2"
    result = run("sweep", str(path), "--vary", axis, "-o", str(tmp_path / "s"))
    assert result.exit_code == 0, result.output
    rows = list(csv.DictReader((tmp_path / "s" / "sweep.csv").open()))
    assert len(rows) == 2 and (tmp_path / "s" / "sweep.svg").is_file()


# -- sweep -------------------------------------------------------------------------------------
def test_each_sweep_point_equals_a_separate_build_of_that_design(tmp_path: Path) -> None:
    axes = [
        parse_axis("tree.flow=5uL/min..13uL/min:3"),
        parse_axis("fabrication.depths=[50um],[60um]"),
    ]
    sweep = sweep_design(read_design_source(DEMO), axes, workers=1)
    assert len(sweep.rows) == 6
    text = DEMO.read_text()
    for row in sweep.rows:
        flow, depths = row["values"]
        edited = text.replace('flow = "12 uL/min"', f'flow = "{flow}"').replace(
            'depths = ["50 um"]', f'depths = ["{depths[1:-1]}"]'
        )
        design = tmp_path / "point.toml"
        design.write_text(edited)
        if row["status"] == "error":
            # the same refusal as the build: 60 um is too deep for the bed at these flows
            with pytest.raises(DesignError):
                build_design(design)
            assert "tall-wall" in row["message"]
            continue
        build = build_design(design, field=False)  # a sweep point is built without its field
        separate = point_row(build)
        for key in ROW_KEYS:
            assert row[key] == separate[key], key
        assert row["status"] == build.status
        assert row["supply_pressure"] == build.results["totals"]["inlet_pressure"]
    assert {r["status"] for r in sweep.rows} >= {"pass", "error"}
    # the heat map names the reason of the point not built, not just its status
    from chipflow.report.figures import svg_text
    from chipflow.report.sweep import heat_map

    svg = svg_text(heat_map(sweep))
    error = next(r for r in sweep.rows if r["status"] == "error")
    assert "not built [1]" in svg and "n/a" not in svg
    assert "[1] not built: generation" in svg and "tall-wall" in svg
    assert error["message"].split(": ", 1)[1][:40] in svg


def test_sweep_csv_and_heat_map(tmp_path: Path) -> None:
    result = run(
        "sweep", str(DEMO), "--vary", "tree.flow=8uL/min..14uL/min:4",
        "--vary", "fabrication.depths=[45um],[50um]", "-o", str(tmp_path / "s"),
    )  # fmt: skip
    assert result.exit_code == 0, result.output
    rows = list(csv.DictReader((tmp_path / "s" / "sweep.csv").open()))
    assert len(rows) == 8
    assert rows[0]["tree.flow"] == "8 uL/min" and rows[0]["fabrication.depths"] == "[45um]"
    assert "worst_shear_margin [1]" in rows[0]
    svg = (tmp_path / "s" / "sweep.svg").read_text()
    assert svg.startswith("<?xml") and "worst margin to the window" in svg


def test_sweep_margin_is_the_distance_of_the_worst_seeded_level_to_the_window() -> None:
    build = build_design(DEMO)
    row = point_row(build)
    taus = [r["wall_shear_floor"] for r in build.results["generations"]]  # all levels seeded
    low, high = 0.5, 1.0  # endothelial window, Dewey et al. 1981 (the cell-type table)
    expected = min(min(t / low - 1, 1 - t / high) for t in taus)
    assert row["worst_shear_margin"] == pytest.approx(expected, rel=1e-12)


def test_grid_ranges_and_lists() -> None:
    assert parse_axis("tree.bed_channels=16,32,64").values == (16, 32, 64)
    assert parse_axis("tree.generations=3..6:4").values == (3, 4, 5, 6)
    assert parse_axis("tree.growth=1.2..1.8:4").values == (1.2, 1.4, 1.6, 1.8)
    assert parse_axis("tree.flow=5uL/min..0.02mL/min:2").values == ("5 uL/min", "20 uL/min")
    assert parse_axis("fabrication.depths=[40um, 80um]").values == (("40um", "80um"),)


@settings(max_examples=40, deadline=None)
@given(
    st.floats(min_value=0.1, max_value=100.0),
    st.floats(min_value=0.1, max_value=100.0),
    st.integers(min_value=2, max_value=30),
)
def test_a_range_holds_both_ends_and_equal_steps(a: float, b: float, n: int) -> None:
    if abs(a - b) < 1e-6 * max(a, b):
        return
    values = parse_axis(f"bed.gap={a!r}um..{b!r}um:{n}").values
    numbers = [float(v.split()[0]) for v in values]
    assert len(numbers) == n
    assert numbers[0] == pytest.approx(a, rel=1e-11) and numbers[-1] == pytest.approx(b, rel=1e-11)
    steps = [y - x for x, y in zip(numbers, numbers[1:], strict=False)]
    assert max(steps) - min(steps) <= 1e-9 * max(abs(a), abs(b))


# -- bad input ----------------------------------------------------------------------------------
BAD_VARY = {
    "flow tolerance of a length": ["--flow-tolerance", "2um"],
    "width tolerance as a fraction": ["--width-tolerance", "5%"],
    "negative depth tolerance": ["--depth-tolerance", "-5%"],
    "depth tolerance of 100 %": ["--depth-tolerance", "100%"],
    "depth tolerance deeper than the mould": ["--depth-tolerance", "50um"],
    "width bias wider than a channel": ["--width-tolerance", "40um"],
    "zero samples": ["--samples", "0"],
    "empty scheduler address": ["--scheduler", " "],
    "unknown distribution": ["--distribution", "triangular"],
}
BAD_SWEEP = {
    "unknown key": ["--vary", "tree.flw=5uL/min..20uL/min:4"],
    "unknown section": ["--vary", "pump.flow=5uL/min..20uL/min:4"],
    "empty range": ["--vary", "tree.flow=5uL/min..5uL/min:4"],
    "range of one point": ["--vary", "tree.flow=5uL/min..20uL/min:1"],
    "no values": ["--vary", "tree.flow="],
    "wrong unit": ["--vary", "tree.flow=5um..20um:3"],
    "three keys": ["--vary", "tree.flow=5uL/min,6uL/min", "--vary", "bed.gap=100um,120um",
                   "--vary", "chip.margin=3mm,4mm"],
}  # fmt: skip


def _bad(command: str, args: list[str], tmp_path: Path, design: Path = DEMO) -> None:
    out = tmp_path / "out"
    result = CliRunner().invoke(main, [command, str(design), *args, "-o", str(out)])
    assert result.exit_code == 2, result.output
    assert result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("chipflow: error:"), result.stderr
    assert not out.exists()
    assert not list(tmp_path.glob(".out-*"))  # no staging folder left behind


@pytest.mark.parametrize("case", BAD_VARY)
def test_vary_bad_input_exits_2_with_one_line_and_writes_nothing(case: str, tmp_path) -> None:
    _bad("vary", BAD_VARY[case], tmp_path)


@pytest.mark.parametrize("case", BAD_SWEEP)
def test_sweep_bad_input_exits_2_with_one_line_and_writes_nothing(case: str, tmp_path) -> None:
    _bad("sweep", BAD_SWEEP[case], tmp_path)


def test_vary_refuses_a_bad_section(tmp_path: Path) -> None:
    # (explicit networks are varied too: see test_drawn_network.py)
    design = tmp_path / "typo.toml"
    design.write_text(DEMO.read_text() + '\n[tolerances]\ndepht = "10 %"\n')
    _bad("vary", [], tmp_path, design)
    with pytest.raises(SpecError, match="did you mean 'depth'"):
        read_tolerances(read_design_source(design).top)


def test_vary_unreachable_scheduler_exits_2(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setattr("chipflow.variation.execute.PROBE_TIMEOUT", 1.0)
    _bad("vary", ["--samples", "10", "--scheduler", "tcp://127.0.0.1:9"], tmp_path)


def test_a_sweep_on_a_dask_cluster_equals_the_local_sweep(dask_scheduler) -> None:
    axes = [parse_axis("tree.flow=10uL/min..14uL/min:3")]
    source = read_design_source(DEMO)
    local = sweep_design(source, axes, workers=1)
    remote = sweep_design(source, axes, scheduler=dask_scheduler)
    assert remote.rows == local.rows


def test_the_starter_design_carries_tolerances_that_vary_uses(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    assert run("new", "mychip").exit_code == 0
    result = run("vary", "mychip.toml", "--samples", "20", "--json", "-o", "tol")
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert data["tolerances"]["depth"] == pytest.approx(0.10)
    assert data["tolerances"]["width"] == pytest.approx(2e-6)
    assert data["tolerances"]["flow"] == pytest.approx(0.02)
    assert data["tolerances"]["viscosity"] == pytest.approx(0.05)
