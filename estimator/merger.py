"""TaylorF2 continued through merger and ringdown, for aligned spins.

``h~(f) = A_N f^{-7/6} S(f) exp(-i (Psi(f) + 2 pi f t_c - phi_c - pi/4))`` with the
Newtonian amplitude ``A_N`` of :func:`estimator.waveform.taylorf2`. What is
published and what is ours:

* Inspiral phase: the 3.5PN TaylorF2 phase with aligned spins of
  :func:`estimator.waveform.taylorf2_phase` (Buonanno et al. 2009, PRD 80,
  084043), unchanged up to ``f_j``, the Schwarzschild ISCO frequency of the total
  mass.
* Amplitude factor ``S``: the three regimes of the phenomenological amplitude of
  Ajith et al. 2008, PRD 77, 104017, Eq. 4.13, with their transition frequencies
  (Eq. 4.13 and Table I, non-spinning fits): ``f^{-7/6}`` below ``f_merge``,
  ``f^{-2/3}`` up to ``f_ring``, a Lorentzian of full width ``sigma`` up to
  ``f_cut``. Each piece is continued over the whole band and the pieces are
  joined by the windows ``w+-(f; f0, d) = (1 +- tanh(4 (f - f0)/d)) / 2`` of
  Santamaria et al. 2010, PRD 82, 064016 (from memory: ``d = 0.005/M``), with a
  window to zero at ``f_cut``, so ``S`` is infinitely differentiable.
* Spins: the four Ajith frequencies are scaled by ``f_ring(q, chi1, chi2) /
  f_ring(q, 0, 0)`` of the remnant's quasinormal mode (:mod:`estimator.remnant`).
  This scaling is our choice, not a published fit; at zero spin the frequencies
  are Ajith et al.'s.
* Junction ``f_j``: the Schwarzschild ISCO frequency of the total mass
  (:func:`estimator.waveform.isco_frequency`), lowered where needed so that the
  TaylorF2 ``Psi''`` there is at least 0.15 of its Newtonian (leading-order)
  value: with spins against the orbit the 3.5PN series has ``Psi'' < 0`` (the
  stationary-phase time runs backwards) below the ISCO (our choice,
  :func:`junction_frequency`).
* Merger phase (our construction, not fitted to numerical relativity): above
  ``f_j`` the stationary-phase time ``t(f) = Psi'(f) / (2 pi)`` follows the
  Newtonian-shaped law ``t_end - K f^{-8/3}``, with ``K`` and ``t_end`` fixed by
  ``Psi'`` and ``Psi''`` at ``f_j`` and integrated analytically (``Psi`` is C2
  there). Added to it is the phase of a damped sinusoid's Fourier transform,
  ``R(x) = arctan((x - f_ring) / (sigma/2))`` (group delay: a Lorentzian of half
  width ``sigma/2`` peaking at ``1/(pi sigma)``, the damping time ``tau``),
  evaluated at ``g(f) = f_merge + (d/8) ln(1 + exp(8 (f - f_merge)/d))``, whose
  derivative is exactly the window ``w+(f; f_merge, d)``; so the added group delay
  is ``R'(g(f)) w+(f; f_merge, d) >= 0``, exponentially small below ``f_merge``,
  and the phase is ``R(f) - R(f_merge)`` above it. A pure damped sinusoid's group
  delay peaks at ``f_ring`` and falls back above it; we hold it at its peak value
  above ``f_ring`` (``R`` continued linearly, C2 since ``R''(f_ring) = 0``), so
  ``t(f)`` never decreases. The ringdown term is measured from ``f_j`` (its value
  and slope there are subtracted, keeping ``Psi`` C1); both are exponentially
  small in ``8 (f_merge - f_j) / d``, i.e. negligible unless ``f_merge`` comes
  within a few ``d`` of ``f_j`` (very unequal masses).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .remnant import ringdown
from .waveform import (
    MPC_SECONDS,
    MSUN_SECONDS,
    phase_coefficients,
    symmetric_mass_ratio,
    taylorf2_phase,
)

__all__ = [
    "AJITH_TABLE",
    "WINDOW_WIDTH",
    "MergerFrequencies",
    "junction_frequency",
    "merger_frequencies",
    "merger_parts",
    "merger_strain",
    "model_top_frequency",
]

Array = NDArray[np.float64]
Coeffs = dict[int, tuple[Array, Array]]

#: ``(a, b, c)`` of ``f = (a eta^2 + b eta + c) / (pi M)`` (from memory of Ajith et
#: al. 2008, PRD 77, 104017, Eq. 4.13 and Table I).
AJITH_TABLE: dict[str, tuple[float, float, float]] = {
    "merge": (2.9740e-1, 4.4810e-2, 9.5560e-2),
    "ring": (5.9411e-1, 8.9794e-2, 1.9111e-1),
    "width": (5.0801e-1, 7.7515e-2, 2.2369e-2),
    "cut": (8.4845e-1, 1.2848e-1, 2.7299e-1),
}
#: Width ``d`` of the tanh windows in units of ``1/M`` (from memory of Santamaria
#: et al. 2010, PRD 82, 064016, the windows of their hybrid amplitude).
WINDOW_WIDTH = 0.005
#: Smallest ``Psi'' / Psi''_Newtonian`` allowed at the junction (our choice).
_RHO_MIN = 0.15
#: ``v = (pi M f)^{1/3}`` grid searched for the junction, up to the ISCO ``6^{-1/2}``.
_V_GRID = np.linspace(0.15, 6.0**-0.5, 48)
#: ``model_top_frequency`` lies this many window widths above ``f_cut``.
_TOP_WIDTHS = 3.0


class MergerFrequencies(NamedTuple):
    """Transition frequencies of the amplitude, Hz (arrays shaped like the inputs)."""

    merge: Array
    ring: Array
    width: Array
    cut: Array


def merger_frequencies(
    total_mass: ArrayLike,
    eta: ArrayLike,
    mass_ratio: ArrayLike,
    spin1: ArrayLike = 0.0,
    spin2: ArrayLike = 0.0,
) -> MergerFrequencies:
    """Ajith et al.'s ``f_merge, f_ring, sigma, f_cut``, scaled for aligned spins.

    ``f_k = r (a_k eta^2 + b_k eta + c_k) / (pi M)`` with the coefficients of
    :data:`AJITH_TABLE` (Ajith et al. 2008, PRD 77, 104017, Eq. 4.13, Table I) and
    ``r = f_ring(q, chi1, chi2) / f_ring(q, 0, 0)`` of :func:`estimator.remnant.ringdown`
    (our choice; ``r = 1`` without spins).

    Parameters
    ----------
    total_mass
        Detector-frame total mass, Msun.
    eta, mass_ratio
        Symmetric mass ratio and ``m2/m1`` (the same binary, both needed).
    spin1, spin2
        Aligned spins of the heavier and lighter body. All arguments broadcast.
    """
    m = np.asarray(total_mass, dtype=float) * MSUN_SECONDS
    eta_ = np.asarray(eta, dtype=float)
    q, s1, s2 = np.broadcast_arrays(*(np.asarray(x, float) for x in (mass_ratio, spin1, spin2)))
    zero = np.zeros_like(s1)
    both = ringdown(1.0, np.stack([q, q]), np.stack([s1, zero]), np.stack([s2, zero]))[0]
    ratio = both[0] / both[1]
    scale = ratio / (np.pi * m)
    values = [
        np.asarray((a * eta_**2 + b * eta_ + c) * scale, dtype=float)
        for a, b, c in AJITH_TABLE.values()
    ]
    return MergerFrequencies(*values)


def _setup(
    chirp_mass: ArrayLike, mass_ratio: ArrayLike, spin1: ArrayLike, spin2: ArrayLike
) -> tuple[bool, Array, Array, Array, Array, Array, Array]:
    """``(scalar, mc, q, s1, s2, eta, M)`` as ``(n,)`` arrays (M in Msun)."""
    params = (chirp_mass, mass_ratio, spin1, spin2)
    scalar = all(np.ndim(p) == 0 for p in params)
    mc, q, s1, s2 = np.broadcast_arrays(*(np.atleast_1d(np.asarray(p, float)) for p in params))
    eta = symmetric_mass_ratio(q)
    return scalar, mc, q, s1, s2, eta, mc * eta ** (-0.6)


_S = (np.arange(8.0) - 5.0) / 3.0  # v^{k-5} is proportional to f^{s_k}


def _series(coeffs: Coeffs) -> list[tuple[Array, Array]]:
    """Rows ``(A, B)``, each ``(n, 8)``, with ``f^m d^m Psi/df^m = 3/(128 eta) sum_k
    (A_k + B_k ln v) v^{k-5}`` for ``m = 0, 1, 2``.

    With ``v^{k-5}`` proportional to ``f^s``, ``s = (k-5)/3``, and ``ln v = ln f / 3
    + const``: ``f d/df [(a + b ln v) v^{k-5}] = (s (a + b ln v) + b/3) v^{k-5}``,
    ``f^2 d2/df2 [...] = (s (s-1) (a + b ln v) + b (2s - 1)/3) v^{k-5}``.
    """
    a = np.stack([np.atleast_1d(coeffs[k][0]) for k in range(8)], axis=-1)
    b = np.stack([np.atleast_1d(coeffs[k][1]) for k in range(8)], axis=-1)
    return [
        (a, b),
        (_S * a + b / 3.0, _S * b),
        (_S * (_S - 1.0) * a + (2.0 * _S - 1.0) / 3.0 * b, _S * (_S - 1.0) * b),
    ]


_GRID_POWERS = _V_GRID[None, :] ** (np.arange(8.0)[:, None] - 5.0)  # (8, n_grid)
_GRID_LOG_POWERS = _GRID_POWERS * np.log(_V_GRID)


def _junction_v(rows: list[tuple[Array, Array]]) -> Array:
    """``v_j``: the ISCO ``6^{-1/2}``, or where ``Psi''/Psi''_N`` first falls to ``_RHO_MIN``."""
    a2, b2 = rows[2]
    # Newtonian f^2 Psi'' over 3/(128 eta) is (40/9) v^{-5}.
    rho = (a2 @ _GRID_POWERS + b2 @ _GRID_LOG_POWERS) * (_V_GRID**5 * (9.0 / 40.0))
    low = rho < _RHO_MIN
    first = np.argmax(low, axis=1)
    n_rows = np.arange(rho.shape[0])
    i = np.maximum(first, 1)
    r0, r1 = rho[n_rows, i - 1], rho[n_rows, i]
    v0, v1 = _V_GRID[i - 1], _V_GRID[i]
    crossing = v0 + (r0 - _RHO_MIN) / (r0 - r1) * (v1 - v0)
    found = low.any(axis=1)
    out = np.where(found, np.where(first > 0, crossing, _V_GRID[0]), _V_GRID[-1])
    return np.asarray(out, dtype=float)


def junction_frequency(
    chirp_mass: ArrayLike, mass_ratio: ArrayLike, spin1: ArrayLike = 0.0, spin2: ArrayLike = 0.0
) -> Array:
    """Frequency ``f_j`` up to which the model's phase is TaylorF2's, Hz.

    The Schwarzschild ISCO frequency ``1 / (6^{3/2} pi M)`` (common practice),
    unless ``Psi''`` of the aligned-spin TaylorF2 phase falls below 0.15 of its
    leading-order value ``(3/(128 eta)) (40/9) v^{-5} / f^2`` before it; then the
    first such frequency (found on a 48-point ``v`` grid and interpolated, so
    that ``f_j`` is continuous in the parameters). Our choice, which keeps the
    stationary-phase time increasing. Shaped like the broadcast inputs.
    """
    scalar, _, _, s1, s2, eta, total = _setup(chirp_mass, mass_ratio, spin1, spin2)
    v_j = _junction_v(_series(phase_coefficients(eta, s1, s2)))
    f_j = v_j**3 / (np.pi * total * MSUN_SECONDS)
    return np.asarray(f_j[0] if scalar else f_j, dtype=float)


def _window(f: Array, f0: Array, d: Array, sign: float = 1.0, out: Array | None = None) -> Array:
    """``w+-(f; f0, d) = (1 +- tanh(4 (f - f0)/d)) / 2`` (Santamaria et al. 2010)."""
    w = np.multiply(f, 4.0 * sign / d, out=out)
    w -= f0 * (4.0 * sign / d)
    np.tanh(w, out=w)
    w += 1.0
    w *= 0.5
    return w


def _ring_phase(
    f: Array, fr: MergerFrequencies, d: Array, out: Array | None = None, work: Array | None = None
) -> Array:
    """Ringdown phase ``R(g(f)) - R(f_merge)``, ``R`` held linear above ``f_ring``.

    ``g = f_merge + (d/8) ln(1 + e^z)``, ``z = 8 (f - f_merge)/d`` (module docstring).
    ``out`` and ``work`` are optional scratch arrays of the broadcast shape (this
    runs on every likelihood call, so temporaries are kept few).
    """
    half = 0.5 * fr.width
    z = np.multiply(f, 8.0 / d, out=work)
    z -= fr.merge * (8.0 / d)
    # ln(1 + e^z) is z to double precision above z = 40 and below 1e-17 under -40.
    soft = np.clip(z, -40.0, 40.0, out=out)
    np.exp(soft, out=soft)
    np.log1p(soft, out=soft)
    z -= 40.0
    np.maximum(z, 0.0, out=z)
    soft += z
    y_m = (fr.merge - fr.ring) / half
    soft *= d / (8.0 * half)
    soft += y_m  # y = (g - f_ring) / half
    below = np.minimum(soft, 0.0, out=z)
    np.arctan(below, out=below)
    np.maximum(soft, 0.0, out=soft)
    soft += below
    soft -= np.arctan(np.minimum(y_m, 0.0)) + np.maximum(y_m, 0.0)
    return soft


def _ring_slope(f: Array, fr: MergerFrequencies, d: Array) -> Array:
    """Derivative of :func:`_ring_phase`: ``R'(g(f)) w+(f; f_merge, d)``, s."""
    half = 0.5 * fr.width
    z = 8.0 * (f - fr.merge) / d
    g = fr.merge + d / 8.0 * np.logaddexp(0.0, z)
    below = np.minimum((g - fr.ring) / half, 0.0)
    return np.asarray(_window(f, fr.merge, d) / (half * (1.0 + below**2)), dtype=float)


