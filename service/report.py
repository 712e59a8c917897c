"""The HTML report of one analysis: display-ready context from ``summary.json``, rendered
by ``templates/report.html``.

Templates only render; every number they show is formatted by :mod:`service.formatting`
(intervals to two significant figures of their uncertainty, common practice), whose
:func:`format_interval` is re-exported here.
"""

from __future__ import annotations

import base64
import math
from collections.abc import Iterator, Mapping
from functools import lru_cache
from pathlib import Path
from typing import Any

import jinja2

from .formatting import (
    format_fixed,
    format_interval,
    format_percent,
    format_significant,
    format_uncertain,
    format_value,
)
from .report_network import network_context, plot_title, quality_title

__all__ = [
    "FISHER_LABELS",
    "PLOT_ORDER",
    "QUALITY_TITLES",
    "TEMPLATES_DIR",
    "build_context",
    "format_interval",
    "image_data_uri",
    "render_report",
]

TEMPLATES_DIR = Path(__file__).resolve().parents[1] / "templates"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"

#: Row label of each parameter of summary.json.
LABELS: Mapping[str, str] = {
    "chirp_mass": "Chirp mass", "mass_ratio": "Mass ratio m₂/m₁",
    "primary_mass": "Primary mass m₁", "secondary_mass": "Secondary mass m₂",
    "total_mass": "Total mass", "source_chirp_mass": "Chirp mass",
    "source_primary_mass": "Primary mass m₁", "source_secondary_mass": "Secondary mass m₂",
    "source_total_mass": "Total mass", "redshift": "Redshift z",
    "luminosity_distance": "Luminosity distance", "effective_distance": "Effective distance",
    "orientation_factor": "Orientation factor", "coalescence_time": "Coalescence time (GPS)",
    "snr": "Matched-filter SNR", "network_snr": "Network matched-filter SNR",
    "inclination": "Inclination ι", "polarization_angle": "Polarisation angle ψ",
    "right_ascension": "Right ascension α", "declination": "Declination δ",
    "effective_spin": "Effective spin χ_eff", "spin1": "Primary spin χ₁",
    "spin2": "Secondary spin χ₂",
}
#: Table groups: (title, note, parameter names).
GROUPS: tuple[tuple[str, str, tuple[str, ...]], ...] = (
    ("Detector frame", "as measured: masses redshifted by a factor (1 + z)",
     ("chirp_mass", "mass_ratio", "primary_mass", "secondary_mass", "total_mass")),
    ("Source frame", "detector-frame masses divided by (1 + z)",
     ("source_chirp_mass", "source_primary_mass", "source_secondary_mass",
      "source_total_mass", "redshift")),
    ("Distance and time", "",
     ("luminosity_distance", "effective_distance", "orientation_factor", "coalescence_time")),
    ("Sky position and orientation", "equatorial coordinates, J2000",
     ("right_ascension", "declination", "inclination", "polarization_angle")),
    ("Spins", "components along the orbital angular momentum; "
     "χ_eff = (m₁χ₁ + m₂χ₂)/(m₁ + m₂), the combination the data measure best",
     ("effective_spin", "spin1", "spin2")),
    ("Signal strength", "", ("snr", "network_snr")),
)
UNITS: Mapping[str, str] = {"Msun": "M☉", "": "—", "deg": "°"}
#: Heading of each data-quality check of summary.json's "quality".
QUALITY_TITLES: Mapping[str, str] = {
    "residual_variance": "Noise level matches the spectrum",
    "residual_normality": "Residual noise is Gaussian",
    "transient": "No glitch near the signal",
    "segment_edges": "Signal inside the segment",
    "band_edge": "Signal inside the frequency band",
    "likelihood_check": "Fast likelihood agrees with exact",
    "low_frequency_cut": "Segment long enough for the band",
    "gating": "Glitches away from the signal gated",
    "spin_peak": "Start checked against other likelihood peaks",
}
#: Plot keys in report order; their titles and captions live in templates/figures.html.
PLOT_ORDER = ("sky_map", "corner", "whitened", "time_frequency", "spectrum", "traces")
_SAFE_SCHEMES = ("http", "https", "data", "file")


