"""The browser side, driven in Debian's Chromium (headless) through Playwright for Python.

1. Against a real ``chirpcast serve`` (tests/e2e/serving.py): upload the demo event,
   watch the progress bar advance, get the report and check what it shows; then upload
   a three-column text file and see the strain error.
2. Against a small stand-in for the REST API (canned answers, in-process uvicorn): the
   upload form puts each error where the service contract (issue 3) says it goes, the
   status page follows server-sent events to "done" and reloads into the report, and it
   fetches the Fisher-matrix first look when a new stage shows it is known.
3. Several detectors (issue 8) against the real application without workers (in-process
   uvicorn): two detector rows upload a simulated network drill, the job is accepted and
   its status page lists both detectors; a bad file's 422 lands in its own row; a row
   added and removed again leaves the one-detector submission as it was.

Skipped only when /usr/bin/chromium is absent (.ci/run installs it). Every wait is bounded.
"""

from __future__ import annotations

import json
import shutil
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from fastapi import FastAPI, Form, UploadFile
from fastapi.responses import HTMLResponse, JSONResponse, StreamingResponse

from service.app import create_app
from service.routes import pages
from service.settings import ServiceSettings

from .conftest import NEEDS_CHROMIUM, serve_in_thread
from .serving import REPO_ROOT, start_server

CAUTION = "Automated, preliminary estimate"
DEMO = REPO_ROOT / "demo_data"
TRIGGER = "2000000012.004"  # demo_data/event.json
#: A first look of the shape FisherEstimate.to_dict() gives (numbers made up for the stub).
PREVIEW = {"method": "Fisher matrix", "snr": 20.22,
           "correlation_chirp_mass_symmetric_mass_ratio": 0.98, "parameters": {
               "chirp_mass": {"value": 24.189, "sigma": 0.7558, "unit": "Msun"},
               "symmetric_mass_ratio": {"value": 0.2431, "sigma": 0.0389, "unit": ""},
               "coalescence_time": {"value": -0.004, "sigma": 0.001, "unit": "s"},
               "effective_distance": {"value": 1019.7, "sigma": 57.0, "unit": "Mpc"}}}
FAILURE = "p.txt line 9: frequency 12.0 Hz is not above 12.5 Hz; sort the rows by frequency"

pytestmark = [
    pytest.mark.slow,
    NEEDS_CHROMIUM,
]


@pytest.fixture
def page(browser: Any) -> Iterator[Any]:
    context = browser.new_context(viewport={"width": 1100, "height": 900})
    tab = context.new_page()
    tab.set_default_timeout(30_000)
    errors: list[str] = []
    tab.on("pageerror", lambda err: errors.append(str(err)))
    yield tab
    context.close()
    assert errors == [], f"JavaScript errors on the page: {errors}"


def _fill(page: Any, strain: Path, *, psd: Path | None = None, label: str = "",
          spin_max: str | None = None) -> None:
    page.set_input_files("#strain", str(strain))
    if psd is not None:
        page.set_input_files("#psd", str(psd))
    page.fill("#trigger_time", TRIGGER)
    if spin_max is not None:
        page.fill("#spin_max", spin_max)
    page.fill("#label", label)
    page.click("#submit")


def _progress_until_report(page: Any, timeout: float, shot: Path | None = None) -> list[float]:
    """Progress values seen on the status page until the report (#summary) shows.

    With ``shot``, a screenshot is saved there the first time the bar is between 20% and 90%.
    """
    from playwright.sync_api import Error

    seen: list[float] = []
    probe = ("() => document.querySelector('#summary') ? 'report'"
             " : (document.querySelector('#progress')?.value ?? null)")
    deadline = time.monotonic() + timeout
    for _ in range(int(timeout / 0.1) + 1):
        try:
            value = page.evaluate(probe)
        except Error:  # the page is reloading into the report
            value = None
        if value == "report":
            return seen
        if isinstance(value, int | float):
            seen.append(float(value))
            if shot is not None and 0.2 < value < 0.9 and not shot.exists():
                page.screenshot(path=str(shot))
        if time.monotonic() > deadline:
            break
        time.sleep(0.1)
    msg = f"no report within {timeout:.0f} s; progress seen {seen[-10:]}; page:\n"
    raise TimeoutError(msg + page.inner_text("body")[:2000])


