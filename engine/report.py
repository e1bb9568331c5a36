"""Exports: the readings table in display units, CSV and XLSX files, and the HTML report.

:func:`output_frame` is the one table that leaves the engine: the command line prints it, the
pages offer it for download and the report summarises it. Its columns (:data:`OUTPUT_COLUMNS`)
are in display units named in the column, e.g. ``current_uA``.

Every text cell that goes into a spreadsheet is neutralised first (:func:`neutralise_frame`):
a cell that starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return would be read
as a formula by a spreadsheet program, so it gets a leading apostrophe, following the OWASP
guidance on CSV injection. Every text in the HTML report is escaped.
"""

from __future__ import annotations

import io
import math
import re
from collections.abc import Mapping, Sequence
from datetime import date, datetime
from pathlib import Path
from typing import BinaryIO

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv

from engine import columns as col
from engine.arrangements import COUNTED, TRADE_RULE, delivery_sentence
from engine.errors import InputError
from engine.machines import Machine
from engine.units import split_quantity, to_display

#: Columns of :func:`output_frame`, in order (command-line header and JSON keys).
OUTPUT_COLUMNS: tuple[str, ...] = (
    "machine", "time", "speed_rev_s", "current_uA", "ceiling_uA", "efficiency",
    "efficiency_u", "charge_per_rev_nC", "rh_pct", "abs_humidity_g_m3", "dew_point_C",
    "relative_air_density", "flags",
)
#: Columns appended after :data:`OUTPUT_COLUMNS`, each only when the input has it.
OPTIONAL_OUTPUT_COLUMNS: tuple[str, ...] = ("session", "note")
#: What else a reading carries, appended last when the input has it: its row in the source
#: file (to trace a flag back), the belt speed, the air, and the achieved surface density.
TRACE_OUTPUT_COLUMNS: tuple[str, ...] = ("row", "belt_speed_m_s", "temperature_C",
                                         "pressure_kPa", "surface_density_uC_m2")
#: The voltage side, appended last to every table: terminal voltage [kV] and the output power
#: V I [W] of each reading (empty where the reading has no voltage).
VOLTAGE_OUTPUT_COLUMNS: tuple[str, ...] = ("voltage_kV", "output_power_W")
#: Leading characters that make a spreadsheet read a cell as a formula (OWASP, CSV injection).
FORMULA_PREFIXES: tuple[str, ...] = ("=", "+", "-", "@", "\t", "\r")

_NANO = 1e9  # coulomb to nanocoulomb (SI prefix)
_GRAMS_PER_KG = 1e3  # kg/m^3 to g/m^3 (SI prefix)
_FLOAT_FORMAT = "%.12g"  # drops binary noise such as 11.999999999999998 from exported numbers
_SHEET_NAME_BAD = re.compile(r"[\[\]:*?/\\]")
_DASH = "–"
_PERCENT_PER_FRACTION = 100.0  # fraction to percent


# --- the output table ------------------------------------------------------------------------

def _floats(frame: pd.DataFrame, column: str) -> np.ndarray:
    if column not in frame:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def _texts(frame: pd.DataFrame, column: str) -> pd.Series:
    """A text column with missing cells as "", kept in pandas' own text type (no object copy)."""
    if column not in frame:
        return pd.Series("", index=pd.RangeIndex(len(frame)), dtype="string")
    values = frame[column]
    if not pd.api.types.is_string_dtype(values) or pd.api.types.is_object_dtype(values):
        values = values.astype(object).where(values.notna(), "").astype(str)
    return values.fillna("").astype("string").reset_index(drop=True)


def _offset_text(minutes: int) -> str:
    sign = "-" if minutes < 0 else "+"
    hours, rest = divmod(abs(minutes), 60)
    return f"{sign}{hours:02d}:{rest:02d}"


def iso_text(times: pd.Series) -> pd.Series:
    """Timestamps as ISO 8601 text, "" where the time is unknown.

    Parameters
    ----------
    times : pandas.Series
        datetime64 values, naive or with a time zone, or anything ``pandas.to_datetime``
        reads; readings in several time zones at once are written in UTC.

    Returns
    -------
    pandas.Series of str
        ``2026-02-03T09:10:00+01:00`` (with the offset when the time has a zone, with
        microseconds when any reading has them).
    """
    text, codes = _iso_parts(times)
    result = np.full(len(codes), "", dtype=object)
    known = codes >= 0
    result[known] = text[codes[known]]
    return pd.Series(result, index=times.index, dtype=object)


def _iso_strings(times: pd.Series) -> pd.Series:
    """:func:`iso_text` as pandas' text type, the texts put in place by Arrow (no str object
    per reading), index 0..n-1."""
    text, codes = _iso_parts(times)
    distinct = pa.array([*text, ""], type=pa.string())
    return distinct.take(np.where(codes >= 0, codes, len(text))).to_pandas()


