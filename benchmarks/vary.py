"""How fast the tolerance Monte Carlo runs, against one nominal solve of the same network.

For the demo design and for a 2^10-bed-channel tree (the benchmark design of
``benchmarks/pipeline.py``), prints: the time of one nominal solve with
:func:`chipflow.network.solve`, the time of ``--samples`` samples with ``chipflow vary``'s
batched solver in this process and in local processes, the samples per second, and the ratio
of the per-sample cost to the nominal solve (below 1: a sample costs less than solving the
network once the ordinary way). Every number comes from this run.

Target (2-core machine): 10,000 demo samples in under 10 s.

Run: ``python benchmarks/vary.py [--samples 10000] [--workers 2]``
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from pipeline import design_text  # noqa: E402

from chipflow.build import DesignSource, build_design  # noqa: E402
from chipflow.network import solve  # noqa: E402
from chipflow.spec.reader import parse_design_text  # noqa: E402
from chipflow.spec.tolerances import Tolerances  # noqa: E402
from chipflow.variation.vary import vary_build  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def nominal_solve_time(build, repeats: int = 20) -> float:
    """Best of ``repeats`` solves of the build's network with its own boundary values [s]."""
    sol = build.solution
    net = sol.network
    flows = {n: sol.port_flow[n] for n in sol.port_flow if n not in sol.port_pressure}
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        solve(net, build.fluid, sol.port_pressure, flows)
        best = min(best, time.perf_counter() - start)
    return best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=10_000)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    cases = [
        ("demo (32 bed channels)", build_design(ROOT / "designs" / "demo_endothelial_bed.toml")),
        (
            "2^10 bed channels",
            build_design(
                DesignSource(
                    "bench-10.toml",
                    parse_design_text(design_text(10), "bench-10.toml"),
                    "bench",
                )
            ),
        ),
    ]
    tol = Tolerances(depth=0.1, width=2e-6, flow=0.02, viscosity=0.05, samples=args.samples)
    print(
        f"{'network':24} {'channels':>8} {'nominal solve [ms]':>18} {'workers':>7} "
        f"{'samples':>8} {'time [s]':>9} {'samples/s':>10} {'sample/solve':>12}"
    )
    for label, build in cases:
        nominal = nominal_solve_time(build)
        for workers in sorted({1, args.workers}):
            start = time.perf_counter()
            vary_build(build, tol, workers=workers)
            elapsed = time.perf_counter() - start
            rate = args.samples / elapsed
            print(
                f"{label:24} {build.solution.network.n_channels:8d} {nominal * 1e3:18.3f} "
                f"{workers:7d} {args.samples:8d} {elapsed:9.2f} {rate:10.0f} "
                f"{1.0 / rate / nominal:12.3f}"
            )


if __name__ == "__main__":
    main()
