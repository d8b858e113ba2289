"""Drawing: a sized design placed on the chip as mask-layer polygons."""

from chipflow.layout.model import DrawnChannels, Layout, MaskLayer, PortMark

__all__ = ["DrawnChannels", "Layout", "MaskLayer", "PortMark"]
