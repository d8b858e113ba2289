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

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from chipflow.build import Build, DesignSource, build_design
from chipflow.checks.flow import coefficient_of_variation
from chipflow.errors import ChipflowError, SpecError
from chipflow.spec.culture import read_culture
from chipflow.variation.execute import run_tasks
from chipflow.variation.grid import Axis, design_text, grid_points, with_values
from chipflow.variation.problem import seeded_levels, window_bounds
from chipflow.variation.statistics import window_margin

__all__ = ["Sweep", "sweep_design", "point_row", "ROW_KEYS"]

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
        row = point_row(build_design(source, field=False))  # rows hold no field numbers
    except SpecError:
        raise
    except ChipflowError as exc:
        row = {**dict.fromkeys(ROW_KEYS), "status": "error", "failed": [], "message": str(exc)}
    row["values"] = [design_text(v) for v in values]
    return row


def sweep_design(
    source: DesignSource,
    axes: Sequence[Axis],
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    progress: Progress | None = None,
) -> Sweep:
    """Build every point of the grid over ``axes`` of the design ``source``.

    The first point is built here first, so that bad input stops the sweep at once; the
    others run locally in processes or on a Dask cluster (:func:`run_tasks`).

    Raises
    ------
    SpecError
        An unknown key, a value the design file would refuse, or too many points.
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
    first = _point(base, points[0])
    rest = run_tasks(
        _point, base, points[1:], scheduler=scheduler, workers=workers, progress=progress
    )
    return Sweep(str(source.top.data.get("name", "design")), tuple(axes), (first, *rest))
