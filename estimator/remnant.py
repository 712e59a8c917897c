"""The black hole left by a non-precessing binary: mass, spin and ringdown mode.

Spins are the aligned dimensionless components ``chi_i`` (``-1 < chi_i < 1``),
``spin1`` belonging to the heavier body; ``mass_ratio = q = m2/m1 <= 1``. All
results are fractions of the initial total mass ``M = m1 + m2`` or
dimensionless, except :func:`ringdown` (Hz).

References
----------
Barausse & Rezzolla 2009, ApJL 704, L40: remnant spin (aligned-spin case).
Husa, Khan, Hannam, Puerrer, Ohme, Jimenez Forteza & Bohe 2016, PRD 93, 044006,
Eq. 3.8: radiated energy.
Berti, Cardoso & Will 2006, PRD 73, 064030, Table VIII: fit to the
fundamental ``l = m = 2`` Kerr quasinormal mode.

Every coefficient below is written from memory of the cited paper; the tests
compare the results with independent numerical-relativity and perturbation-theory
values (Scheel et al. 2009; Leaver 1985).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .waveform import MSUN_SECONDS

__all__ = ["final_mass", "final_spin", "qnm_frequency", "radiated_energy", "ringdown"]

Array = NDArray[np.float64]

# Barausse & Rezzolla 2009, Eq. 6 and the fitted values below it (from memory).
_S4, _S5, _T0, _T2, _T3 = -0.1229, 0.4537, -2.8904, -3.5171, 2.5763
#: Largest remnant spin magnitude returned by :func:`final_spin` (our guard).
_SPIN_MAX = 0.998
# Husa et al. 2016, Eq. 3.8 (from memory): E0(eta) polynomial, numerator and
# denominator coefficients of the spin factor.
_E0 = (0.0559745, 0.580951, -0.960673, 3.35241)
_E_NUM = (-0.00303023, -2.00661, 7.70506)
_E_DEN = (-0.67144, -1.47569, 7.30468)
# Berti, Cardoso & Will 2006, Table VIII, l = m = 2, n = 0 (from memory).
_F_FIT = (1.5251, -1.1568, 0.1292)
_Q_FIT = (0.7000, 1.4187, -0.4990)


def _inputs(mass_ratio: ArrayLike, spin1: ArrayLike, spin2: ArrayLike) -> tuple[Array, ...]:
    """``(q, chi1, chi2, eta)`` broadcast to one shape."""
    q, chi1, chi2 = np.broadcast_arrays(
        *(np.asarray(x, dtype=float) for x in (mass_ratio, spin1, spin2))
    )
    return q, chi1, chi2, q / (1.0 + q) ** 2


def final_spin(mass_ratio: ArrayLike, spin1: ArrayLike, spin2: ArrayLike) -> Array:
    """Dimensionless spin of the remnant of an aligned-spin binary.

    ``a_f = a~ + a~ nu (s4 a~ + s5 nu + t0) + nu (2 sqrt(3) + t2 nu + t3 nu^2)``
    with ``a~ = (chi1 + chi2 q^2) / (1 + q^2)``, ``nu = eta`` and
    ``(s4, s5, t0, t2, t3) = (-0.1229, 0.4537, -2.8904, -3.5171, 2.5763)``
    (from memory of Barausse & Rezzolla 2009, ApJL 704, L40, Eq. 6 for parallel
    spins). Negative for a remnant spinning against the orbit. Arguments
    broadcast.

    The fit exceeds the Kerr bound for nearly extremal aligned spins at
    moderate mass ratios (e.g. ``q = 0.2``, ``chi1 = chi2 = 0.99`` gives 1.005);
    the result is therefore clipped to ``|a_f| <= 0.998`` (a guard of ours).
    """
    q, chi1, chi2, nu = _inputs(mass_ratio, spin1, spin2)
    a = (chi1 + chi2 * q**2) / (1.0 + q**2)
    orbital = nu * (2.0 * np.sqrt(3.0) + _T2 * nu + _T3 * nu**2)
    spin = a + a * nu * (_S4 * a + _S5 * nu + _T0) + orbital
    return np.asarray(np.clip(spin, -_SPIN_MAX, _SPIN_MAX), dtype=float)


def radiated_energy(mass_ratio: ArrayLike, spin1: ArrayLike, spin2: ArrayLike) -> Array:
    """Energy radiated in gravitational waves, as a fraction of ``M``.

    ``E = E0(eta) (1 + S (n0 + n1 eta + n2 eta^2)) / (1 + S (d0 + d1 eta + d2 eta^2))``,
    ``E0 = 0.0559745 eta + 0.580951 eta^2 - 0.960673 eta^3 + 3.35241 eta^4``,
    ``(n0, n1, n2) = (-0.00303023, -2.00661, 7.70506)``,
    ``(d0, d1, d2) = (-0.67144, -1.47569, 7.30468)``
    (from memory of Husa et al. 2016, PRD 93, 044006, Eq. 3.8).

    The spin variable is taken as ``S^ = (m1^2 chi1 + m2^2 chi2) / (m1^2 + m2^2)``
    (equal to ``chi`` for equal masses and spins). The spin factor is the least
    certain part of this memory, the normalisation of ``S`` in particular: with
    ``S^`` an equal-mass binary with ``chi1 = chi2 = 0.97`` radiates about 11%
    of ``M``, as numerical simulations of nearly extremal spins find, while a
    normalisation by ``M^2`` would give under 7%.
    """
    q, chi1, chi2, eta = _inputs(mass_ratio, spin1, spin2)
    s = (chi1 + q**2 * chi2) / (1.0 + q**2)
    e0 = eta * (_E0[0] + eta * (_E0[1] + eta * (_E0[2] + eta * _E0[3])))
    num = 1.0 + s * (_E_NUM[0] + _E_NUM[1] * eta + _E_NUM[2] * eta**2)
    den = 1.0 + s * (_E_DEN[0] + _E_DEN[1] * eta + _E_DEN[2] * eta**2)
    return np.asarray(e0 * num / den, dtype=float)


def final_mass(mass_ratio: ArrayLike, spin1: ArrayLike, spin2: ArrayLike) -> Array:
    """Remnant mass as a fraction of ``M``: ``1 - E_rad`` (:func:`radiated_energy`).

    Neglects the (much smaller) mass-energy absorbed by the horizons before merger.
    """
    return np.asarray(1.0 - radiated_energy(mass_ratio, spin1, spin2), dtype=float)


def qnm_frequency(final_spin: ArrayLike) -> tuple[Array, Array]:
    """Fundamental ``l = m = 2`` quasinormal mode of a Kerr hole of spin ``j``.

    ``F = M_f omega_R = 1.5251 - 1.1568 (1 - j)^0.1292`` and quality factor
    ``Q = omega_R / (2 omega_I) = 0.7000 + 1.4187 (1 - j)^-0.4990`` (from memory
    of Berti, Cardoso & Will 2006, PRD 73, 064030, Table VIII; a few-% fit for
    ``0 <= j < 0.99``). Negative ``j`` (remnant spinning against the orbit)
    extrapolates the fit towards the counter-rotating mode, whose frequency
    falls as ``j -> -1``; there it is a qualitative model only.

    Returns
    -------
    (F, Q)
        Dimensionless angular frequency in units of ``1/M_f`` and quality factor.
        Then ``f_ring = F / (2 pi M_f)``, damping time ``tau = Q / (pi f_ring)``.
    """
    x = 1.0 - np.asarray(final_spin, dtype=float)
    f_dimless = _F_FIT[0] + _F_FIT[1] * x ** _F_FIT[2]
    quality = _Q_FIT[0] + _Q_FIT[1] * x ** _Q_FIT[2]
    return np.asarray(f_dimless, dtype=float), np.asarray(quality, dtype=float)


def ringdown(
    total_mass_msun: ArrayLike,
    mass_ratio: ArrayLike,
    spin1: ArrayLike = 0.0,
    spin2: ArrayLike = 0.0,
) -> tuple[Array, Array]:
    """Ringdown frequency and damping width of the remnant, in Hz.

    Parameters
    ----------
    total_mass_msun
        Detector-frame total mass ``m1 + m2``, Msun.
    mass_ratio, spin1, spin2
        ``m2/m1 <= 1`` and aligned spins. All arguments broadcast.

    Returns
    -------
    (f_ring, f_damp)
        ``f_ring = F / (2 pi M_f)`` with ``M_f = M (1 - E_rad)`` and ``F`` of
        :func:`qnm_frequency` at :func:`final_spin`; ``f_damp = f_ring / (2 Q)
        = 1 / (2 pi tau)``, the half width at half maximum of the mode's
        Lorentzian power spectrum.
    """
    m_final = (
        np.asarray(total_mass_msun, dtype=float)
        * MSUN_SECONDS
        * final_mass(mass_ratio, spin1, spin2)
    )
    f_dimless, quality = qnm_frequency(final_spin(mass_ratio, spin1, spin2))
    f_ring = f_dimless / (2.0 * np.pi * m_final)
    return np.asarray(f_ring, dtype=float), np.asarray(f_ring / (2.0 * quality), dtype=float)
