"""Checks of the flat Lambda-CDM distances against astropy and closed forms.

Sources
-------
* astropy.cosmology (general-purpose reference library): ``Planck18`` and
  ``FlatLambdaCDM``.
* Hogg 1999, arXiv:astro-ph/9905116: distance definitions and the closed form
  of the Einstein-de Sitter luminosity distance.
* Planck Collaboration 2020, A&A 641, A6, Table 2: the default parameters.
"""

from __future__ import annotations

import time

import numpy as np
import pytest
from astropy.cosmology import FlatLambdaCDM as AstropyFlatLambdaCDM
from astropy.cosmology import Planck18

from estimator.cosmology import (
    PLANCK18,
    FlatLambdaCDM,
    comoving_distance,
    luminosity_distance,
    redshift_from_distance,
    source_frame,
)
from estimator.errors import InputError


def test_default_parameters_are_planck18() -> None:
    assert PLANCK18.h0 == pytest.approx(Planck18.H0.value, rel=1e-12)
    assert PLANCK18.omega_m == pytest.approx(Planck18.Om0, rel=1e-12)


def test_luminosity_distance_vs_astropy_planck18() -> None:
    # astropy's Planck18 also holds photons, three neutrino species (one of 0.06 eV)
    # and correspondingly less dark energy. Measured relative difference: 1.1e-6 at
    # z = 0.001, 1e-5 near z = 0.01, 8e-5 near z = 0.1, 6e-4 near z = 1, 1.8e-3 at z = 5.
    z = np.geomspace(0.001, 5.0, 200)
    ours = luminosity_distance(z)
    theirs = Planck18.luminosity_distance(z).value
    np.testing.assert_allclose(ours, theirs, rtol=3e-3)


def test_distances_vs_astropy_same_model() -> None:
    # With radiation switched off astropy's FlatLambdaCDM is the same model as ours;
    # measured agreement 4e-10 (our table) inside z <= 20 and 2e-15 beyond.
    reference = AstropyFlatLambdaCDM(H0=67.66, Om0=0.30966, Tcmb0=0.0)
    z = np.concatenate([np.geomspace(1e-4, 20.0, 300), [25.0, 100.0, 1000.0]])
    np.testing.assert_allclose(
        luminosity_distance(z), reference.luminosity_distance(z).value, rtol=1e-8
    )
    np.testing.assert_allclose(
        comoving_distance(z), reference.comoving_distance(z).value, rtol=1e-8
    )


def test_einstein_de_sitter_closed_form() -> None:
    # Omega_m = 1: D_L = 2 D_H (1+z) (1 - 1/sqrt(1+z)) (Hogg 1999, the Omega_Lambda = 0
    # closed form beside Eq. 16, with Omega_M = 1). Measured agreement 2e-11.
    cosmology = FlatLambdaCDM(h0=70.0, omega_m=1.0)
    z = np.geomspace(1e-4, 1e3, 500)
    expected = 2.0 * (299792.458 / 70.0) * (1.0 + z) * (1.0 - 1.0 / np.sqrt(1.0 + z))
    np.testing.assert_allclose(cosmology.luminosity_distance(z), expected, rtol=1e-6)


def test_empty_universe_limit() -> None:
    # Omega_m = 0 (pure cosmological constant): E(z) = 1 and D_C = D_H z (Hogg 1999, Eq. 15).
    cosmology = FlatLambdaCDM(h0=70.0, omega_m=0.0)
    z = np.geomspace(1e-4, 30.0, 100)
    np.testing.assert_allclose(cosmology.comoving_distance(z), (299792.458 / 70.0) * z, rtol=1e-8)


def test_redshift_round_trip() -> None:
    # measured worst relative error 4e-16
    z = np.concatenate([[0.0], np.geomspace(1e-6, 20.0, 2000), [20.5, 50.0, 1e3, 1e4]])
    back = redshift_from_distance(luminosity_distance(z))
    assert back[0] == 0.0
    np.testing.assert_allclose(back[1:], z[1:], rtol=1e-6)


def test_round_trip_other_cosmology() -> None:
    cosmology = FlatLambdaCDM(h0=73.0, omega_m=0.25)
    z = np.geomspace(1e-3, 20.0, 300)
    back = cosmology.redshift_from_distance(cosmology.luminosity_distance(z))
    np.testing.assert_allclose(back, z, rtol=1e-6)
    assert redshift_from_distance(
        cosmology.luminosity_distance(1.0), cosmology=cosmology
    ) == pytest.approx(1.0, rel=1e-9)


def test_shapes_are_kept() -> None:
    z = np.array([[0.1, 0.2, 0.3], [1.0, 2.0, 3.0]])
    d = luminosity_distance(z)
    assert d.shape == z.shape
    assert redshift_from_distance(d).shape == z.shape
    assert np.ndim(luminosity_distance(0.5)) == 0
    assert np.ndim(redshift_from_distance(1000.0)) == 0


def test_vectorised_calls_are_fast() -> None:
    # 1e5 distances and their inverse take about 0.05 s; a per-element integral
    # (one quadrature per value) takes tens of seconds.
    cosmology = FlatLambdaCDM(h0=68.0, omega_m=0.31)
    z = np.random.default_rng(7).uniform(0.0, 10.0, 100_000)
    start = time.perf_counter()
    back = cosmology.redshift_from_distance(cosmology.luminosity_distance(z))
    elapsed = time.perf_counter() - start
    assert elapsed < 2.0
    np.testing.assert_allclose(back, z, rtol=1e-6, atol=1e-12)


def test_source_frame_mass() -> None:
    assert float(source_frame(30.0, 1.0)) == pytest.approx(15.0)
    np.testing.assert_allclose(source_frame([10.0, 20.0], [0.0, 0.25]), [10.0, 16.0])


@pytest.mark.parametrize("bad", [-0.1, np.nan, np.inf])
def test_bad_redshift_is_rejected(bad: float) -> None:
    with pytest.raises(InputError, match="redshift") as info:
        luminosity_distance([0.1, bad])
    assert info.value.field == "redshift"
    assert "index 1" in str(info.value)


def test_bad_distance_is_rejected() -> None:
    with pytest.raises(InputError, match=r"-5\.0 Mpc"):
        redshift_from_distance(-5.0)


@pytest.mark.parametrize(
    ("h0", "omega_m"), [(0.0, 0.3), (-70.0, 0.3), (70.0, 1.5), (70.0, -0.1), (np.nan, 0.3)]
)
def test_bad_parameters_are_rejected(h0: float, omega_m: float) -> None:
    with pytest.raises(InputError):
        FlatLambdaCDM(h0=h0, omega_m=omega_m)
