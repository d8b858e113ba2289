"""DXF mask file: read back with ezdxf and, independently, straight from the group codes."""

from __future__ import annotations

import dataclasses

import ezdxf
import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from test_export_helpers import comb_layout

from chipflow.errors import ExportError, SpecError
from chipflow.export.dxf import NOTES_LAYER, OUTLINE_LAYER, PORT_LAYER, DxfOptions, write_dxf
from chipflow.export.geometry import circle_ring, resolve_holes, ring_area

LAYOUT = comb_layout()
GRID_UM = LAYOUT.grid * 1e6
MASK_NAMES = ("MASK1_DEPTH_50UM", "MASK2_DEPTH_120UM")


def parse_group_codes(path) -> list[tuple[str, str, list[tuple[float, float]]]]:
    """(entity type, layer, closed-flag, vertices) of every polyline, from the raw group codes.

    Written from the DXF reference (Autodesk DXF Reference, ENTITIES section): a file is pairs
    of lines, a group code then its value. Code 0 starts an entity, 8 is the layer, 70 the
    polyline flags (bit 1 = closed), 10/20 the x/y of a vertex; an R12 POLYLINE is followed by
    VERTEX entities up to SEQEND, an LWPOLYLINE lists its vertices itself (90 = count).
    """
    lines = path.read_text(encoding="ascii").splitlines()
    pairs = [(int(lines[i].strip()), lines[i + 1].strip()) for i in range(0, len(lines) - 1, 2)]
    start = pairs.index((2, "ENTITIES")) + 1
    out = []
    current = None
    in_vertex = False
    for code, value in pairs[start:]:
        if code == 0:
            if value == "LWPOLYLINE" or value == "POLYLINE":
                current = {"type": value, "layer": None, "flags": 0, "xy": [], "count": None}
                out.append(current)
                in_vertex = False
            elif value == "VERTEX":
                in_vertex = True
                current["xy"].append([None, None])
            elif value == "SEQEND":
                current, in_vertex = None, False
            elif value == "ENDSEC":
                break
            else:
                current, in_vertex = None, False
            continue
        if current is None:
            continue
        if current["type"] == "LWPOLYLINE":
            if code == 8:
                current["layer"] = value
            elif code == 70:
                current["flags"] = int(value)
            elif code == 90:
                current["count"] = int(value)
            elif code == 10:
                current["xy"].append([float(value), None])
            elif code == 20:
                current["xy"][-1][1] = float(value)
        else:
            if in_vertex:
                if code == 10:
                    current["xy"][-1][0] = float(value)
                elif code == 20:
                    current["xy"][-1][1] = float(value)
            elif code == 8:
                current["layer"] = value
            elif code == 70:
                current["flags"] = int(value)
    for entity in out:
        if entity["count"] is not None:
            assert entity["count"] == len(entity["xy"])
    return [(e["type"], e["layer"], e["flags"], [tuple(p) for p in e["xy"]]) for e in out]


def ezdxf_polylines(doc) -> list[tuple[str, list[tuple[float, float]], bool]]:
    out = []
    for e in doc.modelspace():
        if e.dxftype() == "LWPOLYLINE":
            out.append((e.dxf.layer, [tuple(p) for p in e.get_points("xy")], e.closed))
        elif e.dxftype() == "POLYLINE":
            out.append((e.dxf.layer, [tuple(v.dxf.location)[:2] for v in e.vertices], e.is_closed))
    return out


def mask_polygons(doc, layer: str, scale: float = 1e-6) -> list[shapely.Polygon]:
    return [
        shapely.Polygon(np.array(xy) * scale)
        for name, xy, _ in ezdxf_polylines(doc)
        if name == layer
    ]


@pytest.fixture(scope="module", params=["R2000", "R12"])
def written(request, tmp_path_factory):
    path = tmp_path_factory.mktemp("dxf") / f"chip_{request.param}.dxf"
    options = DxfOptions(version=request.param, design_hash="sha256:0123456789abcdef")
    write_dxf(LAYOUT, path, options)
    return path, ezdxf.readfile(path), options


