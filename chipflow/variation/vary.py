"""Monte Carlo of fabrication and operating tolerances on the network that is drawn.

:func:`vary_build` perturbs the as-drawn network of a built tree design many times (see
:mod:`chipflow.variation.problem` for what a sample changes), solves the samples in batches
(:mod:`chipflow.variation.batch`) here, in local processes or on a Dask cluster
(:mod:`chipflow.variation.execute`) and summarises them (:mod:`chipflow.variation.statistics`):
per level the 5th, 50th and 95th percentiles of floor shear, residence time and pressure drop;
the supply and chip pressures; the spread of the bed flows; the yield; the worst corner; and
the ranking of the tolerances by how much they move the shear.

Channel lengths stay as drawn; junction corrections, if the network adds them, are held at
their nominal equivalent lengths (see :mod:`chipflow.variation.problem`).

The samples are split into batches of a size fixed by the network alone, so the same seed gives
the same numbers whichever way the batches are executed.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from chipflow.build import Build
from chipflow.resources import Estimate, check_memory
from chipflow.spec.tolerances import Tolerances
from chipflow.units import RESULT_UNITS
from chipflow.variation.batch import BatchResult, concatenate, solve_batch
from chipflow.variation.execute import run_tasks
from chipflow.variation.problem import Problem, variation_problem
from chipflow.variation.sampling import corners, one_at_a_time, standard_draws
from chipflow.variation.statistics import (
    ELASTICITY_STEP,
    percentiles,
    sample_passes,
    sensitivity,
    shear_margin,
    worst_corner,
    yield_lower_bound,
)

__all__ = [
    "Variation",
    "vary_build",
    "batch_size",
    "variation_estimate",
    "VARY_UNITS",
    "MODEL_NOTE",
    "WIDTH_BIAS_NOTE",
]

#: Channel-samples per batch: bounds the memory of one batch (about 30 arrays of this size).
BATCH_ELEMENTS = 300_000
#: Channel-samples up to which the run stays in this process unless workers are asked for:
#: about a second of solving (0.3 us per channel and sample, measured by benchmarks/vary.py),
#: less than starting local processes costs.
LOCAL_ELEMENTS = 3_000_000

# -- the estimate made before a run (see variation_estimate) ----------------------------------
#: Channel-samples solved per second of processor time: benchmarks/heavy_steps.py measured
#: 2.7 million (the demo, 1,000,000 samples) and 3.2 million (766 channels, 100,000 samples)
#: on an idle machine, 2026-12-04; benchmarks/vary.py 1.2 million on a loaded one. Half the
#: idle rate, so the estimate errs on the long side.
CHANNEL_SAMPLES_PER_SECOND = 1.5e6
#: Peak memory of one batch being solved [bytes] (about 30 arrays of BATCH_ELEMENTS floats and
#: the factor of its block-diagonal system; measured 80-110 MB).
BATCH_BYTES = 120e6
#: Memory of one local worker process before its first batch [bytes] (the imports and the
#: problem it receives; measured 110-140 MB).
WORKER_BYTES = 150e6
#: Memory of the run before its samples [bytes] (the nominal build and the imports).
BASE_BYTES = 250e6
#: A run estimated to take longer than this [s] or to need more than NOTICE_BYTES says so
#: before it starts.
NOTICE_SECONDS = 10.0
NOTICE_BYTES = 1e9

#: SI units of the keys of the variation results.
VARY_UNITS = {
    **{k: RESULT_UNITS[k] for k in ("residence_time", "pressure_drop", "width", "depth")},
    "floor_shear": "Pa",
    "wall_shear_floor": "Pa",
    "supply_pressure": "Pa",
    "chip_pressure": "Pa",
    "bed_flow": "m^3/s",
    "flow": "m^3/s",
    "bed_flow_spread": "1",
    "yield": "1",
    "yield_standard_error": "1",
    "yield_lower_95": "1",
    "shear_margin": "1",
    "elasticity": "1",
    "shear_change": "1",
    "inside_window": "1",
}

MODEL_NOTE = (
    "One depth error per mould level, one width bias for the whole mask, one supply and one "
    "viscosity error per chip, independent; tubing keeps its size, channel lengths stay as "
    "drawn and any resistance the network adds to a channel (junction corrections) is held as "
    "its nominal equivalent length."
)

#: Added to the model note for a chip with chambers.
CHAMBER_NOTE = (
    " A chamber's conductance and its floor shear per unit flow follow its mould level's depth "
    "error and the width bias with the sensitivities of two 2D re-solves of the chamber (5 % "
    "deeper, two grid steps wider), as powers of (1 + depth error) and exponentials of the "
    "bias; its floor-shear distribution keeps its shape (every percentile scales alike)."
)

#: Added to the model note for a chip with soft roofs.
SOFT_ROOF_NOTE = (
    " Soft roofs: each channel keeps the resistance of the deformed chip at the nominal "
    "operating point (the bulge is not re-solved per sample), and the floor shear per unit "
    "flow is the rigid channel's, so the nominal shear here is the rigid roof's at the "
    "deformed chip's flows."
)

#: What the width bias means (results.json ``width_bias``).
WIDTH_BIAS_NOTE = (
    "total width change: the bias is added to every channel's width, so each side wall moves "
    "by half of it"
)

Progress = Callable[[int, int], None]


@dataclass(frozen=True, eq=False)
class Variation:
    """A finished variation run.

    Attributes
    ----------
    build : Build
        The nominal build.
    problem : Problem
    tolerances : Tolerances
    samples : BatchResult
        Per-sample results (in sample order).
    passes : numpy.ndarray of bool
        Whether each sample passes.
    results : dict
        JSON-able summary in SI units (see :func:`vary_build`).
    """

    build: Build
    problem: Problem
    tolerances: Tolerances
    samples: BatchResult
    passes: np.ndarray
    results: dict[str, Any]

    def _repr_html_(self) -> str:
        """A notebook shows the yield, each level's floor-shear spread and the nominal
        build's profile figure (presentation lives in chipflow.report, loaded only here)."""
        from chipflow.report.notebook import variation_html_view

        return variation_html_view(self.results, self.build.results)


