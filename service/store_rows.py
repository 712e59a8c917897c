"""The rows the store hands out: an analysis, and an API key as the operator sees it."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = ["FINAL_STATES", "NETWORK", "STATES", "Analysis", "ApiKey"]

STATES = ("queued", "running", "done", "failed", "cancelled")
FINAL_STATES = frozenset({"done", "failed", "cancelled"})
#: ``request["kind"]`` of a several-detector analysis (a one-detector request has no kind).
NETWORK = "network"


@dataclass(frozen=True)
class Analysis:
    """One row of the analyses table, as the routes and workers read it."""

    id: str
    state: str
    stage: str
    progress: float
    error_message: str | None
    error_field: str | None
    label: str
    request: dict[str, Any]
    inputs: dict[str, Any]
    owner: str
    idempotency_key: str | None
    share_generation: int
    shared: bool
    worker: str | None
    attempts: int
    heartbeat: float | None
    created: float
    updated: float
    #: The Fisher-matrix first look (``FisherEstimate.to_dict()``) once the fit is found.
    preview: dict[str, Any] | None = None

    @classmethod
    def from_row(cls, row: Any) -> Analysis:
        """Build from a ``SELECT *`` row (anything with ``keys()`` and ``row[name]``)."""
        values = dict(row)
        values["shared"] = values.pop("share_hash", None) is not None
        values["request"] = json.loads(values["request"])
        values["inputs"] = json.loads(values["inputs"])
        preview = values.pop("preview", None)
        values["preview"] = json.loads(preview) if preview else None
        return cls(**values)

    @property
    def network(self) -> bool:
        """Whether this is a several-detector analysis."""
        return self.request.get("kind") == NETWORK

    @property
    def detectors(self) -> list[dict[str, str | None]]:
        """``[{"name", "strain", "psd"}]``: each detector's site name and file names.

        A one-detector analysis gives one entry whose ``name`` is ``None``; ``psd`` is
        ``None`` where the spectrum is estimated from the strain.
        """
        if not self.network:
            return [{"name": None, "strain": _file_name(self.request.get("strain")),
                     "psd": _file_name(self.request.get("psd"))}]
        return [{"name": str(d["name"]), "strain": _file_name(d.get("strain")),
                 "psd": _file_name(d.get("psd"))} for d in self.request.get("detectors", [])]

    @property
    def sites_file(self) -> str | None:
        """The uploaded site file's name (``None``: the shipped sites, or one detector)."""
        return _file_name(self.request.get("sites"))


@dataclass(frozen=True)
class ApiKey:
    """An API key as ``chirpcast keys list`` shows it (never the key or its hash)."""

    name: str
    created: float
    revoked: float | None

    @property
    def active(self) -> bool:
        """Whether the key is still accepted."""
        return self.revoked is None


def _file_name(stored: object) -> str | None:
    """The file name of a stored relative path (``inputs/strain/x.csv`` -> ``x.csv``)."""
    return Path(str(stored)).name if stored else None
