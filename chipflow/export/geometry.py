"""Mask geometry prepared for writing: on the grid, mirrored, inverted, holes resolved.

The exporters share this step so that the DXF and the GDSII file carry the same shapes. All
work happens in whole grid units (integers stored as floats), which keeps every vertex exactly
on the mask grid and makes the result independent of floating-point noise.

Holes (the walls between neighbouring bed channels are holes in the merged channel outline)
are resolved in one of two ways:

``"split"``
    Each polygon is cut by vertical lines through its holes into hole-free pieces that meet
    along the cut lines and never overlap. Every piece is a simple polygon.
``"keyhole"``
    Each hole is joined to the outline by a zero-width bridge, giving one re-entrant outline per
    connected shape (its edges touch along the bridges but never cross).

Examples
--------
>>> import shapely
>>> ring = shapely.Polygon([(0, 0), (10, 0), (10, 10), (0, 10)], [[(4, 4), (6, 4), (6, 6), (4, 6)]])
>>> pieces = resolve_holes(ring, "split")
>>> len(pieces), sum(abs(ring_area(p)) for p in pieces)
(2, 96.0)
>>> (keyhole,) = resolve_holes(ring, "keyhole")
>>> len(keyhole), ring_area(keyhole)
(10, 96.0)
"""

from __future__ import annotations

import math
import weakref
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
import shapely

from chipflow.errors import ExportError
from chipflow.layout.model import Layout

__all__ = [
    "HOLES",
    "POLARITIES",
    "PreparedLayer",
    "PreparedLayout",
    "grid_nanometres",
    "prepare_layout",
    "resolve_holes",
    "ring_area",
    "circle_ring",
]

HOLES = ("split", "keyhole")
POLARITIES = ("channels", "inverse")


@dataclass(frozen=True)
class PreparedLayer:
    """One mask level ready to write.

    Attributes
    ----------
    name : str
        The layout's layer name (see :func:`chipflow.layout.draw.layer_name`).
    depth : float
        Feature depth [m].
    rings : tuple of numpy.ndarray
        Closed outlines as (n, 2) arrays of whole grid units, counter-clockwise, without the
        closing vertex and without repeated consecutive vertices.
    area : float
        Mask area of this level after polarity, in grid units squared.
    """

    name: str
    depth: float
    rings: tuple[np.ndarray, ...]
    area: float


@dataclass(frozen=True)
class PreparedLayout:
    """The whole chip in grid units, ready for an exporter.

    Attributes
    ----------
    grid_nm : int
        Mask grid [nm].
    layers : tuple of PreparedLayer
    outline : numpy.ndarray
        Chip outline ring in grid units.
    ports : tuple of (str, numpy.ndarray)
        Port name and its circle ring in grid units (chord error at most one grid step).
    port_centres : numpy.ndarray
        (n_ports, 2) port centres in grid units (after mirroring).
    mirror : bool
    polarity : str
    regions : tuple of (str, numpy.ndarray)
        Culture region name and its outline ring in grid units (after mirroring); not mask
        levels (:attr:`chipflow.layout.model.Layout.culture_regions`).
    """

    grid_nm: int
    layers: tuple[PreparedLayer, ...]
    outline: np.ndarray
    ports: tuple[tuple[str, np.ndarray], ...]
    port_centres: np.ndarray
    mirror: bool
    polarity: str
    regions: tuple[tuple[str, np.ndarray], ...] = ()


def grid_nanometres(grid: float) -> int:
    """The mask grid as a whole number of nanometres.

    Parameters
    ----------
    grid : float
        Mask grid [m].

    Examples
    --------
    >>> grid_nanometres(1e-7)
    100
    """
    if not (math.isfinite(grid) and grid > 0):
        raise ExportError(f"mask grid must be a positive length, got {grid!r} m")
    nm = round(grid * 1e9)
    if nm < 1 or abs(nm - grid * 1e9) > 1e-6 * max(nm, 1):
        raise ExportError(
            f"mask grid {grid * 1e6:g} um is not a whole number of nanometres; "
            "use a grid such as 0.1 um or 1 um"
        )
    return nm


