"""Tests of the checks: cell-type table, culture, transport, pressure, flow and fabrication."""

from __future__ import annotations

import math
import tomllib
from importlib import resources
from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from chipflow.checks import (
    CheckResult,
    cell_type,
    cell_types,
    check_bond_pressure,
    check_entrance_length,
    check_floor_shear,
    check_oxygen_diffusion,
    check_oxygen_supply,
    check_pump_pressure,
    check_residence_time,
    check_reynolds,
    check_uniformity,
    diffusion_time,
    fabrication_results,
    oxygen_use_fraction,
    worst_status,
)
from chipflow.checks.cell_types import ShearWindow, parse_cell_types
from chipflow.checks.culture import shear_status
from chipflow.errors import SpecError

# -- the cell-type table -------------------------------------------------------------------


def test_every_cell_type_has_a_source_and_a_window():
    table = cell_types()
    assert {"endothelial", "hepatocyte", "mouse-esc"} <= set(table)
    for cell in table.values():
        assert cell.source.strip(), cell.name
        assert 0 < cell.shear_min < cell.shear_max
        if cell.o2_consumption is not None:
            assert cell.o2_source.strip()


def test_table_values_match_the_cited_sources():
    # Dewey et al., J Biomech Eng 1981;103:177: 0.5-1.0 Pa align; 0.1-0.5 Pa as static culture.
    assert (cell_type("endothelial").shear_min, cell_type("endothelial").shear_max) == (0.5, 1.0)
    static = cell_type("endothelial-static")
    assert (static.shear_min, static.shear_max) == (0.1, 0.5)
    # Biotechnol Bioeng 2013;110:1231: 0.15-1.5 Pa for mouse embryonic stem cells.
    esc = cell_type("mouse-esc")
    assert (esc.shear_min, esc.shear_max) == (0.15, 1.5)
    # Tilles et al. 2001 (from memory, low-medium confidence): 0.001-0.033 Pa; the table says so.
    hep = cell_type("hepatocyte")
    assert (hep.shear_min, hep.shear_max) == (0.001, 0.033)
    assert "from memory" in hep.confidence and "from memory" in hep.window().source
    # Sci Rep 2017;7:42113 Table 1: hepatocyte uptake 4.8e-17 mol/cell/s.
    assert hep.o2_consumption == pytest.approx(4.8e-17)
    # Malek, Alper & Izumo, JAMA 1999 (ranges from memory): arteries 1-7 Pa, veins 0.1-0.6 Pa.
    assert cell_type("arterial-endothelium").shear_max == 7.0
    assert "from memory" in cell_type("venous-endothelium").window().source


def test_bundled_file_rows_all_carry_source_key():
    text = resources.files("chipflow").joinpath("data/cell_types.toml").read_text("utf-8")
    rows = tomllib.loads(text)
    assert rows and all("source" in row for row in rows.values())


@pytest.mark.parametrize(
    ("row", "message"),
    [
        ({"shear_min": "0.1 Pa", "shear_max": "1 Pa"}, "x.source: missing required key"),
        ({"shear_min": "0.1 Pa", "shear_max": "1 Pa", "source": "  "}, "needs the citation"),
        ({"shear_min": 0.1, "shear_max": "1 Pa", "source": "s"}, "missing unit"),
        ({"shear_min": "1 Pa", "shear_max": "0.1 Pa", "source": "s"}, "greater than shear_min"),
        ({"shear_min": "0.1 Pa", "shear_max": "1 Pa", "source": "s", "sorce": "t"}, "did you mean"),
        (
            {
                "shear_min": "0.1 Pa",
                "shear_max": "1 Pa",
                "source": "s",
                "o2_consumption": "1 amol/s",
            },
            "needs its citation",
        ),
    ],
)
def test_loader_rejects_bad_rows(row, message):
    with pytest.raises(SpecError, match=message):
        parse_cell_types({"x": row})


def test_unknown_cell_type_suggests_the_nearest():
    with pytest.raises(SpecError, match="did you mean 'endothelial'"):
        cell_type("endotheliel", where="chip.toml: culture.cell_type")
    with pytest.raises(SpecError, match="chip.toml: culture.cell_type: unknown cell type 'neuron'"):
        cell_type("neuron", where="chip.toml: culture.cell_type")


