"""Mask merging: the channel fragments of one mask layer joined into valid polygons on the
grid, in linear time."""

from __future__ import annotations

import numpy as np
import shapely

__all__ = ["merge_layer", "snap_to_grid", "stitch"]


def snap_to_grid(geometry: shapely.Geometry, grid: float) -> shapely.Geometry:
    """Round every vertex to the mask grid, keeping the geometry valid.

    Rounding vertex by vertex is linear in the number of vertices; walls and arc chords are
    far longer than the grid, so it almost never spoils validity. Should it, the full
    snap-rounding of GEOS (much slower on layers with thousands of holes) takes over.
    """
    snapped = shapely.remove_repeated_points(
        shapely.set_precision(geometry, grid, mode="pointwise"), 0.0
    )
    if snapped.is_valid:
        return snapped
    snapped = shapely.set_precision(geometry, grid)
    return snapped if snapped.is_valid else shapely.make_valid(snapped)


def merge_layer(geoms: np.ndarray, hood: np.ndarray | None) -> shapely.Geometry:
    """Union of the fragments of one mask layer [m], in linear time.

    Fragments overlap only near the junction whose neighbourhood ``hood`` they join, and
    neighbourhoods meet only along the cuts across straight runs, where both sides share the
    same two vertices (see ``cut`` in :class:`chipflow.layout.sketch.ChannelGroup`). So each
    neighbourhood is merged on its own (a handful of small polygons), and the merged
    neighbourhoods, which then form a polygonal coverage, are joined by a coverage union, which
    only drops their shared edges. One big overlay of the whole layer is superlinear: the walls
    between bed channels make thousands of holes. Should the pieces not form a clean coverage
    (or ``hood`` is None, when a cut did not fit), the plain union of all fragments is taken
    instead.
    """
    geoms = np.asarray(geoms, dtype=object)
    keep = ~shapely.is_empty(geoms)
    geoms = geoms[keep]
    if hood is None or geoms.size == 0:
        return shapely.union_all(geoms)
    hood = hood[keep]
    order = np.argsort(hood, kind="stable")
    _, start, count = np.unique(hood[order], return_index=True, return_counts=True)
    table = np.full((start.size, int(count.max())), None, dtype=object)
    column = np.arange(order.size) - np.repeat(start, count)
    table[np.repeat(np.arange(start.size), count), column] = geoms[order]
    local = shapely.union_all(table, axis=1)
    merged = stitch(local)
    area = shapely.area(local).sum()
    if merged is not None and merged.is_valid and abs(merged.area - area) <= 1e-9 * area:
        return merged
    return shapely.union_all(geoms)


