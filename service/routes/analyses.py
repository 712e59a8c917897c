"""REST resource ``/api/v1/analyses``: submit, read, list, cancel, files, events, share."""

from __future__ import annotations

import json
import logging
import secrets
import shutil
import time
from collections.abc import AsyncIterator
from typing import Annotated, Any

import anyio
from fastapi import APIRouter, Depends, Header, Query, Request
from fastapi.responses import FileResponse, Response, StreamingResponse
from pydantic import ValidationError
from starlette.datastructures import FormData

from .. import jobs
from ..deps import ApiError, KeyDep, OptionalKeyDep, RateLimitedKeyDep, SettingsDep, StoreDep
from ..pipeline import OUTPUT_FILES
from ..schemas import (
    EVENTS_CONTENT,
    FILE_CONTENT,
    SUBMIT_FORM_SCHEMA,
    AnalysisCreate,
    AnalysisList,
    AnalysisPublic,
    FisherPreview,
    ShareLink,
    Submitted,
    error_responses,
)
from ..security import FILE_POLICY, BodyTooLarge
from ..storage import FINAL_STATES, Analysis, DuplicateError, Store, hash_secret
from ..storage_faults import refuse_storage_faults
from ..uploads import form_layout, save_network, save_single, settings_text

__all__ = ["output_file", "output_names", "public_view", "router"]

router = APIRouter(prefix="/api/v1/analyses", tags=["analyses"])

log = logging.getLogger(__name__)

_MEDIA = {".png": "image/png", ".csv": "text/csv", ".json": "application/json",
          ".html": "text/html"}
#: The largest list offset (past it SQLite's 64-bit integers overflow; found by fuzzing).
_MAX_OFFSET = 1_000_000_000


def _parse_settings(text: str) -> AnalysisCreate:
    try:
        return AnalysisCreate.model_validate_json(text)
    except ValidationError as err:
        first = err.errors()[0]
        loc = [str(p) for p in first["loc"]]
        field = loc[0] if loc else "settings"
        if first["type"] == "json_invalid":
            msg = f"settings is not valid JSON ({first['msg']}); send an object such as"
            msg += ' {"trigger_time": 1000000006.0}'
            raise ApiError(422, "bad_settings", msg, field="settings") from err
        where = ".".join(loc) or "settings"
        raise ApiError(422, "bad_settings", f"settings.{where}: {first['msg']}",
                       field=field) from err


def _submitted(store: Store, analysis: Analysis) -> Submitted:
    token = store.share_token(analysis.id, analysis.share_generation)
    return Submitted(id=analysis.id, state="queued", status_url=f"/api/v1/analyses/{analysis.id}",
                     report_url=f"/r/{token}", share_token=token)


def output_names(analysis: Analysis) -> frozenset[str]:
    """Files the output folder of ``analysis`` may hold (a network's name its detectors)."""
    if not analysis.network:
        return frozenset(OUTPUT_FILES)
    from ..network_outputs import network_output_files

    return frozenset(network_output_files([str(d["name"]) for d in analysis.detectors]))


def _preview(analysis: Analysis) -> dict[str, Any] | None:
    """The stored first look, when it has the documented shape (else left out, logged)."""
    if analysis.preview is None:
        return None
    try:
        FisherPreview.model_validate(analysis.preview)
    except ValidationError:
        log.warning("analysis %s: its preview is not a FisherPreview; not shown", analysis.id)
        return None
    return analysis.preview


def public_view(store: Store, analysis: Analysis, *, summary: bool = True,
                with_share: bool = False) -> AnalysisPublic:
    """The API view of an analysis (its preview once known; summary and file URLs once done)."""
    files: dict[str, str] = {}
    data: dict[str, Any] | None = None
    out = store.output_dir(analysis.id)
    if analysis.state == "done":
        files = {n: f"/api/v1/analyses/{analysis.id}/files/{n}"
                 for n in sorted(output_names(analysis)) if (out / n).is_file()}
        if summary and (out / "summary.json").is_file():
            data = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    report_url = None
    if with_share and analysis.shared:
        report_url = f"/r/{store.share_token(analysis.id, analysis.share_generation)}"
    error = None
    if analysis.state == "failed":
        error = {"message": analysis.error_message or "failed", "field": analysis.error_field}
    return AnalysisPublic.model_validate({
        "id": analysis.id, "state": analysis.state, "stage": analysis.stage,
        "progress": analysis.progress, "error": error, "label": analysis.label,
        "created": analysis.created, "updated": analysis.updated, "attempts": analysis.attempts,
        "summary": data, "status_url": f"/api/v1/analyses/{analysis.id}",
        "report_url": report_url, "files": files, "preview": _preview(analysis),
        "detectors": analysis.detectors, "sites": analysis.sites_file,
    })


