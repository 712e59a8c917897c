"""Aligned spins: the spin terms of the TaylorF2 phase and the effective spin.

Spins are the dimensionless components ``chi_i = S_i . L_hat / m_i^2`` along the
orbital angular momentum, ``-1 < chi_i < 1``; ``spin1`` belongs to the heavier
body ``m1 >= m2``. With ``delta = (m1 - m2)/M = sqrt(1 - 4 eta)``,
``chi_s = (chi1 + chi2)/2`` and ``chi_a = (chi1 - chi2)/2`` the terms added to
the coefficients ``(a_k, b_k)`` of :func:`estimator.waveform.phase_coefficients`
(the series ``3/(128 eta v^5) sum_k (a_k + b_k ln v) v^k``) are

* 1.5PN spin-orbit, ``k = 3``:
  ``113/3 delta chi_a + (113/3 - 76/3 eta) chi_s``
  (Kidder 1995, PRD 52, 821; Poisson & Will 1995, PRD 52, 848, Eq. 2.13: ``4 beta``);
* 2PN spin-spin, ``k = 4``, black-hole quadrupole (``kappa = 1``):
  ``(-405/8 + 5/2 eta) chi_s^2 + (-405/8 + 200 eta) chi_a^2 - 405/4 delta chi_s chi_a``,
  i.e. ``-10 sigma`` with ``sigma = 79/8 eta chi1 chi2 + 81/16 sum_i (m_i/M)^2 chi_i^2``
  (Poisson & Will 1995, Eq. 2.13; quadrupole-monopole part: Mikoczi, Vasuth &
  Gergely 2005, PRD 71, 124043);
* 2.5PN spin-orbit, ``k = 5``, multiplying ``1 + 3 ln v`` like the point-particle term:
  ``-gamma``, ``gamma = (732985/2268 - 24260/81 eta - 340/9 eta^2) chi_s
  + (732985/2268 + 140/9 eta) delta chi_a``
  (Blanchet, Buonanno & Faye 2006, PRD 74, 104034; Arun, Buonanno, Faye & Ochsner
  2009, PRD 79, 104023, Eq. 6.22);
* 3PN spin-orbit, ``k = 6``: ``pi (2270/3 delta chi_a + (2270/3 - 520 eta) chi_s)``;
* 3.5PN spin-orbit, ``k = 7``:
  ``(-25150083775/3048192 + 10566655595/762048 eta - 1042165/3024 eta^2
  + 5345/36 eta^3) chi_s + (-25150083775/3048192 + 26804935/6048 eta
  - 1985/48 eta^2) delta chi_a``
  (Bohé, Marsat, Faye & Blanchet 2013, CQG 30, 075017, Eq. 6.25).

All coefficients are written from memory of the cited papers; the tests check
the 1.5PN and 2PN terms in two published forms against each other and the
series against the stationary-phase integral of the PN energy and flux. Spin-spin
terms at 3PN and cubic-in-spin terms at 3.5PN are left out (a truncation of the
series, of the size of the 3PN spin-spin coefficients times ``chi^2 v^6``).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["effective_spin", "spin_phase_terms"]

Array = NDArray[np.float64]


def _split(eta: ArrayLike, spin1: ArrayLike, spin2: ArrayLike) -> tuple[Array, Array, Array, Array]:
    """``(eta, delta, chi_s, chi_a)`` broadcast to one shape."""
    eta_, chi1, chi2 = np.broadcast_arrays(
        np.asarray(eta, dtype=float), np.asarray(spin1, dtype=float), np.asarray(spin2, dtype=float)
    )
    delta = np.sqrt(np.clip(1.0 - 4.0 * eta_, 0.0, None))
    return eta_, delta, 0.5 * (chi1 + chi2), 0.5 * (chi1 - chi2)


#: The linear-in-spin terms ``k = 3, 5, 6, 7`` (columns) as polynomials in ``eta``
#: (rows: ``1, eta, eta^2, eta^3``), multiplying ``chi_s`` and ``delta chi_a``; the
#: numbers are those of the module docstring, with ``k = 5`` carrying ``-gamma``. One
#: small matrix product replaces some forty array operations per call; the sampler
#: makes two calls per step (the time shear and the binned likelihood).
_SPIN_ORDERS = (3, 5, 6, 7)
_CHI_S = np.array([
    [113.0 / 3.0, -732985.0 / 2268.0, np.pi * 2270.0 / 3.0, -25150083775.0 / 3048192.0],
    [-76.0 / 3.0, 24260.0 / 81.0, -np.pi * 520.0, 10566655595.0 / 762048.0],
    [0.0, 340.0 / 9.0, 0.0, -1042165.0 / 3024.0],
    [0.0, 0.0, 0.0, 5345.0 / 36.0],
])
_CHI_A = np.array([
    [113.0 / 3.0, -732985.0 / 2268.0, np.pi * 2270.0 / 3.0, -25150083775.0 / 3048192.0],
    [0.0, -140.0 / 9.0, 0.0, 26804935.0 / 6048.0],
    [0.0, 0.0, 0.0, -1985.0 / 48.0],
    [0.0, 0.0, 0.0, 0.0],
])


def spin_phase_terms(
    eta: ArrayLike, spin1: ArrayLike, spin2: ArrayLike
) -> dict[int, tuple[Array, Array]]:
    """Aligned-spin additions ``{k: (a_k, b_k)}`` to the TaylorF2 phase coefficients.

    ``eta`` the symmetric mass ratio, ``spin1``/``spin2`` the aligned spins of the
    heavier/lighter body; they broadcast. The formulas and their sources are in the
    module docstring (the linear terms evaluated from :data:`_CHI_S` and :data:`_CHI_A`).
    """
    eta_, delta, chi_s, chi_a = _split(eta, spin1, spin2)
    powers = np.stack([np.ones_like(eta_), eta_, eta_ * eta_, eta_ * eta_ * eta_], axis=-1)
    linear = (powers @ _CHI_S) * chi_s[..., None] + (powers @ _CHI_A) * (delta * chi_a)[..., None]
    a3, minus_gamma, a6, a7 = (linear[..., j] for j in range(len(_SPIN_ORDERS)))
    a4 = (
        (-405.0 / 8.0 + 2.5 * eta_) * chi_s**2
        + (-405.0 / 8.0 + 200.0 * eta_) * chi_a**2
        - 405.0 / 4.0 * delta * chi_s * chi_a
    )
    zero = np.zeros_like(eta_)
    return {3: (a3, zero), 4: (a4, zero), 5: (minus_gamma, 3.0 * minus_gamma), 6: (a6, zero),
            7: (a7, zero)}


def effective_spin(mass_ratio: ArrayLike, spin1: ArrayLike, spin2: ArrayLike) -> Array:
    """Mass-weighted effective spin ``chi_eff = (m1 chi1 + m2 chi2) / (m1 + m2)``.

    With ``q = m2/m1``: ``(chi1 + q chi2) / (1 + q)`` (Ajith et al. 2011, PRL 106,
    241101; Racine 2008, PRD 78, 044021: conserved at 2PN for aligned spins).
    """
    q = np.asarray(mass_ratio, dtype=float)
    return np.asarray(
        (np.asarray(spin1, dtype=float) + q * np.asarray(spin2, dtype=float)) / (1.0 + q),
        dtype=float,
    )
