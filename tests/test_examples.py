"""Every script in examples/ runs and prints what it promises."""

from __future__ import annotations

import runpy
from pathlib import Path

import pytest

EXAMPLES = sorted((Path(__file__).resolve().parents[1] / "examples").glob("*.py"))
EXPECT = {
    "flow_sweep.py": "roof-sag limit",
    "channel_physics.py": "plates",
    "small_network.py": "reservoir pressure",
    "build_and_read.py": "overall: pass",
    "tolerances.py": "1. depth of mould level 1",
}


def test_every_example_is_listed() -> None:
    assert sorted(p.name for p in EXAMPLES) == sorted(EXPECT)


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.stem)
def test_example_runs(path: Path, capsys, monkeypatch, tmp_path) -> None:
    monkeypatch.chdir(tmp_path)
    runpy.run_path(str(path), run_name="__main__")
    assert EXPECT[path.name] in capsys.readouterr().out
