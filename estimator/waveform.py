"""TaylorF2: the frequency-domain inspiral model in the stationary-phase approximation.

Point-particle phase to 3.5 post-Newtonian (PN) order, restricted (Newtonian)
amplitude, ending at the Schwarzschild innermost-stable-circular-orbit (ISCO)
frequency of the total mass.

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


def phase_coefficients(eta: ArrayLike) -> dict[int, tuple[Array, Array]]:
    """Coefficients of the TaylorF2 phase series.

    Returns ``{k: (a_k, b_k)}`` such that the PN sum is
    ``sum_k (a_k + b_k ln v) v^k`` (Buonanno et al. 2009, Eq. 3.18; the 2.5PN
    term is written with ``ln v`` and a constant that only shifts ``phi_c``
    and ``t_c``, the 3PN term carries ``-6848/21 ln(4 v)``).
    """
    eta = np.asarray(eta, dtype=float)
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

    def coefficients(self, chirp_mass: ArrayLike, mass_ratio: ArrayLike) -> Array:
        """Mass-dependent coefficients, shape ``(n, n_basis)``.

        Every ``a_k`` of :func:`phase_coefficients` is a polynomial of degree at
        most 3 in ``eta``; its coefficients are found once (exactly, from four
        evaluations) so that this is a few array operations for any ``n``.
        """
        mc = np.atleast_1d(np.asarray(chirp_mass, dtype=float))
        q = np.atleast_1d(np.asarray(mass_ratio, dtype=float))
        eta = symmetric_mass_ratio(q)
        log_c = (np.log(np.pi * MSUN_SECONDS) + np.log(mc) - 0.6 * np.log(eta)) / 3.0
        poly, log_poly, powers = _coefficient_tables(self._layout)
        eta_powers = np.stack([np.ones_like(eta), eta, eta**2, eta**3], axis=1)
        scale = (3.0 / (128.0 * eta))[:, None] * np.exp(np.outer(log_c, powers))
        return np.asarray(scale * (eta_powers @ poly + log_c[:, None] * (eta_powers @ log_poly)))

    def phase(self, chirp_mass: ArrayLike, mass_ratio: ArrayLike) -> Array:
        """PN phase, shape ``(n, nf)``, radians (as :func:`taylorf2_phase`)."""
        return np.asarray(self.coefficients(chirp_mass, mass_ratio) @ self.basis)


def _single_phase(f: Array, chirp_mass: float, mass_ratio: float, orders: tuple[int, ...]
                  ) -> Array:
    """The PN phase of one parameter set, evaluated directly (Horner's rule in ``v``)."""
    return phase_of_eta(f, chirp_mass, float(symmetric_mass_ratio(mass_ratio)), orders)


def phase_of_eta(
    f: Array, chirp_mass: float, eta: float, orders: tuple[int, ...] = PN_ORDERS
) -> Array:
    """The PN phase of :func:`taylorf2_phase` for one chirp mass and symmetric mass ratio.

    Written in ``eta`` rather than ``q``, so that it is smooth through the
    equal-mass point ``eta = 1/4`` (the series' coefficients are polynomials in
    ``eta``), as derivatives there need.
    """
    total = chirp_mass * eta ** (-0.6) * MSUN_SECONDS
    v = np.cbrt(np.pi * total * f)
    log_v = np.log(v)
    coeffs = phase_coefficients(eta)
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

    Returns
    -------
    Array of shape ``(n, nf)`` (``(nf,)`` for scalar masses), radians. The
    time and phase terms ``2 pi f t_c - phi_c - pi/4`` are not included.
    Computed through :class:`PhaseBasis`; build one yourself to reuse a grid.
    """
    scalar = np.ndim(chirp_mass) == 0 and np.ndim(mass_ratio) == 0
    mc = np.atleast_1d(np.asarray(chirp_mass, dtype=float))
    q = np.atleast_1d(np.asarray(mass_ratio, dtype=float))
    mc, q = np.broadcast_arrays(mc, q)
    if mc.size == 1:
        phase = _single_phase(np.asarray(frequencies, dtype=float), float(mc[0]), float(q[0]),
                              orders)[None, :]
    else:
        phase = PhaseBasis(frequencies, orders).phase(mc, q)
    return phase[0] if scalar else phase


def taylorf2(
    frequencies: ArrayLike,
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    effective_distance: ArrayLike,
    coalescence_time: ArrayLike = 0.0,
    phase: ArrayLike = 0.0,
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
    params = [chirp_mass, mass_ratio, effective_distance, coalescence_time, phase]
    scalar = all(np.ndim(p) == 0 for p in params)
    mc, q, dist, tc, phi = (np.atleast_1d(np.asarray(p, dtype=float)) for p in params)
    n = max(x.size for x in (mc, q, dist, tc, phi))
    mc, q, dist, tc, phi = (np.broadcast_to(x, (n,)) for x in (mc, q, dist, tc, phi))
    psi = taylorf2_phase(f, mc, q)
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
    frequencies: ArrayLike, chirp_mass: ArrayLike, mass_ratio: ArrayLike
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
    coeffs = phase_coefficients(eta)
    v = np.cbrt(np.pi * total * f)
    log_v = np.log(v)
    # d/dv [3/(128 eta) (a_k + b_k ln v) v^{k-5}] and dv/df = v / (3 f).
    dpsi_dv = np.zeros_like(v)
    for k, (a_k, b_k) in coeffs.items():
        dpsi_dv += ((k - 5) * (a_k + b_k * log_v) + b_k) * v ** (k - 6)
    dpsi_dv *= 3.0 / (128.0 * eta)
    dpsi_df = dpsi_dv * v / (3.0 * f)
    return np.asarray(-dpsi_df / (2.0 * np.pi), dtype=float)
