"""The steady network with soft roofs, solved self-consistently.

A roof that bulges under pressure deepens its channel, which lowers the channel's resistance,
which changes the pressures that made it bulge. Each channel's flow is the nonlinear law of
:mod:`chipflow.operation.deformation`,

    Q = g [Phi(p_a) - Phi(p_b)],

with ``g`` the rigid channel's conductance (exact duct series) and ``Phi`` a quartic of the
pressure set by the roof's model and the channel's width and depth (``Phi(p) = p`` for rigid
channels and tubing). Conservation at every free node then is a nonlinear system in the node
pressures, solved by Newton's method from the rigid solution: the Jacobian has the steady
matrix's sparsity pattern, with ``g Phi'(p)`` at each end of each channel (not symmetric, so
the step is a sparse LU solve). Each step is halved until the largest node imbalance falls and
no roof touches its floor.

**Convergence.** The solve stops when the largest node imbalance, relative to the flows
balanced at that node (``sum |g Phi|`` of its channels plus its imposed flow, as the linear
solver's residual), is at most :data:`TOLERANCE` (1e-10) *and* the last Newton step moved no
pressure by more than :data:`TOLERANCE` of the largest pressure. Otherwise, after
:data:`MAX_ITERATIONS` steps, it raises :class:`~chipflow.errors.NetworkError` naming the
worst node and the largest bulge: never a silent result. Newton's method converges
quadratically here (the law is a smooth monotone polynomial); the bundled soft-roof cases take
3-6 steps.

**Self-check.** After the solve, :func:`solution_residual` recomputes, from the final node
pressures alone, every channel's law (its pressure drop against its secant resistance times
its flow) and the balance at every free node, and the solve refuses a result whose residuals
exceed :data:`CHECK_TOLERANCE`.

The returned :class:`DeformedSolution` is a :class:`~chipflow.network.Solution` whose
per-channel state (shear, velocity, residence time, resistance) is that of the deformed
channels, so the per-level table and every check downstream see the deformed chip:

- the floor shear is the exact series' floor shear at the channel's flow, times the mean over
  the floor (across the width and along the length) of the deformed floor shear over the
  rigid one. Under the lubrication profile the floor shear at a point of a section is
  ``(h(x) / 2) |dp/dz|``, with ``h(x) = h + p psi(x)`` the local depth and
  ``|dp/dz| = 12 mu Q / (w <h(x)^3>)``; its mean over the floor is
  ``[dp + m_1/h (p_a^2 - p_b^2) / 2] / [Phi(p_a) - Phi(p_b)]`` times the rigid value, exact
  for the model. The centre line of the floor, where the roof bulges most, sees more (the
  same with ``psi(0)`` for ``m_1``), the floor beside the side walls less (about the
  resistance ratio). The peak wall shear is the rigid peak times the centre line's ratio (an
  approximation: the velocity profile's shape across the width is taken as the rigid one's);
- the mean depth is the length-mean of ``h + p <psi>``; velocity, residence time,
  hydraulic diameter, Reynolds number and entrance length follow from it;
- the resistance is the secant ``dp / Q``.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import spsolve

from chipflow.errors import NetworkError
from chipflow.network import Solution, reduced_system, solve
from chipflow.network.model import Network
from chipflow.operation.deformation import (
    MODEL_NAMES,
    model_range,
    potential,
    potential_slope,
    roof_moments,
)
from chipflow.operation.model import Walls
from chipflow.physics.duct import DuctFlow, entrance_length, flow_state, resistance
from chipflow.physics.fluid import Fluid

__all__ = [
    "WallLaw",
    "wall_law",
    "DeformedSolution",
    "SoftSolve",
    "solve_soft",
    "solve_operating_point",
    "solution_residual",
    "TOLERANCE",
    "MAX_ITERATIONS",
    "CHECK_TOLERANCE",
]

#: Relative node imbalance and relative Newton step at which the soft-wall solve stops [1].
TOLERANCE = 1e-10
#: Newton steps after which the soft-wall solve gives up with an error.
MAX_ITERATIONS = 50
#: Largest relative residual the self-check accepts [1].
CHECK_TOLERANCE = 1e-8


@dataclass(frozen=True, eq=False)
class WallLaw:
    """The flow law of every channel of a network with soft roofs.

    Attributes
    ----------
    conductance : numpy.ndarray
        Rigid conductance ``1/R`` of every channel [m^3/(Pa s)] (exact series).
    depth : numpy.ndarray
        Rigid depth [m].
    moments : numpy.ndarray, shape (5, channels)
        Model code, centre deflection and width moments per pascal
        (:func:`~chipflow.operation.deformation.plate_moments`); zeros (code -1) for rigid
        channels and tubing.
    soft : numpy.ndarray of bool
        Channels under a soft roof.
    thickness : float
        Roof thickness [m] (0 without walls).
    """

    conductance: np.ndarray
    depth: np.ndarray
    moments: np.ndarray
    soft: np.ndarray
    thickness: float = 0.0

    def potential(self, pressure: np.ndarray) -> np.ndarray:
        """``Phi`` [Pa] of each channel at the given per-channel pressures."""
        return potential(pressure, self.depth, self.moments)

    def slope(self, pressure: np.ndarray) -> np.ndarray:
        """``dPhi/dp`` [1] of each channel at the given per-channel pressures."""
        return potential_slope(pressure, self.depth, self.moments)

    def flows(self, network: Network, pressure: np.ndarray) -> np.ndarray:
        """Channel flows [m^3/s] at node pressures [Pa], positive from ``node_a``."""
        a, b = network.node_a, network.node_b
        return self.conductance * (self.potential(pressure[a]) - self.potential(pressure[b]))

    def model_names(self) -> np.ndarray:
        """The roof model of each channel, "" for rigid ones."""
        names = np.array(["", *MODEL_NAMES], dtype=object)
        return names[self.moments[0].astype(int) + 1]


def wall_law(
    network: Network, fluid: Fluid, walls: Walls | None, method: str = "series"
) -> WallLaw:
    """The per-channel law of ``network`` under ``walls`` (every rectangular channel has the
    roof; tubing is rigid). Without walls every channel is rigid."""
    g = 1.0 / np.asarray(
        resistance(
            network.width, network.depth, network.length, fluid.viscosity, network.round, method
        )
    )
    moments = np.zeros((5, network.n_channels))
    moments[0] = -1.0
    soft = np.zeros(network.n_channels, dtype=bool)
    if walls is not None:
        soft = ~network.round
        moments[:, soft] = roof_moments(
            network.width[soft], walls.roof_thickness, walls.modulus, walls.poisson_ratio
        )
    thickness = 0.0 if walls is None else walls.roof_thickness
    return WallLaw(g, np.asarray(network.depth, dtype=float), moments, soft, thickness)


@dataclass(frozen=True, eq=False)
class DeformedSolution(Solution):
    """A :class:`~chipflow.network.Solution` of channels whose roofs bulge: the pressures and
    flows of the self-consistent solve, and a per-channel state of the deformed channels
    (see the module notes). ``rigid_state`` is the rigid channels' state at the same flows."""

    law: Any = None

    @functools.cached_property
    def rigid_state(self) -> DuctFlow:
        """The rigid channels' state at the solved flows."""
        net = self.network
        return flow_state(net.width, net.depth, net.length, self.flow, self.fluid.viscosity,
                          self.fluid.density, net.round, self.method)  # fmt: skip

    @functools.cached_property
    def state(self) -> DuctFlow:
        """Everything per channel on the deformed chip."""
        net, law, rigid = self.network, self.law, self.rigid_state
        shape = deformed_shape(law, self.pressure[net.node_a], self.pressure[net.node_b])
        soft = law.soft
        w, q, mu, rho = net.width, self.flow, self.fluid.viscosity, self.fluid.density
        depth = np.where(soft, shape["mean_depth"], net.depth)
        area = w * depth
        drop = self.pressure[net.node_a] - self.pressure[net.node_b]
        u = q / area
        d_h = 2.0 * w * depth / (w + depth)
        re = rho * np.abs(u) * d_h / mu
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            r_secant = np.where(q != 0, drop / q, 1.0 / (law.conductance * shape["slope"]))
            t_res = np.where(q != 0, net.length * area / np.abs(q), np.inf)
            u_max = np.where(rigid.mean_velocity != 0,
                             rigid.max_velocity / rigid.mean_velocity * u, 0.0)  # fmt: skip
        tau_mean = np.abs(drop) * area / (net.length * 2.0 * (w + depth))
        fields = {
            "pressure_drop": drop,
            "resistance": r_secant,
            "mean_velocity": u,
            "max_velocity": u_max,
            "wall_shear_mean": tau_mean,
            "wall_shear_max": np.asarray(rigid.wall_shear_max) * shape["centre_shear_ratio"],
            "wall_shear_floor": np.asarray(rigid.wall_shear_floor) * shape["shear_ratio"],
            "reynolds": re,
            "hydraulic_diameter": d_h,
            "residence_time": t_res,
            "entrance_length": entrance_length(d_h, re),
        }
        return replace(
            rigid, **{k: np.where(soft, v, getattr(rigid, k)) for k, v in fields.items()}
        )


