"""The coordinates the sampler moves in.

The coalescence time of an inspiral is strongly correlated with its masses:
the data fix when the signal passes through the frequencies where it is
loudest, and the coalescence time follows from that by the mass-dependent
time to coalescence. The sampler therefore moves in the *arrival time*
``t_ref = t_c - tau(f_ref; Mc, q)`` at a reference frequency ``f_ref`` near
the signal's noise-weighted mean frequency, where the two are nearly
uncorrelated (the time-of-arrival reparametrisation used in rapid
localisation and Fisher studies, e.g. Cutler & Flanagan 1994, Sec. IV A, who
note the correlation of t_c with the masses). The map is a shear,
``(Mc, q, t_c) -> (Mc, q, t_c - tau(Mc, q))``, with unit Jacobian, so prior
densities carry over unchanged.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .conditioning import DetectorData
from .waveform import isco_frequency, symmetric_mass_ratio, time_to_coalescence

__all__ = ["SAMPLER_NAMES", "SPIN_COORDINATES", "ArrivalTime", "reference_frequency"]

Array = NDArray[np.float64]

#: Names of the sampler's coordinates, in the chain's column order.
SAMPLER_NAMES = ("chirp_mass", "mass_ratio", "effective_distance", "arrival_time")
#: Coordinates appended when the aligned spins are sampled.
SPIN_COORDINATES = ("effective_spin", "spin2")


def reference_frequency(data: DetectorData, chirp_mass: float, mass_ratio: float) -> float:
    """Noise-weighted mean frequency of a restricted-amplitude inspiral, Hz.

    ``f_ref = int f |h|^2/S df / int |h|^2/S df`` with ``|h|^2 ∝ f^{-7/3}`` below the
    ISCO frequency (the moment that sets the timing accuracy at leading order;
    Cutler & Flanagan 1994, Sec. IV A).
    """
    f = data.frequencies
    f_isco = float(isco_frequency(chirp_mass * symmetric_mass_ratio(mass_ratio) ** (-0.6)))
    weight = np.where(f <= f_isco, f ** (-7.0 / 3.0) / data.psd, 0.0)
    return float(np.sum(f * weight) / np.sum(weight))


@dataclass(frozen=True)
class ArrivalTime:
    """Map between physical parameters and the sampler's (arrival-time) coordinates.

    With aligned spins (``names`` ending in :data:`SPIN_COORDINATES`) the sampler
    moves in the effective spin ``chi_eff = (spin1 + q spin2)/(1 + q)`` and ``spin2``:
    the data measure mostly ``chi_eff`` (with the masses), so the posterior is a
    nearly flat slab in ``spin2`` rather than a surface twisting with ``q`` in
    ``(spin1, spin2)``; :meth:`log_jacobian` carries the change of variables. The
    lag then includes the spins' terms (they move the signal's arrival as much as
    the masses do); the time map stays a shear with unit Jacobian.
    """

    f_ref: float
    names: tuple[str, ...] = SAMPLER_NAMES

    def lag(
        self,
        chirp_mass: Array,
        mass_ratio: Array,
        spin1: Array | None = None,
        spin2: Array | None = None,
    ) -> Array:
        """``t_c - t(f_ref)``, s, shape ``(n,)``, with the aligned spins' terms when given.

        Proposals outside the physical range (``q <= 0``, ``Mc <= 0``, ``|chi| >= 1``)
        get a finite placeholder here; the prior rejects them.
        """
        mc = np.asarray(chirp_mass, dtype=float)
        q = np.asarray(mass_ratio, dtype=float)
        ok = (mc > 0.0) & (q > 0.0) & (q <= 1.0)
        s1 = np.zeros(mc.shape) if spin1 is None else np.asarray(spin1, dtype=float)
        s2 = np.zeros(mc.shape) if spin2 is None else np.asarray(spin2, dtype=float)
        ok &= (np.abs(s1) < 1.0) & (np.abs(s2) < 1.0)
        lag = time_to_coalescence(
            self.f_ref,
            np.where(ok, mc, 1.0),
            np.where(ok, q, 1.0),
            np.where(ok, s1, 0.0),
            np.where(ok, s2, 0.0),
        )
        return np.asarray(np.where(ok, lag.reshape(mc.shape), 0.0), dtype=float)

    @property
    def spinning(self) -> bool:
        """Whether the aligned spins are among the coordinates."""
        return "effective_spin" in self.names

    def _spins(self, p: Mapping[str, Array]) -> tuple[Array | None, Array | None]:
        """Physical ``(spin1, spin2)`` of physical parameters ``p`` (None without spins)."""
        if not self.spinning:
            return None, None
        return np.asarray(p["spin1"]), np.asarray(p["spin2"])

    def log_jacobian(self, u: Mapping[str, Array]) -> Array:
        """``ln |d(physical)/d(sampler)|`` at sampler coordinates ``u``.

        Zero without spins (the time shear has unit Jacobian). With spins,
        ``spin1 = (1 + q) chi_eff - q spin2`` gives ``|d(spin1, spin2)/d(chi_eff, spin2)|
        = 1 + q``; a density uniform in ``(spin1, spin2)`` is ``(1 + q)`` times that in
        the sampler's coordinates.
        """
        q = np.asarray(u["mass_ratio"], dtype=float)
        if not self.spinning:
            return np.zeros(q.shape)
        return np.asarray(np.log1p(np.where(q > -1.0, q, 0.0)), dtype=float)

    def to_physical(self, u: Mapping[str, Array]) -> dict[str, Array]:
        """Sampler coordinates -> ``chirp_mass, mass_ratio, effective_distance,
        coalescence_time``."""
        mc, q = np.asarray(u["chirp_mass"]), np.asarray(u["mass_ratio"])
        out = {"chirp_mass": mc, "mass_ratio": q,
               "effective_distance": np.asarray(u["effective_distance"])}  # fmt: skip
        if self.spinning:
            spin2 = np.asarray(u["spin2"])
            out["spin1"] = (1.0 + q) * np.asarray(u["effective_spin"]) - q * spin2
            out["spin2"] = spin2
        spins = self._spins(out)
        out["coalescence_time"] = np.asarray(u["arrival_time"]) + self.lag(mc, q, *spins)
        return out

    def from_physical(self, p: Mapping[str, Array]) -> dict[str, Array]:
        """Physical parameters -> sampler coordinates."""
        mc, q = np.asarray(p["chirp_mass"]), np.asarray(p["mass_ratio"])
        out = {
            "chirp_mass": mc,
            "mass_ratio": q,
            "effective_distance": np.asarray(p["effective_distance"]),
            "arrival_time": np.asarray(p["coalescence_time"]) - self.lag(mc, q, *self._spins(p)),
        }
        if self.spinning:
            spin1, spin2 = np.asarray(p["spin1"]), np.asarray(p["spin2"])
            out["effective_spin"] = (spin1 + q * spin2) / (1.0 + q)
            out["spin2"] = spin2
        return out
