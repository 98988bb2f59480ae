"""A small declarative field-spec machinery for the experiment file.

A :class:`Field` describes one key: its kind (``str``, ``bool``, ``int``, ``number``,
``enum``, ``date``, a ``plain``/``uncertain``/``offset`` quantity, a ``ref`` to an id
defined elsewhere, a ``list``, a ``path`` to a table, or sub-records: a ``record`` (one
table), ``records`` (an array of tables) or a ``mapping`` (a table of id -> record)).  A
:class:`RecordSpec` is a set of fields plus a ``build`` hook that turns the parsed values into
a dataclass and checks what depends on several keys.

Parsing never raises for user input: every problem goes to the :class:`Context`, so that all
problems of a file are reported together.  Unknown keys are problems with a difflib "did you
mean" suggestion and the list of allowed keys.

Sections register themselves in one registry (:func:`register_section`); the loader parses
them in registration order, so a section may use the sections registered before it (through
:attr:`Context.sections`).  A new section only needs a ``register_section`` call.
"""

from __future__ import annotations

import datetime as _dt
import difflib
import math
import os
import re
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..defaults import TypeBDefault
from ..errors import ExperimentError, Problem
from ..tables import Table, read_table
from .quantities import QuantitySpec, parse_quantity, quantity_from_default

__all__ = [
    "KINDS",
    "Context",
    "Field",
    "Record",
    "RecordSpec",
    "Reference",
    "iter_fields",
    "parse_field",
    "parse_record",
    "parse_value",
    "register_section",
    "registered_sections",
    "suggest",
]

KINDS = (
    "str",
    "bool",
    "int",
    "number",
    "enum",
    "date",
    "plain",
    "uncertain",
    "offset",
    "ref",
    "list",
    "path",
    "record",
    "records",
    "mapping",
)
_QUANTITY_KINDS = ("plain", "uncertain", "offset")
_ID = re.compile(r"^[A-Za-z0-9_-]+$")
_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")


@dataclass(frozen=True)
class Field:
    """The specification of one key.

    Attributes
    ----------
    name:
        The key as written in the file.
    kind:
        One of :data:`KINDS`.
    doc:
        What the key means (used in messages and documentation).
    required:
        Whether the key must be given.
    default:
        The value when the key is absent: a plain value, or a
        :class:`~uqreport.defaults.TypeBDefault` for a quantity.
    dimension:
        The :mod:`uqreport.units` dimension of a quantity.
    choices:
        The allowed values of an ``enum``.
    target:
        For ``ref``: the key path of the mapping whose ids are allowed (e.g.
        ``"cuvettes"``, ``"tanks.vessels"``).
    table:
        For ``path``: the table kind (``"batch"``, ``"pump"``, ``"tank"``, ``"tracer"``).
    record:
        For ``record``, ``records`` and ``mapping``: the spec of the sub-records.
    item:
        For ``list``: the spec of one element (its name is not used).
    low, high, low_open:
        Bounds of a number or quantity value (internal units); ``low_open`` excludes ``low``.
    glassware_ok:
        For a volume quantity: whether ``glassware = "<id>"`` may carry its uncertainty.
    min_items, max_items:
        Length limits of a ``list`` or ``records``.
    when_absent:
        ``"empty"``: an absent ``record`` is parsed as an empty table (its defaults filled).
    example:
        A TOML snippet shown in the fix of a missing required key.
    """

    name: str
    kind: str
    doc: str = ""
    required: bool = False
    default: Any = None
    dimension: str | None = None
    choices: tuple[str, ...] = ()
    target: str | None = None
    table: str | None = None
    record: RecordSpec | None = None
    item: Field | None = None
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    glassware_ok: bool = False
    min_items: int = 0
    max_items: int | None = None
    when_absent: str = "none"
    example: str = ""

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"field {self.name!r}: unknown kind {self.kind!r}")


