"""Readings as instruments and people really write them (issue 10).

Every file in ``tests/data/readings/`` used here is invented and shaped like an export of a
data logger, a multimeter's log or a spreadsheet. Each test asserts the values read (the
n-th reading's speed in rev/s and current in uA), the row count, the flags and the lines
named in messages, or the exact clean error.

Check values are hand-worked from definitions: 1 rpm = 1/60 rev/s (the minute is 60 s);
SI prefixes m = 1e-3, u = 1e-6, n = 1e-9 (SI Brochure, 9th edition, 2019);
degF to K: (F - 32) * 5/9 + 273.15 (NIST SP 811, 2008, B.9).
"""

from __future__ import annotations

import datetime as dt
import io
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from engine import __main__ as cli
from engine.columns import FLAG_CODES
from engine.errors import InputError
from engine.readings import (
    ReadOptions,
    check_log_clock,
    merge_environment,
    read_environment,
    read_readings,
    workbook_sheets,
)
from tests.test_readings import DATA

openpyxl = pytest.importorskip("openpyxl")


def speeds(result) -> list[float]:
    return result.frame["speed_rev_s"].tolist()


def currents_ua(result) -> list[float]:
    return (result.frame["current_a"] * 1e6).tolist()


def flags(result) -> list[str]:
    return result.frame["flags"].tolist()


def said(result, *words: str) -> bool:
    """Whether one decision holds every word."""
    return any(all(word in decision for word in words) for decision in result.decisions)


# --- Logger exports: metadata, channels, summary lines, blank lines --------------------------
def test_logger_export_with_metadata_channels_and_summary_lines():
    result = read_readings(DATA / "logger_metadata.csv", ReadOptions(machine="twin"))
    # 5 readings: the separator-only line 9, the blank line 11 and the summary lines 14-16
    # (Average, Max, Min) are not readings.
    assert len(result.frame) == 5
    assert result.lines.tolist() == [7, 8, 10, 12, 13]
    # hand-worked: '300,0' rpm / 60 = 5 rev/s; '301,5' / 60 = 5.025; '302,0' / 60 = 5.0333...
    assert speeds(result)[:3] == pytest.approx([5.0, 5.025, 302.0 / 60])
    assert currents_ua(result) == pytest.approx([12.5, 12.6, 12.4, 12.7, 12.8])
    # hand-worked: '45,1' %RH = 0.451
    assert result.frame["rh"].iloc[0] == pytest.approx(0.451)
    # 'n/a' and '-' are text in a number column: flagged, not silently missing (issue 9)
    assert flags(result) == ["", "", "", "not_a_number", "not_a_number"]
    # The date comes from the metadata line 3; the log passes midnight after its 2nd reading.
    assert result.frame["time"].tolist() == [
        pd.Timestamp("2024-03-01 23:59:40"), pd.Timestamp("2024-03-01 23:59:50"),
        pd.Timestamp("2024-03-02 00:00:00"), pd.Timestamp("2024-03-02 00:00:10"),
        pd.Timestamp("2024-03-02 00:00:20")]
    assert result.format["header_row"] == 6
    assert said(result, "header on line 6", "notes")
    assert said(result, "joined with the date '01.03.2024' from line 3")
    assert said(result, "line 14, 15, 16", "summary lines", "'Average'", "'Max'", "'Min'")
    assert said(result, "'CH1 (rpm)'", "speed by its unit")
    assert said(result, "units: speed in rpm (from the header); current in uA (from the "
                "header); rh in %RH (from the header)")
    assert said(result, "--day-first or --month-first")
    assert any("line 9, 11" in message and "empty" in message for message in result.messages)
    assert any("not_a_number 2 (lines 12, 13)" in message for message in result.messages)
    # The message names the file, the column, the lines as an editor counts them, and the fix.
    assert any(message.startswith(str(DATA / "logger_metadata.csv"))
               and "column 'CH1 (rpm)'" in message and "line 12, 13" in message
               and "'n/a'" in message and "correct those cells" in message
               for message in result.messages)


