"""Throughput: analyses per minute with 1, 2 and 4 workers, local processes beside Dask.

Run from the repository root::

    .venv/bin/python benchmarks/throughput.py                    # 8 drills, 1 repeat
    .venv/bin/python benchmarks/throughput.py --drills 6 --repeats 3
    .venv/bin/python benchmarks/throughput.py --engines local --counts 1 2

For each engine (``local``: :class:`service.worker_pool.WorkerPool`; ``dask``: a
``distributed.LocalCluster`` on 127.0.0.1 of N one-thread worker processes, fed by
:class:`service.dask_engine.DaskExecutor`) and each worker count N, the executor
is started on a fresh data folder and warmed up (N analyses that fail at once, so
every worker has imported the pipeline), then a burst of ``--drills`` analyses of
the demo drill (spins fixed, a short sampler run; seeds 1, 2, ...) is queued at
once; the figure is drills / (time from queueing to the last one done), per minute.
The cluster is started before and closed after the timing, as a long-lived
cluster would be. Writes ``benchmarks/results-throughput.json`` (every repeat, the
medians, the load averages and the machine facts). Measures; never fails on a figure.
"""

from __future__ import annotations

import argparse
import json
import logging
import shutil
import statistics
import sys
import tempfile
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from machine import load, machine_facts, say

from service.execution import make_executor
from service.settings import ServiceSettings
from service.storage import FINAL_STATES, Store, hash_secret, open_store

HERE = Path(__file__).resolve().parent
OUT = HERE / "results-throughput.json"
DEMO = HERE.parent / "demo_data"
EVENT = json.loads((DEMO / "event.json").read_text(encoding="utf-8"))
#: The drill's sampler settings: about 8 s for one analysis on one idle core.
DRILL = {"spin_max": 0.0, "target_effective_samples": 100.0, "check_draws": 10,
         "max_steps": 1000, "n_bins": 32}  # fmt: skip
#: Longest wait for one burst, s.
BURST_TIMEOUT = 1800.0


def _queue(store: Store, analysis_id: str, settings: dict[str, Any]) -> None:
    (store.inputs_dir(analysis_id) / "strain").mkdir(parents=True)
    shutil.copy(DEMO / "strain.csv", store.inputs_dir(analysis_id) / "strain" / "strain.csv")
    request = {"strain": "inputs/strain/strain.csv", "psd": None, "asd": False,
               "sample_rate": None, "start_time": None, "label": analysis_id,
               "settings": settings}  # fmt: skip
    store.insert_analysis(analysis_id=analysis_id, label=analysis_id, request=request,
                          inputs={}, owner="", idempotency_key=None,
                          share_hash=hash_secret(analysis_id))  # fmt: skip


def _wait(store: Store, ids: list[str], timeout: float) -> dict[str, str]:
    """Poll until every analysis of ``ids`` is final (or ``timeout``); their states."""
    deadline = time.monotonic() + timeout
    states: dict[str, str] = {}
    while time.monotonic() < deadline:
        states = {i: (row.state if (row := store.get(i)) else "missing") for i in ids}
        if all(s in FINAL_STATES for s in states.values()):
            break
        time.sleep(0.2)
    return states


@contextmanager
def _cluster(engine: str, count: int) -> Iterator[str | None]:
    """A LocalCluster of ``count`` one-thread processes for ``dask``; ``None`` for ``local``."""
    if engine != "dask":
        yield None
        return
    from distributed import LocalCluster

    cluster = LocalCluster(n_workers=count, threads_per_worker=1, processes=True,
                           host="127.0.0.1", dashboard_address=None,
                           silence_logs=logging.ERROR)  # fmt: skip
    try:
        yield str(cluster.scheduler_address)
    finally:
        cluster.close(timeout=30)


