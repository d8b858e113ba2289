"""Drawing: a sized design placed on the chip as mask-layer polygons.

:func:`draw` places a :class:`~chipflow.design.model.TreeDesign` on a :class:`Chip` under
:class:`LayoutRules` (through the one drawing engine, :func:`draw_sketch`, which draws any
network with coordinates); :func:`extract_network` turns the drawing into the solver's network;
:func:`check_rules` reports where the drawing breaks a fabrication rule.
"""

from chipflow.layout.check import Finding, check_rules
from chipflow.layout.draw import draw, layer_name
from chipflow.layout.engine import draw_sketch
from chipflow.layout.extract import extract_network
from chipflow.layout.model import DrawnChannels, Layout, MaskLayer, Pieces, PortMark
from chipflow.layout.rules import PUNCH_DIAMETERS, Chip, LayoutRules

__all__ = [
    "Chip",
    "DrawnChannels",
    "Finding",
    "Layout",
    "LayoutRules",
    "MaskLayer",
    "PUNCH_DIAMETERS",
    "Pieces",
    "PortMark",
    "check_rules",
    "draw",
    "draw_sketch",
    "extract_network",
    "layer_name",
]
