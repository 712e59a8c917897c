"""``chirpcast simulate``: write a drill data set (noise from a PSD plus an injection)."""

from __future__ import annotations

import argparse
import json
import shlex
import shutil
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from estimator.data import NoiseSpectrum, StrainSegment
from estimator.errors import InputError
from estimator.io import read_psd
from estimator.simulate import (
    TIME_DOMAIN,
    Injection,
    design_spectrum,
    injection_strain,
    simulate_segment,
)
from estimator.spectrum import interpolate_psd

__all__ = [
    "NETWORK_ONLY",
    "add_simulate_parser",
    "drill_coalescence_time",
    "drill_f_start",
    "drill_spectrum",
    "grid_options",
    "noise_record",
    "optimal_snr",
    "simulate_files",
    "write_folder",
    "write_psd",
    "write_strain",
]

#: Files a drill folder may hold (an analysis of it goes into analysis/).
DRILL_FILES = {"strain.csv", "strain.npz", "strain.npy", "psd.csv", "injection.json", "analysis"}
#: ``simulate`` options that only a network drill (``--network``) takes.
NETWORK_ONLY = ("sites", "right_ascension", "declination", "inclination", "polarization")


def optimal_snr(
    injection: Injection,
    spectrum: NoiseSpectrum,
    *,
    duration: float,
    sample_rate: float,
    start_time: float,
    f_low: float,
) -> float:
    """Optimal SNR ``sqrt(<h|h>)`` of ``injection`` in the band ``[f_low, 0.9 Nyquist]``.

    ``<h|h> = 4 df sum |h(f)|^2 / S(f)`` (Cutler & Flanagan 1994, Eq. 2.4) of the
    injected waveform itself (its model, spins and roll-on), on the segment's grid.
    """
    n = round(duration * sample_rate)
    f_high = min(0.45 * sample_rate, float(spectrum.frequencies[-1]))
    h = injection_strain(
        injection, n_samples=n, sample_rate=sample_rate, start_time=start_time,
        f_start=max(f_low - 5.0, 1.0),
    )  # fmt: skip
    f = np.arange(h.size) * (sample_rate / n)
    band = (f >= f_low) & (f <= f_high)
    psd = interpolate_psd(spectrum, f[band])
    return float(np.sqrt(4.0 * (sample_rate / n) * np.sum(np.abs(h[band]) ** 2 / psd)))


def write_strain(segment: StrainSegment, path: Path, fmt: str) -> Path:
    """Write a segment as two-column CSV (GPS time, strain), ``.npz`` or ``.npy``."""
    if fmt == "csv":
        path = path.with_suffix(".csv")
        table = np.column_stack([segment.times, segment.strain])
        np.savetxt(
            path, table, delimiter=",", fmt=["%.6f", "%.10e"], header="time,strain", comments=""
        )
    elif fmt == "npz":
        path = path.with_suffix(".npz")
        np.savez(
            path,
            strain=segment.strain,
            sample_rate=segment.sample_rate,
            start_time=segment.start_time,
        )
    else:
        path = path.with_suffix(".npy")
        np.save(path, segment.strain)
    return path


def write_psd(spectrum: NoiseSpectrum, path: Path) -> Path:
    """Write a spectrum as two-column CSV (frequency Hz, one-sided PSD 1/Hz)."""
    np.savetxt(
        path,
        np.column_stack([spectrum.frequencies, spectrum.psd]),
        delimiter=",",
        fmt="%.8e",
        header="frequency_hz,psd_per_hz",
        comments="",
    )
    return path


