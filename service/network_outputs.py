"""A finished network analysis to its output folder: summary, samples, plots and report.

Written like :func:`service.pipeline.write_outputs`: into a temporary sibling
folder first, moved into place in one rename, so a folder is complete or absent.
The report is the one-detector report's template with the network's sections
(sky map, per-detector data and SNRs) added.
"""

from __future__ import annotations

import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from estimator import plots
from estimator.network_analysis import NetworkResult
from estimator.network_products import detector_snrs, detector_views
from estimator.network_summary import build_network_summary, derive_network_samples
from estimator.sky_plot import plot_sky_map
from estimator.skymap import sky_map_from_samples

from .pipeline import (
    PlotCall,
    Progress,
    _corner,
    _finish_plot,
    _submit_plot,
    _with_unit,
    check_output_folder,
    write_folder,
)

__all__ = ["NETWORK_SAMPLE_COLUMNS", "network_output_files", "write_network_outputs"]

#: Columns of a network analysis's samples.csv, in order (angles in degrees).
NETWORK_SAMPLE_COLUMNS = (
    "chirp_mass",
    "mass_ratio",
    "primary_mass",
    "secondary_mass",
    "total_mass",
    "luminosity_distance",
    "inclination",
    "polarization_angle",
    "right_ascension",
    "declination",
    "coalescence_time",
    "redshift",
    "source_chirp_mass",
    "source_primary_mass",
    "source_secondary_mass",
    "source_total_mass",
    "network_snr",
    "log_likelihood",
)


def _plot_files(names: list[str]) -> dict[str, str]:
    files = {"sky_map": "sky_map.png", "corner": "corner.png"}
    files.update({f"whitened:{n}": f"whitened-{n}.png" for n in names})
    files["traces"] = "traces.png"
    return files


def network_output_files(names: list[str]) -> set[str]:
    """Every file the output folder of a network of detectors ``names`` holds."""
    return {"summary.json", "samples.csv", "report.html", *_plot_files(names).values()}


def _make_plots(
    result: NetworkResult,
    derived: Mapping[str, np.ndarray],
    views: list[Any],
    skymap: Any,
    folder: Path,
) -> dict[str, str]:
    files = _plot_files(result.names)
    labels = {
        "chirp_mass": r"$\mathcal{M}$ [M$_\odot$]",
        "mass_ratio": "$q$",
        "luminosity_distance": "$D_L$ [Mpc]",
        "inclination": r"$\iota$ [deg]",
        "right_ascension": r"$\alpha$ [deg]",
        "declination": r"$\delta$ [deg]",
    }
    corner_samples = {k: derived[k] for k in labels}
    corner_call: PlotCall = (_corner, (corner_samples, folder / files["corner"], labels), {})
    pending = _submit_plot(corner_call)
    plot_sky_map(
        skymap, folder / files["sky_map"], title="Sky position of the source", frame="J2000"
    )
    for view in views:
        data = view.data
        window = (max(-0.6, float(view.times[0])), 0.1)
        plots.whitened_plot(
            view.times,
            view.whitened_data,
            view.whitened_model,
            folder / files[f"whitened:{view.name}"],
            window=window,
            band=(data.f_low, data.f_high),
            title=f"{view.name}: whitened data and best-fit model",
        )
    plots.trace_plot(
        result.chain.chain,
        result.chain.names,
        folder / files["traces"],
        labels={
            **{k: _with_unit(k) for k in result.chain.names},
            "cos_inclination": "cos ι",
            "polarization_angle": "ψ [rad]",
            "right_ascension": "α [rad]",
            "sin_declination": "sin δ",
            "arrival_time": f"t({result.coordinates.f_ref:.0f} Hz) − trigger [s]",
        },
        burn_in=result.chain.burn_in,
    )
    _finish_plot(pending, corner_call)
    return files


def write_network_outputs(
    result: NetworkResult,
    out_dir: Path,
    *,
    inputs: Mapping[str, Any],
    label: str,
    progress: Progress | None = None,
) -> dict[str, Any]:
    """Write summary, samples, plots and report of a network analysis (all or nothing)."""
    clock = time.perf_counter()
    if progress is not None:
        progress("report", 0.0, 0.82)
    out_dir = Path(out_dir)
    expected = network_output_files(result.names)
    check_output_folder(out_dir, expected)
    derived = derive_network_samples(result)
    views = detector_views(result)
    snrs = detector_snrs(result, seed=result.seed)
    skymap = sky_map_from_samples(
        np.radians(derived["right_ascension"]),
        np.radians(derived["declination"]),
        rng=np.random.default_rng([result.seed, 2]),
    )
    summary = build_network_summary(
        result, derived, views=views, snrs=snrs, skymap=skymap, inputs=inputs, label=label
    )

    def write_data(tmp: Path) -> Mapping[str, str]:
        table = np.column_stack([derived[c] for c in NETWORK_SAMPLE_COLUMNS])
        fmt = ["%.10g"] * len(NETWORK_SAMPLE_COLUMNS)
        fmt[NETWORK_SAMPLE_COLUMNS.index("coalescence_time")] = "%.6f"
        np.savetxt(
            tmp / "samples.csv",
            table,
            delimiter=",",
            header=",".join(NETWORK_SAMPLE_COLUMNS),
            comments="",
            fmt=fmt,
        )
        return _make_plots(result, derived, views, skymap, tmp)

    write_folder(out_dir, summary, write_data, clock=clock)
    if progress is not None:
        progress("done", 1.0, 1.0)
    return summary
