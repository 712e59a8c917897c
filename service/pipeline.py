"""Files in, a finished output folder out: the job the command line and the workers share.

The folder holds ``summary.json``, ``samples.csv``, ``report.html`` and the
plots. Everything is written to a temporary sibling folder first and moved
into place in one rename, so a folder is either complete or absent.
"""

from __future__ import annotations

import json
import logging
import multiprocessing as mp
import os
import shutil
import tempfile
import time
from collections.abc import Callable, Mapping
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from estimator import plots
from estimator.analysis import AnalysisResult, AnalysisSettings, run_analysis
from estimator.data import NoiseSpectrum, StrainSegment
from estimator.errors import InputError
from estimator.fisher import FisherEstimate
from estimator.io import read_psd, read_strain, sha256_file
from estimator.products import plot_data
from estimator.summary import PARAMETER_LABELS, PARAMETER_UNITS, build_summary, derive_samples

from .report import image_data_uri, render_report

__all__ = [
    "OUTPUT_FILES",
    "PLOT_FILES",
    "AnalysisRequest",
    "analyze_files",
    "check_output_folder",
    "write_folder",
    "write_outputs",
]

log = logging.getLogger(__name__)

#: Report figure key -> file name in the output folder.
PLOT_FILES = {
    "corner": "corner.png",
    "whitened": "whitened.png",
    "time_frequency": "time_frequency.png",
    "spectrum": "spectrum.png",
    "traces": "traces.png",
}
#: Every file an output folder holds.
OUTPUT_FILES = {"summary.json", "samples.csv", "report.html", *PLOT_FILES.values()}
#: Columns of samples.csv, in order.
SAMPLE_COLUMNS = (
    "chirp_mass",
    "mass_ratio",
    "primary_mass",
    "secondary_mass",
    "total_mass",
    "luminosity_distance",
    "effective_distance",
    "orientation_factor",
    "coalescence_time",
    "redshift",
    "source_chirp_mass",
    "source_primary_mass",
    "source_secondary_mass",
    "source_total_mass",
    "snr",
    "log_likelihood",
)

Progress = Callable[[str, float, float], None]
#: A plot to draw: a module-level function (picklable), its arguments and keywords.
PlotCall = tuple[Callable[..., Path], tuple[Any, ...], dict[str, Any]]
#: Called with the Fisher-matrix first look once the best fit is found, before sampling.
Preview = Callable[[FisherEstimate], None]


@dataclass(frozen=True)
class AnalysisRequest:
    """One analysis as a user asks for it: files plus settings."""

    strain_path: Path
    settings: AnalysisSettings
    psd_path: Path | None = None
    asd: bool = False
    sample_rate: float | None = None
    start_time: float | None = None
    label: str = ""


def _inputs(
    request: AnalysisRequest, segment: StrainSegment, spectrum: NoiseSpectrum | None
) -> dict[str, Any]:
    strain = {
        "file": request.strain_path.name,
        "sha256": sha256_file(request.strain_path),
        "sample_rate": segment.sample_rate,
        "start_time": segment.start_time,
        "duration": segment.duration,
        "samples": int(segment.strain.size),
    }
    psd: dict[str, Any]
    if request.psd_path is not None and spectrum is not None:
        psd = {
            "file": request.psd_path.name,
            "sha256": sha256_file(request.psd_path),
            "kind": "amplitude spectral density" if request.asd else "power spectral density",
        }
    else:
        psd = {
            "estimated": True,
            "method": "Welch's method with the median average over the analysed segment",
        }
    return {"strain": strain, "psd": psd}


def analyze_files(
    request: AnalysisRequest,
    out_dir: Path,
    *,
    progress: Progress | None = None,
    preview: Preview | None = None,
) -> dict[str, Any]:
    """Read the files, run the analysis, write the output folder; return the summary.

    ``preview`` is handed to :func:`estimator.analysis.run_analysis`.
    """
    clock = time.perf_counter()
    check_output_folder(Path(out_dir), OUTPUT_FILES)
    if progress is not None:
        progress("reading", 0.0, 0.0)
    segment = read_strain(
        request.strain_path, sample_rate=request.sample_rate, start_time=request.start_time
    )
    spectrum = read_psd(request.psd_path, asd=request.asd) if request.psd_path else None
    inputs = _inputs(request, segment, spectrum)
    reading = time.perf_counter() - clock
    result = run_analysis(segment, spectrum, request.settings, progress=progress, preview=preview)
    result.timings["reading"] = reading
    label = request.label or request.strain_path.stem
    return write_outputs(result, out_dir, inputs=inputs, label=label, progress=progress)


