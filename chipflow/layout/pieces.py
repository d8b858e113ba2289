"""Pieces: the places of a drawing whose flow is not that of straight channels, solved in 2D.

A drawn chip is straight runs and arcs of known width, which the 1D network counts exactly,
joined at *pieces*: junctions, where two or more channels meet at a node, and port steps,
where a punched hole meets its channel. Each piece has a geometry key: a hashable, rounded
description in a frame of its own (rotation- and mirror-normalised), so that every piece of
the same shape, wherever and however turned it is drawn, has the same key and is solved once
(:func:`solve_piece`, cached per process; one function of the key, so that a cache on disk can
wrap it).

Kinds of key
------------
:class:`~chipflow.layout.junctions.Junction`
    A symmetric split of a tree (a parent and two mirrored children). Its children always end
    at one pressure (every subtree below is alike), so one solve with the children's ports at
    zero gives all the network needs: the parent-to-children resistance, whose excess over
    the centrelines goes to the parent as one equivalent length (``"fan"`` pieces).
:class:`JunctionKey`
    Any junction: N arms at any angles, widths and depths, each with the start of its
    centreline (straight runs and arcs) from the node. Solved as an N-port: N - 1 solves
    give the conductance matrix ``Y`` between the arms' ports (stubs of a few widths). The
    1D network represents the junction as a star: arm ``i`` a channel of its width from the
    node to its port, of length ``L_i + dL_i``. For three arms the star is exactly equivalent
    to the 2D three-port (the delta-star transformation of its three conductances); for more
    arms it is the least-squares fit of the star's conductance matrix to ``Y`` (its ``N``
    resistances against the ``N (N - 1) / 2`` conductances of the 2D piece), and the relative
    misfit is kept (:attr:`PieceSolution.fit_error`). For two arms (an elbow or a width step)
    only the series resistance is defined; both arms get the same equivalent length, so most
    of the excess lands on the arm of higher resistance per length (the narrower, shallower).
:class:`PortKey`
    A punched hole of a diameter and the channel leaving it: the hole is at the port pressure
    (its liquid column is a reservoir), the channel's mouth is the arc of the hole's rim. The
    network's port node sits on the rim on the channel's axis; the 2D solve (the hole as the
    field solve of the whole chip has it: one grid step more than the punch radius, plus one)
    gives the excess resistance of the entry, counted as an equivalent length of the channel.

Equivalent lengths are in metres of the arm's own channel; their sum with the drawn lengths is
what the network solves (:mod:`chipflow.layout.extract`).

References
----------
H. Bruus, *Theoretical Microfluidics*, Oxford University Press, 2008, ch. 4 (hydraulic
resistance, compound channels, equivalent circuits). A. E. Kennelly, "Equivalence of
triangles and three-pointed stars in conducting networks", Electrical World and Engineer 34
(1899) 413-414 (the delta-star transformation).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import shapely

from chipflow.layout.junctions import ACROSS, STUB_WIDTHS, Junction, junction_excess_length
from chipflow.layout.trace import offset_ring, trace

__all__ = [
    "Arm",
    "JunctionKey",
    "PortKey",
    "PieceSolution",
    "junction_key",
    "key_arms",
    "junction_disc",
    "solve_piece",
    "star_fit",
    "ANGLE_DIGITS",
    "LENGTH_DIGITS",
]

#: Rounding of angles in keys [rad, decimal digits] and of lengths [m, decimal digits].
ANGLE_DIGITS = 9
LENGTH_DIGITS = 12


@dataclass(frozen=True)
class Arm:
    """One arm of a junction, in the key's frame.

    Attributes
    ----------
    heading : float
        Direction in which the arm leaves the node [rad].
    width, depth : float
        [m].
    pieces : tuple
        The start of its centreline from the node: straight runs shorter than the reach of the
        junction and the arcs that start within it (see :func:`key_arms`); the solve appends
        a straight stub of :data:`~chipflow.layout.junctions.STUB_WIDTHS` widest widths.
    """

    heading: float
    width: float
    depth: float
    pieces: tuple = ()


@dataclass(frozen=True)
class JunctionKey:
    """A junction of any number of arms (see the module notes).

    Attributes
    ----------
    arms : tuple of Arm
        Arm 0 leaves the node along -x (heading pi); the others follow counter-clockwise.
    disc : float
        Radius of the disc drawn at the node [m] (0: none).
    overlap : float
        Radius around the node within which the deepest arm's layer covers the shallower
        arms [m] (0: one depth).
    """

    arms: tuple[Arm, ...]
    disc: float = 0.0
    overlap: float = 0.0


@dataclass(frozen=True)
class PortKey:
    """A punched hole and the channel leaving it along +x.

    Attributes
    ----------
    diameter : float
        Punch diameter [m].
    grid : float
        Mask grid [m] (the field's hole is one grid step larger than the punch, plus one).
    width, depth : float
        The channel [m].
    """

    diameter: float
    grid: float
    width: float
    depth: float


@dataclass(frozen=True)
class PieceSolution:
    """The equivalent lengths of one piece.

    Attributes
    ----------
    lengths : tuple of float
        Per arm of the key, the length of that arm's channel that the piece adds (negative
        where it conducts better than the centrelines meeting at a point) [m]; NaN when the
        piece could not be meshed or solved in 2D.
    fit_error : float
        Relative misfit of the star model to the 2D conductances (0 where exact) [-].
    """

    lengths: tuple[float, ...]
    fit_error: float = 0.0


def _r(value: float, digits: int) -> float:
    out = round(float(value), digits)
    return 0.0 if out == 0 else out  # no negative zero in keys


def _wrap(angle: float) -> float:
    """An angle in (-pi, pi] [rad]."""
    out = math.remainder(angle, 2 * math.pi)
    return math.pi if out <= -math.pi else out


def _arm_tuple(arm: Arm) -> tuple:
    return (arm.heading, arm.width, arm.depth, arm.pieces)


def key_arms(pieces: tuple, reach: float) -> tuple:
    """The start of an arm's centreline that a junction key keeps: straight runs that end
    within ``reach`` [m] of the node and arcs that start within it; the first longer straight
    run ends the arm (the solve's stub stands for it).

    >>> key_arms((("L", 1e-4), ("A", 2e-4, 1.0), ("L", 5e-3)), 6e-4)
    (('L', 0.0001), ('A', 0.0002, 1.0))
    """
    kept, reached = [], 0.0
    for piece in pieces:
        if reached >= reach:
            break
        if piece[0] == "L":
            if reached + piece[1] >= reach:
                break
            reached += piece[1]
        else:
            reached += piece[1] * abs(piece[2])
        kept.append(piece)
    return tuple(kept)


def junction_key(
    arms: list[tuple[float, float, float, tuple]], disc: float = 0.0, overlap: float = 0.0
) -> tuple[JunctionKey, list[int], float, bool]:
    """The normalised key of a junction whose arms are given in the chip frame.

    Parameters
    ----------
    arms : list of (heading, width, depth, pieces)
        Each arm's direction from the node [rad], width and depth [m], and the start of its
        centreline from the node (see :func:`key_arms`).
    disc, overlap : float
        As in :class:`JunctionKey` [m].

    Returns
    -------
    key : JunctionKey
    order : list of int
        For each arm of the key, the index of the given arm.
    rotation : float
        The key's frame turned by this angle (after ``mirror``) is the chip frame [rad].
    mirror : bool

    Every choice of first arm and both mirror images are tried; the smallest key wins, so
    congruent junctions get equal keys.

    >>> t = [(math.pi, 2e-4, 5e-5, ()), (math.pi / 2, 1e-4, 5e-5, ()),
    ...      (-math.pi / 2, 1e-4, 5e-5, ())]
    >>> a = junction_key(t)[0]
    >>> b = junction_key([(h + 0.3, w, d, p) for h, w, d, p in t])[0]
    >>> a == b, len(a.arms)
    (True, 3)
    """
    best = None
    for mirror in (False, True):
        sign = -1.0 if mirror else 1.0
        flipped = [
            (
                sign * h,
                w,
                d,
                tuple(p if p[0] == "L" else ("A", p[1], sign * p[2]) for p in pieces),
            )
            for h, w, d, pieces in arms
        ]
        for ref in range(len(arms)):
            rotation = math.pi - flipped[ref][0]
            turned = [_wrap(h + rotation) for h, *_ in flipped]
            turned[ref] = math.pi
            order = sorted(range(len(arms)), key=lambda i: (turned[i] - math.pi) % (2 * math.pi))
            order.sort(key=lambda i: 0 if i == ref else 1)  # the reference first (stable)
            key_arms_ = tuple(
                Arm(
                    _r(turned[i], ANGLE_DIGITS),
                    _r(flipped[i][1], LENGTH_DIGITS),
                    _r(flipped[i][2], LENGTH_DIGITS),
                    tuple(
                        ("L", _r(p[1], LENGTH_DIGITS))
                        if p[0] == "L"
                        else ("A", _r(p[1], LENGTH_DIGITS), _r(p[2], ANGLE_DIGITS))
                        for p in flipped[i][3]
                    ),
                )
                for i in order
            )
            candidate = tuple(_arm_tuple(a) for a in key_arms_)
            if best is None or candidate < best[0]:
                best = (candidate, key_arms_, order, rotation, mirror)
    _, key_arms_, order, rotation, mirror = best
    # key = R(rotation) M chip, so chip = M R(-rotation) key = R(rotation) M key
    key = JunctionKey(key_arms_, _r(disc, LENGTH_DIGITS), _r(overlap, LENGTH_DIGITS))
    return key, order, _wrap(rotation), mirror


def junction_disc(
    headings: np.ndarray, widths: np.ndarray, min_feature: float, acute: bool = True
) -> float:
    """Radius [m] of the disc drawn at a junction (0: none).

    A junction whose arms all meet at multiples of 90 degrees (a T, a cross, an elbow) has
    flat walls and no disc. Otherwise a disc as wide as the widest arm rounds the ends and
    corners there (as for the Y of a tree); where two neighbouring arms meet at less than 90
    degrees (``acute``), the disc reaches past the tip of the PDMS wedge between them until
    that wedge is ``min_feature`` thick where the disc cuts it, so no sliver is left.

    >>> round(junction_disc(np.array([np.pi, 1.1, -1.1]), np.full(3, 1e-4), 25e-6) * 1e6, 1)
    50.0
    >>> round(junction_disc(np.array([np.pi, 0.5, -0.5]), np.full(3, 1e-4), 25e-6) * 1e6, 1)
    127.2
    >>> junction_disc(np.array([np.pi, np.pi / 2, -np.pi / 2]), np.full(3, 1e-4), 25e-6)
    0.0
    """
    h = np.asarray(headings, float)
    w = np.asarray(widths, float)
    diff = np.abs(np.remainder(h[:, None] - h[None, :] + np.pi / 4, np.pi / 2) - np.pi / 4)
    if np.all(diff < 1e-9):
        return 0.0
    radius = float(w.max()) / 2
    if not acute or h.size < 2:
        return radius
    order = np.argsort(np.remainder(h, 2 * np.pi))
    hs, half = np.remainder(h[order], 2 * np.pi), w[order] / 2
    for i in range(hs.size):  # loop over the arms of one junction
        j = (i + 1) % hs.size
        alpha = (hs[j] - hs[i]) % (2 * np.pi)
        if not 1e-9 < alpha < np.pi / 2 - 1e-9:
            continue
        # the walls facing each other meet at the wedge's tip (arm i along +x, arm j at alpha)
        x_tip = (half[i] * math.cos(alpha) + half[j]) / math.sin(alpha)
        tip = math.hypot(x_tip, half[i])
        radius = max(radius, tip + min_feature / (2 * math.tan(alpha / 2)))
    return radius


# -- solving ---------------------------------------------------------------------------------
def solve_piece(key) -> PieceSolution:
    """The equivalent lengths of the piece ``key`` (cached per process).

    Parameters
    ----------
    key : Junction, JunctionKey, PortKey or ChamberKey

    Returns
    -------
    PieceSolution
        Per arm of the key (a :class:`~chipflow.layout.junctions.Junction`: the parent, then
        its two children, which take none; a :class:`PortKey`: its one channel; a
        :class:`~chipflow.layout.chamber.ChamberKey`: none for each port's channel, the
        chamber's network being its links, :func:`chipflow.layout.chamber.chamber_links`).
    """
    return _solve(key)


@lru_cache(maxsize=1024)
def _solve(key) -> PieceSolution:
    if isinstance(key, Junction):  # a binary split: cached on disk by its own function
        return PieceSolution((junction_excess_length(key), 0.0, 0.0))
    from chipflow.field.cache import cached

    settings = {"across": ACROSS, "stub_widths": STUB_WIDTHS}
    if isinstance(key, PortKey):
        kind, compute = "port", lambda: {"lengths": [_port_excess(key)], "fit_error": 0.0}
    elif _is_chamber(key):  # its own solve and cache entry (chipflow.layout.chamber)
        from chipflow.layout.chamber import solve_chamber

        return PieceSolution((0.0,) * key.n_ports, solve_chamber(key).fit_error)
    elif isinstance(key, JunctionKey):

        def compute():
            solved = _junction_lengths(key)
            return {"lengths": list(solved.lengths), "fit_error": solved.fit_error}

        kind = "junction-arms"
    else:
        raise TypeError(f"not a piece key: {key!r}")
    found = cached(kind, key, compute, settings)
    lengths = np.atleast_1d(found["lengths"])
    return PieceSolution(tuple(float(v) for v in lengths), float(found["fit_error"]))


solve_piece.cache_clear = _solve.cache_clear  # type: ignore[attr-defined]


def _is_chamber(key) -> bool:
    from chipflow.layout.chamber import ChamberKey

    return isinstance(key, ChamberKey)


def _stub(key: JunctionKey) -> float:
    return STUB_WIDTHS * max(a.width for a in key.arms)


def _arm_trace(arm: Arm, stub: float):
    radius = max([p[1] for p in arm.pieces if p[0] == "A"] + [arm.width])
    return trace(arm.heading, [*arm.pieces, ("L", stub)], radius * 1e-4)


def junction_regions(key: JunctionKey):
    """The junction as drawn with a straight stub on every arm: field regions, ports (arm
    ``i``'s end is port ``"arm<i>"``) and each arm's centreline length [m]."""
    from chipflow.field import FieldPort, FieldRegion

    stub = _stub(key)
    by_depth: dict[float, list] = {}
    polys, ports, lengths = [], [], []
    for i, arm in enumerate(key.arms):
        path = _arm_trace(arm, stub)
        ring = offset_ring(path, arm.width)
        m = path.xy.shape[0]
        poly = shapely.make_valid(shapely.Polygon(ring))
        polys.append(poly)
        by_depth.setdefault(arm.depth, []).append(poly)
        ports.append(FieldPort(f"arm{i}", shapely.LineString([ring[m - 1], ring[m]]), 0.0))
        lengths.append(path.length)
    regions = [FieldRegion(shapely.union_all(p), d) for d, p in sorted(by_depth.items())]
    deep = max(by_depth)
    if key.disc > 0:
        regions.append(FieldRegion(shapely.Point(0.0, 0.0).buffer(key.disc, quad_segs=16), deep))
    if key.overlap > 0 and len(by_depth) > 1:
        reach = shapely.Point(0.0, 0.0).buffer(key.overlap, quad_segs=16)
        for arm, poly in zip(key.arms, polys, strict=True):
            if arm.depth < deep:
                regions.append(FieldRegion(shapely.intersection(poly, reach), deep))
    return regions, ports, lengths


def star_fit(y: np.ndarray) -> tuple[np.ndarray, float]:
    """Arm resistances of the star whose conductance matrix best matches ``y`` [Pa s/m^3].

    Parameters
    ----------
    y : numpy.ndarray
        (N, N) symmetric conductance matrix, rows summing to zero (flow into each port per
        pressure at each port) [m^3/(Pa s)], N >= 3.

    Returns
    -------
    resistance : numpy.ndarray
        (N,) star arm resistances [Pa s/m^3].
    fit_error : float
        ``|Y_star - Y| / |Y|`` over the off-diagonal entries [-] (0 for N = 3: exact).

    Examples
    --------
    A star of 1, 2 and 3 units is recovered from its own conductance matrix:

    >>> g = 1 / np.array([1.0, 2.0, 3.0])
    >>> y = np.diag(g) - np.outer(g, g) / g.sum()
    >>> np.round(star_fit(y)[0], 9).tolist()
    [1.0, 2.0, 3.0]
    """
    n = y.shape[0]
    iu = np.triu_indices(n, 1)
    target = -y[iu]
    if n == 3:
        (c01, c02, c12) = target  # the delta's conductances between the ports
        s = c01 * c12 + c12 * c02 + c02 * c01
        r = np.array([c12, c02, c01]) / s
        return r, 0.0
    from scipy.optimize import least_squares

    def model(log_g: np.ndarray) -> np.ndarray:
        g = np.exp(log_g)
        return np.outer(g, g)[iu] / g.sum()

    # start: the star whose arms carry each port's conductance to all the others
    g0 = np.clip(np.diag(y), 1e-300, None) * n / (n - 1)
    scale = np.abs(target).max()
    fit = least_squares(
        lambda lg: (model(lg) - target) / scale, np.log(g0), xtol=1e-14, ftol=1e-14, gtol=1e-14
    )
    g = np.exp(fit.x)
    error = float(np.linalg.norm(model(fit.x) - target) / np.linalg.norm(target))
    return 1.0 / g, error


def _conductance(regions, ports, n: int) -> np.ndarray:
    """(n, n) port conductance matrix of a 2D piece at unit viscosity: one mesh, one
    factorisation, one right-hand side per port but the last (rows sum to zero)."""
    from scipy.sparse.linalg import splu

    from chipflow.errors import FieldError
    from chipflow.field.mesh import build_mesh
    from chipflow.field.solve import field_system

    mesh = build_mesh(list(regions), list(ports), across=ACROSS)
    names = [p.name for p in ports]
    y = np.zeros((n, n))
    lu = None
    for j in range(n - 1):  # one right-hand side per driven port (the same matrix)
        system = field_system(mesh, {name: float(k == j) for k, name in enumerate(names)}, 1.0)
        if lu is None:
            lu = splu(system.matrix(), permc_spec="COLAMD")
        x = lu.solve(system.rhs)
        if not np.all(np.isfinite(x)):
            raise FieldError("the piece's field solve failed (singular system)")
        flows = system.flows(x)  # into the domain through each port
        y[:, j] = [flows[name] for name in names]
    y[:, n - 1] = -y[:, : n - 1].sum(axis=1)
    return 0.5 * (y + y.T)


def _junction_lengths(key: JunctionKey) -> PieceSolution:
    from chipflow.errors import FieldError
    from chipflow.physics.duct import resistance

    n = len(key.arms)
    if n < 2:
        return PieceSolution((0.0,) * n)
    per_length = np.array([float(resistance(a.width, a.depth, 1.0, 1.0)) for a in key.arms])
    try:
        regions, ports, lengths = junction_regions(key)
        y = _conductance(regions, ports, n)
    except FieldError:
        return PieceSolution((math.nan,) * n, math.nan)
    lengths = np.asarray(lengths)
    if n == 2:  # the same equivalent length on both arms
        excess = 1.0 / -y[0, 1] - float(np.sum(per_length * lengths))
        return PieceSolution((excess / float(per_length.sum()),) * 2)
    r, error = star_fit(y)
    return PieceSolution(tuple((r / per_length - lengths).tolist()), error)


def port_regions(key: PortKey):
    """A punched hole and a straight stub of its channel: field regions, ports (``"hole"``
    at the hole, ``"end"`` at the stub's end) and the stub's length from the rim [m]."""
    from chipflow.field import FieldPort, FieldRegion

    r = key.diameter / 2
    stub = STUB_WIDTHS * key.width
    half = key.width / 2
    pad = shapely.union(
        shapely.Point(0.0, 0.0).buffer(r, quad_segs=32), shapely.box(0.0, -half, r + stub, half)
    )
    hole = shapely.Point(0.0, 0.0).buffer(r + 2 * key.grid, quad_segs=32)
    end = shapely.LineString([(r + stub, half), (r + stub, -half)])
    ports = [FieldPort("hole", hole, 1.0), FieldPort("end", end, 0.0)]
    return [FieldRegion(pad, key.depth)], ports, stub


def _port_excess(key: PortKey) -> float:
    from chipflow.errors import FieldError
    from chipflow.field import solve_field
    from chipflow.physics.duct import resistance

    regions, ports, stub = port_regions(key)
    try:
        sol = solve_field(regions, ports, 1.0, across=ACROSS)
    except FieldError:
        return math.nan
    per_length = float(resistance(key.width, key.depth, 1.0, 1.0))
    return 1.0 / sol.port_flows["hole"] / per_length - stub
