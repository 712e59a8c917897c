"""Sky maps from posterior samples of right ascension and declination.

The density is a von Mises-Fisher (vMF) kernel density estimate on the unit
sphere (Hall, Watson & Cabrera 1987, Biometrika 74, 751),

    f(x) = (1/n) sum_i C(kappa) exp(kappa x . x_i),
    C(kappa) = kappa / (4 pi sinh kappa)

(the vMF density on the 2-sphere: Fisher 1953, Proc. R. Soc. A 217, 295). Its
concentration ``kappa`` is chosen by leave-one-out likelihood cross-validation
(Hall et al. 1987) on a subsample, then rescaled to the full sample
size. The density is integrated over the equal-area pixels of a HEALPix grid
(Górski et al. 2005, ApJ 622, 759; pixel arithmetic by astropy-healpix) in
nested order. Credible regions take the most probable pixels
first (highest-posterior-density regions: Box & Tiao 1973, Bayesian Inference
in Statistical Analysis, section 2.8; common practice for sky maps).

Section numbers and equation numbers quoted below come from memory.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import astropy_healpix as ahp
import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from .errors import InputError

__all__ = ["SkyMap", "sky_map_from_samples"]

Array = NDArray[np.float64]

#: Largest number of samples used for the cross-validation of the bandwidth.
CV_SUBSAMPLE = 1000
#: Kernels are cut at this many kernel widths; exp(-5^2/2) = 4e-6 of the peak.
CUTOFF_WIDTHS = 5.0
#: Largest HEALPix nside accepted for a map (12 * 1024^2 pixels, 100 MB).
MAX_NSIDE_LIMIT = 1024
#: Coarsest map resolution, used when the kernel is wide (keeps figures smooth).
MIN_NSIDE = 32
#: Evaluation pixels per kernel width: a pixel is at most a third of the width.
PIXELS_PER_WIDTH = 3.0
#: Up to this factor finer than the map, the density is evaluated and summed.
SUPERSAMPLE = 4
#: Bound on (pixel centre to boundary) / pixel resolution; measured with
#: astropy-healpix boundaries (largest 1.044 up to nside 256), checked in tests.
PIXEL_RADIUS = 1.1
_BLOCK = 8  # evaluation pixels per block side: a block holds 64 of them
_CHUNK = 20_000  # samples per matrix product


@dataclass(frozen=True, eq=False)
class SkyMap:
    """Probability of the source position per HEALPix pixel.

    Attributes
    ----------
    nside
        HEALPix resolution parameter; the map has ``12 * nside**2`` pixels.
    order
        Pixel ordering, always ``"nested"``.
    probability
        Probability per pixel, shape ``(12 * nside**2,)``, summing to 1.
    bandwidth
        Width of the vMF kernel used, ``1 / sqrt(kappa)`` (rad).
    """

    nside: int
    order: str
    probability: Array
    bandwidth: float

    def __post_init__(self) -> None:
        p = np.asarray(self.probability, dtype=float)
        if self.order != "nested" or p.shape != (12 * self.nside**2,):
            msg = (f"order {self.order!r} with {p.shape} pixels; expected 'nested' with "
                   f"12 * nside^2 = {12 * self.nside**2} probabilities")
            raise InputError(msg, source="SkyMap", field="probability")
        if not (np.all(p >= 0.0) and abs(p.sum() - 1.0) < 1e-6):
            msg = f"probabilities sum to {p.sum():g} (min {p.min():g}); normalise them to 1"
            raise InputError(msg, source="SkyMap", field="probability")
        p.setflags(write=False)
        object.__setattr__(self, "probability", p)

    @property
    def pixel_area_deg2(self) -> float:
        """Area of one pixel (deg^2): 4 pi / (12 nside^2) sr (Górski et al. 2005)."""
        return float(ahp.nside_to_pixel_area(self.nside).to_value("deg2"))

    @cached_property
    def _ranked(self) -> tuple[Array, Array]:
        """Probabilities sorted from the most probable pixel down, and their running sum."""
        ranked = np.sort(self.probability)[::-1]
        return ranked, np.cumsum(ranked)

    def credible_area(self, level: float = 0.9) -> float:
        """Area (deg^2) of the smallest region holding ``level`` of the probability.

        Pixels are taken most probable first; the last pixel counts for the
        fraction of it needed to reach ``level`` exactly.
        """
        if not 0.0 < level <= 1.0:
            raise InputError(f"level={level}; expected 0 < level <= 1", field="level")
        ranked, cum = self._ranked
        target = level * cum[-1]
        k = min(int(np.searchsorted(cum, target, side="left")), cum.size - 1)
        before = cum[k - 1] if k > 0 else 0.0
        fraction = (target - before) / ranked[k] if ranked[k] > 0.0 else 1.0
        return (k + min(fraction, 1.0)) * self.pixel_area_deg2

    def _rank_of(self, ra: float, dec: float) -> tuple[int, float]:
        """Pixels strictly more probable than the one holding (ra, dec), and its probability."""
        x, y, z = _unit_vectors(np.atleast_1d(ra), np.atleast_1d(dec))
        pixel = int(ahp.xyz_to_healpix(x, y, z, self.nside, order="nested")[0])
        p = float(self.probability[pixel])
        ranked, _ = self._ranked
        return int(np.searchsorted(-ranked, -p, side="left")), p

    def credible_level(self, ra: float, dec: float) -> float:
        """Searched probability: the smallest credible level whose region holds (ra, dec).

        The probability of every pixel more probable than the point's pixel,
        plus that pixel's own; 1 outside the support.
        """
        above, p = self._rank_of(ra, dec)
        _, cum = self._ranked
        return min(1.0, (float(cum[above - 1]) if above > 0 else 0.0) + p)

    def searched_area(self, ra: float, dec: float) -> float:
        """Area (deg^2) searched, most probable pixels first, up to and including the point's."""
        above, _ = self._rank_of(ra, dec)
        return (above + 1) * self.pixel_area_deg2

    def pixel_centres(self) -> tuple[Array, Array]:
        """Right ascension in [0, 2 pi) and declination of every pixel centre (rad)."""
        x, y, z = ahp.healpix_to_xyz(np.arange(self.probability.size), self.nside,
                                     order="nested")
        return np.mod(np.arctan2(y, x), 2.0 * np.pi), np.arcsin(np.clip(z, -1.0, 1.0))


