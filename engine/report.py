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

import html
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
from engine.machines import Machine
from engine.units import to_display

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
    result = np.full(len(instants), "", dtype=object)
    result[known] = text[where_known]
    return pd.Series(result, index=times.index, dtype=object)


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
    times = derived[col.TIME] if col.TIME in derived else pd.Series(pd.NaT, index=derived.index)
    with np.errstate(over="ignore", invalid="ignore"):  # absurd input gives inf, not a warning
        return _output_columns(derived, times)


def _output_columns(derived: pd.DataFrame, times: pd.Series) -> pd.DataFrame:
    out = {
        "machine": _texts(derived, col.MACHINE),
        "time": iso_text(times).to_numpy(dtype=object),  # ISO text, "" when unknown
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
    return pd.DataFrame(out, index=pd.RangeIndex(len(derived)))


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
        series = frame[name]
        if pd.api.types.is_object_dtype(series):
            filled = series.dropna()
            if len(filled) and isinstance(filled.iloc[0], (list, tuple, np.ndarray)):
                parts[f"{name}_low"] = pd.to_numeric(series.str[0], errors="coerce")
                parts[f"{name}_high"] = pd.to_numeric(series.str[1], errors="coerce")
                continue
        if isinstance(series.dtype, pd.DatetimeTZDtype):
            # spreadsheets have no time zones: keep the clock time and its offset as text
            series = iso_text(series)
        parts[name] = series
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


def write_csv(frame: pd.DataFrame, target: str | Path | BinaryIO) -> None:
    """Write a frame as UTF-8 CSV, text cells neutralised against formula injection.

    Parameters
    ----------
    frame : pandas.DataFrame
        Typically :func:`output_frame` or the findings.
    target : str, Path or binary file
        Where to write; streamed, so a million readings are never held twice in memory.

    Notes
    -----
    Comma-separated, CRLF rows (RFC 4180), a header row and no index. Text cells are quoted;
    numbers are rounded to 12 significant digits (:func:`round_significant`), empty where
    unknown. Interval columns (2-item lists) are split into ``<name>_low`` and
    ``<name>_high``. Written with Arrow's CSV writer, which formats in compiled code.
    """
    ready = _export_ready(frame)
    arrays = {}
    for name in ready.columns:
        series = ready[name]
        if _is_text_column(series):
            # pandas' text type converts any other cell with str(), missing cells stay empty
            arrays[name] = pa.array(series.astype("string"), type=pa.string(),
                                    from_pandas=True)
        elif pd.api.types.is_integer_dtype(series) or pd.api.types.is_bool_dtype(series):
            arrays[name] = pa.array(series.to_numpy())
        else:
            values = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float)
            arrays[name] = pa.array(round_significant(values), from_pandas=True)
    table = pa.table(arrays) if arrays else pa.table({})
    # Headers with a comma, quote or line break (plain-words headers such as "efficiency,
    # median [%]") are quoted as RFC 4180 asks; plain headers stay bare.
    structural = any(mark in str(name) for name in ready.columns for mark in ',"\r\n')
    options = pa_csv.WriteOptions(include_header=True, quoting_style="needed",
                                  quoting_header="needed" if structural else "none",
                                  eol="\r\n")
    if isinstance(target, (str, Path)):
        pa_csv.write_csv(table, str(target), write_options=options)
    else:
        pa_csv.write_csv(table, target, write_options=options)


def to_csv_bytes(frame: pd.DataFrame) -> bytes:
    """A frame as UTF-8 CSV bytes (see :func:`write_csv` for the layout)."""
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
    return html.escape("" if text is None else str(text), quote=True)


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


def _table(header: Sequence[str], rows: Sequence[Sequence[str]], caption: str = "") -> str:
    """An HTML table; ``header`` and ``rows`` must already be escaped."""
    head = "".join(f"<th>{cell}</th>" for cell in header)
    body = "".join("<tr>" + "".join(f"<td>{cell}</td>" for cell in row) + "</tr>"
                   for row in rows)
    caption_html = f"<caption>{caption}</caption>" if caption else ""
    return f"<table>{caption_html}<thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _machines_table(machines: Mapping[str, Machine]) -> str:
    header = ["Id", "Label", "Carrier", "Geometry (as described)", "Units of one carrier's "
              "ceiling (rule)", "Charged area per revolution [cm²]",
              "Breakdown field at reference [MV/m]", "Material", "Notes"]
    rows = []
    for machine in machines.values():
        area = machine.carrier.area_per_rev_m2
        geometry = ", ".join(f"{key} = {value}" for key, value in machine.spec.items())
        rows.append([
            _esc(machine.id), _esc(machine.label), _esc(machine.kind), _esc(geometry),
            _esc(f"{machine.units:g} ({machine.unit_rule.text})"),
            _fmt(to_display(area, "area", "cm^2"), 4) if area is not None else "– (linear speed)",
            _fmt(to_display(machine.breakdown_field_at(1.0), "electric_field", "MV/m"))
            + (f" (air gap {_esc(machine.air_gap_text)})" if machine.air_gap_text else ""),
            _esc(machine.material), _esc(machine.notes),
        ])
    return _table(header, rows)