def ring_area(ring: np.ndarray) -> float:
    """Signed (shoelace) area of a ring without its closing vertex; positive when CCW."""
    x, y = ring[:, 0], ring[:, 1]
    x1, y1 = np.concatenate((x[1:], x[:1])), np.concatenate((y[1:], y[:1]))
    return float(0.5 * (np.dot(x, y1) - np.dot(y, x1)))


def circle_ring(cx: float, cy: float, radius: float) -> np.ndarray:
    """A circle as a grid-snapped polygon whose distance from the true circle is below 1 grid.

    The chord sagitta is kept at a quarter grid step, and snapping moves a vertex by at most
    0.71 grid steps, so every point of the outline lies within 0.96 grid steps of the circle.

    Parameters
    ----------
    cx, cy, radius : float
        Centre and radius in grid units.
    """
    if radius <= 1:
        n = 4
    else:
        n = max(8, math.ceil(math.pi / math.acos(1.0 - 0.25 / radius)))
    t = 2 * np.pi * np.arange(n) / n
    pts = np.rint(np.column_stack([cx + radius * np.cos(t), cy + radius * np.sin(t)]))
    return _clean_ring(pts)


def _clean_ring(coords: np.ndarray) -> np.ndarray:
    """Drop the closing vertex and repeated consecutive vertices."""
    pts = np.asarray(coords, dtype=float)
    if len(pts) > 1 and np.array_equal(pts[0], pts[-1]):
        pts = pts[:-1]
    keep = np.any(pts != np.concatenate((pts[-1:], pts[:-1])), axis=1)
    if not keep.any():
        keep[0] = True
    return pts[keep]


def _clean_rings(rings: np.ndarray) -> list[np.ndarray]:
    """:func:`_clean_ring` of many shapely rings at once (the same arrays, one numpy pass)."""
    xy, owner = shapely.get_coordinates(rings, return_index=True)
    count = np.bincount(owner, minlength=len(rings))
    end = np.cumsum(count)
    start = end - count
    closed = (count > 1) & np.all(xy[np.maximum(start, 0)] == xy[np.maximum(end - 1, 0)], axis=1)
    keep_vertex = np.ones(len(xy), dtype=bool)
    keep_vertex[(end - 1)[closed]] = False
    xy, owner = xy[keep_vertex], owner[keep_vertex]
    count = np.bincount(owner, minlength=len(rings))
    end = np.cumsum(count)
    start = end - count
    prev = np.arange(-1, len(xy) - 1)
    has = count > 0
    prev[start[has]] = end[has] - 1  # each ring's first vertex follows its last
    keep = np.any(xy != xy[prev], axis=1) if len(xy) else np.zeros(0, dtype=bool)
    kept = np.bincount(owner[keep], minlength=len(rings))
    keep[start[has & (kept == 0)]] = True
    cuts = np.cumsum(np.bincount(owner[keep], minlength=len(rings)))[:-1]
    return np.split(xy[keep], cuts)


def _canonical(ring: np.ndarray) -> np.ndarray:
    """Start the ring at its lowest-leftmost vertex (a stable order for files)."""
    start = np.lexsort((ring[:, 0], ring[:, 1]))[0]
    return np.concatenate((ring[start:], ring[:start]))


def _polygons(geom: shapely.Geometry) -> list[shapely.Polygon]:
    parts = shapely.get_parts(geom)
    polys = [p for p in parts if isinstance(p, shapely.Polygon) and not p.is_empty]
    out = []
    for p in polys:
        if p.area > 0:
            out.append(shapely.orient_polygons(p))
    return out


def _cut(poly: shapely.Polygon, axis: int, cuts: list[float]) -> list[shapely.Polygon]:
    """Intersect ``poly`` with the strips between cut lines across ``axis`` (0: x, 1: y)."""
    if not cuts:
        return [poly]
    minx, miny, maxx, maxy = poly.bounds
    lo, hi = (minx, maxx) if axis == 0 else (miny, maxy)
    edges = [lo - 1, *sorted(set(cuts)), hi + 1]
    pairs = zip(edges[:-1], edges[1:], strict=True)
    if axis == 0:
        boxes = [shapely.box(a, miny - 1, b, maxy + 1) for a, b in pairs]
    else:
        boxes = [shapely.box(minx - 1, a, maxx + 1, b) for a, b in pairs]
    out: list[shapely.Polygon] = []
    for geom in shapely.intersection(poly, np.array(boxes, dtype=object)):
        out.extend(_polygons(geom))
    return out