def _unit_vectors(ra: Array, dec: Array) -> tuple[Array, Array, Array]:
    """Cartesian unit vectors of (ra, dec) in rad (common practice)."""
    cos_dec = np.cos(dec)
    return cos_dec * np.cos(ra), cos_dec * np.sin(ra), np.sin(dec)


def _check_samples(ra: ArrayLike, dec: ArrayLike) -> tuple[Array, Array]:
    r = np.asarray(ra, dtype=float)
    d = np.asarray(dec, dtype=float)
    for name, arr in (("ra", r), ("dec", d)):
        if arr.ndim != 1 or arr.size < 20:
            msg = f"{name} has shape {arr.shape}; expected a 1-D array of at least 20 samples"
            raise InputError(msg, source="sky map", field=name)
        bad = np.flatnonzero(~np.isfinite(arr))
        if bad.size:
            msg = f"{name}[{bad[0]}] = {arr[bad[0]]}; every sample must be finite (rad)"
            raise InputError(msg, source="sky map", field=name)
    if r.size != d.size:
        msg = f"ra has {r.size} samples, dec {d.size}; pass one (ra, dec) pair per sample"
        raise InputError(msg, source="sky map", field="dec")
    off = np.flatnonzero(np.abs(d) > np.pi / 2 + 1e-12)
    if off.size:
        msg = (f"dec[{off[0]}] = {d[off[0]]:g} rad lies outside [-pi/2, pi/2]; "
               "pass declinations in radians")
        raise InputError(msg, source="sky map", field="dec")
    return np.mod(r, 2.0 * np.pi), np.clip(d, -np.pi / 2, np.pi / 2)


