"""The floor concentration of the 1D transport against a 2D solution of the channel's depth.

The reference is written here, independently of chipflow: the steady concentration in a
parallel-plate channel (x along the flow, z across the depth), parabolic velocity
``u = 6 U z (h - z) / h^2``, diffusion across the depth, no axial diffusion (the Graetz
problem), uptake at the floor ``D dc/dz = V c / (K_m + c)`` (zero-order with K_m = 0) and
optionally permeation at the roof ``-D dc/dz = k (c_a - c)``. Finite volumes across the depth
on a grid crowded at both walls, implicit Euler steps along the channel growing geometrically
from the entrance, Newton's method at each step. In the Graetz coordinate
``x^ = x D / (U h^2)`` the problem depends on Pe = U h / D only through the channel length,
so one march per Damkohler number serves every Peclet number.

Published checks: Leveque (1928), ``k = D / (Gamma(4/3) (9 D x / gamma)^(1/3))`` at a wall of
uniform concentration, and Shah & London (1978) for parallel plates with one wall active:
fully developed Nu = 4.861 (uniform concentration) and 5.385 (uniform flux) on D_h = 2h, and
the influence coefficient 0.346 of unequal wall fluxes.
"""

from __future__ import annotations

from math import gamma

import numpy as np
import pytest

from chipflow.transport.march import PROFILE_STATIONS, march_channels
from chipflow.transport.species import Species
from chipflow.transport.transfer import plate_sherwood

H, D, C0, W = 100e-6, 3e-9, 0.2, 1e-3  # depth [m], diffusivity, inlet [mol/m^3], width [m]
LENGTH = 50 * H  # a bed channel 50 depths long (5 mm of a 100 um bed)
# Leveque (1928): Sh = k h / D = x^^(-1/3) / (Gamma(4/3) 1.5^(1/3)) with gamma = 6 U / h
LEVEQUE = 1.0 / (gamma(4.0 / 3.0) * 1.5 ** (1.0 / 3.0))


def graetz_reference(da, kappa, xmax, *, bi=0.0, ca=1.0, q_roof=0.0, n=48, steps=800):
    """Floor, bulk and roof concentration over c0 along the Graetz coordinate.

    ``da = V h / (D c0)``, ``kappa = K_m / c0``, roof Biot number ``bi = k h / D`` towards
    ``ca`` (over c0), or a uniform roof influx ``q_roof`` (in units of D c0 / h).
    """
    from scipy.linalg import solve_banded

    z = 0.5 * (1.0 - np.cos(np.pi * np.linspace(0.0, 1.0, n + 1)))  # crowded at both walls
    faces = np.concatenate([[0.0], 0.5 * (z[1:] + z[:-1]), [1.0]])
    flux = 3.0 * faces**2 - 2.0 * faces**3  # integral of 6 z (1 - z)
    cap = np.diff(flux)  # advective capacity of each cell
    g = 1.0 / np.diff(z)
    xs = np.concatenate([[0.0], np.geomspace(1e-7, xmax, steps)])
    c = np.ones(n + 1)
    out = [(0.0, 1.0, 1.0, 1.0)]
    for k in range(1, xs.size):  # march along the channel
        dx = xs[k] - xs[k - 1]
        old = c.copy()
        for _ in range(40):  # Newton
            lap = np.zeros(n + 1)
            lap[:-1] += g * (c[1:] - c[:-1])
            lap[1:] -= g * (c[1:] - c[:-1])
            cf = max(c[0], 0.0)
            rate = cf / (kappa + cf) if kappa + cf > 0 else 0.0
            slope = kappa / (kappa + cf) ** 2 if cf > 0 else 0.0
            f = cap * (c - old) / dx - lap
            f[0] += da * rate
            f[-1] -= bi * (ca - c[-1]) + q_roof
            diag = cap / dx
            diag[:-1] += g
            diag[1:] += g
            diag[0] += da * slope
            diag[-1] += bi
            band = np.zeros((3, n + 1))
            band[0, 1:], band[1], band[2, :-1] = -g, diag, -g
            step = solve_banded((1, 1), band, -f)
            c = c + step
            if c[0] < 0:  # a floor run dry: back off half way
                c[0] = 0.5 * (c[0] - step[0])
            if np.max(np.abs(step)) < 1e-13:
                break
        out.append((xs[k], c[0], float(np.sum(cap * c)), c[-1]))
    return np.array(out).T  # x, floor, bulk, roof


def model(pe, da, kappa, *, bi=0.0, ca=1.0):
    """chipflow's 1D march of the same channel: floor profile over c0 and lowest floor."""
    u = pe * D / H
    q = u * W * H
    v = da * D * C0 / H
    k_roof = bi * D / H
    species = Species("o2", D, C0, uptake=v, km=kappa * C0, ambient=ca * C0)
    found = march_channels(
        np.array([C0]), np.array([q]), np.array([LENGTH]), np.array([W]), np.array([H]),
        np.array([6.0 * u / H]), np.array([v]), np.array([k_roof]), species,
    )  # fmt: skip
    return found["floor"][0] / C0, found["floor_min"][0] / C0


