"""Junction corrections against independent 2D solves written here.

Both solve the depth-averaged Stokes flow with Brinkman friction (Hele-Shaw with the lateral
viscous term: mu lap u - 12 mu / h^2 u = grad p, div u = 0; REFERENCES.md, "Second round"),
independently of chipflow.field: a finite-difference solve on a staggered (MAC) grid for the
T-junction, whose walls lie on the grid lines, and a Taylor-Hood (P2-P1) finite-element solve
on a triangle mesh for the Y-junction, whose oblique walls a grid would staircase. Neither uses
chipflow's friction calibration; instead each solves straight channels of the same widths on
the same grid or mesh, so its junction is measured against its own straight channels and then
put on the exact duct series (matching straight channels to the series is the depth-averaged
model's calibration, not a source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
import shapely

from chipflow.layout.junctions import Junction, junction_excess_length
from chipflow.network import Network, solve
from chipflow.physics import duct
from chipflow.physics.fluid import Fluid

MU = 1.0e-3
H = 50e-6


def fd_port_flows(fluid, ports, h, mu, dx):
    """Depth-averaged Stokes-Brinkman on a MAC grid: mu lap u - 12 mu/h^2 u = grad p, div u = 0.

    fluid: shapely polygon; ports: list of (polygon, pressure) abutting it. Returns flows into
    the fluid from each port [m^3/s]."""
    allg = shapely.union_all([fluid] + [p for p, _ in ports])
    x0, y0, x1, y1 = allg.bounds
    nx, ny = int(math.ceil((x1 - x0) / dx)) + 2, int(math.ceil((y1 - y0) / dx)) + 2
    xc = x0 - dx / 2 + dx * np.arange(nx)
    yc = y0 - dx / 2 + dx * np.arange(ny)
    X, Y = np.meshgrid(xc, yc, indexing="ij")
    kind = np.zeros((nx, ny), int)
    kind[shapely.contains_xy(fluid, X, Y)] = 1
    pval = np.zeros((nx, ny))
    for k, (poly, pr) in enumerate(ports):
        m = shapely.contains_xy(poly, X, Y) & (kind == 0)
        kind[m] = 2 + k
        pval[m] = pr
    open_ = kind > 0
    # u faces between (i,j) and (i+1,j)
    uf = open_[:-1, :] & open_[1:, :]
    vf = open_[:, :-1] & open_[:, 1:]
    uid = -np.ones(uf.shape, int)
    uid[uf] = np.arange(uf.sum())
    nu = uf.sum()
    vid = -np.ones(vf.shape, int)
    vid[vf] = nu + np.arange(vf.sum())
    nv = vf.sum()
    fl = kind == 1
    pid = -np.ones(kind.shape, int)
    pid[fl] = nu + nv + np.arange(fl.sum())
    n = nu + nv + fl.sum()
    rows, cols, vals = [], [], []
    rhs = np.zeros(n)
    kf = 12.0 / h**2

    def add(r, c, v):
        rows.append(r)
        cols.append(c)
        vals.append(v)

    def momentum(fid, face_mask, axis):
        # faces indexed (i,j) in the face array; neighbours along and across
        ci_, cj_ = np.nonzero(face_mask)
        me = fid[ci_, cj_]
        diag = np.full(me.size, -kf * mu)
        shape = fid.shape
        for di, dj in ((1, 0), (-1, 0), (0, 1), (0, -1)):
            along = (di != 0) if axis == 0 else (dj != 0)
            I2, J2 = ci_ + di, cj_ + dj
            inside = (I2 >= 0) & (I2 < shape[0]) & (J2 >= 0) & (J2 < shape[1])
            nb = np.full(me.size, -1)
            nb[inside] = fid[I2[inside], J2[inside]]
            has = nb >= 0
            diag = diag - mu / dx**2
            add(me[has], nb[has], np.full(has.sum(), mu / dx**2))
            if not along:  # wall parallel to the flow: ghost -u
                diag = diag - np.where(has, 0.0, mu / dx**2)
            # along the flow with no neighbour face: the normal velocity at a wall is 0
        add(me, me, diag)
        # pressure gradient: cells (ci_,cj_) and (ci_+1,cj_) [axis 0] or (ci_,cj_+1) [axis 1]
        a = (ci_, cj_)
        b = (ci_ + 1, cj_) if axis == 0 else (ci_, cj_ + 1)
        for (ci, cj), sgn in ((a, 1.0), (b, -1.0)):
            pc = pid[ci, cj]
            isf = pc >= 0
            add(me[isf], pc[isf], np.full(isf.sum(), sgn / dx))
            rhs[me[~isf]] -= sgn / dx * pval[ci[~isf], cj[~isf]]

    momentum(uid, uf, 0)
    momentum(vid, vf, 1)
    # continuity at fluid cells
    ci_, cj_ = np.nonzero(fl)
    me = pid[ci_, cj_]
    for fid, di, dj, sgn in (
        (uid, 0, 0, -1.0),
        (uid, -1, 0, 1.0),
        (vid, 0, 0, -1.0),
        (vid, 0, -1, 1.0),
    ):
        # outflow faces: u at (ci_,cj_) [east] +, u at (ci_-1,cj_) [west] -
        I2, J2 = ci_ + di, cj_ + dj
        ok = (I2 >= 0) & (J2 >= 0) & (I2 < fid.shape[0]) & (J2 < fid.shape[1])
        f = np.full(me.size, -1)
        f[ok] = fid[I2[ok], J2[ok]]
        h_ = f >= 0
        add(me[h_], f[h_], np.full(h_.sum(), -sgn / dx))
    A = sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n)
    )
    sol = spla.spsolve(A.tocsc(), rhs)
    flows = []
    for k in range(len(ports)):
        pk = kind == 2 + k
        q = 0.0
        # u faces: port cell west of fluid cell => flow into fluid = +u
        m = uf & pk[:-1, :] & fl[1:, :]
        q += sol[uid[m]].sum()
        m = uf & fl[:-1, :] & pk[1:, :]
        q -= sol[uid[m]].sum()
        m = vf & pk[:, :-1] & fl[:, 1:]
        q += sol[vid[m]].sum()
        m = vf & fl[:, :-1] & pk[:, 1:]
        q -= sol[vid[m]].sum()
        flows.append(q * dx * h)
    return flows


def fem_port_flows(poly, ports, h, mu, size):
    """Taylor-Hood (P2-P1) depth-averaged Stokes-Brinkman: mu lap u - 12 mu/h^2 u = grad p,
    div u = 0, u = 0 on walls, pressure (normal traction) given on port lines."""
    import triangle
    from scipy.sparse import bmat
    from skfem import (
        Basis,
        BilinearForm,
        ElementTriP1,
        ElementTriP2,
        ElementVector,
        FacetBasis,
        Functional,
        LinearForm,
        MeshTri,
        asm,
        condense,
        solve,
    )
    from skfem.helpers import ddot, div, dot, grad

    ring = np.asarray(poly.exterior.coords)[:-1]
    # split boundary edges so none is longer than size
    pts = []
    for a, b in zip(ring, np.roll(ring, -1, axis=0), strict=True):
        k = max(1, int(math.ceil(np.hypot(*(b - a)) / size)))
        pts += [a + (b - a) * i / k for i in range(k)]
    pts = np.array(pts)
    seg = np.column_stack((np.arange(len(pts)), np.roll(np.arange(len(pts)), -1)))
    tri = triangle.triangulate({"vertices": pts, "segments": seg}, f"pqa{size**2 * 0.5:.6e}")
    mesh = MeshTri(tri["vertices"].T, tri["triangles"].T)
    eu, ep = ElementVector(ElementTriP2()), ElementTriP1()
    bu = Basis(mesh, eu, intorder=4)
    bp = Basis(mesh, ep, intorder=4)
    k = 12.0 / h**2

    @BilinearForm
    def a(u, v, w):
        return mu * ddot(grad(u), grad(v)) + k * mu * dot(u, v)

    @BilinearForm
    def b(u, q, w):
        return div(u) * q

    A = asm(a, bu)
    B = asm(b, bu, bp)
    K = bmat([[A, -B.T], [-B, None]], "csr")
    f = np.zeros(K.shape[0])
    mids = mesh.p[:, mesh.facets].mean(axis=1)
    bnd = mesh.boundary_facets()
    on_port = []
    for line, pressure in ports:
        sel = bnd[shapely.distance(line, shapely.points(mids[:, bnd].T)) < size * 1e-6]
        on_port.append(sel)
        fb = FacetBasis(mesh, eu, facets=sel, intorder=4)

        @LinearForm
        def load(v, w, p0=pressure):
            return -p0 * dot(w.n, v)

        f[: bu.N] += asm(load, fb)
    ports_all = np.concatenate(on_port)
    walls = np.setdiff1d(bnd, ports_all)
    D = bu.get_dofs(walls).all()
    x = solve(*condense(K, f, D=D))
    u = x[: bu.N]
    flows = []
    for sel in on_port:
        fb = FacetBasis(mesh, eu, facets=sel, intorder=4)

        @Functional
        def flux(w):
            return -dot(w["u"], w.n)  # into the domain

        flows.append(flux.assemble(fb, u=fb.interpolate(u)) * h)
    return flows


def _stub(start, heading, length, width):
    t = np.array([math.cos(heading), math.sin(heading)])
    n = np.array([-t[1], t[0]])
    end = start + length * t
    poly = shapely.Polygon(
        [start + n * width / 2, end + n * width / 2, end - n * width / 2, start - n * width / 2]
    )
    return poly, end, t, n


def fd_straight(width, length, dx):
    """Resistance of a straight channel between two pressure ports, FD [Pa s/m^3]."""
    poly, end, t, _ = _stub(np.zeros(2), 0.0, length, width)
    p_in = _stub(-3 * dx * t, 0.0, 3 * dx, width)[0]
    p_out = _stub(end, 0.0, 3 * dx, width)[0]
    return 1.0 / fd_port_flows(poly, [(p_in, 1.0), (p_out, 0.0)], H, MU, dx)[0]


def fem_straight(width, length, size):
    poly, end, _, n = _stub(np.zeros(2), 0.0, length, width)
    a = shapely.LineString([n * width / 2, -n * width / 2])
    b = shapely.LineString([end + n * width / 2, end - n * width / 2])
    return 1.0 / fem_port_flows(poly, [(a, 1.0), (b, 0.0)], H, MU, size)[0]


def per_length(straight, width, length, step):
    """Resistance per unit length and of the two port ends, from two lengths [Pa s/m^4, Pa
    s/m^3]: R(L) = R' L + R_ends."""
    r1, r2 = straight(width, length, step), straight(width, 2 * length, step)
    slope = (r2 - r1) / length
    return slope, r1 - slope * length


