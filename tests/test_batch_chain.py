"""The batch-kinetics chain end to end on simulated studies with known truth (the invented
demo simulator), and the behaviours of shared inputs the method must get right."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from batch_helpers import demo_study, edit_table, edit_toml, set_batch_option

from uqreport.analysis import Settings, analyze
from uqreport.budget import budget
from uqreport.chains.batch import build_batch_chain
from uqreport.demo import DemoScenario
from uqreport.errors import UqreportWarning
from uqreport.experiment import load_experiment
from uqreport.propagation import propagate_linear, propagate_montecarlo


@pytest.fixture
def demo(tmp_path):
    return demo_study(tmp_path / "demo", seed=7)


def _truth(path):
    return json.loads((path.parent / "truth.json").read_text())["quantities"]


def test_demo_recovers_truth_within_uncertainty(demo):
    """Simulation with known truth: every batch quantity within 3 standard uncertainties."""
    res = analyze(demo, settings=Settings(draws=4000, seed=3, plan=False, mcmc=False))
    ch = res.chains["batch"]
    truth = _truth(demo)
    for name in ch.linear.output_names:
        est = ch.linear.estimate(name)
        assert abs(est.value - truth[name]) <= 3 * est.u, name
    assert set(ch.headline) == {
        "second_order_rate_constant",
        "second_order_rate_constant_at_reference",
        "hydroxide_order",
    }


def test_linear_and_monte_carlo_agree_or_validation_says_not(demo):
    """JCGM 101 8: where the linear interval is validated the two agree within delta; where
    not, the verdict says so and the d values exceed delta."""
    res = analyze(demo, settings=Settings(draws=200_000, seed=5, plan=False, mcmc=False))
    ch = res.chains["batch"]
    for name in ch.linear.output_names:
        lin = ch.linear.estimate(name)
        mc = ch.montecarlo.estimate(name)
        v = ch.validation[name]
        # always: the two standard uncertainties agree to a few per cent (nearly linear model)
        assert mc.u == pytest.approx(lin.u, rel=0.03), name
        if v.validated:
            assert abs(lin.value - lin.U - mc.low) <= v.delta
            assert abs(lin.value + lin.U - mc.high) <= v.delta
        else:
            assert max(v.d_low, v.d_high) > v.delta


def test_constant_lag_leaves_k_prime_unchanged_with_a0_free(demo):
    """With A0 fitted, shifting every time by a constant only rescales A0 - A_inf: k' is
    unchanged, so the mean lag has zero sensitivity (design card 3, "what cancels")."""
    exp = load_experiment(demo)
    ch = build_batch_chain(exp)
    lin = propagate_linear(ch.model)
    u_k = lin.u[lin.index("pseudo_rate_constant/r1")]
    c = lin.sensitivity("pseudo_rate_constant/r1", "lag/r1")
    assert abs(c) * 3.0 < 1e-6 * u_k  # u(lag) = 3 s contributes nothing
    # and directly: shift the recorded times by 10 s and refit
    k0 = lin.values[lin.index("pseudo_rate_constant/r1")]
    edit_table(
        demo.parent / "batch_r1.csv", lambda rows: [[str(float(r[0]) + 10), r[1]] for r in rows]
    )
    lin2 = propagate_linear(build_batch_chain(load_experiment(demo)).model)
    assert lin2.values[lin2.index("pseudo_rate_constant/r1")] == pytest.approx(k0, rel=1e-9)


def test_lag_matters_when_a0_is_fixed_from_concentration(demo):
    """With A0 = eps l [D]0 fixed, a lag shifts the whole curve against a known start: k'
    depends on it and the budget shows the timing lag."""
    set_batch_option(demo, "initial", '"from_concentration"')
    ch = build_batch_chain(load_experiment(demo))
    lin = propagate_linear(ch.model)
    name = "pseudo_rate_constant/r1"
    c = lin.sensitivity(name, "lag/r1")
    kp = lin.values[lin.index(name)]
    # d k'/d lag: from A0 e^{-k'(t+lag)} fixed at t = 0, k' t_eff... at least 1e-3 k' per 3 s
    assert abs(c) * 3.0 > 1e-3 * kp
    b = budget(lin, name)
    lag_entry = next(e for e in b.entries if e.input == "lag/r1")
    assert lag_entry.share > 0.01
    # the absorptivity and the dye concentration enter too, and pathlength no longer cancels
    groups = {e.group: e.share for e in b.by_group}
    assert groups["molar absorptivity"] > 0.01
    assert groups["cuvette pathlength"] > 1e-4


def test_blank_offset_cancels_with_fitted_baseline(demo):
    """With A_inf fitted, a shared blank offset is absorbed into A_inf: zero sensitivity."""
    lin = propagate_linear(build_batch_chain(load_experiment(demo)).model)
    b = budget(lin, "pseudo_rate_constant/r1")
    share = {e.group: e.share for e in b.by_group}
    assert share["blank offset"] < 1e-12


def test_blank_offset_biases_log_slope_and_is_ranked(demo):
    """With A_inf taken as zero (the plain ln A slope), a blank offset biases k': the
    sensitivity is of the sign and size of d ln(A - b)/dt, and the blank offset is a leading
    budget entry, shared across the runs (design card 3)."""
    set_batch_option(demo, "baseline", '"zero"')
    set_batch_option(demo, "method", '"log-linear"')
    lin = propagate_linear(build_batch_chain(load_experiment(demo)).model)
    for run in ("r1", "r2", "r3"):
        name = f"pseudo_rate_constant/{run}"
        c = lin.sensitivity(name, "blank/b1")
        # subtracting a larger blank from a decaying signal makes it fall faster: c > 0
        assert c > 0
        b = budget(lin, name)
        ranked = [e.group for e in b.by_group if not e.is_cross_term]
        assert ranked.index("blank offset") <= 2
        assert b.share_of_group("blank offset") > 0.05
    # shared by the runs: the k'_r are positively correlated through it
    r = lin.correlation
    i, j = lin.index("pseudo_rate_constant/r1"), lin.index("pseudo_rate_constant/r2")
    assert r[i, j] > 0.05


def test_shared_stock_correlates_runs_but_not_the_order(demo):
    """One stock concentration shared by the three runs: it moves every [OH] by the same
    factor, so it contributes to k but not to the order b (a slope in ln [OH])."""
    lin = propagate_linear(build_batch_chain(load_experiment(demo)).model)
    c_b = lin.sensitivity("hydroxide_order", "concentration/oh_stock")
    c_k = lin.sensitivity("second_order_rate_constant", "concentration/oh_stock")
    k = lin.values[lin.index("second_order_rate_constant")]
    u_b = lin.u[lin.index("hydroxide_order")]
    assert abs(c_b) * 0.0005 < 1e-6 * u_b  # u(stock) = 0.0005 mol/L: no share in u(b)
    assert c_k == pytest.approx(-k / 0.100, rel=1e-3)  # k = k'/[OH], [OH] proportional to stock


def test_temperature_term_follows_arrhenius(demo):
    """d ln k / dT = E_a / (R T^2) (about 8 %/K for 60 kJ/mol, design card 2.1;
    R = 8.314462618 J/(mol K), CODATA).  The input is the bath's actual temperature: a bath
    warmer than stated made the runs faster, so k at the stated temperature is lower, and
    the sensitivity is -E_a/(R T^2) k."""
    lin = propagate_linear(build_batch_chain(load_experiment(demo)).model)
    k = lin.values[lin.index("second_order_rate_constant")]
    c = lin.sensitivity("second_order_rate_constant", "temperature/study")
    T = 295.15
    assert c / k == pytest.approx(-60.57e3 / (8.314462618 * T**2), rel=1e-4)


def test_same_seed_same_numbers(demo):
    settings = Settings(draws=2000, seed=11, plan=False, mcmc=False)
    a = analyze(demo, settings=settings).chains["batch"]
    b = analyze(demo, settings=settings).chains["batch"]
    assert np.array_equal(a.montecarlo.values, b.montecarlo.values)
    assert np.array_equal(a.linear.values, b.linear.values)


def test_linear_range_exclusion_is_flagged(demo):
    """Readings above the linear limit are excluded from the fit and flagged (common
    practice: the usable range ends near 1 A)."""
    edit_table(demo.parent / "batch_r1.csv", lambda rows: [["10.0", "1.35"], *rows])
    ch = build_batch_chain(load_experiment(demo))
    fit = next(f for f in ch.fits if f.name == "r1")
    assert not fit.used[0] and "linear limit" in fit.reasons[0]
    assert any(f.check == "linear range" and f.run == "r1" for f in ch.findings)


def test_low_excess_ratio_warns_with_the_effect_on_k(demo):
    """Excess ratio [OH]/[dye]0 below 10: a warning that says k is biased low."""
    # 2.5x the dye concentration gives [dye]0 ~ 2.3e-5 M: r1 ratio ~ 870, still fine; make
    # the dye stock 300x stronger to bring r1 to about 7
    edit_toml(demo, 'value = 4.6e-05, unit = "mol/L"', 'value = 0.0138, unit = "mol/L"')
    ch = build_batch_chain(load_experiment(demo))
    w = [f for f in ch.findings if f.check == "excess ratio"]
    assert w and "biased low" in w[0].message
    ratio = next(f for f in ch.fits if f.name == "r1").excess_ratio
    assert 5 < ratio < 10


def test_run_disagreement_adds_run_to_run_scatter(demo):
    """A run whose k' is off by 20 % makes the runs inconsistent (chi-square test, Birge
    ratio); a random-effects spread is carried as an input and u(k) grows."""
    base = propagate_linear(build_batch_chain(load_experiment(demo)).model)
    edit_table(
        demo.parent / "batch_r2.csv",
        lambda rows: [[str(float(r[0]) * 1.25), r[1]] for r in rows],
    )
    ch = build_batch_chain(load_experiment(demo))
    assert ch.consistency["p_value"] < 0.05
    assert ch.consistency["tau_relative"] > 0.02
    assert any(f.check == "run consistency" for f in ch.findings)
    lin = propagate_linear(ch.model)
    j = lin.index("second_order_rate_constant")
    assert lin.u[j] > base.u[base.index("second_order_rate_constant")]
    assert math.isfinite(lin.dof[j]) and lin.dof[j] < 50


def test_exact_lag_is_applied_by_the_model(demo):
    """A lag stated exact (u = 0) has no input, but the model must still shift the times by
    it: with A0 fixed from the concentration the model at the estimates reproduces the
    nominal fit."""
    edit_toml(demo, 'lag = { value = 8, u = 3, unit = "s"', 'lag = { value = 8, u = 0, unit = "s"')
    set_batch_option(demo, "initial", '"from_concentration"')
    ch = build_batch_chain(load_experiment(demo))
    y = ch.model.at_estimates()
    names = ch.model.output_names
    for fit in ch.fits:
        assert y[names.index(f"pseudo_rate_constant/{fit.name}")] == pytest.approx(
            fit.params[2], rel=1e-8
        )


def test_run_to_run_scatter_is_one_welch_satterthwaite_term(demo):
    """The run-to-run inputs of all runs come from one estimate tau with R - 1 degrees of
    freedom, so they are one term of Welch-Satterthwaite (GUM G.4.1, eq. G.2b): with every
    other input of infinite degrees of freedom, nu_eff = u_c^4 / (V_tau^2 / (R - 1)), V_tau
    the variance they contribute together.  Counted run by run, nu_eff came out about R
    times too large."""
    edit_table(
        demo.parent / "batch_r2.csv",
        lambda rows: [[str(float(r[0]) * 1.25), r[1]] for r in rows],
    )
    ch = build_batch_chain(load_experiment(demo))
    assert ch.consistency["tau_relative"] > 0
    lin = propagate_linear(ch.model)
    names = lin.inputs.names
    tau_idx = [i for i, n in enumerate(names) if n.startswith("between_run/")]
    R = len(tau_idx)
    assert R == 3
    others = [i for i in range(len(names)) if i not in tau_idx]
    assert all(math.isinf(lin.inputs.dof[i]) for i in others)
    for name in ("second_order_rate_constant", "hydroxide_order"):
        j = lin.index(name)
        c = lin.jacobian[j, tau_idx]
        cov = lin.input_covariance[np.ix_(tau_idx, tau_idx)]
        v_tau = float(c @ cov @ c)
        assert lin.dof[j] == pytest.approx(lin.u[j] ** 4 / (v_tau**2 / (R - 1)), rel=1e-9)
    b = budget(lin, "second_order_rate_constant")
    assert sum(1 for e in b.entries if e.group == "run-to-run scatter") == 1


@pytest.mark.parametrize("seed", [8, 10])
def test_log_linear_fit_keeps_readings_clear_of_the_baseline(tmp_path, seed):
    """ln(a - a_inf) exists only for a > a_inf.  With a measured baseline (one noise SD above
    the fitted one) and readings down to the noise floor, tail readings lie within a few
    noise SDs of it: Monte Carlo lost 30 % of its draws (seed 8) or stopped with an error
    (seed 10) before such readings were excluded on the fitted curve."""
    path = demo_study(tmp_path / "demo", seed=seed)
    text = path.read_text(encoding="utf-8")
    for fit in build_batch_chain(load_experiment(path)).fits:
        table = f'table = "batch_{fit.name}.csv"\n'
        final = f"final_absorbance = {{ value = {fit.params[0] + 0.002:.4f}, u = 0.002 }}\n"
        text = text.replace(table, table + final)
    path.write_text(text, encoding="utf-8")
    set_batch_option(path, "baseline", '"measured"')
    set_batch_option(path, "method", '"log-linear"')
    ch = build_batch_chain(load_experiment(path))
    near = [r for f in ch.fits for r in f.reasons if "of the baseline (log-linear fit)" in r]
    assert near
    lin = propagate_linear(ch.model)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UqreportWarning)
        mc = propagate_montecarlo(ch.model, draws=4000, rng=1)
    assert mc.failed_draws <= 20  # at most 0.5 % (draws about the observed readings)
    for run in ("r2", "r3"):
        j = lin.index(f"pseudo_rate_constant/{run}")
        assert mc.u[mc.index(f"pseudo_rate_constant/{run}")] == pytest.approx(lin.u[j], rel=0.1)


def test_log_linear_weights_come_from_the_fitted_curve(tmp_path):
    """The weight of ln(a_j - a_inf) is its inverse variance by first-order propagation,
    u(ln y) = u(y)/y (GUM 5.1.2), at the expected value of the reading: the fitted curve.
    Weights from the readings' own values favour the readings that noise pushed down and
    biased k' by about -0.1 u (simulation of the demo's fastest run, 20 000 data sets)."""
    path = demo_study(tmp_path / "demo", seed=7, scenario=DemoScenario(baseline=0.0))
    set_batch_option(path, "baseline", '"zero"')
    set_batch_option(path, "method", '"log-linear"')
    ch = build_batch_chain(load_experiment(path))
    for fit, run in zip(ch.fits, ch.study.runs, strict=True):
        assert fit.noise_source == "spec" and np.all(fit.pathlength == 1.0)
        t = fit.times[fit.used]
        expected = (fit.curve(t) - fit.params[0]) ** 2 / fit.sigma**2
        np.testing.assert_allclose(run.weights, expected, rtol=1e-9)


def _with_column(path, name, values):
    """Add a column ``name`` (one value per data row) to a batch table."""
    lines = path.read_text(encoding="utf-8").splitlines()
    head = [ln for ln in lines if ln.startswith("#")]
    header = next(ln for ln in lines if not ln.startswith("#"))
    rows = [ln for ln in lines[len(head) + 1 :] if ln.strip()]
    out = [*head, f"{header},{name}", *(f"{r},{v}" for r, v in zip(rows, values, strict=True))]
    path.write_text("\n".join(out) + "\n", encoding="utf-8")


def _rate(path, run="r1"):
    lin = propagate_linear(build_batch_chain(load_experiment(path)).model)
    return lin.values[lin.index(f"pseudo_rate_constant/{run}")]


def test_proportional_noise_is_taken_at_the_fitted_absorbance(demo):
    """noise_model = "proportional": sigma_A^2 = noise_sd^2 + (noise_relative A)^2 with A the
    expected reading, i.e. the fitted absorbance (a variance function is evaluated at the
    mean, as in iteratively reweighted least squares; common practice), plus the jitter as
    effective variance (dA/dt)^2 u(jitter)^2 (design card 3)."""
    set_batch_option(demo, "noise_model", '"proportional"')
    edit_toml(demo, "noise_sd = 0.002", "noise_sd = 0.002\nnoise_relative = 0.01")
    ch = build_batch_chain(load_experiment(demo))
    assert not any(f.check == "noise model" for f in ch.findings)
    for fit, run in zip(ch.fits, ch.study.runs, strict=True):
        assert fit.noise_source == "spec"
        t = fit.times[fit.used]
        A_fit = fit.curve(t)  # the offsets are 0 at their estimates in the demo
        c, a0, k = fit.params
        slope = -k * (a0 - c) * np.exp(-k * (t + fit.time_origin))
        var = 0.002**2 + (0.01 * A_fit) ** 2 + (slope * 2.0) ** 2  # u(jitter) = 2 s
        np.testing.assert_allclose(run.weights, 1.0 / var, rtol=1e-3)
        np.testing.assert_allclose(fit.sigma, np.sqrt(var), rtol=1e-3)
    # the readings' own standard uncertainty is the noise model's part (the jitter is an
    # input of its own)
    lin = propagate_linear(ch.model)
    fit = ch.fits[0]
    line = fit.lines[fit.used][0]
    q = lin.inputs.inputs[lin.inputs.names.index(f"absorbance/r1/line{line}")]
    a_first = float(fit.curve(fit.times[fit.used][:1])[0])
    assert q.u == pytest.approx(np.hypot(0.002, 0.01 * a_first), rel=1e-5)


def test_proportional_noise_without_a_relative_part_warns(demo):
    set_batch_option(demo, "noise_model", '"proportional"')
    ch = build_batch_chain(load_experiment(demo))
    w = [f for f in ch.findings if f.check == "noise model" and f.run is None]
    assert w and "noise_relative is 0" in w[0].message


def test_measured_baseline_cancels_the_blank_and_carries_the_final_reading(demo):
    """baseline = "measured": A_inf is the final absorbance measured after the decay.  Both
    the readings and the final value are read after one blank, so the blank offset cancels
    in A - A_inf (zero sensitivity), while the final reading's own uncertainty enters k':
    raising A_inf makes ln(A - A_inf) fall faster, so dk'/dA_inf > 0."""
    text = demo.read_text(encoding="utf-8")
    for run in ("r1", "r2", "r3"):
        table = f'table = "batch_{run}.csv"\n'
        text = text.replace(table, table + "final_absorbance = { value = 0.008, u = 0.002 }\n")
    demo.write_text(text, encoding="utf-8")
    set_batch_option(demo, "baseline", '"measured"')
    ch = build_batch_chain(load_experiment(demo))
    lin = propagate_linear(ch.model)
    for fit in ch.fits:
        assert fit.params[0] == pytest.approx(0.008, abs=1e-12)
        name = f"pseudo_rate_constant/{fit.name}"
        u_k = lin.u[lin.index(name)]
        assert abs(lin.sensitivity(name, "blank/b1")) * 0.002 < 1e-6 * u_k
        assert lin.sensitivity(name, f"final_absorbance/{fit.name}") > 0
        b = budget(lin, name)
        entry = next(e for e in b.entries if e.input == f"final_absorbance/{fit.name}")
        assert entry.share > 0.01


