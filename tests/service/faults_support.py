"""Helpers of the fault tests: queue a real, cut-short analysis; wait for a job, bounded."""

from __future__ import annotations

import json
import math
import shutil
import time
from collections.abc import Callable
from pathlib import Path

from service.storage import Analysis, Store, hash_secret

__all__ = ["DEMO", "EVENT", "QUICK", "only_inputs_left", "queue_job", "wait_for"]

DEMO = Path(__file__).resolve().parents[2] / "demo_data"
EVENT = json.loads((DEMO / "event.json").read_text(encoding="utf-8"))
#: A real analysis of the demo cut short: spins fixed, 200 sampler steps (unconverged,
#: still "done"), 10 likelihood checks; about 3-8 s on 2 cores. The worker path is under
#: test, not the posterior.
QUICK = {"trigger_time": EVENT["trigger_time"], "seed": 1, "spin_max": 0.0, "max_steps": 200,
         "check_draws": 10}


def queue_job(store: Store, analysis_id: str, *, name: str = "strain.csv") -> Path:
    """Queue the demo strain, stored as ``name``, with :data:`QUICK`; return the stored file."""
    folder = store.inputs_dir(analysis_id) / "strain"
    folder.mkdir(parents=True)
    shutil.copy(DEMO / "strain.csv", folder / name)
    numpy = name.endswith((".npy", ".npz"))
    request = {"strain": f"inputs/strain/{name}", "psd": None, "asd": False,
               "sample_rate": 2048.0 if numpy else None,
               "start_time": EVENT["trigger_time"] - 12.0 if numpy else None,
               "label": "", "settings": QUICK}
    store.insert_analysis(analysis_id=analysis_id, label=analysis_id, request=request,
                          inputs={}, owner="", idempotency_key=None,
                          share_hash=hash_secret(analysis_id))
    return folder / name


def only_inputs_left(store: Store, analysis_id: str) -> None:
    """Assert that the analysis folder holds its inputs only (no attempt, partial, output)."""
    assert {p.name for p in store.analysis_dir(analysis_id).iterdir()} == {"inputs"}


def wait_for(store: Store, analysis_id: str, until: Callable[[Analysis], bool],
             timeout: float, interval: float = 0.05) -> Analysis:
    """Poll the job until ``until(row)`` (at most ``timeout`` s); AssertionError if never."""
    deadline = time.monotonic() + timeout
    row = None
    for _ in range(math.ceil(timeout / interval) + 1):
        row = store.get(analysis_id)
        if row is not None and until(row):
            return row
        if time.monotonic() > deadline:
            break
        time.sleep(interval)
    raise AssertionError(f"{analysis_id}: not reached within {timeout:.0f} s; last {row}")