def network_resistance(w0, w1, stub, extra):
    """chipflow's network: parent stub (plus the correction) into two children in parallel."""
    net = Network.from_arrays([0, 1, 1], [1, 2, 3], [w0, w1, w1], H, [stub + extra, stub, stub])
    fluid = Fluid("test", MU, 1000.0, 310.15)
    sol = solve(net, fluid, {"n0": 1.0, "n2": 0.0, "n3": 0.0}, None)
    return 1.0 / sol.port_flow["n0"]


def check(w0, w1, theta, r_2d, slopes, ends, stub):
    """Network with the correction against the 2D solve put on the exact series."""
    (sp_, sc), (ep, ec) = slopes, ends
    # the 2D junction over its own straight stubs (each stub has one port end of the two)
    excess = (r_2d - (sp_ * stub + ep / 2) - (sc * stub + ec / 2) / 2) / sp_
    rp = float(duct.resistance(w0, H, 1.0, MU))
    rc = float(duct.resistance(w1, H, 1.0, MU))
    independent = rp * (stub + excess) + rc * stub / 2
    disc = max(w0, w1) / 2 if theta < math.pi / 2 - 1e-9 else 0.0
    corrected = network_resistance(
        w0, w1, stub, junction_excess_length(Junction(w0, H, w1, H, theta, disc))
    )
    plain = network_resistance(w0, w1, stub, 0.0)
    return corrected / independent - 1, plain / independent - 1


