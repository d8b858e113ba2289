"""The result of one check: pass, warn or fail, with the value, the limit and its source."""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import asdict, dataclass
from typing import Any

from chipflow.errors import ArgumentError

__all__ = ["CheckResult", "STATUSES", "worst_status", "grade_upper", "level_statuses"]

#: Check outcomes, best first.
STATUSES = ("pass", "warn", "fail")


@dataclass(frozen=True)
class CheckResult:
    """The outcome of one check.

    Attributes
    ----------
    name : str
        Short label of what was checked ("floor shear: bed (generation 4)").
    status : str
        "pass", "warn" or "fail".
    value : float or None
        The checked value in SI units (``unit``); None when there is no single number.
    limit : float or None
        The bound beyond which the check no longer passes, in SI units (``unit``); the
        message names the fail bound where it differs.
    unit : str
        SI unit of ``value`` and ``limit``: "Pa", "s", "m", "1" for a ratio or fraction
        (shown as a percentage), "" for other plain numbers (Reynolds number).
    source : str
        Where the limit comes from (a citation, "common practice" or "chipflow default").
    message : str
        One sentence for the designer: what was found and what to do about it.
    limit_low : float or None
        For a window (a value that must stay between two bounds): its lower bound, with
        ``limit`` its upper bound, so the limit shown is the same window whichever side the
        value lies on. None for a single bound.
    level : str or None
        The level the check grades, by its label along the path (``"d1"``, ``"bed"``, ``"c0"``
        of :func:`chipflow.network.summary.generation_labels`); None for a check of the whole
        chip. The verdict of a level in every table is the worst of its checks
        (:func:`level_statuses`).

    Examples
    --------
    >>> CheckResult("Reynolds number", "pass", 0.3, 100.0, "", "common practice", "laminar")
    ... # doctest: +ELLIPSIS
    CheckResult(name='Reynolds number', status='pass', value=0.3, ...)
    >>> CheckResult("x", "ok", None, None, "", "", "")
    Traceback (most recent call last):
    ...
    chipflow.errors.ArgumentError: check 'x': status must be one of pass, warn, fail, got 'ok'
    """

    name: str
    status: str
    value: float | None
    limit: float | None
    unit: str
    source: str
    message: str
    limit_low: float | None = None
    level: str | None = None

    def __post_init__(self) -> None:
        if self.status not in STATUSES:
            raise ArgumentError(
                f"check {self.name!r}: status must be one of {', '.join(STATUSES)}, "
                f"got {self.status!r}"
            )
        for field in ("value", "limit", "limit_low"):
            number = getattr(self, field)
            if number is not None:
                object.__setattr__(self, field, float(number))

    def to_dict(self) -> dict:
        """A plain dict for results JSON (non-finite numbers become None); ``limit_low`` only
        for a window, ``level`` only for a check of one level."""
        out = asdict(self)
        for field in ("limit_low", "level"):
            if out[field] is None:
                del out[field]
        for field in ("value", "limit", "limit_low"):
            if out.get(field) is not None and not math.isfinite(out[field]):
                out[field] = None
        return out


def worst_status(results: Iterable[CheckResult]) -> str:
    """The worst status among ``results`` ("pass" when there are none).

    >>> worst_status([CheckResult("a", "pass", None, None, "", "", ""),
    ...               CheckResult("b", "warn", None, None, "", "", "")])
    'warn'
    """
    rank = max((STATUSES.index(r.status) for r in results), default=0)
    return STATUSES[rank]


def grade_upper(value: float, warn_above: float, fail_above: float) -> str:
    """Status of a value that should stay low: pass up to ``warn_above``, warn up to
    ``fail_above`` (inclusive), fail beyond. NaN fails.

    >>> [grade_upper(v, 1.0, 2.0) for v in (1.0, 1.5, 2.0, 2.01)]
    ['pass', 'warn', 'warn', 'fail']
    """
    if not value <= fail_above:
        return "fail"
    return "pass" if value <= warn_above else "warn"


def level_statuses(checks: Iterable[CheckResult | Mapping[str, Any]]) -> dict[str, str]:
    """The verdict of each level: the worst status of the checks that name it (``level``).

    Accepts CheckResults or their dicts (the ``checks`` of results.json). Levels that no check
    names are absent: a table shows them without a verdict.

    >>> level_statuses([CheckResult("a", "pass", None, None, "", "", "", level="bed"),
    ...                 CheckResult("b", "warn", None, None, "", "", "", level="bed"),
    ...                 {"name": "c", "status": "fail", "level": "d0"},
    ...                 CheckResult("d", "fail", None, None, "", "", "")])
    {'bed': 'warn', 'd0': 'fail'}
    """
    out: dict[str, str] = {}
    for check in checks:  # a few dozen checks
        if isinstance(check, CheckResult):
            level, status = check.level, check.status
        else:
            level, status = check.get("level"), check.get("status")
        if level is None or status not in STATUSES:
            continue
        old = out.get(level, "pass")
        out[level] = STATUSES[max(STATUSES.index(old), STATUSES.index(status))]
    return out
