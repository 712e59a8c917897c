"""Tests of estimator.priors against outside facts.

Statistical tests use fixed seeds; each goodness-of-fit test passes when its
p-value exceeds 1e-3, i.e. a false-alarm rate of 1e-3 per test were the seed drawn
afresh. Moment checks against Monte Carlo use 5 sigma (false-alarm rate 6e-7 each).
The isotropic reference throughout is a seeded Monte Carlo of the defining formula
(Finn & Chernoff 1993, PRD 47, 2198, for Theta; Thorne 1987 for the antenna patterns).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from estimator.errors import InputError
from estimator.orientation import orientation_table as _orientation_table
from estimator.priors import (
    EFFECTIVE_DISTANCE_CUTOFF,
    InspiralPrior,
    Prior,
    draw_orientation,
)

P_MIN = 1e-3


def _masses(mc: np.ndarray, q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Inverse of Mc = (m1 m2)^{3/5} / (m1+m2)^{1/5} (Cutler & Flanagan 1994, Eq. 1.1)."""
    m1 = mc * (1 + q) ** 0.2 * q**-0.6
    return m1, q * m1


def _chirp_mass(m1: np.ndarray, m2: np.ndarray) -> np.ndarray:
    return (m1 * m2) ** 0.6 / (m1 + m2) ** 0.2


def _params(mc: np.ndarray, q: np.ndarray, d_eff: float = 50.0) -> dict[str, np.ndarray]:
    mc, q = np.broadcast_arrays(np.asarray(mc, float), np.asarray(q, float))
    return {
        "chirp_mass": mc.ravel(),
        "mass_ratio": q.ravel(),
        "effective_distance": np.full(mc.size, d_eff),
        "coalescence_time": np.zeros(mc.size),
    }


WIDE = InspiralPrior(
    chirp_mass=(8.0, 12.0), mass_ratio=(0.3, 1.0), component_mass=(4.0, 30.0), distance_max=400.0
)
CUT = InspiralPrior(
    chirp_mass=(5.0, 15.0), mass_ratio=(0.2, 1.0), component_mass=(5.0, 30.0), distance_max=400.0
)


def test_protocol_names_and_bounds() -> None:
    assert isinstance(WIDE, Prior)
    assert WIDE.names == ("chirp_mass", "mass_ratio", "effective_distance", "coalescence_time")
    assert WIDE.bounds["effective_distance"] == (0.0, EFFECTIVE_DISTANCE_CUTOFF * 400.0)
    assert WIDE.bounds["coalescence_time"] == (-0.1, 0.1)
    empty = WIDE.sample(np.random.default_rng(0), 0)
    assert tuple(empty) == WIDE.names
    assert all(v.shape == (0,) for v in empty.values())


def test_inverse_chirp_mass_round_trip() -> None:
    mc, q = np.array([1.2, 10.0, 30.0]), np.array([0.25, 0.7, 1.0])
    np.testing.assert_allclose(_chirp_mass(*_masses(mc, q)), mc, rtol=1e-13)


def test_log_prob_matches_finite_difference_jacobian() -> None:
    """exp(log_prob) ratios equal |d(m1,m2)/d(Mc,q)| ratios by central differences."""
    mc, q = np.meshgrid(np.linspace(8.2, 11.8, 5), np.linspace(0.32, 0.98, 5))
    mc, q = mc.ravel(), q.ravel()
    h = 1e-6
    dm_dmc = (np.array(_masses(mc + h, q)) - np.array(_masses(mc - h, q))) / (2 * h)
    dm_dq = (np.array(_masses(mc, q + h)) - np.array(_masses(mc, q - h))) / (2 * h)
    det = np.abs(dm_dmc[0] * dm_dq[1] - dm_dmc[1] * dm_dq[0])
    np.testing.assert_allclose(det, mc * (1 + q) ** 0.4 * q**-1.2, rtol=1e-8)
    lp = WIDE.log_prob(_params(mc, q))
    np.testing.assert_allclose(lp - lp[0], np.log(det) - np.log(det[0]), atol=1e-7)