def merger_parts(
    frequencies: ArrayLike,
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    spin1: ArrayLike = 0.0,
    spin2: ArrayLike = 0.0,
) -> tuple[Array, Array]:
    """Amplitude factor ``S`` and PN-part phase ``Psi`` of the merger model.

    See the module docstring for the construction. ``S = 1`` (to ``1e-12``)
    below ``f_merge - 6 d``; ``Psi`` equals :func:`estimator.waveform.taylorf2_phase`
    up to :func:`junction_frequency`.

    Parameters
    ----------
    frequencies
        Shape ``(nf,)``, Hz, all > 0.
    chirp_mass, mass_ratio, spin1, spin2
        Shape ``(n,)`` or scalars: detector-frame chirp mass (Msun), ``m2/m1``,
        aligned spins of the heavier and lighter body.

    Returns
    -------
    (S, Psi)
        Each ``(n, nf)`` (``(nf,)`` when all parameters are scalars); ``S``
        dimensionless, ``Psi`` in radians without ``2 pi f t_c - phi_c - pi/4``.
    """
    scalar, mc, q, s1, s2, eta, total = _setup(chirp_mass, mass_ratio, spin1, spin2)
    f = np.atleast_1d(np.asarray(frequencies, dtype=float))
    m_sec = total * MSUN_SECONDS
    fr = MergerFrequencies(*(x[:, None] for x in merger_frequencies(total, eta, q, s1, s2)))
    d = (WINDOW_WIDTH / m_sec)[:, None]
    # Amplitude (Ajith et al. 2008, Eq. 4.13) relative to f^{-7/6}:
    # 1, (f/f_merge)^{1/2}, and the Lorentzian times (f/f_merge)^{7/6}.
    root_x = np.multiply(f, 1.0 / fr.merge)
    np.sqrt(root_x, out=root_x)
    amp = _window(f, fr.merge, d)
    on_ring = _window(f, fr.ring, d)
    half_sq = 0.25 * fr.width**2
    lorentz = np.subtract(f, fr.ring)
    np.square(lorentz, out=lorentz)
    lorentz += half_sq
    np.divide(half_sq * (fr.ring / fr.merge) ** (-2.0 / 3.0), lorentz, out=lorentz)
    lorentz *= on_ring
    on_ring -= 1.0  # now -w-(f; f_ring)
    on_ring *= amp
    on_ring *= root_x
    work = np.cbrt(root_x)
    lorentz *= work
    root_x *= root_x
    lorentz *= root_x
    np.subtract(1.0, amp, out=amp)
    amp -= on_ring
    amp += lorentz
    amp *= _window(f, fr.cut, d, sign=-1.0, out=work)
    # Phase: TaylorF2 below f_j; Newtonian-shaped t(f) plus ringdown above.
    rows = _series(phase_coefficients(eta, s1, s2))
    v_j = _junction_v(rows)
    f_j = v_j**3 / (np.pi * m_sec)
    powers = v_j[:, None] ** (np.arange(8.0) - 5.0)
    log_powers = powers * np.log(v_j)[:, None]
    p0, p1, p2 = (
        3.0 / (128.0 * eta) * np.sum(a * powers + b * log_powers, axis=1) for a, b in rows
    )
    # Psi(f_j) + Psi'(f_j) (f - f_j) + 2 pi int_{f_j}^f K (f_j^{-8/3} - x^{-8/3}) dx with
    # Psi''(f_j) = p2 / f_j^2 = 2 pi (8/3) K f_j^{-11/3}, minus the ringdown term's
    # value and slope at f_j: c0 + c1 f + c2 f^{-5/3}.
    k_law = 3.0 * p2 * f_j ** (5.0 / 3.0) / (16.0 * np.pi)
    fr_j = MergerFrequencies(*(x[:, 0] for x in fr))
    c1 = p1 / f_j - _ring_slope(f_j, fr_j, d[:, 0]) + 2.0 * np.pi * k_law * f_j ** (-8.0 / 3.0)
    c2 = 1.2 * np.pi * k_law
    c0 = p0 - _ring_phase(f_j[:, None], fr, d)[:, 0] - c1 * f_j - c2 * f_j ** (-5.0 / 3.0)
    tail = np.stack([c0, c1, c2], axis=1) @ np.stack([np.ones_like(f), f, f ** (-5.0 / 3.0)])
    tail += _ring_phase(f, fr, d, out=lorentz, work=on_ring)
    psi = taylorf2_phase(f, mc, q, spin1=s1, spin2=s2)
    np.copyto(psi, tail, where=f > f_j[:, None])
    if scalar:
        return amp[0], psi[0]
    return amp, psi