def _iso_parts(times: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """The distinct times as ISO text (object array) and each reading's index into them, -1
    where the time is unknown."""
    if not pd.api.types.is_datetime64_any_dtype(times):
        times = pd.to_datetime(times, errors="coerce", utc=True, format="mixed")
    zone = getattr(times.dt, "tz", None)
    instants = (times.dt.tz_convert("UTC").dt.tz_localize(None) if zone is not None
                else times).to_numpy(dtype="datetime64[us]")
    known = ~np.isnat(instants)
    # Readings repeat instants (several machines a second): format each instant once.
    distinct, where_known = np.unique(instants[known], return_inverse=True)
    fractional = bool((distinct.astype(np.int64) % 1_000_000 != 0).any())
    unit = "us" if fractional else "s"
    if zone is not None:
        wall = (pd.DatetimeIndex(distinct).tz_localize("UTC").tz_convert(zone)
                .tz_localize(None).to_numpy(dtype="datetime64[us]"))
        offset_min = (wall - distinct).astype("timedelta64[m]").astype(np.int64)
        # few distinct offsets (one per zone and season): format each once
        offsets, where_offset = np.unique(offset_min, return_inverse=True)
        labels = np.array([_offset_text(int(value)) for value in offsets], dtype=object)
        text = np.datetime_as_string(wall, unit=unit).astype(object) + labels[where_offset]
    else:
        text = np.datetime_as_string(distinct, unit=unit).astype(object)
    codes = np.full(len(instants), -1, dtype=np.intp)
    codes[known] = where_known
    return text, codes


def output_frame(derived: pd.DataFrame) -> pd.DataFrame:
    """The readings with derived columns in display units, ready to print or export.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with :data:`engine.columns.DERIVED_COLUMNS` (SI units).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`OUTPUT_COLUMNS` in that order, then ``session`` and ``note`` and then
        :data:`TRACE_OUTPUT_COLUMNS` (source row, belt speed [m/s], temperature [degC],
        pressure [kPa], surface density [uC/m^2]) when the input has them, and last, always,
        :data:`VOLTAGE_OUTPUT_COLUMNS` (terminal voltage [kV], output power V I [W]);
        rows in input order, index 0..n-1. Units: time as ISO text ("" when
        unknown), speed [rev/s], currents [uA], efficiency and its uncertainty as fractions,
        charge per revolution [nC], relative humidity [%], absolute humidity [g/m^3], dew
        point [degC], relative air density [-], flags as "code;code" ("" when clean).
    """
    return pd.DataFrame(output_columns(derived), index=pd.RangeIndex(len(derived)))


def output_columns(derived: pd.DataFrame) -> dict[str, np.ndarray | pd.Series]:
    """The columns of :func:`output_frame`, by name and in order, without making the frame.

    What :func:`write_csv` takes to write a million readings without first copying them all
    into one more frame (see :func:`output_frame` for the columns and their units).

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with :data:`engine.columns.DERIVED_COLUMNS` (SI units).

    Returns
    -------
    dict of str to numpy.ndarray or pandas.Series
        One array or series per column, ``len(derived)`` long.
    """
    times = derived[col.TIME] if col.TIME in derived else pd.Series(pd.NaT, index=derived.index)
    with np.errstate(over="ignore", invalid="ignore"):  # absurd input gives inf, not a warning
        return _output_columns(derived, times)


def _output_columns(derived: pd.DataFrame, times: pd.Series
                    ) -> dict[str, np.ndarray | pd.Series]:
    out = {
        "machine": _texts(derived, col.MACHINE),
        "time": _iso_strings(times),  # ISO text, "" when unknown
        "speed_rev_s": _floats(derived, col.SPEED_REV_S),
        "current_uA": to_display(_floats(derived, col.CURRENT_A), "current", "uA"),
        "ceiling_uA": to_display(_floats(derived, col.CEILING_A), "current", "uA"),
        "efficiency": _floats(derived, col.EFFICIENCY),
        "efficiency_u": _floats(derived, col.EFFICIENCY_U),
        "charge_per_rev_nC": _floats(derived, col.CHARGE_PER_REV_C) * _NANO,
        "rh_pct": to_display(_floats(derived, col.RH), "fraction", "%"),
        "abs_humidity_g_m3": _floats(derived, col.ABS_HUMIDITY_KG_M3) * _GRAMS_PER_KG,
        "dew_point_C": to_display(_floats(derived, col.DEW_POINT_K), "temperature", "degC"),
        "relative_air_density": _floats(derived, col.RELATIVE_AIR_DENSITY),
        "flags": _texts(derived, col.FLAGS),
    }
    for name, column in (("session", col.SESSION), ("note", col.NOTE)):
        if column in derived:
            out[name] = _texts(derived, column)
    if col.ROW in derived:
        out["row"] = pd.to_numeric(derived[col.ROW], errors="coerce").to_numpy()
    for name, column, convert in (
            ("belt_speed_m_s", col.BELT_SPEED_M_S, lambda values: values),
            ("temperature_C", col.TEMPERATURE_K,
             lambda values: to_display(values, "temperature", "degC")),
            ("pressure_kPa", col.PRESSURE_PA,
             lambda values: to_display(values, "pressure", "kPa")),
            ("surface_density_uC_m2", col.SURFACE_DENSITY_C_M2, lambda values: values * 1e6)):
        if column in derived:
            out[name] = convert(_floats(derived, column))
    voltage_v = _floats(derived, col.VOLTAGE_V)
    out["voltage_kV"] = to_display(voltage_v, "voltage", "kV")
    out["output_power_W"] = voltage_v * _floats(derived, col.CURRENT_A)
    return out


# --- spreadsheet safety ----------------------------------------------------------------------

def neutralise_formula(text: object) -> object:
    """Keep a spreadsheet from reading a text cell as a formula.

    Parameters
    ----------
    text : object
        A cell value.

    Returns
    -------
    object
        ``"'" + text`` when ``text`` is a str starting with ``=``, ``+``, ``-``, ``@``, a tab or
        a carriage return; anything else (other text, numbers, None) unchanged.

    References
    ----------
    OWASP, "CSV Injection" (community page on formula injection in exported files).
    """
    if isinstance(text, str) and text.startswith(FORMULA_PREFIXES):
        return "'" + text
    return text


def _is_text_column(series: pd.Series) -> bool:
    return (pd.api.types.is_object_dtype(series) or pd.api.types.is_string_dtype(series)
            or isinstance(series.dtype, pd.CategoricalDtype))


def neutralise_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """:func:`neutralise_formula` applied to every text cell of a frame, vectorised.

    Parameters
    ----------
    frame : pandas.DataFrame
        Any table; numeric columns and non-text cells of mixed columns are left alone.

    Returns
    -------
    pandas.DataFrame
        A copy with risky text cells prefixed by an apostrophe.
    """
    result = frame.copy()
    for name in result.columns:
        series = result[name]
        if not _is_text_column(series):
            continue
        if isinstance(series.dtype, pd.CategoricalDtype):
            series = series.astype(object)
        try:
            risky = series.str.startswith(FORMULA_PREFIXES).eq(True).to_numpy(dtype=bool)
        except AttributeError:  # an object column without any text
            continue
        if risky.any():
            series = series.astype(object).copy()
            series[risky] = "'" + series[risky].astype(str)
        result[name] = series
    return result


def _export_ready(frame: pd.DataFrame, replace_illegal: bool = False) -> pd.DataFrame:
    """Interval columns split in two, zoned times as ISO text, text cells neutralised."""
    parts = {}
    for name in frame.columns:
        parts.update(_export_columns(name, frame[name]))
    ready = neutralise_frame(pd.DataFrame(parts, index=frame.index))
    if replace_illegal:
        from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE

        for name in ready.columns:
            if _is_text_column(ready[name]):
                try:
                    ready[name] = ready[name].str.replace(ILLEGAL_CHARACTERS_RE, "\ufffd",
                                                          regex=True).where(ready[name].notna(),
                                                                            ready[name])
                except AttributeError:
                    continue
    return ready


def _export_columns(name: object, series: pd.Series) -> dict[object, pd.Series]:
    """A column as exported: an interval column split in two, zoned times as ISO text."""
    if pd.api.types.is_object_dtype(series):
        filled = series.dropna()
        if len(filled) and isinstance(filled.iloc[0], (list, tuple, np.ndarray)):
            return {f"{name}_low": pd.to_numeric(series.str[0], errors="coerce"),
                    f"{name}_high": pd.to_numeric(series.str[1], errors="coerce")}
    if isinstance(series.dtype, pd.DatetimeTZDtype):
        # spreadsheets have no time zones: keep the clock time and its offset as text
        return {name: iso_text(series)}
    return {name: series}


def round_significant(values: np.ndarray, digits: int = 12) -> np.ndarray:
    """Round to ``digits`` significant digits, vectorised, so that 12e-6 * 1e6 prints as 12.

    Parameters
    ----------
    values : numpy.ndarray
        Floats; NaN, infinities and zeros pass unchanged.
    digits : int
        Significant digits kept.

    Returns
    -------
    numpy.ndarray
        The rounded values. Scaling by an exact power of ten and dividing back gives the double
        nearest to the rounded decimal, whose shortest text has at most ``digits`` digits.
    """
    values = np.asarray(values, dtype=float)
    result = values.copy()
    finite = np.isfinite(values) & (values != 0)
    if not finite.any():
        return result
    exponent = digits - 1 - np.floor(np.log10(np.abs(values[finite]))).astype(np.int64)
    # Powers of ten up to 1e22 are exact doubles; beyond that the value is left as it is.
    usable = np.abs(exponent) <= 22
    chosen = values[finite]
    up = usable & (exponent >= 0)
    down = usable & (exponent < 0)
    power_up = 10.0 ** exponent[up]
    power_down = 10.0 ** -exponent[down]
    chosen[up] = np.round(chosen[up] * power_up) / power_up
    chosen[down] = np.round(chosen[down] / power_down) * power_down
    result[finite] = chosen
    return result


def write_csv(frame: pd.DataFrame | Mapping[str, object], target: str | Path | BinaryIO
              ) -> None:
    """Write a frame as UTF-8 CSV, text cells neutralised against formula injection.

    Parameters
    ----------
    frame : pandas.DataFrame or mapping of str to array
        Typically :func:`output_frame` or the findings; or the columns of one, by name, as
        :func:`output_columns` gives them (no frame is made of them).
    target : str, Path or binary file
        Where to write; streamed, so a million readings are never held twice in memory.

    Notes
    -----
    Comma-separated, CRLF rows (RFC 4180), a header row and no index. Text cells are quoted;
    numbers are rounded to 12 significant digits (:func:`round_significant`), empty where
    unknown. Interval columns (2-item lists) are split into ``<name>_low`` and
    ``<name>_high``. Written with Arrow's CSV writer, which formats in compiled code; each
    column is made ready on its own (neutralised, rounded) and handed to Arrow, so that no
    copy of the whole table is made on the way.
    """
    arrays: dict[str, pa.Array | pa.ChunkedArray] = {}
    for name, values in frame.items():
        arrays.update(_csv_arrays(str(name), values))
    table = pa.table(arrays) if arrays else pa.table({})
    # Headers with a comma, quote or line break (plain-words headers such as "efficiency,
    # median [%]") are quoted as RFC 4180 asks; plain headers stay bare.
    structural = any(mark in name for name in arrays for mark in ',"\r\n')
    options = pa_csv.WriteOptions(include_header=True, quoting_style="needed",
                                  quoting_header="needed" if structural else "none",
                                  eol="\r\n")
    if table.num_rows < 2 * _CSV_PART_ROWS:
        pa_csv.write_csv(table, str(target) if isinstance(target, (str, Path)) else target,
                         write_options=options)
        return
    if isinstance(target, (str, Path)):
        with open(target, "wb") as handle:
            _write_parts(table, handle, options)
    else:
        _write_parts(table, target, options)


#: Rows formatted at a time when a large table is written in parts [rows].
_CSV_PART_ROWS = 100_000


def _write_parts(table: pa.Table, handle: BinaryIO, options: pa_csv.WriteOptions) -> None:
    """A large table written in parts of :data:`_CSV_PART_ROWS` rows, two formatted at once.

    Arrow's writer formats on one core; formatting the numbers is most of the time of writing
    a million readings. Each part is formatted into memory by its own thread (Arrow releases
    the interpreter meanwhile) and the parts are written in order, the header with the first,
    so that the file is byte for byte the one a single call writes.
    """
    from concurrent.futures import ThreadPoolExecutor  # large tables only

    body = pa_csv.WriteOptions(include_header=False, quoting_style=options.quoting_style,
                               eol=options.eol)

    def formatted(start: int) -> pa.Buffer:
        sink = pa.BufferOutputStream()
        pa_csv.write_csv(table.slice(start, _CSV_PART_ROWS), sink,
                         write_options=options if start == 0 else body)
        return sink.getvalue()

    # At most four parts wait in memory, however slowly the target takes them (a pipe).
    pending: list = []
    with ThreadPoolExecutor(max_workers=2) as pool:
        for start in range(0, table.num_rows, _CSV_PART_ROWS):
            pending.append(pool.submit(formatted, start))
            if len(pending) == 4:
                handle.write(pending.pop(0).result())
        for part in pending:
            handle.write(part.result())


def _csv_arrays(name: str, values: object) -> dict[str, pa.Array | pa.ChunkedArray]:
    """One column made ready for the CSV file as Arrow arrays (two for an interval column)."""
    series = values if isinstance(values, pd.Series) else pd.Series(
        values, dtype=object if isinstance(values, np.ndarray) and values.dtype == object
        else None)
    return {str(part): _csv_array(cells) for part, cells in _export_columns(name, series).items()}


def _csv_array(series: pd.Series) -> pa.Array | pa.ChunkedArray:
    if _is_text_column(series):
        return _csv_text(series)
    if pd.api.types.is_integer_dtype(series) or pd.api.types.is_bool_dtype(series):
        return pa.array(series.to_numpy())
    return _csv_numbers(series)


def _csv_numbers(series: pd.Series) -> pa.Array:
    values = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float)
    return pa.array(round_significant(values), from_pandas=True)


