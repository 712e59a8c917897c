"""Several detectors' files in, a finished output folder out (the network analysis).

:func:`load_network_inputs` reads every strain file and spectrum, resolves each
detector's site (from a site file or the shipped invented sites) and checks that the
whole network can be analysed, before anything is written; :func:`analyze_network_files`
then runs :func:`estimator.network_analysis.run_network_analysis` and writes the folder
with :func:`service.network_outputs.write_network_outputs` (all or nothing).
"""

from __future__ import annotations

import inspect
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from estimator.analysis import AnalysisSettings
from estimator.data import NoiseSpectrum, StrainSegment
from estimator.errors import InputError
from estimator.io import read_psd, read_strain, sha256_file
from estimator.network_validation import check_network_inputs
from estimator.sites import SHIPPED_SITES, Site
from estimator.validation import check_analysis_inputs, default_f_high

if TYPE_CHECKING:
    from estimator.network_analysis import DetectorInput

__all__ = [
    "MIN_DETECTORS",
    "DetectorFiles",
    "NetworkRequest",
    "analyze_network_files",
    "load_network_inputs",
    "load_sites",
]

Progress = Callable[[str, float, float], None]
Preview = Callable[[Any], None]
#: Fewest detectors the network analysis takes.
MIN_DETECTORS = 2
_WELCH = "Welch's method with the median average over the analysed segment"


@dataclass(frozen=True)
class DetectorFiles:
    """One detector's files: its site name, strain and (optionally) noise spectrum.

    ``sample_rate`` and ``start_time`` are needed for one-column text and ``.npy``
    strain (see :func:`estimator.io.read_strain`); ``asd`` marks the spectrum as an
    amplitude spectral density.
    """

    name: str
    strain_path: Path
    psd_path: Path | None = None
    asd: bool = False
    sample_rate: float | None = None
    start_time: float | None = None


@dataclass(frozen=True)
class NetworkRequest:
    """A network analysis as a user asks for it: one entry per detector plus settings.

    ``sites_path`` is a site file (TOML/JSON); ``None`` takes the shipped invented sites.
    """

    detectors: tuple[DetectorFiles, ...]
    settings: AnalysisSettings
    sites_path: Path | None = None
    label: str = ""


def _detector_error(name: str, part: str, err: InputError) -> InputError:
    """The same error, said of detector ``name`` (``field="detector:NAME:PART"``)."""
    return InputError(str(err), source=f"detector {name}", field=f"detector:{name}:{part}")


def load_sites(sites_path: Path | None) -> tuple[dict[str, Site], str | dict[str, Any]]:
    """The sites a detector may name, and their provenance record.

    A site file is read with :func:`estimator.io.read_site_file` (record: its name,
    SHA-256 and site names); without one, the shipped invented sites
    (:data:`estimator.sites.SHIPPED_SITES`; record: ``"shipped sites"``).
    """
    if sites_path is None:
        return dict(SHIPPED_SITES), "shipped sites"
    from estimator.io import read_site_file

    sites = read_site_file(sites_path)
    record = {
        "file": Path(sites_path).name,
        "sha256": sha256_file(sites_path),
        "names": sorted(sites),
    }
    return sites, record


def _precheck(request: NetworkRequest, sites: Mapping[str, Site]) -> None:
    """Name errors found without reading a data file: empty, twice, unknown, PSD for some."""
    if len(request.detectors) < MIN_DETECTORS:
        msg = (
            f"a network analysis needs at least {MIN_DETECTORS} detectors, got "
            f"{len(request.detectors)}; one detector is analysed without a site (the "
            "one-detector analysis)"
        )
        raise InputError(msg, field="detectors")
    seen: set[str] = set()
    for entry in request.detectors:
        if entry.name in seen:
            msg = f"detector {entry.name!r} is given twice; give each detector once"
            raise InputError(msg, source=f"detector {entry.name}", field=f"detector:{entry.name}")
        seen.add(entry.name)
        if entry.name not in sites:
            where = "the site file" if request.sites_path else "the shipped sites"
            msg = (
                f"{entry.name!r} is not a site of {where} (known: {', '.join(sorted(sites))}); "
                "use one of those names, or describe the site in a site file"
            )
            raise InputError(msg, source=f"detector {entry.name}", field=f"detector:{entry.name}")
    with_psd = [e.name for e in request.detectors if e.psd_path is not None]
    if with_psd and len(with_psd) < len(request.detectors):
        without = [e.name for e in request.detectors if e.psd_path is None]
        msg = (
            f"a noise spectrum is given for {', '.join(with_psd)} but not for "
            f"{', '.join(without)}; give a PSD for every detector, or for none (all then "
            "estimated from the data)"
        )
        raise InputError(msg, source=f"detector {without[0]}", field=f"detector:{without[0]}:psd")


def _read(entry: DetectorFiles) -> tuple[StrainSegment, NoiseSpectrum | None]:
    try:
        segment = read_strain(
            entry.strain_path,
            sample_rate=entry.sample_rate,
            start_time=entry.start_time,
            detector=entry.name,
        )
    except InputError as err:
        raise _detector_error(entry.name, "strain", err) from err
    if entry.psd_path is None:
        return segment, None
    try:
        return segment, read_psd(entry.psd_path, asd=entry.asd)
    except InputError as err:
        raise _detector_error(entry.name, "psd", err) from err


