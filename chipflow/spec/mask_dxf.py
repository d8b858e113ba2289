"""Reading a mask drawn elsewhere: the channel outlines of a DXF file.

What is read as channel area (model space, block references expanded):

- closed LWPOLYLINE and POLYLINE outlines, 2D or 3D (a 3D polyline counts by its projection
  on the drawing plane), arcs from bulges flattened to a ten-thousandth of the drawing's size;
- closed SPLINE and full ELLIPSE outlines, flattened alike;
- HATCH boundary paths (each path an outline), SOLID and TRACE quadrilaterals;
- CIRCLE: port pads;
- INSERT (block references, MINSERT arrays too) expanded with their position, scale and
  rotation, nested up to :data:`MAX_BLOCK_DEPTH` deep; entities on layer ``0`` inside a block
  take the layer of the reference, as in CAD programs.

Entities that could carry channel geometry but are not read (LINE, ARC, open polylines of the
outline kinds are refused; LINE, ARC, 3DFACE, REGION, 3DSOLID, BODY, SURFACE, MESH, polyface
meshes, WIPEOUT, MPOLYGON) are named in one note (:attr:`ForeignMask.notes`), so no
geometry is dropped without a word; annotations (TEXT, MTEXT, DIMENSION, POINT, ...) are
ignored.

An outline lying inside another one is a hole in it (a post or a wall), an even number of
levels deep an island again; other overlaps are joined. Outlines with many vertices are
simplified to a hundred-thousandth of the drawing's size (a 20 mm channel drawn with 20,000
collinear vertices becomes four), so the time of the field solve grows with the chip, not
with the drawing's vertex count.

Units
-----
Coordinates are converted to metres by the drawing unit: the one given by the caller
(``--units``), else the file's ``$INSUNITS``. Where neither is known (DXF R12 has no
``$INSUNITS``; later versions may state 0, "unitless") the unit is inferred when exactly one
of millimetres and micrometres (the units masks are drawn in) makes the drawing 2 mm to
200 mm across, the size of real chips, and the inference is stated in a note; otherwise the
caller is asked for ``--units``. A drawing over 1 m across, or under 10 um, is refused with
the unit that would make it a chip ("did you mean --units um?").

Layer names are decoded from the DXF's ``\\U+XXXX`` escapes and normalised (NFC), so a layer
typed as it is shown (``--layer 通道``) matches.
"""

from __future__ import annotations

import math
import unicodedata
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import shapely

from chipflow.errors import SpecError

__all__ = [
    "ForeignMask",
    "read_mask_dxf",
    "UNIT_SCALE",
    "INSUNITS",
    "MAX_BLOCK_DEPTH",
    "MAX_ENTITIES",
    "layer_name",
    "infer_units",
]

#: Metres per drawing unit.
UNIT_SCALE = {"m": 1.0, "cm": 1e-2, "mm": 1e-3, "um": 1e-6, "in": 0.0254, "mil": 2.54e-5}
#: DXF $INSUNITS codes chipflow reads (the DXF reference's table).
INSUNITS = {1: "in", 4: "mm", 5: "cm", 6: "m", 13: "um", 17: "mil"}
#: Deepest nesting of block references expanded.
MAX_BLOCK_DEPTH = 16
#: Most entities read, block references expanded (a block inserted ten times in each of ten
#: nested blocks would otherwise make ten billion).
MAX_ENTITIES = 1_000_000
#: Size of real chips [m]: the range within which units are inferred.
CHIP_SIZES = (2e-3, 0.2)
#: Sizes of any drawing read [m]: beyond them the units must be wrong.
DRAWING_SIZES = (10e-6, 1.0)

_OUTLINES = {"LWPOLYLINE", "POLYLINE", "SPLINE", "ELLIPSE", "HATCH", "SOLID", "TRACE"}
_NOT_READ = {"LINE", "ARC", "3DFACE", "REGION", "3DSOLID", "BODY", "SURFACE", "MESH",
             "WIPEOUT", "MPOLYGON", "POLYFACE", "POLYMESH"}  # fmt: skip


_WORD = {"LWPOLYLINE": "polyline", "POLYLINE": "polyline", "SPLINE": "spline",
         "ELLIPSE": "ellipse arc"}  # fmt: skip


