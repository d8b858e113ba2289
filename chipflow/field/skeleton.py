"""Channel table of a mask from its skeleton: straight-run pieces between junctions and ports.

The skeleton is the medial axis of the channel area, taken from the Voronoi diagram of
densely sampled outline points: the Voronoi edges lying wholly inside the area. Leaf spurs
shorter than twice the clearance (half-width) at their junction are the corner spurs of the
medial axis and are pruned; the rest is cut by the port holes and merged into branches
between nodes of degree other than two (junctions and ports). Each branch gets the floor
triangles nearest to it; its width is the area of its body (the piece away from its ends)
over the body's length, its flow the flux of the depth-averaged field across a cut at its
middle, and its 1D resistance the exact duct series [1]_ for comparison with the field's
pressure drop along it.

References
----------
.. [1] H. Bruus, *Theoretical Microfluidics*, Oxford University Press (2008), ch. 4.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import shapely

from chipflow.field.model import FieldSolution
from chipflow.physics import duct

__all__ = ["ChannelTable", "channel_table"]

#: Gauss-Legendre points across a branch's middle cut.
_CUT_POINTS = 64
#: Largest ratio of the widest to the narrowest clearance in a branch body.
_MAX_WIDTH_RATIO = 1.5


@dataclass(frozen=True)
class ChannelTable:
    """Channel branches of a mask's skeleton with their field and 1D values.

    Attributes
    ----------
    start, end : numpy.ndarray
        (n, 2) branch ends along the flow [m].
    length : numpy.ndarray
        Centreline length [m].
    width : numpy.ndarray
        Mean width of the branch body [m].
    depth : numpy.ndarray
        [m].
    flow : numpy.ndarray
        Flow across the branch's middle, start to end [m^3/s].
    pressure_drop : numpy.ndarray
        Field pressure at the start minus at the end [Pa].
    floor_shear : numpy.ndarray
        Area-weighted mean floor shear of the branch body [Pa].
    resistance_1d : numpy.ndarray
        Exact duct series resistance of width x depth x length [Pa s/m^3].
    reason : str or None
        Why no table could be extracted (then every array is empty).
    """

    start: np.ndarray
    end: np.ndarray
    length: np.ndarray
    width: np.ndarray
    depth: np.ndarray
    flow: np.ndarray
    pressure_drop: np.ndarray
    floor_shear: np.ndarray
    resistance_1d: np.ndarray
    reason: str | None = None

    @property
    def resistance(self) -> np.ndarray:
        """Field resistance ``pressure_drop / flow`` [Pa s/m^3]."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return self.pressure_drop / self.flow

    def to_list(self) -> list[dict[str, Any]]:
        """JSON-able SI rows: ``field_shear`` the body's mean floor shear, ``resistance`` the
        field's and ``network_resistance`` the 1D series'."""
        rows = zip(
            self.length,
            self.width,
            self.depth,
            self.flow,
            self.pressure_drop,
            self.floor_shear,
            self.resistance,
            self.resistance_1d,
            strict=True,
        )
        keys = (
            "length",
            "width",
            "depth",
            "flow",
            "pressure_drop",
            "field_shear",
            "resistance",
            "network_resistance",
        )
        return [{k: float(v) for k, v in zip(keys, row, strict=True)} for row in rows]


def _empty(reason: str) -> ChannelTable:
    z = np.zeros(0)
    return ChannelTable(z.reshape(0, 2), z.reshape(0, 2), z, z, z, z, z, z, z, reason)


