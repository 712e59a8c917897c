"""Relative binning (heterodyning) of the likelihood against a fiducial waveform.

Near the peak of the likelihood every model ``h`` differs from a fiducial
``h_0`` by a ratio ``r(f) = h(f)/h_0(f)`` that varies slowly with frequency.
Within each of a few hundred bins ``r`` is replaced by a straight line, so the
overlap ``<d|h>`` needs the model only at the bin edges and a handful of
summary sums precomputed once (Zackay, Dai & Venumadhav 2018,
arXiv:1806.08792, Eqs. 6-12; Cornish 2010, arXiv:1007.4820, heterodyning).
Bins are spaced so that the largest phase difference allowed by the PN terms,
``dPsi(f) = 2 pi sum_a chi_a sgn(a) (f/f*_a)^a`` with
``a in (-5/3, -2/3, 1, 5/3, 7/3)``, grows by the same amount in every bin
(Zackay et al. 2018, Eq. 10).

``<h|h>`` does not need binning here: for the restricted amplitude it is the
amplitude squared times a cumulative sum of ``f^{-7/3}/S`` up to the ISCO
frequency, evaluated exactly.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray
from scipy.special import i0e

from .conditioning import DetectorData
from .likelihood import PARAMETER_NAMES, FromOverlaps, newtonian_amplitude, spin_arrays
from .waveform import (
    MPC_SECONDS,
    MSUN_SECONDS,
    PhaseBasis,
    _coefficient_tables,
    _spin_columns,
    isco_frequency,
    symmetric_mass_ratio,
    taylorf2_phase,
)

__all__ = ["MassTerms", "RelativeBinningLikelihood", "bin_edges", "mass_terms"]

Array = NDArray[np.float64]
Params = Mapping[str, Array]

#: Constants of the restricted amplitude and the ISCO frequency (likelihood.py, waveform.py).
_AMPLITUDE = np.sqrt(5.0 / 24.0) * np.pi ** (-2.0 / 3.0) * MSUN_SECONDS ** (5.0 / 6.0) / MPC_SECONDS
_ISCO = 1.0 / (6.0**1.5 * np.pi * MSUN_SECONDS)
_LOG_PI_MSUN = float(np.log(np.pi * MSUN_SECONDS))
_CUBIC = np.arange(4.0)

_EXPONENTS = np.array([-5.0 / 3.0, -2.0 / 3.0, 1.0, 5.0 / 3.0, 7.0 / 3.0])


def bin_edges(frequencies: Array, n_bins: int) -> Array:
    """Indices into ``frequencies`` of ``n_bins + 1`` bin edges.

    Edges are equally spaced in the dephasing bound of Zackay et al. 2018,
    Eq. 10, with ``chi_a = 1`` and ``f*_a`` the band edge where
    ``(f/f*_a)^a`` is largest.
    """
    f = np.asarray(frequencies, dtype=float)
    f_lo, f_hi = f[0], f[-1]
    star = np.where(_EXPONENTS > 0, f_hi, f_lo)
    # The bound is smooth and increasing: tabulate it on a log grid, invert by interpolation.
    grid = np.geomspace(f_lo, f_hi, 4096)
    bound = np.sum(
        2.0
        * np.pi
        * np.sign(_EXPONENTS)[:, None]
        * (grid[None, :] / star[:, None]) ** _EXPONENTS[:, None],
        axis=0,
    )
    targets = np.interp(np.linspace(bound[0], bound[-1], n_bins + 1), bound, grid)
    idx = np.searchsorted(f, targets)
    idx = np.clip(idx, 0, f.size - 1)
    idx[0], idx[-1] = 0, f.size - 1
    return np.unique(idx)


@dataclass
class _Binned:
    """Per-detector summary data of the binning (Zackay et al. 2018, Eqs. 7-8)."""

    data: DetectorData
    edges: Array  # edge frequencies, (nb+1,)
    centers: Array
    widths: Array
    inverse_widths: Array
    first: NDArray[np.intp]  # index of the first frequency of each bin
    a0: NDArray[np.complex128]
    a1: NDArray[np.complex128]
    basis: PhaseBasis  # of the edge frequencies
    design: Array  # the basis, the edges (time shift) and -psi0 (PN part) as rows
    tc0: float  # the fiducial's coalescence time
    edge_weights: Array  # W_e as (real, imag) columns, shape (n_edges, 2)
    tables: tuple[Array, Array, Array]  # PhaseBasis coefficient tables
    cumulative_norm: Array
    # Running sums of the summary integrands, for the bin the ISCO frequency cuts.
    c0: NDArray[np.complex128]
    c1: NDArray[np.complex128]
    _cut_cache: dict[int, Array] = field(default_factory=dict, repr=False)

    def cut_weights(self, cut: int) -> Array:
        """Edge weights ``(n_edges, 2)`` of the bins below bin ``cut`` only."""
        if cut not in self._cut_cache:
            weights = np.zeros(self.edges.size, dtype=complex)
            weights[:cut] += 0.5 * self.a0[:cut] - self.a1[:cut] / self.widths[:cut]
            weights[1 : cut + 1] += 0.5 * self.a0[:cut] + self.a1[:cut] / self.widths[:cut]
            self._cut_cache[cut] = np.column_stack([weights.real, weights.imag])
        return self._cut_cache[cut]


class MassTerms(NamedTuple):
    """Mass-dependent factors shared by every detector's binned overlap (a tuple: cheap)."""

    log_mc: Array
    eta: Array
    log_c: Array
    eta_powers: Array
    f_isco: Array
    #: Aligned-spin additions to the phase coefficients (``_spin_columns``), or None.
    spin_columns: Array | None = None


