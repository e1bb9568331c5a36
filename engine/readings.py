"""Reading files of readings and environment logs: CSV and XLSX, columns, units, flags, merge.

A readings file has one row per reading, with columns for the machine, the time, the speed,
the current and, optionally, the air (humidity, temperature, pressure), the session, the
terminal voltage and a note. An environment log (a humidity logger beside the machine) has
time, humidity, temperature and pressure columns, on its own clock and interval.

What is detected, and how a caller overrides it (:class:`ReadOptions`):

- the file type: XLSX (a zip container) or CSV text;
- for CSV, from the first :data:`SAMPLE_BYTES` of the file: the encoding (UTF-8 with or
  without a byte-order mark, otherwise Latin-1), the separator (comma, semicolon or tab: the
  one that splits the lines into the most consistent number of fields), the decimal mark
  (a comma when numbers such as ``21,5`` outnumber numbers such as ``21.5`` in the numeric
  columns; never with a comma separator), the header row (the first row, within the first 30,
  whose cells name at least two known columns; rows above it are skipped and said so) and a
  units row (the row below the header when its cells in the numeric columns are all units,
  e.g. ``rpm``, ``[uA]``);
- the columns, by their headers: :data:`ALIASES` lists the accepted spellings of every field,
  matched without regard to case, spaces and punctuation. A unit may follow in brackets
  (``speed [rpm]``, ``I (uA)``), after the name (``Temp C``, ``current_uA``) or be implied
  by the name (``RPM``). A caller's mapping (source header -> field) takes precedence.
- the unit of each column: the header's, else the units row's, else the caller's, else the
  default of :data:`DEFAULT_UNITS` (said so in the messages). A speed in a rotation unit
  (rpm, rev/s, Hz) fills ``speed_rev_s``; in a linear unit (m/s) it fills ``belt_speed_m_s``.
- the time format: ISO 8601 (time zones kept), day-first or month-first dates with ``/``,
  ``.`` or ``-`` (decided from values with a day above 12; when none has one the dates are
  ambiguous and read day first unless the caller says otherwise; the messages say which),
  a time of day without a date (seconds since midnight), or plain numbers (elapsed seconds,
  or the duration unit of the header, e.g. ``time [min]``). A header unit that names a time
  zone (``time [UTC]``, ``time [Europe/Paris]``) localises times that carry none. Separate
  ``date`` and ``time`` columns are joined.

Nothing is lost and nothing is hidden. Every data row of the file comes out, in file order,
numbered 1..n in ``row`` (data rows only: the header, a units row, rows above the header and
completely blank lines are not counted), with a ``flags`` text listing what is wrong with it
from :data:`engine.columns.FLAG_CODES`. Flagged values are kept as read. A file that cannot be
read at all is an :class:`~engine.errors.InputError` naming the file and saying why.

Times: naive times stay naive, times with a UTC offset keep it (times with different offsets,
e.g. across a daylight-saving change, are converted to UTC and the messages say so).
``elapsed_s`` is, for clock times, the seconds since the earliest valid time of the file; for
files whose time column holds numbers, those numbers in seconds, from the file's own zero.

No cell is ever evaluated: text that starts with ``=`` stays text, and XLSX files are opened
read-only with formulas' stored values.
"""

from __future__ import annotations

import codecs
import csv
import io
import itertools
import math
import os
import re
import unicodedata
import warnings
import zoneinfo
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import BinaryIO

import numpy as np
import pandas as pd

from engine.columns import (
    BELT_SPEED_M_S,
    CURRENT_A,
    ELAPSED_S,
    ENVIRONMENT_COLUMNS,
    FLAG_CODES,
    FLAGS,
    MACHINE,
    NOTE,
    PRESSURE_PA,
    READING_COLUMNS,
    RH,
    ROW,
    SESSION,
    SPEED_REV_S,
    TEMPERATURE_K,
    TIME,
    VOLTAGE_V,
)
from engine.errors import InputError
from engine.units import one_line, speed_unit_conversion, unit_conversion

#: Most data rows read from one file; a larger file is refused with a clear message.
MAX_ROWS = 5_000_000
#: Bytes at the start of a CSV file from which encoding, separator, decimal mark, header and
#: units row are detected.
SAMPLE_BYTES = 65_536
#: Default time tolerance of the environment merge [s].
DEFAULT_TOLERANCE_S = 300.0
#: Rows searched for the header.
HEADER_SEARCH_ROWS = 30
#: Widest XLSX row read [columns]; a cell further right is refused with a message.
MAX_SHEET_COLUMNS = 1_000
#: Most cells (rows times the widest row) read from one XLSX sheet.
MAX_SHEET_CELLS = 20_000_000

#: Fields of a readings file, in the order of its canonical header. ``date`` is an auxiliary
#: field: a separate date column joined with the time column.
READING_FIELDS = (
    "machine", "session", "time", "date", "speed", "current", "rh", "temperature",
    "pressure", "voltage", "note",
)
#: Fields of an environment log.
ENVIRONMENT_FIELDS = ("time", "date", "rh", "temperature", "pressure")

#: Accepted header spellings per field. Matching ignores case, spaces and punctuation, so
#: ``"Machine ID"``, ``"machine_id"`` and ``"machine-id"`` are one spelling.
ALIASES: dict[str, list[str]] = {
    "machine": ["machine", "machine id", "machine name", "generator", "apparatus", "device"],
    "session": ["session", "session id", "session name", "run", "series", "trial", "group"],
    "time": [
        "time", "timestamp", "time stamp", "datetime", "date time", "date/time", "clock", "t",
        "elapsed", "elapsed time", "elapsed seconds", "seconds",
    ],
    "date": ["date", "day"],
    "speed": [
        "speed", "rpm", "rps", "rev/s", "rotation", "rotation speed", "rotation rate",
        "rotational speed", "revolutions", "frequency", "f", "n", "belt speed", "linear speed",
        "tachometer", "tacho",
    ],
    "current": [
        "current", "i", "uA", "µA", "microamps", "output current", "short circuit current",
        "isc", "i out",
    ],
    "rh": ["rh", "rh%", "r.h.", "relative humidity", "humidity", "hum"],
    "temperature": [
        "temperature", "temp", "temp c", "temp f", "temperature c", "temperature f",
        "air temperature", "t air", "degC", "°C",
    ],
    "pressure": [
        "pressure", "p", "air pressure", "barometric pressure", "baro", "barometer", "hPa",
        "mbar",
    ],
    "voltage": ["voltage", "u", "kV", "terminal voltage", "hv", "high voltage"],
    "note": ["note", "notes", "comment", "comments", "remark", "remarks"],
}

#: Units implied by a header that is itself a unit or carries one in its name.
_IMPLIED_UNITS = {
    "rpm": "rpm", "rps": "rev/s", "revs": "rev/s", "ua": "uA", "microamps": "uA",
    "tempc": "degC", "temperaturec": "degC", "degc": "degC", "tempf": "degF",
    "temperaturef": "degF", "hpa": "hPa", "mbar": "mbar", "kv": "kV", "seconds": "s",
    "elapsedseconds": "s",
}

#: One-letter symbols that name different fields; the header's unit decides (T [s] is a time,
#: T [degC] a temperature; v [m/s] a belt speed, V [kV] a voltage).
_SYMBOLS = {"t": ("temperature",), "v": ("speed", "voltage")}

#: Unit assumed when neither the header, a units row nor the caller gives one.
DEFAULT_UNITS = {
    "speed": "rpm", "current": "uA", "rh": "%", "temperature": "degC", "pressure": "hPa",
    "voltage": "kV",
}

#: Plausible ranges of the air [SI]; outside them a reading is flagged. RH as a fraction,
#: temperature -40..60 degC, pressure 50..110 kPa (engine.columns.FLAG_CODES).
RH_RANGE = (0.0, 1.0)
TEMPERATURE_RANGE_K = (273.15 - 40.0, 273.15 + 60.0)
PRESSURE_RANGE_PA = (50e3, 110e3)

_NUMERIC_FIELDS = ("speed", "current", "rh", "temperature", "pressure", "voltage")
_TEXT_FIELDS = ("machine", "session", "note", "time", "date")
_LABEL_FIELDS = ("machine", "session", "note", "date")
_FIELD_KIND = {
    "current": "current", "rh": "fraction", "temperature": "temperature",
    "pressure": "pressure", "voltage": "voltage",
}
_FIELD_COLUMN = {
    "current": CURRENT_A, "rh": RH, "temperature": TEMPERATURE_K, "pressure": PRESSURE_PA,
    "voltage": VOLTAGE_V,
}
#: Cell texts read as an empty value in numeric columns.
NUMERIC_NA_TEXTS = (
    "", "NA", "N/A", "n/a", "na", "NaN", "nan", "-", "--", "null", "NULL", "None", "#N/A",
)
_SEPARATOR_NAMES = {",": "comma", ";": "semicolon", "\t": "tab"}
_FLAG_BITS = {code: 1 << position for position, code in enumerate(FLAG_CODES)}


