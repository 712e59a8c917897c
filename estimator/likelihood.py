"""Gaussian-noise (Whittle) likelihood with the coalescence phase marginalised.

For stationary Gaussian noise with one-sided PSD ``S`` the log-likelihood of
data ``d`` given a model ``h`` is, up to a constant,
``ln L = <d|h> - <h|h>/2`` (Whittle 1957, J. R. Stat. Soc. B 19, 38; Finn 1992,
PRD 46, 5236, Eq. 2.3). For a model ``h = h_0 e^{i phi}`` with a uniform prior
on the constant phase ``phi``, integrating over it gives
``ln L = ln I_0(|z|) - <h|h>/2`` with ``z = 4 df sum d h_0* / S`` the complex
overlap (Thrane & Talbot 2019, PASA 36, e010, Eq. 75), computed stably as
``|z| + ln i0e(|z|)``.

The single-detector model here depends on the effective distance only; the
likelihood takes a list of detector data sets and sums over them, so a
coherent several-detector model can slot in with the same interface.
"""

from __future__ import annotations

import itertools
import os
from collections.abc import Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np
from numpy.typing import NDArray
from scipy.special import i0e

from .conditioning import DetectorData
from .models import model_parts
from .waveform import (
    MPC_SECONDS,
    MSUN_SECONDS,
    PhaseBasis,
    isco_frequency,
    symmetric_mass_ratio,
)

__all__ = [
    "PARAMETER_NAMES",
    "ExactLikelihood",
    "FromOverlaps",
    "Likelihood",
    "log_i0",
    "newtonian_amplitude",
    "spin_arrays",
]

Array = NDArray[np.float64]
Params = Mapping[str, Array]

#: Parameters the single-detector inspiral model takes, by name.
PARAMETER_NAMES = ("chirp_mass", "mass_ratio", "effective_distance", "coalescence_time")


class Likelihood(Protocol):
    """What a sampler needs of a likelihood."""

    names: tuple[str, ...]

    def log_likelihood(self, params: Params) -> Array:
        """Log-likelihood ratio against pure noise, shape ``(n,)``."""
        ...


def spin_arrays(params: Params, n: int) -> tuple[Array, Array] | tuple[None, None]:
    """``(spin1, spin2)`` of ``params`` as ``(n,)`` arrays, or ``(None, None)`` without spins."""
    if "spin1" not in params and "spin2" not in params:
        return None, None
    return (
        np.broadcast_to(np.asarray(params.get("spin1", 0.0), dtype=float), (n,)),
        np.broadcast_to(np.asarray(params.get("spin2", 0.0), dtype=float), (n,)),
    )


def log_i0(x: Array) -> Array:
    """``ln I_0(x)`` for ``x >= 0`` without overflow: ``x + ln(i0e(x))``."""
    return np.asarray(x + np.log(i0e(x)), dtype=float)


def newtonian_amplitude(chirp_mass: Array, effective_distance: Array) -> Array:
    """Prefactor ``sqrt(5/24) pi^{-2/3} Mc^{5/6} / D_eff`` of ``f^{-7/6}``, s^{-1/6}.

    Cutler & Flanagan 1994, PRD 49, 2658, Eq. 3.4 (restricted amplitude,
    optimally oriented source at distance ``D_eff``).
    """
    return np.asarray(
        np.sqrt(5.0 / 24.0)
        * np.pi ** (-2.0 / 3.0)
        * (np.asarray(chirp_mass) * MSUN_SECONDS) ** (5.0 / 6.0)
        / (np.asarray(effective_distance) * MPC_SECONDS),
        dtype=float,
    )


class FromOverlaps:
    """``log_likelihood`` and ``matched_filter_snr`` of a class's ``overlaps``.

    ``overlaps(params)`` gives the complex overlaps ``z = <d|h>`` (phase
    ``phi_c = 0``) and ``<h|h>``, each ``(n_det, n)``. Marginalising the coalescence
    phase analytically over a uniform prior turns ``Re(z e^{i phi})`` into
    ``ln I0(|z|)`` (common practice).
    """

    def overlaps(self, params: Params) -> tuple[NDArray[np.complex128], Array]:
        raise NotImplementedError

    def log_likelihood(self, params: Params) -> Array:
        """Phase-marginalised log-likelihood ratio ``ln I0(|z|) - <h|h>/2``, shape ``(n,)``."""
        z, hh = self.overlaps(params)
        return np.asarray(np.sum(log_i0(np.abs(z)) - 0.5 * hh, axis=0), dtype=float)

    def matched_filter_snr(self, params: Params) -> Array:
        """Network matched-filter SNR ``sqrt(sum |z|^2 / <h|h>)``, shape ``(n,)``."""
        z, hh = self.overlaps(params)
        return np.asarray(np.sqrt(np.sum(np.abs(z) ** 2 / np.maximum(hh, 1e-300), axis=0)))


