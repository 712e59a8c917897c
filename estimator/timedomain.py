"""An independent time-domain inspiral and ringdown, for robustness injections.

The inspiral is TaylorT1: the post-Newtonian (PN) binding energy ``E(v)`` and
energy flux ``F(v)`` of a circular orbit with aligned spins are integrated as
``dv/dt = -F(v) / (M dE/dv)`` and ``dPhi/dt = v^3 / M`` (``Phi`` the orbital
phase, ``v = (M omega)^{1/3}``), their ratio evaluated numerically and not
re-expanded (Damour, Iyer & Sathyaprakash 2001, PRD 63, 044023, Sec. III).
Nothing here uses the TaylorF2 series of :mod:`estimator.waveform`, so that
model can be tested against this one. The strain is the restricted quadrupole
``h = (4 eta M v^2 / D) cos(2 Phi + phase)`` of an optimally oriented detector
(common practice; its stationary-phase amplitude is TaylorF2's
``sqrt(5/24) pi^{-2/3} Mc^{5/6} f^{-7/6} / D``, Cutler & Flanagan 1994, PRD 49,
2658, Eq. 3.4). A damped ringdown of the remnant's ``l = m = 2`` mode
(:func:`estimator.remnant.ringdown`) is joined at the end of the inspiral.

Where the inspiral ends (``end``): by default at the minimum of the PN binding
energy, ``dE/dv = 0`` -- the innermost circular orbit of the PN energy function
(Blanchet 2002, PRD 65, 124009) and the point where TaylorT1's ``dv/dt`` has no
finite value -- but no later than the Schwarzschild light ring ``v = 3^{-1/2}``
(where the plunge of a test mass ends and Buonanno & Damour 2000, PRD 62,
064015, attach the ringdown). For equal masses without spins that is
``M omega = 0.129`` (orbital), a gravitational-wave frequency ``1.9`` times the
Schwarzschild ISCO's, close to the merger frequency of the phenomenological
amplitude fit of Ajith et al. 2008 (PRD 77, 104017, Table I: ``1.84`` times)
where real signals still grow. ``end="isco"`` stops at the Schwarzschild ISCO
``v = 6^{-1/2}`` instead (or at the extremum if it comes first): the amplitude
then decays from well below the frequency where numerical-relativity waveforms
peak, so the injection has too little power above the ISCO (kept to measure
how much the robustness study depends on this choice).

Conventions: G = c = 1, ``M`` the total mass in seconds; ``E`` per unit ``M``;
``X_i = m_i / M``, ``delta = X1 - X2``, ``S = X1^2 chi1 + X2^2 chi2`` and
``Sigma = X2 chi2 - X1 chi1`` (the spin variables ``S_l / M^2`` and
``Sigma_l / M^2`` of Blanchet 2014, Living Rev. Relativ. 17, 2, Sec. 11).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction as Q
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from .errors import EstimatorError, InputError
from .remnant import ringdown
from .waveform import EULER_GAMMA, MPC_SECONDS, MSUN_SECONDS, symmetric_mass_ratio

__all__ = [
    "InspiralOrbit",
    "binding_energy",
    "energy_flux",
    "inspiral_end_frequency",
    "inspiral_orbit",
    "pn_coefficients",
    "td_strain",
]

Array = NDArray[np.float64]

#: ``v`` at the Schwarzschild innermost stable circular orbit, ``6^{-1/2}`` (common practice).
V_ISCO = 6.0**-0.5
#: ``v`` at the Schwarzschild light ring (photon orbit, ``r = 3M``), ``3^{-1/2}`` (common practice).
V_LIGHT_RING = 3.0**-0.5
#: Where the integrated inspiral may end (module docstring).
ENDS = {"extremum": V_LIGHT_RING, "isco": V_ISCO}
#: Width of the frequency blend into the ringdown, in units of ``M`` (our choice).
BLEND_WIDTH = 5.0
LOG2 = math.log(2.0)
#: Length of the cosine roll-on at the start, in gravitational-wave cycles (our choice).
TAPER_CYCLES = 4.0


def pn_coefficients(
    mass_ratio: Any, spin1: Any = 0, spin2: Any = 0, *, pi: Any = math.pi,
    euler_gamma: Any = EULER_GAMMA, log2: Any = LOG2,
) -> tuple[dict[int, Any], dict[int, tuple[Any, Any]]]:  # fmt: skip
    """PN series of the binding energy and the flux of a circular orbit.

    ``E = -(eta v^2 / 2) sum_k e_k v^k`` and
    ``F = (32/5) eta^2 v^10 sum_k (f_k + g_k ln v) v^k``, ``k = 0..7``.
    Point-particle terms to 3.5PN (from memory of Blanchet 2014, Living Rev.
    Relativ. 17, 2, Eq. 233 for ``E`` and Eq. 314 for ``F``; ``E`` has no 3.5PN
    point-particle term); spin-orbit terms at 1.5, 2.5 and 3.5PN in ``E`` and
    1.5, 2.5, 3 (tail) and 3.5PN in ``F`` (from memory of Blanchet 2014,
    Eqs. 415 and 414; the 1.5PN ones also Kidder 1995, PRD 52, 821); the 2PN
    spin-spin terms of :func:`_spin_spin`. Spin-spin terms beyond 2PN are left
    out. Only ``+ - * /`` are used, so exact numbers (fractions, sympy rationals;
    symbols for ``pi``, ``euler_gamma``, ``log2``) go through exactly.

    Returns
    -------
    (energy, flux)
        ``{k: e_k}`` and ``{k: (f_k, g_k)}``.
    """
    x1 = 1 / (1 + mass_ratio)
    x2 = 1 - x1
    eta, delta = x1 * x2, x1 - x2
    s = x1 * x1 * spin1 + x2 * x2 * spin2
    sig = x2 * spin2 - x1 * spin1
    e_ss, f_ss = _spin_spin(x1, x2, spin1, spin2)
    energy = {
        0: 1,
        2: Q(-3, 4) - eta / 12,
        3: Q(14, 3) * s + 2 * delta * sig,
        4: Q(-27, 8) + Q(19, 8) * eta - eta**2 / 24 + e_ss,
        5: (11 - Q(61, 9) * eta) * s + delta * (3 - Q(10, 3) * eta) * sig,
        6: (Q(-675, 64) + (Q(34445, 576) - Q(205, 96) * pi**2) * eta
            - Q(155, 96) * eta**2 - Q(35, 5184) * eta**3),
        7: ((Q(135, 4) - Q(367, 4) * eta + Q(29, 12) * eta**2) * s
            + delta * (Q(27, 4) - 39 * eta + Q(5, 4) * eta**2) * sig),
    }  # fmt: skip
    flux = {
        0: (1, 0),
        2: (Q(-1247, 336) - Q(35, 12) * eta, 0),
        3: (4 * pi - 4 * s - Q(5, 4) * delta * sig, 0),
        4: (Q(-44711, 9072) + Q(9271, 504) * eta + Q(65, 18) * eta**2 + f_ss, 0),
        5: ((Q(-8191, 672) - Q(583, 24) * eta) * pi + (Q(-9, 2) + Q(272, 9) * eta) * s
            + (Q(-13, 16) + Q(43, 4) * eta) * delta * sig, 0),
        # -856/105 ln(16 x) = -856/105 (4 ln 2 + 2 ln v).
        6: (Q(6643739519, 69854400) + Q(16, 3) * pi**2 - Q(1712, 105) * euler_gamma
            - Q(3424, 105) * log2 + (Q(-134543, 7776) + Q(41, 48) * pi**2) * eta
            - Q(94403, 3024) * eta**2 - Q(775, 324) * eta**3
            + pi * (-16 * s - Q(31, 6) * delta * sig), Q(-1712, 105)),
        7: ((Q(-16285, 504) + Q(214745, 1728) * eta + Q(193385, 3024) * eta**2) * pi
            + (Q(476645, 6804) + Q(6172, 189) * eta - Q(2810, 27) * eta**2) * s
            + (Q(9535, 336) + Q(1849, 126) * eta - Q(1501, 36) * eta**2) * delta * sig, 0),
    }  # fmt: skip
    return energy, flux


def _spin_spin(x1: Any, x2: Any, chi1: Any, chi2: Any) -> tuple[Any, Any]:
    """2PN spin-spin parts ``(e_4, f_4)`` for aligned black-hole spins.

    Spin1-spin2: ``E`` gets ``[S1.S2 - 3 (L.S1)(L.S2)] / (eta M^4) = -2 eta chi1 chi2``,
    ``F`` gets ``[-103 S1.S2 + 289 (L.S1)(L.S2)] / (48 eta M^4) = 31/8 eta chi1 chi2``
    (from memory of Kidder 1995, PRD 52, 821, Sec. IV). Quadrupole-monopole
    (``kappa = 1``): the potential of the spin-induced quadrupole ``-kappa S_i^2/m_i``
    (Poisson 1998, PRD 57, 5287) gives, worked out here for a circular equatorial
    orbit, ``e_4 = -kappa X_i^2 chi_i^2`` and, through the shifted radius in the
    quadrupole flux, ``f_4 = 2 kappa X_i^2 chi_i^2``; the self-spin flux adds
    ``X_i^2 chi_i^2 / 16`` (from memory of Mikoczi, Vasuth & Gergely 2005, PRD 71,
    124043: ``sigma = (5 kappa + 1/16) X_i^2 chi_i^2`` for aligned spins).
    """
    self_terms = x1 * x1 * chi1 * chi1 + x2 * x2 * chi2 * chi2
    eta_chi = x1 * x2 * chi1 * chi2
    return -2 * eta_chi - self_terms, Q(31, 8) * eta_chi + Q(33, 16) * self_terms


def _series(mass_ratio: float, spin1: float, spin2: float) -> tuple[Array, Array, Array]:
    """Float arrays over ``k`` of ``(k+2)/2 e_k`` (``dE/dv = -eta v sum``), ``f_k``, ``g_k``."""
    energy, flux = pn_coefficients(mass_ratio, spin1, spin2)
    de = np.array([float(energy.get(k, 0)) * (k + 2) / 2 for k in range(8)])
    f = np.array([float(flux.get(k, (0, 0))[0]) for k in range(8)])
    g = np.array([float(flux.get(k, (0, 0))[1]) for k in range(8)])
    return de, f, g


def _poly(c: Array, v: Any) -> Any:
    """``sum_k c_k v^k`` by Horner's rule (scalar or array ``v``)."""
    out = c[-1] * np.ones_like(v)
    for ck in c[-2::-1]:
        out = out * v + ck
    return out


