"""Consistency checks of segment, spectrum and settings: each failure names its field and fix."""

from __future__ import annotations

import numpy as np
import pytest

from estimator.data import NoiseSpectrum, StrainSegment
from estimator.errors import InputError
from estimator.validation import check_analysis_inputs, default_f_high

START = 1_000_000_000.0


def _segment(duration: float = 32.0, fs: float = 4096.0) -> StrainSegment:
    n = int(duration * fs)
    x = np.random.default_rng(0).normal(size=n) * 1e-21
    return StrainSegment(strain=x, sample_rate=fs, start_time=START, source="seg.txt")


def _spectrum(lo: float = 0.0, hi: float = 2048.0, value: float = 1e-46) -> NoiseSpectrum:
    f = np.linspace(lo, hi, 513)
    return NoiseSpectrum(frequencies=f, psd=np.full(f.size, value), source="psd.txt")


def _fails(field: str, segment: StrainSegment | None = None,
           spectrum: NoiseSpectrum | None = None, **settings: float) -> str:  # fmt: skip
    options = {"trigger_time": START + 16.0, "f_low": 20.0, "f_high": 1000.0, **settings}
    with pytest.raises(InputError) as info:
        check_analysis_inputs(segment or _segment(), spectrum, **options)
    assert info.value.field == field
    return str(info.value)


def test_good_inputs_pass() -> None:
    seg = _segment()
    check_analysis_inputs(seg, _spectrum(), trigger_time=START + 16.0, f_low=20.0, f_high=1000.0)
    check_analysis_inputs(seg, None, trigger_time=START + 1.1, f_low=20.0, f_high=1800.0)


def test_default_f_high() -> None:
    # Nyquist frequency sample_rate / 2 (Shannon 1949, Proc. IRE 37, 10); 90% of it.
    assert default_f_high(_segment(fs=4096.0)) == pytest.approx(0.9 * 2048.0)
    assert default_f_high(_segment(fs=4096.0), _spectrum(hi=1000.0)) == 1000.0
    assert default_f_high(_segment(fs=1024.0), _spectrum(hi=2048.0)) == pytest.approx(460.8)


def test_trigger_outside_or_near_the_edges() -> None:
    text = _fails("trigger_time", trigger_time=START + 40.0)
    assert "trigger time 1000000040.000000 s is outside the segment" in text
    assert "[1000000000.000000, 1000000032.000000] s" in text
    text = _fails("trigger_time", trigger_time=START + 0.5)
    assert "is 0.5 s from the segment start; at least 1.1 s is needed" in text
    assert "(edge margin 1 s + time window 0.1 s)" in text
    text = _fails("trigger_time", trigger_time=START + 31.5, time_window=0.2)
    assert "is 0.5 s from the segment end; at least 1.2 s is needed" in text
    assert "trigger_time = nan is not a finite number" in _fails(
        "trigger_time", trigger_time=float("nan")
    )
    assert "edge_margin = -1.0 s is not a number >= 0" in _fails("trigger_time", edge_margin=-1.0)


def test_band_limits() -> None:
    assert "f_low = 0 Hz must be above 0 Hz" in _fails("f_low", f_low=0.0)
    assert "f_low = -5 Hz" in _fails("f_low", f_low=-5.0)
    assert "f_low = 300 Hz must be below f_high = 200 Hz" in _fails("f_low", f_low=300.0,
                                                                     f_high=200.0)  # fmt: skip
    assert "f_high = inf is not a finite number" in _fails("f_high", f_high=float("inf"))


def test_f_high_above_nyquist_suggests_a_value() -> None:
    text = _fails("f_high", segment=_segment(fs=1024.0), f_high=600.0)
    assert "f_high = 600 Hz is not below the Nyquist frequency 512 Hz" in text
    assert "use f_high = 460.8 Hz or less" in text


def test_segment_too_short_for_the_band() -> None:
    text = _fails("strain", segment=_segment(duration=3.0), trigger_time=START + 1.5)
    assert "the segment lasts 3 s, shorter than the 4 s needed" in text
    text = _fails("strain", segment=_segment(duration=8.0, fs=256.0), trigger_time=START + 4.0,
                  f_low=0.25, f_high=100.0)  # fmt: skip
    assert "shorter than the 16 s needed" in text
    assert "4 cycles of f_low = 0.25 Hz" in text


def test_spectrum_must_cover_the_band_and_be_positive() -> None:
    text = _fails("psd", spectrum=_spectrum(lo=30.0, hi=1000.0), f_high=1500.0)
    assert "the noise spectrum covers 30-1000 Hz, the analysis needs 20-1500 Hz" in text
    assert "psd.txt" in text
    spec = _spectrum()
    psd = spec.psd.copy()
    psd[100] = 0.0
    zero = NoiseSpectrum(frequencies=spec.frequencies, psd=psd, source="psd.txt")
    text = _fails("psd", spectrum=zero)
    assert f"the PSD is 0 at {spec.frequencies[100]:g} Hz, inside the analysis band" in text
    psd[100] = 1e-46
    psd[1] = 0.0  # 4 Hz: outside the 20-1000 Hz band, so allowed
    check_analysis_inputs(_segment(), NoiseSpectrum(frequencies=spec.frequencies, psd=psd),
                          trigger_time=START + 16.0, f_low=20.0, f_high=1000.0)  # fmt: skip
