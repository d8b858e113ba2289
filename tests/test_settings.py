"""``--set KEY=VALUE`` is the same as editing the design file: same data, same bytes out."""

from __future__ import annotations

import json
import re
import tomllib
from pathlib import Path

import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from chipflow.build import read_design_source
from chipflow.cli import main
from chipflow.errors import SpecError
from chipflow.spec.overrides import apply_settings, parse_setting, toml_value

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "designs" / "demo_endothelial_bed.toml"
TINY = (ROOT / "tests" / "data" / "two_channel_tree.toml").read_text()


def run(*args: str):
    return CliRunner().invoke(main, list(args))


def _set(text: str, *options: str) -> str:
    return apply_settings(text, [parse_setting(o) for o in options])


# -- the text edit ----------------------------------------------------------------------------
def test_a_value_is_replaced_in_place_and_its_comment_kept() -> None:
    edited = _set(TINY, "tree.flow=8uL/min")
    assert 'flow = "8uL/min"        # total\n' in edited
    assert edited.replace('"8uL/min"', '"4 uL/min"') == TINY  # nothing else moved


def test_keys_and_tables_that_are_missing_are_added() -> None:
    edited = _set(TINY, "tree.trunk_width=300um", "bed.gap=150um", "chip.width=80mm")
    data = tomllib.loads(edited)
    assert data["tree"]["trunk_width"] == "300um" and data["bed"]["gap"] == "150um"
    assert data["chip"] == {"width": "80mm"}
    # the new key joins its table, after its last key and before the blank line
    assert 'length = "2 mm"\ntrunk_width = "300um"\n\n[bed]' in edited


def test_top_level_lists_numbers_and_booleans() -> None:
    edited = _set(
        TINY,
        "name=renamed",
        "fabrication.depths=[40um, 80um]",
        "tree.generations=3",
        "export.mirror=true",
        'tree.rule="area-growth"',
    )
    data = tomllib.loads(edited)
    assert data["name"] == "renamed" and data["fabrication"]["depths"] == ["40um", "80um"]
    assert data["tree"]["generations"] == 3 and data["export"]["mirror"] is True
    assert data["tree"]["rule"] == "area-growth"
    assert 'renamed"   # quick tests' in edited  # the comment after the old name stays


def test_the_last_of_two_settings_of_one_key_wins() -> None:
    assert (
        tomllib.loads(_set(TINY, "tree.flow=1uL/min", "tree.flow=2uL/min"))["tree"]["flow"]
        == "2uL/min"
    )


def test_line_endings_are_kept() -> None:
    crlf = TINY.replace("\n", "\r\n")
    edited = _set(crlf, "tree.flow=8uL/min", "chip.width=80mm")
    assert "\n" not in edited.replace("\r\n", "")
    assert tomllib.loads(edited)["chip"]["width"] == "80mm"


@pytest.mark.parametrize(
    "option,words",
    [
        ("tree flow", "expected KEY=VALUE"),
        ("tree.flow=", "no value"),
        ("tree..flow=1", "is not a key"),
        ("tree.flow=[", "is not a value"),
        ("tree.rule.x=1", "not a table"),
    ],
)
def test_bad_settings_are_one_clear_error(option: str, words: str) -> None:
    with pytest.raises(SpecError, match=re.escape(words)):
        _set(TINY, option)


def test_a_layout_the_edit_cannot_handle_says_to_edit_the_file() -> None:
    dotted = 'name = "x"\ntree.flow = "4 uL/min"\n'
    with pytest.raises(SpecError, match="edit the file instead"):
        _set(dotted, "tree.flow=8uL/min")


_TEXT = st.text(
    st.characters(codec="utf-8", exclude_categories=("Cs", "Cc")), min_size=1, max_size=12
)
_VALUES = st.one_of(
    st.integers(-(10**6), 10**6),
    st.floats(-1e6, 1e6, allow_nan=False),
    st.booleans(),
    _TEXT,
    st.lists(_TEXT, min_size=1, max_size=3),
)


@settings(max_examples=60, deadline=None)
@given(
    section=st.sampled_from(["", "tree", "bed", "culture", "fabrication", "new_table"]),
    key=st.from_regex(r"[a-z][a-z_]{0,8}", fullmatch=True),
    value=_VALUES,
)
def test_the_edited_text_holds_exactly_the_set_value(section, key, value) -> None:
    """Law: parsing the edited text gives the original data with that one value set (the
    function checks it too; here against an independent merge)."""
    dotted = f"{section}.{key}" if section else key
    if not section and isinstance(tomllib.loads(TINY).get(key), dict):
        return  # a whole table is not a value
    edited = apply_settings(TINY, [parse_setting(f"{dotted}={toml_value(value)}")])
    expected = tomllib.loads(TINY)
    table = expected.setdefault(section, {}) if section else expected
    table[key] = value
    assert tomllib.loads(edited) == expected