def binding_energy(v: ArrayLike, mass_ratio: float, spin1: float = 0.0,
                   spin2: float = 0.0) -> Array:  # fmt: skip
    """Binding energy per unit total mass, ``E / M``, of :func:`pn_coefficients`."""
    energy, _ = pn_coefficients(mass_ratio, spin1, spin2)
    e = np.array([float(energy.get(k, 0)) for k in range(8)])
    v = np.asarray(v, dtype=float)
    eta = float(symmetric_mass_ratio(mass_ratio))
    return np.asarray(-0.5 * eta * v**2 * _poly(e, v), dtype=float)


def energy_flux(v: ArrayLike, mass_ratio: float, spin1: float = 0.0,
                spin2: float = 0.0) -> Array:  # fmt: skip
    """Energy flux ``F`` (units of ``c^5/G``) of :func:`pn_coefficients`."""
    _, f, g = _series(mass_ratio, spin1, spin2)
    v = np.asarray(v, dtype=float)
    eta = float(symmetric_mass_ratio(mass_ratio))
    return np.asarray(6.4 * eta**2 * v**10 * (_poly(f, v) + np.log(v) * _poly(g, v)), dtype=float)


@dataclass(frozen=True)
class InspiralOrbit:
    """A TaylorT1 orbit from ``v_start`` (time 0) to ``v_end`` (time ``duration``, s).

    ``end_reason`` is ``"isco"`` or ``"light ring"`` (``v`` reached the cap of
    ``end``) or ``"energy extremum"`` (``dE/dv`` reached 0 first). ``total_mass``
    in s; ``solution`` is the dense output of ``(v, Phi)``.
    """

    total_mass: float
    eta: float
    v_start: float
    v_end: float
    duration: float
    end_reason: str
    solution: Any

    def evaluate(self, t: ArrayLike) -> tuple[Array, Array]:
        """``v`` and the orbital phase (0 at the end) at times ``t`` in ``[0, duration]``, s."""
        y = self.solution(np.asarray(t, dtype=float))
        return np.asarray(y[0], dtype=float), np.asarray(y[1] - self.solution(self.duration)[1])