def test_audit_has_no_errors(written):
    _, doc, _ = written
    auditor = doc.audit()
    assert not auditor.has_errors, [str(e) for e in auditor.errors]


def test_layers_are_named_after_depth_and_nothing_on_layer_0(written):
    _, doc, _ = written
    names = {layer.dxf.name for layer in doc.layers}
    assert set(MASK_NAMES) | {OUTLINE_LAYER, PORT_LAYER, NOTES_LAYER} <= names
    used = {e.dxf.layer for e in doc.modelspace()}
    assert "0" not in used
    assert not [e for e in doc.modelspace() if e.dxftype() in ("HATCH", "SOLID", "ARC", "CIRCLE")]


def test_every_mask_shape_is_a_closed_clean_polygon(written):
    _, doc, _ = written
    shapes = [s for s in ezdxf_polylines(doc) if s[0] in MASK_NAMES]
    assert len(shapes) >= 3
    for layer, xy, closed in shapes:
        assert closed, layer
        pts = np.array(xy)
        # no repeated consecutive vertices (closing edge included), no closing duplicate
        assert np.all(np.any(pts != np.roll(pts, 1, axis=0), axis=1))
        poly = shapely.Polygon(pts)
        assert poly.is_valid, shapely.is_valid_reason(poly)  # simple: no self-crossing
        assert not poly.interiors
        # every coordinate on the mask grid (0.1 um)
        assert np.allclose(pts / GRID_UM, np.rint(pts / GRID_UM), rtol=0, atol=1e-6)
    for e in doc.modelspace().query("LWPOLYLINE"):
        assert e.dxf.const_width == 0 and not e.has_width


@pytest.mark.parametrize("level", [0, 1])
def test_pieces_do_not_overlap_and_cover_the_layout_mask(written, level):
    _, doc, _ = written
    polys = mask_polygons(doc, MASK_NAMES[level])
    union = shapely.union_all(polys)
    # pairwise non-overlap: the pieces' areas add up to the area of their union
    assert sum(p.area for p in polys) == pytest.approx(union.area, rel=1e-12)
    tree = shapely.STRtree(polys)
    a, b = tree.query(polys, predicate="overlaps")
    assert not np.any(a != b)
    # union matches the layout within the grid tolerance: |A xor B| <= perimeter * grid
    target = LAYOUT.layers[level].geometry
    assert shapely.symmetric_difference(union, target).area <= target.length * LAYOUT.grid
    assert union.area == pytest.approx(target.area, rel=1e-9)


def test_bed_level_needs_pieces_because_of_its_holes(written):
    _, doc, _ = written
    # 7 walls are holes of one outline: split writes it as several hole-free pieces
    assert len(LAYOUT.layers[0].geometry.interiors) == 7
    assert len(mask_polygons(doc, MASK_NAMES[0])) >= 2


def test_notes_state_units_polarity_mirror_name_and_hash(written):
    _, doc, options = written
    text = "\n".join(
        e.dxf.text for e in doc.modelspace().query("TEXT") if e.dxf.layer == NOTES_LAYER
    )
    assert "units: 1 drawing unit = 1 micrometre (um)" in text
    assert "polarity: drawn shapes are the channels" in text
    assert "mirror: no" in text
    assert "comb test chip" in text
    assert "sha256:0123456789abcdef" in text
    if options.version == "R2000":
        assert doc.header["$INSUNITS"] == 13  # 13 = micrometres (DXF reference, $INSUNITS)
    else:
        assert "$INSUNITS" not in doc.header


def test_group_code_parse_matches_ezdxf(written):
    path, doc, options = written
    raw = parse_group_codes(path)
    expected_type = "POLYLINE" if options.version == "R12" else "LWPOLYLINE"
    assert {t for t, *_ in raw} == {expected_type}
    from_ezdxf = ezdxf_polylines(doc)
    assert len(raw) == len(from_ezdxf)
    for (_, layer, flags, xy), (layer2, xy2, closed) in zip(raw, from_ezdxf, strict=True):
        assert layer == layer2
        assert bool(flags & 1) and closed
        assert xy == xy2


