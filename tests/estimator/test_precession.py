"""Checks of the precession between mean coordinates of date and J2000.0.

Sources
-------
* astropy (``astropy.coordinates.FK5``, astropy >= 6), the outside reference: an FK5
  frame with ``equinox=Time(gps, format="gps")`` transformed to ``FK5(equinox="J2000")``.
  astropy builds that rotation from ERFA's ``bp06`` precession matrix (IAU 2006 / P03,
  Capitaine et al. 2003, in the Fukushima-Williams angles, without frame bias), the same
  precession model as ``estimator.precession``; the two parameterisations agree to a few
  microarcseconds over centuries (Hilton et al. 2006, Celest. Mech. Dyn. Astron. 94, 351;
  from memory), so the tolerance is 1e-10 rad (20 microarcsec), 1e4 times tighter than the
  1e-6 rad that the difference IAU 1976 vs IAU 2006 would need. Measured: below 1.1e-12 rad.
* pyerfa's ``pmat76`` (IAU 1976 precession, Lieske et al. 1977) for the size of the
  IAU 1976 vs IAU 2006 difference stated in the module docstring.
* TT = GPS + 51.184 s: astropy's ``Time`` (format ``gps`` is TAI - 19 s, TT = TAI +
  32.184 s; common practice).
* A rotation is inverted by its transpose (common practice): the round trip is exact up to
  rounding, 1e-12 rad.
"""

from __future__ import annotations

from collections.abc import Iterator

import astropy.units as u
import erfa
import numpy as np
import pytest
from astropy.coordinates import FK5, SkyCoord
from astropy.time import Time
from astropy.utils import iers
from numpy.typing import NDArray

from estimator.errors import InputError
from estimator.precession import (
    GPS_J2000,
    j2000_to_of_date,
    of_date_to_j2000,
    precession_angles,
)

Array = NDArray[np.float64]
#: Agreement with astropy's FK5 (same IAU 2006 model; module docstring).
ASTROPY_TOL = 1e-10
YEAR = 365.25 * 86400.0


@pytest.fixture(autouse=True)
def _no_iers_download() -> Iterator[None]:
    with iers.conf.set_temp("auto_download", False):
        yield


def unit(ra: Array, dec: Array) -> Array:
    return np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)])


def separation(ra1: Array, dec1: Array, ra2: Array, dec2: Array) -> Array:
    """Angle between directions (rad), atan2 of cross and dot products (exact near 0)."""
    a, b = unit(ra1, dec1), unit(ra2, dec2)
    return np.asarray(np.arctan2(np.linalg.norm(np.cross(a, b, axis=0), axis=0),
                                 np.sum(a * b, axis=0)))


def sky_points(n: int, seed: int) -> tuple[Array, Array]:
    """Isotropic points plus the poles and points on and next to the RA = 0 seam."""
    rng = np.random.default_rng(seed)
    ra = rng.uniform(0.0, 2.0 * np.pi, n)
    dec = np.arcsin(rng.uniform(-1.0, 1.0, n))
    edge_ra = np.array([0.0, 0.0, 0.0, 1e-15, 2.0 * np.pi - 1e-15, np.nextafter(2 * np.pi, 0),
                        1.0, 4.0, 0.0, 3.0])
    edge_dec = np.array([0.0, np.pi / 2, -np.pi / 2, 0.3, -0.3, 0.0,
                         np.pi / 2 - 1e-9, -np.pi / 2 + 1e-9, 1.2, -1.5])
    return np.concatenate([ra, edge_ra]), np.concatenate([dec, edge_dec])


def gps_of_year(year: float) -> float:
    """GPS time (s) of a Julian epoch, from astropy's Time (TT scale)."""
    return float(Time(year, format="jyear", scale="tt").gps)


def astropy_precess(ra: Array, dec: Array, gps: float, *, to_j2000: bool) -> tuple[Array, Array]:
    date = FK5(equinox=Time(gps, format="gps"))
    j2000 = FK5(equinox="J2000")
    start, end = (date, j2000) if to_j2000 else (j2000, date)
    out = SkyCoord(ra * u.rad, dec * u.rad, frame=start).transform_to(end)
    return out.ra.to_value(u.rad), out.dec.to_value(u.rad)


YEARS = [1990.0, 1999.99, 2007.3, 2015.7, 2019.2, 2030.5, 2045.0]


