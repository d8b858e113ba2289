"""`chipflow check` on explicit-network designs, through click's test runner."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from click.testing import CliRunner

from chipflow.cli import main
from chipflow.cli.check import SI_UNITS

EXAMPLE = Path(__file__).resolve().parents[1] / "designs" / "bench_loop_network.toml"
CHANNEL_KEYS = {
    "name", "from", "to", "flow", "pressure_drop", "mean_velocity", "wall_shear_floor",
    "wall_shear_mean", "wall_shear_max", "reynolds", "residence_time",
}  # fmt: skip


def run(*args: str):
    return CliRunner().invoke(main, ["check", *args])


def test_example_table_in_lab_units() -> None:
    result = run(str(EXAMPLE))
    # the example's branches differ on purpose: the uneven bed fails, as in `chipflow build`
    assert result.exit_code == 1, result.output
    assert "FAIL bed flow uniformity" in result.output
    out = result.output
    for word in ("feed tubing", "bridge", "culture a", "uL/min", "[um]", "[mm/s]", "[Pa]", "[s]"):
        assert word in out
    assert "generations" in out
    rows = {line.split()[0]: line.split() for line in out.splitlines() if line.strip()}
    assert {"d0", "d1", "bed", "c1", "c0"} <= set(rows)
    assert rows["bed"][-1] == "FAIL"  # the failing uniformity check grades the bed


def test_example_json_structure_and_values() -> None:
    result = run(str(EXAMPLE), "--json")
    assert result.exit_code == 1, result.output
    data = json.loads(result.output)
    assert set(data) == {
        "design", "fluid", "nodes", "channels", "ports", "units", "checks", "status", "warnings",
        "residual",
    }  # fmt: skip
    assert data["residual"]["mass_residual"] <= data["residual"]["residual_tolerance"]
    assert data["warnings"] == []
    assert data["status"] == "fail"
    assert data["design"] == "bench loop"
    assert set(data["fluid"]) >= {"viscosity", "density"}
    assert all(set(c) == CHANNEL_KEYS for c in data["channels"])
    assert all(set(n) == {"name", "pressure"} for n in data["nodes"])
    assert set(data["units"]) == set(SI_UNITS)
    ports = {p["node"]: p for p in data["ports"]}
    nodes = {n["name"]: n["pressure"] for n in data["nodes"]}
    channels = {c["name"]: c for c in data["channels"]}
    rho, mu = data["fluid"]["density"], data["fluid"]["viscosity"]
    q = 5e-9 / 60  # the syringe pump's 5 uL/min
    assert ports["pump"]["flow"] == pytest.approx(q, rel=1e-12)
    assert ports["reservoir"]["flow"] == pytest.approx(-q, rel=1e-12)
    # Outlet reservoir 1 cm of liquid: rho g h, analytic hydrostatics (source of g: standard
    # gravity 9.80665 m/s^2, CGPM 1901).
    assert nodes["reservoir"] == pytest.approx(rho * 9.80665 * 0.01, rel=1e-12)
    # Feed tubing: Hagen-Poiseuille (analytic), 128 mu L Q / (pi d^4), 30 cm of 0.51 mm bore.
    dp = 128 * mu * 0.30 * q / (math.pi * 0.51e-3**4)
    assert channels["feed tubing"]["pressure_drop"] == pytest.approx(dp, rel=1e-9)
    assert nodes["pump"] - nodes["inlet"] == pytest.approx(dp, rel=1e-9)
    # Mass conservation where the loop closes: into a_in = out of a_in.
    inflow = channels["branch a"]["flow"]
    outflow = channels["bridge"]["flow"] + channels["culture a"]["flow"]
    assert inflow == pytest.approx(outflow, rel=1e-12)
    assert channels["bridge"]["flow"] > 0  # the shorter branch a feeds branch b's side


TWO_CHANNELS = """
[[channels]]
name = "c1"
from = "a"
to = "b"
width = "100 um"
depth = "50 um"
length = "5 mm"
[[channels]]
name = "c2"
from = "x"
to = "y"
width = "100 um"
depth = "50 um"
length = "5 mm"
"""


def port(node: str, line: str) -> str:
    return f'[[ports]]\nnode = "{node}"\n{line}\n'


ERRORS = {
    "no path": (
        TWO_CHANNELS + port("a", 'pressure = "1 kPa"') + port("b", 'pressure = "0 Pa"'),
        "nodes x, y has no path to a pressure port",
    ),
    "only flow": (
        TWO_CHANNELS.split('[[channels]]\nname = "c2"')[0]
        + port("a", 'flow = "1 uL/min"')
        + port("b", 'flow = "-1 uL/min"'),
        "only flow ports (a, b) so the pressure level is undetermined",
    ),
    "cannot balance": (
        TWO_CHANNELS + port("a", 'pressure = "0 Pa"') + port("x", 'flow = "1 uL/min"'),
        "flow ports cannot balance",
    ),
    "self loop": (
        TWO_CHANNELS.replace('to = "y"', 'to = "x"') + port("a", 'pressure = "0 Pa"'),
        "channels[1].to: the channel starts and ends at the same node 'x'",
    ),
    "unknown node": (
        TWO_CHANNELS + port("z", 'pressure = "0 Pa"'),
        "ports[0].node: unknown node 'z'",
    ),
    "non-positive size": (
        TWO_CHANNELS.replace('depth = "50 um"', 'depth = "-50 um"', 1),
        "channels[0].depth: must be greater than zero",
    ),
    "duplicate name": (
        TWO_CHANNELS.replace('"c2"', '"c1"'),
        "channels[1].name: duplicated name 'c1'",
    ),
    "tree design without generations": (
        '[tree]\nflow = "5 uL/min"\n',
        "give exactly one of generations, bed_channels and splits",
    ),
    "nothing to check": ('name = "empty"\n', "nothing to check"),
}


@pytest.mark.parametrize("case", sorted(ERRORS))
def test_errors_exit_2_with_one_line(case: str, tmp_path: Path) -> None:
    text, message = ERRORS[case]
    path = tmp_path / "chip.toml"
    path.write_text(text)
    result = run(str(path))
    assert result.exit_code == 2, result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("chipflow: error:")
    assert message in lines[0]
    assert "Traceback" not in result.output + result.stderr


def test_missing_file_exits_2(tmp_path: Path) -> None:
    result = run(str(tmp_path / "absent.toml"), "--json")
    assert result.exit_code == 2
    assert "no such design file" in result.stderr


def test_check_and_build_agree_on_every_bundled_design(bundled_builds) -> None:
    """check draws the chip in memory: the same verdict, exit status and chip inlet pressure
    as build, for trees and explicit networks alike."""
    for path in sorted(EXAMPLE.parent.glob("*.toml")):
        built, _ = bundled_builds[path.name]
        checked = run(str(path), "--json")
        data = json.loads(checked.output)
        assert data["status"] == built.status, path.name
        assert checked.exit_code == (1 if built.status == "fail" else 0), path.name
        if "totals" in data:  # tree designs
            assert data["totals"]["chip_inlet_pressure"] == pytest.approx(
                built.results["totals"]["chip_inlet_pressure"], rel=1e-12
            )
            assert data["totals"]["inlet_pressure"] > 0
