"""The widths the mask polygons give each channel, measured after drawing.

A straight run along a grid axis keeps both its walls on the grid (the drawing puts its axis
where they fall on it), so rounding the outlines to the grid moves no wall. Across the middle
of each channel's longest such run (along x where it has one, else along y), the channel's
mask layer must be filled from one wall to the other and empty just beyond: points at half
the width less ``tolerance`` on either side of the centreline lie inside the layer, points at
half the width plus ``tolerance`` lie outside. That pins both walls to within ``tolerance`` of
where the solved width puts them, on the merged, grid-snapped polygons that the mask files are
written from. Point-in-polygon tests on a prepared layer keep it linear in the number of
channels.

A run at any other angle cannot keep its walls on the grid: rounding its corners to the grid
moves each wall by up to about half a grid step. Such runs are measured instead
(:func:`measure_across`), and the network counts them at the width they have on the mask
(see :attr:`chipflow.layout.model.DrawnChannels.hydraulic_length`).
"""

from __future__ import annotations

import numpy as np
import shapely

from chipflow.errors import LayoutError
from chipflow.layout.model import DrawnChannels, MaskLayer

__all__ = ["straight_cuts", "axis_cuts", "mask_widths", "check_mask_widths", "measure_across"]


def _longest(xy, idx, n, along, axis) -> tuple[np.ndarray, np.ndarray]:
    d = np.diff(xy, axis=0)
    seg_ch = idx[:-1]
    run = np.where(along, np.abs(d[:, axis]), 0.0)
    order = np.lexsort((run, seg_ch))
    last = np.r_[seg_ch[order][1:] != seg_ch[order][:-1], True]
    best = order[last]
    mid = np.full((n, 2), np.nan)
    length = np.zeros(n)
    mid[seg_ch[best]] = xy[best] + d[best] / 2
    length[seg_ch[best]] = run[best]
    return mid, length


def straight_cuts(centreline: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Middle of the longest run along x of each centreline [m], and that run's length [m].

    Parameters
    ----------
    centreline : numpy.ndarray of shapely.LineString
        Channel centrelines [m].

    Returns
    -------
    mid : numpy.ndarray
        (n, 2) cut points [m].
    run : numpy.ndarray
        (n,) length of the run cut [m]; 0 where a channel has no run along x.
    """
    mid, run, axis = axis_cuts(centreline)
    along_x = axis == 0
    return np.where(along_x[:, None], mid, np.nan), np.where(along_x, run, 0.0)


def axis_cuts(centreline: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Middle of each centreline's longest run along x (else along y) [m], its length [m] and
    its axis (0: x, 1: y, -1: the channel has no run along a grid axis)."""
    xy, idx = shapely.get_coordinates(centreline, return_index=True)
    d = np.diff(xy, axis=0)
    same = idx[1:] == idx[:-1]
    n = centreline.size
    along_x = same & (np.abs(d[:, 1]) <= 1e-12) & (np.abs(d[:, 0]) > 0)
    mid_x, run_x = _longest(xy, idx, n, along_x, 0)
    use_x = run_x > 0
    if use_x.all():  # every channel has a run along x (every tree channel does)
        return mid_x, run_x, np.zeros(n, dtype=int)
    along_y = same & (np.abs(d[:, 0]) <= 1e-12) & (np.abs(d[:, 1]) > 0)
    mid_y, run_y = _longest(xy, idx, n, along_y, 1)
    use_y = ~use_x & (run_y > 0)
    mid = np.where(use_x[:, None], mid_x, mid_y)
    run = np.where(use_x, run_x, run_y)
    axis = np.where(use_x, 0, np.where(use_y, 1, -1))
    return mid, run, axis


def mask_widths(
    channels: DrawnChannels, layers: tuple[MaskLayer, ...], tolerance: float
) -> np.ndarray:
    """Each channel's width on its mask layer [m]: its solved width where both walls lie within
    ``tolerance`` [m] of it across the middle of its longest axis-aligned run, NaN otherwise
    (a wall moved, or the channel has no such run).
    """
    mid, run, axis = axis_cuts(channels.centreline)
    half = channels.width / 2
    ok = run > 0
    for li, layer in enumerate(layers):  # loop over mask layers, vectorised over channels
        sel = np.flatnonzero(ok & (channels.layer == li))
        if sel.size == 0:
            continue
        geom = layer.geometry
        shapely.prepare(geom)
        x, y, h = mid[sel, 0], mid[sel, 1], half[sel]
        across_y = axis[sel] == 0  # a run along x is crossed along y
        inside = shapely.contains_xy(geom, x, y)
        for s in (1.0, -1.0):
            for reach, want in ((h - tolerance, True), (h + tolerance, False)):
                px = np.where(across_y, x, x + s * reach)
                py = np.where(across_y, y + s * reach, y)
                hit = shapely.contains_xy(geom, px, py)
                inside &= hit if want else ~hit
        ok[sel] = inside
    return np.where(ok, channels.width, np.nan)


def measure_across(
    layer: shapely.Geometry, mid: np.ndarray, normal: np.ndarray, reach: np.ndarray
) -> np.ndarray:
    """Width [m] of ``layer`` along the lines through ``mid`` (n, 2) in the direction
    ``normal`` (n, 2, unit), each ``reach`` [m] long either side: the length of the piece of
    each line inside the layer that holds its middle (NaN where the middle is outside)."""
    if mid.shape[0] == 0:
        return np.zeros(0)
    a, b = mid - normal * reach[:, None], mid + normal * reach[:, None]
    lines = shapely.linestrings(np.stack((a, b), axis=1))
    cut = shapely.intersection(lines, layer)
    parts, which = shapely.get_parts(cut, return_index=True)
    dist = shapely.distance(parts, shapely.points(mid[which]))
    length = shapely.length(parts)
    out = np.full(mid.shape[0], np.nan)
    hit = dist <= 1e-12
    out[which[hit]] = length[hit]
    return out


def check_mask_widths(
    channels: DrawnChannels, layers: tuple[MaskLayer, ...], tolerance: float
) -> np.ndarray:
    """:func:`mask_widths`, raising :class:`LayoutError` where a channel with an axis-aligned
    run does not keep its solved width on the mask (a drawing fault: the network would not be
    the chip); channels without one give NaN (they are measured, see :func:`measure_across`).
    """
    widths = mask_widths(channels, layers, tolerance)
    _, run, _ = axis_cuts(channels.centreline)
    bad = np.flatnonzero(np.isnan(widths) & (run > 0))
    if bad.size:
        i = int(bad[0])
        name = (
            channels.names[i]
            if channels.names is not None
            else f"{channels.role[i]} generation {channels.generation[i]} #{channels.index[i]}"
        )
        raise LayoutError(
            f"{bad.size} channel(s) do not keep their width on the mask, e.g. "
            f"{name} ({channels.width[i] * 1e6:.4g} um): a wall moved by more than "
            f"{tolerance * 1e9:.3g} nm when the outlines were merged and put on the grid"
        )
    return widths
