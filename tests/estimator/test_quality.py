"""Data-quality verdicts on seeded drills: clean data, a mis-scaled PSD, a loud burst.

Sources
-------
* Sample variance of n independent N(0, 1) values: n s^2 ~ chi^2_n, variance of
  s^2 = 2/n (Kendall & Stuart, The Advanced Theory of Statistics, Vol. 1; from memory).
* Band-limited white noise of bandwidth B carries 2 B independent samples per
  second (Nyquist–Shannon; common practice): checked here by Monte Carlo.
* Optimal SNR^2 = 4 int |h|^2 / S df (Cutler & Flanagan 1994, PRD 49, 2658, Eq. 2.4):
  the band-edge share is checked against scipy.integrate.quad of the analytic
  design PSD (Ajith 2011, PRD 84, 084037, Eq. 4.7).
* Whitening by a PSD scaled by a factor c scales the whitened variance by 1/c
  (Parseval's theorem; common practice).

False-alarm rates: the variance and transient checks flag clean Gaussian data with
probability 1e-4 each, the Anderson–Darling test with probability 0.01, so the
clean drill below passes all checks except by a ~1% chance; the seeds are fixed,
so each test is deterministic. The mis-scaled PSD moves the variance by about 25
standard deviations, the burst's 50 ms window holds about 9 times the noise
power against a threshold of 1.8 (measured), so those flags are not marginal.
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest
import scipy.fft
import scipy.integrate
import scipy.stats

from estimator.analysis import AnalysisResult, AnalysisSettings, run_analysis
from estimator.conditioning import condition
from estimator.data import NoiseSpectrum, StrainSegment
from estimator.models import model_parts, model_top
from estimator.quality import (
    BAND_FRACTION_LIMIT,
    FALSE_ALARM,
    QualityReport,
    assess_quality,
    residual_series,
    variance_range,
)
from estimator.simulate import Injection, analytic_design_psd, design_spectrum, simulate_segment
from estimator.spectrum import interpolate_psd
from estimator.summary import build_summary, derive_samples
from service.drill import optimal_snr
from service.report import render_report
from tests.service.test_report import parse

SPECTRUM = design_spectrum()
START = 1_000_000_000.0
DURATION, RATE, F_LOW, F_HIGH = 8.0, 2048.0, 20.0, 900.0
TC = START + DURATION - 2.0


def _settings() -> AnalysisSettings:
    return AnalysisSettings(
        trigger_time=TC + 0.002, f_low=F_LOW, f_high=F_HIGH, seed=3,
        chirp_mass_range=(10.0, 40.0), target_effective_samples=500, max_steps=2000,
        spin_max=0.0,  # the checks do not depend on the spins; four parameters run faster
    )  # fmt: skip


@pytest.fixture(scope="module")
def segment() -> StrainSegment:
    """Heavy binary (chirp mass 20 Msun, q = 0.8) at SNR 15 in design noise, seed 11."""
    unit = Injection(20.0, 0.8, 1000.0, TC, 1.3)
    rho = optimal_snr(
        unit, SPECTRUM, duration=DURATION, sample_rate=RATE, start_time=START, f_low=F_LOW
    )
    inj = dataclasses.replace(unit, effective_distance=1000.0 * rho / 15.0)
    return simulate_segment(
        SPECTRUM, duration=DURATION, sample_rate=RATE, start_time=START,
        rng=np.random.default_rng(11), injection=inj, f_start=15.0,
    )  # fmt: skip


@pytest.fixture(scope="module")
def clean(segment: StrainSegment) -> AnalysisResult:
    return run_analysis(segment, SPECTRUM, _settings())


def _by_name(report: QualityReport) -> dict[str, tuple[bool, float]]:
    return {c.name: (c.passed, c.value) for c in report.checks}


def test_clean_data_pass_every_check(clean: AnalysisResult) -> None:
    report = assess_quality(clean)
    checks = _by_name(report)
    assert report.passed, [(c.name, c.value, c.threshold) for c in report.flags]
    assert set(checks) == {
        "residual_variance", "residual_normality", "transient",
        "segment_edges", "band_edge", "likelihood_check", "low_frequency_cut", "gating",
        "spin_peak",
    }  # fmt: skip
    # Unit variance within 4 standard deviations of its sampling error sqrt(2 / (2 B T)).
    _, residual, _ = residual_series(clean)
    n_eff = 2.0 * (F_HIGH - F_LOW) * residual.size / RATE
    assert abs(checks["residual_variance"][1] - 1.0) < 4.0 * np.sqrt(2.0 / n_eff)
    assert report.to_dict()["flags"] == []


def test_misscaled_psd_is_flagged_fast(clean: AnalysisResult, segment: StrainSegment) -> None:
    """The clean fit with the data re-whitened by the PSD times 1.3: variance 1/1.3."""
    wrong = NoiseSpectrum(SPECTRUM.frequencies, SPECTRUM.psd * 1.3, source="scaled")
    data = condition(segment, wrong, f_low=F_LOW, f_high=F_HIGH, taper_duration=0.5)
    report = assess_quality(dataclasses.replace(clean, data=data, spectrum=wrong))
    passed, value = _by_name(report)["residual_variance"]
    assert not passed
    assert value == pytest.approx(1.0 / 1.3, abs=0.03)


@pytest.mark.slow
def test_misscaled_psd_is_flagged(segment: StrainSegment) -> None:
    """The analysis is given the PSD times 1.3: the residual variance drops to 1/1.3."""
    wrong = NoiseSpectrum(SPECTRUM.frequencies, SPECTRUM.psd * 1.3, source="scaled")
    report = assess_quality(run_analysis(segment, wrong, _settings()))
    passed, value = _by_name(report)["residual_variance"]
    assert not passed
    assert value == pytest.approx(1.0 / 1.3, abs=0.03)
    assert "residual_variance" in report.to_dict()["flags"]
    # The transient check is normalised by the measured variance, so it stays quiet.
    assert _by_name(report)["transient"][0]


def test_loud_burst_before_coalescence_is_flagged(segment: StrainSegment) -> None:
    """Sine-Gaussian at 100 Hz, sigma 12.5 ms (about 50 ms long), SNR 30, 1 s before t_c."""
    t = np.arange(segment.strain.size) / RATE
    t0, sigma = TC - 1.0 - START, 0.0125
    burst = np.exp(-((t - t0) ** 2) / (2 * sigma**2)) * np.sin(2 * np.pi * 100.0 * (t - t0))
    f = np.arange(t.size // 2 + 1) * RATE / t.size
    band = (f >= F_LOW) & (f <= F_HIGH)
    tilde = scipy.fft.rfft(burst)[band] / RATE
    snr = np.sqrt(
        4 * RATE / t.size * np.sum(np.abs(tilde) ** 2 / interpolate_psd(SPECTRUM, f[band]))
    )
    glitched = dataclasses.replace(segment, strain=segment.strain + burst * 30.0 / snr)
    # Without gating the transient check flags it ...
    ungated = dataclasses.replace(_settings(), gating=False)
    report = assess_quality(run_analysis(glitched, SPECTRUM, ungated))
    check = next(c for c in report.checks if c.name == "transient")
    assert not check.passed
    assert check.value > 5.0
    assert "-1.0" in check.explanation  # located at about -1.0 s from coalescence
    # ... with gating (the default) it is gated out, said so, and the residual is clean.
    result = run_analysis(glitched, SPECTRUM, _settings())
    assert result.glitches is not None
    assert len(result.glitches.gates) == 1
    checks = {c.name: c for c in assess_quality(result).checks}
    assert checks["transient"].passed
    assert "gated" in checks["gating"].explanation
    assert "-1.0" in checks["gating"].explanation


def test_variance_range_matches_normal_approximation() -> None:
    """For large n the chi^2_n / n range tends to 1 +- z sqrt(2/n) (central limit theorem)."""
    n = 1e6
    lo, hi = variance_range(n)
    z = scipy.stats.norm.isf(FALSE_ALARM / 2)
    assert lo == pytest.approx(1 - z * np.sqrt(2 / n), abs=2e-5)
    assert hi == pytest.approx(1 + z * np.sqrt(2 / n), abs=2e-5)


def test_band_limited_noise_has_two_b_independent_samples_per_second() -> None:
    """Monte Carlo: the spread of the sample variance is sqrt(2 / (2 B T)).

    400 seeded realisations; the spread's own relative error is 1/sqrt(2 * 400) = 3.5%,
    so a 15% tolerance is a 4-sigma test (false-alarm rate ~6e-5).
    """
    rng = np.random.default_rng(2024)
    n, fs, f_lo, f_hi = 4096, 2048.0, 20.0, 900.0
    f = np.fft.rfftfreq(n, 1 / fs)
    mask = (f >= f_lo) & (f <= f_hi)
    spectra = rng.standard_normal((400, f.size)) + 1j * rng.standard_normal((400, f.size))
    x = np.fft.irfft(spectra * mask, n)
    x /= np.sqrt(np.mean(x**2))
    variances = np.mean(x**2, axis=1)
    expected = np.sqrt(2.0 / (2 * (f_hi - f_lo) * n / fs))
    assert np.std(variances) == pytest.approx(expected, rel=0.15)


def test_band_edge_share_matches_quadrature(clean: AnalysisResult) -> None:
    """Lower the band's top to 60 Hz: the flagged share equals the quad integral."""
    cut = dataclasses.replace(clean, data=dataclasses.replace(clean.data, f_high=60.0))
    check = next(c for c in assess_quality(cut).checks if c.name == "band_edge")
    p = clean.fiducial.params
    f_isco = float(model_top(clean.model, p["chirp_mass"], p["mass_ratio"]))

    def power(f: float) -> float:
        factor = model_parts(clean.model, np.array([f]), p["chirp_mass"], p["mass_ratio"])[0]
        return float(f ** (-7.0 / 3.0) * factor[0] ** 2 / analytic_design_psd(np.array([f]))[0])

    total = scipy.integrate.quad(power, F_LOW, f_isco, limit=200)[0]
    above = scipy.integrate.quad(power, 60.0, f_isco, limit=200)[0]
    assert check.value == pytest.approx(above / total, abs=0.01)
    assert not check.passed
    assert check.value > BAND_FRACTION_LIMIT