def _key(text: str) -> str:
    """Header text reduced for matching: case-folded, micro sign as 'u', no punctuation."""
    text = unicodedata.normalize("NFKC", str(text)).casefold()
    text = text.replace("μ", "u").replace("°", "deg")
    return re.sub(r"[^0-9a-z]+", "", text)


def _build_alias_index() -> dict[str, str]:
    index: dict[str, str] = {}
    for field_name, spellings in ALIASES.items():
        for spelling in spellings:
            key = _key(spelling)
            if index.setdefault(key, field_name) != field_name:
                raise RuntimeError(f"alias {spelling!r} names two fields")
    return index


_ALIAS_INDEX = _build_alias_index()


# --- Options and result ----------------------------------------------------------------------
@dataclass
class ReadOptions:
    """How to read a file; every ``None`` means "detect".

    Attributes
    ----------
    separator : str or None
        ``","``, ``";"``, ``"\\t"`` (or ``"tab"``), or another single character.
    decimal : str or None
        ``"."`` or ``","``.
    encoding : str or None
        A Python codec name, e.g. ``"utf-8"``, ``"utf-8-sig"``, ``"latin-1"``.
    units_row : bool or None
        Whether the row below the header holds units.
    mapping : dict of str to str or None
        Source header -> field name (a key of :data:`ALIASES`); overrides detection. A field
        of ``""`` or ``None`` leaves that header unused.
    units : dict of str to str or None
        Field -> unit text, used where the file gives no unit, e.g. ``{"speed": "rev/s"}``.
        ``{"rh": ""}`` reads humidity as a fraction 0..1.
    machine : str or None
        Machine id for a file without a machine column (and for its blank cells).
    session : str or None
        Session for a file without a session column (and for its blank cells); else ``""``.
    day_first : bool or None
        For dates such as 03/04/2024: ``True`` day first, ``False`` month first.
    sheet : str, int or None
        XLSX sheet name or 0-based index; ``None`` is the first sheet.
    max_rows : int
        Most data rows accepted; above it the file is refused.
    """

    separator: str | None = None
    decimal: str | None = None
    encoding: str | None = None
    units_row: bool | None = None
    mapping: dict[str, str] | None = None
    units: dict[str, str] | None = None
    machine: str | None = None
    session: str | None = None
    day_first: bool | None = None
    sheet: str | int | None = None
    max_rows: int = MAX_ROWS


@dataclass
class ReadResult:
    """What a file held, in SI units, and how it was read.

    Attributes
    ----------
    frame : pandas.DataFrame
        Exactly :data:`engine.columns.READING_COLUMNS` (readings) or
        :data:`engine.columns.ENVIRONMENT_COLUMNS` (a log), one row per data row, in file order.
    source : str
        Name of the file.
    format : dict
        ``file_type``, ``separator``, ``decimal``, ``encoding``, ``units_row``, ``sheet``,
        ``header_row`` (1-based line or sheet row), ``time_format``, ``day_first``.
    mapping : dict of str to str
        Field -> the source header it came from.
    units : dict of str to str
        Field -> unit text used.
    messages : list of str
        Notes for the user: what was detected or assumed, columns not used, rows flagged.
    """

    frame: pd.DataFrame
    source: str
    format: dict[str, object]
    mapping: dict[str, str]
    units: dict[str, str]
    messages: list[str] = field(default_factory=list)


# --- Flags ----------------------------------------------------------------------------------
def flags_from_masks(masks: Mapping[str, np.ndarray], length: int) -> pd.Series:
    """Flags text per row from one boolean mask per flag code.

    Parameters
    ----------
    masks : mapping of str to array of bool
        Flag code (a key of :data:`engine.columns.FLAG_CODES`) -> rows that carry it.
    length : int
        Number of rows.

    Returns
    -------
    pandas.Series of str
        Semicolon-joined codes in the order of ``FLAG_CODES``; ``""`` for a clean row.
    """
    bits = np.zeros(length, dtype=np.int64)
    for code, mask in masks.items():
        bits |= np.asarray(mask, dtype=bool).astype(np.int64) * _FLAG_BITS[code]
    return _bits_to_flags(bits)


def _bits_to_flags(bits: np.ndarray, index: pd.Index | None = None) -> pd.Series:
    # One string per distinct combination of flags, then a vectorised take.
    codes, combinations = pd.factorize(bits)
    texts = pd.Series(
        [";".join(code for code, bit in _FLAG_BITS.items() if value & bit)
         for value in combinations] or [""],
        dtype="str",
    )
    flags = texts.take(codes)
    flags.index = index if index is not None else pd.RangeIndex(len(flags))
    return flags


def _flags_to_bits(flags: pd.Series) -> np.ndarray:
    codes, texts = pd.factorize(flags.fillna("").astype(str))
    values = []
    for text in texts:
        value = 0
        for code in filter(None, text.split(";")):
            if code not in _FLAG_BITS:
                raise ValueError(f"unknown flag code {code!r}")
            value |= _FLAG_BITS[code]
        values.append(value)
    return np.asarray(values or [0], dtype=np.int64)[codes]


def add_flags(flags: pd.Series, masks: Mapping[str, np.ndarray]) -> pd.Series:
    """Add flag codes to an existing flags column, keeping the order of ``FLAG_CODES``.

    Parameters
    ----------
    flags : pandas.Series of str
        Existing flags (semicolon-joined codes, ``""`` when clean).
    masks : mapping of str to array of bool
        Flag code -> rows that get it.

    Returns
    -------
    pandas.Series of str
        The combined flags, with the index of ``flags``.
    """
    bits = _flags_to_bits(flags)
    for code, mask in masks.items():
        bits |= np.asarray(mask, dtype=bool).astype(np.int64) * _FLAG_BITS[code]
    return _bits_to_flags(bits, index=flags.index)


# --- Headers and units ------------------------------------------------------------------------
_BRACKET_UNIT = re.compile(r"^(.*?)\s*[\[(]\s*([^\[\]()]*?)\s*[\])]\s*$")
_PERCENT_UNIT = re.compile(r"^(.*?\S)\s*%$")
_TRAILING_UNIT = re.compile(r"^(.*?\S)[\s_]+(\S+)$")


def split_header(header: object) -> tuple[str, str | None]:
    """Split a column header into its name and the unit it carries, if any.

    Parameters
    ----------
    header : str
        ``"speed [rpm]"``, ``"I (uA)"``, ``"RH%"`` or ``"machine"``.

    Returns
    -------
    tuple of (str, str or None)
        The name and the unit text (``None`` when the header has no bracketed unit or ``%``).
    """
    text = str(header).strip()
    match = _BRACKET_UNIT.match(text)
    if match and match.group(1):
        return match.group(1), (match.group(2) or None)
    match = _PERCENT_UNIT.match(text)
    if match:
        return match.group(1), "%"
    return text, None


_TEMPERATURE_UNITS = {
    "c": "degC", "degc": "degC", "degreec": "degC", "degreesc": "degC", "celsius": "degC",
    "f": "degF", "degf": "degF", "degreef": "degF", "degreesf": "degF", "fahrenheit": "degF",
    "k": "K", "kelvin": "K",
}
_SPEED_UNITS = {"u/min": "rpm", "r/min": "rpm", "rev/min": "rpm", "rps": "rev/s", "r/s": "rev/s"}


def _clean_unit(field_name: str, unit: str) -> str:
    text = unit.strip()
    folded = unicodedata.normalize("NFKC", text).casefold().replace(" ", "").replace("°", "deg")
    folded = folded.replace("℃", "degc").replace("℉", "degf")
    if field_name == "temperature":
        return _TEMPERATURE_UNITS.get(folded, text)
    if field_name == "rh":
        if folded in {"%", "%rh", "percent", "pct"}:
            return "%"
        if folded in {"", "-", "1", "fraction"}:
            return ""
    if field_name == "speed":
        return _SPEED_UNITS.get(folded, text)
    return text


def _conversion(field_name: str, unit: str, label: str) -> tuple[float, float, str | None]:
    """Scale, offset and (for speed) the speed kind for a column's unit."""
    unit = _clean_unit(field_name, unit)
    if field_name == "speed":
        scale, speed_kind = speed_unit_conversion(unit, label)
        return scale, 0.0, speed_kind
    if field_name == "rh" and unit == "":
        return 1.0, 0.0, None
    scale, offset = unit_conversion(unit, _FIELD_KIND[field_name], label)
    return scale, offset, None


def _unit_fits(field_name: str, unit: str) -> bool:
    try:
        _conversion(field_name, unit, field_name)
    except InputError:
        return False
    return True


