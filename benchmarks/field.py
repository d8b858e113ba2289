"""The composed field against the monolithic solve, on the demo and trees of 2^6 to 2^12 bed
channels.

Each solve runs in a fresh process with the field cache off, so that its time is a first
build's and its peak memory its own. Per chip and method it prints the triangles meshed and
solved, the reduced unknowns of the monolithic system (for the composed field: its pieces, of
how many kinds, and straight bodies), the solver and its iterations, three wall times
(monolithic: meshing, assembly, solve; composed: cutting the chip, solving its distinct
pieces, joining them and gathering the floor shear), the CPU time of the whole field, the peak
resident memory of the process (the build of the chip included), the chip resistance
[Pa s/m^3] and the 5th, 50th and 95th percentiles of the floor shear [Pa] over the chip's
floor area (the quadratic velocity sampled nine times per triangle), at the network's inlet
and outlet pressures. The last columns compare each monolithic solve with the composed field
of the same chip (relative difference of the resistance, largest relative difference of the
three percentiles).

The monolithic direct solve is skipped above ``--direct-max-triangles`` and the iterative one
above ``--max-triangles`` (their estimated meshes); the composed field is always solved. At
the end it prints the constants of :mod:`chipflow.field.budget` fitted to the monolithic rows.

Targets (2-core machine): composed field of the demo under 3 s and 500 MB, of 2^8 under 10 s
and 1 GB, of 2^12 under 60 s and 2 GB; composed against monolithic within 0.3 % on the
resistance and 1 % on the percentiles; iterative monolithic at 1M triangles under 2 GB.

The tree chips are those of benchmarks/pipeline.py (benchmark scenarios on a five-level
mould, not chips).

Run: ``python benchmarks/field.py [--cases demo,6,8,10,12] [--max-triangles 1500000]
[--direct-max-triangles 400000]``
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

CASES = ("demo", "6", "8", "10", "12")


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
    """Build ``case`` without its field, then solve its field with ``solver`` (``direct``,
    ``iterative``, or ``composed``)."""
    from chipflow.build import build_design
    from chipflow.field.chip import estimate_triangles, layout_ports, layout_regions
    from chipflow.field.compose import compose_field
    from chipflow.field.mesh import build_mesh
    from chipflow.field.shear import sampled_floor_stats
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
    if solver == "composed":
        field = compose_field(layout, pressures, build.fluid.viscosity)
        st = field.stats
        out.update(
            solver="composed",
            iterations=0,
            triangles=st["triangles"],
            dofs=f"{st['pieces']}/{st['distinct']}/{st['bodies']}",
            mesh=st["cut_seconds"],
            assemble=st["solve_seconds"],
            solve=st["join_seconds"] + st["shear_seconds"],
            cpu=time.process_time() - c0,
            peak_mb=resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
            resistance=field.resistance("inlet", "outlet"),
            p05=field.floor.p05,
            p50=field.floor.p50,
            p95=field.floor.p95,
        )
        return out
    mesh = build_mesh(layout_regions(layout), layout_ports(layout, pressures))
    t1 = time.perf_counter()
    sol = solve_on_mesh(mesh, pressures, build.fluid.viscosity, solver=solver)
    c2 = time.process_time()
    floor = sampled_floor_stats(sol)
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
    env = {**os.environ, "CHIPFLOW_FIELD_CACHE": "off"}  # a first build's time
    done = subprocess.run(cmd, capture_output=True, text=True, check=False, env=env)
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
    parser.add_argument("--cases", default=",".join(CASES), help="demo,6,8,10,12 or a subset")
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
        composed = _fresh(case, "composed")
        if composed:
            print(_row(composed), flush=True)
        if est > args.max_triangles:
            print(f"{_name(case):>6} ~{est} triangles estimated: no monolithic solve")
            continue
        solver = "direct" if est <= args.direct_max_triangles else "iterative"
        mono = _fresh(case, solver)
        if mono:
            rows.append(mono)
            print(_row(mono, composed), flush=True)
    _fit(rows)


def _name(case: str) -> str:
    return "demo" if case == "demo" else f"2^{case}"


def _header() -> str:
    return (
        f"{'chip':>6} {'triangles':>10} {'unknowns':>14} {'solver':>9} {'iter':>5} "
        f"{'t1 s':>7} {'t2 s':>7} {'t3 s':>7} {'CPU s':>7} {'peak MB':>8} "
        f"{'R [Pa s/m3]':>12} {'p05 Pa':>8} {'p50 Pa':>8} {'p95 Pa':>8} {'dR rel':>8} "
        f"{'dp rel':>8}"
    )


def _row(r: dict, ref: dict | None = None) -> str:
    diff = "-", "-"
    if ref is not None:
        d_r = abs(r["resistance"] / ref["resistance"] - 1.0)
        d_p = max(abs(r[k] / ref[k] - 1.0) for k in ("p05", "p50", "p95"))
        diff = f"{d_r:.1e}", f"{d_p:.1e}"
    return (
        f"{_name(r['case']):>6} {r['triangles']:>10} {r['dofs']!s:>14} {r['solver']:>9} "
        f"{r['iterations']:>5} {r['mesh']:>7.2f} {r['assemble']:>7.2f} {r['solve']:>7.2f} "
        f"{r['cpu']:>7.1f} {r['peak_mb']:>8.0f} {r['resistance']:>12.5e} {r['p05']:>8.4f} "
        f"{r['p50']:>8.4f} {r['p95']:>8.4f} {diff[0]:>8} {diff[1]:>8}"
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
