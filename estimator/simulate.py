"""Drill data: coloured Gaussian noise from a PSD plus an injected inspiral.

Noise is drawn in the frequency domain, each rFFT bin an independent complex
Gaussian with ``<|n~(f)|^2> = (T/2) S(f)`` (the definition of the one-sided
PSD; e.g. Allen et al. 2012, PRD 85, 122006, Eq. 2.1), and transformed back.
The injection is the TaylorF2 model switched on smoothly at a starting
frequency, added in the frequency domain.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.fft
from numpy.typing import NDArray

from .data import NoiseSpectrum, StrainSegment
from .models import model_strain
from .network_model import SiteGeometry, antenna_factor
from .spectrum import interpolate_psd
from .waveform import time_to_coalescence

__all__ = [
    "TIME_DOMAIN",
    "Injection",
    "NetworkInjection",
    "analytic_design_psd",
    "design_spectrum",
    "injection_strain",
    "simulate_network",
    "simulate_segment",
]

Array = NDArray[np.float64]


def analytic_design_psd(frequencies: Array) -> Array:
    """Analytic fit to a second-generation interferometer's design noise PSD, 1/Hz.

    ``S(f) = 1e-49 [x^{-4.14} - 5 x^{-2} + 111 (1 - x^2 + x^4/2)/(1 + x^2/2)]``,
    ``x = f / 245.4 Hz`` (Ajith 2011, PRD 84, 084037, Eq. 4.7); meant for
    ``f >= 10 Hz``.
    """
    x = np.asarray(frequencies, dtype=float) / 245.4
    return np.asarray(
        1e-49 * (x**-4.14 - 5.0 * x**-2 + 111.0 * (1.0 - x**2 + 0.5 * x**4) / (1.0 + 0.5 * x**2)),
        dtype=float,
    )


def design_spectrum(f_min: float = 10.0, f_max: float = 4096.0, n: int = 2000) -> NoiseSpectrum:
    """The analytic design PSD tabulated on a log grid, as a :class:`NoiseSpectrum`."""
    f = np.geomspace(f_min, f_max, n)
    return NoiseSpectrum(
        frequencies=f,
        psd=analytic_design_psd(f),
        source="analytic design fit (Ajith 2011, PRD 84, 084037, Eq. 4.7)",
    )


#: Injected waveforms of :mod:`estimator.timedomain`, with where their inspiral ends.
TIME_DOMAIN = {"timedomain": "extremum", "timedomain-isco": "isco"}


@dataclass(frozen=True)
class Injection:
    """True parameters of a simulated signal (detector-frame masses).

    ``coalescence_time`` is GPS, s; ``effective_distance`` in Mpc.
    """

    chirp_mass: float
    mass_ratio: float
    effective_distance: float
    coalescence_time: float
    phase: float = 0.0
    spin1: float = 0.0
    spin2: float = 0.0
    #: Waveform injected: a model of :mod:`estimator.models` (``merger``, ``taylorf2``),
    #: or ``timedomain`` (:mod:`estimator.timedomain`, an independent waveform whose
    #: inspiral ends at the PN energy extremum) or ``timedomain-isco`` (the same,
    #: ended at the Schwarzschild ISCO).
    #: The merger model equals TaylorF2 up to the ISCO and continues smoothly beyond.
    model: str = "merger"


def injection_strain(
    injection: Injection,
    *,
    n_samples: int,
    sample_rate: float,
    start_time: float,
    f_start: float,
) -> NDArray[np.complex128]:
    """rFFT (continuous normalisation) of the injected signal on the segment's grid.

    The model is switched on over the first 10% above ``f_start`` by a cosine
    roll-on so its start does not ring. ``f_start`` is raised, if needed, until
    the signal starts at least 1 s after the segment start.
    """
    df = sample_rate / n_samples
    f = np.arange(n_samples // 2 + 1) * df
    available = injection.coalescence_time - start_time - 1.0
    while (
        float(time_to_coalescence(f_start, injection.chirp_mass, injection.mass_ratio)[0])
        > available
    ):
        f_start *= 1.05
    if injection.model in TIME_DOMAIN:
        return _timedomain_strain(injection, n_samples, sample_rate, start_time, f_start)
    h = np.zeros(f.size, dtype=complex)
    on = f >= f_start
    h[on] = model_strain(
        injection.model,
        f[on],
        injection.chirp_mass,
        injection.mass_ratio,
        injection.effective_distance,
        injection.coalescence_time - start_time,
        injection.phase,
        injection.spin1,
        injection.spin2,
    )
    ramp = np.clip((f - f_start) / (0.1 * f_start), 0.0, 1.0)
    return np.asarray(h * 0.5 * (1.0 - np.cos(np.pi * ramp)), dtype=complex)


def _timedomain_strain(
    injection: Injection, n_samples: int, sample_rate: float, start_time: float, f_start: float
) -> NDArray[np.complex128]:
    """rFFT of the time-domain waveform of :mod:`estimator.timedomain` on the segment.

    Its ``merger_time`` (end of the integrated inspiral) is set to the injection's
    ``coalescence_time``; the waveform carries its own roll-on from ``f_start``.
    """
    from .timedomain import td_strain

    times = start_time + np.arange(n_samples) / sample_rate
    strain = td_strain(
        times,
        chirp_mass=injection.chirp_mass,
        mass_ratio=injection.mass_ratio,
        spin1=injection.spin1,
        spin2=injection.spin2,
        effective_distance=injection.effective_distance,
        merger_time=injection.coalescence_time,
        phase=injection.phase,
        f_start=f_start,
        end=TIME_DOMAIN[injection.model],
    )
    return np.asarray(scipy.fft.rfft(strain) / sample_rate, dtype=complex)


def simulate_segment(
    spectrum: NoiseSpectrum,
    *,
    duration: float,
    sample_rate: float,
    start_time: float,
    rng: np.random.Generator,
    injection: Injection | None = None,
    f_start: float = 10.0,
    detector: str = "site-A",
) -> StrainSegment:
    """Coloured Gaussian noise described by ``spectrum``, plus an optional injection.

    Frequencies outside the spectrum's range get no noise.
    """
    n = round(duration * sample_rate)
    dt = 1.0 / sample_rate
    f = np.arange(n // 2 + 1) * (sample_rate / n)
    psd = np.zeros_like(f)
    inside = (f >= spectrum.frequencies[0]) & (f <= spectrum.frequencies[-1])
    psd[inside] = interpolate_psd(spectrum, f[inside])
    sigma = np.sqrt(psd * duration / 4.0)
    noise = sigma * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size))
    noise[0] = noise[0].real * np.sqrt(2.0)
    if n % 2 == 0:
        noise[-1] = noise[-1].real * np.sqrt(2.0)
    total = noise
    if injection is not None:
        total = noise + injection_strain(
            injection, n_samples=n, sample_rate=sample_rate, start_time=start_time, f_start=f_start
        )
    strain = scipy.fft.irfft(total, n) / dt
    return StrainSegment(
        strain=np.asarray(strain, dtype=float),
        sample_rate=sample_rate,
        start_time=start_time,
        source="simulated",
        detector=detector,
    )


@dataclass(frozen=True)
class NetworkInjection:
    """True parameters of a simulated signal seen by a network (detector-frame masses).

    Angles in radians; ``coalescence_time`` is the GPS time at the geocentre, s;
    ``luminosity_distance`` in Mpc.
    """

    chirp_mass: float
    mass_ratio: float
    luminosity_distance: float
    inclination: float
    polarization_angle: float
    right_ascension: float
    declination: float
    coalescence_time: float
    phase: float = 0.0


def simulate_network(
    injection: NetworkInjection,
    sites: list[SiteGeometry],
    spectra: list[NoiseSpectrum],
    *,
    gmst: float,
    duration: float,
    sample_rate: float,
    start_time: float,
    rng: np.random.Generator,
    f_start: float = 10.0,
) -> list[StrainSegment]:
    """One segment per site: independent noise plus the same signal, delayed and projected.

    Site ``I`` receives ``C_I h(t_c + dt_I)`` with the antenna factor ``C_I`` and
    delay ``dt_I`` of :mod:`estimator.network_model` (same conventions as the
    likelihood), ``h`` the TaylorF2 model at distance ``luminosity_distance``.
    """
    n = round(duration * sample_rate)
    dt = 1.0 / sample_rate
    ra = np.array([injection.right_ascension])
    dec = np.array([injection.declination])
    segments = []
    for site, spectrum in zip(sites, spectra, strict=True):
        noise = simulate_segment(
            spectrum,
            duration=duration,
            sample_rate=sample_rate,
            start_time=start_time,
            rng=rng,
            detector=site.name,
        )
        fp, fc = site.antenna_pattern(ra, dec, np.array([injection.polarization_angle]), gmst)
        factor = antenna_factor(np.asarray(fp), np.asarray(fc), np.array([injection.inclination]))
        arrival = injection.coalescence_time + float(np.asarray(site.time_delay(ra, dec, gmst))[0])
        signal = injection_strain(
            Injection(
                injection.chirp_mass,
                injection.mass_ratio,
                injection.luminosity_distance,
                arrival,
                injection.phase,
                model="taylorf2",  # the network analysis' model
            ),
            n_samples=n,
            sample_rate=sample_rate,
            start_time=start_time,
            f_start=f_start,
        )
        strain = noise.strain + scipy.fft.irfft(signal * factor[0], n) / dt
        segments.append(
            StrainSegment(
                strain=np.asarray(strain, dtype=float),
                sample_rate=sample_rate,
                start_time=start_time,
                source="simulated",
                detector=site.name,
            )
        )
    return segments