def _split_polygon(poly: shapely.Polygon) -> list[np.ndarray]:
    """Cut a polygon with holes into hole-free pieces.

    First choice: cut along two vertex-to-vertex bridges per hole (no new vertex, exact area).
    Fallback when such bridges cannot be found: strips between vertical lines through the
    middle of each hole (on the grid, strictly between its left and right ends), so no piece
    can enclose a hole; holes less than two grid steps wide are cut horizontally instead. Cut
    points on slanted edges are rounded to the grid, which may move the outline by up to one
    grid step there.
    """
    if not poly.interiors:
        return [_clean_ring(poly.exterior.coords)]
    exact = _split_by_bridges(poly)
    if exact is not None:
        return exact
    bounds = np.array([h.bounds for h in poly.interiors])
    wide = bounds[:, 2] - bounds[:, 0] >= 2
    xcuts = np.floor((bounds[wide, 0] + bounds[wide, 2]) / 2).tolist()
    pieces = _cut(poly, 0, xcuts)
    rest = []
    for piece in pieces:
        hb = np.array([h.bounds for h in piece.interiors]).reshape(-1, 4)
        mid = (hb[:, 1] + hb[:, 3]) / 2
        ycuts = np.where(hb[:, 3] - hb[:, 1] >= 2, np.floor(mid), mid).tolist()
        rest.extend(_cut(piece, 1, ycuts))
    rings = []
    for piece in rest:
        for part in _polygons(shapely.set_precision(piece, 1.0)):
            if part.interiors:
                raise ExportError(
                    "a hole smaller than one grid step could not be cut open near "
                    f"x={part.interiors[0].coords[0][0]:g}, y={part.interiors[0].coords[0][1]:g} "
                    "(grid units); check the layout for features below the mask grid"
                )
            rings.append(_clean_ring(part.exterior.coords))
    return rings


def _find_bridges(poly: shapely.Polygon, per_hole: int) -> list[tuple[int, list]] | None:
    """Zero-width bridges, vertex to vertex, joining each hole to the outline built so far.

    Holes are taken rightmost first; each gets ``per_hole`` bridges from distinct vertices of
    the hole to distinct vertices of the outline or of holes already joined, nearest first. A
    bridge runs through the inside of the shape, meets its boundary only at its two ends and
    meets no other bridge, so bridges add no vertex and never cross anything.

    Returns ``[(hole index, [(hole vertex index, target vertex), ...]), ...]`` or ``None`` when
    some hole cannot be joined.
    """
    shell, *holes = _clean_rings(shapely.get_rings(poly))
    shapely.prepare(poly)
    every = np.vstack([shell, *holes])
    uniq, counts = np.unique(every[:, 0] + 1j * every[:, 1], return_counts=True)
    # vertices where rings touch: never bridge ends
    used = {(p.real, p.imag) for p in uniq[counts > 1].tolist()}
    exact = bool(np.abs(every).max() < _EXACT_BELOW and np.all(every == np.rint(every)))
    edges = _Edges([shell, *holes]) if exact else None
    order = sorted(range(len(holes)), key=lambda i: (-holes[i][:, 0].max(), -holes[i][:, 1].max()))
    # the outline, then the holes in the order they are joined: each hole's candidate targets
    # are a prefix of this array
    targets = np.vstack([shell, *(holes[i] for i in order)])
    joined = len(shell)
    bridges = np.empty((len(holes) * per_hole, 4))  # x0 y0 x1 y1 of the bridges so far
    count = 0
    segments: list[shapely.LineString] = []  # the same, for the GEOS predicates
    result = []
    for i in order:
        hole = holes[i]
        cand = targets[:joined]
        found: list = []
        for hj, ci in _nearest_pairs(hole, cand, _MAX_TRIES):
            a, b = tuple(hole[hj].tolist()), tuple(cand[ci].tolist())
            if a in used or b in used:
                continue
            if exact:
                if not edges.open_segment_inside(a, b, poly):
                    continue
                if _meets_any(a, b, bridges[:count]):
                    continue
            else:
                seg = shapely.LineString([a, b])
                if not shapely.relate_pattern(seg, poly, "TFF**F***"):
                    continue
                if segments and shapely.intersects(seg, shapely.MultiLineString(segments)):
                    continue
                segments.append(seg)
            found.append((hj, cand[ci]))
            bridges[count] = (*a, *b)
            count += 1
            used.update((a, b))
            if len(found) == per_hole:
                break
        if len(found) < per_hole:
            return None
        joined += len(hole)
        result.append((i, found))
    return result


