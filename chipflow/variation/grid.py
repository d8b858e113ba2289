"""Design sweeps: a grid over numeric design-file keys.

An axis is written ``KEY=VALUES``, where KEY is a dotted design-file key (``tree.flow``,
``fabrication.depths``, ``bed.gap``; in an explicit network an entry of a list of tables by
its name: ``channels.NAME.width``, ``tubes.NAME.length``, ``nodes.NAME.at``,
``ports.NODE.flow``) and VALUES either

- a range ``FROM..TO:N``: N evenly spaced values from FROM to TO, both included, in FROM's
  unit (``5uL/min..20uL/min:16``; plain numbers too: ``1.2..1.8:4``; whole numbers stay whole
  when every step is: ``3..6:4``), or
- a list of values separated by commas, where a value in brackets is itself a list
  (``[40um],[50um],[60um]`` or ``16,32,64``).

Each value goes into the design exactly as a person would write it in the file (``"8 uL/min"``),
so every grid point is an ordinary design that ``chipflow build`` would build the same way.

Examples
--------
>>> parse_axis("tree.flow=5uL/min..20uL/min:4").values
('5 uL/min', '10 uL/min', '15 uL/min', '20 uL/min')
>>> parse_axis("fabrication.depths=[40um],[50um, 100um]").values
(('40um',), ('50um', '100um'))
>>> parse_axis("tree.bed_channels=16,32").values
(16, 32)
"""

from __future__ import annotations

import copy
import itertools
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from chipflow import display
from chipflow.errors import SpecError
from chipflow.spec.network import TOP_KEYS as NETWORK_KEYS
from chipflow.spec.overrides import NAMED, named_entry
from chipflow.spec.tree import TOP_KEYS

__all__ = [
    "Axis",
    "parse_axis",
    "grid_points",
    "with_values",
    "design_text",
    "value_text",
    "MAX_POINTS",
]

#: Largest grid accepted.
MAX_POINTS = 10_000
#: Design-file sections whose numeric keys may be swept.
SECTIONS = tuple(
    dict.fromkeys(
        k for k in (*TOP_KEYS, *NETWORK_KEYS) if k not in ("name", "description", "tolerances")
    )
)
#: Keys of [tree] that each say how the tree branches: a swept one replaces the others.
BRANCHING = ("generations", "bed_channels", "splits")

_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")
_INT = re.compile(r"^[-+]?\d+$")


@dataclass(frozen=True)
class Axis:
    """One swept key.

    Attributes
    ----------
    key : str
        Dotted design-file key, e.g. ``tree.flow``.
    values : tuple
        The values as they go into the design (text with units, numbers or tuples of them).
    text : str
        The option as given.
    """

    key: str
    values: tuple[Any, ...]
    text: str


def _scalar(item: str, where: str) -> Any:
    item = item.strip()
    if not item:
        raise SpecError(f"{where}: empty value")
    if _INT.match(item):
        return int(item)
    match = _NUMBER.match(item)
    if match is None:
        raise SpecError(f"{where}: {item!r} is not a number or a quantity such as '50um'")
    number, unit = match.groups()
    return float(number) if not unit else item


def _split(text: str) -> list[str]:
    """Split at commas outside brackets."""
    parts, depth, start = [], 0, 0
    for i, ch in enumerate(text):  # loop over the characters of one option
        if ch == "[":
            depth += 1
        elif ch == "]":
            depth -= 1
        elif ch == "," and depth == 0:
            parts.append(text[start:i])
            start = i + 1
    parts.append(text[start:])
    return parts


def _item(item: str, where: str) -> Any:
    item = item.strip()
    if item.startswith("[") and item.endswith("]"):
        inner = [p for p in _split(item[1:-1]) if p.strip()]
        if not inner:
            raise SpecError(f"{where}: empty list []")
        return tuple(_scalar(p, where) for p in inner)
    if "[" in item or "]" in item:
        raise SpecError(f"{where}: unbalanced brackets in {item!r}")
    return _scalar(item, where)


def _range(spec: str, where: str) -> tuple[Any, ...]:
    bounds, _, count = spec.rpartition(":")
    start, _, stop = bounds.partition("..")
    if not count.strip().isdigit():
        raise SpecError(f"{where}: a range is FROM..TO:N with a whole number N of points")
    n = int(count)
    if n < 2:
        raise SpecError(f"{where}: empty range: give at least 2 points (FROM..TO:N, N >= 2)")
    if n > MAX_POINTS:  # before a single value is made: 1e9 points would take gigabytes
        raise SpecError(f"{where}: {n:,} points on one axis; a grid has at most {MAX_POINTS:,}")
    a, b = _NUMBER.match(start), _NUMBER.match(stop)
    if a is None or b is None:
        raise SpecError(f"{where}: FROM and TO must be numbers or quantities such as '5uL/min'")
    unit = a.group(2)
    x0, x1 = float(a.group(1)), float(b.group(1))
    if b.group(2) != unit:
        from chipflow.units import ureg

        try:
            x1 = float(
                ureg.Quantity(x1, b.group(2).replace("^", "**")).to(unit.replace("^", "**")).m
            )
        except Exception:
            raise SpecError(f"{where}: FROM and TO must have the same kind of unit") from None
    if x0 == x1:
        raise SpecError(f"{where}: empty range: FROM and TO are the same value")
    values = np.linspace(x0, x1, n)
    whole = not unit and _INT.match(start.strip()) and _INT.match(stop.strip())
    if whole and np.all(values == np.round(values)):
        return tuple(int(round(v)) for v in values)
    if not unit:
        return tuple(float(f"{v:.12g}") for v in values)
    return tuple(f"{v:.12g} {unit}" for v in values)


