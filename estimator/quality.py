"""Data-quality verdicts: does the data fit what the analysis assumed?

Every check looks at the analysed data once the maximum-likelihood model has
been taken out, or at where that model sits in the segment and the band, and
says in plain words whether it passed. None of them changes the posterior.

* ``residual_variance``: the whitened residual should have unit variance when
  the PSD describes the noise (common practice).
* ``residual_normality``: Anderson–Darling test of its shape against a normal
  distribution (Anderson & Darling 1954, JASA 49, 765; p-value interpolated in
  the tables of ``scipy.stats.anderson``).
* ``transient``: the largest short-time energy of the residual near
  coalescence against Gaussian noise (an excess-power statistic: Anderson,
  Brady, Creighton & Flanagan 2001, PRD 63, 042003).
* ``segment_edges`` and ``band_edge``: the model must lie inside the untapered
  data and, in frequency, mostly below the band's upper edge.
* ``likelihood_check``: the relative-binning likelihood agreed with the exact one.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import scipy.stats
from numpy.typing import NDArray

from .analysis import AnalysisResult
from .conditioning import DetectorData, whiten
from .models import model_strain, model_top
from .spectrum import interpolate_psd
from .waveform import time_to_coalescence

__all__ = [
    "BAND_FRACTION_LIMIT",
    "FALSE_ALARM",
    "NORMALITY_LEVEL",
    "TRANSIENT_SPAN",
    "TRANSIENT_WINDOW",
    "QualityCheck",
    "QualityReport",
    "assess_quality",
    "residual_series",
    "variance_range",
]

Array = NDArray[np.float64]

#: False-alarm probability of the variance and transient checks on clean Gaussian data.
FALSE_ALARM = 1e-4
#: Significance of the normality test (the smallest level scipy's tables give).
NORMALITY_LEVEL = 0.01
#: Seconds either side of coalescence searched for transients.
TRANSIENT_SPAN = 4.0
#: Length of the short-time energy windows, s (half-overlapping).
TRANSIENT_WINDOW = 1.0 / 16.0
#: Largest share of the model's SNR^2 allowed above the band's upper edge.
BAND_FRACTION_LIMIT = 0.05
#: Extra seconds left out beyond each taper, where the whitening filter spreads the taper.
GUARD = 0.25


@dataclass(frozen=True)
class QualityCheck:
    """One verdict: its name, whether it passed, the number measured and the rule."""

    name: str
    passed: bool
    value: float
    threshold: str
    explanation: str


@dataclass
class QualityReport:
    """All the verdicts of one analysis."""

    checks: list[QualityCheck] = field(default_factory=list)

    @property
    def passed(self) -> bool:
        """True when no check raised a flag."""
        return all(c.passed for c in self.checks)

    @property
    def flags(self) -> list[QualityCheck]:
        """The checks that raised a flag."""
        return [c for c in self.checks if not c.passed]

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form for ``summary.json`` (non-finite values become ``None``)."""
        checks = []
        for c in self.checks:
            entry = asdict(c)
            entry["value"] = float(c.value) if np.isfinite(c.value) else None
            checks.append(entry)
        return {
            "passed": self.passed,
            "flags": [c.name for c in self.flags],
            "false_alarm_rate": FALSE_ALARM,
            "checks": checks,
        }


def _model(result: AnalysisResult) -> tuple[NDArray[np.complex128], float]:
    """Maximum-likelihood model on the data's band at its best phase, and t_c from the epoch.

    The phase is taken from the exact overlap on every bin, not from the binned
    likelihood (whose complex overlap is referred to the fiducial's phase).
    """
    data, p = result.data, result.fiducial.params
    tc_rel = p["coalescence_time"] + result.settings.trigger_time - data.epoch
    h0 = model_strain(
        result.model,
        data.frequencies,
        p["chirp_mass"],
        p["mass_ratio"],
        p["effective_distance"],
        tc_rel,
        0.0,
    )
    # The phase-marginalised likelihood's best phase is arg <d|h0> (Thrane & Talbot 2019,
    # PASA 36, e010, Eq. 75); taylorf2's phase phi multiplies h0 by exp(+i phi).
    phase = float(np.angle(data.inner(data.strain, h0)))
    return np.asarray(h0 * np.exp(1j * phase), dtype=complex), float(tc_rel)


