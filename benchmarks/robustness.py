"""Robustness study: 40 or more heavy injections made with an independent waveform.

Run from the repository root::

    .venv/bin/python benchmarks/robustness.py              # 40 injections, seed 2026
    .venv/bin/python benchmarks/robustness.py --n 80 --seed 7

Simulates with the time-domain waveform (service/robustness.py explains the
draw) and analyses each injection with the default model and with TaylorF2.
Writes ``benchmarks/results-robustness.json`` (rows and summary, with the
machine facts) and prints the coverage of the 90% intervals and the median
bias in posterior standard deviations. Measures; never fails on a figure (CI
runs the reduced test in tests/service/test_robustness.py).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from machine import load, machine_facts, say

from service.robustness import STUDIED, RobustnessSetup, run_study

OUT = Path(__file__).resolve().parent / "results-robustness.json"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=40, help="injections (40)")
    parser.add_argument("--seed", type=int, default=2026, help="seed of the study (2026)")
    parser.add_argument("--workers", type=int, default=None, help="processes (all cores)")
    parser.add_argument("--out", type=Path, default=OUT, help="output file")
    args = parser.parse_args()
    facts = machine_facts()
    setup = RobustnessSetup(injections=args.n, seed=args.seed)
    say(f"robustness: {args.n} injections, seed {args.seed}, load {load()}")
    rows, summary = run_study(
        setup,
        workers=args.workers,
        progress=lambda done, total: say(f"injection {done}/{total}") if done % 5 == 0 else None,
    )
    doc = {"setup": setup.__dict__, "summary": summary, "rows": rows,
           "machine": {**facts, "load_at_end": load()}}  # fmt: skip
    args.out.write_text(json.dumps(doc, indent=2) + "\n", "utf-8")
    out = sys.stdout
    for model in setup.models:
        entry = summary[model]
        out.write(f"{model}: median {entry['wall_s_median']:.0f} s per analysis, "
                  f"{entry['not_converged']} not converged\n")  # fmt: skip
        for name in STUDIED:
            e = entry[name]
            out.write(
                f"  {name:<16} 90% coverage {e['coverage_90']:.3f}   median bias "
                f"{e['bias_sd_median']:+.2f} sd   largest |bias| {e['bias_sd_abs_max']:.2f} sd\n"
            )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
