"""Plain containers for what goes into an analysis: a strain segment and a noise spectrum."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

__all__ = ["NoiseSpectrum", "StrainSegment"]


@dataclass(frozen=True)
class StrainSegment:
    """A uniformly sampled, calibrated strain time series from one detector.

    Attributes
    ----------
    strain
        Shape ``(n,)``, dimensionless strain.
    sample_rate
        Samples per second, Hz.
    start_time
        GPS time of the first sample, s.
    source
        Where it came from (a file name), used in error messages and provenance.
    detector
        A label of our own for the detector (``"site-A"``); one segment per detector.
    """

    strain: NDArray[np.float64]
    sample_rate: float
    start_time: float
    source: str = "strain"
    detector: str = "detector-1"

    @property
    def duration(self) -> float:
        """Length of the segment in seconds (``n / sample_rate``)."""
        return self.strain.size / self.sample_rate

    @property
    def end_time(self) -> float:
        """GPS time just after the last sample, s."""
        return self.start_time + self.duration

    @property
    def times(self) -> NDArray[np.float64]:
        """GPS time of every sample, shape ``(n,)``."""
        return self.start_time + np.arange(self.strain.size) / self.sample_rate


@dataclass(frozen=True)
class NoiseSpectrum:
    """A one-sided noise power spectral density.

    Attributes
    ----------
    frequencies
        Shape ``(m,)``, strictly increasing, Hz.
    psd
        Shape ``(m,)``, one-sided PSD, 1/Hz.
    source
        A file name, or a description such as ``"Welch estimate from strain.txt"``.
    estimated
        True when the spectrum was estimated from the analysed segment itself.
    notes
        Human-readable remarks carried into the report.
    """

    frequencies: NDArray[np.float64]
    psd: NDArray[np.float64]
    source: str = "psd"
    estimated: bool = False
    notes: tuple[str, ...] = field(default=())
