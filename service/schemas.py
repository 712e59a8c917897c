"""Request and response models of the REST API (they make up its OpenAPI schema)."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

__all__ = [
    "AnalysisCreate",
    "AnalysisList",
    "AnalysisPublic",
    "ApiModel",
    "ErrorBody",
    "ErrorInfo",
    "FisherParameter",
    "FisherPreview",
    "Health",
    "ProgressEvent",
    "ShareLink",
    "Submitted",
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
