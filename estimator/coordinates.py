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

__all__ = ["SAMPLER_NAMES", "ArrivalTime", "reference_frequency"]

Array = NDArray[np.float64]

#: Names of the sampler's coordinates, in the chain's column order.
SAMPLER_NAMES = ("chirp_mass", "mass_ratio", "effective_distance", "arrival_time")


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

    ``names`` beyond :data:`SAMPLER_NAMES` (the aligned spins) pass through unchanged;
    the lag then includes their terms (the spins move the signal's arrival as much as
    the masses do); the map stays a shear in ``t_c`` with unit Jacobian.
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

    def _spins(self, x: Mapping[str, Array]) -> tuple[Array | None, Array | None]:
        if "spin1" not in self.names:
            return None, None
        return np.asarray(x["spin1"]), np.asarray(x["spin2"])

    def to_physical(self, u: Mapping[str, Array]) -> dict[str, Array]:
        """Sampler coordinates -> ``chirp_mass, mass_ratio, effective_distance,
        coalescence_time``."""
        mc, q = np.asarray(u["chirp_mass"]), np.asarray(u["mass_ratio"])
        out = {
            "chirp_mass": mc,
            "mass_ratio": q,
            "effective_distance": np.asarray(u["effective_distance"]),
            "coalescence_time": np.asarray(u["arrival_time"]) + self.lag(mc, q, *self._spins(u)),
        }
        out.update({k: np.asarray(u[k]) for k in self.names if k not in SAMPLER_NAMES})
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
        out.update({k: np.asarray(p[k]) for k in self.names if k not in SAMPLER_NAMES})
        return out
