"""Operating conditions: the fluid temperature, and the warnings for one straight channel.

Thresholds (chipflow's own choices)
-----------------------------------
- Fluid temperature: passes from 15 to 40 degC (a bench at room temperature up to a culture a
  little above 37 degC); warns outside. Mammalian cells are harmed above about 40-42 degC
  (common practice); the culture-medium viscosity model is anchored at 37 degC; hot liquid can
  scald, and raises the pressure a PDMS bond must hold as gas comes out of solution.
- One channel (``chipflow channel``): the Reynolds-number and entrance-length limits of
  :mod:`chipflow.checks.flow`.
"""

from __future__ import annotations

import numpy as np

from chipflow.checks.flow import ENTRANCE_SHARE_WARN, REYNOLDS_FAIL, REYNOLDS_WARN
from chipflow.checks.result import CheckResult

__all__ = [
    "TEMPERATURE_RANGE",
    "check_temperature",
    "temperature_note",
    "channel_warnings",
    "network_warnings",
]

#: Fluid temperatures that pass [K]: 15-40 degC (chipflow's own).
TEMPERATURE_RANGE = (288.15, 313.15)


def temperature_note(temperature: float | None) -> str | None:
    """A caution for a fluid temperature [K] outside :data:`TEMPERATURE_RANGE` (else None).

    >>> temperature_note(310.15) is None
    True
    >>> temperature_note(353.15)[:40]
    'fluid at 80 degC is outside 15-40 degC: '
    """
    if temperature is None:
        return None
    low, high = TEMPERATURE_RANGE
    if low <= temperature <= high:
        return None
    text = f"fluid at {temperature - 273.15:.3g} degC is outside 15-40 degC: "
    if temperature > high:
        return text + (
            "cells are harmed above about 40 degC, hot liquid can scald, and gas coming out "
            "of solution forms bubbles; check the temperature you meant"
        )
    return text + "the liquid is more viscous than at 37 degC and cells grow poorly if at all"


def check_temperature(temperature: float | None) -> CheckResult | None:
    """The fluid temperature [K] against :data:`TEMPERATURE_RANGE` (None when not known).

    >>> check_temperature(353.15).status, check_temperature(293.15).status
    ('warn', 'pass')
    """
    if temperature is None:
        return None
    note = temperature_note(temperature)
    return CheckResult(
        "fluid temperature",
        "pass" if note is None else "warn",
        temperature,
        TEMPERATURE_RANGE[1] if temperature > TEMPERATURE_RANGE[0] else TEMPERATURE_RANGE[0],
        "K",
        "15-40 degC is chipflow's own range (cells are harmed above about 40 degC: "
        "common practice)",
        note or f"fluid at {temperature - 273.15:.3g} degC",
    )


def channel_warnings(
    reynolds: float, entrance_length: float, length: float, temperature: float | None = None
) -> list[str]:
    """Warnings about one straight channel, each one line.

    Parameters
    ----------
    reynolds : float
        Reynolds number [-].
    entrance_length : float
        Hydrodynamic entrance length [m].
    length : float
        Channel length [m].
    temperature : float or None
        Fluid temperature [K].

    >>> channel_warnings(5537.0, 0.41, 0.01)[0][:44]
    'Reynolds number 5.54e+03 is above the lamina'
    >>> channel_warnings(0.5, 1e-6, 0.01)
    []
    """
    out = []
    re = abs(reynolds)
    if re > REYNOLDS_FAIL:
        out.append(
            f"Reynolds number {re:.3g} is above the laminar limit of about 2000: the flow may "
            "be turbulent and these laminar formulas do not apply"
        )
    elif re > REYNOLDS_WARN:
        out.append(f"Reynolds number {re:.3g} is above 100: inertia matters at bends and junctions")
    share = entrance_length / length
    if share >= 1.0:
        out.append(
            f"entrance length {entrance_length * 1e3:.3g} mm is longer than the channel "
            f"({length * 1e3:.3g} mm): the flow never becomes fully developed, so pressure "
            "drop and shear are underestimated"
        )
    elif share > ENTRANCE_SHARE_WARN:
        out.append(
            f"entrance length {entrance_length * 1e3:.3g} mm is {share:.0%} of the channel "
            "length: pressure drop and shear near the start are underestimated"
        )
    note = temperature_note(temperature)
    if note is not None:
        out.append(note)
    return out


def network_warnings(solution) -> list[str]:
    """The warnings of :func:`channel_warnings` for a solved network: its channel of largest
    Reynolds number and its channel of largest entrance-length share (vectorised).

    Parameters
    ----------
    solution : chipflow.network.Solution
    """
    net = solution.network
    if net.n_channels == 0:
        return []
    from chipflow.physics.duct import entrance_length, hydraulic_diameter

    re = np.abs(solution.reynolds)
    d_h = hydraulic_diameter(net.width, net.depth, net.round)
    entrance = np.atleast_1d(entrance_length(d_h, re))
    worst_re = int(np.argmax(re))
    worst_share = int(np.argmax(entrance / net.length))
    out = []
    for line in channel_warnings(float(re[worst_re]), 0.0, 1.0):
        out.append(f"channel {net.channel_name(worst_re)}: {line}")
    i = worst_share
    for line in channel_warnings(0.0, float(entrance[i]), float(net.length[i])):
        out.append(f"channel {net.channel_name(i)}: {line}")
    note = temperature_note(solution.fluid.temperature)
    return out + ([note] if note else [])
