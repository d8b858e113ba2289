"""Tolerances on the drawn network (`chipflow.variation`): against an independent duct series,
the network solver, analytic elasticities, the nominal build, and across execution backends."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from chipflow.build import build_design
from chipflow.errors import SpecError
from chipflow.network import Network, solve
from chipflow.spec.tolerances import Tolerances
from chipflow.variation.batch import perturbed_sizes, solve_batch
from chipflow.variation.problem import variation_problem
from chipflow.variation.sampling import corners, standard_draws
from chipflow.variation.vary import vary_build

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "designs" / "demo_endothelial_bed.toml"
TWO_LEVEL = ROOT / "designs" / "tree_endothelial.toml"


@pytest.fixture(scope="module")
def demo():
    return build_design(DEMO)


@pytest.fixture(scope="module")
def two_level():
    return build_design(TWO_LEVEL)


# -- an independent floor-shear series -----------------------------------------------------------
def floor_shear_series(width, depth, flow, viscosity, terms: int = 400):
    """Floor-centre wall shear of a rectangular duct [Pa], from the velocity field.

    Bruus, Theoretical Microfluidics (2008), ch. 4: for -w/2 < y < w/2, 0 < z < h,
    u = 4 h^2 G / (pi^3 mu) sum_odd n^-3 [1 - cosh(n pi y / h) / cosh(n pi w / 2h)] sin(n pi z / h)
    and Q = h^3 w G / (12 mu) [1 - 192 h / (pi^5 w) sum_odd n^-5 tanh(n pi w / 2h)].
    Differentiating u at the floor centre (y = 0, z = 0):
    tau = mu du/dz = 4 h G / pi^2 sum_odd n^-2 [1 - sech(n pi w / 2h)], with sum_odd n^-2 = pi^2/8.
    Valid for any aspect ratio (the floor is the wall of width w).
    """
    w = np.asarray(width, float)[..., None]
    h = np.asarray(depth, float)[..., None]
    n = 2.0 * np.arange(terms) + 1.0
    x = n * np.pi * w / (2.0 * h)
    sech = 2.0 * np.exp(-x) / (1.0 + np.exp(-2.0 * x))
    s1 = np.pi**2 / 8.0 - np.sum(sech / n**2, axis=-1)
    s2 = 192.0 * h[..., 0] / (np.pi**5 * w[..., 0]) * np.sum(np.tanh(x) / n**5, axis=-1)
    w, h = w[..., 0], h[..., 0]
    return 48.0 * viscosity * s1 * flow / (np.pi**2 * h**2 * w * (1.0 - s2))


def test_series_has_the_parallel_plate_limit() -> None:
    # a very wide duct: 6 mu Q / (w h^2) (parallel plates, analytic limit)
    tau = floor_shear_series(100e-3, 50e-6, 1e-9, 1e-3)
    assert tau == pytest.approx(6e-3 * 1e-9 / (100e-3 * 50e-6**2), rel=1e-3)


def test_bed_shear_percentiles_under_depth_only_tolerance_follow_the_duct_series(demo) -> None:
    """A syringe pump fixes the flow; the tree is symmetric and has one mould level, so every bed
    channel carries Q/32 whatever the depth, and the bed floor shear is the duct series at that
    flow. For a depth error eps uniform on [-t, t] the shear falls monotonically with eps, so its
    p-quantile is tau(h0 (1 + t (1 - 2p))) exactly. The Monte Carlo p-quantile has standard error
    sqrt(p (1 - p) / n) / f(tau_p), with the density f = 1 / (2 t |dtau/deps|); we allow 4 of them.
    """
    t, n = 0.10, 4000
    v = vary_build(demo, Tolerances(depth=t, samples=n, seed=3), workers=1)
    bed_row = next(r for r in demo.results["generations"] if r["role"] == "bed")
    w, h0 = bed_row["width"], bed_row["depth"]
    q = demo.results["totals"]["total_flow"] / bed_row["count"]
    mu = demo.fluid.viscosity
    # the flow per bed channel does not depend on depth
    assert np.allclose(v.samples.bed_flow, q, rtol=1e-12, atol=0)
    level = next(lv for lv in v.results["levels"] if lv["role"] == "bed")

    def tau(eps):
        return floor_shear_series(w, h0 * (1.0 + eps), q, mu)

    assert level["floor_shear"]["nominal"] == pytest.approx(float(tau(0.0)), rel=1e-9)
    for p in (0.05, 0.50, 0.95):
        eps_p = t * (1.0 - 2.0 * p)
        exact = float(tau(eps_p))
        slope = float((tau(eps_p + 1e-6) - tau(eps_p - 1e-6)) / 2e-6)
        assert slope < 0  # shallower channels shear harder
        standard_error = np.sqrt(p * (1 - p) / n) * 2.0 * t * abs(slope)
        reported = level["floor_shear"][f"p{round(p * 100):02d}"]
        assert abs(reported - exact) < 4.0 * standard_error, (p, reported, exact)


def test_zero_tolerances_give_the_nominal_build(demo) -> None:
    v = vary_build(demo, Tolerances(samples=64), workers=1)
    rows = demo.results["generations"]
    assert len(v.results["levels"]) == len(rows)
    for level, row in zip(v.results["levels"], rows, strict=True):
        assert (level["generation"], level["role"]) == (row["generation"], row["role"])
        for key, name in (
            ("floor_shear", "wall_shear_floor"),
            ("residence_time", "residence_time"),
            ("pressure_drop", "pressure_drop"),
        ):
            for stat in ("p05", "p50", "p95", "nominal"):
                assert level[key][stat] == pytest.approx(row[name], rel=1e-12, abs=0), key
    totals = demo.results["totals"]
    assert v.results["supply_pressure"]["p50"] == pytest.approx(totals["inlet_pressure"], rel=1e-12)
    # the demo passes its shear and pressure checks, so every sample passes
    assert demo.status == "pass" and v.results["yield"] == 1.0
    # a yield of 1 carries its one-sided 95 % lower bound: the rule of three, 1 - 3/n
    # (Hanley & Lippman-Hand, JAMA 1983)
    assert v.results["yield_lower_95"] == pytest.approx(1.0 - 3.0 / 64)
    assert v.results["yield_bound"] == "rule of three"
    assert "total width change" in v.results["width_bias"]


def test_yield_bound_below_one_is_the_exact_binomial_bound() -> None:
    """Clopper & Pearson 1934: the one-sided bound B(0.05; k, n-k+1) makes the chance of k or
    more passes at that yield exactly 5 %; scipy's binomial distribution is the reference."""
    from scipy.stats import binom

    from chipflow.variation.statistics import yield_lower_bound

    for k, n in ((95, 100), (1, 20), (950, 1000)):
        bound = yield_lower_bound(k, n)
        assert binom.sf(k - 1, n, bound) == pytest.approx(0.05, rel=1e-6)
    # and all n passing: 1 - 3/n against the exact 0.05^(1/n) (the rule approximates it)
    assert yield_lower_bound(10_000, 10_000) == pytest.approx(0.05 ** (1 / 10_000), abs=1e-6)


