"""The isotropic law of the single-detector orientation factor, tabulated once.

One detector measures only the effective distance ``d_eff = d / w``, with
``w = Theta / 4 = [F+^2 (1 + cos^2 i)^2 / 4 + Fx^2 cos^2 i]^{1/2}`` in ``[0, 1]``
(``Theta`` as defined by Finn & Chernoff 1993, PRD 47, 2198) and the antenna
patterns ``F+, Fx`` of a 90-degree-arm interferometer (Thorne 1987, in 300 Years of
Gravitation, Eq. 104; from memory). Its prior is the law of ``w`` for an isotropic
sky position and orientation: ``cos theta``, ``phi``, ``psi``, ``cos i`` uniform.
Finn & Chernoff also give a closed form, ``p(w) = 20 w (1-w)^3`` (Beta(2, 4)); it
approximates that law only (largest CDF difference 0.034; ``<Theta^2> = 16/7``
against the exact 64/25; ``<Theta^3>`` 17 % low), and we do not use it.

Reduction (derived here): ``(F+, Fx)`` is ``(a, b) = (½(1 + cos^2 theta) cos 2phi,
cos theta sin 2phi)`` rotated by ``2 psi``, so ``F+^2 + Fx^2 = a^2 + b^2`` and, for
uniform ``psi``, the angle of ``(F+, Fx)`` is uniform. Hence ``w = R(c1, a1) R(c2, a2)``,
a product of two independent copies of ``R(c, a) = [(1 + c^2)^2 cos^2 a / 4 +
c^2 sin^2 a]^{1/2}``, ``c`` uniform on ``[0, 1]``, ``a`` uniform on ``[0, pi/2]``
(``c = |cos theta|, a = 2 phi`` and ``c = |cos i|``, folded by symmetry). ``R``
grows with ``c``, so ``P(R <= r) = (2/pi) ∫_0^{pi/2} v(r, a)_+^{1/2} da`` where
``v = (4r^2 - cos^2 a) / [1 + sin^2 a + ((1 + sin^2 a)^2 + cos^2 a (4r^2 - cos^2 a))^{1/2}]``
is the root ``c^2`` of ``R(c, a) = r``. :func:`orientation_table` evaluates this by
Gauss-Legendre quadrature on a grid uniform in ``log r`` and gets the CDF of
``log w = log R1 + log R2`` by convolution; no random numbers are involved.

The table also carries ``G(w) = ∫_0^w x^3 p(x) dx``, the weight the
volume-uniform distance prior of :mod:`estimator.priors` gives to ``w``, from which
:func:`draw_orientation` draws ``w`` given the effective distance.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from .errors import InputError

__all__ = ["OrientationTable", "draw_orientation", "orientation_table"]

Array = NDArray[np.float64]

#: Orientation table: grid steps per factor of two in ``r``, smallest ``r``, quadrature nodes.
_STEPS_PER_OCTAVE, _R_MIN, _NODES = 1024, 1e-5, 32


@dataclass(frozen=True)
class OrientationTable:
    """The isotropic law of ``w`` on a grid (see :func:`orientation_table`)."""

    w: Array  #: grid, ``0`` then ``_R_MIN .. 1`` uniform in ``log w``
    cdf: Array  #: ``P(w' <= w)``
    weighted: Array  #: ``G(w) / G(1)``, ``G(w) = ∫_0^w x^3 p(x) dx``
    log_w: Array  #: ``log w`` for ``w >= 1e-3``
    log_weighted: Array  #: ``log(G(w) / G(1))`` on ``log_w``


def _factor_cdf(r: Array) -> Array:
    """CDF of one factor ``R`` of ``w = R1 R2`` (module docstring; derived here).

    ``P(R <= r) = (2/pi) ∫ v(r, a)_+^{1/2} da`` over ``a`` in ``[a0, pi/2]``, with
    ``a0 = arccos(min(1, 2r))`` where ``v`` changes sign. Gauss-Legendre with
    ``_NODES`` nodes in ``t``, ``a = a0 + (pi/2 - a0) t^2`` when ``r < 1/2`` (this
    removes the square-root endpoint) and ``a = (pi/2) t`` otherwise.
    """
    t, weight = np.polynomial.legendre.leggauss(_NODES)
    t, weight = 0.5 * (t + 1.0), 0.5 * weight
    rr = r[:, None]
    a0 = np.arccos(np.minimum(1.0, 2.0 * rr))
    low = rr < 0.5
    span = 0.5 * np.pi - a0
    a = a0 + span * np.where(low, t * t, t)
    jac = span * np.where(low, 2.0 * t, 1.0) * weight
    cos2, sin2 = np.cos(a) ** 2, np.sin(a) ** 2
    num = np.maximum(4.0 * rr**2 - cos2, 0.0)
    den = 1.0 + sin2 + np.sqrt((1.0 + sin2) ** 2 + cos2 * num)
    cdf: Array = np.minimum((2.0 / np.pi) * np.sum(np.sqrt(num / den) * jac, axis=1), 1.0)
    return cdf


@lru_cache(maxsize=1)
def orientation_table() -> OrientationTable:
    """Tabulate the isotropic law of ``w`` once (derived here; module docstring).

    ``F_L``, the CDF of ``L = log R``, is computed by :func:`_factor_cdf` on
    ``x_j = log(1/2) + j h``, ``h = ln 2 / _STEPS_PER_OCTAVE``, down to ``_R_MIN``
    (the mass ``≈ _R_MIN^2`` below goes to the lowest node). With bin masses ``m_j``,
    ``P(L1 + L2 <= s) = Σ_j m_j [F_L(s - x_j) + F_L(s - x_{j+1})] / 2``
    (trapezoid rule for the Stieltjes integral, error ``O(h^2)``), by FFT. ``G`` is
    the same trapezoid sum of ``w^3`` over the masses of ``w``. Compared with a grid
    four times finer the CDF at the nodes is off by 1.1e-7 (linear interpolation
    between nodes adds up to 3e-7), ``<w^2> = 4/25`` by a relative 2.3e-7.

    Returns
    -------
    The cached, read-only table; every call returns the same object.
    """
    h = np.log(2.0) / _STEPS_PER_OCTAVE
    k = int(np.ceil(np.log(0.5 / _R_MIN) / h))
    x = np.log(0.5) + h * np.arange(-k, _STEPS_PER_OCTAVE + 1)
    x[-1] = 0.0
    f = _factor_cdf(np.exp(x))
    f[-1] = 1.0
    n = f.size
    mass = np.diff(f, prepend=0.0)
    # s_i = 2 x_0 + i h; node 0 is a point mass, bins j >= 1 use the mean of F at both ends.
    mean_f = np.concatenate([[0.5 * f[0]], 0.5 * (f[:-1] + f[1:]), np.ones(n)])
    size = 1 << int(np.ceil(np.log2(mean_f.size + n)))
    conv = np.fft.irfft(np.fft.rfft(mass[1:], size) * np.fft.rfft(mean_f, size), size)
    cdf = mass[0] * np.concatenate([f, np.ones(n - 1)]) + conv[: 2 * n - 1]
    keep = slice(n - 1, None)  # s >= x_0, where the truncation at _R_MIN is exact
    w = np.concatenate([[0.0], np.exp(2.0 * x[0] + h * np.arange(2 * n - 1))[keep]])
    w[-1] = 1.0
    cdf = np.maximum.accumulate(np.clip(np.concatenate([[0.0], cdf[keep]]), 0.0, 1.0))
    cdf[-1] = 1.0
    g = np.concatenate([[0.0], np.cumsum(0.5 * (w[1:] ** 3 + w[:-1] ** 3) * np.diff(cdf))])
    g /= g[-1]
    top = w >= 1e-3
    table = OrientationTable(w, cdf, g, np.log(w[top]), np.log(g[top]))
    for arr in (table.w, table.cdf, table.weighted, table.log_w, table.log_weighted):
        arr.flags.writeable = False
    return table


def draw_orientation(
    effective_distance: Array, distance_max: float, rng: np.random.Generator
) -> tuple[Array, Array]:
    """Draw the orientation factor and luminosity distance given effective distance.

    Under the prior of :class:`~estimator.priors.InspiralPrior` (``p(d) ∝ d^2`` up
    to ``distance_max``, ``w`` from the isotropic law of the module docstring),
    ``p(w | d_eff) ∝ w^3 p(w)`` on ``[0, u]``, ``u = min(1, distance_max / d_eff)``.
    We draw it by inverse CDF, ``w = G^{-1}(U G(u))``, ``U`` uniform, interpolating
    the tabulated ``G``, and return ``d = w d_eff``. Applied to posterior samples of
    ``d_eff`` this gives joint posterior samples of (luminosity distance, orientation
    factor), because the data depend on ``d`` and ``w`` only through ``d_eff``.

    Parameters
    ----------
    effective_distance
        Shape ``(n,)``, Mpc, positive.
    distance_max
        The prior's largest luminosity distance, Mpc.
    rng
        Source of randomness.

    Returns
    -------
    ``(w, luminosity_distance)``, each of shape ``(n,)``; ``w`` in ``[0, 1]``, distance in Mpc.
    """
    d_eff = np.asarray(effective_distance, dtype=float)
    if not (np.isfinite(distance_max) and distance_max > 0.0):
        raise InputError(
            f"distance_max is {distance_max:g} Mpc; it must be positive and finite",
            field="distance_max",
        )
    bad = ~(np.isfinite(d_eff) & (d_eff > 0.0))
    if bad.any():
        raise InputError(
            f"effective_distance {d_eff[bad][0]:g} Mpc at index {int(np.flatnonzero(bad)[0])} "
            "is not a positive finite number; pass posterior samples of effective distance",
            field="effective_distance",
        )
    table = orientation_table()
    u = np.minimum(1.0, distance_max / d_eff)
    target = rng.random(d_eff.shape) * np.interp(u, table.w, table.weighted)
    w = np.minimum(np.interp(target, table.weighted, table.w), u)
    return w, w * d_eff
