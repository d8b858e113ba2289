"""Fabrication rule checks on a drawn chip.

Each broken rule gives a :class:`Finding` with the measured value, the limit, a position in
the chip frame and the channels involved:

``min_width``
    a channel narrower than the mask's smallest feature (error);
``min_gap``
    a PDMS wall thinner than ``min_gap`` between channels that are not connected, i.e. do not
    share a node (error: the wall tears or the bond fails);
``overlap``
    two channels that are not connected touch or overlap (error: a short circuit);
``outline``
    a channel or port hole inside the edge margin or off the chip (error);
``port_keepout``
    a channel other than the port's own inside a port's keep-out (error: the punch hits it);
``roof_sag``
    width/depth above the roof-sag limit (error: the roof touches the floor);
``tall_wall``
    depth/width above the tall-wall limit (error: the PDMS walls fold or tear); for a
    chamber's pillars, depth over pillar diameter (the posts fold);
``pillar_diameter``
    a chamber's pillars narrower than the mask's smallest feature (error);
``pillar_gap``
    a gap between a chamber's pillars, or between a pillar and the chamber's wall, narrower
    than the mask's smallest feature (error).

A chamber's roof is judged by its *unsupported span*, not its width: the diameter of the
largest circle of roof that touches no wall or pillar
(:func:`chipflow.layout.chamber.unsupported_span`) against the roof-sag limit on width/depth,
at that circle's centre. Pillars exist to shorten the span (common practice: posts are added
where a roof would sag); without pillars the span is the chamber's width.

All checks are vectorised: an R-tree query over the channel outlines for pairs, numpy for the
per-channel ratios. Per-channel ratio findings are grouped per level (role and generation).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import shapely

from chipflow.layout.model import Layout
from chipflow.layout.rules import LayoutRules

__all__ = ["Finding", "check_rules", "size_findings", "chamber_findings", "RULES"]

RULES = (
    "min_width",
    "min_gap",
    "overlap",
    "outline",
    "port_keepout",
    "roof_sag",
    "tall_wall",
    "pillar_diameter",
    "pillar_gap",
)


@dataclass(frozen=True)
class Finding:
    """One broken fabrication rule.

    Attributes
    ----------
    rule : str
        One of :data:`RULES`.
    severity : str
        "error" or "warning".
    value, limit : float
        Measured value and the limit it breaks ([m] for lengths, [-] for ratios).
    x, y : float
        Where, in the chip frame [m].
    channels : tuple of int
        Indices of the channels involved (into ``Layout.channels``).
    message : str
        One line for people.
    """

    rule: str
    severity: str
    value: float
    limit: float
    x: float
    y: float
    channels: tuple[int, ...]
    message: str


def _outlines(layout: Layout) -> np.ndarray:
    ch = layout.channels
    if ch.outline is not None:
        return ch.outline
    return shapely.buffer(ch.centreline, ch.width / 2, cap_style="flat")


def _label(layout: Layout, i: int) -> str:
    ch = layout.channels
    if i >= ch.width.size:
        return f"chamber {layout.chambers[i - ch.width.size].name!r}"
    if ch.names is not None:
        return f"channel {str(ch.names[i])!r}"
    return f"{ch.role[i]} channel gen {ch.generation[i]} #{ch.index[i]}"


def _labels(layout: Layout) -> np.ndarray:
    """:func:`_label` of every channel, vectorised."""
    ch = layout.channels
    if ch.names is not None:
        return np.char.add(np.char.add("channel '", ch.names.astype(str)), "'")
    text = np.char.add(ch.role.astype(str), " channel gen ")
    text = np.char.add(np.char.add(text, ch.generation.astype(str)), " #")
    return np.char.add(text, ch.index.astype(str))


def _groups(layout: Layout) -> np.ndarray:
    """Channels reported together: a tree's levels; each named channel on its own."""
    ch = layout.channels
    if ch.names is not None:
        return np.asarray(ch.names, dtype=str)
    return np.char.add(ch.role.astype(str), ch.generation.astype(str))