def residual_series(result: AnalysisResult) -> tuple[Array, Array, float]:
    """Whitened residual (data minus the maximum-likelihood model) away from the tapers.

    :func:`estimator.conditioning.whiten` gives unit variance averaged over the
    whole windowed segment; inside the flat part of the window the noise keeps
    all its power, so the series is multiplied by ``sqrt(mean(w^2))`` to have
    unit variance there (Harris 1978, Proc. IEEE 66, 51: window power).

    Returns
    -------
    times
        Seconds from the segment start of the samples kept.
    residual
        The whitened residual at those times, dimensionless.
    tc
        Model coalescence time, seconds from the segment start.
    """
    data = result.data
    model, tc = _model(result)
    white = whiten(data, data.strain - model) * np.sqrt(data.window_factor)
    times = np.arange(data.n_samples) / data.sample_rate
    edge = data.taper_duration + GUARD
    keep = (times >= edge) & (times <= data.duration - edge)
    return times[keep], np.asarray(white[keep], dtype=float), tc


def _bandwidth(data: DetectorData) -> float:
    return float(data.frequencies.size * data.df)


def variance_range(n_independent: float, false_alarm: float = FALSE_ALARM) -> tuple[float, float]:
    """Central range of the sample variance of ``n`` independent N(0, 1) values.

    ``n s^2 ~ chi^2_n`` (Cochran's theorem; e.g. Kendall & Stuart, *The Advanced
    Theory of Statistics*, Vol. 1), so the range holding ``1 - false_alarm`` of
    it is ``chi^2_n`` quantiles at ``false_alarm / 2`` and ``1 - false_alarm / 2``
    over ``n``. Band-limited white noise of bandwidth ``B`` has ``2 B`` independent
    samples per second (Nyquist–Shannon; common practice).
    """
    lo = float(scipy.stats.chi2.ppf(false_alarm / 2.0, n_independent)) / n_independent
    hi = float(scipy.stats.chi2.isf(false_alarm / 2.0, n_independent)) / n_independent
    return lo, hi


def _welch_allowance(result: AnalysisResult) -> float:
    """Expected excess of the whitened variance when the PSD was estimated from the segment.

    With ``K`` non-overlapping averages a periodogram estimate is ``S chi^2_{2K} / 2K``
    and ``E[S / S_est] = 2K / (2K - 2) = 1 + 1/(K - 1)`` (inverse chi-squared mean;
    Jensen's inequality makes whitening by an estimate inflate the variance). The
    median average and the overlap change this a little; it is an allowance, not a
    correction. ``K`` is the segment length over the estimate's sub-segment length.
    """
    spectrum = result.spectrum
    if not spectrum.estimated or spectrum.frequencies.size < 2:
        return 0.0
    sub = 1.0 / float(spectrum.frequencies[1] - spectrum.frequencies[0])
    k = max(result.data.duration / sub, 2.0)
    return 1.0 / (k - 1.0)


def _variance_check(residual: Array, data: DetectorData, allowance: float) -> QualityCheck:
    n_eff = 2.0 * _bandwidth(data) * residual.size / data.sample_rate
    lo, hi = variance_range(n_eff)
    hi *= 1.0 + allowance
    var = float(np.mean(residual**2))
    passed = lo <= var <= hi
    if passed:
        words = "The data's noise power matches the noise spectrum the analysis used."
    else:
        side = "more" if var > hi else "less"
        words = (
            f"The data, with the best-fit signal removed, carry {abs(var - 1):.0%} {side} noise "
            "power than the noise spectrum predicts, so the spectrum does not describe these "
            "data: the SNR, distance and interval widths are scaled wrongly. Supply a noise "
            "spectrum measured next to this segment."
        )
    rule = f"variance {lo:.4f} to {hi:.4f}"
    if allowance > 0:
        rule += f" (upper end raised {allowance:.0%}: spectrum estimated from these data)"
    return QualityCheck("residual_variance", passed, var, rule, words)


def _thinning(data: DetectorData) -> int:
    """Smallest sample step at which band-limited noise is nearly uncorrelated (|rho| < 0.05).

    Ideal band-pass autocorrelation ``rho(tau) = [sin 2 pi f_h tau - sin 2 pi f_l tau] /
    (2 pi B tau)`` (Wiener–Khinchin theorem; common practice).
    """
    f_lo, f_hi = float(data.frequencies[0]), float(data.frequencies[-1])
    bw = f_hi - f_lo
    for step in range(1, 64):
        tau = step * np.arange(1, 6) / data.sample_rate
        rho = (np.sin(2 * np.pi * f_hi * tau) - np.sin(2 * np.pi * f_lo * tau)) / (
            2 * np.pi * bw * tau
        )
        if np.max(np.abs(rho)) < 0.05:
            return step
    return 64


def _normality_check(residual: Array, data: DetectorData) -> QualityCheck:
    sample = residual[:: _thinning(data)]
    test = scipy.stats.anderson(sample, "norm", method="interpolate")
    p = float(test.pvalue)
    passed = p > NORMALITY_LEVEL
    if passed:
        words = "The residual noise looks Gaussian (Anderson–Darling test)."
    else:
        words = (
            "The residual noise is not Gaussian (Anderson–Darling test): non-Gaussian noise "
            "such as transients or lines makes the likelihood, and so every interval, unreliable."
        )
    return QualityCheck(
        "residual_normality", passed, float(test.statistic),
        f"A² with p > {NORMALITY_LEVEL:g} (p = {p:.2g}, {sample.size} samples)", words,
    )  # fmt: skip


