"""Several detectors through ``POST /api/v1/analyses``, the store and the workers.

A network submission sends ``strain.NAME`` (and optionally ``psd.NAME``) per detector
and optionally a ``sites`` file; the files are small simulated network drills
(``estimator.simulate.simulate_network`` on the shipped invented sites, 8 s at
1024 Hz). The worker's analysis is stubbed where only the queue's behaviour is checked
(dispatch, progress, cancel, requeue): these tests check the web layer, not the
estimator. External references: sha256 digests from Python's hashlib (FIPS 180-4);
multipart field names and repeated fields from RFC 7578 (sections 4.2 and 4.3); status
codes from RFC 9110 (413, 422); ``patternProperties`` from JSON Schema 2020-12 (core,
section 10.3.2.2), which OpenAPI 3.1 schemas use.
"""

from __future__ import annotations

import hashlib
import json
import re
import threading
import time
from collections.abc import Iterator
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from fastapi.testclient import TestClient

from estimator.errors import InputError
from estimator.simulate import NetworkInjection, design_spectrum, simulate_network
from estimator.sites import SHIPPED_SITES, gps_to_gmst
from service import jobs, network_pipeline, pipeline
from service.app import create_app
from service.drill import write_psd, write_strain
from service.network_pipeline import NetworkRequest
from service.pipeline import AnalysisRequest
from service.routes import pages
from service.schemas import api_field
from service.settings import ServiceSettings
from service.storage import STATES, Store
from service.worker import build_request, run_one_job

DEMO = Path(__file__).resolve().parents[2] / "demo_data"
START = 1_000_000_000.0
TRIGGER = START + 6.0  # 2 s before the 8 s segments end
NAMES = ("heron", "plover", "curlew")
Files = list[tuple[str, Any]]


def _drill(folder: Path, *, rate: float = 1024.0, start: float = START, seed: int = 1) -> Path:
    """Strain (.npz) and PSD (.csv) of each shipped site: one simulated signal, own noise."""
    folder.mkdir(parents=True)
    spectrum = design_spectrum()
    injection = NetworkInjection(chirp_mass=8.0, mass_ratio=0.8, luminosity_distance=300.0,
                                 inclination=0.5, polarization_angle=0.3, right_ascension=1.0,
                                 declination=-0.4, coalescence_time=start + 6.0)
    segments = simulate_network(
        injection, [SHIPPED_SITES[n] for n in NAMES], [spectrum] * len(NAMES),
        gmst=gps_to_gmst(start + 6.0), duration=8.0, sample_rate=rate, start_time=start,
        rng=np.random.default_rng(seed))
    for segment in segments:
        write_strain(segment, folder / f"{segment.detector}-strain", "npz")
        write_psd(spectrum, folder / f"{segment.detector}-psd.csv")
    return folder