def _match_header(header: str, wanted: Iterable[str]) -> tuple[str, str | None] | None:
    """The field a header names and the unit it carries, or None."""
    name, unit = split_header(header)
    key = _key(name)
    if key in _SYMBOLS and unit is not None:
        for candidate in _SYMBOLS[key]:
            if candidate in wanted and candidate in _NUMERIC_FIELDS and _unit_fits(candidate, unit):
                return candidate, unit
    field_name = _ALIAS_INDEX.get(key)
    if field_name in wanted:
        return field_name, unit if unit is not None else _IMPLIED_UNITS.get(key)
    if unit is None:
        match = _TRAILING_UNIT.match(name)
        if match:
            field_name = _ALIAS_INDEX.get(_key(match.group(1)))
            if (field_name in wanted and field_name in _NUMERIC_FIELDS
                    and _unit_fits(field_name, match.group(2))):
                return field_name, match.group(2)
    return None


@dataclass(frozen=True)
class _Column:
    position: int
    header: str
    unit: str | None


def _columns_of(
    headers: Sequence[str],
    mapping: Mapping[str, str | None] | None,
    wanted: Sequence[str],
    source: str,
) -> dict[str, _Column]:
    columns: dict[str, _Column] = {}
    claimed: set[int] = set()
    for source_header, field_name in (mapping or {}).items():
        position = _find_header(headers, source_header)
        if position is None:
            shown = ", ".join(_quoted(header) for header in headers if header) or "none"
            raise InputError(
                f"{source}: the column mapping names the column '{source_header}', which the "
                f"file does not have; its columns are {shown}"
            )
        claimed.add(position)
        if not field_name:
            continue
        if field_name not in wanted:
            raise InputError(
                f"{source}: the column mapping maps '{source_header}' to '{field_name}', "
                f"which is not a field here; use one of {', '.join(wanted)}"
            )
        if field_name in columns:
            raise InputError(
                f"{source}: the column mapping maps two columns to '{field_name}'"
            )
        header_name, header_unit = split_header(headers[position])
        columns[field_name] = _Column(
            position, headers[position], header_unit or _IMPLIED_UNITS.get(_key(header_name)))
    for position, header in enumerate(headers):
        if position in claimed:
            continue
        match = _match_header(header, wanted)
        if match and match[0] not in columns:
            columns[match[0]] = _Column(position, header, match[1])
    return columns


def _find_header(headers: Sequence[str], wanted: str) -> int | None:
    for position, header in enumerate(headers):
        if header == wanted:
            return position
    for position, header in enumerate(headers):
        if header.strip().casefold() == str(wanted).strip().casefold():
            return position
    key = _key(wanted)
    for position, header in enumerate(headers):
        if key and _key(header) == key:
            return position
    return None


def map_columns(
    headers: Sequence[str],
    mapping: Mapping[str, str | None] | None = None,
    fields: Sequence[str] = READING_FIELDS,
) -> dict[str, str]:
    """Which header each field comes from.

    Parameters
    ----------
    headers : sequence of str
        The file's column headers, in order.
    mapping : mapping of str to str, optional
        Source header -> field, taking precedence over :data:`ALIASES`.
    fields : sequence of str
        The fields looked for (default: those of a readings file).

    Returns
    -------
    dict of str to str
        Field -> header, for the fields found (the first matching header wins).

    Examples
    --------
    >>> map_columns(["Machine", "RPM", "I (uA)", "RH%", "Temp C"])
    {'machine': 'Machine', 'speed': 'RPM', 'current': 'I (uA)', 'rh': 'RH%', \
'temperature': 'Temp C'}
    """
    headers = [str(header) for header in headers]
    columns = _columns_of(headers, mapping, fields, "columns")
    return {name: column.header for name, column in sorted(
        columns.items(), key=lambda item: item[1].position)}


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


def _check_text_sample(inp: _Input) -> None:
    sample = inp.sample
    if not sample.strip():
        raise InputError(f"{inp.name}: the file is empty")
    if sample.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        raise InputError(
            f"{inp.name}: the file is UTF-16 text; save it as CSV in UTF-8 (or as XLSX)"
        )
    controls = sum(sample.count(bytes([byte])) for byte in (*range(0, 9), *range(14, 32), 127))
    if b"\x00" in sample or controls > 0.01 * len(sample):
        raise InputError(
            f"{inp.name}: this is not a text (CSV) file or an XLSX workbook; it looks like "
            "binary data. Save the readings as CSV or XLSX"
        )


def _detect_encoding(inp: _Input) -> str:
    sample = inp.sample
    if sample.startswith(codecs.BOM_UTF8):
        return "utf-8-sig"
    try:
        sample.decode("utf-8")
    except UnicodeDecodeError as error:
        # A sample may end in the middle of a multi-byte character.
        if not (inp.truncated and error.start >= len(sample) - 3):
            return "latin-1"
    return "utf-8"


def _sample_text(inp: _Input, encoding: str) -> str:
    text = inp.sample.decode(encoding, errors="replace")
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


def _is_number(text: str) -> bool:
    return bool(re.fullmatch(r"\s*[+-]?(\d+([.,]\d*)?|[.,]\d+)([eE][+-]?\d+)?\s*", text))


def _strip_brackets(text: str) -> str:
    text = text.strip()
    if len(text) >= 2 and text[0] in "[(" and text[-1] in "])":
        return text[1:-1].strip()
    return text


def _units_row_cells(record: Sequence[str], columns: Mapping[str, _Column]) -> dict[str, str]:
    return {
        name: _strip_brackets(str(record[column.position]))
        for name, column in columns.items()
        if (name in _NUMERIC_FIELDS or name == "time") and column.position < len(record)
        and str(record[column.position]).strip()
    }


def _looks_like_units_row(record: Sequence[str], columns: Mapping[str, _Column]) -> bool:
    cells = _units_row_cells(record, columns)
    numeric = {name: unit for name, unit in cells.items() if name in _NUMERIC_FIELDS}
    if not numeric or any(_is_number(unit) for unit in cells.values()):
        return False
    return all(_unit_fits(name, unit) for name, unit in numeric.items())


def _find_header_row(
    records: list[list[str]], wanted: Sequence[str], mapping: Mapping[str, object] | None
) -> int:
    for index, record in enumerate(records[:HEADER_SEARCH_ROWS]):
        if not record:
            continue
        if mapping and all(_find_header(record, header) is not None for header in mapping):
            return index
        found = {match[0] for match in (_match_header(cell, wanted) for cell in record) if match}
        if len(found) >= 2:
            return index
    for index, record in enumerate(records):
        if record:
            return index
    return 0


# --- Reading the table -------------------------------------------------------------------------
@dataclass
class _Table:
    data: dict[str, pd.Series]
    columns: dict[str, _Column]
    unit_cells: dict[str, str]
    headers: list[str]
    format: dict[str, object]
    messages: list[str]
    rows: int


def _check_options(options: ReadOptions) -> ReadOptions:
    separator = options.separator
    if separator is not None:
        separator = {"tab": "\t", "\\t": "\t", "comma": ",", "semicolon": ";"}.get(
            separator, separator)
        if len(separator) != 1 or separator in "\"\r\n":
            raise InputError(
                f"separator {options.separator!r}: give one character, e.g. ',', ';' or tab"
            )
    if options.decimal not in (None, ".", ","):
        raise InputError(f"decimal mark {options.decimal!r}: give '.' or ','")
    if separator is not None and separator == options.decimal:
        raise InputError("the separator and the decimal mark cannot both be ','")
    if options.encoding is not None:
        try:
            codecs.lookup(options.encoding)
        except LookupError:
            raise InputError(
                f"encoding {options.encoding!r} is not known; try 'utf-8' or 'latin-1'"
            ) from None
    if not isinstance(options.max_rows, int) or options.max_rows < 1:
        raise InputError(f"max_rows must be a positive whole number, got {options.max_rows!r}")
    for field_name in (options.units or {}):
        if field_name not in DEFAULT_UNITS and field_name != "time":
            raise InputError(
                f"units: '{field_name}' is not a numeric field; use one of "
                f"{', '.join((*DEFAULT_UNITS, 'time'))}"
            )
    return ReadOptions(**{**options.__dict__, "separator": separator})


