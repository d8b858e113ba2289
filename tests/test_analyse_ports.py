"""Masks with several inlets and outlets, each driven by its own flow or pressure.

Reference values and their sources: a T of straight 200 um x 50 um channels solved here as
a resistor network (Kirchhoff's laws at the junction, each arm the exact rectangular-duct
series of Bruus, Theoretical Microfluidics, 2008, ch. 4, between its hole's rim and the
junction's centre); the arms are 20 to 50 widths long, so the junction's and the rims'
disturbances (a width or so each) stay under 0.5 % (0.1 to 0.2 % measured). Superposition
(Stokes flow is linear) is checked exactly: a flow-driven answer equals the pressure-driven
answer at the pressures it found.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import shapely
from click.testing import CliRunner

from chipflow.cli import main
from chipflow.errors import FieldError
from chipflow.field.analyse import MaskPort, analyse_ports, port_holes
from chipflow.physics import duct
from chipflow.physics.fluid import fluid_preset
from tests.test_field_analyse import box, write_mask

W, H = 200e-6, 50e-6
PUNCH = 1e-3
MU = fluid_preset("water", None, None).viscosity
UL_MIN = 1e-9 / 60
#: the T: a straight run from A (0, 0) to C (20 mm, 0), an arm up to B (10 mm, 8 mm)
A, B, C = (0.0, 0.0), (10e-3, 8e-3), (20e-3, 0.0)
T = shapely.union_all(
    [shapely.box(0, -W / 2, 20e-3, W / 2), shapely.box(10e-3 - W / 2, 0, 10e-3 + W / 2, 8e-3)]
)


def _arms() -> np.ndarray:
    """Each arm's resistance [Pa s/m^3] from its hole's rim to the junction's centre."""
    radius = float(np.sqrt(port_holes(T, [A], PUNCH)[0].area / np.pi))
    lengths = np.array([10e-3, 8e-3, 10e-3]) - radius
    return duct.resistance(W, H, lengths, MU)


def _network(pressures: dict[int, float], flows: dict[int, float]) -> tuple[np.ndarray, ...]:
    """Kirchhoff at the junction: port pressures and inflows [SI] with the arms of the T,
    given a pressure or an inflow at each of the three ports."""
    r = _arms()
    # the junction's pressure pj: sum of inflows is zero; a pressure port gives (p - pj) / r
    known = sum(q for q in flows.values())
    a = sum(1 / r[k] for k in pressures)
    pj = (known + sum(p / r[k] for k, p in pressures.items())) / a
    p = np.array([pressures.get(k, np.nan) for k in range(3)])
    q = np.array([flows.get(k, np.nan) for k in range(3)])
    for k in range(3):
        if k in flows:
            p[k] = pj + r[k] * flows[k]
        else:
            q[k] = (p[k] - pj) / r[k]
    return p, q


@pytest.fixture(scope="module")
def two_pumps():
    """Inlets A at 6 uL/min and B at 2 uL/min, the outlet C open at 0 Pa."""
    ports = [
        MaskPort("A", A, "inlet", flow=6 * UL_MIN),
        MaskPort("B", B, "inlet", flow=2 * UL_MIN),
        MaskPort("C", C, "outlet"),
    ]
    return analyse_ports(T, H, ports, PUNCH, MU)


def test_flow_driven_inlets_carry_their_flows_and_the_network_pressures(two_pumps) -> None:
    sol = two_pumps.solution
    assert sol.port_flows["A"] == pytest.approx(6 * UL_MIN, rel=1e-9)
    assert sol.port_flows["B"] == pytest.approx(2 * UL_MIN, rel=1e-9)
    assert sol.port_flows["C"] == pytest.approx(-8 * UL_MIN, rel=1e-6)
    assert sol.port_pressures["C"] == 0.0
    p, _ = _network({2: 0.0}, {0: 6 * UL_MIN, 1: 2 * UL_MIN})
    assert sol.port_pressures["A"] == pytest.approx(p[0], rel=0.005)
    assert sol.port_pressures["B"] == pytest.approx(p[1], rel=0.005)
    assert two_pumps.flow == pytest.approx(8 * UL_MIN, rel=1e-9)
    assert two_pumps.resistance is None  # three ports: no single resistance
    assert two_pumps.inlet_pressure == pytest.approx(max(p[:2]), rel=0.005)


