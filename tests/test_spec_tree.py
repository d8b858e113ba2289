"""Reading tree design files: sections, defaults, and messages that point at the key."""

from __future__ import annotations

import pytest

from chipflow.errors import SpecError
from chipflow.spec.reader import parse_design_text
from chipflow.spec.tree import Fabrication, load_tree_spec, read_fabrication

BASE = """
[tree]
flow = "5 uL/min"
generations = 3
rule = "shear-target"
[bed]
residence_time = "1 s"
[targets]
shear = "0.5 Pa"
"""


def load(text: str):
    return load_tree_spec(parse_design_text(text, "t.toml"))


def test_defaults_and_units():
    spec = load(BASE)
    assert spec.flow == pytest.approx(5e-9 / 60)
    assert spec.generations == 3 and spec.rule == "shear-target"
    assert spec.fluid.name == "culture medium"
    assert spec.fabrication == Fabrication()
    # documented defaults: tall-wall limit 2 (Delamarche et al. 1997), roof sag 10 (common
    # practice, from memory), 1 um grid
    assert spec.fabrication.max_depth_to_width == 2.0
    assert spec.fabrication.max_width_to_depth == 10.0
    assert spec.fabrication.grid == pytest.approx(1e-6)
    assert spec.targets.kind == "floor" and spec.targets.target(2) == 0.5
    assert spec.bed.gap == spec.fabrication.min_gap
    assert spec.lengths == (pytest.approx(3e-3),) * 3


def test_fabrication_section_parsed_in_si():
    fab = read_fabrication(
        parse_design_text(
            '[fabrication]\ndepths = ["100 um", "0.05 mm"]\ngrid = "0.5 um"\n'
            'min_feature = "10 um"\n'
            'max_width = "2 mm"\nmax_width_to_depth = 15\nmax_depth_to_width = 1.5\n'
            'min_gap = "80 um"\nbend_radius = 3\nalignment_margin = "5 um"',
            "t.toml",
        )
    )
    assert fab.depths == pytest.approx((50e-6, 100e-6))
    assert fab.min_width == pytest.approx(10e-6)  # defaults to min_feature
    assert (fab.max_width_to_depth, fab.max_depth_to_width, fab.bend_radius) == (15, 1.5, 3)
    assert fab.min_gap == pytest.approx(80e-6) and fab.alignment_margin == pytest.approx(5e-6)
    lo, lo_rule, hi, hi_rule = fab.width_limits(100e-6)
    assert lo == pytest.approx(100e-6 / 1.5) and "tall-wall" in lo_rule
    assert hi == pytest.approx(1.5e-3) and "roof-sag" in hi_rule


def test_bed_channels_need_prime_factors_of_at_most_five():
    with pytest.raises(
        SpecError,
        match=r"t.toml: tree.bed_channels: 49 bed channels cannot be reached .* nearest counts "
        r"that work: 48 or 50",
    ):
        load(BASE.replace("generations = 3", "bed_channels = 49"))
    assert load(BASE.replace("generations = 3", "bed_channels = 16")).splits == (2, 2, 2, 2)
    spec = load(BASE.replace("generations = 3", "bed_channels = 12"))
    assert spec.splits == (3, 2, 2) and spec.bed_channels == 12 and spec.generations == 3
    assert "splits 3, 2, 2 for 12 bed channels" in spec.split_note
    given = load(BASE.replace("generations = 3", "splits = [2, 3, 2]"))
    assert given.splits == (2, 3, 2) and given.split_note == ""
    for bad, words in (
        ("splits = [2, 6]", "6 is not a branching factor from 2 to 5"),
        ("splits = []", "give a list of whole numbers 2 to 5"),
        ('splits = ["3"]', "give a list of whole numbers 2 to 5"),
        ("splits = [3, 2]\nbed_channels = 6", "give exactly one of generations"),
    ):
        with pytest.raises(SpecError, match=words):
            load(BASE.replace("generations = 3", bad))


@pytest.mark.parametrize(
    "old, new, message",
    [
        ('rule = "shear-target"', 'rule = "equal-sheer"', "did you mean 'equal-shear'"),
        ("flow = ", 'flw = "1 uL/min"\nflow = ', "tree.flw: unknown key; did you mean 'flow'"),
        (
            'residence_time = "1 s"',
            'residence_time = "1 mm"',
            "wrong kind of unit at t.toml: bed.residence_time",
        ),
        ('residence_time = "1 s"', "", "give exactly one of residence_time and length"),
        ('shear = "0.5 Pa"', 'shear = ["0.5 Pa", "1 Pa"]', "one per generation 0..3"),
        ('shear = "0.5 Pa"', 'levels = "all"', "needs a shear target"),
        ('shear = "0.5 Pa"', 'cell = "endothelial"', "targets.cell: unknown key"),
        ("[targets]", '[fabrication]\ndepths = ["50 um", "50 um"]\n[targets]', "listed twice"),
    ],
)
def test_errors_name_the_key(old, new, message):
    with pytest.raises(SpecError, match=message.replace("(", r"\(").replace(")", r"\)")):
        load(BASE.replace(old, new))


def test_area_growth_velocity_ratio_becomes_growth():
    spec = load(BASE.replace('rule = "shear-target"', 'rule = "area-growth"\nvelocity_ratio = 8'))
    assert spec.growth == pytest.approx(2.0)  # 8 ** (1/3)
    with pytest.raises(SpecError, match="only used by rule"):
        load(BASE.replace("generations = 3", "generations = 3\ngrowth = 1.5"))


def test_trunk_depth_needed_with_several_depths():
    text = BASE.replace('rule = "shear-target"', 'rule = "equal-shear"\ntrunk_width = "300 um"')
    assert load(text).trunk_depth == pytest.approx(50e-6)  # the single default depth
    with pytest.raises(SpecError, match="trunk_depth: missing"):
        load(text + '[fabrication]\ndepths = ["50 um", "100 um"]\n')


def test_window_from_the_culture_cell_type():
    # Dewey et al. (J Biomech Eng 1981): endothelial cells align with the flow at 0.5-1.0 Pa;
    # the [culture] cell type supplies the sizing window when [targets] gives no numbers.
    culture = '\n[culture]\ncell_type = "endothelial"\n'
    text = BASE.replace('shear = "0.5 Pa"', 'levels = "all"') + culture
    targets = load(text).targets
    assert (targets.minimum, targets.maximum) == (0.5, 1.0)
    assert targets.target(0) == pytest.approx(0.75)
    assert targets.cell == "endothelial"
