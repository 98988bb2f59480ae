"""The improvement planner: its predictions against simulation, its verdict, its schedule
advice against an independent Fisher-information computation, and budget closure."""

from __future__ import annotations

import json

import numpy as np
import pytest
from batch_helpers import demo_study
from scipy.optimize import curve_fit

from uqreport import cli
from uqreport.analysis import Settings, analyze
from uqreport.models.decay import decay_curve, fit_decay
from uqreport.planner import plan_study


@pytest.fixture(scope="module")
def demo_result(tmp_path_factory):
    path = demo_study(tmp_path_factory.mktemp("plan") / "demo", seed=7)
    return analyze(path, settings=Settings(montecarlo=False, mcmc=False))


def test_more_readings_prediction_matches_simulation(demo_result):
    """The planner's "as many readings again" prediction of u(k'_r1) agrees within 10 % with
    simulating the run with the extra readings (noise, lag and jitter as stated) and
    refitting every simulated data set."""
    res = demo_result
    plan = plan_study(res, targets=("pseudo_rate_constant/r1",), share_draws=200)
    qp = plan.quantities["pseudo_rate_constant/r1"]
    case = next(c for c in qp.cases if c.case == "more readings")
    u_pred = case.U_new / qp.k
    fit = next(f for f in res.chains["batch"].chain.fits if f.name == "r1")
    exp = res.experiment
    t_used = fit.times[fit.used]
    times = np.linspace(t_used[0], t_used[-1], 2 * t_used.size)
    c, a0, k = fit.params
    rng = np.random.default_rng(99)
    N = 4000
    lag = exp.timing.lag.value + rng.normal(0, exp.timing.lag.u, (N, 1))
    jit = rng.normal(0, exp.timing.jitter.u, (N, times.size))
    A = decay_curve(times[None, :] + lag + jit, c, a0, k)
    A = A + rng.normal(0, exp.spectrophotometer.noise_sd.value, A.shape)
    # the analysis's weights: noise plus jitter as effective variance
    slope = -k * (a0 - c) * np.exp(-k * (times + exp.timing.lag.value))
    w = 1.0 / (exp.spectrophotometer.noise_sd.value**2 + (slope * exp.timing.jitter.u) ** 2)
    sims = fit_decay(times + exp.timing.lag.value, A, weights=w, start=[c, a0, k])
    sd = float(np.std(sims.rate, ddof=1))
    assert u_pred == pytest.approx(sd, rel=0.10)


def test_verdict_names_the_largest_group_and_the_numbers(demo_result):
    plan = demo_result.plan
    qp = plan.quantities["second_order_rate_constant"]
    b = demo_result.chains["batch"].budgets["second_order_rate_constant"]
    top = b.top(1)[0]
    assert f"is {top.group} ({100 * top.share:.0f} %)" in qp.verdict
    best = qp.cases[0]
    assert qp.cases == tuple(sorted(qp.cases, key=lambda c: -c.reduction))
    assert f"{best.U_new:.2g}" in qp.verdict and f"{qp.U:.2g}" in qp.verdict
    assert best.U_new < qp.U


def test_halving_one_input_matches_closed_form(demo_result):
    """Halving the temperature uncertainty: the re-weighted budget gives
    U_new^2 / k^2 = u^2 - (3/4) u_T^2 (GUM 5.1.2 with one term quartered)."""
    ch = demo_result.chains["batch"]
    name = "second_order_rate_constant"
    qp = demo_result.plan.quantities[name]
    case = next(c for c in qp.cases if c.group == "temperature" and c.case == "halved")
    b = ch.budgets[name]
    share_T = b.share_of_group("temperature")
    u = ch.linear.estimate(name).u
    expected = np.sqrt(u**2 * (1 - 0.75 * share_T))
    assert case.U_new / qp.k == pytest.approx(expected, rel=1e-9)


