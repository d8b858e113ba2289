"""A network with coordinates: what the drawing engine (:mod:`chipflow.layout.engine`) draws.

Both kinds of design reach the engine as a :class:`Sketch`: a tree design through its
generator (:mod:`chipflow.layout.tree`), an explicit network whose nodes carry ``at`` through
:mod:`chipflow.layout.routes`. A sketch holds

- the nodes with their positions, and the ports (punched holes) at some of them;
- the channels, in *groups* of one shape: a group has one width, depth, role and generation,
  a few centreline templates (straight runs and circular arcs from (0, 0), see
  :func:`chipflow.layout.trace.trace`) and, per member, the template it uses, where it starts
  and which nodes it joins. A tree level is one group (its channels are one template, moved
  and mirrored), so the engine works per group and template, vectorised over the members;
  an explicit network has one group per channel;
- optionally, for node classes (nodes whose junctions are alike), the piece the generator
  wants there (:class:`PieceSpec`); nodes without one get a general junction, solved as an
  N-port (:mod:`chipflow.layout.pieces`).

Extension points for later kinds of design: a group's ``region`` (the culture region its
channels belong to) and ``kind`` (what the element is; "channel" today) are carried into the
drawn channels (``DrawnChannels.region``, ``DrawnChannels.kind``); a new kind of piece is a
new key type with its solve in :func:`chipflow.layout.pieces.solve_piece` and a
:class:`PieceSpec` at the nodes where it sits.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from chipflow.layout.model import PortMark
from chipflow.layout.rules import Chip, LayoutRules
from chipflow.layout.trace import Trace

__all__ = ["ChannelGroup", "ChamberPlace", "PieceSpec", "Sketch", "IDENTITY"]

#: The identity map of a group's templates into the chip frame.
IDENTITY = ((1.0, 0.0), (0.0, 1.0))


@dataclass(frozen=True)
class ChannelGroup:
    """Channels of one shape family: one width, depth, role and generation.

    A member's centreline is its template moved by ``start`` and then mapped by ``matrix``
    and ``shift``: ``p = matrix @ (t + start) + shift`` for every template point ``t`` [m].

    Attributes
    ----------
    templates : tuple of Trace
        Centrelines starting at (0, 0) [m].
    width, depth : float
        [m]; the width a whole number of mask grid steps.
    role : str
        "distribution", "bed", "collection", "channel", ...
    generation : int
        Tree generation (-1: none).
    variant : numpy.ndarray of int
        (k,) the template of each member.
    start : numpy.ndarray
        (k, 2) where each member's template starts, before ``matrix`` and ``shift`` [m].
    node_a, node_b : numpy.ndarray of int
        (k,) the nodes each member joins (flow direction ``node_a`` -> ``node_b``).
    index : numpy.ndarray of int
        (k,) position of each member within its level.
    matrix : tuple
        2 x 2 linear map (rotation or mirror) applied after ``start``.
    shift : tuple
        Added after ``matrix`` [m].
    reverse : bool
        The member runs from its template's end (at ``node_a``) to its start (``node_b``).
    cut : float or None
        Where to cut the members for merging the mask layers: this far [m] before the
        template's end, inside its last straight run, which must lie along a grid axis in
        the chip frame. The part before the cut joins the neighbourhood of the node at the
        template's start, the rest the node at its end. None: uncut; the member then joins
        its two end nodes into one neighbourhood.
    names : tuple of str or None
        Channel names (explicit networks).
    region : str
        Culture region of the members ("" for shared channels).
    kind : str
        What the members are ("channel").
    """

    templates: tuple[Trace, ...]
    width: float
    depth: float
    role: str
    generation: int
    variant: np.ndarray
    start: np.ndarray
    node_a: np.ndarray
    node_b: np.ndarray
    index: np.ndarray
    matrix: tuple = IDENTITY
    shift: tuple = (0.0, 0.0)
    reverse: bool = False
    cut: float | None = None
    names: tuple[str, ...] | None = None
    region: str = ""
    kind: str = "channel"

    @property
    def size(self) -> int:
        """Number of members."""
        return int(self.variant.size)

    @property
    def mirrored(self) -> bool:
        """True when ``matrix`` reverses orientation (a mirror image)."""
        (a, b), (c, d) = self.matrix
        return a * d - b * c < 0


@dataclass(frozen=True)
class PieceSpec:
    """The piece a generator wants at every node of one class.

    Attributes
    ----------
    kind : str
        "fan" or "junction" (see :class:`~chipflow.layout.model.Pieces`).
    key : object
        The geometry key (:class:`~chipflow.layout.junctions.Junction` or
        :class:`~chipflow.layout.pieces.JunctionKey`).
    arms : tuple of (int, int, int)
        For each arm of the key: ``(group, variant, end)`` of the channel that is that arm at
        every node of the class (``variant`` -1: any of the group's templates; ``end`` 0: the
        channel's ``node_a``, 1: its ``node_b``).
    rotation : float
        The key's frame turned by this angle (after ``mirror``) is the chip frame [rad].
    mirror : bool
    """

    kind: str
    key: object
    arms: tuple[tuple[int, int, int], ...]
    rotation: float = 0.0
    mirror: bool = False


@dataclass(frozen=True)
class ChamberPlace:
    """A chamber where the generator puts it (see :mod:`chipflow.layout.chamber`).

    Attributes
    ----------
    name : str
    key : ChamberKey
        Its geometry with the channels meeting it, in its own frame.
    origin : tuple of float
        Where the key frame's origin (the chamber's corner) lies in the chip frame [m].
    turns : int
        Quarter turns counter-clockwise from the key frame to the chip frame.
    port_nodes : tuple of int
        The node of each port of the key (where its channel ends), in the key's order.
    role : str
        What its network links are called by ("chamber").
    region : str
        The culture region it belongs to ("" for none).
    """

    name: str
    key: object
    origin: tuple[float, float]
    turns: int
    port_nodes: tuple[int, ...]
    role: str = "chamber"
    region: str = ""


@dataclass(frozen=True)
class Sketch:
    """A network with coordinates, ready to draw.

    Attributes
    ----------
    name : str
    chip : Chip
    rules : LayoutRules
    node_xy : numpy.ndarray
        (n, 2) node positions [m] (a port's node: on the hole's rim for a tree, the hole's
        centre for an explicit network).
    node_names : tuple of str
    groups : tuple of ChannelGroup
        In channel order.
    ports : tuple of PortMark
        Punched holes; each is named after its node.
    node_class : numpy.ndarray of int or None
        (n,) class of every node whose junction the generator describes (-1: none); None: no
        node has one.
    pieces : tuple of PieceSpec or None
        Per class, the piece there (None entries: a general junction).
    warnings : tuple of str
        Soft misses of the generator (folds, grid snapping).
    notes : tuple of str
        How the generator decided (e.g. the order of a tree's splits).
    culture_regions : tuple of CultureRegion
        Outlines of culture regions (not mask levels), carried into the layout.
    chambers : tuple of ChamberPlace
        Chambers between some of the nodes; each of their port nodes ends one channel.
    """

    name: str
    chip: Chip
    rules: LayoutRules
    node_xy: np.ndarray
    node_names: tuple[str, ...]
    groups: tuple[ChannelGroup, ...]
    ports: tuple[PortMark, ...]
    node_class: np.ndarray | None = None
    pieces: tuple[PieceSpec | None, ...] | None = None
    warnings: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    culture_regions: tuple = ()
    chambers: tuple[ChamberPlace, ...] = ()
