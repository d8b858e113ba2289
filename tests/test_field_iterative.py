"""The iterative field solve (MINRES with multigrid) against dense and direct solves.

The references are independent solves of the same system: numpy's dense solve (LAPACK) and the
field's direct sparse solve.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st

from chipflow.errors import FieldError
from chipflow.field import FieldPort, FieldRegion, solve_field
from chipflow.field.iterative import minres
from chipflow.field.solve import DIRECT_MAX_UNKNOWNS, choose_solver
from chipflow.layout.junctions import Junction, junction_regions

MU = 1.0e-3


@settings(max_examples=30, deadline=None)
@given(st.integers(2, 40), st.integers(0, 2**31 - 1))
def test_minres_solves_symmetric_indefinite_systems_as_a_dense_solve(n, seed):
    # reference: numpy's dense LU (LAPACK gesv) of the same random symmetric, indefinite,
    # well-conditioned system, preconditioned by a random positive diagonal
    rng = np.random.default_rng(seed)
    q, _ = np.linalg.qr(rng.standard_normal((n, n)))
    eig = rng.uniform(0.5, 4.0, n) * rng.choice([-1.0, 1.0], n)
    a = (q * eig) @ q.T
    b = rng.standard_normal(n)
    d = rng.uniform(0.5, 2.0, n)
    r = minres(lambda v: a @ v, b, lambda v: v / d, rtol=1e-12, maxiter=10 * n + 10)
    np.testing.assert_allclose(r.x, np.linalg.solve(a, b), rtol=0, atol=1e-8 * np.abs(b).sum())
    assert r.iterations <= 2 * n  # at most n steps in exact arithmetic


def test_minres_that_does_not_converge_is_a_field_error():
    a = np.diag(np.linspace(-1.0, 1.0, 50) + 0.01)
    with pytest.raises(FieldError, match="did not converge in 3 iterations"):
        minres(lambda v: a @ v, np.ones(50), lambda v: v, rtol=1e-12, maxiter=3)


def test_minres_refuses_an_indefinite_preconditioner():
    a = np.diag([1.0, 2.0, 3.0])
    flip = np.array([1.0, -1.0, 1.0])
    with pytest.raises(FieldError, match="not positive definite"):
        minres(lambda v: a @ v, np.ones(3), lambda v: v * flip, rtol=1e-12)


def straight(width, depth, length, solver):
    poly = shapely.box(0.0, 0.0, length, width)
    ports = [
        FieldPort("in", shapely.LineString([(0, 0), (0, width)]), 100.0),
        FieldPort("out", shapely.LineString([(length, 0), (length, width)]), 0.0),
    ]
    return solve_field([FieldRegion(poly, depth)], ports, MU, across=8.0, solver=solver)


@pytest.mark.parametrize("width", [200e-6, 50e-6, 25e-6])
def test_iterative_straight_channel_agrees_with_the_direct_solve(width):
    # h/w from 0.25 to 2 (the range of test_field_solve); the direct sparse LU is the reference
    direct = straight(width, 50e-6, 10 * width, "direct")
    it = straight(width, 50e-6, 10 * width, "iterative")
    assert direct.stats["solver"] == "direct" and it.stats["solver"] == "iterative"
    assert it.resistance("in", "out") == pytest.approx(direct.resistance("in", "out"), rel=1e-6)
    assert it.port_flows["out"] == pytest.approx(-it.port_flows["in"], rel=1e-6)
    scale = np.abs(direct.floor_shear).max()
    np.testing.assert_allclose(it.floor_shear, direct.floor_shear, rtol=0, atol=1e-6 * scale)
    assert 0 < it.stats["iterations"] < 300


@pytest.mark.parametrize(
    "junction",
    [
        Junction(200e-6, 50e-6, 120e-6, 50e-6, math.pi / 2),  # a T
        Junction(150e-6, 50e-6, 100e-6, 100e-6, math.pi / 4, 75e-6, 20e-6, 100e-6, 300e-6),
    ],
    ids=["tee", "y-with-depth-step"],
)
def test_iterative_junction_agrees_with_the_direct_solve(junction):
    # the junction solves of the drawing, with a bend and a depth step: both solvers on the
    # same mesh, port flows to 1e-6
    regions, ports = junction_regions(junction, 3 * 200e-6)
    sols = [solve_field(regions, ports, MU, across=6.0, solver=s) for s in ("direct", "iterative")]
    for name in ("in", "up", "down"):
        assert sols[1].port_flows[name] == pytest.approx(sols[0].port_flows[name], rel=1e-6)


def test_auto_takes_the_direct_solve_for_small_systems_and_the_iterative_for_large():
    assert choose_solver(DIRECT_MAX_UNKNOWNS) == "direct"
    assert choose_solver(DIRECT_MAX_UNKNOWNS + 1) == "iterative"
    assert straight(100e-6, 50e-6, 1e-3, "auto").stats["solver"] == "direct"


def test_unknown_solver_is_a_field_error():
    with pytest.raises(FieldError, match="unknown field solver 'lu'"):
        straight(100e-6, 50e-6, 1e-3, "lu")
