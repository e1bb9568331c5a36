"""Options, result and constants of the readings reader: what a caller may set, what comes back."""

from __future__ import annotations

import codecs
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from engine.columns import (
    CURRENT_A,
    PRESSURE_PA,
    RH,
    TEMPERATURE_K,
    VOLTAGE_V,
)
from engine.errors import InputError
from engine.units import one_line

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
_SEPARATOR_NAMES = {",": "comma", ";": "semicolon", "\t": "tab"}
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
        Notes for the user: what was detected or assumed, columns not used, rows flagged
        (the decisions among them).
    decisions : list of str
        Every decision the reader took, one sentence each: encoding, separator, decimal
        mark, header row, sheet, number notation and units per column, date order, joined
        dates, summary lines and repeated headers skipped.
    lines : numpy.ndarray of int
        For each row of ``frame``, the line of the file as an editor counts it (1-based,
        header and notes included), or the row of the sheet for a workbook.
    """

    frame: pd.DataFrame
    source: str
    format: dict[str, object]
    mapping: dict[str, str]
    units: dict[str, str]
    messages: list[str] = field(default_factory=list)
    decisions: list[str] = field(default_factory=list)
    lines: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))

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



@dataclass(frozen=True)
class _Column:
    position: int
    header: str
    unit: str | None


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
    #: Physical line (CSV, 1-based as an editor counts) or sheet row of each data row.
    lines: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    #: What the reader decided about the file, one sentence each (also in ``messages``).
    decisions: list[str] = field(default_factory=list)
    #: Lines above the header (a logger's metadata), as text cells.
    preamble: list[list[str]] = field(default_factory=list)
    #: First line of the preamble (1-based) for messages.
    preamble_first_line: int = 1


def _quoted(header: object, most: int = 60) -> str:
    """A header in quotes for a message: on one line, cut after ``most`` characters."""
    text = one_line(header)
    return f"'{text[:most]}…'" if len(text) > most else f"'{text}'"


