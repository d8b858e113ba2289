"""The table of cell types and their floor wall-shear windows (``chipflow/data/cell_types.toml``).

Every row carries the citation of its window; rows taken from memory say so in their
``confidence`` field, which the report repeats. A design can override the window of its cell
type (``[culture] shear_min`` / ``shear_max``, see :mod:`chipflow.spec.culture`).

Examples
--------
>>> cell = cell_type("endothelial")
>>> cell.window().min, cell.window().max
(0.5, 1.0)
>>> cell_type("hepatocite")  # doctest: +ELLIPSIS
Traceback (most recent call last):
...
chipflow.errors.SpecError: unknown cell type 'hepatocite'; did you mean 'hepatocyte'? (known: ...)
"""

from __future__ import annotations

import difflib
import functools
import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from importlib import resources
from typing import Any

from chipflow.errors import SpecError
from chipflow.spec.reader import Table

__all__ = [
    "CellType",
    "ShearWindow",
    "cell_types",
    "cell_type",
    "parse_cell_types",
    "DEFAULT_O2_CONSUMPTION",
    "DEFAULT_O2_SOURCE",
]

#: Oxygen uptake per cell used when the cell type has none of its own [mol/s]: the hepatocyte
#: value of Sci Rep 2017;7:42113, Table 1. Hepatocytes are among the hungriest cultured cells
#: (uptake spans < 1 to > 350 amol/s per cell, Wagner, Venkataraman & Buettner 2011), so this is
#: an assumption on the cautious side for most other cells.
DEFAULT_O2_CONSUMPTION = 4.8e-17
DEFAULT_O2_SOURCE = (
    "assumption: hepatocyte uptake 4.8e-17 mol/cell/s, Sci Rep 2017;7:42113 Table 1 "
    "(cultured cells span < 1 to > 350 amol/s, Wagner, Venkataraman & Buettner 2011)"
)

_ROW_KEYS = (
    "label",
    "shear_min",
    "shear_max",
    "source",
    "confidence",
    "o2_consumption",
    "o2_source",
    "o2_critical",
    "o2_critical_source",
    "aliases",
    "oscillatory_shear_min",
    "oscillatory_shear_max",
    "oscillatory_source",
)


def _key(name: str) -> str:
    """A cell-type name as looked up: lower case, spaces and underscores as hyphens.

    >>> _key("HUVEC"), _key("Mouse_ESC"), _key("  primary  hepatocytes ")
    ('huvec', 'mouse-esc', 'primary-hepatocytes')
    """
    return "-".join(name.strip().lower().replace("_", " ").split())


@dataclass(frozen=True)
class ShearWindow:
    """The floor wall-shear window a culture should see.

    Attributes
    ----------
    cell_type : str
        Cell type name (or a description of an override).
    min, max : float
        Lower and upper bound of the floor wall shear stress [Pa].
    source : str
        Citation of the window (or "design file" for an override).
    oscillatory : ShearWindow or None
        A window for oscillating flow (checked on the time-averaged floor-shear magnitude of
        a flow whose oscillatory shear index is high, see :mod:`chipflow.operation.run`), when
        the cell-type table gives one; None otherwise: the window above was measured in
        steady flow and does not apply to oscillating flow.
    """

    cell_type: str
    min: float
    max: float
    source: str
    oscillatory: ShearWindow | None = None

    @property
    def text(self) -> str:
        """The window in words: "0.5-1 Pa", "at most 2 Pa" (no lower bound: ``min`` is 0) or
        "at least 0.5 Pa" (no upper bound: ``max`` is infinite).

        >>> ShearWindow("x", 0.0, 2.0, "").text, ShearWindow("x", 0.5, math.inf, "").text
        ('at most 2 Pa', 'at least 0.5 Pa')
        """
        if math.isinf(self.max):
            return f"at least {self.min:.3g} Pa"
        if self.min <= 0.0:
            return f"at most {self.max:.3g} Pa"
        return f"{self.min:.3g}-{self.max:.3g} Pa"

    def to_dict(self) -> dict[str, Any]:
        """JSON-able; a missing bound is None (``oscillatory`` only when there is one)."""
        out = {
            "cell_type": self.cell_type,
            "min": self.min if self.min > 0.0 else None,
            "max": self.max if math.isfinite(self.max) else None,
            "text": self.text,
            "source": self.source,
        }
        if self.oscillatory is not None:
            out["oscillatory"] = self.oscillatory.to_dict()
        return out


