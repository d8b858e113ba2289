"""The self-check of every network solve (chipflow.network.residual).

Random channel networks with widths, depths and lengths spread over 12 decades either solve
with mass conserved at every node to the stated tolerance, and flows within it of an exact
rational solve written here (an independent solve: Fractions, Gaussian elimination), or are
refused with one NetworkError naming a channel. The reference is the exact solution of the
same linear system, so the tolerance is checked against arithmetic, not against the code under
test.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from chipflow.errors import NetworkError
from chipflow.network import Network, NetworkBuilder, solve
from chipflow.network.residual import EPS, MAX_RESIDUAL, SAFETY, check_solution
from chipflow.physics.duct import resistance
from chipflow.physics.fluid import custom_fluid

FLUID = custom_fluid("test liquid", 1e-3, 1000.0)
DECADES = 12


def exact_flows(net: Network, pressures: dict, flows: dict) -> np.ndarray:
    """Channel flows of the same system solved exactly in rational arithmetic."""
    g = [Fraction(float(x)) for x in 1.0 / resistance(net.width, net.depth, net.length,
                                                       FLUID.viscosity, net.round)]  # fmt: skip
    n = net.n_nodes
    fixed = {int(k): Fraction(float(v)) for k, v in pressures.items()}
    free = [i for i in range(n) if i not in fixed]
    pos = {node: k for k, node in enumerate(free)}
    m = len(free)
    a_mat = [[Fraction(0)] * m for _ in range(m)]
    rhs = [Fraction(0)] * m
    for node, value in flows.items():
        if int(node) in pos:
            rhs[pos[int(node)]] += Fraction(float(value))
    for j, (u, v) in enumerate(zip(net.node_a.tolist(), net.node_b.tolist(), strict=True)):
        for x, y in ((u, v), (v, u)):
            if x in pos:
                a_mat[pos[x]][pos[x]] += g[j]
                if y in pos:
                    a_mat[pos[x]][pos[y]] -= g[j]
                else:
                    rhs[pos[x]] += g[j] * fixed[y]
    for col in range(m):  # Gaussian elimination; the matrix is SPD, no pivoting needed
        for row in range(col + 1, m):
            if a_mat[row][col]:
                f = a_mat[row][col] / a_mat[col][col]
                for k in range(col, m):
                    a_mat[row][k] -= f * a_mat[col][k]
                rhs[row] -= f * rhs[col]
    x = [Fraction(0)] * m
    for row in reversed(range(m)):
        s = rhs[row] - sum(a_mat[row][k] * x[k] for k in range(row + 1, m))
        x[row] = s / a_mat[row][row]
    p = [fixed.get(i, Fraction(0)) for i in range(n)]
    for node, k in pos.items():
        p[node] = x[k]
    return np.array(
        [float(g[j] * (p[u] - p[v])) for j, (u, v) in
         enumerate(zip(net.node_a.tolist(), net.node_b.tolist(), strict=True))]
    )  # fmt: skip


@st.composite
def wild_networks(draw):
    """A connected network whose sizes span 12 decades, with ports."""
    n = draw(st.integers(2, 7))
    parents = [draw(st.integers(0, i - 1)) for i in range(1, n)]
    extra = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=n))
    extra = [(a, b) for a, b in extra if a != b]
    a = np.array(list(range(1, n)) + [e[0] for e in extra])
    b = np.array(parents + [e[1] for e in extra])
    m = a.size
    exponent = st.floats(-8.0, -8.0 + DECADES)
    width = 10.0 ** np.array(draw(st.lists(exponent, min_size=m, max_size=m)))
    depth = 10.0 ** np.array(draw(st.lists(exponent, min_size=m, max_size=m)))
    length = 10.0 ** np.array(draw(st.lists(exponent, min_size=m, max_size=m)))
    net = Network.from_arrays(a, b, width, depth, length)
    nodes = draw(st.permutations(range(n)))
    n_p = draw(st.integers(1, max(1, n // 2)))
    n_q = draw(st.integers(0, n - n_p))
    pressure = st.floats(-1e5, 1e5).map(lambda p: p if abs(p) > 1e-6 else 0.0)
    flow = st.floats(-1e-6, 1e-6).map(lambda q: q if abs(q) > 1e-15 else 0.0)
    pressures = {int(k): draw(pressure) for k in nodes[:n_p]}
    flows = {int(k): draw(flow) for k in nodes[n_p : n_p + n_q]}
    return net, pressures, flows


OUTCOMES: dict[str, int] = {"solved": 0, "refused": 0}
WORST = {"ratio": 0.0}


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(wild_networks())
def test_wild_networks_conserve_or_are_refused(problem) -> None:
    net, pressures, flows = problem
    try:
        sol = solve(net, FLUID, pressures, flows)
    except NetworkError as exc:
        OUTCOMES["refused"] += 1
        text = str(exc)
        assert "\n" not in text and len(text) < 500
        assert "floating point" in text or "conserve" in text
        return
    OUTCOMES["solved"] += 1
    check = sol.check
    assert check.tolerance == pytest.approx(SAFETY * EPS * max(1.0, check.condition))
    assert check.tolerance <= MAX_RESIDUAL
    # conservation recomputed here: net inflow of every free node over the largest flow
    injected = np.zeros(net.n_nodes)
    for k, v in flows.items():
        injected[k] = v
    out = np.zeros(net.n_nodes)
    np.add.at(out, net.node_a, sol.flow)
    np.add.at(out, net.node_b, -sol.flow)
    free = np.setdiff1d(np.arange(net.n_nodes), list(pressures))
    scale = max(np.abs(sol.flow).max(), np.abs(injected).max())
    driven = len(set(pressures.values())) > 1 or any(v != 0 for v in flows.values())
    if not driven:  # the exact flows are zero; the computed ones may only be rounding noise
        g = 1.0 / resistance(net.width, net.depth, net.length, FLUID.viscosity)
        noise = g * (np.abs(sol.pressure[net.node_a]) + np.abs(sol.pressure[net.node_b]))
        assert np.all(np.abs(sol.flow) <= check.tolerance * noise.max())
    elif scale > 0:
        imbalance = np.abs(out[free] - injected[free]).max(initial=0.0) / scale
        assert imbalance <= check.tolerance
        WORST["ratio"] = max(WORST["ratio"], imbalance / (EPS * check.condition))
        # and the flows are those of the exact solve of the same system, to the tolerance
        # times the number of nodes (in a passive network node imbalances drive no larger
        # flows than their sum)
        exact = exact_flows(net, pressures, flows)
        assert np.abs(sol.flow - exact).max() <= (net.n_nodes + 1) * check.tolerance * scale


def test_the_wild_networks_both_solve_and_are_refused() -> None:
    """The property test above exercises both outcomes (it runs first in this file)."""
    if OUTCOMES["solved"] + OUTCOMES["refused"] == 0:
        pytest.skip("run with the property test")
    assert OUTCOMES["solved"] > 0 and OUTCOMES["refused"] > 0, OUTCOMES
    assert WORST["ratio"] <= SAFETY


def bench_loop(trunk_width: float) -> NetworkBuilder:
    """The bundled bench loop (designs/bench_loop_network.toml) with one width changed."""
    b = NetworkBuilder()
    b.tube("feed", "pump", "inlet", diameter=0.51e-3, length=0.3)
    b.channel("trunk", "inlet", "split", width=trunk_width, depth=50e-6, length=3e-3)
    b.channel("branch a", "split", "a", width=200e-6, depth=50e-6, length=4e-3)
    b.channel("branch b", "split", "b", width=200e-6, depth=50e-6, length=7e-3)
    b.channel("bridge", "a", "b", width=50e-6, depth=50e-6, length=1.5e-3)
    b.channel("culture a", "a", "join", width=500e-6, depth=50e-6, length=12e-3)
    b.channel("culture b", "b", "join", width=500e-6, depth=50e-6, length=12e-3)
    b.tube("drain", "join", "reservoir", diameter=0.51e-3, length=0.1)
    return b


def test_a_mistyped_trunk_is_named_with_its_width() -> None:
    """The issue's garbage that passed: a 1e24 m trunk (1e30 um) solved to unconserved flows."""
    net = bench_loop(1e24).build()
    with pytest.raises(NetworkError, match=r"channel trunk is 1e\+24 m wide") as info:
        solve(net, FLUID, {"reservoir": 98.75}, {"pump": 5e-9 / 60})
    assert "floating point" in str(info.value)
    # the same loop with a 400 um trunk conserves mass to rounding
    sol = solve(bench_loop(400e-6).build(), FLUID, {"reservoir": 98.75}, {"pump": 5e-9 / 60})
    assert sol.check.mass_residual <= sol.check.tolerance <= 1e-12
    assert 1.0 <= sol.check.condition <= 1e4