def test_uniform_component_masses_histogram_matches_log_prob() -> None:
    """Monte Carlo: m1, m2 uniform -> (Mc, q) histogram vs exp(log_prob), chi-square."""
    rng = np.random.default_rng(20240611)
    lo, hi = WIDE.component_mass
    m = rng.uniform(lo, hi, (2, 1_000_000))
    m1, m2 = m.max(axis=0), m.min(axis=0)
    mc, q = _chirp_mass(m1, m2), m2 / m1
    edges_mc = np.linspace(*WIDE.chirp_mass, 9)
    edges_q = np.linspace(*WIDE.mass_ratio, 9)
    counts, _, _ = np.histogram2d(mc, q, bins=(edges_mc, edges_q))
    # Bin integrals of exp(log_prob): midpoint rule on 40 x 40 sub-cells per bin.
    k = 40
    sub_mc = np.linspace(*WIDE.chirp_mass, 8 * k + 1)
    sub_q = np.linspace(*WIDE.mass_ratio, 8 * k + 1)
    gmc, gq = np.meshgrid(
        0.5 * (sub_mc[1:] + sub_mc[:-1]), 0.5 * (sub_q[1:] + sub_q[:-1]), indexing="ij"
    )
    dens = np.exp(WIDE.log_prob(_params(gmc, gq))).reshape(gmc.shape)
    expected = dens.reshape(8, k, 8, k).sum(axis=(1, 3))
    expected *= counts.sum() / expected.sum()
    assert counts.sum() > 150_000
    chi2 = float(((counts - expected) ** 2 / expected).sum())
    assert stats.chi2.sf(chi2, df=counts.size - 1) > P_MIN


def test_log_prob_support() -> None:
    p = _params(
        np.array([10.0, 7.99, 12.01, 10.0, 10.0, 10.0, 10.0]),
        np.array([0.5, 0.5, 0.5, 0.29, 1.01, 0.5, 0.5]),
    )
    p["effective_distance"][5] = EFFECTIVE_DISTANCE_CUTOFF * 400.0 * 1.001
    p["coalescence_time"][6] = 0.11
    lp = WIDE.log_prob(p)
    assert lp.shape == (7,)
    assert np.isfinite(lp[0])
    assert np.all(lp[1:] == -np.inf)
    # Component-mass cuts: m2 = 3.6 < 5 at (Mc=5.5, q=0.3); m1 = 32.6 > 30 at (Mc=15, q=0.3).
    lp = CUT.log_prob(_params(np.array([5.5, 15.0, 10.0]), np.array([0.3, 0.3, 0.8])))
    assert lp[0] == -np.inf
    assert lp[1] == -np.inf
    assert np.isfinite(lp[2])
    assert CUT.log_prob(_params(np.array([np.nan]), np.array([0.5])))[0] == -np.inf


def _grid_cdf(x: np.ndarray, dens: np.ndarray, axis: int) -> tuple[np.ndarray, np.ndarray]:
    marg = dens.sum(axis=1 - axis)
    cdf = np.concatenate([[0.0], np.cumsum(marg)])
    return x, cdf / cdf[-1]


def test_sample_masses_follow_log_prob_with_component_cuts() -> None:
    """KS of sampled Mc and q marginals vs marginals of exp(log_prob) on a fine grid."""
    rng = np.random.default_rng(7)
    s = CUT.sample(rng, 20_000)
    edges_mc = np.linspace(*CUT.chirp_mass, 801)
    edges_q = np.linspace(*CUT.mass_ratio, 3201)
    gmc, gq = np.meshgrid(
        0.5 * (edges_mc[1:] + edges_mc[:-1]), 0.5 * (edges_q[1:] + edges_q[:-1]), indexing="ij"
    )
    dens = np.exp(CUT.log_prob(_params(gmc, gq))).reshape(gmc.shape)
    for name, edges, axis in (("chirp_mass", edges_mc, 0), ("mass_ratio", edges_q, 1)):
        x, cdf = _grid_cdf(edges, dens, axis)
        assert stats.kstest(s[name], lambda v, x=x, cdf=cdf: np.interp(v, x, cdf)).pvalue > P_MIN
    assert np.all(np.isfinite(CUT.log_prob(s)))


