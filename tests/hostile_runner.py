"""Every hostile case in one catalogue, run and counted: tracebacks, hangs, unconserved results.

A hostile case is an input a careless, unlucky or malicious user could give: a mistyped unit
or exponent, a value out of any range, a stream instead of a file, a mask drawn in the wrong
units, an absurd network, a bad scheduler address, an API call with the wrong arguments. Each
must end in one of two ways: a clear refusal (exit status 2 and exactly one line on stderr; a
``ChipflowError`` from the library), or a correct answer. The runner counts what would break
that promise:

- **traceback**: an exception that is not chipflow's own, a "Traceback" in the output, an exit
  status other than 0, 1 or 2, or a refusal of more than one line;
- **hang**: a case still running after :data:`BOUND` seconds (run in its own process);
- **unconserved**: an answer whose flows do not add up, recomputed here from what was written
  (``check --json``'s nodes, channels and ports; a build's ``channels.csv``; a solution's
  arrays): at every node but the ports, the net flow must be within :data:`CONSERVED` of the
  largest flow.

Usage::

    python tests/hostile_runner.py              # the whole catalogue, two cases at a time
    python tests/hostile_runner.py --jobs 4     # more at a time
    python tests/hostile_runner.py --list       # the cases, one line each

The default test suite runs the fast part of the catalogue in-process
(tests/test_hostile_runner.py); the whole of it runs under ``pytest -m slow``.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import re
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
DESIGNS = ROOT / "designs"
#: Seconds a case may run before it counts as a hang (the largest legitimate case, a tree
#: build of the demo, takes a few seconds).
BOUND = 60.0
#: Net flow allowed at a node that is not a port, as a fraction of the largest flow: far
#: above the solve's own tolerance (1e-6 at most) and the 12 digits the files keep.
CONSERVED = 1e-6


@dataclass
class Case:
    """One hostile case.

    Attributes
    ----------
    name : str
        Family and a short description, unique.
    argv : list of str
        ``chipflow`` arguments; ``{tmp}`` is the case's own temporary folder.
    files : dict
        Files made in the temporary folder first: name -> text, bytes, or a callable that
        makes the file at the path it is given.
    api : callable, optional
        A library call instead of a command: ``api(tmp)``; returns what it computed.
    fast : bool
        Part of the default test suite's subset.
    """

    name: str
    argv: list[str] = field(default_factory=list)
    files: dict[str, Any] = field(default_factory=dict)
    api: Callable[[Path], Any] | None = None
    fast: bool = False


@dataclass
class Verdict:
    name: str
    outcome: str  # "refused", "answered", "traceback", "hang", "unconserved"
    detail: str = ""
    seconds: float = 0.0


# -- the catalogue --------------------------------------------------------------------------------
def _text(name: str) -> str:
    return (DESIGNS / name).read_text(encoding="utf-8")


NETWORK = "bench_loop_network.toml"
TREES = ("pulsatile_peristaltic_bed.toml", "rocker_endothelial_bed.toml", "tree_vessel.toml")
_QUANTITY = re.compile(r'^(\s*"?[A-Za-z_]+"?\s*=\s*)"([-+]?\d[\d.eE+-]*)\s*([^"#]+?)"', re.M)


def _quantity_lines(text: str) -> list[tuple[int, int, str, str, str]]:
    """Every ``key = "number unit"`` line of a design: (start, end, key, number, unit)."""
    out = []
    for m in _QUANTITY.finditer(text):
        key = m.group(1).split("=")[0].strip().strip('"')
        out.append((m.start(), m.end(), key, m.group(2), m.group(3).strip()))
    return out


def _mutate(text: str, start: int, end: int, head: str, value: str) -> str:
    return text[:start] + f'{head}"{value}"' + text[end:]


def _design_cases() -> list[Case]:
    """Every quantity of the bundled designs made absurd in six ways, checked."""
    cases = []
    for design in (NETWORK, *TREES):
        text = _text(design)
        for start, end, key, number, unit in _quantity_lines(text):
            head = text[start:end][: text[start:end].index("=") + 1] + " "
            base = float(number)
            variants = {
                "x1e12": f"{base * 1e12:g} {unit}",
                "x1e-12": f"{base * 1e-12:g} {unit}",
                "nan": f"nan {unit}",
                "inf": f"inf {unit}",
                "negative": f"{-abs(base) or -1:g} {unit}",
                "zero": f"0 {unit}",
            }
            for tag, value in variants.items():
                mutated = _mutate(text, start, end, head, value)
                cases.append(
                    Case(
                        f"design/{design}/{key}@{start}/{tag}",
                        ["check", "{tmp}/d.toml", "--json"],
                        {"d.toml": mutated},
                        fast=design == NETWORK and tag in ("x1e12", "nan") and start < 2000,
                    )
                )
    return cases


def _whole_number_cases() -> list[Case]:
    cases = []
    demo = _text("demo_endothelial_bed.toml")
    network = _text(NETWORK)
    values = ["-1", "0", "2147483648", "18446744073709551616", "1.5", '"3"', "true"]
    targets = [
        ("generation", network, "generation = 0", "generation = {v}", "check"),
        ("samples", demo, None, "\n[tolerances]\nsamples = {v}\n", "vary"),
        ("seed", demo, None, "\n[tolerances]\nseed = {v}\n", "vary"),
        ("generations", _text("tree_vessel.toml"), "generations = 6", "generations = {v}", "check"),
        ("bed_channels", demo, None, None, "check"),
        ("rollers", _text(TREES[0]), None, None, "check"),
        ("gds_vertex_limit", demo, None, "\n[export]\ngds_vertex_limit = {v}\n", "check"),
    ]
    for key, text, old, new, command in targets:
        for v in values:
            if new is None:
                mutated = re.sub(rf"(?m)^{key}\s*=\s*\S+", f"{key} = {v}", text, count=1)
            elif old is None:
                mutated = text + new.format(v=v)
            else:
                mutated = text.replace(old, new.format(v=v), 1)
            argv = [command, "{tmp}/d.toml"]
            if command == "vary":
                argv += ["-o", "{tmp}/out", "--json"]
            cases.append(Case(f"whole/{key}/{v}", argv, {"d.toml": mutated}, fast=key == "seed"))
    return cases


BAD_VALUES = ["1e30 m", "1e-30 m", "nan m", "inf m", "-1 m", "0 m", "lots", ""]
_KIND_UNIT = {"length": "m", "flow": "m^3/s", "pressure": "Pa", "viscosity": "Pa*s",
              "temperature": "K"}  # fmt: skip


def _option_cases() -> list[Case]:
    cases = []
    channel = {"--width": "200um", "--depth": "50um", "--length": "1cm", "--flow": "1uL/min"}
    kinds = {"--width": "length", "--depth": "length", "--length": "length", "--flow": "flow",
             "--pressure": "pressure", "--diameter": "length", "--temperature": "temperature",
             "--viscosity": "viscosity"}  # fmt: skip
    for option, kind in kinds.items():
        for bad in BAD_VALUES:
            value = bad.replace(" m", f" {_KIND_UNIT[kind]}") if bad.endswith(" m") else bad
            args = dict(channel)
            if option in ("--pressure",):
                args.pop("--flow")
            if option == "--diameter":
                args.pop("--width")
                args.pop("--depth")
            args[option] = value
            argv = ["channel", *[x for pair in args.items() for x in pair]]
            cases.append(Case(f"option/channel{option}/{value!r}", argv, fast=bad == "nan m"))
    size = {"--flow": "2uL/min", "--depth": "50um", "--shear": "1Pa", "--grid": "1um"}
    size_kinds = {"--flow": "flow", "--depth": "length", "--shear": "pressure", "--grid": "length"}
    for option, kind in size_kinds.items():
        for bad in BAD_VALUES:
            value = bad.replace(" m", f" {_KIND_UNIT[kind]}") if bad.endswith(" m") else bad
            args = {**size, option: value}
            argv = ["size", *[x for pair in args.items() for x in pair]]
            cases.append(Case(f"option/size{option}/{value!r}", argv))
    demo = "demo_endothelial_bed"
    for option, values in {
        "--samples": ["0", "-1", "10000001", "18446744073709551616", "many", "1.5"],
        "--seed": ["-1", "4294967296", "18446744073709551616", "x"],
        "--workers": ["0", "-2", "100000", "two"],
        "--depth-tolerance": ["100%", "-5%", "1m", "nan%", "5 Pa"],
        "--width-tolerance": ["1m", "-2um", "nan um", "5%"],
        "--flow-tolerance": ["150%", "2um", "inf%"],
        "--viscosity-tolerance": ["100%", "-1%"],
        "--distribution": ["gauss", ""],
    }.items():
        for value in values:
            argv = ["vary", demo, option, value, "-o", "{tmp}/out", "--samples", "20"]
            if option == "--samples":
                argv = ["vary", demo, option, value, "-o", "{tmp}/out"]
            cases.append(Case(f"option/vary{option}/{value!r}", argv, fast=option == "--seed"))
    for spec in [
        "tree.flow=1uL/min..2uL/min:1000000000",
        "tree.flow=1uL/min..2uL/min:1000000000000",
        "tree.flow=1uL/min..2uL/min:1",
        "tree.flow=1uL/min..1uL/min:3",
        "tree.flow=",
        "tree.flow",
        "=5",
        "nosuch.key=1,2",
        "tree.flow=5um,6um",
        "tree.flow=1e30uL/min,2uL/min",
        "tree.flow=nan uL/min,2uL/min",
        "tree.flow=[1uL/min",
        "tree.bed_channels=16.5,32",
        "tree.bed_channels=-16,32",
        "fabrication.depths=[],[50um]",
        "tree.flow=" + ",".join(["5uL/min"] * 20_000),
        "tree.flow=5uL/min..x:3",
    ]:
        argv = ["sweep", demo, "--vary", spec, "-o", "{tmp}/out"]
        cases.append(Case(f"option/sweep/{spec[:50]!r}", argv, fast="1000000000" in spec))
    return cases


def _fifo(path: Path) -> None:
    os.mkfifo(path)


def _big(size: int) -> Callable[[Path], None]:
    def make(path: Path) -> None:
        with open(path, "wb") as f:
            f.truncate(size)

    return make


def _file_cases() -> list[Case]:
    cases = []
    sources = {
        "dev-zero": "/dev/zero",
        "dev-urandom": "/dev/urandom",
        "dev-null": "/dev/null",
        "fifo": "{tmp}/fifo.toml",
        "folder": "{tmp}",
        "missing": "{tmp}/missing.toml",
        "empty": "{tmp}/empty.toml",
        "binary": "{tmp}/binary.toml",
        "sparse-2GB": "{tmp}/sparse.toml",
        "latin-1": "{tmp}/latin.toml",
        "nul-bytes": "{tmp}/nul.toml",
    }
    files = {
        "fifo.toml": _fifo,
        "empty.toml": "",
        "binary.toml": bytes(range(256)) * 8,
        "sparse.toml": _big(2 * 2**30),
        "latin.toml": 'name = "caf\xe9"\n'.encode("latin-1"),
        "nul.toml": b'name = "a"\x00\n',
    }
    for tag, path in sources.items():
        for command in ("check", "build"):
            argv = [command, path] + (["-o", "{tmp}/out"] if command == "build" else [])
            cases.append(
                Case(
                    f"file/design/{tag}/{command}",
                    argv,
                    dict(files),
                    fast=tag in ("dev-zero", "fifo"),
                )  # fmt: skip
            )
    # pump waveforms: a peristaltic design reads waveform.csv beside it
    pulsatile = _text(TREES[0]).replace(
        "pulsation = 0.3", 'waveform = "waveform.csv"'
    )  # fmt: skip
    if "waveform" not in pulsatile:
        pulsatile = re.sub(r"(?m)^pulsation\s*=.*$", 'waveform = "waveform.csv"', pulsatile)
    pulsatile = re.sub(r"(?m)^(rpm|rollers|flow)\s*=.*$", "", pulsatile.split("[supply]")[1])
    pulsatile = _text(TREES[0]).split("[supply]")[0] + "[supply]" + pulsatile
    good = "time [s],flow [uL/min]\n0,5\n0.5,15\n1,5\n"
    waves = {
        "dev-zero": "/dev/zero",
        "dev-urandom": "/dev/urandom",
        "fifo": _fifo,
        "folder": "folder",
        "empty": "",
        "binary": bytes(range(256)),
        "huge": _big(50_000_000),
        "nan-row": good.replace("0.5,15", "0.5,nan"),
        "1e30-flow": good.replace("0.5,15", "0.5,1e30"),
        "negative-mean": good.replace(",5", ",-5").replace(",15", ",-15"),
        "times-fall": good.replace("0.5,15", "2,15"),
        "no-header": "0,5\n0.5,15\n1,5\n",
        "wrong-unit": good.replace("uL/min", "Pa"),
        "good": good,
    }
    for tag, content in waves.items():
        files = {"d.toml": pulsatile}
        if isinstance(content, str) and content.startswith("/dev/"):
            files["d.toml"] = pulsatile.replace('"waveform.csv"', f'"{content}"')
        elif content == "folder":
            files["waveform.csv/x"] = "x"
        else:
            files["waveform.csv"] = content
        cases.append(
            Case(
                f"file/waveform/{tag}",
                ["check", "{tmp}/d.toml"],
                files,
                fast=tag in ("dev-zero", "fifo"),
            )  # fmt: skip
        )
    masks = {
        "dev-zero": "/dev/zero",
        "fifo": "{tmp}/fifo.dxf",
        "folder": "{tmp}",
        "missing": "{tmp}/missing.dxf",
        "empty": "{tmp}/empty.dxf",
        "binary": "{tmp}/binary.dxf",
        "truncated": "{tmp}/truncated.dxf",
        "sparse-200MB": "{tmp}/sparse.dxf",
        "toml-as-dxf": "{tmp}/design.dxf",
    }
    mask_files = {
        "fifo.dxf": _fifo,
        "empty.dxf": "",
        "binary.dxf": bytes(range(256)) * 4,
        "truncated.dxf": "0\nSECTION\n2\nHEADER\n9\n$INSUNITS\n70\n",
        "sparse.dxf": _big(200_000_000),
        "design.dxf": _text(NETWORK),
    }
    for tag, path in masks.items():
        argv = ["analyse", path, "--depth", "50um", "--inlet", "0,0", "--outlet", "20,0",
                "--flow", "5uL/min"]  # fmt: skip
        cases.append(Case(f"file/mask/{tag}", argv, dict(mask_files), fast=tag == "dev-zero"))
    return cases


# -- masks --------------------------------------------------------------------------------------
def _dxf(make: Callable, version: str = "R2000", units: int | None = 4):
    def write(path: Path) -> None:
        import logging

        import ezdxf

        logging.getLogger("ezdxf").setLevel(logging.ERROR)  # R12 has no $INSUNITS: it says so
        doc = ezdxf.new(version)
        if units is not None and version != "R12":
            doc.header["$INSUNITS"] = units
        make(doc, doc.modelspace())
        doc.saveas(path)

    return write


def _r12_text(outlines: list) -> Callable[[Path], None]:
    """A DXF R12 file of closed polylines written as text (ezdxf takes minutes to add a
    polyline of 100,000 vertices; reading it is what the case is about)."""

    def write(path: Path) -> None:
        parts = ["0\nSECTION\n2\nENTITIES\n"]
        for points in outlines:
            parts.append("0\nPOLYLINE\n8\nCHANNELS\n66\n1\n70\n1\n")
            parts += [f"0\nVERTEX\n8\nCHANNELS\n10\n{x!r}\n20\n{y!r}\n" for x, y in points]
            parts.append("0\nSEQEND\n")
        parts.append("0\nENDSEC\n0\nEOF\n")
        path.write_text("".join(parts), encoding="ascii")

    return write


def _box(x0: float, y0: float, x1: float, y1: float) -> list[tuple[float, float]]:
    return [(x0, y0), (x1, y0), (x1, y1), (x0, y1)]


def _channel(msp, x0=0.0, x1=20.0, w=0.2, y=0.0, **attribs) -> None:
    msp.add_lwpolyline(_box(x0, y - w / 2, x1, y + w / 2), close=True, dxfattribs=attribs)


def _mask_cases() -> list[Case]:
    import numpy as np

    def serpentine(turns, pitch=0.5, run=20.0):
        import shapely

        xy = [(0.0, 0.0)]
        for k in range(turns):
            x = run if k % 2 == 0 else 0.0
            xy += [(x, -k * pitch), (x, -(k + 1) * pitch)]
        line = shapely.LineString(xy[:-1])
        return list(line.buffer(0.1, cap_style="flat", join_style="mitre").exterior.coords)[:-1]

    def widened(kind):
        def make(doc, msp):
            _channel(msp)
            if kind == "insert":
                block = doc.blocks.new("W")
                block.add_lwpolyline(_box(-2, -0.3, 2, 0.3), close=True)
                msp.add_blockref("W", (10, 0))
            elif kind == "nested-insert":
                inner = doc.blocks.new("IN")
                inner.add_lwpolyline(_box(-2, -0.3, 2, 0.3), close=True)
                outer = doc.blocks.new("OUT")
                outer.add_blockref("IN", (0, 0))
                msp.add_blockref("OUT", (10, 0), dxfattribs={"layer": "L"})
            elif kind == "rotated-insert":
                block = doc.blocks.new("R")
                block.add_lwpolyline(_box(-0.3, -2, 0.3, 2), close=True)
                msp.add_blockref("R", (10, 0), dxfattribs={"rotation": 90})
            elif kind == "ellipse":
                msp.add_ellipse((10, 0), major_axis=(2, 0), ratio=0.15)
            elif kind == "ellipse-arc":
                msp.add_ellipse((10, 0), major_axis=(2, 0), ratio=0.15, start_param=0,
                                end_param=2)  # fmt: skip
            elif kind == "poly3d":
                msp.add_polyline3d([(8, -0.3, 0), (12, -0.3, 0), (12, 0.3, 0), (8, 0.3, 0)],
                                   close=True)  # fmt: skip
            elif kind == "lines":
                for a, b in [((8, -0.3), (12, -0.3)), ((12, -0.3), (12, 0.3)),
                             ((12, 0.3), (8, 0.3)), ((8, 0.3), (8, -0.3))]:  # fmt: skip
                    msp.add_line(a, b)
            elif kind == "arc":
                msp.add_arc((10, 0), 0.3, 0, 180)
            elif kind == "spline":
                msp.add_spline([(8, -0.3), (12, -0.3), (12, 0.3), (8, 0.3), (8, -0.3)])
            elif kind == "open-spline":
                msp.add_spline([(8, -0.3), (12, -0.3), (12, 0.3)])
            elif kind == "hatch":
                hatch = msp.add_hatch()
                hatch.paths.add_polyline_path(_box(8, -0.3, 12, 0.3), is_closed=True)
            elif kind == "solid":
                msp.add_solid([(8, -0.3), (12, -0.3), (8, 0.3), (12, 0.3)])
            elif kind == "trace":
                msp.add_trace([(8, -0.3), (12, -0.3), (8, 0.3), (12, 0.3)])
            elif kind == "3dface":
                msp.add_3dface([(8, -0.3, 0), (12, -0.3, 0), (12, 0.3, 0), (8, 0.3, 0)])
            elif kind == "text":
                msp.add_text("chip 1", dxfattribs={"insert": (5, 5)})

        return make

    def lw(points, **kw):
        return lambda doc, msp: msp.add_lwpolyline(points, close=True, **kw)

    nan, inf = float("nan"), float("inf")
    run = ["--depth", "50um", "--inlet", "0,0", "--outlet", "20,0", "--flow", "5uL/min"]
    t = np.linspace(0, 2 * np.pi, 100_000, endpoint=False)
    xs = np.linspace(0, 20, 10_000)
    many = [(float(x), -0.1) for x in xs] + [(float(x), 0.1) for x in xs[::-1]]
    masks: dict[str, tuple[Callable, list[str]]] = {
        "straight": (_dxf(lambda d, m: _channel(m)), run),
        "um-read-as-mm": (
            _dxf(lambda d, m: _channel(m, 0, 20000, 200), units=13),
            [*run[:4], "20000,0", *run[6:], "--units", "mm"],
        ),
        "um-file-as-mm": (
            _dxf(lambda d, m: _channel(m, 0, 20000, 200), units=4),
            [*run[:4], "20000,0", *run[6:]],
        ),
        "depth-1nm": (_dxf(lambda d, m: _channel(m)), ["--depth", "1nm", *run[2:]]),
        "depth-150nm": (_dxf(lambda d, m: _channel(m)), ["--depth", "150nm", *run[2:]]),
        "depth-1km": (_dxf(lambda d, m: _channel(m)), ["--depth", "1km", *run[2:]]),
        "punch-1um": (_dxf(lambda d, m: _channel(m)), [*run, "--punch", "1um"]),
        "punch-1m": (_dxf(lambda d, m: _channel(m)), [*run, "--punch", "1m"]),
        "channel-20nm": (_dxf(lambda d, m: _channel(m, w=2e-5)), run),
        "chamber-1km": (
            _dxf(
                lambda d, m: (_channel(m), m.add_lwpolyline(_box(20, -5e5, 1e6, 5e5), close=True))
            ),
            run,
        ),  # fmt: skip
        "nan-vertex": (_dxf(lw([(0, -0.1), (20, -0.1), (20, 0.1), (nan, 0.1)])), run),
        "inf-vertex": (_dxf(lw([(0, -0.1), (20, -0.1), (20, 0.1), (inf, 0.1)])), run),
        "nan-bulge": (
            _dxf(lw([(0, -0.1, 0, 0, nan), (20, -0.1), (20, 0.1), (0, 0.1)], format="xyseb")),
            run,
        ),  # fmt: skip
        "inf-bulge": (
            _dxf(lw([(0, -0.1, 0, 0, inf), (20, -0.1), (20, 0.1), (0, 0.1)], format="xyseb")),
            run,
        ),  # fmt: skip
        "huge-bulge": (
            _dxf(lw([(0, -0.1, 0, 0, 1e300), (20, -0.1), (20, 0.1), (0, 0.1)], format="xyseb")),
            run,
        ),  # fmt: skip
        "nan-circle": (_dxf(lambda d, m: (_channel(m), m.add_circle((nan, 0), 1))), run),
        "zero-circle": (_dxf(lambda d, m: (_channel(m), m.add_circle((0, 0), 0))), run),
        "circle-100k": (
            _r12_text(
                [
                    _box(0, -0.1, 20, 0.1),
                    list(zip((20 + 2 * np.cos(t)).tolist(), (2 * np.sin(t)).tolist(), strict=True)),
                ]
            ),
            run,
        ),  # fmt: skip
        "collinear-20k": (_r12_text([many]), run),
        "collinear-200k": (
            _r12_text(
                [
                    [(float(x), -0.1) for x in np.linspace(0, 20, 100_000)]
                    + [(float(x), 0.1) for x in np.linspace(20, 0, 100_000)]
                ]
            ),
            run,
        ),  # fmt: skip
        "serpentine-200": (
            _dxf(lambda d, m: m.add_lwpolyline(serpentine(200), close=True)),
            [*run[:4], "0,-99.5", *run[6:]],
        ),  # fmt: skip
        "serpentine-200-json": (
            _dxf(lambda d, m: m.add_lwpolyline(serpentine(200), close=True)),
            [*run[:4], "0,-99.5", *run[6:], "--json"],
        ),  # fmt: skip
        "serpentine-9": (_dxf(lambda d, m: m.add_lwpolyline(serpentine(9), close=True)), run),
        "manifold-1000": (
            _dxf(
                lambda d, m: (
                    _channel(m, 0, 401, 0.2),
                    _channel(m, 0, 401, 0.2, y=-5.1),
                    [
                        m.add_lwpolyline(
                            _box(0.5 + 0.4 * i, -5.05, 0.6 + 0.4 * i, -0.05), close=True
                        )
                        for i in range(1000)
                    ],
                )
            ),
            [*run[:4], "401,-5.1", *run[6:]],
        ),  # fmt: skip
        "many-separate-5000": (
            _dxf(
                lambda d, m: (
                    _channel(m),
                    [
                        m.add_lwpolyline(
                            _box(
                                (i % 100) * 0.2,
                                1 + (i // 100) * 0.2,
                                (i % 100) * 0.2 + 0.1,
                                1.05 + (i // 100) * 0.2,
                            ),
                            close=True,
                        )
                        for i in range(5000)
                    ],
                )
            ),
            run,
        ),  # fmt: skip
        "outlet-separate": (
            _dxf(lambda d, m: (_channel(m, 0, 10), _channel(m, 0, 20, y=2))),
            [*run[:4], "20,2", *run[6:]],
        ),  # fmt: skip
        "outlet-separate-json-o": (
            _dxf(lambda d, m: (_channel(m, 0, 10), _channel(m, 0, 20, y=2))),
            [*run[:4], "20,2", *run[6:], "--json", "-o", "{tmp}/out"],
        ),  # fmt: skip
        "gap-1um-end-to-end": (
            _dxf(lambda d, m: (_channel(m, 0, 10), _channel(m, 10.001, 20))),
            run,
        ),  # fmt: skip
        "gap-1um-side-by-side": (
            _dxf(lambda d, m: (_channel(m), _channel(m, y=0.201))),
            [*run[:4], "20,0.201", *run[6:]],
        ),  # fmt: skip
        "touching-at-a-corner": (
            _dxf(
                lambda d, m: (
                    m.add_lwpolyline(_box(0, -0.1, 10, 0.1), close=True),
                    m.add_lwpolyline(_box(10, 0.1, 20, 0.3), close=True),
                )
            ),
            [*run[:4], "20,0.2", *run[6:]],
        ),  # fmt: skip
        "r12-no-units": (
            _dxf(lambda d, m: m.add_polyline2d(_box(0, -0.1, 20, 0.1), close=True), "R12", None),
            run,
        ),  # fmt: skip
        "r12-ambiguous": (
            _dxf(lambda d, m: m.add_polyline2d(_box(0, -0.1, 500, 0.1), close=True), "R12", None),
            [*run[:4], "500,0", *run[6:]],
        ),  # fmt: skip
        "units-0": (_dxf(lambda d, m: _channel(m), units=0), run),
        "units-99": (_dxf(lambda d, m: _channel(m), units=99), run),
        "unicode-layer": (
            _dxf(lambda d, m: (_channel(m, layer="\u901a\u9053"), _channel(m, y=5, layer="other"))),
            [*run, "--layer", "\u901a\u9053"],
        ),  # fmt: skip
        "unknown-layer": (_dxf(lambda d, m: _channel(m)), [*run, "--layer", "NOPE"]),
        "open-polyline": (_dxf(lambda d, m: m.add_lwpolyline(_box(0, -0.1, 20, 0.1))), run),
        "self-crossing": (_dxf(lw([(0, -0.1), (20, 0.1), (20, -0.1), (0, 0.1)])), run),
        "inlet-outside": (_dxf(lambda d, m: _channel(m)), [*run[:4], "20,5", *run[6:]]),
        "inlet-nan": (_dxf(lambda d, m: _channel(m)), [*run[:2], "--inlet", "nan,0", *run[4:]]),
        "ports-overlap": (_dxf(lambda d, m: _channel(m)), [*run[:4], "0.2,0", *run[6:]]),
        "no-flow-or-pressure": (_dxf(lambda d, m: _channel(m)), run[:6]),
        "flow-and-pressure": (_dxf(lambda d, m: _channel(m)), [*run, "--pressure", "1kPa"]),
        "empty-drawing": (_dxf(lambda d, m: None), run),
        "only-text": (_dxf(lambda d, m: m.add_text("x")), run),
        "block-self-nested": (_dxf(lambda d, m: (_channel(m), _recursive_block(d, m))), run),
    }
    for kind in ("insert", "nested-insert", "rotated-insert", "ellipse", "ellipse-arc",
                 "poly3d", "lines", "arc", "spline", "open-spline", "hatch", "solid", "trace",
                 "3dface", "text"):  # fmt: skip
        masks[f"entity-{kind}"] = (_dxf(widened(kind)), run)
    fast = {"straight", "depth-1nm", "nan-bulge", "outlet-separate", "gap-1um-end-to-end",
            "r12-no-units", "entity-insert", "um-read-as-mm"}  # fmt: skip
    return [
        Case(f"mask/{tag}", ["analyse", "{tmp}/m.dxf", *args], {"m.dxf": make}, fast=tag in fast)
        for tag, (make, args) in masks.items()
    ]


def _recursive_block(doc, msp) -> None:
    """A block bomb: ten references of the block below in each of eight nested blocks."""
    last = doc.blocks.new("B0")
    last.add_lwpolyline(_box(0, 0, 0.01, 0.01), close=True)
    for level in range(1, 9):
        block = doc.blocks.new(f"B{level}")
        for i in range(10):
            block.add_blockref(f"B{level - 1}", (i * 0.02, 0))
        last = block
    msp.add_blockref("B8", (0, 5))


# -- networks at the edges of the ranges ----------------------------------------------------
def _network_cases() -> list[Case]:
    cases = []
    text = _text(NETWORK)
    lines = [m for m in re.finditer(r'(?m)^(width|length|depth) = "[^"]+"', text)]
    extremes = {"width": ["100 nm", "1 m"], "length": ["100 nm", "10 m"], "depth": ["100 nm",
                "100 mm"]}  # fmt: skip
    for m in lines:
        key = m.group(1)
        for value in extremes[key]:
            mutated = text[: m.start()] + f'{key} = "{value}"' + text[m.end() :]
            cases.append(
                Case(
                    f"network/{key}@{m.start()}={value}",
                    ["check", "{tmp}/d.toml", "--json"],
                    {"d.toml": mutated},
                    fast=m.start() == lines[2].start(),
                )  # fmt: skip
            )
    trunk = text.replace('width = "400 um"', 'width = "1e30 um"', 1)
    cases.append(Case("network/trunk-1e30-um", ["check", "{tmp}/d.toml"], {"d.toml": trunk},
                      fast=True))  # fmt: skip
    cases.append(Case("network/trunk-1e30-um-build", ["build", "{tmp}/d.toml", "-o",
                                                      "{tmp}/out"], {"d.toml": trunk}))  # fmt: skip
    for tag, value in {"1e30": "1e30", "huge-head": '"1e5 m"', "all-flow": None}.items():
        if value is None:
            mutated = text.replace('head = "1 cm"', 'flow = "-5 uL/min"')
        elif tag == "1e30":
            mutated = text.replace('"pump"\nflow = "5 uL/min"', '"pump"\nflow = "1e30 uL/min"')
        else:
            mutated = text.replace('head = "1 cm"', f"head = {value}")
        cases.append(Case(f"network/ports-{tag}", ["check", "{tmp}/d.toml", "--json"],
                          {"d.toml": mutated}))  # fmt: skip
    for design in (NETWORK, *TREES, "demo_endothelial_bed.toml"):
        cases.append(Case(f"baseline/check/{design}", ["check", "{tmp}/d.toml", "--json"],
                          {"d.toml": _text(design)}, fast=design == NETWORK))  # fmt: skip
    cases.append(Case("baseline/build/network", ["build", NETWORK.removesuffix(".toml"), "-o",
                                                 "{tmp}/out"], fast=True))  # fmt: skip
    cases.append(Case("baseline/build/tree", ["build", "rocker_endothelial_bed", "-o",
                                              "{tmp}/out", "--no-field"]))  # fmt: skip
    return cases


# -- the library API ------------------------------------------------------------------------
def _api_cases() -> list[Case]:
    from chipflow.physics import duct, fluid

    nan = float("nan")
    ok = {"width": 100e-6, "depth": 50e-6, "length": 1e-3, "flow": 1e-10, "viscosity": 1e-3,
          "density": 1000.0}  # fmt: skip
    bad = {"negative": -1.0, "zero": 0.0, "nan": nan, "inf": float("inf"), "text": "1 mm",
           "none": None}  # fmt: skip
    calls = {
        "flow_state": lambda a: duct.flow_state(
            a["width"], a["depth"], a["length"], a["flow"], a["viscosity"], a["density"]
        ),  # fmt: skip
        "resistance": lambda a: duct.resistance(
            a["width"], a["depth"], a["length"], a["viscosity"]
        ),  # fmt: skip
        "wall_shear_floor": lambda a: duct.wall_shear_floor(
            a["width"], a["depth"], a["flow"], a["viscosity"]
        ),  # fmt: skip
        "wall_shear_max": lambda a: duct.wall_shear_max(
            a["width"], a["depth"], a["flow"], a["viscosity"]
        ),  # fmt: skip
        "mean_velocity": lambda a: duct.mean_velocity(a["width"], a["depth"], a["flow"]),
        "max_velocity": lambda a: duct.max_velocity(a["width"], a["depth"], a["flow"]),
        "hydraulic_diameter": lambda a: duct.hydraulic_diameter(a["width"], a["depth"]),
        "reynolds": lambda a: duct.reynolds_number(
            a["flow"], a["width"], a["viscosity"], a["density"]
        ),  # fmt: skip
        "custom_fluid": lambda a: fluid.custom_fluid("x", a["viscosity"], a["density"]),
        "water_viscosity": lambda a: fluid.water_viscosity(300.0, a["density"]),
    }
    uses = {
        "flow_state": ("width", "depth", "length", "flow", "viscosity", "density"),
        "resistance": ("width", "depth", "length", "viscosity"),
        "wall_shear_floor": ("width", "depth", "flow", "viscosity"),
        "wall_shear_max": ("width", "depth", "viscosity"),
        "mean_velocity": ("width", "depth", "flow"),
        "max_velocity": ("width", "depth", "flow"),
        "hydraulic_diameter": ("width", "depth"),
        "reynolds": ("width", "viscosity", "density"),
        "custom_fluid": ("viscosity", "density"),
        "water_viscosity": ("density",),
    }
    cases = []
    for name, call in calls.items():
        for arg in uses[name]:
            for tag, value in bad.items():
                if arg == "flow" and tag in ("negative", "zero"):
                    continue  # a flow may be negative or zero
                args = {**ok, arg: value}
                cases.append(Case(f"api/{name}/{arg}={tag}", api=_expect_refusal(call, args),
                                  fast=tag == "negative"))  # fmt: skip
    for tag, value in bad.items():
        cases.append(Case(f"api/NetworkBuilder.channel/width={tag}",
                          api=_builder(value), fast=tag in ("text", "nan")))  # fmt: skip
    cases.append(Case("api/solve/trunk-1e24", api=_solve_trunk(1e24), fast=True))
    cases.append(Case("api/solve/trunk-1e300", api=_solve_trunk(1e300)))
    cases.append(Case("api/solve/trunk-400um", api=_solve_trunk(400e-6), fast=True))
    return cases


def _expect_refusal(call, args):
    def run(tmp: Path) -> Any:
        return call(args)

    return run


def _builder(value):
    def run(tmp: Path) -> Any:
        from chipflow.network import NetworkBuilder

        b = NetworkBuilder()
        b.channel("c", "a", "b", width=value, depth=50e-6, length=1e-3)
        return b.build()

    return run


def _solve_trunk(width: float):
    def run(tmp: Path) -> Any:
        from chipflow.network import NetworkBuilder, solve
        from chipflow.physics.fluid import water

        b = NetworkBuilder()
        b.tube("feed", "pump", "inlet", diameter=0.51e-3, length=0.3)
        b.channel("trunk", "inlet", "split", width=width, depth=50e-6, length=3e-3)
        b.channel("a", "split", "out", width=200e-6, depth=50e-6, length=4e-3)
        b.channel("b", "split", "out", width=200e-6, depth=50e-6, length=7e-3)
        return solve(b.build(), water(), {"out": 0.0}, {"pump": 5e-9 / 60})

    return run


# -- scheduler addresses, output folders, a newcomer's mistakes ----------------------------------
def _misc_cases() -> list[Case]:
    cases = []
    for address in ["tcp://127.0.0.1:1", "http://example", "nonsense", " ",
                    "tcp://no.such.host.invalid:8786", "tcp://127.0.0.1:99999",
                    "tcp://[::1]:1", "inproc://nowhere"]:  # fmt: skip
        for command in ("vary", "sweep"):
            argv = [command, "demo_endothelial_bed", "--scheduler", address, "-o", "{tmp}/out"]
            if command == "sweep":
                argv += ["--vary", "tree.flow=8uL/min,9uL/min"]
            else:
                argv += ["--samples", "10"]
            cases.append(Case(f"scheduler/{command}/{address!r}", argv,
                              fast=address == "nonsense"))  # fmt: skip
    for tag, out in {"a-file": "{tmp}/file.txt", "dev-null": "/dev/null", "root": "/",
                     "proc": "/proc/self/out", "empty": "", "nested-file": "{tmp}/file.txt/x",
                     "dev": "/dev"}.items():  # fmt: skip
        cases.append(Case(f"outdir/{tag}", ["build", "bench_loop_network", "-o", out],
                          {"file.txt": "x"}, fast=tag == "a-file"))  # fmt: skip
    for argv in (["build"], ["check"], ["analyse"], ["frobnicate"], ["build", "designs"],
                 ["build", "no_such_design"], ["check", "bench_loop"], ["channel"],
                 ["channel", "--width", "200", "--depth", "50", "--length", "10", "--flow", "5"],
                 ["size", "--flow", "5uL/min"], ["vary", "bench_loop_network"],
                 ["sweep", "demo_endothelial_bed"], ["new", "../x"], ["new", "x" * 300],
                 ["demo", "-o", "/dev/null/x"], ["--version", "extra"]):  # fmt: skip
        cases.append(Case("newcomer/" + " ".join(argv)[:60], [*argv], fast=argv == ["build"]))
    return cases


def catalogue() -> list[Case]:
    """Every case, in a fixed order."""
    cases = [
        *_network_cases(),
        *_design_cases(),
        *_whole_number_cases(),
        *_option_cases(),
        *_file_cases(),
        *_mask_cases(),
        *_api_cases(),
        *_misc_cases(),
    ]
    names = [c.name for c in cases]
    assert len(set(names)) == len(names), "case names must be unique"
    return cases


# -- running one case -------------------------------------------------------------------------
def _make_files(case: Case, tmp: Path) -> None:
    for name, content in case.files.items():
        path = tmp / name
        path.parent.mkdir(parents=True, exist_ok=True)
        if callable(content):
            content(path)
        elif isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content, encoding="utf-8")


def _conserved_from_check(output: str) -> str:
    """'' when ``check --json``'s flows add up at every node but the ports, else why."""
    data = json.loads(output)
    if "channels" not in data:
        return ""  # a tree's table: checked through its own solve
    ports = {p["node"]: p["flow"] for p in data["ports"]}
    net = dict.fromkeys([n["name"] for n in data["nodes"]], 0.0)
    largest = max([abs(c["flow"] or 0.0) for c in data["channels"]] + [0.0])
    for c in data["channels"]:
        q = c["flow"] or 0.0
        net[c["from"]] -= q
        net[c["to"]] += q
    for node, q in ports.items():
        net[node] += q
    largest = max(largest, *(abs(q) for q in ports.values())) if ports else largest
    worst = max((abs(v) for v in net.values()), default=0.0)
    if not all(math.isfinite(v) for v in net.values()):
        return "non-finite flows"
    if largest > 0 and worst > CONSERVED * largest:
        return f"net flow {worst:.3g} m^3/s at a node ({worst / largest:.2g} of the largest)"
    return ""


