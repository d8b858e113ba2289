"""The field in ``chipflow build``: results, report section, figure, --field/--no-field."""

from __future__ import annotations

import json
import tomllib

import numpy as np
import pytest
import shapely
from click.testing import CliRunner

from chipflow.build import DesignSource, build_design
from chipflow.cli import main
from chipflow.field import FieldPort, FieldRegion, solve_field
from chipflow.field.budget import estimate_layout_field
from chipflow.physics import duct


def small_demo(tmp_path, beds: int = 8) -> str:
    """The demo design with a smaller bed, written as a file."""
    text = open("chipflow/data/demo.toml", encoding="utf-8").read()
    text = text.replace("bed_channels = 32", f"bed_channels = {beds}")
    path = tmp_path / "small.toml"
    path.write_text(text, encoding="utf-8")
    return str(path)


@pytest.fixture(scope="module")
def small_build(tmp_path_factory):
    return build_design(small_demo(tmp_path_factory.mktemp("d")), field=True)


def test_field_results_compare_with_the_network(small_build):
    field = small_build.results["field"]
    for key in ("resistance", "area_outside_window", "mesh_triangles"):
        assert key in field
    assert set(field["floor_shear"]) == {"p05", "p50", "p95"}
    assert field["floor_shear"]["p05"] <= field["floor_shear"]["p50"] <= field["floor_shear"]["p95"]
    assert 0.0 <= field["area_outside_window"] <= 1.0
    # the shares of the seeded floor outside the window add up over the zones
    assert sum(field["outside_by_zone"].values()) == pytest.approx(field["area_outside_window"])
    # the network is exact in straight runs and counts junctions and bends by their
    # centrelines: the two models agree to within the junction and bend corrections
    assert field["resistance"] == pytest.approx(field["network_resistance"], rel=0.15)
    # each level's centre floor shear follows the network's to the same measure
    for level in field["levels"]:
        assert level["field_shear"] == pytest.approx(level["network_shear"], rel=0.15)
    # symmetric tree: the bed flow split is even in both models to a few per cent
    assert field["bed_split"]["field_cv"] < 0.05
    # results use the one table of SI units
    units = small_build.results["units"]
    assert units["resistance"] == "Pa*s/m^3" and units["area_outside_window"] == "1"


def test_field_runs_at_the_supply_operating_point(small_build):
    # the demo's syringe pump sets the flow: the field carries the network's flow, at the
    # inlet pressure its own resistance needs (linear Stokes flow)
    run = small_build.field
    q = run.solution.port_flows
    assert q["inlet"] == pytest.approx(-q["outlet"], rel=1e-9)  # continuity
    assert q["inlet"] == pytest.approx(small_build.results["totals"]["total_flow"], rel=1e-9)
    dp = run.solution.port_pressures["inlet"] - run.solution.port_pressures["outlet"]
    assert dp == pytest.approx(q["inlet"] * small_build.results["field"]["resistance"], rel=1e-9)


def test_pressure_supply_shares_its_pressure_between_tubing_and_field(tmp_path):
    # a pressure controller: the chip flow is the supply pressure over the tubing (network)
    # plus the chip (field) in series, Ohm's law for hydraulic circuits (Bruus 2008, ch. 4)
    text = open(small_demo(tmp_path, beds=2), encoding="utf-8").read()
    text = text.replace('inlet = "syringe"', 'inlet = "pressure"\npressure = "500 Pa"')
    path = tmp_path / "pressure.toml"
    path.write_text(text, encoding="utf-8")
    build = build_design(str(path), field=True)
    field = build.results["field"]
    q_net = build.results["totals"]["total_flow"]
    names = list(build.solution.network.node_names)
    p = build.solution.pressure
    chip_dp = p[names.index("inlet")] - p[names.index("outlet")]
    r_tubing = (500.0 - chip_dp) / q_net
    expected = 500.0 / (r_tubing + field["resistance"])
    assert build.field.solution.port_flows["inlet"] == pytest.approx(expected, rel=1e-6)


def test_build_command_field_switch(tmp_path):
    design = small_demo(tmp_path, beds=4)
    on, off = tmp_path / "on", tmp_path / "off"
    r = CliRunner().invoke(main, ["build", design, "--field", "-o", str(on)])
    assert r.exit_code in (0, 1), r.output
    assert "field: chip resistance" in r.output
    assert (on / "field.svg").exists()
    results = json.loads((on / "results.json").read_text())
    assert results["field"]["mesh_triangles"] > 0
    html = (on / "report.html").read_text()
    assert "Junctions and bends" in html and "outside window" in html
    r = CliRunner().invoke(main, ["build", design, "--no-field", "-o", str(off)])
    assert r.exit_code in (0, 1), r.output
    assert not (off / "field.svg").exists()
    assert json.loads((off / "results.json").read_text())["field"] is None


