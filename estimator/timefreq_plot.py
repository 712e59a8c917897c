"""The time-frequency figure: constant-Q energy of the whitened data with the model's
frequency track.

Colour map: ``cividis`` (Nuñez, Anderton & Renslow 2018, PLoS ONE 13, e0199239),
readable with colour-vision deficiency. Both functions are re-exported by
:mod:`estimator.plots`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from estimator.errors import InputError
from estimator.plot_base import (
    PALETTE,
    as_vectors,
    check_band,
    new_figure,
    plain_log_ticks,
    save_png,
    style_axes,
    window_mask,
)

__all__ = ["normalised_energy_map", "time_frequency_plot"]

Array = NDArray[np.float64]


def normalised_energy_map(data: Array, sample_rate: float, frequencies: Array, *,
                          q: float) -> Array:
    """Constant-Q Gabor (Morlet) energy of a whitened series, normalised per frequency.

    Row ``k`` is ``|w_k(t)|^2``, ``w_k`` being the data filtered by the Gaussian
    ``exp(-(f - f_k)^2 / (2 s_k^2))`` on positive frequencies, ``s_k = f_k / q``:
    the FFT form of the continuous wavelet transform (Torrence & Compo 1998, Bull.
    Am. Meteorol. Soc. 79, 61, Eqs. 3-4; Gabor 1946, J. IEE 93, 429). For white
    Gaussian noise ``|w_k|^2`` is exponentially distributed, whose median is
    ``ln 2`` times its mean, so dividing by ``median / ln 2`` gives noise mean 1.

    Parameters
    ----------
    data
        Shape ``(n,)``, whitened series.
    sample_rate
        Hz.
    frequencies
        Shape ``(m,)``, centre frequencies, between 0 and Nyquist.
    q
        Centre frequency over the Gaussian's standard deviation, > 0.

    Returns
    -------
    Shape ``(m, n)``, normalised energy (dimensionless).
    """
    (x,) = as_vectors("normalised_energy_map", data=data)
    fk = np.atleast_1d(np.asarray(frequencies, dtype=float))
    if q <= 0.0 or np.any(fk <= 0.0) or np.any(fk >= sample_rate / 2.0):
        msg = f"need q > 0 (got {q}) and 0 < frequencies < {sample_rate / 2:g} Hz (Nyquist)"
        raise InputError(msg, source="normalised_energy_map", field="frequencies")
    f = np.fft.fftfreq(x.size, d=1.0 / sample_rate)
    kernel = np.exp(-0.5 * ((f[None, :] - fk[:, None]) * (q / fk[:, None])) ** 2)
    kernel *= 2.0 * (f > 0.0)
    energy = np.abs(np.fft.ifft(np.fft.fft(x - x.mean())[None, :] * kernel, axis=1)) ** 2
    scale = np.median(energy, axis=1, keepdims=True) / np.log(2.0)
    return np.asarray(energy / np.where(scale > 0.0, scale, 1.0), dtype=float)


def time_frequency_plot(
    times: Array, whitened_data: Array, sample_rate: float, track_times: Array,
    track_frequencies: Array, path: str | Path, *, f_low: float, f_high: float,
    window: tuple[float, float] = (-2.0, 0.1), q: float = 8.0,
    title: str = "Time-frequency energy of the whitened data",
) -> Path:
    """Constant-Q energy map of the whitened data with the model's frequency track.

    Parameters
    ----------
    times, whitened_data
        Shape ``(n,)``.
    sample_rate
        Hz.
    track_times, track_frequencies
        Shape ``(k,)``: the model's frequency against time, e.g. the
        stationary-phase time ``t(f)`` of the best-fit template.
    path
        Output PNG.
    f_low, f_high
        Frequency range shown on a log axis (capped at 0.45 x sample_rate).
    window
        Time range shown.
    q
        Quality factor of :func:`normalised_energy_map`.
    title
        Figure title.
    """
    t, d = as_vectors("time_frequency_plot", times=times, whitened_data=whitened_data)
    tt, tf = as_vectors("time_frequency_plot", track_times=track_times,
                        track_frequencies=track_frequencies)
    check_band("time_frequency_plot", f_low, f_high)
    f_top = min(f_high, 0.45 * sample_rate)
    fk = np.geomspace(f_low, f_top, 80)
    energy = normalised_energy_map(d, sample_rate, fk, q=q)
    cols = np.flatnonzero(window_mask("time_frequency_plot", t, window))
    cols = cols[:: max(1, cols.size // 900)]
    shown = energy[:, cols]
    fig = new_figure(7.2, 3.4)
    ax = fig.add_subplot()
    mesh = ax.pcolormesh(t[cols], fk, shown, shading="nearest", cmap="cividis", vmin=0.0,
                         vmax=max(10.0, float(np.percentile(shown, 99.9))), rasterized=True)
    on = (tt >= window[0]) & (tt <= window[1]) & (tf >= f_low) & (tf <= f_top)
    ax.plot(tt[on], tf[on], color=PALETTE["accent"], linewidth=1.2, linestyle=(0, (5, 3)),
            label="model frequency track")
    ax.set(yscale="log", xlim=window, ylim=(f_low, f_top), xlabel="time from coalescence (s)",
           ylabel="frequency (Hz)")
    plain_log_ticks(ax.yaxis, f_low, f_top)
    style_axes(ax, title)
    ax.grid(False)
    fig.subplots_adjust(left=0.09, right=0.88, bottom=0.14, top=0.91)
    bar = fig.colorbar(mesh, cax=fig.add_axes((0.895, 0.14, 0.018, 0.77)))
    bar.set_label("normalised energy", fontsize=8)
    bar.ax.tick_params(labelsize=7)
    return save_png(fig, path)