def size_findings(
    width: np.ndarray,
    depth: np.ndarray,
    labels: np.ndarray,
    groups: np.ndarray,
    rules: LayoutRules,
    x: np.ndarray | None = None,
    y: np.ndarray | None = None,
) -> list[Finding]:
    """The rules of a channel's cross-section alone: ``min_width``, ``roof_sag`` and
    ``tall_wall``, one finding per group of channels that break one (a tree level, or a named
    channel), at the middle of its first channel ``x``, ``y`` [m] (NaN when not drawn).

    They apply whether or not a network is drawn.

    >>> f = size_findings(np.array([2e-3]), np.array([100e-6]), np.array(["channel 'c'"]),
    ...                   np.array(["c"]), LayoutRules())
    >>> f[0].rule, f[0].value
    ('roof_sag', 20.0)
    """
    n = width.size
    x = np.full(n, np.nan) if x is None else x
    y = np.full(n, np.nan) if y is None else y
    findings = []
    ratio_rules = (
        ("min_width", width, rules.min_feature, width < rules.min_feature, "m"),
        ("roof_sag", width / depth, rules.max_width_to_depth, None, "-"),
        ("tall_wall", depth / width, rules.max_depth_to_width, None, "-"),
    )
    for rule, value, limit, bad, unit in ratio_rules:
        bad = value > limit * (1 + 1e-9) if bad is None else bad
        if not bad.any():
            continue
        for group in np.unique(groups[bad]):  # loop over levels (or named channels)
            idx = np.flatnonzero(bad & (groups == group))
            i = int(idx[0])
            v = float(value[i])
            shown = (
                f"{_um(v)} < mask minimum feature {_um(limit)}"
                if unit == "m"
                else f"{rule.replace('_', ' ')} ratio {v:.2f} > limit {limit:g}"
            )
            where = f" at {_mm(x[i], y[i])}" if np.isfinite(x[i]) else ""
            more = f" and {idx.size - 1} more of its level" if idx.size > 1 else ""
            findings.append(
                Finding(
                    rule,
                    "error",
                    v,
                    float(limit),
                    float(x[i]),
                    float(y[i]),
                    tuple(int(j) for j in idx),
                    f"{labels[i]}{more}{where}: {shown}",
                )
            )
    return findings


