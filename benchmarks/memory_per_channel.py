"""Peak memory of a whole build per channel: the constant of the size guard.

Builds the benchmark trees of ``benchmarks/pipeline.py`` (2^8 and 2^12 bed channels by
default), each in a fresh process, and prints the peak resident memory, the channel count and
the vertex count of each, then the slope between them: bytes and vertices per channel. The
size guard (:mod:`chipflow.layout.budget`) holds these numbers; update them there when this
script shows a change.

Run: ``python benchmarks/memory_per_channel.py [--small 8] [--large 12]``
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

CHILD = r"""
import hashlib, json, resource, sys, tempfile
sys.path.insert(0, {bench!r})
from pipeline import design_text
from chipflow.build import DesignSource, build_design
from chipflow.export.bundle import write_build
from chipflow.layout.budget import count_vertices
from chipflow.spec.reader import parse_design_text
n = {n}
text = design_text(n)
source = DesignSource("b.toml", parse_design_text(text, "b.toml"),
                      hashlib.sha256(text.encode()).hexdigest())
build = build_design(source, allow_large=True)
write_build(build, tempfile.mkdtemp() + "/out")
print(json.dumps({{
    "channels": int(build.solution.network.n_channels),
    "vertices": count_vertices(build.layout),
    "peak": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024,
}}))
"""


def measure(n: int) -> dict:
    bench = str(Path(__file__).resolve().parent)
    out = subprocess.run(
        [sys.executable, "-c", CHILD.format(bench=bench, n=n)],
        check=True,
        capture_output=True,
        text=True,
        cwd=tempfile.gettempdir(),
    )
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", type=int, default=8)
    parser.add_argument("--large", type=int, default=12)
    args = parser.parse_args()
    rows = {n: measure(n) for n in (args.small, args.large)}
    print("bed channels  channels  vertices  peak memory [MB]")
    for n, row in rows.items():
        print(f"{2**n:>12}  {row['channels']:>8}  {row['vertices']:>8}  {row['peak'] / 1e6:>16.0f}")
    a, b = rows[args.small], rows[args.large]
    dn = b["channels"] - a["channels"]
    per_channel = (b["peak"] - a["peak"]) / dn
    base = a["peak"] - per_channel * a["channels"]
    print(f"bytes per channel: {per_channel:.0f}; base: {base / 1e6:.0f} MB")
    print(f"vertices per channel: {(b['vertices'] - a['vertices']) / dn:.1f}")


if __name__ == "__main__":
    main()