def _read_csv(inp: _Input, options: ReadOptions, wanted: Sequence[str]) -> _Table:
    _check_text_sample(inp)
    messages: list[str] = []
    encoding = options.encoding or _detect_encoding(inp)
    text = _sample_text(inp, encoding)
    separator = options.separator or _detect_separator(text)
    records = _records(text, separator)
    header_index = _find_header_row(records, wanted, options.mapping)
    headers = [cell.strip() for cell in records[header_index]] if records else []
    columns = _columns_of(headers, options.mapping, wanted, inp.name)
    _check_usable(inp.name, headers, columns, wanted)
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
    text_positions = {c.position for n, c in columns.items() if n in _TEXT_FIELDS}
    # Text columns are left to the C parser's inference (forcing str on a column of a million
    # distinct times costs more than the rest of the read); only a label column that looks
    # numeric in the sample is read as text at once, so that '007' stays '007'.
    label_positions = [c.position for n, c in columns.items() if n in _LABEL_FIELDS]
    as_text = {p for p in label_positions if _numeric_in_sample(data_records, p)}
    positions = sorted(column.position for column in columns.values())
    na_values = {
        position: ([""] if position in text_positions else list(NUMERIC_NA_TEXTS))
        for position in positions
    }
    kwargs = dict(
        sep=separator, decimal=decimal, header=None, names=list(range(width)),
        usecols=positions, skiprows=header_index + 1 + int(units_row),
        dtype={position: str for position in as_text}, keep_default_na=False,
        na_values=na_values, nrows=options.max_rows + 1, engine="c", low_memory=False,
        skip_blank_lines=True,
    )
    try:
        frame = _pandas_read_csv(inp, encoding, kwargs)
    except UnicodeDecodeError:
        if options.encoding is not None:
            raise InputError(
                f"{inp.name}: the file is not valid {options.encoding} text; "
                "try another encoding, e.g. 'latin-1'"
            ) from None
        encoding = "latin-1"
        messages.append(
            f"{inp.name}: the start of the file is UTF-8 but later bytes are not; "
            "read the whole file as Latin-1"
        )
        frame = _pandas_read_csv(inp, encoding, kwargs)
    # A label column whose later cells turned out to be numbers only: read it again as text.
    again = [
        p for p in label_positions if p not in as_text and not _is_text(frame[p])
        and frame[p].notna().any()
    ]
    if again:
        text_frame = _pandas_read_csv(
            inp, encoding, {**kwargs, "usecols": again, "dtype": {p: str for p in again},
                            "na_values": {p: [""] for p in again}})
        for position in again:
            frame[position] = text_frame[position]
    if header_index:
        messages.append(f"{inp.name}: skipped {header_index} line(s) above the header")
    file_format = {
        "file_type": "csv", "separator": separator, "decimal": decimal, "encoding": encoding,
        "units_row": bool(units_row), "sheet": None, "header_row": header_index + 1,
    }
    messages.append(
        f"{inp.name}: read as CSV, separator {_SEPARATOR_NAMES.get(separator, repr(separator))}"
        f", decimal {'comma' if decimal == ',' else 'point'}, encoding {encoding}"
        + (", with a units row below the header" if units_row else "")
    )
    data = {name: frame[column.position] for name, column in columns.items()}
    return _Table(data, columns, unit_cells, headers, file_format, messages, len(frame))


def _pandas_read_csv(inp: _Input, encoding: str, kwargs: dict) -> pd.DataFrame:
    try:
        return pd.read_csv(inp.open(), encoding=encoding, **kwargs)
    except UnicodeDecodeError:
        raise
    except pd.errors.EmptyDataError:
        return pd.DataFrame({position: pd.Series(dtype=object) for position in kwargs["usecols"]})
    except pd.errors.ParserError as error:
        if "Too many columns specified" in str(error) and kwargs["usecols"] is not None:
            # pandas refuses usecols when no line is as long as the header (rows that leave
            # out their trailing empty cells): read every column, then keep the used ones.
            frame = _pandas_read_csv(inp, encoding, {**kwargs, "usecols": None})
            return frame[list(kwargs["usecols"])]
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


def _read_xlsx(inp: _Input, options: ReadOptions, wanted: Sequence[str]) -> _Table:
    try:
        book = pd.ExcelFile(inp.open(), engine="openpyxl")
    except Exception as error:  # noqa: BLE001 - any failure of a corrupt workbook
        raise InputError(
            f"{inp.name}: is not a readable XLSX workbook ({type(error).__name__}); "
            "open it in a spreadsheet program and save it again as XLSX or CSV"
        ) from None
    with book:
        sheets = list(book.sheet_names)
        sheet = options.sheet
        if sheet is None:
            sheet = sheets[0] if sheets else None
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
            raw = _sheet_frame(book.book[sheet], options.max_rows + HEADER_SEARCH_ROWS + 2,
                               inp.name, sheet)
        except InputError:
            raise
        except Exception as error:  # noqa: BLE001 - any failure inside a corrupt sheet
            raise InputError(
                f"{inp.name}: sheet '{sheet}' cannot be read ({type(error).__name__})"
            ) from None
    raw = raw.dropna(how="all").reset_index(drop=True)
    if raw.empty:
        raise InputError(f"{inp.name}: sheet '{sheet}' is empty")
    head = raw.head(HEADER_SEARCH_ROWS + 2)
    records = [
        ["" if pd.isna(value) else str(value).strip() for value in row]
        for row in head.itertuples(index=False)
    ]
    header_index = _find_header_row(records, wanted, options.mapping)
    headers = records[header_index]
    columns = _columns_of(headers, options.mapping, wanted, inp.name)
    _check_usable(inp.name, headers, columns, wanted)
    units_row = options.units_row
    below = records[header_index + 1] if len(records) > header_index + 1 else None
    if units_row is None:
        units_row = below is not None and _looks_like_units_row(below, columns)
    unit_cells = _units_row_cells(below, columns) if units_row and below is not None else {}
    body = raw.iloc[header_index + 1 + int(units_row):].reset_index(drop=True)
    messages = []
    if header_index:
        messages.append(f"{inp.name}: skipped {header_index} row(s) above the header")
    messages.append(
        f"{inp.name}: read as XLSX, sheet '{sheet}'"
        + (", with a units row below the header" if units_row else "")
    )
    file_format = {
        "file_type": "xlsx", "separator": None, "decimal": options.decimal, "encoding": None,
        "units_row": bool(units_row), "sheet": sheet, "header_row": header_index + 1,
    }
    data = {name: body[column.position] for name, column in columns.items()}
    return _Table(data, columns, unit_cells, headers, file_format, messages, len(body))


def _sheet_frame(worksheet: object, most_rows: int, source: str, sheet: str) -> pd.DataFrame:
    """The non-empty rows of a read-only worksheet: stored cell values, never formulas.

    Read here rather than by ``pandas.read_excel``, which widens every row to the widest one
    (one crafted cell at XFD1048576 makes 17 billion cells) and refuses a whole sheet for one
    cell whose value overflows; here a far-away cell is refused with a message and an
    infinite value is kept, to be flagged.
    """
    worksheet.reset_dimensions()  # type: ignore[attr-defined] - declared sizes may lie
    rows: list[tuple] = []
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
            width = max(width, len(values))
            if len(rows) * width > MAX_SHEET_CELLS:
                raise InputError(
                    f"{source}: sheet '{sheet}' holds more than {MAX_SHEET_CELLS:,} cells "
                    "(rows times columns); save it as CSV or split it into smaller files"
                )
    return pd.DataFrame([values + (None,) * (width - len(values)) for values in rows])


def _quoted(header: object, most: int = 60) -> str:
    """A header in quotes for a message: on one line, cut after ``most`` characters."""
    text = one_line(header)
    return f"'{text[:most]}…'" if len(text) > most else f"'{text}'"


def _check_usable(
    source: str, headers: Sequence[str], columns: Mapping[str, _Column], wanted: Sequence[str]
) -> None:
    if set(wanted) == set(ENVIRONMENT_FIELDS):
        needed_ok = ("time" in columns or "date" in columns) and any(
            name in columns for name in ("rh", "temperature", "pressure"))
        needed = "a time column and at least one of humidity, temperature, pressure"
    else:
        needed_ok = "speed" in columns and "current" in columns
        needed = "a speed column and a current column"
    if not needed_ok:
        shown = ", ".join(_quoted(header) for header in headers if str(header).strip())
        found = ", ".join(f"{name} <- {_quoted(column.header)}"
                          for name, column in columns.items())
        raise InputError(
            f"{source}: no usable columns: it needs {needed}. Its header is "
            f"{shown or '(empty)'}" + (f"; recognised: {found}" if found else "")
            + ". Rename the headers (e.g. 'speed [rpm]', 'current [uA]') or give a column "
            "mapping"
        )


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


# --- Cell conversion ---------------------------------------------------------------------------
def _numbers(series: pd.Series, decimal: str) -> tuple[np.ndarray, np.ndarray]:
    """Float values of a column and the mask of cells whose text is not a number."""
    if pd.api.types.is_numeric_dtype(series.dtype) and not pd.api.types.is_bool_dtype(
            series.dtype):
        values = series.to_numpy(dtype=float, na_value=np.nan)
        not_number = np.zeros(len(values), dtype=bool)
    else:
        text = series.astype("str").str.strip()
        present = text.notna() & ~text.isin(NUMERIC_NA_TEXTS)
        if decimal == ",":
            text = text.str.replace(",", ".", regex=False)
        values = pd.to_numeric(text.where(present), errors="coerce").to_numpy(
            dtype=float, na_value=np.nan)
        not_number = present.to_numpy(dtype=bool) & np.isnan(values)
    infinite = np.isinf(values)
    if infinite.any():
        values = np.where(infinite, np.nan, values)
        not_number = not_number | infinite
    return values, not_number


