"""Triangle mesh of a mask's channels, graded by the local channel width.

The domain is the union of the regions less the punched holes of the ports. Its outline is
sampled, and at each sample the local channel width is the distance to the nearest sample of a
facing wall (inward normals pointing at each other within 37 degrees). Boundary segments are
then split to ``width / across`` and the interior is meshed by quality Delaunay refinement
(``triangle``, minimum angle 30 degrees), which grades the triangles from the boundary inwards.
Region boundaries between depths are kept as mesh edges, so every triangle has one depth.

References
----------
.. [1] J. R. Shewchuk, "Triangle: engineering a 2D quality mesh generator and Delaunay
   triangulator", Applied Computational Geometry, LNCS 1148 (1996) 203-222.
"""

from __future__ import annotations

import numpy as np
import shapely

from chipflow.errors import FieldError
from chipflow.field.model import FieldMesh, FieldPort, FieldRegion

__all__ = ["build_mesh", "domain_of", "local_width"]

_FACING = 0.8  # cos(37 deg): two wall samples face each other across a channel
_NEIGHBOURS = 48
_SNAP = 1e-9  # coordinates are snapped to this fraction of the chip's size


def _is_area(geom: shapely.Geometry) -> bool:
    return isinstance(geom, shapely.Polygon | shapely.MultiPolygon)


def _polygons(geom: shapely.Geometry) -> list[shapely.Polygon]:
    parts = shapely.get_parts(geom)
    return [p for p in parts if isinstance(p, shapely.Polygon) and not p.is_empty]


def _scale(regions: list[FieldRegion]) -> float:
    x0, y0, x1, y1 = shapely.union_all([r.polygon for r in regions]).bounds
    return float(np.hypot(x1 - x0, y1 - y0))


def domain_of(
    regions: list[FieldRegion], ports: list[FieldPort]
) -> tuple[shapely.Geometry, list[tuple[shapely.Geometry, float]]]:
    """The meshed domain and its pieces of one depth.

    Returns
    -------
    domain : shapely geometry
        Union of the regions less the port holes, on a grid of a billionth of the chip's size,
        without slivers thinner than a millionth of it [m].
    pieces : list of (geometry, depth)
        Disjoint parts of the domain, one per depth, deepest winning where regions overlap.
    """
    if not regions:
        raise FieldError("no channel polygons to solve")
    for i, r in enumerate(regions):
        if not (np.isfinite(r.depth) and r.depth > 0):
            raise FieldError(f"region {i}: depth must be a positive length, got {r.depth!r} m")
        if r.polygon.is_empty or not r.polygon.is_valid:
            reason = shapely.is_valid_reason(r.polygon)
            raise FieldError(f"region {i}: the outline is not a valid polygon ({reason})")
    grid = _SNAP * _scale(regions)
    snap = lambda g: shapely.set_precision(g, grid)  # noqa: E731
    holes = [snap(p.boundary) for p in ports if _is_area(p.boundary)]
    cut = shapely.union_all(holes) if holes else shapely.Polygon()
    whole = shapely.union_all([snap(r.polygon) for r in regions]).difference(cut)
    # drop slivers (e.g. what is left between a drawn pad and a punched hole)
    parts = [p for p in _polygons(whole) if p.area > 1e3 * grid * p.length]
    domain = shapely.union_all(parts) if parts else shapely.Polygon()
    if domain.is_empty:
        raise FieldError("the channels vanish once the port holes are cut out")
    pieces = []
    taken = shapely.Polygon()
    for depth in sorted({r.depth for r in regions}, reverse=True):
        same = shapely.union_all([snap(r.polygon) for r in regions if r.depth == depth])
        piece = shapely.intersection(domain, same.difference(taken))
        taken = shapely.union(taken, same)
        piece = shapely.union_all(_polygons(piece))
        if not piece.is_empty:
            pieces.append((piece, depth))
    return domain, pieces


def _ring_samples(domain: shapely.Geometry, spacing) -> tuple[np.ndarray, ...]:
    """Midpoints, inward normals and edge ids of the outline split to ``spacing``."""
    oriented = shapely.orient_polygons(domain, exterior_cw=False)
    starts, ends = [], []
    for poly in _polygons(oriented):
        for ring in (poly.exterior, *poly.interiors):
            xy = np.asarray(ring.coords)
            starts.append(xy[:-1])
            ends.append(xy[1:])
    a, b = np.concatenate(starts), np.concatenate(ends)
    d = b - a
    length = np.hypot(d[:, 0], d[:, 1])
    keep = length > 0
    a, b, d, length = a[keep], b[keep], d[keep], length[keep]
    step = spacing(a, b) if callable(spacing) else np.full(length.size, spacing)
    n = np.maximum(1, np.ceil(length / step).astype(int))
    edge = np.repeat(np.arange(length.size), n)
    first = np.cumsum(n) - n
    t = (np.arange(edge.size) - first[edge] + 0.5) / n[edge]
    pts = a[edge] + t[:, None] * d[edge]
    normal = np.column_stack([-d[:, 1], d[:, 0]]) / length[:, None]
    return pts, normal[edge], a, b


