"""Time chipflow.network.solve against a bare sparse solve of the same system.

The networks have the shape chipflow designs: a trunk and a bifurcating distribution tree
ending in ``2**n`` branches, a bed of ``2**n`` channels each split in two halves with a
cross-connection between neighbouring midpoints (so the bed has loops), and a mirrored
collecting tree. That is ``7 * 2**n - 3`` channels; n = 7..17 spans about 2^10 to 2^20
channels. ``--bed-segments 3`` splits each bed channel in three (``9 * 2**n - 4`` channels,
1.18 million at n = 17, just above 2^20).

For each size the script prints, all measured in this run:

- ``solve``: :func:`chipflow.network.solve` (checks, assembly, direct solve, channel flows,
  port flows and the mass-conservation residual);
- ``+fields``: the same plus the first access of a per-channel field, which runs
  ``flow_state`` once for velocity, shear, Reynolds number and residence time;
- ``spsolve``: a bare ``scipy.sparse.linalg.spsolve`` with default settings on the same
  assembled reduced system;
- both ratios to the bare solve, and the peak resident memory of the process so far
  (``resource.ru_maxrss``; it includes both copies of the system held by the script).

Run: ``python benchmarks/network_solve.py [--max-generations 18] [--repeat 1]``
"""

from __future__ import annotations

import argparse
import resource
import sys
import time

import numpy as np
from scipy.sparse.linalg import spsolve

from chipflow.network import Network, reduced_system, solve
from chipflow.physics.fluid import water


def tree_with_bed(n: int, segments: int = 2) -> tuple[Network, int, int]:
    """A mirrored bifurcating tree joined by a looped bed.

    The distribution tree has a trunk and ends in ``2**n`` branches; each bed channel is split
    into ``segments`` pieces in series, and neighbouring bed channels are cross-connected at
    every interior point. Returns the network, the inlet node and the outlet node.
    """
    # Distribution tree: node k (heap numbering, root 1) -> children 2k, 2k+1; the inlet is 0.
    leaves = 2**n
    heap = np.arange(2, 2 * leaves)
    d_a = np.concatenate(([0], heap // 2))
    d_b = np.concatenate(([1], heap))
    d_gen = np.concatenate(([0], np.floor(np.log2(heap)).astype(np.int64)))
    # Collection tree: the mirror image, nodes offset by 2 * leaves; its node 0 is the outlet.
    offset = 2 * leaves
    outlet = offset
    c_a, c_b = offset + d_b, offset + d_a
    # Bed: leaf k of the distribution tree -> interior points -> leaf k of the collection tree.
    dist_leaf = np.arange(leaves, 2 * leaves)
    inner = 4 * leaves + np.arange(leaves * (segments - 1)).reshape(leaves, segments - 1)
    chain = np.column_stack((dist_leaf, inner, offset + dist_leaf))
    bed_a = np.concatenate((chain[:, :-1].ravel(), inner[:-1].ravel()))
    bed_b = np.concatenate((chain[:, 1:].ravel(), inner[1:].ravel()))
    n_series = leaves * segments
    node_a = np.concatenate((d_a, bed_a, c_a))
    node_b = np.concatenate((d_b, bed_b, c_b))
    gen = np.concatenate((d_gen, np.full(bed_a.size, n), d_gen))
    # Murray-like widths: the cross-section area halves every 1.5 generations; depth 50 um.
    width = np.maximum(20e-6, 1.6e-3 / 2.0 ** (gen / 1.5))
    width[d_gen.size + n_series : d_gen.size + bed_a.size] = 20e-6  # cross-connections
    depth = np.full(node_a.size, 50e-6)
    length = np.where(gen == n, 1e-3 / segments, 2e-3 / 2.0 ** (gen / 2.0))
    role = np.concatenate(
        (
            np.full(d_a.size, "distribution"),
            np.full(bed_a.size, "bed"),
            np.full(c_a.size, "collection"),
        )
    )
    n_nodes = 4 * leaves + inner.size
    net = Network.from_arrays(
        node_a, node_b, width, depth, length, generation=gen, role=role, n_nodes=n_nodes
    )
    return net, 0, outlet


def peak_mb() -> float:
    scale = 1024.0 if sys.platform != "darwin" else 1024.0 * 1024.0
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / scale


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--min-generations", type=int, default=7)
    parser.add_argument("--max-generations", type=int, default=17)
    parser.add_argument("--repeat", type=int, default=1, help="take the best of N runs")
    parser.add_argument("--bed-segments", type=int, default=2, help="series pieces per bed channel")
    args = parser.parse_args()
    fluid = water()
    print(
        f"{'gen':>3} {'channels':>9} {'nodes':>9} {'solve [s]':>10} {'+fields [s]':>11} "
        f"{'spsolve [s]':>11} {'ratio':>6} {'ratio+f':>7} {'residual':>9} {'peak RSS [MB]':>13}"
    )
    for n in range(args.min_generations, args.max_generations + 1):
        net, inlet, outlet = tree_with_bed(n, args.bed_segments)
        pressures, flows = {outlet: 0.0}, {inlet: 10e-9 / 60}
        t_solve, t_full, t_bare = np.inf, np.inf, np.inf
        for _ in range(args.repeat):
            start = time.perf_counter()
            sol = solve(net, fluid, pressures, flows)
            t_solve = min(t_solve, time.perf_counter() - start)
            _ = sol.wall_shear_max
            t_full = min(t_full, time.perf_counter() - start)
            system = reduced_system(net, fluid, pressures, flows)
            start = time.perf_counter()
            bare = spsolve(system.matrix, system.rhs)
            t_bare = min(t_bare, time.perf_counter() - start)
        assert np.allclose(bare, sol.pressure[system.free], rtol=1e-8, atol=1e-9)
        print(
            f"{n:>3} {net.n_channels:>9} {net.n_nodes:>9} {t_solve:>10.3f} {t_full:>11.3f} "
            f"{t_bare:>11.3f} {t_solve / t_bare:>6.2f} {t_full / t_bare:>7.2f} "
            f"{sol.residual:>9.1e} {peak_mb():>13.0f}",
            flush=True,
        )


if __name__ == "__main__":
    main()
