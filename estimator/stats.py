"""Summaries of posterior samples: credible intervals, tail probabilities, sample size.

Quantiles use numpy's default linear interpolation between order statistics,
definition 7 of Hyndman & Fan 1996 (The American Statistician 50, 361).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError

__all__ = ["credible_interval", "effective_sample_size", "probability_below", "summarize"]


def _samples(x: ArrayLike, name: str = "samples") -> NDArray[np.float64]:
    arr = np.asarray(x, dtype=float)
    if arr.ndim != 1 or arr.size == 0:
        raise InputError(
            f"{name} has shape {arr.shape}; expected a non-empty 1-D array", field=name
        )
    bad = ~np.isfinite(arr)
    if bad.any():
        raise InputError(
            f"{name} holds {arr[bad][0]} at index {int(np.flatnonzero(bad)[0])}; "
            "every sample must be finite",
            field=name,
        )
    return arr


def credible_interval(x: ArrayLike, level: float = 0.9) -> tuple[float, float, float]:
    """Median and equal-tailed credible interval of a 1-D sample.

    Parameters
    ----------
    x
        Shape ``(n,)``, finite samples.
    level
        Probability inside the interval, ``0 < level < 1``; the tails each hold
        ``(1 - level) / 2``.

    Returns
    -------
    ``(median, lower, upper)``: the sample quantiles at ``0.5``,
    ``(1 - level)/2`` and ``(1 + level)/2`` (Hyndman & Fan 1996, definition 7);
    the tail probability is rounded to 12 decimals, so that ``level=0.9`` gives the
    0.05 and 0.95 quantiles exactly despite binary rounding of 0.9.
    """
    if not 0.0 < level < 1.0:
        raise InputError(
            f"credible level is {level!r}; expected a number between 0 and 1, e.g. 0.9",
            field="level",
        )
    arr = _samples(x)
    tail = round(0.5 * (1.0 - level), 12)  # so that level=0.9 gives exactly 0.05 and 0.95
    median, lower, upper = np.quantile(arr, [0.5, tail, 1.0 - tail])
    return float(median), float(lower), float(upper)


def summarize(
    samples: Mapping[str, ArrayLike], units: Mapping[str, str], level: float = 0.9
) -> dict[str, dict[str, float | str]]:
    """Median and credible interval of every parameter, with its unit.

    Parameters
    ----------
    samples
        Arrays of shape ``(n,)`` keyed by parameter name.
    units
        Unit of each parameter in ``samples`` (``"Msun"``, ``"Mpc"``, ``"s"``, ``""``).
    level
        Credible level of the equal-tailed interval.

    Returns
    -------
    ``{name: {"median": float, "lower": float, "upper": float, "unit": str}}``.
    """
    missing = [name for name in samples if name not in units]
    if missing:
        raise InputError(
            f"no unit given for {', '.join(missing)}; add each to units (use '' for dimensionless)",
            field="units",
        )
    out: dict[str, dict[str, float | str]] = {}
    for name, values in samples.items():
        median, lower, upper = credible_interval(_samples(values, name), level)
        out[name] = {"median": median, "lower": lower, "upper": upper, "unit": units[name]}
    return out


def probability_below(x: ArrayLike, threshold: float) -> float:
    """Fraction of samples strictly below ``threshold``: a Monte Carlo ``P(X < threshold)``."""
    arr = _samples(x)
    return float(np.count_nonzero(arr < threshold) / arr.size)


def effective_sample_size(n_steps_kept: int, n_walkers: int, tau: ArrayLike) -> float:
    """Number of effectively independent samples in an ensemble chain.

    ``N_eff = n_steps_kept * n_walkers / max(tau)``: the convention of the emcee
    documentation (Foreman-Mackey et al. 2013, PASP 125, 306; "Autocorrelation
    analysis" tutorial), taking the slowest parameter's integrated
    autocorrelation time.

    Parameters
    ----------
    n_steps_kept
        Steps per walker after burn-in and thinning.
    n_walkers
        Number of walkers.
    tau
        Shape ``(n_params,)``, integrated autocorrelation time of each parameter,
        in steps (of the kept, thinned chain).
    """
    t = np.atleast_1d(np.asarray(tau, dtype=float))
    if t.size == 0 or not np.all(np.isfinite(t) & (t > 0.0)):
        raise InputError(
            f"autocorrelation times {t.tolist()} must be positive and finite; "
            "run the chain longer before estimating them",
            field="tau",
        )
    if n_steps_kept < 0 or n_walkers < 1:
        raise InputError(
            f"n_steps_kept={n_steps_kept}, n_walkers={n_walkers}; expected "
            "n_steps_kept >= 0 and n_walkers >= 1",
            field="n_walkers",
        )
    return float(n_steps_kept * n_walkers / t.max())