def test_generic_channels_that_cannot_be_told_apart_name_the_option():
    with pytest.raises(InputError) as caught:
        read_readings(DATA / "channels_ambiguous.csv", ReadOptions(machine="twin"))
    message = str(caught.value)
    assert "channels_ambiguous.csv" in message
    assert "'CH2 (uA)' and 'CH3 (uA)' could each be the current" in message
    assert "--column current=HEADER" in message
    # Saying which column is which reads it.
    result = read_readings(DATA / "channels_ambiguous.csv",
                           ReadOptions(machine="twin", mapping={"CH2 (uA)": "current"}))
    assert currents_ua(result) == pytest.approx([12.5])


def test_a_file_without_a_machine_names_the_option():
    with pytest.raises(InputError, match=r"logger_metadata.csv: has no machine column.*--machine"):
        read_readings(DATA / "logger_metadata.csv")


# --- Meter logs: the unit in every cell --------------------------------------------------------
def test_meter_log_with_the_unit_in_every_cell():
    result = read_readings(DATA / "meter_units_in_cells.csv", ReadOptions(machine="twin"))
    assert len(result.frame) == 7
    # hand-worked: 12.3 uA; 0.0123 mA = 12.3 uA; 10740 nA = 10.74 uA; µ (micro sign) and
    # μ (Greek mu) are the same prefix
    assert currents_ua(result)[:5] == pytest.approx([12.3, 12.3, 10.74, 12.1, 12.0])
    # hand-worked: 300 rpm / 60 = 5 rev/s; 5 rev/s; 300 1/min = 5 rev/s (revolutions, not
    # radians); 301 rpm / 60; 302 rev/min / 60
    assert speeds(result)[:5] == pytest.approx([5.0, 5.0, 5.0, 301 / 60, 302 / 60])
    # '5 V' is a voltage in a current column: flagged, not guessed; 'OVL' is text.
    assert math.isnan(result.frame["current_a"].iloc[5])
    assert flags(result) == ["", "", "", "", "", "unit_mismatch", "not_a_number"]
    assert "unit_mismatch" in FLAG_CODES
    assert said(result, "'Current'", "each cell converted on its own", "unit_mismatch")
    assert any("column 'Current'" in message and "line 8 (e.g. 'OVL')" in message
               and "does not fit the current on line 7 (e.g. '5 V')" in message
               for message in result.messages)


def test_unit_in_cells_overrides_the_header_and_a_speed_of_the_other_kind_is_flagged():
    text = ("machine,time,speed [rpm],current [uA]\n"
            "d,2024-03-01T10:00,300,12\n"
            "d,2024-03-01T10:01,5 rev/s,12 nA\n"
            "d,2024-03-01T10:02,6 m/s,1.2e-2 mA\n")
    result = read_readings(text.encode(), name="mixed.csv")
    # hand-worked: 5 rev/s; 12 nA = 0.012 uA; 1.2e-2 mA = 12 uA
    assert speeds(result)[:2] == pytest.approx([5.0, 5.0])
    assert currents_ua(result) == pytest.approx([12.0, 0.012, 12.0])
    # a linear speed in a column of rotation rates does not fit it
    assert flags(result) == ["", "", "unit_mismatch"]


# --- Number notation ---------------------------------------------------------------------------
def test_thousands_with_a_decimal_point_and_units_in_temperature_cells():
    result = read_readings(DATA / "thousands_point_decimal.csv")
    # hand-worked: '1,056.5' rpm / 60 = 17.608333; '1,060.0' / 60 = 17.666667;
    #              998.5 / 60 = 16.641667; 1.2e3 / 60 = 20
    assert speeds(result) == pytest.approx([1056.5 / 60, 1060.0 / 60, 998.5 / 60, 20.0])
    # hand-worked: '12,500' nA = 12.5 uA; '12,750.5' nA = 12.7505 uA; '9,990' nA = 9.99 uA;
    #              1.25E+04 nA = 12.5 uA
    assert currents_ua(result) == pytest.approx([12.5, 12.7505, 9.99, 12.5])
    # hand-worked: 21.0 degC = 294.15 K; 70 degF = (70 - 32) * 5/9 + 273.15 = 294.261 K
    assert result.frame["temperature_k"].tolist() == pytest.approx(
        [294.15, 294.65, (70 - 32) * 5 / 9 + 273.15, 294.15])
    assert flags(result) == ["", "", "", ""]
    assert said(result, "'speed [rpm]'", "decimal point", "',' between thousands")


