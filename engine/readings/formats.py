"""File formats and sheets: text encodings, CSV dialects, XLSX workbooks, into one raw table."""

from __future__ import annotations

import codecs
import csv
import io
import itertools
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

import numpy as np
import pandas as pd

from engine.errors import InputError
from engine.readings.headers import (
    _check_usable,
    _columns_of,
    _find_header_row,
    _is_number,
    _looks_like_units_row,
    _units_row_cells,
)
from engine.readings.options import (
    _LABEL_FIELDS,
    _NUMERIC_FIELDS,
    _SEPARATOR_NAMES,
    HEADER_SEARCH_ROWS,
    MAX_SHEET_CELLS,
    MAX_SHEET_COLUMNS,
    SAMPLE_BYTES,
    ReadOptions,
    _check_options,
    _quoted,
    _Table,
)
from engine.readings.structure import layout


# --- Sources --------------------------------------------------------------------------------
@dataclass
class _Input:
    name: str
    path: Path | None
    data: bytes | None
    sample: bytes
    truncated: bool

    def open(self) -> BinaryIO | Path:
        return self.path if self.path is not None else io.BytesIO(self.data or b"")


def _load(source: object, name: str | None) -> _Input:
    if isinstance(source, (str, os.PathLike)):
        path = Path(source)
        label = name or str(source)
        try:
            with path.open("rb") as handle:
                head = handle.read(SAMPLE_BYTES + 1)
        except FileNotFoundError:
            raise InputError(f"{label}: file not found") from None
        except IsADirectoryError:
            raise InputError(f"{label}: is a folder, not a file") from None
        except OSError as error:
            raise InputError(f"{label}: cannot be opened ({error.strerror})") from None
        return _Input(label, path, None, head[:SAMPLE_BYTES], len(head) > SAMPLE_BYTES)
    if isinstance(source, (bytes, bytearray, memoryview)):
        data = bytes(source)
        label = name or "data"
    elif hasattr(source, "read"):
        label = name or str(getattr(source, "name", "") or "uploaded file")
        if hasattr(source, "seek"):
            try:
                source.seek(0)
            except (OSError, ValueError):
                pass
        content = source.read()
        data = content.encode("utf-8") if isinstance(content, str) else bytes(content)
    else:
        raise InputError(f"cannot read {type(source).__name__}: give a file path or bytes")
    return _Input(label, None, data, data[:SAMPLE_BYTES], len(data) > SAMPLE_BYTES)


#: Encodings the detection chooses among: what loggers, meters and spreadsheets write.
CANDIDATE_ENCODINGS = ("utf_8", "utf_16", "cp1252", "latin_1")
_ENCODING_NAMES = {"utf_8": "utf-8", "ascii": "utf-8", "utf_16": "utf-16", "cp1252": "cp1252",
                   "latin_1": "latin-1"}


def _check_text_sample(inp: _Input, encoding: str) -> None:
    sample = inp.sample
    if not sample.strip():
        raise InputError(f"{inp.name}: the file is empty")
    if codecs.lookup(encoding).name.startswith("utf-16"):
        text = sample[: len(sample) - len(sample) % 2].decode(encoding, errors="replace")
        if not text.strip("\ufeff \r\n\t"):
            raise InputError(f"{inp.name}: the file is empty")
        controls = len(re.findall(r"[\x00-\x08\x0e-\x1f\x7f]", text))
        if controls > 0.01 * len(text):
            raise InputError(
                f"{inp.name}: this is not a text (CSV) file or an XLSX workbook; it looks like "
                "binary data. Save the readings as CSV or XLSX"
            )
        return
    controls = sum(sample.count(bytes([byte])) for byte in (*range(0, 9), *range(14, 32), 127))
    if b"\x00" in sample or controls > 0.01 * len(sample):
        raise InputError(
            f"{inp.name}: this is not a text (CSV) file or an XLSX workbook; it looks like "
            "binary data. Save the readings as CSV or XLSX"
        )


