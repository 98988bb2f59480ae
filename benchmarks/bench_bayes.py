"""The batch posterior of the demo study (3 runs) against a straightforward emcee model.

The demo study (data seed 7) is written to a temporary folder and built into the batch
chain.  Figures, each from a fresh single-threaded process, interleaved:

* ``batch_posterior(chain)`` with its defaults (A_0 and A_inf of each run integrated out,
  6 sampled parameters: ln k'_r and ln s_r; differential-evolution moves mixed with stretch
  moves), run to the convergence rule (chain > 50 tau, the largest tau settled to 1 %):
  wall and CPU time of the whole call (start, sampling, derived quantities, predictive
  check), steps, tau, ESS;
* the straightforward model of the same readings: a vectorised log-posterior with every
  run's A_inf, A_0 and k' sampled (and ln s_r, the same noise prior and the same jitter
  effective variance, here with the sampled amplitude), emcee's default stretch move, the
  same convergence rule and start (the least-squares fits, a small ball);
* two like-for-like rows that separate the effect of integrating out A_0, A_inf from that
  of the move: the library with stretch moves, the straightforward model with the DE mix.

ESS per second is the smallest ESS of the runs' k' divided by the CPU time of the call
(single-threaded, so CPU time is the one-core figure on a busy machine; wall time beside).
Targets: the demo posterior converged in <= 10 s on one core; ESS per second >= 2x the
straightforward model's.  Exits 0 unless the code under test fails.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
import warnings
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _harness as H

DATA_SEED = 7
MODES = ("library", "library-stretch", "naive", "naive-de")


def build_chain(directory: Path):
    from uqreport.chains.batch import build_batch_chain
    from uqreport.demo import write_demo
    from uqreport.experiment import load_experiment

    write_demo(directory, seed=DATA_SEED)
    return build_batch_chain(load_experiment(directory / "experiment.toml"))


def naive_posterior(chain):
    """The straightforward log-posterior: theta = (A_inf, A_0, k', ln s) per run."""
    import numpy as np

    from uqreport.bayes.priors import noise_scale_prior

    x, u = chain.model.inputs.values, chain.model.inputs.u
    fits = {f.name: f for f in chain.fits}
    data = []
    for run in chain.study.runs:  # per run: readings, times, instrument sd, jitter u
        f = fits[run.name]
        sig = u[run.reading] if f.noise_source == "spec" else f.sigma / f.noise_scale
        jit = u[run.jitter] if run.jitter is not None else np.zeros(run.reading.size)
        data.append((x[run.reading], run.times + f.time_origin, sig, jit))
    prior_s = noise_scale_prior()
    R = len(data)

    def logp(theta):
        lp = np.zeros(theta.shape[0])
        for j, (y, t, sig, jit) in enumerate(data):  # loop over runs
            c, a0, k, ls = (theta[:, 4 * j + i][:, None] for i in range(4))
            with np.errstate(over="ignore", invalid="ignore"):
                e = np.exp(-k * t)
                mu = c + (a0 - c) * e
                var = (np.exp(ls) * sig) ** 2 + (k * (a0 - c) * e * jit) ** 2
                ll = -0.5 * np.sum((y - mu) ** 2 / var + np.log(2 * np.pi * var), axis=1)
            lp += ll + prior_s.logpdf(ls[:, 0])
            lp = np.where(k[:, 0] > 0, lp, -np.inf)
        return np.where(np.isfinite(lp), lp, -np.inf)

    start, scale = [], []
    for run in chain.study.runs:
        f = fits[run.name]
        start += [f.params[0], f.params[1], f.params[2], 0.0]
        sd = np.sqrt(np.diag(f.covariance))
        scale += [sd[0], sd[1], sd[2], 1.0 / np.sqrt(2.0 * run.reading.size)]
    return logp, np.array(start), np.array(scale), R


def worker(mode: str, seed: int) -> dict[str, Any]:
    import numpy as np

    from uqreport.bayes import batch_posterior
    from uqreport.bayes.sampler import run_ensembles

    with tempfile.TemporaryDirectory(prefix="uqreport-bench-") as tmp:
        chain = build_chain(Path(tmp))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # acceptance notes; convergence is reported below
        if mode.startswith("library"):
            moves = "stretch" if mode == "library-stretch" else "de-mix"
            batch_posterior(chain, rng=seed + 1, max_steps=400, moves=moves)  # warm-up
            w0, c0 = time.perf_counter(), time.process_time()
            res = batch_posterior(chain, rng=seed, moves=moves)
            wall, cpu = time.perf_counter() - w0, time.process_time() - c0
            ess = min(v for k, v in res.diagnostics.ess.items() if k.startswith("log_pseudo"))
            kp = {
                r: [
                    res.quantities[f"pseudo_rate_constant/{r}"].median,
                    res.quantities[f"pseudo_rate_constant/{r}"].sd,
                ]
                for r in (f.name for f in chain.fits)
            }
            out = dict(
                steps=res.settings.steps,
                walkers=res.settings.walkers,
                ndim=len(res.parameter_names),
                converged=res.converged,
                tau_max=max(res.diagnostics.tau.values()),
                ess=ess,
                kp=kp,
                acceptance=res.diagnostics.acceptance[0],
            )
        else:
            logp, start, scale, R = naive_posterior(chain)
            moves = "de-mix" if mode == "naive-de" else "stretch"
            run_ensembles(logp, start, scale, rng=seed + 1, max_steps=400, moves=moves)
            w0, c0 = time.perf_counter(), time.process_time()
            run = run_ensembles(logp, start, scale, rng=seed, moves=moves, max_steps=200_000)
            wall, cpu = time.perf_counter() - w0, time.process_time() - c0
            ess_all = run.ess()
            ess = float(min(ess_all[4 * j + 2] for j in range(R)))
            kept = run.kept().reshape(-1, run.ndim)
            kp = {
                f.name: [float(np.median(kept[:, 4 * j + 2])), float(kept[:, 4 * j + 2].std())]
                for j, f in enumerate(chain.fits)
            }
            out = dict(
                steps=run.steps,
                walkers=run.walkers,
                ndim=run.ndim,
                converged=run.converged,
                tau_max=float(run.tau.max()),
                ess=ess,
                kp=kp,
                acceptance=float(run.acceptance.mean()),
            )
    out.update(
        mode=mode,
        wall_s=wall,
        cpu_s=cpu,
        ess_per_cpu_s=out["ess"] / cpu,
        ess_per_wall_s=out["ess"] / wall,
    )
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="one repeat (a smoke run)")
    ap.add_argument("--json", metavar="PATH", help="write the figures to this JSON file")
    ap.add_argument("--repeats", type=int, default=None, help="timed runs (default 3, quick 1)")
    ap.add_argument("--seed", type=int, default=20240611)
    ap.add_argument("--pin", type=int, default=None, metavar="CPU", help="pin workers to a CPU")
    ap.add_argument("--profile", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--worker", choices=MODES)
    ap.add_argument("--cpu", type=int, default=None, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.worker:
        H.pin_to_cpu(args.cpu)
        H.emit_result(worker(args.worker, args.seed))
        return 0

    repeats = args.repeats or (1 if args.quick else 3)
    me = Path(__file__).resolve()
    note = H.machine_note()
    print("== bench_bayes: batch posterior of the demo study (3 runs), data seed 7")
    H.print_machine_note(note)
    results: dict[str, list[dict[str, Any]]] = {m: [] for m in MODES}
    for i in range(repeats):  # interleaved: every mode once per round
        for m in MODES:
            results[m].append(
                H.run_worker(me, ["--worker", m, "--seed", str(args.seed + i)], cpu=args.pin)
            )

    def best(m: str) -> dict[str, Any]:
        return min(results[m], key=lambda r: r["cpu_s"])

    for m in MODES:
        rs = results[m]
        b = best(m)
        print(
            f"{m:16s} ndim {b['ndim']:2d} x {b['walkers']} walkers: {b['steps']} steps,"
            f" tau max {b['tau_max']:.0f}, converged {b['converged']}, acceptance"
            f" {b['acceptance']:.2f}; CPU {b['cpu_s']:.2f} s (wall {b['wall_s']:.2f} s),"
            f" min ESS of k' {b['ess']:.0f}, ESS/CPU-s {b['ess_per_cpu_s']:.0f}"
            f" (median over {len(rs)}:"
            f" {H.summarise([r['ess_per_cpu_s'] for r in rs])['median']:.0f})"
        )
    lib, naive = best("library"), best("naive")
    for r, (med, sd) in lib["kp"].items():
        m2, s2 = naive["kp"][r]
        print(f"  k'_{r}: library {med:.6g} (sd {sd:.3g}), straightforward {m2:.6g} (sd {s2:.3g})")
    ratio = lib["ess_per_cpu_s"] / naive["ess_per_cpu_s"]
    same_moves = (
        best("library-stretch")["ess_per_cpu_s"] / naive["ess_per_cpu_s"],
        lib["ess_per_cpu_s"] / best("naive-de")["ess_per_cpu_s"],
    )
    print(
        f"ESS/s ratio, library default vs straightforward default: {ratio:.1f}x;"
        f" like for like: stretch {same_moves[0]:.1f}x, DE mix {same_moves[1]:.1f}x"
    )
    verdicts = [
        H.Verdict(
            "demo batch posterior converged <= 10 s (one core)",
            lib["converged"] and lib["cpu_s"] <= 10.0,
            f"{lib['cpu_s']:.2f} s CPU ({lib['wall_s']:.2f} s wall), converged {lib['converged']}",
        ),
        H.Verdict(
            "ESS per second >= 2x the straightforward model",
            ratio >= 2.0,
            f"{ratio:.1f}x (CPU time)",
            f"stretch-only {same_moves[0]:.1f}x, DE-mix-only {same_moves[1]:.1f}x",
        ),
    ]
    for v in verdicts:
        print(v.line())
    if args.json:
        H.write_json(
            args.json,
            {"machine": note, "results": results, "verdicts": [v.as_dict() for v in verdicts]},
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
