"""A mesh bed (``[bed] kind = "mesh"``): the bed channels joined by rows of cross-connections,
drawn and solved as drawn; its cross flows, a narrowed channel's redistribution against an
independent nodal solve, the widths on the written DXF and the refusals of its keys."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
import shapely
from click.testing import CliRunner
from csv_resolve import resolve_csv
from hypothesis import given, settings
from hypothesis import strategies as st
from test_asdrawn import dxf_layers

from chipflow.build import build_design
from chipflow.cli import main
from chipflow.export.bundle import write_build
from chipflow.export.dxf import write_dxf
from chipflow.layout import extract_network
from chipflow.layout.widths import axis_cuts
from chipflow.network import solve
from chipflow.network.mesh import bed_channels, cross_flows, narrowed_bed
from chipflow.network.summary import level_rows

ROOT = Path(__file__).resolve().parents[1]


def design(bed_channels: int = 16, bed: str = "", extra: str = "") -> str:
    """A rigid mesh-bed design (no [walls]: the network is linear) fed by a syringe pump."""
    return f"""
name = "mesh-test"

[fluid]
kind = "medium"

[tree]
flow = "8 uL/min"
bed_channels = {bed_channels}
rule = "equal-shear"
length = "2 mm"

[bed]
kind = "mesh"
length = "5 mm"
gap = "150 um"
cross_pitch = "1 mm"
cross_width = "40 um"
{bed}

[targets]
shear = "0.75 Pa"

[fabrication]
depths = ["50 um"]
grid = "1 um"
max_width_to_depth = 12
min_gap = "100 um"

[chip]
width = "75 mm"
height = "25 mm"

[supply]
inlet = "syringe"
tubing_diameter = "0.5 mm"
inlet_tubing = "30 cm"
outlet = "open"
{extra}
"""


def built(tmp_path: Path, text: str):
    path = tmp_path / "mesh.toml"
    path.write_text(text)
    return build_design(path, field=False)


@pytest.fixture(scope="module")
def mesh16(tmp_path_factory):
    """The 16-channel mesh built with stand-in pieces and written (channels.csv, DXF)."""
    mp = pytest.MonkeyPatch()
    from chipflow.layout import pieces
    from conftest import _stand_in_piece

    mp.setattr(pieces, "solve_piece", _stand_in_piece)
    try:
        folder = tmp_path_factory.mktemp("mesh16")
        build = built(folder, design())
        write_build(build, folder / "out")
    finally:
        mp.undo()
    return build, folder / "out"


def test_the_bed_channels_are_chains_of_segments_joined_by_rows(mesh16) -> None:
    build, _ = mesh16
    net = build.solution.network
    names, members = bed_channels(net)
    assert names == [f"bed4.{i}" for i in range(16)]
    rows = build.results["mesh"]["rows"]
    # a 5 mm bed, about 4.8 mm straight: rows 1 mm apart, 6 widths clear of its ends
    assert rows == 5
    assert all(m.size == rows + 1 for m in members)
    cross = np.flatnonzero(net.role == "cross")
    assert cross.size == rows * 15 == build.results["mesh"]["cross_connections"]
    assert set(net.generation[cross]) == {-1}  # not a level of the generation table
    # the generation table counts bed channels, their whole length and residence time
    bed = next(r for r in level_rows(build.solution) if r["role"] == "bed")
    assert bed["count"] == 16
    first = members[0]
    assert bed["length"] == pytest.approx(net.length[np.concatenate(members)].sum() / 16)
    assert bed["residence_time_max"] == pytest.approx(
        max(build.solution.residence_time[m].sum() for m in members), rel=1e-12
    )
    assert bed["flow_total"] == pytest.approx(build.results["totals"]["total_flow"], rel=1e-9)
    assert first.size == rows + 1


def test_segments_add_up_to_the_bed_channel_drawn_without_the_mesh(mesh16, tmp_path) -> None:
    build, _ = mesh16
    plain = built(tmp_path, design().replace('kind = "mesh"', "").replace(
        'cross_pitch = "1 mm"', "").replace('cross_width = "40 um"', ""))  # fmt: skip
    ch, ch0 = build.layout.channels, plain.layout.channels
    drawn = {}
    for name, length in zip(ch.names, ch.length, strict=True):
        if name.startswith("bed4."):
            key = name.rsplit(".", 1)[0]
            drawn[key] = drawn.get(key, 0.0) + length
    bed0 = ch0.length[ch0.role == "bed"]
    np.testing.assert_allclose([drawn[f"bed4.{i}"] for i in range(16)], bed0, rtol=1e-12)


def test_a_symmetric_mesh_carries_no_cross_flow(mesh16) -> None:
    """Every bed channel alike (the stand-in pieces correct a T's and a four-arm junction's
    bed arms alike): the cross flows are round-off, below 1e-6 of a bed channel's flow."""
    build, _ = mesh16
    found = cross_flows(build.solution)
    assert found["cross_flow_max_share"] < 1e-6
    assert build.results["mesh"]["cross_flow_max_share"] < 1e-6
    # the drawing alone (no junction corrections): the same
    net = extract_network(build.layout, junctions=False)
    sol = solve(net, build.fluid, pressures={"outlet": 0.0}, flows={"inlet": 8e-9 / 60})
    assert cross_flows(sol)["cross_flow_max_share"] < 1e-6


