"""Checks that a segment, a noise spectrum and the analysis settings fit together.

Each failed check raises an :class:`~estimator.errors.InputError` whose ``field`` names
the setting to change (``"trigger_time"``, ``"f_low"``, ``"f_high"``, ``"psd"``,
``"strain"``), with the value found, what is needed and how to fix it.
"""

from __future__ import annotations

from typing import NoReturn

import numpy as np

from .data import NoiseSpectrum, StrainSegment
from .errors import InputError

__all__ = [
    "MIN_CYCLES_AT_F_LOW",
    "MIN_SEGMENT_DURATION",
    "NYQUIST_FRACTION",
    "check_analysis_inputs",
    "default_f_high",
]

#: Shortest segment analysed, s.
MIN_SEGMENT_DURATION = 4.0
#: The segment must hold at least this many cycles of the lowest analysed frequency.
MIN_CYCLES_AT_F_LOW = 4.0
#: Fraction of the Nyquist frequency that ``default_f_high`` stays below.
NYQUIST_FRACTION = 0.9


def default_f_high(segment: StrainSegment, spectrum: NoiseSpectrum | None = None) -> float:
    """The largest usable upper frequency, Hz.

    ``min(0.9 * f_Nyquist, spectrum's highest frequency)`` with the Nyquist frequency
    ``f_Nyquist = sample_rate / 2`` (Nyquist-Shannon sampling theorem; Shannon 1949,
    Proc. IRE 37, 10). The 10% margin keeps the band clear of the anti-alias
    roll-off just below Nyquist (common practice).
    """
    f_high = NYQUIST_FRACTION * segment.sample_rate / 2.0
    if spectrum is not None and spectrum.frequencies.size:
        f_high = min(f_high, float(spectrum.frequencies[-1]))
    return f_high


def _fail(message: str, field: str, source: str | None = None) -> NoReturn:
    raise InputError(message, source=source, field=field)


def check_analysis_inputs(
    segment: StrainSegment,
    spectrum: NoiseSpectrum | None,
    *,
    trigger_time: float,
    f_low: float,
    f_high: float,
    time_window: float = 0.1,
    edge_margin: float = 1.0,
) -> None:
    """Raise when the segment, spectrum and settings cannot be analysed together.

    Checks, in this order:

    * every setting is a finite number, ``time_window`` and ``edge_margin`` >= 0;
    * ``0 < f_low < f_high``;
    * ``f_high`` below the Nyquist frequency ``sample_rate / 2`` (Shannon 1949,
      Proc. IRE 37, 10); the message suggests :func:`default_f_high`;
    * the segment lasts at least ``max(4 s, 4 / f_low)``. The Fourier grid spacing
      ``1/T`` must be a small fraction of ``f_low`` (at most a quarter) so that the
      band's lower edge is resolved, and the taper applied at the segment's ends
      before a Fourier transform must leave most of the data untouched; 4 s is the
      shortest segment for which both hold at the usual sample rates (common
      practice; a value of our choosing, not from a publication);
    * the trigger time lies inside the segment, at least
      ``edge_margin + time_window`` from either end, so that the searched times
      ``trigger_time ± time_window`` stay clear of the tapered ends;
    * when a spectrum is given, it covers ``[f_low, f_high]`` and is positive and
      finite at every tabulated frequency inside the band.

    Parameters
    ----------
    segment
        The strain segment.
    spectrum
        The noise spectrum to be used, or ``None`` when it will be estimated.
    trigger_time
        GPS time of the candidate, s.
    f_low, f_high
        Analysis band, Hz.
    time_window
        Half-width of the searched coalescence-time range around the trigger, s.
    edge_margin
        Extra distance, s, kept from the segment's ends.

    Raises
    ------
    InputError
        With ``field`` one of ``"trigger_time"``, ``"f_low"``, ``"f_high"``,
        ``"psd"`` or ``"strain"``.
    """
    for key, value in (("trigger_time", trigger_time), ("f_low", f_low), ("f_high", f_high)):
        if not np.isfinite(value):
            _fail(f"{key} = {value} is not a finite number", key)
    for key, value in (("time_window", time_window), ("edge_margin", edge_margin)):
        if not (np.isfinite(value) and value >= 0):
            _fail(f"{key} = {value} s is not a number >= 0", "trigger_time")
    if f_low <= 0:
        _fail(f"f_low = {f_low:g} Hz must be above 0 Hz", "f_low")
    if f_low >= f_high:
        _fail(f"f_low = {f_low:g} Hz must be below f_high = {f_high:g} Hz", "f_low")
    nyquist = segment.sample_rate / 2.0
    if f_high >= nyquist:
        _fail(
            f"f_high = {f_high:g} Hz is not below the Nyquist frequency {nyquist:g} Hz of a "
            f"{segment.sample_rate:g} Hz sample rate; use f_high = "
            f"{default_f_high(segment, spectrum):g} Hz or less, or data sampled faster",
            "f_high",
        )
    needed = max(MIN_SEGMENT_DURATION, MIN_CYCLES_AT_F_LOW / f_low)
    if segment.duration < needed:
        _fail(
            f"the segment lasts {segment.duration:g} s, shorter than the {needed:g} s needed "
            f"(at least {MIN_SEGMENT_DURATION:g} s and {MIN_CYCLES_AT_F_LOW:g} cycles of "
            f"f_low = {f_low:g} Hz); supply a longer segment or raise f_low",
            "strain",
            segment.source,
        )
    start, end = segment.start_time, segment.end_time
    if not start <= trigger_time <= end:
        _fail(
            f"trigger time {trigger_time:.6f} s is outside the segment "
            f"[{start:.6f}, {end:.6f}] s; check the trigger time or supply the segment around it",
            "trigger_time",
        )
    clearance = edge_margin + time_window
    edge, gap = ("start", trigger_time - start)
    if end - trigger_time < gap:
        edge, gap = "end", end - trigger_time
    if gap < clearance:
        _fail(
            f"trigger time {trigger_time:.6f} s is {gap:.3g} s from the segment {edge}; at "
            f"least {clearance:g} s is needed (edge margin {edge_margin:g} s + time window "
            f"{time_window:g} s); supply a segment that extends further past the trigger",
            "trigger_time",
        )
    if spectrum is None:
        return
    lo, hi = float(spectrum.frequencies[0]), float(spectrum.frequencies[-1])
    if lo > f_low or hi < f_high:
        _fail(
            f"the noise spectrum covers {lo:g}-{hi:g} Hz, the analysis needs "
            f"{f_low:g}-{f_high:g} Hz; supply a spectrum that covers the band or narrow it "
            "(f_low, f_high)",
            "psd",
            spectrum.source,
        )
    band = (spectrum.frequencies >= f_low) & (spectrum.frequencies <= f_high)
    bad = band & ~(np.isfinite(spectrum.psd) & (spectrum.psd > 0))
    if bad.any():
        i = int(np.argmax(bad))
        _fail(
            f"the PSD is {spectrum.psd[i]:g} at {spectrum.frequencies[i]:g} Hz, inside the "
            f"analysis band {f_low:g}-{f_high:g} Hz; a noise spectrum must be positive there",
            "psd",
            spectrum.source,
        )
