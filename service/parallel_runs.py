"""Many independent analyses at once: local processes, and a journal that survives a stop.

:func:`run_in_processes` maps ``function(setup, i)`` over indices in spawned
processes (one thread each); :class:`Journal` keeps every finished row on disk as it
arrives, so a long study (``chirpcast calibrate``, the robustness study) stopped
part-way resumes where it was. The Dask counterpart is
:func:`service.dask_engine.map_on_cluster`.
"""

from __future__ import annotations

import json
import multiprocessing
import os
from collections.abc import Callable, Collection
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import asdict
from pathlib import Path
from typing import Any

import numpy as np

from estimator.errors import InputError

from .execution import one_thread_env

__all__ = ["Journal", "run_in_processes"]


def run_in_processes(
    function: Callable[[Any, int], dict[str, Any]],
    setup: Any,
    count: int,
    *,
    workers: int | None = None,
    progress: Callable[[int, int], None] | None = None,
    skip: Collection[int] = (),
    on_row: Callable[[dict[str, Any]], None] | None = None,
) -> list[dict[str, Any]]:
    """``function(setup, i)`` for ``i < count`` not in ``skip``, in ``workers`` processes.

    Rows come back sorted by index; each must carry its ``index``. ``on_row`` sees each
    row as it finishes (to keep it safe before the others end); the processes keep to
    one thread each.
    """
    workers = max(1, workers or os.cpu_count() or 1)
    skipped = set(skip)
    todo = [i for i in range(count) if i not in skipped]
    rows: list[dict[str, Any]] = []
    if not todo:
        return rows
    context = multiprocessing.get_context("spawn")
    # one thread each, from the environment the pool's processes inherit
    with one_thread_env(), ProcessPoolExecutor(workers, mp_context=context) as pool:
        futures = [pool.submit(function, setup, i) for i in todo]
        for done, future in enumerate(as_completed(futures), start=1):
            rows.append(future.result())
            if on_row is not None:
                on_row(rows[-1])
            if progress is not None:
                progress(done, len(todo))
    rows.sort(key=lambda r: int(r["index"]))
    return rows


def _plain(value: Any) -> Any:
    """NumPy scalars as the Python values JSON knows."""
    if isinstance(value, np.generic):
        return value.item()
    raise TypeError(f"{type(value).__name__} is not JSON-ready")


class Journal:
    """Finished injections of a calibration run, one JSON line each, kept as they finish.

    A run stopped part-way (a closed laptop, a killed job, a session's end) loses only
    the injections still running: run the same command again and the journal's rows are
    kept, the rest run. The first line records the setup; a journal written for another
    setup is refused rather than mixed in.
    """

    NAME = "runs.partial.jsonl"

    def __init__(self, out_dir: Path, setup: Any) -> None:
        """``setup``: the study's frozen dataclass; its fields head the journal."""
        self.path = out_dir / self.NAME
        self.header = {"setup": asdict(setup)}
        self.rows: list[dict[str, Any]] = []
        if self.path.exists():
            self._load()

    def _load(self) -> None:
        lines = self.path.read_text(encoding="utf-8").splitlines()
        try:
            header = json.loads(lines[0]) if lines else None
        except json.JSONDecodeError:
            header = None
        if json.loads(json.dumps(self.header)) != header:
            msg = (
                f"{self.path} holds a partial run with other settings (seed, --n, "
                "--spin-max or threshold); give another --out, or delete that file "
                "to start again"
            )
            raise InputError(msg, field="out")
        for n, line in enumerate(lines[1:], start=1):
            try:
                self.rows.append(json.loads(line))
            except json.JSONDecodeError:
                # A line cut short by the stop: that injection runs again. The file is cut
                # back to its whole lines, or the next row would be appended onto the stub.
                tmp = self.path.with_suffix(".tmp")
                tmp.write_text("".join(f"{x}\n" for x in lines[:n]), encoding="utf-8")
                tmp.replace(self.path)
                break

    @property
    def done(self) -> set[int]:
        """Indices already finished."""
        return {int(r["index"]) for r in self.rows}

    def add(self, row: dict[str, Any]) -> None:
        """Append one finished row and push it to disk before going on."""
        self.path.parent.mkdir(parents=True, exist_ok=True)
        fresh = not self.path.exists() or self.path.stat().st_size == 0
        with self.path.open("a", encoding="utf-8") as fh:
            if fresh:
                fh.write(json.dumps(self.header) + "\n")
            fh.write(json.dumps(row, default=_plain) + "\n")
            fh.flush()
            os.fsync(fh.fileno())
        self.rows.append(row)

    def remove(self) -> None:
        """Drop the journal once the run's files are written."""
        self.path.unlink(missing_ok=True)