def test_thousands_with_a_decimal_comma_and_narrow_no_break_spaces():
    result = read_readings(DATA / "thousands_comma_decimal.csv")
    assert result.format["decimal"] == ","
    # hand-worked: '1.056,5' = 1056.5; '1\u202f060,0' = 1060; '1 070,25' = 1070.25; '998,5'
    assert speeds(result) == pytest.approx([1056.5 / 60, 1060.0 / 60, 1070.25 / 60,
                                            998.5 / 60])
    # hand-worked: '12.500' nA = 12.5 uA (three digits after the point: thousands, since the
    # column's decimal mark is the comma); '1,25E+04' nA = 12.5 uA; '9.990,0' nA = 9.99 uA
    assert currents_ua(result) == pytest.approx([12.5, 12.7505, 12.5, 9.99])
    assert flags(result) == ["", "", "", ""]
    assert said(result, "'current [nA]'", "decimal comma", "'.' between thousands")


def test_decimal_comma_in_quoted_cells_of_a_comma_separated_file():
    result = read_readings(DATA / "decimal_comma_quoted.csv")
    assert result.format["separator"] == ","
    # hand-worked: 300 / 60 = 5; '310,5' / 60 = 5.175; 320 / 60
    assert speeds(result) == pytest.approx([5.0, 5.175, 320 / 60])
    assert currents_ua(result) == pytest.approx([12.5, 13.25, 14.0])
    assert said(result, "'current [uA]'", "decimal comma")


def test_a_cell_in_the_other_notation_is_flagged_not_misread():
    # Most cells show a decimal comma; '12.5' cannot be a thousands group (three digits).
    text = "machine;time;speed [rpm];current [uA]\n" + "".join(
        f"d;2024-03-01T10:0{index};300;{value}\n"
        for index, value in enumerate(["12,5", "13,5", "12.5", "1,2E1"]))
    result = read_readings(text.encode(), name="mixed.csv")
    assert currents_ua(result)[:2] == pytest.approx([12.5, 13.5])
    assert currents_ua(result)[3] == pytest.approx(12.0)  # hand-worked: 1,2E1 = 12
    assert flags(result) == ["", "", "not_a_number", ""]


# --- Header conventions ------------------------------------------------------------------------
@pytest.mark.parametrize(("speed_header", "current_header", "speed_cell", "expected_rev_s"), [
    ("n/rpm", "I/uA", "300", 5.0),
    ("n/(1/min)", "I/µA", "300", 5.0),          # 1/min of a speed: revolutions per minute
    ("speed rev/min", "current uA", "300", 5.0),
    ("speed [1/min]", "current [μA]", "300", 5.0),
    ("Speed (rev/s)", "Current (µA)", "5", 5.0),
    ("RPM", "µA", "300", 5.0),
])
def test_header_conventions(speed_header, current_header, speed_cell, expected_rev_s):
    text = (f"machine\tt/s\t{speed_header}\t{current_header}\t%RH\tT/°C\n"
            f"d\t0\t{speed_cell}\t12.5\t45\t20\n")
    result = read_readings(text.encode("utf-8"), name="headers.tsv")
    assert speeds(result) == pytest.approx([expected_rev_s])
    assert currents_ua(result) == pytest.approx([12.5])
    assert result.frame["rh"].iloc[0] == pytest.approx(0.45)  # hand-worked: 45 % = 0.45
    assert result.frame["temperature_k"].iloc[0] == pytest.approx(293.15)
    assert result.format["time_format"] == "elapsed seconds"


def test_printed_table_in_utf16_with_a_byte_order_mark():
    raw = (DATA / "printed_table_utf16.txt").read_bytes()
    assert raw[:2] == b"\xff\xfe"  # the UTF-16 little-endian byte-order mark
    result = read_readings(raw, ReadOptions(), name="printed_table_utf16.txt")
    assert result.format["encoding"] == "utf-16"
    assert result.format["separator"] == "\t"
    # hand-worked: 120 rpm / 60 = 2 rev/s; '2,5' uA; 't/s' elapsed seconds 0 and 10
    assert speeds(result) == pytest.approx([2.0, 2.5])
    assert currents_ua(result) == pytest.approx([2.5, 3.25])
    assert result.frame["elapsed_s"].tolist() == [0.0, 10.0]
    # hand-worked: '19,5' degC + 273.15 = 292.65 K
    assert result.frame["temperature_k"].iloc[0] == pytest.approx(292.65)


