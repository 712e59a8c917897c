"""What every report figure shares: resolution, colours, axes style, PNG output and
input checks.

Figures are built without pyplot (no global figure state). Colours: the Okabe & Ito
(2008) "Color Universal Design" palette, readable with colour-vision deficiency.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

import numpy as np
from matplotlib.axes import Axes
from matplotlib.axis import Axis
from matplotlib.figure import Figure
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter
from numpy.typing import NDArray

from estimator.errors import InputError

__all__ = [
    "DPI",
    "PALETTE",
    "as_vectors",
    "check_band",
    "new_figure",
    "plain_log_ticks",
    "save_png",
    "style_axes",
    "window_mask",
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


def new_figure(width: float, height: float) -> Figure:
    """A white figure of ``width`` x ``height`` inches at ``DPI``, not known to pyplot."""
    return Figure(figsize=(width, height), dpi=DPI, facecolor="white")


def save_png(fig: Figure, path: str | Path) -> Path:
    """Write ``fig`` as a PNG of ``DPI`` dots per inch to ``path`` and return the path."""
    out = Path(path)
    fig.savefig(out, dpi=DPI, format="png", facecolor="white", pil_kwargs={"compress_level": 4})
    return out  # the figure is not registered with pyplot: dropping it frees it


def style_axes(ax: Axes, title: str | None = None) -> None:
    """Light grid, no top or right spine, small muted ticks; a title puts the legend above."""
    ax.grid(True, color=PALETTE["grid"], linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(labelsize=8, colors=PALETTE["muted"])
    if title is not None:
        ax.set_title(title, fontsize=10, color=PALETTE["ink"], loc="left")
        ax.legend(loc="lower right", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False,
                  ncols=3, borderaxespad=0.2)


def plain_log_ticks(axis: Axis, low: float, high: float) -> None:
    """Label a log axis at 1-2-5 steps with plain numbers (20, 50, 100...)."""
    decades = 10.0 ** np.arange(np.floor(np.log10(low)), np.ceil(np.log10(high)) + 1.0)
    ticks = (decades[:, None] * np.array([1.0, 2.0, 5.0])[None, :]).ravel()
    axis.set_major_locator(FixedLocator(ticks[(ticks >= low) & (ticks <= high)]))
    axis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    axis.set_minor_formatter(NullFormatter())


def as_vectors(where: str, **named: object) -> list[Array]:
    """Check that every array is 1-D, of at least 2 values, and all share one length.

    ``where`` names the calling plot in the :class:`~estimator.errors.InputError`.
    """
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


def check_band(where: str, f_low: float, f_high: float) -> None:
    """Reject a frequency band unless ``0 < f_low < f_high`` (Hz)."""
    if not 0.0 < f_low < f_high:
        msg = f"f_low={f_low} Hz, f_high={f_high} Hz; need 0 < f_low < f_high"
        raise InputError(msg, source=where, field="f_low")


def window_mask(where: str, t: Array, window: tuple[float, float]) -> NDArray[np.bool_]:
    """Mask of the times ``t`` inside ``window`` (s); it must hold at least 2 samples."""
    keep = (t >= window[0]) & (t <= window[1])
    if np.count_nonzero(keep) < 2:
        msg = f"window {window} s holds no samples of times [{t[0]:g}, {t[-1]:g}] s"
        raise InputError(msg, source=where, field="window")
    return keep
