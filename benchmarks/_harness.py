"""Shared plumbing of the benchmark scripts (not a benchmark itself: run_all skips it).

Every measurement runs in a fresh Python process (a *worker*: the benchmark script started
again with ``--worker MODE``), single-threaded (BLAS and OpenMP thread counts forced to 1),
so that wall times are one-core figures and peak-memory figures (``ru_maxrss``, tracemalloc)
belong to that measurement alone.  A worker prints one line ``RESULT_TAG {json}`` at the end;
the parent parses it.  Verdict lines read ``PASS  <target>: <figure>`` or ``MISS  ...``, which
``run_all.py`` collects.
"""

from __future__ import annotations

import json
import os
import platform
import resource
import subprocess
import sys
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

__all__ = [
    "RESULT_TAG",
    "THREAD_VARIABLES",
    "Verdict",
    "busy_note",
    "current_rss_mib",
    "emit_result",
    "engine_chunk",
    "machine_note",
    "peak_rss_mib",
    "pin_to_cpu",
    "print_machine_note",
    "run_worker",
    "single_core_env",
    "summarise",
    "timed_montecarlo",
    "write_json",
]

RESULT_TAG = "@@BENCH-RESULT"

#: Environment variables that fix the thread count of the numerical libraries.
THREAD_VARIABLES = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "NUMEXPR_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
)


def single_core_env() -> dict[str, str]:
    """The current environment with every numerical library held to one thread."""
    env = dict(os.environ)
    for var in THREAD_VARIABLES:
        env[var] = "1"
    env.setdefault("PYTHONHASHSEED", "0")
    return env


def peak_rss_mib() -> float:
    """Peak resident set size of this process so far (MiB), from ``ru_maxrss``."""
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    # Linux reports KiB, macOS bytes
    return peak / 2**20 if sys.platform == "darwin" else peak / 1024.0


def current_rss_mib() -> float:
    """Current resident set size (MiB); falls back to the peak where /proc is missing."""
    try:
        pages = int(Path("/proc/self/statm").read_text().split()[1])
    except (OSError, IndexError, ValueError):
        return peak_rss_mib()
    return pages * os.sysconf("SC_PAGE_SIZE") / 2**20


def emit_result(doc: dict[str, Any]) -> None:
    """Print a worker's figures for the parent (one tagged JSON line)."""
    print(RESULT_TAG + " " + json.dumps(doc), flush=True)


def run_worker(
    script: str | Path,
    args: Sequence[str],
    *,
    cpu: int | None = None,
    timeout: float = 3600.0,
) -> dict[str, Any]:
    """Run ``script --worker ...`` in a fresh single-threaded process; return its figures.

    ``cpu`` pins the worker to one CPU (``taskset``-like, Linux only); by default the worker
    is single-threaded but the scheduler may place it on any core.  Raises ``RuntimeError``
    with the worker's output when it fails (an error of the code under test).
    """
    cmd = [sys.executable, str(script), *args]
    if cpu is not None:
        cmd += ["--cpu", str(cpu)]
    proc = subprocess.run(
        cmd, env=single_core_env(), capture_output=True, text=True, timeout=timeout, check=False
    )
    result = None
    for line in proc.stdout.splitlines():
        if line.startswith(RESULT_TAG):
            result = json.loads(line[len(RESULT_TAG) :])
    if proc.returncode != 0 or result is None:
        raise RuntimeError(
            f"worker {' '.join(args)} failed (exit code {proc.returncode}):\n"
            f"{proc.stdout[-4000:]}\n{proc.stderr[-4000:]}"
        )
    if proc.stderr.strip():
        result["stderr"] = proc.stderr.strip()[-2000:]
    return result


def pin_to_cpu(cpu: int | None) -> None:
    """Pin this process to one CPU (Linux); no-op when ``cpu`` is None."""
    if cpu is not None and hasattr(os, "sched_setaffinity"):
        os.sched_setaffinity(0, {cpu})


def _cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.lower().startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def machine_note() -> dict[str, Any]:
    """What the figures were measured on: CPUs, CPU model, versions, load."""
    import numpy
    import scipy

    try:
        usable = len(os.sched_getaffinity(0))
    except AttributeError:
        usable = os.cpu_count() or 1
    try:
        load = list(os.getloadavg())
    except OSError:
        load = []
    return {
        "nproc": usable,
        "cpu_model": _cpu_model(),
        "python": platform.python_version(),
        "numpy": numpy.__version__,
        "scipy": scipy.__version__,
        "platform": platform.platform(),
        "load_average": [round(x, 2) for x in load],
        "date_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
    }


