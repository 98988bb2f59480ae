"""Loading an experiment file: parse every section, cross-check, and report all problems at once.

:func:`load_experiment` reads the TOML file, parses the registered sections in order,
reads every table, and then checks what spans sections: every referenced id exists (with a
"did you mean"), solution stocks form no cycle, run names are unique across all runs,
volumes fit their glassware, and the correlation matrix over the named quantities is
positive semi-definite.  Every problem found is raised together in one
:class:`~uqreport.errors.ExperimentError`.  Provenance: the SHA-256 of the experiment file and
of every table, keyed by path relative to the experiment folder.
"""

from __future__ import annotations

import hashlib
import math
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from ..errors import ExperimentError, InputError, Problem
from ..inputs import InputQuantity, InputSet
from . import chains as _chains  # noqa: F401  (registers the measurement sections)
from . import plan as _plan  # noqa: F401  (registers the planner section)
from .chains import MIN_BATCH_READINGS, BatchSection, Pump, TankSection, TracerSection
from .quantities import QuantitySpec
from .schema import (
    Context,
    Field,
    RecordSpec,
    Reference,
    parse_field,
    registered_sections,
    suggest,
)
from .sections import (
    Blank,
    Chemistry,
    Correlation,
    Cuvette,
    Glassware,
    Solution,
    Spectrophotometer,
    Stopwatch,
    Study,
    Timing,
)

__all__ = ["FORMAT_VERSION", "Experiment", "check_experiment", "load_experiment"]

#: The experiment-file format version this release reads.
FORMAT_VERSION = 1

_TARGET_NAMES = {
    "blanks": "blank",
    "cuvettes": "cuvette",
    "glassware": "glassware item",
    "solutions": "solution",
    "pumps": "pump",
    "tanks.vessels": "vessel",
}


@dataclass(frozen=True)
class Experiment:
    """A loaded and checked experiment file; every number in internal units.

    Attributes
    ----------
    path:
        The experiment file.
    directory:
        Its folder (table paths are relative to it).
    format_version:
        The file's format version (1).
    study, chemistry, spectrophotometer, stopwatch, timing:
        The general sections (``chemistry`` may be ``None``; the others always exist, with
        defaults filled).
    blanks, cuvettes, glassware, solutions, pumps:
        Id -> record (empty when the file has none).
    correlations:
        The correlation entries, with ``a``/``b`` the quantities' own key paths.
    batch, tanks, tracer:
        The measurement sections, or ``None``.
    files:
        Relative path -> SHA-256 (hex) of the experiment file and of every table.
    raw:
        The parsed TOML.
    quantities:
        Every quantity (given or defaulted) by key path.
    aliases:
        Key paths that stand for another quantity's key (inherited defaults, e.g.
        ``"batch.runs[r1].temperature"`` -> ``"study.temperature"``).
    defaults_used:
        Key paths filled from a default (see :mod:`uqreport.defaults`).
    sections:
        Section name -> parsed value, for every registered section (including any added
        later that has no attribute of its own).
    """

    path: Path
    directory: Path
    format_version: int
    study: Study
    chemistry: Chemistry | None
    spectrophotometer: Spectrophotometer
    blanks: dict[str, Blank]
    cuvettes: dict[str, Cuvette]
    glassware: dict[str, Glassware]
    stopwatch: Stopwatch
    timing: Timing
    solutions: dict[str, Solution]
    correlations: tuple[Correlation, ...]
    batch: BatchSection | None
    pumps: dict[str, Pump]
    tanks: TankSection | None
    tracer: TracerSection | None
    files: dict[str, str]
    raw: dict[str, Any]
    quantities: Mapping[str, QuantitySpec] = field(default_factory=dict)
    aliases: Mapping[str, str] = field(default_factory=dict)
    defaults_used: tuple[str, ...] = ()
    sections: Mapping[str, Any] = field(default_factory=dict)

    def quantity(self, key: str) -> QuantitySpec:
        """The quantity at key path ``key`` (an alias gives the quantity it stands for)."""
        real = self.aliases.get(key, key)
        try:
            return self.quantities[real]
        except KeyError:
            hint = suggest(key, [*self.quantities, *self.aliases])
            raise KeyError(f"no quantity '{key}' in {self.path.name}.{hint}") from None

    def dilution_path(self, solution: str) -> tuple[Solution, ...]:
        """The solutions from the original stock down to ``solution`` (stock first)."""
        chain = [self.solutions[solution]]
        while chain[-1].stock is not None:
            chain.append(self.solutions[chain[-1].stock])
        return tuple(reversed(chain))


def _format_field() -> Field:
    return Field(
        "format_version",
        "int",
        "format version of the file",
        required=True,
        example=f"format_version = {FORMAT_VERSION} at the top of the file",
    )


