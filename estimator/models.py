"""The waveform models an analysis can use, by name, and the rule that picks one.

* ``taylorf2``: the stationary-phase inspiral of :mod:`estimator.waveform`, aligned
  spins included, ending at the Schwarzschild ISCO frequency of the total mass.
* ``merger``: the same inspiral continued smoothly through merger and ringdown
  (:mod:`estimator.merger`).

``auto`` (the default) takes ``merger`` where the ISCO frequency of the total mass
lies inside the analysis band where the detector is sensitive (there the abrupt
end of TaylorF2 is in the data and the data would locate that artificial edge)
and ``taylorf2`` elsewhere, where the two agree to within 1% of the SNR^2
(common practice: the inspiral-only model suffices when the merger lies above
the sensitive band).

Both are written as ``h(f) = A f^{-7/6} S(f) exp(-i (Psi(f) + 2 pi f t_c - phi_c - pi/4))``
with the Newtonian amplitude ``A`` (Cutler & Flanagan 1994, PRD 49, 2658, Eq. 3.4),
an amplitude factor ``S`` (a step at the ISCO for ``taylorf2``) and the phase ``Psi``.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError
from .waveform import (
    MPC_SECONDS,
    MSUN_SECONDS,
    isco_frequency,
    symmetric_mass_ratio,
    taylorf2_phase,
)

__all__ = [
    "MERGER_SHARE",
    "MODEL_CHOICES",
    "MODEL_DESCRIPTIONS",
    "model_parts",
    "model_strain",
    "model_top",
    "resolve_model",
]

Array = NDArray[np.float64]

#: ``auto`` takes the merger model when it adds more than this share to TaylorF2's SNR^2.
MERGER_SHARE = 0.01
#: What ``--model`` accepts.
MODEL_CHOICES = ("auto", "merger", "taylorf2")
#: One line per model, for the report and summary.json.
MODEL_DESCRIPTIONS = {
    "taylorf2": "TaylorF2 inspiral (3.5PN point-particle phase, aligned-spin terms to 3.5PN, "
    "Newtonian amplitude), ending at the Schwarzschild ISCO frequency",
    "merger": "TaylorF2 inspiral continued smoothly through merger and ringdown "
    "(amplitude of Ajith et al. 2008 with spin-scaled transition frequencies; "
    "phase continuation and ringdown phase built by chirpcast, not fitted to "
    "numerical relativity)",
}


def resolve_model(
    requested: str,
    chirp_mass: float,
    mass_ratio: float,
    frequencies: ArrayLike,
    psd: ArrayLike,
) -> str:
    """The model an analysis uses: ``requested``, or for ``auto`` the rule above.

    "The ISCO lies in the band" is made quantitative: ``merger`` when the merger
    model's optimal SNR^2 on the band exceeds TaylorF2's by more than
    :data:`MERGER_SHARE` (the part the abrupt end would misrepresent); the SNR^2
    is ``4 df sum |h|^2 / S`` (Cutler & Flanagan 1994, Eq. 2.4), compared as shares.
    """
    if requested not in MODEL_CHOICES:
        raise InputError(
            f"model {requested!r} is not one of {', '.join(MODEL_CHOICES)}", field="model"
        )
    if requested != "auto":
        return requested
    f = np.asarray(frequencies, dtype=float)
    weight = f ** (-7.0 / 3.0) / np.asarray(psd, dtype=float)
    power = {
        name: float(np.sum(model_parts(name, f, chirp_mass, mass_ratio)[0] ** 2 * weight))
        for name in ("taylorf2", "merger")
    }
    return "merger" if power["merger"] > (1.0 + MERGER_SHARE) * power["taylorf2"] else "taylorf2"


def _spins(spin1: ArrayLike | None, spin2: ArrayLike | None) -> tuple[Array, Array]:
    return (
        np.asarray(0.0 if spin1 is None else spin1, dtype=float),
        np.asarray(0.0 if spin2 is None else spin2, dtype=float),
    )


def model_parts(
    model: str,
    frequencies: ArrayLike,
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    spin1: ArrayLike | None = None,
    spin2: ArrayLike | None = None,
) -> tuple[Array, Array]:
    """Amplitude factor ``S`` and phase ``Psi``, each ``(n, nf)`` (``(nf,)`` for scalars)."""
    s1, s2 = _spins(spin1, spin2)
    if model == "merger":
        from .merger import merger_parts

        return merger_parts(frequencies, chirp_mass, mass_ratio, s1, s2)
    if model != "taylorf2":
        raise InputError(f"unknown model {model!r}", field="model")
    f = np.asarray(frequencies, dtype=float)
    psi = taylorf2_phase(f, chirp_mass, mass_ratio, spin1=s1, spin2=s2)
    eta = symmetric_mass_ratio(mass_ratio)
    f_isco = isco_frequency(np.asarray(chirp_mass, dtype=float) * eta ** (-0.6))
    if psi.ndim == 1:
        return np.asarray(f <= f_isco, dtype=float), psi
    return np.asarray(f[None, :] <= np.atleast_1d(f_isco)[:, None], dtype=float), psi


def model_top(
    model: str,
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    spin1: ArrayLike | None = None,
    spin2: ArrayLike | None = None,
) -> Array:
    """Frequency above which the model has (next to) no amplitude, Hz."""
    if model == "merger":
        from .merger import model_top_frequency

        s1, s2 = _spins(spin1, spin2)
        return np.asarray(model_top_frequency(chirp_mass, mass_ratio, s1, s2), dtype=float)
    eta = symmetric_mass_ratio(mass_ratio)
    return np.asarray(isco_frequency(np.asarray(chirp_mass, dtype=float) * eta ** (-0.6)))


def model_strain(
    model: str,
    frequencies: ArrayLike,
    chirp_mass: ArrayLike,
    mass_ratio: ArrayLike,
    effective_distance: ArrayLike,
    coalescence_time: ArrayLike = 0.0,
    phase: ArrayLike = 0.0,
    spin1: ArrayLike | None = None,
    spin2: ArrayLike | None = None,
) -> NDArray[np.complex128]:
    """``h(f)`` of ``model`` (module docstring); shapes as :func:`estimator.waveform.taylorf2`."""
    f = np.asarray(frequencies, dtype=float)
    params = [chirp_mass, mass_ratio, effective_distance, coalescence_time, phase,
              *_spins(spin1, spin2)]  # fmt: skip
    scalar = all(np.ndim(p) == 0 for p in params)
    mc, q, dist, tc, phi, s1, s2 = np.broadcast_arrays(
        *(np.atleast_1d(np.asarray(p, dtype=float)) for p in params)
    )
    factor, psi = model_parts(model, f, mc, q, s1, s2)
    factor, psi = np.atleast_2d(factor), np.atleast_2d(psi)
    psi = psi + 2.0 * np.pi * tc[:, None] * f[None, :] - phi[:, None] - np.pi / 4.0
    amp0 = (
        np.sqrt(5.0 / 24.0)
        * np.pi ** (-2.0 / 3.0)
        * (mc * MSUN_SECONDS) ** (5.0 / 6.0)
        / (dist * MPC_SECONDS)
    )
    h = np.asarray(amp0[:, None] * f[None, :] ** (-7.0 / 6.0) * factor * np.exp(-1j * psi))
    return h[0] if scalar else h