@dataclass(frozen=True)
class ForeignMask:
    """The channel area of a foreign mask.

    Attributes
    ----------
    geometry : shapely.Polygon or shapely.MultiPolygon
        Channel area [m].
    units : str
        The file's drawing unit ("mm", "um", ...).
    scale : float
        Metres per drawing unit.
    layers : tuple of str
        Layers the outlines were read from.
    circles : int
        Number of circles (port pads) read.
    notes : tuple of str
        What was inferred or not read, one line each.
    """

    geometry: shapely.Geometry
    units: str
    scale: float
    layers: tuple[str, ...]
    circles: int
    notes: tuple[str, ...] = ()


def layer_name(text: str) -> str:
    """A layer name as people see and type it: DXF ``\\U+XXXX`` escapes decoded, NFC.

    >>> layer_name("\\\\U+4e2d\\\\U+6587")
    '中文'
    """
    from ezdxf.lldxf.encoding import decode_dxf_unicode, has_dxf_unicode

    name = decode_dxf_unicode(text) if has_dxf_unicode(text) else text
    return unicodedata.normalize("NFC", name)


def _where(path: str, xy, units: str) -> str:
    return f"{path}: at ({xy[0]:.6g}, {xy[1]:.6g}) {units}"


def _expand(entities, depth: int = 0, layer: str | None = None):
    """Model-space entities with block references replaced by their transformed contents."""
    for e in entities:
        kind = e.dxftype()
        if kind == "INSERT":
            if depth >= MAX_BLOCK_DEPTH:
                raise SpecError(f"block references nested more than {MAX_BLOCK_DEPTH} deep")
            inserts = e.multi_insert() if e.mcount > 1 else [e]
            for ins in inserts:
                own = ins.dxf.layer if layer is None or ins.dxf.layer != "0" else layer
                try:
                    contents = list(ins.virtual_entities())
                except Exception as exc:  # noqa: BLE001 - ezdxf raises many kinds here
                    raise SpecError(
                        f"block reference {ins.dxf.name!r} cannot be read ({exc})"
                    ) from None
                yield from _expand(contents, depth + 1, own)
            continue
        if layer is not None and e.dxf.layer == "0":
            e.dxf.layer = layer
        yield e


def _expanded_count(doc, entities) -> int:
    """How many entities ``entities`` become once block references are expanded, counted on
    the block definitions (nothing is expanded); a block that references itself, directly or
    through others, or nests deeper than :data:`MAX_BLOCK_DEPTH`, is refused."""
    sizes: dict[str, int] = {}

    def size_of(name: str, trail: tuple[str, ...]) -> int:
        if name in sizes:
            return sizes[name]
        if name in trail:
            raise SpecError(f"block {name!r} references itself")
        if len(trail) >= MAX_BLOCK_DEPTH:
            raise SpecError(f"block references nested more than {MAX_BLOCK_DEPTH} deep")
        block = doc.blocks.get(name)
        total = 0 if block is None else count(block, (*trail, name))
        sizes[name] = total
        return total

    def count(items, trail: tuple[str, ...]) -> int:
        total = 0
        for e in items:
            if e.dxftype() == "INSERT":
                copies = max(1, int(e.dxf.get("row_count", 1))) * max(
                    1, int(e.dxf.get("column_count", 1))
                )
                total += copies * size_of(e.dxf.name, trail)
            else:
                total += 1
            if total > MAX_ENTITIES:
                return total
        return total

    return count(entities, ())


def _paths(e):
    """(path, closed) pairs of an outline entity (None: not an outline)."""
    from ezdxf import path as dxfpath

    kind = e.dxftype()
    if kind == "HATCH":
        return [(p, True) for p in dxfpath.from_hatch(e)]
    if kind == "POLYLINE":
        if e.is_poly_face_mesh or e.is_polygon_mesh:
            return None
        return [(dxfpath.make_path(e), bool(e.is_closed))]
    if kind == "LWPOLYLINE":
        return [(dxfpath.make_path(e), bool(e.closed))]
    p = dxfpath.make_path(e)
    return [(p, bool(p.is_closed) or bool(getattr(e, "closed", False)))]


