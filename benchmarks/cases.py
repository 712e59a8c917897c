"""Drill sources for the benchmarks: seeded noise from the analytic design PSD plus an injection.

Every source is simulated once per run and reused by every repeat, so repeats
differ only in the sampler's seed.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from estimator.data import NoiseSpectrum, StrainSegment
from estimator.simulate import Injection, design_spectrum, simulate_segment
from estimator.waveform import chirp_time
from service.drill import optimal_snr, write_psd, write_strain

__all__ = [
    "BNS",
    "HEAVY_8S",
    "HEAVY_32S",
    "SCALING_F_LOW",
    "SPECTRUM",
    "START_TIME",
    "Drill",
    "Source",
    "make_drill",
    "scaling_source",
    "write_drill_files",
]

#: GPS start of every simulated segment, s (an arbitrary round number).
START_TIME = 1_000_000_000.0
#: The analytic design noise PSD, tabulated up to 4096 Hz (as ``chirpcast simulate`` does).
SPECTRUM: NoiseSpectrum = design_spectrum(f_max=4096.0)
#: Low band edge of the segment-length (flatness) comparison, Hz: one band for all lengths.
SCALING_F_LOW = 40.0


@dataclass(frozen=True)
class Source:
    """One simulated candidate.

    Masses are detector-frame Msun; ``snr`` is the optimal SNR from ``snr_f_low`` Hz
    (the distance is scaled to reach it unless ``effective_distance`` is given, Mpc);
    the signal coalesces ``2 s`` before the segment ends and the trigger time handed to
    the analysis is ``trigger_offset`` s after the true coalescence time.
    """

    name: str
    duration: float
    chirp_mass: float
    mass_ratio: float
    snr: float = 20.0
    snr_f_low: float = 20.0
    f_low: float = 20.0
    sample_rate: float = 4096.0
    noise_seed: int = 1
    effective_distance: float | None = None
    trigger_offset: float = 0.003
    #: Largest aligned-spin magnitude of the analysis prior (0.99 is the default;
    #: 0.05 the neutron-star choice).
    spin_max: float = 0.99

    @property
    def coalescence_time(self) -> float:
        """GPS time of coalescence, s."""
        return START_TIME + self.duration - 2.0


#: The 256 s, 4096 Hz binary-neutron-star-like case (chirp mass 1.2 Msun, q 0.85, SNR 20),
#: analysed with the neutron-star spin prior (each aligned spin uniform in [-0.05, 0.05]).
BNS = Source("BNS-like 256 s", 256.0, 1.2, 0.85, noise_seed=101, spin_max=0.05)
#: A heavier system in a 32 s segment.
HEAVY_32S = Source("heavy 32 s", 32.0, 20.0, 0.6, noise_seed=102)
#: A heavier system still, in an 8 s segment (q 0.8 and SNR 20 are our choice).
HEAVY_8S = Source("heavy 8 s", 8.0, 30.0, 0.8, noise_seed=103)


@dataclass(frozen=True)
class Drill:
    """A simulated segment and the injection in it."""

    source: Source
    injection: Injection
    segment: StrainSegment
    optimal_snr: float

    @property
    def trigger_time(self) -> float:
        """Trigger time handed to the analysis, GPS s."""
        return self.injection.coalescence_time + self.source.trigger_offset


def _snr(injection: Injection, source: Source, f_low: float) -> float:
    return optimal_snr(injection, SPECTRUM, duration=source.duration,
                       sample_rate=source.sample_rate, start_time=START_TIME, f_low=f_low)


def make_drill(source: Source) -> Drill:
    """Simulate ``source``: seeded coloured noise plus the injection, started 5 Hz below f_low."""
    tc = source.coalescence_time
    if source.effective_distance is None:
        unit = Injection(source.chirp_mass, source.mass_ratio, 100.0, tc, 1.3)
        distance = 100.0 * _snr(unit, source, source.snr_f_low) / source.snr
    else:
        distance = source.effective_distance
    injection = Injection(source.chirp_mass, source.mass_ratio, distance, tc, 1.3)
    segment = simulate_segment(
        SPECTRUM, duration=source.duration, sample_rate=source.sample_rate,
        start_time=START_TIME, rng=np.random.default_rng(source.noise_seed),
        injection=injection, f_start=max(source.f_low - 5.0, 10.0), detector="site-A",
    )
    return Drill(source, injection, segment, _snr(injection, source, source.f_low))


def scaling_source(duration: float, effective_distance: float) -> Source:
    """The BNS-like source at a fixed distance in a segment of ``duration`` s, from 40 Hz.

    Raises
    ------
    ValueError
        If the signal does not fit: the analysis needs ``1.1 tau_0(f_low)`` s of data
        before the trigger (Newtonian chirp time, Sathyaprakash & Dhurandhar 1991,
        Eq. 2.7, plus the analysis' 10% margin) and ``0.5 s`` of taper.
    """
    source = replace(BNS, name=f"BNS-like {duration:g} s", duration=duration,
                     f_low=SCALING_F_LOW, effective_distance=effective_distance,
                     noise_seed=200 + int(duration))
    needed = 1.1 * float(chirp_time(source.chirp_mass, source.f_low))
    available = source.coalescence_time - START_TIME - 0.5
    if needed > available:
        msg = (f"a {duration:g} s segment holds {available:.1f} s before coalescence but the "
               f"signal needs {needed:.1f} s above {source.f_low:g} Hz; raise f_low or the "
               "duration")
        raise ValueError(msg)
    return source


def write_drill_files(drill: Drill, folder: Path) -> tuple[Path, Path]:
    """Write ``strain.npz`` and ``psd.csv`` into ``folder`` (as ``chirpcast simulate`` does)."""
    folder.mkdir(parents=True, exist_ok=True)
    strain = write_strain(drill.segment, folder / "strain", "npz")
    psd = write_psd(SPECTRUM, folder / "psd.csv")
    return strain, psd
