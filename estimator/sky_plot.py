"""The sky-map figure: an all-sky Mollweide view of a :class:`~estimator.skymap.SkyMap`.

Mollweide's equal-area projection (Snyder 1987, Map Projections - A Working
Manual, USGS Prof. Paper 1395, section 31) as drawn by matplotlib. Right
ascension increases to the left, as on the sky seen from inside the celestial
sphere (common practice in astronomy); the centre of the map is 12h. Colour map:
reversed ``magma`` (Smith & van der Walt 2015, matplotlib's perceptually
uniform maps), so empty sky stays pale. The 50% and 90% contours enclose the
highest-density credible regions of the map.
"""

from __future__ import annotations

from pathlib import Path
from typing import Literal

import astropy_healpix as ahp
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patheffects import AbstractPathEffect, withStroke
from matplotlib.ticker import FixedLocator, FuncFormatter
from numpy.typing import ArrayLike, NDArray

from estimator.errors import InputError
from estimator.plot_base import PALETTE, new_figure, save_png
from estimator.skymap import SkyMap

__all__ = ["credible_thresholds", "plot_sky_map"]

Array = NDArray[np.float64]

#: Grid of the drawing (longitude x latitude cells), 0.5 deg: finer than a screen pixel.
GRID_SHAPE = (360, 720)
#: Colours of the 50% and 90% contours (Okabe & Ito 2008 sky blue and blue).
CONTOUR_STYLE: dict[float, tuple[str, Literal["-", "--"]]] = {
    0.5: ("#56b4e9", "-"), 0.9: ("#0072b2", "--")}
_HALO: list[AbstractPathEffect] = [withStroke(linewidth=2.2, foreground="white")]


def credible_thresholds(skymap: SkyMap, levels: tuple[float, ...]) -> list[float]:
    """Pixel probabilities bounding the highest-density regions holding ``levels``.

    The region of level ``L`` is every pixel at least as probable as the pixel
    at which the running sum, most probable first, reaches ``L`` (Box & Tiao
    1973, section 2.8).
    """
    ranked = np.sort(skymap.probability)[::-1]
    cum = np.cumsum(ranked)
    return [float(ranked[min(int(np.searchsorted(cum, lev)), ranked.size - 1)])
            for lev in levels]


def _to_lon(ra: ArrayLike) -> Array:
    """Plot longitude of right ascension (rad): 12h at the centre, RA growing leftwards."""
    return np.mod(np.pi - np.asarray(ra, dtype=float) + np.pi, 2.0 * np.pi) - np.pi


def _format_area(area: float) -> str:
    return f"{area:,.0f}" if area >= 10.0 else f"{area:.1f}"