def _conserved_from_csv(folder: Path) -> str:
    """'' when a build's channels.csv adds up at every node but at most its ports."""
    path = folder / "channels.csv"
    results = folder / "results.json"
    if not path.exists():
        return ""
    rows = list(csv.DictReader(io.StringIO(path.read_text("utf-8"))))
    net: dict[str, float] = {}
    flows = []
    for r in rows:
        q = float(r["flow [m^3/s]"])
        flows.append(abs(q))
        net[r["from"]] = net.get(r["from"], 0.0) - q
        net[r["to"]] = net.get(r["to"], 0.0) + q
    largest = max(flows + [0.0])
    loose = [n for n, v in net.items() if abs(v) > CONSERVED * largest]
    supply = json.loads(results.read_text("utf-8")).get("supply", {})
    ports = max(2, len(supply.get("ports", {})))
    if len(loose) > ports:
        return f"net flow at {len(loose)} nodes, more than the {ports} ports"
    totals = json.loads(results.read_text("utf-8"))["totals"]
    if not totals["mass_residual"] <= totals.get("residual_tolerance", 1.0) <= 1e-6:
        return f"results.json: mass_residual {totals['mass_residual']}"
    return ""


def _conserved_solution(value: Any) -> str:
    """'' when a returned Solution's flows add up at every free node."""
    import numpy as np

    from chipflow.network.solver import Solution

    if not isinstance(value, Solution):
        return ""
    net = value.network
    out = np.zeros(net.n_nodes)
    np.add.at(out, net.node_a, value.flow)
    np.add.at(out, net.node_b, -value.flow)
    ports = [net.node_index(n) for n in value.port_flow]
    out[ports] = 0.0
    largest = max(np.abs(value.flow).max(), *(abs(q) for q in value.port_flow.values()))
    worst = float(np.abs(out).max())
    return "" if worst <= CONSERVED * largest else f"net flow {worst:.3g} at a node"


