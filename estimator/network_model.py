"""The coherent several-detector inspiral model and its likelihood.

Each detector ``I`` sees the two polarisations of the restricted inspiral
through its antenna pattern and with its own arrival time:

``h_I(f) = A(Mc) / D_L * C_I * f^{-7/6} exp(-i [Psi(f) + 2 pi f (t_c + dt_I)])``,
``C_I = F+_I (1 + cos^2 iota) / 2 - i Fx_I cos iota``,

with ``A`` the restricted-amplitude prefactor of an optimally oriented source
(Cutler & Flanagan 1994, PRD 49, 2658, Eqs. 3.4 and 2.2: ``h+`` carries
``(1 + cos^2 iota)/2`` and ``hx`` carries ``cos iota`` in quadrature), ``F+``,
``Fx`` the antenna patterns and ``dt_I`` the delay from the geocentre
(:mod:`estimator.sites`). The coalescence phase is common to all detectors;
marginalising it under a uniform prior gives

``ln L = ln I0(|sum_I z_I|) - sum_I <h_I|h_I> / 2``,  ``z_I = <d_I|h_I>``

(the single-detector result of Thrane & Talbot 2019, PASA 36, e010, Eq. 75,
applied to the network inner product, which is the sum of the detectors' inner
products for independent noise: Finn 1992, PRD 46, 5236, Sec. II).

The Earth's rotation during the ~0.1 s the coalescence time may move is
neglected: the sidereal time is held at its value at the trigger (7e-6 rad
over 0.1 s, common practice).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np
from numpy.typing import NDArray

from .conditioning import DetectorData
from .distance_marginal import DistanceMarginal
from .likelihood import ExactLikelihood, log_i0
from .relbin import _AMPLITUDE, RelativeBinningLikelihood, mass_terms

__all__ = [
    "NETWORK_NAMES",
    "ExactNetworkLikelihood",
    "NetworkLikelihood",
    "Projection",
    "SiteGeometry",
    "antenna_factor",
]

Array = NDArray[np.float64]
Params = Mapping[str, Array]

#: Physical parameters of the network model; ``coalescence_time`` is at the geocentre,
#: relative to the reference time, s.
NETWORK_NAMES = (
    "chirp_mass",
    "mass_ratio",
    "luminosity_distance",
    "inclination",
    "polarization_angle",
    "right_ascension",
    "declination",
    "coalescence_time",
)


class SiteGeometry(Protocol):
    """What the model needs of a detector site (see :class:`estimator.sites.Site`)."""

    @property
    def name(self) -> str: ...

    def antenna_pattern(
        self, right_ascension: Array, declination: Array, polarization_angle: Array, gmst: float
    ) -> tuple[Array, Array]: ...

    def time_delay(self, right_ascension: Array, declination: Array, gmst: float) -> Array: ...


def antenna_factor(f_plus: Array, f_cross: Array, inclination: Array) -> NDArray[np.complex128]:
    """``C = F+ (1 + cos^2 iota)/2 - i Fx cos iota`` (module docstring; Cutler & Flanagan 1994)."""
    c = np.cos(inclination)
    return np.asarray(f_plus * 0.5 * (1.0 + c * c) - 1j * f_cross * c, dtype=complex)


@dataclass(frozen=True)
class Projection:
    """Per-detector antenna factors and coalescence times of a batch of parameter sets.

    ``factor`` and ``times`` have shape ``(n_det, n)``; ``times`` relative to the
    reference time, s.
    """

    factor: NDArray[np.complex128]
    times: Array


def project(sites: Sequence[SiteGeometry], gmst: float, params: Params) -> Projection:
    """Antenna factors and arrival times of ``params`` at every site."""
    ra = np.atleast_1d(np.asarray(params["right_ascension"], dtype=float))
    dec = np.atleast_1d(np.asarray(params["declination"], dtype=float))
    psi = np.atleast_1d(np.asarray(params["polarization_angle"], dtype=float))
    iota = np.atleast_1d(np.asarray(params["inclination"], dtype=float))
    tc = np.atleast_1d(np.asarray(params["coalescence_time"], dtype=float))
    factors = []
    times = []
    for site in sites:
        fp, fc = site.antenna_pattern(ra, dec, psi, gmst)
        factors.append(antenna_factor(np.asarray(fp), np.asarray(fc), iota))
        times.append(tc + np.asarray(site.time_delay(ra, dec, gmst)))
    return Projection(factor=np.array(factors), times=np.array(times))


def _combine(
    z: NDArray[np.complex128], hh: Array, marginal: DistanceMarginal | None = None
) -> Array:
    """``ln I0(|sum_I z_I|) - sum_I hh_I / 2`` over the detector axis 0.

    With ``marginal``, ``z`` and ``hh`` are of the model at 1 Mpc and the result is
    marginalised over the distance (:mod:`estimator.distance_marginal`).
    """
    overlap = np.abs(np.sum(z, axis=0))
    norm = np.sum(hh, axis=0)
    if marginal is not None:
        return marginal.log_likelihood(overlap, norm)
    return np.asarray(log_i0(overlap) - 0.5 * norm, dtype=float)


def _distance(params: Params, n: int) -> Array:
    """The luminosity distance of ``params``, or 1 Mpc where it is marginalised."""
    if "luminosity_distance" in params:
        return np.broadcast_to(np.asarray(params["luminosity_distance"], dtype=float), (n,))
    return np.ones(n)


@dataclass
class NetworkLikelihood:
    """Coherent phase-marginalised likelihood with relative binning per detector.

    Every detector is binned around one fiducial waveform (the same masses),
    shifted to that detector's arrival time of the fiducial source
    (Zackay, Dai & Venumadhav 2018, arXiv:1806.08792, Sec. II, per detector).

    Parameters
    ----------
    datasets
        One :class:`DetectorData` per site, in the order of ``sites``.
    sites
        The detectors' geometry.
    reference_time
        GPS time ``coalescence_time`` is measured from, s.
    gmst
        Greenwich mean sidereal time at the reference time, rad.
    fiducial
        Scalar parameters of the fiducial waveform (:data:`NETWORK_NAMES`).
    n_bins
        Frequency bins per detector.
    marginal
        When given, :meth:`log_likelihood` is marginalised over the distance
        and ignores ``luminosity_distance``.
    """

    datasets: Sequence[DetectorData]
    sites: Sequence[SiteGeometry]
    reference_time: float
    gmst: float
    fiducial: Mapping[str, float]
    n_bins: int = 96
    marginal: DistanceMarginal | None = None
    names: tuple[str, ...] = NETWORK_NAMES
    _binned: list[RelativeBinningLikelihood] = field(init=False, repr=False)

    def __post_init__(self) -> None:
        at = project(self.sites, self.gmst, {k: np.array([v]) for k, v in self.fiducial.items()})
        self._binned = [
            RelativeBinningLikelihood(
                [data],
                self.reference_time,
                {
                    "chirp_mass": float(self.fiducial["chirp_mass"]),
                    "mass_ratio": float(self.fiducial["mass_ratio"]),
                    "coalescence_time": float(at.times[i, 0]),
                },
                n_bins=self.n_bins,
            )
            for i, data in enumerate(self.datasets)
        ]

    @property
    def bins(self) -> int:
        """Bins per detector (of the first detector)."""
        return self._binned[0].bins

    def components(self, params: Params) -> tuple[NDArray[np.complex128], Array]:
        """Per-detector overlap ``z_I`` (phase 0) and ``<h_I|h_I>``, each ``(n_det, n)``."""
        mc = np.atleast_1d(np.asarray(params["chirp_mass"], dtype=float))
        q = np.atleast_1d(np.asarray(params["mass_ratio"], dtype=float))
        dist = _distance(params, mc.size)
        at = project(self.sites, self.gmst, params)
        terms = mass_terms(mc, q)
        amp = _AMPLITUDE * np.exp((5.0 / 6.0) * terms.log_mc) / dist
        z = np.empty((len(self._binned), mc.size), dtype=complex)
        hh = np.empty((len(self._binned), mc.size))
        for i, binned in enumerate(self._binned):
            ((zr, zi, norm),) = binned.unit_overlaps(terms, [at.times[i]])
            c = at.factor[i]
            # z = amp conj(C) z0: h* carries the conjugate antenna factor.
            z[i] = amp * np.conj(c) * (zr + 1j * zi)
            hh[i] = amp**2 * (c.real**2 + c.imag**2) * norm
        return z, hh

    def log_likelihood(self, params: Params) -> Array:
        """Coherent phase-marginalised log-likelihood ratio, shape ``(n,)``."""
        if self.marginal is not None:
            params = {k: v for k, v in params.items() if k != "luminosity_distance"}
        z, hh = self.components(params)
        return _combine(z, hh, self.marginal)


@dataclass
class ExactNetworkLikelihood:
    """The same coherent likelihood evaluated on every frequency bin (the reference)."""

    datasets: Sequence[DetectorData]
    sites: Sequence[SiteGeometry]
    reference_time: float
    gmst: float
    marginal: DistanceMarginal | None = None
    names: tuple[str, ...] = NETWORK_NAMES
    _exact: list[ExactLikelihood] = field(init=False, repr=False)

    def __post_init__(self) -> None:
        self._exact = [ExactLikelihood([data], self.reference_time) for data in self.datasets]

    def components(self, params: Params) -> tuple[NDArray[np.complex128], Array]:
        """Per-detector overlap ``z_I`` (phase 0) and ``<h_I|h_I>``, each ``(n_det, n)``."""
        at = project(self.sites, self.gmst, params)
        n = at.times.shape[1]
        z = np.empty((len(self._exact), n), dtype=complex)
        hh = np.empty((len(self._exact), n))
        for i, exact in enumerate(self._exact):
            zi, hi = exact.overlaps(
                {
                    "chirp_mass": np.broadcast_to(params["chirp_mass"], (n,)),
                    "mass_ratio": np.broadcast_to(params["mass_ratio"], (n,)),
                    "effective_distance": _distance(params, n),
                    "coalescence_time": at.times[i],
                }
            )
            c = at.factor[i]
            z[i] = np.conj(c) * zi[0]
            hh[i] = (c.real**2 + c.imag**2) * hi[0]
        return z, hh

    def log_likelihood(self, params: Params) -> Array:
        """Coherent phase-marginalised log-likelihood ratio, shape ``(n,)``."""
        if self.marginal is not None:
            params = {k: v for k, v in params.items() if k != "luminosity_distance"}
        z, hh = self.components(params)
        return _combine(z, hh, self.marginal)
