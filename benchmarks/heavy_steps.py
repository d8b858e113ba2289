"""The constants behind the estimates made before heavy steps, measured side by side.

Each case runs in a fresh process (so its peak memory is its own) and prints its estimate
beside what it measured: processor time and peak resident memory.

- field: ``chipflow analyse`` of serpentines of growing length (the mesh, the sparse LU and
  the channel table), against :func:`chipflow.field.budget.field_estimate` of
  :func:`~chipflow.field.budget.mask_triangles`;
- Monte Carlo: ``chipflow vary`` of the demo and of the 2^8 benchmark tree
  (benchmarks/pipeline.py) at growing sample counts,
  against :func:`chipflow.variation.vary.variation_estimate`.

Usage::

    python benchmarks/heavy_steps.py            # both
    python benchmarks/heavy_steps.py field      # one of them

Times are processor times (the machine may be shared); the ratios matter.
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

_FIELD = """
import json, resource, sys, time, tempfile
import ezdxf, shapely
from chipflow.field.analyse import analyse_mask
from chipflow.field.budget import field_estimate, mask_triangles
from chipflow.spec.mask_dxf import read_mask_dxf
turns = int(sys.argv[1])
xy = [(0.0, 0.0)]
for k in range(turns):
    x = 10.0 if k % 2 == 0 else 0.0
    xy += [(x, -k * 0.6), (x, -(k + 1) * 0.6)]
line = shapely.LineString(xy[:-1])
outline = line.buffer(0.1, cap_style="flat", join_style="mitre")
doc = ezdxf.new("R2000"); doc.header["$INSUNITS"] = 4
doc.modelspace().add_lwpolyline(list(outline.exterior.coords)[:-1], close=True)
path = tempfile.mktemp(suffix=".dxf"); doc.saveas(path)
mask = read_mask_dxf(path)
end = line.coords[-1]
t0 = time.process_time()
estimate = field_estimate(mask_triangles(mask.geometry, 50e-6))
a = analyse_mask(mask.geometry, 50e-6, (0.0, 0.0), (end[0] * 1e-3, end[1] * 1e-3), 1e-3,
                 1e-3, flow=1e-10, allow_large=True)
cpu = time.process_time() - t0
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
print(json.dumps({"turns": turns, "triangles": len(a.solution.mesh.triangles),
                  "estimated": float(estimate.detail.split()[0].replace(",", "")),
                  "cpu": cpu, "peak": peak, "est_cpu": estimate.seconds,
                  "est_peak": estimate.memory}))
"""

_VARY = """
import json, resource, sys, time, tomllib
sys.path.insert(0, "benchmarks")
from pipeline import design_text
from chipflow.build import DesignSource, build_design
from chipflow.spec.reader import parse_design_text
from chipflow.spec.tolerances import Tolerances
from chipflow.variation.problem import variation_problem
from chipflow.variation.vary import vary_build, variation_estimate
bed, samples = int(sys.argv[1]), int(sys.argv[2])
if bed == 32:
    build = build_design("designs/demo_endothelial_bed.toml", field=False)
else:  # the benchmark tree of benchmarks/pipeline.py
    k = bed.bit_length() - 1
    source = DesignSource(f"bench-{k}.toml", parse_design_text(design_text(k), "b.toml"), "")
    build = build_design(source, field=False)
tol = Tolerances(depth=0.1, width=2e-6, flow=0.02, viscosity=0.05, samples=samples)
base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
est = variation_estimate(variation_problem(build, tol), tol, workers=1)
t0 = time.process_time()
vary_build(build, tol, workers=1, allow_large=True)
cpu = time.process_time() - t0
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
print(json.dumps({"bed": bed, "samples": samples, "channels": build.solution.network.n_channels,
                  "cpu": cpu, "peak": peak, "before": base, "est_cpu": est.seconds,
                  "est_peak": est.memory}))
"""


def _run(code: str, *args: object) -> dict:
    env = {"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"}
    with tempfile.TemporaryDirectory() as folder:
        out = subprocess.run(
            [sys.executable, "-c", code, *map(str, args)],
            cwd=ROOT,
            env={**env, "HOME": folder},
            capture_output=True,
            text=True,
            check=True,
        )
    return json.loads(out.stdout.strip().splitlines()[-1])


def field() -> None:
    print("field: serpentine 200 um wide, 50 um deep, 10 mm runs")
    print(f"{'turns':>6} {'triangles':>10} {'estimated':>10} {'cpu s':>7} {'est s':>7} "
          f"{'peak MB':>8} {'est MB':>8}")  # fmt: skip
    for turns in (1, 7, 31, 63):
        r = _run(_FIELD, turns)
        print(
            f"{r['turns']:>6} {r['triangles']:>10,} {r['estimated']:>10,.0f} {r['cpu']:>7.1f} "
            f"{r['est_cpu']:>7.1f} {r['peak'] / 1e6:>8.0f} {r['est_peak'] / 1e6:>8.0f}"
        )


def vary() -> None:
    print("Monte Carlo: all four tolerances, one process")
    print(f"{'bed':>5} {'channels':>9} {'samples':>9} {'cpu s':>7} {'est s':>7} "
          f"{'peak MB':>8} {'est MB':>8}")  # fmt: skip
    for bed, samples in ((32, 10_000), (32, 100_000), (32, 1_000_000), (256, 100_000)):
        r = _run(_VARY, bed, samples)
        print(
            f"{r['bed']:>5} {r['channels']:>9,} {r['samples']:>9,} {r['cpu']:>7.1f} "
            f"{r['est_cpu']:>7.1f} {r['peak'] / 1e6:>8.0f} {r['est_peak'] / 1e6:>8.0f}"
        )


if __name__ == "__main__":
    which = sys.argv[1:] or ["field", "vary"]
    for name in which:
        {"field": field, "vary": vary}[name]()
