"""Bad batch input: each case fails with a clear message naming the file, the run or line,
the bad value and the fix (exit code 2 from the command line)."""

from __future__ import annotations

import pytest
from batch_helpers import demo_study, edit_table, edit_toml

from uqreport import cli
from uqreport.chains.batch import build_batch_chain
from uqreport.errors import ExperimentError
from uqreport.experiment import load_experiment


@pytest.fixture
def demo(tmp_path):
    return demo_study(tmp_path / "demo", seed=7)


def _problems(demo):
    with pytest.raises(ExperimentError) as exc:
        build_batch_chain(load_experiment(demo))
    return exc.value.problems


def test_times_not_increasing(demo):
    edit_table(demo.parent / "batch_r2.csv", lambda rows: [rows[1], rows[0], *rows[2:]])
    with pytest.raises(ExperimentError, match=r"batch_r2\.csv, line 4, column 'time'") as exc:
        load_experiment(demo)
    p = exc.value.problems[0]
    assert "30 s is earlier than 60 s on line 3" in p.message and "sort" in p.fix


def test_absorbance_far_below_the_blank(demo):
    edit_table(
        demo.parent / "batch_r1.csv", lambda rows: [rows[0], [rows[1][0], "-0.25"], *rows[2:]]
    )
    probs = _problems(demo)
    p = next(p for p in probs if "far below the blank" in p.message)
    assert p.where == "batch_r1.csv, line 4, column 'absorbance'"
    assert "-0.25" in p.message and p.fix


def test_all_readings_above_the_linear_limit(demo):
    edit_table(demo.parent / "batch_r3.csv", lambda rows: [[r[0], "1.8"] for r in rows])
    probs = _problems(demo)
    p = next(p for p in probs if "linear limit" in p.message)
    assert "batch.runs[r3]" in p.where and "every reading" in p.message
    assert "dilute" in p.fix


def test_run_with_three_readings(demo):
    edit_table(demo.parent / "batch_r1.csv", lambda rows: rows[:3])
    with pytest.raises(ExperimentError) as exc:
        build_batch_chain(load_experiment(demo))
    text = str(exc.value)
    assert "r1" in text and ("3 readings" in text or "3 usable" in text or "at least" in text)


def test_missing_hydroxide_concentration(demo):
    edit_toml(demo, 'hydroxide_solution = "oh_stock"\n', "", count=1)
    with pytest.raises(ExperimentError) as exc:
        load_experiment(demo)
    text = str(exc.value)
    assert "batch.runs[r1]" in text and "hydroxide" in text


def test_excess_ratio_of_two_is_refused(demo):
    """[OH]/[dye]0 = 2: the excess reagent is consumed during the run; pseudo-first-order
    analysis does not hold (rule of thumb: at least 10x excess, common practice)."""
    # r1 has [OH] = 0.02 mol/L and [dye]0 = stock / 5: a dye stock of 0.05 mol/L gives 0.01
    edit_toml(demo, 'value = 4.6e-05, unit = "mol/L"', 'value = 0.05, unit = "mol/L"')
    probs = _problems(demo)
    p = next(p for p in probs if "excess ratio" in p.message)
    assert "batch.runs[r1]" in p.where and "2" in p.message
    assert "10 times" in p.fix


def test_cli_exit_code_2_for_a_chain_problem(demo, tmp_path, capsys):
    edit_table(demo.parent / "batch_r1.csv", lambda rows: rows[:3])
    code = cli.main(["analyze", str(demo), "--out", str(tmp_path / "out"), "--no-montecarlo"])
    assert code == 2
    err = capsys.readouterr().err
    assert "r1" in err and "Traceback" not in err


def test_four_readings_are_refused_by_the_file_check(demo):
    """The file check and the chain agree on the fewest readings of a run (5): a run of 4
    readings was told to give 4 by the one and refused by the other (common practice: a
    three-parameter fit with one or two residual degrees of freedom says nothing about the
    decay's shape)."""
    edit_table(demo.parent / "batch_r1.csv", lambda rows: rows[:4])
    with pytest.raises(ExperimentError) as exc:
        load_experiment(demo)
    (p,) = [p for p in exc.value.problems if "usable readings" in p.message]
    assert p.message.startswith("only 4 usable readings")
    assert "at least 5 usable readings" in p.fix


def test_a_noise_level_from_two_residual_dof_is_refused(demo):
    """Five readings, three fitted parameters, the readings' u from the residuals: a Student t
    with 2 degrees of freedom has no finite variance (JCGM 101 6.4.9 needs nu > 2), so the
    chain refuses it and says how to proceed."""
    from batch_helpers import set_batch_option

    set_batch_option(demo, "noise_source", '"residuals"')
    edit_table(demo.parent / "batch_r1.csv", lambda rows: rows[:5])
    probs = _problems(demo)
    (p,) = [p for p in probs if "degrees of freedom" in p.message]
    assert "batch.runs[r1]" in p.where
    assert "5 readings with 3 parameters leaves 2 degrees of freedom" in p.message
    assert "noise_source = 'spec'" in p.fix
