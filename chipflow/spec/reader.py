"""Reading design files: TOML tables with key paths, units and clear messages.

A :class:`Table` wraps one TOML table together with the file it came from and its key path, so
that every message can say exactly where the problem is::

    designs/liver.toml: tree.bed.length: missing unit: expected a length such as '50 um', got 800

Each section parser asks a ``Table`` for the values it needs (``quantity``, ``number``,
``choice``, ...) and finally calls :meth:`Table.only` with the keys it knows, so that a typo is
an error with a "did you mean" suggestion rather than a silently different chip.
"""

from __future__ import annotations

import difflib
import math
import tomllib
import unicodedata
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from chipflow.errors import SpecError
from chipflow.limits import check_value
from chipflow.units import to_si

__all__ = [
    "Table",
    "read_design_file",
    "read_design_bytes",
    "parse_design_text",
    "check_text",
    "REQUIRED",
    "MAX_NAME_LENGTH",
    "MAX_TEXT_LENGTH",
    "MAX_DESIGN_BYTES",
]

#: Longest name of a design (or fluid) [characters]: it becomes file names and figure titles.
MAX_NAME_LENGTH = 100
#: Longest description [characters].
MAX_TEXT_LENGTH = 2000
#: Largest design file read [bytes]; real ones are a few kB.
MAX_DESIGN_BYTES = 1_000_000
#: Deepest bracket nesting of a design file (real ones nest 3 deep).
MAX_NESTING = 100


class _Required:
    def __repr__(self) -> str:
        return "REQUIRED"


#: Marker for a key without a default.
REQUIRED: Any = _Required()


