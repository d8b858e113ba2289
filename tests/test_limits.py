"""Plausible ranges of every input (chipflow.limits): the one table, applied where design files
and options are converted, and documented on the user guide's limits page. The bounds are
chipflow's own choice (stated with a reason in each row), not reference values from a
source; the tests check that they are applied, one line each, and that the page shows the same
table."""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

from chipflow.cli import main
from chipflow.errors import UnitError
from chipflow.limits import RANGES, SEED_MAX, check_value, range_for, rst_table
from chipflow.spec.reader import parse_design_text

ROOT = Path(__file__).resolve().parents[1]
NETWORK = (ROOT / "designs" / "bench_loop_network.toml").read_text()
DEMO = (ROOT / "designs" / "demo_endothelial_bed.toml").read_text()


def test_the_user_guide_shows_the_table():
    page = (ROOT / "docs" / "guide" / "limits.rst").read_text()
    assert rst_table() in page
    assert "\n   limits\n" in (ROOT / "docs" / "guide" / "index.rst").read_text()


def test_every_kind_of_unit_has_a_row():
    from chipflow.units import KINDS

    for kind in KINDS:
        assert range_for(kind, "a_key_no_design_has") is not None, kind
    assert all(r.low <= r.high for r in RANGES)


@pytest.mark.parametrize(
    ("kind", "key", "section", "label"),
    [
        ("length", "width", "channels", "channel width"),
        ("length", "width", "chip", "chip side"),
        ("length", "width", "tolerances", "fabrication tolerance"),
        ("length", "depths", "fabrication", "channel depth"),
        ("length", "length", "tubes", "tubing length"),
        ("length", "length", "channels", "channel length"),
        ("length", "punch", "", "port punch diameter"),
        ("pressure", "shear_max", "culture", "wall shear stress"),
        ("pressure", "pressure", "supply", "pressure"),
        ("whole", "seed", "tolerances", "random seed"),
    ],
)
def test_the_row_follows_section_and_key(kind, key, section, label):
    assert range_for(kind, key, section).label == label


def test_magnitudes_zero_and_signs():
    assert check_value(0.0, "pressure", key="pressure") == 0.0  # an open outlet
    assert check_value(-0.01, "length", key="head") == -0.01  # a reservoir below its port
    with pytest.raises(UnitError, match="liquid head, 1 um to 10 m"):
        check_value(-100.0, "length", key="head")
    with pytest.raises(UnitError, match="sample count, 1 to 10,000,000"):
        check_value(0, "whole", key="samples")


def _design_error(text: str) -> str:
    from chipflow.spec.network import load_network_design

    with pytest.raises(UnitError) as info:
        load_network_design(parse_design_text(text, "d.toml"))
    return str(info.value)


@pytest.mark.parametrize(
    ("old", "new", "needle"),
    [
        ('width = "400 um"', 'width = "1e30 um"', "channel width, 100 nm to 1 m"),
        ('width = "400 um"', 'width = "20 nm"', "channel width, 100 nm to 1 m"),
        ('depth = "50 um"', 'depth = "1 km"', "channel depth, 100 nm to 100 mm"),
        ('length = "3 mm"', 'length = "1 km"', "channel length, 100 nm to 10 m"),
        ('diameter = "0.51 mm"', 'diameter = "1 m"', "tube diameter, 1 um to 50 mm"),
        ('"pump"\nflow = "5 uL/min"', '"pump"\nflow = "2 L/min"', "flow rate, 1 pL/min to 1 L/min"),
        ('"reservoir"\nhead = "1 cm"', '"reservoir"\nhead = "1 km"', "liquid head, 1 um to 10 m"),
        ('temperature = "37 degC"', 'temperature = "37 K"', "0 degC to 100 degC"),
    ],
)
def test_a_design_file_value_out_of_range_is_one_line(old, new, needle):
    text = NETWORK.replace(old, new, 1)
    assert text != NETWORK
    message = _design_error(text)
    assert needle in message and "d.toml" in message and "\n" not in message


def test_generation_minus_one_is_refused():
    """The issue: ``generation = -1`` was accepted (compared with its default by identity)."""
    from chipflow.errors import SpecError
    from chipflow.spec.network import load_network_design

    text = NETWORK.replace("generation = 0", "generation = -1", 1)
    with pytest.raises(SpecError, match="generation: must be at least 0"):
        load_network_design(parse_design_text(text, "d.toml"))
    text = NETWORK.replace("generation = 0", "generation = 65", 1)
    with pytest.raises(SpecError, match="generation, 0 to 64"):
        load_network_design(parse_design_text(text, "d.toml"))


@pytest.mark.parametrize("seed", [2**64, SEED_MAX + 1, -1])
def test_a_seed_beyond_32_bits_is_refused(tmp_path, seed):
    """The issue: ``seed = 2**64`` was accepted."""
    design = tmp_path / "d.toml"
    design.write_text(DEMO + f"\n[tolerances]\nseed = {seed}\n")
    result = CliRunner().invoke(main, ["vary", str(design), "-o", str(tmp_path / "o")])
    assert result.exit_code == 2 and len(result.stderr.splitlines()) == 1, result.output
    assert "seed" in result.stderr and not (tmp_path / "o").exists()
    result = CliRunner().invoke(
        main, ["vary", "demo_endothelial_bed", "--seed", str(seed), "-o", str(tmp_path / "o")]
    )
    assert result.exit_code == 2 and len(result.stderr.splitlines()) == 1
    assert "--seed" in result.stderr


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--width", "2m"], "channel width, 100 nm to 1 m"),
        (["--width", "50nm"], "channel width, 100 nm to 1 m"),
        (["--depth", "1km"], "channel depth"),
        (["--flow", "5L/min"], "flow rate"),
        (["--viscosity", "1e6Pa*s"], "viscosity, 100 uPa*s to 1 kPa*s"),
        (["--viscosity", "1e-9Pa*s"], "viscosity"),
    ],
)
def test_an_option_out_of_range_is_one_line(args, needle):
    base = {"--width": "200um", "--depth": "50um", "--length": "1cm", "--flow": "1uL/min"}
    base.update(dict(zip(args[::2], args[1::2], strict=True)))
    flat = [x for pair in base.items() for x in pair]
    result = CliRunner().invoke(main, ["channel", *flat])
    assert result.exit_code == 2 and len(result.stderr.splitlines()) == 1, result.output
    assert needle in result.stderr and "Traceback" not in result.output


@pytest.mark.parametrize("value", ["0", "-1", "10000001", "18446744073709551616", "many"])
def test_sample_counts_and_workers(tmp_path, value):
    for option in ("--samples", "--workers"):
        result = CliRunner().invoke(
            main, ["vary", "demo_endothelial_bed", option, value, "-o", str(tmp_path / "o")]
        )
        assert result.exit_code == 2 and len(result.stderr.splitlines()) == 1, result.output
        assert option in result.stderr
