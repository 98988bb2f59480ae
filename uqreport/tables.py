"""CSV tables of readings and calibrations: reading, checking and converting to internal units.

A table is a CSV file with a header row of column names.  A column with a dimension carries
its unit in square brackets after the name (``time [s]``); ``#`` starts a comment line; the
delimiter is a comma or a semicolon (taken from the header).  Numbers use a decimal point.
Every problem of a file is collected and raised at once as an
:class:`~uqreport.errors.ExperimentError`; a cell problem names the file, the file's line
number (comment and blank lines are counted, as an editor shows them) and the column.

Four kinds of table exist (:data:`TABLE_SCHEMAS`): ``batch`` (absorbance against time of one
batch run), ``pump`` (a pump calibration: volume collected in a timed interval at a setting),
``tank`` (absorbance against time in a stirred tank, or in each of two tanks in series) and
``tracer`` (absorbance against time of a wash-out).
"""

from __future__ import annotations

import csv
import difflib
import hashlib
import itertools
import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import ExperimentError, InputError, Problem
from .units import DIMENSIONS, parse_unit

__all__ = ["TABLE_SCHEMAS", "Column", "Table", "TableSchema", "read_table"]


@dataclass(frozen=True)
class Column:
    """One column a table kind may have.

    Attributes
    ----------
    name:
        The column name, as written in the header before any ``[unit]``.
    kind:
        ``"number"``, ``"integer"`` or ``"text"``.
    dimension:
        The :mod:`uqreport.units` dimension of a number column (``None`` for text).
    required:
        Whether the column must be present (and, for numbers, filled on every row).
    unit_optional:
        Whether a number column may omit its ``[unit]`` (absorbance, setting); the unit is
        then ``"1"``.
    low, high:
        Bounds of the values in internal units (``None`` when unbounded).
    low_open:
        ``True`` when ``low`` itself is not allowed (value must be > low).
    choices:
        Allowed values of a text or integer column (empty: any).
    fill:
        The value of every row when an optional column is absent.
    doc:
        What the column holds, for messages and documentation.
    """

    name: str
    kind: str
    dimension: str | None = None
    required: bool = False
    unit_optional: bool = False
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    choices: tuple[object, ...] = ()
    fill: object = ""
    doc: str = ""


@dataclass(frozen=True)
class TableSchema:
    """The columns and ordering rule of one kind of table.

    Attributes
    ----------
    kind:
        ``"batch"``, ``"pump"``, ``"tank"`` or ``"tracer"``.
    columns:
        The columns the kind may have, in documentation order.
    increasing:
        A column whose values must increase strictly down the table (``None``: no rule).
    group_by:
        A column within whose groups ``increasing`` applies (``"tank"`` for tank tables).
    doc:
        What a table of this kind holds.
    """

    kind: str
    columns: tuple[Column, ...]
    increasing: str | None = None
    group_by: str | None = None
    doc: str = ""

    def column(self, name: str) -> Column:
        """The column called ``name``."""
        for col in self.columns:
            if col.name == name:
                return col
        raise KeyError(name)


_ABS_LOW, _ABS_HIGH = -0.5, 5.0


def _time(required: bool = True, *, positive: bool = False, doc: str = "") -> Column:
    return Column("time", "number", "time", required=required, low=0.0, low_open=positive, doc=doc)


def _absorbance() -> Column:
    return Column(
        "absorbance",
        "number",
        "absorbance",
        required=True,
        unit_optional=True,
        low=_ABS_LOW,
        high=_ABS_HIGH,
        doc="absorbance reading (blank-corrected by the instrument's zero)",
    )


_NOTE = Column("note", "text", doc="free text")

