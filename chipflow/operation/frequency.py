"""Small-signal response of the network to periodic supplies, in the frequency domain.

Each channel is a resistance ``R`` (the exact series of the steady solver) in series with the
liquid's inertance ``L = rho l / A``; each node has a compliance to the surroundings ``C``
(half of each soft channel or tube attached to it, plus lumped items). At the angular
frequency ``omega`` the channel admittance is ``1 / (R + j omega L)`` and the node admittance
``j omega C``; the nodal equations are the steady ones with complex entries, solved on the
same sparse pattern with pressure ports held at their harmonic pressure (zero for steady
ones) and flow ports injecting their harmonic flow (zero for a steady syringe pump, which is an
ideal flow source).

Because the network is linear, a waveform's response is the sum of the responses to its
harmonics, each solved on its own.

References
----------
.. [1] H. Bruus, *Theoretical Microfluidics*, Oxford University Press (2008), ch. 4.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import spsolve

from chipflow.network.model import Network, NodeKey
from chipflow.network.residual import check_network_solution
from chipflow.operation.compliance import inertance
from chipflow.physics.duct import resistance
from chipflow.physics.fluid import Fluid

__all__ = ["HarmonicResponse", "harmonic_response"]


@dataclass(frozen=True, eq=False)
class HarmonicResponse:
    """Complex amplitudes of one harmonic.

    Attributes
    ----------
    omega : float
        Angular frequency [rad/s].
    pressure : numpy.ndarray of complex
        Pressure amplitude at every node [Pa].
    flow : numpy.ndarray of complex
        Flow amplitude through every channel's series branch [m^3/s], positive from
        ``node_a`` to ``node_b``.
    """

    omega: float
    pressure: np.ndarray
    flow: np.ndarray


def harmonic_response(
    network: Network,
    fluid: Fluid,
    omega: float,
    node_compliance: np.ndarray,
    pressures: Mapping[NodeKey, complex],
    flows: Mapping[NodeKey, complex] | None = None,
    *,
    inertia: bool = True,
    end_conductance: tuple[np.ndarray, np.ndarray] | None = None,
) -> HarmonicResponse:
    """Solve the network at one angular frequency.

    Parameters
    ----------
    network : Network
    fluid : Fluid
    omega : float
        Angular frequency [rad/s].
    node_compliance : numpy.ndarray
        Compliance from every node to the surroundings [m^3/Pa].
    pressures : mapping
        Every pressure port (node to complex pressure amplitude [Pa]; 0 for steady ports).
    flows : mapping, optional
        Flow ports with a harmonic flow (node to complex amplitude [m^3/s]).
    inertia : bool
        Include the inertance of the liquid in each channel.
    end_conductance : (numpy.ndarray, numpy.ndarray), optional
        For channels whose steady law is nonlinear (soft roofs,
        :mod:`chipflow.operation.softwall`): the small-signal conductances ``g_a = dQ/dp_a``
        and ``g_b = -dQ/dp_b`` at the steady state [m^3/(Pa s)], so that a small change
        carries ``dQ = g_a dp_a - g_b dp_b``; with inertia the channel carries that over
        ``1 + j omega L (g_a + g_b) / 2``. Default: ``g_a = g_b = 1/R`` of the rigid channel,
        which is the plain ``1 / (R + j omega L)``.

    Raises
    ------
    NetworkError
        When the solution fails its self-check (:mod:`chipflow.network.residual`: mass
        conservation with the compliances' flows, the channel law with the complex
        impedances, conditioning).
    """
    flows = flows or {}
    n = network.n_nodes
    r = np.asarray(
        resistance(network.width, network.depth, network.length, fluid.viscosity, network.round)
    )
    g_a, g_b = (1.0 / r, 1.0 / r) if end_conductance is None else end_conductance
    g_a, g_b = np.asarray(g_a, dtype=float), np.asarray(g_b, dtype=float)
    damping = np.ones(network.n_channels, dtype=complex)
    if inertia:
        ell = inertance(network.width, network.depth, network.length, fluid.density, network.round)
        damping = damping + 1j * omega * ell * (g_a + g_b) / 2.0
    y_a, y_b = g_a / damping, g_b / damping
    fixed = np.zeros(n, dtype=bool)
    pressure = np.zeros(n, dtype=complex)
    for key, value in pressures.items():
        i = network.node_index(key)
        fixed[i] = True
        pressure[i] = value
    injected = np.zeros(n, dtype=complex)
    for key, value in flows.items():
        injected[network.node_index(key)] += value
    free = np.flatnonzero(~fixed)
    position = np.full(n, -1, dtype=np.int64)
    position[free] = np.arange(free.size)
    a, b = network.node_a, network.node_b
    ia, ib = position[a], position[b]
    fa, fb = ia >= 0, ib >= 0
    both = fa & fb
    # the flow a -> b is y_a p_a - y_b p_b: it leaves a (+) and enters b (-)
    idx = np.arange(free.size)
    rows = np.concatenate((idx, ia[fa], ib[fb], ia[both], ib[both]))
    cols = np.concatenate((idx, ia[fa], ib[fb], ib[both], ia[both]))
    data = np.concatenate(
        (
            1j * omega * np.asarray(node_compliance, dtype=float)[free],
            y_a[fa],
            y_b[fb],
            -y_b[both],
            -y_a[both],
        )
    )
    matrix = sp.csc_matrix((data, (rows, cols)), shape=(free.size, free.size))
    rhs = injected[free].copy()
    only_a, only_b = fa & ~fb, fb & ~fa
    coupling_a = y_b[only_a] * pressure[b[only_a]]
    coupling_b = y_a[only_b] * pressure[a[only_b]]
    rhs += np.bincount(ia[only_a], coupling_a.real, free.size) + 1j * np.bincount(
        ia[only_a], coupling_a.imag, free.size
    )
    rhs += np.bincount(ib[only_b], coupling_b.real, free.size) + 1j * np.bincount(
        ib[only_b], coupling_b.imag, free.size
    )
    if free.size:
        with warnings.catch_warnings():  # a singular matrix: non-finite values, judged below
            warnings.simplefilter("ignore")
            pressure[free] = spsolve(matrix, rhs)
    with np.errstate(all="ignore"):
        flow = y_a * pressure[a] - y_b * pressure[b]
        # the law each channel was solved with as dp = z q: 1/y where both ends conduct
        # alike; a soft channel's small-signal law is not of that form, so there its z is the
        # one its flow gives (the nonlinear law itself is checked by the steady solve)
        drop = pressure[a] - pressure[b]
        z = np.where((g_a == g_b) | (flow == 0), 1.0 / y_a, drop / np.where(flow == 0, 1.0, flow))
    check_network_solution(
        network,
        pressure,
        flow,
        z,
        injected=injected,
        fixed=fixed,
        leak=1j * omega * np.asarray(node_compliance, dtype=float),
    )
    return HarmonicResponse(omega, pressure, flow)
