"""Numbers for people (chipflow.display): the cases the issue met, and the laws behind them.

The expected strings are chipflow's own display conventions (significant figures, a unit per
magnitude, float noise as 0), not values from an outside source.
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from chipflow import display
from chipflow.report.html import _check_value
from chipflow.report.variation import factor_text
from chipflow.units import to_si

#: pint's kind of quantity for each display kind (to read a shown value back).
KIND = {
    "pressure": "pressure", "shear": "pressure", "flow": "flow", "width": "length",
    "length": "length", "velocity": "velocity", "time": "time", "area": "area",
    "volume": "volume",
}  # fmt: skip


def test_a_small_pressure_beside_a_large_limit_keeps_its_own_unit() -> None:
    # was "0.00887 kPa" beside "100 kPa": each value takes the unit its magnitude calls for
    assert _check_value(8.87, 1e5, "Pa") == ("8.87 Pa", "100 kPa")


def test_float_noise_reads_zero() -> None:
    assert _check_value(3.6e-16, 0.05, "1") == ("0 %", "5 %")  # was "3.6e-14 %"
    assert display.number(-1.83e-11) == "0"  # was "elasticity -1.83e-11"
    assert display.fraction(-2.2e-16, signed=True) == "0 %"
    assert factor_text("supply", 1e-17) == "0 %"
    # a column's tiny member of a large column is noise too; a small value alone is not
    assert display.column([500.0, 3e-9], "pressure")[1] == ["500", "0"]
    assert display.quantity(3e-15 / 60, "flow") == "3 pL/min"


def test_significant_figures_not_decimals() -> None:
    assert display.value_text("23.3333333333 uL/min") == "23.33 uL/min"  # was 23.3333333333
    assert display.quantity(23.3333333333e-9 / 60, "flow", 4) == "23.33 uL/min"
    assert display.number(22377.5) == "22380" and display.number(0.000123456) == "0.0001235"


@pytest.mark.parametrize(
    "kind,si,text",
    [
        ("pressure", 8.87, "8.87 Pa"),
        ("pressure", 2.4e4, "24 kPa"),
        ("pressure", 3.2e6, "3.2 MPa"),
        ("shear", 2.4e3, "2400 Pa"),  # shear stays in Pa, the unit of every cited window
        ("flow", 12e-9 / 60, "12 uL/min"),
        ("flow", 0.05e-9 / 60, "50 nL/min"),
        ("flow", 2e-6 / 60, "2 mL/min"),
        ("width", 35e-6, "35 um"),
        ("width", 12e-3, "12 mm"),
        ("length", 0.8e-3, "800 um"),
        ("length", 22e-3, "22 mm"),
        ("velocity", 3.7e-3, "3.7 mm/s"),
        ("velocity", 40e-6, "40 um/s"),
        ("time", 0.05, "50 ms"),
        ("time", 2.34, "2.34 s"),
        ("time", 900.0, "15 min"),
        ("time", 86400.0, "24 h"),
        ("time", 3 * 86400.0, "3 d"),
        ("area", 0.0142e-6, "0.0142 mm^2"),
        ("volume", 2e-9, "2 uL"),
    ],
)
def test_units_per_magnitude(kind: str, si: float, text: str) -> None:
    assert display.quantity(si, kind) == text


@settings(max_examples=200, deadline=None)
@given(
    kind=st.sampled_from(sorted(KIND)),
    mantissa=st.floats(1.0, 9.999),
    exponent=st.integers(-14, 7),
    sign=st.sampled_from([1.0, -1.0]),
)
def test_a_shown_quantity_reads_back_as_its_value(kind, mantissa, exponent, sign) -> None:
    """Law: the text, read back through the unit registry, is the value to its 4 significant
    figures (or the value was noise and reads 0)."""
    value = sign * mantissa * 10.0**exponent
    text = display.quantity(value, kind, 4)
    back = to_si(text, KIND[kind])
    if display.is_noise(value, kind):
        assert back == 0.0
    else:
        assert math.isclose(back, value, rel_tol=6e-4), (value, text)


@settings(max_examples=100, deadline=None)
@given(st.lists(st.floats(0.0, 1e6, allow_nan=False), min_size=1, max_size=12))
def test_a_column_has_one_unit_and_keeps_its_order(values) -> None:
    """Law: every value of a column is shown in the column's one unit, and reading the cells
    back keeps the values' order (no cell in another unit)."""
    values = [v * 1e-3 for v in values]  # pressures up to 1 kPa... 1 MPa
    unit, cells = display.column(values, "pressure")
    numbers = [float(c) for c in cells]
    size = dict((u, s) for u, s, _ in display.LADDERS["pressure"])[unit]
    for v, n in zip(values, numbers, strict=True):
        assert n == 0.0 or math.isclose(n * size, v, rel_tol=6e-4)
    order = sorted(range(len(values)), key=values.__getitem__)
    assert [numbers[i] for i in order] == sorted(numbers)
