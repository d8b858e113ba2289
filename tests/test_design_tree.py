"""Tree sizing: branching rules, inverse sizing, fabrication limits, presets."""

from __future__ import annotations

import math
from pathlib import Path

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from hypothesis import given, settings
from hypothesis import strategies as st

from chipflow.design.sizing import size_tree, wall_shear, width_for_shear
from chipflow.design.table import generation_table, generation_table_dict
from chipflow.design.tree_network import solve_tree, tree_arrays, tree_network
from chipflow.errors import DesignError
from chipflow.network import Network, solve
from chipflow.physics import duct
from chipflow.spec.reader import parse_design_text, read_design_file
from chipflow.spec.tree import load_tree_spec

DESIGNS = Path(__file__).resolve().parents[1] / "designs"
MU = 0.95e-3


def spec_from(text: str):
    return load_tree_spec(parse_design_text(text, "test.toml"))


def tree_text(
    *,
    flow="10 uL/min",
    generations=4,
    rule="equal-shear",
    tree_extra="",
    targets='shear_min = "0.5 Pa"\nshear_max = "1.0 Pa"',
    fabrication='depths = ["50 um", "100 um"]',
    bed='residence_time = "1 s"',
):
    return f"""
name = "t"
[fluid]
kind = "custom"
viscosity = "0.95 mPa*s"
density = "1007 kg/m^3"
[tree]
flow = "{flow}"
generations = {generations}
rule = "{rule}"
{tree_extra}
[bed]
{bed}
[targets]
{targets}
[fabrication]
{fabrication}
"""


def rows_by_generation(design, solution, field):
    """Per distribution/bed generation, every channel's value of ``field``."""
    net = solution.network
    values = getattr(solution, field)
    return [
        values[(net.generation == g) & (net.role != "collection")]
        for g in range(design.generations + 1)
    ]


# -- equal shear (generalised Murray) --------------------------------------------------------


def test_equal_shear_rectangular_network_solution():
    """Generalised Murray rule for constant-depth channels (Emerson et al., Lab Chip 2006):
    solving the mirrored tree with the network solver, every generation's floor shear equals
    the trunk's within 0.1 % before snapping."""
    design = size_tree(
        load_tree_spec(read_design_file(DESIGNS / "tree_endothelial.toml")), snap=False
    )
    arrays = tree_arrays(design)
    net = Network.from_arrays(
        arrays["node_a"],
        arrays["node_b"],
        arrays["width"],
        arrays["depth"],
        arrays["length"],
        generation=arrays["generation"],
        role=arrays["role"],
    )
    solution = solve(net, design.fluid, pressures={1: 0.0}, flows={0: design.total_flow})
    trunk = solution.wall_shear_floor[0]
    assert trunk == pytest.approx(0.75, rel=1e-3)
    np.testing.assert_allclose(solution.wall_shear_floor, trunk, rtol=1e-3)
    # the depths really differ (two mould levels), so this is not the trivial constant-depth case
    assert len(set(np.round(arrays["depth"], 9))) == 2


@settings(max_examples=15, deadline=None)
@given(
    flow=st.floats(1.0, 50.0),
    generations=st.integers(1, 5),
    trunk_um=st.integers(150, 450),
)
def test_equal_shear_from_trunk_width_at_constant_depth(flow, generations, trunk_um):
    """Law: starting from a given trunk, all generations keep the trunk's floor shear
    (one depth, Emerson et al. 2006 generalisation), checked through the network solver."""
    text = tree_text(
        flow=f"{flow} uL/min",
        generations=generations,
        tree_extra=f'trunk_width = "{trunk_um} um"',
        targets='shear_kind = "floor"',
        fabrication='depths = ["80 um"]\nmin_feature = "1 um"\nmax_width_to_depth = 1000\n'
        "max_depth_to_width = 1000",
    )
    design = size_tree(spec_from(text), snap=False)
    solution = solve_tree(design)
    np.testing.assert_allclose(solution.wall_shear_floor, solution.wall_shear_floor[0], rtol=1e-3)
    assert design.levels[0].width == pytest.approx(trunk_um * 1e-6, rel=1e-9)