def _transient_check(times: Array, residual: Array, tc: float, data: DetectorData) -> QualityCheck:
    near = np.abs(times - tc) <= TRANSIENT_SPAN
    width = max(round(TRANSIENT_WINDOW * data.sample_rate), 1)
    if near.sum() < width:
        return QualityCheck(
            "transient", True, float("nan"), "n/a",
            "Too little data near coalescence lies away from the tapers to look for transients.",
        )  # fmt: skip
    energy = np.convolve(residual[near] ** 2, np.ones(width), mode="valid")[:: max(width // 2, 1)]
    # Power relative to the residual's own variance, so that a mis-scaled PSD (the
    # variance check's job) does not raise this flag too.
    ratio = float(np.max(energy)) / (width * float(np.mean(residual**2)))
    # Each window's energy / width ~ chi^2_k / k with k = 2 B w independent samples;
    # Bonferroni over the windows searched keeps the false-alarm rate at FALSE_ALARM.
    k = 2.0 * _bandwidth(data) * width / data.sample_rate
    limit = float(scipy.stats.chi2.isf(FALSE_ALARM / energy.size, k)) / k
    passed = ratio <= limit
    if passed:
        words = "No loud short noise transient near the signal."
    else:
        when = float(times[near][np.argmax(energy) * max(width // 2, 1) + width // 2] - tc)
        words = (
            f"A loud short noise transient (a glitch) lies {when:+.2f} s from coalescence: "
            f"{ratio:.1f} times the expected power in {TRANSIENT_WINDOW * 1e3:.0f} ms. It can "
            "bias the masses and the distance; inspect the whitened-data plot."
        )
    rule = f"peak {TRANSIENT_WINDOW * 1e3:.0f} ms power / mean power <= {limit:.2f}"
    return QualityCheck("transient", passed, ratio, rule, words)


def _edge_check(result: AnalysisResult, tc: float) -> QualityCheck:
    data, p = result.data, result.fiducial.params
    start = tc - float(time_to_coalescence(data.f_low, p["chirp_mass"], p["mass_ratio"])[0])
    margin = min(start - data.taper_duration, data.duration - data.taper_duration - tc)
    passed = margin >= 0.0
    if passed:
        words = "The signal lies inside the untapered part of the segment."
    else:
        words = (
            f"The signal runs {-margin:.2f} s into the tapered ends of the segment (from "
            f"{data.f_low:g} Hz to coalescence): part of it is suppressed or missing. Supply a "
            "longer segment or raise the low-frequency cut."
        )
    return QualityCheck("segment_edges", passed, margin, "margin >= 0 s", words)


def _band_check(result: AnalysisResult) -> QualityCheck:
    """Share of the model's optimal SNR^2 above ``f_high``, up to its end (ISCO or ringdown).

    ``rho^2 = 4 int |h|^2 / S df`` (Cutler & Flanagan 1994, PRD 49, 2658, Eq. 2.4),
    on a 1 Hz grid; frequencies the spectrum does not cover count as no power.
    """
    data, p = result.data, result.fiducial.params
    f_isco = float(model_top(result.model, p["chirp_mass"], p["mass_ratio"]))
    f = np.arange(data.f_low, max(f_isco, data.f_low + 1.0), 1.0)
    h = model_strain(result.model, f, p["chirp_mass"], p["mass_ratio"], p["effective_distance"])
    power = np.abs(h) ** 2 / interpolate_psd(result.spectrum, f)
    total = float(np.sum(power))
    fraction = float(np.sum(power[f > data.f_high])) / total if total > 0 else 0.0
    passed = fraction <= BAND_FRACTION_LIMIT
    if passed:
        words = "The signal's power lies inside the analysed frequency band."
    else:
        words = (
            f"{fraction:.0%} of the signal's power lies above the band's upper edge "
            f"({data.f_high:g} Hz, below its end near {f_isco:.0f} Hz): that part is not "
            "analysed. Raise the upper frequency or supply data at a higher sample rate."
        )
    rule = f"share of SNR² above f_high <= {BAND_FRACTION_LIMIT:.0%}"
    return QualityCheck("band_edge", passed, fraction, rule, words)


def _likelihood_check(result: AnalysisResult) -> QualityCheck:
    c = result.check
    if c.passed:
        words = "The fast (relative-binning) likelihood agreed with the exact one."
    else:
        words = (
            f"The fast (relative-binning) likelihood differed from the exact one by up to "
            f"{c.max_abs_difference:.2g} in log-likelihood on posterior draws, beyond the "
            f"tolerance {c.tolerance:g}, after {c.refinements} refinement(s)."
        )
        if c.reweighted:
            words += (
                " The exact likelihood was then used: the samples were reweighted to it "
                f"(efficiency {c.reweight_efficiency:.2f}; below about 0.1 few distinct "
                "samples remain and the intervals are coarse)."
            )
        else:
            words += " The posterior may be distorted."
    rule = f"max |Δ ln L| <= {c.tolerance:g}"
    return QualityCheck("likelihood_check", c.passed, float(c.max_abs_difference), rule, words)


def assess_quality(result: AnalysisResult) -> QualityReport:
    """Data-quality verdicts on a finished analysis.

    Parameters
    ----------
    result
        What :func:`estimator.analysis.run_analysis` returned.

    Returns
    -------
    QualityReport
        The checks, in report order: residual variance, residual normality,
        transients near coalescence, segment edges, band edge, likelihood check.
        Stated false-alarm rates on clean stationary Gaussian data: ``FALSE_ALARM``
        (1e-4) for the variance and transient checks, ``NORMALITY_LEVEL`` (1%) for
        the normality test.
    """
    times, residual, tc = residual_series(result)
    checks = [
        _variance_check(residual, result.data, _welch_allowance(result)),
        _normality_check(residual, result.data),
        _transient_check(times, residual, tc, result.data),
        _edge_check(result, tc),
        _band_check(result),
        _likelihood_check(result),
        _low_frequency_check(result),
        _gating_check(result),
        _peak_check(result),
    ]
    return QualityReport(checks)


def _low_frequency_check(result: AnalysisResult) -> QualityCheck:
    """Was the low-frequency cut raised because the segment starts too late?"""
    raised = result.f_low_raised
    rule = "the asked low-frequency cut fits the segment"
    if raised is None:
        return QualityCheck(
            "low_frequency_cut", True, float(result.data.f_low), rule,
            "The signal above the asked low-frequency cut lies inside the segment.",
        )  # fmt: skip
    asked, used = raised
    words = (
        f"The segment starts too close to the signal for f_low = {asked:g} Hz, so the "
        f"analysis starts at {used:g} Hz instead: the signal below that is not used, and "
        "the intervals are wider than a longer segment would give."
    )
    return QualityCheck("low_frequency_cut", False, float(used), rule, words)


def _gating_check(result: AnalysisResult) -> QualityCheck:
    """Glitches gated away from the signal (a note) or loud at the signal (a warning)."""
    scan = result.glitches
    rule = "loud short glitches away from the signal are gated"
    if scan is None:
        return QualityCheck("gating", True, 0.0, rule, "Gating was switched off.")
    tc = result.settings.trigger_time + result.fiducial.params["coalescence_time"]
    parts = []
    if scan.gates:
        where = ", ".join(f"{g.centre - tc:+.2f} s" for g in scan.gates)
        parts.append(
            f"{len(scan.gates)} loud short glitch(es) away from the signal were gated out "
            f"(at {where} from coalescence; inverse Tukey window of the whitened data)."
        )
    if scan.at_signal:
        parts.append(
            "Loud short power at the signal itself was left alone (a loud signal looks like "
            "this too); the transient check above judges what the best-fit model leaves there."
        )
    if not parts:
        parts.append("No loud short glitch was found in the segment.")
    # A remedy, not a verdict: a glitch at the signal is the transient check's to flag.
    return QualityCheck("gating", True, float(len(scan.gates)), rule, " ".join(parts))


def _peak_check(result: AnalysisResult) -> QualityCheck:
    """The aligned-spin scan for a higher likelihood peak (a remedy, like gating; a note)."""
    scan = result.mode_scan
    rule = (
        "short signals with a wide spin prior: an aligned-spin template scan checks that "
        "the sampler starts on the highest likelihood peak"
    )
    if scan is None:
        return QualityCheck(
            "spin_peak", True, 0.0, rule,
            "Not needed: the signal is long enough, or the spin prior narrow enough, that the "
            "spins cannot move the best fit to another peak.",
        )  # fmt: skip
    if scan.adopted and scan.candidate is not None:
        p = scan.candidate.params
        words = (
            f"A scan of {scan.templates} spinning templates found a peak {scan.gain:.1f} higher "
            f"in log-likelihood than the fit climbed from the search (chirp mass "
            f"{p['chirp_mass']:.3g} Msun, q {p['mass_ratio']:.2f}, both spins "
            f"{p.get('spin1', 0.0):+.2f}); the sampler started there."
        )
    else:
        words = (
            f"A scan of {scan.templates} spinning templates found no peak clearly higher than "
            "the fit climbed from the search; the sampler started there."
        )
    return QualityCheck("spin_peak", True, max(scan.gain, 0.0), rule, words)
