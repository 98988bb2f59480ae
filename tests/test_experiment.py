"""Tests of the experiment file: the documented example, the bad-input corpus and edge cases.

External references used for expected numbers:
- JCGM 100:2008 (GUM) 4.3.7 (rectangular: u = a/sqrt(3)), 4.3.9 (triangular: u = a/sqrt(6)),
  4.3.3 (expanded uncertainty: u = U/k), 4.2.2-4.2.3 (Type A: mean, s/sqrt(n), n - 1 degrees
  of freedom), G.4.2 (relative reliability 0.25 gives 8 degrees of freedom).
- ASTM E1272-02 Table 1: class A 25 mL graduated cylinder +/-0.17 mL.
- SI Brochure, 9th edition, 2.3.1 (T/K = t/degC + 273.15) and Table 8 (1 min = 60 s).
- Python's hashlib (SHA-256) and statistics modules.
"""

from __future__ import annotations

import copy
import hashlib
import math
import re
import shutil
import statistics
import tomllib
import warnings
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from uqreport.errors import ExperimentError, InputError, ValidationWarning
from uqreport.experiment import Experiment, QuantitySpec, load_experiment
from uqreport.experiment.loader import _build
from uqreport.experiment.quantities import parse_quantity
from uqreport.experiment.schema import iter_fields
from uqreport.inputs import InputQuantity

HERE = Path(__file__).resolve().parent
GOOD = HERE / "data" / "good"
BAD = HERE / "data" / "bad"
DOCS = HERE.parent / "docs" / "experiment-file.md"


@pytest.fixture(scope="module")
def exp() -> Experiment:
    return load_experiment(GOOD / "experiment.toml")


def study_copy(tmp_path: Path, *edits: tuple[str, str], append: str = "") -> Path:
    """A copy of the good study with text replacements (each must apply) and appended text."""
    target = tmp_path / "study"
    shutil.copytree(GOOD, target)
    toml = target / "experiment.toml"
    text = toml.read_text(encoding="utf-8")
    for old, new in edits:
        assert old in text, old
        text = text.replace(old, new, 1)
    toml.write_text(text + append, encoding="utf-8")
    return target


def problems(path: Path):
    with pytest.raises(ExperimentError) as info:
        load_experiment(path)
    return info.value.problems


def one_problem(path: Path, where: str):
    found = [p for p in problems(path) if p.where == where]
    assert found, [str(p) for p in problems(path)]
    return found[0]


# -- the documented example -------------------------------------------------------------------
def test_good_example_loads(exp):
    assert exp.format_version == 1
    assert exp.study.invented is True
    assert exp.study.operator == "Group Lambda (invented demo)"
    assert str(exp.study.date) == "2024-03-05"
    assert [r.name for r in exp.batch.runs] == ["r1", "r2", "r3"]
    assert [len(r.table) for r in exp.batch.runs] == [20, 20, 20]
    assert set(exp.pumps) == {"pump_dye", "pump_oh"}
    assert [r.vessels for r in exp.tanks.runs] == [("tank_a",), ("tank_a", "tank_b")]
    assert len(exp.tracer.runs[0].feeds) == 2


def test_readings_are_every_30_s_and_start_near_08(exp):
    for run in exp.batch.runs:
        t = run.table.frame["time"].to_numpy()
        assert set(t[1:] - t[:-1]) == {30.0}
        # the first reading (30 s) lies below the initial absorbance of about 0.8
        assert 0.5 < run.table.frame["absorbance"].iloc[0] < 0.8


def test_temperature_in_kelvin_with_rectangular_uncertainty(exp):
    t = exp.study.temperature
    assert t.value == pytest.approx(295.15)  # SI Brochure 2.3.1
    assert t.unit == "K" and t.given_unit == "degC"
    assert t.half_width == 0.5
    assert t.u == pytest.approx(0.5 / math.sqrt(3))  # GUM 4.3.7


def test_expanded_uncertainty_and_unit_conversion(exp):
    eps = exp.chemistry.molar_absorptivity
    assert eps.u == pytest.approx(4.0e3 / 2)  # GUM 4.3.3
    dye = exp.quantity("solutions.dye_stock.concentration")
    assert dye.value == pytest.approx(2.0e-5) and dye.u == pytest.approx(2.0e-7)
    path = exp.cuvettes["q1"].pathlength
    assert path.value == pytest.approx(1.0) and path.half_width == pytest.approx(0.003)
    assert exp.quantity("tanks.runs[c1].steady_from").value == 1800.0  # 30 min


def test_graduated_cylinder_default_is_astm_e1272(exp):
    tol = exp.glassware["cyl25"].tolerance
    assert tol.half_width == 0.17
    assert tol.distribution == "rectangular"
    assert tol.u == pytest.approx(0.17 / math.sqrt(3))
    assert "ASTM E1272-02 Table 1" in tol.source
    assert "glassware.cyl25.tolerance" in exp.defaults_used
    assert "glassware.flask50.tolerance" not in exp.defaults_used


def test_defaults_are_filled_with_their_sources(exp):
    ss = exp.stopwatch.start_stop
    assert ss.value == 0.0 and ss.u == 0.10 and ss.distribution == "normal"
    assert ss.source == "Am. J. Phys. 87(2), 110 (2019), manual timing study"
    assert exp.spectrophotometer.noise_floor.value == 0.02
    assert exp.timing.lag.value == 0.0 and exp.timing.lag.u == 0.0
    assert "stopwatch.start_stop" in exp.defaults_used
    assert "spectrophotometer.noise_sd" not in exp.defaults_used


