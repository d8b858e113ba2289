"""What a command loads, and the unit registry's cache of pint's definitions."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
# Source: BIPM SI brochure (exact definitions): 1 uL = 1e-9 m^3, 1 psi = 6894.757293168 Pa
# (NIST SP 811, from the exact inch and pound-force), 1 dyn/cm^2 = 0.1 Pa, 0 degC = 273.15 K.
CONVERSIONS = [
    ("5 uL/min", "flow", 5e-9 / 60),
    ("1 psi", "pressure", 6894.757293168361),
    ("1.2 dyn/cm^2", "pressure", 0.12),
    ("37 degC", "temperature", 310.15),
]


def _python(code: str, **env: str) -> str:
    run_env = {**os.environ, "PYTHONPATH": str(ROOT), **env}
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env=run_env, check=True
    )
    return done.stdout


def test_the_channel_command_loads_no_drawing_masks_or_plots() -> None:
    code = (
        "import sys, json\n"
        "from click.testing import CliRunner\n"
        "from chipflow.cli import main\n"
        "r = CliRunner().invoke(main, ['channel', '--width', '200um', '--depth', '50um',"
        " '--length', '10mm', '--flow', '5uL/min'])\n"
        "assert r.exit_code == 0, r.output\n"
        "print(json.dumps(sorted(sys.modules)))\n"
    )
    loaded = set(json.loads(_python(code)))
    assert "chipflow.physics.duct" in loaded  # the command ran
    for heavy in ("matplotlib", "ezdxf", "gdstk", "shapely", "scipy.optimize", "chipflow.layout"):
        assert heavy not in loaded, f"chipflow channel imported {heavy}"


def test_version_loads_no_units() -> None:
    code = (
        "import sys\nfrom chipflow.cli import main\n"
        "print('pint' in sys.modules, 'numpy' in sys.modules)"
    )
    assert _python(code).split() == ["False", "False"]


@pytest.mark.parametrize("cache", ["off", "folder", "corrupt"])
def test_cached_registry_converts_as_pint_does(tmp_path: Path, cache: str) -> None:
    folder = tmp_path / "units"
    if cache == "corrupt":
        # a cache file cut short (e.g. by a concurrent run) must not matter
        _python("import chipflow.units", CHIPFLOW_UNIT_CACHE=str(folder))
        for pickle in folder.glob("*.pickle"):
            pickle.write_bytes(pickle.read_bytes()[:20])
    setting = "off" if cache == "off" else str(folder)
    code = (
        "import json\nfrom chipflow.units import to_si\n"
        f"print(json.dumps([to_si(t, k) for t, k, _ in {CONVERSIONS!r}]))"
    )
    for _ in range(2):  # the second run reads the cache written by the first
        values = json.loads(_python(code, CHIPFLOW_UNIT_CACHE=setting))
        assert values == pytest.approx([v for _, _, v in CONVERSIONS], rel=1e-12)
    assert any(folder.glob("*.pickle")) == (cache != "off")


def test_a_tree_build_loads_no_root_finder_integrator_or_multigrid(tmp_path: Path) -> None:
    # scipy.optimize and scipy.integrate cost a large share of a small build's start-up; the
    # sizing has its own root finder, the reservoir ODEs load the integrator when they run and
    # the multigrid solver loads only for large fields
    code = (
        "import sys, json\n"
        "from chipflow.build import build_design\n"
        f"build_design({str(ROOT / 'designs' / 'demo_endothelial_bed.toml')!r}, field=False)\n"
        "print(json.dumps(sorted(sys.modules)))\n"
    )
    loaded = set(json.loads(_python(code, CHIPFLOW_FIELD_CACHE=str(tmp_path))))
    assert "chipflow.layout" in loaded  # the tree was drawn
    for heavy in ("scipy.optimize", "scipy.integrate", "pyamg"):
        assert heavy not in loaded, f"a tree build imported {heavy}"
