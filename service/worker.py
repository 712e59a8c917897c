"""Worker processes: claim queued analyses and run them, away from the web event loop.

A worker claims one analysis at a time (:func:`service.jobs.claim`), runs
:func:`service.pipeline.analyze_files` (one detector) or
:func:`service.network_pipeline.analyze_network_files` (a network; the stored
request's ``"kind"`` says which) into ``analyses/<id>/attempt-<n>/``,
sends a heartbeat every ``heartbeat_seconds`` from a helper thread, writes stage
and progress at most every 0.5 s, stores the Fisher-matrix first look as soon as
the analysis hands it over (before sampling), and stops early when the analysis is cancelled
or its claim is lost. On SIGTERM it puts its analysis back in the queue at the next progress report.
A data folder that is full or not writable fails the analysis with a clear message
(:mod:`service.storage_faults`); a database that cannot be reached neither stops the
analysis (a progress report is skipped) nor the worker (it retries; a job left
without heartbeat is queued again by the sweep).
"""

from __future__ import annotations

import logging
import os
import shutil
import socket
import threading
import time
import uuid
from pathlib import Path
from typing import TYPE_CHECKING, Any

from estimator.errors import ConvergenceError, InputError
from estimator.settings import AnalysisSettings

from . import jobs
from .schemas import api_field
from .settings import ServiceSettings
from .storage import NETWORK, Store, open_store
from .storage_faults import FAILED_MESSAGE, describe, is_storage_fault

if TYPE_CHECKING:
    from .network_pipeline import NetworkRequest
    from .pipeline import AnalysisRequest

__all__ = ["build_request", "network_request", "request_from_json", "run_one_job"]

log = logging.getLogger(__name__)

PROGRESS_INTERVAL = 0.5


#: Set by SIGTERM: the running analysis is given back at its next progress report.
_TERMINATE = threading.Event()


class _Stop(Exception):
    """The analysis was cancelled or its claim lost: stop without touching its state."""


def build_request(store: Store, analysis_id: str,
                  request: dict[str, Any]) -> AnalysisRequest | NetworkRequest:
    """The pipeline's request for a stored submission (see :func:`request_from_json`)."""
    return request_from_json(store.inputs_dir(analysis_id), request)


def _stored(inputs_dir: Path, stored: Any) -> Path:
    """A stored path (``inputs/...``) taken relative to ``inputs_dir``."""
    return inputs_dir / Path(str(stored)).relative_to("inputs")


def _common(request: dict[str, Any]) -> dict[str, Any]:
    return {"asd": bool(request.get("asd", False)), "sample_rate": request.get("sample_rate"),
            "start_time": request.get("start_time")}


def network_request(inputs_dir: Path, request: dict[str, Any]) -> NetworkRequest:
    """The ``NetworkRequest`` of a stored network submission (``"kind": "network"``)."""
    from .network_pipeline import DetectorFiles, NetworkRequest

    detectors = tuple(
        DetectorFiles(name=str(d["name"]), strain_path=_stored(inputs_dir, d["strain"]),
                      psd_path=_stored(inputs_dir, d["psd"]) if d.get("psd") else None,
                      **_common(request))
        for d in request["detectors"])
    sites = request.get("sites")
    return NetworkRequest(detectors=detectors, settings=AnalysisSettings(**request["settings"]),
                          sites_path=_stored(inputs_dir, sites) if sites else None,
                          label=str(request.get("label") or ""))


def request_from_json(inputs_dir: Path,
                      request: dict[str, Any]) -> AnalysisRequest | NetworkRequest:
    """The pipeline's request for a stored one: ``AnalysisRequest`` or ``NetworkRequest``.

    The stored paths (``inputs/...``) are taken relative to ``inputs_dir``: the analysis'
    input folder, or the upload's scratch folder before it is committed.
    """
    if request.get("kind") == NETWORK:
        return network_request(inputs_dir, request)
    from .pipeline import AnalysisRequest

    psd = request.get("psd")
    return AnalysisRequest(strain_path=_stored(inputs_dir, request["strain"]),
                           psd_path=_stored(inputs_dir, psd) if psd else None,
                           label=str(request.get("label") or ""),
                           settings=AnalysisSettings(**request["settings"]), **_common(request))


