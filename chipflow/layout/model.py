"""The drawn chip: what the exporters read and what the network is extracted from.

This is the contract between drawing (``chipflow.layout``), the exporters (``chipflow.export``)
and the report. All coordinates are in metres in the chip frame (origin at the lower-left
corner of the chip outline, x along the long side), already on the mask grid.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

__all__ = [
    "MaskLayer",
    "PortMark",
    "DrawnChannels",
    "DrawnChamber",
    "Pieces",
    "Layout",
    "CultureRegion",
]


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
        channel's longest axis-aligned straight run [m] (see :mod:`chipflow.layout.widths`);
        the drawing checks that it equals ``width`` to 1 nm. A channel without such a run
        (every run oblique) has the width measured across its longest oblique run.
    names : numpy.ndarray of str or None
        Channel names given by the design (explicit networks); None: named from role,
        generation and index.
    region : numpy.ndarray of str or None
        The culture region each channel belongs to ("" for shared channels); None: all "".
    kind : numpy.ndarray of str or None
        What each drawn element is ("channel"); None: all channels.
    hydraulic_length : numpy.ndarray or None
        The length at ``width`` that has the resistance of the channel as the mask has it
        [m]: its drawn length, where oblique runs (whose walls the grid moves) count at the
        width measured on the mask. None: the drawn length.
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
    names: np.ndarray | None = None
    region: np.ndarray | None = None
    kind: np.ndarray | None = None
    hydraulic_length: np.ndarray | None = None


@dataclass(frozen=True)
class DrawnChamber:
    """A drawn chamber (see :mod:`chipflow.layout.chamber`).

    Attributes
    ----------
    name : str
    key : ChamberKey
        Its geometry in its own frame, with the channels meeting it: the key of its 2D solve.
    origin : tuple of float
        The key frame's origin in the chip frame [m].
    turns : int
        Quarter turns counter-clockwise from the key frame to the chip frame.
    outline : shapely.Polygon
        The chamber as drawn, pillars as holes [m].
    port_nodes : tuple of int
        The node where each port's channel ends (the key's port order).
    port_channels : tuple of int
        The channel of each port (into ``Layout.channels``).
    centre : tuple of float
        The middle of the chamber [m].
    role : str
        Role of its network links ("chamber").
    region : str
        Culture region ("" for none).
    mask_width : float
        Its width measured on the merged mask across the middle of its body [m].
    """

    name: str
    key: object
    origin: tuple[float, float]
    turns: int
    outline: shapely.Geometry
    port_nodes: tuple[int, ...]
    port_channels: tuple[int, ...]
    centre: tuple[float, float]
    role: str = "chamber"
    region: str = ""
    mask_width: float = float("nan")


@dataclass(frozen=True)
class Pieces:
    """The pieces of a drawing whose flow is not that of straight channels, as arrays.

    Junctions (where channels meet) and port steps (where a punched hole meets its channel)
    are pieces. Each has a geometry key (hashable, rotation- and mirror-normalised, rounded)
    under which its 2D solve is done once (:func:`chipflow.layout.pieces.solve_piece`); the
    same key at many places (every junction of a tree level) is solved once.

    Attributes
    ----------
    keys : tuple
        The distinct geometry keys.
    kind : numpy.ndarray of str
        (P,) "fan" (a symmetric tree split: one solve with the children at one pressure, the
        correction on the parent), "junction" (an N-port solve, one correction per arm),
        "port" (a punched hole into its channel) or "chamber" (a chamber with the channels
        meeting it: its network is its links, :func:`chipflow.layout.chamber.chamber_links`).
    key : numpy.ndarray of int
        (P,) index into ``keys``.
    node : numpy.ndarray of int
        (P,) layout node the piece sits at.
    x, y : numpy.ndarray
        (P,) its position [m] (the node; for a port, the hole's centre; for a chamber, its
        middle).
    rotation : numpy.ndarray
        (P,) angle that turns the key's frame into the chip frame [rad] (after ``mirror``).
    mirror : numpy.ndarray of bool
        (P,) the key's frame is mirrored (y -> -y) before the rotation.
    arm_channel : numpy.ndarray of int
        (P, A) the channel of each arm of the key, in the key's arm order (-1: no arm).
    arm_end : numpy.ndarray of int
        (P, A) which end of that channel the piece joins (0: ``node_a``, 1: ``node_b``).
    """

    keys: tuple
    kind: np.ndarray
    key: np.ndarray
    node: np.ndarray
    x: np.ndarray
    y: np.ndarray
    rotation: np.ndarray
    mirror: np.ndarray
    arm_channel: np.ndarray
    arm_end: np.ndarray

    @property
    def size(self) -> int:
        """Number of pieces."""
        return int(self.key.size)


@dataclass(frozen=True)
class CultureRegion:
    """A culture region's outline: the rectangle its bed lies in (not a mask level).

    Attributes
    ----------
    name : str
        The region's name ("" for the bed of a design with one region).
    outline : shapely.Polygon
        The rectangle, corners on the mask grid [m]: the footprint asked for, placed around
        the bed, or the bed's own extent where none was asked for.
    footprint : tuple of float
        Its size along the flow (x) and across it (y) [m].
    bed_extent : tuple of float
        The size of the bed as drawn (every bed channel's outline, folds included), along
        and across [m].
    asked : bool
        True when the design gave the footprint.
    """

    name: str
    outline: shapely.Polygon
    footprint: tuple[float, float]
    bed_extent: tuple[float, float]
    asked: bool = True


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
    pieces : Pieces or None
        The junctions and port steps of the drawing (see :class:`Pieces`); the network counts
        each once by its equivalent lengths (:mod:`chipflow.layout.extract`).
    notes : tuple of str
        How the drawing was decided (e.g. the order of the splits of a tree), for the
        sizing notes.
    culture_regions : tuple of CultureRegion
        The outlines of the culture regions (a design's footprint, or each of its
        ``[[regions]]``); not mask levels, written on a layer of their own.
    chambers : tuple of DrawnChamber
        The chambers, each a piece of its own (its network is appended after the channels).
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
    pieces: Pieces | None = None
    notes: tuple[str, ...] = ()
    culture_regions: tuple[CultureRegion, ...] = ()
    chambers: tuple[DrawnChamber, ...] = ()