def deformed_shape(law: WallLaw, p_a: np.ndarray, p_b: np.ndarray) -> dict[str, np.ndarray]:
    """Length-means over each channel of its deformed shape, from its end pressures [Pa].

    Returns ``mean_depth`` [m] (of ``h + p <psi>``), ``shear_ratio`` [1] (deformed over rigid
    floor shear at the same flow, mean over the floor), ``centre_shear_ratio`` [1] (the same
    on the floor's centre line), ``resistance_ratio`` [1] (deformed over rigid resistance) and
    ``slope`` (``dPhi/dp`` at the mean pressure).
    """
    h, m = law.depth, law.moments
    centre, m1 = m[1], m[2]
    phi_a, phi_b = law.potential(p_a), law.potential(p_b)
    drop, d_phi = p_a - p_b, phi_a - phi_b
    mean = 0.5 * (p_a + p_b)
    slope = law.slope(mean)

    def antiderivative(p):  # int Phi dp
        c2, c3, c4 = 1.5 * m1 / h, m[3] / h**2, m[4] / (4.0 * h**3)
        return p**2 * (0.5 + p * (c2 / 3.0 + p * (c3 / 4.0 + p * c4 / 5.0)))

    # a channel whose end pressures agree to 1e-9 takes the limit (no cancellation)
    tiny = np.abs(drop) <= 1e-9 * (np.abs(p_a) + np.abs(p_b))
    with np.errstate(divide="ignore", invalid="ignore"):
        moved = (p_a * phi_a - p_b * phi_b - antiderivative(p_a) + antiderivative(p_b)) / d_phi
        mean_depth = np.where(tiny, h + m1 * mean, h + m1 * moved)
        squares = (p_a**2 - p_b**2) / 2.0
        shear, centre_shear = (
            np.where(tiny, (1.0 + c * mean / h) / slope, (drop + c / h * squares) / d_phi)
            for c in (m1, centre)
        )
        ratio = np.where(tiny, 1.0 / slope, drop / d_phi)
    return {"mean_depth": mean_depth, "shear_ratio": shear, "centre_shear_ratio": centre_shear,
            "resistance_ratio": ratio, "slope": slope}  # fmt: skip


