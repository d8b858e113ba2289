"""How long people wait: every stage of a build against its floor, and whole-process times.

Part 1 builds tree designs with 2^4 .. 2^14 bed channels (``--sizes``), each in a fresh Python
process so that the peak memory is that size's own. The writers' libraries (ezdxf, gdstk,
matplotlib) are imported and used once on something small before the build, timed apart
("imports"), so that a stage and its floor, which runs after it, are timed alike. Per size it
prints the time of every stage (load, size, layout, extract, solve, check, DXF, GDSII,
previews, report), the total, the peak resident memory, and each writing stage against its
floor measured in the same process just after the build, both in wall time and in processor
time (the latter is steadier on a machine shared with other work):

- ``solve``: a bare ``scipy.sparse.linalg.spsolve`` of the same assembled system;
- ``dxf``: ezdxf alone writing the same final polylines (``ezdxf.new``, one layer per mask
  level, ``add_lwpolyline(points, format="xy")``, ``saveas``);
- ``gds``: gdstk alone writing the same polygons (the same vertex limit);
- ``previews``: matplotlib alone rendering the same polygons into the same four files (each
  mask level as one path, the channels coloured by shear as one collection, rasterised when
  the build rasterises them; SVG and PNG at the same resolution);
- ``report``: matplotlib alone drawing the same six panels of steps into an SVG, the HTML
  text written as one string, the results dumped as JSON and the per-channel numbers written
  through the csv module.

It then prints the fitted scaling exponent of build time against bed channels (2^10 and up).

Part 2 (skipped with ``--no-cli``) times whole processes, interleaved and repeated
(``--repeat``), and prints medians and ratios: a bare
``python -c "import numpy, scipy.sparse, pint; pint.UnitRegistry()"``, ``chipflow --version``,
``chipflow channel ...`` and ``chipflow demo`` with a warm field cache (filled by an earlier
run) and a cold one (an empty folder each time), and ``chipflow demo --field`` warm.

Targets (2-core machine): ``channel`` within 1.3x of the bare import; the demo under 1.5 s
whole process; GDSII within 3x and DXF and previews within 1.5x of their floors at 2^10 and
2^14; 2^16 bed channels (``--sizes 16``) in under 2 minutes and 2 GB; scaling exponent at most
1.1. On a shared machine run it more than once: ratios measured side by side are what count.

The designs are benchmark scenarios, not chips: every bed channel takes 0.1 uL/min, the trees
run on a five-level mould (25-400 um) and the outline grows with the bed (a 2^14-channel bed
is about 1.4 m tall), so that every size draws and solves without a rule error.

Run: ``python benchmarks/pipeline.py [--sizes 4,6,8,10,12,14] [--repeat 5] [--out DIR]``
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

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
FLOORED = ("solve", "dxf", "gds", "previews", "report")
CHANNEL = ["channel", "--width", "200um", "--depth", "50um", "--length", "10mm",
           "--flow", "5uL/min"]  # fmt: skip
BARE = "import numpy, scipy.sparse, pint; pint.UnitRegistry()"


def design_text(n: int) -> str:
    return DESIGN.format(
        n=n,
        flow=round(2**n * 0.1, 6),
        width=max(75.0, 2**n * 0.1 + 60),
        height=max(25.0, 2**n * 0.085 + 20),
    )


class StageClock:
    """Collects the wall and processor time of each stage from the build's progress calls."""

    def __init__(self) -> None:
        self.times: dict[str, float] = {}
        self.cpu: dict[str, float] = {}
        self._stage: str | None = None
        self._start = self._start_cpu = 0.0

    def __call__(self, stage: str | None) -> None:
        now, cpu = time.perf_counter(), time.process_time()
        if self._stage is not None:
            self.times[self._stage] = self.times.get(self._stage, 0.0) + now - self._start
            self.cpu[self._stage] = self.cpu.get(self._stage, 0.0) + cpu - self._start_cpu
        self._stage, self._start, self._start_cpu = stage, now, cpu


def _now() -> tuple[float, float]:
    return time.perf_counter(), time.process_time()


def _since(start: tuple[float, float]) -> tuple[float, float]:
    """Wall and processor time since ``start`` (from :func:`_now`)."""
    return time.perf_counter() - start[0], time.process_time() - start[1]


# -- floors: the libraries alone doing the same writing -------------------------------------------
def solve_floor(build) -> tuple[float, float]:
    from scipy.sparse.linalg import spsolve

    from chipflow.network import reduced_system

    sol = build.solution
    fixed = {int(i): float(sol.pressure[i]) for i in np.flatnonzero(_port_mask(sol))}
    system = reduced_system(sol.network, build.fluid, fixed, None)
    start = _now()
    spsolve(system.matrix, system.rhs)
    return _since(start)