def _check(chirp_mass: float, mass_ratio: float, spin1: float, spin2: float) -> None:
    """Raise :class:`InputError` for unphysical masses or spins."""
    if not chirp_mass > 0.0:
        raise InputError(f"chirp_mass {chirp_mass} Msun must be positive", field="chirp_mass")
    if not 0.0 < mass_ratio <= 1.0:
        msg = f"mass_ratio {mass_ratio} must be m2/m1 in (0, 1]"
        raise InputError(msg, field="mass_ratio")
    for name, chi in (("spin1", spin1), ("spin2", spin2)):
        if not -1.0 < chi < 1.0:
            raise InputError(f"{name} {chi} must lie in (-1, 1)", field=name)


def _end_velocity(
    de: Array, f: Array, g: Array, v0: float, end: str = "extremum"
) -> tuple[float, str]:
    """First ``v > v0`` where ``dE/dv = 0``, else the cap of ``end``; raises if ``F <= 0`` first."""
    if end not in ENDS:
        raise InputError(f"end {end!r}: choose one of {sorted(ENDS)}", field="end")
    cap = ENDS[end]
    grid = np.linspace(v0, cap, 2001)
    slope = _poly(de, grid)
    flux = _poly(f, grid) + np.log(grid) * _poly(g, grid)
    if flux[0] <= 0.0 or slope[0] <= 0.0:
        msg = f"start velocity v = {v0:.4f} is beyond the end of the PN inspiral; lower f_start"
        raise InputError(msg, field="f_start")
    bad = np.nonzero((slope <= 0.0) | (flux <= 0.0))[0]
    if bad.size == 0:
        return cap, "isco" if end == "isco" else "light ring"
    i = int(bad[0])
    if flux[i] <= 0.0:
        msg = f"PN flux turns negative at v = {grid[i]:.3f} before dE/dv = 0 or the ISCO"
        raise EstimatorError(msg)
    root = brentq(lambda v: float(_poly(de, v)), grid[i - 1], grid[i], xtol=1e-15)
    # Stop a hair short of the extremum, where dv/dt diverges as 1/(v_x - v): the
    # time and phase left scale as (1e-5)^2 and are below 1e-8 M and 1e-8 rad.
    return float(root) * (1.0 - 1e-5), "energy extremum"


