"""Arrays the report's pictures are drawn from (the figures themselves: :mod:`estimator.plots`)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .analysis import AnalysisResult
from .conditioning import whiten
from .models import model_strain
from .spectrum import welch_psd
from .waveform import isco_frequency, symmetric_mass_ratio, time_to_coalescence

__all__ = ["PlotData", "plot_data"]

Array = NDArray[np.float64]


@dataclass(frozen=True)
class PlotData:
    """Inputs of the report's figures.

    ``times`` are seconds relative to the maximum-likelihood coalescence time.
    """

    times: Array
    whitened_data: Array
    whitened_model: Array
    sample_rate: float
    track_times: Array
    track_frequencies: Array
    psd_frequencies: Array
    psd: Array
    data_frequencies: Array
    data_asd: Array
    coalescence_time: float


def plot_data(result: AnalysisResult, *, span: tuple[float, float] | None = None) -> PlotData:
    """Whitened data and best-fit model, frequency track, and spectra.

    The model is the maximum-likelihood waveform at the phase that maximises
    its overlap with the data (``arg z``, the phase the marginalised
    likelihood integrates over). ``span`` (s around coalescence) defaults to
    the last part of the signal, at most 8 s.
    """
    data = result.data
    p = result.fiducial.params
    tc_rel = p["coalescence_time"] + result.settings.trigger_time - data.epoch
    arrays = {k: np.array([v]) for k, v in p.items()}
    z, _ = result.likelihood.overlaps(arrays)
    phase = float(np.angle(z[0, 0]))
    model = model_strain(
        result.model,
        data.frequencies,
        p["chirp_mass"],
        p["mass_ratio"],
        p["effective_distance"],
        tc_rel,
        phase,
    )
    times = np.arange(data.n_samples) / data.sample_rate - tc_rel
    white_data = whiten(data, data.strain)
    white_model = whiten(data, model)
    f_end = min(
        float(isco_frequency(p["chirp_mass"] * symmetric_mass_ratio(p["mass_ratio"]) ** -0.6)),
        data.f_high,
    )
    track_f = np.geomspace(data.f_low, f_end, 200)
    track_t = -time_to_coalescence(track_f, p["chirp_mass"], p["mass_ratio"])
    if span is None:
        span = (max(-8.0, float(track_t[0]) - 0.5, float(times[0])), 0.25)
    keep = (times >= span[0]) & (times <= span[1])
    welch = welch_psd(result.segment)
    band = (result.spectrum.frequencies >= data.f_low / 2) & (
        result.spectrum.frequencies <= data.f_high * 1.2
    )
    return PlotData(
        times=times[keep],
        whitened_data=white_data[keep],
        whitened_model=white_model[keep],
        sample_rate=data.sample_rate,
        track_times=track_t,
        track_frequencies=track_f,
        psd_frequencies=result.spectrum.frequencies[band],
        psd=result.spectrum.psd[band],
        data_frequencies=welch.frequencies[1:],
        data_asd=np.sqrt(welch.psd[1:]),
        coalescence_time=p["coalescence_time"] + result.settings.trigger_time,
    )
