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


def test_out_that_is_a_file_exits_2_before_the_analysis(tmp_path, monkeypatch, capsys):
    """--out naming a file was an internal error (FileExistsError, exit 1), and only after the
    whole analysis had run."""
    import uqreport.analysis

    def never(*args, **kwargs):
        raise AssertionError("the analysis ran before --out was checked")

    monkeypatch.setattr(uqreport.analysis, "analyze", never)
    target = tmp_path / "results.txt"
    target.write_text("mine")
    for argv in (
        ["analyze", str(DATA / "good"), "--out", str(target)],
        ["plan", str(DATA / "good"), "--out", str(target)],
        ["analyze", str(DATA / "good"), "--out", str(target / "sub")],
    ):
        assert cli.main(argv) == 2
        err = capsys.readouterr().err
        assert "Traceback" not in err and "internal error" not in err
        assert str(target) in err and "Fix: name a folder" in err
    assert target.read_text() == "mine"


def test_debug_is_accepted_after_the_command(monkeypatch, capsys):
    """The internal-error message says "rerun with --debug"; appending it to the command
    line used to be a usage error."""
    import uqreport.analysis

    def boom(*args, **kwargs):
        raise RuntimeError("simulated failure")

    monkeypatch.setattr(uqreport.analysis, "analyze", boom)
    for argv in (
        ["analyze", str(DATA / "good"), "--out", "unused", "--debug"],
        ["--debug", "analyze", str(DATA / "good"), "--out", "unused"],
    ):
        assert cli.main(argv) == 1
        err = capsys.readouterr().err
        assert "Traceback" in err and "simulated failure" in err
    assert cli.main(["check", str(DATA / "good"), "--debug"]) == 0


def test_output_piped_into_a_reader_that_stops_is_not_an_internal_error(tmp_path):
    """`uqreport plan x.toml | head -3` ended in "internal error (BrokenPipeError)", exit 1."""
    script = (
        "import sys, uqreport.cli as c\n"
        "import uqreport.experiment as e\n"
        "def many(path):\n"
        "    for _ in range(100000):\n"
        "        print('a line of output')\n"
        "e.check_experiment = many\n"
        "sys.exit(c.main(['check', 'x.toml']))\n"
    )
    proc = subprocess.Popen(
        [sys.executable, "-c", script], stdout=subprocess.PIPE, stderr=subprocess.PIPE
    )
    proc.stdout.readline()
    proc.stdout.close()  # the reader goes away, as head does
    err = proc.stderr.read().decode()
    assert proc.wait() == 0
    assert "internal error" not in err and "Traceback" not in err


def test_plan_table_states_U_on_one_scale():
    """U = 0.0060 was printed 0.006 and the new U 0.006 beside 0.0038 (format .2g); the
    improvement text was cut at 58 characters."""
    from types import SimpleNamespace as NS

    desc = "taking as many readings again per run over the same time span"
    cases = [
        NS(
            group="temperature",
            description="holding the bath to ±0.1 K",
            U_new=0.0038,
            reduction_percent=37.6,
        ),
        NS(group="absorbance noise", description=desc, U_new=0.005986, reduction_percent=0.2),
    ]
    qp = NS(unit="L/(mol*s)", U=0.006025, k=1.96, cases=cases, verdict="(verdict)")
    plan = NS(quantities={"second_order_rate_constant": qp}, shares_check={}, schedule=[])
    res = NS(plan=plan, experiment=NS(study=NS(title="t")))
    text = cli._plan_table(res)
    assert "second_order_rate_constant: U = 0.0060 L mol⁻¹ s⁻¹ (coverage factor 1.96)" in text
    assert desc in text
    rows = [ln.split() for ln in text.splitlines() if ln.strip().startswith(("1 ", "2 "))]
    assert [r[-2] for r in rows] == ["0.0038", "0.0060"]


def test_summary_line_rounds_as_the_report_does():
    """The summary printed "0.1803 ..., U = 0.006" (value .4g, U .2g): the estimate had more
    decimals than U and U lost its second digit; the report says 0.1803, U = 0.0060."""
    import datetime
    from types import SimpleNamespace as NS

    q = "second_order_rate_constant"
    est = NS(unit="L/(mol*s)", value=0.1803283, U=0.0060249, k=1.9600228, coverage=0.95)
    chain = NS(
        linear=NS(estimate=lambda name: est),
        montecarlo=NS(estimate=lambda name: NS(low=0.1746858, high=0.1861568)),
        validation={q: NS(validated=False)},
        posterior=None,
        budgets={q: NS(top=lambda n: [NS(input="temperature", share=0.687)])},
    )
    study = NS(title="t", operator="o", date=datetime.date(2025, 2, 11))
    res = NS(
        experiment=NS(study=study),
        headline=[("batch", q)],
        chains={"batch": chain},
        all_findings=[],
    )
    text = cli._summary(res, Path("out"))
    assert (
        "second_order_rate_constant = 0.1803 L mol⁻¹ s⁻¹, U = 0.0060 L mol⁻¹ s⁻¹"
        " (coverage factor 1.96, 95 % coverage); Monte Carlo [0.1747, 0.1862], not validated"
    ) in text


