"""Detector geometry against astropy, textbook antenna patterns and the site-file rules.

Sources
-------
* astropy (general-purpose reference library): ``EarthLocation.from_geodetic`` on WGS84;
  ``Time`` (GPS -> UTC with its own leap-second table, UT1 from its bundled IERS-B table)
  and ``sidereal_time`` with the IAU 1982 and IAU 2006/2000A models; the ``TETE``,
  ``PrecessedGeocentric``, ``ICRS``, ``ITRS`` and ``AltAz`` frames.
* NIMA TR8350.2, 3rd ed. 2000, Table 3.3: WGS-84 semi-minor axis b = 6356752.3142 m (from memory).
* Thorne 1987, in *300 Years of Gravitation* (Hawking & Israel, eds.): the antenna
  patterns of a right-angle detector and their sky and polarisation average 1/5
  (formulas from memory).
* Anderson, Brady, Creighton & Flanagan 2001, PRD 63, 042003, Appendix B: the
  polarisation basis X, Y written out below (from memory).

astropy is kept offline (``auto_download = False``): only its bundled tables are used.
"""

from __future__ import annotations

import json
import math
import warnings
from collections.abc import Iterator
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import (
    ICRS,
    ITRS,
    TETE,
    AltAz,
    CartesianRepresentation,
    EarthLocation,
    PrecessedGeocentric,
    SkyCoord,
)
from astropy.time import Time
from astropy.utils import iers
from erfa import ErfaWarning

from estimator.errors import InputError
from estimator.io import read_site_file
from estimator.sites import (
    C_LIGHT,
    SHIPPED_SITES,
    Site,
    geodetic_to_ecef,
    gps_to_gmst,
    gps_to_utc_offset,
    light_travel_time,
    site_from_mapping,
)

DEMO_SITES = Path(__file__).resolve().parents[2] / "demo_data" / "sites.toml"
#: GPS times inside astropy's bundled IERS-B table (2011-09-14 and 2024-05-17).
IN_TABLE = (1.0e9, 1.4e9)
#: Right-angle detector at the North Pole with arm 1 along ECEF +x and arm 2 along +y, so
#: that its local frame is the Earth-fixed frame: theta = pi/2 - dec, phi = ra - gmst.
POLE = Site("pole", 90.0, 0.0, 0.0, 180.0, 90.0)


@pytest.fixture(autouse=True, scope="module")
def _offline_iers() -> Iterator[None]:
    with iers.conf.set_temp("auto_download", False):
        yield


def _astropy_position(lat: float, lon: float, h: float) -> np.ndarray:
    loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, h * u.m, ellipsoid="WGS84")
    return np.array([loc.x.to_value(u.m), loc.y.to_value(u.m), loc.z.to_value(u.m)])


