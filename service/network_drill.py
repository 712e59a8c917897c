"""``chirpcast simulate --network A,B,C``: a network drill.

The same inspiral reaches every site with that site's delay from the geocentre and its
antenna response, in independent Gaussian noise coloured by one spectrum
(:func:`estimator.simulate.simulate_network`). The folder holds ``NAME-strain.EXT`` and
``NAME-psd.csv`` per site and ``truth.json``; the command that analyses it is returned.
"""

from __future__ import annotations

import argparse
import json
import math
import re
import shlex
from pathlib import Path
from typing import Any

import numpy as np

from estimator.errors import InputError
from estimator.network_model import antenna_factor
from estimator.precession import j2000_to_of_date
from estimator.simulate import Injection, NetworkInjection, simulate_network
from estimator.sites import Site, gps_to_gmst

from .drill import (
    DRILL_FILES,
    drill_coalescence_time,
    drill_f_start,
    drill_spectrum,
    grid_options,
    noise_record,
    optimal_snr,
    write_folder,
    write_psd,
    write_strain,
)
from .network_pipeline import load_sites

__all__ = ["DEFAULT_ANGLES_DEG", "add_network_drill_options", "simulate_network_files"]

#: Sky position and orientation of a network drill when not given, deg (our choice).
DEFAULT_ANGLES_DEG = {
    "right_ascension": 150.0,
    "declination": -30.0,
    "inclination": 30.0,
    "polarization": 20.0,
}
#: Files of an earlier network drill, which a new one may replace.
_DRILL_NAME = re.compile(r"[A-Za-z0-9_-]{1,32}-(strain\.(csv|npz|npy)|psd\.csv)")


def add_network_drill_options(sim: argparse.ArgumentParser) -> None:
    """Add ``--network``, ``--sites`` and the sky and orientation angles to ``simulate``."""
    sim.add_argument(
        "--network",
        metavar="NAME,NAME,...",
        help="make a network drill for these sites (shipped: heron, plover, curlew)",
    )
    sim.add_argument(
        "--sites", type=Path, metavar="FILE", help="site file the --network names come from"
    )
    for name, what in (
        ("right-ascension", "right ascension"),
        ("declination", "declination"),
        ("inclination", "inclination of the orbit to the line of sight"),
        ("polarization", "polarisation angle"),
    ):
        default = DEFAULT_ANGLES_DEG[name.replace("-", "_")]
        sim.add_argument(
            f"--{name}", type=float, metavar="DEG", help=f"network drill: {what}, deg ({default:g})"
        )


def _fail(message: str, field: str) -> InputError:
    return InputError(message, source=f"--{field.replace('_', '-')}", field=field)


def _network_sites(args: argparse.Namespace) -> tuple[list[Site], str | dict[str, Any]]:
    known, record = load_sites(args.sites)
    names = [n.strip() for n in str(args.network).split(",")]
    if not all(names):
        raise _fail(f"{args.network!r} holds an empty name; give NAME,NAME,...", "network")
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        raise _fail(f"{', '.join(twice)} given twice; name each site once", "network")
    unknown = [n for n in names if n not in known]
    if unknown:
        where = "the site file" if args.sites else "the shipped sites"
        msg = (
            f"{', '.join(unknown)}: not a site of {where} (known: {', '.join(sorted(known))}); "
            "use those names or describe the site in a site file (--sites)"
        )
        raise _fail(msg, "network")
    return [known[n] for n in names], record


def _angles(args: argparse.Namespace) -> dict[str, float]:
    """The four angles in degrees, checked."""
    if args.orientation_factor is not None:
        msg = "a network drill sets the orientation with --inclination and --polarization"
        raise _fail(msg, "orientation_factor")
    deg = {
        k: float(v if (v := getattr(args, k)) is not None else d)
        for k, d in DEFAULT_ANGLES_DEG.items()
    }
    for key, low, high in (("declination", -90.0, 90.0), ("inclination", 0.0, 180.0)):
        if not low <= deg[key] <= high:
            raise _fail(f"{deg[key]:g} deg is outside [{low:g}, {high:g}] deg", key)
    for key, value in deg.items():
        if not math.isfinite(value):
            raise _fail(f"{value} is not a finite angle in degrees", key)
    return deg


