"""The unit boundary: text in, SI out, and clear errors."""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from chipflow.errors import ChipflowError, UnitError
from chipflow.units import from_si, to_si, ureg

# Source: exact SI definitions (BIPM SI brochure): 1 uL = 1e-9 m^3,
# 1 dyn/cm^2 = 0.1 Pa, 0 degC = 273.15 K.
CASES = [
    ("50 um", "length", 50e-6),
    ("0.2mm", "length", 2e-4),
    ("5 uL/min", "flow", 5e-9 / 60),
    ("37 degC", "temperature", 310.15),
    ("1.2 dyn/cm^2", "pressure", 0.12),
    ("3 kPa", "pressure", 3000.0),
    ("0.9 mPa*s", "viscosity", 9e-4),
    ("1e5 cell/cm^2", "areal_density", 1e9),
    ("0.5", "dimensionless", 0.5),
]


@pytest.mark.parametrize(("text", "kind", "expected"), CASES)
def test_to_si(text: str, kind: str, expected: float) -> None:
    assert to_si(text, kind) == pytest.approx(expected, rel=1e-12)


def test_accepts_quantities_and_plain_numbers_only_when_dimensionless() -> None:
    assert to_si(ureg.Quantity(2, "mm"), "length") == pytest.approx(2e-3)
    assert to_si(3, "dimensionless") == 3.0
    with pytest.raises(UnitError, match="missing unit"):
        to_si(50, "length")


@pytest.mark.parametrize(
    ("text", "kind", "why"),
    [
        ("50", "length", "missing unit"),
        ("50 uL/min", "length", "wrong kind of unit"),
        ("fifty um", "length", "not a quantity"),
        ("50 blargs", "length", "unknown unit"),
        ("nan um", "length", "not a quantity"),
        ("1e999 um", "length", "not a finite number"),
        ([1, 2], "length", "not a quantity"),
        (True, "length", "not a quantity"),
    ],
)
def test_errors_name_kind_text_and_example(text, kind, why) -> None:
    with pytest.raises(UnitError) as info:
        to_si(text, kind, where="design.toml: tree.width")
    message = str(info.value)
    assert why in message
    assert "design.toml: tree.width" in message
    assert "such as '50 um'" in message
    assert isinstance(info.value, ValueError) and isinstance(info.value, ChipflowError)


@given(st.floats(1e-9, 1e9))
def test_round_trip(value: float) -> None:
    assert to_si(f"{value!r} um", "length") == pytest.approx(value * 1e-6, rel=1e-12)
    assert from_si(value * 1e-6, "um") == pytest.approx(value, rel=1e-12)
    assert math.isfinite(from_si(value, "uL/min"))
