"""Fabrication rule findings of the layout, as check results.

A finding is any object with the attributes ``rule``, ``severity`` ("error" or "warning"),
``value``, ``limit``, ``x``, ``y`` [m], ``channels`` and ``message``; optional ``unit`` and
``source``. Errors fail, warnings warn.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from typing import Any

from chipflow.checks.result import CheckResult
from chipflow.errors import ArgumentError

__all__ = ["fabrication_results", "SEVERITY_STATUS"]

SEVERITY_STATUS = {"error": "fail", "warning": "warn", "info": "pass"}


def _number(value: Any) -> float | None:
    """A finite number, or None (no position: a channel that is not drawn has NaN)."""
    try:
        number = None if value is None else float(value)
    except (TypeError, ValueError):
        return None
    return number if number is not None and math.isfinite(number) else None


def fabrication_results(findings: Iterable[Any]) -> list[CheckResult]:
    """Turn fabrication rule findings into check results; one passing result when none.

    Examples
    --------
    >>> from types import SimpleNamespace as F
    >>> f = F(rule="minimum feature", severity="error", value=40e-6, limit=60e-6,
    ...       x=1.5e-3, y=2e-3, channels=(3, 4), message="channel narrower than the mask allows")
    >>> r = fabrication_results([f])[0]
    >>> r.status, r.name
    ('fail', 'fabrication: minimum feature')
    >>> r.message
    'channel narrower than the mask allows (at x = 1.5 mm, y = 2 mm; channels 3, 4)'
    >>> fabrication_results([F(**{**vars(f), "x": float("nan")})])[0].message  # not drawn
    'channel narrower than the mask allows (channels 3, 4)'
    >>> fabrication_results([])[0].status
    'pass'
    """
    results = []
    for finding in findings:  # findings are few: one per broken rule and place
        severity = str(finding.severity)
        if severity not in SEVERITY_STATUS:
            raise ArgumentError(
                f"fabrication finding {finding.rule!r}: unknown severity {severity!r}"
            )
        where = []
        x, y = _number(getattr(finding, "x", None)), _number(getattr(finding, "y", None))
        if x is not None and y is not None:
            where.append(f"at x = {x * 1e3:.4g} mm, y = {y * 1e3:.4g} mm")
        channels = getattr(finding, "channels", None)
        if channels is not None and len(channels):
            shown = ", ".join(str(int(c)) for c in list(channels)[:8])
            more = f" and {len(channels) - 8} more" if len(channels) > 8 else ""
            where.append(f"channel{'s' if len(channels) > 1 else ''} {shown}{more}")
        message = str(finding.message)
        if where:
            message += f" ({'; '.join(where)})"
        results.append(
            CheckResult(
                f"fabrication: {finding.rule}",
                SEVERITY_STATUS[severity],
                _number(finding.value),
                _number(finding.limit),
                str(getattr(finding, "unit", "m")),
                str(getattr(finding, "source", "fabrication rules of the layout")),
                message,
            )
        )
    if not results:
        results.append(
            CheckResult(
                "fabrication rules",
                "pass",
                None,
                None,
                "",
                "fabrication rules of the layout",
                "every fabrication rule is met",
            )
        )
    return results
