"""The network solver against closed-form networks, circuit laws and an independent solve.

Hydraulic networks in laminar flow are linear resistor networks (pressure ~ voltage, flow ~
current), so the closed forms of circuit theory apply: series and parallel resistances, the
Wheatstone bridge (Thevenin equivalent), the terminated ladder, Kirchhoff's current law,
Tellegen's theorem and reciprocity (e.g. Desoer & Kuh, *Basic Circuit Theory*, 1969).

Most analytic networks use round tubes, whose resistance is checked here with the
Hagen-Poiseuille formula written in the test, ``R = 128 mu L / (pi d^4)`` (REFERENCES.md 1).
"""

from __future__ import annotations

import math

import networkx as nx
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from chipflow.network import (
    Network,
    NetworkBuilder,
    atmosphere,
    boundary_conditions,
    generation_rows,
    pressure_controller,
    reservoir,
    solve,
    syringe_pump,
)
from chipflow.physics.duct import resistance
from chipflow.physics.fluid import custom_fluid

FLUID = custom_fluid("test liquid", 1.0e-3, 1000.0)
D = 0.5e-3  # tube bore [m]


def hp(length: float, diameter: float = D, mu: float = FLUID.viscosity) -> float:
    """Hagen-Poiseuille resistance, written independently of chipflow [Pa s/m^3]."""
    return 128.0 * mu * length / (math.pi * diameter**4)


def tubes(edges: list[tuple[str, str, str, float]]) -> Network:
    b = NetworkBuilder()
    for name, a, c, length in edges:
        b.tube(name, a, c, diameter=D, length=length)
    return b.build()


# -- analytic networks ---------------------------------------------------------------------
def test_series_resistances_add() -> None:
    net = tubes([("t1", "in", "m", 0.1), ("t2", "m", "out", 0.3)])
    sol = solve(net, FLUID, pressures={"in": 1000.0, "out": 0.0})
    q = 1000.0 / (hp(0.1) + hp(0.3))  # series: R = R1 + R2
    assert sol.flow == pytest.approx([q, q], rel=1e-12)
    assert sol.node_pressure("m") == pytest.approx(1000.0 * hp(0.3) / (hp(0.1) + hp(0.3)))
    assert sol.port_flow["in"] == pytest.approx(q, rel=1e-12)
    assert sol.port_flow["out"] == pytest.approx(-q, rel=1e-12)


def test_parallel_conductances_add() -> None:
    net = tubes([("t1", "in", "out", 0.1), ("t2", "in", "out", 0.4), ("t3", "in", "out", 0.2)])
    q_in = 2e-9
    sol = solve(net, FLUID, pressures={"out": 0.0}, flows={"in": q_in})
    r_total = 1.0 / (1 / hp(0.1) + 1 / hp(0.4) + 1 / hp(0.2))  # parallel: 1/R = sum 1/R_i
    assert sol.node_pressure("in") == pytest.approx(q_in * r_total, rel=1e-12)
    assert sol.flow.sum() == pytest.approx(q_in, rel=1e-12)


def bridge(l1: float, l2: float, l3: float, l4: float, l5: float) -> Network:
    return tubes(
        [("r1", "s", "x", l1), ("r2", "s", "y", l2), ("r3", "x", "t", l3),
         ("r4", "y", "t", l4), ("r5", "x", "y", l5)]
    )  # fmt: skip


def test_balanced_wheatstone_bridge_carries_no_flow() -> None:
    # Balanced when R1/R3 = R2/R4 (Wheatstone's condition).
    sol = solve(bridge(0.1, 0.2, 0.3, 0.6, 0.05), FLUID, pressures={"s": 500.0, "t": 0.0})
    assert abs(sol.flow[4]) <= 1e-12 * abs(sol.flow).max()


def test_unbalanced_wheatstone_bridge_matches_thevenin() -> None:
    lengths = (0.1, 0.25, 0.3, 0.2, 0.05)
    r1, r2, r3, r4, r5 = (hp(x) for x in lengths)
    p = 800.0
    sol = solve(bridge(*lengths), FLUID, pressures={"s": p, "t": 0.0})
    # Thevenin equivalent seen by the bridge channel r5 (closed form):
    p_x, p_y = p * r3 / (r1 + r3), p * r4 / (r2 + r4)
    r_th = r1 * r3 / (r1 + r3) + r2 * r4 / (r2 + r4)
    assert sol.flow[4] == pytest.approx((p_x - p_y) / (r_th + r5), rel=1e-11)
    assert sol.flow[4] != 0


