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
_SNAP = 1e-7  # coordinates are snapped to this fraction of the chip's size


def _is_area(geom: shapely.Geometry) -> bool:
    return isinstance(geom, shapely.Polygon | shapely.MultiPolygon)


def _polygons(geom: shapely.Geometry) -> list[shapely.Polygon]:
    parts = shapely.get_parts(geom)
    return [p for p in parts if isinstance(p, shapely.Polygon) and not p.is_empty]


def _scale(regions: list[FieldRegion]) -> float:
    x0, y0, x1, y1 = shapely.union_all([r.polygon for r in regions]).bounds
    return float(np.hypot(x1 - x0, y1 - y0))


def domain_of(
    regions: list[FieldRegion], ports: list[FieldPort], scale: float | None = None
) -> tuple[shapely.Geometry, list[tuple[shapely.Geometry, float]]]:
    """The meshed domain and its pieces of one depth.

    ``scale`` [m] sets the snapping grid and the slivers' size (by default the regions'
    diagonal; a piece of a chip takes the chip's, so that it is snapped as the chip is).

    Returns
    -------
    domain : shapely geometry
        Union of the regions less the port holes, on a grid of a ten-millionth of the chip's
        size (1 nm on a 1 cm chip), without slivers thinner than a millionth of it [m].
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
    scale = _scale(regions) if scale is None else scale
    grid = _SNAP * scale
    snap = lambda g: shapely.set_precision(g, grid)  # noqa: E731
    holes = [snap(p.boundary) for p in ports if _is_area(p.boundary)]
    cut = shapely.union_all(holes) if holes else shapely.Polygon()
    whole = shapely.union_all([snap(r.polygon) for r in regions]).difference(cut)
    # drop slivers (e.g. what is left between a drawn pad and a punched hole)
    parts = [p for p in _polygons(whole) if p.area > 1e-6 * scale * p.length]
    domain = shapely.union_all(parts) if parts else shapely.Polygon()
    if domain.is_empty:
        raise FieldError("the channels vanish once the port holes are cut out")
    depths = sorted({r.depth for r in regions}, reverse=True)
    thin = 0.01 * min(depths)  # thinner than this: an overlay sliver, not a channel
    kept, slivers = [], []
    taken = shapely.Polygon()
    for depth in depths:
        same = shapely.union_all([snap(r.polygon) for r in regions if r.depth == depth])
        piece = shapely.intersection(domain, same.difference(taken), grid_size=grid)
        taken = shapely.union(taken, same)
        parts = np.array(_polygons(piece), dtype=object)
        ok = shapely.area(parts) >= thin * shapely.length(parts) if len(parts) else parts
        kept.append([depth, list(parts[ok])])
        slivers += list(parts[~ok])
    # a sliver joins the deepest piece it touches; one touching none leaves the domain
    slivers = np.array(slivers, dtype=object)
    for entry in kept:
        if not len(slivers):
            break
        mine = shapely.intersects(slivers, shapely.union_all(entry[1])) if entry[1] else None
        if mine is not None and mine.any():
            entry[1] += list(slivers[mine])
            slivers = slivers[~mine]
    if len(slivers):
        domain = domain.difference(shapely.union_all(slivers))
    pieces = [(shapely.union_all(parts), d) for d, parts in kept if parts]
    return domain, pieces


def _ring_edges(polygons: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end points of every edge of every ring of ``polygons``, in ring order."""
    rings = shapely.get_rings(polygons)
    xy, which = shapely.get_coordinates(rings, return_index=True)
    same = which[1:] == which[:-1]
    return xy[:-1][same], xy[1:][same]


def _inner_points(polygons: np.ndarray) -> np.ndarray:
    """A point inside each hole of ``polygons`` (n, 2)."""
    rings, owner = shapely.get_rings(polygons, return_index=True)
    first = np.r_[True, owner[1:] != owner[:-1]]  # each polygon's exterior comes first
    holes = shapely.polygons(rings[~first])
    return shapely.get_coordinates(shapely.point_on_surface(holes))


