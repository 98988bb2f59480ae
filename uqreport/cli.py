"""The ``uqreport`` command: a thin layer over the Python API.

Exit codes: 0 success, 2 bad input (a clear message naming the file, key or row and the
fix; no traceback), 1 an internal error.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import textwrap
import traceback
from collections.abc import Sequence
from pathlib import Path

from . import __version__
from .errors import ExperimentError, InputError
from .report.fmt import column_exponent, fmt_sig, scale_for, superscript
from .units import pretty_unit

__all__ = ["main"]

EXIT_OK = 0
EXIT_INTERNAL = 1
EXIT_INPUT = 2


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # argparse exits 2 on usage errors: keep that
        self.print_usage(sys.stderr)
        self.exit(EXIT_INPUT, f"uqreport: error: {message}\n")


def _positive_int(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got '{text}'") from None
    if v < 100:
        raise argparse.ArgumentTypeError(f"at least 100 draws are needed, got {v}")
    return v


def _coverage(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a probability, got '{text}'") from None
    if not 0.5 <= v < 1.0:
        raise argparse.ArgumentTypeError(f"coverage must be in [0.5, 1), got {v}")
    return v


def _parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="uqreport",
        description=(
            "Uncertainty reports for bench reaction-kinetics and stirred-tank studies:"
            " linear propagation (GUM), Monte Carlo (JCGM 101) and a ranked error budget."
        ),
    )
    p.add_argument("--version", action="version", version=f"uqreport {__version__}")
    p.add_argument("--debug", action="store_true", help="show a traceback on internal errors")
    # --debug also after the command ("uqreport analyze x.toml --out o --debug"), where the
    # internal-error message sends users; SUPPRESS keeps the top-level value when absent
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument(
        "--debug",
        action="store_true",
        default=argparse.SUPPRESS,
        help="show a traceback on internal errors",
    )
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    def engine_options(sp: argparse.ArgumentParser) -> None:
        sp.add_argument("--seed", type=int, default=None, help="random seed (default 1)")
        sp.add_argument(
            "--draws",
            type=_positive_int,
            default=None,
            help="fixed number of Monte Carlo draws (default: adaptive, JCGM 101 7.9)",
        )
        sp.add_argument(
            "--coverage", type=_coverage, default=0.95, help="coverage probability (default 0.95)"
        )
        sp.add_argument("--no-montecarlo", action="store_true", help="skip Monte Carlo")
        sp.add_argument("--no-mcmc", action="store_true", help="skip the Bayesian posterior")
        sp.add_argument(
            "--chains",
            type=int,
            default=1,
            help="independently seeded MCMC ensembles (1, or 4 or more for split R-hat)",
        )
        sp.add_argument(
            "--robust",
            action="store_true",
            help="Student t likelihood for the posterior (outlying readings weigh less)",
        )
        sp.add_argument(
            "--robust-dof",
            type=float,
            default=None,
            metavar="NU",
            help="degrees of freedom of the --robust likelihood (default 4; smaller is more"
            " robust); implies --robust",
        )
        sp.add_argument(
            "--hierarchical",
            action="store_true",
            help="posterior with run-level rate constants and a between-run spread",
        )
        sp.add_argument(
            "--save-draws",
            action="store_true",
            help="write the posterior draws (posterior_<chain>.npz; .nc too with ArviZ)",
        )
        sp.add_argument("--no-report", action="store_true", help="do not write report.pdf")
        sp.add_argument("--quiet", action="store_true", help="print nothing but errors")

    d = sub.add_parser(
        "demo",
        parents=[common],
        help="simulate the invented demo study and analyse it",
        description="Write an invented demo study (experiment.toml, tables, truth.json) into"
        " --out, analyse it, and write the results beside it.",
    )
    d.add_argument("--out", required=True, type=Path, help="output folder")
    d.add_argument("--force", action="store_true", help="write into a non-empty folder")
    engine_options(d)

    a = sub.add_parser(
        "analyze",
        parents=[common],
        help="analyse an experiment file",
        description="Check and analyse EXPERIMENT (linear propagation, Monte Carlo, Bayesian"
        " posterior, improvement plan); write report.pdf, results.json, budget.csv and fits.csv"
        " into --out.",
    )
    a.add_argument("experiment", type=Path, help="the experiment file (TOML) or its folder")
    a.add_argument("--out", required=True, type=Path, help="output folder")
    engine_options(a)

    pl = sub.add_parser(
        "plan",
        parents=[common],
        help="rank what to improve next and what it would buy",
        description="Analyse EXPERIMENT by linear propagation and print the improvement plan:"
        " for each headline quantity the what-if cases ranked by the reduction of U, the"
        " Monte Carlo check of the budget shares, and the sampling-schedule advice.",
    )
    pl.add_argument("experiment", type=Path, help="the experiment file (TOML) or its folder")
    pl.add_argument("--out", type=Path, default=None, help="also write results.json here")
    pl.add_argument("--seed", type=int, default=None, help="random seed (default 1)")
    pl.add_argument(
        "--coverage", type=_coverage, default=0.95, help="coverage probability (default 0.95)"
    )

    c = sub.add_parser(
        "check",
        parents=[common],
        help="validate an experiment file and its tables without analysing",
        description="Check EXPERIMENT and every table it names; list all problems at once.",
    )
    c.add_argument("experiment", type=Path, help="the experiment file (TOML) or its folder")
    return p


def _check_out(out: Path) -> None:
    """Refuse an --out that cannot be a folder, before the analysis spends its time."""
    if out.exists() and not out.is_dir():
        raise InputError(
            f"--out {out} is a file, not a folder. Fix: name a folder for the results (it is"
            " created when it does not exist)."
        )
    parent = out
    while not parent.exists():
        parent = parent.parent
    if not parent.is_dir():
        raise InputError(
            f"--out {out}: {parent} is a file, so the folder cannot be created there. Fix: name"
            " a folder path."
        )
    if not os.access(parent, os.W_OK | os.X_OK):
        raise InputError(
            f"--out {out}: the folder {parent} is not writable. Fix: name a folder you can"
            " write to."
        )


def _settings(args: argparse.Namespace):
    from .analysis import DEFAULT_SEED, Settings

    if args.chains < 1 or args.chains in (2, 3):
        raise InputError(
            f"--chains {args.chains}: give 1, or 4 or more (split R-hat needs at least four"
            " independently seeded ensembles)."
        )
    if args.robust_dof is not None and not (0.5 <= args.robust_dof <= 1e3):
        raise InputError(
            f"--robust-dof {args.robust_dof:g}: give the Student t likelihood's degrees of"
            " freedom between 0.5 and 1000 (4 is usual; 1 is a Cauchy, above 30 it is nearly"
            " Gaussian)."
        )
    interactive = sys.stderr.isatty() and not args.quiet and not os.environ.get("CI")
    return Settings(
        coverage=args.coverage,
        seed=DEFAULT_SEED if args.seed is None else args.seed,
        draws=args.draws,
        montecarlo=not args.no_montecarlo,
        mcmc=not args.no_mcmc,
        chains=args.chains,
        likelihood="student" if args.robust or args.robust_dof is not None else "gaussian",
        student_dof=4.0 if args.robust_dof is None else args.robust_dof,
        hierarchical=args.hierarchical,
        progress=interactive,
    )


def _summary(res, out: Path, *, report: bool = True, extra: Sequence[str] = ()) -> str:
    report = (", report.pdf" if report else "") + "".join(f", {x}" for x in extra)
    lines = []
    st = res.experiment.study
    lines.append(f"{st.title} - {st.operator}, {st.date.isoformat()}")
    for cname, q in res.headline:
        ch = res.chains[cname]
        est = ch.linear.estimate(q)
        unit = "" if est.unit == "1" else f" {pretty_unit(est.unit)}"
        # the report's rounding (GUM 7.2.6): U to two significant digits, the estimate and
        # the intervals to the same decimal place
        sc = scale_for(est.value, est.U)
        line = (
            f"  {q} = {sc.with_suffix(est.value)}{unit}, U = {sc.with_suffix(est.U)}{unit}"
            f" (coverage factor {est.k:.2f}, {100 * est.coverage:g} % coverage)"
        )
        if ch.montecarlo is not None:
            mc = ch.montecarlo.estimate(q)
            v = ch.validation[q]
            line += (
                f"; Monte Carlo [{sc.fmt(mc.low)}, {sc.fmt(mc.high)}]{sc.suffix},"
                f" {'validated' if v.validated else 'not validated'}"
            )
        if ch.posterior is not None and q in ch.posterior.quantities:
            bq = ch.posterior.quantities[q]
            line += f"; Bayesian [{sc.fmt(bq.low)}, {sc.fmt(bq.high)}]{sc.suffix}"
            if not bq.converged:
                line += " (not converged)"
        lines.append(line)
        b = ch.budgets[q]
        top = ", ".join(f"{e.input} {100 * e.share:.0f} %" for e in b.top(3))
        lines.append(f"    largest contributors: {top}")
    n_warn = sum(1 for f in res.all_findings if f.level == "warning")
    if n_warn:
        lines.append(f"  {n_warn} warning(s): see results.json")
        for f in res.all_findings:
            if f.level == "warning":
                lines.append(f"    - {'[' + f.run + '] ' if f.run else ''}{f.message}")
    lines.append(f"  written to {out}: results.json, budget.csv, fits.csv{report}")
    return "\n".join(lines)


def _plan_table(res) -> str:
    plan = res.plan
    lines = [f"Improvement plan: {res.experiment.study.title}"]
    for q, qp in plan.quantities.items():
        unit = "" if qp.unit == "1" else f" {pretty_unit(qp.unit)}"
        sc = scale_for(qp.U, qp.U)  # one power of ten for the column, that of the present U
        ex = 10.0**sc.exponent
        width = max([len("improvement"), *(len(c.description) for c in qp.cases[:10])])
        lines.append("")
        lines.append(f"{q}: U = {sc.with_suffix(qp.U)}{unit} (coverage factor {qp.k:.2f})")
        new_head = f"U new{sc.suffix}"
        lines.append(
            f"  {'rank':>4}  {'group':<22} {'improvement':<{width}} {new_head:>9} {'gain':>6}"
        )
        for i, c in enumerate(qp.cases[:10], start=1):
            lines.append(
                f"  {i:>4}  {c.group:<22} {c.description:<{width}}"
                f" {fmt_sig(c.U_new / ex, 2):>9} {c.reduction_percent:>5.0f}%"
            )
        lines += textwrap.wrap(
            qp.verdict, 100, initial_indent="  ", subsequent_indent="  ", break_on_hyphens=False
        )
        flagged = [c for c in plan.shares_check.get(q, ()) if c.flagged]
        for c in flagged:
            lines += textwrap.wrap(
                f"note: the Monte Carlo share of {c.group} ({100 * c.only_share:.0f} % varied"
                f" alone, {100 * c.frozen_share:.0f} % frozen) differs from the linear share"
                f" ({100 * c.linear_share:.0f} %) by more than 10 points: the model is"
                " nonlinear over this group's range.",
                100,
                initial_indent="  ",
                subsequent_indent="        ",
            )
    if plan.schedule:
        us = [x for s in plan.schedule for x in (s.u_current, s.u_optimal)]
        e = column_exponent(us)
        uunit = f"10{superscript(e)} s⁻¹" if e else "s⁻¹"
        lines.append("")
        lines.append(
            "Sampling schedule: the same number of equally spaced readings; span = time of the"
        )
        lines.append(f"last reading in half-lives; u(k') in {uunit}, from the fit alone.")
        u_now, u_best = "u(k') now", "u(k') best"
        lines.append(
            f"  {'run':<10} {'n':>3} {'spacing now':>12} {'span now':>9} {u_now:>10}"
            f" {'best spacing':>13} {'best span':>10} {u_best:>11} {'gain':>6}"
        )
        for s in plan.schedule:
            lines.append(
                f"  {s.run:<10} {s.readings:>3} {s.current_spacing_s:>10.0f} s"
                f" {s.current_half_lives:>9.1f} {fmt_sig(s.u_current / 10.0**e, 2):>10}"
                f" {s.optimal_spacing_s:>11.0f} s {s.optimal_half_lives:>10.1f}"
                f" {fmt_sig(s.u_optimal / 10.0**e, 2):>11} {s.gain_percent:>5.0f}%"
            )
    return "\n".join(lines)


def _plan(args: argparse.Namespace, argv: list[str]) -> int:
    from .analysis import DEFAULT_SEED, Settings, analyze
    from .results import OUTPUT_FILES, write_results

    settings = Settings(
        coverage=args.coverage,
        seed=DEFAULT_SEED if args.seed is None else args.seed,
        montecarlo=False,
        mcmc=False,  # the plan rests on the linear budget and simulated re-analyses
    )
    if args.out is not None:
        _check_out(args.out)
        _refuse_early(args.experiment, args.out, OUTPUT_FILES[:3])
    res = analyze(args.experiment, settings=settings)
    if res.plan is None:
        raise InputError(f"{args.experiment}: there is nothing to plan (no analysed chain).")
    print(_plan_table(res))
    if args.out is not None:
        write_results(res, args.out, command_line=["uqreport", *argv])
        print(f"results written to {args.out}")
    return EXIT_OK


def _refuse_early(exp_path: Path, out: Path, names: Sequence[str]) -> None:
    """Refuse an --out where an output would overwrite an input file, before the analysis
    spends its time (the file check is quick; its problems are those the analysis reports)."""
    from .experiment import check_experiment
    from .results import refuse_input_overwrite

    refuse_input_overwrite(check_experiment(exp_path), [out / n for n in names])


def _analyze(exp_path: Path, out: Path, args: argparse.Namespace, argv: list[str]) -> int:
    from .analysis import analyze
    from .results import (
        OUTPUT_FILES,
        parameter_label,
        refuse_input_overwrite,
        results_dict,
        write_results,
    )

    _check_out(out)
    _refuse_early(exp_path, out, OUTPUT_FILES)
    res = analyze(exp_path, settings=_settings(args))
    doc = results_dict(res, command_line=["uqreport", *argv])
    write_results(res, out, doc=doc)
    draws = {
        c: {
            parameter_label(n): ch.posterior.draws[:, i]
            for i, n in enumerate(ch.posterior.parameter_names)
        }
        for c, ch in res.chains.items()
        if ch.posterior is not None
    }
    extra: list[str] = []
    notes: list[str] = []
    if args.save_draws:
        for c, ch in res.chains.items():
            if ch.posterior is None:
                continue
            npz, nc = out / f"posterior_{c}.npz", out / f"posterior_{c}.nc"
            refuse_input_overwrite(res.experiment, [npz, nc])
            ch.posterior.save_draws(npz)
            extra.append(npz.name)
            try:
                ch.posterior.to_netcdf(nc)
                extra.append(nc.name)
            except InputError:
                # ArviZ is an optional extra; the .npz file has the same draws
                notes.append(
                    f"{nc.name} not written: ArviZ is not installed (pip install"
                    ' "uqreport[bayes]"); the same draws are in ' + npz.name
                )
        if not extra:
            notes.append("--save-draws: no posterior was sampled (--no-mcmc), no draws to save")
    if not args.no_report:
        from .report import build_report

        build_report(res, doc, out / "report.pdf", posterior_draws=draws or None)
    if not args.quiet:
        print(_summary(res, out, report=not args.no_report, extra=extra))
        for n in notes:
            print(f"  note: {n}")
    return EXIT_OK


def _demo(args: argparse.Namespace, argv: list[str]) -> int:
    from .demo import write_demo

    out: Path = args.out
    _check_out(out)
    if out.is_dir() and any(out.iterdir()) and not args.force:
        truth = out / "truth.json"
        ok = False
        if truth.is_file():
            try:
                ok = bool(json.loads(truth.read_text(encoding="utf-8")).get("invented"))
            except (OSError, ValueError):
                ok = False
        if not ok:
            raise InputError(
                f"--out {out} is not empty and does not hold an earlier demo; the demo would"
                " overwrite files there. Fix: name a new or empty folder, or add --force."
            )
    seed = 7 if args.seed is None else args.seed
    write_demo(out, seed=seed)
    args.seed = seed
    return _analyze(out / "experiment.toml", out, args, argv)


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code."""
    args_list = list(sys.argv[1:] if argv is None else argv)
    parser = _parser()
    args = parser.parse_args(args_list)
    try:
        if args.command == "check":
            from .experiment import check_experiment

            exp = check_experiment(args.experiment)
            if exp.batch is not None and exp.batch.runs:
                # what only the analysis used to find (an excess ratio below 5, ...): `check`
                # said "no problems found" and `analyze` then refused the file
                import warnings

                from .chains.batch import build_batch_chain

                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    build_batch_chain(exp)
            n_tables = len(exp.files) - 1
            print(f"{exp.path}: no problems found ({n_tables} table(s) checked).")
            return EXIT_OK
        if args.command == "analyze":
            return _analyze(args.experiment, args.out, args, args_list)
        if args.command == "demo":
            return _demo(args, args_list)
        if args.command == "plan":
            return _plan(args, args_list)
    except ExperimentError as exc:
        print(f"uqreport: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except InputError as exc:
        print(f"uqreport: error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("uqreport: interrupted", file=sys.stderr)
        return EXIT_INTERNAL
    except BrokenPipeError:
        # the reader of the output went away ("uqreport plan x.toml | head"): not an error;
        # send what is still buffered nowhere so that the exit does not fail again
        try:
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        except (OSError, ValueError, AttributeError):
            pass
        return EXIT_OK
    except OSError as exc:
        # the system refused a read or write (disk full, permissions changed meanwhile, a
        # network folder gone): not a bug of ours and not a problem of the input's content
        if args.debug:
            traceback.print_exc()
        where = f" ({exc.filename})" if exc.filename else ""
        print(
            f"uqreport: error: the system refused a file operation{where}:"
            f" {exc.strerror or exc}. Fix: check the free space and the permissions of the"
            " folders involved, then run the command again.",
            file=sys.stderr,
        )
        return EXIT_INTERNAL
    except Exception as exc:  # an internal error: say so plainly, traceback on request
        if args.debug:
            traceback.print_exc()
        print(
            f"uqreport: internal error ({type(exc).__name__}: {exc}). This is a bug in"
            " uqreport; rerun with --debug for the traceback and report it.",
            file=sys.stderr,
        )
        return EXIT_INTERNAL
    parser.error(f"unknown command {args.command}")
    return EXIT_INPUT


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
