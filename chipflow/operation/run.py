"""Time-varying operation of a solved network: one call for the build.

:func:`operate` reads the steady solution and the :class:`~chipflow.operation.model.OperationSpec`
and returns an :class:`Operation`: per-channel and per-level statistics of the flow and the
floor shear over time (exact, from crossing times: :mod:`chipflow.operation.crossings`), the
soft roofs' deformation (solved self-consistently: :mod:`chipflow.operation.softwall`), the
compliances and the damper, the checks and a JSON-able results dict.
:func:`steady_boundary` gives the steady supply a rocking platform stands for.

**Oscillating flow.** Every time-varying mode reports per level the signed mean floor shear,
its peak magnitude and the oscillatory shear index (OSI, :mod:`chipflow.operation.crossings`).
The cells' windows were measured in steady, one-way flow (Dewey et al. 1981 and the other
rows of the cell-type table). A level whose OSI exceeds :data:`OSI_THRESHOLD` is not graded
against such a window: its check warns that the window does not apply and gives the
numbers, unless the cell-type table gives the cells an oscillatory window, which is then
checked on the time-averaged magnitude. The threshold 0.05 is a chipflow default: for a flow
that runs mostly forwards the OSI is the backward share of the shear's time integral, so
above 0.05 more than a twentieth of the shear acts backwards, no longer a one-way flow with a
ripple. A level at or below it keeps the steady window, checked all the time (pumps,
reservoirs).
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
    check_oscillating_shear,
    check_time_in_window,
    check_wall_model,
)
from chipflow.checks.pressure import check_bond_pressure
from chipflow.checks.result import CheckResult
from chipflow.errors import SpecError
from chipflow.network import Solution
from chipflow.network.model import Network
from chipflow.network.summary import generation_labels, level_groups, level_rows
from chipflow.network.supply import STANDARD_GRAVITY
from chipflow.operation.compliance import air_compliance, tube_compliance
from chipflow.operation.damper import check_damper_node, damper_facts, size_air_volume
from chipflow.operation.model import OperationSpec
from chipflow.operation.modes import (
    SAMPLES,
    Signals,
    draining_mode,
    pulsatile_mode,
    pulsatile_response,
    rocker_mode,
    total_resistance,
)
from chipflow.operation.reservoirs import rocker_harmonics
from chipflow.operation.softwall import SoftSolve, deformed_shape, solve_operating_point
from chipflow.physics.duct import wall_shear_floor
from chipflow.spec.culture import Limits

__all__ = [
    "Operation",
    "operate",
    "steady_boundary",
    "node_compliance",
    "linearised",
    "attach",
    "SAMPLES",
    "OSI_THRESHOLD",
]

#: Oscillatory shear index above which a steady-flow window is not applied [1] (chipflow
#: default, see the module notes).
OSI_THRESHOLD = 0.05


@dataclass(frozen=True, eq=False)
class Operation:
    """What time-varying operation gives.

    Attributes
    ----------
    mode : str
        "pulsatile", "draining", "rocker" or "steady".
    time : numpy.ndarray
        Instants [s] of the columns of ``flow`` (for figures; statistics are exact).
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
    signals : Signals or None
        Every channel's flow over time in closed form.
    soft : SoftSolve or None
        The self-consistent soft-roof solve (None without walls).
    oscillating : tuple of int
        Seeded levels (or, without levels, channels) whose OSI exceeds
        :data:`OSI_THRESHOLD`: the steady window does not apply there.
    """

    mode: str
    time: np.ndarray
    flow: np.ndarray
    shear_per_flow: np.ndarray
    level_fields: list[dict[str, Any]] = field(default_factory=list)
    checks: tuple[CheckResult, ...] = ()
    results: dict[str, Any] = field(default_factory=dict)
    spec: OperationSpec | None = None
    signals: Signals | None = None
    soft: SoftSolve | None = None
    oscillating: tuple[int, ...] = ()


def node_compliance(
    spec: OperationSpec, solution: Solution, soft: SoftSolve | None = None
) -> tuple[np.ndarray, dict]:
    """Compliance from every node to the surroundings [m^3/Pa] and the totals by source.

    Half of each soft channel's or tube's compliance sits at each of its ends. A soft roof
    stores ``l w <psi>`` per pascal (its model's mean deflection across the width; the
    clamped plate gives ``l w^5 / (720 B)``). The damper is added by :func:`operate`.
    """
    net, n = solution.network, solution.network.n_nodes
    per_channel = np.zeros(net.n_channels)
    totals = {"roofs": 0.0, "tubing_walls": 0.0, "lumped": 0.0, "trapped_air": 0.0}
    if spec.walls is not None:
        if soft is None:
            soft = solve_operating_point(spec.walls, net, solution.fluid,
                                         *_port_maps(solution))  # fmt: skip
        rect = soft.law.soft
        per_channel[rect] = net.length[rect] * net.width[rect] * soft.law.moments[2][rect]
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


def _port_maps(solution: Solution) -> tuple[dict[str, float], dict[str, float]]:
    pressures = dict(solution.port_pressure)
    flows = {n: solution.port_flow[n] for n in solution.port_flow if n not in pressures}
    return pressures, flows


def linearised(soft: SoftSolve) -> Network:
    """The network whose linear resistances are the deformed channels' secant resistances
    (each length scaled by its resistance ratio): the chip the rocking and draining ODEs see,
    linearised at the steady operating point. Without soft roofs, the network itself."""
    net = soft.solution.network
    if not soft.soft:
        return net
    p = soft.solution.pressure
    ratio = deformed_shape(soft.law, p[net.node_a], p[net.node_b])["resistance_ratio"]
    return replace(net, length=net.length * np.where(soft.law.soft, ratio, 1.0))


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
    direction (exact, from the head's harmonics), so that the steady table shows the
    time-averaged flow and floor shear magnitudes (the shear is proportional to the flow).
    Other modes keep their supply.
    """
    if spec.rocker is None:
        return dict(pressures), dict(flows)
    from chipflow.operation.crossings import harmonic_statistics

    r = spec.rocker
    cycle = rocker_harmonics(
        total_resistance(network, fluid, inlet, outlet),
        r.area,
        r.spacing,
        r.tilt_angle,
        r.period,
        fluid.density,
    )
    rho_g = fluid.density * STANDARD_GRAVITY
    mean_head = float(harmonic_statistics(np.zeros(1), cycle.head[None, :])["mean_magnitude"][0])
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
    *,
    soft: SoftSolve | None = None,
) -> Operation:
    """Time-varying operation of the solved network (see the module documentation).

    Parameters
    ----------
    spec : OperationSpec
        Port keys already mapped onto node names.
    solution : Solution
        The steady solution (the mean of a pulsatile supply, the start of draining); with
        soft roofs, the deformed one of ``soft``.
    rows : list of dict
        Per-level rows (:func:`chipflow.network.summary.level_rows`) of ``solution``.
    window : ShearWindow or None
    seeded : {"all", "bed"}
        Which levels carry cells.
    inlet, outlet : str
        The supply nodes of a tree design (rocking platform).
    limits : Limits, optional
        The bond's limit, for the peak pressure of a pulsatile supply.
    soft : SoftSolve, optional
        The self-consistent soft-roof solve of this operating point
        (:func:`~chipflow.operation.softwall.solve_operating_point`); solved here from
        ``solution``'s supplies when not given (and ``solution`` and ``rows`` then replaced by
        the deformed chip's).
    """
    net, fluid = solution.network, solution.fluid
    if soft is None:
        soft = solve_operating_point(spec.walls, net, fluid, *_port_maps(solution))
        if soft.soft:
            solution = soft.solution
            rows = level_rows(solution) if rows else rows
    rigid_per_flow = np.asarray(
        wall_shear_floor(net.width, net.depth, np.ones(net.n_channels), fluid.viscosity, net.round)
    )
    shear_per_flow = rigid_per_flow.copy()
    if soft.soft:
        p = solution.pressure
        shape = deformed_shape(soft.law, p[net.node_a], p[net.node_b])
        shear_per_flow = np.where(soft.law.soft, rigid_per_flow * shape["shear_ratio"],
                                  rigid_per_flow)  # fmt: skip
    out: dict[str, Any] = {"mode": spec.mode}
    per: dict[str, np.ndarray] = {}  # per-channel statistics, vectorised
    texts: dict[str, np.ndarray] = {}  # per-channel words (one per level shown)

    compliance, totals = node_compliance(spec, solution, soft)
    if spec.walls is not None:
        per["resistance_change"] = soft.resistance_change()
        per["resistance_change_one_pass"] = soft.one_pass_change()
        per["roof_to_width"] = np.where(soft.law.soft, spec.walls.roof_thickness / net.width,
                                        np.nan)  # fmt: skip
        per["wall_shear_floor_rigid"] = np.asarray(soft.rigid.wall_shear_floor)
        texts["wall_model"] = soft.law.model_names()
        texts["wall_model_range"] = soft.out_of_range()
        models = [m for m in dict.fromkeys(texts["wall_model"].tolist()) if m]
        out["walls"] = {
            "material": spec.walls.material,
            "modulus": spec.walls.modulus,
            "poisson_ratio": spec.walls.poisson_ratio,
            "roof_thickness": spec.walls.roof_thickness,
            "source": spec.walls.source,
            "models": models,
            "solve": soft.to_dict(),
        }
        out["resistance_change_max"] = float(per["resistance_change"].max(initial=0.0))
        out["resistance_change_one_pass_max"] = float(
            per["resistance_change_one_pass"].max(initial=0.0)
        )
    linear = linearised(soft)

    mode = spec.mode
    ends = None
    if soft.soft:  # small-signal conductances of the deformed channels at the operating point
        p = solution.pressure
        ends = tuple(soft.law.conductance * soft.law.slope(p[e]) for e in (net.node_a, net.node_b))
    if spec.damper is not None:
        out["damper"] = _damper(spec, solution, linear, compliance, rows, seeded, ends)
        compliance[net.node_index(spec.damper.node)] += out["damper"]["compliance"]
        totals["damper"] = out["damper"]["compliance"]
    out["compliance"] = dict(totals)

    signals: Signals | None = None
    extra: dict[str, Any] = {}
    if mode == "pulsatile":
        signals, extra = pulsatile_mode(spec, solution, compliance, per, ends)
    elif mode == "rocker":
        signals, extra = rocker_mode(spec, solution, inlet, outlet, linear)
    elif mode == "draining":
        signals, extra = draining_mode(spec, solution, linear)
    out.update(extra)
    time = np.zeros(0)
    flow_t = np.zeros((net.n_channels, 0))
    if signals is not None:
        sign = np.where(solution.flow < 0, -1.0, 1.0)  # forward = the steady direction
        forward = signals.scaled(sign).statistics()
        bounds = None if window is None else (window.min, window.max)
        shear = signals.scaled(shear_per_flow * sign).statistics(bounds)
        per["min"], per["max"] = shear["min"], shear["max"]
        per["floor_shear_signed_mean"] = shear["mean"]
        per["floor_shear_peak"] = shear["peak"]
        per["osi"] = shear["osi"]
        per["time_averaged_shear"] = shear["mean_magnitude"]
        if window is not None:
            per["time_in_window"] = shear["in_window"]
        if mode == "pulsatile":
            per["flow_min_over_time"] = forward["min"]
            per["flow_max_over_time"] = forward["max"]
            per["wall_shear_floor_amplitude"] = per["flow_amplitude"] * shear_per_flow
        backwards = forward["min"] < 0
        if mode == "rocker":  # reverses when it runs both ways
            out["reversal"] = bool(np.any(backwards & (forward["max"] > 0)))
        else:  # a steady flow that runs backwards at times
            out["reversal"] = bool(np.any(backwards & (np.abs(solution.flow) > 0)))
        time, flow_t = signals.sample(SAMPLES)
    out["osi_threshold"] = OSI_THRESHOLD

    if "series" in out and rows:  # the floor shear of the bed (or the first level) over time
        bed = next((m for r, g, m in level_groups(net) if r == "bed"), level_groups(net)[0][2])
        t_series = np.asarray(out["series"]["time"], dtype=float)
        values = signals.rows(bed).scaled(shear_per_flow[bed]).at(t_series)
        out["series"]["wall_shear_floor"] = [float(v) for v in values.mean(axis=0)]

    # per level (tree generations) or, for a network without generations, per channel
    if rows:
        labels = generation_labels(rows)
        groups = [m for _, _, m in level_groups(net)]
        stats = {key: np.array([_AGGREGATE.get(key, np.mean)(v[m]) for m in groups])
                 for key, v in per.items()}  # fmt: skip
        words = {key: [_words(v[m]) for m in groups] for key, v in texts.items()}
        beds = [i for i, r in enumerate(rows) if r["role"] == "bed"]
        chosen = beds if seeded == "bed" and beds else list(range(len(rows)))
    else:  # as the steady checks: no shear window without generations; tubing carries no cells
        labels, stats = list(net.channel_names()), per
        words = {key: v.tolist() for key, v in texts.items()}
        chosen = np.flatnonzero(net.role != "tubing").tolist()
    count = len(rows) if rows else 0
    fields = [
        {**{k: _json(v[i]) for k, v in stats.items()}, **{k: w[i] for k, w in words.items()}}
        for i in range(count)
    ]
    oscillating = tuple(
        i for i in chosen if "osi" in stats and float(stats["osi"][i]) > OSI_THRESHOLD
    )
    checks = _checks(spec, mode, labels, stats, words, chosen, oscillating, window, bool(rows))
    if limits is not None and "peak_chip_pressure" in out:
        peak = check_bond_pressure(
            out["peak_chip_pressure"],
            limits.bond_pressure,
            safety_factor=limits.safety_factor,
            source=limits.bond_source,
        )
        message = peak.message.replace("inlet pressure", "peak on-chip pressure during a pulse", 1)
        checks.append(replace(peak, name="pulse peak pressure vs bond", message=message))
    if rows and (per or texts):
        out["levels"] = [{"label": label, **f} for label, f in zip(labels, fields, strict=True)]
    elif per or texts:
        out["channels"] = {
            "name": labels,
            **{k: [_json(x) for x in v] for k, v in per.items()},
            **words,
        }
    return Operation(mode, time, flow_t, shear_per_flow, fields, tuple(checks), out, spec,
                     signals, soft if soft.soft else None, oscillating)  # fmt: skip