def test_hydroxide_levels_by_dilution(exp):
    stock = exp.solutions["oh_stock"].concentration.value
    levels = []
    for run in exp.batch.runs:
        sol = exp.solutions[run.hydroxide_solution]
        c = stock * sol.aliquot_volume.value / sol.final_volume.value
        v = run.hydroxide_volume.value
        levels.append(c * v / (v + run.dye_volume.value))
        assert [s.name for s in exp.dilution_path(sol.name)] == ["oh_stock", sol.name]
    assert levels == pytest.approx([0.02, 0.04, 0.06])


def test_inherited_quantities_keep_their_source_key(exp):
    run = exp.batch.runs[0]
    assert run.temperature.key == "study.temperature"
    assert exp.quantity("batch.runs[r1].temperature") is exp.study.temperature
    assert run.lag.key == "timing.lag"
    assert exp.batch.linear_limit.key == "spectrophotometer.linear_limit"


def test_cuvettes_of_runs(exp):
    r1, _, r3 = exp.batch.runs
    assert r1.cuvette == "q1"
    assert r3.cuvette is None and set(r3.table.frame["cuvette"]) == {"q2"}


def test_feed_settings_in_the_pump_table_unit(exp):
    feed = exp.tanks.runs[0].dye_feed
    assert (feed.solution, feed.pump, feed.setting.value) == ("dye_stock", "pump_dye", 5.0)
    assert feed.setting.given_unit == "dial"


def test_provenance_hashes(exp):
    assert set(exp.files) == {
        "experiment.toml",
        "r1.csv",
        "r2.csv",
        "r3.csv",
        "pump_dye.csv",
        "pump_oh.csv",
        "c1.csv",
        "c2.csv",
        "t1.csv",
    }
    for rel, digest in exp.files.items():
        assert digest == hashlib.sha256((GOOD / rel).read_bytes()).hexdigest()


def test_correlations_use_the_quantity_keys(exp):
    (c,) = exp.correlations
    assert (c.a, c.b, c.r) == (
        "chemistry.molar_absorptivity",
        "solutions.dye_stock.concentration",
        0.3,
    )


def test_quantity_lookup_suggests_on_a_typo(exp):
    hint = re.escape("Did you mean 'solutions.oh_stock.concentration'")
    with pytest.raises(KeyError, match=hint):
        exp.quantity("solutions.oh_stok.concentration")


def test_to_input(exp):
    q = exp.quantity("solutions.oh_stock.concentration").to_input("c_stock", group="solutions")
    assert isinstance(q, InputQuantity)
    assert (q.value, q.u, q.unit, q.group, q.kind) == (0.2, 0.001, "mol/L", "solutions", "B")
    with pytest.raises(InputError, match="glassware 'cyl10'"):
        exp.quantity("solutions.oh_040.aliquot_volume").to_input("v", group="volumes")
    spec = QuantitySpec("x", "volume", 1.0, "mL", u=0.1, group="mine")
    assert spec.to_input("x", group="theirs").group == "mine"
    assert not spec.exact and QuantitySpec("y", "volume", 1.0, "mL").exact


def test_loading_the_folder_is_the_same(exp):
    assert load_experiment(GOOD).files == exp.files


# -- the documentation ------------------------------------------------------------------------
def _docs() -> str:
    return DOCS.read_text(encoding="utf-8")


def _blocks(lang: str) -> list[str]:
    return re.findall(rf"```{lang}\n(.*?)```", _docs(), flags=re.S)


def test_docs_example_is_the_good_experiment_file():
    m = re.search(
        r"<!-- example: tests/data/good/experiment.toml -->\n```toml\n(.*?)```", _docs(), flags=re.S
    )
    assert m is not None
    assert m.group(1) == (GOOD / "experiment.toml").read_text(encoding="utf-8")


def test_docs_example_loads_like_the_good_file(tmp_path):
    text = re.search(
        r"<!-- example: tests/data/good/experiment.toml -->\n```toml\n(.*?)```", _docs(), flags=re.S
    ).group(1)
    target = tmp_path / "study"
    shutil.copytree(GOOD, target)
    (target / "experiment.toml").write_text(text, encoding="utf-8")
    loaded = load_experiment(target)
    assert loaded.raw == tomllib.loads((GOOD / "experiment.toml").read_text(encoding="utf-8"))


def test_every_toml_block_of_the_docs_parses():
    blocks = _blocks("toml")
    assert len(blocks) >= 3
    for block in blocks:
        tomllib.loads(block)


def test_docs_quantity_forms_give_the_gum_uncertainties():
    forms = next(tomllib.loads(b) for b in _blocks("toml") if "u_form" in b)
    got = {}
    for name, raw in forms.items():
        spec = parse_quantity(
            raw,
            key=name,
            dimension="concentration",
            mode="uncertain",
            report=lambda *a: pytest.fail(str(a)),
        )
        got[name] = spec
    assert got["u_form"].u == 0.0005
    assert got["rectangular"].u == pytest.approx(0.0010 / math.sqrt(3))  # GUM 4.3.7
    assert got["triangular"].u == pytest.approx(0.0010 / math.sqrt(6))  # GUM 4.3.9
    assert got["expanded"].u == pytest.approx(0.0005)  # GUM 4.3.3
    obs = [0.1003, 0.0998, 0.1001, 0.0999]
    assert got["observations"].value == pytest.approx(statistics.mean(obs))
    assert got["observations"].u == pytest.approx(statistics.stdev(obs) / 2)  # GUM 4.2.3
    assert (got["observations"].dof, got["observations"].kind) == (3, "A")
    assert got["reliability"].dof == pytest.approx(8.0)  # GUM G.4.2
    assert (got["t_dist"].distribution, got["t_dist"].dof) == ("t", 4)