def print_machine_note(note: dict[str, Any]) -> None:
    load = ", ".join(f"{x:.2f}" for x in note["load_average"]) or "n/a"
    print(
        f"machine: {note['nproc']} CPU(s) usable (nproc), {note['cpu_model']};"
        f" python {note['python']}, numpy {note['numpy']}, scipy {note['scipy']};"
        f" load average {load}"
    )
    print("workers: fresh processes, BLAS/OpenMP threads = 1 (one-core figures)")


class Verdict:
    """A target and whether the measured figure meets it; prints one PASS/MISS line."""

    def __init__(self, target: str, ok: bool, figure: str, note: str = ""):
        self.target = target
        self.ok = bool(ok)
        self.figure = figure
        self.note = note

    @property
    def word(self) -> str:
        return "PASS" if self.ok else "MISS"

    def line(self) -> str:
        tail = f" ({self.note})" if self.note else ""
        return f"{self.word}  {self.target}: {self.figure}{tail}"

    def as_dict(self) -> dict[str, Any]:
        return {
            "verdict": self.word,
            "target": self.target,
            "figure": self.figure,
            "note": self.note,
        }


def engine_chunk(model: Any, fallback: int) -> int:
    """The number of draws the Monte Carlo engine evaluates per model call (its own rule);
    ``fallback`` when the engine's private helper has moved."""
    from uqreport.propagation import montecarlo

    try:
        return int(montecarlo._chunk_size(model, montecarlo.DEFAULT_CHUNK_BYTES))
    except AttributeError:
        return fallback


def timed_montecarlo(
    model: Any, draws: int, seed: int, *, trace: bool, profile: bool, profile_lines: int
) -> tuple[Any, dict[str, Any]]:
    """One timed ``propagate_montecarlo`` call after a warm-up: the result and its figures
    (wall and CPU time, peak and starting RSS, draws, failed draws; the tracemalloc peak
    with ``trace``, a cProfile listing with ``profile``)."""
    import cProfile
    import io
    import pstats
    import tracemalloc

    from uqreport.propagation import propagate_montecarlo

    propagate_montecarlo(model, draws=1000, rng=seed + 1)  # warm-up: first-call costs
    rss_before = current_rss_mib()
    prof = cProfile.Profile() if profile else None
    if trace:
        tracemalloc.start()
    if prof:
        prof.enable()
    w0, c0 = time.perf_counter(), time.process_time()
    res = propagate_montecarlo(model, draws=draws, rng=seed)
    wall, cpu = time.perf_counter() - w0, time.process_time() - c0
    if prof:
        prof.disable()
    out: dict[str, Any] = {
        "wall_s": wall,
        "cpu_s": cpu,
        "peak_rss_mib": peak_rss_mib(),
        "rss_before_mib": rss_before,
        "draws": res.draws,
        "failed_draws": res.failed_draws,
    }
    if trace:
        out["traced_peak_mib"] = tracemalloc.get_traced_memory()[1] / 2**20
        tracemalloc.stop()
    if prof:
        buf = io.StringIO()
        pstats.Stats(prof, stream=buf).sort_stats("tottime").print_stats(profile_lines)
        out["profile"] = buf.getvalue()
    return res, out


def busy_note(cpu: dict[str, float], wall: dict[str, float]) -> str:
    """ "; machine busy: ..." when the best CPU time is well below the best wall time (the
    worker waited for a CPU), printed as a caution; "" otherwise."""
    if cpu["min"] >= 0.9 * wall["min"]:
        return ""
    note = (
        f"; machine busy: CPU/wall {cpu['min'] / wall['min']:.2f}, the worker waited for a"
        " CPU, so the CPU time is the better one-core figure"
    )
    print("caution: " + note[2:])
    return note


def summarise(values: Sequence[float]) -> dict[str, float]:
    """Best (min), median and max of repeated timings."""
    v = sorted(values)
    n = len(v)
    med = v[n // 2] if n % 2 else 0.5 * (v[n // 2 - 1] + v[n // 2])
    return {"min": v[0], "median": med, "max": v[-1], "repeats": n}


def write_json(path: str | Path, doc: dict[str, Any]) -> None:
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(json.dumps(doc, indent=2, sort_keys=False) + "\n", encoding="utf-8")
