"""Rectangular-channel and tube physics against published tables, analytic limits and an
independent finite-difference solution of the Poiseuille problem written here."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from hypothesis import given
from hypothesis import strategies as st

from chipflow.physics import duct

# Darcy f*Re for rectangular ducts: Shah & London, Laminar Flow Forced Convection in Ducts
# (Academic Press, 1978), as tabulated in ../shared/REFERENCES.md section 1.
SHAH_LONDON_DARCY = [
    (1.0, 56.91),
    (0.5, 62.19),
    (0.25, 72.93),
    (0.2, 76.28),
    (0.125, 82.34),
    (0.1, 84.68),
]


@pytest.mark.parametrize(("alpha", "expected"), SHAH_LONDON_DARCY)
def test_friction_factor_matches_shah_london(alpha: float, expected: float) -> None:
    # Source: Shah & London (1978), Darcy f*Re to 4 significant figures.
    assert duct.poiseuille_number(1.0, alpha) == pytest.approx(expected, abs=0.006)
    assert duct.poiseuille_number(alpha, 1.0) == pytest.approx(expected, abs=0.006)


def test_parallel_plate_limit() -> None:
    # Analytic limit: parallel plates, Darcy f*Re = 96 (Shah & London 1978).
    assert duct.poiseuille_number(1.0, 1e-7) == pytest.approx(96.0, rel=1e-6)


def test_shah_london_polynomial_over_all_aspect_ratios() -> None:
    # Source: Shah & London (1978) polynomial for Fanning f*Re, quoted as within 0.06 % of the
    # series; we measure at most 0.063 % (near alpha = 0.93), so the bound here is 0.07 %.
    a = np.linspace(0.01, 1.0, 200)
    fanning = 24 * (1 - 1.3553 * a + 1.9467 * a**2 - 1.7012 * a**3 + 0.9564 * a**4 - 0.2537 * a**5)
    assert np.allclose(duct.poiseuille_number(1.0, a) / 4.0, fanning, rtol=7e-4)


def test_square_duct_resistance_and_approximation_error() -> None:
    # Source: Bruus, Theoretical Microfluidics (2008): R = 28.45 mu L / h^4 for a square duct;
    # the 1 - 0.630 h/w approximation is 13-14 % high at h = w and ~0.2 % at h = w/2.
    mu, length, h = 1e-3, 0.01, 100e-6
    exact = duct.resistance(h, h, length, mu)
    assert exact == pytest.approx(28.45 * mu * length / h**4, rel=2e-4)
    approx = duct.resistance(h, h, length, mu, method="approx")
    assert 0.13 < approx / exact - 1 < 0.14
    half = duct.resistance(2 * h, h, length, mu, method="approx") / duct.resistance(
        2 * h, h, length, mu
    )
    assert abs(half - 1) < 0.003


# Ratios computed from the series (REFERENCES.md section 1); the series itself is checked
# against the finite-difference solution below.
SHEAR_VELOCITY_RATIOS = [
    (1.0, 1.601, 2.096),
    (0.5, 1.356, 1.992),
    (0.25, 1.183, 1.774),
    (0.1, 1.067, 1.601),
    (0.01, 1.006, 1.510),
]


@pytest.mark.parametrize(("alpha", "shear_ratio", "velocity_ratio"), SHEAR_VELOCITY_RATIOS)
def test_peak_shear_and_velocity_ratios(alpha, shear_ratio, velocity_ratio) -> None:
    w, h, q, mu = 1.0, alpha, 1.0, 1.0
    plates = 6 * mu * q / (w * h**2)
    assert duct.wall_shear_max(w, h, q, mu) / plates == pytest.approx(shear_ratio, abs=6e-4)
    u_mean = q / (w * h)
    assert duct.max_velocity(w, h, q) / u_mean == pytest.approx(velocity_ratio, abs=6e-4)


def _finite_difference(width: float, depth: float, n: int) -> dict[str, float]:
    """Solve mu lap(u) = -G on the rectangle with u = 0 on the walls (G = mu = 1).

    Node-centred grid with n intervals along the short side, second-order differences;
    flow by the trapezoid rule, wall shear by a second-order one-sided difference.
    """
    nx = round(n * width / min(width, depth))
    ny = round(n * depth / min(width, depth))
    dx, dy = width / nx, depth / ny
    ix, iy = nx - 1, ny - 1  # interior nodes
    lap = sp.kronsum(
        sp.diags([1, -2, 1], [-1, 0, 1], shape=(ix, ix), dtype=float) / dx**2,
        sp.diags([1, -2, 1], [-1, 0, 1], shape=(iy, iy), dtype=float) / dy**2,
        format="csc",
    )
    inner = spla.spsolve(lap, -np.ones(ix * iy)).reshape(iy, ix)
    u = np.zeros((ny + 1, nx + 1))
    u[1:-1, 1:-1] = inner
    flow = np.trapezoid(np.trapezoid(u, dx=dx, axis=1), dx=dy)
    # floor (z = 0, the wall of width w) at its middle, and the side wall at its middle
    mid_x, mid_y = nx // 2, ny // 2
    floor = (4 * u[1, mid_x] - u[2, mid_x]) / (2 * dy)
    side = (4 * u[mid_y, 1] - u[mid_y, 2]) / (2 * dx)
    return {"flow": flow, "floor": floor, "side": side, "umax": u[mid_y, mid_x]}


@pytest.mark.parametrize(("width", "depth"), [(1.0, 1.0), (2.0, 1.0), (4.0, 1.0), (1.0, 3.0)])
def test_series_against_independent_finite_difference(width: float, depth: float) -> None:
    # Independent numerical solution written in this test (finite differences, 2nd order).
    fd = _finite_difference(width, depth, n=80)
    # unit pressure gradient and viscosity: Q = 1 / R per unit length
    flow = 1.0 / duct.resistance(width, depth, 1.0, 1.0)
    assert fd["flow"] == pytest.approx(flow, rel=5e-3)
    floor = duct.wall_shear_floor(width, depth, flow, 1.0)
    peak = duct.wall_shear_max(width, depth, flow, 1.0)
    assert fd["floor"] == pytest.approx(floor, rel=5e-3)
    assert max(fd["floor"], fd["side"]) == pytest.approx(peak, rel=5e-3)
    assert fd["umax"] == pytest.approx(duct.max_velocity(width, depth, flow), rel=5e-3)


def test_tall_channel_floor_shear_is_below_peak() -> None:
    # For w < h the floor is a short wall; its shear is below the long-wall peak (analytic
    # consequence of the velocity field, confirmed by the finite-difference test above).
    assert duct.wall_shear_floor(50e-6, 200e-6, 1e-10, 1e-3) < duct.wall_shear_max(
        50e-6, 200e-6, 1e-10, 1e-3
    )
    assert duct.wall_shear_floor(200e-6, 50e-6, 1e-10, 1e-3) == duct.wall_shear_max(
        200e-6, 50e-6, 1e-10, 1e-3
    )


def test_mean_shear_from_force_balance() -> None:
    # Analytic: tau_mean = dp A / (L P) (REFERENCES.md section 1).
    s = duct.flow_state(200e-6, 50e-6, 0.01, 1e-10, 1e-3, 1000.0)
    assert s.wall_shear_mean == pytest.approx(
        s.pressure_drop * 200e-6 * 50e-6 / (0.01 * 2 * 250e-6), rel=1e-12
    )


def test_hagen_poiseuille_tube() -> None:
    # Analytic: Hagen-Poiseuille, R = 8 mu L / (pi r^4), wall shear 4 mu Q / (pi r^3).
    r, length, mu, q, rho = 250e-6, 0.3, 1e-3, 1e-9, 1000.0
    s = duct.flow_state(2 * r, 2 * r, length, q, mu, rho, round=True)
    assert s.resistance == pytest.approx(8 * mu * length / (np.pi * r**4), rel=1e-12)
    assert s.wall_shear_max == pytest.approx(4 * mu * q / (np.pi * r**3), rel=1e-12)
    assert s.max_velocity == pytest.approx(2 * q / (np.pi * r**2), rel=1e-12)
    assert s.hydraulic_diameter == pytest.approx(2 * r)
    # Poiseuille number of a circle: 64 (analytic).
    assert duct.poiseuille_number(2 * r, 2 * r, round=True) == pytest.approx(64.0)


def test_entrance_length_correlation() -> None:
    # Source: Chen (1973): L_e / D = 0.6 / (1 + 0.035 Re) + 0.056 Re; check value by hand:
    # Re = 100 -> 0.6/4.5 + 5.6 = 5.7333.
    assert duct.entrance_length(1.0, 100.0) == pytest.approx(5.73333, rel=1e-5)


def test_series_converges_to_machine_precision() -> None:
    # The remainder series are summed until converged: doubling the term budget changes
    # nothing beyond 1e-12 relative (independent brute-force sum over 2000 odd terms).
    alpha = np.array([1.0, 0.7, 0.3, 0.05])
    n = np.arange(1, 4000, 2)[:, None]
    brute = 1 - 192 * alpha / np.pi**5 * np.sum(np.tanh(n * np.pi / (2 * alpha)) / n**5, axis=0)
    k_r = duct.resistance(1.0, alpha, 1.0, 1.0) * alpha**3
    assert np.allclose(k_r, 12 / brute, rtol=1e-12)


def test_vectorised_over_channels_matches_scalar_calls() -> None:
    w = np.array([100e-6, 200e-6, 50e-6])
    h = np.array([50e-6, 50e-6, 80e-6])
    together = duct.resistance(w, h, 0.01, 1e-3)
    alone = [duct.resistance(wi, hi, 0.01, 1e-3) for wi, hi in zip(w, h, strict=True)]
    assert np.allclose(together, alone, rtol=1e-14)


sizes = st.floats(1e-6, 1e-3)
lengths = st.floats(1e-4, 0.1)
factors = st.floats(0.1, 10.0)


@given(sizes, sizes, lengths, factors)
def test_resistance_scales_linearly_with_length(w, h, length, lam) -> None:
    assert duct.resistance(w, h, lam * length, 1e-3) == pytest.approx(
        lam * duct.resistance(w, h, length, 1e-3), rel=1e-12
    )


@given(sizes, sizes, lengths, factors)
def test_resistance_scales_with_inverse_fourth_power_of_size(w, h, length, lam) -> None:
    assert duct.resistance(lam * w, lam * h, length, 1e-3) == pytest.approx(
        lam**-4 * duct.resistance(w, h, length, 1e-3), rel=1e-11
    )


@given(sizes, sizes, lengths)
def test_resistance_symmetric_in_width_and_depth(w, h, length) -> None:
    assert duct.resistance(w, h, length, 1e-3) == pytest.approx(
        duct.resistance(h, w, length, 1e-3), rel=1e-13
    )


@given(sizes, sizes, lengths, st.floats(1.001, 3.0))
def test_resistance_monotone(w, h, length, grow) -> None:
    r = duct.resistance(w, h, length, 1e-3)
    assert duct.resistance(w * grow, h, length, 1e-3) < r
    assert duct.resistance(w, h * grow, length, 1e-3) < r
    assert duct.resistance(w, h, length * grow, 1e-3) > r


@given(sizes, sizes, lengths, st.floats(1e-13, 1e-8))
def test_velocity_and_shear_consistent_with_flow(w, h, length, q) -> None:
    s = duct.flow_state(w, h, length, q, 1e-3, 1000.0)
    assert s.mean_velocity * w * h == pytest.approx(q, rel=1e-12)
    assert s.pressure_drop == pytest.approx(q * s.resistance, rel=1e-12)
    assert s.max_velocity > s.mean_velocity
    assert s.wall_shear_max >= s.wall_shear_mean
    assert s.wall_shear_max >= s.wall_shear_floor
    assert s.residence_time == pytest.approx(length / s.mean_velocity, rel=1e-12)