@settings(max_examples=15, deadline=None)
@given(flow=st.floats(0.5, 100.0), generations=st.integers(1, 6), shear=st.floats(0.1, 3.0))
def test_round_tubes_obey_murray_cube_law(flow, generations, shear):
    """Murray (PNAS 1926;12:207): r_parent^3 = sum of r_child^3 at every bifurcation, and the
    wall shear 4 mu Q / (pi r^3) is the same in every generation."""
    text = tree_text(
        flow=f"{flow} uL/min",
        generations=generations,
        tree_extra='shape = "round"',
        targets=f'shear = "{shear} Pa"',
        fabrication='min_feature = "1 um"\nmax_width = "10 mm"',
    )
    design = size_tree(spec_from(text), snap=False)
    d = np.array([lv.width for lv in design.levels[: generations + 1]])
    np.testing.assert_allclose(d[:-1] ** 3, 2 * d[1:] ** 3, rtol=1e-12)
    q = np.array([lv.flow for lv in design.levels[: generations + 1]])
    np.testing.assert_allclose(4 * MU * q / (np.pi * (d / 2) ** 3), shear, rtol=1e-12)
    solution = solve_tree(design)
    np.testing.assert_allclose(solution.wall_shear_floor, shear, rtol=1e-9)


# -- continuity and area growth --------------------------------------------------------------


@pytest.mark.parametrize("name", ["tree_endothelial.toml", "tree_vessel.toml"])
def test_continuity_every_generation(name):
    """Mass conservation: the same flow crosses every generation in series, so mean velocity
    times total cross-section equals the total flow (REFERENCES 5, continuity)."""
    design = size_tree(load_tree_spec(read_design_file(DESIGNS / name)))
    rows = generation_table(design)
    assert len(rows) == 2 * design.generations + 1
    for row in rows:
        assert row["mean_velocity"] * row["total_area"] == pytest.approx(
            design.total_flow, rel=1e-9
        )
        assert row["flow_per_channel"] * row["count"] == pytest.approx(design.total_flow, rel=1e-9)


@settings(max_examples=15, deadline=None)
@given(growth=st.floats(1.05, 1.9), generations=st.integers(1, 5))
def test_area_growth_velocity_falls_by_the_factor(growth, generations):
    """Continuity: when the total cross-section grows by k per generation, the mean velocity
    falls by exactly k per generation (before snapping), checked on the solved network."""
    text = tree_text(
        rule="area-growth",
        generations=generations,
        tree_extra=f'trunk_width = "300 um"\ntrunk_depth = "100 um"\ngrowth = {growth}',
        targets="",
        fabrication='depths = ["100 um"]\nmin_feature = "1 um"\nmax_depth_to_width = 100',
    )
    design = size_tree(spec_from(text), snap=False)
    u = [v[0] for v in rows_by_generation(design, solve_tree(design), "mean_velocity")]
    np.testing.assert_allclose(np.array(u[:-1]) / np.array(u[1:]), growth, rtol=1e-9)


def test_velocity_ratio_trunk_to_bed():
    """area-growth by a trunk-to-bed velocity ratio: u_trunk / u_bed equals it (continuity)."""
    text = tree_text(
        rule="area-growth",
        generations=5,
        tree_extra='trunk_width = "300 um"\ntrunk_depth = "100 um"\nvelocity_ratio = 8',
        targets="",
        fabrication='depths = ["100 um"]\nmin_feature = "1 um"\nmax_depth_to_width = 100',
    )
    design = size_tree(spec_from(text), snap=False)
    u = rows_by_generation(design, solve_tree(design), "mean_velocity")
    assert u[0][0] / u[-1][0] == pytest.approx(8.0, rel=1e-9)


# -- inverse sizing --------------------------------------------------------------------------


@settings(max_examples=40, deadline=None)
@given(
    flow=st.floats(1e-12, 1e-8),
    depth=st.floats(10e-6, 300e-6),
    shear=st.floats(0.01, 5.0),
    kind=st.sampled_from(["floor", "mean", "max"]),
)
def test_inverse_sizing_reproduces_target(flow, depth, shear, kind):
    """Fed back through the duct physics, the width found reproduces the target within 0.1 %."""
    width = width_for_shear(flow, depth, shear, MU, kind)
    if math.isnan(width):  # target outside depth/1e4 .. depth*1e4: nothing to check
        assert not (depth / 1e4 < 1e-9)
        return
    assert float(wall_shear(kind, width, depth, flow, MU)) == pytest.approx(shear, rel=1e-3)