def test_docs_csv_excerpts_are_lines_of_the_example_tables():
    for name, block in re.findall(
        r"`(\w+\.csv)` \([^)]*\):\n\n```csv\n(.*?)```", _docs(), flags=re.S
    ):
        lines = (GOOD / name).read_text(encoding="utf-8").splitlines()
        for line in block.splitlines():
            assert line in lines, (name, line)


def test_docs_name_every_key():
    text = _docs()
    for path, field in iter_fields():
        assert f"`{field.name}`" in text or f"[{path}" in text or f"`[{path}" in text, path


def test_docs_have_no_real_brands_and_defer_to_the_sds():
    text = _docs()
    assert "safety data sheet (SDS)" in text and "corrosive" in text and "stains" in text


# -- the bad-input corpus ---------------------------------------------------------------------
CASES = {
    "missing_column": ("r1.csv, line 1", "required column 'absorbance' is missing"),
    "text_in_number": ("r1.csv, line 5, column 'absorbance'", "'0.58o' is not a number"),
    "nan_in_table": ("r1.csv, line 3, column 'absorbance'", "'NaN' is not a finite number"),
    "negative_uncertainty": (
        "experiment.toml: batch.runs[r1].hydroxide_concentration.u",
        "u = -0.0002 is negative",
    ),
    "unknown_key": (
        "experiment.toml: spectrophotometer.nosie_sd",
        "unknown key 'nosie_sd' in [spectrophotometer]. Did you mean 'noise_sd'?",
    ),
    "missing_unit": (
        "experiment.toml: batch.runs[r1].hydroxide_concentration.unit",
        "no unit is given for this concentration",
    ),
    "duplicate_time": ("r1.csv, line 4, column 'time'", "duplicate time 60 s"),
    "non_psd_correlation": (
        "experiment.toml: correlations",
        "the correlation matrix is not positive semi-definite",
    ),
    "empty_table": ("r1.csv, line 2", "the table is empty"),
    "not_utf8": ("r1.csv, line 3", "the file is not UTF-8 text (byte 0xb0"),
    "missing_table": (
        "experiment.toml: batch.runs[r1].table",
        "table file 'r1_final.csv' does not exist",
    ),
    "unknown_cuvette": (
        "experiment.toml: batch.runs[r1].cuvette",
        "unknown cuvette 'quartz_1'. Did you mean 'quartz1'?",
    ),
    "decimal_comma": (
        "r1.csv, line 3, column 'absorbance'",
        "'0,646' is written with a decimal comma",
    ),
    "time_not_increasing": ("r1.csv, line 5, column 'time'", "time 75 s is earlier than 90 s"),
    "wrong_dimension": (
        "experiment.toml: batch.runs[r1].hydroxide_concentration.unit",
        "'mL' is a unit of volume, not of concentration",
    ),
    "two_uncertainty_forms": (
        "experiment.toml: batch.runs[r1].hydroxide_concentration",
        "two uncertainty forms are given (u and half_width)",
    ),
    "solution_cycle": (
        "experiment.toml: solutions.a.stock",
        "the stock solutions form a cycle: a -> b -> a",
    ),
    "duplicate_run_name": (
        "experiment.toml: batch.runs[1].name",
        "name 'r1' is used by two entries",
    ),
}
FIXES = {
    "nan_in_table": "give the measured number",
    "negative_uncertainty": "0.0002",
    "unknown_key": "noise_sd",
    "missing_unit": 'unit = "mol/L"',
    "decimal_comma": "'0.646'",
    "unknown_cuvette": "'quartz1', 'quartz2'",
    "not_utf8": "UTF-8",
    "non_psd_correlation": "mutually consistent",
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_case(case):
    where, message = CASES[case]
    with pytest.raises(ExperimentError, match=re.escape(message)) as info:
        load_experiment(BAD / case)
    probs = info.value.problems
    assert len(probs) == 1, [str(p) for p in probs]
    (p,) = probs
    assert p.where == where
    assert message in p.message
    assert p.fix
    if case in FIXES:
        assert FIXES[case] in p.fix


def test_every_bad_case_is_covered():
    assert {d.name for d in BAD.iterdir() if d.is_dir()} == set(CASES) | {"several_problems"}


def test_several_problems_are_reported_at_once():
    with pytest.raises(ExperimentError, match=r"^4 problems found:") as info:
        load_experiment(BAD / "several_problems")
    by_where = {p.where: p for p in info.value.problems}
    assert set(by_where) == {
        "experiment.toml: spectrophotometer.linear_limt",
        "r1.csv, line 4, column 'absorbance'",
        "experiment.toml: batch.runs[r1].hydroxide_concentration.unit",
        "experiment.toml: batch.runs[r1].blank",
    }
    typo = by_where["experiment.toml: spectrophotometer.linear_limt"]
    assert "Did you mean 'linear_limit'?" in typo.message
    assert "'abc' is not a number" in by_where["r1.csv, line 4, column 'absorbance'"].message
    assert "unknown blank 'b1'" in by_where["experiment.toml: batch.runs[r1].blank"].message
    assert all(p.fix for p in info.value.problems)


# -- file-level edge cases --------------------------------------------------------------------
def test_missing_experiment_file(tmp_path):
    (p,) = problems(tmp_path / "nothing.toml")
    assert "the experiment file does not exist" in p.message


def test_toml_syntax_error_names_the_line(tmp_path):
    path = tmp_path / "experiment.toml"
    path.write_text('format_version = 1\n[study]\ntitle = "x\n', encoding="utf-8")
    (p,) = problems(path)
    assert p.where == "experiment.toml, line 3"
    assert "not valid TOML" in p.message


def test_unsupported_format_version(tmp_path):
    study = study_copy(tmp_path, ("format_version = 1", "format_version = 2"))
    (p,) = problems(study)
    assert p.where == "experiment.toml: format_version"
    assert p.message == "format_version = 2 is not supported."
    assert "format_version = 1" in p.fix


def test_missing_format_version_and_study(tmp_path):
    path = tmp_path / "experiment.toml"
    path.write_text("[chemistry]\n", encoding="utf-8")
    wheres = [p.where for p in problems(path)]
    assert wheres == ["experiment.toml: format_version", "experiment.toml: study"]


def test_unknown_section_suggests(tmp_path):
    study = study_copy(tmp_path, append='\n[stopwach]\nresolution = { value = 0.01, unit = "s" }\n')
    p = one_problem(study, "experiment.toml: stopwach")
    assert "Did you mean 'stopwatch'?" in p.message


# -- key and quantity edge cases ---------------------------------------------------------------
def test_kelvin_celsius_mixup_is_out_of_range(tmp_path):
    study = study_copy(
        tmp_path,
        ('temperature = { value = 22.0, unit = "degC"', 'temperature = { value = 22.0, unit = "K"'),
    )
    p = one_problem(study, "experiment.toml: study.temperature.value")
    assert "value 22 K is out of range" in p.message and "273.15 K" in p.message


def test_bad_date(tmp_path):
    study = study_copy(tmp_path, ("date = 2024-03-05", 'date = "05.03.2024"'))
    p = one_problem(study, "experiment.toml: study.date")
    assert "'05.03.2024' is not a date" in p.message


def test_bare_number_for_an_uncertain_quantity(tmp_path):
    study = study_copy(
        tmp_path,
        (
            '[tanks.vessels.tank_b]\nvolume = { value = 500, unit = "mL",'
            ' half_width = 10, source = "fill mark (invented demo)" }',
            "[tanks.vessels.tank_b]\nvolume = 500",
        ),
    )
    p = one_problem(study, "experiment.toml: tanks.vessels.tank_b.volume")
    assert "500 is a bare number" in p.message
    assert 'unit = "mL"' in p.fix


def test_plain_value_takes_no_uncertainty(tmp_path):
    study = study_copy(
        tmp_path,
        (
            'reference_temperature = { value = 25.0, unit = "degC" }',
            'reference_temperature = { value = 25.0, unit = "degC", u = 1 }',
        ),
    )
    p = one_problem(study, "experiment.toml: study.reference_temperature.u")
    assert "is a plain value with no uncertainty" in p.message


def test_no_uncertainty_lists_the_forms(tmp_path):
    study = study_copy(tmp_path, ('u = 0.001, source = "3 titrations', 'source = "3 titrations'))
    p = one_problem(study, "experiment.toml: solutions.oh_stock.concentration")
    assert p.message == "no uncertainty is given for this concentration."
    for form in ("u =", "half_width =", "expanded =", "observations ="):
        assert form in p.fix


def test_t_distribution_needs_dof_and_k_needs_expanded(tmp_path):
    study = study_copy(
        tmp_path, ("u = 0.001, source", 'u = 0.001, distribution = "t", k = 2, source')
    )
    wheres = {p.where: p.message for p in problems(study)}
    assert (
        "distribution = 't' needs degrees of freedom."
        in wheres["experiment.toml: solutions.oh_stock.concentration.distribution"]
    )
    assert "without expanded" in wheres["experiment.toml: solutions.oh_stock.concentration.k"]


def test_glassware_only_for_volumes(tmp_path):
    study = study_copy(tmp_path, ("u = 0.001, source", 'glassware = "cyl10", source'))
    p = one_problem(study, "experiment.toml: solutions.oh_stock.concentration.glassware")
    assert "only carry the uncertainty of a volume" in p.message


def test_all_equal_observations_are_refused():
    msgs = []
    parse_quantity(
        {"unit": "s", "observations": [12.3, 12.3, 12.3]},
        key="x",
        dimension="time",
        mode="uncertain",
        report=lambda *a: msgs.append(a),
    )
    assert msgs and "all equal" in msgs[0][1] and "GUM F.2.2.1" in msgs[0][2]


# -- glassware ---------------------------------------------------------------------------------
def test_cylinder_capacity_not_in_the_astm_table(tmp_path):
    study = study_copy(
        tmp_path,
        ('capacity = { value = 10, unit = "mL" }', 'capacity = { value = 75, unit = "mL" }'),
    )
    p = one_problem(study, "experiment.toml: glassware.cyl10.tolerance")
    assert "no tabulated tolerance for a 75 mL graduated cylinder" in p.message
    assert "tolerance = { half_width" in p.fix


def test_cylinder_without_class_or_tolerance(tmp_path):
    study = study_copy(
        tmp_path, ('class = "A"                           # tolerance', "# tolerance")
    )
    p = one_problem(study, "experiment.toml: glassware.cyl10.tolerance")
    assert "no tolerance and no class" in p.message


def test_beaker_needs_a_tolerance(tmp_path):
    beaker = '\n[glassware.bk]\nkind = "beaker"\ncapacity = { value = 100, unit = "mL" }\n'
    study = study_copy(tmp_path, append=beaker)
    p = one_problem(study, "experiment.toml: glassware.bk.tolerance")
    assert p.message == "no default tolerance exists for a beaker."


def test_volume_beyond_capacity_and_partial_flask(tmp_path):
    study = study_copy(
        tmp_path,
        (
            'aliquot_volume = { value = 10, unit = "mL", glassware = "cyl10" }',
            'aliquot_volume = { value = 12, unit = "mL", glassware = "cyl10" }',
        ),
        (
            'final_volume = { value = 50, unit = "mL", glassware = "flask50" }\n\n'
            "[solutions.oh_080]",
            'final_volume = { value = 40, unit = "mL", glassware = "flask50" }\n\n'
            "[solutions.oh_080]",
        ),
    )
    msgs = {p.where: p.message for p in problems(study)}
    assert (
        "12 mL is more than the 10 mL capacity of glassware 'cyl10'"
        in msgs["experiment.toml: solutions.oh_040.aliquot_volume.value"]
    )
    assert (
        "a volumetric flask that holds only its capacity (50 mL)"
        in msgs["experiment.toml: solutions.oh_040.final_volume.value"]
    )


def test_pump_volumes_within_the_collecting_glassware(tmp_path):
    study = study_copy(
        tmp_path,
        (
            'glassware = "cyl50"\nfit = "line"\n\n[pumps.pump_oh]',
            'glassware = "cyl25"\nfit = "line"\n\n[pumps.pump_oh]',
        ),
    )
    p = one_problem(study, "pump_dye.csv, line 7, column 'volume'")
    assert "35.3 mL is more than the 25 mL capacity of glassware 'cyl25'" in p.message


# -- timing ------------------------------------------------------------------------------------
def test_draw_timing_needs_a_lag(tmp_path):
    study = study_copy(tmp_path, ('recorded_at = "reading"', 'recorded_at = "draw"'))
    p = one_problem(study, "experiment.toml: timing.lag")
    assert "needs the lag" in p.message


def test_run_override_to_draw_needs_its_own_lag(tmp_path):
    study = study_copy(tmp_path, ('name = "r2"\n', 'name = "r2"\nrecorded_at = "draw"\n'))
    p = one_problem(study, "experiment.toml: batch.runs[r2].lag")
    assert "for this run needs the lag" in p.message


def test_run_with_its_own_lag(tmp_path):
    study = study_copy(
        tmp_path,
        (
            'name = "r2"\n',
            'name = "r2"\nrecorded_at = "draw"\nlag = { value = 15, unit = "s", u = 3 }\n',
        ),
    )
    run = load_experiment(study).batch.runs[1]
    assert (run.recorded_at, run.lag.key, run.lag.value) == ("draw", "batch.runs[r2].lag", 15.0)


# -- runs and references ------------------------------------------------------------------------
def test_unknown_cuvette_in_the_table_names_the_line(tmp_path):
    study = study_copy(tmp_path)
    csv = study / "r3.csv"
    csv.write_text(
        csv.read_text(encoding="utf-8").replace("90,0.307,q2", "90,0.307,q3"), encoding="utf-8"
    )
    p = one_problem(study, "r3.csv, line 6, column 'cuvette'")
    assert "unknown cuvette 'q3'" in p.message and "'q1', 'q2'" in p.fix


def test_duplicate_run_names_across_sections(tmp_path):
    study = study_copy(tmp_path, ('name = "t1"', 'name = "r1"'))
    p = one_problem(study, "experiment.toml: tracer.runs[r1].name")
    assert p.message == "run name 'r1' is also used by batch.runs[r1]."


def test_hydroxide_given_twice_or_not_at_all(tmp_path):
    study = study_copy(
        tmp_path,
        (
            'name = "r1"\n',
            'name = "r1"\nhydroxide_concentration = { value = 0.02, unit = "M", u = 1e-4 }\n',
        ),
        (
            'hydroxide_solution = "oh_080"\n'
            'hydroxide_volume = { value = 25, unit = "mL", glassware = "cyl25" }\n',
            "",
        ),
    )
    msgs = {p.where: p.message for p in problems(study)}
    assert (
        "both hydroxide_concentration and hydroxide_solution + hydroxide_volume"
        in msgs["experiment.toml: batch.runs[r1]"]
    )
    assert "the run gives no hydroxide" in msgs["experiment.toml: batch.runs[r2]"]


def test_solution_used_against_its_reagent(tmp_path):
    study = study_copy(
        tmp_path, ('hydroxide_solution = "oh_040"', 'hydroxide_solution = "dye_stock"')
    )
    p = one_problem(study, "experiment.toml: batch.runs[r1].hydroxide_solution")
    assert "marked reagent = 'dye'" in p.message


def test_measured_baseline_needs_final_absorbance(tmp_path):
    study = study_copy(tmp_path, ('baseline = "fitted"', 'baseline = "measured"'))
    wheres = [p.where for p in problems(study)]
    assert wheres == [f"experiment.toml: batch.runs[r{i}].final_absorbance" for i in (1, 2, 3)]


def test_two_tanks_need_a_tank_column(tmp_path):
    study = study_copy(tmp_path, ('table = "c2.csv"', 'table = "c1.csv"'))
    p = one_problem(study, "experiment.toml: tanks.runs[c2].table")
    assert "two tanks but c1.csv has no 'tank' column" in p.message


def test_unknown_vessel_and_pump(tmp_path):
    study = study_copy(
        tmp_path,
        ('vessel = "tank_a"', 'vessel = "tank_c"'),
        ('feeds = [ { pump = "pump_dye"', 'feeds = [ { pump = "pump_dy"'),
    )
    msgs = {p.where: p for p in problems(study)}
    assert "unknown vessel 'tank_c'" in msgs["experiment.toml: tracer.runs[t1].vessel"].message
    p = msgs["experiment.toml: tracer.runs[t1].feeds[0].pump"]
    assert "unknown pump 'pump_dy'. Did you mean 'pump_dye'?" == p.message


def test_feed_setting_outside_the_calibration_warns(tmp_path):
    after = '\nhydroxide_feed = { solution = "oh_120"'
    study = study_copy(
        tmp_path,
        ('pump = "pump_dye", setting = 5 }' + after, 'pump = "pump_dye", setting = 9.5 }' + after),
    )
    with pytest.warns(ValidationWarning, match=r"setting 9.5 lies outside the calibrated settings"):
        load_experiment(study)


def test_feed_setting_bare_number_in_percent(tmp_path):
    study = study_copy(tmp_path)
    csv = study / "pump_dye.csv"
    text = csv.read_text(encoding="utf-8").replace("setting [dial]", "setting [%]")
    csv.write_text(text, encoding="utf-8")
    feed = load_experiment(study).tanks.runs[0].dye_feed
    assert feed.setting.value == pytest.approx(0.05) and feed.setting.given_unit == "%"


def test_feed_setting_in_another_unit_than_the_pump(tmp_path):
    feed = '{ solution = "dye_stock", pump = "pump_dye", setting = '
    study = study_copy(tmp_path, (feed + "5 }", feed + '{ value = 5, unit = "%" } }'))
    p = one_problem(study, "experiment.toml: tanks.runs[c1].dye_feed.setting")
    assert "calibrated in 'dial'" in p.message


def test_absolute_table_path(tmp_path):
    study = study_copy(tmp_path, ('table = "r1.csv"', f'table = "{(GOOD / "r1.csv").as_posix()}"'))
    p = one_problem(study, "experiment.toml: batch.runs[r1].table")
    assert "is an absolute path" in p.message


def test_single_table_instead_of_an_array(tmp_path):
    path = tmp_path / "experiment.toml"
    text = (GOOD / "experiment.toml").read_text(encoding="utf-8")
    head = text.split("[batch]")[0]
    path.write_text(head + '[batch.runs]\nname = "r1"\n', encoding="utf-8")
    p = one_problem(path, "experiment.toml: batch.runs")
    assert "must be an array of tables" in p.message and "[[batch.runs]]" in p.fix


# -- correlations ------------------------------------------------------------------------------
def _corr(tmp_path, a, b, r="0.5"):
    old = 'a = "chemistry.molar_absorptivity"\nb = "solutions.dye_stock.concentration"\nr = 0.3'
    return study_copy(tmp_path, (old, f'a = "{a}"\nb = "{b}"\nr = {r}'))


def test_correlation_of_an_unknown_quantity(tmp_path):
    study = _corr(tmp_path, "solutions.oh_stock.concentraton", "chemistry.molar_absorptivity")
    p = one_problem(study, "experiment.toml: correlations[0].a")
    assert "Did you mean 'solutions.oh_stock.concentration'?" in p.message


def test_correlation_of_a_glassware_volume(tmp_path):
    study = _corr(tmp_path, "solutions.oh_040.aliquot_volume", "chemistry.molar_absorptivity")
    p = one_problem(study, "experiment.toml: correlations[0].a")
    assert "takes its uncertainty from glassware 'cyl10'" in p.message


def test_correlation_of_a_rectangular_quantity(tmp_path):
    p = one_problem(
        _corr(tmp_path, "study.temperature", "chemistry.molar_absorptivity"),
        "experiment.toml: correlations[0].a",
    )
    assert "rectangular distribution" in p.message and "JCGM 101 6.4.8" in p.message


def test_correlation_through_an_alias(tmp_path):
    study = study_copy(
        tmp_path,
        (
            'temperature = { value = 22.0, unit = "degC", half_width = 0.5',
            'temperature = { value = 22.0, unit = "degC", u = 0.3',
        ),
        ('a = "chemistry.molar_absorptivity"', 'a = "batch.runs[r2].temperature"'),
    )
    (c,) = load_experiment(study).correlations
    assert c.a == "study.temperature"


def test_correlation_out_of_range(tmp_path):
    study = _corr(
        tmp_path, "chemistry.molar_absorptivity", "solutions.oh_stock.concentration", "1.5"
    )
    p = one_problem(study, "experiment.toml: correlations[0].r")
    assert "out of range" in p.message


def test_tank_feed_against_its_reagent(tmp_path):
    study = study_copy(
        tmp_path,
        ('hydroxide_feed = { solution = "oh_120"', 'hydroxide_feed = { solution = "dye_stock"'),
    )
    p = one_problem(study, "experiment.toml: tanks.runs[c1].hydroxide_feed.solution")
    assert "marked reagent = 'dye'" in p.message


def test_empty_cuvette_cells_need_a_run_cuvette(tmp_path):
    study = study_copy(tmp_path)
    csv = study / "r3.csv"
    csv.write_text(
        csv.read_text(encoding="utf-8").replace("90,0.307,q2", "90,0.307,"), encoding="utf-8"
    )
    p = one_problem(study, "experiment.toml: batch.runs[r3].cuvette")
    assert "readings with no cuvette (lines 6)" in p.message


def test_too_few_usable_readings_for_the_fit(tmp_path):
    window = 'noise_model = "constant"\nfit_start = { value = 590, unit = "s" }'
    study = study_copy(tmp_path, ('noise_model = "constant"', window))
    wheres = [p.where for p in problems(study)]
    assert wheres == [f"experiment.toml: batch.runs[r{i}].table" for i in (1, 2, 3)]


# -- extension and robustness ------------------------------------------------------------------
def test_a_new_section_only_needs_registering(tmp_path):
    from uqreport.experiment import schema

    field = schema.Field(
        "lab_notes",
        "record",
        "free notes",
        record=schema.RecordSpec((schema.Field("text", "str", "the notes", required=True),)),
    )
    schema.register_section(field)
    try:
        study = study_copy(tmp_path, append='\n[lab_notes]\ntext = "calm day"\n')
        assert load_experiment(study).sections["lab_notes"] == {"text": "calm day"}
    finally:
        del schema._REGISTRY["lab_notes"]


_BASE_BYTES = (GOOD / "experiment.toml").read_bytes()
_BASE = tomllib.loads(_BASE_BYTES.decode("utf-8"))


def _leaves(obj, path=()):
    if path:
        yield path
    if isinstance(obj, dict):
        items = obj.items()
    else:
        items = enumerate(obj) if isinstance(obj, list) else ()
    for k, v in items:
        yield from _leaves(v, (*path, k))


_PATHS = list(_leaves(_BASE))
_DELETE = object()
_POOL = [
    "x",
    "",
    "r1",
    "q1",
    "cyl10",
    "tank_a",
    "pump_dye",
    "r1.csv",
    "../r1.csv",
    -1,
    0,
    2.5,
    math.nan,
    math.inf,
    True,
    [],
    {},
    [1, 2],
    ["a"],
    [{}],
    {"value": 1},
    {"value": 1, "unit": "mL"},
    {"u": -1},
    {"value": "x", "unit": 5},
    {"observations": [1, "a"]},
    "2024-13-01",
    _DELETE,
]


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(_PATHS), st.sampled_from(_POOL)), min_size=1, max_size=3))
def test_any_damaged_file_is_loaded_or_reported(mutations):
    raw = copy.deepcopy(_BASE)
    for path, value in mutations:
        parent = raw
        try:
            for k in path[:-1]:
                parent = parent[k]
            if value is _DELETE:
                del parent[path[-1]]
            else:
                parent[path[-1]] = copy.deepcopy(value)
        except (KeyError, IndexError, TypeError):
            continue
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidationWarning)
        try:
            _build(raw, GOOD / "experiment.toml", _BASE_BYTES)
        except ExperimentError as exc:
            assert exc.problems
            assert all(p.where and p.message for p in exc.problems)


