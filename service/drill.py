"""``chirpcast simulate``: write a drill data set (noise from a PSD plus an injection)."""

from __future__ import annotations

import argparse
import json
import shlex
import shutil
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from estimator.conditioning import condition
from estimator.data import NoiseSpectrum, StrainSegment
from estimator.errors import InputError
from estimator.io import read_psd
from estimator.likelihood import ExactLikelihood
from estimator.simulate import Injection, design_spectrum, simulate_segment

from .pipeline import check_output_folder

__all__ = ["optimal_snr", "simulate_files", "write_psd", "write_strain"]

#: Files a drill folder may hold (an analysis of it goes into analysis/).
DRILL_FILES = {"strain.csv", "strain.npz", "strain.npy", "psd.csv", "injection.json", "analysis"}


def optimal_snr(
    injection: Injection,
    spectrum: NoiseSpectrum,
    *,
    duration: float,
    sample_rate: float,
    start_time: float,
    f_low: float,
) -> float:
    """Optimal SNR ``sqrt(<h|h>)`` of ``injection`` in the band ``[f_low, 0.9 Nyquist]``."""
    blank = StrainSegment(np.zeros(round(duration * sample_rate)), sample_rate, start_time)
    f_high = min(0.45 * sample_rate, float(spectrum.frequencies[-1]))
    data = condition(blank, spectrum, f_low=f_low, f_high=f_high)
    like = ExactLikelihood([data], injection.coalescence_time)
    params = {
        "chirp_mass": np.array([injection.chirp_mass]),
        "mass_ratio": np.array([injection.mass_ratio]),
        "effective_distance": np.array([injection.effective_distance]),
        "coalescence_time": np.array([0.0]),
    }
    _, hh = like.overlaps(params)
    return float(np.sqrt(hh.sum()))


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


def simulate_files(args: argparse.Namespace) -> dict[str, Any]:
    """Make the drill data set the ``simulate`` options describe; return what was written."""
    spectrum = (
        read_psd(args.psd, asd=args.asd)
        if args.psd
        else design_spectrum(f_max=max(4096.0, args.sample_rate))
    )
    if not 0.0 < args.orientation_factor <= 1.0:
        msg = f"--orientation-factor {args.orientation_factor:g} must be in (0, 1]"
        raise InputError(msg, field="orientation_factor")
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
    distance = args.distance
    injection = Injection(
        args.chirp_mass, args.mass_ratio, distance / args.orientation_factor, tc, args.phase
    )
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
            args.chirp_mass, args.mass_ratio, distance / args.orientation_factor, tc, args.phase
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
        f_start=min(args.f_low, 10.0) if args.f_low > 0 else 10.0,
    )
    out = Path(args.out)
    check_output_folder(out, DRILL_FILES)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    tmp.chmod(0o755)  # mkdtemp makes it private; the output is an ordinary folder
    try:
        strain_path = write_strain(segment, tmp / "strain", args.format)
        write_psd(spectrum, tmp / "psd.csv")
        truth = {
            "chirp_mass": injection.chirp_mass,
            "mass_ratio": injection.mass_ratio,
            "luminosity_distance": distance,
            "orientation_factor": args.orientation_factor,
            "effective_distance": injection.effective_distance,
            "coalescence_time": injection.coalescence_time,
            "phase": injection.phase,
            "optimal_snr": snr,
            "units": {
                "masses": "Msun (detector frame)",
                "distances": "Mpc",
                "coalescence_time": "GPS s",
            },
            "noise": {
                "seed": args.seed,
                "spectrum": spectrum.source,
                "duration": args.duration,
                "sample_rate": args.sample_rate,
                "start_time": args.start_time,
            },
        }
        (tmp / "injection.json").write_text(json.dumps(truth, indent=2) + "\n", encoding="utf-8")
        if out.exists():
            shutil.rmtree(out)  # an earlier drill set (checked above)
        tmp.rename(out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    strain_final = out / strain_path.name
    command = [
        "chirpcast",
        "analyze",
        str(strain_final),
        "--psd",
        str(out / "psd.csv"),
        "--trigger-time",
        f"{tc:.4f}",
        "--out",
        str(out / "analysis"),
    ]
    if args.format == "npy":
        command[3:3] = [
            "--sample-rate",
            f"{args.sample_rate:g}",
            "--start-time",
            f"{args.start_time:.6f}",
        ]
    return {
        "files": [strain_final, out / "psd.csv", out / "injection.json"],
        "command": shlex.join(command),
        "truth": truth,
    }