def test_schedule_u_matches_curve_fit_covariance(demo_result):
    """The schedule advice's u(k') for the user's times equals the known-sigma covariance of
    scipy.optimize.curve_fit (general-purpose reference) on the fitted curve with the same
    effective-variance weights; the advised spacing is a local minimum."""
    res = demo_result
    exp = res.experiment
    advice = {s.run: s for s in res.plan.schedule}
    for fit in res.chains["batch"].chain.fits:
        s = advice[fit.name]
        t = fit.times[fit.used] + fit.time_origin
        c, a0, k = fit.params
        slope = -k * (a0 - c) * np.exp(-k * t)
        sig = np.sqrt(exp.spectrophotometer.noise_sd.value**2 + (slope * exp.timing.jitter.u) ** 2)
        y = decay_curve(t, c, a0, k)
        _, pcov = curve_fit(
            lambda tt, c_, a_, k_: decay_curve(tt, c_, a_, k_),
            t,
            y,
            p0=[c, a0, k],
            sigma=sig,
            absolute_sigma=True,
        )
        assert s.u_current == pytest.approx(np.sqrt(pcov[2, 2]), rel=1e-3)
        assert s.u_optimal <= s.u_current
        assert 0.0 <= s.gain_percent < 100.0


def test_every_budget_closes(demo_result):
    """Every budget's shares plus cross terms add to 1 within 0.01 (by input and by group)."""
    ch = demo_result.chains["batch"]
    for name, b in ch.budgets.items():
        assert sum(e.share for e in b.entries) == pytest.approx(1.0, abs=0.01), name
        assert sum(e.share for e in b.by_group) == pytest.approx(1.0, abs=0.01), name


def test_plan_in_results_and_cli(tmp_path, capsys):
    path = demo_study(tmp_path / "demo", seed=7)
    assert cli.main(["plan", str(path), "--out", str(tmp_path / "out")]) == 0
    out = capsys.readouterr().out
    assert "Improvement plan" in out and "Sampling schedule" in out
    assert "The largest contributor to u(k) is temperature" in out
    doc = json.loads((tmp_path / "out" / "results.json").read_text())
    plan = doc["plan"]
    assert set(plan["quantities"]) == set(doc["chains"]["batch"]["headline"])
    rec = plan["quantities"]["second_order_rate_constant"]
    assert {"U", "k", "verdict", "cases", "unit"} <= set(rec)
    assert {
        "group",
        "case",
        "description",
        "U_new",
        "reduction",
        "reduction_percent",
        "method",
    } <= set(rec["cases"][0])
    assert plan["schedule"] and "gain_percent" in plan["schedule"][0]
    assert "only_share" in plan["shares_check"]["second_order_rate_constant"][0]


def test_class_a_case_is_stated_at_the_analysis_coverage(tmp_path):
    """At 99 % coverage the "class A glassware" case must give the expanded uncertainty of the
    study re-analysed with class A glassware at 99 % as well (U = k_p u_c for the same p,
    GUM 6.2-6.3): comparing a 95 % U with the actual 99 % U would show a gain that is only
    the change of coverage factor."""
    path = demo_study(tmp_path / "demo", seed=7)
    class_a = analyze(path, settings=Settings(coverage=0.99, montecarlo=False, mcmc=False))
    text = path.read_text(encoding="utf-8")
    old = 'capacity = { value = 50, unit = "mL" }\nclass = "A"'
    assert old in text
    path.write_text(text.replace(old, old[:-3] + '"B"'), encoding="utf-8")
    res = analyze(path, settings=Settings(coverage=0.99, montecarlo=False, mcmc=False))
    name = "hydroxide_concentration/r1"  # the cylinder's scale error enters [OH] directly
    plan = plan_study(res, targets=(name,), share_draws=200)
    qp = plan.quantities[name]
    case = next(c for c in qp.cases if c.case == "class A glassware")
    want = class_a.chains["batch"].linear.estimate(name).U
    assert qp.U > want
    assert case.U_new == pytest.approx(want, rel=1e-9)