def _sky(n: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    ra = rng.uniform(0.0, 2.0 * np.pi, n)
    dec = np.arcsin(rng.uniform(-1.0, 1.0, n))
    return ra, dec, rng.uniform(0.0, np.pi, n)


def _unit(xyz: np.ndarray) -> np.ndarray:
    return np.asarray(xyz / np.linalg.norm(xyz, axis=0))


def _direction(ra: np.ndarray, dec: np.ndarray, angle: float) -> np.ndarray:
    """Earth-fixed unit vector for hour angle ``angle - ra`` (written out independently)."""
    return np.stack([np.cos(dec) * np.cos(ra - angle), np.cos(dec) * np.sin(ra - angle),
                     np.sin(dec)])  # fmt: skip


def _angle(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    sine = np.linalg.norm(np.cross(a, b, axis=0), axis=0)
    return np.asarray(np.arctan2(sine, np.sum(a * b, axis=0)))


# --- positions and arms ----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("lat", "lon", "h"),
    [(0.0, 0.0, 0.0), (90.0, 0.0, 0.0), (-90.0, 45.0, 10.0), (37.25, -121.5, 250.0),
     (-33.9, 300.0, -40.0), (61.0, 179.9, 1200.0), (-12.5, -180.0, 5.0)],
)  # fmt: skip
def test_position_matches_astropy(lat: float, lon: float, h: float) -> None:
    # astropy EarthLocation.from_geodetic, WGS84 ellipsoid: agreement below 1 mm
    ours = geodetic_to_ecef(math.radians(lat), math.radians(lon), h)
    np.testing.assert_allclose(ours, _astropy_position(lat, lon, h), rtol=0, atol=1e-3)


def test_shipped_positions_match_astropy() -> None:
    for s in SHIPPED_SITES.values():  # astropy, WGS84: below 1 mm
        reference = _astropy_position(s.latitude, s.longitude, s.elevation)
        np.testing.assert_allclose(s.position, reference, rtol=0, atol=1e-3)


def test_position_handbook_axes() -> None:
    # WGS-84 a = 6378137 m (defining) and b = 6356752.3142 m (NIMA TR8350.2, Table 3.3; from memory)
    np.testing.assert_allclose(geodetic_to_ecef(0.0, 0.0, 0.0), [6378137.0, 0.0, 0.0], atol=1e-6)
    assert geodetic_to_ecef(math.pi / 2, 0.0, 0.0)[2] == pytest.approx(6356752.3142, abs=1e-4)


@pytest.mark.parametrize(
    ("lat", "lon", "h", "azimuth", "tilt"),
    [(37.3, -120.2, 300.0, 30.0, 0.0), (-51.0, 150.0, 50.0, 200.0, 2.5),
     (80.0, 10.0, 0.0, 100.0, -3.0), (0.0, 250.0, 20.0, 315.0, 0.4)],
)  # fmt: skip
def test_arm_directions_match_astropy_altaz(
    lat: float, lon: float, h: float, azimuth: float, tilt: float
) -> None:
    # Only arm 1 tilted keeps the arms perpendicular, so D = (uu - vv)/2 has eigenvalues
    # -1/2, 0, +1/2 with eigenvectors v, w, u (up to sign). astropy's topocentric ITRS ->
    # AltAz (azimuth from north through east, altitude above the ellipsoid's horizontal)
    # must give arm 1 at (azimuth, tilt) and arm 2 at (azimuth + 90, 0).
    site = Site("x", lat, lon, h, azimuth, azimuth + 90.0, tilt, 0.0)
    values, vectors = np.linalg.eigh(site.tensor)
    np.testing.assert_allclose(values, [-0.5, 0.0, 0.5], atol=1e-12)
    loc = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, h * u.m, ellipsoid="WGS84")
    t = Time(IN_TABLE[0], format="gps")
    for vector, az, alt in ((vectors[:, 2], azimuth, tilt), (vectors[:, 0], azimuth + 90, 0.0)):
        found = []
        for sign in (1.0, -1.0):
            rep = CartesianRepresentation(sign * 1000.0 * vector * u.m)
            seen = SkyCoord(ITRS(rep, obstime=t, location=loc)).transform_to(
                AltAz(obstime=t, location=loc)
            )
            found.append((seen.az.deg, seen.alt.deg))
        assert any(
            abs((a - az + 180.0) % 360.0 - 180.0) < 1e-9 and abs(b - alt) < 1e-9 for a, b in found
        ), (found, az, alt)


def test_site_arrays_are_read_only() -> None:
    site = SHIPPED_SITES["plover"]
    with pytest.raises(ValueError, match="read-only"):
        site.position[0] = 0.0
    with pytest.raises(ValueError, match="read-only"):
        site.tensor[0, 0] = 0.0


# --- time ------------------------------------------------------------------------------------


def test_leap_seconds_match_astropy() -> None:
    # astropy's own leap-second table (IERS Bulletin C), every 2 days from 1980-01-06 to
    # 2026-01, plus 1.5 s before and 0.5 s after each of our table's steps.
    grid = np.arange(1.0, 1.45e9, 2 * 86400.0)
    steps = np.array(_offset_steps(), dtype=float)
    times = np.concatenate([grid, steps - 1.5, steps + 0.5])
    utc = Time(times, format="gps").utc.datetime64  # calendar UTC, leap-second aware
    theirs = np.rint(times - (utc - np.datetime64("1980-01-06")) / np.timedelta64(1, "s"))
    ours = np.array([gps_to_utc_offset(t) for t in times])
    np.testing.assert_array_equal(ours, theirs)