def _damper(spec, solution, linear, compliance, rows, seeded, ends) -> dict[str, Any]:
    """The damper's compliance, sized when a target is given, and what it costs."""
    damper, net = spec.damper, solution.network
    pressures, _ = _port_maps(solution)
    check_damper_node(net, pressures, damper.node, damper.where)
    i = net.node_index(damper.node)
    gauge = float(solution.pressure[i])
    volume = damper.air_volume
    target = damper.target_pulsation
    achieved = None
    if target is not None:
        if spec.mode != "pulsatile":
            raise SpecError(
                f"{damper.where}.target_pulsation: needs a pulsating supply (a peristaltic "
                "pump or a pulsatile pressure controller) to damp"
            )
        seeded_channels = _seeded_channels(net, rows, seeded)
        q_mean = np.abs(solution.flow[seeded_channels])

        def pulsation(v: float) -> float:
            c = compliance.copy()
            c[i] += float(air_compliance(v, gauge))
            _, flow, _ = pulsatile_response(spec, solution, c, ends, harmonics=1)
            return float(np.max(np.abs(flow[seeded_channels, 0]) / q_mean))

        volume = size_air_volume(target, pulsation, f"{damper.where}.target_pulsation")
        achieved = pulsation(volume)
    value = (
        damper.compliance if damper.compliance is not None else float(air_compliance(volume, gauge))
    )
    facts = damper_facts(spec, linear, solution.fluid, pressures, net.node_name(i), value, volume,
                         compliance)  # fmt: skip
    facts["target_pulsation"] = target
    facts["pulsation_at_target"] = achieved
    facts["gauge_pressure"] = gauge
    return facts


