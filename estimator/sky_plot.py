"""The sky-map figure: an all-sky Mollweide view of a :class:`~estimator.skymap.SkyMap`.

Mollweide's equal-area projection (Snyder 1987, Map Projections - A Working
Manual, USGS Prof. Paper 1395, section 31) as drawn by matplotlib. Right
ascension increases to the left, as on the sky seen from inside the celestial
sphere (common practice in astronomy); the centre of the map is 12h. Colour map:
reversed ``magma`` (Smith & van der Walt 2015, matplotlib's perceptually
uniform maps), so empty sky stays pale. The 50% and 90% contours enclose the
highest-density credible regions of the map.

When the 90% region is compact (below :data:`ZOOM_MAX_SKY_FRACTION` of the sky) a second
panel beside the all-sky view zooms on it: a gnomonic projection centred on the most
probable pixel (Snyder 1987, section 22, Eqs. 22-4 and 22-5: a direction ``v`` maps to the
standard coordinates ``xi = v.e / v.c``, ``eta = v.n / v.c`` with ``c`` the centre and
``e``, ``n`` the unit vectors towards east and north there; from memory), drawn in degrees
of offset with east to the left, a graticule of right ascension and declination, and the
density interpolated bilinearly between pixel centres (astropy-healpix). The frame of the
coordinates (``"J2000"`` by default) is written in the lower-left corner.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import astropy.units as u
import astropy_healpix as ahp
import numpy as np
from matplotlib.axes import Axes
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patheffects import AbstractPathEffect, withStroke
from matplotlib.ticker import FixedLocator, FuncFormatter
from numpy.typing import ArrayLike, NDArray

from estimator.errors import InputError
from estimator.plot_base import PALETTE, new_figure, save_png
from estimator.skymap import SkyMap

__all__ = ["ZOOM_MAX_SKY_FRACTION", "credible_thresholds", "plot_sky_map", "sky_map_figure"]

Array = NDArray[np.float64]

#: Grid of the drawing (longitude x latitude cells), 0.5 deg: finer than a screen pixel.
GRID_SHAPE = (360, 720)
#: Colours of the 50% and 90% contours (Okabe & Ito 2008 sky blue and blue).
CONTOUR_STYLE: dict[float, tuple[str, Literal["-", "--"]]] = {
    0.5: ("#56b4e9", "-"), 0.9: ("#0072b2", "--")}
_HALO: list[AbstractPathEffect] = [withStroke(linewidth=2.2, foreground="white")]
#: The zoom panel is drawn when the 90% region covers less than this share of the sky
#: (412 deg^2, a patch about 20 deg across: under 50 screen pixels in the all-sky view).
ZOOM_MAX_SKY_FRACTION = 0.01
#: Largest distance (deg) from the peak shown by the zoom panel; the gnomonic scale there
#: is 1/cos^2(45 deg) = 2 times the central scale (Snyder 1987, section 22).
ZOOM_MAX_RADIUS_DEG = 45.0
ZOOM_GRID = 240  # cells per side of the zoom panel's density image
SKY_SIZE_IN = (8.6, 5.9)  # the all-sky figure, inches
ZOOM_EXTRA_IN = 4.7  # width added to the figure for the zoom panel, inches


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
    frame: str = "J2000",
) -> Path:
    """Draw ``skymap`` (:func:`sky_map_figure`) to a PNG at ``path`` and return the path."""
    return save_png(sky_map_figure(skymap, truth=truth, title=title, frame=frame), path)


def sky_map_figure(
    skymap: SkyMap,
    *,
    truth: tuple[float, float] | None = None,
    title: str = "",
    frame: str = "J2000",
) -> Figure:
    """The all-sky Mollweide figure of ``skymap``, with a zoom panel on a compact region.

    Parameters
    ----------
    skymap
        The map to draw; colour shows probability density per deg^2.
    truth
        ``(ra, dec)`` in rad of a known source position, marked with a star.
    title
        Heading above the map.
    frame
        Name of the equatorial frame of the map's coordinates, written in a corner.

    Returns
    -------
    Figure
        8.6 x 5.9 inches; 13.3 x 5.9 inches with the zoom panel, drawn when the 90% area is
        below :data:`ZOOM_MAX_SKY_FRACTION` of the sky.
    """
    if truth is not None and not (np.all(np.isfinite(truth)) and abs(truth[1]) <= np.pi / 2):
        msg = f"truth={truth}; expected finite (ra, dec) in rad with |dec| <= pi/2"
        raise InputError(msg, source="sky plot", field="truth")
    if not isinstance(frame, str) or not 0 < len(frame.strip()) <= 40:
        msg = f"frame={frame!r}; expected a short name of the frame such as 'J2000'"
        raise InputError(msg, source="sky plot", field="frame")
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

    area = skymap.credible_area(0.9)
    sky_fraction = area / (4.0 * np.pi * np.degrees(1.0) ** 2)
    zoom = sky_fraction < ZOOM_MAX_SKY_FRACTION
    width_in, height_in = SKY_SIZE_IN[0] + (ZOOM_EXTRA_IN if zoom else 0.0), SKY_SIZE_IN[1]
    sx = SKY_SIZE_IN[0] / width_in  # x fractions of the all-sky layout scale by this
    fig = new_figure(width_in, height_in)
    ax = fig.add_axes((0.07 * sx, 0.2, 0.89 * sx, 0.68), projection="mollweide")
    norm = Normalize(vmin=0.0, vmax=float(skymap.probability.max() / skymap.pixel_area_deg2))
    mesh = ax.pcolormesh(lon_edges, lat_edges, density, cmap="magma_r", norm=norm,
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
    fig.text(0.012 * sx, 0.54, "declination", rotation=90, fontsize=9, color=PALETTE["ink"],
             ha="left", va="center")
    if zoom:
        view = _zoom_view(skymap, thresholds[1])
        zoom_ax = fig.add_axes((1.0 - 4.1 / width_in, 0.2, 3.6 / width_in, 3.6 / height_in))
        _draw_zoom(zoom_ax, skymap, view, thresholds, norm, truth)
        ax.plot(*_outline(view), color=PALETTE["ink"], linewidth=0.9)

    right = 1.0 - 0.04 * SKY_SIZE_IN[0] / width_in
    if title:
        fig.text(0.04 * sx, 0.955, title, fontsize=10, color=PALETTE["ink"], ha="left",
                 va="top")
    fig.text(right, 0.955, f"90% area: {_format_area(area)} deg²", fontsize=10,
             color=PALETTE["ink"], ha="right", va="top")
    fig.text(0.012 * sx, 0.02, f"equatorial coordinates, {frame.strip()}", fontsize=8,
             color=PALETTE["muted"], ha="left", va="bottom")
    fig.legend(handles=handles, loc="upper right", bbox_to_anchor=(right, 0.92),
               fontsize=8, frameon=False, ncols=len(handles))
    cax = fig.add_axes((0.3 * sx, 0.085, 0.4 * sx, 0.03))
    bar = fig.colorbar(mesh, cax=cax, orientation="horizontal")
    bar.set_label("probability density (deg⁻²)", fontsize=8, color=PALETTE["ink"])
    bar.ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
    bar.ax.tick_params(labelsize=7, colors=PALETTE["muted"])
    bar.outline.set_edgecolor(PALETTE["grid"])
    return fig


# --- the zoom panel --------------------------------------------------------------------------

#: Graticule steps: declination (deg) and right ascension (minutes of time).
_DEC_STEPS = (0.1, 0.2, 0.25, 0.5, 1.0, 2.0, 5.0, 10.0, 15.0, 20.0, 30.0)
_RA_STEPS_MIN = (1.0, 2.0, 4.0, 5.0, 10.0, 15.0, 20.0, 30.0, 60.0, 120.0, 180.0, 240.0)


@dataclass(frozen=True)
class _ZoomView:
    """Gnomonic view: centre, unit vectors (rows: centre, east, north), window in deg."""

    ra: float
    dec: float
    basis: Array
    x_range: tuple[float, float]
    y_range: tuple[float, float]
    cut: bool  # part of the 90% region lies beyond ZOOM_MAX_RADIUS_DEG of the centre


def _radec(xyz: Array) -> tuple[Array, Array]:
    """Right ascension in [0, 2 pi) and declination (rad) of vectors along axis 0."""
    norm = np.sqrt(np.sum(xyz * xyz, axis=0))
    return (np.mod(np.arctan2(xyz[1], xyz[0]), 2.0 * np.pi),
            np.arcsin(np.clip(xyz[2] / norm, -1.0, 1.0)))


def _unit(ra: ArrayLike, dec: ArrayLike) -> Array:
    ra, dec = np.asarray(ra, dtype=float), np.asarray(dec, dtype=float)
    return np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)])


def _project(view: _ZoomView, xyz: Array) -> tuple[Array, Array, Array]:
    """Gnomonic standard coordinates (deg) and cos of the distance from the centre
    (Snyder 1987, Eqs. 22-4, 22-5); points with cos <= 0 have no image."""
    c, e, n = np.tensordot(view.basis, xyz, axes=1)
    safe = np.where(c > 1e-9, c, np.nan)
    return np.degrees(e / safe), np.degrees(n / safe), c


def _deproject(view: _ZoomView, xi: Array, eta: Array) -> Array:
    """Directions (not normalised) of standard coordinates ``xi``, ``eta`` (deg)."""
    return np.asarray(view.basis[0][:, None, None] + view.basis[1][:, None, None]
                      * np.radians(xi) + view.basis[2][:, None, None] * np.radians(eta))


def _zoom_view(skymap: SkyMap, threshold: float) -> _ZoomView:
    """Projection centred on the most probable pixel; a square window holding the region
    of pixels at least as probable as ``threshold`` (those within the radius limit)."""
    peak = np.array([int(np.argmax(skymap.probability))])
    ra0, dec0 = (float(a[0]) for a in _radec(np.stack(ahp.healpix_to_xyz(
        peak, skymap.nside, order="nested"))))
    sa, ca, sd, cd = np.sin(ra0), np.cos(ra0), np.sin(dec0), np.cos(dec0)
    basis = np.array([[cd * ca, cd * sa, sd], [-sa, ca, 0.0], [-sd * ca, -sd * sa, cd]])
    view = _ZoomView(ra0, dec0, basis, (-1.0, 1.0), (-1.0, 1.0), cut=False)
    region = np.flatnonzero(skymap.probability >= threshold)
    xi, eta, cos_c = _project(view, np.stack(ahp.healpix_to_xyz(region, skymap.nside,
                                                                order="nested")))
    near = cos_c > np.cos(np.radians(ZOOM_MAX_RADIUS_DEG))
    pixel = float(ahp.nside_to_pixel_resolution(skymap.nside).to_value(u.deg))
    lo = np.array([xi[near].min(), eta[near].min()]) - pixel
    hi = np.array([xi[near].max(), eta[near].max()]) + pixel
    half = max(0.55 * float(np.max(hi - lo)), 3.0 * pixel)
    mid = 0.5 * (lo + hi)
    return _ZoomView(ra0, dec0, basis, (mid[0] - half, mid[0] + half),
                     (mid[1] - half, mid[1] + half), cut=not bool(np.all(near)))


def _outline(view: _ZoomView) -> tuple[Array, Array]:
    """The zoom window's border in the all-sky axes (lon, lat), broken at the RA seam."""
    t = np.linspace(0.0, 1.0, 60)
    (x0, x1), (y0, y1) = view.x_range, view.y_range
    xi = np.concatenate([x0 + (x1 - x0) * t, np.full_like(t, x1), x1 - (x1 - x0) * t,
                         np.full_like(t, x0)])
    eta = np.concatenate([np.full_like(t, y0), y0 + (y1 - y0) * t, np.full_like(t, y1),
                          y1 - (y1 - y0) * t])
    ra, dec = _radec(_deproject(view, xi[None, :], eta[None, :])[:, 0, :])
    lon = _to_lon(ra)
    jump = np.flatnonzero(np.abs(np.diff(lon)) > np.pi) + 1
    return np.insert(lon, jump, np.nan), np.insert(dec, jump, np.nan)


