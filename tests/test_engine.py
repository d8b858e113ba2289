"""The drawing engine: one engine for trees and explicit networks."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest

from chipflow.build import build_design
from chipflow.export.dxf import write_dxf
from chipflow.export.gds import write_gds

ROOT = Path(__file__).parents[1]
#: SHA-256 of the DXF and GDSII files of every bundled binary tree, as the drawing wrote them
#: before it became a generator feeding the engine (main at 234403c). The engine must draw
#: these trees to the very same bytes; update a hash only with a change of the drawing that
#: is meant to move the mask, and say so in the commit.
MASKS = json.loads((ROOT / "tests" / "data" / "tree_mask_sha256.json").read_text())


@pytest.mark.parametrize("name", sorted(MASKS))
def test_bundled_binary_trees_draw_the_same_mask_bytes_as_before_the_engine(name, tmp_path):
    build = build_design(ROOT / "designs" / f"{name}.toml", field=False)
    dxf = write_dxf(build.layout, tmp_path / "m.dxf", build.export.dxf).read_bytes()
    gds = write_gds(build.layout, tmp_path / "m.gds", build.export.gds).read_bytes()
    assert hashlib.sha256(dxf).hexdigest() == MASKS[name]["dxf"]
    assert hashlib.sha256(gds).hexdigest() == MASKS[name]["gds"]