def test_signal_in_taper_and_failed_likelihood_check_are_flagged(clean: AnalysisResult) -> None:
    params = dict(clean.fiducial.params)
    # Move coalescence to 1 s after the segment start: the 1.5 s chirp starts before it.
    params["coalescence_time"] = START + 1.0 - clean.settings.trigger_time
    moved = dataclasses.replace(clean, fiducial=dataclasses.replace(clean.fiducial, params=params))
    edges = next(c for c in assess_quality(moved).checks if c.name == "segment_edges")
    assert not edges.passed
    assert edges.value < 0
    failed = dataclasses.replace(
        clean, check=dataclasses.replace(clean.check, passed=False, max_abs_difference=0.31)
    )
    check = next(c for c in assess_quality(failed).checks if c.name == "likelihood_check")
    assert not check.passed
    assert check.value == pytest.approx(0.31)
    assert "0.31" in check.explanation


def test_summary_and_report_carry_the_verdicts(clean: AnalysisResult) -> None:
    failed = dataclasses.replace(
        clean, check=dataclasses.replace(clean.check, passed=False, max_abs_difference=0.31)
    )
    derived = derive_samples(failed, np.random.default_rng(0))
    summary = build_summary(failed, derived, inputs={}, label="drill-quality")
    text = json.dumps(summary["quality"], allow_nan=False)
    assert json.loads(text)["flags"] == ["likelihood_check"]
    html = render_report(summary, images={})
    assert "Data quality" in html
    assert html.count('class="badge fail">flag<') == 1
    assert html.count('class="badge pass">pass<') >= 5
    assert 'id="quality-flags"' in html
    # Tags nest (HTML Living Standard, 13.1.2) and the flagged row shows its numbers.
    cells = [c.strip() for c in parse(html).rows["quality-likelihood_check"]]
    assert cells[1:4] == ["flag", "0.31", "max |Δ ln L| <= 0.05"]
    assert "0.31" in cells[4]
    quiet = render_report(build_summary(clean, derived, inputs={}, label="ok"), images={})
    assert 'id="quality-flags"' not in quiet


