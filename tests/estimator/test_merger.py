"""Checks of the remnant fits and of the merger model built on them.

Sources (all values quoted from memory of the papers named)
-----------------------------------------------------------
* Scheel et al. 2009, PRD 79, 024003: equal-mass non-spinning merger,
  ``M_f/M = 0.95162``, ``a_f = 0.68646``.
* Leaver 1985, Proc. R. Soc. A 402, 285: fundamental ``l = m = 2`` Schwarzschild
  mode ``M omega = 0.37367 - 0.08896 i``; Kerr ``a = 0.9``: ``0.6716 - 0.0648 i``
  (as tabulated in Berti, Cardoso & Will 2006, PRD 73, 064030).
* Hemberger et al. 2013, PRD 88, 064014: equal masses with aligned spins 0.97
  radiate about 11% of the total mass (we accept 9% to 12.5%).
* Ajith et al. 2008, PRD 77, 104017, Eq. 4.13 and Table I: the amplitude and its
  transition frequencies (recomputed here by hand from the table).
* Ajith 2011, PRD 84, 084037, Eq. 4.7: the design noise fit used for the SNR.
* Cutler & Flanagan 1994, PRD 49, 2658, Eq. 3.3: ``2 pi t(f) = dPsi/df``.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.typing import NDArray

from estimator.merger import (
    MergerFrequencies,
    junction_frequency,
    merger_frequencies,
    merger_parts,
    merger_strain,
    model_top_frequency,
)
from estimator.remnant import final_mass, final_spin, qnm_frequency, radiated_energy, ringdown
from estimator.simulate import design_spectrum
from estimator.waveform import (
    MSUN_SECONDS,
    isco_frequency,
    phase_derivatives,
    symmetric_mass_ratio,
    taylorf2,
    taylorf2_phase,
)

Array = NDArray[np.float64]


def _chirp(total: float, q: float) -> float:
    return float(total * symmetric_mass_ratio(q) ** 0.6)


def _freqs(total: float, q: float, s1: float = 0.0, s2: float = 0.0) -> MergerFrequencies:
    eta = symmetric_mass_ratio(q)
    fr = merger_frequencies(total, eta, q, s1, s2)
    return MergerFrequencies(*(float(x) for x in fr))  # type: ignore[arg-type]


# --- remnant -----------------------------------------------------------------------


def test_equal_mass_remnant_matches_numerical_relativity() -> None:
    # Scheel et al. 2009: M_f/M = 0.95162, a_f = 0.68646.
    assert final_mass(1.0, 0.0, 0.0) == pytest.approx(0.95162, rel=3e-3)
    assert final_spin(1.0, 0.0, 0.0) == pytest.approx(0.68646, rel=3e-3)


@pytest.mark.parametrize(("spin", "omega"), [(0.0, 0.37367 - 0.08896j), (0.9, 0.6716 - 0.0648j)])
def test_qnm_fit_matches_perturbation_theory(spin: float, omega: complex) -> None:
    # Leaver 1985; the Berti-Cardoso-Will fit is good to a few per cent.
    f_dimless, quality = qnm_frequency(spin)
    assert f_dimless == pytest.approx(omega.real, rel=0.03)
    assert quality == pytest.approx(omega.real / (2.0 * -omega.imag), rel=0.03)


@pytest.mark.parametrize("chi1", [-0.8, 0.0, 0.5, 0.95])
def test_test_particle_limit_keeps_the_big_hole_spin(chi1: float) -> None:
    # q -> 0: the remnant is the big hole (Barausse & Rezzolla 2009, by construction).
    assert final_spin(1e-5, chi1, 0.7) == pytest.approx(chi1, abs=1e-4)
    assert radiated_energy(1e-5, chi1, 0.0) == pytest.approx(0.0, abs=1e-5)


def test_remnant_spin_and_ringing_grow_with_aligned_spin() -> None:
    chi = np.linspace(-0.9, 0.9, 19)
    for q in (1.0, 0.4):
        assert np.all(np.diff(final_spin(q, chi, chi)) > 0)
        assert np.all(np.diff(ringdown(60.0, q, chi, chi)[0]) > 0)
        fr = merger_frequencies(60.0, symmetric_mass_ratio(q), q, chi, chi)
        assert np.all(np.diff(fr.ring) > 0)


def test_near_extremal_aligned_spins_radiate_about_eleven_percent() -> None:
    # Hemberger et al. 2013: ~11% for chi1 = chi2 = 0.97, equal masses; and the
    # anti-aligned case radiates less than the non-spinning one.
    assert 0.09 < radiated_energy(1.0, 0.97, 0.97) < 0.125
    assert radiated_energy(1.0, -0.9, -0.9) < radiated_energy(1.0, 0.0, 0.0)


# --- transition frequencies ------------------------------------------------------------


@pytest.mark.parametrize(
    ("q", "by_hand"),
    [
        # eta = 0.25: a/16 + b/4 + c from Table I.
        (1.0, (0.12535, 0.250690375, 0.073498375, 0.358138125)),
        # eta = 0.16 (q = 1/4): 0.0256 a + 0.16 b + c.
        (0.25, (0.11034304, 0.220686256, 0.047776456, 0.31526712)),
    ],
)
def test_ajith_table_frequencies(q: float, by_hand: tuple[float, ...]) -> None:
    total = 50.0
    fr = _freqs(total, q)
    pi_m = np.pi * total * MSUN_SECONDS
    assert [x * pi_m for x in fr] == pytest.approx(list(by_hand), rel=1e-12)


def test_ring_frequency_agrees_with_the_remnant_mode() -> None:
    # Cross-check of two independent published fits (Ajith et al. 2008 Table I
    # against Barausse-Rezzolla + Husa et al. + Berti et al.): within 15%.
    for q in (1.0, 0.5, 0.25):
        f_qnm = float(ringdown(60.0, q)[0])
        assert _freqs(60.0, q).ring == pytest.approx(f_qnm, rel=0.15)


# --- amplitude and phase ---------------------------------------------------------------


def test_amplitude_is_ajith_away_from_the_windows() -> None:
    # Eq. 4.13 of Ajith et al. 2008, piecewise, relative to f^{-7/6}.
    total, q = 60.0, 0.5
    fr = _freqs(total, q)
    d = 0.005 / (total * MSUN_SECONDS)
    f = np.linspace(10.0, fr.cut - 6 * d, 4000)
    far = np.min(np.abs(f[:, None] - np.array([fr.merge, fr.ring])), axis=1) > 6 * d
    lorentz = fr.width / (2 * np.pi * ((f - fr.ring) ** 2 + fr.width**2 / 4))
    w = np.pi * fr.width / 2 * (fr.ring / fr.merge) ** (-2 / 3)
    ajith = np.where(
        f < fr.merge,
        1.0,
        np.where(f < fr.ring, (f / fr.merge) ** 0.5, w * lorentz * (f / fr.merge) ** (7 / 6)),
    )
    amp, _ = merger_parts(f, _chirp(total, q), q)
    np.testing.assert_allclose(amp[far], ajith[far], rtol=1e-9)


@pytest.mark.parametrize(("q", "spin"), [(1.0, 0.0), (0.3, 0.7), (0.5, -0.8)])
def test_inspiral_part_is_taylorf2(q: float, spin: float) -> None:
    total = 40.0
    mc = _chirp(total, q)
    fr = _freqs(total, q, spin, 0.3 * spin)
    d = 0.005 / (total * MSUN_SECONDS)
    f_j = float(junction_frequency(mc, q, spin, 0.3 * spin))
    f = np.geomspace(15.0, f_j, 3000)
    amp, psi = merger_parts(f, mc, q, spin, 0.3 * spin)
    ref = taylorf2_phase(f, mc, q, spin1=spin, spin2=0.3 * spin)
    assert np.max(np.abs(psi - ref)) < 1e-9
    assert np.all(np.abs(amp[f < fr.merge - 6 * d] - 1.0) < 1e-12)
    # Vectorised rows equal the scalar evaluation (taylorf2_phase sums the series
    # in a different order for one and for many parameter sets).
    amps, psis = merger_parts(f, [mc, mc], [q, q], [spin, 0.0], [0.3 * spin, 0.0])
    np.testing.assert_allclose(psis[0], psi, rtol=0, atol=1e-9)
    np.testing.assert_allclose(amps[0], amp, rtol=1e-14)


def _jump(y: Array, f: Array) -> float:
    """Largest change of the finite-difference derivative between neighbours,
    relative to the local derivative scale ``max(|y'|, |y|/f)``: about
    ``|y''| h / |y'|`` when smooth, O(1) at a jump of the value or of the slope."""
    d1 = np.diff(y)
    scale = max(np.max(np.abs(d1)), np.max(np.abs(y) / f) * (f[1] - f[0]))
    return float(np.max(np.abs(np.diff(d1))) / scale)


@pytest.mark.parametrize(("q", "spin"), [(1.0, 0.0), (0.25, 0.6), (0.6, -0.7)])
def test_no_jumps_at_the_transitions(q: float, spin: float) -> None:
    total = 60.0
    mc = _chirp(total, q)
    fr = _freqs(total, q, spin, spin)
    d = 0.005 / (total * MSUN_SECONDS)
    f_j = float(junction_frequency(mc, q, spin, spin))
    for f0 in (f_j, fr.merge, fr.ring, fr.cut):
        f = np.linspace(f0 - 2 * d, f0 + 2 * d, 40001)
        amp, psi = merger_parts(f, mc, q, spin, spin)
        assert _jump(psi, f) < 1e-3, f0
        assert _jump(amp, f) < 1e-3, f0


def test_phase_is_c2_at_the_junction() -> None:
    # Right-hand second derivative against the TaylorF2 value (Cutler & Flanagan).
    total, q, spin = 50.0, 0.5, 0.4
    mc = _chirp(total, q)
    f_j = float(junction_frequency(mc, q, spin, spin))
    h = 1e-3 * f_j
    _, psi = merger_parts(f_j + h * np.array([1.0, 2.0, 3.0]), mc, q, spin, spin)
    p1, p2 = (float(x[0]) for x in phase_derivatives(f_j, mc, q, spin, spin))
    right2 = (psi[0] - 2 * psi[1] + psi[2]) / h**2  # at f_j + 2h
    assert right2 == pytest.approx(p2, rel=0.02)
    assert (psi[1] - psi[0]) / h == pytest.approx(p1 + 1.5 * h * p2, rel=1e-3)


@pytest.mark.parametrize("spin", [-0.99, -0.5, 0.0, 0.5, 0.99])
@pytest.mark.parametrize("q", [1.0, 0.3, 0.05])
def test_time_of_frequency_never_decreases(q: float, spin: float) -> None:
    # 2 pi t(f) = dPsi/df (Cutler & Flanagan 1994): Psi' must not decrease.
    total = 30.0
    mc = _chirp(total, q)
    top = float(model_top_frequency(mc, q, spin, spin))
    f = np.linspace(0.3 * float(isco_frequency(total)), 2 * top, 20001)
    _, psi = merger_parts(f, mc, q, spin, spin)
    assert np.all(np.diff(psi, 2) > 0)
    f_j = float(junction_frequency(mc, q, spin, spin))
    if spin <= 0.0:
        # With spins against the orbit the junction comes before the ISCO,
        # where the TaylorF2 series itself would turn back.
        assert f_j <= float(isco_frequency(total)) * (1 + 1e-12)
        assert phase_derivatives(f_j, mc, q, spin, spin)[1] > 0
    if spin == 0.0 and q > 0.1:
        assert f_j == pytest.approx(float(isco_frequency(total)), rel=1e-12)


def test_amplitude_vanishes_above_the_top_frequency() -> None:
    d = 0.005 / (20.0 * MSUN_SECONDS)
    for q, spin in ((1.0, 0.0), (0.2, 0.9), (0.7, -0.9)):
        mc = _chirp(20.0, q)
        top = float(model_top_frequency(mc, q, spin, spin))
        f = np.linspace(10.0, 3 * top, 30000)
        amp, _ = merger_parts(f, mc, q, spin, spin)
        assert np.max(amp[f > top]) < 1e-8 * np.max(amp)
        # ... and the bound is not loose by more than 2.5 window widths.
        assert np.max(amp[f > top - 2.5 * d]) > 1e-8 * np.max(amp)


def _snr(h: NDArray[np.complex128], f: Array, psd: Array) -> float:
    return float(np.sqrt(4.0 * np.trapezoid(np.abs(h) ** 2 / psd, f)))


def test_merger_adds_snr_and_matches_taylorf2_in_the_inspiral() -> None:
    # 30 + 30 Msun at 500 Mpc in the design noise fit (Ajith 2011) from 20 Hz.
    spectrum = design_spectrum(20.0, 2048.0, 20000)
    f, psd = spectrum.frequencies, spectrum.psd
    mc, q = _chirp(60.0, 1.0), 1.0
    args = (f, mc, q, 500.0, 0.01, 0.3)
    inspiral = taylorf2(*args)
    full = merger_strain(*args)
    snr_inspiral, snr_full = _snr(inspiral, f, psd), _snr(full, f, psd)
    assert 8.0 < snr_inspiral < snr_full < 3.0 * snr_inspiral
    early = f < 0.9 * float(isco_frequency(60.0))
    np.testing.assert_allclose(full[early], inspiral[early], rtol=1e-9)
    assert np.shape(merger_strain(f[:5], mc, q, 500.0)) == (5,)
    assert np.shape(merger_strain(f[:5], [mc, mc], q, 500.0)) == (2, 5)
