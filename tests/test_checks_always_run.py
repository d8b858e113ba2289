"""Never a silent pass: every check that can apply runs, and gives the right answer.

One-sided shear limits, laminar flow and entrance length over every channel of every network,
the warnings of ``chipflow channel``, oxygen only where cells are declared (with each cell
type's own uptake), and a caution for a fluid outside 15-40 degC.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from chipflow.build import DesignSource, build_design
from chipflow.checks import cell_type, cell_types
from chipflow.checks.cell_types import ShearWindow
from chipflow.checks.culture import check_floor_shear
from chipflow.cli import main
from chipflow.physics.fluid import water
from chipflow.spec.reader import parse_design_text

ROOT = Path(__file__).resolve().parents[1]
VESSEL = (ROOT / "designs" / "tree_vessel.toml").read_text()

ONE_CHANNEL = """
name = "one"
[fluid]
kind = "water"
[[channels]]
name = "big"
from = "a"
to = "b"
width = "2 mm"
depth = "1 mm"
length = "1 cm"
[[ports]]
node = "a"
flow = "{flow}"
[[ports]]
node = "b"
pressure = "0 Pa"
"""


def build_text(text: str, name: str = "d.toml"):
    import hashlib

    digest = hashlib.sha256(text.encode()).hexdigest()
    source = DesignSource(name, parse_design_text(text, name), digest)
    return build_design(source)


def checks_of(build) -> dict[str, object]:
    return {c.name: c for c in build.checks}


@pytest.fixture(scope="module")
def vessel_low_max():
    """tree_vessel with only ``[targets] shear_max = "0.1 Pa"``."""
    return build_text(VESSEL.replace('shear_max = "2 Pa"', 'shear_max = "0.1 Pa"'), "v.toml")


def test_a_lone_shear_max_is_a_one_sided_check(vessel_low_max):
    checks = checks_of(vessel_low_max)
    trunk = checks["floor shear: d0 (design target)"]
    # the trunk's floor shear is 1.36 Pa (see the generation table), far above 0.1 Pa
    assert trunk.value == pytest.approx(1.36, rel=0.01)
    assert trunk.status == "fail" and trunk.limit == 0.1
    assert "above the window (at most 0.1 Pa" in trunk.message
    # the bed (0.088 Pa) is inside the one-sided window
    assert checks["floor shear: bed (design target)"].status == "pass"
    assert vessel_low_max.status == "fail"
    window = vessel_low_max.results["shear_window"]
    assert window["min"] is None and window["max"] == 0.1 and window["text"] == "at most 0.1 Pa"


def test_a_lone_shear_max_fails_a_viscous_fluid_exit_1(tmp_path):
    # the case: a 100 mPa s fluid gives the trunk 143 Pa; shear scales with viscosity
    # at a given flow (tau = mu * f(geometry) * Q), so 1.36 Pa * 100 / 0.95 = 143 Pa
    text = VESSEL.replace('kind = "medium"', 'kind = "custom"\nviscosity = "100 mPa*s"\n'
                          'density = "1000 kg/m^3"')  # fmt: skip
    path = tmp_path / "viscous.toml"
    path.write_text(text)
    result = CliRunner().invoke(main, ["build", str(path), "-o", str(tmp_path / "out")])
    assert result.exit_code == 1, result.output
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    trunk = next(c for c in data["checks"] if c["name"] == "floor shear: d0 (design target)")
    assert trunk["status"] == "fail" and trunk["value"] == pytest.approx(143, rel=0.01)


def test_a_lone_shear_min_is_a_one_sided_check():
    window = ShearWindow("design targets", 0.5, math.inf, "test")
    results = check_floor_shear(["d0", "bed"], [7.0, 0.3], window)
    assert [r.status for r in results] == ["pass", "fail"]  # no upper bound: 7 Pa passes
    # the window's bounds: a lower one, and no upper one
    assert results[0].limit_low == 0.5 and math.isinf(results[0].limit)
    assert "at least 0.5 Pa" in results[1].message


def test_culture_override_alone_is_one_sided():
    text = ONE_CHANNEL.format(flow="500 uL/min") + '[culture]\nshear_max = "1 Pa"\n'
    checks = checks_of(build_text(text))
    # Without generation labels the shear check takes the channels of lowest and highest
    # shear; here the single channel (0.068 Pa) is below the one-sided 1 Pa limit.
    shear = checks["floor shear: channel big"]
    assert shear.status == "pass" and shear.limit == 1.0


def test_mean_and_peak_shear_targets_check_that_shear():
    text = VESSEL.replace('shear_kind = "floor"', 'shear_kind = "max"')
    build = build_text(text.replace('shear_max = "2 Pa"', 'shear_max = "1 Pa"'))
    checks = checks_of(build)
    trunk = checks["peak wall shear: d0 (design target)"]
    row = build.results["generations"][0]
    assert trunk.value == row["wall_shear_max"] and trunk.status == "fail"


def test_reynolds_and_entrance_length_for_a_network_without_generations():
    build = build_text(ONE_CHANNEL.format(flow="500 mL/min"))
    checks = checks_of(build)
    # Independent: Re = rho u D_h / mu on the hydraulic diameter (common practice) with
    # water at 20 degC, u = Q / (w h), D_h = 2 w h / (w + h).
    fluid = water(293.15)
    q, w, h, length = 500e-6 / 60, 2e-3, 1e-3, 1e-2
    d_h = 2 * w * h / (w + h)
    re = fluid.density * q / (w * h) * d_h / fluid.viscosity
    assert re == pytest.approx(5537, rel=1e-3)  # the figure
    reynolds = checks["Reynolds number"]
    assert reynolds.value == pytest.approx(re, rel=1e-9) and reynolds.status == "fail"
    assert "channel big" in reynolds.message
    # Chen (J Fluids Eng 1973): L_e / D = 0.6 / (1 + 0.035 Re) + 0.056 Re, here 41 cm for a
    # 1 cm channel
    entrance = d_h * (0.6 / (1 + 0.035 * re) + 0.056 * re)
    assert entrance == pytest.approx(0.41, rel=0.01)
    share = checks["entrance length share"]
    assert share.value == pytest.approx(entrance / length, rel=1e-9) and share.status == "warn"
    assert build.status == "fail"


def test_tubing_is_checked_for_laminar_flow_too(tmp_path):
    text = ONE_CHANNEL.format(flow="100 mL/min").replace(
        '[[channels]]\nname = "big"', '[[tubes]]\nname = "line"'
    )
    text = text.replace('width = "2 mm"\ndepth = "1 mm"\nlength = "1 cm"',
                        'diameter = "0.5 mm"\nlength = "10 cm"')  # fmt: skip
    assert "[[channels]]" not in text and "diameter" in text
    # a network of tubing only builds from the command line (it used to crash)
    (tmp_path / "tubes.toml").write_text(text)
    result = CliRunner().invoke(main, ["build", str(tmp_path / "tubes.toml"), "-o",
                                       str(tmp_path / "out")])  # fmt: skip
    assert result.exit_code == 1, (result.output, result.exception)  # Re fails, see below
    assert "Reynolds number" in (tmp_path / "out" / "report.html").read_text()
    reynolds = checks_of(build_text(text))["Reynolds number"]
    # Re = 4 rho Q / (pi mu d) for a round tube (definition)
    fluid = water(293.15)
    expected = 4 * fluid.density * (100e-6 / 60) / (math.pi * fluid.viscosity * 0.5e-3)
    assert reynolds.value == pytest.approx(expected, rel=1e-9) and reynolds.status == "fail"


def test_channel_command_warns_about_turbulence_and_entrance_length():
    args = ["channel", "--width", "2mm", "--depth", "1mm", "--length", "1cm",
            "--flow", "500mL/min", "--fluid", "water"]  # fmt: skip
    result = CliRunner().invoke(main, args)
    assert result.exit_code == 0
    warnings = [line for line in result.output.splitlines() if line.startswith("warning:")]
    assert len(warnings) == 2
    assert "above the laminar limit" in warnings[0] and "5.54e+03" in warnings[0]
    assert "longer than the channel" in warnings[1] and "413 mm" in warnings[1]
    data = json.loads(CliRunner().invoke(main, [*args, "--json"]).output)
    assert len(data["warnings"]) == 2
    hot = CliRunner().invoke(main, [*args[:-4], "--flow", "5uL/min", "--temperature", "80degC"])
    assert "warning: fluid at 80 degC is outside 15-40 degC" in hot.output


def test_no_oxygen_check_without_cells():
    checks = checks_of(build_text(VESSEL))
    assert not any("oxygen" in name for name in checks)


def test_oxygen_uses_the_cell_types_own_uptake_and_critical_value():
    for name in ("hepatocyte", "endothelial"):
        text = VESSEL + f'\n[culture]\ncell_type = "{name}"\n'
        build = build_text(text.replace("[targets]\n", '[targets]\nlevels = "bed"\n'))
        checks = checks_of(build)
        row = cell_type(name)
        share = checks["hypoxic share of the seeded floor"]
        assert row.o2_critical_source[:30] in share.source
        assert checks["lowest floor oxygen"].limit == pytest.approx(2 * row.o2_critical)
        t = build.results["transport"]
        # the floor's largest uptake is the row's uptake per cell x the assumed 1e9 cells/m^2
        assert t["o2_uptake"] == pytest.approx(1e9 * row.o2_consumption, rel=1e-12)
        # the lumped share of the inlet oxygen used stays as context, linear in the uptake
        bed = next(g for g in build.results["generations"] if g["role"] == "bed")
        area = bed["count"] * bed["width"] * bed["length"]
        expected = 1e9 * area * row.o2_consumption / (bed["flow_total"] * t["o2_chip_inlet"])
        assert t["context"]["oxygen_use_fraction"] == pytest.approx(expected, rel=1e-9)
        # the bed uses no more than it is given: the march agrees with the lumped share
        # (the floor sees a little less than the inlet oxygen, so it takes a little less)
        bed_t = next(lv for lv in t["levels"] if lv["role"] == "bed")
        used = (bed_t["o2_in"] - bed_t["o2_out"]) / bed_t["o2_in"]
        assert 0.9 * expected < used <= expected * (1 + 1e-9)


def test_every_cell_type_has_a_cited_uptake_and_says_when_it_is_from_memory():
    for row in cell_types().values():
        assert row.o2_consumption is not None and row.o2_source
        # Wagner, Venkataraman & Buettner 2011: cultured cells use < 1 to > 350 amol/s
        assert 1e-19 <= row.o2_consumption <= 3.5e-16
        if row.name != "hepatocyte":  # Sci Rep 2017;7:42113 Table 1 (re-read)
            assert "from memory" in row.o2_source


def test_a_hot_fluid_gives_a_caution():
    text = ONE_CHANNEL.format(flow="5 uL/min").replace(
        'kind = "water"', 'kind = "water"\ntemperature = "80 degC"'
    )
    temperature = checks_of(build_text(text))["fluid temperature"]
    assert temperature.status == "warn" and temperature.value == pytest.approx(353.15)
    assert "cells are harmed above about 40 degC" in temperature.message
    body = checks_of(build_text(ONE_CHANNEL.format(flow="5 uL/min")))["fluid temperature"]
    assert body.status == "pass"


def test_flow_checks_cover_every_channel_of_a_large_network():
    """Reynolds number and entrance length over 10^5 parallel channels name the worst one."""
    from chipflow.checks.suite import culture_checks
    from chipflow.network import Network, solve
    from chipflow.spec.culture import Culture

    n = 100_000
    widths = np.full(n, 100e-6)
    widths[12345] = 1e-3  # the widest channel carries the fastest flow
    net = Network.from_arrays(np.zeros(n, int), np.ones(n, int), widths, 50e-6, 1e-3)
    sol = solve(net, water(), pressures={0: 1000.0, 1: 0.0})
    checks = {c.name: c for c in culture_checks(sol, [], Culture(), None, None)}
    worst = int(np.argmax(sol.reynolds))
    assert worst == 12345 and "channel c12345" in checks["Reynolds number"].message
    assert checks["Reynolds number"].value == pytest.approx(sol.reynolds.max())


def test_check_command_warns_for_networks():
    import tempfile

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "one.toml"
        path.write_text(ONE_CHANNEL.format(flow="500 mL/min"))
        text = CliRunner().invoke(main, ["check", str(path)])
        data = json.loads(CliRunner().invoke(main, ["check", str(path), "--json"]).output)
    lines = [line for line in text.output.splitlines() if line.startswith("warning:")]
    assert len(lines) == 2 and "channel big" in lines[0] and "laminar limit" in lines[0]
    assert data["warnings"] == [line.removeprefix("warning: ") for line in lines]
    quiet = CliRunner().invoke(main, ["check", str(ROOT / "designs" / "bench_loop_network.toml")])
    assert "warning:" not in quiet.output  # Re below 1, entrance lengths of a few um


def test_report_states_a_one_sided_window(vessel_low_max):
    from chipflow.report import profile_figure, svg_text
    from chipflow.report.html import report_html

    html = report_html(vessel_low_max.results, {})
    assert "floor wall shear window at most 0.1 Pa" in html
    assert "<svg" in svg_text(profile_figure(vessel_low_max.results))  # draws the open window
