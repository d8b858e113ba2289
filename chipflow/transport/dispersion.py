"""Dosing delay: how long a step change at the pump takes to reach each channel.

A solute switched on at the supply travels with the flow and spreads along it by Taylor-Aris
dispersion: the velocity differs across the section and diffusion across it mixes the fast
and the slow liquid, so a front spreads as if by an effective axial diffusivity

    K = D + U^2 a^2 / (48 D)               round tube of radius a (Taylor 1953; Aris 1956)
    K = D + f(h/w) U^2 h^2 / (210 D)       rectangular channel, depth h <= width w (Aris 1956)

``f`` = 1 between infinite parallel plates; with side walls it rises to about 7.95 for wide
shallow channels (Doshi, Daiya & Gill, Chem Eng Sci 33 (1978) 795; Dutta & Leighton, Anal Chem
73 (2001) 504; from memory) and is 1.76 for a square duct. This module computes ``f`` from
Aris's cell problem on the rectangle (:func:`aris_factor`; the table :data:`ARIS_TABLE` is
its output) and interpolates it. The side walls' share builds up only as diffusion crosses the
width (time ``w^2 / D``): a channel crossed in less time than that gets the parallel-plate
share plus the side walls' share times ``1 - (1 - e^-s) / s``, ``s = pi^2 D t / w^2`` (this
module's interpolation, not a published one).

Along a path, transit times and their variances add (one channel after another); where
streams join, the arriving liquid is a flow-weighted mixture of their times. Each channel's
transit time is ``tau = L / U`` with variance ``2 K L / U^3``; the node moments of the whole
network follow from two sparse linear systems (one for the means, one for the variances),
so loops and uneven splits need nothing special. The time at which a channel's outlet reaches
50 % and 90 % of the new concentration is read off an inverse Gaussian distribution (the
first-passage time of advection with dispersion) with that mean and variance. A side stream
carrying under 1 % of a node's inflow (:data:`SIDE_SHARE`; the cross-connections of a mesh
bed) is left out of that node's mixture: it shifts the 50 % and 90 % times by less than its
share, while its late arrival would otherwise dominate the variance.

Taylor-Aris needs the liquid to have crossed the section by diffusion (``t >> a^2 / D``);
for supply tubing this is only roughly so (a 0.5 mm tube: ``a^2 / D`` = 2 min for a small
molecule), so treat the 90 % time as an estimate.

Examples
--------
A square duct disperses 1.76 / 210 U^2 h^2 / D beyond diffusion, a wide shallow one up to
about 7.95 / 210 (Doshi et al. 1978):

>>> round(float(rectangle_factor(1.0)), 2), round(float(rectangle_factor(0.01)), 2)
(1.76, 7.84)

Dosing through 30 cm of 0.5 mm tubing at 12 uL/min (the demo's supply): the transit takes
4.9 min, and the front of a small molecule (5e-10 m^2/s) arrives spread by Taylor dispersion:

>>> import numpy as np
>>> u = 12e-9 / 60 / (np.pi * 0.25e-3**2)
>>> tau = 0.3 / u
>>> k = dispersion_coefficient(u, 0.5e-3, 0.5e-3, True, 5e-10, tau)
>>> t50, t90 = step_times(tau, 2 * k * 0.3 / u**3)
>>> round(float(tau)), round(float(t50)), round(float(t90))
(295, 292, 346)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from chipflow.transport.march import ChannelSet

__all__ = [
    "ARIS_TABLE",
    "aris_factor",
    "rectangle_factor",
    "dispersion_coefficient",
    "Dosing",
    "dosing",
    "step_times",
]

#: ``f(h/w)`` of rectangular ducts, computed by :func:`aris_factor` (aspect ratio, factor).
ARIS_TABLE = (
    (1.0, 1.75906),
    (0.8, 2.19475),
    (0.6, 2.88838),
    (0.5, 3.3933),
    (0.4, 4.04466),
    (0.3, 4.86037),
    (0.25, 5.32549),
    (0.2, 5.82055),
    (0.15, 6.33741),
    (0.1, 6.86861),
    (0.07, 7.19165),
    (0.05, 7.40813),
    (0.035, 7.57087),
    (0.02, 7.73382),
    (0.01, 7.84252),
)


def aris_factor(aspect: float, *, terms: int = 80) -> float:
    """``f`` of a rectangular duct of ``aspect`` = short side / long side, from Aris's cell
    problem [Aris1956]_: ``K - D = (1/D) sum a_mn^2 <phi_mn^2> / lambda_mn`` over the Neumann
    eigenfunctions ``phi_mn = cos(m pi y / w) cos(n pi z / h)`` of the section, ``a_mn`` the
    coefficients of ``u / U - 1`` (the exact duct velocity of Bruus 2008, by Gauss-Legendre
    quadrature), in units of ``U^2 h^2 / (210 D)``.

    References
    ----------
    .. [Aris1956] R. Aris, "On the dispersion of a solute in a fluid flowing through a tube",
       Proc. R. Soc. Lond. A 235 (1956) 67-77.
    """
    alpha = float(aspect)
    ny, my = int(max(200, 60 / alpha)), int(max(100, 30 / alpha))
    nz, mz = 48, 24
    gy, wy = np.polynomial.legendre.leggauss(ny)
    y, wy = 0.5 * (gy + 1.0), 0.5 * wy
    gz, wz = np.polynomial.legendre.leggauss(nz)
    z, wz = 0.5 * alpha * (gz + 1.0), 0.5 * alpha * wz
    # duct velocity (width 1, depth alpha), sum over odd n; cosh ratio written with exponentials
    n = np.arange(1, 2 * terms, 2)[:, None, None]
    yy, zz = np.abs(y - 0.5)[None, :, None], z[None, None, :]
    ratio = (
        np.exp(n * np.pi * (yy - 0.5) / alpha)
        * (1.0 + np.exp(-2.0 * n * np.pi * yy / alpha))
        / (1.0 + np.exp(-n * np.pi / alpha))
    )
    u = (np.sin(n * np.pi * zz / alpha) * (1.0 - ratio) / n**3).sum(axis=0)
    u = u / ((wy[:, None] * wz[None, :] * u).sum() / alpha) - 1.0
    m, k = np.arange(0, my, 2), np.arange(0, mz, 2)  # modes symmetric about the centre line
    proj = (
        (np.cos(np.outer(m, np.pi * y)) * wy) @ u @ (np.cos(np.outer(k, np.pi * z / alpha)) * wz).T
    )
    norm = np.where(m == 0, 1.0, 0.5)[:, None] * np.where(k == 0, alpha, alpha / 2)[None, :]
    lam = (m[:, None] * np.pi) ** 2 + (k[None, :] * np.pi / alpha) ** 2
    lam[0, 0] = np.inf
    return float(210.0 * ((proj / norm) ** 2 * norm / lam).sum() / alpha**3)


def rectangle_factor(aspect: np.ndarray) -> np.ndarray:
    """``f`` of :data:`ARIS_TABLE` at ``aspect`` = short side / long side (linear in the log of
    the aspect ratio; the narrowest entry below the table)."""
    table = np.array(ARIS_TABLE)[::-1]
    a = np.clip(np.asarray(aspect, float), table[0, 0], 1.0)
    return np.interp(np.log(a), np.log(table[:, 0]), table[:, 1])


def dispersion_coefficient(velocity, width, depth, round_, diffusivity: float, transit):
    """Taylor-Aris dispersion coefficient ``K`` [m^2/s] of each channel.

    Parameters
    ----------
    velocity : array_like
        Mean velocity [m/s].
    width, depth : array_like
        [m]; a round tube holds its inner diameter in both.
    round_ : array_like of bool
        Round tubing.
    diffusivity : float
        [m^2/s].
    transit : array_like
        Time the liquid spends in the channel [s] (builds up the side walls' share).
    """
    u = np.abs(np.asarray(velocity, float))
    w, h = np.asarray(width, float), np.asarray(depth, float)
    d = diffusivity
    short, long_ = np.minimum(w, h), np.maximum(w, h)
    plates = u * u * short * short / (210.0 * d)
    walls = plates * (rectangle_factor(short / long_) - 1.0)
    s = np.pi**2 * d * np.asarray(transit, float) / (long_ * long_)
    with np.errstate(invalid="ignore", divide="ignore"):
        grown = np.where(s > 1e-6, 1.0 - (-np.expm1(-s)) / np.where(s > 1e-6, s, 1.0), 0.5 * s)
    rect = d + plates + walls * grown
    tube = d + u * u * w * w / (192.0 * d)
    return np.where(np.asarray(round_, bool), tube, rect)


def step_times(mean, variance, fractions=(0.5, 0.9)) -> list[np.ndarray]:
    """Times [s] at which a step, arriving with transit time ``mean`` [s] and ``variance``
    [s^2], has reached each of ``fractions``: quantiles of the inverse Gaussian distribution
    with that mean and variance (the step itself where the variance is negligible).

    >>> [round(float(t[0]), 6) for t in step_times([10.0], [4.0])]
    [9.804533, 12.646856]
    """
    mu = np.asarray(mean, float)
    var = np.asarray(variance, float)
    with np.errstate(over="ignore"):  # a transit beyond 1e154 s is no spread (the step)
        spread = np.isfinite(mu) & np.isfinite(var) & (mu > 0) & (var > 1e-12 * mu * mu)
    safe_mu = np.where(spread, mu, 1.0)
    shape = safe_mu**2 / np.where(spread, var, 1.0)  # lambda / mu [-]
    return [np.where(spread, safe_mu * _unit_quantile(q, shape), mu) for q in fractions]


def _unit_quantile(q: float, shape: np.ndarray) -> np.ndarray:
    """The ``q`` quantile of the inverse Gaussian distribution of mean 1 and shape ``shape``
    (lambda / mu) [-], by bisection on the logarithm of its closed-form distribution function

        F(x) = Phi(sqrt(s / x) (x - 1)) + exp(2 s) Phi(-sqrt(s / x) (x + 1))

    (Chhikara & Folks, *The Inverse Gaussian Distribution*, Dekker 1989, eq. 2.3), the second
    term taken through log Phi so that it does not overflow. A few array operations per step
    instead of importing scipy.stats, which costs a small build most of a second.
    """
    from scipy.special import log_ndtr, ndtr

    s = np.asarray(shape, float)
    low = np.full(s.shape, -60.0)  # ln x
    high = np.full(s.shape, 60.0)
    for _ in range(120):  # halves a bracket of 120 in ln x down to 1e-34
        mid = 0.5 * (low + high)
        x = np.exp(mid)
        root = np.sqrt(s / x)
        cdf = ndtr(root * (x - 1.0)) + np.exp(2.0 * s + log_ndtr(-root * (x + 1.0)))
        below = cdf < q
        low = np.where(below, mid, low)
        high = np.where(below, high, mid)
    return np.exp(0.5 * (low + high))


@dataclass(frozen=True)
class Dosing:
    """Arrival of a step change at the supply.

    Attributes
    ----------
    diffusivity : float
        Of the dosed solute [m^2/s].
    mean, variance : numpy.ndarray
        Transit time to each channel's outlet [s] and its variance [s^2].
    t50, t90 : numpy.ndarray
        Time for each channel's outlet to reach 50 % and 90 % of the new concentration [s].
    tubing_t50, tubing_t90 : numpy.ndarray
        The same for the supply tubing alone on the way to each channel (chip channels taken
        as passed in no time) [s].
    residual : float
        Largest relative residual of the two node systems [-].
    """

    diffusivity: float
    mean: np.ndarray
    variance: np.ndarray
    t50: np.ndarray
    t90: np.ndarray
    tubing_t50: np.ndarray
    tubing_t90: np.ndarray
    residual: float


#: Share of a node's inflow below which a side stream is left out of its arrival-time mixture.
SIDE_SHARE = 0.01


def _node_moments(ch: ChannelSet, active, tau, var):
    """Mean and variance of the arrival time at every node (sparse solves)."""
    from scipy.sparse import coo_matrix, identity
    from scipy.sparse.linalg import spsolve

    n = ch.n_nodes
    up, down, q = ch.upstream[active], ch.downstream[active], ch.flow[active]
    inflow = ch.port_inflow + np.bincount(down, weights=q, minlength=n)
    # a side stream of under SIDE_SHARE of its node's inflow (a mesh bed's cross-connections)
    # is left out of the node's mixture: it moves the 50 % and 90 % times by less than its
    # share, but arriving late its variance term q (t_side - t)^2 / Q grows without bound
    # as q -> 0 and would swamp the moment fit
    side = q < SIDE_SHARE * inflow[down]
    inflow = inflow - np.bincount(down[side], weights=q[side], minlength=n)
    weight = np.where(side, 0.0, q / inflow[down])
    mix = coo_matrix((weight, (down, up)), shape=(n, n)).tocsr()
    system = (identity(n, format="csr") - mix).tocsc()
    b1 = np.bincount(down, weights=weight * tau[active], minlength=n)
    mean = spsolve(system, b1)
    with np.errstate(over="ignore"):  # a near-stagnant channel's transit: infinite spread
        spread = var[active] + (mean[up] + tau[active] - mean[down]) ** 2
    # a side stream left out (weight 0) adds nothing, even where its spread is infinite
    term = np.zeros_like(weight)
    kept = weight > 0
    term[kept] = weight[kept] * spread[kept]
    b2 = np.bincount(down, weights=term, minlength=n)
    variance = spsolve(system, b2)
    scale = max(float(np.abs(b1).max(initial=0.0)), 1e-300)
    residual = max(
        float(np.abs(system @ mean - b1).max(initial=0.0)) / scale,
        float(np.abs(system @ variance - b2).max(initial=0.0))
        / max(float(np.abs(b2).max(initial=0.0)), 1e-300),
    )
    return mean, np.maximum(variance, 0.0), residual


def dosing(ch: ChannelSet, diffusivity: float) -> Dosing:
    """Arrival of a step change entering at every inflowing port (the supply).

    Parameters
    ----------
    ch : ChannelSet
    diffusivity : float
        Of the dosed solute [m^2/s].
    """
    area = np.where(ch.round, np.pi * ch.width**2 / 4.0, ch.width * ch.depth)
    active = ch.flow > 0
    u = np.where(active, ch.flow / area, 0.0)
    # a near-stagnant channel's transit and spread overflow to infinity: taken as such
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        tau = np.where(active, ch.length / np.where(active, u, 1.0), np.inf)
        k = dispersion_coefficient(u, ch.width, ch.depth, ch.round, diffusivity, tau)
        var = np.where(active, 2.0 * k * ch.length / np.where(active, u, 1.0) ** 3, np.inf)
    mean_n, var_n, res1 = _node_moments(ch, active, tau, var)
    tube_tau = np.where(ch.round, tau, 0.0)
    tube_var = np.where(ch.round, var, 0.0)
    tmean_n, tvar_n, res2 = _node_moments(ch, active, tube_tau, tube_var)
    up = ch.upstream
    mean = np.where(active, mean_n[up] + tau, np.inf)
    variance = np.where(active, var_n[up] + var, np.inf)
    t50, t90 = step_times(np.where(active, mean, 1.0), np.where(active, variance, 0.0))
    tmean = np.where(active, tmean_n[up] + tube_tau, np.inf)
    tvar = np.where(active, tvar_n[up] + tube_var, 0.0)
    tt50, tt90 = step_times(np.where(active, tmean, 1.0), np.where(active, tvar, 0.0))
    stale = ~active
    return Dosing(
        diffusivity=diffusivity,
        mean=mean,
        variance=variance,
        t50=np.where(stale, np.inf, t50),
        t90=np.where(stale, np.inf, t90),
        tubing_t50=np.where(stale, np.inf, tt50),
        tubing_t90=np.where(stale, np.inf, tt90),
        residual=max(res1, res2),
    )
