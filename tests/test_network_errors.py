"""Every way a network can be unsolvable or malformed, through the Python API."""

from __future__ import annotations

import numpy as np
import pytest

from chipflow.errors import NetworkError, SpecError
from chipflow.network import Network, NetworkBuilder, solve
from chipflow.physics.fluid import water
from chipflow.spec.network import load_network_design
from chipflow.spec.reader import parse_design_text

FLUID = water()


def two_parts() -> Network:
    # Part one: a-b-c; part two: x-y, not connected to the first.
    b = NetworkBuilder()
    for name, u, v in (("ab", "a", "b"), ("bc", "b", "c"), ("xy", "x", "y")):
        b.channel(name, u, v, width=100e-6, depth=50e-6, length=5e-3)
    return b.build()


def test_part_without_pressure_port_lists_its_nodes() -> None:
    with pytest.raises(NetworkError, match=r"nodes x, y has no path to a pressure port"):
        solve(two_parts(), FLUID, pressures={"a": 100.0, "c": 0.0})


def test_isolated_part_with_balanced_flow_ports_is_undetermined() -> None:
    with pytest.raises(NetworkError, match=r"x, y has only flow ports.*undetermined"):
        solve(two_parts(), FLUID, pressures={"a": 0.0}, flows={"x": 1e-10, "y": -1e-10})


def test_flow_ports_that_cannot_balance() -> None:
    with pytest.raises(NetworkError, match=r"cannot balance.*6 uL/min.*nodes x, y"):
        solve(two_parts(), FLUID, pressures={"a": 0.0}, flows={"x": 1e-10})


def test_only_flow_ports() -> None:
    net = Network.from_arrays([0], [1], 1e-4, 5e-5, 1e-3)
    with pytest.raises(NetworkError, match=r"only flow ports \(n0, n1\).*undetermined"):
        solve(net, FLUID, flows={0: 1e-10, 1: -1e-10})
    with pytest.raises(NetworkError, match=r"only flow ports \(n0\) and they do not balance"):
        solve(net, FLUID, flows={0: 1e-10})
    with pytest.raises(NetworkError, match=r"no ports"):
        solve(net, FLUID)


def test_long_node_lists_are_truncated() -> None:
    n = 50
    net = Network.from_arrays(np.arange(n - 1), np.arange(1, n), 1e-4, 5e-5, 1e-3, n_nodes=n + 2)
    with pytest.raises(NetworkError, match=r"nodes n0, n1, .*, n7 and 42 more has no path"):
        solve(net, FLUID, pressures={n + 1: 0.0})


def test_self_loop() -> None:
    with pytest.raises(NetworkError, match=r"channel c1 starts and ends at the same node n1"):
        Network.from_arrays([0, 1], [1, 1], 1e-4, 5e-5, 1e-3)
    b = NetworkBuilder()
    b.channel("loop", "a", "a", width=1e-4, depth=5e-5, length=1e-3)
    with pytest.raises(NetworkError, match=r"channel loop starts and ends at the same node a"):
        b.build()


def test_unknown_node_names() -> None:
    net = two_parts()
    with pytest.raises(NetworkError, match=r"unknown node 'bb'; did you mean 'b'\?"):
        solve(net, FLUID, pressures={"bb": 0.0})
    with pytest.raises(NetworkError, match=r"node index 9 outside 0\.\.4"):
        solve(net, FLUID, pressures={9: 0.0})
    with pytest.raises(NetworkError, match=r"node index outside 0\.\.1"):
        Network.from_arrays([0], [2], 1e-4, 5e-5, 1e-3, node_names=["a", "b"])


@pytest.mark.parametrize(
    ("width", "depth", "length", "what"),
    [(0.0, 5e-5, 1e-3, "width"), (1e-4, -5e-5, 1e-3, "depth"), (1e-4, 5e-5, np.nan, "length")],
)
def test_non_positive_sizes(width, depth, length, what) -> None:
    with pytest.raises(NetworkError, match=rf"channel c1: {what} must be a positive length"):
        Network.from_arrays([0, 1], [1, 2], [1e-4, width], [5e-5, depth], [1e-3, length])


def test_tube_needs_one_diameter() -> None:
    with pytest.raises(NetworkError, match=r"tube c0: width and depth must both be"):
        Network.from_arrays([0], [1], 1e-4, 2e-4, 1e-3, round=[True])


