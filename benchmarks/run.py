"""chirpcast benchmark: likelihood cost, files-to-report wall time, sampling-time flatness.

Run from the repository root::

    /work/venv/bin/python benchmarks/run.py            # full run (several minutes)
    /work/venv/bin/python benchmarks/run.py --quick    # one repeat, no 512 s segment
    /work/venv/bin/python benchmarks/run.py --only likelihood

Prints a table on stdout, progress on stderr, and writes ``benchmarks/results.json``
(machine facts plus every measured figure). A benchmark, not a test: nothing here
fails when a goal is missed; the table says whether each aim was met on this machine.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
from cases import (
    BNS,
    HEAVY_8S,
    HEAVY_32S,
    SCALING_F_LOW,
    SPECTRUM,
    Drill,
    make_drill,
    scaling_source,
    write_drill_files,
)
from machine import load, machine_facts, say, since_start
from scipy.special import i0e
from table import format_table

from estimator.analysis import AnalysisSettings, run_analysis
from estimator.conditioning import condition
from estimator.io import read_strain
from estimator.likelihood import ExactLikelihood
from estimator.relbin import RelativeBinningLikelihood
from estimator.validation import default_f_high
from estimator.waveform import taylorf2
from service.drill import write_strain
from service.pipeline import AnalysisRequest, analyze_files

__all__ = ["bench_e2e", "bench_likelihood", "bench_scaling", "main"]

HERE = Path(__file__).resolve().parent
SECTIONS = ("likelihood", "e2e", "scaling")
#: Parameter sets per likelihood batch, and the fewest repeats the median is taken over.
BATCH = 32
MIN_LIKELIHOOD_REPEATS = 7
#: Spread of the likelihood batch around the fiducial (Gaussian sd): chirp mass
#: (relative), mass ratio, effective distance (relative), coalescence time (s).
SPREAD = {"chirp_mass": 3e-5, "mass_ratio": 0.01, "effective_distance": 0.05,
          "coalescence_time": 1e-4}
def _timed(call: Callable[[], object], inner: int = 1) -> float:
    clock = time.perf_counter()
    for _ in range(inner):
        call()
    return (time.perf_counter() - clock) / inner


def bench_likelihood(drill: Drill, repeats: int) -> dict[str, Any]:
    """Per-parameter-set cost of the exact and the binned likelihood, same run, same batch."""
    repeats = max(repeats, MIN_LIKELIHOOD_REPEATS)
    seg, src = drill.segment, drill.source
    data = condition(seg, SPECTRUM, f_low=src.f_low, f_high=default_f_high(seg, SPECTRUM))
    reference = drill.trigger_time
    inj = drill.injection
    fiducial = {"chirp_mass": inj.chirp_mass, "mass_ratio": inj.mass_ratio,
                "effective_distance": inj.effective_distance,
                "coalescence_time": inj.coalescence_time - reference}
    n_bins = AnalysisSettings(trigger_time=reference).n_bins
    clock = time.perf_counter()
    exact = ExactLikelihood([data], reference)
    exact_setup = time.perf_counter() - clock
    clock = time.perf_counter()
    binned = RelativeBinningLikelihood([data], reference, fiducial, n_bins=n_bins)
    binned_setup = time.perf_counter() - clock
    # The exact likelihood shares the frequency axis among threads; one thread as well,
    # for the cost in CPU terms next to the single-threaded binned one.
    single = ExactLikelihood([data], reference, workers=1)
    # Twice the bins: what the analysis refines to when the default fails its check.
    refined = RelativeBinningLikelihood([data], reference, fiducial, n_bins=2 * n_bins)
    rng = np.random.default_rng(7)
    noise = {k: rng.standard_normal(BATCH) for k in SPREAD}
    params = {
        "chirp_mass": fiducial["chirp_mass"] * (1.0 + SPREAD["chirp_mass"] * noise["chirp_mass"]),
        "mass_ratio": np.clip(fiducial["mass_ratio"] + SPREAD["mass_ratio"] * noise["mass_ratio"],
                              0.1, 1.0),
        "effective_distance": fiducial["effective_distance"]
        * (1.0 + SPREAD["effective_distance"] * noise["effective_distance"]),
        "coalescence_time": fiducial["coalescence_time"]
        + SPREAD["coalescence_time"] * noise["coalescence_time"],
    }
    ln_exact = exact.log_likelihood(params)  # also the warm-up calls
    single.log_likelihood(params)
    ln_binned = binned.log_likelihood(params)
    ln_refined = refined.log_likelihood(params)
    # A binned batch takes well under a millisecond: each repeat times enough calls for
    # ~0.1 s, half just before and half just after the exact batch, so that both see the
    # same load; the ratio is taken within each repeat, then the median over repeats.
    half = int(np.clip(np.ceil(0.05 / max(_timed(lambda: binned.log_likelihood(params)), 1e-7)),
                       1, 500))
    exact_t: list[float] = []
    binned_t: list[float] = []
    refined_t: list[float] = []
    single_t: list[float] = []
    for r in range(repeats):
        before = _timed(lambda: binned.log_likelihood(params), half)
        before_refined = _timed(lambda: refined.log_likelihood(params), half)
        exact_t.append(_timed(lambda: exact.log_likelihood(params)) / BATCH)
        single_t.append(_timed(lambda: single.log_likelihood(params)) / BATCH)
        after_refined = _timed(lambda: refined.log_likelihood(params), half)
        after = _timed(lambda: binned.log_likelihood(params), half)
        binned_t.append(0.5 * (before + after) / BATCH)
        refined_t.append(0.5 * (before_refined + after_refined) / BATCH)
        say(f"likelihood repeat {r + 1}/{repeats}: exact {exact_t[-1] * 1e3:.2f} ms, "
            f"binned {binned_t[-1] * 1e6:.2f} us per parameter set, ratio "
            f"{exact_t[-1] / binned_t[-1]:.0f}")
    # A plain float64 implementation of the same exact likelihood, for scale: the model
    # from estimator.waveform.taylorf2 on every bin, then the noise-weighted sums.
    def plain() -> None:
        for j in range(4):
            h = taylorf2(data.frequencies, params["chirp_mass"][j], params["mass_ratio"][j],
                         params["effective_distance"][j],
                         params["coalescence_time"][j] + reference - data.epoch)
            z = data.inner(data.strain, h)
            _ = np.log(i0e(abs(z))) + abs(z) - 0.5 * data.inner(h, h).real

    plain_t = statistics.median(_timed(plain) / 4 for _ in range(3))
    ratios = [e / b for e, b in zip(exact_t, binned_t, strict=True)]
    refined_ratios = [e / b for e, b in zip(exact_t, refined_t, strict=True)]
    single_ratios = [e / b for e, b in zip(single_t, binned_t, strict=True)]
    ln_fid = exact.log_likelihood({k: np.array([v]) for k, v in fiducial.items()})[0]
    return {
        "case": src.name, "frequency_bins": int(data.frequencies.size), "relbin_bins": binned.bins,
        "batch": BATCH, "repeats": repeats, "binned_calls_per_repeat": 2 * half,
        "exact_s_per_set": statistics.median(exact_t),
        "binned_s_per_set": statistics.median(binned_t),
        "exact_s_per_set_min": min(exact_t), "binned_s_per_set_min": min(binned_t),
        "ratio": statistics.median(ratios), "ratio_min": min(ratios), "ratio_max": max(ratios),
        "ratio_of_best": min(exact_t) / min(binned_t),
        "exact_setup_s": exact_setup, "binned_setup_s": binned_setup,
        "exact_workers": exact.workers, "single_thread_s_per_set": statistics.median(single_t),
        "single_thread_ratio": statistics.median(single_ratios),
        "max_abs_difference": float(np.max(np.abs(ln_exact - ln_binned))),
        "refined_bins": refined.bins, "refined_s_per_set": statistics.median(refined_t),
        "refined_ratio": statistics.median(refined_ratios),
        "refined_max_abs_difference": float(np.max(np.abs(ln_exact - ln_refined))),
        "median_drop_from_fiducial": float(np.median(ln_fid - ln_exact)),
        "optimal_snr": drill.optimal_snr, "load_average": load(),
        "plain_exact_s_per_set": plain_t,
        "plain_ratio": plain_t / statistics.median(binned_t),
    }


def _e2e_case(drill: Drill, folder: Path, repeats: int) -> dict[str, Any]:
    strain, psd = write_drill_files(drill, folder)
    runs: list[dict[str, Any]] = []
    for r in range(repeats):
        settings = AnalysisSettings(trigger_time=drill.trigger_time, f_low=drill.source.f_low,
                                    seed=1000 + r, spin_max=drill.source.spin_max)
        request = AnalysisRequest(strain_path=strain, settings=settings, psd_path=psd)
        clock, cpu = time.perf_counter(), time.process_time()
        summary = analyze_files(request, folder / f"out-{r}")
        wall, cpu = time.perf_counter() - clock, time.process_time() - cpu
        diag = summary["diagnostics"]
        runs.append({"seed": 1000 + r, "wall_s": wall, "cpu_s": cpu,
                     "ess": diag["effective_sample_size"],
                     "steps": diag["steps"], "converged": diag["converged"],
                     "check_passed": diag["likelihood_check"]["passed"],
                     "bins": diag["likelihood_check"]["bins"], "timings_s": diag["timings_s"],
                     "load_average": load()})
        say(f"{drill.source.name} repeat {r + 1}/{repeats}: {wall:.1f} s, "
            f"CPU {cpu:.1f} s, ESS {runs[-1]['ess']:.0f}, {runs[-1]['steps']} steps")
    stages = sorted({k for run in runs for k in run["timings_s"]})
    return {
        "case": drill.source.name, "duration_s": drill.source.duration,
        "chirp_mass": drill.source.chirp_mass, "mass_ratio": drill.source.mass_ratio,
        "optimal_snr": drill.optimal_snr, "f_low": drill.source.f_low, "repeats": repeats,
        "spin_max": drill.source.spin_max,
        "wall_s": statistics.median(r["wall_s"] for r in runs),
        "cpu_s": statistics.median(r["cpu_s"] for r in runs),
        "min_wall_s": min(r["wall_s"] for r in runs),
        "ess": statistics.median(r["ess"] for r in runs),
        "min_ess": min(r["ess"] for r in runs),
        "all_converged": all(r["converged"] for r in runs),
        "all_checks_passed": all(r["check_passed"] for r in runs),
        "stages_s": {k: statistics.median(r["timings_s"].get(k, 0.0) for r in runs)
                     for k in stages},
        "runs": runs,
    }


def _csv_read(drill: Drill, folder: Path, repeats: int) -> dict[str, Any]:
    say("writing the two-column CSV copy of the 256 s strain")
    csv_path = write_strain(drill.segment, folder / "strain_two_column", "csv")
    npz_path = folder / "strain.npz"
    csv_t = [_timed(lambda: read_strain(csv_path)) for _ in range(repeats)]
    npz_t = [_timed(lambda: read_strain(npz_path)) for _ in range(repeats)]
    return {"case": drill.source.name, "samples": int(drill.segment.strain.size),
            "csv_mb": csv_path.stat().st_size / 1e6, "csv_read_s": statistics.median(csv_t),
            "npz_read_s": statistics.median(npz_t), "repeats": repeats}


def bench_e2e(drills: list[Drill], root: Path, repeats: int) -> dict[str, Any]:
    """Files-to-report wall time and effective sample size per case, plus CSV reading."""
    cases = [_e2e_case(d, root / f"case-{i}", repeats) for i, d in enumerate(drills)]
    return {"cases": cases, "csv_read": _csv_read(drills[0], root / "case-0", repeats)}


def bench_scaling(distance: float, durations: tuple[float, ...], repeats: int) -> dict[str, Any]:
    """Sampling-stage time of the same source in segments of several lengths, one band."""
    rows: list[dict[str, Any]] = []
    for duration in durations:
        drill = make_drill(scaling_source(duration, distance))
        runs: list[dict[str, Any]] = []
        for r in range(repeats):
            settings = AnalysisSettings(trigger_time=drill.trigger_time, f_low=SCALING_F_LOW,
                                        seed=2000 + r)
            res = run_analysis(drill.segment, SPECTRUM, settings)
            runs.append({"seed": 2000 + r, "sampling_s": res.timings["sampling"],
                         "steps": res.chain.steps, "ess": res.chain.effective_sample_size,
                         "bins": res.check.bins, "refinements": res.check.refinements,
                         "load_average": load()})
            say(f"{drill.source.name} repeat {r + 1}/{repeats}: sampling "
                f"{runs[-1]['sampling_s']:.1f} s, {runs[-1]['steps']} steps")
        per_step = [1e3 * x["sampling_s"] / x["steps"] for x in runs]
        rows.append({"duration_s": duration, "optimal_snr": drill.optimal_snr,
                     "frequency_bins": round((default_f_high(drill.segment, SPECTRUM)
                                              - SCALING_F_LOW) * duration),
                     "sampling_s": statistics.median(x["sampling_s"] for x in runs),
                     "sampling_s_per_1000_steps": statistics.median(per_step),
                     "steps": statistics.median(x["steps"] for x in runs),
                     "ess": statistics.median(x["ess"] for x in runs), "runs": runs})
    for row in rows:
        row["ratio_to_first"] = row["sampling_s"] / rows[0]["sampling_s"]
        row["per_step_ratio_to_first"] = (row["sampling_s_per_1000_steps"]
                                          / rows[0]["sampling_s_per_1000_steps"])
    return {"f_low": SCALING_F_LOW, "effective_distance": distance, "repeats": repeats,
            "rows": rows}


def main(argv: list[str] | None = None) -> int:
    """Run the chosen sections, print the table, write the JSON file; exit code 0."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3, help="repeats per case (3)")
    parser.add_argument("--quick", action="store_true", help="one repeat, skip the 512 s segment")
    parser.add_argument("--only", choices=SECTIONS, help="run one section only")
    parser.add_argument("--json", type=Path, help="where to write the results (default "
                        "benchmarks/results.json; results-quick.json with --quick, "
                        "results-SECTION.json with --only)")
    args = parser.parse_args(argv)
    if not 1 <= args.repeats <= 50:
        parser.error(f"--repeats {args.repeats} must be between 1 and 50")
    repeats = 1 if args.quick else args.repeats
    sections = (args.only,) if args.only else SECTIONS
    results: dict[str, Any] = {"machine": machine_facts(), "quick": args.quick,
                               "repeats": repeats, "sections": list(sections)}
    say(f"load average {results['machine']['load_average_start']}; simulating the 256 s case")
    bns = make_drill(BNS)
    if "likelihood" in sections:
        results["likelihood"] = bench_likelihood(bns, MIN_LIKELIHOOD_REPEATS if args.quick else 9)
    if "e2e" in sections:
        with tempfile.TemporaryDirectory(prefix="chirpcast-bench-") as tmp:
            drills = [bns, make_drill(HEAVY_32S), make_drill(HEAVY_8S)]
            results["e2e"] = bench_e2e(drills, Path(tmp), repeats)
    if "scaling" in sections:
        durations = (64.0, 128.0, 256.0) if args.quick else (64.0, 128.0, 256.0, 512.0)
        results["scaling"] = bench_scaling(bns.injection.effective_distance, durations, repeats)
    results["machine"]["load_average_end"] = load()
    results["machine"]["benchmark_wall_s"] = round(since_start(), 1)
    name = "results" + ("-quick" if args.quick else "") + (f"-{args.only}" if args.only else "")
    out = args.json if args.json is not None else HERE / f"{name}.json"
    out.write_text(json.dumps(results, indent=2) + "\n", encoding="utf-8")
    sys.stdout.write(format_table(results) + "\n")
    say(f"wrote {out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
