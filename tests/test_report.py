"""Tests of the report: profile figure, deterministic SVG and the self-contained HTML file."""

from __future__ import annotations

import copy
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from chipflow.checks import (
    check_bond_pressure,
    check_floor_shear,
    check_oxygen_supply,
    check_reynolds,
    check_uniformity,
    fabrication_results,
)
from chipflow.checks.cell_types import cell_type
from chipflow.physics.duct import flow_state
from chipflow.report import (
    CAUTIONS,
    PROFILE_PANELS,
    profile_figure,
    report_html,
    svg_text,
    write_markdown_summary,
    write_report,
)

MU, RHO = 0.95e-3, 1007.0  # culture medium at 37 C (chipflow's default, from memory)


def sample_results() -> dict:
    """A small, realistic results dict written by hand: a three-generation tree (8 bed
    channels, 60 um deep) carrying 10 uL/min of medium; the physics per level comes from the
    duct formulas so the numbers hang together."""
    roles = ["distribution"] * 3 + ["bed"] + ["collection"] * 3
    gens = [0, 1, 2, 3, 2, 1, 0]
    width = np.array([400, 300, 220, 160, 220, 300, 400]) * 1e-6
    depth = np.full(7, 60e-6)
    length = np.array([4, 3, 2, 3, 2, 3, 4]) * 1e-3
    count = np.array([1, 2, 4, 8, 4, 2, 1])
    total = 10e-9 / 60
    q = total / count
    s = flow_state(width, depth, length, q, MU, RHO)
    drops = s.pressure_drop
    p_out = np.cumsum(drops[::-1])[::-1] - drops  # outlet at 0 Pa gauge
    p_in = p_out + drops
    generations = [
        {
            "generation": int(gens[i]),
            "role": roles[i],
            "count": int(count[i]),
            "width": float(width[i]),
            "depth": float(depth[i]),
            "length": float(length[i]),
            "total_area": float(count[i] * width[i] * depth[i]),
            "flow_per_channel": float(q[i]),
            "mean_velocity": float(s.mean_velocity[i]),
            "wall_shear_floor": float(s.wall_shear_floor[i]),
            "wall_shear_mean": float(s.wall_shear_mean[i]),
            "wall_shear_max": float(s.wall_shear_max[i]),
            "reynolds": float(s.reynolds[i]),
            "residence_time": float(s.residence_time[i]),
            "pressure_drop": float(drops[i]),
            "pressure_in": float(p_in[i]),
            "pressure_out": float(p_out[i]),
        }
        for i in range(7)
    ]
    window = cell_type("endothelial-static").window()
    labels = [f"{r} (generation {g})" for r, g in zip(roles, gens, strict=True)]
    bed = 3
    finding = type(
        "Finding",
        (),
        dict(
            rule="roof sag",
            severity="warning",
            value=2.7,
            limit=2.5,
            unit="",
            x=12e-3,
            y=8e-3,
            channels=(7,),
            message="bed channel wider than 2.5 x its depth... <check posts>",
        ),
    )()
    checks = [
        *check_floor_shear(labels[bed : bed + 1], [s.wall_shear_floor[bed]], window),
        check_bond_pressure(float(p_in[0])),
        check_reynolds(labels, s.reynolds),
        check_uniformity(np.full(8, q[bed])),
        check_oxygen_supply(total, 8 * width[bed] * length[bed]),
        *fabrication_results([finding]),
    ]
    return {
        "design": {
            "name": "demo-liver-bed",
            "description": "An eight-channel bed for a "
            "liver model.\n\nSecond paragraph: film mask, one depth & no posts.",
            "file": "designs/demo.toml",
            "sha256": "ab" * 32,
        },
        "fluid": {"name": "culture medium", "viscosity": MU, "density": RHO, "temperature": 310.15},
        "supply": {"mode": "flow", "flow": total, "pressure": None},
        "totals": {
            "inlet_pressure": float(p_in[0]),
            "outlet_pressure": 0.0,
            "total_flow": total,
            "total_resistance": float(p_in[0] / total),
            "transit_time": float(np.sum(s.residence_time)),
        },
        "generations": generations,
        "checks": [c.to_dict() for c in checks],
        "fabrication": {
            "units": "um",
            "polarity": "clear features on dark field",
            "mirror": True,
            "dxf_version": "R2000",
            "layers": [{"name": "DEPTH_60UM", "depth": 60e-6}],
            "grid": 1e-6,
            "findings": [{"rule": "roof sag"}],
        },
        "shear_window": window.to_dict(),
        "units": {"pressure": "Pa", "flow": "m^3/s", "length": "m", "time": "s"},
    }


