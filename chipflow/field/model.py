"""Inputs and outputs of the field solve: regions of one depth, ports, the solution.

All coordinates are in metres; depths in metres; pressures in pascals.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import shapely

__all__ = ["FieldRegion", "FieldPort", "FieldMesh", "FieldSolution"]


@dataclass(frozen=True)
class FieldRegion:
    """A part of the domain with one depth.

    Attributes
    ----------
    polygon : shapely.Polygon or shapely.MultiPolygon
        Drawn area [m]. Regions of different depth may touch or overlap; where they overlap
        the deeper one holds (the step between them is part of the domain).
    depth : float
        Channel depth in this region [m].
    """

    polygon: shapely.Geometry
    depth: float


@dataclass(frozen=True)
class FieldPort:
    """A boundary where the (depth-averaged) pressure, or the flow through it, is prescribed.

    Attributes
    ----------
    name : str
        Port name, the key of :attr:`FieldSolution.port_flows`.
    boundary : shapely.LineString or shapely.Polygon
        A line on the domain's outer boundary (a cut channel end), or a polygon (a punched
        hole) removed from the domain, whose rim inside the channels becomes the port [m].
    pressure : float or None
        Prescribed pressure [Pa] (None where ``flow`` is given).
    flow : float or None
        Prescribed flow into the domain through the port [m^3/s]; its uniform pressure is
        then solved for (:func:`chipflow.field.solve.solve_on_mesh`). At least one port of
        a field keeps a pressure.
    """

    name: str
    boundary: shapely.Geometry
    pressure: float | None
    flow: float | None = None


@dataclass(frozen=True)
class FieldMesh:
    """A triangle mesh of the domain with the depth and local channel width of each triangle.

    Attributes
    ----------
    points : numpy.ndarray
        (n_points, 2) vertex coordinates [m].
    triangles : numpy.ndarray
        (n_triangles, 3) vertex indices, counter-clockwise.
    depth : numpy.ndarray
        Depth of each triangle [m].
    width : numpy.ndarray
        Local channel width at each triangle [m] (wall-to-wall distance across the flow,
        estimated from the outline; ``inf`` where no facing wall was found).
    port_edges : dict of str to numpy.ndarray
        (n, 2) vertex pairs of the boundary edges of each port.
    wall_edges : numpy.ndarray
        (n, 2) vertex pairs of the no-slip boundary edges.
    """

    points: np.ndarray
    triangles: np.ndarray
    depth: np.ndarray
    width: np.ndarray
    port_edges: dict[str, np.ndarray]
    wall_edges: np.ndarray

    @property
    def area(self) -> np.ndarray:
        """Area of each triangle [m^2]."""
        p = self.points[self.triangles]
        d1, d2 = p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]
        return 0.5 * np.abs(d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0])

    @property
    def centroids(self) -> np.ndarray:
        """(n_triangles, 2) triangle centroids [m]."""
        return self.points[self.triangles].mean(axis=1)


@dataclass(frozen=True)
class FieldSolution:
    """The solved field.

    Attributes
    ----------
    mesh : FieldMesh
    dofs : numpy.ndarray
        Velocity coefficients of the quadratic elements (see
        :func:`chipflow.field.solve.velocity_at`).
    viscosity : float
        Dynamic viscosity [Pa s].
    pressure : numpy.ndarray
        Pressure at the mesh vertices [Pa] (piecewise linear).
    velocity : numpy.ndarray
        (n_triangles, 2) depth-averaged velocity at the triangle centroids [m/s].
    velocity_vertices : numpy.ndarray
        (n_points, 2) depth-averaged velocity at the mesh vertices [m/s].
    floor_shear : numpy.ndarray
        Floor wall shear stress magnitude at the triangle centroids [Pa].
    port_flows : dict of str to float
        Flow through each port [m^3/s], positive into the domain.
    port_pressures : dict of str to float
        The prescribed port pressures [Pa].
    stats : dict
        Sizes and timings of the solve (``dofs``, ``mesh_seconds``, ``solve_seconds``).
    """

    mesh: FieldMesh
    viscosity: float
    pressure: np.ndarray
    velocity: np.ndarray
    velocity_vertices: np.ndarray
    floor_shear: np.ndarray
    port_flows: dict[str, float]
    port_pressures: dict[str, float]
    dofs: np.ndarray | None = field(default=None, repr=False)
    stats: dict = field(default_factory=dict, repr=False)

    def resistance(self, high: str, low: str) -> float:
        """Hydraulic resistance between two ports, ``(p_high - p_low) / Q_high`` [Pa s/m^3]."""
        dp = self.port_pressures[high] - self.port_pressures[low]
        return dp / self.port_flows[high]
