"""Checks of the sky maps made from posterior samples, and of their figure.

Sources
-------
* HEALPix geometry (Górski et al. 2005, ApJ 622, 759): pixel areas, centres and
  boundaries taken from astropy-healpix, the reference implementation here, and the
  steradian-to-deg^2 conversion from ``astropy.units``.
* The von Mises-Fisher (vMF) distribution on the sphere (Fisher 1953, Proc. R. Soc.
  A 217, 295): samples from ``scipy.stats.vonmises_fisher`` (the generator of Wood
  1994, Commun. Stat. Simul. 23, 157). The angle theta from the mean direction has
  density ``kappa sin(theta) exp(kappa cos(theta)) / (2 sinh(kappa))`` (Fisher 1953;
  Fisher, Lewis & Embleton 1987, Statistical Analysis of Spherical Data, section
  4.4.3, from memory), so the cap of half-angle theta holds
  ``P = (1 - exp(-kappa (1 - cos theta))) / (1 - exp(-2 kappa))`` and the cap
  holding ``P`` has area ``2 pi (1 - cos theta) = -2 pi ln(1 - P (1 - exp(-2 kappa)))
  / kappa`` sr. The closed form is checked here against ``scipy.integrate.quad``.
* Uniform directions: ``scipy.stats.uniform_direction``; the whole sky is 4 pi sr.
* Coverage of credible regions (Cook, Gelman & Rubin 2006, J. Comput. Graph. Stat.
  15, 675): when samples and truth come from one distribution, the truth falls in
  the ``p`` credible region with probability ``p``; the count over ``N``
  independent trials is Binomial(N, p), band from ``scipy.stats.binom.interval``.
* PNG layout (W3C PNG specification, 2nd ed., 2003, sections 5.2 and 11.2.2): the
  signature and the IHDR width and height, read with ``struct``.
* Right ascension increasing to the left on all-sky maps: common practice in
  astronomy.
* The zoom panel's gnomonic projection (Snyder 1987, Map Projections - A Working Manual,
  USGS Prof. Paper 1395, section 22, Eqs. 22-3 to 22-5, from memory):
  ``cos c = sin d0 sin d + cos d0 cos d cos(a - a0)``, ``x = cos d sin(a - a0) / cos c``,
  ``y = (cos d0 sin d - sin d0 cos d cos(a - a0)) / cos c``; its area scale is
  ``1 / cos^3 c`` (from memory), 1.001 within 2 deg of the centre.
"""

from __future__ import annotations

import struct
from pathlib import Path
from typing import Any

import astropy.units as u
import astropy_healpix as ahp
import matplotlib.image as mpimg
import numpy as np
import pytest
import scipy.integrate
import scipy.stats
from numpy.typing import NDArray

from estimator import skymap as sm
from estimator.errors import InputError
from estimator.plot_base import DPI
from estimator.sky_plot import ZOOM_MAX_SKY_FRACTION, plot_sky_map, sky_map_figure
from estimator.skymap import SkyMap, sky_map_from_samples

Array = NDArray[np.float64]
SKY_DEG2 = float((4.0 * np.pi * u.sr).to_value(u.deg**2))  # 41252.96 deg^2
#: Two-sided band holding the number of covered truths with probability 99.9%:
#: each coverage check below raises a false alarm with probability <= 0.1%.
BAND = 0.999


def vmf_cap_area(kappa: float, level: float) -> float:
    """Area (deg^2) of the vMF cap holding ``level`` (Fisher 1953; module docstring)."""
    one_minus_cos = -np.log1p(-level * -np.expm1(-2.0 * kappa)) / kappa
    return float(2.0 * np.pi * one_minus_cos * (180.0 / np.pi) ** 2)


def kappa_for_area(area_deg2: float, level: float = 0.9) -> float:
    """Concentration whose ``level`` cap has the given area (exp(-2 kappa) neglected)."""
    return float(-2.0 * np.pi * np.log1p(-level) / np.radians(1.0) ** 2 / area_deg2)


def to_radec(vectors: Array) -> tuple[Array, Array]:
    v = np.atleast_2d(vectors)
    return np.mod(np.arctan2(v[:, 1], v[:, 0]), 2.0 * np.pi), np.arcsin(np.clip(v[:, 2], -1, 1))


def unit(ra: float, dec: float) -> Array:
    return np.array([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)])