@dataclass(frozen=True)
class Table:
    """One table of a design file.

    Attributes
    ----------
    data : Mapping
        The parsed TOML table.
    source : str
        The file name shown in messages.
    path : str
        Dotted key path of this table inside the file ("" for the top level).
    """

    data: Mapping[str, Any]
    source: str = "<design>"
    path: str = ""

    # -- locating -------------------------------------------------------------------------
    @property
    def file_label(self) -> str:
        """``design file <name>``: how results cite a value taken from this file (the base
        name only, so that results do not depend on where the file sits)."""
        return f"design file {Path(self.source).name}"

    def where(self, key: str | None = None) -> str:
        """``file: key.path`` for messages."""
        parts = [p for p in (self.path, key) if p]
        return f"{self.source}: {'.'.join(parts)}" if parts else self.source

    def error(self, key: str | None, message: str) -> SpecError:
        """A :class:`SpecError` located at ``key`` of this table."""
        return SpecError(f"{self.where(key)}: {message}")

    def __contains__(self, key: str) -> bool:
        return key in self.data

    # -- structure ------------------------------------------------------------------------
    def only(self, allowed: Iterable[str]) -> None:
        """Raise on any key that is not in ``allowed``, suggesting the nearest valid one."""
        allowed = list(allowed)
        for key in self.data:
            if key not in allowed:
                near = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
                hint = f"; did you mean '{near[0]}'?" if near and len(key) < 100 else ""
                valid = ", ".join(sorted(allowed)) or "(none)"
                shown = key if len(key) <= 60 else f"{key[:40]!r}... ({len(key)} characters)"
                raise self.error(shown, f"unknown key{hint} (valid keys here: {valid})")

    def table(self, key: str, default: Any = REQUIRED) -> Table | None:
        """A sub-table; ``default`` (usually ``None``) when absent and not required."""
        if key not in self.data:
            return self._get(key, default)
        value = self.data[key]
        if not isinstance(value, Mapping):
            raise self.error(key, f"expected a table [{self._child(key)}], got {_show(value)}")
        return Table(value, self.source, self._child(key))

    def tables(self, key: str, default: Any = REQUIRED) -> list[Table]:
        """An array of tables ``[[key]]``; ``default`` when absent."""
        if key not in self.data:
            return self._get(key, default)
        value = self.data[key]
        if not isinstance(value, list) or not all(isinstance(v, Mapping) for v in value):
            raise self.error(key, f"expected a list of tables [[{self._child(key)}]]")
        return [Table(v, self.source, f"{self._child(key)}[{i}]") for i, v in enumerate(value)]

    # -- values ---------------------------------------------------------------------------
    def quantity(
        self,
        key: str,
        kind: str,
        default: Any = REQUIRED,
        *,
        positive: bool = True,
        minimum: float | None = None,
        maximum: float | None = None,
    ) -> float:
        """A quantity with units, converted to SI (see :func:`chipflow.units.to_si`).

        ``positive`` rejects zero and negative values; ``minimum``/``maximum`` are SI bounds.
        Every value is also held to its plausible range (:mod:`chipflow.limits`).
        """
        if key not in self.data:
            return self._get(key, default)
        value = self.data[key]
        si = self._plausible(key, kind, value, to_si(value, kind, where=self.where(key)))
        return self._bounded(key, value, si, positive, minimum, maximum)

    def quantities(self, key: str, kind: str, default: Any = REQUIRED, **bounds: Any) -> list:
        """A list of quantities (or a single one, returned as a one-element list)."""
        if key not in self.data:
            return self._get(key, default)
        value = self.data[key]
        items = value if isinstance(value, list) else [value]
        if not items:
            raise self.error(key, "expected at least one value")
        out = []
        for i, item in enumerate(items):
            where = f"{self.where(key)}[{i}]" if isinstance(value, list) else self.where(key)
            si = check_value(
                to_si(item, kind, where=where),
                kind,
                key=key,
                section=self.path,
                where=where,
                raw=item,
            )
            out.append(self._bounded(key, item, si, **_bounds(bounds)))
        return out

    def number(
        self,
        key: str,
        default: Any = REQUIRED,
        *,
        integer: bool = False,
        minimum: float | None = None,
        maximum: float | None = None,
    ) -> float | int:
        """A plain number (no unit), optionally a whole number, within bounds (and within its
        plausible range, :mod:`chipflow.limits`)."""
        if key not in self.data:
            return self._get(key, default)
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, int | float):
            kind = "a whole number" if integer else "a number"
            raise self.error(key, f"expected {kind}, got {_show(value)}")
        if integer and not isinstance(value, int):
            raise self.error(key, f"expected a whole number, got {_show(value)}")
        if not math.isfinite(value):
            raise self.error(key, f"expected a finite number, got {_show(value)}")
        value = self._bounded(key, value, value, False, minimum, maximum)
        kind = "whole" if integer else "number"
        return check_value(value, kind, key=key, section=self.path, where=self.where(key))

    def string(self, key: str, default: Any = REQUIRED) -> str:
        """A text value."""
        if key not in self.data:
            return self._get(key, default)
        value = self.data[key]
        if not isinstance(value, str):
            raise self.error(key, f"expected text in quotes, got {_show(value)}")
        return value

    def label(self, key: str, default: Any = REQUIRED, *, max_length: int = MAX_NAME_LENGTH) -> str:
        """A short text that names something (a design, a fluid): one line, printable, at most
        ``max_length`` characters, not blank.

        >>> Table({"name": "a\\x00b"}, "d.toml").label("name")  # doctest: +ELLIPSIS
        Traceback (most recent call last):
        ...
        chipflow.errors.SpecError: d.toml: name: contains a control character (U+0000); ...
        """
        if key not in self.data:
            return self._get(key, default)
        value = self.string(key)
        check_text(value, self.where(key), max_length=max_length, multiline=False)
        return value

    def text(self, key: str, default: Any = REQUIRED) -> str:
        """A free text (a description): printable, line breaks allowed, at most
        :data:`MAX_TEXT_LENGTH` characters."""
        if key not in self.data:
            return self._get(key, default)
        value = self.string(key)
        if value:
            check_text(value, self.where(key), max_length=MAX_TEXT_LENGTH, multiline=True)
        return value

    def choice(self, key: str, choices: Iterable[str], default: Any = REQUIRED) -> str:
        """A text value from a fixed set, with a suggestion on a near miss."""
        choices = list(choices)
        if key not in self.data:
            return self._get(key, default)
        value = self.string(key)
        if value in choices:
            return value
        near = difflib.get_close_matches(str(value), choices, n=1, cutoff=0.6)
        hint = f"; did you mean '{near[0]}'?" if near else ""
        raise self.error(key, f"unknown value {value!r}{hint} (valid: {', '.join(choices)})")

    def boolean(self, key: str, default: Any = REQUIRED) -> bool:
        """A true/false value."""
        if key not in self.data:
            return self._get(key, default)
        value = self.data[key]
        if not isinstance(value, bool):
            raise self.error(key, f"expected true or false, got {_show(value)}")
        return value

    # -- helpers --------------------------------------------------------------------------
    def _child(self, key: str) -> str:
        return f"{self.path}.{key}" if self.path else key

    def _get(self, key: str, default: Any) -> Any:
        if key in self.data:
            return self.data[key]
        if default is REQUIRED:
            raise self.error(key, "missing required key")
        return default

    def _plausible(self, key: str, kind: str, raw: Any, si: float) -> float:
        return check_value(si, kind, key=key, section=self.path, where=self.where(key), raw=raw)

    def _bounded(self, key, raw, si, positive=True, minimum=None, maximum=None):
        if positive and not si > 0:
            raise self.error(key, f"must be greater than zero, got {_show(raw)}")
        if minimum is not None and si < minimum:
            raise self.error(key, f"must be at least {minimum:g} (SI), got {_show(raw)}")
        if maximum is not None and si > maximum:
            raise self.error(key, f"must be at most {maximum:g} (SI), got {_show(raw)}")
        return si