def _checked_link(href: str, what: str) -> str:
    scheme, sep, _ = href.partition(":")
    if sep and "/" not in scheme and scheme.lower() not in _SAFE_SCHEMES:
        msg = f"{what} {href[:40]!r} uses scheme {scheme!r}; use an http(s), data: or relative URL"
        raise ValueError(msg)
    return href


def _parameter_row(name: str, entry: Mapping[str, Any], trigger: float | None) -> dict[str, Any]:
    fixed = 4 if name == "coalescence_time" else None  # GPS time: 4 decimals (0.1 ms)
    row: dict[str, Any] = dict(format_interval(
        float(entry["median"]), float(entry["lower"]), float(entry["upper"]), decimals=fixed))
    unit = str(entry.get("unit", ""))
    row.update(name=name, label=LABELS.get(name, name.replace("_", " ")), unit=unit,
               unit_display=UNITS.get(unit, unit), extra=None)
    if name == "coalescence_time" and trigger is not None:
        offset = format_interval(*(1e3 * (float(entry[k]) - trigger)
                                   for k in ("median", "lower", "upper")))
        row["extra"] = {"label": "offset from trigger", "unit": "ms",
                        "unit_display": "ms", **offset}
    return row


def _groups(parameters: Mapping[str, Any], trigger: float | None) -> list[dict[str, Any]]:
    groups = []
    listed = [*GROUPS, ("Other", "", tuple(n for n in parameters if n not in LABELS))]
    for title, note, names in listed:
        rows = [_parameter_row(n, parameters[n], trigger) for n in names if n in parameters]
        if rows:
            groups.append({"title": title, "note": note, "rows": rows})
    return groups


def _headline(parameters: Mapping[str, Any], probabilities: Mapping[str, Any]) -> dict[str, Any]:
    def pick(name: str) -> dict[str, Any] | None:
        return _parameter_row(name, parameters[name], None) if name in parameters else None

    p_secondary = probabilities.get("secondary_below_3_msun")
    p_primary = probabilities.get("primary_below_3_msun")
    return {
        "chirp_mass": pick("chirp_mass"), "distance": pick("luminosity_distance"),
        "m1": pick("source_primary_mass"), "m2": pick("source_secondary_mass"),
        "snr": pick("snr") or pick("network_snr"), "time": pick("coalescence_time"),
        "ns_possible": None if p_secondary is None else format_percent(float(p_secondary)),
        "both_light": None if p_primary is None else format_percent(float(p_primary)),
    }


def _flatten(settings: Mapping[str, Any], prefix: str = "") -> Iterator[tuple[str, str]]:
    for key, value in settings.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping):
            yield from _flatten(value, name + ".")
        else:
            yield name, format_value(value)


def _diagnostics(diag: Mapping[str, Any]) -> dict[str, Any]:
    steps = int(diag.get("steps", 0))
    f_ref = diag.get("sampler_coordinates", {}).get("reference_frequency")
    arrival = "Arrival time at " + (f"{float(f_ref):.0f} Hz" if f_ref else "f_ref")
    names = {**LABELS, "arrival_time": arrival}
    taus = [{"name": names.get(k, k), "tau": f"{float(v):.1f}",
             "ratio": f"{steps / float(v):.0f}" if float(v) > 0 else "n/a"}
            for k, v in diag.get("autocorrelation_time", {}).items()]
    raw = diag.get("likelihood_check")
    check = None if raw is None else {
        "passed": bool(raw.get("passed", False)),
        **{k: format_significant(float(raw.get(k, math.nan)), 2)
           for k in ("max_abs_difference", "tolerance")},
        **{k: format_value(raw.get(k)) for k in ("draws", "bins", "refinements")},
        "reweighted": bool(raw.get("reweighted_with_exact_likelihood", False)),
        "efficiency": format_significant(float(raw.get("reweight_efficiency") or math.nan), 2),
    }
    timings = {str(k): float(v) for k, v in diag.get("timings_s", {}).items()}
    return {
        "taus": taus, "ess": f"{float(diag.get('effective_sample_size', math.nan)):,.0f}",
        "acceptance": f"{float(diag.get('acceptance_fraction', math.nan)):.2f}",
        "steps": steps, "converged": diag.get("converged"), "check": check,
        **{k: format_value(diag.get(k)) for k in ("walkers", "burn_in", "thin")},
        "timings": [(k, f"{v:.2f}") for k, v in timings.items()],
        "total_time": f"{sum(timings.values()):.2f}",
    }


