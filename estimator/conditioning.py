"""Data conditioning: taper, Fourier transform, noise weighting and whitening.

Conventions (common practice in matched filtering, e.g. Allen, Anderson, Brady,
Brown & Creighton 2012, PRD 85, 122006, Sec. II):

* ``x~(f_k) = dt * sum_j x_j exp(-2 pi i f_k t_j)`` approximates the continuous
  transform (the rFFT times the sample spacing), with ``t_j`` measured from the
  segment start (the *epoch*);
* the one-sided PSD ``S`` obeys ``<x~(f) x~*(f')> = (T/2) S(f) delta_ff'`` for
  stationary noise, so the noise-weighted inner product is
  ``<a|b> = 4 df Re sum_k a_k b_k* / S_k`` over the analysis band.

Window: a Tukey (tapered cosine) window with a fixed taper length at each end
(Harris 1978, Proc. IEEE 66, 51). A signal inside the flat part is untouched by
the window, so the likelihood uses the PSD as given; the window removes the
fraction ``1 - mean(w^2)`` of the *noise* power of the whole segment, and every
comparison of the data's own spectrum with the PSD (whitening, spectra in the
report) divides by that factor.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.fft
import scipy.signal
from numpy.typing import NDArray

from .data import NoiseSpectrum, StrainSegment
from .spectrum import interpolate_psd

__all__ = [
    "DetectorData",
    "condition",
    "tukey_window",
    "whiten",
]

Array = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]


@dataclass(frozen=True)
class DetectorData:
    """Frequency-domain data of one detector, restricted to the analysis band.

    Attributes
    ----------
    detector
        Label of the detector.
    frequencies
        Shape ``(nb,)``, the rFFT frequencies inside ``[f_low, f_high]``, Hz.
    strain
        Shape ``(nb,)``, windowed data ``d~(f)``, 1/Hz (continuous normalisation).
    psd
        Shape ``(nb,)``, one-sided PSD on ``frequencies``, 1/Hz.
    df
        Frequency spacing ``1/T``, Hz.
    epoch
        GPS time of the transform's time origin (the segment start), s.
    sample_rate, n_samples
        Of the time series the transform came from.
    window_factor
        ``mean(w^2)`` of the taper window (noise power kept by the window).
    f_low, f_high
        The analysis band, Hz.
    """

    detector: str
    frequencies: Array
    strain: ComplexArray
    psd: Array
    df: float
    epoch: float
    sample_rate: float
    n_samples: int
    window_factor: float
    f_low: float
    f_high: float
    taper_duration: float

    @property
    def duration(self) -> float:
        """Segment length ``T = n / sample_rate``, s."""
        return self.n_samples / self.sample_rate

    @property
    def first_index(self) -> int:
        """Index of ``frequencies[0]`` in the full rFFT grid."""
        return int(np.rint(self.frequencies[0] / self.df))

    def inner(self, a: ComplexArray, b: ComplexArray) -> NDArray[np.complex128]:
        """Complex noise-weighted overlap ``4 df sum a b* / S`` over the last axis.

        The real part is the inner product ``<a|b>``; the modulus is the overlap
        maximised over a constant phase.
        """
        return np.asarray(4.0 * self.df * np.sum(a * np.conj(b) / self.psd, axis=-1), dtype=complex)


def tukey_window(n_samples: int, sample_rate: float, taper_duration: float) -> Array:
    """Tukey window with cosine tapers of ``taper_duration`` seconds at each end.

    Harris 1978, Proc. IEEE 66, 51, Eq. (38): ``alpha = 2 * taper / T``.
    """
    duration = n_samples / sample_rate
    alpha = min(1.0, 2.0 * taper_duration / duration)
    return np.asarray(scipy.signal.windows.tukey(n_samples, alpha), dtype=float)


def condition(
    segment: StrainSegment,
    spectrum: NoiseSpectrum,
    *,
    f_low: float,
    f_high: float,
    taper_duration: float = 0.5,
) -> DetectorData:
    """Taper, Fourier transform and noise-weight one strain segment.

    Parameters
    ----------
    segment
        The strain time series.
    spectrum
        One-sided PSD; interpolated (log-log) onto the rFFT grid.
    f_low, f_high
        Analysis band, Hz.
    taper_duration
        Length of each cosine taper of the Tukey window, s.
    """
    n = segment.strain.size
    dt = 1.0 / segment.sample_rate
    window = tukey_window(n, segment.sample_rate, taper_duration)
    full = scipy.fft.rfft(segment.strain * window) * dt
    df = segment.sample_rate / n
    k_lo = int(np.ceil(f_low / df))
    k_hi = int(np.floor(f_high / df))
    k_lo = max(k_lo, 1)
    freqs = np.arange(k_lo, k_hi + 1) * df
    psd = interpolate_psd(spectrum, freqs)
    return DetectorData(
        detector=segment.detector,
        frequencies=np.asarray(freqs, dtype=float),
        strain=np.ascontiguousarray(full[k_lo : k_hi + 1]),
        psd=np.asarray(psd, dtype=float),
        df=df,
        epoch=segment.start_time,
        sample_rate=segment.sample_rate,
        n_samples=n,
        window_factor=float(np.mean(window**2)),
        f_low=f_low,
        f_high=f_high,
        taper_duration=taper_duration,
    )


def whiten(data: DetectorData, frequency_series: ComplexArray) -> Array:
    """Whitened, band-passed time series of a frequency series on ``data``'s band.

    Divides by the amplitude spectral density (times the window's noise power
    factor ``mean(w^2)``) and transforms back, so that stationary Gaussian
    noise described by the PSD comes out with unit variance per sample
    (the whitening filter of e.g. Allen et al. 2012, Sec. II, normalised to
    the band). Apply it to the data and to a model alike: it is one filter.

    Returns
    -------
    Array of shape ``(n_samples,)``, dimensionless, time origin at ``epoch``.
    """
    n = data.n_samples
    dt = 1.0 / data.sample_rate
    band_fraction = data.frequencies.size / (n // 2 + 1)
    scale = data.psd * data.window_factor
    full = np.zeros(n // 2 + 1, dtype=complex)
    # For unit-variance white noise sampled at dt the one-sided PSD is 2 dt.
    full[data.first_index : data.first_index + data.frequencies.size] = frequency_series / np.sqrt(
        scale / (2.0 * dt)
    )
    series = scipy.fft.irfft(full, n) / dt
    return np.asarray(series / np.sqrt(band_fraction), dtype=float)
