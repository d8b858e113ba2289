"""Oxygen on the 2D field: against the 1D march on a straight channel, its mass balance, and in
a build (results, figure, report).

The reference is the independent 1D march of chipflow.transport on the same channel (itself
checked against analytic limits and a 2D finite-difference solve in test_transport*.py).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import shapely

from chipflow.build import build_design
from chipflow.field import FieldPort, FieldRegion, solve_field
from chipflow.physics.duct import flow_state
from chipflow.transport.field import solve_field_transport
from chipflow.transport.march import PROFILE_STATIONS, _wall_state, march_channels, wall_geometry
from chipflow.transport.species import Species

L, W, H, MU, D, C0 = 10e-3, 400e-6, 100e-6, 1e-3, 3e-9, 0.2


@pytest.fixture(scope="module")
def straight():
    """A straight channel 10 mm x 400 um x 100 um at Pe = U h / D of about 9."""
    ports = [
        FieldPort("inlet", shapely.LineString([(0, 0), (0, W)]), 4.0),
        FieldPort("outlet", shapely.LineString([(L, 0), (L, W)]), 0.0),
    ]
    return solve_field([FieldRegion(shapely.box(0, 0, L, W), H)], ports, MU)


def centre_line(solution, values, xs):
    """Linear interpolation of vertex values at points on the centre line."""
    from matplotlib.tri import LinearTriInterpolator, Triangulation

    mesh = solution.mesh
    tri = Triangulation(mesh.points[:, 0], mesh.points[:, 1], mesh.triangles)
    return np.asarray(LinearTriInterpolator(tri, values)(xs, np.full(xs.size, W / 2)))


@pytest.mark.parametrize(
    "da,km",
    [(0.02, 7.39e-3), (0.05, 0.0), (0.08, 7.39e-3)],
    ids=["MM-0.02", "zero-0.05", "MM-0.08"],
)
def test_field_agrees_with_the_1d_march_on_a_straight_channel(straight, da, km):
    q = straight.port_flows["inlet"]
    v = da * D * C0 / H
    species = Species("o2", D, C0, uptake=v, km=km)
    seeded = np.ones(len(straight.mesh.triangles), bool)
    ft = solve_field_transport(straight, species, C0, seeded)
    gamma = float(flow_state(W, H, L, q, MU, 1000.0).wall_shear_floor) / MU
    one = np.ones(1)
    line = march_channels(
        C0 * one, q * one, L * one, W * one, H * one, gamma * one, v * one, 0 * one, species
    )
    # the outlet's flux-weighted concentration, and the floor along the centre line (the
    # developed transfer of the field at each point of the line) within 2 % of the inlet
    assert ft.moles_out / ft.outflow == pytest.approx(line["outlet"][0], abs=0.02 * C0)
    xs = PROFILE_STATIONS[4::4] * L * 0.999
    bulk = centre_line(straight, ft.bulk, xs)
    n = xs.size
    geometry = wall_geometry(np.full(n, 1e6), np.full(n, H / D), np.zeros(n))
    floor = _wall_state(bulk, geometry, np.full(n, H / D), np.full(n, v), km, np.zeros(n), 0)[2]
    assert np.max(np.abs(floor - line["floor"][0, 4::4])) < 0.02 * C0
    assert abs(ft.residual) < 1e-10  # moles in = out + uptake, to the solver's precision
    assert 0.1 * C0 < line["outlet"][0] < 0.95 * C0  # the cells take a good part: a real test


def test_without_uptake_the_field_holds_the_inlet(straight):
    ft = solve_field_transport(
        straight, Species("o2", D, C0), C0, np.ones(len(straight.mesh.triangles), bool)
    )
    assert np.allclose(ft.bulk, C0, rtol=1e-12) and np.allclose(ft.floor, C0, rtol=1e-12)


def test_a_permeable_roof_feeds_the_field(straight):
    # oxygen-poor medium (0.05 mol/m^3) under a 1 mm PDMS roof (800 Barrer): the roof brings
    # it towards the incubator's 0.2 mol/m^3 along the channel
    roof = 800 * 3.3464e-16 / (1e-3 * 1.07e-5)
    species = Species("o2", D, 0.05, ambient=0.2)
    ft = solve_field_transport(
        straight, species, 0.05, np.ones(len(straight.mesh.triangles), bool), roof
    )
    assert 0.05 < ft.moles_out / ft.outflow < 0.2
    assert abs(ft.residual) < 1e-10


@pytest.fixture(scope="module")
def hepatic_small(tmp_path_factory):
    """The demo with a 4-channel bed of hungry cells under a PDMS roof, field solved."""
    text = open("chipflow/data/demo.toml", encoding="utf-8").read()
    text = text.replace("bed_channels = 32", "bed_channels = 4").replace(
        'cell_density = "1e5 cell/cm^2"',
        'cell_density = "3e5 cell/cm^2"\no2_consumption = "2e-16 mol/s"\no2_inlet = "0.08 mol/m^3"',
    )
    text += '\n[walls]\nroof_thickness = "4 mm"\n'
    path = tmp_path_factory.mktemp("h") / "small.toml"
    path.write_text(text, encoding="utf-8")
    return build_design(str(path), field=True)


def test_a_build_maps_oxygen_on_its_field(hepatic_small, tmp_path):
    from chipflow.export.bundle import write_build

    t = hepatic_small.results["transport"]
    field = t["field"]
    assert set(field) >= {"o2_floor_min", "hypoxic_fraction", "mass_residual", "o2_out"}
    assert abs(field["mass_residual"]) < 1e-9
    # the field sees the slow liquid along the side walls and in the corners of junctions
    # that the channel model averages away: its lowest floor lies at or below the 1D one
    assert field["o2_floor_min"] <= t["o2_floor_min"] * 1.02
    # both carry the same oxygen out of the chip within a few per cent of the inlet
    out_1d = next(lv for lv in t["levels"] if lv["role"] == "collection" and lv["generation"] == 0)
    assert field["o2_out"] == pytest.approx(out_1d["o2_out"], abs=0.03 * t["o2_chip_inlet"])
    files = write_build(hepatic_small, tmp_path / "out")
    assert (tmp_path / "out" / "oxygen.svg") in files
    page = (tmp_path / "out" / "report.html").read_text()
    assert "Floor oxygen of the 2D field" in page and "On the 2D field" in page
    saved = json.loads((tmp_path / "out" / "results.json").read_text())
    assert saved["transport"]["field"]["mesh_triangles"] > 0