def _read(path: Path) -> tuple[dict[str, Any], bytes]:
    name = path.name
    if not path.is_file():
        what = "does not exist" if not path.exists() else "is not a file"
        raise ExperimentError(
            [
                Problem(
                    str(path),
                    f"the experiment file {what}.",
                    "give the path of an experiment.toml file (or of the folder holding it).",
                )
            ]
        )
    try:
        data = path.read_bytes()
    except OSError as exc:  # permission denied, a device or network error, ...
        raise ExperimentError(
            [
                Problem(
                    str(path),
                    f"the experiment file cannot be read ({exc.strerror or type(exc).__name__}).",
                    "check that the file is readable by you (its"
                    " permissions) and not locked by another program.",
                )
            ]
        ) from None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        byte = data[exc.start : exc.start + 1].hex()
        raise ExperimentError(
            [
                Problem(
                    f"{name}, line {line}",
                    f"the file is not UTF-8 text (byte 0x{byte} cannot be decoded).",
                    "save it as UTF-8 (in a text editor: encoding UTF-8);"
                    " a degree sign or a micro sign typed in another"
                    " encoding is the usual cause.",
                )
            ]
        ) from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = re.search(r"\(at line (\d+), column (\d+)\)", msg)
        where = f"{name}, line {m.group(1)}" if m else name
        raise ExperimentError(
            [
                Problem(
                    where,
                    f"the file is not valid TOML: {msg}.",
                    "correct the TOML syntax at that place (quotes around"
                    " texts, '=' between key and value, one [table] header"
                    " per table).",
                )
            ]
        ) from None
    return raw, data


def _check_references(ctx: Context) -> None:
    for ref in ctx.references:
        ids = ctx.ids.get(ref.target, ())
        if ref.value in ids:
            continue
        what = _TARGET_NAMES.get(ref.target, ref.target)
        if ids:
            fix = (
                f"use one of {', '.join(repr(i) for i in ids)}, or define"
                f" [{ref.target}.{ref.value}]."
            )
        else:
            fix = f"no {what} is defined: add a [{ref.target}.{ref.value}] table."
        ctx.add_at(ref.where, f"unknown {what} '{ref.value}'.{suggest(ref.value, ids)}", fix)


def _check_cycles(ctx: Context, solutions: Mapping[str, Solution]) -> None:
    reported: set[frozenset[str]] = set()
    for start in solutions:
        path: list[str] = []
        node: str | None = start
        while node is not None and node in solutions and node not in path:
            path.append(node)
            node = solutions[node].stock
        if node is None or node not in path:
            continue  # ends at a solution with a concentration, or at an unknown id
        cycle = path[path.index(node) :]
        members = frozenset(cycle)
        if members in reported or len(cycle) < 2:
            continue
        reported.add(members)
        first = min(cycle)
        i = cycle.index(first)
        ordered = [*cycle[i:], *cycle[:i], first]
        ctx.add(
            f"solutions.{first}.stock",
            "the stock solutions form a cycle: " + " -> ".join(ordered) + ".",
            "each dilution must trace back to a solution with a concentration; correct"
            " one of the stock ids.",
        )


def _check_runs(ctx: Context) -> None:
    seen: dict[str, str] = {}
    for sec in ("batch", "tanks", "tracer"):
        section = ctx.sections.get(sec)
        for run in getattr(section, "runs", ()) if section is not None else ():
            if run.name in seen:
                ctx.add(
                    f"{run.key}.name",
                    f"run name '{run.name}' is also used by {seen[run.name]}.",
                    "give every run of the file its own name.",
                )
            else:
                seen[run.name] = run.key


def _check_glassware_volumes(ctx: Context, glassware: Mapping[str, Glassware]) -> None:
    for key, spec in list(ctx.quantities.items()):
        item = glassware.get(spec.glassware) if spec.glassware else None
        if item is None or item.capacity is None:
            continue
        cap = item.capacity.value
        if spec.value > cap * (1 + 1e-9):
            ctx.add(
                f"{key}.value",
                f"{spec.value:g} mL is more than the {cap:g} mL capacity of"
                f" glassware '{item.name}'.",
                "check the volume or the glassware id.",
            )
        elif item.kind in ("volumetric flask", "volumetric pipette") and not math.isclose(
            spec.value, cap, rel_tol=1e-9
        ):
            ctx.add(
                f"{key}.value",
                f"{spec.value:g} mL is measured with '{item.name}', a"
                f" {item.kind} that holds only its capacity ({cap:g} mL).",
                f"give value = {cap:g}, or name the glassware actually used.",
            )