def test_per_cuvette_pathlength_normalises_each_reading(demo):
    """Beer-Lambert, A = eps l c (design card 2.1): readings of one run taken alternately in
    a 1 cm and a 0.5 cm cuvette, the latter at half the absorbance, are the same
    pathlength-normalised data a = A/l as all in the 1 cm cuvette, and the noise of a
    reading (in A) weighs l^2 times in a; the short cuvette's pathlength uncertainty then
    enters k' (it no longer cancels), while with one cuvette per run it cancels."""
    ch1 = build_batch_chain(load_experiment(demo))
    lin = propagate_linear(ch1.model)
    b = budget(lin, "pseudo_rate_constant/r1")
    assert b.share_of_group("cuvette pathlength") < 1e-12
    fit1 = next(f for f in ch1.fits if f.name == "r1")
    edit_toml(
        demo,
        "[glassware.cyl50]",
        '[cuvettes.c2]\npathlength = { value = 0.5, unit = "cm", half_width = 0.005,'
        ' distribution = "rectangular" }\n\n[glassware.cyl50]',
    )
    table = demo.parent / "batch_r1.csv"
    edit_table(
        table,
        lambda rows: [
            [r[0], f"{float(r[1]) / 2:.6f}" if i % 2 else r[1]] for i, r in enumerate(rows)
        ],
    )
    n = sum(1 for ln in table.read_text().splitlines()[2:] if ln.strip())
    short = np.arange(n) % 2 == 1
    _with_column(table, "cuvette", ["c2" if s else "c1" for s in short])
    ch = build_batch_chain(load_experiment(demo))
    fit = next(f for f in ch.fits if f.name == "r1")
    run = next(r for r in ch.study.runs if r.name == "r1")
    np.testing.assert_allclose(fit.pathlength, np.where(short, 0.5, 1.0))
    # the model's data at the input estimates: a = (A - offsets)/l, as the 1 cm readings
    # (halving a 4-decimal reading is exact to 6 decimals)
    X0 = ch.model.inputs.values[None, :]
    _, a = run.data(X0)
    used = fit.used
    np.testing.assert_allclose(a[0], fit1.absorbance[used], atol=1e-12)
    # weights l^2/sigma^2: the readings in the short cuvette weigh a quarter as much (the
    # jitter term, in a, is the same for both)
    lin = propagate_linear(ch.model)
    sig_a = fit.sigma / fit.pathlength[used]
    np.testing.assert_allclose(run.weights, 1.0 / sig_a**2, rtol=1e-12)
    i = np.flatnonzero(used)
    q = {
        lin.inputs.names[j]: lin.inputs.inputs[j].u
        for j in range(len(lin.inputs.names))
        if lin.inputs.names[j].startswith("absorbance/r1/")
    }
    for j in i:
        assert q[f"absorbance/r1/line{fit.lines[j]}"] == pytest.approx(0.002, rel=1e-12)
    assert abs(lin.sensitivity("pseudo_rate_constant/r1", "pathlength/c2")) > 0
    b = budget(lin, "pseudo_rate_constant/r1")
    assert b.share_of_group("cuvette pathlength") > 1e-6  # small, but no longer cancelled


