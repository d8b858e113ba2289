"""Solve a batch of perturbed networks at once.

Every sample of a batch has the same sparsity pattern, so the batch is one block-diagonal
system: its values are assembled for all samples in one vectorised step (no loop over
channels or samples) and solved with one sparse LU factorisation (SuperLU). The unknowns are
numbered once, in the minimum-degree order of one block (:mod:`chipflow.variation.problem`),
so the factorisation needs no reordering and its fill stays that of a single network; without
supernode relaxation or panels (``relax=1, panel_size=1``), which only cost time on matrices
this sparse (about ten times, measured on 2^10 bed channels). Duct factors
are evaluated per distinct cross-section and sample, then spread to the channels.

Every batch is checked like a single solve (:func:`chipflow.network.residual.check_solution`,
vectorised over the samples): conservation at every node, the channel law, conditioning.

The same parameter rows always give the same numbers: nothing depends on where or when a
batch runs. Results agree with :func:`chipflow.network.solve` of the same perturbed network to
rounding (about 1e-14 relative).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import splu

from chipflow.network.residual import check_solution
from chipflow.physics.duct import cross_section_area, resistance, wall_shear_floor
from chipflow.variation.problem import Problem

__all__ = ["BatchResult", "solve_batch", "concatenate", "perturbed_sizes"]


@dataclass(frozen=True, eq=False)
class BatchResult:
    """Per-sample results of a batch (S samples, G levels), SI units.

    Attributes
    ----------
    shear, shear_min, shear_max : numpy.ndarray
        (S, G) mean, lowest and highest floor wall shear of each level [Pa].
    residence : numpy.ndarray
        (S, G) mean residence time of each level [s].
    pressure_drop : numpy.ndarray
        (S, G) mean pressure drop along one channel of each level [Pa].
    supply_pressure : numpy.ndarray
        (S,) highest port pressure: what the supply gives [Pa].
    chip_pressure : numpy.ndarray
        (S,) highest on-chip pressure: what the bond holds [Pa].
    bed_spread : numpy.ndarray
        (S,) coefficient of variation of the bed-channel flows [-].
    bed_flow : numpy.ndarray
        (S,) mean flow per bed channel [m^3/s].
    chamber_flow : numpy.ndarray
        (S, H) flow through each chamber [m^3/s].
    chamber_shear : numpy.ndarray
        (S, H, 3) each chamber's floor-shear p05, p50, p95 [Pa].
    chamber_inside : numpy.ndarray
        (S, H) share of each chamber's floor inside the window [1] (1 without a window).
    """

    shear: np.ndarray
    shear_min: np.ndarray
    shear_max: np.ndarray
    residence: np.ndarray
    pressure_drop: np.ndarray
    supply_pressure: np.ndarray
    chip_pressure: np.ndarray
    bed_spread: np.ndarray
    bed_flow: np.ndarray
    chamber_flow: np.ndarray
    chamber_shear: np.ndarray
    chamber_inside: np.ndarray


def concatenate(parts: list[BatchResult]) -> BatchResult:
    """Batches joined in order."""
    fields = BatchResult.__dataclass_fields__
    return BatchResult(**{k: np.concatenate([getattr(p, k) for p in parts]) for k in fields})


def perturbed_sizes(problem: Problem, params: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Width and depth of every cross-section class in every sample: two (S, K) arrays [m].

    Rectangular classes take the width bias (column ``n_levels``) and their level's relative
    depth error; tubes keep their diameter, and so do a chamber's equivalent links (their
    resistance follows the chamber's sensitivities instead).
    """
    m = problem.n_levels
    rect = ~problem.class_round
    if problem.n_chambers:  # a chamber's links: scaled as a whole (_chamber_links)
        rect = rect.copy()
        rect[problem.cls[problem.chamber_of >= 0]] = False
    level = problem.class_level.clip(0, None)
    width = np.where(rect, problem.class_width + params[:, m : m + 1], problem.class_width)
    depth = np.where(rect, problem.class_depth * (1.0 + params[:, level]), problem.class_depth)
    return width, depth


