"""The full calibration run: the P-P test of the analysis over 200 or more injections.

Run from the repository root::

    /work/venv/bin/python benchmarks/calibration.py                # 200 injections, seed 2026
    /work/venv/bin/python benchmarks/calibration.py --n 400 --seed 7

The same run as ``chirpcast calibrate`` (service/calibrate.py: prior-drawn
injections, observed-SNR threshold 8, the default analysis), with the machine
facts added. Writes ``benchmarks/calibration/`` (calibration.json, runs.csv,
pp_plot.png) and prints the per-parameter figures. Measures; never fails on a
figure (CI runs the reduced test in tests/service/test_calibrate.py).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from machine import load, machine_facts, say

from service.calibrate import CalibrationSetup, run_calibration

OUT = Path(__file__).resolve().parent / "calibration"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=200, help="injections (200)")
    parser.add_argument("--seed", type=int, default=2026, help="seed of the run (2026)")
    parser.add_argument("--workers", type=int, default=None, help="processes (all cores)")
    parser.add_argument("--out", type=Path, default=OUT, help="output folder")
    args = parser.parse_args()
    facts = machine_facts()
    say(f"calibration: {args.n} injections, seed {args.seed}, load {load()}")
    doc = run_calibration(
        CalibrationSetup(injections=args.n, seed=args.seed),
        args.out,
        workers=args.workers,
        progress=lambda done, total: say(f"injection {done}/{total}") if done % 10 == 0 else None,
    )
    doc["machine"] = {**facts, "load_at_end": load()}
    (args.out / "calibration.json").write_text(json.dumps(doc, indent=2) + "\n", "utf-8")
    out = sys.stdout
    out.write(f"{doc['injections']} injections in {doc['wall_time_s']:.0f} s "
              f"({doc['workers']} processes); {doc['selection']}\n")
    for name, entry in doc["parameters"].items():
        cov = entry["coverage"]
        out.write(f"  {name:<20} KS p {entry['ks_p_value']:.3f}   coverage 50% {cov['0.5']:.3f}"
                  f"   90% {cov['0.9']:.3f}\n")
    out.write(f"  combined p {doc['combined_p_value']:.3f}; bands {doc['coverage_band']}, "
              f"family-wise {doc['familywise_band']}; outside: {doc['outside_band']}; "
              f"{'PASS' if doc['passes'] else 'FAIL'}\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