def _offset_steps() -> list[int]:
    """GPS seconds at which our offset changes, found by bisection (bounded loops)."""
    out, low = [], 0
    for k in range(1, 19):
        lo, hi = low, 2_000_000_000
        for _ in range(40):
            mid = (lo + hi) // 2
            lo, hi = (lo, mid) if gps_to_utc_offset(mid) >= k else (mid, hi)
        out.append(hi)
        low = hi
    return out


def test_leap_seconds_future_and_past() -> None:
    # IERS Bulletin C: GPS - UTC = 18 s since 2017-01-01, none announced since (as of
    # writing); GPS epoch 1980-01-06 with 0 s.
    assert gps_to_utc_offset(1_167_264_018) == 18
    assert gps_to_utc_offset(1_167_264_016.5) == 17
    assert gps_to_utc_offset(2.0e9) == 18
    assert gps_to_utc_offset(0.0) == 0
    assert gps_to_utc_offset(-1.0e6) == 0
    with warnings.catch_warnings():  # erfa flags UTC beyond its table + 5 years as dubious
        warnings.simplefilter("ignore", ErfaWarning)
        utc = Time(2.0e9, format="gps").utc.datetime64
    assert round(2.0e9 - (utc - np.datetime64("1980-01-06")) / np.timedelta64(1, "s")) == 18


def _gmst_astropy(gps: float, *, ut1_is_utc: bool, model: str = "IAU1982") -> float:
    t = Time(gps, format="gps")
    if ut1_is_utc:
        t.delta_ut1_utc = 0.0
    return float(t.sidereal_time("mean", "greenwich", model=model).rad)


def _wrap(x: float) -> float:
    return (x + math.pi) % (2.0 * math.pi) - math.pi


@pytest.mark.parametrize("gps", [0.0, 4.0e8, 8.0e8, 1.0e9, 1.167264018e9, 1.4e9])
def test_gmst_matches_astropy_iau1982(gps: float) -> None:
    # astropy sidereal_time("mean", model="IAU1982") with UT1 = UTC forced: the same
    # polynomial, so agreement is to rounding (measured 1e-14 rad; allowed 1e-10 rad)
    assert abs(_wrap(gps_to_gmst(gps) - _gmst_astropy(gps, ut1_is_utc=True))) < 1e-10


def test_gmst_far_future() -> None:
    # 2043-05-23 (GPS 2e9): beyond every leap-second announcement; both sides use the last
    # known offset; erfa warns that such a UTC is dubious.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ErfaWarning)
        reference = _gmst_astropy(2.0e9, ut1_is_utc=True)
    assert abs(_wrap(gps_to_gmst(2.0e9) - reference)) < 1e-10
    assert 0.0 <= gps_to_gmst(2.0e9) < 2.0 * math.pi


@pytest.mark.parametrize("gps", IN_TABLE)
def test_gmst_ut1_neglect_bounded(gps: float) -> None:
    # With astropy's measured UT1 (IERS-B) and its IAU 2006 model the difference is the
    # neglected UT1 - UTC (< 0.9 s, i.e. < 7e-5 rad, the bound stated by gps_to_gmst)
    assert abs(_wrap(gps_to_gmst(gps) - _gmst_astropy(gps, ut1_is_utc=False, model="IAU2006"))) \
        < 7e-5  # fmt: skip


def test_gmst_rejects_non_finite() -> None:
    with pytest.raises(InputError, match="not a finite"):
        gps_to_gmst(float("nan"))


# --- directions and delays ------------------------------------------------------------------