def infer_units(extent: float) -> str | None:
    """The drawing unit that makes a drawing ``extent`` units across a real chip (see the
    module notes), or None when not exactly one of mm and um does.

    >>> infer_units(25.0), infer_units(25_000.0), infer_units(500.0)
    ('mm', 'um', None)
    """
    low, high = CHIP_SIZES
    fits = [u for u in ("mm", "um") if low <= extent * UNIT_SCALE[u] <= high]
    return fits[0] if len(fits) == 1 else None


def _size_text(metres: float) -> str:
    for unit, s in (("km", 1e3), ("m", 1.0), ("mm", 1e-3), ("um", 1e-6), ("nm", 1e-9)):
        if metres >= s:
            return f"{metres / s:.3g} {unit}"
    return f"{metres:.3g} m"


def _check_extent(path: str, extent: float, unit: str, given: str) -> None:
    """Refuse a drawing whose size is implausible in ``unit``, with the unit that fits."""
    size = extent * UNIT_SCALE[unit]
    low, high = DRAWING_SIZES
    if low <= size <= high:
        return
    better = infer_units(extent)
    if better is None or better == unit:
        fits = [u for u in UNIT_SCALE if low <= extent * UNIT_SCALE[u] <= high and u != unit]
        better = fits[0] if fits else None
    hint = f"; did you mean --units {better}?" if better else ""
    check_drawing_size(path, size, f"read in {unit} ({given})", hint)


def check_drawing_size(path: str, size: float, reading: str, hint: str = "") -> None:
    """Refuse a drawing ``size`` [m] across (its bounding box's diagonal) outside
    :data:`DRAWING_SIZES`: one SpecError line saying how it was read (``reading``).

    >>> check_drawing_size("chip.gds", 0.03, "in the file's unit")
    >>> check_drawing_size("chip.gds", 30.0, "in the file's unit of 1 mm")
    Traceback (most recent call last):
    ...
    chipflow.errors.SpecError: chip.gds: the drawing is 30 m across in the file's unit of 1 mm, \
larger than any chip (10 um to 1 m)
    """
    low, high = DRAWING_SIZES
    if low <= size <= high:
        return
    what = "larger than any chip" if size > high else "smaller than any chip"
    raise SpecError(
        f"{path}: the drawing is {_size_text(size)} across {reading}, {what} (10 um to 1 m){hint}"
    )


def read_mask_dxf(
    path: str | Path, layer: str | None = None, units: str | None = None
) -> ForeignMask:
    """Read the channel outlines of a DXF file (see the module notes).

    Parameters
    ----------
    path : str or path-like
    layer : str, optional
        Read only this layer (default: every layer), matched as shown (escapes decoded).
    units : str, optional
        The drawing unit, a key of :data:`UNIT_SCALE`; overrides ``$INSUNITS``.

    Raises
    ------
    SpecError
        A file that is not a regular file of at most
        :data:`chipflow.spec.files.MAX_MASK_BYTES`, unreadable, of unknown or implausible
        units, an open outline, a coordinate that is not a finite number, a self-crossing
        outline, no outline (on the named layer).
    """
    import warnings

    # ezdxf's arithmetic on a broken entity (an infinite bulge) warns through numpy; the
    # entity is refused in one line below, so the warnings are not shown
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        return _read_mask(str(path), layer, units)


