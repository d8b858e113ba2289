"""Chambers: wide culture regions between channels, with optional pillars, as pieces solved in
2D.

A chamber is drawn in a frame of its own, the *key frame*: its axis along +x, its inlet end
wall at x = 0, its outlet end wall at x = ``length``, its side walls at y = 0 and y =
``width``. The channels meeting it (its *ports*) arrive at the end walls along the axis: at the
inlet wall from -x, at the outlet wall towards +x. Each end narrows over ``taper`` from the
full width to the span of the channels meeting it (without a taper the end wall is flat and as
wide as the chamber); ``corner_radius`` rounds the corners where the end walls or tapers meet
the side walls. Pillars are round posts on a hexagonal or square lattice of their pitch,
centred in the chamber, kept where their wall stays at least the gap between neighbouring
pillars from the outline; they are holes in the chamber's mask level. Every vertex
of the key frame lies on the mask grid (the lower-left corner of the chamber is the origin), so
the drawn chamber, turned by a multiple of 90 degrees and moved by whole grid steps, is the
solved one exactly. The lattice is symmetric about the chamber's middle lines and keeps every
pillar whose wall stays at least the gap between pillars from the outline
(:func:`pillar_centres`).

The 2D solve (:func:`solve_chamber`, kept in the field cache): the chamber with a straight stub
of each port's channel, the depth-averaged Stokes model of :mod:`chipflow.field` with one
factorisation and one right-hand side per port but the last (port ``j`` at 1 Pa, the others
at 0, unit viscosity). This gives the conductance matrix ``Y`` between the stub ends, and the
pressure and velocity of every one of those unit solutions (the chamber's *basis fields*):
the field at any port pressures ``q`` is ``q_last + sum_j (q_j - q_last) F_j``, so a composed
chip field can place and scale them (see :func:`chamber_field`).

The network: each stub is a straight channel of its port's width and depth, in series with the
chamber between its mouth (where the port's channel ends, a node of the network) and its end.
Taking the stubs off leaves the chamber's own conductance matrix between the mouths,
``C = Y (I - R Y)^-1`` (``R`` the stubs' resistances), which is a resistor network: a link
between every two ports ``i, j`` of conductance ``-C_ij`` (:func:`chamber_links`). For a
chamber between two channels this is one link, the chamber's resistance; for a chamber a tree
ends in, a link between every two of its ports, which reproduces the 2D chamber exactly
(every port's flow at any port pressures). Each link is an *equivalent duct* of the chamber's
depth; together they have the chamber's floor area and volume (residence time, floor uptake
and roof area stay the chamber's). A link's floor is its share of the chamber's flow when every
inlet port is at one pressure and every outlet port at another (:func:`link_floors`), so each
link keeps the chamber's residence time under the drive a tree gives it; its width follows
from its conductance and floor (:func:`link_widths`).

References
----------
H. Bruus, *Theoretical Microfluidics*, Oxford University Press, 2008, ch. 4 (hydraulic
resistance, equivalent circuits). The unsupported span of the roof as the diameter of the
largest circle touching no wall or pillar is common practice for posts that hold a roof up.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely

__all__ = [
    "ChamberPort",
    "ChamberKey",
    "ChamberSolution",
    "chamber_key",
    "chamber_polygon",
    "pillar_centres",
    "chamber_regions",
    "port_bridges",
    "solve_chamber",
    "chamber_links",
    "chamber_field",
    "floor_stats",
    "unsupported_span",
    "place",
    "link_width",
    "link_floors",
    "link_widths",
]

#: Length of each port's straight stub in the 2D solve, in widths of its channel [-].
STUB_WIDTHS = 3.0
#: Triangle edges across a channel in the chamber solve [-] (as for junctions).
ACROSS = 8.0
#: Links weaker than this share of the strongest are left out of the network [-].
LINK_FLOOR = 1e-9


@dataclass(frozen=True)
class ChamberPort:
    """A channel meeting a chamber, in the key frame.

    Attributes
    ----------
    side : int
        0: the inlet end wall (x = 0, the channel arrives from -x); 1: the outlet end wall
        (x = length, the channel leaves towards +x).
    offset : float
        y of the channel's axis [m].
    width, depth : float
        The channel [m].
    mouth : float
        How far the channel's centreline reaches into the chamber past its end wall [m]
        (usually 0; half a grid step for a channel an odd number of steps wide): the network
        node of the port is there.
    """

    side: int
    offset: float
    width: float
    depth: float
    mouth: float = 0.0


@dataclass(frozen=True)
class ChamberKey:
    """The geometry of a chamber and the channels meeting it (see the module notes).

    Attributes
    ----------
    width, length, depth : float
        [m].
    corner_radius, taper : float
        [m].
    pillars : tuple or None
        ``(diameter, pitch, pattern)`` [m, m, "hex" or "square"].
    ports : tuple of ChamberPort
        Inlet ports first (by offset), then outlet ports (by offset).
    grid : float
        The mask grid every vertex lies on [m].
    overlap : float
        Where a port's depth differs from the chamber's, the deeper of the two covers the
        other for this far past the end wall [m] (0: one depth).
    """

    width: float
    length: float
    depth: float
    corner_radius: float
    taper: float
    pillars: tuple | None
    ports: tuple[ChamberPort, ...]
    grid: float
    overlap: float = 0.0

    @property
    def n_ports(self) -> int:
        return len(self.ports)


def _r(value: float) -> float:
    out = round(float(value), 12)
    return 0.0 if out == 0 else out


def chamber_key(shape, ports: list[ChamberPort], grid: float, overlap: float) -> ChamberKey:
    """The key of a chamber of ``shape`` (:class:`~chipflow.spec.chamber.ChamberShape`) with
    its ports, rounded (1 pm) so that equal chambers share one solve."""
    pillars = None
    if shape.pillars is not None:
        p = shape.pillars
        pillars = (_r(p.diameter), _r(p.pitch), str(p.pattern))
    ordered = sorted(ports, key=lambda q: (q.side, q.offset))
    any_step = any(abs(q.depth - shape.depth) > 1e-12 for q in ordered)
    return ChamberKey(
        _r(shape.width),
        _r(shape.length),
        _r(shape.depth),
        _r(shape.corner_radius),
        _r(shape.taper),
        pillars,
        tuple(
            ChamberPort(q.side, _r(q.offset), _r(q.width), _r(q.depth), _r(q.mouth))
            for q in ordered
        ),
        _r(grid),
        _r(overlap) if any_step else 0.0,
    )


# -- geometry in the key frame -------------------------------------------------------------
def _arc_points(centre, radius, a0, a1, tol) -> np.ndarray:
    sweep = a1 - a0
    step = 2 * math.acos(max(1 - tol / radius, -1.0)) if radius > tol else abs(sweep)
    n = max(1, math.ceil(abs(sweep) / max(step, 1e-6)))
    t = a0 + sweep * np.arange(n + 1) / n
    return np.column_stack((centre[0] + radius * np.cos(t), centre[1] + radius * np.sin(t)))


def _fillet(ring: np.ndarray, corners: list[int], radius: float, tol: float) -> np.ndarray:
    """``ring`` (counter-clockwise, open) with the convex corners ``corners`` rounded."""
    if radius <= 0:
        return ring
    out = []
    n = len(ring)
    for i in range(n):  # the handful of vertices of a chamber outline
        p = ring[i]
        if i not in corners:
            out.append(p[None])
            continue
        a, b = ring[i - 1], ring[(i + 1) % n]
        u, v = (a - p) / np.hypot(*(a - p)), (b - p) / np.hypot(*(b - p))
        angle = math.acos(max(-1.0, min(1.0, float(u @ v))))  # interior angle
        back = radius / math.tan(angle / 2)
        bis = (u + v) / np.hypot(*(u + v))
        centre = p + bis * radius / math.sin(angle / 2)
        t0, t1 = p + u * back, p + v * back
        a0 = math.atan2(t0[1] - centre[1], t0[0] - centre[0])
        a1 = math.atan2(t1[1] - centre[1], t1[0] - centre[0])
        sweep = math.remainder(a1 - a0, 2 * math.pi)
        out.append(_arc_points(centre, radius, a0, a0 + sweep, tol))
    return np.concatenate(out)


def _end_span(key: ChamberKey, side: int) -> tuple[float, float]:
    """The end wall of one side: from the lowest to the highest wall of its ports (the whole
    width without a taper) [m]."""
    if key.taper <= 0:
        return 0.0, key.width
    mine = [q for q in key.ports if q.side == side]
    lo = min(q.offset - q.width / 2 for q in mine)
    hi = max(q.offset + q.width / 2 for q in mine)
    return lo, hi


def _snap(xy: np.ndarray, grid: float) -> np.ndarray:
    return np.round(np.asarray(xy, float) / grid) * grid


def pillar_centres(key: ChamberKey) -> np.ndarray:
    """(k, 2) centres of the chamber's pillars in the key frame [m], on the grid.

    The lattice is symmetric about the chamber's middle lines, with a row or the middle
    between two rows on the axis (and a pillar or the middle between two on the cross line),
    whichever keeps more pillars; a pillar is kept where its wall is at least the gap between
    pillars from the chamber's outline (tapers included), so no gap at a wall is narrower than
    the gaps of the lattice.
    """
    if key.pillars is None:
        return np.zeros((0, 2))
    d, p, pattern = key.pillars
    keep = d / 2 + (p - d)
    row = p * math.sqrt(3) / 2 if pattern == "hex" else p
    outline = chamber_polygon(key, pillars=False)
    ny = int(math.floor(key.width / 2 / row)) + 2
    nx = int(math.floor(key.length / 2 / p)) + 2
    J, K = np.meshgrid(np.arange(-ny, ny + 1), np.arange(-nx, nx + 1), indexing="ij")
    best = np.zeros((0, 2))
    for phase_y in (0.0, 0.5):  # a row on the axis, or the axis between two rows
        m = np.abs(J) if phase_y == 0 else np.where(J >= 0, J, -J - 1)
        shift = (m % 2) * 0.5 if pattern == "hex" else np.zeros(J.shape)
        for phase_x in (0.0, 0.5):
            x = key.length / 2 + (K + shift + phase_x) * p
            y = key.width / 2 + (J + phase_y) * row
            xy = _snap(np.column_stack((x.ravel(), y.ravel())), key.grid)
            inside = shapely.contains_xy(outline, xy[:, 0], xy[:, 1])
            far = shapely.distance(outline.exterior, shapely.points(xy)) >= keep - 1e-12
            xy = xy[inside & far]
            if len(xy) > len(best):
                best = xy
    return best[np.lexsort((best[:, 1], best[:, 0]))]


def _circle(centre: np.ndarray, radius: float, grid: float) -> np.ndarray:
    ring = _arc_points(centre, radius, 0.0, 2 * math.pi, grid / 4)[:-1]
    ring = _snap(ring, grid)
    keep = np.r_[True, np.any(np.diff(ring, axis=0) != 0, axis=1)]
    return ring[keep]


def chamber_polygon(key: ChamberKey, pillars: bool = True) -> shapely.Polygon:
    """The chamber's outline in the key frame [m], pillars as holes, every vertex on the grid."""
    w, length, t = key.width, key.length, key.taper
    lo0, hi0 = _end_span(key, 0)
    lo1, hi1 = _end_span(key, 1)
    if t > 0:
        ring = np.array(
            [[0, lo0], [t, 0], [length - t, 0], [length, lo1], [length, hi1], [length - t, w],
             [t, w], [0, hi0]], dtype=float)  # fmt: skip
        corners = [1, 2, 5, 6]
    else:
        ring = np.array([[0, 0], [length, 0], [length, w], [0, w]], dtype=float)
        corners = [0, 1, 2, 3]
    ring = _fillet(ring, corners, key.corner_radius, key.grid / 4)
    ring = _snap(ring, key.grid)
    keep = np.r_[True, np.any(np.diff(ring, axis=0) != 0, axis=1)]
    ring = ring[keep]
    holes = []
    if pillars and key.pillars is not None:
        r = key.pillars[0] / 2
        holes = [_circle(c, r, key.grid) for c in pillar_centres(key)]
    poly = shapely.Polygon(ring, holes)
    return poly if poly.is_valid else shapely.make_valid(poly)


