"""A coarse aligned-spin template scan that checks the fiducial is the right mode.

The search (:mod:`estimator.search`) tries equal aligned spins :func:`bank_spins`
beside its mass ratios, and the fiducial (:mod:`estimator.fiducial`) is climbed
from its loudest template with that template's spins held fixed. For a short
signal (a heavy binary with a few cycles in band) the masses and the aligned
spins are degenerate in a way that is not one smooth ridge: the climb can end
on a secondary peak of the likelihood, tens of log-likelihood units below the
true one and far from it in chirp mass, and the sampler's walkers, which start
around the fiducial, do not cross to the other peak (chirpcast's 200-injection
calibration, 2026-12-03: 3 of 116 spinning injections sampled a secondary mode
with the truth outside every interval, e.g. chirp mass 11.0 Msun sampled at
13.7-14.3 Msun).

So before sampling, a bank of templates of the analysis's own model, on a grid
of chirp mass (spaced in Newtonian chirp time as the search is), mass ratio and
equal aligned spins, is correlated with the data by one inverse FFT each (the
SNR at every time shift at once, Allen et al. 2012, PRD 85, 122006, Sec. IV).
The loudest few are climbed as the fiducial is, with their equal spins free
to move too (a peak climbed at a fixed spin can lie far below the one a small
change of spin reaches, and then the wrong peak wins the comparison:
calibration injection 102 of 2026-12-04), and the best of those replaces the
fiducial when its log-likelihood is higher by more than :data:`ADOPT_MARGIN`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .conditioning import DetectorData
from .data import NoiseSpectrum, StrainSegment
from .fiducial import Fiducial, find_fiducial
from .likelihood import ExactLikelihood
from .models import model_parts
from .search import (
    SPACING,
    chirp_mass_from_tau,
    stage_data,
    template_duration,
    template_snr_series,
)
from .waveform import chirp_time

__all__ = ["ADOPT_MARGIN", "ModeScan", "bank_spins", "scan_spinning_modes", "wants_mode_scan"]

Array = NDArray[np.float64]

#: The scan runs for signals at most this long above f_low (s). Longer ones have so
#: many cycles that the likelihood is too narrow in spin and mass ratio for a coarse
#: bank: it then finds a wrong peak (calibration injection 0 of 2026-12-03, chirp mass
#: 4.6 Msun, q 0.22, spins -0.93/0.19: the loudest cell climbed to 202 against 322 at
#: the truth, and only equal spins within 0.05 of -0.8 reach the truth's peak at all),
#: while the sampler's moves follow the ridge from the search's spinning template.
LONGEST_SIGNAL = 10.0
#: ... and for spin priors at least this wide (narrower ones cannot move the masses far).
SMALLEST_SPIN_MAX = 0.2
#: Equal aligned spins of the bank, before clipping to the prior (90% of spin_max).
SPIN_GRID = (-0.8, -0.4, 0.0, 0.4, 0.8)
#: The bank's spins, and the spins its climbs may reach, stay within this share of spin_max.
SPIN_REACH = 0.9
#: Mass ratios of the bank, before clipping to the prior range.
MASS_RATIO_GRID = (1.0, 0.7, 0.5, 0.35, 0.25, 0.17, 0.11)
#: Chirp-mass half-range of the bank, in units of the search's template spacing,
#: and at most this fraction of the fiducial's chirp mass.
HALF_RANGE_STEPS = 30
HALF_RANGE_FRACTION = 0.35
#: Chirp-mass spacing of the bank in units of the search's (a coarse bank: each
#: template is climbed to its peak afterwards).
COARSENING = 1.5
#: Loudest templates (distinct spin and mass-ratio cells) climbed to a peak.
CLIMBED = 2
#: A scanned peak replaces the fiducial when its log-likelihood is
#: higher by more than this: half the 99.9% quantile of chi^2 with one degree of
#: freedom, the gain a free spin gives by fitting noise alone (Wilks 1938, Ann.
#: Math. Stat. 9, 60; the threshold is common practice).
ADOPT_MARGIN = 5.41


@dataclass(frozen=True)
class ModeScan:
    """What the scan tried and found.

    Attributes
    ----------
    templates
        Bank size.
    best_snr
        Matched-filter SNR of the loudest template.
    candidate
        The best climbed peak (spins fixed at the template's), or None.
    adopted
        Whether ``candidate`` replaced the fiducial climbed from the search.
    gain
        Its log-likelihood minus that fiducial's.
    """

    templates: int
    best_snr: float
    candidate: Fiducial | None
    adopted: bool
    gain: float


def bank_spins(spin_max: float) -> tuple[float, ...]:
    """Equal aligned spins a search or scan bank tries under a prior of ``±spin_max``.

    :data:`SPIN_GRID` clipped to :data:`SPIN_REACH` of the prior's bound; only zero below
    :data:`SMALLEST_SPIN_MAX` (where the spins cannot move the masses far).
    """
    if spin_max < SMALLEST_SPIN_MAX:
        return (0.0,)
    reach = SPIN_REACH * spin_max
    return tuple(sorted({float(np.clip(c, -reach, reach)) for c in SPIN_GRID}))


def wants_mode_scan(chirp_mass: float, mass_ratio: float, f_low: float, spin_max: float) -> bool:
    """Whether :func:`scan_spinning_modes` should run (the module docstring's two limits)."""
    short = template_duration(chirp_mass, mass_ratio, f_low) <= LONGEST_SIGNAL
    return bool(spin_max >= SMALLEST_SPIN_MAX and short)


def _bank_snr(
    data: DetectorData,
    model: str,
    mc: Array,
    q: float,
    chi: float,
    window: tuple[float, float],
) -> tuple[Array, Array]:
    """Loudest SNR within ``window`` and its GPS time, per chirp mass (one FFT each).

    The templates are the model's amplitude factor and phase
    (:func:`estimator.models.model_parts`), correlated by
    :func:`estimator.search.template_snr_series`.
    """
    spins = np.full(mc.shape, chi)
    factor, psi = model_parts(model, data.frequencies, mc, np.full(mc.shape, q), spins, spins)
    times, snr = template_snr_series(data, factor, psi - np.pi / 4.0, window=window)
    arg = np.argmax(snr, axis=1)
    return snr[np.arange(arg.size), arg], times[arg]


def scan_spinning_modes(
    segment: StrainSegment,
    spectrum: NoiseSpectrum,
    fiducial: Fiducial,
    *,
    datasets: Sequence[DetectorData],
    exact: ExactLikelihood,
    reference_time: float,
    model: str,
    f_low: float,
    f_high: float,
    chirp_mass_range: tuple[float, float],
    mass_ratio_range: tuple[float, float],
    spin_max: float,
    time_window: float,
    n_bins: int,
    taper_duration: float = 0.5,
    centres: Sequence[Fiducial] = (),
) -> ModeScan:
    """Scan the aligned-spin bank around ``fiducial`` and climb its loudest cells.

    ``datasets`` and ``exact`` are those the fiducial was climbed on (the climb of
    each candidate uses them); the bank itself is correlated with the stretch of
    ``segment`` the longest template needs, conditioned as the search's is.
    ``centres`` (default: the fiducial alone) are the fits the bank is laid
    around, each with its own chirp-mass range and its own :data:`CLIMBED`
    climbs: a lower fit climbed from another of the search's templates can lie
    nearer the source than the fiducial does (calibration injection 55 of
    2026-12-03: the fiducial at chirp mass 5.7 Msun, the source at 12.4 Msun, and
    the fit from the search's non-spinning template at 11 Msun).
    """
    lo, hi = chirp_mass_range
    qs = [q for q in MASS_RATIO_GRID if mass_ratio_range[0] <= q <= mass_ratio_range[1]]
    qs = qs or [float(fiducial.params["mass_ratio"])]
    chis = bank_spins(spin_max)
    available = reference_time - segment.start_time - time_window - 2.0 * taper_duration - 1.0
    window = (reference_time - time_window, reference_time + time_window)  # the prior's
    templates = 0
    loudest = 0.0
    best: Fiducial | None = None
    for centre in centres or (fiducial,):
        grid = _chirp_mass_grid(float(centre.params["chirp_mass"]), f_low, lo, hi)
        longest = template_duration(float(grid.min()), min(qs), f_low)
        data = stage_data(
            segment,
            spectrum,
            f_start=f_low,
            f_max=f_high,
            longest=max(0.5, min(longest, available)),
            trigger_time=reference_time,
            time_window=time_window,
            taper=taper_duration,
        )
        cells: list[tuple[float, float, float, float, float]] = []  # (snr, mc, q, chi, tc)
        for q in qs:
            for chi in chis:
                snrs, peaks = _bank_snr(data, model, grid, q, chi, window)
                i = int(np.argmax(snrs))
                cells.append((float(snrs[i]), float(grid[i]), q, chi, float(peaks[i])))
        cells.sort(reverse=True)
        templates += grid.size * len(qs) * len(chis)
        loudest = max(loudest, cells[0][0] if cells else 0.0)
        for _snr, mc, q, chi, peak in cells[:CLIMBED]:
            try:
                found = find_fiducial(
                    datasets,
                    reference_time,
                    {"chirp_mass": mc, "mass_ratio": q, "coalescence_time": peak - reference_time},
                    mass_ratio_range=mass_ratio_range,
                    chirp_mass_range=chirp_mass_range,
                    time_window=time_window,
                    n_bins=n_bins,
                    exact=exact,
                    model=model,
                    spins=(chi, chi),
                    free_spin=SPIN_REACH * spin_max,
                    rounds=2,
                    exact_iterations=20,
                )
            except np.linalg.LinAlgError:  # a climb that met a flat or broken curvature
                continue
            if best is None or found.log_likelihood > best.log_likelihood:
                best = found
    gain = -np.inf if best is None else best.log_likelihood - fiducial.log_likelihood
    return ModeScan(
        templates=templates,
        best_snr=loudest,
        candidate=best,
        adopted=bool(gain > ADOPT_MARGIN),
        gain=float(gain),
    )


def _chirp_mass_grid(mc0: float, f_low: float, lo: float, hi: float) -> Array:
    """The bank's chirp masses around ``mc0``: spaced in Newtonian chirp time at
    ``f_low`` as the search's last stage, :data:`COARSENING` times coarser."""
    step = COARSENING * SPACING / f_low
    tau0 = float(chirp_time(mc0, f_low))
    taus = np.asarray(tau0 + step * np.arange(-HALF_RANGE_STEPS, HALF_RANGE_STEPS + 1), float)
    taus = taus[taus > 0.0]
    grid = chirp_mass_from_tau(taus, f_low)
    grid = grid[
        (grid >= max(lo, mc0 * (1.0 - HALF_RANGE_FRACTION)))
        & (grid <= min(hi, mc0 * (1.0 + HALF_RANGE_FRACTION)))
    ]
    return np.unique(np.concatenate([grid, [mc0]]))