@pytest.fixture(scope="module")
def results() -> dict:
    return sample_results()


@pytest.fixture(scope="module")
def profile_svg(results) -> str:
    return svg_text(profile_figure(results))


def test_sample_is_consistent(results):
    # Continuity (mass conservation): every generation carries the same total flow, and the
    # pressure drops add up to inlet minus outlet.
    gens = results["generations"]
    totals = [g["count"] * g["flow_per_channel"] for g in gens]
    assert np.allclose(totals, results["totals"]["total_flow"], rtol=1e-12)
    assert sum(g["pressure_drop"] for g in gens) == pytest.approx(
        results["totals"]["inlet_pressure"], rel=1e-12
    )


def test_profile_figure_has_the_panels(results):
    fig = profile_figure(results)
    axes = fig.get_axes()[: len(PROFILE_PANELS)]
    titles = [ax.get_title(loc="left") for ax in axes]
    assert titles == list(PROFILE_PANELS)
    # One label per generation on top, inlet to outlet, the bed in the middle, each at the
    # centre of its stretch of the path: the x axis is the distance from the inlet [mm].
    (top,) = axes[0].child_axes
    labels = [t.get_text() for t in top.get_xticklabels()]
    assert labels == ["d0", "d1", "d2", "bed", "c2", "c1", "c0"]
    lengths_mm = np.array([g["length"] for g in results["generations"]]) * 1e3
    centres = np.cumsum(lengths_mm) - lengths_mm / 2
    assert np.allclose(top.get_xticks(), centres)
    assert axes[-1].get_xlim() == pytest.approx((0.0, lengths_mm.sum()))
    assert "distance" in axes[-1].get_xlabel()
    # The shear panel shades the window of the cell type: a patch spanning 0.1-0.5 Pa
    # (Dewey et al. 1981 via the table).
    shear_ax = axes[PROFILE_PANELS.index("floor wall shear")]

    def y_range(patch):
        verts = patch.get_patch_transform().transform(patch.get_path().vertices)
        return [verts[:, 1].min(), verts[:, 1].max()]

    spans = [p for p in shear_ax.patches if np.allclose(y_range(p), [0.1, 0.5])]
    assert len(spans) == 1
    # Cross-section grows 400*60 um^2 -> 8*160*60 um^2 (0.024 -> 0.0768 mm^2): the plotted step
    # data of the bed equals count * w * h in mm^2.
    area_ax = axes[PROFILE_PANELS.index("total cross-section")]
    y = area_ax.get_lines()[0].get_ydata()
    assert y[6] == pytest.approx(8 * 160e-6 * 60e-6 * 1e6)
    # The flow panel spans 10/8 .. 10 uL/min: a factor 8 < 30 keeps a linear axis; the
    # residence time and velocity axes are linear or log as their span demands.
    assert axes[1].get_yscale() == "linear"


def test_profile_log_axis_when_values_span_decades(results):
    wide = copy.deepcopy(results)
    for g, q in zip(
        wide["generations"], [1e-9, 1e-10, 1e-11, 1e-12, 1e-11, 1e-10, 1e-9], strict=True
    ):
        g["flow_per_channel"] = q
    axes = profile_figure(wide).get_axes()
    assert axes[1].get_yscale() == "log"


