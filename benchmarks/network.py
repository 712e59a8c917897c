"""chirpcast network benchmark: three invented sites, files to report; and the sky coverage run.

Run from the repository root::

    .venv/bin/python benchmarks/network.py                  # speed: 3 repeats (~2 min)
    .venv/bin/python benchmarks/network.py --coverage 200   # sky coverage (~1 h on 2 cores)

Speed case (issue aim: <= 30 s median files-to-report, >= 2000 effective samples on
the slowest-mixing parameter): the shipped sites heron, plover and curlew, 64 s at
4096 Hz each, design-curve noise, chirp mass 3 Msun, q 0.8, luminosity distance 260 Mpc
(network matched-filter SNR 34),
written as ``.npz`` strain and CSV PSD files and analysed by
``service.network_pipeline.analyze_network_files`` (the ``chirpcast analyze
--detector ...`` path). Writes ``benchmarks/results-network.json``.

Coverage: prior-drawn injections of ``tests/estimator/network_drills.py`` (the CI test
runs 40 of them), the fraction whose true sky position falls inside the 90% credible
region, with the 99.9% binomial band. Writes ``benchmarks/results-network-coverage.json``.
A benchmark, not a test: nothing fails when an aim is missed.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing as mp
import statistics
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any

import numpy as np
from machine import load, machine_facts, say
from scipy.stats import binom

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from estimator.settings import AnalysisSettings  # noqa: E402
from estimator.simulate import NetworkInjection, design_spectrum, simulate_network  # noqa: E402
from estimator.sites import SHIPPED_SITES, gps_to_gmst  # noqa: E402
from service.drill import write_psd, write_strain  # noqa: E402
from service.network_pipeline import (  # noqa: E402
    DetectorFiles,
    NetworkRequest,
    analyze_network_files,
)
from tests.estimator.network_drills import coverage_run  # noqa: E402

HERE = Path(__file__).resolve().parent
NAMES = ("heron", "plover", "curlew")
START = 1_000_000_000.0
DURATION, RATE = 64.0, 4096.0


def _files(folder: Path) -> tuple[list[DetectorFiles], float]:
    """Write the speed case's files; return them and the trigger time."""
    sites = [SHIPPED_SITES[n] for n in NAMES]
    tc = START + DURATION - 2.0
    spectrum = design_spectrum()
    injection = NetworkInjection(3.0, 0.8, 260.0, 0.5, 0.3, 2.2, 0.4, tc, 0.7)
    segments = simulate_network(
        injection, sites, [spectrum] * 3, gmst=gps_to_gmst(tc), duration=DURATION,
        sample_rate=RATE, start_time=START, rng=np.random.default_rng(7),
    )  # fmt: skip
    files = []
    for name, seg in zip(NAMES, segments, strict=True):
        strain = write_strain(seg, folder / f"{name}-strain", "npz")
        psd = write_psd(spectrum, folder / f"{name}-psd.csv")
        files.append(DetectorFiles(name, strain, psd))
    return files, tc + 0.003


def bench_speed(repeats: int) -> dict[str, Any]:
    """Files-to-report wall time and effective sample size, medians over ``repeats``."""
    runs = []
    with tempfile.TemporaryDirectory(prefix="chirpcast-net-bench-") as tmp:
        folder = Path(tmp)
        files, trigger = _files(folder)
        for r in range(repeats):
            settings = AnalysisSettings(trigger_time=trigger, seed=3000 + r)
            request = NetworkRequest(tuple(files), settings, label="network benchmark")
            clock, cpu = time.perf_counter(), time.process_time()
            summary = analyze_network_files(request, folder / f"out-{r}")
            wall, cpu = time.perf_counter() - clock, time.process_time() - cpu
            diag = summary["diagnostics"]
            runs.append({
                "seed": 3000 + r, "wall_s": wall, "cpu_s": cpu,
                "ess": diag["effective_sample_size"], "steps": diag["steps"],
                "converged": diag["converged"], "check_passed": diag["likelihood_check"]["passed"],
                "bins": diag["likelihood_check"]["bins"], "timings_s": diag["timings_s"],
                "network_snr": summary["parameters"]["network_snr"]["median"],
                "area_90_deg2": summary["sky"]["area_90_deg2"],
                "autocorrelation_time": diag["autocorrelation_time"], "load_average": load(),
            })  # fmt: skip
            say(f"network repeat {r + 1}/{repeats}: {wall:.1f} s, ESS {runs[-1]['ess']:.0f}, "
                f"{runs[-1]['steps']} steps, 90% area {runs[-1]['area_90_deg2']:.1f} deg²")
    return {
        "case": "3 sites, 64 s at 4096 Hz, chirp mass 3 Msun",
        "wall_s": statistics.median(r["wall_s"] for r in runs),
        "min_wall_s": min(r["wall_s"] for r in runs),
        "ess": statistics.median(r["ess"] for r in runs),
        "min_ess": min(r["ess"] for r in runs),
        "all_converged": all(r["converged"] for r in runs),
        "runs": runs,
    }


def bench_coverage(n: int) -> dict[str, Any]:
    """Sky coverage of the 90% region over the first ``n`` selected injections."""
    clock = time.perf_counter()
    rows: list[Any] = []
    with ProcessPoolExecutor(2, mp_context=mp.get_context("fork")) as pool:
        for seed, out in enumerate(pool.map(coverage_run, range(n + n // 10 + 5))):
            if out is not None and len(rows) < n:
                rows.append({"seed": seed, "level": out[0], "area_90_deg2": out[1],
                             "converged": out[2]})  # fmt: skip
    levels = np.array([r["level"] for r in rows])
    inside = int(np.sum(levels <= 0.9))
    lo, hi = binom.ppf(0.0005, len(rows), 0.9), binom.isf(0.0005, len(rows), 0.9)
    say(f"coverage: {inside}/{len(rows)} inside the 90% region (99.9% band {lo:.0f}-{hi:.0f})")
    return {"injections": len(rows), "inside_90": inside, "fraction": inside / max(len(rows), 1),
            "band_999": [float(lo), float(hi)], "wall_s": time.perf_counter() - clock,
            "converged": int(sum(r["converged"] for r in rows)), "runs": rows}  # fmt: skip


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--coverage", type=int, default=0, help="injections for the sky coverage")
    args = parser.parse_args(argv)
    out: dict[str, Any] = {"machine": machine_facts()}
    if args.coverage:
        out["coverage"] = bench_coverage(args.coverage)
        path = HERE / "results-network-coverage.json"
    else:
        out["speed"] = bench_speed(args.repeats)
        path = HERE / "results-network.json"
    path.write_text(json.dumps(out, indent=2, default=float) + "\n", encoding="utf-8")
    say(f"wrote {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
