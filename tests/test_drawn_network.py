"""Explicit networks drawn from coordinates: widths and lengths on the written mask, ports,
rules, the field, tolerances and sweeps, and networks left undrawn."""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
import shapely
from click.testing import CliRunner

from chipflow.build import DesignSource, build_design
from chipflow.cli import main
from chipflow.errors import LayoutError, SpecError
from chipflow.layout.pieces import solve_piece

ROOT = Path(__file__).parents[1]
TWIN = ROOT / "designs" / "twin_culture_manifold.toml"


def read_dxf_layers(path: Path) -> dict[str, shapely.Geometry]:
    import ezdxf

    rings: dict[str, list] = {}
    for e in ezdxf.readfile(path).modelspace().query("LWPOLYLINE"):
        if e.dxf.layer.startswith("MASK"):
            rings.setdefault(e.dxf.layer, []).append(shapely.Polygon(e.get_points("xy")))
    return {name: shapely.union_all(polys) for name, polys in rings.items()}


def axis_runs(line: shapely.LineString):
    """The longest run of a centreline along x or along y: its middle and its axis."""
    xy = np.asarray(line.coords)
    d = np.diff(xy, axis=0)
    best, mid, axis = 0.0, None, None
    for k in range(len(d)):  # a few runs per channel
        for a in (0, 1):
            if abs(d[k, 1 - a]) < 1e-12 and abs(d[k, a]) > best:
                best, mid, axis = abs(d[k, a]), xy[k] + d[k] / 2, a
    return mid, axis


def widths_on_the_dxf(build, tmp_path) -> np.ndarray:
    """Every drawn channel's width on the written DXF [m], across its longest axis run."""
    from chipflow.export.dxf import write_dxf

    layers = read_dxf_layers(write_dxf(build.layout, tmp_path / "m.dxf", build.export.dxf))
    ch = build.layout.channels
    out = []
    for i, line in enumerate(ch.centreline):  # a hand-written network: a handful of channels
        mid, axis = axis_runs(line)
        mid_um = mid * 1e6
        reach = (ch.width[i] / 2 + 50e-6) * 1e6
        step = np.array([0.0, reach]) if axis == 0 else np.array([reach, 0.0])
        cut = shapely.LineString([mid_um - step, mid_um + step])
        layer = layers[build.layout.layers[ch.layer[i]].name]
        parts = shapely.get_parts(shapely.intersection(cut, layer))
        out.append(next(p.length for p in parts if p.distance(shapely.Point(mid_um)) < 1e-9))
    return np.array(out) * 1e-6


def centreline_lengths(path: Path) -> dict[str, float]:
    """Each channel's centreline computed here from the design file: straight runs between
    its node and corner positions, each corner cut off by an arc of radius bend_radius x
    width tangent to both runs, channels at a port starting at the punched hole's rim."""
    data = tomllib.loads(path.read_text())

    def metres(text: str) -> float:
        number, unit = text.split()
        return float(number) * {"mm": 1e-3, "um": 1e-6}[unit]

    at = {n["name"]: [metres(v) for v in n["at"]] for n in data["nodes"] if "at" in n}
    ports = {p["node"] for p in data["ports"]} | {
        n for t in data.get("tubes", []) for n in (t["from"], t["to"])
    }
    rim = metres(data["chip"]["punch"]) / 2
    factor = data["fabrication"]["bend_radius"]
    out = {}
    for c in data["channels"]:
        pts = np.array([at[c["from"]], *[[metres(v) for v in p] for p in c.get("via", [])],
                        at[c["to"]]])  # fmt: skip
        seg = np.diff(pts, axis=0)
        total = np.hypot(seg[:, 0], seg[:, 1]).sum()
        radius = math.ceil(factor * metres(c["width"]) / 1e-6 - 1e-9) * 1e-6  # on the 1 um grid
        for k in range(1, len(pts) - 1):
            a, b = seg[k - 1], seg[k]
            turn = abs(math.atan2(a[0] * b[1] - a[1] * b[0], a @ b))
            total += radius * turn - 2 * radius * math.tan(turn / 2)
        total -= rim * ((c["from"] in ports) + (c["to"] in ports))
        out[c["name"]] = total
    return out


@pytest.fixture(scope="module")
def twin():
    return build_design(TWIN, field=False)


