"""Data realism: short segments, glitches, and the merger model's widths.

Seeded simulated data in the analytic design noise (Ajith 2011, PRD 84, 084037,
Eq. 4.7). Spins are fixed at zero here (``spin_max=0``) unless a test is about
them: the checks concern the data and the model's end, and the four-parameter
runs keep the suite fast.
"""

from __future__ import annotations

import dataclasses
from types import SimpleNamespace

import numpy as np
import pytest

from estimator.analysis import AnalysisResult, AnalysisSettings, raised_low_frequency, run_analysis
from estimator.errors import InputError
from estimator.glitches import burst_with_snr
from estimator.quality import assess_quality
from estimator.simulate import Injection, design_spectrum, simulate_segment
from service.drill import optimal_snr

SPECTRUM = design_spectrum()
START = 1_000_000_000.0
RATE = 2048.0


def _segment(
    mc: float, q: float, snr: float, *, duration: float, before_end: float, seed: int
):  # type: ignore[no-untyped-def]
    tc = START + duration - before_end
    unit = Injection(mc, q, 1000.0, tc, 0.7)
    rho = optimal_snr(unit, SPECTRUM, duration=duration, sample_rate=RATE, start_time=START,
                      f_low=20.0)  # fmt: skip
    inj = dataclasses.replace(unit, effective_distance=1000.0 * rho / snr)
    seg = simulate_segment(
        SPECTRUM, duration=duration, sample_rate=RATE, start_time=START,
        rng=np.random.default_rng(seed), injection=inj, f_start=10.0,
    )  # fmt: skip
    return seg, inj


def _settings(tc: float, **kw: object) -> AnalysisSettings:
    base = {"trigger_time": tc, "seed": 2, "spin_max": 0.0, "target_effective_samples": 1000}
    return AnalysisSettings(**(base | kw))  # type: ignore[arg-type]


def test_short_segment_is_analysed_with_a_raised_low_frequency_cut() -> None:
    """An 8 s segment, coalescence 2 s before its end, chirp mass 9.5 Msun (the issue's case).

    At 20 Hz the signal lasts longer than the 5.5 s of untapered data before the
    trigger (Newtonian chirp time, Sathyaprakash & Dhurandhar 1991, plus 10%): the
    analysis must raise the cut, say so in a quality verdict, and still contain the
    truth in its 90% chirp-mass interval (seed 7, the first tried).
    """
    seg, inj = _segment(9.5, 0.8, 15.0, duration=8.0, before_end=2.0, seed=7)
    result = run_analysis(seg, SPECTRUM, _settings(inj.coalescence_time))
    assert result.f_low_raised is not None
    asked, used = result.f_low_raised
    assert asked == 20.0
    assert 20.0 < used < 30.0
    assert result.data.f_low == used
    check = {c.name: c for c in assess_quality(result).checks}["low_frequency_cut"]
    assert not check.passed
    assert f"{used:g} Hz" in check.explanation
    lo, hi = np.percentile(result.samples["chirp_mass"], [5.0, 95.0])
    assert lo <= inj.chirp_mass <= hi


def test_a_segment_with_nothing_useful_left_is_refused_with_the_reason() -> None:
    """Refuse only when the cut would leave less than an octave below the signal's end."""
    found = SimpleNamespace(chirp_mass=30.0, mass_ratio=1.0)
    assert raised_low_frequency(found, 20.0, 100.0, 300.0, None) is None  # type: ignore[arg-type]
    raised = raised_low_frequency(found, 20.0, 0.5, 300.0, None)  # type: ignore[arg-type]
    assert raised is not None
    assert 20.0 < raised < 150.0
    with pytest.raises(InputError, match="less than an octave") as err:
        raised_low_frequency(found, 20.0, 0.001, 300.0, "x.csv")  # type: ignore[arg-type]
    assert err.value.field == "f_low"
    with pytest.raises(InputError, match="inside the segment's start taper"):
        raised_low_frequency(found, 20.0, -0.1, 300.0, None)  # type: ignore[arg-type]


def test_merger_model_posterior_width_matches_fisher_at_snr_40() -> None:
    """Chirp mass 24 Msun at SNR 40 with the merger model: posterior sd within 30% of Fisher.

    At high SNR and away from prior edges the posterior is close to the Gaussian of
    the Fisher matrix (Cutler & Flanagan 1994, Sec. IV; Vallisneri 2008, PRD 77,
    042001). With TaylorF2's abrupt end in the band the ratio was 0.18; a smooth
    model removes the artificial edge. q = 0.6 keeps the equal-mass edge away.
    Spins fixed at zero (the Fisher matrix is of the non-spinning model).
    """
    seg, inj = _segment(24.0, 0.6, 40.0, duration=8.0, before_end=2.0, seed=3)
    result = run_analysis(seg, SPECTRUM, _settings(inj.coalescence_time))
    assert result.model == "merger"
    ratio = float(np.std(result.samples["chirp_mass"])) / result.fisher.sigma["chirp_mass"]
    assert 0.7 <= ratio <= 1.3, ratio


def _glitch_runs() -> dict[str, AnalysisResult]:
    seg, inj = _segment(24.0, 0.6, 20.0, duration=8.0, before_end=2.0, seed=5)
    burst = burst_with_snr(seg, SPECTRUM, centre=inj.coalescence_time - 1.0, frequency=30.0,
                           quality=9.0, snr=30.0, f_low=20.0, f_high=900.0)  # fmt: skip
    glitched = dataclasses.replace(seg, strain=seg.strain + burst)
    tc = inj.coalescence_time
    return {
        "clean": run_analysis(seg, SPECTRUM, _settings(tc)),
        "gated": run_analysis(glitched, SPECTRUM, _settings(tc)),
        "ungated": run_analysis(glitched, SPECTRUM, _settings(tc, gating=False)),
    }


def test_gating_removes_the_bias_of_a_loud_glitch_before_coalescence() -> None:
    """A sine-Gaussian of SNR 30 at 30 Hz, 1 s before coalescence (chirp mass 24, SNR 20).

    30 Hz is near the signal's own frequency then (about 20-25 Hz in the second before
    coalescence), so the glitch overlaps the chirp's track rather than lying beside it.

    The shift of the chirp-mass median from the same noise without the glitch, in
    units of the clean posterior's sd, must stay below 0.5 once the glitch is gated
    (Usman et al. 2016, CQG 33, 215004, Sec. 2.3: gating as the remedy). The gate
    is recorded and the run without gating is measured too.
    """
    runs = _glitch_runs()
    clean = runs["clean"].samples["chirp_mass"]
    sigma = float(np.std(clean))
    shift = {k: abs(float(np.median(r.samples["chirp_mass"]) - np.median(clean))) / sigma
             for k, r in runs.items() if k != "clean"}  # fmt: skip
    print("chirp-mass shift in clean-posterior sd:", shift)
    scan = runs["gated"].glitches
    assert scan is not None
    assert len(scan.gates) == 1
    assert abs(scan.gates[0].centre - (runs["gated"].settings.trigger_time - 1.0)) < 0.1
    assert runs["ungated"].glitches is None
    assert shift["gated"] < 0.5, shift
