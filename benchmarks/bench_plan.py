"""Budget and improvement plan of the invented demo study: wall time.

The demo study is written to a temporary folder and analysed by linear propagation (not
timed); then the budgets of every quantity and the full plan (what-if cases, the simulated
and re-analysed designs, the Monte Carlo check of the shares, the schedule advice) are timed.
Baseline in the same run: the plan's share check alone with the model evaluated one draw at
a time (a Python loop over draws), extrapolated, to show what vectorising buys.

Target: full budget and plan for the demo in <= 5 s on one core.  Exit code 0 unless the
code under test raises.

    python benchmarks/bench_plan.py [--quick] [--repeats N] [--json PATH]
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

__all__ = ["main"]

TIME_TARGET_S = 5.0


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="one timed run, small baseline")
    p.add_argument("--repeats", type=int, default=None, help="timed runs (default 3, quick 1)")
    p.add_argument("--json", type=Path, default=None, help="write the figures here")
    p.add_argument("--seed", type=int, default=7)
    args = p.parse_args(argv)
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    repeats = args.repeats or (1 if args.quick else 3)

    from uqreport.analysis import Settings, analyze
    from uqreport.budget import budgets
    from uqreport.demo import write_demo
    from uqreport.planner import plan_study

    with tempfile.TemporaryDirectory(prefix="uqreport-bench-plan-") as tmp:
        folder = Path(tmp) / "demo"
        write_demo(folder, seed=args.seed)
        res = analyze(
            folder / "experiment.toml",
            settings=Settings(montecarlo=False, plan=False, mcmc=False, seed=args.seed),
        )
        ch = res.chains["batch"]
        walls, cpus = [], []
        for _ in range(repeats):
            w0, c0 = time.perf_counter(), time.process_time()
            budgets(ch.linear)
            plan = plan_study(res)
            walls.append(time.perf_counter() - w0)
            cpus.append(time.process_time() - c0)
        best = min(walls)
        cpu = cpus[walls.index(best)]
        n_cases = sum(len(q.cases) for q in plan.quantities.values())
        print(
            f"budget and plan: {best:.2f} s wall, {cpu:.2f} s CPU (best of {repeats});"
            f" {n_cases} what-if cases for {len(plan.quantities)} quantities"
        )
        # baseline: the share check's model evaluations one draw at a time
        model = ch.chain.model
        X = model.inputs.sample(200 if args.quick else 1000, args.seed)
        w0 = time.perf_counter()
        for row in X[: 20 if args.quick else 60]:
            model.evaluate(row)
        per_draw_loop = (time.perf_counter() - w0) / (20 if args.quick else 60)
        w0 = time.perf_counter()
        model.evaluate(X)
        per_draw_vec = (time.perf_counter() - w0) / X.shape[0]
        print(
            f"model per draw: {1e6 * per_draw_vec:.0f} us vectorised,"
            f" {1e6 * per_draw_loop:.0f} us in a Python loop"
            f" ({per_draw_loop / per_draw_vec:.0f}x)"
        )
        ratio = cpu / best if best > 0 else 1.0
        if ratio < 0.8:
            print(f"caution: CPU/wall = {ratio:.2f}: the machine was busy; judge by CPU time")
        ok = min(best, cpu if ratio < 0.8 else best) <= TIME_TARGET_S
        print(
            f"{'PASS' if ok else 'MISS'}  budget and plan for the demo <= {TIME_TARGET_S:g} s:"
            f" {best:.2f} s wall, {cpu:.2f} s CPU"
        )
        if args.json is not None:
            args.json.write_text(
                json.dumps(
                    {
                        "wall_s": best,
                        "cpu_s": cpu,
                        "cases": n_cases,
                        "model_us_per_draw_vectorised": 1e6 * per_draw_vec,
                        "model_us_per_draw_loop": 1e6 * per_draw_loop,
                        "target_s": TIME_TARGET_S,
                        "pass": ok,
                    },
                    indent=2,
                )
                + "\n"
            )
    return 0


if __name__ == "__main__":
    sys.exit(main())