def inspiral_orbit(*, chirp_mass: float, mass_ratio: float, spin1: float = 0.0,
                   spin2: float = 0.0, f_start: float,
                   end: str = "extremum") -> InspiralOrbit:  # fmt: skip
    """Integrate the TaylorT1 orbit from the gravitational-wave frequency ``f_start`` (Hz).

    ``dv/dt = -F(v) / (M dE/dv)``, ``dPhi/dt = v^3 / M`` ("TaylorT1", from memory
    of Damour, Iyer & Sathyaprakash 2001, PRD 63, 044023, Sec. III) with
    ``scipy.integrate.solve_ivp`` (DOP853, rtol 1e-11), up to the first of
    ``dE/dv = 0`` (the energy extremum: beyond it ``dv/dt`` has no finite value)
    and the cap of ``end`` (module docstring): the light ring ``v = 3^{-1/2}``
    (``"extremum"``, the default; without spins the extremum comes first, aligned
    spins of about 0.5 reach the cap) or the Schwarzschild ISCO ``v = 6^{-1/2}``
    (``"isco"``, where the adiabatic inspiral of a test mass ends; without spins
    the ISCO comes first, strongly anti-aligned spins reach ``dE/dv = 0`` first).
    """
    _check(chirp_mass, mass_ratio, spin1, spin2)
    eta = float(symmetric_mass_ratio(mass_ratio))
    total = chirp_mass * eta**-0.6 * MSUN_SECONDS
    v0 = (np.pi * total * f_start) ** (1.0 / 3.0) if f_start > 0.0 else 0.0
    if not v0 > 0.0:
        raise InputError(f"f_start {f_start} Hz must be positive", field="f_start")
    de, f, g = _series(mass_ratio, spin1, spin2)
    v_end, reason = _end_velocity(de, f, g, v0, end)
    rate = 6.4 * eta / total

    def rhs(_: float, y: Array) -> list[float]:
        v = y[0]
        flux = _poly(f, v) + math.log(v) * _poly(g, v)
        return [rate * v**9 * flux / _poly(de, v), v**3 / total]

    def reached(_: float, y: Array) -> float:
        return float(y[0] - v_end)

    reached.terminal = True  # type: ignore[attr-defined]
    t_max = 4.0 * 5.0 / (256.0 * eta) * total * v0**-8 + 1e3 * total  # 4x Newtonian chirp time
    sol = solve_ivp(rhs, (0.0, t_max), [v0, 0.0], method="DOP853", rtol=1e-11,
                    atol=[1e-14, 1e-9], events=reached, dense_output=True)  # fmt: skip
    if sol.status != 1:
        msg = f"TaylorT1 orbit did not reach v = {v_end:.4f}: {sol.message}"
        raise EstimatorError(msg)
    return InspiralOrbit(total, eta, v0, v_end, float(sol.t[-1]), reason, sol.sol)