def test_gps_of_j2000_matches_astropy() -> None:
    """J2000.0 = JD 2451545.0 TT (astropy Time), i.e. TT = GPS + 51.184 s."""
    assert Time(2451545.0, format="jd", scale="tt").gps == pytest.approx(GPS_J2000, abs=1e-6)


@pytest.mark.parametrize("year", YEARS)
def test_of_date_to_j2000_matches_astropy_fk5(year: float) -> None:
    gps = gps_of_year(year)
    ra, dec = sky_points(3000, seed=int(year * 10))
    got_ra, got_dec = of_date_to_j2000(ra, dec, gps)
    ref_ra, ref_dec = astropy_precess(ra, dec, gps, to_j2000=True)
    assert separation(got_ra, got_dec, ref_ra, ref_dec).max() < ASTROPY_TOL
    assert np.all((got_ra >= 0.0) & (got_ra < 2.0 * np.pi))
    assert np.all(np.abs(got_dec) <= np.pi / 2)
    # away from the poles the right ascensions themselves agree (modulo 2 pi)
    away = np.abs(ref_dec) < 1.5
    d_ra = np.angle(np.exp(1j * (got_ra[away] - ref_ra[away])))
    assert np.abs(d_ra).max() < 20 * ASTROPY_TOL
    # the precession is not negligible at these epochs, so the check has teeth
    if abs(year - 2000.0) > 5:
        assert separation(ra, dec, ref_ra, ref_dec).max() > 1e-4


@pytest.mark.parametrize("year", YEARS)
def test_j2000_to_of_date_matches_astropy_fk5(year: float) -> None:
    gps = gps_of_year(year)
    ra, dec = sky_points(3000, seed=int(year * 10) + 1)
    got_ra, got_dec = j2000_to_of_date(ra, dec, gps)
    ref_ra, ref_dec = astropy_precess(ra, dec, gps, to_j2000=False)
    assert separation(got_ra, got_dec, ref_ra, ref_dec).max() < ASTROPY_TOL
    assert np.all((got_ra >= 0.0) & (got_ra < 2.0 * np.pi))


@pytest.mark.parametrize("year", [1990.0, 2017.6, 2045.0])
def test_round_trip_is_exact_to_rounding(year: float) -> None:
    """The inverse is the transposed rotation (common practice): 1e-12 rad both ways."""
    gps = gps_of_year(year)
    ra, dec = sky_points(50_000, seed=3)
    back_ra, back_dec = j2000_to_of_date(*of_date_to_j2000(ra, dec, gps), gps)
    assert separation(ra, dec, back_ra, back_dec).max() < 1e-12
    fwd_ra, fwd_dec = of_date_to_j2000(*j2000_to_of_date(ra, dec, gps), gps)
    assert separation(ra, dec, fwd_ra, fwd_dec).max() < 1e-12
    near_seam = (ra < 1e-6) & (np.abs(dec) < 1.0)
    assert np.all((back_ra[near_seam] < 1e-6) | (back_ra[near_seam] > 2 * np.pi - 1e-6))


def test_seam_results_stay_below_two_pi() -> None:
    """Directions on the RA = 0 seam come back in [0, 2 pi), never as 2 pi itself.

    Round trips of points at J2000 RA = 0 land half of the time a rounding error below 0,
    where ``x + 2 pi`` rounds to 2 pi in floating point (IEEE 754; common practice).
    """
    dec = np.linspace(-1.5, 1.5, 2001)
    for year in (1990.0, 2021.0, 2045.0):
        gps = gps_of_year(year)
        back_ra, back_dec = of_date_to_j2000(*j2000_to_of_date(np.zeros_like(dec), dec, gps),
                                             gps)
        assert np.all((back_ra >= 0.0) & (back_ra < 2.0 * np.pi))
        assert np.all((back_ra < 1e-12) | (back_ra > 2.0 * np.pi - 1e-12))
        np.testing.assert_allclose(back_dec, dec, atol=1e-12)


def test_identity_at_j2000() -> None:
    """At the epoch J2000.0 (astropy Time) the frame of date is J2000: the identity."""
    gps = float(Time(2451545.0, format="jd", scale="tt").gps)
    ra, dec = sky_points(2000, seed=5)
    for func in (of_date_to_j2000, j2000_to_of_date):
        out_ra, out_dec = func(ra, dec, gps)
        assert separation(ra, dec, out_ra, out_dec).max() < 1e-9
    zeta, z, theta = precession_angles(gps)
    assert abs(float(zeta + z)) < 1e-15
    assert abs(float(theta)) < 1e-15


