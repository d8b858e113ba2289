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
"""

from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass

import numpy as np

from chipflow.errors import FieldError, MeshBudgetError
from chipflow.field.assemble import assemble_parts, p2_space, p2_values, pressure_parts
from chipflow.field.calibration import floor_factor, friction, lateral_factor
from chipflow.field.iterative import RTOL, block_preconditioner, minres
from chipflow.field.mesh import build_mesh
from chipflow.field.model import FieldMesh, FieldPort, FieldRegion, FieldSolution

__all__ = [
    "DIRECT_MAX_UNKNOWNS",
    "FieldSystem",
    "choose_solver",
    "field_system",
    "solve_field",
    "solve_on_mesh",
    "solve_reduced",
    "scaled",
    "velocity_at",
    "check_field_flows",
    "BALANCE_TOLERANCE",
]


def solve_field(
    regions: list[FieldRegion] | tuple[FieldRegion, ...],
    ports: list[FieldPort] | tuple[FieldPort, ...],
    viscosity: float,
    *,
    mesh_size: float | None = None,
    across: float = 4.0,
    solver: str = "auto",
    rtol: float = RTOL,
    max_triangles: int | None = None,
) -> FieldSolution:
    """Mesh the mask and solve the depth-averaged flow.

    Parameters
    ----------
    regions : sequence of FieldRegion
        Drawn channel areas with their depths [m].
    ports : sequence of FieldPort
        At least one port with a pressure; the others have a pressure or a flow (see
        :func:`solve_on_mesh`). With no pressure difference and no flow the flow is zero.
    viscosity : float
        Dynamic viscosity [Pa s].
    mesh_size : float, optional
        Largest triangle edge [m].
    across : float
        Triangle edges across a channel [-]; edges are also at most ``2 depth / across``.
        At 4 (the default) a straight channel's resistance is within 0.4 % of the exact
        series for h/w from 0.25 to 2 (0.07 % for square channels), at 8 within 0.06 %.
    solver : {"auto", "direct", "iterative", "splu", "spsolve"}
        How the saddle-point system is solved (:func:`solve_reduced`): ``auto`` factorises
        systems of up to :data:`DIRECT_MAX_UNKNOWNS` unknowns directly (sparse LU) and solves
        larger ones iteratively (MINRES with multigrid, memory linear in the mesh).
    rtol : float
        Relative residual at which the iterative solve stops [-] (:data:`RTOL`).
    max_triangles : int, optional
        Raise :class:`~chipflow.errors.MeshBudgetError` instead of solving when the mesh has
        more triangles.

    Returns
    -------
    FieldSolution
    """
    if not any(p.flow is None for p in ports):
        raise FieldError("the field needs at least one port with a prescribed pressure")
    for p in ports:
        if (p.pressure is None) == (p.flow is None):
            raise FieldError(f"port {p.name!r}: give its pressure or its flow, exactly one")
    names = [p.name for p in ports]
    if len(set(names)) != len(names):
        raise FieldError(f"port names must differ, got {names}")
    if not (np.isfinite(viscosity) and viscosity > 0):
        raise FieldError(f"viscosity must be positive, got {viscosity!r} Pa s")
    t0 = time.perf_counter()
    mesh = build_mesh(list(regions), list(ports), mesh_size=mesh_size, across=across)
    if max_triangles is not None and len(mesh.triangles) > max_triangles:
        raise MeshBudgetError(
            f"the mesh has {len(mesh.triangles)} triangles, more than the {max_triangles} allowed"
        )
    t1 = time.perf_counter()
    pressures = {p.name: float(p.pressure) for p in ports if p.flow is None}
    flows = {p.name: float(p.flow) for p in ports if p.flow is not None}
    sol = solve_on_mesh(
        mesh, pressures, viscosity, port_flows=flows or None, solver=solver, rtol=rtol
    )
    sol.stats["mesh_seconds"] = t1 - t0
    return sol


#: Reduced unknowns up to which ``solver="auto"`` factorises the system directly: the sparse
#: LU is faster there and its memory still small (measured by ``benchmarks/field.py``; see
#: :mod:`chipflow.field.budget`).
DIRECT_MAX_UNKNOWNS = 500_000


@dataclass(frozen=True)
class FieldSystem:
    """The assembled problem of one mesh, reduced to its free unknowns.

    The reduced matrix is ``[[A, 0, Bx^T], [0, A, By^T], [Bx, By, 0]]`` over the free
    velocity nodes (both components) and the free pressure nodes.

    Attributes
    ----------
    a : scipy.sparse.csr_matrix
        Scalar velocity block of the free velocity nodes.
    bx, by : scipy.sparse.csr_matrix
        Divergence blocks, free pressure nodes by free velocity nodes.
    rhs : numpy.ndarray
        Right-hand side of the free unknowns (from the port pressures).
    velocity_free : numpy.ndarray
        Free velocity nodes (not on a wall).
    pressure_free : numpy.ndarray
        Free pressure nodes (not on a port).
    pressure : numpy.ndarray
        Pressure of every vertex, the port pressures in place [Pa].
    space : P2Space
    port_flux : dict of str to (numpy.ndarray, numpy.ndarray)
        Per port the x and y rows whose product with the free velocities is the flux out of
        the domain through the port [m^3/s per (m/s)].
    port_nodes : dict of str to numpy.ndarray
        Per port its pressure vertices.
    lift : (scipy.sparse matrix, scipy.sparse matrix)
        Divergence rows of the fixed pressure vertices (x, y), which carry the port pressures
        into the right-hand side.
    """

    a: object
    bx: object
    by: object
    rhs: np.ndarray
    velocity_free: np.ndarray
    pressure_free: np.ndarray
    pressure: np.ndarray
    space: object
    port_flux: dict
    port_nodes: dict = dataclasses.field(default_factory=dict, repr=False)
    lift: tuple = dataclasses.field(default=(), repr=False)

    def with_pressures(self, port_pressures: dict[str, float]) -> FieldSystem:
        """The same system with other port pressures [Pa] (the matrix is unchanged, so one
        factorisation serves every set of port pressures)."""
        pressure = np.zeros_like(self.pressure)
        fixed = np.zeros(pressure.size, bool)
        for name, nodes in self.port_nodes.items():
            pressure[nodes] = port_pressures[name]
            fixed[nodes] = True
        p_fixed = pressure[fixed]
        lx, ly = self.lift
        rhs = np.concatenate(
            [-(lx.T @ p_fixed), -(ly.T @ p_fixed), np.zeros(self.pressure_free.size)]
        )
        return dataclasses.replace(self, rhs=rhs, pressure=pressure)

    @property
    def size(self) -> int:
        """Number of reduced unknowns."""
        return int(2 * self.velocity_free.size + self.pressure_free.size)

    def matvec(self, x: np.ndarray) -> np.ndarray:
        """The reduced matrix times ``x``."""
        n = self.velocity_free.size
        ux, uy, p = x[:n], x[n : 2 * n], x[2 * n :]
        return np.concatenate(
            [self.a @ ux + self.bx.T @ p, self.a @ uy + self.by.T @ p, self.bx @ ux + self.by @ uy]
        )

    def matrix(self):
        """The reduced saddle-point matrix (scipy.sparse.csc_matrix)."""
        from scipy import sparse

        a, bx, by = self.a, self.bx, self.by
        return sparse.bmat([[a, None, bx.T], [None, a, by.T], [bx, by, None]], format="csc")

    def unpack(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The full fields of the reduced solution ``x``: the quadratic velocity coefficients
        (x then y, ``2 n_nodes``) [m/s] and the linear pressure [Pa]."""
        nn = self.space.n_nodes
        nv = self.velocity_free.size
        u = np.zeros(2 * nn)
        u[self.velocity_free] = x[:nv]
        u[nn + self.velocity_free] = x[nv : 2 * nv]
        p = self.pressure.copy()
        p[self.pressure_free] = x[2 * nv :]
        return u, p

    def flows(self, x: np.ndarray) -> dict[str, float]:
        """Flow into the domain through each port [m^3/s] for the reduced solution ``x``."""
        n = self.velocity_free.size
        ux, uy = x[:n], x[n : 2 * n]
        return {name: -float(fx @ ux + fy @ uy) for name, (fx, fy) in self.port_flux.items()}