def burst(
    engine: str, count: int, drills: int, repeat: int, scheduler: str | None
) -> dict[str, Any]:
    """One timed burst of ``drills`` analyses through a fresh executor of ``count`` workers."""
    with tempfile.TemporaryDirectory(prefix="chirpcast-throughput-") as tmp:
        svc = ServiceSettings(data_dir=Path(tmp) / "data", workers=count, scheduler=scheduler,
                              heartbeat_seconds=1.0, stale_after_seconds=120.0)  # fmt: skip
        store = open_store(svc)
        store.initialize()
        executor = make_executor(svc)
        executor.start()
        try:
            warm = [f"warm-{i}" for i in range(count)]
            for aid in warm:  # fails at once (trigger outside the segment): imports only
                _queue(store, aid, {**DRILL, "trigger_time": 1.0})
            _wait(store, warm, 300.0)
            ids = [f"drill-{repeat}-{i}" for i in range(drills)]
            load_before = load()
            began = time.perf_counter()
            for i, aid in enumerate(ids):
                _queue(store, aid, {**DRILL, "trigger_time": EVENT["trigger_time"], "seed": i + 1})
            states = _wait(store, ids, BURST_TIMEOUT)
            elapsed = time.perf_counter() - began
        finally:
            executor.stop(timeout=30)
    done = sum(s == "done" for s in states.values())
    return {"engine": engine, "workers": count, "repeat": repeat, "drills": drills,
            "done": done, "not_done": {k: v for k, v in states.items() if v != "done"},
            "elapsed_s": round(elapsed, 2),
            "analyses_per_minute": round(60.0 * done / elapsed, 2),
            "worker_seconds_per_analysis": round(elapsed * count / max(done, 1), 2),
            "load_before": load_before, "load_after": load()}  # fmt: skip


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--drills", type=int, default=8, help="analyses per burst (8)")
    parser.add_argument("--repeats", type=int, default=1, help="bursts per configuration (1)")
    parser.add_argument("--counts", type=int, nargs="+", default=[1, 2, 4],
                        help="worker counts (1 2 4)")  # fmt: skip
    parser.add_argument("--engines", nargs="+", default=["local", "dask"],
                        choices=["local", "dask"], help="engines (local dask)")  # fmt: skip
    parser.add_argument("--out", type=Path, default=OUT, help="output file")
    args = parser.parse_args()
    if args.drills < 1 or args.repeats < 1 or min(args.counts) < 1:
        parser.error("--drills, --repeats and every --counts value must be at least 1")
    logging.basicConfig(level=logging.WARNING)
    logging.getLogger("distributed").setLevel(logging.WARNING)
    facts = machine_facts()
    say(f"throughput: {args.drills} drills x {args.repeats} repeat(s), engines {args.engines},"
        f" counts {args.counts}, load {load()}")  # fmt: skip
    runs: list[dict[str, Any]] = []
    summary: dict[str, dict[str, Any]] = {}
    for engine in args.engines:
        for count in args.counts:
            with _cluster(engine, count) as scheduler:
                mine = []
                for repeat in range(args.repeats):
                    run = burst(engine, count, args.drills, repeat, scheduler)
                    say(f"{engine} x{count} repeat {repeat}: {run['analyses_per_minute']:.2f}"
                        f" analyses/min ({run['done']}/{args.drills} done in"
                        f" {run['elapsed_s']:.0f} s, load {run['load_after']})")  # fmt: skip
                    mine.append(run)
            runs.extend(mine)
            summary[f"{engine}-{count}"] = {
                "engine": engine, "workers": count,
                "analyses_per_minute_median": statistics.median(
                    r["analyses_per_minute"] for r in mine),
                "worker_seconds_per_analysis_median": statistics.median(
                    r["worker_seconds_per_analysis"] for r in mine),
            }  # fmt: skip
    doc = {"drills": args.drills, "repeats": args.repeats, "drill_settings": DRILL,
           "summary": summary, "runs": runs,
           "machine": {**facts, "load_at_end": load()}}  # fmt: skip
    args.out.write_text(json.dumps(doc, indent=2) + "\n", "utf-8")
    out = sys.stdout
    out.write(f"{'engine':<8}{'workers':>8}{'analyses/min':>14}{'worker-s/analysis':>19}\n")
    for entry in summary.values():
        out.write(f"{entry['engine']:<8}{entry['workers']:>8}"
                  f"{entry['analyses_per_minute_median']:>14.2f}"
                  f"{entry['worker_seconds_per_analysis_median']:>19.1f}\n")  # fmt: skip
    out.write(f"wrote {args.out}\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
