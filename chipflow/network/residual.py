"""The self-check of every network solve: conservation, the channel law and conditioning.

A sparse solve always returns numbers. Whether they mean anything is a separate question:
a channel a million times wider than the rest (a mistyped ``"1e30 um"``) conducts so much
that the pressures at its two ends are equal in floating point, its flow rounds to zero and
the flow that should cross it vanishes. The solver's own residual (relative to the size of
the terms it sums) stays at 1e-16; the flows do not add up. :func:`check_solution` judges a
solution by what a person reads from it, the flows and pressure drops, and raises a
:class:`~chipflow.errors.NetworkError` naming the channel or node and the likely cause when
they cannot be trusted.

Three measures, each a plain number ``[-]`` (kept in ``results.json`` under ``totals``):

``mass_residual``
    The largest net flow into a node whose pressure is free (the sum of its channel flows,
    its imposed inflow and, in a time-harmonic solve, the flow into its compliance), over
    the largest flow anywhere in the network (a channel's or a port's).
``law_residual``
    The largest ``|dp - R q|`` of a channel (pressure drop against resistance times flow:
    the channel law; with complex impedances in a harmonic solve), over the largest
    pressure drop of any channel.
``condition``
    How much rounding the pressures can cost the flows: the largest over free nodes of
    ``sum g (|p_a| + |p_b|) + |imposed inflow|`` over the largest flow, where ``g = 1/R``
    runs over the node's channels. Computed flows are differences of pressures, each known
    to a relative ``eps`` (2.2e-16); a node balances terms this many times larger than the
    flows, so its balance, and every flow there, is known to about ``eps x condition`` of
    the largest flow. About 10-1000 for real chips; 1e28 for the mistyped channel above.

The tolerance is ``residual_tolerance = SAFETY x eps x max(1, condition)`` (:data:`SAFETY`
16). A solution passes when

1. every pressure and flow is finite,
2. ``residual_tolerance <= MAX_RESIDUAL`` (1e-6): rounding alone can keep every flow within
   a millionth of the largest one; otherwise the system is too ill-conditioned to solve in
   floating point, and the error names the channel whose conductance does it,
3. ``mass_residual <= residual_tolerance`` and ``law_residual <= residual_tolerance``.

Conservation, the channel law at every channel and the pressures as potentials (the drop of
a channel is the difference of its end pressures) determine a linear network's solution,
and in a passive network a set of node imbalances cannot drive larger flows than their sum,
so a solution within these tolerances is within them of the exact one.

Using it from a new solve
-------------------------
Every solve path calls :func:`check_solution` on what it returns: the steady solve
(:func:`chipflow.network.solve`), the harmonic solve
(:func:`chipflow.operation.frequency.harmonic_response`) and the batched Monte Carlo solve
(:func:`chipflow.variation.batch.solve_batch`, vectorised over samples). A new solver (a
self-consistent soft-wall solve, a transport solve on the network's flows) does the same with
the law it solved::

    from chipflow.network.residual import check_network_solution

    report = check_network_solution(
        network, pressure, flow, resistance,   # resistance: the R(p) of the final iterate
        injected=injected, fixed=fixed,        # imposed inflow per node; pressure-fixed nodes
    )
    # raises NetworkError when the solution cannot be trusted; else report.to_dict() for
    # results.json

Arrays may carry a leading sample axis (``pressure`` of shape ``(S, n_nodes)``, ``flow`` and
``resistance`` ``(S, n_channels)``) and may be complex. Without a
:class:`~chipflow.network.model.Network`, call :func:`check_solution` with the channel ends
and, for the messages, the channel and node names and sizes.

Examples
--------
>>> import numpy as np
>>> a, b = np.array([0, 1]), np.array([1, 2])
>>> r = np.array([1e12, 1e12])                     # two equal channels in series
>>> p = np.array([2.0, 1.0, 0.0])
>>> q = (p[a] - p[b]) / r
>>> check_solution(a, b, r, p, q, fixed=np.array([True, False, True])).mass_residual
0.0
>>> r[0] = 1e-20                                   # the first one absurdly wide
>>> p = np.array([1.0, 1.0, 0.0])                  # equal in floating point
>>> q = (p[a] - p[b]) / r
>>> check_solution(a, b, r, p, q, fixed=np.array([True, False, True]))  # doctest: +ELLIPSIS
Traceback (most recent call last):
...
chipflow.errors.NetworkError: ...: channel c0; it conducts 1e+32 times more than the other ...
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from chipflow.errors import NetworkError

__all__ = [
    "Residual",
    "check_solution",
    "check_network_solution",
    "SAFETY",
    "MAX_RESIDUAL",
    "EPS",
    "RESIDUAL_UNITS",
]

#: Machine epsilon of float64.
EPS = float(np.finfo(float).eps)
#: Factor between the rounding bound ``eps x condition`` and the tolerance: covers the sums
#: at a node and the growth of the factorisation. The property test of random networks
#: across 12 decades (tests/test_residual.py) finds ``mass_residual <= 2 eps x condition``.
SAFETY = 16.0
#: Largest tolerance accepted: flows must be trustworthy to a millionth of the largest flow.
MAX_RESIDUAL = 1e-6
#: Imbalances [m^3/s] and channel-law misses [Pa] below this are zero: far below anything
#: physical (the units boundary refuses magnitudes under 1e-60), where floats turn subnormal.
FLOOR = 1e-200
#: A channel conducting this many times more than the median one is named as the cause of an
#: ill-conditioned system; otherwise the pressure level is.
EXTREME_CONDUCTANCE = 100.0
#: Keys the check adds to results (``totals``) and their units.
RESIDUAL_UNITS = {
    "mass_residual": "1",
    "law_residual": "1",
    "condition": "1",
    "residual_tolerance": "1",
}


@dataclass(frozen=True)
class Residual:
    """How well a solution satisfies its laws (worst over samples), see the module notes.

    Attributes
    ----------
    mass_residual : float
        Largest net inflow of a free node over the largest flow [-].
    law_residual : float
        Largest ``|dp - R q|`` over the largest pressure drop [-].
    condition : float
        Rounding amplification of the flows [-] (1 for a network without flow).
    tolerance : float
        ``SAFETY x eps x max(1, condition)`` [-].
    """

    mass_residual: float
    law_residual: float
    condition: float
    tolerance: float

    def to_dict(self) -> dict[str, float]:
        """The measures under their results.json names (see :data:`RESIDUAL_UNITS`)."""
        return {
            "mass_residual": self.mass_residual,
            "law_residual": self.law_residual,
            "condition": self.condition,
            "residual_tolerance": self.tolerance,
        }


def _node_sum(index: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    """Sum ``values`` (S, C) into nodes ``index`` (C,) per sample: (S, n); real or complex."""
    s = values.shape[0]
    flat = (index[None, :] + n * np.arange(s)[:, None]).ravel()
    if np.iscomplexobj(values):
        re = np.bincount(flat, values.real.ravel(), s * n)
        im = np.bincount(flat, values.imag.ravel(), s * n)
        return (re + 1j * im).reshape(s, n)
    return np.bincount(flat, values.ravel(), s * n).reshape(s, n)


def _rows(value: ArrayLike | None, s: int, width: int, dtype=float) -> np.ndarray:
    if value is None:
        return np.zeros((s, width), dtype=dtype)
    arr = np.asarray(value)
    return np.broadcast_to(arr if arr.ndim == 2 else arr[None, :], (s, width))


def _length_text(value: float) -> str:
    for unit, scale in (("m", 1.0), ("mm", 1e-3), ("um", 1e-6), ("nm", 1e-9)):
        if abs(value) >= scale:
            return f"{value / scale:.4g} {unit}"
    return f"{value:.3g} m"


class _ChannelNames:
    """Channel names of a network, made one at a time (a million default names are not built
    for one message)."""

    def __init__(self, network: Any) -> None:
        self._network = network

    def __getitem__(self, index: int) -> str:
        return self._network.channel_name(int(index))


def _median_of_others(values: np.ndarray, j: int) -> float:
    """Median of the finite positive ``values`` other than the ``j``-th (NaN if none)."""
    v = np.delete(np.asarray(values, dtype=float), j)
    v = v[np.isfinite(v) & (v > 0)]
    return float(np.median(v)) if v.size else np.nan


def _cause(
    j: int,
    conductance: np.ndarray,
    sizes: dict[str, np.ndarray] | None,
    name: str,
) -> str:
    """Why channel ``j`` conducts so much more than the rest, in words."""
    median = _median_of_others(conductance, j)
    words = f"channel {name}"
    if sizes:
        worst, what = 0.0, ""
        for label, values in sizes.items():
            v = np.asarray(values, dtype=float)
            if v.size <= j or not np.isfinite(v[j]) or v[j] <= 0:
                continue
            typical = _median_of_others(v, j)
            if not np.isfinite(typical):
                continue
            # wide or deep channels conduct more, long ones less
            ratio = v[j] / typical if label != "long" else typical / v[j]
            if ratio > worst:
                worst, what = ratio, f"{_length_text(v[j])} {label}"
                typical_text = _length_text(typical)
                what += f" (the other channels: {typical_text} {label} in the median)"
        if what and worst > 10:
            words += f" is {what}"
    g = conductance[j]
    if np.isfinite(g) and np.isfinite(median) and median > 0:
        words += f"; it conducts {g / median:.3g} times more than the other channels' median"
    elif not np.isfinite(g):
        words += "; its resistance is zero in floating point"
    return words


def check_solution(
    node_a: ArrayLike,
    node_b: ArrayLike,
    resistance: ArrayLike,
    pressure: ArrayLike,
    flow: ArrayLike,
    *,
    injected: ArrayLike | None = None,
    fixed: ArrayLike | None = None,
    leak: ArrayLike | None = None,
    channel_names: Sequence[str] | Any | None = None,
    node_names: Sequence[str] | None = None,
    sizes: dict[str, ArrayLike] | None = None,
    raise_error: bool = True,
) -> Residual:
    """Check a solved network; raise :class:`NetworkError` when it cannot be trusted.

    Parameters
    ----------
    node_a, node_b : array_like of int
        End nodes of every channel (C,); positive flow runs from ``node_a`` to ``node_b``.
    resistance : array_like
        The law each channel was solved with, ``dp = R q`` [Pa s/m^3]: (C,) or (S, C); real,
        or complex impedances for a harmonic solve.
    pressure : array_like
        Node pressures [Pa], (n,) or (S, n).
    flow : array_like
        Channel flows [m^3/s], (C,) or (S, C).
    injected : array_like, optional
        Imposed inflow at every node [m^3/s] (0 where none), (n,) or (S, n).
    fixed : array_like of bool, optional
        Nodes whose pressure was imposed (n,): their balance is the port flow and is not
        checked. Default: none.
    leak : array_like, optional
        Admittance from every node to the surroundings [m^3/(Pa s)], (n,) or (S, n): the
        flow ``leak x p`` leaves the node (``j omega C`` of a compliance).
    channel_names, node_names : sequence of str, optional
        For the messages (default ``c0, c1, ...`` and ``n0, n1, ...``).
    sizes : dict, optional
        ``{"wide": width, "deep": depth, "long": length}`` arrays [m] (C,), so that the
        message names the size that makes a channel conduct too much.
    raise_error : bool
        False: return the measures without judging them.

    Returns
    -------
    Residual
        The worst measures over all samples.

    Raises
    ------
    NetworkError
        Non-finite values, a system too ill-conditioned for floating point (naming the
        channel and its size), or a node or channel breaking its law beyond the tolerance.
    """
    a = np.asarray(node_a, dtype=np.int64)
    b = np.asarray(node_b, dtype=np.int64)
    p = np.atleast_2d(np.asarray(pressure))
    s, n = p.shape
    c = a.size
    q = _rows(flow, s, c, complex if np.iscomplexobj(flow) else float)
    r = _rows(resistance, s, c, complex if np.iscomplexobj(resistance) else float)
    inj = _rows(injected, s, n)
    free = np.ones(n, bool) if fixed is None else ~np.asarray(fixed, dtype=bool)

    def channel_name(j: int) -> str:
        return channel_names[j] if channel_names is not None else f"c{j}"

    def node_name(i: int) -> str:
        return node_names[i] if node_names is not None else f"n{i}"

    with np.errstate(all="ignore"):
        g = 1.0 / r
        g_abs = np.abs(g)
    size_info = None if sizes is None else {k: np.asarray(v) for k, v in sizes.items()}
    finite = np.isfinite(p).all() and np.isfinite(q).all()
    if not finite:
        if not raise_error:
            return Residual(np.inf, np.inf, np.inf, np.inf)
        g_typ = g_abs.max(axis=0)
        j = int(np.argmax(np.where(np.isfinite(g_typ), g_typ, np.inf)))
        raise NetworkError(
            "the network cannot be solved in floating point (the solve gave no finite "
            f"pressures): {_cause(j, g_typ, size_info, channel_name(j))}; check its sizes"
        )

    with np.errstate(all="ignore"):
        drop = p[:, a] - p[:, b]
        leak_flow = None if leak is None else _rows(leak, s, n, complex) * p
        out = _node_sum(a, q, n) - _node_sum(b, q, n)
        if leak_flow is not None:
            out = out + leak_flow
        imbalance = np.abs(out - inj)[:, free]
        imbalance = np.where(imbalance > FLOOR, imbalance, 0.0)
        flow_scale = np.maximum(np.abs(q).max(axis=1, initial=0.0), np.abs(inj).max(axis=1))
        if leak_flow is not None:
            flow_scale = np.maximum(flow_scale, np.abs(leak_flow).max(axis=1))
        drop_scale = np.abs(drop).max(axis=1, initial=0.0)
        term = g_abs * (np.abs(p[:, a]) + np.abs(p[:, b]))
        size = _node_sum(a, term, n) + _node_sum(b, term, n) + np.abs(inj)
        if leak_flow is not None:
            size = size + np.abs(leak_flow)
        # without a drive (every imposed pressure equal, no imposed flow) the exact flows are
        # zero and the computed ones rounding noise: measure them against that noise
        fixed_p = p[:, ~free]
        spread = np.ptp(fixed_p, axis=1) if fixed_p.shape[1] else np.zeros(s)
        driven = (spread != 0) | (np.abs(inj).max(axis=1) > 0)
        if leak_flow is not None:
            driven |= np.abs(leak_flow).max(axis=1) > 0
        noise = term.max(axis=1, initial=0.0)
        flow_scale = np.where(driven, flow_scale, np.maximum(flow_scale, noise))
        moving = flow_scale > 0
        scale = np.where(moving, flow_scale, 1.0)[:, None]
        mass = np.where(moving[:, None], imbalance / scale, imbalance)
        law_abs = np.abs(drop - r * q)
        law_abs = np.where(law_abs > FLOOR, law_abs, 0.0)
        law = law_abs / np.where(drop_scale > 0, drop_scale, 1.0)[:, None]
        cond_node = np.where(moving[:, None], size[:, free] / scale, 1.0)
    mass_residual = float(mass.max(initial=0.0))
    law_residual = float(law.max(initial=0.0))
    condition = float(max(1.0, cond_node.max(initial=1.0)))
    tolerance = SAFETY * EPS * condition
    result = Residual(mass_residual, law_residual, condition, tolerance)
    if not raise_error:
        return result

    if not tolerance <= MAX_RESIDUAL:
        # the channel whose conductance, times its pressure level, dwarfs the flows
        with np.errstate(all="ignore"):
            amplification = np.where(moving[:, None], term / scale, 0.0).max(axis=0)
        j = int(np.argmax(amplification))
        lost = EPS * float(amplification[j])
        g_max = g_abs.max(axis=0)
        ratio = g_max[j] / _median_of_others(g_max, j)
        if ratio >= EXTREME_CONDUCTANCE or not np.isfinite(ratio):
            raise NetworkError(
                "the network cannot be solved in floating point: "
                f"{_cause(j, g_max, size_info, channel_name(j))}, so the pressures at its "
                f"two ends cannot be told apart and its flow is lost to rounding (up to "
                f"{lost:.2g} of the largest flow); check its width, depth and length"
            )
        level = float(np.abs(p).max())
        raise NetworkError(
            "the network cannot be solved in floating point: its pressures (up to "
            f"{level:.3g} Pa) dwarf the pressure drops of its flows (largest "
            f"{float(drop_scale.max()):.3g} Pa, largest flow {float(flow_scale.max()):.3g} "
            f"m^3/s), so the flows are lost to rounding (up to {lost:.2g} of the largest flow, "
            f"at channel {channel_name(j)}); check the imposed pressures and flows"
        )
    if mass_residual > tolerance:
        k, i = np.unravel_index(int(np.argmax(mass)), mass.shape)
        node = int(np.flatnonzero(free)[i])
        net = float(np.abs(out - inj)[k, node])
        raise NetworkError(
            f"the solution does not conserve mass at node {node_name(node)}: a net "
            f"{net * 6e10:.4g} uL/min ({mass_residual:.2g} of the largest flow; tolerance "
            f"{tolerance:.2g}) appears there; the solve failed, check the channels at that node"
        )
    if law_residual > tolerance:
        k, j = np.unravel_index(int(np.argmax(law)), law.shape)
        raise NetworkError(
            f"the solution breaks the channel law dp = R q in channel {channel_name(int(j))} "
            f"({law_residual:.2g} of the largest pressure drop; tolerance {tolerance:.2g}); "
            "the solve failed, check that channel's sizes"
        )
    return result


def check_network_solution(
    network: Any,
    pressure: ArrayLike,
    flow: ArrayLike,
    resistance: ArrayLike,
    *,
    injected: ArrayLike | None = None,
    fixed: ArrayLike | None = None,
    leak: ArrayLike | None = None,
    raise_error: bool = True,
) -> Residual:
    """:func:`check_solution` for a :class:`~chipflow.network.model.Network`, with its
    channel and node names and sizes in the messages (see the module notes)."""
    return check_solution(
        network.node_a,
        network.node_b,
        resistance,
        pressure,
        flow,
        injected=injected,
        fixed=fixed,
        leak=leak,
        channel_names=_ChannelNames(network),
        node_names=network.node_names,
        sizes={"wide": network.width, "deep": network.depth, "long": network.length},
        raise_error=raise_error,
    )
