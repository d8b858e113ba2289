"""Oxygen through whole networks: no uptake, the mass balance of zero-order uptake, conservation
on random networks (loops, tubing, several ports), the topological waves."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from chipflow.errors import ChipflowError
from chipflow.network import NetworkBuilder, solve
from chipflow.physics.fluid import water
from chipflow.spec.culture import Culture
from chipflow.spec.transport import TransportSpec
from chipflow.transport.march import ChannelSet, march_network
from chipflow.transport.oxygen import PDMS_O2_PERMEABILITY
from chipflow.transport.run import run_transport
from chipflow.transport.species import Species


def tree(levels: int = 3, *, tubing: bool = True):
    """A small bifurcating tree with supply tubing, fed at 5 uL/min, open outlet."""
    b = NetworkBuilder()
    if tubing:
        b.tube("feed", "pump", "in", diameter=0.5e-3, length=0.2)
    ends = ["in"]
    for g in range(levels):  # generations
        nxt = []
        for k, node in enumerate(ends):
            for side in "ab":
                child = f"d{g}{k}{side}"
                role = "distribution" if g else "bed"
                b.channel(
                    f"c{child}", node, child, width=400e-6 / 2**g, depth=50e-6, length=3e-3,
                    generation=g, role=role,
                )  # fmt: skip
                nxt.append(child)
        ends = nxt
    for k, node in enumerate(ends):
        b.channel(f"out{k}", node, "out", width=100e-6, depth=50e-6, length=2e-3)
    port = "pump" if tubing else "in"
    return solve(b.build(), water(310.15), pressures={"out": 0.0}, flows={port: 5e-9 / 60})


def test_without_uptake_the_inlet_concentration_is_everywhere():
    sol = tree()
    run = run_transport(sol, Culture(o2_inlet=0.15))
    ox = run.oxygen
    # the same concentration everywhere, to rounding of the flow-weighted mixing at nodes
    values = np.concatenate([ox.inlet, ox.outlet, ox.floor_min, ox.node[np.isfinite(ox.node)]])
    assert np.allclose(values, 0.15, rtol=1e-14, atol=0)
    assert run.results["hypoxic_fraction"] is None  # no cells: nothing is hypoxic
    for level in run.results["levels"]:
        assert np.allclose([level[k] for k in ("o2_in", "o2_out", "o2_floor_min")], 0.15, 1e-14)
        assert level["damkohler"] == 0.0


def test_zero_order_uptake_with_fast_diffusion_is_the_mass_balance():
    # D so large that the floor sees the bulk: the outlet holds what the flow brought less what
    # N cells took, c_out = c_in - N q A_floor / Q (a mass balance)
    sol = tree(tubing=False)
    cells = Culture(
        cells=True, cell_density=1e9, o2_consumption=3e-17, o2_inlet=0.2, o2_km=0.0,
        o2_diffusivity=1e-3, seeded="all",
    )  # fmt: skip
    run = run_transport(sol, cells)
    net = sol.network
    area = float((net.width * net.length)[~net.round].sum())
    q = 5e-9 / 60
    expected = 0.2 - 1e9 * 3e-17 * area / q
    out = run.oxygen.node[net.node_index("out")]
    assert expected > 0.05  # the cells take a good part: a real test
    assert out == pytest.approx(expected, abs=1e-9 * 0.2)
    # and per channel: each takes N q w L of what passes
    ch = run.oxygen
    per = 1e9 * 3e-17 * net.width * net.length / np.abs(sol.flow)
    assert np.allclose(ch.inlet - ch.outlet, per, rtol=0, atol=1e-12)


def test_a_directed_cycle_is_refused():
    one = np.ones(2)
    ch = ChannelSet(
        upstream=np.array([0, 1]), downstream=np.array([1, 0]), flow=one, length=one,
        width=one, depth=one, round=np.zeros(2, bool), shear_rate=one,
        seeded=np.zeros(2, bool), wall=np.zeros(2), port_inflow=np.zeros(2),
        port_outflow=np.zeros(2),
    )  # fmt: skip
    with pytest.raises(ChipflowError, match="directed cycle"):
        march_network(ch, Species("o2", 3e-9, 0.2))


@st.composite
def networks(draw):
    """A connected network: a chain through every node plus random extra channels and tubes
    (loops), driven by a pump and one or two pressure ports."""
    n = draw(st.integers(3, 7))
    b = NetworkBuilder()
    pairs = [(i, i + 1) for i in range(n - 1)]
    extra = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=4))
    pairs += [(a, c) for a, c in extra if a != c]
    for k, (a, c) in enumerate(pairs):
        length = draw(st.floats(1e-3, 2e-2))
        if draw(st.booleans()) and k % 3 == 2:
            b.tube(f"t{k}", f"n{a}", f"n{c}", diameter=draw(st.floats(2e-4, 8e-4)),
                   length=length * 10)  # fmt: skip
        else:
            b.channel(f"c{k}", f"n{a}", f"n{c}", width=draw(st.floats(5e-5, 6e-4)),
                      depth=draw(st.floats(2e-5, 2e-4)), length=length,
                      role=draw(st.sampled_from(["bed", "channel"])))  # fmt: skip
    flows = {"n0": draw(st.floats(1e-11, 5e-10))}
    pressures = {f"n{n - 1}": 0.0}
    if draw(st.booleans()) and n > 3:
        pressures[f"n{n // 2}"] = draw(st.floats(0.0, 50.0))
    return solve(b.build(), water(310.15), pressures=pressures, flows=flows)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    net=networks(),
    density=st.floats(1e8, 5e9),
    uptake=st.floats(1e-18, 2e-16),
    km=st.sampled_from([0.0, 1e-3, 7.39e-3]),
    roof=st.booleans(),
    seeded=st.sampled_from(["bed", "all"]),
)
def test_moles_in_equal_moles_out_plus_uptake(net, density, uptake, km, roof, seeded):
    cells = Culture(
        cells=True, cell_density=density, o2_consumption=uptake, o2_km=km, seeded=seeded,
        o2_inlet=0.15,
    )  # fmt: skip
    spec = TransportSpec(
        roof_permeability=PDMS_O2_PERMEABILITY if roof else 0.0,
        roof_thickness=2e-3,
        tubing_permeability=PDMS_O2_PERMEABILITY if roof else 0.0,
        tubing_outer_diameter=1.6e-3,
    )
    run = run_transport(net, cells, spec)
    ox = run.oxygen
    moles_in = float((run.channels.port_inflow * 0.15).sum())
    leaving = (run.channels.port_outflow > 0) & np.isfinite(ox.node)
    moles_out = float((run.channels.port_outflow[leaving] * ox.node[leaving]).sum())
    live = ~ox.stagnant
    balance = moles_in + ox.wall_influx[live].sum() - moles_out - ox.uptake[live].sum()
    assert abs(balance) <= 1e-9 * (moles_in + abs(ox.wall_influx).sum())
    assert abs(run.results["mass_residual"]) <= 1e-9
    # nothing is made: concentrations stay between zero and the richest source
    top = max(0.15, ox.species.ambient if roof else 0.0)
    values = np.concatenate([ox.inlet, ox.outlet, ox.floor_min])
    assert np.all(values >= 0.0) and np.all(values <= top * (1 + 1e-12))
    # the floor never holds more than the bulk passing over it without a roof
    if not roof:
        assert np.all(ox.floor_min <= np.minimum(ox.inlet, ox.outlet) + 1e-15)


def test_waves_follow_the_depth_of_the_flow_graph():
    run = run_transport(tree(3), Culture())
    # tubing, three generations, the collecting channels: five waves
    assert run.oxygen.waves == 5
