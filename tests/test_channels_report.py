"""Explicit networks in full: the per-channel table (console, report, CSV), the drawn schematic,
and the per-channel extremes of each tree generation; tidy numbers in the files."""

from __future__ import annotations

import csv
import json
import math
import re
from pathlib import Path

import numpy as np
import pytest

from chipflow.export.bundle import build_to_folder
from chipflow.report.console import console_summary
from chipflow.report.schematic import network_schematic, node_positions, shear_scale
from chipflow.units import lab_number, tidy

ROOT = Path(__file__).resolve().parents[1]
LOOP = ROOT / "designs" / "bench_loop_network.toml"
DEMO = ROOT / "designs" / "demo_endothelial_bed.toml"


@pytest.fixture(scope="module")
def loop(tmp_path_factory):
    return build_to_folder(LOOP, tmp_path_factory.mktemp("loop") / "out")


def _independent_loop_flows() -> dict[str, float]:
    """A dense nodal solve of the loop design written here, with resistances from outside
    formulas: 12 mu L / (w h^3 (1 - 0.630 h/w)) for the flat channels (Bruus 2008; under
    0.01 % from the series for h/w <= 0.4), 28.45 mu L / h^4 for the square bridge (Bruus
    2008) and Hagen-Poiseuille 128 mu L / (pi d^4) for the tubing. Returns flows [m^3/s]."""
    mu, rho, g = 0.95e-3, 1007.0, 9.80665  # medium at 37 C as the design uses (from memory)
    um, mm = 1e-6, 1e-3
    flat = {  # name: (from, to, width, length), all 50 um deep
        "trunk": ("inlet", "split", 400 * um, 3 * mm),
        "branch a": ("split", "a_in", 200 * um, 4 * mm),
        "branch b": ("split", "b_in", 200 * um, 7 * mm),
        "culture a": ("a_in", "a_out", 500 * um, 8 * mm),
        "culture b": ("b_in", "b_out", 500 * um, 8 * mm),
        "collector a": ("a_out", "join", 200 * um, 4 * mm),
        "collector b": ("b_out", "join", 200 * um, 4 * mm),
        "exit": ("join", "outlet", 400 * um, 3 * mm),
    }
    h = 50 * um
    edges = {
        n: (a, b, 12 * mu * L / (w * h**3 * (1 - 0.630 * h / w)))
        for n, (a, b, w, L) in flat.items()
    }  # noqa: E501
    edges["bridge"] = ("a_in", "b_in", 28.45 * mu * 1.5 * mm / h**4)
    d = 0.51 * mm
    edges["feed tubing"] = ("pump", "inlet", 128 * mu * 0.3 / (math.pi * d**4))
    edges["drain tubing"] = ("outlet", "reservoir", 128 * mu * 0.1 / (math.pi * d**4))
    nodes = sorted({n for a, b, _ in edges.values() for n in (a, b)})
    k = {n: i for i, n in enumerate(nodes)}
    G = np.zeros((len(nodes), len(nodes)))
    rhs = np.zeros(len(nodes))
    for a, b, r in edges.values():
        i, j = k[a], k[b]
        G[i, i] += 1 / r
        G[j, j] += 1 / r
        G[i, j] -= 1 / r
        G[j, i] -= 1 / r
    rhs[k["pump"]] = 5e-9 / 60
    res = k["reservoir"]
    G[res, :] = 0
    G[res, res] = 1
    rhs[res] = rho * g * 0.01
    p = np.linalg.solve(G, rhs)
    return {n: (p[k[a]] - p[k[b]]) / r for n, (a, b, r) in edges.items()}


def test_loop_per_channel_flows_match_an_independent_solve(loop) -> None:
    build, _ = loop
    rows = {c["channel"]: c for c in build.results["channels"]}
    expected = _independent_loop_flows()
    assert set(rows) == set(expected)  # every channel, the bridge included
    for name, q in expected.items():
        assert rows[name]["flow"] == pytest.approx(q, rel=2e-3), name


def test_loop_console_shows_every_channel_with_its_own_values(loop) -> None:
    build, _ = loop
    text = console_summary(build.results)
    rows = {c["channel"]: c for c in build.results["channels"]}
    table = text[text.index("channels (") :]
    for name in ("bridge", "branch a", "branch b", "culture a", "feed tubing"):
        line = next(li for li in table.splitlines() if li.startswith(name + " "))
        assert lab_number(rows[name]["flow"] * 6e10) in line
        assert lab_number(rows[name]["wall_shear_floor"]) in line
    # the two branches differ: the per-generation mean hides it, the channel rows do not
    assert rows["branch a"]["flow"] > 1.3 * rows["branch b"]["flow"]


