"""The two public readers: a readings file and an environment (humidity) log."""

from __future__ import annotations

import os
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
from engine.readings.flags import (
    _flag_summary,
    _range_masks,
    _row_list,
    _same_time,
    flags_from_masks,
)
from engine.readings.formats import _read_table
from engine.readings.options import (
    ENVIRONMENT_FIELDS,
    READING_FIELDS,
    ReadOptions,
    ReadResult,
    _quoted,
)
from engine.readings.quantities import _clean_unit, _column_si, _resolve_unit, _text
from engine.readings.times import _parse_times
from engine.units import one_line


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
            f"{source_name}: has no machine column; add one (header 'machine'), or say which "
            "machine the readings belong to: --machine ID on the command line, or on the "
            "Readings page 'Machine, for a file without a machine column' under 'How the file "
            "is read'")
    session = _text(table.data.get("session"), length, fill=options.session or "")
    note = _text(table.data.get("note"), length, strip=False)

    masks: dict[str, np.ndarray] = {}
    values: dict[str, np.ndarray] = {}
    not_number = np.zeros(length, dtype=bool)
    unit_mismatch = np.zeros(length, dtype=bool)
    decisions = table.decisions
    speed, speed_text, speed_unit, speed_kind = _column_si(
        "speed", table, options, source_name, decimal, units_used, messages, decisions)
    current, current_text, current_unit, _ = _column_si(
        "current", table, options, source_name, decimal, units_used, messages, decisions)
    not_number |= speed_text | current_text
    unit_mismatch |= speed_unit | current_unit
    cell_notes = [_cell_note(table, "speed", speed_text, speed_unit),
                  _cell_note(table, "current", current_text, current_unit)]
    for field_name in ("rh", "temperature", "pressure", "voltage"):
        if field_name in table.columns:
            values[field_name], text_mask, unit_mask, _ = _column_si(
                field_name, table, options, source_name, decimal, units_used, messages,
                decisions)
            not_number |= text_mask
            unit_mismatch |= unit_mask
            cell_notes.append(_cell_note(table, field_name, text_mask, unit_mask))
        else:
            values[field_name] = np.full(length, np.nan)

    times = _parse_times(table.data.get("time"), table.data.get("date"), table, options,
                         decimal, source_name, units_used, messages)

    # A cell that holds no value of its field keeps what was written there, in the note, so
    # that the user sees "current written 'OVL'" and not an empty value.
    for field_name, text_mask, unit_mask in (("speed", speed_text, speed_unit),
                                             ("current", current_text, current_unit)):
        note = _keep_written(note, table, field_name, text_mask | unit_mask)
    masks["not_a_number"] = not_number
    masks["unit_mismatch"] = unit_mismatch
    masks["missing_value"] = ((np.isnan(speed) & ~speed_text & ~speed_unit)
                              | (np.isnan(current) & ~current_text & ~current_unit))
    # Only a negative speed is wrong in itself; a negative current is judged later against
    # the meter's tolerance (engine.analysis), as a reading near zero may be slightly below.
    masks["negative"] = speed < 0
    masks["zero_speed"] = speed == 0
    masks.update(_range_masks(values["rh"], values["temperature"], values["pressure"]))
    key = times.time if times.absolute else pd.Series(times.elapsed_s)
    # Sessions may restart their clock (elapsed time from 0): a duplicate is the same machine,
    # the same session and the same time.
    session_codes, session_names = pd.factorize(pd.Series(session))
    machine_codes, _machine_names = pd.factorize(pd.Series(machine))
    group = pd.Series(machine_codes.astype(np.int64) * (len(session_names) + 1) + session_codes)
    masks["duplicate_time"], same_time = _same_time(group, key, speed, current)
    shared = same_time & ~masks["duplicate_time"]
    if shared.any():
        decisions.append(
            f"{source_name}: {int(shared.sum())} reading(s) share their time with another "
            "reading of the same machine but have other values: the times are coarse (written "
            "to the minute or second), so these are separate readings and are kept")
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
    decisions.append(_units_decision(table, options, units_used, source_name))
    messages.extend(decision for decision in decisions if decision not in messages)
    messages.extend(_flag_summary(masks, length, source_name, table.lines, _what(table)))
    if times.bad.any() and ("time" in table.columns or "date" in table.columns):
        cell_notes.append(_cell_note(table, "time" if "time" in table.columns else "date",
                                     times.bad, np.zeros(length, dtype=bool)))
    messages.extend(f"{source_name}: {note}" for note in cell_notes if note)
    file_format = {**table.format, "time_format": times.label, "day_first": times.day_first}
    mapping = {name: column.header for name, column in table.columns.items()}
    return ReadResult(frame, source_name, file_format, mapping, units_used, messages,
                      list(decisions), np.asarray(table.lines, dtype=np.int64))