def test_t_junction_resistance_matches_a_finite_difference_solve():
    w0, w1, dx = 200e-6, 120e-6, 10e-6  # both widths whole numbers of cells
    stub = 3 * w0
    poly = shapely.union_all(
        [
            shapely.box(-stub, -w0 / 2, 0, w0 / 2),
            shapely.box(-w1 / 2, 0, w1 / 2, stub),
            shapely.box(-w1 / 2, -stub, w1 / 2, 0),
        ]
    )
    ports = [
        (shapely.box(-stub - 3 * dx, -w0 / 2, -stub, w0 / 2), 1.0),
        (shapely.box(-w1 / 2, stub, w1 / 2, stub + 3 * dx), 0.0),
        (shapely.box(-w1 / 2, -stub - 3 * dx, w1 / 2, -stub), 0.0),
    ]
    r_2d = 1.0 / fd_port_flows(poly, ports, H, MU, dx)[0]
    (sp_, ep), (sc, ec) = (per_length(fd_straight, w, stub, dx) for w in (w0, w1))
    err, plain = check(w0, w1, math.pi / 2, r_2d, (sp_, sc), (ep, ec), stub)
    assert abs(err) < 0.01
    assert abs(plain) > 0.03  # without the correction the T is counted wrong by several %


def test_y_junction_resistance_matches_a_finite_element_solve():
    w0, w1, theta, size = 200e-6, 120e-6, math.pi / 4, 15e-6
    stub = 3 * w0
    parent = shapely.box(-stub, -w0 / 2, 0, w0 / 2)
    polys, ports = [parent], [(shapely.LineString([(-stub, w0 / 2), (-stub, -w0 / 2)]), 1.0)]
    for s in (1.0, -1.0):
        poly, end, _, n = _stub(np.zeros(2), s * theta, stub, w1)
        polys.append(poly)
        ports.append((shapely.LineString([end + n * w1 / 2, end - n * w1 / 2]), 0.0))
    polys.append(shapely.Point(0, 0).buffer(w0 / 2, quad_segs=32))  # the disc of a drawn Y
    r_2d = 1.0 / fem_port_flows(shapely.union_all(polys), ports, H, MU, size)[0]
    (sp_, ep), (sc, ec) = (per_length(fem_straight, w, stub, size) for w in (w0, w1))
    err, plain = check(w0, w1, theta, r_2d, (sp_, sc), (ep, ec), stub)
    assert abs(err) < 0.01
    assert abs(plain) > 0.01