def _port_mask(sol) -> np.ndarray:
    """The nodes held at a pressure in the floor's system: the two ends of the supply."""
    mask = np.zeros(sol.network.n_nodes, dtype=bool)
    degree = np.bincount(
        np.concatenate([sol.network.node_a, sol.network.node_b]), minlength=sol.network.n_nodes
    )
    mask[degree == 1] = True
    return mask


def dxf_floor(layout, path: Path) -> tuple[float, float]:
    """ezdxf alone writing the same final polylines (one layer per mask level)."""
    import ezdxf

    from chipflow.export.geometry import prepare_layout

    prepared = prepare_layout(layout)
    rings = [(layer.name, [ring.tolist() for ring in layer.rings]) for layer in prepared.layers]
    start = _now()
    doc = ezdxf.new("R2000")
    msp = doc.modelspace()
    for name, layer_rings in rings:
        doc.layers.add(name)
        for ring in layer_rings:
            msp.add_lwpolyline(ring, format="xy", close=True, dxfattribs={"layer": name})
    doc.saveas(path)
    return _since(start)


def gds_floor(layout, path: Path) -> tuple[float, float]:
    """gdstk alone writing the same polygons (one layer per mask level)."""
    import gdstk

    from chipflow.export.geometry import prepare_layout

    prepared = prepare_layout(layout)
    scale = prepared.grid_nm * 1e-3  # grid units -> um
    rings = [[ring * scale for ring in layer.rings] for layer in prepared.layers]
    start = _now()
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    cell = lib.new_cell("BENCH")
    for i, layer_rings in enumerate(rings, start=1):
        cell.add(*(gdstk.Polygon(ring, layer=i) for ring in layer_rings))
    lib.write_gds(path, max_points=8190)
    return _since(start)


def preview_floor(build, out: Path) -> tuple[float, float]:
    """matplotlib alone rendering the same polygons into the same four files."""
    import shapely
    from matplotlib.collections import PolyCollection
    from matplotlib.figure import Figure
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MplPath

    from chipflow.export.preview import RASTER_VERTICES, _channel_outlines

    layout = build.layout
    paths = []
    for mask in layout.layers:
        rings = shapely.get_rings(shapely.get_parts(mask.geometry))
        xy, idx = shapely.get_coordinates(rings, return_index=True)
        codes = np.full(len(xy), MplPath.LINETO, dtype=np.uint8)
        starts = np.r_[0, np.flatnonzero(np.diff(idx)) + 1]
        codes[starts] = MplPath.MOVETO
        paths.append(MplPath(xy * 1e3, codes))
    ch = layout.channels
    shapes = _channel_outlines(ch)
    xy, idx = shapely.get_coordinates(shapely.get_exterior_ring(shapes), return_index=True)
    polys = np.split(xy * 1e3, np.flatnonzero(np.diff(idx)) + 1)
    values = build.solution.wall_shear_floor[: ch.length.size]
    raster = sum(len(p.vertices) for p in paths) + len(xy) > RASTER_VERTICES
    x0, y0, x1, y1 = (v * 1e3 for v in layout.outline.bounds)
    start = _now()
    for stem, coloured in (("layout", False), ("shear", True)):
        fig = Figure(figsize=(8.0, max(2.5, 8.0 * (y1 - y0) / (x1 - x0) + 1.2)), dpi=100)
        ax = fig.add_subplot()
        for path in paths:
            ax.add_artist(PathPatch(path, edgecolor="none", alpha=0.25 if coloured else 0.85))
        if coloured:
            collection = PolyCollection(polys, edgecolors="none")
            collection.set_array(values)
            ax.add_collection(collection, autolim=False)
        for artist in ax.get_children():
            if raster and isinstance(artist, PathPatch | PolyCollection):
                artist.set_rasterized(True)
        ax.set_xlim(x0, x1)
        ax.set_ylim(y0, y1)
        ax.set_aspect("equal")
        for fmt in ("svg", "png"):
            fig.savefig(out / f"floor-{stem}.{fmt}", format=fmt, dpi=150)
    return _since(start)