def _stub_length(port: ChamberPort) -> float:
    return STUB_WIDTHS * port.width


def _port_strip(key: ChamberKey, port: ChamberPort, start: float, end: float) -> shapely.Polygon:
    """The strip of a port's channel between ``start`` and ``end`` [m] measured outward from
    its end wall."""
    half = port.width / 2
    if port.side == 0:
        a, b = -end, -start
    else:
        a, b = key.length + start, key.length + end
    return shapely.box(min(a, b), port.offset - half, max(a, b), port.offset + half)


def port_bridges(key: ChamberKey) -> list[tuple[shapely.Polygon, float]]:
    """The strips (key frame, with their depth [m]) that join the chamber's wall to a channel
    ending short of it: a channel an odd number of grid steps wide is moved half a step along
    its axis (:mod:`chipflow.layout.routes`), so one of a chamber's two channels ends half a
    step outside its wall (a negative ``mouth``)."""
    return [
        (_port_strip(key, port, 0.0, -port.mouth), port.depth)
        for port in key.ports
        if port.mouth < 0
    ]


def chamber_regions(key: ChamberKey):
    """The chamber with a straight stub of each port's channel: field regions, ports
    (``"port<i>"`` at each stub's end), the stubs' lengths from their mouths [m] and the
    chamber's own floor (the polygon whose triangles are its seeded floor)."""
    from chipflow.field import FieldPort, FieldRegion

    chamber = chamber_polygon(key)
    regions = [FieldRegion(chamber, key.depth)]
    ports, stubs = [], []
    for i, port in enumerate(key.ports):
        s = _stub_length(port)
        # from the channel's end, or from the wall where the channel ends outside it (its
        # bridge, :func:`port_bridges`, is drawn with the chamber)
        strip = _port_strip(key, port, min(-port.mouth, 0.0), s)
        regions.append(FieldRegion(strip, port.depth))
        x = -s if port.side == 0 else key.length + s
        half = port.width / 2
        line = shapely.LineString([(x, port.offset - half), (x, port.offset + half)])
        ports.append(FieldPort(f"port{i}", line, 0.0))
        stubs.append(s + port.mouth)
        if key.overlap > 0 and abs(port.depth - key.depth) > 1e-12:
            if port.depth < key.depth:  # the chamber's level covers the shallow channel
                cover = _port_strip(key, port, 0.0, key.overlap)
                regions.append(FieldRegion(cover, key.depth))
            else:  # the deep channel's level reaches into the chamber
                cover = _port_strip(key, port, -key.overlap, 0.0)
                regions.append(FieldRegion(shapely.intersection(cover, chamber), port.depth))
    return regions, ports, np.array(stubs), chamber


