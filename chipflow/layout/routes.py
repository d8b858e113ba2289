"""An explicit network with coordinates as a network with coordinates for the engine.

Each channel of a drawn network runs from its ``from`` node through its ``via`` corners to its
``to`` node: straight runs joined by circular arcs of radius ``bend_radius`` times its width
(rounded up to the grid) at every corner, each arc tangent to the two runs it joins, so the
corner itself is cut off by ``r tan(turn / 2)`` on either side. A channel that ends at a port
(a punched hole) starts or ends at the hole's rim, on the line to its first or last corner.

On the grid: nodes and corners are put on the mask grid. A channel an odd number of grid
steps wide is moved by half a step along x and y, so that both walls of its runs along x and
along y lie on the grid (its centreline passes within 0.71 grid steps of its nodes; its length
does not change); its runs at other angles are measured on the mask after drawing. Widths
that are not a whole number of grid steps are drawn (and solved) at the nearest one, with a
warning. Nodes where channels meet get the engine's junctions; each is its own piece.
"""

from __future__ import annotations

import math

import numpy as np

from chipflow.errors import LayoutError
from chipflow.layout.model import PortMark
from chipflow.layout.pieces import junction_disc
from chipflow.layout.plan import ceil_grid, drawn_width, half_offset
from chipflow.layout.rules import Chip, LayoutRules
from chipflow.layout.sketch import ChamberPlace, ChannelGroup, Sketch
from chipflow.layout.trace import trace

__all__ = ["network_sketch"]


def _mm(p) -> str:
    return f"({p[0] * 1e3:.4g} mm, {p[1] * 1e3:.4g} mm)"


def network_sketch(drawing, name: str, chip: Chip, rules: LayoutRules) -> Sketch:
    """The network with coordinates of an explicit network's drawing.

    Parameters
    ----------
    drawing : chipflow.spec.network.NetworkDrawing
        Node positions, the channels with their corners, the punched nodes.
    name : str
        Design name.
    chip : Chip
    rules : LayoutRules

    Raises
    ------
    LayoutError
        A corner too close to its neighbours for its arc, a channel whose corners turn it
        back on itself, a channel that a port hole swallows; the message names the channel
        and the corner.
    """
    grid = rules.grid
    names = list(drawing.positions)
    index = {n: i for i, n in enumerate(names)}

    def snap(p):
        return np.array([round(p[0] / grid) * grid, round(p[1] / grid) * grid])

    node_xy = np.array([snap(drawing.positions[n]) for n in names], dtype=float)
    r_hole = chip.punch_diameter / 2
    keep = r_hole + rules.port_keepout
    holes = set(drawing.ports)
    ports = tuple(
        PortMark(
            n, float(node_xy[index[n], 0]), float(node_xy[index[n], 1]), chip.punch_diameter, keep
        )  # fmt: skip
        for n in drawing.ports
    )
    warnings: list[str] = []

    # 1. every channel's corner points, width and runs
    paths = []
    for route in drawing.routes:  # loop over the channels of a network written by hand
        width = drawn_width(route.width, grid)
        if not math.isclose(width, route.width, rel_tol=0, abs_tol=1e-12):
            warnings.append(
                f"channel {route.name!r}: width {route.width * 1e6:.4g} um is not a whole number "
                f"of {grid * 1e6:g} um grid steps; drawn and solved {width * 1e6:.4g} um wide"
            )
        pts = [node_xy[index[route.a]], *(snap(v) for v in route.via), node_xy[index[route.b]]]
        pts = np.array(pts, dtype=float)
        seg = np.diff(pts, axis=0)
        length = np.hypot(seg[:, 0], seg[:, 1])
        if np.any(length <= 0):
            k = int(np.flatnonzero(length <= 0)[0])
            raise LayoutError(
                f"{route.where}: channel {route.name!r}: two of its points coincide at "
                f"{_mm(pts[k])} on the {grid * 1e6:g} um grid"
            )
        for end, at in ((0, route.a), (-1, route.b)):  # a port's channel starts at the rim
            if at in holes:
                k = 0 if end == 0 else -1
                if length[k] <= r_hole:
                    raise LayoutError(
                        f"{route.where}: channel {route.name!r}: its run from port {at!r} is "
                        f"{length[k] * 1e3:.3g} mm long, inside the {chip.punch_diameter * 1e3:g}"
                        " mm port hole; move its first corner away from the port"
                    )
                step = seg[k] / length[k] * r_hole
                if end == 0:
                    pts[0] = pts[0] + step
                else:
                    pts[-1] = pts[-1] - step
        pts = pts + half_offset(width, grid)  # walls on the grid for odd widths
        paths.append((route, width, pts))

    # 2. the arms at each node, for the clearance of each channel's last run from its junction
    arms: dict[str, list[tuple[float, float]]] = {}
    for route, width, pts in paths:
        first, last = pts[1] - pts[0], pts[-2] - pts[-1]
        arms.setdefault(route.a, []).append((math.atan2(first[1], first[0]), width))
        arms.setdefault(route.b, []).append((math.atan2(last[1], last[0]), width))
    reach = {}
    for node, here in arms.items():  # loop over the nodes of a network written by hand
        h = np.array([a[0] for a in here])
        w = np.array([a[1] for a in here])
        disc = 0.0 if node in holes else junction_disc(h, w, rules.min_feature)
        reach[node] = max(disc, float(w.max()) / 2) + rules.alignment_margin + grid

    # 3. the centreline of each channel: runs and arcs
    groups = []
    for i, (route, width, pts) in enumerate(paths):  # loop over the channels
        pieces = _pieces(route, width, pts, rules, grid)
        tr = trace(math.atan2(pts[1, 1] - pts[0, 1], pts[1, 0] - pts[0, 0]), pieces, grid / 4)
        last = pieces[-1]
        direction = pts[-1] - pts[-2]
        along_axis = abs(direction[0]) <= 1e-15 or abs(direction[1]) <= 1e-15
        clear = reach[route.b]
        cut = None
        if last[0] == "L" and along_axis and last[1] > clear + 2 * grid:
            cut = 0.5 * (clear + last[1])
        groups.append(
            ChannelGroup(
                templates=(tr,),
                width=width,
                depth=route.depth,
                role=route.role,
                generation=route.generation,
                variant=np.zeros(1, dtype=int),
                start=pts[:1],
                node_a=np.array([index[route.a]]),
                node_b=np.array([index[route.b]]),
                index=np.array([i]),
                cut=cut,
                names=(route.name,),
            )
        )
    chambers = tuple(
        _chamber_place(c, paths, node_xy, index, rules, warnings)
        for c in getattr(drawing, "chambers", ())
    )
    return Sketch(
        name=name,
        chip=chip,
        rules=rules,
        node_xy=node_xy,
        node_names=tuple(names),
        groups=tuple(groups),
        ports=ports,
        warnings=tuple(warnings),
        chambers=chambers,
    )