def _isotropic_w(rng: np.random.Generator, n: int) -> np.ndarray:
    """w = Theta/4 of Finn & Chernoff 1993 for isotropic sky, polarisation and inclination.

    Antenna patterns of a 90-degree-arm interferometer (Thorne 1987, in 300 Years of
    Gravitation, Eq. 104; from memory).
    """
    ct = rng.uniform(-1, 1, n)
    phi = rng.uniform(0, 2 * np.pi, n)
    psi = rng.uniform(0, 2 * np.pi, n)
    ci = rng.uniform(-1, 1, n)
    a, b = 0.5 * (1 + ct**2) * np.cos(2 * phi), ct * np.sin(2 * phi)
    fp = a * np.cos(2 * psi) - b * np.sin(2 * psi)
    fx = a * np.sin(2 * psi) + b * np.cos(2 * psi)
    return 0.5 * np.sqrt(fp**2 * (1 + ci**2) ** 2 + 4 * fx**2 * ci**2)


@pytest.fixture(scope="module")
def isotropic_w() -> np.ndarray:
    """2e6 seeded Monte Carlo draws of w."""
    return _isotropic_w(np.random.default_rng(1993), 2_000_000)


def _table_cdf(x: np.ndarray) -> np.ndarray:
    table = _orientation_table()
    return np.interp(x, table.w, table.cdf)


def _table_moment(p: int) -> float:
    """<w^p> of the table, trapezoid rule over its bin masses."""
    t = _orientation_table()
    return float(np.sum(0.5 * (t.w[1:] ** p + t.w[:-1] ** p) * np.diff(t.cdf)))