# -- the 2D solve ----------------------------------------------------------------------------
@dataclass(frozen=True)
class ChamberSolution:
    """The 2D solution of one chamber key, at unit viscosity.

    Attributes
    ----------
    conductance : numpy.ndarray
        (P, P) ``Y`` between the stub ends [m^3/(Pa s)] (flow into the piece per pressure).
    stub_resistance : numpy.ndarray
        (P,) resistance of each stub from its mouth to its end [Pa s/m^3].
    chamber : numpy.ndarray
        (P, P) ``C``: the chamber alone, between the mouths [m^3/(Pa s)].
    links : numpy.ndarray
        (k, 2) the ports each link joins.
    link_conductance : numpy.ndarray
        (k,) [m^3/(Pa s)].
    fit_error : float
        ``|C_links - C| / |C|`` over the off-diagonal entries left out (0 when none) [-].
    floor_area : float
        The chamber's floor (its outline less the pillars) [m^2].
    mesh : dict
        ``points``, ``triangles``, ``depth``, ``width`` of the 2D mesh in the key frame and
        ``floor`` (bool per triangle: on the chamber's floor, not a stub).
    pressure : numpy.ndarray
        (P - 1, n_points) the basis fields' pressure [Pa] (port ``j`` at 1 Pa).
    velocity : numpy.ndarray
        (P - 1, n_triangles, 2) their depth-averaged velocity at the triangle centroids
        [m/s at 1 Pa s].
    dofs : numpy.ndarray
        (P - 1, 2 n_nodes) their quadratic velocity coefficients (see
        :func:`chipflow.field.solve.velocity_at`).
    """

    conductance: np.ndarray
    stub_resistance: np.ndarray
    chamber: np.ndarray
    links: np.ndarray
    link_conductance: np.ndarray
    fit_error: float
    floor_area: float
    mesh: dict
    pressure: np.ndarray
    velocity: np.ndarray
    dofs: np.ndarray

    @property
    def resistance(self) -> float:
        """Mouth-to-mouth resistance of a chamber with two ports [Pa s/m^3 at 1 Pa s]."""
        return float(-1.0 / self.chamber[0, 1])


