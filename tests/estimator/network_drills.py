"""Seeded network drills for the tests: three invented sites, design-curve noise, one signal."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from estimator.network_analysis import DetectorInput, NetworkResult, run_network_analysis
from estimator.network_prior import NetworkPrior
from estimator.priors import InspiralPrior
from estimator.settings import AnalysisSettings
from estimator.simulate import NetworkInjection, design_spectrum, simulate_network
from estimator.sites import SHIPPED_SITES, gps_to_gmst
from estimator.skymap import sky_map_from_samples

SITES = tuple(SHIPPED_SITES[n] for n in ("heron", "plover", "curlew"))
START = 2_000_000_000.0


@dataclass
class Drill:
    injection: NetworkInjection
    inputs: list[DetectorInput]
    settings: AnalysisSettings

    @property
    def trigger(self) -> float:
        return self.settings.trigger_time

    def truth(self) -> dict[str, float]:
        """The true parameters in the analysis's convention (time relative to the trigger)."""
        i = self.injection
        return {
            "chirp_mass": i.chirp_mass,
            "mass_ratio": i.mass_ratio,
            "luminosity_distance": i.luminosity_distance,
            "inclination": i.inclination,
            "polarization_angle": i.polarization_angle,
            "right_ascension": i.right_ascension,
            "declination": i.declination,
            "coalescence_time": i.coalescence_time - self.trigger,
        }

    def run(self) -> NetworkResult:
        return run_network_analysis(self.inputs, self.settings)


def make_drill(
    injection: NetworkInjection,
    *,
    seed: int,
    duration: float = 13.0,
    sample_rate: float = 2048.0,
    trigger_offset: float = 10.5,
    **settings: object,
) -> Drill:
    """Simulate the three shipped sites seeing ``injection`` (its time relative to the trigger)."""
    rng = np.random.default_rng(seed)
    trigger = START + trigger_offset
    inj = NetworkInjection(
        **{**injection.__dict__, "coalescence_time": trigger + injection.coalescence_time}
    )
    spectrum = design_spectrum()
    segments = simulate_network(
        inj,
        list(SITES),
        [spectrum] * len(SITES),
        gmst=gps_to_gmst(trigger),
        duration=duration,
        sample_rate=sample_rate,
        start_time=START,
        rng=rng,
    )
    inputs = [DetectorInput(site, seg, spectrum) for site, seg in zip(SITES, segments, strict=True)]
    return Drill(inj, inputs, AnalysisSettings(trigger_time=trigger, seed=seed, **settings))  # type: ignore[arg-type]


def prior_injection(rng: np.random.Generator, prior: NetworkPrior) -> NetworkInjection:
    """One draw of every parameter from ``prior`` (coalescence time relative to the trigger)."""
    p = {k: float(v[0]) for k, v in prior.sample(rng, 1).items()}
    return NetworkInjection(**p, phase=float(rng.uniform(0.0, 2.0 * np.pi)))


def coverage_prior(distance_max: float = 600.0) -> NetworkPrior:
    """The prior the coverage drills are drawn from and analysed under."""
    return NetworkPrior(
        InspiralPrior(
            chirp_mass=(7.0, 13.0),
            mass_ratio=(0.25, 1.0),
            component_mass=(0.5, 150.0),
            distance_max=distance_max,
            time_window=0.1,
        )
    )


def coverage_run(seed: int, max_steps: int = 8000) -> tuple[float, float, bool, list[str]] | None:
    """One prior-drawn injection analysed: the truth's sky credible level, the 90% area,
    convergence and notes; ``None`` when the observed network search SNR is below 10."""
    prior = coverage_prior()
    rng = np.random.default_rng(seed)
    drill = make_drill(
        prior_injection(rng, prior),
        seed=10_000 + seed,
        chirp_mass_range=prior.masses.chirp_mass,
        mass_ratio_range=prior.masses.mass_ratio,
        distance_max=prior.distance_max,
        target_effective_samples=1000.0,
        max_steps=max_steps,
    )
    result = drill.run()
    if np.sqrt(np.sum([s.snr**2 for s in result.searches])) < 10.0:
        return None  # selected on the data (observed SNR), never on the truth
    s = result.samples
    sky = sky_map_from_samples(s["right_ascension"], s["declination"])
    truth = drill.truth()
    level = sky.credible_level(truth["right_ascension"], truth["declination"])
    return level, sky.credible_area(0.9), result.chain.converged, result.notes
