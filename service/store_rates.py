"""A sliding-window rate limit kept in the store's database, shared by every web process.

Each bucket (an API key's name, or an anonymous caller's address) is one row holding
the times of its recent events as a JSON list. One transaction locks that row
(SQLite: ``BEGIN IMMEDIATE`` holds the file; PostgreSQL: the upsert that opens the
transaction holds the row), prunes events older than the window, and either records
the new event or answers how long to wait. Buckets idle for a whole window are
deleted on the way, passing over rows that another transaction holds.
"""

from __future__ import annotations

import json
import time
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from .storage import Store

__all__ = ["take_slot"]


def take_slot(
    store: Store, bucket: str, *, per_minute: int, window: float = 60.0,
    now: float | None = None,
) -> float:
    """Record one event of ``bucket`` if fewer than ``per_minute`` fall in the last ``window`` s.

    Returns 0 when the event was recorded, else the seconds until the oldest event
    leaves the window (the event is then not recorded). ``now`` is wall-clock time
    (``time.time()``), which every process and machine shares.
    """
    now = time.time() if now is None else now
    with store.transaction() as db:
        row = db.execute(
            "INSERT INTO rate_limits (bucket, events, touched) VALUES (?, '[]', ?)"
            " ON CONFLICT (bucket) DO UPDATE SET touched = rate_limits.touched"
            " RETURNING events",
            (bucket, now),
        ).fetchone()
        recent = sorted(float(t) for t in json.loads(row[0]) if float(t) > now - window)
        wait = 0.0
        if len(recent) >= per_minute:
            wait = max(recent[len(recent) - per_minute] + window - now, 0.001)
        else:
            recent.append(now)
        db.execute(
            "UPDATE rate_limits SET events = ?, touched = ? WHERE bucket = ?",
            (json.dumps(recent), now, bucket),
        )
        db.execute(
            "DELETE FROM rate_limits WHERE bucket IN (SELECT bucket FROM rate_limits"
            f" WHERE touched < ?{store.engine.skip_locked})",
            (now - window,),
        )
    return wait