def run_case(case: Case, folder: str | None = None) -> Verdict:
    """Run one case in this process and judge it (a hang is judged by the caller); its files
    go into ``folder`` (default: a temporary folder of its own)."""
    if folder is not None:
        return _run_in(case, Path(folder))
    with tempfile.TemporaryDirectory(prefix="hostile-") as made:
        return _run_in(case, Path(made))


def _run_in(case: Case, tmp: Path) -> Verdict:
    from click.testing import CliRunner

    from chipflow.cli import main
    from chipflow.errors import ChipflowError

    started = time.perf_counter()
    old = Path.cwd()
    os.chdir(tmp)
    try:
        _make_files(case, tmp)
        if case.api is not None:
            try:
                value = case.api(tmp)
            except ChipflowError as exc:
                text = str(exc)
                if "\n" in text:
                    return Verdict(case.name, "traceback", f"message of many lines: {text}")
                return Verdict(case.name, "refused", text[:200])
            except Exception as exc:  # noqa: BLE001 - what the runner counts
                return Verdict(case.name, "traceback", f"{type(exc).__name__}: {exc}"[:300])
            why = _conserved_solution(value)
            return Verdict(case.name, "unconserved" if why else "answered", why)
        argv = [a.replace("{tmp}", str(tmp)) for a in case.argv]
        result = CliRunner().invoke(main, argv)
        seconds = time.perf_counter() - started
        output = result.output
        if result.exception is not None and not isinstance(result.exception, SystemExit):
            detail = f"{type(result.exception).__name__}: {result.exception}"[:300]
            return Verdict(case.name, "traceback", detail, seconds)
        if "Traceback" in output or result.exit_code not in (0, 1, 2):
            return Verdict(case.name, "traceback", output[-300:], seconds)
        if result.exit_code == 2:
            lines = result.stderr.splitlines()
            if len(lines) != 1:
                return Verdict(case.name, "traceback", f"{len(lines)} lines: {lines[:3]}")
            return Verdict(case.name, "refused", lines[0][:200], seconds)
        why = ""
        if "--json" in argv and argv[0] == "check":
            why = _conserved_from_check(result.stdout)
        elif argv[0] == "build" and "-o" in argv:
            why = _conserved_from_csv(Path(argv[argv.index("-o") + 1]))
        verdict = "unconserved" if why else "answered"
        return Verdict(case.name, verdict, why or output.splitlines()[0][:100] if output
                       else why, seconds)  # fmt: skip
    finally:
        os.chdir(old)