# -- the same bytes as an edited file -------------------------------------------------------------
def _pair(tmp_path: Path, text: str, old: str, new: str) -> tuple[Path, Path]:
    """The design as it is (a/) and with one line edited by hand (b/), same file name."""
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    a, b = tmp_path / "a" / "design.toml", tmp_path / "b" / "design.toml"
    a.write_text(text)
    assert old in text
    b.write_text(text.replace(old, new, 1))
    return a, b


def _tree(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_build_with_set_gives_the_bytes_of_the_edited_file(tmp_path: Path) -> None:
    a, b = _pair(tmp_path, DEMO.read_text(), 'flow = "12 uL/min"', 'flow = "8uL/min"')
    one = run("build", str(a), "--set", "tree.flow=8uL/min", "-o", str(tmp_path / "one"))
    two = run("build", str(b), "-o", str(tmp_path / "two"))
    assert one.exit_code == two.exit_code == 0, one.output + one.stderr
    first, second = _tree(tmp_path / "one"), _tree(tmp_path / "two")
    assert first == second and len(first) >= 8  # masks, previews, report, results
    results = json.loads(first["results.json"])
    assert results["design"]["sha256"] == read_design_source(b).sha256
    assert results["totals"]["total_flow"] == pytest.approx(8e-9 / 60, rel=1e-9)
    assert one.output.replace(str(tmp_path / "one"), "") == two.output.replace(
        str(tmp_path / "two"), ""
    )


def test_check_vary_and_sweep_with_set_match_the_edited_file(tmp_path: Path) -> None:
    a, b = _pair(tmp_path, TINY, 'flow = "4 uL/min"', 'flow = "5uL/min"')
    setting = ("--set", "tree.flow=5uL/min")
    checked = [run("check", str(a), "--json", *setting), run("check", str(b), "--json")]
    assert checked[0].output == checked[1].output and checked[0].exit_code == 0
    varied = [
        run("vary", str(a), "--json", "--workers", "1", "-o", str(tmp_path / "v1"), *setting),
        run("vary", str(b), "--json", "--workers", "1", "-o", str(tmp_path / "v2")),
    ]
    assert varied[0].exit_code == 0, varied[0].stderr
    assert varied[0].output == varied[1].output
    axis = ("--vary", "bed.length=2mm,3mm", "--workers", "1")
    swept = [
        run("sweep", str(a), *axis, "-o", str(tmp_path / "s1"), *setting),
        run("sweep", str(b), *axis, "-o", str(tmp_path / "s2")),
    ]
    assert swept[0].exit_code == 0, swept[0].stderr
    assert (tmp_path / "s1" / "sweep.csv").read_bytes() == (
        tmp_path / "s2" / "sweep.csv"
    ).read_bytes()


def test_a_bad_setting_exits_2_and_writes_nothing(tmp_path: Path) -> None:
    out = tmp_path / "out"
    for option in ("tree.flw=8uL/min", "tree.flow=8um", "tree.flow"):
        result = run("build", str(DEMO), "--set", option, "-o", str(out))
        assert result.exit_code == 2, option
        assert len(result.stderr.strip().splitlines()) == 1 and "Traceback" not in result.output
        assert not out.exists()
    assert "did you mean 'flow'" in run("check", str(DEMO), "--set", "tree.flw=8uL/min").stderr


# -- entries of arrays of tables, by name -------------------------------------------------------
REGIONS = ROOT / "designs" / "dual_region_beds.toml"


def test_an_array_entry_is_reached_by_its_name() -> None:
    text = REGIONS.read_text()
    edited = _set(text, "regions.venous.gap=150um", "regions.arteriolar.cell_type=hepatocyte")
    data = tomllib.loads(edited)
    venous, arteriolar = data["regions"]
    assert venous["gap"] == "150um" and arteriolar["gap"] == "120 um"  # only the named one
    assert (
        arteriolar["cell_type"] == "hepatocyte"
        and "cell_type" not in tomllib.loads(text)["regions"][1]
    )
    with pytest.raises(SpecError, match=r"no \[\[regions\]\] entry with name 'liver' \(known: "):
        _set(text, "regions.liver.gap=150um")


def test_check_with_a_region_set_matches_the_edited_file(tmp_path: Path) -> None:
    a, b = _pair(tmp_path, REGIONS.read_text(), "flow_fraction = 0.25", "flow_fraction = 0.3")
    c = b.read_text().replace("flow_fraction = 0.75", "flow_fraction = 0.7", 1)
    b.write_text(c)
    setting = ("--set", "regions.venous.flow_fraction=0.3")
    setting += ("--set", "regions.arteriolar.flow_fraction=0.7")
    checked = [run("check", str(a), "--json", *setting), run("check", str(b), "--json")]
    assert checked[0].exit_code in (0, 1), checked[0].stderr
    assert checked[0].output == checked[1].output
    plain = run("check", str(REGIONS), "--json").output
    assert checked[0].output != plain  # the setting took effect
    swept = run("sweep", str(a), "--vary", "regions.venous.gap=110um,130um", "--workers", "1",
                "-o", str(tmp_path / "s"))  # fmt: skip
    assert swept.exit_code == 0, swept.stderr
    assert (tmp_path / "s" / "sweep.csv").read_text().count("\n") >= 3  # header and two points