def test_field_is_on_by_default_when_its_estimate_fits(tmp_path, monkeypatch):
    from chipflow.field import budget

    small = build_design(small_demo(tmp_path, beds=2))
    assert estimate_layout_field(small.layout).fits()
    assert small.results["field"] is not None
    # a chip whose field would take longer than the default limit is built without it
    data = tomllib.loads(open("chipflow/data/demo.toml", encoding="utf-8").read())
    monkeypatch.setattr(
        budget, "DEFAULT_SECONDS", 0.5 * estimate_layout_field(small.layout).seconds
    )
    big = build_design(DesignSource.from_dict(data, "demo.toml"))
    assert not estimate_layout_field(big.layout).fits() and big.results["field"] is None


def test_depth_step_in_series_adds_the_two_resistances():
    # two depths in series, the step part of the domain: flux is conserved across it and
    # the resistance is the sum of the two exact series (Bruus 2008) to within the step's
    # own small 2D correction (under 1 % for runs 10 widths long)
    w, length = 400e-6, 4e-3
    shallow = FieldRegion(shapely.box(0, 0, length, w), 50e-6)
    deep = FieldRegion(shapely.box(length, 0, 2 * length, w), 100e-6)
    ports = [
        FieldPort("in", shapely.LineString([(0, 0), (0, w)]), 100.0),
        FieldPort("out", shapely.LineString([(2 * length, 0), (2 * length, w)]), 0.0),
    ]
    sol = solve_field([shallow, deep], ports, 1e-3, across=6)
    expected = duct.resistance(w, 50e-6, length, 1e-3) + duct.resistance(w, 100e-6, length, 1e-3)
    assert sol.resistance("in", "out") == pytest.approx(expected, rel=0.01)
    assert sol.port_flows["in"] == pytest.approx(-sol.port_flows["out"], rel=1e-9)
    assert set(np.unique(sol.mesh.depth)) == {50e-6, 100e-6}


def test_overlay_slivers_between_depths_join_a_neighbour():
    # a deep outline with a slit 0.1 um wide inside it, under a shallow outline covering
    # everything: the slit is an overlay artefact, meshed as part of the deep piece instead
    # of refined down to its width; the resistance stays the sum of the two series (Bruus
    # 2008) and the mesh stays small
    w, length = 400e-6, 4e-3
    slit = shapely.box(length / 2, 0.1 * w, length / 2 + 1e-7, 0.9 * w)
    deep = FieldRegion(shapely.box(0, 0, length, w).difference(slit), 100e-6)
    shallow = FieldRegion(shapely.box(0, 0, 2 * length, w), 50e-6)
    ports = [
        FieldPort("in", shapely.LineString([(0, 0), (0, w)]), 100.0),
        FieldPort("out", shapely.LineString([(2 * length, 0), (2 * length, w)]), 0.0),
    ]
    sol = solve_field([deep, shallow], ports, 1e-3, across=4)
    expected = duct.resistance(w, 100e-6, length, 1e-3) + duct.resistance(w, 50e-6, length, 1e-3)
    assert sol.resistance("in", "out") == pytest.approx(expected, rel=0.01)
    assert len(sol.mesh.triangles) < 20_000


def test_a_mesh_larger_than_its_estimate_leaves_the_default_field_out(tmp_path, monkeypatch):
    # the estimate comes from the drawing; the mesh can come out finer (slivers where two
    # depth layers nearly coincide): a default build then says so instead of solving for long
    from chipflow.errors import MeshBudgetError
    from chipflow.field import budget, cache

    design = small_demo(tmp_path, beds=2)
    monkeypatch.setattr(budget, "max_triangles", lambda *a, **k: 10)
    # an empty cache: a field found in the cache costs nothing and is used whatever its size
    monkeypatch.setenv("CHIPFLOW_FIELD_CACHE", str(tmp_path / "cache"))
    monkeypatch.setattr(cache, "_memory", {})
    left_out = build_design(design)
    assert left_out.results["field"] is None
    assert any("field not solved by default" in w for w in left_out.results["warnings"])
    asked = build_design(design, field=True)  # asked for: no limit
    assert asked.results["field"]["mesh_triangles"] > 10
    regions = [FieldRegion(shapely.box(0, 0, 1e-3, 1e-4), 5e-5)]
    ports = [
        FieldPort("in", shapely.LineString([(0, 0), (0, 1e-4)]), 1.0),
        FieldPort("out", shapely.LineString([(1e-3, 0), (1e-3, 1e-4)]), 0.0),
    ]
    with pytest.raises(MeshBudgetError, match="more than the 10 allowed"):
        solve_field(regions, ports, 1e-3, max_triangles=10)
