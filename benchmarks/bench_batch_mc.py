"""Monte Carlo through the batch-kinetics chain (3 runs x 20 readings) against a curve_fit loop.

A demo study with three runs of 20 readings each is simulated (``DemoScenario``), written to
a temporary folder and built into the batch chain; every draw refits the three decays
(vectorised Newton/Gauss-Newton in ``fit_decay``).  Figures, each from a fresh
single-threaded process:

* ``propagate_montecarlo(chain.model, draws=10^5)``: wall and CPU time (best of
  ``--repeats``), peak RSS and the Python-side peak of the call (tracemalloc, separately);
* on one input matrix drawn once with ``model.inputs.sample``: (a) the vectorised model on
  all draws, (b) the naive baseline, a Python loop over a subset of the draws and over the
  runs calling ``scipy.optimize.curve_fit`` on each run's perturbed data (``RunModel.data``)
  with the run's fixed weights and the same starting point, extrapolated per draw; the
  ratio (b)/(a), and the largest difference of k' between the two on the subset, with the
  weighted sum of squares at both solutions as the referee (untimed).

Targets: 10^5 draws in at most 5 s wall time on one core, and at least 30 times faster than
the curve_fit loop on the same draws.  The ratio is judged on CPU time (both sides are
single-threaded and measured interleaved in one process, so a busy machine does not tilt
it); the wall-clock ratios are printed beside it.  The script exits 0 unless the code under
test fails.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _harness as H

FULL_DRAWS = 100_000
QUICK_DRAWS = 10_000
FULL_NAIVE = 300
QUICK_NAIVE = 40
TARGET_SECONDS = 5.0
TARGET_RATIO = 30.0
#: k' from the vectorised refits and from curve_fit (default tolerances) must agree to this
#: relative difference; u(k')/k' is about 2 %, so this is below 1e-3 of an uncertainty.
K_RTOL = 1e-5
DATA_SEED = 7


def scenario():
    """Three runs of 20 readings; spacings keep every reading above the noise floor."""
    from uqreport.demo import BatchRunPlan, DemoScenario

    return DemoScenario(
        runs=(
            BatchRunPlan("r1", 10.0, 10.0, 30.0, readings=20, spacing=30.0),
            BatchRunPlan("r2", 20.0, 10.0, 20.0, readings=20, spacing=20.0),
            BatchRunPlan("r3", 30.0, 10.0, 10.0, readings=20, spacing=15.0),
        )
    )


def build_chain(directory: Path):
    from uqreport.chains.batch import build_batch_chain
    from uqreport.demo import write_demo
    from uqreport.experiment import load_experiment

    write_demo(directory, seed=DATA_SEED, scenario=scenario())
    return build_batch_chain(load_experiment(directory / "experiment.toml"))


def curve_fit_params(run, xi):
    """(c, a0, k') of one run for one input row ``xi`` (shape (1, p)) by scipy's curve_fit.

    Default tolerances, the run's fixed weights (sigma = w^-1/2, absolute) and the run's
    nominal solution as the starting point, as the vectorised refits use.
    """
    import numpy as np
    from scipy.optimize import curve_fit

    if run.method != "exponential":
        raise ValueError(f"run {run.name}: the baseline loop handles the exponential fit only")
    t, a = run.data(xi)
    t, a = np.asarray(t[0]), np.asarray(a[0])
    sigma = 1.0 / np.sqrt(run.weights)
    c = run.fixed_baseline(xi)
    a0 = None if run.initial is None else run.initial(xi)
    s = np.asarray(run.start, dtype=float)
    if c is None and a0 is None:
        f, p0 = (lambda t, c, a0, k: c + (a0 - c) * np.exp(-k * t)), s
        full = lambda p: p  # noqa: E731
    elif c is None:
        a0v = float(a0[0])
        f, p0 = (lambda t, c, k: c + (a0v - c) * np.exp(-k * t)), s[[0, 2]]
        full = lambda p: (p[0], a0v, p[1])  # noqa: E731
    elif a0 is None:
        cv = float(c[0])
        f, p0 = (lambda t, a0, k: cv + (a0 - cv) * np.exp(-k * t)), s[[1, 2]]
        full = lambda p: (cv, p[0], p[1])  # noqa: E731
    else:
        cv, a0v = float(c[0]), float(a0[0])
        f, p0 = (lambda t, k: cv + (a0v - cv) * np.exp(-k * t)), s[[2]]
        full = lambda p: (cv, a0v, p[0])  # noqa: E731
    try:
        popt, _ = curve_fit(f, t, a, p0=p0, sigma=sigma, absolute_sigma=True)
    except RuntimeError:  # no convergence within maxfev
        return np.full(3, np.nan)
    return np.asarray(full(popt), dtype=float)


def weighted_ssq(run, X, params):
    """Weighted sum of squares of the run's fit at ``params`` (N, 3) for input rows X (N, p)."""
    import numpy as np

    t, a = run.data(X)
    c, a0, k = params[:, 0:1], params[:, 1:2], params[:, 2:3]
    r = a - (c + (a0 - c) * np.exp(-k * t))
    return np.sum(run.weights * r * r, axis=1)


# -- workers (each runs in a fresh process) ----------------------------------------------
def worker_mc(draws: int, seed: int, *, trace: bool, profile: bool) -> dict[str, Any]:
    with tempfile.TemporaryDirectory(prefix="uqreport-bench-") as tmp:
        chain = build_chain(Path(tmp))
    model = chain.model
    res, out = H.timed_montecarlo(
        model, draws, seed, trace=trace, profile=profile, profile_lines=18
    )
    out.update(
        n_inputs=model.n_inputs,
        n_outputs=model.n_outputs,
        readings_used=[int(f.used.sum()) for f in chain.fits],
        headline={
            name: [res.estimate(name).value, res.estimate(name).u] for name in chain.headline
        },
    )
    return out


def evaluate_chunked(model, X, chunk: int):
    import numpy as np

    return np.concatenate([model.evaluate(X[s : s + chunk]) for s in range(0, len(X), chunk)])


def worker_compare(draws: int, n_naive: int, seed: int, repeats: int) -> dict[str, Any]:
    import numpy as np

    with tempfile.TemporaryDirectory(prefix="uqreport-bench-") as tmp:
        chain = build_chain(Path(tmp))
    model, runs = chain.model, chain.study.runs
    R = len(runs)
    chunk = H.engine_chunk(model, 16_384)
    gen = np.random.default_rng(seed)
    t0 = time.perf_counter()
    X = model.inputs.sample(draws, gen)  # the input matrix, drawn once
    t_sample = time.perf_counter() - t0
    model.evaluate(X[:1000])  # warm-up
    curve_fit_params(runs[0], X[:1])

    t_chunked, t_whole, t_loop = [], [], []
    c_chunked, c_loop = [], []
    p_loop = np.empty((n_naive, R, 3))
    clock = time.process_time
    for _ in range(repeats):  # interleaved, so that a busy spell hits every figure alike
        t0, c0 = time.perf_counter(), clock()
        Y = evaluate_chunked(model, X, chunk)  # (a) vectorised, in the engine's chunks
        t_chunked.append(time.perf_counter() - t0)
        c_chunked.append(clock() - c0)
        t0 = time.perf_counter()
        Y_whole = model.evaluate(X)  # (a') vectorised, one call on the whole matrix
        t_whole.append(time.perf_counter() - t0)
        t0, c0 = time.perf_counter(), clock()
        for i in range(n_naive):  # (b) the naive baseline: draws x runs, one curve_fit each
            xi = X[i : i + 1]
            for j, run in enumerate(runs):
                p_loop[i, j] = curve_fit_params(run, xi)
        t_loop.append(time.perf_counter() - t0)
        c_loop.append(clock() - c0)
    kp_vec = Y[:n_naive, :R]
    kp_loop = p_loop[:, :, 2]

    # the referee, untimed: which solution has the lower weighted sum of squares?
    S_vec = np.empty((n_naive, R))
    S_loop = np.empty((n_naive, R))
    for j, run in enumerate(runs):
        params, _ = run.fit(X[:n_naive])  # the same vectorised refits, all three parameters
        S_vec[:, j] = weighted_ssq(run, X[:n_naive], params)
        S_loop[:, j] = weighted_ssq(run, X[:n_naive], p_loop[:, j])
    excess = (S_vec - S_loop) / S_loop  # > 0: the vectorised refit stopped higher
    u_kp = Y[:, :R].std(axis=0, ddof=1)
    diff = np.abs(kp_vec - kp_loop)
    rel = diff / np.abs(kp_loop)
    with np.errstate(invalid="ignore"):
        chunk_vs_whole = float(np.nanmax(np.abs(Y - Y_whole) / np.abs(Y_whole)))
    return {
        "draws": draws,
        "chunk": chunk,
        "n_naive": n_naive,
        "runs": R,
        "repeats": repeats,
        "sample_s": t_sample,
        "vectorised_chunked_s": H.summarise(t_chunked),
        "vectorised_whole_s": H.summarise(t_whole),
        "naive_s": H.summarise(t_loop),
        "naive_per_draw_s": min(t_loop) / n_naive,
        "vectorised_chunked_cpu_s": min(c_chunked),
        "naive_per_draw_cpu_s": min(c_loop) / n_naive,
        "naive_failures": int(np.sum(~np.isfinite(kp_loop))),
        "vectorised_failures": int(np.sum(~np.all(np.isfinite(Y), axis=1))),
        "chunked_vs_whole_max_rel_diff": chunk_vs_whole,
        "max_rel_diff": float(np.nanmax(rel)),
        "median_rel_diff": float(np.nanmedian(rel)),
        "max_diff_over_u": float(np.nanmax(diff / u_kp)),
        "share_vectorised_ssq_not_higher": float(np.mean(excess <= 1e-12)),
        "max_ssq_excess_vectorised": float(np.nanmax(excess)),
        "max_ssq_excess_curve_fit": float(np.nanmax(-excess)),
        "relative_u_kp": (u_kp / np.abs(Y[:, :R].mean(axis=0))).tolist(),
    }


def run_worker_mode(args: argparse.Namespace) -> int:
    H.pin_to_cpu(args.cpu)
    if args.worker == "compare":
        doc = worker_compare(args.draws, args.naive_draws, args.seed, args.repeats or 1)
    else:
        doc = worker_mc(
            args.draws, args.seed, trace=args.worker == "trace", profile=args.worker == "profile"
        )
    H.emit_result(doc)
    return 0


# -- the benchmark -------------------------------------------------------------------------
def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes for a smoke run")
    ap.add_argument("--json", metavar="PATH", help="write the figures to this JSON file")
    ap.add_argument("--repeats", type=int, default=None, help="timed runs (default 3, quick 1)")
    ap.add_argument("--seed", type=int, default=20240611)
    ap.add_argument(
        "--naive-draws", type=int, default=None, help="draws in the curve_fit loop (default 300)"
    )
    ap.add_argument("--profile", action="store_true", help="print a cProfile of one run")
    ap.add_argument("--pin", type=int, default=None, metavar="CPU", help="pin workers to a CPU")
    ap.add_argument("--worker", choices=("mc", "trace", "profile", "compare"))
    ap.add_argument("--draws", type=int, default=None, help=argparse.SUPPRESS)
    ap.add_argument("--cpu", type=int, default=None, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.worker:
        return run_worker_mode(args)

    draws = QUICK_DRAWS if args.quick else FULL_DRAWS
    n_naive = args.naive_draws or (QUICK_NAIVE if args.quick else FULL_NAIVE)
    repeats = args.repeats or (1 if args.quick else 3)
    me = Path(__file__).resolve()

    def work(mode: str, *extra: str) -> dict[str, Any]:
        argv_w = ["--worker", mode, "--draws", str(draws), "--seed", str(args.seed), *extra]
        return H.run_worker(me, argv_w, cpu=args.pin)

    note = H.machine_note()
    print(
        f"== bench_batch_mc: {draws:,} draws through the batch chain, 3 runs x 20 readings"
        + (" (quick)" if args.quick else "")
    )
    H.print_machine_note(note)

    runs = [work("mc") for _ in range(repeats)]
    trace = work("trace")
    cmp_ = work("compare", "--naive-draws", str(n_naive), "--repeats", str(repeats))

    r0 = runs[0]
    wall = H.summarise([r["wall_s"] for r in runs])
    cpu = H.summarise([r["cpu_s"] for r in runs])
    peak = max(r["peak_rss_mib"] for r in runs)
    rise = max(r["peak_rss_mib"] - r["rss_before_mib"] for r in runs)
    scale = FULL_DRAWS / draws
    mc_full = wall["min"] * scale
    vec_full = cmp_["vectorised_chunked_s"]["min"] * scale
    whole_full = cmp_["vectorised_whole_s"]["min"] * scale
    naive_full = cmp_["naive_per_draw_s"] * FULL_DRAWS
    ratio = naive_full / vec_full
    ratio_whole = naive_full / whole_full
    ratio_mc = naive_full / mc_full
    ratio_cpu = (cmp_["naive_per_draw_cpu_s"] * FULL_DRAWS) / (
        cmp_["vectorised_chunked_cpu_s"] * scale
    )

    print(
        f"model: {r0['n_inputs']} inputs, {r0['n_outputs']} outputs;"
        f" readings in the fits per run: {r0['readings_used']}"
    )
    print(
        f"vectorised propagate_montecarlo: wall {wall['min']:.3f} s best of {repeats}"
        f" (median {wall['median']:.3f}, max {wall['max']:.3f}); CPU {cpu['min']:.3f} s;"
        f" CPU/wall {cpu['min'] / wall['min']:.2f}; failed draws {r0['failed_draws']}"
    )
    print(
        f"  peak RSS {peak:.0f} MiB (whole process), rise during the call {rise:.0f} MiB;"
        f" Python-side peak of the call (tracemalloc) {trace['traced_peak_mib']:.0f} MiB"
    )
    for name, (v, u) in r0["headline"].items():
        print(f"  {name}: mean {v:.5g}, u {u:.2g}")
    vc, vw, nv = cmp_["vectorised_chunked_s"], cmp_["vectorised_whole_s"], cmp_["naive_s"]
    print(
        f"same input matrix ({draws:,} draws, drawn once in {cmp_['sample_s']:.3f} s),"
        f" best of {cmp_['repeats']} interleaved:"
    )
    print(
        f"  (a) vectorised model in the engine's chunks of {cmp_['chunk']:,} draws:"
        f" {vc['min']:.3f} s (median {vc['median']:.3f}) = {1e6 * vc['min'] / draws:.1f} us/draw"
    )
    print(
        f"      one call on the whole matrix: {vw['min']:.3f} s (median {vw['median']:.3f});"
        f" outputs equal to {cmp_['chunked_vs_whole_max_rel_diff']:.0e}"
    )
    print(
        f"  (b) curve_fit loop over {cmp_['n_naive']} draws x {cmp_['runs']} runs:"
        f" {nv['min']:.3f} s (median {nv['median']:.3f}) ="
        f" {1e3 * cmp_['naive_per_draw_s']:.3f} ms/draw -> {naive_full:.1f} s for"
        f" {FULL_DRAWS:,} (extrapolated); curve_fit failures {cmp_['naive_failures']}"
    )
    print(
        f"  k' (a) vs (b) on the subset: max rel. diff {cmp_['max_rel_diff']:.1e} (median"
        f" {cmp_['median_rel_diff']:.1e}), max {cmp_['max_diff_over_u']:.1e} u(k')"
    )
    print(
        f"  weighted sum of squares at the two solutions: the vectorised one is not higher in"
        f" {100 * cmp_['share_vectorised_ssq_not_higher']:.1f} % of draws x runs; largest"
        f" relative excess of the vectorised {cmp_['max_ssq_excess_vectorised']:.1e}, of"
        f" curve_fit {cmp_['max_ssq_excess_curve_fit']:.1e} (a difference of k' is then"
        " curve_fit stopping early)"
    )
    print(
        f"ratio curve_fit loop / vectorised model: {ratio:.1f}x in the engine's chunks,"
        f" {ratio_whole:.1f}x as one call on the whole matrix;"
        f" / whole Monte Carlo call (drawing and statistics included): {ratio_mc:.1f}x;"
        f" on CPU time (chunks): {ratio_cpu:.1f}x"
    )

    busy = H.busy_note(cpu, wall)
    how = "extrapolated linearly from the quick run" if args.quick else f"best of {repeats}"
    verdicts = [
        H.Verdict(
            f"batch chain Monte Carlo {FULL_DRAWS:,} draws, one core, wall <= {TARGET_SECONDS:g} s",
            mc_full <= TARGET_SECONDS,
            f"{mc_full:.3f} s wall (CPU {cpu['min'] * scale:.3f} s)",
            how + busy,
        ),
        H.Verdict(
            f"vectorised model >= {TARGET_RATIO:g}x faster than the per-draw curve_fit loop",
            ratio_cpu >= TARGET_RATIO,
            f"{ratio_cpu:.1f}x on CPU time",
            f"model in the engine's chunks, same {draws:,} draws, loop over {cmp_['n_naive']}"
            f" of them extrapolated; wall-clock ratio {ratio:.1f}x, one whole-matrix call"
            f" {ratio_whole:.1f}x",
        ),
        H.Verdict(
            f"check: k' vectorised vs curve_fit agree (rel. diff <= {K_RTOL:g})",
            cmp_["max_rel_diff"] <= K_RTOL
            and cmp_["naive_failures"] == 0
            and cmp_["vectorised_failures"] == 0,
            f"max {cmp_['max_rel_diff']:.1e} over {cmp_['n_naive']} draws x {cmp_['runs']} runs",
        ),
    ]
    for v in verdicts:
        print(v.line())

    profile_text = None
    if args.profile or (not args.quick and not verdicts[0].ok):
        print("-- cProfile of one Monte Carlo call (sorted by own time):")
        profile_text = work("profile")["profile"]
        print(profile_text)

    if args.json:
        H.write_json(
            args.json,
            {
                "benchmark": "bench_batch_mc",
                "quick": args.quick,
                "machine": note,
                "draws": draws,
                "seed": args.seed,
                "data_seed": DATA_SEED,
                "wall_s": wall,
                "cpu_s": cpu,
                "wall_s_at_full_size": mc_full,
                "peak_rss_mib": peak,
                "rss_rise_mib": rise,
                "traced_peak_mib": trace["traced_peak_mib"],
                "headline": r0["headline"],
                "compare": cmp_,
                "naive_extrapolated_s": naive_full,
                "ratio_vs_model": ratio,
                "ratio_vs_model_whole_matrix": ratio_whole,
                "ratio_vs_model_cpu_time": ratio_cpu,
                "ratio_vs_montecarlo": ratio_mc,
                "verdicts": [v.as_dict() for v in verdicts],
                "profile": profile_text,
            },
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
