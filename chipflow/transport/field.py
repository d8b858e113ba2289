"""Oxygen on the field: depth-averaged advection, diffusion and uptake on the flow field's mesh.

On the triangle mesh and with the depth-averaged velocity of the 2D flow field
(:mod:`chipflow.field`), the bulk (flux-weighted) concentration ``c`` obeys

    div(h u c) - div(h D grad c) = J_roof(c) - J_floor(c)

per unit plan area: the cells' uptake on the floor is a sink, the roof's permeation a source,
both through the fully developed transfer across the depth of
:mod:`chipflow.transport.transfer` (the depth-averaged model has no entrance layer; it is
the developed limit, the cautious side for the floor).

Discretisation: linear (P1) concentration on the mesh vertices, the advection in conservative
form with the flow's own discrete fluxes (the mean of the quadratic velocity over each
triangle, which satisfies the flow solve's continuity exactly against every linear test
function, so moles are conserved to the solver's precision), stabilised by streamline upwind
Petrov-Galerkin (SUPG [Brooks1982]_) with
the optimal upwind weight ``coth(Pe) - 1/Pe`` of the element Peclet number, uptake and
permeation lumped at the vertices and solved by Newton's method. The inlet port holds the
oxygen that reaches the chip; the outlet lets it leave with the flow.

References
----------
.. [Brooks1982] A. N. Brooks and T. J. R. Hughes, "Streamline upwind/Petrov-Galerkin
   formulations for convection dominated flows", Comput. Methods Appl. Mech. Eng. 32 (1982)
   199-259.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any

import numpy as np

from chipflow.errors import FieldError
from chipflow.transport.march import _wall_state, wall_geometry
from chipflow.transport.species import Species

__all__ = ["FieldTransport", "solve_field_transport", "with_field", "seeded_triangles"]

_DEVELOPED = 1e6  # a Graetz coordinate far downstream: the fully developed transfer
_NEWTON = 30


@dataclass(frozen=True)
class FieldTransport:
    """Oxygen on the field mesh.

    Attributes
    ----------
    mesh : FieldMesh
    bulk : numpy.ndarray
        Bulk concentration at the mesh vertices [mol/m^3].
    floor : numpy.ndarray
        Floor concentration of each triangle [mol/m^3].
    seeded : numpy.ndarray of bool
        Seeded triangles.
    critical : float or None
        [mol/m^3].
    hypoxic_fraction : float or None
        Share of the seeded floor area below ``critical``.
    residual : float
        ``(in + roof - out - uptake) / in`` of the discrete solution [-].
    newton : int
        Newton iterations taken.
    moles_in, moles_out : float
        Moles per second entering and leaving at the ports [mol/s].
    outflow : float
        Flow leaving [m^3/s].
    """

    mesh: Any
    bulk: np.ndarray
    floor: np.ndarray
    seeded: np.ndarray
    critical: float | None
    hypoxic_fraction: float | None
    residual: float
    newton: int
    moles_in: float
    moles_out: float
    outflow: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-able SI values (the ``transport.field`` entry of results.json)."""
        area = self.mesh.area
        seeded = self.seeded
        floor = self.floor[seeded] if seeded.any() else self.floor
        return {
            "o2_floor_min": float(floor.min()),
            "hypoxic_fraction": self.hypoxic_fraction,
            "seeded_area": float(area[seeded].sum()),
            "o2_out": self.moles_out / max(self.outflow, 1e-300),
            "mass_residual": self.residual,
            "mesh_triangles": int(len(self.mesh.triangles)),
        }


def seeded_triangles(solution, layout, seeded: str) -> np.ndarray:
    """Triangles of the floor that carry cells: all of them, or those nearest a bed channel
    and those in a chamber."""
    n = len(solution.mesh.triangles)
    if layout is None or seeded != "bed":
        return np.ones(n, bool)
    from chipflow.field.compare import chamber_triangles, classify

    _, channel = classify(solution, layout)
    role = layout.channels.role.astype(str)
    bed = (role[channel] == "bed") | chamber_triangles(solution.mesh, layout)
    return bed if bed.any() else np.ones(n, bool)


