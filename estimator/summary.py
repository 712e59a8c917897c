"""From posterior samples to the quantities people ask for, and their summary.

* Luminosity distance and orientation factor from effective distance, drawn
  exactly from their conditional prior (:func:`estimator.priors.draw_orientation`).
* Redshift from luminosity distance in flat Lambda-CDM with Planck 2018
  parameters (:mod:`estimator.cosmology`); source-frame masses
  ``m_source = m_detector / (1 + z)`` (e.g. Krolak & Schutz 1987, GRG 19, 1163).
* The probability that a component is below 3 Msun in the source frame, a
  common rule of thumb for "a neutron star may be involved" (3 Msun is above
  any proposed neutron-star maximum mass; common practice).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from numpy.typing import NDArray

from . import __version__
from .analysis import AnalysisResult, settings_dict
from .cosmology import redshift_from_distance
from .models import MODEL_DESCRIPTIONS
from .posterior import LikelihoodCheck
from .priors import draw_orientation
from .quality import assess_quality
from .spins import effective_spin
from .stats import credible_interval, probability_below
from .waveform import component_masses

__all__ = [
    "CREDIBLE_LEVEL",
    "NEUTRON_STAR_LIMIT",
    "PARAMETER_LABELS",
    "PARAMETER_UNITS",
    "build_summary",
    "check_dict",
    "derive_samples",
]

Array = NDArray[np.float64]

CREDIBLE_LEVEL = 0.9
#: Source-frame mass below which a component may be a neutron star, Msun (common practice).
NEUTRON_STAR_LIMIT = 3.0

#: Every reported parameter, its unit and a label for tables and plots.
PARAMETER_UNITS: dict[str, str] = {
    "chirp_mass": "Msun",
    "mass_ratio": "",
    "primary_mass": "Msun",
    "secondary_mass": "Msun",
    "total_mass": "Msun",
    "luminosity_distance": "Mpc",
    "effective_distance": "Mpc",
    "orientation_factor": "",
    "coalescence_time": "s",
    "redshift": "",
    "source_chirp_mass": "Msun",
    "source_primary_mass": "Msun",
    "source_secondary_mass": "Msun",
    "source_total_mass": "Msun",
    "spin1": "",
    "spin2": "",
    "effective_spin": "",
    "snr": "",
}
PARAMETER_LABELS: dict[str, str] = {
    "chirp_mass": "chirp mass (detector frame)",
    "mass_ratio": "mass ratio m2/m1",
    "primary_mass": "primary mass (detector frame)",
    "secondary_mass": "secondary mass (detector frame)",
    "total_mass": "total mass (detector frame)",
    "luminosity_distance": "luminosity distance",
    "effective_distance": "effective distance",
    "orientation_factor": "orientation factor",
    "coalescence_time": "coalescence time (GPS)",
    "redshift": "redshift",
    "source_chirp_mass": "chirp mass (source frame)",
    "source_primary_mass": "primary mass (source frame)",
    "source_secondary_mass": "secondary mass (source frame)",
    "source_total_mass": "total mass (source frame)",
    "spin1": "aligned spin of the primary",
    "spin2": "aligned spin of the secondary",
    "effective_spin": "effective spin chi_eff",
    "snr": "matched-filter SNR",
}


def derive_samples(result: AnalysisResult, rng: np.random.Generator) -> dict[str, Array]:
    """All reported quantities for every posterior sample.

    ``coalescence_time`` is returned as GPS time; ``coalescence_offset`` keeps
    the sampled offset from the trigger time (s).
    """
    s = result.samples
    w, d_l = draw_orientation(s["effective_distance"], result.settings.distance_max, rng)
    z = redshift_from_distance(d_l)
    m1, m2 = component_masses(s["chirp_mass"], s["mass_ratio"])
    out = {
        "chirp_mass": s["chirp_mass"],
        "mass_ratio": s["mass_ratio"],
        "primary_mass": m1,
        "secondary_mass": m2,
        "total_mass": m1 + m2,
        "luminosity_distance": d_l,
        "effective_distance": s["effective_distance"],
        "orientation_factor": w,
        "coalescence_time": result.settings.trigger_time + s["coalescence_time"],
        "coalescence_offset": s["coalescence_time"],
        "redshift": z,
        "source_chirp_mass": s["chirp_mass"] / (1.0 + z),
        "source_primary_mass": m1 / (1.0 + z),
        "source_secondary_mass": m2 / (1.0 + z),
        "source_total_mass": (m1 + m2) / (1.0 + z),
        "snr": result.likelihood.matched_filter_snr(s),
        "log_likelihood": result.sample_log_likelihood,
    }
    if "spin1" in s:
        out["spin1"], out["spin2"] = s["spin1"], s["spin2"]
        out["effective_spin"] = effective_spin(s["mass_ratio"], s["spin1"], s["spin2"])
    return {k: np.asarray(v, dtype=float) for k, v in out.items()}


def check_dict(check: LikelihoodCheck) -> dict[str, Any]:
    """The binned-vs-exact likelihood check as ``summary.json`` records it."""
    return {
        "draws": check.draws,
        "max_abs_difference": check.max_abs_difference,
        "tolerance": check.tolerance,
        "passed": check.passed,
        "bins": check.bins,
        "refinements": check.refinements,
        "reweighted_with_exact_likelihood": check.reweighted,
        "reweight_efficiency": check.reweight_efficiency,
    }


def _gating_dict(result: AnalysisResult) -> dict[str, Any] | None:
    """The glitch scan as ``summary.json`` records it (None when gating was off)."""
    scan = result.glitches
    if scan is None:
        return None
    return {
        "method": "inverse Tukey window on the whitened data (Usman et al. 2016, CQG 33, "
        "215004, Sec. 2.3)",
        "gates": [g.to_dict() for g in scan.gates],
        "at_signal": [g.to_dict() for g in scan.at_signal],
        "threshold_power_ratio": float(scan.threshold),
        "not_gated_beyond_limit": int(scan.dropped),
    }


def _mode_scan_dict(result: AnalysisResult) -> dict[str, Any] | None:
    """The aligned-spin mode scan as ``summary.json`` records it (None when it did not run)."""
    scan = result.mode_scan
    if scan is None:
        return None
    return {
        "templates": scan.templates,
        "loudest_template_snr": scan.best_snr,
        "log_likelihood_gain": scan.gain if np.isfinite(scan.gain) else None,
        "adopted": scan.adopted,
        "peak": None if scan.candidate is None else dict(scan.candidate.params),
    }


def _interval(x: Array, unit: str) -> dict[str, Any]:
    median, lower, upper = credible_interval(x, CREDIBLE_LEVEL)
    return {"median": median, "lower": lower, "upper": upper, "unit": unit}


def build_summary(
    result: AnalysisResult,
    derived: Mapping[str, Array],
    *,
    inputs: Mapping[str, Any],
    label: str,
) -> dict[str, Any]:
    """The ``summary.json`` document: intervals, diagnostics, settings and provenance."""
    chain = result.chain
    best = int(np.argmax(derived["log_likelihood"]))
    fid = result.fiducial
    if fid.log_likelihood >= float(derived["log_likelihood"][best]):
        ml = {**fid.params, "snr": fid.snr, "log_likelihood": fid.log_likelihood}
    else:
        ml = {
            k: float(derived[k][best]) for k in ("chirp_mass", "mass_ratio", "effective_distance")
        }
        ml["coalescence_time"] = float(derived["coalescence_offset"][best])
        ml["snr"] = float(derived["snr"][best])
        ml["log_likelihood"] = float(derived["log_likelihood"][best])
    ml["coalescence_time"] = result.settings.trigger_time + float(ml["coalescence_time"])
    return {
        "schema_version": 1,
        "label": label,
        "credible_level": CREDIBLE_LEVEL,
        "parameters": {
            name: _interval(derived[name], unit)
            for name, unit in PARAMETER_UNITS.items()
            if name in derived
        },
        "probabilities": {
            "secondary_below_3_msun": probability_below(
                derived["source_secondary_mass"], NEUTRON_STAR_LIMIT
            ),
            "primary_below_3_msun": probability_below(
                derived["source_primary_mass"], NEUTRON_STAR_LIMIT
            ),
        },
        "maximum_likelihood": {k: float(v) for k, v in ml.items()},
        "search": {
            "chirp_mass": result.search.chirp_mass,
            "mass_ratio": result.search.mass_ratio,
            "coalescence_time": result.search.coalescence_time,
            "snr": result.search.snr,
            "templates": result.search.templates,
            "spin": result.search.spin,
            "loudest_non_spinning": (
                None
                if result.search.plain is None
                else {
                    "chirp_mass": result.search.plain.chirp_mass,
                    "mass_ratio": result.search.plain.mass_ratio,
                    "snr": result.search.plain.snr,
                }
            ),
        },
        "diagnostics": {
            "autocorrelation_time": {
                n: float(t) for n, t in zip(chain.names, chain.tau, strict=True)
            },
            "sampler_coordinates": {
                "names": list(chain.names),
                "arrival_time": "coalescence time minus the time to coalescence from the "
                "reference frequency, relative to the trigger (s)",
                "reference_frequency": result.coordinates.f_ref,
            },
            "effective_sample_size": chain.effective_sample_size,
            "samples": int(derived["chirp_mass"].size),
            "acceptance_fraction": chain.acceptance_fraction,
            "steps": chain.steps,
            "walkers": chain.walkers,
            "burn_in": chain.burn_in,
            "thin": chain.thin,
            "converged": chain.converged,
            "likelihood_check": check_dict(result.check),
            "mode_scan": _mode_scan_dict(result),
            "timings_s": {k: round(float(v), 3) for k, v in result.timings.items()},
        },
        "settings": {
            **settings_dict(result.settings),
            "seed": result.seed,
            "f_high": result.f_high,
        },
        "inputs": dict(inputs),
        "model": {
            "name": result.model,
            "waveform": MODEL_DESCRIPTIONS[result.model] + "; no precession, tides or "
            "higher harmonics",
            "spins": (
                f"aligned spins sampled, each uniform on [-{result.settings.spin_max:g}, "
                f"{result.settings.spin_max:g}]"
                if result.settings.spin_max > 0.0
                else "spins fixed at zero"
            ),
            "f_low_used": result.data.f_low,
            "f_low_raised": (
                None
                if result.f_low_raised is None
                else {"asked": result.f_low_raised[0], "used": result.f_low_raised[1]}
            ),
            "gating": _gating_dict(result),
            "noise": "stationary Gaussian noise described by the given one-sided PSD",
            "cosmology": "flat Lambda-CDM, H0 = 67.66 km/s/Mpc, Omega_m = 0.30966 (Planck 2018)",
            "detectors": [result.data.detector],
        },
        "fisher": result.fisher.to_dict(result.samples),
        "quality": assess_quality(result).to_dict(),
        "notes": list(result.notes),
        "software": {"name": "chirpcast", "version": __version__},
    }
