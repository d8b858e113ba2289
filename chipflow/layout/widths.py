"""The widths the mask polygons give each channel, measured after drawing.

Every channel of a tree has a straight run along x (the trunk, the run into each junction,
the bed's runs). Across the middle of its longest such run, the channel's mask layer must be
filled from one wall to the other and empty just beyond: points at half the width less
``tolerance`` on either side of the centreline lie inside the layer, points at half the width
plus ``tolerance`` lie outside. That pins both walls to within ``tolerance`` of where the
solved width puts them, on the merged, grid-snapped polygons that the mask files are written
from. Point-in-polygon tests on a prepared layer keep it linear in the number of channels.
"""

from __future__ import annotations

import numpy as np
import shapely

from chipflow.errors import LayoutError
from chipflow.layout.model import DrawnChannels, MaskLayer

__all__ = ["straight_cuts", "mask_widths", "check_mask_widths"]


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
    xy, idx = shapely.get_coordinates(centreline, return_index=True)
    d = np.diff(xy, axis=0)
    seg_ch = idx[:-1]
    along_x = (idx[1:] == seg_ch) & (np.abs(d[:, 1]) <= 1e-12) & (np.abs(d[:, 0]) > 0)
    run = np.where(along_x, np.abs(d[:, 0]), 0.0)
    order = np.lexsort((run, seg_ch))
    last = np.r_[seg_ch[order][1:] != seg_ch[order][:-1], True]
    best = order[last]
    n = centreline.size
    mid = np.full((n, 2), np.nan)
    length = np.zeros(n)
    mid[seg_ch[best]] = xy[best] + d[best] / 2
    length[seg_ch[best]] = run[best]
    return mid, length


def mask_widths(
    channels: DrawnChannels, layers: tuple[MaskLayer, ...], tolerance: float
) -> np.ndarray:
    """Each channel's width on its mask layer [m]: its solved width where both walls lie within
    ``tolerance`` [m] of it across the middle of its longest run along x, NaN otherwise (a
    wall moved, or the channel has no such run).
    """
    mid, run = straight_cuts(channels.centreline)
    half = channels.width / 2
    ok = run > 0
    for li, layer in enumerate(layers):  # loop over mask layers, vectorised over channels
        sel = np.flatnonzero(ok & (channels.layer == li))
        if sel.size == 0:
            continue
        geom = layer.geometry
        shapely.prepare(geom)
        x, y, h = mid[sel, 0], mid[sel, 1], half[sel]
        inside = shapely.contains_xy(geom, x, y)
        for s in (1.0, -1.0):
            inside &= shapely.contains_xy(geom, x, y + s * (h - tolerance))
            inside &= ~shapely.contains_xy(geom, x, y + s * (h + tolerance))
        ok[sel] = inside
    return np.where(ok, channels.width, np.nan)


def check_mask_widths(
    channels: DrawnChannels, layers: tuple[MaskLayer, ...], tolerance: float
) -> np.ndarray:
    """:func:`mask_widths`, raising :class:`LayoutError` where a channel's mask width is not
    its solved width (a drawing fault: the network would not be the chip)."""
    widths = mask_widths(channels, layers, tolerance)
    bad = np.flatnonzero(np.isnan(widths))
    if bad.size:
        i = int(bad[0])
        raise LayoutError(
            f"{bad.size} channel(s) do not keep their width on the mask, e.g. "
            f"{channels.role[i]} generation {channels.generation[i]} #{channels.index[i]} "
            f"({channels.width[i] * 1e6:.4g} um): a wall moved by more than "
            f"{tolerance * 1e9:.3g} nm when the outlines were merged and put on the grid"
        )
    return widths
