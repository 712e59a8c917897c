"""The browser pages: the upload form and the live status page render what they promise.

Checked against the service contract (issue 3, service_spec.md): the upload form offers
every field of ``POST /api/v1/analyses`` and the status page carries the URLs of the REST
contract. HTML is parsed with the standard library's :mod:`html.parser`, not with regexes.
"""

from __future__ import annotations

from html.parser import HTMLParser

import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient

from service.routes import pages

CAUTION = "Automated, preliminary estimate — not a vetted result."


class _Elements(HTMLParser):
    """Collects every start tag with its attributes, and the text of the document."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data: str) -> None:
        self.text.append(data)

    def by_id(self, element_id: str) -> tuple[str, dict[str, str | None]]:
        found = [t for t in self.tags if t[1].get("id") == element_id]
        assert len(found) == 1, f"expected one element with id {element_id!r}, found {len(found)}"
        return found[0]


def _parse(html: str) -> _Elements:
    parser = _Elements()
    parser.feed(html)
    parser.close()
    return parser


@pytest.fixture(scope="module")
def client() -> TestClient:
    app = FastAPI()
    app.include_router(pages.router)
    return TestClient(app)


def test_upload_page_has_every_field(client: TestClient) -> None:
    response = client.get("/")
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/html")
    assert response.headers["cache-control"] == "no-store"
    doc = _parse(response.text)
    form = doc.by_id("upload")
    assert form[0] == "form"
    assert form[1]["action"] == "/api/v1/analyses"
    assert form[1]["enctype"] == "multipart/form-data"
    expected = {
        "strain": "file", "psd": "file", "asd": "checkbox", "trigger_time": "text",
        "sample_rate": "text", "start_time": "text", "chirp_mass_guess": "text",
        "f_low": "text", "f_high": "text", "label": "text",
    }
    for name, kind in expected.items():
        tag, attrs = doc.by_id(name)
        assert (tag, attrs.get("type"), attrs.get("name")) == ("input", kind, name)
        # every field has a label and a place for its own error message
        assert any(t == "label" and a.get("for") == name for t, a in doc.tags), name
        assert doc.by_id(f"error-{name}")[1].get("class") == "field-error"
    assert doc.by_id("f_low")[1]["value"] == "20"  # AnalysisSettings' default, Hz
    assert "required" in doc.by_id("strain")[1]
    assert "required" in doc.by_id("trigger_time")[1]
    assert "required" not in doc.by_id("psd")[1]
    text = " ".join("".join(doc.text).split())
    assert "estimated from the strain itself with Welch's method" in text
    assert "only needed for one-column text or .npy strain" in text
    assert CAUTION in text


def test_upload_context_follows_the_settings_default() -> None:
    from estimator.settings import AnalysisSettings

    assert pages.upload_context()["f_low_default"] == f"{AnalysisSettings(1.0).f_low:g}"


def test_status_page_renders_the_documented_context() -> None:
    html = pages.render_page("status.html", {
        "analysis_id": "a1b2", "label": "night <shift> & co", "state": "running",
        "stage": "sampling", "progress": 0.375, "events_url": "/api/v1/analyses/a1b2/events",
        "status_url": "/api/v1/analyses/a1b2", "upload_url": "/",
    })
    doc = _parse(html)
    section = doc.by_id("status")[1]
    assert section["data-events-url"] == "/api/v1/analyses/a1b2/events"
    assert section["data-status-url"] == "/api/v1/analyses/a1b2"
    assert section["data-state"] == "running"
    bar = doc.by_id("progress")
    assert bar[0] == "progress"
    assert (bar[1]["max"], bar[1]["value"]) == ("1", "0.375")
    assert "night &lt;shift&gt; &amp; co" in html  # autoescape on
    assert "<shift>" not in html
    assert "hidden" in doc.by_id("failure")[1]  # not failed: no failure box
    text = " ".join("".join(doc.text).split())
    assert CAUTION in text
    assert "sampling" in text


def test_status_page_of_a_failed_analysis_shows_the_message() -> None:
    message = "strain.txt line 3: found 3 columns; expected strain, or GPS time (s) and strain"
    html = pages.render_status("x9", state="failed", stage="reading", progress=0.0,
                               error_message=message, error_field="strain")
    doc = _parse(html)
    assert "hidden" not in doc.by_id("failure")[1]
    assert "hidden" not in doc.by_id("failure-field")[1]
    text = " ".join("".join(doc.text).split())
    assert message in text
    assert "The problem is in: the strain file" in text
    assert "Stopped: the analysis failed" in text
    assert "hidden" in doc.by_id("state-note")[1]  # "come back later" no longer applies
    assert "hidden" in doc.by_id("lead-note")[1]
    assert "The analysis failed." in text
    assert any(t == "a" and a.get("href") == "/" for t, a in doc.tags)  # back to upload


def test_status_context_clips_progress_and_builds_urls() -> None:
    context = pages.status_context("id7", state="queued", progress=1.7)
    assert context["progress"] == 1.0
    assert pages.status_context("id7", state="queued", progress=float("nan"))["progress"] == 0.0
    assert context["events_url"] == "/api/v1/analyses/id7/events"
    assert context["status_url"] == "/api/v1/analyses/id7"
    assert context["upload_url"] == "/"
    assert pages.status_context("id7", state="running", stage="sampling")["stage_label"] == (
        "Sampling the posterior")
    assert pages.status_context("id7", state="running", stage="new-stage")["stage_label"] == (
        "new-stage")  # an unknown stage is shown as it is
    with pytest.raises(ValueError, match="state 'finished' is not one of"):
        pages.status_context("id7", state="finished")


# -- the Fisher-matrix first look -------------------------------------------------------
# Numbers of the shape FisherEstimate.to_dict() gives, made up for these checks.
PREVIEW = {
    "method": "Fisher matrix", "snr": 20.2215,
    "parameters": {
        "chirp_mass": {"value": 24.18934, "sigma": 0.755805, "unit": "Msun"},
        "symmetric_mass_ratio": {"value": 0.2431, "sigma": 0.03891, "unit": ""},
        "coalescence_time": {"value": -0.0040219, "sigma": 0.0010133, "unit": "s"},
        "effective_distance": {"value": 1019.746, "sigma": None, "unit": "Mpc"},
    },
    "correlation_chirp_mass_symmetric_mass_ratio": 0.98,
}


def test_preview_quotes_widths_to_two_significant_figures() -> None:
    # Quoting a measurement (common practice; the Particle Data Group's rounding convention,
    # Review of Particle Physics, "Introduction"): the width to two significant figures,
    # the value to the same decimal place.
    from service.formatting import MINUS, format_uncertain

    assert format_uncertain(24.18934, 0.755805) == {"value": "24.19", "sigma": "0.76"}
    assert format_uncertain(1019.746, 56.99) == {"value": "1020", "sigma": "57"}
    assert format_uncertain(-4.0219, 1.0133) == {"value": MINUS + "4.0", "sigma": "1.0"}
    assert format_uncertain(-0.3, 10.1) == {"value": "0", "sigma": "10"}  # no "−0"
    assert format_uncertain(0.2431, None) == {"value": "0.2431", "sigma": "n/a"}
    assert format_uncertain(float("nan"), 1.0)["value"] == "n/a"
    rows = {r["name"]: r for r in pages.preview_context(PREVIEW)["rows"]}
    assert [r["unit"] for r in rows.values()] == ["M☉", "—", "ms", "Mpc"]
    assert rows["coalescence_time"]["text"] == MINUS + "4.0 ± 1.0"  # shown in ms
    assert rows["effective_distance"]["text"] == "1020"  # no width: the value alone
    assert pages.preview_context(PREVIEW)["snr"] == "20.2"


def test_status_page_shows_the_first_look_while_running() -> None:
    html = pages.render_status("p1", state="running", stage="sampling", progress=0.4,
                               preview=PREVIEW)
    doc = _parse(html)
    assert "hidden" not in doc.by_id("preview")[1]
    assert doc.by_id("preview-table")[0] == "table"
    for name in PREVIEW["parameters"]:
        assert doc.by_id(f"preview-{name}")[0] == "tr"
    text = " ".join(" ".join(doc.text).split())  # the cells' texts, one space apart
    assert "First look — Fisher-matrix estimate" in text
    assert "Chirp mass (detector frame) 24.19 ± 0.76 M☉" in text
    assert "Symmetric mass ratio η 0.243 ± 0.039 —" in text
    assert "Optimal SNR of the best-fit model: 20.2 ." in text  # <b>20.2</b>.
    assert "Gaussian approximation at the best-fit point" in text
    assert "Cutler & Flanagan 1994" in text
    assert "too narrow or too wide" in text
    assert "the sampled posterior replaces them" in text


@pytest.mark.parametrize("state", ["failed", "cancelled"])
def test_status_page_hides_the_first_look_once_final(state: str) -> None:
    doc = _parse(pages.render_status("p1", state=state, preview=PREVIEW))
    assert "hidden" in doc.by_id("preview")[1]
    assert not any(a.get("id") == "preview-table" for _, a in doc.tags)
    assert pages.status_context("p1", state="done", preview=PREVIEW)["preview"] is None
    running = _parse(pages.render_status("p1", state="running", stage="fiducial"))
    assert "hidden" in running.by_id("preview")[1]  # not known yet