def test_upload_progress_report_and_a_wrong_file(page: Any, tmp_path: Path) -> None:
    server = start_server(tmp_path / "data", tmp_path / "server.log", workers=1)
    try:
        page.goto(server.base_url + "/")
        assert CAUTION in page.inner_text("body")
        page.screenshot(path=str(tmp_path / "upload.png"), full_page=True)
        # Spins fixed through the form's own field (four parameters: the page is under test).
        _fill(page, DEMO / "strain.csv", psd=DEMO / "psd.csv", label="browser check",
              spin_max="0")
        page.wait_for_url("**/r/**", timeout=30_000)
        assert CAUTION in page.inner_text("body")
        seen = _progress_until_report(page, timeout=180.0, shot=tmp_path / "status.png")
        if (tmp_path / "status.png").exists():
            shutil.copyfile(tmp_path / "status.png", "/tmp/chirpcast_browser_status.png")
        assert len(set(seen)) >= 2, f"the progress bar did not move: {seen}"
        assert any(0.0 < v < 1.0 for v in seen), seen
        assert seen == sorted(seen), f"progress went backwards: {seen}"

        assert page.inner_text("h1").strip() == "browser check"
        text = page.inner_text("body")
        assert "chirp mass" in text.lower()
        assert CAUTION in text
        assert "spins fixed at zero" in text  # the form's spin bound reached the analysis
        assert page.locator("#copy-share").is_visible()
        corner = page.locator("#plot-corner img")
        corner.scroll_into_view_if_needed()
        page.wait_for_function("img => img.complete && img.naturalWidth > 0",
                               arg=corner.element_handle(), timeout=30_000)
        page.evaluate("window.scrollTo(0, 0)")
        shot = tmp_path / "report.png"
        page.screenshot(path=str(shot), full_page=True)
        shutil.copyfile(shot, "/tmp/chirpcast_browser.png")

        wrong = tmp_path / "three_columns.txt"
        wrong.write_text("".join(f"{i} {i * 1e-22:.3e} {i}\n" for i in range(64)))
        page.goto(server.base_url + "/")
        _fill(page, wrong, label="wrong file")
        page.wait_for_function(
            "() => document.getElementById('error-strain')?.textContent"
            " || (!document.getElementById('failure')?.hidden"
            "     && document.getElementById('failure-message')?.textContent)", timeout=120_000)
        if "/r/" in page.url:  # accepted, then failed while reading: shown on the status page
            message = page.inner_text("#failure")
            assert page.locator("#failure a[href='/']").is_visible()
        else:
            message = page.inner_text("#error-strain")
        assert "column" in message, message
        assert "three_columns.txt" in message, message
        page.screenshot(path=str(tmp_path / "wrong.png"), full_page=True)
    finally:
        code = server.stop(timeout=15.0)
    assert code is not None, "the server did not stop"


# ---- against a stand-in for the REST API -------------------------------------------

