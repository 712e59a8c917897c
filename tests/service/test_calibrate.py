"""``chirpcast calibrate``: the reduced calibration run CI makes on every change.

16 prior-drawn injections (observed-SNR threshold 8) through the whole
analysis, in parallel processes. For a calibrated analysis each KS p-value is
uniform, so ``p > 0.001`` fails by chance with probability 0.001 per
parameter (0.5% for the four and the combined value). The coverages are held
to the 99.9% binomial band (false alarm 0.1% per check, 0.8% for all eight):
the 90% band drawn on the plot would fail a calibrated analysis for about
one seed in two (eight checks at 10% each). The seed is fixed and was the
first tried; the full run of 200 or more lives in benchmarks/. The spins are
fixed here (``--spin-max 0``, four parameters) and the run is short (16, the
first 16 of the 24 run until 2026-12-02): heavier systems now take the slower
merger model, and the suite must stay inside CI's budget; the benchmark's full
run samples the spins.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest

from estimator.calibration import summarize_levels
from service.calibrate import TESTED
from service.cli import main


@pytest.mark.slow
def test_reduced_calibration_run(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "cal"
    argv = ["--quiet", "calibrate", "--n", "16", "--seed", "11", "--spin-max", "0"]
    code = main([*argv, "--out", str(out)])
    printed = capsys.readouterr().out
    assert code == 0, printed
    doc = json.loads((out / "calibration.json").read_text())
    with (out / "runs.csv").open(encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 16
    assert doc["injections"] == 16
    assert (out / "pp_plot.png").stat().st_size > 20_000
    assert doc["wall_time_s"] > 0
    assert "combined p" in printed
    # The verdict line states the family-wise rule and agrees with calibration.json.
    verdict = "PASS" if doc["passes"] else "FAIL"
    assert f"{verdict}: KS p > 0.01 for every parameter" in printed
    assert doc["familywise_level"] == pytest.approx(1.0 - 0.1 / (2 * len(doc["parameters"])))

    # The injections span the prior: low observed SNR and unequal masses among them.
    snr = sorted(float(r["observed_snr"]) for r in rows)
    assert snr[0] >= 8.0
    assert snr[len(snr) // 2] < 15.0
    assert doc["mass_ratio_below_0.5"] >= 3
    assert doc["not_converged"] == 0

    tested = [k for k in TESTED if not k.endswith("spin") and not k.startswith("spin")]
    assert set(doc["parameters"]) == set(tested)  # spins fixed: not among the tested
    for name in tested:
        assert doc["parameters"][name]["ks_p_value"] > 1e-3, (name, doc["parameters"][name])
    assert doc["combined_p_value"] > 1e-3
    strict = summarize_levels(
        {k: [float(r[f"{k}_level"]) for r in rows] for k in tested}, band_level=0.999
    )
    assert strict.inside_band() == dict.fromkeys(tested, True), strict.coverage


def test_calibrate_refuses_too_few_injections(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    code = main(["calibrate", "--n", "1", "--out", str(tmp_path / "x")])
    assert code == 2
    assert "at least 2 injections" in capsys.readouterr().err


def test_calibrate_refuses_a_spin_bound_outside_the_unit_interval(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    code = main(["calibrate", "--n", "4", "--spin-max", "1.2", "--out", str(tmp_path / "x")])
    assert code == 2
    assert "--spin-max 1.2" in capsys.readouterr().err


def test_a_stopped_calibration_resumes_from_its_journal(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # A run stopped at injection 5 of 8 keeps what finished; the same call again runs
    # only the rest and ends with the same rows as a run never stopped.
    from service.calibrate import CalibrationSetup, run_calibration
    from service.parallel_runs import Journal
    from tests.service.calibrate_support import fake_injection

    marks = tmp_path / "marks"
    marks.mkdir()
    monkeypatch.setenv("CHIRPCAST_TEST_MARKS", str(marks))
    setup = CalibrationSetup(injections=8, seed=3)
    out = tmp_path / "cal"
    monkeypatch.setenv("CHIRPCAST_TEST_STOP_AT", "5")
    with pytest.raises(RuntimeError, match="stopped at injection 5"):
        run_calibration(setup, out, workers=1, injection=fake_injection)
    journal = out / Journal.NAME
    kept = journal.read_text().splitlines()[1:]
    assert {json.loads(line)["index"] for line in kept} == {0, 1, 2, 3, 4}
    assert not (out / "calibration.json").exists()

    for mark in marks.iterdir():
        mark.unlink()
    monkeypatch.delenv("CHIRPCAST_TEST_STOP_AT")
    seen: list[tuple[int, int]] = []
    doc = run_calibration(setup, out, workers=1, injection=fake_injection,
                          progress=lambda done, total: seen.append((done, total)))
    assert sorted(m.name for m in marks.iterdir()) == [f"3-{i}" for i in (5, 6, 7)]
    assert seen[0] == (5, 8)
    assert seen[-1] == (8, 8)
    assert not journal.exists()
    with (out / "runs.csv").open(encoding="utf-8") as fh:
        resumed = list(csv.DictReader(fh))
    assert [int(r["index"]) for r in resumed] == list(range(8))
    assert doc["injections"] == 8
    assert doc["resumed_rows"] == 5

    whole = tmp_path / "whole"
    run_calibration(setup, whole, workers=1, injection=fake_injection)
    with (whole / "runs.csv").open(encoding="utf-8") as fh:
        fresh = list(csv.DictReader(fh))
    drop = {"wall_s"}
    assert [{k: v for k, v in r.items() if k not in drop} for r in resumed] == [
        {k: v for k, v in r.items() if k not in drop} for r in fresh
    ]


def test_a_journal_of_other_settings_is_refused(tmp_path: Path) -> None:
    from estimator.errors import InputError
    from service.calibrate import CalibrationSetup
    from service.parallel_runs import Journal

    out = tmp_path / "cal"
    Journal(out, CalibrationSetup(injections=8, seed=3)).add({"index": 0})
    with pytest.raises(InputError, match="partial run with other settings") as err:
        Journal(out, CalibrationSetup(injections=8, seed=4))
    assert err.value.field == "out"
    again = Journal(out, CalibrationSetup(injections=8, seed=3))
    assert again.done == {0}
    # a last line cut short by the stop is dropped: that injection runs again
    with (out / Journal.NAME).open("a", encoding="utf-8") as fh:
        fh.write('{"index": 1, "attem')
    resumed = Journal(out, CalibrationSetup(injections=8, seed=3))
    assert resumed.done == {0}
    resumed.add({"index": 1})  # appended after the whole lines, not onto the stub
    assert Journal(out, CalibrationSetup(injections=8, seed=3)).done == {0, 1}


def test_calibrate_command_refuses_a_journal_of_other_settings_before_running(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    from service.calibrate import CalibrationSetup
    from service.parallel_runs import Journal

    out = tmp_path / "cal"
    Journal(out, CalibrationSetup(injections=200, seed=2026)).add({"index": 0})
    code = main(["calibrate", "--n", "3", "--seed", "1", "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    assert f"{out / Journal.NAME} holds a partial run with other settings" in err
    assert "calibration:" not in err  # refused before the progress bar starts
