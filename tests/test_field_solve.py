"""Field solve: straight channels against the exact duct series and the Brinkman profile."""

from __future__ import annotations

import numpy as np
import pytest
import shapely

from chipflow.errors import FieldError
from chipflow.field import FieldPort, FieldRegion, solve_field
from chipflow.field.calibration import friction, lateral_factor
from chipflow.field.solve import velocity_at
from chipflow.physics import duct

MU = 1.0e-3


def straight(width: float, depth: float, length: float, across: float = 8.0, dp: float = 100.0):
    poly = shapely.box(0.0, 0.0, length, width)
    ports = [
        FieldPort("in", shapely.LineString([(0, 0), (0, width)]), dp),
        FieldPort("out", shapely.LineString([(length, 0), (length, width)]), 0.0),
    ]
    return solve_field([FieldRegion(poly, depth)], ports, MU, across=across)


@pytest.mark.parametrize("width", [200e-6, 100e-6, 50e-6, 25e-6])
def test_straight_channel_matches_exact_series(width):
    # exact Fourier series of the rectangular duct (Bruus 2008, ch. 4), h/w from 0.25 to 2,
    # the range the design rules allow (max_depth_to_width = 2)
    depth, length = 50e-6, 10 * width
    sol = straight(width, depth, length)
    exact = duct.resistance(width, depth, length, MU)
    assert sol.resistance("in", "out") == pytest.approx(exact, rel=5e-3)
    # continuity: what enters leaves
    assert sol.port_flows["in"] == pytest.approx(-sol.port_flows["out"], rel=1e-9)


def test_square_channel_resistance_is_28_45():
    # square duct R = 28.45 mu L / h^4 (Bruus 2008); the calibration matches it by construction
    # of the series, so this checks the mesh and the solve
    h = 50e-6
    sol = straight(h, h, 10 * h)
    assert sol.resistance("in", "out") == pytest.approx(28.45 * MU * 10 * h / h**4, rel=5e-3)


def test_across_width_profile_is_the_brinkman_cosh():
    # analytic solution of -G + beta mu u'' - k mu u = 0 with u(+-w/2) = 0:
    # u(y) = G/(k mu) [1 - cosh(y/delta)/cosh(w/(2 delta))], delta = sqrt(beta/k)
    # (REFERENCES.md, second round: delta = h/sqrt(12) for beta = 1)
    w, h, length, dp = 400e-6, 50e-6, 4e-3, 100.0
    sol = straight(w, h, length, across=16, dp=dp)
    y = np.linspace(-0.49 * w, 0.49 * w, 41)
    xy = np.column_stack([np.full_like(y, length / 2), y + w / 2])
    u = velocity_at(sol, xy)[:, 0]
    k, beta = friction(h), float(lateral_factor(h, w))
    delta = np.sqrt(beta / k)
    exact = dp / length / (k * MU) * (1 - np.cosh(y / delta) / np.cosh(w / (2 * delta)))
    np.testing.assert_allclose(u, exact, rtol=0, atol=1e-2 * exact.max())
    # the cross-stream velocity vanishes in a straight channel
    assert np.abs(velocity_at(sol, xy)[:, 1]).max() < 1e-3 * exact.max()


def test_flow_scales_with_pressure_and_inverse_viscosity():
    # Stokes flow is linear: Q ~ dp / mu (analytic)
    a = straight(100e-6, 50e-6, 1e-3, across=4, dp=100.0)
    b = straight(100e-6, 50e-6, 1e-3, across=4, dp=300.0)
    assert b.port_flows["in"] == pytest.approx(3 * a.port_flows["in"], rel=1e-9)


def test_bad_inputs_raise_field_errors():
    poly = shapely.box(0, 0, 1e-3, 1e-4)
    port = FieldPort("in", shapely.LineString([(0, 0), (0, 1e-4)]), 1.0)
    with pytest.raises(FieldError, match="at least one port"):
        solve_field([FieldRegion(poly, 5e-5)], [], MU)
    with pytest.raises(FieldError, match="depth"):
        solve_field([FieldRegion(poly, -1.0)], [port], MU)
    far = FieldPort("out", shapely.Point(5e-3, 5e-3).buffer(1e-4), 0.0)
    with pytest.raises(FieldError, match="does not open onto any channel"):
        solve_field([FieldRegion(poly, 5e-5)], [port, far], MU)
    island = shapely.box(2e-3, 0, 3e-3, 1e-4)
    with pytest.raises(FieldError, match="not connected to any port"):
        solve_field([FieldRegion(poly, 5e-5), FieldRegion(island, 5e-5)], [port], MU)