def parse_axis(text: str) -> Axis:
    """Parse one ``KEY=VALUES`` option (see the module notes).

    Raises
    ------
    SpecError
        A malformed option, a key outside the design sections, or an empty range or list.
    """
    where = f"--vary {text!r}"
    key, sep, spec = text.partition("=")
    key = key.strip()
    if not sep or not key:
        raise SpecError(f"{where}: expected KEY=VALUES, e.g. tree.flow=5uL/min..20uL/min:16")
    parts = key.split(".")
    if len(parts) < 2 or not all(parts):
        raise SpecError(f"{where}: unknown key {key!r}: give SECTION.KEY, e.g. tree.flow")
    if parts[0] not in SECTIONS:
        import difflib

        near = difflib.get_close_matches(parts[0], SECTIONS, n=1, cutoff=0.6)
        hint = f"; did you mean '{near[0]}'?" if near else ""
        raise SpecError(
            f"{where}: unknown key {key!r}: no design section [{parts[0]}]{hint} "
            f"(sections: {', '.join(SECTIONS)})"
        )
    if parts[0] in NAMED and len(parts) != 3:
        raise SpecError(
            f"{where}: unknown key {key!r}: an entry of [[{parts[0]}]] is named, e.g. "
            f"{parts[0]}.NAME.{'width' if parts[0] == 'channels' else 'length'}"
        )
    if not spec.strip():
        raise SpecError(f"{where}: empty range: no values after '='")
    if ".." in spec:
        values = _range(spec, where)
    else:
        items = _split(spec)
        if len(items) > MAX_POINTS:
            raise SpecError(
                f"{where}: {len(items):,} values on one axis; a grid has at most {MAX_POINTS:,}"
            )
        values = tuple(_item(p, where) for p in items)
    return Axis(key, values, text)


def grid_points(axes: Sequence[Axis]) -> list[tuple[Any, ...]]:
    """Every combination of the axes' values, the first axis varying slowest."""
    total = math.prod(len(a.values) for a in axes)
    if total > MAX_POINTS:
        raise SpecError(f"--vary: {total:,} grid points; at most {MAX_POINTS:,}")
    return list(itertools.product(*(a.values for a in axes)))


def with_values(data: Mapping[str, Any], keys: Sequence[str], values: Sequence[Any]) -> dict:
    """A copy of a parsed design with each dotted key set to its value (tables created as
    needed; tuples become lists). A value for one of ``tree.generations``,
    ``tree.bed_channels`` and ``tree.splits`` replaces the other two (all three say how the
    tree branches).

    >>> with_values({"tree": {"flow": "1 uL/min"}}, ["tree.flow"], ["2 uL/min"])
    {'tree': {'flow': '2 uL/min'}}
    >>> with_values({"tree": {"bed_channels": 32}}, ["tree.splits"], [(3, 2)])
    {'tree': {'splits': [3, 2]}}
    >>> with_values({"channels": [{"name": "c1", "width": "1 mm"}]}, ["channels.c1.width"],
    ...             ["2 mm"])
    {'channels': [{'name': 'c1', 'width': '2 mm'}]}
    """
    out = copy.deepcopy(dict(data))
    for key, value in zip(keys, values, strict=True):
        *path, last = key.split(".")
        table = out
        if path and path[0] in NAMED and isinstance(out.get(path[0]), list):
            table = out[path[0]][named_entry(out[path[0]], path[0], path[1], f"--vary {key}")]
            path = []
        for part in path:
            child = table.setdefault(part, {})
            if not isinstance(child, dict):
                raise SpecError(f"--vary {key}: {part} is not a table in the design file")
            table = child
        if path == ["tree"] and last in BRANCHING:
            for other in BRANCHING:
                table.pop(other, None)
        table[last] = list(value) if isinstance(value, tuple) else value
    return out


def design_text(value: Any) -> str:
    """A grid value exactly as it goes into the design, as one text (sweep.csv).

    >>> design_text(("40um", "100um")), design_text("23.3333333333 uL/min"), design_text(1.5)
    ('[40um, 100um]', '23.3333333333 uL/min', '1.5')
    """
    if isinstance(value, tuple | list):
        return "[" + ", ".join(design_text(v) for v in value) + "]"
    if isinstance(value, float):
        return f"{value:.12g}"
    return str(value)


def value_text(value: Any) -> str:
    """A grid value as one short text, for tables and axis labels, in 4 significant figures
    (:func:`chipflow.display.value_text`; the design gets the value itself).

    >>> value_text(("40um", "100um")), value_text("23.3333333333 uL/min"), value_text(16)
    ('[40um, 100um]', '23.33 uL/min', '16')
    """
    return display.value_text(value)
