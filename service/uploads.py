"""The files of a submission: which fields it carries, saving them hashed, reading them once.

``POST /api/v1/analyses`` takes a ``settings`` text field (:func:`settings_text`) and
either one detector (file fields ``strain`` and, optionally, ``psd``) or a network of
two or more (``strain.NAME`` and, optionally, ``psd.NAME`` per detector, NAME a site
name, plus an optional ``sites`` file). This module checks that layout
(:func:`form_layout`), copies the uploads into a scratch folder while hashing them, and
reads every file once so that bad input is answered with 422 before anything is
committed (:func:`save_single`, :func:`save_network`).
"""

from __future__ import annotations

import hashlib
import re
from collections import Counter
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Any

from starlette.datastructures import FormData, UploadFile

from estimator.errors import InputError

from .deps import ApiError
from .schemas import AnalysisCreate, api_field
from .settings import ServiceSettings
from .storage import NETWORK

__all__ = [
    "DETECTOR_NAME",
    "DetectorUpload",
    "Layout",
    "form_layout",
    "safe_name",
    "save_network",
    "save_single",
    "save_upload",
    "settings_text",
]

_CHUNK = 1 << 20
#: A detector's name in a field name: a site name (as :mod:`estimator.sites` allows).
DETECTOR_NAME = re.compile(r"[A-Za-z0-9_-]{1,32}")
_PER_DETECTOR = ("strain", "psd")
_SETTINGS_KEYS = {
    "trigger_time", "f_low", "f_high", "chirp_mass_guess", "seed", "model", "spin_max", "gating"
}
@dataclass(frozen=True)
class DetectorUpload:
    """One detector's uploads; ``name`` is ``None`` for the one-detector ``strain``/``psd``."""

    name: str | None
    strain: UploadFile
    psd: UploadFile | None


@dataclass(frozen=True)
class Layout:
    """The detectors of a submission, in the order sent, and its site file."""

    detectors: tuple[DetectorUpload, ...]
    sites: UploadFile | None

    @property
    def network(self) -> bool:
        """Whether the submission names its detectors (``strain.NAME``)."""
        return self.detectors[0].name is not None


def _refuse(field: str, message: str) -> ApiError:
    return ApiError(422, "bad_request", message, field=field)


def _file(form: FormData, key: str) -> UploadFile | None:
    """The upload of field ``key``; ``None`` when absent or sent without a file name."""
    value = form.get(key)
    if value is None:
        return None
    if not isinstance(value, UploadFile):
        raise _refuse(key, f"{key}: expected a file upload, got a text value; send the file")
    return value if value.filename else None


def form_layout(form: FormData) -> Layout:
    """Check which file fields a submission carries (422 ``bad_request`` naming the field).

    Rules: no field twice; ``strain`` and ``strain.NAME`` not mixed (nor ``psd`` with a
    network); NAME of 1 to 32 letters, digits, ``-`` or ``_``; a ``psd.NAME`` only with
    its ``strain.NAME``; two detectors or more for a network; ``sites`` only with one.
    Whether a PSD is given for every detector is left to the reading, which names the
    first detector without one.
    """
    counts = Counter(key for key, _ in form.multi_items())
    for key, count in counts.items():
        if count > 1 and (key in {"strain", "psd", "sites", "settings"} or "." in key):
            raise _refuse(key, f"field {key} is sent {count} times; send it once")
    named: dict[str, dict[str, str]] = {}
    for key in counts:
        kind, dot, name = key.partition(".")
        if not dot or kind not in _PER_DETECTOR:
            continue
        if DETECTOR_NAME.fullmatch(name) is None:
            raise _refuse(key, f"field {key}: {name!r} is not a site name; use 1 to 32"
                          " letters, digits, '-' or '_' after the dot (strain.NAME)")
        named.setdefault(name, {})[kind] = key
    if not named:
        return _single(form)
    for key in ("strain", "psd"):
        if key in counts:
            raise _refuse(key, f"field {key} is mixed with strain.NAME fields; send either one"
                          " 'strain' (one detector) or one 'strain.NAME' per detector")
    detectors = []
    for name, keys in named.items():
        if "strain" not in keys:
            raise _refuse(keys["psd"], f"{keys['psd']} is sent without strain.{name}; send"
                          f" the strain of detector {name} too, or leave its PSD out")
        strain = _file(form, keys["strain"])
        if strain is None:
            raise _refuse(keys["strain"], f"{keys['strain']}: no file chosen; choose the"
                          f" strain file of detector {name}")
        psd = _file(form, keys["psd"]) if "psd" in keys else None
        detectors.append(DetectorUpload(name, strain, psd))
    if len(detectors) < 2:
        only = f"strain.{detectors[0].name}"
        raise _refuse(only, f"{only} is the only detector; a network needs two or more"
                      " (add strain.NAME for another site), and one detector is sent as"
                      " 'strain' with an optional 'psd'")
    return Layout(tuple(detectors), _file(form, "sites"))


