"""The command line as a user meets it: exit codes, messages, files written, inputs kept."""

from __future__ import annotations

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import pytest

from uqreport import cli

DATA = Path(__file__).parent / "data"


def _hashes(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


def test_check_unknown_key_exits_2_with_suggestion_and_no_traceback():
    """`uqreport check` on a misspelt key: exit 2, a did-you-mean, no traceback (run as a
    real subprocess, as a user would)."""
    proc = subprocess.run(
        [sys.executable, "-m", "uqreport", "check", str(DATA / "bad" / "unknown_key")],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2
    assert "nosie_sd" in proc.stderr and "Did you mean 'noise_sd'" in proc.stderr
    assert "Traceback" not in proc.stderr and "Traceback" not in proc.stdout


def test_check_good_file(capsys):
    assert cli.main(["check", str(DATA / "good" / "experiment.toml")]) == 0
    assert "no problems found" in capsys.readouterr().out


def test_check_reports_every_problem_at_once(capsys):
    assert cli.main(["check", str(DATA / "bad" / "several_problems")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n  - ") >= 3


def test_analyze_writes_results_and_keeps_inputs(tmp_path, capsys):
    src = tmp_path / "study"
    src.mkdir()
    for p in (DATA / "good").iterdir():
        (src / p.name).write_bytes(p.read_bytes())
    before = _hashes(src)
    code = cli.main(
        ["analyze", str(src), "--out", str(src), "--draws", "2000", "--seed", "3", "--no-report"]
    )
    assert code == 0
    out = capsys.readouterr().out
    assert "second_order_rate_constant" in out
    doc = json.loads((src / "results.json").read_text())
    assert doc["schema"] == "uqreport.results/1"
    assert doc["provenance"]["seed"] == 3
    assert doc["provenance"]["command_line"][:2] == ["uqreport", "analyze"]
    after = _hashes(src)
    assert {k: after[k] for k in before} == before  # inputs untouched
    assert {"results.json", "budget.csv", "fits.csv"} <= set(after)
    assert not [p for p in src.iterdir() if p.name.endswith(".tmp")]  # atomic: no leftovers


def test_demo_writes_study_truth_and_results(tmp_path):
    out = tmp_path / "demo"
    assert cli.main(["demo", "--out", str(out), "--seed", "7", "--draws", "2000", "--quiet"]) == 0
    assert (out / "report.pdf").read_bytes()[:5] == b"%PDF-"
    names = {p.name for p in out.iterdir()}
    assert {
        "experiment.toml",
        "truth.json",
        "results.json",
        "batch_r1.csv",
        "pump_p_dye.csv",
        "tank_series.csv",
        "tracer.csv",
    } <= names
    truth = json.loads((out / "truth.json").read_text())
    doc = json.loads((out / "results.json").read_text())
    assert truth["invented"] is True and truth["seed"] == 7
    assert set(doc["quantities"]) <= set(truth["quantities"])
    assert doc["study"]["invented"] is True
    # a second demo into the same folder is allowed (it holds a demo)
    assert (
        cli.main(
            ["demo", "--out", str(out), "--seed", "8", "--draws", "2000", "--quiet", "--no-report"]
        )
        == 0
    )


def test_demo_refuses_a_folder_with_other_files(tmp_path, capsys):
    (tmp_path / "notes.txt").write_text("mine")
    assert cli.main(["demo", "--out", str(tmp_path), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "not empty" in err and "--force" in err
    assert (tmp_path / "notes.txt").read_text() == "mine"


def test_bad_option_values_exit_2(capsys):
    with pytest.raises(SystemExit) as exc:
        cli.main(["analyze", "x.toml", "--out", "o", "--draws", "10"])
    assert exc.value.code == 2
    assert "at least 100 draws" in capsys.readouterr().err


def test_missing_experiment_file_exits_2(tmp_path, capsys):
    assert cli.main(["check", str(tmp_path / "nowhere.toml")]) == 2
    assert "Traceback" not in capsys.readouterr().err


def test_internal_error_exits_1_without_traceback(monkeypatch, capsys):
    import uqreport.analysis

    def boom(*args, **kwargs):
        raise RuntimeError("simulated failure")

    monkeypatch.setattr(uqreport.analysis, "analyze", boom)
    code = cli.main(["analyze", str(DATA / "good"), "--out", "unused"])
    assert code == 1
    err = capsys.readouterr().err
    assert "internal error" in err and "simulated failure" in err and "Traceback" not in err


def test_version():
    proc = subprocess.run(
        [sys.executable, "-m", "uqreport", "--version"], capture_output=True, text=True
    )
    assert proc.returncode == 0 and proc.stdout.startswith("uqreport ")