def test_check_finds_what_the_analysis_would_refuse(tmp_path, capsys):
    """An excess ratio below 5: `check` said "no problems found", `analyze` then exited 2."""
    src = tmp_path / "study"
    src.mkdir()
    for p in (DATA / "good").iterdir():
        (src / p.name).write_bytes(p.read_bytes())
    toml = src / "experiment.toml"
    text = toml.read_text(encoding="utf-8")
    old = 'concentration = { value = 0.200, unit = "mol/L", u = 0.001'
    assert old in text
    toml.write_text(text.replace(old, old.replace("0.200", "0.0002")), encoding="utf-8")
    assert cli.main(["check", str(src)]) == 2
    err = capsys.readouterr().err
    assert "batch.runs[r1]: the excess ratio [OH]/[dye]0 is 2" in err
    assert "Traceback" not in err


@pytest.mark.parametrize("command", ["analyze", "plan"])
def test_an_output_over_an_input_table_exits_2_before_the_analysis(
    tmp_path, monkeypatch, capsys, command
):
    """A table named like an output (fits.csv) and --out its own folder: refused with exit 2
    before the analysis runs (it used to run the whole analysis first), the table untouched."""
    import uqreport.analysis

    src = tmp_path / "study"
    src.mkdir()
    for p in (DATA / "good").iterdir():
        (src / ("fits.csv" if p.name == "r1.csv" else p.name)).write_bytes(p.read_bytes())
    toml = src / "experiment.toml"
    toml.write_text(toml.read_text().replace('"r1.csv"', '"fits.csv"', 1))
    before = _hashes(src)

    def not_reached(*args, **kwargs):
        raise AssertionError("the analysis ran before the outputs were checked")

    monkeypatch.setattr(uqreport.analysis, "analyze", not_reached)
    assert cli.main([command, str(src), "--out", str(src)]) == 2
    err = capsys.readouterr().err
    assert "fits.csv would overwrite an input file" in err and "Traceback" not in err
    assert _hashes(src) == before


def test_a_refused_write_is_named_not_called_a_bug(monkeypatch, capsys, tmp_path):
    """A full disk (ENOSPC, an OSError) while writing the outputs: exit 1 with the system's
    reason and the file, not "a bug in uqreport", and no traceback."""
    import errno

    import uqreport.results

    def full(path, text):
        raise OSError(errno.ENOSPC, "No space left on device", str(path))

    monkeypatch.setattr(uqreport.results, "atomic_write_text", full)
    out = tmp_path / "out"
    code = cli.main(
        [
            "analyze",
            str(DATA / "good"),
            "--out",
            str(out),
            "--draws",
            "2000",
            "--no-mcmc",
            "--no-report",
            "--quiet",
        ]
    )
    assert code == 1
    err = capsys.readouterr().err
    assert "No space left on device" in err and "results.json" in err
    assert "bug" not in err and "Traceback" not in err


@pytest.mark.parametrize("case", sorted(p.name for p in (DATA / "bad").iterdir() if p.is_dir()))
def test_every_bad_case_exits_2_from_check_with_a_fix(case, capsys):
    """Each case of the bad-input corpus through `uqreport check`: exit 2, every problem on
    stderr with its place and its fix, nothing on stdout, no traceback."""
    assert cli.main(["check", str(DATA / "bad" / case)]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = [ln for ln in captured.err.splitlines() if ln.startswith("  - ")]
    assert lines and all(" Fix: " in ln for ln in lines), captured.err
    assert "Traceback" not in captured.err and "internal error" not in captured.err


def test_robust_dof_sets_the_t_likelihood_and_is_checked(capsys):
    """--robust-dof NU implies the Student t likelihood with NU degrees of freedom; a value
    outside 0.5-1000 exits 2 before any analysis."""
    from uqreport.cli import _parser, _settings

    args = _parser().parse_args(["analyze", "x.toml", "--out", "o", "--robust-dof", "3"])
    st = _settings(args)
    assert st.likelihood == "student" and st.student_dof == 3.0
    args = _parser().parse_args(["analyze", "x.toml", "--out", "o", "--robust"])
    assert _settings(args).student_dof == 4.0
    args = _parser().parse_args(["analyze", "x.toml", "--out", "o"])
    assert _settings(args).likelihood == "gaussian"
    exp = Path(__file__).resolve().parent.parent / "example_data" / "experiment.toml"
    assert cli.main(["analyze", str(exp), "--out", "o", "--robust-dof", "0.1"]) == 2
    err = capsys.readouterr().err
    assert "--robust-dof 0.1" in err and "Traceback" not in err


def test_save_draws_without_a_posterior_says_so(tmp_path, capsys):
    exp = Path(__file__).resolve().parent.parent / "example_data" / "experiment.toml"
    out = tmp_path / "o"
    code = cli.main(
        [
            "analyze",
            str(exp),
            "--out",
            str(out),
            "--no-montecarlo",
            "--no-mcmc",
            "--no-report",
            "--save-draws",
        ]
    )
    assert code == 0
    text = capsys.readouterr().out
    assert "no posterior was sampled" in text
    assert not list(out.glob("posterior_*"))