@dataclass(frozen=True)
class RecordSpec:
    """The fields of one record and how to build it.

    Attributes
    ----------
    fields:
        The keys the record may have.
    build:
        ``build(record)`` returns the parsed object (usually a frozen dataclass) and reports
        problems that involve several keys; ``None`` returns the values as a dict.
    name_field:
        For an array of records: the key that names each record (used in key paths,
        ``runs[r1]``); ``None`` uses the position (``correlations[0]``).
    doc:
        What the record describes.
    """

    fields: tuple[Field, ...]
    build: Callable[[Record], Any] | None = None
    name_field: str | None = None
    doc: str = ""

    @property
    def names(self) -> tuple[str, ...]:
        """The allowed keys."""
        return tuple(f.name for f in self.fields)


@dataclass(frozen=True)
class Reference:
    """A use of an id that must be defined elsewhere in the file.

    Attributes
    ----------
    where:
        The full location for messages (file and key path, or table line and column).
    target:
        The key path of the mapping that must define the id (``"cuvettes"``).
    value:
        The id as written.
    """

    where: str
    target: str
    value: str


@dataclass
class Context:
    """Mutable state of one load: problems, ids, references, quantities and tables.

    Attributes
    ----------
    file:
        The experiment file's name, as used in messages.
    directory:
        The folder table paths are relative to.
    problems:
        Every problem found so far.
    references:
        Every id used that must be defined somewhere (checked by the loader).
    ids:
        For each mapping key path (``"cuvettes"``), the ids it defines.
    quantities:
        Every quantity parsed or defaulted, by key path.
    aliases:
        Key paths that stand for another quantity's key (an inherited default).
    defaulted:
        Key paths filled from a default.
    files:
        Relative path -> SHA-256 of every table read.
    tables:
        (relative path, kind) -> the table read (a table used twice is read once).
    sections:
        Section name -> parsed value, filled in registration order.
    misspelt:
        Key paths of keys absent because an unknown key was reported with them as its
        "did you mean" (``nmae`` for ``name``): the absence is not reported a second time.
    """

    file: str
    directory: Path
    problems: list[Problem] = field(default_factory=list)
    references: list[Reference] = field(default_factory=list)
    ids: dict[str, tuple[str, ...]] = field(default_factory=dict)
    quantities: dict[str, QuantitySpec] = field(default_factory=dict)
    aliases: dict[str, str] = field(default_factory=dict)
    defaulted: list[str] = field(default_factory=list)
    files: dict[str, str] = field(default_factory=dict)
    tables: dict[tuple[str, str], Table | None] = field(default_factory=dict)
    sections: dict[str, Any] = field(default_factory=dict)
    misspelt: set[str] = field(default_factory=set)

    def where(self, key: str) -> str:
        """``"<file>: <key>"`` (just the file name for the whole file)."""
        return f"{self.file}: {key}" if key else self.file

    def add(self, key: str, message: str, fix: str = "") -> None:
        """Record a problem at key path ``key``."""
        self.problems.append(Problem(self.where(key), message, fix))

    def add_at(self, where: str, message: str, fix: str = "") -> None:
        """Record a problem at a full location ``where`` (e.g. a table's line and column)."""
        self.problems.append(Problem(where, message, fix))

    def table_name(self, table: Table) -> str:
        """The table's path relative to the experiment folder, as used in messages."""
        return Path(os.path.relpath(table.path, self.directory)).as_posix()

    def cell(self, table: Table, row: int, column: str) -> str:
        """``"<table>, line <n>, column '<name>'"`` for row ``row`` (0-based) of ``table``."""
        return f"{self.table_name(table)}, line {table.line_of(row)}, column '{column}'"

    def refer(self, key: str, target: str, value: str) -> None:
        """Record that ``value`` at ``key`` must be an id of ``target``."""
        self.references.append(Reference(self.where(key), target, value))

    def alias(self, key: str, spec: QuantitySpec | None) -> None:
        """Make ``key`` look up ``spec`` (a value inherited from elsewhere)."""
        if spec is not None and key != spec.key:
            self.aliases[key] = spec.key

    def default_quantity(self, key: str, dimension: str, default: TypeBDefault) -> QuantitySpec:
        """A quantity filled from ``default`` at ``key``, registered as defaulted."""
        spec = quantity_from_default(key, dimension, default)
        self.quantities[key] = spec
        self.defaulted.append(key)
        return spec


