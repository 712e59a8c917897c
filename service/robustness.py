"""Robustness to the model's own end: injections made with a different waveform.

Each injection is a heavy binary (chirp mass 15-30 Msun, mass ratio 0.4-1,
aligned spins within +-0.5, optimal SNR 10-20) in an 8 s segment at 2048 Hz with
coalescence 2 s before its end, simulated with the time-domain waveform of
:mod:`estimator.timedomain` (TaylorT1 integrated from the post-Newtonian energy
and flux, then a ringdown): a waveform built independently of the
frequency-domain models the analysis uses. Each is analysed with the default
settings and, for contrast, with ``model="taylorf2"``. A row records, per model
and parameter, whether the 90% interval holds the truth and the median's
offset from the truth in units of the posterior standard deviation.

With a waveform that matched the data the 90% intervals would cover the truth
90% of the time. Differences between the injected and the analysed waveforms
(different PN approximants, different merger) bias the posterior; the study
measures by how much. ``benchmarks/robustness.py`` runs 40 or more;
``tests/estimator/test_robustness.py`` a reduced set.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from estimator.analysis import AnalysisSettings, run_analysis
from estimator.simulate import Injection, design_spectrum, simulate_segment
from estimator.spins import effective_spin
from estimator.stats import credible_interval

from .drill import optimal_snr
from .parallel_runs import run_in_processes

__all__ = ["STUDIED", "RobustnessSetup", "run_cross_injection", "run_study"]

#: Parameters whose intervals are scored.
STUDIED = ("chirp_mass", "mass_ratio", "effective_spin")
_START = 1_100_000_000.0  # GPS start of every simulated segment (arbitrary)


@dataclass(frozen=True)
class RobustnessSetup:
    """What the study draws (module docstring) and which models analyse it."""

    injections: int
    seed: int
    duration: float = 8.0
    sample_rate: float = 2048.0
    before_end: float = 2.0
    f_low: float = 20.0
    chirp_mass_range: tuple[float, float] = (15.0, 30.0)
    mass_ratio_range: tuple[float, float] = (0.4, 1.0)
    spin_range: float = 0.5
    snr_range: tuple[float, float] = (10.0, 20.0)
    injected_waveform: str = "timedomain"
    models: tuple[str, ...] = ("auto", "taylorf2")


def draw_injection(setup: RobustnessSetup, index: int) -> tuple[Injection, float, int]:
    """Injection number ``index``: its parameters, its optimal SNR and the noise seed."""
    rng = np.random.default_rng(np.random.SeedSequence([setup.seed, index]))
    mc = float(rng.uniform(*setup.chirp_mass_range))
    q = float(rng.uniform(*setup.mass_ratio_range))
    s1, s2 = (float(x) for x in rng.uniform(-setup.spin_range, setup.spin_range, 2))
    snr = float(rng.uniform(*setup.snr_range))
    tc = _START + setup.duration - setup.before_end + float(rng.uniform(-0.01, 0.01))
    phase = float(rng.uniform(0.0, 2.0 * np.pi))
    unit = Injection(mc, q, 1000.0, tc, phase, s1, s2, model=setup.injected_waveform)
    rho = optimal_snr(
        unit,
        design_spectrum(),
        duration=setup.duration,
        sample_rate=setup.sample_rate,
        start_time=_START,
        f_low=setup.f_low,
    )
    injection = dataclasses.replace(unit, effective_distance=1000.0 * rho / snr)
    return injection, snr, int(rng.integers(2**31))


def run_cross_injection(setup: RobustnessSetup, index: int) -> dict[str, Any]:
    """Simulate injection ``index`` and analyse it with each of ``setup.models``."""
    injection, snr, noise_seed = draw_injection(setup, index)
    spectrum = design_spectrum()
    segment = simulate_segment(
        spectrum, duration=setup.duration, sample_rate=setup.sample_rate, start_time=_START,
        rng=np.random.default_rng(noise_seed), injection=injection, f_start=setup.f_low - 10.0,
    )  # fmt: skip
    truth = {
        "chirp_mass": injection.chirp_mass,
        "mass_ratio": injection.mass_ratio,
        "effective_spin": float(
            effective_spin(injection.mass_ratio, injection.spin1, injection.spin2)
        ),
    }
    row: dict[str, Any] = {"index": index, "optimal_snr": snr}
    row |= {"spin1": injection.spin1, "spin2": injection.spin2}
    row |= {f"{k}_truth": v for k, v in truth.items()}
    for model in setup.models:
        clock = time.perf_counter()
        settings = AnalysisSettings(
            trigger_time=injection.coalescence_time, f_low=setup.f_low, model=model,
            seed=noise_seed % 100_000,
        )  # fmt: skip
        result = run_analysis(segment, spectrum, settings)
        samples = dict(result.samples)
        samples["effective_spin"] = effective_spin(
            samples["mass_ratio"], samples.get("spin1", 0.0), samples.get("spin2", 0.0)
        )
        row[f"{model}_used"] = result.model
        row[f"{model}_converged"] = bool(result.chain.converged)
        row[f"{model}_wall_s"] = time.perf_counter() - clock
        for name, value in truth.items():
            x = np.asarray(samples[name], dtype=float)
            _, lower, upper = credible_interval(x, 0.9)
            sd = float(np.std(x))
            row[f"{model}_{name}_covered"] = bool(lower <= value <= upper)
            row[f"{model}_{name}_bias_sd"] = (
                (float(np.median(x)) - value) / sd if sd > 0 else float("nan")
            )
    return row


def summarise(rows: Sequence[dict[str, Any]], models: Sequence[str]) -> dict[str, Any]:
    """Coverage of the 90% intervals and the bias in posterior sd, per model and parameter."""
    out: dict[str, Any] = {"injections": len(rows)}
    for model in models:
        entry: dict[str, Any] = {
            "wall_s_median": float(np.median([r[f"{model}_wall_s"] for r in rows])),
            "not_converged": int(sum(not r[f"{model}_converged"] for r in rows)),
        }
        for name in STUDIED:
            bias = np.array([r[f"{model}_{name}_bias_sd"] for r in rows], dtype=float)
            entry[name] = {
                "coverage_90": float(np.mean([r[f"{model}_{name}_covered"] for r in rows])),
                "bias_sd_median": float(np.nanmedian(bias)),
                "bias_sd_abs_max": float(np.nanmax(np.abs(bias))),
            }
        out[model] = entry
    return out


def run_study(
    setup: RobustnessSetup,
    *,
    workers: int | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> tuple[list[dict[str, Any]], dict[str, Any]]:
    """Every injection of ``setup`` in ``workers`` processes: the rows and their summary."""
    rows = run_in_processes(
        run_cross_injection, setup, setup.injections, workers=workers, progress=progress
    )
    return rows, summarise(rows, setup.models)
