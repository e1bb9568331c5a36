"""Tests of engine.readings: file formats, columns, units, times, flags, environment merge.

Reference values are hand-worked unit conversions, written out beside each assertion:
1 rpm = 1/60 rev/s, 1 uA = 1e-6 A, 1 % RH = 0.01, T[K] = T[degC] + 273.15,
T[K] = (T[degF] - 32) * 5/9 + 273.15, 1 hPa = 100 Pa, 1 mbar = 100 Pa, 1 kPa = 1000 Pa
(SI definitions, BIPM SI Brochure, 9th edition).
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from engine.columns import ENVIRONMENT_COLUMNS, FLAG_CODES, READING_COLUMNS
from engine.errors import InputError
from engine.readings import (
    ALIASES,
    MAX_ROWS,
    ReadOptions,
    add_flags,
    map_columns,
    merge_environment,
    read_environment,
    read_readings,
    split_header,
)

DATA = Path(__file__).parent / "data" / "readings"


def read_text(text: str, name: str = "test.csv", encoding: str = "utf-8", **options):
    """Read readings given as text (invented in the test) with the given options."""
    return read_readings(text.encode(encoding), ReadOptions(**options), name=name)


def flags_of(result) -> list[str]:
    return result.frame["flags"].tolist()


# --- Formats ----------------------------------------------------------------------------------
def test_canonical_layout_reads_into_si_units():
    result = read_readings(DATA / "canonical.csv")
    frame = result.frame
    assert tuple(frame.columns) == READING_COLUMNS
    assert frame["row"].tolist() == [1, 2, 3]
    assert frame["machine"].tolist() == ["disc-a", "disc-a", "belt-b"]
    assert frame["session"].tolist() == ["morning"] * 3
    # hand-worked: 300 rpm / 60 = 5 rev/s; 240 / 60 = 4; 600 / 60 = 10
    assert frame["speed_rev_s"].tolist() == pytest.approx([5.0, 4.0, 10.0])
    assert frame["belt_speed_m_s"].isna().all()
    # hand-worked: 12.5 uA = 12.5e-6 A
    assert frame["current_a"].tolist() == pytest.approx([12.5e-6, 10.0e-6, 8.25e-6])
    # hand-worked: 45 % = 0.45
    assert frame["rh"].tolist() == pytest.approx([0.45, 0.46, 0.47])
    # hand-worked: 20 degC + 273.15 = 293.15 K; 20.5 + 273.15 = 293.65 K
    assert frame["temperature_k"].tolist() == pytest.approx([293.15, 293.65, 294.15])
    # hand-worked: 1013.25 hPa * 100 = 101325 Pa
    assert frame["pressure_pa"].tolist() == pytest.approx([101325.0, 101300.0, 101250.0])
    assert frame["voltage_v"].isna().all()
    # hand-worked: 10:01:00 - 10:00:00 = 60 s
    assert frame["elapsed_s"].tolist() == [0.0, 60.0, 120.0]
    assert frame["time"].iloc[0] == pd.Timestamp("2024-03-01 10:00:00")
    assert flags_of(result) == ["", "", ""]
    # A formula-like text is kept as it is, never evaluated.
    assert frame["note"].tolist() == ["first", "", "=SUM(A1:A3)"]
    assert result.format["separator"] == ","
    assert result.format["decimal"] == "."
    assert result.format["encoding"] == "utf-8"
    assert result.format["units_row"] is False
    assert result.format["time_format"] == "ISO 8601"
    assert result.mapping["speed"] == "speed [rpm]"
    assert result.units == {"speed": "rpm", "current": "uA", "rh": "%", "temperature": "degC",
                            "pressure": "hPa"}
    assert not any("default" in message for message in result.messages)


def test_semicolon_with_decimal_comma():
    result = read_readings(DATA / "semicolon_decimal_comma.csv")
    frame = result.frame
    assert result.format["separator"] == ";"
    assert result.format["decimal"] == ","
    # hand-worked: '12,5' uA = 12.5e-6 A; '310,5' rpm / 60 = 5.175 rev/s
    assert frame["current_a"].tolist() == pytest.approx([12.5e-6, 13e-6])
    assert frame["speed_rev_s"].tolist() == pytest.approx([5.0, 5.175])
    # hand-worked: '21,5' degC + 273.15 = 294.65 K; '45,5' % = 0.455; '1013,25' hPa = 101325 Pa
    assert frame["temperature_k"].iloc[0] == pytest.approx(294.65)
    assert frame["rh"].iloc[0] == pytest.approx(0.455)
    assert frame["pressure_pa"].iloc[0] == pytest.approx(101325.0)
    assert flags_of(result) == ["", ""]


def test_tab_separated():
    result = read_readings(DATA / "tab.tsv")
    assert result.format["separator"] == "\t"
    # hand-worked: 120 rpm / 60 = 2 rev/s; 180 / 60 = 3 rev/s; 6.75 uA = 6.75e-6 A
    assert result.frame["speed_rev_s"].tolist() == pytest.approx([2.0, 3.0])
    assert result.frame["current_a"].tolist() == pytest.approx([4.5e-6, 6.75e-6])
    # hand-worked: 10:00:30 - 10:00:00 = 30 s
    assert result.frame["elapsed_s"].tolist() == [0.0, 30.0]


def test_separator_and_decimal_can_be_given():
    text = "machine|time|speed [rpm]|current [uA]\ndisc-a|2024-03-01T10:00:00|60|1,5\n"
    result = read_text(text, separator="|", decimal=",")
    # hand-worked: 60 rpm / 60 = 1 rev/s; '1,5' uA = 1.5e-6 A
    assert result.frame["speed_rev_s"].iloc[0] == pytest.approx(1.0)
    assert result.frame["current_a"].iloc[0] == pytest.approx(1.5e-6)
    assert result.format["separator"] == "|"


def test_utf8_with_byte_order_mark():
    result = read_readings(DATA / "bom.csv")
    assert result.format["encoding"] == "utf-8-sig"
    # The BOM must not stick to the first header: 'machine' is recognised.
    assert result.mapping["machine"] == "machine"
    assert result.frame["machine"].tolist() == ["disc-a"]
    # hand-worked: 12.5 µA = 12.5e-6 A
    assert result.frame["current_a"].iloc[0] == pytest.approx(12.5e-6)


def test_latin1_with_degree_sign_and_micro_sign():
    raw = (DATA / "latin1.csv").read_bytes()
    assert b"\xb0" in raw and b"\xb5" in raw  # Latin-1 bytes of '°' and 'µ'
    result = read_readings(DATA / "latin1.csv")
    # Windows-1252 is a superset of Latin-1 for these bytes (no byte 0x80-0x9F in the file):
    # both decode it the same (Python codecs tables).
    assert result.format["encoding"] in ("cp1252", "latin-1")
    assert result.mapping["current"] == "current [µA]"
    assert result.mapping["temperature"] == "temperature [°C]"
    # hand-worked: '12,5' µA = 12.5e-6 A; '21,5' °C + 273.15 = 294.65 K
    assert result.frame["current_a"].iloc[0] == pytest.approx(12.5e-6)
    assert result.frame["temperature_k"].iloc[0] == pytest.approx(294.65)


def test_utf8_degree_sign_in_header():
    text = "machine,time,speed [rpm],current [µA],temperature [°F]\nd,2024-03-01T10:00,60,1,68\n"
    result = read_text(text)
    assert result.format["encoding"] == "utf-8"
    # hand-worked: 68 degF = (68 - 32) * 5/9 + 273.15 = 293.15 K
    assert result.frame["temperature_k"].iloc[0] == pytest.approx(293.15)


def test_encoding_can_be_given():
    text = "machine;time;speed [rpm];current [µA]\ndisc-ä;2024-03-01T10:00;60;1\n"
    result = read_readings(text.encode("latin-1"), ReadOptions(encoding="cp1252"), name="x.csv")
    assert result.frame["machine"].iloc[0] == "disc-ä"
    with pytest.raises(InputError, match="x.csv"):
        read_readings(text.encode("latin-1"), ReadOptions(encoding="utf-8"), name="x.csv")


def test_units_in_headers_are_converted():
    text = (
        "machine,time,speed [rev/s],current [nA],rh [-],temperature [K],pressure [kPa],"
        "voltage [kV]\n"
        "d,2024-03-01T10:00,5,12500,0.45,293.15,101.325,80\n"
    )
    frame = read_text(text).frame
    assert frame["speed_rev_s"].iloc[0] == pytest.approx(5.0)
    # hand-worked: 12500 nA * 1e-9 = 12.5e-6 A
    assert frame["current_a"].iloc[0] == pytest.approx(12.5e-6)
    # '[-]' is a plain fraction: 0.45 stays 0.45
    assert frame["rh"].iloc[0] == pytest.approx(0.45)
    assert frame["temperature_k"].iloc[0] == pytest.approx(293.15)
    # hand-worked: 101.325 kPa * 1000 = 101325 Pa; 80 kV * 1000 = 80000 V
    assert frame["pressure_pa"].iloc[0] == pytest.approx(101325.0)
    assert frame["voltage_v"].iloc[0] == pytest.approx(80000.0)


def test_fahrenheit_header():
    text = "machine,time,speed [rpm],current [uA],temperature [degF]\nd,2024-03-01T10:00,60,1,68\n"
    frame = read_text(text).frame
    # hand-worked: 68 degF = (68 - 32) * 5/9 + 273.15 = 293.15 K
    assert frame["temperature_k"].iloc[0] == pytest.approx(293.15)


def test_linear_speed_fills_belt_speed():
    result = read_readings(DATA / "belt_linear.csv")
    frame = result.frame
    assert frame["belt_speed_m_s"].iloc[0] == pytest.approx(6.0)
    assert math.isnan(frame["speed_rev_s"].iloc[0])
    assert any("linear" in message for message in result.messages)


def test_units_row_is_detected_and_used():
    result = read_readings(DATA / "units_row.csv")
    frame = result.frame
    assert result.format["units_row"] is True
    assert frame["row"].tolist() == [1, 2]  # the units row is not a reading
    # hand-worked: 300 rpm / 60 = 5 rev/s; 330 / 60 = 5.5 rev/s
    assert frame["speed_rev_s"].tolist() == pytest.approx([5.0, 5.5])
    # hand-worked: 68 degF = (68 - 32) * 5/9 + 273.15 = 293.15 K;
    #              77 degF = (77 - 32) * 5/9 + 273.15 = 25 + 273.15 = 298.15 K
    assert frame["temperature_k"].tolist() == pytest.approx([293.15, 298.15])
    # hand-worked: 101.325 kPa * 1000 = 101325 Pa
    assert frame["pressure_pa"].iloc[0] == pytest.approx(101325.0)
    assert result.units["temperature"] == "degF"


def test_units_row_can_be_declined():
    text = "machine,time,speed,current\n,,rpm,uA\nd,2024-03-01T10:00,60,1\n"
    result = read_text(text, units_row=False)
    # Read as a data row instead: its speed and current are text.
    assert result.frame["row"].tolist() == [1, 2]
    assert "not_a_number" in flags_of(result)[0]


def test_default_units_are_said():
    text = "machine,time,speed,current\nd,2024-03-01T10:00,60,1\n"
    result = read_text(text)
    # hand-worked: default rpm: 60 / 60 = 1 rev/s; default uA: 1e-6 A
    assert result.frame["speed_rev_s"].iloc[0] == pytest.approx(1.0)
    assert result.frame["current_a"].iloc[0] == pytest.approx(1e-6)
    defaults = [message for message in result.messages if "default" in message]
    assert len(defaults) == 2
    assert "rpm" in defaults[0] and "uA" in defaults[1]


def test_caller_units_apply_where_the_header_has_none():
    text = "machine,time,speed,current [mA]\nd,2024-03-01T10:00,2,0.5\n"
    result = read_text(text, units={"speed": "rev/s", "current": "uA"})
    assert result.frame["speed_rev_s"].iloc[0] == pytest.approx(2.0)
    # The header's own unit wins over the caller's: 0.5 mA = 5e-4 A.
    assert result.frame["current_a"].iloc[0] == pytest.approx(5e-4)
    assert result.units == {"speed": "rev/s", "current": "mA"}


def test_xlsx_written_in_the_test(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Readings"
    sheet.append(["machine", "session", "time", "speed [rpm]", "current [uA]", "rh [%]",
                  "temperature [degC]", "note"])
    sheet.append(["disc-a", "s1", pd.Timestamp("2024-03-01 10:00:00").to_pydatetime(), 300,
                  12.5, 45, 20, "plain"])
    sheet.append(["disc-a", "s1", "2024-03-01T10:01:00", "12,x", 10, 46, 21, "=1+1"])
    sheet.cell(row=3, column=8).data_type = "s"  # stored as text, not as a formula
    sheet.append(["disc-a", "s1", pd.Timestamp("2024-03-01 10:02:00").to_pydatetime(), 240,
                  10, 47, 21, None])
    path = tmp_path / "readings.xlsx"
    book.save(path)
    result = read_readings(path)
    frame = result.frame
    assert tuple(frame.columns) == READING_COLUMNS
    assert result.format["file_type"] == "xlsx"
    assert result.format["sheet"] == "Readings"
    assert frame["row"].tolist() == [1, 2, 3]
    # hand-worked: 300 rpm / 60 = 5 rev/s; 240 / 60 = 4 rev/s
    assert frame["speed_rev_s"].iloc[0] == pytest.approx(5.0)
    assert frame["speed_rev_s"].iloc[2] == pytest.approx(4.0)
    assert flags_of(result) == ["", "not_a_number", ""]
    # The bad cell's text is kept beside the note ("speed written '12,x'").
    assert frame["note"].tolist() == ["plain", "=1+1; speed written '12,x'", ""]
    # hand-worked: 10:01 - 10:00 = 60 s, 10:02 - 10:00 = 120 s
    assert frame["elapsed_s"].tolist() == [0.0, 60.0, 120.0]
    # The sheet can be chosen by name or number; a missing one is a clear error.
    assert len(read_readings(path, ReadOptions(sheet=0)).frame) == 3
    with pytest.raises(InputError, match="no sheet 'Other'"):
        read_readings(path, ReadOptions(sheet="Other"))


def test_xlsx_through_pandas_and_a_file_like(tmp_path):
    frame = pd.DataFrame({"Machine": ["cyl-c"], "Elapsed [s]": [12.0], "RPM": [90],
                          "I (uA)": [2.0]})
    buffer = io.BytesIO()
    frame.to_excel(buffer, index=False)
    buffer.seek(0)
    buffer.name = "upload.xlsx"
    result = read_readings(buffer)
    assert result.source == "upload.xlsx"
    # hand-worked: 90 rpm / 60 = 1.5 rev/s
    assert result.frame["speed_rev_s"].iloc[0] == pytest.approx(1.5)
    assert result.frame["elapsed_s"].iloc[0] == pytest.approx(12.0)


def test_corrupt_xlsx_is_an_input_error(tmp_path):
    path = tmp_path / "broken.xlsx"
    path.write_bytes(b"PK\x03\x04" + b"\x00not really a zip" * 20)
    with pytest.raises(InputError, match="broken.xlsx"):
        read_readings(path)


def test_windows_line_endings_and_bracketed_units_row():
    text = "machine,time,speed,current\r\n,,[rpm],(uA)\r\nd,2024-03-01T10:00,120,2\r\n"
    result = read_text(text)
    assert result.format["units_row"] is True
    # hand-worked: 120 rpm / 60 = 2 rev/s; 2 uA = 2e-6 A
    assert result.frame["speed_rev_s"].tolist() == pytest.approx([2.0])
    assert result.frame["current_a"].tolist() == pytest.approx([2e-6])
    assert flags_of(result) == [""]


def test_decimal_comma_column_with_a_bad_cell_keeps_its_other_values():
    text = ("machine;time;speed [rpm];current [uA]\n"
            "d;2024-03-01T10:00;60;1,5\nd;2024-03-01T10:01;60;abc\nd;2024-03-01T10:02;60;2,25\n")
    result = read_text(text)
    assert result.format["decimal"] == ","
    # hand-worked: '1,5' uA = 1.5e-6 A; '2,25' uA = 2.25e-6 A
    assert result.frame["current_a"].iloc[[0, 2]].tolist() == pytest.approx([1.5e-6, 2.25e-6])
    assert flags_of(result) == ["", "not_a_number", ""]


def test_utf8_start_with_latin1_later_falls_back_and_says_so():
    body = "d,2024-03-01T10:00,60,1,ok\n" * 3000  # longer than the detection sample
    data = ("machine,time,speed [rpm],current [uA],note\n" + body).encode("utf-8")
    data += "d,2024-03-01T10:01,60,1,caf\xe9\n".encode("latin-1")
    result = read_readings(data, name="late.csv")
    assert result.format["encoding"] == "latin-1"
    assert result.frame["note"].iloc[-1] == "caf\xe9"
    assert len(result.frame) == 3001
    assert any("Latin-1" in message for message in result.messages)


# --- Columns -----------------------------------------------------------------------------------
def test_aliases_map_to_fields_and_the_mapping_is_shown():
    result = read_readings(DATA / "aliases.csv")
    assert result.mapping == {
        "machine": "Machine ID", "time": "Timestamp", "speed": "RPM", "current": "I (uA)",
        "rh": "RH%", "temperature": "Temp C", "pressure": "P [mbar]", "note": "Comment",
    }
    frame = result.frame
    # hand-worked: 150 rpm / 60 = 2.5 rev/s; 3.2 uA = 3.2e-6 A; 55 % = 0.55;
    #              18 degC + 273.15 = 291.15 K; 1000 mbar * 100 = 100000 Pa
    assert frame["speed_rev_s"].iloc[0] == pytest.approx(2.5)
    assert frame["current_a"].iloc[0] == pytest.approx(3.2e-6)
    assert frame["rh"].iloc[0] == pytest.approx(0.55)
    assert frame["temperature_k"].iloc[0] == pytest.approx(291.15)
    assert frame["pressure_pa"].iloc[0] == pytest.approx(100000.0)
    assert any("columns used" in message for message in result.messages)
    assert any("'Operator'" in message and "not used" in message for message in result.messages)


def test_map_columns_ignores_case_space_and_punctuation():
    headers = ["MACHINE-ID", "time stamp", "Speed_rpm", "current (µA)", "r.h.", "Air Temperature",
               "notes"]
    assert map_columns(headers) == {
        "machine": "MACHINE-ID", "time": "time stamp", "speed": "Speed_rpm",
        "current": "current (µA)", "rh": "r.h.", "temperature": "Air Temperature",
        "note": "notes",
    }
    assert map_columns(["foo", "bar"]) == {}


def test_one_letter_symbols_are_decided_by_their_unit():
    headers = ["machine", "t [s]", "T [°C]", "v [m/s]", "I [uA]", "V [kV]"]
    assert map_columns(headers) == {
        "machine": "machine", "time": "t [s]", "temperature": "T [°C]", "speed": "v [m/s]",
        "current": "I [uA]", "voltage": "V [kV]",
    }


def test_aliases_are_a_public_dictionary_of_fields():
    for field_name in ("machine", "time", "speed", "current", "rh", "temperature", "pressure",
                       "session", "voltage", "note"):
        assert field_name in ALIASES
        assert field_name in ALIASES[field_name]


def test_split_header():
    assert split_header("speed [rpm]") == ("speed", "rpm")
    assert split_header("I (µA)") == ("I", "µA")
    assert split_header("RH%") == ("RH", "%")
    assert split_header("machine") == ("machine", None)


def test_caller_mapping_overrides_detection():
    text = "unit,stamp,tach,amps,current\nd,2024-03-01T10:00,120,2,99\n"
    result = read_text(text, mapping={"unit": "machine", "stamp": "time", "tach": "speed",
                                      "amps": "current", "current": None},
                       units={"speed": "rpm", "current": "uA"})
    assert result.mapping == {"machine": "unit", "time": "stamp", "speed": "tach",
                              "current": "amps"}
    # hand-worked: 120 rpm / 60 = 2 rev/s; 2 uA = 2e-6 A (not the 'current' column's 99)
    assert result.frame["speed_rev_s"].iloc[0] == pytest.approx(2.0)
    assert result.frame["current_a"].iloc[0] == pytest.approx(2e-6)
    with pytest.raises(InputError, match="test.csv.*'missing'"):
        read_text(text, mapping={"missing": "speed"})
    with pytest.raises(InputError, match="'wattage'"):
        read_text(text, mapping={"tach": "wattage"})


def test_no_machine_column_takes_the_callers_machine():
    result = read_readings(DATA / "no_machine.csv", ReadOptions(machine="disc-a", session="s9"))
    assert result.frame["machine"].tolist() == ["disc-a", "disc-a"]
    assert result.frame["session"].tolist() == ["s9", "s9"]
    # hand-worked: 12500 nA = 12.5e-6 A
    assert result.frame["current_a"].iloc[0] == pytest.approx(12.5e-6)
    with pytest.raises(InputError, match="no_machine.csv.*no machine column"):
        read_readings(DATA / "no_machine.csv")


def test_session_defaults_to_empty():
    result = read_readings(DATA / "tab.tsv")
    assert result.frame["session"].tolist() == ["", ""]


def test_numeric_looking_labels_stay_text():
    text = "machine,session,time,speed [rpm],current [uA],note\n007,1,2024-03-01T10:00,60,1,12\n"
    frame = read_text(text).frame
    assert frame["machine"].iloc[0] == "007"
    assert frame["session"].iloc[0] == "1"
    assert frame["note"].iloc[0] == "12"


def test_preamble_lines_above_the_header_are_skipped():
    text = "exported by a logger\nrun of the day\n\nmachine;time;speed [rpm];current [uA]\n" \
           "d;2024-03-01T10:00;60;1\n"
    result = read_text(text)
    assert result.frame["row"].tolist() == [1]
    assert result.format["header_row"] == 4
    assert any("skipped 3" in message for message in result.messages)


# --- Times ------------------------------------------------------------------------------------
def _times(lines: list[str], **options):
    text = "machine,time,speed [rpm],current [uA]\n" + "".join(
        f"d,{line},60,1\n" for line in lines)
    return read_text(text, **options)


def test_day_first_dates_are_detected():
    result = _times(["01/03/2024 10:00", "13/03/2024 10:00"])
    assert result.format["day_first"] is True
    assert result.frame["time"].tolist() == [pd.Timestamp("2024-03-01 10:00"),
                                             pd.Timestamp("2024-03-13 10:00")]
    assert any("day first" in message for message in result.messages)


def test_month_first_dates_are_detected():
    result = _times(["03/01/2024 10:00:05", "03/13/2024 22:00:00"])
    assert result.format["day_first"] is False
    assert result.frame["time"].tolist() == [pd.Timestamp("2024-03-01 10:00:05"),
                                             pd.Timestamp("2024-03-13 22:00:00")]


def test_ambiguous_dates_are_read_day_first_and_said_so():
    result = _times(["01/03/2024 10:00", "02/03/2024 10:00"])
    assert result.format["day_first"] is True
    assert result.frame["time"].iloc[0] == pd.Timestamp("2024-03-01 10:00")
    assert any("ambiguous" in message for message in result.messages)
    month_first = _times(["01/03/2024 10:00", "02/03/2024 10:00"], day_first=False)
    assert month_first.frame["time"].iloc[0] == pd.Timestamp("2024-01-03 10:00")
    assert month_first.format["day_first"] is False


def test_dotted_dates_and_am_pm():
    result = _times(["1.3.24 1:05:30 PM", "1.3.24 12:00 AM"], day_first=True)
    # hand-worked: 1:05:30 PM = 13:05:30; 12:00 AM = 00:00
    assert result.frame["time"].tolist() == [pd.Timestamp("2024-03-01 13:05:30"),
                                             pd.Timestamp("2024-03-01 00:00:00")]


def test_elapsed_seconds():
    result = read_readings(DATA / "elapsed.csv")
    assert result.format["time_format"] == "elapsed seconds"
    assert result.frame["time"].isna().all()
    assert result.frame["elapsed_s"].tolist() == [0.0, 10.5, 21.0]


def test_elapsed_minutes_from_the_header_unit():
    text = "machine,time [min],speed [rpm],current [uA]\nd,0,60,1\nd,1.5,60,1\n"
    result = read_text(text)
    # hand-worked: 1.5 min * 60 = 90 s
    assert result.frame["elapsed_s"].tolist() == pytest.approx([0.0, 90.0])


def test_time_of_day_without_date():
    result = _times(["10:00:00", "10:01:30"])
    # hand-worked: 10 h * 3600 = 36000 s; 10:01:30 = 36000 + 60 + 30 = 36090 s
    assert result.frame["elapsed_s"].tolist() == [36000.0, 36090.0]
    assert result.frame["time"].isna().all()


def test_time_zone_offsets_are_kept():
    result = _times(["2024-03-01T10:00:00+01:00", "2024-03-01T10:00:30+01:00"])
    times = result.frame["time"]
    assert str(times.dt.tz) == "UTC+01:00"
    assert times.iloc[0] == pd.Timestamp("2024-03-01T09:00:00Z")
    assert result.frame["elapsed_s"].tolist() == [0.0, 30.0]


def test_mixed_offsets_are_converted_to_utc_and_said():
    result = _times(["2024-03-31T01:59:00+01:00", "2024-03-31T03:01:00+02:00"])
    assert str(result.frame["time"].dt.tz) == "UTC"
    # hand-worked: 01:59+01:00 = 00:59Z, 03:01+02:00 = 01:01Z: 2 min = 120 s apart
    assert result.frame["elapsed_s"].tolist() == [0.0, 120.0]
    assert any("UTC" in message for message in result.messages)


def test_time_zone_named_in_the_header():
    text = "machine,time [UTC],speed [rpm],current [uA]\nd,2024-03-01 10:00,60,1\n"
    times = read_text(text).frame["time"]
    assert str(times.dt.tz) == "UTC"
    assert times.iloc[0] == pd.Timestamp("2024-03-01T10:00:00Z")


def test_date_layout_in_the_header_decides_the_order():
    text = "machine,time [mm/dd/yyyy hh:mm],speed [rpm],current [uA]\nd,03/01/2024 10:00,60,1\n"
    result = read_text(text)
    assert result.format["day_first"] is False
    assert result.frame["time"].iloc[0] == pd.Timestamp("2024-03-01 10:00")


def test_unreadable_times_are_flagged_not_guessed():
    result = _times(["2024-03-01T10:00:00", "2024-02-30T10:00:00", "soon", ""])
    assert flags_of(result) == ["", "bad_time", "bad_time", ""]
    assert result.frame["time"].iloc[1:].isna().all()


def test_separate_date_and_time_columns(tmp_path):
    result = read_environment(DATA / "environment_logger.csv")
    frame = result.frame
    assert tuple(frame.columns) == ENVIRONMENT_COLUMNS
    assert result.format["header_row"] == 4
    assert frame["time"].tolist() == [pd.Timestamp("2024-03-01 10:00"),
                                      pd.Timestamp("2024-03-01 10:01")]
    # hand-worked: '48,5' % = 0.485; '19,5' °C + 273.15 = 292.65 K
    assert frame["rh"].iloc[0] == pytest.approx(0.485)
    assert frame["temperature_k"].iloc[0] == pytest.approx(292.65)
    assert frame["pressure_pa"].isna().all()


# --- Flags -------------------------------------------------------------------------------------
FLAG_TEXT = (
    "machine,time,speed [rpm],current [uA],rh [%],temperature [degC],pressure [hPa]\n"
    "d,2024-03-01T10:00:00,60,1,45,20,1000\n"      # 1 clean
    "d,2024-03-01T10:00:10,sixty,1,45,20,1000\n"   # 2 not_a_number
    "d,2024-03-01T10:00:20,,1,45,20,1000\n"        # 3 missing_value
    "d,2024-03-01T10:00:30,-60,-1,45,20,1000\n"    # 4 negative (the speed; a negative
                                                   # current is judged by analysis)
    "d,2024-03-01T10:00:40,0,1,45,20,1000\n"       # 5 zero_speed
    "d,2024-03-01T10:00:50,60,1,101,20,1000\n"     # 6 rh_out_of_range
    "d,2024-03-01T10:01:00,60,1,45,61,1000\n"      # 7 temperature_out_of_range
    "d,2024-03-01T10:01:10,60,1,45,20,400\n"       # 8 pressure_out_of_range
    "d,2024-03-01T10:01:10,60,1,45,20,1000\n"      # 9 duplicate_time (same as 8)
    "d,yesterday noon,60,1,45,20,1000\n"           # 10 bad_time
    "e,2024-03-01T10:01:10,60,1,45,20,1000\n"      # 11 other machine: no duplicate
    "d,2024-03-01T10:02:00,60,1,100,-40,1100\n"    # 12 bounds are in range
    "d,2024-03-01T10:02:10,,x,,,\n"                # 13 missing_value and not_a_number
)


def test_every_flag_code_set_by_the_reader():
    result = read_text(FLAG_TEXT)
    assert flags_of(result) == [
        "", "not_a_number", "missing_value", "negative", "zero_speed", "rh_out_of_range",
        "temperature_out_of_range", "pressure_out_of_range", "duplicate_time", "bad_time", "",
        "", "not_a_number;missing_value",
    ]
    frame = result.frame
    # Flagged values are kept as read: -1 uA = -1e-6 A; 101 % = 1.01
    assert frame["current_a"].iloc[3] == pytest.approx(-1e-6)
    assert frame["rh"].iloc[5] == pytest.approx(1.01)
    assert math.isnan(frame["speed_rev_s"].iloc[1])
    summary = [message for message in result.messages if "flagged" in message]
    assert summary and "10 of 13 rows" in summary[0]
    # Lines as an editor counts them: the header is line 1, the second reading line 3.
    assert "not_a_number 2 (lines 3, 14)" in summary[0]
    for code in result.frame["flags"].str.split(";").explode():
        assert code == "" or code in FLAG_CODES


def test_flags_keep_the_documented_order():
    flags = pd.Series(["", "negative", "not_a_number;bad_time"])
    combined = add_flags(flags, {"no_environment": np.array([True, True, True]),
                                 "zero_speed": np.array([False, True, False])})
    order = list(FLAG_CODES)
    assert combined.tolist() == [
        "no_environment", "negative;zero_speed;no_environment",
        "not_a_number;no_environment;bad_time",
    ]
    for text in combined:
        codes = text.split(";")
        assert codes == sorted(codes, key=order.index)


def test_blank_machine_cells_take_the_callers_machine():
    text = ("machine,time,speed [rpm],current [uA]\n"
            ",2024-03-01T10:00,60,1\nx,2024-03-01T10:01,60,1\n")
    assert read_text(text, machine="disc-a").frame["machine"].tolist() == ["disc-a", "x"]
    assert read_text(text).frame["machine"].tolist() == ["", "x"]


# --- Environment ------------------------------------------------------------------------------
def _readings(times: list[str], rh: list[str]) -> pd.DataFrame:
    text = "machine,time,speed [rpm],current [uA],rh [%]\n" + "".join(
        f"d,{time},60,1,{value}\n" for time, value in zip(times, rh, strict=True))
    return read_text(text).frame


def test_merge_within_and_beyond_tolerance():
    log = read_environment(DATA / "environment.csv").frame
    # Log entries at 09:58 (50 %, 20 degC, 1000 hPa) and 10:03 (60 %, 22 degC, 1002 hPa).
    readings = _readings(
        ["2024-03-01T10:00:00", "2024-03-01T10:02:00", "2024-03-01T10:09:00",
         "2024-03-01T10:20:00"],
        ["", "", "", "40"])
    merged = merge_environment(readings, log)
    assert tuple(merged.columns) == READING_COLUMNS
    # 10:00 is 2 min from 09:58 and 3 min from 10:03: nearest is 09:58 -> 50 % = 0.5
    # 10:02 is 1 min from 10:03 -> 60 % = 0.6; 22 degC + 273.15 = 295.15 K; 1002 hPa = 100200 Pa
    # 10:09 is 6 min from 10:03, beyond the default 5 min: no value, flagged
    # 10:20 keeps its own 40 % = 0.4 although no log entry is in reach, and is not flagged
    assert merged["rh"].iloc[:2].tolist() == pytest.approx([0.5, 0.6])
    assert math.isnan(merged["rh"].iloc[2])
    assert merged["rh"].iloc[3] == pytest.approx(0.4)
    assert merged["temperature_k"].iloc[1] == pytest.approx(295.15)
    assert merged["pressure_pa"].iloc[1] == pytest.approx(100200.0)
    assert merged["flags"].tolist() == ["", "", "no_environment", ""]
    # A wider tolerance reaches 10:09 -> 10:03 (6 min = 360 s <= 400 s).
    wider = merge_environment(readings, log, tolerance_s=400.0)
    assert wider["rh"].iloc[2] == pytest.approx(0.6)
    assert wider["flags"].iloc[2] == ""
    # The input is not changed.
    assert readings["rh"].isna().sum() == 3


def test_merge_keeps_own_values_and_restores_order():
    log = read_environment(DATA / "environment.csv").frame
    readings = _readings(
        ["2024-03-01T10:03:10", "2024-03-01T09:58:20", "2024-03-01T10:02:50",
         "2024-03-01T09:57:00"],
        ["33", "", "", ""])
    readings.index = [40, 10, 30, 20]
    merged = merge_environment(readings, log)
    assert merged.index.tolist() == [40, 10, 30, 20]
    assert merged["row"].tolist() == [1, 2, 3, 4]
    # Own 33 % kept; 09:58:20 -> 09:58 (50 %); 10:02:50 -> 10:03 (60 %); 09:57 -> 09:58 (50 %)
    assert merged["rh"].tolist() == pytest.approx([0.33, 0.5, 0.6, 0.5])
    # The reading with its own RH still receives the log's temperature: 22 degC = 295.15 K
    assert merged["temperature_k"].iloc[0] == pytest.approx(295.15)


def test_merge_flags_out_of_range_log_values():
    log_text = "time,rh [%]\n2024-03-01T10:00:00,120\n"
    log = read_environment(log_text.encode(), name="log.csv")
    assert any("rh_out_of_range" in message for message in log.messages)
    readings = _readings(["2024-03-01T10:00:30"], [""])
    merged = merge_environment(readings, log.frame)
    assert merged["flags"].tolist() == ["rh_out_of_range"]


def test_merge_elapsed_seconds():
    readings = read_readings(DATA / "elapsed.csv").frame
    log = read_environment(b"elapsed [s],rh [%]\n0,40\n20,50\n", name="log.csv").frame
    merged = merge_environment(readings, log, tolerance_s=5.0)
    # 0 s -> 0 s (40 %); 10.5 s is 9.5 s from 20 s, beyond 5 s; 21 s -> 20 s (50 %)
    assert merged["rh"].iloc[0] == pytest.approx(0.4)
    assert math.isnan(merged["rh"].iloc[1])
    assert merged["rh"].iloc[2] == pytest.approx(0.5)
    assert merged["flags"].tolist() == ["", "no_environment", ""]


def test_merge_of_zone_aware_and_naive_times_is_a_clear_error():
    log = read_environment(DATA / "environment.csv").frame
    readings = _times(["2024-03-01T10:00:00+01:00"]).frame
    with pytest.raises(InputError, match="time zone"):
        merge_environment(readings, log)


def test_merge_compares_instants_across_offsets():
    log = read_environment(b"time,rh [%]\n2024-03-01T09:00:00Z,44\n", name="log.csv").frame
    readings = _times(["2024-03-01T10:01:00+01:00"]).frame
    # 10:01+01:00 is 09:01Z, 60 s from the log entry
    assert merge_environment(readings, log)["rh"].iloc[0] == pytest.approx(0.44)


def test_merge_of_clock_times_with_elapsed_log_is_a_clear_error():
    readings = read_readings(DATA / "canonical.csv").frame
    log = read_environment(b"elapsed [s],rh [%]\n0,40\n", name="log.csv").frame
    with pytest.raises(InputError, match="elapsed"):
        merge_environment(readings, log)


def test_merge_tolerance_must_be_sensible():
    readings = read_readings(DATA / "canonical.csv").frame
    log = read_environment(DATA / "environment.csv").frame
    with pytest.raises(InputError, match="tolerance"):
        merge_environment(readings, log, tolerance_s=-1)


def test_environment_log_needs_time_and_air():
    with pytest.raises(InputError, match="log.csv.*time column"):
        read_environment(b"rh [%],temperature [degC]\n40,20\n", name="log.csv")
    with pytest.raises(InputError, match="log.csv"):
        read_environment(b"time,speed [rpm]\n2024-03-01T10:00,60\n", name="log.csv")


# --- Files that cannot be read -----------------------------------------------------------------
def test_empty_file(tmp_path):
    path = tmp_path / "empty.csv"
    path.write_bytes(b"")
    with pytest.raises(InputError, match="empty.csv.*empty"):
        read_readings(path)
    with pytest.raises(InputError, match="blank.csv.*empty"):
        read_readings(b"\n\n  \n", name="blank.csv")


def test_binary_garbage():
    garbage = np.random.default_rng(7).integers(0, 256, 4000, dtype=np.uint8).tobytes()
    with pytest.raises(InputError, match="noise.bin.*binary"):
        read_readings(garbage, name="noise.bin")


def test_no_usable_column():
    with pytest.raises(InputError, match="cols.csv.*no usable columns"):
        read_readings(b"alpha,beta\n1,2\n", name="cols.csv")


def test_header_without_rows():
    with pytest.raises(InputError, match="head.csv.*no data rows"):
        read_readings(b"machine,time,speed [rpm],current [uA]\n", name="head.csv")


def test_over_max_rows():
    text = "machine,time,speed [rpm],current [uA]\n" + "d,,60,1\n" * 11
    assert MAX_ROWS == 5_000_000
    assert len(read_text(text, max_rows=11).frame) == 11
    with pytest.raises(InputError, match="big.csv.*more than 10 data rows"):
        read_text(text, name="big.csv", max_rows=10)


def test_unknown_unit_in_a_header_names_file_and_column():
    text = "machine,time,speed [furlongs],current [uA]\nd,2024-03-01T10:00,60,1\n"
    with pytest.raises(InputError, match=r"units.csv.*'speed \[furlongs\]'"):
        read_text(text, name="units.csv")
    text = "machine,time,speed [rpm],current [kg]\nd,2024-03-01T10:00,60,1\n"
    with pytest.raises(InputError, match=r"units.csv.*'current \[kg\]'"):
        read_text(text, name="units.csv")


def test_extra_fields_beyond_the_header_lose_no_row():
    text = ("machine,time,speed [rpm],current [uA]\n" + "d,2024-03-01T10:00,60,1\n"
            + "d,2024-03-01T10:01,120,2,extra,more\n" * 3)
    assert len(read_text(text).frame) == 4
    # The same with the wide line far beyond the sample used for detection.
    wide = ("machine,time,speed [rpm],current [uA]\n" + "d,2024-03-01T10:00,60,1\n" * 3000
            + "d,2024-03-01T10:01,120,2,extra,more\n")
    frame = read_text(wide).frame
    assert len(frame) == 3001
    # hand-worked: 120 rpm / 60 = 2 rev/s
    assert frame["speed_rev_s"].iloc[-1] == pytest.approx(2.0)
    assert frame["flags"].iloc[-1] == ""


def test_missing_file_names_it(tmp_path):
    with pytest.raises(InputError, match="nowhere.csv.*not found"):
        read_readings(tmp_path / "nowhere.csv")


def test_bad_options_are_input_errors():
    with pytest.raises(InputError, match="decimal"):
        read_readings(DATA / "canonical.csv", ReadOptions(decimal=";"))
    with pytest.raises(InputError, match="encoding"):
        read_readings(DATA / "canonical.csv", ReadOptions(encoding="no-such-codec"))
    with pytest.raises(InputError, match="max_rows"):
        read_readings(DATA / "canonical.csv", ReadOptions(max_rows=0))


# --- Properties --------------------------------------------------------------------------------
_cells = st.one_of(
    st.floats(min_value=-1e6, max_value=1e6, allow_nan=False).map(repr),
    st.integers(min_value=-1000, max_value=1000).map(str),
    # (a decimal comma such as '1,5' decides its column: see the notation tests)
    st.sampled_from(["", "x", "NA", "1,5x", "=A1", " 7 "]),
)
_notes = st.text(alphabet=st.characters(codec="utf-8", exclude_categories=("Cs", "Cc")),
                 max_size=12)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(rows=st.lists(
    st.tuples(st.sampled_from(["disc-a", "belt-b", "07"]), _cells, _cells, _notes),
    min_size=1, max_size=60))
def test_no_row_is_lost_or_reordered(rows):
    """Law: validation keeps every row, in order; rows out == rows in, numbered 1..n."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(["machine", "time", "speed [rpm]", "current [uA]", "note"])
    for index, (machine, speed, current, note) in enumerate(rows):
        writer.writerow([machine, f"2024-03-01T10:{index // 60:02d}:{index % 60:02d}", speed,
                         current, note])
    result = read_readings(buffer.getvalue().encode("utf-8"), name="property.csv")
    frame = result.frame
    assert len(frame) == len(rows)
    assert frame["row"].tolist() == list(range(1, len(rows) + 1))
    assert frame["machine"].tolist() == [row[0] for row in rows]
    # Each note is kept as written; a bad speed or current cell adds what it held.
    for note, row in zip(frame["note"], rows, strict=True):
        assert note.startswith(row[3]) or (not row[3].strip() and "written '" in note)
    for position, (_machine, speed, _current, _note) in enumerate(rows):
        try:
            expected = float(speed) / 60.0  # hand-worked: rpm / 60 = rev/s
        except ValueError:
            expected = None
        got = frame["speed_rev_s"].iloc[position]
        flags = frame["flags"].iloc[position]
        if expected is None:
            assert math.isnan(got) and any(
                code in flags for code in ("not_a_number", "missing_value", "unit_mismatch"))
        else:
            assert got == pytest.approx(expected, rel=1e-12, abs=1e-300)