@pytest.mark.parametrize("gps", IN_TABLE)
def test_direction_and_delay_vs_astropy_true_of_date(gps: float) -> None:
    # Coordinates in astropy's TETE (true equator and equinox of date) turned by astropy's
    # Greenwich apparent sidereal time with our hour-angle convention must land on astropy's
    # ITRS direction up to polar motion, which we neglect: below 1 arcsec (from memory;
    # measured 0.44") so delays agree within |r|/c * 4.85e-6 rad = 1.04e-7 s.
    ra, dec, _ = _sky(200, seed=11)
    t = Time(gps, format="gps")
    gast = float(t.sidereal_time("apparent", "greenwich", model="IAU2006A").rad)
    itrs = SkyCoord(ra=ra * u.rad, dec=dec * u.rad, frame=TETE(obstime=t)).transform_to(
        ITRS(obstime=t)
    )
    reference = _unit(itrs.cartesian.xyz.value)
    assert _angle(_direction(ra, dec, gast), reference).max() < 4.85e-6
    for site in SHIPPED_SITES.values():
        expected = -(site.position @ reference) / C_LIGHT
        np.testing.assert_allclose(site.time_delay(ra, dec, gast), expected, rtol=0, atol=1.04e-7)


@pytest.mark.parametrize("gps", IN_TABLE)
def test_mean_of_date_with_our_gmst_within_stated_bound(gps: float) -> None:
    # Our convention end to end: mean-of-date coordinates (astropy PrecessedGeocentric with
    # equinox = obstime) and our GMST. astropy's ITRS includes nutation, polar motion and
    # measured UT1; the module states the neglect at < 1.7e-4 rad, < 3.6 microseconds.
    ra, dec, _ = _sky(200, seed=12)
    t = Time(gps, format="gps")
    frame = PrecessedGeocentric(equinox=t, obstime=t)
    itrs = SkyCoord(ra=ra * u.rad, dec=dec * u.rad, frame=frame).transform_to(ITRS(obstime=t))
    reference = _unit(itrs.cartesian.xyz.value)
    gmst = gps_to_gmst(gps)
    assert _angle(_direction(ra, dec, gmst), reference).max() < 1.7e-4
    site = SHIPPED_SITES["curlew"]
    expected = -(site.position @ reference) / C_LIGHT
    np.testing.assert_allclose(site.time_delay(ra, dec, gmst), expected, rtol=0, atol=3.6e-6)


def test_j2000_coordinates_are_off_by_precession() -> None:
    # ICRS (J2000) coordinates are NOT of date: used as such, the direction is off by the
    # precession since 2000 (50.3 arcsec/yr, common practice) within the annual aberration,
    # nutation and polar motion (< 45 arcsec together). Callers must precess first.
    ra, dec, _ = _sky(400, seed=13)
    t = Time(IN_TABLE[1], format="gps")
    itrs = SkyCoord(ra=ra * u.rad, dec=dec * u.rad, frame=ICRS()).transform_to(ITRS(obstime=t))
    worst = math.degrees(_angle(_direction(ra, dec, gps_to_gmst(IN_TABLE[1])),
                                _unit(itrs.cartesian.xyz.value)).max()) * 3600  # fmt: skip
    precession = 50.3 * (t.jyear - 2000.0)
    assert precession - 45.0 < worst < precession + 45.0


def test_delay_bounded_by_radius_and_extreme_at_zenith() -> None:
    ra, dec, _ = _sky(500, seed=14)
    for site in SHIPPED_SITES.values():  # |r . n| <= |r| (Cauchy-Schwarz)
        bound = float(np.linalg.norm(site.position)) / C_LIGHT
        assert np.abs(site.time_delay(ra, dec, 0.7)).max() <= bound
        # a source at the site's geocentric zenith arrives |r|/c early
        r = site.position
        zenith = site.time_delay(math.atan2(r[1], r[0]) + 0.7, math.asin(r[2] / bound / C_LIGHT),
                                 0.7)  # fmt: skip
        assert float(zenith) == pytest.approx(-bound, abs=1e-12)