def _csv_text(series: pd.Series) -> pa.Array | pa.ChunkedArray:
    """A text column as Arrow strings, cells that start like a formula neutralised.

    Equal to :func:`neutralise_frame` then pandas' text type: where every cell is text (or
    missing) the check runs in Arrow; a column that also holds other cells (numbers in an
    object column, which are not neutralised, only written) goes through pandas as before.
    """
    import pyarrow.compute as pc  # only writing needs it

    if isinstance(series.dtype, pd.CategoricalDtype):
        series = series.astype(object)
    array = None
    if not pd.api.types.is_object_dtype(series) or pd.api.types.infer_dtype(
            series, skipna=True) in ("string", "empty"):
        try:
            array = pa.array(series, type=pa.string(), from_pandas=True)
        except (pa.ArrowInvalid, pa.ArrowTypeError):
            array = None
    if array is None:
        ready = neutralise_frame(pd.DataFrame({"cells": series.reset_index(drop=True)}))
        return pa.array(ready["cells"].astype("string"), type=pa.string(), from_pandas=True)
    # Every prefix is one character: the first character of each cell is looked up.
    risky = pc.is_in(pc.utf8_slice_codeunits(array, 0, 1),
                     value_set=pa.array(FORMULA_PREFIXES, type=pa.string()))
    if pc.any(risky).as_py():
        array = pc.if_else(risky, pc.binary_join_element_wise("'", array, ""), array)
    return array


def to_csv_bytes(frame: pd.DataFrame | Mapping[str, object]) -> bytes:
    """A frame (or its columns) as UTF-8 CSV bytes (see :func:`write_csv` for the layout)."""
    buffer = io.BytesIO()
    write_csv(frame, buffer)
    return buffer.getvalue()


def _sheet_title(name: str) -> str:
    cleaned = _SHEET_NAME_BAD.sub("_", str(name)).strip("'") or "sheet"
    return cleaned[:31]


def to_xlsx_bytes(frame: pd.DataFrame, sheet_name: str = "readings",
                  findings: pd.DataFrame | None = None) -> bytes:
    """A frame (and optionally the findings) as an XLSX workbook, neutralised.

    Parameters
    ----------
    frame : pandas.DataFrame
        The main table, on the first sheet.
    sheet_name : str
        Name of the first sheet (cut to 31 characters, characters Excel refuses replaced).
    findings : pandas.DataFrame, optional
        Written to a second sheet, ``findings``.

    Returns
    -------
    bytes
        The workbook. Text cells are neutralised and stored as text, never as formulas;
        control characters that XLSX cannot hold are replaced by U+FFFD; times with a zone
        are written as ISO text.
    """
    buffer = io.BytesIO()
    main_sheet = _sheet_title(sheet_name)
    findings_sheet = "findings" if main_sheet != "findings" else "findings (2)"
    with pd.ExcelWriter(buffer, engine="openpyxl") as writer:
        sheets = [(main_sheet, frame)]
        if findings is not None:
            sheets.append((findings_sheet, findings))
        for title, table in sheets:
            _export_ready(table, replace_illegal=True).to_excel(writer, sheet_name=title,
                                                                index=False)
            writer.sheets[title].freeze_panes = "A2"
    return buffer.getvalue()


# --- the HTML report -------------------------------------------------------------------------

def _esc(text: object) -> str:
    from html import escape  # the report only: evaluate does not load it

    return escape("" if text is None else str(text), quote=True)


def _number(value: object) -> float:
    try:
        return float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return math.nan


def _blank(value: object) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def _count(value: object) -> str:
    number = _number(value)
    return f"{number:.0f}" if math.isfinite(number) else _DASH


def _significant(number: float, digits: int) -> str:
    """``digits`` significant digits, written without an exponent from 0.001 to 1e6."""
    if number == 0:
        return "0"
    magnitude = math.floor(math.log10(abs(number)))
    if not -3 <= magnitude < 6:
        return f"{number:.{digits}g}"
    decimals = max(digits - 1 - magnitude, 0)
    return f"{round(number, decimals):.{decimals}f}"


