"""Sampling the several-detector posterior: seeds from the sky scan, emcee, checks.

Walkers start from candidates drawn around the sky points the coherent scan
(:mod:`estimator.sky_scan`) found loud, in proportion to ``exp(rho^2 / 2)``,
each with its sky position jittered by about half the grid spacing, the arrival
time at the loudest site kept at its peak, an isotropic orientation, and the
distance that maximises the likelihood there; the best candidate is polished
by a Nelder–Mead climb and becomes the relative-binning fiducial. Walkers are
then chosen among candidates within :data:`NETWORK_START_DEPTH` of the best.

The sampler mixes emcee's differential-evolution move with the same move at
``gamma = 1`` one time in ten, which carries a walker from one mode to the
position of another walker's mode (ter Braak 2006, Stat. Comput. 16, 239,
Sec. 2: "gamma = 1 ... to jump between modes"); that lets walkers move between
sky modes so that their shares follow the posterior rather than the start;
and one time in ten a sky jump proposed from the scan itself
(:class:`estimator.network_moves.SkyJumpMove`), which reaches modes no walker
sits in.
As for one detector, the binned likelihood is checked against the exact one
on posterior draws, refined (re-centred, twice the bins) when they differ, and
the samples reweighted with the exact likelihood as a last resort
(:mod:`estimator.posterior`).
"""

from __future__ import annotations

import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import emcee
import numpy as np
import scipy.optimize
from numpy.typing import NDArray

from .conditioning import DetectorData
from .distance_marginal import DistanceMarginal
from .errors import InputError
from .likelihood import log_i0
from .network_model import ExactNetworkLikelihood, NetworkLikelihood, SiteGeometry
from .network_moves import SkyJumpMove
from .network_prior import PERIODS, NetworkCoordinates, NetworkPrior
from .posterior import LikelihoodCheck, reweight_exactly
from .sampler import ChainResult, run_ensemble
from .settings import AnalysisSettings
from .sky_scan import SkyScan

__all__ = ["NETWORK_START_DEPTH", "NetworkPosteriorRun", "sample_network_posterior"]

Array = NDArray[np.float64]
Params = Mapping[str, Array]

#: Start points lie at most this far below the best log-posterior: half the 99.9%
#: quantile of chi^2 with 8 degrees of freedom (common practice).
NETWORK_START_DEPTH = 13.06
#: A walker whose best log-posterior over a check interval stays this far below the
#: median is stranded in a negligible mode (for a 7-parameter Gaussian posterior the
#: 1e-4 quantile of the log-posterior lies 11.4 below its median: half the chi^2_7
#: quantiles, common practice); it is regrouped while burning in.
STRANDED_GAP_7D = 15.0
#: At most about this many posterior samples are kept (the sky map, the corner plot and
#: samples.csv need no more; the effective sample size is typically 2000-5000).
MAX_SAMPLES = 16_000


@dataclass
class NetworkPosteriorRun:
    """What :func:`sample_network_posterior` produced."""

    chain: ChainResult
    coordinates: NetworkCoordinates
    likelihood: NetworkLikelihood
    check: LikelihoodCheck
    samples: dict[str, Array]
    sample_log_likelihood: Array
    fiducial: dict[str, float]
    fiducial_log_likelihood: float
    notes: list[str]
    sampling_time: float
    check_time: float


def log_posterior(
    like: NetworkLikelihood | ExactNetworkLikelihood,
    prior: NetworkPrior,
    coords: NetworkCoordinates,
) -> Callable[[Params], Array]:
    """Log-posterior (unnormalised) as a function of the sampler's coordinates."""

    def f(u: Params) -> Array:
        p = coords.to_physical(u)
        lp = np.where(coords.inside(u), prior.log_prob(p), -np.inf)
        out = np.full(lp.shape, -np.inf)
        ok = np.isfinite(lp)
        if np.any(ok):
            out[ok] = lp[ok] + like.log_likelihood({k: v[ok] for k, v in p.items()})
        return np.where(np.isnan(out), -np.inf, out)

    return f


