"""Analysis of a mask drawn elsewhere: punch the ports, solve the field, judge the shear.

The field is linear in the driving pressure, so a flow-driven analysis solves once at 1 Pa
and scales every field to the given flow.
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

__all__ = ["MaskAnalysis", "analyse_mask", "port_holes", "scaled"]


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
    levels : sequence of (geometry, float), optional
        Mask levels of different depth: each level's channel area [m] and depth [m] (where
        they overlap the deeper holds); ``geometry`` is then their union and ``depth`` unused.
    """
    if (flow is None) == (pressure is None):
        raise FieldError("give either a flow or an inlet pressure, not both or neither")
    for name, xy in (("inlet", inlet), ("outlet", outlet)):
        if not shapely.intersects(geometry, shapely.Point(xy)):
            raise FieldError(
                f"the {name} at ({xy[0] * 1e3:.6g}, {xy[1] * 1e3:.6g}) mm lies outside every "
                "channel outline"
            )
    holes = port_holes(geometry, (inlet, outlet), punch)
    if holes[0].intersects(holes[1]):
        raise FieldError("the inlet and outlet holes overlap: move the ports apart")
    drive = 1.0 if pressure is None else float(pressure)
    ports = [FieldPort("inlet", holes[0], drive), FieldPort("outlet", holes[1], 0.0)]
    regions = [FieldRegion(g, d) for g, d in levels] if levels else [FieldRegion(geometry, depth)]
    solution = solve_field(regions, ports, viscosity, across=across)
    q = solution.port_flows["inlet"]
    if not q > 0:
        raise FieldError("no flow reaches the outlet from the inlet: are they connected?")
    if flow is not None:
        solution = scaled(solution, flow / q)
    q = solution.port_flows["inlet"]
    p_in = solution.port_pressures["inlet"]
    area = solution.mesh.area
    return MaskAnalysis(
        solution=solution,
        inlet_pressure=p_in,
        flow=q,
        resistance=p_in / q,
        area=float(area.sum()),
        floor=shear_stats(solution.floor_shear, area, window),
        window=window,
        channels=channel_table(geometry, solution, holes),
    )
