"""A fast all-sky scan with the coherent network SNR, to seed the sampler.

The sky posterior of a network is multimodal (rings and mirror images of
equal time delays), so the walkers must start where the data point. For one
template (the fiducial masses) every detector's complex matched-filter output
``s_I(t) = z0_I(t) / sigma_I`` is computed once, by one inverse FFT per
detector. For each point of a sky grid and each geocentric time, the outputs
at the delayed times are projected onto the span of the detectors' antenna
responses ``a_I = F+_I sigma_I``, ``b_I = Fx_I sigma_I`` (at zero polarisation
angle; the span does not depend on it): the coherent SNR

``rho^2 = |P Re s|^2 + |P Im s|^2``,  ``P`` the projector onto ``span(a, b)``,

is twice the log-likelihood maximised over distance, inclination,
polarisation and phase (the F-statistic of Jaranowski, Królak & Schutz 1998,
PRD 58, 063001, Sec. III; the coherent network SNR of Harry & Fairhurst 2011,
PRD 83, 084002, Eq. 2.13). The sky grid is the centres of equal-area cells,
equal steps in right ascension and in ``sin dec`` (Lambert's cylindrical
equal-area projection, Snyder 1987, USGS Prof. Paper 1395, Sec. 10; the same
cells serve the sampler's sky-jump proposal). The geocentric times
tried at each point put the loudest detector's arrival within a few samples
of its own SNR peak, so the scan costs (points x 17 x detectors).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.fft
from numpy.typing import NDArray

from .conditioning import DetectorData
from .network_model import SiteGeometry
from .waveform import isco_frequency, symmetric_mass_ratio, taylorf2_phase

__all__ = ["SkyScan", "equal_area_cells", "fibonacci_sphere", "filter_output", "sky_scan"]

Array = NDArray[np.float64]


def fibonacci_sphere(n: int) -> tuple[Array, Array]:
    """Right ascension and declination (rad) of ``n`` Fibonacci-lattice points.

    ``sin dec_j = 1 - (2 j + 1)/n``, ``ra_j = 2 pi j / phi`` (mod 2 pi) with the
    golden ratio ``phi`` (González 2010, Math. Geosci. 42, 49, Eq. 2).
    """
    j = np.arange(n)
    golden = 0.5 * (1.0 + np.sqrt(5.0))
    return np.mod(2.0 * np.pi * j / golden, 2.0 * np.pi), np.arcsin(1.0 - (2.0 * j + 1.0) / n)


def equal_area_cells(n_ra: int, n_dec: int) -> tuple[Array, Array]:
    """Centres (ra, dec; rad) of ``n_ra x n_dec`` equal-area cells, ``sin dec`` index fastest.

    Cell ``(i, j)`` spans ``ra in 2 pi [i, i+1) / n_ra`` and
    ``sin dec in -1 + 2 [j, j+1) / n_dec``; every cell covers ``4 pi / (n_ra n_dec)`` sr.
    """
    ra = 2.0 * np.pi * (np.arange(n_ra) + 0.5) / n_ra
    sin_dec = -1.0 + 2.0 * (np.arange(n_dec) + 0.5) / n_dec
    r, s = np.meshgrid(ra, sin_dec, indexing="ij")
    return r.ravel(), np.arcsin(s.ravel())


@dataclass(frozen=True)
class SkyScan:
    """Best coherent SNR^2 per sky point.

    Attributes
    ----------
    right_ascension, declination
        The grid, rad, shape ``(m,)``.
    time
        Geocentric coalescence time of the best match at each point, relative to
        the reference time, s.
    snr2
        Coherent ``rho^2`` there (maximised over time).
    spacing
        Typical grid spacing, rad.
    cells
        ``(n_ra, n_dec)`` of the grid (:func:`equal_area_cells`).
    loudest
        Index of the detector whose peak anchored the times.
    detector_snr
        Each detector's peak matched-filter SNR in the window.
    """

    right_ascension: Array
    declination: Array
    time: Array
    snr2: Array
    spacing: float
    cells: tuple[int, int]
    loudest: int
    detector_snr: Array

    @property
    def best(self) -> int:
        """Index of the loudest sky point."""
        return int(np.argmax(self.snr2))


def filter_output(
    data: DetectorData, chirp_mass: float, mass_ratio: float, reference_time: float, dt: float
) -> tuple[Array, NDArray[np.complex128], float]:
    """Times (relative to ``reference_time``), ``z0(t)`` and ``sigma`` of one detector.

    ``z0(t) = 4 df sum d f^{-7/6} exp(i [Psi(f) + 2 pi f t - pi/4]) / S`` with the
    time ``t`` of the model's coalescence measured from ``reference_time``: the
    unit-amplitude overlap of :mod:`estimator.relbin`, at every time shift.
    """
    f = data.frequencies
    f_isco = float(isco_frequency(chirp_mass * symmetric_mass_ratio(mass_ratio) ** (-0.6)))
    keep = f <= f_isco
    weight = 4.0 * data.df / data.psd[keep]
    fk = f[keep]
    psi = taylorf2_phase(fk, chirp_mass, mass_ratio) - np.pi / 4.0
    psi = psi + 2.0 * np.pi * fk * (reference_time - data.epoch)
    c = data.strain[keep] * weight * fk ** (-7.0 / 6.0) * np.exp(1j * psi)
    m = scipy.fft.next_fast_len(
        max(int(np.ceil(1.0 / (data.df * dt))), 2 * (data.first_index + f.size))
    )
    series = np.zeros(m, dtype=complex)
    series[data.first_index : data.first_index + fk.size] = c
    z = scipy.fft.ifft(series) * m  # sum_k c_k exp(+2 pi i k j / m)
    times = np.arange(m) / (m * data.df)
    times = np.where(times > 0.5 / data.df, times - 1.0 / data.df, times)  # wrap to (-T/2, T/2]
    sigma = float(np.sqrt(np.sum(fk ** (-7.0 / 3.0) * weight)))
    return times, z, sigma


def sky_scan(
    datasets: Sequence[DetectorData],
    sites: Sequence[SiteGeometry],
    *,
    gmst: float,
    reference_time: float,
    chirp_mass: float,
    mass_ratio: float,
    time_window: float,
    cells: tuple[int, int] = (256, 128),
    offsets: int = 8,
) -> SkyScan:
    """Coherent SNR over the sky for the template ``(chirp_mass, mass_ratio)``.

    Parameters
    ----------
    time_window
        Half-width of the geocentric-time prior around the reference time, s.
    cells
        Sky grid: cells in right ascension and in ``sin dec`` (32,768 cells of
        1.26 deg^2 by default).
    offsets
        Times tried per point: the loudest detector's peak +- this many samples.
    """
    dt = 1.0 / 8192.0
    outputs = [
        filter_output(d, chirp_mass, mass_ratio, reference_time, dt) for d in datasets
    ]
    n_det = len(datasets)
    max_delay = 0.0215  # s, more than the Earth's diameter over c (42.5 ms / 2)
    # Normalised outputs on a common uniform time grid around the reference time.
    grid = np.arange(-time_window - 2 * max_delay, time_window + 2 * max_delay + dt, dt)
    s = np.empty((n_det, grid.size), dtype=complex)
    for i, (t, z, sigma) in enumerate(outputs):
        order = np.argsort(t)
        s[i] = (
            np.interp(grid, t[order], z.real[order]) + 1j * np.interp(grid, t[order], z.imag[order])
        ) / sigma
    sigmas = np.array([o[2] for o in outputs])
    inside = np.abs(grid) <= time_window + max_delay
    peaks = np.max(np.abs(s[:, inside]), axis=1)
    loudest = int(np.argmax(peaks))
    t_peak = float(grid[inside][np.argmax(np.abs(s[loudest, inside]))])

    ra, dec = equal_area_cells(*cells)
    points = ra.size
    zero = np.zeros(points)
    delays = np.array([site.time_delay(ra, dec, gmst) for site in sites])  # (n_det, m)
    fp_fc = [site.antenna_pattern(ra, dec, zero, gmst) for site in sites]
    a = np.array([np.asarray(p[0]) for p in fp_fc]) * sigmas[:, None]
    b = np.array([np.asarray(p[1]) for p in fp_fc]) * sigmas[:, None]
    aa, ab, bb = np.sum(a * a, 0), np.sum(a * b, 0), np.sum(b * b, 0)
    det = np.maximum(aa * bb - ab * ab, 1e-12 * (aa * bb + 1e-300))
    k = np.arange(-offsets, offsets + 1) * dt
    tc = t_peak - delays[loudest][:, None] + k[None, :]  # (m, K) geocentric times
    best = np.full(points, -np.inf)
    best_t = np.zeros(points)
    proj = np.zeros((2, points, k.size))
    for part in (np.real, np.imag):
        xa = np.zeros((points, k.size))
        xb = np.zeros((points, k.size))
        for i in range(n_det):
            x = part(s[i])
            vals = np.interp(tc + delays[i][:, None], grid, x)
            xa += a[i][:, None] * vals
            xb += b[i][:, None] * vals
        rho2 = (bb[:, None] * xa**2 - 2.0 * ab[:, None] * xa * xb + aa[:, None] * xb**2) / det[
            :, None
        ]
        proj[0 if part is np.real else 1] = rho2
    total = proj[0] + proj[1]
    j = np.argmax(total, axis=1)
    best = total[np.arange(points), j]
    best_t = tc[np.arange(points), j]
    valid = np.abs(best_t) <= time_window
    best = np.where(valid, best, 0.0)
    return SkyScan(
        right_ascension=ra,
        declination=dec,
        time=best_t,
        snr2=best,
        spacing=float(np.sqrt(4.0 * np.pi / points)),
        cells=cells,
        loudest=loudest,
        detector_snr=peaks,
    )
