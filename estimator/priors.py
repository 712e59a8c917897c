"""Prior distributions for a single-detector inspiral analysis.

A prior is any object with ``names``, ``bounds``, ``log_prob`` and ``sample``
(the :class:`Prior` protocol); :class:`InspiralPrior` is the one we ship.

Masses
------
Uniform in detector-frame component masses ``m1 >= m2``. With
``m1 = Mc A(q)``, ``m2 = q Mc A(q)``, ``A(q) = (1+q)^{1/5} q^{-3/5}`` (invert the
chirp-mass definition of Cutler & Flanagan 1994, PRD 49, 2658, Eq. 1.1), the
Jacobian is ``|d(m1, m2)/d(Mc, q)| = Mc A(q)^2 = Mc (1+q)^{2/5} q^{-6/5}``
(derived here; checked in the tests by finite differences and Monte Carlo).

Orientation factor
------------------
One detector measures only the effective distance ``d_eff = d / w``; the
orientation factor ``w`` in ``[0, 1]`` (``Theta / 4`` of Finn & Chernoff 1993, PRD
47, 2198) follows its law for an isotropic sky position and orientation, which
:mod:`estimator.orientation` tabulates (derivation and sources there).

Distance
--------
With ``p(d) ∝ d^2`` on ``[0, distance_max]`` (uniform in Euclidean volume,
common practice), change variables ``(d, w) -> (d_eff, w)``, ``d = w d_eff``
(Jacobian ``w``): ``p(d_eff, w) ∝ d_eff^2 w^3 p(w)`` on ``w d_eff <= distance_max``,
so ``p(d_eff) ∝ d_eff^2 G(min(1, distance_max / d_eff))`` with
``G(u) = ∫_0^u w^3 p(w) dw``, and ``p(w | d_eff) ∝ w^3 p(w)`` on ``[0, u]``. As
``P(w < x) = 2 x^2 [ln(1/x) + O(1)]`` for small ``x`` (from ``P(R <= r) ≈ r^2``), the
tail falls as ``d_eff^-3 ln d_eff``; we cut it at ``100 distance_max``, which removes
a fraction 7.2e-4 of the prior mass (computed from the table).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np
from numpy.typing import NDArray

from .errors import InputError
from .orientation import draw_orientation, orientation_table
from .waveform import component_masses

__all__ = [
    "EFFECTIVE_DISTANCE_CUTOFF",
    "SPIN_NAMES",
    "InspiralPrior",
    "Prior",
    "draw_orientation",
]

Array = NDArray[np.float64]

#: Names of the aligned spins of the heavier and the lighter body.
SPIN_NAMES = ("spin1", "spin2")

#: Upper end of the effective-distance support, in units of ``distance_max``.
EFFECTIVE_DISTANCE_CUTOFF = 100.0


@runtime_checkable
class Prior(Protocol):
    """What the sampler needs from a prior."""

    @property
    def names(self) -> tuple[str, ...]:
        """Sampled parameter names, in the sampler's column order."""
        ...

    @property
    def bounds(self) -> dict[str, tuple[float, float]]:
        """Support ``(low, high)`` of each sampled parameter."""
        ...

    def log_prob(self, params: Mapping[str, Array]) -> Array:
        """Log prior density, shape ``(n,)``, ``-inf`` outside the support."""
        ...

    def sample(self, rng: np.random.Generator, n: int) -> dict[str, Array]:
        """``n`` independent draws from the prior, keyed by ``names``."""
        ...


def _check_interval(name: str, value: tuple[float, float], low: float, high: float) -> None:
    lo, hi = (float(v) for v in value)
    if not (np.isfinite(lo) and np.isfinite(hi) and low <= lo < hi <= high):
        raise InputError(
            f"{name} bounds ({lo:g}, {hi:g}) are not an increasing pair inside "
            f"[{low:g}, {high:g}]; give (low, high) with low < high",
            field=name,
        )