def batch_size(problem: Problem) -> int:
    """Samples per batch, from the network's size alone (never from the machine)."""
    return int(max(1, min(4096, BATCH_ELEMENTS // max(1, problem.n_channels))))


def variation_estimate(
    problem: Problem, tolerances: Tolerances, workers: int | None = None
) -> Estimate:
    """Memory and time of a Monte Carlo run, before it starts.

    Memory: per sample three rows of factors (the draws, the parameters, a batch's copy) and
    four copies of its nine values per level and four more (the batches' results, joined,
    and the statistics made from them): 1.5 kB per sample of the demo measured, 2 kB
    estimated; and per local worker its process and one batch. Time: the channel-samples at
    :data:`CHANNEL_SAMPLES_PER_SECOND`, shared between the workers.

    >>> from types import SimpleNamespace
    >>> p = SimpleNamespace(n_factors=4, n_channels=96, starts=np.zeros(11))
    >>> est = variation_estimate(p, Tolerances(samples=10_000_000), workers=2)
    >>> round(est.memory / 1e9, 1), round(est.seconds)
    (20.8, 320)
    """
    from chipflow.variation.execute import default_workers

    n = int(tolerances.samples)
    levels = int(np.size(problem.starts))
    local = max(1, default_workers() if workers is None else int(workers))
    local = min(local, max(1, -(-n // batch_size(problem))))
    per_sample = 8.0 * (3 * problem.n_factors + 4 * (5 * levels + 4) + 2)
    extra = local * WORKER_BYTES if local > 1 else 0.0
    memory = BASE_BYTES + n * per_sample + local * BATCH_BYTES + extra
    seconds = n * problem.n_channels / CHANNEL_SAMPLES_PER_SECOND / local
    detail = f"{n:,} samples of {problem.n_channels:,} channels on {local} process"
    return Estimate("the Monte Carlo run", memory, seconds, detail + ("es" if local > 1 else ""))


def vary_build(
    build: Build,
    tolerances: Tolerances,
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    progress: Progress | None = None,
    allow_large: bool = False,
    notice: Callable[[str], None] | None = None,
) -> Variation:
    """Run the Monte Carlo of ``tolerances`` on the drawn network of ``build``.

    Parameters
    ----------
    build : Build
        A built tree design.
    tolerances : Tolerances
        Tolerances, distribution, number of samples and seed.
    scheduler : str, optional
        Address of a Dask distributed scheduler to run the batches on.
    workers : int, optional
        Local processes (default one per CPU; runs of at most :data:`LOCAL_ELEMENTS`
        channel-samples stay in this process).
    progress : callable, optional
        Called with ``(done, total)`` batches.
    allow_large : bool
        Run even when the estimate (:func:`variation_estimate`) needs more than 75 % of the
        memory this process may use; by default such a run is refused.
    notice : callable, optional
        Called with one line of text when the run is estimated to take more than
        :data:`NOTICE_SECONDS` or :data:`NOTICE_BYTES` (the command line prints it).

    Returns
    -------
    Variation
        ``results`` holds ``samples``, ``seed``, ``yield``, ``levels`` (per level
        ``generation``, ``role``, ``floor_shear``, ``residence_time``, ``pressure_drop``, each
        ``{p05, p50, p95, nominal}``), ``yield_lower_95`` (one-sided 95 % lower bound),
        ``width_bias`` (its convention), ``supply_pressure``, ``chip_pressure``,
        ``bed_flow_spread``, ``worst_corner``, ``sensitivity`` and ``units``.

    Raises
    ------
    SpecError
        For tolerances out of range for this design, or chambers of a network that is not
        drawn.
    TooLargeError
        A run that needs more memory than this process may use (with its estimate).
    """
    if build.results.get("chambers") and (build.layout is None or not build.layout.chambers):
        from chipflow.errors import SpecError

        names = ", ".join(repr(c["name"]) for c in build.results["chambers"])
        raise SpecError(
            f"{build.source.path}: chipflow vary does not yet vary the chambers of a network "
            f"that is not drawn ({names}): give every node a position (at), or sweep their "
            'keys instead (chipflow sweep --vary "chambers.NAME.depth=...")'
        )
    problem = variation_problem(build, tolerances)
    estimate = variation_estimate(problem, tolerances, None if scheduler else workers)
    check_memory(
        estimate,
        allow_large=allow_large,
        where=build.source.path,
        advice="use fewer samples",
    )
    if notice is not None and (estimate.seconds > NOTICE_SECONDS or estimate.memory > NOTICE_BYTES):
        notice(estimate.text())
    tol = problem.tolerance_vector(tolerances)
    draws = standard_draws(
        tolerances.samples, problem.n_factors, tolerances.seed, tolerances.distribution
    )
    params = draws * tol
    size = batch_size(problem)
    chunks = [params[i : i + size] for i in range(0, params.shape[0], size)]
    if scheduler is None and workers is None:
        if params.shape[0] * problem.n_channels <= LOCAL_ELEMENTS:
            workers = 1  # a small run: no process pool
    parts = run_tasks(
        solve_batch, problem, chunks, scheduler=scheduler, workers=workers, progress=progress
    )
    samples = concatenate(parts)
    passes = sample_passes(problem, samples)

    # designed rows, solved here: nominal, small steps, each tolerance alone, every corner
    steps = np.full(problem.n_factors, ELASTICITY_STEP)
    steps[problem.n_levels] = ELASTICITY_STEP * float(problem.level_widths.min())
    active = np.flatnonzero(tol > 0)
    corner_rows = np.zeros((2**active.size, problem.n_factors))
    corner_rows[:, active] = corners(active.size) * tol[active]
    nominal_row = np.zeros((1, problem.n_factors))
    designed = np.vstack([nominal_row, one_at_a_time(steps), one_at_a_time(tol), corner_rows])
    solved = solve_batch(problem, designed)
    k = problem.n_factors
    cut = np.cumsum([1, 2 * k, 2 * k])
    nominal, small, ends, corner = (_rows(solved, a, b) for a, b in _spans(cut, designed.shape[0]))
    results = _summary(build, problem, tolerances, samples, passes, nominal)
    results["worst_corner"] = worst_corner(
        problem, corner_rows, corner, sample_passes(problem, corner)
    )
    results["sensitivity"] = sensitivity(problem, tol, steps, nominal, small, ends)
    return Variation(build, problem, tolerances, samples, passes, results)


def _soft_roofs(build: Build) -> bool:
    """Whether the build's chip was solved with soft roofs."""
    operation = getattr(build, "operation", None)
    return operation is not None and operation.soft is not None


def _spans(cut: np.ndarray, total: int) -> list[tuple[int, int]]:
    bounds = [0, *cut.tolist(), total]
    return list(zip(bounds[:-1], bounds[1:], strict=True))


def _rows(result: BatchResult, start: int, stop: int) -> BatchResult:
    fields = BatchResult.__dataclass_fields__
    return BatchResult(**{k: getattr(result, k)[start:stop] for k in fields})


def _summary(
    build: Build,
    problem: Problem,
    tolerances: Tolerances,
    samples: BatchResult,
    passes: np.ndarray,
    nominal: BatchResult,
) -> dict[str, Any]:
    n = samples.shear.shape[0]
    y = float(passes.mean())
    levels = []
    window = problem.window
    for g, label in enumerate(problem.labels):  # loop over levels
        row: dict[str, Any] = {
            "generation": problem.generations[g],
            "role": problem.roles[g],
            "label": label,
            "seeded": bool(problem.seeded[g]),
            "floor_shear": percentiles(samples.shear[:, g], nominal.shear[0, g]),
            "residence_time": percentiles(samples.residence[:, g], nominal.residence[0, g]),
            "pressure_drop": percentiles(samples.pressure_drop[:, g], nominal.pressure_drop[0, g]),
        }
        if window is not None:
            inside = (samples.shear_min[:, g] >= window[0]) & (samples.shear_max[:, g] <= window[1])
            row["inside_window"] = float(inside.mean())
        levels.append(row)
    margin = shear_margin(problem, samples)
    design = build.results["design"]
    return {
        "design": {k: design[k] for k in ("name", "file", "sha256")},
        "samples": int(n),
        "seed": int(tolerances.seed),
        "distribution": tolerances.distribution,
        "tolerances": tolerances.to_dict(),
        "yield": y,
        "yield_standard_error": float(np.sqrt(y * (1.0 - y) / n)),
        "yield_lower_95": yield_lower_bound(int(passes.sum()), int(n)),
        "yield_bound": "rule of three" if passes.all() else "Clopper-Pearson",
        "width_bias": WIDTH_BIAS_NOTE,
        "shear_window": build.results.get("shear_window"),
        "levels": levels,
        "supply_pressure": percentiles(samples.supply_pressure, nominal.supply_pressure[0]),
        "chip_pressure": percentiles(samples.chip_pressure, nominal.chip_pressure[0]),
        "bed_flow": percentiles(samples.bed_flow, nominal.bed_flow[0]),
        "bed_flow_spread": percentiles(samples.bed_spread, nominal.bed_spread[0]),
        "shear_margin": None if margin is None else percentiles(margin),
        "limits": {
            "chip_pressure": problem.bond_allowed,
            "supply_pressure": None
            if not np.isfinite(problem.pump_allowed)
            else problem.pump_allowed,
        },
        "chambers": _chamber_summary(problem, samples, nominal),
        "factors": list(problem.names),
        "mould_levels": [float(d) for d in problem.level_depths],
        "model": MODEL_NOTE
        + (CHAMBER_NOTE if problem.n_chambers else "")
        + (SOFT_ROOF_NOTE if _soft_roofs(build) else ""),
        "units": VARY_UNITS,
    }


def _chamber_summary(problem: Problem, samples: BatchResult, nominal: BatchResult) -> list:
    """Per chamber the percentiles over the samples of its flow, its floor-shear p05, p50 and
    p95, and the share of its floor inside the window."""
    out = []
    for k, name in enumerate(problem.chamber_names):  # a handful of chambers
        shear = {
            label: percentiles(samples.chamber_shear[:, k, i], nominal.chamber_shear[0, k, i])
            for i, label in enumerate(("p05", "p50", "p95"))
        }
        row = {
            "name": name,
            "flow": percentiles(samples.chamber_flow[:, k], nominal.chamber_flow[0, k]),
            "floor_shear": shear,
            "inside_window": None,
        }
        if problem.window is not None:
            row["inside_window"] = percentiles(
                samples.chamber_inside[:, k], nominal.chamber_inside[0, k]
            )
        out.append(row)
    return out