def _stub_app() -> Any:
    """pages.router plus canned answers; the label of the settings picks the answer."""
    app = FastAPI()
    app.include_router(pages.router)
    errors = {
        "422-strain": (422, {"code": "bad_input", "field": "strain",
                             "message": "s.txt line 1: found 3 columns; expected 1 or 2"}),
        "422-seed": (422, {"code": "bad_input", "field": "seed", "message": "seed -1 is negative"}),
        "413": (413, {"code": "too_large", "message": "the upload exceeds 200 MB"}),
        "503": (503, {"code": "queue_full", "message": "32 analyses are waiting"}),
        "401": (401, {"code": "unauthorized", "message": "no API key"}),
    }
    submitted: list[dict[str, Any]] = []

    @app.post("/api/v1/analyses")
    def submit(strain: UploadFile, settings: str = Form(...)) -> JSONResponse:
        parsed = json.loads(settings)
        submitted.append(parsed)
        if parsed.get("label") in errors:
            status, body = errors[parsed["label"]]
            return JSONResponse({"error": {**body, "request_id": "r1"}}, status,
                                headers={"Retry-After": "7"})
        app.state.progress = 0.0
        return JSONResponse({"id": "a1", "state": "queued", "status_url": "/api/v1/analyses/a1",
                             "report_url": "/r/tok", "share_token": "tok"}, 202)

    @app.get("/api/v1/analyses/a1/events")
    def events() -> StreamingResponse:
        def stream() -> Iterator[str]:
            for fraction in (0.1, 0.3, 0.6, 0.9):
                app.state.progress = fraction
                update = {"state": "running", "stage": "sampling", "progress": fraction}
                yield f"data: {json.dumps(update)}\n\n"
                time.sleep(0.3)
            app.state.progress = 1.0
            yield f"data: {json.dumps({'state': 'done', 'stage': 'done', 'progress': 1.0})}\n\n"
        return StreamingResponse(stream(), media_type="text/event-stream")

    @app.get("/api/v1/analyses/b1/events")
    def failing_events() -> StreamingResponse:
        update = {"state": "failed", "stage": "reading", "progress": 0.0}
        return StreamingResponse(iter([f"event: progress\ndata: {json.dumps(update)}\n\n"]),
                                 media_type="text/event-stream")

    @app.get("/api/v1/analyses/b1")
    def failing_status() -> JSONResponse:
        return JSONResponse({"id": "b1", "state": "failed", "stage": "reading", "progress": 0.0,
                             "error": {"message": FAILURE, "field": "psd"}})

    @app.get("/r/bad")
    def failing_page() -> HTMLResponse:
        return HTMLResponse(pages.render_status("b1", state="running", stage="reading"))

    @app.get("/r/tok")
    def report() -> HTMLResponse:
        if app.state.progress < 1.0:
            return HTMLResponse(pages.render_status("a1", state="queued", label="stub"))
        return HTMLResponse("<html><body><h1>stub</h1><section id='summary'>report</section>"
                            "</body></html>")

    @app.get("/api/v1/analyses/p1/events")
    def preview_events() -> StreamingResponse:
        def stream() -> Iterator[str]:
            update = {"state": "running", "stage": "fiducial", "progress": 0.3}
            yield f"data: {json.dumps(update)}\n\n"
            time.sleep(0.3)
            app.state.preview_ready = True  # stored before the sampling stage is reported
            update = {"state": "running", "stage": "sampling", "progress": 0.4}
            yield f"data: {json.dumps(update)}\n\n"
            for _ in range(10):  # then stay open for at most 5 s
                time.sleep(0.5)
                yield ": keep-alive\n\n"
        return StreamingResponse(stream(), media_type="text/event-stream")

    @app.get("/api/v1/analyses/p1")
    def preview_status() -> JSONResponse:
        return JSONResponse({"id": "p1", "state": "running", "stage": "sampling",
                             "progress": 0.4, "preview": PREVIEW})

    @app.get("/r/prev")
    def preview_page() -> HTMLResponse:
        app.state.preview_pages += 1
        return HTMLResponse(pages.render_status(
            "p1", state="running", stage="fiducial" if not app.state.preview_ready else "sampling",
            progress=0.3, preview=PREVIEW if app.state.preview_ready else None))

    app.state.progress = 0.0
    app.state.submitted = submitted
    app.state.preview_ready, app.state.preview_pages = False, 0
    return app


def _serve(app: Any) -> Iterator[str]:
    """The app under uvicorn on a loopback port (see ``conftest.serve_in_thread``)."""
    yield from serve_in_thread(app)


@pytest.fixture(scope="module")
def stub() -> Iterator[tuple[str, Any]]:
    app = _stub_app()
    for base in _serve(app):
        yield base, app


@pytest.mark.parametrize(("label", "where", "words"), [
    ("422-strain", "#error-strain", "found 3 columns"),
    ("422-seed", "#form-error", "seed -1 is negative"),
    ("413", "#form-error", "too large"),
    ("503", "#form-error", "Try again in 7 s"),
    ("401", "#error-api_key", "no API key"),
])
def test_form_puts_each_error_where_it_belongs(page: Any, stub: tuple[str, Any], tmp_path: Path,
                                               label: str, where: str, words: str) -> None:
    base, _ = stub
    strain = tmp_path / "s.txt"
    strain.write_text("1e-22\n2e-22\n")
    page.goto(base + "/")
    _fill(page, strain, label=label)
    page.wait_for_function(f"() => document.querySelector({where!r}).textContent.length > 0",
                           timeout=10_000)
    assert words in page.inner_text(where)
    assert page.url == base + "/"
    assert page.locator("#submit").is_enabled()  # ready for a corrected submission


def test_form_checks_numbers_before_sending(page: Any, stub: tuple[str, Any]) -> None:
    base, app = stub
    before = len(app.state.submitted)
    page.goto(base + "/")
    page.fill("#trigger_time", "soon")
    page.click("#submit")
    assert "Choose the strain file" in page.inner_text("#error-strain")
    assert "is not a number" in page.inner_text("#error-trigger_time")
    assert len(app.state.submitted) == before  # nothing was sent