def _compute(key: ChamberKey) -> dict:
    from scipy.sparse.linalg import splu

    from chipflow.errors import FieldError
    from chipflow.field.mesh import build_mesh
    from chipflow.field.solve import field_system
    from chipflow.physics.duct import resistance

    regions, ports, stubs, chamber = chamber_regions(key)
    n = len(ports)
    mesh = build_mesh(regions, ports, across=ACROSS)
    names = [p.name for p in ports]
    y = np.zeros((n, n))
    pressures, velocities, dofs = [], [], []
    # one assembly and one factorisation; port j at 1 Pa (the others at 0) is the right-hand
    # side minus port j's flux rows (Stokes flow is linear in the port pressures)
    system = field_system(mesh, dict.fromkeys(names, 0.0), 1.0)
    lu = splu(system.matrix(), permc_spec="COLAMD")
    fx = np.array([system.port_flux[name][0] for name in names])
    fy = np.array([system.port_flux[name][1] for name in names])
    zero = np.zeros(system.pressure_free.size)
    rhs = np.column_stack([np.r_[-fx[j], -fy[j], zero] for j in range(n - 1)])
    xs = lu.solve(rhs)
    if not np.all(np.isfinite(xs)):
        raise FieldError("the chamber's field solve failed (singular system)")
    nv = system.velocity_free.size
    y[:, : n - 1] = -(fx @ xs[:nv] + fy @ xs[nv : 2 * nv])
    nn = system.space.n_nodes
    mid = system.space.nodes[:, 3:]
    for j in range(n - 1):  # the basis field of each driven port
        u, p = system.unpack(xs[:, j])
        p[np.unique(mesh.port_edges[names[j]])] = 1.0
        velocities.append(np.column_stack((u[:nn][mid].mean(axis=1), u[nn:][mid].mean(axis=1))))
        pressures.append(p)
        dofs.append(u)
    y[:, n - 1] = -y[:, : n - 1].sum(axis=1)
    y = 0.5 * (y + y.T)
    r = np.array([float(resistance(q.width, q.depth, 1.0, 1.0)) for q in key.ports]) * np.asarray(
        stubs
    )
    centroids = mesh.points[mesh.triangles].mean(axis=1)
    shapely.prepare(chamber)
    floor = shapely.contains_xy(chamber, centroids[:, 0], centroids[:, 1])
    return {
        "conductance": y,
        "stub_resistance": r,
        "points": mesh.points,
        "triangles": mesh.triangles,
        "depth": mesh.depth,
        "width": mesh.width,
        "floor": floor,
        "floor_area": float(chamber.area),
        "pressure": np.array(pressures),
        "velocity": np.array(velocities),
        "dofs": np.array(dofs),
    }