def _detect_encoding(inp: _Input) -> str:
    """The text encoding of the file, from its byte-order mark or by charset-normalizer.

    A sample that is valid UTF-8 is UTF-8. Otherwise the library is asked to choose among
    :data:`CANDIDATE_ENCODINGS` only: on a few lines of numbers an open choice often lands
    on a rarer code page that decodes the same bytes differently.
    """
    sample = inp.sample
    if sample.startswith(codecs.BOM_UTF8):
        return "utf-8-sig"
    if sample.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        return "utf-16"
    if inp.truncated and b"\n" in sample:
        sample = sample[: sample.rindex(b"\n") + 1]  # not in the middle of a character
    try:
        sample.decode("utf-8")
    except UnicodeDecodeError:
        pass
    else:
        # Valid UTF-8 with any byte above 127 is almost never legacy text by chance; the
        # library may still prefer a code page for rare characters, so UTF-8 is kept.
        return "utf-8"
    import charset_normalizer  # only for a sample that is not UTF-8

    best = charset_normalizer.from_bytes(sample, cp_isolation=list(CANDIDATE_ENCODINGS)).best()
    if best is None:
        return "latin-1"  # decodes any bytes; the binary check has run on the raw bytes
    return _ENCODING_NAMES.get(best.encoding, best.encoding)


def _sample_text(inp: _Input, encoding: str) -> str:
    sample = inp.sample
    if codecs.lookup(encoding).name.startswith("utf-16"):
        sample = sample[: len(sample) - len(sample) % 2]
    text = sample.decode(encoding, errors="replace").lstrip("\ufeff")
    if inp.truncated and "\n" in text:
        text = text[: text.rindex("\n") + 1]
    return text


def _records(text: str, separator: str, limit: int = 200) -> list[list[str]]:
    reader = csv.reader(io.StringIO(text), delimiter=separator)
    records = []
    try:
        for record in reader:
            records.append(record)
            if len(records) >= limit:
                break
    except csv.Error:
        pass
    return records


def _detect_separator(text: str) -> str:
    best, best_score = ",", (-1.0, 0)
    for separator in ("\t", ";", ","):
        counts = [len(record) for record in _records(text, separator, 60) if record]
        split = [count for count in counts if count >= 2]
        if not split:
            continue
        values, frequency = np.unique(split, return_counts=True)
        mode = int(values[np.argmax(frequency)])
        score = (float(frequency.max()) / len(counts), mode)
        if score > best_score:
            best, best_score = separator, score
    return best


_COMMA_NUMBER = re.compile(r"^[+-]?\d+,\d+$|^[+-]?\d{1,3}(\.\d{3})+,\d+$")
_POINT_NUMBER = re.compile(r"^[+-]?\d*\.\d+([eE][+-]?\d+)?$")


def _detect_decimal(records: list[list[str]], positions: list[int], separator: str) -> str:
    if separator == "," or not positions:
        return "."
    comma = point = 0
    for record in records:
        for position in positions:
            if position < len(record):
                cell = record[position].strip()
                comma += bool(_COMMA_NUMBER.match(cell))
                point += bool(_POINT_NUMBER.match(cell))
    return "," if comma > point else "."


def _numeric_in_sample(records: list[list[str]], position: int) -> bool:
    cells = [r[position] for r in records if position < len(r) and r[position].strip()]
    return bool(cells) and all(_is_number(cell) for cell in cells)


def _is_text(series: pd.Series) -> bool:
    return pd.api.types.is_string_dtype(series.dtype) or series.dtype == object


