"""The P-P plot of a calibration run: observed against expected share of truths below a level.

For every parameter, the fraction of injections whose true value lies below
the posterior's ``x`` quantile, against ``x``; a calibrated analysis follows
the diagonal inside the binomial band (Cook, Gelman & Rubin 2006; Talts et
al. 2018, arXiv:1804.06788, Fig. 1 for how miscalibration bends the curve).
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

import numpy as np
import scipy.stats

from .calibration import CalibrationSummary
from .plot_base import PALETTE, new_figure, save_png, style_axes

__all__ = ["pp_plot"]

_LINE_COLOURS = ("#0072b2", "#d55e00", "#009e73", "#cc79a7", "#e69f00", "#56b4e9")


def pp_plot(
    summary: CalibrationSummary,
    path: str | Path,
    *,
    labels: Mapping[str, str] | None = None,
    title: str | None = None,
) -> Path:
    """Draw the P-P plot of ``summary`` to a PNG at ``path``.

    The shaded band is where the empirical CDF of ``n`` uniform levels falls
    at each ``x`` with probability ``summary.band_level`` (pointwise binomial
    interval, ``scipy.stats.binom.interval``).
    """
    labels = labels or {}
    fig = new_figure(6.2, 5.6)
    ax = fig.add_subplot(1, 1, 1)
    x = np.linspace(0.0, 1.0, 201)
    n = summary.n
    lo, hi = scipy.stats.binom.interval(summary.band_level, n, x)
    ax.fill_between(
        x,
        lo / n,
        hi / n,
        color=PALETTE["band"],
        alpha=0.25,
        linewidth=0,
        label=f"{summary.band_level:.0%} binomial band (N = {n})",
    )
    ax.plot([0, 1], [0, 1], color=PALETTE["muted"], linewidth=0.8, linestyle="--")
    for i, (name, levels) in enumerate(summary.levels.items()):
        observed = np.mean(np.sort(levels)[None, :] <= x[:, None], axis=1)
        ax.step(
            x,
            observed,
            where="post",
            color=_LINE_COLOURS[i % len(_LINE_COLOURS)],
            linewidth=1.4,
            label=f"{labels.get(name, name)}  (KS p = {summary.p_values[name]:.2f})",
        )
    ax.set_xlim(0.0, 1.0)
    ax.set_ylim(0.0, 1.0)
    ax.set_aspect("equal")
    ax.set_xlabel("credible level")
    ax.set_ylabel("fraction of injections with the truth below it")
    style_axes(ax)
    heading = title or (
        f"Calibration over {n} injections (combined p = {summary.combined_p_value:.2f})"
    )
    ax.set_title(heading, fontsize=10, color=PALETTE["ink"], loc="left")
    ax.legend(loc="upper left", fontsize=8, frameon=False)
    fig.tight_layout()
    return save_png(fig, path)
