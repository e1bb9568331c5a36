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

Layout of the package (one module per concern, one contract: ``read_readings`` and
``read_environment`` return a :class:`ReadResult`):

- ``options``: :class:`ReadOptions`, :class:`ReadResult`, limits and field names;
- ``formats``: bytes to a raw table: encodings, CSV dialects, XLSX sheets, file structure;
- ``headers``: which field each column holds, header and units rows;
- ``numbers``: number notation and units in cells, conversion to SI;
- ``times``: dates and times;
- ``flags``: flag codes per reading;
- ``merge``: the environment (humidity) log put onto the readings;
- ``readers``: the two public readers.
"""

from engine.readings.flags import add_flags, flags_from_masks
from engine.readings.formats import workbook_sheets
from engine.readings.headers import map_columns, split_header
from engine.readings.merge import LogClock, check_log_clock, merge_environment
from engine.readings.options import (
    ALIASES,
    DEFAULT_TOLERANCE_S,
    DEFAULT_UNITS,
    ENVIRONMENT_FIELDS,
    HEADER_SEARCH_ROWS,
    MAX_ROWS,
    MAX_SHEET_CELLS,
    MAX_SHEET_COLUMNS,
    PRESSURE_RANGE_PA,
    READING_FIELDS,
    RH_RANGE,
    SAMPLE_BYTES,
    TEMPERATURE_RANGE_K,
    ReadOptions,
    ReadResult,
)
from engine.readings.readers import read_environment, read_readings
from engine.readings.sessions import default_session_name, name_sessions, unnamed_readings

__all__ = [
    "ALIASES",
    "DEFAULT_TOLERANCE_S",
    "DEFAULT_UNITS",
    "ENVIRONMENT_FIELDS",
    "HEADER_SEARCH_ROWS",
    "LogClock",
    "MAX_ROWS",
    "MAX_SHEET_CELLS",
    "MAX_SHEET_COLUMNS",
    "PRESSURE_RANGE_PA",
    "READING_FIELDS",
    "RH_RANGE",
    "ReadOptions",
    "ReadResult",
    "SAMPLE_BYTES",
    "TEMPERATURE_RANGE_K",
    "add_flags",
    "check_log_clock",
    "default_session_name",
    "flags_from_masks",
    "map_columns",
    "merge_environment",
    "name_sessions",
    "read_environment",
    "read_readings",
    "split_header",
    "unnamed_readings",
    "workbook_sheets",
]