#: Columns added to posterior_samples.csv when the spins were sampled.
SPIN_COLUMNS = ("spin1", "spin2", "effective_spin")


def _write_samples(path: Path, derived: Mapping[str, np.ndarray]) -> None:
    columns = list(SAMPLE_COLUMNS) + [c for c in SPIN_COLUMNS if c in derived]
    table = np.column_stack([derived[c] for c in columns])
    fmt = ["%.10g"] * len(columns)
    fmt[columns.index("coalescence_time")] = "%.6f"
    np.savetxt(path, table, delimiter=",", header=",".join(columns), comments="", fmt=fmt)


def _make_plots(result: AnalysisResult, derived: Mapping[str, np.ndarray], folder: Path) -> None:
    """Draw the five report figures, the two slowest in a second process meanwhile.

    Drawn one after another on the 256 s neutron-star-like drill (2026-12-03): corner
    0.55-0.9 s, traces 0.46-0.55, time-frequency 0.22-0.24, spectrum 0.20-0.30,
    whitened 0.10 s. The helper takes the corner and time-frequency plots, this process
    the other three; each side then has about 0.8 s to draw.
    """
    pd = plot_data(result)
    f_low, f_high = result.data.f_low, result.data.f_high
    corner_samples = {
        "chirp_mass": derived["chirp_mass"],
        "mass_ratio": derived["mass_ratio"],
        "luminosity_distance": derived["luminosity_distance"],
        "coalescence_offset": 1e3 * derived["coalescence_offset"],
    }
    labels = {
        "chirp_mass": r"$\mathcal{M}$ [M$_\odot$]",
        "mass_ratio": "$q$",
        "luminosity_distance": "$D_L$ [Mpc]",
        "coalescence_offset": "$t_c$ − trigger [ms]",
        "effective_spin": r"$\chi_\mathrm{eff}$",
    }
    if "effective_spin" in derived:
        corner_samples["effective_spin"] = derived["effective_spin"]
    tf_window = (max(-4.0, float(pd.times[0]), float(pd.track_times[0]) - 0.25), 0.1)
    helper: list[PlotCall] = [
        (_corner, (corner_samples, folder / PLOT_FILES["corner"], labels), {}),
        (
            plots.time_frequency_plot,
            (pd.times, pd.whitened_data, pd.sample_rate, pd.track_times,
             pd.track_frequencies, folder / PLOT_FILES["time_frequency"]),
            {"f_low": f_low, "f_high": min(f_high, 1024.0), "window": tf_window},
        ),
    ]
    pending = [_submit_plot(call) for call in helper]
    window = (max(-0.6, float(pd.times[0])), 0.1)
    plots.whitened_plot(
        pd.times,
        pd.whitened_data,
        pd.whitened_model,
        folder / PLOT_FILES["whitened"],
        window=window,
        band=(f_low, f_high),
    )
    plots.spectrum_plot(
        pd.psd_frequencies,
        pd.psd,
        pd.data_frequencies,
        pd.data_asd,
        folder / PLOT_FILES["spectrum"],
        f_low=f_low,
        f_high=f_high,
    )
    plots.trace_plot(
        result.chain.chain,
        result.chain.names,
        folder / PLOT_FILES["traces"],
        labels={
            **{k: _with_unit(k) for k in result.chain.names},
            "arrival_time": f"t({result.coordinates.f_ref:.0f} Hz) − trigger [s]",
        },
        burn_in=result.chain.burn_in,
    )
    for future, call in zip(pending, helper, strict=True):
        _finish_plot(future, call)


def _with_unit(name: str) -> str:
    unit = PARAMETER_UNITS.get(name, "")
    label = PARAMETER_LABELS.get(name, name)
    return f"{label} [{unit}]" if unit else label


def _corner(samples: Mapping[str, np.ndarray], path: Path, labels: Mapping[str, str]) -> Path:
    return plots.corner_plot(samples, path, labels=labels)


_POOL: ProcessPoolExecutor | None = None


def _plot_pool() -> ProcessPoolExecutor | None:
    """One long-lived helper process for plots, where the platform can fork and has a core.

    None in a daemonic process (a Dask worker's), which may not have children.
    """
    global _POOL
    if (_POOL is None and (os.cpu_count() or 1) > 1 and "fork" in mp.get_all_start_methods()
            and not mp.current_process().daemon):
        _POOL = ProcessPoolExecutor(1, mp_context=mp.get_context("fork"))
    return _POOL


