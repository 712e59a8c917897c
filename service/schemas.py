"""Request and response models of the REST API (they make up its OpenAPI schema).

Also the API's names for the inputs an error points at (:func:`api_field`): the
multipart field names of ``POST /api/v1/analyses`` (``strain``, ``psd``, ``sites``,
``strain.NAME``, ``psd.NAME``) and the ``settings`` keys.
"""

from __future__ import annotations

import re
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

__all__ = [
    "ERROR_MEANINGS",
    "EVENTS_CONTENT",
    "FILE_CONTENT",
    "NETWORK_FORM_SCHEMA",
    "SUBMIT_FORM_SCHEMA",
    "AnalysisCreate",
    "AnalysisList",
    "AnalysisPublic",
    "ApiModel",
    "DetectorPublic",
    "ErrorBody",
    "ErrorInfo",
    "FisherParameter",
    "FisherPreview",
    "Health",
    "ProgressEvent",
    "ShareLink",
    "Submitted",
    "api_field",
    "error_responses",
    "page_error_responses",
]

State = Literal["queued", "running", "done", "failed", "cancelled"]


class ApiModel(BaseModel):
    """Base of every model: unknown fields are refused, so a typo is an error."""

    model_config = ConfigDict(extra="forbid")


class AnalysisCreate(ApiModel):
    """The ``settings`` JSON string of a submission."""

    trigger_time: float = Field(description="GPS time of the candidate, s")
    sample_rate: float | None = Field(
        None, gt=0, description="Hz; needed for one-column text and .npy strain"
    )
    start_time: float | None = Field(
        None, description="GPS s of the first sample; for one-column text and .npy strain"
    )
    chirp_mass_guess: float | None = Field(
        None, gt=0, description="detector-frame chirp mass to search around, Msun"
    )
    f_low: float = Field(20.0, gt=0, description="low end of the band, Hz")
    f_high: float | None = Field(None, gt=0, description="high end of the band, Hz")
    label: str = Field("", max_length=200, description="a free-text name for the report")
    seed: int | None = Field(None, ge=0, description="random seed (drawn when absent)")
    model: Literal["auto", "merger", "taylorf2"] = Field(
        "auto",
        description="waveform model: 'merger' (inspiral continued through merger and "
        "ringdown), 'taylorf2' (inspiral ending at the ISCO) or 'auto' (merger where it "
        "matters in the band)",
    )
    spin_max: float = Field(
        0.99, ge=0.0, lt=1.0,
        description="largest aligned-spin magnitude; uniform prior on each spin "
        "(0.05 is a common neutron-star choice; 0 fixes the spins at zero)",
    )
    gating: bool = Field(True, description="gate loud short glitches away from the signal")
    asd: bool = Field(False, description="the psd file's second column is an amplitude spectrum")


class Submitted(ApiModel):
    """The answer to an accepted submission (202)."""

    id: str
    state: State
    status_url: str
    report_url: str
    share_token: str


class ErrorInfo(ApiModel):
    """Why a request or an analysis failed."""

    code: str
    message: str
    field: str | None = None
    request_id: str | None = None


class ErrorBody(ApiModel):
    """Every error answer: ``{"error": {...}}``."""

    error: ErrorInfo


class AnalysisError(ApiModel):
    """Why an analysis failed: the estimator's message and the input field it concerns."""

    message: str
    field: str | None = None


class FisherParameter(ApiModel):
    """One parameter of the Fisher-matrix first look: best-fit value and 1-sigma width."""

    model_config = ConfigDict(extra="allow")  # the estimator may add fields; pass them on

    value: float | None = Field(description="at the maximum-likelihood point, in ``unit``")
    sigma: float | None = Field(description="1-sigma width (null: the matrix is degenerate)")
    unit: str = Field(description="Msun, s (from the trigger time), Mpc; '' when none")


class FisherPreview(ApiModel):
    """Gaussian approximation of the widths at the best fit (Cutler & Flanagan 1994)."""

    model_config = ConfigDict(extra="allow")  # the estimator may add fields; pass them on

    method: str = Field(description="how the estimate was made")
    snr: float | None = Field(description="optimal SNR of the best-fit model")
    parameters: dict[str, FisherParameter] = Field(
        description="chirp_mass, symmetric_mass_ratio, coalescence_time, effective_distance"
    )
    correlation_chirp_mass_symmetric_mass_ratio: float | None = Field(
        None, description="correlation coefficient of chirp mass and symmetric mass ratio"
    )


class DetectorPublic(ApiModel):
    """One detector of an analysis: its site name and the files uploaded for it."""

    name: str | None = Field(description="site name (null for a one-detector analysis)")
    strain: str | None = Field(description="file name of the strain upload")
    psd: str | None = Field(description="file name of the noise spectrum (null: estimated)")


class AnalysisPublic(ApiModel):
    """An analysis as the API shows it."""

    id: str
    state: State
    stage: str
    progress: float = Field(ge=0, le=1)
    error: AnalysisError | None = None
    label: str
    created: float = Field(description="Unix time, s")
    updated: float = Field(description="Unix time, s")
    attempts: int
    summary: dict[str, Any] | None = Field(None, description="summary.json, when done")
    preview: FisherPreview | None = Field(
        None,
        description="Fisher-matrix first look of the widths, from the best fit on, before"
        " sampling ends; an approximation the summary replaces (null until known)",
    )
    status_url: str
    report_url: str | None = Field(None, description="share link (only in the submit answer)")
    files: dict[str, str] = Field(default_factory=dict, description="download URLs, when done")
    detectors: list[DetectorPublic] = Field(
        default_factory=list,
        description="the detectors in submission order: one unnamed entry for a"
        " one-detector analysis, one per site for a network",
    )
    sites: str | None = Field(
        None, description="the uploaded site file's name (null: the shipped invented sites)"
    )


