"""The README and the user guide stay true: every command line in the guide runs and prints what
the page shows, the documented outputs are the written ones, the README's picture is the demo's
current profile figure, and the README stays short.

The Python examples of the guide run as doctests (pytest collects ``docs/**/*.rst``); here run
the ``console`` blocks: each ``$ chipflow ...`` line through the command line in a fresh folder
per page (later lines may use what earlier ones wrote), each line under it that the page shows
as output must appear in the output, and the exit status must be 0 or 1 (a check that fails on
purpose). ``--watch`` runs in a process of its own until its first build; the benchmarks, which
take minutes, run their option parser with every option the page uses.
"""

from __future__ import annotations

import csv
import io
import os
import re
import shlex
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from click.testing import CliRunner
from rst_tables import GUIDE, guide_table

from chipflow.cli import main

ROOT = Path(__file__).resolve().parents[1]
README = ROOT / "README.md"


def console_blocks(text: str) -> list[list[tuple[str, list[str]]]]:
    """The console blocks of a page: per block, (command, shown output lines) in order.

    >>> page = ".. code-block:: console\\n\\n   $ chipflow designs\\n   tree_vessel\\n\\nText\\n"
    >>> console_blocks(page)
    [[('chipflow designs', ['tree_vessel'])]]
    """
    blocks = []
    for match in re.finditer(r"^\.\. code-block:: console\n\n((?:   .*\n|\n)+)", text, re.M):
        steps: list[tuple[str, list[str]]] = []
        for line in match.group(1).splitlines():
            line = line[3:]
            if line.startswith("$ "):
                steps.append((line[2:].strip(), []))
            elif line.strip() and steps:
                steps[-1][1].append(line.strip())
        blocks.append(steps)
    return blocks


PAGES = sorted(p.stem for p in GUIDE.glob("*.rst") if console_blocks(p.read_text()))


def _normal(text: str) -> str:
    return " ".join(text.split())


def _watch(args: list[str], shown: list[str], folder: Path) -> None:
    env = {**os.environ, "PYTHONPATH": str(ROOT), "MPLBACKEND": "Agg"}
    process = subprocess.Popen(
        [sys.executable, "-c", "from chipflow.cli import main; main()", *args, "--port", "0"],
        cwd=folder, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, env=env,
    )  # fmt: skip
    lines: list[str] = []
    reader = threading.Thread(target=lambda: lines.extend(process.stdout), daemon=True)
    reader.start()
    end = time.monotonic() + 120
    while time.monotonic() < end and not any(s.startswith("build 1:") for s in lines):
        time.sleep(0.2)
    process.send_signal(signal.SIGINT)
    assert process.wait(timeout=60) == 0
    reader.join(timeout=10)
    output = _normal("".join(lines))
    for line in shown:
        assert _normal(line) in output, (args, line, output)


def _benchmark(args: list[str]) -> None:
    done = subprocess.run(
        [sys.executable, str(ROOT / args[0]), "--help"],
        capture_output=True, text=True, timeout=120, env={**os.environ, "MPLBACKEND": "Agg"},
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    for option in (a for a in args[1:] if a.startswith("--")):
        assert option in done.stdout, (args[0], option)


@pytest.mark.parametrize("page", PAGES)
def test_every_command_line_of_the_guide_runs_as_shown(page, tmp_path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    runner = CliRunner()
    for block in console_blocks((GUIDE / f"{page}.rst").read_text()):
        for command, shown in block:
            args = shlex.split(command)
            if args[0] == "python":
                _benchmark(args[1:])
                continue
            assert args[0] == "chipflow", command
            if "--watch" in args:
                _watch(args[1:], shown, tmp_path)
                continue
            result = runner.invoke(main, args[1:])
            assert result.exit_code in (0, 1), (command, result.output, result.stderr)
            output = _normal(result.output)
            for line in shown:
                assert _normal(line) in output, (command, line, result.output)


def test_the_guide_pages_have_console_examples() -> None:
    assert {"commands", "outputs", "tolerances", "analyse", "speed"} <= set(PAGES)


# -- the documented outputs are the written ones ----------------------------------------------
@pytest.fixture(scope="module")
def builds():
    from chipflow.build import build_design
    from chipflow.spec.bundled import resolve_design

    return [build_design(resolve_design(n)) for n in ("demo_endothelial_bed", "bench_loop_network")]


def test_results_json_keys_are_documented(builds) -> None:
    documented = {cells[0].strip("`") for cells in guide_table("outputs", "results-keys")}
    written = set().union(*(b.results for b in builds))
    assert written <= documented  # every key written is documented
    assert documented <= written | {"field"} | {"channels", "fabrication"}


def test_channels_csv_columns_are_documented(builds) -> None:
    from chipflow.export.bundle import channels_csv

    documented = []
    for cells in guide_table("outputs", "channel-columns"):
        documented += re.findall(r"``([^`]+)``", cells[0])
    header = next(csv.reader(io.StringIO(channels_csv(builds[0]))))
    assert documented == header


def test_the_checks_carry_the_documented_keys(builds) -> None:
    row = {cells[0].strip("`"): cells[1] for cells in guide_table("outputs", "results-keys")}
    documented = set(re.findall(r"``([a-z_]+)``", row["checks"]))
    written = set().union(*(c.keys() for c in builds[0].results["checks"]))
    assert written <= documented


# -- the README ------------------------------------------------------------------------------
def test_the_readme_is_short_and_keeps_its_parts() -> None:
    text = README.read_text()
    assert len(text.splitlines()) < 160
    for heading in ("## Quick start", "## Commands", "## Cautions", "## Documentation"):
        assert heading in text
    quick = text.split("## Quick start", 1)[1].split("```")[1].strip().splitlines()
    assert quick == [
        "python -m pip install . && chipflow demo",
        'python -m pip install -e ".[test]" && python -m pytest',
    ]
    cautions = text.split("## Cautions", 1)[1].split("##", 1)[0].lower()
    for word in ("pressuri", "bond", "biosafety", "local codes", "design rules"):
        assert word in cautions


def test_the_readme_links_and_picture_exist() -> None:
    text = README.read_text()
    targets = re.findall(r"\]\(([^)#]+)\)", text) + re.findall(r'<img src="([^"]+)"', text)
    assert "docs/_static/demo-profile.png" in targets
    missing = [t for t in targets if not (ROOT / t).exists()]
    assert not missing, missing


def test_the_readme_picture_is_the_current_demo_profile(tmp_path) -> None:
    from matplotlib.testing.compare import compare_images

    sys.path.insert(0, str(ROOT / "docs"))
    try:
        import readme_figure
    finally:
        sys.path.remove(str(ROOT / "docs"))
    fresh = readme_figure.draw(tmp_path / "demo-profile.png")
    # a small tolerance for font rendering on another machine; a changed figure or demo fails
    problem = compare_images(str(readme_figure.FIGURE), str(fresh), tol=2.0)
    assert problem is None, f"{problem}: run `python docs/readme_figure.py` and commit the PNG"