class Record:
    """The parsed values of one record, handed to :attr:`RecordSpec.build`."""

    def __init__(
        self,
        values: dict[str, Any],
        raw: Mapping[str, Any],
        key: str,
        name: str | None,
        ctx: Context,
    ):
        self.values = values
        self.raw = raw
        self.key = key
        self.name = name
        self.ctx = ctx

    def __getitem__(self, name: str) -> Any:
        return self.values[name]

    def given(self, name: str) -> bool:
        """Whether the file gives ``name`` (rather than a default filling it)."""
        return name in self.raw

    def sub(self, name: str) -> str:
        """The key path of ``name`` in this record."""
        return _join(self.key, name)

    def misspelt(self, name: str) -> bool:
        """Whether ``name`` is absent because an unknown key was reported as its typo."""
        return self.sub(name) in self.ctx.misspelt

    def add(self, name: str, message: str, fix: str = "") -> None:
        """Record a problem at key ``name`` of this record (``""``: the record itself).

        A problem at a key that is absent because it was misspelt (reported already, with a
        "did you mean") is not added: it would report the same typo a second time.
        """
        if name and self.misspelt(name):
            return
        self.ctx.add(self.sub(name) if name else self.key, message, fix)

    def inherit(self, name: str, spec: QuantitySpec | None) -> QuantitySpec | None:
        """The record's own quantity ``name``, or ``spec`` (aliased) when the file omits it."""
        if self.given(name):
            return self.values[name]  # type: ignore[no-any-return]
        self.ctx.alias(self.sub(name), spec)
        return spec


def _join(key: str, name: str) -> str:
    return f"{key}.{name}" if key else name


def closest(word: str, allowed: Iterator[str] | tuple[str, ...] | list[str]) -> str | None:
    """The closest of ``allowed`` to ``word`` (difflib ratio >= 0.6), or ``None``."""
    close = difflib.get_close_matches(str(word), list(allowed), n=1, cutoff=0.6)
    return close[0] if close else None


def suggest(word: str, allowed: Iterator[str] | tuple[str, ...] | list[str]) -> str:
    """``" Did you mean 'x'?"`` for the closest of ``allowed``, or ``""``."""
    close = closest(word, allowed)
    return f" Did you mean '{close}'?" if close else ""


def _describe(f: Field, key: str) -> str:
    if "[" in key:  # inside an array entry: an inline key, not a section header
        return f"'{f.name}'"
    if f.kind == "records":
        return f"[[{key}]]"
    if f.kind in ("record", "mapping"):
        return f"[{key}]"
    return f"'{f.name}'"


def _check_unknown(raw: Mapping[str, Any], spec: RecordSpec, key: str, ctx: Context) -> None:
    allowed = spec.names
    for name in raw:
        if name in allowed:
            continue
        place = (f"[{key}]" if "[" not in key else key) if key else "the top level"
        close = closest(name, allowed)
        hint = f" Did you mean '{close}'?" if close else ""
        ctx.add(
            _join(key, str(name)),
            f"unknown key '{name}' in {place}.{hint}",
            "allowed keys here: " + ", ".join(allowed) + ".",
        )
        if close is not None and close not in raw:
            ctx.misspelt.add(_join(key, close))


