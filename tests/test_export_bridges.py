"""The exact segment tests used to find keyhole and split bridges, against GEOS (shapely)."""

from __future__ import annotations

import numpy as np
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st

from chipflow.export.geometry import (
    _clean_ring,
    _clean_rings,
    _closed_meets_closed,
    _Edges,
    _find_bridges,
)

SMALL = st.integers(-4, 4)  # a small grid gives many collinear, touching and shared points
POINT = st.tuples(SMALL, SMALL)
RECT = st.tuples(st.integers(-6, 5), st.integers(-6, 5), st.integers(1, 5), st.integers(1, 5))


@settings(max_examples=400, deadline=None)
@given(POINT, POINT, POINT, POINT)
def test_closed_segments_meet_as_geos_says(a, b, p, q):
    # reference: GEOS intersects of the two closed segments (a point counts as a segment)
    ref = shapely.intersects(shapely.LineString([a, b]), shapely.LineString([p, q]))
    if a == b or p == q:
        return
    assert _closed_meets_closed(*map(float, (*a, *b, *p, *q))) == ref


@settings(max_examples=150, deadline=None)
@given(st.lists(RECT, min_size=2, max_size=7), st.data())
def test_open_segment_inside_matches_the_de9im_pattern(rects, data):
    # reference: GEOS relate pattern TFF**F*** (the open segment runs inside the polygon)
    shape = shapely.union_all([shapely.box(x, y, x + w, y + h) for x, y, w, h in rects])
    frame = shapely.box(-8, -8, 12, 12)
    for poly in shapely.get_parts(shapely.difference(frame, shape)):  # frames with holes
        rings = _clean_rings(shapely.get_rings(poly))
        edges = _Edges(rings)
        vertices = np.vstack(rings)
        shapely.prepare(poly)
        for _ in range(12):
            i = data.draw(st.integers(0, len(vertices) - 1))
            j = data.draw(st.integers(0, len(vertices) - 1))
            a, b = tuple(vertices[i].tolist()), tuple(vertices[j].tolist())
            if a == b:
                continue
            ref = shapely.relate_pattern(shapely.LineString([a, b]), poly, "TFF**F***")
            assert edges.open_segment_inside(a, b, poly) == ref, (a, b, poly.wkt)


@settings(max_examples=60, deadline=None)
@given(st.lists(RECT, min_size=2, max_size=7))
def test_bridges_are_found_as_with_geos_predicates(rects):
    # the same bridges whether the exact tests or GEOS predicates check the candidates
    from chipflow.export import geometry

    shape = shapely.union_all([shapely.box(x, y, x + w, y + h) for x, y, w, h in rects])
    holes = shapely.difference(shapely.box(-8, -8, 12, 12), shape)
    for poly in shapely.get_parts(holes):
        for per_hole in (1, 2):
            fast = _find_bridges(poly, per_hole)
            saved = geometry._EXACT_BELOW
            geometry._EXACT_BELOW = 0.0  # every coordinate "too large": GEOS path
            try:
                slow = _find_bridges(poly, per_hole)
            finally:
                geometry._EXACT_BELOW = saved
            if slow is None:
                assert fast is None
                continue
            assert [(i, [(h, t.tolist()) for h, t in f]) for i, f in fast] == [
                (i, [(h, t.tolist()) for h, t in f]) for i, f in slow
            ]


def test_clean_rings_match_one_ring_at_a_time():
    poly = shapely.Polygon(
        [(0, 0), (10, 0), (10, 0), (10, 10), (0, 10)],
        [[(4, 4), (6, 4), (6, 6), (4, 6)], [(1, 1), (2, 1), (2, 2), (2, 2)]],
    )
    rings = shapely.get_rings(poly)
    together = _clean_rings(rings)
    alone = [_clean_ring(r.coords) for r in rings]
    assert len(together) == len(alone) == 3
    assert all(np.array_equal(x, y) for x, y in zip(together, alone, strict=True))
    assert len(together[0]) == 4 and len(together[2]) == 3  # repeated vertices dropped