def test_fit_window_and_flags_exclude_readings_as_if_removed(demo):
    """A reading outside the fit window or flagged 'exclude'/'outlier' is left out of the fit
    (and named with its reason): k' equals the fit of the table with those rows deleted."""
    table = demo.parent / "batch_r1.csv"
    original = table.read_text(encoding="utf-8")
    n = sum(1 for ln in original.splitlines()[2:] if ln.strip())
    flags = [""] * n
    flags[4], flags[9] = "exclude", "outlier"
    _with_column(table, "flag", flags)
    set_batch_option(demo, "fit_start", '{ value = 60, unit = "s" }')
    set_batch_option(demo, "fit_end", '{ value = 800, unit = "s" }')
    ch = build_batch_chain(load_experiment(demo))
    fit = next(f for f in ch.fits if f.name == "r1")
    reasons = dict(zip(fit.times.tolist(), fit.reasons, strict=True))
    assert reasons[30.0] == "outside the fit window"
    assert reasons[fit.times[4]] == "flagged 'exclude' in the table"
    assert reasons[fit.times[9]] == "flagged 'outlier' in the table"
    assert all(r == "outside the fit window" for t, r in reasons.items() if t > 800)
    lin = propagate_linear(ch.model)
    k_flagged = lin.values[lin.index("pseudo_rate_constant/r1")]
    kept = fit.times[fit.used]
    table.write_text(original, encoding="utf-8")
    edit_table(table, lambda rows: [r for r in rows if float(r[0]) in set(kept.tolist())])
    text = demo.read_text(encoding="utf-8")
    text = text.replace('fit_start = { value = 60, unit = "s" }\n', "")
    demo.write_text(text.replace('fit_end = { value = 800, unit = "s" }\n', ""), encoding="utf-8")
    assert _rate(demo) == pytest.approx(k_flagged, rel=1e-9)