def _quality(raw: Mapping[str, Any] | None) -> list[dict[str, Any]] | None:
    if not raw:
        return None
    rows = []
    for check in raw.get("checks", []):
        name, value = str(check.get("name", "")), check.get("value")
        rows.append({
            "name": name.replace(":", "-"),
            "title": QUALITY_TITLES.get(name) or quality_title(name) or name.replace("_", " "),
            "passed": bool(check.get("passed", False)),
            "value": "n/a" if value is None else format_significant(float(value), 3),
            "threshold": str(check.get("threshold", "")),
            "explanation": str(check.get("explanation", "")),
        })
    return rows


#: Row labels of the Fisher first look and cross-check (report and status page).
FISHER_LABELS: Mapping[str, str] = {
    "chirp_mass": "Chirp mass (detector frame)",
    "symmetric_mass_ratio": "Symmetric mass ratio η",
    "coalescence_time": "Coalescence time − trigger time",
    "effective_distance": "Effective distance",
}


def _fisher(raw: Mapping[str, Any] | None) -> dict[str, Any] | None:
    if not raw or not raw.get("parameters"):
        return None
    rows = []
    for name, entry in raw["parameters"].items():
        shown = format_uncertain(entry.get("value"), entry.get("sigma"))
        sd, ratio = entry.get("posterior_sd"), entry.get("ratio")
        rows.append({
            "label": FISHER_LABELS.get(name, name), "unit": str(entry.get("unit", "")),
            "value": shown["value"], "sigma": shown["sigma"],
            "posterior_sd": "n/a" if sd is None else format_significant(float(sd), 2),
            "ratio": "n/a" if ratio is None else f"{float(ratio):.2f}",
        })
    return {"rows": rows, "snr": f"{float(raw.get('snr', math.nan)):.1f}"}


def _inputs(inputs: Mapping[str, Any]) -> dict[str, Any]:
    strain, psd = inputs.get("strain"), inputs.get("psd")
    return {
        "strain": None if not strain else {
            k: format_value(strain.get(k))
            for k in ("file", "sha256", "sample_rate", "start_time", "duration")},
        "psd": None if not psd else {
            "estimated": bool(psd.get("estimated", False)),
            "method": None if psd.get("method") is None else str(psd["method"]),
            "file": format_value(psd.get("file")), "sha256": format_value(psd.get("sha256"))},
    }


def _maximum_likelihood(best: Mapping[str, Any] | None, groups: list[dict[str, Any]]
                        ) -> list[dict[str, str]] | None:
    if not best:
        return None
    decimals = {r["name"]: int(r["decimals"]) for g in groups for r in g["rows"]}
    rows = []
    for name, value in best.items():
        v = float(value)
        text = format_fixed(v, 2) if name == "log_likelihood" else (
            format_fixed(v, decimals[name]) if name in decimals else format_significant(v, 6))
        rows.append({"label": "log likelihood" if name == "log_likelihood"
                     else LABELS.get(name, name), "value": text})
    return rows