TABLE_SCHEMAS: dict[str, TableSchema] = {
    "batch": TableSchema(
        "batch",
        (
            _time(doc="time of the reading since mixing"),
            _absorbance(),
            Column("cuvette", "text", doc="cuvette id of the reading (empty: the run's cuvette)"),
            Column(
                "flag",
                "text",
                choices=("", "exclude", "outlier"),
                doc="'' (use), 'exclude' (not fitted) or 'outlier' (not fitted, reported)",
            ),
            _NOTE,
        ),
        increasing="time",
        doc="absorbance against time of one batch run",
    ),
    "pump": TableSchema(
        "pump",
        (
            Column(
                "setting",
                "number",
                "dimensionless",
                required=True,
                unit_optional=True,
                low=0.0,
                doc="pump dial or speed setting",
            ),
            Column(
                "volume",
                "number",
                "volume",
                required=True,
                low=0.0,
                low_open=True,
                doc="volume collected",
            ),
            _time(positive=True, doc="length of the collection interval"),
            _NOTE,
        ),
        doc="pump calibration: volume collected in a timed interval at each setting",
    ),
    "tank": TableSchema(
        "tank",
        (
            _time(doc="time since the feeds were started"),
            _absorbance(),
            Column(
                "tank",
                "integer",
                choices=(1, 2),
                fill=1,
                doc="1 or 2: which tank of the train was sampled",
            ),
            _NOTE,
        ),
        increasing="time",
        group_by="tank",
        doc="absorbance against time in one stirred tank or two in series",
    ),
    "tracer": TableSchema(
        "tracer",
        (_time(doc="time since the wash-out started"), _absorbance(), _NOTE),
        increasing="time",
        doc="absorbance against time of a tracer wash-out",
    ),
}


@dataclass(frozen=True)
class Table:
    """A checked table, with its numbers converted to internal units.

    Attributes
    ----------
    path:
        The file the table was read from.
    kind:
        ``"batch"``, ``"pump"``, ``"tank"`` or ``"tracer"``.
    frame:
        One row per data line; columns named without units; numbers in internal units
        (time in s, volume in mL, absorbance and setting unit-free); text columns as ``str``
        (``""`` when empty).  Every column of the kind is present: an optional column the
        file does not have is filled (text ``""``, tank ``1``).
    line_numbers:
        The file line number of each row (comment and blank lines counted).
    units:
        For each column the file has, the unit as written (``""`` when none was written).
    sha256:
        SHA-256 of the file's bytes, hex.
    """

    path: Path
    kind: str
    frame: pd.DataFrame
    line_numbers: np.ndarray
    units: dict[str, str]
    sha256: str

    def has_column(self, name: str) -> bool:
        """Whether the file itself has the column ``name`` (not just the filled default)."""
        return name in self.units

    def line_of(self, row: int) -> int:
        """The file line number of row ``row`` (0-based position in :attr:`frame`)."""
        return int(self.line_numbers[row])

    def __len__(self) -> int:
        return len(self.frame)


_HEADER_CELL = re.compile(r"^(?P<name>[^\[\]]*?)\s*(?:\[(?P<unit>[^\[\]]*)\])?\s*$")
_DECIMAL_COMMA = re.compile(r"^[+-]?\d*,\d+(?:[eE][+-]?\d+)?$")
_ROUND_BRACKETS = re.compile(r"^(?P<name>.+?)\s*\((?P<unit>[^()]*)\)$")