def vmf_draws(mu: Array, kappa: float, n: int, rng: np.random.Generator) -> Array:
    return np.asarray(scipy.stats.vonmises_fisher(mu, kappa).rvs(n, random_state=rng))


def random_direction(rng: np.random.Generator) -> Array:
    return np.asarray(scipy.stats.uniform_direction(3).rvs(random_state=rng))


# --- HEALPix bookkeeping against astropy-healpix --------------------------------------------

@pytest.mark.parametrize("nside", [1, 32, 256])
def test_pixel_areas_sum_to_the_sphere(nside: int) -> None:
    """12 nside^2 pixels of equal area tile 4 pi sr (astropy-healpix, astropy.units)."""
    probability = np.full(12 * nside**2, 1.0 / (12 * nside**2))
    skymap = SkyMap(nside=nside, order="nested", probability=probability, bandwidth=0.1)
    reference = ahp.nside_to_pixel_area(nside).to_value(u.deg**2)
    assert skymap.pixel_area_deg2 == pytest.approx(reference, rel=1e-12)
    assert skymap.pixel_area_deg2 * probability.size == pytest.approx(SKY_DEG2, rel=1e-12)
    assert skymap.credible_area(0.9) == pytest.approx(0.9 * SKY_DEG2, rel=1e-9)


def test_pixel_centres_match_astropy_healpix() -> None:
    nside = 16
    skymap = SkyMap(nside=nside, order="nested", probability=np.full(3072, 1 / 3072),
                    bandwidth=0.1)
    ra, dec = skymap.pixel_centres()
    lon, lat = ahp.healpix_to_lonlat(np.arange(3072), nside, order="nested")
    np.testing.assert_allclose(ra, lon.to_value(u.rad), atol=1e-12)
    np.testing.assert_allclose(dec, lat.to_value(u.rad), atol=1e-12)


@pytest.mark.parametrize("nside", [1, 4, 64])
def test_pixel_radius_bound_holds(nside: int) -> None:
    """Pixel boundaries (astropy-healpix) lie within PIXEL_RADIUS resolutions of the centre."""
    pixels = np.arange(12 * nside**2)
    centre = np.stack(ahp.healpix_to_xyz(pixels, nside, order="nested"))
    lon, lat = ahp.boundaries_lonlat(pixels, step=6, nside=nside, order="nested")
    ra, dec = lon.to_value(u.rad), lat.to_value(u.rad)
    edge = np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)])
    angle = np.arccos(np.clip(np.einsum("ip,ipk->pk", centre, edge), -1.0, 1.0))
    resolution = ahp.nside_to_pixel_resolution(nside).to_value(u.rad)
    assert angle.max() <= sm.PIXEL_RADIUS * resolution
    assert angle.max() > 0.7 * resolution  # the bound is not vacuous


# --- the closed form used as reference -------------------------------------------------------

@pytest.mark.parametrize("kappa", [2.0, 47.0, 4750.0])
def test_vmf_cap_closed_form_against_quadrature(kappa: float) -> None:
    """Cap probability by integrating Fisher's (1953) angular density with scipy quad."""
    area = vmf_cap_area(kappa, 0.9)
    theta = np.arccos(1.0 - area / (2.0 * np.pi * (180.0 / np.pi) ** 2))

    def density(t: float) -> float:  # kappa sin t exp(kappa (cos t - 1)) / (1 - exp(-2 kappa))
        return float(kappa * np.sin(t) * np.exp(kappa * (np.cos(t) - 1.0))
                     / -np.expm1(-2.0 * kappa))

    held, _ = scipy.integrate.quad(density, 0.0, theta, points=[min(theta, 5 / kappa**0.5)])
    assert held == pytest.approx(0.9, abs=1e-7)


# --- areas of known distributions ------------------------------------------------------------

