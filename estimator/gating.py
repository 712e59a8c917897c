"""Glitch gating: find loud short transients in one detector's data and zero them out.

Finding
    The whitened data are cut into half-overlapping windows of ``window`` seconds
    and each window's energy is compared with Gaussian noise: ``energy / width``
    relative to the series' mean power is ``chi^2_k / k`` with ``k = 2 B w``
    independent samples (an excess-power statistic: Anderson, Brady, Creighton &
    Flanagan 2001, PRD 63, 042003; ``2 B`` independent samples per second of
    band-limited noise is Nyquist–Shannon, common practice). The threshold is the
    ``chi^2_k`` upper quantile at ``false_alarm / n_windows`` (Bonferroni), so
    clean stationary Gaussian data raise a gate with probability at most
    ``false_alarm`` per segment. It is the same statistic as the transient check of
    :mod:`estimator.quality`, run over the whole segment away from the tapers.

Gating
    Each cluster of loud windows becomes one :class:`Gate`: the whitened series is
    multiplied by an inverse Tukey window, zero across the loud span plus
    ``PAD`` seconds each side, with cosine ramps of ``TAPER`` seconds, then
    re-coloured (the gating of Usman et al. 2016, Class. Quantum Grav. 33, 215004,
    Sec. 2.3; the padding and ramp lengths are typical published choices, from
    memory of that section). Gating removes data: inside and near a gate the
    noise is no longer stationary Gaussian with the PSD, so the likelihood is
    slightly wrong there. The bias this leaves is small when the gate is short and
    away from the merger; gates that touch the signal's loudest part are reported,
    never applied by default.

Band limit
    The gated series is re-coloured onto the data's analysis band, which is a
    band-pass projection of ``x * g``. The product is not band-limited, so the
    whitened gated data are not exactly zero inside the gate: the part of
    ``x * (1 - g)`` that falls outside the band (its spectrum smeared by about the
    inverse gate length across the band edges) stays. :func:`gate_window` gives
    the window itself, so ``whiten(data, data.strain) * gate_window(...)`` is the
    exactly gated whitened series.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.fft
import scipy.stats
from numpy.typing import NDArray

from .conditioning import DetectorData, whiten
from .errors import InputError

__all__ = [
    "GUARD",
    "PAD",
    "TAPER",
    "Gate",
    "GlitchScan",
    "find_glitches",
    "gate_data",
    "gate_window",
]

Array = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]

#: Zeroed time added on each side of the loud span, s (typical published choice).
PAD = 0.125
#: Length of each cosine ramp of a gate, s (typical published choice).
TAPER = 0.25
#: Extra seconds left out beyond each segment taper, as in :mod:`estimator.quality`.
GUARD = 0.25


@dataclass(frozen=True)
class Gate:
    """One gate: a zeroed span with cosine ramps on either side.

    Attributes
    ----------
    centre
        GPS time of the middle of the zeroed span, s.
    half_width
        Half-width of the zeroed span, s (>= 0).
    taper
        Length of each cosine ramp, s (>= 0).
    power_ratio
        The loudest window's power over the mean power (the excess-power statistic
        that raised the gate); ``nan`` for a gate set by hand.
    """

    centre: float
    half_width: float
    taper: float
    power_ratio: float = float("nan")

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form, with units (a non-finite ratio becomes ``None``)."""
        ratio = float(self.power_ratio) if np.isfinite(self.power_ratio) else None
        return {
            "centre": {"value": float(self.centre), "unit": "s (GPS)"},
            "half_width": {"value": float(self.half_width), "unit": "s"},
            "taper": {"value": float(self.taper), "unit": "s"},
            "power_ratio": {"value": ratio, "unit": "1"},
        }


