"""Pumpless operation: gravity reservoirs that drain, and a rocking platform.

**Draining reservoirs.** A reservoir of cross-section ``A`` whose liquid stands ``h`` above
its port holds the port at ``rho g h``; the flow it delivers lowers ``h``. The network is
linear, so the flows into the reservoir ports are ``Q = G rho g h + Q0`` with ``G`` the
port conductance matrix (one steady solve per reservoir) and ``Q0`` what the other supplies
drive; the heads then obey ``A dh/dt = -Q``. For two equal reservoirs joined by a resistance
``R`` the head difference decays as ``exp(-t / tau)``, ``tau = R A / (2 rho g)``.

**Rocking platform.** A platform tilting by ``theta(t)`` lifts one reservoir ``s sin theta``
above the other (geometry, ``s`` the reservoir spacing). With equal reservoirs the head
difference of the liquid ``dh`` obeys ``d(dh)/dt = -(dh + s sin theta) / tau``; its periodic
solution is found harmonic by harmonic (a first-order high-pass of the tilt), and the flow is
``rho g (dh + s sin theta) / R``.

References
----------
.. [1] H. Bruus, *Theoretical Microfluidics*, Oxford University Press (2008), ch. 4
   (hydraulic RC circuits; a reservoir's compliance is ``A / (rho g)``).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from chipflow.errors import SpecError
from chipflow.network import solve
from chipflow.network.model import Network
from chipflow.network.supply import STANDARD_GRAVITY
from chipflow.physics.fluid import Fluid

__all__ = [
    "Drain",
    "drain_reservoirs",
    "port_response",
    "RockerCycle",
    "rocker_cycle",
    "RockerHarmonics",
    "rocker_harmonics",
]


def port_response(
    network: Network,
    fluid: Fluid,
    pressures: Mapping[str, float],
    flows: Mapping[str, float],
    nodes: list[str],
) -> tuple[np.ndarray, np.ndarray]:
    """Port conductance of ``nodes`` (pressure ports) and the flows with them at 0 Pa.

    Returns
    -------
    conductance : numpy.ndarray, shape (m, m)
        ``dQ_i / dp_j`` [m^3/(Pa s)]: flow into port ``i`` per pascal at port ``j``.
    offset : numpy.ndarray, shape (m,)
        Flow into each port [m^3/s] with every one of ``nodes`` at 0 Pa and the other
        supplies as given.
    """
    base = {**pressures, **{n: 0.0 for n in nodes}}
    zero = solve(network, fluid, base, flows)
    offset = np.array([zero.port_flow[n] for n in nodes])
    columns = []
    for node in nodes:
        unit = solve(network, fluid, {**{k: 0.0 for k in base}, node: 1.0}, None)
        columns.append([unit.port_flow[n] for n in nodes])
    return np.array(columns).T, offset


@dataclass(frozen=True, eq=False)
class Drain:
    """Reservoir heads and the flow through the network as the reservoirs drain.

    The heads are the exact solution of the linear ODE, ``h(t) = h_c + b t + sum_i v_i
    exp(lambda_i t)`` (``b`` is zero unless other supplies fill or empty reservoirs that
    only connect to each other); ``time``, ``heads`` and ``flow`` are that solution at
    evenly spaced instants, for figures.

    Attributes
    ----------
    time : numpy.ndarray
        Instants [s].
    heads : numpy.ndarray, shape (m, len(time))
        Liquid height above each draining port [m].
    flow : numpy.ndarray
        Total flow delivered into the network by the ports that deliver at the start
        [m^3/s].
    time_to_level : float
        When that flow has fallen to 10 % of its start, i.e. the head differences that drive it
        are within 10 % of level [s], the root of the exact solution (inf if it does not fall
        that far).
    time_constant : float
        Slowest time constant of the draining [s].
    rates : numpy.ndarray
        The exponents ``lambda_i`` [1/s], 0 first (the constant part).
    head_coeff : numpy.ndarray, shape (m, len(rates))
        Coefficients of each head [m] (the constant part first).
    head_slope : numpy.ndarray, shape (m,)
        ``b`` [m/s].
    """

    time: np.ndarray
    heads: np.ndarray
    flow: np.ndarray
    time_to_level: float
    time_constant: float
    rates: np.ndarray
    head_coeff: np.ndarray
    head_slope: np.ndarray


def drain_reservoirs(
    conductance: np.ndarray,
    offset: np.ndarray,
    areas: np.ndarray,
    heads: np.ndarray,
    density: float,
    span: float | None = None,
    samples: int = 401,
    gravity: float = STANDARD_GRAVITY,
) -> Drain:
    """Solve ``A dh/dt = -(G rho g h + Q0)`` from the initial ``heads`` [m] exactly.

    ``-A^-1 G rho g`` is similar to a symmetric matrix (``G`` is symmetric, ``A`` positive),
    so its eigenvalues are real and it is diagonalisable; each mode decays as
    ``exp(lambda t)``, a zero eigenvalue (reservoirs that only exchange liquid) keeps its
    level or, when the other supplies feed it, moves it linearly.

    Parameters
    ----------
    conductance, offset : numpy.ndarray
        From :func:`port_response`.
    areas : numpy.ndarray
        Reservoir cross-sections [m^2].
    heads : numpy.ndarray
        Initial liquid heights [m].
    density : float
        [kg/m^3].
    span : float, optional
        Time span of the samples [s]; default six slowest time constants.
    """
    from chipflow.operation.crossings import exponential_roots, exponential_values

    a = np.asarray(areas, dtype=float)
    k = conductance * density * gravity
    scale = np.sqrt(a)
    # symmetric form: S = -A^-1/2 K A^-1/2, h = A^-1/2 x
    sym = -(k / scale[:, None]) / scale[None, :]
    lam, vec = np.linalg.eigh(0.5 * (sym + sym.T))
    lam = np.where(np.abs(lam) <= 1e-12 * np.abs(lam).max(initial=0.0), 0.0, lam)
    moving = lam[lam < 0.0]
    tau = float(1.0 / np.abs(moving).min()) if moving.size else float("inf")
    end = float(span) if span is not None else 6.0 * tau
    if not np.isfinite(end) or end <= 0:
        raise SpecError("draining reservoirs: the network does not connect them to anything")
    # modal coordinates y = V^T A^1/2 h: dy/dt = lam y + v, v = -V^T A^-1/2 Q0
    modes = np.asarray(heads, dtype=float) * scale @ vec
    forcing = -(np.asarray(offset, dtype=float) / scale) @ vec
    back = vec / scale[:, None]  # h = back @ y
    steady = lam < 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        particular = np.where(steady, -forcing / lam, 0.0)
    constant = back @ np.where(steady, particular, modes)
    slope = back @ np.where(steady, 0.0, forcing)
    decay, where = np.unique(lam[steady], return_inverse=True)
    rates = np.concatenate([[0.0], decay])
    coeff = np.zeros((a.size, rates.size))
    coeff[:, 0] = constant
    np.add.at(coeff.T, where + 1, (back[:, steady] * (modes - particular)[steady]).T)
    times = np.linspace(0.0, end, samples)
    h = exponential_values(coeff, rates, np.tile(times, (a.size, 1)), slope)
    # port inflows: Q = K h + Q0, again an exponential sum
    q_coeff = k @ coeff
    q_coeff[:, 0] += offset
    q_slope = k @ slope
    start = q_coeff.sum(axis=1)
    delivering = start > 0
    d_coeff = q_coeff[delivering].sum(axis=0, keepdims=True)
    d_slope = q_slope[delivering].sum(keepdims=True)
    delivered = exponential_values(d_coeff, rates, times[None, :], d_slope)[0]
    target = d_coeff.copy()
    target[0, 0] -= 0.1 * d_coeff.sum()
    horizon = max(end, 6.0 * tau) if np.isfinite(tau) else end
    roots = exponential_roots(target, rates, horizon, d_slope)
    t_level = float(np.nanmin(roots)) if np.any(~np.isnan(roots)) else float("inf")
    if d_coeff.sum() <= 0:
        t_level = 0.0
    return Drain(times, h, delivered, t_level, tau, rates, coeff, slope)


@dataclass(frozen=True, eq=False)
class RockerCycle:
    """One period of a rocking platform in its periodic state.

    Attributes
    ----------
    time : numpy.ndarray
        Instants over one period [s].
    tilt : numpy.ndarray
        Tilt angle [rad].
    head_difference : numpy.ndarray
        Driving head, liquid difference plus the tilt's lift, inlet side over outlet side [m].
    flow : numpy.ndarray
        Flow through the chip, inlet to outlet [m^3/s].
    level_change : numpy.ndarray
        Change of each reservoir's liquid height from rest [m] (+ inlet, - outlet).
    time_constant : float
        ``R A / (2 rho g)`` [s].
    """

    time: np.ndarray
    tilt: np.ndarray
    head_difference: np.ndarray
    flow: np.ndarray
    level_change: np.ndarray
    time_constant: float


@dataclass(frozen=True, eq=False)
class RockerHarmonics:
    """A rocking cycle in closed form: harmonic amplitudes at ``k omega``, ``k = 1..K``.

    Attributes
    ----------
    frequency : float
        Rocking frequency [Hz].
    lift, head, liquid : numpy.ndarray of complex
        Amplitudes [m] of the tilt's lift ``s sin(theta(t))``, the driving head (lift plus
        liquid difference) and the liquid difference between the reservoirs.
    time_constant : float
        ``R A / (2 rho g)`` [s].
    """

    frequency: float
    lift: np.ndarray
    head: np.ndarray
    liquid: np.ndarray
    time_constant: float


def rocker_harmonics(
    resistance: float,
    area: float,
    spacing: float,
    tilt_angle: float,
    period: float,
    density: float,
    gravity: float = STANDARD_GRAVITY,
) -> RockerHarmonics:
    """The periodic state of a rocking platform, harmonic by harmonic.

    The tilt ``theta(t) = tilt_angle sin(omega t)`` lifts one reservoir by
    ``s sin(theta) = 2 s sum_{n odd} J_n(tilt_angle) sin(n omega t)`` (the Jacobi-Anger
    expansion, exact), kept while ``J_n`` is above 1e-17 of the first; the liquid difference
    is that lift through the first-order high-pass ``j n omega tau / (1 + j n omega tau)``
    (its ODE ``d(dh)/dt = -(dh + lift) / tau``).
    """
    from scipy.special import jv

    tau = resistance * area / (2.0 * density * gravity)
    n = np.arange(1, 62)
    bessel = np.where(n % 2 == 1, jv(n, tilt_angle), 0.0)
    keep = np.abs(bessel) > 1e-17 * max(abs(float(bessel[0])), 1e-300)
    top = int(np.flatnonzero(keep).max()) + 1 if keep.any() else 1
    n, bessel = n[:top], bessel[:top]
    lift = -2j * spacing * bessel  # sin(x) = Re(-j e^{jx})
    omega_tau = 2.0 * np.pi * n / period * tau
    head = lift * 1j * omega_tau / (1.0 + 1j * omega_tau)
    return RockerHarmonics(1.0 / period, lift, head, head - lift, tau)


def rocker_cycle(
    resistance: float,
    area: float,
    spacing: float,
    tilt_angle: float,
    period: float,
    density: float,
    samples: int = 512,
    gravity: float = STANDARD_GRAVITY,
) -> RockerCycle:
    """Periodic flow through a chip of ``resistance`` [Pa s/m^3] on a rocking platform,
    at ``samples`` instants of one period (from :func:`rocker_harmonics`).

    The platform tilts as ``theta(t) = tilt_angle sin(2 pi t / period)`` [rad]; the two
    reservoirs of cross-section ``area`` [m^2] sit ``spacing`` [m] apart.
    """
    from chipflow.operation.waveform import harmonic_series

    cycle = rocker_harmonics(resistance, area, spacing, tilt_angle, period, density, gravity)
    t = period * np.arange(samples) / samples
    theta = tilt_angle * np.sin(2.0 * np.pi * t / period)
    head = harmonic_series(cycle.head[None, :], samples)[0]
    liquid = harmonic_series(cycle.liquid[None, :], samples)[0]
    flow = density * gravity * head / resistance
    return RockerCycle(t, theta, head, flow, liquid / 2.0, cycle.time_constant)