def test_junction_correction_does_not_depend_on_the_stub_length():
    # the excess is a property of the junction: the flow is developed within a width or two
    j = Junction(200e-6, H, 120e-6, H, math.pi / 2)
    from chipflow.layout import junctions

    a = junction_excess_length(j)
    old = junctions.STUB_WIDTHS
    try:
        junctions.STUB_WIDTHS = 5.0
        b = junctions._excess(j.key())  # the solve itself, past the cache
    finally:
        junctions.STUB_WIDTHS = old
    assert b == pytest.approx(a, abs=0.01 * 200e-6)


def test_a_junction_that_cannot_be_solved_keeps_plain_lengths_and_says_so(monkeypatch, tmp_path):
    # A piece whose 2D solve fails must not stop the build nor pass silently: its channels
    # keep their centre-to-centre lengths and the build's warnings name the place.
    from pathlib import Path

    import chipflow.field
    from chipflow.build import build_design
    from chipflow.errors import FieldError
    from chipflow.field import cache
    from chipflow.layout import extract_network
    from chipflow.layout.pieces import solve_piece

    def refuse(*args, **kwargs):
        raise FieldError("a part of the domain was left without a depth")

    monkeypatch.setattr(chipflow.field, "solve_field", refuse)
    # an empty cache of its own, so that the pieces are solved (and fail) here, and later
    # tests do not see the failures
    monkeypatch.setenv("CHIPFLOW_FIELD_CACHE", str(tmp_path))
    monkeypatch.setattr(cache, "_memory", {})
    solve_piece.cache_clear()
    try:
        build = build_design(Path(__file__).parents[1] / "designs" / "demo_endothelial_bed.toml")
    finally:
        solve_piece.cache_clear()  # later tests solve their pieces for real
    plain = extract_network(build.layout, junctions=False)
    np.testing.assert_array_equal(build.solution.network.length[: plain.length.size], plain.length)
    warned = [w for w in build.results["warnings"] if "could not be solved in 2D" in w]
    # one warning per distinct piece: a junction per tree level, the step at each port
    assert len(warned) == len(build.layout.pieces.keys) > 0
    assert any("the step from the inlet port" in w for w in warned)


def star_resistance(lengths, widths, parent_extra, child_extra):
    """chipflow's network of an N-arm junction: a star of the arms' channels, the parent's
    port at 1 Pa, every child's at 0 [Pa s/m^3]."""
    n = len(widths)
    net = Network.from_arrays(
        [0] + [1] * (n - 1),
        [1] + list(range(2, n + 1)),
        widths,
        H,
        [lengths[0] + parent_extra] + [lengths[i] + child_extra[i - 1] for i in range(1, n)],
    )
    fluid = Fluid("test", MU, 1000.0, 310.15)
    pressures = {"n0": 1.0, **{f"n{i}": 0.0 for i in range(2, n + 1)}}
    return 1.0 / solve(net, fluid, pressures, None).port_flow["n0"]


