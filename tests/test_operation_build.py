"""Time-varying operation through design files and the command line."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from chipflow.build import build_design
from chipflow.cli import main
from chipflow.network.supply import STANDARD_GRAVITY
from chipflow.operation.compliance import ATMOSPHERE, inertance, plate_rigidity
from chipflow.operation.deformation import deflection_scale, resistance_ratio
from chipflow.physics.duct import resistance

ROOT = Path(__file__).resolve().parents[1]
PULSATILE = ROOT / "designs" / "pulsatile_peristaltic_bed.toml"
ROCKER = ROOT / "designs" / "rocker_endothelial_bed.toml"


@pytest.fixture(scope="module")
def pulsatile():
    return build_design(PULSATILE)


def test_pulsation_per_generation_is_the_tubing_low_pass(pulsatile) -> None:
    """3-roller pump at 10 rpm: 0.5 Hz (rpm / 60 x rollers). The chip's own compliance is
    negligible beside the tubing's, so every generation pulses alike, by the ladder
    pump -C1- tubing (R_t, L_t) -C2- chip (R_c) solved by hand here."""
    b = pulsatile
    op = b.results["operation"]
    assert op["frequency"] == pytest.approx(0.5)
    # the pulsation of the source is the pump's own: flow amplitude over mean flow
    assert op["source_pulsation"] == pytest.approx(0.4, rel=1e-9)
    assert op["source_quantity"] == "flow"
    d, do, length, e = 0.8e-3, 2.4e-3, 0.4, 1.5e6
    mu, rho = b.fluid.viscosity, b.fluid.density
    r_t = 128 * mu * length / (math.pi * d**4)  # Hagen-Poiseuille
    l_t = rho * length / (math.pi * d**2 / 4)  # rho l / A
    a, bo = d / 2, do / 2
    # Lame, open ends: dV/dp = 2 pi a^2 l [(1-nu) a^2 + (1+nu) b^2] / (E (b^2 - a^2)), nu = 0.5
    c_t = 2 * math.pi * a**2 * length * (0.5 * a**2 + 1.5 * bo**2) / (e * (bo**2 - a**2))
    assert op["compliance"]["tubing_walls"] == pytest.approx(c_t, rel=1e-12)
    q_mean = b.results["totals"]["total_flow"]
    r_c = b.results["totals"]["chip_inlet_pressure"] / q_mean
    w = 2 * math.pi * 0.5
    y_in = 1 / r_c + 1j * w * c_t / 2
    z_pump = r_t + 1j * w * l_t + 1 / y_in
    chip = 1 / (1 + 1j * w * c_t / 2 * z_pump) * (1 / r_c) / y_in
    expected = 0.4 * abs(chip)
    # the hand ladder leaves out the chip's own inertance and compliance (about 1e-4 here)
    for row in b.results["generations"]:
        assert row["pulsation"] == pytest.approx(expected, rel=1e-3)
        assert row["pulsation_relative_to_source"] == pytest.approx(expected / 0.4, rel=1e-3)
        # min and max of the floor shear: mean -/+ amplitude for one harmonic
        tau = row["wall_shear_floor"]
        assert row["max"] == pytest.approx(tau * (1 + expected), rel=2e-3)
        assert row["min"] == pytest.approx(tau * (1 - expected), rel=2e-3)
    names = {c.name: c.status for c in b.checks}
    assert names["flow reversal"] == "pass" and names["liquid inertia"] == "pass"
    assert names["wall deformation"] == "pass"
    # the pulse raises the on-chip pressure above its mean by the pressure amplitude
    peak = b.results["operation"]["peak_chip_pressure"]
    mean = b.results["totals"]["chip_inlet_pressure"]
    assert mean < peak < mean * (1 + expected) * 1.01
    assert names["pulse peak pressure vs bond"] == "pass"


def test_pulsatile_outputs_carry_units_and_bands(pulsatile, tmp_path: Path) -> None:
    from chipflow.export.bundle import write_build

    write_build(pulsatile, tmp_path / "out")
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    for row in data["generations"]:
        assert {"pulsation", "min", "max"} <= set(row)
    assert data["units"]["pulsation"] == "1" and data["units"]["min"] == "Pa"
    svg = (tmp_path / "out" / "profile.svg").read_text()
    assert "min-max over time" in svg
    report = (tmp_path / "out" / "report.html").read_text()
    pulsation = data["generations"][0]["pulsation"]
    assert "Time-varying operation" in report and f"{pulsation * 100:.3g}" in report


def test_steady_reports_have_no_operation_section(tmp_path: Path) -> None:
    from chipflow.report.operation import operation_html

    b = build_design(ROOT / "designs" / "demo_endothelial_bed.toml")
    assert b.results["operation"]["mode"] == "steady" and operation_html(b.results) == ""


def test_rocker_shear_oscillates_and_the_steady_window_is_not_applied() -> None:
    b = build_design(ROCKER)
    op = b.results["operation"]
    assert op["mode"] == "rocker" and op["reversal"] is True
    # at full tilt one reservoir stands s sin(theta) higher (geometry); the levels barely move
    # in a minute, so the driving head peaks near it
    lift = 0.06 * math.sin(math.radians(25))
    assert op["peak_head_difference"] == pytest.approx(lift, rel=0.02)
    bed = next(r for r in b.results["generations"] if r["role"] == "bed")
    assert bed["min"] == pytest.approx(-bed["max"], rel=1e-9)  # symmetric rocking
    assert bed["floor_shear_peak"] == pytest.approx(bed["max"], rel=1e-12)
    # the flow reverses every half cycle with zero mean: OSI 1/2 (Ku et al. 1985)
    assert bed["osi"] == pytest.approx(0.5, abs=1e-9)
    assert abs(bed["floor_shear_signed_mean"]) < 1e-9 * bed["floor_shear_peak"]
    # the steady table holds the time-averaged magnitude of the floor shear (exact)
    assert bed["wall_shear_floor"] == pytest.approx(bed["time_averaged_shear"], rel=1e-9)
    checks = {c.name: c for c in b.checks}
    # the window was measured in steady one-way flow: not applied, the numbers reported
    oscillating = checks["oscillating floor shear: bed"]
    assert oscillating.status == "warn" and "steady one-way flow" in oscillating.message
    assert not any(name.startswith("floor shear") and "bed" in name for name in checks)
    assert "pulsatile shear in window" not in checks


def _network(tmp_path: Path, extra: str, port_extra: str = "", walls: str = "") -> Path:
    text = f"""
