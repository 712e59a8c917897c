"""Prior and sampler coordinates of the several-detector analysis.

Prior (common practice for a source population without further knowledge):
masses uniform in detector-frame component masses (as the one-detector prior,
:class:`estimator.priors.InspiralPrior`); luminosity distance uniform in
Euclidean volume, ``p(D) ∝ D^2`` on ``(0, distance_max]``; an isotropic
orientation, ``cos iota`` uniform on ``[-1, 1]``; polarisation angle uniform;
an isotropic sky, right ascension uniform and ``sin dec`` uniform on
``[-1, 1]``; geocentric coalescence time uniform within the time window.

Sampler coordinates: the distance is marginalised (:mod:`estimator.distance_marginal`)
and drawn afterwards; ``cos iota`` and ``sin dec`` (in which the prior is
flat), and instead of the geocentric time the *arrival time* at a reference
site at the reference frequency,
``t_arr = t_c + dt_ref(ra, dec) - tau(f_ref; Mc, q)``. The data fix the arrival
time at each site, so this removes both the time-sky and the time-mass
correlation (the mass part is :class:`estimator.coordinates.ArrivalTime`'s);
for fixed sky and masses the map is a shift, with unit Jacobian.

The right ascension is periodic (``2 pi``); so is the polarisation angle,
with period ``pi/2`` once the coalescence phase is marginalised (``psi -> psi +
pi/2`` flips the sign of both antenna patterns, a phase of ``pi``).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .coordinates import ArrivalTime
from .network_model import SiteGeometry
from .priors import InspiralPrior

__all__ = ["NETWORK_SAMPLER_NAMES", "PERIODS", "NetworkCoordinates", "NetworkPrior"]

Array = NDArray[np.float64]

#: Sampler coordinates of the network analysis, in the chain's column order.
NETWORK_SAMPLER_NAMES = (
    "chirp_mass",
    "mass_ratio",
    "cos_inclination",
    "polarization_angle",
    "right_ascension",
    "sin_declination",
    "arrival_time",
)
#: Periodic sampler coordinates and their periods (module docstring).
PERIODS = {"right_ascension": 2.0 * np.pi, "polarization_angle": 0.5 * np.pi}


@dataclass(frozen=True)
class NetworkCoordinates:
    """Map between physical parameters and the sampler's coordinates."""

    reference_site: SiteGeometry
    gmst: float
    f_ref: float
    names: tuple[str, ...] = NETWORK_SAMPLER_NAMES

    def _shift(self, u: Mapping[str, Array], ra: Array, dec: Array) -> Array:
        """``tau(f_ref; Mc, q) - dt_ref(ra, dec)``: add to ``t_arr`` to get ``t_c``."""
        lag = ArrivalTime(self.f_ref).lag(np.asarray(u["chirp_mass"]), np.asarray(u["mass_ratio"]))
        return np.asarray(lag - self.reference_site.time_delay(ra, dec, self.gmst), dtype=float)

    @staticmethod
    def inside(u: Mapping[str, Array]) -> NDArray[np.bool_]:
        """Where ``|cos iota| <= 1`` and ``|sin dec| <= 1`` (the rest is the prior's)."""
        return np.asarray(
            (np.abs(np.asarray(u["cos_inclination"])) <= 1.0)
            & (np.abs(np.asarray(u["sin_declination"])) <= 1.0)
        )

    def to_physical(self, u: Mapping[str, Array]) -> dict[str, Array]:
        """Sampler coordinates -> physical parameters (angles wrapped into their ranges)."""
        ra = np.mod(np.asarray(u["right_ascension"], dtype=float), 2.0 * np.pi)
        dec = np.arcsin(np.clip(np.asarray(u["sin_declination"], dtype=float), -1.0, 1.0))
        return {
            "chirp_mass": np.asarray(u["chirp_mass"]),
            "mass_ratio": np.asarray(u["mass_ratio"]),
            "inclination": np.arccos(np.clip(np.asarray(u["cos_inclination"]), -1.0, 1.0)),
            "polarization_angle": np.mod(np.asarray(u["polarization_angle"]), 0.5 * np.pi),
            "right_ascension": ra,
            "declination": dec,
            "coalescence_time": np.asarray(u["arrival_time"]) + self._shift(u, ra, dec),
        }

    def from_physical(self, p: Mapping[str, Array]) -> dict[str, Array]:
        """Physical parameters -> sampler coordinates."""
        ra = np.asarray(p["right_ascension"], dtype=float)
        dec = np.asarray(p["declination"], dtype=float)
        return {
            "chirp_mass": np.asarray(p["chirp_mass"]),
            "mass_ratio": np.asarray(p["mass_ratio"]),
            "cos_inclination": np.cos(np.asarray(p["inclination"], dtype=float)),
            "polarization_angle": np.asarray(p["polarization_angle"], dtype=float),
            "right_ascension": ra,
            "sin_declination": np.sin(dec),
            "arrival_time": np.asarray(p["coalescence_time"]) - self._shift(p, ra, dec),
        }


@dataclass(frozen=True)
class NetworkPrior:
    """The network prior (module docstring), evaluated on physical parameters.

    ``log_prob`` is the density in the sampler's coordinates (flat in
    ``cos iota``, ``sin dec``, ``psi``, ``ra`` and arrival time), unnormalised.
    """

    masses: InspiralPrior

    @property
    def distance_max(self) -> float:
        """Largest luminosity distance, Mpc."""
        return float(self.masses.distance_max)

    @property
    def time_window(self) -> float:
        """Half-width of the geocentric coalescence-time prior, s."""
        return float(self.masses.time_window)

    def log_prob(self, params: Mapping[str, Array]) -> Array:
        """Log prior density, shape ``(n,)``, ``-inf`` outside the support.

        Without ``luminosity_distance`` in ``params``, the density of the rest
        (the distance marginalised).
        """
        t = np.asarray(params["coalescence_time"], dtype=float)
        ok = (t >= -self.time_window) & (t <= self.time_window)
        value = self.masses.mass_log_prob(params["chirp_mass"], params["mass_ratio"])
        if "luminosity_distance" in params:
            dist = np.asarray(params["luminosity_distance"], dtype=float)
            ok &= (dist > 0.0) & (dist <= self.distance_max)
            value = value + 2.0 * np.log(np.where(ok, dist, 1.0))
        return np.where(ok, value, -np.inf)

    def sample(self, rng: np.random.Generator, n: int) -> dict[str, Array]:
        """``n`` independent draws of the physical parameters."""
        mc, q = self.masses.sample_masses(rng, n)
        return {
            "chirp_mass": mc,
            "mass_ratio": q,
            "luminosity_distance": self.distance_max * rng.random(n) ** (1.0 / 3.0),
            "inclination": np.arccos(rng.uniform(-1.0, 1.0, n)),
            "polarization_angle": rng.uniform(0.0, np.pi, n),
            "right_ascension": rng.uniform(0.0, 2.0 * np.pi, n),
            "declination": np.arcsin(rng.uniform(-1.0, 1.0, n)),
            "coalescence_time": rng.uniform(-self.time_window, self.time_window, n),
        }