def inspiral_end_frequency(*, chirp_mass: float, mass_ratio: float, spin1: float = 0.0,
                           spin2: float = 0.0, end: str = "extremum") -> float:  # fmt: skip
    """Gravitational-wave frequency (Hz) where :func:`inspiral_orbit` ends, ``v_end^3 / (pi M)``."""
    _check(chirp_mass, mass_ratio, spin1, spin2)
    eta = float(symmetric_mass_ratio(mass_ratio))
    total = chirp_mass * eta**-0.6 * MSUN_SECONDS
    v_end, _ = _end_velocity(*_series(mass_ratio, spin1, spin2), 1e-3, end)
    return float(v_end**3 / (np.pi * total))


def td_strain(times: ArrayLike, *, chirp_mass: float, mass_ratio: float, spin1: float = 0.0,
              spin2: float = 0.0, effective_distance: float, merger_time: float,
              phase: float = 0.0, f_start: float, end: str = "extremum") -> Array:  # fmt: skip
    """Time-domain strain of the TaylorT1 inspiral plus ringdown, one detector.

    Parameters
    ----------
    times
        Sample times, s, any shape (same clock as ``merger_time``).
    chirp_mass, mass_ratio, spin1, spin2
        Detector-frame chirp mass (Msun), ``m2/m1 <= 1``, aligned spins of the
        heavier and lighter body.
    effective_distance
        Mpc (the strain is that of an optimally oriented detector at this distance).
    merger_time
        The time at which the inspiral of :func:`inspiral_orbit` ends (``v`` reaches
        ``v_end``) and the ringdown starts, s.
    phase
        ``h = A cos(2 Phi + phase)`` with ``Phi = 0`` at ``merger_time``; a shift of
        ``phase`` multiplies the positive frequencies by ``exp(i phase)``, as the
        coalescence phase of :func:`estimator.waveform.taylorf2` does.
    f_start
        Gravitational-wave frequency at which the signal starts, Hz; it is zero
        before and rises by a cosine roll-on over the first ``TAPER_CYCLES`` cycles.
    end
        Where the inspiral ends: ``"extremum"`` (default) or ``"isco"`` (module docstring).

    Notes
    -----
    After ``merger_time`` (our construction, in the spirit of Buonanno & Damour
    2000, PRD 62, 064015, who attach a ringdown at the end of the inspiral):
    ``f(t) = f_e + (f_ring - f_e) tanh((t - t_m) / (5 M))`` from the end frequency
    ``f_e`` to the ``l = m = 2`` mode frequency; amplitude
    ``A_e (f / f_e)^{2/3} exp(-(t - t_m) / tau)``, ``tau = 1 / (2 pi f_damp)``
    (:func:`estimator.remnant.ringdown`). Amplitude, frequency and phase are
    continuous at ``t_m``; the frequency's slope is not.
    """
    if not effective_distance > 0.0:
        msg = f"effective_distance {effective_distance} Mpc must be positive"
        raise InputError(msg, field="effective_distance")
    orbit = inspiral_orbit(chirp_mass=chirp_mass, mass_ratio=mass_ratio, spin1=spin1,
                           spin2=spin2, f_start=f_start, end=end)  # fmt: skip
    t = np.asarray(times, dtype=float) - merger_time
    out = np.zeros(t.shape)
    m = orbit.total_mass
    scale = 4.0 * orbit.eta * m / (effective_distance * MPC_SECONDS)
    inspiral = (t >= -orbit.duration) & (t <= 0.0)
    v, orbital = orbit.evaluate(t[inspiral] + orbit.duration)
    taper_len = min(TAPER_CYCLES / f_start, 0.5 * orbit.duration)
    ramp = np.clip((t[inspiral] + orbit.duration) / taper_len, 0.0, 1.0)
    out[inspiral] = (scale * v**2 * np.cos(2.0 * orbital + phase)
                     * 0.5 * (1.0 - np.cos(np.pi * ramp)))  # fmt: skip
    late = t > 0.0
    total_msun = m / MSUN_SECONDS
    f_ring, f_damp = (float(x) for x in ringdown(total_msun, mass_ratio, spin1, spin2))
    f_end = orbit.v_end**3 / (np.pi * m)
    s = t[late] / (BLEND_WIDTH * m)
    freq = f_end + (f_ring - f_end) * np.tanh(s)
    log_cosh = np.logaddexp(s, -s) - math.log(2.0)
    angle = phase + 2.0 * np.pi * (f_end * t[late] + (f_ring - f_end) * BLEND_WIDTH * m * log_cosh)
    decay = np.exp(-np.minimum(2.0 * np.pi * f_damp * t[late], 700.0))
    out[late] = scale * orbit.v_end**2 * (freq / f_end) ** (2.0 / 3.0) * decay * np.cos(angle)
    return out