def _poisson_floor_shear(width, depth, ny):
    """Independent finite-difference solution of mu lap(u) = -G on the cross-section (u = 0 on
    the walls); returns tau_floor / (mu Q) with the floor the wall of width ``width`` (z = 0)
    and the wall shear at the middle of the side wall (z = depth/2) likewise."""
    nz = int(round(ny * depth / width))
    dy, dz = width / ny, depth / nz
    iy, iz = ny - 1, nz - 1  # interior points
    lap = sp.kronsum(
        sp.diags([1.0, -2.0, 1.0], [-1, 0, 1], shape=(iy, iy)) / dy**2,
        sp.diags([1.0, -2.0, 1.0], [-1, 0, 1], shape=(iz, iz)) / dz**2,
    )
    u = spla.spsolve(lap.tocsc(), -np.ones(iy * iz)).reshape(iz, iy)  # mu = G = 1
    full = np.zeros((nz + 1, ny + 1))
    full[1:-1, 1:-1] = u
    q = np.trapezoid(np.trapezoid(full, dx=dy, axis=1), dx=dz)
    # second-order one-sided derivatives at the wall centres
    floor = (-3 * full[0, ny // 2] + 4 * full[1, ny // 2] - full[2, ny // 2]) / (2 * dz)
    side = (-3 * full[nz // 2, 0] + 4 * full[nz // 2, 1] - full[nz // 2, 2]) / (2 * dy)
    return floor / q, side / q


def test_floor_shear_tall_channel_against_finite_differences():
    """Tall channel (w = 50 um < h = 100 um): the floor is a short wall, where the shear is
    lower than the peak. An independent finite-difference Poisson solution (Richardson
    extrapolated over two grids) checks wall_shear_floor and the width found for a target."""
    w, h = 50e-6, 100e-6
    coarse = np.array(_poisson_floor_shear(w, h, 40))
    fine = np.array(_poisson_floor_shear(w, h, 80))
    floor_fd, side_fd = (4 * fine - coarse) / 3  # second-order schemes
    flow = 1e-10
    floor = duct.wall_shear_floor(w, h, flow, MU) / (MU * flow)
    peak = duct.wall_shear_max(w, h, flow, MU) / (MU * flow)
    assert floor == pytest.approx(floor_fd, rel=2e-3)
    assert peak == pytest.approx(side_fd, rel=2e-3)
    assert floor < 0.9 * peak  # floor != max for w < h
    # inverse: the width for the finite-difference floor shear is the 50 um of the FD channel
    target = floor_fd * MU * flow
    assert width_for_shear(flow, h, target, MU, "floor") == pytest.approx(w, rel=2e-3)


# -- presets ---------------------------------------------------------------------------------


def test_vessel_preset_bed_is_short_and_takes_about_a_second():
    """Vessel-like preset: bed channels under 1 mm, crossed in about a second (capillaries are
    under a millimetre long and crossed in about a second, common practice in physiology;
    Guyton & Hall give 1-3 s); the velocity falls about 20-fold from trunk to bed."""
    design = size_tree(load_tree_spec(read_design_file(DESIGNS / "tree_vessel.toml")))
    assert design.bed.length < 1e-3
    rows = generation_table(design)
    bed = next(r for r in rows if r["role"] == "bed")
    assert bed["residence_time"] == pytest.approx(1.0, rel=1e-9)
    assert bed["count"] == 64
    assert rows[0]["mean_velocity"] / bed["mean_velocity"] == pytest.approx(20, rel=0.05)
    assert design.max_straight_length == pytest.approx(1e-3)


def test_endothelial_preset_sizes_itself_from_the_window():
    """Endothelial cells align at 0.5-1.0 Pa (Dewey et al. 1981): sized to the middle of the
    window, every level passes; the trunk needs the deeper level (at 50 um it would break the
    roof-sag limit), the rest the shallower one (choice rule: shallowest feasible)."""
    design = size_tree(load_tree_spec(read_design_file(DESIGNS / "tree_endothelial.toml")))
    table = generation_table_dict(design)
    for row in table["levels"]:  # every level's floor shear inside its window
        assert row["shear_min"] <= row["wall_shear_floor"] <= row["shear_max"]
    depths = [round(lv.depth * 1e6) for lv in design.levels]
    assert depths[0] == depths[-1] == 100 and set(depths[1:-1]) == {50}
    for level in design.levels:
        assert level.width * 1e6 == pytest.approx(round(level.width * 1e6), abs=1e-6)  # 1 um grid


def test_tree_network_is_a_mirrored_tree():
    """Graph structure checked with networkx: 2**n inlet-outlet paths, each through 2n+1
    channels, and no cycle once the outlet is removed."""
    design = size_tree(load_tree_spec(read_design_file(DESIGNS / "tree_endothelial.toml")))
    net = tree_network(design)
    graph = nx.MultiDiGraph()
    graph.add_edges_from(zip(net.node_a.tolist(), net.node_b.tolist(), strict=True))
    paths = list(nx.all_simple_edge_paths(graph, 0, 1))
    assert len(paths) == 2**design.generations
    assert {len(p) for p in paths} == {2 * design.generations + 1}


# -- fabrication limits and infeasible targets -----------------------------------------------

ENDO = {"flow": "10 uL/min", "generations": 4}


def test_single_depth_compromise_is_a_warning():
    """Single 50 um mould: the trunk would need 538 um (> 10 x depth, roof sag); drawn at the
    limit of 500 um, its floor shear 0.81 Pa is still inside 0.5-1.0 Pa: a warning."""
    design = size_tree(spec_from(tree_text(fabrication='depths = ["50 um"]')))
    assert design.levels[0].width == pytest.approx(500e-6)
    (warning,) = design.warnings
    assert "generation 0" in warning and "roof-sag" in warning and "0.8111 Pa" in warning
    rows = generation_table(design)
    assert rows[0]["wall_shear_floor"] == pytest.approx(0.8111, rel=1e-3)
    assert rows[0]["shear_min"] <= rows[0]["wall_shear_floor"] <= rows[0]["shear_max"]


def test_roof_sag_binds_outside_window():
    with pytest.raises(DesignError) as err:
        size_tree(
            spec_from(
                tree_text(
                    targets='shear = "0.6 Pa"\nshear_min = "0.5 Pa"\nshear_max = "0.7 Pa"',
                    fabrication='depths = ["50 um"]',
                )
            )
        )
    text = str(err.value)
    assert "generation 0" in text and "roof-sag limit width/depth <= 10" in text
    assert "closest achievable floor shear 0.8111 Pa" in text
    assert "deeper mould level" in text


def test_max_width_binds():
    with pytest.raises(DesignError, match=r"generation 0 .*maximum width.*allows 150 um"):
        size_tree(
            spec_from(
                tree_text(
                    targets='shear = "0.75 Pa"',
                    fabrication='depths = ["100 um"]\nmax_width = "150 um"\n'
                    "max_width_to_depth = 20",
                )
            )
        )


def test_tall_wall_binds_for_the_bed():
    """At 100 um depth generation 3 would need a channel narrower than depth/2 (Delamarche
    et al. 1997): 39.6 um."""
    with pytest.raises(DesignError) as err:
        size_tree(
            spec_from(tree_text(targets='shear = "0.75 Pa"', fabrication='depths = ["100 um"]'))
        )
    text = str(err.value)
    assert "generation 3 (distribution, 8 channels" in text
    assert "tall-wall limit depth/width <= 2" in text and "shallower mould level" in text


def test_min_feature_and_min_width_bind():
    for fab, rule in (
        ('depths = ["50 um"]\nmin_feature = "60 um"\nmin_width = "10 um"', "mask minimum feature"),
        ('depths = ["50 um"]\nmin_feature = "10 um"\nmin_width = "60 um"', "minimum width"),
    ):
        with pytest.raises(DesignError, match=f"generation 2 .*{rule}.*allows 60 um"):
            size_tree(
                spec_from(
                    tree_text(
                        flow="2 uL/min", generations=2, targets='shear = "0.75 Pa"', fabrication=fab
                    )
                )
            )


def test_depth_with_no_drawable_width():
    """min_width above 10 x depth leaves no width at all at that depth."""
    with pytest.raises(DesignError, match="leave no width at depth 10 um"):
        size_tree(
            spec_from(
                tree_text(
                    targets='shear = "0.75 Pa"',
                    fabrication='depths = ["10 um"]\nmin_width = "150 um"',
                )
            )
        )


def test_fewest_depths_then_shallowest():
    """Choice rule: with 50, 100 and 200 um available, two levels suffice; among two-level
    choices the shallowest per generation is used."""
    design = size_tree(
        spec_from(
            tree_text(
                targets='shear = "0.75 Pa"', fabrication='depths = ["50 um", "100 um", "200 um"]'
            )
        )
    )
    depths = sorted({round(lv.depth * 1e6) for lv in design.levels})
    assert depths == [50, 100]


def test_snapping_miss_is_a_warning():
    """A coarse 20 um grid moves the 51 um bed to 60 um: a soft miss, reported as a warning
    with the shear after snapping."""
    design = size_tree(
        spec_from(
            tree_text(
                targets='shear = "0.75 Pa"\ntolerance = 0.05',
                fabrication='depths = ["50 um", "100 um"]\ngrid = "20 um"\nmin_feature = "20 um"',
            )
        )
    )
    assert any("snapping" in w and "generation 4" in w for w in design.warnings)
    bed = design.bed
    assert bed.width == pytest.approx(60e-6)
    got = float(wall_shear("floor", bed.width, bed.depth, bed.flow, MU))
    assert any(f"{got:.4g} Pa" in w for w in design.warnings)


def test_table_rule_checks_fabrication():
    widths = '["300 um", "200 um", "20 um"]'
    with pytest.raises(DesignError, match=r"tree.widths\[2\].*mask minimum feature"):
        size_tree(
            spec_from(
                tree_text(
                    rule="table",
                    generations=2,
                    targets="",
                    tree_extra=f'widths = {widths}\ndepths = ["50 um", "50 um", "50 um"]',
                )
            )
        )
    design = size_tree(
        spec_from(
            tree_text(
                rule="table",
                generations=2,
                targets="",
                tree_extra='widths = ["300 um", "200 um", "100 um"]\n'
                'depths = ["50 um", "50 um", "50 um"]',
            )
        )
    )
    assert [round(lv.width * 1e6) for lv in design.levels] == [300, 200, 100, 200, 300]
    assert [lv.role for lv in design.levels] == [
        "distribution",
        "distribution",
        "bed",
        "collection",
        "collection",
    ]


def test_bed_length_given():
    design = size_tree(
        spec_from(
            tree_text(
                bed='length = "800 um"\nmax_straight_length = "2 mm"', targets='shear = "0.75 Pa"'
            )
        )
    )
    assert design.bed.length == pytest.approx(800e-6)
    assert design.max_straight_length == pytest.approx(2e-3)


def test_tree_check_text_and_json():
    """What ``chipflow check`` prints for a tree: every level, the window and the verdict; the
    JSON rows carry the same floor shear as the duct physics for the sized geometry."""
    import json

    from chipflow.cli.check import tree_check

    top = read_design_file(DESIGNS / "tree_endothelial.toml")
    text, ok = tree_check(top)
    assert ok and "lengths as drawn on the chip" in text
    table = text.split("\nlengths as drawn")[0]
    assert len(table.splitlines()) == 1 + 2 + 9  # title, header, units, 9 levels
    data = json.loads(tree_check(top, as_json=True)[0])
    bed = next(r for r in data["levels"] if r["role"] == "bed")
    expected = duct.wall_shear_floor(bed["width"], bed["depth"], bed["flow_per_channel"], 0.95e-3)
    assert bed["wall_shear_floor"] == pytest.approx(expected, rel=1e-9)
    assert data["units"]["wall_shear_floor"] == "Pa"
    # each level's verdict is the worst of the checks naming it (the bed: its shear, residence
    # time and flow uniformity)
    bed_checks = [c["status"] for c in data["checks"] if c.get("level") == "bed"]
    assert len(bed_checks) >= 3
    assert bed["status"] == max(bed_checks, key=("pass", "warn", "fail").index)
    assert {r["status"] for r in data["levels"] if r["role"] != "bed"} == {"pass"}
    worst = max(("pass", "warn", "fail").index(c["status"]) for c in data["checks"])
    assert data["status"] == ("pass", "warn", "fail")[worst] != "fail"