# -- CheckResult ---------------------------------------------------------------------------


def test_check_result_validates_and_serialises():
    with pytest.raises(ValueError, match="status"):
        CheckResult("x", "PASS", 1.0, 2.0, "Pa", "s", "m")
    r = CheckResult("x", "warn", np.float64(math.inf), 2, "Pa", "s", "m")
    assert r.to_dict() == {
        "name": "x",
        "status": "warn",
        "value": None,
        "limit": 2.0,
        "unit": "Pa",
        "source": "s",
        "message": "m",
    }
    assert type(r.limit) is float
    assert worst_status([]) == "pass"
    assert worst_status([r, CheckResult("y", "fail", None, None, "", "", "")]) == "fail"


# -- floor shear ---------------------------------------------------------------------------

WINDOW = ShearWindow("endothelial", 0.5, 1.0, "Dewey et al. 1981")


@pytest.mark.parametrize(
    ("tau", "status"),
    [
        (0.5, "pass"),
        (0.75, "pass"),
        (1.0, "pass"),  # inside (bounds included)
        (0.4, "warn"),
        (0.45, "warn"),
        (1.2, "warn"),
        (1.1, "warn"),  # within 20 %
        (0.399, "fail"),
        (1.201, "fail"),
        (0.0, "fail"),
        (5.0, "fail"),
    ],
)
def test_floor_shear_boundaries(tau, status):
    (result,) = check_floor_shear(["bed (generation 4)"], [tau], WINDOW)
    assert result.status == status
    assert result.name == "floor shear: bed (generation 4)"
    assert result.unit == "Pa" and result.source == "Dewey et al. 1981"
    # the limit is the whole window (Dewey et al. 1981: 0.5-1.0 Pa), whichever side tau is on
    assert (result.limit_low, result.limit) == (0.5, 1.0)
    if tau < 0.5:
        assert "below" in result.message
    if tau > 1.0:
        assert "above" in result.message


def test_floor_shear_one_result_per_generation():
    results = check_floor_shear(["d0", "bed", "c0"], [2.0, 0.7, 2.0], WINDOW)
    assert [r.status for r in results] == ["fail", "pass", "fail"]
    with pytest.raises(ValueError):
        check_floor_shear(["d0"], [1.0, 2.0], WINDOW)


@given(
    st.floats(1e-4, 10.0),
    st.floats(1e-3, 1.0),
    st.floats(1.01, 20.0),
    st.floats(1e-3, 1e3),
)
def test_shear_grading_is_scale_free(tau, low, ratio, scale):
    # Law: grading depends only on tau relative to the window, so scaling all by one factor
    # changes nothing (same unit system in Pa or dyn/cm^2 must agree). Skip values on a bound
    # where rounding of the product could flip the side.
    high = low * ratio
    bounds = np.array([low, high, 0.8 * low, 1.2 * high])
    if np.any(np.abs(tau / bounds - 1.0) < 1e-9):
        return
    a = shear_status([tau], low, high)[0]
    b = shear_status([tau * scale], low * scale, high * scale)[0]
    assert a == b


# -- transport -----------------------------------------------------------------------------


def test_residence_time_boundaries():
    # ours: pass within 10 %, warn within 25 %, fail beyond
    grades = [check_residence_time(t, 2.0).status for t in (2.0, 2.2, 1.8, 2.21, 2.5, 1.5, 2.51)]
    assert grades == ["pass", "pass", "pass", "warn", "warn", "warn", "fail"]
    assert check_residence_time(2.2, 2.0).limit == 2.0


def test_diffusion_time_against_einstein():
    # Einstein 1905, one dimension: t = h^2 / (2 D); D = 3e-9 m^2/s for oxygen in water at
    # 37 C (Sci Rep 2017;7:42113, Table 1). h = 60 um: 3.6e-9 / 6e-9 = 0.6 s.
    assert diffusion_time(60e-6) == pytest.approx(0.6, rel=1e-12)
    assert diffusion_time(100e-6, 2e-9) == pytest.approx(2.5, rel=1e-12)