def parse_record(
    raw: object, spec: RecordSpec, *, key: str, ctx: Context, name: str | None = None
) -> Any:
    """Parse a table ``raw`` against ``spec``; returns what ``spec.build`` returns."""
    if not isinstance(raw, Mapping):
        ctx.add(
            key,
            f"{raw!r} is not a table of keys.",
            f"write [{key}] as a table (or an inline table {{ ... }}).",
        )
        return None
    _check_unknown(raw, spec, key, ctx)
    values = {f.name: parse_field(f, raw, key=key, ctx=ctx) for f in spec.fields}
    record = Record(values, raw, key, name, ctx)
    return spec.build(record) if spec.build is not None else values


def parse_field(f: Field, container: Mapping[str, Any], *, key: str, ctx: Context) -> Any:
    """Parse key ``f.name`` of ``container`` (the table at ``key``), or fill its default."""
    fkey = _join(key, f.name)
    if f.name in container:
        return parse_value(f, container[f.name], key=fkey, ctx=ctx)
    if f.required:
        section = f.kind in ("record", "mapping", "records") and "[" not in fkey
        what = "section" if section else "key"
        if fkey not in ctx.misspelt:  # else already reported as the misspelt key
            ctx.add(
                fkey,
                f"required {what} {_describe(f, fkey)} is missing.",
                f"add {f.example or f.name}" + (f" ({f.doc})." if f.doc else "."),
            )
        if f.kind == "mapping":
            ctx.ids[fkey] = ()
        return None
    if f.kind in _QUANTITY_KINDS and isinstance(f.default, TypeBDefault):
        assert f.dimension is not None  # a field spec invariant, not user input
        return ctx.default_quantity(fkey, f.dimension, f.default)
    if f.kind == "record" and f.when_absent == "empty":
        assert f.record is not None
        return parse_record({}, f.record, key=fkey, ctx=ctx)
    if f.kind == "mapping":
        ctx.ids[fkey] = ()
        return {}
    if f.kind in ("records", "list"):
        return ()
    return f.default


def _bounds_ok(f: Field, x: float) -> bool:
    if f.low is not None and (x <= f.low if f.low_open else x < f.low):
        return False
    return not (f.high is not None and x > f.high)


def _bounds_text(f: Field) -> str:
    parts = []
    if f.low is not None:
        parts.append(f"{'>' if f.low_open else '>='} {f.low:g}")
    if f.high is not None:
        parts.append(f"<= {f.high:g}")
    return " and ".join(parts)


