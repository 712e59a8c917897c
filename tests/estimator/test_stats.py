"""Tests of estimator.stats against reference values.

Statistical checks use fixed seeds and 5-sigma tolerances (false-alarm rate about
6e-7 per comparison were the seed drawn afresh).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from estimator.errors import InputError
from estimator.stats import (
    credible_interval,
    effective_sample_size,
    probability_below,
    summarize,
)


def test_credible_interval_exact_on_small_arrays() -> None:
    """Hyndman & Fan 1996 definition 7: on 0..100 the p-quantile is 100 p exactly."""
    assert credible_interval(np.arange(101.0)) == (50.0, 5.0, 95.0)
    assert credible_interval(np.arange(101.0)[::-1], level=0.5) == (50.0, 25.0, 75.0)
    # Definition 7 on [1, 2, 3, 4]: h = 3 p; p = 0.05 -> 1.15, p = 0.95 -> 3.85, median 2.5.
    np.testing.assert_allclose(
        credible_interval([4.0, 1.0, 3.0, 2.0]), (2.5, 1.15, 3.85), rtol=1e-14
    )


def test_credible_interval_of_normal_sample_matches_scipy_quantiles() -> None:
    """90% interval of N(3, 2^2) is 3 ± 1.645 * 2 (scipy.stats.norm.ppf(0.95) = 1.6449).

    Sampling error of the p-quantile: sqrt(p (1-p) / n) / phi(z_p) * sigma (the
    asymptotic variance of a sample quantile, common practice).
    """
    n, mu, sigma = 1_000_000, 3.0, 2.0
    x = np.random.default_rng(5).normal(mu, sigma, n)
    median, lower, upper = credible_interval(x, 0.9)
    for p, value in ((0.5, median), (0.05, lower), (0.95, upper)):
        z = stats.norm.ppf(p)
        err = np.sqrt(p * (1 - p) / n) / stats.norm.pdf(z) * sigma
        assert abs(value - (mu + sigma * z)) < 5 * err
    assert upper - median == pytest.approx(1.645 * sigma, abs=0.01)


def test_probability_below_exact_and_sampled() -> None:
    x = np.arange(10.0)
    assert probability_below(x, 3.0) == 0.3  # strictly below: 0, 1, 2
    assert probability_below(x, 3.5) == 0.4
    assert probability_below(x, -1.0) == 0.0
    assert probability_below(x, 10.0) == 1.0
    n = 200_000
    y = np.random.default_rng(6).normal(size=n)
    p = stats.norm.cdf(-1.0)
    assert abs(probability_below(y, -1.0) - p) < 5 * np.sqrt(p * (1 - p) / n)


def test_summarize_shapes_and_units() -> None:
    out = summarize(
        {"chirp_mass": np.arange(101.0), "mass_ratio": np.linspace(0, 1, 101)},
        {"chirp_mass": "Msun", "mass_ratio": ""},
    )
    assert out["chirp_mass"] == {"median": 50.0, "lower": 5.0, "upper": 95.0, "unit": "Msun"}
    assert out["mass_ratio"]["unit"] == ""
    assert all(type(v) is float for v in out["mass_ratio"].values() if not isinstance(v, str))
    with pytest.raises(InputError, match="mass_ratio"):
        summarize({"mass_ratio": np.ones(3)}, {})


def test_effective_sample_size_convention() -> None:
    """emcee documentation convention: N steps * walkers / max(tau)."""
    assert effective_sample_size(1000, 64, np.array([20.0, 50.0, 40.0])) == 1280.0


def test_effective_sample_size_gives_variance_of_mean_for_ar1() -> None:
    """AR(1), x_t = rho x_{t-1} + e_t, has integrated autocorrelation time
    tau = (1 + rho) / (1 - rho) (textbook result, common practice; e.g. Sokal 1997,
    Monte Carlo Methods in Statistical Mechanics, from memory). The variance of the
    ensemble mean should then be var(x) / N_eff.

    4000 replicas: the sample variance has relative error sqrt(2/4000) = 2.2%; tolerance
    5 sigma = 11% (plus the known finite-length correction, about 1%).
    """
    rng = np.random.default_rng(8)
    rho, n_steps, n_walkers, n_rep = 0.8, 400, 32, 4000
    var_x = 1.0 / (1.0 - rho**2)
    x = rng.normal(0.0, np.sqrt(var_x), (n_rep, n_walkers))
    total = np.zeros_like(x)
    for _ in range(n_steps):
        total += x
        x = rho * x + rng.normal(size=x.shape)
    means = total.mean(axis=1) / n_steps
    n_eff = effective_sample_size(n_steps, n_walkers, np.array([(1 + rho) / (1 - rho)]))
    assert means.var(ddof=1) == pytest.approx(var_x / n_eff, rel=0.12)


@pytest.mark.parametrize("bad", [np.array([]), np.array([1.0, np.nan]), np.ones((2, 2))])
def test_bad_samples_raise(bad: np.ndarray) -> None:
    with pytest.raises(InputError):
        credible_interval(bad)


def test_bad_arguments_raise() -> None:
    with pytest.raises(InputError, match="credible level"):
        credible_interval(np.ones(3), level=1.0)
    with pytest.raises(InputError, match="autocorrelation"):
        effective_sample_size(100, 8, np.array([np.inf]))
    with pytest.raises(InputError):
        effective_sample_size(100, 0, np.array([1.0]))