def check_text(
    value: str, where: str, *, max_length: int = MAX_NAME_LENGTH, multiline: bool = False
) -> str:
    """Refuse text that is blank, too long or holds control characters (a SpecError naming
    ``where``); return it unchanged."""
    if not value.strip():
        raise SpecError(f"{where}: is blank; give some text")
    if len(value) > max_length:
        raise SpecError(
            f"{where}: {len(value)} characters is too long (at most {max_length}): "
            f"{value[:40]!r}..."
        )
    allowed = "\n\t" if multiline else ""
    for ch in value:
        if ch not in allowed and unicodedata.category(ch) in ("Cc", "Cf", "Cs", "Co", "Zl", "Zp"):
            raise SpecError(
                f"{where}: contains a control character (U+{ord(ch):04X}); use printable text"
            )
    return value


def _bounds(bounds: dict) -> dict:
    return {k: bounds[k] for k in ("positive", "minimum", "maximum") if k in bounds}


def _show(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def parse_design_text(text: str, source: str = "<design>") -> Table:
    """Parse TOML text into the top-level :class:`Table`.

    Examples
    --------
    >>> top = parse_design_text('[tree]\\nflow = "5 uL/min"', "demo.toml")
    >>> top.table("tree").quantity("flow", "flow")  # doctest: +ELLIPSIS
    8.333...e-11
    >>> parse_design_text("flow = ", "demo.toml")
    Traceback (most recent call last):
    ...
    chipflow.errors.SpecError: demo.toml: not valid TOML: Invalid value (at end of document)
    """
    if text.startswith("\ufeff"):
        text = text[1:]  # a byte-order mark, as some editors write: harmless
    depth = _nesting(text)
    if depth > MAX_NESTING:
        raise SpecError(
            f"{source}: not a design file: brackets nested {depth} deep (at most {MAX_NESTING})"
        )
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{source}: not valid TOML: {exc}") from None
    except (ValueError, RecursionError, MemoryError) as exc:  # e.g. a 5000-digit integer
        why = str(exc).split(";")[0] if isinstance(exc, ValueError) else type(exc).__name__
        raise SpecError(f"{source}: not a usable design file: {why}") from None
    return Table(data, source, "")


def _nesting(text: str) -> int:
    """About the bracket nesting of TOML text, in one vectorised pass (brackets inside strings
    and comments count too; a deeper real nesting is still caught by the parser's recursion
    limit).

    >>> _nesting("a = [[1], [2]]"), _nesting("[x]\\nb = {c = [1]}")
    (2, 2)
    """
    import numpy as np

    raw = np.frombuffer(text.encode("utf-8"), dtype=np.uint8)
    step = np.isin(raw, (ord("["), ord("{"))).astype(np.int32)
    step -= np.isin(raw, (ord("]"), ord("}")))
    return int(np.cumsum(step).max(initial=0))


def read_design_file(path: str | Path) -> Table:
    """Read and parse a design file, with a clear error for missing, binary or broken files."""
    return parse_design_text(read_design_bytes(path).decode("utf-8-sig"), str(path))


def read_design_bytes(path: str | Path) -> bytes:
    """The bytes of a design file, checked to be non-empty UTF-8 text (else a SpecError)."""
    path = Path(path)
    if path.is_dir():
        raise SpecError(f"{path}: is a folder, expected a design file (.toml)")
    from chipflow.spec.files import read_capped

    raw = read_capped(path, MAX_DESIGN_BYTES, "design file")
    if not raw.strip():
        raise SpecError(f"{path}: the design file is empty")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise SpecError(f"{path}: not a text file (expected UTF-8 TOML)") from None
    if "\x00" in text:
        raise SpecError(f"{path}: not a text file (expected UTF-8 TOML)")
    return raw