def _exact_moment(p: int) -> float:
    """<w^p>, p even, by product quadrature of the defining formula over the four angles.

    Gauss-Legendre (20 nodes) in cos theta and cos i and the 32-point trapezoid rule in
    phi and psi are exact for these polynomials (common practice); independent of the
    factorisation used by the library.
    """
    x, wx = np.polynomial.legendre.leggauss(20)
    ang = np.arange(32) * (2 * np.pi / 32)
    ct, phi, psi, ci = np.meshgrid(x, ang, ang, x, indexing="ij")
    weight = wx[:, None, None, None] * wx[None, None, None, :] / (4 * 32 * 32)
    a, b = 0.5 * (1 + ct**2) * np.cos(2 * phi), ct * np.sin(2 * phi)
    fp = a * np.cos(2 * psi) - b * np.sin(2 * psi)
    fx = a * np.sin(2 * psi) + b * np.cos(2 * psi)
    w2 = fp**2 * (1 + ci**2) ** 2 / 4 + fx**2 * ci**2
    return float(np.sum(weight * w2 ** (p // 2)))


def test_orientation_table_is_a_cached_cdf() -> None:
    t = _orientation_table()
    assert t is _orientation_table()
    assert t.w[0] == 0.0
    assert t.w[-1] == 1.0
    assert t.cdf[0] == 0.0
    assert t.cdf[-1] == 1.0
    assert np.all(np.diff(t.w) > 0)
    assert np.all(np.diff(t.cdf) >= 0)
    assert np.all(np.diff(t.weighted) >= 0)
    assert not t.cdf.flags.writeable


def test_orientation_table_matches_isotropic_monte_carlo(isotropic_w: np.ndarray) -> None:
    """KS of 2e6 isotropic draws of w against the table (false-alarm rate 1e-3).

    The KS critical value here is 1.4e-3; Finn & Chernoff's Beta(2, 4) closed form,
    off by 0.034, fails the same test.
    """
    assert isotropic_w.min() >= 0.0
    assert isotropic_w.max() <= 1.0
    assert stats.kstest(isotropic_w, _table_cdf).pvalue > P_MIN
    assert stats.kstest(isotropic_w, stats.beta(2, 4).cdf).pvalue < P_MIN


@pytest.mark.slow
def test_orientation_table_matches_large_isotropic_monte_carlo() -> None:
    """KS of 2e7 isotropic draws (critical value 4.4e-4, false-alarm rate 1e-3)."""
    rng = np.random.default_rng(2198)
    w = np.concatenate([_isotropic_w(rng, 2_000_000) for _ in range(10)])
    assert stats.kstest(w, _table_cdf).pvalue > P_MIN


def test_orientation_table_moments() -> None:
    """<Theta^2> = 64/25 (sky-and-orientation average, common practice) to 1e-4.

    Higher even moments <w^4> = 64/1225 and <w^6> against exact product quadrature
    of the defining formula, to a relative 1e-5 (the table's O(h^2) bias is 2.6e-6).
    """
    assert abs(16 * _table_moment(2) - 64 / 25) < 1e-4
    assert _exact_moment(2) == pytest.approx(4 / 25, rel=1e-12)
    for p in (4, 6):
        assert _table_moment(p) == pytest.approx(_exact_moment(p), rel=1e-5)


def test_finn_chernoff_closed_form_is_only_an_approximation(isotropic_w: np.ndarray) -> None:
    """The numbers quoted in the module docstring, against scipy's Beta(2, 4).

    The Monte Carlo <Theta^2> agrees with 64/25 (5 sigma); the closed form gives
    16/7 (its moment from scipy), its CDF is off by 0.034 and <Theta^3> is 17 % low.
    """
    t2 = 16 * isotropic_w**2
    assert abs(t2.mean() - 64 / 25) < 5 * t2.std() / np.sqrt(t2.size)
    closed = stats.beta(2, 4)
    assert 16 * closed.moment(2) == pytest.approx(16 / 7, rel=1e-12)
    grid = _orientation_table().w
    assert np.max(np.abs(_table_cdf(grid) - closed.cdf(grid))) == pytest.approx(0.034, abs=1e-3)
    assert closed.moment(3) / _table_moment(3) - 1 == pytest.approx(-0.17, abs=0.005)


def test_draw_orientation_recovers_distance_and_orientation_from_prior() -> None:
    """d_eff from the prior -> draw_orientation: d ∝ d^2 and w follows the table (KS).

    The cut at 100 distance_max moves these CDFs by at most 7.2e-4, far below the KS
    critical value 0.014 (n = 20000, alpha = 1e-3).
    """
    rng = np.random.default_rng(11)
    d_max = WIDE.distance_max
    s = WIDE.sample(rng, 20_000)
    w, d = draw_orientation(s["effective_distance"], d_max, rng)
    assert np.all(d <= d_max * (1 + 1e-12))
    assert np.all((w > 0) & (w <= 1))
    np.testing.assert_allclose(d / w, s["effective_distance"], rtol=1e-12)
    assert stats.kstest(w, _table_cdf).pvalue > P_MIN
    assert stats.kstest(d / d_max, lambda x: np.clip(x, 0, 1) ** 3).pvalue > P_MIN


def test_draw_orientation_conditional_law(isotropic_w: np.ndarray) -> None:
    """Given d_eff = 3 distance_max, w ∝ w^3 p(w) on [0, 1/3]: two-sample KS against
    isotropic Monte Carlo draws kept with probability (3 w)^3 where w <= 1/3."""
    rng = np.random.default_rng(12)
    w, d = draw_orientation(np.full(20_000, 300.0), 100.0, rng)
    assert w.max() <= 1 / 3
    np.testing.assert_allclose(d, 300.0 * w, rtol=1e-15)
    ref = isotropic_w[(isotropic_w <= 1 / 3)]
    ref = ref[rng.random(ref.size) < (3 * ref) ** 3]
    assert ref.size > 100_000
    assert stats.ks_2samp(w, ref).pvalue > P_MIN


def test_effective_distance_marginal_matches_log_prob() -> None:
    """Sampled d_eff vs the CDF of exp(log_prob), integrated numerically (KS)."""
    rng = np.random.default_rng(13)
    d_max = WIDE.distance_max
    s = WIDE.sample(rng, 20_000)
    grid = np.concatenate([[0.0], np.geomspace(1e-4, EFFECTIVE_DISTANCE_CUTOFF, 40_001) * d_max])
    p = _params(np.full(grid.size, 10.0), np.full(grid.size, 0.5))
    p["effective_distance"] = np.maximum(grid, 1e-300)
    dens = np.exp(WIDE.log_prob(p))
    cdf = integrate.cumulative_trapezoid(dens, grid, initial=0.0)
    cdf /= cdf[-1]
    np.testing.assert_allclose(
        np.interp([0.5 * d_max], grid, cdf) / np.interp([d_max], grid, cdf), 0.125, rtol=1e-4
    )  # p ∝ d_eff^2 below distance_max
    assert stats.kstest(s["effective_distance"], lambda x: np.interp(x, grid, cdf)).pvalue > P_MIN


def test_effective_distance_beyond_distance_max_matches_isotropic_monte_carlo(
    isotropic_w: np.ndarray,
) -> None:
    """p(d_eff) u^2 ∝ G(u) = <w^3; w < u>, u = distance_max / d_eff, from Monte Carlo.

    Ratio estimator of G(u)/G(1) with its delta-method error; 5 sigma at each of
    five u (false-alarm rate 3e-6 in all).
    """
    u = np.array([0.5, 0.25, 0.1, 0.05, 0.02])
    d_max = WIDE.distance_max
    p = _params(np.full(u.size + 1, 10.0), np.full(u.size + 1, 0.5))
    p["effective_distance"] = d_max / np.concatenate([[1.0], u])
    lp = WIDE.log_prob(p)
    predicted = np.exp(lp[1:] - lp[0]) * u**2
    x = isotropic_w**3
    for ui, pred in zip(u, predicted, strict=True):
        y = np.where(isotropic_w < ui, x, 0.0)
        ratio = y.sum() / x.sum()
        sigma = np.std(y - ratio * x) / (np.sqrt(x.size) * x.mean())
        assert abs(pred - ratio) < 5 * sigma, (ui, pred, ratio, sigma)


def test_coalescence_time_uniform() -> None:
    t = WIDE.sample(np.random.default_rng(14), 5000)["coalescence_time"]
    assert stats.kstest(t, stats.uniform(-0.1, 0.2).cdf).pvalue > P_MIN


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"chirp_mass": (12.0, 8.0)}, "chirp_mass"),
        ({"mass_ratio": (0.3, 1.2)}, "mass_ratio"),
        ({"mass_ratio": (0.0, 1.0)}, "mass_ratio"),
        ({"component_mass": (-1.0, 30.0)}, "component_mass"),
        ({"distance_max": 0.0}, "distance_max"),
        ({"time_window": float("nan")}, "time_window"),
        ({"component_mass": (40.0, 50.0)}, "component_mass"),
    ],
)
def test_invalid_prior_raises(kwargs: dict[str, object], field: str) -> None:
    args: dict[str, object] = {
        "chirp_mass": (8.0, 12.0),
        "mass_ratio": (0.3, 1.0),
        "component_mass": (4.0, 30.0),
        "distance_max": 400.0,
    }
    with pytest.raises(InputError) as err:
        InspiralPrior(**(args | kwargs))  # type: ignore[arg-type]
    assert err.value.field == field


def test_draw_orientation_rejects_bad_distance() -> None:
    with pytest.raises(InputError, match="index 1"):
        draw_orientation(np.array([10.0, -1.0]), 100.0, np.random.default_rng(0))