def _check_tables(ctx: Context) -> None:
    """Ids in batch tables' cuvette column; pump volumes against the collecting glassware."""
    batch = ctx.sections.get("batch")
    for run in batch.runs if batch is not None else ():
        if run.table is None or not run.table.has_column("cuvette"):
            continue
        first: dict[str, int] = {}
        for i, c in enumerate(run.table.frame["cuvette"]):
            if c:
                first.setdefault(str(c), i)
        for cid, row in first.items():
            ctx.references.append(Reference(ctx.cell(run.table, row, "cuvette"), "cuvettes", cid))
    glassware = ctx.sections.get("glassware") or {}
    for pump in (ctx.sections.get("pumps") or {}).values():
        item = glassware.get(pump.glassware) if pump.glassware else None
        if pump.table is None or item is None or item.capacity is None:
            continue
        cap = item.capacity.value
        fixed = item.kind in ("volumetric flask", "volumetric pipette")
        for i, v in enumerate(pump.table.frame["volume"]):
            if v > cap * (1 + 1e-9) or (fixed and not math.isclose(v, cap, rel_tol=1e-9)):
                what = "is not the" if v <= cap else "is more than the"
                ctx.add_at(
                    ctx.cell(pump.table, i, "volume"),
                    f"{v:g} mL {what} {cap:g} mL"
                    f" capacity of glassware '{item.name}' ({item.kind}).",
                    "check the volume or the glassware id.",
                )


def _check_batch(ctx: Context) -> None:
    """What the batch settings require of every run."""
    batch = ctx.sections.get("batch")
    if batch is None:
        return
    lo = batch.fit_start.value if batch.fit_start is not None else -math.inf
    hi = batch.fit_end.value if batch.fit_end is not None else math.inf
    params = 1 + (batch.baseline == "fitted") + (batch.initial == "free")
    chem = ctx.sections.get("chemistry")
    for run in batch.runs:
        reported = ctx.where(f"{run.key}.final_absorbance")
        given_but_bad = any(p.where.startswith(reported) for p in ctx.problems)
        if batch.baseline == "measured" and run.final_absorbance is None and not given_but_bad:
            ctx.add(
                f"{run.key}.final_absorbance",
                "baseline = 'measured' needs each run's final absorbance.",
                "add final_absorbance = { value = ..., u = ... } to"
                " the run, or use baseline = 'fitted'.",
            )
        if batch.initial == "from_concentration":
            if run.dye_concentration is None and run.dye_solution is None:
                ctx.add(
                    run.key,
                    "initial = 'from_concentration' needs the run's dye concentration.",
                    "add dye_concentration, or dye_solution + dye_volume"
                    " (with the hydroxide given by volumes).",
                )
            if (
                run.cuvette is None
                and run.table is not None
                and not run.table.has_column("cuvette")
            ):
                ctx.add(
                    f"{run.key}.cuvette",
                    "initial = 'from_concentration' needs the"
                    " pathlength, but the run names no cuvette.",
                    'add cuvette = "<id>" to the run.',
                )
        if run.table is None:
            continue
        f = run.table.frame
        usable = int(((f["flag"] == "") & (f["time"] >= lo) & (f["time"] <= hi)).sum())
        need = max(MIN_BATCH_READINGS, params + 1)
        if usable < need:
            ctx.add(
                f"{run.key}.table",
                f"only {usable} usable readings (flag empty, inside the"
                f" fit window) for a fit with {params} parameters.",
                f"give at least {need} usable readings, or widen the fit window.",
            )
    if batch.initial == "from_concentration" and (chem is None or chem.molar_absorptivity is None):
        ctx.add(
            "batch.initial",
            "initial = 'from_concentration' needs the dye's molar absorptivity.",
            "add [chemistry] molar_absorptivity, or use initial = 'free'.",
        )