def _fmt(value: object, digits: int = 3, scale: float = 1.0) -> str:
    number = _number(value) * scale
    return _significant(number, digits) if math.isfinite(number) else _DASH


def _fixed(value: object, decimals: int = 1, scale: float = 1.0) -> str:
    number = _number(value) * scale
    return f"{number:.{decimals}f}" if math.isfinite(number) else _DASH


def _interval_text(value: object, digits: int = 3, scale: float = 1.0,
                   decimals: int | None = None) -> str:
    """'low to high' of a 2-item interval; significant digits, or fixed ``decimals``."""
    if isinstance(value, (list, tuple, np.ndarray)) and len(value) == 2:
        if decimals is None:
            low, high = _fmt(value[0], digits, scale), _fmt(value[1], digits, scale)
        else:
            low, high = _fixed(value[0], decimals, scale), _fixed(value[1], decimals, scale)
        if _DASH not in (low, high):
            return f"{low} to {high}"
    return _DASH


def _with_interval(central: str, interval: str, suffix: str = "") -> str:
    if central == _DASH:
        return _DASH
    return central + suffix + ("" if interval == _DASH else f" ({interval})")


def _table(header: Sequence[str], rows: Sequence[Sequence[str]], caption: str = "",
           widths: Sequence[float] = ()) -> str:
    """An HTML table; ``header`` and ``rows`` must already be escaped; ``widths`` in % of the
    page width, one per column, so that a wide table wraps its cells rather than the page."""
    head = "".join(f"<th>{cell}</th>" for cell in header)
    body = "".join("<tr>" + "".join(f"<td>{cell}</td>" for cell in row) + "</tr>"
                   for row in rows)
    caption_html = f"<caption>{caption}</caption>" if caption else ""
    columns = "".join(f'<col style="width: {width:g}%">' for width in widths)
    columns_html = f"<colgroup>{columns}</colgroup>" if columns else ""
    return (f"<table>{caption_html}{columns_html}<thead><tr>{head}</tr></thead>"
            f"<tbody>{body}</tbody></table>")


# --- machines in words -----------------------------------------------------------------------

_FILL_WORDS = ((0.5, "half"), (0.25, "a quarter"), (0.75, "three quarters"))
_SPLIT_WORDS = ("split collectors (each collector's two halves angled toward the nearest "
                "neutraliser)")


def _plural(count: float, word: str) -> str:
    shown = f"{count:g}"
    return f"{shown} {word}" if shown == "1" else f"{shown} {word}s"


def _unit_written(text: object) -> str:
    """The unit of a quantity as the user wrote it ("cm" of "44 cm"), "" when there is none."""
    if not isinstance(text, str):
        return ""
    try:
        return split_quantity(text, "size")[1]
    except InputError:
        return ""


def _as_written(text: object, metres: float) -> tuple[str, str]:
    """A length as the user wrote it, split in number and unit ("44", "cm"); in cm, from the
    SI value, when the user wrote no unit."""
    unit = _unit_written(text)
    written = str(text).strip()
    if unit and written.endswith(unit):
        return written[:-len(unit)].strip(), unit
    return f"{float(to_display(metres, 'length', 'cm')):.3g}", "cm"


def _length_words(text: object, metres: float) -> str:
    number, unit = _as_written(text, metres)
    return f"{number} {unit}"


def _span_words(inner_text: object, inner_m: float, outer_text: object, outer_m: float) -> str:
    inner_number, inner_unit = _as_written(inner_text, inner_m)
    outer_number, outer_unit = _as_written(outer_text, outer_m)
    if inner_unit == outer_unit:
        return f"from {inner_number} to {outer_number} {outer_unit}"
    return f"from {inner_number} {inner_unit} to {outer_number} {outer_unit}"


def _fill_words(fill: float) -> str:
    for value, words in _FILL_WORDS:
        if math.isclose(fill, value, abs_tol=1e-9):
            return words
    return f"{fill * _PERCENT_PER_FRACTION:.3g} %"


def _disc_words(machine: Machine) -> str:
    disc, spec = machine.carrier, machine.spec
    sectored = disc.sector_fill < 1
    arrangement = machine.arrangement
    if arrangement == "twin-disc":
        head = "a twin-disc machine with metal sectors: two counter-rotating discs"
    elif arrangement == "twin-disc-sectorless":
        head = "a sectorless twin-disc machine: two counter-rotating discs without sectors"
    elif arrangement == "disc-stack":
        head = (f"a disc stack: {machine.discs} close-spaced counter-rotating discs "
                + ("with metal sectors" if sectored else "without sectors"))
    elif arrangement == "single-disc":
        head = "a single-disc machine: one disc turning past a fixed inductor plate"
    else:
        head = (f"a disc machine with {_plural(machine.carriers, 'disc')}"
                + (" with metal sectors" if sectored else ""))
    if machine.collectors == "split":
        head += f", with {_SPLIT_WORDS}"
    word = "radius" if "outer_radius" in spec else "diameter"
    scale = 1.0 if word == "radius" else 2.0
    outer_text, inner_text = spec.get(f"outer_{word}"), spec.get(f"inner_{word}")
    if inner_text is None:  # inner size not given, or given the other way: both from SI
        outer_text = None if disc.inner_radius_m > 0 else outer_text
    outer_m, inner_m = disc.outer_radius_m * scale, disc.inner_radius_m * scale
    if disc.inner_radius_m > 0:
        zone = f"charged zone {_span_words(inner_text, inner_m, outer_text, outer_m)} {word}"
    else:
        zone = f"charged zone the whole disc, {_length_words(outer_text, outer_m)} {word}"
    if sectored:
        zone += f", sectors covering {_fill_words(disc.sector_fill)} of it"
    return f"{head}, {zone}"


def _belt_words(machine: Machine) -> str:
    belt, spec = machine.carrier, machine.spec
    belts = "a belt" if machine.carriers == 1 else f"{machine.carriers} belts"
    words = f"a belt machine: {belts} {_length_words(spec.get('width'), belt.width_m)} wide"
    if belt.roller_diameter_m is not None:
        return (words + ", running over a roller of "
                f"{_length_words(spec.get('roller_diameter'), belt.roller_diameter_m)} "
                "diameter on which the speed is read")
    if belt.loop_length_m is not None:
        loop = _length_words(spec.get("loop_length"), belt.loop_length_m)
        return words + f" in a loop of {loop} (the speed is counted in circulations of the belt)"
    return words + " (the speed is the belt's linear speed)"


def _cylinder_words(machine: Machine) -> str:
    cylinder, spec = machine.carrier, machine.spec
    cylinders = "a cylinder" if machine.carriers == 1 else f"{machine.carriers} cylinders"
    if "radius" in spec:
        size = f"{_length_words(spec.get('radius'), cylinder.radius_m)} radius"
    else:
        size = f"{_length_words(spec.get('diameter'), 2 * cylinder.radius_m)} diameter"
    length = _length_words(spec.get("active_length"), cylinder.active_length_m)
    return f"a cylinder machine: {cylinders} of {size}, charged over {length} of its length"


def _custom_words(machine: Machine) -> str:
    text = machine.spec.get("area_per_rev")
    if not _unit_written(text):
        text = f"{float(to_display(machine.carrier.area_per_rev_m2, 'area', 'cm^2')):.4g} cm²"
    carriers = "" if machine.carriers == 1 else f" ({machine.carriers} carriers)"
    return f"a machine described by its charged area per revolution, {text}{carriers}"