class _Reporter:
    """Progress callback plus heartbeat thread for one claimed analysis."""

    def __init__(self, store: Store, job: jobs.Claim, interval: float) -> None:
        self.store, self.job, self.interval = store, job, interval
        self.lost = threading.Event()
        self._done = threading.Event()
        self._stage = ""
        self._last = 0.0
        self._shown = 0.0  # the stored fraction never decreases
        self._thread = threading.Thread(target=self._beat, daemon=True)

    def __enter__(self) -> _Reporter:
        self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self._done.set()
        self._thread.join(timeout=5)

    def _beat(self) -> None:
        while not self._done.wait(self.interval):
            try:
                if not jobs.heartbeat(self.store, self.job):
                    self.lost.set()
            except Exception:  # a locked database must not kill the heartbeat
                log.exception("heartbeat of %s failed", self.job.id)

    def __call__(self, stage: str, fraction: float, total: float) -> None:
        if _TERMINATE.is_set():
            raise SystemExit(0)
        if self.lost.is_set():
            raise _Stop
        now = time.monotonic()
        if stage != self._stage or now - self._last >= PROGRESS_INTERVAL:
            self._stage, self._last = stage, now
            self._shown = max(self._shown, min(total, 0.99))
            try:
                alive = jobs.heartbeat(self.store, self.job, stage=stage, progress=self._shown)
            except Exception:  # a locked database: carry on; a stale claim is swept later
                log.warning("progress of %s not recorded; carrying on", self.job.id,
                            exc_info=True)
                return
            if not alive:
                self.lost.set()
                raise _Stop

    def preview(self, estimate: Any) -> None:
        """Store the Fisher-matrix first look in the job's row (a failure is only logged).

        ``estimate`` is a ``FisherEstimate`` (or anything with ``to_dict()``, or a mapping).
        """
        try:
            data = estimate.to_dict() if hasattr(estimate, "to_dict") else dict(estimate)
            if not jobs.record_preview(self.store, self.job, data):
                self.lost.set()  # the next progress report stops the analysis
        except Exception:  # a first look must never stop the analysis itself
            log.exception("preview of %s could not be stored", self.job.id)


def _analyze(request: AnalysisRequest | NetworkRequest, out: Path, reporter: _Reporter) -> None:
    """Run the pipeline the request is for (one detector or a network) into ``out``."""
    from . import pipeline

    if isinstance(request, pipeline.AnalysisRequest):
        pipeline.analyze_files(request, out, progress=reporter, preview=reporter.preview)
        return
    from . import network_pipeline

    network_pipeline.analyze_network_files(request, out, progress=reporter,
                                           preview=reporter.preview)


def _run(store: Store, job: jobs.Claim, settings: ServiceSettings) -> None:
    folder = store.analysis_dir(job.id)
    attempt_dir = folder / f"attempt-{job.attempt}"
    for left in [*folder.glob("attempt-*"), *folder.glob(".attempt-*")]:  # of dead workers
        shutil.rmtree(left, ignore_errors=True)
    try:
        with _Reporter(store, job, settings.heartbeat_seconds) as reporter:
            # beating already: a fresh process's first request imports the pipeline (seconds)
            request = build_request(store, job.id, job.analysis.request)
            _analyze(request, attempt_dir, reporter)
            if reporter.lost.is_set():
                raise _Stop
        if not jobs.finish(store, job, attempt_dir):
            log.info("analysis %s finished after it was cancelled or taken up again", job.id)
    except _Stop:
        log.info("analysis %s stopped (cancelled or claim lost)", job.id)
    except InputError as err:
        jobs.fail(store, job, str(err), api_field(err.field))
    except ConvergenceError as err:
        jobs.fail(store, job, str(err), None)
    except (SystemExit, KeyboardInterrupt):
        jobs.release(store, job)
        raise
    except Exception as err:
        if is_storage_fault(err):  # e.g. ENOSPC while writing the output: final, not retried
            log.error("analysis %s: the data folder is full or not writable (%s)", job.id, err)
            jobs.fail(store, job, FAILED_MESSAGE.format(reason=describe(err)), None)
            return
        error_id = uuid.uuid4().hex[:12]
        log.exception("analysis %s: internal error %s", job.id, error_id)
        jobs.fail(
            store,
            job,
            f"internal error {error_id} while analysing; the operator can find it in the"
            " server log under that id",
            None,
        )
    finally:
        shutil.rmtree(attempt_dir, ignore_errors=True)


def run_one_job(settings: ServiceSettings, *, worker: str | None = None) -> str | None:
    """Claim one queued analysis and run it here, to its end; return its id (``None``: idle)."""
    store = open_store(settings)
    job = jobs.claim(store, worker or f"{socket.gethostname()}:{os.getpid()}")
    if job is None:
        return None
    _run(store, job, settings)
    return job.id