class _Collector:
    def __init__(self, name: str):
        self.name = name
        self.problems: list[Problem] = []
        # problems of one kind that a spreadsheet repeats on every row (a decimal comma in a
        # whole column, a trailing delimiter on every row): reported once, with the count
        self._repeats: dict[tuple[str, ...], tuple[int, str, list[int]]] = {}

    def repeated(
        self, key: tuple[str, ...], line: int, where: str, message: str, fix: str, noun: str
    ) -> None:
        """A problem of kind ``key``: the first is kept, later ones only counted."""
        if key in self._repeats:
            self._repeats[key][2].append(line)
            return
        self._repeats[key] = (len(self.problems), noun, [])
        self.problems.append(Problem(where, message, fix))

    def finish(self) -> None:
        """Fold the counts of repeated problems into their first message."""
        for index, noun, lines in self._repeats.values():
            if not lines:
                continue
            p = self.problems[index]
            a, b = lines[0], lines[-1]
            span = (
                "line"
                if a == b
                else f"lines {a} to"
                if b - a + 1 == len(lines)
                else f"between lines {a} and"
            )
            span = f"{span} {b}" if a != b else f"line {a}"
            self.problems[index] = Problem(
                p.where, f"{p.message} The same holds for {len(lines)} more {noun} ({span}).", p.fix
            )
        self._repeats.clear()

    def file(self, message: str, fix: str = "", *, line: int | None = None) -> None:
        where = self.name if line is None else f"{self.name}, line {line}"
        self.problems.append(Problem(where, message, fix))

    def cell(self, line: int, column: str, message: str, fix: str = "") -> None:
        self.problems.append(Problem(f"{self.name}, line {line}, column '{column}'", message, fix))


def _split_fix(text: str) -> tuple[str, str]:
    message, _, fix = text.partition(" Fix: ")
    return message.strip(), fix.strip()


def _describe_bounds(col: Column) -> str:
    unit = ""
    if col.dimension not in (None, "absorbance", "dimensionless"):
        unit = " " + DIMENSIONS[col.dimension]
    parts = []
    if col.low is not None:
        parts.append(f"{'>' if col.low_open else '>='} {col.low:g}{unit}")
    if col.high is not None:
        parts.append(f"<= {col.high:g}{unit}")
    return " and ".join(parts)


def _suggest_name(word: str, names: list[str]) -> str:
    close = difflib.get_close_matches(word, names, n=1, cutoff=0.6)
    return f" Did you mean '{close[0]}'?" if close else ""


def _read_text(path: Path, out: _Collector, where: str | None) -> tuple[str, bytes] | None:
    missing_where = where or out.name
    if not path.exists():
        folder = path.parent
        others = sorted(p.name for p in folder.glob("*.csv")) if folder.is_dir() else []
        hint = _suggest_name(path.name, others)
        out.problems.append(
            Problem(
                missing_where,
                f"table file '{out.name}' does not exist (looked in {folder}).{hint}",
                "check the file name; the path is relative to the experiment file's folder.",
            )
        )
        return None
    if not path.is_file():
        out.problems.append(
            Problem(missing_where, f"'{path}' is not a file.", "give the path of a CSV file.")
        )
        return None
    try:
        data = path.read_bytes()
    except OSError as exc:
        out.problems.append(
            Problem(
                missing_where,
                f"table file '{path}' cannot be read ({exc.strerror or exc}).",
                "check the file's permissions.",
            )
        )
        return None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        byte = data[exc.start : exc.start + 1].hex()
        out.file(
            f"the file is not UTF-8 text (byte 0x{byte} cannot be decoded).",
            "save the table as UTF-8 (in a spreadsheet: 'CSV UTF-8').",
            line=line,
        )
        return None
    return text, data


