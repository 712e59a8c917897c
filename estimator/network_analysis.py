"""One coherent analysis of several detectors, from their segments to posterior samples.

Stages: check the inputs, estimate missing spectra, condition every detector's
data, search each detector for the signal near the trigger (the loudest one
anchors the rest), find the best-fit masses on the loudest detector, scan the
sky with the coherent SNR, sample the network posterior (chirp mass, mass
ratio, luminosity distance, inclination, polarisation angle, right ascension,
declination, geocentric coalescence time; the phase marginalised) and check
its binned likelihood against the exact one. The one-detector path is
:func:`estimator.analysis.run_analysis`, unchanged.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from .analysis import Progress, analysis_prior, stage_progress
from .conditioning import DetectorData, condition
from .coordinates import reference_frequency
from .data import NoiseSpectrum, StrainSegment
from .errors import InputError
from .fiducial import find_fiducial
from .likelihood import ExactLikelihood
from .network_model import ExactNetworkLikelihood, NetworkLikelihood
from .network_prior import NetworkCoordinates, NetworkPrior
from .network_sampling import sample_network_posterior
from .posterior import LikelihoodCheck
from .sampler import ChainResult
from .search import SearchResult, search_chirp_mass, template_duration
from .settings import AnalysisSettings
from .sites import Site, gps_to_gmst
from .sky_scan import SkyScan, sky_scan
from .spectrum import welch_psd
from .validation import check_analysis_inputs, default_f_high

__all__ = ["DetectorInput", "NetworkResult", "run_network_analysis"]

Array = NDArray[np.float64]

#: Share of the total work each stage takes, for the progress bar (the rest: the report).
_STAGES = (("search", 0.12), ("fiducial", 0.10), ("sky scan", 0.04), ("sampling", 0.55))


@dataclass(frozen=True)
class DetectorInput:
    """One detector of a network: where it is, its data and (optionally) its noise spectrum."""

    site: Site
    segment: StrainSegment
    spectrum: NoiseSpectrum | None = None


@dataclass
class NetworkResult:
    """All a network analysis produced; the report and ``summary.json`` are built from it."""

    settings: AnalysisSettings
    seed: int
    sites: list[Site]
    segments: list[StrainSegment]
    spectra: list[NoiseSpectrum]
    data: list[DetectorData]
    reference_time: float
    gmst: float
    searches: list[SearchResult]
    loudest: int
    scan: SkyScan
    fiducial: dict[str, float]
    fiducial_log_likelihood: float
    chain: ChainResult
    coordinates: NetworkCoordinates
    likelihood: NetworkLikelihood
    exact: ExactNetworkLikelihood
    samples: dict[str, Array]
    sample_log_likelihood: Array
    check: LikelihoodCheck
    walkers: int
    timings: dict[str, float]
    notes: list[str] = field(default_factory=list)

    @property
    def names(self) -> list[str]:
        """The detectors' names, in input order."""
        return [s.name for s in self.sites]


def _stage(progress: Progress | None, stage: str) -> Callable[[float], None]:
    return stage_progress(progress, stage, _STAGES)


def _share(report: Callable[[float], None], k: int, n: int) -> Callable[[float], None]:
    """Progress of the ``k``-th of ``n`` equal parts of a stage."""
    return lambda x: report((k + x) / n)


