"""The settings of one analysis."""

from __future__ import annotations

from dataclasses import asdict, dataclass

__all__ = ["AnalysisSettings", "settings_dict"]


@dataclass(frozen=True)
class AnalysisSettings:
    """Everything that controls one analysis (all of it is stored with the result).

    Masses are detector-frame solar masses, distances Mpc, times GPS seconds,
    frequencies Hz. ``f_high=None`` takes the largest usable frequency;
    ``seed=None`` draws one (and records it).
    """

    trigger_time: float
    f_low: float = 20.0
    f_high: float | None = None
    chirp_mass_guess: float | None = None
    chirp_mass_range: tuple[float, float] = (0.4, 80.0)
    mass_ratio_range: tuple[float, float] = (0.1, 1.0)
    component_mass_range: tuple[float, float] = (0.5, 150.0)
    distance_max: float = 10_000.0
    #: Largest aligned-spin magnitude (uniform prior on each spin); 0 fixes spins at zero.
    spin_max: float = 0.99
    #: Waveform model: "auto", "merger" or "taylorf2" (see estimator.models).
    model: str = "auto"
    #: Gate loud short glitches away from the signal and analyse the gated data.
    gating: bool = True
    time_window: float = 0.1
    seed: int | None = None
    #: Walkers of the ensemble; None takes 32 with the spins fixed and 64 when they are
    #: sampled (measured: fewer walkers mix the 6-parameter posterior too slowly).
    walkers: int | None = None
    max_steps: int = 20_000
    target_effective_samples: float = 2000.0
    n_bins: int = 96
    likelihood_tolerance: float = 0.05
    check_draws: int = 100
    max_refinements: int = 2
    taper_duration: float = 0.5


def settings_dict(settings: AnalysisSettings) -> dict[str, object]:
    """Settings as plain JSON-ready values."""
    return {k: (list(v) if isinstance(v, tuple) else v) for k, v in asdict(settings).items()}
