"""The calibration statistics on a model whose exact posterior is known.

The normal-normal model (truth ~ N(0, 1), datum ~ N(truth, s^2)) has the
posterior N(x / (1 + s^2), s^2 / (1 + s^2)) in closed form (conjugate prior,
e.g. Gelman et al., *Bayesian Data Analysis*, 3rd ed., Sec. 2.5): its levels
must pass, and a posterior half as wide must fail. Cook, Gelman & Rubin 2006
validate software the same way.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.stats

from estimator.calibration import binomial_band, credible_level, summarize_levels
from estimator.pp_plot import pp_plot


def _levels(n: int, width_factor: float, seed: int) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    s = 0.7
    truth = rng.standard_normal((n, 2))
    datum = truth + s * rng.standard_normal((n, 2))
    mean = datum / (1 + s**2)
    sd = np.sqrt(s**2 / (1 + s**2)) * width_factor
    draws = mean[None] + sd * rng.standard_normal((4000, n, 2))
    return {
        name: np.array([credible_level(draws[:, i, j], truth[i, j]) for i in range(n)])
        for j, name in enumerate(("a", "b"))
    }


def test_credible_level_is_the_posterior_cdf() -> None:
    x = np.arange(10.0)
    assert credible_level(x, 2.5) == 0.3
    assert credible_level(x, 3.0) == 0.35  # ties count half
    assert credible_level(x, -1.0) == 0.0


def test_exact_posterior_passes() -> None:
    """Exact posteriors: p-values above 0.001 (false alarm 0.1% per p-value, 0.3% in all)."""
    summary = summarize_levels(_levels(200, 1.0, seed=3))
    assert min(summary.p_values.values()) > 1e-3
    assert summary.combined_p_value > 1e-3
    wide = summarize_levels(summary.levels, band_level=0.999)
    assert all(wide.inside_band().values())
    assert summary.passes()  # the family-wise rule: fails by chance with probability <= 0.1


def test_overconfident_posterior_fails() -> None:
    """Half-width posteriors put ~ 40% of truths outside the 90% interval: caught."""
    summary = summarize_levels(_levels(200, 0.5, seed=3))
    assert max(summary.p_values.values()) < 1e-3
    assert summary.combined_p_value < 1e-6
    assert not any(summary.inside_band().values())
    assert summary.coverage["a"][0.9] < 0.75
    assert not summary.passes()
    assert len(summary.outside_band(summary.familywise_band)) == 4
    # ~ 21% of truths beyond the central 99% of a half-width normal posterior (2 Phi(-1.29))
    assert all(k > 20 and p < 1e-9 for k, p in summary.far_tail().values())


def test_familywise_band_and_far_tail() -> None:
    """Bonferroni (Dunn 1961): 2 parameters x 2 levels at 0.9 -> 0.975 per check."""
    levels = {"a": np.linspace(0.01, 0.99, 200), "b": np.full(200, 0.5)}
    levels["a"][:6] = 0.001  # six truths in the far lower tail
    summary = summarize_levels(levels)
    assert summary.familywise_level == pytest.approx(0.975)
    for c in (0.5, 0.9):
        lo, hi = summary.band[c]
        wlo, whi = summary.familywise_band[c]
        assert wlo < lo
        assert whi > hi
    # "b" puts every truth at its posterior median: 100% coverage, outside both bands
    assert summary.outside_band() == ["b at 0.5", "b at 0.9"]
    assert not summary.passes()
    count, p = summary.far_tail()["a"]
    assert count == 6
    # Poisson limit of Binomial(200, 0.01), mean 2: P(X >= 6) = 1 - sum_{k<6} e^-2 2^k / k!
    # = 0.0166 (Poisson limit theorem; any probability handbook); the exact binomial is 0.0160.
    assert p == pytest.approx(0.0166, abs=1.5e-3)
    assert summary.far_tail()["b"] == (0, 1.0)


def test_fisher_combination_and_binomial_band() -> None:
    """Fisher's method: -2 sum ln p ~ chi^2 with 2k degrees of freedom (Fisher 1925)."""
    summary = summarize_levels(_levels(60, 1.0, seed=5))
    stat = -2.0 * sum(np.log(p) for p in summary.p_values.values())
    assert summary.combined_p_value == pytest.approx(scipy.stats.chi2.sf(stat, 4), rel=1e-9)
    # 24 injections at 90% coverage: P(X <= 18) = 0.028 < 0.05 < P(X <= 19) = 0.085 for
    # X ~ Binomial(24, 0.9), so the equal-tailed 90% band starts at 19 (and ends at 24).
    lo, hi = binomial_band(24, 0.9, 0.9)
    assert (lo * 24, hi * 24) == (19.0, 24.0)
    with pytest.raises(ValueError, match="one length"):
        summarize_levels({"a": [0.1, 0.2], "b": [0.3]})


def test_pp_plot_is_written(tmp_path: Path) -> None:
    summary = summarize_levels(_levels(50, 1.0, seed=1))
    out = pp_plot(summary, tmp_path / "pp.png", labels={"a": "first", "b": "second"})
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert out.stat().st_size > 20_000
