"""Where the field differs from the 1D network: zones of the floor and per-level agreement.

Every triangle is given to the nearest drawn channel centreline and to one zone:

- ``port``: within the punched hole's radius plus the channel width of a port centre;
- ``bed end``: within the widest meeting channel's width of a junction where bed channels end;
- ``junction``: the same around every other junction;
- ``bend``: within a channel width of a centreline vertex that turns (an arc);
- ``channel``: everywhere else (straight channel bodies, where the network is exact).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import shapely

from chipflow.field.calibration import floor_factor
from chipflow.field.model import FieldSolution
from chipflow.field.shear import ShearStats, shear_stats
from chipflow.field.solve import velocity_at
from chipflow.layout.model import Layout

__all__ = [
    "ZONES",
    "FieldComparison",
    "classify",
    "compare_with_network",
    "channel_flows",
    "centre_shear",
    "comparison_dict",
]

ZONES = ("channel", "junction", "bend", "bed end", "port")
_TURN = np.radians(0.5)  # a centreline vertex turning more than this lies on an arc


def chamber_triangles(mesh, layout) -> np.ndarray:
    """Which triangles of ``mesh`` lie in one of the layout's chambers (bool per triangle)."""
    inside = np.zeros(len(mesh.triangles), bool)
    if not getattr(layout, "chambers", ()):
        return inside
    centroids = mesh.points[mesh.triangles].mean(axis=1)
    for c in layout.chambers:  # a handful of chambers
        inside |= shapely.contains_xy(c.outline, centroids[:, 0], centroids[:, 1])
    return inside


def _nearest_channel(centroids: np.ndarray, lines: np.ndarray) -> np.ndarray:
    """The line nearest to each point: the owner of its nearest straight segment (the same
    answer as the lines themselves, twice as fast: short segments prune better)."""
    xy, which = shapely.get_coordinates(lines, return_index=True)
    same = which[1:] == which[:-1]
    segments = shapely.linestrings(np.stack([xy[:-1][same], xy[1:][same]], axis=1))
    owner = which[:-1][same]
    idx = shapely.STRtree(segments).query_nearest(shapely.points(centroids), all_matches=False)
    out = np.zeros(len(centroids), dtype=np.int64)
    out[idx[0]] = owner[idx[1]]
    return out


def _within(points: np.ndarray, centres: np.ndarray, radius: np.ndarray) -> np.ndarray:
    from scipy.spatial import cKDTree

    if len(centres) == 0:
        return np.zeros(len(points), bool)
    k = min(4, len(centres))
    dist, idx = cKDTree(centres).query(points, k=k)
    dist, idx = dist.reshape(len(points), k), idx.reshape(len(points), k)
    return np.any(dist <= radius[idx], axis=1)


def classify(solution: FieldSolution, layout: Layout) -> tuple[np.ndarray, np.ndarray]:
    """Zone (index into :data:`ZONES`) and nearest channel of every triangle.

    Geometry alone: kept in the field cache (:mod:`chipflow.field.cache`) with the mesh and
    the drawing as its key.
    """
    from chipflow.field.cache import cached

    mesh, ch = solution.mesh, layout.channels
    key = (
        mesh.points,
        mesh.triangles,
        [shapely.to_wkb(line) for line in ch.centreline],
        ch.width,
        ch.node_a,
        ch.node_b,
        np.asarray(ch.role, dtype=str),
        layout.node_xy,
        [str(n) for n in layout.node_names],
        [(p.name, p.x, p.y, p.diameter) for p in layout.ports],
    )

    def compute() -> dict[str, np.ndarray]:
        zone, channel = _classify(mesh, layout)
        return {"zone": zone, "channel": channel}

    found = cached("zones", key, compute)
    return found["zone"], found["channel"]


