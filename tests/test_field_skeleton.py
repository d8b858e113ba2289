"""Channel table from a mask's skeleton: lengths, widths and flows against drawn values.

Reference values and their source: the drawn geometry and the imposed flow (exact by
construction), symmetry (a symmetric split halves the flow) and the exact rectangular-duct
series (Bruus, Theoretical Microfluidics, 2008, ch. 4), an analytic limit for a long branch.
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely

from chipflow.field.analyse import analyse_mask, port_holes
from chipflow.field.model import FieldPort, FieldRegion
from chipflow.field.skeleton import channel_table
from chipflow.field.solve import solve_field
from chipflow.physics import duct
from chipflow.physics.fluid import fluid_preset

W, H = 200e-6, 50e-6
PUNCH = 1e-3
MU = fluid_preset("water", None, None).viscosity
FLOW = 10e-9 / 60  # 10 uL/min


@pytest.fixture(scope="module")
def straight():
    length = 20e-3
    geometry = shapely.box(0, -W / 2, length, W / 2)
    ends = ((0.0, 0.0), (length, 0.0))
    analysis = analyse_mask(geometry, H, *ends, PUNCH, MU, flow=FLOW)
    holes = port_holes(geometry, ends, PUNCH)
    radius = float(np.sqrt(holes[0].area / np.pi))
    return length, radius, analysis, channel_table(geometry, analysis.solution, holes)


def test_straight_channel_is_one_branch_of_the_drawn_size(straight):
    length, radius, analysis, table = straight
    assert table.reason is None
    assert len(table.length) == 1
    # drawn centreline between the rims of the two punched holes
    assert table.length[0] == pytest.approx(length - 2 * radius, rel=0.02)
    assert table.width[0] == pytest.approx(W, rel=0.02)
    assert table.depth[0] == H
    # mass conservation: the whole imposed flow crosses the branch's middle
    assert table.flow[0] == pytest.approx(FLOW, rel=0.01)
    assert table.start[0, 0] < table.end[0, 0]  # oriented along the flow


def test_long_straight_branch_drop_matches_the_duct_series(straight):
    # exact rectangular-duct series (Bruus 2008, eq. 4.48 family) times the branch flow
    _, _, analysis, table = straight
    expected = duct.resistance(table.width[0], H, table.length[0], MU) * table.flow[0]
    assert table.pressure_drop[0] == pytest.approx(expected, rel=0.02)
    assert table.resistance_1d[0] == pytest.approx(
        duct.resistance(table.width[0], H, table.length[0], MU), rel=1e-12
    )
    # body floor shear: the across-width mean lies below the series' centre-line floor shear
    # (Bruus 2008 profile; the model is calibrated to it) and above its 80 % (the profile
    # is flat over most of a 4:1 channel's width)
    tau = duct.wall_shear_floor(W, H, table.flow[0], MU)
    assert 0.8 * tau < table.floor_shear[0] < tau
    assert analysis.floor.p05 < table.floor_shear[0] < analysis.floor.p95


def test_symmetric_bifurcation_splits_the_flow_in_half():
    mm = 1e-3
    junction = (4 * mm, 0.0)
    tips = [(10 * mm, 3 * mm), (10 * mm, -3 * mm)]
    lines = [shapely.LineString([(0, 0), junction])] + [
        shapely.LineString([junction, tip]) for tip in tips
    ]
    geometry = shapely.union_all([ln.buffer(W / 2, cap_style="flat") for ln in lines])
    points = [(0.0, 0.0), *tips]
    holes = port_holes(geometry, points, PUNCH)
    ports = [
        FieldPort("inlet", holes[0], 1000.0),
        FieldPort("a", holes[1], 0.0),
        FieldPort("b", holes[2], 0.0),
    ]
    solution = solve_field([FieldRegion(geometry, H)], ports, MU)
    table = channel_table(geometry, solution, holes)
    assert table.reason is None
    assert len(table.length) == 3
    q_in = solution.port_flows["inlet"]
    trunk = int(np.argmin(table.start[:, 0]))
    children = np.delete(np.arange(3), trunk)
    # by symmetry each child carries half the inlet flow
    assert table.flow[trunk] == pytest.approx(q_in, rel=0.01)
    np.testing.assert_allclose(table.flow[children], q_in / 2, rtol=0.02)
    np.testing.assert_allclose(table.width, W, rtol=0.02)
    # drawn lengths: trunk from the inlet rim to the junction, children from the junction
    # to the outlet rims; the skeleton's junction node sits within a width of the drawn one
    radius = float(np.sqrt(holes[0].area / np.pi))
    child = np.hypot(6 * mm, 3 * mm) - radius
    np.testing.assert_allclose(table.length[children], child, atol=W)
    assert table.length[trunk] == pytest.approx(4 * mm - radius, abs=W)


def test_a_wide_chamber_gives_no_table():
    mm = 1e-3
    geometry = shapely.union_all(
        [shapely.box(0, -W / 2, 10 * mm, W / 2), shapely.Point(5 * mm, 0).buffer(1.5 * mm)]
    )
    ends = ((0.0, 0.0), (10 * mm, 0.0))
    analysis = analyse_mask(geometry, H, *ends, PUNCH, MU, flow=FLOW)
    table = channel_table(geometry, analysis.solution, port_holes(geometry, ends, PUNCH))
    assert table.reason is not None and "chamber" in table.reason
    assert table.to_list() == []


def test_analyse_reports_the_channel_table_of_a_dxf(tmp_path):
    import json

    import ezdxf
    from click.testing import CliRunner

    from chipflow.cli import main

    length = 20e-3
    doc = ezdxf.new("R2000")
    doc.header["$INSUNITS"] = 4  # mm
    corners = [(0, -W / 2), (length, -W / 2), (length, W / 2), (0, W / 2)]
    doc.modelspace().add_lwpolyline([(x * 1e3, y * 1e3) for x, y in corners], close=True)
    mask = str(tmp_path / "straight.dxf")
    doc.saveas(mask)
    args = ["analyse", mask, "--depth", "50um", "--inlet", "0,0", "--outlet", "20,0"]
    args += ["--flow", "10uL/min", "--fluid", "water"]
    r = CliRunner().invoke(main, [*args, "--json", "-o", str(tmp_path / "out")])
    assert r.exit_code == 0, r.output
    out = json.loads(r.output)
    (row,) = out["channels"]
    radius = PUNCH / 2 * (1 + 1e-3) + 1e-4 * np.hypot(length, W)  # the punched hole
    # drawn centreline between the port discs, drawn width, imposed flow
    assert row["length"] == pytest.approx(length - 2 * radius, rel=0.02)
    assert row["width"] == pytest.approx(W, rel=0.02)
    assert row["flow"] == pytest.approx(FLOW, rel=0.01)
    assert out["units"]["network_resistance"] == "Pa*s/m^3"
    assert out["units"]["field_shear"] == "Pa"
    saved = json.loads((tmp_path / "out" / "results.json").read_text())
    assert saved["channels"] == out["channels"]
    text = CliRunner().invoke(main, args)
    assert text.exit_code == 0, text.output
    assert "channels from the skeleton" in text.output
    assert len(text.output.strip().splitlines()) == 3 + 2 + 1  # summary, header, one row