name = "one channel"
{walls}
[[channels]]
name = "c"
from = "in"
to = "out"
width = "400 um"
depth = "30 um"
length = "10 mm"
[[ports]]
node = "in"
{port_extra}
[[ports]]
node = "out"
pressure = "0 Pa"
{extra}
"""
    path = tmp_path / "net.toml"
    path.write_text(text)
    return path


def test_trapped_air_damps_a_pulsating_pump_as_an_rc_low_pass(tmp_path: Path) -> None:
    path = _network(
        tmp_path,
        '[[compliances]]\nnode = "in"\nair_volume = "5 uL"',
        'flow = "10 uL/min"\namplitude = "5 uL/min"\nfrequency = "0.2 Hz"',
    )
    b = build_design(path)
    sol = b.solution
    r = float(resistance(400e-6, 30e-6, 10e-3, b.fluid.viscosity))
    c = 5e-9 / (ATMOSPHERE + sol.pressure[0])  # isothermal air: V / p_abs
    ell = float(inertance(400e-6, 30e-6, 10e-3, b.fluid.density))
    w = 2 * math.pi * 0.2
    expected = 0.5 * abs(1 / (1 - w**2 * ell * c + 1j * w * r * c))  # RLC divider
    op = b.operation
    amplitude = np.abs(op.flow[0] - op.flow[0].mean()).max()
    assert amplitude / abs(sol.flow[0]) == pytest.approx(expected, rel=1e-3)
    assert b.results["operation"]["compliance"]["trapped_air"] == pytest.approx(c)


def test_two_draining_reservoirs_level_out(tmp_path: Path) -> None:
    path = _network(tmp_path, "", 'head = "3 cm"\narea = "20 mm^2"')
    text = path.read_text().replace('pressure = "0 Pa"', 'head = "1 cm"\narea = "20 mm^2"')
    path.write_text(text)
    b = build_design(path)
    r = float(resistance(400e-6, 30e-6, 10e-3, b.fluid.viscosity))
    tau = r * 20e-6 / (2 * b.fluid.density * STANDARD_GRAVITY)  # R A / (2 rho g)
    op = b.results["operation"]
    assert op["mode"] == "draining"
    assert op["time_constant"] == pytest.approx(tau, rel=1e-9)
    assert op["time_to_level"] == pytest.approx(tau * math.log(10), rel=1e-3)
    # after a day both stand at the mean level (volume conserved)
    left = 0.01 * math.exp(-86400 / tau)  # half the difference, decayed for a day
    heads = [v["head_at_refill"] for v in op["reservoirs"].values()]
    assert heads == pytest.approx([0.02 + left, 0.02 - left], abs=1e-8)


def test_a_soft_thin_roof_warns_of_deformation(tmp_path: Path) -> None:
    walls = '[walls]\nmaterial = "custom"\nmodulus = "0.5 MPa"\nroof_thickness = "40 um"'
    path = _network(tmp_path, "", 'pressure = "20 kPa"', walls)
    b = build_design(path)
    phi = deflection_scale(400e-6, plate_rigidity(0.5e6, 40e-6, 0.5))
    change = 1 - float(resistance_ratio(20e3, 0.0, 30e-6, phi))
    assert b.results["operation"]["resistance_change_max"] == pytest.approx(change)
    check = next(c for c in b.checks if c.name == "wall deformation")
    assert change > 0.05 and check.status == "warn"


def test_a_measured_waveform_sets_the_frequency_and_the_mean(tmp_path: Path) -> None:
    t = np.linspace(0.0, 2.0, 41)
    flow = 10 + 4 * np.cos(np.pi * t)  # uL/min, one period of 2 s
    csv = "time [s],flow [uL/min]\n" + "\n".join(
        f"{a:.6f},{q:.6f}" for a, q in zip(t, flow, strict=True)
    )
    (tmp_path / "pump.csv").write_text(csv)
    text = PULSATILE.read_text()
    text = text.replace('flow = "10 uL/min"              # mean flow of the pump\n', "")
    text = text.replace("rpm = 10", 'waveform = "pump.csv"').replace("rollers = 3", "")
    text = text.replace("pulsation = 0.4 ", "# ")
    (tmp_path / "w.toml").write_text(text)
    b = build_design(tmp_path / "w.toml")
    op = b.results["operation"]
    assert op["frequency"] == pytest.approx(0.5)
    # linear interpolation between 40 samples a period damps the fundamental by
    # sinc^2(1/40) (the triangle kernel's transform, analytic)
    assert op["source_pulsation"] == pytest.approx(0.4 * np.sinc(1 / 40) ** 2, rel=1e-4)
    assert b.results["totals"]["total_flow"] == pytest.approx(10 / 6e10, rel=1e-3)


@pytest.mark.parametrize(
    ("old", "new", "where"),
    [
        ('material = "PDMS"', 'modulus = "-1 MPa"', "walls.modulus"),
        ("rpm = 10", "rpm = 0", "supply.rpm"),
        ("rollers = 3", "rollers = 0", "supply.rollers"),
        ('inlet = "peristaltic"', 'inlet = "syringe"', "supply.rpm"),
        ('tubing_modulus = "1.5 MPa"', 'tubing_modulus = "0 MPa"', "supply.tubing_modulus"),
    ],
)
def test_bad_operation_input_exits_2_in_one_line(tmp_path, old, new, where) -> None:
    text = PULSATILE.read_text()
    assert old in text
    (tmp_path / "bad.toml").write_text(text.replace(old, new, 1))
    result = CliRunner().invoke(
        main, ["build", str(tmp_path / "bad.toml"), "-o", str(tmp_path / "o")]
    )
    assert result.exit_code == 2
    assert result.stderr.count("\n") == 1 and where in result.stderr
    assert not (tmp_path / "o").exists()


def test_a_pulsatile_controller_at_zero_hertz_is_refused(tmp_path: Path) -> None:
    text = PULSATILE.read_text().replace('inlet = "peristaltic"', 'inlet = "pulsatile-pressure"')
    for line in (
        'flow = "10 uL/min"              # mean flow of the pump',
        "rpm = 10",
        "rollers = 3",
    ):
        text = text.replace(line, "")
    text = text.replace(
        "pulsation = 0.4 ",
        'pressure = "500 Pa"\npressure_amplitude = "100 Pa"\nfrequency = "0 Hz"\n#',
    )
    (tmp_path / "zero.toml").write_text(text)
    result = CliRunner().invoke(
        main, ["build", str(tmp_path / "zero.toml"), "-o", str(tmp_path / "o")]
    )
    assert result.exit_code == 2 and "supply.frequency" in result.stderr


def test_rocker_reservoirs_too_small_for_the_volume_moved_exit_2(tmp_path: Path) -> None:
    text = ROCKER.read_text().replace('reservoir_area = "200 mm^2"', 'reservoir_area = "0.2 mm^2"')
    text = text.replace('head = "8 mm"', 'head = "1 mm"')
    (tmp_path / "dry.toml").write_text(text)
    result = CliRunner().invoke(
        main, ["build", str(tmp_path / "dry.toml"), "-o", str(tmp_path / "o")]
    )
    assert result.exit_code == 2 and "runs dry" in result.stderr
    assert result.stderr.count("\n") == 1


def test_a_level_rocker_is_refused(tmp_path: Path) -> None:
    (tmp_path / "flat.toml").write_text(
        ROCKER.read_text().replace('tilt_angle = "25 deg"', 'tilt_angle = "0 deg"')
    )
    result = CliRunner().invoke(
        main, ["build", str(tmp_path / "flat.toml"), "-o", str(tmp_path / "o")]
    )
    assert result.exit_code == 2 and "supply.tilt_angle" in result.stderr


def test_a_tree_fed_by_draining_reservoirs(tmp_path: Path) -> None:
    text = PULSATILE.read_text()
    start, end = text.index("[supply]"), text.index("[limits]")
    supply = """[supply]
