"""A measured pump waveform: a CSV file of time and flow over one period.

The first row names the two columns with their units in brackets, e.g.
``time [s],flow [uL/min]``; every other row holds two numbers, times rising. The period is
the span from the first to the last time (the last row closes the period).
"""

from __future__ import annotations

import csv
import re
from pathlib import Path

import numpy as np

from chipflow.errors import ChipflowError, SpecError
from chipflow.limits import check_value
from chipflow.operation.waveform import Waveform
from chipflow.spec.files import MAX_WAVEFORM_BYTES, read_capped
from chipflow.units import to_si

__all__ = ["read_waveform"]

_HEADER = re.compile(r"^\s*(\w+)\s*\[(.+)\]\s*$")


def read_waveform(path: Path, where: str) -> Waveform:
    """Read a waveform CSV (see the module documentation); ``where`` locates it in messages."""
    try:
        text = read_capped(path, MAX_WAVEFORM_BYTES, "waveform file").decode("utf-8")
    except UnicodeDecodeError:
        raise SpecError(f"{where}: cannot read the waveform file {path} (not UTF-8 text)") from None
    except SpecError as exc:
        raise SpecError(f"{where}: {exc}") from None
    rows = [r for r in csv.reader(text.splitlines()) if r and any(c.strip() for c in r)]
    if len(rows) < 4:
        raise SpecError(f"{where}: {path.name}: need a header and at least three rows")
    units = []
    for cell, kind in zip(rows[0][:2], ("time", "flow"), strict=False):
        match = _HEADER.match(cell)
        if match is None or len(rows[0]) != 2:
            raise SpecError(
                f"{where}: {path.name}: the header must be two columns with units, "
                f"e.g. 'time [s],flow [uL/min]', got {','.join(rows[0])!r}"
            )
        try:
            units.append(to_si(f"1 {match.group(2)}", kind))
        except ChipflowError as exc:
            raise SpecError(f"{where}: {path.name}: {exc}") from None
    try:
        data = np.array([[float(c) for c in r] for r in rows[1:]], dtype=float)
    except ValueError:
        raise SpecError(f"{where}: {path.name}: every row must hold two numbers") from None
    if data.shape[1] != 2 or not np.all(np.isfinite(data)):
        raise SpecError(f"{where}: {path.name}: every row must hold two finite numbers")
    time, flow = data[:, 0] * units[0], data[:, 1] * units[1]
    try:  # every sample within the plausible ranges of a time and a flow (chipflow.limits)
        check_value(float(np.ptp(time)), "time", where=f"{path.name}: the period")
        worst = float(flow[np.argmax(np.abs(flow))])
        check_value(worst, "flow", where=f"{path.name}: the largest flow")
    except SpecError as exc:
        raise SpecError(f"{where}: {exc}") from None
    if np.any(np.diff(time) <= 0):
        raise SpecError(f"{where}: {path.name}: times must rise from row to row")
    waveform = Waveform.from_samples(time, flow)
    if not waveform.mean > 0:
        raise SpecError(f"{where}: {path.name}: the mean flow must be positive")
    return waveform
