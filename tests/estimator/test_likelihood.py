"""The noise model, the inner product and the likelihoods, checked by independent routes."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.fft
import scipy.integrate
import scipy.signal
import scipy.stats

from estimator.conditioning import condition, whiten
from estimator.data import StrainSegment
from estimator.likelihood import ExactLikelihood, log_i0
from estimator.relbin import RelativeBinningLikelihood
from estimator.simulate import Injection, design_spectrum, injection_strain, simulate_segment
from estimator.waveform import taylorf2
from tests.reference_psd import design_psd_fit

START = 1_000_000_000.0
SPECTRUM = design_spectrum()


def _params(**values: float) -> dict[str, np.ndarray]:
    return {k: np.atleast_1d(np.asarray(v, dtype=float)) for k, v in values.items()}


@pytest.fixture(scope="module")
def noise_data():
    rng = np.random.default_rng(11)
    seg = simulate_segment(SPECTRUM, duration=32.0, sample_rate=2048.0, start_time=START, rng=rng)
    return seg, condition(seg, SPECTRUM, f_low=20.0, f_high=900.0)


def test_whitened_noise_is_standard_normal(noise_data):
    """Coloured noise divided by its own ASD is N(0, 1) in every frequency bin.

    Definition of the one-sided PSD, <|n(f)|^2> = (T/2) S(f) (common practice);
    with the window's noise power mean(w^2) included. KS test against N(0, 1)
    at a false-alarm rate of 1e-3 (fixed seed, so the outcome is deterministic).
    """
    _, data = noise_data
    sigma = np.sqrt(data.duration * data.psd * data.window_factor / 4.0)
    x = np.concatenate([data.strain.real / sigma, data.strain.imag / sigma])
    assert scipy.stats.kstest(x, "norm").pvalue > 1e-3
    assert np.var(x) == pytest.approx(1.0, abs=0.02)  # 116k values: sd of the estimate 0.004


def test_whitened_time_series_has_unit_variance(noise_data):
    """The whitening filter gives unit-variance, Gaussian samples away from the tapers."""
    _, data = noise_data
    white = whiten(data, data.strain)
    inner = white[4096:-4096]  # drop 2 s at each end (tapers)
    assert np.std(inner) == pytest.approx(1.0, abs=0.03)
    assert scipy.stats.kstest(inner[::7], "norm").pvalue > 1e-3  # thinned: neighbours correlate


def test_frequency_domain_snr_equals_time_domain_matched_filter():
    """Optimal SNR sqrt(<h|h>) in the frequency domain vs a time-domain matched filter.

    The time-domain route convolves h(t) with the inverse-noise (matched) filter
    built from the analytic design fit (Ajith 2011, Eq. 4.7) and integrates
    against h(t): <h|h> = int h(t) (q * h)(t) dt with q~(f) = 2/S(|f|) (e.g.
    Maggiore 2008, Gravitational Waves vol. 1, Sec. 7.3). Agreement within 1%.
    """
    fs, duration, f_low, f_high = 2048.0, 16.0, 20.0, 800.0
    n = int(fs * duration)
    inj = Injection(
        chirp_mass=12.0, mass_ratio=0.6, effective_distance=400.0, coalescence_time=START + 12.0,
        model="taylorf2",
    )
    h_f = injection_strain(inj, n_samples=n, sample_rate=fs, start_time=START, f_start=15.0)
    h_t = scipy.fft.irfft(h_f, n) * fs
    blank = StrainSegment(np.zeros(n), fs, START)
    data = condition(blank, SPECTRUM, f_low=f_low, f_high=f_high)
    like = ExactLikelihood([data], inj.coalescence_time)
    _, hh = like.overlaps(
        _params(
            chirp_mass=inj.chirp_mass,
            mass_ratio=inj.mass_ratio,
            effective_distance=inj.effective_distance,
            coalescence_time=0.0,
        )
    )
    snr_fd = float(np.sqrt(hh[0, 0]))

    # Time-domain route: <h|h> = int h(t) (q * h)(t) dt with q the inverse-noise filter,
    # two-sided response 2/S(|f|) in the band, as an FIR kernel (8 s, Tukey-tapered).
    m = int(8 * fs) + 1  # odd: zero lag sits at the centre, as fftconvolve "same" assumes
    f = np.fft.rfftfreq(m, 1 / fs)
    response = np.zeros_like(f)
    band = (f >= f_low) & (f <= f_high)
    response[band] = 2.0 / design_psd_fit(f[band])
    kernel = fs * np.fft.fftshift(np.fft.irfft(response, m)) * scipy.signal.windows.tukey(m, 0.2)
    filtered = scipy.signal.fftconvolve(h_t, kernel, mode="same") / fs
    snr_td = float(np.sqrt(np.sum(h_t * filtered) / fs))
    assert snr_td == pytest.approx(snr_fd, rel=0.01)


def test_exact_likelihood_matches_direct_inner_products(noise_data):
    """ExactLikelihood vs <d|h>, <h|h> written out with taylorf2 (complex128 throughout)."""
    _, data = noise_data
    rng = np.random.default_rng(3)
    mc = rng.uniform(5, 30, 6)
    q = rng.uniform(0.3, 1.0, 6)
    dist = rng.uniform(100, 900, 6)
    tc = rng.uniform(-0.1, 0.1, 6)
    ref = START + 20.0
    like = ExactLikelihood([data], ref)
    got = like.log_likelihood(
        _params(chirp_mass=mc, mass_ratio=q, effective_distance=dist, coalescence_time=tc)
    )
    h = taylorf2(data.frequencies, mc, q, dist, tc + ref - data.epoch)
    z = data.inner(data.strain[None, :], h)
    hh = data.inner(h, h).real
    want = log_i0(np.abs(z)) - 0.5 * hh
    # Single-precision trigonometry inside ExactLikelihood: errors ~1e-5 relative at most.
    assert np.all(np.abs(got - want) <= 1e-4 * np.maximum(1.0, np.abs(want))), (got, want)


def test_phase_marginalisation_equals_quadrature():
    """ln (1/2pi) int exp(<d|h(phi)> - <h|h>/2) dphi == ln I0(|z|) - <h|h>/2.

    The Bessel-function identity (Abramowitz & Stegun 1964, Eq. 9.6.16) checked
    by numerical quadrature over the phase, at a modest SNR where ln I0 is far
    from its large-argument limit.
    """
    rng = np.random.default_rng(8)
    seg = simulate_segment(
        SPECTRUM,
        duration=8.0,
        sample_rate=2048.0,
        start_time=START,
        rng=rng,
        injection=Injection(20.0, 0.8, 3000.0, START + 6.0, 0.4, model="taylorf2"),
    )
    data = condition(seg, SPECTRUM, f_low=20.0, f_high=900.0)
    p = dict(chirp_mass=20.1, mass_ratio=0.8, effective_distance=3200.0, coalescence_time=0.001)
    like = ExactLikelihood([data], START + 6.0)
    got = float(like.log_likelihood(_params(**p))[0])

    def integrand(phi: float) -> float:
        h = taylorf2(
            data.frequencies,
            p["chirp_mass"],
            p["mass_ratio"],
            p["effective_distance"],
            p["coalescence_time"] + 6.0,
            phi,
        )
        return float(np.exp(data.inner(data.strain, h).real - 0.5 * data.inner(h, h).real))

    total, _ = scipy.integrate.quad(integrand, 0.0, 2.0 * np.pi, limit=200)
    # 1e-4: the likelihood uses single-precision trigonometry (relative error ~1e-7 here);
    # dropping the marginalisation (ln I0(x) -> x) would be off by ~2.
    assert np.log(total / (2.0 * np.pi)) == pytest.approx(got, abs=1e-4)
    assert got < 30.0  # the test is meant to probe the small-argument regime


@pytest.mark.parametrize(("mc", "q"), [(1.25, 0.9), (25.0, 0.6)])
def test_relative_binning_matches_exact_near_fiducial(mc, q):
    """Binned vs exact log-likelihood for points spread around the fiducial.

    Zackay, Dai & Venumadhav 2018 report |Delta ln L| ~ 1e-2 for ~100 bins;
    we require 0.05 over points scattered about as widely as a posterior.
    """
    rng = np.random.default_rng(4)
    duration = 64.0 if mc < 2 else 8.0
    tc = START + duration - 2.0
    inj = Injection(mc, q, 120.0 if mc < 2 else 900.0, tc, 0.3, model="taylorf2")
    seg = simulate_segment(
        SPECTRUM,
        duration=duration,
        sample_rate=2048.0,
        start_time=START,
        rng=rng,
        injection=inj,
        f_start=25.0,
    )
    data = condition(seg, SPECTRUM, f_low=30.0, f_high=900.0)
    fid = {
        "chirp_mass": mc,
        "mass_ratio": q,
        "effective_distance": inj.effective_distance,
        "coalescence_time": 0.0,
    }
    exact = ExactLikelihood([data], tc)
    binned = RelativeBinningLikelihood([data], tc, fid, n_bins=96)
    # Candidate points scattered about the fiducial; keep those a posterior would hold
    # (within 10 of the peak log-likelihood: > 99.8% of a 4-D Gaussian's mass).
    n = 4000
    rel = 3e-5 if mc < 2 else 3e-3
    pts = _params(
        chirp_mass=mc * (1 + rel * rng.standard_normal(n)),
        mass_ratio=np.clip(q + 0.1 * rng.standard_normal(n), 0.1, 1.0),
        effective_distance=inj.effective_distance * (1 + 0.1 * rng.standard_normal(n)),
        coalescence_time=5e-4 * rng.standard_normal(n),
    )
    b_all = binned.log_likelihood(pts)
    keep = np.flatnonzero(b_all > b_all.max() - 10.0)[:60]
    assert keep.size >= 30
    pts = {k: v[keep] for k, v in pts.items()}
    e, b = exact.log_likelihood(pts), binned.log_likelihood(pts)
    assert np.max(e) > 50.0  # loud enough that errors would show
    assert np.max(np.abs(e - b)) < 0.05


@pytest.mark.parametrize(("mc", "f_high"), [(1.25, 900.0), (1.25, 1900.0), (25.0, 900.0)])
def test_binned_fast_path_equals_its_general_form(mc, f_high):
    """log_likelihood's and matched_filter_snr's few-operation paths against their
    general forms from overlaps(), with every ISCO above the band, all in one bin, and
    spread over several bins."""
    rate = 4096.0
    duration = 32.0 if mc < 2 else 8.0
    tc = START + duration - 2.0
    seg = simulate_segment(SPECTRUM, duration=duration, sample_rate=rate, start_time=START,
                           rng=np.random.default_rng(6),
                           injection=Injection(mc, 0.8, 300.0, tc, 0.3, model="taylorf2"),
                           f_start=25.0)
    data = condition(seg, SPECTRUM, f_low=30.0, f_high=f_high)
    fid = {"chirp_mass": mc, "mass_ratio": 0.8, "effective_distance": 300.0,
           "coalescence_time": 0.0}
    binned = RelativeBinningLikelihood([data], tc, fid, n_bins=64)
    rng = np.random.default_rng(2)
    for spread in (1e-5, 1e-2):
        pts = _params(chirp_mass=mc * (1 + spread * rng.standard_normal(40)),
                      mass_ratio=np.clip(0.8 + 30 * spread * rng.standard_normal(40), 0.2, 1.0),
                      effective_distance=300.0 * (1 + 0.1 * rng.standard_normal(40)),
                      coalescence_time=1e-4 * rng.standard_normal(40))
        z, hh = binned.overlaps(pts)
        want = np.sum(log_i0(np.abs(z)) - 0.5 * hh, axis=0)
        np.testing.assert_allclose(binned.log_likelihood(pts), want, rtol=0, atol=1e-6)
        # The SNR's fast path (amplitude cancelled) against sqrt(|z|^2 / <h|h>).
        np.testing.assert_allclose(binned.matched_filter_snr(pts),
                                   np.sqrt(np.sum(np.abs(z) ** 2 / hh, axis=0)), rtol=1e-6)


def test_binned_overlap_has_the_exact_phase():
    """The binned z carries the exact z's phase, not only its modulus (the report's
    best-fit model is drawn at arg z)."""
    tc = START + 20.0
    inj = Injection(20.0, 0.7, 300.0, tc, 0.9, model="taylorf2")
    data = condition(
        simulate_segment(SPECTRUM, duration=32.0, sample_rate=2048.0, start_time=START,
                         rng=np.random.default_rng(12), injection=inj),
        SPECTRUM, f_low=20.0, f_high=900.0,
    )
    p = _params(chirp_mass=20.0, mass_ratio=0.7, effective_distance=300.0, coalescence_time=0.0)
    fid = {k: float(v[0]) for k, v in p.items()}
    z_exact, _ = ExactLikelihood([data], tc).overlaps(p)
    z_binned, _ = RelativeBinningLikelihood([data], tc, fid, n_bins=64).overlaps(p)
    assert abs(np.angle(z_binned[0, 0] / z_exact[0, 0])) < 1e-3
    assert abs(abs(z_binned[0, 0]) / abs(z_exact[0, 0]) - 1) < 1e-4


def test_profiled_distance_is_the_likelihood_at_its_maximum():
    """The fiducial climb's distance-profiled ln L (one overlap evaluation) equals the
    likelihood evaluated at the returned distance, which is the maximum over distance
    (up to the large-SNR form D = <h1|h1>/|z1| the profile uses)."""
    from estimator.fiducial import _profile_distance

    tc = START + 14.0
    inj = Injection(12.0, 0.7, 400.0, tc, 0.4, model="taylorf2")
    data = condition(
        simulate_segment(SPECTRUM, duration=16.0, sample_rate=2048.0, start_time=START,
                         rng=np.random.default_rng(21), injection=inj),
        SPECTRUM, f_low=20.0, f_high=900.0,
    )
    x = np.array([12.0 * (1 + 1e-4), 0.72, 2e-4])
    for like in (ExactLikelihood([data], tc),
                 RelativeBinningLikelihood([data], tc, _fid(12.0, 0.7, 400.0), n_bins=64)):
        got, dist = _profile_distance(like, x, {})
        p = _params(chirp_mass=[x[0]] * 3, mass_ratio=[x[1]] * 3, coalescence_time=[x[2]] * 3,
                    effective_distance=[dist, 0.9 * dist, 1.1 * dist])
        full = like.log_likelihood(p)
        # rel 1e-6: both likelihoods use single-precision trigonometry (see above)
        assert got == pytest.approx(full[0], rel=1e-6)
        assert full[0] > max(full[1], full[2])
        assert got > 20.0  # a loud signal: the profile's large-SNR form holds


def _fid(mc: float, q: float, dist: float) -> dict[str, float]:
    return {"chirp_mass": mc, "mass_ratio": q, "effective_distance": dist,
            "coalescence_time": 0.0}
