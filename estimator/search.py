"""Coarse-to-fine matched-filter search over chirp mass near a trigger time.

Each trial template is correlated with the data by one inverse FFT, which
gives the matched-filter SNR at every time shift at once (the FFT correlation
of Allen, Anderson, Brady, Brown & Creighton 2012, PRD 85, 122006, Sec. IV);
the largest SNR within the time window around the trigger scores the trial.

The phase of an inspiral is most sensitive to chirp mass at low frequency,
where the signal lasts longest. The search therefore starts with a band
``[f_s, f_max]`` whose lower edge ``f_s`` is high enough that a few hundred
templates spaced uniformly in the Newtonian chirp time ``tau_0(f_s)`` cover the
chirp-mass range, then halves ``f_s`` stage by stage down to ``f_low``,
searching only around the previous stage's best template. Templates are
spaced by ``delta tau_0 = c / f_s``: a chirp-time error ``delta tau_0`` changes
the Newtonian phase by ``(6/5) pi f_s delta tau_0 (f/f_s)^{-5/3}``, of which
only the part not absorbed by a time and phase shift costs SNR
(Sathyaprakash & Dhurandhar 1991, PRD 44, 3819; Owen 1996, PRD 53, 6749, for
the template-placement metric).
"""

from __future__ import annotations

import itertools
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.fft
from numpy.typing import NDArray

from .conditioning import DetectorData, condition
from .data import NoiseSpectrum, StrainSegment
from .waveform import (
    MSUN_SECONDS,
    PhaseBasis,
    chirp_time,
    isco_frequency,
    symmetric_mass_ratio,
)

__all__ = [
    "SearchResult",
    "chirp_mass_from_tau",
    "search_chirp_mass",
    "snr_time_series",
    "stage_data",
    "template_duration",
    "template_snr_series",
]

Array = NDArray[np.float64]

#: Template spacing in chirp time, in units of 1/f_s.
SPACING = 0.8
#: Largest number of templates in the first stage of one chirp-mass piece.
MAX_FIRST_STAGE = 200
#: Half-width of the chirp-mass window carried to the next stage, in template spacings.
CARRY = 4.0
#: How many first-stage candidates are followed down to f_low.
REFINE = 2


@dataclass(frozen=True)
class SearchResult:
    """Best template of the search.

    Attributes
    ----------
    chirp_mass, mass_ratio
        Of the loudest template, detector frame.
    coalescence_time
        GPS time of the SNR peak, s.
    snr
        Its matched-filter SNR (maximised over time and phase).
    templates
        Number of templates tried in all.
    stages
        ``(f_s, best_snr)`` of every stage of the winning chain.
    """

    chirp_mass: float
    mass_ratio: float
    coalescence_time: float
    snr: float
    templates: int
    stages: tuple[tuple[float, float], ...]
    #: Aligned spin of both bodies of the loudest template (0 for a non-spinning bank).
    spin: float = 0.0
    #: The loudest non-spinning template when a spinning one is louder (else None): for a
    #: heavy source the inspiral-only templates can favour a spinning one far from it,
    #: so the analysis climbs from both and keeps the higher likelihood.
    plain: SearchResult | None = None


def template_duration(chirp_mass: float, mass_ratio: float, f_low: float) -> float:
    """Time the signal spends above ``f_low`` before coalescence (Newtonian ``tau_0``
    plus 10%, a common-practice safety margin for the higher PN terms), s."""
    return 1.1 * float(chirp_time(chirp_mass, f_low))