def _seeded_channels(net: Network, rows, seeded: str) -> np.ndarray:
    """Channels of the seeded levels (without levels: every channel off the tubing)."""
    groups = level_groups(net)
    if rows and groups:
        beds = [m for r, _, m in groups if r == "bed"]
        members = beds if seeded == "bed" and beds else [m for _, _, m in groups]
        return np.concatenate(members)
    return np.flatnonzero(net.role != "tubing")


#: How per-channel statistics combine into a level's (default: the mean over its channels).
_AGGREGATE = {
    "min": np.min, "max": np.max, "flow_min_over_time": np.min, "flow_max_over_time": np.max,
    "womersley": np.max, "osi": np.max, "floor_shear_peak": np.max, "time_in_window": np.min,
    "resistance_change": np.max, "resistance_change_one_pass": np.max, "roof_to_width": np.min,
}  # fmt: skip


def _words(values: np.ndarray) -> str:
    """The distinct non-empty words of a level's channels, joined."""
    return "; ".join(w for w in dict.fromkeys(str(v) for v in values.tolist()) if w)


def _json(value) -> float | None:
    value = float(value)
    return value if np.isfinite(value) else None


def _checks(spec, mode, labels, stats, words, chosen, oscillating, window, levels: bool):
    """The operation's checks; ``levels`` False: ``labels`` are channels (no steady window
    check over time, as the steady checks; an oscillating channel is reported, the one with
    the highest OSI named)."""
    checks: list[CheckResult] = []
    if not labels:
        return checks
    named, shown = list(oscillating), list(labels)
    if not levels and named:
        worst = max(named, key=lambda i: float(stats["osi"][i]))
        more = len(named) - 1
        shown[worst] = f"channel {labels[worst]}" + (f" and {more} more" if more else "")
        named = [worst]
    steady_levels = [i for i in chosen if i not in oscillating]
    names = [labels[i] for i in chosen]
    if "resistance_change" in stats:
        checks.append(
            check_deformation(
                labels,
                stats["resistance_change"],
                stats["resistance_change_one_pass"],
                words["wall_model"],
            )  # fmt: skip
        )
        checks.append(
            check_wall_model(labels, words["wall_model_range"], stats["resistance_change"])
        )
    if mode == "pulsatile":
        checks.append(check_inertia(labels, stats["womersley"]))
        checks.append(check_flow_reversal(names, stats["flow_min_over_time"][chosen]))
    if window is not None and named:
        checks += check_oscillating_shear(
            [shown[i] for i in named],
            stats["osi"][named],
            stats["floor_shear_signed_mean"][named],
            stats["floor_shear_peak"][named],
            stats["time_averaged_shear"][named],
            window,
            OSI_THRESHOLD,
        )
    if levels and window is not None and "time_in_window" in stats and steady_levels:
        fraction = stats["time_in_window"][steady_levels]
        kept = [labels[i] for i in steady_levels]
        if mode == "draining":
            checks.append(check_drain(kept, fraction, window, spec.refill_interval))
        else:
            checks.append(check_time_in_window(kept, fraction, window))
    return checks


def attach(results: dict[str, Any], operation: Operation) -> None:
    """Add an operation's per-level keys to ``results["generations"]`` and its summary as
    ``results["operation"]`` (in place; the build's results dict)."""
    for row, extra in zip(results["generations"], operation.level_fields, strict=True):
        row.update(extra)
    results["operation"] = operation.results