def add_simulate_parser(sub: Any) -> None:
    """Add ``chirpcast simulate`` (one detector, or a network with ``--network``)."""
    sim = sub.add_parser(
        "simulate", help="make a drill data set: coloured Gaussian noise plus an injected inspiral"
    )
    sim.add_argument("--out", type=Path, required=True, help="output folder")
    sim.add_argument(
        "--psd",
        type=Path,
        help="noise spectrum to colour the noise with "
        "(default: an analytic design-sensitivity fit)",
    )
    sim.add_argument("--asd", action="store_true", help="--psd holds an amplitude spectrum")
    sim.add_argument("--duration", type=float, default=16.0, help="segment length, s (16)")
    sim.add_argument("--sample-rate", type=float, default=4096.0, help="Hz (4096)")
    sim.add_argument("--start-time", type=float, default=1_000_000_000.0, help="GPS s")
    sim.add_argument(
        "--coalescence-time",
        type=float,
        help="GPS s, at the geocentre for --network (default: 2 s before the segment ends)",
    )
    sim.add_argument("--chirp-mass", type=float, default=20.0, help="detector frame, Msun")
    sim.add_argument("--mass-ratio", type=float, default=0.7, help="m2/m1 <= 1")
    sim.add_argument("--distance", type=float, default=500.0, help="luminosity distance, Mpc")
    sim.add_argument(
        "--orientation-factor",
        type=float,
        help="one detector: w in (0, 1], effective distance = distance / w (0.7)",
    )
    sim.add_argument("--snr", type=float, help="rescale the distance to this optimal (network) SNR")
    sim.add_argument("--phase", type=float, default=1.0, help="coalescence phase, rad")
    sim.add_argument("--f-low", type=float, default=20.0, help="band for --snr, Hz (20)")
    sim.add_argument(
        "--format",
        choices=("csv", "npz", "npy"),
        default="csv",
        help="strain file format (csv: two columns, GPS time and strain)",
    )
    sim.add_argument("--seed", type=int, default=1, help="noise seed (1)")
    sim.add_argument("--spin1", type=float, default=0.0, help="aligned spin of the heavier body")
    sim.add_argument("--spin2", type=float, default=0.0, help="aligned spin of the lighter body")
    sim.add_argument(
        "--waveform",
        choices=("merger", "taylorf2", *TIME_DOMAIN),
        default="merger",
        help="injected waveform: merger (default), taylorf2 (ends at the ISCO), timedomain "
        "(an independent waveform integrated from the PN energy and flux to its extremum, "
        "plus a ringdown) or timedomain-isco (the same, ended at the ISCO)",
    )
    from .network_drill import add_network_drill_options

    add_network_drill_options(sim)