def loo_log_likelihood(points: Array, kappas: Array) -> Array:
    """Leave-one-out log-likelihood of a vMF kernel density estimate, per ``kappa``.

    ``sum_i ln[(1/(m-1)) sum_{j != i} C(kappa) exp(kappa x_i . x_j)]`` for the
    ``(m, 3)`` unit vectors ``points`` (Hall, Watson & Cabrera 1987),
    with ``C(kappa) exp(kappa) = kappa / (2 pi (1 - exp(-2 kappa)))`` (Fisher 1953).
    """
    m = points.shape[0]
    cos = points @ points.T
    np.fill_diagonal(cos, -np.inf)
    nearest = cos.max(axis=1)
    # <= 0, the largest term being exp(0); single precision is ample after the shift
    shifted = (cos - nearest[:, None]).astype(np.float32)
    out = np.empty(kappas.size)
    for i, kappa in enumerate(kappas):  # bounded by the grid size
        terms = np.exp(np.float32(kappa) * shifted).sum(axis=1, dtype=np.float64)
        log_sum = np.log(terms) + kappa * (nearest - 1.0)
        log_c = np.log(kappa / (2.0 * np.pi)) - np.log1p(-np.exp(-2.0 * kappa))
        out[i] = log_sum.sum() + m * (log_c - np.log(m - 1.0))
    return out


def select_kappa(points: Array, n_total: int) -> float:
    """Cross-validated vMF concentration for ``n_total`` samples.

    ``kappa`` maximises :func:`loo_log_likelihood` on a grid (factor 2 steps
    over [0.5, 2^24], then factor 2^(1/4) around the best). A kernel width
    fitted on ``m`` points is scaled to ``n`` with the optimal-width rate
    ``h ~ n^(-1/6)`` in two dimensions (Silverman 1986, Density Estimation,
    eq. 4.14, ``h ~ n^(-1/(d+4))``; the same rate on the sphere: Hall et al.
    1987), i.e. ``kappa ~ n^(1/3)``.
    """
    coarse = 2.0 ** np.arange(-1.0, 25.0)
    best = coarse[int(np.argmax(loo_log_likelihood(points, coarse)))]
    fine = best * 2.0 ** np.linspace(-1.0, 1.0, 9)
    kappa = float(fine[int(np.argmax(loo_log_likelihood(points, fine)))])
    return float(kappa * (n_total / points.shape[0]) ** (1.0 / 3.0))


def _resolution(nside: int) -> float:
    return float(ahp.nside_to_pixel_resolution(nside).to_value("rad"))