def chamber_findings(
    name: str, key, rules: LayoutRules, origin=None, turns: int = 0
) -> list[Finding]:
    """The rules of a chamber's shape: its roof's unsupported span (``roof_sag``), its pillars'
    diameter (``pillar_diameter``, and ``tall_wall`` for depth over diameter) and the gaps
    between pillars and between pillars and walls (``pillar_gap``), placed in the chip frame
    by ``origin`` and ``turns`` (NaN positions when not drawn).

    >>> from chipflow.layout.chamber import ChamberKey, ChamberPort
    >>> port = (ChamberPort(0, 1e-3, 2e-4, 1e-4), ChamberPort(1, 1e-3, 2e-4, 1e-4))
    >>> wide = ChamberKey(2e-3, 8e-3, 1e-4, 0.0, 0.0, None, port, 1e-6)
    >>> f = chamber_findings("A", wide, LayoutRules())
    >>> f[0].rule, round(f[0].value, 6)
    ('roof_sag', 20.0)
    """
    import math

    from chipflow.layout.chamber import (
        chamber_polygon,
        pillar_centres,
        place,
        unsupported_span,
    )

    def where(x: float, y: float) -> tuple[float, float, str]:
        if origin is None:
            return math.nan, math.nan, ""
        px, py = place(np.array([x, y]), origin, turns)
        return float(px), float(py), f" at {_mm(px, py)}"

    label = f"chamber {name!r}"
    out = []
    poly = chamber_polygon(key)
    span, cx, cy = unsupported_span(poly, key.grid)
    ratio = span / key.depth
    if ratio > rules.max_width_to_depth * (1 + 1e-9):
        x, y, at = where(cx, cy)
        what = "between its pillars" if key.pillars is not None else "(no pillars hold it up)"
        out.append(
            Finding(
                "roof_sag",
                "error",
                ratio,
                rules.max_width_to_depth,
                x,
                y,
                (),
                f"{label}{at}: its roof spans {_um(span)} unsupported {what} over a depth of "
                f"{_um(key.depth)}: roof sag ratio {ratio:.2f} > limit "
                f"{rules.max_width_to_depth:g}; add pillars or a denser lattice",
            )
        )
    if key.pillars is None:
        return out
    d = key.pillars[0]
    centres = pillar_centres(key)
    if len(centres) == 0:
        return out
    x, y, at = where(*centres[0])
    if d < rules.min_feature * (1 - 1e-9):
        out.append(
            Finding(
                "pillar_diameter",
                "error",
                d,
                rules.min_feature,
                x,
                y,
                (),
                f"{label}{at}: pillars of {_um(d)} < mask minimum feature {_um(rules.min_feature)}",
            )  # fmt: skip
        )
    if key.depth / d > rules.max_depth_to_width * (1 + 1e-9):
        out.append(
            Finding(
                "tall_wall",
                "error",
                key.depth / d,
                rules.max_depth_to_width,
                x,
                y,
                (),
                f"{label}{at}: pillars {_um(key.depth)} tall and {_um(d)} wide: tall wall "
                f"ratio {key.depth / d:.2f} > limit {rules.max_depth_to_width:g}",
            )  # fmt: skip
        )
    # the narrowest gap: between neighbouring pillars, and between a pillar and the outline
    from scipy.spatial import cKDTree

    between = np.inf
    if len(centres) > 1:
        dist, _ = cKDTree(centres).query(centres, k=2)
        between = float(dist[:, 1].min()) - d
    wall_d = shapely.distance(poly.exterior, shapely.points(centres)) - d / 2
    k = int(np.argmin(wall_d))
    gap = min(between, float(wall_d[k]))
    if gap < rules.min_feature * (1 - 1e-9):
        gx, gy, at = where(*centres[k])
        out.append(
            Finding(
                "pillar_gap",
                "error",
                gap,
                rules.min_feature,
                gx,
                gy,
                (),
                f"{label}{at}: gaps of {_um(gap)} around its pillars < mask minimum "
                f"feature {_um(rules.min_feature)}",
            )  # fmt: skip
        )
    return out


def _um(value: float) -> str:
    return f"{value * 1e6:.1f} um"


def _mm(x: float, y: float) -> str:
    return f"({x * 1e3:.3f}, {y * 1e3:.3f}) mm"


