"""How fast the tolerance Monte Carlo runs, against a plain vectorised Monte Carlo of it.

For the demo design and for a 2^10-bed-channel tree (the benchmark design of
``benchmarks/pipeline.py``) it prints, in processor time measured side by side in this
process:

- ``plain``: the floor, a plain vectorised Monte Carlo of the same drawn network written here
  with numpy and scipy alone: draw the perturbations (one depth error per mould level, one
  width bias, one supply and one viscosity error per chip), form every channel's conductance
  from the exact duct series (:func:`chipflow.physics.duct.resistance`, evaluated once per
  distinct cross-section and sample), assemble the nodal systems of all samples as one
  block-diagonal sparse matrix and solve it (``scipy.sparse.linalg.spsolve``), then the flows,
  the floor shear of every channel and its per-level percentiles;
- ``vary``: :func:`chipflow.variation.vary.vary_build` in this process (one worker), which
  also gives residence times, pressures, yield, worst corner and ranking;

for a small run (``--small`` samples: the fixed cost) and a large one (``--samples``), their
per-sample cost (the difference over the difference of samples) and the ratio of the two
per-sample costs. It then times whole processes: ``chipflow vary`` with one sample and with
``--samples`` against the bare import (``python -c "import numpy, scipy.sparse, pint;
pint.UnitRegistry()"``), so that the command's fixed cost is seen as a whole.

Targets (2-core machine): per-sample cost within 1.5x of the plain Monte Carlo; fixed cost of
``vary_build`` under 0.5 s.

Run: ``python benchmarks/vary.py [--samples 10000] [--small 10] [--repeat 3]``
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from pipeline import BARE, design_text  # noqa: E402

from chipflow.build import DesignSource, build_design  # noqa: E402
from chipflow.physics.duct import resistance, wall_shear_floor  # noqa: E402
from chipflow.spec.reader import parse_design_text  # noqa: E402
from chipflow.spec.tolerances import Tolerances  # noqa: E402
from chipflow.variation.problem import variation_problem  # noqa: E402
from chipflow.variation.vary import vary_build  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
TOL = {"depth": 0.1, "width": 2e-6, "flow": 0.02, "viscosity": 0.05}


def plain_monte_carlo(build, samples: int, seed: int = 0) -> np.ndarray:
    """The floor: per-level 5/50/95 percentiles of the mean floor shear (G, 3) [Pa].

    Written with numpy and scipy alone from the build's network arrays; the same perturbation
    model as ``chipflow vary`` (see the module's text); the samples are solved in batches of
    at most 300,000 channel-samples (one sparse solve each; a single block-diagonal system of
    every sample exceeds SuperLU's memory at 2^10 bed channels).
    """
    batch = max(1, 300_000 // build.solution.network.n_channels)
    rng = np.random.default_rng(seed)
    means = [_plain_batch(build, min(batch, samples - i), rng) for i in range(0, samples, batch)]
    return np.percentile(np.concatenate(means), [5, 50, 95], axis=0).T


def _plain_batch(build, samples: int, rng) -> np.ndarray:
    """Per-level mean floor shear of ``samples`` perturbed networks (S, G) [Pa]."""
    import scipy.sparse as sp
    from scipy.sparse.linalg import spsolve

    sol = build.solution
    net = sol.network
    names = list(net.node_names)
    depth_levels = np.unique(net.depth[~net.round])
    m = depth_levels.size
    draws = rng.uniform(-1.0, 1.0, (samples, m + 3))
    d_err = draws[:, :m] * TOL["depth"]
    bias = draws[:, m] * TOL["width"]
    supply = 1.0 + draws[:, m + 1] * TOL["flow"]
    mu = build.fluid.viscosity * (1.0 + draws[:, m + 2] * TOL["viscosity"])

    # the exact series once per distinct cross-section and sample
    sections, cls = np.unique(
        np.column_stack([net.width, net.depth, net.round]), axis=0, return_inverse=True
    )
    cls = cls.ravel()
    tube = sections[:, 2] > 0
    w = np.where(tube, sections[:, 0], sections[:, 0] + bias[:, None])
    sec_level = np.searchsorted(depth_levels, sections[:, 1]).clip(0, m - 1)
    h = np.where(tube, sections[:, 1], sections[:, 1] * (1.0 + d_err[:, sec_level]))
    r1 = np.asarray(resistance(w, h, 1.0, 1.0, tube))
    t1 = np.asarray(wall_shear_floor(w, h, 1.0, 1.0, tube))
    # the network's own resistance per channel, junction corrections included, as a length
    nominal_r1 = (
        np.asarray(resistance(sections[:, 0], sections[:, 1], 1.0, 1.0, tube))[cls]
        * build.fluid.viscosity
    )
    dp = sol.pressure[net.node_a] - sol.pressure[net.node_b]
    with np.errstate(divide="ignore", invalid="ignore"):
        length = np.where(sol.flow != 0, dp / sol.flow / nominal_r1, net.length)
    g = 1.0 / (r1[:, cls] * mu[:, None] * length)  # (S, C)

    # nodal systems: port pressures fixed, port flows injected (the inlet scaled)
    n = len(names)
    fixed = np.zeros(n, bool)
    p_fixed = np.zeros(n)
    inject = np.zeros(n)
    for port, value in sol.port_pressure.items():
        fixed[names.index(port)] = True
        p_fixed[names.index(port)] = value
    for port, value in sol.port_flow.items():
        if port not in sol.port_pressure:
            inject[names.index(port)] = value
    inlet = names.index("inlet")
    free = np.flatnonzero(~fixed)
    row = -np.ones(n, int)
    row[free] = np.arange(free.size)
    a, b = net.node_a, net.node_b
    f = free.size
    rows, cols, vals = [], [], []
    for x, y in ((a, a), (b, b), (a, b), (b, a)):  # four entries per channel
        keep = ~fixed[x] & ~fixed[y]
        rows.append(row[x[keep]])
        cols.append(row[y[keep]])
        vals.append(g[:, keep] * (1.0 if x is y else -1.0))
    shift = (np.arange(samples) * f)[:, None]
    rr = np.concatenate([r[None, :] + shift for r in rows], axis=1).ravel()
    cc = np.concatenate([c[None, :] + shift for c in cols], axis=1).ravel()
    matrix = sp.csc_matrix((np.concatenate(vals, axis=1).ravel(), (rr, cc)), (samples * f,) * 2)
    scale = np.where(fixed, np.where(np.arange(n) == inlet, 1.0, 0.0), 0.0)
    p_all = p_fixed[None, :] * (1.0 + (supply[:, None] - 1.0) * scale[None, :])
    rhs = np.broadcast_to(inject, (samples, n)).copy()
    rhs[:, inlet] *= np.where(fixed[inlet], 1.0, supply)
    for x, y in ((a, b), (b, a)):  # conductance to a fixed neighbour
        keep = ~fixed[x] & fixed[y]
        np.add.at(rhs, (slice(None), x[keep]), g[:, keep] * p_all[:, y[keep]])
    pressure = p_all.copy()
    pressure[:, free] = spsolve(matrix, rhs[:, free].ravel()).reshape(samples, f)
    q = g * (pressure[:, a] - pressure[:, b])
    tau = t1[:, cls] * mu[:, None] * np.abs(q)
    gen = net.generation
    levels = np.unique(gen[gen >= 0])
    return np.stack([tau[:, gen == lv].mean(axis=1) for lv in levels], axis=1)  # per level


def _cpu(fn) -> float:
    start = time.process_time()
    fn()
    return time.process_time() - start


def _best(fn, repeat: int) -> float:
    return min(_cpu(fn) for _ in range(repeat))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=10_000)
    parser.add_argument("--small", type=int, default=10)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--no-cli", action="store_true", help="skip the whole-process times")
    args = parser.parse_args()
    cases = [
        ("demo (32 bed channels)", build_design(ROOT / "designs" / "demo_endothelial_bed.toml")),
        (
            "2^10 bed channels",
            build_design(
                DesignSource(
                    "bench-10.toml", parse_design_text(design_text(10), "bench-10.toml"), "bench"
                )
            ),
        ),
    ]
    print(
        f"{'network':24} {'channels':>8} {'what':>6} {'fixed [s]':>9} "
        f"{'per sample [us]':>15} {'ratio':>6}"
    )
    for label, build in cases:
        tol = {n: Tolerances(**TOL, samples=n) for n in (args.small, args.samples)}
        variation_problem(build, tol[args.small])  # warm: first-use imports are not per sample
        vary_build(build, tol[args.small], workers=1)
        plain_monte_carlo(build, args.small)
        costs = {}
        for what, run in (
            ("plain", lambda n, b=build: plain_monte_carlo(b, n)),
            ("vary", lambda n, b=build, t=tol: vary_build(b, t[n], workers=1)),
        ):
            small = _best(lambda r=run: r(args.small), args.repeat)
            large = _best(lambda r=run: r(args.samples), args.repeat)
            per = (large - small) / (args.samples - args.small)
            costs[what] = per
            ratio = per / costs["plain"]
            print(
                f"{label:24} {build.solution.network.n_channels:8d} {what:>6} {small:9.3f} "
                f"{per * 1e6:15.1f} {ratio:6.2f}"
            )
    if not args.no_cli:
        _whole_processes(args.samples, args.repeat)


def _whole_processes(samples: int, repeat: int) -> None:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    out = Path(tempfile.mkdtemp(prefix="chipflow-vary-"))
    vary = [sys.executable, "-c", "from chipflow.cli import main; main()", "vary"]
    common = ["demo_endothelial_bed", "--depth-tolerance", "10%", "--width-tolerance", "2um"]
    cases = {
        "bare import": [sys.executable, "-c", BARE],
        "vary demo, 1 sample": [*vary, *common, "--samples", "1", "-o", str(out / "a")],
        f"vary demo, {samples} samples": [
            *vary,
            *common,
            "--samples",
            str(samples),
            "-o",
            str(out / "b"),
        ],
    }
    times: dict[str, list[float]] = {name: [] for name in cases}
    for _ in range(repeat):  # interleaved, so that the machine's load hits every case alike
        for name, argv in cases.items():
            start = os.times()
            subprocess.run(argv, check=True, capture_output=True, env=env)
            end = os.times()
            times[name].append(
                end.children_user
                - start.children_user
                + end.children_system
                - start.children_system
            )
    bare = statistics.median(times["bare import"])
    print(f"\nwhole processes, CPU [s], median of {repeat} interleaved runs (ratio to bare)")
    for name, values in times.items():
        med = statistics.median(values)
        print(f"  {name:<28} {med:6.2f}  {med / bare:5.2f}x")


if __name__ == "__main__":
    main()