def settings_text(form: FormData) -> str:
    """The ``settings`` field as text (422 when missing or sent as a file)."""
    value = form.get("settings")
    if value is None:
        raise ApiError(422, "bad_request", "settings: this field is required; send a JSON"
                       ' object such as {"trigger_time": 1000000006.0}', field="settings")
    if not isinstance(value, str):
        raise ApiError(422, "bad_request", "settings: expected a text field holding JSON, got"
                       " a file upload; send it as a plain form field", field="settings")
    return value


def _single(form: FormData) -> Layout:
    strain = form.get("strain")
    if strain is None:
        raise _refuse("strain", "strain: this field is required")
    if _file(form, "sites") is not None:
        raise _refuse("sites", "a site file is used only by a network (strain.NAME fields);"
                      " leave it out for one detector")
    if not isinstance(strain, UploadFile):
        raise _refuse("strain", "strain: expected a file upload, got a text value; send the file")
    return Layout((DetectorUpload(None, strain, _file(form, "psd")),), None)


def safe_name(filename: str | None, default: str) -> str:
    """A file name safe to store: the last path part, odd characters as ``_``."""
    name = Path(filename or "").name
    name = re.sub(r"[^A-Za-z0-9._-]", "_", name).lstrip(".")[:100]
    return name or default


def save_upload(upload: IO[bytes], target: Path, limit: int, field: str) -> dict[str, Any]:
    """Copy an upload to ``target`` while hashing it; 413 past ``limit`` bytes, 422 if empty."""
    digest, size = hashlib.sha256(), 0
    target.parent.mkdir(parents=True, exist_ok=True)
    with target.open("wb") as out:
        while chunk := upload.read(_CHUNK):
            size += len(chunk)
            if size > limit:
                msg = f"{field} file is larger than the limit of {limit} bytes; send a shorter"
                msg += " segment or ask the operator to raise CHIRPCAST_MAX_UPLOAD_BYTES"
                raise ApiError(413, "too_large", msg, field=field)
            digest.update(chunk)
            out.write(chunk)
    if size == 0:
        raise ApiError(422, "empty_file", f"the {field} file is empty; choose the file again",
                       field=field)
    return {"file": target.name, "sha256": digest.hexdigest(), "bytes": size}


def _common(spec: AnalysisCreate) -> dict[str, Any]:
    return {"asd": spec.asd, "sample_rate": spec.sample_rate, "start_time": spec.start_time,
            "label": spec.label, "settings": spec.model_dump(include=_SETTINGS_KEYS)}


def _too_long(duration: float, svc: ServiceSettings, field: str) -> None:
    if duration > svc.max_segment_seconds:
        msg = f"strain segment is {duration:.0f} s long, more than the limit of"
        msg += f" {svc.max_segment_seconds:.0f} s; cut it around the trigger time"
        raise ApiError(422, "segment_too_long", msg, field=field)


def save_single(scratch: Path, spec: AnalysisCreate, svc: ServiceSettings,
                upload: DetectorUpload) -> tuple[dict[str, Any], dict[str, Any], str]:
    """Save and read one detector's files; return the stored request, inputs and label."""
    strain_name = safe_name(upload.strain.filename, "strain.dat")
    inputs: dict[str, Any] = {"strain": save_upload(upload.strain.file, scratch / "strain"
                                                    / strain_name, svc.max_upload_bytes,
                                                    "strain"), "psd": None}
    request: dict[str, Any] = {"strain": f"inputs/strain/{strain_name}", "psd": None,
                               **_common(spec)}
    if upload.psd is not None:
        psd_name = safe_name(upload.psd.filename, "psd.dat")
        left = svc.max_upload_bytes - inputs["strain"]["bytes"]
        inputs["psd"] = save_upload(upload.psd.file, scratch / "psd" / psd_name, left, "psd")
        request["psd"] = f"inputs/psd/{psd_name}"
    _check_single(scratch, spec, request, svc)
    return request, inputs, spec.label or Path(strain_name).stem