def _text(series: pd.Series | None, length: int, fill: str = "", strip: bool = True
          ) -> pd.Series:
    if series is None or not series.notna().any():
        return pd.Series([fill], dtype="str").take(np.zeros(length, dtype=np.intp)).reset_index(
            drop=True)
    text = series.astype("str")
    if strip:
        text = text.str.strip()
    blank = text.isna() | (text == "")
    if blank.any():
        text = text.where(~blank, fill)
    return text.reset_index(drop=True).astype("str")


def _resolve_unit(
    field_name: str, table: _Table, options: ReadOptions, source: str
) -> tuple[str, str]:
    """The unit text of a column and where it came from."""
    column = table.columns[field_name]
    if column.unit:
        return column.unit, "header"
    if field_name in table.unit_cells:
        return table.unit_cells[field_name], "units row"
    caller = (options.units or {}).get(field_name)
    if caller is not None:
        return caller, "caller"
    return DEFAULT_UNITS[field_name], "default"


def _column_si(
    field_name: str, table: _Table, options: ReadOptions, source: str, decimal: str,
    units_used: dict[str, str], messages: list[str],
) -> tuple[np.ndarray, np.ndarray, str | None]:
    """SI values, not-a-number mask and (for speed) the speed kind of one numeric column."""
    column = table.columns[field_name]
    unit, origin = _resolve_unit(field_name, table, options, source)
    where = "in the units row of" if origin == "units row" else "in"
    try:
        scale, offset, speed_kind = _conversion(field_name, unit, field_name)
    except InputError as error:
        if origin == "caller":
            raise InputError(f"{source}: the unit given for {field_name}: {error}") from None
        raise InputError(
            f"{source}: column {_quoted(column.header)} has the unit '{one_line(unit)}' {where} "
            f"the file, which does not fit: {error}. Correct the header, e.g. "
            f"'{field_name} [{DEFAULT_UNITS[field_name]}]'"
        ) from None
    if origin == "default":
        messages.append(
            f"{source}: column {_quoted(column.header)} gives no unit; read as {unit} (the "
            f"default). Write the unit in the header, e.g. '{field_name} [{unit}]', if it is "
            "another"
        )
    values, not_number = _numbers(table.data[field_name].reset_index(drop=True), decimal)
    finite = values[np.isfinite(values)]
    if (origin == "default" and field_name == "rh" and finite.size
            and finite.min() >= 0 and finite.max() <= 1.0):
        # Every humidity between 0 and 1 with no unit: a logger writing fractions, not
        # percentages below 1 %. Read as a fraction and say so.
        unit, scale, offset = "", 1.0, 0.0
        messages.pop()  # the "read as % (the default)" note just above no longer holds
        messages.append(f"{source}: column {_quoted(column.header)} holds values from 0 to 1 "
                        "only: read as a fraction (0.45 = 45 %). Write 'rh [%]' in the header "
                        "if these really are percentages")
    units_used[field_name] = unit
    si_values, overflow = _scaled(values, scale, offset)
    return si_values, not_number | overflow, speed_kind


def _scaled(values: np.ndarray, scale: float, offset: float = 0.0
            ) -> tuple[np.ndarray, np.ndarray]:
    """Values times scale plus offset, and where that overflowed (1e308 kPa): left empty."""
    with np.errstate(over="ignore", invalid="ignore"):
        scaled = values * scale + offset
    overflow = np.isinf(scaled)
    if overflow.any():
        scaled = np.where(overflow, np.nan, scaled)
    return scaled, overflow


# --- Times ------------------------------------------------------------------------------------
_ISO_RE = (r"^\d{4}-\d{2}-\d{2}(?:[T ]\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?)?"
           r"\s*(?:Z|[+-]\d{2}(?::?\d{2})?)?$")
_TZ_RE = r"\d:\d{2}(?::\d{2}(?:\.\d+)?)?\s*(?:Z|[+-]\d{2}(?::?\d{2})?)$"
_DMY_RE = (r"^(\d{1,2})([./-])(\d{1,2})[./-](\d{4}|\d{2})"
           r"(?:[ T]+(\d{1,2}):(\d{2})(?::(\d{2})(?:[.,](\d{1,6}))?)?\s*([AaPp][Mm])?)?$")
_CLOCK_RE = r"^(\d{1,2}):(\d{2})(?::(\d{2})(?:[.,](\d{1,6}))?)?$"
_NUMBER_RE = r"^[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?$"
_SAMPLE_TIMES = 2000


@dataclass
class _Times:
    time: pd.Series
    elapsed_s: np.ndarray
    bad: np.ndarray
    label: str | None
    day_first: bool | None
    absolute: bool


def _time_hint(unit: str | None, source: str, header: str) -> tuple[str, object]:
    """Meaning of the unit in a time header: a duration, a time zone or a format hint."""
    if not unit:
        return "none", None
    folded = unit.strip().casefold()
    if re.search(r"(yy|dd|hh|mm)", folded):
        day, month = folded.find("dd"), folded.find("mm")
        year = folded.find("yy")
        if 0 <= day and 0 <= month and not 0 <= year < min(day, month):
            return "format", day < month
        return "format", None
    try:
        scale, _offset = unit_conversion(unit, "duration", "time")
        return "duration", scale
    except InputError:
        pass
    zone_name = {"utc": "UTC", "z": "UTC", "gmt": "UTC"}.get(folded, unit.strip())
    try:
        return "zone", zoneinfo.ZoneInfo(zone_name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError, TypeError):
        pass
    raise InputError(
        f"{source}: column '{header}' has the unit '{unit}', which is neither a duration "
        "(s, min, h: for elapsed time) nor a time zone (UTC, Europe/Paris). Correct the header"
    )


def _empty_times(length: int) -> pd.Series:
    return pd.Series(pd.NaT, index=range(length), dtype="datetime64[us]")


def _parse_iso(text: pd.Series, messages: list[str], source: str) -> tuple[pd.Series, np.ndarray]:
    bad = np.zeros(len(text), dtype=bool)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            return pd.to_datetime(text, format="ISO8601", errors="coerce"), bad
        except ValueError:
            pass
        aware = text.str.contains(_TZ_RE, regex=True, na=False).to_numpy(dtype=bool)
        naive = text.notna().to_numpy(dtype=bool) & ~aware
        if aware.any() and naive.any():
            keep_aware = aware.sum() >= naive.sum()
            minority = naive if keep_aware else aware
            messages.append(
                f"{source}: {int(aware.sum())} times carry a time zone and {int(naive.sum())} "
                f"do not; the {int(minority.sum())} "
                + ("without" if keep_aware else "with")
                + " one are marked bad_time"
            )
            bad = minority
            text = text.where(~minority)
        try:
            return pd.to_datetime(text, format="ISO8601", errors="coerce"), bad
        except ValueError:
            messages.append(
                f"{source}: the times carry different UTC offsets (e.g. a daylight-saving "
                "change); they were converted to UTC"
            )
            return pd.to_datetime(text, format="ISO8601", errors="coerce", utc=True), bad


_DMY_PARTS = re.compile(
    r"^(?P<first>\d{1,2})(?P<sep>[./-])(?P<second>\d{1,2})[./-](?P<year>\d{4}|\d{2})"
    r"(?:(?P<join>[ T]+)(?P<hour>\d{1,2}):\d{2}(?P<seconds>:\d{2}(?P<fraction>[.,]\d{1,6})?)?"
    r"(?P<ampm>\s*[AaPp][Mm])?)?$")
_PADDED_DATE_RE = r"^\d{2}[./-]\d{2}[./-]\d{4}(?:[ T]\d{2}:\d{2}(?::\d{2}(?:\.\d{1,6})?)?)?$"
_FIRST_IS_DAY_RE = r"^(?:1[3-9]|2\d|3[01])[./-]\d{1,2}[./-]"
_SECOND_IS_DAY_RE = r"^\d{1,2}[./-](?:1[3-9]|2\d|3[01])[./-]"
#: Most leftover values tried against every date layout (the slow, general parser).
_LEFTOVER_LIMIT = 10_000


def _date_format(match: re.Match, day_first: bool) -> str:
    """The strptime layout of one numeric date, from its parts."""
    sep = match["sep"]
    layout = f"%d{sep}%m{sep}" if day_first else f"%m{sep}%d{sep}"
    layout += "%Y" if len(match["year"]) == 4 else "%y"
    if match["hour"] is None:
        return layout
    layout += (" " if " " in match["join"] else "T") + ("%I" if match["ampm"] else "%H") + ":%M"
    if match["seconds"]:
        layout += ":%S"
        if match["fraction"]:
            layout += match["fraction"][0] + "%f"
    if match["ampm"]:
        layout += (" " if match["ampm"][0].isspace() else "") + "%p"
    return layout


def _date_formats(sample: Iterable[str], day_first: bool) -> list[str]:
    counts: dict[str, int] = {}
    for value in sample:
        match = _DMY_PARTS.match(value)
        if match:
            layout = _date_format(match, day_first)
            counts[layout] = counts.get(layout, 0) + 1
    return sorted(counts, key=lambda layout: -counts[layout])