def test_svg_text_is_deterministic_and_parses(results, profile_svg):
    again = svg_text(profile_figure(results))
    assert again == profile_svg
    root = ET.fromstring(profile_svg.encode())
    assert root.tag.endswith("svg")
    assert "<dc:date>" not in profile_svg


def test_report_contents(results, profile_svg, tmp_path):
    path = tmp_path / "report.html"
    write_report(results, path, {"profile along the path": profile_svg})
    text = path.read_text("utf-8")
    assert [p.name for p in tmp_path.iterdir()] == ["report.html"]  # no temp file left behind
    # title, description paragraphs (escaped), per-generation table
    assert "<h1>demo-liver-bed</h1>" in text
    assert "<p>Second paragraph: film mask, one depth &amp; no posts.</p>" in text
    assert "Generations, inlet to outlet" in text and '<td class="text">bed</td>' in text
    # checks with marks, names and sources; the finding text is escaped
    for check in results["checks"]:
        assert check["name"] in text
        assert f'class="status {check["status"]}"' in text
    assert "&lt;check posts&gt;" in text and "<check posts>" not in text
    assert "Dewey et al." in text
    # the figure inline, without an XML declaration inside the HTML
    assert text.count("<svg") == 1 and "<?xml" not in text
    assert "profile along the path" in text
    # fabrication settings
    for setting in ("um", "clear features on dark field", "R2000", "DEPTH_60UM", ">60</td>"):
        assert setting in text
    assert "mirrored</td><td>yes" in text
    # lab units: oxygen use as a percentage, temperature in degrees Celsius, flow in uL/min
    assert "<td>50 %</td>" in text and "37 \u00b0C" in text and "10 uL/min" in text
    # cautions
    assert "<h2>Cautions</h2>" in text
    for title, _ in CAUTIONS:
        assert title in text
    for phrase in (
        "burst",
        "eye protection",
        "biosafety",
        "bead velocimetry",
        "sterile",
        "design rules",
    ):
        assert phrase in text
    # self-contained: no external references of any kind
    # (XML namespace names are identifiers, not references: drop them before looking)
    assert not re.search(r"https?://", re.sub(r'xmlns(:\w+)?="[^"]*"', "", text))
    assert not re.search(r"<(script|link|img|iframe)\b", text)
    targets = re.findall(r'\b(?:src|href)\s*=\s*"([^"]*)"', text)
    assert all(t.startswith("#") for t in targets)  # only links inside the page itself


def test_report_is_byte_identical(results, profile_svg, tmp_path):
    a, b = tmp_path / "a.html", tmp_path / "b.html"
    write_report(results, a, {"profile": profile_svg})
    write_report(results, b, {"profile": svg_text(profile_figure(results))})
    assert a.read_bytes() == b.read_bytes()


def test_report_marks_failures(results):
    failing = copy.deepcopy(results)
    failing["checks"][0]["status"] = "fail"
    assert 'class="verdict fail"' in report_html(failing)
    assert 'class="verdict pass"' not in report_html(failing)


def test_report_rejects_non_svg_figure(results, tmp_path):
    from chipflow.errors import ExportError

    with pytest.raises(ExportError, match="not SVG"):
        write_report(results, tmp_path / "r.html", {"layout": "<png>"})
    assert not list(tmp_path.iterdir())


def test_report_bad_folder(results, tmp_path):
    from chipflow.errors import ExportError

    with pytest.raises(ExportError, match="cannot write"):
        write_report(results, tmp_path / "missing" / "r.html")


def test_markdown_summary(results, tmp_path):
    path = tmp_path / "summary.md"
    write_markdown_summary(results, path)
    text = path.read_text("utf-8")
    assert "| bed | 8 | 160 | 60 |" in text and "## Cautions" in text