@pytest.fixture(scope="module")
def drill(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """The network drill, one sampled at 2048 Hz, one 100 s later, and two site files."""
    root = tmp_path_factory.mktemp("network-api")
    sites = (DEMO / "sites.toml").read_text(encoding="utf-8")
    (root / "net-sites.toml").write_text(sites + "\n[site.wren]\nlatitude_deg = 5.0\n"
                                         "longitude_deg = 100.0\nelevation_m = 20.0\n"
                                         "arm1_azimuth_deg = 10.0\narm2_azimuth_deg = 100.0\n",
                                         encoding="utf-8")
    (root / "broken-sites.toml").write_text(sites.replace("arm2_azimuth_deg = 31.5\n", ""),
                                            encoding="utf-8")
    return {"net": _drill(root / "net"), "fast": _drill(root / "fast", rate=2048.0, seed=2),
            "late": _drill(root / "late", start=START + 100.0, seed=3),
            "sites": root / "net-sites.toml", "broken": root / "broken-sites.toml"}


def _file(path: Path, name: str | None = None) -> tuple[str, bytes, str]:
    return (name or path.name, path.read_bytes(), "application/octet-stream")


def _network(drill: dict[str, Path], names: tuple[str, ...] = NAMES, *, psd: bool = True,
             folder: str = "net") -> Files:
    files: Files = []
    for name in names:
        files.append((f"strain.{name}", _file(drill[folder] / f"{name}-strain.npz")))
        if psd:
            files.append((f"psd.{name}", _file(drill[folder] / f"{name}-psd.csv")))
    return files


def _post(client: TestClient, files: Files, *, data: dict[str, str] | None = None,
          settings: dict[str, Any] | None = None, headers: dict[str, str] | None = None) -> Any:
    form = {"settings": json.dumps(settings or {"trigger_time": TRIGGER, "seed": 3}),
            **(data or {})}
    return client.post("/api/v1/analyses", files=files, data=form, headers=headers or {})


def _settings(data_dir: Path, **overrides: Any) -> ServiceSettings:
    return ServiceSettings(data_dir=data_dir, workers=1, heartbeat_seconds=0.1, **overrides)


@pytest.fixture
def svc(tmp_path: Path) -> ServiceSettings:
    return _settings(tmp_path / "data")


@pytest.fixture
def client(svc: ServiceSettings) -> Iterator[TestClient]:
    with TestClient(create_app(svc)) as c:
        yield c


def _error(response: Any, status: int) -> dict[str, Any]:
    assert response.status_code == status, response.text
    body = response.json()
    assert set(body) == {"error"}
    assert body["error"]["message"]
    assert body["error"]["request_id"]
    return dict(body["error"])


def _nothing_stored(svc: ServiceSettings) -> None:
    """No row, no analysis folder, no upload left half-way in the scratch area."""
    store = Store(svc.data_dir)
    assert store.counts() == dict.fromkeys(STATES, 0)
    assert list((svc.data_dir / "analyses").iterdir()) == []
    assert list((svc.data_dir / "tmp").iterdir()) == []


def _summary_writer(calls: list[NetworkRequest], *, steps: int = 3) -> Any:
    """A stand-in for analyze_network_files: reports progress, writes summary.json."""

    def analyze(request: NetworkRequest, out_dir: Path, *, progress: Any = None,
                preview: Any = None) -> dict[str, Any]:
        calls.append(request)
        for i in range(steps):
            progress("sampling", i / steps, 0.2 + 0.2 * i)
        out_dir.mkdir(parents=True)
        summary = {"detectors": [d.name for d in request.detectors]}
        (out_dir / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
        return summary

    return analyze


# -- accepted submissions ---------------------------------------------------------------

def test_network_submission_is_stored_and_listed(client: TestClient, svc: ServiceSettings,
                                                 drill: dict[str, Path]) -> None:
    answer = _post(client, _network(drill), headers={"Idempotency-Key": "net-1"})
    assert answer.status_code == 202, answer.text
    aid = answer.json()["id"]
    status = client.get(f"/api/v1/analyses/{aid}").json()
    assert status["state"] == "queued"
    assert status["detectors"] == [
        {"name": n, "strain": f"{n}-strain.npz", "psd": f"{n}-psd.csv"} for n in NAMES]
    assert status["sites"] is None
    assert status["label"] == "heron-plover-curlew"
    # every file kept under its detector with the sha256 hashlib gives for the upload
    store = Store(svc.data_dir)
    row = store.get(aid)
    assert row is not None
    assert row.request["kind"] == "network"
    for name in NAMES:
        for kind, file in (("strain", f"{name}-strain.npz"), ("psd", f"{name}-psd.csv")):
            stored = store.inputs_dir(aid) / "detectors" / name / kind / file
            sent = (drill["net"] / file).read_bytes()
            assert stored.read_bytes() == sent
            assert row.inputs["detectors"][name][kind]["sha256"] == (
                hashlib.sha256(sent).hexdigest())
    # the worker rebuilds the request from the row alone
    request = build_request(store, aid, row.request)
    assert isinstance(request, NetworkRequest)
    assert [d.name for d in request.detectors] == list(NAMES)
    assert all(d.strain_path.is_file() and d.psd_path is not None for d in request.detectors)
    assert request.settings.trigger_time == TRIGGER
    assert request.sites_path is None
    # a replay with the same Idempotency-Key is the same analysis, not a second one
    again = _post(client, _network(drill), headers={"Idempotency-Key": "net-1"})
    assert (again.status_code, again.json()["id"]) == (200, aid)
    assert store.counts()["queued"] == 1


def test_site_file_names_the_sites(client: TestClient, svc: ServiceSettings,
                                   drill: dict[str, Path]) -> None:
    files = [("strain.heron", _file(drill["net"] / "heron-strain.npz")),
             ("strain.wren", _file(drill["net"] / "plover-strain.npz")),
             ("sites", _file(drill["sites"]))]
    answer = _post(client, files, settings={"trigger_time": TRIGGER, "label": "typed sites"})
    assert answer.status_code == 202, answer.text
    aid = answer.json()["id"]
    status = client.get(f"/api/v1/analyses/{aid}").json()
    assert [d["name"] for d in status["detectors"]] == ["heron", "wren"]
    assert [d["psd"] for d in status["detectors"]] == [None, None]
    assert status["sites"] == "net-sites.toml"
    store = Store(svc.data_dir)
    row = store.get(aid)
    assert row is not None
    request = build_request(store, aid, row.request)
    assert isinstance(request, NetworkRequest)
    assert request.sites_path is not None
    assert request.sites_path.read_bytes() == drill["sites"].read_bytes()
    assert request.label == "typed sites"


def test_one_detector_submission_unchanged(client: TestClient, svc: ServiceSettings) -> None:
    files = [("strain", _file(DEMO / "strain.csv")), ("psd", _file(DEMO / "psd.csv"))]
    event = json.loads((DEMO / "event.json").read_text(encoding="utf-8"))
    answer = _post(client, files, settings={"trigger_time": event["trigger_time"]})
    assert answer.status_code == 202, answer.text
    aid = answer.json()["id"]
    status = client.get(f"/api/v1/analyses/{aid}").json()
    assert status["detectors"] == [{"name": None, "strain": "strain.csv", "psd": "psd.csv"}]
    assert status["sites"] is None
    assert status["label"] == "strain"
    store = Store(svc.data_dir)
    row = store.get(aid)
    assert row is not None
    # the stored request has the shape older rows have, so both read the same way
    assert set(row.request) == {"strain", "psd", "asd", "sample_rate", "start_time", "label",
                                "settings"}
    assert (store.inputs_dir(aid) / "strain" / "strain.csv").is_file()
    assert isinstance(build_request(store, aid, row.request), AnalysisRequest)


# -- refused submissions: 422 naming the field, nothing stored ----------------------------

def _bad_cases(drill: dict[str, Path]) -> dict[str, tuple[Files, dict[str, str], str, str]]:
    """id -> (files, extra text fields, the field named, a word of the message)."""
    net = drill["net"]
    two = _network(drill, ("heron", "plover"))
    no_psd = _network(drill, ("heron", "plover"), psd=False)
    bad_csv = ("p.csv", b"time,strain\n1,2\nx,y\n", "text/csv")
    return {
        "mixed": ([("strain", _file(net / "heron-strain.npz")), *two], {}, "strain", "mixed"),
        "bare psd": ([*two, ("psd", _file(net / "heron-psd.csv"))], {}, "psd", "mixed"),
        "one named": (_network(drill, ("heron",)), {}, "strain.heron", "two or more"),
        "orphan psd": ([*no_psd, ("psd.curlew", _file(net / "curlew-psd.csv"))], {},
                       "psd.curlew", "without strain.curlew"),
        "psd for some": ([*no_psd, ("psd.heron", _file(net / "heron-psd.csv"))], {},
                         "psd.plover", "plover"),
        "twice": ([*no_psd, ("strain.heron", _file(net / "heron-strain.npz"))], {},
                  "strain.heron", "2 times"),
        "unknown site": ([*no_psd[:1], ("strain.wren", _file(net / "plover-strain.npz"))], {},
                         "strain.wren", "wren"),
        "bad name": ([*no_psd, ("strain.he ron", _file(net / "curlew-strain.npz"))], {},
                     "strain.he ron", "not a site name"),
        "text not file": (no_psd[:1], {"strain.plover": "abc"}, "strain.plover", "file upload"),
        "unreadable strain": ([*no_psd[:1], ("strain.plover", bad_csv)], {}, "strain.plover",
                              "p.csv"),
        "unreadable psd": ([*two[:3], ("psd.plover", bad_csv)], {}, "psd.plover", "p.csv"),
        "empty strain": ([*no_psd[:1], ("strain.plover", ("e.npz", b"", "x/y"))], {},
                         "strain.plover", "empty"),
        "sample rates": ([*no_psd[:1], ("strain.plover", _file(drill["fast"]
                                                               / "plover-strain.npz"))],
                         {}, "strain.plover", "2048 Hz"),
        "no overlap": ([*no_psd[:1], ("strain.plover", _file(drill["late"]
                                                             / "plover-strain.npz"))],
                       {}, "strain.plover", "overlap"),
        "site file missing a field": ([*no_psd, ("sites", _file(drill["broken"]))], {}, "sites",
                                      "arm2_azimuth_deg"),
        "site file for one detector": ([("strain", _file(DEMO / "strain.csv")),
                                        ("sites", _file(drill["sites"]))], {}, "sites",
                                       "only by a network"),
    }


CASES = ("mixed", "bare psd", "one named", "orphan psd", "psd for some", "twice",
         "unknown site", "bad name", "text not file", "unreadable strain", "unreadable psd",
         "empty strain", "sample rates", "no overlap", "site file missing a field",
         "site file for one detector")


@pytest.mark.parametrize("case", CASES)
def test_bad_network_input_422_names_the_field(client: TestClient, svc: ServiceSettings,
                                               drill: dict[str, Path], case: str) -> None:
    files, data, field, words = _bad_cases(drill)[case]
    error = _error(_post(client, files, data=data), 422)
    assert error["field"] == field, error
    assert words in error["message"], error
    _nothing_stored(svc)


def test_segment_limit_names_the_detector(tmp_path: Path, drill: dict[str, Path]) -> None:
    svc = _settings(tmp_path / "data", max_segment_seconds=4)
    with TestClient(create_app(svc)) as c:
        error = _error(_post(c, _network(drill, ("heron", "plover"))), 422)
    assert (error["field"], error["code"]) == ("strain.heron", "segment_too_long")
    assert "8 s" in error["message"]
    _nothing_stored(svc)


def test_upload_limit_names_the_file_413(tmp_path: Path, drill: dict[str, Path]) -> None:
    sizes = [len(f[1][1]) for f in _network(drill, ("heron", "plover"))]
    limit = sum(sizes[:3]) + 1000  # room for three of the four files, not the fourth
    svc = _settings(tmp_path / "data", max_upload_bytes=limit)
    with TestClient(create_app(svc)) as c:
        error = _error(_post(c, _network(drill, ("heron", "plover"))), 413)
    assert (error["field"], error["code"]) == ("psd.plover", "too_large")
    _nothing_stored(svc)


# -- the worker -------------------------------------------------------------------------

def test_worker_runs_a_network_job(client: TestClient, svc: ServiceSettings,
                                   drill: dict[str, Path],
                                   monkeypatch: pytest.MonkeyPatch) -> None:
    calls: list[NetworkRequest] = []
    monkeypatch.setattr(network_pipeline, "analyze_network_files", _summary_writer(calls))
    monkeypatch.setattr(pipeline, "analyze_files", None)  # the one-detector path is not taken
    aid = _post(client, _network(drill)).json()["id"]
    assert run_one_job(svc, worker="w1") == aid
    status = client.get(f"/api/v1/analyses/{aid}").json()
    assert (status["state"], status["progress"]) == ("done", 1.0)
    assert status["summary"] == {"detectors": list(NAMES)}
    assert "summary.json" in status["files"]
    assert [d.name for d in calls[0].detectors] == list(NAMES)


def test_worker_failure_names_the_detector_field(client: TestClient, svc: ServiceSettings,
                                                 drill: dict[str, Path],
                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    def refuse(request: NetworkRequest, out_dir: Path, **_: Any) -> None:
        msg = "p.csv line 9: frequency 12.0 Hz is not above 12.5 Hz; sort the rows"
        raise InputError(msg, field="detector:plover:psd")

    monkeypatch.setattr(network_pipeline, "analyze_network_files", refuse)
    answer = _post(client, _network(drill)).json()
    run_one_job(svc)
    status = client.get(f"/api/v1/analyses/{answer['id']}").json()
    assert status["state"] == "failed"
    assert status["error"]["field"] == "psd.plover"
    page = client.get(answer["report_url"]).text
    assert "the noise spectrum file of detector plover" in page


def test_cancel_stops_a_running_network_job(client: TestClient, svc: ServiceSettings,
                                            drill: dict[str, Path],
                                            monkeypatch: pytest.MonkeyPatch) -> None:
    started, steps = threading.Event(), [0]

    def slow(request: NetworkRequest, out_dir: Path, *, progress: Any = None,
             preview: Any = None) -> None:
        for i in range(400):  # at most 20 s; a cancelled job stops at a progress report
            steps[0] = i + 1
            progress("sampling", i / 400, 0.3)
            started.set()
            time.sleep(0.05)
        out_dir.mkdir(parents=True)

    monkeypatch.setattr(network_pipeline, "analyze_network_files", slow)
    aid = _post(client, _network(drill)).json()["id"]
    worker = threading.Thread(target=run_one_job, args=(svc,))
    worker.start()
    assert started.wait(30)
    assert client.post(f"/api/v1/analyses/{aid}/cancel").json()["state"] == "cancelled"
    worker.join(timeout=60)
    assert not worker.is_alive()
    assert steps[0] < 400  # stopped at a progress report, before the end
    store = Store(svc.data_dir)
    row = store.get(aid)
    assert row is not None
    assert row.state == "cancelled"
    assert not store.output_dir(aid).exists()


def test_requeued_network_job_runs_the_same(client: TestClient, svc: ServiceSettings,
                                            drill: dict[str, Path],
                                            monkeypatch: pytest.MonkeyPatch) -> None:
    calls: list[NetworkRequest] = []
    monkeypatch.setattr(network_pipeline, "analyze_network_files", _summary_writer(calls))
    aid = _post(client, _network(drill, psd=False)).json()["id"]
    store = Store(svc.data_dir)
    dead = jobs.claim(store, "dead-worker")  # the worker is killed mid-analysis ...
    assert dead is not None
    (store.analysis_dir(aid) / f"attempt-{dead.attempt}").mkdir()  # ... leaving its folder
    with store.connect() as db:  # its heartbeat goes stale (common practice for leases)
        db.execute("UPDATE analyses SET heartbeat = heartbeat - 60 WHERE id = ?", (aid,))
    assert jobs.requeue_stale(store, stale_after=15, max_attempts=3) == 1
    assert run_one_job(svc, worker="w2") == aid
    row = store.get(aid)
    assert row is not None
    assert (row.state, row.attempts) == ("done", 2)
    assert calls == [build_request(store, aid, row.request)]
    assert [d.psd_path for d in calls[0].detectors] == [None] * len(NAMES)
    assert not (store.analysis_dir(aid) / "attempt-1").exists()


def _digests(value: Any) -> set[str]:
    """Every ``sha256`` value in a nested summary section, wherever its layout puts it."""
    if isinstance(value, dict):
        found = {str(v) for k, v in value.items() if k == "sha256"}
        return found.union(*(_digests(v) for v in value.values()))
    if isinstance(value, list):
        return set().union(*(_digests(v) for v in value))
    return set()


@pytest.mark.slow
def test_a_real_network_analysis_through_the_api(client: TestClient, svc: ServiceSettings,
                                                 drill: dict[str, Path]) -> None:
    """Upload, worker, files: the whole chain with the real network pipeline (~10 s)."""
    from service.network_outputs import network_output_files

    settings = {"trigger_time": TRIGGER, "seed": 3, "f_low": 30.0, "chirp_mass_guess": 8.0}
    answer = _post(client, _network(drill), settings=settings)
    assert answer.status_code == 202, answer.text
    aid = answer.json()["id"]
    assert run_one_job(svc) == aid
    status = client.get(f"/api/v1/analyses/{aid}").json()
    assert status["state"] == "done", status["error"]
    assert set(status["files"]) == network_output_files(list(NAMES))
    for url in status["files"].values():
        assert client.get(url).status_code == 200, url
    # provenance: the hashes of the six uploads, as hashlib computes them
    sent = {hashlib.sha256((drill["net"] / f"{n}-{kind}").read_bytes()).hexdigest()
            for n in NAMES for kind in ("strain.npz", "psd.csv")}
    assert _digests(status["summary"]["inputs"]) == sent
    # the simulated source's detector-frame chirp mass (8 Msun, _drill) within 3% of the median
    chirp = status["summary"]["parameters"]["chirp_mass"]
    assert abs(chirp["median"] - 8.0) < 0.03 * 8.0
    assert client.get(answer.json()["report_url"]).status_code == 200


# -- the contract as documented ---------------------------------------------------------

def test_openapi_documents_the_network_fields(client: TestClient) -> None:
    spec = client.get("/openapi.json").json()
    post = spec["paths"]["/api/v1/analyses"]["post"]
    for words in ("strain.NAME", "psd.NAME", "`sites`", "every detector or for none"):
        assert words in post["description"], words
    schema = post["requestBody"]["content"]["multipart/form-data"]["schema"]
    patterns = schema["patternProperties"]
    for field in ("strain.heron", "psd.wren-2"):
        assert [p for p in patterns if re.search(p, field)], field
    assert not any(re.search(p, "strain.he ron") for p in patterns)
    body = (spec["components"]["schemas"][schema["$ref"].rsplit("/", 1)[-1]]
            if "$ref" in schema else schema)  # inline since the key is checked before the body
    assert {"strain", "psd", "sites", "settings"} <= set(body["properties"])
    assert "DetectorPublic" in spec["components"]["schemas"]


@pytest.mark.parametrize(("library", "api"), [
    ("detector:heron:strain", "strain.heron"), ("detector:heron:psd", "psd.heron"),
    ("detector:heron", "strain.heron"), ("site:wren:latitude_deg", "sites"),
    ("sites", "sites"), ("trigger_time", "trigger_time"), ("strain", "strain"), (None, None),
])
def test_library_fields_become_form_fields(library: str | None, api: str | None) -> None:
    # the library side: the fields service.network_pipeline.load_network_inputs documents
    assert api_field(library) == api


class _Rows(HTMLParser):
    """The ``data-name`` of each row of the detector table, and the hidden flag."""

    def __init__(self) -> None:
        super().__init__()
        self.names: list[str] = []
        self.section: dict[str, str | None] = {}

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        found = dict(attrs)
        if found.get("id") == "detectors":
            self.section = found
        if tag == "tr" and found.get("data-name"):
            self.names.append(str(found["data-name"]))


def _rows(html: str) -> _Rows:
    parser = _Rows()
    parser.feed(html)
    return parser


def test_status_page_lists_the_detectors() -> None:
    detectors = [{"name": "heron", "strain": "h.npz", "psd": None},
                 {"name": "plover", "strain": "p.npz", "psd": "p-psd.csv"}]
    html = pages.render_status("n1", state="failed", error_message="no", detectors=detectors,
                               error_field="strain.plover")
    doc = _rows(html)
    assert doc.names == ["heron", "plover"]
    assert "hidden" not in doc.section
    assert doc.section["data-pending"] == "false"
    assert "estimated from the strain" in html
    assert "p-psd.csv" in html
    assert '<b id="failure-field-name">the strain file of detector plover</b>' in html
    one = _rows(pages.render_status("n2", state="queued",
                                    detectors=[{"name": None, "strain": "s.csv", "psd": None}]))
    assert (one.names, "hidden" in one.section) == ([], True)
    unknown = _rows(pages.render_status("n3", state="queued"))  # the script asks the API
    assert unknown.section["data-pending"] == "true"


def test_upload_page_offers_the_shipped_sites() -> None:
    context = pages.upload_context()
    assert context["site_names"] == list(SHIPPED_SITES)
    html = pages.render_page("upload.html", context)
    for name in SHIPPED_SITES:
        assert f'<option value="{name}">{name}</option>' in html
    for element in ('id="add-detector"', 'id="sites"', 'id="detector-row"'):
        assert element in html


def test_worker_leaves_no_stray_folder(client: TestClient, svc: ServiceSettings,
                                       drill: dict[str, Path],
                                       monkeypatch: pytest.MonkeyPatch) -> None:
    def broken(request: NetworkRequest, out_dir: Path, **_: Any) -> None:
        out_dir.mkdir(parents=True)
        msg = "the writer failed"
        raise RuntimeError(msg)

    monkeypatch.setattr(network_pipeline, "analyze_network_files", broken)
    aid = _post(client, _network(drill)).json()["id"]
    run_one_job(svc)
    store = Store(svc.data_dir)
    row = store.get(aid)
    assert row is not None
    assert row.state == "failed"
    assert "internal error" in (row.error_message or "")
    assert sorted(p.name for p in store.analysis_dir(aid).iterdir()) == ["inputs"]
