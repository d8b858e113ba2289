"""Bundled designs: listed by `chipflow designs`, copied by `chipflow new --from`, and found by
name wherever a command takes a design file."""

from __future__ import annotations

import re
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


def test_new_from_replaces_the_header_comment(tmp_path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    assert run("new", "my-bed", "--from", "demo_endothelial_bed").exit_code == 0
    text = (tmp_path / "my-bed.toml").read_text()
    head = text[: text.index("\nname = ")]
    original = (ROOT / "designs" / "demo_endothelial_bed.toml").read_text()
    first = original.splitlines()[0]
    assert first.startswith("#") and first not in text  # the bundled design's own header
    assert "my-bed" in head and "demo_endothelial_bed" in head
    assert "chipflow build my-bed.toml" in head
    assert all(line.startswith("#") or not line for line in head.splitlines())


def test_a_misspelt_bundled_name_gets_a_suggestion(tmp_path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    for args in (("check", "tree_vesel"), ("build", "demo_endothelial_bd"),
                 ("new", "x", "--from", "tree_vesel")):  # fmt: skip
        result = run(*args)
        assert result.exit_code == 2, args
        assert "did you mean" in result.stderr and len(result.stderr.splitlines()) == 1
    assert "'tree_vessel'" in run("check", "tree_vesel").stderr
    # nothing near: the missing file, as before
    far = run("check", "no_such_design_at_all")
    assert far.exit_code == 2 and "did you mean" not in far.stderr


def test_new_writes_a_commented_walls_section_that_builds_when_uncommented(
    tmp_path, monkeypatch
) -> None:
    import re

    from chipflow.build import build_design

    monkeypatch.chdir(tmp_path)
    assert run("new", "soft").exit_code == 0
    text = (tmp_path / "soft.toml").read_text()
    assert "# [walls]" in text and "\n[walls]" not in text  # commented: rigid as it is
    soft = re.sub(r"(?m)^# (\[walls\]|material |roof_thickness )", r"\1", text)
    (tmp_path / "soft-on.toml").write_text(soft)
    build = build_design(tmp_path / "soft-on.toml")
    assert build.results["operation"]["walls"]["material"] == "PDMS"
    assert any(c["name"] == "wall deformation" for c in build.results["checks"])


def test_a_misspelt_inlet_is_blamed_on_inlet(tmp_path) -> None:
    # designs with keys of their own inlet kind (rpm, tilt_angle): the misspelt inlet is the
    # error, not the keys that belong to the kind it meant
    typos = {"pulsatile_peristaltic_bed": "peristaltc", "rocker_endothelial_bed": "rockr"}
    for design, typo in typos.items():
        text = (ROOT / "designs" / f"{design}.toml").read_text()
        path = tmp_path / f"{design}.toml"
        path.write_text(re.sub(r'(?m)^inlet = "[a-z-]+"', f'inlet = "{typo}"', text))
        result = run("check", str(path))
        assert result.exit_code == 2
        assert "supply.inlet: unknown value" in result.stderr and "did you mean" in result.stderr