def plot_sky_map(
    skymap: SkyMap,
    path: str | Path,
    *,
    truth: tuple[float, float] | None = None,
    title: str = "",
) -> Path:
    """Draw ``skymap`` as an all-sky Mollweide figure to a PNG at ``path``.

    Parameters
    ----------
    skymap
        The map to draw; colour shows probability density per deg^2.
    path
        Where the PNG goes; returned.
    truth
        ``(ra, dec)`` in rad of a known source position, marked with a star.
    title
        Heading above the map.
    """
    if truth is not None and not (np.all(np.isfinite(truth)) and abs(truth[1]) <= np.pi / 2):
        msg = f"truth={truth}; expected finite (ra, dec) in rad with |dec| <= pi/2"
        raise InputError(msg, source="sky plot", field="truth")
    ny, nx = GRID_SHAPE
    lon_edges = np.linspace(-np.pi, np.pi, nx + 1)
    lat_edges = np.linspace(-np.pi / 2, np.pi / 2, ny + 1)
    lon = 0.5 * (lon_edges[1:] + lon_edges[:-1])
    lat = 0.5 * (lat_edges[1:] + lat_edges[:-1])
    lon_grid, lat_grid = np.meshgrid(lon, lat)
    ra_grid = np.mod(np.pi - lon_grid, 2.0 * np.pi)
    cos_lat = np.cos(lat_grid)
    pixel = ahp.xyz_to_healpix(cos_lat * np.cos(ra_grid), cos_lat * np.sin(ra_grid),
                               np.sin(lat_grid), skymap.nside, order="nested")
    density = skymap.probability[pixel] / skymap.pixel_area_deg2

    fig = new_figure(8.6, 5.9)
    ax = fig.add_axes((0.07, 0.2, 0.89, 0.68), projection="mollweide")
    mesh = ax.pcolormesh(lon_edges, lat_edges, density, cmap="magma_r", vmin=0.0,
                         shading="flat", rasterized=True)
    levels = (0.5, 0.9)
    thresholds = credible_thresholds(skymap, levels)
    handles: list[Line2D] = []
    for lev, thr in zip(levels, thresholds, strict=True):
        colour, style = CONTOUR_STYLE[lev]
        ax.contour(lon_grid, lat_grid, skymap.probability[pixel], levels=[thr],
                   colors=[colour], linestyles=[style], linewidths=1.3)
        handles.append(Line2D([], [], color=colour, linestyle=style, linewidth=1.3,
                              label=f"{lev:.0%} credible region"))
    if truth is not None:
        ax.plot(_to_lon(truth[0]), truth[1], marker="*", markersize=14, linestyle="none",
                color=PALETTE["truth"], markeredgecolor=PALETTE["ink"], markeredgewidth=0.8)
        handles.append(Line2D([], [], marker="*", markersize=11, linestyle="none",
                              color=PALETTE["truth"], markeredgecolor=PALETTE["ink"],
                              label="true position"))

    hours = np.arange(2.0, 24.0, 2.0)
    ax.xaxis.set_major_locator(FixedLocator(_to_lon(hours * np.pi / 12.0).tolist()))
    ax.xaxis.set_major_formatter(FuncFormatter(
        lambda x, _pos: f"{round(np.mod(np.pi - x, 2 * np.pi) * 12 / np.pi) % 24:d}h"))
    ax.yaxis.set_major_locator(FixedLocator(np.radians([-60.0, -30.0, 0.0, 30.0, 60.0]).tolist()))
    ax.yaxis.set_major_formatter(FuncFormatter(
        lambda y, _pos: f"{round(np.degrees(y)):+d}°".replace("+0", "0")))
    ax.grid(True, color=PALETTE["muted"], linewidth=0.5, alpha=0.5)
    ax.tick_params(labelsize=8, colors=PALETTE["muted"])
    for label in ax.get_xticklabels():
        label.set_path_effects(_HALO)
    ax.set_xlabel("right ascension", fontsize=9, color=PALETTE["ink"])
    fig.text(0.012, 0.54, "declination", rotation=90, fontsize=9, color=PALETTE["ink"],
             ha="left", va="center")

    if title:
        fig.text(0.04, 0.955, title, fontsize=10, color=PALETTE["ink"], ha="left", va="top")
    area = skymap.credible_area(0.9)
    fig.text(0.96, 0.955, f"90% area: {_format_area(area)} deg²", fontsize=10,
             color=PALETTE["ink"], ha="right", va="top")
    fig.legend(handles=handles, loc="upper right", bbox_to_anchor=(0.96, 0.92),
               fontsize=8, frameon=False, ncols=len(handles))
    cax = fig.add_axes((0.3, 0.085, 0.4, 0.03))
    bar = fig.colorbar(mesh, cax=cax, orientation="horizontal")
    bar.set_label("probability density (deg⁻²)", fontsize=8, color=PALETTE["ink"])
    bar.ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    bar.ax.tick_params(labelsize=7, colors=PALETTE["muted"])
    bar.outline.set_edgecolor(PALETTE["grid"])
    return save_png(fig, path)
