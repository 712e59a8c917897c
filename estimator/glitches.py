"""Sine-Gaussian bursts: a stand-in for short noise transients (glitches) in drills.

A sine-Gaussian is the usual test waveform for short transients (common practice
in burst searches and in tests of glitch mitigation), from memory of Chatterji,
Blackburn, Martin & Katsavounidis 2004, Class. Quantum Grav. 21, S1809, Sec. 2:

``h(t) = A exp(-(t - t0)^2 / tau^2) sin(2 pi f0 (t - t0) + phase)``,
``tau = Q / (sqrt(2) pi f0)``,

so that the envelope in frequency has a standard deviation of ``f0 / (sqrt(2) Q)``
around ``f0`` and ``Q`` counts the cycles under the envelope (common practice).
The signal-to-noise ratio is the usual matched-filter one,
``rho^2 = 4 df sum_k |b~(f_k)|^2 / S(f_k)`` over the analysis band (Cutler &
Flanagan 1994, PRD 49, 2658, Eq. 2.4; common practice).
"""

from __future__ import annotations

import numpy as np
import scipy.fft
from numpy.typing import NDArray

from .data import NoiseSpectrum, StrainSegment
from .errors import InputError
from .spectrum import interpolate_psd

__all__ = ["burst_with_snr", "optimal_snr", "sine_gaussian"]

Array = NDArray[np.float64]


def sine_gaussian(
    times: Array,
    *,
    centre: float,
    frequency: float,
    quality: float,
    amplitude: float,
    phase: float = 0.0,
) -> Array:
    """Sine-Gaussian burst evaluated at ``times``.

    ``h(t) = A exp(-(t - t0)^2 / tau^2) sin(2 pi f0 (t - t0) + phase)`` with
    ``tau = Q / (sqrt(2) pi f0)`` (common practice; see the module docstring).

    Parameters
    ----------
    times
        Shape ``(n,)``, s (any origin, the same as ``centre``'s).
    centre
        Peak time ``t0`` of the envelope, s.
    frequency
        Central frequency ``f0``, Hz (> 0).
    quality
        Quality factor ``Q`` (> 0), dimensionless.
    amplitude
        Peak amplitude ``A``, strain.
    phase
        Phase at the centre, rad.

    Returns
    -------
    Array of shape ``(n,)``, strain.
    """
    if not (np.isfinite(frequency) and frequency > 0 and np.isfinite(quality) and quality > 0):
        msg = (
            f"sine-Gaussian frequency {frequency!r} Hz and quality {quality!r} must both be "
            "finite and positive"
        )
        raise InputError(msg, field="glitch")
    tau = quality / (np.sqrt(2.0) * np.pi * frequency)
    dt = np.asarray(times, dtype=float) - centre
    return np.asarray(
        amplitude * np.exp(-((dt / tau) ** 2)) * np.sin(2.0 * np.pi * frequency * dt + phase),
        dtype=float,
    )


def optimal_snr(
    series: Array,
    *,
    sample_rate: float,
    spectrum: NoiseSpectrum,
    f_low: float,
    f_high: float,
) -> float:
    """Optimal matched-filter SNR of a time series in a noise spectrum and band.

    ``rho^2 = 4 df sum_k |b~(f_k)|^2 / S(f_k)`` over the rFFT bins inside
    ``[f_low, f_high]``, with ``b~ = dt * rfft(b)`` (Cutler & Flanagan 1994,
    PRD 49, 2658, Eq. 2.4; the transform convention of
    :mod:`estimator.conditioning`). No window is applied: the series should
    vanish at both ends.
    """
    n = series.size
    dt = 1.0 / sample_rate
    df = sample_rate / n
    f = np.arange(n // 2 + 1) * df
    band = (f >= max(f_low, df)) & (f <= f_high)
    b = scipy.fft.rfft(series)[band] * dt
    psd = interpolate_psd(spectrum, f[band])
    return float(np.sqrt(4.0 * df * np.sum(np.abs(b) ** 2 / psd)))


def burst_with_snr(
    segment: StrainSegment,
    spectrum: NoiseSpectrum,
    *,
    centre: float,
    frequency: float,
    quality: float,
    snr: float,
    f_low: float,
    f_high: float,
    phase: float = 0.0,
) -> Array:
    """A sine-Gaussian on ``segment``'s time grid, scaled to a requested optimal SNR.

    Parameters
    ----------
    segment
        Gives the sample times (GPS) and the sample rate; its strain is not used.
    spectrum
        One-sided noise PSD the SNR refers to.
    centre
        GPS time of the burst's peak, s.
    frequency, quality, phase
        As in :func:`sine_gaussian`.
    snr
        Requested optimal SNR in ``[f_low, f_high]`` (see :func:`optimal_snr`).
    f_low, f_high
        Band of the SNR, Hz.

    Returns
    -------
    Array of shape ``segment.strain.shape``: add it to the strain.
    """
    # Times from the segment start, so that GPS-sized numbers do not cost phase precision.
    times = np.arange(segment.strain.size) / segment.sample_rate
    unit = sine_gaussian(
        times, centre=centre - segment.start_time, frequency=frequency, quality=quality,
        amplitude=1.0, phase=phase,
    )  # fmt: skip
    rho = optimal_snr(
        unit, sample_rate=segment.sample_rate, spectrum=spectrum, f_low=f_low, f_high=f_high
    )
    if not rho > 0:
        msg = (
            f"a sine-Gaussian at {frequency:g} Hz centred at GPS {centre:.3f} has no power in "
            f"the band {f_low:g}-{f_high:g} Hz of segment {segment.start_time:.3f}-"
            f"{segment.end_time:.3f}; put it inside the segment and the band"
        )
        raise InputError(msg, field="glitch")
    return np.asarray(unit * (snr / rho), dtype=float)
