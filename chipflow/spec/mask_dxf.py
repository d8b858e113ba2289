"""Reading a mask drawn elsewhere: closed polylines and circles from a DXF file.

Channels are the closed LWPOLYLINE and POLYLINE outlines (arcs from bulges are flattened to a
ten-thousandth of the drawing's size); circles are port pads. An outline lying inside another
one is a hole in it (a post or a wall), an even number of levels deep an island again; other
overlaps are joined. Coordinates are converted to metres from the file's ``$INSUNITS`` (or
the units the caller gives when the file states none).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import shapely

from chipflow.errors import SpecError

__all__ = ["ForeignMask", "read_mask_dxf", "UNIT_SCALE", "INSUNITS"]

#: Metres per drawing unit.
UNIT_SCALE = {"m": 1.0, "cm": 1e-2, "mm": 1e-3, "um": 1e-6, "in": 0.0254, "mil": 2.54e-5}
#: DXF $INSUNITS codes chipflow reads (the DXF reference's table).
INSUNITS = {1: "in", 4: "mm", 5: "cm", 6: "m", 13: "um", 17: "mil"}


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
    """

    geometry: shapely.Geometry
    units: str
    scale: float
    layers: tuple[str, ...]
    circles: int


def _where(path: str, xy, units: str) -> str:
    return f"{path}: at ({xy[0]:.6g}, {xy[1]:.6g}) {units}"


def read_mask_dxf(
    path: str | Path, layer: str | None = None, units: str | None = None
) -> ForeignMask:
    """Read the channel outlines of a DXF file.

    Parameters
    ----------
    path : str or path-like
    layer : str, optional
        Read only this layer (default: every layer).
    units : str, optional
        Drawing unit when the file does not state one (``$INSUNITS`` 0): a key of
        :data:`UNIT_SCALE`.

    Raises
    ------
    SpecError
        Unreadable file, unknown units, an open polyline, a self-crossing outline, no outline
        (on the named layer).
    """
    import ezdxf
    from ezdxf import path as dxfpath

    path = str(path)
    try:
        doc = ezdxf.readfile(path)
    except (OSError, ezdxf.DXFError) as exc:
        raise SpecError(f"{path}: cannot read the DXF file ({exc})") from None
    code = int(doc.header.get("$INSUNITS", 0) or 0)
    unit = INSUNITS.get(code)
    if unit is None:
        if code != 0:
            raise SpecError(
                f"{path}: drawing units $INSUNITS = {code} are not supported "
                f"(valid: {', '.join(sorted(UNIT_SCALE))}); give --units"
            )
        if units is None:
            raise SpecError(
                f"{path}: the file states no drawing units ($INSUNITS); "
                "give --units mm or --units um"
            )
        unit = units
    if unit not in UNIT_SCALE:
        raise SpecError(f"unknown drawing unit {unit!r} (valid: {', '.join(sorted(UNIT_SCALE))})")
    scale = UNIT_SCALE[unit]

    msp = doc.modelspace()
    entities = [
        e for e in msp.query("LWPOLYLINE POLYLINE CIRCLE") if layer is None or e.dxf.layer == layer
    ]
    outlines = [e for e in entities if e.dxftype() != "CIRCLE"]
    if not outlines:
        found = sorted({e.dxf.layer for e in msp.query("LWPOLYLINE POLYLINE")})
        on = f" on layer {layer!r}" if layer is not None else ""
        hint = f" (layers with polylines: {', '.join(found)})" if found else ""
        raise SpecError(f"{path}: no closed polyline{on}{hint}")
    xmin, ymin, xmax, ymax = np.inf, np.inf, -np.inf, -np.inf
    for e in outlines:
        pts = np.array([(v[0], v[1]) for v in dxfpath.make_path(e).control_vertices()])
        if len(pts):
            xmin, ymin = min(xmin, pts[:, 0].min()), min(ymin, pts[:, 1].min())
            xmax, ymax = max(xmax, pts[:, 0].max()), max(ymax, pts[:, 1].max())
    tol = 1e-4 * float(np.hypot(xmax - xmin, ymax - ymin) or 1.0)

    polygons = []
    for e in outlines:
        if e.dxftype() == "POLYLINE" and not (e.is_2d_polyline):
            continue
        p = dxfpath.make_path(e)
        pts = np.array([(v.x, v.y) for v in p.flattening(tol)])
        closed = bool(e.closed) if e.dxftype() == "LWPOLYLINE" else bool(e.is_closed)
        if len(pts) == 0:
            continue
        if not closed and not np.allclose(pts[0], pts[-1], atol=1e-9 * tol):
            raise SpecError(
                f"{_where(path, pts[0], unit)}: open polyline on layer {e.dxf.layer!r}; mask "
                "outlines must be closed"
            )
        poly = shapely.Polygon(pts * scale)
        if not poly.is_valid:
            poly = _keyhole(poly)
        if not poly.is_valid:
            reason = shapely.is_valid_reason(poly)
            raise SpecError(
                f"{_where(path, pts[0], unit)}: the outline on layer {e.dxf.layer!r} crosses "
                f"itself ({reason}); redraw it as a simple closed polyline"
            )
        if poly.area > 0:
            polygons.append(poly)
    circles = [e for e in entities if e.dxftype() == "CIRCLE"]
    for c in circles:
        x, y = c.dxf.center[0], c.dxf.center[1]
        polygons.append(
            shapely.Point(x * scale, y * scale).buffer(c.dxf.radius * scale, quad_segs=32)
        )
    geometry = _even_odd(polygons)
    layers = tuple(sorted({e.dxf.layer for e in outlines}))
    return ForeignMask(geometry, unit, scale, layers, len(circles))


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
