"""Tests of CSV table reading and checking (uqreport.tables).

External references: SHA-256 digests are checked against Python's hashlib (FIPS 180-4
implementation) and the unit conversions against the SI Brochure, 9th edition, Table 8
(1 min = 60 s).  Messages are pinned: they are the user's interface.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from uqreport.errors import ExperimentError, InputError
from uqreport.tables import TABLE_SCHEMAS, read_table

GOOD = Path(__file__).resolve().parent / "data" / "good"


def write(tmp_path: Path, text: str, name: str = "t.csv", *, raw: bytes | None = None) -> Path:
    path = tmp_path / name
    if raw is not None:
        path.write_bytes(raw)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def problems_of(path: Path, kind: str = "batch"):
    with pytest.raises(ExperimentError) as info:
        read_table(path, kind)
    return info.value.problems


# -- good tables ------------------------------------------------------------------------------
def test_good_batch_table_with_comment_lines():
    table = read_table(GOOD / "r2.csv", "batch")
    assert table.kind == "batch"
    assert len(table) == 20
    # two comment lines, header on line 3, first reading on line 4
    assert table.line_numbers[0] == 4
    assert table.line_numbers[-1] == 23
    assert list(table.frame.columns) == ["time", "absorbance", "cuvette", "flag", "note"]
    assert table.frame["time"].dtype == np.float64
    assert table.units == {"time": "s", "absorbance": "", "flag": "", "note": ""}
    assert not table.has_column("cuvette")
    assert (table.frame["cuvette"] == "").all()
    outlier = table.frame[table.frame["flag"] == "outlier"]
    assert outlier["time"].tolist() == [240.0]
    assert outlier["note"].tolist() == ["bubble in the light path"]


def test_sha256_is_that_of_the_file_bytes():
    path = GOOD / "r1.csv"
    assert read_table(path, "batch").sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_semicolon_delimiter_is_detected():
    table = read_table(GOOD / "t1.csv", "tracer")
    assert len(table) == 41
    assert table.frame["absorbance"].iloc[0] == pytest.approx(0.8, abs=0.01)


def test_units_are_converted_to_internal_units(tmp_path):
    path = write(tmp_path, "time [min],absorbance [AU]\n0.5,0.70\n1.0,0.60\n1.5,0.52\n")
    table = read_table(path, "batch")
    # SI Brochure Table 8: 1 min = 60 s
    assert table.frame["time"].tolist() == [30.0, 60.0, 90.0]
    assert table.units["time"] == "min"
    assert table.units["absorbance"] == "AU"


def test_pump_table_with_percent_settings(tmp_path):
    path = write(tmp_path, "setting [%],volume [L],time [min]\n20,0.012,1\n40,0.024,1\n")
    frame = read_table(path, "pump").frame
    assert frame["setting"].tolist() == [0.2, 0.4]
    assert frame["volume"].tolist() == [12.0, 24.0]
    assert frame["time"].tolist() == [60.0, 60.0]


def test_tank_table_without_tank_column_is_tank_one(tmp_path):
    table = read_table(write(tmp_path, "time [s],absorbance\n0,0.0\n60,0.1\n"), "tank")
    assert table.frame["tank"].tolist() == [1, 1]
    assert table.frame["tank"].dtype == np.int64
    assert not table.has_column("tank")


def test_times_increase_within_each_tank(tmp_path):
    text = "time [s],absorbance,tank\n0,0.0,1\n30,0.0,2\n60,0.1,1\n90,0.05,2\n"
    table = read_table(write(tmp_path, text), "tank")
    assert table.frame["tank"].tolist() == [1, 2, 1, 2]


def test_bom_blank_lines_and_short_rows(tmp_path):
    text = "\ufefftime [s],absorbance,note\n\n30,0.70\n# a comment\n60,0.60,second\n"
    table = read_table(write(tmp_path, text), "batch")
    assert table.line_numbers.tolist() == [3, 5]
    assert table.frame["note"].tolist() == ["", "second"]


def test_header_names_are_case_insensitive(tmp_path):
    table = read_table(write(tmp_path, "Time [s],Absorbance\n30,0.7\n"), "batch")
    assert table.frame["time"].tolist() == [30.0]


# -- file-level problems ----------------------------------------------------------------------
def test_missing_file_names_the_referring_key(tmp_path):
    write(tmp_path, "time [s],absorbance\n30,0.7\n", name="run1.csv")
    with pytest.raises(ExperimentError, match="does not exist") as info:
        read_table(tmp_path / "run_1.csv", "batch", where="experiment.toml: batch.runs[r1].table")
    (p,) = info.value.problems
    assert p.where == "experiment.toml: batch.runs[r1].table"
    assert "table file 'run_1.csv' does not exist" in p.message
    assert "Did you mean 'run1.csv'?" in p.message
    assert p.fix


def test_directory_is_not_a_table(tmp_path):
    (p,) = problems_of(tmp_path)
    assert "is not a file" in p.message


def test_not_utf8_names_the_line(tmp_path):
    raw = "time [s],absorbance,note\n30,0.7,\n60,0.6,22 \u00b0C\n".encode("latin-1")
    (p,) = problems_of(write(tmp_path, "", raw=raw))
    assert p.where == "t.csv, line 3"
    assert "not UTF-8" in p.message and "0xb0" in p.message
    assert "UTF-8" in p.fix


def test_file_of_comments_only(tmp_path):
    (p,) = problems_of(write(tmp_path, "# nothing yet\n\n"))
    assert p.where == "t.csv"
    assert "no header row" in p.message


def test_header_without_rows_is_an_empty_table(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],absorbance\n"))
    assert p.where == "t.csv, line 1"
    assert "the table is empty" in p.message


def test_unknown_kind_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="unknown table kind 'kinetics'"):
        read_table(write(tmp_path, "time [s]\n1\n"), "kinetics")


# -- header problems --------------------------------------------------------------------------
def test_missing_required_column(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],note\n30,a\n"))
    assert p.where == "t.csv, line 1"
    assert "required column 'absorbance' is missing" in p.message
    assert "add the column 'absorbance'" in p.fix


def test_unknown_column_suggests_the_closest(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],absorbence\n30,0.7\n"))
    assert "unknown column 'absorbence'" in p.message and "Did you mean 'absorbance'?" in p.message
    assert "'time', 'absorbance', 'cuvette', 'flag', 'note'" in p.fix


def test_time_column_needs_a_unit(tmp_path):
    probs = problems_of(write(tmp_path, "time,absorbance\n30,0.7\n"))
    assert [p.message for p in probs] == ["column 'time' has no unit; a time needs one."]
    assert "'time [s]'" in probs[0].fix


def test_wrong_unit_dimension_in_header(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [mL],absorbance\n30,0.7\n"))
    assert "unknown unit 'mL' for a time" in p.message
    assert "'mL' is a unit of volume" in p.message
    assert "'s'" in p.fix


def test_unit_on_a_text_column(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],absorbance,note [s]\n30,0.7,x\n"))
    assert p.message == "column 'note' takes no unit, but '[s]' is written."


def test_duplicate_column(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],absorbance,absorbance\n30,0.7,0.7\n"))
    assert p.message == "column 'absorbance' appears twice in the header."


# -- cell problems ----------------------------------------------------------------------------
def test_text_in_a_number_column_is_quoted(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],absorbance\n30,0.7\n60,high\n"))
    assert p.where == "t.csv, line 3, column 'absorbance'"
    assert p.message == "'high' is not a number."


def test_empty_and_nan_cells_in_required_columns(tmp_path):
    probs = problems_of(write(tmp_path, "time [s],absorbance\n30,\n60,nan\n90,inf\n"))
    assert [p.where for p in probs] == [
        "t.csv, line 2, column 'absorbance'",
        "t.csv, line 3, column 'absorbance'",
        "t.csv, line 4, column 'absorbance'",
    ]
    assert "the cell is empty" in probs[0].message
    assert "'nan' is not a finite number" in probs[1].message
    assert "'inf' is not a finite number" in probs[2].message


def test_decimal_comma_in_a_semicolon_file(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s];absorbance\n30;0,716\n"))
    assert p.where == "t.csv, line 2, column 'absorbance'"
    assert "'0,716' is written with a decimal comma" in p.message
    assert "'0.716'" in p.fix


def test_decimal_comma_in_a_comma_file_shows_as_extra_fields(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],absorbance\n30,0,716\n"))
    assert p.where == "t.csv, line 2"
    assert "3 fields but the header has 2 columns" in p.message
    assert "decimal comma" in p.message
    assert "decimal points" in p.fix


def test_flag_values_are_checked(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],absorbance,flag\n30,0.7,excluded\n"))
    assert p.where == "t.csv, line 2, column 'flag'"
    assert "'excluded' is not an allowed flag" in p.message
    assert "'exclude'" in p.fix


def test_absorbance_range(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],absorbance\n30,7.5\n"))
    assert p.message == "7.5 is out of range: absorbance must be >= -0.5 and <= 5."


def test_pump_ranges(tmp_path):
    text = "setting,volume [mL],time [s]\n-1,10,60\n2,0,60\n3,10,0\n"
    probs = problems_of(write(tmp_path, text), "pump")
    assert [p.where for p in probs] == [
        "t.csv, line 2, column 'setting'",
        "t.csv, line 3, column 'volume'",
        "t.csv, line 4, column 'time'",
    ]
    assert "-1 is out of range: setting must be >= 0" in probs[0].message
    assert "0 mL is out of range: volume must be > 0 mL" in probs[1].message
    assert "0 s is out of range: time must be > 0 s" in probs[2].message


def test_tank_numbers(tmp_path):
    text = "time [s],absorbance,tank\n0,0.0,1\n30,0.0,3\n60,0.1,1.5\n"
    probs = problems_of(write(tmp_path, text), "tank")
    assert "'3' is not one of 1, 2." in probs[0].message
    assert "'1.5' is not a whole number." in probs[1].message


def test_duplicate_and_decreasing_times(tmp_path):
    text = "time [s],absorbance\n30,0.7\n60,0.6\n60,0.5\n45,0.4\n"
    probs = problems_of(write(tmp_path, text))
    assert probs[0].where == "t.csv, line 4, column 'time'"
    assert probs[0].message == "duplicate time 60 s: line 3 has the same value."
    assert probs[1].where == "t.csv, line 5, column 'time'"
    assert "time 45 s is earlier than 60 s on line 4" in probs[1].message
    assert "sort the rows" in probs[1].fix


def test_time_order_is_checked_within_each_tank(tmp_path):
    text = "time [s],absorbance,tank\n0,0.0,1\n30,0.0,2\n20,0.1,2\n"
    (p,) = problems_of(write(tmp_path, text), "tank")
    assert "time 20 s is earlier than 30 s on line 3 within tank 2" in p.message


def test_all_problems_of_a_file_are_reported_together(tmp_path):
    text = "# three problems\ntime [s],absorbance,flag\n30,0.7,\n30,abc,\n90,0.5,maybe\n"
    probs = problems_of(write(tmp_path, text))
    assert len(probs) == 3
    wheres = {p.where for p in probs}
    assert wheres == {
        "t.csv, line 4, column 'absorbance'",
        "t.csv, line 5, column 'flag'",
        "t.csv, line 4, column 'time'",
    }
    assert all(p.fix for p in probs)


def test_unterminated_quote(tmp_path):
    (p,) = problems_of(write(tmp_path, 'time [s],absorbance,note\n30,0.7,"open\n'))
    assert p.where == "t.csv, line 2"
    assert "cannot be read as CSV" in p.message


def test_every_schema_documents_its_columns():
    for schema in TABLE_SCHEMAS.values():
        for col in schema.columns:
            assert col.doc, (schema.kind, col.name)


def test_empty_cell_in_an_optional_number_column(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],absorbance,tank\n0,0.0,1\n30,0.1,\n"), "tank")
    assert p.where == "t.csv, line 3, column 'tank'"
    assert p.message == (
        "the cell is empty; the tank is needed on every row once the column is there."
    )


def test_header_cell_without_a_name(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s],absorbance,\n30,0.7,\n"))
    assert p.message == "column 3 of the header has no name."
    assert "remove the extra delimiter" in p.fix


_CSV_ALPHABET = st.sampled_from([*",;.#\"'\n []0123456789-eEnaNx\t", "\u00b0", "s]"])


@settings(max_examples=150, deadline=None)
@given(
    base=st.sampled_from(
        [("r3.csv", "batch"), ("pump_oh.csv", "pump"), ("c2.csv", "tank"), ("t1.csv", "tracer")]
    ),
    edits=st.lists(
        st.tuples(st.integers(0, 10_000), _CSV_ALPHABET, st.booleans()), min_size=1, max_size=6
    ),
)
def test_damaged_tables_are_reported_never_crash(tmp_path_factory, base, edits):
    name, kind = base
    text = list((GOOD / name).read_text(encoding="utf-8"))
    for pos, char, insert in edits:
        i = pos % len(text)
        if insert:
            text.insert(i, char)
        else:
            text[i] = char
    path = tmp_path_factory.mktemp("fuzz") / name
    path.write_text("".join(text), encoding="utf-8")
    try:
        table = read_table(path, kind)
    except ExperimentError as exc:
        assert exc.problems
        assert all(p.where.startswith(name) and p.message for p in exc.problems)
    else:
        assert len(table.frame) == len(table.line_numbers) > 0


def test_trailing_empty_fields_are_not_taken_for_a_decimal_comma(tmp_path):
    """'30,0.716,' has a decimal point and one empty field too many: a trailing delimiter,
    not a decimal comma (the message used to say decimal comma)."""
    (p,) = problems_of(write(tmp_path, "time [s],absorbance\n30,0.716,\n"))
    assert p.where == "t.csv, line 2"
    assert p.message == (
        "the row has 3 fields but the header has 2 columns; the last 1 field(s) are empty"
        " ('30,0.716,' ends with ',')."
    )
    assert "remove the trailing ','" in p.fix
    # a decimal comma followed by an empty field is still a decimal comma
    (p,) = problems_of(write(tmp_path, "time [s],absorbance,flag\n30,0,716,\n"))
    assert "looks like numbers written with a decimal comma" in p.message


def test_a_unit_in_round_brackets_gets_the_square_bracket_spelling(tmp_path):
    (p,) = problems_of(write(tmp_path, "Time (min),Absorbance\n1,0.7\n"))
    assert p.message == (
        "unknown column 'time (min)' in the header of a batch table. Did you mean"
        " 'time [min]'? A unit goes in square brackets."
    )


def test_a_tab_separated_table_is_named_as_such(tmp_path):
    (p,) = problems_of(write(tmp_path, "time [s]\tabsorbance\n30\t0.7\n"))
    assert p.where == "t.csv, line 1"
    assert p.message.startswith("the header is separated by tabs")
    assert "comma" in p.fix


def test_a_decimal_comma_in_every_row_is_one_problem(tmp_path):
    """A spreadsheet saved with ';' and decimal commas gave one problem per cell (30 lines
    of output for a 30-row run); now one problem names the first cell and the count."""
    rows = "".join(f"{t};0,{700 - t}\n" for t in (30, 60, 90, 120))
    (p,) = problems_of(write(tmp_path, "time [s];absorbance\n" + rows))
    assert p.where == "t.csv, line 2, column 'absorbance'"
    assert p.message == (
        "'0,670' is written with a decimal comma. The same holds for 3 more cells of this"
        " column (lines 3 to 5)."
    )
    assert p.fix.startswith("write a decimal point: '0.670'")


def test_a_trailing_delimiter_on_every_row_is_one_problem(tmp_path):
    text = "# c\ntime [s],absorbance\n30,0.7,\n60,0.6,\n# note\n90,0.5,\n"
    (p,) = problems_of(write(tmp_path, text))
    assert p.where == "t.csv, line 3"
    assert p.message.endswith("The same holds for 2 more rows (between lines 4 and 6).")