def check_rules(layout: Layout, rules: LayoutRules) -> tuple[Finding, ...]:
    """Every fabrication rule the drawing breaks (empty when it is clean).

    Parameters
    ----------
    layout : Layout
        The drawn chip.
    rules : LayoutRules
        Minimum feature, minimum gap, aspect-ratio limits.

    Returns
    -------
    tuple of Finding
        Sorted by rule, then position.
    """
    ch = layout.channels
    out = _outlines(layout)
    mid = shapely.line_interpolate_point(ch.centreline, 0.5, normalized=True)
    mx, my = shapely.get_x(mid), shapely.get_y(mid)
    findings: list[Finding] = []

    findings += size_findings(ch.width, ch.depth, _labels(layout), _groups(layout), rules, mx, my)
    for c in layout.chambers:  # a handful of chambers
        findings += chamber_findings(c.name, c.key, rules, c.origin, c.turns)
    # chambers join the pair and outline checks; a chamber and the channels meeting it share
    # one node (each of its ports' nodes stands for the chamber)
    na, nb = ch.node_a.copy(), ch.node_b.copy()
    n_nodes = len(layout.node_xy)
    extra = []
    for k, c in enumerate(layout.chambers):
        virtual = n_nodes + k
        ports = np.asarray(c.port_nodes)
        na[np.isin(na, ports)] = virtual
        nb[np.isin(nb, ports)] = virtual
        extra.append(virtual)
    if layout.chambers:
        out = np.concatenate([out, np.array([c.outline for c in layout.chambers], dtype=object)])
        na = np.r_[na, extra]
        nb = np.r_[nb, extra]

    # pairs of channels closer than the minimum gap that do not share a node
    tree = shapely.STRtree(out)
    a, b = tree.query(out, predicate="dwithin", distance=rules.min_gap * (1 - 1e-9))
    keep = a < b
    a, b = a[keep], b[keep]
    linked = (na[a] == na[b]) | (na[a] == nb[b]) | (nb[a] == na[b]) | (nb[a] == nb[b])
    a, b = a[~linked], b[~linked]
    if a.size:
        dist = shapely.distance(out[a], out[b])
        touch = dist <= 0
        where = np.empty(a.size, dtype=object)
        where[touch] = shapely.point_on_surface(shapely.intersection(out[a[touch]], out[b[touch]]))
        where[~touch] = shapely.centroid(shapely.shortest_line(out[a[~touch]], out[b[~touch]]))
        wx, wy = shapely.get_x(where), shapely.get_y(where)
        for k in range(a.size):  # one finding per offending pair (rare by construction)
            i, j = int(a[k]), int(b[k])
            if touch[k]:
                rule, text = "overlap", "touch or overlap although they are not connected"
            else:
                rule = "min_gap"
                text = f"wall {_um(dist[k])} thinner than the minimum {_um(rules.min_gap)}"
            findings.append(
                Finding(
                    rule,
                    "error",
                    float(dist[k]),
                    rules.min_gap if rule == "min_gap" else 0.0,
                    float(wx[k]),
                    float(wy[k]),
                    (i, j),
                    f"{_label(layout, i)} and {_label(layout, j)} at {_mm(wx[k], wy[k])}: {text}",
                )
            )

    # everything inside the outline with its margin
    inner = shapely.buffer(layout.outline, -layout.margin, join_style="mitre")
    ix0, iy0, ix1, iy1 = inner.bounds
    bounds = shapely.bounds(out)
    over = np.max(
        np.column_stack(
            (ix0 - bounds[:, 0], iy0 - bounds[:, 1], bounds[:, 2] - ix1, bounds[:, 3] - iy1)
        ),
        axis=1,
    )
    outside = np.flatnonzero(~shapely.within(out, inner))
    if outside.size:
        i = int(outside[np.argmax(over[outside])])
        p = shapely.point_on_surface(shapely.difference(out[i], inner))
        findings.append(
            Finding(
                "outline",
                "error",
                float(over[i]),
                float(layout.margin),
                p.x,
                p.y,
                tuple(int(j) for j in outside),
                f"{outside.size} channel(s) reach into the {layout.margin * 1e3:g} mm edge "
                f"margin, e.g. {_label(layout, i)} by {_um(max(over[i], 0.0))} at "
                f"{_mm(p.x, p.y)}",
            )
        )
    for port in layout.ports:  # a handful of ports
        hole = shapely.Point(port.x, port.y).buffer(port.diameter / 2, quad_segs=32)
        if not hole.within(inner):
            findings.append(
                Finding(
                    "outline",
                    "error",
                    port.diameter / 2,
                    float(layout.margin),
                    port.x,
                    port.y,
                    (),
                    f"{port.name} port hole at {_mm(port.x, port.y)} reaches into the "
                    f"{layout.margin * 1e3:g} mm edge margin or off the chip",
                )
            )

    # port keep-outs: only the port's own channel may enter
    names = list(layout.node_names)
    for port in layout.ports:
        node = names.index(port.name) if port.name in names else -1
        zone = shapely.Point(port.x, port.y).buffer(port.keepout, quad_segs=32)
        hits = tree.query(zone, predicate="intersects")
        hits = hits[(na[hits] != node) & (nb[hits] != node)]
        if hits.size:
            d = shapely.distance(shapely.Point(port.x, port.y), out[hits])
            i = int(hits[np.argmin(d)])
            p = shapely.point_on_surface(shapely.intersection(out[i], zone))
            findings.append(
                Finding(
                    "port_keepout",
                    "error",
                    float(d.min()),
                    port.keepout,
                    p.x,
                    p.y,
                    tuple(int(j) for j in np.sort(hits)),
                    f"{_label(layout, i)} enters the {port.name} port keep-out at "
                    f"{_mm(p.x, p.y)}: {d.min() * 1e3:.3f} mm from the port centre, "
                    f"keep {port.keepout * 1e3:.3f} mm clear",
                )
            )
    findings.sort(key=lambda f: (RULES.index(f.rule), f.x, f.y))
    return tuple(findings)