def describe_machine(machine: Machine) -> str:
    """A machine in the trade's words, as a report or a page writes it.

    Parameters
    ----------
    machine : Machine
        The machine.

    Returns
    -------
    str
        Plain text (not escaped) without a subject, e.g. "a twin-disc machine with metal
        sectors: two counter-rotating discs, charged zone from 26 to 44 cm diameter, sectors
        covering half of it; 1 unit (twin-disc with sectors = 1 unit in total (...); common
        practice, no source)". Sizes are given in the units the user wrote them (in cm where
        they wrote a bare number); the units and their rule come from
        :attr:`engine.machines.Machine.unit_rule`.
    """
    describe = {"disc": _disc_words, "belt": _belt_words, "cylinder": _cylinder_words}.get(
        machine.kind, _custom_words)
    rule = machine.unit_rule
    why = rule.rule if rule.basis == COUNTED else f"{rule.rule}; {rule.basis}"
    return f"{describe(machine)}; {_plural(rule.units, 'unit')} ({why})"


def _machine_facts(machine: Machine) -> str:
    """The machine's figures in sentences, escaped."""
    area = machine.carrier.area_per_rev_m2
    one = "disc" if machine.kind == "disc" else "carrier"
    facts = []
    if area is not None:
        facts.append(f"Charged area per revolution of one {one}: "
                     f"{_fmt(to_display(area, 'area', 'cm^2'), 4)} cm².")
    else:
        facts.append("Charged area: belt width times the belt's linear speed.")
    field = _fmt(to_display(machine.breakdown_field_at(1.0), "electric_field", "MV/m"))
    facts.append(f"Breakdown field of air at the reference atmosphere (20 °C, 101.3 kPa): "
                 f"{field} MV/m" + (f", from its air gap of {_esc(machine.air_gap_text)}."
                                    if machine.air_gap_text else "."))
    if machine.material:
        facts.append(f"Material: {_esc(machine.material)}.")
    facts.append(f"Identifier in the lab: {_esc(machine.id)}.")
    text = " ".join(facts)
    if machine.notes:
        text += f"<br>Notes: {_esc(machine.notes)}"
    return text


def _machine_section(machine: Machine, drawings: Sequence[str], drawing_notes: Sequence[str]
                     ) -> str:
    label = _esc(machine.label or machine.id)
    notes = "".join(f"; {_esc(note[:1].lower() + note[1:])}" for note in drawing_notes)
    if len(drawings) > 1:
        caption = (f"{label}. Left: the charged zone to scale{notes}. Right: the discs seen "
                   "edge on, with the units each one counts for and the collectors (not to "
                   "scale).")
    else:
        caption = f"{label}: the carrier to scale{notes}."
    return (f'<article class="machine"><h3>{label}</h3>'
            f"<p>{label} is {_esc(describe_machine(machine))}.</p>"
            f'<p class="facts">{_machine_facts(machine)}</p>'
            f'<figure class="drawings"><div class="drawing-row">{"".join(drawings)}</div>'
            f"<figcaption>{caption}</figcaption></figure></article>")


_TITLE_NOTES = re.compile(r"^.*?<br><span[^>]*>(.*)</span>$", re.S)


def _caption_instead_of_title(figure) -> list[str]:
    """Take the title off a small drawing (the page's caption says what it shows) and return
    the notes the drawing wrote under its title, as plain text; the area, which the machine's
    facts give, is left out."""
    match = _TITLE_NOTES.match(figure.layout.title.text or "")
    from html import unescape  # the report only

    notes = [unescape(note) for note in match.group(1).split("<br>")] if match else []
    figure.update_layout(title_text="", margin={"t": 10, "b": 10, "l": 10, "r": 10})
    return [note for note in notes if not note.startswith("Charged area per revolution")]


# --- findings --------------------------------------------------------------------------------

def _notes_of(record: Mapping[str, object]) -> str:
    notes = record.get("notes")
    if isinstance(notes, (list, tuple)):
        notes = "; ".join(str(note) for note in notes)
    return "" if _blank(notes) else str(notes)


def _in_report_order(findings: pd.DataFrame, machines: Mapping[str, Machine],
                     sessions: Mapping[str, Sequence[str]]) -> list[dict[str, object]]:
    """The findings of described machines, machine by machine, each one's sessions in time."""
    if "machine" in findings:
        # readings of undescribed machines have no ceiling: the header names them instead
        findings = findings[findings["machine"].astype(str).isin(list(machines))]
    machine_position = {machine_id: number for number, machine_id in enumerate(machines)}
    records = findings.to_dict("records")

    def position(record: Mapping[str, object]) -> tuple[int, int]:
        machine_id = str(record.get("machine"))
        session = "" if _blank(record.get("session")) else str(record.get("session"))
        order = list(sessions.get(machine_id, []))
        return (machine_position.get(machine_id, len(machine_position)),
                order.index(session) if session in order else len(order))

    return sorted(records, key=position)


def _findings_table(findings: pd.DataFrame | None, machines: Mapping[str, Machine],
                    reference_rh_pct: float,
                    sessions: Mapping[str, Sequence[str]] | None = None) -> str:
    """The findings in two tables narrow enough for a page, with their notes numbered below."""
    records = ([] if findings is None else
               _in_report_order(findings, machines, sessions or {}))
    if not records:
        return "<p>No findings: no machine had readings to fit.</p>"
    main_header = ["Machine", "Session", "Readings used",
                   "Efficiency [%]: median (quartiles)",
                   "Units delivered of those expected (95 % interval)",
                   "Charge per revolution [nC] (95 % interval)",
                   f"Efficiency at {reference_rh_pct:g} % relative humidity [%]", "Notes"]
    fit_header = ["Machine", "Session", "Current at zero speed, I₀ [µA]",
                  "How straight current against speed is, R² (1: a straight line)",
                  "Change of efficiency per +10 % relative humidity [percentage points] "
                  "(95 % interval)",
                  "Relative humidity at half output [%]"]
    percent = _PERCENT_PER_FRACTION
    main_rows, fit_rows, notes = [], [], []
    for record in records:
        machine_id = "" if _blank(record.get("machine")) else str(record.get("machine"))
        machine = machines.get(machine_id)
        label = _esc(machine.label if machine is not None else machine_id)
        session = _esc("" if _blank(record.get("session")) else record.get("session"))
        quartiles = _interval_text((record.get("efficiency_q25"), record.get("efficiency_q75")),
                                   scale=percent, decimals=1)
        charge = _with_interval(_fmt(record.get("charge_per_rev_nC")),
                                _interval_text(record.get("charge_per_rev_ci_nC")))
        if charge == _DASH:
            # a belt read in m/s: the speed fit gives charge per metre of belt
            charge = _with_interval(_fmt(record.get("charge_per_metre_nC")),
                                    _interval_text(record.get("charge_per_metre_ci_nC")),
                                    " per metre of belt")
        used = _count(record.get("readings_used"))
        flagged = _number(record.get("readings_flagged"))
        if math.isfinite(flagged) and flagged > 0:
            used += f" ({flagged:.0f} flagged)"
        note = _notes_of(record)
        if note:
            notes.append(note)
        main_rows.append([
            label, session, used,
            _with_interval(_fixed(record.get("efficiency_median"), 1, percent), quartiles),
            _units_text(record), charge,
            _fixed(record.get("efficiency_at_reference_rh"), 1, percent),
            f'<a href="#finding-note-{len(notes)}">note {len(notes)}</a>' if note else "",
        ])
        fit_rows.append([
            label, session, _fmt(record.get("offset_current_uA")),
            _fixed(record.get("fit_r2"), 3),
            _with_interval(_fixed(record.get("humidity_slope_per_10pct"), 1, percent),
                           _interval_text(record.get("humidity_slope_per_10pct_ci"),
                                          scale=percent, decimals=1)),
            _fixed(record.get("logistic_rh_half_pct"), 0),
        ])
    note_list = ""
    if notes:
        items = "".join(f'<li id="finding-note-{number}">{_esc(note[:1].upper() + note[1:])}'
                        "</li>"
                        for number, note in enumerate(notes, 1))
        note_list = f'<ol class="table-notes">{items}</ol>'
    return (_table(main_header, main_rows, widths=(16, 12, 10, 14, 14, 14, 11, 9))
            + note_list + "<h3>The fits in detail</h3>"
            + _table(fit_header, fit_rows, widths=(18, 14, 15, 15, 22, 16)))