def test_light_travel_time_and_baseline_delays() -> None:
    names = list(SHIPPED_SITES)
    for i, first in enumerate(names):
        for second in names[i + 1 :]:
            a, b = SHIPPED_SITES[first], SHIPPED_SITES[second]
            ra_, rb_ = (_astropy_position(s.latitude, s.longitude, s.elevation) for s in (a, b))
            light = float(np.linalg.norm(ra_ - rb_)) / C_LIGHT  # astropy positions
            assert light_travel_time(a, b) == pytest.approx(light, abs=1e-11)
            # a source along the baseline, beyond site a: a hears it |r_a - r_b| / c first
            n = (a.position - b.position) / np.linalg.norm(a.position - b.position)
            gmst = 2.1
            ra, dec = math.atan2(n[1], n[0]) + gmst, math.asin(n[2])
            lead = float(a.time_delay(ra, dec, gmst) - b.time_delay(ra, dec, gmst))
            assert lead == pytest.approx(-light, abs=1e-9)
            lag = float(a.time_delay(ra + math.pi, -dec, gmst) - b.time_delay(ra + math.pi, -dec,
                                                                              gmst))  # fmt: skip
            assert lag == pytest.approx(light, abs=1e-9)
            sky = _sky(300, seed=15)
            spread = a.time_delay(sky[0], sky[1], gmst) - b.time_delay(sky[0], sky[1], gmst)
            assert np.abs(spread).max() <= light  # triangle inequality


def test_pairwise_separation_of_shipped_sites() -> None:
    names = sorted(SHIPPED_SITES)
    assert names == ["curlew", "heron", "plover"]
    for i, first in enumerate(names):
        for second in names[i + 1 :]:
            a, b = SHIPPED_SITES[first], SHIPPED_SITES[second]
            assert light_travel_time(a, b) * C_LIGHT > 3.0e6, (first, second)


# --- antenna patterns ------------------------------------------------------------------------


def _thorne(theta: np.ndarray, phi: np.ndarray, psi: np.ndarray) -> tuple[np.ndarray, ...]:
    """Thorne 1987 patterns of a right-angle detector, arms along x and y (from memory)."""
    a = 0.5 * (1.0 + np.cos(theta) ** 2) * np.cos(2 * phi)
    b = np.cos(theta) * np.sin(2 * phi)
    return (a * np.cos(2 * psi) - b * np.sin(2 * psi), a * np.sin(2 * psi) + b * np.cos(2 * psi))


def test_pole_site_tensor_is_diagonal() -> None:
    # arms along ECEF x and y: D = diag(1/2, -1/2, 0) by the definition (uu - vv)/2
    np.testing.assert_allclose(POLE.tensor, np.diag([0.5, -0.5, 0.0]), atol=1e-15)


def test_pattern_power_matches_thorne() -> None:
    # F+^2 + Fx^2 = 1/4 (1 + cos^2 theta)^2 cos^2 2phi + cos^2 theta sin^2 2phi, free of any
    # polarisation convention (Thorne 1987)
    ra, dec, psi = _sky(2000, seed=21)
    gmst = 0.9
    theta, phi = np.pi / 2 - dec, ra - gmst
    fp, fx = POLE.antenna_pattern(ra, dec, psi, gmst)
    expected = 0.25 * (1 + np.cos(theta) ** 2) ** 2 * np.cos(2 * phi) ** 2 \
        + np.cos(theta) ** 2 * np.sin(2 * phi) ** 2  # fmt: skip
    np.testing.assert_allclose(fp**2 + fx**2, expected, rtol=0, atol=1e-14)


def test_pattern_equals_thorne_with_mapped_angle() -> None:
    # Thorne's X axis at zero angle is e_theta, ours (Anderson et al.) is -e_phi, and the
    # angles turn opposite ways: F(psi) = F_Thorne(pi/2 - psi) (derived from the two bases)
    ra, dec, psi = _sky(2000, seed=22)
    gmst = 4.2
    ours = POLE.antenna_pattern(ra, dec, psi, gmst)
    theirs = _thorne(np.pi / 2 - dec, ra - gmst, np.pi / 2 - psi)
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-14)