def _check_single(scratch: Path, spec: AnalysisCreate, request: dict[str, Any],
                  svc: ServiceSettings) -> None:
    """Read the uploads once (in this worker thread) to answer 422 for bad input now."""
    from estimator.io import read_psd, read_strain

    try:
        segment = read_strain(_local(scratch, request["strain"]), sample_rate=spec.sample_rate,
                              start_time=spec.start_time)
    except InputError as err:
        raise ApiError(422, "bad_input", str(err), field=err.field or "strain") from err
    if request["psd"]:
        try:
            read_psd(_local(scratch, request["psd"]), asd=spec.asd)
        except InputError as err:
            raise ApiError(422, "bad_input", str(err), field=err.field or "psd") from err
    _too_long(segment.duration, svc, "strain")
    end = segment.start_time + segment.duration
    if not segment.start_time <= spec.trigger_time <= end:
        msg = f"trigger_time {spec.trigger_time} is outside the strain segment"
        msg += f" [{segment.start_time}, {end}] GPS s; give the candidate's GPS time"
        raise ApiError(422, "bad_input", msg, field="trigger_time")


def _local(scratch: Path, stored: str) -> Path:
    """Where a stored path (``inputs/...``) lies in the scratch folder before the commit."""
    return scratch / Path(stored).relative_to("inputs")


def save_network(scratch: Path, spec: AnalysisCreate, svc: ServiceSettings,
                 layout: Layout) -> tuple[dict[str, Any], dict[str, Any], str]:
    """Save every detector's files and the site file, read and check them all.

    Files go to ``detectors/NAME/strain/``, ``detectors/NAME/psd/`` and ``sites/`` under
    ``scratch`` (the analysis' ``inputs/`` once committed); the reading is
    :func:`service.network_pipeline.load_network_inputs`, on the request the worker
    will rebuild (:func:`service.worker.network_request`).
    """
    left = svc.max_upload_bytes
    detectors: list[dict[str, Any]] = []
    inputs: dict[str, Any] = {"detectors": {}, "sites": None}
    for item in layout.detectors:
        name = str(item.name)
        entry: dict[str, Any] = {"name": name, "psd": None}
        saved: dict[str, Any] = {"psd": None}
        for kind, upload in (("strain", item.strain), ("psd", item.psd)):
            if upload is None:
                continue
            file = safe_name(upload.filename, f"{kind}.dat")
            saved[kind] = save_upload(upload.file, scratch / "detectors" / name / kind / file,
                                      left, f"{kind}.{name}")
            left -= saved[kind]["bytes"]
            entry[kind] = f"inputs/detectors/{name}/{kind}/{file}"
        detectors.append(entry)
        inputs["detectors"][name] = saved
    request: dict[str, Any] = {"kind": NETWORK, "detectors": detectors, "sites": None,
                               **_common(spec)}
    if layout.sites is not None:
        file = safe_name(layout.sites.filename, "sites.toml")
        inputs["sites"] = save_upload(layout.sites.file, scratch / "sites" / file, left, "sites")
        request["sites"] = f"inputs/sites/{file}"
    _check_network(scratch, request, svc)
    return request, inputs, spec.label or "-".join(d["name"] for d in detectors)


def _check_network(scratch: Path, request: dict[str, Any], svc: ServiceSettings) -> None:
    """Read every stored file once (this thread): 422 naming the detector's field."""
    from .network_pipeline import load_network_inputs
    from .worker import network_request

    try:
        inputs, _ = load_network_inputs(network_request(scratch, request))
    except InputError as err:
        raise ApiError(422, "bad_input", str(err), field=api_field(err.field)) from err
    for item in inputs:
        _too_long(item.segment.duration, svc, f"strain.{item.site.name}")