def check_fan(headings, widths, r_2d, straight, step, disc):
    """A fan's network resistance (with chipflow's corrections, and without) against the 2D
    solve written here, put on the exact series: the 2D excess over the test's own straight
    stubs (same grid or mesh) is added to the exact series of plain stubs."""
    from chipflow.layout.junctions import STUB_WIDTHS
    from chipflow.layout.pieces import junction_key, solve_piece

    stub = STUB_WIDTHS * max(widths)
    arms = [(h, w, H, ()) for h, w in zip(headings, widths, strict=True)]
    key, order, _, _ = junction_key(arms, disc)
    lengths = np.empty(len(widths))
    lengths[order] = solve_piece(key).lengths
    own = {w: per_length(straight, w, stub, step) for w in set(widths)}

    def star(r_arm):
        return r_arm[0] + 1.0 / np.sum(1.0 / np.asarray(r_arm[1:]))

    r_own = star([own[w][0] * stub + own[w][1] / 2 for w in widths])
    r_exact = star([float(duct.resistance(w, H, stub, MU)) for w in widths])
    independent = r_exact + (r_2d - r_own)
    corrected = star_resistance([stub] * len(widths), widths, lengths[0], lengths[1:])
    plain = star_resistance([stub] * len(widths), widths, 0.0, np.zeros(len(widths) - 1))
    return corrected / independent - 1, plain / independent - 1


def test_a_three_way_split_matches_a_finite_difference_solve():
    # parent from -x, children up, straight on and down: every wall on the MAC grid
    w0, w1, dx = 200e-6, 120e-6, 10e-6
    stub = 3 * w0
    poly = shapely.union_all(
        [
            shapely.box(-stub, -w0 / 2, 0, w0 / 2),
            shapely.box(-w1 / 2, 0, w1 / 2, stub),
            shapely.box(0, -w1 / 2, stub, w1 / 2),
            shapely.box(-w1 / 2, -stub, w1 / 2, 0),
        ]
    )
    ports = [
        (shapely.box(-stub - 3 * dx, -w0 / 2, -stub, w0 / 2), 1.0),
        (shapely.box(-w1 / 2, stub, w1 / 2, stub + 3 * dx), 0.0),
        (shapely.box(stub, -w1 / 2, stub + 3 * dx, w1 / 2), 0.0),
        (shapely.box(-w1 / 2, -stub - 3 * dx, w1 / 2, -stub), 0.0),
    ]
    r_2d = 1.0 / fd_port_flows(poly, ports, H, MU, dx)[0]
    headings = [math.pi, math.pi / 2, 0.0, -math.pi / 2]
    err, plain = check_fan(headings, [w0, w1, w1, w1], r_2d, fd_straight, dx, 0.0)
    assert abs(err) < 0.01
    assert abs(plain) > 0.02  # without the corrections the split is counted wrong


def test_a_four_way_split_matches_a_finite_element_solve():
    # parent from -x; children at +-90 and +-45 degrees, the disc that blunts their wedges
    from chipflow.layout.pieces import junction_disc

    w0, w1, size = 200e-6, 120e-6, 15e-6
    stub = 3 * w0
    headings = [math.pi, math.pi / 2, math.pi / 4, -math.pi / 4, -math.pi / 2]
    widths = [w0, w1, w1, w1, w1]
    disc = junction_disc(np.array(headings), np.array(widths), 25e-6)
    assert disc > w0 / 2  # the 45 degree wedges need more than the Y's disc
    polys, ports = [], []
    for h, w in zip(headings, widths, strict=True):
        poly, end, _, n = _stub(np.zeros(2), h, stub, w)
        polys.append(poly)
        ports.append((shapely.LineString([end + n * w / 2, end - n * w / 2]), 0.0))
    ports[0] = (ports[0][0], 1.0)
    polys.append(shapely.Point(0, 0).buffer(disc, quad_segs=16))
    r_2d = 1.0 / fem_port_flows(shapely.union_all(polys), ports, H, MU, size)[0]
    err, plain = check_fan(headings, widths, r_2d, fem_straight, size, disc)
    assert abs(err) < 0.01
    assert abs(plain) > 0.02