def write_folder(out: Path, allowed: set[str], fill: Callable[[Path], None]) -> None:
    """Make the folder ``out`` with ``fill(tmp)``, all or nothing.

    An earlier folder holding only ``allowed`` names is replaced; anything else there
    is refused (:func:`service.pipeline.check_output_folder`).
    """
    from .pipeline import check_output_folder  # not at import: it loads the plotting

    check_output_folder(out, allowed)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    tmp.chmod(0o755)  # mkdtemp makes it private; the output is an ordinary folder
    try:
        fill(tmp)
        if out.exists():
            shutil.rmtree(out)  # an earlier drill set (checked above)
        tmp.rename(out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def drill_spectrum(args: argparse.Namespace) -> NoiseSpectrum:
    """The spectrum ``--psd`` names, or the analytic design fit up to the sample rate."""
    if args.psd:
        return read_psd(args.psd, asd=args.asd)
    return design_spectrum(f_max=max(4096.0, args.sample_rate))


def drill_coalescence_time(args: argparse.Namespace) -> float:
    """Check ``--mass-ratio`` and ``--coalescence-time``; return the latter (GPS s)."""
    if not 0.0 < args.mass_ratio <= 1.0:
        msg = f"--mass-ratio {args.mass_ratio:g} must be in (0, 1] (m2/m1 with m2 <= m1)"
        raise InputError(msg, field="mass_ratio")
    tc = args.coalescence_time
    if tc is None:
        tc = args.start_time + args.duration - 2.0
    if not args.start_time + 1.0 < tc < args.start_time + args.duration - 0.5:
        msg = (
            f"--coalescence-time {tc:.3f} must lie inside the segment [{args.start_time:.3f}, "
            f"{args.start_time + args.duration:.3f}] with 1 s before and 0.5 s after it"
        )
        raise InputError(msg, field="coalescence_time")
    return float(tc)


def drill_f_start(args: argparse.Namespace) -> float:
    """Frequency the injected signal starts at, Hz (10, or ``--f-low`` when lower)."""
    return float(min(args.f_low, 10.0)) if args.f_low > 0 else 10.0


def simulate_files(args: argparse.Namespace) -> dict[str, Any]:
    """Make the drill data set the ``simulate`` options describe; return what was written."""
    network_only = [
        f"--{k.replace('_', '-')}" for k in NETWORK_ONLY if getattr(args, k, None) is not None
    ]
    if network_only:
        msg = f"{', '.join(network_only)} describe a network drill; add --network NAME,NAME,..."
        raise InputError(msg, field=network_only[0].lstrip("-"))
    spectrum = drill_spectrum(args)
    w = 0.7 if args.orientation_factor is None else args.orientation_factor
    if not 0.0 < w <= 1.0:
        msg = f"--orientation-factor {w:g} must be in (0, 1]"
        raise InputError(msg, field="orientation_factor")
    tc = drill_coalescence_time(args)
    distance = args.distance
    for name in ("spin1", "spin2"):
        value = getattr(args, name)
        if not (np.isfinite(value) and abs(value) < 1.0):
            msg = f"--{name} {value:g} must lie strictly between -1 and 1"
            raise InputError(msg, field=name)
    extra = {"spin1": args.spin1, "spin2": args.spin2, "model": args.waveform}
    injection = Injection(args.chirp_mass, args.mass_ratio, distance / w, tc, args.phase, **extra)
    snr = optimal_snr(
        injection,
        spectrum,
        duration=args.duration,
        sample_rate=args.sample_rate,
        start_time=args.start_time,
        f_low=args.f_low,
    )
    if args.snr is not None:
        distance *= snr / args.snr
        injection = Injection(
            args.chirp_mass, args.mass_ratio, distance / w, tc, args.phase, **extra
        )
        snr = args.snr
    rng = np.random.default_rng(args.seed)
    segment = simulate_segment(
        spectrum,
        duration=args.duration,
        sample_rate=args.sample_rate,
        start_time=args.start_time,
        rng=rng,
        injection=injection,
        f_start=drill_f_start(args),
    )
    truth = {
        "chirp_mass": injection.chirp_mass,
        "mass_ratio": injection.mass_ratio,
        "luminosity_distance": distance,
        "orientation_factor": w,
        "effective_distance": injection.effective_distance,
        "coalescence_time": injection.coalescence_time,
        "phase": injection.phase,
        "spin1": injection.spin1,
        "spin2": injection.spin2,
        "waveform": injection.model,
        "optimal_snr": snr,
        "units": {
            "masses": "Msun (detector frame)",
            "distances": "Mpc",
            "coalescence_time": "GPS s",
        },
        "noise": noise_record(args, spectrum),
    }

    def fill(tmp: Path) -> None:
        write_strain(segment, tmp / "strain", args.format)
        write_psd(spectrum, tmp / "psd.csv")
        (tmp / "injection.json").write_text(json.dumps(truth, indent=2) + "\n", encoding="utf-8")

    out = Path(args.out)
    write_folder(out, DRILL_FILES, fill)
    strain_final = out / f"strain.{args.format}"
    command = ["chirpcast", "analyze", str(strain_final), *grid_options(args),
               "--psd", str(out / "psd.csv"), "--trigger-time", f"{tc:.4f}",
               "--out", str(out / "analysis")]  # fmt: skip
    return {
        "files": [strain_final, out / "psd.csv", out / "injection.json"],
        "command": shlex.join(command),
        "truth": truth,
    }


def noise_record(args: argparse.Namespace, spectrum: NoiseSpectrum) -> dict[str, Any]:
    """How the drill's noise was made, for its truth file."""
    return {
        "seed": args.seed,
        "spectrum": spectrum.source,
        "duration": args.duration,
        "sample_rate": args.sample_rate,
        "start_time": args.start_time,
    }


def grid_options(args: argparse.Namespace) -> list[str]:
    """``--sample-rate`` and ``--start-time`` for ``.npy`` strain, which states neither."""
    if args.format != "npy":
        return []
    return ["--sample-rate", f"{args.sample_rate:g}", "--start-time", f"{args.start_time:.6f}"]