def test_across_run_estimators_against_closed_forms(demo):
    """With the order fixed at 1, k_r = k'_r/[OH]_r and k is their weighted mean with
    weights 1/u_own^2 (compare: Cox, Metrologia 39 (2002) 589, procedure A, from memory),
    chi2 = sum w (k_r - k)^2, Birge ratio sqrt(chi2/(R - 1)), p from the chi-square law
    (scipy.stats); with the order free, b and ln k_b are the weighted straight line
    ln k' = ln k_b + b ln [OH] (numpy.polyfit as the reference)."""
    from scipy import stats

    ch = build_batch_chain(load_experiment(demo))
    lin = propagate_linear(ch.model)
    v = {n: lin.values[lin.index(n)] for n in lin.output_names}
    runs = ("r1", "r2", "r3")
    kp = np.array([v[f"pseudo_rate_constant/{r}"] for r in runs])
    oh = np.array([v[f"hydroxide_concentration/{r}"] for r in runs])
    k_r = np.array([v[f"second_order_rate_constant/{r}"] for r in runs])
    np.testing.assert_allclose(k_r, kp / oh, rtol=1e-12)  # at the stated temperature
    w = np.array(ch.consistency["mean_weights"])
    assert v["second_order_rate_constant"] == pytest.approx(float(w @ k_r), rel=1e-12)
    # the weights are 1/u^2 from the inputs acting on one run alone: here every run has its
    # own readings, lag and volumes, and shares the stock, the cylinders and the temperature
    chi2 = float(ch.consistency["chi2"])
    assert ch.consistency["birge_ratio"] == pytest.approx(np.sqrt(chi2 / 2), rel=1e-12)
    assert ch.consistency["p_value"] == pytest.approx(stats.chi2.sf(chi2, 2), rel=1e-9)
    wo = np.array(ch.consistency["order_weights"])
    b, ln_kb = np.polyfit(np.log(oh), np.log(kp), 1, w=np.sqrt(wo))
    assert v["hydroxide_order"] == pytest.approx(b, rel=1e-9)
    assert v["rate_constant_free_order"] == pytest.approx(np.exp(ln_kb), rel=1e-9)


