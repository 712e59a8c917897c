"""Checks of the HTML report.

Sources
-------
* Quoting a measurement (common practice, e.g. the rounding convention in the
  Particle Data Group's Review of Particle Physics, "Introduction"): the uncertainty
  to two significant figures and the central value to the same decimal place.
* HTML Living Standard (WHATWG), section 13.1.2: the void elements, which have no
  end tag; every other element opened here must be closed in order.
* PNG specification (W3C, 2003), section 5.2: the 8-byte signature.
* RFC 2397 (data: URLs) and RFC 4648 section 4 (base64): the embedded images.
* The fixture's numbers are a plausible nearby binary-neutron-star drill made up for
  these tests; they are mutually consistent only roughly (redshift of 40 Mpc from
  z ~ H0 d / c with H0 ~ 68 km/s/Mpc, from memory).
"""

from __future__ import annotations

import base64
import copy
import math
import re
import struct
import zlib
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import pytest

from service.report import format_interval, image_data_uri, render_report

MINUS = "\u2212"
TRIGGER = 1400000000.0
UNITS = {"Msun": "M☉", "Mpc": "Mpc", "s": "s", "": "—"}
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta",
        "source", "track", "wbr"}


def param(median: float, lower: float, upper: float, unit: str) -> dict[str, Any]:
    return {"median": median, "lower": lower, "upper": upper, "unit": unit}


def make_summary() -> dict[str, Any]:
    """A realistic summary.json (schema version 1) of a nearby double-neutron-star drill."""
    return {
        "schema_version": 1,
        "label": "drill-0042",
        "credible_level": 0.9,
        "parameters": {
            "chirp_mass": param(1.197541, 1.19743, 1.197660, "Msun"),
            "mass_ratio": param(0.82, 0.55, 0.98, ""),
            "primary_mass": param(1.534, 1.392, 1.881, "Msun"),
            "secondary_mass": param(1.258, 1.037, 1.379, "Msun"),
            "total_mass": param(2.773, 2.745, 2.871, "Msun"),
            "luminosity_distance": param(40.1, 24.6, 52.3, "Mpc"),
            "effective_distance": param(58.3, 55.1, 62.0, "Mpc"),
            "coalescence_time": param(TRIGGER + 0.012342, TRIGGER + 0.012061,
                                      TRIGGER + 0.012648, "s"),
            "redshift": param(0.0089, 0.0055, 0.0115, ""),
            "source_chirp_mass": param(1.18698, 1.18384, 1.19092, "Msun"),
            "source_primary_mass": param(1.520, 1.380, 1.864, "Msun"),
            "source_secondary_mass": param(1.247, 1.028, 1.367, "Msun"),
            "source_total_mass": param(2.749, 2.721, 2.846, "Msun"),
            "snr": param(12.41, 11.18, 13.32, ""),
            "orientation_factor": param(0.69, 0.42, 0.92, ""),
        },
        "probabilities": {"secondary_below_3_msun": 1.0, "primary_below_3_msun": 0.997},
        "maximum_likelihood": {
            "chirp_mass": 1.197551, "mass_ratio": 0.91, "effective_distance": 57.9,
            "coalescence_time": TRIGGER + 0.012390, "snr": 12.93, "log_likelihood": 83.61,
        },
        "diagnostics": {
            "autocorrelation_time": {"chirp_mass": 41.2, "mass_ratio": 63.8,
                                     "effective_distance": 38.5, "coalescence_time": 35.1},
            "effective_sample_size": 1705.0,
            "acceptance_fraction": 0.34,
            "steps": 4000, "walkers": 32, "burn_in": 600, "thin": 20, "converged": True,
            "likelihood_check": {"draws": 200, "max_abs_difference": 0.0031,
                                 "tolerance": 0.05, "passed": True, "bins": 74,
                                 "refinements": 1},
            "timings_s": {"read": 0.04, "condition": 0.21, "search": 1.83, "fiducial": 0.62,
                          "sample": 18.4, "check": 0.93, "plots": 2.31},
        },
        "settings": {
            "trigger_time": TRIGGER, "f_low": 20.0, "f_high": 1024.0, "seed": 42,
            "chirp_mass_guess": 1.2,
            "prior": {"chirp_mass": [1.1, 1.3], "mass_ratio": [0.125, 1.0],
                      "luminosity_distance": [1.0, 500.0], "distance": "uniform in volume"},
            "time_window": 0.1,
        },
        "inputs": {
            "strain": {"file": "drill-0042_strain.txt", "sha256": "9f2c" * 16,
                       "sample_rate": 4096.0, "start_time": TRIGGER - 96.0, "duration": 128.0},
            "psd": {"file": "drill-0042_psd.txt", "sha256": "4b7e" * 16},
        },
        "notes": ["Source-frame masses use the redshift of each distance sample in a flat "
                  "ΛCDM cosmology."],
        "software": {"name": "chirpcast", "version": "0.1.0"},
    }


