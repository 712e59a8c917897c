"""Aligned-spin phase terms and the zero-spin limit.

The spin coefficients of estimator/spins.py are written in the (chi_s, chi_a)
form; here they are checked against the same papers' other published forms
(written from memory, as the module says) and, with spins at zero, against the
non-spinning phase bit for bit. The stationary-phase derivation from the PN
energy and flux is in test_timedomain.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from estimator.conditioning import condition
from estimator.likelihood import ExactLikelihood
from estimator.relbin import RelativeBinningLikelihood
from estimator.relbin_model import ModelRelativeBinning
from estimator.simulate import Injection, design_spectrum, simulate_segment
from estimator.spins import effective_spin, spin_phase_terms
from estimator.waveform import (
    PhaseBasis,
    phase_coefficients,
    symmetric_mass_ratio,
    taylorf2_phase,
)

CASES = [(1.0, 0.3, -0.2), (0.5, 0.9, 0.4), (0.25, -0.7, 0.95), (0.1, 0.0, -0.5)]


@pytest.mark.parametrize(("q", "chi1", "chi2"), CASES)
def test_spin_orbit_15pn_matches_the_beta_form(q: float, chi1: float, chi2: float) -> None:
    """1.5PN: ``4 beta`` with ``beta = (1/12) sum_i (113 (m_i/M)^2 + 75 eta) chi_i``.

    Poisson & Will 1995, PRD 52, 848, Eq. 2.13 (leading spin-orbit term of the
    phase; from memory), against the ``(chi_s, chi_a)`` form of spins.py.
    """
    eta = float(symmetric_mass_ratio(q))
    x1, x2 = 1.0 / (1.0 + q), q / (1.0 + q)
    beta = (113.0 * x1**2 + 75.0 * eta) * chi1 / 12.0 + (113.0 * x2**2 + 75.0 * eta) * chi2 / 12.0
    a3 = float(spin_phase_terms(eta, chi1, chi2)[3][0])
    assert a3 == pytest.approx(4.0 * beta, rel=1e-12, abs=1e-12)


@pytest.mark.parametrize(("q", "chi1", "chi2"), CASES)
def test_spin_spin_2pn_matches_the_sigma_form(q: float, chi1: float, chi2: float) -> None:
    """2PN: ``-10 sigma``, ``sigma = 79/8 eta chi1 chi2 + 81/16 sum_i (m_i/M)^2 chi_i^2``.

    The spin-spin term of Poisson & Will 1995, Eq. 2.13 (``eta (721 - 247)/48 chi1 chi2``
    for aligned spins) plus the self-spin and quadrupole-monopole terms of a black hole
    (Mikoczi, Vasuth & Gergely 2005, PRD 71, 124043: ``(720 kappa - 1)/96 - (240 kappa
    - 7)/96`` per body with ``kappa = 1``); all from memory.
    """
    eta = float(symmetric_mass_ratio(q))
    x1, x2 = 1.0 / (1.0 + q), q / (1.0 + q)
    self_spin = (720.0 - 1.0) / 96.0 - (240.0 - 7.0) / 96.0
    assert self_spin == pytest.approx(81.0 / 16.0)
    sigma = eta * (721.0 - 247.0) / 48.0 * chi1 * chi2 + self_spin * (
        x1**2 * chi1**2 + x2**2 * chi2**2
    )
    a4 = float(spin_phase_terms(eta, chi1, chi2)[4][0])
    assert a4 == pytest.approx(-10.0 * sigma, rel=1e-12, abs=1e-12)


def test_higher_spin_orbit_terms_match_their_published_forms() -> None:
    """2.5PN, 3PN and 3.5PN spin-orbit terms written out one by one against the table.

    ``gamma`` (k = 5): Arun, Buonanno, Faye & Ochsner 2009, PRD 79, 104023, Eq. 6.22;
    k = 6: ``pi (2270/3 delta chi_a + (2270/3 - 520 eta) chi_s)`` (same paper);
    k = 7: Bohe, Marsat, Faye & Blanchet 2013, CQG 30, 075017, Eq. 6.25. All from
    memory. spins.py evaluates them as one matrix product; this writes each term out,
    over broadcast arrays of mass ratios and spins, so a slip in the table shows.
    """
    rng = np.random.default_rng(5)
    q = rng.uniform(0.1, 1.0, (3, 4))
    chi1, chi2 = rng.uniform(-0.99, 0.99, (2, 3, 4))
    eta = symmetric_mass_ratio(q)
    delta = np.sqrt(1.0 - 4.0 * eta)
    chi_s, chi_a = 0.5 * (chi1 + chi2), 0.5 * (chi1 - chi2)
    gamma = (732985.0 / 2268.0 - 24260.0 / 81.0 * eta - 340.0 / 9.0 * eta**2) * chi_s + (
        732985.0 / 2268.0 + 140.0 / 9.0 * eta
    ) * delta * chi_a
    a6 = np.pi * (2270.0 / 3.0 * delta * chi_a + (2270.0 / 3.0 - 520.0 * eta) * chi_s)
    a7 = (
        -25150083775.0 / 3048192.0 + 10566655595.0 / 762048.0 * eta
        - 1042165.0 / 3024.0 * eta**2 + 5345.0 / 36.0 * eta**3
    ) * chi_s + (
        -25150083775.0 / 3048192.0 + 26804935.0 / 6048.0 * eta - 1985.0 / 48.0 * eta**2
    ) * delta * chi_a
    terms = spin_phase_terms(eta, chi1, chi2)
    np.testing.assert_allclose(terms[5][0], -gamma, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(terms[5][1], -3.0 * gamma, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(terms[6][0], a6, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(terms[7][0], a7, rtol=1e-12, atol=1e-9)
    assert all(terms[k][0].shape == q.shape for k in terms)
    scalar = spin_phase_terms(float(eta[0, 0]), float(chi1[0, 0]), float(chi2[0, 0]))
    assert float(scalar[7][0]) == pytest.approx(float(a7[0, 0]), rel=1e-12)


def test_effective_spin_is_the_mass_weighted_mean() -> None:
    """``chi_eff = (m1 chi1 + m2 chi2)/M`` (Ajith et al. 2011, PRL 106, 241101)."""
    m1, m2 = 30.0, 12.0
    value = float(effective_spin(m2 / m1, 0.6, -0.3))
    assert value == pytest.approx((m1 * 0.6 + m2 * -0.3) / (m1 + m2), rel=1e-14)


def test_zero_spins_reproduce_the_non_spinning_phase_exactly() -> None:
    """chi1 = chi2 = 0 gives the non-spinning TaylorF2 phase to machine precision."""
    f = np.linspace(20.0, 1000.0, 500)
    mc, q = np.array([1.2, 9.5, 24.0]), np.array([0.5, 0.8, 1.0])
    zero = np.zeros(3)
    np.testing.assert_array_equal(
        taylorf2_phase(f, mc, q, spin1=zero, spin2=zero), taylorf2_phase(f, mc, q)
    )
    basis = PhaseBasis(f)
    np.testing.assert_allclose(
        basis.phase(mc, q, zero, zero), basis.phase(mc, q), rtol=0.0, atol=1e-12
    )
    for eta in (0.1, 0.2, 0.25):
        plain, spun = phase_coefficients(eta), phase_coefficients(eta, 0.0, 0.0)
        for k in plain:
            assert np.array_equal(plain[k][0], spun[k][0])


@pytest.fixture(scope="module")
def heavy_data():  # type: ignore[no-untyped-def]
    """A spinning heavy binary (merger model) at SNR ~ 25 in design noise, seed 4."""
    spectrum = design_spectrum()
    start = 1_000_000_000.0
    inj = Injection(22.0, 0.7, 900.0, start + 6.0, 0.4, spin1=0.4, spin2=-0.2)
    seg = simulate_segment(
        spectrum, duration=8.0, sample_rate=2048.0, start_time=start,
        rng=np.random.default_rng(4), injection=inj, f_start=15.0,
    )  # fmt: skip
    return condition(seg, spectrum, f_low=20.0, f_high=900.0), inj


def _points(
    inj: Injection, n: int, rng: np.random.Generator, scale: float
) -> dict[str, np.ndarray]:
    return {
        "chirp_mass": inj.chirp_mass * (1.0 + scale * 0.003 * rng.standard_normal(n)),
        "mass_ratio": np.clip(inj.mass_ratio + scale * 0.02 * rng.standard_normal(n), 0.2, 1.0),
        "effective_distance": inj.effective_distance * (1.0 + 0.1 * rng.standard_normal(n)),
        "coalescence_time": scale * 2e-4 * rng.standard_normal(n),
        "spin1": np.clip(inj.spin1 + scale * 0.03 * rng.standard_normal(n), -0.99, 0.99),
        "spin2": np.clip(inj.spin2 + scale * 0.03 * rng.standard_normal(n), -0.99, 0.99),
    }


@pytest.mark.parametrize("model", ["merger", "taylorf2"])
def test_binned_likelihood_with_spins_matches_exact(heavy_data, model: str) -> None:  # type: ignore[no-untyped-def]
    """Relative binning with spins agrees with the exact likelihood near the peak.

    Zackay, Dai & Venumadhav 2018 (arXiv:1806.08792) report binning errors well below
    0.1 in ln L near the fiducial; we require 0.05 on points spread about as widely as
    the posterior's tails (up to 0.3% in chirp mass, 0.03 in each spin, 0.2 ms; points
    more than 30 below the peak are not compared).
    """
    data, inj = heavy_data
    fid = {"chirp_mass": inj.chirp_mass, "mass_ratio": inj.mass_ratio,
           "effective_distance": inj.effective_distance, "coalescence_time": 0.0,
           "spin1": inj.spin1, "spin2": inj.spin2}  # fmt: skip
    reference = inj.coalescence_time
    exact = ExactLikelihood([data], reference, model=model)
    binned: ModelRelativeBinning | RelativeBinningLikelihood
    if model == "merger":
        # The general binning's reference reaches the merger of spins up to 0.99
        # (estimator/relbin_model.py), a wider band than the fiducial's own: it needs
        # more bins for the same accuracy (measured: 0.15 at 96 bins, 0.05 at 192).
        binned = ModelRelativeBinning([data], reference, fid, n_bins=256)
    else:
        binned = RelativeBinningLikelihood([data], reference, fid, n_bins=96)
    peak = exact.log_likelihood({k: np.array([v]) for k, v in fid.items()})[0]
    rng = np.random.default_rng(0)
    for scale in (1.0, 0.5, 0.25, 0.125):  # down to where the posterior's tails are
        points = _points(inj, 60, rng, scale)
        near = exact.log_likelihood(points) > peak - 30.0
        if near.sum() >= 20:
            break
    assert near.sum() >= 20
    diff = exact.log_likelihood(points) - binned.log_likelihood(points)
    assert np.max(np.abs(diff[near])) < 0.05
