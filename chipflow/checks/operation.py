"""Checks of time-varying operation: wall deformation, pulsation, oscillation and draining.

Limits are chipflow defaults unless a source is named: a resistance change above 5 % from a
bulging roof means the chip's numbers rest on the roof's model and its modulus as much as on
the mould's depth tolerance; a Womersley number above 1 means the liquid's inertia shapes the
pulsation (common practice). Under a pump or a draining reservoir the floor shear should stay
inside the window all the time (warn otherwise; below a tenth of the time fails). A flow that
oscillates (its oscillatory shear index above the threshold of
:mod:`chipflow.operation.run`) is not graded against a window measured in steady flow.

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
from chipflow.checks.result import CheckResult

__all__ = [
    "check_deformation",
    "check_wall_model",
    "check_inertia",
    "check_flow_reversal",
    "check_time_in_window",
    "check_oscillating_shear",
    "check_drain",
    "DEFORMATION_WARN",
    "MODEL_RANGE_WARN",
    "WINDOW_FRACTION_FAIL",
]

#: Resistance change from wall deformation above which chipflow warns [1] (chipflow default).
DEFORMATION_WARN = 0.05
#: Resistance change above which a channel outside its roof model's range warns [1]: below
#: it the number hardly matters whichever model holds (chipflow default).
MODEL_RANGE_WARN = 0.01
#: Fraction of the time inside the shear window below which chipflow fails [1] (default).
WINDOW_FRACTION_FAIL = 0.1
_DEFAULT = "chipflow default"


def _worst(labels: Sequence[str], values: np.ndarray, largest: bool = True) -> tuple[str, float]:
    i = int(np.argmax(values) if largest else np.argmin(values))
    return labels[i], float(values[i])


def check_deformation(
    labels: Sequence[str],
    change: ArrayLike,
    one_pass: ArrayLike | None = None,
    models: Sequence[str] | None = None,
) -> CheckResult:
    """The largest fall of a level's resistance from the roof's bulge [1] against 5 %.

    ``change`` is the self-consistent fall (the chip's numbers are on the deformed chip);
    ``one_pass`` the fall at the rigid chip's pressures, shown as a diagnostic; ``models``
    the roof model of each level.
    """
    values = np.asarray(change, dtype=float)
    where, value = _worst(labels, values)
    i = int(np.argmax(values))
    status = "warn" if value > DEFORMATION_WARN else "pass"
    model = f" ({models[i]})" if models is not None and models[i] else ""
    first = ""
    if one_pass is not None:
        first = f"; one pass at the rigid chip's pressures would say {float(one_pass[i]):.1%}"
    message = (
        f"the soft roof bulges under pressure and lowers the resistance of {where} by "
        f"{value:.1%}{model}, solved self-consistently{first}; shear, pressures and checks are "
        "those of the deformed chip"
        + (
            ": they rest on the roof model and its modulus, so measure the modulus or the "
            "flow, or use a stiffer or thicker roof"
            if status == "warn"
            else ""
        )
    )
    return CheckResult("wall deformation", status, value, DEFORMATION_WARN, "1", _DEFAULT, message)


def check_wall_model(
    labels: Sequence[str], reasons: Sequence[str], change: ArrayLike
) -> CheckResult:
    """Whether every level lies within its roof model's range; outside it, a level whose
    resistance changes by more than 1 % warns (the number then rests on a model that does
    not hold there)."""
    values = np.asarray(change, dtype=float)
    outside = [(label, why, v) for label, why, v in zip(labels, reasons, values, strict=True)
               if why]  # fmt: skip
    matters = [(label, why, v) for label, why, v in outside if v > MODEL_RANGE_WARN]
    if matters:
        words = "; ".join(f"{label}: {why}, resistance change {v:.1%}" for label, why, v in matters)
        return CheckResult(
            "roof model range", "warn", max(v for _, _, v in matters), MODEL_RANGE_WARN, "1",
            _DEFAULT,
            f"outside the range of every roof model ({words}): the deformation there is a "
            "rough estimate; measure it, or use a stiffer or thicker roof or narrower, longer "
            "channels",
        )  # fmt: skip
    tail = (
        f"; {', '.join(label for label, _, _ in outside)} lie outside it but change by at most "
        f"{MODEL_RANGE_WARN:.0%}"
        if outside
        else ""
    )
    return CheckResult(
        "roof model range", "pass", None, MODEL_RANGE_WARN, "1", _DEFAULT,
        f"every level whose roof bulges noticeably lies within its roof model's range{tail}",
    )  # fmt: skip


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


def check_oscillating_shear(
    labels: Sequence[str],
    osi: ArrayLike,
    signed_mean: ArrayLike,
    peak: ArrayLike,
    averaged: ArrayLike,
    window: ShearWindow,
    threshold: float,
) -> list[CheckResult]:
    """Levels whose flow oscillates (OSI above ``threshold``): the steady window does not
    apply. Warns with the numbers, or, where the cell type has an oscillatory window,
    grades the time-averaged floor-shear magnitude against it
    (:func:`~chipflow.checks.culture.shear_status`)."""
    osi, mean = np.asarray(osi, dtype=float), np.asarray(signed_mean, dtype=float)
    peak, avg = np.asarray(peak, dtype=float), np.asarray(averaged, dtype=float)
    out = []
    oscillatory = window.oscillatory
    for i, label in enumerate(labels):  # a loop over the few oscillating levels
        numbers = (
            f"signed mean {mean[i]:.3g} Pa, peak {peak[i]:.3g} Pa, time-averaged magnitude "
            f"{avg[i]:.3g} Pa, oscillatory shear index {osi[i]:.3g} (above {threshold:g})"
        )
        if oscillatory is not None:
            grade = str(shear_status(avg[i : i + 1], oscillatory.min, oscillatory.max)[0])
            out.append(
                CheckResult(
                    f"oscillating floor shear: {label}",
                    grade,
                    float(avg[i]),
                    oscillatory.max,
                    "Pa",
                    oscillatory.source,
                    f"the floor shear of {label} oscillates ({numbers}); its time-averaged "
                    f"magnitude is checked against the oscillatory window {oscillatory.text} "
                    f"for {window.cell_type}",
                    limit_low=oscillatory.min,
                )  # fmt: skip
            )
            continue
        out.append(
            CheckResult(
                f"oscillating floor shear: {label}",
                "warn",
                float(osi[i]),
                threshold,
                "1",
                window.source,
                f"the floor shear of {label} oscillates ({numbers}); the {window.text} window "
                f"for {window.cell_type} was measured in steady one-way flow and does not "
                "apply to it: confirm the cells' response to oscillating shear on the bench",
            )  # fmt: skip
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
