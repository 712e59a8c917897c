"""The plain-text table ``benchmarks/run.py`` prints from its results."""

from __future__ import annotations

from typing import Any

__all__ = ["format_table"]

#: Stages of ``summary['diagnostics']['timings_s']``, in the order the analysis runs them.
STAGES = {"reading": "read", "conditioning": "cond", "search": "search", "fiducial": "fiducial",
          "sampling": "sampling", "likelihood_check": "check", "report": "report"}
#: Aims set for the benchmark (not test thresholds).
AIM_RATIO = 1000.0
AIM_WALL_S = 15.0
AIM_ESS = 2000.0


def _verdict(ok: bool) -> str:
    return "met" if ok else "NOT met"


def _machine(m: dict[str, Any], repeats: int, quick: bool) -> list[str]:
    end = m.get("load_average_end", [])
    return [
        f"chirpcast benchmark, {m['date']}  ({'quick, ' if quick else ''}repeats {repeats})",
        f"machine: {m['cpu_count']} CPUs ({m['cpus_usable']} usable), {m['platform']}; "
        f"Python {m['python']}, numpy {m['numpy']} ({m['blas']}), scipy {m['scipy']}, "
        f"emcee {m['emcee']}"
        + (f"; threads {m['thread_settings']}" if m["thread_settings"] else ""),
        f"load average (1/5/15 min): start {m['load_average_start']}, end {end}; "
        f"benchmark took {m.get('benchmark_wall_s', 0.0):.0f} s",
    ]


def _likelihood(r: dict[str, Any]) -> list[str]:
    ratio = r["ratio"]
    return [
        "",
        f"1. Likelihood cost per parameter set: {r['case']}, {r['frequency_bins']} frequency "
        f"bins (binned: {r['relbin_bins']} bins), SNR {r['optimal_snr']:.1f}",
        f"   batch of {r['batch']} sets near the fiducial, median of {r['repeats']} repeats "
        f"(binned: {r['binned_calls_per_repeat']} calls per repeat, around the exact call)",
        f"   exact   {r['exact_s_per_set'] * 1e3:10.3f} ms   (best "
        f"{r['exact_s_per_set_min'] * 1e3:.3f} ms; set-up {r['exact_setup_s']:.2f} s; "
        f"{r['exact_workers']} threads; one thread {r['single_thread_s_per_set'] * 1e3:.3f} ms, "
        f"ratio {r['single_thread_ratio']:.0f}x)",
        f"   binned  {r['binned_s_per_set'] * 1e6:10.2f} us   (best "
        f"{r['binned_s_per_set_min'] * 1e6:.2f} us; set-up {r['binned_setup_s']:.2f} s)",
        f"   ratio   {ratio:10.0f} x    aim >= {AIM_RATIO:.0f}x: {_verdict(ratio >= AIM_RATIO)}"
        f"   (median of per-repeat ratios; range {r['ratio_min']:.0f}-{r['ratio_max']:.0f}, "
        f"best-to-best {r['ratio_of_best']:.0f}; load {r['load_average']})",
        f"   plain float64 exact (taylorf2 + inner products, for scale) "
        f"{r.get('plain_exact_s_per_set', float('nan')) * 1e3:.1f} ms: ratio to binned "
        f"{r.get('plain_ratio', float('nan')):.0f}x",
        f"   on the batch: max |ln L exact - ln L binned| = {r['max_abs_difference']:.4f}; median "
        f"ln L drop from the fiducial {r['median_drop_from_fiducial']:.2f}",
        f"   refined ({r['refined_bins']} bins, used when the analysis' check fails): "
        f"{r['refined_s_per_set'] * 1e6:.2f} us, ratio {r['refined_ratio']:.0f}x, max |difference| "
        f"{r['refined_max_abs_difference']:.4f}",
    ]


def _e2e(r: dict[str, Any], cpus: int) -> list[str]:
    head = (f"   {'case':<16}{'SNR':>5}{'wall s':>8}{'min':>6}{'CPU s':>7}{'ESS':>7}{'minESS':>7}"
            f"{'bins':>5}  conv check" + "".join(f"{label:>9}" for label in STAGES.values()))
    lines = ["", f"2. Files to finished report (analyze_files: .npz strain + PSD CSV -> folder "
             f"with report), median of {r['cases'][0]['repeats']}, stage times in s", head]
    for c in r["cases"]:
        lines.append(
            f"   {c['case']:<16}{c['optimal_snr']:5.1f}{c['wall_s']:8.1f}{c['min_wall_s']:6.1f}"
            f"{c['cpu_s']:7.1f}{c['ess']:7.0f}"
            f"{c['min_ess']:7.0f}{max(x['bins'] for x in c['runs']):5d}  "
            f"{'yes ' if c['all_converged'] else 'NO  '} "
            f"{'pass ' if c['all_checks_passed'] else 'FAIL '}"
            + "".join(f"{c['stages_s'].get(s, 0.0):9.2f}" for s in STAGES))
    bns = r["cases"][0]
    ok = bns["wall_s"] <= AIM_WALL_S and bns["ess"] >= AIM_ESS
    lines.append(f"   aim: {bns['case']} <= {AIM_WALL_S:.0f} s median with >= {AIM_ESS:.0f} "
                 f"effective samples (2 cores): {_verdict(ok)} on {cpus} usable CPUs")
    lines.append("   wall s: median, min: fastest repeat, CPU s: median process CPU time (all "
                 "threads); bins: the most relative-binning bins any repeat ended with")
    csv = r["csv_read"]
    lines.append(f"   reading the {csv['case']} strain ({csv['samples']} samples): two-column CSV "
                 f"({csv['csv_mb']:.1f} MB) {csv['csv_read_s']:.2f} s, .npz "
                 f"{csv['npz_read_s']:.3f} s (median of {csv['repeats']})")
    return lines


def _scaling(r: dict[str, Any]) -> list[str]:
    lines = ["", f"3. Sampling-stage time vs segment length: the same source (effective distance "
             f"{r['effective_distance']:.1f} Mpc), f_low fixed at {r['f_low']:g} Hz for every "
             f"length, median of {r['repeats']}",
             f"   {'T s':>6}{'freq bins':>11}{'SNR':>6}{'sampling s':>12}{'ratio':>7}"
             f"{'steps':>7}{'s/1000 steps':>14}{'ratio':>7}{'ESS':>7}{'bins':>5}"]
    for row in r["rows"]:
        lines.append(
            f"   {row['duration_s']:6.0f}{row['frequency_bins']:11d}{row['optimal_snr']:6.1f}"
            f"{row['sampling_s']:12.2f}{row['ratio_to_first']:7.2f}{row['steps']:7.0f}"
            f"{row['sampling_s_per_1000_steps']:14.2f}{row['per_step_ratio_to_first']:7.2f}"
            f"{row['ess']:7.0f}{max(x['bins'] for x in row['runs']):5d}")
    lines.append("   aim: nearly flat (ratios to the shortest segment close to 1); bins: the most "
                 "relative-binning bins any repeat ended with (96 unless the check refined)")
    return lines


def format_table(results: dict[str, Any]) -> str:
    """The whole table, one string (no trailing newline)."""
    machine = results["machine"]
    lines = _machine(machine, results["repeats"], results["quick"])
    if "likelihood" in results:
        lines += _likelihood(results["likelihood"])
    if "e2e" in results:
        lines += _e2e(results["e2e"], machine["cpus_usable"])
    if "scaling" in results:
        lines += _scaling(results["scaling"])
    return "\n".join(lines)