def test_reference_temperature_correction_is_arrhenius(demo):
    """k_ref = k exp(-(E_a/R)(1/T_ref - 1/T_s)) with R = 8.314462618 J/(mol K) (CODATA 2018):
    the demo states 22 degC and refers to 25 degC with E_a = 60.57 kJ/mol, so
    k_ref/k = exp(60570/R (1/295.15 - 1/298.15)) = 1.2819 (recomputed), and
    d ln k_ref / d E_a = (1/T_s - 1/T_ref)/R."""
    lin = propagate_linear(build_batch_chain(load_experiment(demo)).model)
    k = lin.values[lin.index("second_order_rate_constant")]
    k_ref = lin.values[lin.index("second_order_rate_constant_at_reference")]
    R, Ts, Tr = 8.314462618, 295.15, 298.15
    assert k_ref / k == pytest.approx(math.exp(60570 / R * (1 / Ts - 1 / Tr)), rel=1e-12)
    assert k_ref / k == pytest.approx(1.2819, abs=1e-4)
    c = lin.sensitivity("second_order_rate_constant_at_reference", "activation_energy")
    assert c / k_ref == pytest.approx((1 / Ts - 1 / Tr) / R, rel=1e-4)
    # Ea in J/mol internally; its u = 2 kJ/mol gives about 1.5 % of k_ref
    u_ea = 2000.0
    b = budget(lin, "second_order_rate_constant_at_reference")
    assert b.share_of_group("activation energy") == pytest.approx(
        (c * u_ea) ** 2 / lin.u[lin.index("second_order_rate_constant_at_reference")] ** 2,
        rel=1e-6,
    )