#: Directions of a chamber's axis: (unit vector, quarter turns from +x).
_AXES = (((1.0, 0.0), 0), ((0.0, 1.0), 1), ((-1.0, 0.0), 2), ((0.0, -1.0), 3))


def _chamber_place(chamber, paths, node_xy, index, rules: LayoutRules, warnings):
    """Where a chamber of an explicit network lies: along x or y from its ``from`` node to its
    ``to`` node, its walls on the grid, each of its channels meeting it along its axis."""
    from chipflow.errors import SpecError
    from chipflow.layout.chamber import ChamberPort, chamber_key
    from chipflow.spec.network import LENGTH_TOLERANCE

    grid = rules.grid
    a, b = node_xy[index[chamber.a]], node_xy[index[chamber.b]]
    d = b - a
    length = float(np.hypot(*d))
    found = [(v, t) for v, t in _AXES if np.allclose(d / max(length, 1e-300), v, atol=1e-12)]
    if not found:
        raise LayoutError(
            f"{chamber.where}: chamber {chamber.name!r} runs from {_mm(a)} to {_mm(b)}: a chamber "
            "lies along x or along y; give its two nodes the same x or the same y"
        )
    axis, turns = np.array(found[0][0]), found[0][1]
    normal = np.array([-axis[1], axis[0]])
    shape = chamber.shape
    if abs(shape.length - length) > LENGTH_TOLERANCE * length:
        raise SpecError(
            f"{chamber.where}.length: chamber {chamber.name!r} is given {shape.length * 1e3:.4g} "
            f"mm long but its nodes are {length * 1e3:.4g} mm apart (more than "
            f"{LENGTH_TOLERANCE:.0%}); move a node or change the length"
        )
    width = drawn_width(shape.width, grid)
    if not math.isclose(width, shape.width, rel_tol=0, abs_tol=1e-12):
        warnings.append(
            f"chamber {chamber.name!r}: width {shape.width * 1e6:.4g} um is not a whole number "
            f"of {grid * 1e6:g} um grid steps; drawn and solved {width * 1e6:.4g} um wide"
        )
    ends = []
    for node, side in ((chamber.a, 0), (chamber.b, 1)):
        mine = [
            (route, w, pts) for route, w, pts in paths if node in (route.a, route.b)
        ]  # fmt: skip
        route, w, pts = mine[0]
        at_start = route.a == node
        end = pts[0] if at_start else pts[-1]
        away = (pts[1] - pts[0]) if at_start else (pts[-2] - pts[-1])
        away = away / np.hypot(*away)
        want = -axis if side == 0 else axis
        if not np.allclose(away, want, atol=1e-9):
            raise LayoutError(
                f"{chamber.where}: channel {route.name!r} meets chamber {chamber.name!r} at "
                f"{_mm(node_xy[index[node]])} from the side; its run there must lie along the "
                "chamber's axis (add a corner with 'via')"
            )
        ends.append((end, w, route.depth))
    (end_a, w_a, _), _ = ends
    # the side wall y = 0 of the key frame on the grid, the axis near the feeding channel's
    s = round((float((end_a - a) @ normal) - width / 2) / grid) * grid
    origin = a + s * normal
    ports = []
    for side, (end, w, depth) in enumerate(ends):
        local = end - origin
        along, across = float(local @ axis), float(local @ normal)
        mouth = along if side == 0 else length - along
        if across - w / 2 < -1e-12 or across + w / 2 > width + 1e-12:
            raise LayoutError(
                f"{chamber.where}: the channel at the {('from', 'to')[side]} end of chamber "
                f"{chamber.name!r} is wider than the chamber"
            )
        ports.append(ChamberPort(side, across, w, depth, mouth))
    import dataclasses

    key = chamber_key(
        dataclasses.replace(shape, width=width, length=length),
        ports,
        grid,
        rules.alignment_margin,
    )
    return ChamberPlace(
        chamber.name,
        key,
        (float(origin[0]), float(origin[1])),
        turns,
        (index[chamber.a], index[chamber.b]),
    )