def _depth_at(pieces, pts: np.ndarray, tol: float) -> np.ndarray:
    depth = np.zeros(len(pts))
    where = shapely.points(pts)
    for piece, d in pieces:
        shapely.prepare(piece)
        near = shapely.dwithin(piece, where, tol)
        depth = np.where(near, np.maximum(depth, d), depth)
    return depth


def local_width(domain: shapely.Geometry, across: float, cap: float, pieces=None):
    """Wall samples ``(points, widths, sizes)`` of the domain's outline [m].

    Each sample's width is the distance to the nearest facing wall sample (``inf`` if none
    among its neighbours). The target triangle size is ``width / across``, and at most
    ``2 depth / across`` where ``pieces`` (geometry, depth) are given: the side-wall boundary
    layer of the depth-averaged flow is about a third of the depth thick. The sampling is
    refined three times to the target size.
    """
    from scipy.spatial import cKDTree

    spacing = cap
    for _ in range(4):
        pts, nrm, a, b = _ring_samples(domain, spacing)
        tree = cKDTree(pts)
        k = min(_NEIGHBOURS, len(pts))
        dist, idx = tree.query(pts, k=k)
        d = pts[idx] - pts[:, None, :]
        ok = (np.einsum("ikc,ic->ik", d, nrm) > _FACING * dist) & (
            -np.einsum("ikc,ikc->ik", d, nrm[idx]) > _FACING * dist
        )
        width = np.where(ok, dist, np.inf).min(axis=1)
        size = np.minimum(width / across, cap)
        if pieces:
            depth = _depth_at(pieces, pts, 1e-3 * cap)
            size = np.where(depth > 0, np.minimum(size, 2.0 * depth / across), size)

        def spacing(a0, b0, tree=tree, size=size):  # noqa: B023 - bound by default arguments
            probes = np.concatenate([a0, b0, 0.5 * (a0 + b0)])
            _, j = tree.query(probes, k=1)
            s = size[j].reshape(3, -1)
            return s.min(axis=0)

    return pts, width, size


def build_mesh(
    regions: list[FieldRegion],
    ports: list[FieldPort],
    *,
    mesh_size: float | None = None,
    across: float = 4.0,
) -> FieldMesh:
    """Mesh the regions less the port holes.

    Parameters
    ----------
    regions : list of FieldRegion
    ports : list of FieldPort
    mesh_size : float, optional
        Largest triangle edge [m]; by default half the largest channel width.
    across : float
        Triangle edges across a channel's width [-] (4 by default; tests refine it); triangle
        edges are also at most ``2 depth / across`` long.

    Returns
    -------
    FieldMesh
    """
    import triangle as tr
    from scipy.spatial import cKDTree

    domain, pieces = domain_of(regions, ports)
    scale = _scale(regions)
    cap = mesh_size if mesh_size is not None else scale / 20.0
    samples, width, size = local_width(domain, across, cap, pieces)
    finite = np.isfinite(width)
    if mesh_size is None and finite.any():
        cap = min(cap, float(width[finite].max()) / across * 2.0)
        size = np.minimum(size, cap)
    tree = cKDTree(samples)

    # linework: every piece's outline and the port lines, noded
    lines = [shapely.boundary(p) for p, _ in pieces]
    grid = _SNAP * scale
    lines += [shapely.set_precision(p.boundary, grid) for p in ports if not _is_area(p.boundary)]
    noded = shapely.union_all([shapely.force_2d(x) for x in lines])
    segs = []
    for line in shapely.get_parts(noded):
        xy = np.asarray(line.coords)
        segs.append(np.stack([xy[:-1], xy[1:]], axis=1))
    seg = np.concatenate(segs)
    a, b = seg[:, 0], seg[:, 1]
    length = np.hypot(*(b - a).T)
    seg, a, b, length = seg[length > 0], a[length > 0], b[length > 0], length[length > 0]
    probes = np.concatenate([a, b, 0.5 * (a + b)])
    _, j = tree.query(probes, k=1)
    step = size[j].reshape(3, -1).min(axis=0)
    n = np.maximum(1, np.ceil(length / step - 1e-9).astype(int))
    vertices, segments = _split(a, b, n, grid)
    holes = []
    for poly in _polygons(domain):
        for ring in poly.interiors:
            holes.append(np.asarray(shapely.Polygon(ring).point_on_surface().coords)[0])
    depths = np.array([d for _, d in pieces])
    seeds = []
    for k, (piece, _) in enumerate(pieces):
        for part in _polygons(piece):
            xy = np.asarray(part.point_on_surface().coords)[0]
            seeds.append([xy[0], xy[1], float(k + 1), 0.0])
    # triangle works in a unit frame (its tolerances are absolute)
    origin = vertices.min(axis=0)
    area_cap = np.sqrt(3.0) / 4.0 * (cap / scale) ** 2
    seeds = np.array(seeds)
    seeds[:, :2] = (seeds[:, :2] - origin) / scale
    data = {"vertices": (vertices - origin) / scale, "segments": segments, "regions": seeds}
    if holes:
        data["holes"] = (np.array(holes) - origin) / scale
    out = tr.triangulate(data, f"pq30AQa{area_cap:.17g}")
    if "triangles" not in out:
        raise FieldError("the mask could not be meshed (crossing or overlapping outlines)")
    points, tris = out["vertices"] * scale + origin, out["triangles"]
    attr = np.rint(out["triangle_attributes"][:, 0]).astype(int)
    if np.any(attr < 1):
        raise FieldError("a part of the domain was left without a depth while meshing")
    depth = depths[attr - 1]
    centroids = points[tris].mean(axis=1)
    _, j = tree.query(centroids, k=1)
    tri_width = width[j]

    port_edges, wall_edges = _boundary_edges(points, tris, ports, grid * 1e3)
    mesh = FieldMesh(points, tris, depth, tri_width, port_edges, wall_edges)
    _check_ports(mesh, domain, ports, grid * 1e3)
    return mesh


