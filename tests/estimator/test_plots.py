"""Checks of the report figures.

Sources
-------
* PNG specification (W3C Recommendation, Portable Network Graphics, 2nd ed., 2003),
  sections 5.2 and 11.2.2: the 8-byte signature and the IHDR chunk holding width and
  height as big-endian 32-bit integers. Parsed here with ``struct``, independently
  of matplotlib; the pixels are decoded with ``matplotlib.image.imread``.
* Fourier analysis (common practice): a pure tone of frequency ``f0`` puts all its
  energy at ``f0``; a Gaussian-windowed burst centred at ``t0`` has its envelope
  peak at ``t0``.
* The exponential distribution of the squared modulus of a complex Gaussian
  variable (any probability handbook, e.g. Papoulis & Pillai 2002, Probability,
  Random Variables and Stochastic Processes, 4th ed., section 6-3): its median is
  ``ln 2`` times its mean.
"""

from __future__ import annotations

import struct
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest
from numpy.typing import NDArray

from estimator import plots
from estimator.errors import InputError

SIGNATURE = b"\x89PNG\r\n\x1a\n"
RATE = 4096.0
LABELS = {
    "chirp_mass": "chirp mass (M☉)",
    "mass_ratio": "mass ratio q",
    "luminosity_distance": "luminosity distance (Mpc)",
    "coalescence_time": "t_c − trigger (ms)",
}


def png_size(path: Path) -> tuple[int, int]:
    """(width, height) from the IHDR chunk (PNG spec 11.2.2)."""
    head = path.read_bytes()[:24]
    assert head[:8] == SIGNATURE
    assert head[12:16] == b"IHDR"
    width, height = struct.unpack(">II", head[16:24])
    return int(width), int(height)


def check_png(path: Path, returned: Path, size_inches: tuple[float, float]) -> NDArray[np.float64]:
    """The PNG exists, has the promised pixel size, decodes and is not blank."""
    assert returned == path
    width, height = png_size(path)
    assert width == pytest.approx(size_inches[0] * plots.DPI, abs=1)
    assert height == pytest.approx(size_inches[1] * plots.DPI, abs=1)
    pixels = np.asarray(mpimg.imread(path), dtype=float)
    assert pixels.shape[:2] == (height, width)
    assert pixels[..., :3].std() > 0.05  # drawn on, not a blank page
    return pixels


def has_colour(pixels: NDArray[np.float64], hex_colour: str, tol: float = 0.04) -> bool:
    rgb = np.array([int(hex_colour[i:i + 2], 16) / 255.0 for i in (1, 3, 5)])
    return bool(np.any(np.all(np.abs(pixels[..., :3] - rgb) < tol, axis=-1)))


@pytest.fixture
def series() -> dict[str, NDArray[np.float64]]:
    rng = np.random.default_rng(20240611)
    t = np.arange(int(8 * RATE)) / RATE - 7.0
    # A linear chirp from 40 to 300 Hz ending at t = 0, amplitude 1 noise sigma.
    f_of_t = 40.0 + (300.0 - 40.0) * (t + 2.0) / 2.0
    model = np.where((t > -2.0) & (t < 0.0), np.cos(2 * np.pi * np.cumsum(f_of_t) / RATE), 0.0)
    return {"t": t, "model": model, "data": model + rng.standard_normal(t.size)}


@pytest.fixture
def samples() -> dict[str, NDArray[np.float64]]:
    rng = np.random.default_rng(7)
    n = 4000
    return {
        "chirp_mass": 1.19754 + 7e-5 * rng.standard_normal(n),
        "mass_ratio": rng.uniform(0.5, 1.0, n),
        "luminosity_distance": 40.0 + 8.0 * rng.standard_normal(n),
        "coalescence_time": 0.3 * rng.standard_normal(n),
    }


def test_corner_plot_writes_png_and_leaves_pyplot_alone(
    tmp_path: Path, samples: dict[str, NDArray[np.float64]]
) -> None:
    import matplotlib.pyplot as plt

    before = plt.get_fignums()
    out = tmp_path / "corner.png"
    returned = plots.corner_plot(samples, out, labels=LABELS, truths={"chirp_mass": 1.19754})
    side = 1.6 * 4 + 0.9
    pixels = check_png(out, returned, (side, side))
    assert has_colour(pixels, plots.PALETTE["model"])
    assert has_colour(pixels, plots.PALETTE["truth"])
    assert plt.get_fignums() == before


def test_corner_plot_rejects_bad_samples(
    tmp_path: Path, samples: dict[str, NDArray[np.float64]]
) -> None:
    with pytest.raises(InputError, match="single value"):
        plots.corner_plot({**samples, "mass_ratio": np.ones(4000)}, tmp_path / "c.png",
                          labels=LABELS)
    with pytest.raises(InputError, match="lengths differ"):
        plots.corner_plot({**samples, "mass_ratio": np.ones(10)}, tmp_path / "c.png",
                          labels=LABELS)
    bad = samples["chirp_mass"].copy()
    bad[3] = np.nan
    with pytest.raises(InputError, match="NaN"):
        plots.corner_plot({**samples, "chirp_mass": bad}, tmp_path / "c.png", labels=LABELS)


