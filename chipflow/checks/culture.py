"""Floor wall shear of each generation against the window of the cell type.

Grading (chipflow's own choice): inside the window passes; up to ``tolerance`` (default 20 %)
outside it warns; further out fails. The 20 % band reflects how uncertain the model value is
on the bench: the floor shear scales like ``1 / h^2``, so the 5-10 % spread of mould depth
across a wafer (from memory, low confidence) alone moves it by 10-20 %.

Examples
--------
>>> from chipflow.checks.cell_types import ShearWindow
>>> window = ShearWindow("endothelial", 0.5, 1.0, "Dewey et al. 1981")
>>> [r.status for r in check_floor_shear(["bed"], [0.45], window)]
['warn']
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from chipflow.checks.cell_types import ShearWindow
from chipflow.checks.result import CheckResult
from chipflow.errors import ArgumentError

__all__ = ["check_floor_shear", "SHEAR_TOLERANCE", "shear_status"]

_KIND_WORDS = {"floor": "floor shear", "mean": "mean wall shear", "max": "peak wall shear"}
#: Relative band outside the shear window that warns rather than fails (chipflow default).
SHEAR_TOLERANCE = 0.2


def shear_status(shear: ArrayLike, low: float, high: float, tolerance: float = SHEAR_TOLERANCE):
    """Grade floor shear values [Pa] against the window ``[low, high]`` [Pa], vectorised.

    Returns an array of "pass" / "warn" / "fail".

    >>> shear_status([0.5, 1.0, 1.2, 1.21, 0.4, 0.39], 0.5, 1.0).tolist()
    ['pass', 'pass', 'warn', 'fail', 'warn', 'fail']
    """
    tau = np.asarray(shear, dtype=float)
    inside = (tau >= low) & (tau <= high)
    near = (tau >= low * (1.0 - tolerance)) & (tau <= high * (1.0 + tolerance))
    # Rounding guard: 1.2 * 1.0 must count as inside the band for a value of exactly 1.2.
    near |= np.isclose(tau, low * (1.0 - tolerance), rtol=1e-12, atol=0.0)
    near |= np.isclose(tau, high * (1.0 + tolerance), rtol=1e-12, atol=0.0)
    return np.where(inside, "pass", np.where(near, "warn", "fail"))


def check_floor_shear(
    labels: Sequence[str],
    shear: ArrayLike,
    window: ShearWindow,
    *,
    tolerance: float = SHEAR_TOLERANCE,
    kind: str = "floor",
) -> list[CheckResult]:
    """One result per generation: its floor wall shear against the cell type's window.

    A one-sided window (``window.min == 0`` or ``window.max == inf``) is a one-sided check.

    Parameters
    ----------
    labels : sequence of str
        Generation labels for the check names, e.g. ``"bed (generation 4)"``.
    shear : array_like
        Floor wall shear stress of each generation [Pa] (same length as ``labels``).
    window : ShearWindow
        Window of the cell type [Pa] and its source.
    tolerance : float, optional
        Relative band outside the window that warns rather than fails [-].
    kind : str, optional
        Which wall shear ``shear`` is: "floor" (centre of the floor), "mean" or "max"
        (peak); named in the results.

    Returns
    -------
    list of CheckResult
        ``value`` is the floor shear; ``limit`` is the bound that was crossed (the nearer
        bound when inside the window).
    """
    tau = np.asarray(shear, dtype=float).ravel()
    if tau.size != len(labels):
        raise ArgumentError(f"{len(labels)} labels but {tau.size} shear values")
    if kind not in _KIND_WORDS:
        raise ArgumentError(f"kind must be one of {', '.join(_KIND_WORDS)}, got {kind!r}")
    status = shear_status(tau, window.min, window.max, tolerance)
    window_text = f"the window ({window.text} for {window.cell_type})"
    words = _KIND_WORDS[kind]
    results = []
    for label, value, grade in zip(labels, tau, status, strict=True):  # loop over generations
        if value < window.min:
            limit, side = window.min, f"below {window_text}"
            advice = "raise the flow or make the channel shallower"
        elif value > window.max:
            limit, side = window.max, f"above {window_text}"
            advice = "lower the flow or make the channel deeper or wider"
        else:
            if math.isinf(window.max):
                limit = window.min
            elif window.min <= 0.0:
                limit = window.max
            else:
                nearer_low = value - window.min <= window.max - value
                limit = window.min if nearer_low else window.max
            side, advice = f"inside {window_text}", ""
        message = f"{words} {value:.3g} Pa is {side}"
        if grade == "warn":
            message += f" by less than {tolerance:.0%}: confirm on the bench; {advice}"
        elif grade == "fail":
            message += f": {advice}"
        results.append(
            CheckResult(f"{words}: {label}", str(grade), value, limit, "Pa", window.source, message)
        )
    return results
