"""Centreline traces: straight runs and circular arcs from a start point, and the exact
outline of a channel of given width around them."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Trace", "trace", "offset_ring", "split_trace", "reversed_pieces", "Piece"]

#: One piece of a centreline: ``("L", length)`` or ``("A", radius, signed angle)`` [m, rad]
#: (a positive angle turns left).
Piece = tuple


@dataclass(frozen=True)
class Trace:
    """A centreline starting at (0, 0): points, tangent heading at each point, exact length.

    Attributes
    ----------
    xy : numpy.ndarray
        (m, 2) points [m]; arcs are chords whose sagitta is at most the tolerance given.
    heading : numpy.ndarray
        (m,) tangent direction at each point [rad].
    length : float
        Exact length, arcs as true circles [m].
    bends : int
        Number of arcs.
    heading0 : float
        Direction at the start [rad].
    pieces : tuple
        The pieces followed (see :data:`Piece`), zero-length ones left out.
    """

    xy: np.ndarray  # (m, 2)
    heading: np.ndarray  # (m,)
    length: float
    bends: int
    heading0: float = 0.0
    pieces: tuple = ()


def trace(heading0: float, pieces: list[tuple], tol: float) -> Trace:
    """Follow ``pieces`` (``("L", length)`` or ``("A", radius, signed angle)``, + = left)."""
    pts = [(0.0, 0.0)]
    hs = [heading0]
    x = y = 0.0
    h = heading0
    total = 0.0
    bends = 0
    kept = []
    for piece in pieces:
        if piece[0] == "L":
            length = piece[1]
            if length <= 0:
                continue
            x += length * math.cos(h)
            y += length * math.sin(h)
            pts.append((x, y))
            hs.append(h)
            total += length
        else:
            _, radius, angle = piece
            if angle == 0:
                continue
            bends += 1
            step = 2 * math.acos(max(1 - tol / radius, -1.0))
            nseg = max(2, math.ceil(abs(angle) / step))
            side = math.copysign(1.0, angle)
            cx = x - side * radius * math.sin(h)
            cy = y + side * radius * math.cos(h)
            for j in range(1, nseg + 1):
                hj = h + angle * j / nseg
                pts.append((cx + side * radius * math.sin(hj), cy - side * radius * math.cos(hj)))
                hs.append(hj)
            x, y = pts[-1]
            h = h + angle
            total += radius * abs(angle)
        kept.append(tuple(piece))
    return Trace(np.array(pts), np.array(hs), total, bends, heading0, tuple(kept))


def reversed_pieces(pieces: tuple) -> tuple:
    """The same centreline followed from its end: pieces in reverse order, arcs turning the
    other way.

    >>> reversed_pieces((("L", 1.0), ("A", 2.0, 0.5)))
    (('A', 2.0, -0.5), ('L', 1.0))
    """
    return tuple(p if p[0] == "L" else ("A", p[1], -p[2]) for p in reversed(pieces))


def offset_ring(trace: Trace, width: float) -> np.ndarray:
    """Closed outline (2m, 2) of a channel of ``width`` around ``trace``: exact offsets."""
    normal = np.column_stack((-np.sin(trace.heading), np.cos(trace.heading)))
    left = trace.xy + 0.5 * width * normal
    right = trace.xy - 0.5 * width * normal
    return np.concatenate((left, right[::-1]))


def split_trace(trace: Trace, cut: float) -> tuple[Trace, Trace]:
    """``trace`` cut ``cut`` [m] before its end, inside its last straight run.

    Both parts share the very same cut point, so their outlines share two exact vertices.
    """
    h = float(trace.heading[-1])
    point = trace.xy[-1] - (cut * math.cos(h), cut * math.sin(h))
    head_xy = np.concatenate((trace.xy[:-1], point[None]))
    tail_xy = np.stack((point, trace.xy[-1]))
    head = Trace(head_xy, trace.heading, trace.length - cut, trace.bends, trace.heading0)
    return head, Trace(tail_xy, trace.heading[-2:], cut, 0, h)