def test_pattern_sign_fixed_cases() -> None:
    # Definitions F+ = D:(XX - YY), Fx = D:(XY + YX) with the basis written in the docstring
    # (Anderson et al. 2001): at the pole site's zenith with phi = 0, X = (-sin psi,
    # -cos psi, 0), so psi = pi/2 puts X along arm 1 (F+ = 1) and psi = pi/4 halfway between
    # the arms (F+ = 0, |Fx| = 1). A wave along arm 2 (theta = phi = pi/2) at psi = 0 has
    # X along arm 1, Y vertical: F+ = D:(xx - zz) = 1/2 (common practice).
    gmst = 1.3
    np.testing.assert_allclose(POLE.antenna_pattern(gmst, np.pi / 2, np.pi / 2, gmst),
                               (1.0, 0.0), atol=1e-15)  # fmt: skip
    fp, fx = POLE.antenna_pattern(gmst, np.pi / 2, np.pi / 4, gmst)
    assert abs(float(fp)) < 1e-15
    assert abs(float(fx)) == pytest.approx(1.0, abs=1e-15)
    np.testing.assert_allclose(POLE.antenna_pattern(gmst + np.pi / 2, 0.0, 0.0, gmst),
                               (0.5, 0.0), atol=1e-15)  # fmt: skip


def _anderson_basis(ra: np.ndarray, dec: np.ndarray, psi: np.ndarray,
                    gmst: float) -> tuple[np.ndarray, np.ndarray]:  # fmt: skip
    """X, Y of Anderson et al. 2001, Appendix B (from memory), written out directly."""
    th, ph = np.pi / 2 - dec, ra - gmst
    sp, cp, ss, cs, ct, st = np.sin(ph), np.cos(ph), np.sin(psi), np.cos(psi), np.cos(th), \
        np.sin(th)  # fmt: skip
    x = np.stack([sp * cs - ss * cp * ct, -cp * cs - ss * sp * ct, ss * st])
    y = np.stack([-sp * ss - cs * cp * ct, cp * ss - cs * sp * ct, cs * st])
    return x, y


def test_pattern_equals_tensor_contraction() -> None:
    # the expanded expression against D_ij e_ij with the basis built directly
    ra, dec, psi = _sky(500, seed=23)
    gmst = 2.5
    x, y = _anderson_basis(ra, dec, psi, gmst)
    assert np.allclose(np.cross(x, y, axis=0), -_direction(ra, dec, gmst), atol=1e-14)
    for site in SHIPPED_SITES.values():
        d = site.tensor
        fp = np.einsum("ij,in,jn->n", d, x, x) - np.einsum("ij,in,jn->n", d, y, y)
        fx = 2.0 * np.einsum("ij,in,jn->n", d, x, y)
        np.testing.assert_allclose(site.antenna_pattern(ra, dec, psi, gmst), (fp, fx),
                                   rtol=0, atol=1e-14)  # fmt: skip


def test_zenith_power_and_along_arm() -> None:
    # At the zenith (ellipsoid normal: dec = geodetic latitude, ra - gmst = longitude) a
    # right-angle detector has F+^2 + Fx^2 = 1 (Thorne 1987, theta = 0); heron's arms are
    # tilted by 0.017 and 0.012 deg, which changes this by < 1e-7. Along an arm of the pole
    # site (theta = pi/2, phi = 0) it is 1/4.
    gmst = 0.4
    for site in SHIPPED_SITES.values():
        psi = np.linspace(0.0, np.pi, 7)
        fp, fx = site.antenna_pattern(math.radians(site.longitude) + gmst,
                                      math.radians(site.latitude), psi, gmst)  # fmt: skip
        np.testing.assert_allclose(fp**2 + fx**2, 1.0, atol=1e-6)
    fp, fx = POLE.antenna_pattern(gmst, 0.0, np.linspace(0.0, np.pi, 7), gmst)
    np.testing.assert_allclose(fp**2 + fx**2, 0.25, atol=1e-14)