def _format_ra(ra: float, step_min: float = 0.1) -> str:
    minutes = round(float(np.mod(ra, 2.0 * np.pi)) * 720.0 / np.pi / step_min) * step_min
    hours, rest = divmod(minutes, 60.0)
    if step_min >= 60.0:
        return f"{int(hours) % 24:d}h"
    text = f"{rest:04.1f}" if step_min < 1.0 else f"{round(rest):02d}"
    return f"{int(hours) % 24:d}h{text}m"


def _format_dec(dec_deg: float, digits: int | None = None) -> str:
    text = f"{dec_deg + 0.0:+.{digits}f}°" if digits is not None else f"{dec_deg + 0.0:+g}°"
    return "0°" if text.lstrip("+-").rstrip("0.°") == "" else text.replace("-", "−")


def _graticule(ax: Axes, view: _ZoomView) -> None:
    """Lines of constant right ascension and declination across the window, labelled."""
    (x0, x1), (y0, y1) = view.x_range, view.y_range
    g = np.linspace(0.0, 1.0, 21)
    ra, dec = _radec(_deproject(view, *np.meshgrid(x0 + (x1 - x0) * g, y0 + (y1 - y0) * g)))
    d_ra = np.angle(np.exp(1j * (ra - view.ra)))
    poles = _project(view, np.array([[0.0, 0.0], [0.0, 0.0], [1.0, -1.0]]))
    pole_in = (poles[2] > 0) & (poles[0] >= x0) & (poles[0] <= x1) & (poles[1] >= y0) \
        & (poles[1] <= y1)
    ra_lo, ra_hi = (-np.pi, np.pi) if pole_in.any() else (float(d_ra.min()), float(d_ra.max()))
    dec_lo = -np.pi / 2 if pole_in[1] else float(dec.min())
    dec_hi = np.pi / 2 if pole_in[0] else float(dec.max())
    span_deg = np.degrees(dec_hi - dec_lo)
    dec_step = next((s for s in _DEC_STEPS if span_deg / s <= 4.0), 30.0)
    ra_step = next((s for s in _RA_STEPS_MIN if np.degrees(ra_hi - ra_lo) * 4.0 / s <= 4.0),
                   240.0)
    style: dict[str, Any] = {"color": PALETTE["muted"], "linewidth": 0.5, "alpha": 0.6}
    label: dict[str, Any] = {"fontsize": 7, "color": PALETTE["muted"], "path_effects": _HALO,
                             "clip_on": True}
    along = np.linspace(0.0, 1.0, 200)
    mx, my = 0.06 * (x1 - x0), 0.04 * (y1 - y0)  # labels keep clear of the panel's edges

    def inside(xi: Array, eta: Array, c: Array) -> NDArray[np.bool_]:
        return np.asarray((c > 0) & (xi > x0 + mx) & (xi < x1 - mx) & (eta > y0 + my)
                          & (eta < y1 - my))

    decs = np.arange(np.ceil(np.degrees(dec_lo) / dec_step), np.floor(np.degrees(dec_hi)
                     / dec_step) + 1.0) * dec_step  # at most 5 lines
    for d in decs:
        xi, eta, c = _project(view, _unit(view.ra + ra_lo + (ra_hi - ra_lo) * along,
                                          np.full_like(along, np.radians(d))))
        ax.plot(xi, eta, **style)
        keep = inside(xi, eta, c)
        if keep.any() and abs(d) < 90.0:
            k = np.flatnonzero(keep)[np.argmin(xi[keep])]
            ax.text(xi[k], eta[k], _format_dec(d), ha="right", va="bottom", **label)
    step = np.radians(ra_step / 4.0)
    first = np.ceil((view.ra + ra_lo) / step)
    for k_ra in np.arange(first, np.floor((view.ra + ra_hi) / step) + 1.0):  # <= 8 lines
        xi, eta, c = _project(view, _unit(np.full_like(along, k_ra * step),
                                          dec_lo + (dec_hi - dec_lo) * along))
        ax.plot(xi, eta, **style)
        keep = inside(xi, eta, c)
        if keep.any():
            k = np.flatnonzero(keep)[np.argmin(eta[keep])]
            ax.text(xi[k], eta[k], _format_ra(k_ra * step, ra_step), ha="center",
                    va="bottom", **label)