def _candidates(
    scan: SkyScan,
    coords: NetworkCoordinates,
    like: NetworkLikelihood,
    center: Mapping[str, float],
    rng: np.random.Generator,
    n: int,
) -> dict[str, Array]:
    """Sampler-coordinate candidates drawn around the loud sky points (module docstring)."""
    half = 0.5 * scan.snr2
    weight = np.exp(half - half.max())
    weight[half < half.max() - 20.0] = 0.0
    pick = rng.choice(scan.snr2.size, n, p=weight / weight.sum())
    ra0, dec0 = scan.right_ascension[pick], scan.declination[pick]
    mc = np.full(n, center["chirp_mass"]) * (1.0 + 2e-4 * rng.standard_normal(n))
    q = np.clip(center["mass_ratio"] + 0.02 * rng.standard_normal(n), 0.05, 1.0)
    base = coords.from_physical(
        {
            "chirp_mass": mc,
            "mass_ratio": q,
            "inclination": np.zeros(n),
            "polarization_angle": np.zeros(n),
            "right_ascension": ra0,
            "declination": dec0,
            "coalescence_time": scan.time[pick],
        }
    )
    jitter = 0.5 * scan.spacing
    sin_dec = np.sin(dec0) + jitter * np.cos(dec0) * rng.standard_normal(n)
    u = {
        **base,
        "right_ascension": ra0 + jitter * rng.standard_normal(n) / np.maximum(np.cos(dec0), 0.05),
        "sin_declination": np.clip(sin_dec, -1.0, 1.0),
        "cos_inclination": rng.uniform(-1.0, 1.0, n),
        "polarization_angle": rng.uniform(0.0, 0.5 * np.pi, n),
    }
    return u


def _polish(
    post: Callable[[Params], Array], start: Mapping[str, float], names: Sequence[str]
) -> dict[str, float]:
    """Nelder–Mead climb of the log-posterior from ``start`` (sampler coordinates)."""
    x0 = np.array([start[k] for k in names])
    scale = np.array(
        [
            1e-4 * x0[0],
            0.02,
            0.05,
            0.05,
            0.01,
            0.01,
            1e-4,
        ]
    )

    def objective(y: Array) -> float:
        value = post({k: np.array([x0[i] + scale[i] * y[i]]) for i, k in enumerate(names)})
        return -float(value[0]) if np.isfinite(value[0]) else 1e30

    res = scipy.optimize.minimize(
        objective,
        np.zeros(len(names)),
        method="Nelder-Mead",
        options={"xatol": 1e-3, "fatol": 1e-3, "maxiter": 1500, "adaptive": True},
    )
    return {k: float(x0[i] + scale[i] * res.x[i]) for i, k in enumerate(names)}


def _check(
    samples: Mapping[str, Array],
    binned: NetworkLikelihood,
    exact: ExactNetworkLikelihood,
    settings: AnalysisSettings,
    rng: np.random.Generator,
    refinement: int,
) -> LikelihoodCheck:
    n_draw = min(settings.check_draws, samples["chirp_mass"].size)
    pick = rng.choice(samples["chirp_mass"].size, n_draw, replace=False)
    drawn = {k: v[pick] for k, v in samples.items()}
    worst = float(np.max(np.abs(exact.log_likelihood(drawn) - binned.log_likelihood(drawn))))
    return LikelihoodCheck(
        draws=n_draw,
        max_abs_difference=worst,
        tolerance=settings.likelihood_tolerance,
        passed=worst <= settings.likelihood_tolerance,
        bins=binned.bins,
        refinements=refinement,
    )