def test_windows_1252_text():
    raw = (DATA / "windows1252.csv").read_bytes()
    assert b"\x93" in raw  # Windows-1252's left double quotation mark (not in Latin-1)
    result = read_readings(DATA / "windows1252.csv")
    assert result.format["encoding"] == "cp1252"
    assert result.frame["note"].iloc[0] == "start \u2013 \u201cdry\u201d air"
    assert currents_ua(result) == pytest.approx([12.5, 13.0])
    assert said(result, "encoding cp1252")


# --- File structure: joined logs ---------------------------------------------------------------
def test_joined_logs_with_the_header_repeated_and_reordered():
    result = read_readings(DATA / "joined_logs.csv")
    assert len(result.frame) == 5
    assert result.lines.tolist() == [2, 3, 5, 8, 9]
    # hand-worked: 300, 310, 320 rpm / 60; then the third part in rev/s: 5.5 and 6
    assert speeds(result) == pytest.approx([5.0, 310 / 60, 320 / 60, 5.5, 6.0])
    # hand-worked: the third part in nA: 5600 nA = 5.6 uA, 5800 nA = 5.8 uA
    assert currents_ua(result) == pytest.approx([5.0, 5.2, 5.4, 5.6, 5.8])
    assert result.frame["machine"].tolist() == ["belt-b"] * 5
    assert result.frame["time"].iloc[3] == pd.Timestamp("2024-03-01 12:00:00")
    assert flags(result) == [""] * 5
    assert said(result, "repeated on line 4, 6", "another order")


# --- Workbooks -----------------------------------------------------------------------------------
def _workbook(build) -> bytes:
    book = openpyxl.Workbook()
    build(book)
    buffer = io.BytesIO()
    book.save(buffer)
    return buffer.getvalue()


def _spreadsheet_export(book):
    notes = book.active
    notes.title = "Notes"
    notes.append(["Session notes"])
    notes.append(["air", "dry"])
    sheet = book.create_sheet("Readings")
    sheet.append(["Twin-disc machine, run of 1 March 2024"])
    sheet.merge_cells("A1:E1")
    sheet.append([])
    sheet.append(["Date", "Time", "Machine", "Speed (rpm)", "Current (µA)"])
    sheet.append([dt.datetime(2024, 3, 1), 10 / 24, "twin", 300, "12,5"])
    sheet.append([dt.datetime(2024, 3, 1), 10 / 24 + 10 / 86400, "twin", 301.5, "12,75"])
    sheet.append([dt.datetime(2024, 3, 1), dt.time(10, 0, 20), "twin", "1.020,5", 13])
    sheet.append(["Average", None, None, 300.7, 12.6])
    book.create_sheet("Chart data").append(["x", "y"])


def test_workbook_readings_sheet_title_rows_day_fractions_and_text_numbers():
    data = _workbook(_spreadsheet_export)
    assert len(data) < 20_000  # kept small
    assert workbook_sheets(data) == ["Notes", "Readings", "Chart data"]
    result = read_readings(data, name="book.xlsx")
    assert result.format["sheet"] == "Readings"
    assert result.format["header_row"] == 3
    assert result.lines.tolist() == [4, 5, 6]  # sheet rows; 'Average' in row 7 skipped
    # hand-worked: 10/24 of a day = 10:00:00; + 10/86400 = 10:00:10; the time cell 10:00:20
    assert result.frame["time"].tolist() == [
        pd.Timestamp("2024-03-01 10:00:00"), pd.Timestamp("2024-03-01 10:00:10"),
        pd.Timestamp("2024-03-01 10:00:20")]
    # hand-worked: 300 / 60 = 5; 301.5 / 60 = 5.025; text '1.020,5' rpm = 1020.5 / 60
    assert speeds(result) == pytest.approx([5.0, 5.025, 1020.5 / 60])
    # text '12,5' and '12,75' uA with a decimal comma, and a real number 13
    assert currents_ua(result) == pytest.approx([12.5, 12.75, 13.0])
    assert flags(result) == ["", "", ""]
    assert said(result, "sheet 'Readings'", "'Notes'", "--sheet")
    assert said(result, "row 7", "summary line", "'Average'")
    assert said(result, "fractions of a day")
    assert said(result, "date and time joined")


