"""Report figures: posterior corner plot, whitened data, time-frequency map, noise
spectrum and sampler traces.

Each function builds one :class:`matplotlib.figure.Figure` without pyplot (no global
figure state), writes a PNG of ``DPI`` dots per inch to ``path`` and returns it as a
:class:`~pathlib.Path`. Times are in seconds relative to coalescence, frequencies in
Hz; 1-D inputs of one plot must share a length. Colours: the Okabe & Ito (2008)
"Color Universal Design" palette and the ``cividis`` map (Nuñez, Anderton &
Renslow 2018, PLoS ONE 13, e0199239), both readable with colour-vision deficiency.
The time-frequency map lives in :mod:`estimator.timefreq_plot`, the shared style and
checks in :mod:`estimator.plot_base`; ``normalised_energy_map``,
``time_frequency_plot``, ``DPI`` and ``PALETTE`` are re-exported here.
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
from matplotlib.collections import LineCollection
from matplotlib.ticker import ScalarFormatter
from numpy.typing import NDArray
from scipy import signal

from estimator.errors import InputError
from estimator.plot_base import (
    DPI,
    PALETTE,
    as_vectors,
    check_band,
    new_figure,
    plain_log_ticks,
    save_png,
    style_axes,
    window_mask,
)
from estimator.timefreq_plot import normalised_energy_map, time_frequency_plot

__all__ = [
    "DPI",
    "MAX_TRACE_WALKERS",
    "PALETTE",
    "corner_plot",
    "normalised_energy_map",
    "spectrum_plot",
    "time_frequency_plot",
    "trace_plot",
    "whitened_plot",
]

Array = NDArray[np.float64]

#: The trace plot draws at most this many walkers' lines (its median uses every walker).
MAX_TRACE_WALKERS = 32


def corner_plot(
    samples: Mapping[str, Array], path: str | Path, *, labels: Mapping[str, str],
    truths: Mapping[str, float] | None = None, quantiles: Sequence[float] = (0.05, 0.5, 0.95),
) -> Path:
    """Corner plot: 1-D histograms with quantile lines, 2-D 50% and 90% regions.

    Parameters
    ----------
    samples
        Name -> samples, shape ``(n,)``, in display units (chirp mass in Msun,
        coalescence time relative to the trigger in ms...), plotted in mapping order.
    path
        Output PNG.
    labels
        Name -> axis label with unit; a name without one is labelled by itself.
    truths
        Name -> value to mark (an injection, say), or ``None``.
    quantiles
        Quantiles drawn as dashed lines on the 1-D histograms.
    """
    import corner  # here, not at the top: it imports pyplot, which the other plots avoid

    names = list(samples)
    if len(names) < 2:
        msg = f"got {len(names)} parameter(s); a corner plot needs at least 2"
        raise InputError(msg, source="corner_plot", field="samples")
    data = np.column_stack(as_vectors("corner_plot", **{n: samples[n] for n in names}))
    if not np.all(np.isfinite(data)):
        msg = "samples contain NaN or infinite values; drop those samples before plotting"
        raise InputError(msg, source="corner_plot", field="samples")
    flat = [n for n, width in zip(names, np.ptp(data, axis=0), strict=True) if width == 0.0]
    if flat:
        msg = f"parameter(s) {flat} take a single value; a constant cannot be histogrammed"
        raise InputError(msg, source="corner_plot", field="samples")
    side = 1.6 * len(names) + 0.9
    fig = new_figure(side, side)
    colour = PALETTE["model"]
    corner.corner(
        data, fig=fig, bins=30, smooth=0.9, levels=(0.5, 0.9), quantiles=list(quantiles),
        labels=[labels.get(n, n) for n in names],
        truths=None if truths is None else [truths.get(n) for n in names],
        truth_color=PALETTE["truth"], color=colour, plot_datapoints=False,
        fill_contours=True, max_n_ticks=3, use_math_text=True,
        label_kwargs={"fontsize": 9, "color": PALETTE["ink"]},
        hist_kwargs={"color": colour, "linewidth": 1.1}, contour_kwargs={"linewidths": 0.9},
    )
    for ax in fig.axes:
        ax.tick_params(labelsize=7, colors=PALETTE["muted"])
        for axis in (ax.xaxis, ax.yaxis):  # an offset text would collide with the labels
            formatter = axis.get_major_formatter()
            if isinstance(formatter, ScalarFormatter):
                formatter.set_useOffset(False)
    fig.subplots_adjust(left=0.14, bottom=0.14, right=0.98, top=0.98, wspace=0.06, hspace=0.06)
    return save_png(fig, path)


def whitened_plot(
    times: Array, whitened_data: Array, whitened_model: Array, path: str | Path, *,
    window: tuple[float, float] = (-0.5, 0.1), title: str = "Whitened data and best-fit model",
    band: tuple[float, float] | None = None,
) -> Path:
    """Whitened data with the whitened model overlaid, near coalescence.

    Parameters
    ----------
    times
        Shape ``(n,)``, uniformly sampled.
    whitened_data, whitened_model
        Shape ``(n,)``, in units of the noise standard deviation.
    path
        Output PNG.
    window
        Time range shown.
    title
        Figure title.
    band
        ``(f_lo, f_hi)``: if given, both series are band-passed by a zero-phase
        4th-order Butterworth filter (Butterworth 1930, Wireless Engineer 7, 536;
        forward-backward filtering, Gustafsson 1996, IEEE Trans. Signal Process.
        44, 988) so that out-of-band noise does not hide the signal.
    """
    t, d, m = as_vectors("whitened_plot", times=times, whitened_data=whitened_data,
                         whitened_model=whitened_model)
    if band is not None:
        rate = 1.0 / float(np.median(np.diff(t)))
        if not 0.0 < band[0] < band[1] < rate / 2.0:
            msg = f"band {band} Hz must satisfy 0 < f_lo < f_hi < {rate / 2:g} Hz (Nyquist)"
            raise InputError(msg, source="whitened_plot", field="band")
        sos = signal.butter(4, band, btype="bandpass", fs=rate, output="sos")
        d, m = signal.sosfiltfilt(sos, d), signal.sosfiltfilt(sos, m)
    keep = window_mask("whitened_plot", t, window)
    fig = new_figure(7.2, 3.0)
    ax = fig.add_subplot()
    ax.plot(t[keep], d[keep], color=PALETTE["data"], linewidth=0.7, label="whitened data")
    ax.plot(t[keep], m[keep], color=PALETTE["model"], linewidth=1.4, label="model")
    ax.axvline(0.0, color=PALETTE["accent"], linewidth=0.9, linestyle=":", label="coalescence")
    ax.set(xlim=window, xlabel="time from coalescence (s)", ylabel="whitened strain (σ)")
    style_axes(ax, title)
    fig.subplots_adjust(left=0.09, right=0.985, bottom=0.16, top=0.9)
    return save_png(fig, path)


def spectrum_plot(
    frequencies: Array, psd: Array, data_frequencies: Array, data_asd: Array, path: str | Path,
    *, f_low: float, f_high: float,
) -> Path:
    """Noise amplitude spectral density ``sqrt(PSD)`` and the data's ASD, log-log.

    Parameters
    ----------
    frequencies, psd
        Shape ``(m,)``: the noise model, one-sided PSD in 1/Hz.
    data_frequencies, data_asd
        Shape ``(k,)``: the analysed data's ASD in 1/sqrt(Hz).
    path
        Output PNG.
    f_low, f_high
        Analysis band (shaded).
    """
    f, p = as_vectors("spectrum_plot", frequencies=frequencies, psd=psd)
    fd, ad = as_vectors("spectrum_plot", data_frequencies=data_frequencies, data_asd=data_asd)
    check_band("spectrum_plot", f_low, f_high)
    model_ok = (f > 0.0) & (p > 0.0) & np.isfinite(p)
    data_ok = (fd > 0.0) & (ad > 0.0) & np.isfinite(ad)
    if np.count_nonzero(model_ok) < 2 or np.count_nonzero(data_ok) < 2:
        msg = "fewer than 2 positive, finite spectrum values at f > 0; check the PSD and data"
        raise InputError(msg, source="spectrum_plot", field="psd")
    fig = new_figure(7.2, 3.4)
    ax = fig.add_subplot()
    ax.axvspan(f_low, f_high, color=PALETTE["band"], alpha=0.14, linewidth=0,
               label="analysis band")
    ax.loglog(fd[data_ok], ad[data_ok], color=PALETTE["data"], linewidth=0.7, label="data ASD")
    ax.loglog(f[model_ok], np.sqrt(p[model_ok]), color=PALETTE["model"], linewidth=1.5,
              label="noise model √PSD")
    values = np.concatenate([np.sqrt(p[model_ok & (f >= f_low) & (f <= f_high)]),
                             ad[data_ok & (fd >= f_low) & (fd <= f_high)]])
    if values.size:
        ax.set_ylim(values.min() / 3.0, values.max() * 10.0)
    x_low = max(f_low / 2.0, min(f[model_ok].min(), fd[data_ok].min()))
    x_high = max(f[model_ok].max(), fd[data_ok].max())
    ax.set(xlim=(x_low, x_high), xlabel="frequency (Hz)", ylabel="ASD (1/√Hz)")
    plain_log_ticks(ax.xaxis, x_low, x_high)
    style_axes(ax, "Noise spectrum")
    fig.subplots_adjust(left=0.11, right=0.985, bottom=0.14, top=0.91)
    return save_png(fig, path)


def trace_plot(
    chain: Array, names: Sequence[str], path: str | Path, *, labels: Mapping[str, str],
    burn_in: int,
) -> Path:
    """Walker traces per parameter, the discarded burn-in shaded.

    Parameters
    ----------
    chain
        Shape ``(n_steps, n_walkers, n_dim)``, the full chain including burn-in.
    names
        ``n_dim`` parameter names in chain order.
    path
        Output PNG.
    labels
        Name -> axis label with unit.
    burn_in
        Initial steps discarded, ``0 <= burn_in <= n_steps``.
    """
    c = np.asarray(chain, dtype=float)
    if c.ndim != 3 or c.shape[2] != len(names) or c.shape[0] < 2:
        msg = (f"chain has shape {c.shape}; expected (n_steps >= 2, n_walkers, "
               f"{len(names)}) to match the {len(names)} names")
        raise InputError(msg, source="trace_plot", field="chain")
    n_steps, n_walkers, n_dim = c.shape
    if not 0 <= burn_in <= n_steps:
        msg = f"burn_in={burn_in} is outside 0..{n_steps}; it counts steps of the chain"
        raise InputError(msg, source="trace_plot", field="burn_in")
    # At most ~300 points per line and 32 drawn walkers (evenly picked; the median
    # line uses all of them): more lines add ink and drawing time, not information.
    stride = max(1, n_steps // 300)
    steps = np.arange(0, n_steps, stride)
    shown = np.unique(np.linspace(0, n_walkers - 1, min(n_walkers, MAX_TRACE_WALKERS)).round())
    shown = shown.astype(np.intp)
    height = 1.35 * n_dim + 0.6
    fig = new_figure(7.2, height)
    axes = fig.subplots(n_dim, 1, sharex=True, squeeze=False)[:, 0]
    for i, (ax, name) in enumerate(zip(axes, names, strict=True)):
        y = c[::stride, :, i]
        drawn = y[:, shown]
        lines = np.stack([np.broadcast_to(steps[:, None], drawn.shape), drawn], axis=-1)
        ax.add_collection(LineCollection(list(lines.transpose(1, 0, 2)),
                                         colors=PALETTE["model"], linewidths=0.5, alpha=0.25))
        ax.plot(steps, np.median(y, axis=1), color=PALETTE["ink"], linewidth=0.9)
        if burn_in > 0:
            ax.axvspan(0, burn_in, color=PALETTE["burn"], alpha=0.5, linewidth=0)
            ax.axvline(burn_in, color=PALETTE["accent"], linewidth=1.0, linestyle="--")
        low, high = float(y.min()), float(y.max())
        pad = 0.05 * (high - low) or 0.5 * abs(low) or 1.0
        ax.set(xlim=(0, n_steps - 1), ylim=(low - pad, high + pad))
        # Long labels wrap onto lines of ~18 characters, so neighbouring panels' labels
        # (each panel is 1.35 in tall) neither overlap nor run off the figure.
        ax.set_ylabel(textwrap.fill(labels.get(name, name), 18), fontsize=7.5)
        ax.yaxis.set_major_formatter(ScalarFormatter(useOffset=False))
        style_axes(ax)
    if burn_in > 0:
        axes[0].annotate("burn-in (discarded)", xy=(burn_in, 1.0),
                         xycoords=("data", "axes fraction"), xytext=(4, -9),
                         textcoords="offset points", ha="left", fontsize=7,
                         color=PALETTE["accent"])
    drawn_text = (f"{n_walkers} walkers" if shown.size == n_walkers
                  else f"{shown.size} of {n_walkers} walkers drawn")
    axes[-1].set_xlabel(f"step ({drawn_text}; dark line: median across all walkers)")
    fig.align_ylabels(axes)
    fig.subplots_adjust(left=0.15, right=0.985, bottom=0.45 / height, top=1 - 0.15 / height,
                        hspace=0.12)
    return save_png(fig, path)
