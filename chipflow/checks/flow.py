"""Flow regime checks: laminar flow, entrance length, even perfusion of the bed.

Thresholds
----------
- Reynolds number (on the hydraulic diameter): passes up to 100, warns up to 2000, fails
  beyond. Duct flow stays laminar up to about 2000-2300 (common practice); above about 100,
  inertia starts to matter at bends and junctions (secondary flow, separation), where the
  straight-duct model is less exact (common practice in microfluidics; the 100 is ours).
- Entrance length ``L_e = D_h (0.6 / (1 + 0.035 Re) + 0.056 Re)`` (Chen, J Fluids Eng 1973;
  applied with the hydraulic diameter, common practice). Warns when it exceeds 10 % of a
  channel's length: there the fully developed model underestimates the pressure drop and
  the shear near the channel's start. It never fails: it limits the model's accuracy, not
  the chip (chipflow's own choice).
- Uniformity of the bed: coefficient of variation (population standard deviation over mean)
  of the bed-channel flows; passes below 1 %, warns below 5 %, fails at 5 % and above
  (chipflow's own thresholds).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from chipflow.checks.result import CheckResult, grade_upper
from chipflow.physics.duct import entrance_length, hydraulic_diameter

__all__ = [
    "REYNOLDS_WARN",
    "REYNOLDS_FAIL",
    "ENTRANCE_SHARE_WARN",
    "UNIFORMITY_PASS",
    "UNIFORMITY_FAIL",
    "check_reynolds",
    "check_entrance_length",
    "check_uniformity",
    "coefficient_of_variation",
]

REYNOLDS_WARN = 100.0
REYNOLDS_FAIL = 2000.0
ENTRANCE_SHARE_WARN = 0.10
UNIFORMITY_PASS = 0.01
UNIFORMITY_FAIL = 0.05


def check_reynolds(labels: Sequence[str], reynolds: ArrayLike) -> CheckResult:
    """The largest Reynolds number of any generation against the laminar limits.

    Parameters
    ----------
    labels : sequence of str
        Generation labels (named in the message).
    reynolds : array_like
        Reynolds number of each generation [-].

    >>> check_reynolds(["trunk", "bed"], [0.8, 0.01]).status
    'pass'
    >>> check_reynolds(["trunk", "bed"], [2500.0, 1.0]).status
    'fail'
    """
    re = np.abs(np.asarray(reynolds, dtype=float).ravel())
    worst = int(np.argmax(re))
    value = float(re[worst])
    status = grade_upper(value, REYNOLDS_WARN, REYNOLDS_FAIL)
    message = f"largest Reynolds number {value:.3g} in {labels[worst]}"
    message += {
        "pass": ": laminar",
        "warn": ": laminar, but inertia matters at bends and junctions",
        "fail": ": above the laminar limit of about 2000, the model does not apply",
    }[status]
    source = "laminar duct flow up to about 2000 (common practice); warn above 100 is ours"
    return CheckResult("Reynolds number", status, value, REYNOLDS_WARN, "", source, message)


def check_entrance_length(
    labels: Sequence[str],
    width: ArrayLike,
    depth: ArrayLike,
    length: ArrayLike,
    reynolds: ArrayLike,
    round: ArrayLike = False,
) -> CheckResult:
    """The largest entrance length as a share of its channel's length, over all generations.

    Parameters
    ----------
    labels : sequence of str
        Generation labels.
    width, depth, length : array_like
        Channel width, depth and length of each generation [m].
    reynolds : array_like
        Reynolds number of each generation [-].
    round : array_like of bool, optional
        Round tubes (diameter in ``width``).

    >>> r = check_entrance_length(["bed"], [100e-6], [50e-6], [2e-3], [0.05])
    >>> r.status, round(r.value, 4)
    ('pass', 0.0201)
    """
    d_h = hydraulic_diameter(width, depth, round)
    share = np.atleast_1d(entrance_length(d_h, np.abs(np.asarray(reynolds, float))))
    share = share / np.atleast_1d(np.asarray(length, dtype=float))
    worst = int(np.argmax(share))
    value = float(share[worst])
    status = "pass" if value <= ENTRANCE_SHARE_WARN else "warn"
    message = f"entrance length is at most {value:.1%} of a channel's length (in {labels[worst]})"
    if status == "warn":
        message += (
            "; the flow there is not fully developed, so the model underestimates the "
            "pressure drop and the shear near the channel's start"
        )
    source = "Chen, J Fluids Eng 1973, with the hydraulic diameter (common practice); 10 % is ours"
    return CheckResult(
        "entrance length share", status, value, ENTRANCE_SHARE_WARN, "1", source, message
    )


def coefficient_of_variation(values: ArrayLike) -> float:
    """Population standard deviation over mean, ``std / mean`` [-].

    >>> coefficient_of_variation([1.0, 1.0, 1.0])
    0.0
    >>> round(coefficient_of_variation([0.9, 1.1]), 6)
    0.1
    """
    q = np.abs(np.asarray(values, dtype=float))
    mean = float(np.mean(q))
    return float(np.std(q)) / mean if mean > 0 else float("inf")


def check_uniformity(bed_flows: ArrayLike) -> CheckResult:
    """Coefficient of variation of the bed-channel flows [m^3/s]: pass below 1 %, warn below
    5 %, fail at 5 % and above.

    >>> check_uniformity([1.0, 1.0, 1.0, 1.0]).status
    'pass'
    """
    cv = coefficient_of_variation(bed_flows)
    q = np.abs(np.asarray(bed_flows, dtype=float))
    if cv < UNIFORMITY_PASS:
        status = "pass"
    elif cv < UNIFORMITY_FAIL:
        status = "warn"
    else:
        status = "fail"
    message = (
        f"bed-channel flows vary by {cv:.2%} (coefficient of variation over {q.size} channels; "
        f"lowest {q.min() / q.mean():.3f}, highest {q.max() / q.mean():.3f} of the mean)"
    )
    if status != "pass":
        message += "; make the paths from inlet to each bed channel alike in length"
    return CheckResult(
        "bed flow uniformity",
        status,
        cv,
        UNIFORMITY_PASS,
        "1",
        "chipflow's own thresholds (1 % pass, 5 % fail)",
        message,
    )