def test_batch_solve_equals_the_network_solver_sample_by_sample(two_level) -> None:
    """Independent path: rebuild each perturbed network and call chipflow.network.solve."""
    build = two_level
    tol = Tolerances(depth=0.08, width=3e-6, flow=0.05, viscosity=0.1)
    problem = variation_problem(build, tol)
    params = standard_draws(6, problem.n_factors, seed=11) * problem.tolerance_vector(tol)
    batch = solve_batch(problem, params)
    width, depth = perturbed_sizes(problem, params)
    net = build.solution.network
    inlet = net.node_names[problem.inlet_node]
    for s in range(params.shape[0]):  # a few samples, each solved on its own
        m = problem.n_levels
        perturbed = Network.from_arrays(
            net.node_a,
            net.node_b,
            width[s, problem.cls],
            depth[s, problem.cls],
            net.length,
            round=net.round,
            generation=net.generation,
            role=net.role,
            node_names=net.node_names,
        )
        fluid = type(build.fluid)(
            **{**build.fluid.__dict__, "viscosity": build.fluid.viscosity * (1 + params[s, m + 2])}
        )
        flows = {inlet: build.solution.port_flow[inlet] * (1 + params[s, m + 1])}
        sol = solve(perturbed, fluid, build.solution.port_pressure, flows)
        bed = net.role == "bed"
        assert batch.supply_pressure[s] == pytest.approx(sol.pressure.max(), rel=1e-11)
        bed_level = problem.roles.index("bed")
        assert batch.shear[s, bed_level] == pytest.approx(
            sol.wall_shear_floor[bed].mean(), rel=1e-11
        )
        assert batch.bed_flow[s] == pytest.approx(np.abs(sol.flow[bed]).mean(), rel=1e-11)


