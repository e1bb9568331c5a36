"""Fuzz tests of everything that reads user input (issue 6, bad input).

Law checked on every generated case: the engine either raises its own documented error,
:class:`engine.errors.InputError` with a message, or returns a result with exactly the
documented columns and one row per data row of the file (flagged, not dropped). Nothing else
is raised and no case takes more than a few seconds (a per-example deadline, and a timeout per
test).

Readers fuzzed: readings and environment logs (random bytes; structured CSV built from header
choices, separators, decimal marks, cell contents and encodings; valid files truncated at
random byte offsets; XLSX workbooks, random zips and truncated ones), machines files (valid
and mutated TOML), quantity strings, and the command line on fuzzed files.

Budget: every test sets ``max_examples`` itself (see :func:`fuzz`), so a normal run generates
at least :data:`NORMAL_RUN_CASES` cases whatever the profile. ``FUZZ_SCALE`` multiplies every
budget; with ``HYPOTHESIS_PROFILE=long`` it defaults to 5.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import math
import os
import re
import tempfile
import zipfile
from datetime import timedelta
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
from hypothesis import HealthCheck, Phase, assume, example, given, settings
from hypothesis import strategies as st

from engine.__main__ import main
from engine.carriers import SPEC_KEYS
from engine.columns import ENVIRONMENT_COLUMNS, FLAG_CODES, FLAGS, READING_COLUMNS, ROW
from engine.errors import InputError
from engine.machines import dump_machines, load_machines, parse_machines_text
from engine.readings import (
    MAX_SHEET_COLUMNS,
    ReadOptions,
    map_columns,
    read_environment,
    read_readings,
)
from engine.report import OUTPUT_COLUMNS
from engine.store import open_store
from engine.units import KINDS, MAX_QUANTITY_LENGTH, parse_quantity, parse_speed, parse_tolerance

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_data"

PROFILE = os.environ.get("HYPOTHESIS_PROFILE", "ci")
FUZZ_SCALE = float(os.environ.get("FUZZ_SCALE", "5" if PROFILE == "long" else "1"))
#: Cases that a normal run (FUZZ_SCALE 1) must generate in total (issue 6).
NORMAL_RUN_CASES = 2_000
#: Generated lab bundles that a normal run must import (issue 12).
NORMAL_RUN_CASES_OF_BUNDLES = 1_000
#: Longest time one generated case may take [s]. Generous: two cores are shared.
DEADLINE_S = 5.0
#: Longest message a reader may give: one a person reads, whatever the file held.
MAX_MESSAGE_LENGTH = 2_000

#: Budget of every fuzz test at FUZZ_SCALE 1, filled in by :func:`fuzz`.
BUDGETS: dict[str, int] = {}


def fuzz(examples: int, deadline_s: float = DEADLINE_S):
    """Settings of one fuzz test: its own example budget and a per-example deadline."""
    fuzz_settings = settings(
        max_examples=max(1, round(examples * FUZZ_SCALE)),
        deadline=timedelta(seconds=deadline_s),
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                               HealthCheck.filter_too_much, HealthCheck.large_base_example],
        # FUZZ_NO_SHRINK=1 reports the first failing case at once (for long local runs).
        **({"phases": (Phase.explicit, Phase.reuse, Phase.generate)}
           if os.environ.get("FUZZ_NO_SHRINK") else {}),
    )

    def decorate(test):
        BUDGETS[test.__name__] = examples
        return pytest.mark.timeout(max(120, round(examples * FUZZ_SCALE * deadline_s / 4)))(
            fuzz_settings(test))

    return decorate


# --- what a reader may do with any input ---------------------------------------------------------
def read_or_refuse(read, columns, data_rows=None):
    """Call a reader: an InputError with a message, or a well-formed result. Returns either.

    ``data_rows`` is the number of non-blank lines below the first line of the file, when the
    test knows it: the frame then has that many rows less the header's offset and a units row.
    """
    try:
        result = read()
    except InputError as error:
        message = str(error)
        assert message.strip(), "an InputError without a message"
        assert len(message) <= MAX_MESSAGE_LENGTH, message[:300]
        assert "\n" not in message, message  # the command line shows it as one line
        return error
    frame = result.frame
    assert tuple(frame.columns) == columns
    assert frame[ROW].tolist() == list(range(1, len(frame) + 1))
    assert len(frame) >= 1
    if FLAGS in frame:
        codes = {code for text in frame[FLAGS].unique() for code in text.split(";") if code}
        assert codes <= set(FLAG_CODES)
    assert all(isinstance(message, str) and 0 < len(message) <= MAX_MESSAGE_LENGTH
               for message in result.messages), result.messages
    # SI values are numbers or empty, never infinite (an overflow is flagged, not kept).
    numbers = frame.drop(columns=[ROW]).select_dtypes("number").to_numpy(dtype=float)
    assert not np.isinf(numbers).any()
    if data_rows is not None:
        skipped = int(result.format["header_row"]) - 1 + int(bool(result.format["units_row"]))
        assert len(frame) == data_rows - skipped, (len(frame), data_rows, result.format)
    return result


# --- random bytes ------------------------------------------------------------------------------
_PREFIXES = [b"", b"PK\x03\x04", b"\xd0\xcf\x11\xe0", b"\xef\xbb\xbf", b"\xff\xfe", b"\xfe\xff",
             b"machine,time,speed [rpm],current [uA]\n", b"time,rh [%]\n", b"\x00", b"=cmd|"]
_NAMES = ["upload.csv", "upload.xlsx", "upload.txt", "upload", "upload.xlsm"]


@fuzz(300)
@given(prefix=st.sampled_from(_PREFIXES), body=st.binary(max_size=3000),
       name=st.sampled_from(_NAMES))
def test_random_bytes_give_a_result_or_an_input_error(prefix, body, name):
    read_or_refuse(lambda: read_readings(prefix + body, name=name), READING_COLUMNS)


@fuzz(150)
@given(prefix=st.sampled_from(_PREFIXES), body=st.binary(max_size=3000),
       name=st.sampled_from(_NAMES))
def test_random_bytes_in_the_environment_reader(prefix, body, name):
    read_or_refuse(lambda: read_environment(prefix + body, name=name), ENVIRONMENT_COLUMNS)


# --- structured CSV -------------------------------------------------------------------------------
#: Header spellings per field: canonical names, aliases with and without units.
HEADERS = {
    "machine": ["machine", "Machine ID", "machine_id", "generator", "device"],
    "session": ["session", "run", "Group", "session name"],
    "time": ["time", "timestamp", "Time", "datetime", "date/time"],
    "speed": ["speed [rpm]", "RPM", "speed (rev/s)", "speed", "rotation rate [Hz]",
              "belt speed [m/s]", "tacho [r/min]"],
    "current": ["current [uA]", "I (uA)", "current_uA", "current [nA]", "current",
                "current [µA]"],
    "rh": ["rh [%]", "RH%", "humidity", "relative humidity [-]"],
    "temperature": ["temperature [degC]", "Temp C", "temp f", "temperature [K]", "temp [°C]"],
    "pressure": ["pressure [hPa]", "P [mbar]", "pressure [kPa]", "baro"],
    "voltage": ["voltage [kV]", "kV", "terminal voltage [V]"],
    "note": ["note", "comment", "Remarks"],
}
#: Headers whose unit pint knows but that make no sense for the field: the file is refused.
WRONG_UNIT_HEADERS = {
    "speed": ["speed [kg]", "speed [furlongs]", "speed [uA]", "RPM [degC]"],
    "current": ["current [kg]", "current [m/s]", "I (kV)", "current [%]"],
    "rh": ["rh [kg]"], "temperature": ["temperature [Pa]"], "pressure": ["pressure [s]"],
}
FORMULAS = ["=cmd|' /C calc'!A0", "=1+1", "+SUM(A1:A9)", "-2+3", "@SUM(1)", "\t=1",
            "\r=1", "=HYPERLINK(\"http://x\")"]
#: Cell texts that are not numbers, whatever the decimal mark.
NOT_NUMBERS = ["x", "twelve", "1 2", "abc def", "nan", "NaN", "NA", "N/A", "-", "null",
               "n.v.", "#DIV/0!", "1..2", "1e",
               "--5", "0x1A", "∞", "x" * 10_000, "µ" * 300, *FORMULAS]

_text_alphabet = st.characters(codec="utf-8", exclude_categories=("Cs", "Cc", "Nd"))


def _is_header_word(text: str) -> bool:
    return bool(map_columns([text]))


garbage_headers = st.one_of(
    st.sampled_from(["alpha", "x1", "", "column 7", "Operator", "=cmd|' /C calc'!A0",
                     "speeed", "curent", "h" * 5_000, "two\nlines", "tab\there", "<b>x</b>"]),
    st.text(_text_alphabet, max_size=20),
).filter(lambda text: not _is_header_word(text.strip()))


def _number_texts(decimal: str):
    def with_mark(text: str) -> str:
        return text.replace(".", decimal) if decimal != "." else text

    floats = st.floats(allow_nan=True, allow_infinity=True).map(repr)
    return st.one_of(
        floats.map(with_mark),
        st.floats(min_value=-1e6, max_value=1e6, allow_nan=False).map(
            lambda value: with_mark(f"{value:.6g}")),
        st.integers(min_value=-(10**30), max_value=10**30).map(str),
        st.sampled_from(["0", "-0", "1e308", "-1e308", "1e-320", "5e-324", "1e400", "-1e400",
                         "9" * 400, " 7 ", "+3", "300", "1" + "0" * 30]).map(with_mark),
    )


# Text markers such as 'n/a' or '-' are text, flagged not_a_number (issue 10), not empty.
EMPTY_TEXTS = [""]
_NUMBER_POOL = ["0", "-0", "1", "12.5", "300", "-3", "0.001", "1e308", "-1e308", "1e-320",
                "5e-324", "1e400", "-1e400", "9" * 400, " 7 ", "+3", "1" + "0" * 30, "2.5e3",
                ".5", "5."]
#: Cells of numeric columns and what each is; numbers weigh most.
_CELL_POOL = ([(text, "number") for text in _NUMBER_POOL] * 3
              + [(text, "empty") for text in EMPTY_TEXTS]
              + [(text, "text") for text in NOT_NUMBERS])


def numeric_cells(decimal: str):
    """Cells of a numeric column with what each is: (text, "number" | "empty" | "text")."""
    def with_mark(cell: tuple[str, str]) -> tuple[str, str]:
        text, kind = cell
        return (text.replace(".", decimal), kind) if kind == "number" else cell

    pool = st.sampled_from(_CELL_POOL).map(with_mark)
    # Unicode text with a letter and a character no unit has: must be "not a number"
    unicode_text = st.text(_text_alphabet, min_size=1, max_size=30).filter(
        lambda text: re.search(r"[^\W\d_]", text) and _NOT_UNIT_CHARACTER.search(text))
    return st.one_of(pool, pool, _number_texts(decimal).map(lambda text: (text, "number")),
                     unicode_text.map(lambda text: (text, "text")))


#: A character that no unit text holds (the units parser refuses it), so a cell with one is
#: neither a unit (a units row) nor a number.
_NOT_UNIT_CHARACTER = re.compile(r"[^A-Za-z_µμΩ°%/*^ ().0-9\[\]-]")


TIME_CELLS = st.one_of(
    st.datetimes().map(lambda moment: moment.isoformat()),
    st.datetimes().map(lambda moment: moment.strftime("%d.%m.%Y %H:%M")),
    st.datetimes().map(lambda moment: moment.strftime("%m/%d/%Y %I:%M %p")),
    st.floats(min_value=-1e9, max_value=1e9).map(repr),
    st.sampled_from(["", "10:05", "25:99", "2024-13-45T99:99", "yesterday", "2024-03-01T10:00Z",
                     "2024-03-01T10:00+01:00", "2024-03-31T02:30", "0", "=NOW()", "t" * 2_000]),
)
LABEL_CELLS = st.one_of(
    st.sampled_from(["disc-a", "belt-b", "07", "", "  ", "=cmd|' /C calc'!A0", "@x", "-m",
                     "+m", "\tm", "<script>alert(1)</script>", "x" * 10_000]),
    st.text(_text_alphabet, max_size=40),
)
NOTE_CELLS = st.one_of(
    LABEL_CELLS, st.sampled_from(["line\nbreak", 'say "hi"', "a,b;c\td", "bell\x07"]),
)


@st.composite
def structured_csv(draw, fields=("machine", "session", "time", "speed", "current", "rh",
                                 "temperature", "pressure", "voltage", "note"),
                   required=("machine", "speed", "current"), clean=False):
    """A CSV file built from parts; returns the bytes, options, data rows and what is expected.

    Returns a dict: ``data`` (bytes), ``options`` (ReadOptions), ``rows`` (data rows written,
    each non-blank), ``ok`` (the file is valid: the reader must read it), ``kinds`` (per data
    row, the kind of the speed and current cells), ``encoding``, ``units_row``. A ``clean``
    file always has the required columns, units that fit and a text encoding.
    """
    # Mostly the required fields and some others, in any order; sometimes anything at all.
    extras = draw(st.lists(st.sampled_from(fields), max_size=7))
    chosen = draw(st.permutations(
        [*required, *extras] if clean or draw(st.integers(0, 4)) else extras or [fields[0]]))
    columns: list[tuple[str, str, bool]] = []  # (field or "", header, unit fits)
    for field_name in chosen:
        if field_name in WRONG_UNIT_HEADERS and not clean and draw(st.integers(0, 9)) == 0:
            columns.append((field_name, draw(st.sampled_from(WRONG_UNIT_HEADERS[field_name])),
                            False))
        else:
            columns.append((field_name, draw(st.sampled_from(HEADERS[field_name])), True))
    for _ in range(draw(st.integers(0, 3))):
        position = draw(st.integers(0, len(columns)))
        columns.insert(position, ("", draw(garbage_headers), True))
    separator = draw(st.sampled_from([",", ";", "\t"]))
    decimal = "," if separator != "," and draw(st.booleans()) else "."
    encoding = draw(st.sampled_from(["utf-8"] * 4 + ["utf-8-sig", "latin-1", "cp1252"]
                                    + ([] if clean else ["utf-16", "utf-16-le"])))
    units_row = draw(st.booleans()) and all(not header.endswith(("]", ")"))
                                            for _field, header, _fits in columns)
    row_count = draw(st.integers(1, 20))
    first: dict[str, int] = {}
    for position, (field_name, _header, _fits) in enumerate(columns):
        if field_name:
            first.setdefault(field_name, position)
    rows, kinds = [], []
    for _ in range(row_count):
        row, row_kinds = [], {}
        for position, (field_name, _header, _fits) in enumerate(columns):
            if field_name in ("speed", "current", "rh", "temperature", "pressure", "voltage"):
                cell, kind = draw(numeric_cells(decimal))
                if first.get(field_name) == position:
                    row_kinds[field_name] = kind
            elif field_name == "time":
                cell = draw(TIME_CELLS)
            elif field_name == "note":
                cell = draw(NOTE_CELLS)
            elif field_name in ("machine", "session"):
                cell = draw(LABEL_CELLS)
            else:
                cell = draw(st.one_of(LABEL_CELLS, _number_texts(decimal)))
            row.append(cell)
        if draw(st.integers(0, 9)) == 0:  # a ragged row: missing or extra trailing fields
            row = row[: draw(st.integers(1, len(row)))] if draw(st.booleans()) else (
                row + ["extra"] * draw(st.integers(1, 3)))
            if len(row) < len(columns):
                row_kinds = {name: kind for name, kind in row_kinds.items()
                             if first[name] < len(row)}
        if not any(cell.strip() for cell in row):
            # every data row is non-blank, so every one must come out (a line of empty
            # cells only is not a reading: the reader skips it and says so)
            row[0] = "x"
            row_kinds.pop(columns[0][0], None)
        rows.append(row)
        kinds.append(row_kinds)
    buffer = io.StringIO()
    # The csv module quotes a cell holding "\r" only when "\r" ends its lines.
    bare_return = any("\r" in cell for row in rows for cell in row)
    writer = csv.writer(buffer, delimiter=separator, lineterminator="\r\n" if bare_return
                        else draw(st.sampled_from(["\n", "\r\n"])))
    writer.writerow([header for _field, header, _fits in columns])
    if units_row:
        writer.writerow([{"speed": "rpm", "current": "uA", "rh": "%", "temperature": "degC",
                          "pressure": "hPa", "voltage": "kV"}.get(field_name, "")
                         for field_name, _header, _fits in columns])
    writer.writerows(rows)
    text = buffer.getvalue()
    data = text.encode(encoding, errors="replace")
    tell_separator = draw(st.booleans())
    options = ReadOptions(separator=separator if tell_separator else None,
                          decimal=decimal if tell_separator else None,
                          machine=None if "machine" in first else draw(
                              st.sampled_from([None, "given-machine"])))
    fits = {field_name: columns[position][2] for field_name, position in first.items()}
    controls = any(re.search(r"[\x00-\x08\x0e-\x1f\x7f]", cell) for row in rows for cell in row)
    ok = (all(name in first for name in required if name != "machine")
          and ("machine" in first or options.machine or "machine" not in required)
          and all(fits.values())
          and encoding in ("utf-8", "utf-8-sig", "latin-1", "cp1252", "utf-16")
          and tell_separator and not controls)
    return {"data": data, "options": options, "rows": row_count + int(units_row), "ok": ok,
            "kinds": kinds, "encoding": encoding, "units_row": units_row}


def _check_structured(case, read, columns):
    outcome = read_or_refuse(lambda: read(case["data"], case["options"], name="fuzz.csv"),
                             columns, data_rows=case["rows"])
    if case["ok"]:
        assert not isinstance(outcome, InputError), (str(outcome), case["data"][:300])
        assert not outcome.format["units_row"] or case["units_row"]
    return outcome


@fuzz(500)
@given(case=structured_csv())
def test_structured_csv_readings_keep_every_row(case):
    """Law: a readable file gives one row per data row; bad cells are flagged, not dropped."""
    outcome = _check_structured(case, read_readings, READING_COLUMNS)
    if isinstance(outcome, InputError) or outcome.format["header_row"] != 1:
        return
    frame = outcome.frame
    offset = int(outcome.format["units_row"]) - int(case["units_row"])
    for position, kinds in enumerate(case["kinds"][offset:]):
        flags = frame[FLAGS].iloc[position].split(";")
        for field_name in ("speed", "current"):
            kind = kinds.get(field_name)
            if kind == "text":
                # a number followed by a unit of another kind ('1e': e, the elementary charge)
                # is flagged unit_mismatch
                assert "not_a_number" in flags or "unit_mismatch" in flags, (
                    position, field_name, frame.iloc[position])
            elif kind == "empty":
                assert "missing_value" in flags, (position, field_name, frame.iloc[position])


@fuzz(200)
@given(case=structured_csv(fields=("time", "rh", "temperature", "pressure", "speed", "note"),
                           required=("time", "rh")))
def test_structured_csv_environment_logs_keep_every_row(case):
    _check_structured(case, read_environment, ENVIRONMENT_COLUMNS)


# --- truncated files ------------------------------------------------------------------------------
_VALID_FILES = {
    name: (SAMPLE / name).read_bytes()[:6000]
    for name in ("readings_belt.csv", "readings_twin_disc.csv", "environment_cylinder.csv")
}


def _complete_lines(data: bytes) -> int:
    """Non-blank lines below the first one (a cut last line counts: it is a row)."""
    return sum(1 for line in data.split(b"\n")[1:] if line.strip())


@fuzz(300)
@given(name=st.sampled_from(sorted(_VALID_FILES)), cut=st.floats(0.0, 1.0),
       encoding=st.sampled_from(["utf-8", "utf-8-sig"]))
@example(name="readings_belt.csv", cut=0.015625, encoding="utf-8")  # found: a lone short row
def test_files_truncated_at_any_byte(name, cut, encoding):
    data = _VALID_FILES[name].decode("utf-8").encode(encoding)
    data = data[: int(cut * len(data))]
    rows = _complete_lines(data.removeprefix(b"\xef\xbb\xbf"))
    reader, columns = ((read_environment, ENVIRONMENT_COLUMNS) if name.startswith("environment")
                       else (read_readings, READING_COLUMNS))
    outcome = read_or_refuse(lambda: reader(data, name=name), columns, data_rows=rows)
    if b"\n" in data and rows:  # the header is whole: every row, the cut one too, comes out
        assert not isinstance(outcome, InputError), str(outcome)
        assert len(outcome.frame) == rows


# --- XLSX -----------------------------------------------------------------------------------------
XLSX_CELLS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=False), st.integers(-(2**53), 2**53),
    st.sampled_from(["", "x", "=1+1", "=cmd|' /C calc'!A0", "12,5", "NA", "x" * 5_000]),
    st.datetimes(), st.booleans(), st.none(), st.text(_text_alphabet, max_size=20),
)


@st.composite
def workbooks(draw):
    """A valid workbook of readings with random cells, maybe with one far-away cell."""
    book = openpyxl.Workbook()
    sheet = book.active
    skip = draw(st.integers(0, 3))
    for number in range(skip):
        sheet.append([f"title {number}"])
    sheet.append(["machine", "time", "speed [rpm]", "current [uA]", "note"])
    rows = draw(st.integers(1, 25))
    for _ in range(rows):
        # never a formula: a row of formulas without stored values reads as a blank row
        machine = draw(st.sampled_from(["disc-a", "07", "@m", "-m", "+m", "belt b"]))
        sheet.append([machine, *(draw(XLSX_CELLS) for _ in range(4))])
    far = draw(st.one_of(st.none(), st.tuples(st.integers(1, 1_048_576),
                                               st.integers(1, 16_384))))
    if far is not None:
        row, column = far
        assume(row > skip + 1 + rows or column > 5)
        sheet.cell(row=row, column=column, value="far away")
    buffer = io.BytesIO()
    book.save(buffer)
    data_rows = rows + int(far is not None and row > skip + 1 + rows)
    return buffer.getvalue(), skip, data_rows, far[1] if far else 0


@fuzz(120, deadline_s=10.0)
@given(workbook=workbooks())
def test_xlsx_workbooks_keep_every_row(workbook):
    """Law: every row of a workbook comes out; only a cell far to the right is refused."""
    data, skip, data_rows, far_column = workbook
    outcome = read_or_refuse(lambda: read_readings(data, name="fuzz.xlsx"), READING_COLUMNS)
    if far_column > MAX_SHEET_COLUMNS:
        assert isinstance(outcome, InputError) and "beyond column" in str(outcome)
        return
    assert not isinstance(outcome, InputError), str(outcome)
    assert outcome.format["header_row"] == skip + 1
    assert len(outcome.frame) == data_rows


_VALID_XLSX = None


def _valid_xlsx() -> bytes:
    global _VALID_XLSX
    if _VALID_XLSX is None:
        book = openpyxl.Workbook()
        sheet = book.active
        sheet.append(["machine", "time", "speed [rpm]", "current [uA]"])
        for number in range(50):
            sheet.append(["disc-a", f"2024-03-01T10:{number:02d}:00", 300 + number, 12.5])
        buffer = io.BytesIO()
        book.save(buffer)
        _VALID_XLSX = buffer.getvalue()
    return _VALID_XLSX


@fuzz(150, deadline_s=10.0)
@given(cut=st.floats(0.0, 1.0), flips=st.lists(st.tuples(st.floats(0.0, 1.0),
                                                          st.integers(0, 255)), max_size=5))
def test_truncated_and_damaged_xlsx(cut, flips):
    data = bytearray(_valid_xlsx())
    for where, byte in flips:
        data[min(int(where * len(data)), len(data) - 1)] = byte
    data = bytes(data[: max(4, int(cut * len(data)))])
    read_or_refuse(lambda: read_readings(data, name="damaged.xlsx"), READING_COLUMNS)


@fuzz(60)
@given(members=st.dictionaries(st.sampled_from(["[Content_Types].xml", "xl/workbook.xml",
                                                 "xl/worksheets/sheet1.xml", "_rels/.rels",
                                                 "../evil", "xl/sharedStrings.xml"]),
                               st.binary(max_size=400), max_size=5))
def test_random_zips_named_xlsx(members):
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        for name, content in members.items():
            archive.writestr(name, content)
    read_or_refuse(lambda: read_readings(buffer.getvalue(), name="random.xlsx"),
                   READING_COLUMNS)


# --- machines files -------------------------------------------------------------------------------
MACHINES_TEXT = (SAMPLE / "machines.toml").read_text(encoding="utf-8")
TOML_VALUES = st.one_of(
    st.sampled_from(['"46 cm"', '"1e308 km"', '"10**10**10 m"', '"20 kg"', '"-3 cm"', "nan",
                     "inf", "-inf", "1e309", "0", "-1", "true", "[1, 2]", "{a = 1}", '""',
                     '"' + "x" * 600 + '"', '"=cmd|\' /C calc\'!A0"', '"0.5"', "0.5",
                     "2", '"disc"', '"belt"', '"cylinder"', '"custom"', '"<b>x</b>"',
                     "[" * 200 + "]" * 200, "1979-05-27T07:32:00Z", '"50 %"', '"3 MV/m"',
                     '"0.12 m^2"', '"5 mm"', '"2 %"', '"1e-300 m"', '"twin-disc"',
                     '"disc-stack"', '"single-disc"', '"twin-disc-sectorless"', '"split"',
                     '"fixed"', "8", "3"]),
    st.integers(-(2**63), 2**63 - 1).map(str),
    st.floats(allow_nan=False).map(lambda value: repr(value).replace("inf", "1e999")),
    st.text(_text_alphabet, max_size=30).map(lambda text: '"' + text.replace("\\", "")
                                             .replace('"', "") + '"'),
)
TOML_KEYS = ["id", "label", "carrier", "outer_diameter", "inner_diameter", "outer_radius",
             "sector_fill", "carriers", "collection_factor", "breakdown_field", "width",
             "roller_diameter", "loop_length", "radius", "diameter", "active_length",
             "area_per_rev", "notes", "material", "altitude", "pressure", "temperature",
             "speed", "current", "unknown_key", '"two\\nlines"', '"=cmd"', "arrangement",
             "collectors", "discs", "units"]


@st.composite
def machines_texts(draw):
    """The sample machines file, mutated line by line."""
    lines = MACHINES_TEXT.splitlines()
    for _ in range(draw(st.integers(0, 6))):
        operation = draw(st.sampled_from(["delete", "duplicate", "replace", "insert", "swap"]))
        position = draw(st.integers(0, len(lines) - 1)) if lines else 0
        if operation == "delete" and lines:
            del lines[position]
        elif operation == "duplicate" and lines:
            lines.insert(position, lines[position])
        elif operation == "replace" and lines and "=" in lines[position]:
            key = lines[position].split("=")[0]
            lines[position] = f"{key}= {draw(TOML_VALUES)}"
        elif operation == "insert":
            lines.insert(position, draw(st.one_of(
                st.builds(lambda key, value: f"{key} = {value}", st.sampled_from(TOML_KEYS),
                          TOML_VALUES),
                st.sampled_from(["[[machine]]", "[site]", "[machine.tolerance]", "[other]",
                                 "[[site]]", "machine = 3", "= =", "[", '"unclosed']))))
        elif operation == "swap" and len(lines) > 1:
            other = draw(st.integers(0, len(lines) - 1))
            lines[position], lines[other] = lines[other], lines[position]
    text = "\n".join(lines)
    if draw(st.integers(0, 9)) == 0:
        text = text[: draw(st.integers(0, len(text)))]
    return text


@st.composite
def generated_machines_texts(draw):
    """Machines files written from scratch: any keys of a carrier, with any values."""
    parts = []
    if draw(st.booleans()):
        keys = draw(st.lists(st.sampled_from(["altitude", "pressure", "temperature"]),
                             max_size=3, unique=True))
        parts.append("[site]\n" + "".join(f"{key} = {draw(TOML_VALUES)}\n" for key in keys))
    for number in range(draw(st.integers(0, 3))):
        carrier = draw(st.sampled_from(sorted(SPEC_KEYS)))
        keys = draw(st.lists(st.sampled_from([*SPEC_KEYS[carrier], "carriers",
                                              "collection_factor", "breakdown_field",
                                              "label", "notes", "material", "arrangement",
                                              "collectors", "discs", "units"]),
                             max_size=6, unique=True))
        lines = [f'id = "m{number}"', f'carrier = "{carrier}"']
        lines += [f"{key} = {draw(TOML_VALUES)}" for key in keys]
        tolerances = draw(st.lists(st.sampled_from([*keys, "speed", "current", "bogus"]),
                                   max_size=3, unique=True))
        text = "[[machine]]\n" + "\n".join(lines) + "\n"
        if tolerances:
            text += "[machine.tolerance]\n" + "".join(
                f"{key} = {draw(TOML_VALUES)}\n" for key in tolerances)
        parts.append(text)
    return "\n".join(parts)


@fuzz(300)
@given(text=st.one_of(machines_texts(), generated_machines_texts()))
def test_machines_files_parse_or_say_why(text):
    try:
        machine_file = parse_machines_text(text, "fuzz.toml")
    except InputError as error:
        assert str(error).startswith("fuzz.toml"), str(error)
        assert "\n" not in str(error), str(error)
        return
    # Law: what was read writes back and reads again as the same machines.
    again = parse_machines_text(dump_machines(machine_file), "again.toml")
    assert [machine.id for machine in again.machines] == [
        machine.id for machine in machine_file.machines]
    for before, after in zip(machine_file.machines, again.machines, strict=True):
        assert after.carrier == before.carrier
        assert after.units == before.units and math.isfinite(before.units) \
            and before.units > 0
        area = before.carrier.area_per_rev_m2
        if area is None:  # a belt known by its width only: its speed is linear
            assert before.kind == "belt"
        else:
            assert math.isfinite(area) and area > 0
    assert math.isfinite(machine_file.site.pressure_pa) and machine_file.site.pressure_pa > 0


@fuzz(100)
@given(data=st.one_of(
    st.binary(max_size=2000),
    st.sampled_from(["utf-8", "utf-8-sig", "utf-16", "latin-1"]).flatmap(
        lambda encoding: machines_texts().map(
            lambda text: text.encode(encoding, errors="replace")))))
def test_machines_files_on_disk_of_any_bytes(data):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "machines.toml"
        path.write_bytes(data)
        try:
            load_machines(path)
        except InputError as error:
            assert str(error).strip()


# --- quantity strings -----------------------------------------------------------------------------
#: Units by the kind they are, hand-classified (SI Brochure, 9th edition; pint's definitions).
UNITS_BY_KIND = {
    "length": ["m", "cm", "mm", "in", "ft", "km", "um"],
    "area": ["m^2", "cm**2", "mm^2", "in^2"],
    "pressure": ["Pa", "hPa", "kPa", "mbar", "bar", "psi", "atm", "mmHg"],
    "temperature": ["K", "degC", "degF", "°C"],
    "electric_field": ["V/m", "MV/m", "kV/cm"],
    "current": ["A", "uA", "µA", "nA", "mA"],
    "voltage": ["V", "kV", "mV"],
    "capacitance": ["F", "pF", "nF", "uF"],
    "linear_speed": ["m/s", "km/h", "ft/min"],
    "duration": ["s", "min", "h", "ms"],
    "fraction": ["%", "percent", ""],
    "rotation_rate": ["rpm", "rev/s", "Hz", "1/min", "rad/s"],
    # pint accepts all of these; none makes sense for any field here (radian, steradian,
    # percent and count are dimensionless in pint, so "rad*m" would pass for a length).
    "other": ["kg", "g", "J", "W", "ohm", "mol", "N", "C", "lb", "T", "kg/m^3", "rad",
              "rad*m", "%/s", "sr/s", "rad**2/s", "rpm*rad", "rpm/rad", "count/s", "% m",
              "deg", "Bq"],
}
NUMBERS = st.one_of(
    st.floats(allow_nan=False, allow_infinity=False, width=64).map(repr),
    st.sampled_from(["0", "1", "46", "-3", "0,5", "1e308", "1e-320", "9" * 60, "1e999",
                     ".5", "5.", "+2"]),
)


@fuzz(300)
@given(number=NUMBERS, unit_kind=st.sampled_from(sorted(UNITS_BY_KIND)), data=st.data(),
       kind=st.sampled_from(sorted(KINDS)))
def test_quantity_of_a_known_unit_is_accepted_only_for_its_kind(number, unit_kind, data, kind):
    """Law: a unit of another kind ("a current in kg") is refused with a message."""
    unit = data.draw(st.sampled_from(UNITS_BY_KIND[unit_kind]))
    text = f"{number} {unit}".strip()
    try:
        value = parse_quantity(text, kind, "fuzzed field")
    except InputError as error:
        message = str(error)
        assert message.startswith("fuzzed field"), message
        if len(text) <= MAX_QUANTITY_LENGTH and unit_kind == kind and (
                unit or kind == "fraction") and math.isfinite(float(number.replace(",", "."))):
            assert "too large" in message, message  # the only reason to refuse a good unit
        return
    assert unit_kind == kind, (text, kind, value)
    assert math.isfinite(value), (text, kind, value)


QUANTITY_TEXTS = st.one_of(
    st.text(max_size=80),
    st.builds(lambda number, space, unit: f"{number}{space}{unit}", NUMBERS,
              st.sampled_from(["", " ", "  "]),
              st.one_of(st.sampled_from(sum(UNITS_BY_KIND.values(), [])),
                        st.text(st.characters(codec="ascii"), max_size=20),
                        st.sampled_from(["m**10**10", "m^(10^10)", "m**999", "m^-99",
                                         "(m)**2**2**2", "m" + "*m" * 30, "(" * 30 + "m",
                                         "m)", "1/s**2", "kg*m/s^2/A", "e", "inf m", "nan",
                                         "__import__('os')", "m;rm -rf", "m\nkg",
                                         "meter ** 2", "m ^ 2", "m²", "m³", "Ω", "°"]))),
    st.sampled_from(["x" * (MAX_QUANTITY_LENGTH + 1), "1 " + "m" * MAX_QUANTITY_LENGTH,
                     "10**10**10**10 m", "1e99999 m", "nan m", "inf m", "-inf m", ""]),
)


@fuzz(300)
@given(text=QUANTITY_TEXTS, kind=st.sampled_from(sorted(KINDS)))
@example(text="9" * 60 + "  m)", kind="temperature")  # found: pint's TokenError escaped
@example(text="1 m/", kind="length")  # found: pint's AssertionError escaped
@example(text="1e308 km", kind="length")  # found: infinity returned as a length
def test_any_quantity_text_gives_a_finite_float_or_a_message(text, kind):
    for parse in (lambda: parse_quantity(text, kind, "q"),
                  lambda: parse_speed(text, "q"),
                  lambda: parse_tolerance(text, kind, "q")):
        try:
            value = parse()
        except InputError as error:
            assert str(error).strip()
            continue
        number = value[0] if isinstance(value, tuple) else getattr(value, "value", value)
        assert isinstance(number, float) and math.isfinite(number), (text, kind, value)
        assert len(text) <= MAX_QUANTITY_LENGTH


# --- lab bundles ----------------------------------------------------------------------------------
_BUNDLE_MEMBERS: dict[str, bytes] = {}


def _bundle_members() -> dict[str, bytes]:
    """The members of a small valid bundle: the sample machines, readings and a log."""
    if not _BUNDLE_MEMBERS:
        with tempfile.TemporaryDirectory() as folder, \
                open_store(Path(folder) / "lab.sqlite3") as store:
            for machine in load_machines(SAMPLE / "machines.toml").machines:
                store.save_machine(machine)
            readings = read_readings(SAMPLE / "readings_belt.csv").frame.head(30)
            log = read_environment(SAMPLE / "environment_cylinder.csv").frame.head(20)
            store.import_readings(readings, "session 1", "readings_belt.csv", environment=log)
            with zipfile.ZipFile(io.BytesIO(store.export_bundle())) as bundle:
                _BUNDLE_MEMBERS.update({name: bundle.read(name) for name in bundle.namelist()})
    return _BUNDLE_MEMBERS


@st.composite
def damaged_bundles(draw):
    """A valid bundle with members cut, changed, dropped, duplicated or replaced."""
    members = dict(_bundle_members())
    for _ in range(draw(st.integers(1, 3))):
        name = draw(st.sampled_from(sorted(members)))
        content = members[name]
        operation = draw(st.sampled_from(["cut", "flip", "line", "drop", "random", "swap"]))
        if operation == "cut":
            members[name] = content[: draw(st.integers(0, len(content)))]
        elif operation == "flip" and content:
            position = draw(st.integers(0, len(content) - 1))
            members[name] = (content[:position] + bytes([draw(st.integers(0, 255))])
                             + content[position + 1:])
        elif operation == "line":
            lines = content.split(b"\n")
            position = draw(st.integers(0, len(lines) - 1))
            lines[position] = draw(st.sampled_from([b"", b"x,y", b"1," * 20, b'"', b"nan",
                                                    b'{"format": 1}', b"[[machine]]",
                                                    b"-1,-1e999,=cmd"]))
            members[name] = b"\n".join(lines)
        elif operation == "drop":
            del members[name]
        elif operation == "random":
            members[name] = draw(st.binary(max_size=300))
        else:
            other = draw(st.sampled_from(sorted(_bundle_members())))
            members[name] = _bundle_members()[other]
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_DEFLATED) as bundle:
        for name, content in members.items():
            bundle.writestr(name, content)
    data = buffer.getvalue()
    if draw(st.integers(0, 4)) == 0:  # damage the zip itself too
        data = data[: draw(st.integers(0, len(data)))]
    return data


@fuzz(100, deadline_s=10.0)
@given(data=st.one_of(damaged_bundles(), st.binary(max_size=500)))
def test_damaged_bundles_import_whole_or_not_at_all(data):
    """Law: a bundle is imported whole, or refused with a message and nothing stored."""
    with tempfile.TemporaryDirectory() as folder, \
            open_store(Path(folder) / "lab.sqlite3") as store:
        try:
            ids = store.import_bundle(data)
        except InputError as error:
            assert str(error).startswith("bundle"), str(error)
            assert store.is_empty()
            return
        manifest = json.loads(zipfile.ZipFile(io.BytesIO(data)).read("manifest.json"))
        assert len(ids) == len(manifest["imports"])
        assert store.counts()["readings"] == manifest["counts"]["readings"]


_HOSTILE_CELLS = ["", "nan", "inf", "-1e999", "1e308", "99999999999999999999",
                  "-9223372036854775809", "9007199254740993", "1.5", "-0", "0x10",
                  "3000-01-01T00:00:00", "1500-06-01T00:00:00+00:00", "0001-01-01",
                  "2024-13-45T25:61:00", "2024-05-01T09:00:00+99:00", "=cmd()", '"', "x" * 300,
                  "\x00", "1,2", "\u202e", "NA"]
_HOSTILE_MANIFEST_VALUES = [0, -1, 2**53, 10**30, 2**63, 1.5, True, None, "", "x" * 300, [],
                            {}, "datetime64[ns, dateutil//etc/passwd]",
                            "datetime64[ns, ../../etc/localtime]", "datetime64[ps]",
                            "datetime64[ns, Nowhere/Atlantis]", "datetime64[ns, Europe/Paris]",
                            "datetime64[ns, +05:30]"]


@st.composite
def value_damaged_bundles(draw):
    """A valid bundle with hostile values in its manifest or in cells of its CSV members."""
    members = dict(_bundle_members())
    for _ in range(draw(st.integers(1, 3))):
        if draw(st.booleans()):
            manifest = json.loads(members["manifest.json"])
            value = draw(st.sampled_from(_HOSTILE_MANIFEST_VALUES))
            where = draw(st.sampled_from(["import", "counts", "top"]))
            if not (isinstance(manifest, dict) and isinstance(manifest.get("imports"), list)
                    and isinstance(manifest.get("counts"), dict)
                    and all(isinstance(entry, dict) for entry in manifest["imports"])):
                where = "top"  # an earlier change replaced the part to change
            if where == "import" and manifest["imports"]:
                key = draw(st.sampled_from(sorted(manifest["imports"][0])))
                manifest["imports"][0][key] = value
            elif where == "counts":
                manifest["counts"][draw(st.sampled_from(sorted(manifest["counts"])))] = value
            elif isinstance(manifest, dict):
                key = draw(st.sampled_from(["demo_machines", "demo_site", "version", "imports",
                                            "counts", "format"]))
                manifest[key] = draw(st.sampled_from([value, [value], ["belt"]]))
            members["manifest.json"] = json.dumps(manifest).encode()
        else:
            member = draw(st.sampled_from(["readings.csv", "environment.csv"]))
            table = pd.read_csv(io.BytesIO(members[member]), dtype=str, keep_default_na=False)
            row = draw(st.integers(0, len(table) - 1))
            column = draw(st.sampled_from(list(table.columns)))
            table.loc[row, column] = draw(st.sampled_from(_HOSTILE_CELLS))
            members[member] = table.to_csv(index=False, lineterminator="\n").encode()
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_DEFLATED) as bundle:
        for name, content in members.items():
            bundle.writestr(name, content)
    return buffer.getvalue()


@pytest.fixture(scope="module")
def bundle_store():
    """One store for many generated bundles (a new store per case would cost most of the time)."""
    with tempfile.TemporaryDirectory() as folder, \
            open_store(Path(folder) / "lab.sqlite3") as store:
        yield store


def _store_state(store) -> tuple:
    """What a refused bundle must leave as it was: counts, imports, machines, a digest of rows."""
    connection = store._connection
    return (store.counts(), store.imports().to_dict("list"),
            connection.execute("SELECT id, toml, is_demo FROM machines ORDER BY id").fetchall(),
            connection.execute("SELECT key, value, is_demo FROM site ORDER BY key").fetchall(),
            connection.execute("SELECT COUNT(*), SUM(rows), GROUP_CONCAT(HEX(data)) "
                               "FROM (SELECT rows, data FROM reading_blocks ORDER BY rowid)"
                               ).fetchall(),
            connection.execute("SELECT COUNT(*), TOTAL(rh) FROM environment").fetchall())


@fuzz(950, deadline_s=10.0)
@given(data=st.one_of(value_damaged_bundles(), damaged_bundles()),
       replace_machines=st.booleans())
def test_hostile_bundles_leave_the_store_unchanged_when_refused(bundle_store, data,
                                                                replace_machines):
    """Law: any bundle is imported whole (but for the imports the store holds already), or
    refused with a bundle message and the store left exactly as it was (one store through
    every case, so earlier imports must survive)."""
    before = _store_state(bundle_store)
    try:
        ids = bundle_store.import_bundle(data, replace_machines=replace_machines)
    except InputError as error:
        assert str(error).startswith("bundle"), str(error)
        assert len(str(error)) <= MAX_MESSAGE_LENGTH
        assert _store_state(bundle_store) == before
        return
    manifest = json.loads(zipfile.ZipFile(io.BytesIO(data)).read("manifest.json"))
    # Imports the store held already (same name, file, time stored, readings) are not added
    # again; every other one is, whole.
    present = set(zip(before[1]["name"], before[1]["source"], before[1]["created_at"],
                      before[1]["rows"], strict=True))
    added = [entry for entry in manifest["imports"]
             if (entry["name"], entry["source"], entry["created_at"], entry["rows"])
             not in present]
    assert len(ids) == len(added)
    assert (bundle_store.counts()["readings"] - before[0]["readings"]
            == sum(entry["rows"] for entry in added))


# --- the command line -----------------------------------------------------------------------------
_MACHINES_FILE = None


def _machines_path() -> Path:
    global _MACHINES_FILE
    if _MACHINES_FILE is None:
        folder = Path(tempfile.mkdtemp(prefix="fuzz-machines-"))
        _MACHINES_FILE = folder / "machines.toml"
        text = MACHINES_TEXT + "\n[[machine]]\nid = \"disc-a\"\ncarrier = \"disc\"\n" \
            "outer_diameter = \"46 cm\"\ninner_diameter = \"20 cm\"\n"
        _MACHINES_FILE.write_text(text, encoding="utf-8")
    return _MACHINES_FILE


def run_cli(arguments):
    # stdout with a binary buffer, as a terminal's: the command writes CSV bytes to it
    out, err = io.TextIOWrapper(io.BytesIO(), encoding="utf-8", newline=""), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main(arguments)
    out.flush()
    return status, out.buffer.getvalue().decode("utf-8"), err.getvalue()


@fuzz(120, deadline_s=10.0)
@given(readings=st.one_of(structured_csv(clean=True), structured_csv(clean=True),
                          structured_csv(), st.binary(max_size=500).map(
                              lambda data: {"data": data, "options": ReadOptions()})),
       machines=st.one_of(st.none(), st.none(), st.none(), machines_texts()),
       suffix=st.sampled_from([".csv"] * 4 + [".xlsx", ".txt"]),
       output=st.sampled_from([None, "out.csv", "out.xlsx", "out.json"]))
def test_the_command_line_on_fuzzed_files(readings, machines, suffix, output):
    """Law: exit status 0 with one output row per reading, or 2 with one 'error:' line."""
    data, options = readings["data"], readings["options"]
    with tempfile.TemporaryDirectory() as folder:
        readings_path = Path(folder) / f"readings{suffix}"
        readings_path.write_bytes(data)
        machines_path = _machines_path()
        if machines is not None:
            machines_path = Path(folder) / "machines.toml"
            machines_path.write_text(machines, encoding="utf-8")
        arguments = ["evaluate", str(machines_path), str(readings_path)]
        if options.separator:
            arguments += ["--separator", options.separator, "--decimal", options.decimal]
        if options.machine:
            arguments += ["--machine", options.machine]
        if output:
            arguments += ["--output", str(Path(folder) / output)]
        status, out, err = run_cli(arguments)
        assert status in (0, 2), err
        if status == 2:
            assert out == ""
            assert err.startswith("error: ") and err.endswith("\n")
            assert err.count("\n") == 1, err
            return
        # stderr holds only the reader's notes, one line each (issue 10); stdout the data
        assert all(line.startswith("note: ") for line in err.splitlines()), err
        expected = len(read_readings(readings_path, options).frame)
        if output is None:
            table = list(csv.reader(io.StringIO(out, newline="")))
            assert table[0][: len(OUTPUT_COLUMNS)] == list(OUTPUT_COLUMNS)
            assert len(table) - 1 == expected
        elif output.endswith(".csv"):
            written = (Path(folder) / output).read_text(encoding="utf-8")
            assert len(list(csv.reader(io.StringIO(written, newline="")))) - 1 == expected
        else:
            sheet = openpyxl.load_workbook(Path(folder) / output, read_only=True).worksheets[0]
            assert sum(1 for _ in sheet.iter_rows()) - 1 == expected


# --- failures the fuzzing found, kept as plain tests ---------------------------------------------
def test_rows_that_leave_out_their_trailing_empty_cells_are_read():
    """Found: when no row was as long as the header, pandas refused the whole file."""
    data = b"machine,speed [rpm],current [uA],note\nd,300,5\nd,310\n"
    frame = read_readings(data, name="short.csv").frame
    assert frame["note"].tolist() == ["", ""]
    assert frame["flags"].tolist() == ["", "missing_value"]
    # hand-worked: 300 rpm / 60 = 5 rev/s; 310 / 60 = 5.1667 rev/s
    assert frame["speed_rev_s"].tolist() == pytest.approx([5.0, 310 / 60])


def test_a_value_that_overflows_in_si_units_is_flagged_not_infinite():
    """Found: 1e308 kPa became an infinite pressure, kept without a flag."""
    data = (b"machine,speed [rpm],current [uA],pressure [kPa],voltage [kV],t [min]\n"
            b"d,300,5,1e308,1e308,1e308\nd,300,5,100,80,1\n")
    frame = read_readings(data, name="huge.csv").frame
    assert frame["flags"].tolist() == ["not_a_number;bad_time", ""]
    assert frame["pressure_pa"].isna().tolist() == [True, False]
    assert frame["voltage_v"].isna().tolist() == [True, False]
    # hand-worked: 1 min = 60 s
    assert frame["elapsed_s"].tolist()[1] == pytest.approx(60.0)


def test_messages_about_headers_stay_on_one_line_and_short():
    """Found: a header with a line break, or of 5,000 characters, went into the message."""
    data = b'machine,"two\nlines",' + b"h" * 5_000 + b"\nd,1,2\n"
    with pytest.raises(InputError) as raised:
        read_readings(data, name="headers.csv")
    message = str(raised.value)
    assert "'two\\nlines'" in message and "\n" not in message
    assert "'" + "h" * 60 + "…'" in message and len(message) < 500


def test_an_unclosed_quote_names_its_line():
    data = b'machine,speed [rpm],current [uA],note\nd,300,5,x\nd,300,5,"open\nd,1,2,x\n'
    with pytest.raises(InputError, match=r"quote.csv: line 3 opens a quoted cell \(\"\) that is "
                                         "never closed"):
        read_readings(data, name="quote.csv")


# --- the budget itself ----------------------------------------------------------------------------
def test_a_normal_run_fuzzes_at_least_two_thousand_cases():
    """The per-test budgets add up to the issue's minimum, whatever the profile."""
    assert sum(BUDGETS.values()) >= NORMAL_RUN_CASES, BUDGETS
    assert len(BUDGETS) >= 10


def test_a_normal_run_fuzzes_at_least_a_thousand_bundles():
    """Issue 12: at least 1,000 generated bundles per run, in the tests that import bundles."""
    bundles = {name: budget for name, budget in BUDGETS.items() if "bundle" in name}
    assert sum(bundles.values()) >= NORMAL_RUN_CASES_OF_BUNDLES, bundles


def test_a_machines_file_nested_deeper_than_any_fuzzed_one_is_an_input_error():
    with pytest.raises(InputError, match="fuzz.toml"):
        parse_machines_text("a = " + "[" * 100_000 + "]" * 100_000, "fuzz.toml")