def solve_field_transport(
    solution,
    species: Species,
    inlet: float,
    seeded: np.ndarray,
    roof: float = 0.0,
    *,
    inlet_port: str = "inlet",
) -> FieldTransport:
    """The bulk and floor concentration of ``species`` on a solved flow field.

    Parameters
    ----------
    solution : FieldSolution
        The flow field (its depth-averaged velocity and mesh).
    species : Species
        Diffusivity, uptake of the seeded floor, ambient and critical concentrations.
    inlet : float
        Concentration entering at ``inlet_port`` [mol/m^3].
    seeded : numpy.ndarray of bool
        Triangles carrying cells.
    roof : float
        Gas conductance of the roof ``P / (t H)`` [m/s] (0: impermeable).
    inlet_port : str
        The port where the liquid enters.

    Returns
    -------
    FieldTransport

    Raises
    ------
    FieldError
        When the port is unknown or Newton's method does not converge.
    """
    import scipy.sparse as sp
    from scipy.sparse.linalg import splu

    from chipflow.field.assemble import _geometry  # triangle areas and gradients

    mesh = solution.mesh
    if inlet_port not in mesh.port_edges:
        raise FieldError(f"no port {inlet_port!r} on the field (ports: {list(mesh.port_edges)})")
    tri = mesh.triangles
    npts = len(mesh.points)
    area, grads = _geometry(mesh.points, tri)
    h = mesh.depth
    u = np.asarray(solution.velocity, float)  # mean of the quadratic velocity per triangle
    d = species.diffusivity
    # u . grad(phi_k) per triangle and vertex
    ug = np.einsum("nd,nkd->nk", u, grads)
    # discrete outflux share of every vertex: sum_T h A u . grad(phi_i)
    flux = np.bincount(tri.ravel(), weights=((h * area)[:, None] * ug).ravel(), minlength=npts)
    inlet_nodes = np.unique(mesh.port_edges[inlet_port])
    ports = np.unique(np.concatenate([e.ravel() for e in mesh.port_edges.values()]))
    outflux = np.zeros(npts)
    out_ports = np.setdiff1d(ports, inlet_nodes)
    outflux[out_ports] = np.maximum(flux[out_ports], 0.0)

    # SUPG weight per triangle
    speed = np.hypot(u[:, 0], u[:, 1])
    sum_ug = np.abs(ug).sum(axis=1)
    length = np.where(sum_ug > 0, 2.0 * speed / np.where(sum_ug > 0, sum_ug, 1.0), 0.0)
    pe = speed * length / (2.0 * d)
    with np.errstate(invalid="ignore", divide="ignore"):
        xi = np.where(pe > 1e-6, 1.0 / np.tanh(pe) - 1.0 / np.where(pe > 1e-6, pe, 1.0), pe / 3)
        tau = np.where(speed > 0, length * xi / (2.0 * np.where(speed > 0, speed, 1.0)), 0.0)

    rows = np.repeat(tri, 3, axis=1).ravel()
    cols = np.tile(tri, (1, 3)).ravel()
    # conservative advection  -int h c u.grad(v): row i, column k: -h A u.grad(phi_i) / 3
    adv = -((h * area)[:, None, None] * ug[:, :, None] / 3.0) * np.ones((1, 1, 3))
    diff = (h * d * area)[:, None, None] * np.einsum("nid,nkd->nik", grads, grads)
    supg = (tau * h * area)[:, None, None] * ug[:, :, None] * ug[:, None, :]
    linear = sp.csr_matrix(((adv + diff + supg).ravel(), (rows, cols)), shape=(npts, npts))
    linear = linear + sp.diags(outflux)

    uptake = np.where(seeded, species.uptake, 0.0)
    ambient = 0.0 if species.ambient is None else species.ambient
    wall = np.full(len(tri), float(roof) if species.ambient is not None else 0.0)
    hd = h / d
    rep = lambda a: np.repeat(a[:, None], 3, axis=1).ravel()  # noqa: E731
    geometry = wall_geometry(np.full(3 * len(tri), _DEVELOPED), rep(hd), rep(wall))

    def source(c_vertex):
        """Net flux into the liquid at each (triangle, vertex) [mol/(m^2 s)] and its slope."""
        cv = c_vertex[tri]  # (n, 3)
        g, dg, cf, _, _ = _wall_state(
            np.maximum(cv.ravel(), 0.0), geometry, rep(hd), rep(uptake), species.km,
            rep(wall), ambient,
        )  # fmt: skip
        return g.reshape(-1, 3), dg.reshape(-1, 3), cf.reshape(-1, 3)

    lumped = area[:, None] / 3.0
    supg_weight = (tau * area)[:, None] * ug

    def balance(c_vertex):
        """F(c) = L c - sum (A/3) g(c_i) - SUPG tau (u.grad phi_i) A mean_k g(c_k)."""
        g, dg, cf = source(c_vertex)
        lump = np.bincount(tri.ravel(), weights=(lumped * g).ravel(), minlength=npts)
        stab = np.bincount(
            tri.ravel(), weights=(supg_weight * g.mean(axis=1)[:, None]).ravel(), minlength=npts
        )
        return linear @ c_vertex - lump - stab, g, dg, cf

    free = np.ones(npts, bool)
    free[inlet_nodes] = False
    c = np.full(npts, float(inlet))
    scale = max(abs(float(inlet)), ambient, 1e-30)
    iterations = 0
    while True:  # Newton iterations
        iterations += 1
        full, g, dg, _ = balance(c)
        jac_lump = sp.csr_matrix(
            (np.ravel(lumped * dg), (tri.ravel(), tri.ravel())), shape=(npts, npts)
        )
        jac_supg = sp.csr_matrix(
            ((supg_weight[:, :, None] * dg[:, None, :] / 3.0).ravel(), (rows, cols)),
            shape=(npts, npts),
        )
        jac = (linear - jac_lump - jac_supg).tocsr()
        step = np.zeros(npts)
        try:
            step[free] = splu(jac[free][:, free].tocsc()).solve(-full[free])
        except RuntimeError as exc:
            raise FieldError(f"the oxygen field solve failed ({exc})") from None
        c = np.maximum(c + step, 0.0)
        if np.max(np.abs(step)) < 1e-10 * scale:
            break
        if iterations == _NEWTON:
            raise FieldError(
                f"the oxygen field did not converge in {_NEWTON} Newton iterations "
                f"(last change {np.max(np.abs(step)):.3g} mol/m^3)"
            )
    full, g, _, cf = balance(c)
    moles_in = float(full[inlet_nodes].sum())
    outflow = float(outflux.sum())
    moles_out = float((outflux * c).sum())
    net_wall = float((lumped * g).sum())  # roof in minus uptake [mol/s]
    residual = (moles_in + net_wall - moles_out) / max(abs(moles_in), 1e-300)
    floor = cf.mean(axis=1)
    share = None
    if species.critical is not None and seeded.any():
        share = float(area[seeded & (floor < species.critical)].sum() / area[seeded].sum())
    out = FieldTransport(
        mesh=mesh,
        bulk=c,
        floor=floor,
        seeded=seeded,
        critical=species.critical,
        hypoxic_fraction=share,
        residual=float(residual),
        newton=iterations,
        moles_in=moles_in,
        moles_out=moles_out,
        outflow=outflow,
    )
    return out