def test_every_width_on_the_written_dxf_is_the_solved_width(twin, tmp_path):
    net = twin.solution.network
    n = twin.layout.channels.width.size
    measured = widths_on_the_dxf(twin, tmp_path)
    np.testing.assert_allclose(measured, net.width[:n], rtol=0, atol=1e-9)  # 1 nm
    np.testing.assert_array_equal(twin.results["fabrication"]["mask_width"], net.width[:n])
    rows = twin.results["channels"]  # the channel table of a drawn network, tubing last
    assert [r["mask_width"] for r in rows[:n]] == net.width[:n].tolist()
    assert rows[n]["role"] == "tubing" and rows[n]["mask_width"] is None


def test_lengths_are_the_drawn_centrelines_plus_the_junction_corrections(twin):
    expected = centreline_lengths(TWIN)
    layout, net = twin.layout, twin.solution.network
    ch = layout.channels
    names = list(ch.names)
    drawn = np.array([expected[n] for n in names])
    np.testing.assert_allclose(ch.length, drawn, rtol=1e-9)
    # the corrections of every piece at each channel's ends, each piece counted once
    extra = np.zeros(len(names))
    pieces = layout.pieces
    for p in range(pieces.size):
        lengths = solve_piece(pieces.keys[pieces.key[p]]).lengths
        for arm, channel in enumerate(pieces.arm_channel[p]):
            if channel >= 0:
                extra[channel] += lengths[arm]
    np.testing.assert_allclose(net.length[: len(names)], drawn + extra, rtol=1e-12)
    assert np.all(np.abs(extra) < 0.05 * drawn)
    # every node where channels meet is one piece; each port step is one piece
    kinds = {str(k) for k in pieces.kind}
    assert kinds == {"junction", "port"}
    assert int(np.sum(pieces.kind == "port")) == 2


def test_the_drawn_network_is_a_clean_mask_with_its_ports(twin, tmp_path):
    assert twin.status == "pass"
    assert [layer.name for layer in twin.layout.layers] == [
        "MASK1_DEPTH_50UM",
        "MASK2_DEPTH_100UM",
    ]
    assert [p.name for p in twin.layout.ports] == ["inlet", "outlet"]
    assert not [c for c in twin.results["checks"] if c["name"].startswith("fabrication: ")]
    # the deeper level covers the shallow manifold past the step into each culture channel
    deep = twin.layout.layers[1].geometry
    x, y = 22e-3, 16.5e-3
    assert deep.contains(shapely.Point(x - 5e-6, y))
    # the two culture channels carry the same flow (the drawing is symmetric)
    net, sol = twin.solution.network, twin.solution
    bed = np.abs(sol.flow[net.role == "bed"])
    assert np.ptp(bed) <= 1e-9 * bed.mean()
    names = {p.name for p in twin.layout.ports}
    assert "feed tubing" in net.channel_names() and names <= set(net.node_names)


def test_oblique_runs_and_odd_widths_are_measured_and_counted_as_drawn(tmp_path):
    # a channel of an odd number of grid steps runs half a step off its nodes, so its walls
    # along x and y stay on the grid; a run at 45 degrees is measured on the mask
    data = tomllib.loads(TWIN.read_text())
    for c in data["channels"]:
        if c["name"] == "feed upper":
            c["width"] = "301 um"
            c["via"] = [["16 mm", "14.5 mm"], ["18 mm", "16.5 mm"]]
    build = build_design(DesignSource.from_dict(data, "oblique.toml"), field=False)
    ch = build.layout.channels
    i = list(ch.names).index("feed upper")
    assert ch.width[i] == pytest.approx(301e-6) and ch.mask_width[i] == pytest.approx(301e-6)
    assert ch.hydraulic_length is not None
    assert abs(ch.hydraulic_length[i] / ch.length[i] - 1) < 1e-3  # a run's walls moved < 1 um
    measured = widths_on_the_dxf(build, tmp_path)
    np.testing.assert_allclose(measured, ch.width, rtol=0, atol=1e-9)


def test_a_given_length_that_disagrees_with_the_drawing_is_an_error():
    data = tomllib.loads(TWIN.read_text())
    data["channels"][3]["length"] = "30 mm"  # drawn 31 mm
    with pytest.raises(SpecError, match=r"culture upper.*given 30 mm long but drawn 31 mm"):
        build_design(DesignSource.from_dict(data, "bad.toml"), field=False)


