"""Steady bulging of a soft channel roof: two elastic models and the flow law they give.

A roof of thickness ``t`` over a channel of width ``w`` and depth ``h`` bulges under the local
liquid pressure ``p`` by ``u(x) = p psi(x)`` (linear elasticity); the channel's local depth is
``h + p psi(x)``. Lubrication flow under that roof (``h << w << l``: the flow at each
cross-section is the parallel-plate flow of its local depth, and each cross-section deforms
on its own) carries

    Q = w / (12 mu l) [G(p_in) - G(p_out)],      dG/dp = <(h + p psi)^3>,

where ``<.>`` is the mean across the width. With the width moments ``m_n = <psi^n>``
[m^n/Pa^n] the antiderivative is the quartic

    G(p) = h^3 p + 3/2 h^2 m_1 p^2 + h m_2 p^3 + m_3 p^4 / 4,

the form Gervais et al. [2]_ observed, here without a fitted parameter. Two profiles
``psi(x)`` are used, chosen by the roof's thickness over the channel's width ``t / w``:

- **Clamped plate** (``t / w < 0.5``), Christov et al. [1]_: a plate of rigidity
  ``B = E t^3 / (12 (1 - nu^2))`` clamped at the side walls,
  ``psi(x) = w^4 / (24 B) (1/4 - x^2/w^2)^2``; ``m_n`` are the integrals
  ``int (1/4 - xi^2)^(2n) dxi = 1/30, 1/630, 1/12012`` times ``phi^n``, ``phi = w^4 / (24 B)``.
- **Thick wall** (``t / w >= 0.5``), Wang & Christov [3]_: the roof is a rectangle of width
  ``w`` and height ``t``, simply supported at the side walls (no vertical displacement and
  no normal stress there), free on top and loaded by ``p`` on its underside, in plane
  strain. chipflow solves that problem exactly by the Fourier series the paper's abstract
  names: an Airy stress function ``cos(k x) f(y)`` per odd harmonic ``k = (2m+1) pi / w``
  satisfies the side conditions term by term; ``f`` solves ``f'''' - 2 k^2 f'' + k^4 f = 0``
  with the four face conditions; the underside displacement is
  ``u_m = f'''(0) / (k^2 E')``, ``E' = E / (1 - nu^2)``. The paper's own expansion assumes
  ``(t/w)^2 >> 1``; the series here holds for any ``t / w``, and tends to the elastic
  half-plane under a strip load as ``t / w`` grows (centre displacement
  ``8 C (1 - nu^2) p w / (pi^2 E)``, ``C`` Catalan's constant, from the half-plane's
  response ``2 (1 - nu^2) p_k / (E k)`` to a load ``p_k cos(k x)``, Johnson [4]_) and to the
  simply supported plate as it shrinks (centre ``5 p w^4 / (384 B)``, Timoshenko &
  Woinowsky-Krieger [5]_). The tests check both limits and an independent finite-element
  solve of the rectangle.

At the switch (``t / w = 0.5``) the two idealisations differ by about a factor of 8 in the
bulge (a clamped edge against a simply supported one): near it, read the numbers as a range.
chipflow applies the law as a ratio to the exact duct series: a channel's flow is
``g [Phi(p_a) - Phi(p_b)]`` with ``g`` the rigid channel's series conductance and
``Phi = G / h^3`` [Pa] (:func:`potential`), which is exactly the rigid law when nothing bulges.

A model holds (:func:`model_range`) for a channel wider than deep (the roof is the long
side), at least :data:`MIN_LENGTH_RATIO` widths long (a shorter roof is also held at its
ends: a clamped rectangular plate twice as long as wide bulges about 3 % less than the strip,
Timoshenko & Woinowsky-Krieger [5]_, table of clamped rectangular plates, from memory), with a
plate's centre deflection at most its thickness (small-deflection plate theory; beyond it the
roof stretches like a membrane and the model overstates the bulge) and a thick wall's centre
deflection at most a tenth of the width (small strain).

References
----------
.. [1] I. C. Christov, V. Cognet, T. C. Shidhore, H. A. Stone, J. Fluid Mech. 841 (2018)
   267-286.
.. [2] T. Gervais, J. El-Ali, A. Guenther, K. F. Jensen, Lab Chip 6 (2006) 500-507.
.. [3] X. Wang, I. C. Christov, "Theory of the flow-induced deformation of shallow compliant
   microchannels with thick walls", Proc. R. Soc. A 475 (2019) 20190513.
.. [4] K. L. Johnson, *Contact Mechanics*, Cambridge University Press (1985), ch. 2: a
   half-space under a periodic normal load (from memory).
.. [5] S. Timoshenko, S. Woinowsky-Krieger, *Theory of Plates and Shells*, McGraw-Hill
   (1959): cylindrical bending of a strip; rectangular plates with clamped edges.
"""

