"""Centreline traces: straight runs and circular arcs from a start point, and the exact
outline of a channel of given width around them."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Trace", "trace", "offset_ring", "split_trace"]


@dataclass(frozen=True)
class Trace:
    """A centreline starting at (0, 0): points, tangent heading at each point, exact length."""

    xy: np.ndarray  # (m, 2)
    heading: np.ndarray  # (m,)
    length: float
    bends: int


def trace(heading0: float, pieces: list[tuple], tol: float) -> Trace:
    """Follow ``pieces`` (``("L", length)`` or ``("A", radius, signed angle)``, + = left)."""
    pts = [(0.0, 0.0)]
    hs = [heading0]
    x = y = 0.0
    h = heading0
    total = 0.0
    bends = 0
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
    return Trace(np.array(pts), np.array(hs), total, bends)


def offset_ring(trace: Trace, width: float) -> np.ndarray:
    """Closed outline (2m, 2) of a channel of ``width`` around ``trace``: exact offsets."""
    normal = np.column_stack((-np.sin(trace.heading), np.cos(trace.heading)))
    left = trace.xy + 0.5 * width * normal
    right = trace.xy - 0.5 * width * normal
    return np.concatenate((left, right[::-1]))


def split_trace(trace: Trace, cut: float) -> tuple[Trace, Trace]:
    """``trace`` cut ``cut`` [m] before its end, inside its last straight run along +x.

    Both parts share the very same cut point, so their outlines share two exact vertices.
    """
    point = trace.xy[-1] - (cut, 0.0)
    head_xy = np.concatenate((trace.xy[:-1], point[None]))
    tail_xy = np.stack((point, trace.xy[-1]))
    head = Trace(head_xy, trace.heading, trace.length - cut, trace.bends)
    return head, Trace(tail_xy, trace.heading[-2:], cut, 0)