def _found(store: Store, analysis_id: str) -> Analysis:
    analysis = store.get(analysis_id)
    if analysis is None:
        raise ApiError(404, "not_found", f"no analysis {analysis_id!r}; check the id")
    return analysis


async def _form(request: Request, owner: RateLimitedKeyDep) -> AsyncIterator[FormData]:
    """The multipart body, read only once the key and the rate limit let it in.

    Depending on :func:`~service.deps.rate_limited_key` itself, it cannot run before
    the key check, whatever the order of the route's parameters; a body that passes
    the upload limit while streaming is answered 413 (its spooled parts are closed).
    """
    try:
        form = await request.form()
    except BodyTooLarge as err:
        raise ApiError(413, "too_large", "the request body is larger than the upload limit;"
                       " send a shorter segment or ask the operator to raise"
                       " CHIRPCAST_MAX_UPLOAD_BYTES") from err
    try:
        yield form
    finally:
        await form.close()


@router.post("", status_code=202, response_model=Submitted, openapi_extra=SUBMIT_FORM_SCHEMA,
             responses={200: {"model": Submitted, "description": "an idempotent replay"},
                        **error_responses(400, 401, 413, 422, 429, 503, 507)})
def submit(
    store: StoreDep, svc: SettingsDep, owner: RateLimitedKeyDep, response: Response,
    form: Annotated[FormData, Depends(_form)],
    idempotency_key: Annotated[str | None, Header(max_length=200)] = None,
) -> Submitted:
    """Queue an analysis of uploaded strain (files stored and read before the answer).

    The API key and the rate limit are checked before any of the body is read.
    **One detector**: a file `strain` and optionally `psd`, as always.
    **A network** (two detectors or more, analysed coherently): per detector a file
    `strain.NAME` and optionally `psd.NAME`, NAME its site's name (1-32 letters, digits,
    `-`, `_`), and optionally one `sites` file describing the sites (TOML/JSON
    `[site.NAME]` tables; without it the shipped invented sites are used). A PSD is
    given for every detector or for none; `settings` (and its `sample_rate`,
    `start_time`, `asd`) applies to every detector. `strain` and `strain.NAME` are not
    mixed, and no field is sent twice. Every file is read before the answer: bad input
    gets 422 with `error.field` naming the field, e.g. `strain.NAME` or `psd.NAME`, and
    nothing is stored. A data folder that is full or not writable gets 507 with
    `Retry-After`, and nothing is kept.
    """
    settings = settings_text(form)
    layout = form_layout(form)
    if idempotency_key and (old := store.by_idempotency_key(owner, idempotency_key)):
        response.status_code = 200
        return _submitted(store, old)
    spec = _parse_settings(settings)
    counts = store.counts()
    if counts["queued"] >= svc.max_queue:
        raise ApiError(503, "queue_full", f"{counts['queued']} analyses are waiting, the most"
                       " this server queues; retry later", headers={"Retry-After": "30"})
    with refuse_storage_faults():  # a full or read-only data folder: 507, nothing kept
        scratch = store.scratch_dir()
        try:
            if layout.network:
                request, inputs, label = save_network(scratch, spec, svc, layout)
            else:
                request, inputs, label = save_single(scratch, spec, svc, layout.detectors[0])
            analysis_id = secrets.token_hex(16)
            folder = store.analysis_dir(analysis_id)
            folder.mkdir(parents=True)
            try:
                scratch.rename(folder / "inputs")
                token = store.share_token(analysis_id, 0)
                store.insert_analysis(analysis_id=analysis_id, label=label, request=request,
                                      inputs=inputs, owner=owner,
                                      idempotency_key=idempotency_key,
                                      share_hash=hash_secret(token))
            except BaseException:
                shutil.rmtree(folder, ignore_errors=True)
                raise
        except DuplicateError:  # a concurrent retry with the same key won
            old = store.by_idempotency_key(owner, idempotency_key or "")
            if old is None:
                raise
            response.status_code = 200
            return _submitted(store, old)
        finally:
            shutil.rmtree(scratch, ignore_errors=True)
    return Submitted(id=analysis_id, state="queued", status_url=f"/api/v1/analyses/{analysis_id}",
                     report_url=f"/r/{token}", share_token=token)


@router.get("", response_model=AnalysisList, responses=error_responses(401, 422))
def list_analyses(
    store: StoreDep, owner: KeyDep,
    limit: Annotated[int, Query(ge=1, le=200)] = 20,
    offset: Annotated[int, Query(ge=0, le=_MAX_OFFSET)] = 0,
) -> AnalysisList:
    """Analyses, newest first (without summaries; read one for its summary)."""
    rows, total = store.list(limit=limit, offset=offset)
    items = [public_view(store, a, summary=False, with_share=True) for a in rows]
    return AnalysisList(items=items, total=total, limit=limit, offset=offset)


