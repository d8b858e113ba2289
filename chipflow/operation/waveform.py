"""Periodic supply waveforms as a mean and complex harmonics.

A waveform ``x(t) = mean + Re sum_k c_k exp(j k omega t)`` is held as its mean, its
fundamental frequency and the complex amplitudes ``c_k`` of its harmonics ``k = 1..K``.
A peristaltic pump gives one pulse per roller passage, at ``rpm / 60 x rollers`` (the
arithmetic of the mechanism); a measured waveform is sampled over one period and split into
harmonics by the discrete Fourier transform.

Examples
--------
>>> w = Waveform.sinusoid(mean=2.0, amplitude=0.5, frequency=1.0)
>>> bool(np.allclose(w.sample(4), [2.5, 2.0, 1.5, 2.0]))
True
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from chipflow.errors import SpecError

__all__ = ["Waveform", "peristaltic_frequency", "MAX_HARMONICS"]

#: Harmonics kept from a measured waveform (enough for the pulse shape of a roller pump).
MAX_HARMONICS = 16


def peristaltic_frequency(rpm: float, rollers: int) -> float:
    """Pulse frequency of a roller pump [Hz]: one pulse per roller passage.

    >>> peristaltic_frequency(10, 3)
    0.5
    """
    return rpm / 60.0 * rollers


@dataclass(frozen=True)
class Waveform:
    """A periodic signal: mean, fundamental frequency and complex harmonic amplitudes.

    Attributes
    ----------
    mean : float
        Time average (flow [m^3/s] or pressure [Pa]).
    frequency : float
        Fundamental frequency [Hz].
    harmonics : tuple of complex
        ``c_1 .. c_K`` in the unit of ``mean``.
    """

    mean: float
    frequency: float
    harmonics: tuple[complex, ...]

    def __post_init__(self) -> None:
        if not (np.isfinite(self.frequency) and self.frequency > 0):
            raise SpecError(
                f"a pulsatile supply needs a frequency above 0 Hz, got {self.frequency}"
            )

    @classmethod
    def sinusoid(cls, mean: float, amplitude: float, frequency: float) -> Waveform:
        """``mean + amplitude cos(2 pi f t)``."""
        return cls(float(mean), float(frequency), (complex(amplitude),))

    @classmethod
    def from_samples(
        cls, time: np.ndarray, value: np.ndarray, harmonics: int = MAX_HARMONICS
    ) -> Waveform:
        """Harmonics of one period sampled at ``time`` [s] (any spacing; the period is
        ``time[-1] - time[0]`` and the last sample closes the period).

        The samples are interpolated linearly onto a uniform grid of the period, then
        transformed.
        """
        t = np.asarray(time, dtype=float)
        x = np.asarray(value, dtype=float)
        period = float(t[-1] - t[0])
        n = max(4 * harmonics, 256)
        grid = t[0] + period * np.arange(n) / n
        samples = np.interp(grid, t, x)
        spectrum = np.fft.rfft(samples) / n
        return cls(float(spectrum[0].real), 1.0 / period, tuple(2.0 * spectrum[1 : harmonics + 1]))

    @property
    def omega(self) -> float:
        """Fundamental angular frequency [rad/s]."""
        return 2.0 * np.pi * self.frequency

    @property
    def pulsation(self) -> float:
        """``|c_1| / |mean|`` [1]: the amplitude of the fundamental relative to the mean."""
        first = abs(self.harmonics[0]) if self.harmonics else 0.0
        return first / abs(self.mean) if self.mean != 0 else float("inf")

    def sample(self, n: int) -> np.ndarray:
        """``n`` values evenly spaced over one period, from t = 0."""
        return self.mean + harmonic_series(np.asarray(self.harmonics)[None, :], n)[0]


def harmonic_series(amplitudes: np.ndarray, n: int) -> np.ndarray:
    """``Re sum_k c_k exp(j k omega t)`` at ``n`` instants over one period, row by row.

    ``amplitudes`` has shape (rows, K); the result has shape (rows, n).
    """
    k = np.arange(1, amplitudes.shape[1] + 1)
    phase = np.exp(2j * np.pi * np.outer(k, np.arange(n)) / n)
    return (amplitudes @ phase).real
