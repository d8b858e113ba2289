"""The three time-varying modes, each from the steady solution to flows over time.

Each returns ``(time, flow, extra)``: instants [s], channel flows at those instants [m^3/s]
(shape channels x instants) and a JSON-able dict for ``results["operation"]``; the pulsatile
mode also fills per-channel statistics into ``per``. Used by :func:`chipflow.operation.operate`.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from chipflow.errors import SpecError
from chipflow.network import Solution, solve
from chipflow.network.model import Network
from chipflow.network.supply import STANDARD_GRAVITY
from chipflow.operation.compliance import womersley_number
from chipflow.operation.frequency import harmonic_response
from chipflow.operation.model import OperationSpec
from chipflow.operation.reservoirs import drain_reservoirs, port_response, rocker_cycle
from chipflow.operation.waveform import harmonic_series

__all__ = [
    "pulsatile_mode",
    "rocker_mode",
    "draining_mode",
    "total_resistance",
    "thin",
    "SAMPLES",
]

#: Instants per period at which the flow and shear are evaluated.
SAMPLES = 128


def total_resistance(network: Network, fluid, inlet: str, outlet: str) -> float:
    """Resistance between two nodes [Pa s/m^3], every other port left open."""
    unit = solve(network, fluid, {inlet: 1.0, outlet: 0.0})
    return 1.0 / unit.port_flow[inlet]


def _ports(solution: Solution) -> tuple[dict[str, float], dict[str, float]]:
    pressures = dict(solution.port_pressure)
    flows = {n: solution.port_flow[n] for n in solution.port_flow if n not in pressures}
    return pressures, flows


def pulsatile_mode(
    spec: OperationSpec,
    solution: Solution,
    compliance: np.ndarray,
    per: dict[str, np.ndarray],
    shear_per_flow: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, dict[str, Any]]:
    """A periodic supply, harmonic by harmonic, then sampled over one period."""
    net, fluid = solution.network, solution.fluid
    pressures, flows = _ports(solution)
    driven = dict(spec.pulsatile)
    frequency = {p.waveform.frequency for p in driven.values()}
    if len(frequency) > 1:
        raise SpecError("pulsatile supplies at different frequencies are not supported")
    f0 = frequency.pop()
    omega = 2.0 * np.pi * f0
    k_max = max(len(p.waveform.harmonics) for p in driven.values())
    amplitudes = np.zeros((net.n_channels, k_max), dtype=complex)
    port_amplitude = np.zeros((len(driven), k_max), dtype=complex)
    pressure_amplitude = np.zeros((net.n_nodes, k_max), dtype=complex)
    for k in range(1, k_max + 1):
        p_hat = {node: 0.0 for node in pressures}
        q_hat = {}
        for node, p in driven.items():
            c = p.waveform.harmonics[k - 1] if k <= len(p.waveform.harmonics) else 0.0
            (p_hat if p.kind == "pressure" else q_hat)[node] = c
        response = harmonic_response(net, fluid, k * omega, compliance, p_hat, q_hat)
        amplitudes[:, k - 1] = response.flow
        pressure_amplitude[:, k - 1] = response.pressure
        for j, node in enumerate(driven):
            i = net.node_index(node)
            leaving = response.flow[net.node_a == i].sum() - response.flow[net.node_b == i].sum()
            stored = 1j * k * omega * compliance[i] * response.pressure[i]
            port_amplitude[j, k - 1] = leaving + stored
    time = np.arange(SAMPLES) / SAMPLES / f0
    flow_t = solution.flow[:, None] + harmonic_series(amplitudes, SAMPLES)
    pressure_t = solution.pressure[:, None] + harmonic_series(pressure_amplitude, SAMPLES)
    mean_port = np.array([solution.port_flow[n] for n in driven])
    inlet_pulsation = float(np.max(np.abs(port_amplitude[:, 0]) / np.abs(mean_port)))
    q_mean = np.abs(solution.flow)
    first = np.abs(amplitudes[:, 0])
    with np.errstate(divide="ignore", invalid="ignore"):
        per["pulsation"] = np.where(q_mean > 0, first / q_mean, np.inf)
    per["damping"] = (
        per["pulsation"] / inlet_pulsation if inlet_pulsation > 0 else per["pulsation"] * np.nan
    )
    sign = np.where(solution.flow < 0, -1.0, 1.0)
    forward = flow_t * sign[:, None]
    per["flow_mean"] = q_mean
    per["flow_amplitude"] = first
    per["flow_min_over_time"], per["flow_max_over_time"] = forward.min(axis=1), forward.max(axis=1)
    per["wall_shear_floor_amplitude"] = first * shear_per_flow
    per["womersley"] = np.asarray(
        womersley_number(net.width, net.depth, omega, fluid.density, fluid.viscosity, net.round)
    )
    on_chip = net.role != "tubing"
    chip_nodes = np.union1d(net.node_a[on_chip], net.node_b[on_chip])
    extra = {
        "frequency": f0,
        "harmonics": k_max,
        "inlet_pulsation": inlet_pulsation,
        "peak_chip_pressure": float(pressure_t[chip_nodes].max()),
        "supplies": {
            node: {
                "mode": p.label,
                "kind": p.kind,
                f"mean_{p.kind}": p.waveform.mean,
                "pulsation": p.waveform.pulsation,
            }
            for node, p in driven.items()
        },
        "reversal": bool(np.any(forward.min(axis=1) < 0)),
    }
    return time, flow_t, extra


def rocker_mode(
    spec: OperationSpec, solution: Solution, inlet: str, outlet: str
) -> tuple[np.ndarray, np.ndarray, dict[str, Any]]:
    """One rocking cycle in its periodic state; refuses a reservoir that runs dry."""
    net, fluid, r = solution.network, solution.fluid, spec.rocker
    resistance = total_resistance(net, fluid, inlet, outlet)
    cycle = rocker_cycle(resistance, r.area, r.spacing, r.tilt_angle, r.period, fluid.density)
    lowest = r.head - float(np.abs(cycle.level_change).max())
    if lowest <= 0:
        moved = float(np.abs(cycle.level_change).max()) * r.area
        raise SpecError(
            f"supply: the rocking platform moves {moved * 1e9:.3g} uL out of a reservoir that "
            f"holds {r.head * r.area * 1e9:.3g} uL: it runs dry; fill it higher or use wider "
            "reservoirs"
        )
    unit = solve(net, fluid, {inlet: 1.0, outlet: 0.0})
    per_pressure = unit.flow  # channel flow per pascal across the chip
    rho_g = fluid.density * STANDARD_GRAVITY
    flow_t = per_pressure[:, None] * (rho_g * cycle.head_difference)[None, :]
    extra = {
        "period": r.period,
        "tilt_angle": r.tilt_angle,
        "reservoir_spacing": r.spacing,
        "reservoir_area": r.area,
        "head": r.head,
        "time_constant": cycle.time_constant,
        "peak_flow": float(np.abs(cycle.flow).max()),
        "peak_head_difference": float(np.abs(cycle.head_difference).max()),
        "lowest_level": lowest,
        "reversal": bool(np.any(cycle.flow < 0) and np.any(cycle.flow > 0)),
        "series": {
            "time": thin(cycle.time),
            "tilt_angle": thin(cycle.tilt),
            "head_difference": thin(cycle.head_difference),
            "flow": thin(cycle.flow),
        },
    }
    return cycle.time, flow_t, extra


def draining_mode(
    spec: OperationSpec, solution: Solution
) -> tuple[np.ndarray, np.ndarray, dict[str, Any]]:
    """The reservoirs draining over one refill interval (and six time constants for the
    time to level)."""
    net, fluid = solution.network, solution.fluid
    pressures, flows = _ports(solution)
    nodes = list(spec.drain_areas)
    rho_g = fluid.density * STANDARD_GRAVITY
    conductance, offset = port_response(net, fluid, pressures, flows, nodes)
    heads = np.array([pressures[n] / rho_g for n in nodes])
    areas = np.array([spec.drain_areas[n] for n in nodes])
    # the time to level over six time constants, the shear over one refill interval
    level = drain_reservoirs(conductance, offset, areas, heads, fluid.density)
    drain = drain_reservoirs(
        conductance, offset, areas, heads, fluid.density, span=spec.refill_interval
    )
    # channel flows are linear in the port pressures (the other supplies fixed)
    base = solve(net, fluid, {**pressures, **{n: 0.0 for n in nodes}}, flows).flow
    per_port = np.stack(
        [solve(net, fluid, {**{k: 0.0 for k in pressures}, n: 1.0}).flow for n in nodes], axis=1
    )
    flow_t = base[:, None] + per_port @ (rho_g * drain.heads)
    lowest = drain.heads.min(axis=1)
    if np.any(lowest < 0):
        raise SpecError("supply: a draining reservoir runs dry before the refill interval ends")
    extra = {
        "time_constant": level.time_constant,
        "time_to_level": level.time_to_level,
        "refill_interval": spec.refill_interval,
        "reservoirs": {
            n: {"area": float(a), "head": float(h0), "head_at_refill": float(h[-1])}
            for n, a, h0, h in zip(nodes, areas, heads, drain.heads, strict=True)
        },
        "reversal": False,
        "series": {
            "time": thin(drain.time),
            "heads": {n: thin(h) for n, h in zip(nodes, drain.heads, strict=True)},
            "flow": thin(drain.flow),
        },
    }
    return drain.time, flow_t, extra


def thin(values: np.ndarray, count: int = 65) -> list[float]:
    """About ``count`` evenly spaced samples of a time series, for results.json."""
    step = max(1, len(values) // (count - 1))
    return [float(v) for v in values[::step]]
