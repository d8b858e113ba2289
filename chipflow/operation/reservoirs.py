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

__all__ = ["Drain", "drain_reservoirs", "port_response", "RockerCycle", "rocker_cycle"]


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

    Attributes
    ----------
    time : numpy.ndarray
        Instants [s].
    heads : numpy.ndarray, shape (m, len(time))
        Liquid height above each draining port [m].
    flow : numpy.ndarray
        Total flow delivered into the network by the draining ports [m^3/s].
    time_to_level : float
        When the flow has fallen to 10 % of its start, i.e. the head differences that drive it
        are within 10 % of level [s] (inf if not within the time span).
    time_constant : float
        Slowest time constant of the draining [s].
    """

    time: np.ndarray
    heads: np.ndarray
    flow: np.ndarray
    time_to_level: float
    time_constant: float


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
    """Integrate ``A dh/dt = -(G rho g h + Q0)`` from the initial ``heads`` [m].

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
        Time span [s]; default six slowest time constants.
    """
    a = np.asarray(areas, dtype=float)
    matrix = -(conductance * density * gravity) / a[:, None]
    rate = np.abs(np.linalg.eigvals(matrix))
    rate = rate[rate > 1e-12 * rate.max(initial=0.0)] if rate.size else rate
    tau = float(1.0 / rate.min()) if rate.size else float("inf")
    end = float(span) if span is not None else 6.0 * tau
    if not np.isfinite(end) or end <= 0:
        raise SpecError("draining reservoirs: the network does not connect them to anything")

    from scipy.integrate import solve_ivp  # only for draining reservoirs (a second to load)

    def rhs(_t, h):
        return matrix @ h - offset / a

    times = np.linspace(0.0, end, samples)
    sol = solve_ivp(
        rhs,
        (0.0, end),
        np.asarray(heads, float),
        method="Radau",
        t_eval=times,
        rtol=1e-9,
        atol=1e-12 * max(1.0, float(np.max(np.abs(heads)))),
    )
    h = sol.y
    flow = (conductance * density * gravity) @ h + offset[:, None]
    delivered = np.clip(flow, 0.0, None).sum(axis=0)
    below = np.flatnonzero(delivered <= 0.1 * delivered[0])
    if below.size and below[0] > 0:
        i = below[0]
        # linear interpolation of the crossing between two samples
        f0, f1 = delivered[i - 1], delivered[i]
        target = 0.1 * delivered[0]
        t_level = float(times[i - 1] + (times[i] - times[i - 1]) * (f0 - target) / (f0 - f1))
    else:
        t_level = 0.0 if below.size else float("inf")
    return Drain(times, h, delivered, t_level, tau)


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
    """Periodic flow through a chip of ``resistance`` [Pa s/m^3] on a rocking platform.

    The platform tilts as ``theta(t) = tilt_angle sin(2 pi t / period)`` [rad]; the two
    reservoirs of cross-section ``area`` [m^2] sit ``spacing`` [m] apart.
    """
    tau = resistance * area / (2.0 * density * gravity)
    t = period * np.arange(samples) / samples
    theta = tilt_angle * np.sin(2.0 * np.pi * t / period)
    lift = spacing * np.sin(theta)
    spectrum = np.fft.rfft(lift)
    k = np.arange(spectrum.size)
    omega_tau = 2.0 * np.pi * k / period * tau
    liquid = np.fft.irfft(-spectrum / (1.0 + 1j * omega_tau), samples)
    head = liquid + lift
    flow = density * gravity * head / resistance
    return RockerCycle(t, theta, head, flow, liquid / 2.0, tau)
