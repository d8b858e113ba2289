"""Analysis of a mask drawn elsewhere: punch the ports, solve the field, judge the shear.

The field is linear in the driving pressure, so a flow-driven analysis solves once at 1 Pa
and scales every field to the given flow.

Before anything is meshed, :func:`check_mask` validates the drawing against its ports (in
the validation layer, so that other readers of masks and other port sets reuse it): the depth,
punch and port positions are finite and plausible (:mod:`chipflow.limits`); every port lies
on a channel outline; no outline is narrower than a plausible channel (100 nm); the inlet and
outlet lie on outlines joined to each other (a punched hole joins the outlines it cuts); no
outline is joined to no port; and the mesh's memory and time estimate fits the memory this
process may use (:mod:`chipflow.field.budget`). After the solve, the flows through the ports
must run from inlet to outlet (their balance is every field solve's own check,
:func:`chipflow.field.solve.check_field_flows`).
Each failure is one :class:`~chipflow.errors.FieldError` line; never a number for a flow
that cannot happen.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import shapely

from chipflow.errors import FieldError
from chipflow.field.model import FieldPort, FieldRegion, FieldSolution
from chipflow.field.shear import ShearStats, shear_stats
from chipflow.field.skeleton import ChannelTable, channel_table
from chipflow.field.solve import scaled, solve_field

__all__ = [
    "MaskAnalysis",
    "analyse_mask",
    "check_mask",
    "check_port_flows",
    "port_holes",
    "scaled",
]


@dataclass(frozen=True)
class MaskAnalysis:
    """The field of a foreign mask at its operating point.

    Attributes
    ----------
    solution : FieldSolution
    inlet_pressure : float
        Inlet pressure above the outlet [Pa].
    flow : float
        Flow through the chip [m^3/s].
    resistance : float
        [Pa s/m^3].
    area : float
        Channel floor area, port holes excluded [m^2].
    floor : ShearStats
        Floor shear over the whole floor (window fractions when a window was given).
    window : (float, float) or None
        [Pa].
    channels : ChannelTable
        The mask's skeleton branches (empty, with a reason, where none could be extracted).
    """

    solution: FieldSolution
    inlet_pressure: float
    flow: float
    resistance: float
    area: float
    floor: ShearStats
    window: tuple[float, float] | None
    channels: ChannelTable

    def to_dict(self) -> dict[str, Any]:
        """JSON-able SI values."""
        out = {
            "inlet_pressure": self.inlet_pressure,
            "flow": self.flow,
            "resistance": self.resistance,
            "floor_shear": {"p05": self.floor.p05, "p50": self.floor.p50, "p95": self.floor.p95},
            "area": self.area,
            "mesh_triangles": len(self.solution.mesh.triangles),
            "channels": self.channels.to_list(),
        }
        if self.channels.reason is not None:
            out["channels_note"] = self.channels.reason
        if self.window is not None:
            out["shear_window"] = {"min": self.window[0], "max": self.window[1]}
            out["area_outside_window"] = self.floor.outside
            out["below_window"] = self.floor.below
            out["above_window"] = self.floor.above
        return out


def port_holes(geometry: shapely.Geometry, centres, punch: float) -> list[shapely.Polygon]:
    """Punched port holes [m] at ``centres`` [m] of a mask, a little wider than the punch.

    The margin swallows a drawn pad of the punch's size.
    """
    size = float(np.hypot(*np.subtract(geometry.bounds[2:], geometry.bounds[:2])))
    radius = punch / 2 * (1 + 1e-3) + 1e-4 * size
    return [shapely.Point(xy).buffer(radius, quad_segs=32) for xy in centres]


def _mm(xy) -> str:
    return f"({xy[0] * 1e3:.6g}, {xy[1] * 1e3:.6g}) mm"


def check_mask(
    geometry: shapely.Geometry,
    depth: float,
    ports: dict[str, tuple[float, float]],
    punch: float,
    *,
    across: float = 4.0,
    allow_large: bool = False,
    where: str = "",
) -> list[shapely.Polygon]:
    """Validate a mask and its ports before meshing; return the punched holes [m].

    Parameters
    ----------
    geometry : shapely geometry
        Channel area [m].
    depth : float
        Channel depth [m].
    ports : dict
        Port name to centre [m]; the first is the inlet, every other must be joined to it.
    punch : float
        Punch diameter [m].
    across : float
        Mesh triangles across a channel (for the estimate).
    allow_large : bool
        Solve even a mesh that needs more memory than this process may use.
    where : str
        The mask file, for messages.

    Raises
    ------
    FieldError, SpecError
        One line per problem (see the module notes); TooLargeError for a mesh too large.
    """
    from chipflow.field.budget import field_estimate, mask_triangles
    from chipflow.field.mesh import _SNAP
    from chipflow.limits import check_value
    from chipflow.resources import check_memory

    check_value(depth, "length", key="depth", where="depth")
    check_value(punch, "length", key="punch", where="punch")
    if not (np.isfinite(depth) and depth > 0 and np.isfinite(punch) and punch > 0):
        raise FieldError(f"depth and punch must be positive lengths, got {depth!r}, {punch!r} m")
    for name, xy in ports.items():
        if not (len(xy) == 2 and all(np.isfinite(v) for v in xy)):
            raise FieldError(f"the {name} position {tuple(xy)!r} is not two finite numbers")
        if not shapely.intersects(geometry, shapely.Point(xy)):
            raise FieldError(f"the {name} at {_mm(xy)} lies outside every channel outline")
    x0, y0, x1, y1 = geometry.bounds
    scale = float(np.hypot(x1 - x0, y1 - y0))
    parts = np.array(
        [g for g in shapely.get_parts(shapely.set_precision(geometry, _SNAP * scale))
         if isinstance(g, shapely.Polygon) and not g.is_empty],
        dtype=object,
    )  # fmt: skip
    width = 2.0 * shapely.area(parts) / shapely.length(parts)
    narrow = width < 1e-7
    if narrow.any():
        i = int(np.argmin(width))
        spot = shapely.get_coordinates(shapely.point_on_surface(parts[i]))[0]
        raise FieldError(
            f"the channel outline around {_mm(spot)} is about {width[i] * 1e9:.3g} nm wide, "
            "narrower than any channel (100 nm to 1 m): check the drawing's units"
        )
    holes = port_holes(geometry, list(ports.values()), punch)
    names = list(ports)
    for i in range(len(holes)):
        for j in range(i + 1, len(holes)):
            if holes[i].intersects(holes[j]):
                raise FieldError(
                    f"the {names[i]} and {names[j]} holes overlap: move the ports apart"
                )
    # parts and holes as a graph: a punched hole joins every outline it cuts
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    tree = shapely.STRtree(parts)
    hole_idx, part_idx = tree.query(np.array(holes, dtype=object), predicate="intersects")
    n = len(parts) + len(holes)
    graph = coo_matrix((np.ones(hole_idx.size), (part_idx, len(parts) + hole_idx)), shape=(n, n))
    _, label = connected_components(graph, directed=False)
    home = label[len(parts)]
    for k, name in enumerate(names[1:], start=1):
        if label[len(parts) + k] != home:
            raise FieldError(
                f"the {name} at {_mm(ports[name])} lies on a channel outline not joined to the "
                f"{names[0]}'s: no flow can run between them; join the outlines or move the port"
            )
    loose = np.flatnonzero(label[: len(parts)] != home)
    if loose.size:
        spots = shapely.get_coordinates(shapely.point_on_surface(parts[loose[:3]]))
        shown = ", ".join(_mm(xy) for xy in spots)
        more = f" and {loose.size - 3:,} more" if loose.size > 3 else ""
        raise FieldError(
            f"{loose.size:,} channel outline{'s are' if loose.size > 1 else ' is'} not "
            f"connected to any port (around {shown}{more}): join them to the network, remove "
            "them, or choose the layer with --layer"
        )
    domain = geometry.difference(shapely.union_all(holes))
    label_where = f"the field mesh of {where}" if where else "the field mesh"
    check_memory(
        field_estimate(mask_triangles(domain, depth, across), label_where),
        allow_large=allow_large,
        advice="check --depth and the drawing's units, or analyse a part of the mask",
    )
    return holes


def check_port_flows(flows: dict[str, float], inlet: str = "inlet") -> None:
    """The inlet's flow runs into the chip (a FieldError if not: no flow that cannot
    happen); the balance of the flows is every field solve's own check
    (:func:`chipflow.field.solve.check_field_flows`)."""
    q = flows[inlet]
    if not (np.isfinite(q) and q > 0):
        raise FieldError("no flow reaches the outlet from the inlet: are they connected?")


def analyse_mask(
    geometry: shapely.Geometry,
    depth: float,
    inlet: tuple[float, float],
    outlet: tuple[float, float],
    punch: float,
    viscosity: float,
    *,
    flow: float | None = None,
    pressure: float | None = None,
    window: tuple[float, float] | None = None,
    across: float = 4.0,
    allow_large: bool = False,
    progress=None,
    where: str = "",
    levels: Sequence[tuple[shapely.Geometry, float]] | None = None,
) -> MaskAnalysis:
    """Solve the field of a mask's channel area with punched inlet and outlet holes.

    Parameters
    ----------
    geometry : shapely geometry
        Channel area [m].
    depth : float
        Channel depth [m] (one depth for the whole mask).
    inlet, outlet : (float, float)
        Port centres [m]; each must lie inside the channel area.
    punch : float
        Punch diameter [m].
    viscosity : float
        [Pa s].
    flow, pressure : float
        Exactly one: the flow [m^3/s] or the inlet pressure above the outlet [Pa].
    window : (float, float), optional
        Cells' floor shear window [Pa].
    across : float
        Mesh triangles across a channel.
    allow_large : bool
        Solve even a mesh that needs more memory than this process may use.
    progress : callable, optional
        Called with ``(done, total)`` steps (validation, mesh and solve, channel table).
    where : str
        The mask file, for messages.

    levels : sequence of (geometry, float), optional
        Mask levels of different depth: each level's channel area [m] and depth [m] (where
        they overlap the deeper holds); ``geometry`` is then their union and ``depth`` unused.

    Raises
    ------
    FieldError, SpecError, TooLargeError
        See :func:`check_mask` and :func:`check_port_flows`.
    """
    report = progress or (lambda done, total: None)
    if (flow is None) == (pressure is None):
        raise FieldError("give either a flow or an inlet pressure, not both or neither")
    for value, what in ((flow, "flow"), (pressure, "pressure")):
        if value is not None and not (np.isfinite(value) and value > 0):
            raise FieldError(f"the {what} must be a positive number, got {value!r}")
    holes = check_mask(
        geometry,
        min(d for _, d in levels) if levels else depth,  # the shallowest meshes finest
        {"inlet": inlet, "outlet": outlet},
        punch,
        across=across,
        allow_large=allow_large,
        where=where,
    )
    report(1, 3)
    drive = 1.0 if pressure is None else float(pressure)
    ports = [FieldPort("inlet", holes[0], drive), FieldPort("outlet", holes[1], 0.0)]
    regions = [FieldRegion(g, d) for g, d in levels] if levels else [FieldRegion(geometry, depth)]
    solution = solve_field(regions, ports, viscosity, across=across)
    check_port_flows(solution.port_flows)
    report(2, 3)
    q = solution.port_flows["inlet"]
    if flow is not None:
        solution = scaled(solution, flow / q)
    q = solution.port_flows["inlet"]
    p_in = solution.port_pressures["inlet"]
    area = solution.mesh.area
    table = channel_table(geometry, solution, holes)
    report(3, 3)
    return MaskAnalysis(
        solution=solution,
        inlet_pressure=p_in,
        flow=q,
        resistance=p_in / q,
        area=float(area.sum()),
        floor=shear_stats(solution.floor_shear, area, window),
        window=window,
        channels=table,
    )
