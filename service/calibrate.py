"""``chirpcast calibrate``: the P-P test of the whole analysis over prior-drawn injections.

Each injection: true parameters drawn from the analysis prior (and a uniform
coalescence phase), Gaussian noise from the design PSD plus the signal, and a
detection threshold on the *observed* matched-filter SNR of the search over
the data, never on the true SNR (a selection on the data keeps the posteriors
calibrated; one on the truth would not). Candidates below the threshold are
redrawn from the same injection's random stream, so every injection is
reproducible from ``(seed, index)`` alone. The full analysis then runs on the
data as it would on a candidate; the truths' credible levels feed
:mod:`estimator.calibration`. Injections run in parallel local processes, or on
a Dask cluster (``--scheduler``): the same rows either way, as each depends only on
``(seed, index)``.
"""

from __future__ import annotations

import csv
import json
import os
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np

from estimator.analysis import AnalysisSettings, analysis_prior, run_analysis
from estimator.calibration import credible_level, summarize_levels
from estimator.priors import InspiralPrior
from estimator.search import search_chirp_mass
from estimator.simulate import Injection, design_spectrum, simulate_segment
from estimator.spins import effective_spin
from estimator.stats import credible_interval
from estimator.summary import PARAMETER_LABELS
from estimator.validation import default_f_high

from .drill import optimal_snr
from .parallel_runs import Journal, run_in_processes

__all__ = ["CALIBRATION_FILES", "CalibrationSetup", "run_calibration", "run_injection"]

#: The sampled parameters whose calibration is tested.
TESTED = (
    "chirp_mass",
    "mass_ratio",
    "effective_distance",
    "coalescence_time",
    "spin1",
    "spin2",
    "effective_spin",
)
CALIBRATION_FILES = ("calibration.json", "runs.csv", "pp_plot.png")
_START = 1_300_000_000.0  # GPS start of every simulated segment (arbitrary)


@dataclass(frozen=True)
class CalibrationSetup:
    """What a calibration run draws and analyses (the prior is the analysis' own).

    Chirp masses 3-15 Msun (detector frame) keep every signal inside a 64 s
    segment from 20 Hz; mass ratios down to 0.1; distances uniform in volume to
    ``distance_max``, which with the design PSD puts most detected injections
    near the threshold (SNR 8-15).
    """

    injections: int
    seed: int
    duration: float = 64.0
    sample_rate: float = 2048.0
    f_low: float = 20.0
    chirp_mass_range: tuple[float, float] = (3.0, 15.0)
    mass_ratio_range: tuple[float, float] = (0.1, 1.0)
    distance_max: float = 2000.0
    time_window: float = 0.1
    snr_threshold: float = 8.0
    max_attempts: int = 2000
    spin_max: float = 0.99

    @property
    def trigger_time(self) -> float:
        """GPS time the injections' coalescence times are drawn around, s."""
        return _START + self.duration - 2.0

    def settings(self, seed: int) -> AnalysisSettings:
        """The analysis settings (default sampler and likelihood options)."""
        return AnalysisSettings(
            trigger_time=self.trigger_time,
            f_low=self.f_low,
            chirp_mass_range=self.chirp_mass_range,
            mass_ratio_range=self.mass_ratio_range,
            distance_max=self.distance_max,
            time_window=self.time_window,
            seed=seed,
            spin_max=self.spin_max,
        )

    def prior(self) -> InspiralPrior:
        """The prior the truths are drawn from: the analysis prior of :meth:`settings`."""
        return analysis_prior(self.settings(0))