def solve_chamber(key: ChamberKey) -> ChamberSolution:
    """The 2D solution of a chamber (kept in the field cache; see the module notes).

    Raises
    ------
    FieldError
        When the chamber cannot be meshed or solved.
    """
    return _solve(key)


_solved: dict = {}


def _solve(key: ChamberKey) -> ChamberSolution:
    if key in _solved:
        return _solved[key]
    from chipflow.field.cache import cached

    found = cached("chamber", key, lambda: _compute(key), {"across": ACROSS, "stub": STUB_WIDTHS})
    y = np.asarray(found["conductance"], float)
    r = np.asarray(found["stub_resistance"], float)
    c = y @ np.linalg.inv(np.eye(len(r)) - np.diag(r) @ y)
    c = 0.5 * (c + c.T)
    links, g, error = _links_of(c)
    sol = ChamberSolution(
        conductance=y,
        stub_resistance=r,
        chamber=c,
        links=links,
        link_conductance=g,
        fit_error=error,
        floor_area=float(found["floor_area"]),
        mesh={k: np.asarray(found[k]) for k in ("points", "triangles", "depth", "width", "floor")},
        pressure=np.asarray(found["pressure"]),
        velocity=np.asarray(found["velocity"]),
        dofs=np.asarray(found["dofs"]),
    )
    _solved[key] = sol
    return sol