def report_floor(build, out: Path) -> tuple[float, float]:
    """matplotlib alone drawing six panels of steps into an SVG, the HTML as one string, the
    results as JSON and the channel table through the csv module."""
    import csv
    import json

    from matplotlib.figure import Figure

    from chipflow.export.bundle import CSV_COLUMNS
    from chipflow.report import report_html

    rows = build.results["generations"]
    keys = ("pressure_in", "flow_per_channel", "total_area", "mean_velocity",
            "wall_shear_floor", "residence_time")  # fmt: skip
    data = [np.array([float(r[k] or 0.0) for r in rows]) for k in keys]
    x = np.arange(len(rows), dtype=float)
    html = report_html(build.results, {})
    sol = build.solution
    columns = [sol.flow, sol.pressure[sol.network.node_a], sol.pressure[sol.network.node_b],
               sol.mean_velocity, sol.wall_shear_floor, sol.wall_shear_mean, sol.wall_shear_max,
               sol.reynolds, sol.residence_time, sol.network.width, sol.network.depth,
               sol.network.length]  # fmt: skip
    columns = [np.nan_to_num(c, posinf=0.0) for c in columns]
    start = _now()
    fig = Figure(figsize=(7.5, 1.55 * 6 + 0.8))
    for ax, y in zip(fig.subplots(6, 1, sharex=True), data, strict=True):
        ax.plot(np.repeat(x, 2) + np.tile([-0.5, 0.5], x.size), np.repeat(y, 2))
    fig.savefig(out / "floor-profile.svg", format="svg")
    (out / "floor-report.html").write_text(html, encoding="utf-8")
    (out / "floor-results.json").write_text(json.dumps(build.results, indent=2, default=str))
    with open(out / "floor-channels.csv", "w", newline="") as stream:
        writer = csv.writer(stream, lineterminator="\n")
        writer.writerow(CSV_COLUMNS)
        writer.writerows(zip(*(c.tolist() for c in columns), strict=True))
    return _since(start)


def _warm_up() -> None:
    """Draw and write one small thing with each library (fonts, caches), so that neither the
    build's stage nor its floor, which runs after it, pays a first-use cost alone."""
    import io

    import ezdxf
    from matplotlib.figure import Figure

    fig = Figure(figsize=(2, 2))
    ax = fig.add_subplot()
    ax.plot([0, 1], [0, 1], label="warm-up")
    ax.set_title("warm-up")
    ax.legend()
    for fmt in ("svg", "png"):
        fig.savefig(io.BytesIO(), format=fmt)
    doc = ezdxf.new("R2000")
    doc.modelspace().add_lwpolyline([(0, 0), (1, 0), (1, 1)], close=True)
    doc.write(io.StringIO())


def peak_memory_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def one_size(n: int, out: Path) -> dict[str, float]:
    """Build 2^n bed channels, write everything, then time the floors (this process)."""
    from chipflow.build import DesignSource, build_design
    from chipflow.export.bundle import write_build
    from chipflow.spec.reader import parse_design_text

    start = time.perf_counter()
    import ezdxf  # noqa: F401 - imported before the clock starts, so that stage and floor
    import gdstk  # noqa: F401   are timed alike; the import cost is in the whole-process times
    import matplotlib.backends.backend_agg  # noqa: F401
    import matplotlib.backends.backend_svg  # noqa: F401
    import matplotlib.figure  # noqa: F401

    _warm_up()
    imports = time.perf_counter() - start
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
    row.update({f"{stage}_cpu": clock.cpu.get(stage, 0.0) for stage in STAGES})
    row["memory_mb"] = peak_memory_mb()
    row["imports"] = imports
    row["channels"] = float(build.solution.network.n_channels)
    floors = out / f"floors-{n}"
    floors.mkdir(exist_ok=True)
    for stage, floor, args in (
        ("solve", solve_floor, (build,)),
        ("dxf", dxf_floor, (build.layout, floors / "floor.dxf")),
        ("gds", gds_floor, (build.layout, floors / "floor.gds")),
        ("previews", preview_floor, (build, floors)),
        ("report", report_floor, (build, floors)),
    ):
        row[f"{stage}_floor"], row[f"{stage}_floor_cpu"] = floor(*args)
    return row