def _classify(mesh, layout: Layout) -> tuple[np.ndarray, np.ndarray]:
    ch = layout.channels
    cen = mesh.centroids
    channel = _nearest_channel(cen, ch.centreline)
    zone = np.zeros(len(cen), dtype=np.int64)

    # bends: centreline vertices where the direction turns
    xy, which = shapely.get_coordinates(ch.centreline, return_index=True)
    d = np.diff(xy, axis=0)
    same = which[1:] == which[:-1]
    ang = np.arctan2(d[:, 1], d[:, 0])
    turn = np.abs((ang[1:] - ang[:-1] + np.pi) % (2 * np.pi) - np.pi)
    inner = same[1:] & same[:-1] & (turn > _TURN)
    bend_pts = xy[1:-1][inner]
    bend_r = ch.width[which[1:-1][inner]]
    zone[_within(cen, bend_pts, bend_r)] = ZONES.index("bend")

    # junctions: the widest channel meeting at a node sets the radius
    n_nodes = len(layout.node_xy)
    ends = np.concatenate([ch.node_a, ch.node_b])
    widths = np.concatenate([ch.width, ch.width])
    radius = np.zeros(n_nodes)
    np.maximum.at(radius, ends, widths)
    bed = np.zeros(n_nodes, bool)
    roles = np.concatenate([ch.role, ch.role]).astype(str)
    bed[ends[roles == "bed"]] = True
    names = np.asarray(layout.node_names, dtype=object)
    port_names = {p.name for p in layout.ports}
    is_port = np.array([n in port_names for n in names], dtype=bool)
    for label, select in (("junction", ~bed & ~is_port), ("bed end", bed & ~is_port)):
        hit = _within(cen, layout.node_xy[select], radius[select])
        zone[hit] = ZONES.index(label)
    ports = np.array([[p.x, p.y] for p in layout.ports])
    port_r = np.array([p.diameter / 2 for p in layout.ports]) + float(ch.width.max())
    zone[_within(cen, ports, port_r)] = ZONES.index("port")
    return zone, channel


def _midpoints(layout: Layout, select) -> tuple[np.ndarray, np.ndarray]:
    """Midpoints of the selected centrelines and the unit tangents there."""
    lines = layout.channels.centreline[select]
    mid = shapely.line_interpolate_point(lines, 0.5, normalized=True)
    ahead = shapely.line_interpolate_point(lines, 0.5 + 1e-3, normalized=True)
    m, a = shapely.get_coordinates(mid), shapely.get_coordinates(ahead)
    return m, (a - m) / np.hypot(*(a - m).T)[:, None]


def centre_shear(solution: FieldSolution, layout: Layout) -> np.ndarray:
    """Floor shear at the middle of each drawn channel's centreline [Pa].

    This is where the network's floor shear (the centre of the floor) is defined.
    """
    ch = layout.channels
    m, _ = _midpoints(layout, slice(None))
    u = velocity_at(solution, m)
    speed = np.nan_to_num(np.hypot(u[:, 0], u[:, 1]))
    return floor_factor(ch.depth, ch.width) * solution.viscosity * speed / ch.depth


def channel_flows(solution: FieldSolution, layout: Layout, select: np.ndarray) -> np.ndarray:
    """Flow through the middle cross-section of the selected channels [m^3/s].

    The depth-averaged velocity is integrated across the width at the midpoint of each
    centreline with 8-point Gauss-Legendre quadrature, times the depth; the sign follows the
    centreline's direction.
    """
    ch = layout.channels
    m, t = _midpoints(layout, select)
    n = np.column_stack([-t[:, 1], t[:, 0]])
    g, w = np.polynomial.legendre.leggauss(8)
    half = ch.width[select] / 2
    pts = m[:, None, :] + (g[None, :, None] * half[:, None, None]) * n[:, None, :]
    u = velocity_at(solution, pts.reshape(-1, 2)).reshape(len(m), len(g), 2)
    un = np.nan_to_num(np.einsum("kgc,kc->kg", u, t))
    return ch.depth[select] * half * (un * w).sum(axis=1)


@dataclass(frozen=True)
class FieldComparison:
    """The field set against the network.

    Attributes
    ----------
    resistance, network_resistance : float
        Chip resistance between the inlet and outlet rims, field and network [Pa s/m^3].
    floor : ShearStats
        Floor shear over the seeded floor.
    zones : dict of str to ShearStats
        The same per zone (see :data:`ZONES`).
    levels : list of dict
        Per (role, generation): ``field_shear`` and ``network_shear``, the floor shear at the
        centre of the floor half-way along each channel, averaged over the level [Pa].
    bed_split : dict
        ``max_deviation``: largest relative difference of a bed channel's flow between field
        and network [1]; ``field_cv`` and ``network_cv``: coefficient of variation of the bed
        channel flows [1].
    mesh_triangles : int
    """

    resistance: float
    network_resistance: float
    floor: ShearStats
    zones: dict[str, ShearStats]
    levels: list[dict[str, Any]]
    bed_split: dict[str, float]
    mesh_triangles: int

    def outside_by_zone(self) -> dict[str, float]:
        """Share of the seeded floor area that is outside the window, per zone [1]."""
        total = self.floor.area
        return {z: s.outside * s.area / total for z, s in self.zones.items() if total > 0}