def test_polarisation_average_and_sky_average() -> None:
    # Over psi the pair (F+, Fx) turns by 2 psi: F+^2 + Fx^2 is constant and the psi-means
    # of F+^2 and Fx^2 are equal. Over the sky and psi, <F+^2> = <Fx^2> = 1/5 for a
    # right-angle detector (Thorne 1987; common practice). Gauss-Legendre in sin(dec) and
    # uniform grids in ra and psi integrate these trigonometric polynomials exactly.
    nodes, weights = np.polynomial.legendre.leggauss(12)
    ra = np.linspace(0.0, 2.0 * np.pi, 16, endpoint=False)[:, None, None]
    dec = np.arcsin(nodes)[None, :, None]
    psi = np.linspace(0.0, np.pi, 8, endpoint=False)[None, None, :]
    for site in SHIPPED_SITES.values():
        fp, fx = site.antenna_pattern(ra, dec, psi, 1.1)
        assert fp.shape == (16, 12, 8)
        power = fp**2 + fx**2
        np.testing.assert_allclose(power, power[..., :1] * np.ones(8), atol=1e-14)
        np.testing.assert_allclose((fp**2).mean(-1), (fx**2).mean(-1), atol=1e-14)
        for f in (fp, fx):  # (1/2) sum of weights over sin(dec) in [-1, 1]
            assert float(np.sum((f**2).mean(axis=(0, 2)) * weights) / 2.0) == pytest.approx(
                0.2, abs=1e-12
            )


def test_shipped_sites_have_perpendicular_arms() -> None:
    # sum D_ij^2 = (1 - (u.v)^2) / 2 for unit arms: 1/2 when the arms are perpendicular
    for site in SHIPPED_SITES.values():
        assert float(np.sum(site.tensor**2)) == pytest.approx(0.5, abs=1e-7)
        np.testing.assert_allclose(site.tensor, site.tensor.T, atol=0)
        assert abs(np.trace(site.tensor)) < 1e-15


def test_scalars_and_broadcasting() -> None:
    site = SHIPPED_SITES["heron"]
    fp, fx = site.antenna_pattern(1.0, 0.2, 0.3, 2.0)
    assert np.shape(fp) == ()
    assert np.shape(fx) == ()
    fp, fx = site.antenna_pattern(np.zeros((4, 1)), np.zeros((1, 3)), 0.1, 2.0)
    assert fp.shape == fx.shape == (4, 3)
    assert site.time_delay([0.1, 0.2], 0.3, 2.0).shape == (2,)


# --- site files ------------------------------------------------------------------------------

GOOD: dict[str, object] = {
    "latitude_deg": 10.5,
    "longitude_deg": -20.25,
    "elevation_m": 120.0,
    "arm1_azimuth_deg": 15.0,
    "arm2_azimuth_deg": 105.0,
}


def _toml(sites: dict[str, dict[str, object]]) -> str:
    lines = []
    for name, fields in sites.items():
        lines.append(f'[site."{name}"]')
        lines += [f"{k} = {json.dumps(v) if not isinstance(v, float) else repr(v)}"
                  for k, v in fields.items()]  # fmt: skip
    return "\n".join(lines) + "\n"


def test_demo_file_holds_the_shipped_sites() -> None:
    sites = read_site_file(DEMO_SITES)
    assert sites == SHIPPED_SITES
    assert list(sites) == list(SHIPPED_SITES)
    assert "invented" in DEMO_SITES.read_text().lower()


def test_json_round_trip(tmp_path: Path) -> None:
    fields = ("latitude", "longitude", "elevation", "arm1_azimuth", "arm2_azimuth",
              "arm1_tilt", "arm2_tilt")  # fmt: skip
    doc = {"site": {name: {f + ("_m" if f == "elevation" else "_deg"): getattr(s, f)
                           for f in fields} for name, s in SHIPPED_SITES.items()}}  # fmt: skip
    path = tmp_path / "sites.json"
    path.write_text(json.dumps(doc))
    assert read_site_file(path) == SHIPPED_SITES
    toml = tmp_path / "one.toml"
    toml.write_text(_toml({"kite-2": GOOD}))
    assert read_site_file(toml) == {"kite-2": Site("kite-2", 10.5, -20.25, 120.0, 15.0, 105.0)}