def _read_csv(inp: _Input, options: ReadOptions, wanted: Sequence[str]) -> _Table:
    messages: list[str] = []
    decisions: list[str] = []
    encoding = options.encoding or _detect_encoding(inp)
    _check_text_sample(inp, encoding)
    text = _sample_text(inp, encoding)
    separator = options.separator or _detect_separator(text)
    records = _records(text, separator)
    header_index = _find_header_row(records, wanted, options.mapping)
    headers = [cell.strip() for cell in records[header_index]] if records else []
    column_notes: list[str] = []
    columns = _columns_of(headers, options.mapping, wanted, inp.name, column_notes)
    _check_usable(inp.name, headers, columns, wanted, column_notes)
    units_row = options.units_row
    below = records[header_index + 1] if len(records) > header_index + 1 else None
    if units_row is None:
        units_row = below is not None and _looks_like_units_row(below, columns)
    unit_cells = _units_row_cells(below, columns) if units_row and below is not None else {}
    data_records = records[header_index + 1 + int(units_row):]
    numeric_positions = [c.position for n, c in columns.items() if n in _NUMERIC_FIELDS]
    decimal = options.decimal or _detect_decimal(data_records, numeric_positions, separator)
    if decimal == separator:
        raise InputError(f"{inp.name}: the separator and the decimal mark are both '{separator}'")
    width = max([len(headers), *(len(record) for record in data_records)])
    # Text columns are left to the C parser's inference (forcing str on a column of a million
    # distinct times costs more than the rest of the read); only a label column that looks
    # numeric in the sample is read as text at once, so that '007' stays '007'.
    label_positions = [c.position for n, c in columns.items() if n in _LABEL_FIELDS]
    as_text = {p for p in label_positions if _numeric_in_sample(data_records, p)}
    skipped = header_index + 1 + int(units_row)
    # Every column is read (a repeated header further down may put the fields elsewhere);
    # blank lines are kept as empty rows so that each row's line number is known.
    kwargs = dict(
        sep=separator, decimal=decimal, header=None, names=list(range(width)),
        usecols=list(range(width)), skiprows=skipped,
        dtype={position: str for position in as_text}, keep_default_na=False,
        na_values=[""], nrows=options.max_rows + 1, engine="c", low_memory=False,
        skip_blank_lines=False,
    )
    frame = None
    first_line = skipped + 1  # the file's line that holds the first data row
    if _plain_preamble(text, skipped):
        frame = _arrow_read_csv(inp, encoding, separator, decimal, skipped, width,
                                label_positions, options.max_rows + 1)
    else:
        # A quoted line break above the data (a header cell of two lines): the C parser's
        # skiprows counts such a cell's lines in some layouts and not in others, so it starts
        # at the first data row's byte instead and skips nothing.
        start = _data_start(inp, text, separator, encoding, skipped)
        if start is not None:
            kwargs.update(skiprows=0, _start=start[0])
            if start[2] != encoding:  # UTF-16 read on from the middle: its byte order named
                kwargs["_encoding"] = start[2]
            first_line = start[1] + 1
    try:
        if frame is None:
            frame = _pandas_read_csv(inp, encoding, kwargs)
    except UnicodeDecodeError:
        if options.encoding is not None:
            raise InputError(
                f"{inp.name}: the file is not valid {options.encoding} text; "
                "try another encoding, e.g. 'latin-1'"
            ) from None
        messages.append(
            f"{inp.name}: the start of the file is {encoding} but later bytes are not; "
            "read the whole file as Latin-1"
        )
        encoding = "latin-1"
        frame = _pandas_read_csv(inp, encoding, kwargs)
    # A label column whose later cells turned out to be numbers only: read it again as text.
    again = [
        p for p in label_positions if p not in as_text and p in frame.columns
        and not _is_text(frame[p]) and frame[p].notna().any()
    ]
    if again:
        text_frame = _pandas_read_csv(
            inp, encoding, {**kwargs, "usecols": again, "dtype": {p: str for p in again}})
        for position in again:
            frame[position] = text_frame[position]
    if len(frame) > options.max_rows:
        raise InputError(
            f"{inp.name}: has more than {options.max_rows:,} data rows, the most read from one "
            "file; split it into smaller files"
        )
    lines = np.arange(first_line, first_line + len(frame), dtype=np.int64)
    if header_index:
        messages.append(f"{inp.name}: skipped {header_index} line(s) above the header")
    decisions.append(
        f"{inp.name}: read as CSV: encoding {encoding}, separator "
        f"{_SEPARATOR_NAMES.get(separator, repr(separator))}, decimal "
        f"{'comma' if decimal == ',' else 'point'}, header on line {header_index + 1}"
        + (" (the lines above it are notes, not readings)" if header_index else "")
        + (f", units on line {header_index + 2}" if units_row else "")
    )
    decisions.extend(column_notes)
    file_format = {
        "file_type": "csv", "separator": separator, "decimal": decimal, "encoding": encoding,
        "units_row": bool(units_row), "sheet": None, "header_row": header_index + 1,
    }
    found = layout(frame, lines, columns, unit_cells, options, wanted, inp.name, "line")
    table = _Table(found.data, columns, unit_cells, headers, file_format,
                   messages + decisions + found.decisions + found.messages,
                   len(found.lines), found.lines, decisions + found.decisions,
                   records[:header_index], 1)
    return table