@dataclass(frozen=True)
class InspiralPrior:
    """Prior over ``(chirp_mass, mass_ratio, effective_distance, coalescence_time)``.

    Attributes
    ----------
    chirp_mass
        ``(low, high)`` detector-frame chirp mass, Msun.
    mass_ratio
        ``(low, high)`` of ``q = m2/m1``, with ``0 < low < high <= 1``.
    component_mass
        ``(low, high)`` for each of ``m1`` and ``m2``, detector-frame Msun.
    spin_max
        Largest magnitude of each aligned spin (uniform prior on
        ``[-spin_max, spin_max]``, common practice); 0 fixes the spins at zero.
    distance_max
        Largest luminosity distance, Mpc.
    time_window
        Half-width of the uniform coalescence-time prior around the trigger time, s.

    Notes
    -----
    Densities are given in the module docstring with their sources.
    ``log_prob`` is unnormalised (correct up to an additive constant), which is
    all an MCMC sampler needs.
    """

    chirp_mass: tuple[float, float]
    mass_ratio: tuple[float, float]
    component_mass: tuple[float, float]
    distance_max: float
    time_window: float = 0.1
    spin_max: float = 0.0

    def __post_init__(self) -> None:
        spin_max = float(self.spin_max)
        if not (np.isfinite(spin_max) and 0.0 <= spin_max < 1.0):
            raise InputError(
                f"spin_max is {spin_max:g}; give a number in [0, 1) (0 fixes the spins at zero)",
                field="spin_max",
            )
        _check_interval("chirp_mass", self.chirp_mass, np.finfo(float).tiny, np.inf)
        _check_interval("mass_ratio", self.mass_ratio, np.finfo(float).tiny, 1.0)
        _check_interval("component_mass", self.component_mass, np.finfo(float).tiny, np.inf)
        for name in ("distance_max", "time_window"):
            value = float(getattr(self, name))
            if not (np.isfinite(value) and value > 0.0):
                raise InputError(
                    f"{name} is {value:g}; it must be a positive finite number", field=name
                )
        (m1_lo, m1_hi), (m2_lo, m2_hi) = self._mass_box()
        if m1_lo > m1_hi or m2_lo > m2_hi:
            raise InputError(
                f"chirp_mass {self.chirp_mass} and mass_ratio {self.mass_ratio} need component "
                f"masses m1 in [{m1_lo:g}, {m1_hi:g}] and m2 in [{m2_lo:g}, {m2_hi:g}], outside "
                f"component_mass {self.component_mass}; widen one of the ranges",
                field="component_mass",
            )

    @property
    def spinning(self) -> bool:
        """Whether the aligned spins are sampled (``spin_max > 0``)."""
        return float(self.spin_max) > 0.0

    @property
    def names(self) -> tuple[str, ...]:
        """``("chirp_mass", "mass_ratio", "effective_distance", "coalescence_time")``,
        then ``("spin1", "spin2")`` when the spins are sampled."""
        base = ("chirp_mass", "mass_ratio", "effective_distance", "coalescence_time")
        return (*base, *SPIN_NAMES) if self.spinning else base

    @property
    def bounds(self) -> dict[str, tuple[float, float]]:
        """Support of each sampled parameter (Msun, 1, Mpc, s, 1, 1)."""
        out = {
            "chirp_mass": (float(self.chirp_mass[0]), float(self.chirp_mass[1])),
            "mass_ratio": (float(self.mass_ratio[0]), float(self.mass_ratio[1])),
            "effective_distance": (0.0, EFFECTIVE_DISTANCE_CUTOFF * self.distance_max),
            "coalescence_time": (-self.time_window, self.time_window),
        }
        for name in SPIN_NAMES if self.spinning else ():
            out[name] = (-float(self.spin_max), float(self.spin_max))
        return out

    def _mass_box(self) -> tuple[tuple[float, float], tuple[float, float]]:
        """Ranges of ``m1`` and ``m2`` that contain the whole mass support.

        ``m1 = Mc A(q)`` falls with ``q`` and ``m2 = Mc (1+q)^{1/5} q^{2/5}`` rises with it.
        """
        (mc_lo, mc_hi), (q_lo, q_hi), (c_lo, c_hi) = (
            self.chirp_mass,
            self.mass_ratio,
            self.component_mass,
        )
        m1_lo = float(component_masses(mc_lo, q_hi)[0])
        m1_hi = float(component_masses(mc_hi, q_lo)[0])
        m2_lo = float(component_masses(mc_lo, q_lo)[1])
        m2_hi = float(component_masses(mc_hi, q_hi)[1])
        return ((max(c_lo, m1_lo), min(c_hi, m1_hi)), (max(c_lo, m2_lo), min(c_hi, m2_hi)))

    def log_prob(self, params: Mapping[str, Array]) -> Array:
        """Unnormalised log prior density.

        ``log Mc + (2/5) log(1+q) - (6/5) log q + 2 log d_eff + log(G(u) / G(1))``,
        ``u = min(1, distance_max / d_eff)``, plus a constant; ``-inf`` outside the
        support (see the module docstring for the derivation and sources). ``log G``
        is interpolated linearly in ``log u`` on the tabulated isotropic law of ``w``.
        Spins, when sampled, are uniform on ``[-spin_max, spin_max]`` each.

        Parameters
        ----------
        params
            Arrays of shape ``(n,)`` keyed by at least ``names``.

        Returns
        -------
        Array of shape ``(n,)``.
        """
        d_eff = np.asarray(params["effective_distance"], dtype=float)
        t = np.asarray(params["coalescence_time"], dtype=float)
        bounds = self.bounds
        ok = (t >= -self.time_window) & (t <= self.time_window)
        ok &= (d_eff > 0.0) & (d_eff <= bounds["effective_distance"][1])
        for name in SPIN_NAMES if self.spinning else ():
            chi = np.asarray(params[name], dtype=float)
            ok &= np.abs(chi) <= self.spin_max
        d_eff = np.where(ok, d_eff, 1.0)
        table = orientation_table()
        log_u = np.minimum(0.0, np.log(self.distance_max / d_eff))
        value = (
            self.mass_log_prob(params["chirp_mass"], params["mass_ratio"])
            + 2.0 * np.log(d_eff)
            + np.interp(log_u, table.log_w, table.log_weighted)
        )
        return np.where(ok, value, -np.inf)

    def mass_log_prob(self, chirp_mass: Array, mass_ratio: Array) -> Array:
        """Log density of ``(Mc, q)`` for ``m1, m2`` uniform in the box (module docstring).

        ``log Mc + (2/5) log(1+q) - (6/5) log q`` inside the bounds, ``-inf`` outside.
        """
        mc = np.asarray(chirp_mass, dtype=float)
        q = np.asarray(mass_ratio, dtype=float)
        bounds = self.bounds
        ok = np.ones(mc.shape, dtype=bool)
        for name, x in (("chirp_mass", mc), ("mass_ratio", q)):
            ok &= (x >= bounds[name][0]) & (x <= bounds[name][1])
        mc = np.where(ok, mc, 1.0)
        q = np.where(ok, q, 1.0)
        m1, m2 = component_masses(mc, q)
        c_lo, c_hi = self.component_mass
        ok &= (m2 >= c_lo) & (m1 <= c_hi) & (m1 >= c_lo) & (m2 <= c_hi)
        value = np.log(mc) + 0.4 * np.log1p(q) - 1.2 * np.log(q)
        return np.where(ok, value, -np.inf)

    def sample_masses(self, rng: np.random.Generator, n: int) -> tuple[Array, Array]:
        """``n`` draws of ``(Mc, q)`` from :meth:`mass_log_prob`'s law."""
        return self._sample_masses(rng, n)

    def sample(self, rng: np.random.Generator, n: int) -> dict[str, Array]:
        """Draw ``n`` independent samples from the whole (truncated) prior.

        Masses: ``m1, m2`` uniform with rejection into the bounds. Distance:
        ``d = distance_max U^{1/3}`` (``p ∝ d^2``), ``w`` from the isotropic law by
        inverse CDF of the table, ``d_eff = d / w``, redrawn where ``d_eff``
        exceeds the support. Time: uniform on ``[-time_window, time_window]``.
        :func:`draw_orientation` recovers ``(w, d)`` given ``d_eff``.

        Returns
        -------
        Arrays of shape ``(n,)`` keyed by ``names``.
        """
        if int(n) != n or n < 0:
            raise InputError(f"sample size is {n!r}; give a non-negative integer", field="n")
        n = int(n)
        mc, q = self._sample_masses(rng, n)
        table = orientation_table()
        d_eff = np.empty(n)
        todo = np.arange(n)
        d_cut = EFFECTIVE_DISTANCE_CUTOFF * self.distance_max
        while todo.size:
            d = self.distance_max * rng.random(todo.size) ** (1.0 / 3.0)
            w = np.interp(rng.random(todo.size), table.cdf, table.w)
            with np.errstate(divide="ignore"):
                d_eff[todo] = d / w
            todo = todo[~((d_eff[todo] > 0.0) & (d_eff[todo] <= d_cut))]
        t = rng.uniform(-self.time_window, self.time_window, n)
        out = {
            "chirp_mass": mc,
            "mass_ratio": q,
            "effective_distance": d_eff,
            "coalescence_time": t,
        }
        for name in SPIN_NAMES if self.spinning else ():
            out[name] = rng.uniform(-self.spin_max, self.spin_max, n)
        return out

    def _sample_masses(self, rng: np.random.Generator, n: int) -> tuple[Array, Array]:
        (m1_lo, m1_hi), (m2_lo, m2_hi) = self._mass_box()
        (mc_lo, mc_hi), (q_lo, q_hi) = self.chirp_mass, self.mass_ratio
        mc_parts: list[Array] = [np.empty(0)]
        q_parts: list[Array] = [np.empty(0)]
        kept = drawn = 0
        while kept < n:
            rate = max(kept, 1) / max(drawn, 1)
            batch = int(min(max(1.5 * (n - kept) / rate, 1024), 2_000_000))
            m1 = rng.uniform(m1_lo, m1_hi, batch)
            m2 = rng.uniform(m2_lo, m2_hi, batch)
            q = m2 / m1
            mc = (m1 * m2) ** 0.6 / (m1 + m2) ** 0.2
            keep = (q >= q_lo) & (q <= q_hi) & (mc >= mc_lo) & (mc <= mc_hi)
            mc_parts.append(mc[keep])
            q_parts.append(q[keep])
            kept += int(keep.sum())
            drawn += batch
            if kept == 0 and drawn >= 10_000_000:
                raise InputError(
                    f"no component masses in {self.component_mass} give chirp_mass in "
                    f"{self.chirp_mass} and mass_ratio in {self.mass_ratio} "
                    f"({drawn} tries); widen the mass ranges",
                    field="chirp_mass",
                )
        return np.concatenate(mc_parts)[:n], np.concatenate(q_parts)[:n]