#: Below this size of grid coordinate, the orientation tests of :class:`_Edges` and
#: :func:`_meets_any` on whole numbers are exact in floating point (products of two
#: differences stay below 2**53); larger chips or off-grid coordinates use GEOS predicates.
_EXACT_BELOW = 2.0**25


class _Edges:
    """The edges of a polygon's rings, for exact segment tests in whole grid units."""

    def __init__(self, rings: list[np.ndarray]) -> None:
        start = np.vstack(rings)
        sizes = np.array([len(r) for r in rings])
        following = np.arange(1, len(start) + 1)
        following[np.cumsum(sizes) - 1] = np.cumsum(sizes) - sizes  # a ring's last -> its first
        end = start[following]
        self.x0, self.y0 = start[:, 0], start[:, 1]
        self.x1, self.y1 = end[:, 0], end[:, 1]
        self.xmin, self.xmax = np.minimum(self.x0, self.x1), np.maximum(self.x0, self.x1)
        self.ymin, self.ymax = np.minimum(self.y0, self.y1), np.maximum(self.y0, self.y1)

    def open_segment_inside(self, a: tuple, b: tuple, poly: shapely.Polygon) -> bool:
        """Whether the segment ``a``-``b`` without its ends lies in the inside of ``poly``.

        The DE-9IM pattern ``TFF**F***`` of the segment against the polygon: no point between
        ``a`` and ``b`` is on the boundary (touching, crossing or running along an edge), and
        the middle is inside. ``a`` and ``b`` are vertices of the polygon.
        """
        (ax, ay), (bx, by) = a, b
        near = np.flatnonzero(
            (self.xmax >= min(ax, bx))
            & (self.xmin <= max(ax, bx))
            & (self.ymax >= min(ay, by))
            & (self.ymin <= max(ay, by))
        )
        ends = zip(
            self.x0[near].tolist(),
            self.y0[near].tolist(),
            self.x1[near].tolist(),
            self.y1[near].tolist(),
            strict=True,
        )
        for cx, cy, dx, dy in ends:
            if _open_meets_closed(ax, ay, bx, by, cx, cy, dx, dy):
                return False
        return bool(shapely.contains_xy(poly, (ax + bx) / 2, (ay + by) / 2))


def _side(ux: float, uy: float, px: float, py: float) -> int:
    """The sign of the cross product u x p: which side of a line point p lies on."""
    cross = ux * py - uy * px
    return (cross > 0) - (cross < 0)


def _open_meets_closed(ax, ay, bx, by, cx, cy, dx, dy) -> bool:
    """Whether segment ab without its ends meets segment cd with its ends (exact for whole
    numbers below :data:`_EXACT_BELOW`)."""
    ux, uy = bx - ax, by - ay
    o_c = _side(ux, uy, cx - ax, cy - ay)
    o_d = _side(ux, uy, dx - ax, dy - ay)
    if o_c * o_d > 0:
        return False  # cd lies on one side of the line through a and b
    length2 = ux * ux + uy * uy
    t_c = (cx - ax) * ux + (cy - ay) * uy  # position along ab: 0 at a, length2 at b
    t_d = (dx - ax) * ux + (dy - ay) * uy
    if o_c == 0 and o_d == 0:  # collinear: do they share more than an end of ab?
        return max(t_c, t_d) > 0 and min(t_c, t_d) < length2
    if o_c == 0:
        return 0 < t_c < length2
    if o_d == 0:
        return 0 < t_d < length2
    vx, vy = dx - cx, dy - cy
    return _side(vx, vy, ax - cx, ay - cy) * _side(vx, vy, bx - cx, by - cy) < 0