@pytest.mark.parametrize("sections", [1, 5, 40])
def test_terminated_uniform_ladder(sections: int) -> None:
    # Rail resistance Rs between rail nodes, shunt Rp from each rail node to ground. The
    # input resistance of the infinite ladder solves R = Rs + Rp R / (Rp + R):
    # R_in = Rs/2 + sqrt(Rs^2/4 + Rs Rp). Terminating the last rail node with R_in to ground
    # makes every finite ladder look infinite: R_in at the input, and the pressure falls by
    # the same ratio r = Z / (Rs + Z) per section, Z = Rp R_in / (Rp + R_in).
    ls, lp = 0.05, 0.4
    rs, rp = hp(ls), hp(lp)
    r_in = rs / 2 + math.sqrt(rs * rs / 4 + rs * rp)
    l_term = r_in / hp(1.0)
    edges = []
    for k in range(sections):
        edges.append((f"s{k}", f"n{k}", f"n{k + 1}", ls))
        edges.append((f"p{k}", f"n{k + 1}", "ground", lp))
    edges.append(("term", f"n{sections}", "ground", l_term))
    p0 = 1000.0
    sol = solve(tubes(edges), FLUID, pressures={"n0": p0, "ground": 0.0})
    assert sol.port_flow["n0"] == pytest.approx(p0 / r_in, rel=1e-11)
    z = rp * r_in / (rp + r_in)
    ratio = z / (rs + z)
    rail = np.array([sol.node_pressure(f"n{k}") for k in range(sections + 1)])
    assert rail == pytest.approx(p0 * ratio ** np.arange(sections + 1), rel=1e-10)


def test_reservoir_driven_chip_flow_is_rho_g_h_over_r() -> None:
    # A reservoir 4 cm above the inlet, tubing, a chip channel, outlet open to the air.
    w, h, length = 300e-6, 60e-6, 12e-3
    b = NetworkBuilder()
    b.tube("tubing", "reservoir", "inlet", diameter=D, length=0.2)
    b.channel("chip", "inlet", "outlet", width=w, depth=h, length=length)
    supplies = {"reservoir": reservoir(0.04), "outlet": atmosphere()}
    pressures, flows = boundary_conditions(supplies, FLUID)
    sol = solve(b.build(), FLUID, pressures, flows)
    # Rectangular channel: Bruus (2008) eq. 4.39 series, summed here independently.
    n = np.arange(1, 400, 2)
    series = np.sum(np.tanh(n * np.pi * w / (2 * h)) / n**5)
    r_chip = 12 * FLUID.viscosity * length / (w * h**3 * (1 - 192 * h / (np.pi**5 * w) * series))
    rho_g_h = 1000.0 * 9.80665 * 0.04  # standard gravity (CGPM 1901)
    assert sol.flow == pytest.approx(rho_g_h / (hp(0.2) + r_chip), rel=1e-10)
    assert sol.node_pressure("reservoir") == pytest.approx(rho_g_h, rel=1e-15)


def test_supply_modes_give_their_boundary_values() -> None:
    assert syringe_pump(1e-10).boundary(FLUID) == ("flow", 1e-10)
    assert pressure_controller(2000.0).boundary(FLUID) == ("pressure", 2000.0)
    assert atmosphere().boundary(FLUID) == ("pressure", 0.0)
    kind, value = reservoir(0.1).boundary(FLUID)
    assert kind == "pressure" and value == pytest.approx(1000.0 * 9.80665 * 0.1)


def test_syringe_pump_flow_and_pressure_controller_agree() -> None:
    net = tubes([("t1", "a", "b", 0.3), ("t2", "b", "c", 0.1), ("t3", "b", "c", 0.2)])
    by_flow = solve(net, FLUID, pressures={"c": 0.0}, flows={"a": 3e-9})
    by_pressure = solve(net, FLUID, pressures={"a": by_flow.node_pressure("a"), "c": 0.0})
    assert by_pressure.flow == pytest.approx(by_flow.flow, rel=1e-12)


def test_generation_rows_follow_continuity() -> None:
    # A mirrored two-generation tree: the same flow crosses every generation (continuity).
    b = NetworkBuilder()
    b.channel(
        "d0", "in", "j", width=200e-6, depth=50e-6, length=4e-3, generation=0, role="distribution"
    )
    for side, length in (("l", 5e-3), ("r", 7e-3)):
        b.channel(
            f"bed {side}",
            "j",
            "k",
            width=100e-6,
            depth=50e-6,
            length=length,
            generation=1,
            role="bed",
        )
    b.channel("c0", "k", "out", width=200e-6, depth=50e-6, length=4e-3, generation=0,
              role="collection")  # fmt: skip
    sol = solve(b.build(), FLUID, pressures={"out": 0.0}, flows={"in": 1e-10})
    rows = generation_rows(sol)
    assert [(r.role, r.generation, r.count) for r in rows] == [
        ("distribution", 0, 1), ("bed", 1, 2), ("collection", 0, 1)
    ]  # fmt: skip
    for row in rows:
        assert row.flow_total == pytest.approx(1e-10, rel=1e-12)
    bed = rows[1]
    # Parallel channels share the pressure drop: Q ~ 1/L for equal cross-sections.
    assert bed.flow_max / bed.flow_min == pytest.approx(7 / 5, rel=1e-12)