class AnalysisList(ApiModel):
    """One page of analyses, newest first."""

    items: list[AnalysisPublic]
    total: int
    limit: int
    offset: int


class ShareLink(ApiModel):
    """A new share link of an analysis (old links stop working)."""

    id: str
    share_token: str
    report_url: str


class ProgressEvent(ApiModel):
    """One server-sent event of ``/events``."""

    state: State
    stage: str
    progress: float


class Health(ApiModel):
    """``/healthz``."""

    status: Literal["ok"]
    version: str
    queued: int
    running: int


#: What each error status of the API means (the descriptions of ``responses=``).
ERROR_MEANINGS: dict[int, str] = {
    400: "the body is not well-formed multipart",
    401: "an API key is needed and none or a wrong one was sent",
    404: "no such analysis, file or share link",
    409: "the analysis is already in a final state",
    413: "the body or a file is larger than the upload limit",
    422: "a parameter, form field or file is invalid; error.field names it",
    429: "too many submissions with this key in the last minute (see Retry-After)",
    503: "the queue is full; retry after Retry-After seconds",
    507: "the server's data folder is full or not writable (RFC 4918, 11.5); nothing was"
         " stored; retry after Retry-After seconds",
}


def error_responses(*statuses: int) -> dict[int | str, dict[str, Any]]:
    """``responses=`` of an API route: each status answered with :class:`ErrorBody`."""
    return {s: {"model": ErrorBody, "description": ERROR_MEANINGS[s]} for s in statuses}


def page_error_responses(*statuses: int) -> dict[int | str, dict[str, Any]]:
    """``responses=`` of a page route: an HTML error page, or :class:`ErrorBody` on request.

    The JSON form is sent when the client accepts ``application/json`` and not ``text/html``.
    """
    content = {"text/html": {"schema": {"type": "string"}},
               "application/json": {"schema": {"$ref": "#/components/schemas/ErrorBody"}}}
    return {s: {"description": ERROR_MEANINGS[s], "content": content} for s in statuses}


_FILE = {"type": "string", "contentMediaType": "application/octet-stream"}
#: What OpenAPI cannot say with fixed names: the per-detector fields of a network.
NETWORK_FORM_SCHEMA: dict[str, Any] = {"requestBody": {"content": {"multipart/form-data": {
    "schema": {"patternProperties": {
        r"^strain\.[A-Za-z0-9_-]{1,32}$": {**_FILE, "description": "network: the strain"
                                            " segment of the detector at site NAME"},
        r"^psd\.[A-Za-z0-9_-]{1,32}$": {**_FILE, "description": "network: the noise PSD of"
                                         " site NAME (for every detector or for none)"},
    }}}}}}
#: The whole multipart body of a submission, for the OpenAPI description (the route
#: reads the form itself, after the key check, so FastAPI cannot describe it).
SUBMIT_FORM_SCHEMA: dict[str, Any] = {"requestBody": {"required": True, "content": {
    "multipart/form-data": {"schema": {
        "type": "object", "title": "SubmitForm", "required": ["settings"],
        "properties": {
            "settings": {"type": "string", "description": "JSON object: trigger_time and"
                         " options (AnalysisCreate)",
                         "examples": ['{"trigger_time": 1000000006.0}']},
            "strain": {**_FILE, "description": "one detector: strain segment, CSV/text,"
                       " .npy or .npz"},
            "psd": {**_FILE, "description": "one detector: noise PSD (estimated when absent)"},
            "sites": {**_FILE, "description": "network: site file, TOML or JSON (the shipped"
                      " sites when absent)"},
        },
        **NETWORK_FORM_SCHEMA["requestBody"]["content"]["multipart/form-data"]["schema"],
    }}}}}
#: The 200 of a file download, by the file's kind (``responses=`` of the file routes).
FILE_CONTENT: dict[str, Any] = {"description": "the file", "content": {
    media: {"schema": {"type": "object"} if media == "application/json" else {}}
    for media in ("application/json", "image/png", "text/csv", "text/html")}}
#: The 200 of the event stream.
EVENTS_CONTENT: dict[str, Any] = {"description": "server-sent events (progress, end)",
                                  "content": {"text/event-stream": {"schema": {
                                      "type": "object", "description": "one event",
                                      "properties": {
                                          "event": {"enum": ["progress", "end"]},
                                          "data": {"type": "string", "description": "JSON:"
                                                   " ProgressEvent, or {state} at the end"},
                                          "retry": {"type": "integer"}}}}}}


#: ``detector:NAME[:PART]`` of :mod:`service.network_pipeline` (PART: strain, psd, ...).
_DETECTOR_FIELD = re.compile(r"detector:(?P<name>[^:]+)(?::(?P<part>[^:]+))?")


def api_field(field: str | None) -> str | None:
    """The API's name for the input a library error's ``field`` points at.

    ``detector:NAME:psd`` is the form field ``psd.NAME``; ``detector:NAME`` and
    ``detector:NAME:strain`` are ``strain.NAME`` (the upload that names the detector);
    ``site:NAME:KEY`` (a site file's entry) is ``sites``; anything else is unchanged.
    """
    if field is None:
        return None
    found = _DETECTOR_FIELD.fullmatch(field)
    if found is not None:
        part = "psd" if found["part"] == "psd" else "strain"
        return f"{part}.{found['name']}"
    if field.startswith("site:"):
        return "sites"
    return field