@pytest.mark.parametrize(
    ("change", "key", "words"),
    [
        ({"latitude_deg": None}, "latitude_deg", "missing; give the geodetic latitude"),
        ({"arm2_azimuth_deg": None}, "arm2_azimuth_deg", "missing"),
        ({"latitude_deg": "north"}, "latitude_deg", "not a number"),
        ({"elevation_m": True}, "elevation_m", "not a number"),
        ({"latitude_deg": 91.0}, "latitude_deg", "outside [-90, 90]"),
        ({"longitude_deg": 360.0}, "longitude_deg", "outside [-180, 360)"),
        ({"longitude_deg": -180.5}, "longitude_deg", "outside"),
        ({"elevation_m": float("nan")}, "elevation_m", "outside"),
        ({"arm1_tilt_deg": 12.0}, "arm1_tilt_deg", "outside [-10, 10]"),
        ({"arm2_azimuth_deg": 20.0}, "arm2_azimuth_deg", "5 deg from parallel"),
        ({"arm2_azimuth_deg": 195.0}, "arm2_azimuth_deg", "from parallel"),
        ({"latitude": 10.5}, "latitude", "unknown field(s) 'latitude'"),
    ],
)
def test_site_errors_name_file_site_and_field(
    change: dict[str, object], key: str, words: str
) -> None:
    fields = {k: v for k, v in {**GOOD, **change}.items() if v is not None}
    with pytest.raises(InputError) as info:
        site_from_mapping("heron", fields, source="sites.toml")
    text = str(info.value)
    assert text.startswith("sites.toml site 'heron': ")
    assert repr(key) in text or key in text
    assert words in text
    assert info.value.field == f"site:heron:{key}"
    assert info.value.source == "sites.toml"


@pytest.mark.parametrize("name", ["he ron", "", "x" * 33, "héron"])
def test_site_name_rules(name: str) -> None:
    with pytest.raises(InputError, match="site name") as info:
        site_from_mapping(name, GOOD, source="s.toml")
    assert info.value.field == f"site:{name}:name"
    assert site_from_mapping("a-b_9", GOOD, source="s.toml").name == "a-b_9"


def _file_error(path: Path, text: str) -> InputError:
    path.write_text(text)
    with pytest.raises(InputError) as info:
        read_site_file(path)
    assert path.name in str(info.value)
    return info.value


def test_file_errors(tmp_path: Path) -> None:
    assert "use .toml or .json" in str(_file_error(tmp_path / "sites.yaml", "site: {}"))
    assert "empty" in str(_file_error(tmp_path / "a.toml", "  \n"))
    err = _file_error(tmp_path / "b.toml", "[site.heron]\nlatitude_deg = 1.0\nlongitude_deg = =\n")
    assert err.where == "line 3, column 17"
    assert err.field == "sites"
    err = _file_error(tmp_path / "c.json", '{"site": {"heron": {"latitude_deg": 1.0,}}}')
    assert err.where is not None
    assert err.where.startswith("line 1, column")
    err = _file_error(tmp_path / "d.json", '{"site": {"heron": {}, "heron": {}}}')
    assert "'heron' appears twice" in str(err)
    assert "found a JSON list" in str(_file_error(tmp_path / "e.json", "[1, 2]"))
    err = _file_error(tmp_path / "f.toml", "[sites.heron]\nlatitude_deg = 1.0\n")
    assert "unknown top-level key(s) 'sites'" in str(err)
    assert "no sites found" in str(_file_error(tmp_path / "g.toml", "# nothing here\n"))
    assert "no sites found" in str(_file_error(tmp_path / "h.json", '{"site": {}}'))
    assert "'site' holds a int" in str(_file_error(tmp_path / "i.toml", "site = 3\n"))
    err = _file_error(tmp_path / "j.toml", "[site]\nheron = 5\n")
    assert err.field == "site:heron:name"
    assert "table" in str(err)
    err = _file_error(tmp_path / "k.toml", _toml({"heron": {**GOOD, "latitude_deg": 95.0}}))
    assert "site 'heron'" in str(err)
    assert err.field == "site:heron:latitude_deg"
    (tmp_path / "l.toml").write_bytes(b"\xff\xfe[site]")
    with pytest.raises(InputError, match="UTF-8"):
        read_site_file(tmp_path / "l.toml")
    with pytest.raises(InputError, match="cannot read"):
        read_site_file(tmp_path / "missing.toml")
