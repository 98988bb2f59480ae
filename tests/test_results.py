"""results.json: the schema's records, JSON-safety, and the Bayesian records from a real run."""

from __future__ import annotations

import hashlib
import json
import math
import re
from pathlib import Path

import numpy as np
import pytest
from batch_helpers import demo_study

from uqreport import cli
from uqreport.analysis import Settings, analyze
from uqreport.results import results_dict


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    path = demo_study(tmp_path_factory.mktemp("res") / "demo", seed=7)
    res = analyze(path, settings=Settings(draws=3000, seed=2, plan=False))
    return res, results_dict(res, command_line=["test"])


def test_document_is_strict_json(run):
    _, doc = run
    text = json.dumps(doc, allow_nan=False)  # no NaN or infinity anywhere
    back = json.loads(text)
    assert back["schema"] == "uqreport.results/1"
    assert back["quantities"]["hydroxide_order"]["linear"]["dof"] == "inf"


def test_every_quantity_has_the_three_methods_and_a_closed_budget(run):
    res, doc = run
    ch = res.chains["batch"]
    for name, rec in doc["quantities"].items():
        assert {"unit", "symbol", "description", "linear", "montecarlo", "bayes", "budget"} <= set(
            rec
        )
        lin = ch.linear.estimate(name)
        assert rec["linear"]["U"] == lin.U and rec["linear"]["k"] == lin.k
        assert rec["montecarlo"]["validated"] == ch.validation[name].validated
        assert sum(e["share"] for e in rec["budget"]) == pytest.approx(1.0, abs=1e-9)
        b = rec["bayes"]
        assert {
            "median",
            "sd",
            "low",
            "high",
            "coverage",
            "low_68",
            "high_68",
            "hdi_low",
            "hdi_high",
            "ess",
            "tau",
            "converged",
        } <= set(b)
        assert b["low_68"] > b["low"] and b["high_68"] < b["high"]


def test_bayesian_medians_agree_with_linear_and_monte_carlo(run):
    """On the demo (nearly linear model) the three methods' central values agree within
    0.2 standard uncertainties (issue requirement; Monte Carlo and MCMC sampling error are
    well below that at these draw counts)."""
    _, doc = run
    for name in doc["chains"]["batch"]["headline"]:
        rec = doc["quantities"][name]
        u = rec["linear"]["u"]
        assert abs(rec["bayes"]["median"] - rec["linear"]["value"]) < 0.2 * u, name
        assert abs(rec["montecarlo"]["value"] - rec["linear"]["value"]) < 0.2 * u, name


def test_chain_bayes_record(run):
    _, doc = run
    b = doc["chains"]["batch"]["bayes"]
    assert b["converged"] is True
    assert {"walkers", "steps", "discard", "thin", "chains", "likelihood", "seed"} <= set(
        b["settings"]
    )
    assert 0.2 <= b["acceptance_fraction"] <= 0.5
    names = b["correlation"]["names"]
    assert [d["parameter"] for d in b["diagnostics"]] == names
    m = np.array(b["correlation"]["matrix"])
    assert m.shape == (len(names), len(names)) and np.allclose(np.diag(m), 1.0)
    pc = b["predictive_check"]
    assert 0.0 <= pc["share_outside"] <= 0.2 and pc["expected"] == pytest.approx(0.05)
    assert b["correlation"]["parameters"][0] == "ln k'(r1)"
    # leverage-adjusted expectation: below the nominal share (each reading pulls the fit)
    assert 0.0 < pc["expected_fitted"] < pc["expected"]
    # the nuisance parameters' posteriors: the readings' scatter over the noise model
    for r in ("r1", "r2", "r3"):
        s = b["parameters"][f"noise_scale/{r}"]
        assert s["unit"] == "1" and s["low"] < s["median"] < s["high"]
    assert b["quantities"] == {}  # without the hierarchy, every posterior has a linear twin


def test_hierarchical_quantities_reach_results_json(tmp_path):
    """With the hierarchy, the population k and the between-run spread have no linear
    counterpart: they are in the chain's bayes record, and the population k agrees with the
    weighted mean k of the linear method (the runs are consistent, so the spread is small)."""
    path = demo_study(tmp_path / "demo", seed=7)
    res = analyze(path, settings=Settings(seed=3, montecarlo=False, plan=False, hierarchical=True))
    doc = results_dict(res)
    q = doc["chains"]["batch"]["bayes"]["quantities"]
    assert set(q) == {"second_order_rate_constant_population", "between_run_spread"}
    pop, lin = (
        q["second_order_rate_constant_population"],
        doc["quantities"]["second_order_rate_constant"]["linear"],
    )
    assert pop["unit"] == "L/(mol*s)"
    assert abs(pop["median"] - lin["value"]) < 0.5 * lin["u"]
    assert q["between_run_spread"]["unit"] == "1" and q["between_run_spread"]["median"] < 0.1