def test_per_channel_fields_are_those_of_a_single_duct() -> None:
    # One channel of the network carries the flow that chipflow channel would report for it.
    b = NetworkBuilder()
    b.channel("c", "in", "out", width=200e-6, depth=50e-6, length=10e-3)
    sol = solve(b.build(), FLUID, pressures={"in": 475.0, "out": 0.0})
    r = resistance(200e-6, 50e-6, 10e-3, FLUID.viscosity)
    assert sol.flow[0] == pytest.approx(475.0 / r, rel=1e-12)
    assert sol.pressure_drop[0] == pytest.approx(475.0, rel=1e-12)
    assert sol.mean_velocity[0] == pytest.approx(sol.flow[0] / (200e-6 * 50e-6), rel=1e-12)
    assert sol.residence_time[0] == pytest.approx(10e-3 / sol.mean_velocity[0], rel=1e-12)
    # Force balance: tau_mean = dp A / (L P) (REFERENCES.md section 1).
    tau = 475.0 * 200e-6 * 50e-6 / (10e-3 * 2 * (250e-6))
    assert sol.wall_shear_mean[0] == pytest.approx(tau, rel=1e-12)


# -- random connected graphs ---------------------------------------------------------------
@st.composite
def graphs(draw, max_nodes: int = 12):
    """A random connected network with random rectangular channels and tubes."""
    n = draw(st.integers(3, max_nodes))
    parents = [draw(st.integers(0, i - 1)) for i in range(1, n)]  # a random spanning tree
    extra = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=2 * n))
    extra = [(a, b) for a, b in extra if a != b]
    a = np.array(list(range(1, n)) + [e[0] for e in extra])
    b = np.array(parents + [e[1] for e in extra])
    m = a.size
    sizes = st.floats(20e-6, 400e-6)
    width = np.array(draw(st.lists(sizes, min_size=m, max_size=m)))
    depth = np.array(draw(st.lists(sizes, min_size=m, max_size=m)))
    length = np.array(draw(st.lists(st.floats(1e-3, 30e-3), min_size=m, max_size=m)))
    rnd = np.array(draw(st.lists(st.booleans(), min_size=m, max_size=m)))
    depth = np.where(rnd, width, depth)
    return Network.from_arrays(a, b, width, depth, length, round=rnd)


