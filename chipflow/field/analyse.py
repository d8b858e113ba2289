"""Analysis of a mask drawn elsewhere: punch the ports, solve the field, judge the shear.

A mask has one or more inlets and one or more outlets (:class:`MaskPort`), each driven by
its own flow or pressure; outlets given neither are open at 0 Pa. The field is linear in the
port pressures, so the pressures of flow-driven ports come from one solution per such port
(:func:`chipflow.field.solve.solve_on_mesh`).

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
    "MaskPort",
    "analyse_mask",
    "analyse_ports",
    "check_mask",
    "check_port_flows",
    "port_holes",
    "scaled",
]


ROLES = ("inlet", "outlet")


@dataclass(frozen=True)
class MaskPort:
    """A punched port of a mask and what drives it.

    Attributes
    ----------
    name : str
        Its name in the results.
    xy : (float, float)
        Hole centre [m].
    role : {"inlet", "outlet"}
        Where the medium is meant to enter or leave.
    pressure : float or None
        Prescribed pressure [Pa] above the reference (an outlet open to its reservoir: 0).
    flow : float or None
        Prescribed flow [m^3/s], positive: into the chip at an inlet, out of it at an outlet.
        At most one of ``pressure`` and ``flow``; an outlet given neither is at 0 Pa.
    """

    name: str
    xy: tuple[float, float]
    role: str = "inlet"
    pressure: float | None = None
    flow: float | None = None

    @property
    def given(self) -> str:
        """``"flow"`` or ``"pressure"``: what drives the port."""
        return "flow" if self.flow is not None else "pressure"


@dataclass(frozen=True)
class MaskAnalysis:
    """The field of a foreign mask at its operating point.

    Attributes
    ----------
    solution : FieldSolution
    inlet_pressure : float
        Inlet pressure above the outlet [Pa]; with several ports, the highest inlet pressure
        above the lowest outlet pressure.
    flow : float
        Flow through the chip [m^3/s]: the sum of the flows into it through its inlets.
    resistance : float or None
        ``inlet_pressure / flow`` [Pa s/m^3] between one inlet and one outlet (None with
        more ports: no single resistance describes them).
    area : float
        Channel floor area, port holes excluded [m^2].
    floor : ShearStats
        Floor shear over the whole floor (window fractions when a window was given).
    window : (float, float) or None
        [Pa].
    channels : ChannelTable
        The mask's skeleton branches (empty, with a reason, where none could be extracted).
    ports : tuple of MaskPort
        The ports as given.
    notes : tuple of str
        What a user should know about the answer (an inlet the medium leaves through).
    """

    solution: FieldSolution
    inlet_pressure: float
    flow: float
    resistance: float | None
    area: float
    floor: ShearStats
    window: tuple[float, float] | None
    channels: ChannelTable
    ports: tuple[MaskPort, ...] = ()
    notes: tuple[str, ...] = ()

    def port_rows(self) -> list[dict[str, Any]]:
        """Each port's name, role, centre ``x``, ``y`` [m], what drives it (``given``), its
        ``pressure`` [Pa] and its ``flow`` into the chip [m^3/s] (negative where it leaves)."""
        sol = self.solution
        return [
            {
                "name": p.name,
                "role": p.role,
                "x": p.xy[0],
                "y": p.xy[1],
                "given": p.given,
                "pressure": sol.port_pressures[p.name],
                "flow": sol.port_flows[p.name],
            }
            for p in self.ports
        ]

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
            "ports": self.port_rows(),
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


def check_port_flows(flows: dict[str, float], inlets=("inlet",)) -> None:
    """Medium runs into the chip through its inlets (a FieldError if not: no flow that cannot
    happen); the balance of the flows is every field solve's own check
    (:func:`chipflow.field.solve.check_field_flows`)."""
    q = sum(flows[name] for name in inlets)
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
    **options,
) -> MaskAnalysis:
    """Solve the field of a mask between one inlet and one outlet (at 0 Pa).

    ``flow`` [m^3/s] or ``pressure`` [Pa], exactly one, drives the inlet; the other
    parameters and ``options`` are those of :func:`analyse_ports`.
    """
    if (flow is None) == (pressure is None):
        raise FieldError("give either a flow or an inlet pressure, not both or neither")
    ports = [
        MaskPort("inlet", inlet, "inlet", pressure=pressure, flow=flow),
        MaskPort("outlet", outlet, "outlet", pressure=0.0),
    ]
    return analyse_ports(geometry, depth, ports, punch, viscosity, **options)


def _checked_ports(ports: Sequence[MaskPort]) -> list[MaskPort]:
    """The ports with outlets given nothing at 0 Pa; one FieldError line for bad drives."""
    from chipflow.limits import check_value

    names = [p.name for p in ports]
    if len(set(names)) != len(names):
        raise FieldError(f"each port needs its own name, got {', '.join(names)}")
    if {p.role for p in ports} != set(ROLES):
        raise FieldError("the mask needs at least one inlet and one outlet")
    out = []
    for p in ports:
        if p.pressure is not None and p.flow is not None:
            raise FieldError(f"the {p.name}: give its flow or its pressure, not both")
        if p.flow is not None:
            check_value(p.flow, "flow", key="flow", where=p.name)
            if not (np.isfinite(p.flow) and p.flow > 0):
                raise FieldError(
                    f"the {p.name}'s flow must be a positive number (its direction is its "
                    f"role, {p.role}), got {p.flow!r} m^3/s"
                )
        elif p.pressure is not None:
            check_value(p.pressure, "pressure", key="pressure", where=p.name)
            if not np.isfinite(p.pressure):
                raise FieldError(f"the {p.name}'s pressure must be finite, got {p.pressure!r}")
        elif p.role == "outlet":
            p = MaskPort(p.name, p.xy, p.role, pressure=0.0)
        else:
            raise FieldError(f"the {p.name} needs its flow or its pressure")
        out.append(p)
    if all(p.flow is not None for p in out):
        raise FieldError(
            "every port has a flow: at least one needs a pressure (an outlet open to its "
            "reservoir is at 0 Pa)"
        )
    pressures = [p.pressure for p in out if p.flow is None]
    if not any(p.flow is not None for p in out) and np.ptp(pressures) == 0:
        raise FieldError("every port is at the same pressure: no flow runs")
    return out


def analyse_ports(
    geometry: shapely.Geometry,
    depth: float,
    ports: Sequence[MaskPort],
    punch: float,
    viscosity: float,
    *,
    window: tuple[float, float] | None = None,
    across: float = 4.0,
    allow_large: bool = False,
    progress=None,
    where: str = "",
    levels: Sequence[tuple[shapely.Geometry, float]] | None = None,
) -> MaskAnalysis:
    """Solve the field of a mask's channel area with punched ports, each driven by its flow
    or its pressure.

    Parameters
    ----------
    geometry : shapely geometry
        Channel area [m].
    depth : float
        Channel depth [m] (one depth for the whole mask).
    ports : sequence of MaskPort
        At least one inlet and one outlet, each inside the channel area; the first inlet is
        the one the others must be joined to.
    punch : float
        Punch diameter [m].
    viscosity : float
        [Pa s].
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
        See :func:`check_mask` and :func:`check_port_flows`; a port with a flow that is not
        positive, with both a flow and a pressure, or an inlet with neither; every port given
        a flow (none fixes the pressure).
    """
    report = progress or (lambda done, total: None)
    ports = _checked_ports(ports)
    ports.sort(key=lambda p: p.role != "inlet")  # stable: inlets first, in their order
    holes = check_mask(
        geometry,
        min(d for _, d in levels) if levels else depth,  # the shallowest meshes finest
        {p.name: p.xy for p in ports},
        punch,
        across=across,
        allow_large=allow_large,
        where=where,
    )
    report(1, 3)
    sign = {"inlet": 1.0, "outlet": -1.0}
    field_ports = [
        FieldPort(p.name, hole, p.pressure, None if p.flow is None else sign[p.role] * p.flow)
        for p, hole in zip(ports, holes, strict=True)
    ]
    regions = [FieldRegion(g, d) for g, d in levels] if levels else [FieldRegion(geometry, depth)]
    solution = solve_field(regions, field_ports, viscosity, across=across)
    inlets = [p.name for p in ports if p.role == "inlet"]
    outlets = [p.name for p in ports if p.role == "outlet"]
    check_port_flows(solution.port_flows, inlets)
    report(2, 3)
    flows, pressures = solution.port_flows, solution.port_pressures
    q = sum(flows[name] for name in inlets)
    p_in = max(pressures[name] for name in inlets) - min(pressures[name] for name in outlets)
    notes = tuple(
        f"medium {'leaves' if p.role == 'inlet' else 'enters'} the chip through the {p.role} "
        f"{p.name!r} ({abs(flows[p.name]) * 6e10:.3g} uL/min): its pressure is "
        f"{'below' if p.role == 'inlet' else 'above'} the chip's there"
        for p in ports
        if sign[p.role] * flows[p.name] < -1e-9 * abs(q)
    )
    area = solution.mesh.area
    table = channel_table(geometry, solution, holes)
    report(3, 3)
    return MaskAnalysis(
        solution=solution,
        inlet_pressure=p_in,
        flow=q,
        resistance=p_in / q if len(ports) == 2 else None,
        area=float(area.sum()),
        floor=shear_stats(solution.floor_shear, area, window),
        window=window,
        channels=table,
        ports=tuple(ports),
        notes=notes,
    )
