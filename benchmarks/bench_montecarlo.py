"""Monte Carlo (JCGM 101) through a 10-input closed-form model: wall time and peak memory.

The model is an invented dye-fading mixture: a rate constant taken from a reference
temperature to the bath temperature (Arrhenius), the excess-reagent concentration after
mixing three volumes, and the absorbance left after a reaction time,

    V     = V_oh + V_dye + V_w
    [OH]  = c_oh V_oh / V
    k     = k_ref exp(-(E_a/R)(1/T - 1/T_ref))
    A(t)  = (eps l) c_dye V_dye / V exp(-k [OH] t)

with normal, rectangular and triangular inputs and two correlated pairs (k_ref with E_a,
c_oh with c_dye).  Figures, each from a fresh single-threaded process:

* ``propagate_montecarlo(model, draws=10^6)``: wall and CPU time (best of ``--repeats``),
  peak RSS (``ru_maxrss``, whole process) and its rise over the RSS before the call, and the
  Python-side peak of the call (tracemalloc, in a process of its own because tracing slows
  it down);
* the phases, CPU time: drawing the inputs and evaluating the model in the engine's chunks,
  then the statistics and coverage intervals;
* the naive baseline in the same run: a Python loop calling the model on one draw at a time
  over a subset of the same draws, extrapolated to 10^6 (and, for reference, the same
  formula in plain ``math`` per draw).  The baseline excludes drawing and statistics, so the
  ratio understates the gain.

Targets: 10^6 draws in under 2 s on one core, peak RSS under 1 GB.  The script exits 0 unless
the code under test fails; it never fails on time.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _harness as H

FULL_DRAWS = 1_000_000
QUICK_DRAWS = 100_000
FULL_NAIVE = 20_000
QUICK_NAIVE = 2_000
TARGET_SECONDS = 2.0
TARGET_RSS_MIB = 1024.0
AGREEMENT_RTOL = 1e-12

GAS_CONSTANT = 8.314462618  # J/(mol K)
T_REF = 298.15  # K


def formula(
    xp: Any, k_ref, activation_energy, temperature, c_oh, c_dye, v_oh, v_dye, v_w, t, eps_l
):
    """The model's outputs (k, [OH], A(t)); ``xp`` is numpy (arrays) or math (floats)."""
    v = v_oh + v_dye + v_w
    oh = c_oh * v_oh / v
    k = k_ref * xp.exp(-activation_energy / GAS_CONSTANT * (1.0 / temperature - 1.0 / T_REF))
    absorbance = eps_l * c_dye * v_dye / v * xp.exp(-k * oh * t)
    return k, oh, absorbance


def build_model():
    """The 10-input measurement model (invented numbers)."""
    import numpy as np

    from uqreport.inputs import InputQuantity as Q
    from uqreport.inputs import InputSet
    from uqreport.model import OutputQuantity, columns_model

    hw = Q.from_half_width
    inputs = InputSet(
        [
            Q("k_ref", 0.180, 0.004, unit="L/(mol*s)"),
            Q("activation_energy", 60.0e3, 2.0e3, unit="J/mol"),
            Q("temperature", 295.15, 0.5, unit="K"),
            Q("c_oh", 0.100, 0.0005, unit="mol/L"),
            Q("c_dye", 4.6e-5, 0.1e-5, unit="mol/L"),
            hw("v_oh", 20.0, 0.25, "rectangular", unit="mL"),
            hw("v_dye", 10.0, 0.10, "triangular", unit="mL"),
            hw("v_w", 20.0, 0.25, "rectangular", unit="mL"),
            hw("t", 300.0, 2.0, "triangular", unit="s"),
            Q("eps_l", 8.7e4, 3.0e3, unit="L/mol"),
        ],
        {("k_ref", "activation_energy"): -0.5, ("c_oh", "c_dye"): 0.4},
    )
    outputs = [
        OutputQuantity("rate_constant", "L/(mol*s)"),
        OutputQuantity("hydroxide_concentration", "mol/L"),
        OutputQuantity("absorbance", "1"),
    ]
    return columns_model(lambda **c: formula(np, **c), inputs, outputs, name="bench closed form")


# -- workers (each runs in a fresh process) ----------------------------------------------
def worker_mc(draws: int, seed: int, *, trace: bool, profile: bool) -> dict[str, Any]:
    res, out = H.timed_montecarlo(
        build_model(), draws, seed, trace=trace, profile=profile, profile_lines=15
    )
    out.update(mean=res.values.tolist(), u=res.u.tolist())
    return out


