"""From network posterior samples to the quantities people ask for, and ``summary.json``.

As for one detector (:mod:`estimator.summary`): redshift from the luminosity
distance in flat Lambda-CDM (Planck 2018), source-frame masses
``m / (1 + z)``, the probability that a component is below 3 Msun. Added:
inclination, polarisation angle, sky position (sampled in equatorial
coordinates of the event's date, mean equator and equinox, see
:mod:`estimator.sites`; reported in J2000 after precession,
:mod:`estimator.precession`), the
per-detector and network SNRs (:mod:`estimator.network_products`) and the
sky map's credible areas (:mod:`estimator.skymap`).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from numpy.typing import NDArray

from . import __version__
from .cosmology import redshift_from_distance
from .network_analysis import NetworkResult
from .network_products import DetectorView, best_sample, network_quality
from .precession import of_date_to_j2000
from .settings import settings_dict
from .skymap import SkyMap
from .stats import credible_interval, probability_below
from .summary import (
    CREDIBLE_LEVEL,
    NEUTRON_STAR_LIMIT,
    PARAMETER_LABELS,
    PARAMETER_UNITS,
    check_dict,
)
from .waveform import component_masses

__all__ = [
    "NETWORK_LABELS",
    "NETWORK_UNITS",
    "build_network_summary",
    "derive_network_samples",
    "sky_j2000",
]

Array = NDArray[np.float64]

#: Every reported parameter of a network analysis and its unit.
NETWORK_UNITS: dict[str, str] = {
    **{k: PARAMETER_UNITS[k] for k in (
        "chirp_mass", "mass_ratio", "primary_mass", "secondary_mass", "total_mass",
        "luminosity_distance", "coalescence_time", "redshift", "source_chirp_mass",
        "source_primary_mass", "source_secondary_mass", "source_total_mass")},
    "inclination": "deg",
    "polarization_angle": "deg",
    "right_ascension": "deg",
    "declination": "deg",
    "network_snr": "",
}  # fmt: skip
NETWORK_LABELS: dict[str, str] = {
    **PARAMETER_LABELS,
    "coalescence_time": "coalescence time at the geocentre (GPS)",
    "inclination": "inclination (angle of the orbital axis to the line of sight)",
    "polarization_angle": "polarisation angle",
    "right_ascension": "right ascension (J2000)",
    "declination": "declination (J2000)",
    "network_snr": "network matched-filter SNR",
}


def sky_j2000(result: NetworkResult, ra: Array, dec: Array) -> tuple[Array, Array]:
    """Sampled sky coordinates (of the event's date, rad) in J2000 (rad)."""
    out = of_date_to_j2000(np.asarray(ra), np.asarray(dec), result.reference_time)
    return np.asarray(out[0], dtype=float), np.asarray(out[1], dtype=float)


def derive_network_samples(result: NetworkResult) -> dict[str, Array]:
    """All reported quantities for every posterior sample (angles in degrees).

    ``coalescence_time`` is GPS at the geocentre; ``coalescence_offset`` its offset
    from the trigger time (s).
    """
    s = result.samples
    d_l = s["luminosity_distance"]
    z = redshift_from_distance(d_l)
    m1, m2 = component_masses(s["chirp_mass"], s["mass_ratio"])
    zz, hh = result.likelihood.components(s)  # at each sample's distance
    ra, dec = sky_j2000(result, s["right_ascension"], s["declination"])
    out = {
        "chirp_mass": s["chirp_mass"],
        "mass_ratio": s["mass_ratio"],
        "primary_mass": m1,
        "secondary_mass": m2,
        "total_mass": m1 + m2,
        "luminosity_distance": d_l,
        "inclination": np.degrees(s["inclination"]),
        "polarization_angle": np.degrees(s["polarization_angle"]),
        "right_ascension": np.degrees(ra),
        "declination": np.degrees(dec),
        "coalescence_time": result.reference_time + s["coalescence_time"],
        "coalescence_offset": s["coalescence_time"],
        "redshift": z,
        "source_chirp_mass": s["chirp_mass"] / (1.0 + z),
        "source_primary_mass": m1 / (1.0 + z),
        "source_secondary_mass": m2 / (1.0 + z),
        "source_total_mass": (m1 + m2) / (1.0 + z),
        "network_snr": np.abs(np.sum(zz, axis=0)) / np.sqrt(np.sum(hh, axis=0)),
        "log_likelihood": result.sample_log_likelihood,
    }
    return {k: np.asarray(v, dtype=float) for k, v in out.items()}


def _interval(x: Array, unit: str) -> dict[str, Any]:
    median, lower, upper = credible_interval(x, CREDIBLE_LEVEL)
    return {"median": median, "lower": lower, "upper": upper, "unit": unit}


def _detectors(
    result: NetworkResult, views: list[DetectorView], snrs: Mapping[str, Array]
) -> list[dict[str, Any]]:
    out = []
    for site, view, search in zip(result.sites, views, result.searches, strict=True):
        out.append(
            {
                "name": site.name,
                "site": {
                    "latitude_deg": site.latitude,
                    "longitude_deg": site.longitude,
                    "elevation_m": site.elevation,
                    "arm1_azimuth_deg": site.arm1_azimuth,
                    "arm2_azimuth_deg": site.arm2_azimuth,
                },
                "optimal_snr": _interval(snrs[f"optimal_snr:{site.name}"], ""),
                "matched_filter_snr": _interval(snrs[f"matched_filter_snr:{site.name}"], ""),
                "arrival_time": view.arrival,
                "search_snr": search.snr,
                "f_low": view.data.f_low,
                "f_high": view.data.f_high,
            }
        )
    return out


def build_network_summary(
    result: NetworkResult,
    derived: Mapping[str, Array],
    *,
    views: list[DetectorView],
    snrs: Mapping[str, Array],
    skymap: SkyMap,
    inputs: Mapping[str, Any],
    label: str,
) -> dict[str, Any]:
    """The ``summary.json`` document of a network analysis."""
    chain = result.chain
    best = best_sample(result)
    ml = {k: float(v) for k, v in best.items()}
    ra, dec = sky_j2000(result, np.array([ml["right_ascension"]]), np.array([ml["declination"]]))
    ml["right_ascension"], ml["declination"] = float(ra[0]), float(dec[0])
    for k in ("inclination", "polarization_angle", "right_ascension", "declination"):
        ml[k] = float(np.degrees(ml[k]))
    ml["coalescence_time"] += result.reference_time
    ml["log_likelihood"] = float(np.max(result.sample_log_likelihood))
    quality = network_quality(result, views)
    return {
        "schema_version": 1,
        "analysis": "network",
        "label": label,
        "credible_level": CREDIBLE_LEVEL,
        "parameters": {name: _interval(derived[name], u) for name, u in NETWORK_UNITS.items()},
        "probabilities": {
            "secondary_below_3_msun": probability_below(
                derived["source_secondary_mass"], NEUTRON_STAR_LIMIT
            ),
            "primary_below_3_msun": probability_below(
                derived["source_primary_mass"], NEUTRON_STAR_LIMIT
            ),
        },
        "sky": {
            "area_90_deg2": skymap.credible_area(0.9),
            "area_50_deg2": skymap.credible_area(0.5),
            "frame": "J2000 equatorial (precessed from the mean equator and equinox of the "
            "event's date; nutation and frame bias neglected, below 1e-4 rad)",
            "pixelisation": f"HEALPix nside {skymap.nside}, nested",
            "kernel_width_deg": float(np.degrees(skymap.bandwidth)),
        },
        "detectors": _detectors(result, views, snrs),
        "maximum_likelihood": ml,
        "search": [
            {
                "detector": name,
                "chirp_mass": s.chirp_mass,
                "mass_ratio": s.mass_ratio,
                "coalescence_time": s.coalescence_time,
                "snr": s.snr,
                "templates": s.templates,
            }
            for name, s in zip(result.names, result.searches, strict=True)
        ],
        "diagnostics": {
            "autocorrelation_time": {
                n: float(t) for n, t in zip(chain.names, chain.tau, strict=True)
            },
            "sampler_coordinates": {
                "names": list(chain.names),
                "arrival_time": (
                    f"arrival time at {result.names[result.loudest]} minus the time to "
                    "coalescence from the reference frequency, relative to the trigger (s)"
                ),
                "reference_frequency": result.coordinates.f_ref,
                "distance": "marginalised in the likelihood, drawn afterwards",
            },
            "effective_sample_size": chain.effective_sample_size,
            "samples": int(derived["chirp_mass"].size),
            "acceptance_fraction": chain.acceptance_fraction,
            "steps": chain.steps,
            "walkers": chain.walkers,
            "burn_in": chain.burn_in,
            "thin": chain.thin,
            "converged": chain.converged,
            "sky_scan": {
                "points": int(result.scan.snr2.size),
                "best_coherent_snr": float(np.sqrt(np.max(result.scan.snr2))),
            },
            "likelihood_check": check_dict(result.check),
            "timings_s": {k: round(float(v), 3) for k, v in result.timings.items()},
        },
        "settings": {
            **settings_dict(result.settings),
            "seed": result.seed,
            "f_high": result.data[0].f_high,
            "walkers": result.walkers,
        },
        "inputs": dict(inputs),
        "model": {
            "name": "taylorf2",
            "waveform": "TaylorF2: 3.5PN point-particle phase, restricted Newtonian amplitude, "
            "ending at the Schwarzschild ISCO of the total mass; no tides, merger or "
            "ringdown; dominant quadrupole harmonic only",
            "spins": "spins fixed at zero (the network analysis does not yet use the merger "
            "model or sample spins; the model and spin_max settings apply to one-detector "
            "analyses)",
            "noise": "stationary Gaussian noise in each detector, independent between "
            "detectors, described by each detector's one-sided PSD",
            "cosmology": "flat Lambda-CDM, H0 = 67.66 km/s/Mpc, Omega_m = 0.30966 (Planck 2018)",
            "detectors": list(result.names),
            "sky_coordinates": "sampled in equatorial coordinates of date (the Earth's "
            "rotation from the GPS time, sidereal time with UT1 = UTC), reported in J2000 "
            "(IAU 2006 precession)",
        },
        "quality": quality.to_dict(),
        "notes": list(result.notes),
        "software": {"name": "chirpcast", "version": __version__},
    }
