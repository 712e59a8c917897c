"""Simulation-based calibration: do the credible intervals mean what they say?

Draw true parameters from the prior, simulate data, compute the posterior:
if the analysis is right, the posterior's CDF evaluated at the truth, its
*credible level*, is uniform on [0, 1] over many such draws (Cook, Gelman &
Rubin 2006, J. Comput. Graph. Stat. 15, 675; Talts et al. 2018,
arXiv:1804.06788, who test the rank of the truth among posterior draws, the
discrete form of the same statistic). Here, per parameter:

* the Kolmogorov-Smirnov test of the levels against U(0, 1), and a combined
  p-value over the parameters by Fisher's method (``-2 sum ln p`` against
  chi^2 with ``2k`` degrees of freedom; Fisher 1925, *Statistical Methods for
  Research Workers*, Sec. 21.1). The parameters of one injection are
  correlated, so the combined value is approximate (common practice in such
  P-P summaries);
* the coverage of central credible intervals, the share of truths inside them,
  against the binomial band a calibrated analysis falls in with probability
  ``band_level``. With ``m`` parameters and two levels there are ``2m``
  such checks, so even a calibrated analysis leaves at least one outside its
  own band with probability ``1 - band_level**(2m)`` (77% for seven
  parameters at 0.9, were the checks independent). The *family-wise* band
  widens each to ``1 - (1 - band_level) / (2m)`` (Bonferroni 1936; Dunn 1961,
  J. Am. Stat. Assoc. 56, 52), so that a calibrated analysis keeps all of them
  inside with probability at least ``band_level``;
* the far tails: how many truths fall outside the central 99% interval, with
  the binomial probability of that many or more (a sampler that misses a
  mode now and then shows here before it moves the KS statistic).

:meth:`CalibrationSummary.passes` applies the acceptance rule: every KS p-value
above ``p_threshold`` (0.01) and every coverage inside the family-wise band.

A data-dependent selection (a threshold on the observed SNR) keeps the levels
uniform; a selection on the true parameters would not.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.stats
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "COVERAGE_LEVELS",
    "P_THRESHOLD",
    "TAIL_LEVEL",
    "CalibrationSummary",
    "binomial_band",
    "credible_level",
    "summarize_levels",
]

Array = NDArray[np.float64]

#: Credibilities of the central intervals whose coverage is reported.
COVERAGE_LEVELS = (0.5, 0.9)

#: The central interval whose far-tail misses are counted.
TAIL_LEVEL = 0.99

#: Smallest per-parameter KS p-value that passes.
P_THRESHOLD = 0.01


def credible_level(samples: ArrayLike, truth: float) -> float:
    """Share of posterior samples below ``truth`` (the posterior CDF at the truth)."""
    x = np.asarray(samples, dtype=float)
    return float((np.sum(x < truth) + 0.5 * np.sum(x == truth)) / x.size)


def binomial_band(n: int, p: float, band_level: float = 0.9) -> tuple[float, float]:
    """Range of the share of ``n`` Bernoulli(``p``) successes with probability ``band_level``.

    The equal-tailed binomial interval (``scipy.stats.binom.interval``), as fractions.
    """
    lo, hi = scipy.stats.binom.interval(band_level, n, p)
    return float(lo) / n, float(hi) / n


@dataclass(frozen=True)
class CalibrationSummary:
    """P-P test results over ``n`` injections.

    ``coverage[name][c]`` is the share of truths inside the central interval of
    credibility ``c``; ``band[c]`` the range a calibrated analysis gives with
    probability ``band_level``.
    """

    n: int
    p_values: dict[str, float]
    combined_p_value: float
    coverage: dict[str, dict[float, float]]
    band: dict[float, tuple[float, float]]
    band_level: float
    levels: dict[str, Array] = field(repr=False)

    @property
    def familywise_level(self) -> float:
        """Per-check band probability keeping all checks inside with ``band_level`` (Bonferroni)."""
        checks = len(self.coverage) * len(COVERAGE_LEVELS)
        return 1.0 - (1.0 - self.band_level) / checks

    @property
    def familywise_band(self) -> dict[float, tuple[float, float]]:
        """Per credibility: the coverage band at :attr:`familywise_level`."""
        return {c: binomial_band(self.n, c, self.familywise_level) for c in COVERAGE_LEVELS}

    def outside_band(self, band: Mapping[float, tuple[float, float]] | None = None) -> list[str]:
        """``"name at c"`` for each coverage outside ``band`` (default: the per-check band)."""
        band = self.band if band is None else band
        return [
            f"{name} at {c:g}"
            for name, cov in self.coverage.items()
            for c, v in cov.items()
            if not band[c][0] <= v <= band[c][1]
        ]

    def far_tail(self) -> dict[str, tuple[int, float]]:
        """Per parameter: truths outside the central 99% interval, and P(as many or more)."""
        out = {}
        for name, a in self.levels.items():
            k = int(np.sum(np.abs(a - 0.5) > TAIL_LEVEL / 2.0))
            out[name] = (k, float(scipy.stats.binom.sf(k - 1, self.n, 1.0 - TAIL_LEVEL)))
        return out

    def passes(self, p_threshold: float = P_THRESHOLD) -> bool:
        """Every KS p-value above ``p_threshold`` and every coverage inside the family-wise band."""
        return min(self.p_values.values()) > p_threshold and not self.outside_band(
            self.familywise_band
        )

    def inside_band(self) -> dict[str, bool]:
        """Per parameter: every reported coverage lies inside its band."""
        return {
            name: all(self.band[c][0] <= v <= self.band[c][1] for c, v in cov.items())
            for name, cov in self.coverage.items()
        }

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: per-parameter p-value and coverage, the bands, the combined p-value."""
        inside = self.inside_band()
        tail = self.far_tail()
        return {
            "injections": self.n,
            "combined_p_value": self.combined_p_value,
            "band_level": self.band_level,
            "parameters": {
                name: {
                    "ks_p_value": self.p_values[name],
                    "coverage": {f"{c:g}": v for c, v in self.coverage[name].items()},
                    "inside_band": inside[name],
                    f"outside_{TAIL_LEVEL:g}": tail[name][0],
                    f"outside_{TAIL_LEVEL:g}_p_value": tail[name][1],
                }
                for name in self.p_values
            },
            "coverage_band": {f"{c:g}": list(b) for c, b in self.band.items()},
            "outside_band": self.outside_band(),
            "familywise_level": self.familywise_level,
            "familywise_band": {f"{c:g}": list(b) for c, b in self.familywise_band.items()},
            "outside_familywise_band": self.outside_band(self.familywise_band),
            "ks_p_threshold": P_THRESHOLD,
            "passes": self.passes(),
            "method": "credible level of each truth; Kolmogorov-Smirnov against U(0,1) per "
            "parameter, Fisher's method across parameters (Cook, Gelman & Rubin 2006; "
            "Talts et al. 2018)",
        }