def test_whitened_plot(tmp_path: Path, series: dict[str, NDArray[np.float64]]) -> None:
    out = tmp_path / "whitened.png"
    returned = plots.whitened_plot(series["t"], series["data"], series["model"], out,
                                   band=(30.0, 400.0), title="drill")
    pixels = check_png(out, returned, (7.2, 3.0))
    assert has_colour(pixels, plots.PALETTE["model"])
    with pytest.raises(InputError, match="Nyquist"):
        plots.whitened_plot(series["t"], series["data"], series["model"], out,
                            band=(30.0, 3000.0))
    with pytest.raises(InputError, match="window"):
        plots.whitened_plot(series["t"], series["data"], series["model"], out,
                            window=(5.0, 6.0))


def test_time_frequency_plot(tmp_path: Path, series: dict[str, NDArray[np.float64]]) -> None:
    out = tmp_path / "tf.png"
    track_t = np.linspace(-2.0, 0.0, 50)
    returned = plots.time_frequency_plot(series["t"], series["data"], RATE, track_t,
                                         40.0 + 130.0 * (track_t + 2.0), out,
                                         f_low=20.0, f_high=1024.0)
    pixels = check_png(out, returned, (7.2, 3.4))
    assert has_colour(pixels, plots.PALETTE["accent"], tol=0.08)
    with pytest.raises(InputError, match="f_low"):
        plots.time_frequency_plot(series["t"], series["data"], RATE, track_t, track_t, out,
                                  f_low=100.0, f_high=50.0)


def test_spectrum_plot(tmp_path: Path) -> None:
    f = np.linspace(0.0, 2048.0, 2049)
    psd = np.where(f > 0, 1e-46 * (1.0 + (np.maximum(f, 1.0) / 40.0) ** -4), 0.0)
    rng = np.random.default_rng(3)
    asd = np.sqrt(psd) * (1.0 + 0.2 * rng.standard_normal(f.size) ** 2)
    out = tmp_path / "spectrum.png"
    returned = plots.spectrum_plot(f, psd, f, asd, out, f_low=20.0, f_high=1024.0)
    pixels = check_png(out, returned, (7.2, 3.4))
    assert has_colour(pixels, plots.PALETTE["model"])
    with pytest.raises(InputError, match="lengths differ"):
        plots.spectrum_plot(f, psd[:-1], f, asd, out, f_low=20.0, f_high=1024.0)


@pytest.mark.parametrize("walkers", [24, 64])  # all walkers drawn; 32 of 64 drawn
def test_trace_plot(tmp_path: Path, walkers: int) -> None:
    rng = np.random.default_rng(11)
    chain = rng.standard_normal((1500, walkers, 4))
    chain[:300] += np.linspace(4.0, 0.0, 300)[:, None, None]
    out = tmp_path / "traces.png"
    names = list(LABELS)
    returned = plots.trace_plot(chain, names, out, labels=LABELS, burn_in=300)
    check_png(out, returned, (7.2, 1.35 * 4 + 0.6))
    with pytest.raises(InputError, match="burn_in"):
        plots.trace_plot(chain, names, out, labels=LABELS, burn_in=2000)
    with pytest.raises(InputError, match="shape"):
        plots.trace_plot(chain, names[:3], out, labels=LABELS, burn_in=300)


def test_energy_map_finds_tone_frequency_and_burst_time() -> None:
    # Each row is normalised by its own noise level, so the tones ride on white noise.
    t = np.arange(int(4 * RATE)) / RATE
    noise = np.random.default_rng(8).standard_normal(t.size)
    freqs = np.geomspace(20.0, 1000.0, 120)
    tone = 5.0 * np.exp(-0.5 * ((t - 2.0) / 0.1) ** 2) * np.sin(2 * np.pi * 137.0 * t)
    energy = plots.normalised_energy_map(tone + noise, RATE, freqs, q=8.0)
    row = int(np.argmax(energy[:, 8192]))
    spacing = freqs[1] / freqs[0]  # neighbouring rows differ by this factor
    assert freqs[row] == pytest.approx(137.0, rel=spacing - 1.0)
    burst = 20.0 * np.exp(-0.5 * ((t - 1.7) / 0.01) ** 2) * np.cos(2 * np.pi * 300.0 * t)
    energy = plots.normalised_energy_map(burst + noise, RATE, np.array([300.0]), q=8.0)[0]
    assert t[int(np.argmax(energy))] == pytest.approx(1.7, abs=1e-3)


def test_energy_map_of_white_noise_has_unit_mean() -> None:
    # Normalised by median / ln 2, exponential energies average 1. Measured over 200
    # seeds: the mean over rows 200-1000 Hz of 8 s at 4096 Hz scatters by 0.0076 (1 sigma,
    # mean 0.9995); the 0.04 tolerance is 5.3 sigma, a false-alarm rate of about 1e-7
    # (Gaussian approximation).
    rng = np.random.default_rng(99)
    noise = rng.standard_normal(int(8 * RATE))
    energy = plots.normalised_energy_map(noise, RATE, np.geomspace(200.0, 1000.0, 12), q=8.0)
    assert float(energy.mean()) == pytest.approx(1.0, abs=0.04)
    with pytest.raises(InputError, match="Nyquist"):
        plots.normalised_energy_map(noise, RATE, np.array([3000.0]), q=8.0)