def _read_mask(path: str, layer: str | None, units: str | None) -> ForeignMask:
    import ezdxf

    from chipflow.spec.files import MAX_MASK_BYTES, check_regular_file

    check_regular_file(path, MAX_MASK_BYTES, "DXF mask")
    try:
        doc = ezdxf.readfile(path)
    except (OSError, ezdxf.DXFError) as exc:
        raise SpecError(f"{path}: cannot read the DXF file ({exc})") from None
    except Exception as exc:  # noqa: BLE001 - ezdxf raises many kinds on broken files
        raise SpecError(f"{path}: cannot read the DXF file ({type(exc).__name__})") from None
    if units is not None and units not in UNIT_SCALE:
        raise SpecError(f"unknown drawing unit {units!r} (valid: {', '.join(sorted(UNIT_SCALE))})")
    # R12 has no $INSUNITS (a reader may fill in its own default): its units are unknown
    r12 = doc.dxfversion <= "AC1009"
    code = doc.header.get("$INSUNITS", 0) if "$INSUNITS" in doc.header and not r12 else None
    try:
        code = None if code is None else int(code)
    except (TypeError, ValueError):
        code = -1
    if units is None and code not in (None, 0) and code not in INSUNITS:
        raise SpecError(
            f"{path}: drawing units $INSUNITS = {code} are not supported "
            f"(valid: {', '.join(sorted(UNIT_SCALE))}); give --units"
        )

    wanted = None if layer is None else layer_name(layer)
    msp = doc.modelspace()
    outlines, circles, skipped = [], [], Counter()
    layers_seen: set[str] = set()
    try:
        if _expanded_count(doc, msp) > MAX_ENTITIES:
            raise SpecError(
                f"more than {MAX_ENTITIES:,} entities once block references are expanded"
            )
        for e in _expand(msp):
            kind = e.dxftype()
            name = layer_name(e.dxf.layer)
            if kind in _OUTLINES or kind == "CIRCLE":
                layers_seen.add(name)
            if wanted is not None and name != wanted:
                continue
            if kind == "CIRCLE":
                circles.append(e)
            elif kind in _OUTLINES:
                try:
                    paths = _paths(e)
                except (ValueError, ZeroDivisionError, ArithmeticError, IndexError) as exc:
                    raise SpecError(
                        f"a {kind} on layer {name!r} cannot be drawn: a coordinate, bulge or "
                        f"radius is not a usable number ({exc}); redraw it"
                    ) from None
                if paths is None:
                    skipped[("POLYFACE" if e.is_poly_face_mesh else "POLYMESH"), name] += 1
                    continue
                outlines += [(p, closed, kind, name) for p, closed in paths]
            elif kind in _NOT_READ:
                skipped[kind, name] += 1
    except SpecError as exc:
        raise SpecError(f"{path}: {exc}") from None
    if not outlines:
        on = f" on layer {wanted!r}" if wanted is not None else ""
        found = sorted(layers_seen)
        hint = f" (layers with outlines: {', '.join(found)})" if found else ""
        raise SpecError(f"{path}: no closed outline{on}{hint}")

    # the drawing's size, from every outline's control points and every circle
    corners = []
    with np.errstate(all="ignore"):
        for p, _, kind, name in outlines:
            cv = np.array([(v.x, v.y) for v in p.control_vertices()], dtype=float)
            if len(cv) and not np.all(np.isfinite(cv)):
                raise SpecError(
                    f"{path}: a {kind} on layer {name!r} has a coordinate or bulge that is not "
                    "a finite number; redraw it"
                )
            if len(cv):
                corners += [cv.min(axis=0), cv.max(axis=0)]
        for c in circles:
            x, y, r = c.dxf.center[0], c.dxf.center[1], c.dxf.radius
            if not all(math.isfinite(v) for v in (x, y, r)):
                raise SpecError(
                    f"{path}: a CIRCLE on layer {layer_name(c.dxf.layer)!r} has a centre or "
                    "radius that is not a finite number; redraw it"
                )
            corners += [(x - r, y - r), (x + r, y + r)]
    box = np.array(corners, dtype=float).reshape(-1, 2)
    extent = float(np.hypot(*(box.max(axis=0) - box.min(axis=0)))) or 1.0
    tol = 1e-4 * extent

    notes = []
    if units is not None:
        unit, given = units, "from --units"
    elif code in INSUNITS:
        unit, given = INSUNITS[code], "from $INSUNITS"
    else:
        unit = infer_units(extent)
        stated = "R12 files state none" if r12 else "$INSUNITS is 0"
        if unit is None:
            raise SpecError(
                f"{path}: the file states no drawing units ({stated}) and its size, "
                f"{extent:.4g} units across, fits no chip size in both mm and um; "
                "give --units mm or --units um"
            )
        other = "um" if unit == "mm" else "mm"
        notes.append(
            f"the file states no drawing units ({stated}): read in {unit}, which makes it "
            f"{_size_text(extent * UNIT_SCALE[unit])} across (in {other}: "
            f"{_size_text(extent * UNIT_SCALE[other])}); give --units to choose"
        )
        given = "inferred from its size"
    _check_extent(path, extent, unit, given)
    scale = UNIT_SCALE[unit]

    polygons = []
    with np.errstate(all="ignore"):
        for p, closed, kind, name in outlines:
            try:
                pts = np.array([(v.x, v.y) for v in p.flattening(tol)], dtype=float)
            except (ValueError, ZeroDivisionError, OverflowError, ArithmeticError):
                pts = np.array([(math.nan, math.nan)])
            if len(pts) == 0:
                continue
            if not np.all(np.isfinite(pts)):
                raise SpecError(
                    f"{path}: a {kind} on layer {name!r} has a coordinate or bulge that is "
                    "not a finite number; redraw it"
                )
            if not closed and not np.allclose(pts[0], pts[-1], atol=1e-9 * tol):
                raise SpecError(
                    f"{_where(path, pts[0], unit)}: open {_WORD.get(kind, kind)} on layer "
                    f"{name!r}; "
                    "mask outlines must be closed"
                )
            if len(pts) < 3:
                continue
            poly = shapely.Polygon(pts * scale)
            if not poly.is_valid:
                poly = _keyhole(poly)
            if not poly.is_valid:
                reason = shapely.is_valid_reason(poly)
                raise SpecError(
                    f"{_where(path, pts[0], unit)}: the outline on layer {name!r} crosses "
                    f"itself ({reason}); redraw it as a simple closed polyline"
                )
            if poly.area > 0:
                polygons.append(poly)
    for c in circles:
        x, y, r = c.dxf.center[0], c.dxf.center[1], c.dxf.radius
        if r > 0:
            polygons.append(shapely.Point(x * scale, y * scale).buffer(r * scale, quad_segs=32))
    if not polygons:
        raise SpecError(f"{path}: the outlines enclose no area")
    geometry = _simplified(_even_odd(polygons), 1e-5 * extent * scale)
    if skipped:
        by_kind = Counter()
        for (kind, _), n in skipped.items():
            by_kind[kind] += n
        words = ", ".join(f"{n} {kind}" for kind, n in sorted(by_kind.items()))
        notes.append(
            f"not read: {words} (channel outlines must be closed polylines, splines, "
            "ellipses, hatches or solids; explode or join them to read them)"
        )
    used = tuple(sorted({name for *_, name in outlines}))
    return ForeignMask(geometry, unit, scale, used, len(circles), tuple(notes))


