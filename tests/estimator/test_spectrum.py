"""Welch noise spectra against known spectra of simulated noise, and log-log interpolation."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import scipy.signal

from estimator.data import NoiseSpectrum, StrainSegment
from estimator.errors import InputError
from estimator.spectrum import interpolate_psd, welch_psd

FS = 1024.0
DURATION = 128.0


def _segment(x: np.ndarray, fs: float = FS) -> StrainSegment:
    return StrainSegment(strain=x, sample_rate=fs, start_time=1e9, source="sim.txt")


def _band_means(ratio: np.ndarray, f: np.ndarray, lo: float, hi: float, n: int) -> np.ndarray:
    edges = np.linspace(lo, hi, n + 1)
    return np.array([ratio[(f >= a) & (f < b)].mean() for a, b in itertools.pairwise(edges)])


def test_white_noise_gives_two_sigma_squared_over_fs() -> None:
    # One-sided PSD of white noise of variance sigma^2 sampled at fs: 2 sigma^2 / fs
    # (common practice; Parseval's theorem). Without the median bias correction the
    # estimate would be ln 2 = 0.69 of it (Allen et al. 2012, PRD 85, 122006, app. B).
    sigma = 3e-21
    rng = np.random.default_rng(2024)
    spec = welch_psd(_segment(rng.normal(0.0, sigma, int(DURATION * FS))))
    f = spec.frequencies
    ratio = spec.psd / (2 * sigma**2 / FS)
    band = (f >= 8.0) & (f <= 0.95 * FS / 2)
    # Tolerances: the band mean over ~1800 bins has a standard deviation of 0.55%
    # (63 sub-segments: median of K exponentials has relative spread ~1/(ln2 sqrt K) = 0.18
    # per bin; measured by us over 300 seeds, not a published value), so 3% is 5.4 sigma,
    # a false-alarm rate near 1e-7; each of 8 sub-bands has 1.5%, so 8% is 5.3 sigma,
    # about 1e-6 for all eight together.
    assert ratio[band].mean() == pytest.approx(1.0, abs=0.03)
    np.testing.assert_allclose(_band_means(ratio, f, 8.0, 0.95 * FS / 2, 8), 1.0, atol=0.08)
    assert spec.estimated is True
    assert spec.source == "Welch estimate from sim.txt"
    assert spec.notes == (
        "noise spectrum estimated from the analysed segment with Welch's median method, "
        "4 s sub-segments, 50% overlap; a signal in the data biases it slightly",
    )
    assert f[1] - f[0] == pytest.approx(0.25)
    assert f[-1] == pytest.approx(FS / 2)


def test_coloured_noise_matches_the_known_spectrum() -> None:
    # First-order autoregressive noise x_t = a x_{t-1} + e_t has the one-sided PSD
    # 2 sigma_e^2 / fs / |1 - a exp(-2 pi i f / fs)|^2 (textbook result, e.g. Box &
    # Jenkins, Time Series Analysis, the AR(1) spectrum; from memory). a = 0.99 spans
    # 4.6 decades, testing the window's leakage too.
    a, sigma = 0.99, 1e-21
    rng = np.random.default_rng(77)
    e = rng.normal(0.0, sigma, int(DURATION * FS) + 5000)
    x = scipy.signal.lfilter([1.0], [1.0, -a], e)[5000:]  # drop the start-up transient
    spec = welch_psd(_segment(x))
    f = spec.frequencies
    true = 2 * sigma**2 / FS / np.abs(1 - a * np.exp(-2j * np.pi * f / FS)) ** 2
    # 8 sub-bands, 1.5% spread each (measured by us over 200 seeds): 8% is 5.3 sigma,
    # a false-alarm rate near 1e-6 for all eight.
    np.testing.assert_allclose(
        _band_means(spec.psd / true, f, 4.0, 0.95 * FS / 2, 8), 1.0, atol=0.08
    )


def test_median_resists_a_loud_glitch() -> None:
    sigma = 1e-21
    rng = np.random.default_rng(5)
    x = rng.normal(0.0, sigma, int(64 * FS))
    x[30000:30100] += 1e-18  # a glitch 1000 times the noise, inside 2 of 31 sub-segments
    white = 2 * sigma**2 / FS
    spec = welch_psd(_segment(x))
    band = (spec.frequencies >= 8.0) & (spec.frequencies <= 400.0)
    # Two sub-segments pushed to the top move the median up by about one rank, ~6% for
    # 31 exponential values; the per-bin spread averages down to ~0.8% over the band,
    # so 20% is far outside chance. A mean average is ~190 times too high here.
    assert (spec.psd[band] / white).mean() == pytest.approx(1.0, abs=0.2)
    f, mean_psd = scipy.signal.welch(x, fs=FS, nperseg=4096, noverlap=2048, average="mean")
    assert (mean_psd[(f >= 8.0) & (f <= 400.0)] / white).mean() > 10.0


def test_sub_segments_adapt_to_short_segments() -> None:
    rng = np.random.default_rng(9)
    spec = welch_psd(_segment(rng.normal(0.0, 1e-21, int(12 * FS))))
    assert spec.frequencies[1] == pytest.approx(0.5)  # halved to 2 s: 11 sub-segments
    assert "2 s sub-segments, 50% overlap" in spec.notes[0]
    spec = welch_psd(_segment(rng.normal(0.0, 1e-21, int(5 * FS))))
    assert spec.frequencies[1] == pytest.approx(1.0)


def test_too_short_segment_is_an_error() -> None:
    rng = np.random.default_rng(3)
    with pytest.raises(InputError) as info:
        welch_psd(_segment(rng.normal(0.0, 1e-21, int(4 * FS))))
    assert info.value.field == "psd"
    text = str(info.value)
    assert "the segment of 4 s is too short" in text
    assert "at least 8 sub-segments of at least 1 s (4.5 s of data at 50% overlap)" in text
    with pytest.raises(InputError, match=r"overlap 1\.0 is outside"):
        welch_psd(_segment(np.zeros(int(64 * FS))), overlap=1.0)
    with pytest.raises(InputError, match="sub-segment duration -4"):
        welch_psd(_segment(np.zeros(int(64 * FS))), segment_duration=-4.0)


def _power_law() -> NoiseSpectrum:
    f = np.geomspace(10.0, 2000.0, 40)
    return NoiseSpectrum(frequencies=f, psd=3e-40 * f**-4.0, source="pl.txt")


def test_log_log_interpolation_is_exact_for_a_power_law() -> None:
    # Linear interpolation in log f - log S reproduces any power law exactly (algebra).
    spec = _power_law()
    f = np.linspace(10.0, 2000.0, 1001)
    np.testing.assert_allclose(interpolate_psd(spec, f), 3e-40 * f**-4.0, rtol=1e-12)
    np.testing.assert_allclose(interpolate_psd(spec, spec.frequencies), spec.psd, rtol=1e-13)


def test_outside_the_range_is_infinite_and_shape_kept() -> None:
    spec = _power_law()
    out = interpolate_psd(spec, np.array([[5.0, 10.0], [2000.0, 2500.0]]))
    assert out.shape == (2, 2)
    np.testing.assert_array_equal(np.isinf(out), [[True, False], [False, True]])
    assert np.isnan(interpolate_psd(spec, np.array([np.nan]))[0])


def test_linear_below_the_first_positive_frequency() -> None:
    spec = NoiseSpectrum(frequencies=np.array([0.0, 1.0, 2.0]), psd=np.array([2.0, 4.0, 16.0]))
    # linear from 0 to 1 Hz; above, the power law through (1, 4) and (2, 16) is 4 f^2
    np.testing.assert_allclose(interpolate_psd(spec, [0.0, 0.5, 1.5]), [2.0, 3.0, 9.0])


def test_non_positive_psd_is_an_error() -> None:
    spec = NoiseSpectrum(frequencies=np.array([1.0, 2.0, 3.0]), psd=np.array([1.0, 0.0, 1.0]))
    with pytest.raises(InputError, match="PSD value 0 at 2 Hz is not a positive finite number"):
        interpolate_psd(spec, [1.5])