def _submit_plot(call: PlotCall) -> Future[Path] | None:
    """``call`` handed to the helper process; ``None``: draw it in this process."""
    pool = _plot_pool()
    if pool is None:
        return None
    function, args, kwargs = call
    try:
        return pool.submit(function, *args, **kwargs)
    except BrokenProcessPool:  # the helper died since the last analysis: start another next time
        _drop_pool()
        return None


def _finish_plot(pending: Future[Path] | None, call: PlotCall) -> Path:
    """Wait for the helper's plot; draw it here if there is none or the helper died."""
    if pending is not None:
        try:
            return pending.result(timeout=300)
        except BrokenProcessPool:  # the helper was killed (e.g. out of memory)
            log.warning("the plot helper process died; drawing %s in-process",
                        getattr(call[0], "__name__", "a plot"))
            _drop_pool()
    function, args, kwargs = call
    return function(*args, **kwargs)


def _drop_pool() -> None:
    """Forget a broken helper pool (the next analysis starts a fresh one)."""
    global _POOL
    if _POOL is not None:
        _POOL.shutdown(wait=False, cancel_futures=True)
    _POOL = None


def write_outputs(
    result: AnalysisResult,
    out_dir: Path,
    *,
    inputs: Mapping[str, Any],
    label: str,
    progress: Progress | None = None,
) -> dict[str, Any]:
    """Write summary, samples, plots and report to ``out_dir`` (all or nothing)."""
    clock = time.perf_counter()
    if progress is not None:
        progress("report", 0.0, 0.86)
    rng = np.random.default_rng([result.seed, 1])
    derived = derive_samples(result, rng)
    summary = build_summary(result, derived, inputs=inputs, label=label)
    out_dir = Path(out_dir)
    check_output_folder(out_dir, OUTPUT_FILES)

    def write_data(tmp: Path) -> Mapping[str, str]:
        _write_samples(tmp / "samples.csv", derived)
        _make_plots(result, derived, tmp)
        return PLOT_FILES

    write_folder(out_dir, summary, write_data, clock=clock)
    if progress is not None:
        progress("done", 1.0, 1.0)
    return summary


def write_folder(
    out_dir: Path,
    summary: dict[str, Any],
    write_data: Callable[[Path], Mapping[str, str]],
    *,
    clock: float,
) -> None:
    """Fill a temporary sibling of ``out_dir`` and move it into place (all or nothing).

    ``write_data(folder)`` writes the samples and plots and returns the report's
    figure keys -> file names; then ``summary.json`` (with the report stage's time
    since ``clock``) and ``report.html`` are written, and the folder replaces ``out_dir``.
    """
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.partial-", dir=out_dir.parent))
    tmp.chmod(0o755)  # mkdtemp makes it private; the output is an ordinary folder
    try:
        files = write_data(tmp)
        summary["diagnostics"]["timings_s"]["report"] = round(time.perf_counter() - clock, 3)
        (tmp / "summary.json").write_text(json.dumps(summary, indent=2) + "\n", encoding="utf-8")
        images = {key: image_data_uri(tmp / name) for key, name in files.items()}
        downloads = {
            "samples.csv": "samples.csv",
            "summary.json": "summary.json",
            **{name: name for name in files.values()},
        }
        html = render_report(summary, images=images, downloads=downloads)
        (tmp / "report.html").write_text(html, encoding="utf-8")
        _replace_folder(tmp, out_dir)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def check_output_folder(target: Path, expected: set[str]) -> None:
    """Refuse to replace a folder that holds anything but an earlier output of ours."""
    if not target.exists():
        return
    if not target.is_dir():
        msg = f"output {target} exists and is not a folder; choose another --out"
        raise InputError(msg, field="out")
    foreign = sorted(p.name for p in target.iterdir() if p.name not in expected)
    if foreign:
        msg = (
            f"output folder {target} already holds other files ({', '.join(foreign[:3])}"
            f"{', ...' if len(foreign) > 3 else ''}); choose an empty or new folder"
        )
        raise InputError(msg, field="out")


def _replace_folder(new: Path, target: Path) -> None:
    """Move ``new`` to ``target``; an earlier output at ``target`` is replaced as a whole."""
    if target.exists():
        old = target.with_name(f".{target.name}.old-{os.getpid()}")
        target.rename(old)
        new.rename(target)
        shutil.rmtree(old, ignore_errors=True)
    else:
        new.rename(target)
