"""Tests of the [culture] and [limits] sections of a design file."""

from __future__ import annotations

import math

import pytest

from chipflow.checks.cell_types import DEFAULT_O2_CONSUMPTION
from chipflow.errors import SpecError, UnitError
from chipflow.spec.culture import Culture, Limits, read_culture, read_limits
from chipflow.spec.reader import parse_design_text


def culture(text: str) -> Culture:
    return read_culture(parse_design_text("[culture]\n" + text, "chip.toml"))


def limits(text: str) -> Limits:
    return read_limits(parse_design_text("[limits]\n" + text, "chip.toml"))


def test_absent_sections_give_cited_defaults():
    top = parse_design_text('name = "x"', "chip.toml")
    c, lim = read_culture(top), read_limits(top)
    assert c.window is None and c.cell_type is None and c.seeded == "bed"
    # 1e5 cells/cm^2 = 1e9 cells/m^2 (assumed); Sci Rep 2017;7:42113 Table 1: 3e-9 m^2/s,
    # K_m 7.39e-3 mol/m^3; hepatocyte uptake 4.8e-17 mol/s as the cautious default; the inlet
    # in equilibrium with the incubator (None: worked out at the fluid's temperature), whose
    # oxygen is (101325 Pa - 6282 Pa water vapour at 37 degC) x 0.95 x 0.2095 = 18.9 kPa
    assert c.cell_density == pytest.approx(1e9) and "assumption" in c.cell_density_source
    assert (c.o2_inlet, c.o2_diffusivity, c.o2_km) == (None, 3e-9, 7.39e-3)
    assert c.o2_ambient == pytest.approx((101325 - 6282) * 0.95 * 0.2095, rel=1e-4)
    assert c.o2_consumption == DEFAULT_O2_CONSUMPTION == 4.8e-17
    assert not c.cells  # no cells declared: no oxygen check
    # Duffy et al. 1998 (from memory): 200 kPa low end; safety factor 2 (ours); no pump.
    assert (lim.bond_pressure, lim.safety_factor, lim.pump_pressure) == (200e3, 2.0, None)


def test_cell_type_window_and_units_at_the_boundary():
    c = culture(
        'cell_type = "endothelial"\nseeded = "all"\ncell_density = "5e4 cell/cm^2"\n'
        'o2_consumption = "20 amol/s"\no2_inlet = "0.15 mol/m^3"\n'
        'o2_diffusivity = "2.8e-5 cm^2/s"\nresidence_time = "1.5 s"'
    )
    assert (c.window.min, c.window.max) == (0.5, 1.0) and "Dewey" in c.window.source
    assert c.seeded == "all"
    assert c.cell_density == pytest.approx(5e8)  # 5e4 / 1e-4 m^2
    assert c.o2_consumption == pytest.approx(2e-17) and "chip.toml" in c.o2_consumption_source
    assert c.o2_inlet == pytest.approx(0.15)
    assert c.o2_diffusivity == pytest.approx(2.8e-9)
    assert c.residence_time == 1.5


def test_cell_type_uptake_is_used_when_known():
    c = culture('cell_type = "hepatocyte"')
    assert c.o2_consumption == pytest.approx(4.8e-17) and "42113" in c.o2_consumption_source
    assert c.cells
    # every cell type has its own uptake, with its source; rows from memory say so
    other = culture('cell_type = "mouse-esc"')
    assert other.o2_consumption == pytest.approx(2e-17)
    assert "from memory" in other.o2_consumption_source
    endo = culture('cell_type = "endothelial"')
    assert endo.o2_consumption == pytest.approx(1e-17) and "Wagner" in endo.o2_consumption_source
    with pytest.raises(SpecError, match="culture.o2_consumption: cell_density is given without"):
        culture('cell_density = "1e5 cell/cm^2"')
    own = culture('o2_consumption = "30 amol/s"')
    assert own.cells and own.o2_consumption == pytest.approx(3e-17)


def test_window_override():
    c = culture('cell_type = "endothelial"\nshear_min = "4 dyn/cm^2"')
    assert (c.window.min, c.window.max) == (pytest.approx(0.4), 1.0)
    assert "overrides" in c.window.source and "chip.toml" in c.window.source
    own = culture('shear_min = "0.2 Pa"\nshear_max = "0.8 Pa"')
    assert (own.window.min, own.window.max) == (0.2, 0.8)
    # one bound alone is a one-sided window
    low = culture('shear_min = "0.2 Pa"').window
    assert (low.min, low.max, low.text) == (0.2, math.inf, "at least 0.2 Pa")
    high = culture('shear_max = "0.1 Pa"').window
    assert (high.min, high.max, high.text) == (0.0, 0.1, "at most 0.1 Pa")
    with pytest.raises(SpecError, match="culture.shear_max: must be greater than shear_min"):
        culture('cell_type = "endothelial"\nshear_max = "0.3 Pa"')


@pytest.mark.parametrize(
    ("text", "error", "message"),
    [
        ('cell_type = "hepatocyts"', SpecError, "did you mean 'hepatocyte'"),
        ('cell_typ = "hepatocyte"', SpecError, "culture.cell_typ: unknown key; did you mean"),
        ("shear_min = 0.2", UnitError, "missing unit at chip.toml: culture.shear_min"),
        ('cell_density = "1e5 um"', UnitError, "wrong kind of unit"),
        ('seeded = "floor"', SpecError, "valid: bed, all"),
    ],
)
def test_culture_errors_say_where(text, error, message):
    with pytest.raises(error, match=message):
        culture(text)


def test_limits():
    lim = limits('bond_pressure = "3 bar"\nsafety_factor = 1.5\npump_pressure = "15 psi"')
    assert lim.bond_pressure == pytest.approx(3e5) and "chip.toml" in lim.bond_source
    assert lim.safety_factor == 1.5
    assert lim.pump_pressure == pytest.approx(15 * 6894.757, rel=1e-6)  # NIST: 1 psi = 6894.757 Pa
    with pytest.raises(SpecError, match="safety_factor: must be at least 1"):
        limits("safety_factor = 0.5")
    with pytest.raises(SpecError, match="did you mean 'pump_pressure'"):
        limits('pump_presure = "1 bar"')