def _ends(lines: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    first = shapely.get_coordinates(shapely.get_point(lines, 0))
    last = shapely.get_coordinates(shapely.get_point(lines, -1))
    return first, last


def _degrees(first: np.ndarray, last: np.ndarray, tol: float) -> tuple[np.ndarray, np.ndarray]:
    keys = np.round(np.vstack([first, last]) / tol).astype(np.int64)
    _, inverse, counts = np.unique(keys, axis=0, return_inverse=True, return_counts=True)
    deg = counts[inverse.ravel()]
    n = len(first)
    return deg[:n], deg[n:]


def _merge(lines: np.ndarray) -> np.ndarray:
    if len(lines) == 0:
        return lines
    merged = shapely.line_merge(shapely.multilinestrings(lines))
    parts = shapely.get_parts(merged)
    return parts[shapely.length(parts) > 0]


def _medial_axis(area: shapely.Geometry, spacing: float, tol: float) -> np.ndarray:
    """Pruned medial-axis branches of ``area``."""
    outline = shapely.segmentize(shapely.boundary(area), spacing)
    points = shapely.multipoints(np.unique(shapely.get_coordinates(outline), axis=0))
    edges = shapely.get_parts(shapely.voronoi_polygons(points, only_edges=True))
    shapely.prepare(area)
    edges = edges[shapely.contains_properly(area, edges)]
    edges = shapely.set_precision(edges, tol)  # Voronoi vertices meet within rounding
    edges = edges[shapely.length(edges) > 0]
    lines = _merge(edges)
    boundary = shapely.boundary(area)
    for _ in range(64):
        if len(lines) < 2:
            break
        first, last = _ends(lines)
        d0, d1 = _degrees(first, last, tol)
        leaf0, leaf1 = (d0 == 1) & (d1 >= 3), (d1 == 1) & (d0 >= 3)
        hub = np.where(leaf0[:, None], last, first)
        clearance = shapely.distance(shapely.points(hub), boundary)
        spur = (leaf0 | leaf1) & (shapely.length(lines) < 2 * clearance)
        if not spur.any():
            break
        lines = _merge(lines[~spur])
    return lines


def _interpolate_pressure(solution: FieldSolution, xy: np.ndarray) -> np.ndarray:
    from matplotlib.tri import LinearTriInterpolator, Triangulation

    mesh = solution.mesh
    tri = Triangulation(mesh.points[:, 0], mesh.points[:, 1], mesh.triangles)
    return np.ma.filled(LinearTriInterpolator(tri, solution.pressure)(xy[:, 0], xy[:, 1]), np.nan)


def _locate(lines: np.ndarray, xy: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The nearest branch of every point ``xy`` (n, 2) and the distance along it [m].

    Found on the branches' straight segments (a spatial index of segments, then one
    projection each), so the cost grows with the points and segments, not with their product
    as projecting onto whole long branches would (a serpentine is one long branch).
    """
    coords, which = shapely.get_coordinates(lines, return_index=True)
    same = which[1:] == which[:-1]
    a, b, seg_owner = coords[:-1][same], coords[1:][same], which[:-1][same]
    seg_len = np.hypot(*(b - a).T)
    start = np.r_[True, seg_owner[1:] != seg_owner[:-1]]
    cumulative = np.cumsum(seg_len) - seg_len
    first = np.maximum.accumulate(np.where(start, np.arange(seg_len.size), 0))
    offset = cumulative - cumulative[first]  # length of the branch before each segment
    segments = shapely.linestrings(np.stack([a, b], axis=1))
    points = shapely.points(xy)
    near = shapely.STRtree(segments).query_nearest(points, all_matches=False)
    nearest = np.zeros(len(xy), dtype=np.int64)
    nearest[near[0]] = near[1]
    d = b[nearest] - a[nearest]
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.einsum("ij,ij->i", xy - a[nearest], d) / np.einsum("ij,ij->i", d, d)
    t = np.clip(np.nan_to_num(t), 0.0, 1.0)
    return seg_owner[nearest], offset[nearest] + t * seg_len[nearest]


def channel_table(
    geometry: shapely.Geometry,
    solution: FieldSolution,
    holes: list[shapely.Geometry] | tuple[shapely.Geometry, ...] = (),
) -> ChannelTable:
    """Split the channel area of one depth into skeleton branches and tabulate their flow.

    Parameters
    ----------
    geometry : shapely geometry
        Drawn channel area [m], one depth.
    solution : FieldSolution
        The solved field on that area (port holes removed).
    holes : sequence of shapely geometry
        Port holes [m]; the skeleton is cut at their rims.

    Returns
    -------
    ChannelTable
        With ``reason`` set and no rows where no clean skeleton exists (a chamber whose
        width varies along the centreline, or no channel left between the ports).
    """
    from chipflow.field.solve import velocity_at

    mesh = solution.mesh
    depth = float(np.max(mesh.depth))
    if np.ptp(mesh.depth) > 1e-9 * depth:
        return _empty("no channel table: the mask has more than one depth")
    area = shapely.union_all(shapely.get_parts(geometry))
    finite = mesh.width[np.isfinite(mesh.width)]
    narrow = float(np.percentile(finite, 5)) if finite.size else float(np.sqrt(area.area))
    size = float(np.hypot(*np.subtract(area.bounds[2:], area.bounds[:2])))
    tol = 1e-7 * size
    lines = _medial_axis(area, narrow / 12, tol)
    if len(holes):
        cut = shapely.union_all(holes)
        lines = shapely.difference(lines, cut)
        lines = _merge(shapely.get_parts(lines[~shapely.is_empty(lines)]))
    if len(lines) == 0:
        return _empty("no channel table: no skeleton branch lies outside the port holes")

    length = shapely.length(lines)
    # floor triangles to their nearest branch, and their position along it
    owner, along = _locate(lines, mesh.centroids)
    boundary = shapely.boundary(area)
    middle = shapely.line_interpolate_point(lines, 0.5, normalized=True)
    half = shapely.distance(middle, boundary)
    margin = np.minimum(2 * half, length / 4)
    body = (along > margin[owner]) & (along < (length - margin)[owner])
    tri_area = mesh.area
    n = len(lines)
    body_area = np.bincount(owner, weights=tri_area * body, minlength=n)
    width = body_area / (length - 2 * margin)
    shear = np.bincount(owner, weights=tri_area * body * solution.floor_shear, minlength=n)
    shear = shear / np.where(body_area > 0, body_area, np.nan)

    # clearance along each body: a chamber shows as a widely varying half-width
    s = np.linspace(0.0, 1.0, 17)
    stations = margin[:, None] + s[None, :] * (length - 2 * margin)[:, None]
    probe = shapely.line_interpolate_point(lines[:, None], stations)
    clear = shapely.distance(probe, boundary)
    ratio = clear.max(axis=1) / clear.min(axis=1)
    if np.any(ratio > _MAX_WIDTH_RATIO) or np.any(body_area <= 0):
        return _empty(
            "no channel table: the channel width varies along the skeleton "
            f"(up to {float(np.nanmax(ratio)):.2g}x in one branch; a chamber?)"
        )

    # flux across a cut at each branch's middle, normal to the branch there
    mid_xy = shapely.get_coordinates(middle)
    ahead = shapely.get_coordinates(
        shapely.line_interpolate_point(lines, np.minimum(length / 2 + half / 4, length))
    )
    behind = shapely.get_coordinates(
        shapely.line_interpolate_point(lines, np.maximum(length / 2 - half / 4, 0.0))
    )
    tangent = ahead - behind
    tangent /= np.hypot(tangent[:, 0], tangent[:, 1])[:, None]
    normal = np.column_stack([-tangent[:, 1], tangent[:, 0]])
    reach = 3 * half[:, None]
    segments = shapely.linestrings(
        np.stack([mid_xy - reach * normal, mid_xy + reach * normal], axis=1)
    )
    across = shapely.intersection(segments, area)
    parts, index = shapely.get_parts(across, return_index=True)
    hit = shapely.distance(parts, shapely.points(mid_xy[index])) < tol * 10
    chord = np.empty(n, dtype=object)
    chord[index[hit]] = parts[hit]
    ends0, ends1 = _ends(chord)
    x, w = np.polynomial.legendre.leggauss(_CUT_POINTS)
    t = (x + 1) / 2
    pts = ends0[:, None, :] + t[None, :, None] * (ends1 - ends0)[:, None, :]
    u = velocity_at(solution, pts.reshape(-1, 2)).reshape(n, _CUT_POINTS, 2)
    span = ends1 - ends0
    cut_normal = np.column_stack([span[:, 1], -span[:, 0]])  # length-weighted normal
    sign = np.sign(np.einsum("ij,ij->i", cut_normal, tangent))
    flux = np.einsum("ikj,ij->ik", np.nan_to_num(u), cut_normal) @ (w / 2)
    flow = depth * sign * flux

    first, last = _ends(lines)
    nudge = 1e-2 * half[:, None]
    inward0 = shapely.get_coordinates(shapely.line_interpolate_point(lines, nudge[:, 0]))
    inward1 = shapely.get_coordinates(shapely.line_interpolate_point(lines, length - nudge[:, 0]))
    p = _interpolate_pressure(solution, np.vstack([inward0, inward1]))
    drop = p[:n] - p[n:]
    if not (np.all(np.isfinite(drop)) and np.all(np.isfinite(flow))):
        return _empty("no channel table: a branch end or middle cut falls outside the mesh")
    forward = flow >= 0
    start = np.where(forward[:, None], first, last)
    end = np.where(forward[:, None], last, first)
    drop = np.where(forward, drop, -drop)
    flow = np.abs(flow)
    depths = np.full(n, depth)
    order = np.lexsort((start[:, 1], start[:, 0]))
    return ChannelTable(
        start=start[order],
        end=end[order],
        length=length[order],
        width=width[order],
        depth=depths,
        flow=flow[order],
        pressure_drop=drop[order],
        floor_shear=shear[order],
        resistance_1d=np.asarray(
            duct.resistance(width[order], depths, length[order], solution.viscosity)
        ).reshape(n),
    )
