"""The command line's several-detector side: ``--detector`` entries, ``--sites``, ``sites``.

``chirpcast analyze --detector NAME=STRAIN[,psd=PATH|,asd=PATH] ... --sites FILE`` analyses
a network; ``chirpcast sites [--sites FILE]`` lists the sites and the light-travel time
between each pair. :mod:`service.cli` adds the options and calls the runners here;
errors are raised as :class:`InputError` and turned into exit code 2 there.
"""

from __future__ import annotations

import argparse
import itertools
import sys
from collections.abc import Callable, Iterator, Mapping
from pathlib import Path
from typing import Any

from estimator.analysis import AnalysisSettings
from estimator.errors import InputError
from estimator.sites import light_travel_time

from .network_pipeline import DetectorFiles, NetworkRequest, load_sites

__all__ = [
    "add_detector_options",
    "add_sites_command",
    "network_request",
    "parse_detector_entry",
    "print_network_result",
    "run_network_analyze",
    "run_sites",
]

_SYNTAX = "NAME=STRAIN[,psd=PATH] or NAME=STRAIN[,asd=PATH]"
_KEYS = ("psd", "asd")


def add_detector_options(p: argparse.ArgumentParser) -> None:
    """Add ``--detector`` (repeatable) and ``--sites`` to the ``analyze`` parser."""
    p.add_argument(
        "--detector",
        action="append",
        metavar="NAME=STRAIN[,psd=PATH]",
        help="one detector of a network: its site name, strain file and optionally its "
        "noise spectrum (psd=PATH, or asd=PATH for an amplitude spectrum); repeat per "
        "detector, in place of the positional strain and --psd/--asd",
    )
    p.add_argument(
        "--sites",
        type=Path,
        metavar="FILE",
        help="site file (TOML/JSON: [site.NAME] tables) describing the --detector sites "
        "(default: the shipped invented sites heron, plover, curlew)",
    )


def add_sites_command(sub: Any) -> None:
    """Add ``chirpcast sites [--sites FILE]``."""
    sites = sub.add_parser(
        "sites", help="list the detector sites and the light-travel time between them"
    )
    sites.add_argument(
        "--sites", type=Path, metavar="FILE", help="site file (default: the shipped sites)"
    )


def _entry_error(text: str, message: str) -> InputError:
    return InputError(f"{message}; expected {_SYNTAX}", source=f"--detector {text}",
                      field="detectors")  # fmt: skip


def parse_detector_entry(
    text: str, *, sample_rate: float | None = None, start_time: float | None = None
) -> DetectorFiles:
    """``NAME=STRAIN[,psd=PATH]`` or ``NAME=STRAIN[,asd=PATH]`` as :class:`DetectorFiles`.

    Paths may not hold commas. ``sample_rate`` and ``start_time`` are those of
    ``--sample-rate`` and ``--start-time`` (for one-column text and ``.npy`` strain).
    """
    name, sep, rest = text.partition("=")
    name = name.strip()
    if not sep or not name or not rest.strip():
        raise _entry_error(text, "no NAME=STRAIN found")
    strain, *options = (part.strip() for part in rest.split(","))
    if not strain or strain.partition("=")[0] in _KEYS:
        raise _entry_error(text, "the strain file must come first, right after NAME=")
    spectrum: dict[str, str] = {}
    for option in options:
        key, sep, value = (s.strip() for s in option.partition("="))
        if key not in _KEYS or not sep:
            raise _entry_error(text, f"unknown item {option!r} (known keys: psd, asd)")
        if not value:
            raise _entry_error(text, f"{key}= needs a file")
        if spectrum:
            raise _entry_error(text, "give one noise spectrum per detector (psd= or asd=)")
        spectrum[key] = value
    ((kind, path),) = spectrum.items() if spectrum else (("psd", None),)
    return DetectorFiles(
        name=name,
        strain_path=Path(strain),
        psd_path=Path(path) if path else None,
        asd=kind == "asd",
        sample_rate=sample_rate,
        start_time=start_time,
    )


def network_request(args: argparse.Namespace, settings: AnalysisSettings) -> NetworkRequest | None:
    """The network request the ``analyze`` options describe; ``None`` for one detector."""
    entries: list[str] = args.detector or []
    if not entries:
        if args.sites is not None:
            msg = "a site file describes the sites of --detector entries; add them or drop it"
            raise InputError(msg, source="--sites", field="sites")
        if args.strain is None:
            msg = "no strain file given; give one (one detector) or --detector entries"
            raise InputError(msg, source="analyze", field="strain")
        return None
    clashes = [
        what
        for what, given in (
            (f"the strain file {args.strain}", args.strain is not None),
            ("--psd", args.psd is not None),
            ("--asd", args.asd),
        )
        if given
    ]
    if clashes:
        msg = (
            f"{' and '.join(clashes)} cannot be combined with --detector; give each "
            "detector's files in its entry (--detector NAME=STRAIN,psd=PSD)"
        )
        raise InputError(msg, source="--detector", field="detectors")
    files = tuple(
        parse_detector_entry(e, sample_rate=args.sample_rate, start_time=args.start_time)
        for e in entries
    )
    return NetworkRequest(files, settings, sites_path=args.sites, label=args.label)