@pytest.mark.parametrize(
    ("area", "centre"),
    [(10.0, (1.0, 0.3)), (100.0, (0.02, -0.5)), (1000.0, (4.0, 1.2)), (300.0, (2.0, np.pi / 2))],
)
def test_vmf_area_matches_closed_form(area: float, centre: tuple[float, float]) -> None:
    """90% area of 5000 vMF samples within 15% of the cap area (Fisher 1953).

    Includes a centre on the RA = 0 seam and one on the pole. Measured over 40
    runs (8 seeds x 5 areas) the ratio is 1.06-1.12 (the kernel's smoothing widens the map by
    ``1 + h^2/sigma^2``), so a miss of 15% is far outside the seed-to-seed spread.
    """
    rng = np.random.default_rng(20260 + int(area))
    kappa = kappa_for_area(area)
    ra, dec = to_radec(vmf_draws(unit(*centre), kappa, 5000, rng))
    skymap = sky_map_from_samples(ra, dec, rng=rng)
    assert skymap.credible_area(0.9) == pytest.approx(vmf_cap_area(kappa, 0.9), rel=0.15)
    assert skymap.probability.sum() == pytest.approx(1.0, abs=1e-12)
    # the pixel is at most a third of the kernel width unless max_nside (256) binds
    resolution = ahp.nside_to_pixel_resolution(skymap.nside).to_value(u.rad)
    assert resolution <= skymap.bandwidth / 3.0 or skymap.nside == 256


def test_uniform_sky_gives_ninety_percent_of_the_sky() -> None:
    """5000 isotropic directions (scipy uniform_direction): 90% area within 5% of 0.9 x 4 pi."""
    rng = np.random.default_rng(7)
    ra, dec = to_radec(np.asarray(scipy.stats.uniform_direction(3).rvs(5000, random_state=rng)))
    skymap = sky_map_from_samples(ra, dec, rng=rng)
    assert skymap.credible_area(0.9) == pytest.approx(0.9 * SKY_DEG2, rel=0.05)


def _coverage(draw: object, trials: int) -> tuple[float, float]:
    """Share of truths inside the 50% and 90% regions over ``trials`` seeded trials."""
    inside = np.zeros((trials, 2), dtype=bool)
    for i in range(trials):  # bounded by trials
        rng = np.random.default_rng(1000 + i)
        samples, truth = draw(rng)  # type: ignore[operator]
        ra, dec = to_radec(samples)
        true_ra, true_dec = to_radec(truth)
        level = sky_map_from_samples(ra, dec, rng=rng).credible_level(float(true_ra[0]),
                                                                       float(true_dec[0]))
        inside[i] = (level <= 0.5, level <= 0.9)
    print(f"coverage over {trials} trials: 50% region {inside[:, 0].mean():.3f}, "
          f"90% region {inside[:, 1].mean():.3f}")
    return float(inside[:, 0].mean()), float(inside[:, 1].mean())


def _assert_in_band(share: float, p: float, trials: int) -> None:
    lo, hi = scipy.stats.binom.interval(BAND, trials, p)
    assert lo / trials <= share <= hi / trials, (share, p, lo / trials, hi / trials)


@pytest.mark.slow
def test_coverage_of_single_vmf_patches() -> None:
    """200 trials, random centre, 90% area log-uniform in [10, 1000] deg^2, 2000 samples.

    False-alarm rate <= 0.1% per level (two levels: <= 0.2%).
    """

    def draw(rng: np.random.Generator) -> tuple[Array, Array]:
        kappa = kappa_for_area(10.0 ** rng.uniform(1.0, 3.0))
        mu = random_direction(rng)
        return vmf_draws(mu, kappa, 2000, rng), vmf_draws(mu, kappa, 1, rng)

    trials = 200
    share50, share90 = _coverage(draw, trials)
    _assert_in_band(share50, 0.5, trials)
    _assert_in_band(share90, 0.9, trials)


@pytest.mark.slow
def test_coverage_of_two_mode_mixtures() -> None:
    """200 trials of a two-vMF mixture (random centres, weights in [0.3, 0.7]).

    False-alarm rate <= 0.1% per level (two levels: <= 0.2%).
    """

    def draw(rng: np.random.Generator) -> tuple[Array, Array]:
        kappas = [kappa_for_area(10.0 ** rng.uniform(1.0, 3.0)) for _ in range(2)]
        mus = [random_direction(rng) for _ in range(2)]
        weight = rng.uniform(0.3, 0.7)
        n_first = rng.binomial(2000, weight)
        samples = np.concatenate([vmf_draws(mus[0], kappas[0], n_first, rng),
                                  vmf_draws(mus[1], kappas[1], 2000 - n_first, rng)])
        pick = int(rng.uniform() >= weight)
        return samples, vmf_draws(mus[pick], kappas[pick], 1, rng)

    trials = 200
    share50, share90 = _coverage(draw, trials)
    _assert_in_band(share50, 0.5, trials)
    _assert_in_band(share90, 0.9, trials)


# --- searched probability and area -----------------------------------------------------------

