"""chipflow as a user gets it: a wheel built from this tree, installed into a fresh folder,
run from a folder outside the source checkout. Every example shown by `--help` must run.

Building the wheel (pip, with setuptools in an isolated build environment) and running the
examples takes some tens of seconds, so the whole test shares one installation.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from chipflow.cli import main

ROOT = Path(__file__).resolve().parents[1]


def _run(args, **kwargs) -> subprocess.CompletedProcess:
    return subprocess.run(args, capture_output=True, text=True, timeout=600, **kwargs)


@pytest.fixture(scope="module")
def installed(tmp_path_factory) -> dict[str, str]:
    """Environment variables that run the installed copy (and nothing of the checkout)."""
    base = tmp_path_factory.mktemp("installed")
    wheels, target = base / "wheels", base / "site"
    built = _run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", wheels, ROOT])
    if built.returncode != 0:
        pytest.fail(f"building the wheel failed:\n{built.stderr[-2000:]}")
    (wheel,) = wheels.glob("chipflow-*.whl")
    done = _run(
        [sys.executable, "-m", "pip", "install", "--no-deps", "-q", "--target", target, wheel]
    )
    assert done.returncode == 0, done.stderr[-2000:]
    env = {
        **os.environ,
        "PYTHONPATH": str(target),
        "PATH": f"{target / 'bin'}{os.pathsep}{os.environ.get('PATH', '')}",
        "MPLBACKEND": "Agg",
    }
    return env


def _examples(help_text: str) -> list[str]:
    """The command lines under "Example:" / "Examples:" in a --help text."""
    lines = help_text.splitlines()
    out = []
    for i, line in enumerate(lines):
        if re.match(r"^\s*Examples?:\s*$", line):
            for follow in lines[i + 1 :]:
                if out and out[-1].endswith("\\"):  # a continued command line
                    out[-1] = out[-1][:-1] + follow.strip()
                elif follow.strip().startswith("chipflow"):
                    out.append(follow.strip())
                else:
                    break
    return out


def test_every_help_example_runs_after_a_plain_install(installed, tmp_path: Path) -> None:
    work = tmp_path / "work"
    work.mkdir()
    where = _run(
        [sys.executable, "-c", "import chipflow; print(chipflow.__file__)"], env=installed, cwd=work
    )
    assert not where.stdout.startswith(str(ROOT / "chipflow")), "the checkout, not the install"
    assert "site" in where.stdout
    # the `analyse` example reads the mask installed with chipflow: nothing written here
    examples = []
    for name in ["", *main.list_commands(None)]:
        shown = _run(["chipflow", *([name] if name else []), "--help"], env=installed, cwd=work)
        assert shown.returncode == 0, shown.stderr
        found = _examples(shown.stdout)
        assert found, f"chipflow {name} --help shows no example"
        examples += found
    for line in examples:
        done = _run(["bash", "-c", line], env=installed, cwd=work)
        # 0: every check passes; 1: built, but a check fails (outputs written, as documented)
        assert done.returncode in (0, 1), f"{line}\n{done.stdout[-1500:]}\n{done.stderr[-1500:]}"
        assert "Traceback" not in done.stderr and "error:" not in done.stderr, line
    # the bundled designs came with the install
    listed = _run(["chipflow", "designs"], env=installed, cwd=work).stdout
    assert {line.split()[0] for line in listed.splitlines()} == {
        p.stem for p in (ROOT / "designs").glob("*.toml")
    }