def _cli_error(err: InputError) -> InputError:
    """Say a detector's error of the entry that named it: ``--detector NAME=...: ...``."""
    parts = (err.field or "").split(":")
    if len(parts) < 2 or parts[0] != "detector":
        return err
    return InputError(err.message, source=f"--detector {parts[1]}=...", field=err.field)


def run_network_analyze(
    request: NetworkRequest,
    out: Path,
    *,
    progress: Callable[[str, float, float], None] | None = None,
    preview: Callable[[Any], None] | None = None,
) -> dict[str, Any]:
    """Run the network analysis of ``request`` into ``out``; print the result block."""
    from .network_pipeline import analyze_network_files

    try:
        summary = analyze_network_files(request, out, progress=progress, preview=preview)
    except InputError as err:
        raise _cli_error(err) from err
    print_network_result(summary, out)
    return summary


def _walk(node: object, depth: int = 0) -> Iterator[tuple[str, object]]:
    """Every (key, value) of nested mappings, at most four levels down."""
    if depth > 3 or not isinstance(node, Mapping):
        return
    for key, value in node.items():
        yield str(key), value
        yield from _walk(value, depth + 1)


def _sky_area(summary: Mapping[str, Any]) -> float | None:
    """The 90% credible sky area (deg²) wherever the summary keeps it, or ``None``."""
    for key, value in _walk(summary):
        if "area" in key and "90" in key:
            if isinstance(value, Mapping):
                value = value.get("value", value.get("median"))
            if isinstance(value, int | float) and not isinstance(value, bool):
                return float(value)
    return None


def print_network_result(summary: Mapping[str, Any], out: Path) -> None:
    """A short result block: the parameters the summary holds, the sky area, the report."""
    shown = {"chirp_mass": 4, "mass_ratio": 3, "luminosity_distance": 0,
             "inclination": 2, "right_ascension": 2, "declination": 2,
             "coalescence_time": 4, "network_snr": 1, "snr": 1}  # fmt: skip
    params = summary.get("parameters", {})
    detectors = summary.get("detectors")
    names = ", ".join(
        str(d.get("name", "")) if isinstance(d, Mapping) else str(d) for d in detectors
    ) if isinstance(detectors, list) else ""  # fmt: skip
    lines = [
        f"chirpcast: {summary.get('label', '')}: 90% credible intervals "
        "(automated preliminary estimate; not a vetted result)",
        *([f"  {'detectors':<22} {names}"] if names else []),
    ]
    for name, digits in shown.items():
        e = params.get(name) if isinstance(params, Mapping) else None
        if not isinstance(e, Mapping) or not {"median", "lower", "upper"} <= e.keys():
            continue
        lines.append(
            f"  {name:<22} {e['median']:.{digits}f}  "
            f"[{e['lower']:.{digits}f}, {e['upper']:.{digits}f}] {e.get('unit', '')}".rstrip()
        )
    area = _sky_area(summary)
    if area is not None:
        lines.append(f"  {'sky area (90%)':<22} {area:.3g} deg²")
    lines.append(f"report: {out / 'report.html'}")
    sys.stdout.write("\n".join(lines) + "\n")


def run_sites(args: argparse.Namespace) -> int:
    """``chirpcast sites``: each site's geometry, then the light-travel time of each pair."""
    sites, record = load_sites(args.sites)
    source = f"site file {record['file']}" if isinstance(record, dict) else "shipped invented sites"
    lines = [
        f"{len(sites)} sites ({source}); degrees, metres; azimuths clockwise from north",
        f"  {'name':<12} {'latitude':>10} {'longitude':>11} {'elevation':>10} "
        f"{'arm 1 az':>9} {'arm 2 az':>9} {'tilts':>13}",
    ]
    for s in sites.values():
        lines.append(
            f"  {s.name:<12} {s.latitude:>10.4f} {s.longitude:>11.4f} {s.elevation:>10.1f} "
            f"{s.arm1_azimuth:>9.2f} {s.arm2_azimuth:>9.2f} "
            f"{s.arm1_tilt:>6.3f} {s.arm2_tilt:>6.3f}"
        )
    if len(sites) > 1:
        lines.append("light-travel time between sites (separation / c):")
    for a, b in itertools.combinations(sites.values(), 2):
        lines.append(f"  {a.name} - {b.name}: {1e3 * light_travel_time(a, b):.3f} ms")
    sys.stdout.write("\n".join(lines) + "\n")
    return 0