def _provenance(entry: DetectorFiles, segment: StrainSegment, site: Site) -> dict[str, Any]:
    strain = {
        "file": entry.strain_path.name,
        "sha256": sha256_file(entry.strain_path),
        "sample_rate": segment.sample_rate,
        "start_time": segment.start_time,
        "duration": segment.duration,
        "samples": int(segment.strain.size),
    }
    psd: dict[str, Any] = {"estimated": True, "method": _WELCH}
    if entry.psd_path is not None:
        psd = {
            "file": entry.psd_path.name,
            "sha256": sha256_file(entry.psd_path),
            "kind": "amplitude spectral density" if entry.asd else "power spectral density",
        }
    geometry = {
        "latitude_deg": site.latitude,
        "longitude_deg": site.longitude,
        "elevation_m": site.elevation,
        "arm1_azimuth_deg": site.arm1_azimuth,
        "arm2_azimuth_deg": site.arm2_azimuth,
        "arm1_tilt_deg": site.arm1_tilt,
        "arm2_tilt_deg": site.arm2_tilt,
    }
    return {"name": entry.name, "strain": strain, "psd": psd, "site": geometry}


def load_network_inputs(request: NetworkRequest) -> tuple[list[DetectorInput], dict[str, Any]]:
    """Read and check every detector's files; return the inputs and their provenance.

    Order: the sites; the names (each once, each a known site) and the PSD rule (for
    every detector or none), before any data file is read; then every file; then the
    network checks (:func:`estimator.network_validation.check_network_inputs`) and each
    detector's band checks (:func:`estimator.validation.check_analysis_inputs`).

    Returns
    -------
    (inputs, provenance)
        ``provenance`` is ``{"detectors": [{"name", "strain", "psd", "site"}, ...],
        "sites": ...}`` in input order: file names, SHA-256, sample rate, start,
        duration, the PSD file or ``"estimated": True``, the site's geometry; and the
        site file (``{"file", "sha256", "names"}``) or ``"shipped sites"``.

    Raises
    ------
    InputError
        Naming the detector; ``field`` ``"detector:NAME"``, ``"detector:NAME:strain"``,
        ``"detector:NAME:psd"``, a site file's ``"site:NAME:FIELD"`` or ``"detectors"``.
    """
    from estimator.network_analysis import DetectorInput

    sites, site_record = load_sites(request.sites_path)
    _precheck(request, sites)
    inputs: list[DetectorInput] = []
    detectors: list[dict[str, Any]] = []
    for entry in request.detectors:
        segment, spectrum = _read(entry)
        site = sites[entry.name]
        inputs.append(DetectorInput(site=site, segment=segment, spectrum=spectrum))
        detectors.append(_provenance(entry, segment, site))
    settings = request.settings
    check_network_inputs(
        inputs,
        trigger_time=settings.trigger_time,
        time_window=settings.time_window,
        known_sites=sites,
    )
    f_high = settings.f_high
    if f_high is None:  # one band for all, as the analysis takes it
        f_high = min(default_f_high(i.segment, i.spectrum) for i in inputs)
    for item in inputs:
        try:
            check_analysis_inputs(
                item.segment,
                item.spectrum,
                trigger_time=settings.trigger_time,
                f_low=settings.f_low,
                f_high=f_high,
                time_window=settings.time_window,
            )
        except InputError as err:
            part = "psd" if err.field == "psd" else "strain"
            raise _detector_error(item.site.name, part, err) from err
    return inputs, {"detectors": detectors, "sites": site_record}


def _output_names(names: list[str]) -> set[str]:
    """Files an earlier output folder of this network may hold."""
    from .network_outputs import network_output_files

    return network_output_files(names)


def analyze_network_files(
    request: NetworkRequest,
    out_dir: Path,
    *,
    progress: Progress | None = None,
    preview: Preview | None = None,
) -> dict[str, Any]:
    """Read the files, run the network analysis, write the output folder; return the summary.

    Nothing is written to ``out_dir`` before every input has been read and checked.
    ``preview`` is handed on when the analysis takes one.
    """
    from estimator.network_analysis import run_network_analysis

    from .network_outputs import write_network_outputs
    from .pipeline import check_output_folder

    clock = time.perf_counter()
    check_output_folder(Path(out_dir), _output_names([e.name for e in request.detectors]))
    if progress is not None:
        progress("reading", 0.0, 0.0)
    inputs, provenance = load_network_inputs(request)
    reading = time.perf_counter() - clock
    options: dict[str, Any] = {}
    if preview is not None and "preview" in inspect.signature(run_network_analysis).parameters:
        options["preview"] = preview
    result = run_network_analysis(inputs, request.settings, progress=progress, **options)
    result.timings["reading"] = reading
    label = request.label or "-".join(e.name for e in request.detectors)
    summary: dict[str, Any] = write_network_outputs(
        result, Path(out_dir), inputs=provenance, label=label, progress=progress
    )
    return summary
