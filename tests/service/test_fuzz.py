"""Property-based fuzzing of the whole API from its own OpenAPI description (schemathesis).

Every operation of ``/openapi.json`` gets generated requests (valid ones, and ones that
break the schema), sent in-process through the ASGI interface (no socket). Each answer
must not be a server error (5xx) nor show a traceback, must have a status code and a
content type documented for that operation, must match the documented body schema (an
error body ``{"error": {"code", "message", "field", "request_id"}}``), and a JSON
error must have that shape whatever the schema says.

Bounded for CI: ``CHIRPCAST_FUZZ_EXAMPLES`` examples per operation (default 25),
derandomized (the same cases on every run), no deadline. Raise the variable for a
longer hunt, e.g. ``CHIRPCAST_FUZZ_EXAMPLES=500 pytest tests/service/test_fuzz.py``.
"""

from __future__ import annotations

import atexit
import json
import os
import shutil
import tempfile
from collections import Counter
from pathlib import Path
from typing import Any

import pytest
import schemathesis
from hypothesis import HealthCheck, settings
from schemathesis import GenerationMode
from schemathesis.checks import (
    content_type_conformance,
    negative_data_rejection,
    not_a_server_error,
    response_headers_conformance,
    response_schema_conformance,
    status_code_conformance,
)

from service.app import create_app
from service.settings import ServiceSettings

from .test_security import finished_share

EXAMPLES = int(os.environ.get("CHIRPCAST_FUZZ_EXAMPLES", "25"))
if EXAMPLES < 1:
    msg = f"CHIRPCAST_FUZZ_EXAMPLES={EXAMPLES}: give a positive number of examples"
    raise ValueError(msg)


#: Where the fuzzed app keeps its data (made at collection, removed when Python exits,
#: also when this module's tests are deselected).
ROOT = Path(tempfile.mkdtemp(prefix="chirpcast-fuzz-"))
atexit.register(shutil.rmtree, ROOT, ignore_errors=True)
#: The app under test: open (no keys exist, so every route is reached past the key
#: check), a small upload limit (413 reachable), a short event stream, a generous rate.
APP = create_app(ServiceSettings(
    data_dir=ROOT / "data", workers=1, max_upload_bytes=200_000, rate_per_minute=100_000,
    events_timeout_seconds=1.0, max_queue=10_000))
#: Two finished analyses: one for the API routes (which may cancel it or replace and
#: revoke its share link), one whose share link the /r/ routes read.
API_ID, _ = finished_share(APP.state.store, ROOT / "attempt-api")
_, SHARED_TOKEN = finished_share(APP.state.store, ROOT / "attempt-share")
#: Half of the generated ids, tokens, file names and settings are real ones, so that the
#: fuzzing reaches past "not found" into downloads, streams, reports and file reading.
CONFIG = schemathesis.Config.from_dict({
    "dictionaries": {
        "ids": {"values": [API_ID]}, "tokens": {"values": [SHARED_TOKEN]},
        "names": {"values": ["corner.png", "summary.json", "report.html", "samples.csv"]},
        "settings": {"values": ['{"trigger_time": 1000000006.0, "sample_rate": 4096}']},
    },
    "parameters": {
        "path.analysis_id": {"dictionary": "ids", "probability": 0.5},
        "path.token": {"dictionary": "tokens", "probability": 0.5},
        "path.name": {"dictionary": "names", "probability": 0.5},
        "body.settings": {"dictionary": "settings", "probability": 0.5},
    },
})
schema = schemathesis.openapi.from_asgi("/openapi.json", APP, config=CONFIG)
schema.config.generation.update(modes=[GenerationMode.POSITIVE, GenerationMode.NEGATIVE])


#: (method, path template) -> status codes seen, for the coverage test at the end.
SEEN: dict[tuple[str, str], Counter[int]] = {}


def error_shape(ctx: Any, response: Any, case: Any) -> bool | None:
    """No traceback anywhere; every JSON error is ``{"error": {code, message, field, ...}}``."""
    SEEN.setdefault((case.method.upper(), case.path), Counter())[response.status_code] += 1
    text = response.content.decode("utf-8", "replace")
    if "Traceback (most recent call last)" in text or 'File "/' in text:
        raise AssertionError(f"a traceback is shown: {text[:300]}")
    kind = response.headers.get("content-type", [""])[0]
    if response.status_code < 400 or not kind.startswith("application/json"):
        return None
    body = json.loads(text)
    if set(body) != {"error"} or set(body["error"]) != {"code", "message", "field",
                                                         "request_id"}:
        raise AssertionError(f"not the JSON error shape: {text[:300]}")
    if not body["error"]["message"] or not body["error"]["request_id"]:
        raise AssertionError(f"an error without message or request id: {text[:300]}")
    return True


@schema.parametrize()
@settings(max_examples=EXAMPLES, derandomize=True, deadline=None, database=None,
          suppress_health_check=list(HealthCheck))
def test_every_operation_answers_as_documented(case: Any) -> None:
    case.call_and_validate(checks=[
        not_a_server_error, status_code_conformance, content_type_conformance,
        response_schema_conformance, response_headers_conformance, negative_data_rejection,
        error_shape])


def test_every_operation_was_fuzzed() -> None:
    """The checks ran: every operation answered, those with inputs many generated requests."""
    if not SEEN:
        pytest.skip("run it with test_every_operation_answers_as_documented (it counts those)")
    paths = APP.openapi()["paths"]
    operations = {(method.upper(), path): bool(op.get("parameters") or op.get("requestBody"))
                  for path, item in paths.items() for method, op in item.items()}
    missing = set(operations) - set(SEEN)
    assert not missing, f"operations never exercised: {sorted(missing)}"
    least = min(EXAMPLES, 10)
    thin = {op: sum(SEEN[op].values()) for op, inputs in operations.items()
            if inputs and sum(SEEN[op].values()) < least}
    assert not thin, f"operations with inputs and fewer than {least} requests: {thin}"
    print({f"{m} {p}": dict(sorted(SEEN[(m, p)].items())) for m, p in sorted(operations)})