def _keep_written(note, table, field_name: str, mask: np.ndarray):
    """The notes with "<field> written '<cell>'" added where ``mask`` marks a bad cell."""
    if not mask.any() or field_name not in table.data:
        return note
    notes = pd.Series(note, dtype="object").reset_index(drop=True)
    cells = table.data[field_name].reset_index(drop=True)[mask].astype("str").str.slice(0, 40)
    written = f"{field_name} written '" + cells + "'"
    before = notes[mask].fillna("").astype("str")
    notes[mask] = np.where(before.str.strip() == "", written, before + "; " + written)
    return notes.to_numpy(dtype=object)


def _cell_note(table, field_name: str, text: np.ndarray, unit: np.ndarray) -> str:
    """Where a column holds cells that are no value of its field, with an example and the fix."""
    if not (text.any() or unit.any()):
        return ""
    what = _what(table)
    cells = table.data[field_name].reset_index(drop=True)
    parts = []
    for mask, problem in ((text, "text where a number belongs" if field_name not in (
            "time", "date") else "times that cannot be read"),
                          (unit, f"a unit that does not fit the {field_name}")):
        if mask.any():
            example = one_line(cells.iloc[int(np.flatnonzero(mask)[0])])[:40]
            parts.append(f"{problem} on {what} {_row_list(mask, table.lines)} (e.g. "
                         f"'{example}')")
    fix = ("write the time as 2024-03-01 14:05:00 or leave it empty" if field_name in (
        "time", "date") else "correct those cells or leave them empty")
    return (f"column {_quoted(table.columns[field_name].header)} has " + "; ".join(parts)
            + f": those readings are flagged and left out of fits; {fix}")


_ORIGINS = {"header": "from the header", "units row": "from the units row",
            "caller": "as given", "default": "assumed: no unit given"}


def _units_decision(table, options: ReadOptions, units_used: dict[str, str], source: str
                    ) -> str:
    """One sentence: the unit each numeric column was read in, and where it came from."""
    parts = []
    for field_name in ("speed", "current", "rh", "temperature", "pressure", "voltage"):
        if field_name not in table.columns or field_name not in units_used:
            continue
        unit, origin = _resolve_unit(field_name, table, options, source)
        used = units_used[field_name]
        if used == "" and unit != "":
            parts.append(f"{field_name} as fractions (no unit given and every value 0 to 1)")
            continue
        where = (_ORIGINS[origin] if used in (unit, _clean_unit(field_name, unit))
                 else "written in the cells")
        parts.append(f"{field_name} in {used or 'fractions'} ({where})")
    return f"{source}: units: " + "; ".join(parts)


def _what(table) -> str:
    """How a data row is named in messages: a line of a text file, a row of a sheet."""
    return "row" if table.format.get("file_type") == "xlsx" else "line"


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
            values[field_name], not_number, unit_mask, _ = _column_si(
                field_name, table, options, source_name, decimal, units_used, messages,
                table.decisions)
            if not_number.any() or unit_mask.any():
                bad = not_number | unit_mask
                messages.append(
                    f"{source_name}: {int(bad.sum())} {field_name} value(s) are not "
                    f"numbers of {field_name} ({_what(table)}s "
                    f"{_row_list(bad, table.lines)}); they were left empty")
        else:
            values[field_name] = np.full(length, np.nan)
    times = _parse_times(table.data.get("time"), table.data.get("date"), table, options,
                         decimal, source_name, units_used, messages)
    unreadable = times.bad | (~times.time.notna().to_numpy(dtype=bool) & np.isnan(
        times.elapsed_s))
    if unreadable.any():
        messages.append(
            f"{source_name}: {int(unreadable.sum())} log row(s) have no readable time "
            f"({_what(table)}s {_row_list(unreadable, table.lines)}); no reading can be "
            "matched to them")
    out_of_range = _range_masks(values["rh"], values["temperature"], values["pressure"])
    for code, mask in out_of_range.items():
        if mask.any():
            messages.append(
                f"{source_name}: {int(mask.sum())} log row(s) have {FLAG_CODES[code]} "
                f"({_what(table)}s {_row_list(mask, table.lines)}); readings that receive "
                f"them will be flagged {code}")
    frame = pd.DataFrame({
        ROW: np.arange(1, length + 1, dtype=np.int64),
        TIME: times.time,
        ELAPSED_S: times.elapsed_s,
        RH: values["rh"],
        TEMPERATURE_K: values["temperature"],
        PRESSURE_PA: values["pressure"],
    }, columns=list(ENVIRONMENT_COLUMNS))
    if any(name in table.columns for name in ("rh", "temperature", "pressure")):
        table.decisions.append(_units_decision(table, options, units_used, source_name))
    messages.extend(decision for decision in table.decisions if decision not in messages)
    file_format = {**table.format, "time_format": times.label, "day_first": times.day_first}
    mapping = {name: column.header for name, column in table.columns.items()}
    return ReadResult(frame, source_name, file_format, mapping, units_used, messages,
                      list(table.decisions), np.asarray(table.lines, dtype=np.int64))