@dataclass(frozen=True)
class GlitchScan:
    """What :func:`find_glitches` found.

    Attributes
    ----------
    gates
        Gates away from the protected interval, to be applied, in time order.
    at_signal
        Loud spans that overlap the protected interval (the signal's own loudest
        part, or a glitch on top of it): reported, not to be gated blindly.
    threshold
        The per-window power-ratio threshold used.
    n_windows
        Number of windows searched (the Bonferroni factor).
    dropped
        Loud clusters away from the signal beyond ``max_gates`` (the quietest
        ones), not returned as gates.
    """

    gates: list[Gate] = field(default_factory=list)
    at_signal: list[Gate] = field(default_factory=list)
    threshold: float = float("nan")
    n_windows: int = 0
    dropped: int = 0


def _check_gates(data: DetectorData, gates: Sequence[Gate]) -> None:
    end = data.epoch + data.duration
    for i, g in enumerate(gates):
        values = (g.centre, g.half_width, g.taper)
        if not all(np.isfinite(v) for v in values):
            msg = f"gate {i}: centre, half_width and taper must be finite, got {values}"
            raise InputError(msg, field="gates")
        if g.half_width < 0 or g.taper < 0:
            msg = (
                f"gate {i}: half_width {g.half_width:g} s and taper {g.taper:g} s must not be "
                "negative; give the zeroed half-width and the ramp length in seconds"
            )
            raise InputError(msg, field="gates")
        lo, hi = g.centre - g.half_width - g.taper, g.centre + g.half_width + g.taper
        if lo < data.epoch or hi > end:
            msg = (
                f"gate {i} spans GPS {lo:.4f}-{hi:.4f} s (ramps included), outside the segment "
                f"GPS {data.epoch:.4f}-{end:.4f} s; move or shorten the gate"
            )
            raise InputError(msg, field="gates")


def gate_window(data: DetectorData, gates: Sequence[Gate]) -> Array:
    """Product of inverse Tukey windows, one per gate, on ``data``'s sample grid.

    Each gate gives 0 for ``|t - centre| <= half_width``, the cosine ramp
    ``(1 - cos(pi (|t - centre| - half_width) / taper)) / 2`` over the next
    ``taper`` seconds, and 1 beyond (a Tukey window, Harris 1978, Proc. IEEE 66,
    51, Eq. 38, subtracted from one; Usman et al. 2016, CQG 33, 215004, Sec. 2.3).

    Returns
    -------
    Array of shape ``(n_samples,)``, time origin at ``data.epoch``.

    Raises
    ------
    InputError
        A gate with a negative or non-finite size, or reaching outside the segment.
    """
    _check_gates(data, gates)
    if not gates:
        return np.ones(data.n_samples)
    # Times from the epoch, so that GPS-sized numbers do not cost precision.
    times = np.arange(data.n_samples) / data.sample_rate
    centre = np.array([g.centre - data.epoch for g in gates])[:, None]
    half = np.array([g.half_width for g in gates])[:, None]
    taper = np.array([g.taper for g in gates])[:, None]
    into = np.abs(times[None, :] - centre) - half
    # A zero-length ramp is a hard edge: the ramp fraction is then 0 inside, 1 outside.
    frac = np.clip(np.divide(into, taper, out=(into > 0).astype(float), where=taper > 0), 0, 1)
    ramps = 0.5 * (1.0 - np.cos(np.pi * frac))
    return np.asarray(np.prod(ramps, axis=0), dtype=float)