def test_docs_python_example_runs(tmp_path, monkeypatch):
    (code,) = _blocks("python")
    shutil.copytree(GOOD, tmp_path / "study")
    monkeypatch.chdir(tmp_path / "study")
    namespace: dict = {}
    exec(compile(code, str(DOCS), "exec"), namespace)  # the documented snippet itself
    assert namespace["exp"].quantity("solutions.oh_stock.concentration").value == 0.2


def test_zero_reading_noise_is_refused_at_the_check(tmp_path):
    """noise_sd = 0 passed the check and the analysis then stopped on "weights must be finite
    and >= 0." (no file, no key, no fix)."""
    study = study_copy(tmp_path, ("noise_sd = 0.002", "noise_sd = 0"))
    p = one_problem(study, "experiment.toml: spectrophotometer.noise_sd.value")
    assert p.message == "value 0 is out of range: it must be > 0."


def test_final_absorbance_in_the_range_of_readings(tmp_path):
    """final_absorbance = 12 passed the check and the analysis ended in an internal error
    (ZeroDivisionError); the run is not also told that it lacks a final absorbance."""
    study = study_copy(
        tmp_path,
        ('baseline = "fitted"', 'baseline = "measured"'),
        (
            'dye_volume = { value = 25, unit = "mL", glassware = "cyl25" }',
            'dye_volume = { value = 25, unit = "mL", glassware = "cyl25" }\n'
            "final_absorbance = { value = 12, u = 0.002 }",
        ),
    )
    found = [str(p) for p in problems(study) if "runs[r1]" in p.where]
    assert found == [
        "experiment.toml: batch.runs[r1].final_absorbance.value: value 12 is out of range: it"
        " must be >= -0.5 and <= 5. Fix: check the number and its unit."
    ]