def field_system(
    mesh: FieldMesh, port_pressures: dict[str, float], viscosity: float
) -> FieldSystem:
    """Assemble the problem on ``mesh`` with the port pressures [Pa] and viscosity [Pa s]."""
    space = p2_space(mesh.points, mesh.triangles)
    lateral = viscosity * lateral_factor(mesh.depth, mesh.width)
    wall = np.zeros(space.n_nodes, bool)
    wall[space.edge_nodes(mesh.wall_edges)] = True
    vfree = np.nonzero(~wall)[0]
    # the wall nodes' rows and columns are never formed: no full matrix to reduce
    a, bx, by = assemble_parts(
        mesh.points,
        mesh.triangles,
        space,
        mesh.depth,
        lateral,
        viscosity * friction(mesh.depth),
        keep=~wall,
    )
    pressure = np.zeros(space.n_points)
    fixed = np.zeros(space.n_points, bool)
    port_nodes = {}
    for name, edges in mesh.port_edges.items():
        nodes = np.unique(edges)
        port_nodes[name] = nodes
        pressure[nodes] = port_pressures[name]
        fixed[nodes] = True
    pfree = np.nonzero(~fixed)[0]
    p_fixed = pressure[fixed]
    lift = (bx[fixed], by[fixed])
    rhs = np.concatenate([-(lift[0].T @ p_fixed), -(lift[1].T @ p_fixed), np.zeros(pfree.size)])
    flux = {
        name: (np.asarray(bx[nodes].sum(axis=0)).ravel(), np.asarray(by[nodes].sum(axis=0)).ravel())
        for name, nodes in port_nodes.items()
    }
    return FieldSystem(
        a, bx[pfree], by[pfree], rhs, vfree, pfree, pressure, space, flux, port_nodes, lift
    )


