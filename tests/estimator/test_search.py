"""The matched-filter search finds injected signals near the trigger."""

from __future__ import annotations

import numpy as np
import pytest

from estimator.search import search_chirp_mass
from estimator.simulate import Injection, design_spectrum, simulate_segment
from estimator.waveform import chirp_time

SPECTRUM = design_spectrum()
START = 1_000_000_000.0


@pytest.mark.parametrize(
    ("mc", "q", "duration", "guess"),
    [(30.0, 0.7, 8.0, None), (8.0, 0.4, 16.0, None), (1.3, 0.9, 64.0, 1.32)],
)
def test_search_finds_the_injection(mc, q, duration, guess):
    """Loudest template near the trigger: SNR close to the injected optimal SNR (~18),
    time within 5 ms, and chirp time from f_low within a few template spacings.

    The template spacing is 0.8/f_low in Newtonian chirp time (search.py, after
    Sathyaprakash & Dhurandhar 1991); the check allows 3 spacings.
    """
    tc = START + duration - 2.0
    f_low = 30.0 if mc < 2 else 20.0
    # TaylorF2, the search's own template family (a merger signal is the analysis' to fit).
    inj = Injection(mc, q, {30.0: 900.0, 8.0: 380.0, 1.3: 75.0}[mc], tc, 0.5, model="taylorf2")
    seg = simulate_segment(SPECTRUM, duration=duration, sample_rate=2048.0, start_time=START,
                           rng=np.random.default_rng(17), injection=inj, f_start=f_low - 5)
    rng = (0.4, 80.0) if guess is None else (0.9 * guess, 1.1 * guess)
    found = search_chirp_mass(seg, SPECTRUM, trigger_time=tc + 0.004, chirp_mass_range=rng,
                              f_low=f_low, f_high=900.0)
    assert abs(found.coalescence_time - tc) < 5e-3
    assert found.snr > 10.0
    spacing = 0.8 / f_low
    assert abs(chirp_time(found.chirp_mass, f_low) - chirp_time(mc, f_low)) < 3 * spacing


def test_noise_only_gives_a_quiet_search():
    """Pure Gaussian noise: the loudest template within +-0.1 s of the trigger stays below 6.

    In Gaussian noise the phase-maximised SNR of one trial is Rayleigh distributed,
    P(rho > 6) = exp(-18) = 1.5e-8 (common practice); with at most ~1e5 effective
    trials (about 2000 correlated templates times ~200 independent time lags) the
    false-alarm rate of this test is below ~2e-3; fixed seed.
    """
    seg = simulate_segment(SPECTRUM, duration=16.0, sample_rate=2048.0, start_time=START,
                           rng=np.random.default_rng(23))
    found = search_chirp_mass(seg, SPECTRUM, trigger_time=START + 12.0,
                              chirp_mass_range=(2.0, 60.0), f_low=20.0, f_high=900.0)
    assert found.snr < 6.0


def test_spin_axis_of_zero_is_the_non_spinning_search_and_spins_find_a_spinning_source():
    """``spins=(0.0,)`` repeats the plain search exactly; for a TaylorF2 source with both
    aligned spins at -0.6 (chirp mass 8, q 0.4, 16 s; seeded) the spinning bank's loudest
    template is louder than the non-spinning one and nearer in chirp time.

    The spin phase terms are those of the analysis (estimator/spins.py, tested against
    their published forms in test_spin_terms.py).
    """
    mc, q, chi, duration, f_low = 8.0, 0.4, -0.6, 16.0, 20.0
    tc = START + duration - 2.0
    inj = Injection(mc, q, 380.0, tc, 0.5, model="taylorf2", spin1=chi, spin2=chi)
    seg = simulate_segment(SPECTRUM, duration=duration, sample_rate=2048.0, start_time=START,
                           rng=np.random.default_rng(29), injection=inj, f_start=f_low - 5)
    kw = {"trigger_time": tc + 0.004, "chirp_mass_range": (3.0, 15.0), "f_low": f_low,
          "f_high": 900.0}
    plain = search_chirp_mass(seg, SPECTRUM, **kw)
    assert search_chirp_mass(seg, SPECTRUM, spins=(0.0,), **kw) == plain
    spinning = search_chirp_mass(seg, SPECTRUM, spins=(-0.8, -0.4, 0.0, 0.4, 0.8), **kw)
    assert spinning.spin < 0.0
    assert spinning.snr > plain.snr
    target = chirp_time(mc, f_low)
    assert abs(chirp_time(spinning.chirp_mass, f_low) - target) < abs(
        chirp_time(plain.chirp_mass, f_low) - target
    )