#: A cell the C parser may read as a number or a truth value (then its column is no text):
#: a column of such cells that Arrow did not read as plain numbers goes to the C parser.
_NUMBER_LIKE = (r"(?i)^\s*(?:[+-]?(?:\d+\.?\d*|\.\d+)(?:e[+-]?\d+)?|[+-]?inf(?:inity)?"
                r"|true|false)\s*$")


def _plain_preamble(text: str, skipped: int) -> bool:
    """Whether the lines above the data hold no quote (a quoted line break among them would
    make Arrow and the C parser count lines differently)."""
    return '"' not in "\n".join(text.split("\n")[:skipped])


def _arrow_read_csv(inp: _Input, encoding: str, separator: str, decimal: str, skipped: int,
                    width: int, label_positions: Sequence[int], most_rows: int
                    ) -> pd.DataFrame | None:
    """The table as the C parser reads it, read by Arrow (several times quicker); ``None``
    where the file is not plain enough to be sure of that, and the C parser reads it.

    Taken only for UTF-8 text with a decimal point. Every cell is read as text first; a
    column whose cells are all plain numbers becomes float64 (an empty column too), label
    columns stay text, and a column of text stays text unless every cell is something the C
    parser would read as a number or a truth value (spaces around a number, ``inf``,
    ``True``). The C parser reads the file instead, and its reading decides, when: such a
    column is found; a cell says ``nan`` or ``inf``; a row has more or fewer fields than
    the header (Arrow refuses it); there are fewer rows than lines (a quoted line break, a
    quote never closed); a quote stands above the data; or there are more than
    ``most_rows`` data rows (refused after the C parser's reading). Numbers are parsed by
    Arrow, correctly rounded; the C parser's converter can differ in the last binary digit.
    """
    import pyarrow as pa  # imported when a CSV is read
    import pyarrow.compute as pc
    from pyarrow import csv as arrow_csv

    if encoding not in ("utf-8", "utf-8-sig") or decimal != "." or width < 2:
        return None
    names = [str(position) for position in range(width)]
    try:
        reader = arrow_csv.open_csv(
            inp.open() if inp.path is None else str(inp.path),
            read_options=arrow_csv.ReadOptions(column_names=names, skip_rows=skipped),
            parse_options=arrow_csv.ParseOptions(delimiter=separator, quote_char='"',
                                                 double_quote=True, escape_char=False,
                                                 newlines_in_values=True,
                                                 ignore_empty_lines=False),
            convert_options=arrow_csv.ConvertOptions(
                column_types={name: pa.string() for name in names}, null_values=[""],
                strings_can_be_null=True, quoted_strings_can_be_null=True))
        batches = []
        rows = 0
        for batch in reader:
            batches.append(batch)
            rows += batch.num_rows
            if rows >= most_rows:
                return None  # too many rows: the C parser reads as many as it may, and refuses
        table = pa.Table.from_batches(batches, schema=reader.schema)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, OSError, ValueError):
        return None
    # One reading per line, as the line numbers given to the rows assume: a quoted line break
    # (or a quote never closed) makes fewer rows than lines, and the C parser reads the file.
    if table.num_rows != _line_count(inp) - skipped:
        return None
    columns: dict[int, object] = {}
    for position, name in enumerate(names):
        cells = table.column(name)
        if cells.null_count == len(cells):
            columns[position] = np.full(len(cells), np.nan)
            continue
        numbers = None
        if position not in label_positions:
            try:
                numbers = pc.cast(cells, pa.float64())
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
                numbers = None
        if numbers is not None:
            values = numbers.to_numpy()
            # Arrow reads 'nan' and 'inf' as numbers; the C parser does not read 'nan' (a
            # text cell, flagged): such a file is left to it.
            if not np.isfinite(values[~cells.is_null().to_numpy(zero_copy_only=False)]).all():
                return None
            columns[position] = values
            continue
        if position not in label_positions and _all_number_like(cells, pc):
            return None
        columns[position] = cells.to_pandas()
    return pd.DataFrame(columns, index=pd.RangeIndex(table.num_rows))


