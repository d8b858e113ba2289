"""Small things a bench user meets: table designs with one depth, cell-type aliases, the GDSII
layer numbers in the user guide, the demo output folder ignored by git."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from rst_tables import guide_table

from chipflow.checks.cell_types import cell_type
from chipflow.errors import SpecError
from chipflow.export.gds import NOTES_GDS_LAYER, OUTLINE_GDS_LAYER, PORT_GDS_LAYER
from chipflow.spec.reader import parse_design_text
from chipflow.spec.tree import load_tree_spec

ROOT = Path(__file__).resolve().parents[1]

TABLE = """
[tree]
flow = "5 uL/min"
generations = 2
rule = "table"
widths = ["400 um", "250 um", "150 um"]
{depths}
[bed]
residence_time = "1 s"
[fabrication]
depths = {fab}
"""


def load(depths: str, fab: str = '["50 um"]'):
    return load_tree_spec(parse_design_text(TABLE.format(depths=depths, fab=fab), "t.toml"))


def test_table_rule_takes_one_depth_for_all_generations() -> None:
    assert load('depths = ["50 um"]').depths == pytest.approx((50e-6,) * 3, rel=1e-12)
    # no depths at all: the single fabrication depth
    assert load("").depths == pytest.approx((50e-6,) * 3, rel=1e-12)
    # several fabrication depths: the table must say which
    with pytest.raises(SpecError, match="tree.depths: missing"):
        load("", '["50 um", "100 um"]')
    both = load('depths = ["100 um"]', '["50 um", "100 um"]').depths
    assert both == pytest.approx((100e-6,) * 3, rel=1e-12)
    with pytest.raises(SpecError, match="one value per generation"):
        load('depths = ["50 um", "50 um"]')


@pytest.mark.parametrize(
    ("name", "row"),
    [
        ("HUVEC", "endothelial"),  # human umbilical vein endothelial cells
        ("huvecs", "endothelial"),
        ("endothelial cells", "endothelial"),
        ("Endothelial_Static", "endothelial-static"),
        ("primary hepatocytes", "hepatocyte"),
        ("mESC", "mouse-esc"),
    ],
)
def test_common_cell_names_find_their_cited_row(name: str, row: str) -> None:
    found = cell_type(name)
    assert found.name == row and found.source  # the row keeps its citation
    if row == "endothelial":
        # Dewey et al., J Biomech Eng 1981: cells align with the flow at 0.5-1.0 Pa
        assert (found.shear_min, found.shear_max) == (0.5, 1.0)


def test_an_unknown_cell_name_still_fails_with_a_suggestion() -> None:
    with pytest.raises(SpecError, match="did you mean 'endothelial'"):
        cell_type("endotheliel")


def test_the_guide_documents_the_gdsii_layer_numbers() -> None:
    rows = dict(guide_table("outputs", "gdsii-layers"))
    assert "chip outline" in rows[str(OUTLINE_GDS_LAYER)]
    assert "port" in rows[str(PORT_GDS_LAYER)]
    assert "notes" in rows[str(NOTES_GDS_LAYER)]
    assert "mask levels" in rows["1, 2, ... n"]


def test_the_demo_output_folder_is_ignored_by_git() -> None:
    from chipflow.cli.build import DEMO_DESIGN
    from chipflow.export.bundle import _slug

    text = (ROOT / "chipflow" / "data" / DEMO_DESIGN).read_text()
    name = re.search(r'^name\s*=\s*"([^"]+)"', text, re.MULTILINE).group(1)
    assert f"/{_slug(name)}/" in (ROOT / ".gitignore").read_text().split()


def test_auto_pressure_supply_gives_the_design_flow() -> None:
    from chipflow.build import DesignSource, build_design, read_design_source

    demo = read_design_source(ROOT / "designs" / "demo_endothelial_bed.toml")
    data = _plain(demo.top.data)
    data["supply"].update(inlet="pressure", pressure="auto")
    data["supply"].pop("flow", None)
    data["limits"].pop("pump_pressure", None)
    auto = build_design(DesignSource.from_dict(data, "auto.toml"))
    syringe = build_design(demo)
    design_flow = 12e-9 / 60  # the demo's [tree] flow, 12 uL/min
    totals = auto.results["totals"]
    # linearity of Stokes flow: holding the pressure that the design flow needs gives it back
    assert totals["total_flow"] == pytest.approx(design_flow, rel=1e-9)
    assert totals["inlet_pressure"] == pytest.approx(
        syringe.results["totals"]["inlet_pressure"], rel=1e-9
    )
    assert "pressure controller set for the design flow" in auto.results["supply"]["mode"]
    assert auto.results["supply"]["inlet"]["pressure"] == pytest.approx(totals["inlet_pressure"])


def test_auto_is_the_only_word_a_pressure_takes(tmp_path: Path) -> None:
    from chipflow.build import DesignSource, build_design, read_design_source

    data = _plain(read_design_source(ROOT / "designs" / "demo_endothelial_bed.toml").top.data)
    data["supply"].update(inlet="pressure", pressure="automatic")
    with pytest.raises(SpecError, match="supply.pressure"):
        build_design(DesignSource.from_dict(data, "bad.toml"))


def _plain(data):
    import copy

    return copy.deepcopy(dict(data))


def test_shear_map_scale_is_the_cells_window_and_thin_channels_show() -> None:
    from chipflow.build import build_design
    from chipflow.export.preview import plot_layout
    from chipflow.report.schematic import shear_scale

    build = build_design(ROOT / "designs" / "demo_endothelial_bed.toml")
    layout = build.layout
    shear = build.solution.wall_shear_floor[: layout.channels.length.size]
    window = build.results["shear_window"]  # endothelial, Dewey et al. 1981: 0.5-1.0 Pa
    plot = plot_layout(layout, values=shear, value_range=shear_scale(window, shear))
    # the scale is fixed by the window (0 to twice its top), not by the 0.74-0.80 Pa spread
    assert plot.channel_collection.get_clim() == (0.0, 2.0)
    assert np.ptp(shear) / 2.0 < 0.05  # the trunk no longer stands out for a 8 % difference
    # every channel has an outline in its own colour, so 35 um bed channels still show
    assert (plot.channel_collection.get_linewidths() > 0).all()


def test_depth_choice_prefers_the_depth_whose_bed_passes_the_oxygen_checks() -> None:
    import tomllib

    from chipflow.build import DesignSource, build_design
    from chipflow.design.sizing import size_tree
    from chipflow.spec.tree import load_tree_spec

    data = tomllib.loads((ROOT / "designs" / "tree_endothelial.toml").read_text())
    # a slow hepatocyte bed (2e5 cells/cm^2, 4.8e-17 mol/s each: Sci Rep 2017 srep42113) that
    # holds the medium for 2 min, on a mould of 50 and 100 um
    data["tree"]["flow"] = "0.5 uL/min"
    data["bed"].update(residence_time="120 s", max_straight_length="10 mm")
    data["culture"] = {"cell_type": "hepatocyte", "cell_density": "2e5 cell/cm^2", "seeded": "bed"}
    data["fabrication"]["max_width_to_depth"] = 40
    source = DesignSource.from_dict(data, "slow.toml")
    # the fabrication-only rule puts every level at 50 um (one depth, the shallowest)
    plain = size_tree(load_tree_spec(source.top))
    assert all(lv.depth == pytest.approx(50e-6) for lv in plain.levels)
    build = build_design(source, field=False)
    bed = next(lv for lv in build.design.levels if lv.role == "bed")
    assert bed.depth == pytest.approx(100e-6)
    # at a fixed residence time the floor is flow x time / depth: the 50 um bed has twice the
    # cells of the 100 um one, which use more oxygen than the flow brings (mass balance:
    # 2e9 x 4.8e-17 x 120 s / (50 um x 0.200 mol/m^3) = 1.15 of it)
    assert 2e9 * 4.8e-17 * 120 / (50e-6 * 0.2) > 1 > 2e9 * 4.8e-17 * 120 / (100e-6 * 0.2)
    checks = {c.name: c for c in build.checks}
    assert checks["hypoxic share of the seeded floor"].status == "pass"
    note = next(w for w in build.results["warnings"] if w.startswith("depth choice"))
    assert "rather than 50 um" in note and "hypoxic share" in note


def test_a_single_depth_design_has_no_depth_note() -> None:
    from chipflow.build import build_design

    build = build_design(ROOT / "designs" / "demo_endothelial_bed.toml")
    assert not [w for w in build.results["warnings"] if w.startswith("depth choice")]


def test_report_shows_the_floor_shear_window_as_the_limit_of_every_level(tmp_path: Path) -> None:
    from chipflow.export.bundle import build_to_folder

    _, files = build_to_folder(ROOT / "designs" / "demo_endothelial_bed.toml", tmp_path / "o")
    page = (files[0].parent / "report.html").read_text()
    rows = [r for r in page.split("<tr>") if "floor shear: " in r]
    assert len(rows) >= 3
    # endothelial window, Dewey et al. 1981: 0.5-1.0 Pa, the same on every row
    assert all("<td>0.5 &ndash; 1 Pa</td>" in r for r in rows)