def worker_phases(draws: int, seed: int, repeats: int) -> dict[str, Any]:
    """CPU time of the engine's steps done by hand: drawing and the model in the engine's
    chunks, then the statistics (mean, covariance, both coverage intervals per output)."""
    import numpy as np

    from uqreport.propagation import coverage_interval, shortest_interval

    model = build_model()
    chunk = H.engine_chunk(model, 65_536)
    model.evaluate(model.inputs.sample(1000, np.random.default_rng(seed + 1)))
    clock = time.process_time
    best = {"sample_s": np.inf, "evaluate_s": np.inf, "statistics_s": np.inf}
    for _ in range(repeats):
        gen = np.random.default_rng(seed)
        Y = np.empty((draws, model.n_outputs))
        t_s = t_e = 0.0
        for start in range(0, draws, chunk):
            size = min(chunk, draws - start)
            c0 = clock()
            X = model.inputs.sample(size, gen)
            c1 = clock()
            Y[start : start + size] = model.evaluate(X)
            c2 = clock()
            t_s, t_e = t_s + c1 - c0, t_e + c2 - c1
        c0 = clock()
        Y.mean(axis=0)
        np.cov(Y, rowvar=False)
        for j in range(model.n_outputs):
            coverage_interval(Y[:, j], 0.95)
            shortest_interval(Y[:, j], 0.95)
        t_st = clock() - c0
        for key, v in (("sample_s", t_s), ("evaluate_s", t_e), ("statistics_s", t_st)):
            best[key] = min(best[key], v)
    return {**best, "chunk": chunk}


def worker_naive(n: int, seed: int) -> dict[str, Any]:
    import numpy as np

    model = build_model()
    X = model.inputs.sample(n, np.random.default_rng(seed))
    Y_vec = model.evaluate(X)
    model.evaluate(X[0])  # warm-up
    Y_loop = np.empty_like(Y_vec)
    t0, c0 = time.perf_counter(), time.process_time()
    for i in range(n):  # the naive baseline: one draw at a time
        Y_loop[i] = model.evaluate(X[i])
    t_model, c_model = time.perf_counter() - t0, time.process_time() - c0
    rows = X.tolist()
    Y_math = np.empty_like(Y_vec)
    t0, c0 = time.perf_counter(), time.process_time()
    for i, row in enumerate(rows):
        Y_math[i] = formula(math, *row)
    t_math, c_math = time.perf_counter() - t0, time.process_time() - c0
    rel = lambda A: float(np.max(np.abs(A - Y_vec) / np.abs(Y_vec)))  # noqa: E731
    return {
        "n": n,
        "per_draw_model_s": t_model / n,
        "per_draw_math_s": t_math / n,
        "per_draw_model_cpu_s": c_model / n,
        "per_draw_math_cpu_s": c_math / n,
        "max_rel_diff_model": rel(Y_loop),
        "max_rel_diff_math": rel(Y_math),
    }


def run_worker_mode(args: argparse.Namespace) -> int:
    H.pin_to_cpu(args.cpu)
    if args.worker in ("mc", "trace", "profile"):
        doc = worker_mc(
            args.draws, args.seed, trace=args.worker == "trace", profile=args.worker == "profile"
        )
    elif args.worker == "phases":
        doc = worker_phases(args.draws, args.seed, args.repeats or 1)
    else:
        doc = worker_naive(args.draws, args.seed)
    H.emit_result(doc)
    return 0