@dataclass(frozen=True, eq=False)
class SoftSolve:
    """The result of :func:`solve_operating_point`.

    Attributes
    ----------
    solution : Solution
        The deformed solution (a :class:`DeformedSolution`), or the rigid one without walls.
    rigid : Solution
        The rigid channels under the same supply.
    law : WallLaw
    iterations : int
        Newton steps taken (0 without soft roofs).
    tolerance : float
        The stopping tolerance (:data:`TOLERANCE`).
    residual : float
        Largest relative node imbalance of the last iterate [1].
    check : dict
        :func:`solution_residual` of the result.
    """

    solution: Solution
    rigid: Solution
    law: WallLaw
    iterations: int = 0
    tolerance: float = TOLERANCE
    residual: float = 0.0
    check: dict[str, float] | None = None

    @property
    def soft(self) -> bool:
        """Whether any channel has a soft roof."""
        return bool(self.law.soft.any())

    def one_pass_change(self) -> np.ndarray:
        """Fall of each channel's resistance at the *rigid* solution's pressures [1]: the
        one-pass estimate, kept as a diagnostic."""
        net, p = self.rigid.network, self.rigid.pressure
        return 1.0 - deformed_shape(self.law, p[net.node_a], p[net.node_b])["resistance_ratio"]

    def resistance_change(self) -> np.ndarray:
        """Fall of each channel's resistance on the deformed chip, at its own pressures [1]."""
        net, p = self.solution.network, self.solution.pressure
        return 1.0 - deformed_shape(self.law, p[net.node_a], p[net.node_b])["resistance_ratio"]

    def out_of_range(self) -> np.ndarray:
        """Why each channel lies outside its roof model's range ("" inside, or rigid)."""
        net, p = self.solution.network, self.solution.pressure
        high = np.maximum(np.abs(p[net.node_a]), np.abs(p[net.node_b]))
        reasons = model_range(net.width, net.depth, net.length, self.law.thickness,
                              self.law.moments, high)  # fmt: skip
        return np.where(self.law.soft, reasons, "")

    def to_dict(self) -> dict[str, Any]:
        """JSON-able summary of the solve."""
        return {
            "method": "Newton on the node pressures, from the rigid solution",
            "tolerance": self.tolerance,
            "iterations": self.iterations,
            "residual": self.residual,
            **(self.check or {}),
        }


