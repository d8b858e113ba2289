"""The field of a drawn chip: its mask layers as regions, its punched ports as holes.

The ports are the punched holes, slightly larger than the drawn pads (by one mask grid step)
so that the pads vanish entirely; the rim left on each channel is where the port pressure is
prescribed, the same place as the network's inlet and outlet nodes (the rim of the hole).
"""

from __future__ import annotations

import numpy as np
import shapely

from chipflow.field.cache import cached
from chipflow.field.model import FieldMesh, FieldPort, FieldRegion, FieldSolution
from chipflow.field.solve import solve_field
from chipflow.layout.model import Layout

__all__ = ["layout_regions", "layout_ports", "solve_layout", "estimate_triangles"]


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
    """Solve the field of a drawn chip with the given port pressures [Pa].

    With two ports the field is taken from the field cache (:mod:`chipflow.field.cache`) when
    it holds this chip: Stokes flow is linear, so the cache keeps the field of a unit pressure
    difference at unit viscosity, keyed by the mask polygons, depths, port holes and solver
    options, and it is scaled here to the pressures and the viscosity.
    """
    regions = layout_regions(layout)
    if len(pressures) != 2:
        return solve_field(regions, layout_ports(layout, pressures), viscosity, **options)
    high, low = sorted(pressures, key=lambda name: (-pressures[name], name))
    unit_ports = layout_ports(layout, {high: 1.0, low: 0.0})
    key = (
        [(shapely.to_wkb(r.polygon), r.depth) for r in regions],
        [(p.name, shapely.to_wkb(p.boundary), p.pressure) for p in unit_ports],
    )
    # what changes the field (a limit on the mesh does not: it only refuses)
    settings = {k: options[k] for k in sorted(options) if k != "max_triangles"}
    unit = cached(
        "chip",
        key,
        lambda: _solution_arrays(solve_field(regions, unit_ports, 1.0, **options)),
        settings,
    )
    return _from_arrays(unit, pressures[high] - pressures[low], pressures, viscosity)


def _solution_arrays(sol: FieldSolution) -> dict[str, np.ndarray]:
    """A solution as named arrays (the field cache holds no objects)."""
    m = sol.mesh
    out = {
        "points": m.points,
        "triangles": m.triangles,
        "depth": m.depth,
        "width": m.width,
        "wall_edges": m.wall_edges,
        "pressure": sol.pressure,
        "velocity": sol.velocity,
        "velocity_vertices": sol.velocity_vertices,
        "floor_shear": sol.floor_shear,
        "dofs": sol.dofs,
        "ports": np.array(list(m.port_edges)),
    }
    for name, edges in m.port_edges.items():
        out[f"port_edges.{name}"] = edges
        out[f"port_flow.{name}"] = np.float64(sol.port_flows[name])
    for name, value in sol.stats.items():
        out[f"stats.{name}"] = np.asarray(value)
    return out


def _from_arrays(unit: dict, dp: float, pressures: dict[str, float], viscosity: float):
    """The solution of pressure difference ``dp`` [Pa] and ``viscosity`` [Pa s] from the
    arrays of the unit solution (pressure 1 Pa at the higher port, viscosity 1 Pa s)."""
    names = [str(n) for n in np.atleast_1d(unit["ports"])]
    mesh = FieldMesh(
        unit["points"],
        unit["triangles"],
        unit["depth"],
        unit["width"],
        {name: unit[f"port_edges.{name}"] for name in names},
        unit["wall_edges"],
    )
    low = min(pressures.values())
    speed = dp / viscosity
    return FieldSolution(
        mesh=mesh,
        viscosity=viscosity,
        pressure=low + dp * unit["pressure"],
        velocity=speed * unit["velocity"],
        velocity_vertices=speed * unit["velocity_vertices"],
        floor_shear=abs(dp) * unit["floor_shear"],
        port_flows={name: speed * float(unit[f"port_flow.{name}"]) for name in names},
        port_pressures=dict(pressures),
        dofs=speed * unit["dofs"],
        stats={k[6:]: unit[k].item() for k in unit if k.startswith("stats.")},
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