@dataclass
class _Prepared:
    """Per-detector quantities that do not change between likelihood calls."""

    data: DetectorData
    # 4 df d f^{-7/6} / S with the time origin moved to the reference time, as
    # real and imaginary columns, shape (nf, 2).
    weights32: NDArray[np.float32]
    weighted: NDArray[np.complex128]  # the same in double precision, complex
    cumulative_norm: Array  # cumsum of 4 df f^{-7/3} / S
    basis: PhaseBasis
    design: Array  # the basis with two more rows: f (time shift) and 1 (the -pi/4)


@dataclass
class ExactLikelihood(FromOverlaps):
    """The phase-marginalised Whittle likelihood, evaluated on every frequency bin.

    Parameters
    ----------
    datasets
        One :class:`DetectorData` per detector (only one is supported by the
        single-detector model; the sum over detectors is written for several).
    reference_time
        GPS time that ``coalescence_time`` is measured from, s.
    max_elements
        Work in chunks of at most this many (parameter set x frequency) values.
    workers
        Threads that share the frequency axis (default: the cores, at most 4).
    """

    datasets: Sequence[DetectorData]
    reference_time: float
    max_elements: int = 2_000_000
    workers: int = field(default_factory=lambda: min(4, os.cpu_count() or 1))
    names: tuple[str, ...] = PARAMETER_NAMES
    model: str = "taylorf2"
    _prepared: list[_Prepared] = field(init=False, repr=False)
    _executor: ThreadPoolExecutor | None = field(default=None, init=False, repr=False)

    def _pool(self) -> ThreadPoolExecutor:
        if self._executor is None:
            self._executor = ThreadPoolExecutor(self.workers, thread_name_prefix="likelihood")
        return self._executor

    def __post_init__(self) -> None:
        self._prepared = []
        for data in self.datasets:
            f = data.frequencies
            weight = 4.0 * data.df / data.psd
            # Moving the data's time origin from the epoch to the reference time keeps
            # the model's phase small (|t_c| <= the time window), see overlaps().
            moved = data.strain * np.exp(2j * np.pi * f * (self.reference_time - data.epoch))
            weighted = moved * f ** (-7.0 / 6.0) * weight
            basis = PhaseBasis(f)
            self._prepared.append(
                _Prepared(
                    data=data,
                    weights32=np.ascontiguousarray(
                        np.stack([weighted.real, weighted.imag], axis=1), dtype=np.float32
                    ),
                    weighted=weighted,
                    cumulative_norm=np.cumsum(f ** (-7.0 / 3.0) * weight),
                    basis=basis,
                    design=np.vstack([basis.basis, f, np.ones_like(f)]),
                )
            )

    def _block(
        self, prep: _Prepared, coeffs: Array, n_keep: NDArray[np.intp], lo: int, hi: int
    ) -> NDArray[np.complex128]:
        """Overlap (without amplitude) over frequency indices ``lo:hi`` for rows of ``coeffs``."""
        # The PN series, the time shift and the -pi/4 as one matrix product.
        psi = coeffs @ prep.design[:, lo:hi]
        # Single-precision trigonometry and sums: |psi| stays below ~1e5 rad, so the
        # rounding error is below 2^-24 * 1e5 ~ 6e-3 rad per bin and random; its effect
        # on |z| is second order, and float32 accumulation adds ~2e-6 relative (tests
        # compare with complex128 sums).
        p32 = psi.astype(np.float32)
        cos = np.cos(p32)
        sin = np.sin(p32)
        for r, k in enumerate(n_keep):
            if k < hi:
                cos[r, max(k - lo, 0) :] = 0.0
                sin[r, max(k - lo, 0) :] = 0.0
        # d h* with h ~ exp(-i psi): the conjugate carries exp(+i psi).
        c_w = (cos @ prep.weights32[lo:hi]).astype(float)
        s_w = (sin @ prep.weights32[lo:hi]).astype(float)
        return np.asarray((c_w[:, 0] - s_w[:, 1]) + 1j * (c_w[:, 1] + s_w[:, 0]), dtype=complex)

    def overlaps(self, params: Params) -> tuple[NDArray[np.complex128], Array]:
        """Complex overlap ``z = <d|h>`` (phase 0) and ``<h|h>``, each ``(n_det, n)``.

        The frequency axis is cut into ``workers`` blocks evaluated in threads
        (numpy releases the interpreter lock in these array operations).
        """
        mc = np.atleast_1d(np.asarray(params["chirp_mass"], dtype=float))
        q = np.atleast_1d(np.asarray(params["mass_ratio"], dtype=float))
        dist = np.atleast_1d(np.asarray(params["effective_distance"], dtype=float))
        tc = np.atleast_1d(np.asarray(params["coalescence_time"], dtype=float))
        spins = spin_arrays(params, mc.size)
        n = mc.size
        amp = newtonian_amplitude(mc, dist)
        if self.model != "taylorf2":
            return self._model_overlaps(mc, q, tc, spins, amp)
        f_isco = isco_frequency(mc * symmetric_mass_ratio(q) ** (-0.6))
        z = np.zeros((len(self._prepared), n), dtype=complex)
        hh = np.zeros((len(self._prepared), n))
        for i, prep in enumerate(self._prepared):
            f = prep.data.frequencies
            n_keep = np.searchsorted(f, f_isco, side="right")
            hh[i] = amp**2 * np.where(
                n_keep > 0, prep.cumulative_norm[np.maximum(n_keep - 1, 0)], 0.0
            )
            coeffs = np.column_stack(
                [prep.basis.coefficients(mc, q, *spins), 2.0 * np.pi * tc, np.full(n, -np.pi / 4.0)]
            )
            rows = max(1, self.max_elements // max(f.size, 1))
            for start in range(0, n, rows):
                sl = slice(start, min(n, start + rows))
                top = int(n_keep[sl].max())
                if top == 0:
                    continue
                edges = np.linspace(0, top, self.workers + 1).astype(int)
                jobs = [
                    (prep, coeffs[sl], n_keep[sl], int(lo), int(hi))
                    for lo, hi in itertools.pairwise(edges)
                    if hi > lo
                ]
                if len(jobs) == 1 or top < 20_000 or sl.stop - sl.start < 4:
                    parts = [self._block(prep, coeffs[sl], n_keep[sl], 0, top)]
                else:
                    parts = list(self._pool().map(lambda job: self._block(*job), jobs))
                z[i, sl] = amp[sl] * np.sum(parts, axis=0)
        return z, hh

    def _model_overlaps(
        self,
        mc: Array,
        q: Array,
        tc: Array,
        spins: tuple[Array, Array] | tuple[None, None],
        amp: Array,
    ) -> tuple[NDArray[np.complex128], Array]:
        """:meth:`overlaps` for a model with a general amplitude (:mod:`estimator.models`).

        ``z = A sum w d S exp(i (Psi + 2 pi f t_c - pi/4))`` and
        ``<h|h> = A^2 sum 4 df f^{-7/3} S^2 / S_n`` in double precision, in chunks.
        """
        n = mc.size
        z = np.zeros((len(self._prepared), n), dtype=complex)
        hh = np.zeros((len(self._prepared), n))
        for i, prep in enumerate(self._prepared):
            f = prep.data.frequencies
            weighted = prep.weighted
            norm = np.diff(np.concatenate([[0.0], prep.cumulative_norm]))
            rows = max(1, self.max_elements // max(f.size, 1))
            for start in range(0, n, rows):
                sl = slice(start, min(n, start + rows))
                s1 = None if spins[0] is None else spins[0][sl]
                s2 = None if spins[1] is None else spins[1][sl]
                factor, psi = model_parts(self.model, f, mc[sl], q[sl], s1, s2)
                factor, psi = np.atleast_2d(factor), np.atleast_2d(psi)
                psi = psi + 2.0 * np.pi * tc[sl, None] * f[None, :] - np.pi / 4.0
                z[i, sl] = amp[sl] * ((factor * np.exp(1j * psi)) @ weighted)
                hh[i, sl] = amp[sl] ** 2 * (factor**2 @ norm)
        return z, hh