from __future__ import annotations

import functools

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "PROFILE_MOMENTS",
    "PLATE",
    "THICK_WALL",
    "MODEL_NAMES",
    "THICK_RATIO",
    "MIN_LENGTH_RATIO",
    "roof_deflection",
    "deflection_scale",
    "pressure_integral",
    "resistance_ratio",
    "plate_moments",
    "thick_wall_displacement",
    "thick_wall_moments",
    "roof_moments",
    "potential",
    "potential_slope",
    "model_range",
]

#: int_{-1/2}^{1/2} (1/4 - xi^2)^(2n) dxi for n = 1, 2, 3 (exact).
PROFILE_MOMENTS = (1.0 / 30.0, 1.0 / 630.0, 1.0 / 12012.0)

#: Model codes: a clamped thin plate (Christov et al. 2018) and a thick wall (Wang & Christov
#: 2019).
PLATE, THICK_WALL = 0, 1
#: Names of the models, by code, as the report shows them.
MODEL_NAMES = (
    "clamped plate (Christov et al., J Fluid Mech 2018)",
    "thick wall (Wang & Christov, Proc R Soc A 2019)",
)
#: Roof thickness over channel width from which the thick-wall model is used [1].
THICK_RATIO = 0.5
#: Channels shorter than this many widths are outside both models' range [1].
MIN_LENGTH_RATIO = 2.0
#: Largest thick-wall centre deflection over the width within the model's range [1].
MAX_STRAIN = 0.1

#: Harmonics of the thick-wall series and the quadrature nodes across the width.
_MODES = 2000
_NODES = 400


def deflection_scale(width: ArrayLike, rigidity: ArrayLike):
    """``phi = w^4 / (24 B)`` [m/Pa]: the roof deflection per pascal, per unit of profile."""
    return np.asarray(width, dtype=float) ** 4 / (24.0 * np.asarray(rigidity))


def roof_deflection(x: ArrayLike, width: float, pressure: float, rigidity: float):
    """Deflection of a clamped roof at ``x`` [m] from the centre line [m] ([1]_).

    The centre deflection is ``p w^4 / (384 B)``, that of a clamped strip under a uniform
    load.
    """
    xi = np.asarray(x, dtype=float) / width
    return pressure * deflection_scale(width, rigidity) * (0.25 - xi**2) ** 2


def pressure_integral(pressure: ArrayLike, depth: ArrayLike, phi: ArrayLike):
    """``G(p) = int_0^p (1/w) int h(x, p')^3 dx dp'`` [m^3 Pa] of a channel under a clamped
    plate (``phi`` from :func:`deflection_scale`)."""
    p = np.asarray(pressure, dtype=float)
    h = np.asarray(depth, dtype=float)
    f = np.asarray(phi, dtype=float)
    m1, m2, m3 = PROFILE_MOMENTS
    return (
        h**3 * p
        + 3.0 * h**2 * f * m1 * p**2 / 2.0
        + 3.0 * h * f**2 * m2 * p**3 / 3.0
        + f**3 * m3 * p**4 / 4.0
    )


def resistance_ratio(p_in: ArrayLike, p_out: ArrayLike, depth: ArrayLike, phi: ArrayLike):
    """``R_soft / R_rigid`` of channels under a clamped plate whose ends are at ``p_in`` and
    ``p_out`` [Pa].

    Equal end pressures give the limit ``h^3 / h(p)^3`` averaged over the width, i.e. the
    derivative of ``G``. Zero pressure or zero ``phi`` gives exactly 1.
    """
    p_in, p_out, h, f = np.broadcast_arrays(
        np.asarray(p_in, float),
        np.asarray(p_out, float),
        np.asarray(depth, float),
        np.asarray(phi, float),
    )
    m1, m2, m3 = PROFILE_MOMENTS
    moments = np.stack([np.zeros_like(f), f / 16.0, f * m1, f**2 * m2, f**3 * m3])
    ratio_in = potential(p_in, h, moments)
    ratio_out = potential(p_out, h, moments)
    drop = p_in - p_out
    slope = potential_slope((p_in + p_out) / 2.0, h, moments)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(np.abs(drop) > 0, drop / (ratio_in - ratio_out), 1.0 / slope)