def snr_time_series(
    data: DetectorData,
    chirp_mass: Array,
    mass_ratio: float,
    *,
    f_max: float,
    window: tuple[float, float] | None = None,
    basis: PhaseBasis | None = None,
    spin: float = 0.0,
) -> tuple[Array, NDArray[np.float64]]:
    """Matched-filter SNR of each template at every time shift, one inverse FFT each.

    Parameters
    ----------
    window
        Keep only the GPS times in ``[start, stop]`` (all when ``None``).
    basis
        A :class:`PhaseBasis` on ``data.frequencies[data.frequencies <= f_max]``
        to reuse between calls.
    spin
        Aligned spin of both bodies (the phase's spin terms; the template still ends
        at the non-spinning ISCO frequency).

    Returns
    -------
    times
        GPS times of the shifts, shape ``(m,)``.
    snr
        Shape ``(len(chirp_mass), m)``; single precision is enough for a search.
    """
    mc = np.atleast_1d(np.asarray(chirp_mass, dtype=float))
    f = data.frequencies[data.frequencies <= f_max]
    if basis is None or basis.frequencies.size != f.size:
        basis = PhaseBasis(f)
    total = mc * symmetric_mass_ratio(mass_ratio) ** (-0.6)
    f_cut = np.minimum(isco_frequency(total), f_max)
    # Single precision is plenty for a search (phase error ~1e-3 rad).
    spins = (np.full(mc.shape, spin), np.full(mc.shape, spin)) if spin != 0.0 else (None, None)
    psi = (basis.phase(mc, np.full(mc.shape, mass_ratio), *spins) - np.pi / 4.0).astype(np.float32)
    inband = (f[None, :] <= f_cut[:, None]).astype(np.float32)
    return template_snr_series(data, inband, psi, window=window)


def template_snr_series(
    data: DetectorData,
    factor: Array | NDArray[np.float32],
    phase: Array | NDArray[np.float32],
    *,
    window: tuple[float, float] | None = None,
) -> tuple[Array, NDArray[np.float64]]:
    """Matched-filter SNR at every time shift of templates ``factor f^{-7/6} e^{-i phase}``.

    The correlation of the data with each template at all time shifts by one
    inverse FFT (Allen et al. 2012, PRD 85, 122006, Sec. IV), maximised over the
    constant phase by taking the modulus, normalised by ``sqrt(<h|h>)``.

    Parameters
    ----------
    factor, phase
        Shape ``(n, k)`` on ``data.frequencies[:k]``: the amplitude factor
        relative to the Newtonian ``f^{-7/6}`` (0 outside the template's band)
        and the phase, ``Psi - pi/4`` with ``Psi`` of :mod:`estimator.waveform`.
        Single precision is enough for a search.
    window
        Keep only the GPS times in ``[start, stop]`` (all when ``None``).

    Returns
    -------
    times
        GPS times of the shifts, shape ``(m,)``.
    snr
        Shape ``(n, m)``.
    """
    amp, psi = np.atleast_2d(factor), np.atleast_2d(phase)
    k = psi.shape[1]
    f = data.frequencies[:k]
    weight = 4.0 * data.df / data.psd[:k]
    k0 = data.first_index
    m = scipy.fft.next_fast_len(2 * (k0 + k))
    hh = np.maximum(amp.astype(float) ** 2 @ (f ** (-7.0 / 3.0) * weight), 1e-300)
    # c = d h* / S: h* = factor f^{-7/6} exp(+i psi), applied as cos and sin (faster than exp).
    c = (data.strain[:k] * weight * f ** (-7.0 / 6.0)).astype(np.complex64)
    cos, sin = np.cos(psi), np.sin(psi)
    cos *= amp
    sin *= amp
    series = np.zeros((psi.shape[0], m), dtype=np.complex64)
    block = series[:, k0 : k0 + k]
    block.real = c.real * cos - c.imag * sin
    block.imag = c.real * sin + c.imag * cos
    z = scipy.fft.ifft(series, axis=1, workers=-1, overwrite_x=True)
    times = data.epoch + np.arange(m) * (data.duration / m)
    if window is not None:
        sel = (times >= window[0]) & (times <= window[1])
        times, z = times[sel], z[:, sel]
    return times, np.abs(z) * (m / np.sqrt(hh)[:, None])