def _schur_parts(mesh: FieldMesh, system: FieldSystem, viscosity: float):
    """The Hele-Shaw pressure Laplacian and the viscous pressure mass of the free nodes."""
    beta = lateral_factor(mesh.depth, mesh.width)
    h = mesh.depth
    stiff, mass = pressure_parts(
        mesh.points, mesh.triangles, h**3 / (12.0 * viscosity), h / (beta * viscosity)
    )
    free = system.pressure_free
    return stiff[free][:, free].tocsr(), mass[free]


def choose_solver(unknowns: int) -> str:
    """``"direct"`` up to :data:`DIRECT_MAX_UNKNOWNS` reduced unknowns, else ``"iterative"``."""
    return "direct" if unknowns <= DIRECT_MAX_UNKNOWNS else "iterative"


def solve_reduced(
    system: FieldSystem,
    solver: str = "auto",
    *,
    mesh: FieldMesh | None = None,
    viscosity: float | None = None,
    rtol: float = RTOL,
    stats: dict | None = None,
    rhs: np.ndarray | None = None,
) -> np.ndarray:
    """Solve the reduced system; returns the free unknowns.

    Parameters
    ----------
    system : FieldSystem
    solver : {"auto", "direct", "splu", "spsolve", "iterative"}
        ``direct`` (or ``splu``) factorises with the column approximate minimum degree
        ordering and partial pivoting; ``spsolve`` is scipy's plain call; ``iterative`` is
        preconditioned MINRES (:mod:`chipflow.field.iterative`, needs ``mesh`` and
        ``viscosity``); ``auto`` takes :func:`choose_solver` of the system's size.
    rtol : float
        Relative residual of the iterative solve [-].
    stats : dict, optional
        Receives ``solver``, and for the iterative solve ``iterations`` and ``residual`` (of
        the last right-hand side).
    rhs : numpy.ndarray, optional
        Right-hand sides to solve for instead of ``system.rhs``: one per column (one
        factorisation, or one preconditioner, serves them all).
    """
    from scipy.sparse.linalg import splu, spsolve

    if solver == "auto":
        solver = choose_solver(system.size)
    stats = {} if stats is None else stats
    b = system.rhs if rhs is None else rhs
    if solver in ("direct", "splu"):
        stats["solver"] = "direct"
        # COLAMD with partial pivoting: the minimum-degree ordering of A + A^T without
        # pivoting fills some chips ten times more (a 57k-triangle tree: 106 s against 1.5 s)
        lu = splu(system.matrix(), permc_spec="COLAMD")
        return lu.solve(b)
    if solver == "spsolve":
        stats["solver"] = "spsolve"
        x = spsolve(system.matrix(), b)
        return x.reshape(b.shape) if b.ndim == 2 else x
    if solver == "iterative":
        if mesh is None or viscosity is None:
            raise FieldError("the iterative field solve needs the mesh and the viscosity")
        stats["solver"] = "iterative"
        laplacian, mass = _schur_parts(mesh, system, viscosity)
        precondition = block_preconditioner(system.a, laplacian, mass)
        del laplacian
        columns = b.reshape(b.shape[0], -1).T
        xs = []
        for column in columns:  # one per driven port: a handful
            result = minres(system.matvec, column, precondition, rtol=rtol)
            xs.append(result.x)
            stats["iterations"] = result.iterations
            stats["residual"] = result.residual
        return xs[0] if b.ndim == 1 else np.column_stack(xs)
    raise FieldError(
        f"unknown field solver {solver!r} (valid: auto, direct, splu, spsolve, iterative)"
    )