def gate_data(data: DetectorData, gates: Sequence[Gate]) -> DetectorData:
    """Gate the whitened data with inverse Tukey windows and re-colour them.

    The whitened series of :func:`estimator.conditioning.whiten` is multiplied by
    :func:`gate_window`, transformed back and multiplied by the same factor the
    whitening divided by, so outside the gates (beyond the band-pass filter's
    reach) the data are unchanged (Usman et al. 2016, CQG 33, 215004, Sec. 2.3).
    Gating removes data, so the noise inside a gate is no longer stationary
    Gaussian; the bias on the estimates is small when the gate is short and away
    from the merger.

    Returns
    -------
    DetectorData
        A copy with ``strain`` replaced by the gated frequency series on the same
        band; everything else (PSD, window factor) is kept. With no gates,
        ``data`` itself.
    """
    window = gate_window(data, gates)
    if not gates:
        return data
    n, dt = data.n_samples, 1.0 / data.sample_rate
    band_fraction = data.frequencies.size / (n // 2 + 1)
    white = whiten(data, data.strain) * window
    full = scipy.fft.rfft(white) * dt * np.sqrt(band_fraction)
    lo = data.first_index
    colour = np.sqrt(data.psd * data.window_factor / (2.0 * dt))
    strain = np.ascontiguousarray(full[lo : lo + data.frequencies.size] * colour)
    return dataclasses.replace(data, strain=strain)


def _loud_clusters(loud: NDArray[np.intp]) -> list[NDArray[np.intp]]:
    """Split sorted loud window indices into runs whose windows overlap or touch."""
    if loud.size == 0:
        return []
    # Half-overlapping windows j and j + 2 touch; a larger index gap leaves quiet data between.
    breaks = np.flatnonzero(np.diff(loud) > 2) + 1
    return list(np.split(loud, breaks))


def find_glitches(
    data: DetectorData,
    *,
    protect: tuple[float, float] | None,
    false_alarm: float = 1e-4,
    window: float = 1.0 / 16.0,
    max_gates: int = 5,
) -> GlitchScan:
    """Find loud short transients in the whitened data and propose gates.

    Parameters
    ----------
    data
        Conditioned data of one detector.
    protect
        GPS interval ``(start, end)`` of the signal's loudest part, s: loud spans
        overlapping it go to ``at_signal`` instead of ``gates``. ``None``: none.
    false_alarm
        Probability that clean stationary Gaussian data raise any gate (Bonferroni
        over the windows searched; see the module docstring).
    window
        Length of the short-time energy windows, s (half-overlapping).
    max_gates
        At most this many gates, the loudest; the rest are counted in ``dropped``.

    Returns
    -------
    GlitchScan
        Gates with a zeroed half-width of half the loud span plus ``PAD`` and ramps
        of ``TAPER`` seconds, centred on the loud span.
    """
    if not 0.0 < false_alarm < 1.0:
        msg = f"false_alarm {false_alarm!r} must lie strictly between 0 and 1"
        raise InputError(msg, field="false_alarm")
    if not (np.isfinite(window) and window > 0) or max_gates < 0:
        msg = f"window {window!r} s must be positive and max_gates {max_gates!r} not negative"
        raise InputError(msg, field="gates")
    if protect is not None and not protect[0] <= protect[1]:
        msg = f"protect interval {protect!r} must be (start, end) with start <= end, GPS s"
        raise InputError(msg, field="protect")
    fs = data.sample_rate
    width = max(round(window * fs), 1)
    step = max(width // 2, 1)
    edge = data.taper_duration + GUARD
    first = int(np.ceil(edge * fs))
    last = data.n_samples - first  # exclusive
    if last - first < width:
        return GlitchScan()
    white = whiten(data, data.strain)[first:last]
    energy = np.convolve(white**2, np.ones(width), mode="valid")[::step]
    ratio = energy / (width * float(np.mean(white**2)))
    k = 2.0 * data.frequencies.size * data.df * width / fs
    limit = float(scipy.stats.chi2.isf(false_alarm / energy.size, k)) / k
    # GPS start and end of every window.
    starts = data.epoch + (first + np.arange(energy.size) * step) / fs
    ends = starts + width / fs
    found: list[Gate] = []
    at_signal: list[Gate] = []
    for run in _loud_clusters(np.flatnonzero(ratio > limit)):
        lo, hi = float(starts[run[0]]), float(ends[run[-1]])
        gate = Gate(0.5 * (lo + hi), 0.5 * (hi - lo) + PAD, TAPER, float(np.max(ratio[run])))
        if protect is not None and lo <= protect[1] and hi >= protect[0]:
            at_signal.append(gate)
        else:
            found.append(gate)
    kept = sorted(found, key=lambda g: -g.power_ratio)[:max_gates]
    return GlitchScan(
        gates=sorted(kept, key=lambda g: g.centre),
        at_signal=at_signal,
        threshold=limit,
        n_windows=int(energy.size),
        dropped=len(found) - len(kept),
    )
