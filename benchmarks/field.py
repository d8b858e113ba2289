"""The field solve, direct against iterative, on the demo and trees of 2^6 to 2^10 bed channels.

Each solve runs in a fresh process, so that its peak memory is its own. Per chip and solver it
prints the mesh's triangles and reduced unknowns, the solver (``direct``: sparse LU;
``iterative``: MINRES with multigrid, :mod:`chipflow.field.iterative`) and its iterations,
the wall time of meshing, assembly and the solve, the CPU time of the whole field (mesh,
assembly, solve), the peak resident memory of the process (the build of the chip included),
the chip resistance [Pa s/m^3] and the 5th, 50th and 95th percentiles of the floor shear
[Pa] over the chip's floor area, at the network's inlet and outlet pressures. The last
columns compare the iterative solve with the direct one of the same chip (relative
difference of the resistance, largest difference of the three percentiles).

The direct solve is skipped above ``--direct-max-triangles``, the chip above
``--max-triangles`` (their estimated meshes). At the end it prints the constants of
:mod:`chipflow.field.budget` fitted to this run, to be copied there.

Targets (2-core machine): iterative monolithic at 1M triangles under 2 GB peak.

The tree chips are those of benchmarks/pipeline.py (benchmark scenarios on a five-level
mould, not chips).

Run: ``python benchmarks/field.py [--cases demo,6,8,10] [--max-triangles 1500000]
[--direct-max-triangles 400000]``
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

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


def run_case(case: str, solver: str) -> dict:
    """Build ``case`` without its field, then mesh and solve it with ``solver``."""
    from chipflow.build import build_design
    from chipflow.field.chip import estimate_triangles, layout_ports, layout_regions
    from chipflow.field.mesh import build_mesh
    from chipflow.field.shear import shear_stats
    from chipflow.field.solve import solve_on_mesh

    build = build_design(_source(case), field=False)
    layout = build.layout
    names = list(build.solution.network.node_names)
    pressures = {p: float(build.solution.pressure[names.index(p)]) for p in ("inlet", "outlet")}
    out = {
        "case": case,
        "estimate": estimate_triangles(layout),
        "base_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    }
    c0, t0 = time.process_time(), time.perf_counter()
    mesh = build_mesh(layout_regions(layout), layout_ports(layout, pressures))
    t1 = time.perf_counter()
    sol = solve_on_mesh(mesh, pressures, build.fluid.viscosity, solver=solver)
    c2 = time.process_time()
    floor = shear_stats(sol.floor_shear, mesh.area)
    out.update(
        solver=sol.stats["solver"],
        iterations=sol.stats.get("iterations", 0),
        triangles=len(mesh.triangles),
        dofs=sol.stats["dofs"],
        mesh=t1 - t0,
        assemble=sol.stats["assemble_seconds"],
        solve=sol.stats["solve_seconds"],
        cpu=c2 - c0,
        peak_mb=resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
        resistance=sol.resistance("inlet", "outlet"),
        imbalance=abs(sol.port_flows["inlet"] + sol.port_flows["outlet"])
        / abs(sol.port_flows["inlet"]),
        p05=floor.p05,
        p50=floor.p50,
        p95=floor.p95,
    )
    return out


def _estimate(case: str) -> int:
    from chipflow.build import build_design
    from chipflow.field.chip import estimate_triangles

    return estimate_triangles(build_design(_source(case), field=False).layout)


def _fresh(case: str, solver: str) -> dict | None:
    cmd = [sys.executable, __file__, "--case", case, "--solver", solver]
    done = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        tail = done.stderr.strip().splitlines()[-1:]
        print(f"{case} {solver}: failed: {tail}", file=sys.stderr)
        return None
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--case", help=argparse.SUPPRESS)
    parser.add_argument("--solver", default="auto", help=argparse.SUPPRESS)
    parser.add_argument("--estimate", help=argparse.SUPPRESS)
    parser.add_argument("--max-triangles", type=int, default=1_500_000)
    parser.add_argument("--direct-max-triangles", type=int, default=400_000)
    parser.add_argument("--cases", default=",".join(CASES), help="demo,6,8,10 or a subset")
    args = parser.parse_args()
    if args.case:
        print(json.dumps(run_case(args.case, args.solver)))
        return
    if args.estimate:
        print(_estimate(args.estimate))
        return
    rows = []
    print(_header(), flush=True)
    for case in args.cases.split(","):
        est = int(
            subprocess.run(
                [sys.executable, __file__, "--estimate", case],
                capture_output=True,
                text=True,
                check=True,
            ).stdout.split()[-1]
        )
        if est > args.max_triangles:
            print(f"{_name(case):>6} ~{est} triangles estimated: not solved (--max-triangles)")
            continue
        direct = None
        if est <= args.direct_max_triangles:
            direct = _fresh(case, "direct")
            if direct:
                rows.append(direct)
                print(_row(direct), flush=True)
        it = _fresh(case, "iterative")
        if it:
            rows.append(it)
            print(_row(it, direct), flush=True)
    _fit(rows)


def _name(case: str) -> str:
    return "demo" if case == "demo" else f"2^{case}"


def _header() -> str:
    return (
        f"{'chip':>6} {'triangles':>10} {'unknowns':>9} {'solver':>9} {'iter':>5} "
        f"{'mesh s':>7} {'assem s':>7} {'solve s':>8} {'CPU s':>7} {'peak MB':>8} "
        f"{'R [Pa s/m3]':>12} {'p05 Pa':>8} {'p50 Pa':>8} {'p95 Pa':>8} {'dR rel':>8} "
        f"{'dp max Pa':>9}"
    )


def _row(r: dict, ref: dict | None = None) -> str:
    diff = "-", "-"
    if ref is not None:
        d_r = abs(r["resistance"] / ref["resistance"] - 1.0)
        d_p = max(abs(r[k] - ref[k]) for k in ("p05", "p50", "p95"))
        diff = f"{d_r:.1e}", f"{d_p:.1e}"
    return (
        f"{_name(r['case']):>6} {r['triangles']:>10} {r['dofs']:>9} {r['solver']:>9} "
        f"{r['iterations']:>5} {r['mesh']:>7.2f} {r['assemble']:>7.2f} {r['solve']:>8.2f} "
        f"{r['cpu']:>7.1f} {r['peak_mb']:>8.0f} {r['resistance']:>12.5e} {r['p05']:>8.4f} "
        f"{r['p50']:>8.4f} {r['p95']:>8.4f} {diff[0]:>8} {diff[1]:>9}"
    )


def _fit(rows: list[dict]) -> None:
    """Constants of chipflow/field/budget.py from this run (least squares through the rows)."""
    if not rows:
        return
    print("\nconstants for chipflow/field/budget.py (from this run, CPU and peak per triangle):")
    for solver in ("direct", "iterative"):
        mine = [r for r in rows if r["solver"] == solver]
        if not mine:
            continue
        n = np.array([r["triangles"] for r in mine], float)
        cpu = np.array([r["cpu"] for r in mine])
        peak = np.array([r["peak_mb"] - r["base_mb"] for r in mine]) * 2**20
        print(
            f"  {solver:>9}: CPU {np.median(cpu / n) * 1e6:.1f} us per triangle, "
            f"peak above the build's {np.median(peak / n) / 1e3:.2f} kB per triangle "
            f"(medians over {len(mine)} chips)"
        )


if __name__ == "__main__":
    main()