def _parse_header(
    cells: list[str], schema: TableSchema, line: int, out: _Collector
) -> tuple[list[str | None], dict[str, str]]:
    names: list[str | None] = []
    units: dict[str, str] = {}
    suggested: set[str] = set()
    allowed = [c.name for c in schema.columns]
    for number, raw in enumerate(cells, start=1):
        if not raw.strip():
            out.file(
                f"column {number} of the header has no name.",
                "name the column, or remove the extra delimiter.",
                line=line,
            )
            names.append(None)
            continue
        m = _HEADER_CELL.match(raw.strip())
        name = (m.group("name") if m else raw).strip().lower()
        unit = (m.group("unit") or "").strip() if m and m.group("unit") is not None else ""
        has_brackets = bool(m and m.group("unit") is not None)
        if name not in allowed:
            rb = _ROUND_BRACKETS.match(name)
            if rb and rb.group("name").strip() in allowed:  # "time (min)": a unit in ( )
                base = rb.group("name").strip()
                close = [base]
                hint = (
                    f" Did you mean '{base} [{rb.group('unit').strip()}]'? A unit goes in"
                    " square brackets."
                )
            else:
                close = difflib.get_close_matches(name, allowed, n=1, cutoff=0.6)
                hint = f" Did you mean '{close[0]}'?" if close else ""
            suggested.update(close)
            out.file(
                f"unknown column '{name}' in the header of a {schema.kind} table.{hint}",
                "use the column names "
                + ", ".join(repr(a) for a in allowed)
                + "; write a unit in square brackets after the name, e.g. 'time [s]'.",
                line=line,
            )
            names.append(None)
            continue
        if name in units:
            out.file(
                f"column '{name}' appears twice in the header.",
                "keep one column of each name.",
                line=line,
            )
            names.append(None)
            continue
        col = schema.column(name)
        if col.dimension is None or col.kind == "integer":
            if unit:
                out.file(
                    f"column '{name}' takes no unit, but '[{unit}]' is written.",
                    f"write the header as '{name}'.",
                    line=line,
                )
        elif not unit:
            if not col.unit_optional:
                shown = "empty brackets" if has_brackets else "no unit"
                out.file(
                    f"column '{name}' has {shown}; a {col.dimension} needs one.",
                    f"write the unit in square brackets, e.g. '{name} ["
                    f"{'s' if col.dimension == 'time' else 'mL'}]'.",
                    line=line,
                )
        else:
            try:
                parse_unit(unit, col.dimension, where=f"column '{name}'")
            except InputError as exc:
                msg, fix = _split_fix(str(exc))
                out.file(msg, fix, line=line)
        names.append(name)
        units[name] = unit
    for col in schema.columns:
        if col.required and col.name not in units and col.name not in suggested:
            out.file(
                f"required column '{col.name}' is missing from the header"
                f" (a {schema.kind} table needs "
                + ", ".join(repr(c.name) for c in schema.columns if c.required)
                + ").",
                f"add the column '{col.name}' ({col.doc}).",
                line=line,
            )
    return names, units


def _parse_number(text: str, col: Column, unit: str, line: int, out: _Collector) -> float | None:
    cell = text.strip()
    shown = f"'{cell}'"
    if cell == "":
        need = (
            "is required on every row"
            if col.required
            else "is needed on every row once the column is there"
        )
        out.cell(
            line,
            col.name,
            f"the cell is empty; the {col.name} {need}.",
            "give the number, or delete the row.",
        )
        return None
    if _DECIMAL_COMMA.match(cell):
        out.repeated(
            ("decimal comma", col.name),
            line,
            f"{out.name}, line {line}, column '{col.name}'",
            f"{shown} is written with a decimal comma.",
            f"write a decimal point: '{cell.replace(',', '.')}' (a spreadsheet: save"
            " with '.' as the decimal separator).",
            "cells of this column",
        )
        return None
    try:
        value = float(cell)
    except ValueError:
        out.cell(
            line,
            col.name,
            f"{shown} is not a number.",
            "write a plain number with a decimal point (units belong in the header).",
        )
        return None
    if not math.isfinite(value):
        out.cell(
            line,
            col.name,
            f"{shown} is not a finite number (NaN or infinity).",
            "give the measured number, or delete the row.",
        )
        return None
    if col.kind == "integer":
        if value != int(value):
            out.cell(
                line,
                col.name,
                f"{shown} is not a whole number.",
                f"write one of {', '.join(str(c) for c in col.choices)}.",
            )
            return None
        if col.choices and int(value) not in col.choices:
            out.cell(
                line,
                col.name,
                f"{shown} is not one of {', '.join(str(c) for c in col.choices)}.",
                f"write one of {', '.join(str(c) for c in col.choices)}.",
            )
            return None
        return float(int(value))
    if col.dimension is not None:
        try:
            u = parse_unit(unit or "1", col.dimension)
        except InputError:
            return None  # already reported on the header
        value = value * u.factor + u.offset
    bad_low = col.low is not None and (value <= col.low if col.low_open else value < col.low)
    bad_high = col.high is not None and value > col.high
    if bad_low or bad_high:
        unit_text = f" {unit}" if unit else ""
        out.cell(
            line,
            col.name,
            f"{cell}{unit_text} is out of range: {col.name} must be {_describe_bounds(col)}.",
            f"check the value ({col.doc}).",
        )
        return None
    return value