def test_every_observation_is_checked_against_the_range():
    """A negative concentration among the observations passed when the mean was positive."""
    got: list[str] = []
    spec = parse_quantity(
        {"unit": "mmol/L", "observations": [501, -498, 500, 503]},
        key="solutions.s.concentration",
        dimension="concentration",
        mode="uncertain",
        report=lambda *a: got.append(" ".join(a)),
        low=0.0,
        low_open=True,
    )
    assert spec is None
    assert got == [
        "solutions.s.concentration.observations observation 2, -498 mmol/L, is out of range:"
        " each must be > 0 mol/L. check the number and its unit."
    ]


# -- a misspelt key is one problem, not also a missing one -------------------------------------
@pytest.mark.parametrize(
    ("edit", "where", "meant"),
    [
        (('title = "Dye', 'titel = "Dye'), "experiment.toml: study.titel", "title"),
        (('name = "r1"', 'nmae = "r1"'), "experiment.toml: batch.runs[0].nmae", "name"),
        (
            ('unit = "mol/L", u = 0.001', 'unti = "mol/L", u = 0.001'),
            "experiment.toml: solutions.oh_stock.concentration.unti",
            "unit",
        ),
        (
            ('unit = "mol/L", u = 0.001', 'unit = "mol/L", uu = 0.001'),
            "experiment.toml: solutions.oh_stock.concentration.uu",
            "u",
        ),
        (
            ("concentration = { value = 0.200", "concentration = { vaule = 0.200"),
            "experiment.toml: solutions.oh_stock.concentration.vaule",
            "value",
        ),
        (
            ('hydroxide_solution = "oh_040"', 'hydroxide_solutoin = "oh_040"'),
            "experiment.toml: batch.runs[r1].hydroxide_solutoin",
            "hydroxide_solution",
        ),
    ],
)
def test_a_misspelt_key_is_reported_once(tmp_path, edit, where, meant):
    """A typo of a required key is one problem with its "did you mean" (difflib's closest
    match); the key's absence, which the typo causes, is not reported a second time."""
    (p,) = problems(study_copy(tmp_path, edit))
    assert p.where == where
    assert f"Did you mean '{meant}'?" in p.message


