"""How the field solve scales: the demo and trees with 2^6, 2^8 and 2^10 bed channels.

For each chip (each in its own process, so that the peak memory is its own) it prints the
mesh's triangles and unknowns, the mesh time, the assembly time, the solve time of the
reduced saddle-point system with the field's own factorisation (minimum-degree ordering of the
symmetrised pattern, symmetric mode) and, measured side by side on the same assembled matrix,
scipy's bare ``spsolve`` (default column ordering), their ratio, and the peak memory of the
field solve. A chip whose estimated mesh exceeds ``--max-triangles`` is reported with the
estimate only.

Targets (2-core machine): the demo's field solve under 10 s; peak memory under 2 GB at 2^8.

The tree chips are those of benchmarks/pipeline.py (benchmark scenarios on a five-level
mould, not chips).

Run: ``python benchmarks/field.py [--max-triangles 1500000] [--bare-max-dofs 600000]``
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

CASES = ("demo", "6", "8", "10")


def _source(case: str):
    from chipflow.build import DesignSource

    if case == "demo":
        return "chipflow/data/demo.toml"
    sys.path.insert(0, str(Path(__file__).parent))
    from pipeline import design_text

    from chipflow.spec.reader import parse_design_text

    top = parse_design_text(design_text(int(case)), f"bench-{case}.toml")
    return DesignSource(f"bench-{case}.toml", top, "0" * 64)


def run_case(case: str, max_triangles: int, bare_max_dofs: int) -> dict:
    from chipflow.build import build_design
    from chipflow.field.chip import estimate_triangles, layout_ports, layout_regions
    from chipflow.field.mesh import build_mesh
    from chipflow.field.solve import field_system, solve_reduced

    build = build_design(_source(case), field=False)
    layout = build.layout
    out = {"case": case, "estimate": estimate_triangles(layout)}
    if out["estimate"] > max_triangles:
        return out
    pressures = {"inlet": 1000.0, "outlet": 0.0}
    t0 = time.perf_counter()
    mesh = build_mesh(layout_regions(layout), layout_ports(layout, pressures))
    t1 = time.perf_counter()
    system = field_system(mesh, pressures, build.fluid.viscosity)
    t2 = time.perf_counter()
    x = solve_reduced(system, "splu")
    t3 = time.perf_counter()
    out.update(
        triangles=len(mesh.triangles),
        dofs=int(system.free.size),
        mesh=t1 - t0,
        assemble=t2 - t1,
        solve=t3 - t2,
        peak_mb=resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    )
    if system.free.size <= bare_max_dofs:
        t4 = time.perf_counter()
        y = solve_reduced(system, "spsolve")
        out["bare"] = time.perf_counter() - t4
        out["bare_difference"] = float(abs(x - y).max() / abs(x).max())
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--case", help=argparse.SUPPRESS)
    parser.add_argument("--max-triangles", type=int, default=1_500_000)
    parser.add_argument("--bare-max-dofs", type=int, default=600_000)
    args = parser.parse_args()
    if args.case:
        print(json.dumps(run_case(args.case, args.max_triangles, args.bare_max_dofs)))
        return
    rows = []
    for case in CASES:
        cmd = [sys.executable, __file__, "--case", case, "--max-triangles",
               str(args.max_triangles), "--bare-max-dofs", str(args.bare_max_dofs)]  # fmt: skip
        done = subprocess.run(cmd, capture_output=True, text=True, check=False)
        if done.returncode != 0:
            print(f"{case}: failed: {done.stderr.strip().splitlines()[-1:]}", file=sys.stderr)
            continue
        rows.append(json.loads(done.stdout.strip().splitlines()[-1]))
        print(_row(rows[-1]), flush=True) if len(rows) > 1 else print(
            _header() + "\n" + _row(rows[-1]), flush=True
        )


def _header() -> str:
    return (
        f"{'bed':>6} {'triangles':>10} {'unknowns':>9} {'mesh s':>7} {'assemble s':>10} "
        f"{'solve s':>8} {'spsolve s':>9} {'ratio':>6} {'peak MB':>8}"
    )


def _row(r: dict) -> str:
    name = "demo" if r["case"] == "demo" else f"2^{r['case']}"
    if "triangles" not in r:
        return f"{name:>6} {'~' + str(r['estimate']):>10}  (not solved: estimated mesh too large)"
    bare = r.get("bare")
    ratio = f"{bare / r['solve']:.2f}" if bare else "-"
    bare_s = f"{bare:.2f}" if bare else "-"
    return (
        f"{name:>6} {r['triangles']:>10} {r['dofs']:>9} {r['mesh']:>7.2f} {r['assemble']:>10.2f} "
        f"{r['solve']:>8.2f} {bare_s:>9} {ratio:>6} {r['peak_mb']:>8.0f}"
    )


if __name__ == "__main__":
    main()
