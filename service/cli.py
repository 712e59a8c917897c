"""The ``chirpcast`` command line.

``chirpcast analyze`` runs the main job on a strain file (or on a network of
detectors, one ``--detector NAME=STRAIN[,psd=PATH]`` each: :mod:`service.network_args`),
``chirpcast simulate`` makes a drill data set (``--network`` for several sites),
``chirpcast sites`` lists the detector sites, ``chirpcast demo`` analyses the shipped
demo event, ``chirpcast serve`` runs the web service and ``chirpcast keys add`` makes an
API key.
Exit codes: 0 success, 2 bad input (one clear line on stderr), 1 internal error.
"""

from __future__ import annotations

import argparse
import json
import logging
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from estimator import __version__
from estimator.analysis import AnalysisSettings
from estimator.errors import InputError
from estimator.models import MODEL_CHOICES

from .commands import COMMANDS, add_commands
from .drill import add_simulate_parser
from .network_args import (
    add_detector_options,
    add_sites_command,
    network_request,
    run_network_analyze,
    run_sites,
)

__all__ = ["main"]

log = logging.getLogger("chirpcast")

#: Where the demo event lives (next to the packages in a source checkout).
DEMO_DIR = Path(__file__).resolve().parents[1] / "demo_data"

EXIT_OK, EXIT_INTERNAL, EXIT_INPUT = 0, 1, 2


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line and exit code 2."""

    def error(self, message: str) -> Any:
        self.exit(EXIT_INPUT, f"chirpcast: error: {message} (see '{self.prog} --help')\n")


class _ProgressBar:
    """A tqdm bar on stderr driven by the analysis' (stage, fraction, total) reports."""

    def __init__(self, enabled: bool) -> None:
        self._bar: Any = None
        if enabled:
            from tqdm import tqdm

            self._bar = tqdm(
                total=100,
                file=sys.stderr,
                unit="%",
                leave=True,
                bar_format="{desc:<22} {percentage:3.0f}%|{bar}| {elapsed}",
            )

    def __call__(self, stage: str, fraction: float, total: float) -> None:
        if self._bar is None:
            return
        self._bar.set_description_str(stage, refresh=False)
        target = round(100 * min(max(total, 0.0), 1.0))
        if target > self._bar.n:
            self._bar.update(target - self._bar.n)
        else:
            self._bar.refresh()

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()

    def preview(self, fisher: Any) -> None:
        """Print the Fisher-matrix first look above the bar (nothing when it is off)."""
        if self._bar is None:
            return
        from .formatting import format_uncertain

        names = {
            "chirp_mass": "chirp mass",
            "symmetric_mass_ratio": "eta",
            "coalescence_time": "t_c - trigger",
            "effective_distance": "effective distance",
        }
        parts = []
        for name, entry in fisher.to_dict()["parameters"].items():
            shown = format_uncertain(entry["value"], entry["sigma"])
            unit = f" {entry['unit']}" if entry["unit"] else ""
            parts.append(f"{names.get(name, name)} {shown['value']} ± {shown['sigma']}{unit}")
        self._bar.write(
            f"first look (Fisher matrix, optimal SNR {fisher.snr:.1f}): " + ", ".join(parts),
            file=sys.stderr,
        )