def test_superposition_the_pressures_found_give_back_the_flows(two_pumps) -> None:
    """Driving the same mask by the pressures the flow-driven solve found gives the same
    field: flows, and floor shear taken from the summed velocity, not summed shears."""
    sol = two_pumps.solution
    ports = [
        MaskPort(name, xy, role, pressure=sol.port_pressures[name])
        for name, xy, role in (("A", A, "inlet"), ("B", B, "inlet"), ("C", C, "outlet"))
    ]
    again = analyse_ports(T, H, ports, PUNCH, MU).solution
    for name in "ABC":
        assert again.port_flows[name] == pytest.approx(sol.port_flows[name], rel=1e-7)
    assert np.allclose(again.floor_shear, sol.floor_shear, rtol=1e-6, atol=1e-9)


def test_mixed_drives_pressure_inlet_and_withdrawing_outlet_against_the_network() -> None:
    """Inlet A from a 1 kPa reservoir, B open at 0 Pa (a second outlet), C withdrawn by a
    pump at 3 uL/min."""
    ports = [
        MaskPort("A", A, "inlet", pressure=1000.0),
        MaskPort("B", B, "outlet"),
        MaskPort("C", C, "outlet", flow=3 * UL_MIN),
    ]
    found = analyse_ports(T, H, ports, PUNCH, MU)
    p, q = _network({0: 1000.0, 1: 0.0}, {2: -3 * UL_MIN})
    sol = found.solution
    assert sol.port_flows["C"] == pytest.approx(-3 * UL_MIN, rel=1e-9)
    assert sol.port_flows["A"] == pytest.approx(q[0], rel=0.005)
    assert sol.port_flows["B"] == pytest.approx(q[1], rel=0.005)
    # a small difference of two large drops: judged against the drive (1 kPa)
    assert sol.port_pressures["C"] == pytest.approx(p[2], abs=0.005 * 1000.0)
    rows = {row["name"]: row for row in found.to_dict()["ports"]}
    assert rows["C"]["given"] == "flow" and rows["A"]["given"] == "pressure"
    assert rows["B"]["flow"] < 0 and rows["A"]["flow"] > 0  # signs: into the chip
    assert found.notes == ()


def test_an_inlet_the_medium_leaves_through_is_named_in_a_note() -> None:
    ports = [
        MaskPort("A", A, "inlet", pressure=1000.0),
        MaskPort("B", B, "inlet", pressure=100.0),  # below the junction's pressure
        MaskPort("C", C, "outlet"),
    ]
    found = analyse_ports(T, H, ports, PUNCH, MU)
    assert found.solution.port_flows["B"] < 0
    assert len(found.notes) == 1 and "leaves the chip through the inlet 'B'" in found.notes[0]


@pytest.mark.parametrize(
    ("ports", "needle"),
    [
        (
            [MaskPort("A", A, "inlet", flow=1e-10), MaskPort("C", C, "outlet", flow=1e-10)],
            "at least one needs a pressure",
        ),
        ([MaskPort("A", A, "inlet"), MaskPort("C", C, "outlet")], "needs its flow or"),
        ([MaskPort("A", A, "inlet", flow=-1e-10), MaskPort("C", C, "outlet")], "positive"),
        ([MaskPort("A", A, "inlet", pressure=5.0)], "at least one inlet and one outlet"),
        (
            [MaskPort("A", A, "inlet", pressure=0.0), MaskPort("C", C, "outlet")],
            "same pressure",
        ),
    ],
)
def test_ports_that_cannot_drive_a_flow_are_refused(ports, needle) -> None:
    with pytest.raises(FieldError, match=needle):
        analyse_ports(T, H, ports, PUNCH, MU)