def test_searched_probability_counts_truths_as_the_true_density_says() -> None:
    """4000 truths from the vMF: the share with level <= 0.9 matches the region's true mass.

    The true mass of the map's 90% region is the Fisher (1953) density summed over its
    pixels; the count of truths inside is Binomial(4000, mass): 99.9% band, false-alarm
    rate 0.1%. The mass itself lies near 0.9 (measured 0.92 on average at 2000 samples,
    the smoothing's over-coverage): a region off by 0.05 would mean a miscalibrated map.
    """
    rng = np.random.default_rng(17)
    mu, kappa = unit(5.0, 0.7), kappa_for_area(60.0)
    ra, dec = to_radec(vmf_draws(mu, kappa, 2000, rng))
    skymap = sky_map_from_samples(ra, dec, rng=rng)
    pix_ra, pix_dec = skymap.pixel_centres()
    true = np.exp(kappa * (np.stack([np.cos(pix_dec) * np.cos(pix_ra),
                                     np.cos(pix_dec) * np.sin(pix_ra), np.sin(pix_dec)]).T
                           @ mu - 1.0))
    true /= true.sum()
    order = np.argsort(-skymap.probability)
    in_region = np.cumsum(skymap.probability[order]) <= 0.9
    mass = float(true[order[in_region]].sum())
    assert 0.85 < mass < 0.95
    truth_ra, truth_dec = to_radec(vmf_draws(mu, kappa, 4000, rng))
    levels = np.array([skymap.credible_level(float(a), float(b))
                       for a, b in zip(truth_ra, truth_dec, strict=True)])
    _assert_in_band(float(np.mean(levels <= 0.9)), mass, levels.size)


def test_searched_quantities_at_the_peak_and_far_away() -> None:
    rng = np.random.default_rng(3)
    centre = (2.0, -0.4)
    kappa = kappa_for_area(100.0)
    ra, dec = to_radec(vmf_draws(unit(*centre), kappa, 3000, rng))
    skymap = sky_map_from_samples(ra, dec, rng=rng)
    assert skymap.credible_level(*centre) < 0.05
    assert skymap.searched_area(*centre) < 0.05 * skymap.credible_area(0.9)
    far = (2.0 + np.pi, 0.4)  # the antipode: outside the support
    assert skymap.credible_level(*far) == pytest.approx(1.0)
    assert skymap.searched_area(*far) > skymap.credible_area(0.999)
    # a point on the 90% contour of the true cap lies near the 90% level (Fisher 1953)
    theta90 = np.arccos(1.0 - vmf_cap_area(kappa, 0.9) / (2 * np.pi * (180 / np.pi) ** 2))
    across = np.cross(unit(*centre), [0.0, 0.0, 1.0])
    across /= np.linalg.norm(across)
    edge = to_radec(np.cos(theta90) * unit(*centre) + np.sin(theta90) * across)
    assert 0.75 < skymap.credible_level(float(edge[0][0]), float(edge[1][0])) < 0.97


def test_same_map_for_wrapped_right_ascension_and_default_seed() -> None:
    rng = np.random.default_rng(11)
    ra, dec = to_radec(vmf_draws(unit(0.1, 0.2), kappa_for_area(200.0), 500, rng))
    first = sky_map_from_samples(ra, dec)
    second = sky_map_from_samples(ra + 2.0 * np.pi, dec)
    np.testing.assert_allclose(first.probability, second.probability, atol=1e-12)


# --- input errors ----------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("ra", "dec", "kwargs", "field"),
    [
        (np.zeros(50), np.full(50, 2.0), {}, "dec"),
        (np.zeros(50), np.zeros(40), {}, "dec"),
        (np.zeros(5), np.zeros(5), {}, "ra"),
        (np.full(50, np.nan), np.zeros(50), {}, "ra"),
        (np.zeros(50), np.zeros(50), {}, "ra"),
        (np.linspace(0, 1, 50), np.zeros(50), {"max_nside": 100}, "max_nside"),
    ],
)
def test_bad_input_raises(ra: Array, dec: Array, kwargs: dict[str, Any], field: str) -> None:
    with pytest.raises(InputError) as info:
        sky_map_from_samples(ra, dec, **kwargs)
    assert info.value.field == field


def test_sky_map_rejects_unnormalised_probabilities() -> None:
    with pytest.raises(InputError, match="sum to"):
        SkyMap(nside=1, order="nested", probability=np.ones(12), bandwidth=0.1)