def _closed_meets_closed(ax, ay, bx, by, px, py, qx, qy) -> bool:
    """Whether segments ab and pq (ends included) meet (exact as :func:`_open_meets_closed`)."""
    ux, uy = bx - ax, by - ay
    o_p = _side(ux, uy, px - ax, py - ay)
    o_q = _side(ux, uy, qx - ax, qy - ay)
    if o_p * o_q > 0:
        return False
    if o_p == 0 and o_q == 0:
        length2 = ux * ux + uy * uy
        t_p = (px - ax) * ux + (py - ay) * uy
        t_q = (qx - ax) * ux + (qy - ay) * uy
        return max(t_p, t_q) >= 0 and min(t_p, t_q) <= length2
    vx, vy = qx - px, qy - py
    return _side(vx, vy, ax - px, ay - py) * _side(vx, vy, bx - px, by - py) <= 0


def _meets_any(a: tuple, b: tuple, segments: np.ndarray) -> bool:
    """Whether the closed segment ``a``-``b`` meets any of ``segments`` ((n, 4): x0 y0 x1 y1)."""
    if not len(segments):
        return False
    (ax, ay), (bx, by) = a, b
    px, py, qx, qy = segments.T
    near = np.flatnonzero(
        (np.maximum(px, qx) >= min(ax, bx))
        & (np.minimum(px, qx) <= max(ax, bx))
        & (np.maximum(py, qy) >= min(ay, by))
        & (np.minimum(py, qy) <= max(ay, by))
    )
    return any(_closed_meets_closed(ax, ay, bx, by, *segments[k].tolist()) for k in near)


_MAX_TRIES = 5000
_FIRST = 8  # pairs sorted before the rest of a window (see _nearest_pairs)


def _nearest_pairs(a: np.ndarray, b: np.ndarray, count: int) -> Iterator[tuple[int, int]]:
    """The ``count`` closest pairs of points ``a[i]``, ``b[j]`` as ``(i, j)``, nearest first,
    ties in the order of ``i * len(b) + j`` (the order of a stable argsort of all squared
    distances).

    The pairs are found in growing windows: only points of ``b`` whose distance from the
    bounding box of ``a`` is within the window's radius are compared, so a search that ends
    after a few pairs costs far less than comparing every pair.

    Examples
    --------
    >>> a = np.array([[0.0, 0.0], [5.0, 0.0]])
    >>> b = np.array([[1.0, 0.0], [4.0, 0.0], [9.0, 9.0]])
    >>> list(_nearest_pairs(a, b, 3))
    [(0, 0), (1, 1), (0, 1)]
    """
    n = len(b)
    gap = np.maximum(np.maximum(a.min(axis=0) - b, b - a.max(axis=0)), 0.0)
    box_d2 = (gap * gap).sum(axis=1)  # no point of a is closer than this to b[j]
    reach = float(((b - a[0]) ** 2).sum(axis=1).min())  # some pair is at least this close
    done = -1.0  # pairs up to this squared distance were given out
    given = 0
    while given < count:
        near = np.flatnonzero(box_d2 <= reach)
        everything = near.size == n
        dx = a[:, None, 0] - b[None, near, 0]
        dy = a[:, None, 1] - b[None, near, 1]
        d2 = dx * dx + dy * dy
        ia, ib = np.nonzero((d2 > done) & (everything | (d2 <= reach)))
        dist = d2[ia, ib]
        flat = ia * n + near[ib]
        # the nearest few first (with every pair tied with the last of them), then the rest:
        # a search usually stops after a pair or two
        first = dist <= np.partition(dist, _FIRST - 1)[_FIRST - 1] if len(dist) > _FIRST else None
        parts = (np.ones(len(dist), dtype=bool),) if first is None else (first, ~first)
        for part in parts:
            pick = np.flatnonzero(part)
            for k in pick[np.lexsort((flat[pick], dist[pick]))][: count - given]:
                yield int(ia[k]), int(near[ib[k]])
                given += 1
            if given >= count:
                return
        if everything:
            return
        done, reach = reach, max(4.0 * reach, 1.0)


