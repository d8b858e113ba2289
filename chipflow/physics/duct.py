"""Fully developed laminar flow in rectangular channels and round tubes.

All functions take numpy arrays (or scalars) and broadcast, so one call serves a million
channels. A round tube is a channel with ``round=True`` whose width and depth both hold its
inner diameter.

Rectangular channels use the exact Fourier series of the Poiseuille problem [1]_. Each series
is split into a closed-form part (odd zeta values, Catalan's constant) plus a remainder whose
terms fall like ``exp(-n pi w / h)``; the remainder is summed term by term until the last term
is below 1e-16 of the result, which converges to better than 1e-12 relative for every aspect
ratio. Channels share few distinct aspect ratios, so the series are evaluated once per distinct
ratio. The tests check the series against the friction factors tabulated by Shah and London
[2]_.

Notation: ``a = max(w, h)`` is the long side, ``b = min(w, h)`` the short side and
``alpha = b / a <= 1``. The *floor* is the wall of width ``w`` (cells grow on it); for
``w >= h`` it is a long wall, where the wall shear peaks at its middle.

References
----------
.. [1] H. Bruus, *Theoretical Microfluidics*, Oxford University Press, 2008, ch. 4.
.. [2] R. K. Shah and A. L. London, *Laminar Flow Forced Convection in Ducts*, Academic
   Press, 1978.
.. [3] S. H. Chen, "Entrance length of laminar flow", J. Fluids Eng. 95 (1973); applying the
   round-tube correlation with the hydraulic diameter of a rectangle is common practice.

Examples
--------
A 200 x 50 um channel, 10 mm long, carrying 5 uL/min of water at 20 C:

>>> s = flow_state(200e-6, 50e-6, 10e-3, 5e-9 / 60, 1.0016e-3, 998.2)
>>> print(f"{s.pressure_drop:.1f} Pa, {s.wall_shear_max:.3f} Pa, {s.mean_velocity:.4f} m/s")
475.6 Pa, 1.185 Pa, 0.0083 m/s
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from chipflow.errors import ArgumentError

__all__ = [
    "DuctFlow",
    "aspect_ratio",
    "cross_section_area",
    "wetted_perimeter",
    "hydraulic_diameter",
    "resistance",
    "poiseuille_number",
    "mean_velocity",
    "max_velocity",
    "wall_shear_mean",
    "wall_shear_max",
    "wall_shear_floor",
    "reynolds_number",
    "entrance_length",
    "flow_state",
    "METHODS",
    "require_positive",
    "require_finite",
]

#: Resistance methods: the exact series, or the one-term approximation 1 - 0.630 alpha [1]_.
METHODS = ("series", "approx")

_ZETA5_ODD = 31.0 / 32.0 * 1.0369277551433699263  # sum over odd n of n^-5
_CATALAN = 0.9159655941772190151  # sum over odd n of (-1)^((n-1)/2) n^-2
_TOL = 1e-16
_MAX_TERMS = 10_000


@dataclass(frozen=True)
class _Factors:
    """Dimensionless shape factors of a rectangle, one per channel.

    ``R = k_r mu L / (a b^3)``; ``tau_long = c_long mu Q / (a b^2)`` at the middle of a long
    wall; ``tau_short = c_short mu Q / (a b^2)`` at the middle of a short wall;
    ``u_max = c_umax Q / (a b)``.
    """

    k_r: np.ndarray
    c_long: np.ndarray
    c_short: np.ndarray
    c_umax: np.ndarray


def _series(alpha: np.ndarray) -> tuple[np.ndarray, ...]:
    """The four remainder series for distinct aspect ratios ``alpha`` (0 < alpha <= 1)."""
    r_tanh5 = np.zeros_like(alpha)  # sum (1 - tanh x_n) / n^5
    r_tanh2 = np.zeros_like(alpha)  # sum (-1)^k (1 - tanh x_n) / n^2
    s_sech2 = np.zeros_like(alpha)  # sum sech(x_n) / n^2
    s_sech3 = np.zeros_like(alpha)  # sum (-1)^k sech(x_n) / n^3
    for k in range(_MAX_TERMS):
        n = 2 * k + 1
        e = np.exp(-n * np.pi / (2.0 * alpha))  # exp(-x_n), x_n = n pi / (2 alpha)
        one_minus_tanh = 2.0 * e * e / (1.0 + e * e)
        sech = 2.0 * e / (1.0 + e * e)
        sign = -1.0 if k % 2 else 1.0
        r_tanh5 += one_minus_tanh / n**5
        r_tanh2 += sign * one_minus_tanh / n**2
        s_sech2 += sech / n**2
        s_sech3 += sign * sech / n**3
        if np.max(sech / n**2) < _TOL:
            break
    return r_tanh5, r_tanh2, s_sech2, s_sech3


def _factors(alpha: np.ndarray, method: str = "series") -> _Factors:
    alpha = np.asarray(alpha, dtype=float)
    distinct, inverse = np.unique(alpha.ravel(), return_inverse=True)
    r_tanh5, r_tanh2, s_sech2, s_sech3 = _series(distinct)
    if method == "series":
        k_r = 12.0 / (1.0 - 192.0 * distinct / np.pi**5 * (_ZETA5_ODD - r_tanh5))
    elif method == "approx":
        k_r = 12.0 / (1.0 - 0.630 * distinct)
    else:
        raise ArgumentError(f"unknown resistance method {method!r} (valid: {', '.join(METHODS)})")
    c_long = 0.5 * k_r * (1.0 - 8.0 / np.pi**2 * s_sech2)
    c_short = 4.0 / np.pi**2 * k_r * (_CATALAN - r_tanh2)
    c_umax = k_r / 8.0 * (1.0 - 32.0 / np.pi**3 * s_sech3)

    def spread(values: np.ndarray) -> np.ndarray:
        return values[inverse].reshape(alpha.shape)

    return _Factors(spread(k_r), spread(c_long), spread(c_short), spread(c_umax))


def require_positive(**values: ArrayLike) -> None:
    """Refuse sizes and properties that are not finite and greater than zero.

    Raises
    ------
    ArgumentError
        Naming the first offending argument and its worst value.

    >>> require_positive(width=[1e-4, -2e-4])
    Traceback (most recent call last):
    ...
    chipflow.errors.ArgumentError: width must be finite and greater than zero, got -0.0002
    """
    for name, value in values.items():
        try:
            array = np.asarray(value, dtype=float)
        except (TypeError, ValueError):
            raise ArgumentError(f"{name} must be a number or an array of numbers") from None
        bad = ~(np.isfinite(array) & (array > 0))
        if bad.any():
            worst = array[bad].flat[0]
            raise ArgumentError(f"{name} must be finite and greater than zero, got {worst:g}")


def require_finite(**values: ArrayLike) -> None:
    """Refuse values (flows, pressure drops, velocities: any sign) that are not finite
    numbers.

    Raises
    ------
    ArgumentError
        Naming the first offending argument.

    >>> require_finite(flow=[1e-9, float("nan")])
    Traceback (most recent call last):
    ...
    chipflow.errors.ArgumentError: flow must be a finite number or an array of them, got nan
    """
    for name, value in values.items():
        try:
            array = np.asarray(value, dtype=float)
        except (TypeError, ValueError):
            raise ArgumentError(f"{name} must be a number or an array of numbers") from None
        bad = ~np.isfinite(array)
        if bad.any():
            raise ArgumentError(
                f"{name} must be a finite number or an array of them, got {array[bad].flat[0]:g}"
            )


def _sides(width: ArrayLike, depth: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    w, h = np.broadcast_arrays(np.asarray(width, float), np.asarray(depth, float))
    return np.maximum(w, h), np.minimum(w, h)


def _out(value: np.ndarray) -> np.ndarray | float:
    return float(value) if np.ndim(value) == 0 else value


def aspect_ratio(width: ArrayLike, depth: ArrayLike) -> np.ndarray | float:
    """Short side over long side, ``min(w, h) / max(w, h)`` [-].

    >>> aspect_ratio(200e-6, 50e-6)
    0.25
    """
    require_positive(width=width, depth=depth)
    a, b = _sides(width, depth)
    return _out(b / a)


def cross_section_area(width: ArrayLike, depth: ArrayLike, round: ArrayLike = False):
    """Cross-section area [m^2]; ``round`` channels have diameter ``width`` [m]."""
    require_positive(width=width, depth=depth)
    w, h, rnd = np.broadcast_arrays(np.asarray(width, float), np.asarray(depth, float), round)
    return _out(np.where(rnd, np.pi / 4.0 * w * w, w * h))


def wetted_perimeter(width: ArrayLike, depth: ArrayLike, round: ArrayLike = False):
    """Wetted perimeter [m]."""
    require_positive(width=width, depth=depth)
    w, h, rnd = np.broadcast_arrays(np.asarray(width, float), np.asarray(depth, float), round)
    return _out(np.where(rnd, np.pi * w, 2.0 * (w + h)))


def hydraulic_diameter(width: ArrayLike, depth: ArrayLike, round: ArrayLike = False):
    """Hydraulic diameter ``4 A / P`` [m]: ``2 w h / (w + h)``, or the tube's diameter.

    >>> round(hydraulic_diameter(200e-6, 50e-6) * 1e6, 3)
    80.0
    """
    require_positive(width=width, depth=depth)
    w, h, rnd = np.broadcast_arrays(np.asarray(width, float), np.asarray(depth, float), round)
    return _out(np.where(rnd, w, 2.0 * w * h / (w + h)))


def resistance(
    width: ArrayLike,
    depth: ArrayLike,
    length: ArrayLike,
    viscosity: ArrayLike,
    round: ArrayLike = False,
    method: str = "series",
) -> np.ndarray | float:
    """Hydraulic resistance ``dp / Q`` [Pa s/m^3].

    Parameters
    ----------
    width, depth : array_like
        Channel width and depth [m] (any aspect ratio; for round tubes both the diameter).
    length : array_like
        Channel length [m].
    viscosity : array_like
        Dynamic viscosity [Pa s].
    round : array_like of bool
        True for round tubes (Hagen-Poiseuille, ``128 mu L / (pi d^4)``).
    method : {"series", "approx"}
        Exact series [1]_ or the approximation ``12 mu L / (w h^3 (1 - 0.630 h/w))``.

    Examples
    --------
    A square channel: ``R = 28.45 mu L / h^4`` (Bruus 2008).

    >>> round(resistance(1.0, 1.0, 1.0, 1.0), 2)
    28.45
    """
    require_positive(width=width, depth=depth, length=length, viscosity=viscosity)
    a, b = _sides(width, depth)
    length, viscosity, rnd = np.broadcast_arrays(length, viscosity, round)
    with np.errstate(over="ignore", under="ignore"):  # sizes beyond floats: 0 or inf, judged
        rect = _factors(b / a, method).k_r * viscosity * length / (a * b**3)  # by the solve
        tube = 128.0 * viscosity * length / (np.pi * a**4)
    return _out(np.where(rnd, tube, rect))


def poiseuille_number(width: ArrayLike, depth: ArrayLike, round: ArrayLike = False):
    """Darcy friction factor times Reynolds number, ``f Re = 2 D_h^2 A R / (mu L)`` [-].

    >>> round(poiseuille_number(1.0, 0.5), 2)   # Shah & London (1978): 62.19
    62.19
    """
    area = cross_section_area(width, depth, round)
    d_h = hydraulic_diameter(width, depth, round)
    return _out(2.0 * d_h**2 * area * resistance(width, depth, 1.0, 1.0, round))


def mean_velocity(width: ArrayLike, depth: ArrayLike, flow: ArrayLike, round: ArrayLike = False):
    """Mean velocity ``Q / A`` [m/s] for a flow rate ``flow`` [m^3/s]."""
    require_finite(flow=flow)
    return _out(np.asarray(flow, float) / cross_section_area(width, depth, round))


def max_velocity(width: ArrayLike, depth: ArrayLike, flow: ArrayLike, round: ArrayLike = False):
    """Peak (centreline) velocity [m/s]; ``2 u_mean`` in a round tube."""
    require_positive(width=width, depth=depth)
    require_finite(flow=flow)
    a, b = _sides(width, depth)
    flow, rnd = np.broadcast_arrays(np.asarray(flow, float), round)
    rect = _factors(b / a).c_umax * flow / (a * b)
    return _out(np.where(rnd, 2.0 * flow / (np.pi / 4.0 * a * a), rect))


def wall_shear_mean(
    width: ArrayLike,
    depth: ArrayLike,
    length: ArrayLike,
    pressure_drop: ArrayLike,
    round: ArrayLike = False,
):
    """Perimeter-averaged wall shear stress from the force balance ``dp A / (L P)`` [Pa]."""
    require_positive(length=length)
    require_finite(pressure_drop=pressure_drop)
    area = cross_section_area(width, depth, round)
    perimeter = wetted_perimeter(width, depth, round)
    return _out(np.asarray(pressure_drop, float) * area / (np.asarray(length, float) * perimeter))


def _wall_shear(width, depth, flow, viscosity, round, floor: bool):
    require_positive(width=width, depth=depth, viscosity=viscosity)
    require_finite(flow=flow)
    w, h, flow, viscosity, rnd = np.broadcast_arrays(
        np.asarray(width, float),
        np.asarray(depth, float),
        np.asarray(flow, float),
        viscosity,
        round,
    )
    a, b = np.maximum(w, h), np.minimum(w, h)
    factors = _factors(b / a)
    coefficient = factors.c_long
    if floor:
        coefficient = np.where(w >= h, factors.c_long, factors.c_short)
    rect = coefficient * viscosity * flow / (a * b**2)
    tube = 32.0 * viscosity * flow / (np.pi * a**3)
    return _out(np.where(rnd, tube, rect))


def wall_shear_max(
    width: ArrayLike,
    depth: ArrayLike,
    flow: ArrayLike,
    viscosity: ArrayLike,
    round: ArrayLike = False,
):
    """Peak wall shear stress [Pa], at the middle of a long wall (``4 mu Q / (pi r^3)`` in a tube).

    Parameters
    ----------
    width, depth : array_like
        [m].
    flow : array_like
        Flow rate [m^3/s] (the sign is kept).
    viscosity : array_like
        [Pa s].

    Examples
    --------
    Ratio to the parallel-plate value ``6 mu Q / (w h^2)`` for h/w = 0.5 (series, see
    REFERENCES: 1.356):

    >>> round(wall_shear_max(2.0, 1.0, 1.0, 1.0) / (6 / (2.0 * 1.0**2)), 3)
    1.356
    """
    return _wall_shear(width, depth, flow, viscosity, round, floor=False)


def wall_shear_floor(
    width: ArrayLike,
    depth: ArrayLike,
    flow: ArrayLike,
    viscosity: ArrayLike,
    round: ArrayLike = False,
):
    """Wall shear stress at the centre of the floor, the wall of width ``w`` [Pa].

    This is the shear that cells cultured on the channel floor feel. For ``w >= h`` it equals
    :func:`wall_shear_max`; for tall channels (``w < h``) it is the smaller shear at the middle
    of a short wall. In a round tube it is the uniform wall shear.

    Parameters
    ----------
    width, depth : array_like
        [m].
    flow : array_like
        Flow rate [m^3/s].
    viscosity : array_like
        [Pa s].
    """
    return _wall_shear(width, depth, flow, viscosity, round, floor=True)


def reynolds_number(velocity: ArrayLike, hydraulic_diam: ArrayLike, fluid_viscosity, density):
    """Reynolds number ``rho |u| D_h / mu`` [-] from mean velocity [m/s] and ``D_h`` [m]."""
    require_finite(velocity=velocity)
    require_positive(hydraulic_diam=hydraulic_diam, viscosity=fluid_viscosity, density=density)
    return _out(
        density * np.abs(np.asarray(velocity, float)) * hydraulic_diam / np.asarray(fluid_viscosity)
    )


def entrance_length(hydraulic_diam: ArrayLike, reynolds: ArrayLike):
    """Hydrodynamic entrance length [m], ``D_h (0.6 / (1 + 0.035 Re) + 0.056 Re)`` [3]_."""
    require_positive(hydraulic_diam=hydraulic_diam)
    require_finite(reynolds=reynolds)
    if np.any(np.asarray(reynolds, float) < 0):
        raise ArgumentError("reynolds must not be negative")
    re = np.asarray(reynolds, float)
    return _out(np.asarray(hydraulic_diam, float) * (0.6 / (1.0 + 0.035 * re) + 0.056 * re))


@dataclass(frozen=True)
class DuctFlow:
    """The flow in one or many channels; every field is an array (or float) in SI units.

    Attributes
    ----------
    flow : [m^3/s], signed.
    pressure_drop : [Pa], signed like ``flow``.
    resistance : [Pa s/m^3].
    mean_velocity, max_velocity : [m/s], signed like ``flow``.
    wall_shear_mean, wall_shear_max, wall_shear_floor : [Pa], magnitudes.
    reynolds : [-], on the hydraulic diameter.
    hydraulic_diameter : [m].
    residence_time : [s], ``L / |u_mean|`` (inf where there is no flow).
    entrance_length : [m].
    """

    flow: np.ndarray | float
    pressure_drop: np.ndarray | float
    resistance: np.ndarray | float
    mean_velocity: np.ndarray | float
    max_velocity: np.ndarray | float
    wall_shear_mean: np.ndarray | float
    wall_shear_max: np.ndarray | float
    wall_shear_floor: np.ndarray | float
    reynolds: np.ndarray | float
    hydraulic_diameter: np.ndarray | float
    residence_time: np.ndarray | float
    entrance_length: np.ndarray | float


def flow_state(
    width: ArrayLike,
    depth: ArrayLike,
    length: ArrayLike,
    flow: ArrayLike,
    viscosity: float,
    density: float,
    round: ArrayLike = False,
    method: str = "series",
) -> DuctFlow:
    """Everything about the flow in channels of given geometry and flow rate.

    Parameters
    ----------
    width, depth, length : array_like
        Channel geometry [m]; for round tubes width = depth = inner diameter.
    flow : array_like
        Flow rate [m^3/s] (signed).
    viscosity : float
        [Pa s].
    density : float
        [kg/m^3].
    round : array_like of bool
        True for round tubes.
    method : {"series", "approx"}
        Resistance method (shear and peak velocity always use the series).

    Returns
    -------
    DuctFlow

    Raises
    ------
    ArgumentError
        A size, the viscosity or the density that is not finite and positive, a flow that is
        not finite, or an unknown method.
    """
    require_positive(width=width, depth=depth, length=length, viscosity=viscosity, density=density)
    require_finite(flow=flow)
    if method not in METHODS:
        raise ArgumentError(f"unknown resistance method {method!r} (valid: {', '.join(METHODS)})")
    w, h, length, flow, rnd = np.broadcast_arrays(
        np.asarray(width, float),
        np.asarray(depth, float),
        np.asarray(length, float),
        np.asarray(flow, float),
        np.asarray(round, bool),
    )
    a, b = np.maximum(w, h), np.minimum(w, h)
    factors = _factors(b / a)
    r_rect = (
        (factors.k_r if method == "series" else _factors(b / a, method).k_r)
        * viscosity
        * length
        / (a * b**3)
    )
    r_tube = 128.0 * viscosity * length / (np.pi * a**4)
    res = np.where(rnd, r_tube, r_rect)
    area = np.where(rnd, np.pi / 4.0 * a * a, w * h)
    perimeter = np.where(rnd, np.pi * a, 2.0 * (w + h))
    d_h = 4.0 * area / perimeter
    dp = flow * res
    u = flow / area
    scale = viscosity * np.abs(flow) / (a * b**2)
    tube_shear = 32.0 * viscosity * np.abs(flow) / (np.pi * a**3)
    tau_max = np.where(rnd, tube_shear, factors.c_long * scale)
    tau_floor = np.where(rnd, tube_shear, np.where(w >= h, factors.c_long, factors.c_short) * scale)
    u_max = np.where(rnd, 2.0 * u, factors.c_umax * flow / (a * b))
    re = density * np.abs(u) * d_h / viscosity
    with np.errstate(divide="ignore", over="ignore"):  # a still channel: infinite time
        residence = np.where(flow != 0, length / np.abs(np.where(flow != 0, u, 1.0)), np.inf)
    return DuctFlow(
        flow=_out(flow),
        pressure_drop=_out(dp),
        resistance=_out(res),
        mean_velocity=_out(u),
        max_velocity=_out(u_max),
        wall_shear_mean=_out(np.abs(dp) * area / (length * perimeter)),
        wall_shear_max=_out(tau_max),
        wall_shear_floor=_out(tau_floor),
        reynolds=_out(re),
        hydraulic_diameter=_out(d_h),
        residence_time=_out(residence),
        entrance_length=_out(d_h * (0.6 / (1.0 + 0.035 * re) + 0.056 * re)),
    )
