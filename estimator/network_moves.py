"""A sampler move that jumps between sky modes, proposing from the coherent sky scan.

The sky posterior of a network often has separated modes (mirror images of
equal arrival-time differences), between which local moves rarely pass. This
Metropolis–Hastings move (Hastings 1970, Biometrika 57, 97) proposes, for every
walker independently of its position: a sky cell drawn with probability
``w_j ∝ exp(beta rho_j^2 / 2)`` from the scan (:mod:`estimator.sky_scan`), tempered
with ``beta = 1/3`` so that the proposal is wider than the posterior (an
independence proposal must not be lighter-tailed than its target, or walkers stick
where it is too thin; Tierney 1994), cells within 60 of the best in ``rho^2 / 2``,
plus 0.1% spread over the whole sky so that no allowed point has zero density;
a point uniform within that cell; a polarisation angle uniform in ``[0, pi/2)``
and ``cos iota`` uniform in ``[-1, 1]``; the masses and the arrival time at the
reference site are kept, so every detector's arrival time moves only by the change of its delay. The
proposal density is ``w_j / (cell area)`` times constants, so the acceptance
ratio carries ``w_old / w_new`` (an independence sampler within an ensemble,
e.g. Tierney 1994, Ann. Stat. 22, 1701, Sec. 2.3.3).
"""

from __future__ import annotations

import emcee
import numpy as np
from numpy.typing import NDArray

from .sky_scan import SkyScan

__all__ = ["SkyJumpMove"]

Array = NDArray[np.float64]

#: Power of the scan's likelihood in the proposal (module docstring).
TEMPERING = 1.0 / 3.0
#: Share of the proposal spread uniformly over the sky.
UNIFORM_SHARE = 1e-3


class SkyJumpMove(emcee.moves.MHMove):  # type: ignore[misc]
    """Independence proposal of sky position and orientation from the sky scan.

    Parameters
    ----------
    scan
        The coherent scan on :func:`estimator.sky_scan.equal_area_cells`.
    names
        The sampler's coordinate names (column order).
    """

    def __init__(self, scan: SkyScan, names: tuple[str, ...]) -> None:
        half = 0.5 * scan.snr2
        w = np.where(half >= half.max() - 60.0, np.exp(TEMPERING * (half - half.max())), 0.0)
        w = (1.0 - UNIFORM_SHARE) * w / w.sum() + UNIFORM_SHARE / w.size
        self.log_w = np.log(w)
        self.cumulative = np.cumsum(w)
        self.cumulative /= self.cumulative[-1]
        self.n_ra, self.n_dec = scan.cells
        self.col = {k: names.index(k) for k in (
            "right_ascension", "sin_declination", "polarization_angle", "cos_inclination")}
        super().__init__(self._proposal, ndim=len(names))

    def _cell(self, ra: Array, sin_dec: Array) -> NDArray[np.intp]:
        i = np.minimum((np.mod(ra, 2.0 * np.pi) / (2.0 * np.pi) * self.n_ra).astype(int),
                       self.n_ra - 1)
        j = np.clip(((sin_dec + 1.0) / 2.0 * self.n_dec).astype(int), 0, self.n_dec - 1)
        return np.asarray(i * self.n_dec + j)

    def _proposal(self, coords: Array, random: np.random.RandomState) -> tuple[Array, Array]:
        n = coords.shape[0]
        c = self.col
        new = np.array(coords, copy=True)
        pick = np.searchsorted(self.cumulative, random.rand(n))
        cell = np.minimum(pick, self.cumulative.size - 1)
        i, j = np.divmod(cell, self.n_dec)
        new[:, c["right_ascension"]] = 2.0 * np.pi * (i + random.rand(n)) / self.n_ra
        new[:, c["sin_declination"]] = -1.0 + 2.0 * (j + random.rand(n)) / self.n_dec
        new[:, c["polarization_angle"]] = 0.5 * np.pi * random.rand(n)
        new[:, c["cos_inclination"]] = random.uniform(-1.0, 1.0, n)
        old_cell = self._cell(coords[:, c["right_ascension"]], coords[:, c["sin_declination"]])
        return new, self.log_w[old_cell] - self.log_w[cell]