def test_sessions_that_restart_their_clock_are_not_duplicates():
    # Two sessions, each timed in seconds from its own start: the same elapsed times recur.
    text = ("machine,session,time [s],speed [rpm],current [uA]\n"
            "twin,before,0,300,5\ntwin,before,10,300,5\n"
            "twin,after,0,300,9\ntwin,after,10,300,9\ntwin,after,10,300,9\n")
    frame = read_readings(text.encode(), name="restart.csv").frame
    assert list(frame["flags"]) == ["", "", "", "", "duplicate_time"]


def test_humidity_written_as_fractions_without_a_unit_is_read_as_fractions():
    text = "machine,speed [rpm],current [uA],rh\ntwin,300,5,0.45\ntwin,310,5,0.52\n"
    result = read_readings(text.encode(), name="fractions.csv")
    assert list(result.frame["rh"]) == [0.45, 0.52]  # not 0.45 %
    assert any("read as a fraction" in message for message in result.messages)
    # A unit in the header is taken as written.
    text = text.replace(",rh\n", ",rh [%]\n")
    assert read_readings(text.encode(), name="percent.csv").frame["rh"].iloc[0] == \
        pytest.approx(0.0045)


@pytest.mark.parametrize("encoding", ["utf-8", "utf-8-sig", "utf-16", "cp1252"])
def test_a_header_cell_of_two_lines_is_one_header_in_every_layout(encoding):
    """A header cell with a line break inside its quotes (a spreadsheet's Alt+Enter) is one
    cell of the header, whichever cell it is: the readings below are all read, none made of
    the header's second line. (The C parser's row skipping counted that line in one layout and
    not in another; a fuzz test found it.)"""
    text = (',"two\nlines",alpha,time,rh [%]\n'
            "disc-a,disc-a,disc-a,2000-01-01T00:00:00,40\n"
            "disc-a,disc-a,disc-a,2000-01-01T00:01:00,41\n")
    result = read_environment(text.encode(encoding), name="log.csv")
    assert len(result.frame) == 2
    assert result.frame["rh"].tolist() == pytest.approx([0.40, 0.41])  # % in the header
    assert result.frame["time"].notna().all()