def solve_on_mesh(
    mesh: FieldMesh,
    port_pressures: dict[str, float],
    viscosity: float,
    *,
    port_flows: dict[str, float] | None = None,
    solver: str = "auto",
    rtol: float = RTOL,
) -> FieldSolution:
    """Solve the flow on a given mesh with the given port pressures [Pa].

    Ports named in ``port_flows`` have their flow into the domain prescribed [m^3/s]
    instead. The flow is linear in the port pressures, so they are found by superposition:
    one solution with the prescribed pressures and those ports at 0 Pa, and one per
    flow-driven port at 1 Pa with every other port at 0 Pa (one factorisation serves all),
    give the flows through the flow-driven ports as ``q0 + Y p``; the pressures
    ``p = Y^-1 (q - q0)`` weight the solutions, and the floor shear is taken from their sum.
    Every port of the mesh needs a pressure or a flow, and at least one a pressure.
    ``solver`` and ``rtol`` as in :func:`solve_reduced`.

    Raises
    ------
    FieldError
        A singular system, or port flows that do not balance or miss their prescribed values
        by more than :data:`BALANCE_TOLERANCE` of the largest.
    """
    t0 = time.perf_counter()
    driven = dict(port_flows or {})
    fixed = {**port_pressures, **{name: 0.0 for name in driven}}
    system = field_system(mesh, fixed, viscosity)
    space = system.space
    nn = space.n_nodes
    t1 = time.perf_counter()
    stats: dict = {}
    names = list(driven)
    units = [system.with_pressures({k: float(k == j) for k in fixed}).rhs for j in names]
    b = np.column_stack([system.rhs, *units]) if units else system.rhs
    xs = solve_reduced(
        system, solver, mesh=mesh, viscosity=viscosity, rtol=rtol, stats=stats, rhs=b
    )
    if not np.all(np.isfinite(xs)):
        raise FieldError("the field solve failed (singular system): check the ports and walls")
    pressures = dict(fixed)
    if names:
        x0, basis = xs[:, 0], xs[:, 1:]
        q0 = system.flows(x0)
        unit = [system.flows(basis[:, j]) for j in range(len(names))]  # one per driven port
        y = np.array([[flows[i] for flows in unit] for i in names])
        target = np.array([driven[i] - q0[i] for i in names])
        try:
            p = np.linalg.solve(y, target)
        except np.linalg.LinAlgError:
            raise FieldError(
                "the flow-driven ports are not joined to a port with a pressure"
            ) from None
        x = x0 + basis @ p
        pressures.update({name: float(v) for name, v in zip(names, p, strict=True)})
        system = system.with_pressures(pressures)
    else:
        x = xs
    t2 = time.perf_counter()

    flows = system.flows(x)
    u, pressure = system.unpack(x)
    check_field_flows(flows, pressures, driven)
    ux, uy = u[:nn], u[nn:]
    # the mean of a quadratic over a triangle is the mean of its three edge-midpoint values
    vel = np.column_stack(
        [ux[space.nodes[:, 3:]].mean(axis=1), uy[space.nodes[:, 3:]].mean(axis=1)]
    )
    npts = space.n_points
    vel_vertices = np.column_stack([ux[:npts], uy[:npts]])
    speed = np.hypot(vel[:, 0], vel[:, 1])
    shear = floor_factor(mesh.depth, mesh.width) * viscosity * speed / mesh.depth
    stats.update(
        dofs=system.size,
        triangles=int(len(mesh.triangles)),
        assemble_seconds=t1 - t0,
        solve_seconds=t2 - t1,
    )
    return FieldSolution(
        mesh=mesh,
        viscosity=viscosity,
        pressure=pressure,
        velocity=vel,
        velocity_vertices=vel_vertices,
        floor_shear=shear,
        port_flows=flows,
        port_pressures=pressures,
        dofs=u,
        stats=stats,
    )