def _check_order(
    frame: pd.DataFrame,
    lines: np.ndarray,
    schema: TableSchema,
    raw_cells: dict[tuple[int, str], str],
    units: dict[str, str],
    out: _Collector,
) -> None:
    col = schema.increasing
    if col is None or col not in frame:
        return
    groups: dict[object, list[int]] = {}
    gb = schema.group_by
    values = frame[col].to_numpy(dtype=float)
    keys = frame[gb].to_numpy(dtype=float) if gb is not None and gb in units else None
    for i in range(len(values)):
        if not math.isfinite(values[i]) or (keys is not None and not math.isfinite(keys[i])):
            continue
        groups.setdefault(None if keys is None else int(keys[i]), []).append(i)
    unit = units.get(col, "")
    for key, rows in groups.items():
        within = f" within {gb} {key}" if key is not None else ""
        for prev, cur in itertools.pairwise(rows):
            a, b = values[prev], values[cur]
            if b > a:
                continue
            line, prev_line = int(lines[cur]), int(lines[prev])
            text = f"{raw_cells[(cur, col)]} {unit}".strip()
            prev_text = f"{raw_cells[(prev, col)]} {unit}".strip()
            if b == a:
                out.cell(
                    line,
                    col,
                    f"duplicate {col} {text}{within}: line {prev_line} has the same value.",
                    "each reading needs its own time: correct the typo or delete the repeated row.",
                )
            else:
                out.cell(
                    line,
                    col,
                    f"{col} {text} is earlier than {prev_text} on line"
                    f" {prev_line}{within}; {col} must increase strictly down the table.",
                    "sort the rows by time, or correct the typo.",
                )