@dataclass(frozen=True)
class CellType:
    """One row of the cell-type table.

    Attributes
    ----------
    name : str
        Key used in design files ("endothelial", "hepatocyte", ...).
    label : str
        Readable name for reports.
    shear_min, shear_max : float
        Floor wall-shear window [Pa].
    source : str
        Citation of the window.
    confidence : str
        How sure the table is of the window ("published range", "from memory, ...").
    oscillatory : tuple of (float, float, str) or None
        A floor-shear window for oscillating flow [Pa] with its citation, when the table
        gives one (``oscillatory_shear_min``, ``oscillatory_shear_max``,
        ``oscillatory_source``).
    o2_consumption : float or None
        Oxygen uptake per cell [mol/s], when known.
    o2_source : str
        Citation of ``o2_consumption`` ("" when unknown).
    o2_critical : float or None
        Floor oxygen below which the cells count as hypoxic [mol/m^3], when known.
    o2_critical_source : str
        Citation of ``o2_critical`` ("" when unknown).
    aliases : tuple of str
        Other names the row is found by (e.g. ``HUVEC`` for ``endothelial``).
    """

    name: str
    label: str
    shear_min: float
    shear_max: float
    source: str
    confidence: str = ""
    o2_consumption: float | None = None
    o2_source: str = ""
    aliases: tuple[str, ...] = ()
    oscillatory: tuple[float, float, str] | None = None
    o2_critical: float | None = None
    o2_critical_source: str = ""

    def window(self) -> ShearWindow:
        """The cited shear window of this cell type (with its oscillatory window, if any)."""
        source = self.source
        if self.confidence and self.confidence != "published range":
            source = f"{source}; {self.confidence}"
        oscillatory = None
        if self.oscillatory is not None:
            low, high, cited = self.oscillatory
            oscillatory = ShearWindow(self.name, low, high, cited)
        return ShearWindow(self.name, self.shear_min, self.shear_max, source, oscillatory)


def parse_cell_types(
    data: Mapping[str, Any], source: str = "cell_types.toml"
) -> dict[str, CellType]:
    """Validate a parsed cell-type table: units on every window, a citation on every row.

    Raises
    ------
    SpecError
        On a row without a ``source``, a window without units, ``shear_min >= shear_max``, or an
        unknown key.

    Examples
    --------
    >>> parse_cell_types({"x": {"label": "x", "shear_min": "0.1 Pa", "shear_max": "1 Pa"}})
    Traceback (most recent call last):
    ...
    chipflow.errors.SpecError: cell_types.toml: x.source: missing required key
    """
    top = Table(data, source, "")
    rows: dict[str, CellType] = {}
    for name in data:
        row = top.table(name)
        row.only(_ROW_KEYS)
        cited = row.string("source")
        if not cited.strip():
            raise row.error("source", "every cell type needs the citation of its shear window")
        low = row.quantity("shear_min", "pressure")
        high = row.quantity("shear_max", "pressure")
        if not low < high:
            raise row.error("shear_max", f"must be greater than shear_min ({low:g} Pa)")
        o2 = row.quantity("o2_consumption", "molar_rate", None)
        o2_source = row.string("o2_source", "")
        if o2 is not None and not o2_source.strip():
            raise row.error("o2_source", "an oxygen uptake needs its citation")
        critical = row.quantity("o2_critical", "concentration", None)
        critical_source = row.string("o2_critical_source", "")
        if critical is not None and not critical_source.strip():
            raise row.error("o2_critical_source", "a critical oxygen needs its citation")
        aliases = data[name].get("aliases", [])
        if not isinstance(aliases, list) or not all(isinstance(a, str) for a in aliases):
            raise row.error("aliases", 'expected a list of names, e.g. ["HUVEC"]')
        rows[name] = CellType(
            name,
            row.string("label", name),
            low,
            high,
            cited,
            row.string("confidence", ""),
            o2,
            o2_source,
            tuple(aliases),
            _oscillatory(row),
            critical,
            critical_source,
        )
    return rows


def _oscillatory(row: Table) -> tuple[float, float, str] | None:
    """The optional oscillatory window of a row: both bounds and a citation, or none."""
    keys = ("oscillatory_shear_min", "oscillatory_shear_max", "oscillatory_source")
    given = [k for k in keys if k in row]
    if not given:
        return None
    missing = [k for k in keys if k not in row]
    if missing:
        raise row.error(missing[0], "an oscillatory window needs both bounds and its citation")
    low = row.quantity("oscillatory_shear_min", "pressure")
    high = row.quantity("oscillatory_shear_max", "pressure")
    if not low < high:
        raise row.error("oscillatory_shear_max", f"must be greater than {low:g} Pa")
    cited = row.string("oscillatory_source")
    if not cited.strip():
        raise row.error("oscillatory_source", "an oscillatory window needs its citation")
    return low, high, cited


@functools.lru_cache(maxsize=1)
def cell_types() -> dict[str, CellType]:
    """The bundled cell-type table, by name (read once)."""
    text = resources.files("chipflow").joinpath("data/cell_types.toml").read_text("utf-8")
    return parse_cell_types(tomllib.loads(text), "chipflow/data/cell_types.toml")


def cell_type(name: str, *, where: str = "") -> CellType:
    """Look a cell type up by name or alias (any case; spaces, hyphens and underscores
    alike), suggesting the nearest name on a miss.

    >>> cell_type("HUVEC").name, cell_type("primary hepatocytes").name
    ('endothelial', 'hepatocyte')

    Parameters
    ----------
    name : str
        Cell type name as written in a design file.
    where : str, optional
        File and key the name came from, quoted in the error message.
    """
    table = cell_types()
    if name in table:
        return table[name]
    names = {_key(n): row for n, row in table.items()}
    names.update({_key(a): row for row in table.values() for a in row.aliases})
    if _key(name) in names:
        return names[_key(name)]
    near = difflib.get_close_matches(name, list(table), n=1, cutoff=0.6)
    hint = f"; did you mean '{near[0]}'?" if near else ""
    place = f"{where}: " if where else ""
    known = ", ".join(sorted(table))
    raise SpecError(f"{place}unknown cell type {name!r}{hint} (known: {known})")
