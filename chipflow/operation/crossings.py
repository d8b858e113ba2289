"""Exact statistics of signals over time: crossing times by root finding, never by sampling.

Two kinds of signal describe every channel's flow (and floor shear) in time-varying operation:

- a **harmonic sum** ``f(theta) = a_0 + Re sum_{k=1..K} c_k exp(j k theta)``, ``theta = omega
  t``, for periodic supplies and the rocking platform. Its crossings of a level ``y`` are the
  roots on the unit circle of the polynomial ``2 z^K (f - y)`` of degree ``2K`` in
  ``z = exp(j theta)``, found as the eigenvalues of its companion matrix (batched over the
  channels that share a degree) and polished by Newton steps on ``f``; its extremes are
  ``f`` at the roots of ``f'``, and its integral between crossings is exact (the
  antiderivative of a harmonic sum is one);
- an **exponential sum** ``f(t) = b t + sum_i c_i exp(lambda_i t)`` (one ``lambda_i = 0`` for a
  constant), for draining reservoirs (a linear ODE). Between two roots of ``f'`` the function
  is monotone (Rolle), and ``f'`` is an exponential sum with one term fewer once divided by
  one of its exponentials, so the roots follow by recursion over the terms and bisection on
  each monotone interval to the last bit of the time.

From the crossings: the fraction of the time ``|f|`` spends inside a window, the time-averaged
magnitude ``<|f|>``, the signed mean and the oscillatory shear index

    OSI = 1/2 (1 - |int f dt| / int |f| dt)

(Ku, Giddens, Zarins & Glagov, Arteriosclerosis 5 (1985) 293-302; in the form of He & Ku,
J Biomech Eng 118 (1996) 74-82): 0 for a flow that never reverses, 1/2 for a pure
oscillation with zero mean; when the flow runs mostly forwards it is the backward share of
the shear's time integral, ``B / (F + B)``.

Examples
--------
>>> s = harmonic_statistics(np.array([0.0, 1.0]), np.array([[1.0 + 0j], [0j]]), (0.5, 2.0))
>>> [round(float(v), 12) for v in s["osi"]], [round(float(v), 12) for v in s["in_window"]]
([0.5, 0.0], [0.666666666667, 1.0])
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "trig_roots",
    "harmonic_values",
    "harmonic_statistics",
    "exponential_values",
    "exponential_roots",
    "exponential_statistics",
]

#: Eigenvalues this close to the unit circle are crossings [1].
_ON_CIRCLE = 1e-6
_TWO_PI = 2.0 * np.pi


def harmonic_values(a0: np.ndarray, c: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """``a_0 + Re sum c_k exp(j k theta)`` row by row; ``theta`` has shape (rows, m)."""
    k = np.arange(1, c.shape[1] + 1)
    phase = np.exp(1j * theta[..., None] * k)  # (rows, m, K)
    return a0[:, None] + np.einsum("rmk,rk->rm", phase, c).real


def _derivative(c: np.ndarray) -> np.ndarray:
    return c * 1j * np.arange(1, c.shape[1] + 1)


def trig_roots(a0: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Angles ``theta`` in [0, 2 pi) where ``a_0 + Re sum c_k exp(j k theta)`` vanishes.

    Parameters
    ----------
    a0 : numpy.ndarray, shape (rows,)
    c : numpy.ndarray of complex, shape (rows, K)

    Returns
    -------
    numpy.ndarray, shape (rows, 2K)
        The roots of each row, sorted, padded with NaN.
    """
    a0 = np.asarray(a0, dtype=float)
    c = np.asarray(c, dtype=complex).reshape(a0.size, -1)
    rows, top = c.shape
    out = np.full((rows, 2 * top), np.nan)
    if top == 0:
        return out
    size = np.abs(a0) + np.abs(c).sum(axis=1)
    significant = np.abs(c) > 1e-13 * size[:, None]
    degree = np.where(significant.any(axis=1), top - np.argmax(significant[:, ::-1], axis=1), 0)
    for d in np.unique(degree):  # a loop over the few distinct degrees
        if d == 0:
            continue
        r = np.flatnonzero(degree == d)
        cd = c[r, :d]
        # coefficients of 2 z^d (f) from z^(2d) down to z^0
        poly = np.concatenate([cd[:, ::-1], 2.0 * a0[r, None], np.conj(cd)], axis=1)
        m = 2 * d
        companion = np.zeros((r.size, m, m), dtype=complex)
        companion[:, 0, :] = -poly[:, 1:] / poly[:, :1]
        companion[:, np.arange(1, m), np.arange(m - 1)] = 1.0
        z = np.linalg.eigvals(companion)
        on = np.abs(np.abs(z) - 1.0) < _ON_CIRCLE
        theta = np.where(on, np.mod(np.angle(z), _TWO_PI), np.nan)
        theta = _polish(a0[r], cd, theta)
        out[r, :m] = np.sort(theta, axis=1)
    return out


