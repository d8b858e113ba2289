"""How the whole build scales with the size of the bed.

Builds tree designs with 2^4 .. 2^14 bed channels (``--max-generations`` to change) and prints,
per size, the time of every stage (load, size, layout, extract, solve, check, DXF, GDSII,
previews, report), the floor measured in the same run (ezdxf alone writing the same final
polylines, gdstk alone writing the same polygons), the ratio of the build's mask writing to
that floor, the total, and the peak memory. At the end it prints the fitted scaling exponent of
build time against channel count.

Targets (2-core machine): 2^10 bed channels in under 5 s; at 2^14 the DXF stage within 3x of
the ezdxf floor; scaling exponent at most 1.15; peak memory under 2 GB.

The designs are benchmark scenarios, not chips: every bed channel takes 0.1 uL/min, the trees
run on a five-level mould (25-400 um) and the outline grows with the bed (a 2^14-channel bed
is about a metre tall), so that every size draws and solves without a rule error.

Run: ``python benchmarks/pipeline.py [--max-generations 14] [--out /tmp/chipflow-bench]``
"""

from __future__ import annotations

import argparse
import hashlib
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from chipflow.build import DesignSource, build_design
from chipflow.export.bundle import write_build
from chipflow.export.geometry import prepare_layout
from chipflow.spec.reader import parse_design_text

DESIGN = """
name = "bench-{n}"
[tree]
flow = "{flow} uL/min"
generations = {n}
rule = "equal-shear"
length = "1 mm"
[bed]
length = "2 mm"
gap = "40 um"
[targets]
shear_min = "0.5 Pa"
shear_max = "1 Pa"
[fabrication]
depths = ["25 um", "50 um", "100 um", "200 um", "400 um"]
min_feature = "10 um"
min_gap = "30 um"
max_width = "5 mm"
max_width_to_depth = 12
[chip]
width = "{width} mm"
height = "{height} mm"
"""

STAGES = ("load", "size", "layout", "extract", "solve", "check", "dxf", "gds", "previews",
          "report")  # fmt: skip


def design_text(n: int) -> str:
    return DESIGN.format(
        n=n,
        flow=round(2**n * 0.1, 6),
        width=max(75.0, 2**n * 0.1 + 60),
        height=max(25.0, 2**n * 0.065 + 20),
    )


class StageClock:
    """Collects the wall time of each stage from the build's progress calls."""

    def __init__(self) -> None:
        self.times: dict[str, float] = {}
        self._stage: str | None = None
        self._start = 0.0

    def __call__(self, stage: str | None) -> None:
        now = time.perf_counter()
        if self._stage is not None:
            self.times[self._stage] = self.times.get(self._stage, 0.0) + now - self._start
        self._stage, self._start = stage, now


def dxf_floor(layout, path: Path) -> float:
    """ezdxf alone writing the same final polylines (one layer per mask level)."""
    import ezdxf

    prepared = prepare_layout(layout)
    start = time.perf_counter()
    doc = ezdxf.new("R2000")
    msp = doc.modelspace()
    for layer in prepared.layers:
        doc.layers.add(layer.name)
        for ring in layer.rings:
            msp.add_lwpolyline(ring.tolist(), close=True, dxfattribs={"layer": layer.name})
    doc.saveas(path)
    return time.perf_counter() - start


def gds_floor(layout, path: Path) -> float:
    """gdstk alone writing the same polygons (one layer per mask level)."""
    import gdstk

    prepared = prepare_layout(layout)
    start = time.perf_counter()
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    cell = lib.new_cell("BENCH")
    scale = prepared.grid_nm * 1e-3  # grid units -> um
    for i, layer in enumerate(prepared.layers, start=1):
        cell.add(*(gdstk.Polygon(ring * scale, layer=i) for ring in layer.rings))
    lib.write_gds(path)
    return time.perf_counter() - start


def peak_memory_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def run(n: int, out: Path) -> dict[str, float]:
    text = design_text(n)
    clock = StageClock()
    clock("load")
    source = DesignSource(
        f"bench-{n}.toml",
        parse_design_text(text, f"bench-{n}.toml"),
        hashlib.sha256(text.encode()).hexdigest(),
    )
    build = build_design(source, clock)
    write_build(build, out / f"bench-{n}", clock)
    clock(None)
    row = {stage: clock.times.get(stage, 0.0) for stage in STAGES}
    row["total"] = sum(row.values())
    row["dxf_floor"] = dxf_floor(build.layout, out / f"floor-{n}.dxf")
    row["gds_floor"] = gds_floor(build.layout, out / f"floor-{n}.gds")
    row["channels"] = float(build.solution.network.n_channels)
    row["memory_mb"] = peak_memory_mb()
    return row


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--min-generations", type=int, default=4)
    parser.add_argument("--max-generations", type=int, default=14)
    parser.add_argument("--step", type=int, default=2)
    parser.add_argument("--out", type=Path, default=None)
    args = parser.parse_args()
    out = args.out or Path(tempfile.mkdtemp(prefix="chipflow-bench-"))
    out.mkdir(parents=True, exist_ok=True)
    sizes = list(range(args.min_generations, args.max_generations + 1, args.step))
    header = ["bed", "channels", *STAGES, "total", "dxf/floor", "gds/floor", "peak MB"]
    print("  ".join(f"{h:>9}" for h in header))
    rows = []
    for n in sizes:
        row = run(n, out)
        rows.append((2**n, row))
        ratios = [row["dxf"] / row["dxf_floor"], row["gds"] / row["gds_floor"]]
        cells = [2**n, int(row["channels"]), *(row[s] for s in STAGES), row["total"], *ratios,
                 row["memory_mb"]]  # fmt: skip
        print("  ".join(f"{c:>9.3f}" if isinstance(c, float) else f"{c:>9}" for c in cells))
        sys.stdout.flush()
    if len(rows) >= 2:
        beds = np.array([r[0] for r in rows], dtype=float)
        totals = np.array([r[1]["total"] for r in rows])
        big = beds >= 2**8  # fixed costs (figures, files) dominate small builds
        use = big if big.sum() >= 2 else np.ones_like(big)
        slope = np.polyfit(np.log(beds[use]), np.log(totals[use]), 1)[0]
        print(f"scaling exponent of build time vs bed channels (2^8 and up): {slope:.2f}")
    print(f"outputs in {out}")


if __name__ == "__main__":
    main()