def test_a_missing_key_without_a_typo_is_still_reported(tmp_path):
    # an unknown key that is no near miss of the absent one leaves the absence reported
    study = study_copy(tmp_path, ('title = "Dye', 'colour = "Dye'))
    wheres = {p.where for p in problems(study)}
    assert wheres == {"experiment.toml: study.colour", "experiment.toml: study.title"}


def test_experiment_file_not_utf8_names_the_line_and_byte(tmp_path):
    # 0xb0 is the degree sign in Latin-1; it is no valid UTF-8 start byte (RFC 3629)
    path = tmp_path / "experiment.toml"
    path.write_bytes(b'format_version = 1\n[study]\ntitle = "bath at 22 \xb0C"\n')
    (p,) = problems(path)
    assert p.where == "experiment.toml, line 3"
    assert "not UTF-8 text (byte 0xb0 cannot be decoded)" in p.message
    assert "UTF-8" in p.fix


@pytest.mark.parametrize(
    ("record", "given"),
    [
        (
            {"unit": "mol/L", "observations": [0.199, 0.2, 0.201], "distribution": "t"},
            "3 observations (2 degrees of freedom)",
        ),
        (
            {"value": 0.2, "unit": "mol/L", "u": 0.001, "distribution": "t", "dof": 1},
            "1 degrees of freedom",
        ),
    ],
)
def test_t_distribution_without_a_finite_variance_is_refused(record, given):
    """A Student t distribution with nu <= 2 has no finite variance (nu/(nu - 2) s^2 exists
    for nu > 2 only; JCGM 101 6.4.9, standard result), so Monte Carlo draws of it give no
    standard uncertainty; the file check says so instead of letting the draws run."""
    msgs = []
    spec = parse_quantity(
        record,
        key="x",
        dimension="concentration",
        mode="uncertain",
        report=lambda *a: msgs.append(a),
    )
    assert spec is None
    (where, message, fix) = msgs[0]
    assert where == "x.distribution" and f"with {given} has no finite variance" in message
    assert "4 or more observations" in fix


def test_t_distribution_with_three_degrees_of_freedom_is_accepted():
    # nu = 3: variance 3 s^2 (finite), so the input stays a Student t (JCGM 101 6.4.9)
    msgs = []
    spec = parse_quantity(
        {"unit": "mol/L", "observations": [0.199, 0.2, 0.201, 0.2], "distribution": "t"},
        key="x",
        dimension="concentration",
        mode="uncertain",
        report=lambda *a: msgs.append(a),
    )
    assert not msgs and spec is not None


def test_unreadable_experiment_file_is_a_problem_not_an_internal_error(tmp_path, monkeypatch):
    # a file the user may not read (PermissionError, an OSError) is named with the reason
    path = tmp_path / "experiment.toml"
    path.write_text("format_version = 1\n", encoding="utf-8")
    real = Path.read_bytes

    def denied(self):
        if self == path:
            raise PermissionError(13, "Permission denied")
        return real(self)

    monkeypatch.setattr(Path, "read_bytes", denied)
    (p,) = problems(path)
    assert p.where == str(path)
    assert p.message == "the experiment file cannot be read (Permission denied)."
    assert "readable" in p.fix
