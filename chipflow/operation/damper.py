"""A pulsation damper: trapped air (or a compliance) at the chip's inlet, given or sized.

With a flow source (a peristaltic pump) the pump's pulse divides between the air, which
stores liquid as the pressure rises (isothermal: ``C = V / p_abs``), and the chip; the two
form a low-pass filter whose corner falls as the air grows (Bruus 2008, ch. 4: a flow source
feeding a compliance ``C`` in parallel with a resistance ``R`` passes
``1 / |1 + j omega R C|`` of its pulse).

:func:`size_air_volume` finds the smallest air volume whose floor-shear pulsation (amplitude
over mean at the fundamental) is at most the target in every seeded level, by root finding on
the full harmonic solve (the tubing, the roofs and the chip as modelled, not the lumped
formula): the pulsation falls monotonically with the air, so the root is bracketed by
quadrupling and refined by Brent's method to 1e-12 of the volume's logarithm.
:func:`damper_facts` says what the air costs: the start-up time constant with which the
chip's flow settles after the pump starts, the slowest mode of the network's RC circuit with
and without the damper (:func:`slowest_time_constant`; the damper's own ``C R_th``, with
``R_th`` the resistance its node sees with every supply at rest, beside it), and the length of
the design's own elastic tubing that would store as much.

References
----------
.. [1] H. Bruus, *Theoretical Microfluidics*, Oxford University Press (2008), ch. 4.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from chipflow.errors import SpecError
from chipflow.network import reduced_system, solve
from chipflow.network.model import Network
from chipflow.operation.compliance import tube_compliance
from chipflow.operation.model import OperationSpec

__all__ = [
    "size_air_volume",
    "damper_facts",
    "slowest_time_constant",
    "check_damper_node",
    "LARGEST_AIR",
]

#: The largest air volume chipflow sizes [m^3] (1 L: beyond it no bench damper helps).
LARGEST_AIR = 1e-3


def size_air_volume(
    target: float, pulsation: Callable[[float], float], where: str = "supply.damper"
) -> float:
    """The smallest air volume [m^3] with ``pulsation(volume) <= target``.

    Parameters
    ----------
    target : float
        Target pulsation [1].
    pulsation : callable
        The largest seeded floor-shear pulsation at an air volume [m^3] (a harmonic solve).
    where : str
        The design key, for messages.

    Raises
    ------
    SpecError
        When even :data:`LARGEST_AIR` does not reach the target.

    Examples
    --------
    A lumped RC low-pass, 40 % pulse, omega R C = V / 1 uL:

    >>> import math
    >>> v = size_air_volume(0.05, lambda v: 0.4 / math.hypot(1.0, v / 1e-9))
    >>> round(v / 1e-9, 6), round(math.sqrt((0.4 / 0.05) ** 2 - 1), 6)
    (7.937254, 7.937254)
    """
    from scipy.optimize import brentq

    start = pulsation(0.0)
    if start <= target:
        return 0.0
    high = 1e-12
    while pulsation(high) > target:
        high *= 4.0
        if high > LARGEST_AIR:
            raise SpecError(
                f"{where}: even {LARGEST_AIR * 1e6:g} mL of trapped air leaves a floor-shear "
                f"pulsation above the target {target:.3g}; raise target_pulsation or damp "
                "the pump otherwise"
            )
    low = high / 4.0 if high > 1e-12 else 0.0

    def excess(log_volume: float) -> float:
        return pulsation(float(np.exp(log_volume))) - target

    if low <= 0.0:
        return float(brentq(lambda v: pulsation(v) - target, 0.0, high, xtol=1e-24, rtol=1e-10))
    return float(np.exp(brentq(excess, np.log(low), np.log(high), xtol=1e-10, rtol=1e-12)))


def slowest_time_constant(
    network: Network, fluid, pressures: dict[str, float], compliance: np.ndarray
) -> float:
    """The slowest time constant [s] of the network's RC circuit with every supply at rest.

    With the pressure ports held and the flow ports closed, the node pressures relax as
    ``C dp/dt = -G p`` (``G`` the reduced conductance matrix, ``C`` the node compliances);
    the slowest mode decays with the largest eigenvalue ``tau`` of ``G^-1 C``, found by power
    iteration (``G^-1 C`` is self-adjoint in the ``G`` inner product, so the Rayleigh quotient
    ``x'Cx / x'Gx`` converges to it).
    """
    from scipy.sparse.linalg import splu

    system = reduced_system(network, fluid, {k: 0.0 for k in pressures}, None)
    c = np.asarray(compliance, dtype=float)[system.free]
    if not np.any(c > 0):
        return 0.0
    lu = splu(system.matrix.tocsc())
    x = c.copy()
    tau = 0.0
    for _ in range(500):  # converges geometrically with the gap to the next mode
        y = lu.solve(c * x)
        estimate = float(x @ (c * x)) / float(x @ (system.matrix @ x))
        x = y / np.abs(y).max()
        if abs(estimate - tau) <= 1e-12 * estimate:
            break
        tau = estimate
    return float(estimate)


def damper_facts(
    spec: OperationSpec,
    network: Network,
    fluid,
    pressures: dict[str, float],
    node: str,
    compliance: float,
    volume: float | None,
    node_compliance: np.ndarray,
) -> dict[str, Any]:
    """What a damper of ``compliance`` [m^3/Pa] at ``node`` costs and stands for.

    ``network`` is the (linearised) network, ``pressures`` its pressure ports (held at rest
    for the time constants), ``node_compliance`` every node's compliance without the damper
    [m^3/Pa].
    """
    rest = solve(network, fluid, {k: 0.0 for k in pressures}, {node: 1.0})
    seen = float(rest.node_pressure(node))  # R_th: the pressure a unit flow raises there
    with_damper = np.asarray(node_compliance, dtype=float).copy()
    with_damper[network.node_index(node)] += compliance
    out: dict[str, Any] = {
        "node": node,
        "compliance": compliance,
        "air_volume": volume,
        "resistance_seen": seen,
        "damper_time_constant": compliance * seen,
        "start_up_time_constant": slowest_time_constant(network, fluid, pressures, with_damper),
        "start_up_time_constant_without": slowest_time_constant(
            network, fluid, pressures, node_compliance
        ),
        "equivalent_tubing": None,
    }
    tubing = spec.tubing
    tubes = network.round
    if tubing is not None and np.any(tubes):
        diameter = float(network.width[tubes][0])
        per_metre = float(tube_compliance(diameter, tubing.outer_diameter, 1.0, tubing.modulus,
                                          tubing.poisson_ratio))  # fmt: skip
        out["equivalent_tubing"] = compliance / per_metre
    return out


def check_damper_node(network: Network, pressures: dict[str, float], node: str, where: str) -> None:
    """Refuse a damper at a node whose pressure a supply holds (it would store nothing)."""
    if network.node_name(network.node_index(node)) in pressures:
        raise SpecError(
            f"{where}: the damper sits at {node!r}, whose pressure the supply holds, so it "
            "stores nothing; put inlet tubing between a pressure source and the chip "
            "(inlet_tubing) or drive the chip with a flow"
        )
