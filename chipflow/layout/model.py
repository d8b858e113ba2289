"""The drawn chip: what the exporters read and what the network is extracted from.

This is the contract between drawing (``chipflow.layout``), the exporters (``chipflow.export``)
and the report. All coordinates are in metres in the chip frame (origin at the lower-left
corner of the chip outline, x along the long side), already on the mask grid.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

__all__ = ["MaskLayer", "PortMark", "DrawnChannels", "Layout"]


@dataclass(frozen=True)
class MaskLayer:
    """One mask level: every channel of one depth, merged into valid polygons.

    Attributes
    ----------
    name : str
        Layer name, derived from the depth (see ``chipflow.layout``).
    depth : float
        Feature depth made with this mask [m].
    geometry : shapely.Polygon or shapely.MultiPolygon
        The drawn (channel) area of this level, valid, on the mask grid [m]. Walls between
        neighbouring channels may appear as holes.
    """

    name: str
    depth: float
    geometry: shapely.Geometry


@dataclass(frozen=True)
class PortMark:
    """A punched port.

    Attributes
    ----------
    name : str
        "inlet", "outlet", ...
    x, y : float
        Centre [m].
    diameter : float
        Punch diameter [m].
    keepout : float
        Radius of the region around the centre that only the port's own channel may enter [m].
    """

    name: str
    x: float
    y: float
    diameter: float
    keepout: float


@dataclass(frozen=True)
class DrawnChannels:
    """Every drawn channel as parallel arrays (one entry per channel).

    Attributes
    ----------
    centreline : numpy.ndarray of shapely.LineString
        Centrelines with bends discretised [m].
    length : numpy.ndarray
        Exact drawn centreline length, arcs included [m].
    width, depth : numpy.ndarray
        [m].
    generation : numpy.ndarray of int
    role : numpy.ndarray of str
        "distribution", "bed", "collection" (or "port" for port stubs).
    index : numpy.ndarray of int
        Position of the channel within its level (0 .. count-1).
    node_a, node_b : numpy.ndarray of int
        Junction/port node indices at the channel's ends (flow direction inlet -> outlet).
    layer : numpy.ndarray of int
        Index into ``Layout.layers``.
    outline : numpy.ndarray of shapely.Polygon or None
        Each channel's own outline (centreline offset by half the width each side, flat
        ends at the nodes), before merging into the mask layers [m].
    bends : numpy.ndarray of int or None
        Number of bends (circular arcs) along each channel.
    mask_width : numpy.ndarray or None
        Width measured on the merged, grid-snapped mask polygons across the middle of each
        channel's longest straight run along x [m] (see :mod:`chipflow.layout.widths`); the
        drawing checks that it equals ``width`` to 1 nm.
    """

    centreline: np.ndarray
    length: np.ndarray
    width: np.ndarray
    depth: np.ndarray
    generation: np.ndarray
    role: np.ndarray
    index: np.ndarray
    node_a: np.ndarray
    node_b: np.ndarray
    layer: np.ndarray
    outline: np.ndarray | None = None
    bends: np.ndarray | None = None
    mask_width: np.ndarray | None = None


@dataclass(frozen=True)
class Layout:
    """A sized design drawn on a chip.

    Attributes
    ----------
    name : str
        Design name.
    outline : shapely.Polygon
        Chip outline [m].
    margin : float
        Edge margin no feature may enter [m].
    grid : float
        Mask grid every coordinate is snapped to [m].
    layers : tuple of MaskLayer
        Mask levels, shallowest first.
    ports : tuple of PortMark
        Punched ports.
    channels : DrawnChannels
        Every channel with its identity, for mapping results back onto the drawing.
    node_xy : numpy.ndarray
        (n_nodes, 2) positions of the network nodes [m].
    node_names : tuple of str
        Node names ("inlet", "outlet", junction names).
    warnings : tuple of str
        Soft misses found while drawing (e.g. bed channels drawn longer than designed).
    junctions : tuple of (str, int, Junction)
        The junction geometry at the end of each tree level that splits or merges: the
        parent channel's role and generation and the :class:`~chipflow.layout.junctions.
        Junction` drawn there (one per level; every junction of a level is alike).
    """

    name: str
    outline: shapely.Polygon
    margin: float
    grid: float
    layers: tuple[MaskLayer, ...]
    ports: tuple[PortMark, ...]
    channels: DrawnChannels
    node_xy: np.ndarray
    node_names: tuple[str, ...]
    warnings: tuple[str, ...] = ()
    junctions: tuple = ()
