"""The field's share of the seeded floor outside the shear window is a check.

The limit's justification (chipflow.checks.culture.check_floor_outside) is checked here against
an independent evaluation of the exact rectangular-duct series (Bruus, Theoretical
Microfluidics, 2008, ch. 3): the floor shear across the floor of a straight channel.
"""

from __future__ import annotations

import copy
import tomllib
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from chipflow.build import DesignSource, build_design
from chipflow.checks.cell_types import ShearWindow
from chipflow.checks.culture import OUTSIDE_WINDOW_LIMIT, check_floor_outside
from chipflow.cli import main
from chipflow.errors import SpecError
from chipflow.spec.culture import read_culture
from chipflow.spec.reader import parse_design_text

ROOT = Path(__file__).resolve().parents[1]
DEMO = tomllib.loads((ROOT / "designs" / "demo_endothelial_bed.toml").read_text())
WINDOW = ShearWindow("endothelial", 0.5, 1.0, "Dewey et al., J Biomech Eng 1981")


def _floor_share_below(width: float, depth: float, centre: float, low: float) -> float:
    """Share of the floor's width where the floor shear is below ``low`` [Pa], for a straight
    channel whose floor shear at the middle is ``centre`` [Pa]: the series of Bruus 2008
    (eq. 3.62), differentiated at the floor, in a form free of overflow."""
    y = np.linspace(0.0, width, 20001)
    n = np.arange(1, 801, 2)[:, None]
    a = n * np.pi / depth
    d = np.abs(y - width / 2)
    ratio = (np.exp(a * (d - width / 2)) + np.exp(-a * (d + width / 2))) / (1 + np.exp(-a * width))
    tau = ((1 - ratio) / n**2).sum(axis=0)
    tau *= centre / tau[y.size // 2]
    return float(np.mean(tau < low))


def test_the_default_limit_leaves_room_for_the_side_wall_strips() -> None:
    # the demo's bed: 35 x 50 um at 0.74 Pa in the middle of the floor (its build's table)
    bed = _floor_share_below(35e-6, 50e-6, 0.741, WINDOW.min)
    wide = _floor_share_below(600e-6, 50e-6, 0.802, WINDOW.min)
    assert bed == pytest.approx(0.337, abs=0.005)  # the value quoted in the docstring
    assert wide == pytest.approx(0.042, abs=0.005)
    assert bed < OUTSIDE_WINDOW_LIMIT == 0.5  # a straight demo bed passes with room to spare


def test_grading_at_and_around_the_limit() -> None:
    assert check_floor_outside(0.5, WINDOW).status == "pass"  # at the limit: still passes
    assert check_floor_outside(0.5000001, WINDOW).status == "warn"
    assert check_floor_outside(1.0, WINDOW, 1.0).status == "pass"
    assert check_floor_outside(0.01, WINDOW, 0.0).status == "warn"
    result = check_floor_outside(0.62, WINDOW, by_zone={"bend": 0.1, "junction": 0.3})
    assert result.status == "warn" and result.value == 0.62 and result.limit == 0.5
    assert "62 %" in result.message and "junctions: 30 %" in result.message
    assert "outside_window_limit" in result.message  # the key that sets it


@pytest.mark.parametrize(
    "text,expected", [('"30 %"', 0.3), ("0.25", 0.25), ('"0 %"', 0.0), ('"100 %"', 1.0)]
)
def test_the_key_reads_a_share(text: str, expected: float) -> None:
    top = parse_design_text(f'[culture]\ncell_type = "endothelial"\noutside_window_limit = {text}')
    culture = read_culture(top)
    assert culture.outside_window_limit == pytest.approx(expected)
    assert "design file" in culture.outside_window_source or "<design>" in (
        culture.outside_window_source
    )


@pytest.mark.parametrize("text", ['"150 %"', '"-5 %"', '"5 um"', '"half"'])
def test_the_key_refuses_what_is_not_a_share(text: str) -> None:
    top = parse_design_text(f"[culture]\noutside_window_limit = {text}", "d.toml")
    with pytest.raises(SpecError, match="outside_window_limit"):
        read_culture(top)


def _small_demo(**culture) -> DesignSource:
    data = copy.deepcopy(DEMO)
    data["tree"]["bed_channels"] = 4  # small enough for the field to run by default
    data["culture"].update(culture)
    return DesignSource.from_dict(data, "small.toml")


def test_a_build_with_a_field_counts_the_check() -> None:
    build = build_design(_small_demo())
    field = build.results["field"]
    assert field is not None
    (check,) = [c for c in build.results["checks"] if c["name"].startswith("floor outside")]
    assert check["value"] == field["area_outside_window"]
    assert check["status"] == ("warn" if check["value"] > 0.5 else "pass")
    strict = build_design(_small_demo(outside_window_limit="0 %"))
    (graded,) = [c for c in strict.results["checks"] if c["name"].startswith("floor outside")]
    assert graded["status"] == "warn" and graded["limit"] == 0.0
    assert "small.toml" in graded["source"]
    # the verdict counts it: a warning, never a failure
    assert strict.status in ("warn", "fail")
    assert strict.results["status"] == strict.status


def test_no_field_no_check(tmp_path) -> None:
    build = build_design(_small_demo(), field=False)
    assert not any(c["name"].startswith("floor outside") for c in build.results["checks"])


def test_a_bad_limit_exits_2_on_the_command_line(tmp_path) -> None:
    design = tmp_path / "d.toml"
    text = (ROOT / "designs" / "demo_endothelial_bed.toml").read_text()
    design.write_text(text.replace("\n[culture]\n", '\n[culture]\noutside_window_limit = "2 Pa"\n'))
    result = CliRunner().invoke(main, ["check", str(design)])
    assert result.exit_code == 2
    assert "outside_window_limit" in result.stderr and "Traceback" not in result.output