def _draw_zoom(ax: Axes, skymap: SkyMap, view: _ZoomView, thresholds: list[float],
               norm: Normalize, truth: tuple[float, float] | None) -> None:
    """The zoomed density, 50% and 90% contours, graticule and truth; east to the left."""
    x_edges = np.linspace(*view.x_range, ZOOM_GRID + 1)
    y_edges = np.linspace(*view.y_range, ZOOM_GRID + 1)
    xc, yc = np.meshgrid(0.5 * (x_edges[1:] + x_edges[:-1]), 0.5 * (y_edges[1:] + y_edges[:-1]))
    ra, dec = _radec(_deproject(view, xc, yc))
    prob = np.asarray(ahp.interpolate_bilinear_lonlat(ra * u.rad, dec * u.rad,
                                                      skymap.probability, order="nested"))
    ax.pcolormesh(x_edges, y_edges, prob / skymap.pixel_area_deg2, cmap="magma_r", norm=norm,
                  shading="flat", rasterized=True)
    for lev, thr in zip((0.5, 0.9), thresholds, strict=True):
        if prob.min() < thr < prob.max():
            colour, style = CONTOUR_STYLE[lev]
            ax.contour(xc, yc, prob, levels=[thr], colors=[colour], linestyles=[style],
                       linewidths=1.3)
    _graticule(ax, view)
    if truth is not None:
        xi, eta, c = _project(view, _unit(truth[0], truth[1])[:, None])
        if c[0] > 0:
            ax.plot(xi, eta, marker="*", markersize=14, linestyle="none", clip_on=True,
                    color=PALETTE["truth"], markeredgecolor=PALETTE["ink"],
                    markeredgewidth=0.8)
    ax.set_xlim(view.x_range[1], view.x_range[0])  # east (larger RA) to the left
    ax.set_ylim(*view.y_range)
    ax.set_aspect("equal")
    ax.tick_params(labelsize=7, colors=PALETTE["muted"])
    ax.set_xlabel("offset to the east (deg)", fontsize=8, color=PALETTE["ink"])
    ax.set_ylabel("offset to the north (deg)", fontsize=8, color=PALETTE["ink"])
    ax.set_title(f"zoom, centred on the peak at {_format_ra(view.ra)}, "
                 f"{_format_dec(np.degrees(view.dec), 2)}",
                 fontsize=9, color=PALETTE["ink"], loc="left")
    for spine in ax.spines.values():
        spine.set_edgecolor(PALETTE["muted"])
    if view.cut:
        ax.text(0.02, 0.98, "part of the 90% region lies outside this panel", fontsize=7,
                color=PALETTE["ink"], transform=ax.transAxes, path_effects=_HALO,
                va="top")