def plate_moments(width: ArrayLike, rigidity: ArrayLike) -> np.ndarray:
    """Centre deflection and width moments of a clamped plate, per pascal.

    Returns
    -------
    numpy.ndarray, shape (5, ...)
        Rows: the model code (:data:`PLATE`), the centre deflection ``psi(0) = phi / 16``
        [m/Pa], and ``m_1, m_2, m_3`` [m/Pa, m^2/Pa^2, m^3/Pa^3].
    """
    phi = np.asarray(deflection_scale(width, rigidity), dtype=float)
    m1, m2, m3 = PROFILE_MOMENTS
    return np.stack([np.full_like(phi, PLATE), phi / 16.0, phi * m1, phi**2 * m2, phi**3 * m3])


def _half_width_rule(nodes: int, order: int = 10) -> tuple[np.ndarray, np.ndarray]:
    """Composite Gauss-Legendre nodes and weights on [0, 1/2]: ``nodes / order`` panels of
    ``order`` points each (small eigenproblems, accurate near the supported edge)."""
    xi, w = np.polynomial.legendre.leggauss(order)
    panels = max(1, nodes // order)
    edges = np.linspace(0.0, 0.5, panels + 1)
    half = np.diff(edges)[:, None] / 2.0
    x = (edges[:-1, None] + half * (xi[None, :] + 1.0)).ravel()
    return x, (half * w[None, :]).ravel()


@functools.lru_cache(maxsize=256)
def _thick_profile(ratio: float, modes: int = _MODES, nodes: int = _NODES):
    """Dimensionless underside displacement of the simply supported rectangle.

    For ``w = 1``, ``E' = 1`` and ``p = 1``: the modal amplitudes ``u_m`` (of
    ``cos((2m+1) pi x)``), the centre value, and the profile's moments ``<psi^n>`` for
    n = 1, 2, 3 by Gauss-Legendre quadrature over the half width.
    """
    m = np.arange(modes)
    k = (2 * m + 1) * np.pi
    load = 4.0 * (-1.0) ** m / k  # the uniform load's cosine coefficients
    t = float(ratio)
    decay = np.exp(-k * t)
    one, zero = np.ones(modes), np.zeros(modes)
    # f = a e^{-ky} + b y e^{-ky} + c e^{k(y-t)} + d (y-t) e^{k(y-t)}, bounded on 0..t
    system = np.stack(
        [
            np.stack([one, zero, decay, -t * decay], 1),  # f(0)
            np.stack([-k, one, k * decay, (1 - k * t) * decay], 1),  # f'(0)
            np.stack([decay, t * decay, one, zero], 1),  # f(t)
            np.stack([-k * decay, (1 - k * t) * decay, k, one], 1),  # f'(t)
        ],
        1,
    )
    rhs = np.zeros((modes, 4, 1))
    rhs[:, 0, 0] = load / k**2  # sigma_yy(0) = -k^2 f(0) = -p_m; the other three vanish
    coeff = np.linalg.solve(system, rhs)[..., 0]
    third = np.stack([-(k**3), 3 * k**2, k**3 * decay, (3 * k**2 - k**3 * t) * decay], 1)
    amplitude = (coeff * third).sum(axis=1) / k**2
    x, weight = _half_width_rule(nodes)
    profile = np.cos(np.outer(x, k)) @ amplitude
    moments = tuple(float(2.0 * weight @ profile**n) for n in (1, 2, 3))  # mean over w
    return amplitude, float(amplitude.sum()), moments


def thick_wall_displacement(x: ArrayLike, width: float, thickness: float, modulus: float,
                            poisson: float = 0.5) -> np.ndarray:  # fmt: skip
    """Underside displacement of a thick roof per pascal [m/Pa] at ``x`` from the centre [m]
    (the simply supported rectangle of Wang & Christov [3]_, plane strain)."""
    amplitude, _, _ = _thick_profile(round(float(thickness) / float(width), 12))
    k = (2 * np.arange(amplitude.size) + 1) * np.pi
    xi = np.asarray(x, dtype=float) / width
    scale = width * (1.0 - poisson**2) / modulus
    return scale * (np.cos(np.multiply.outer(xi, k)) @ amplitude)


def thick_wall_moments(
    width: ArrayLike, thickness: ArrayLike, modulus: float, poisson: float = 0.5
) -> np.ndarray:
    """Centre displacement and width moments of thick roofs, per pascal (as
    :func:`plate_moments`, model code :data:`THICK_WALL`).

    The series is solved once per distinct ``thickness / width``; the moments scale as
    ``(w (1 - nu^2) / E)^n``.
    """
    w, t = np.broadcast_arrays(np.asarray(width, float), np.asarray(thickness, float))
    ratio = np.round(t / w, 12)
    distinct, where = np.unique(ratio, return_inverse=True)
    table = np.array([[_thick_profile(float(r))[1], *_thick_profile(float(r))[2]]
                      for r in distinct]).reshape(-1, 4)  # fmt: skip
    scale = w * (1.0 - poisson**2) / modulus
    rows = table[where.reshape(w.shape)]
    return np.stack(
        [
            np.full(w.shape, float(THICK_WALL)),
            scale * rows[..., 0],
            scale * rows[..., 1],
            scale**2 * rows[..., 2],
            scale**3 * rows[..., 3],
        ]
    )


def roof_moments(
    width: ArrayLike, thickness: float, modulus: float, poisson: float = 0.5
) -> np.ndarray:
    """The model of each channel's roof, chosen by ``t / w``, with its moments (rows as in
    :func:`plate_moments`).

    >>> rows = roof_moments([1e-3, 1e-4], 200e-6, 1.32e6)
    >>> rows[0].tolist()   # a 1 mm wide channel: plate; 100 um: thick wall
    [0.0, 1.0]
    """
    w = np.asarray(width, dtype=float)
    from chipflow.operation.compliance import plate_rigidity

    plate = plate_moments(w, plate_rigidity(modulus, thickness, poisson))
    thick_rows = w * THICK_RATIO <= thickness
    if not np.any(thick_rows):
        return plate
    out = plate.copy()
    out[:, thick_rows] = thick_wall_moments(w[thick_rows], thickness, modulus, poisson)
    return out


def potential(pressure: ArrayLike, depth: ArrayLike, moments: np.ndarray):
    """``Phi(p) = G(p) / h^3`` [Pa]: the rigid channel's conductance times the difference of
    ``Phi`` at its ends is its flow.

    ``moments`` has the rows of :func:`plate_moments`.
    """
    p = np.asarray(pressure, dtype=float)
    h = np.asarray(depth, dtype=float)
    _, _, m1, m2, m3 = moments
    return p * (1.0 + p * (1.5 * m1 / h + p * (m2 / h**2 + p * m3 / (4.0 * h**3))))


def potential_slope(pressure: ArrayLike, depth: ArrayLike, moments: np.ndarray):
    """``dPhi/dp = <(h + p psi)^3> / h^3`` [1]: the local conductance over the rigid one."""
    p = np.asarray(pressure, dtype=float)
    h = np.asarray(depth, dtype=float)
    _, _, m1, m2, m3 = moments
    return 1.0 + p * (3.0 * m1 / h + p * (3.0 * m2 / h**2 + p * m3 / h**3))


def model_range(
    width: ArrayLike,
    depth: ArrayLike,
    length: ArrayLike,
    thickness: float,
    moments: np.ndarray,
    pressure: ArrayLike,
) -> np.ndarray:
    """Why each channel lies outside its model's range at its highest pressure [Pa] ("" when
    inside), as an array of short reasons."""
    w, h, ell, p = (np.asarray(v, dtype=float) for v in (width, depth, length, pressure))
    code, centre = moments[0], moments[1]
    bulge = np.abs(p) * centre
    reasons = np.full(w.shape, "", dtype=object)
    rules = (
        (h > w, "deeper than wide"),
        (ell < MIN_LENGTH_RATIO * w, f"shorter than {MIN_LENGTH_RATIO:g} widths"),
        ((code == PLATE) & (bulge > thickness), "plate deflection above the roof thickness"),
        ((code == THICK_WALL) & (bulge > MAX_STRAIN * w), "strain above 10 %"),
    )
    for mask, words in rules:  # a handful of rules
        reasons = np.where(mask & (reasons == ""), words, reasons)
    return reasons