def solution_residual(
    network: Network,
    pressure: np.ndarray,
    flow: np.ndarray,
    resistance: np.ndarray,
    *,
    injected: np.ndarray,
    fixed: np.ndarray,
) -> dict[str, float]:
    """The self-check of a solved network: conservation at every free node and the channel
    law on every channel.

    ``mass_residual`` is the largest net flow into a free node (its channels' flows and its
    imposed inflow) over the largest flow anywhere; ``law_residual`` the largest
    ``|dp - R q|`` of a channel over the largest pressure drop, with ``R`` the resistance the
    law gives at the final pressures (for a soft roof: its secant ``dp / (g dPhi)``).

    Parameters
    ----------
    network : Network
    pressure : numpy.ndarray
        Node pressures [Pa].
    flow : numpy.ndarray
        Channel flows [m^3/s].
    resistance : numpy.ndarray
        Each channel's resistance under its law at ``pressure`` [Pa s/m^3].
    injected : numpy.ndarray
        Imposed inflow at every node [m^3/s].
    fixed : numpy.ndarray of bool
        Pressure-fixed nodes.
    """
    from chipflow.network.residual import check_network_solution

    measures = check_network_solution(
        network, pressure, flow, resistance, injected=injected, fixed=fixed, raise_error=False
    )  # the shared measures; the soft solve judges them against its own Newton tolerance
    return {"mass_residual": measures.mass_residual, "law_residual": measures.law_residual}


