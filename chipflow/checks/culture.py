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

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from chipflow.checks.cell_types import ShearWindow
from chipflow.checks.result import CheckResult
from chipflow.display import fraction
from chipflow.errors import ArgumentError

__all__ = [
    "check_floor_shear",
    "check_floor_outside",
    "check_chamber_floor",
    "SHEAR_TOLERANCE",
    "shear_status",
    "OUTSIDE_WINDOW_LIMIT",
    "OUTSIDE_WINDOW_SOURCE",
]

_KIND_WORDS = {"floor": "floor shear", "mean": "mean wall shear", "max": "peak wall shear"}
#: Relative band outside the shear window that warns rather than fails (chipflow default).
SHEAR_TOLERANCE = 0.2
#: Share of the seeded floor that may lie outside the shear window in the 2D field before
#: chipflow warns [1]: a majority rule (see :func:`check_floor_outside`).
OUTSIDE_WINDOW_LIMIT = 0.5
OUTSIDE_WINDOW_SOURCE = (
    "chipflow default: most of the seeded floor inside the window; the side-wall strips of a "
    "tall channel alone can take nearly half of it"
)


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
        ``value`` is the floor shear; ``limit_low`` and ``limit`` are the window's bounds,
        the same for every generation whichever side its value lies on.
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
            side = f"below {window_text}"
            advice = "raise the flow or make the channel shallower"
        elif value > window.max:
            side = f"above {window_text}"
            advice = "lower the flow or make the channel deeper or wider"
        else:
            side, advice = f"inside {window_text}", ""
        message = f"{words} {value:.3g} Pa is {side}"
        if grade == "warn":
            message += f" by less than {tolerance:.0%}: confirm on the bench; {advice}"
        elif grade == "fail":
            message += f": {advice}"
        results.append(
            CheckResult(
                f"{words}: {label}",
                str(grade),
                value,
                window.max,
                "Pa",
                window.source,
                message,
                limit_low=window.min if window.min > 0.0 else None,
            )
        )
    return results


def check_floor_outside(
    share: float,
    window: ShearWindow,
    limit: float = OUTSIDE_WINDOW_LIMIT,
    *,
    by_zone: dict[str, float] | None = None,
    source: str = OUTSIDE_WINDOW_SOURCE,
) -> CheckResult:
    """The share of the seeded floor whose floor shear lies outside the window in the 2D
    field, against ``limit``: above it the check warns (it never fails: the field is a
    model's map of the floor, and the channel checks grade each level).

    The network checks grade each level's floor shear at the middle of its channels. The field
    sees the rest of the floor: the floor shear falls to zero along every side wall, drops in
    the far corners of junctions and rises on the inside of bends. The default limit, half the
    seeded floor, is a majority rule: beyond it most of the cells do not see the window the
    design was sized for. A stricter default would flag beds that cannot do better: in the
    demo's straight 35 x 50 um bed channels, sized to 0.74 Pa at the middle of the floor, the
    floor shear falls below 0.5 Pa on 34 % of the floor's width next to the side walls (the
    exact duct series, Bruus 2008; tests/test_field_check.py). A 600 um wide channel of the
    same depth loses 4 %: wide shallow channels have narrow strips, and a lower limit suits
    them.

    Parameters
    ----------
    share : float
        Area share of the seeded floor outside the window [1]
        (``results["field"]["area_outside_window"]``).
    window : ShearWindow
        The window the field was judged against [Pa].
    limit : float, optional
        Largest share that passes [1] (``[culture] outside_window_limit``).
    by_zone : dict of str to float, optional
        The share of the seeded floor outside the window in each zone (channel bodies,
        junctions, bends, bed ends, ports) [1]: the message names the largest.
    source : str, optional
        Where ``limit`` comes from.

    Examples
    --------
    >>> window = ShearWindow("endothelial", 0.5, 1.0, "Dewey et al. 1981")
    >>> check_floor_outside(0.317, window).status, check_floor_outside(0.62, window).status
    ('pass', 'warn')
    >>> check_floor_outside(0.317, window, 0.25).message  # doctest: +ELLIPSIS
    '31.7 % of the seeded floor lies outside the 0.5-1 Pa window in the 2D field ...'
    """
    status = "warn" if share > limit else "pass"
    message = (
        f"{fraction(share)} of the seeded floor lies outside the {window.text} window in the "
        f"2D field ({'above' if status == 'warn' else 'within'} the limit of {fraction(limit)})"
    )
    if by_zone:
        zone, part = max(by_zone.items(), key=lambda item: item[1])
        message += f"; the largest part in {_ZONE_WORDS.get(zone, zone)}: {fraction(part)}"
    if status == "warn":
        message += (
            "; most cells miss the window: see where on the field figure (narrow channels lose "
            "the edges of their floor to the side walls, so a wider, shallower bed keeps more "
            "of it inside), or set [culture] outside_window_limit"
        )
    return CheckResult(
        "floor outside the shear window (2D field)", status, share, limit, "1", source, message
    )