inlet = "reservoir"
head = "3 cm"
reservoir_area = "30 mm^2"
outlet = "reservoir"
outlet_head = "5 mm"
outlet_area = "60 mm^2"
refill_interval = "6 h"

"""
    (tmp_path / "drain.toml").write_text(text[:start] + supply + text[end:])
    b = build_design(tmp_path / "drain.toml")
    op = b.results["operation"]
    rho_g = b.fluid.density * STANDARD_GRAVITY
    r = b.results["totals"]["total_resistance"]
    # A1 dh1/dt = -Q, A2 dh2/dt = Q, Q = rho g (h1 - h2) / R: tau = R / (rho g (1/A1 + 1/A2))
    tau = r / (rho_g * (1 / 30e-6 + 1 / 60e-6))
    assert op["mode"] == "draining" and op["refill_interval"] == pytest.approx(6 * 3600)
    assert op["time_constant"] == pytest.approx(tau, rel=1e-6)
    assert op["time_to_level"] == pytest.approx(tau * math.log(10), rel=1e-3)
    # volume conservation: the common level is the area-weighted mean head
    level = (30 * 0.03 + 60 * 0.005) / 90
    inlet, outlet = op["reservoirs"].values()
    left = 6 * 3600 / tau
    assert inlet["head_at_refill"] - level == pytest.approx(
        (0.03 - level) * math.exp(-left), abs=1e-7
    )
    assert outlet["head_at_refill"] < level
    assert "draining: time in window" in [c.name for c in b.checks]


def test_a_lumped_compliance_in_m3_per_pa(tmp_path: Path) -> None:
    path = _network(
        tmp_path,
        '[[compliances]]\nnode = "in"\ncompliance = "2e-13 m^3/Pa"',
        'flow = "10 uL/min"\namplitude = "2 uL/min"\nfrequency = "1 Hz"',
    )
    b = build_design(path)
    r = float(resistance(400e-6, 30e-6, 10e-3, b.fluid.viscosity))
    ell = float(inertance(400e-6, 30e-6, 10e-3, b.fluid.density))
    w, c = 2 * math.pi, 2e-13
    expected = 0.2 * abs(1 / (1 - w**2 * ell * c + 1j * w * r * c))  # RLC divider
    channels = b.results["operation"]["channels"]
    assert channels["name"] == ["c"]
    assert channels["pulsation"][0] == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize(
    ("old", "new", "where"),
    [
        (
            'roof_thickness = "1 mm"',
            'roof_thickness = "1 mm"\npoisson_ratio = 0.7',
            "poisson_ratio",
        ),
        ("pulsation = 0.4 ", "pulsation = -0.4 ", "supply.pulsation"),
        ('material = "PDMS"', 'material = "custom"', "walls.modulus"),
        ('tubing_modulus = "1.5 MPa"', "", "supply.tubing_modulus"),
        ("rpm = 10", "rmp = 10", "did you mean 'rpm'"),
    ],
)
def test_more_bad_operation_input_exits_2(tmp_path, old, new, where) -> None:
    text = PULSATILE.read_text()
    assert old in text
    (tmp_path / "bad.toml").write_text(text.replace(old, new, 1))
    out = tmp_path / "o"
    result = CliRunner().invoke(main, ["build", str(tmp_path / "bad.toml"), "-o", str(out)])
    assert result.exit_code == 2 and where in result.stderr
    assert result.stderr.count("\n") == 1


def test_a_pulsatile_pressure_controller_on_rigid_walls_passes_its_pulse(tmp_path: Path) -> None:
    """Without compliance the network is a resistor: every channel's flow pulses by the
    controller's pressure amplitude over its mean (inertia is negligible, Womersley < 0.1).
    The source's pulsation is its own quantity's, the pressure's: the cells see all of it."""
    text = PULSATILE.read_text()
    start, end = text.index("[walls]"), text.index("[limits]")
    supply = """[supply]
inlet = "pulsatile-pressure"
pressure = "400 Pa"
pressure_amplitude = "100 Pa"
frequency = "2 Hz"

"""
    (tmp_path / "p.toml").write_text(text[:start] + supply + text[end:])
    b = build_design(tmp_path / "p.toml")
    op = b.results["operation"]
    assert op["supplies"]["inlet"]["mean_pressure"] == pytest.approx(400.0)
    assert op["compliance"]["tubing_walls"] == 0.0 and "walls" not in op
    assert op["source_quantity"] == "pressure" and op["source_pulsation"] == pytest.approx(0.25)
    for row in b.results["generations"]:
        assert row["pulsation"] == pytest.approx(0.25, rel=1e-4)
        assert row["pulsation_relative_to_source"] == pytest.approx(1.0, rel=1e-4)
    assert op["peak_chip_pressure"] == pytest.approx(500.0, rel=1e-9)
