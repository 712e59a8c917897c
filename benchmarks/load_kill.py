"""Load and kill, full size: 50 concurrent submissions while the service is SIGKILLed 20 times.

A benchmark of reliability, not speed: it reports submissions, kills, jobs lost,
duplicate jobs, half-written outputs, the database integrity check and the time to
drain, and writes them to ``benchmarks/results-load-kill.json``. The harness is
``tests/e2e/loadkill.py`` (its reduced run is ``tests/e2e/test_load_kill.py``).

    python benchmarks/load_kill.py                      # 50 submissions, 20 kills
    python benchmarks/load_kill.py --submissions 20 --kills 5
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

from machine import load, machine_facts, say

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests.e2e.loadkill import run_load_kill  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    """Run once and write the figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--submissions", type=int, default=50)
    parser.add_argument("--kills", type=int, default=20)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--concurrency", type=int, default=8)
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--pace", type=float, default=1.4,
                        help="seconds between submission starts (1.4: 50 over the ~70 s of kills)")
    parser.add_argument("--json", type=Path, default=ROOT / "benchmarks" / "results-load-kill.json")
    args = parser.parse_args(argv)
    if (args.submissions < 2 or args.kills < 0 or args.workers < 1 or args.concurrency < 1
            or args.pace < 0):
        parser.error("--submissions >= 2, --kills >= 0, --workers >= 1, --concurrency >= 1,"
                     " --pace >= 0")
    facts = machine_facts()
    say(f"{args.submissions} submissions, {args.kills} kills, {args.workers} workers")
    with tempfile.TemporaryDirectory(prefix="chirpcast-load-kill-") as tmp:
        report = run_load_kill(Path(tmp), submissions=args.submissions, kills=args.kills,
                               seed=args.seed, workers=args.workers,
                               concurrency=args.concurrency, kill_gap=(1.0, 6.0),
                               pace=args.pace,
                               load_timeout=1800.0, drain_timeout=3600.0)
    figures = report.to_dict()
    facts["load_average_end"] = load()
    out = {"machine": facts, "settings": vars(args) | {"json": str(args.json)}, **figures}
    args.json.write_text(json.dumps(out, indent=2) + "\n", encoding="utf-8")
    for key in ("submissions", "distinct_keys", "kills", "final_states", "jobs_lost",
                "duplicate_jobs", "half_written_outputs", "integrity_check", "load_phase_s",
                "time_to_drain_s", "retried_requests", "problems"):
        print(f"{key:>22}: {figures[key]}")
    return 0 if not report.problems else 1


if __name__ == "__main__":
    raise SystemExit(main())
