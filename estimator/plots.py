"""Report figures: posterior corner plot, whitened data, time-frequency map, noise
spectrum and sampler traces.

Each function builds one :class:`matplotlib.figure.Figure` without pyplot (no global
figure state), writes a PNG of ``DPI`` dots per inch to ``path`` and returns it as a
:class:`~pathlib.Path`. Times are in seconds relative to coalescence, frequencies in
Hz; 1-D inputs of one plot must share a length. Colours: the Okabe & Ito (2008)
"Color Universal Design" palette and the ``cividis`` map (Nuñez, Anderton &
Renslow 2018, PLoS ONE 13, e0199239), both readable with colour-vision deficiency.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
from matplotlib.axes import Axes
from matplotlib.axis import Axis
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter, ScalarFormatter
from numpy.typing import NDArray
from scipy import signal

from estimator.errors import InputError

__all__ = [
    "DPI",
    "PALETTE",
    "corner_plot",
    "normalised_energy_map",
    "spectrum_plot",
    "time_frequency_plot",
    "trace_plot",
    "whitened_plot",
]

#: Resolution of every PNG, dots per inch.
DPI = 110
#: Okabe & Ito (2008) colours by role, plus neutral greys of our own.
PALETTE: Mapping[str, str] = {
    "ink": "#1f2933", "muted": "#52606d", "grid": "#e4e7eb", "data": "#8c96a0",
    "model": "#0072b2", "accent": "#d55e00", "truth": "#e69f00", "band": "#56b4e9",
    "burn": "#cbd2d9",
}

Array = NDArray[np.float64]


def _figure(width: float, height: float) -> Figure:
    return Figure(figsize=(width, height), dpi=DPI, facecolor="white")


def _save(fig: Figure, path: str | Path) -> Path:
    out = Path(path)
    fig.savefig(out, dpi=DPI, format="png", facecolor="white", pil_kwargs={"compress_level": 4})
    return out  # the figure is not registered with pyplot: dropping it frees it


def _style(ax: Axes, title: str | None = None) -> None:
    ax.grid(True, color=PALETTE["grid"], linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(labelsize=8, colors=PALETTE["muted"])
    if title is not None:
        ax.set_title(title, fontsize=10, color=PALETTE["ink"], loc="left")
        ax.legend(loc="lower right", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False,
                  ncols=3, borderaxespad=0.2)


def _plain_log_ticks(axis: Axis, low: float, high: float) -> None:
    """Label a log axis at 1-2-5 steps with plain numbers (20, 50, 100...)."""
    decades = 10.0 ** np.arange(np.floor(np.log10(low)), np.ceil(np.log10(high)) + 1.0)
    ticks = (decades[:, None] * np.array([1.0, 2.0, 5.0])[None, :]).ravel()
    axis.set_major_locator(FixedLocator(ticks[(ticks >= low) & (ticks <= high)]))
    axis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    axis.set_minor_formatter(NullFormatter())


def _vectors(where: str, **named: object) -> list[Array]:
    """Check that every array is 1-D, of at least 2 values, and all share one length."""
    arrays = [np.asarray(v, dtype=float) for v in named.values()]
    for name, arr in zip(named, arrays, strict=True):
        if arr.ndim != 1 or arr.size < 2:
            msg = f"{name} has shape {arr.shape}; expected a 1-D array of at least 2 values"
            raise InputError(msg, source=where, field=name)
    sizes = {name: arr.size for name, arr in zip(named, arrays, strict=True)}
    if len(set(sizes.values())) != 1:
        msg = f"array lengths differ {sizes}; pass arrays sampled on one grid"
        raise InputError(msg, source=where)
    return arrays


def _check_band(where: str, f_low: float, f_high: float) -> None:
    if not 0.0 < f_low < f_high:
        msg = f"f_low={f_low} Hz, f_high={f_high} Hz; need 0 < f_low < f_high"
        raise InputError(msg, source=where, field="f_low")


def _window_mask(where: str, t: Array, window: tuple[float, float]) -> NDArray[np.bool_]:
    keep = (t >= window[0]) & (t <= window[1])
    if np.count_nonzero(keep) < 2:
        msg = f"window {window} s holds no samples of times [{t[0]:g}, {t[-1]:g}] s"
        raise InputError(msg, source=where, field="window")
    return keep


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
    data = np.column_stack(_vectors("corner_plot", **{n: samples[n] for n in names}))
    if not np.all(np.isfinite(data)):
        msg = "samples contain NaN or infinite values; drop those samples before plotting"
        raise InputError(msg, source="corner_plot", field="samples")
    flat = [n for n, width in zip(names, np.ptp(data, axis=0), strict=True) if width == 0.0]
    if flat:
        msg = f"parameter(s) {flat} take a single value; a constant cannot be histogrammed"
        raise InputError(msg, source="corner_plot", field="samples")
    side = 1.6 * len(names) + 0.9
    fig = _figure(side, side)
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
    return _save(fig, path)


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
    t, d, m = _vectors("whitened_plot", times=times, whitened_data=whitened_data,
                       whitened_model=whitened_model)
    if band is not None:
        rate = 1.0 / float(np.median(np.diff(t)))
        if not 0.0 < band[0] < band[1] < rate / 2.0:
            msg = f"band {band} Hz must satisfy 0 < f_lo < f_hi < {rate / 2:g} Hz (Nyquist)"
            raise InputError(msg, source="whitened_plot", field="band")
        sos = signal.butter(4, band, btype="bandpass", fs=rate, output="sos")
        d, m = signal.sosfiltfilt(sos, d), signal.sosfiltfilt(sos, m)
    keep = _window_mask("whitened_plot", t, window)
    fig = _figure(7.2, 3.0)
    ax = fig.add_subplot()
    ax.plot(t[keep], d[keep], color=PALETTE["data"], linewidth=0.7, label="whitened data")
    ax.plot(t[keep], m[keep], color=PALETTE["model"], linewidth=1.4, label="model")
    ax.axvline(0.0, color=PALETTE["accent"], linewidth=0.9, linestyle=":", label="coalescence")
    ax.set(xlim=window, xlabel="time from coalescence (s)", ylabel="whitened strain (σ)")
    _style(ax, title)
    fig.subplots_adjust(left=0.09, right=0.985, bottom=0.16, top=0.9)
    return _save(fig, path)


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
    (x,) = _vectors("normalised_energy_map", data=data)
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
    t, d = _vectors("time_frequency_plot", times=times, whitened_data=whitened_data)
    tt, tf = _vectors("time_frequency_plot", track_times=track_times,
                      track_frequencies=track_frequencies)
    _check_band("time_frequency_plot", f_low, f_high)
    f_top = min(f_high, 0.45 * sample_rate)
    fk = np.geomspace(f_low, f_top, 80)
    energy = normalised_energy_map(d, sample_rate, fk, q=q)
    cols = np.flatnonzero(_window_mask("time_frequency_plot", t, window))
    cols = cols[:: max(1, cols.size // 900)]
    shown = energy[:, cols]
    fig = _figure(7.2, 3.4)
    ax = fig.add_subplot()
    mesh = ax.pcolormesh(t[cols], fk, shown, shading="nearest", cmap="cividis", vmin=0.0,
                         vmax=max(10.0, float(np.percentile(shown, 99.9))), rasterized=True)
    on = (tt >= window[0]) & (tt <= window[1]) & (tf >= f_low) & (tf <= f_top)
    ax.plot(tt[on], tf[on], color=PALETTE["accent"], linewidth=1.2, linestyle=(0, (5, 3)),
            label="model frequency track")
    ax.set(yscale="log", xlim=window, ylim=(f_low, f_top), xlabel="time from coalescence (s)",
           ylabel="frequency (Hz)")
    _plain_log_ticks(ax.yaxis, f_low, f_top)
    _style(ax, title)
    ax.grid(False)
    fig.subplots_adjust(left=0.09, right=0.88, bottom=0.14, top=0.91)
    bar = fig.colorbar(mesh, cax=fig.add_axes((0.895, 0.14, 0.018, 0.77)))
    bar.set_label("normalised energy", fontsize=8)
    bar.ax.tick_params(labelsize=7)
    return _save(fig, path)


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
    f, p = _vectors("spectrum_plot", frequencies=frequencies, psd=psd)
    fd, ad = _vectors("spectrum_plot", data_frequencies=data_frequencies, data_asd=data_asd)
    _check_band("spectrum_plot", f_low, f_high)
    model_ok = (f > 0.0) & (p > 0.0) & np.isfinite(p)
    data_ok = (fd > 0.0) & (ad > 0.0) & np.isfinite(ad)
    if np.count_nonzero(model_ok) < 2 or np.count_nonzero(data_ok) < 2:
        msg = "fewer than 2 positive, finite spectrum values at f > 0; check the PSD and data"
        raise InputError(msg, source="spectrum_plot", field="psd")
    fig = _figure(7.2, 3.4)
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
    _plain_log_ticks(ax.xaxis, x_low, x_high)
    _style(ax, "Noise spectrum")
    fig.subplots_adjust(left=0.11, right=0.985, bottom=0.14, top=0.91)
    return _save(fig, path)


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
    stride = max(1, n_steps // 500)
    steps = np.arange(0, n_steps, stride)
    height = 1.35 * n_dim + 0.6
    fig = _figure(7.2, height)
    axes = fig.subplots(n_dim, 1, sharex=True, squeeze=False)[:, 0]
    for i, (ax, name) in enumerate(zip(axes, names, strict=True)):
        y = c[::stride, :, i]
        lines = np.stack([np.broadcast_to(steps[:, None], y.shape), y], axis=-1)
        ax.add_collection(LineCollection(list(lines.transpose(1, 0, 2)),
                                         colors=PALETTE["model"], linewidths=0.5, alpha=0.25))
        ax.plot(steps, np.median(y, axis=1), color=PALETTE["ink"], linewidth=0.9)
        if burn_in > 0:
            ax.axvspan(0, burn_in, color=PALETTE["burn"], alpha=0.5, linewidth=0)
            ax.axvline(burn_in, color=PALETTE["accent"], linewidth=1.0, linestyle="--")
        low, high = float(y.min()), float(y.max())
        pad = 0.05 * (high - low) or 0.5 * abs(low) or 1.0
        ax.set(xlim=(0, n_steps - 1), ylim=(low - pad, high + pad))
        ax.set_ylabel(labels.get(name, name), fontsize=8)
        ax.yaxis.set_major_formatter(ScalarFormatter(useOffset=False))
        _style(ax)
    if burn_in > 0:
        axes[0].annotate("burn-in (discarded)", xy=(burn_in, 1.0),
                         xycoords=("data", "axes fraction"), xytext=(-4, -10),
                         textcoords="offset points", ha="right", fontsize=7,
                         color=PALETTE["accent"])
    axes[-1].set_xlabel(f"step ({n_walkers} walkers; dark line: median across walkers)")
    fig.align_ylabels(axes)
    fig.subplots_adjust(left=0.12, right=0.985, bottom=0.45 / height, top=1 - 0.15 / height,
                        hspace=0.12)
    return _save(fig, path)