def test_status_page_follows_events_and_reloads_into_the_report(
        page: Any, stub: tuple[str, Any], tmp_path: Path) -> None:
    base, app = stub
    strain = tmp_path / "s.txt"
    strain.write_text("1e-22\n2e-22\n")
    page.goto(base + "/")
    _fill(page, strain, psd=None, label="fine")
    page.wait_for_url("**/r/tok", timeout=10_000)
    seen = _progress_until_report(page, timeout=20.0)
    assert 0.3 in seen or 0.6 in seen, seen  # the bar moved with the events
    assert page.inner_text("h1") == "stub"
    assert app.state.submitted[-1] == {"trigger_time": 2000000012.004, "f_low": 20,
                                       "label": "fine", "asd": False, "spin_max": 0.99,
                                       "model": "auto", "gating": True}


def test_status_page_shows_a_failure_with_a_way_back(page: Any, stub: tuple[str, Any],
                                                     tmp_path: Path) -> None:
    base, _ = stub
    page.goto(base + "/r/bad")
    page.wait_for_function("() => !document.getElementById('failure').hidden"
                           " && document.getElementById('failure-message').textContent",
                           timeout=10_000)
    assert FAILURE in page.inner_text("#failure")
    assert "the noise spectrum file" in page.inner_text("#failure-field")
    assert page.inner_text("#stage") == "Stopped: the analysis failed"
    page.screenshot(path=str(tmp_path / "failed.png"), full_page=True)
    page.click("#failure a")
    page.wait_for_url(base + "/", timeout=10_000)


def test_status_page_fetches_the_first_look_when_it_is_known(page: Any,
                                                            stub: tuple[str, Any]) -> None:
    base, app = stub
    app.state.preview_ready, app.state.preview_pages = False, 0
    page.goto(base + "/r/prev")  # served without a preview
    page.wait_for_function("() => !document.getElementById('preview').hidden"
                           " && document.getElementById('preview-table')", timeout=10_000)
    assert app.state.preview_pages >= 2  # the table came from fetching the page again
    text = page.inner_text("#preview")
    assert "First look — Fisher-matrix estimate" in text
    assert "24.19 ± 0.76" in text
    assert "Optimal SNR of the best-fit model: 20.2" in text
    assert "Cutler & Flanagan 1994" in text
    assert page.inner_text("#stage") == "Sampling the posterior"


# ---- several detectors, against the application itself (no workers: jobs stay queued) ----

NETWORK_START = 1_000_000_000.0


def _network_drill(folder: Path) -> dict[str, Path]:
    """heron and plover: 8 s at 1024 Hz of one simulated signal, and their noise PSD."""
    import numpy as np

    from estimator.simulate import NetworkInjection, design_spectrum, simulate_network
    from estimator.sites import SHIPPED_SITES, gps_to_gmst
    from service.drill import write_psd, write_strain

    tc = NETWORK_START + 6.0
    spectrum = design_spectrum()
    injection = NetworkInjection(8.0, 0.8, 300.0, 0.5, 0.3, 1.0, -0.4, tc)
    names = ("heron", "plover")
    segments = simulate_network(injection, [SHIPPED_SITES[n] for n in names],
                                [spectrum, spectrum], gmst=gps_to_gmst(tc), duration=8.0,
                                sample_rate=1024.0, start_time=NETWORK_START,
                                rng=np.random.default_rng(5))
    files: dict[str, Path] = {}
    for segment in segments:
        name = segment.detector
        files[name] = write_strain(segment, folder / name, "npz")
        files[f"{name}-psd"] = write_psd(spectrum, folder / f"{name}-psd.csv")
    return files


@pytest.fixture
def service_url(tmp_path: Path) -> Iterator[tuple[str, Path]]:
    data = tmp_path / "data"
    for base in _serve(create_app(ServiceSettings(data_dir=data, workers=1))):
        yield base, data


def _two_rows(page: Any, files: dict[str, Path], *, plover_strain: Path | None = None) -> None:
    page.click("#add-detector")
    page.wait_for_selector("#strain-1", state="visible", timeout=5_000)
    assert page.input_value("#site-0") == "heron"  # the shipped sites, one per row
    assert page.input_value("#site-1") == "plover"
    page.set_input_files("#strain", str(files["heron"]))
    page.set_input_files("#psd", str(files["heron-psd"]))
    page.set_input_files("#strain-1", str(plover_strain or files["plover"]))
    page.set_input_files("#psd-1", str(files["plover-psd"]))
    page.fill("#trigger_time", f"{NETWORK_START + 6.0:.0f}")