def test_port_circles_are_within_one_grid_step_of_the_circle():
    # chord error bound: sagitta r(1 - cos(pi/n)) <= grid/4 plus snapping <= 0.71 grid
    r = 750.0 / GRID_UM  # 750 um radius in grid units
    ring = circle_ring(100_000.0, 50_000.0, r)
    pts = np.vstack([ring, ring[:1]])
    mids = (pts[:-1] + pts[1:]) / 2  # chord midpoints: where a polygon strays most from a circle
    for p in (ring, mids):
        dist = np.hypot(p[:, 0] - 100_000.0, p[:, 1] - 50_000.0)
        assert np.max(np.abs(dist - r)) <= 1.0


def test_two_writes_are_byte_identical(tmp_path):
    for version in ("R2000", "R12"):
        a, b = tmp_path / f"a_{version}.dxf", tmp_path / f"b_{version}.dxf"
        write_dxf(LAYOUT, a, DxfOptions(version=version))
        write_dxf(LAYOUT, b, DxfOptions(version=version))
        assert a.read_bytes() == b.read_bytes()
    assert not list(tmp_path.glob(".*tmp"))  # temporary files renamed or removed


def test_mirror_reflects_about_the_chip_centre(tmp_path):
    write_dxf(LAYOUT, tmp_path / "a.dxf", DxfOptions())
    write_dxf(LAYOUT, tmp_path / "m.dxf", DxfOptions(mirror=True))
    plain, mirrored = ezdxf.readfile(tmp_path / "a.dxf"), ezdxf.readfile(tmp_path / "m.dxf")
    minx, _, maxx, _ = LAYOUT.outline.bounds
    for name in MASK_NAMES:
        a = shapely.union_all(mask_polygons(plain, name))
        m = shapely.union_all(mask_polygons(mirrored, name))
        # identities of a reflection x -> (minx + maxx) - x: same area, reflected bounds
        assert m.area == pytest.approx(a.area, rel=1e-12)
        ax0, ay0, ax1, ay1 = a.bounds
        assert m.bounds == pytest.approx((minx + maxx - ax1, ay0, minx + maxx - ax0, ay1))
        back = shapely.transform(m, lambda c: np.column_stack([minx + maxx - c[:, 0], c[:, 1]]))
        assert shapely.symmetric_difference(back, a).area < 1e-18
    text = [e.dxf.text for e in mirrored.modelspace().query("TEXT")]
    assert any("chrome side" in t for t in text)


def test_inverse_polarity_is_the_outline_minus_the_channels(tmp_path):
    write_dxf(LAYOUT, tmp_path / "i.dxf", DxfOptions(polarity="inverse"))
    doc = ezdxf.readfile(tmp_path / "i.dxf")
    outline = LAYOUT.outline
    for level, name in enumerate(MASK_NAMES):
        polys = mask_polygons(doc, name)
        assert all(p.is_valid and not p.interiors for p in polys)
        inv = shapely.union_all(polys)
        assert sum(p.area for p in polys) == pytest.approx(inv.area, rel=1e-12)
        channels = LAYOUT.layers[level].geometry
        # area identity: inverse + channels = chip; the inverse fills the chip's bounding box
        assert inv.area == pytest.approx(outline.area - channels.area, rel=1e-12)
        assert inv.bounds == pytest.approx(outline.bounds)
        assert shapely.intersection(inv, channels).area < 1e-15
    text = [e.dxf.text for e in doc.modelspace().query("TEXT")]
    assert any("everything inside the chip outline except the channels" in t for t in text)


