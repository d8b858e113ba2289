"""The on-disk cache of field results: keys, atomic entries, corruption, concurrency, CLI.

The numbers compared are the values the tests store themselves or an uncached solve of the same
geometry (the reference is the solve without the cache), not values from an outside source.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from chipflow.cli import main
from chipflow.field import cache

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def folder(tmp_path, monkeypatch):
    """An empty cache folder of the test's own, and no entries remembered by this process."""
    where = tmp_path / "field"
    monkeypatch.setenv("CHIPFLOW_FIELD_CACHE", str(where))
    monkeypatch.setattr(cache, "_memory", {})
    return where


def _forget(monkeypatch):
    monkeypatch.setattr(cache, "_memory", {})  # as a new process: only the disk remains


def test_a_result_is_computed_once_then_read_from_disk(folder, monkeypatch):
    calls = []

    def compute():
        calls.append(1)
        return {"excess": -1.5e-5, "flows": np.array([1.0, -0.5, -0.5])}

    key = (2e-4, 5e-5, 1.5707963267948966)
    first = cache.cached("junction", key, compute, {"across": 8.0})
    _forget(monkeypatch)
    second = cache.cached("junction", key, compute, {"across": 8.0})
    assert len(calls) == 1
    assert second["excess"] == first["excess"] == -1.5e-5
    np.testing.assert_array_equal(second["flows"], [1.0, -0.5, -0.5])
    assert cache.cache_info().entries == 1
    # other settings, another kind or a slightly different geometry: another entry
    cache.cached("junction", key, compute, {"across": 4.0})
    cache.cached("piece", key, compute, {"across": 8.0})
    cache.cached("junction", (2e-4, 5e-5, 1.5707963267948968), compute, {"across": 8.0})
    assert len(calls) == 4 and cache.cache_info().entries == 4


def test_a_corrupt_or_foreign_entry_is_ignored_and_rewritten(folder, monkeypatch):
    calls = []

    def compute():
        calls.append(1)
        return {"value": 3.0}

    cache.cached("junction", (1.0,), compute)
    (entry,) = folder.glob("*.npz")
    entry.write_bytes(entry.read_bytes()[:30])  # cut short
    _forget(monkeypatch)
    assert cache.cached("junction", (1.0,), compute)["value"] == 3.0
    assert len(calls) == 2
    # rewritten whole: a third process reads it
    _forget(monkeypatch)
    assert cache.cached("junction", (1.0,), compute)["value"] == 3.0
    assert len(calls) == 2
    # an entry holding another key's result (a file copied by hand) is not trusted
    cache.cached("junction", (2.0,), lambda: {"value": 7.0})
    other = folder / f"{cache.key_digest('junction', (2.0,))}.npz"
    entry.write_bytes(other.read_bytes())
    _forget(monkeypatch)
    assert cache.cached("junction", (1.0,), compute)["value"] == 3.0
    assert len(calls) == 3


def test_off_keeps_nothing_on_disk(tmp_path, monkeypatch):
    monkeypatch.setenv("CHIPFLOW_FIELD_CACHE", "off")
    monkeypatch.setattr(cache, "_memory", {})
    assert cache.cache_folder() is None
    assert cache.cached("junction", (1.0,), lambda: {"value": 1.0})["value"] == 1.0
    assert cache.cache_info().entries == 0 and cache.clear_cache() == 0


def test_an_unwritable_folder_is_no_error(tmp_path, monkeypatch):
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    monkeypatch.setenv("CHIPFLOW_FIELD_CACHE", str(blocker / "field"))
    monkeypatch.setattr(cache, "_memory", {})
    assert cache.cached("junction", (1.0,), lambda: {"value": 2.0})["value"] == 2.0


def test_keys_must_be_plain_values(folder):
    with pytest.raises(TypeError, match="cannot key the field cache by a object"):
        cache.key_digest("junction", (object(),))


def _worker(args):
    where, i = args
    os.environ["CHIPFLOW_FIELD_CACHE"] = where
    cache._memory.clear()
    value = cache.cached("junction", (0.25,), lambda: {"array": np.arange(200_000.0) * 0.25})
    return float(value["array"].sum()), i


def test_concurrent_writers_and_readers_agree(folder):
    # many processes ask for the same entry at once: every one gets the whole value, one
    # entry is left and no temporary file
    expected = float((np.arange(200_000.0) * 0.25).sum())
    with ProcessPoolExecutor(4) as pool:
        results = list(pool.map(_worker, [(str(folder), i) for i in range(16)]))
    assert [r[0] for r in results] == [expected] * 16
    assert len(list(folder.iterdir())) == 1


def _build_lengths(design: str, folder: Path, refuse: bool) -> list[float]:
    code = (
        "import json, chipflow.field\n"
        "def refuse(*a, **k):\n    raise AssertionError('a field solve ran')\n"
        + ("chipflow.field.solve_field = refuse\n" if refuse else "")
        + "from chipflow.build import build_design\n"
        f"b = build_design({design!r})\n"
        "print(json.dumps(b.solution.network.length.tolist()))\n"
    )
    env = {**os.environ, "PYTHONPATH": str(ROOT), "CHIPFLOW_FIELD_CACHE": str(folder)}
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True
    )
    return json.loads(done.stdout)


def test_a_second_build_in_a_new_process_solves_no_field(tmp_path):
    design = str(ROOT / "designs" / "rocker_endothelial_bed.toml")
    first = _build_lengths(design, tmp_path, refuse=False)
    assert any(tmp_path.glob("*.npz"))
    assert _build_lengths(design, tmp_path, refuse=True) == first


def test_cache_commands(folder):
    cache.cached("junction", (1.0,), lambda: {"value": 1.0})
    runner = CliRunner()
    shown = runner.invoke(main, ["cache", "info"])
    assert shown.exit_code == 0
    assert str(folder) in shown.output and "entries: 1" in shown.output
    cleared = runner.invoke(main, ["cache", "clear"])
    assert cleared.exit_code == 0 and "removed 1 entries" in cleared.output
    assert cache.cache_info().entries == 0


def test_cache_commands_when_off(monkeypatch):
    monkeypatch.setenv("CHIPFLOW_FIELD_CACHE", "off")
    for sub in ("info", "clear"):
        done = CliRunner().invoke(main, ["cache", sub])
        assert done.exit_code == 0 and "off" in done.output
