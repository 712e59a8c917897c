"""Noise power spectral densities: Welch estimates from the data, and interpolation.

References
----------
Welch, P. D. 1967, IEEE Trans. Audio Electroacoust. 15, 70: averaged, windowed,
overlapping periodograms.
Allen, B., Anderson, W. G., Brady, P. R., Brown, D. A. & Creighton, J. D. E. 2012,
PRD 85, 122006, appendix B: the median average of periodograms and its bias factor.
"""

from __future__ import annotations

import numpy as np
import scipy.signal
from numpy.typing import ArrayLike, NDArray

from .data import NoiseSpectrum, StrainSegment
from .errors import InputError

__all__ = ["MIN_AVERAGES", "MIN_SUBSEGMENT_DURATION", "interpolate_psd", "welch_psd"]

#: Fewest sub-segments the median average is taken over.
MIN_AVERAGES = 8
#: Shortest sub-segment, s, that ``welch_psd`` adapts down to (1 Hz resolution).
MIN_SUBSEGMENT_DURATION = 1.0


def _count(n_samples: int, nperseg: int, noverlap: int) -> int:
    """Number of sub-segments Welch's method fits into ``n_samples`` (as scipy counts them)."""
    if n_samples < nperseg:
        return 0
    return (n_samples - noverlap) // (nperseg - noverlap)


def welch_psd(
    segment: StrainSegment, *, segment_duration: float = 4.0, overlap: float = 0.5
) -> NoiseSpectrum:
    """One-sided noise PSD of a strain segment by Welch's method with the median average.

    The segment is cut into Hann-windowed sub-segments of ``segment_duration`` that
    overlap by ``overlap``; the periodograms of the sub-segments (Welch 1967) are
    averaged with the median rather than the mean, so that a loud transient in a
    few sub-segments barely moves the estimate. The median of exponentially
    distributed periodogram values is biased low; ``scipy.signal.welch`` divides by
    the bias factor of Allen et al. (2012, appendix B) itself (checked in scipy
    1.17's ``csd``: ``Pxy /= _median_bias(n)``), so no correction is added here.

    When the segment is too short for ``MIN_AVERAGES`` (8) sub-segments, the
    sub-segment duration is halved until it fits, but not below
    ``MIN_SUBSEGMENT_DURATION`` (1 s).

    Parameters
    ----------
    segment
        The strain segment; the spectrum is estimated from it, so a signal in it
        biases the estimate slightly (noted in the result).
    segment_duration
        Requested sub-segment duration, s. Frequency resolution ``1/segment_duration``.
    overlap
        Fraction of a sub-segment shared with the next, in [0, 1).

    Returns
    -------
    NoiseSpectrum
        Frequencies ``0 .. sample_rate/2`` in steps of ``1/duration`` (Hz) and the
        one-sided PSD (1/Hz), with ``estimated=True`` and a note saying how.

    Raises
    ------
    InputError
        ``field="psd"`` when the options are invalid or the segment is too short.
    """
    if not (np.isfinite(segment_duration) and segment_duration > 0):
        msg = f"sub-segment duration {segment_duration} s is not a positive number"
        raise InputError(msg, source=segment.source, field="psd")
    if not 0.0 <= overlap < 1.0:
        msg = f"overlap {overlap} is outside [0, 1) of a sub-segment"
        raise InputError(msg, source=segment.source, field="psd")
    fs, n = segment.sample_rate, segment.strain.size
    duration = float(segment_duration)

    def plan(length: float) -> tuple[int, int]:
        nperseg = max(round(length * fs), 2)
        return nperseg, min(round(overlap * nperseg), nperseg - 1)

    while _count(n, *plan(duration)) < MIN_AVERAGES and duration / 2 >= MIN_SUBSEGMENT_DURATION:
        duration /= 2
    nperseg, noverlap = plan(duration)
    if _count(n, nperseg, noverlap) < MIN_AVERAGES:
        shortest = MIN_SUBSEGMENT_DURATION * (1 + (MIN_AVERAGES - 1) * (1 - overlap))
        msg = (
            f"the segment of {segment.duration:.3g} s is too short to estimate its noise "
            f"spectrum: Welch's method needs at least {MIN_AVERAGES} sub-segments of at least "
            f"{MIN_SUBSEGMENT_DURATION:g} s ({shortest:.3g} s of data at {overlap:.0%} overlap); "
            "supply a longer segment or a noise spectrum file"
        )
        raise InputError(msg, source=segment.source, field="psd")
    freqs, psd = scipy.signal.welch(
        segment.strain, fs=fs, window="hann", nperseg=nperseg, noverlap=noverlap,
        detrend="constant", return_onesided=True, scaling="density", average="median",
    )  # fmt: skip
    note = (
        f"noise spectrum estimated from the analysed segment with Welch's median method, "
        f"{nperseg / fs:g} s sub-segments, {overlap:.0%} overlap; "
        "a signal in the data biases it slightly"
    )
    return NoiseSpectrum(
        frequencies=np.asarray(freqs, dtype=np.float64),
        psd=np.asarray(psd, dtype=np.float64),
        source=f"Welch estimate from {segment.source}",
        estimated=True,
        notes=(note,),
    )


def interpolate_psd(spectrum: NoiseSpectrum, frequencies: ArrayLike) -> NDArray[np.float64]:
    """The spectrum on a new frequency grid, by linear interpolation in log f - log S.

    ``log S(f) = log S_j + (log S_{j+1} - log S_j) (log f - log f_j) / (log f_{j+1} - log f_j)``
    between neighbouring tabulated points (piecewise power law), suited to PSDs that
    span decades (common practice). Between 0 Hz and the first positive tabulated
    frequency, where the logarithm is undefined, the interpolation is linear in f.

    Parameters
    ----------
    spectrum
        Tabulated one-sided PSD, positive at every positive frequency.
    frequencies
        The new grid, Hz, any shape.

    Returns
    -------
    NDArray[np.float64]
        PSD on the grid, 1/Hz, same shape. Frequencies outside the tabulated range
        get ``+inf``, so that those bins carry no weight (``1/S = 0``) in a noise-
        weighted inner product; NaN frequencies give NaN.

    Raises
    ------
    InputError
        ``field="psd"`` when the spectrum has a non-positive or non-finite value at
        a positive frequency.
    """
    f = np.asarray(frequencies, dtype=np.float64)
    table_f, table_s = spectrum.frequencies, spectrum.psd
    positive = table_f > 0
    bad = positive & ~(np.isfinite(table_s) & (table_s > 0))
    if bad.any():
        i = int(np.argmax(bad))
        msg = f"PSD value {table_s[i]:g} at {table_f[i]:g} Hz is not a positive finite number"
        raise InputError(msg, source=spectrum.source, field="psd")
    out = np.full(f.shape, np.inf)
    out[np.isnan(f)] = np.nan
    inside = (f >= table_f[0]) & (f <= table_f[-1])
    if not positive.any():
        out[inside] = table_s[0]
        return out
    logs = inside & (f >= table_f[positive][0])
    log_f, log_s = np.log(table_f[positive]), np.log(table_s[positive])
    out[logs] = np.exp(np.interp(np.log(f[logs]), log_f, log_s))
    linear = inside & ~logs
    out[linear] = np.interp(f[linear], table_f, table_s)
    return out