class _ShiftedNormal:
    """A stand-in 'exact' likelihood: N(1, 1) in x, where the samples follow N(0, 1)."""

    def log_likelihood(self, params: dict[str, np.ndarray]) -> np.ndarray:
        x = params["x"]
        return -0.5 * (x - 1.0) ** 2


def test_reweighting_recovers_the_target_distribution() -> None:
    """Sampling-importance resampling from N(0,1) to N(1,1) (Rubin 1988).

    The efficiency (E w)^2 / E w^2 of that shift is exp(-1) = 0.368 (Gaussian
    integral, derived here); 20000 samples give a mean within 0.06 of 1 (five
    standard errors of the ~7400 effective samples: false alarm below 1e-6).
    """
    from estimator.posterior import LikelihoodCheck, reweight_exactly

    rng = np.random.default_rng(4)
    x = rng.standard_normal(20_000)
    check = LikelihoodCheck(100, 1.0, 0.05, False, 96, 2)
    samples, log_like, out = reweight_exactly(
        {"x": x}, -0.5 * x**2, _ShiftedNormal(), check, rng  # type: ignore[arg-type]
    )
    assert out.reweighted
    assert not out.passed
    assert out.reweight_efficiency == pytest.approx(np.exp(-1.0), abs=0.03)
    assert abs(samples["x"].mean() - 1.0) < 0.06
    assert np.allclose(log_like, -0.5 * (samples["x"] - 1.0) ** 2)


def test_failed_check_falls_back_to_the_exact_likelihood(segment: StrainSegment) -> None:
    """A tolerance no binning meets: the samples are reweighted with the exact likelihood."""
    from estimator.likelihood import ExactLikelihood

    settings = dataclasses.replace(_settings(), likelihood_tolerance=1e-9, max_refinements=0)
    result = run_analysis(segment, SPECTRUM, settings)
    assert not result.check.passed
    assert result.check.reweighted
    assert 0.5 < result.check.reweight_efficiency <= 1.0  # binned and exact differ by ~0.01
    exact = ExactLikelihood([result.data], settings.trigger_time, model=result.model)
    head = {k: v[:50] for k, v in result.samples.items()}
    assert np.allclose(exact.log_likelihood(head), result.sample_log_likelihood[:50], atol=1e-6)
    check = next(c for c in assess_quality(result).checks if c.name == "likelihood_check")
    assert not check.passed
    assert "exact likelihood was then used" in check.explanation
    summary = build_summary(result, derive_samples(result, np.random.default_rng(0)),
                            inputs={}, label="fallback")  # fmt: skip
    assert summary["diagnostics"]["likelihood_check"]["reweighted_with_exact_likelihood"]
    assert "Reweighted with the exact likelihood" in render_report(summary, images={})
