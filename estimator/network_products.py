"""What a network report shows besides the posterior: per-detector models, SNRs and verdicts.

* The maximum-likelihood model in each detector, at the network's best common
  phase ``arg sum_I z_I`` (the phase the marginalised likelihood integrates
  over; Thrane & Talbot 2019, PASA 36, e010, Eq. 75).
* Per-detector optimal SNR ``sqrt(<h_I|h_I>)`` and matched-filter SNR
  ``Re(z_I e^{-i phi}) / sqrt(<h_I|h_I>)`` over posterior draws, and the
  network SNR ``|sum_I z_I| / sqrt(sum_I <h_I|h_I>)`` (the coherent
  matched-filter SNR; Cutler & Flanagan 1994, PRD 49, 2658, Sec. II C).
* A coincidence check per detector: under the coherent model the residual of
  the detector's complex overlap, ``r_I = |z_I e^{-i phi} - <h_I|h_I>|^2 /
  <h_I|h_I>``, is a chi^2 with 2 degrees of freedom (real and imaginary parts
  of ``<n|h_I>`` each have variance ``<h_I|h_I>``; Finn 1992, PRD 46, 5236,
  Sec. II), slightly less after the fit; a detector whose data disagree with
  the model the others support (a missing or an extra signal) is flagged,
  with a Bonferroni false-alarm rate of :data:`~estimator.quality.FALSE_ALARM`
  over the detectors.
* An unexplained-signal check per detector: the residual (data minus the
  model) is matched-filtered with the best-fit template over the time window
  (plus the largest delay); under the model its SNR^2 at each time is a chi^2
  with 2 degrees of freedom, so with a Bonferroni bound over the samples of
  the window (conservative: neighbouring samples are correlated) a peak above
  the threshold is a signal the coherent model leaves unexplained in that
  detector, such as an arrival inconsistent with the others (common practice
  of coincidence tests, e.g. Allen et al. 2012, PRD 85, 122006, Sec. IV).
  The first check alone cannot see this: the model may put such a detector in
  a blind spot of its antenna pattern, where it predicts (and sees) nothing.
* The residual checks of :mod:`estimator.quality` (variance, normality,
  transients) run on every detector's whitened residual.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any, cast

import numpy as np
from numpy.typing import NDArray

from .conditioning import DetectorData, whiten
from .network_analysis import NetworkResult
from .network_model import antenna_factor
from .quality import (
    FALSE_ALARM,
    GUARD,
    QualityCheck,
    QualityReport,
    _likelihood_check,
    _normality_check,
    _transient_check,
    _variance_check,
)
from .sky_scan import filter_output
from .waveform import taylorf2

__all__ = [
    "DetectorView",
    "best_sample",
    "detector_snrs",
    "detector_views",
    "network_quality",
]

Array = NDArray[np.float64]


def best_sample(result: NetworkResult) -> dict[str, float]:
    """The posterior sample of highest likelihood (physical parameters)."""
    k = int(np.argmax(result.sample_log_likelihood))
    return {name: float(v[k]) for name, v in result.samples.items()}


@dataclass(frozen=True)
class DetectorView:
    """One detector at the maximum-likelihood sample.

    ``times`` are seconds from the model's arrival (coalescence) at this detector.
    """

    name: str
    data: DetectorData
    model: NDArray[np.complex128]  # on data.frequencies, 1/Hz
    arrival: float  # GPS time of coalescence at this detector, s
    times: Array
    whitened_data: Array
    whitened_model: Array
    overlap: complex  # z_I at phase 0
    norm: float  # <h_I|h_I>
    phase: float  # the network's best phase


def detector_views(
    result: NetworkResult, params: dict[str, float] | None = None
) -> list[DetectorView]:
    """Best-fit model and whitened series of every detector (module docstring)."""
    p = best_sample(result) if params is None else params
    arrays = {k: np.array([v]) for k, v in p.items()}
    z, hh = result.exact.components(arrays)  # at the sample's distance
    phase = float(np.angle(np.sum(z[:, 0])))
    views = []
    for i, (site, data) in enumerate(zip(result.sites, result.data, strict=True)):
        ra, dec = np.array([p["right_ascension"]]), np.array([p["declination"]])
        fp, fc = site.antenna_pattern(ra, dec, np.array([p["polarization_angle"]]), result.gmst)
        c = antenna_factor(np.asarray(fp), np.asarray(fc), np.array([p["inclination"]]))[0]
        arrival = p["coalescence_time"] + float(site.time_delay(ra, dec, result.gmst)[0])
        tc_rel = arrival + result.reference_time - data.epoch
        model = c * taylorf2(
            data.frequencies, p["chirp_mass"], p["mass_ratio"], p["luminosity_distance"],
            tc_rel, phase,
        )  # fmt: skip
        views.append(
            DetectorView(
                name=site.name,
                data=data,
                model=np.asarray(model, dtype=complex),
                arrival=arrival + result.reference_time,
                times=np.arange(data.n_samples) / data.sample_rate - tc_rel,
                whitened_data=whiten(data, data.strain),
                whitened_model=whiten(data, np.asarray(model, dtype=complex)),
                overlap=complex(z[i, 0]),
                norm=float(hh[i, 0]),
                phase=phase,
            )
        )
    return views


def detector_snrs(result: NetworkResult, draws: int = 400, seed: int = 0) -> dict[str, Array]:
    """Per-detector optimal and matched-filter SNRs, and the network SNR, over posterior draws.

    Keys ``optimal_snr:NAME``, ``matched_filter_snr:NAME`` and ``network_snr``; arrays
    of ``min(draws, samples)`` values.
    """
    n = result.samples["chirp_mass"].size
    pick = np.random.default_rng(seed).choice(n, min(draws, n), replace=False)
    p = {k: v[pick] for k, v in result.samples.items()}
    z, hh = result.likelihood.components(p)  # at each sample's distance
    total = np.sum(z, axis=0)
    rotate = np.exp(-1j * np.angle(total))
    out = {"network_snr": np.abs(total) / np.sqrt(np.sum(hh, axis=0))}
    for i, name in enumerate(result.names):
        out[f"optimal_snr:{name}"] = np.sqrt(hh[i])
        out[f"matched_filter_snr:{name}"] = np.real(z[i] * rotate) / np.sqrt(hh[i])
    return out


def _coincidence_check(view: DetectorView, n_det: int) -> QualityCheck:
    residual = abs(view.overlap * np.exp(-1j * view.phase) - view.norm) ** 2 / max(view.norm, 1e-12)
    p_value = float(np.exp(-0.5 * residual))  # chi^2 with 2 degrees of freedom
    limit = FALSE_ALARM / n_det
    passed = p_value > limit
    expected = float(np.sqrt(view.norm))
    seen = float(np.real(view.overlap * np.exp(-1j * view.phase)) / max(expected, 1e-12))
    if passed:
        words = (
            f"{view.name}: the data agree with the coherent model (SNR {seen:.1f} seen, "
            f"{expected:.1f} expected)."
        )
    else:
        words = (
            f"{view.name}: the data disagree with the signal the network model predicts here "
            f"(SNR {seen:.1f} in phase with the model, {expected:.1f} expected; residual "
            f"chi² {residual:.1f} with 2 degrees of freedom). A glitch, a wrong noise spectrum, "
            "a timing or calibration error in this detector, or a signal the model cannot "
            "describe; the joint estimate mixes this detector in and may be biased."
        )
    rule = f"p > {limit:.1g} (chi² with 2 dof; p = {p_value:.2g})"
    return QualityCheck(f"coincidence:{view.name}", passed, residual, rule, words)


def _unexplained_check(
    result: NetworkResult, view: DetectorView, params: dict[str, float]
) -> QualityCheck:
    residual = replace(view.data, strain=view.data.strain - view.model)
    dt = 1.0 / 8192.0
    times, z, sigma = filter_output(
        residual, params["chirp_mass"], params["mass_ratio"], result.reference_time, dt
    )
    span = result.settings.time_window + 0.0215
    near = np.abs(times) <= span
    peak2 = float(np.max(np.abs(z[near]) ** 2)) / sigma**2
    samples = max(int(np.sum(near)), 1)
    limit = 2.0 * float(np.log(samples * len(result.sites) / FALSE_ALARM))
    passed = peak2 <= limit
    if passed:
        words = f"{view.name}: no signal is left in the data once the model is removed."
    else:
        when = float(times[near][np.argmax(np.abs(z[near]))])
        words = (
            f"{view.name}: a signal of SNR {np.sqrt(peak2):.1f} remains in this detector once "
            f"the network's model is removed (at {when * 1e3:+.0f} ms from the trigger): its "
            "arrival time or strength is inconsistent with the other detectors. A glitch, a "
            "timing error in this detector or a signal the model cannot describe; the joint "
            "estimate may be biased."
        )
    rule = f"residual SNR² <= {limit:.1f} (χ² with 2 dof, Bonferroni over {samples} times)"
    return QualityCheck(f"unexplained:{view.name}", passed, peak2, rule, words)


def _tagged(check: QualityCheck, name: str) -> QualityCheck:
    return QualityCheck(
        f"{check.name}:{name}", check.passed, check.value, check.threshold,
        f"{name}: {check.explanation}",
    )  # fmt: skip


def network_quality(result: NetworkResult, views: list[DetectorView]) -> QualityReport:
    """Per-detector residual checks, coincidence checks and the likelihood check."""
    checks: list[QualityCheck] = []
    params = best_sample(result)
    for view in views:
        data = view.data
        white = whiten(data, data.strain - view.model) * np.sqrt(data.window_factor)
        times = np.arange(data.n_samples) / data.sample_rate
        edge = data.taper_duration + GUARD
        keep = (times >= edge) & (times <= data.duration - edge)
        residual = np.asarray(white[keep], dtype=float)
        tc = float(view.arrival - data.epoch)
        estimated = result.spectra[result.names.index(view.name)].estimated
        allowance = 0.1 if estimated else 0.0
        checks.append(_tagged(_variance_check(residual, data, allowance), view.name))
        checks.append(_tagged(_normality_check(residual, data), view.name))
        checks.append(_tagged(_transient_check(times[keep], residual, tc, data), view.name))
        checks.append(_coincidence_check(view, len(views)))
        checks.append(_unexplained_check(result, view, params))
    checks.append(_likelihood_check(cast(Any, result)))
    return QualityReport(checks)
