"""The life of an analysis in the queue: claim, heartbeat, progress, preview, finish, requeue.

Every state change is one SQL statement (or one transaction) guarded by the claiming
worker's id and attempt number, so a worker that lost its claim (its heartbeat went
stale and the job was taken up again) can no longer change the job: an accepted
analysis is never lost, and never completed twice. A job that goes back to the queue
loses its stage, progress and preview with its claim. The SQL runs on either engine
of the store: a sub-select that picks rows to change ends with the engine's
``skip_locked`` (PostgreSQL: ``FOR UPDATE SKIP LOCKED``, so concurrent claimers and
sweepers pass over each other's rows; SQLite: nothing, one writer holds the file).
"""

from __future__ import annotations

import json
import logging
import math
import shutil
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .storage import Analysis, Store

__all__ = [
    "Claim",
    "cancel",
    "claim",
    "fail",
    "finish",
    "heartbeat",
    "record_preview",
    "release",
    "requeue_stale",
    "still_ours",
]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Claim:
    """A running analysis as the worker that claimed it holds it."""

    analysis: Analysis
    worker: str
    attempt: int

    @property
    def id(self) -> str:
        """The analysis id."""
        return self.analysis.id


_GUARD = "id = ? AND state = 'running' AND worker = ? AND attempts = ?"


def claim(store: Store, worker: str) -> Claim | None:
    """Atomically take the oldest queued analysis for ``worker``; ``None`` if none waits."""
    now = time.time()
    with store.connect() as db:
        row = db.execute(
            "UPDATE analyses SET state = 'running', stage = 'starting', progress = 0,"
            " preview = NULL, worker = ?, attempts = attempts + 1, heartbeat = ?, updated = ?"
            " WHERE id = (SELECT id FROM analyses WHERE state = 'queued'"
            f" ORDER BY created, id LIMIT 1{store.engine.skip_locked}) AND state = 'queued'"
            " RETURNING *",
            (worker, now, now),
        ).fetchone()
    if row is None:
        return None
    analysis = Analysis.from_row(row)
    return Claim(analysis, worker, analysis.attempts)


def heartbeat(
    store: Store, job: Claim, *, stage: str | None = None, progress: float | None = None
) -> bool:
    """Record that ``job`` is alive (and its stage/progress); ``False`` if the claim is lost."""
    now = time.time()
    sets: list[str] = ["heartbeat = ?", "updated = ?"]
    args: list[object] = [now, now]
    if stage is not None:
        sets.append("stage = ?")
        args.append(stage)
    if progress is not None:
        sets.append("progress = ?")
        args.append(min(max(float(progress), 0.0), 1.0))
    with store.connect() as db:
        cur = db.execute(
            f"UPDATE analyses SET {', '.join(sets)} WHERE {_GUARD}",
            (*args, job.id, job.worker, job.attempt),
        )
    return cur.rowcount == 1