def stage_data(
    segment: StrainSegment,
    spectrum: NoiseSpectrum,
    *,
    f_start: float,
    f_max: float,
    longest: float,
    trigger_time: float,
    time_window: float,
    taper: float,
) -> DetectorData:
    """Condition the part of the segment a stage needs: ``longest`` s before the trigger."""
    start = max(segment.start_time, trigger_time - longest - time_window - 1.0 - taper)
    stop = min(segment.end_time, trigger_time + time_window + 1.0 + taper)
    i0 = int(np.floor((start - segment.start_time) * segment.sample_rate))
    n = scipy.fft.next_fast_len(
        int(np.ceil((stop - segment.start_time) * segment.sample_rate)) - i0
    )
    n = min(n, segment.strain.size - i0)
    sub = StrainSegment(
        strain=segment.strain[i0 : i0 + n],
        sample_rate=segment.sample_rate,
        start_time=segment.start_time + i0 / segment.sample_rate,
        source=segment.source,
        detector=segment.detector,
    )
    return condition(sub, spectrum, f_low=f_start, f_high=f_max, taper_duration=taper)


def _first_stage_frequency(mc_lo: float, mc_hi: float, f_low: float, q: float) -> float:
    """Lowest ``f_s >= f_low`` at which the piece needs at most MAX_FIRST_STAGE templates."""
    f = f_low
    f_top = float(isco_frequency(mc_lo * symmetric_mass_ratio(q) ** (-0.6))) / 4.0
    while f < f_top:
        count = (chirp_time(mc_lo, f) - chirp_time(mc_hi, f)) * f / SPACING
        if count <= MAX_FIRST_STAGE:
            break
        f *= 2.0**0.5
    return min(f, max(f_low, f_top))


