"""The three time-varying modes, each from the steady solution to every channel's flow in
closed form.

Each mode returns ``(signals, extra)``: a :class:`Signals` holding every channel's flow over
time as a harmonic sum (pulsatile supplies, the rocking platform) or an exponential sum
(draining reservoirs), and a JSON-able dict for ``results["operation"]``; the pulsatile mode
also fills per-channel statistics into ``per``. Statistics of the signals (extremes, time in a
window, oscillatory shear index) come from exact crossing times
(:mod:`chipflow.operation.crossings`). Used by :func:`chipflow.operation.operate`.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from chipflow.errors import SpecError
from chipflow.network import Solution, solve
from chipflow.network.model import Network
from chipflow.network.supply import STANDARD_GRAVITY
from chipflow.operation.compliance import womersley_number
from chipflow.operation.crossings import (
    exponential_statistics,
    exponential_values,
    harmonic_statistics,
    harmonic_values,
)
from chipflow.operation.frequency import harmonic_response
from chipflow.operation.model import OperationSpec
from chipflow.operation.reservoirs import drain_reservoirs, port_response, rocker_harmonics
from chipflow.operation.waveform import harmonic_series

__all__ = [
    "Signals",
    "pulsatile_mode",
    "rocker_mode",
    "draining_mode",
    "total_resistance",
    "pulsatile_response",
    "thin",
    "SAMPLES",
]

#: Instants per period at which flows are tabulated for figures and results series (the
#: statistics never use them).
SAMPLES = 128


@dataclass(frozen=True, eq=False)
class Signals:
    """Every channel's value over time in closed form.

    Attributes
    ----------
    kind : str
        "harmonic" (periodic, ``mean + Re sum c_k exp(j k omega t)``) or "exponential"
        (``b t + sum_i c_i exp(lambda_i t)`` over ``[0, end]``).
    coeff : numpy.ndarray
        Harmonic: complex amplitudes (rows, K); exponential: coefficients (rows, terms).
    mean : numpy.ndarray or None
        Harmonic: the means (rows,).
    frequency : float
        Harmonic: the fundamental [Hz].
    rates : numpy.ndarray or None
        Exponential: the exponents [1/s].
    slope : numpy.ndarray or None
        Exponential: the linear term (rows,).
    end : float
        Exponential: the end of the interval [s].
    """

    kind: str
    coeff: np.ndarray
    mean: np.ndarray | None = None
    frequency: float = 0.0
    rates: np.ndarray | None = None
    slope: np.ndarray | None = None
    end: float = 0.0

    def scaled(self, factor: np.ndarray) -> Signals:
        """The signals times a per-row factor."""
        f = np.asarray(factor, dtype=float)
        return replace(
            self,
            coeff=self.coeff * f[:, None],
            mean=None if self.mean is None else self.mean * f,
            slope=None if self.slope is None else self.slope * f,
        )

    def statistics(self, window: tuple[float, float] | None = None) -> dict[str, np.ndarray]:
        """Exact statistics per row (:func:`~chipflow.operation.crossings.harmonic_statistics`).

        Rows that agree to 12 significant digits (the channels of one tree level) are
        computed once.
        """
        parts = [self.coeff.real, self.coeff.imag] if self.kind == "harmonic" else [self.coeff]
        for extra in (self.mean, self.slope):
            if extra is not None:
                parts.append(extra[:, None])
        table = np.column_stack(parts)
        size = np.abs(table).max(axis=1, keepdims=True)
        key = np.column_stack(
            [np.round(table / np.where(size > 0, size, 1.0), 12), _significant(size[:, 0])]
        )
        _, first, back = np.unique(key, axis=0, return_index=True, return_inverse=True)
        unique = self.rows(first)
        if unique.kind == "harmonic":
            out = harmonic_statistics(unique.mean, unique.coeff, window)
        else:
            out = exponential_statistics(unique.coeff, unique.rates, unique.end, window,
                                         unique.slope)  # fmt: skip
        return {k: v[back.ravel()] for k, v in out.items()}

    def rows(self, index) -> Signals:
        """The signals of some rows."""
        return replace(
            self,
            coeff=self.coeff[index],
            mean=None if self.mean is None else self.mean[index],
            slope=None if self.slope is None else self.slope[index],
        )

    def at(self, times: np.ndarray) -> np.ndarray:
        """Values at the instants ``times`` [s], shape (rows, len(times))."""
        grid = np.tile(np.asarray(times, dtype=float), (self.coeff.shape[0], 1))
        if self.kind == "harmonic":
            return harmonic_values(self.mean, self.coeff, 2.0 * np.pi * self.frequency * grid)
        return exponential_values(self.coeff, self.rates, grid, self.slope)

    def sample(self, count: int = SAMPLES) -> tuple[np.ndarray, np.ndarray]:
        """``count`` instants [s] over the period (or the interval) and the values there."""
        if self.kind == "harmonic":
            time = np.arange(count) / count / self.frequency
            return time, self.mean[:, None] + harmonic_series(self.coeff, count)
        time = np.linspace(0.0, self.end, count)
        rows = self.coeff.shape[0]
        return time, exponential_values(self.coeff, self.rates, np.tile(time, (rows, 1)),
                                        self.slope)  # fmt: skip


def _significant(values: np.ndarray, digits: int = 12) -> np.ndarray:
    """Values rounded to ``digits`` significant digits (zeros stay zero)."""
    with np.errstate(divide="ignore"):
        exponent = np.where(values > 0, np.floor(np.log10(np.where(values > 0, values, 1.0))), 0)
    scale = 10.0 ** (digits - 1 - exponent)
    return np.round(values * scale) / scale


def total_resistance(network: Network, fluid, inlet: str, outlet: str) -> float:
    """Resistance between two nodes [Pa s/m^3], every other port left open."""
    unit = solve(network, fluid, {inlet: 1.0, outlet: 0.0})
    return 1.0 / unit.port_flow[inlet]


def _ports(solution: Solution) -> tuple[dict[str, float], dict[str, float]]:
    pressures = dict(solution.port_pressure)
    flows = {n: solution.port_flow[n] for n in solution.port_flow if n not in pressures}
    return pressures, flows


def pulsatile_response(
    spec: OperationSpec,
    solution: Solution,
    compliance: np.ndarray,
    ends: tuple[np.ndarray, np.ndarray] | None = None,
    harmonics: int | None = None,
) -> tuple[float, np.ndarray, np.ndarray]:
    """Complex flow and pressure amplitudes of every harmonic of the pulsatile supplies.

    Returns ``(f0, flow (channels, K), pressure (nodes, K))``; ``harmonics`` limits ``K``
    (the damper sizing needs the fundamental only).
    """
    net, fluid = solution.network, solution.fluid
    pressures, _ = _ports(solution)
    driven = dict(spec.pulsatile)
    frequency = {p.waveform.frequency for p in driven.values()}
    if len(frequency) > 1:
        raise SpecError("pulsatile supplies at different frequencies are not supported")
    f0 = frequency.pop()
    omega = 2.0 * np.pi * f0
    k_max = max(len(p.waveform.harmonics) for p in driven.values())
    if harmonics is not None:
        k_max = min(k_max, harmonics)
    flow = np.zeros((net.n_channels, k_max), dtype=complex)
    pressure = np.zeros((net.n_nodes, k_max), dtype=complex)
    for k in range(1, k_max + 1):  # a loop over the harmonics
        p_hat = {node: 0.0 for node in pressures}
        q_hat = {}
        for node, p in driven.items():
            c = p.waveform.harmonics[k - 1] if k <= len(p.waveform.harmonics) else 0.0
            (p_hat if p.kind == "pressure" else q_hat)[node] = c
        response = harmonic_response(
            net, fluid, k * omega, compliance, p_hat, q_hat, end_conductance=ends
        )
        flow[:, k - 1] = response.flow
        pressure[:, k - 1] = response.pressure
    return f0, flow, pressure


def pulsatile_mode(
    spec: OperationSpec,
    solution: Solution,
    compliance: np.ndarray,
    per: dict[str, np.ndarray],
    ends: tuple[np.ndarray, np.ndarray] | None = None,
) -> tuple[Signals, dict[str, Any]]:
    """A periodic supply, harmonic by harmonic.

    The pulsation of each channel is its flow's (and floor shear's) amplitude at the
    fundamental over its mean; ``pulsation_relative_to_source`` divides it by the source's
    own pulsation: the amplitude of the pump's flow over its mean flow for a flow source, the
    amplitude of the controller's pressure over its mean pressure for a pressure source.
    """
    net, fluid = solution.network, solution.fluid
    f0, amplitudes, pressure_amplitude = pulsatile_response(spec, solution, compliance, ends)
    driven = dict(spec.pulsatile)
    source = max(driven.values(), key=lambda p: p.waveform.pulsation)
    q_mean = np.abs(solution.flow)
    first = np.abs(amplitudes[:, 0])
    with np.errstate(divide="ignore", invalid="ignore"):
        per["pulsation"] = np.where(q_mean > 0, first / q_mean, np.inf)
    pulse = source.waveform.pulsation
    per["pulsation_relative_to_source"] = per["pulsation"] / pulse if pulse > 0 else first * np.nan
    per["flow_mean"] = q_mean
    per["flow_amplitude"] = first
    per["womersley"] = np.asarray(
        womersley_number(
            net.width, net.depth, 2 * np.pi * f0, fluid.density, fluid.viscosity, net.round
        )  # fmt: skip
    )
    on_chip = net.role != "tubing"
    chip_nodes = np.union1d(net.node_a[on_chip], net.node_b[on_chip])
    pressure = harmonic_statistics(solution.pressure[chip_nodes], pressure_amplitude[chip_nodes])
    signals = Signals("harmonic", amplitudes, solution.flow.copy(), f0)
    extra = {
        "frequency": f0,
        "harmonics": int(amplitudes.shape[1]),
        "source_pulsation": pulse,
        "source_quantity": source.kind,
        "peak_chip_pressure": float(pressure["max"].max()),
        "supplies": {
            node: {
                "mode": p.label,
                "kind": p.kind,
                f"mean_{p.kind}": p.waveform.mean,
                "pulsation": p.waveform.pulsation,
                "pulsation_of": f"{p.kind} amplitude over mean {p.kind}",
            }
            for node, p in driven.items()
        },
    }
    return signals, extra


def rocker_mode(
    spec: OperationSpec, solution: Solution, inlet: str, outlet: str, network: Network
) -> tuple[Signals, dict[str, Any]]:
    """One rocking cycle in its periodic state; refuses a reservoir that runs dry.

    ``network`` is the network whose linear resistances stand for the chip (the deformed
    chip's secant resistances when its roofs are soft).
    """
    fluid, r = solution.fluid, spec.rocker
    resistance = total_resistance(network, fluid, inlet, outlet)
    cycle = rocker_harmonics(resistance, r.area, r.spacing, r.tilt_angle, r.period, fluid.density)
    stats = harmonic_statistics(np.zeros(2), np.vstack([cycle.liquid / 2.0, cycle.head]))
    moved = float(stats["peak"][0])
    lowest = r.head - moved
    if lowest <= 0:
        raise SpecError(
            f"supply: the rocking platform moves {moved * r.area * 1e9:.3g} uL out of a "
            f"reservoir that holds {r.head * r.area * 1e9:.3g} uL: it runs dry; fill it higher "
            "or use wider reservoirs"
        )
    unit = solve(network, fluid, {inlet: 1.0, outlet: 0.0})
    rho_g = fluid.density * STANDARD_GRAVITY
    flow_coeff = unit.flow[:, None] * rho_g * cycle.head[None, :]
    signals = Signals("harmonic", flow_coeff, np.zeros(network.n_channels), cycle.frequency)
    total = Signals("harmonic", rho_g / resistance * cycle.head[None, :], np.zeros(1),
                    cycle.frequency)  # fmt: skip
    time, flow = total.sample(4 * SAMPLES)
    tilt = r.tilt_angle * np.sin(2.0 * np.pi * time / r.period)
    _, head = Signals("harmonic", cycle.head[None, :], np.zeros(1), cycle.frequency).sample(
        4 * SAMPLES
    )
    extra = {
        "period": r.period,
        "tilt_angle": r.tilt_angle,
        "reservoir_spacing": r.spacing,
        "reservoir_area": r.area,
        "head": r.head,
        "time_constant": cycle.time_constant,
        "peak_flow": float(rho_g / resistance * stats["peak"][1]),
        "peak_head_difference": float(stats["peak"][1]),
        "lowest_level": lowest,
        "series": {
            "time": thin(time),
            "tilt_angle": thin(tilt),
            "head_difference": thin(head[0]),
            "flow": thin(flow[0]),
        },
    }
    return signals, extra


def draining_mode(
    spec: OperationSpec, solution: Solution, network: Network
) -> tuple[Signals, dict[str, Any]]:
    """The reservoirs draining over one refill interval (exact solution of the linear ODE;
    the time to level from its root).

    ``network`` is the network whose linear resistances stand for the chip.
    """
    fluid = solution.fluid
    pressures, flows = _ports(solution)
    nodes = list(spec.drain_areas)
    rho_g = fluid.density * STANDARD_GRAVITY
    conductance, offset = port_response(network, fluid, pressures, flows, nodes)
    heads = np.array([pressures[n] / rho_g for n in nodes])
    areas = np.array([spec.drain_areas[n] for n in nodes])
    drain = drain_reservoirs(
        conductance, offset, areas, heads, fluid.density, span=spec.refill_interval
    )
    # channel flows are linear in the port pressures (the other supplies fixed)
    base = solve(network, fluid, {**pressures, **{n: 0.0 for n in nodes}}, flows).flow
    per_port = np.stack(
        [solve(network, fluid, {**{k: 0.0 for k in pressures}, n: 1.0}).flow for n in nodes],
        axis=1,
    )
    coeff = per_port @ (rho_g * drain.head_coeff)
    coeff[:, 0] += base
    slope = per_port @ (rho_g * drain.head_slope)
    signals = Signals("exponential", coeff, rates=drain.rates, slope=slope,
                      end=spec.refill_interval)  # fmt: skip
    heads_now = exponential_statistics(drain.head_coeff, drain.rates, spec.refill_interval,
                                       slope=drain.head_slope)  # fmt: skip
    if np.any(heads_now["min"] < 0):
        raise SpecError("supply: a draining reservoir runs dry before the refill interval ends")
    at_refill = exponential_values(drain.head_coeff, drain.rates,
                                   np.full((len(nodes), 1), spec.refill_interval),
                                   drain.head_slope)[:, 0]  # fmt: skip
    extra = {
        "time_constant": drain.time_constant,
        "time_to_level": drain.time_to_level,
        "refill_interval": spec.refill_interval,
        "reservoirs": {
            n: {"area": float(a), "head": float(h0), "head_at_refill": float(h)}
            for n, a, h0, h in zip(nodes, areas, heads, at_refill, strict=True)
        },
        "series": {
            "time": thin(drain.time),
            "heads": {n: thin(h) for n, h in zip(nodes, drain.heads, strict=True)},
            "flow": thin(drain.flow),
        },
    }
    return signals, extra


def thin(values: np.ndarray, count: int = 65) -> list[float]:
    """About ``count`` evenly spaced samples of a time series, for results.json."""
    step = max(1, len(values) // (count - 1))
    return [float(v) for v in values[::step]]
