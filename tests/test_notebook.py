"""A build and a tolerance run show themselves in a notebook (``_repr_html_``)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from chipflow.build import build_design
from chipflow.checks import level_statuses
from chipflow.network.summary import generation_labels

ROOT = Path(__file__).resolve().parents[1]
TINY = (
    (ROOT / "tests" / "data" / "two_channel_tree.toml")
    .read_text()
    .replace('name = "two-channel-tree"', 'name = "notebook-bed"')
)


@pytest.fixture(scope="module")
def build(tmp_path_factory):
    path = tmp_path_factory.mktemp("nb") / "tiny.toml"
    path.write_text(TINY)
    return build_design(path, field=False)


def _cells(html: str) -> list[list[str]]:
    rows = re.findall(r"<tr[^>]*>(.*?)</tr>", html, re.DOTALL)
    return [re.findall(r"<t[dh][^>]*>(.*?)</t[dh]>", row, re.DOTALL) for row in rows]


def test_a_build_shows_its_table_verdicts_and_profile(build) -> None:
    html = build._repr_html_()
    assert "<h3>notebook-bed</h3>" in html and html.count("<svg") == 1  # the profile figure
    rows = _cells(html)
    header, body = rows[0], rows[1:]
    assert header[0] == "level" and header[-1] == "verdict"
    labels = generation_labels(build.results["generations"])
    assert [r[0] for r in body] == labels
    verdicts = level_statuses(build.results["checks"])
    marks = {"pass": "ok", "warn": "WARN", "fail": "FAIL"}
    assert [r[-1] for r in body] == [marks.get(verdicts.get(label), "-") for label in labels]
    counts = [sum(c["status"] == s for c in build.results["checks"]) for s in ("pass", "warn")]
    assert f"checks: {counts[0]} pass, {counts[1]} warn" in html


def test_ipython_finds_the_html(build) -> None:
    formatters = pytest.importorskip("IPython.core.formatters")
    data, _ = formatters.DisplayFormatter().format(build)
    assert data["text/html"] == build._repr_html_()


def test_a_tolerance_run_shows_its_yield_spread_and_profile(build) -> None:
    from chipflow.spec.tolerances import read_tolerances
    from chipflow.variation.vary import vary_build

    variation = vary_build(build, read_tolerances(build.source.top), workers=1)
    html = variation._repr_html_()
    assert "notebook-bed: tolerances" in html and "20 samples" in html and "yield" in html
    assert html.count("<svg") == 1
    body = _cells(html)[1:]
    assert [r[0].split(" ")[0] for r in body] == [lv["label"] for lv in variation.results["levels"]]