def _findings_table(findings: pd.DataFrame | None, machines: Mapping[str, Machine],
                    reference_rh_pct: float) -> str:
    if findings is None or len(findings) == 0:
        return "<p>No findings: no machine had readings to fit.</p>"
    header = ["Machine", "Session", "Carrier", "Readings used", "Readings flagged",
              "Efficiency median [%] (quartiles)", "Charge per revolution q [nC] (95 % CI)",
              "Offset current I0 [µA]", "Speed fit R² [-]", "Units delivered of expected",
              "Humidity slope [% points per +10 % RH] (95 % CI)",
              f"Efficiency at {reference_rh_pct:g} % RH [%]", "RH at half output [%]", "Notes"]
    percent = _PERCENT_PER_FRACTION
    rows = []
    for record in findings.to_dict("records"):
        machine_id = "" if _blank(record.get("machine")) else str(record.get("machine"))
        machine = machines.get(machine_id)
        label = machine.label if machine is not None else machine_id
        session = "" if _blank(record.get("session")) else record.get("session")
        quartiles = _interval_text((record.get("efficiency_q25"), record.get("efficiency_q75")),
                                   scale=percent, decimals=1)
        charge = _with_interval(_fmt(record.get("charge_per_rev_nC")),
                                _interval_text(record.get("charge_per_rev_ci_nC")))
        if charge == _DASH:
            # a belt read in m/s: the speed fit gives charge per metre of belt
            charge = _with_interval(_fmt(record.get("charge_per_metre_nC")),
                                    _interval_text(record.get("charge_per_metre_ci_nC")),
                                    " per metre of belt")
        notes = record.get("notes")
        if isinstance(notes, (list, tuple)):
            notes = "; ".join(str(note) for note in notes)
        rows.append([
            _esc(label), _esc(session), _esc("" if _blank(record.get("carrier")) else
                                             record.get("carrier")),
            _count(record.get("readings_used")), _count(record.get("readings_flagged")),
            _with_interval(_fixed(record.get("efficiency_median"), 1, percent), quartiles),
            charge,
            _fmt(record.get("offset_current_uA")),
            _fixed(record.get("fit_r2"), 3),
            _units_text(record),
            _with_interval(_fixed(record.get("humidity_slope_per_10pct"), 1, percent),
                           _interval_text(record.get("humidity_slope_per_10pct_ci"),
                                          scale=percent, decimals=1)),
            _fixed(record.get("efficiency_at_reference_rh"), 1, percent),
            _fixed(record.get("logistic_rh_half_pct"), 0),
            _esc("" if _blank(notes) else notes),
        ])
    return _table(header, rows)


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

_STYLE = """
body { font-family: system-ui, sans-serif; margin: 2em auto; max-width: 1150px;
       color: #222; line-height: 1.45; padding: 0 1em; }
table { border-collapse: collapse; margin: 0.5em 0 1.5em; font-size: 0.9em; }
th, td { border: 1px solid #bbb; padding: 0.25em 0.5em; text-align: left;
         vertical-align: top; }
th { background: #eef2f5; }
.formula { font-size: 1.15em; margin-left: 1.5em; }
.meta { color: #555; }
.chart { margin: 1em 0 2em; }
"""


def html_report(derived: pd.DataFrame, findings: pd.DataFrame | None,
                machines: Mapping[str, Machine], title: str,
                comparisons: pd.DataFrame | Mapping[str, pd.DataFrame] | None = None,
                notes: str | Sequence[str] | None = None, *,
                reference_rh_pct: float | None = None,
                colours: Mapping[str, str] | None = None,
                generated: date | datetime | None = None) -> str:
    """One self-contained HTML document reporting machines, findings and charts.

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
        An HTML document with the title, date, machines table, findings table, comparisons,
        notes, the four comparison charts, method, references and safety notes. plotly's
        JavaScript is embedded once; the document loads nothing from the network.
    """
    # Charts are drawn here only: the exports and the command line never load plotly.
    import plotly.io as pio

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
    chart_html = [
        '<div class="chart">' + pio.to_html(figure, full_html=False,
                                            include_plotlyjs=(number == 0),
                                            config={"displaylogo": False}) + "</div>"
        for number, figure in enumerate(charts)
    ]
    total = len(derived)
    flagged = 0
    if col.FLAGS in derived:
        flags = derived[col.FLAGS].astype(object).where(derived[col.FLAGS].notna(), "")
        flagged = int((flags.astype(str).str.strip() != "").sum())
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_esc(title)}</title><style>{_STYLE}</style></head><body>",
        f"<h1>{_esc(title)}</h1>",
        f'<p class="meta">Report date: {day.isoformat()}. Readings: {total}, of which '
        f"{flagged} flagged (left out of fits and charts).</p>",
        "<h2>Machines</h2>",
        _machines_table(machines) if machines else "<p>No machines.</p>",
        "<h2>Findings</h2>",
        _findings_table(findings, machines, reference_rh_pct),
        _comparisons_html(comparisons),
        _notes_html(notes),
        "<h2>Charts</h2>",
        *chart_html,
        _METHOD_HTML,
        _SAFETY_HTML,
        "</body></html>",
    ]
    return "\n".join(part for part in parts if part)