def test_workbook_sheet_chosen_by_name_or_number_and_refused_clearly():
    data = _workbook(_spreadsheet_export)
    assert len(read_readings(data, ReadOptions(sheet="Readings"), name="b.xlsx").frame) == 3
    assert len(read_readings(data, ReadOptions(sheet=1), name="b.xlsx").frame) == 3
    with pytest.raises(InputError) as caught:
        read_readings(data, ReadOptions(sheet="Notes"), name="b.xlsx")
    assert "no usable columns" in str(caught.value)
    assert "sheet 'Notes'" in str(caught.value) and "--sheet" in str(caught.value)


# --- Time -----------------------------------------------------------------------------------------
def test_coarse_times_are_separate_readings_and_only_true_duplicates_are_flagged():
    result = read_readings(DATA / "coarse_minutes.csv")
    # three different readings in the 10:00 minute are kept; the 5th line repeats the 4th
    # (same machine, time and values): a true duplicate.
    assert flags(result) == ["", "", "", "", "duplicate_time", ""]
    assert said(result, "2 reading(s) share their time", "coarse", "kept")


def test_ambiguous_dates_are_said_with_the_option_and_a_day_above_12_decides():
    result = read_readings(DATA / "month_first_ambiguous.csv")
    assert result.frame["time"].iloc[0] == pd.Timestamp("2024-04-03 10:00")
    assert said(result, "ambiguous", "whole column", "--month-first")
    month_first = read_readings(DATA / "month_first_ambiguous.csv", ReadOptions(day_first=False))
    assert month_first.frame["time"].iloc[0] == pd.Timestamp("2024-03-04 10:00")
    # One date with a 13 in the second place decides the whole column: month first.
    text = ("machine,time,speed [rpm],current [uA]\n"
            "d,03/04/2024 10:00,60,1\nd,03/13/2024 10:00,60,1\n")
    decided = read_readings(text.encode(), name="decided.csv")
    assert decided.frame["time"].tolist() == [pd.Timestamp("2024-03-04 10:00"),
                                              pd.Timestamp("2024-03-13 10:00")]
    assert not said(decided, "ambiguous")
    # No day above 12, but three or more dates decide by their sequence: 01/03, 02/03, 03/03
    # read day first are 1, 2, 3 March (a daily log, 2 days); read month first they are
    # 3 January, 3 February, 3 March (59 days, more than ten times as long).
    text = ("machine,time,speed [rpm],current [uA]\n"
            + "".join(f"d,0{day}/03/2024 10:00,60,1\n" for day in (1, 2, 3)))
    sequence = read_readings(text.encode(), name="sequence.csv")
    assert sequence.frame["time"].iloc[2] == pd.Timestamp("2024-03-03 10:00")
    assert said(sequence, "would jump by months", "read day first", "--month-first")
    # 01/11, 01/12, 02/12: day first 1 Nov, 1 Dec, 2 Dec (31 days); month first 11 Jan,
    # 12 Jan, 12 Feb (32 days). Both run forward over similar spans: undecided, said so.
    text = ("machine,time,speed [rpm],current [uA]\n"
            + "".join(f"d,{date}/2024 10:00,60,1\n" for date in ("01/11", "01/12", "02/12")))
    assert said(read_readings(text.encode(), name="undecided.csv"), "ambiguous")