def summarize_levels(
    levels: Mapping[str, ArrayLike], *, band_level: float = 0.9
) -> CalibrationSummary:
    """KS p-values, Fisher-combined p-value and coverage of credible ``levels``.

    Parameters
    ----------
    levels
        Per parameter, shape ``(n,)``: each injection's :func:`credible_level`.
    band_level
        Probability of the binomial coverage band.
    """
    arrays = {k: np.asarray(v, dtype=float) for k, v in levels.items()}
    sizes = {a.size for a in arrays.values()}
    if len(sizes) != 1 or 0 in sizes:
        msg = f"levels must be non-empty and of one length per parameter, got sizes {sizes}"
        raise ValueError(msg)
    n = sizes.pop()
    p_values = {k: float(scipy.stats.kstest(a, "uniform").pvalue) for k, a in arrays.items()}
    combined = float(scipy.stats.combine_pvalues(list(p_values.values()), method="fisher").pvalue)
    coverage = {
        k: {c: float(np.mean(np.abs(a - 0.5) <= c / 2.0)) for c in COVERAGE_LEVELS}
        for k, a in arrays.items()
    }
    band = {c: binomial_band(n, c, band_level) for c in COVERAGE_LEVELS}
    return CalibrationSummary(
        n=n,
        p_values=p_values,
        combined_p_value=combined,
        coverage=coverage,
        band=band,
        band_level=band_level,
        levels=arrays,
    )
