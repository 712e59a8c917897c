"""The Fisher-matrix estimate of the measurement errors, from the model alone.

For a signal ``h(theta)`` in stationary Gaussian noise the Fisher information
is ``Gamma_ij = <d_i h | d_j h>``, and at high SNR the posterior is close to a
Gaussian of covariance ``Gamma^{-1}`` about the peak (Cutler & Flanagan 1994,
PRD 49, 2658, Eqs. 2.3-2.6 and Sec. IV, where the TaylorF2 derivatives are
written out). The derivatives are taken in ``theta = (ln Mc, eta, t_c, ln D,
phi_c)``; the coalescence phase is a nuisance, so its row and column are
dropped from the inverse (marginalising it, Cutler & Flanagan 1994, Sec. IV A).
Vallisneri 2008, PRD 77, 042001, shows when this is a fair estimate: at high
SNR, away from the prior's edges; at an SNR near 10 the mass-ratio widths it
gives are often wider than the prior itself, and the sampled posterior is
what to trust. Here the estimate is an instant preview of the widths and
the shape of the ball the sampler's walkers start from.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .conditioning import DetectorData
from .likelihood import newtonian_amplitude
from .models import model_parts
from .waveform import isco_frequency, phase_of_eta, symmetric_mass_ratio

__all__ = [
    "DERIVATIVE_PARAMETERS",
    "FISHER_PARAMETERS",
    "FISHER_UNITS",
    "FisherEstimate",
    "fisher_estimate",
    "fisher_matrix",
    "mass_ratio_of_eta",
]

Array = NDArray[np.float64]

#: What the estimate gives 1-sigma widths of, in this order.
FISHER_PARAMETERS = (
    "chirp_mass",
    "symmetric_mass_ratio",
    "coalescence_time",
    "effective_distance",
)

#: Their units (the coalescence time is relative to the reference time).
FISHER_UNITS = {
    "chirp_mass": "Msun",
    "symmetric_mass_ratio": "",
    "coalescence_time": "s",
    "effective_distance": "Mpc",
}

_LOG_STEP = 1e-6  # central-difference step in ln Mc
_ETA_STEP = 1e-6  # and in eta


@dataclass(frozen=True)
class FisherEstimate:
    """Gaussian approximation ``N(center, covariance)`` over :data:`FISHER_PARAMETERS`.

    Attributes
    ----------
    center
        The point it was computed at, by name (chirp mass in Msun, symmetric
        mass ratio, coalescence time relative to the reference time in s,
        effective distance in Mpc).
    covariance
        Shape ``(4, 4)``, the coalescence phase marginalised, in those units.
    snr
        Optimal SNR ``sqrt(<h|h>)`` of the model at ``center``.
    """

    center: dict[str, float]
    covariance: Array
    snr: float
    names: tuple[str, ...] = FISHER_PARAMETERS

    @property
    def sigma(self) -> dict[str, float]:
        """1-sigma widths by name."""
        return {k: float(np.sqrt(self.covariance[i, i])) for i, k in enumerate(self.names)}

    def to_dict(self, samples: Mapping[str, Array] | None = None) -> dict[str, Any]:
        """The preview as JSON-ready data; with posterior ``samples``, their widths beside it.

        ``samples`` holds ``chirp_mass``, ``mass_ratio``, ``coalescence_time`` and
        ``effective_distance`` arrays; each entry then gains ``posterior_sd``
        and ``ratio`` (posterior over Fisher).
        """
        widths = self.sigma
        posterior: dict[str, Array] = {}
        if samples is not None:
            posterior = {
                "chirp_mass": np.asarray(samples["chirp_mass"]),
                "symmetric_mass_ratio": symmetric_mass_ratio(samples["mass_ratio"]),
                "coalescence_time": np.asarray(samples["coalescence_time"]),
                "effective_distance": np.asarray(samples["effective_distance"]),
            }
        parameters: dict[str, dict[str, Any]] = {}
        for name in self.names:
            entry: dict[str, Any] = {
                "value": self.center[name],
                "sigma": widths[name],
                "unit": FISHER_UNITS[name],
            }
            if name in posterior:
                sd = float(np.std(posterior[name]))
                entry["posterior_sd"] = sd
                entry["ratio"] = sd / widths[name] if widths[name] > 0 else None
            parameters[name] = entry
        return {
            "method": "Fisher matrix of the model at the maximum-likelihood point, "
            "coalescence phase marginalised (Cutler & Flanagan 1994)",
            "snr": self.snr,
            "parameters": parameters,
            "correlation_chirp_mass_symmetric_mass_ratio": self.correlation(
                "chirp_mass", "symmetric_mass_ratio"
            ),
        }

    def correlation(self, a: str, b: str) -> float:
        """Correlation coefficient of two of the parameters."""
        i, j = self.names.index(a), self.names.index(b)
        c = self.covariance
        return float(c[i, j] / np.sqrt(c[i, i] * c[j, j]))


def mass_ratio_of_eta(eta: Array) -> Array:
    """``q = m2/m1 <= 1`` of a symmetric mass ratio ``0 < eta <= 1/4``.

    The smaller root of ``eta (1 + q)^2 = q``.
    """
    eta = np.asarray(eta, dtype=float)
    root = np.sqrt(np.clip(1.0 - 4.0 * eta, 0.0, None))
    return np.asarray((1.0 - 2.0 * eta - root) / (2.0 * eta), dtype=float)


#: Order of the rows of :func:`fisher_matrix`.
DERIVATIVE_PARAMETERS = (
    "log_chirp_mass",
    "symmetric_mass_ratio",
    "coalescence_time",
    "log_effective_distance",
    "coalescence_phase",
)


def fisher_matrix(
    datasets: Sequence[DetectorData],
    chirp_mass: float,
    eta: float,
    effective_distance: float,
    model: str = "taylorf2",
) -> tuple[Array, float]:
    """Fisher matrix over :data:`DERIVATIVE_PARAMETERS`, and ``<h|h>``.

    With ``h = A f^{-7/6} exp(-i Psi)``, ``A ~ Mc^{5/6} / D`` and ``Psi``
    carrying ``2 pi f t_c - phi_c``, the derivatives are
    ``d h/d ln Mc = (5/6 - i dPsi/d ln Mc) h``, ``d h/d eta = -i dPsi/d eta h``,
    ``d h/d t_c = -2 pi i f h``, ``d h/d ln D = -h``, ``d h/d phi_c = i h``
    (Cutler & Flanagan 1994, Eqs. 3.4 and 4.1-4.3), and
    ``Gamma_ij = Re 4 df sum d_i h d_j h* / S``; the PN phase derivatives are
    central differences. The ISCO cut-off is held fixed (its own derivative
    is a boundary term, neglected as is common practice). Only the data's
    frequencies, PSDs and bands are used: the Fisher matrix is an expectation
    over noise, not a fit to the data.

    For a model with a general amplitude factor ``S`` (``model="merger"``,
    :mod:`estimator.models`) the derivatives gain ``d ln S/d theta`` beside
    ``-i dPsi/d theta``, both by central differences (one-sided at ``eta = 1/4``).
    """
    mc, dist = float(chirp_mass), float(effective_distance)
    if model != "taylorf2":
        return _model_fisher(datasets, mc, eta, dist, model)
    f_isco = float(isco_frequency(mc * eta ** (-0.6)))
    gamma = np.zeros((5, 5))
    hh = 0.0
    up, down = mc * np.exp(_LOG_STEP), mc * np.exp(-_LOG_STEP)
    for data in datasets:
        keep = data.frequencies <= f_isco
        f = data.frequencies[keep]
        if f.size == 0:
            continue
        psi = phase_of_eta(f, mc, eta)
        d_log_mc = (phase_of_eta(f, up, eta) - phase_of_eta(f, down, eta)) / (2.0 * _LOG_STEP)
        d_eta = (phase_of_eta(f, mc, eta + _ETA_STEP) - phase_of_eta(f, mc, eta - _ETA_STEP)) / (
            2.0 * _ETA_STEP
        )
        amp = newtonian_amplitude(np.array(mc), np.array(dist))
        h = amp * f ** (-7.0 / 6.0) * np.exp(-1j * psi)
        derivs = np.array(
            [(5.0 / 6.0 - 1j * d_log_mc) * h, -1j * d_eta * h, -2j * np.pi * f * h, -h, 1j * h]
        )
        weight = 4.0 * data.df / data.psd[keep]
        gamma += np.real((derivs * weight) @ np.conj(derivs).T)
        hh += float(np.sum(weight * np.abs(h) ** 2))
    return gamma, hh


def _model_fisher(
    datasets: Sequence[DetectorData], mc: float, eta: float, dist: float, model: str
) -> tuple[Array, float]:
    """:func:`fisher_matrix` for a model with a general amplitude (central differences)."""
    gamma = np.zeros((5, 5))
    hh = 0.0
    step = _ETA_STEP
    eta_hi = min(eta + step, 0.25)
    eta_lo = eta_hi - 2.0 * step
    masses = np.array([mc, mc * np.exp(_LOG_STEP), mc * np.exp(-_LOG_STEP), mc, mc])
    etas = np.array([eta, eta, eta, eta_hi, eta_lo])
    q = mass_ratio_of_eta(etas)
    for data in datasets:
        f = data.frequencies
        factor, psi = model_parts(model, f, masses, q)
        keep = factor[0] > 0.0
        if not np.any(keep):
            continue
        f, factor, psi = f[keep], factor[:, keep], psi[:, keep]
        log_s = np.log(np.maximum(factor, 1e-300))
        d_log_mc = ((log_s[1] - log_s[2]) - 1j * (psi[1] - psi[2])) / (2.0 * _LOG_STEP)
        d_eta = ((log_s[3] - log_s[4]) - 1j * (psi[3] - psi[4])) / (eta_hi - eta_lo)
        amp = newtonian_amplitude(np.array(mc), np.array(dist))
        h = amp * f ** (-7.0 / 6.0) * factor[0] * np.exp(-1j * psi[0])
        derivs = np.array(
            [(5.0 / 6.0 + d_log_mc) * h, d_eta * h, -2j * np.pi * f * h, -h, 1j * h]
        )
        weight = 4.0 * data.df / data.psd[keep]
        gamma += np.real((derivs * weight) @ np.conj(derivs).T)
        hh += float(np.sum(weight * np.abs(h) ** 2))
    return gamma, hh


def fisher_estimate(
    datasets: Sequence[DetectorData], params: Mapping[str, float], model: str = "taylorf2"
) -> FisherEstimate:
    """The Fisher estimate at ``params`` (module docstring).

    Parameters
    ----------
    datasets
        The detectors' data (see :func:`fisher_matrix`).
    params
        ``chirp_mass`` (Msun), ``mass_ratio``, ``effective_distance`` (Mpc),
        ``coalescence_time`` (s, relative to any reference).

    Raises
    ------
    ValueError
        When the model has no power in the analysis band.
    """
    mc = float(params["chirp_mass"])
    eta = float(symmetric_mass_ratio(float(params["mass_ratio"])))
    dist = float(params["effective_distance"])
    gamma, hh = fisher_matrix(datasets, mc, eta, dist, model)
    if hh <= 0.0:
        msg = "the model has no power in the analysis band; no Fisher estimate"
        raise ValueError(msg)
    # Invert in units of the diagonal: the entries span ~10 orders of magnitude.
    scale = 1.0 / np.sqrt(np.diag(gamma))
    cov5 = np.linalg.pinv(gamma * np.outer(scale, scale), rcond=1e-13) * np.outer(scale, scale)
    # Linear units: Mc = exp(ln Mc), D = exp(ln D) to first order.
    jac = np.diag([mc, 1.0, 1.0, dist])
    cov = jac @ cov5[:4, :4] @ jac.T
    center = {
        "chirp_mass": mc,
        "symmetric_mass_ratio": eta,
        "coalescence_time": float(params["coalescence_time"]),
        "effective_distance": dist,
    }
    return FisherEstimate(center=center, covariance=np.asarray(cov), snr=float(np.sqrt(hh)))
