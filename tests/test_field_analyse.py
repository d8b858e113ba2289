"""``chipflow analyse`` on masks drawn here with ezdxf, and on chipflow's own DXF."""

from __future__ import annotations

import json

import ezdxf
import numpy as np
import pytest
import shapely
from click.testing import CliRunner

from chipflow.cli import main
from chipflow.physics import duct
from chipflow.physics.fluid import fluid_preset

W, H = 200e-6, 50e-6
PUNCH = 1e-3
MU = fluid_preset("water", None, None).viscosity


def write_mask(path, outlines, units="mm", layer="CHANNELS", closed=True, circles=()):
    """Outlines in metres, written in ``units`` ($INSUNITS 4 for mm, 13 for um, 0 none)."""
    scale = {"mm": 1e3, "um": 1e6, None: 1e3}[units]
    doc = ezdxf.new("R2000")
    doc.header["$INSUNITS"] = {"mm": 4, "um": 13, None: 0}[units]
    msp = doc.modelspace()
    for outline in outlines:
        xy = np.asarray(outline, float) * scale
        msp.add_lwpolyline([tuple(p) for p in xy], close=closed, dxfattribs={"layer": layer})
    for x, y, r in circles:
        msp.add_circle((x * scale, y * scale), r * scale, dxfattribs={"layer": layer})
    doc.saveas(path)
    return str(path)


def box(x0, y0, x1, y1):
    return [(x0, y0), (x1, y0), (x1, y1), (x0, y1)]


def analyse(*args):
    return CliRunner().invoke(main, ["analyse", *args, "--fluid", "water", "--json"])


def point(xy, units="mm"):
    s = {"mm": 1e3, "um": 1e6}[units]
    return f"{xy[0] * s:.6f},{xy[1] * s:.6f}"


@pytest.mark.parametrize("units", ["mm", "um"])
def test_straight_channel_gives_the_series_resistance(tmp_path, units):
    # exact duct series (Bruus 2008) over the length between the rims of the punched holes;
    # the curved rim adds its sagitta, under 0.05 % here
    length = 20e-3
    mask = write_mask(tmp_path / "straight.dxf", [box(0, -W / 2, length, W / 2)], units)
    r = analyse(
        mask,
        "--depth",
        "50um",
        "--inlet",
        point((0, 0), units),
        "--outlet",
        point((length, 0), units),
        "--flow",
        "10uL/min",
    )
    assert r.exit_code == 0, r.output
    out = json.loads(r.output)
    expected = duct.resistance(W, H, length - PUNCH, MU)
    assert out["resistance"] == pytest.approx(expected, rel=5e-3)
    assert out["flow"] == pytest.approx(10e-9 / 60, rel=1e-9)
    assert out["inlet_pressure"] == pytest.approx(out["flow"] * out["resistance"], rel=1e-9)
    assert out["units"]["resistance"] == "Pa*s/m^3"
    # floor shear at the centre of a straight channel: the series' floor shear (the model's
    # profile factor is calibrated to it), so the 95th percentile sits just below it
    tau = duct.wall_shear_floor(W, H, out["flow"], MU)
    assert out["floor_shear"]["p95"] == pytest.approx(tau, rel=0.03)
    assert out["area"] == pytest.approx(W * (length - PUNCH), rel=5e-3)


def test_split_and_merge_gives_the_network_resistance(tmp_path):
    # a trunk splits into two long parallel branches that merge again (drawn as overlapping
    # rectangles, joined on reading); expected: the channels in series and parallel along
    # their centrelines (exact series per channel). The junctions add of order a fifth of a
    # width each (the T-junction test), under 1 % of channels 50 widths long.
    a, arm = 1e-3, 10e-3
    outlines = [
        box(0, -W / 2, arm + W / 2, W / 2),
        box(arm - W / 2, -a, arm + W / 2, a),
        box(arm - W / 2, a - W / 2, 2 * arm + W / 2, a + W / 2),
        box(arm - W / 2, -a - W / 2, 2 * arm + W / 2, -a + W / 2),
        box(2 * arm - W / 2, -a, 2 * arm + W / 2, a),
        box(2 * arm - W / 2, -W / 2, 3 * arm, W / 2),
    ]
    mask = write_mask(tmp_path / "loop.dxf", outlines)
    r = analyse(
        mask,
        "--depth",
        "50um",
        "--inlet",
        "0,0",
        "--outlet",
        point((3 * arm, 0)),
        "--pressure",
        "1kPa",
    )
    assert r.exit_code == 0, r.output
    out = json.loads(r.output)
    trunk = duct.resistance(W, H, arm - PUNCH / 2, MU)
    branch = duct.resistance(W, H, arm + 2 * a, MU)
    expected = 2 * trunk + branch / 2
    assert out["resistance"] == pytest.approx(expected, rel=0.01)
    assert out["inlet_pressure"] == pytest.approx(1000.0)


def test_serpentine_gives_the_centreline_resistance(tmp_path):
    # a channel folded five times with square corners, one closed outline; expected: the
    # series over the centreline length (Bruus 2008), less a little at each of the ten
    # corners, where the flow cuts the inside (this model: about a third of a width each);
    # within 3 % for straights 25 widths long
    pitch, run = 1e-3, 5e-3
    xy = [(0.0, 0.0)]
    for k in range(6):
        x = run if k % 2 == 0 else 0.0
        xy += [(x, -k * pitch), (x, -(k + 1) * pitch)]
    line = shapely.LineString(xy[:-1])
    outline = line.buffer(W / 2, cap_style="flat", join_style="mitre")
    mask = write_mask(tmp_path / "serpentine.dxf", [list(outline.exterior.coords)[:-1]])
    start, end = line.coords[0], line.coords[-1]
    r = analyse(
        mask,
        "--depth",
        "50um",
        "--inlet",
        point(start),
        "--outlet",
        point(end),
        "--flow",
        "5uL/min",
        "--punch",
        "0.5mm",
    )
    assert r.exit_code == 0, r.output
    out = json.loads(r.output)
    expected = duct.resistance(W, H, line.length - 0.5e-3, MU)
    assert out["resistance"] == pytest.approx(expected, rel=0.03)
    assert out["resistance"] < expected  # corners are shortcuts


