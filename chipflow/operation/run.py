"""Time-varying operation of a solved network: one call for the build.

:func:`operate` reads the steady solution and the :class:`~chipflow.operation.model.OperationSpec`
and returns an :class:`Operation`: per-channel and per-level statistics of the flow and the
floor shear over time, the wall deformation, the compliances, the checks and a JSON-able
results dict. :func:`steady_boundary` gives the steady supply a rocking platform stands for.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from chipflow.checks.cell_types import ShearWindow
from chipflow.checks.operation import (
    check_deformation,
    check_drain,
    check_flow_reversal,
    check_inertia,
    check_rocker,
    check_time_in_window,
)
from chipflow.checks.pressure import check_bond_pressure
from chipflow.checks.result import CheckResult
from chipflow.errors import SpecError
from chipflow.network import Solution
from chipflow.network.model import Network
from chipflow.network.summary import generation_labels, level_groups
from chipflow.network.supply import STANDARD_GRAVITY
from chipflow.operation.compliance import (
    air_compliance,
    plate_rigidity,
    roof_compliance,
    tube_compliance,
)
from chipflow.operation.deformation import deflection_scale, resistance_ratio
from chipflow.operation.model import OperationSpec
from chipflow.operation.modes import (
    SAMPLES,
    draining_mode,
    pulsatile_mode,
    rocker_mode,
    thin,
    total_resistance,
)
from chipflow.operation.reservoirs import rocker_cycle
from chipflow.physics.duct import wall_shear_floor
from chipflow.spec.culture import Limits

__all__ = ["Operation", "operate", "steady_boundary", "node_compliance", "attach", "SAMPLES"]


@dataclass(frozen=True, eq=False)
class Operation:
    """What time-varying operation gives.

    Attributes
    ----------
    mode : str
        "pulsatile", "draining", "rocker" or "steady".
    time : numpy.ndarray
        Instants [s] of the columns of ``flow``.
    flow : numpy.ndarray, shape (channels, instants) or (channels, 0)
        Channel flows over time [m^3/s].
    shear_per_flow : numpy.ndarray
        Floor wall shear per unit flow of every channel [Pa s/m^3].
    level_fields : list of dict
        Keys to add to each per-level row of the results, in row order.
    checks : tuple of CheckResult
    results : dict
        JSON-able summary (``results["operation"]``).
    spec : OperationSpec or None
        What was asked for (port keys as node names), e.g. to re-run with changes.
    """

    mode: str
    time: np.ndarray
    flow: np.ndarray
    shear_per_flow: np.ndarray
    level_fields: list[dict[str, Any]] = field(default_factory=list)
    checks: tuple[CheckResult, ...] = ()
    results: dict[str, Any] = field(default_factory=dict)
    spec: OperationSpec | None = None


def node_compliance(spec: OperationSpec, solution: Solution) -> tuple[np.ndarray, dict]:
    """Compliance from every node to the surroundings [m^3/Pa] and the totals by source.

    Half of each soft channel's or tube's compliance sits at each of its ends.
    """
    net, n = solution.network, solution.network.n_nodes
    per_channel = np.zeros(net.n_channels)
    totals = {"roofs": 0.0, "tubing_walls": 0.0, "lumped": 0.0, "trapped_air": 0.0}
    rect = ~net.round
    if spec.walls is not None:
        b = plate_rigidity(spec.walls.modulus, spec.walls.roof_thickness, spec.walls.poisson_ratio)
        per_channel[rect] = roof_compliance(net.width[rect], net.length[rect], b)
        totals["roofs"] = float(per_channel[rect].sum())
    if spec.tubing is not None:
        tube = net.round
        if np.any(spec.tubing.outer_diameter <= net.width[tube]):
            raise SpecError(
                "supply.tubing_outer_diameter: must be larger than the tubing's inner diameter"
            )
        per_channel[tube] = tube_compliance(
            net.width[tube],
            spec.tubing.outer_diameter,
            net.length[tube],
            spec.tubing.modulus,
            spec.tubing.poisson_ratio,
        )
        totals["tubing_walls"] = float(per_channel[tube].sum())
    c = np.bincount(net.node_a, per_channel / 2, n) + np.bincount(net.node_b, per_channel / 2, n)
    for node, value in spec.compliances.items():
        c[net.node_index(node)] += value
        totals["lumped"] += value
    for node, volume in spec.air_volumes.items():
        i = net.node_index(node)
        value = float(air_compliance(volume, solution.pressure[i]))
        c[i] += value
        totals["trapped_air"] += value
    return c, totals


def steady_boundary(
    spec: OperationSpec,
    network: Network,
    fluid,
    pressures: Mapping[str, float],
    flows: Mapping[str, float],
    inlet: str,
    outlet: str,
) -> tuple[dict, dict]:
    """The steady supply the results table stands for.

    A rocking platform is solved at the time average of the head that drives it in either
    direction, so that the steady table shows the time-averaged flow and floor shear
    magnitudes (the shear is proportional to the flow). Other modes keep their supply.
    """
    if spec.rocker is None:
        return dict(pressures), dict(flows)
    r = spec.rocker
    cycle = rocker_cycle(
        total_resistance(network, fluid, inlet, outlet),
        r.area,
        r.spacing,
        r.tilt_angle,
        r.period,
        fluid.density,
    )
    rho_g = fluid.density * STANDARD_GRAVITY
    mean_head = float(np.abs(cycle.head_difference).mean())
    return {inlet: rho_g * (r.head + mean_head), outlet: rho_g * r.head}, {}


def operate(
    spec: OperationSpec,
    solution: Solution,
    rows: list[dict[str, Any]],
    window: ShearWindow | None,
    seeded: str = "all",
    inlet: str = "inlet",
    outlet: str = "outlet",
    limits: Limits | None = None,
) -> Operation:
    """Time-varying operation of the solved network (see the module documentation).

    Parameters
    ----------
    spec : OperationSpec
        Port keys already mapped onto node names.
    solution : Solution
        The steady solution (the mean of a pulsatile supply, the start of draining).
    rows : list of dict
        Per-level rows (:func:`chipflow.network.summary.level_rows`).
    window : ShearWindow or None
    seeded : {"all", "bed"}
        Which levels carry cells.
    inlet, outlet : str
        The supply nodes of a tree design (rocking platform).
    limits : Limits, optional
        The bond's limit, for the peak pressure of a pulsatile supply.
    """
    net, fluid = solution.network, solution.fluid
    shear_per_flow = np.asarray(
        wall_shear_floor(net.width, net.depth, np.ones(net.n_channels), fluid.viscosity, net.round)
    )
    out: dict[str, Any] = {"mode": spec.mode}
    per: dict[str, np.ndarray] = {}  # per-channel statistics, vectorised

    compliance, totals = node_compliance(spec, solution)
    out["compliance"] = dict(totals)
    if spec.walls is not None:
        out["walls"] = {
            "material": spec.walls.material,
            "modulus": spec.walls.modulus,
            "poisson_ratio": spec.walls.poisson_ratio,
            "roof_thickness": spec.walls.roof_thickness,
            "source": spec.walls.source,
        }
        per["resistance_change"] = _deformation(spec, solution)
        out["resistance_change_max"] = float(per["resistance_change"].max(initial=0.0))

    time = np.zeros(0)
    flow_t = np.zeros((net.n_channels, 0))
    mode = spec.mode
    if mode == "pulsatile":
        time, flow_t, extra = pulsatile_mode(spec, solution, compliance, per, shear_per_flow)
    elif mode == "rocker":
        time, flow_t, extra = rocker_mode(spec, solution, inlet, outlet)
    elif mode == "draining":
        time, flow_t, extra = draining_mode(spec, solution)
    else:
        extra = {}
    out.update(extra)
    if flow_t.shape[1]:
        sign = np.where(solution.flow < 0, -1.0, 1.0)  # forward = the steady direction
        signed = shear_per_flow[:, None] * flow_t * sign[:, None]
        magnitude = np.abs(signed)
        per["min"], per["max"] = signed.min(axis=1), signed.max(axis=1)
        per["time_averaged_shear"] = magnitude.mean(axis=1)
        if window is not None:
            inside = (magnitude >= window.min) & (magnitude <= window.max)
            per["time_in_window"] = inside.mean(axis=1)

    if "series" in out and rows:  # the floor shear of the bed (or the first level) over time
        bed = next((m for r, g, m in level_groups(net) if r == "bed"), level_groups(net)[0][2])
        series = (shear_per_flow[bed, None] * flow_t[bed]).mean(axis=0)
        out["series"]["wall_shear_floor"] = thin(series)

    # per level (tree generations) or, for a network without generations, per channel
    if rows:
        labels = generation_labels(rows)
        groups = [m for _, _, m in level_groups(net)]
        stats = {key: np.array([_AGGREGATE.get(key, np.mean)(v[m]) for m in groups])
                 for key, v in per.items()}  # fmt: skip
        beds = [i for i, r in enumerate(rows) if r["role"] == "bed"]
        chosen = beds if seeded == "bed" and beds else list(range(len(rows)))
    else:  # as the steady checks: no shear window without generations; tubing carries no cells
        labels, stats = list(net.channel_names()), per
        chosen = np.flatnonzero(net.role != "tubing").tolist()
    fields = [{k: _json(v[i]) for k, v in stats.items()} for i in range(len(rows))]
    checks = _checks(spec, mode, labels, stats, chosen, window if rows else None)
    if limits is not None and "peak_chip_pressure" in out:
        peak = check_bond_pressure(
            out["peak_chip_pressure"],
            limits.bond_pressure,
            safety_factor=limits.safety_factor,
            source=limits.bond_source,
        )
        words = peak.message.replace("inlet pressure", "peak on-chip pressure during a pulse", 1)
        checks.append(replace(peak, name="pulse peak pressure vs bond", message=words))
    if rows and per:
        out["levels"] = [{"label": label, **f} for label, f in zip(labels, fields, strict=True)]
    elif per:
        out["channels"] = {"name": labels, **{k: [_json(x) for x in v] for k, v in per.items()}}
    return Operation(mode, time, flow_t, shear_per_flow, fields, tuple(checks), out, spec)


#: How per-channel statistics combine into a level's (default: the mean over its channels).
_AGGREGATE = {
    "min": np.min, "max": np.max, "flow_min_over_time": np.min, "flow_max_over_time": np.max,
    "womersley": np.max,
}  # fmt: skip


def _json(value) -> float | None:
    value = float(value)
    return value if np.isfinite(value) else None


def _checks(spec, mode, labels, stats, chosen, window) -> list[CheckResult]:
    checks: list[CheckResult] = []
    if not labels:
        return checks
    names = [labels[i] for i in chosen]
    if "resistance_change" in stats:
        checks.append(check_deformation(labels, stats["resistance_change"]))
    if mode == "pulsatile":
        checks.append(check_inertia(labels, stats["womersley"]))
        checks.append(check_flow_reversal(names, stats["flow_min_over_time"][chosen]))
    if window is not None and "time_in_window" in stats:
        fraction = stats["time_in_window"][chosen]
        if mode == "rocker":
            checks += check_rocker(names, stats["time_averaged_shear"][chosen], fraction, window)
        elif mode == "draining":
            checks.append(check_drain(names, fraction, window, spec.refill_interval))
        else:
            checks.append(check_time_in_window(names, fraction, window))
    return checks


def _deformation(spec: OperationSpec, solution: Solution) -> np.ndarray:
    """Relative fall of each channel's resistance from the roof's bulge [1] (0 for tubes)."""
    net, walls = solution.network, spec.walls
    b = plate_rigidity(walls.modulus, walls.roof_thickness, walls.poisson_ratio)
    phi = deflection_scale(net.width, b)
    ratio = resistance_ratio(
        solution.pressure[net.node_a], solution.pressure[net.node_b], net.depth, phi
    )
    return np.where(net.round, 0.0, 1.0 - ratio)


def attach(results: dict[str, Any], operation: Operation) -> None:
    """Add an operation's per-level keys to ``results["generations"]`` and its summary as
    ``results["operation"]`` (in place; the build's results dict)."""
    for row, extra in zip(results["generations"], operation.level_fields, strict=True):
        row.update(extra)
    results["operation"] = operation.results