def compare_with_network(
    solution: FieldSolution,
    layout: Layout,
    network_solution,
    window: tuple[float, float] | None,
    seeded: str = "all",
    ports: tuple[str, str] = ("inlet", "outlet"),
) -> FieldComparison:
    """Compare a chip's field with its solved network.

    Parameters
    ----------
    solution : FieldSolution
        The field of the same chip (at any operating point: resistances do not depend on it).
    layout : Layout
    network_solution : chipflow.network.Solution
        The network of the same layout (its first channels are the drawn channels, in order).
    window : (float, float) or None
        Floor shear window of the cells [Pa].
    seeded : {"all", "bed"}
        Where cells grow.
    ports : (str, str)
        The ports of high and low pressure between which the resistances are given.
    """
    mesh = solution.mesh
    ch = layout.channels
    zone, channel = classify(solution, layout)
    area = mesh.area
    role = ch.role.astype(str)
    seeded_tri = np.ones(len(area), bool) if seeded == "all" else role[channel] == "bed"
    if seeded != "all":  # cells in chambers are seeded with the bed's
        seeded_tri |= chamber_triangles(mesh, layout)
    floor = shear_stats(solution.floor_shear[seeded_tri], area[seeded_tri], window)
    zones = {}
    for k, name in enumerate(ZONES):
        sel = seeded_tri & (zone == k)
        zones[name] = shear_stats(solution.floor_shear[sel], area[sel], window)

    n_ch = len(ch.width)
    net = network_solution
    centre = centre_shear(solution, layout)
    levels = []
    for r, g in sorted({(str(a), int(b)) for a, b in zip(role, ch.generation, strict=True)}):
        members = (role == r) & (ch.generation == g)
        levels.append(
            {
                "role": r,
                "generation": g,
                "field_shear": float(np.mean(centre[members])),
                "network_shear": float(np.mean(net.wall_shear_floor[:n_ch][members])),
            }
        )
    rank = {"distribution": 0, "bed": 1, "collection": 2}
    levels.sort(
        key=lambda x: (
            rank.get(x["role"], 3),
            -x["generation"] if x["role"] == "collection" else x["generation"],
        )
    )

    bed = np.nonzero(role == "bed")[0]
    split = {"max_deviation": float("nan"), "field_cv": float("nan"), "network_cv": float("nan")}
    if bed.size:
        qf = np.abs(channel_flows(solution, layout, role == "bed"))
        qn = np.abs(net.flow[:n_ch][bed])
        split = {
            "max_deviation": float(np.max(np.abs(qf / qf.mean() - qn / qn.mean()))),
            "field_cv": float(qf.std() / qf.mean()),
            "network_cv": float(qn.std() / qn.mean()),
        }

    names = list(net.network.node_names)
    high, low = ports
    p_in, p_out = (float(net.pressure[names.index(n)]) for n in (high, low))
    node = names.index(high)
    q_net = float(np.abs(net.flow[:n_ch][ch.node_a == node]).sum())
    q_net -= float(net.flow[:n_ch][ch.node_b == node].sum())
    return FieldComparison(
        resistance=solution.resistance(high, low),
        network_resistance=(p_in - p_out) / q_net,
        floor=floor,
        zones=zones,
        levels=levels,
        bed_split=split,
        mesh_triangles=len(mesh.triangles),
    )


def comparison_dict(c: FieldComparison) -> dict[str, Any]:
    """The comparison as JSON-able SI values (the ``field`` entry of a build's results)."""
    return {
        "resistance": c.resistance,
        "network_resistance": c.network_resistance,
        "floor_shear": {"p05": c.floor.p05, "p50": c.floor.p50, "p95": c.floor.p95},
        "seeded_area": c.floor.area,
        "area_outside_window": c.floor.outside,
        "below_window": c.floor.below,
        "above_window": c.floor.above,
        "outside_by_zone": c.outside_by_zone(),
        "zones": {
            z: {"area": s.area, "p05": s.p05, "p50": s.p50, "p95": s.p95, "outside": s.outside}
            for z, s in c.zones.items()
        },
        "levels": c.levels,
        "bed_split": c.bed_split,
        "mesh_triangles": c.mesh_triangles,
    }