@router.get("/{analysis_id}", response_model=AnalysisPublic, responses=error_responses(401, 404))
def read_analysis(analysis_id: str, store: StoreDep, owner: OptionalKeyDep) -> AnalysisPublic:
    """State, stage, progress, error, Fisher-matrix preview or summary of one analysis."""
    return public_view(store, _found(store, analysis_id), with_share=owner is not None)


@router.post("/{analysis_id}/cancel", response_model=AnalysisPublic,
             responses=error_responses(401, 404, 409))
def cancel_analysis(analysis_id: str, store: StoreDep, owner: KeyDep) -> AnalysisPublic:
    """Cancel a queued or running analysis (again: no change; 409 once done or failed)."""
    state = jobs.cancel(store, analysis_id)
    if state is None:
        raise ApiError(404, "not_found", f"no analysis {analysis_id!r}; check the id")
    if state != "cancelled":
        raise ApiError(409, "already_final", f"analysis {analysis_id} is already {state};"
                       " only queued or running analyses can be cancelled")
    return public_view(store, _found(store, analysis_id), with_share=True)


def output_file(store: Store, analysis: Analysis, name: str) -> FileResponse:
    """A file of a finished analysis' output folder (404 for any other name)."""
    path = store.output_dir(analysis.id) / name
    names = output_names(analysis)
    if analysis.state != "done" or name not in names or not path.is_file():
        raise ApiError(404, "not_found", f"no file {name!r} for this analysis; files exist"
                       f" once it is done: {', '.join(sorted(names))}")
    # stored HTML (the self-contained report) is shown sandboxed: no script, no same-origin
    return FileResponse(path, media_type=_MEDIA.get(path.suffix, "application/octet-stream"),
                        headers={"Content-Security-Policy": FILE_POLICY})


@router.get("/{analysis_id}/files/{name}", response_class=FileResponse,
            responses={200: FILE_CONTENT, **error_responses(401, 404)})
def download(analysis_id: str, name: str, store: StoreDep, owner: KeyDep) -> FileResponse:
    """Download samples.csv, summary.json, report.html or a plot of a done analysis."""
    return output_file(store, _found(store, analysis_id), name)


@router.get("/{analysis_id}/events", response_class=StreamingResponse,
            responses={200: EVENTS_CONTENT, **error_responses(404)})
async def events(analysis_id: str, store: StoreDep, svc: SettingsDep) -> StreamingResponse:
    """Server-sent events {state, stage, progress} until a final state (or a time limit)."""
    first = await anyio.to_thread.run_sync(store.get, analysis_id)
    if first is None:
        raise ApiError(404, "not_found", f"no analysis {analysis_id!r}; check the id")

    async def stream() -> AsyncIterator[str]:
        deadline = time.monotonic() + svc.events_timeout_seconds
        last, quiet = None, time.monotonic()
        yield "retry: 2000\n\n"
        while True:
            row = await anyio.to_thread.run_sync(store.get, analysis_id)
            if row is None:
                return
            now = (row.state, row.stage, round(row.progress, 3))
            if now != last:
                last, quiet = now, time.monotonic()
                data = {"state": row.state, "stage": row.stage, "progress": row.progress}
                yield f"event: progress\ndata: {json.dumps(data)}\n\n"
            elif time.monotonic() - quiet > 15:
                quiet = time.monotonic()
                yield ": keep-alive\n\n"
            if row.state in FINAL_STATES or time.monotonic() > deadline:
                yield f"event: end\ndata: {json.dumps({'state': row.state})}\n\n"
                return
            await anyio.sleep(0.5)

    return StreamingResponse(stream(), media_type="text/event-stream",
                             headers={"Cache-Control": "no-store", "X-Accel-Buffering": "no"})


@router.post("/{analysis_id}/share", response_model=ShareLink,
             responses=error_responses(401, 404))
def new_share(analysis_id: str, store: StoreDep, owner: KeyDep) -> ShareLink:
    """Make a new share link (the previous one stops working)."""
    analysis = _found(store, analysis_id)
    generation = analysis.share_generation + 1
    token = store.share_token(analysis_id, generation)
    store.set_share(analysis_id, hash_secret(token), generation)
    return ShareLink(id=analysis_id, share_token=token, report_url=f"/r/{token}")


@router.post("/{analysis_id}/share/revoke", status_code=204, response_class=Response,
             responses=error_responses(401, 404))
def revoke_share(analysis_id: str, store: StoreDep, owner: KeyDep) -> Response:
    """Revoke the share link: /r/<token> then answers 404."""
    analysis = _found(store, analysis_id)
    store.set_share(analysis_id, None, analysis.share_generation + 1)
    return Response(status_code=204)