def test_two_bed_channels_joined_by_tees_carry_next_to_no_cross_flow(tmp_path) -> None:
    """With the real 2D-solved pieces: the two T's of every row are mirror images, one key.
    Its two bed arms are mirror images too, but the triangle mesh of its 2D solve is not
    exactly symmetric: their corrections differ by a few nm, which leaves cross flows of a few
    1e-6 of a bed channel's flow (measured 3.6e-6)."""
    build = built(tmp_path, design(bed_channels=2))
    mesh = build.results["mesh"]
    assert mesh["cross_connections"] == mesh["rows"] >= 2
    assert build.results["mesh"]["cross_flow_max_share"] < 2e-5


def test_one_narrowed_channel_redistributes_as_an_independent_nodal_solve(mesh16, tmp_path) -> None:
    """The middle bed channel at half its width: its flow, its neighbours' and the cross flows
    against a nodal solve written in the test (tests/csv_resolve.py: the exact duct series,
    Bruus, Theoretical Microfluidics 2008, ch. 4, and Kirchhoff's node law) of channels.csv
    with that channel's segments halved."""
    build, out = mesh16
    rows = list(csv.DictReader((out / "channels.csv").open()))
    for r in rows:
        if r["channel"].startswith("bed4.8."):
            r["width [m]"] = repr(float(r["width [m]"]) / 2)
    path = tmp_path / "narrowed.csv"
    with path.open("w", newline="") as f:
        writer = csv.DictWriter(f, fieldnames=list(rows[0]))
        writer.writeheader()
        writer.writerows(rows)
    total = build.results["totals"]["total_flow"]
    rows, flow = resolve_csv(path, build.fluid.viscosity, total, "pump", "outlet")
    by_name = dict(zip((r["channel"] for r in rows), flow, strict=True))
    found = narrowed_bed(build.solution, "bed4.8", 0.5, {"outlet": 0.0}, {"pump": total})
    after = found["solution"]
    mine = dict(zip(after.network.channel_names(), after.flow, strict=True))
    for name in by_name:  # every channel, the cross-connections included
        assert mine[name] == pytest.approx(by_name[name], rel=1e-7, abs=1e-12 * total)
    # the narrowed channel loses flow, its neighbours gain it through the cross-connections
    shown = {r["channel"]: r for r in build.results["mesh"]["narrowed"]["channels"]}
    assert list(shown) == ["bed4.7", "bed4.8", "bed4.9"]
    for name, r in shown.items():
        segs = [by_name[f"{name}.{k}"] for k in range(build.results["mesh"]["rows"] + 1)]
        assert r["flow_narrowed"] == pytest.approx(np.mean(np.abs(segs)), rel=1e-7)
    assert shown["bed4.8"]["flow_narrowed"] < 0.5 * shown["bed4.8"]["flow"]
    assert shown["bed4.7"]["flow_narrowed"] > shown["bed4.7"]["flow"]
    assert shown["bed4.9"]["flow_narrowed"] > shown["bed4.9"]["flow"]
    cross = [abs(by_name[r["channel"]]) for r in rows if r["role"] == "cross"]
    share = max(cross) / (total / 16)
    assert build.results["mesh"]["narrowed"]["cross_flow_max_share"] == pytest.approx(share, 1e-6)
    assert share > 0.01  # the redistribution is shown, not lost in round-off