# --- the verdict -----------------------------------------------------------------------------

def _session_name(session: str) -> str:
    return f"'{session}'" if session else "(no session)"


def sessions_in_time_order(derived: pd.DataFrame) -> dict[str, list[str]]:
    """The sessions of each machine in the order they were held.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with ``machine``, ``session`` and ``time``.

    Returns
    -------
    dict of str to list of str
        Per machine id, its session names ("" for readings without a session) ordered by their
        first reading in time; sessions without any time follow in the order they appear.
    """
    if derived is None or derived.empty or col.MACHINE not in derived:
        return {}
    sessions = (derived[col.SESSION] if col.SESSION in derived
                else pd.Series("", index=derived.index))
    times = (pd.to_datetime(derived[col.TIME], errors="coerce", utc=True, format="mixed")
             if col.TIME in derived else pd.Series(pd.NaT, index=derived.index,
                                                   dtype="datetime64[ns, UTC]"))
    frame = pd.DataFrame({"machine": derived[col.MACHINE].astype(object).fillna("").astype(str),
                          "session": sessions.astype(object).fillna("").astype(str),
                          "time": times})
    first = frame.groupby(["machine", "session"], sort=False)["time"].min().reset_index()
    first["appearance"] = np.arange(len(first))
    first = first.sort_values(["time", "appearance"], na_position="last", kind="stable")
    return {machine: list(group["session"])
            for machine, group in first.groupby("machine", sort=False)}


def _comparison_html(derived: pd.DataFrame, machine: Machine, sessions: Sequence[str]) -> str:
    from engine.analysis import compare_sessions

    label = _esc(machine.label or machine.id)
    first, last = sessions[0], sessions[-1]
    which = ("" if len(sessions) == 2 else
             f" (the first and the last of its {len(sessions)} sessions)")
    heading = (f"<strong>{label}</strong>, from {_esc(_session_name(first))} to "
               f"{_esc(_session_name(last))}{which}")
    try:
        comparison = compare_sessions(derived, machine.id, first, last)
    except InputError as error:
        return (f'<p class="verdict-item">{heading}. No comparison can be made: '
                f"{_esc(error)}.</p>")
    means = (f"Mean efficiency {_fixed(comparison['mean_a'], 1, _PERCENT_PER_FRACTION)} % in "
             f"{_esc(_session_name(first))} ({comparison['n_a']} readings) and "
             f"{_fixed(comparison['mean_b'], 1, _PERCENT_PER_FRACTION)} % in "
             f"{_esc(_session_name(last))} ({comparison['n_b']} readings).")
    notes = " ".join(f"{_esc(note[:1].upper() + note[1:])}." for note in
                     comparison.get("notes") or [])
    from engine.figures import sessions_compared

    chart = sessions_compared(derived, machine.id, first, last, comparison,
                              label=machine.label or machine.id)
    return (f'<p class="verdict-item">{heading}. {_esc(comparison["verdict"])}</p>'
            f'<p class="detail">{means}{" " + notes if notes else ""}</p>'
            + _plot_html(chart, CHART_WIDTH_PX, CHART_HEIGHT_PX))


def _delivery_html(findings: pd.DataFrame | None, machine: Machine,
                   sessions: Sequence[str]) -> str:
    label = _esc(machine.label or machine.id)
    if findings is None or "machine" not in findings:
        return ""
    rows = findings[findings["machine"].astype(str) == machine.id].to_dict("records")
    if not rows:
        return ""
    position = {name: number for number, name in enumerate(sessions)}

    def session_of(record: Mapping[str, object]) -> str | None:
        value = record.get("session")
        return None if _blank(value) else str(value)

    rows.sort(key=lambda record: position.get(session_of(record) or "", len(position)))
    clauses = []
    for record in rows:
        delivered = delivery_sentence(_number(record.get("observed_units")),
                                      _number(record.get("units")),
                                      str(record.get("units_basis") or TRADE_RULE))
        median = _fixed(record.get("efficiency_median"), 1, _PERCENT_PER_FRACTION)
        pieces = [delivered] if delivered else ["no speed fit"]
        pieces.append(f"median efficiency {median} %" if median != _DASH
                      else "no usable readings")
        session = session_of(record)
        clause = ", ".join(pieces)
        clauses.append(clause if session is None else f"in {_session_name(session)}: {clause}")
    if len(clauses) == 1 and session_of(rows[0]) is None:
        return f"<li><strong>{label}</strong> {_esc(clauses[0])}.</li>"
    return f"<li><strong>{label}</strong>: {_esc('; '.join(clauses))}.</li>"


def _undescribed_text(derived: pd.DataFrame, machines: Mapping[str, Machine]) -> str:
    """A sentence naming the machines that have readings but no description, escaped."""
    if col.MACHINE not in derived:
        return ""
    ids = derived[col.MACHINE].dropna().astype(str).unique()
    undescribed = sorted(set(ids) - set(machines))
    if not undescribed:
        return ""
    return (f" Readings of {_plural(len(undescribed), 'machine')} without a description "
            f"({_esc(', '.join(undescribed))}) have no ceiling and are left out of the verdict "
            "and the findings: describe them on the Machines page to include them.")


def _verdict_html(derived: pd.DataFrame, findings: pd.DataFrame | None,
                  machines: Mapping[str, Machine]) -> str:
    order = sessions_in_time_order(derived)
    comparisons = [_comparison_html(derived, machine, order[machine_id])
                   for machine_id, machine in machines.items()
                   if len(order.get(machine_id, [])) >= 2]
    deliveries = [_delivery_html(findings, machine, order.get(machine_id, []))
                  for machine_id, machine in machines.items()]
    deliveries = [item for item in deliveries if item]
    parts = ['<section class="verdict"><h2>Verdict</h2>']
    if comparisons:
        parts.append("<h3>Before and after</h3>")
        parts.extend(comparisons)
    parts.append("<h3>What each machine delivers</h3>")
    if deliveries:
        parts.append(f'<ul class="delivery">{"".join(deliveries)}</ul>')
        parts.append('<p class="detail">A unit is the ceiling current of one disc\'s (one '
                     "carrier's) charged area; how many units a machine can deliver follows "
                     "from its arrangement (see Machines and Method). The efficiency is the "
                     "measured current over the ceiling current.</p>")
    else:
        parts.append("<p>No machine has findings: no readings could be fitted.</p>")
    parts.append("</section>")
    return "".join(parts)


def _units_text(record: Mapping[str, object]) -> str:
    observed, expected = record.get("observed_units"), record.get("units")
    if _blank(observed) or _blank(expected):
        return _DASH
    return _with_interval(f"{_fmt(observed, 2)} of {_number(expected):g}",
                          _interval_text(record.get("observed_units_ci"), 2))


def _frame_table(frame: pd.DataFrame) -> str:
    """Any small frame as an escaped HTML table, numbers to 4 significant digits."""
    header = [_esc(name) for name in frame.columns]
    rows = []
    for record in frame.itertuples(index=False):
        cells = []
        for value in record:
            if isinstance(value, (float, np.floating)):
                cells.append(_fmt(value, 4))
            elif isinstance(value, (list, tuple)) and len(value) == 2:
                cells.append(_interval_text(value, 4))
            else:
                cells.append(_esc("" if value is None else value))
        rows.append(cells)
    return _table(header, rows)