def _links_of(c: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
    n = c.shape[0]
    iu = np.triu_indices(n, 1)
    g = -c[iu]
    strong = g > LINK_FLOOR * g.max()
    pairs = np.column_stack(iu)[strong]
    left = np.where(strong, 0.0, g)
    error = float(np.linalg.norm(left) / np.linalg.norm(g)) if np.any(left) else 0.0
    return pairs, g[strong], error


def chamber_links(key: ChamberKey) -> tuple[np.ndarray, np.ndarray, float]:
    """The chamber's network: ``(pairs, conductance, fit_error)``, pairs of port indices
    joined by links of conductance [m^3/(Pa s) at 1 Pa s] (see the module notes)."""
    sol = solve_chamber(key)
    return sol.links, sol.link_conductance, sol.fit_error


def link_width(conductance: np.ndarray, depth: float, area: float) -> float:
    """The common width [m] of equivalent ducts of ``depth`` [m] with the given conductances
    [m^3/(Pa s) at 1 Pa s] whose floors add up to ``area`` [m^2]: each duct ``i`` is
    ``1 / (g_i R'(w))`` long, so the area ``w / R'(w) * sum(1 / g_i)`` grows with ``w``.

    >>> from chipflow.physics.duct import resistance
    >>> g = 1 / float(resistance(2e-3, 1e-4, 8e-3, 1.0))    # a 2 x 8 mm duct, 100 um deep
    >>> round(link_width(np.array([g]), 1e-4, 16e-6) * 1e3, 9)
    2.0
    """
    from chipflow.physics.duct import resistance

    inverse = float(np.sum(1.0 / np.asarray(conductance, float)))

    def area_of(w: float) -> float:
        return w / float(resistance(w, depth, 1.0, 1.0)) * inverse

    lo, hi = 1e-9, 10.0
    for _ in range(200):  # bisection in log w; the area grows with w
        mid = math.sqrt(lo * hi)
        lo, hi = (mid, hi) if area_of(mid) < area else (lo, mid)
    return math.sqrt(lo * hi)


#: Share of a chamber's floor left to the links between ports of one end wall, which carry
#: no flow when the tree holds every inlet port at one pressure and every outlet at another
#: (:func:`link_floors`) [-].
SIDE_FLOOR = 1e-9


def link_floors(key: ChamberKey, pairs: np.ndarray, conductance: np.ndarray, area: float):
    """The floor area [m^2] each link of a chamber stands for: its share of the chamber's flow
    when every inlet port is at one pressure and every outlet port at another (the drive a
    tree gives it), so that every link's residence time is the chamber's under that drive;
    links between ports of one end wall carry none of it and share :data:`SIDE_FLOOR` of the
    floor. A chamber between two channels has one link and the whole floor.

    >>> port = (ChamberPort(0, 1e-3, 2e-4, 1e-4), ChamberPort(1, 1e-3, 2e-4, 1e-4))
    >>> key = ChamberKey(2e-3, 8e-3, 1e-4, 0.0, 0.0, None, port, 1e-6)
    >>> link_floors(key, np.array([[0, 1]]), np.array([1e-12]), 16e-6).tolist()
    [1.6e-05]
    """
    side = np.array([p.side for p in key.ports])[np.asarray(pairs, int)]
    g = np.asarray(conductance, float)
    through = side[:, 0] != side[:, 1]
    if through.all():
        return area * g / g.sum()
    share = np.where(through, g / g[through].sum() * (1 - SIDE_FLOOR), 0.0)
    share[~through] = SIDE_FLOOR / int((~through).sum())
    return area * share


def link_widths(conductance: np.ndarray, depth: float, floors: np.ndarray) -> np.ndarray:
    """The width [m] of each equivalent duct of ``depth`` [m] with the given conductance
    [m^3/(Pa s) at 1 Pa s] and floor area ``floors`` [m^2]: a duct of width ``w`` is
    ``1 / (g R'(w))`` long, so its floor ``w / (g R'(w))`` grows with ``w`` (bisection in
    log w, all links at once).

    >>> from chipflow.physics.duct import resistance
    >>> g = 1 / float(resistance(2e-3, 1e-4, 8e-3, 1.0))    # a 2 x 8 mm duct, 100 um deep
    >>> round(float(link_widths(np.array([g]), 1e-4, np.array([16e-6]))[0]) * 1e3, 9)
    2.0
    """
    from chipflow.physics.duct import resistance

    g = np.asarray(conductance, float)
    want = np.asarray(floors, float)
    lo, hi = np.full(g.shape, 1e-12), np.full(g.shape, 10.0)
    for _ in range(200):  # bisection in log w; the floor grows with w
        mid = np.sqrt(lo * hi)
        below = mid / (g * np.asarray(resistance(mid, depth, 1.0, 1.0), float)) < want
        lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
    return np.sqrt(lo * hi)


# -- the field at an operating point -------------------------------------------------------
def _weights(sol: ChamberSolution, q: np.ndarray) -> np.ndarray:
    return np.asarray(q[:-1], float) - float(q[-1])


def stub_pressures(
    key: ChamberKey, mouth_pressure: np.ndarray, inflow: np.ndarray, viscosity: float
) -> np.ndarray:
    """Pressures at the stub ends [Pa] from the network's pressures at the mouths [Pa] and
    the flows into the chamber through each port [m^3/s] (each stub in series)."""
    sol = solve_chamber(key)
    return np.asarray(mouth_pressure, float) + viscosity * sol.stub_resistance * np.asarray(
        inflow, float
    )


def chamber_field(key: ChamberKey, q: np.ndarray, viscosity: float):
    """The chamber's field (:class:`chipflow.field.FieldSolution`, key frame) at stub-end
    pressures ``q`` [Pa] and ``viscosity`` [Pa s]: the basis fields weighted by the port
    pressures (Stokes flow is linear)."""
    from chipflow.field.calibration import floor_factor
    from chipflow.field.model import FieldMesh, FieldSolution

    sol = solve_chamber(key)
    q = np.asarray(q, float)
    w = _weights(sol, q)
    m = sol.mesh
    mesh = FieldMesh(m["points"], m["triangles"], m["depth"], m["width"], {}, np.zeros((0, 2)))
    velocity = np.tensordot(w, sol.velocity, axes=1) / viscosity
    pressure = q[-1] + np.tensordot(w, sol.pressure, axes=1)
    dofs = np.tensordot(w, sol.dofs, axes=1) / viscosity
    speed = np.hypot(velocity[:, 0], velocity[:, 1])
    shear = floor_factor(m["depth"], m["width"]) * viscosity * speed / m["depth"]
    flows = sol.conductance @ q / viscosity
    names = [f"port{i}" for i in range(len(q))]
    return FieldSolution(
        mesh=mesh,
        viscosity=viscosity,
        pressure=pressure,
        velocity=velocity,
        velocity_vertices=np.zeros((len(m["points"]), 2)),
        floor_shear=shear,
        port_flows=dict(zip(names, flows.tolist(), strict=True)),
        port_pressures=dict(zip(names, q.tolist(), strict=True)),
        dofs=dofs,
    )


def floor_stats(key: ChamberKey, q: np.ndarray, viscosity: float, window=None):
    """Floor shear of the chamber's floor (:class:`~chipflow.field.shear.ShearStats`) at
    stub-end pressures ``q`` [Pa], and the flows into it through its ports [m^3/s].

    ``window`` is the cells' ``(low, high)`` floor shear [Pa]."""
    from chipflow.field.shear import shear_stats

    field = chamber_field(key, q, viscosity)
    sol = solve_chamber(key)
    floor = sol.mesh["floor"].astype(bool)
    stats = shear_stats(field.floor_shear[floor], field.mesh.area[floor], window)
    return stats, sol.conductance @ np.asarray(q, float) / viscosity


def unsupported_span(polygon: shapely.Polygon, grid: float) -> tuple[float, float, float]:
    """The roof's largest unsupported span [m]: the diameter of the largest circle inside
    ``polygon`` (its holes are pillars), and that circle's centre (x, y) [m]."""
    line = shapely.maximum_inscribed_circle(polygon, tolerance=grid / 4)
    (cx, cy), (ex, ey) = np.asarray(line.coords)
    return 2.0 * math.hypot(ex - cx, ey - cy), float(cx), float(cy)


# -- placing ---------------------------------------------------------------------------------
def place(xy: np.ndarray, origin: tuple[float, float], turns: int) -> np.ndarray:
    """Key-frame points (n, 2) [m] in the chip frame: turned by ``turns`` quarter turns
    counter-clockwise, then moved to ``origin`` [m] (exact)."""
    xy = np.asarray(xy, float)
    x, y = xy[..., 0], xy[..., 1]
    t = turns % 4
    turned = {0: (x, y), 1: (-y, x), 2: (-x, -y), 3: (y, -x)}[t]
    return np.stack((turned[0] + origin[0], turned[1] + origin[1]), axis=-1)


def placed_polygon(poly: shapely.Polygon, origin, turns: int) -> shapely.Polygon:
    """A key-frame polygon in the chip frame (exact on the grid)."""
    shell = place(np.asarray(poly.exterior.coords), origin, turns)
    holes = [place(np.asarray(h.coords), origin, turns) for h in poly.interiors]
    out = shapely.Polygon(shell, holes)
    return shapely.orient_polygons(out) if hasattr(shapely, "orient_polygons") else out


def undrawn_key(shape, inlet: tuple[float, float], outlet: tuple[float, float], grid: float,
                margin: float) -> ChamberKey:  # fmt: skip
    """The key of a chamber of a network that is not drawn: its two channels (width, depth)
    [m] meet it on its axis."""
    ports = [
        ChamberPort(0, shape.width / 2, inlet[0], inlet[1]),
        ChamberPort(1, shape.width / 2, outlet[0], outlet[1]),
    ]
    return chamber_key(shape, ports, grid, margin)