def _finite(value: Any) -> Any:
    """``value`` with every NaN or infinity (nested in dicts and lists) replaced by ``None``."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def record_preview(store: Store, job: Claim, preview: dict[str, Any]) -> bool:
    """Store the Fisher-matrix first look of ``job`` as JSON; ``False`` if the claim is lost.

    ``preview`` is ``FisherEstimate.to_dict()``; a width that is not finite (a
    degenerate Fisher matrix) is stored as ``null``, which JSON can carry.
    """
    text = json.dumps(_finite(preview), allow_nan=False)
    now = time.time()
    with store.connect() as db:
        cur = db.execute(
            f"UPDATE analyses SET preview = ?, heartbeat = ?, updated = ? WHERE {_GUARD}",
            (text, now, now, job.id, job.worker, job.attempt),
        )
    return cur.rowcount == 1


def still_ours(store: Store, job: Claim) -> bool:
    """Whether ``job`` is still running under this claim (not cancelled, not taken up again)."""
    with store.connect() as db:
        row = db.execute(
            f"SELECT 1 FROM analyses WHERE {_GUARD}", (job.id, job.worker, job.attempt)
        ).fetchone()
    return row is not None


def finish(store: Store, job: Claim, attempt_dir: Path) -> bool:
    """Move the attempt's output folder into place and mark the job done, if still ours.

    The guarded update comes first: it holds the row (PostgreSQL) or the file (SQLite)
    until the folder is in place and the transaction commits; a failed move rolls it back.
    """
    target = store.output_dir(job.id)
    now = time.time()
    with store.transaction() as db:
        cur = db.execute(
            "UPDATE analyses SET state = 'done', stage = 'done', progress = 1,"
            f" updated = ?, heartbeat = ? WHERE {_GUARD}",
            (now, now, job.id, job.worker, job.attempt),
        )
        if cur.rowcount != 1:
            shutil.rmtree(attempt_dir, ignore_errors=True)
            return False
        if target.exists():
            shutil.rmtree(target)
        attempt_dir.rename(target)
    return True


def fail(store: Store, job: Claim, message: str, field: str | None = None) -> bool:
    """Mark the job failed with a user-facing message (and the field it concerns)."""
    now = time.time()
    with store.connect() as db:
        cur = db.execute(
            "UPDATE analyses SET state = 'failed', error_message = ?, error_field = ?,"
            f" updated = ? WHERE {_GUARD}",
            (message, field, now, job.id, job.worker, job.attempt),
        )
    return cur.rowcount == 1


def release(store: Store, job: Claim) -> bool:
    """Put a job back in the queue (its worker is shutting down)."""
    now = time.time()
    with store.connect() as db:
        cur = db.execute(
            "UPDATE analyses SET state = 'queued', stage = 'queued', progress = 0,"
            f" preview = NULL, worker = NULL, updated = ? WHERE {_GUARD}",
            (now, job.id, job.worker, job.attempt),
        )
    return cur.rowcount == 1


def cancel(store: Store, analysis_id: str) -> str | None:
    """Cancel a queued or running analysis; return its state afterwards (``None``: no such)."""
    now = time.time()
    with store.connect() as db:
        row = db.execute(
            "UPDATE analyses SET state = 'cancelled', stage = 'cancelled', updated = ?"
            " WHERE id = ? AND state IN ('queued', 'running') RETURNING state",
            (now, analysis_id),
        ).fetchone()
        if row is None:
            row = db.execute("SELECT state FROM analyses WHERE id = ?", (analysis_id,)).fetchone()
    return str(row[0]) if row is not None else None


def requeue_stale(
    store: Store, *, stale_after: float, max_attempts: int, everything: bool = False
) -> int:
    """Requeue running jobs whose heartbeat is older than ``stale_after`` seconds.

    With ``everything=True`` (the server has just started and owns the data folder
    and its SQLite file) every running job is taken as orphaned and requeued, and the
    attempt it was on is given back: the whole server died, which is not the job's
    doing (found by the load-and-kill run, where the oldest jobs, always the ones
    running, used up their attempts in a storm of server kills). Never pass it for a
    database that other servers share. Otherwise a silent job that has already used
    ``max_attempts`` claims fails instead, so an input that kills its worker cannot
    loop forever. Returns the number of jobs requeued or failed.
    """
    now = time.time()
    if everything:
        with store.connect() as db:
            orphans = db.execute(
                "UPDATE analyses SET state = 'queued', stage = 'queued', progress = 0,"
                " preview = NULL, worker = NULL, updated = ?,"
                " attempts = CASE WHEN attempts > 0 THEN attempts - 1 ELSE 0 END"
                " WHERE state = 'running' RETURNING id",
                (now,),
            ).fetchall()
        for row in orphans:
            log.warning("analysis %s: left running by a server that stopped; queued again",
                        row[0])
        return len(orphans)
    cutoff = now - stale_after
    stale = ("SELECT id FROM analyses WHERE state = 'running' AND heartbeat < ?"
             " AND attempts {} ?" + store.engine.skip_locked)
    with store.transaction() as db:
        failed = db.execute(
            "UPDATE analyses SET state = 'failed', error_message = ?, error_field = NULL,"
            f" updated = ? WHERE id IN ({stale.format('>=')}) RETURNING id",
            (
                f"the analysis stopped its worker {max_attempts} times (out of memory or"
                " killed); try a shorter segment or ask the operator to look at the logs",
                now,
                cutoff,
                max_attempts,
            ),
        ).fetchall()
        requeued = db.execute(
            "UPDATE analyses SET state = 'queued', stage = 'queued', progress = 0,"
            f" preview = NULL, worker = NULL, updated = ? WHERE id IN ({stale.format('<')})"
            " RETURNING id",
            (now, cutoff, max_attempts),
        ).fetchall()
    for row in requeued:
        log.warning("analysis %s: its worker went silent; queued again", row[0])
    for row in failed:
        log.warning("analysis %s: failed after %d attempts", row[0], max_attempts)
    return len(requeued) + len(failed)
