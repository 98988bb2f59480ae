"""results.json: every number the tool reports, machine-readable.

The schema is documented in ``docs/results.md``; :data:`SCHEMA` names its version.  JSON has
no infinity or NaN: an infinite number of degrees of freedom is written as the string
``"inf"`` and a value that does not apply (the sensitivity coefficient of a block of
inputs) as ``null``.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import platform
import sys
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np

from .analysis import ChainResult, StudyResult
from .budget import Budget
from .io import atomic_write_text

__all__ = [
    "OUTPUT_FILES",
    "SCHEMA",
    "budget_csv",
    "fits_csv",
    "parameter_label",
    "refuse_input_overwrite",
    "results_dict",
    "write_results",
]

#: The files an analysis writes into its output folder (the posterior draws files come on
#: top with --save-draws).
OUTPUT_FILES = ("results.json", "budget.csv", "fits.csv", "report.pdf")

SCHEMA = "uqreport.results/1"

_PACKAGES = (
    "uqreport",
    "numpy",
    "scipy",
    "pandas",
    "uncertainties",
    "emcee",
    "matplotlib",
    "reportlab",
)


def _num(x: float | int | None) -> float | int | str | None:
    """A JSON-safe number: inf as "inf"/"-inf", NaN as null."""
    if x is None:
        return None
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    v = float(x)
    if math.isnan(v):
        return None
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    return v


def _clean(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [_clean(v) for v in obj.tolist()]
    if isinstance(obj, (float, int, np.floating, np.integer, np.bool_)) and not isinstance(
        obj, bool
    ):
        return _num(obj)
    return obj


def _budget_records(b: Budget, level: str) -> list[dict[str, Any]]:
    src = b.entries if level == "input" else b.by_group
    return [e.as_dict() for e in src]


def _versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for p in _PACKAGES:
        try:
            out[p] = metadata.version(p)
        except metadata.PackageNotFoundError:
            out[p] = "not installed"
    return out


def _quantities(res: StudyResult) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for cname, ch in res.chains.items():
        for j, o in enumerate(ch.linear.outputs):
            rec: dict[str, Any] = {
                "unit": o.unit,
                "symbol": o.label,
                "description": o.description,
                "chain": cname,
                "headline": o.name in ch.headline,
                "linear": ch.linear.estimate(o.name).as_dict(),
            }
            if ch.montecarlo is not None:
                mc = ch.montecarlo.estimate(o.name).as_dict()
                v = ch.validation[o.name]
                mc["validated"] = v.validated
                mc["validation"] = v.as_dict()
                rec["montecarlo"] = mc
            if ch.posterior is not None and o.name in ch.posterior.quantities:
                rec["bayes"] = _bayes_quantity(ch.posterior.quantities[o.name])
            b = ch.budgets[o.name]
            rec["budget"] = _budget_records(b, "input")
            rec["budget_by_group"] = _budget_records(b, "group")
            out[o.name] = rec
            del j
    return out


def _bayes_quantity(summary) -> dict[str, Any]:
    """The ``bayes`` record of a quantity: median, sd, equal-tailed intervals (stated
    coverage and 68.27 %), highest-density interval, ESS, tau, R-hat, converged."""
    d = summary.as_dict()
    out = {
        k: d.get(k)
        for k in (
            "median",
            "mean",
            "sd",
            "low",
            "high",
            "coverage",
            "hdi_low",
            "hdi_high",
            "ess",
            "tau",
            "rhat",
            "converged",
        )
    }
    for iv in d.get("intervals", []):
        if abs(float(iv["coverage"]) - 0.6827) < 1e-3:
            out["low_68"], out["high_68"] = iv["low"], iv["high"]
    return out


_PARAMETER_SYMBOLS = {
    "log_pseudo_rate_constant": "ln k'",
    "log_noise_scale": "ln s",
    "pseudo_rate_constant": "k'",
    "noise_scale": "s",
    "baseline": "A_inf",
    "initial": "A_0",
    "lag": "lag",
    "blank": "blank",
    "log_between_run_spread": "ln tau",
    "log_rate_constant_population": "ln k",
    "eta": "eta",
    "final": "A_inf",
    "photometric_accuracy": "phot",
    "pathlength": "l",
}


def parameter_label(name: str) -> str:
    """A short label of a posterior parameter for tables and plots ("ln k'(r1)")."""
    base, _, run = name.partition("/")
    sym = _PARAMETER_SYMBOLS.get(base, base)
    return f"{sym}({run})" if run else sym


def _bayes_chain(post, outputs: set[str]) -> dict[str, Any]:
    """The chain-level ``bayes`` record: settings, convergence, diagnostics per parameter,
    the posterior predictive check, the correlation of the sampled parameters, and the
    posterior summaries that have no linear counterpart (``outputs`` are the model's output
    names, whose summaries are under ``quantities``)."""
    from scipy import stats

    d = post.as_dict()
    diag = d["diagnostics"]
    acc = diag.get("acceptance") or []
    rhat = diag.get("rhat") or {}
    params = []
    for name in post.parameter_names:
        tau = (diag.get("tau") or {}).get(name)
        params.append(
            {
                "parameter": name,
                "tau": tau,
                "ess": (diag.get("ess") or {}).get(name),
                "acceptance": float(np.mean(acc)) if len(acc) else None,
                "rhat": rhat.get(name) if isinstance(rhat, dict) else None,
                "converged": bool(post.parameters[name].converged)
                if name in post.parameters
                else bool(diag.get("converged")),
            }
        )
    pc = post.predictive
    outliers = []
    for o in pc.outliers:
        z = float(stats.norm.isf(max(o.p_value, 1e-300) / 2.0))
        outliers.append(
            {
                "run": o.run,
                "table": o.table,
                "line": o.line,
                "absorbance": o.observed,
                "predicted": o.predicted,
                "p_value": o.p_value,
                "z": z if o.observed >= o.predicted else -z,
            }
        )
    return {
        "converged": bool(d["converged"]),
        "settings": d["settings"],
        "acceptance_fraction": float(np.mean(acc)) if len(acc) else None,
        "diagnostics": params,
        "messages": list(diag.get("messages") or []),
        "predictive_check": {
            "share_outside": pc.share_outside,
            "expected": pc.expected_share,
            "expected_fitted": pc.expected_share_fitted,  # NaN -> null in _clean
            "readings": pc.n_readings,
            "outside": pc.n_outside,
            "log_predictive_density": pc.log_predictive_density,
            "outliers": outliers,
        },
        "correlation": {
            "parameters": [parameter_label(n) for n in post.parameter_names],
            "names": list(post.parameter_names),
            "matrix": post.correlation,
        },
        "notes": list(post.notes),
        # quantities only the posterior has (the hierarchy's population k and between-run
        # spread) and the nuisance parameters (noise scales, A_0, A_inf)
        "quantities": {
            n: {"unit": q.unit, **_bayes_quantity(q)}
            for n, q in post.quantities.items()
            if n not in outputs
        },
        "parameters": {
            n: {"unit": q.unit, **_bayes_quantity(q)} for n, q in post.parameters.items()
        },
    }


def _inputs(ch: ChainResult) -> list[dict[str, Any]]:
    return [
        {
            "name": q.name,
            "value": q.value,
            "u": q.u,
            "unit": q.unit,
            "distribution": q.distribution,
            "half_width": q.half_width,
            "dof": q.dof,
            "type": q.kind,
            "group": q.group,
            "block": q.block,
            "source": q.source,
            "description": q.description,
        }
        for q in ch.linear.inputs
    ]


def _fits(ch: ChainResult) -> list[dict[str, Any]]:
    out = []
    for f in ch.chain.fits:
        out.append(
            {
                "run": f.name,
                "table": f.table,
                "baseline": f.params[0],
                "initial": f.params[1],
                "rate": f.params[2],
                "covariance": f.covariance,
                "chi2": f.chi2,
                "dof": f.dof,
                "noise_source": f.noise_source,
                "noise_scale": f.noise_scale,
                "runs_test_p": f.runs_test_p,
                "lag1_autocorrelation": f.lag1,
                "end_drift_t": f.drift_t,
                "log_linear_rate": f.log_linear_rate,
                "log_linear_u": f.log_linear_u,
                "excess_ratio": f.excess_ratio,
                "readings": int(f.used.size),
                "used": int(f.used.sum()),
                "excluded": [
                    {"line": int(f.lines[j]), "reason": f.reasons[j]}
                    for j in range(f.used.size)
                    if not f.used[j]
                ],
            }
        )
    return out


def results_dict(res: StudyResult, *, command_line: list[str] | None = None) -> dict[str, Any]:
    """The results.json document as a dict (JSON-safe)."""
    exp = res.experiment
    st = exp.study
    doc: dict[str, Any] = {
        "schema": SCHEMA,
        "study": {
            "title": st.title,
            "operator": st.operator,
            "date": st.date.isoformat(),
            "temperature_K": st.temperature.value,
            "u_temperature_K": st.temperature.u,
            "reference_temperature_K": (
                st.reference_temperature.value if st.reference_temperature else None
            ),
            "invented": st.invented,
        },
        "settings": res.settings.as_dict(),
        "quantities": _quantities(res),
        "inputs": {c: _inputs(ch) for c, ch in res.chains.items()},
        "chains": {
            c: {
                "headline": list(ch.headline),
                "fits": _fits(ch),
                "consistency": ch.chain.consistency,
                "bayes": None
                if ch.posterior is None
                else _bayes_chain(ch.posterior, {o.name for o in ch.linear.outputs}),
                "montecarlo": None
                if ch.montecarlo is None
                else {
                    "draws": ch.montecarlo.draws,
                    "adaptive": ch.montecarlo.adaptive,
                    "converged": ch.montecarlo.converged,
                    "failed_draws": ch.montecarlo.failed_draws,
                    "ndig": ch.montecarlo.ndig,
                },
            }
            for c, ch in res.chains.items()
        },
        "plan": None if res.plan is None else res.plan.as_dict(),
        "warnings": [f.as_dict() for f in res.all_findings],
        "provenance": {
            "versions": _versions(),
            "seed": res.settings.seed,
            "command_line": command_line if command_line is not None else list(sys.argv),
            "experiment": exp.path.name,
            "files": dict(sorted(exp.files.items())),
        },
    }
    return _clean(doc)


def budget_csv(res: StudyResult) -> str:
    """The budgets of every quantity as CSV (one row per entry, by input and by group)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(
        [
            "quantity",
            "unit",
            "level",
            "rank",
            "input",
            "group",
            "sensitivity",
            "u_input",
            "u_contribution",
            "share",
        ]
    )
    for ch in res.chains.values():
        for name, b in ch.budgets.items():
            for level, src in (("input", b.entries), ("group", b.by_group)):
                for rank, e in enumerate(src, start=1):
                    w.writerow(
                        [
                            name,
                            b.unit,
                            level,
                            rank,
                            e.input,
                            e.group,
                            _csvnum(e.sensitivity),
                            _csvnum(e.u_input),
                            _csvnum(e.u_contribution),
                            _csvnum(e.share),
                        ]
                    )
    return buf.getvalue()