def test_millimetre_units_scale_by_one_thousand(tmp_path):
    write_dxf(LAYOUT, tmp_path / "mm.dxf", DxfOptions(units="mm"))
    doc = ezdxf.readfile(tmp_path / "mm.dxf")
    assert doc.header["$INSUNITS"] == 4  # 4 = millimetres (DXF reference, $INSUNITS)
    polys = mask_polygons(doc, MASK_NAMES[0], scale=1e-3)
    assert shapely.union_all(polys).area == pytest.approx(LAYOUT.layers[0].geometry.area)


def test_keyhole_outlines_enclose_the_holes_without_crossing(tmp_path):
    path = tmp_path / "k.dxf"
    write_dxf(LAYOUT, path, DxfOptions(holes="keyhole"))
    doc = ezdxf.readfile(path)
    assert not doc.audit().has_errors
    for level, name in enumerate(MASK_NAMES):
        target = LAYOUT.layers[level].geometry
        rings = [np.array(xy) for layer, xy, _ in ezdxf_polylines(doc) if layer == name]
        # one outline per connected shape
        assert len(rings) == len(shapely.get_parts(target))
        # shoelace area of a keyhole ring = outline minus holes
        assert sum(ring_area(xy) for xy in rings) * 1e-12 == pytest.approx(target.area)
        rebuilt = []
        for xy in rings:
            # edges touch along the bridges but never cross: rebuilding the polygon from the
            # ring gives back one shape, with its holes
            shape = shapely.make_valid(
                shapely.Polygon(xy * 1e-6), method="structure", keep_collapsed=False
            )
            assert len(shapely.get_parts(shape)) == 1
            assert shape.area == pytest.approx(ring_area(xy) * 1e-12)
            rebuilt.append(shape)
        union = shapely.union_all(rebuilt)
        assert shapely.symmetric_difference(union, target).area < 1e-15
        if level == 0:
            (bed,) = rebuilt
            assert len(bed.interiors) == 7  # the 7 walls survive as islands


@settings(max_examples=30, deadline=None)
@given(
    st.lists(
        st.tuples(st.integers(0, 60), st.integers(0, 60), st.integers(1, 30), st.integers(1, 30)),
        min_size=1,
        max_size=12,
    ),
    st.sampled_from(["split", "keyhole"]),
)
def test_hole_resolution_keeps_the_area(boxes, holes):
    # law: resolving holes never changes the drawn area, and split pieces never overlap
    geom = shapely.union_all([shapely.box(x, y, x + w, y + h) for x, y, w, h in boxes])
    frame = shapely.box(-5, -5, 100, 100)
    for g in (geom, shapely.difference(frame, geom)):  # the inverse has many holes
        rings = resolve_holes(g, holes)
        assert sum(ring_area(r) for r in rings) == pytest.approx(g.area)
        if holes == "split":
            polys = [shapely.Polygon(r) for r in rings]
            assert all(p.is_valid for p in polys)
            assert shapely.union_all(polys).area == pytest.approx(g.area)


def test_bad_options_and_bad_targets_are_reported(tmp_path):
    with pytest.raises(SpecError, match="polarity"):
        DxfOptions(polarity="negative")
    with pytest.raises(SpecError, match="R12"):
        DxfOptions(version="R14")
    with pytest.raises(ExportError, match="does not exist"):
        write_dxf(LAYOUT, tmp_path / "missing" / "x.dxf")
    odd = dataclasses.replace(LAYOUT, grid=0.1234e-9)
    with pytest.raises(ExportError, match="whole number of nanometres"):
        write_dxf(odd, tmp_path / "x.dxf")