def _pieces(route, width: float, pts: np.ndarray, rules: LayoutRules, grid: float) -> list:
    """Straight runs and tangent arcs through the corner points ``pts`` [m]."""
    seg = np.diff(pts, axis=0)
    length = np.hypot(seg[:, 0], seg[:, 1])
    radius = ceil_grid(rules.bend_radius * width, grid)
    turn = np.zeros(len(pts))
    cut = np.zeros(len(pts))  # straight taken off each side of a corner by its arc
    for k in range(1, len(pts) - 1):  # loop over the corners of one channel
        a, b = seg[k - 1], seg[k]
        angle = math.atan2(a[0] * b[1] - a[1] * b[0], a[0] * b[0] + a[1] * b[1])
        if abs(angle) > math.radians(179):
            raise LayoutError(
                f"{route.where}: channel {route.name!r} turns back on itself at via {k} "
                f"{_mm(pts[k])}; give a corner on each side of a U-turn"
            )
        turn[k] = angle
        cut[k] = radius * math.tan(abs(angle) / 2)
    straight = length - cut[:-1] - cut[1:]
    if np.any(straight < -1e-12):
        k = int(np.flatnonzero(straight < -1e-12)[0])
        where = k if cut[k] >= cut[k + 1] else k + 1
        raise LayoutError(
            f"{route.where}: channel {route.name!r}: the bend at via {where} "
            f"{_mm(pts[where])} has a radius of {radius * 1e3:.3g} mm ([fabrication] "
            f"bend_radius x width) and needs {(cut[k] + cut[k + 1]) * 1e3:.3g} mm of straight "
            f"run between its neighbouring corners, which are {length[k] * 1e3:.3g} mm apart; "
            "move the corners further apart"
        )
    pieces: list[tuple] = []
    for k in range(len(seg)):  # runs and the arcs between them
        pieces.append(("L", max(float(straight[k]), 0.0)))
        if k + 1 < len(pts) - 1 and turn[k + 1] != 0:
            pieces.append(("A", radius, float(turn[k + 1])))
    return pieces