def _ring_samples(domain: shapely.Geometry, spacing) -> tuple[np.ndarray, ...]:
    """Midpoints, inward normals and edge ids of the outline split to ``spacing``."""
    oriented = shapely.orient_polygons(domain, exterior_cw=False)
    a, b = _ring_edges(np.array(_polygons(oriented), dtype=object))
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


def local_width(domain: shapely.Geometry, across: float, cap: float, pieces=None, openings=None):
    """Wall samples ``(points, widths, sizes)`` of the domain's outline [m].

    Each sample's width is the distance to the nearest facing wall sample (``inf`` if none
    among its neighbours). Outline on ``openings`` (lines, e.g. a channel cut across) is no
    wall: it has no samples, so the channel's width there is that between its side walls.
    The target triangle size is ``width / across``, and at most ``2 depth / across`` where
    ``pieces`` (geometry, depth) are given: the side-wall boundary layer of the
    depth-averaged flow is about a third of the depth thick. The sampling is refined three
    times to the target size.
    """
    from scipy.spatial import cKDTree

    spacing = cap
    for _ in range(4):
        pts, nrm, a, b = _ring_samples(domain, spacing)
        if openings is not None:
            wall = ~shapely.dwithin(openings, shapely.points(pts), 1e-6 * cap)
            pts, nrm = pts[wall], nrm[wall]
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
    open_lines: bool = False,
    scale: float | None = None,
) -> FieldMesh:
    """Mesh the regions less the port holes.

    Parameters
    ----------
    regions : list of FieldRegion
    ports : list of FieldPort
    mesh_size : float, optional
        Largest triangle edge [m]; by default twice the largest channel width over
        ``across``.
    across : float
        Triangle edges across a channel's width [-] (4 by default; tests refine it); triangle
        edges are also at most ``2 depth / across`` long.
    open_lines : bool
        Take the ports that are lines (channels cut across) as no wall when the local channel
        width is measured: a piece of a chip cut from its neighbours then has the widths the
        whole chip has there (:mod:`chipflow.field.compose`).
    scale : float, optional
        Size [m] that sets the snapping grid, the tolerances and the first wall sampling
        (by default the regions' diagonal; a piece of a chip is meshed at the chip's).

    Returns
    -------
    FieldMesh
    """
    import triangle as tr
    from scipy.spatial import cKDTree

    domain, pieces = domain_of(regions, ports, scale)
    scale = _scale(regions) if scale is None else scale
    cap = mesh_size if mesh_size is not None else scale / 20.0
    lines = [p.boundary for p in ports if not _is_area(p.boundary)]
    openings = shapely.union_all(lines) if open_lines and lines else None
    samples, width, size = local_width(domain, across, cap, pieces, openings)
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
    xy, which = shapely.get_coordinates(shapely.get_parts(noded), return_index=True)
    same = which[1:] == which[:-1]
    a, b = xy[:-1][same], xy[1:][same]
    length = np.hypot(*(b - a).T)
    a, b, length = a[length > 0], b[length > 0], length[length > 0]
    probes = np.concatenate([a, b, 0.5 * (a + b)])
    _, j = tree.query(probes, k=1)
    step = size[j].reshape(3, -1).min(axis=0)
    n = np.maximum(1, np.ceil(length / step - 1e-9).astype(int))
    # segment ends closer than a grid step (or a thousandth of the smallest triangle) are one
    # point: two outlines meeting a few nanometres apart would otherwise be refined down to
    # that gap (a sliver's own small width must not shrink the tolerance below the grid)
    vertices, segments = _split(a, b, n, grid, merge=max(grid, 1e-3 * float(size.min())))
    holes = _inner_points(np.array(_polygons(domain), dtype=object))
    depths = np.array([d for _, d in pieces])
    parts = [np.array(_polygons(piece), dtype=object) for piece, _ in pieces]  # one per depth
    inside = shapely.get_coordinates(shapely.point_on_surface(np.concatenate(parts)))
    label = np.repeat(np.arange(1, len(parts) + 1), [len(x) for x in parts])
    seeds = np.column_stack([inside, label.astype(float), np.zeros(len(label))])
    # triangle works in a unit frame (its tolerances are absolute)
    origin = vertices.min(axis=0)
    area_cap = np.sqrt(3.0) / 4.0 * (cap / scale) ** 2
    seeds[:, :2] = (seeds[:, :2] - origin) / scale
    data = {"vertices": (vertices - origin) / scale, "segments": segments, "regions": seeds}
    if len(holes):
        data["holes"] = (holes - origin) / scale
    out = tr.triangulate(data, f"pq30AQa{area_cap:.17g}")
    if "triangles" not in out:
        raise FieldError("the mask could not be meshed (crossing or overlapping outlines)")
    points, tris = out["vertices"] * scale + origin, out["triangles"]
    attr = np.rint(out["triangle_attributes"][:, 0]).astype(int)
    centroids = points[tris].mean(axis=1)
    loose = attr < 1  # in a sliver that joined no piece: the nearest labelled triangle's depth
    if loose.all():
        raise FieldError("no part of the domain got a depth while meshing")
    if loose.any():
        _, near = cKDTree(centroids[~loose]).query(centroids[loose], k=1)
        attr[loose] = attr[~loose][near]
    depth = depths[attr - 1]
    _, j = tree.query(centroids, k=1)
    tri_width = width[j]

    _check_separate(points, tris, domain)
    port_edges, wall_edges = _boundary_edges(points, tris, ports, grid * 1e3)
    mesh = FieldMesh(points, tris, depth, tri_width, port_edges, wall_edges)
    _check_ports(mesh, domain, ports, grid * 1e3)
    return mesh


