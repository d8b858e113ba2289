"""The catalogue of hostile cases (tests/hostile_runner.py): no traceback, no hang, no
unconserved answer. The fast part runs here in-process, each case under a time bound; the
whole catalogue, each case in its own process, runs under ``pytest -m slow``. The cases are
hostile inputs, not reference values, so they need no outside source; the conservation of
every answer is recomputed from what was written."""

from __future__ import annotations

import signal
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
import hostile_runner  # noqa: E402

CASES = hostile_runner.catalogue()


def test_the_catalogue_is_large_and_covers_every_family():
    families = {c.name.split("/")[0] for c in CASES}
    assert len(CASES) >= 700
    assert {"design", "whole", "option", "file", "mask", "network", "api", "scheduler",
            "outdir", "newcomer"} <= families  # fmt: skip


class _Hang(Exception):
    pass


@pytest.mark.parametrize("case", [c for c in CASES if c.fast], ids=lambda c: c.name)
def test_a_fast_hostile_case(case):
    def alarm(signum, frame):
        raise _Hang(case.name)

    previous = signal.signal(signal.SIGALRM, alarm)
    signal.alarm(int(hostile_runner.BOUND))
    try:
        verdict = hostile_runner.run_case(case)
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    assert verdict.outcome in ("refused", "answered"), (verdict.outcome, verdict.detail)


@pytest.mark.slow
def test_the_whole_catalogue(capsys):
    status = hostile_runner.main(["--jobs", "2"])
    out = capsys.readouterr().out
    assert status == 0, out
    assert " 0 tracebacks, 0 hangs" in out and " 0 unconserved" in out
