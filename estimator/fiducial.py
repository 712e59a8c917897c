"""The fiducial waveform: the maximum-likelihood point, and a Gaussian around it.

Relative binning is accurate near its fiducial, so the fiducial is found by
climbing the binned likelihood, rebuilding the bins at each new peak, and
finishing on the exact likelihood (Zackay, Dai & Venumadhav 2018,
arXiv:1806.08792, Sec. III, who optimise the fiducial the same way). The
local curvature of the log-likelihood there, a numerical Fisher matrix
(Cutler & Flanagan 1994, PRD 49, 2658, Sec. IV; Vallisneri 2008, PRD 77,
042001, on when it is a fair estimate), sets the size of the ball the
sampler's walkers start from.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import scipy.optimize
from numpy.typing import NDArray

from .conditioning import DetectorData
from .likelihood import PARAMETER_NAMES, ExactLikelihood, log_i0
from .priors import SPIN_NAMES
from .relbin import RelativeBinningLikelihood
from .relbin_model import ModelRelativeBinning, binned_likelihood
from .waveform import chirp_time

__all__ = ["Fiducial", "curvature_covariance", "find_fiducial"]

Array = NDArray[np.float64]
AnyLikelihood = ExactLikelihood | RelativeBinningLikelihood | ModelRelativeBinning


@dataclass(frozen=True)
class Fiducial:
    """Maximum-likelihood parameters (by name) and their exact log-likelihood ratio."""

    params: dict[str, float]
    log_likelihood: float
    snr: float
    evaluations: int


def _scales(chirp_mass: float, f_low: float) -> Array:
    """Rough 1-sigma-like step sizes for (chirp mass, q, d_eff fraction, t_c)."""
    tau = float(chirp_time(chirp_mass, f_low))
    rel_mc = 0.6 * 0.2 / f_low / max(tau, 1e-3)
    return np.array([chirp_mass * max(rel_mc, 1e-6), 0.05, 0.1, 5e-4])


def _profile_distance(
    like: AnyLikelihood, x: Array, reference: Mapping[str, float]
) -> tuple[float, float]:
    """Log-likelihood maximised over effective distance, and that distance.

    ``reference`` may hold fixed aligned spins (``spin1``, ``spin2``); other keys are ignored.

    For ``h = h_1 / D`` the overlap is ``|z_1| / D`` and ``<h|h> = <h_1|h_1>/D^2``;
    ``|z| - <h|h>/2`` peaks at ``D = <h_1|h_1>/|z_1|`` (``ln I_0(x) ≈ x``, large ``x``).
    """
    params = {
        "chirp_mass": np.array([x[0]]),
        "mass_ratio": np.array([x[1]]),
        "effective_distance": np.array([1.0]),
        "coalescence_time": np.array([x[2]]),
        **{k: np.array([float(v)]) for k, v in reference.items() if k in SPIN_NAMES},
    }
    z, hh = like.overlaps(params)
    dist = float(hh.sum() / max(np.abs(z).sum(), 1e-300))
    # The overlaps scale as 1/D and <h|h> as 1/D^2, so the phase-marginalised
    # ln I0(|z|) - <h|h>/2 at that distance follows without a second evaluation.
    log_l = np.sum(log_i0(np.abs(z) / dist) - 0.5 * hh / dist**2)
    return float(log_l), dist


def find_fiducial(
    datasets: Sequence[DetectorData],
    reference_time: float,
    start: Mapping[str, float],
    *,
    mass_ratio_range: tuple[float, float],
    chirp_mass_range: tuple[float, float],
    time_window: float,
    n_bins: int,
    rounds: int = 3,
    exact_iterations: int = 40,
    progress: Callable[[float], None] | None = None,
    exact: ExactLikelihood | None = None,
    model: str = "taylorf2",
    spins: tuple[float, float] = (0.0, 0.0),
    free_spin: float | None = None,
) -> Fiducial:
    """Maximise the likelihood over (chirp mass, q, t_c), distance profiled out.

    Parameters
    ----------
    start
        Starting point by name (``chirp_mass``, ``mass_ratio``, ``coalescence_time``
        relative to ``reference_time``).
    model
        Waveform model (:mod:`estimator.models`); ``exact``, when given, must use it.
    spins
        Aligned spins ``(spin1, spin2)`` held fixed during the climb (the sampler
        explores them); non-zero ones are part of the returned parameters.
    free_spin
        When given (a bound inside the prior's ``spin_max``), equal aligned spins
        ``spin1 = spin2 = chi`` are climbed too, from ``spins[0]`` and within
        ``±free_spin``: the masses and the spins are degenerate, so two peaks climbed
        with different fixed spins are compared fairly only when each may also
        move its spin (calibration injection 102 of 2026-12-04: climbed with
        spins 0, the fit nearest the source was 144 below the source's own
        log-likelihood, and a fit at spins -0.4 far from it was preferred).
    """
    if exact is None:
        exact = ExactLikelihood(datasets, reference_time, model=model)
    f_low = min(d.f_low for d in datasets)
    scale = _scales(float(start["chirp_mass"]), f_low)[[0, 1, 3]]
    lo = np.array([chirp_mass_range[0], mass_ratio_range[0], -time_window])
    hi = np.array([chirp_mass_range[1], mass_ratio_range[1], time_window])
    x = np.array([start["chirp_mass"], start["mass_ratio"], start["coalescence_time"]], dtype=float)
    fixed = {k: float(v) for k, v in zip(SPIN_NAMES, spins, strict=True) if v != 0.0}
    if free_spin is not None:  # a fourth coordinate: the equal spins
        scale = np.append(scale, 0.05)
        lo = np.append(lo, -free_spin)
        hi = np.append(hi, free_spin)
        x = np.append(x, np.clip(spins[0], -free_spin, free_spin))
    dim = x.size
    evaluations = 0

    def spins_at(y: Array) -> dict[str, float]:
        return fixed if dim == 3 else {"spin1": float(y[3]), "spin2": float(y[3])}

    def objective(like: AnyLikelihood, transform: Array) -> Callable[[Array], float]:
        def f(u: Array) -> float:
            nonlocal evaluations
            evaluations += 1
            y = x_anchor + transform @ u
            # Clip onto the box (flat outside it) so the simplex can slide along a bound.
            y = np.clip(y, lo, hi)
            return -_profile_distance(like, y, spins_at(y))[0]

        return f

    _, dist = _profile_distance(
        binned_likelihood(
            datasets,
            reference_time,
            {**start, "effective_distance": 1.0, **spins_at(x)},
            n_bins=n_bins,
            model=model,
        ),
        x,
        spins_at(x),
    )
    steps = {
        "chirp_mass": scale[0],
        "mass_ratio": scale[1],
        "effective_distance": 0.1 * dist,
        "coalescence_time": scale[2],
        "spin": scale[-1],
    }
    names = (*PARAMETER_NAMES, "spin")[: dim + 1]
    block_index = [0, 1, 3, 4][:dim]
    for r in range(rounds + 1):
        x_anchor = x.copy()
        fid = {
            "chirp_mass": x[0],
            "mass_ratio": x[1],
            "effective_distance": dist,
            "coalescence_time": x[2],
            **spins_at(x),
        }
        like: AnyLikelihood
        if r < rounds:
            like = binned_likelihood(datasets, reference_time, fid, n_bins=n_bins, model=model)

            # Whiten the coordinates with the local curvature, so the simplex moves
            # along the chirp-mass / mass-ratio ridge instead of across it.
            def with_spins(p: Mapping[str, Array], like: AnyLikelihood = like) -> Array:
                if "spin" in p:  # the free equal spins
                    masses = {k: v for k, v in p.items() if k != "spin"}
                    return like.log_likelihood({**masses, "spin1": p["spin"], "spin2": p["spin"]})
                return like.log_likelihood({**p, **{k: np.full(1, v) for k, v in fixed.items()}})

            center = {**fid, "spin": x[3]} if dim == 4 else fid
            for _ in range(2):
                cov = curvature_covariance(with_spins, center, steps, names)
                steps = {k: 0.5 * float(np.sqrt(cov[i, i])) for i, k in enumerate(names)}
                steps["mass_ratio"] = min(steps["mass_ratio"], 0.1)
                # Differences stay inside |chi| < 1, where the model is defined.
                room = max(1e-3, 0.995 - abs(float(x[3]))) if dim == 4 else 0.2
                steps["spin"] = min(steps.get("spin", 0.05), 0.2, room)
            block = cov[np.ix_(block_index, block_index)]
            transform = np.asarray(np.linalg.cholesky(block + np.diag(np.diag(block)) * 1e-9))
            options = {"xatol": 1e-2, "fatol": 1e-3, "maxiter": 100 * dim}
            simplex = np.eye(dim) * 1.0
        else:
            like = exact
            options = {"xatol": 1e-2, "fatol": 1e-4, "maxiter": exact_iterations}
            simplex = np.eye(dim) * 0.3
        init = np.vstack([np.zeros(dim), simplex])
        res = scipy.optimize.minimize(
            objective(like, transform),
            np.zeros(dim),
            method="Nelder-Mead",
            options={**options, "initial_simplex": init},
        )
        x = np.clip(x_anchor + transform @ res.x, lo, hi)
        _, dist = _profile_distance(like, x, spins_at(x))
        if progress is not None:
            progress((r + 1) / (rounds + 1))
    params = {
        "chirp_mass": float(x[0]),
        "mass_ratio": float(x[1]),
        "effective_distance": float(dist),
        "coalescence_time": float(x[2]),
        **spins_at(x),
    }
    arrays = {k: np.array([v]) for k, v in params.items()}
    log_l = float(exact.log_likelihood(arrays)[0])
    snr = float(exact.matched_filter_snr(arrays)[0])
    return Fiducial(params=params, log_likelihood=log_l, snr=snr, evaluations=evaluations)


def curvature_covariance(
    log_like: Callable[[Mapping[str, Array]], Array],
    center: Mapping[str, float],
    steps: Mapping[str, float],
    names: Sequence[str] = PARAMETER_NAMES,
) -> Array:
    """Inverse of the negative Hessian of ``log_like`` at ``center`` (central differences).

    The numerical Fisher matrix at the peak (Cutler & Flanagan 1994, Eq. 2.6
    with the likelihood's own curvature). No direction gets a standard
    deviation larger than four step sizes (flat or non-positive curvature).
    """
    names = tuple(names)
    n = len(names)
    c = np.array([center[k] for k in names], dtype=float)
    h = np.array([steps[k] for k in names], dtype=float)
    points = [c]
    pairs = []
    for i in range(n):
        for j in range(i, n):
            for si, sj in ((1, 1), (1, -1), (-1, 1), (-1, -1)):
                p = c.copy()
                p[i] += si * h[i]
                p[j] += sj * h[j]
                points.append(p)
            pairs.append((i, j))
    pts = np.array(points)
    vals = log_like({k: pts[:, i] for i, k in enumerate(names)})
    hess = np.zeros((n, n))
    for m, (i, j) in enumerate(pairs):
        v = vals[1 + 4 * m : 5 + 4 * m]
        hess[i, j] = hess[j, i] = (v[0] - v[1] - v[2] + v[3]) / (4.0 * h[i] * h[j])
    # Work in units of the steps so that the eigen-decomposition is well scaled.
    fisher = -hess * np.outer(h, h)
    w, v = np.linalg.eigh(0.5 * (fisher + fisher.T))
    w = np.maximum(w, 1.0 / 16.0)  # no direction wider than four steps
    cov_u = (v / w) @ v.T
    return np.asarray(cov_u * np.outer(h, h), dtype=float)
