"""Plausible ranges of every quantity a person gives chipflow, in one table.

A unit can be right and the number absurd: ``width = "1e30 um"`` is a length, and 1e24 m
passes the units boundary's 1e-60..1e60 cap, but no channel is wider than the Earth. Every
quantity read from a design file (:meth:`chipflow.spec.reader.Table.quantity`,
``quantities``, ``number``) or from the command line (:class:`chipflow.cli.common.QUANTITY`
and the whole-number options) is checked here, right after it is converted to SI, against
the first row of :data:`RANGES` that matches its kind of unit, its design-file section and
its key. A new key gets the row of its kind (the last row of each kind) without extra code;
a key that needs a range of its own gets a row here, in this one place.

A range bounds the magnitude: zero passes where the reader allows it (an open outlet at
0 Pa, no tubing), negative values where the reader allows them (a pump that withdraws, a
reservoir below its port) are judged by their size. A refusal is one line with the range::

    design.toml: channels[2].width: 1e+24 m is outside the plausible range of a channel
    width, 100 nm to 1 m (got '1e30 um'; see the limits page of the user guide)

The ranges are chipflow's choice: a factor of ten or more beyond anything a microfluidic
chip or its supply could be (the reason is given in each row), so that a real design never
meets one and a slip of the keyboard (a unit or an exponent off) always does. The user
guide's limits page (docs/guide/limits.rst) shows the same table; a test keeps the two
alike.

Examples
--------
>>> check_value(50e-6, "length", key="width", section="channels")
5e-05
>>> check_value(1e24, "length", key="width", section="channels", where="d.toml: width")
Traceback (most recent call last):
...
chipflow.errors.UnitError: d.toml: width: 1e+24 m is outside the plausible range of a channel \
width, 100 nm to 1 m (see the limits page of the user guide)
>>> check_value(2**64, "whole", key="seed", where="--seed")  # doctest: +ELLIPSIS
Traceback (most recent call last):
...
chipflow.errors.UnitError: --seed: 18446744073709551616 is outside the range of a random seed...
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

from chipflow.errors import UnitError

__all__ = ["Range", "RANGES", "range_for", "check_value", "rst_table", "SEED_MAX"]

#: Largest random seed: numpy's generators take any whole number >= 0, but 32 bits is what
#: every generator and every other tool takes, so a seed here can be reused anywhere.
SEED_MAX = 2**32 - 1


@dataclass(frozen=True)
class Range:
    """One row of the table.

    Attributes
    ----------
    kind : str
        Kind of unit (a key of :data:`chipflow.units.KINDS`), or ``"whole"`` / ``"number"``
        for plain whole numbers and numbers.
    keys : tuple of str
        Design-file keys and option names the row applies to (empty: any key of its kind).
    sections : tuple of str
        Design-file sections (``"chip"``, ``"channels"``, ...; ``""`` is the command line)
        the row applies to (empty: any).
    low, high : float
        Smallest and largest magnitude accepted, in SI units (``low`` applies to non-zero
        values).
    label : str
        What the quantity is, for the message.
    unit : str
        The unit the range is shown in.
    reason : str
        Why these bounds (shown in the user guide).
    exact : bool
        True: the value itself must lie within ``low..high`` (counts, seeds); False: its
        magnitude, where it is not zero.
    """

    kind: str
    keys: tuple[str, ...]
    sections: tuple[str, ...]
    low: float
    high: float
    label: str
    unit: str
    reason: str
    exact: bool = False

    def matches(self, kind: str, key: str, section: str) -> bool:
        return (
            self.kind == kind
            and (not self.keys or key in self.keys)
            and (not self.sections or section in self.sections)
        )

    def text(self) -> str:
        """``100 nm to 1 m``."""
        return f"{_show(self.low, self.unit)} to {_show(self.high, self.unit)}"


_WIDTHS = ("width", "widths", "trunk_width", "min_width", "max_width", "min_feature", "min_gap",
           "gap")  # fmt: skip
_DEPTHS = ("depth", "depths", "trunk_depth")
_LENGTHS = ("length", "lengths", "max_straight_length")
_SHEAR = ("shear", "shear_min", "shear_max")

#: The plausible ranges: the first matching row applies (specific rows first, then one row
#: per kind of unit that serves every other key of that kind).
RANGES: tuple[Range, ...] = (
    # -- lengths ------------------------------------------------------------------------------
    Range("length", ("width", "height"), ("chip",), 1e-3, 1.0, "chip side", "length",
          "a chip is at least a millimetre and at most a metre across (a 75 x 25 mm slide is "
          "typical); the drawing and its field solve grow with the chip"),
    Range("length", ("punch",), (), 1e-4, 0.02, "port punch diameter", "length",
          "biopsy punches for tubing run from 0.5 to 1.5 mm; 0.1 mm to 20 mm covers every "
          "drilled or punched port"),
    Range("length", ("width", "depth", "depths"), ("tolerances",), 1e-9, 1e-3,
          "fabrication tolerance", "length",
          "a mask bias or a mould depth error of a few micrometres is typical; a millimetre "
          "is beyond any process"),
    Range("length", ("grid",), (), 1e-9, 1e-3, "mask grid", "length",
          "GDSII resolves 1 nm; a grid coarser than a millimetre could not draw a channel"),
    Range("length", _DEPTHS, (), 1e-7, 0.1, "channel depth", "length",
          "soft lithography makes channels from about 1 um to 1 mm deep; 100 nm to 100 mm "
          "covers nanochannels and milled blocks"),
    Range("length", _WIDTHS, (), 1e-7, 1.0, "channel width", "length",
          "from nanochannels (100 nm) to a chamber as wide as the largest chip (1 m)"),
    Range("length", ("diameter", "tubing_diameter", "tubing_outer_diameter"), (), 1e-6, 0.05,
          "tube diameter", "length",
          "capillaries from a few micrometres to 50 mm hose"),
    Range("length", ("inlet_tubing", "outlet_tubing"), (), 1e-4, 100.0, "tubing length", "length",
          "a bench or an incubator feed-through needs a few metres at most; 100 m is a reel"),
    Range("length", _LENGTHS, ("tubes",), 1e-4, 100.0, "tubing length", "length",
          "a bench or an incubator feed-through needs a few metres at most; 100 m is a reel"),
    Range("length", _LENGTHS, (), 1e-7, 10.0, "channel length", "length",
          "a serpentine folds at most a few metres onto a chip; 100 nm is a short stub"),
    Range("length", ("head", "outlet_head"), (), 1e-6, 10.0, "liquid head", "length",
          "a reservoir stands millimetres to a metre above its port; 10 m of water is an "
          "atmosphere of pressure"),
    Range("length", ("roof_thickness",), (), 1e-7, 0.1, "roof thickness", "length",
          "a membrane of 100 nm to a 100 mm block"),
    Range("length", (), (), 1e-9, 10.0, "length", "length",
          "any other length on or around a chip: 1 nm to 10 m"),
    # -- flows and pressures ----------------------------------------------------------------
    Range("flow", (), (), 1e-15 / 60, 1.0 / 60_000, "flow rate", "flow",
          "from 1 pL/min (slower than any pump meters) to 1 L/min (beyond any pump for a chip)"),
    Range("pressure", _SHEAR, (), 1e-6, 1e4, "wall shear stress", "Pa",
          "cells feel 0.01-10 Pa; 1 uPa to 10 kPa covers every culture and blood flow"),
    Range("pressure", ("modulus", "tubing_modulus"), (), 1e3, 1e12, "elastic modulus", "Pa",
          "from soft gels (1 kPa) to steel (200 GPa)"),
    Range("pressure", (), (), 1e-6, 1e8, "pressure", "Pa",
          "bonded chips hold up to a few MPa; 100 MPa is beyond any fitting"),
    # -- the liquid ------------------------------------------------------------------------
    Range("viscosity", (), (), 1e-4, 1e3, "viscosity", "Pa*s",
          "liquids from 0.1 mPa s (hot water is 0.28) to 1000 Pa s (a polymer melt)"),
    Range("density", (), (), 100.0, 25_000.0, "density", "kg/m^3",
          "every liquid lies within 500-14,000 kg/m^3 (mercury)"),
    Range("temperature", (), (), 273.15, 373.15, "temperature", "degC",
          "liquid water at atmospheric pressure"),
    # -- time and rates ---------------------------------------------------------------------
    Range("time", (), (), 1e-6, 1e8, "time", "s",
          "1 us to three years: from a pulse to the longest culture"),
    Range("frequency", (), (), 1e-6, 1e5, "frequency", "Hz",
          "pumps and rockers run at mHz to kHz"),
    Range("velocity", (), (), 1e-12, 1e3, "velocity", "m/s",
          "any flow on a chip"),
    # -- areas and volumes -----------------------------------------------------------------
    Range("area", (), (), 1e-14, 1.0, "area", "m^2",
          "a reservoir or a channel cross-section, 0.01 um^2 to 1 m^2"),
    Range("volume", (), (), 1e-21, 1e-3, "volume", "volume",
          "a femtolitre bubble to a litre"),
    Range("compliance", (), (), 1e-30, 1e-3, "hydraulic compliance", "m^3/Pa",
          "anything a chip or its tubing can store"),
    # -- transport and culture ---------------------------------------------------------------
    Range("diffusivity", (), (), 1e-14, 1e-6, "diffusivity", "m^2/s",
          "proteins (1e-11) to gases in water (2e-9); 1e-14 to 1e-6 covers every solute"),
    Range("concentration", (), (), 1e-9, 1e5, "concentration", "mol/m^3",
          "nanomolar to pure substances"),
    Range("molar_rate", (), (), 1e-24, 1e-12, "uptake per cell", "mol/s",
          "cells use 1e-18 to 1e-15 mol/s of oxygen"),
    Range("permeability", (), (), 0.0, 1e-10, "gas permeability", "mol/(m*s*Pa)",
          "glass near 0, PDMS about 2.7e-13 (800 barrer); 1e-10 is far above any polymer"),
    Range("areal_density", (), (), 1.0, 1e12, "cell density", "1/m^2",
          "a confluent layer holds about 1e9 cells/m^2"),
    Range("angle", (), (), 1e-6, 2 * math.pi, "angle", "deg",
          "one turn"),
    Range("dimensionless", (), (), 0.0, 1e9, "plain number", "1",
          "fractions and factors"),
    # -- whole numbers ----------------------------------------------------------------------
    Range("whole", ("seed",), (), 0, SEED_MAX, "random seed", "1",
          "32 bits: every random generator takes it", exact=True),
    Range("whole", ("samples",), (), 1, 10_000_000, "sample count", "1",
          "memory and time stay bounded (an estimate is shown before a large run)", exact=True),
    Range("whole", ("generation",), (), 0, 64, "generation", "1",
          "a tree of 64 generations has more channels than any mask can hold", exact=True),
    Range("whole", ("workers",), (), 1, 1024, "worker count", "1",
          "local processes: one per CPU is the default", exact=True),
    Range("whole", (), (), 0, 2**31 - 1, "whole number", "1",
          "counts of things on a chip"),
    Range("number", (), (), 0.0, 1e12, "number", "1",
          "ratios and factors"),
)  # fmt: skip


def _show(value: float, unit: str) -> str:
    """A bound in its display unit: ``100 nm``, ``1 L/min``, ``10 kPa``, ``1,000 kg/m^3``."""
    if unit == "1":
        return f"{value:,}" if isinstance(value, int) else f"{value:g}"
    if unit == "degC":
        return f"{value - 273.15:g} degC"
    if unit == "deg":
        return f"{math.degrees(value):.3g} deg"
    base, factor = _DISPLAY.get(unit, (unit, 1.0))
    shown = value * factor
    if base in _PREFIXED:  # an SI prefix that puts the number between 1 and 1000
        for prefix, scale in _PREFIXES:
            if shown >= scale * (1 - 1e-12):
                return f"{shown / scale:.4g} {prefix}{base}"
    if shown == int(shown) and 1 <= shown < 1e7:
        return f"{shown:,.0f} {base}"
    return f"{shown:.3g} {base}"


#: Display units: (unit, factor from SI); those in _PREFIXED take an SI prefix.
_DISPLAY = {"length": ("m", 1.0), "flow": ("L/min", 6e4), "volume": ("L", 1e3)}
_PREFIXED = ("m", "L/min", "L", "Pa", "Pa*s", "Hz")
_PREFIXES = (("G", 1e9), ("M", 1e6), ("k", 1e3), ("", 1.0), ("m", 1e-3), ("u", 1e-6),
             ("n", 1e-9), ("p", 1e-12), ("f", 1e-15), ("a", 1e-18))  # fmt: skip


def range_for(kind: str, key: str = "", section: str = "") -> Range | None:
    """The row for a quantity of ``kind`` under ``key`` in ``section`` (None: unchecked).

    ``section`` is the design-file table the key sits in, without list indices
    (``"channels"`` for ``channels[3]``, ``"chip"``); ``""`` for the command line.

    >>> range_for("length", "width", "chip").label, range_for("length", "width").label
    ('chip side', 'channel width')
    """
    base = section.split(".")[0].split("[")[0]
    for row in RANGES:
        if row.matches(kind, key, base):
            return row
    return None


def check_value(
    value: float,
    kind: str,
    *,
    key: str = "",
    section: str = "",
    where: str = "",
    raw: object = None,
) -> float:
    """Refuse a value outside its plausible range; return it unchanged.

    Parameters
    ----------
    value : float
        The value in SI units (or a plain number for ``"whole"`` and ``"number"``).
    kind, key, section : str
        Which row applies (see :func:`range_for`).
    where : str
        File and key, or option, for the message.
    raw : object, optional
        The value as given, quoted in the message.

    Raises
    ------
    UnitError
        One line: where, the value, what it is and its range.
    """
    row = range_for(kind, key, section)
    if row is None:
        return value
    if row.exact:  # counts and seeds: the range itself
        inside = row.low <= value <= row.high
    else:  # the magnitude; zero and the sign are the reader's business
        inside = value == 0 or row.low <= abs(value) <= row.high
    if inside:
        return value
    place = f"{where}: " if where else ""
    shown = str(value) if kind == "whole" else _value_text(value, row)
    given = "" if raw is None or str(raw) == shown else f"got {str(raw)[:60]!r}; "
    plausible = "range" if kind == "whole" else "plausible range"
    raise UnitError(
        f"{place}{shown} is outside the {plausible} of a {row.label}, {row.text()} "
        f"({given}see the limits page of the user guide)"
    )


def _value_text(value: float, row: Range) -> str:
    from chipflow.units import KINDS

    if row.kind in ("number", "dimensionless"):
        return f"{value:g}"
    return f"{value:.4g} {KINDS[row.kind].si_unit.replace('**', '^')}"


def rows(kinds: Iterable[str] | None = None) -> list[Range]:
    """The rows of the table (of ``kinds`` only, when given), for documentation."""
    wanted = None if kinds is None else set(kinds)
    return [r for r in RANGES if wanted is None or r.kind in wanted]


def rst_table() -> str:
    """The table as a reStructuredText list table (the user guide's limits page holds it;
    a test keeps the two alike)."""
    lines = [
        ".. list-table::",
        "   :header-rows: 1",
        "   :widths: 18 30 20 32",
        "",
        "   * - quantity",
        "     - keys and options",
        "     - range",
        "     - why",
    ]
    for r in RANGES:
        keys = ", ".join(f"``{k}``" for k in r.keys) if r.keys else "any other"
        if r.sections:
            keys += " in " + ", ".join(f"``[{s}]``" for s in r.sections)
        kind = "whole number" if r.kind == "whole" else r.kind.replace("_", " ")
        lines += [
            f"   * - {r.label}",
            f"     - {keys} ({kind})",
            f"     - {r.text()}" + (" (the value itself)" if r.exact else ""),
            f"     - {r.reason}",
        ]
    return "\n".join(lines) + "\n"