def simulate_network_files(args: argparse.Namespace) -> dict[str, Any]:
    """Make the network drill the ``simulate`` options describe; return what was written.

    The network's optimal SNR is ``sqrt(sum_I rho_I^2)`` over the sites (independent
    noise: Finn 1992, PRD 46, 5236, Sec. II), ``rho_I = |C_I| rho_opt``, with ``C_I`` the
    site's antenna factor (:func:`estimator.network_model.antenna_factor`) and ``rho_opt``
    the SNR of an optimally oriented source overhead at the same distance
    (:func:`service.drill.optimal_snr`); ``--snr`` scales the distance by
    ``rho / target`` (the amplitude goes as 1/distance).
    """
    sites, site_record = _network_sites(args)
    deg = _angles(args)
    spectrum = drill_spectrum(args)
    tc = drill_coalescence_time(args)
    out = Path(args.out)
    if "," in str(out):
        raise _fail(f"{out} holds a comma, which --detector entries cannot; rename it", "out")
    gmst = gps_to_gmst(tc)
    # The options are J2000, like the report; the model works in coordinates of date.
    ra_j2000, dec_j2000 = math.radians(deg["right_ascension"]), math.radians(deg["declination"])
    ra_date, dec_date = j2000_to_of_date(np.array([ra_j2000]), np.array([dec_j2000]), tc)
    ra, dec = float(ra_date[0]), float(dec_date[0])
    iota, psi = math.radians(deg["inclination"]), math.radians(deg["polarization"])
    factors, delays, patterns = [], [], []
    for site in sites:
        fp, fc = site.antenna_pattern(ra, dec, psi, gmst)
        patterns.append((float(fp), float(fc)))
        factors.append(
            abs(complex(antenna_factor(np.asarray(fp), np.asarray(fc), np.asarray(iota))))
        )
        delays.append(float(site.time_delay(ra, dec, gmst)))
    distance = float(args.distance)
    for key, value in (("distance", distance), ("snr", args.snr)):
        if value is not None and not (math.isfinite(value) and value > 0):
            raise _fail(f"{value:g} is not a positive number", key)
    rho_opt = optimal_snr(
        # The network model is TaylorF2 without spins (simulate_network injects it).
        Injection(args.chirp_mass, args.mass_ratio, distance, tc, args.phase, model="taylorf2"),
        spectrum,
        duration=args.duration,
        sample_rate=args.sample_rate,
        start_time=args.start_time,
        f_low=args.f_low,
    )
    snrs = [c * rho_opt for c in factors]
    network = math.sqrt(sum(s * s for s in snrs))
    if args.snr is not None:
        if network <= 0.0:
            raise _fail("the source is in a blind spot of every site; move it", "snr")
        scale = network / args.snr
        distance, snrs, network = distance * scale, [s / scale for s in snrs], args.snr
    injection = NetworkInjection(args.chirp_mass, args.mass_ratio, distance, iota, psi, ra,
                                 dec, tc, args.phase)  # fmt: skip
    segments = simulate_network(
        injection,
        list(sites),
        [spectrum] * len(sites),
        gmst=gmst,
        duration=args.duration,
        sample_rate=args.sample_rate,
        start_time=args.start_time,
        rng=np.random.default_rng(args.seed),
        f_start=drill_f_start(args),
    )
    truth = {
        "chirp_mass": args.chirp_mass,
        "mass_ratio": args.mass_ratio,
        "luminosity_distance": distance,
        "inclination": iota,
        "polarization_angle": psi,
        "right_ascension": ra_j2000,
        "declination": dec_j2000,
        "sky_frame": "J2000 (right_ascension, declination and angles_deg); the simulation "
        "used the same direction in coordinates of date",
        "right_ascension_of_date": ra,
        "declination_of_date": dec,
        "coalescence_time": tc,
        "phase": args.phase,
        "network_optimal_snr": network,
        "angles_deg": deg,
        "gmst": gmst,
        "detectors": {
            s.name: {
                "optimal_snr": snr,
                "time_delay": delay,
                "arrival_time": tc + delay,
                "f_plus": fp,
                "f_cross": fc,
            }
            for s, snr, delay, (fp, fc) in zip(sites, snrs, delays, patterns, strict=True)
        },
        "sites": site_record,
        "units": {
            "masses": "Msun (detector frame)",
            "luminosity_distance": "Mpc",
            "angles": "rad (angles_deg: deg)",
            "coalescence_time": "GPS s at the geocentre",
            "time_delay": "s, site minus geocentre",
        },
        "noise": {**noise_record(args, spectrum), "independent_per_site": True},
    }

    def fill(tmp: Path) -> None:
        for segment in segments:
            write_strain(segment, tmp / f"{segment.detector}-strain", args.format)
            write_psd(spectrum, tmp / f"{segment.detector}-psd.csv")
        (tmp / "truth.json").write_text(json.dumps(truth, indent=2) + "\n", encoding="utf-8")

    allowed = DRILL_FILES | {"truth.json"}
    if out.is_dir():
        allowed |= {p.name for p in out.iterdir() if _DRILL_NAME.fullmatch(p.name)}
    write_folder(out, allowed, fill)
    files = [out / f"{s.name}-{kind}" for s in sites
             for kind in (f"strain.{args.format}", "psd.csv")]  # fmt: skip
    command = ["chirpcast", "analyze"]
    for s in sites:
        command += ["--detector", f"{s.name}={out / f'{s.name}-strain.{args.format}'},"
                    f"psd={out / f'{s.name}-psd.csv'}"]  # fmt: skip
    if args.sites is not None:
        command += ["--sites", str(args.sites)]
    command += [*grid_options(args), "--trigger-time", f"{tc:.4f}",
                "--out", str(out / "analysis")]  # fmt: skip
    return {"files": [*files, out / "truth.json"], "command": shlex.join(command),
            "truth": truth}  # fmt: skip