def test_resistance_the_solver_adds_is_held_as_an_equivalent_length(demo) -> None:
    """A network whose solver sees longer distribution channels than are drawn (as junction
    corrections would make them): the nominal sample reproduces that solution, not the bare
    drawing."""
    net = demo.solution.network
    longer = np.where(net.role == "distribution", 1.2 * net.length, net.length)
    corrected = Network.from_arrays(
        net.node_a, net.node_b, net.width, net.depth, longer, round=net.round,
        generation=net.generation, role=net.role, node_names=net.node_names,
    )  # fmt: skip
    sol = demo.solution
    flows = {n: sol.port_flow[n] for n in sol.port_flow if n not in sol.port_pressure}
    solved = solve(corrected, demo.fluid, sol.port_pressure, flows)
    # the same pressures and flows, reported on the network as drawn
    shown = dataclasses.replace(solved, network=net)
    build = dataclasses.replace(demo, solution=shown)
    problem = variation_problem(build, Tolerances())
    distribution = net.role == "distribution"
    assert np.allclose(problem.hydraulic_length[distribution], longer[distribution], rtol=1e-12)
    nominal = solve_batch(problem, np.zeros((1, problem.n_factors)))
    assert nominal.supply_pressure[0] == pytest.approx(solved.pressure.max(), rel=1e-12)
    assert solved.pressure.max() > sol.pressure.max() * 1.01  # the correction matters


def test_the_two_mould_levels_get_independent_errors(two_level) -> None:
    problem = variation_problem(two_level, Tolerances(depth=0.1))
    assert problem.n_levels == 2
    params = np.zeros((1, problem.n_factors))
    params[0, 0] = 0.1  # only the shallow level deeper by 10 %
    width, depth = perturbed_sizes(problem, params)
    shallow = problem.class_depth == problem.level_depths[0]
    deep = problem.class_depth == problem.level_depths[1]
    assert np.allclose(depth[0, shallow], 1.1 * problem.class_depth[shallow])
    assert np.array_equal(depth[0, deep], problem.class_depth[deep])
    assert np.array_equal(width[0], problem.class_width)


def test_flow_and_viscosity_elasticities_are_one_with_a_syringe_pump(demo) -> None:
    # tau = c(w, h) mu Q / (a b^2) at fixed geometry and an imposed flow (analytic)
    v = vary_build(demo, Tolerances(depth=0.1, width=2e-6, flow=0.02, samples=16), workers=1)
    by_name = {s["factor"]: s for s in v.results["sensitivity"]}
    for name in ("supply", "viscosity"):
        assert np.allclose(by_name[name]["elasticities"], 1.0, atol=1e-6)
    assert by_name["viscosity"]["shear_change"] == 0.0  # no viscosity tolerance given
    assert by_name["supply"]["shear_change"] == pytest.approx(0.02, rel=1e-9)
    # depth of the bed: d ln tau / d ln h of the independent series
    bed = v.problem.roles.index("bed")
    row = demo.results["generations"][bed]
    q = demo.results["totals"]["total_flow"] / row["count"]
    hi = floor_shear_series(row["width"], row["depth"] * 1.0001, q, 1e-3)
    lo = floor_shear_series(row["width"], row["depth"] * 0.9999, q, 1e-3)
    expected = np.log(hi / lo) / np.log(1.0001 / 0.9999)
    depth_factor = by_name["depth of mould level 1 (50 um)"]
    assert depth_factor["elasticities"][bed] == pytest.approx(float(expected), rel=1e-5)
    # the ranking: the depth tolerance moves the shear most
    assert v.results["sensitivity"][0]["factor"].startswith("depth")


def test_worst_corner_is_the_shallow_narrow_corner_and_matches_its_own_solve(demo) -> None:
    v = vary_build(demo, Tolerances(depth=0.1, width=2e-6, samples=16), workers=1)
    corner = v.results["worst_corner"]
    assert corner["corners"] == 4  # two active tolerances
    factors = corner["factors"]
    # shallower and narrower both raise the shear: the worst corner is at the upper window edge
    assert factors["depth of mould level 1 (50 um)"] == -0.1
    assert factors["width bias"] == -2e-6
    params = np.array([[-0.1, -2e-6, 0.0, 0.0]])
    direct = solve_batch(v.problem, params)
    assert corner["supply_pressure"] == direct.supply_pressure[0]
    # every random sample lies inside the corners' range
    top = max(lv["wall_shear_floor"] for lv in corner["levels"])
    assert v.samples.shear.max() <= top * (1 + 1e-12)


def test_same_seed_same_numbers_and_another_seed_differs(demo) -> None:
    tol = Tolerances(depth=0.1, width=2e-6, viscosity=0.05, samples=300, seed=7)
    a = vary_build(demo, tol, workers=1)
    b = vary_build(demo, tol, workers=1)
    assert a.results == b.results
    assert np.array_equal(a.samples.shear, b.samples.shear)
    c = vary_build(demo, Tolerances(depth=0.1, width=2e-6, viscosity=0.05, samples=300, seed=8))
    assert not np.array_equal(a.samples.shear, c.samples.shear)