def _density_blocks(vectors: Array, kappa: float, nside_map: int, nside_eval: int) -> Array:
    """Unnormalised pixel probabilities at ``nside_map``, from the density at ``nside_eval``.

    Coarse to fine: blocks of ``_BLOCK^2`` evaluation pixels are kept while a
    sample lies within the block radius plus ``CUTOFF_WIDTHS`` kernel widths;
    each kept block sums ``exp(kappa (x . x_i - 1))`` over those samples only.
    The exponent is formed in double precision and exponentiated in single
    precision (relative error ~1e-7, several times faster); sums are double.
    """
    width = 1.0 / np.sqrt(kappa)
    nside_block = max(1, nside_eval // _BLOCK)
    tree = cKDTree(vectors)
    blocks = np.arange(12)
    nside = 1
    while True:  # bounded: nside doubles up to nside_block <= 1024
        reach = PIXEL_RADIUS * _resolution(nside) + CUTOFF_WIDTHS * width
        chord = 2.0 * np.sin(min(reach, np.pi) / 2.0)
        centres = np.stack(ahp.healpix_to_xyz(blocks, nside, order="nested"), axis=1)
        near = tree.query_ball_point(centres, chord, return_length=True)
        blocks, centres = blocks[near > 0], centres[near > 0]
        if nside >= nside_block:
            break
        blocks = (4 * blocks[:, None] + np.arange(4)).ravel()
        nside *= 2
    per_block = (nside_eval // nside_block) ** 2
    per_map = (nside_eval // nside_map) ** 2
    out = np.zeros(12 * nside_map**2)
    for block, centre in zip(blocks, centres, strict=True):  # bounded by the block count
        idx = np.asarray(tree.query_ball_point(centre, chord), dtype=np.intp)
        cells = block * per_block + np.arange(per_block)
        grid = np.stack(ahp.healpix_to_xyz(cells, nside_eval, order="nested"), axis=1)
        dens = np.zeros(per_block)
        for start in range(0, idx.size, _CHUNK):  # bounded: memory <= per_block * _CHUNK
            near = np.ascontiguousarray(vectors[idx[start:start + _CHUNK]].T)
            exponent = (kappa * (grid @ near - 1.0)).astype(np.float32)  # in [-2 kappa, 0]
            dens += np.exp(exponent).sum(axis=1, dtype=np.float64)
        first = block * (per_block // per_map)
        out[first:first + per_block // per_map] = dens.reshape(-1, per_map).sum(axis=1)
    return out


def sky_map_from_samples(
    ra: ArrayLike,
    dec: ArrayLike,
    *,
    max_nside: int = 256,
    rng: np.random.Generator | None = None,
) -> SkyMap:
    """Sky map of posterior samples by a cross-validated vMF kernel density estimate.

    Parameters
    ----------
    ra, dec
        Right ascension and declination samples (rad), shape ``(n,)``, ``n >= 20``.
        Right ascension is wrapped into [0, 2 pi).
    max_nside
        Largest HEALPix nside of the map, a power of two in [1, 1024]. The map
        uses the smallest nside whose pixel is at most a third of the kernel
        width (at least ``MIN_NSIDE``, at most ``max_nside``); where the kernel
        is narrower still, the density is evaluated on pixels up to
        ``SUPERSAMPLE`` times finer and summed into the map's pixels.
    rng
        Draws the cross-validation subsample; a fixed seed (0) when ``None``.

    Returns
    -------
    SkyMap
        Nested-order probabilities; density beyond ``CUTOFF_WIDTHS`` kernel
        widths of every sample is set to zero.
    """
    if max_nside not in [2**k for k in range(11)]:
        msg = f"max_nside={max_nside}; expected a power of two from 1 to {MAX_NSIDE_LIMIT}"
        raise InputError(msg, source="sky map", field="max_nside")
    r, d = _check_samples(ra, dec)
    vectors = np.stack(_unit_vectors(r, d), axis=1)
    distinct = np.unique(np.round(vectors, 12), axis=0)
    if distinct.shape[0] < 2:
        msg = "all samples share one sky position; a sky map needs at least 2 distinct ones"
        raise InputError(msg, source="sky map", field="ra")
    gen = rng if rng is not None else np.random.default_rng(0)
    take = gen.choice(distinct.shape[0], size=min(CV_SUBSAMPLE, distinct.shape[0]),
                      replace=False)
    kappa = select_kappa(distinct[take], distinct.shape[0])
    width = 1.0 / np.sqrt(kappa)
    needed = 1
    while needed < 8 * MAX_NSIDE_LIMIT and _resolution(needed) > width / PIXELS_PER_WIDTH:
        needed *= 2
    nside_map = min(max(needed, MIN_NSIDE), max_nside)
    nside_eval = max(nside_map, min(needed, SUPERSAMPLE * nside_map))
    mass = _density_blocks(vectors, kappa, nside_map, nside_eval)
    return SkyMap(nside=nside_map, order="nested", probability=mass / mass.sum(),
                  bandwidth=float(width))
