"""Reading strain and noise spectra: round trips of each format, a clear error per bad input."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pytest

from estimator.errors import InputError
from estimator.io import read_psd, read_strain, sha256_file

GPS = 1_000_000_000.0


def _strain(n: int, seed: int = 1) -> np.ndarray:
    return np.random.default_rng(seed).normal(size=n) * 1e-21


def _two_column(path: Path, times: np.ndarray, strain: np.ndarray, *, fmt: str = "{!r}",
                sep: str = ",", head: str = "") -> Path:  # fmt: skip
    rows = (
        f"{fmt.format(t)}{sep}{h!r}" for t, h in zip(times.tolist(), strain.tolist(), strict=True)
    )
    path.write_text(head + "\n".join(rows) + "\n")
    return path


def _error(path: Path, **options: object) -> InputError:
    with pytest.raises(InputError) as info:
        read_strain(path, **options)  # type: ignore[arg-type]
    assert info.value.field == "strain"
    assert path.name in str(info.value)
    return info.value


# --- good inputs ---------------------------------------------------------------------------


@pytest.mark.parametrize("sep", [",", " ", "\t", ";", "   ", ", ", " \t "])
def test_two_column_round_trip_with_every_delimiter(tmp_path: Path, sep: str) -> None:
    h = _strain(2048)
    t = GPS + np.arange(h.size) / 1024.0
    seg = read_strain(_two_column(tmp_path / "s.txt", t, h, sep=sep), detector="site-A")
    np.testing.assert_array_equal(seg.strain, h)  # 17 significant digits read back exactly
    assert seg.sample_rate == 1024.0
    assert seg.start_time == pytest.approx(GPS, abs=1e-6)
    assert (seg.source, seg.detector) == ("s.txt", "site-A")


def test_one_column_round_trip(tmp_path: Path) -> None:
    h = _strain(3000)
    path = tmp_path / "one.csv"
    path.write_text("\n".join(map(repr, h.tolist())) + "\n")
    seg = read_strain(path, sample_rate=512.0, start_time=GPS + 0.25)
    np.testing.assert_array_equal(seg.strain, h)
    assert (seg.sample_rate, seg.start_time, seg.strain.size) == (512.0, GPS + 0.25, 3000)


def test_npy_and_npz_round_trip(tmp_path: Path) -> None:
    h = _strain(5000)
    np.save(tmp_path / "s.npy", h)
    seg = read_strain(tmp_path / "s.npy", sample_rate=2048.0, start_time=GPS)
    np.testing.assert_array_equal(seg.strain, h)
    assert (seg.sample_rate, seg.start_time) == (2048.0, GPS)
    np.savez(tmp_path / "s.npz", strain=h, sample_rate=2048.0, start_time=GPS)
    seg = read_strain(tmp_path / "s.npz")
    np.testing.assert_array_equal(seg.strain, h)
    assert (seg.sample_rate, seg.start_time) == (2048.0, GPS)
    # the format is recognised from the content, not the name
    (tmp_path / "upload.bin").write_bytes((tmp_path / "s.npz").read_bytes())
    assert read_strain(tmp_path / "upload.bin").strain.size == 5000


def test_microsecond_rounded_gps_stamps_give_exactly_4096_hz(tmp_path: Path) -> None:
    h = _strain(4096 * 8)
    t = GPS + np.arange(h.size) / 4096.0  # step 244.140625 us, written to the microsecond
    path = _two_column(tmp_path / "us.txt", t, h, fmt="{:.6f}")
    assert "1000000000.000244," in path.read_text()
    seg = read_strain(path)
    assert seg.sample_rate == 4096.0
    assert seg.start_time == pytest.approx(GPS, abs=1e-6)
    np.testing.assert_array_equal(seg.strain, h)


def test_non_integer_rate_is_kept(tmp_path: Path) -> None:
    h = _strain(1000)
    seg = read_strain(_two_column(tmp_path / "r.txt", GPS + np.arange(1000) / 1000.5, h))
    # GPS stamps near 1e9 s carry float64 rounding of ~1e-7 s over a 1 s span
    assert seg.sample_rate == pytest.approx(1000.5, rel=1e-6)
    assert type(seg.sample_rate) is float


def test_jitter_below_tolerance_accepted_above_rejected(tmp_path: Path) -> None:
    rng = np.random.default_rng(7)
    n, fs = 4096, 256.0
    jitter = rng.uniform(-0.09, 0.09, n)
    jitter[[0, -1]] = 0.0  # exact end points, so that the span gives exactly 256 Hz
    t = GPS + (np.arange(n) + jitter) / fs
    seg = read_strain(_two_column(tmp_path / "ok.txt", t, _strain(n)))
    assert seg.sample_rate == fs
    jitter[100] = 0.13  # one stamp 0.13 of a step off: above the 0.1 tolerance
    bad = _two_column(tmp_path / "bad.txt", GPS + (np.arange(n) + jitter) / fs, _strain(n))
    err = _error(bad)
    assert err.where == "line 101"
    assert "step off the grid" in str(err)
    assert "tolerance 0.1" in str(err)
    assert read_strain(bad, jitter_tolerance=0.15).sample_rate == fs


def test_header_comments_blank_lines_and_crlf(tmp_path: Path) -> None:
    h = _strain(6)
    t = GPS + np.arange(6) / 16.0
    rows = [f"{a!r},{b!r}" for a, b in zip(t.tolist(), h.tolist(), strict=True)]
    text = ["# made by a test", "% another comment", "", "time,strain", *rows[:3],
            "  // a comment in the middle", "", *rows[3:], "# trailing comment", ""]  # fmt: skip
    path = tmp_path / "h.csv"
    path.write_bytes("\r\n".join(text).encode())
    seg = read_strain(path)
    np.testing.assert_array_equal(seg.strain, h)
    assert seg.sample_rate == 16.0


def test_non_power_of_two_length(tmp_path: Path) -> None:
    h = _strain(3001)
    seg = read_strain(_two_column(tmp_path / "odd.txt", GPS + np.arange(3001) / 1024.0, h))
    assert seg.strain.size == 3001
    assert seg.duration == pytest.approx(3001 / 1024.0)


def test_options_that_agree_with_a_two_column_file_are_accepted(tmp_path: Path) -> None:
    path = _two_column(tmp_path / "s.txt", GPS + np.arange(64) / 64.0, _strain(64))
    seg = read_strain(path, sample_rate=64.0, start_time=GPS)
    assert (seg.sample_rate, seg.start_time) == (64.0, GPS)


# --- bad inputs ----------------------------------------------------------------------------


def test_missing_empty_and_comment_only_files(tmp_path: Path) -> None:
    err = _error(tmp_path / "nosuch.txt")
    assert "cannot read the file" in str(err)
    (tmp_path / "empty.txt").write_text("")
    assert "empty" in str(_error(tmp_path / "empty.txt"))
    (tmp_path / "notes.txt").write_text("# only\n\n% comments\ntime strain\n")
    assert "no data lines" in str(_error(tmp_path / "notes.txt"))
    (tmp_path / "commas.txt").write_text(",,;\n,\n")
    assert "no data lines" in str(_error(tmp_path / "commas.txt"))


def test_wrong_column_count(tmp_path: Path) -> None:
    path = tmp_path / "cols.txt"
    path.write_text("# c\n1 2e-21\n2 3e-21\n3 4e-21 5\n")
    err = _error(path)
    assert err.where == "line 4"
    assert "cols.txt line 4: 3 columns found, expected 2" in str(err)
    path.write_text("# c\n\n1 2e-21 3\n")
    assert "line 3: 3 columns found, expected 1 or 2" in str(_error(path))
    path.write_text("0,5;1,2e-21\n")
    assert "decimal commas are not supported" in str(_error(path))


def test_non_numeric_and_non_finite_values(tmp_path: Path) -> None:
    path = tmp_path / "v.txt"
    path.write_text("t,h\n1,1e-21\n# c\n2,abc\n")
    err = _error(path)
    assert err.where == "line 4"
    assert "v.txt line 4: 'abc' is not a number" in str(err)
    for token in ("nan", "inf", "-inf"):
        path.write_text(f"1e-21\n2e-21\n\n{token}\n")
        err = _error(path, sample_rate=16.0, start_time=GPS)
        assert err.where == "line 4"
        assert f"value {float(token)} in column 1 is not finite" in str(err)


def test_gap_decreasing_and_repeated_time_stamps(tmp_path: Path) -> None:
    t = GPS + np.arange(100) / 256.0
    gap = _error(_two_column(tmp_path / "gap.txt", np.delete(t, 50), _strain(99)))
    assert gap.where == "line 51"
    assert "time step 0.0078125 s differs from 0.00390625 s" in str(gap)
    assert "uniformly sampled" in str(gap)
    t2 = t.copy()
    t2[40] = t2[39]
    rep = _error(_two_column(tmp_path / "rep.txt", t2, _strain(100)))
    assert rep.where == "line 41"
    assert "not later than the one before" in str(rep)
    assert "line 40" in str(rep)
    dec = _error(_two_column(tmp_path / "dec.txt", t[::-1], _strain(100)))
    assert dec.where == "line 2"


def test_uncalibrated_strain(tmp_path: Path) -> None:
    h = _strain(40)
    h[16] = 3.2e-05  # line 17 of the file
    path = tmp_path / "counts.txt"
    path.write_text("\n".join(map(repr, h.tolist())) + "\n")
    err = _error(path, sample_rate=16.0, start_time=GPS)
    assert (
        "strain values look uncalibrated: max |h| = 3.2e-05 at line 17, "
        "expected |h| < 1e-15 for calibrated strain"
    ) in str(err)
    np.save(tmp_path / "counts.npy", h)
    assert "at index 16" in str(_error(tmp_path / "counts.npy", sample_rate=16.0, start_time=GPS))


def test_missing_sample_rate_and_start_time(tmp_path: Path) -> None:
    path = tmp_path / "one.txt"
    path.write_text("1e-21\n2e-21\n")
    err = _error(path, sample_rate=16.0)
    assert "one-column strain needs a sample rate and a start time" in str(err)
    assert "(--sample-rate, --start-time)" in str(err)
    np.save(tmp_path / "s.npy", _strain(10))
    assert "a .npy strain array needs a sample rate" in str(_error(tmp_path / "s.npy"))


def test_options_that_disagree_with_the_file_are_errors(tmp_path: Path) -> None:
    path = _two_column(tmp_path / "s.txt", GPS + np.arange(64) / 64.0, _strain(64))
    err = _error(path, sample_rate=128.0)
    assert "sample rate given (128 Hz) disagrees with the file (64 Hz)" in str(err)
    err = _error(path, start_time=GPS + 1.0)
    assert "start time given" in str(err)
    np.savez(tmp_path / "s.npz", strain=_strain(8), sample_rate=8.0, start_time=GPS)
    assert "disagrees" in str(_error(tmp_path / "s.npz", sample_rate=16.0))


def test_bad_numpy_files(tmp_path: Path) -> None:
    np.savez(tmp_path / "k.npz", strain=_strain(8), rate=8.0, start_time=GPS)
    err = _error(tmp_path / "k.npz")
    assert "no 'sample_rate' in the archive (found strain, rate, start_time)" in str(err)
    np.savez(tmp_path / "shape.npz", strain=_strain(8), sample_rate=[8.0, 8.0], start_time=GPS)
    assert "'sample_rate' has shape (2,)" in str(_error(tmp_path / "shape.npz"))
    np.savez(tmp_path / "2d.npz", strain=_strain(8).reshape(2, 4), sample_rate=8, start_time=GPS)
    assert "'strain' has shape (2, 4)" in str(_error(tmp_path / "2d.npz"))
    np.savez(tmp_path / "rate.npz", strain=_strain(8), sample_rate=-8.0, start_time=GPS)
    assert "sample rate -8.0 Hz is not a positive number" in str(_error(tmp_path / "rate.npz"))
    np.save(tmp_path / "2d.npy", _strain(8).reshape(2, 4))
    err = _error(tmp_path / "2d.npy", sample_rate=8.0, start_time=GPS)
    assert "the array has shape (2, 4)" in str(err)
    assert "expected a 1-D real array" in str(err)
    np.save(tmp_path / "obj.npy", np.array([{"a": 1}], dtype=object))
    assert "cannot read the NumPy data" in str(_error(tmp_path / "obj.npy"))
    (tmp_path / "junk.bin").write_bytes(b"\x00\x01\x02binary")
    assert "looks binary" in str(_error(tmp_path / "junk.bin"))
    # Named .npz/.npy without their opening bytes (the zip signature, PKWARE APPNOTE
    # 4.3.7; the NumPy format's magic string): said so, not "looks binary".
    for bad in ("junk.npz", "junk.npy"):
        (tmp_path / bad).write_bytes(b"garbage\x00\x01\x02")
        assert "does not start like one" in str(_error(tmp_path / bad))


def test_fewer_than_two_samples(tmp_path: Path) -> None:
    (tmp_path / "a.txt").write_text("t h\n1000000000 1e-21\n")
    assert "only 1 strain sample found, expected at least 2" in str(_error(tmp_path / "a.txt"))
    (tmp_path / "b.txt").write_text("1e-21\n")
    assert "only 1 strain sample" in str(
        _error(tmp_path / "b.txt", sample_rate=4.0, start_time=0.0)
    )


def test_bad_option_values(tmp_path: Path) -> None:
    path = tmp_path / "one.txt"
    path.write_text("1e-21\n2e-21\n")
    assert "sample rate 0.0 Hz is not a positive number" in str(
        _error(path, sample_rate=0.0, start_time=GPS)
    )
    assert "start time nan s" in str(_error(path, sample_rate=4.0, start_time=float("nan")))
    assert "jitter tolerance 0.7" in str(_error(path, jitter_tolerance=0.7))


# --- noise spectra -------------------------------------------------------------------------


def test_psd_round_trip_and_asd(tmp_path: Path) -> None:
    f = np.linspace(10.0, 1000.0, 200)
    s = (1 + np.random.default_rng(3).random(200)) * 1e-46
    path = tmp_path / "psd.txt"
    path.write_text(
        "# one-sided\nfrequency psd\n"
        + "\n".join(f"{a!r}\t{b!r}" for a, b in zip(f.tolist(), s.tolist(), strict=True))
    )
    spec = read_psd(path)
    np.testing.assert_array_equal(spec.frequencies, f)
    np.testing.assert_array_equal(spec.psd, s)
    assert (spec.source, spec.estimated) == ("psd.txt", False)
    path.write_text(
        "\n".join(f"{a!r},{b!r}" for a, b in zip(f.tolist(), np.sqrt(s).tolist(), strict=True))
    )
    np.testing.assert_allclose(read_psd(path, asd=True).psd, s, rtol=1e-15)


@pytest.mark.parametrize(
    ("rows", "where", "text"),
    [
        (
            "10 1e-46\n10 2e-46\n",
            "line 3",
            "frequency 10 Hz is not above the one before (10 Hz, line 2)",
        ),
        ("10 1e-46\n9 2e-46\n", "line 3", "frequency 9 Hz is not above"),
        ("10 1e-46\n20 0\n", "line 3", "PSD value 0 at 20 Hz is not positive"),
        ("10 1e-46\n20 -3e-46\n", "line 3", "PSD value -3e-46 at 20 Hz is not positive"),
        ("-1 1e-46\n20 1e-46\n", "line 2", "frequency -1 Hz is negative"),
        ("10 1e-46 5\n20 1e-46\n", "line 2", "3 columns found, expected 2"),
        ("10 1e-46\n20 nan\n", "line 3", "not finite"),
        ("10 1e-46\n20 x\n", "line 3", "'x' is not a number"),
    ],
)
def test_bad_psd_files(tmp_path: Path, rows: str, where: str, text: str) -> None:
    path = tmp_path / "bad_psd.txt"
    path.write_text("# header comment\n" + rows)
    with pytest.raises(InputError) as info:
        read_psd(path)
    assert (info.value.field, info.value.where, info.value.source) == ("psd", where, "bad_psd.txt")
    assert text in str(info.value)


def test_sha256_matches_the_published_test_vector(tmp_path: Path) -> None:
    # FIPS 180-2, appendix B.1 (from memory): SHA-256("abc")
    (tmp_path / "abc").write_bytes(b"abc")
    assert sha256_file(tmp_path / "abc") == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    )
    assert sha256_file(tmp_path / "abc") == hashlib.sha256(b"abc").hexdigest()


@pytest.mark.slow
def test_a_million_line_file_reads_exactly(tmp_path: Path) -> None:
    """A 256 s x 4096 Hz two-column file (the read speed is measured in benchmarks/)."""
    n = 256 * 4096
    h = _strain(n)
    t = GPS + np.arange(n) / 4096.0
    path = tmp_path / "big.csv"
    path.write_text(
        "time,strain\n"
        + "\n".join(f"{a:.6f},{b!r}" for a, b in zip(t.tolist(), h.tolist(), strict=True))
        + "\n"
    )
    seg = read_strain(path)
    assert seg.sample_rate == 4096.0
    assert seg.start_time == GPS
    np.testing.assert_array_equal(seg.strain, h)