def solve_batch(problem: Problem, params: np.ndarray) -> BatchResult:
    """Solve the perturbed networks given by the rows of ``params``.

    Parameters
    ----------
    problem : Problem
    params : numpy.ndarray
        (S, n_factors) parameter matrix (see :mod:`chipflow.variation.sampling`).

    Returns
    -------
    BatchResult

    Raises
    ------
    NetworkError
        When a sample fails the self-check (:mod:`chipflow.network.residual`), checked for
        every sample of the batch at once.
    """
    params = np.atleast_2d(np.asarray(params, dtype=float))
    s = params.shape[0]
    m = problem.n_levels
    width, depth = perturbed_sizes(problem, params)
    tube = problem.class_round
    mu = problem.viscosity * (1.0 + params[:, m + 2])
    supply = 1.0 + params[:, m + 1]
    # per class and sample, for unit length, viscosity and flow; spread to the channels
    unit_r = np.asarray(resistance(width, depth, 1.0, 1.0, tube))
    unit_tau = np.asarray(wall_shear_floor(width, depth, 1.0, 1.0, tube))
    area = np.asarray(cross_section_area(width, depth, tube))
    cls = problem.cls
    r = unit_r[:, cls] * (mu[:, None] * problem.hydraulic_length)
    if problem.n_chambers:
        r = _chamber_links(problem, params, r, mu)
    g = 1.0 / r

    # boundary values of each sample: the inlet supply scaled, the rest nominal
    inlet = problem.inlet_node
    fixed = np.broadcast_to(problem.fixed_pressure, (s, problem.n_nodes)).copy()
    injected = np.broadcast_to(problem.injected, (s, problem.n_nodes)).copy()
    fixed[:, inlet] *= supply
    injected[:, inlet] *= supply

    free = problem.free
    f = free.size
    pressure = fixed
    if f:
        diagonal = np.asarray((problem.incidence.T @ g.T).T)
        off = -g[:, problem.both_free]
        data = np.concatenate([diagonal, off, off], axis=1).ravel()
        shift = (np.arange(s) * f)[:, None]
        rows = (problem.pattern_rows + shift).ravel()
        cols = (problem.pattern_cols + shift).ravel()
        matrix = sp.csc_matrix((data, (rows, cols)), shape=(s * f, s * f))
        rhs = injected[:, free] + np.asarray(
            (problem.boundary.T @ (g * fixed[:, problem.fixed_end]).T).T
        )
        # no supernode relaxation or panels: these matrices are too sparse to gain from them
        lu = splu(matrix, permc_spec="NATURAL", relax=1, panel_size=1)
        x = lu.solve(rhs.ravel())
        pressure[:, free] = np.reshape(x, (s, f))

    with np.errstate(all="ignore"):
        q = g * (pressure[:, problem.node_a] - pressure[:, problem.node_b])
    fixed_nodes = np.ones(problem.n_nodes, dtype=bool)
    fixed_nodes[free] = False
    check_solution(
        problem.node_a,
        problem.node_b,
        r,
        pressure,
        q,
        injected=injected,
        fixed=fixed_nodes,
        sizes={
            "wide": problem.class_width[cls],
            "deep": problem.class_depth[cls],
            "long": problem.length,
        },
    )
    aq = np.abs(q)
    tau = unit_tau[:, cls] * (mu[:, None] * aq)
    with np.errstate(divide="ignore"):
        residence = np.where(aq > 0, problem.length * area[:, cls] / aq, np.inf)
    drop = aq * r

    order, starts, counts = problem.order, problem.starts, problem.counts

    def mean(values: np.ndarray) -> np.ndarray:
        return np.add.reduceat(values[:, order], starts, axis=1) / counts

    chains = counts if problem.chains is None else problem.chains

    def along(values: np.ndarray) -> np.ndarray:
        """Per level, the mean over its chains of segments of their sums."""
        return np.add.reduceat(values[:, order], starts, axis=1) / chains

    bed = aq[:, problem.bed]
    if problem.bed.size:
        bed_mean = bed.mean(axis=1)
        spread = bed.std(axis=1) / bed_mean
    else:
        bed_mean = spread = np.full(s, np.nan)
    chamber_flow, chamber_shear, chamber_inside = _chamber_results(problem, params, q, mu)
    return BatchResult(
        shear=mean(tau),
        shear_min=np.minimum.reduceat(tau[:, order], starts, axis=1),
        shear_max=np.maximum.reduceat(tau[:, order], starts, axis=1),
        residence=along(residence),
        pressure_drop=along(drop),
        supply_pressure=pressure[:, problem.port_nodes].max(axis=1),
        chip_pressure=pressure[:, problem.chip_nodes].max(axis=1),
        bed_spread=spread,
        bed_flow=bed_mean,
        chamber_flow=chamber_flow,
        chamber_shear=chamber_shear,
        chamber_inside=chamber_inside,
    )


def _chamber_scale(problem: Problem, params: np.ndarray, column: int) -> np.ndarray:
    """(S, H) ``exp(a ln(1 + e) + b bias)`` with each chamber's sensitivities ``a, b`` from
    ``chamber_sensitivity[:, column:column + 2]`` (0: conductance, 2: shear per flow)."""
    m = problem.n_levels
    sens = problem.chamber_sensitivity
    e = params[:, problem.chamber_level]
    bias = params[:, m : m + 1]
    return np.exp(sens[:, column] * np.log1p(e) + sens[:, column + 1] * bias)


def _chamber_links(problem: Problem, params: np.ndarray, r: np.ndarray, mu: np.ndarray):
    """``r`` with each chamber's links at their nominal resistance over the chamber's
    conductance factor (the duct law does not hold for a chamber's equivalent links)."""
    links = np.flatnonzero(problem.chamber_of >= 0)
    width = problem.class_width[problem.cls[links]]
    depth = problem.class_depth[problem.cls[links]]
    nominal = np.asarray(resistance(width, depth, 1.0, 1.0)) * problem.hydraulic_length[links]
    factor = _chamber_scale(problem, params, 0)[:, problem.chamber_of[links]]
    r = r.copy()
    r[:, links] = nominal * mu[:, None] / factor
    return r


def _chamber_results(problem: Problem, params: np.ndarray, q: np.ndarray, mu: np.ndarray):
    """Each chamber's flow, floor-shear percentiles and share inside the window per sample:
    the nominal floor shear scaled by the viscosity, the flow and the shear per flow."""
    s, h = q.shape[0], problem.n_chambers
    if not h:
        return np.zeros((s, 0)), np.zeros((s, 0, 3)), np.zeros((s, 0))
    flow = q @ problem.chamber_inflow.T
    factor = (mu / problem.viscosity)[:, None] * (flow / problem.chamber_flow)
    factor = factor * _chamber_scale(problem, params, 2)
    shear = factor[:, :, None] * problem.chamber_shear[None, :, :]
    inside = np.ones((s, h))
    if problem.window is not None:
        low, high = problem.window
        for k, (tau, share) in enumerate(problem.chamber_cdf):  # a handful of chambers
            below = np.interp(low / factor[:, k], tau, share, left=0.0, right=1.0)
            top = np.interp(high / factor[:, k], tau, share, left=0.0, right=1.0)
            inside[:, k] = top - below
    return flow, shear, inside
