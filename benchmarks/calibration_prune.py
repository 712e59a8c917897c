"""Drop from a calibration journal the rows that a change to the pre-sampling stages alters.

Used once, on 2026-12-03, when the aligned-spin mode scan (estimator/mode_scan.py)
was added while the 200-injection calibration was part-way through. The scan
draws no random numbers and leaves the fiducial untouched unless it adopts a
new peak, so an injection whose scan does not adopt is analysed by the same
procedure as before (same fiducial, same Fisher ball, same sampler seed). This
script re-runs every journal row up to the sampler, keeps the rows whose
fiducial is unchanged and drops the others, which ``benchmarks/calibration.py``
then runs again. ``--verify K`` re-runs K kept rows in full and prints the
largest change of a credible level: not zero, because an earlier commit (the
spin phase terms as one matrix product) changed the last digits of the
likelihood and so the chain's path; on 2026-12-03 row 2 moved by at most 0.02,
Monte Carlo noise of a 3000-sample posterior.

    python benchmarks/calibration_prune.py [--out benchmarks/calibration] [--verify 1]
"""

from __future__ import annotations

import argparse
import json
import sys
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import estimator.analysis as analysis
from service.calibrate import CalibrationSetup, run_injection

OUT = Path(__file__).resolve().parent / "calibration"


class _Stop(Exception):
    def __init__(self, spinning: bool) -> None:
        super().__init__()
        self.spinning = spinning


def _adopts(setup: CalibrationSetup, index: int) -> bool:
    """Whether the current code starts the sampler from another fiducial for this injection."""

    def stop(datasets, reference, fiducial, **_kw):
        raise _Stop("spin1" in fiducial)

    analysis.sample_posterior = stop  # type: ignore[assignment]
    try:
        run_injection(setup, index)
    except _Stop as s:
        return s.spinning
    msg = "the analysis did not reach the sampler"
    raise RuntimeError(msg)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=OUT)
    parser.add_argument("--verify", type=int, default=1)
    args = parser.parse_args()
    path = args.out / "runs.partial.jsonl"
    lines = path.read_text("utf-8").splitlines()
    header, rows = json.loads(lines[0]), [json.loads(x) for x in lines[1:] if x.strip()]
    setup = CalibrationSetup(
        **{k: tuple(v) if isinstance(v, list) else v for k, v in header["setup"].items()}
    )
    with ProcessPoolExecutor(2) as pool:
        changed = list(pool.map(_adopts, [setup] * len(rows), [r["index"] for r in rows]))
    keep = [r for r, c in zip(rows, changed, strict=True) if not c]
    dropped = [r["index"] for r, c in zip(rows, changed, strict=True) if c]
    print(f"{len(rows)} rows; {len(dropped)} start from another fiducial now: {dropped}")
    for row in keep[: args.verify]:
        again = run_injection(setup, row["index"])
        moved = max(abs(again[k] - row[k]) for k in row if k.endswith("_level"))
        print(f"row {row['index']} re-run in full: credible levels moved by at most {moved:.4f}")
    path.write_text("\n".join([lines[0], *(json.dumps(r) for r in keep)]) + "\n", "utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