#: Column layout of the default :class:`PhaseBasis` (the one every bin set uses).
_LAYOUT = PhaseBasis(np.ones(1))._layout


def mass_terms(
    chirp_mass: Array,
    mass_ratio: Array,
    spin1: Array | None = None,
    spin2: Array | None = None,
) -> MassTerms:
    """:class:`MassTerms` of parameter sets ``(chirp_mass, mass_ratio[, spins])``, each ``(n,)``."""
    log_mc = np.log(chirp_mass)
    eta = mass_ratio / (1.0 + mass_ratio) ** 2
    log_total = log_mc - 0.6 * np.log(eta)
    log_c = (log_total + _LOG_PI_MSUN) * (1.0 / 3.0)
    spin_cols = None
    if spin1 is not None or spin2 is not None:
        spin_cols = _spin_columns(_LAYOUT, eta, log_c, spin1, spin2)
    return MassTerms(
        log_mc=log_mc,
        eta=eta,
        log_c=log_c,
        eta_powers=eta[:, None] ** _CUBIC,
        f_isco=_ISCO * np.exp(-log_total),
        spin_columns=spin_cols,
    )


def _overlap_parts(b: _Binned, terms: MassTerms, tc: Array) -> tuple[Array, Array, Array | float]:
    """``(Re z0, Im z0, <h0|h0>)`` of one detector's bins (see ``unit_overlaps``)."""
    n = terms.eta.size
    poly, log_poly, powers = b.tables
    log_c, eta, eta_powers, f_isco = terms.log_c, terms.eta, terms.eta_powers, terms.f_isco
    coeffs = np.empty((n, powers.size + 2))
    body = coeffs[:, : powers.size]
    np.exp(log_c[:, None] * powers - np.log(eta * (128.0 / 3.0))[:, None], out=body)
    poly_part = eta_powers @ poly + log_c[:, None] * (eta_powers @ log_poly)
    if terms.spin_columns is not None:
        poly_part += terms.spin_columns
    body *= poly_part
    coeffs[:, -2] = 2.0 * np.pi * (tc - b.tc0)
    coeffs[:, -1] = 1.0
    x = (coeffs @ b.design).astype(np.float32)
    cos = np.cos(x).astype(float)
    sin = np.sin(x).astype(float)
    f_all = b.data.frequencies
    if f_isco.min() >= f_all[-1]:
        c_w = cos @ b.edge_weights
        s_w = sin @ b.edge_weights
        return c_w[:, 0] - s_w[:, 1], c_w[:, 1] + s_w[:, 0], float(b.cumulative_norm[-1])
    # Bins below every sample's cut bin from cached edge weights; bins between
    # the lowest and the highest cut removed again where a sample cuts lower;
    # each sample's cut bin up to its ISCO from running sums.
    n_keep = f_all.searchsorted(f_isco, side="right")
    cut = np.maximum(b.first.searchsorted(n_keep, side="right") - 1, 0)
    c_lo, c_hi = int(cut.min()), int(cut.max())
    weights = b.cut_weights(c_hi)
    c_w = cos @ weights
    s_w = sin @ weights
    r = cos[:, c_lo : c_hi + 2] + 1j * sin[:, c_lo : c_hi + 2]
    r0 = 0.5 * (r[:, :-1] + r[:, 1:])
    r1 = (r[:, 1:] - r[:, :-1]) * b.inverse_widths[c_lo : c_hi + 1]
    local = cut - c_lo
    rows = np.arange(n)
    lo_k = b.first[cut]
    p0 = b.c0[n_keep] - b.c0[lo_k]
    p1 = b.c1[n_keep] - b.c1[lo_k] - b.centers[cut] * p0
    extra = p0 * r0[rows, local] + p1 * r1[rows, local]
    if c_hi > c_lo:
        terms_ = b.a0[c_lo:c_hi] * r0[:, :-1] + b.a1[c_lo:c_hi] * r1[:, :-1]
        drop = np.arange(c_hi - c_lo)[None, :] >= local[:, None]
        extra -= np.sum(np.where(drop, terms_, 0.0), axis=1)
    norm = np.where(n_keep > 0, b.cumulative_norm[np.maximum(n_keep - 1, 0)], 0.0)
    return c_w[:, 0] - s_w[:, 1] + extra.real, c_w[:, 1] + s_w[:, 0] + extra.imag, norm