def test_network_upload_lists_both_detectors(service_url: tuple[str, Path], page: Any,
                                             tmp_path: Path) -> None:
    # the page (and its event stream) closes before the server: fixtures end in reverse
    import httpx

    base, _ = service_url
    files = _network_drill(tmp_path)
    page.goto(base + "/")
    assert page.locator("#field-sites").is_hidden()  # one row: the form of one detector
    assert page.locator("#site-0").is_hidden()
    _two_rows(page, files)
    assert page.locator("#field-sites").is_visible()
    page.fill("#label", "two-site check")
    shot = tmp_path / "upload-network.png"
    page.screenshot(path=str(shot), full_page=True)
    shutil.copyfile(shot, "/tmp/chirpcast_upload_network.png")
    page.click("#submit")
    page.wait_for_url("**/r/**", timeout=30_000)
    page.wait_for_function("() => document.querySelectorAll('#detector-table tbody tr')"
                           ".length === 2 && !document.getElementById('detectors').hidden",
                           timeout=10_000)
    rows = page.locator("#detector-table tbody tr")
    assert [rows.nth(i).get_attribute("data-name") for i in range(2)] == ["heron", "plover"]
    assert "plover-psd.csv" in page.inner_text("#detectors")
    assert page.inner_text("h1").strip() == "two-site check"
    page.screenshot(path=str(tmp_path / "status-network.png"), full_page=True)
    shutil.copyfile(tmp_path / "status-network.png", "/tmp/chirpcast_status_network.png")
    status_url = page.get_attribute("#status", "data-status-url")
    with httpx.Client(base_url=base, timeout=10.0) as client:
        status = client.get(status_url).json()
    assert status["state"] == "queued"
    assert [d["name"] for d in status["detectors"]] == ["heron", "plover"]


def test_network_error_lands_in_its_row(page: Any, service_url: tuple[str, Path],
                                        tmp_path: Path) -> None:
    base, data = service_url
    files = _network_drill(tmp_path)
    wrong = tmp_path / "three_columns.txt"
    wrong.write_text("".join(f"{i} {i * 1e-22:.3e} {i}\n" for i in range(64)))
    page.goto(base + "/")
    _two_rows(page, files, plover_strain=wrong)
    page.click("#submit")
    page.wait_for_function("() => document.getElementById('error-strain-1').textContent",
                           timeout=10_000)
    message = page.inner_text("#error-strain-1")
    assert "plover" in message, message
    assert "three_columns.txt" in message, message
    assert page.inner_text("#error-strain") == ""  # heron's row has nothing to fix
    assert page.url == base + "/"
    assert list((data / "analyses").iterdir()) == []  # nothing stored
    page.screenshot(path="/tmp/chirpcast_upload_network_error.png", full_page=True)
    # a PSD for one detector only is caught before sending, in the row that lacks it
    page.set_input_files("#psd-1", [])
    page.click("#submit")
    assert "for every detector, or for none" in page.inner_text("#error-psd-1")
    # with a site file, the site names are typed (and start from the names picked)
    page.set_input_files("#sites", str(REPO_ROOT / "demo_data" / "sites.toml"))
    assert page.locator("#site-0").is_hidden()
    assert page.input_value("#site-name-1") == "plover"
    page.fill("#site-name-1", "he ron")
    page.click("#submit")
    assert "not a site name" in page.inner_text("#error-site-1")
    page.screenshot(path="/tmp/chirpcast_upload_network_typed.png", full_page=True)


def test_added_then_removed_row_submits_one_detector(page: Any, stub: tuple[str, Any],
                                                     tmp_path: Path) -> None:
    base, _ = stub
    strain = tmp_path / "s.txt"
    strain.write_text("1e-22\n2e-22\n")
    page.goto(base + "/")
    page.click("#add-detector")
    page.click("#add-detector")
    assert page.locator(".detector").count() == 3
    page.locator("#detector-1 [data-part=remove]").click()
    page.locator("#detector-2 [data-part=remove]").click()
    assert page.locator(".detector").count() == 1
    assert page.locator("#site-0").is_hidden()
    assert page.locator("#field-sites").is_hidden()
    _fill(page, strain, label="fine")  # the stand-in takes only a field named "strain"
    page.wait_for_url("**/r/tok", timeout=10_000)