def with_field(transport, field_solution, layout, seeded: str):
    """``transport`` with the oxygen map on the field of the chip (``results["field"]`` set).

    The field's inlet gets the oxygen the 1D transport brings to the chip inlet.
    """
    species = transport.oxygen.species
    tri_seeded = seeded_triangles(field_solution, layout, seeded)
    roof = transport.results["roof_conductance"]
    ft = solve_field_transport(field_solution, species, transport.chip_inlet, tri_seeded, roof)
    results = {**transport.results, "field": ft.to_dict()}
    return dataclasses.replace(transport, results=results, field=ft)


def mask_oxygen(
    solution, cell, temperature: float | None, inlet: float | None = None
) -> tuple[FieldTransport, dict[str, Any]]:
    """Oxygen on the field of a mask drawn elsewhere (``chipflow analyse --cell-type``).

    The whole floor carries ``cell`` (a :class:`chipflow.checks.cell_types.CellType`) at the
    assumed 1e5 cells/cm^2 with its uptake and critical oxygen; the roof is impermeable; the
    inlet holds ``inlet`` [mol/m^3] (None: in equilibrium with the incubator air at
    ``temperature`` [K]).

    Returns
    -------
    transport : FieldTransport
    results : dict
        JSON-able SI values (``o2_inlet``, ``o2_critical``, ``o2_floor_min``,
        ``hypoxic_fraction``, ``o2_out``, ...).
    """
    from chipflow.checks.transport import CELL_DENSITY_DEFAULT
    from chipflow.spec.culture import O2_CRITICAL_DEFAULT, Culture
    from chipflow.transport.run import oxygen_species

    culture = Culture(
        cell_type=cell.name,
        cells=cell.o2_consumption is not None,
        cell_density=CELL_DENSITY_DEFAULT,
        o2_consumption=cell.o2_consumption or 0.0,
        o2_inlet=inlet,
        o2_critical=cell.o2_critical if cell.o2_critical is not None else O2_CRITICAL_DEFAULT,
    )
    species = oxygen_species(culture, temperature)
    seeded = np.ones(len(solution.mesh.triangles), bool)
    ft = solve_field_transport(solution, species, species.inlet, seeded)
    results = {
        "o2_inlet": species.inlet,
        "o2_critical": species.critical,
        "o2_uptake": species.uptake,
        **ft.to_dict(),
    }
    return ft, results
