"""Precession of equatorial coordinates between the mean equinox of date and J2000.0.

The sampler's right ascension and declination are *mean* coordinates of date: the mean
equator and equinox at the event's GPS time, the frame in which the IAU 1982 Greenwich mean
sidereal time of :func:`estimator.sites.gps_to_gmst` turns them into the Earth-fixed frame.
Telescopes point in J2000 (FK5/ICRS-aligned) coordinates, so reports convert with
:func:`of_date_to_j2000`.

Model: the IAU 2006 precession (P03) of Capitaine, Wallace & Chapront (2003, A&A 412, 567,
Eq. 40; the same series as IERS Conventions 2010, IERS Technical Note 36, Eq. 5.40; from
memory), as the three equatorial angles ``zeta_A``, ``z_A``, ``theta_A``, in arcseconds,
with ``t`` the Julian centuries of TT since J2000.0 (JD 2451545.0 TT)::

    zeta_A  =  2.650545 + 2306.083227 t + 0.2988499 t^2 + 0.01801828 t^3
               - 0.000005971 t^4 - 0.0000003173 t^5
    z_A     = -2.650545 + 2306.077181 t + 1.0927348 t^2 + 0.01826837 t^3
               - 0.000028596 t^4 - 0.0000002904 t^5
    theta_A =             2004.191903 t - 0.4294934 t^2 - 0.04182264 t^3
               - 0.000007089 t^4 - 0.0000001274 t^5

The rotation from J2000 to the mean frame of date is ``P = R3(-z_A) R2(theta_A)
R3(-zeta_A)`` (Lieske, Lederle, Fricke & Morando 1977, A&A 58, 1, Eq. 4; Seidelmann (ed.)
1992, Explanatory Supplement to the Astronomical Almanac, Eq. 3.21-7; from memory), which
in closed form reads (Meeus 1998, Astronomical Algorithms, 2nd ed., Eq. 21.4)::

    A = cos(dec0) sin(ra0 + zeta_A)
    B = cos(theta_A) cos(dec0) cos(ra0 + zeta_A) - sin(theta_A) sin(dec0)
    C = sin(theta_A) cos(dec0) cos(ra0 + zeta_A) + cos(theta_A) sin(dec0)
    ra = atan2(A, B) + z_A,    dec = atan2(C, sqrt(A^2 + B^2))

and its inverse is the transposed rotation ``R3(zeta_A) R2(-theta_A) R3(z_A)``. The
declination is taken with ``atan2`` rather than ``arcsin`` so that it stays accurate to
rounding next to the poles.

The IAU 1976 precession (Lieske et al. 1977) that goes with the IAU 1982 sidereal time
differs from P03 by 0.3 arcsec per century in longitude (Capitaine et al. 2003), below
1e-6 rad over 1990-2045: far inside the sky maps' resolution, so the choice does not
matter here; P03 is the one the reference libraries implement.

Time scale: TT = GPS + 51.184 s, since TAI - GPS = 19 s exactly and TT - TAI = 32.184 s
(common practice); the GPS epoch, 1980-01-06 0h UTC, is 51.184 s after 1980-01-06 0h TT =
JD 2444244.5 TT.

Not included: nutation (up to about 20 arcsec, from memory) - both frames here are *mean*
frames, consistent with the mean sidereal time - and the frame bias between the J2000 mean
frame and ICRS (below 0.03 arcsec, 1.5e-7 rad; Capitaine et al. 2003, from memory).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError

__all__ = ["GPS_J2000", "j2000_to_of_date", "of_date_to_j2000", "precession_angles"]

Array = NDArray[np.float64]

#: GPS time (s) of J2000.0 = JD 2451545.0 TT: (2451545.0 - 2444244.5) days - 51.184 s.
GPS_J2000: float = 7300.5 * 86400.0 - 51.184
_ARCSEC = np.pi / (180.0 * 3600.0)
_TWO_PI = 2.0 * np.pi
_SECONDS_PER_CENTURY = 36525.0 * 86400.0
#: Polynomial coefficients (arcsec; t^0 ... t^5) of Capitaine et al. (2003), Eq. 40.
_ZETA = (2.650545, 2306.083227, 0.2988499, 0.01801828, -0.000005971, -0.0000003173)
_Z = (-2.650545, 2306.077181, 1.0927348, 0.01826837, -0.000028596, -0.0000002904)
_THETA = (0.0, 2004.191903, -0.4294934, -0.04182264, -0.000007089, -0.0000001274)
#: Accepted range of GPS times (s): years 1800-2200, a few centuries about J2000, the span
#: the P03 series is built for (Capitaine et al. 2003; from memory).
_GPS_RANGE = (GPS_J2000 - 2.0 * _SECONDS_PER_CENTURY, GPS_J2000 + 2.0 * _SECONDS_PER_CENTURY)


def precession_angles(gps_time: ArrayLike) -> tuple[Array, Array, Array]:
    """The precession angles ``zeta_A``, ``z_A``, ``theta_A`` (rad) at GPS times (s).

    IAU 2006 (P03) series of Capitaine et al. (2003, Eq. 40; module docstring), ``t`` in
    Julian centuries of TT since J2000.0 with TT = GPS + 51.184 s.

    Raises
    ------
    InputError
        If a GPS time is not finite or lies outside the years 1800-2200.
    """
    gps = np.asarray(gps_time, dtype=float)
    if not np.all(np.isfinite(gps)) or np.any((gps < _GPS_RANGE[0]) | (gps > _GPS_RANGE[1])):
        bad = gps[~(np.isfinite(gps) & (gps >= _GPS_RANGE[0]) & (gps <= _GPS_RANGE[1]))]
        msg = (f"GPS time {bad.ravel()[0]} s is not a finite time between the years 1800 and "
               f"2200 ({_GPS_RANGE[0]:.0f} to {_GPS_RANGE[1]:.0f} s); give the event time in "
               "GPS seconds")
        raise InputError(msg, source="precession", field="gps_time")
    if gps.size > 1 and np.ptp(gps) == 0.0:  # one epoch for all: angles once, broadcast
        gps = gps.ravel()[:1].reshape((1,) * gps.ndim)
    t = (gps - GPS_J2000) / _SECONDS_PER_CENTURY
    return _series(t, _ZETA), _series(t, _Z), _series(t, _THETA)


def _series(t: Array, coefficients: tuple[float, ...]) -> Array:
    """Horner evaluation of ``sum_k c_k t^k`` (arcsec), converted to rad."""
    total = np.zeros_like(t)
    for c in reversed(coefficients):  # six terms
        total = total * t + c
    return total * _ARCSEC


def _check_angles(right_ascension: ArrayLike, declination: ArrayLike) -> tuple[Array, Array]:
    ra = np.asarray(right_ascension, dtype=float)
    dec = np.asarray(declination, dtype=float)
    if not np.all(np.isfinite(ra)):
        msg = "right ascension holds a non-finite value; give finite angles in rad"
        raise InputError(msg, source="precession", field="right_ascension")
    if not np.all(np.isfinite(dec) & (np.abs(dec) <= np.pi / 2)):
        worst = dec.ravel()[np.argmax(~np.isfinite(dec.ravel()) | (np.abs(dec.ravel())
                                                                    > np.pi / 2))]
        msg = (f"declination {worst} rad is outside [-pi/2, pi/2]; give declinations in rad, "
               "not degrees")
        raise InputError(msg, source="precession", field="declination")
    return ra, dec


def _rotate(ra: Array, dec: Array, first: Array, theta: Array, last: Array) -> tuple[Array,
                                                                                    Array]:
    """``R3(-last) R2(theta) R3(-first)`` applied to (ra, dec) (Meeus 1998, Eq. 21.4)."""
    cos_dec, sin_dec = np.cos(dec), np.sin(dec)
    cos_theta, sin_theta = np.cos(theta), np.sin(theta)
    hour = ra + first
    cos_hour = cos_dec * np.cos(hour)
    a = cos_dec * np.sin(hour)
    b = cos_theta * cos_hour - sin_theta * sin_dec
    c = sin_theta * cos_hour + cos_theta * sin_dec
    out_ra = np.arctan2(a, b) + last  # in (-pi - 0.04, pi + 0.04) for years 1800-2200
    out_ra += np.where(out_ra < 0.0, _TWO_PI, 0.0)
    out_ra -= np.where(out_ra >= _TWO_PI, _TWO_PI, 0.0)  # cheaper than np.mod, same result
    return out_ra, np.arctan2(c, np.sqrt(a * a + b * b))


def of_date_to_j2000(right_ascension: ArrayLike, declination: ArrayLike,
                     gps_time: ArrayLike) -> tuple[Array, Array]:
    """Mean equatorial coordinates of date to mean J2000.0 coordinates.

    Applies ``P^T = R3(zeta_A) R2(-theta_A) R3(z_A)`` (Lieske et al. 1977, Eq. 4, with the
    IAU 2006 angles of Capitaine et al. 2003; module docstring). Nutation is not included:
    the input is the *mean* equator and equinox of date.

    Parameters
    ----------
    right_ascension, declination
        Mean coordinates of date (rad), arrays of any broadcast-compatible shapes.
    gps_time
        GPS time (s) of the equinox of date: one value or an array broadcast against the
        angles.

    Returns
    -------
    tuple of ndarray
        J2000.0 right ascension in [0, 2 pi) and declination in [-pi/2, pi/2] (rad), of
        the broadcast shape.

    Raises
    ------
    InputError
        If an angle or time is not finite, ``|declination| > pi/2``, or the time lies
        outside the years 1800-2200.
    """
    ra, dec = _check_angles(right_ascension, declination)
    zeta, z, theta = precession_angles(gps_time)
    return _rotate(ra, dec, -z, -theta, -zeta)


def j2000_to_of_date(right_ascension: ArrayLike, declination: ArrayLike,
                     gps_time: ArrayLike) -> tuple[Array, Array]:
    """Mean J2000.0 equatorial coordinates to mean coordinates of date; inverse of
    :func:`of_date_to_j2000`.

    Applies ``P = R3(-z_A) R2(theta_A) R3(-zeta_A)`` (Lieske et al. 1977, Eq. 4; angles of
    Capitaine et al. 2003). Parameters, returns and errors as :func:`of_date_to_j2000`,
    the input being J2000.0 and the output of date.
    """
    ra, dec = _check_angles(right_ascension, declination)
    zeta, z, theta = precession_angles(gps_time)
    return _rotate(ra, dec, zeta, theta, z)