def _all_date_formats(day_first: bool) -> list[str]:
    layouts = []
    for sep in "./-":
        for year in ("%Y", "%y"):
            date = (f"%d{sep}%m{sep}" if day_first else f"%m{sep}%d{sep}") + year
            for clock in ("", " %H:%M", " %H:%M:%S", " %H:%M:%S.%f", " %I:%M %p",
                          " %I:%M:%S %p", "T%H:%M", "T%H:%M:%S"):
                layouts.append(date + clock)
    return layouts


def _parse_numeric_dates(
    text: pd.Series, day_first: bool | None, messages: list[str], source: str
) -> tuple[pd.Series, bool, str]:
    present = text.notna()
    if day_first is None:
        first_is_day = bool(text.str.contains(_FIRST_IS_DAY_RE, regex=True, na=False).any())
        second_is_day = bool(text.str.contains(_SECOND_IS_DAY_RE, regex=True, na=False).any())
        if first_is_day and not second_is_day:
            day_first = True
            messages.append(f"{source}: dates read day first (some have a first number above 12)")
        elif second_is_day and not first_is_day:
            day_first = False
            messages.append(
                f"{source}: dates read month first (some have a second number above 12)")
        elif first_is_day:
            day_first = True
            messages.append(
                f"{source}: some dates have the day first and others the month first; read "
                "day first, the others are bad_time. Set day_first if that is wrong")
        else:
            day_first = True
            example = text[present].iloc[0]
            messages.append(
                f"{source}: dates such as '{example}' are ambiguous (no day above 12); "
                "read day first (day/month/year). If they are month first, say so (option "
                "day_first = false)")
    else:
        messages.append(
            f"{source}: dates read {'day' if day_first else 'month'} first, as asked")
    times = pd.Series(pd.NaT, index=text.index, dtype="datetime64[us]")
    # Fast path for zero-padded dates (the usual logger layout): reorder into ISO 8601.
    padded = text.str.match(_PADDED_DATE_RE, na=False).to_numpy(dtype=bool)
    if padded.any():
        part = text[padded]
        day, month = (part.str.slice(0, 2), part.str.slice(3, 5))
        if not day_first:
            day, month = month, day
        iso = part.str.slice(6, 10) + "-" + month + "-" + day + part.str.slice(10)
        times[padded] = pd.to_datetime(iso, format="ISO8601", errors="coerce")
    remaining = present.to_numpy(dtype=bool) & times.isna().to_numpy(dtype=bool)
    layouts = _date_formats(text[remaining].head(_SAMPLE_TIMES), day_first)
    for stage in (layouts, _all_date_formats(day_first)):
        for layout in stage:
            if not remaining.any():
                break
            if stage is not layouts and remaining.sum() > _LEFTOVER_LIMIT:
                break
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                parsed = pd.to_datetime(text[remaining], format=layout, errors="coerce")
            times[remaining] = parsed
            remaining = remaining & times.isna().to_numpy(dtype=bool)
    label = "day/month/year" if day_first else "month/day/year"
    return times, day_first, label


def _parse_clock(text: pd.Series) -> np.ndarray:
    """Seconds since midnight of times of day such as '14:05' or '14:05:30.5'."""
    clock = text.str.match(r"^\d{1,2}:\d{2}(?::\d{2}(?:\.\d{1,6})?)?$", na=False)
    midnight = pd.Timestamp("2000-01-01")
    times = pd.to_datetime("2000-01-01 " + text.where(clock), format="ISO8601",
                           errors="coerce")
    return ((times - midnight) / pd.Timedelta(seconds=1)).to_numpy(dtype=float,
                                                                   na_value=np.nan)


def _classify(sample: pd.Series) -> str:
    counts = {
        "iso": int(sample.str.match(_ISO_RE).sum()),
        "numeric_date": int(sample.str.match(_DMY_RE).sum()),
        "clock": int(sample.str.match(_CLOCK_RE).sum()),
        "number": int(sample.str.match(_NUMBER_RE).sum()),
    }
    best = max(counts, key=lambda kind: counts[kind])
    return best if counts[best] > 0 else "other"


def _parse_times(
    raw: pd.Series | None, raw_date: pd.Series | None, table: _Table, options: ReadOptions,
    decimal: str, source: str, units_used: dict[str, str], messages: list[str],
) -> _Times:
    length = table.rows
    nothing = np.zeros(length, dtype=bool)
    if raw is None and raw_date is None:
        messages.append(
            f"{source}: no time column: the readings have no times and cannot be matched "
            "with an environment log")
        return _Times(_empty_times(length), np.full(length, np.nan), nothing, None, None, False)
    time_field = "time" if raw is not None else "date"
    column = table.columns[time_field]
    unit = column.unit or (options.units or {}).get("time")
    if not unit and table.unit_cells.get(time_field):
        try:
            _time_hint(table.unit_cells[time_field], source, column.header)
            unit = table.unit_cells[time_field]
        except InputError:
            messages.append(
                f"{source}: the units row gives {_quoted(table.unit_cells[time_field])} for the "
                "time; not a duration, a time zone or a date layout, so it was not used")
    kind, hint = _time_hint(unit, source, column.header)
    day_first = options.day_first
    if kind == "format" and day_first is None:
        day_first = hint  # type: ignore[assignment]
    if raw is not None and raw_date is not None:
        date_text = _text(raw_date, length).str.replace(r"[ T]00:00:00$", "", regex=True)
        time_text = _text(raw, length)
        joined = (date_text + " " + time_text).str.strip()
        raw = joined.where(joined != "")
    series = (raw if raw is not None else raw_date).reset_index(drop=True)
    if not series.notna().any():
        messages.append(
            f"{source}: the time column {_quoted(column.header)} is empty: the readings have "
            "no times and cannot be matched with an environment log")
        return _Times(_empty_times(length), np.full(length, np.nan), nothing, None, None, False)
    if pd.api.types.is_datetime64_any_dtype(series.dtype):
        times = series
        bad = nothing
        label = "spreadsheet date-time"
        return _finish_times(times, bad, label, None, kind, hint, source, messages)
    numeric = pd.api.types.is_numeric_dtype(series.dtype) and not pd.api.types.is_bool_dtype(
        series.dtype)
    if numeric:
        text = series
        family = "number"
    else:
        text = _text(series, length, fill="")
        text = text.where(text != "")
        present = text.notna().to_numpy(dtype=bool)
        family = "number" if kind == "duration" else _classify(
            text[present].head(_SAMPLE_TIMES))
    if family == "number":
        scale = hint if kind == "duration" else 1.0
        values, not_number = _numbers(text, decimal)
        units_used["time"] = unit if kind == "duration" else "s"
        messages.append(
            f"{source}: column {_quoted(column.header)} holds numbers: read as elapsed time in "
            f"{units_used['time']}")
        elapsed, overflow = _scaled(values, float(scale))  # type: ignore[arg-type]
        return _Times(_empty_times(length), elapsed, not_number | overflow, "elapsed seconds",
                      None, False)
    if family == "clock":
        elapsed = _parse_clock(text)
        messages.append(
            f"{source}: the times have no date: read as seconds since midnight (a session that "
            "passes midnight needs dates)")
        bad = present & np.isnan(elapsed)
        return _Times(_empty_times(length), elapsed, bad, "time of day", None, False)
    if family == "iso":
        times, bad_zone = _parse_iso(text, messages, source)
        label, used_day_first = "ISO 8601", None
    elif family == "numeric_date":
        times, used_day_first, label = _parse_numeric_dates(text, day_first, messages, source)
        bad_zone = nothing
    else:
        number_like = text.str.match(_NUMBER_RE, na=False)
        candidates = text.where(~number_like)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                times = pd.to_datetime(candidates, format="mixed", dayfirst=bool(day_first),
                                       errors="coerce")
            except (ValueError, TypeError):
                times = pd.to_datetime(candidates, format="mixed", dayfirst=bool(day_first),
                                       errors="coerce", utc=True)
        label, used_day_first, bad_zone = "free form", day_first, nothing
        messages.append(
            f"{source}: the times are in no common format; each was read on its own. "
            "ISO 8601 (2024-03-01 14:05:00) is safer")
    bad = (present & times.isna().to_numpy(dtype=bool)) | bad_zone
    return _finish_times(times, bad, label, used_day_first, kind, hint, source, messages)