def merger_strain(
    frequencies: ArrayLike,
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    effective_distance: ArrayLike,
    coalescence_time: ArrayLike = 0.0,
    phase: ArrayLike = 0.0,
    spin1: ArrayLike = 0.0,
    spin2: ArrayLike = 0.0,
) -> NDArray[np.complex128]:
    """Strain ``h~(f)`` of the merger model as seen by one detector, 1/Hz.

    ``A_N f^{-7/6} S(f) exp(-i (Psi + 2 pi f t_c - phi_c - pi/4))``,
    ``A_N = sqrt(5/24) pi^{-2/3} Mc^{5/6} / D_eff`` (Cutler & Flanagan 1994, PRD
    49, 2658, Eq. 3.4), ``S`` and ``Psi`` of :func:`merger_parts`. Arguments and
    shapes as :func:`estimator.waveform.taylorf2`.
    """
    f = np.atleast_1d(np.asarray(frequencies, dtype=float))
    params = [chirp_mass, mass_ratio, effective_distance, coalescence_time, phase, spin1, spin2]
    scalar = all(np.ndim(p) == 0 for p in params)
    mc, q, dist, tc, phi, s1, s2 = np.broadcast_arrays(
        *(np.atleast_1d(np.asarray(p, dtype=float)) for p in params)
    )
    amp, psi = merger_parts(f, mc, q, s1, s2)
    psi = psi + 2.0 * np.pi * tc[:, None] * f - phi[:, None] - np.pi / 4.0
    amp0 = (
        np.sqrt(5.0 / 24.0)
        * np.pi ** (-2.0 / 3.0)
        * (mc * MSUN_SECONDS) ** (5.0 / 6.0)
        / (dist * MPC_SECONDS)
    )
    h = np.asarray(amp0[:, None] * f ** (-7.0 / 6.0) * amp * np.exp(-1j * psi), dtype=complex)
    return h[0] if scalar else h


def model_top_frequency(
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    spin1: ArrayLike = 0.0,
    spin2: ArrayLike = 0.0,
) -> Array:
    """Frequency above which ``S`` is below ``1e-8`` of its peak, Hz.

    ``f_cut + 3 d``: there the cut window is below ``exp(-24) = 4e-11`` and the
    Lorentzian piece does not exceed the peak of ``S``. Shaped like the broadcast
    inputs.
    """
    scalar, _, q, s1, s2, eta, total = _setup(chirp_mass, mass_ratio, spin1, spin2)
    cut = merger_frequencies(total, eta, q, s1, s2).cut
    top = cut + _TOP_WIDTHS * WINDOW_WIDTH / (total * MSUN_SECONDS)
    return np.asarray(top[0] if scalar else top, dtype=float)