def test_every_bed_and_cross_width_on_the_written_dxf_is_the_solved_width(mesh16, tmp_path):
    build, _ = mesh16
    layout = build.layout
    layers = dxf_layers(write_dxf(layout, tmp_path / "mesh.dxf"))
    ch = layout.channels
    net = build.solution.network
    names = list(net.channel_names())
    width = np.array([net.width[names.index(str(n))] for n in ch.names])
    sel = np.flatnonzero(np.isin(ch.role, ("bed", "cross")))
    mid, run, axis = axis_cuts(ch.centreline[sel])
    assert np.all(run > 0) and set(axis[ch.role[sel] == "cross"]) == {1}
    measured = []
    for i, (x, y), ax in zip(sel, mid * 1e6, axis, strict=True):  # a test: one cut per channel
        reach = width[i] / 2 * 1e6 + 80.0  # neighbours keep at least min_gap (100 um) away
        a, b = ((x, y - reach), (x, y + reach)) if ax == 0 else ((x - reach, y), (x + reach, y))
        layer = layers[layout.layers[ch.layer[i]].name]
        cut = shapely.intersection(shapely.LineString([a, b]), layer)
        measured.append(
            next(p.length for p in shapely.get_parts(cut) if p.distance(shapely.Point(x, y)) < 1e-9)
        )
    # 1 nm = 1e-3 um; the cross-connections 40 um, the bed channels as sized
    np.testing.assert_allclose(measured, width[sel] * 1e6, rtol=0, atol=1e-3)
    assert set(np.round(width[ch.role == "cross"] * 1e6, 9)) == {40.0}


def test_lengths_are_the_drawn_centrelines_plus_the_junction_corrections(mesh16) -> None:
    """Straight segments and cross-connections: node to node (from the drawing's node
    positions) plus the stand-in corrections, minus a tenth of each arm's width per end."""
    build, _ = mesh16
    layout = build.layout
    net = build.solution.network
    xy = layout.node_xy
    row_node = np.char.startswith(np.asarray(layout.node_names, dtype=str), "mesh")
    for role in ("bed", "cross"):
        sel = np.flatnonzero(
            (layout.channels.role == role)
            & row_node[layout.channels.node_a]
            & row_node[layout.channels.node_b]
        )
        assert sel.size
        a, b = layout.channels.node_a[sel], layout.channels.node_b[sel]
        centre = np.hypot(*(xy[b] - xy[a]).T)
        w = layout.channels.width[sel]
        np.testing.assert_allclose(net.length[sel], centre - 2 * 0.1 * w, rtol=0, atol=1e-15)


@pytest.mark.parametrize(
    ("bed", "extra", "words"),
    [
        ('cross_width = "2 mm"', "", "cannot be made"),
        ('cross_pitch = "120 um"', "", "give at least 140 um"),
        ('cross_pitch = "6 mm"', "", "not shorter than the bed length"),
        ('max_straight_length = "2 mm"', "", "needs straight bed channels"),
    ],
)
def test_mesh_keys_out_of_range_are_refused_in_one_line(tmp_path, bed, extra, words) -> None:
    text = design(bed=bed, extra=extra)
    key = bed.split(" = ")[0]
    if key in ("cross_width", "cross_pitch"):  # replace the key given above
        lines = [ln for ln in text.splitlines() if not ln.startswith(f"{key} = ")]
        text = "\n".join(lines).replace("[bed]\n", f"[bed]\n{bed}\n")
    (tmp_path / "m.toml").write_text(text)
    result = CliRunner().invoke(
        main, ["build", str(tmp_path / "m.toml"), "-o", str(tmp_path / "o")]
    )
    assert result.exit_code == 2, result.output
    assert len(result.stderr.strip().splitlines()) == 1 and words in result.stderr
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize(
    ("old", "new", "words"),
    [
        ('kind = "mesh"', 'kind = "chamber"', 'has no meaning for kind = "chamber"'),
        ('kind = "mesh"', 'kind = "meshed"', "did you mean 'mesh'"),
        ('kind = "mesh"', 'kind = "channels"', 'belongs to a mesh bed (kind = "mesh")'),
        ('kind = "mesh"', "", 'belongs to a mesh bed (kind = "mesh")'),
        ('cross_width = "40 um"', "", "needs cross_pitch and cross_width"),
    ],
)
def test_kinds_and_keys_that_do_not_belong_are_refused_in_one_line(tmp_path, old, new, words):
    (tmp_path / "m.toml").write_text(design().replace(old, new))
    result = CliRunner().invoke(main, ["check", str(tmp_path / "m.toml")])
    assert result.exit_code == 2, result.output
    assert len(result.stderr.strip().splitlines()) == 1 and words in result.stderr


