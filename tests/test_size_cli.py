"""``chipflow size``: width for a target wall shear, checked against the duct physics."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from chipflow.cli import main
from chipflow.physics import duct
from chipflow.physics.fluid import water


def run(*args):
    return CliRunner().invoke(main, list(args), standalone_mode=False, catch_exceptions=False)


def test_json_width_reproduces_target():
    """The width printed gives the target floor shear within 0.1 % when fed back through the
    exact series; with a wide channel it approaches the parallel-plate width 6 mu Q/(tau h^2)."""
    result = run(
        "size",
        "--flow",
        "20uL/min",
        "--depth",
        "20um",
        "--shear",
        "1Pa",
        "--fluid",
        "water",
        "--temperature",
        "25degC",
        "--json",
    )
    out = json.loads(result.output)
    mu = water(298.15).viscosity
    assert out["viscosity"] == pytest.approx(
        890.02e-6, rel=1e-4
    )  # source: IAPWS 2008 at 25 C (REFERENCES.md)
    tau = duct.wall_shear_floor(out["width"], 20e-6, 20e-9 / 60, mu)
    assert tau == pytest.approx(1.0, rel=1e-3)
    plates = 6 * mu * (20e-9 / 60) / (1.0 * (20e-6) ** 2)
    assert out["width"] == pytest.approx(plates, rel=0.02)  # analytic limit: plates, h/w ~ 0.003
    assert out["units"]["width"] == "m"


def test_table_lists_shears_and_velocity():
    result = run(
        "size", "--flow", "2uL/min", "--depth", "50um", "--shear", "0.75Pa", "--grid", "1um"
    )
    assert "width" in result.output and "130" in result.output
    assert "wall shear, floor centre" in result.output and "mean velocity" in result.output


def test_impossible_target_is_one_line_exit_2():
    runner = CliRunner()
    result = runner.invoke(
        main, ["size", "--flow", "2uL/min", "--depth", "50um", "--shear", "2e-6Pa"]
    )
    assert result.exit_code == 2
    assert "no channel 50 um deep" in result.output