def _simplified(geometry: shapely.Geometry, tol: float) -> shapely.Geometry:
    """Each outline without its collinear and near-collinear vertices: within ``tol`` [m],
    and never more than a hundredth of the outline's typical width (``2 area / perimeter``),
    so a narrow channel keeps its shape."""
    parts = np.array(shapely.get_parts(geometry), dtype=object)
    if not len(parts):
        return geometry
    width = 2.0 * shapely.area(parts) / np.maximum(shapely.length(parts), 1e-300)
    simple = shapely.simplify(parts, np.minimum(tol, 0.01 * width), preserve_topology=True)
    return shapely.union_all(simple)


def _keyhole(poly: shapely.Polygon) -> shapely.Geometry:
    """A keyholed outline (holes joined to the outline by zero-width slits) as a valid
    polygon with holes; any other invalid outline (a real self-crossing) comes back as is."""
    fixed = shapely.make_valid(poly)
    shoelace = abs(shapely.area(shapely.Polygon(poly.exterior)))  # signed-area magnitude
    x, y = np.asarray(poly.exterior.coords).T
    signed = abs(0.5 * np.sum(x[:-1] * y[1:] - x[1:] * y[:-1]))
    parts = [g for g in shapely.get_parts(fixed) if isinstance(g, shapely.Polygon)]
    area = sum(g.area for g in parts)
    if parts and abs(area - signed) <= 1e-9 * max(shoelace, area):
        return shapely.union_all(parts)
    return poly


def _even_odd(polygons: list[shapely.Polygon]) -> shapely.Geometry:
    """Join the outlines; one lying inside an odd number of others is a hole."""
    arr = np.array(polygons, dtype=object)
    tree = shapely.STRtree(arr)
    inner, outer = tree.query(arr, predicate="within")
    keep = inner != outer
    depth = np.bincount(inner[keep], minlength=len(arr))
    solid = shapely.union_all(arr[depth % 2 == 0])
    holes = arr[depth % 2 == 1]
    return solid.difference(shapely.union_all(holes)) if len(holes) else solid