def test_log_clock_an_hour_behind_is_offered_never_applied():
    readings = read_readings(DATA / "readings_march_31.csv").frame
    log = read_environment(DATA / "log_clock_one_hour_behind.csv").frame
    clock = check_log_clock(readings, log, 300.0, "log.csv")
    # readings 10:00-10:50, log entries 09:00-09:55 every 5 min: only 10:00 is within 5 min
    # of an entry (09:55); moved by +1 h all six are.
    assert clock.matched == 1
    assert clock.suggested_offset_s == 3600.0
    assert clock.matched_with_offset == 6
    assert any("--log-offset '+1 h'" in message for message in clock.messages)
    as_recorded = merge_environment(readings, log, 300.0)
    # hand-worked: 10:00 takes 09:55 (40 + 55/10 = 45.5 %)
    assert as_recorded["rh"].iloc[0] == pytest.approx(0.455)
    moved = merge_environment(readings, log, 300.0, log_offset_s=3600.0)
    # hand-worked: 10:10 takes 09:10 + 1 h (40 + 1.0 = 41 %)
    assert moved["rh"].iloc[1] == pytest.approx(0.41)
    assert (moved["flags"] == "").all()


def test_a_log_of_another_day_is_said_once_and_flags_nothing():
    readings = read_readings(DATA / "readings_march_31.csv").frame
    log = read_environment(DATA / "log_another_day.csv").frame
    clock = check_log_clock(readings, log, 300.0, "log.csv")
    assert clock.matched == 0 and clock.suggested_offset_s is None
    assert len(clock.messages) == 1 and "does not overlap" in clock.messages[0]
    merged = merge_environment(readings, log, 300.0)
    assert merged["rh"].isna().all()
    assert (merged["flags"] == "").all()


# --- The command line ----------------------------------------------------------------------------
MACHINES = DATA.parents[2] / "sample_data" / "machines.toml"