def _all_number_like(cells, pc) -> bool:
    """Whether every cell of a text column is one the C parser may read as a number or a
    truth value (:data:`_NUMBER_LIKE`); the first cells usually settle it."""
    head = cells.slice(0, 1000)
    if not pc.all(pc.match_substring_regex(head, _NUMBER_LIKE)).as_py():
        return False
    return bool(pc.all(pc.match_substring_regex(cells, _NUMBER_LIKE)).as_py())


def _line_count(inp: _Input) -> int:
    """Lines of the file: its line feeds, and one more for a last line without one."""
    count = 0
    last = b"\n"
    with (inp.path.open("rb") if inp.path is not None else io.BytesIO(inp.data or b"")
          ) as handle:
        for block in iter(lambda: handle.read(1 << 24), b""):
            count += block.count(b"\n")
            last = block[-1:]
    return count + (last != b"\n")


def _data_start(inp: _Input, text: str, separator: str, encoding: str,
                skipped: int) -> tuple[int, int, str] | None:
    """Byte offset and line count of the file's first ``skipped`` records (quoted line breaks
    inside them counted), and the encoding to read on from there with; None where that is not
    sure (records that do not end within the text read, an encoding not known here)."""
    name = codecs.lookup(encoding).name
    sample = inp.sample
    if name in ("utf-8", "utf-8-sig", "cp1252", "iso8859-1", "latin-1", "ascii"):
        bom = len(codecs.BOM_UTF8) if sample.startswith(codecs.BOM_UTF8) else 0
        unit = "utf-8" if name == "utf-8-sig" else encoding
    elif name.startswith("utf-16"):
        # From the middle of the file the byte order is no longer told by a mark: name it.
        if sample.startswith(codecs.BOM_UTF16_LE):
            bom, unit = 2, "utf-16-le"
        elif sample.startswith(codecs.BOM_UTF16_BE):
            bom, unit = 2, "utf-16-be"
        elif name in ("utf-16-le", "utf-16-be"):
            bom, unit = 0, name
        else:
            return None
    else:
        return None
    reader = csv.reader(io.StringIO(text), delimiter=separator)
    try:
        for _number in range(skipped):
            next(reader)
    except (StopIteration, csv.Error):
        return None
    line_count = reader.line_num
    prefix = "".join(line + "\n" for line in text.split("\n")[:line_count])
    if len(prefix) > len(text):
        return None
    return (bom + len(prefix.encode(unit)), line_count,
            unit if name.startswith("utf-16") else encoding)


def _pandas_read_csv(inp: _Input, encoding: str, kwargs: dict) -> pd.DataFrame:
    start = kwargs.get("_start", 0)
    if not start:
        return _pandas_read_from(inp.open(), inp, encoding, kwargs)
    source = inp.open()
    with source.open("rb") if isinstance(source, Path) else source as handle:
        handle.seek(start)
        return _pandas_read_from(handle, inp, encoding, kwargs)


def _pandas_read_from(source, inp: _Input, encoding: str, kwargs: dict) -> pd.DataFrame:
    try:
        return pd.read_csv(source, encoding=kwargs.get("_encoding", encoding),
                           **{key: value for key, value in kwargs.items()
                              if key not in ("_start", "_encoding")})
    except UnicodeDecodeError:
        raise
    except pd.errors.EmptyDataError:
        return pd.DataFrame({position: pd.Series(dtype=object) for position in kwargs["usecols"]})
    except pd.errors.ParserError as error:
        if "Too many columns specified" in str(error) and kwargs["usecols"] is not None:
            # pandas refuses usecols when no line is as long as the header (rows that leave
            # out their trailing empty cells): read every column, then keep the used ones.
            frame = _pandas_read_csv(inp, encoding, {**kwargs, "usecols": None})
            wanted = [column for column in kwargs["usecols"] if column in frame.columns]
            return frame[wanted]
        found = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(error))
        if found:
            expected, line, saw = found.groups()
            raise InputError(
                f"{inp.name}: line {line} has {saw} fields where the others have {expected}; "
                f"check the separator ('{kwargs['sep']}') and the quotes on that line"
            ) from None
        found = re.search(r"EOF inside string starting at row (\d+)", str(error))
        if found:  # pandas counts lines from 0
            raise InputError(
                f"{inp.name}: line {int(found.group(1)) + 1} opens a quoted cell (\") that is "
                "never closed; close the quote or remove it (a file cut short ends like this)"
            ) from None
        raise InputError(f"{inp.name}: cannot be read as CSV ({error})") from None
    except (ValueError, OSError, MemoryError) as error:
        raise InputError(f"{inp.name}: cannot be read as CSV ({error})") from None