def parse_value(f: Field, raw: object, *, key: str, ctx: Context) -> Any:
    """Parse one value ``raw`` of field ``f`` at key path ``key``."""
    kind = f.kind
    if kind == "str":
        if not isinstance(raw, str):
            ctx.add(key, f"{f.name} = {raw!r} is not a text.", f'write {f.name} = "..." in quotes.')
            return None
        if f.required and not raw.strip():
            ctx.add(key, f"{f.name} is empty.", f"write the {f.doc or f.name}.")
            return None
        return raw
    if kind == "bool":
        if not isinstance(raw, bool):
            ctx.add(
                key,
                f"{f.name} = {raw!r} is not true or false.",
                f"write {f.name} = true or {f.name} = false (no quotes).",
            )
            return None
        return raw
    if kind in ("int", "number"):
        ok_type = isinstance(raw, int) if kind == "int" else isinstance(raw, (int, float))
        if isinstance(raw, bool) or not ok_type or not math.isfinite(raw):  # type: ignore[arg-type]
            what = "a whole number" if kind == "int" else "a finite number"
            ctx.add(key, f"{f.name} = {raw!r} is not {what}.", f"write {f.name} as {what}.")
            return None
        if not _bounds_ok(f, float(raw)):  # type: ignore[arg-type]
            ctx.add(
                key,
                f"{f.name} = {raw!r} is out of range: it must be {_bounds_text(f)}.",
                f"give {f.name} {_bounds_text(f)}.",
            )
            return None
        return raw if kind == "int" else float(raw)  # type: ignore[arg-type]
    if kind == "enum":
        if not isinstance(raw, str) or raw not in f.choices:
            hint = suggest(raw, f.choices) if isinstance(raw, str) else ""
            ctx.add(
                key,
                f"{f.name} = {raw!r} is not an allowed value.{hint}",
                "use one of " + ", ".join(repr(c) for c in f.choices) + ".",
            )
            return None
        return raw
    if kind == "date":
        return _parse_date(f, raw, key, ctx)
    if kind in _QUANTITY_KINDS:
        assert f.dimension is not None
        spec = parse_quantity(
            raw,
            key=key,
            dimension=f.dimension,
            mode=kind,
            report=ctx.add,
            glassware_ok=f.glassware_ok,
            low=f.low,
            low_open=f.low_open,
            high=f.high,
        )
        if spec is not None:
            ctx.quantities[key] = spec
            if spec.glassware is not None:
                ctx.refer(f"{key}.glassware", "glassware", spec.glassware)
        return spec
    if kind == "ref":
        if not isinstance(raw, str) or not raw:
            ctx.add(
                key,
                f"{f.name or 'id'} = {raw!r} is not an id.",
                f"write the id in quotes, as defined under [{f.target}.<id>].",
            )
            return None
        assert f.target is not None
        ctx.refer(key, f.target, raw)
        return raw
    if kind == "list":
        return _parse_list(f, raw, key, ctx)
    if kind == "path":
        return _parse_path(f, raw, key, ctx)
    if kind == "record":
        assert f.record is not None
        return parse_record(raw, f.record, key=key, ctx=ctx)
    if kind == "records":
        return _parse_records(f, raw, key, ctx)
    return _parse_mapping(f, raw, key, ctx)


def _parse_date(f: Field, raw: object, key: str, ctx: Context) -> _dt.date | None:
    if isinstance(raw, _dt.datetime):
        return raw.date()
    if isinstance(raw, _dt.date):
        return raw
    if isinstance(raw, str) and _DATE.match(raw.strip()):
        try:
            return _dt.date.fromisoformat(raw.strip())
        except ValueError:
            pass
    ctx.add(
        key,
        f"{f.name} = {raw!r} is not a date.",
        f'write {f.name} = 2024-03-05 (a TOML date) or "2024-03-05" (YYYY-MM-DD).',
    )
    return None


def _parse_list(f: Field, raw: object, key: str, ctx: Context) -> tuple[Any, ...] | None:
    if not isinstance(raw, list):
        ctx.add(key, f"{f.name} = {raw!r} is not a list.", f"write {f.name} = [ ... ].")
        return None
    if len(raw) < f.min_items or (f.max_items is not None and len(raw) > f.max_items):
        want = (
            f"{f.min_items} to {f.max_items}"
            if f.max_items is not None
            else f"at least {f.min_items}"
        )
        ctx.add(
            key,
            f"{f.name} has {len(raw)} item(s); it needs {want}.",
            f"give {want} item(s) in {f.name}.",
        )
        return None
    assert f.item is not None
    return tuple(parse_value(f.item, x, key=f"{key}[{i}]", ctx=ctx) for i, x in enumerate(raw))


def _parse_path(f: Field, raw: object, key: str, ctx: Context) -> Table | None:
    if not isinstance(raw, str) or not raw.strip():
        ctx.add(
            key,
            f"{f.name} = {raw!r} is not a file path.",
            f'write {f.name} = "runs/r1.csv" (relative to the experiment file).',
        )
        return None
    given = Path(raw.strip())
    if given.is_absolute():
        ctx.add(
            key,
            f"{f.name} = {raw!r} is an absolute path.",
            "give the path relative to the experiment file's folder, so the study folder"
            " can be moved and archived as a whole.",
        )
        return None
    full = ctx.directory / given
    rel = Path(os.path.relpath(full, ctx.directory)).as_posix()
    assert f.table is not None
    cache = (rel, f.table)
    if cache in ctx.tables:
        return ctx.tables[cache]
    try:
        table: Table | None = read_table(full, f.table, where=ctx.where(key), name=rel)
    except ExperimentError as exc:
        ctx.problems.extend(exc.problems)
        table = None
    else:
        ctx.files[rel] = table.sha256
    ctx.tables[cache] = table
    return table