# --- the figure ------------------------------------------------------------------------------

def png_size(path: Path) -> tuple[int, int]:
    """(width, height) from the IHDR chunk (PNG spec 11.2.2)."""
    head = path.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n"
    assert head[12:16] == b"IHDR"
    width, height = struct.unpack(">II", head[16:24])
    return int(width), int(height)


def two_mode_map(ra_hours: tuple[float, float], seed: int) -> SkyMap:
    rng = np.random.default_rng(seed)
    parts = [vmf_draws(unit(h * np.pi / 12, dec), kappa_for_area(300.0), 1500, rng)
             for h, dec in zip(ra_hours, (0.5, -0.5), strict=True)]
    ra, dec = to_radec(np.concatenate(parts))
    return sky_map_from_samples(ra, dec, rng=rng)


def darkest_column(pixels: Array) -> NDArray[np.intp]:
    """Columns of the darkest pixels of the map (the density peaks, magma_r dark)."""
    grey = pixels[..., :3].mean(axis=2)
    grey[int(0.78 * grey.shape[0]):] = 1.0  # ignore the colour bar
    return np.nonzero(grey <= grey.min() + 0.05)[1]


def test_plot_writes_a_two_mode_png(tmp_path: Path) -> None:
    skymap = two_mode_map((6.0, 18.0), seed=5)
    path = tmp_path / "sky.png"
    returned = plot_sky_map(skymap, path, truth=(np.pi / 2, 0.5), title="two modes")
    assert returned == path
    width, height = png_size(path)
    assert (width, height) == (round(8.6 * DPI), round(5.9 * DPI))
    assert 20_000 < path.stat().st_size < 2_000_000
    pixels = np.asarray(mpimg.imread(path), dtype=float)
    assert pixels[..., :3].std() > 0.05
    # the RA 18h mode is drawn left of the centre, the 6h mode right of it (RA grows leftward)
    columns = darkest_column(pixels)
    centre = 0.07 * width + 0.89 * width / 2
    assert columns.min() < centre - 0.2 * width
    assert columns.max() > centre + 0.2 * width


def test_plot_puts_larger_right_ascension_to_the_left(tmp_path: Path) -> None:
    eastern = plot_sky_map(two_mode_map((20.0, 20.3), seed=8), tmp_path / "a.png")
    western = plot_sky_map(two_mode_map((4.0, 4.3), seed=9), tmp_path / "b.png")
    col_e = darkest_column(np.asarray(mpimg.imread(eastern), dtype=float)).mean()
    col_w = darkest_column(np.asarray(mpimg.imread(western), dtype=float)).mean()
    assert col_e < col_w


def test_plot_rejects_a_bad_truth(tmp_path: Path) -> None:
    skymap = SkyMap(nside=1, order="nested", probability=np.full(12, 1 / 12), bandwidth=1.0)
    with pytest.raises(InputError, match="truth"):
        plot_sky_map(skymap, tmp_path / "x.png", truth=(0.0, 3.0))


# --- the zoom panel and the frame label ------------------------------------------------------

def vmf_map(centre: tuple[float, float], area: float, seed: int) -> SkyMap:
    rng = np.random.default_rng(seed)
    ra, dec = to_radec(vmf_draws(unit(*centre), kappa_for_area(area), 5000, rng))
    return sky_map_from_samples(ra, dec, rng=rng)


def zoom_axes(fig: Any) -> Any:
    panels = [a for a in fig.axes if a.get_xlabel() == "offset to the east (deg)"]
    assert len(panels) <= 1
    return panels[0] if panels else None


def snyder_gnomonic(ra: float, dec: float, ra0: float, dec0: float) -> tuple[float, float]:
    """Snyder (1987) Eqs. 22-3 to 22-5 (module docstring), in degrees."""
    cos_c = np.sin(dec0) * np.sin(dec) + np.cos(dec0) * np.cos(dec) * np.cos(ra - ra0)
    x = np.cos(dec) * np.sin(ra - ra0) / cos_c
    y = (np.cos(dec0) * np.sin(dec) - np.sin(dec0) * np.cos(dec) * np.cos(ra - ra0)) / cos_c
    return float(np.degrees(x)), float(np.degrees(y))


