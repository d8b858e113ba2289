"""Taylor-Aris dispersion and the dosing delay, against published coefficients, random walks
and an independent solution of the advection-dispersion equation, all written here."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from chipflow.network import NetworkBuilder, solve
from chipflow.physics.fluid import water
from chipflow.spec.culture import Culture
from chipflow.transport.dispersion import (
    ARIS_TABLE,
    aris_factor,
    dispersion_coefficient,
    rectangle_factor,
    step_times,
)
from chipflow.transport.run import run_transport


def plates_random_walk(pe: float, n: int = 20000, dt: float = 2e-3, t1=1.0, t2=3.0, seed=1):
    """Effective axial diffusivity between plates (h = 1, D = 1, U = pe) from particles: the
    growth rate of the variance of their positions, halved."""
    rng = np.random.default_rng(seed)
    z = rng.random(n)
    x = np.zeros(n)
    step = np.sqrt(2 * dt)
    var = {}
    for k in range(1, int(round(t2 / dt)) + 1):  # time steps (the particles are vectorised)
        x += 6 * pe * z * (1 - z) * dt + step * rng.standard_normal(n)
        z += step * rng.standard_normal(n)
        z = np.abs(z)  # reflect at the floor
        z = 1 - np.abs(1 - z)  # and at the roof
        if abs(k * dt - t1) < dt / 2:
            var[t1] = x.var()
    return (x.var() - var[t1]) / (2 * (t2 - t1))


def test_parallel_plates_disperse_as_aris_and_a_random_walk():
    pe = 20.0
    # Aris (1956) for plates a gap h apart: K = D (1 + Pe^2 / 210), Pe = U h / D
    published = 1.0 + pe**2 / 210.0
    # chipflow's coefficient of a channel 1000 times wider than deep, before the side walls
    # have a say (no time to diffuse across the width): the plates' value
    k = dispersion_coefficient(pe, 1e3, 1.0, False, 1.0, 1e-12)
    assert float(k) == pytest.approx(published, rel=1e-9)
    assert plates_random_walk(pe) == pytest.approx(published, rel=0.05)


def test_round_tubes_follow_taylor():
    # Taylor (1953): K = D + a^2 U^2 / (48 D) for a tube of radius a
    k = dispersion_coefficient(2e-3, 0.5e-3, 0.5e-3, True, 5e-10, 100.0)
    assert float(k) == pytest.approx(5e-10 + (0.25e-3) ** 2 * 4e-6 / (48 * 5e-10), rel=1e-12)


def test_rectangle_factor_against_its_published_limits():
    # the table is this module's cell-problem computation ...
    for aspect, factor in ARIS_TABLE[:4]:
        assert aris_factor(aspect) == pytest.approx(factor, abs=2e-5)
    # ... rising with the width towards 7.95 times the plates' value for wide shallow ducts
    # (Doshi, Daiya & Gill 1978; Dutta & Leighton 2001; from memory), 1.76 for a square duct
    # (the square value of the same literature, from memory)
    values = [f for _, f in ARIS_TABLE]
    assert values == sorted(values)
    assert ARIS_TABLE[-1][1] == pytest.approx(7.95, rel=0.02)
    assert float(rectangle_factor(1.0)) == pytest.approx(1.76, abs=0.01)


@pytest.mark.slow
def test_square_duct_random_walk():
    """3D random walk in a square duct (side 1, D = 1) with the exact duct velocity."""
    rng = np.random.default_rng(3)
    n, dt, pe = 20000, 1e-3, 20.0
    terms = np.arange(1, 60, 2)

    def velocity(y, z):
        ratio = np.cosh(np.outer(y - 0.5, terms) * np.pi) / np.cosh(terms * np.pi / 2)
        return ((np.sin(np.outer(z, terms) * np.pi)) * (1 - ratio) / terms**3).sum(axis=1)

    grid = np.linspace(0, 1, 201)
    yy, zz = np.meshgrid(grid, grid)
    mean = velocity(yy.ravel(), zz.ravel()).mean()
    y, z, x = rng.random(n), rng.random(n), np.zeros(n)
    step = np.sqrt(2 * dt)
    samples = {}
    for k in range(1, 3001):  # time steps
        x += pe * velocity(y, z) / mean * dt + step * rng.standard_normal(n)
        y = 1 - np.abs(1 - np.abs(y + step * rng.standard_normal(n)))
        z = 1 - np.abs(1 - np.abs(z + step * rng.standard_normal(n)))
        if k in (1000, 3000):
            samples[k] = x.var()
    k_walk = (samples[3000] - samples[1000]) / (2 * 2.0)
    assert k_walk == pytest.approx(1 + float(rectangle_factor(1.0)) * pe**2 / 210, rel=0.05)


def advection_dispersion_outlet(segments, t_end, dt=0.2, cells_per_mm=5):
    """Step response at the end of segments in series, each (length, area, K) at flow q, by an
    implicit finite-volume solution of A dc/dt + q dc/dx = d/dx(A K dc/dx) (upwind advection,
    a fine grid against numerical diffusion). Returns times and outlet concentrations."""
    from scipy.linalg import solve_banded

    q = segments[0][3]
    dx_all, area, kk = [], [], []
    for length, a, k, _ in segments:  # two or three segments
        n = max(int(length * 1e3 * cells_per_mm), 20)
        dx_all += [length / n] * n
        area += [a] * n
        kk += [k] * n
    dx, area, kk = np.array(dx_all), np.array(area), np.array(kk)
    n = dx.size
    # face conductances between cells (harmonic), the inlet face held at 1
    g = 2.0 / (dx[:-1] / (area[:-1] * kk[:-1]) + dx[1:] / (area[1:] * kk[1:]))
    vol = area * dx
    band = np.zeros((3, n))
    band[1] = vol / dt + q
    band[1, :-1] += g
    band[1, 1:] += g
    band[0, 1:] = -g
    band[2, :-1] = -g - q  # upwind: cell i receives q c_{i-1}
    c = np.zeros(n)
    times, out = [], []
    for k in range(1, int(t_end / dt) + 1):  # time steps
        rhs = vol / dt * c
        rhs[0] += q * 1.0
        c = solve_banded((1, 1), band, rhs)
        times.append(k * dt)
        out.append(c[-1])
    return np.array(times), np.array(out)


def test_dosing_matches_an_advection_dispersion_solution():
    # 30 cm of 0.5 mm tubing and one 8 mm channel, 300 um x 50 um, at 12 uL/min: the demo's
    # supply; a small molecule, D = 5e-10 m^2/s
    b = NetworkBuilder()
    b.tube("feed", "pump", "in", diameter=0.5e-3, length=0.3)
    b.channel("bed", "in", "out", width=300e-6, depth=50e-6, length=8e-3, role="bed")
    q = 12e-9 / 60
    sol = solve(b.build(), water(310.15), pressures={"out": 0.0}, flows={"pump": q})
    run = run_transport(sol, Culture())
    slow = run.results["dosing"]["slowest"]
    tube_a, chan_a = np.pi * 0.25e-3**2, 300e-6 * 50e-6
    k_tube = dispersion_coefficient(q / tube_a, 0.5e-3, 0.5e-3, True, 5e-10, 0.3 * tube_a / q)
    k_chan = dispersion_coefficient(q / chan_a, 300e-6, 50e-6, False, 5e-10, 8e-3 * chan_a / q)
    t, c = advection_dispersion_outlet(
        [(0.3, tube_a, float(k_tube), q), (8e-3, chan_a, float(k_chan), q)], 500.0
    )
    t50, t90 = np.interp(0.5, c, t), np.interp(0.9, c, t)
    assert slow["t50"] == pytest.approx(t50, rel=0.02)
    assert slow["t90"] == pytest.approx(t90, rel=0.02)
    # the tubing holds 0.3 m x 0.196 mm^2 = 58.9 uL: 4.9 min of the 12 uL/min
    assert run.dose.mean[0] == pytest.approx(0.3 * tube_a / q, rel=1e-12)
    assert slow["tubing_share"] > 0.95


def test_mixing_of_arrival_times_at_a_junction():
    # two branches of different length join: the mean arrival is flow-weighted (moments of a
    # mixture), whatever the loop
    b = NetworkBuilder()
    b.channel("short", "in", "j", width=200e-6, depth=50e-6, length=2e-3)
    b.channel("long", "in", "j", width=200e-6, depth=50e-6, length=6e-3)
    b.channel("out", "j", "out", width=200e-6, depth=50e-6, length=1e-3)
    sol = solve(b.build(), water(310.15), pressures={"out": 0.0}, flows={"in": 5e-9 / 60})
    run = run_transport(sol, Culture())
    net, q = sol.network, np.abs(sol.flow)
    tau = net.length * net.width * net.depth / q
    expected = (q[0] * tau[0] + q[1] * tau[1]) / (q[0] + q[1]) + tau[2]
    assert run.dose.mean[2] == pytest.approx(expected, rel=1e-12)
    assert abs(run.dose.residual) < 1e-12


@settings(max_examples=60, deadline=None)
@given(
    mean=st.floats(1e-3, 1e5),
    spread=st.floats(1e-3, 30.0),
    q=st.sampled_from([0.1, 0.5, 0.9, 0.99]),
)
def test_step_times_are_the_inverse_gaussian_quantiles_of_scipy(mean, spread, q):
    # reference library: scipy.stats.invgauss (mean mu, shape lambda = mu^3 / variance is its
    # mu / lambda with scale lambda); chipflow computes the quantile itself to keep scipy.stats
    # out of a build's start-up
    from scipy.stats import invgauss

    variance = (spread * mean) ** 2
    lam = mean**3 / variance
    (t,) = step_times([mean], [variance], (q,))
    assert t[0] == pytest.approx(invgauss.ppf(q, mean / lam, scale=lam), rel=1e-7)


def test_narrow_step_times_tend_to_the_normal_quantiles():
    # analytic limit: the inverse Gaussian of a vanishing relative spread is normal (its shape
    # lambda / mu grows without bound); there scipy.stats.invgauss itself loses its digits
    from statistics import NormalDist

    mean, sd = 30.0, 30.0 * 1e-5
    for q, t in zip((0.1, 0.9), step_times([mean], [sd * sd], (0.1, 0.9)), strict=True):
        assert t[0] == pytest.approx(mean + NormalDist().inv_cdf(q) * sd, abs=1e-3 * sd)
