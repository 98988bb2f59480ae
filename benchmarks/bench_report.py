"""Building the PDF report of the invented demo study: wall time and file size.

The demo study is written to a temporary folder and analysed (not timed); then
``build_report`` is timed: first cold (its first call in the process, so the lazy imports of
reportlab and matplotlib and the font registration are included, as in one ``uqreport demo``
run), then warm (``--repeats`` more calls), each split into assembling the story (the
figures are drawn here) and laying it out.  The file must be the same every time (invariant
build); the script says so.

Targets: the report built in <= 10 s (cold, wall clock) and the file <= 5 MB.  CPU/wall is
printed beside the times: well below 1 means the machine was busy.  Exit code 0 unless the
code under test raises.

    python benchmarks/bench_report.py [--quick] [--repeats N] [--json PATH]
"""

from __future__ import annotations

import argparse
import json
import platform
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

__all__ = ["main"]

TIME_TARGET_S = 10.0
SIZE_TARGET_MB = 5.0


def _timed(fn, *args, **kw) -> tuple[Any, float, float]:
    w0, c0 = time.perf_counter(), time.process_time()
    out = fn(*args, **kw)
    return out, time.perf_counter() - w0, time.process_time() - c0


def _measure(tmp: Path, *, draws: int, repeats: int, seed: int) -> dict[str, Any]:
    from uqreport.analysis import Settings, analyze
    from uqreport.demo import write_demo
    from uqreport.results import results_dict

    folder = tmp / "demo"
    write_demo(folder, seed=seed)
    res, t_an, _ = _timed(
        analyze, folder / "experiment.toml", settings=Settings(draws=draws, seed=seed)
    )
    doc = results_dict(res, command_line=["uqreport", "demo", "--out", str(folder)])
    print(
        f"demo study analysed in {t_an:.2f} s ({draws} Monte Carlo draws; not part of the"
        " report's time)"
    )
    cold_imports = "reportlab" not in sys.modules and "matplotlib" not in sys.modules

    from uqreport.report import build_report, pdf, report_story

    path = tmp / "report.pdf"
    _, cold_wall, cold_cpu = _timed(build_report, res, doc, path)
    first = path.read_bytes()
    out: dict[str, Any] = {
        "draws": draws,
        "size_bytes": len(first),
        "cold_wall_s": cold_wall,
        "cold_cpu_s": cold_cpu,
        "cold_imports": cold_imports,
        "warm_wall_s": [],
        "story_s": [],
        "layout_s": [],
        "same_bytes": True,
        "pages": 0,
    }
    for _ in range(repeats):
        (story, _titles), t_story, _ = _timed(report_story, res, doc)
        (_data, pages), t_layout, _ = _timed(
            pdf.build_pdf, story, title=doc["study"]["title"], author=doc["study"]["operator"]
        )
        _, t_full, _ = _timed(build_report, res, doc, path)
        out["same_bytes"] = out["same_bytes"] and path.read_bytes() == first
        out["warm_wall_s"].append(t_full)
        out["story_s"].append(t_story)
        out["layout_s"].append(t_layout)
        out["pages"] = pages
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer Monte Carlo draws, 1 repeat")
    ap.add_argument("--repeats", type=int, default=None, help="warm builds (default 3, quick 1)")
    ap.add_argument("--json", type=Path, default=None, help="write the figures here")
    ap.add_argument("--seed", type=int, default=7, help="demo data seed (default 7)")
    args = ap.parse_args(argv)
    repeats = max(1, args.repeats if args.repeats is not None else (1 if args.quick else 3))
    draws = 2_000 if args.quick else 20_000
    with tempfile.TemporaryDirectory(prefix="uqreport-bench-report-") as tmp:
        f = _measure(Path(tmp), draws=draws, repeats=repeats, seed=args.seed)

    cold, size, warm = f["cold_wall_s"], f["size_bytes"], min(f["warm_wall_s"])
    ratio = f["cold_cpu_s"] / cold if cold > 0 else 1.0
    print(
        f"report: {f['pages']} pages, {size / 1e6:.2f} MB; cold build {cold:.2f} s wall"
        f" ({f['cold_cpu_s']:.2f} s CPU, CPU/wall {ratio:.2f}"
        f"{'; imports of reportlab and matplotlib included' if f['cold_imports'] else ''})"
    )
    print(
        f"warm builds: best {warm:.2f} s (story with its figures {min(f['story_s']):.2f} s,"
        f" layout {min(f['layout_s']):.2f} s) over {repeats} repeat(s); the same bytes every"
        f" build: {'yes' if f['same_bytes'] else 'NO'}"
    )
    if ratio < 0.7:
        print("caution: CPU/wall well below 1: the machine was busy; the wall time overstates")
    verdicts = [
        (
            f"demo report built in <= {TIME_TARGET_S:g} s",
            cold <= TIME_TARGET_S,
            f"{cold:.2f} s cold, {warm:.2f} s warm",
        ),
        (
            f"report file <= {SIZE_TARGET_MB:g} MB",
            size <= SIZE_TARGET_MB * 1e6,
            f"{size / 1e6:.2f} MB",
        ),
        (
            "same input, same file",
            f["same_bytes"],
            "identical bytes" if f["same_bytes"] else "differ",
        ),
    ]
    for target, ok, figure in verdicts:
        print(f"{'PASS' if ok else 'MISS'}  {target}: {figure}")
    if args.json is not None:
        f.update(
            benchmark="report",
            quick=args.quick,
            python=platform.python_version(),
            verdicts=[
                {"verdict": "PASS" if ok else "MISS", "target": t, "figure": fig}
                for t, ok, fig in verdicts
            ],
        )
        args.json.parent.mkdir(parents=True, exist_ok=True)
        args.json.write_text(json.dumps(f, indent=2) + "\n", encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