#: Smallest size of one cell in a sheet's XML [bytes] (``<c r="A1"><v>0</v></c>`` is 25): a
#: sheet of N bytes holds at most N / 10 cells, so it can use at most that many shared strings.
_MIN_CELL_BYTES = 10
#: Largest shared-strings part accepted, uncompressed [bytes].
MAX_SHARED_STRINGS_BYTES = 256 * 1024 * 1024


def check_workbook_parts(inp: _Input) -> None:
    """Refuse a workbook whose shared-strings table is far larger than its sheets could use.

    Reading a workbook reads its whole shared-strings table first; a file of a few hundred
    kilobytes can hold millions of entries that no cell refers to and cost minutes and
    gigabytes. The table's declared entries (or its size) are bounded by the cells the
    sheets' XML could hold, before anything is parsed.

    Raises
    ------
    InputError
        Naming the file and what to do.
    """
    import re
    import zipfile

    try:
        with zipfile.ZipFile(inp.open()) as archive:
            parts = {info.filename: info for info in archive.infolist()}
            strings = parts.get("xl/sharedStrings.xml")
            if strings is None:
                return
            sheet_bytes = sum(info.file_size for name, info in parts.items()
                              if name.startswith("xl/worksheets/") and name.endswith(".xml"))
            most_cells = sheet_bytes // _MIN_CELL_BYTES + 1000
            with archive.open(strings) as handle:
                head = handle.read(4096).decode("utf-8", "replace")
    except (zipfile.BadZipFile, OSError, ValueError, KeyError):
        return  # not a zip at all: the workbook reader says so
    declared = re.search(r'uniqueCount="(\d+)"', head)
    entries = int(declared.group(1)) if declared else None
    if strings.file_size > MAX_SHARED_STRINGS_BYTES or (
            entries is not None and entries > most_cells) or (
            entries is None and strings.file_size > 64 * (sheet_bytes + 1_000_000)):
        raise InputError(
            f"{inp.name}: the workbook's table of texts ("
            + (f"{entries:,} entries" if entries is not None else
               f"{strings.file_size / 1e6:,.0f} MB")
            + f") is far larger than its sheets could use (at most about {most_cells:,} "
            "cells); it is damaged or not a spreadsheet's own file. Open it in a spreadsheet "
            "program and save it again as XLSX, or export the readings as CSV")


