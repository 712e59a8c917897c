"""TaylorF2: the frequency-domain inspiral model in the stationary-phase approximation.

Point-particle phase to 3.5 post-Newtonian (PN) order plus the spin terms of
binaries with spins aligned with the orbital angular momentum (:mod:`estimator.spins`),
restricted (Newtonian) amplitude, ending at the Schwarzschild
innermost-stable-circular-orbit (ISCO) frequency of the total mass.

Conventions
-----------
* Forward Fourier transform ``x~(f) = \\int x(t) exp(-2 pi i f t) dt``.
* ``h~(f) = A f^{-7/6} exp(-i Psi(f))`` with
  ``Psi(f) = 2 pi f t_c - phi_c - pi/4 + 3/(128 eta v^5) sum_k phi_k v^k``,
  ``v = (pi M f)^{1/3}`` (G = c = 1, M the total mass in seconds).
* Masses are detector-frame (redshifted) in solar masses, distances in Mpc,
  times in seconds, frequencies in Hz.

References
----------
Buonanno, Iyer, Ochsner, Pan & Sathyaprakash 2009, PRD 80, 084043, Eq. (3.18)
and Table I ("TaylorF2"): the phase coefficients ``phi_k``.
Cutler & Flanagan 1994, PRD 49, 2658, Eq. (3.4): the restricted amplitude.
Sathyaprakash & Dhurandhar 1991, PRD 44, 3819: the Newtonian chirp time.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .spins import spin_phase_terms

__all__ = [
    "EULER_GAMMA",
    "MPC_SECONDS",
    "MSUN_SECONDS",
    "PN_ORDERS",
    "PhaseBasis",
    "chirp_time",
    "component_masses",
    "isco_frequency",
    "phase_coefficients",
    "phase_derivatives",
    "phase_of_eta",
    "symmetric_mass_ratio",
    "taylorf2",
    "taylorf2_phase",
    "time_to_coalescence",
]

#: G M_sun / c^3 in seconds (IAU 2015 nominal solar mass parameter, common practice).
MSUN_SECONDS = 4.925490947641267e-06
#: One megaparsec divided by c, in seconds (IAU 2012 au, pc = 648000/pi au).
MPC_SECONDS = 3.085677581491367e22 / 299792458.0
EULER_GAMMA = 0.5772156649015329
#: Exponents k of v^k in the PN phase series, 0 (Newtonian) to 7 (3.5PN).
PN_ORDERS = (0, 1, 2, 3, 4, 5, 6, 7)

Array = NDArray[np.float64]


def symmetric_mass_ratio(mass_ratio: ArrayLike) -> Array:
    """Symmetric mass ratio ``eta = q / (1 + q)^2`` of ``q = m2/m1``."""
    q = np.asarray(mass_ratio, dtype=float)
    return q / (1.0 + q) ** 2


def component_masses(chirp_mass: ArrayLike, mass_ratio: ArrayLike) -> tuple[Array, Array]:
    """Primary and secondary mass from chirp mass and ``q = m2/m1 <= 1``.

    ``m1 = Mc (1+q)^{1/5} q^{-3/5}``, ``m2 = q m1`` (from
    ``Mc = (m1 m2)^{3/5} / (m1+m2)^{1/5}``; Cutler & Flanagan 1994, Eq. 1.1).
    """
    mc = np.asarray(chirp_mass, dtype=float)
    q = np.asarray(mass_ratio, dtype=float)
    m1 = mc * (1.0 + q) ** 0.2 * q ** (-0.6)
    return m1, q * m1


def isco_frequency(total_mass: ArrayLike) -> Array:
    """Gravitational-wave frequency at the Schwarzschild ISCO, in Hz.

    ``f = 1 / (6^{3/2} pi M)``, i.e. about 4400 Hz x (M_sun / M) (common practice).
    """
    m = np.asarray(total_mass, dtype=float) * MSUN_SECONDS
    return np.asarray(1.0 / (6.0**1.5 * np.pi * m), dtype=float)


def chirp_time(chirp_mass: ArrayLike, f_low: float) -> Array:
    """Newtonian chirp time from ``f_low`` to coalescence, in seconds.

    ``tau_0 = 5 / (256 pi f_low) (pi Mc f_low)^{-5/3}`` (Sathyaprakash &
    Dhurandhar 1991, Eq. 2.7).
    """
    mc = np.asarray(chirp_mass, dtype=float) * MSUN_SECONDS
    return 5.0 / (256.0 * np.pi * f_low) * (np.pi * mc * f_low) ** (-5.0 / 3.0)


def phase_coefficients(
    eta: ArrayLike, spin1: ArrayLike = 0.0, spin2: ArrayLike = 0.0
) -> dict[int, tuple[Array, Array]]:
    """Coefficients of the TaylorF2 phase series.

    Returns ``{k: (a_k, b_k)}`` such that the PN sum is
    ``sum_k (a_k + b_k ln v) v^k`` (Buonanno et al. 2009, Eq. 3.18; the 2.5PN
    term is written with ``ln v`` and a constant that only shifts ``phi_c``
    and ``t_c``, the 3PN term carries ``-6848/21 ln(4 v)``). Aligned spins
    ``spin1`` (heavier body) and ``spin2`` add the terms of
    :func:`estimator.spins.spin_phase_terms`.
    """
    eta = np.asarray(eta, dtype=float)
    if np.any(np.asarray(spin1) != 0.0) or np.any(np.asarray(spin2) != 0.0):
        plain = phase_coefficients(eta)
        extra = spin_phase_terms(eta, spin1, spin2)
        return {
            k: (a + extra[k][0], b + extra[k][1]) if k in extra else (a, b)
            for k, (a, b) in plain.items()
        }
    zero = np.zeros_like(eta)
    pi = np.pi
    a5 = pi * (38645.0 / 756.0 - 65.0 / 9.0 * eta)
    a6 = (
        11583231236531.0 / 4694215680.0
        - 640.0 / 3.0 * pi**2
        - 6848.0 / 21.0 * EULER_GAMMA
        - 6848.0 / 21.0 * np.log(4.0)
        + (-15737765635.0 / 3048192.0 + 2255.0 / 12.0 * pi**2) * eta
        + 76055.0 / 1728.0 * eta**2
        - 127825.0 / 1296.0 * eta**3
    )
    return {
        0: (np.ones_like(eta), zero),
        1: (zero, zero),
        2: (3715.0 / 756.0 + 55.0 / 9.0 * eta, zero),
        3: (-16.0 * pi + zero, zero),
        4: (15293365.0 / 508032.0 + 27145.0 / 504.0 * eta + 3085.0 / 72.0 * eta**2, zero),
        5: (a5, 3.0 * a5),
        6: (a6, -6848.0 / 21.0 + zero),
        7: (
            pi * (77096675.0 / 254016.0 + 378515.0 / 1512.0 * eta - 74045.0 / 756.0 * eta**2),
            zero,
        ),
    }


class PhaseBasis:
    """The TaylorF2 phase on a fixed frequency grid as a matrix product.

    With ``v = c u``, ``c = (pi M)^{1/3}``, ``u = f^{1/3}``, every term of the PN
    series ``3/(128 eta) (a_k + b_k ln v) v^{k-5}`` is a mass-dependent
    coefficient times one of the grid functions ``u^{k-5}`` or ``u^{k-5} ln u``.
    The phase of ``n`` parameter sets on ``nf`` frequencies is then one
    ``(n, 10) @ (10, nf)`` product; the series is that of
    :func:`phase_coefficients` (Buonanno et al. 2009, Eq. 3.18).
    """

    def __init__(self, frequencies: ArrayLike, orders: tuple[int, ...] = PN_ORDERS) -> None:
        f = np.asarray(frequencies, dtype=float)
        self.frequencies = f
        self.orders = tuple(orders)
        u = np.cbrt(f)
        log_u = np.log(u)
        rows = []
        self._layout: list[tuple[int, bool]] = []
        for k in self.orders:
            power = u ** (k - 5)
            rows.append(power)
            self._layout.append((k, False))
            if k in (5, 6):
                rows.append(power * log_u)
                self._layout.append((k, True))
        self.basis = np.ascontiguousarray(np.array(rows))

    def coefficients(
        self,
        chirp_mass: ArrayLike,
        mass_ratio: ArrayLike,
        spin1: ArrayLike | None = None,
        spin2: ArrayLike | None = None,
    ) -> Array:
        """Mass- and spin-dependent coefficients, shape ``(n, n_basis)``.

        Every point-particle ``a_k`` of :func:`phase_coefficients` is a polynomial
        of degree at most 3 in ``eta``; its coefficients are found once (exactly,
        from four evaluations) so that this is a few array operations for any
        ``n``. Aligned spins add the terms of :func:`estimator.spins.spin_phase_terms`.
        """
        mc = np.atleast_1d(np.asarray(chirp_mass, dtype=float))
        q = np.atleast_1d(np.asarray(mass_ratio, dtype=float))
        eta = symmetric_mass_ratio(q)
        log_c = (np.log(np.pi * MSUN_SECONDS) + np.log(mc) - 0.6 * np.log(eta)) / 3.0
        poly, log_poly, powers = _coefficient_tables(self._layout)
        eta_powers = np.stack([np.ones_like(eta), eta, eta**2, eta**3], axis=1)
        scale = (3.0 / (128.0 * eta))[:, None] * np.exp(np.outer(log_c, powers))
        body = eta_powers @ poly + log_c[:, None] * (eta_powers @ log_poly)
        if spin1 is not None or spin2 is not None:
            body += _spin_columns(self._layout, eta, log_c, spin1, spin2)
        return np.asarray(scale * body)

    def phase(
        self,
        chirp_mass: ArrayLike,
        mass_ratio: ArrayLike,
        spin1: ArrayLike | None = None,
        spin2: ArrayLike | None = None,
    ) -> Array:
        """PN phase, shape ``(n, nf)``, radians (as :func:`taylorf2_phase`)."""
        return np.asarray(self.coefficients(chirp_mass, mass_ratio, spin1, spin2) @ self.basis)


def _spin_columns(
    layout: list[tuple[int, bool]],
    eta: Array,
    log_c: Array,
    spin1: ArrayLike | None,
    spin2: ArrayLike | None,
) -> Array:
    """Spin additions to the unscaled :class:`PhaseBasis` coefficients, ``(n, n_basis)``."""
    s1 = np.broadcast_to(np.asarray(0.0 if spin1 is None else spin1, dtype=float), eta.shape)
    s2 = np.broadcast_to(np.asarray(0.0 if spin2 is None else spin2, dtype=float), eta.shape)
    terms = spin_phase_terms(eta, s1, s2)
    out = np.zeros((eta.size, len(layout)))
    for j, (k, is_log) in enumerate(layout):
        if k in terms:
            a_k, b_k = terms[k]
            out[:, j] = b_k if is_log else a_k + b_k * log_c
    return out


def _single_phase(
    f: Array,
    chirp_mass: float,
    mass_ratio: float,
    orders: tuple[int, ...],
    spin1: float = 0.0,
    spin2: float = 0.0,
) -> Array:
    """The PN phase of one parameter set, evaluated directly (Horner's rule in ``v``)."""
    eta = float(symmetric_mass_ratio(mass_ratio))
    return phase_of_eta(f, chirp_mass, eta, orders, spin1=spin1, spin2=spin2)


def phase_of_eta(
    f: Array,
    chirp_mass: float,
    eta: float,
    orders: tuple[int, ...] = PN_ORDERS,
    *,
    spin1: float = 0.0,
    spin2: float = 0.0,
) -> Array:
    """The PN phase of :func:`taylorf2_phase` for one chirp mass and symmetric mass ratio.

    Written in ``eta`` rather than ``q``, so that it is smooth through the
    equal-mass point ``eta = 1/4`` (the point-particle coefficients are
    polynomials in ``eta``), as derivatives there need.
    """
    total = chirp_mass * eta ** (-0.6) * MSUN_SECONDS
    v = np.cbrt(np.pi * total * f)
    log_v = np.log(v)
    coeffs = phase_coefficients(eta, spin1, spin2)
    series = np.zeros_like(v)
    for k in range(max(orders), -1, -1):
        series *= v
        if k in orders:
            a_k, b_k = (float(c) for c in coeffs[k])
            series += a_k + b_k * log_v if b_k else a_k
    return np.asarray(3.0 / (128.0 * eta) * series / v**5, dtype=float)


_TABLES: dict[tuple[tuple[int, bool], ...], tuple[Array, Array, Array]] = {}


def _coefficient_tables(layout: list[tuple[int, bool]]) -> tuple[Array, Array, Array]:
    """Cubic-in-eta coefficient tables ``(4, n_basis)`` of the plain and ``ln c`` parts,
    and the powers ``k - 5``, for a :class:`PhaseBasis` layout."""
    key = tuple(layout)
    if key not in _TABLES:
        nodes = np.array([0.0, 1.0, 2.0, 3.0])
        coeffs = phase_coefficients(nodes)
        plain = np.zeros((4, len(layout)))
        with_log = np.zeros((4, len(layout)))
        for j, (k, is_log) in enumerate(layout):
            a_k, b_k = coeffs[k]
            if is_log:
                plain[:, j] = b_k
            else:
                plain[:, j] = a_k
                with_log[:, j] = b_k
        vander = np.vander(nodes, 4, increasing=True)
        powers = np.array([k - 5.0 for k, _ in layout])
        _TABLES[key] = (
            np.asarray(np.linalg.solve(vander, plain), dtype=float),
            np.asarray(np.linalg.solve(vander, with_log), dtype=float),
            powers,
        )
    return _TABLES[key]


def taylorf2_phase(
    frequencies: ArrayLike,
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    *,
    orders: tuple[int, ...] = PN_ORDERS,
    spin1: ArrayLike = 0.0,
    spin2: ArrayLike = 0.0,
) -> Array:
    """PN part of the TaylorF2 phase, ``3/(128 eta v^5) sum_k phi_k v^k``.

    Parameters
    ----------
    frequencies
        Shape ``(nf,)``, Hz.
    chirp_mass, mass_ratio
        Shape ``(n,)`` (or scalars), detector-frame solar masses and ``m2/m1``.
    orders
        Which ``k`` of the series to include (all by default).
    spin1, spin2
        Aligned dimensionless spins of the heavier and lighter body (shape
        ``(n,)`` or scalars; zero by default).

    Returns
    -------
    Array of shape ``(n, nf)`` (``(nf,)`` for scalar masses), radians. The
    time and phase terms ``2 pi f t_c - phi_c - pi/4`` are not included.
    Computed through :class:`PhaseBasis`; build one yourself to reuse a grid.
    """
    scalar = all(np.ndim(x) == 0 for x in (chirp_mass, mass_ratio, spin1, spin2))
    mc, q, s1, s2 = np.broadcast_arrays(
        *(np.atleast_1d(np.asarray(x, dtype=float)) for x in (chirp_mass, mass_ratio, spin1, spin2))
    )
    if mc.size == 1:
        phase = _single_phase(np.asarray(frequencies, dtype=float), float(mc[0]), float(q[0]),
                              orders, float(s1[0]), float(s2[0]))[None, :]  # fmt: skip
    else:
        spinning = bool(np.any(s1 != 0.0) or np.any(s2 != 0.0))
        basis = PhaseBasis(frequencies, orders)
        phase = basis.phase(mc, q, s1, s2) if spinning else basis.phase(mc, q)
    return phase[0] if scalar else phase


def taylorf2(
    frequencies: ArrayLike,
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    effective_distance: ArrayLike,
    coalescence_time: ArrayLike = 0.0,
    phase: ArrayLike = 0.0,
    spin1: ArrayLike = 0.0,
    spin2: ArrayLike = 0.0,
) -> NDArray[np.complex128]:
    """TaylorF2 strain ``h~(f)`` as seen by one detector.

    ``h~(f) = sqrt(5/24) pi^{-2/3} Mc^{5/6} / D_eff f^{-7/6} exp(-i Psi(f))``
    for ``f`` below the ISCO frequency of the total mass, zero above it
    (Cutler & Flanagan 1994, Eq. 3.4; Buonanno et al. 2009, Eq. 3.18).

    Parameters
    ----------
    frequencies
        Shape ``(nf,)``, Hz, all > 0.
    chirp_mass, mass_ratio, effective_distance, coalescence_time, phase
        Shape ``(n,)`` or scalars: detector-frame chirp mass (Msun), ``m2/m1``,
        effective distance (Mpc), coalescence time relative to the Fourier
        transform's time origin (s), coalescence phase (rad).

    Returns
    -------
    Complex array ``(n, nf)`` (``(nf,)`` when all parameters are scalars), 1/Hz.
    """
    f = np.asarray(frequencies, dtype=float)
    params = [chirp_mass, mass_ratio, effective_distance, coalescence_time, phase, spin1, spin2]
    scalar = all(np.ndim(p) == 0 for p in params)
    mc, q, dist, tc, phi, s1, s2 = np.broadcast_arrays(
        *(np.atleast_1d(np.asarray(p, dtype=float)) for p in params)
    )
    psi = taylorf2_phase(f, mc, q, spin1=s1, spin2=s2)
    psi += 2.0 * np.pi * tc[:, None] * f[None, :] - phi[:, None] - np.pi / 4.0
    amp0 = (
        np.sqrt(5.0 / 24.0)
        * np.pi ** (-2.0 / 3.0)
        * (mc * MSUN_SECONDS) ** (5.0 / 6.0)
        / (dist * MPC_SECONDS)
    )
    eta = symmetric_mass_ratio(q)
    f_isco = isco_frequency(mc * eta ** (-0.6))
    amp = amp0[:, None] * f[None, :] ** (-7.0 / 6.0) * (f[None, :] <= f_isco[:, None])
    h = np.asarray(amp * np.exp(-1j * psi), dtype=complex)
    return h[0] if scalar else h


def time_to_coalescence(
    frequencies: ArrayLike,
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    spin1: ArrayLike = 0.0,
    spin2: ArrayLike = 0.0,
) -> Array:
    """Time before coalescence at which the signal sweeps through ``f``, in s.

    The stationary-phase time ``t(f) = t_c + (1/2 pi) dPsi/df``
    (Cutler & Flanagan 1994, Eq. 3.3), here as ``t_c - t(f) > 0``, computed
    from the same 3.5PN phase by differentiating the series term by term.
    Frequencies and masses broadcast against each other (scalar masses give
    an array shaped like ``atleast_1d(frequencies)``).
    """
    f = np.atleast_1d(np.asarray(frequencies, dtype=float))
    mc = np.asarray(chirp_mass, dtype=float)
    eta = symmetric_mass_ratio(mass_ratio)
    total = mc * eta ** (-0.6) * MSUN_SECONDS
    coeffs = phase_coefficients(eta, spin1, spin2)
    v = np.cbrt(np.pi * total * f)
    log_v = np.log(v)
    # d/dv [3/(128 eta) (a_k + b_k ln v) v^{k-5}] and dv/df = v / (3 f).
    dpsi_dv = np.zeros_like(v)
    for k, (a_k, b_k) in coeffs.items():
        dpsi_dv += ((k - 5) * (a_k + b_k * log_v) + b_k) * v ** (k - 6)
    dpsi_dv *= 3.0 / (128.0 * eta)
    dpsi_df = dpsi_dv * v / (3.0 * f)
    return np.asarray(-dpsi_df / (2.0 * np.pi), dtype=float)


def phase_derivatives(
    frequencies: ArrayLike,
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    spin1: ArrayLike = 0.0,
    spin2: ArrayLike = 0.0,
) -> tuple[Array, Array]:
    """First and second frequency derivatives of :func:`taylorf2_phase`, s and s^2.

    ``dPsi/df = -2 pi (t_c - t(f))`` (Cutler & Flanagan 1994, Eq. 3.3) and its
    derivative, from the series differentiated term by term in ``v`` with
    ``dv/df = v / (3 f)``. Arguments broadcast like :func:`time_to_coalescence`.
    """
    f = np.atleast_1d(np.asarray(frequencies, dtype=float))
    eta = symmetric_mass_ratio(mass_ratio)
    total = np.asarray(chirp_mass, dtype=float) * eta ** (-0.6) * MSUN_SECONDS
    coeffs = phase_coefficients(eta, spin1, spin2)
    v = np.cbrt(np.pi * total * f)
    log_v = np.log(v)
    d1 = np.zeros_like(v)
    d2 = np.zeros_like(v)
    for k, (a_k, b_k) in coeffs.items():
        # g = (a + b ln v) v^p with p = k - 5: g' = (p (a + b ln v) + b) v^{p-1},
        # g'' = (p (p-1) (a + b ln v) + (2p - 1) b) v^{p-2}.
        p = k - 5.0
        base = a_k + b_k * log_v
        d1 += (p * base + b_k) * v ** (p - 1.0)
        d2 += (p * (p - 1.0) * base + (2.0 * p - 1.0) * b_k) * v ** (p - 2.0)
    d1 *= 3.0 / (128.0 * eta)
    d2 *= 3.0 / (128.0 * eta)
    dv = v / (3.0 * f)
    # d2Psi/df2 = Psi_vv (dv/df)^2 + Psi_v d2v/df2, with d2v/df2 = -2 v / (9 f^2).
    return (
        np.asarray(d1 * dv, dtype=float),
        np.asarray(d2 * dv**2 - d1 * 2.0 * v / (9.0 * f**2), dtype=float),
    )
