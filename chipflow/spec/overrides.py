"""``--set KEY=VALUE``: a design-file value changed from the command line, in the file's text.

A setting edits the design text itself: it replaces the value of the key in its table (keeping
the line's comment), adds the key to its table, or adds the table at the end. The build then
reads the edited text, so ``chipflow build design.toml --set tree.flow=8uL/min`` gives the same
bytes as building the file with that value edited by hand: the same results, masks and
report, and the same design hash (the SHA-256 of the edited text). Keys are dotted as in
``chipflow sweep --vary`` (``tree.flow``, ``fabrication.depths``, ``culture.cell_type``; a
top-level key such as ``name`` has no dot). An entry of an array of tables is reached by its
name (:data:`NAMED`): ``regions.liver.flow_fraction``, ``channels.feed.width``,
``ports.inlet.flow`` (a port by its node).

A value is read as TOML when it is TOML (``16``, ``0.5``, ``true``, ``"8 uL/min"``,
``["50 um", "100 um"]``); otherwise as text (``8uL/min``, ``area-growth``), and a list in
brackets as a list of such values (``[50um, 100um]``).

Examples
--------
>>> text = '[tree]\\nflow = "12 uL/min"   # total\\nbed_channels = 32\\n'
>>> print(apply_settings(text, [parse_setting("tree.flow=8uL/min")]), end="")
[tree]
flow = "8uL/min"   # total
bed_channels = 32
>>> print(apply_settings(text, [parse_setting("bed.gap=150um")]), end="")
[tree]
flow = "12 uL/min"   # total
bed_channels = 32
<BLANKLINE>
[bed]
gap = "150um"
>>> text = '[[regions]]\\nname = "a"\\ngap = "100 um"\\n[[regions]]\\nname = "b"\\n'
>>> print(apply_settings(text, [parse_setting("regions.b.gap=150um")]), end="")
[[regions]]
name = "a"
gap = "100 um"
[[regions]]
name = "b"
gap = "150um"
"""

from __future__ import annotations

import math
import re
import tomllib
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from chipflow.errors import SpecError

__all__ = ["Setting", "parse_setting", "toml_value", "apply_settings", "NAMED", "named_entry"]

#: Arrays of tables whose entries a dotted key reaches by name: the array, and the key that
#: names an entry (``regions.NAME.KEY``, ``channels.NAME.KEY``, ``ports.NODE.KEY``).
NAMED = {"regions": "name", "channels": "name", "tubes": "name", "chambers": "name",
         "nodes": "name", "ports": "node", "compliances": "node"}  # fmt: skip

_BARE = re.compile(r"^[A-Za-z0-9_-]+$")
_HEADER = re.compile(r"^\s*\[(?!\[)\s*([A-Za-z0-9_.\s-]+?)\s*\]\s*(#.*)?$")
_ARRAY_HEADER = re.compile(r"^\s*\[\[\s*([A-Za-z0-9_.\s-]*?)\s*\]\]\s*(#.*)?$|^\s*\[\[")


@dataclass(frozen=True)
class Setting:
    """One ``--set KEY=VALUE``.

    Attributes
    ----------
    key : tuple of str
        The dotted key's parts, e.g. ``("tree", "flow")``.
    value : object
        The value as it goes into the design (text, number, boolean or a list of them).
    text : str
        The option as given, for messages.
    """

    key: tuple[str, ...]
    value: Any
    text: str


def _value(raw: str, where: str) -> Any:
    raw = raw.strip()
    if not raw:
        raise SpecError(f"{where}: no value after '=' (e.g. tree.flow=8uL/min)")
    try:
        value = tomllib.loads(f"v = {raw}")["v"]
    except tomllib.TOMLDecodeError:
        value = None
    else:
        if isinstance(value, bool | int | str) or (
            isinstance(value, float) and math.isfinite(value)
        ):
            return value
        if isinstance(value, list) and all(isinstance(v, bool | int | float | str) for v in value):
            return value
    if raw.startswith("[") and raw.endswith("]"):
        inner = [p for p in raw[1:-1].split(",") if p.strip()]
        if not inner:
            raise SpecError(f"{where}: empty list []")
        return [_value(p, where) for p in inner]
    if any(c in raw for c in "[]{}\"'\n"):
        raise SpecError(f"{where}: {raw!r} is not a value (e.g. 8uL/min, 16, true, [50um, 100um])")
    return raw