def test_oxygen_diffusion_boundaries():
    # ours: pass while t_diff <= half the residence time, warn up to the whole of it
    assert check_oxygen_diffusion(60e-6, 1.2).status == "pass"  # 0.6 / 1.2 = 0.5
    assert check_oxygen_diffusion(60e-6, 1.19).status == "warn"
    assert check_oxygen_diffusion(60e-6, 0.6).status == "warn"
    assert check_oxygen_diffusion(60e-6, 0.59).status == "fail"
    r = check_oxygen_diffusion(60e-6, 2.0)
    assert r.value == pytest.approx(0.6) and r.limit == 2.0 and "Einstein" in r.source


def test_oxygen_supply_against_a_hand_calculation():
    # Values from Sci Rep 2017;7:42113, Table 1: c_in = 0.2 mol/m^3 (air-equilibrated medium,
    # 37 C) and hepatocyte uptake 4.8e-17 mol/cell/s; cell density 1e5 cells/cm^2 (assumed).
    # Bed: 16 channels, 200 um wide, 3 mm long -> floor 16 * 0.02 cm * 0.3 cm = 0.096 cm^2.
    # Cells: 0.096 cm^2 * 1e5 /cm^2 = 9600; uptake 9600 * 4.8e-17 = 4.608e-13 mol/s.
    # Supply: 5 uL/min = 8.3333e-11 m^3/s; * 0.2 mol/m^3 = 1.66667e-11 mol/s.
    # Fraction used: 4.608e-13 / 1.66667e-11 = 0.027648.
    flow = 5e-9 / 60
    area = 16 * 200e-6 * 3e-3
    r = check_oxygen_supply(flow, area, 1e9, 4.8e-17, 0.2)
    assert r.value == pytest.approx(0.027648, rel=1e-9)
    assert r.status == "pass" and r.unit == "1"
    assert "Sci Rep 2017" in r.source and "9.6e+03 cells" in r.message


def test_oxygen_supply_boundaries():
    # ours: pass up to 50 % of the inlet oxygen, warn up to 100 %, fail beyond.
    # With 1 m^2 of floor, 1 cell/m^2 and 1 mol/s per cell, the fraction is 1 / (Q c).
    def grade(fraction):
        return check_oxygen_supply(1.0 / fraction, 1.0, 1.0, 1.0, 1.0).status

    assert [grade(f) for f in (0.1, 0.5, 0.5001, 1.0, 1.0001)] == [
        "pass",
        "pass",
        "warn",
        "warn",
        "fail",
    ]
    assert oxygen_use_fraction(0.0, 1.0, 1.0, 1.0) == math.inf
    assert check_oxygen_supply(0.0, 1.0, 1.0, 1.0).status == "fail"


@given(st.floats(1e-12, 1e-8), st.floats(1e-7, 1e-4), st.floats(1.5, 10.0))
def test_oxygen_fraction_scales_inversely_with_flow(flow, area, factor):
    # Law: the used fraction is proportional to the cells and inversely to the flow.
    a = oxygen_use_fraction(flow, area)
    assert oxygen_use_fraction(flow * factor, area) == pytest.approx(a / factor, rel=1e-12)
    assert oxygen_use_fraction(flow, area * factor) == pytest.approx(a * factor, rel=1e-12)


# -- pressure ------------------------------------------------------------------------------


def test_bond_pressure_boundaries():
    # Duffy et al. 1998 (from memory): PDMS-glass bond 200-350 kPa; default 200 kPa, factor 2.
    grades = [check_bond_pressure(p).status for p in (50e3, 100e3, 100.001e3, 200e3, 200.001e3)]
    assert grades == ["pass", "pass", "warn", "warn", "fail"]
    r = check_bond_pressure(150e3)
    assert r.limit == 100e3 and r.unit == "Pa" and "Duffy" in r.source
    # a design's own bond of 400 kPa with factor 2.5 allows 160 kPa
    assert check_bond_pressure(160e3, 400e3, safety_factor=2.5).status == "pass"
    assert check_bond_pressure(161e3, 400e3, safety_factor=2.5).status == "warn"
    assert check_bond_pressure(401e3, 400e3, safety_factor=2.5).status == "fail"


def test_pump_pressure_boundaries():
    grades = [check_pump_pressure(p, 100e3).status for p in (80e3, 80.01e3, 100e3, 100.01e3)]
    assert grades == ["pass", "warn", "warn", "fail"]