# -- the benchmark -------------------------------------------------------------------------
def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes for a smoke run")
    ap.add_argument("--json", metavar="PATH", help="write the figures to this JSON file")
    ap.add_argument("--repeats", type=int, default=None, help="timed runs (default 3, quick 1)")
    ap.add_argument("--seed", type=int, default=20240611)
    ap.add_argument("--profile", action="store_true", help="print a cProfile of one run")
    ap.add_argument("--pin", type=int, default=None, metavar="CPU", help="pin workers to a CPU")
    ap.add_argument("--worker", choices=("mc", "trace", "profile", "phases", "naive"))
    ap.add_argument("--draws", type=int, default=None, help=argparse.SUPPRESS)
    ap.add_argument("--cpu", type=int, default=None, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.worker:
        return run_worker_mode(args)

    draws = QUICK_DRAWS if args.quick else FULL_DRAWS
    n_naive = QUICK_NAIVE if args.quick else FULL_NAIVE
    repeats = args.repeats or (1 if args.quick else 3)
    me = Path(__file__).resolve()
    common = ["--seed", str(args.seed)]

    def work(mode: str, n: int) -> dict[str, Any]:
        return H.run_worker(me, ["--worker", mode, "--draws", str(n), *common], cpu=args.pin)

    note = H.machine_note()
    quick = " (quick)" if args.quick else ""
    print(f"== bench_montecarlo: {draws:,} draws, 10 inputs, 3 outputs{quick}")
    H.print_machine_note(note)

    runs = [work("mc", draws) for _ in range(repeats)]
    trace = work("trace", draws)
    phases = H.run_worker(
        me,
        ["--worker", "phases", "--draws", str(draws), *common, "--repeats", str(repeats)],
        cpu=args.pin,
    )
    naive = work("naive", n_naive)

    wall = H.summarise([r["wall_s"] for r in runs])
    cpu = H.summarise([r["cpu_s"] for r in runs])
    peak = max(r["peak_rss_mib"] for r in runs)
    rise = max(r["peak_rss_mib"] - r["rss_before_mib"] for r in runs)
    scale = FULL_DRAWS / draws
    naive_full = naive["per_draw_model_s"] * FULL_DRAWS
    math_full = naive["per_draw_math_s"] * FULL_DRAWS
    vec_full = wall["min"] * scale

    print(
        f"vectorised propagate_montecarlo: wall {wall['min']:.3f} s best of {repeats}"
        f" (median {wall['median']:.3f}, max {wall['max']:.3f}); CPU {cpu['min']:.3f} s;"
        f" CPU/wall {cpu['min'] / wall['min']:.2f}"
    )
    print(
        f"  phases (CPU time, best of {repeats}, the engine's chunks of {phases['chunk']:,}):"
        f" drawing the inputs {phases['sample_s']:.3f} s, model {phases['evaluate_s']:.3f} s,"
        f" statistics and intervals {phases['statistics_s']:.3f} s"
    )
    print(
        f"  peak RSS {peak:.0f} MiB (whole process: interpreter, numpy, scipy, uqreport),"
        f" rise during the call {rise:.0f} MiB; Python-side peak of the call (tracemalloc)"
        f" {trace['traced_peak_mib']:.0f} MiB"
    )
    print(
        f"  results: mean {', '.join(f'{v:.6g}' for v in runs[0]['mean'])};"
        f" u {', '.join(f'{v:.3g}' for v in runs[0]['u'])}"
    )
    print(
        f"naive baseline ({naive['n']:,} draws, one model call per draw):"
        f" {1e6 * naive['per_draw_model_s']:.1f} us/draw -> {naive_full:.1f} s for"
        f" {FULL_DRAWS:,} (extrapolated)"
    )
    print(
        f"  plain-math loop of the same formula: {1e6 * naive['per_draw_math_s']:.2f} us/draw"
        f" -> {math_full:.2f} s for {FULL_DRAWS:,} (model call only, no drawing)"
    )
    ratio = naive_full / vec_full
    ratio_math = math_full / vec_full
    cpu_full = cpu["min"] * scale
    ratio_cpu = naive["per_draw_model_cpu_s"] * FULL_DRAWS / cpu_full
    ratio_math_cpu = naive["per_draw_math_cpu_s"] * FULL_DRAWS / cpu_full
    print(
        f"ratio naive / vectorised (whole Monte Carlo call, {FULL_DRAWS:,} draws):"
        f" {ratio:.0f}x wall, {ratio_cpu:.0f}x CPU time; against the plain-math loop"
        f" {ratio_math:.1f}x wall, {ratio_math_cpu:.1f}x CPU time"
    )

    busy = H.busy_note(cpu, wall)
    extrap = " extrapolated linearly from the quick run" if args.quick else f" best of {repeats}"
    verdicts = [
        H.Verdict(
            f"Monte Carlo {FULL_DRAWS:,} draws, one core, wall < {TARGET_SECONDS:g} s",
            vec_full < TARGET_SECONDS,
            f"{vec_full:.3f} s wall (CPU {cpu['min'] * scale:.3f} s)",
            extrap.strip() + busy,
        ),
        H.Verdict(
            f"peak RSS < {TARGET_RSS_MIB / 1024:g} GB",
            peak < TARGET_RSS_MIB,
            f"{peak:.0f} MiB",
            f"whole worker process, {draws:,} draws",
        ),
        H.Verdict(
            f"check: per-draw loop equals vectorised model (rel. diff <= {AGREEMENT_RTOL:g})",
            naive["max_rel_diff_model"] <= AGREEMENT_RTOL,
            f"max {naive['max_rel_diff_model']:.1e} (plain math {naive['max_rel_diff_math']:.1e})",
        ),
    ]
    for v in verdicts:
        print(v.line())

    profile_text = None
    if args.profile or (not args.quick and not verdicts[0].ok):
        print("-- cProfile of one Monte Carlo call (sorted by own time):")
        profile_text = work("profile", draws)["profile"]
        print(profile_text)

    if args.json:
        H.write_json(
            args.json,
            {
                "benchmark": "bench_montecarlo",
                "quick": args.quick,
                "machine": note,
                "draws": draws,
                "seed": args.seed,
                "wall_s": wall,
                "cpu_s": cpu,
                "wall_s_at_full_size": vec_full,
                "peak_rss_mib": peak,
                "rss_rise_mib": rise,
                "traced_peak_mib": trace["traced_peak_mib"],
                "phases": phases,
                "naive": naive,
                "naive_extrapolated_s": naive_full,
                "ratio": ratio,
                "ratio_plain_math": ratio_math,
                "ratio_cpu_time": ratio_cpu,
                "ratio_plain_math_cpu_time": ratio_math_cpu,
                "verdicts": [v.as_dict() for v in verdicts],
                "profile": profile_text,
            },
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