def parse_setting(text: str) -> Setting:
    """Parse one ``KEY=VALUE`` option (see the module notes).

    >>> parse_setting("tree.flow=8uL/min")
    Setting(key=('tree', 'flow'), value='8uL/min', text='tree.flow=8uL/min')
    >>> parse_setting("fabrication.depths=[50um, 100um]").value, parse_setting("x.n=16").value
    (['50um', '100um'], 16)
    >>> parse_setting("tree flow")
    Traceback (most recent call last):
    ...
    chipflow.errors.SpecError: --set 'tree flow': expected KEY=VALUE, e.g. tree.flow=8uL/min
    """
    where = f"--set {text!r}"
    key, sep, raw = text.partition("=")
    parts = tuple(p.strip() for p in key.strip().split("."))
    if not sep or not key.strip():
        raise SpecError(f"{where}: expected KEY=VALUE, e.g. tree.flow=8uL/min")
    if not all(_BARE.match(p) for p in parts):
        raise SpecError(
            f"{where}: {key.strip()!r} is not a key: give SECTION.KEY (letters, digits, '_' "
            "and '-'), e.g. tree.flow"
        )
    return Setting(parts, _value(raw, where), text)


def toml_value(value: Any) -> str:
    """A value as TOML text.

    >>> toml_value("8uL/min"), toml_value(16), toml_value(True), toml_value(["50 um", 1.5])
    ('"8uL/min"', '16', 'true', '["50 um", 1.5]')
    """
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    text = str(value)
    if any(ord(c) < 32 for c in text):
        raise SpecError(f"--set: {text!r} holds control characters")
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _value_end(text: str, start: int) -> int:
    """Where the TOML value that starts at ``text[start]`` ends (before any comment)."""
    depth, i, n = 0, start, len(text)
    while i < n:
        c = text[i]
        if c in "\"'":
            quote = text[i : i + 3] if text[i : i + 3] in ('"""', "'''") else c
            i += len(quote)
            while i < n and text[i : i + len(quote)] != quote:
                i += 2 if (c == '"' and text[i] == "\\") else 1
            i += len(quote)
            continue
        if c in "[{":
            depth += 1
        elif c in "]}":
            depth -= 1
        elif c == "#" or (c in "\r\n" and depth <= 0):
            if c == "#" and depth > 0:  # a comment inside a multi-line array
                while i < n and text[i] not in "\r\n":
                    i += 1
                continue
            break
        i += 1
    end = i
    while end > start and text[end - 1] in " \t":
        end -= 1
    return end


def _tables(lines: list[str]) -> list[tuple[tuple[Any, ...] | None, int, int]]:
    """(table path, first line, end line) of every table: the top level first (path ``()``);
    the k-th entry of an array of tables ``[[name]]`` has the path ``(name, k)`` (None for an
    array header not understood)."""
    out: list[tuple[tuple[Any, ...] | None, int, int]] = []
    path: tuple[Any, ...] | None = ()
    start = 0
    seen: dict[str, int] = {}
    for i, line in enumerate(lines):  # one pass over the design's lines
        header = _HEADER.match(line)
        array = None if header else _ARRAY_HEADER.match(line)
        if header or array:
            out.append((path, start, i))
            if header:
                path = tuple(p.strip() for p in header.group(1).split("."))
            elif array.group(1):
                name = array.group(1)
                path = (name, seen.get(name, 0))
                seen[name] = path[1] + 1
            else:
                path = None
            start = i
    out.append((path, start, len(lines)))
    return out