_ZONE_WORDS = {
    "channel": "channel bodies",
    "junction": "junctions",
    "bend": "bends",
    "bed end": "the ends of the bed",
    "port": "the ports",
}


def check_chamber_floor(
    name: str,
    inside: float,
    p05: float,
    p50: float,
    p95: float,
    window: ShearWindow,
    limit: float = OUTSIDE_WINDOW_LIMIT,
    *,
    source: str = OUTSIDE_WINDOW_SOURCE,
) -> CheckResult:
    """A chamber's floor shear: the share of its floor inside the cells' window, from the 2D
    solve of its shape at the network's operating point.

    A chamber has no one floor shear (it falls to zero at its walls and pillars and peaks in the
    gaps between pillars), so it is graded by its share of the floor inside the window: it
    passes when at most ``limit`` of the floor lies outside (the majority rule of
    :func:`check_floor_outside`); beyond that it fails when even the median floor shear (p50)
    is outside the window's warning band (:data:`SHEAR_TOLERANCE`), and warns otherwise.

    Parameters
    ----------
    name : str
        The chamber.
    inside : float
        Area share of its floor inside the window [1].
    p05, p50, p95 : float
        Area-weighted percentiles of its floor shear [Pa].
    window : ShearWindow
    limit : float
        Largest share of the floor outside the window that passes [1].
    source : str
        Where ``limit`` comes from.

    Examples
    --------
    >>> window = ShearWindow("endothelial", 0.5, 1.0, "Dewey et al. 1981")
    >>> check_chamber_floor("A", 0.8, 0.3, 0.7, 0.95, window).status
    'pass'
    >>> check_chamber_floor("A", 0.3, 0.1, 0.45, 0.7, window).status
    'warn'
    >>> check_chamber_floor("A", 0.1, 0.05, 0.2, 0.6, window).status
    'fail'
    """
    outside = 1.0 - inside
    if outside <= limit:
        status = "pass"
    else:
        status = "fail" if str(shear_status([p50], window.min, window.max)[0]) == "fail" else "warn"
    message = (
        f"{fraction(inside)} of chamber {name!r}'s floor lies inside the {window.text} window "
        f"(floor shear p05 {p05:.3g}, p50 {p50:.3g}, p95 {p95:.3g} Pa; at most "
        f"{fraction(limit)} may lie outside)"
    )
    if status != "pass":
        low = p50 < window.min
        message += (
            "; " + ("raise the flow or make the chamber shallower" if low else
                    "lower the flow or make the chamber deeper or wider")
        )  # fmt: skip
    return CheckResult(
        f"chamber floor shear: {name}",
        status,
        inside,
        1.0 - limit,
        "1",
        f"{window.source}; {source}",
        message,
        level=f"chamber {name}",
    )