def fits_csv(res: StudyResult) -> str:
    """Every reading of every batch run with its use, fitted value and residual."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(
        [
            "run",
            "table",
            "line",
            "time [s]",
            "absorbance",
            "used",
            "excluded_because",
            "fitted",
            "residual",
            "u_reading",
        ]
    )
    ch = res.chains.get("batch")
    if ch is not None:
        for f in ch.chain.fits:
            fitted = f.curve(f.times)
            k = 0
            for j in range(f.used.size):
                if f.used[j]:
                    res_j, u_j = f.residuals[k], f.sigma[k]
                    k += 1
                else:
                    res_j = u_j = math.nan
                w.writerow(
                    [
                        f.name,
                        f.table,
                        int(f.lines[j]),
                        _csvnum(f.times[j]),
                        _csvnum(f.absorbance[j]),
                        "yes" if f.used[j] else "no",
                        f.reasons[j],
                        _csvnum(fitted[j]),
                        _csvnum(res_j),
                        _csvnum(u_j),
                    ]
                )
    return buf.getvalue()


def _csvnum(x: float) -> str:
    v = float(x)
    if math.isnan(v):
        return ""
    return repr(v)


def write_results(
    res: StudyResult,
    out_dir: str | Path,
    *,
    command_line: list[str] | None = None,
    doc: dict[str, Any] | None = None,
) -> dict[str, Path]:
    """Write results.json, budget.csv and fits.csv into ``out_dir`` (atomically).

    ``doc`` is the results document when the caller has built it already.  Refuses to
    overwrite any input file of the study.
    """
    out = Path(out_dir)
    targets = {
        "results": out / "results.json",
        "budget": out / "budget.csv",
        "fits": out / "fits.csv",
    }
    refuse_input_overwrite(res.experiment, [out / name for name in OUTPUT_FILES])
    if doc is None:
        doc = results_dict(res, command_line=command_line)
    atomic_write_text(targets["results"], json.dumps(doc, indent=2, allow_nan=False) + "\n")
    atomic_write_text(targets["budget"], budget_csv(res))
    atomic_write_text(targets["fits"], fits_csv(res))
    return targets


def refuse_input_overwrite(exp, paths) -> None:
    """Raise :class:`~uqreport.errors.InputError` when one of ``paths`` is an input file of
    the experiment ``exp`` (the experiment file or a table it reads)."""
    from .errors import InputError

    inputs = {(exp.directory / rel).resolve() for rel in exp.files}
    inputs.add(exp.path.resolve())
    for p in paths:
        if Path(p).resolve() in inputs:
            raise InputError(
                f"output {p} would overwrite an input file of the study. Fix: choose another"
                " --out folder."
            )


def sha256_of(path: str | Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()