# -- flow regime ---------------------------------------------------------------------------


def test_reynolds_boundaries_and_worst_generation():
    labels = ["d0", "bed", "c0"]
    assert check_reynolds(labels, [100.0, 1.0, 1.0]).status == "pass"
    assert check_reynolds(labels, [100.1, 1.0, 1.0]).status == "warn"
    assert check_reynolds(labels, [1.0, 1.0, 2000.0]).status == "warn"
    r = check_reynolds(labels, [1.0, 1.0, -2000.5])
    assert r.status == "fail" and "c0" in r.message and r.value == 2000.5


def test_entrance_length_against_chen():
    # Chen, J Fluids Eng 1973: L_e / D = 0.6 / (1 + 0.035 Re) + 0.056 Re, with D_h = 2wh/(w+h).
    # 400 x 100 um: D_h = 160 um. At Re = 10: L_e = 160e-6 * (0.6/1.35 + 0.56)
    # = 160e-6 * 1.004444 = 1.60711e-4 m; over a 1 mm channel: 0.160711 -> warn.
    w, h = np.array([400e-6, 100e-6]), np.array([100e-6, 100e-6])
    d_h = 2 * w * h / (w + h)
    assert d_h[0] == pytest.approx(160e-6)
    r = check_entrance_length(["d0", "bed"], w, h, [1e-3, 5e-3], [10.0, 0.01])
    assert r.value == pytest.approx(160e-6 * (0.6 / 1.35 + 0.56) / 1e-3, rel=1e-12)
    assert r.status == "warn" and "d0" in r.message
    # share exactly at 10 %: the length that makes it so passes; a hair shorter warns
    le = 160e-6 * (0.6 / 1.35 + 0.56)
    assert check_entrance_length(["d0"], [400e-6], [100e-6], [le / 0.1], [10.0]).status == "pass"
    assert check_entrance_length(["d0"], [400e-6], [100e-6], [le / 0.1001], [10.0]).status == "warn"


def test_uniformity_boundaries():
    # Flows 1 - e and 1 + e have population std e and mean 1: CV = e exactly.
    def grade(e):
        return check_uniformity([1.0 - e, 1.0 + e, 1.0 - e, 1.0 + e])

    assert grade(0.0).status == "pass"
    assert grade(0.0099).status == "pass"
    assert grade(0.01).status == "warn"
    assert grade(0.0499).status == "warn"
    assert grade(0.05).status == "fail"
    assert grade(0.03).value == pytest.approx(0.03, rel=1e-12)


@given(
    st.lists(st.floats(0.5, 2.0), min_size=2, max_size=64),
    st.floats(1e-12, 1e-6),
    st.randoms(use_true_random=False),
)
def test_uniformity_is_scale_and_order_free(flows, scale, rnd):
    base = check_uniformity(flows).value
    shuffled = list(flows)
    rnd.shuffle(shuffled)
    assert check_uniformity(np.array(shuffled) * scale).value == pytest.approx(
        base, rel=1e-9, abs=1e-12
    )


# -- fabrication ---------------------------------------------------------------------------


def _finding(severity, **kw):
    base = dict(
        rule="minimum wall",
        severity=severity,
        value=30e-6,
        limit=50e-6,
        x=1e-3,
        y=2.5e-3,
        channels=(4,),
        message="wall between channels too thin",
    )
    base.update(kw)
    return SimpleNamespace(**base)


def test_fabrication_findings_map_severity():
    results = fabrication_results([_finding("error"), _finding("warning", channels=())])
    assert [r.status for r in results] == ["fail", "warn"]
    assert results[0].name == "fabrication: minimum wall"
    assert results[0].value == 30e-6 and results[0].limit == 50e-6 and results[0].unit == "m"
    assert "x = 1 mm, y = 2.5 mm" in results[0].message and "channel 4" in results[0].message
    assert "channel" not in results[1].message.split("(")[1]
    many = fabrication_results([_finding("error", channels=tuple(range(12)))])[0]
    assert "and 4 more" in many.message
    assert [r.status for r in fabrication_results([])] == ["pass"]
    with pytest.raises(ValueError, match="severity"):
        fabrication_results([_finding("fatal")])
