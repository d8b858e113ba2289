"""Run a design sweep: every grid point sized, drawn, solved and checked like a build.

:func:`sweep_design` builds each point of a grid (:mod:`chipflow.variation.grid`) with
:func:`chipflow.build.build_design`, the same call ``chipflow build`` makes, and keeps one row
per point: its status, the worst margin of the seeded levels' floor shear to the window, the
pressures and the bed. A point whose targets cannot be met or whose drawing does not fit is
kept as an ``error`` row with the reason; bad input (an unknown key, a value of the wrong
unit) stops the sweep.

The *worst margin* of a point is ``min(tau / low - 1, 1 - tau / high)`` over the seeded levels'
floor shear (as checked by the build) and each chamber's floor from its p05 to its p95:
positive inside the window, negative outside.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from chipflow.build import Build, DesignSource, build_design
from chipflow.checks.flow import coefficient_of_variation
from chipflow.errors import ChipflowError, SpecError
from chipflow.resources import Estimate, check_memory
from chipflow.spec.culture import read_culture
from chipflow.variation.execute import run_tasks
from chipflow.variation.grid import Axis, design_text, grid_points, with_values
from chipflow.variation.problem import seeded_levels, window_bounds
from chipflow.variation.statistics import window_margin

__all__ = ["Sweep", "sweep_design", "sweep_estimate", "point_row", "ROW_KEYS"]

#: Numeric columns of a sweep row and their SI units.
ROW_KEYS = {
    "worst_shear_margin": "1",
    "floor_shear_min": "Pa",
    "floor_shear_max": "Pa",
    "bed_floor_shear": "Pa",
    "supply_pressure": "Pa",
    "chip_pressure": "Pa",
    "bed_residence_time": "s",
    "bed_flow_spread": "1",
}

Progress = Callable[[int, int], None]


@dataclass(frozen=True)
class Sweep:
    """A finished sweep.

    Attributes
    ----------
    name : str
        Design name.
    axes : tuple of Axis
    rows : tuple of dict
        One per grid point, first axis slowest: ``values`` (texts), ``status``
        ("pass", "warn", "fail" or "error"), the :data:`ROW_KEYS` (None where not defined),
        ``failed`` (names of failing checks) and ``message``.
    """

    name: str
    axes: tuple[Axis, ...]
    rows: tuple[dict[str, Any], ...]


def point_row(build: Build) -> dict[str, Any]:
    """The sweep row of one built point (without its grid values)."""
    rows = build.results["generations"]
    sol = build.solution
    net = sol.network
    row: dict[str, Any] = dict.fromkeys(ROW_KEYS)
    window = build.results.get("shear_window")
    chambers = build.results.get("chambers") or []
    if rows or chambers:
        mode = read_culture(build.source.top).seeded
        seeded = seeded_levels([r["role"] for r in rows], mode, bool(chambers))
        tau = np.array([r["wall_shear_floor"] for r in rows])[seeded]
        # a chamber's floor spans its p05 to its p95
        low_tau = np.r_[tau, [c["floor_shear"]["p05"] for c in chambers]]
        high_tau = np.r_[tau, [c["floor_shear"]["p95"] for c in chambers]]
        row["floor_shear_min"], row["floor_shear_max"] = float(low_tau.min()), float(high_tau.max())
        if window:
            low, high = window_bounds(window)
            row["worst_shear_margin"] = float(window_margin(low_tau, high_tau, low, high).min())
        bed = [r for r in rows if r["role"] == "bed"]
        if bed:
            row["bed_floor_shear"] = bed[0]["wall_shear_floor"]
            row["bed_residence_time"] = bed[0]["residence_time"]
    row["supply_pressure"] = build.results["totals"]["inlet_pressure"]
    on_chip = net.role != "tubing"
    chip_nodes = np.union1d(net.node_a[on_chip], net.node_b[on_chip])
    row["chip_pressure"] = float(sol.pressure[chip_nodes].max())
    bed_flows = np.abs(sol.flow[net.role == "bed"])
    if bed_flows.size:
        row["bed_flow_spread"] = float(coefficient_of_variation(bed_flows))
    row["status"] = build.status
    row["failed"] = [c.name for c in build.checks if c.status == "fail"]
    row["message"] = ""
    return row


def _point(base: tuple[dict, str, tuple[str, ...]], values: tuple[Any, ...]) -> dict[str, Any]:
    data, path, keys = base
    source = DesignSource.from_dict(with_values(data, keys, values), path)
    try:
        build = build_design(source, field=False)  # rows hold no field numbers
        row = point_row(build)
        row["_channels"] = build.solution.network.n_channels  # for the estimate, then dropped
    except SpecError:
        raise
    except ChipflowError as exc:
        row = {**dict.fromkeys(ROW_KEYS), "status": "error", "failed": [], "message": str(exc)}
    row["values"] = [design_text(v) for v in values]
    return row


#: A sweep estimated to take longer than this [s] says so before it goes on.
NOTICE_SECONDS = 10.0


def sweep_estimate(
    points: int, first_seconds: float, channels: int, workers: int | None = None
) -> Estimate:
    """Memory and time of the rest of a sweep, from its first point.

    Time: the first point's processor time for every other point, shared between the
    workers; memory: one build per worker (:func:`chipflow.layout.budget.estimate_size` of
    the first point's drawn channels, a whole build's peak).

    >>> est = sweep_estimate(10_000, 1.5, 94, workers=2)
    >>> est.detail, round(est.seconds / 3600, 1), round(est.memory / 1e6)
    ('9,999 grid points on 2 processes', 2.1, 357)
    """
    from chipflow.layout.budget import estimate_size
    from chipflow.variation.execute import default_workers

    rest = max(0, points - 1)
    local = max(1, min(default_workers() if workers is None else int(workers), max(rest, 1)))
    per_point = estimate_size(channels).memory
    detail = f"{rest:,} grid points on {local} process" + ("es" if local > 1 else "")
    return Estimate("the sweep", local * per_point, rest * first_seconds / local, detail)


def sweep_design(
    source: DesignSource,
    axes: Sequence[Axis],
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    progress: Progress | None = None,
    allow_large: bool = False,
    notice: Callable[[str], None] | None = None,
) -> Sweep:
    """Build every point of the grid over ``axes`` of the design ``source``.

    The first point is built here first, so that bad input stops the sweep at once; the
    others run locally in processes or on a Dask cluster (:func:`run_tasks`).

    After the first point, the rest is estimated (:func:`sweep_estimate`): ``notice`` gets
    one line when it will take more than :data:`NOTICE_SECONDS`, and a sweep whose workers
    need more than 75 % of the memory this process may use is refused unless
    ``allow_large``.

    Raises
    ------
    SpecError
        An unknown key, a value the design file would refuse, or too many points.
    TooLargeError
        Workers that would need more memory than this process may use.
    """
    if not axes:
        raise SpecError("give at least one --vary KEY=VALUES")
    keys = tuple(a.key for a in axes)
    if len(set(keys)) != len(keys):
        raise SpecError("--vary: each key may be swept only once")
    from chipflow.spec.network import is_network_design

    if "tree" not in source.top and not is_network_design(source.top):
        raise SpecError(
            f"{source.path}: sweeps apply to tree designs ([tree]) and explicit networks "
            "([[channels]] and [[tubes]])"
        )
    points = grid_points(axes)
    base = (dict(source.top.data), source.path, keys)
    started = time.process_time()
    first = _point(base, points[0])
    estimate = sweep_estimate(
        len(points),
        time.process_time() - started,
        first.pop("_channels", 0),
        None if scheduler else workers,
    )
    check_memory(estimate, allow_large=allow_large, where=source.path, advice="use --workers 1")
    if notice is not None and estimate.seconds > NOTICE_SECONDS:
        notice(estimate.text())
    rest = run_tasks(
        _point, base, points[1:], scheduler=scheduler, workers=workers, progress=progress
    )
    for row in rest:
        row.pop("_channels", None)
    return Sweep(str(source.top.data.get("name", "design")), tuple(axes), (first, *rest))
