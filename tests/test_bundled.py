"""Bundled designs: listed by `chipflow designs`, copied by `chipflow new --from`, and found by
name wherever a command takes a design file."""

from __future__ import annotations

import tomllib
from pathlib import Path

from click.testing import CliRunner

from chipflow.cli import main
from chipflow.spec.bundled import bundled_designs, resolve_design

ROOT = Path(__file__).resolve().parents[1]


def run(*args: str):
    return CliRunner().invoke(main, list(args))


def test_the_installed_designs_are_the_repository_designs() -> None:
    installed = {d.name: d.path.read_bytes() for d in bundled_designs()}
    repository = {p.stem: p.read_bytes() for p in (ROOT / "designs").glob("*.toml")}
    assert installed == repository


def test_designs_lists_one_line_each() -> None:
    result = run("designs")
    assert result.exit_code == 0
    lines = result.output.splitlines()
    assert [line.split()[0] for line in lines] == sorted(d.name for d in bundled_designs())
    assert all(len(line) <= 120 for line in lines)
    assert any("bridge" in line for line in lines)  # the loop design's own description


def test_new_from_a_bundled_design_copies_it_under_the_new_name(tmp_path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    result = run("new", "my-loop", "--from", "bench_loop_network")
    assert result.exit_code == 0, result.output
    copied = tomllib.loads((tmp_path / "my-loop.toml").read_text())
    original = tomllib.loads((ROOT / "designs" / "bench_loop_network.toml").read_text())
    assert copied["name"] == "my-loop"
    assert {k: v for k, v in copied.items() if k != "name"} == {
        k: v for k, v in original.items() if k != "name"
    }
    # the copy checks like the original (its branches are uneven on purpose: exit 1)
    assert run("check", "my-loop.toml").exit_code == 1
    # never over an existing file; an unknown design is one line, exit 2
    for args in (("new", "my-loop", "--from", "tree_vessel"), ("new", "x", "--from", "nope")):
        again = run(*args)
        assert again.exit_code == 2 and len(again.stderr.strip().splitlines()) == 1


def test_a_design_argument_finds_a_bundled_design_by_name(tmp_path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    assert resolve_design("tree_vessel").name == "tree_vessel.toml"
    assert resolve_design("designs/tree_vessel.toml").is_file()
    assert resolve_design("missing.toml") == Path("missing.toml")
    # a file of that name in the working folder wins over the bundled design
    (tmp_path / "tree_vessel").write_text("not a design")
    assert resolve_design("tree_vessel") == Path("tree_vessel")
    missing = run("check", "missing.toml")
    assert missing.exit_code == 2 and "no such design file" in missing.stderr
