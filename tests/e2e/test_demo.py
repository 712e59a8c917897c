"""The README's first command, end to end, and the all-or-nothing output folder."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest

from service import pipeline
from service.cli import main

PARAMETERS = (
    "chirp_mass",
    "mass_ratio",
    "luminosity_distance",
    "coalescence_time",
    "primary_mass",
    "secondary_mass",
    "effective_distance",
    "redshift",
    "source_primary_mass",
    "source_secondary_mass",
    "snr",
)


@pytest.mark.slow
def test_demo_runs_end_to_end(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "demo"
    assert main(["--quiet", "demo", "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "drill-kestrel" in printed
    assert "report.html" in printed
    names = {p.name for p in out.iterdir()}
    assert names == pipeline.OUTPUT_FILES
    summary = json.loads((out / "summary.json").read_text())
    assert summary["credible_level"] == 0.9
    for name in PARAMETERS:
        entry = summary["parameters"][name]
        assert set(entry) == {"median", "lower", "upper", "unit"}
        assert entry["lower"] <= entry["median"] <= entry["upper"]
    assert summary["parameters"]["chirp_mass"]["unit"] == "Msun"
    assert summary["inputs"]["strain"]["file"] == "strain.csv"
    assert len(summary["inputs"]["strain"]["sha256"]) == 64
    diag = summary["diagnostics"]
    assert diag["converged"]
    assert diag["likelihood_check"]["passed"]
    assert diag["effective_sample_size"] >= 2000
    assert set(diag["autocorrelation_time"]) == {
        "chirp_mass",
        "mass_ratio",
        "effective_distance",
        "arrival_time",
        "effective_spin",
        "spin2",
    }
    # The demo's source (demo_data/README.md) is a heavy system: no neutron star.
    assert summary["probabilities"]["secondary_below_3_msun"] < 0.01
    with (out / "samples.csv").open() as fh:
        rows = list(csv.reader(fh))
    assert rows[0][:4] == ["chirp_mass", "mass_ratio", "primary_mass", "secondary_mass"]
    assert len(rows) - 1 == diag["samples"]
    html = (out / "report.html").read_text()
    assert "preliminary" in html
    assert "not a vetted result" in html
    assert html.count("data:image/png;base64,") >= 5
    assert not list(tmp_path.glob(".*partial*"))


@pytest.mark.slow
def test_failure_leaves_no_half_written_folder(tmp_path: Path, monkeypatch) -> None:
    """A crash while writing the outputs leaves neither the folder nor a partial copy."""

    def broken(*args: object, **kwargs: object) -> None:
        raise RuntimeError("disk full (simulated)")

    monkeypatch.setattr(pipeline, "_make_plots", broken)
    out = tmp_path / "result"
    # The demo's files with the spins fixed (four parameters, faster): the writer is under test.
    demo = Path(__file__).resolve().parents[2] / "demo_data"
    event = json.loads((demo / "event.json").read_text(encoding="utf-8"))
    code = main(["--quiet", "analyze", str(demo / "strain.csv"), "--psd", str(demo / "psd.csv"),
                 "--trigger-time", str(event["trigger_time"]), "--spin-max", "0",
                 "--out", str(out)])  # fmt: skip
    assert code == 1
    assert not out.exists()
    assert list(tmp_path.iterdir()) == []