def _comparisons_html(comparisons) -> str:
    if comparisons is None:
        return ""
    if isinstance(comparisons, pd.DataFrame):
        named = {"": comparisons}
    else:
        named = dict(comparisons)
    parts = ["<h2>Comparisons</h2>"]
    for name, frame in named.items():
        if name:
            parts.append(f"<h3>{_esc(name)}</h3>")
        parts.append(_frame_table(frame) if len(frame) else "<p>Nothing to compare.</p>")
    return "\n".join(parts)


def _notes_html(notes) -> str:
    if not notes:
        return ""
    items = [notes] if isinstance(notes, str) else list(notes)
    paragraphs = "".join(f"<p>{_esc(item).replace(chr(10), '<br>')}</p>" for item in items)
    return f"<h2>Notes</h2>{paragraphs}"


_METHOD_HTML = """
<h2>Method</h2>
<p>The ceiling current is the most charge an open-air carrier can deliver: the surface charge
density at which the field next to the carrier reaches the breakdown field of air, times the
charged area that passes the collectors per second:</p>
<p class="formula">I<sub>ceiling</sub> = &epsilon;<sub>0</sub> &middot; E<sub>ref</sub> &middot;
&delta; &middot; A<sub>rev</sub> &middot; f &middot; units</p>
<ul>
<li>&epsilon;<sub>0</sub> = 8.8541878128 &times; 10<sup>-12</sup> F/m, the vacuum permittivity
(CODATA 2018);</li>
<li>E<sub>ref</sub>: breakdown field of air at the reference atmosphere (3.0 MV/m unless a
machine says otherwise; handbook value for uniform fields over centimetre gaps);</li>
<li>&delta; = (p / 101.3 kPa) &middot; (293.15 K / T): relative air density against the
standard reference atmosphere of IEC 60060-1 (20 &deg;C, 101.3 kPa); where only the altitude is
known the pressure comes from the ICAO standard atmosphere (ICAO Doc 7488/3); the linear
scaling is the IEC 60060-1 air-density correction with exponent 1, and the reference
atmosphere also states 11 g/m&sup3; absolute humidity;</li>
<li>A<sub>rev</sub>: charged area per revolution of one carrier (disc: annulus times sector
fill; belt: width times belt length per counted revolution; cylinder: 2&pi;rL; custom: as
given); f: revolutions per second;</li>
<li>units: how many one-carrier ceilings the machine can deliver. For disc machines the trade
counts by arrangement (common practice, no published source): one disc past a fixed inductor
1; twin-disc with sectors 1 in total (one disc delivers, the other acts as a moving inductor),
with split collectors 2; sectorless twin-disc 2, with split collectors 4; a close stack of
sectorless discs with split collectors 2 per outer and 4 per inner disc (4n &minus; 4). Other
carriers count carriers N times charge loads per revolution k.</li>
</ul>
<p>Efficiency is measured over ceiling current. Charge per revolution is current over
revolutions per second. The speed fit is a least-squares line I = q f + I<sub>0</sub> per
machine (and session); the observed units are q / (&epsilon;<sub>0</sub>
E<sub>ref</sub> &delta; A<sub>rev</sub>), the fitted charge per revolution over what one unit
carries, so a machine "delivers 5.6 of the 28 units its arrangement allows". The humidity slope
is a least-squares line of efficiency against relative humidity, given per +10 % RH; the
efficiency at the reference humidity comes from that line, or from the logistic decline where
the data span the drop and it was fitted. Every fitted figure carries its 95 % confidence
interval. Humidity does not enter the ceiling; it lowers real output through surface
leakage. Vapour pressure, dew point and absolute humidity use the Magnus form with the
coefficients of Alduchov and Eskridge (1996):
e<sub>s</sub> = 6.1094 hPa &middot; exp(17.625 T / (T + 243.04 &deg;C)).</p>
<p>Readings with flags (values out of range, missing, above the ceiling by more than twice
their own uncertainty, clearly negative and so on) are left out of the fits and of the charts
of this report; they are listed in the exported readings table with their flag codes.</p>
<h3>References</h3>
<ul>
<li>IEC 60060-1:2010, High-voltage test techniques, Part 1: General definitions and test
requirements (standard reference atmosphere, relative air density).</li>
<li>ICAO Doc 7488/3, Manual of the ICAO Standard Atmosphere, 3rd edition, 1993.</li>
<li>Alduchov, O. A. and Eskridge, R. E. (1996), Improved Magnus form approximation of
saturation vapor pressure, Journal of Applied Meteorology 35, 601-609.</li>
<li>CODATA 2018 recommended values of the fundamental physical constants (vacuum electric
permittivity).</li>
</ul>
"""

_SAFETY_HTML = """
<h2>Safety</h2>
<ul>
<li>Electrostatic generators make tens to hundreds of kilovolts. Treat every terminal as live
high voltage.</li>
<li>With capacitors (jars) connected the stored energy can give a dangerous shock: discharge
them with an insulated grounding rod before touching anything.</li>
<li>Keep people with implanted medical devices (pacemakers and the like) away from running
machines.</li>
<li>Sparks ignite flammable vapours and gases: no solvents or fuels nearby.</li>
<li>Corona and sparks make ozone, which builds up in closed rooms: ventilate.</li>
<li>Protect electronic instruments (meters, loggers, computers) with series resistors and spark
gaps or gas-discharge protectors; sparks destroy them.</li>
<li>Vacuum tubes driven at high voltage can emit X-rays.</li>
<li>Follow your institution's electrical safety rules, local codes and licensed practice.</li>
</ul>
<p><strong>The tool computes, it does not make a set-up safe.</strong></p>
"""

#: Width of a chart in the report [px]: the text width of an A4 page with 15 mm margins
#: (180 mm at the CSS 96 px per inch) less a little, so that charts print without scaling.
CHART_WIDTH_PX = 660
#: Height of a chart in the report [px]: two charts and their headings fit on an A4 page.
CHART_HEIGHT_PX = 440
# A carrier drawing beside its arrangement diagram, low enough for two machines a page.
_DRAWING_PX = (280, 250)
_DIAGRAM_PX = (CHART_WIDTH_PX - _DRAWING_PX[0], 250)
_PLOT_CONFIG = {"displayModeBar": False, "responsive": False, "displaylogo": False}

_STYLE = """
body { font-family: system-ui, -apple-system, "Segoe UI", "Helvetica Neue", Arial, sans-serif;
       margin: 2em auto; max-width: 700px; color: #222; line-height: 1.45; padding: 0 1em; }
h1 { font-size: 1.7em; margin-bottom: 0.2em; }
h2 { font-size: 1.35em; border-bottom: 1px solid #ccc; padding-bottom: 0.1em; margin-top: 1.6em; }
h3 { font-size: 1.08em; margin: 1.2em 0 0.4em; }
table { border-collapse: collapse; margin: 0.5em 0 1em; font-size: 0.82em; width: 100%;
        table-layout: fixed; }
th, td { border: 1px solid #bbb; padding: 0.25em 0.4em; text-align: left; vertical-align: top;
         overflow-wrap: anywhere; hyphens: auto; }
/* headings wrap between words, never inside one ("Readin gs") */
th { background: #eef2f5; font-weight: 600; overflow-wrap: normal; hyphens: manual; }
.formula { font-size: 1.15em; margin-left: 1.5em; }
.meta, .detail, figcaption, .table-notes { color: #555; font-size: 0.9em; }
.verdict-item { font-size: 1.05em; margin-bottom: 0.2em; }
.delivery li { margin-bottom: 0.3em; }
.facts { font-size: 0.92em; }
figure { margin: 0.5em 0 1.2em; }
.drawing-row { display: flex; flex-wrap: wrap; align-items: flex-start; }
.chart { margin: 0.5em 0 1.5em; }
.table-notes { margin-top: -0.4em; padding-left: 1.6em; }
a { color: inherit; }
@page { size: A4; margin: 16mm 15mm 16mm 15mm; }
@media print {
  body { max-width: none; margin: 0; padding: 0; font-size: 10pt; }
  h1 { margin-top: 0; }
  section.machines, section.findings, section.charts, section.method { break-before: page; }
  h2, h3 { break-after: avoid; }
  tr, th, td, figure, .chart, .drawing-row, .verdict-item, li, article.machine {
    break-inside: avoid; }
  h2 + article.machine h3 { margin-top: 0.6em; }
  thead { display: table-header-group; }
  th { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  .modebar-container, .modebar, .no-print { display: none !important; }
  a { text-decoration: none; }
}
"""


