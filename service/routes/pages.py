"""Browser pages of the service: the upload form and the live status page.

Routes
------
``GET /``
    The upload page (``templates/upload.html``). Its script posts the form as multipart
    to ``POST /api/v1/analyses`` and opens the returned ``report_url``.

The status page (``templates/status.html``) has no route here: the share-link route
``GET /r/{token}`` shows it, via :func:`render_status`, while the analysis is not done.

Template contexts (the templates compute nothing; everything is prepared here)
------------------------------------------------------------------------------
upload.html
    ``submit_url`` (str), ``f_low_default`` (str, Hz, formatted), ``site_names``
    (list of str: the shipped invented sites a detector row may pick), ``name_pattern``
    (str: the pattern a typed site name must match, for the input's ``pattern``).
status.html
    ``analysis_id``, ``label``, ``state``, ``stage`` (str), ``progress`` (float, 0..1),
    ``events_url``, ``status_url``, ``upload_url`` (str); optional ``error_message`` and
    ``error_field`` (str or None), ``stage_label`` and ``error_field_label`` (display text),
    ``stage_labels`` and ``field_labels`` (name -> display text, for the page's script),
    ``preview`` (the Fisher-matrix first look as display text, see :func:`preview_context`,
    or None), ``detectors`` (a network's detectors, see :func:`status_context`; ``[]``
    for one detector; ``None`` when the caller did not say, and the page's script then
    reads them from ``status_url``).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from functools import lru_cache
from typing import Any

import jinja2
from fastapi import APIRouter
from fastapi.responses import HTMLResponse

from estimator.settings import AnalysisSettings
from estimator.sites import SHIPPED_SITES

from ..formatting import format_fixed, format_uncertain, format_value
from ..report import FISHER_LABELS, TEMPLATES_DIR
from ..security import new_nonce, page_headers
from ..uploads import DETECTOR_NAME

__all__ = [
    "API_PREFIX",
    "FIELD_LABELS",
    "FINAL_STATES",
    "STAGE_LABELS",
    "STATES",
    "UPLOAD_URL",
    "field_label",
    "preview_context",
    "render_page",
    "render_status",
    "router",
    "status_context",
    "upload_context",
    "upload_page",
]

#: Prefix of the JSON API the pages talk to.
API_PREFIX = "/api/v1"
#: Where the upload page is served.
UPLOAD_URL = "/"
#: The states an analysis can be in (the REST contract's ``state``).
STATES = ("queued", "running", "done", "failed", "cancelled")
#: The states after which nothing changes.
FINAL_STATES = ("done", "failed", "cancelled")
#: What the status page says for each stage the pipeline reports (and for the states).
STAGE_LABELS: dict[str, str] = {
    "queued": "Waiting in the queue", "running": "Running",
    "reading": "Reading the uploaded files",
    "search": "Searching for the signal near the trigger time",
    "fiducial": "Fitting a reference waveform", "sampling": "Sampling the posterior",
    "check": "Checking the fast likelihood against the exact one",
    "sky scan": "Scanning the sky for the source's direction",
    "report": "Making the plots and the report", "done": "Finished",
    "failed": "Stopped: the analysis failed", "cancelled": "Stopped: cancelled",
}
#: How the status page names the input an error's ``field`` points at.
FIELD_LABELS: dict[str, str] = {
    "strain": "the strain file", "psd": "the noise spectrum file",
    "asd": "the ASD / PSD choice", "trigger_time": "the trigger time",
    "sample_rate": "the sample rate", "start_time": "the start time",
    "chirp_mass_guess": "the chirp-mass guess", "f_low": "the lower frequency f_low",
    "f_high": "the upper frequency f_high", "label": "the label", "seed": "the seed",
    "sites": "the site file", "detectors": "the list of detectors",
}
#: Unit of the preview's data -> (unit shown, factor into it).
_PREVIEW_UNITS: dict[str, tuple[str, float]] = {
    "Msun": ("M☉", 1.0), "s": ("ms", 1e3), "": ("—", 1.0),
}

router = APIRouter(tags=["pages"])


@lru_cache(maxsize=1)
def _environment() -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(TEMPLATES_DIR), autoescape=True,
        undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True,
    )


def render_page(name: str, context: Mapping[str, Any]) -> str:
    """Render a page template (``upload.html``, ``status.html``, ``error.html``...).

    A ``csp_nonce`` in ``context`` is put on the page's ``<script>`` and ``<style>``
    elements, for the content-security policy of :func:`service.security.page_policy`.
    """
    return _environment().get_template(name).render(dict(context))


def _default_f_low() -> float:
    for item in dataclasses.fields(AnalysisSettings):
        if item.name == "f_low":
            return float(item.default)  # type: ignore[arg-type]
    msg = "AnalysisSettings has no field 'f_low'; the upload page needs its default"
    raise RuntimeError(msg)


def upload_context() -> dict[str, Any]:
    """The context of ``upload.html``: submit URL, default f_low, the shipped site names."""
    return {"submit_url": f"{API_PREFIX}/analyses", "f_low_default": format_value(_default_f_low()),
            "site_names": list(SHIPPED_SITES), "name_pattern": DETECTOR_NAME.pattern}


def field_label(field: str) -> str:
    """How the pages name the input an error's ``field`` points at.

    ``strain.NAME`` / ``psd.NAME`` (a network's per-detector fields) read "the strain
    file of detector NAME"; the other fields are those of :data:`FIELD_LABELS`.
    """
    kind, dot, name = field.partition(".")
    if dot and kind in ("strain", "psd"):
        return f"{FIELD_LABELS[kind]} of detector {name}"
    return FIELD_LABELS.get(field, field)


def _number(value: Any) -> float | None:
    return float(value) if isinstance(value, int | float) and not isinstance(value, bool) else None


def preview_context(preview: Mapping[str, Any]) -> dict[str, Any]:
    """The Fisher-matrix first look (``FisherEstimate.to_dict()``) as display text.

    Returns ``rows``, one per parameter in the order given, each with ``name``,
    ``label``, ``value``, ``sigma``, ``text`` (``"24.19 ± 0.76"``) and ``unit``
    (times in ms, masses in M☉), and ``snr`` (one decimal).
    """
    rows = []
    for name, entry in dict(preview.get("parameters") or {}).items():
        raw_unit = str(entry.get("unit", ""))
        unit, factor = _PREVIEW_UNITS.get(raw_unit, (raw_unit, 1.0))
        value, sigma = _number(entry.get("value")), _number(entry.get("sigma"))
        shown = format_uncertain(
            None if value is None else factor * value, None if sigma is None else factor * sigma)
        text = shown["value"] if shown["sigma"] == "n/a" else f"{shown['value']} ± {shown['sigma']}"
        rows.append({"name": name, "label": FISHER_LABELS.get(name, name.replace("_", " ")),
                     "unit": unit, "text": text, **shown})
    snr = _number(preview.get("snr"))
    return {"rows": rows, "snr": format_fixed(snr, 1) if snr is not None else "n/a"}


def status_context(
    analysis_id: str, *, state: str, stage: str | None = None, progress: float = 0.0,
    label: str | None = None, error_message: str | None = None, error_field: str | None = None,
    preview: Mapping[str, Any] | None = None,
    detectors: Sequence[Mapping[str, Any]] | None = None,
) -> dict[str, Any]:
    """The context of ``status.html`` for one analysis, with the URLs of the REST contract.

    ``progress`` is clipped to [0, 1] (a non-finite value counts as 0). ``preview``
    (``FisherEstimate.to_dict()``) is shown only while the analysis is not finished.
    ``detectors`` (``Analysis.detectors``: ``name``, ``strain``, ``psd`` file names) are
    listed for a network; a one-detector analysis (one entry without a name) gives ``[]``.
    """
    if state not in STATES:
        msg = f"state {state!r} is not one of {', '.join(STATES)}; pass the analysis's state"
        raise ValueError(msg)
    fraction = float(progress)
    fraction = min(max(fraction, 0.0), 1.0) if math.isfinite(fraction) else 0.0
    base = f"{API_PREFIX}/analyses/{analysis_id}"
    listed = None if detectors is None else [
        {"name": str(d["name"]), "strain": d.get("strain") or "", "psd": d.get("psd") or ""}
        for d in detectors if d.get("name")]
    labels = dict(FIELD_LABELS)
    for item in listed or []:
        labels.update({f"{k}.{item['name']}": field_label(f"{k}.{item['name']}")
                       for k in ("strain", "psd")})
    shown = state if state == "queued" or state in FINAL_STATES else (stage or state)
    return {
        "analysis_id": analysis_id, "label": label or "", "state": state, "stage": stage or "",
        "progress": round(fraction, 4), "events_url": f"{base}/events", "status_url": base,
        "upload_url": UPLOAD_URL, "error_message": error_message, "error_field": error_field,
        "stage_label": STAGE_LABELS.get(shown, shown),
        "error_field_label": field_label(error_field) if error_field else None,
        "stage_labels": STAGE_LABELS, "field_labels": labels,
        "preview": preview_context(preview) if preview and state not in FINAL_STATES else None,
        "detectors": listed,
    }


def render_status(
    analysis_id: str, *, state: str, stage: str | None = None, progress: float = 0.0,
    label: str | None = None, error_message: str | None = None, error_field: str | None = None,
    preview: Mapping[str, Any] | None = None,
    detectors: Sequence[Mapping[str, Any]] | None = None,
    csp_nonce: str | None = None,
) -> str:
    """Render the live status page of one analysis (see :func:`status_context`).

    ``csp_nonce`` marks the page's script and styles for the page's security policy.
    """
    context = status_context(
        analysis_id, state=state, stage=stage, progress=progress, label=label,
        error_message=error_message, error_field=error_field, preview=preview,
        detectors=detectors)
    return render_page("status.html", context if csp_nonce is None
                       else {**context, "csp_nonce": csp_nonce})


@router.get("/", response_class=HTMLResponse, summary="Upload page")
def upload_page() -> HTMLResponse:
    """The upload form: one detector's files or a network's, and the candidate's settings."""
    nonce = new_nonce()
    page = render_page("upload.html", {**upload_context(), "csp_nonce": nonce})
    return HTMLResponse(page, headers=page_headers(nonce))