def _finish_times(
    times: pd.Series, bad: np.ndarray, label: str, day_first: bool | None, kind: str,
    hint: object, source: str, messages: list[str],
) -> _Times:
    times = pd.Series(times).reset_index(drop=True)
    if not pd.api.types.is_datetime64_any_dtype(times.dtype):
        times = pd.to_datetime(times, errors="coerce")
    times = times.dt.as_unit("us")
    if kind == "zone":
        if times.dt.tz is None:
            before = times.isna().to_numpy(dtype=bool)
            times = times.dt.tz_localize(hint, ambiguous="NaT", nonexistent="NaT")
            lost = times.isna().to_numpy(dtype=bool) & ~before
            bad = bad | lost
            messages.append(f"{source}: times read in the time zone {hint}")
            if lost.any():
                messages.append(
                    f"{source}: {int(lost.sum())} times fall in a daylight-saving change of "
                    f"{hint} (they do not exist or happen twice) and are marked bad_time")
        else:
            messages.append(
                f"{source}: the times carry their own UTC offset; the zone in the header "
                "was not used")
    valid = times.notna()
    if valid.any():
        elapsed = (times - times[valid].min()).dt.total_seconds().to_numpy(
            dtype=float, na_value=np.nan)
    else:
        elapsed = np.full(len(times), np.nan)
    return _Times(times, elapsed, np.asarray(bad, dtype=bool), label, day_first, True)


# --- Public readers --------------------------------------------------------------------------
def read_readings(
    source: str | os.PathLike | bytes | BinaryIO,
    options: ReadOptions | None = None,
    name: str | None = None,
) -> ReadResult:
    """Read a readings file (CSV or XLSX) into SI units, with a flags column.

    Parameters
    ----------
    source : path, bytes or binary file-like
        The file. A file-like object's ``.name`` (e.g. an upload) names it in messages.
    options : ReadOptions, optional
        Overrides of what is detected, and the machine and session for files without them.
    name : str, optional
        Name of the file in messages and in the result.

    Returns
    -------
    ReadResult
        ``frame`` holds :data:`engine.columns.READING_COLUMNS`: speed in [rev/s] or belt speed
        in [m/s], current [A], RH as a fraction [-], temperature [K], pressure [Pa],
        voltage [V]; one row per data row of the file, in file order.

    Raises
    ------
    InputError
        For a file that cannot be read at all: empty, binary, not a workbook, no speed or
        current column, no machine column and no machine given, an unknown unit in a header,
        more than ``options.max_rows`` rows. The message names the file and says why.
    """
    inp, options, table = _read_table(source, options, name, READING_FIELDS)
    source_name = inp.name
    length = table.rows
    messages = table.messages
    decimal = str(table.format["decimal"] or ".")
    units_used: dict[str, str] = {}

    if "machine" in table.columns:
        machine = _text(table.data["machine"], length, fill=options.machine or "")
        blank = int((machine == "").sum())
        if blank:
            messages.append(
                f"{source_name}: {blank} row(s) have no machine"
                + (f"; given machine '{options.machine}' used" if options.machine else
                   "; they will show as an unknown machine"))
    elif options.machine:
        machine = _text(None, length, fill=options.machine)
        messages.append(f"{source_name}: no machine column; all readings are of "
                        f"'{options.machine}'")
    else:
        raise InputError(
            f"{source_name}: has no machine column; add one (header 'machine') or choose the "
            "machine these readings belong to when importing the file")
    session = _text(table.data.get("session"), length, fill=options.session or "")
    note = _text(table.data.get("note"), length, strip=False)

    masks: dict[str, np.ndarray] = {}
    values: dict[str, np.ndarray] = {}
    not_number = np.zeros(length, dtype=bool)
    speed, speed_text, speed_kind = _column_si(
        "speed", table, options, source_name, decimal, units_used, messages)
    current, current_text, _ = _column_si(
        "current", table, options, source_name, decimal, units_used, messages)
    not_number |= speed_text | current_text
    for field_name in ("rh", "temperature", "pressure", "voltage"):
        if field_name in table.columns:
            values[field_name], text_mask, _ = _column_si(
                field_name, table, options, source_name, decimal, units_used, messages)
            not_number |= text_mask
        else:
            values[field_name] = np.full(length, np.nan)

    times = _parse_times(table.data.get("time"), table.data.get("date"), table, options,
                         decimal, source_name, units_used, messages)

    masks["not_a_number"] = not_number
    masks["missing_value"] = (np.isnan(speed) & ~speed_text) | (np.isnan(current) & ~current_text)
    masks["negative"] = (speed < 0) | (current < 0)
    masks["zero_speed"] = speed == 0
    masks.update(_range_masks(values["rh"], values["temperature"], values["pressure"]))
    key = times.time if times.absolute else pd.Series(times.elapsed_s)
    # Sessions may restart their clock (elapsed time from 0): a duplicate is the same machine,
    # the same session and the same time.
    session_codes, session_names = pd.factorize(pd.Series(session))
    machine_codes, _machine_names = pd.factorize(pd.Series(machine))
    group = pd.Series(machine_codes.astype(np.int64) * (len(session_names) + 1) + session_codes)
    masks["duplicate_time"] = _duplicated(group, key)
    masks["bad_time"] = times.bad

    frame = pd.DataFrame({
        ROW: np.arange(1, length + 1, dtype=np.int64),
        MACHINE: machine,
        SESSION: session,
        TIME: times.time,
        ELAPSED_S: times.elapsed_s,
        SPEED_REV_S: speed if speed_kind == "rotation" else np.full(length, np.nan),
        BELT_SPEED_M_S: speed if speed_kind == "linear" else np.full(length, np.nan),
        CURRENT_A: current,
        RH: values["rh"],
        TEMPERATURE_K: values["temperature"],
        PRESSURE_PA: values["pressure"],
        VOLTAGE_V: values["voltage"],
        NOTE: note,
        FLAGS: flags_from_masks(masks, length),
    }, columns=list(READING_COLUMNS))
    messages.append(
        f"{source_name}: speed read as "
        + ("a rotation rate" if speed_kind == "rotation" else "a linear (belt) speed")
        + f" in {units_used['speed']}")
    messages.extend(_flag_summary(masks, length, source_name))
    file_format = {**table.format, "time_format": times.label, "day_first": times.day_first}
    mapping = {name: column.header for name, column in table.columns.items()}
    return ReadResult(frame, source_name, file_format, mapping, units_used, messages)


def read_environment(
    source: str | os.PathLike | bytes | BinaryIO,
    options: ReadOptions | None = None,
    name: str | None = None,
) -> ReadResult:
    """Read an environment log (time, humidity, temperature, pressure) into SI units.

    Parameters
    ----------
    source : path, bytes or binary file-like
        The log file, CSV or XLSX.
    options : ReadOptions, optional
        Overrides of what is detected (``machine``, ``session`` are not used).
    name : str, optional
        Name of the file in messages and in the result.

    Returns
    -------
    ReadResult
        ``frame`` holds :data:`engine.columns.ENVIRONMENT_COLUMNS`: RH as a fraction [-],
        temperature [K], pressure [Pa]; columns absent from the log are NaN. Values that are
        not numbers are NaN and counted in the messages; out-of-range values are kept (the
        merge flags the readings that receive them).

    Raises
    ------
    InputError
        For a log that cannot be read at all, or has no time column or no air column.
    """
    inp, options, table = _read_table(source, options, name, ENVIRONMENT_FIELDS)
    source_name = inp.name
    length = table.rows
    messages = table.messages
    decimal = str(table.format["decimal"] or ".")
    units_used: dict[str, str] = {}
    values: dict[str, np.ndarray] = {}
    for field_name in ("rh", "temperature", "pressure"):
        if field_name in table.columns:
            values[field_name], not_number, _ = _column_si(
                field_name, table, options, source_name, decimal, units_used, messages)
            if not_number.any():
                messages.append(
                    f"{source_name}: {int(not_number.sum())} {field_name} value(s) are not "
                    f"numbers (rows {_row_list(not_number)}); they were left empty")
        else:
            values[field_name] = np.full(length, np.nan)
    times = _parse_times(table.data.get("time"), table.data.get("date"), table, options,
                         decimal, source_name, units_used, messages)
    unreadable = times.bad | (~times.time.notna().to_numpy(dtype=bool) & np.isnan(
        times.elapsed_s))
    if unreadable.any():
        messages.append(
            f"{source_name}: {int(unreadable.sum())} log row(s) have no readable time (rows "
            f"{_row_list(unreadable)}); no reading can be matched to them")
    out_of_range = _range_masks(values["rh"], values["temperature"], values["pressure"])
    for code, mask in out_of_range.items():
        if mask.any():
            messages.append(
                f"{source_name}: {int(mask.sum())} log row(s) have {FLAG_CODES[code]} (rows "
                f"{_row_list(mask)}); readings that receive them will be flagged {code}")
    frame = pd.DataFrame({
        ROW: np.arange(1, length + 1, dtype=np.int64),
        TIME: times.time,
        ELAPSED_S: times.elapsed_s,
        RH: values["rh"],
        TEMPERATURE_K: values["temperature"],
        PRESSURE_PA: values["pressure"],
    }, columns=list(ENVIRONMENT_COLUMNS))
    file_format = {**table.format, "time_format": times.label, "day_first": times.day_first}
    mapping = {name: column.header for name, column in table.columns.items()}
    return ReadResult(frame, source_name, file_format, mapping, units_used, messages)