def _plot_html(figure, width: int, height: int, css_class: str = "chart") -> str:
    """One chart as a div that draws with the plotly.js embedded once in the document head."""
    import plotly.io as pio

    figure.update_layout(width=width, height=height, autosize=False)
    return (f'<div class="{css_class}">' + pio.to_html(figure, full_html=False,
                                                       include_plotlyjs=False,
                                                       config=_PLOT_CONFIG) + "</div>")


def _machines_html(machines: Mapping[str, Machine]) -> str:
    from engine.figures import arrangement_diagram, carrier_drawing

    if not machines:
        return '<section class="machines"><h2>Machines</h2><p>No machines.</p></section>'
    articles = []
    for machine in machines.values():
        drawing = carrier_drawing(machine)
        notes = _caption_instead_of_title(drawing)
        drawings = [_plot_html(drawing, *_DRAWING_PX, css_class="drawing")]
        if machine.kind == "disc":
            diagram = arrangement_diagram(machine)
            _caption_instead_of_title(diagram)
            drawings.append(_plot_html(diagram, *_DIAGRAM_PX, css_class="drawing"))
        articles.append(_machine_section(machine, drawings, notes))
    return '<section class="machines"><h2>Machines</h2>' + "".join(articles) + "</section>"


def report_file_name(title: str, day: date | datetime | None = None,
                     suffix: str = ".html") -> str:
    """A safe file name for a report: its title as a short slug, then its date.

    Parameters
    ----------
    title : str
        The report's title (user text).
    day : date or datetime, optional
        The report's date; default today.
    suffix : str
        The file name's ending.

    Returns
    -------
    str
        E.g. ``museum-twin-disc-before-and-after-2026-02-03.html``: letters folded to plain
        ASCII (accents dropped), lower case, every other run of characters one hyphen, at most
        60 characters before the date; ``ceiling-lab-report`` when nothing of the title is left.
        No path separators, dots or spaces, so the name is safe on every file system.
    """
    import unicodedata

    day = day or datetime.now().astimezone()
    day = day.date() if isinstance(day, datetime) else day
    plain = unicodedata.normalize("NFKD", str(title or "")).encode("ascii", "ignore").decode()
    slug = re.sub(r"[^a-z0-9]+", "-", plain.lower()).strip("-")[:60].strip("-")
    return f"{slug or 'ceiling-lab-report'}-{day.isoformat()}{suffix}"


def html_report(derived: pd.DataFrame, findings: pd.DataFrame | None,
                machines: Mapping[str, Machine], title: str,
                comparisons: pd.DataFrame | Mapping[str, pd.DataFrame] | None = None,
                notes: str | Sequence[str] | None = None, *,
                reference_rh_pct: float | None = None,
                colours: Mapping[str, str] | None = None,
                generated: date | datetime | None = None) -> str:
    """One self-contained HTML document that a conservator or a teacher can file or print.

    Parameters
    ----------
    derived : pandas.DataFrame
        Readings with derived columns (SI units).
    findings : pandas.DataFrame or None
        One row per machine (or machine and session), as from the analysis.
    machines : mapping of str to Machine
        The machines, by id.
    title : str
        Title of the report (user text; escaped).
    comparisons : pandas.DataFrame or mapping of str to DataFrame, optional
        Comparison tables (e.g. sessions side by side), shown as tables.
    notes : str or sequence of str, optional
        The user's notes, one paragraph each (escaped).
    reference_rh_pct : float, optional
        Reference relative humidity of the humidity fit [%]; default 45.
    colours : mapping of str to str, optional
        Colour per machine id, as on the app's pages.
    generated : date or datetime, optional
        Date printed on the report; default today.

    Returns
    -------
    str
        An HTML document, in this order: the title and date; the verdict (for each machine
        with two or more sessions the first and the last session in time compared by
        :func:`engine.analysis.compare_sessions`, and for each machine what it delivers in
        units, :func:`engine.arrangements.delivery_sentence`, with its median efficiency); the
        user's notes; the machines in words (:func:`describe_machine`) with their drawings;
        the findings in two tables that fit a page, their notes numbered below; the
        comparisons; the four comparison charts; the method with its references; the safety
        notes. Every user text is escaped. plotly.js is embedded once, in the head; the
        document loads nothing from the network. A print stylesheet (A4, page breaks before
        the major sections and never inside a row or a figure, charts sized to the page, no
        chart controls) makes a browser's "Print to PDF" a clean document.
    """
    # Charts are drawn here only: the exports and the command line never load plotly.
    from plotly.offline import get_plotlyjs

    from engine.figures import (
        DEFAULT_REFERENCE_RH_PCT,
        charge_per_rev,
        current_vs_speed,
        efficiency_vs_humidity,
        efficiency_vs_speed,
        machine_colours,
    )

    if reference_rh_pct is None:
        reference_rh_pct = DEFAULT_REFERENCE_RH_PCT
    generated = generated or datetime.now().astimezone()
    day = generated.date() if isinstance(generated, datetime) else generated
    derived = derived if derived is not None else pd.DataFrame()
    chosen_colours = machine_colours(list(machines) + (
        list(derived[col.MACHINE].dropna().astype(str).unique())
        if col.MACHINE in derived else []))
    # The app's own colours, when given, so that the report matches the screens.
    colours = {**chosen_colours, **(colours or {})}
    charts = [
        builder(derived, findings, machines, colours)
        for builder in (current_vs_speed, efficiency_vs_speed, charge_per_rev)
    ]
    charts.append(efficiency_vs_humidity(derived, findings, machines, colours,
                                         reference_rh_pct=reference_rh_pct))
    chart_html = [_plot_html(figure, CHART_WIDTH_PX, CHART_HEIGHT_PX) for figure in charts]
    total = len(derived)
    flagged = 0
    if col.FLAGS in derived:
        flags = derived[col.FLAGS].astype(object).where(derived[col.FLAGS].notna(), "")
        flagged = int((flags.astype(str).str.strip() != "").sum())
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_esc(title)}</title><style>{_STYLE}</style>",
        f'<script type="text/javascript">{get_plotlyjs()}</script></head><body>',
        f"<header><h1>{_esc(title)}</h1>",
        f'<p class="meta">Report date: {day.isoformat()}. Machines: {len(machines)}. '
        f"Readings: {total}, of which {flagged} flagged (left out of fits and charts)."
        + _undescribed_text(derived, machines) + "</p></header>",
        _verdict_html(derived, findings, machines),
        _notes_html(notes),
        _machines_html(machines),
        '<section class="findings"><h2>Findings</h2>',
        _findings_table(findings, machines, reference_rh_pct,
                        sessions_in_time_order(derived)),
        _comparisons_html(comparisons),
        "</section>",
        '<section class="charts"><h2>Charts</h2>',
        *chart_html,
        "</section>",
        f'<section class="method">{_METHOD_HTML}</section>',
        f'<section class="safety">{_SAFETY_HTML}</section>',
        "</body></html>",
    ]
    return "\n".join(part for part in parts if part)
