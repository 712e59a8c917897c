"""The command line as a stranger meets it: exit codes and one clear line per bad input."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from estimator.simulate import design_spectrum, simulate_segment
from service.cli import main
from service.drill import write_psd, write_strain

START = 1_000_000_000.0
RATE = 1024.0
TRIGGER = START + 6.0


@pytest.fixture(scope="module")
def good(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """An 8 s noise segment at 1024 Hz and its spectrum, as CSV files."""
    folder = tmp_path_factory.mktemp("good")
    spectrum = design_spectrum(f_max=2048.0)
    seg = simulate_segment(
        spectrum, duration=8.0, sample_rate=RATE, start_time=START, rng=np.random.default_rng(2)
    )
    return {
        "strain": write_strain(seg, folder / "strain", "csv"),
        "psd": write_psd(spectrum, folder / "psd.csv"),
        "npy": write_strain(seg, folder / "strain", "npy"),
    }


def _run(capsys: pytest.CaptureFixture[str], *argv: object) -> tuple[int, str]:
    code = main([str(a) for a in argv])
    err = capsys.readouterr().err
    return code, err


def _assert_clear(err: str, *words: str) -> None:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("chirpcast: error: "), err
    assert "Traceback" not in err
    for word in words:
        assert word in lines[0], (word, lines[0])


def _edit(src: Path, dst: Path, change) -> Path:  # type: ignore[no-untyped-def]
    lines = src.read_text().splitlines()
    dst.write_text("\n".join(change(lines)) + "\n")
    return dst


def _analyze(
    good: dict[str, Path],
    out: Path,
    *extra: object,
    strain: Path | None = None,
    psd: Path | None = None,
    trigger: float = TRIGGER,
) -> list[object]:
    return [
        "--quiet",
        "analyze",
        strain or good["strain"],
        "--psd",
        psd or good["psd"],
        "--trigger-time",
        trigger,
        "--out",
        out,
        "--f-high",
        400,
        *extra,
    ]


def test_missing_file(capsys, good, tmp_path):
    code, err = _run(capsys, *_analyze(good, tmp_path / "o", strain=tmp_path / "nope.csv"))
    assert code == 2
    _assert_clear(err, "nope.csv")


def test_empty_file(capsys, good, tmp_path):
    empty = tmp_path / "empty.csv"
    empty.write_text("# only a comment\n\n")
    code, err = _run(capsys, *_analyze(good, tmp_path / "o", strain=empty))
    assert code == 2
    _assert_clear(err, "empty.csv")


@pytest.mark.parametrize(
    ("name", "change", "words"),
    [
        ("columns", lambda ls: [*ls[:20], ls[20] + ",1.0", *ls[21:]], ["line 21", "3"]),
        ("text", lambda ls: [*ls[:30], "1000000000.0283,abc", *ls[31:]], ["line 31", "abc"]),
        ("nan", lambda ls: [*ls[:40], ls[40].split(",")[0] + ",nan", *ls[41:]], ["line 41"]),
        ("gap", lambda ls: [*ls[:500], *ls[502:]], ["line 501"]),
        ("order", lambda ls: [*ls[:100], ls[101], ls[100], *ls[102:]], ["line 10"]),
        (
            "uncalibrated",
            lambda ls: [*ls[:60], ls[60].split(",")[0] + ",3.2e-05", *ls[61:]],
            ["line 61", "3.2e-05", "calibrated"],
        ),
    ],
)
def test_bad_strain_table(capsys, good, tmp_path, name, change, words):
    bad = _edit(good["strain"], tmp_path / f"{name}.csv", change)
    code, err = _run(capsys, *_analyze(good, tmp_path / "o", strain=bad))
    assert code == 2
    _assert_clear(err, f"{name}.csv", *words)


def test_npy_needs_rate_and_start(capsys, good, tmp_path):
    code, err = _run(capsys, *_analyze(good, tmp_path / "o", strain=good["npy"]))
    assert code == 2
    _assert_clear(err, "strain.npy", "--sample-rate", "--start-time")


@pytest.mark.parametrize(
    ("trigger", "words"),
    [(START - 50.0, ["trigger"]), (START + 0.5, ["trigger"]), (START + 7.9, ["trigger"])],
)
def test_trigger_outside_or_near_edges(capsys, good, tmp_path, trigger, words):
    code, err = _run(capsys, *_analyze(good, tmp_path / "o", trigger=trigger))
    assert code == 2
    _assert_clear(err, *words)


def test_spectrum_not_covering_band(capsys, good, tmp_path):
    narrow = _edit(
        good["psd"],
        tmp_path / "narrow.csv",
        lambda ls: [ls[0], *[r for r in ls[1:] if float(r.split(",")[0]) > 60.0]],
    )
    code, err = _run(capsys, *_analyze(good, tmp_path / "o", psd=narrow))
    assert code == 2
    _assert_clear(err, "narrow.csv", "20")


def test_zero_psd_value(capsys, good, tmp_path):
    zero = _edit(
        good["psd"],
        tmp_path / "zero.csv",
        lambda ls: [*ls[:300], ls[300].split(",")[0] + ",0", *ls[301:]],
    )
    code, err = _run(capsys, *_analyze(good, tmp_path / "o", psd=zero))
    assert code == 2
    _assert_clear(err, "zero.csv", "line 301")


def test_sample_rate_too_low_for_f_high(capsys, good, tmp_path):
    argv = _analyze(good, tmp_path / "o")
    argv[argv.index("--f-high") + 1] = 700
    code, err = _run(capsys, *argv)
    assert code == 2
    _assert_clear(err, "512", "Nyquist")


def test_segment_too_short_for_band(capsys, good, tmp_path):
    short = _edit(good["strain"], tmp_path / "short.csv", lambda ls: ls[: 1 + int(3 * RATE)])
    code, err = _run(capsys, *_analyze(good, tmp_path / "o", strain=short, trigger=START + 1.5))
    assert code == 2
    _assert_clear(err, "short")


def test_output_folder_with_other_files_is_refused(capsys, good, tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "thesis.tex").write_text("precious")
    code, err = _run(capsys, *_analyze(good, out))
    assert code == 2
    _assert_clear(err, "thesis.tex")
    assert (out / "thesis.tex").read_text() == "precious"


def test_usage_error_is_one_line_with_exit_code_2(capsys):
    with pytest.raises(SystemExit) as info:
        main(["analyze"])
    assert info.value.code == 2
    _assert_clear(capsys.readouterr().err, "required")


def test_installed_command_prints_no_traceback(good, tmp_path):
    """The real entry point, in a fresh interpreter."""
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "service.cli",
            *map(str, _analyze(good, tmp_path / "o", psd=tmp_path / "x")),
        ],
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert proc.returncode == 2
    _assert_clear(proc.stderr, "x")