def test_duplicated_names() -> None:
    b = NetworkBuilder()
    b.channel("same", "a", "b", width=1e-4, depth=5e-5, length=1e-3)
    b.tube("same", "b", "c", diameter=5e-4, length=0.1)
    with pytest.raises(NetworkError, match=r"duplicated channel name same"):
        b.build()
    with pytest.raises(NetworkError, match=r"duplicated node name a"):
        Network.from_arrays([0], [1], 1e-4, 5e-5, 1e-3, node_names=["a", "a"])


def test_conflicting_boundary_values() -> None:
    net = two_parts()
    with pytest.raises(NetworkError, match=r"node a has both a pressure and a flow"):
        solve(net, FLUID, pressures={"a": 0.0, "x": 0.0}, flows={"a": 1e-10})
    with pytest.raises(NetworkError, match=r"node a is given more than one pressure"):
        solve(net, FLUID, pressures={"a": 0.0, 0: 1.0, "x": 0.0})
    with pytest.raises(NetworkError, match=r"pressure at node a is not a finite number"):
        solve(net, FLUID, pressures={"a": float("inf"), "x": 0.0})


# -- the same errors from a design file ----------------------------------------------------
CHANNEL = 'width = "100 um"\ndepth = "50 um"\nlength = "5 mm"\n'


def design(body: str):
    return load_network_design(parse_design_text(body, "chip.toml"))


def channel(name: str, a: str, b: str, extra: str = CHANNEL) -> str:
    return f'[[channels]]\nname = "{name}"\nfrom = "{a}"\nto = "{b}"\n{extra}'


PORTS = '[[ports]]\nnode = "a"\nflow = "5 uL/min"\n[[ports]]\nnode = "b"\npressure = "0 Pa"\n'


def test_design_file_errors_name_the_key() -> None:
    with pytest.raises(SpecError, match=r"chip.toml: channels\[0\].to: the channel starts"):
        design(channel("c", "a", "a") + PORTS)
    with pytest.raises(SpecError, match=r"channels\[0\].width: must be greater than zero"):
        design(channel("c", "a", "b", CHANNEL.replace("100 um", "0 um")) + PORTS)
    with pytest.raises(SpecError, match=r"channels\[1\].name: duplicated name 'c'"):
        design(channel("c", "a", "b") + channel("c", "b", "a") + PORTS)
    with pytest.raises(SpecError, match=r"channels\[0\].lenght: unknown key; did you mean"):
        design(channel("c", "a", "b", CHANNEL + 'lenght = "1 mm"\n') + PORTS)
    with pytest.raises(SpecError, match=r"ports\[0\].node: unknown node 'aa'; did you mean"):
        design(channel("c", "a", "b") + PORTS.replace('"a"', '"aa"'))
    with pytest.raises(SpecError, match=r"channels\[0\].to: unknown node 'bb'.*\[\[nodes\]\]"):
        design('[[nodes]]\nname = "a"\n[[nodes]]\nname = "b"\n' + channel("c", "a", "bb"))
    with pytest.raises(SpecError, match=r"ports\[0\]: a port needs exactly one of"):
        design(channel("c", "a", "b") + '[[ports]]\nnode = "a"\nflow = "1 uL/min"\nhead = "1 cm"')
    with pytest.raises(SpecError, match=r"missing unit at chip.toml: ports\[0\].flow"):
        design(channel("c", "a", "b") + '[[ports]]\nnode = "a"\nflow = 5\n')
    with pytest.raises(SpecError, match=r"no \[\[channels\]\] or \[\[tubes\]\]"):
        design('[[ports]]\nnode = "a"\nflow = "5 uL/min"\n')


def test_design_file_round_trip() -> None:
    d = design(
        'name = "demo"\n[fluid]\nkind = "water"\n'
        + '[[tubes]]\nname = "t"\nfrom = "a"\nto = "m"\ndiameter = "0.5 mm"\nlength = "10 cm"\n'
        + channel("c", "m", "b")
        + '[[ports]]\nnode = "a"\nhead = "2 cm"\n[[ports]]\nnode = "b"\npressure = "0 Pa"\n'
    )
    assert d.name == "demo" and d.network.node_names == ("a", "m", "b")
    assert d.network.round.tolist() == [True, False]
    assert d.network.width[0] == d.network.depth[0] == pytest.approx(0.5e-3)
    # Gravity reservoir: rho g h with the fluid's density and standard gravity.
    # analytic hydrostatics rho g h; source of g: standard gravity 9.80665 m/s^2 (CGPM 1901)
    assert d.pressures == {"a": pytest.approx(d.fluid.density * 9.80665 * 0.02), "b": 0.0}
    assert d.flows == {} and d.supplies["a"].label == "gravity reservoir"