def search_chirp_mass(
    segment: StrainSegment,
    spectrum: NoiseSpectrum,
    *,
    trigger_time: float,
    chirp_mass_range: tuple[float, float],
    mass_ratios: tuple[float, ...] = (1.0, 0.5, 0.25),
    spins: tuple[float, ...] = (0.0,),
    f_low: float,
    f_high: float,
    time_window: float = 0.1,
    taper_duration: float = 0.5,
    progress: Callable[[float], None] | None = None,
) -> SearchResult:
    """Find the loudest inspiral template near ``trigger_time``.

    Parameters
    ----------
    segment, spectrum
        Data and its one-sided PSD.
    trigger_time
        GPS time around which coalescence is searched (``± time_window``).
    chirp_mass_range
        Detector-frame chirp-mass range to cover, Msun.
    mass_ratios
        Fixed mass ratios at which the chirp-mass search is repeated.
    spins
        Equal aligned spins of both bodies at which it is repeated too: a spinning
        source's best non-spinning template can lie far from it in chirp mass.
    f_low, f_high
        Analysis band; the search uses at most 512 Hz of it (1 ms time
        resolution locates the peak; the rest carries little of an inspiral's SNR).
    """
    f_max = min(f_high, 512.0)
    span = (trigger_time - time_window, trigger_time + time_window)
    lo, hi = chirp_mass_range
    n_pieces = max(1, int(np.ceil(np.log(hi / lo) / np.log(1.5))))
    pieces = np.geomspace(lo, hi, n_pieces + 1)
    available = trigger_time - segment.start_time - time_window - 2.0 * taper_duration - 1.0
    cache: dict[tuple[float, float], tuple[DetectorData, PhaseBasis]] = {}
    counter = [0]

    def run_stage(
        f_s: float, mc_lo: float, mc_hi: float, q: float, chi: float
    ) -> tuple[float, float, float]:
        longest = min(template_duration(mc_lo, q, f_s), available)
        key = (round(f_s, 6), round(longest, 1))
        if key not in cache:
            stage = stage_data(
                segment,
                spectrum,
                f_start=f_s,
                f_max=f_max,
                longest=longest,
                trigger_time=trigger_time,
                time_window=time_window,
                taper=taper_duration,
            )
            cache[key] = (stage, PhaseBasis(stage.frequencies[stage.frequencies <= f_max]))
        data, basis = cache[key]
        step = SPACING / f_s
        taus = np.arange(float(chirp_time(mc_hi, f_s)), float(chirp_time(mc_lo, f_s)) + step, step)
        trial = chirp_mass_from_tau(taus, f_s)
        trial = np.clip(trial, lo, hi)
        scores = np.empty(trial.size)
        peaks = np.empty(trial.size)
        for s in range(0, trial.size, 8):
            times, snr = snr_time_series(
                data, trial[s : s + 8], q, f_max=f_max, window=span, basis=basis, spin=chi
            )
            arg = np.argmax(snr, axis=1)
            scores[s : s + 8] = snr[np.arange(arg.size), arg]
            peaks[s : s + 8] = times[arg]
        counter[0] += trial.size
        i = int(np.argmax(scores))
        return float(trial[i]), float(scores[i]), float(peaks[i])

    # Stage one for every chirp-mass piece at the first mass ratio; the loudest few
    # are followed down to f_low, where every mass ratio is tried.
    first = []
    q_first = mass_ratios[0]
    for a, b in itertools.pairwise(pieces):
        f_s = _first_stage_frequency(a, b, f_low, q_first)
        for chi in spins:
            mc, snr, peak = run_stage(f_s, a, b, q_first, chi)
            first.append((snr, f_s, mc, peak, chi))
    first.sort(reverse=True)
    # The loudest non-spinning candidates are followed as they always were, and the
    # loudest spinning ones beside them: each family's best is returned.
    jobs = sorted(
        [c for c in first if c[4] == 0.0][:REFINE]
        + [c for c in first if c[4] != 0.0][: len(spins) - 1],
        reverse=True,
    )
    n_jobs = len(jobs)
    best: SearchResult | None = None
    best_plain: SearchResult | None = None
    for j, (snr, f_s, mc, peak, chi) in enumerate(jobs):
        stages = [(f_s, snr)]
        q = q_first
        while True:
            at_floor = f_s <= f_low * 1.0001
            f_next = f_s if at_floor else max(f_low, f_s / 2.0)
            final = f_next <= f_low * 1.0001
            # The window carried to the next stage; wider for the last one, where the
            # other mass ratios (whose best chirp mass lies elsewhere on the ridge) are tried.
            step = SPACING / f_s
            carry = CARRY * (2.0 if final else 1.0)
            tau_best = float(chirp_time(mc, f_s))
            mc_lo = max(lo, float(chirp_mass_from_tau(tau_best + carry * step, f_s)))
            mc_hi = (
                hi
                if tau_best <= carry * step
                else min(hi, float(chirp_mass_from_tau(tau_best - carry * step, f_s)))
            )
            f_s = f_next
            if final:
                trials = [(*run_stage(f_s, mc_lo, mc_hi, r, chi), r) for r in mass_ratios]
                mc, snr, peak, q = max(trials, key=lambda t: t[1])
                stages.append((f_s, snr))
                break
            mc, snr, peak = run_stage(f_s, mc_lo, mc_hi, q_first, chi)
            stages.append((f_s, snr))
        found = SearchResult(mc, q, peak, snr, 0, tuple(stages), chi)
        if best is None or snr > best.snr:
            best = found
        if chi == 0.0 and (best_plain is None or snr > best_plain.snr):
            best_plain = found
        if progress is not None:
            progress((j + 1) / n_jobs)
    if best is None:
        msg = f"empty chirp-mass range {chirp_mass_range}"
        raise ValueError(msg)
    return SearchResult(
        chirp_mass=best.chirp_mass,
        mass_ratio=best.mass_ratio,
        coalescence_time=best.coalescence_time,
        snr=best.snr,
        templates=counter[0],
        stages=best.stages,
        spin=best.spin,
        plain=None if spins == (0.0,) or best_plain is best else best_plain,
    )


def chirp_mass_from_tau(tau: Array | float, f_s: float) -> Array:
    """Invert ``tau_0(Mc, f_s)`` (Sathyaprakash & Dhurandhar 1991, Eq. 2.7) for ``Mc``."""
    tau_arr = np.asarray(tau, dtype=float)
    return np.asarray(
        (tau_arr * 256.0 * np.pi * f_s / 5.0) ** (-3.0 / 5.0) / (np.pi * f_s * MSUN_SECONDS)
    )