#: The flows through a field's ports must balance to this fraction of the largest of them.
BALANCE_TOLERANCE = 1e-6


def check_field_flows(
    flows: dict[str, float],
    port_pressures: dict[str, float],
    prescribed: dict[str, float] | None = None,
) -> None:
    """Every field solve's own conservation check: the port flows [m^3/s] are finite, the
    flow-driven ports carry their ``prescribed`` flows [m^3/s] and, where the ports'
    pressures [Pa] differ, the flows balance; both to :data:`BALANCE_TOLERANCE` of the
    largest (a FieldError if not)."""
    values = np.array(list(flows.values()), dtype=float)
    if not np.all(np.isfinite(values)):
        raise FieldError("the field solve gave no finite flow: check the ports and outlines")
    largest = float(np.abs(values).max(initial=0.0))
    for name, q in (prescribed or {}).items():
        if abs(flows[name] - q) > BALANCE_TOLERANCE * max(largest, abs(q)):
            raise FieldError(
                f"the field solve does not carry the flow given at port {name!r} "
                f"({flows[name]:.6g} against {q:.6g} m^3/s); the mesh of this mask is not usable"
            )
    if np.ptp(list(port_pressures.values()) or [0.0]) == 0 or largest == 0:
        return
    imbalance = abs(float(values.sum()))
    if imbalance > BALANCE_TOLERANCE * largest:
        raise FieldError(
            f"the field solve does not conserve flow: the ports' flows leave "
            f"{imbalance / largest:.2g} of the largest unaccounted (tolerance "
            f"{BALANCE_TOLERANCE:g}); the mesh of this mask is not usable"
        )


def velocity_at(solution: FieldSolution, xy: np.ndarray) -> np.ndarray:
    """Depth-averaged velocity at points ``xy`` (n, 2) inside the domain [m/s], shape (n, 2).

    Points outside every triangle get NaN.
    """
    from scipy.spatial import cKDTree

    mesh = solution.mesh
    xy = np.asarray(xy, float).reshape(-1, 2)
    space = p2_space(mesh.points, mesh.triangles)
    tri_pts = mesh.points[mesh.triangles]
    k = min(16, len(mesh.triangles))
    _, cand = cKDTree(tri_pts.mean(axis=1)).query(xy, k=k)
    cand = cand.reshape(len(xy), k)
    p0 = tri_pts[cand, 0]
    j1, j2 = tri_pts[cand, 1] - p0, tri_pts[cand, 2] - p0
    det = j1[..., 0] * j2[..., 1] - j1[..., 1] * j2[..., 0]
    d = xy[:, None, :] - p0
    l1 = (d[..., 0] * j2[..., 1] - d[..., 1] * j2[..., 0]) / det
    l2 = (j1[..., 0] * d[..., 1] - j1[..., 1] * d[..., 0]) / det
    lam = np.stack([1.0 - l1 - l2, l1, l2], axis=-1)
    inside = lam.min(axis=-1)
    best = np.argmax(inside, axis=1)
    rows = np.arange(len(xy))
    tri = cand[rows, best]
    phi = p2_values(lam[rows, best])
    nodes = space.nodes[tri]
    nn = space.n_nodes
    u = solution.dofs
    out = np.column_stack([(phi * u[nodes]).sum(axis=1), (phi * u[nodes + nn]).sum(axis=1)])
    out[inside[rows, best] < -1e-9] = np.nan
    return out


def scaled(solution: FieldSolution, factor: float) -> FieldSolution:
    """The same field with every pressure, velocity, shear and flow times ``factor``."""
    return dataclasses.replace(
        solution,
        pressure=solution.pressure * factor,
        velocity=solution.velocity * factor,
        velocity_vertices=solution.velocity_vertices * factor,
        floor_shear=solution.floor_shear * abs(factor),
        port_flows={k: v * factor for k, v in solution.port_flows.items()},
        port_pressures={k: v * factor for k, v in solution.port_pressures.items()},
        dofs=None if solution.dofs is None else solution.dofs * factor,
    )