def _keyhole_polygon(poly: shapely.Polygon) -> np.ndarray:
    """Join every hole of ``poly`` to its outline by one zero-width bridge (see _find_bridges)."""
    shell, *holes = _clean_rings(shapely.get_rings(poly))
    if not holes:
        return shell
    bridges = _find_bridges(poly, 1)
    if bridges is None:
        x, y = poly.interiors[0].coords[0]
        raise ExportError(
            f"cannot join the holes near x={x:g}, y={y:g} (grid units) to their outline by "
            "keyhole bridges; write the mask with holes = 'split' instead"
        )
    ring = [tuple(p) for p in shell.tolist()]
    for i, [(hj, target)] in bridges:
        at = ring.index(tuple(target.tolist()))
        loop = [tuple(p) for p in np.concatenate((holes[i][hj:], holes[i][:hj])).tolist()]
        ring = ring[: at + 1] + loop + [loop[0]] + ring[at:]
    return np.array(ring, dtype=float)


def _split_by_bridges(poly: shapely.Polygon) -> list[np.ndarray] | None:
    """Cut along two bridges per hole: hole-free pieces with no new vertex (exact area)."""
    bridges = _find_bridges(poly, 2)
    if bridges is None:
        return None
    _, *holes = _clean_rings(shapely.get_rings(poly))
    ends = np.array(
        [(holes[i][hj], target) for i, found in bridges for hj, target in found], dtype=float
    )
    lines = shapely.union_all([*shapely.get_rings(poly), *shapely.linestrings(ends)])
    faces = shapely.get_parts(shapely.polygonize([lines]))
    area = shapely.area(faces)
    faces, area = faces[area > 0], area[area > 0]
    inside = shapely.contains(poly, shapely.point_on_surface(faces))
    faces, area = faces[inside], area[inside]
    if np.any(shapely.get_num_interior_rings(faces) > 0) or not math.isclose(
        sum(area.tolist()), poly.area, rel_tol=1e-12
    ):
        return None
    return _clean_rings(shapely.get_exterior_ring(shapely.orient_polygons(faces)))


def resolve_holes(geom: shapely.Geometry, holes: str) -> list[np.ndarray]:
    """Turn a (multi)polygon in grid units into closed hole-free outlines.

    Parameters
    ----------
    geom : shapely.Polygon or shapely.MultiPolygon
        Geometry in whole grid units.
    holes : {"split", "keyhole"}

    Returns
    -------
    list of numpy.ndarray
        Counter-clockwise rings without closing vertex, in a stable order.
    """
    if holes not in HOLES:
        raise ExportError(f"unknown hole handling {holes!r} (valid: {', '.join(HOLES)})")
    rings: list[np.ndarray] = []
    for poly in _polygons(geom):
        if holes == "split":
            rings.extend(_split_polygon(poly))
        else:
            rings.append(_keyhole_polygon(poly))
    rings = [_canonical(r) for r in rings if len(r) >= 3 and ring_area(r) > 0]
    rings.sort(key=lambda r: (r[0, 1], r[0, 0], len(r), r.tobytes()))
    return rings


def _to_grid(geom: shapely.Geometry, grid: float) -> shapely.Geometry:
    """``geom`` [m] in whole grid units.

    A layout drawn on the grid (every vertex within a millionth of a grid step of it) is
    rounded vertex by vertex, which keeps every ring as it is; the result is used when it is
    still a valid geometry. Otherwise the geometry is snapped with a valid-output precision
    reduction, which may merge, drop or reshape features smaller than one grid step.
    """
    scaled = shapely.transform(geom, lambda c: c / grid)
    coords = shapely.get_coordinates(scaled)
    if coords.size and np.abs(coords - np.rint(coords)).max() <= 1e-6:
        rounded = shapely.transform(scaled, np.rint)
        if shapely.is_valid(rounded):
            return rounded
    return shapely.set_precision(scaled, 1.0)