def _mask(tmp_path):
    arm = box(10e-3 - W / 2, 0, 10e-3 + W / 2, 8e-3)
    return write_mask(tmp_path / "tee.dxf", [box(0, -W / 2, 20e-3, W / 2), arm])


def _run(*args):
    return CliRunner().invoke(
        main, ["analyse", *args, "--depth", "50um", "--fluid", "water", "--json"]
    )


def test_command_line_ports_each_with_its_drive(tmp_path) -> None:
    mask = _mask(tmp_path)
    result = _run(mask, "--inlet", "0,0=6uL/min", "--inlet", "10,8=2uL/min", "--outlet", "20,0")
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    rows = {row["name"]: row for row in data["ports"]}
    assert set(rows) == {"inlet 1", "inlet 2", "outlet"}
    assert rows["inlet 2"]["flow"] == pytest.approx(2 * UL_MIN, rel=1e-9)
    assert (rows["inlet 2"]["x"], rows["inlet 2"]["y"]) == pytest.approx(B)
    assert data["units"]["pressure"] == "Pa" and data["units"]["x"] == "m"
    p, _ = _network({2: 0.0}, {0: 6 * UL_MIN, 1: 2 * UL_MIN})
    assert rows["inlet 1"]["pressure"] == pytest.approx(p[0], rel=0.005)
    assert data["resistance"] is None and data["flow"] == pytest.approx(8 * UL_MIN)
    # the console shows every port
    shown = CliRunner().invoke(
        main,
        ["analyse", mask, "--depth", "50um", "--inlet", "0,0", "--inlet", "10,8",
         "--outlet", "20,0=-0.5kPa", "--pressure", "1kPa"],
    )  # fmt: skip
    assert shown.exit_code == 0, shown.output
    assert "3 ports (* given)" in shown.output
    outlet = next(line for line in shown.output.splitlines() if line.startswith("  outlet"))
    assert outlet.split()[2] == "-0.5*"  # its given pressure, in kPa


def test_network_out_keeps_each_port_and_its_drive(tmp_path) -> None:
    """The written network, checked, gives the pressures analyse found (1 %)."""
    mask = _mask(tmp_path)
    out = tmp_path / "tee.toml"
    result = _run(
        mask, "--inlet", "0,0=6uL/min", "--inlet", "10,8=2uL/min", "--outlet", "20,0",
        "--network-out", str(out),
    )  # fmt: skip
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    checked = CliRunner().invoke(main, ["check", str(out), "--json"])
    assert checked.exit_code in (0, 1), checked.output
    nodes = {n["name"]: n["pressure"] for n in json.loads(checked.output)["nodes"]}
    for row in data["ports"]:
        if row["given"] == "flow":
            assert nodes[row["name"]] == pytest.approx(row["pressure"], rel=0.01)


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (("--inlet", "0,0", "--inlet", "10,8", "--flow", "5uL/min"), "--flow drives one inlet"),
        (("--inlet", "0,0=5uL/min", "--flow", "5uL/min"), "--flow drives no inlet"),
        (("--inlet", "0,0", "--inlet", "10,8"), "give either --flow or --pressure"),
        (("--inlet", "0,0=5um",), "expected a flow (10uL/min) or a pressure"),
        (("--inlet", "0,0=5uL/min", "--outlet", "20,0=5uL/min"), "at least one needs a"),
    ],
)  # fmt: skip
def test_command_line_port_mistakes_exit_2_with_one_line(tmp_path, args, needle) -> None:
    result = CliRunner().invoke(main, ["analyse", _mask(tmp_path), "--depth", "50um", *args])
    assert result.exit_code == 2, result.output
    assert needle in result.output
    assert "Traceback" not in result.output