def tiny_png(path: Path) -> Path:
    """A 2x1 grey PNG written by hand from the PNG specification (no matplotlib)."""
    def chunk(kind: bytes, body: bytes) -> bytes:
        return (struct.pack(">I", len(body)) + kind + body
                + struct.pack(">I", zlib.crc32(kind + body) & 0xFFFFFFFF))
    ihdr = struct.pack(">IIBBBBB", 2, 1, 8, 0, 0, 0, 0)  # 8-bit greyscale
    raw = zlib.compress(b"\x00\x40\xc0")
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", raw)
                     + chunk(b"IEND", b""))
    return path


class Structure(HTMLParser):
    """Collect the cells of every row with an id, and check that tags nest."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.rows: dict[str, list[str]] = {}
        self.row: str | None = None
        self.text: list[str] = []
        self.images: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        attributes = dict(attrs)
        if tag == "tr" and attributes.get("id"):
            self.row = str(attributes["id"])
            self.rows[self.row] = []
        if tag == "td" and self.row is not None:
            self.rows[self.row].append("")
        if tag == "img":
            self.images.append(str(attributes.get("src")))
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag: str) -> None:
        assert self.stack, f"</{tag}> without an open tag"
        assert self.stack[-1] == tag, f"</{tag}> closes <{self.stack[-1]}>"
        self.stack.pop()
        if tag == "tr":
            self.row = None

    def handle_data(self, data: str) -> None:
        self.text.append(data)
        if self.row is not None and self.rows[self.row] and self.stack[-1:] != ["tr"]:
            self.rows[self.row][-1] += data


def parse(html: str) -> Structure:
    doc = Structure()
    doc.feed(html)
    doc.close()
    assert doc.stack == [], f"unclosed tags {doc.stack}"
    return doc


def text_of(doc: Structure) -> str:
    return re.sub(r"\s+", " ", "".join(doc.text))


@pytest.fixture
def images(tmp_path: Path) -> dict[str, str]:
    uri = image_data_uri(tiny_png(tmp_path / "tiny.png"))
    return {k: uri for k in ("corner", "whitened", "time_frequency", "spectrum", "traces")}


def test_format_interval_examples() -> None:
    # The brief's example: chirp mass 1.19754 +0.00012 -0.00011 Msun.
    out = format_interval(1.197541, 1.19743, 1.197660)
    assert (out["median"], out["plus"], out["minus"]) == ("1.19754", "+0.00012", MINUS + "0.00011")
    out = format_interval(40.1, 24.6, 52.3)  # narrower side 12.2 -> two figures, 0 decimals
    assert (out["median"], out["minus"], out["plus"]) == ("40", MINUS + "16", "+12")
    out = format_interval(-3.25, -3.5, -3.0)
    assert out["median"] == MINUS + "3.25"
    assert out["lower"] == MINUS + "3.50"
    assert format_interval(2.0, 2.0, 2.0)["median"] == "2.000"
    assert format_interval(math.nan, 0.0, 1.0)["median"] == "n/a"


def test_caution_is_always_shown(images: dict[str, str]) -> None:
    text = text_of(parse(render_report(make_summary(), images=images)))
    for phrase in ("Automated, preliminary estimate", "not a vetted result",
                   "Gaussian, stationary", "noise spectrum", "TaylorF2", "3.5PN phase",
                   "restricted amplitude", "no spins", "no tidal effects",
                   "no merger or ringdown"):
        assert phrase in text


def test_every_parameter_row_has_unit_and_quoted_values(images: dict[str, str]) -> None:
    summary = make_summary()
    doc = parse(render_report(summary, images=images))
    for name, entry in summary["parameters"].items():
        cells = [c.strip() for c in doc.rows[f"param-{name}"]]
        assert len(cells) == 5, (name, cells)
        label, median, interval, bounds, unit = cells
        assert label
        assert unit == UNITS[entry["unit"]]
        minus, plus = (s.strip() for s in interval.split("/"))
        decimals = len(median.partition(".")[2])
        if name == "coalescence_time":
            assert decimals == 4  # GPS time to 0.1 ms
        else:
            # Two significant figures in the narrower side of the interval.
            narrow = min(minus.lstrip(MINUS), plus.lstrip("+"), key=float)
            assert len(narrow.replace(".", "").lstrip("0")) == 2, (name, narrow)
        value = float(median.replace(MINUS, "-"))
        assert abs(value - entry["median"]) <= 0.5 * 10.0 ** -decimals + 1e-12
        low, high = (float(s.replace(MINUS, "-")) for s in bounds.strip("[]").split(","))
        assert abs(low - entry["lower"]) <= 0.5 * 10.0 ** -decimals + 1e-12
        assert abs(high - entry["upper"]) <= 0.5 * 10.0 ** -decimals + 1e-12
    chirp = [c.strip() for c in doc.rows["param-chirp_mass"]]
    assert chirp[1:4] == ["1.19754", f"{MINUS}0.00011 / +0.00012", "[1.19743, 1.19766]"]
    assert doc.rows["param-coalescence_time"][1].strip() == "1400000000.0123"


def test_headline_and_neutron_star_probability(images: dict[str, str]) -> None:
    text = text_of(parse(render_report(make_summary(), images=images)))
    assert "Neutron star possible > 99%" in text
    assert "both bodies: > 99%" in text
    summary = make_summary()
    summary["probabilities"] = {"secondary_below_3_msun": 0.4, "primary_below_3_msun": 0.004}
    text = text_of(parse(render_report(summary, images=images)))
    assert "Neutron star possible 40%" in text
    assert "both bodies: < 1%" in text
    # offset from the trigger in ms: 12.342 (-0.281 / +0.306) -> two figures
    assert "12.34" in text
    assert f"{MINUS}0.28 / +0.31" in text


def test_label_is_escaped(images: dict[str, str]) -> None:
    summary = make_summary()
    summary["label"] = "<script>alert(1)</script>"
    summary["notes"] = ['<img src=x onerror="alert(2)">']
    html = render_report(summary, images=images)
    assert "<script>alert(1)" not in html
    assert "<img src=x" not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    parse(html)


def test_optional_parts_may_be_missing(images: dict[str, str]) -> None:
    summary = make_summary()
    for key in ("maximum_likelihood", "notes", "probabilities"):
        del summary[key]
    del summary["diagnostics"]["likelihood_check"]
    summary["inputs"]["psd"] = {"estimated": True, "method": "Welch's method, 4 s segments"}
    html = render_report(summary, images={})
    doc = parse(html)
    text = text_of(doc)
    assert "<script" not in html
    assert "Copy share link" not in html
    assert 'id="downloads"' not in html
    assert "Maximum-likelihood" not in html
    assert "No plots were made" in text
    assert doc.images == []
    assert "estimated from the strain (Welch's method, 4 s segments)" in text


def test_bare_minimum_summary_renders() -> None:
    summary = {"label": "drill-0001", "parameters": {"chirp_mass": param(1.2, 1.1, 1.3, "Msun")}}
    doc = parse(render_report(summary, images={}))
    assert doc.rows["param-chirp_mass"][1].strip() == "1.20"
    with pytest.raises(ValueError, match="parameters"):
        render_report({"label": "x"}, images={})


def test_images_downloads_and_share_link(images: dict[str, str], tmp_path: Path) -> None:
    downloads = {"samples.csv": "samples.csv", "summary.json": "summary.json",
                 "corner.png": "corner.png"}
    html = render_report(make_summary(), images=images, downloads=downloads,
                         share_url="https://example.org/r/abc?x=1&y=2")
    doc = parse(html)
    assert len(doc.images) == 5
    assert html.count("<b>Look for:</b>") == 5
    extra = render_report(make_summary(), images={"extra_view": images["corner"]})
    assert "<h3>Extra view</h3>" in extra  # an unknown figure is titled from its key
    sky = render_report(make_summary(), images={"sky_map": images["corner"]})
    assert "<h3>Sky position</h3>" in sky
    prefix = "data:image/png;base64,"
    assert all(src.startswith(prefix) for src in doc.images)
    assert base64.b64decode(doc.images[0][len(prefix):]) == (tmp_path / "tiny.png").read_bytes()
    for href in downloads.values():
        assert f'href="{href}"' in html
    assert "Copy share link" in html
    assert "<script>" in html
    assert 'value="https://example.org/r/abc?x=1&amp;y=2"' in html
    with pytest.raises(ValueError, match="http"):
        render_report(make_summary(), images=images, share_url="javascript:alert(1)")
    with pytest.raises(ValueError, match="scheme"):
        render_report(make_summary(), images=images, downloads={"x": "javascript:alert(1)"})


def test_diagnostics_and_alerts(images: dict[str, str]) -> None:
    html = render_report(make_summary(), images=images)
    text = text_of(parse(html))
    assert "4000 × 32" in text
    assert "1,705" in text
    assert "0.34" in text
    assert "63.8" in text
    assert '<span class="badge pass">pass</span>' in html
    assert '<span class="badge pass">yes</span>' in html
    assert "0.0031" in text
    assert "24.34 s" in text  # total of the stage timings
    assert "9f2c" * 16 in text
    assert "drill-0042_psd.txt" in text
    assert "chirpcast 0.1.0" in text
    assert "did not meet its convergence" not in text
    summary = copy.deepcopy(make_summary())
    summary["diagnostics"]["converged"] = False
    summary["diagnostics"]["likelihood_check"]["passed"] = False
    html = render_report(summary, images=images)
    text = text_of(parse(html))
    assert "did not meet its convergence criterion" in text
    assert "disagreed with the exact likelihood" in text
    assert '<span class="badge fail">fail</span>' in html
    assert '<span class="badge fail">no</span>' in html


def test_image_data_uri_rejects_non_png(tmp_path: Path) -> None:
    bad = tmp_path / "x.png"
    bad.write_bytes(b"GIF89a....")
    with pytest.raises(ValueError, match="not a PNG"):
        image_data_uri(bad)