def _split(a: np.ndarray, b: np.ndarray, n: np.ndarray, grid: float):
    """Vertices and segments of segments ``a -> b`` split into ``n`` equal pieces.

    Segment ends are shared (merged on the grid); the inner points belong to one segment.
    """
    ends = np.round(np.concatenate([a, b]) / grid)
    uniq, inv = np.unique(ends, axis=0, return_inverse=True)
    inv = inv.ravel()
    ia, ib = inv[: len(a)], inv[len(a) :]
    inner = n - 1
    seg_of = np.repeat(np.arange(len(a)), inner)
    first = np.cumsum(inner) - inner
    k = np.arange(seg_of.size) - first[seg_of] + 1
    t = (k / n[seg_of])[:, None]
    pts = a[seg_of] + t * (b - a)[seg_of]
    vertices = np.concatenate([uniq * grid, pts])
    inner_id = len(uniq) + np.arange(seg_of.size)
    # chain of each segment: a, inner..., b
    chain_start = np.cumsum(n + 1) - (n + 1)
    chain = np.empty(int((n + 1).sum()), dtype=np.int64)
    chain[chain_start] = ia
    chain[chain_start + n] = ib
    slot = chain_start[seg_of] + k
    chain[slot] = inner_id
    pair = np.ones(chain.size, bool)
    pair[chain_start + n] = False  # no pair from a segment's last point
    idx = np.nonzero(pair)[0]
    segments = np.column_stack([chain[idx], chain[idx + 1]])
    segments = segments[segments[:, 0] != segments[:, 1]]
    return vertices, np.unique(np.sort(segments, axis=1), axis=0)


def _boundary_edges(points, tris, ports, tol):
    e = np.sort(np.concatenate([tris[:, [0, 1]], tris[:, [1, 2]], tris[:, [2, 0]]]), axis=1)
    uniq, count = np.unique(e, axis=0, return_counts=True)
    edges = uniq[count == 1]
    mid = shapely.points(points[edges].mean(axis=1))
    elen = np.hypot(*(points[edges[:, 1]] - points[edges[:, 0]]).T)
    best = np.full(len(edges), -1)
    best_d = np.full(len(edges), np.inf)
    for i, port in enumerate(ports):
        line = port.boundary
        if _is_area(line):
            line = line.boundary
        d = shapely.distance(mid, line)
        hit = (d < np.maximum(1e-3 * elen, tol)) & (d < best_d)
        best[hit], best_d[hit] = i, d[hit]
    port_edges = {p.name: edges[best == i] for i, p in enumerate(ports)}
    return port_edges, edges[best < 0]


def _check_ports(mesh: FieldMesh, domain, ports, tol) -> None:
    for name, e in mesh.port_edges.items():
        if len(e) == 0:
            port = next(p for p in ports if p.name == name)
            x, y = np.asarray(port.boundary.centroid.coords)[0]
            raise FieldError(
                f"port {name!r} at ({x * 1e3:.4g}, {y * 1e3:.4g}) mm does not open onto any "
                "channel: place it on a channel end or inside a channel"
            )
    port_lines = shapely.union_all(
        [p.boundary.boundary if _is_area(p.boundary) else p.boundary for p in ports]
    )
    for part in _polygons(domain):
        if shapely.distance(part.boundary, port_lines) > max(tol, 1e-6 * np.sqrt(part.area)):
            x, y = np.asarray(part.point_on_surface().coords)[0]
            raise FieldError(
                f"channels around ({x * 1e3:.4g}, {y * 1e3:.4g}) mm are not connected to any "
                "port: join them to the network or remove them"
            )
