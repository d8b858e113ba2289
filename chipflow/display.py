"""Numbers for people: the one place where SI floats become the text chipflow shows.

The console tables, the HTML reports, the check messages and the figure labels format their
numbers here; files for machines (results.json, channels.csv, sweep.csv) keep full SI floats.
Three rules:

- **significant figures, not decimals**: 4 in tables, 3 in sentences (``23.33 uL/min``, never
  ``23.3333333333 uL/min``), positional up to 10^7 (``22380``, not ``2.238e+04``);
- **a unit chosen per magnitude**: ``8.87 Pa``, not ``0.00887 kPa``; a table column takes one
  unit, chosen by its largest value (:func:`column`);
- **float noise shown as 0**: a value that is rounding noise of a quantity that is zero (the
  flow spread of a symmetric bed, ``3.6e-16``) reads ``0``, not ``3.6e-14 %``.

Wall shear stays in Pa at every magnitude: every cited window is given in Pa.

Examples
--------
>>> quantity(8.87, "pressure"), quantity(2.5e5, "pressure"), quantity(3.9e-10, "flow")
('8.87 Pa', '250 kPa', '23.4 uL/min')
>>> fraction(3.6e-16), fraction(0.3172), number(-1.83e-11), number(0.7412)
('0 %', '31.7 %', '0', '0.7412')
>>> column([35e-6, 600e-6], "width")
('um', ['35', '600'])
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np

__all__ = [
    "LADDERS",
    "NOISE",
    "lab_number",
    "number",
    "fraction",
    "quantity",
    "unit_for",
    "column",
    "value_text",
    "is_noise",
]

#: Display units of each kind of quantity: (unit, size of one unit in SI, smallest SI
#: magnitude shown in it), smallest unit first. A value takes the last rung it reaches.
LADDERS: dict[str, tuple[tuple[str, float, float], ...]] = {
    "pressure": (("Pa", 1.0, 0.0), ("kPa", 1e3, 1e3), ("MPa", 1e6, 1e6)),
    "shear": (("Pa", 1.0, 0.0),),
    "flow": (
        ("pL/min", 1e-15 / 60, 0.0),
        ("nL/min", 1e-12 / 60, 1e-13 / 60),
        ("uL/min", 1e-9 / 60, 1e-10 / 60),
        ("mL/min", 1e-6 / 60, 1e-6 / 60),
    ),
    # feature sizes (widths, depths, gaps): um up to 10 mm
    "width": (("nm", 1e-9, 0.0), ("um", 1e-6, 1e-7), ("mm", 1e-3, 1e-2)),
    # lengths along a channel or across a chip
    "length": (("um", 1e-6, 0.0), ("mm", 1e-3, 1e-3), ("m", 1.0, 10.0)),
    "velocity": (("um/s", 1e-6, 0.0), ("mm/s", 1e-3, 1e-4), ("m/s", 1.0, 1.0)),
    "time": (
        ("ms", 1e-3, 0.0),
        ("s", 1.0, 0.1),
        ("min", 60.0, 600.0),
        ("h", 3600.0, 7200.0),
        ("d", 86400.0, 172800.0),
    ),
    "area": (("um^2", 1e-12, 0.0), ("mm^2", 1e-6, 1e-9), ("cm^2", 1e-4, 1e-4)),
    "volume": (("nL", 1e-12, 0.0), ("uL", 1e-9, 1e-10), ("mL", 1e-6, 1e-6)),
    "resistance": (("Pa s/uL", 1e9, 0.0),),
}

#: Magnitudes below which a value is rounding noise [SI unit of the kind]: far below any
#: physical value of a microfluidic chip, far above the 1e-16 relative noise of a float.
NOISE: dict[str, float] = {
    "number": 1e-9,
    "fraction": 1e-9,
    "pressure": 1e-9,
    "shear": 1e-12,
    "flow": 1e-24,
    "width": 1e-15,
    "length": 1e-15,
    "velocity": 1e-15,
    "time": 1e-12,
    "area": 1e-24,
    "volume": 1e-24,
    "resistance": 1e-3,
}

#: Values of a table column smaller than this share of its largest value are noise.
RELATIVE_NOISE = 1e-10


def lab_number(value: float, digits: int = 4) -> str:
    """A number for people: ``digits`` significant figures, positional up to 10^7.

    Plain ``g`` formatting writes a 22.4 mm wide channel as ``2.238e+04`` um; lab tables
    read better as ``22380``. Very large or very small numbers keep the exponent. No noise
    rule here: see :func:`number`.

    >>> lab_number(22377.5), lab_number(0.5156183), lab_number(5.0), lab_number(1.5e-7)
    ('22380', '0.5156', '5', '1.5e-07')
    """
    value = float(value)
    if not math.isfinite(value):
        return "-" if math.isnan(value) else ("inf" if value > 0 else "-inf")
    if value != 0 and not 1e-4 <= abs(value) < 1e7:
        return f"{value:.{digits}g}"
    text = np.format_float_positional(
        value, precision=digits, unique=False, fractional=False, trim="-"
    )
    return "0" if text == "-0" else text


def is_noise(value: float, kind: str = "number", scale: float | None = None) -> bool:
    """Whether ``value`` [SI] is rounding noise of zero: below the kind's absolute floor
    (:data:`NOISE`) or, with ``scale`` (a column's largest magnitude), below
    :data:`RELATIVE_NOISE` of it.

    >>> is_noise(3.6e-16, "fraction"), is_noise(0.01, "pressure"), is_noise(1e-9, "flow", 1e-9)
    (True, False, False)
    """
    size = abs(float(value))
    if size == 0.0 or not math.isfinite(size):
        return size == 0.0
    if size < NOISE.get(kind, NOISE["number"]):
        return True
    return scale is not None and math.isfinite(scale) and size < RELATIVE_NOISE * abs(scale)


def number(value: Any, digits: int = 4) -> str:
    """A plain number (Reynolds number, an elasticity, a ratio) with noise shown as 0.

    >>> number(0.66441), number(-1.83e-11), number(None), number(float("nan"))
    ('0.6644', '0', '-', '-')
    """
    if value is None:
        return "-"
    value = float(value)
    if is_noise(value):
        return "0"
    return lab_number(value, digits)


def fraction(value: Any, digits: int = 3, *, signed: bool = False) -> str:
    """A fraction [1] as a percentage, noise as 0 (``signed``: with its sign, ``+1.2 %``).

    >>> fraction(0.3172), fraction(-0.0123, signed=True), fraction(1.0), fraction(None)
    ('31.7 %', '-1.23 %', '100 %', '-')
    """
    if value is None:
        return "-"
    value = float(value)
    if is_noise(value, "fraction"):
        return "0 %"
    text = lab_number(value * 100.0, digits)
    if signed and value > 0:
        text = "+" + text
    return f"{text} %"


def unit_for(kind: str, values: Iterable[Any]) -> tuple[str, float]:
    """The display unit of ``kind`` for ``values`` [SI] and its size in SI: the rung that
    the largest finite magnitude reaches.

    >>> unit_for("pressure", [8.87, 120.0]), unit_for("pressure", [8.87, 2.4e4])
    (('Pa', 1.0), ('kPa', 1000.0))
    >>> unit_for("flow", [3.17 / 6e10])
    ('uL/min', 1.6666666666666667e-11)
    """
    ladder = LADDERS[kind]
    sizes = [abs(float(v)) for v in values if v is not None and math.isfinite(float(v))]
    top = max(sizes, default=0.0)
    if top == 0.0 or is_noise(top, kind):
        # nothing but zeros: the unit people expect for the kind
        unit, size, _ = next((r for r in ladder if r[0] in _USUAL), ladder[0])
        return unit, size
    unit, size = ladder[0][0], ladder[0][1]
    for rung_unit, rung_size, start in ladder:
        if top >= start * (1 - 1e-12):
            unit, size = rung_unit, rung_size
    return unit, size


_USUAL = {"Pa", "uL/min", "um", "mm", "mm/s", "s", "mm^2", "uL", "Pa s/uL"}


def quantity(value: Any, kind: str, digits: int = 3, *, unit: str | None = None) -> str:
    """An SI value with the display unit its magnitude calls for (or ``unit``).

    >>> quantity(0.00887e3, "pressure"), quantity(35e-6, "width"), quantity(0.48, "time")
    ('8.87 Pa', '35 um', '0.48 s')
    >>> quantity(5400.0, "time"), quantity(1e-20, "pressure"), quantity(None, "flow")
    ('90 min', '0 Pa', '-')
    """
    if value is None:
        return "-"
    value = float(value)
    if unit is None:
        unit, size = unit_for(kind, [value])
    else:
        size = next(r[1] for r in LADDERS[kind] if r[0] == unit)
    if not math.isfinite(value):
        return lab_number(value)
    text = "0" if is_noise(value, kind) else lab_number(value / size, digits)
    return f"{text} {unit}"


def column(values: Sequence[Any], kind: str, digits: int = 4) -> tuple[str, list[str]]:
    """One table column: its unit (by the largest value) and each value's text in it.

    Values below :data:`RELATIVE_NOISE` of the column's largest (and below the kind's floor)
    read 0; None and NaN read ``-``.

    >>> column([0.7412, 3.6e-16, None], "shear")
    ('Pa', ['0.7412', '0', '-'])
    >>> column([1.2e-3, 4.7e-4], "length")
    ('mm', ['1.2', '0.47'])
    """
    unit, size = unit_for(kind, values)
    finite = [abs(float(v)) for v in values if v is not None and math.isfinite(float(v))]
    scale = max(finite, default=0.0)
    out = []
    for v in values:  # one table column: a few dozen rows
        if v is None or (isinstance(v, float) and math.isnan(v)):
            out.append("-")
        elif is_noise(float(v), kind, scale):
            out.append("0")
        else:
            out.append(lab_number(float(v) / size, digits))
    return unit, out


_QUANTITY_TEXT = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)(\s*)(.*?)\s*$")


def value_text(value: Any, digits: int = 4) -> str:
    """A value as a person typed it (a number, a quantity text such as ``"23.3333333333
    uL/min"``, a list of them) in ``digits`` significant figures.

    >>> value_text("23.3333333333 uL/min"), value_text(("40um", "100um")), value_text(16)
    ('23.33 uL/min', '[40um, 100um]', '16')
    >>> value_text(1.23456789), value_text("area-growth"), value_text(True)
    ('1.235', 'area-growth', 'true')
    """
    if isinstance(value, tuple | list):
        return "[" + ", ".join(value_text(v, digits) for v in value) + "]"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return number(value, digits)
    text = str(value)
    match = _QUANTITY_TEXT.match(text)
    if match is None:
        return text
    figure, space, unit = match.groups()
    return f"{lab_number(float(figure), digits)}{space}{unit}"
