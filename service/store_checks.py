"""Consistency checks of a store that hold with either database engine.

:meth:`service.storage.Store.check_integrity` runs them after the engine's own check
(SQLite's ``PRAGMA integrity_check``); a load test that kills servers and workers at
random asks it whether anything was left half-done.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from .storage import STATES

if TYPE_CHECKING:
    from .storage import Store

__all__ = ["find_problems"]


def find_problems(store: Store) -> list[str]:
    """Duplicated unique values, unknown states, half-claimed jobs, done jobs without output."""
    problems: list[str] = []
    marks = ", ".join("?" for _ in STATES)
    with store.connect() as db:
        for table, columns, what in (
            ("analyses", "owner, idempotency_key", "analyses share owner and Idempotency-Key"),
            ("analyses", "share_hash", "analyses share one share-token hash"),
            ("api_keys", "key_hash", "API keys share one hash"),
        ):
            last = columns.split(", ")[-1]
            for row in db.execute(
                f"SELECT {columns}, COUNT(*) FROM {table} WHERE {last} IS NOT NULL"
                f" GROUP BY {columns} HAVING COUNT(*) > 1"
            ).fetchall():
                shown = ", ".join(repr(v) for v in list(row)[:-1])
                problems.append(f"{row[len(row) - 1]} {what} ({shown})")
        for row in db.execute(
            f"SELECT id, state FROM analyses WHERE state NOT IN ({marks})", STATES
        ).fetchall():
            problems.append(f"analysis {row[0]}: unknown state {row[1]!r}")
        for row in db.execute(
            "SELECT id FROM analyses WHERE state = 'running'"
            " AND (worker IS NULL OR heartbeat IS NULL)"
        ).fetchall():
            problems.append(f"analysis {row[0]}: running without a worker or heartbeat")
        for row in db.execute(
            "SELECT id FROM analyses WHERE progress < 0 OR progress > 1 OR attempts < 0"
        ).fetchall():
            problems.append(f"analysis {row[0]}: progress or attempt count out of range")
        done = [str(r[0]) for r in db.execute(
            "SELECT id FROM analyses WHERE state = 'done' ORDER BY id").fetchall()]
    problems.extend(f"analysis {aid}: done, but its output folder is missing"
                    for aid in done if not store.output_dir(aid).is_dir())
    return problems
