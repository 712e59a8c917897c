"""One analysis, from a strain segment and a noise spectrum to posterior samples.

Stages: check the inputs, condition the data, search for the signal near the
trigger, find the fiducial (maximum-likelihood) waveform, sample the posterior
with the relative-binning likelihood, check that likelihood against the exact
one on posterior draws (refining it when they differ), and derive the
quantities the report shows.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass, field
from functools import partial

import numpy as np
from numpy.typing import NDArray

from .conditioning import DetectorData, condition
from .coordinates import ArrivalTime, reference_frequency
from .data import NoiseSpectrum, StrainSegment
from .errors import InputError
from .fiducial import Fiducial, _scales, curvature_covariance, find_fiducial
from .likelihood import ExactLikelihood
from .priors import InspiralPrior
from .relbin import RelativeBinningLikelihood
from .sampler import ChainResult, run_ensemble
from .search import SearchResult, search_chirp_mass, template_duration
from .spectrum import welch_psd
from .validation import check_analysis_inputs, default_f_high

__all__ = ["AnalysisResult", "AnalysisSettings", "LikelihoodCheck", "Progress", "run_analysis"]

Array = NDArray[np.float64]
#: Called with (stage name, fraction of that stage done, overall fraction done).
Progress = Callable[[str, float, float], None]

#: Share of the total work each stage takes, for the progress bar.
#: The rest (to 1) is the caller's: writing the report.
_STAGES = (("search", 0.12), ("fiducial", 0.12), ("sampling", 0.53), ("check", 0.08))


@dataclass(frozen=True)
class AnalysisSettings:
    """Everything that controls one analysis (all of it is stored with the result).

    Masses are detector-frame solar masses, distances Mpc, times GPS seconds,
    frequencies Hz. ``f_high=None`` takes the largest usable frequency;
    ``seed=None`` draws one (and records it).
    """

    trigger_time: float
    f_low: float = 20.0
    f_high: float | None = None
    chirp_mass_guess: float | None = None
    chirp_mass_range: tuple[float, float] = (0.4, 80.0)
    mass_ratio_range: tuple[float, float] = (0.1, 1.0)
    component_mass_range: tuple[float, float] = (0.5, 150.0)
    distance_max: float = 10_000.0
    time_window: float = 0.1
    seed: int | None = None
    walkers: int = 32
    max_steps: int = 20_000
    target_effective_samples: float = 2000.0
    n_bins: int = 96
    likelihood_tolerance: float = 0.05
    check_draws: int = 100
    max_refinements: int = 2
    taper_duration: float = 0.5


@dataclass(frozen=True)
class LikelihoodCheck:
    """Relative-binning vs exact log-likelihood on posterior draws."""

    draws: int
    max_abs_difference: float
    tolerance: float
    passed: bool
    bins: int
    refinements: int


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
    chain: ChainResult  # in the sampler's coordinates, see ``coordinates``
    coordinates: ArrivalTime
    likelihood: RelativeBinningLikelihood
    samples: dict[str, Array]
    sample_log_likelihood: Array
    check: LikelihoodCheck
    timings: dict[str, float]
    notes: list[str] = field(default_factory=list)

    @property
    def f_high(self) -> float:
        """The upper band edge used, Hz."""
        return self.data.f_high


def _report(progress: Progress | None, stage: str) -> Callable[[float], None]:
    done = 0.0
    for name, share in _STAGES:
        if name == stage:
            break
        done += share
    share = dict(_STAGES)[stage]

    def call(fraction: float) -> None:
        if progress is not None:
            progress(stage, fraction, done + share * min(max(fraction, 0.0), 1.0))

    return call


def _physical_likelihood(
    like: RelativeBinningLikelihood, coords: ArrivalTime, u: Mapping[str, Array]
) -> Array:
    """Log-likelihood of sampler coordinates ``u``."""
    return like.log_likelihood(coords.to_physical(u))


def _start_walkers(
    rng: np.random.Generator,
    log_prior: Callable[[Mapping[str, Array]], Array],
    log_like: Callable[[Mapping[str, Array]], Array],
    center: dict[str, float],
    scales: dict[str, float],
    walkers: int,
    names: tuple[str, ...],
) -> Array:
    """Walkers drawn from the curvature Gaussian at the fiducial, kept inside the prior."""
    steps = dict(scales)
    cov = np.diag([steps[k] ** 2 for k in names])
    for _ in range(3):
        # Steps of about one standard deviation give the curvature best; the mass
        # ratio, often barely measured, keeps its step inside its unit-wide range.
        cov = curvature_covariance(log_like, center, steps, names)
        steps = {k: float(np.sqrt(cov[i, i])) for i, k in enumerate(names)}
        steps["mass_ratio"] = min(steps["mass_ratio"], 0.1)
    mean = np.array([center[k] for k in names])
    out = np.empty((0, len(names)))
    for _ in range(100):
        draws = rng.multivariate_normal(mean, cov, size=4 * walkers)
        lp = log_prior({k: draws[:, i] for i, k in enumerate(names)})
        out = np.vstack([out, draws[np.isfinite(lp)]])
        if out.shape[0] >= walkers:
            return out[:walkers]
        cov = cov * 0.25
    msg = "could not place the sampler's walkers inside the prior around the fiducial"
    raise InputError(msg, field="prior")


def run_analysis(
    segment: StrainSegment,
    spectrum: NoiseSpectrum | None,
    settings: AnalysisSettings,
    *,
    progress: Progress | None = None,
) -> AnalysisResult:
    """Run the whole analysis of one detector's segment.

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
    prior = InspiralPrior(
        chirp_mass=mc_range,
        mass_ratio=settings.mass_ratio_range,
        component_mass=settings.component_mass_range,
        distance_max=settings.distance_max,
        time_window=settings.time_window,
    )
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
        progress=_report(progress, "search"),
        mass_ratios=tuple(
            q
            for q in (1.0, 0.5, 0.25)
            if settings.mass_ratio_range[0] <= q <= settings.mass_ratio_range[1]
        )
        or (settings.mass_ratio_range[1],),
    )
    timings["search"] = time.perf_counter() - clock
    needed = template_duration(found.chirp_mass, found.mass_ratio, settings.f_low)
    available = settings.trigger_time - segment.start_time - settings.taper_duration
    if needed > available:
        f_ok = settings.f_low * (needed / available) ** (3.0 / 8.0) * 1.05
        msg = (
            f"segment too short for the band: a chirp mass of {found.chirp_mass:.4g} Msun "
            f"stays above f_low = {settings.f_low:g} Hz for {needed:.1f} s, but only "
            f"{available:.1f} s of data precede the trigger; raise f_low to about "
            f"{f_ok:.0f} Hz or supply a longer segment"
        )
        raise InputError(msg, source=segment.source, field="f_low")

    clock = time.perf_counter()
    reference = settings.trigger_time
    datasets = [data]
    exact = ExactLikelihood(datasets, reference)
    fiducial = find_fiducial(
        datasets,
        reference,
        {
            "chirp_mass": found.chirp_mass,
            "mass_ratio": found.mass_ratio,
            "coalescence_time": found.coalescence_time - reference,
        },
        mass_ratio_range=settings.mass_ratio_range,
        chirp_mass_range=mc_range,
        time_window=settings.time_window,
        n_bins=settings.n_bins,
        progress=_report(progress, "fiducial"),
        exact=exact,
    )
    timings["fiducial"] = time.perf_counter() - clock

    n_bins = settings.n_bins
    center = fiducial.params
    coords = ArrivalTime(reference_frequency(data, center["chirp_mass"], center["mass_ratio"]))
    names = coords.names
    sampling_time = check_time = 0.0
    chain: ChainResult | None = None
    check: LikelihoodCheck | None = None
    start: Array | None = None
    for refinement in range(settings.max_refinements + 1):
        clock = time.perf_counter()
        binned = RelativeBinningLikelihood(datasets, reference, center, n_bins=n_bins)

        if start is None:
            base = _scales(center["chirp_mass"], settings.f_low)
            scales = {
                "chirp_mass": base[0],
                "mass_ratio": base[1],
                "effective_distance": base[2] * center["effective_distance"],
                "arrival_time": base[3],
            }
            center_u = {k: float(v[0]) for k, v in coords.from_physical(
                {k: np.array([v]) for k, v in center.items()}).items()}
            start = _start_walkers(
                rng,
                lambda u: prior.log_prob(coords.to_physical(u)),
                partial(_physical_likelihood, binned, coords),
                center_u,
                scales,
                settings.walkers,
                names,
            )
            # A first look before sampling: points spread twice as widely as the starting
            # walkers (about as widely as the posterior's tails) must already meet the
            # tolerance; long, many-cycle signals need more bins than the default.
            mid = np.array([center_u[k] for k in names])
            wide = mid + 2.0 * (start - mid)
            wide[:, 1] = np.clip(wide[:, 1], *settings.mass_ratio_range)
            wide[:, 2] = np.abs(wide[:, 2])
            points = coords.to_physical({k: wide[:, j] for j, k in enumerate(names)})
            for _ in range(2):
                gap = np.max(np.abs(exact.log_likelihood(points) - binned.log_likelihood(points)))
                if gap <= settings.likelihood_tolerance:
                    break
                n_bins *= 2
                binned = RelativeBinningLikelihood(datasets, reference, center, n_bins=n_bins)

        def log_post(u: Mapping[str, Array], like: RelativeBinningLikelihood = binned) -> Array:
            p = coords.to_physical(u)
            lp = prior.log_prob(p)
            out = np.full(lp.shape, -np.inf)
            ok = np.isfinite(lp)
            if np.any(ok):
                out[ok] = lp[ok] + like.log_likelihood({k: v[ok] for k, v in p.items()})
            return out

        chain = run_ensemble(
            log_post,
            start,
            names,
            seed=seed + refinement,
            max_steps=settings.max_steps,
            target_effective_samples=settings.target_effective_samples,
            progress=_report(progress, "sampling"),
        )
        sampling_time += time.perf_counter() - clock

        clock = time.perf_counter()
        samples = coords.to_physical(chain.samples())
        n_draw = min(settings.check_draws, samples["chirp_mass"].size)
        pick = rng.choice(samples["chirp_mass"].size, n_draw, replace=False)
        drawn = {k: v[pick] for k, v in samples.items()}
        diff = np.abs(exact.log_likelihood(drawn) - binned.log_likelihood(drawn))
        worst = float(np.max(diff))
        check = LikelihoodCheck(
            draws=n_draw,
            max_abs_difference=worst,
            tolerance=settings.likelihood_tolerance,
            passed=worst <= settings.likelihood_tolerance,
            bins=binned.bins,
            refinements=refinement,
        )
        _report(progress, "check")(1.0)
        check_time += time.perf_counter() - clock
        if check.passed:
            break
        # Refine: re-centre on the best posterior sample and use twice the bins.
        best = int(np.argmax(chain.sample_log_prob()))
        center = {k: float(v[best]) for k, v in samples.items()}
        n_bins *= 2
        start = chain.chain[-1]
        notes.append(
            f"relative-binning check failed (max |difference| {worst:.3f} > "
            f"{settings.likelihood_tolerance}); refined with a new fiducial and {n_bins} bins"
        )
    if chain is None or check is None:  # pragma: no cover - the loop runs at least once
        msg = "sampling did not run"
        raise RuntimeError(msg)
    if not check.passed:
        notes.append(
            "relative-binning likelihood still differs from the exact one after "
            "refinement; treat the intervals with extra caution"
        )
    if not chain.converged:
        notes.append(
            f"the sampler reached its step cap ({settings.max_steps}) before the "
            "autocorrelation-time criterion was met; the intervals may be unreliable"
        )
    timings["sampling"] = sampling_time
    timings["likelihood_check"] = check_time
    samples = coords.to_physical(chain.samples())
    return AnalysisResult(
        settings=settings,
        seed=seed,
        segment=segment,
        spectrum=spectrum,
        data=data,
        search=found,
        fiducial=fiducial,
        chain=chain,
        coordinates=coords,
        likelihood=binned,
        samples=samples,
        sample_log_likelihood=binned.log_likelihood(samples),
        check=check,
        timings=timings,
        notes=notes,
    )


def settings_dict(settings: AnalysisSettings) -> dict[str, object]:
    """Settings as plain JSON-ready values."""
    return {k: (list(v) if isinstance(v, tuple) else v) for k, v in asdict(settings).items()}