def _read_xlsx(inp: _Input, options: ReadOptions, wanted: Sequence[str]) -> _Table:
    check_workbook_parts(inp)
    try:
        book = pd.ExcelFile(inp.open(), engine="openpyxl")
    except Exception as error:  # noqa: BLE001 - any failure of a corrupt workbook
        raise InputError(
            f"{inp.name}: is not a readable XLSX workbook ({type(error).__name__}); "
            "open it in a spreadsheet program and save it again as XLSX or CSV"
        ) from None
    decisions: list[str] = []
    with book:
        sheets = list(book.sheet_names)
        sheet = options.sheet
        if sheet is None:
            sheet = _readings_sheet(book, sheets, wanted, options, inp.name, decisions)
        elif isinstance(sheet, int) and not isinstance(sheet, bool):
            if not 0 <= sheet < len(sheets):
                raise InputError(
                    f"{inp.name}: has {len(sheets)} sheet(s); sheet number {sheet} does not exist"
                )
            sheet = sheets[sheet]
        elif sheet not in sheets:
            raise InputError(
                f"{inp.name}: has no sheet '{sheet}'; its sheets are "
                + ", ".join(f"'{name}'" for name in sheets)
            )
        if sheet is None:
            raise InputError(f"{inp.name}: the workbook has no sheets")
        try:
            raw, row_numbers = _sheet_frame(
                book.book[sheet], options.max_rows + HEADER_SEARCH_ROWS + 2, inp.name, sheet)
        except InputError:
            raise
        except Exception as error:  # noqa: BLE001 - any failure inside a corrupt sheet
            raise InputError(
                f"{inp.name}: sheet '{sheet}' cannot be read ({type(error).__name__})"
            ) from None
    if raw.empty:
        raise InputError(f"{inp.name}: sheet '{sheet}' is empty")
    records = _sheet_records(raw.head(HEADER_SEARCH_ROWS + 2))
    header_index = _find_header_row(records, wanted, options.mapping)
    headers = records[header_index]
    column_notes: list[str] = []
    try:
        columns = _columns_of(headers, options.mapping, wanted, inp.name, column_notes)
        _check_usable(inp.name, headers, columns, wanted, column_notes)
    except InputError as error:
        if len(sheets) > 1:
            raise InputError(
                f"{error} (sheet '{sheet}'; the workbook's sheets are "
                + ", ".join(f"'{name}'" for name in sheets) + ": choose one with --sheet on "
                "the command line or 'Sheet' on the Readings page)") from None
        raise
    units_row = options.units_row
    below = records[header_index + 1] if len(records) > header_index + 1 else None
    if units_row is None:
        units_row = below is not None and _looks_like_units_row(below, columns)
    unit_cells = _units_row_cells(below, columns) if units_row and below is not None else {}
    first = header_index + 1 + int(units_row)
    body = raw.iloc[first:].reset_index(drop=True)
    messages = []
    if header_index:
        messages.append(f"{inp.name}: skipped {header_index} row(s) above the header")
    decisions.append(
        f"{inp.name}: read as XLSX, sheet '{sheet}', header in row "
        f"{row_numbers[header_index]}"
        + (" (the rows above it are titles or notes, not readings)" if header_index else "")
        + (", units in the row below it" if units_row else "")
    )
    decisions.extend(column_notes)
    file_format = {
        "file_type": "xlsx", "separator": None, "decimal": options.decimal, "encoding": None,
        "units_row": bool(units_row), "sheet": sheet,
        "header_row": int(row_numbers[header_index]),
    }
    found = layout(body, row_numbers[first:], columns, unit_cells, options, wanted, inp.name,
                   "row")
    return _Table(found.data, columns, unit_cells, headers, file_format,
                  messages + decisions + found.decisions + found.messages, len(found.lines),
                  found.lines, decisions + found.decisions, records[:header_index],
                  int(row_numbers[0]) if len(row_numbers) else 1)


def workbook_sheets(source: str | os.PathLike | bytes | BinaryIO, name: str | None = None
                    ) -> list[str]:
    """The sheet names of an XLSX workbook, in order; ``[]`` for a file that is not one.

    Parameters
    ----------
    source : path, bytes or binary file-like
        The file.
    name : str, optional
        Its name (a name ending in ``.xlsx`` marks a workbook).

    Returns
    -------
    list of str
        The sheets, for a choice of sheet; ``[]`` for CSV text or an unreadable workbook.
    """
    try:
        inp = _load(source, name)
    except InputError:
        return []
    if not inp.sample.startswith(b"PK\x03\x04"):
        return []
    try:
        check_workbook_parts(inp)
        with pd.ExcelFile(inp.open(), engine="openpyxl") as book:
            return [str(sheet) for sheet in book.sheet_names]
    except Exception:  # noqa: BLE001 - a damaged workbook is refused when it is read
        return []


def _sheet_records(head: pd.DataFrame) -> list[list[str]]:
    return [["" if pd.isna(value) else str(value).strip() for value in row]
            for row in head.itertuples(index=False)]