def stitch(local: np.ndarray) -> shapely.Geometry | None:
    """Join polygons that meet only along whole shared edges (a coverage) [m], in numpy.

    Every ring edge shared by two polygons (run once each way) is dropped, the other edges
    are chained into rings vertex to vertex, and each ring goes to the polygon of its
    connected group, as shell (the orientation of the input shells) or hole. Vertices that
    only served the shared edges and lie on a straight run are dropped too. None when the
    input is no such coverage (a vertex with two ways on).
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    local = local[~shapely.is_empty(local)]
    polys = shapely.get_parts(local)
    rings, ring_poly = shapely.get_rings(polys, return_index=True)
    xy, ring_of = shapely.get_coordinates(rings, return_index=True)
    # edges a -> b inside each closed ring
    last = np.r_[ring_of[1:] != ring_of[:-1], True]
    a_xy, b_xy = xy[:-1][~last[:-1]], xy[1:][~last[:-1]]
    edge_poly = ring_poly[ring_of[:-1][~last[:-1]]]
    ends = np.concatenate((a_xy, b_xy))
    # vertices compared exactly: a complex number sorts by x, then y
    vert, vid = np.unique(ends[:, 0] + 1j * ends[:, 1], return_inverse=True)
    vert, vid = np.column_stack((vert.real, vert.imag)), vid.ravel()
    a, b = vid[: a_xy.shape[0]], vid[a_xy.shape[0] :]
    nv = vert.shape[0]
    # shared edges: the same pair of vertices, once each way
    key = np.minimum(a, b).astype(np.int64) * nv + np.maximum(a, b)
    _, inv, cnt = np.unique(key, return_inverse=True, return_counts=True)
    shared = cnt[inv] == 2
    if np.any(cnt > 2):
        return None
    # polygons joined by shared edges form one output polygon
    sa = np.flatnonzero(shared)
    order = np.argsort(key[sa], kind="stable")
    pairs = sa[order].reshape(-1, 2)
    sb = edge_poly[pairs]
    n_poly = polys.size
    link = coo_matrix((np.ones(len(sb)), (sb[:, 0], sb[:, 1])), shape=(n_poly, n_poly))
    _, group = connected_components(link, directed=False)
    keep = ~shared
    a, b, e_group = a[keep], b[keep], group[edge_poly[keep]]
    succ = np.full(nv, -1)
    succ[a] = b
    if np.bincount(a, minlength=nv).max() > 1 or np.bincount(b, minlength=nv).max() > 1:
        return None
    grp_of_v = np.full(nv, -1)
    grp_of_v[a] = e_group
    # drop vertices that only served shared edges and lie on a straight run along x or y
    pred = np.full(nv, -1)
    pred[b] = a
    on_cut = np.zeros(nv, dtype=bool)
    on_cut[np.concatenate((vid[: a_xy.shape[0]][shared], vid[a_xy.shape[0] :][shared]))] = True
    used = succ >= 0
    flat = used & on_cut
    f = np.flatnonzero(flat)
    along = [(vert[pred[f], k] == vert[f, k]) & (vert[succ[f], k] == vert[f, k]) for k in (1, 0)]
    flat[f] = along[0] | along[1]
    # rings: cycles of succ; label them, start each at its smallest vertex, rank by doubling
    verts = np.flatnonzero(used)
    cyc = coo_matrix((np.ones(verts.size), (verts, succ[verts])), shape=(nv, nv))
    _, label = connected_components(cyc, directed=True, connection="strong")
    first = np.full(label.max() + 1, nv)
    np.minimum.at(first, label[verts], verts)
    nxt = succ.copy()
    nxt[pred[first[label[verts]]][np.isin(verts, first)]] = -1  # break each cycle before start
    tail = np.flatnonzero(used & (nxt < 0))
    nxt[tail] = tail
    rank = np.where(used, 1, 0)
    rank[tail] = 0
    while True:
        jump = nxt[nxt]
        if np.array_equal(jump, nxt):
            break
        rank = rank + np.where(used, rank[nxt], 0)
        nxt = jump
    sel = verts[~flat[verts]]
    sel = sel[np.lexsort((-rank[sel], label[sel]))]
    ring_label = label[sel]
    # orientation of each output ring; shells turn as the input shells do
    ring_ids, start, count = np.unique(ring_label, return_index=True, return_counts=True)
    if np.any(count < 3):
        return None
    x, y = vert[sel, 0], vert[sel, 1]
    nxt_i = np.arange(sel.size) + 1
    nxt_i[start + count - 1] = start
    area = np.add.reduceat(x * y[nxt_i] - x[nxt_i] * y, start) / 2
    ext = shapely.get_coordinates(shapely.get_exterior_ring(polys[0]))
    shell_sign = np.sign(np.sum(ext[:-1, 0] * ext[1:, 1] - ext[1:, 0] * ext[:-1, 1]))
    is_shell = np.sign(area) == shell_sign
    r_group = grp_of_v[sel[start]]
    shells_per_group = np.bincount(r_group[is_shell], minlength=group.max() + 1)
    if np.any(shells_per_group != 1):
        return None
    # polygons: shell first, then holes, ordered by the shell's first vertex
    shell_rank = np.full(group.max() + 1, 0)
    shell_rank[r_group[is_shell]] = np.argsort(np.argsort(sel[start][is_shell]))
    ring_order = np.lexsort((~is_shell, shell_rank[r_group]))
    ring_geoms = shapely.linearrings(
        np.column_stack((x, y)), indices=np.repeat(np.arange(ring_ids.size), count)
    )
    ring_geoms = ring_geoms[ring_order]
    out = shapely.polygons(ring_geoms, indices=shell_rank[r_group][ring_order])
    return out[0] if out.size == 1 else shapely.multipolygons(out)