def build_context(summary: Mapping[str, Any], *, images: Mapping[str, str],
                  downloads: Mapping[str, str] | None = None,
                  share_url: str | None = None) -> dict[str, Any]:
    """Turn a summary.json mapping into the template's display-ready context."""
    for key in ("label", "parameters"):
        if key not in summary:
            msg = f"summary has no {key!r}; pass the summary.json of a finished analysis"
            raise ValueError(msg)
    settings = summary.get("settings", {})
    trigger = settings.get("trigger_time")
    trigger = float(trigger) if isinstance(trigger, int | float) else None
    parameters = summary["parameters"]
    groups = _groups(parameters, trigger)
    diag = _diagnostics(summary.get("diagnostics", {}))
    alerts = []
    if diag["converged"] is False:
        alerts.append("The sampler did not meet its convergence criterion; treat the "
                      "intervals as rough.")
    if diag["check"] is not None and not diag["check"].get("passed", True):
        alerts.append("The fast likelihood disagreed with the exact likelihood beyond "
                      "tolerance; " + ("the samples were reweighted with the exact likelihood "
                      f"(efficiency {diag['check']['efficiency']})." if diag["check"]["reweighted"]
                      else "the posterior may be distorted."))
    quality = _quality(summary.get("quality"))
    quality_flags = [q for q in quality or [] if not q["passed"]]
    if share_url is not None and not share_url.lower().startswith(("http://", "https://")):
        msg = f"share_url {share_url[:40]!r} must be an absolute http(s) URL"
        raise ValueError(msg)
    # Known figures in report order; others (per-detector ones) before the sampler traces.
    known = [k for k in PLOT_ORDER if k in images]
    others = [k for k in images if k not in PLOT_ORDER]
    cut = known.index("traces") if "traces" in known else len(known)
    keys = known[:cut] + others + known[cut:]
    plots = [{"key": k.replace(":", "-"), "src": _checked_link(images[k], f"image {k!r}"),
              "text": plot_title(k)} for k in keys]
    software = summary.get("software", {})
    return {
        "label": str(summary["label"]),
        "credible": f"{100.0 * float(summary.get('credible_level', 0.9)):g}%",
        "headline": _headline(parameters, summary.get("probabilities", {})),
        "groups": groups, "alerts": alerts, "plots": plots, "diagnostics": diag,
        "quality": quality, "quality_flags": quality_flags,
        "fisher": _fisher(summary.get("fisher")),
        "maximum_likelihood": _maximum_likelihood(summary.get("maximum_likelihood"), groups),
        "notes": [str(n) for n in summary.get("notes", [])],
        "downloads": None if not downloads else [
            (name, _checked_link(href, f"download {name!r}")) for name, href in downloads.items()],
        "share_url": share_url, "settings": list(_flatten(settings)),
        "inputs": _inputs(summary.get("inputs", {})), "seed": format_value(settings.get("seed")),
        "software": f"{software.get('name', 'chirpcast')} {software.get('version', '')}".strip(),
        "schema_version": summary.get("schema_version"),
        "model_text": _model_text(summary.get("model", {})),
        **network_context(summary),
    }


#: What the caution says of a summary that names no model (written before models had names).
_DEFAULT_MODEL_TEXT = (
    "the TaylorF2 inspiral (3.5PN phase, restricted amplitude) with no spins, no tidal "
    "effects and no merger or ringdown"
)


def _model_text(model: Mapping[str, Any]) -> str:
    """The caution's words for the waveform model and the spins of summary.json."""
    waveform = model.get("waveform")
    if not isinstance(waveform, str):
        return _DEFAULT_MODEL_TEXT
    spins = model.get("spins")
    return f"{waveform}; {spins}" if isinstance(spins, str) else waveform


@lru_cache(maxsize=1)
def _environment() -> jinja2.Environment:
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(TEMPLATES_DIR), autoescape=True,
        undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True,
    )


def render_report(summary: Mapping[str, Any], *, images: Mapping[str, str],
                  downloads: Mapping[str, str] | None = None,
                  share_url: str | None = None) -> str:
    """Render the self-contained HTML report of one analysis.

    Parameters
    ----------
    summary
        The analysis summary (the contents of summary.json, schema version 1).
    images
        Plot key (``"corner"``, ``"whitened"``, ``"time_frequency"``, ``"spectrum"``,
        ``"traces"``) -> image ``src``: a data: URI or a URL. Missing plots are left out.
    downloads
        Link text -> href (samples.csv, summary.json, the PNGs), or ``None``.
    share_url
        Absolute URL of this report; when given, a "copy share link" button is shown.
    """
    context = build_context(summary, images=images, downloads=downloads, share_url=share_url)
    return _environment().get_template("report.html").render(context)


def image_data_uri(path: str | Path) -> str:
    """Read a PNG and return it as a ``data:image/png;base64,...`` URI."""
    data = Path(path).read_bytes()
    if not data.startswith(PNG_SIGNATURE):
        msg = f"{path}: not a PNG file (first bytes {data[:8]!r}); pass a PNG written by the plots"
        raise ValueError(msg)
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")