def named_entry(entries: Any, section: str, name: str, where: str) -> int:
    """The index of the entry of ``[[section]]`` named ``name`` (by :data:`NAMED`); a
    SpecError naming the known entries if there is none."""
    field = NAMED[section]
    if isinstance(entries, list):
        for k, entry in enumerate(entries):  # a design's entries: a few dozen
            if isinstance(entry, dict) and entry.get(field) == name:
                return k
    known = ", ".join(
        str(e.get(field)) for e in (entries if isinstance(entries, list) else [])
        if isinstance(e, dict)
    )  # fmt: skip
    raise SpecError(
        f"{where}: no [[{section}]] entry with {field} {name!r} (known: {known or 'none'})"
    )


def _table_of(data: dict[str, Any], setting: Setting) -> tuple[tuple[Any, ...], str]:
    """The path of the table a setting writes to (an array entry as ``(section, index)``)
    and its key."""
    *table, leaf = setting.key
    if len(table) == 2 and table[0] in NAMED and isinstance(data.get(table[0]), list):
        where = f"--set {setting.text!r}"
        return (table[0], named_entry(data[table[0]], table[0], table[1], where)), leaf
    return tuple(table), leaf


def _set_one(text: str, setting: Setting, data: dict[str, Any]) -> str:
    newline = "\r\n" if "\r\n" in text else "\n"
    lines = text.splitlines(keepends=True)
    if lines and not lines[-1].endswith(("\n", "\r")):
        lines[-1] += newline
    table, leaf = _table_of(data, setting)
    assignment = re.compile(rf"^(\s*){re.escape(leaf)}\s*=\s*")
    entry = f"{leaf} = {toml_value(setting.value)}{newline}"
    for path, first, end in _tables(lines):
        if path != table:
            continue
        body = first if not table else first + 1
        for i in range(body, end):  # the table's lines
            match = assignment.match(lines[i])
            if match is None:
                continue
            rest = "".join(lines[i:])
            value_end = _value_end(rest, match.end())
            edited = rest[: match.end()] + toml_value(setting.value) + rest[value_end:]
            return "".join(lines[:i]) + edited
        last = max(
            (
                i
                for i in range(body, end)
                if lines[i].strip() and not lines[i].lstrip().startswith("#")
            ),
            default=first if table else None,
        )
        if last is None:  # a top level without keys: the key goes before the first table
            at = end
            entry += newline if end < len(lines) else ""
        else:
            at = last + 1
        return "".join(lines[:at]) + entry + "".join(lines[at:])
    header = "[" + ".".join(table) + "]"
    blank = newline if lines and lines[-1].strip() else ""
    return "".join(lines) + f"{blank}{header}{newline}{entry}"


def _expected(data: dict[str, Any], setting: Setting) -> dict[str, Any]:
    import copy

    out = copy.deepcopy(data)
    path, leaf = _table_of(out, setting)
    if path and isinstance(path[-1], int):
        out[path[0]][path[1]][leaf] = setting.value
        return out
    table = out
    for part in setting.key[:-1]:
        child = table.setdefault(part, {})
        if not isinstance(child, dict):
            raise SpecError(f"--set {setting.text!r}: {part} is not a table in the design file")
        table = child
    table[setting.key[-1]] = setting.value
    return out


def apply_settings(text: str, settings: Sequence[Setting], source: str = "<design>") -> str:
    """The design text with each setting applied in turn (the last of two on one key wins).

    The edited text is parsed back and must hold exactly the original data with the set
    values; a layout the edit cannot handle (a dotted key or an inline table in the file, an
    array of tables reached other than by an entry's name) is a SpecError that says to edit the
    file instead.
    """
    for setting in settings:
        try:
            before = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise SpecError(f"{source}: not valid TOML: {exc}") from None
        edited = _set_one(text, setting, before)
        try:
            after = tomllib.loads(edited)
        except tomllib.TOMLDecodeError:
            after = None
        if after != _expected(before, setting):
            raise SpecError(
                f"--set {setting.text!r}: {source} writes {'.'.join(setting.key)} in a form that "
                "--set does not edit (a dotted key, an inline table or an array of tables): "
                "edit the file instead"
            )
        text = edited
    return text
