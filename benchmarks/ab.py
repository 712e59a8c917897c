"""Files-to-report A/B: this checkout against an earlier commit, interleaved in one run.

Run from the repository root::

    /work/venv/bin/python benchmarks/ab.py --against 0edb889             # BNS-like case
    /work/venv/bin/python benchmarks/ab.py --against HEAD~3 --case HEAVY_32S --seeds 1000,1001

The earlier commit is checked out into a temporary git worktree. Each round runs every seed
once with the old code and once with the new one, each in a fresh interpreter, so a machine
that slows down or speeds up during the run touches both sides alike; the ratio of the
medians is the figure to quote (absolute times on a shared machine drift by 20% within a day).
Writes ``results-ab.json``; measures, never fails on a figure.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import Any

from machine import load, machine_facts, say

ROOT = Path(__file__).resolve().parents[1]

#: Run inside the interpreter of one side: the drill, then each seed, one JSON line each.
_ONE_SIDE = """
import json, sys, tempfile, time
from pathlib import Path
root, case, seeds = sys.argv[1], sys.argv[2], [int(s) for s in sys.argv[3].split(",")]
sys.path[:0] = [root, root + "/benchmarks"]
import cases
from estimator.settings import AnalysisSettings
from service.pipeline import AnalysisRequest, analyze_files
source = getattr(cases, case)
drill = cases.make_drill(source)
folder = Path(tempfile.mkdtemp())
strain, psd = cases.write_drill_files(drill, folder)
for seed in seeds:
    settings = AnalysisSettings(trigger_time=drill.trigger_time, f_low=source.f_low, seed=seed,
                                spin_max=source.spin_max)
    clock = time.perf_counter()
    summary = analyze_files(AnalysisRequest(strain_path=strain, settings=settings, psd_path=psd),
                            folder / f"out-{seed}")
    diag = summary["diagnostics"]
    print(json.dumps({"seed": seed, "wall_s": time.perf_counter() - clock, "steps": diag["steps"],
                      "ess": diag["effective_sample_size"], "stages_s": diag["timings_s"]}))
"""


def _side(root: Path, case: str, seeds: list[int]) -> list[dict[str, Any]]:
    done = subprocess.run([sys.executable, "-c", _ONE_SIDE, str(root), case,
                           ",".join(map(str, seeds))],
                          capture_output=True, text=True, check=True, timeout=1800)
    return [json.loads(line) for line in done.stdout.splitlines() if line.startswith("{")]


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--against", required=True, help="the earlier commit (any git revision)")
    parser.add_argument("--case", default="BNS", help="a Source of cases.py (BNS)")
    parser.add_argument("--seeds", default="1000,1001,1002", help="sampler seeds (1000,1001,1002)")
    parser.add_argument("--rounds", type=int, default=2, help="rounds of old-then-new (2)")
    parser.add_argument("--json", type=Path, default=ROOT / "benchmarks" / "results-ab.json")
    args = parser.parse_args()
    seeds = [int(s) for s in args.seeds.split(",")]
    facts = machine_facts()
    with tempfile.TemporaryDirectory() as tmp:
        old = Path(tmp) / "old"
        subprocess.run(["git", "-C", str(ROOT), "worktree", "add", "-q", "--detach", str(old),
                        args.against], check=True)
        try:
            runs: dict[str, list[dict[str, Any]]] = {"old": [], "new": []}
            for r in range(args.rounds):
                for name, root in (("old", old), ("new", ROOT)):
                    runs[name] += _side(root, args.case, seeds)
                    say(f"round {r + 1}/{args.rounds} {name}: "
                        + ", ".join(f"{x['wall_s']:.1f} s" for x in runs[name][-len(seeds):]))
        finally:
            subprocess.run(["git", "-C", str(ROOT), "worktree", "remove", "--force", str(old)],
                           check=False)
    median = {k: statistics.median(x["wall_s"] for x in v) for k, v in runs.items()}
    result = {"machine": {**facts, "load_at_end": load()}, "against": args.against,
              "case": args.case, "seeds": seeds, "rounds": args.rounds,
              "median_wall_s": median, "ratio_new_over_old": median["new"] / median["old"],
              "runs": runs}
    args.json.write_text(json.dumps(result, indent=2) + "\n", encoding="utf-8")
    ratio = result["ratio_new_over_old"]
    sys.stdout.write(f"{args.case}: old {median['old']:.2f} s, new {median['new']:.2f} s "
                     f"(median of {len(runs['new'])}), new/old {ratio:.3f}\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
