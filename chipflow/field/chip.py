"""The field of a drawn chip: its mask layers as regions, its punched ports as holes.

The ports are the punched holes, slightly larger than the drawn pads (by one mask grid step)
so that the pads vanish entirely; the rim left on each channel is where the port pressure is
prescribed, the same place as the network's inlet and outlet nodes (the rim of the hole).
"""

from __future__ import annotations

import numpy as np
import shapely

from chipflow.field.model import FieldPort, FieldRegion, FieldSolution
from chipflow.field.solve import solve_field
from chipflow.layout.model import Layout

__all__ = ["layout_regions", "layout_ports", "solve_layout", "estimate_triangles", "AUTO_TRIANGLES"]

#: ``chipflow build`` solves the field by default when the estimate is at most this many
#: triangles (a solve of a few seconds on one core).
AUTO_TRIANGLES = 25_000


def layout_regions(layout: Layout) -> list[FieldRegion]:
    """One region per mask layer."""
    return [FieldRegion(layer.geometry, layer.depth) for layer in layout.layers]


def layout_ports(layout: Layout, pressures: dict[str, float]) -> list[FieldPort]:
    """The punched holes of the ports named in ``pressures`` [Pa]."""
    out = []
    for port in layout.ports:
        if port.name in pressures:
            hole = shapely.Point(port.x, port.y).buffer(
                port.diameter / 2 + 2 * layout.grid, quad_segs=32
            )
            out.append(FieldPort(port.name, hole, float(pressures[port.name])))
    return out


def solve_layout(
    layout: Layout, pressures: dict[str, float], viscosity: float, **options
) -> FieldSolution:
    """Solve the field of a drawn chip with the given port pressures [Pa]."""
    return solve_field(
        layout_regions(layout), layout_ports(layout, pressures), viscosity, **options
    )


def estimate_triangles(layout: Layout, across: float = 4.0) -> int:
    """Triangles the field mesh of ``layout`` will have, roughly (within about 30 %).

    Each channel's floor area over the area of an equilateral triangle of the mesh's edge
    length there, ``min(width, 2 depth) / across``; three quarters of that, since junctions
    share their area and the mesh grades up in wide places (the demo: 114k estimated, 109k
    meshed).
    """
    ch = layout.channels
    size = np.minimum(ch.width, 2.0 * ch.depth) / across
    return int(0.75 * np.sum(ch.length * ch.width / (np.sqrt(3.0) / 4.0 * size**2)))