def _add_analysis_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "strain",
        type=Path,
        nargs="?",
        help="strain file: text/CSV (time, strain or strain), "
        ".npy or .npz (strain, sample_rate, start_time); for several detectors "
        "use --detector instead",
    )
    p.add_argument(
        "--psd",
        type=Path,
        help="noise spectrum: text/CSV (frequency Hz, one-sided "
        "PSD 1/Hz); estimated from the segment with Welch's method when absent",
    )
    p.add_argument(
        "--asd",
        action="store_true",
        help="the spectrum's second column is an amplitude spectral density",
    )
    p.add_argument("--trigger-time", type=float, required=True, help="GPS time of the candidate")
    p.add_argument("--sample-rate", type=float, help="Hz, for one-column text and .npy strain")
    p.add_argument(
        "--start-time",
        type=float,
        help="GPS s of the first sample, for one-column text and .npy strain",
    )
    p.add_argument(
        "--chirp-mass-guess",
        type=float,
        help="detector-frame chirp mass (Msun) to search around (±10%%)",
    )
    p.add_argument("--f-low", type=float, default=20.0, help="low end of the band, Hz (20)")
    p.add_argument(
        "--f-high",
        type=float,
        help="high end of the band, Hz (default: 90%% of "
        "Nyquist or the spectrum's top, whichever is lower)",
    )
    p.add_argument(
        "--chirp-mass-range",
        type=float,
        nargs=2,
        metavar=("LOW", "HIGH"),
        default=(0.4, 80.0),
        help="prior on detector-frame chirp mass, Msun",
    )
    p.add_argument(
        "--mass-ratio-min",
        type=float,
        default=0.1,
        help="smallest mass ratio m2/m1 in the prior (0.1)",
    )
    p.add_argument(
        "--component-mass-range",
        type=float,
        nargs=2,
        metavar=("LOW", "HIGH"),
        default=(0.5, 150.0),
        help="prior on each detector-frame mass, Msun",
    )
    p.add_argument(
        "--distance-max",
        type=float,
        default=10_000.0,
        help="largest luminosity distance in the prior, Mpc (10000)",
    )
    p.add_argument(
        "--time-window",
        type=float,
        default=0.1,
        help="half-width of the coalescence-time prior around the trigger, s (0.1)",
    )
    p.add_argument(
        "--model",
        choices=MODEL_CHOICES,
        default="auto",
        help="waveform model: merger (inspiral continued through merger and ringdown), "
        "taylorf2 (inspiral ending at the ISCO), auto (merger where it matters; default)",
    )
    p.add_argument(
        "--spin-max",
        type=float,
        default=0.99,
        help="largest aligned-spin magnitude, uniform prior on each spin (0.99; 0.05 is a "
        "common neutron-star choice; 0 fixes the spins at zero)",
    )
    p.add_argument(
        "--no-gating",
        dest="gating",
        action="store_false",
        help="do not gate loud short glitches away from the signal",
    )
    p.add_argument("--seed", type=int, help="random seed (drawn and recorded when absent)")
    p.add_argument("--label", default="", help="a name for the report")
    p.add_argument("--out", type=Path, required=True, help="output folder")
    add_detector_options(p)


def _parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="chirpcast",
        description="Rapid Bayesian parameter estimation of a detected compact-binary inspiral.",
    )
    parser.add_argument("--version", action="version", version=f"chirpcast {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks of internal errors")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    analyze = sub.add_parser("analyze", help="estimate the parameters of a candidate")
    _add_analysis_options(analyze)

    demo = sub.add_parser("demo", help="analyse the shipped demo event")
    demo.add_argument(
        "--out", type=Path, default=Path("chirpcast-demo"), help="output folder (./chirpcast-demo)"
    )
    demo.add_argument("--seed", type=int, default=None, help="random seed (the demo's own)")

    add_simulate_parser(sub)
    add_sites_command(sub)
    add_commands(sub, _Parser)
    return parser


def _settings(args: argparse.Namespace) -> AnalysisSettings:
    return AnalysisSettings(
        trigger_time=args.trigger_time,
        f_low=args.f_low,
        f_high=args.f_high,
        chirp_mass_guess=args.chirp_mass_guess,
        chirp_mass_range=tuple(args.chirp_mass_range),
        mass_ratio_range=(args.mass_ratio_min, 1.0),
        component_mass_range=tuple(args.component_mass_range),
        distance_max=args.distance_max,
        time_window=args.time_window,
        seed=args.seed,
        spin_max=args.spin_max,
        model=args.model,
        gating=args.gating,
    )