@pytest.fixture(scope="module")
def references():
    """One march per (kinetics, Da) to the longest channel's end (Pe = 1)."""
    return {
        (kappa, da): graetz_reference(da, max(kappa, 1e-6), LENGTH / H)
        for kappa in (0.0, 0.037)
        for da in (0.01, 0.1, 1.0, 10.0)
    }


def test_reference_reproduces_leveque_and_shah_london():
    # uniform concentration at the floor (a fast, saturating uptake keeps it at zero)
    x, floor, bulk, _ = (a[1:] for a in graetz_reference(1e4, 1e-4, 2.0, n=80, steps=1000))
    sh = 1e4 * floor / (1e-4 + floor) / (bulk - floor)
    at = lambda xi: np.argmin(np.abs(x - xi))  # noqa: E731
    assert sh[at(1e-4)] == pytest.approx(LEVEQUE * 1e-4 ** (-1 / 3), rel=0.01)
    assert sh[at(2.0)] == pytest.approx(4.861 / 2, rel=0.002)  # Shah & London 1978
    # uniform flux (zero-order, small uptake): 5.385 / 2 fully developed (Shah & London 1978)
    x, floor, bulk, roof = graetz_reference(1e-3, 1e-7, 3.0, n=80, steps=1000)
    assert 1e-3 / (bulk[-1] - floor[-1]) == pytest.approx(5.385 / 2, rel=0.002)
    # the far plate lies above the bulk by the influence coefficient 0.346 (Shah & London)
    assert (roof[-1] - bulk[-1]) / 1e-3 * 5.385 / 2 == pytest.approx(0.346, rel=0.01)


@pytest.mark.parametrize("kappa", [0.0, 0.037], ids=["zero-order", "Michaelis-Menten"])
@pytest.mark.parametrize("da", [0.01, 0.1, 1.0, 10.0])
def test_floor_within_2_percent_of_the_2d_solution(references, kappa, da):
    x, floor, _, _ = references[(kappa, da)]
    for pe in (1.0, 10.0, 100.0, 1000.0):  # the Graetz coordinate spans 1/20 to 50
        xhat = PROFILE_STATIONS * LENGTH / (H * pe)
        profile, lowest = model(pe, da, kappa)
        ref = np.interp(xhat[1:], x, floor)
        assert np.max(np.abs(profile[1:] - ref)) < 0.02, (pe, da, kappa)
        fine = np.interp(np.linspace(1e-3, 1.0, 500) * LENGTH / (H * pe), x, floor)
        assert lowest == pytest.approx(fine.min(), abs=0.02)


@pytest.mark.parametrize("bi", [0.1, 1.0, 10.0])
def test_a_permeable_roof_within_2_percent_of_the_2d_solution(bi):
    # Michaelis-Menten floor uptake (hepatocyte-like K_m / c0 = 0.037) under a roof that lets
    # oxygen in from air-equilibrated surroundings (c_a = c0)
    da = 1.0
    x, floor, _, _ = graetz_reference(da, 0.037, LENGTH / H, bi=bi, ca=1.0)
    for pe in (1.0, 10.0, 100.0, 1000.0):
        xhat = PROFILE_STATIONS * LENGTH / (H * pe)
        profile, _ = model(pe, da, 0.037, bi=bi, ca=1.0)
        assert np.max(np.abs(profile[1:] - np.interp(xhat[1:], x, floor))) < 0.02, (pe, bi)


def test_leveque_asymptote_of_the_sherwood_number():
    # the transfer itself: a wall of uniform concentration (large Biot number) near the entrance
    for xhat in (1e-6, 1e-5, 1e-4):
        sh = float(plate_sherwood(np.array(xhat), np.array(1e12)))
        assert sh == pytest.approx(LEVEQUE * xhat ** (-1 / 3), rel=0.02)
    # and the march end to end: cells taking all that arrives (fast, saturating uptake) on a
    # channel short enough to lie inside the entrance layer take, on average,
    # 3/2 x Leveque's local value at the end (the mean of x^(-1/3) over 0..L)
    pe, short = 1000.0, 1e-4  # Graetz coordinate at the end
    u = pe * D / H
    length = short * H * pe
    species = Species("o2", D, C0, uptake=1.0, km=1e-9)
    found = march_channels(
        np.array([C0]), np.array([u * W * H]), np.array([length]), np.array([W]),
        np.array([H]), np.array([6 * u / H]), np.array([1.0]), np.array([0.0]), species,
    )  # fmt: skip
    mean_k = found["uptake"][0] / (W * length * C0)
    assert mean_k * H / D == pytest.approx(1.5 * LEVEQUE * short ** (-1 / 3), rel=0.02)
