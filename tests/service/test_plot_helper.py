"""The report's plot helper process may die (killed, out of memory) without failing the analysis.

Found while reading the load-and-kill harness (``benchmarks/load_kill.py``), whose killer
may hit a worker's plot helper rather than the worker: the helper's death used to fail the
analysis (BrokenProcessPool); now the plot is drawn in the worker itself and the next
analysis starts a fresh helper. The PNG signature is from the
PNG specification (W3C/ISO 15948, section 5.2).
"""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

import numpy as np
import pytest

from service import pipeline

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
LABELS = {"chirp_mass": "Mc", "mass_ratio": "q"}


def _samples() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(5)
    return {"chirp_mass": 24.0 + 0.3 * rng.standard_normal(2000),
            "mass_ratio": np.clip(0.8 + 0.1 * rng.standard_normal(2000), 0.1, 1.0)}


def _kill_helper() -> None:
    pool = pipeline._plot_pool()
    if pool is None:
        pytest.skip("no plot helper process on this platform (one core or no fork)")
    pool.submit(int, 0).result(timeout=60)  # the helper process exists
    pids = list(pool._processes)  # the pool's worker pids (one)
    assert pids
    for pid in pids:
        os.kill(pid, signal.SIGKILL)
    for _ in range(100):  # at most ~5 s for the pool to notice
        if all(not p.is_alive() for p in pool._processes.values()) or not pool._processes:
            break
        time.sleep(0.05)


def test_corner_plot_is_drawn_when_the_helper_dies(tmp_path: Path) -> None:
    samples = _samples()
    _kill_helper()
    out = tmp_path / "corner.png"
    call: pipeline.PlotCall = (pipeline._corner, (samples, out, LABELS), {})
    pending = pipeline._submit_plot(call)
    assert pipeline._finish_plot(pending, call) == out
    assert out.read_bytes()[:8] == PNG_SIGNATURE
    # The broken helper was dropped: the next plot goes to a fresh, working one.
    again = tmp_path / "again.png"
    call = (pipeline._corner, (samples, again, LABELS), {})
    fresh = pipeline._submit_plot(call)
    assert fresh is not None
    assert pipeline._finish_plot(fresh, call) == again
    assert again.read_bytes()[:8] == PNG_SIGNATURE