def run_network_analysis(
    inputs: Sequence[DetectorInput],
    settings: AnalysisSettings,
    *,
    progress: Progress | None = None,
) -> NetworkResult:
    """Run the coherent analysis of several detectors (module docstring).

    Raises
    ------
    InputError
        When the inputs cannot be analysed together (the message names the detector).
    """
    timings: dict[str, float] = {}
    notes: list[str] = []
    clock = time.perf_counter()
    if len(inputs) < 2:
        msg = f"a network analysis needs at least two detectors, got {len(inputs)}"
        raise InputError(msg, field="detectors")
    seed = settings.seed
    if seed is None:
        seed = int(np.random.SeedSequence().generate_state(1)[0])
    rng = np.random.default_rng(seed)
    spectra: list[NoiseSpectrum] = []
    for item in inputs:
        spectrum = item.spectrum
        if spectrum is None:
            spectrum = welch_psd(item.segment)
            notes.extend(f"{item.site.name}: {n}" for n in spectrum.notes)
        spectra.append(spectrum)
    f_high = settings.f_high
    if f_high is None:
        f_high = min(default_f_high(i.segment, s) for i, s in zip(inputs, spectra, strict=True))
    for item, spectrum in zip(inputs, spectra, strict=True):
        try:
            check_analysis_inputs(
                item.segment,
                spectrum,
                trigger_time=settings.trigger_time,
                f_low=settings.f_low,
                f_high=f_high,
                time_window=settings.time_window,
            )
        except InputError as err:
            raise InputError(
                f"detector {item.site.name}: {err}", source=err.source, where=err.where,
                field=f"detector:{item.site.name}:{err.field or 'strain'}",
            ) from err
    data = [
        condition(
            i.segment,
            s,
            f_low=settings.f_low,
            f_high=f_high,
            taper_duration=settings.taper_duration,
        )
        for i, s in zip(inputs, spectra, strict=True)
    ]
    timings["conditioning"] = time.perf_counter() - clock

    clock = time.perf_counter()
    report = _stage(progress, "search")
    mc_range = settings.chirp_mass_range
    if settings.chirp_mass_guess is not None:
        guess = settings.chirp_mass_guess
        mc_range = (max(mc_range[0], guess * 0.9), min(mc_range[1], guess * 1.1))
    ratios = tuple(
        q for q in (1.0, 0.5, 0.25)
        if settings.mass_ratio_range[0] <= q <= settings.mass_ratio_range[1]
    ) or (settings.mass_ratio_range[1],)
    searches = []
    for k, (item, spectrum) in enumerate(zip(inputs, spectra, strict=True)):
        searches.append(
            search_chirp_mass(
                item.segment,
                spectrum,
                trigger_time=settings.trigger_time,
                chirp_mass_range=mc_range,
                f_low=settings.f_low,
                f_high=f_high,
                time_window=settings.time_window + 0.03,
                taper_duration=settings.taper_duration,
                progress=_share(report, k, len(inputs)),
                mass_ratios=ratios,
            )
        )
    loudest = int(np.argmax([s.snr for s in searches]))
    found = searches[loudest]
    timings["search"] = time.perf_counter() - clock
    needed = template_duration(found.chirp_mass, found.mass_ratio, settings.f_low)
    available = settings.trigger_time - max(i.segment.start_time for i in inputs)
    if needed > available - settings.taper_duration:
        msg = (
            f"segments too short for the band: a chirp mass of {found.chirp_mass:.4g} Msun "
            f"stays above f_low = {settings.f_low:g} Hz for {needed:.1f} s, but only "
            f"{available - settings.taper_duration:.1f} s of data precede the trigger in "
            "every detector; raise f_low or supply longer segments"
        )
        raise InputError(msg, field="f_low")

    clock = time.perf_counter()
    reference = settings.trigger_time
    fid = find_fiducial(
        [data[loudest]],
        reference,
        {
            "chirp_mass": found.chirp_mass,
            "mass_ratio": found.mass_ratio,
            "coalescence_time": found.coalescence_time - reference,
        },
        mass_ratio_range=settings.mass_ratio_range,
        chirp_mass_range=settings.chirp_mass_range,
        time_window=settings.time_window + 0.03,
        n_bins=settings.n_bins,
        progress=_stage(progress, "fiducial"),
        exact=ExactLikelihood([data[loudest]], reference),
    )
    timings["fiducial"] = time.perf_counter() - clock

    clock = time.perf_counter()
    gmst = gps_to_gmst(reference)
    sites = [i.site for i in inputs]
    scan = sky_scan(
        data,
        sites,
        gmst=gmst,
        reference_time=reference,
        chirp_mass=fid.params["chirp_mass"],
        mass_ratio=fid.params["mass_ratio"],
        time_window=settings.time_window,
    )
    _stage(progress, "sky scan")(1.0)
    timings["sky_scan"] = time.perf_counter() - clock

    prior = NetworkPrior(analysis_prior(settings))
    f_ref = reference_frequency(data[loudest], fid.params["chirp_mass"], fid.params["mass_ratio"])
    coords = NetworkCoordinates(sites[loudest], gmst, f_ref)
    walkers = max(settings.walkers or 64, 64)
    run = sample_network_posterior(
        data,
        sites,
        reference=reference,
        gmst=gmst,
        scan=scan,
        coords=coords,
        center=fid.params,
        prior=prior,
        settings=settings,
        rng=rng,
        seed=seed,
        walkers=walkers,
        progress=_stage(progress, "sampling"),
    )
    timings["sampling"] = run.sampling_time
    timings["likelihood_check"] = run.check_time
    notes.extend(run.notes)
    return NetworkResult(
        settings=settings,
        seed=seed,
        sites=sites,
        segments=[i.segment for i in inputs],
        spectra=spectra,
        data=data,
        reference_time=reference,
        gmst=gmst,
        searches=searches,
        loudest=loudest,
        scan=scan,
        fiducial=run.fiducial,
        fiducial_log_likelihood=run.fiducial_log_likelihood,
        chain=run.chain,
        coordinates=run.coordinates,
        likelihood=run.likelihood,
        exact=ExactNetworkLikelihood(data, sites, reference, gmst, run.likelihood.marginal),
        samples=run.samples,
        sample_log_likelihood=run.sample_log_likelihood,
        check=run.check,
        walkers=walkers,
        timings=timings,
        notes=notes,
    )