def test_command_line_prints_decisions_on_stderr_and_data_on_stdout(capsys, tmp_path):
    readings = tmp_path / "book.xlsx"
    readings.write_bytes(_workbook(_spreadsheet_export).replace(b"twin", b"twin"))
    status = cli.main(["evaluate", str(MACHINES), str(readings), "--sheet", "2", "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    rows = pd.read_json(io.StringIO(captured.out))
    assert len(rows) == 3
    notes = captured.err.strip().splitlines()
    assert all(line.startswith("note: ") for line in notes)
    assert any("sheet 'Readings'" in line for line in notes)
    assert any("summary line" in line for line in notes)


def test_command_line_log_offset(capsys, tmp_path):
    status = cli.main(["summary", str(MACHINES), str(DATA / "readings_march_31.csv"),
                       "--environment", str(DATA / "log_clock_one_hour_behind.csv"), "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    assert "--log-offset '+1 h'" in captured.err
    status = cli.main(["evaluate", str(MACHINES), str(DATA / "readings_march_31.csv"),
                       "--environment", str(DATA / "log_clock_one_hour_behind.csv"),
                       "--log-offset", "+1 h", "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    rows = pd.read_json(io.StringIO(captured.out))
    # hand-worked: 10:10 takes 09:10 + 1 h, 41 % RH
    assert rows["rh_pct"].iloc[1] == pytest.approx(41.0)
    assert "moved by +1 h" in captured.err


def test_command_line_without_a_machine_names_the_option(capsys):
    status = cli.main(["evaluate", str(MACHINES), str(DATA / "logger_metadata.csv")])
    captured = capsys.readouterr()
    assert status == 2
    assert captured.out == ""
    assert captured.err.startswith("error: ") and "--machine" in captured.err


# --- Long logger files ----------------------------------------------------------------------------
def test_a_day_at_one_reading_a_second_in_a_logger_layout():
    """86,400 readings at 1 s in a logger's layout read correctly (timing: engine.bench)."""
    seconds = np.arange(86_400)
    clock = pd.Timestamp("2024-03-01") + pd.to_timedelta(seconds, unit="s")
    speed = 300.0 + (seconds % 7)
    current = 12.0 + (seconds % 11) / 10
    body = pd.DataFrame({
        "No.": seconds + 1,
        "Time": clock.strftime("%H:%M:%S"),
        "CH1 (rpm)": [f"{value:.1f}".replace(".", ",") for value in speed],
        "CH2 (uA)": [f"{value:.2f}".replace(".", ",") for value in current],
    })
    text = ("Data logger export\nStart date;01.03.2024\nInterval;00:00:01\n\n"
            + body.to_csv(sep=";", index=False)
            + "Average;;303,0;12,50\nMax;;306,0;13,00\n")
    result = read_readings(text.encode("utf-8"), ReadOptions(machine="twin"), name="day.csv")
    assert len(result.frame) == 86_400
    assert result.lines[0] == 6 and result.lines[-1] == 86_405
    # hand-worked: reading n (0-based) has speed (300 + n % 7) rpm / 60 and current
    # 12 + (n % 11) / 10 uA; the 40,000th reading (n = 39,999): 39,999 % 7 = 1, % 11 = 3
    assert result.frame["speed_rev_s"].iloc[39_999] == pytest.approx(301.0 / 60)
    assert result.frame["current_a"].iloc[39_999] * 1e6 == pytest.approx(12.3)
    assert result.frame["time"].iloc[-1] == pd.Timestamp("2024-03-01 23:59:59")
    assert (result.frame["flags"] == "").all()


# --- Properties ----------------------------------------------------------------------------------
NOTATIONS = {
    # name: (separator, how a number is written)
    "point": (",", lambda value: f"{value:.2f}"),
    "comma in quotes": (",", lambda value: '"' + f"{value:.2f}".replace(".", ",") + '"'),
    "comma, semicolon file": (";", lambda value: f"{value:.2f}".replace(".", ",")),
    "thousands comma": (",", lambda value: '"' + f"{value:,.2f}" + '"'),
    "thousands point": (";", lambda value: f"{value:,.2f}".replace(",", " ").replace(
        ".", ",").replace(" ", ".")),
    "thousands narrow space": (";", lambda value: f"{value:,.2f}".replace(",", "\u202f")
                               .replace(".", ",")),
    "scientific": ("\t", lambda value: f"{value:.6e}"),
    "scientific comma": (";", lambda value: f"{value:.6e}".replace(".", ",")),
}
#: Unit conventions of the current column: (header, unit written in each cell, factor to uA).
CURRENT_UNITS = {
    "header brackets": ("current [uA]", "", 1.0),
    "header slash": ("I/µA", "", 1.0),
    "header nA": ("current (nA)", "", 1e-3),
    "cells mA": ("current", " mA", 1e3),
    "cells uA": ("current", " uA", 1.0),
}


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    currents=st.lists(st.floats(min_value=1.0, max_value=99_999.0), min_size=1, max_size=15),
    notation=st.sampled_from(sorted(NOTATIONS)),
    units=st.sampled_from(sorted(CURRENT_UNITS)),
    encoding=st.sampled_from(["utf-8", "utf-8-sig", "utf-16", "cp1252", "latin-1"]),
    speed_header=st.sampled_from(["speed [rpm]", "n/rpm", "speed rev/min", "speed [1/min]"]),
)
def test_any_notation_separator_encoding_and_unit_convention_reads_back(
        currents, notation, units, encoding, speed_header):
    """Law: a frame written in any supported convention reads back to the same values."""
    separator, write = NOTATIONS[notation]
    assume(notation != "thousands narrow space" or encoding.startswith("utf"))
    header, cell_unit, to_ua = CURRENT_UNITS[units]
    # Values on a 1/100 grid so that every notation writes them exactly. (Two decimals: a
    # column of '300,000' alone could be 300 or 300000; the reader says so and the file's
    # mark decides, which a property over every notation cannot check.)
    currents = [1234.5, *(round(value, 2) for value in currents)]
    lines = [separator.join(["machine", "time", speed_header, header])]
    for index, value in enumerate(currents):
        lines.append(separator.join([
            "twin", f"2024-03-01T10:{index // 60:02d}:{index % 60:02d}", write(300.0 + index),
            write(value) + cell_unit]))
    data = ("\n".join(lines) + "\n").encode(encoding)
    result = read_readings(data, name="property.csv")
    assert len(result.frame) == len(currents)
    assert flags(result) == [""] * len(currents), result.decisions
    # hand-worked: rpm / 60 = rev/s
    assert speeds(result) == pytest.approx([(300.0 + index) / 60
                                            for index in range(len(currents))], rel=1e-9)
    assert currents_ua(result) == pytest.approx([value * to_ua for value in currents], rel=1e-6)