def test_loop_report_and_csv_have_the_channels_and_the_schematic(loop) -> None:
    build, files = loop
    folder = files[0].parent
    page = (folder / "report.html").read_text()
    assert "<h2>Channels</h2>" in page and '<td class="text">bridge</td>' in page
    assert "The network: flows and floor wall shear" in page
    assert (folder / "network.svg").read_text().lstrip().startswith("<?xml")
    with (folder / "channels.csv").open() as f:
        names = [row["channel"] for row in csv.DictReader(f)]
    assert sorted(names) == sorted(c["channel"] for c in build.results["channels"])


def test_loop_generation_extremes_are_the_channel_extremes(loop) -> None:
    build, _ = loop
    rows = {c["channel"]: c for c in build.results["channels"]}
    d1 = next(
        g for g in build.results["generations"]
        if g["role"] == "distribution" and g["generation"] == 1
    )  # fmt: skip
    assert d1["flow_min"] == pytest.approx(rows["branch b"]["flow"], rel=1e-9)
    assert d1["flow_max"] == pytest.approx(rows["branch a"]["flow"], rel=1e-9)
    assert d1["wall_shear_floor_min"] <= d1["wall_shear_floor"] <= d1["wall_shear_floor_max"]


def test_tree_report_gains_the_per_channel_extremes(tmp_path: Path) -> None:
    build, files = build_to_folder(DEMO, tmp_path / "out")
    page = (files[0].parent / "report.html").read_text()
    assert "Per-channel extremes of each generation" in page
    for g in build.results["generations"]:
        # a symmetric tree: every channel of a level carries the same flow (to round-off)
        assert g["flow_max"] - g["flow_min"] <= 1e-9 * g["flow_max"]


def test_schematic_colours_are_floor_shear_on_the_window_scale(loop) -> None:
    build, _ = loop
    fig = network_schematic(build.results)
    (lines,) = [c for c in fig.axes[0].collections if c.get_array() is not None and
                len(c.get_array()) == len(build.results["channels"])]  # fmt: skip
    shear = [c["wall_shear_floor"] for c in build.results["channels"]]
    assert np.allclose(lines.get_array(), shear)
    window = {"min": 0.5, "max": 1.0}
    assert shear_scale(window, np.array([0.74, 0.80])) == (0.0, 2.0)


def test_node_positions_follow_the_flow() -> None:
    # a chain with a side branch: columns are chain lengths from the inlet
    up, down = np.array([0, 1, 2, 1]), np.array([1, 2, 3, 3])
    column, row = node_positions(up, down, 4, np.ones(4, bool))
    assert column.tolist() == [0, 1, 2, 3]
    assert (column[down] > column[up]).all()  # every flowing channel points downstream


def test_files_hold_no_float_noise(loop) -> None:
    _, files = loop
    folder = files[0].parent
    text = (folder / "channels.csv").read_text() + (folder / "results.json").read_text()
    assert "4.9999999999999996e-05" not in text and "5e-05" in text
    digits = [len(re.sub(r"[^0-9]", "", m).lstrip("0")) for m in re.findall(r"\d\.\d+", text)]
    assert max(digits) <= 13
    json.loads((folder / "results.json").read_text())


def test_tidy_and_lab_number() -> None:
    assert tidy(0.1 + 0.2) == 0.3 and tidy(float("nan")) is None
    assert lab_number(2.2377e4) == "22380" and lab_number(0.000123456) == "0.0001235"


def test_a_unit_error_names_the_design_file_once(tmp_path: Path) -> None:
    from click.testing import CliRunner

    from chipflow.cli import main

    design = tmp_path / "typo.toml"
    text = DEMO.read_text().replace('flow = "12 uL/min"', 'flow = "12 uL/mon"', 1)
    assert text != DEMO.read_text()
    design.write_text(text)
    for command in ("build", "check"):
        result = CliRunner().invoke(main, [command, str(design), "-o", str(tmp_path / "o")]
                                    if command == "build" else [command, str(design)])  # fmt: skip
        assert result.exit_code == 2
        assert result.stderr.count("typo.toml") == 1, result.stderr
        assert "unknown unit" in result.stderr