def test_a_singular_system_is_one_network_error() -> None:
    """Widths so large that the resistance underflows: no warning, one NetworkError."""
    import warnings

    net = bench_loop(1e300).build()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(NetworkError, match="trunk"):
            solve(net, FLUID, {"reservoir": 0.0}, {"pump": 5e-9 / 60})


def test_a_network_without_drive_has_no_flow_and_passes() -> None:
    sol = solve(bench_loop(400e-6).build(), FLUID, {"reservoir": 100.0})
    assert np.abs(sol.flow).max() <= 1e-20
    assert sol.check.condition < 10 and sol.check.mass_residual <= sol.check.tolerance


def test_a_broken_solution_is_caught() -> None:
    """A solver that loses flow at a node, or breaks the channel law, is named."""
    a, b = np.array([0, 1]), np.array([1, 2])
    r = np.array([1e12, 1e12])
    p = np.array([2.0, 1.0, 0.0])
    q = (p[a] - p[b]) / r
    fixed = np.array([True, False, True])
    assert check_solution(a, b, r, p, q, fixed=fixed).mass_residual == 0.0
    with pytest.raises(NetworkError, match="does not conserve mass at node n1"):
        check_solution(a, b, r, p, q * np.array([1.0, 0.9]), fixed=fixed)
    with pytest.raises(NetworkError, match="channel law dp = R q in channel c1"):
        check_solution(a, b, r * np.array([1.0, 1.1]), p, q, fixed=fixed)
    with pytest.raises(NetworkError, match="no finite pressures"):
        check_solution(a, b, r, np.array([2.0, np.nan, 0.0]), q, fixed=fixed)


