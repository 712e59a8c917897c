"""The network parts of the report's context: detectors, sky area, per-detector inputs.

Display-ready strings only; the numbers come from ``summary.json`` (see
:mod:`estimator.network_summary`). Used by :func:`service.report.build_context`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from .formatting import format_interval, format_significant, format_value

__all__ = ["network_context", "plot_title", "quality_title"]

#: Titles and captions of the network's figures (keys with a detector name after a colon).
_FIGURES: Mapping[str, tuple[str, str, str]] = {
    "sky_map": (
        "Sky position",
        "Posterior probability per square degree on the whole sky (Mollweide projection, "
        "J2000 equatorial coordinates; right ascension increases to the left), with the 50% "
        "and 90% credible regions; a compact region is also shown enlarged.",
        "one compact patch; two or more patches or an arc mean the network cannot tell "
        "them apart (mirror images of equal arrival-time differences), so search them all.",
    ),
    "whitened": (
        "{name}: whitened data near coalescence",
        "This detector's data divided by its noise amplitude at each frequency, with the "
        "network's best-fit model as this detector sees it drawn over it.",
        "excursions the model does not follow (a noise transient) and a model much louder "
        "or quieter than the data (see the coincidence check).",
    ),
}


def plot_title(key: str) -> tuple[str, str, str] | None:
    """Title, caption and what to look for of a network figure, or ``None``."""
    base, _, name = key.partition(":")
    text = _FIGURES.get(base)
    if text is None:
        return None
    return (text[0].format(name=name), text[1], text[2])


_QUALITY_TITLES: Mapping[str, str] = {
    "coincidence": "Data agree with the network model",
    "unexplained": "No signal left unexplained",
    "residual_variance": "Noise level matches the spectrum",
    "residual_normality": "Residual noise is Gaussian",
    "transient": "No glitch near the signal",
}


def quality_title(name: str) -> str | None:
    """Heading of a per-detector check ``CHECK:DETECTOR``, or ``None`` for other names."""
    base, sep, detector = name.partition(":")
    if not sep or base not in _QUALITY_TITLES:
        return None
    return f"{_QUALITY_TITLES[base]} ({detector})"


def _snr(entry: Mapping[str, Any] | None) -> dict[str, Any] | None:
    if not entry:
        return None
    return dict(format_interval(float(entry["median"]), float(entry["lower"]),
                                float(entry["upper"])))  # fmt: skip


def network_context(summary: Mapping[str, Any]) -> dict[str, Any]:
    """``network`` (detectors, sky areas, per-detector inputs) or ``None`` for one detector."""
    if summary.get("analysis") != "network":
        return {"network": None}
    sky = summary.get("sky", {})
    detectors = []
    for d in summary.get("detectors", []):
        site = d.get("site", {})
        detectors.append({
            "name": str(d.get("name", "")),
            "where": (f"{float(site.get('latitude_deg', 0.0)):+.2f}°, "
                      f"{float(site.get('longitude_deg', 0.0)):+.2f}°, "
                      f"{float(site.get('elevation_m', 0.0)):.0f} m"),
            "arms": (f"{float(site.get('arm1_azimuth_deg', 0.0)):.1f}° / "
                     f"{float(site.get('arm2_azimuth_deg', 0.0)):.1f}°"),
            "optimal": _snr(d.get("optimal_snr")),
            "matched": _snr(d.get("matched_filter_snr")),
            "arrival": format_value(d.get("arrival_time")),
        })
    inputs = []
    for d in summary.get("inputs", {}).get("detectors", []):
        strain, psd = d.get("strain", {}) or {}, d.get("psd", {}) or {}
        inputs.append({
            "name": str(d.get("name", "")),
            "strain": {k: format_value(strain.get(k))
                       for k in ("file", "sha256", "sample_rate", "start_time", "duration")},
            "psd": {"estimated": bool(psd.get("estimated", False)),
                    "method": psd.get("method"),
                    "file": format_value(psd.get("file")),
                    "sha256": format_value(psd.get("sha256"))},
        })
    sites = summary.get("inputs", {}).get("sites")
    return {"network": {
        "detectors": detectors,
        "area90": format_significant(float(sky.get("area_90_deg2", float("nan"))), 2),
        "area50": format_significant(float(sky.get("area_50_deg2", float("nan"))), 2),
        "frame": str(sky.get("frame", "")),
        "inputs": inputs,
        "sites": None if sites is None else (
            sites if isinstance(sites, str) else format_value(sites.get("file", sites))),
    }}
