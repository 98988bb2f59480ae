"""Run every ``bench_*.py`` beside this file, each in a fresh process, and collect the verdicts.

Scripts are found by name when this runs, so benchmarks added later are included without
editing this file.  Each is started as ``python bench_x.py [--quick] --json <tmp>`` with the
numerical libraries held to one thread; its output is shown as it comes and its ``PASS`` and
``MISS`` lines are collected into a summary (and, with ``--json``, into one file together with
each script's own figures).

Exit code: 0 when every script ran to the end, whatever its verdicts (a MISS is a figure, not
a failure); 1 when a script failed or timed out, which means the code under test raised.
"""

from __future__ import annotations

import argparse
import fnmatch
import json
import os
import re
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _harness as H

HERE = Path(__file__).resolve().parent
VERDICT = re.compile(r"\b(PASS|MISS)\b")


def discover(only: list[str] | None) -> list[Path]:
    scripts = sorted(HERE.glob("bench_*.py"))
    if only:
        scripts = [s for s in scripts if any(fnmatch.fnmatch(s.stem, f"*{p}*") for p in only)]
    return scripts


def run_one(script: Path, *, quick: bool, timeout: float, json_path: Path) -> dict[str, Any]:
    cmd = [sys.executable, str(script), "--json", str(json_path)]
    if quick:
        cmd.insert(2, "--quick")
    print(f"\n######## {script.name}: {' '.join(Path(c).name for c in cmd[1:])}", flush=True)
    verdicts: list[str] = []
    start = time.perf_counter()
    with subprocess.Popen(
        cmd,
        env=H.single_core_env(),
        stdout=subprocess.PIPE,
        stderr=subprocess.STDOUT,
        text=True,
        bufsize=1,
        cwd=HERE.parent,
        start_new_session=True,  # the script and its workers form one process group
    ) as proc:
        killed = threading.Event()

        def stop() -> None:  # on timeout: end this script's process group, nothing else
            killed.set()
            try:
                os.killpg(proc.pid, signal.SIGKILL)
            except ProcessLookupError:
                pass

        watchdog = threading.Timer(timeout, stop)
        watchdog.start()
        try:
            assert proc.stdout is not None
            for line in proc.stdout:
                print(line, end="", flush=True)
                if VERDICT.search(line):
                    verdicts.append(line.rstrip())
            code = proc.wait()
        finally:
            watchdog.cancel()
    rc: int | str = "timeout" if killed.is_set() else code
    figures = None
    if json_path.is_file():
        try:
            figures = json.loads(json_path.read_text(encoding="utf-8"))
        except json.JSONDecodeError:
            figures = None
    return {
        "script": script.name,
        "exit_code": rc,
        "seconds": round(time.perf_counter() - start, 2),
        "verdicts": verdicts,
        "figures": figures,
    }


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="pass --quick to every benchmark")
    ap.add_argument("--json", metavar="PATH", help="write every script's verdicts and figures")
    ap.add_argument(
        "--only", nargs="+", metavar="NAME", help="run only scripts whose name contains NAME"
    )
    ap.add_argument(
        "--timeout", type=float, default=3600.0, help="seconds per script (default 3600)"
    )
    args = ap.parse_args(argv)

    scripts = discover(args.only)
    note = H.machine_note()
    print(f"== run_all: {len(scripts)} benchmark(s)" + (" (quick)" if args.quick else ""))
    H.print_machine_note(note)
    if not scripts:
        print("no bench_*.py scripts found")
    results = []
    with tempfile.TemporaryDirectory(prefix="uqreport-bench-") as tmp:
        for script in scripts:
            results.append(
                run_one(
                    script,
                    quick=args.quick,
                    timeout=args.timeout,
                    json_path=Path(tmp) / f"{script.stem}.json",
                )
            )

    print("\n======== summary")
    failed = 0
    for r in results:
        n_pass = sum(1 for v in r["verdicts"] if "PASS" in VERDICT.findall(v))
        n_miss = len(r["verdicts"]) - n_pass
        ok = r["exit_code"] == 0
        failed += not ok
        state = "ran" if ok else f"FAILED (exit code {r['exit_code']})"
        print(f"{r['script']}: {state} in {r['seconds']:.1f} s; {n_pass} PASS, {n_miss} MISS")
        for v in r["verdicts"]:
            print(f"    {v.strip()}")
        if ok and not r["verdicts"]:
            print("    (no PASS/MISS lines printed)")
    if args.json:
        H.write_json(args.json, {"quick": args.quick, "machine": note, "results": results})
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