@pytest.mark.parametrize(
    ("case", "message"),
    [
        ("open", "open polyline"),
        ("crossing", "crosses itself"),
        ("outside", "outside every channel outline"),
        ("island", "not connected to any port"),
        ("layer", "no closed outline on layer 'WRONG'"),
        ("units", "states no drawing units"),
        ("separate", "not joined to the inlet's"),
    ],
)
def test_bad_masks_exit_2_with_one_line(tmp_path, case, message):
    length = 10e-3
    channel = box(0, -W / 2, length, W / 2)
    outlines, kw = [channel], {}
    inlet, outlet = "0,0", point((length, 0))
    args = []
    if case == "open":
        kw["closed"] = False
    elif case == "crossing":
        outlines = [[(0, -W / 2), (length, W / 2), (length, -W / 2), (0, W / 2)]]
    elif case == "outside":
        outlet = point((length, 5e-3))
    elif case == "island":
        outlines.append(box(0, 2e-3, length, 2e-3 + W))
    elif case == "layer":
        args = ["--layer", "WRONG"]
    elif case == "units":  # 500 units across: 0.5 m in mm or 0.5 mm in um, neither a chip
        kw["units"] = None
        length = 0.5
        outlines, outlet = [box(0, -W / 2, length, W / 2)], point((length, 0))
    elif case == "separate":  # the outlet on a channel of its own, 1 um from the first
        outlines = [
            box(0, -W / 2, length / 2, W / 2),
            box(length / 2 + 1e-6, -W / 2, length, W / 2),
        ]
    mask = write_mask(tmp_path / "bad.dxf", outlines, **kw)
    out = tmp_path / "out"
    r = CliRunner().invoke(
        main,
        [
            "analyse",
            mask,
            "--depth",
            "50um",
            "--inlet",
            inlet,
            "--outlet",
            outlet,
            "--flow",
            "5uL/min",
            "-o",
            str(out),
            *args,
        ],
    )
    assert r.exit_code == 2, r.output
    lines = r.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("chipflow: error:"), r.output
    assert message in lines[0]
    assert "Traceback" not in r.output
    assert not out.exists()


def _own_dxf_check(tmp_path, source):
    from chipflow.build import build_design
    from chipflow.export.bundle import write_build

    build = build_design(source, field=True)
    files = write_build(build, tmp_path / "out")
    dxf = next(f for f in files if f.suffix == ".dxf")
    layout = build.layout
    assert len(layout.layers) == 1
    ports = {p.name: (p.x, p.y) for p in layout.ports}
    flow = build.results["totals"]["total_flow"]
    r = CliRunner().invoke(
        main,
        [
            "analyse",
            str(dxf),
            "--depth",
            f"{layout.layers[0].depth * 1e6}um",
            "--inlet",
            point(ports["inlet"], "um"),
            "--outlet",
            point(ports["outlet"], "um"),
            "--flow",
            f"{flow * 6e10}uL/min",
            "--layer",
            layout.layers[0].name,
            "--viscosity",
            f"{build.fluid.viscosity}Pa*s",
            "--json",
        ],
    )
    assert r.exit_code == 0, r.output
    out = json.loads(r.output)
    # same polygons and solver; the port holes differ by about a grid step
    assert out["resistance"] == pytest.approx(build.results["field"]["resistance"], rel=5e-3)
    return build, out


def test_own_dxf_agrees_with_the_build(tmp_path):
    # the demo design shrunk to an 8-channel bed, so that it solves in a second or two
    import tomllib

    from chipflow.build import DesignSource

    data = tomllib.loads(open("chipflow/data/demo.toml", encoding="utf-8").read())
    data["tree"]["bed_channels"] = 8
    _own_dxf_check(tmp_path, DesignSource.from_dict(data, "small-demo.toml"))


@pytest.mark.slow
def test_demo_dxf_agrees_with_the_build(tmp_path):
    build, out = _own_dxf_check(tmp_path, "chipflow/data/demo.toml")
    assert out["mesh_triangles"] > 50_000


@pytest.mark.parametrize(("unit", "size", "words"), [(1e-3, 30_000.0, "30 m across"),
                                                     (1e-9, 5.0, "5 nm across")])  # fmt: skip
def test_a_gdsii_drawing_of_no_plausible_size_exits_2(tmp_path, unit, size, words):
    """The GDSII user unit makes the drawing kilometres or nanometres across: refused in one
    line before anything is meshed (a chip is 10 um to 1 m across, chipflow.spec.mask_dxf)."""
    import gdstk

    library = gdstk.Library(unit=unit, precision=unit / 1000)
    cell = library.new_cell("TOP")
    cell.add(gdstk.rectangle((0, 0), (size, size / 100)))
    path = tmp_path / "odd.gds"
    library.write_gds(str(path))
    r = CliRunner().invoke(main, ["analyse", str(path), "--depth", "50um", "--inlet", "0,0",
                                  "--outlet", f"{size},0", "--flow", "1uL/min"])  # fmt: skip
    assert r.exit_code == 2, r.output
    assert words in r.output and "than any chip" in r.output
    assert "Traceback" not in r.output