def read_table(
    path: str | Path, kind: str, *, where: str | None = None, name: str | None = None
) -> Table:
    """Read and check a CSV table of ``kind`` (``"batch"``, ``"pump"``, ``"tank"``, ``"tracer"``).

    ``where`` names the place that refers to the file (e.g. ``"experiment.toml:
    batch.runs[r1].table"``) and is used when the file is missing; ``name`` is how the file
    is named in messages (default: its file name).  Raises
    :class:`~uqreport.errors.ExperimentError` listing every problem of the file.
    """
    if kind not in TABLE_SCHEMAS:
        raise InputError(
            f"unknown table kind '{kind}'. Fix: use one of"
            f" {', '.join(repr(k) for k in TABLE_SCHEMAS)}."
        )
    schema = TABLE_SCHEMAS[kind]
    path = Path(path)
    out = _Collector(name or path.name)
    read = _read_text(path, out, where)
    if read is None:
        raise ExperimentError(out.problems)
    text, data = read
    lines = text.splitlines()
    content = [
        (i + 1, ln) for i, ln in enumerate(lines) if ln.strip() and not ln.lstrip().startswith("#")
    ]
    if not content:
        out.file(
            "the file has no header row and no data (it is empty or only comments).",
            "write a header row, e.g. 'time [s],absorbance', then one row per reading.",
        )
        raise ExperimentError(out.problems)
    header_line, header_text = content[0]
    delimiter = ";" if header_text.count(";") > header_text.count(",") else ","
    if "\t" in header_text and "," not in header_text and ";" not in header_text:
        out.file(
            "the header is separated by tabs; a table is read with a comma or a semicolon"
            " between the columns.",
            "save the table as CSV (comma-separated), or replace the tabs by commas.",
            line=header_line,
        )
        raise ExperimentError(out.problems)
    try:
        header = next(csv.reader([header_text], delimiter=delimiter, strict=True))
    except csv.Error as exc:
        out.file(
            f"the header row cannot be read as CSV ({exc}).",
            "check the quotes in the header.",
            line=header_line,
        )
        raise ExperimentError(out.problems) from None
    names, units = _parse_header(header, schema, header_line, out)
    rows = content[1:]
    if not rows:
        out.file(
            "the table is empty: it has a header but no data rows.",
            "add the readings below the header, one row per line.",
            line=header_line,
        )
    values: dict[str, list[object]] = {c.name: [] for c in schema.columns}
    raw_cells: dict[tuple[int, str], str] = {}
    line_numbers: list[int] = []
    for line, row_text in rows:
        try:
            cells = next(csv.reader([row_text], delimiter=delimiter, strict=True))
        except csv.Error as exc:
            out.file(
                f"the row cannot be read as CSV ({exc}).",
                "check the quotes; a quoted text must end on the same line.",
                line=line,
            )
            continue
        if len(cells) > len(names):
            extra = cells[len(names) :]
            decimal_point = re.search(r"\d\.\d", row_text)
            if delimiter == "," and re.search(r"\d,\d", row_text) and not decimal_point:
                out.file(
                    f"the row has {len(cells)} fields but the header has {len(names)}"
                    f" columns; '{row_text.strip()}' looks like numbers written with a"
                    " decimal comma.",
                    "write decimal points (0.812, not 0,812), or use ';' as the"
                    " delimiter in every row.",
                    line=line,
                )
            elif not any(c.strip() for c in extra):
                out.repeated(
                    ("trailing", str(len(extra))),
                    line,
                    f"{out.name}, line {line}",
                    f"the row has {len(cells)} fields but the header has"
                    f" {len(names)} columns; the last {len(extra)} field(s) are empty"
                    f" ('{row_text.strip()}' ends with '{delimiter}').",
                    f"remove the trailing '{delimiter}' from the row (a spreadsheet"
                    " writes them for formatted empty cells), or name the column in"
                    " the header.",
                    "rows",
                )
            else:
                out.file(
                    f"the row has {len(cells)} fields but the header has {len(names)}"
                    f" columns ('{row_text.strip()}').",
                    "remove the extra fields, or quote a text that contains the"
                    f" delimiter '{delimiter}'.",
                    line=line,
                )
            continue
        cells = cells + [""] * (len(names) - len(cells))
        index = len(line_numbers)
        line_numbers.append(line)
        given = {nm: cell for nm, cell in zip(names, cells, strict=True) if nm is not None}
        for col in schema.columns:
            if col.name not in units:
                values[col.name].append(math.nan if col.kind == "number" else col.fill)
                continue
            cell = given[col.name]
            raw_cells[(index, col.name)] = cell.strip()
            if col.kind == "text":
                txt = cell.strip()
                if col.choices and txt not in col.choices:
                    allowed = ", ".join(repr(c) for c in col.choices)
                    out.cell(
                        line,
                        col.name,
                        f"'{txt}' is not an allowed {col.name}.",
                        f"use one of {allowed} ('' is an empty cell).",
                    )
                values[col.name].append(txt)
            else:
                num = _parse_number(cell, col, units[col.name], line, out)
                values[col.name].append(math.nan if num is None else num)
    frame = pd.DataFrame({c.name: values[c.name] for c in schema.columns})
    for col in schema.columns:
        if col.kind == "text":
            frame[col.name] = frame[col.name].astype(str)
        else:
            frame[col.name] = frame[col.name].astype(float)
    lines_arr = np.asarray(line_numbers, dtype=np.int64)
    _check_order(frame, lines_arr, schema, raw_cells, units, out)
    out.finish()
    if out.problems:
        raise ExperimentError(out.problems)
    for col in schema.columns:
        if col.kind == "integer":
            frame[col.name] = frame[col.name].astype(np.int64)
    return Table(
        path=path,
        kind=kind,
        frame=frame,
        line_numbers=lines_arr,
        units=units,
        sha256=hashlib.sha256(data).hexdigest(),
    )