def test_corners_too_close_for_their_arcs_are_refused_with_the_place():
    data = tomllib.loads(TWIN.read_text())
    data["channels"][1]["via"] = [["14 mm", "16.3 mm"], ["14.3 mm", "16.5 mm"]]
    with pytest.raises(
        LayoutError, match=r"feed upper.*bend at via 1 \(14 mm, 16.3 mm\).*0.361 mm apart"
    ):
        build_design(DesignSource.from_dict(data, "close.toml"), field=False)


WIDE = """
name = "wide chamber"
[[channels]]
name = "chamber"
from = "in"
to = "out"
width = "2 mm"
depth = "100 um"
length = "10 mm"
[[ports]]
node = "in"
flow = "5 uL/min"
[[ports]]
node = "out"
pressure = "0 Pa"
"""


def test_a_wide_chamber_fails_the_roof_sag_rule_drawn_or_not():
    # roof sag: width / depth 20 against the default limit of 10 (common practice)
    from chipflow.spec.reader import parse_design_text

    undrawn = build_design(DesignSource(WIDE, parse_design_text(WIDE, "w.toml"), ""))
    sag = [c for c in undrawn.results["checks"] if c["name"] == "fabrication: roof_sag"]
    assert sag and sag[0]["status"] == "fail" and sag[0]["value"] == pytest.approx(20.0)
    assert "chamber" in sag[0]["message"] and " at (" not in sag[0]["message"]
    assert any("not drawn, solved only" in w for w in undrawn.results["warnings"])
    drawn_text = WIDE.replace('length = "10 mm"\n', "") + (
        '[[nodes]]\nname = "in"\nat = ["10 mm", "12.5 mm"]\n'
        '[[nodes]]\nname = "out"\nat = ["40 mm", "12.5 mm"]\n'
    )
    drawn = build_design(DesignSource(drawn_text, parse_design_text(drawn_text, "d.toml"), ""))
    sag = [c for c in drawn.results["checks"] if c["name"] == "fabrication: roof_sag"]
    assert sag[0]["status"] == "fail" and "at (25.000, 12.500) mm" in sag[0]["message"]


def test_field_of_an_undrawn_network_is_one_line_exit_2(tmp_path):
    (tmp_path / "w.toml").write_text(WIDE)
    result = CliRunner().invoke(main, ["build", str(tmp_path / "w.toml"), "--field", "-o",
                                       str(tmp_path / "out")])  # fmt: skip
    assert result.exit_code == 2
    assert len(result.stderr.strip().splitlines()) == 1 and "not drawn" in result.stderr
    assert not (tmp_path / "out").exists()


@pytest.mark.slow
def test_the_field_of_the_drawn_network_agrees_with_its_network():
    build = build_design(TWIN, field=True)
    field = build.results["field"]
    assert abs(field["resistance"] / field["network_resistance"] - 1) < 0.01


def test_vary_and_sweep_take_explicit_networks(tmp_path):
    runner = CliRunner()
    vary = runner.invoke(main, ["vary", str(TWIN), "--samples", "40", "--depth-tolerance",
                                "5%", "--workers", "1", "--json", "-o",
                                str(tmp_path / "v")])  # fmt: skip
    assert vary.exit_code == 0, vary.output
    factors = json.dumps(json.loads(vary.output))
    # one depth error per mould level: the 50 um manifold and the 100 um culture level
    assert "depth of mould level 1 (50 um)" in factors and "(100 um)" in factors
    sweep = runner.invoke(main, ["sweep", str(TWIN), "--vary",
                                 "channels.culture upper.width=800um,900um", "-o",
                                 str(tmp_path / "s"), "--workers", "1"])  # fmt: skip
    assert sweep.exit_code == 0, sweep.output
    rows = (tmp_path / "s" / "sweep.csv").read_text().splitlines()
    assert len(rows) == 3
    bad = runner.invoke(main, ["sweep", str(TWIN), "--vary", "channels.nope.width=1mm,2mm"])
    assert bad.exit_code == 2 and "no [[channels]] entry with name 'nope'" in bad.stderr


def test_a_position_for_a_node_off_the_chip_is_refused():
    data = tomllib.loads(TWIN.read_text())
    data["nodes"][0]["at"] = ["2 mm", "2 mm"]  # the pump: only the tubing reaches it
    with pytest.raises(SpecError, match=r"nodes\[0\]\.at: no channel reaches this node"):
        build_design(DesignSource.from_dict(data, "pump.toml"), field=False)