def _check_correlations(ctx: Context, entries: tuple[Correlation, ...]) -> tuple[Correlation, ...]:
    out: list[Correlation] = []
    pairs: dict[tuple[str, str], float] = {}
    names: list[str] = []
    known = [*ctx.quantities, *ctx.aliases]
    for c in entries:
        if c.a is None or c.b is None or c.r is None:
            continue
        resolved = []
        for side, text in (("a", c.a), ("b", c.b)):
            real = ctx.aliases.get(text, text)
            spec = ctx.quantities.get(real)
            if spec is None:
                ctx.add(
                    f"{c.key}.{side}",
                    f"no quantity '{text}' in the file.{suggest(text, known)}",
                    'name a quantity by its key path, e.g. "solutions.<id>.concentration".',
                )
            elif spec.glassware is not None:
                ctx.add(
                    f"{c.key}.{side}",
                    f"'{text}' takes its uncertainty from glassware"
                    f" '{spec.glassware}'; fills of one item are correlated through it"
                    " already.",
                    "remove this correlation, or state the volume's own"
                    " uncertainty instead of glassware.",
                )
            elif spec.exact:
                ctx.add(
                    f"{c.key}.{side}",
                    f"'{text}' has no uncertainty (u = 0), so it cannot be correlated.",
                    "give the quantity an uncertainty, or remove the correlation.",
                )
            elif spec.distribution != "normal":
                ctx.add(
                    f"{c.key}.{side}",
                    f"'{text}' has a {spec.distribution} distribution;"
                    " correlated quantities are drawn jointly normal in Monte Carlo"
                    " (JCGM 101 6.4.8).",
                    "give it as u (normal), or model the shared part as a quantity of its own.",
                )
            else:
                resolved.append(real)
        if len(resolved) < 2:
            continue
        a, b = resolved
        if a == b:
            ctx.add(
                c.key,
                f"a quantity cannot be correlated with itself ('{a}').",
                "name two different quantities.",
            )
            continue
        pair = (a, b) if a < b else (b, a)
        if pair in pairs and pairs[pair] != c.r:
            ctx.add(
                f"{c.key}.r",
                f"the correlation of '{a}' and '{b}' is given twice ({pairs[pair]:g} and {c.r:g}).",
                "keep one entry per pair.",
            )
            continue
        pairs[pair] = c.r
        names.extend(x for x in pair if x not in names)
        out.append(replace(c, a=a, b=b))
    if pairs:
        try:
            InputSet([InputQuantity(n, 0.0, 1.0) for n in names], pairs)
        except InputError as exc:
            message, _, fix = str(exc).partition(" Fix: ")
            ctx.add("correlations", message, fix)
    return tuple(out)


def load_experiment(path: str | Path) -> Experiment:
    """Load, check and convert an experiment file (or the ``experiment.toml`` in a folder).

    Raises :class:`~uqreport.errors.ExperimentError` listing every problem found, each with
    its place (file and key path, or table line and column), the bad value and the fix.
    """
    path = Path(path)
    if path.is_dir():
        path = path / "experiment.toml"
    raw, data = _read(path)
    return _build(raw, path, data)


def _build(raw: dict[str, Any], path: Path, data: bytes) -> Experiment:
    """Parse and check the parsed TOML ``raw`` of the file at ``path`` (bytes ``data``)."""
    ctx = Context(file=path.name, directory=path.parent)
    ctx.files[path.name] = hashlib.sha256(data).hexdigest()
    sections = registered_sections()
    top = RecordSpec((_format_field(), *sections))
    for name in raw:
        if name not in top.names:
            ctx.add(
                name,
                f"unknown section or key '{name}' at the top level.{suggest(name, top.names)}",
                "allowed here: " + ", ".join(top.names) + ".",
            )
    version = parse_field(top.fields[0], raw, key="", ctx=ctx)
    if version is not None and version != FORMAT_VERSION:
        ctx.add(
            "format_version",
            f"format_version = {version} is not supported.",
            f"this version of uqreport reads format_version = {FORMAT_VERSION}.",
        )
        raise ExperimentError(ctx.problems)
    for section in sections:
        ctx.sections[section.name] = parse_field(section, raw, key="", ctx=ctx)
    _check_tables(ctx)
    _check_references(ctx)
    s = ctx.sections
    _check_batch(ctx)
    _check_cycles(ctx, s.get("solutions") or {})
    _check_runs(ctx)
    _check_glassware_volumes(ctx, s.get("glassware") or {})
    correlations = _check_correlations(
        ctx, tuple(x for x in (s.get("correlations") or ()) if x is not None)
    )
    if ctx.problems:
        raise ExperimentError(ctx.problems)
    return Experiment(
        path=path,
        directory=path.parent,
        format_version=int(version),
        study=s["study"],
        chemistry=s.get("chemistry"),
        spectrophotometer=s["spectrophotometer"],
        blanks=s.get("blanks") or {},
        cuvettes=s.get("cuvettes") or {},
        glassware=s.get("glassware") or {},
        stopwatch=s["stopwatch"],
        timing=s["timing"],
        solutions=s.get("solutions") or {},
        correlations=correlations,
        batch=s.get("batch"),
        pumps=s.get("pumps") or {},
        tanks=s.get("tanks"),
        tracer=s.get("tracer"),
        files=dict(ctx.files),
        raw=raw,
        quantities=dict(ctx.quantities),
        aliases=dict(ctx.aliases),
        defaults_used=tuple(ctx.defaulted),
        sections=dict(s),
    )


def check_experiment(path: str | Path) -> Experiment:
    """Check an experiment file: the same as :func:`load_experiment` (all checks included)."""
    return load_experiment(path)