def run_sizes(sizes: list[int], out: Path) -> None:
    header = ["bed", "channels", *STAGES, "total", "peak MB", "imports"]
    print("stage times [s]")
    print("  ".join(f"{h:>8}" for h in header))
    rows = []
    for n in sizes:
        env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
        done = subprocess.run(
            [sys.executable, __file__, "--one", str(n), "--out", str(out)],
            capture_output=True,
            text=True,
            env=env,
        )
        if done.returncode != 0:
            print(f"2^{n}: failed\n{done.stderr[-2000:]}")
            continue
        row = json.loads(done.stdout.strip().splitlines()[-1])
        rows.append((n, row))
        cells = [2**n, int(row["channels"]), *(row[s] for s in STAGES), row["total"],
                 row["memory_mb"], row["imports"]]  # fmt: skip
        print("  ".join(f"{c:>8.3f}" if isinstance(c, float) else f"{c:>8}" for c in cells))
        sys.stdout.flush()
    for kind, key in (("wall", ""), ("processor", "_cpu")):
        print(
            f"\neach stage against its floor, {kind} time (same process): "
            "stage [s] / floor [s] = ratio"
        )
        for n, row in rows:
            parts = []
            for s in FLOORED:
                stage, floor = row[s + key], row[f"{s}_floor{key}"]
                parts.append(f"{s} {stage:.3f}/{floor:.3f} = {stage / max(floor, 1e-9):.2f}")
            print(f"2^{n:<3} " + "   ".join(parts))
    if len(rows) >= 2:
        beds = np.array([2.0**n for n, _ in rows])
        totals = np.array([r["total"] for _, r in rows])
        big = beds >= 2**10  # fixed costs (figures, files) dominate small builds
        use = big if big.sum() >= 2 else np.ones_like(big)
        slope = np.polyfit(np.log(beds[use]), np.log(totals[use]), 1)[0]
        print(f"scaling exponent of build time vs bed channels (2^10 and up): {slope:.2f}")


def _time_process(argv: list[str], env: dict[str, str]) -> tuple[float, float]:
    """Wall and processor time [s] of one whole process."""
    start, cpu = time.perf_counter(), os.times()
    subprocess.run(argv, check=True, capture_output=True, env=env)
    end = os.times()
    used = end.children_user - cpu.children_user + end.children_system - cpu.children_system
    return time.perf_counter() - start, used


def run_cli(repeat: int, out: Path) -> None:
    exe = shutil.which("chipflow")
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    chipflow = [exe] if exe else [sys.executable, "-c", "from chipflow.cli import main; main()"]
    demo = [*chipflow, "demo", "-o", str(out / "demo")]
    warm = out / "field-cache-warm"
    warm_env = {**env, "CHIPFLOW_FIELD_CACHE": str(warm)}
    subprocess.run([*demo, "--field"], check=True, capture_output=True, env=warm_env)
    cases = {
        "bare import": ([sys.executable, "-c", BARE], {}),
        "chipflow --version": ([*chipflow, "--version"], {}),
        "chipflow channel": ([*chipflow, *CHANNEL], {}),
        "chipflow demo, warm cache": (demo, {"CHIPFLOW_FIELD_CACHE": str(warm)}),
        "chipflow demo, cold cache": (demo, {"CHIPFLOW_FIELD_CACHE": "cold"}),
        "chipflow demo --field, warm": ([*demo, "--field"], {"CHIPFLOW_FIELD_CACHE": str(warm)}),
    }
    times: dict[str, list[tuple[float, float]]] = {name: [] for name in cases}
    for run in range(repeat):  # interleaved, so that the machine's load hits every case alike
        for name, (argv, extra) in cases.items():
            if extra.get("CHIPFLOW_FIELD_CACHE") == "cold":  # an empty cache folder each time
                extra = {"CHIPFLOW_FIELD_CACHE": str(out / f"field-cache-cold-{run}")}
            times[name].append(_time_process(argv, {**env, **extra}))
    bare = [statistics.median(v) for v in zip(*times["bare import"], strict=True)]
    print(
        f"\nwhole processes, median of {repeat} interleaved runs: wall [s] (range), its ratio "
        "to the bare import, processor time [s] and its ratio"
    )
    for name, values in times.items():
        wall, cpu = (statistics.median(v) for v in zip(*values, strict=True))
        spread = f"{min(v[0] for v in values):.2f}-{max(v[0] for v in values):.2f}"
        print(
            f"  {name:<31} {wall:6.2f}  ({spread})  {wall / bare[0]:5.2f}x  "
            f"{cpu:6.2f}  {cpu / bare[1]:5.2f}x"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="4,6,8,10,12,14", help="bed sizes as powers of two")
    parser.add_argument("--repeat", type=int, default=5, help="runs of each whole process")
    parser.add_argument("--no-cli", action="store_true", help="skip the whole-process times")
    parser.add_argument("--no-builds", action="store_true", help="skip the stage times")
    parser.add_argument("--out", type=Path, default=None)
    parser.add_argument("--one", type=int, default=None, help=argparse.SUPPRESS)
    args = parser.parse_args()
    out = args.out or Path(tempfile.mkdtemp(prefix="chipflow-bench-"))
    out.mkdir(parents=True, exist_ok=True)
    if args.one is not None:
        print(json.dumps(one_size(args.one, out)))
        return
    if not args.no_builds:
        run_sizes([int(s) for s in args.sizes.split(",") if s], out)
    if not args.no_cli:
        run_cli(args.repeat, out)
    print(f"outputs in {out}")


if __name__ == "__main__":
    main()
