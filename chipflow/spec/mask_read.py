"""Reading a mask for ``chipflow analyse``: DXF or GDSII, chipflow's own files recognised.

A file chipflow wrote (:mod:`chipflow.export.dxf`, :mod:`chipflow.export.gds`) is read level
by level without options: the mask levels only (the chip outline, port marks and notes are
not channels), each level's depth from its DXF layer name (``MASK<n>_DEPTH_<d>UM``), the
ports' names and centres from the port marks, an inverse-polarity mask turned back into its
channels. Any other DXF is read by :func:`chipflow.spec.mask_dxf.read_mask_dxf` as one level;
any other GDSII as one level of the union of its polygons (GDSII polygons have no holes).

Levels without a depth in the file take the depth given by the caller.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import shapely

from chipflow.errors import SpecError

__all__ = [
    "MaskLevel",
    "MaskFile",
    "MaskPort",
    "read_mask",
    "mask_levels",
    "resolve_mask",
    "GDS_SUFFIXES",
]

#: File name endings read as GDSII.
GDS_SUFFIXES = (".gds", ".gds2", ".gdsii")
#: A chipflow DXF mask level: MASK<n>_DEPTH_<depth in um, P for the decimal point>UM.
_LEVEL_NAME = re.compile(r"^MASK(\d+)_DEPTH_(\d+(?:P\d+)?)UM$")
# chipflow's own non-channel layers (chipflow.export.dxf and .gds; not imported, so that
# reading a mask does not load the writers)
_DXF_OUTLINE, _DXF_PORTS = "CHIP_OUTLINE", "PORT_MARKS"
_GDS_OUTLINE, _GDS_PORTS, _GDS_NOTES = 100, 101, 102


@dataclass(frozen=True)
class MaskLevel:
    """One mask level of a read mask.

    Attributes
    ----------
    name : str
        The DXF layer name, or the GDSII layer number as text.
    geometry : shapely.Polygon or shapely.MultiPolygon
        Channel area [m].
    depth : float or None
        Depth [m] the file states (chipflow's own DXF), else None.
    """

    name: str
    geometry: shapely.Geometry
    depth: float | None


@dataclass(frozen=True)
class MaskPort:
    """A port mark of chipflow's own mask: name, centre x, y and diameter [m]."""

    name: str
    x: float
    y: float
    diameter: float


@dataclass(frozen=True)
class MaskFile:
    """The levels, units and (for chipflow's own files) ports of a mask file.

    Attributes
    ----------
    levels : tuple of MaskLevel
        Shallowest first for chipflow's own files, else in the file's order.
    units : str
        Drawing unit of the coordinates a user types (``--inlet``): "mm", "um", ...
    scale : float
        Metres per drawing unit.
    ports : tuple of MaskPort
        The port marks of chipflow's own files (empty for other files).
    own : bool
        Written by chipflow.
    notes : tuple of str
        What the reader did not read or had to decide (:attr:`ForeignMask.notes`).
    """

    levels: tuple[MaskLevel, ...]
    units: str
    scale: float
    ports: tuple[MaskPort, ...] = ()
    own: bool = False
    notes: tuple[str, ...] = ()

    @property
    def geometry(self) -> shapely.Geometry:
        """Channel area of every level together [m]."""
        return shapely.union_all([level.geometry for level in self.levels])


def resolve_mask(path: str | Path) -> Path:
    """The file ``path``, or else the mask of that name installed with chipflow.

    chipflow installs a small mask (``straight_channel.dxf``: a 200 um wide, 20 mm long
    channel between port pads at (0, 0) and (20, 0) mm) so that the ``analyse`` example runs
    after a plain install; it is used when no file of that name exists.

    >>> resolve_mask("straight_channel.dxf").name
    'straight_channel.dxf'

    Raises
    ------
    SpecError
        Neither a file nor an installed mask of that name.
    """
    from importlib import resources

    given = Path(path)
    if given.is_file():
        return given
    folder = Path(str(resources.files("chipflow") / "data" / "masks"))
    installed = sorted(folder.glob("*.dxf")) + sorted(folder.glob("*.gds"))
    for candidate in installed:  # a few files
        if given.name in (candidate.name, candidate.stem) and given.name == str(path):
            return candidate
    names = ", ".join(c.name for c in installed)
    what = "a folder, not a mask file" if given.is_dir() else "no such file"
    raise SpecError(f"{path}: {what} (masks installed with chipflow: {names})")


def read_mask(
    path: str | Path,
    layer: str | None = None,
    units: str | None = None,
    exclude: str | None = None,
) -> MaskFile:
    """Read a DXF or GDSII mask (by its suffix; see the module docstring).

    Parameters
    ----------
    path : str or path-like
    layer : str, optional
        Read only this layer: a DXF layer name, or a GDSII layer number (``3`` or ``3/0`` with
        its datatype).
    units : str, optional
        DXF drawing unit when the file states none.
    exclude : str, optional
        A layer not to read as channels when every layer is read (``--region``'s layer).

    Raises
    ------
    SpecError
        Unreadable file, no channels (on the named layer).
    """
    from chipflow.spec.files import MAX_MASK_BYTES, check_regular_file

    path = str(path)
    check_regular_file(path, MAX_MASK_BYTES, "mask")  # before a byte is read
    if path.lower().endswith(GDS_SUFFIXES):
        return _read_gds(path, layer, exclude)
    return _read_dxf(path, layer, units, exclude)


def mask_levels(
    path: str | Path,
    depths: dict[str, float],
    depth: float | None = None,
    layer: str | None = None,
    units: str | None = None,
    exclude: str | None = None,
) -> tuple[MaskFile, list[tuple[shapely.Geometry, float]]]:
    """The mask of ``path`` and each of its levels' channel area [m] with its depth [m].

    ``depths`` maps layer names (DXF layer names, GDSII layer numbers) to depths [m]: each
    named layer is one level (of chipflow's own files, a level it holds; otherwise the layer
    read alone). Without names every level takes the depth its file states (chipflow's own
    DXF) or else ``depth`` (one level only). ``exclude`` names a layer that is not channels
    (``--region``'s).

    Raises
    ------
    SpecError
        A level without a depth, a named layer the file does not hold.
    """
    path = str(path)
    if depths:
        whole = read_mask(path, None, units, exclude)
        own = {level.name: level for level in whole.levels} if whole.own else {}
        levels, ports = [], whole.ports
        for name, d in depths.items():  # a few named layers
            if name in own:
                levels.append(MaskLevel(name, own[name].geometry, d))
            else:
                levels.append(MaskLevel(name, read_mask(path, name, units).geometry, d))
        mask = MaskFile(tuple(levels), whole.units, whole.scale, ports, whole.own)
        return mask, [(level.geometry, level.depth) for level in levels]
    mask = read_mask(path, layer, units, exclude)
    names = ", ".join(level.name for level in mask.levels)
    if depth is not None:  # one depth given: the mask must have one level
        if len(mask.levels) > 1:
            raise SpecError(
                f"{path}: the file has {len(mask.levels)} mask levels ({names}); give each "
                "one's depth as --depth LAYER=DEPTH, or none to take the depths the file states"
            )
        return mask, [(mask.levels[0].geometry, depth)]
    missing = [level.name for level in mask.levels if level.depth is None]
    if missing:
        if len(mask.levels) == 1:
            raise SpecError(f"{path}: the file states no channel depth; give --depth, e.g. 50um")
        each = " ".join(f"--depth {name}=50um" for name in missing)
        raise SpecError(
            f"{path}: the file has {len(mask.levels)} mask levels ({names}) and states no depth "
            f"for {', '.join(missing)}; give each one's depth, e.g. {each}"
        )
    return mask, [(level.geometry, level.depth) for level in mask.levels]


# -- DXF -----------------------------------------------------------------------------------
def _read_dxf(path: str, layer: str | None, units: str | None, exclude: str | None) -> MaskFile:
    from chipflow.spec.mask_dxf import read_mask_dxf

    names = _dxf_layer_names(path)
    levels = sorted(
        (int(m.group(1)), name, float(m.group(2).replace("P", ".")) * 1e-6)
        for name in names
        if (m := _LEVEL_NAME.match(name))
    )
    own = layer is None and _DXF_OUTLINE in names and bool(levels)
    if not own and layer is None and exclude in names:  # every layer but the excluded one
        read = []
        for name in sorted(names - {exclude}):  # a few layers
            try:
                read.append(read_mask_dxf(path, name, units))
            except SpecError as exc:
                if "no closed" not in str(exc):  # a layer without outlines
                    raise
        if not read:
            raise SpecError(f"{path}: no closed outline outside layer {exclude!r}")
        geometry = shapely.union_all([m.geometry for m in read])
        notes = tuple(dict.fromkeys(n for m in read for n in m.notes))
        return MaskFile(
            (MaskLevel("all", geometry, None),), read[0].units, read[0].scale, notes=notes
        )
    if not own:
        m = read_mask_dxf(path, layer, units)
        level = MaskLevel(layer or "all", m.geometry, None)
        return MaskFile((level,), m.units, m.scale, notes=m.notes)
    read = [(name, depth, read_mask_dxf(path, name, units)) for _, name, depth in levels]
    first = read[0][2]
    outline = read_mask_dxf(path, _DXF_OUTLINE, units).geometry
    inverse = _dxf_inverse(path)
    out = tuple(
        MaskLevel(name, outline.difference(m.geometry) if inverse else m.geometry, depth)
        for name, depth, m in read
    )
    return MaskFile(out, first.units, first.scale, _dxf_ports(path, first.scale), True)


def _dxf_layer_names(path: str) -> set[str]:
    import ezdxf

    try:
        doc = ezdxf.readfile(path)
    except (OSError, ezdxf.DXFError) as exc:
        raise SpecError(f"{path}: cannot read the DXF file ({exc})") from None
    except Exception as exc:  # noqa: BLE001 - ezdxf raises many kinds on broken files
        raise SpecError(f"{path}: cannot read the DXF file ({type(exc).__name__})") from None
    return {e.dxf.layer for e in doc.modelspace()}


def _dxf_inverse(path: str) -> bool:
    import ezdxf

    texts = ezdxf.readfile(path).modelspace().query("TEXT")
    return any(str(t.dxf.text).startswith("polarity: drawn shapes are everything") for t in texts)


def _dxf_ports(path: str, scale: float) -> tuple[MaskPort, ...]:
    """Port marks (closed polylines on PORT_MARKS) named by the nearest text on that layer."""
    import ezdxf
    from ezdxf import path as dxfpath

    msp = ezdxf.readfile(path).modelspace()
    texts = [
        (str(t.dxf.text), float(t.dxf.insert[0]), float(t.dxf.insert[1]))
        for t in msp.query("TEXT")
        if t.dxf.layer == _DXF_PORTS
    ]
    ports = []
    for e in msp.query("LWPOLYLINE POLYLINE"):
        if e.dxf.layer != _DXF_PORTS or not texts:
            continue
        pts = np.array([(v.x, v.y) for v in dxfpath.make_path(e).control_vertices()])
        ports.append(_port(pts, texts, scale))
    return tuple(ports)


def _port(ring: np.ndarray, texts: list[tuple[str, float, float]], scale: float) -> MaskPort:
    """A port mark [drawing units] named by the nearest of ``texts`` (name, x, y)."""
    lo, hi = ring.min(axis=0), ring.max(axis=0)
    cx, cy = (lo + hi) / 2
    name = min(texts, key=lambda t: (t[1] - cx) ** 2 + (t[2] - cy) ** 2)[0]
    return MaskPort(name, float(cx * scale), float(cy * scale), float((hi - lo).max() * scale))


# -- GDSII ---------------------------------------------------------------------------------
def _read_gds(path: str, layer: str | None, exclude: str | None = None) -> MaskFile:
    import gdstk

    from chipflow.spec.mask_dxf import check_drawing_size

    try:
        library = gdstk.read_gds(path)
    except (OSError, RuntimeError) as exc:
        raise SpecError(f"{path}: cannot read the GDSII file ({exc})") from None
    tops = library.top_level()
    if len(tops) != 1:
        raise SpecError(
            f"{path}: the GDSII file has {len(tops)} top cells; analyse reads a file with one"
        )
    cell = tops[0]
    metre = float(library.unit)  # metres per user unit
    polygons = cell.get_polygons()  # references flattened
    notes = [str(label.text) for label in cell.labels if label.layer == _GDS_NOTES]
    own = layer is None and any(n.startswith("design ") for n in notes)
    wanted = None if layer is None else _gds_layer(path, layer)
    skip = None if exclude is None or layer is not None else _gds_layer(path, exclude)
    by_layer: dict[tuple[int, int], list] = {}
    for poly in polygons:  # grouped by layer and datatype (a few)
        key = (poly.layer, poly.datatype)
        if own and poly.layer >= _GDS_OUTLINE:
            continue
        if skip is not None and poly.layer == skip[0] and skip[1] in (None, poly.datatype):
            continue
        if wanted is not None and (
            poly.layer != wanted[0] or (wanted[1] is not None and poly.datatype != wanted[1])
        ):
            continue
        by_layer.setdefault(key, []).append(shapely.Polygon(poly.points * metre))
    if not by_layer:
        found = sorted({f"{p.layer}/{p.datatype}" for p in polygons})
        on = f" on layer {layer}" if layer is not None else ""
        raise SpecError(
            f"{path}: no polygon{on} (layers/datatypes with polygons: {', '.join(found) or 'none'})"
        )
    drawn = np.vstack([p.exterior.coords for ps in by_layer.values() for p in ps])
    size = float(np.hypot(*np.ptp(drawn, axis=0)))
    check_drawing_size(path, size, f"in the file's user unit of {metre:.6g} m")
    units = "um" if abs(metre - 1e-6) < 1e-12 else "mm" if abs(metre - 1e-3) < 1e-9 else "m"
    scale = {"um": 1e-6, "mm": 1e-3, "m": 1.0}[units]
    if not own:
        geometry = shapely.union_all(
            [shapely.make_valid(p) for ps in by_layer.values() for p in ps]
        )
        return MaskFile((MaskLevel(layer or "all", _polygonal(geometry), None),), units, scale)
    outline = shapely.union_all(
        [shapely.Polygon(p.points * metre) for p in polygons if p.layer == _GDS_OUTLINE]
    )
    inverse = any("polarity inverse" in n for n in notes)
    levels = []
    for (number, _), parts in sorted(by_layer.items()):  # one entry per mask level
        geometry = _polygonal(shapely.union_all([shapely.make_valid(p) for p in parts]))
        levels.append(
            MaskLevel(str(number), outline.difference(geometry) if inverse else geometry, None)
        )
    names = [
        (str(label.text), float(label.origin[0]), float(label.origin[1]))
        for label in cell.labels
        if label.layer == _GDS_PORTS
    ]
    ports = tuple(
        _port(np.asarray(p.points), names, metre) for p in polygons if p.layer == _GDS_PORTS
    )
    return MaskFile(tuple(levels), units, scale, ports if names else (), True)


def _gds_layer(path: str, text: str) -> tuple[int, int | None]:
    """``3`` or ``3/0``: a GDSII layer and optional datatype."""
    parts = text.split("/")
    try:
        if len(parts) > 2:
            raise ValueError
        numbers = [int(p) for p in parts]
    except ValueError:
        raise SpecError(
            f"{path}: --layer {text!r} is not a GDSII layer; give its number, e.g. 1 or 1/0"
        ) from None
    return numbers[0], numbers[1] if len(numbers) > 1 else None


def _polygonal(geometry: shapely.Geometry) -> shapely.Geometry:
    """The polygons of ``geometry`` (lines and points left by touching pieces dropped)."""
    parts = [g for g in shapely.get_parts(geometry) if isinstance(g, shapely.Polygon)]
    return shapely.union_all(parts) if parts else shapely.Polygon()