@pytest.mark.parametrize(("area", "zoomed"), [(5.0, True), (200.0, True), (3000.0, False)])
def test_zoom_panel_only_for_compact_maps(area: float, zoomed: bool) -> None:
    """A compact 90% region (below 1% of the sky) gets a third axes beside the all-sky view
    and its colour bar; a broad one does not."""
    skymap = vmf_map((2.0, 0.3), area, seed=41)
    assert bool(skymap.credible_area(0.9) / SKY_DEG2 < ZOOM_MAX_SKY_FRACTION) is zoomed
    fig = sky_map_figure(skymap)
    assert len(fig.axes) == (3 if zoomed else 2)
    assert (zoom_axes(fig) is not None) is zoomed


def test_zoom_panel_fills_with_the_region(tmp_path: Path) -> None:
    """The 5 deg^2 cap (Fisher 1953 closed form) fills most of the panel, and the panel's
    90% and 50% contours enclose the map's credible areas (gnomonic area scale 1.001)."""
    skymap = vmf_map((4.1, -0.55), 5.0, seed=42)
    fig = sky_map_figure(skymap, truth=(4.1, -0.55))
    zoom = zoom_axes(fig)
    left, right = zoom.get_xlim()
    bottom, top = zoom.get_ylim()
    assert left > right  # east (larger right ascension) to the left, common practice
    diameter = 2.0 * np.degrees(np.arccos(1.0 - vmf_cap_area(kappa_for_area(5.0), 0.9)
                                          / (2.0 * np.pi * np.degrees(1.0) ** 2)))
    assert 1.0 < (left - right) / diameter < 2.0
    assert top - bottom == pytest.approx(left - right)
    contours = [c for c in zoom.collections if type(c).__name__ == "QuadContourSet"]
    assert len(contours) == 2
    for level, contour in zip((0.5, 0.9), contours, strict=True):
        polygons = [q for path in contour.get_paths() for q in path.to_polygons()]
        enclosed = sum(0.5 * abs(np.dot(q[:, 0], np.roll(q[:, 1], 1))
                                 - np.dot(q[:, 1], np.roll(q[:, 0], 1))) for q in polygons)
        assert enclosed == pytest.approx(skymap.credible_area(level), rel=0.15)
    path = plot_sky_map(skymap, tmp_path / "zoom.png", truth=(4.1, -0.55))
    assert png_size(path) == (round((8.6 + 4.7) * DPI), round(5.9 * DPI))


@pytest.mark.parametrize(
    ("centre", "offset"),
    [((4.1, -0.55), (0.01, 0.004)), ((0.005, -0.2), (-0.02, 0.01)), ((0.3, 1.52), (2.0, 0.01))],
)
def test_zoom_truth_marker_at_the_gnomonic_position(centre: tuple[float, float],
                                                    offset: tuple[float, float]) -> None:
    """The star sits where Snyder's gnomonic equations put the truth, about the most
    probable pixel (astropy-healpix centre); cases across the RA = 0 seam and by the pole."""
    skymap = vmf_map(centre, 20.0, seed=43)
    truth = (float(np.mod(centre[0] + offset[0], 2 * np.pi)), centre[1] + offset[1])
    zoom = zoom_axes(sky_map_figure(skymap, truth=truth))
    lon, lat = ahp.healpix_to_lonlat(np.argmax(skymap.probability), skymap.nside,
                                     order="nested")
    expected = snyder_gnomonic(*truth, lon.to_value(u.rad), lat.to_value(u.rad))
    stars = [line for line in zoom.lines if line.get_marker() == "*"]
    assert len(stars) == 1
    got = (float(stars[0].get_xdata()[0]), float(stars[0].get_ydata()[0]))
    assert got == pytest.approx(expected, abs=1e-9)
    left, right = zoom.get_xlim()
    bottom, top = zoom.get_ylim()
    assert right < 0.0 < left  # the window holds the most probable pixel, at the origin
    assert bottom < 0.0 < top


def test_frame_is_written_on_the_map() -> None:
    skymap = vmf_map((1.0, 0.2), 3000.0, seed=44)
    texts = [t.get_text() for t in sky_map_figure(skymap).texts]
    assert any("J2000" in t for t in texts)
    texts = [t.get_text() for t in sky_map_figure(skymap, frame="mean of date").texts]
    assert any("mean of date" in t for t in texts)
    assert not any("J2000" in t for t in texts)
    with pytest.raises(InputError) as info:
        sky_map_figure(skymap, frame=" ")
    assert info.value.field == "frame"