def _print_result(summary: dict[str, Any], out: Path) -> None:
    p = summary["parameters"]
    p_ns = summary["probabilities"]["secondary_below_3_msun"]

    def row(name: str, digits: int) -> str:
        e = p[name]
        return (
            f"  {name:<22} {e['median']:.{digits}f}  "
            f"[{e['lower']:.{digits}f}, {e['upper']:.{digits}f}] {e['unit']}"
        )

    lines = [
        f"chirpcast: {summary['label']}: 90% credible intervals "
        "(automated preliminary estimate; not a vetted result)",
        row("chirp_mass", 4),
        row("mass_ratio", 3),
        row("source_primary_mass", 2),
        row("source_secondary_mass", 2),
        row("luminosity_distance", 0),
        row("coalescence_time", 4),
        row("snr", 1),
        f"  P(lighter component < 3 Msun) = {p_ns:.2f}",
        f"report: {out / 'report.html'}",
    ]
    sys.stdout.write("\n".join(lines) + "\n")


def _run_analyze(args: argparse.Namespace) -> int:
    from .pipeline import AnalysisRequest, analyze_files

    network = network_request(args, _settings(args))
    if network is not None:
        bar = _ProgressBar(not args.quiet)
        try:
            run_network_analyze(network, args.out, progress=bar)
        finally:
            bar.close()
        return EXIT_OK
    request = AnalysisRequest(
        strain_path=args.strain,
        psd_path=args.psd,
        asd=args.asd,
        settings=_settings(args),
        sample_rate=args.sample_rate,
        start_time=args.start_time,
        label=args.label,
    )
    bar = _ProgressBar(not args.quiet)
    try:
        summary = analyze_files(request, args.out, progress=bar, preview=bar.preview)
    finally:
        bar.close()
    _print_result(summary, args.out)
    return EXIT_OK


def _run_demo(args: argparse.Namespace) -> int:
    spec = json.loads((DEMO_DIR / "event.json").read_text(encoding="utf-8"))
    argv = [
        str(DEMO_DIR / spec["strain"]),
        "--psd",
        str(DEMO_DIR / spec["psd"]),
        "--trigger-time",
        repr(spec["trigger_time"]),
        "--label",
        spec["label"],
        "--out",
        str(args.out),
        "--seed",
        str(args.seed if args.seed is not None else spec["seed"]),
    ]
    ns = _parser().parse_args(["analyze", *argv])
    ns.quiet, ns.debug = args.quiet, args.debug
    return _run_analyze(ns)


def _run_simulate(args: argparse.Namespace) -> int:
    from .drill import simulate_files
    from .network_drill import simulate_network_files

    written = simulate_network_files(args) if args.network else simulate_files(args)
    sys.stdout.write("wrote " + ", ".join(str(p) for p in written["files"]) + "\n")
    sys.stdout.write("analyse it with:\n  " + written["command"] + "\n")
    return EXIT_OK


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``chirpcast`` command; returns the exit code."""
    args = _parser().parse_args(argv)
    logging.basicConfig(
        level=logging.DEBUG if args.debug else logging.WARNING,
        format="chirpcast: %(levelname)s: %(message)s",
    )
    commands = {
        "analyze": _run_analyze,
        "demo": _run_demo,
        "simulate": _run_simulate,
        "sites": run_sites,
        **COMMANDS,
    }
    try:
        return commands[args.command](args)
    except InputError as err:
        sys.stderr.write(f"chirpcast: error: {err}\n")
        return EXIT_INPUT
    except KeyboardInterrupt:
        sys.stderr.write("chirpcast: interrupted\n")
        return 130
    except Exception as err:
        if args.debug:
            log.exception("internal error")
        sys.stderr.write(
            f"chirpcast: internal error: {type(err).__name__}: {err} "
            "(run with --debug for the traceback)\n"
        )
        return EXIT_INTERNAL


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