@dataclass
class RelativeBinningLikelihood(FromOverlaps):
    """Phase-marginalised likelihood via relative binning around ``fiducial``.

    Parameters
    ----------
    datasets
        One :class:`DetectorData` per detector.
    reference_time
        GPS time ``coalescence_time`` is measured from, s.
    fiducial
        Parameter values (scalars) of the fiducial waveform, by name.
    n_bins
        Number of frequency bins.
    """

    datasets: Sequence[DetectorData]
    reference_time: float
    fiducial: Mapping[str, float]
    n_bins: int = 128
    names: tuple[str, ...] = PARAMETER_NAMES
    _bins: list[_Binned] = field(init=False, repr=False)

    def __post_init__(self) -> None:
        self._bins = []
        mc0 = float(self.fiducial["chirp_mass"])
        q0 = float(self.fiducial["mass_ratio"])
        tc0 = float(self.fiducial["coalescence_time"])
        s10 = float(self.fiducial.get("spin1", 0.0))
        s20 = float(self.fiducial.get("spin2", 0.0))
        for data in self.datasets:
            f = data.frequencies
            # Bins where the fiducial has signal (up to 1.5x its ISCO frequency, which
            # covers any posterior sample); above that one wide bin to the band's top.
            f_top = 1.5 * float(isco_frequency(mc0 * symmetric_mass_ratio(q0) ** (-0.6)))
            n_top = int(np.searchsorted(f, f_top))
            if n_top >= f.size - 2:
                idx = bin_edges(f, self.n_bins)
            else:
                idx = np.append(bin_edges(f[: n_top + 1], self.n_bins), f.size - 1)
            edges = f[idx]
            shift = tc0 + self.reference_time - data.epoch
            # The fiducial shape without amplitude constants or an ISCO cut:
            # h0 = f^{-7/6} exp(-i psi0); ratios carry the amplitude.
            # The same phase convention as the exact likelihood (with its -pi/4), so that
            # the binned overlap z has the exact one's phase as well as its modulus.
            psi0 = taylorf2_phase(f, mc0, q0, spin1=s10, spin2=s20)
            psi0 += 2.0 * np.pi * shift * f - np.pi / 4.0
            weight = 4.0 * data.df / data.psd
            # d h0* / S with h0 = f^{-7/6} exp(-i psi0), no ISCO cut.
            integrand = data.strain * (f ** (-7.0 / 6.0) * weight) * np.exp(1j * psi0)
            c0 = np.concatenate([[0.0], np.cumsum(integrand)])
            c1 = np.concatenate([[0.0], np.cumsum(integrand * f)])
            # Bin b holds f[idx[b]] .. f[idx[b+1]-1]; the last bin includes the top edge.
            stop = np.append(idx[1:-1], f.size)
            centers = 0.5 * (edges[:-1] + edges[1:])
            a0 = c0[stop] - c0[idx[:-1]]
            a1 = c1[stop] - c1[idx[:-1]] - centers * a0
            basis = PhaseBasis(edges)
            widths = np.diff(edges)
            # sum_b A0_b (R_b + R_b+1)/2 + A1_b (R_b+1 - R_b)/w_b = sum_e W_e R_e.
            weights = np.zeros(edges.size, dtype=complex)
            weights[:-1] += 0.5 * a0 - a1 / widths
            weights[1:] += 0.5 * a0 + a1 / widths
            self._bins.append(
                _Binned(
                    data=data,
                    edges=edges,
                    centers=centers,
                    widths=widths,
                    inverse_widths=1.0 / widths,
                    first=np.asarray(idx[:-1], dtype=np.intp),
                    a0=a0,
                    a1=a1,
                    basis=basis,
                    design=np.vstack(
                        [basis.basis, edges, -basis.phase(mc0, q0, s10, s20)[0]]
                    ),
                    tc0=tc0,
                    tables=_coefficient_tables(basis._layout),
                    edge_weights=np.column_stack([weights.real, weights.imag]),
                    cumulative_norm=np.cumsum(f ** (-7.0 / 3.0) * weight),
                    c0=c0,
                    c1=c1,
                )
            )

    @property
    def bins(self) -> int:
        """Number of frequency bins actually used (per detector)."""
        return int(self._bins[0].widths.size) if self._bins else 0

    def overlaps(self, params: Params) -> tuple[NDArray[np.complex128], Array]:
        """Binned complex overlap ``z`` and exact ``<h|h>``, each ``(n_det, n)``."""
        mc = np.atleast_1d(np.asarray(params["chirp_mass"], dtype=float))
        q = np.atleast_1d(np.asarray(params["mass_ratio"], dtype=float))
        dist = np.atleast_1d(np.asarray(params["effective_distance"], dtype=float))
        tc = np.atleast_1d(np.asarray(params["coalescence_time"], dtype=float))
        spins = spin_arrays(params, mc.size)
        amp = newtonian_amplitude(mc, dist)
        f_isco = isco_frequency(mc * symmetric_mass_ratio(q) ** (-0.6))
        z = np.zeros((len(self._bins), mc.size), dtype=complex)
        hh = np.zeros((len(self._bins), mc.size))
        for i, b in enumerate(self._bins):
            f_all = b.data.frequencies
            # Phase of h*/h0* at the edges: the PN series, the time shift from the
            # fiducial's and -psi0 in one product. It stays small (up to tens of
            # radians), so single-precision trigonometry is accurate to ~1e-6 rad.
            coeffs = np.column_stack(
                [b.basis.coefficients(mc, q, *spins), 2.0 * np.pi * (tc - b.tc0), np.ones_like(tc)]
            )
            x = (coeffs @ b.design).astype(np.float32)
            cos = np.cos(x).astype(float)
            sin = np.sin(x).astype(float)
            n_keep = np.searchsorted(f_all, f_isco, side="right")
            if n_keep.min() >= f_all.size:
                # Every ISCO above the band: z = amp * sum_e W_e exp(i x_e).
                c_w, s_w = cos @ b.edge_weights, sin @ b.edge_weights
                z[i] = amp * ((c_w[:, 0] - s_w[:, 1]) + 1j * (c_w[:, 1] + s_w[:, 0]))
            else:
                ratio = amp[:, None] * (cos + 1j * sin)  # conj(h/h0), no ISCO cut
                r0 = 0.5 * (ratio[:, :-1] + ratio[:, 1:])
                r1 = (ratio[:, 1:] - ratio[:, :-1]) * b.inverse_widths
                terms = b.a0 * r0 + b.a1 * r1
                # Bins wholly below the ISCO count in full, the one it cuts in part.
                cut = np.maximum(np.searchsorted(b.first, n_keep, side="right") - 1, 0)
                full = np.arange(b.first.size)[None, :] < cut[:, None]
                lo_k = b.first[cut]
                p0 = b.c0[n_keep] - b.c0[lo_k]
                p1 = b.c1[n_keep] - b.c1[lo_k] - b.centers[cut] * p0
                rows = np.arange(mc.size)
                z[i] = np.sum(np.where(full, terms, 0.0), axis=1)
                z[i] += p0 * r0[rows, cut] + p1 * r1[rows, cut]
            hh[i] = amp**2 * np.where(n_keep > 0, b.cumulative_norm[np.maximum(n_keep - 1, 0)], 0.0)
        return z, hh

    def log_likelihood(self, params: Params) -> Array:
        """Phase-marginalised log-likelihood ratio, shape ``(n,)``.

        The same numbers as ``ln I0(|z|) - <h|h>/2`` from :meth:`overlaps`, computed
        with as few array operations as possible: on every sampler step the calls
        are small (a few dozen parameter sets), so their number, not arithmetic,
        sets the cost. Mass-dependent factors share ``ln Mc`` and ``ln eta``; where
        every ISCO frequency falls in one bin, that bin's edge weights are cached.
        """
        mc = np.asarray(params["chirp_mass"], dtype=float)
        q = np.asarray(params["mass_ratio"], dtype=float)
        dist = np.asarray(params["effective_distance"], dtype=float)
        tc = np.asarray(params["coalescence_time"], dtype=float)
        if mc.ndim != 1:
            return self._general(params)
        terms = mass_terms(mc, q, *spin_arrays(params, mc.size))
        amp = _AMPLITUDE * np.exp((5.0 / 6.0) * terms.log_mc) / dist
        total = np.zeros(mc.size)
        for b in self._bins:
            zr, zi, norm = _overlap_parts(b, terms, tc)
            absz = amp * np.hypot(zr, zi)
            total += absz + np.log(i0e(absz)) - 0.5 * amp**2 * norm
        return total

    def matched_filter_snr(self, params: Params) -> Array:
        """Matched-filter SNR ``sqrt(sum |z|^2 / <h|h>)``, shape ``(n,)``.

        The amplitude cancels, so the unit-amplitude overlaps of ``log_likelihood``'s
        fast path suffice (the same numbers as :meth:`FromOverlaps.matched_filter_snr`,
        at a fraction of the cost on the tens of thousands of posterior samples).
        """
        mc = np.asarray(params["chirp_mass"], dtype=float)
        if mc.ndim != 1:
            return FromOverlaps.matched_filter_snr(self, params)
        q = np.asarray(params["mass_ratio"], dtype=float)
        tc = np.asarray(params["coalescence_time"], dtype=float)
        terms = mass_terms(mc, q, *spin_arrays(params, mc.size))
        total = np.zeros(mc.size)
        for b in self._bins:
            zr, zi, norm = _overlap_parts(b, terms, tc)
            total += (zr**2 + zi**2) / np.maximum(norm, 1e-300)
        return np.sqrt(total)

    def unit_overlaps(
        self, terms: MassTerms, times: Sequence[Array]
    ) -> list[tuple[Array, Array, Array | float]]:
        """Per detector, the overlap with the unit-amplitude model: ``(Re z0, Im z0, <h0|h0>)``.

        ``z0 = 4 df sum d f^{-7/6} exp(i Psi) / S`` with the model's phase ``Psi``
        (PN series, time shift to ``times[i]`` and the -pi/4), cut at the ISCO
        frequency, and ``<h0|h0> = 4 df sum f^{-7/3} / S`` up to it. Multiply
        ``z0`` by the amplitude (and, for a network, the conjugate antenna
        factor) to get the overlap; ``times[i]`` is detector ``i``'s coalescence
        time measured from ``reference_time``, s.
        """
        return [_overlap_parts(b, terms, t) for b, t in zip(self._bins, times, strict=True)]

    def _general(self, params: Params) -> Array:
        return FromOverlaps.log_likelihood(self, params)