def _readings_sheet(book: pd.ExcelFile, sheets: list[str], wanted: Sequence[str],
                    options: ReadOptions, source: str, decisions: list[str]) -> str | None:
    """The first sheet whose header names the columns a readings file (or log) needs."""
    if len(sheets) <= 1:
        return sheets[0] if sheets else None
    for sheet in sheets:
        try:
            head, _rows = _sheet_frame(book.book[sheet], HEADER_SEARCH_ROWS + 2, source, sheet)
        except InputError:
            raise
        except Exception:  # noqa: BLE001 - a damaged sheet is not the readings sheet
            continue
        records = _sheet_records(head)
        if not records:
            continue
        headers = records[_find_header_row(records, wanted, options.mapping)]
        try:
            columns = _columns_of(headers, options.mapping, wanted, source)
            _check_usable(source, headers, columns, wanted)
        except InputError:
            continue
        decisions.append(
            f"{source}: the readings are on sheet '{sheet}' (the workbook's sheets: "
            + ", ".join(f"'{name}'" for name in sheets) + "); choose another with --sheet "
            "or 'Sheet' on the Readings page")
        return sheet
    return sheets[0]


def _sheet_frame(worksheet: object, most_rows: int, source: str, sheet: str
                 ) -> tuple[pd.DataFrame, np.ndarray]:
    """The non-empty rows of a read-only worksheet and their row numbers: stored values.

    Read here rather than by ``pandas.read_excel``, which widens every row to the widest one
    (one crafted cell at XFD1048576 makes 17 billion cells) and refuses a whole sheet for one
    cell whose value overflows; here a far-away cell is refused with a message and an
    infinite value is kept, to be flagged. Formulas are never evaluated.
    """
    worksheet.reset_dimensions()  # type: ignore[attr-defined] - declared sizes may lie
    rows: list[tuple] = []
    numbers: list[int] = []
    width = 0
    values_by_row = worksheet.iter_rows(values_only=True)  # type: ignore[attr-defined]
    for number, values in enumerate(itertools.islice(values_by_row, most_rows), 1):
        if len(values) > MAX_SHEET_COLUMNS:
            raise InputError(
                f"{source}: sheet '{sheet}', row {number} has a cell beyond column "
                f"{MAX_SHEET_COLUMNS:,}; delete the cells far to the right of the readings "
                "(or save the sheet as CSV)"
            )
        if any(value is not None and value != "" for value in values):
            rows.append(values)
            numbers.append(number)
            width = max(width, len(values))
            if len(rows) * width > MAX_SHEET_CELLS:
                raise InputError(
                    f"{source}: sheet '{sheet}' holds more than {MAX_SHEET_CELLS:,} cells "
                    "(rows times columns); save it as CSV or split it into smaller files"
                )
    frame = pd.DataFrame([values + (None,) * (width - len(values)) for values in rows])
    return frame, np.asarray(numbers, dtype=np.int64)


def _read_table(source: object, options: ReadOptions | None, name: str | None,
                wanted: Sequence[str]) -> tuple[_Input, ReadOptions, _Table]:
    options = _check_options(options or ReadOptions())
    inp = _load(source, name)
    if not inp.sample:
        raise InputError(f"{inp.name}: the file is empty")
    lower = inp.name.casefold()
    if inp.sample.startswith(b"PK\x03\x04") or lower.endswith((".xlsx", ".xlsm")):
        table = _read_xlsx(inp, options, wanted)
    elif inp.sample.startswith(b"\xd0\xcf\x11\xe0"):
        raise InputError(
            f"{inp.name}: is an old-style (.xls) workbook; save it as XLSX or CSV"
        )
    else:
        table = _read_csv(inp, options, wanted)
    if table.rows > options.max_rows:
        raise InputError(
            f"{inp.name}: has more than {options.max_rows:,} data rows, the most read from one "
            "file; split it into smaller files"
        )
    if table.rows == 0:
        raise InputError(f"{inp.name}: has a header but no data rows")
    unused = [
        _quoted(header) for position, header in enumerate(table.headers)
        if str(header).strip() and position not in {c.position for c in table.columns.values()}
    ]
    if unused:
        table.messages.append(f"{inp.name}: columns not used: {', '.join(unused)}")
    table.messages.append(
        f"{inp.name}: columns used: "
        + ", ".join(f"{n} <- {_quoted(c.header)}" for n, c in table.columns.items())
    )
    return inp, options, table