@st.composite
def boundary(draw, net: Network):
    """At least one pressure port, any number of flow ports, on distinct nodes."""
    nodes = draw(st.permutations(range(net.n_nodes)))
    n_p = draw(st.integers(1, max(1, net.n_nodes // 2)))
    n_q = draw(st.integers(0, net.n_nodes - n_p))
    # flows so small that their pressure drops vanish in floating point beside a pressure
    # of the same problem are refused by the solve's self-check (test_residual.py covers
    # that); here they are taken as zero, as are pressures near the smallest float
    pressure = st.floats(-2e3, 2e3).map(lambda p: p if abs(p) > 1e-200 else 0.0)
    flow = st.floats(-1e-9, 1e-9).map(lambda q: q if abs(q) > 1e-12 else 0.0)
    pressures = {int(k): draw(pressure) for k in nodes[:n_p]}
    flows = {int(k): draw(flow) for k in nodes[n_p : n_p + n_q]}
    return pressures, flows


@st.composite
def problems(draw):
    net = draw(graphs())
    pressures, flows = draw(boundary(net))
    return net, pressures, flows


def net_outflow(net: Network, q: np.ndarray) -> np.ndarray:
    out = np.zeros(net.n_nodes)
    np.add.at(out, net.node_a, q)
    np.add.at(out, net.node_b, -q)
    return out


@settings(max_examples=60, deadline=None)
@given(problems())
def test_kirchhoff_current_law_at_every_node(problem) -> None:
    net, pressures, flows = problem
    sol = solve(net, FLUID, pressures, flows)
    out = net_outflow(net, sol.flow)
    injected = np.zeros(net.n_nodes)
    for k, v in flows.items():
        injected[k] = v
    free = np.setdiff1d(np.arange(net.n_nodes), list(pressures))
    # Relative to the size of the terms balanced at each node: g (|p_a| + |p_b|) per channel
    # plus the imposed flow (flows of pure round-off carry no scale of their own).
    g = 1.0 / resistance(net.width, net.depth, net.length, FLUID.viscosity, net.round)
    term = g * (np.abs(sol.pressure[net.node_a]) + np.abs(sol.pressure[net.node_b]))
    size = np.abs(injected)
    np.add.at(size, net.node_a, term)
    np.add.at(size, net.node_b, term)
    assert np.all(np.abs(out[free] - injected[free]) <= 1e-12 * size[free])
    # the self-check's residual: the imbalance over the largest flow, within its tolerance
    # (chipflow.network.residual)
    assert sol.residual == sol.check.mass_residual <= sol.check.tolerance
    scale = size.max()
    # Port flows balance: what enters leaves.
    total = sum(sol.port_flow.values())
    assert abs(total) <= 1e-12 * max(scale, 1e-30)


@settings(max_examples=60, deadline=None)
@given(problems())
def test_tellegen_dissipation_equals_port_power(problem) -> None:
    net, pressures, flows = problem
    sol = solve(net, FLUID, pressures, flows)
    dissipated = float(np.sum(sol.pressure_drop * sol.flow))
    delivered = sum(sol.node_pressure(k) * q for k, q in sol.port_flow.items())
    # Round-off scale: the size of the terms, g (|p_a| + |p_b|) max|p| summed over channels.
    g = 1.0 / resistance(net.width, net.depth, net.length, FLUID.viscosity, net.round)
    p = np.abs(sol.pressure)
    scale = float(np.sum(g * (p[net.node_a] + p[net.node_b])) * p.max()) + 1e-300
    assert dissipated >= -1e-12 * scale  # passive network: no channel delivers power
    assert dissipated == pytest.approx(delivered, rel=1e-9, abs=1e-12 * scale)


@settings(max_examples=40, deadline=None)
@given(graphs(), st.data())
def test_transfer_resistance_is_reciprocal(net: Network, data) -> None:
    ground, i, j = data.draw(st.permutations(range(net.n_nodes)))[:3]
    q = 1e-10
    p_at_j = solve(net, FLUID, {ground: 0.0}, {i: q}).pressure[j]
    p_at_i = solve(net, FLUID, {ground: 0.0}, {j: q}).pressure[i]
    assert p_at_j == pytest.approx(p_at_i, rel=1e-10)


@settings(max_examples=40, deadline=None)
@given(problems(), st.floats(-3, 3), st.floats(-3, 3))
def test_solution_is_linear_in_the_boundary_values(problem, alpha, beta) -> None:
    net, pressures, flows = problem
    # A second boundary set on the same nodes: reverse the values.
    p2 = dict(zip(pressures, reversed(list(pressures.values())), strict=True))
    q2 = dict(zip(flows, reversed(list(flows.values())), strict=True))
    s1 = solve(net, FLUID, pressures, flows)
    s2 = solve(net, FLUID, p2, q2)
    mix = solve(
        net,
        FLUID,
        {k: alpha * pressures[k] + beta * p2[k] for k in pressures},
        {k: alpha * flows[k] + beta * q2[k] for k in flows},
    )
    expected = alpha * s1.pressure + beta * s2.pressure
    scale = np.abs(alpha * s1.pressure).max() + np.abs(beta * s2.pressure).max() + 1e-300
    assert np.abs(mix.pressure - expected).max() <= 1e-9 * scale


@settings(max_examples=40, deadline=None)
@given(problems())
def test_agrees_with_a_dense_solve_on_the_networkx_laplacian(problem) -> None:
    net, pressures, flows = problem
    sol = solve(net, FLUID, pressures, flows)
    # Independent reference: networkx builds the weighted Laplacian of the multigraph
    # (parallel channels sum their conductances), numpy.linalg solves the free block densely.
    g = nx.MultiGraph()
    g.add_nodes_from(range(net.n_nodes))
    r = resistance(net.width, net.depth, net.length, FLUID.viscosity, net.round)
    for a, b, c in zip(net.node_a.tolist(), net.node_b.tolist(), (1.0 / r).tolist(), strict=True):
        g.add_edge(a, b, weight=c)
    lap = nx.laplacian_matrix(g, nodelist=range(net.n_nodes), weight="weight").toarray()
    fixed = np.array(sorted(pressures))
    free = np.setdiff1d(np.arange(net.n_nodes), fixed)
    p = np.zeros(net.n_nodes)
    p[fixed] = [pressures[k] for k in fixed]
    rhs = np.zeros(net.n_nodes)
    for k, v in flows.items():
        rhs[k] = v
    if free.size:
        rhs_free = rhs[free] - lap[np.ix_(free, fixed)] @ p[fixed]
        p[free] = np.linalg.solve(lap[np.ix_(free, free)], rhs_free)
    scale = np.abs(p).max() + 1e-300
    assert np.abs(sol.pressure - p).max() <= 1e-9 * scale
