"""The tests' own 2D solve of a chamber with any number of ports, independent of
chipflow.field: the conductance matrix between its stub ends."""

from __future__ import annotations

import math

import numpy as np
import shapely

from chipflow.layout.chamber import ChamberKey, chamber_regions


def independent_conductance_matrix(
    key: ChamberKey, size: float, driven: list[int] | None = None
) -> np.ndarray:
    """The (P, P) conductance matrix ``Y`` between the stub ends of the chamber's 2D domain
    (the chamber with a straight stub of each port's channel, :func:`chamber_regions`), flow
    into the domain per pressure [m^3/(Pa s) at 1 Pa s].

    Solved here independently of chipflow.field: the same depth-averaged Stokes-Brinkman
    equations (friction 12/h^2, lateral factor of the wide limit), Taylor-Hood P2-P1 on a mesh
    of its own (the triangle library) with triangles of about ``size`` [m], assembled by
    scikit-fem, one port at a time at 1 Pa and the others at 0 (the ports ``driven``, default
    all; the other columns are left 0). The flow out through a port is
    the integral of ``u . grad(phi)`` for the P1 function ``phi`` that is 1 on that port's
    nodes and 0 elsewhere (the divergence vanishes against every other pressure node's
    function, so this is the flux through the port).
    """
    import triangle
    from scipy.sparse.linalg import splu
    from skfem import (
        Basis,
        BilinearForm,
        ElementTriP1,
        ElementTriP2,
        ElementVector,
        MeshTri,
        asm,
        bmat,
        condense,
    )
    from skfem.helpers import ddot, dot, grad

    from chipflow.field.calibration import BETA_WIDE

    regions, ports = chamber_regions(key)[:2]
    domain = shapely.union_all([r.polygon for r in regions]).normalize()
    scale = 1e3  # mm
    vertices, segments, holes = [], [], []
    for ring in [domain.exterior, *domain.interiors]:
        xy = np.asarray(ring.coords)[:-1] * scale
        n0 = len(vertices)
        vertices += xy.tolist()
        k = np.arange(len(xy))
        segments += np.column_stack((n0 + k, n0 + (k + 1) % len(xy))).tolist()
    for hole in domain.interiors:
        c = shapely.Polygon(hole).point_on_surface()
        holes.append([c.x * scale, c.y * scale])
    pslg = {"vertices": np.array(vertices), "segments": np.array(segments)}
    if holes:
        pslg["holes"] = np.array(holes)
    area = (size * scale) ** 2 * math.sqrt(3) / 4
    t = triangle.triangulate(pslg, f"pq30a{area:.10f}")
    mesh = MeshTri(np.ascontiguousarray(t["vertices"].T), np.ascontiguousarray(t["triangles"].T))
    h = key.depth * scale
    k, beta = 12.0 / h**2, BETA_WIDE
    bu = Basis(mesh, ElementVector(ElementTriP2()), intorder=4)
    bp = bu.with_element(ElementTriP1())

    @BilinearForm
    def a(u, v, w):
        return beta * ddot(grad(u), grad(v)) + k * dot(u, v)

    @BilinearForm
    def b(u, q, w):
        return dot(u, grad(q))

    A, B = asm(a, bu), asm(b, bu, bp)
    K = bmat([[A, B.T], [B, None]], "csr")
    boundary = mesh.boundary_facets()
    middle = mesh.p[:, mesh.facets[:, boundary]].mean(axis=1).T / scale
    on_port = [
        boundary[shapely.distance(port.boundary, shapely.points(middle)) < 1e-9] for port in ports
    ]
    walls = np.setdiff1d(boundary, np.concatenate(on_port))
    nu = bu.N
    fixed_u = bu.get_dofs(walls).all()
    port_p = [bp.get_dofs(f).all() for f in on_port]
    D = np.r_[fixed_u, nu + np.concatenate(port_p)]
    n = len(ports)
    y = np.zeros((n, n))
    lu = None
    for j in range(n) if driven is None else driven:  # one port at a time (one factorisation)
        x = np.zeros(K.shape[0])
        x[nu + port_p[j]] = 1.0
        kc, rhs, x, free = condense(K, np.zeros(K.shape[0]), x=x, D=D)
        if lu is None:
            lu = splu(kc.tocsc())
        x[free] = lu.solve(rhs)
        out = B @ x[:nu]
        y[:, j] = [-out[p].sum() for p in port_p]
    # mm^3/s at 1 Pa and 1 Pa s, times the depth: m^3/(Pa s)
    return y * h * 1e-9