def _check_separate(points: np.ndarray, tris: np.ndarray, domain: shapely.Geometry) -> None:
    """Refuse a mesh that joins outlines the domain keeps apart (outlines closer than the
    mesh resolves would otherwise pass as one channel)."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    nt, npts = len(tris), len(points)
    rows = np.repeat(np.arange(nt), 3)
    graph = coo_matrix((np.ones(rows.size), (rows, nt + tris.ravel())), shape=(nt + npts,) * 2)
    _, label = connected_components(graph, directed=False)
    pieces = np.unique(label[:nt]).size
    parts = _polygons(domain)
    if pieces < len(parts):
        gaps = shapely.distance(
            np.array(parts[:-1], dtype=object), shapely.union_all(parts[1:])
        ).min()
        raise FieldError(
            f"the mesh joins {len(parts)} separate channel outlines into {pieces}: they lie "
            f"{gaps * 1e6:.3g} um apart, closer than the mesh resolves; join them in the "
            "drawing or move them apart"
        )


def _split(a: np.ndarray, b: np.ndarray, n: np.ndarray, grid: float, merge: float = 0.0):
    """Vertices and segments of segments ``a -> b`` split into ``n`` equal pieces.

    Segment ends are shared (merged on the grid, and ends closer than ``merge`` [m] taken as
    the first of them); the inner points belong to one segment.
    """
    ends = np.concatenate([a, b])
    if merge > 0:
        from scipy.sparse import coo_matrix
        from scipy.sparse.csgraph import connected_components
        from scipy.spatial import cKDTree

        pairs = cKDTree(ends).query_pairs(merge, output_type="ndarray")
        if len(pairs):
            graph = coo_matrix(
                (np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(len(ends),) * 2
            )
            _, label = connected_components(graph, directed=False)
            first = np.full(label.max() + 1, len(ends))
            np.minimum.at(first, label, np.arange(len(ends)))
            ends = ends[first[label]]
            a, b = ends[: len(a)], ends[len(a) :]
    ends = np.round(ends / grid)
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
