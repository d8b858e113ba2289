"""Depth-averaged Stokes flow with Brinkman friction, Taylor-Hood P2-P1 elements.

Unknowns: the depth-averaged velocity ``u`` (quadratic, no-slip on walls, free at the ports)
and the pressure ``p`` (linear, prescribed at the ports). Weak form, for every test velocity
``v`` vanishing on walls and every test pressure ``q`` vanishing at the ports:

    int h (beta mu grad u : grad v + k mu u . v + v . grad p) = 0
    int h u . grad q = 0                      (that is div(h u) = 0 with flux h u)

The depth ``h`` weights both equations, so flux is conserved across steps of depth. The flow
through a port is the residual of the continuity rows of its pressure nodes, which is exactly
the discrete flux ``int h u . n`` through it. See :mod:`chipflow.field.calibration` for ``k``
and ``beta``.

References
----------
.. [1] C. Taylor and P. Hood, "A numerical solution of the Navier-Stokes equations using the
   finite element technique", Computers & Fluids 1 (1973) 73-100.
.. [2] T. Gustafsson and G. D. McBain, "scikit-fem: A Python package for finite element
   assembly", J. Open Source Software 5 (2020) 2369.
"""

from __future__ import annotations

import time

import numpy as np

from chipflow.errors import FieldError
from chipflow.field.calibration import floor_factor, friction, lateral_factor
from chipflow.field.mesh import build_mesh
from chipflow.field.model import FieldMesh, FieldPort, FieldRegion, FieldSolution

__all__ = ["solve_field", "solve_on_mesh", "assemble", "velocity_at"]


def solve_field(
    regions: list[FieldRegion] | tuple[FieldRegion, ...],
    ports: list[FieldPort] | tuple[FieldPort, ...],
    viscosity: float,
    *,
    mesh_size: float | None = None,
    across: float = 4.0,
    solver: str = "splu",
) -> FieldSolution:
    """Mesh the mask and solve the depth-averaged flow.

    Parameters
    ----------
    regions : sequence of FieldRegion
        Drawn channel areas with their depths [m].
    ports : sequence of FieldPort
        At least one port; with no pressure difference the flow is zero.
    viscosity : float
        Dynamic viscosity [Pa s].
    mesh_size : float, optional
        Largest triangle edge [m].
    across : float
        Triangle edges across a channel [-]; 4 gives about 1 % on the resistance of a channel
        four times wider than deep, 12 about 0.1 %.
    solver : {"splu", "spsolve"}
        Sparse direct solve of the reduced saddle-point system: ``splu`` factorises with a
        fill-reducing ordering of the symmetrised pattern; ``spsolve`` is the plain call.

    Returns
    -------
    FieldSolution
    """
    if not ports:
        raise FieldError("the field needs at least one port with a prescribed pressure")
    names = [p.name for p in ports]
    if len(set(names)) != len(names):
        raise FieldError(f"port names must differ, got {names}")
    if not (np.isfinite(viscosity) and viscosity > 0):
        raise FieldError(f"viscosity must be positive, got {viscosity!r} Pa s")
    t0 = time.perf_counter()
    mesh = build_mesh(list(regions), list(ports), mesh_size=mesh_size, across=across)
    t1 = time.perf_counter()
    sol = solve_on_mesh(mesh, {p.name: float(p.pressure) for p in ports}, viscosity, solver=solver)
    sol.stats["mesh_seconds"] = t1 - t0
    return sol


def assemble(mesh: FieldMesh, viscosity: float):
    """The saddle-point matrix ``[[A, B^T], [B, 0]]`` and its function spaces.

    Returns
    -------
    K : scipy.sparse.csr_matrix
        Full matrix, velocity dofs first.
    vbasis, pbasis : skfem bases
    """
    import skfem
    from scipy import sparse
    from skfem.helpers import ddot, dot, grad

    m = skfem.MeshTri(mesh.points.T.copy(), mesh.triangles.T.copy())
    vbasis = skfem.Basis(m, skfem.ElementVector(skfem.ElementTriP2()), intorder=4)
    pbasis = vbasis.with_element(skfem.ElementTriP1())
    nqp = vbasis.X.shape[1]
    h = np.repeat(mesh.depth[:, None], nqp, axis=1)
    nu = np.repeat((viscosity * lateral_factor(mesh.depth, mesh.width))[:, None], nqp, axis=1)
    kmu = np.repeat((viscosity * friction(mesh.depth))[:, None], nqp, axis=1)

    @skfem.BilinearForm
    def a_form(u, v, w):
        return w["h"] * (w["nu"] * ddot(grad(u), grad(v)) + w["kmu"] * dot(u, v))

    @skfem.BilinearForm
    def b_form(u, q, w):
        return w["h"] * dot(u, grad(q))

    a = a_form.assemble(vbasis, h=h, nu=nu, kmu=kmu)
    b = b_form.assemble(vbasis, pbasis, h=h)
    k = sparse.bmat([[a, b.T], [b, None]], format="csr")
    return k, vbasis, pbasis, m