def _run_isolated(index: int) -> Verdict:
    """Run case ``index`` in its own process, with the bound."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    started = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="hostile-") as folder:
        try:
            done = subprocess.run(
                [sys.executable, str(Path(__file__).resolve()), "--one", str(index), folder],
                env=env,
                capture_output=True,
                text=True,
                timeout=BOUND,
                stdin=subprocess.DEVNULL,
            )
        except subprocess.TimeoutExpired:
            return Verdict(catalogue()[index].name, "hang", f"over {BOUND:g} s", BOUND)
    seconds = time.perf_counter() - started
    try:
        data = json.loads(done.stdout.strip().splitlines()[-1])
        return Verdict(**{**data, "seconds": seconds})
    except (ValueError, IndexError, TypeError):
        tail = (done.stderr or done.stdout)[-300:]
        return Verdict(catalogue()[index].name, "traceback", f"the runner died: {tail}", seconds)


def summary(verdicts: list[Verdict]) -> dict[str, int]:
    counts = {k: 0 for k in ("refused", "answered", "traceback", "hang", "unconserved")}
    for v in verdicts:
        counts[v.outcome] += 1
    return counts


def main(argv: list[str] | None = None) -> int:
    import argparse

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--list", action="store_true")
    parser.add_argument("--one", type=int)
    parser.add_argument("folder", nargs="?", help="the folder of the one case (--one)")
    parser.add_argument("--only", default="", help="run the cases whose name holds this text")
    args = parser.parse_args(argv)
    cases = catalogue()
    if args.one is not None:
        verdict = run_case(cases[args.one], args.folder)
        sys.stdout.write("\n" + json.dumps(verdict.__dict__) + "\n")
        return 0
    if args.list:
        for c in cases:
            print(c.name)
        print(f"{len(cases)} cases ({sum(c.fast for c in cases)} in the fast subset)")
        return 0
    chosen = [i for i, c in enumerate(cases) if args.only in c.name]
    started = time.perf_counter()
    with ThreadPoolExecutor(max_workers=max(1, args.jobs)) as pool:
        verdicts = []
        for k, v in enumerate(pool.map(_run_isolated, chosen), start=1):
            verdicts.append(v)
            if v.outcome in ("traceback", "hang", "unconserved"):
                print(f"{v.outcome.upper()}: {v.name}: {v.detail}", flush=True)
            if k % 50 == 0:
                print(f"... {k} of {len(chosen)} cases", flush=True)
    counts = summary(verdicts)
    slowest = max(verdicts, key=lambda v: v.seconds) if verdicts else None
    print(
        f"{len(verdicts)} hostile cases in {time.perf_counter() - started:.0f} s: "
        f"{counts['refused']} refused in one line, {counts['answered']} answered; "
        f"{counts['traceback']} tracebacks, {counts['hang']} hangs past {BOUND:g} s, "
        f"{counts['unconserved']} unconserved"
    )
    if slowest is not None:
        print(f"slowest: {slowest.name} ({slowest.seconds:.1f} s)")
    return 1 if counts["traceback"] + counts["hang"] + counts["unconserved"] else 0


if __name__ == "__main__":
    sys.path.insert(0, str(ROOT))
    sys.exit(main())
