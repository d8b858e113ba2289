"""Floor shear over a chosen region of a solved field (``chipflow analyse --region``)."""

from __future__ import annotations

from typing import Any

import numpy as np
import shapely

from chipflow.errors import FieldError
from chipflow.field.model import FieldSolution
from chipflow.field.shear import shear_stats

__all__ = ["region_shear"]


def region_shear(
    solution: FieldSolution,
    region: shapely.Geometry,
    window: tuple[float, float] | None = None,
) -> dict[str, Any]:
    """Area-weighted floor-shear statistics of the triangles whose centroid lies in ``region``.

    Parameters
    ----------
    solution : FieldSolution
    region : shapely geometry
        The region's polygons [m] (e.g. a chamber's floor, where the cells grow).
    window : (float, float), optional
        The cells' floor shear window [Pa].

    Returns
    -------
    dict
        ``area`` [m^2] (the channel floor inside the region), ``p05``, ``p50``, ``p95`` [Pa]
        and, with a window, ``below``, ``above`` and ``outside`` [1].

    Raises
    ------
    FieldError
        The region covers no part of the channel floor.
    """
    centroids = solution.mesh.centroids
    inside = shapely.contains_xy(region, centroids[:, 0], centroids[:, 1])
    if not np.any(inside):
        raise FieldError("the region covers no part of the channel floor")
    stats = shear_stats(solution.floor_shear[inside], solution.mesh.area[inside], window)
    out = {"area": stats.area, "p05": stats.p05, "p50": stats.p50, "p95": stats.p95}
    if window is not None:
        out.update(below=stats.below, above=stats.above, outside=stats.outside)
    return out