def solve_soft(
    network: Network,
    fluid: Fluid,
    law: WallLaw,
    pressures: Mapping | None = None,
    flows: Mapping | None = None,
    *,
    tolerance: float = TOLERANCE,
    max_iterations: int = MAX_ITERATIONS,
) -> SoftSolve:
    """Solve the network with its nonlinear channel laws (see the module notes).

    Raises
    ------
    NetworkError
        No convergence within ``max_iterations`` Newton steps, a roof that would touch the
        channel floor, or a result that fails the self-check.
    """
    rigid = solve(network, fluid, pressures, flows)
    if not law.soft.any():
        return SoftSolve(rigid, rigid, law)
    system = reduced_system(network, fluid, pressures, flows)
    a, b, n = network.node_a, network.node_b, network.n_nodes
    free = system.free
    fixed = np.ones(n, dtype=bool)
    fixed[free] = False
    position = np.full(n, -1, dtype=np.int64)
    position[free] = np.arange(free.size)
    ia, ib = position[a], position[b]
    fa, fb = ia >= 0, ib >= 0
    injected = system.injected
    g = law.conductance

    def imbalance(p: np.ndarray) -> tuple[np.ndarray, float, int]:
        phi_a, phi_b = law.potential(p[a]), law.potential(p[b])
        q = g * (phi_a - phi_b)
        out = np.bincount(a, q, n) - np.bincount(b, q, n) - injected
        term = g * (np.abs(phi_a) + np.abs(phi_b))
        size = np.bincount(a, term, n) + np.bincount(b, term, n) + np.abs(injected)
        with np.errstate(divide="ignore", invalid="ignore"):
            rel = np.where(size[free] > 0, np.abs(out[free]) / size[free], 0.0)
        worst = int(np.argmax(rel)) if rel.size else 0
        return out[free], float(rel.max(initial=0.0)), worst

    def touches(p: np.ndarray) -> bool:
        low = np.minimum(p[a], p[b])
        return bool(np.any(law.soft & (law.depth + law.moments[1] * low <= 0.0)))

    p = rigid.pressure.copy()
    residual, rel, worst = imbalance(p)
    step_size = np.inf
    iterations = 0
    scale = max(float(np.abs(p).max()), 1e-300)
    while not (rel <= tolerance and step_size <= tolerance):
        if iterations >= max_iterations:
            raise _no_convergence(network, law, p, rel, free[worst], iterations, tolerance)
        ga = g * law.slope(p[a])
        gb = g * law.slope(p[b])
        both = fa & fb
        rows = np.concatenate((ia[fa], ib[fb], ia[both], ib[both]))
        cols = np.concatenate((ia[fa], ib[fb], ib[both], ia[both]))
        data = np.concatenate((ga[fa], gb[fb], -gb[both], -ga[both]))
        jacobian = sp.csc_matrix((data, (rows, cols)), shape=(free.size, free.size))
        delta = spsolve(jacobian, -residual)
        factor = 1.0
        for _ in range(40):  # halve the step until the imbalance falls and no roof collapses
            trial = p.copy()
            trial[free] += factor * delta
            t_res, t_rel, t_worst = imbalance(trial)
            if not touches(trial) and (t_rel < rel or t_rel <= tolerance):
                break
            factor /= 2.0
        else:
            raise _no_convergence(network, law, p, rel, free[worst], iterations, tolerance)
        p, residual, rel, worst = trial, t_res, t_rel, t_worst
        scale = max(float(np.abs(p).max()), 1e-300)
        step_size = float(np.abs(factor * delta).max(initial=0.0)) / scale
        iterations += 1
    flow = law.flows(network, p)
    solution = _deformed(rigid, law, p, flow, rel)
    check = solution_residual(network, p, flow, solution.resistance, injected=injected,
                              fixed=fixed)  # fmt: skip
    if max(check.values()) > CHECK_TOLERANCE:
        raise NetworkError(
            f"the soft-wall solution fails its self-check (node imbalance "
            f"{check['mass_residual']:.2g}, channel law {check['law_residual']:.2g} of the "
            f"largest flow and drop, limit {CHECK_TOLERANCE:g})"
        )
    return SoftSolve(solution, rigid, law, iterations, tolerance, rel, check)


def _deformed(
    rigid: Solution, law: WallLaw, pressure: np.ndarray, flow: np.ndarray, residual: float
) -> DeformedSolution:
    net = rigid.network
    out = np.bincount(net.node_a, flow, net.n_nodes) - np.bincount(net.node_b, flow, net.n_nodes)
    nodes = np.asarray(rigid.port_flow.nodes)
    pressure_ports = np.array([net.node_index(k) for k in rigid.port_pressure], dtype=np.int64)
    flows = np.where(np.isin(nodes, pressure_ports), out[nodes], rigid.port_flow.flows)
    port_flow = type(rigid.port_flow)(net, nodes, flows)
    return DeformedSolution(
        network=net,
        fluid=rigid.fluid,
        pressure=pressure,
        flow=flow,
        port_flow=port_flow,
        port_pressure=dict(rigid.port_pressure),
        residual=residual,
        method=rigid.method,
        law=law,
    )


def _no_convergence(network, law, p, rel, node, iterations, tolerance) -> NetworkError:
    bulge = law.moments[1] * np.maximum(np.abs(p[network.node_a]), np.abs(p[network.node_b]))
    i = int(np.argmax(np.where(law.soft, bulge / law.depth, 0.0)))
    return NetworkError(
        f"the soft-roof network did not converge in {iterations} Newton steps (largest node "
        f"imbalance {rel:.2g} of the flows at node {network.node_name(int(node))}, tolerance "
        f"{tolerance:g}); the roof of channel {network.channel_name(i)} bulges "
        f"{bulge[i] * 1e6:.3g} um over a {law.depth[i] * 1e6:.3g} um deep channel: use a "
        "stiffer or thicker roof or a lower pressure"
    )


def solve_operating_point(
    walls: Walls | None,
    network: Network,
    fluid: Fluid,
    pressures: Mapping | None = None,
    flows: Mapping | None = None,
) -> SoftSolve:
    """The steady solution under ``walls``: self-consistent with soft roofs, the plain linear
    solve without."""
    return solve_soft(network, fluid, wall_law(network, fluid, walls), pressures, flows)
