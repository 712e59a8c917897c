"""Network input checks: each failure names the detector and the field, and says how to fix it.

Outside reference: the largest arrival delay from the geocentre is the Earth's radius over
the speed of light, ~21.3 ms (WGS-84 equatorial radius 6378.137 km, NIMA TR8350.2 Table 3.1;
c exact by the SI definition), checked against astropy's WGS-84 geocentric positions.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import EarthLocation

from estimator.data import NoiseSpectrum, StrainSegment
from estimator.errors import InputError
from estimator.network_validation import check_network_inputs, max_site_delay
from estimator.sites import SHIPPED_SITES, Site

START = 1_000_000_000.0
TRIGGER = START + 8.0


@dataclass(frozen=True)
class _Input:
    """Stands for ``estimator.network_analysis.DetectorInput`` (same three attributes)."""

    site: Site
    segment: StrainSegment
    spectrum: NoiseSpectrum | None


def _spectrum() -> NoiseSpectrum:
    f = np.linspace(0.0, 1024.0, 257)
    return NoiseSpectrum(frequencies=f, psd=np.full(f.size, 1e-46), source="psd.csv")


def _input(
    name: str,
    *,
    fs: float = 1024.0,
    start: float = START,
    duration: float = 16.0,
    psd: bool = True,
    label: str | None = None,
) -> _Input:
    strain = np.random.default_rng(0).normal(size=round(duration * fs)) * 1e-21
    segment = StrainSegment(strain, fs, start, source=f"{name}.csv", detector=label or name)
    return _Input(SHIPPED_SITES[name], segment, _spectrum() if psd else None)


def _network(**changes: dict[str, object]) -> list[_Input]:
    return [_input(n, **changes.get(n, {})) for n in ("heron", "plover", "curlew")]  # type: ignore[arg-type]


def _fails(inputs: list[_Input], field: str, **options: object) -> str:
    with pytest.raises(InputError) as info:
        check_network_inputs(inputs, trigger_time=options.pop("trigger", TRIGGER), **options)  # type: ignore[arg-type]
    assert info.value.field == field
    return str(info.value)


def test_good_network_passes() -> None:
    check_network_inputs(_network(), trigger_time=TRIGGER, known_sites=SHIPPED_SITES)
    no_psd = _network(**{n: {"psd": False} for n in ("heron", "plover", "curlew")})
    check_network_inputs(no_psd, trigger_time=TRIGGER)
    check_network_inputs([_input("plover")], trigger_time=TRIGGER)


def test_no_detector() -> None:
    assert "at least one detector" in _fails([], "detectors")


def test_same_name_twice() -> None:
    text = _fails([*_network(), _input("plover")], "detector:plover")
    assert "'plover' is given twice" in text


def test_unknown_site_lists_the_known_ones() -> None:
    known = {k: v for k, v in SHIPPED_SITES.items() if k != "curlew"}
    text = _fails(_network(), "detector:curlew", known_sites=known)
    assert "'curlew' is not a known site (known: heron, plover)" in text


def test_segment_of_another_detector() -> None:
    text = _fails(_network(plover={"label": "heron"}), "detector:plover")
    assert "segment of 'heron'" in text
    assert "plover.csv" in text


def test_psd_for_only_some_detectors() -> None:
    text = _fails(_network(plover={"psd": False}, curlew={"psd": False}), "detector:plover:psd")
    assert "given for heron but not for plover, curlew" in text
    assert "every detector, or for none" in text


def test_mismatched_sample_rates() -> None:
    text = _fails(_network(curlew={"fs": 2048.0}), "detector:curlew:strain")
    assert "'curlew' is sampled at 2048 Hz and detector 'heron' at 1024 Hz" in text
    assert "resample 'curlew' to 1024 Hz" in text


def test_segments_that_do_not_overlap() -> None:
    text = _fails(_network(plover={"start": START + 20.0}), "detector:plover:strain")
    assert "'heron' ([1000000000.000000, 1000000016.000000] s)" in text
    assert "'plover' ([1000000020.000000, 1000000036.000000] s) do not overlap" in text


@pytest.mark.parametrize(
    ("changes", "trigger", "field", "words"),
    [
        # the common span is [START + 7, START + 16]: 1 s before the trigger, < 1.121 s
        ({"curlew": {"start": START + 7.0}}, TRIGGER, "curlew", "start of detector 'curlew'"),
        ({"heron": {"duration": 9.0}}, TRIGGER, "heron", "is 1 s before the end of detector"),
        # equal spans: the first detector is named
        ({}, START + 30.0, "heron", "after the end of detector 'heron'"),
        ({}, START - 1.0, "heron", "before the start of detector 'heron'"),
    ],
)
def test_common_span_must_hold_the_trigger(
    changes: dict[str, dict[str, object]], trigger: float, field: str, words: str
) -> None:
    text = _fails(_network(**changes), f"detector:{field}:strain", trigger=trigger)
    assert words in text
    assert "edge margin + time window 1.1 s + largest site delay 21.3 ms" in text


def test_a_margin_just_enough_passes() -> None:
    # 1.1 s + 21.3 ms needed; 1.13 s given on the later side
    check_network_inputs(_network(heron={"duration": 9.13}), trigger_time=TRIGGER)


def test_non_finite_settings() -> None:
    assert "not a finite GPS time" in _fails(_network(), "trigger_time", trigger=float("nan"))
    assert "time_window = -1.0 s" in _fails(_network(), "trigger_time", time_window=-1.0)


def test_largest_delay_against_astropy_wgs84() -> None:
    # astropy.coordinates.EarthLocation.from_geodetic (WGS-84) as the outside reference.
    sites = list(SHIPPED_SITES.values())
    radii = [
        EarthLocation.from_geodetic(
            s.longitude * u.deg, s.latitude * u.deg, s.elevation * u.m, ellipsoid="WGS84"
        ).geocentric
        for s in sites
    ]
    expected = max(float(np.sqrt(sum(c.to_value(u.m) ** 2 for c in r))) for r in radii)
    got = max_site_delay([s.position for s in sites])
    assert got == pytest.approx(expected / 299_792_458.0, rel=1e-9)
    assert 0.0211 < got < 0.0214  # between the polar and equatorial radius over c