def test_strip_fallback_when_no_bridges_are_found(monkeypatch):
    # force the fallback cut (vertical strips through every hole) and check it separately
    from chipflow.export import geometry

    monkeypatch.setattr(geometry, "_find_bridges", lambda poly, per_hole: None)
    target = shapely.transform(LAYOUT.layers[0].geometry, lambda c: c / LAYOUT.grid)
    for g in (target, shapely.difference(shapely.box(0, 0, 200_000, 100_000), target)):
        rings = resolve_holes(g, "split")
        polys = [shapely.Polygon(r) for r in rings]
        assert all(p.is_valid and not p.interiors for p in polys)
        union = shapely.union_all(polys)
        assert sum(p.area for p in polys) == pytest.approx(union.area, rel=1e-12)
        # within the grid tolerance: |A xor B| <= perimeter * 1 grid step
        assert shapely.symmetric_difference(union, g).area <= g.length
    with pytest.raises(ExportError, match="holes = 'split'"):
        resolve_holes(target, "keyhole")


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.tuples(st.integers(-9, 9), st.integers(-9, 9)), min_size=1, max_size=25),
    st.lists(st.tuples(st.integers(-9, 9), st.integers(-9, 9)), min_size=1, max_size=40),
    st.integers(1, 1200),
)
def test_nearest_pairs_follow_a_stable_sort_of_all_distances(a, b, count):
    # independent reference: numpy's stable argsort of the full squared-distance matrix
    from chipflow.export.geometry import _nearest_pairs

    a, b = np.array(a, dtype=float), np.array(b, dtype=float)
    d2 = ((a[:, None, :] - b[None, :, :]) ** 2).sum(axis=2)
    ref = [divmod(int(k), len(b)) for k in np.argsort(d2, axis=None, kind="stable")[:count]]
    assert list(_nearest_pairs(a, b, count)) == ref


def test_on_grid_layout_is_rounded_to_the_same_shapes_as_a_precision_reduction():
    from chipflow.export.geometry import _to_grid

    for mask in LAYOUT.layers:
        fast = _to_grid(mask.geometry, LAYOUT.grid)
        scaled = shapely.transform(mask.geometry, lambda c: c / LAYOUT.grid)
        reduced = shapely.set_precision(scaled, 1.0)  # GEOS valid-output snap rounding
        assert shapely.equals_exact(shapely.normalize(fast), shapely.normalize(reduced))
    # off the grid: snapped by the precision reduction (every vertex a whole grid unit)
    off = shapely.box(0.3e-6, 0.3e-6, 10.26e-6, 5.04e-6)
    snapped = _to_grid(off, LAYOUT.grid)
    xy = shapely.get_coordinates(snapped)
    assert np.array_equal(xy, np.rint(xy)) and snapped.is_valid


def test_prepared_layout_is_shared_by_the_writers_of_one_layout():
    from chipflow.export.geometry import prepare_layout

    first = prepare_layout(LAYOUT)
    assert prepare_layout(LAYOUT) is first
    other = prepare_layout(LAYOUT, mirror=True)
    assert other is not first and prepare_layout(LAYOUT, mirror=True) is other
    # an equal but distinct layout is prepared afresh, to the same shapes
    twin = prepare_layout(dataclasses.replace(LAYOUT))
    assert twin is not first
    for mine, theirs in zip(first.layers, twin.layers, strict=True):
        assert len(mine.rings) == len(theirs.rings)
        assert all(np.array_equal(p, q) for p, q in zip(mine.rings, theirs.rings, strict=True))
    # shared arrays cannot be changed by one writer behind another's back
    with pytest.raises(ValueError):
        first.layers[0].rings[0][0, 0] = 1.0


def test_vertices_filled_in_one_step_give_the_bytes_of_adding_them_one_by_one(
    tmp_path, monkeypatch
):
    # reference: ezdxf's own per-vertex path (LWPolyline.set_points)
    from chipflow.export import dxf

    write_dxf(LAYOUT, tmp_path / "fast.dxf")
    monkeypatch.setattr(
        dxf, "_set_points", lambda entity, points: entity.set_points(points.tolist(), format="xy")
    )
    write_dxf(LAYOUT, tmp_path / "slow.dxf")
    assert (tmp_path / "fast.dxf").read_bytes() == (tmp_path / "slow.dxf").read_bytes()
    assert b"LWPOLYLINE" in (tmp_path / "fast.dxf").read_bytes()
