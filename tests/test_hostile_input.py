"""Hostile design files: every broken design is refused with one line, exit 2, and no file.

A hypothesis fuzz test takes the bundled designs apart: misspelt and removed keys, wrong types,
missing or wrong units, zero, negative, NaN, infinite and overflowing values, strings where
numbers belong, unknown choices, broken TOML, empty and binary files. Each mutation is one
that no valid design could be, so every run of ``chipflow build`` must exit with status 2,
print exactly one line on stderr that names the file, and create or change nothing.
"""

from __future__ import annotations

import json
import math
import re
import tempfile
import tomllib
from pathlib import Path
from typing import Any

from click.testing import CliRunner
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from chipflow.cli import main

ROOT = Path(__file__).resolve().parents[1]
BASES = {
    name: tomllib.loads((ROOT / "designs" / name).read_text())
    for name in ("demo_endothelial_bed.toml", "bench_loop_network.toml")
}
QUANTITY = re.compile(r"^\s*[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?\s*[A-Za-z]")
CHOICES = {"kind", "rule", "shear_kind", "inlet", "outlet", "cell_type", "seeded", "units",
           "dxf_version", "polarity", "holes", "levels", "shape"}  # fmt: skip
FREE_TEXT = {"name", "description", "label", "role"}
# keys whose value may legitimately be zero or negative (an open outlet is 0 Pa, a pump may
# withdraw, tubing may be absent, 0 degC is a temperature)
ZERO_OK = {"inlet_tubing", "outlet_tubing", "outlet_head", "margin", "alignment_margin",
           "temperature", "pressure", "flow", "head"}  # fmt: skip
SIGN_OK = {"pressure", "flow", "head"}  # a reservoir surface may sit below its port
REQUIRED = {
    "demo_endothelial_bed.toml": [("tree", "flow"), ("tree", "rule"), ("tree", "bed_channels"),
                                  ("bed", "residence_time"), ("tree",)],
    "bench_loop_network.toml": [("channels", 0, "width"), ("channels", 1, "from"),
                                ("tubes", 0, "diameter"), ("ports", 0, "node"), ("ports",)],
}  # fmt: skip