def test_schedule_uses_the_fitted_model_and_the_noise_model(tmp_path):
    """With the baseline held at zero and proportional noise, the advice's u(k') is that of
    the two-parameter fit the analysis makes: the known-sigma covariance of
    scipy.optimize.curve_fit (general-purpose reference) of A0 exp(-k' t) with
    sigma^2 = noise_sd^2 + (noise_relative A)^2 + (dA/dt)^2 u(jitter)^2 at the fitted
    curve.  (The three-parameter information used before gave a larger u(k') and advised
    longer spans than the fitted model needs.)"""
    from batch_helpers import edit_toml, set_batch_option

    from uqreport.demo import DemoScenario
    from uqreport.planner import _schedule

    path = demo_study(tmp_path / "demo", seed=7, scenario=DemoScenario(baseline=0.0))
    set_batch_option(path, "baseline", '"zero"')
    set_batch_option(path, "noise_model", '"proportional"')
    set_batch_option(path, "noise_source", '"spec"')
    edit_toml(path, "noise_sd = 0.002", "noise_sd = 0.002\nnoise_relative = 0.005")
    res = analyze(path, settings=Settings(montecarlo=False, mcmc=False, plan=False))
    fits = {f.name: f for f in res.chains["batch"].chain.fits}
    advice = {s.run: s for s in _schedule(res.experiment, fits)}
    for name, fit in fits.items():
        s = advice[name]
        t = fit.times[fit.used] + fit.time_origin
        _, a0, k = fit.params
        y = decay_curve(t, 0.0, a0, k)
        slope = -k * a0 * np.exp(-k * t)
        sig = np.sqrt(0.002**2 + (0.005 * y) ** 2 + (slope * 2.0) ** 2)
        _, pcov = curve_fit(
            lambda tt, a_, k_: decay_curve(tt, 0.0, a_, k_),
            t,
            y,
            p0=[a0, k],
            sigma=sig,
            absolute_sigma=True,
        )
        assert s.u_current == pytest.approx(np.sqrt(pcov[1, 1]), rel=1e-3), name
        assert s.u_optimal <= s.u_current


def test_verdict_states_U_of_the_quantity_to_two_significant_digits(demo_result):
    """The verdict's numbers are expanded uncertainties to two significant digits with
    trailing zeros kept (GUM 7.2.6: 0.020, not 0.02), and name U of the quantity."""
    from uqreport.planner import _fmt

    assert [_fmt(x) for x in (0.02, 0.0036, 0.0996, 0.015, 15.3)] == [
        "0.020",
        "0.0036",
        "0.10",
        "0.015",
        "15",
    ]
    qp = demo_result.plan.quantities["second_order_rate_constant"]
    assert f"reduces U(k) from {_fmt(qp.U)} to" in qp.verdict


def test_simulated_design_reproduces_the_fit_with_a_blank_offset(tmp_path):
    """The designs the planner compares are noise-free readings on the fitted curves: refitted
    in the current design they must give back the fitted k' exactly (least squares on exact
    data).  The curves are net of the absorbance offsets, so the readings written must
    include them: with a blank offset of 0.010 A and the baseline held at zero, readings
    without it gave a k' 6-10 % off."""
    from batch_helpers import edit_toml, set_batch_option

    from uqreport.chains.batch import build_batch_chain
    from uqreport.demo import DemoScenario
    from uqreport.planner import _synthetic_runs, _with_runs

    path = demo_study(tmp_path / "demo", seed=7, scenario=DemoScenario(baseline=0.0))
    set_batch_option(path, "baseline", '"zero"')
    edit_toml(path, "offset = { value = 0,", "offset = { value = 0.010,")
    res = analyze(path, settings=Settings(montecarlo=False, mcmc=False, plan=False))
    fits = {f.name: f for f in res.chains["batch"].chain.fits}
    exp = res.experiment
    again = build_batch_chain(_with_runs(exp, _synthetic_runs(exp, fits)))
    for fit in again.fits:
        assert fit.params[2] == pytest.approx(fits[fit.name].params[2], rel=1e-7), fit.name


def test_replicate_run_is_at_the_middle_concentration(tmp_path):
    """ "One more replicate run at the middle concentration": the run replicated is the one
    with the median [OH], whatever the runs are called (runs named c, a, b at 0.02, 0.04
    and 0.06 mol/L: the replicate is of run a; by name it would have been of b)."""
    from uqreport.planner import _synthetic_runs

    path = demo_study(tmp_path / "demo", seed=7)
    text = path.read_text(encoding="utf-8")
    for old, new in (("r1", "c"), ("r2", "a"), ("r3", "b")):
        text = text.replace(f'name = "{old}"', f'name = "{new}"')
    path.write_text(text, encoding="utf-8")
    res = analyze(path, settings=Settings(montecarlo=False, mcmc=False, plan=False))
    lin = res.chains["batch"].linear
    oh = {r: lin.values[lin.index(f"hydroxide_concentration/{r}")] for r in "abc"}
    assert oh["c"] < oh["a"] < oh["b"]
    fits = {f.name: f for f in res.chains["batch"].chain.fits}
    runs = _synthetic_runs(res.experiment, fits, extra_runs=1, concentrations=oh)
    assert runs[-1].name == "a_replicate1"
    assert runs[-1].hydroxide_volume == next(r for r in runs if r.name == "a").hydroxide_volume
