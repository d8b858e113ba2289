"""`chipflow channel` through click's test runner."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from chipflow.cli import main
from chipflow.cli.channel import SI_UNITS

ARGS = ["channel", "--width", "200um", "--depth", "50um", "--length", "10mm", "--flow", "5uL/min"]


def run(args: list[str]):
    return CliRunner().invoke(main, args)


def test_table_in_lab_units() -> None:
    result = run([*ARGS, "--fluid", "water", "--temperature", "20degC"])
    assert result.exit_code == 0, result.output
    # Hand check with the 1 - 0.630 h/w approximation (Bruus 2008; 0.06 % from the series at
    # h/w = 0.25): dp = 12 mu L Q / (w h^3 (1 - 0.63/4)) with mu = 1.0016 mPa s -> 475.6 Pa.
    assert "475." in result.output
    assert "uL/min" in result.output and "dyn/cm^2" in result.output


def test_json_keys_and_values() -> None:
    result = run([*ARGS, "--json", "--viscosity", "1mPa*s"])
    assert result.exit_code == 0
    data = json.loads(result.output)
    assert set(data) == set(SI_UNITS) | {"units", "warnings"}
    assert data["warnings"] == []  # Re 0.03, entrance length 0.4 % of the channel
    assert set(data["units"]) == set(SI_UNITS)
    assert data["flow"] == pytest.approx(5e-9 / 60)
    assert data["viscosity"] == 1e-3
    # Analytic: tau_max = 1.183 * 6 mu Q / (w h^2) at h/w = 0.25 (REFERENCES.md section 1).
    assert data["wall_shear_max"] == pytest.approx(
        1.183 * 6e-3 * 5e-9 / 60 / 200e-6 / 50e-6**2, rel=1e-3
    )
    assert data["pressure_drop"] == pytest.approx(data["flow"] * data["hydraulic_resistance"])


def test_pressure_driven_matches_flow_driven() -> None:
    by_flow = json.loads(run([*ARGS, "--json"]).output)
    result = run([*ARGS[:-2], "--pressure", f"{by_flow['pressure_drop']}Pa", "--json"])
    assert json.loads(result.output)["flow"] == pytest.approx(by_flow["flow"], rel=1e-12)


def test_round_tube() -> None:
    result = run(
        [
            "channel",
            "--width",
            "1mm",
            "--diameter",
            "0.5mm",
            "--length",
            "30cm",
            "--flow",
            "10uL/min",
            "--json",
        ]
    )
    data = json.loads(result.output)
    # Hagen-Poiseuille (analytic): R = 8 mu L / (pi r^4)
    assert data["hydraulic_resistance"] == pytest.approx(
        8 * data["viscosity"] * 0.3 / (3.141592653589793 * 0.25e-3**4), rel=1e-12
    )


@pytest.mark.parametrize(
    "args",
    [
        ["channel", "--width", "200um", "--depth", "50um", "--length", "10mm"],
        [*ARGS, "--pressure", "1kPa"],
        [*ARGS[:2], "-200um", *ARGS[3:]],
        ["channel", "--width", "200um", "--depth", "50um", "--length", "10mm", "--flow", "5mm"],
        ["channel", "--width", "200", "--depth", "50um", "--length", "10mm", "--flow", "5uL/min"],
        ["channel", "--depth", "50um", "--length", "10mm", "--flow", "5uL/min"],
        [*ARGS, "--fluid", "blood"],
    ],
)
def test_bad_input_is_one_line_exit_2(args) -> None:
    result = CliRunner().invoke(main, args)
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("chipflow: error:")