def test_celestial_pole_of_date_moves_by_theta() -> None:
    """The pole of date sits at J2000 dec = pi/2 - theta_A, RA = 2 pi - zeta_A: the third row
    of P = R3(-z_A) R2(theta_A) R3(-zeta_A), (sin theta cos zeta, -sin theta sin zeta,
    cos theta) (Lieske et al. 1977, Eq. 4; derived by hand); astropy as cross-check."""
    gps = gps_of_year(2030.0)
    zeta, _, theta = (float(a) for a in precession_angles(gps))
    ra, dec = of_date_to_j2000(np.array([0.0, 2.0]), np.array([np.pi / 2, np.pi / 2]), gps)
    np.testing.assert_allclose(dec, np.pi / 2 - theta, atol=1e-13)
    np.testing.assert_allclose(ra, 2.0 * np.pi - zeta, atol=1e-9)
    ref_ra, ref_dec = astropy_precess(np.array([0.0]), np.array([np.pi / 2]), gps, to_j2000=True)
    assert separation(ra[:1], dec[:1], ref_ra, ref_dec)[0] < ASTROPY_TOL
    # 30 years of precession of the pole: 2004.19 arcsec per century x 0.3 (Capitaine 2003)
    assert np.degrees(theta) * 3600 == pytest.approx(2004.19 * 0.3, rel=1e-3)


def test_iau_1976_precession_differs_by_less_than_a_microradian() -> None:
    """Module docstring: IAU 1976 (pyerfa pmat76) vs IAU 2006 below 1e-6 rad in 1990-2045."""
    ra, dec = sky_points(2000, seed=9)
    worst = 0.0
    for year in np.linspace(1990.0, 2045.0, 12):  # 12 epochs
        t = Time(float(year), format="jyear", scale="tt")
        rp76 = erfa.pmat76(t.jd1, t.jd2)  # J2000 -> mean of date, IAU 1976
        of_date = rp76 @ unit(ra, dec)
        date_ra = np.mod(np.arctan2(of_date[1], of_date[0]), 2 * np.pi)
        date_dec = np.arcsin(np.clip(of_date[2], -1.0, 1.0))
        got = of_date_to_j2000(date_ra, date_dec, float(t.gps))
        worst = max(worst, float(separation(ra, dec, *got).max()))
    assert 1e-8 < worst < 1e-6


def test_per_sample_times_broadcast() -> None:
    """An array of GPS times gives, sample by sample, the scalar-time result."""
    rng = np.random.default_rng(11)
    ra, dec = sky_points(20, seed=12)
    gps = gps_of_year(2020.0) + rng.uniform(-5 * YEAR, 5 * YEAR, ra.size)
    got_ra, got_dec = of_date_to_j2000(ra, dec, gps)
    for i in range(ra.size):  # bounded by the 30 points
        one_ra, one_dec = of_date_to_j2000(ra[i], dec[i], gps[i])
        assert float(separation(got_ra[i], got_dec[i], one_ra, one_dec)) < 1e-15
    grid_ra, grid_dec = of_date_to_j2000(ra.reshape(5, 6), dec.reshape(5, 6), gps[0])
    assert grid_ra.shape == grid_dec.shape == (5, 6)
    same = of_date_to_j2000(ra, dec, np.full(ra.size, gps[0]))
    np.testing.assert_array_equal(same[0], grid_ra.ravel())


@pytest.mark.parametrize(
    ("ra", "dec", "gps", "field"),
    [
        (0.0, 45.0, 1.3e9, "declination"),
        (np.nan, 0.1, 1.3e9, "right_ascension"),
        (0.0, 0.1, np.nan, "gps_time"),
        (0.0, 0.1, GPS_J2000 + 500 * YEAR, "gps_time"),
    ],
)
def test_bad_input_raises(ra: float, dec: float, gps: float, field: str) -> None:
    for func in (of_date_to_j2000, j2000_to_of_date):
        with pytest.raises(InputError) as info:
            func(ra, dec, gps)
        assert info.value.field == field