def _duplicated(machine: pd.Series, key: pd.Series) -> np.ndarray:
    """Second and later rows of the same machine at the same (present) time."""
    machine_codes, _machines = pd.factorize(machine)
    key_codes, key_values = pd.factorize(key)
    combined = machine_codes.astype(np.int64) * (len(key_values) + 1) + key_codes
    return pd.Series(combined).duplicated(keep="first").to_numpy() & (key_codes >= 0)


def _range_masks(rh: np.ndarray, temperature_k: np.ndarray, pressure_pa: np.ndarray
                 ) -> dict[str, np.ndarray]:
    # A small slack keeps the bounds themselves (100 %, -40 degC) inside after float arithmetic.
    slack = 1e-9
    return {
        "rh_out_of_range": (rh < RH_RANGE[0] - slack) | (rh > RH_RANGE[1] + slack),
        "temperature_out_of_range": ((temperature_k < TEMPERATURE_RANGE_K[0] - 1e-6)
                                     | (temperature_k > TEMPERATURE_RANGE_K[1] + 1e-6)),
        "pressure_out_of_range": ((pressure_pa < PRESSURE_RANGE_PA[0] - 1e-6)
                                  | (pressure_pa > PRESSURE_RANGE_PA[1] + 1e-6)),
    }


def _row_list(mask: np.ndarray, most: int = 5) -> str:
    rows = np.flatnonzero(mask)
    shown = ", ".join(str(row + 1) for row in rows[:most])
    return shown + (", ..." if len(rows) > most else "")


def _flag_summary(masks: Mapping[str, np.ndarray], length: int, source: str) -> list[str]:
    flagged = np.zeros(length, dtype=bool)
    for mask in masks.values():
        flagged |= mask
    if not flagged.any():
        return [f"{source}: {length} rows, none flagged"]
    parts = [
        f"{code} {int(mask.sum())} (rows {_row_list(mask)})"
        for code, mask in ((code, masks[code]) for code in FLAG_CODES if code in masks)
        if mask.any()
    ]
    return [
        f"{source}: {int(flagged.sum())} of {length} rows flagged and left out of fits (they "
        f"are kept and shown): " + "; ".join(parts)
    ]


# --- Environment merge -------------------------------------------------------------------------
def merge_environment(
    readings: pd.DataFrame, environment: pd.DataFrame, tolerance_s: float = DEFAULT_TOLERANCE_S
) -> pd.DataFrame:
    """Put the air of an environment log onto readings, by nearest time within a tolerance.

    Parameters
    ----------
    readings : pandas.DataFrame
        Readings with :data:`engine.columns.READING_COLUMNS`.
    environment : pandas.DataFrame
        A log with :data:`engine.columns.ENVIRONMENT_COLUMNS`.
    tolerance_s : float
        Largest time between a reading and the log entry used for it [s]; default 300.

    Returns
    -------
    pandas.DataFrame
        A copy of ``readings`` in its own order and index, with ``rh``, ``temperature_k`` and
        ``pressure_pa`` filled from the nearest log entry where the reading has no value of its
        own (a reading's own values are kept). Flags added: ``no_environment`` where a reading
        has no humidity of its own and none from the log in reach; ``rh_out_of_range``,
        ``temperature_out_of_range``, ``pressure_out_of_range`` where a filled value is
        outside its range.

    Raises
    ------
    InputError
        When the tolerance is not a non-negative number, or the two clocks cannot be compared:
        clock times against elapsed seconds, or times with a time zone against times without.

    Notes
    -----
    Clock times merge on ``time`` (as instants: two logs with different UTC offsets compare
    correctly); files of elapsed seconds merge on ``elapsed_s``, both counted from their own
    zero. The nearest entry is taken as a whole: an entry without pressure leaves the
    pressure empty even if an entry a little further has one.
    """
    try:
        tolerance = float(tolerance_s)
    except (TypeError, ValueError):
        raise InputError(f"time tolerance {tolerance_s!r} is not a number of seconds") from None
    if not math.isfinite(tolerance) or tolerance < 0:
        raise InputError(f"time tolerance must be zero or more seconds, got {tolerance_s!r}")
    missing = [c for c in READING_COLUMNS if c not in readings.columns]
    missing_log = [c for c in ENVIRONMENT_COLUMNS if c not in environment.columns]
    if missing or missing_log:
        raise InputError(
            "cannot merge: missing columns "
            + ", ".join([*(f"readings.{c}" for c in missing),
                         *(f"log.{c}" for c in missing_log)]))
    reading_key, log_key = _merge_keys(readings, environment)
    length = len(readings)
    result = readings.copy()
    log_values = {column: np.full(length, np.nan) for column in (RH, TEMPERATURE_K, PRESSURE_PA)}
    left_ok = ~np.isnan(reading_key)
    right_ok = ~np.isnan(log_key)
    if left_ok.any() and right_ok.any():
        left = pd.DataFrame({"__key": reading_key[left_ok],
                             "__position": np.flatnonzero(left_ok)})
        left = left.sort_values("__key", kind="stable")
        right = pd.DataFrame({
            "__key": log_key[right_ok],
            **{column: environment[column].to_numpy(dtype=float, na_value=np.nan)[right_ok]
               for column in log_values},
        }).sort_values("__key", kind="stable")
        merged = pd.merge_asof(left, right, on="__key", direction="nearest",
                               tolerance=tolerance)
        positions = merged["__position"].to_numpy()
        for column in log_values:
            log_values[column][positions] = merged[column].to_numpy(dtype=float)
    masks: dict[str, np.ndarray] = {}
    filled: dict[str, np.ndarray] = {}
    own_rh_missing = np.isnan(result[RH].to_numpy(dtype=float, na_value=np.nan))
    for column, log_column in log_values.items():
        own = result[column].to_numpy(dtype=float, na_value=np.nan)
        fill = np.isnan(own) & ~np.isnan(log_column)
        filled[column] = fill
        result[column] = np.where(fill, log_column, own)
    final_rh = result[RH].to_numpy(dtype=float)
    masks["no_environment"] = own_rh_missing & np.isnan(final_rh)
    ranges = _range_masks(final_rh, result[TEMPERATURE_K].to_numpy(dtype=float),
                          result[PRESSURE_PA].to_numpy(dtype=float))
    masks["rh_out_of_range"] = ranges["rh_out_of_range"] & filled[RH]
    masks["temperature_out_of_range"] = ranges["temperature_out_of_range"] & filled[TEMPERATURE_K]
    masks["pressure_out_of_range"] = ranges["pressure_out_of_range"] & filled[PRESSURE_PA]
    result[FLAGS] = add_flags(result[FLAGS], masks)
    return result


def _merge_keys(readings: pd.DataFrame, environment: pd.DataFrame
                ) -> tuple[np.ndarray, np.ndarray]:
    """Comparable float keys [s] for readings and log: clock instants or elapsed seconds."""
    reading_time = pd.to_datetime(readings[TIME], errors="coerce")
    log_time = pd.to_datetime(environment[TIME], errors="coerce")
    readings_clock = bool(reading_time.notna().any())
    log_clock = bool(log_time.notna().any())
    readings_elapsed = bool(readings[ELAPSED_S].notna().any())
    log_elapsed = bool(environment[ELAPSED_S].notna().any())
    if readings_clock and log_clock:
        reading_zone, log_zone = reading_time.dt.tz, log_time.dt.tz
        if (reading_zone is None) != (log_zone is None):
            with_zone = "readings" if reading_zone is not None else "log"
            without = "log" if reading_zone is not None else "readings"
            raise InputError(
                f"cannot match the log to the readings: the times in the {with_zone} carry a "
                f"time zone and the times in the {without} do not. Give both files times with a "
                "UTC offset (e.g. 2024-03-01T14:05:00+01:00) or both without, or name the "
                "zone in the time header (e.g. 'time [UTC]')")
        return _seconds_since_epoch(reading_time), _seconds_since_epoch(log_time)
    if readings_clock and not log_clock and log_elapsed:
        raise InputError(
            "cannot match the log to the readings: the readings have clock times and the log "
            "has only elapsed seconds; give the log clock times (or the readings elapsed "
            "seconds from the same start)")
    if log_clock and not readings_clock and readings_elapsed:
        raise InputError(
            "cannot match the log to the readings: the log has clock times and the readings "
            "have only elapsed seconds; give the readings clock times (or the log elapsed "
            "seconds from the same start)")
    length, log_length = len(readings), len(environment)
    if readings_elapsed and log_elapsed:
        return (readings[ELAPSED_S].to_numpy(dtype=float, na_value=np.nan),
                environment[ELAPSED_S].to_numpy(dtype=float, na_value=np.nan))
    return np.full(length, np.nan), np.full(log_length, np.nan)


def _seconds_since_epoch(times: pd.Series) -> np.ndarray:
    epoch = pd.Timestamp("1970-01-01", tz="UTC" if times.dt.tz is not None else None)
    return ((times - epoch) / pd.Timedelta(seconds=1)).to_numpy(dtype=float, na_value=np.nan)