def prepare_layout(
    layout: Layout, *, polarity: str = "channels", mirror: bool = False, holes: str = "split"
) -> PreparedLayout:
    """Snap, mirror, invert and resolve holes for every mask level of a layout.

    Parameters
    ----------
    layout : Layout
        The drawn chip (coordinates [m]).
    polarity : {"channels", "inverse"}
        ``"channels"``: the written shapes are the channels. ``"inverse"``: the written shapes
        are everything inside the chip outline except the channels.
    mirror : bool
        Mirror left to right about the vertical centre line of the chip outline (the chip as seen
        from the chrome side of the mask).
    holes : {"split", "keyhole"}
        How islands inside a shape are written (see the module notes).

    Notes
    -----
    The result for the last few layouts is kept while the layout object lives, so that the
    DXF and GDSII writers of one build prepare the chip once. A layout is a frozen dataclass
    of immutable shapes, so the same object always prepares to the same result.
    """
    key = (id(layout), polarity, mirror, holes)
    hit = _PREPARED.get(key)
    if hit is not None and hit[0]() is layout:
        return hit[1]
    prepared = _prepare_layout(layout, polarity, mirror, holes)
    try:
        ref = weakref.ref(layout)
    except TypeError:  # pragma: no cover - a layout-like object without weak references
        return prepared
    while len(_PREPARED) >= _PREPARED_KEEP:
        del _PREPARED[next(iter(_PREPARED))]
    _PREPARED[key] = (ref, prepared)
    return prepared


_PREPARED: dict[tuple, tuple[weakref.ref, PreparedLayout]] = {}
_PREPARED_KEEP = 4


def _prepare_layout(layout: Layout, polarity: str, mirror: bool, holes: str) -> PreparedLayout:
    if polarity not in POLARITIES:
        raise ExportError(f"unknown polarity {polarity!r} (valid: {', '.join(POLARITIES)})")
    grid = layout.grid
    nm = grid_nanometres(grid)
    outline = _to_grid(layout.outline, grid)
    if outline.is_empty or outline.area <= 0:
        raise ExportError(f"design {layout.name!r}: the chip outline is empty")
    minx, _, maxx, _ = outline.bounds
    axis2 = minx + maxx

    def flip(g: shapely.Geometry) -> shapely.Geometry:
        if not mirror:
            return g
        return shapely.transform(g, lambda c: np.column_stack([axis2 - c[:, 0], c[:, 1]]))

    outline = flip(outline)
    layers = []
    for mask in layout.layers:
        geom = mask.geometry
        if not shapely.is_valid(geom):
            raise ExportError(
                f"design {layout.name!r}, mask level {mask.name!r}: the channel outline is not a "
                f"valid polygon ({shapely.is_valid_reason(geom)})"
            )
        geom = flip(_to_grid(geom, grid))
        if polarity == "inverse":
            geom = shapely.set_precision(shapely.difference(outline, geom), 1.0)
        rings = resolve_holes(geom, holes)
        layers.append(PreparedLayer(mask.name, mask.depth, tuple(rings), geom.area))
    outline_ring = _canonical(_clean_ring(shapely.orient_polygons(outline).exterior.coords))
    centres = np.array([[p.x, p.y] for p in layout.ports], dtype=float).reshape(-1, 2) / grid
    centres = np.rint(centres)
    if mirror:
        centres[:, 0] = axis2 - centres[:, 0]
    ports = tuple(
        (p.name, circle_ring(c[0], c[1], p.diameter / 2 / grid))
        for p, c in zip(layout.ports, centres, strict=True)
    )
    regions = tuple(
        (cr.name, _canonical(_clean_ring(
            shapely.orient_polygons(flip(_to_grid(cr.outline, grid))).exterior.coords
        )))
        for cr in layout.culture_regions
    )  # fmt: skip
    for array in (
        outline_ring,
        centres,
        *(ring for _, ring in ports),
        *(ring for _, ring in regions),
        *(ring for layer in layers for ring in layer.rings),
    ):
        array.flags.writeable = False  # shared by the writers of a build (see prepare_layout)
    return PreparedLayout(
        nm, tuple(layers), outline_ring, ports, centres, mirror, polarity, regions
    )