def _polish(a0: np.ndarray, c: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """A few guarded Newton steps on each root (kept only where they lower ``|f|``)."""
    dc = _derivative(c)
    zero = np.zeros_like(a0)
    safe = np.nan_to_num(theta)
    for _ in range(3):
        f = harmonic_values(a0, c, safe)
        slope = harmonic_values(zero, dc, safe)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(np.abs(slope) > 0, f / slope, 0.0)
        step = np.clip(step, -1e-3, 1e-3)
        trial = safe - step
        better = np.abs(harmonic_values(a0, c, trial)) < np.abs(f)
        safe = np.where(better, trial, safe)
    return np.where(np.isnan(theta), np.nan, np.mod(safe, _TWO_PI))


def _arcs(roots: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Arcs of the circle between consecutive roots of each row: starts, ends, valid mask
    (rows without roots get the whole circle from 0)."""
    theta = np.sort(roots, axis=1)
    count = np.sum(~np.isnan(theta), axis=1)
    theta = np.where(np.isnan(theta), np.inf, theta)
    none = count == 0
    theta[none, 0] = 0.0
    count = np.where(none, 1, count)
    starts = theta
    ends = np.concatenate([theta[:, 1:], np.full((theta.shape[0], 1), np.inf)], axis=1)
    last = np.arange(theta.shape[1])[None, :] == (count - 1)[:, None]
    ends = np.where(last, theta[:, :1] + _TWO_PI, ends)
    valid = np.arange(theta.shape[1])[None, :] < count[:, None]
    return np.where(valid, starts, 0.0), np.where(valid, ends, 0.0), valid


def _antiderivative(a0: np.ndarray, c: np.ndarray, theta: np.ndarray) -> np.ndarray:
    k = np.arange(1, c.shape[1] + 1)
    return harmonic_values(np.zeros_like(a0), c / (1j * k), theta) + a0[:, None] * theta


def _summary(mean, low, high, magnitude) -> dict[str, np.ndarray]:
    """The statistics every signal shares, with the OSI from its mean and mean magnitude."""
    with np.errstate(divide="ignore", invalid="ignore"):
        osi = np.where(magnitude > 0, 0.5 * (1.0 - np.abs(mean) / magnitude), 0.0)
    return {
        "mean": mean,
        "min": low,
        "max": high,
        "peak": np.maximum(np.abs(low), np.abs(high)),
        "mean_magnitude": magnitude,
        "osi": np.clip(osi, 0.0, 0.5),
    }


def harmonic_statistics(
    a0: np.ndarray, c: np.ndarray, window: tuple[float, float] | None = None
) -> dict[str, np.ndarray]:
    """Exact statistics over one period of harmonic sums, row by row.

    Parameters
    ----------
    a0 : numpy.ndarray, shape (rows,)
        Means.
    c : numpy.ndarray of complex, shape (rows, K)
        Harmonic amplitudes.
    window : (float, float), optional
        ``(low, high)`` bounds of ``|f|`` (``low`` 0 or ``high`` inf: one-sided).

    Returns
    -------
    dict
        ``mean`` (signed), ``min``, ``max``, ``peak`` (largest ``|f|``), ``mean_magnitude``
        (``<|f|>``), ``osi`` and, with a window, ``in_window`` (fraction of the period).
    """
    a0 = np.asarray(a0, dtype=float)
    c = np.asarray(c, dtype=complex).reshape(a0.size, -1)
    zero = np.zeros_like(a0)
    critical = trig_roots(zero, _derivative(c))
    values = harmonic_values(a0, c, np.nan_to_num(critical))
    values = np.where(np.isnan(critical), np.nan, values)
    at_zero = harmonic_values(a0, c, np.zeros((a0.size, 1)))[:, 0]
    high = np.fmax(np.nanmax(np.column_stack([values, at_zero]), axis=1), at_zero)
    low = np.fmin(np.nanmin(np.column_stack([values, at_zero]), axis=1), at_zero)
    starts, ends, valid = _arcs(trig_roots(a0, c))
    span = _antiderivative(a0, c, ends) - _antiderivative(a0, c, starts)
    magnitude = np.where(valid, np.abs(span), 0.0).sum(axis=1) / _TWO_PI
    out = _summary(a0, low, high, magnitude)
    if window is not None:
        levels = [v for v in window if 0.0 < v < np.inf]
        roots = [trig_roots(a0 - s * v, c) for v in levels for s in (1.0, -1.0)]
        merged = np.concatenate(roots, axis=1) if roots else np.full((a0.size, 0), np.nan)
        merged = np.concatenate([merged, np.full((a0.size, 1), np.nan)], axis=1)
        starts, ends, valid = _arcs(merged)
        middle = np.abs(harmonic_values(a0, c, 0.5 * (starts + ends)))
        inside = valid & (middle >= window[0]) & (middle <= window[1])
        out["in_window"] = np.where(inside, ends - starts, 0.0).sum(axis=1) / _TWO_PI
    return out


# -- exponential sums (draining reservoirs) -----------------------------------------------------
def exponential_values(
    coeff: np.ndarray, rates: np.ndarray, t: np.ndarray, slope: np.ndarray | None = None
) -> np.ndarray:
    """``b t + sum_i c_i exp(lambda_i t)`` at times ``t`` (rows, m); ``coeff`` (rows, terms),
    ``rates`` (terms,), ``slope`` ``b`` (rows,) or None."""
    out = np.einsum("ri,rmi->rm", coeff, np.exp(np.multiply.outer(t, rates)))
    return out if slope is None else out + slope[:, None] * t


def _bisect(coeff, rates, slope, lo, hi, iterations: int = 80) -> np.ndarray:
    """Roots on intervals [lo, hi] where ``f`` changes sign (NaN elsewhere)."""
    f_lo = exponential_values(coeff, rates, lo, slope)
    f_hi = exponential_values(coeff, rates, hi, slope)
    change = np.isfinite(lo) & np.isfinite(hi) & (np.sign(f_lo) * np.sign(f_hi) < 0)
    a, b = np.where(change, lo, 0.0), np.where(change, hi, 0.0)
    for _ in range(iterations):  # halves every interval at once
        mid = 0.5 * (a + b)
        f_mid = exponential_values(coeff, rates, mid, slope)
        left = np.sign(f_mid) == np.sign(exponential_values(coeff, rates, a, slope))
        a, b = np.where(left, mid, a), np.where(left, b, mid)
    return np.where(change, 0.5 * (a + b), np.nan)


def exponential_roots(
    coeff: np.ndarray, rates: np.ndarray, end: float, slope: np.ndarray | None = None
) -> np.ndarray:
    """Roots in (0, end) of ``b t + sum_i c_i exp(lambda_i t)``, row by row, padded with NaN.

    Parameters
    ----------
    coeff : numpy.ndarray, shape (rows, terms)
    rates : numpy.ndarray, shape (terms,)
        Distinct exponents [1/s] (0 for a constant).
    end : float
        End of the interval [s].
    slope : numpy.ndarray, optional
        Linear term ``b`` per row.
    """
    coeff = np.atleast_2d(np.asarray(coeff, dtype=float))
    rates = np.asarray(rates, dtype=float)
    rows = coeff.shape[0]
    if slope is None and rates.size <= 1:
        return np.full((rows, 0), np.nan)  # one exponential or a constant: no isolated root
    # f' = b + sum c_i lambda_i exp(lambda_i t); dividing by exp(lambda_0 t) keeps its roots
    keep = rates != 0.0
    d_coeff, d_rates = coeff[:, keep] * rates[keep], rates[keep]
    if slope is not None:
        d_coeff = np.column_stack([slope, d_coeff])
        d_rates = np.concatenate([[0.0], d_rates])
    if d_rates.size:
        shift = d_rates[0]
        critical = exponential_roots(d_coeff, d_rates - shift, end)
    else:
        critical = np.full((rows, 0), np.nan)
    edges = np.column_stack([np.zeros(rows), np.sort(critical, axis=1), np.full(rows, end)])
    edges = np.where(np.isnan(edges), np.inf, edges)
    edges = np.sort(edges, axis=1)
    edges = np.where(np.isinf(edges), end, edges)
    return _bisect(coeff, rates, slope, edges[:, :-1], edges[:, 1:])


def exponential_statistics(
    coeff: np.ndarray,
    rates: np.ndarray,
    end: float,
    window: tuple[float, float] | None = None,
    slope: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Exact statistics of exponential sums over ``[0, end]`` (see
    :func:`harmonic_statistics` for the keys; ``osi`` over the interval)."""
    coeff = np.atleast_2d(np.asarray(coeff, dtype=float))
    rates = np.asarray(rates, dtype=float)
    rows = coeff.shape[0]
    zeros = np.zeros(rows) if slope is None else slope

    def primitive(t):  # int_0^t f
        with np.errstate(divide="ignore", invalid="ignore"):
            part = np.where(rates == 0.0, t[..., None], np.expm1(np.multiply.outer(t, rates))
                            / np.where(rates == 0.0, 1.0, rates))  # fmt: skip
        return np.einsum("ri,rmi->rm", coeff, part) + 0.5 * zeros[:, None] * t**2

    keep = rates != 0.0
    d_coeff = np.column_stack([zeros, coeff[:, keep] * rates[keep]])
    d_rates = np.concatenate([[0.0], rates[keep]])
    critical = exponential_roots(d_coeff, d_rates, end)
    points = np.column_stack([np.zeros(rows), np.full(rows, end), np.nan_to_num(critical)])
    values = exponential_values(coeff, rates, points, slope)
    values = np.where(np.column_stack([np.ones((rows, 2), bool), ~np.isnan(critical)]), values,
                      np.nan)  # fmt: skip
    low, high = np.nanmin(values, axis=1), np.nanmax(values, axis=1)

    def pieces(roots):
        edges = np.column_stack([np.zeros(rows), roots, np.full(rows, end)])
        edges = np.sort(np.where(np.isnan(edges), np.inf, edges), axis=1)
        edges = np.where(np.isinf(edges), end, edges)
        return edges[:, :-1], edges[:, 1:]

    starts, ends = pieces(exponential_roots(coeff, rates, end, slope))
    spans = primitive(ends) - primitive(starts)
    magnitude = np.abs(spans).sum(axis=1) / end
    mean = (primitive(np.full((rows, 1), end))[:, 0]) / end
    out = _summary(mean, low, high, magnitude)
    if window is not None:
        levels = [v for v in window if 0.0 < v < np.inf]
        roots = [
            exponential_roots(coeff - np.where(rates == 0.0, s * v, 0.0), rates, end, slope)
            if np.any(rates == 0.0)
            else exponential_roots(
                np.column_stack([coeff, np.full(rows, -s * v)]),
                np.concatenate([rates, [0.0]]),
                end,
                slope,
            )  # fmt: skip
            for v in levels
            for s in (1.0, -1.0)
        ]
        merged = np.concatenate(roots, axis=1) if roots else np.full((rows, 0), np.nan)
        starts, ends = pieces(merged)
        middle = np.abs(exponential_values(coeff, rates, 0.5 * (starts + ends), slope))
        inside = (middle >= window[0]) & (middle <= window[1]) & (ends > starts)
        out["in_window"] = np.where(inside, ends - starts, 0.0).sum(axis=1) / end
    return out