def _facet_index(m, edges: np.ndarray) -> np.ndarray:
    f = np.sort(m.facets, axis=0)
    n = m.p.shape[1]
    key = f[0].astype(np.int64) * n + f[1]
    order = np.argsort(key)
    e = np.sort(edges, axis=1)
    want = e[:, 0].astype(np.int64) * n + e[:, 1]
    pos = np.searchsorted(key[order], want)
    return order[pos]


def solve_on_mesh(
    mesh: FieldMesh, port_pressures: dict[str, float], viscosity: float, *, solver: str = "splu"
) -> FieldSolution:
    """Solve the flow on a given mesh with the given port pressures [Pa]."""
    from scipy.sparse.linalg import splu, spsolve

    t0 = time.perf_counter()
    k, vbasis, pbasis, m = assemble(mesh, viscosity)
    nu_dofs = vbasis.N
    n = k.shape[0]
    wall = vbasis.get_dofs(facets=_facet_index(m, mesh.wall_edges)).all()
    x = np.zeros(n)
    fixed = [wall]
    port_nodes = {}
    for name, edges in mesh.port_edges.items():
        nodes = np.unique(edges)
        port_nodes[name] = nodes
        x[nu_dofs + nodes] = port_pressures[name]
        fixed.append(nu_dofs + nodes)
    fixed_dofs = np.unique(np.concatenate(fixed))
    free = np.setdiff1d(np.arange(n), fixed_dofs)
    kff = k[free][:, free].tocsc()
    rhs = -(k[free][:, fixed_dofs] @ x[fixed_dofs])
    t1 = time.perf_counter()
    if solver == "splu":
        lu = splu(
            kff, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0, options={"SymmetricMode": True}
        )
        x[free] = lu.solve(rhs)
    elif solver == "spsolve":
        x[free] = spsolve(kff, rhs)
    else:
        raise FieldError(f"unknown field solver {solver!r} (valid: splu, spsolve)")
    if not np.all(np.isfinite(x)):
        raise FieldError("the field solve failed (singular system): check the ports and walls")
    t2 = time.perf_counter()

    u, p = x[:nu_dofs], x[nu_dofs:]
    residual = k[nu_dofs:, :] @ x  # continuity rows: flux out through each pressure node
    flows = {name: float(-residual[nodes].sum()) for name, nodes in port_nodes.items()}
    uq = np.asarray(vbasis.interpolate(u))  # (2, n_elements, n_qp)
    dx = vbasis.dx
    vel = (uq * dx).sum(axis=-1) / dx.sum(axis=-1)
    vel = vel.T
    nodal = vbasis.nodal_dofs
    vel_vertices = np.column_stack([u[nodal[0]], u[nodal[1]]])
    speed = np.hypot(vel[:, 0], vel[:, 1])
    shear = floor_factor(mesh.depth, mesh.width) * viscosity * speed / mesh.depth
    stats = {
        "dofs": int(free.size),
        "triangles": int(len(mesh.triangles)),
        "assemble_seconds": t1 - t0,
        "solve_seconds": t2 - t1,
    }
    return FieldSolution(
        mesh=mesh,
        dofs=u,
        viscosity=viscosity,
        pressure=p,
        velocity=vel,
        velocity_vertices=vel_vertices,
        floor_shear=shear,
        port_flows=flows,
        port_pressures=dict(port_pressures),
        stats=stats,
    )


def velocity_at(solution: FieldSolution, xy: np.ndarray) -> np.ndarray:
    """Depth-averaged velocity at points ``xy`` (n, 2) inside the domain [m/s], shape (n, 2)."""
    import skfem

    mesh = solution.mesh
    m = skfem.MeshTri(mesh.points.T.copy(), mesh.triangles.T.copy())
    vbasis = skfem.Basis(m, skfem.ElementVector(skfem.ElementTriP2()))
    values = vbasis.probes(np.asarray(xy, float).T) @ solution.dofs
    return values.reshape(2, -1).T if values.size == 2 * len(xy) else values