# -- a small TOML writer for the mutated designs -------------------------------------------
def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return (
            "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf") if math.isinf(v) else repr(v)
        )
    if isinstance(v, int):
        return str(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{json.dumps(k)} = {_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def _is_table_array(v: Any) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def dumps(data: dict, prefix: str = "") -> str:
    lines = [f"{json.dumps(k)} = {_value(v)}" for k, v in data.items()
             if not isinstance(v, dict) and not _is_table_array(v)]  # fmt: skip
    for k, v in data.items():
        name = f"{prefix}{json.dumps(k)}"
        if isinstance(v, dict):
            lines += ["", f"[{name}]", dumps(v, f"{name}.")]
        elif _is_table_array(v):
            for item in v:
                lines += ["", f"[[{name}]]", dumps(item, f"{name}.")]
    return "\n".join(lines)


# -- mutations ---------------------------------------------------------------------------------
def leaves(data: Any, path: tuple = ()) -> list[tuple[tuple, Any]]:
    out = []
    items = data.items() if isinstance(data, dict) else enumerate(data)
    for k, v in items:
        if isinstance(v, dict) or _is_table_array(v):
            out += leaves(v, (*path, k))
        else:
            out.append(((*path, k), v))
    return out


def keys(data: Any, path: tuple = ()) -> list[tuple]:
    out = []
    items = data.items() if isinstance(data, dict) else enumerate(data)
    for k, v in items:
        if isinstance(k, str):
            out.append((*path, k))
        if isinstance(v, dict) or _is_table_array(v):
            out += keys(v, (*path, k))
    return out


def _parent(data: dict, path: tuple) -> Any:
    for k in path[:-1]:
        data = data[k]
    return data


def _copy(data: Any) -> Any:
    return json.loads(json.dumps(data))


def _number_unit(text: str) -> tuple[str, str]:
    match = re.match(r"^\s*(\S+?)\s*([A-Za-z].*)$", text)
    return match.group(1), match.group(2)


@st.composite
def broken_designs(draw) -> tuple[str, bytes]:
    """(what was done, file bytes) for a design no valid file could be."""
    base_name = draw(st.sampled_from(sorted(BASES)))
    base = BASES[base_name]
    text = dumps(base)
    kind = draw(st.sampled_from([
        "misspelt key", "removed key", "wrong type", "no unit", "wrong unit", "zero",
        "negative", "nan", "overflow", "text for number", "unknown choice", "broken toml",
        "empty", "binary",
    ]))  # fmt: skip
    if kind == "empty":
        return kind, draw(st.sampled_from([b"", b"\n\n", b"   \t\n"]))
    if kind == "binary":
        noise = draw(st.binary(min_size=1, max_size=64))
        return kind, b"\x00\xff" + noise
    if kind == "broken toml":
        lines = text.splitlines()
        at = draw(st.integers(0, len(lines)))
        junk = draw(st.sampled_from(["= broken", "[unclosed", 'key = "open', "a = 1 = 2"]))
        return kind, "\n".join([*lines[:at], junk, *lines[at:]]).encode()

    data = _copy(base)
    quantities = [(p, v) for p, v in leaves(data) if isinstance(v, str) and QUANTITY.match(v)]
    numbers = [(p, v) for p, v in leaves(data) if isinstance(v, int | float)
               and not isinstance(v, bool)]  # fmt: skip
    if kind == "misspelt key":
        path = draw(st.sampled_from(keys(data)))
        parent, key = _parent(data, path), path[-1]
        i = draw(st.integers(1, len(key) - 1))
        parent[key[:i] + key[i] + key[i:]] = parent.pop(key)  # doubled letter
    elif kind == "removed key":
        path = draw(st.sampled_from(REQUIRED[base_name]))
        del _parent(data, path)[path[-1]]
    elif kind == "wrong type":
        path, value = draw(st.sampled_from(leaves(data)))
        if isinstance(value, bool):
            new = "yes"
        elif isinstance(value, int | float):
            new = "many"
        elif isinstance(value, list):
            new = True
        else:
            new = draw(st.sampled_from([42, True, [1, 2], {"x": 1}]))
        _parent(data, path)[path[-1]] = new
    elif kind in ("no unit", "wrong unit", "zero", "negative", "nan", "overflow"):
        pool = quantities
        if kind == "zero":
            pool = [(p, v) for p, v in pool if p[-1] not in ZERO_OK]
        if kind == "negative":
            pool = [(p, v) for p, v in pool if p[-1] not in SIGN_OK]
        path, value = draw(st.sampled_from(pool))
        number, unit = _number_unit(value)
        new = {
            "no unit": number,
            "wrong unit": f"{number} {'kg' if unit.strip() in ('s', 'min') else 's'}",
            "zero": f"0 {unit}",
            "negative": f"-{abs(float(number))} {unit}",
            "nan": f"nan {unit}",
            "overflow": f"1e999 {unit}",
        }[kind]
        _parent(data, path)[path[-1]] = new
    elif kind == "text for number":
        path, value = draw(st.sampled_from(numbers))
        _parent(data, path)[path[-1]] = draw(st.sampled_from([str(value), "", "lots"]))
    elif kind == "unknown choice":
        pool = [(p, v) for p, v in leaves(data) if p[-1] in CHOICES and isinstance(v, str)]
        path, value = draw(st.sampled_from(pool))
        _parent(data, path)[path[-1]] = value + "zz"
    assert kind not in FREE_TEXT
    return kind, dumps(data).encode()


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}  # fmt: skip


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(broken_designs())
def test_broken_designs_exit_2_with_one_line_and_no_file(case: tuple[str, bytes]) -> None:
    kind, raw = case
    event(kind)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        design = folder / "broken.toml"
        design.write_bytes(raw)
        before = _snapshot(folder)
        result = CliRunner().invoke(main, ["build", str(design), "-o", str(folder / "out")])
        assert result.exit_code == 2, (kind, result.output, raw[:400])
        lines = result.stderr.splitlines()
        assert len(lines) == 1, (kind, result.stderr)
        assert "broken.toml" in lines[0] and "Traceback" not in result.output, (kind, lines)
        assert _snapshot(folder) == before, kind