def test_cli_mcmc_options(tmp_path, capsys):
    path = demo_study(tmp_path / "demo", seed=7)
    out = tmp_path / "out"
    code = cli.main(
        [
            "analyze",
            str(path),
            "--out",
            str(out),
            "--draws",
            "2000",
            "--no-mcmc",
            "--no-report",
            "--quiet",
        ]
    )
    assert code == 0
    doc = json.loads((out / "results.json").read_text())
    assert "bayes" not in doc["quantities"]["second_order_rate_constant"]
    assert doc["chains"]["batch"]["bayes"] is None
    assert cli.main(["analyze", str(path), "--out", str(out), "--chains", "2"]) == 2
    assert "4 or more" in capsys.readouterr().err
    code = cli.main(
        [
            "analyze",
            str(path),
            "--out",
            str(out),
            "--draws",
            "2000",
            "--save-draws",
            "--no-report",
            "--quiet",
        ]
    )
    assert code == 0
    with np.load(out / "posterior_batch.npz") as z:
        assert z["parameters"].shape[1] == len(z["parameter_names"])
        assert math.isfinite(float(z["derived"].mean()))


# -- the documents kept in step with the code ---------------------------------------------------
DOCS = Path(__file__).resolve().parent.parent / "docs"
#: maps keyed by names of the study (quantity, chain, file, package names), not by fields
_NAME_KEYED = {"quantities", "inputs", "chains", "files", "versions", "shares_check", "parameters"}


def _documented_names() -> set[str]:
    text = (DOCS / "results.md").read_text(encoding="utf-8")
    prose = re.sub(r"```.*?```", "", text, flags=re.S)
    return set(re.findall(r"`([^`\n]+)`", prose)) | set(re.findall(r'"(\w+)"\s*:', text))


def _field_names(obj, path=()):
    if isinstance(obj, dict):
        for k, v in obj.items():
            if path and path[-1] in _NAME_KEYED:
                yield from _field_names(v, (*path, "<name>"))
            else:
                yield "/".join(path), k
                yield from _field_names(v, (*path, k))
    elif isinstance(obj, list):
        for v in obj:
            yield from _field_names(v, path)


def test_every_field_of_results_json_is_documented(run):
    """docs/results.md names every field a real results.json holds (the Bayesian records
    included), so that the schema a user reads is the one written."""
    _, doc = run
    named = _documented_names()
    missing = sorted({(where, k) for where, k in _field_names(doc) if k not in named})
    assert not missing, missing


def test_quantity_records_hold_the_fields_of_the_schema(run):
    """The record fields results.json promises for each quantity: unit, description, linear
    {value, u, dof, k, U, coverage}, montecarlo {value, u, low, high, coverage, draws,
    validated}, budget entries {input, group, sensitivity, u_contribution, share}; and the
    provenance (package versions, seed, command line, SHA-256 of every input file)."""
    res, doc = run
    for rec in doc["quantities"].values():
        assert {"value", "u", "dof", "k", "U", "coverage"} <= set(rec["linear"])
        assert {"value", "u", "low", "high", "coverage", "draws", "validated"} <= set(
            rec["montecarlo"]
        )
        for e in rec["budget"]:
            assert {"input", "group", "sensitivity", "u_contribution", "share"} <= set(e)
    prov = doc["provenance"]
    assert {"numpy", "scipy", "uqreport"} <= set(prov["versions"]) and prov["seed"] == 2
    assert prov["command_line"] == ["test"]
    exp = res.experiment
    for rel, digest in prov["files"].items():  # FIPS 180-4 SHA-256 via hashlib
        assert digest == hashlib.sha256((exp.directory / rel).read_bytes()).hexdigest()
    assert "experiment.toml" in prov["files"] and len(prov["files"]) >= 2


def test_every_test_named_in_the_validation_document_exists():
    """docs/validation.md lists each external check with the test that runs it; a renamed or
    deleted test must not leave a dead reference behind."""
    text = (DOCS / "validation.md").read_text(encoding="utf-8")
    defined = set()
    for f in Path(__file__).resolve().parent.glob("test_*.py"):
        defined |= set(re.findall(r"^def (test_\w+)", f.read_text(encoding="utf-8"), re.M))
    named = {
        n
        for n in re.findall(r"::(test_\w+)", text)
        if not n.endswith("_")  # a pattern such as ::test_constant_lag_*
    }
    assert named and not sorted(named - defined), sorted(named - defined)