def test_local_processes_give_the_same_numbers_as_one_process(demo) -> None:
    tol = Tolerances(depth=0.1, width=2e-6, samples=9000, seed=1)  # three batches
    one = vary_build(demo, tol, workers=1)
    two = vary_build(demo, tol, workers=2)
    assert one.results == two.results
    assert np.array_equal(one.samples.supply_pressure, two.samples.supply_pressure)


def test_a_dask_cluster_gives_the_same_numbers_as_local_execution(demo, dask_scheduler) -> None:
    tol = Tolerances(depth=0.1, width=2e-6, flow=0.02, samples=7000, seed=5)
    local = vary_build(demo, tol, workers=1)
    remote = vary_build(demo, tol, scheduler=dask_scheduler)
    assert remote.results == local.results
    assert np.array_equal(remote.samples.shear, local.samples.shear)


def test_a_pressure_supply_tolerance_scales_pressures_and_shear_linearly(tmp_path: Path) -> None:
    """Driven by a pressure controller into an open outlet, the network is linear (Stokes flow):
    every pressure and flow scales with the supply pressure. A supply error uniform on [-t, t]
    therefore gives p-quantiles of P0 (1 + t (2p - 1)) for the supply pressure and
    tau0 (1 + t (2p - 1)) for every floor shear (analytic)."""
    text = DEMO.read_text().replace('inlet = "syringe"', 'inlet = "pressure"\npressure = "600 Pa"')
    design = tmp_path / "pressure.toml"
    design.write_text(text)
    build = build_design(design)
    assert build.results["supply"]["inlet"]["pressure"] == 600.0
    t, n = 0.05, 2000
    v = vary_build(build, Tolerances(flow=t, samples=n, seed=2), workers=1)
    uniform = standard_draws(n, v.problem.n_factors, seed=2)[:, v.problem.n_levels + 1]
    for p in (5, 50, 95):
        factor = 1.0 + t * float(np.percentile(uniform, p))  # the same draws, linear map
        assert v.results["supply_pressure"][f"p{p:02d}"] == pytest.approx(600.0 * factor, rel=1e-12)
        for level, row in zip(v.results["levels"], build.results["generations"], strict=True):
            expected = row["wall_shear_floor"] * factor
            assert level["floor_shear"][f"p{p:02d}"] == pytest.approx(expected, rel=1e-11)
    # and the draws themselves follow the uniform law within Monte Carlo error
    for p in (5, 50, 95):
        exact = 2.0 * p / 100 - 1.0
        standard_error = np.sqrt(p / 100 * (1 - p / 100) / n) * 2.0  # density 1/2 on [-1, 1]
        assert abs(np.percentile(uniform, p) - exact) < 4 * standard_error


def test_normal_distribution_has_the_tolerance_as_standard_deviation() -> None:
    z = standard_draws(20000, 2, seed=0, distribution="normal")
    assert abs(z.std() - 1.0) < 0.02 and abs(z).max() <= 4.0
    u = standard_draws(20000, 2, seed=0)
    # uniform on [-1, 1]: standard deviation 1/sqrt(3) (analytic)
    assert abs(u.std() - 1 / np.sqrt(3)) < 0.01


@settings(max_examples=20, deadline=None)
@given(st.integers(min_value=0, max_value=6))
def test_corners_are_every_sign_pattern_once(k: int) -> None:
    c = corners(k)
    assert c.shape == (2**k, k)
    assert len({tuple(row) for row in c.tolist()}) == 2**k
    assert np.all(np.abs(c) == 1.0)


def test_tolerances_that_would_empty_a_channel_are_refused(demo) -> None:
    with pytest.raises(SpecError, match="shallowest mould depth"):
        variation_problem(demo, Tolerances(depth=50e-6, depth_relative=False))
    with pytest.raises(SpecError, match="narrowest channel width"):
        variation_problem(demo, Tolerances(width=40e-6))
    with pytest.raises(SpecError, match="100 %"):
        variation_problem(demo, Tolerances(depth=0.3, distribution="normal"))


def test_explicit_networks_are_varied_by_their_mould_levels() -> None:
    # an explicit network (drawn or not) has one depth error per distinct depth
    build = build_design(ROOT / "designs" / "bench_loop_network.toml")
    problem = variation_problem(build, Tolerances())
    assert problem.level_depths.tolist() == pytest.approx([50e-6])
    assert problem.names[0] == "depth of mould level 1 (50 um)"
