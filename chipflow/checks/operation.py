"""Checks of time-varying operation: wall deformation, pulsation, rocking and draining.

Limits are chipflow defaults unless a source is named: a resistance change above 5 % from a
bulging roof means the rigid-channel numbers are off by about as much as the mould's depth
tolerance; a Womersley number above 1 means the liquid's inertia shapes the pulsation
(common practice). Under a pump or a draining reservoir the floor shear should stay inside the
window all the time (warn otherwise); on a rocking platform, whose flow reverses, at least
half of the time; below a tenth of the time fails.

Examples
--------
>>> check_deformation(["d0", "bed"], [0.01, 0.08]).status
'warn'
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from chipflow.checks.cell_types import ShearWindow
from chipflow.checks.culture import shear_status
from chipflow.checks.result import STATUSES, CheckResult

__all__ = [
    "check_deformation",
    "check_inertia",
    "check_flow_reversal",
    "check_time_in_window",
    "check_rocker",
    "check_drain",
    "DEFORMATION_WARN",
    "WINDOW_FRACTION_WARN",
    "WINDOW_FRACTION_FAIL",
]

#: Resistance change from wall deformation above which chipflow warns [1] (chipflow default).
DEFORMATION_WARN = 0.05
#: Fraction of the time inside the shear window below which chipflow warns [1] (default).
WINDOW_FRACTION_WARN = 0.5
#: ... and below which it fails [1] (chipflow default).
WINDOW_FRACTION_FAIL = 0.1
_DEFAULT = "chipflow default"


def _worst(labels: Sequence[str], values: np.ndarray, largest: bool = True) -> tuple[str, float]:
    i = int(np.argmax(values) if largest else np.argmin(values))
    return labels[i], float(values[i])


def check_deformation(labels: Sequence[str], change: ArrayLike) -> CheckResult:
    """The largest fall of a level's resistance from the roof's bulge [1] against 5 %."""
    where, value = _worst(labels, np.asarray(change, dtype=float))
    status = "warn" if value > DEFORMATION_WARN else "pass"
    message = (
        f"the soft roof bulges under pressure and lowers the resistance of {where} by "
        f"{value:.1%} (plate model of Christov et al. 2018)"
        + (
            "; the rigid-channel flows and shears are off by as much: use a stiffer or thicker "
            "roof, a lower pressure, or measure"
            if status == "warn"
            else ""
        )
    )
    return CheckResult("wall deformation", status, value, DEFORMATION_WARN, "1", _DEFAULT, message)


def check_inertia(labels: Sequence[str], womersley: ArrayLike) -> CheckResult:
    """The largest Womersley number at the fundamental: below 1 the flow is quasi-steady."""
    where, value = _worst(labels, np.asarray(womersley, dtype=float))
    if value < 1.0:
        status, message = (
            "pass",
            (
                f"Womersley number at most {value:.2g} ({where}): the liquid's inertia is "
                "negligible and the floor shear follows the flow quasi-steadily"
            ),
        )
    else:
        status, message = (
            "warn",
            (
                f"Womersley number {value:.2g} in {where}: inertia shapes the pulsating profile, "
                "so the quasi-steady floor shear there is approximate"
            ),
        )
    return CheckResult("liquid inertia", status, value, 1.0, "", "common practice", message)


def check_flow_reversal(labels: Sequence[str], flow_min: ArrayLike) -> CheckResult:
    """Whether the flow in any seeded level runs backwards during a pulse."""
    low = np.asarray(flow_min, dtype=float)
    if low.size == 0:
        return CheckResult("flow reversal", "pass", None, 0.0, "m^3/s", _DEFAULT, "no channels")
    backwards = [label for label, q in zip(labels, low, strict=True) if q < 0]
    if backwards:
        return CheckResult(
            "flow reversal",
            "warn",
            float(low.min()),
            0.0,
            "m^3/s",
            _DEFAULT,
            f"the flow runs backwards during each pulse in {', '.join(backwards)}: the cells "
            "see oscillating shear; damp the pump (softer or longer tubing, an air damper)",
        )
    return CheckResult(
        "flow reversal", "pass", float(low.min()), 0.0, "m^3/s", _DEFAULT,
        "the flow keeps its direction through every pulse",
    )  # fmt: skip


def _fraction_status(value: float) -> str:
    """A rocking platform's grade: pass from half the time in the window, fail below 10 %."""
    if value < WINDOW_FRACTION_FAIL:
        return "fail"
    return "warn" if value < WINDOW_FRACTION_WARN else "pass"


def _always_status(value: float) -> str:
    """A pump's or a reservoir's grade: pass only all the time in the window, fail below 10 %."""
    if value >= 1.0 - 1e-12:
        return "pass"
    return "fail" if value < WINDOW_FRACTION_FAIL else "warn"


def check_time_in_window(
    labels: Sequence[str], fraction: ArrayLike, window: ShearWindow
) -> CheckResult:
    """The smallest fraction of a pulse period that a seeded level spends in the window."""
    where, value = _worst(labels, np.asarray(fraction, dtype=float), largest=False)
    status = _always_status(value)
    if status == "pass":
        message = "the floor shear of every seeded level stays inside the window through the pulse"
    else:
        message = (
            f"{where} spends {value:.0%} of each pulse inside the "
            f"{window.min:g}-{window.max:g} Pa window; the pulsation carries its floor shear "
            "out of it"
        )
    return CheckResult("pulsatile shear in window", status, value, 1.0, "1", _DEFAULT, message)


def check_rocker(
    labels: Sequence[str], averaged: ArrayLike, fraction: ArrayLike, window: ShearWindow
) -> list[CheckResult]:
    """Rocking platform: time-averaged floor shear against the window (graded as the steady
    floor shear is, :func:`~chipflow.checks.culture.shear_status`), the time spent in it, and
    the bidirectional flow."""
    avg = np.asarray(averaged, dtype=float)
    inside = (avg >= window.min) & (avg <= window.max)
    where_low, low = _worst(labels, avg, largest=False)
    where_high, high = _worst(labels, avg)
    grades = shear_status(avg, window.min, window.max)
    out = [
        CheckResult(
            "rocking: time-averaged floor shear",
            STATUSES[max(STATUSES.index(str(g)) for g in grades)],
            low if low < window.min or inside.all() else high,
            window.min if low < window.min else window.max,
            "Pa",
            window.source,
            f"time-averaged floor shear from {low:.3g} Pa ({where_low}) to {high:.3g} Pa "
            f"({where_high}) against the {window.min:g}-{window.max:g} Pa window",
        )
    ]
    where, value = _worst(labels, np.asarray(fraction, dtype=float), largest=False)
    status = _fraction_status(value)
    out.append(
        CheckResult(
            "rocking: time in window",
            status,
            value,
            WINDOW_FRACTION_WARN,
            "1",
            _DEFAULT,
            f"{where} spends {value:.0%} of each rocking cycle inside the shear window; the "
            "flow reverses every half cycle (bidirectional shear)",
        )
    )
    return out


def check_drain(
    labels: Sequence[str], fraction: ArrayLike, window: ShearWindow, interval: float
) -> CheckResult:
    """Draining reservoirs: the fraction of the refill interval a seeded level stays in window."""
    where, value = _worst(labels, np.asarray(fraction, dtype=float), largest=False)
    status = _always_status(value)
    return CheckResult(
        "draining: time in window",
        status,
        value,
        1.0,
        "1",
        _DEFAULT,
        f"as the reservoirs level out, {where} keeps its floor shear inside the "
        f"{window.min:g}-{window.max:g} Pa window for {value:.0%} of the "
        f"{interval / 3600:.3g} h between refills",
    )