def run_injection(setup: CalibrationSetup, index: int) -> dict[str, Any]:
    """Draw, simulate, select on the observed SNR, analyse; one row of ``runs.csv``."""
    clock = time.perf_counter()
    stream = np.random.SeedSequence([setup.seed, index])
    rng = np.random.default_rng(stream)
    spectrum = design_spectrum()
    prior = setup.prior()
    attempt = 0
    while attempt < setup.max_attempts:
        attempt += 1
        truth = {k: float(v[0]) for k, v in prior.sample(rng, 1).items()}
        truth.setdefault("spin1", 0.0)
        truth.setdefault("spin2", 0.0)
        truth["effective_spin"] = float(
            effective_spin(truth["mass_ratio"], truth["spin1"], truth["spin2"])
        )
        injection = Injection(
            truth["chirp_mass"],
            truth["mass_ratio"],
            truth["effective_distance"],
            setup.trigger_time + truth["coalescence_time"],
            float(rng.uniform(0.0, 2.0 * np.pi)),
            spin1=truth["spin1"],
            spin2=truth["spin2"],
        )
        segment = simulate_segment(
            spectrum,
            duration=setup.duration,
            sample_rate=setup.sample_rate,
            start_time=_START,
            rng=rng,
            injection=injection,
            f_start=setup.f_low - 5.0,
        )
        found = search_chirp_mass(
            segment,
            spectrum,
            trigger_time=setup.trigger_time,
            chirp_mass_range=setup.chirp_mass_range,
            f_low=setup.f_low,
            f_high=default_f_high(segment, spectrum),
            time_window=setup.time_window,
        )
        if found.snr >= setup.snr_threshold:
            break
    if found.snr < setup.snr_threshold:
        msg = f"no detectable injection in {setup.max_attempts} draws; raise distance_max"
        raise RuntimeError(msg)
    seed = int(stream.generate_state(1)[0])
    result = run_analysis(segment, spectrum, setup.settings(seed))
    row: dict[str, Any] = {
        "index": index,
        "attempts": attempt,
        "observed_snr": found.snr,
        "optimal_snr": optimal_snr(
            injection,
            spectrum,
            duration=setup.duration,
            sample_rate=setup.sample_rate,
            start_time=_START,
            f_low=setup.f_low,
        ),
        "seed": seed,
    }
    samples = dict(result.samples)
    if "spin1" in samples:
        samples["effective_spin"] = effective_spin(
            samples["mass_ratio"], samples["spin1"], samples["spin2"]
        )
    for name in (k for k in TESTED if k in samples):
        median, lower, upper = credible_interval(samples[name], 0.9)
        row |= {
            f"{name}_truth": truth[name],
            f"{name}_median": median,
            f"{name}_lower_90": lower,
            f"{name}_upper_90": upper,
            f"{name}_level": credible_level(samples[name], truth[name]),
        }
    row |= {
        "converged": result.chain.converged,
        "effective_samples": result.chain.effective_sample_size,
        "likelihood_check_passed": result.check.passed,
        "wall_s": time.perf_counter() - clock,
    }
    return row


def run_calibration(
    setup: CalibrationSetup,
    out_dir: Path,
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    progress: Callable[[int, int], None] | None = None,
    injection: Callable[[CalibrationSetup, int], dict[str, Any]] = run_injection,
) -> dict[str, Any]:
    """Run every injection, write :data:`CALIBRATION_FILES`; return ``calibration.json``.

    The injections run in ``workers`` local processes, or on the Dask cluster of
    ``scheduler`` (``tcp://HOST:PORT``; ``workers`` is then its number of threads).
    Each finished one is kept in the folder's :class:`Journal` at once, so the same
    call after a stop runs only the rest. ``injection`` (an importable function) is
    :func:`run_injection` except in tests.
    """
    from estimator.pp_plot import pp_plot  # matplotlib only when the plot is drawn

    clock = time.perf_counter()
    journal = Journal(out_dir, setup)
    kept = list(journal.rows)
    step: Callable[[int, int], None] | None = None
    if progress is not None:
        report = progress
        report(len(kept), setup.injections)

        def step(done: int, _total: int) -> None:
            report(len(kept) + done, setup.injections)
    if scheduler:
        from .dask_engine import map_on_cluster

        rows, workers = map_on_cluster(
            injection, setup, setup.injections, scheduler=scheduler, progress=step,
            skip=journal.done, on_row=journal.add,
        )
    else:
        workers = max(1, workers or os.cpu_count() or 1)
        rows = run_in_processes(
            injection, setup, setup.injections, workers=workers, progress=step,
            skip=journal.done, on_row=journal.add,
        )
    rows = sorted(kept + rows, key=lambda r: int(r["index"]))
    wall = time.perf_counter() - clock
    tested = [k for k in TESTED if f"{k}_level" in rows[0]]
    summary = summarize_levels({k: [r[f"{k}_level"] for r in rows] for k in tested})
    out_dir.mkdir(parents=True, exist_ok=True)
    with (out_dir / "runs.csv").open("w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(rows[0]))
        writer.writeheader()
        writer.writerows(rows)
    labels = {**PARAMETER_LABELS, "coalescence_time": "coalescence time"}
    pp_plot(summary, out_dir / "pp_plot.png", labels=labels)
    snr = np.array([r["observed_snr"] for r in rows])
    document = {
        **summary.to_dict(),
        "wall_time_s": round(wall, 1),
        # a run resumed from its journal: these rows came from the earlier, stopped run
        # (wall_time_s counts this run only; each row keeps its own wall_s)
        "resumed_rows": len(kept),
        "workers": workers,
        "scheduler": scheduler,
        "setup": asdict(setup),
        "selection": (
            f"observed matched-filter SNR of the search >= {setup.snr_threshold:g}; "
            f"{sum(int(r['attempts']) for r in rows)} candidates drawn for "
            f"{len(rows)} injections"
        ),
        "observed_snr": {
            "min": float(snr.min()),
            "median": float(np.median(snr)),
            "max": float(snr.max()),
        },
        "mass_ratio_below_0.5": int(sum(r["mass_ratio_truth"] < 0.5 for r in rows)),
        "not_converged": int(sum(not r["converged"] for r in rows)),
        "likelihood_check_failed": int(sum(not r["likelihood_check_passed"] for r in rows)),
        "median_wall_per_injection_s": float(np.median([r["wall_s"] for r in rows])),
    }
    (out_dir / "calibration.json").write_text(json.dumps(document, indent=2) + "\n", "utf-8")
    journal.remove()
    return document