def sample_network_posterior(
    datasets: Sequence[DetectorData],
    sites: Sequence[SiteGeometry],
    *,
    reference: float,
    gmst: float,
    scan: SkyScan,
    coords: NetworkCoordinates,
    center: Mapping[str, float],
    prior: NetworkPrior,
    settings: AnalysisSettings,
    rng: np.random.Generator,
    seed: int,
    walkers: int,
    progress: Callable[[float], None] | None = None,
) -> NetworkPosteriorRun:
    """Seed, polish, sample, check and refine (module docstring).

    ``center`` holds the fiducial masses (``chirp_mass``, ``mass_ratio``) from the
    loudest detector; the rest of the fiducial comes from the scan.
    """
    clock = time.perf_counter()
    names = coords.names
    marginal = DistanceMarginal(prior.distance_max)
    exact = ExactNetworkLikelihood(datasets, sites, reference, gmst, marginal)
    best = scan.best
    fid = {
        "chirp_mass": float(center["chirp_mass"]),
        "mass_ratio": float(center["mass_ratio"]),
        "inclination": 0.0,
        "polarization_angle": 0.0,
        "right_ascension": float(scan.right_ascension[best]),
        "declination": float(scan.declination[best]),
        "coalescence_time": float(scan.time[best]),
    }
    # Twice the one-detector default: measured on drills, 96 bins often just miss the
    # tolerance on posterior draws, and each refinement reruns the whole chain.
    n_bins = 2 * settings.n_bins
    binned = NetworkLikelihood(datasets, sites, reference, gmst, fid, n_bins, marginal)
    post = log_posterior(binned, prior, coords)
    cand = _candidates(scan, coords, binned, fid, rng, 40 * walkers)
    lp = post(cand)
    if not np.any(np.isfinite(lp)):
        msg = "no sky position and orientation inside the prior explains the data of every detector"
        raise InputError(msg, field="prior")
    top = int(np.argmax(lp))
    polished = _polish(post, {k: float(v[top]) for k, v in cand.items()}, names)
    phys = coords.to_physical({k: np.array([v]) for k, v in polished.items()})
    fid = {k: float(v[0]) for k, v in phys.items()}
    binned = NetworkLikelihood(datasets, sites, reference, gmst, fid, n_bins, marginal)
    post = log_posterior(binned, prior, coords)
    lp = post(cand)
    peak = float(post({k: np.array([v]) for k, v in polished.items()})[0])
    order = np.argsort(-lp)
    good = order[lp[order] >= max(peak, float(lp[order[0]])) - NETWORK_START_DEPTH]
    if good.size < walkers:
        good = order[:walkers]
    chosen = rng.choice(good, walkers, replace=False)
    start = np.column_stack([cand[k][chosen] for k in names])
    # First look: the binned likelihood must already meet the tolerance on the seeds.
    for _ in range(2):
        points = coords.to_physical({k: v[chosen[:32]] for k, v in cand.items()})
        gap = float(np.max(np.abs(exact.log_likelihood(points) - binned.log_likelihood(points))))
        if gap <= settings.likelihood_tolerance:
            break
        n_bins *= 2
        binned = NetworkLikelihood(datasets, sites, reference, gmst, fid, n_bins, marginal)
    fid_log_like = float(exact.log_likelihood({k: np.array([v]) for k, v in fid.items()})[0])
    notes: list[str] = []
    sampling_time = time.perf_counter() - clock
    check_time = 0.0
    moves = [
        (emcee.moves.DEMove(), 0.8),
        (emcee.moves.DEMove(gamma0=1.0), 0.1),
        (SkyJumpMove(scan, names), 0.1),
    ]
    chain: ChainResult | None = None
    check: LikelihoodCheck | None = None
    for refinement in range(settings.max_refinements + 1):
        clock = time.perf_counter()
        chain = run_ensemble(
            log_posterior(binned, prior, coords),
            start,
            names,
            seed=seed + refinement,
            max_steps=settings.max_steps,
            target_effective_samples=settings.target_effective_samples,
            progress=progress,
            moves=moves,
            periods=PERIODS,
            check_growth=0.25,
            stranded_gap=STRANDED_GAP_7D,
            max_samples=MAX_SAMPLES,
        )
        sampling_time += time.perf_counter() - clock
        clock = time.perf_counter()
        samples = coords.to_physical(chain.samples())
        check = _check(samples, binned, exact, settings, rng, refinement)
        check_time += time.perf_counter() - clock
        if check.passed:
            break
        top = int(np.argmax(chain.sample_log_prob()))
        fid = {k: float(v[top]) for k, v in samples.items()}
        n_bins *= 2
        binned = NetworkLikelihood(datasets, sites, reference, gmst, fid, n_bins, marginal)
        start = chain.chain[-1]
        notes.append(
            f"relative-binning check failed (max |difference| {check.max_abs_difference:.3f} > "
            f"{settings.likelihood_tolerance}); refined with a new fiducial and {n_bins} bins"
        )
    if chain is None or check is None:  # pragma: no cover - the loop runs at least once
        msg = "sampling did not run"
        raise RuntimeError(msg)
    samples = coords.to_physical(chain.samples())
    log_like = binned.log_likelihood(samples)
    if not check.passed:
        samples, log_like, check = reweight_exactly(samples, log_like, exact, check, rng)
        notes.append(
            "relative-binning likelihood still differed from the exact one after refinement: "
            "the samples were reweighted with the exact likelihood "
            f"(efficiency {check.reweight_efficiency:.2f})"
        )
    if not chain.converged:
        notes.append(
            f"the sampler reached its step cap ({settings.max_steps}) before the "
            "autocorrelation-time criterion was met; the intervals may be unreliable"
        )
    # The distance of each sample from its conditional law given the rest.
    z, hh = binned.components(samples)
    overlap, norm = np.abs(np.sum(z, axis=0)), np.sum(hh, axis=0)
    dist = marginal.draw_distance(overlap, norm, rng)
    samples["luminosity_distance"] = dist
    log_like = log_i0(overlap / dist) - 0.5 * norm / dist**2
    # psi is measured modulo pi/2 (the phase is marginalised): each sample takes either
    # of its two equivalent values in [0, pi) with equal probability, an exact draw from
    # the posterior over [0, pi).
    samples["polarization_angle"] = samples["polarization_angle"] + 0.5 * np.pi * rng.integers(
        0, 2, samples["polarization_angle"].size
    )
    return NetworkPosteriorRun(
        chain=chain,
        coordinates=coords,
        likelihood=binned,
        check=check,
        samples=samples,
        sample_log_likelihood=log_like,
        fiducial=fid,
        fiducial_log_likelihood=fid_log_like,
        notes=notes,
        sampling_time=sampling_time,
        check_time=check_time,
    )