def test_a_region_cannot_be_a_mesh(tmp_path) -> None:
    text = (ROOT / "designs" / "dual_region_beds.toml").read_text()
    text = text.replace('name = "venous"', 'name = "venous"\nkind = "mesh"', 1)
    (tmp_path / "r.toml").write_text(text)
    result = CliRunner().invoke(main, ["check", str(tmp_path / "r.toml")])
    assert result.exit_code == 2 and "channels" in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1


def test_the_bundled_mesh_shows_its_cross_flows_and_a_narrowed_channel(tmp_path) -> None:
    from chipflow.spec.bundled import resolve_design

    build = build_design(resolve_design("meshed_capillary_bed"), field=False)
    mesh = build.results["mesh"]
    # the outermost channels meet a T at every row, the others a four-arm junction: a small
    # cross flow, shown (the 2D-solved corrections differ by a few um per row)
    assert 1e-5 < mesh["cross_flow_max_share"] < 1e-2
    assert mesh["narrowed"]["channel"] == "bed4.8"
    assert build.status == "pass"
    # oxygen along whole bed channels (chains of segments), not along one segment
    t = build.results["transport"]
    i = next(k for k, lv in enumerate(t["levels"]) if lv["role"] == "bed")
    bed, bulk = t["levels"][i], t["profile"]["levels"][i]["bulk"]
    assert bed["count"] == 16
    assert bulk[0] == pytest.approx(bed["o2_in"], rel=1e-9)
    assert bulk[-1] == pytest.approx(bed["o2_out"], rel=1e-9)
    assert bed["o2_out"] < bed["o2_in"]
    write_build(build, tmp_path / "out")
    report = (tmp_path / "out" / "report.html").read_text()
    assert "Mesh bed" in report and "bed4.8 (narrowed)" in report
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    assert data["mesh"]["cross_connections"] == 105
    assert data["units"]["cross_flow_max_share"] == "1"


@pytest.mark.slow
def test_the_bundled_mesh_field_agrees_with_its_network() -> None:
    from chipflow.spec.bundled import resolve_design

    build = build_design(resolve_design("meshed_capillary_bed"), field=True)
    field = build.results["field"]
    assert field["resistance"] / field["network_resistance"] == pytest.approx(1.0, abs=0.01)


@settings(max_examples=15, deadline=None)
@given(st.integers(0, 15), st.floats(0.05, 1.0))
def test_a_narrowed_mesh_conserves_the_flow_across_every_cut(mesh16, channel, factor) -> None:
    """Continuity (Kirchhoff's node law summed over a cut): between two rows only bed
    segments cross the bed, so their flows add up to the chip's flow, whatever one channel's
    width; at factor 1 the re-solve is the solution itself."""
    build, _ = mesh16
    total = build.results["totals"]["total_flow"]
    found = narrowed_bed(build.solution, f"bed4.{channel}", factor, {"outlet": 0.0},
                         {"pump": total})  # fmt: skip
    after = found["solution"]
    names, members = bed_channels(after.network)
    cuts = np.array([after.flow[m] for m in members])  # (channels, segments)
    np.testing.assert_allclose(cuts.sum(axis=0), total, rtol=1e-9)
    mine = np.abs(cuts[channel]).mean()
    assert mine <= np.abs(build.solution.flow[members[channel]]).mean() * (1 + 1e-9)
    if factor == 1.0:
        np.testing.assert_allclose(after.flow, build.solution.flow, rtol=0, atol=1e-12 * total)


def test_the_size_guard_counts_the_segments_and_cross_connections(tmp_path, monkeypatch):
    """The guard before drawing is told at least as many channels as the mesh draws."""
    from chipflow.layout import budget

    asked = []
    real = budget.check_size
    monkeypatch.setattr(budget, "check_size", lambda n, **kw: asked.append(n) or real(n, **kw))
    build = built(tmp_path, design(bed_channels=8))
    drawn = build.layout.channels.length.size
    assert asked and drawn <= asked[0] <= 2 * drawn
