"""Reduced load-and-kill run (the full one is ``benchmarks/load_kill.py``).

Ten submissions of the demo event from four threads (two of them repeat another's
Idempotency-Key, two use the heavier spinning settings) while the server and its
workers are SIGKILLed three times at seeded random moments and restarted. Every
accepted submission must reach ``done`` exactly once, each key own one analysis,
no output be half-written, and SQLite's ``PRAGMA integrity_check`` answer ``ok``
(SQLite documentation, "PRAGMA integrity_check").
"""

from __future__ import annotations

from pathlib import Path

import pytest

from .loadkill import run_load_kill


@pytest.mark.slow
def test_submissions_survive_kills_exactly_once(tmp_path: Path) -> None:
    report = run_load_kill(tmp_path, submissions=10, kills=3, seed=3, workers=2,
                           concurrency=4, repeat_every=5, heavy_every=5,
                           kill_gap=(2.0, 6.0), pace=1.0, load_timeout=240.0,
                           drain_timeout=300.0)
    figures = report.to_dict()
    assert report.problems == [], figures
    assert sum(report.kills.values()) == 3, figures
    assert report.distinct_keys == 8
    assert report.states == {"done": 8}, figures
    assert report.lost == 0
    assert report.duplicates == 0
    assert report.half_written == 0
    assert report.integrity == "ok"