def test_the_check_is_vectorised_over_samples_and_complex() -> None:
    a, b = np.array([0, 1]), np.array([1, 2])
    r = np.array([[1e12, 1e12], [1e12, 2e12]])
    p = np.array([[2.0, 1.0, 0.0], [3.0, 2.0, 0.0]])
    q = (p[:, a] - p[:, b]) / r
    fixed = np.array([True, False, True])
    ok = check_solution(a, b, r, p, q, fixed=fixed)
    assert ok.mass_residual <= ok.tolerance
    bad = q.copy()
    bad[1, 0] *= 2  # the second sample loses flow at node n1
    with pytest.raises(NetworkError, match="node n1"):
        check_solution(a, b, r, p, bad, fixed=fixed)
    z = r * (1 + 0.5j)
    pc = p.astype(complex)
    qc = (pc[:, a] - pc[:, b]) / z
    assert check_solution(a, b, z, pc, qc, fixed=fixed).law_residual <= 1e-15


def test_results_keep_the_residual() -> None:
    from pathlib import Path

    from chipflow.build import build_design
    from chipflow.units import RESULT_UNITS

    root = Path(__file__).resolve().parents[1]
    build = build_design(root / "designs" / "bench_loop_network.toml")
    totals = build.results["totals"]
    for key in ("mass_residual", "law_residual", "condition", "residual_tolerance"):
        assert RESULT_UNITS[key] == "1"
        assert 0.0 <= totals[key] < 1.0 or key == "condition"
    assert totals["mass_residual"] <= totals["residual_tolerance"] <= MAX_RESIDUAL
