"""Sizing: per-generation width, depth and count from branching rules and targets.

>>> from chipflow.spec.reader import parse_design_text
>>> lines = ['[tree]', 'flow = "4 uL/min"', 'generations = 2', 'rule = "equal-shear"',
...          '[bed]', 'length = "1 mm"', '[targets]', 'shear = "0.5 Pa"']
>>> spec = load_tree_spec(parse_design_text(chr(10).join(lines), "demo.toml"))
>>> [round(level.width * 1e6) for level in size_tree(spec).levels]
[335, 183, 102, 183, 335]
"""

from chipflow.design.model import ROLES, Level, TreeDesign
from chipflow.design.sizing import size_channel, size_tree, wall_shear, width_for_shear
from chipflow.design.table import generation_table, generation_table_dict
from chipflow.design.tree_network import solve_tree, tree_arrays, tree_network
from chipflow.spec.tree import load_tree_spec

__all__ = [
    "ROLES",
    "Level",
    "TreeDesign",
    "load_tree_spec",
    "size_tree",
    "size_channel",
    "wall_shear",
    "width_for_shear",
    "generation_table",
    "generation_table_dict",
    "tree_arrays",
    "tree_network",
    "solve_tree",
]
