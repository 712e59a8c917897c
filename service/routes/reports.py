"""Share links ``/r/{token}``: the report page (or the live status page) and its files.

Anyone with the link may read; no API key is needed. A token that is wrong,
revoked or replaced answers 404 without saying which.
"""

from __future__ import annotations

import html
import json
import logging

from fastapi import APIRouter, Request
from fastapi.responses import FileResponse, HTMLResponse

from ..deps import ApiError, SettingsDep, StoreDep
from ..pipeline import PLOT_FILES
from ..report import build_context
from ..schemas import FILE_CONTENT, page_error_responses
from ..security import new_nonce, page_headers
from ..storage import Analysis, Store, hash_secret
from .analyses import output_file
from .pages import render_page

__all__ = ["router"]

log = logging.getLogger(__name__)

router = APIRouter(prefix="/r", tags=["reports"])

#: The token is a bearer secret in the URL: keep it out of caches and Referer headers
#: (pages add their content-security policy, :func:`service.security.page_headers`).
_HEADERS = {"Cache-Control": "no-store", "Referrer-Policy": "no-referrer",
            "X-Content-Type-Options": "nosniff"}


def _shared(store: Store, token: str) -> Analysis:
    analysis = store.by_share_hash(hash_secret(token)) if 20 <= len(token) <= 100 else None
    if analysis is None:
        raise ApiError(404, "not_found", "no report at this link; it may be mistyped or revoked")
    return analysis


def _status_page(analysis: Analysis, nonce: str) -> str:
    """B's status template when present, else a minimal self-refreshing page."""
    try:
        from . import pages

        return pages.render_status(
            analysis.id, state=analysis.state, stage=analysis.stage, progress=analysis.progress,
            label=analysis.label, error_message=analysis.error_message,
            error_field=analysis.error_field, preview=analysis.preview,
            detectors=analysis.detectors, csp_nonce=nonce)
    except Exception:  # the template is optional: fall back to plain HTML
        log.debug("status template unavailable; plain status page", exc_info=True)
    error = (f"<p>{html.escape(analysis.error_message or '')}</p>"
             if analysis.state == "failed" else "")
    return (
        "<!doctype html><html lang='en'><head><meta charset='utf-8'>"
        f"<title>chirpcast: {html.escape(analysis.label)}</title>"
        + ("" if analysis.state in ("failed", "cancelled")
           else "<meta http-equiv='refresh' content='3'>")
        + f"</head><body><h1>{html.escape(analysis.label)}</h1>"
        f"<p>State: {html.escape(analysis.state)}; stage: {html.escape(analysis.stage)};"
        f" {100 * analysis.progress:.0f}% done.</p>{error}</body></html>"
    )


@router.get("/{token}", response_class=HTMLResponse, responses=page_error_responses(404))
def report_page(token: str, request: Request, store: StoreDep, svc: SettingsDep) -> HTMLResponse:
    """The report of a shared analysis; its live status page until it is done."""
    analysis = _shared(store, token)
    nonce = new_nonce()
    headers = {**_HEADERS, **page_headers(nonce)}
    if analysis.state != "done":
        return HTMLResponse(_status_page(analysis, nonce), headers=headers)
    out = store.output_dir(analysis.id)
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    base = f"/r/{token}/files"
    images = {key: f"{base}/{name}" for key, name in PLOT_FILES.items() if (out / name).is_file()}
    downloads = {name: f"{base}/{name}"
                 for name in ("samples.csv", "summary.json", *PLOT_FILES.values())}
    root = (svc.public_url or str(request.base_url)).rstrip("/")
    # report.html as render_report makes it, plus the nonce on its <style> and <script>
    context = build_context(summary, images=images, downloads=downloads,
                            share_url=f"{root}/r/{token}")
    page = render_page("report.html", {**context, "csp_nonce": nonce})
    return HTMLResponse(page, headers=headers)


@router.get("/{token}/files/{name}", response_class=FileResponse,
            responses={200: FILE_CONTENT, **page_error_responses(404)})
def shared_file(token: str, name: str, store: StoreDep) -> FileResponse:
    """A file of a shared, finished analysis (samples.csv, summary.json, plots, report)."""
    response = output_file(store, _shared(store, token), name)
    response.headers.update(_HEADERS)
    return response
