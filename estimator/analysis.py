"""One analysis, from a strain segment and a noise spectrum to posterior samples.

Stages: check the inputs, condition the data, search for the signal near the
trigger, find the fiducial (maximum-likelihood) waveform, sample the posterior
with the relative-binning likelihood, check that likelihood against the exact
one on posterior draws (refining it when they differ), and derive the
quantities the report shows.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from .conditioning import DetectorData, condition
from .coordinates import ArrivalTime
from .data import NoiseSpectrum, StrainSegment
from .errors import InputError
from .fiducial import Fiducial, find_fiducial
from .fisher import FisherEstimate, fisher_estimate
from .gating import GlitchScan, find_glitches, gate_data
from .likelihood import ExactLikelihood
from .mode_scan import ModeScan, bank_spins, scan_spinning_modes, wants_mode_scan
from .models import model_top, resolve_model
from .posterior import LikelihoodCheck, sample_posterior
from .priors import InspiralPrior
from .relbin import RelativeBinningLikelihood
from .relbin_model import ModelRelativeBinning
from .sampler import ChainResult
from .search import SearchResult, search_chirp_mass, template_duration
from .settings import AnalysisSettings, settings_dict
from .spectrum import welch_psd
from .validation import check_analysis_inputs, default_f_high

__all__ = [
    "AnalysisResult",
    "AnalysisSettings",
    "LikelihoodCheck",
    "Progress",
    "analysis_prior",
    "raised_low_frequency",
    "run_analysis",
    "settings_dict",
    "stage_progress",
]

Array = NDArray[np.float64]
#: Called with (stage name, fraction of that stage done, overall fraction done).
Progress = Callable[[str, float, float], None]

#: Share of the total work each stage takes, for the progress bar.
#: The rest (to 1) is the caller's: writing the report.
_STAGES = (("search", 0.12), ("fiducial", 0.12), ("sampling", 0.53), ("check", 0.08))


@dataclass
class AnalysisResult:
    """All an analysis produced; the report and ``summary.json`` are built from it."""

    settings: AnalysisSettings
    seed: int
    segment: StrainSegment
    spectrum: NoiseSpectrum
    data: DetectorData
    search: SearchResult
    fiducial: Fiducial
    fisher: FisherEstimate  # at the fiducial; the instant preview of the widths
    chain: ChainResult  # in the sampler's coordinates, see ``coordinates``
    coordinates: ArrivalTime
    likelihood: RelativeBinningLikelihood | ModelRelativeBinning
    samples: dict[str, Array]
    sample_log_likelihood: Array
    check: LikelihoodCheck
    timings: dict[str, float]
    notes: list[str] = field(default_factory=list)
    #: The waveform model used (``settings.model`` resolved, see :mod:`estimator.models`).
    model: str = "taylorf2"
    #: The glitch scan and the gates applied (None when gating was off).
    glitches: GlitchScan | None = None
    #: ``(asked, used)`` low-frequency cut when the segment was too short for the asked one.
    f_low_raised: tuple[float, float] | None = None
    #: The aligned-spin mode scan before sampling (None when it did not run).
    mode_scan: ModeScan | None = None

    @property
    def f_high(self) -> float:
        """The upper band edge used, Hz."""
        return self.data.f_high


def stage_progress(
    progress: Progress | None,
    stage: str,
    stages: Sequence[tuple[str, float]] = _STAGES,
) -> Callable[[float], None]:
    """A ``fraction -> None`` callback reporting ``stage``'s progress within ``stages``.

    ``stages`` lists ``(name, share of the whole run)`` in order; the overall fraction
    is the shares of the earlier stages plus this one's share times ``fraction``.
    """
    done = 0.0
    for name, share in stages:
        if name == stage:
            break
        done += share
    share = dict(stages)[stage]

    def call(fraction: float) -> None:
        if progress is not None:
            progress(stage, fraction, done + share * min(max(fraction, 0.0), 1.0))

    return call


def _climb_from_search(
    found: SearchResult,
    datasets: Sequence[DetectorData],
    reference: float,
    settings: AnalysisSettings,
    exact: ExactLikelihood,
    model: str,
    progress: Callable[[float], None],
) -> list[Fiducial]:
    """Fits climbed from the search's loudest template, spins held at its own; best first.

    When the loudest template is spinning and a non-spinning one was found too,
    both are climbed and the higher exact likelihood leads (the search's
    templates end at the ISCO, so for a heavy source a spinning one can be
    louder there and yet far from the source); the first is the fiducial.
    """
    starts = [found] + ([found.plain] if found.plain is not None else [])
    climbs: list[Fiducial] = []
    for i, start in enumerate(starts):

        def step(fraction: float, i: int = i) -> None:
            progress((i + fraction) / len(starts))

        climbs.append(
            find_fiducial(
                datasets,
                reference,
                {
                    "chirp_mass": start.chirp_mass,
                    "mass_ratio": start.mass_ratio,
                    "coalescence_time": start.coalescence_time - reference,
                },
                mass_ratio_range=settings.mass_ratio_range,
                chirp_mass_range=settings.chirp_mass_range,
                time_window=settings.time_window,
                n_bins=settings.n_bins,
                progress=step,
                exact=exact,
                model=model,
                spins=(start.spin, start.spin),
            )
        )
    return sorted(climbs, key=lambda c: -c.log_likelihood)


def analysis_prior(settings: AnalysisSettings) -> InspiralPrior:
    """The prior an analysis with ``settings`` samples under (see :mod:`estimator.priors`)."""
    return InspiralPrior(
        chirp_mass=settings.chirp_mass_range,
        mass_ratio=settings.mass_ratio_range,
        component_mass=settings.component_mass_range,
        distance_max=settings.distance_max,
        time_window=settings.time_window,
        spin_max=settings.spin_max,
    )


#: Seconds before and after the coalescence time that gating never touches: the
#: signal's loudest part (a glitch there stays a warning of the transient check).
PROTECT_BEFORE = 0.25
PROTECT_AFTER = 0.1


def raised_low_frequency(
    found: SearchResult, f_low: float, available: float, top: float, source: str | None
) -> float | None:
    """The low-frequency cut at which the signal fits in ``available`` seconds, or None.

    ``None`` when ``f_low`` already fits. The signal's time above ``f`` scales as
    ``f^{-8/3}`` (the Newtonian chirp time, Sathyaprakash & Dhurandhar 1991), so the
    cut that fits is ``f_low (needed/available)^{3/8}``, plus 5% for the higher PN
    terms. Raises :class:`InputError` when that leaves less than an octave below
    the model's top frequency ``top`` (nothing useful to analyse).
    """
    needed = template_duration(found.chirp_mass, found.mass_ratio, f_low)
    if needed <= available:
        return None
    if available <= 0.0:
        msg = (
            "the trigger time lies inside the segment's start taper: no data precede the "
            "signal; supply a segment that starts before the trigger"
        )
        raise InputError(msg, source=source, field="trigger_time")
    f_ok = f_low * (needed / available) ** (3.0 / 8.0) * 1.05
    if f_ok > 0.5 * top:
        msg = (
            f"segment too short for this signal: only {available:.2f} s of untapered data "
            f"precede the trigger, so the analysis could start no lower than {f_ok:.0f} Hz, "
            f"leaving less than an octave below the signal's end near {top:.0f} Hz (a chirp "
            f"mass of {found.chirp_mass:.4g} Msun); supply a longer segment"
        )
        raise InputError(msg, source=source, field="f_low")
    return float(np.ceil(f_ok))


def run_analysis(
    segment: StrainSegment,
    spectrum: NoiseSpectrum | None,
    settings: AnalysisSettings,
    *,
    progress: Progress | None = None,
    preview: Callable[[FisherEstimate], None] | None = None,
) -> AnalysisResult:
    """Run the whole analysis of one detector's segment.

    ``preview`` is called with the Fisher-matrix estimate of the widths as soon
    as the fiducial is found, before sampling starts (an instant first look).

    Raises
    ------
    InputError
        When the inputs cannot be analysed as given (the message says why).
    """
    timings: dict[str, float] = {}
    notes: list[str] = []
    clock = time.perf_counter()
    seed = settings.seed
    if seed is None:
        seed = int(np.random.SeedSequence().generate_state(1)[0])
    rng = np.random.default_rng(seed)
    if spectrum is None:
        spectrum = welch_psd(segment)
        notes.extend(spectrum.notes)
    f_high = settings.f_high if settings.f_high is not None else default_f_high(segment, spectrum)
    check_analysis_inputs(
        segment,
        spectrum,
        trigger_time=settings.trigger_time,
        f_low=settings.f_low,
        f_high=f_high,
        time_window=settings.time_window,
    )
    mc_range = settings.chirp_mass_range
    search_range = mc_range
    if settings.chirp_mass_guess is not None:
        guess = settings.chirp_mass_guess
        if not mc_range[0] <= guess <= mc_range[1]:
            msg = (
                f"chirp-mass guess {guess:g} Msun is outside the prior range "
                f"[{mc_range[0]:g}, {mc_range[1]:g}] Msun; widen the range or fix the guess"
            )
            raise InputError(msg, field="chirp_mass_guess")
        search_range = (max(mc_range[0], guess * 0.9), min(mc_range[1], guess * 1.1))
    prior = analysis_prior(settings)
    data = condition(
        segment,
        spectrum,
        f_low=settings.f_low,
        f_high=f_high,
        taper_duration=settings.taper_duration,
    )
    timings["conditioning"] = time.perf_counter() - clock

    clock = time.perf_counter()
    found = search_chirp_mass(
        segment,
        spectrum,
        trigger_time=settings.trigger_time,
        chirp_mass_range=search_range,
        f_low=settings.f_low,
        f_high=f_high,
        time_window=settings.time_window,
        taper_duration=settings.taper_duration,
        progress=stage_progress(progress, "search"),
        mass_ratios=tuple(
            q
            for q in (1.0, 0.5, 0.25)
            if settings.mass_ratio_range[0] <= q <= settings.mass_ratio_range[1]
        )
        or (settings.mass_ratio_range[1],),
        spins=bank_spins(prior.spin_max),
    )
    timings["search"] = time.perf_counter() - clock
    model = resolve_model(
        settings.model, found.chirp_mass, found.mass_ratio, data.frequencies, data.psd
    )
    available = settings.trigger_time - segment.start_time - settings.taper_duration
    top = min(f_high, float(model_top(model, found.chirp_mass, found.mass_ratio)))
    f_raised = raised_low_frequency(found, settings.f_low, available, top, segment.source)
    f_low_raised = None
    if f_raised is not None:
        f_low_raised = (settings.f_low, f_raised)
        data = condition(
            segment, spectrum, f_low=f_raised, f_high=f_high, taper_duration=settings.taper_duration
        )
        notes.append(
            f"the segment starts too close to the signal for f_low = {settings.f_low:g} Hz "
            f"({available:.1f} s of untapered data before the trigger): the low-frequency "
            f"cut was raised to {f_raised:g} Hz"
        )
    glitches = None
    if settings.gating:
        tc_gps = found.coalescence_time
        glitches = find_glitches(data, protect=(tc_gps - PROTECT_BEFORE, tc_gps + PROTECT_AFTER))
        if glitches.gates:
            data = gate_data(data, glitches.gates)
            where = ", ".join(f"{g.centre - tc_gps:+.2f} s" for g in glitches.gates)
            notes.append(
                f"{len(glitches.gates)} loud short glitch(es) away from the signal gated "
                f"(inverse Tukey window of the whitened data) at {where} from coalescence"
            )

    clock = time.perf_counter()
    reference = settings.trigger_time
    datasets = [data]
    exact = ExactLikelihood(datasets, reference, model=model)
    climbs = _climb_from_search(
        found, datasets, reference, settings, exact, model, stage_progress(progress, "fiducial")
    )
    fiducial = climbs[0]
    timings["fiducial"] = time.perf_counter() - clock
    mode_scan = None
    centres = [
        c
        for c in climbs
        if wants_mode_scan(
            c.params["chirp_mass"], c.params["mass_ratio"], data.f_low, prior.spin_max
        )
    ]
    if prior.spinning and centres:
        clock = time.perf_counter()
        mode_scan = scan_spinning_modes(
            segment,
            spectrum,
            fiducial,
            datasets=datasets,
            exact=exact,
            reference_time=reference,
            model=model,
            f_low=data.f_low,
            f_high=f_high,
            chirp_mass_range=mc_range,
            mass_ratio_range=settings.mass_ratio_range,
            spin_max=prior.spin_max,
            time_window=settings.time_window,
            n_bins=settings.n_bins,
            taper_duration=settings.taper_duration,
            centres=centres,
        )
        timings["mode_scan"] = time.perf_counter() - clock
        if mode_scan.adopted and mode_scan.candidate is not None:
            fiducial = mode_scan.candidate
            p = fiducial.params
            notes.append(
                f"an aligned-spin template scan found a likelihood peak {mode_scan.gain:.1f} "
                f"above the fit climbed from the search (chirp mass {p['chirp_mass']:.3g} Msun, "
                f"q {p['mass_ratio']:.2f}, spins {p.get('spin1', 0.0):+.2f}); "
                "the sampler started there"
            )
    clock = time.perf_counter()
    fisher = fisher_estimate(datasets, fiducial.params, model=model)
    timings["fiducial"] += time.perf_counter() - clock
    if preview is not None:
        preview(fisher)

    run = sample_posterior(
        datasets,
        reference,
        fiducial.params,
        fisher=fisher,
        prior=prior,
        exact=exact,
        settings=settings,
        rng=rng,
        seed=seed,
        progress=stage_progress(progress, "sampling"),
        model=model,
    )
    stage_progress(progress, "check")(1.0)
    notes.extend(run.notes)
    chain, coords, binned, check = run.chain, run.coordinates, run.likelihood, run.check
    timings["sampling"] = run.sampling_time
    timings["likelihood_check"] = run.check_time
    samples = run.samples
    return AnalysisResult(
        settings=settings,
        seed=seed,
        segment=segment,
        spectrum=spectrum,
        data=data,
        search=found,
        fiducial=fiducial,
        fisher=fisher,
        chain=chain,
        coordinates=coords,
        likelihood=binned,
        samples=samples,
        sample_log_likelihood=run.sample_log_likelihood,
        check=check,
        timings=timings,
        notes=notes,
        model=model,
        glitches=glitches,
        f_low_raised=f_low_raised,
        mode_scan=mode_scan,
    )