def _parse_records(f: Field, raw: object, key: str, ctx: Context) -> tuple[Any, ...] | None:
    if isinstance(raw, Mapping):
        ctx.add(
            key,
            f"{key} is a single table; it must be an array of tables.",
            f"write each entry under its own [[{key}]] header.",
        )
        return None
    if not isinstance(raw, list) or not all(isinstance(x, Mapping) for x in raw):
        ctx.add(
            key,
            f"{key} = {raw!r} is not an array of tables.",
            f"write each entry under its own [[{key}]] header.",
        )
        return None
    if len(raw) < f.min_items:
        ctx.add(
            key,
            f"{key} has {len(raw)} entries; at least {f.min_items} are needed.",
            f"add a [[{key}]] entry.",
        )
    assert f.record is not None
    spec = f.record
    out = []
    seen: set[str] = set()
    for i, item in enumerate(raw):
        label, name = str(i), None
        if spec.name_field is not None:
            nm = item.get(spec.name_field)
            if isinstance(nm, str) and _ID.match(nm) and nm not in seen:
                label, name = nm, nm
                seen.add(nm)
            elif isinstance(nm, str) and nm in seen:
                ctx.add(
                    f"{key}[{i}].{spec.name_field}",
                    f"name '{nm}' is used by two entries of [[{key}]].",
                    "give every entry its own name.",
                )
            elif nm is not None:
                ctx.add(
                    f"{key}[{i}].{spec.name_field}",
                    f"name {nm!r} is not a plain name.",
                    "use letters, digits, '_' and '-' only (e.g. \"r1\").",
                )
        out.append(parse_record(item, spec, key=f"{key}[{label}]", ctx=ctx, name=name))
    return tuple(out)


def _parse_mapping(f: Field, raw: object, key: str, ctx: Context) -> dict[str, Any]:
    ctx.ids[key] = ()
    if not isinstance(raw, Mapping):
        ctx.add(
            key,
            f"{key} = {raw!r} is not a table of ids.",
            f"write one [{key}.<id>] table per item.",
        )
        return {}
    assert f.record is not None
    out: dict[str, Any] = {}
    ids = []
    for ident, item in raw.items():
        if not _ID.match(ident):
            ctx.add(
                f"{key}.{ident}",
                f"id '{ident}' is not a plain name.",
                "use letters, digits, '_' and '-' only (key paths use '.').",
            )
            continue
        ids.append(ident)
        value = parse_record(item, f.record, key=f"{key}.{ident}", ctx=ctx, name=ident)
        if value is not None:  # a broken record is reported; its id still counts as defined
            out[ident] = value
    ctx.ids[key] = tuple(ids)
    return out


_REGISTRY: dict[str, Field] = {}


def register_section(section: Field) -> Field:
    """Add a top-level section; sections are parsed in registration order."""
    if section.name in _REGISTRY:
        raise ValueError(f"section {section.name!r} is registered twice")
    _REGISTRY[section.name] = section
    return section


def registered_sections() -> tuple[Field, ...]:
    """The registered sections, in parsing order."""
    return tuple(_REGISTRY.values())


def iter_fields(
    fields: tuple[Field, ...] | None = None, prefix: str = ""
) -> Iterator[tuple[str, Field]]:
    """Every (key path pattern, field) below ``fields`` (default: all sections)."""
    for f in registered_sections() if fields is None else fields:
        path = _join(prefix, f.name)
        yield path, f
        if f.record is not None:
            sub = {"mapping": f"{path}.<id>", "records": f"{path}[]"}.get(f.kind, path)
            yield from iter_fields(f.record.fields, sub)
