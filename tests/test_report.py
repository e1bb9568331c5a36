"""Exports: the output table in display units, spreadsheets safe from formulas, the HTML report."""

import csv
import html
import io
import json
import math
import os
import re
import shutil
from datetime import date
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from engine import analysis
from engine import columns as col
from engine.arrangements import delivery_sentence
from engine.machines import machine_from_table, parse_machines_text
from engine.readings import read_readings
from engine.report import (
    FORMULA_PREFIXES,
    OUTPUT_COLUMNS,
    TRACE_OUTPUT_COLUMNS,
    VOLTAGE_OUTPUT_COLUMNS,
    describe_machine,
    html_report,
    iso_text,
    neutralise_formula,
    neutralise_frame,
    output_columns,
    output_frame,
    report_file_name,
    sessions_in_time_order,
    to_csv_bytes,
    to_xlsx_bytes,
    write_csv,
)
from tests.test_figures import MACHINE_TABLES, make_derived, make_findings, make_machines
from tests.test_security import _Tags

SIX_LEADERS = ("=", "+", "-", "@", "\t", "\r")
ATTACK = "<script>alert(1)</script>"


def one_reading(**changes):
    """One reading with derived columns, every value chosen for hand-worked conversions."""
    reading = {
        col.ROW: 1, col.MACHINE: "m1", col.SESSION: "s1",
        col.TIME: pd.Timestamp("2026-02-03T09:10:00+01:00"), col.ELAPSED_S: 0.0,
        col.SPEED_REV_S: 5.0, col.BELT_SPEED_M_S: np.nan, col.CURRENT_A: 12e-6,
        col.RH: 0.45, col.TEMPERATURE_K: 293.15, col.PRESSURE_PA: 101_300.0,
        col.VOLTAGE_V: np.nan, col.NOTE: "dry day", col.FLAGS: "",
        col.CEILING_A: 40e-6, col.EFFICIENCY: 0.3, col.EFFICIENCY_U: 0.012,
        col.CHARGE_PER_REV_C: 2.4e-6, col.SURFACE_DENSITY_C_M2: np.nan,
        col.RELATIVE_AIR_DENSITY: 0.97, col.ABS_HUMIDITY_KG_M3: 0.009,
        col.DEW_POINT_K: 293.15,
    }
    reading.update(changes)
    return reading


def frame_of(*readings):
    return pd.DataFrame(list(readings))[list(col.READING_COLUMNS + col.DERIVED_COLUMNS)]


# --- output_frame ----------------------------------------------------------------------------

def test_output_columns_are_the_agreed_list_in_order():
    assert OUTPUT_COLUMNS == (
        "machine", "time", "speed_rev_s", "current_uA", "ceiling_uA", "efficiency",
        "efficiency_u", "charge_per_rev_nC", "rh_pct", "abs_humidity_g_m3", "dew_point_C",
        "relative_air_density", "flags",
    )
    out = output_frame(frame_of(one_reading()))
    assert list(out.columns) == [*OUTPUT_COLUMNS, "session", "note", *TRACE_OUTPUT_COLUMNS,
                                 *VOLTAGE_OUTPUT_COLUMNS]
    without = frame_of(one_reading()).drop(columns=[col.SESSION, col.NOTE])
    assert list(output_frame(without).columns) == [*OUTPUT_COLUMNS, *TRACE_OUTPUT_COLUMNS,
                                                   *VOLTAGE_OUTPUT_COLUMNS]
    bare = frame_of(one_reading())[[col.MACHINE, col.TIME, col.CURRENT_A, col.FLAGS]]
    assert list(output_frame(bare).columns) == [*OUTPUT_COLUMNS, *VOLTAGE_OUTPUT_COLUMNS]


def test_output_frame_unit_conversions_hand_worked():
    row = output_frame(frame_of(one_reading())).iloc[0]
    assert row["current_uA"] == pytest.approx(12.0)  # 12e-6 A * 1e6 = 12.0 uA
    assert row["ceiling_uA"] == pytest.approx(40.0)  # 40e-6 A = 40.0 uA
    assert row["dew_point_C"] == pytest.approx(20.0)  # 293.15 K - 273.15 = 20.0 degC
    assert row["abs_humidity_g_m3"] == pytest.approx(9.0)  # 0.009 kg/m^3 * 1000 = 9.0 g/m^3
    assert row["rh_pct"] == pytest.approx(45.0)  # 0.45 * 100 = 45 %
    assert row["charge_per_rev_nC"] == pytest.approx(2400.0)  # 2.4e-6 C * 1e9 = 2400 nC
    assert row["speed_rev_s"] == 5.0  # stays rev/s
    assert row["efficiency"] == 0.3 and row["efficiency_u"] == 0.012  # stay fractions
    assert row["relative_air_density"] == 0.97
    assert row["time"] == "2026-02-03T09:10:00+01:00"
    assert row["machine"] == "m1" and row["flags"] == "" and row["session"] == "s1"


def test_output_frame_keeps_input_order_and_every_row():
    readings = [one_reading(**{col.MACHINE: machine_id, col.CURRENT_A: number * 1e-6})
                for number, machine_id in enumerate(["z", "a", "m", "a", "b"], 1)]
    source = frame_of(*readings)
    source.index = [40, 10, 30, 20, 50]
    out = output_frame(source)
    assert list(out["machine"]) == ["z", "a", "m", "a", "b"]
    assert out["current_uA"].tolist() == pytest.approx([1, 2, 3, 4, 5])
    assert list(out.index) == [0, 1, 2, 3, 4]


def test_times_as_iso_text_and_empty_when_unknown():
    zoned = frame_of(one_reading(), one_reading(**{col.TIME: pd.NaT}))
    assert list(output_frame(zoned)["time"]) == ["2026-02-03T09:10:00+01:00", ""]
    # midnight keeps its clock time (pandas would print a date only); no zone, no offset
    naive = pd.Series(pd.to_datetime(["2026-02-03 00:00:00", "2026-02-04 00:00:00", None]))
    assert list(iso_text(naive)) == ["2026-02-03T00:00:00", "2026-02-04T00:00:00", ""]
    fractions = pd.Series(pd.to_datetime(["2026-02-03 09:00:00.25", "2026-02-03 09:00:01"],
                                           format="ISO8601"))
    assert list(iso_text(fractions)) == ["2026-02-03T09:00:00.250000",
                                         "2026-02-03T09:00:01.000000"]
    utc = pd.Series(pd.to_datetime(["2026-02-03T08:10:00Z"]))
    assert list(iso_text(utc)) == ["2026-02-03T08:10:00+00:00"]
    all_unknown = frame_of(one_reading(**{col.TIME: pd.NaT}))
    assert list(output_frame(all_unknown)["time"]) == [""]


def test_missing_values_stay_missing():
    out = output_frame(frame_of(one_reading(**{col.RH: np.nan, col.FLAGS: None,
                                               col.NOTE: None})))
    assert math.isnan(out.loc[0, "rh_pct"])
    assert out.loc[0, "flags"] == "" and out.loc[0, "note"] == ""


# --- neutralising formulas -------------------------------------------------------------------

@pytest.mark.parametrize("leader", SIX_LEADERS)
def test_neutralise_formula_each_leading_character(leader):
    # OWASP CSV injection guidance: prefix an apostrophe to cells starting with these
    assert neutralise_formula(f"{leader}1+2") == f"'{leader}1+2"


def test_neutralise_formula_leaves_other_values_alone():
    assert set(FORMULA_PREFIXES) == set(SIX_LEADERS)
    for value in ("plain", "a=b", " =1", "", "'=already"):
        assert neutralise_formula(value) == value
    for value in (-5, -2.5, 0, 3.0, None, math.inf):
        assert neutralise_formula(value) is value


def test_neutralise_frame_only_touches_text_cells():
    frame = pd.DataFrame({
        "note": ["=SUM(A1)", "fine", None, "-x"],
        "number": [-1.5, 2.0, -3.0, 4.0],
        "count": [-1, 2, 3, -4],
        "mixed": pd.Series(["@cmd", -7.0, 8, None], dtype=object),
        "flags": ["", "+bad", "above_ceiling", "\tx"],
    })
    result = neutralise_frame(frame)
    assert list(result["note"][[0, 1, 3]]) == ["'=SUM(A1)", "fine", "'-x"]
    assert result["note"][2] is None or pd.isna(result["note"][2])
    assert result["number"].tolist() == [-1.5, 2.0, -3.0, 4.0]
    assert result["number"].dtype == frame["number"].dtype
    assert result["count"].tolist() == [-1, 2, 3, -4]
    assert result["mixed"].tolist()[:3] == ["'@cmd", -7.0, 8]
    assert list(result["flags"]) == ["", "'+bad", "above_ceiling", "'\tx"]
    assert frame["note"][0] == "=SUM(A1)"  # the input is not changed


def risky_frame():
    """An output frame whose machine, session, note and flags start with each risky character."""
    readings = []
    for number, leader in enumerate(SIX_LEADERS):
        readings.append(one_reading(**{
            col.MACHINE: f"{leader}m{number}", col.SESSION: f"{leader}session",
            col.NOTE: f"{leader}cmd|' /C calc'!A0", col.FLAGS: f"{leader}flag",
            col.CURRENT_A: -(number + 1) * 1e-6,
        }))
    return output_frame(frame_of(*readings))


def test_csv_neutralises_each_leading_character_and_keeps_numbers():
    frame = risky_frame()
    rows = list(csv.DictReader(io.StringIO(to_csv_bytes(frame).decode("utf-8"), newline="")))
    assert len(rows) == len(SIX_LEADERS)
    for number, (leader, row) in enumerate(zip(SIX_LEADERS, rows, strict=True)):
        assert row["machine"] == f"'{leader}m{number}"
        assert row["session"] == f"'{leader}session"
        assert row["note"] == f"'{leader}cmd|' /C calc'!A0"
        assert row["flags"] == f"'{leader}flag"
        # a negative number is a number, not text: it is written as it is
        assert float(row["current_uA"]) == pytest.approx(-(number + 1))
        assert not row["current_uA"].startswith("'")
    assert list(rows[0])[:15] == [*OUTPUT_COLUMNS, "session", "note"]


def test_csv_numbers_without_binary_noise():
    frame = pd.DataFrame({"current_uA": [0.1 + 0.2, 12e-6 * 1e6], "n": [1, 2]})
    text = to_csv_bytes(frame).decode("utf-8")
    assert text.splitlines() == ["current_uA,n", "0.3,1", "12,2"]


def test_csv_of_the_output_columns_is_the_csv_of_the_output_frame():
    # The command line writes the columns without making the frame: the same file.
    readings = [one_reading(**{col.MACHINE: f"{leader}m", col.NOTE: None if number % 2 else
                               f"{leader}n", col.TIME: pd.NaT if number == 3 else
                               pd.Timestamp("2026-02-03T09:10:00+01:00")})
                for number, leader in enumerate((*SIX_LEADERS, "plain"))]
    derived = frame_of(*readings)
    assert to_csv_bytes(output_columns(derived)) == to_csv_bytes(output_frame(derived))


def test_csv_text_in_mixed_columns_as_before():
    # A text cell is neutralised, a number in the same object column is only written (it is
    # no formula); a zoned time is written as ISO text; an interval column is split in two.
    frame = pd.DataFrame({
        "mixed": pd.Series(["=cmd", -5, 2.5, None, "ok"], dtype=object),
        "when": pd.to_datetime(["2026-02-03T09:10:00+01:00"] * 5),
        "ci": pd.Series([(1.0, 2.0), None, (3.0, 4.5), None, None], dtype=object),
    })
    lines = to_csv_bytes(frame).decode("utf-8").split("\r\n")
    assert lines[0] == "mixed,when,ci_low,ci_high"
    assert lines[1] == '"\'=cmd","2026-02-03T09:10:00+01:00",1,2'
    assert lines[2] == '"-5","2026-02-03T09:10:00+01:00",,'
    assert lines[3] == '"2.5","2026-02-03T09:10:00+01:00",3,4.5'
    assert lines[4] == ',"2026-02-03T09:10:00+01:00",,'


def test_a_large_table_written_in_parts_is_the_file_one_call_writes(monkeypatch, tmp_path):
    # Parts of 7 rows over 100 rows: every boundary case of the parts writer (header only on
    # the first part, a short last part); the reference is the table written at once.
    from engine import report

    rows = 100
    frame = pd.DataFrame({
        "machine": [f"{SIX_LEADERS[row % 6]}m{row}" if row % 5 else "d" for row in range(rows)],
        "value": np.where(np.arange(rows) % 9 == 0, np.nan, np.arange(rows) / 7.0),
        "count": np.arange(rows),
        "note": pd.Series([None if row % 4 else "a, \"quoted\" note" for row in range(rows)],
                          dtype="str"),
    })
    whole = to_csv_bytes(frame)
    monkeypatch.setattr(report, "_CSV_PART_ROWS", 7)
    assert to_csv_bytes(frame) == whole
    write_csv(frame, tmp_path / "parts.csv")
    assert (tmp_path / "parts.csv").read_bytes() == whole
    assert whole.count(b"\r\n") == rows + 1


def test_xlsx_neutralises_each_leading_character_and_has_no_formulas():
    frame = risky_frame()
    findings = pd.DataFrame({"machine": ["=m"], "session": ["@s"], "notes": ["+n"],
                             "charge_per_rev_nC": [33.0],
                             "charge_per_rev_ci_nC": [(31.0, 35.0)]})
    book = openpyxl.load_workbook(io.BytesIO(to_xlsx_bytes(frame, findings=findings)))
    assert book.sheetnames == ["readings", "findings"]
    sheet = book["readings"]
    header = [cell.value for cell in sheet[1]]
    assert header[:15] == [*OUTPUT_COLUMNS, "session", "note"]
    for number, leader in enumerate(SIX_LEADERS):
        values = dict(zip(header, (cell.value for cell in sheet[number + 2]), strict=True))
        # XML parsers read a carriage return as a line feed (XML 1.0, section 2.11)
        read_leader = "\n" if leader == "\r" else leader
        assert values["machine"] == f"'{read_leader}m{number}"
        assert values["session"] == f"'{read_leader}session"
        assert values["flags"] == f"'{read_leader}flag"
        assert values["current_uA"] == pytest.approx(-(number + 1))
    for worksheet in book.worksheets:
        for row in worksheet.iter_rows():
            for cell in row:
                assert cell.data_type != "f", (worksheet.title, cell.coordinate, cell.value)
    numbers = [cell for cell in sheet["D"][1:]]  # current_uA
    assert all(cell.data_type == "n" for cell in numbers)
    found = book["findings"]
    found_header = [cell.value for cell in found[1]]
    assert found_header == ["machine", "session", "notes", "charge_per_rev_nC",
                            "charge_per_rev_ci_nC_low", "charge_per_rev_ci_nC_high"]
    assert [cell.value for cell in found[2]] == ["'=m", "'@s", "'+n", 33, 31, 35]


def test_xlsx_survives_control_characters_and_zoned_times():
    frame = pd.DataFrame({"note": ["bell\x07here", "ok"],
                          "time": pd.to_datetime(["2026-02-03T09:10:00+01:00", None]),
                          "value": [1.0, np.nan]})
    book = openpyxl.load_workbook(io.BytesIO(to_xlsx_bytes(frame, sheet_name="a/b:c")))
    sheet = book.worksheets[0]
    assert sheet.title == "a_b_c"
    assert sheet["A2"].value == "bell\ufffdhere"  # shown, not dropped, not a crash
    assert sheet["B2"].value == "2026-02-03T09:10:00+01:00"
    assert sheet["C3"].value is None


# --- the HTML report -------------------------------------------------------------------------

@pytest.fixture(scope="module")
def report_inputs():
    tables = dict(MACHINE_TABLES)
    tables["disc-a"] = {**tables["disc-a"], "label": ATTACK, "notes": f"restored {ATTACK}"}
    machines = make_machines(tables)
    derived = make_derived(machines, per_machine=30)
    derived.loc[derived[col.MACHINE] == "cyl-c", col.SESSION] = ATTACK
    findings = make_findings(derived)
    findings.loc[findings["machine"] == "cyl-c", "session"] = ATTACK
    findings.loc[findings["machine"] == "belt-b", "notes"] = ATTACK
    comparisons = pd.DataFrame({"session": [ATTACK, "after"], "efficiency_pct": [31.25, 28.5]})
    return derived, findings, machines, comparisons


@pytest.fixture(scope="module")
def report(report_inputs):
    derived, findings, machines, comparisons = report_inputs
    return html_report(derived, findings, machines, title=f"Museum {ATTACK} report",
                       comparisons=comparisons, notes=[ATTACK, "line one\nline two"],
                       generated=date(2026, 2, 3))


def test_report_escapes_every_user_text(report):
    assert "<script>alert" not in report.lower()
    assert report.count("&lt;script&gt;alert(1)&lt;/script&gt;") >= 6  # title x2, label, ...
    assert "<title>Museum &lt;script&gt;alert(1)&lt;/script&gt; report</title>" in report
    assert "line one<br>line two" in report


def test_report_loads_nothing_from_the_network(report):
    assert not re.search(r"<script[^>]*\bsrc\s*=", report, flags=re.I)
    # the embedded plotly.js holds map-tile and logo addresses in its code, never used here;
    # the document itself (outside the scripts) links to nothing
    markup = re.sub(r"<script[^>]*>.*?</script>", "", report, flags=re.S | re.I)
    assert len(markup) < len(report) / 10
    assert not re.search(r"https?:|//[a-z]", markup, flags=re.I)
    assert not re.search(r"<link\b|@import|<iframe|<img", markup, flags=re.I)


def test_report_embeds_plotly_once_and_four_charts(report):
    # the plotly.js bundle opens with its licence banner naming the version, once
    assert len(re.findall(r"plotly\.js v\d", report)) == 1
    assert report.count('<div class="chart">') == 4
    # and the drawings: one per machine, a second (its arrangement) for the disc machine
    assert report.count('<div class="drawing">') == len(MACHINE_TABLES) + 1
    assert report.count('class="plotly-graph-div"') == 4 + len(MACHINE_TABLES) + 1
    assert report.count("Plotly.newPlot(") == 4 + len(MACHINE_TABLES) + 1
    for title in ("Measured current and ceiling against speed", "Efficiency against speed",
                  "Charge per revolution against the ceiling per revolution",
                  "Efficiency against relative humidity"):
        assert title in report


def test_report_sections_method_references_and_safety(report):
    text = re.sub(r"\s+", " ", report)
    for heading in ("<h2>Verdict</h2>", "<h2>Machines</h2>", "<h2>Findings</h2>",
                    "<h2>Comparisons</h2>", "<h2>Notes</h2>", "<h2>Charts</h2>",
                    "<h2>Method</h2>", "<h2>Safety</h2>"):
        assert heading in text
    assert "Report date: 2026-02-03" in text
    for reference in ("IEC 60060-1", "ICAO Doc 7488/3", "Alduchov and Eskridge (1996)",
                      "CODATA 2018", "6.1094 hPa", "293.15 K", "101.3 kPa"):
        assert reference in text
    assert ("I<sub>ceiling</sub> = &epsilon;<sub>0</sub> &middot; E<sub>ref</sub> &middot; "
            "&delta; &middot; A<sub>rev</sub> &middot; f &middot; units") in text
    for warning in ("kilovolts", "insulated grounding rod", "implanted medical devices",
                    "flammable vapours", "ozone", "Protect electronic instruments", "X-rays",
                    "institution's electrical safety rules, local codes",
                    "The tool computes, it does not make a set-up safe."):
        assert warning in text, warning


def test_report_carries_machines_and_findings(report, report_inputs):
    _derived, findings, machines, _comparisons = report_inputs
    for machine in machines.values():
        assert f"Identifier in the lab: {machine.id}." in report
    # the six-disc stack's area per revolution is 410 cm^2 per disc, shown to 4 digits;
    # the twin disc's is pi (22^2 - 13^2) * 0.5 = 494.8 cm^2 (hand-worked)
    assert "Charged area per revolution of one carrier: 410.0 cm²." in report
    assert "Charged area per revolution of one disc: 494.8 cm²." in report
    # two findings tables (summary, fits in detail), one row per finding in each
    assert report.count("<tr>") >= 2 * (len(findings) + 1) + 1
    assert "<td>31.25</td>" in report  # a comparison number, 4 significant digits


def test_findings_figures_in_display_units():
    machines = make_machines()
    findings = pd.DataFrame([
        {"machine": "custom-d", "session": "open day", "carrier": "custom",
         "readings_used": 98, "readings_flagged": 1, "efficiency_median": 0.2384,
         "efficiency_q25": 0.2291, "efficiency_q75": 0.2433, "charge_per_rev_nC": 1391.37,
         "charge_per_rev_ci_nC": (1376.2, 1406.9), "offset_current_uA": 0.4262,
         "fit_r2": 0.99712, "units": 20.0, "observed_units": 4.382,
         "observed_units_ci": (4.33, 4.43),
         "humidity_slope_per_10pct": -0.0632, "humidity_slope_per_10pct_ci": (-0.0679, -0.0578),
         "efficiency_at_reference_rh": 0.2921, "logistic_rh_half_pct": 66.2, "notes": None},
        {"machine": "belt-lin", "session": None, "carrier": None, "readings_used": 10,
         "charge_per_rev_nC": math.nan, "charge_per_rev_ci_nC": None,
         "charge_per_metre_nC": 210.44, "charge_per_metre_ci_nC": [205.01, 215.87]},
    ])
    machines = {**machines, "belt-lin": machine_from_table(
        {"id": "belt-lin", "carrier": "belt", "width": "5 cm", "label": "Belt in m/s"})}
    page = html_report(frame_of(one_reading()), findings, machines, "Units",
                       generated=date(2026, 2, 3))
    # hand-worked: fractions x 100 to one decimal, nC to three significant digits without
    # exponent, R^2 to three decimals, RH at half output to whole percent
    expected = ["<td>98 (1 flagged)</td>", "<td>23.8 (22.9 to 24.3)</td>",
                "<td>1391 (1376 to 1407)</td>",
                "<td>0.426</td>", "<td>0.997</td>", "<td>4.4 of 20 (4.3 to 4.4)</td>",
                "<td>-6.3 (-6.8 to -5.8)</td>", "<td>29.2</td>", "<td>66</td>",
                "<td>210 per metre of belt (205 to 216)</td>"]
    for cell in expected:
        assert cell in page, cell
    assert "nan" not in re.sub(r"<script[^>]*>.*?</script>", "", page, flags=re.S).lower()


def test_report_with_no_readings_and_no_findings():
    machines = make_machines()
    empty = pd.DataFrame(columns=list(col.READING_COLUMNS + col.DERIVED_COLUMNS))
    page = html_report(empty, None, machines, "Empty")
    assert page.count("No readings to show") == 4
    assert "No findings" in page
    assert len(re.findall(r"plotly\.js v\d", page)) == 1


# --- the report a conservator files ----------------------------------------------------------

CONSERVATOR_MACHINES = """
[[machine]]
id = "museum"
label = "Museum twin-disc"
carrier = "disc"
outer_diameter = "44 cm"
inner_diameter = "26 cm"
sector_fill = 0.5
arrangement = "twin-disc"
collectors = "fixed"
material = "glass discs"
notes = "Discs cleaned, sectors re-glued."
"""
# One unit of the museum machine carries sigma * A = 26.55 uC/m^2 * pi (0.22^2 - 0.13^2) m^2
# * 0.5 = 1.31 uC per revolution (design notes, worked by hand); the readings below are
# invented at about 20 % of it before and 30 % after the restoration.
UNIT_CHARGE_UC = 1.31


def conservator_readings(before="before restoration", after="after restoration", seed=3):
    """Readings of the museum machine in two sessions three months apart; the later session is
    written first in the file, so only the times tell which came first."""
    rng = np.random.default_rng(seed)
    lines = ["machine,session,time,speed [rpm],current [uA],rh [%]"]
    for session, day, efficiency in ((after, "2026-02-10", 0.30), (before, "2025-11-08", 0.20)):
        for number in range(16):
            speed_rpm = 180 + 15 * number
            rh = 42 + (number * 7) % 9
            current = efficiency * UNIT_CHARGE_UC * speed_rpm / 60 * rng.normal(1, 0.02)
            lines.append(f"museum,{json.dumps(session)},{day}T10:{number:02d}:00,"
                         f"{speed_rpm},{current:.4f},{rh}")
    return "\n".join(lines).encode("utf-8")


def conservator_report(title="Museum twin-disc, before and after restoration",
                       machines_text=CONSERVATOR_MACHINES, **sessions):
    machine_file = parse_machines_text(machines_text, "machines.toml")
    readings = read_readings(conservator_readings(**sessions), name="museum.csv").frame
    derived = analysis.derive(readings, machine_file.by_id(), machine_file.site)
    findings = analysis.findings(derived, machine_file.by_id(), by_session=True)
    page = html_report(derived, findings, machine_file.by_id(), title,
                       generated=date(2026, 2, 11))
    return page, derived, findings


@pytest.fixture(scope="module")
def conservator():
    return conservator_report()


def section(page, name):
    """The text of one section of the report, from its heading to the next section."""
    start = page.index(f"<h2>{name}</h2>")
    end = page.find("</section>", start)
    return page[start:end]


def test_the_verdict_comes_first(conservator):
    page, _derived, _findings = conservator
    order = [page.index(f"<h2>{name}</h2>")
             for name in ("Verdict", "Machines", "Findings", "Charts", "Method", "Safety")]
    assert order == sorted(order)
    assert page.index("<h1>") < order[0]
    assert "Report date: 2026-02-11" in page[:order[0]]


def test_the_verdict_compares_the_first_and_last_session_in_time(conservator):
    page, derived, _findings = conservator
    verdict = section(page, "Verdict")
    # the file lists "after" first; in time "before restoration" (2025-11-08) came first
    expected = analysis.compare_sessions(derived, "museum", "before restoration",
                                         "after restoration")
    assert html.escape(expected["verdict"], quote=True) in verdict
    assert "delivers" in expected["verdict"] and "more" in expected["verdict"]
    assert ("<strong>Museum twin-disc</strong>, from &#x27;before restoration&#x27; to "
            "&#x27;after restoration&#x27;") in verdict
    assert f"{expected['mean_a'] * 100:.1f} % in &#x27;before restoration&#x27;" in verdict


def test_the_verdict_says_what_each_machine_delivers(conservator):
    page, _derived, findings = conservator
    verdict = section(page, "Verdict")
    for record in findings.to_dict("records"):
        sentence = delivery_sentence(record["observed_units"], record["units"],
                                     record["units_basis"])
        # a twin-disc with sectors allows 1 unit in total (the trade's rule, common practice,
        # no source); the invented readings deliver about 0.2 and 0.3 of it
        assert sentence.endswith("of the 1 unit its arrangement allows")
        median = f"median efficiency {record['efficiency_median'] * 100:.1f} %"
        assert f"in &#x27;{record['session']}&#x27;: {sentence}, {median}" in verdict
    before = verdict.index("in &#x27;before restoration&#x27;:")
    assert before < verdict.index("in &#x27;after restoration&#x27;:")
    # the findings tables list the sessions in time too, not in file order
    tables = section(page, "Findings")
    assert tables.index("<td>before restoration</td>") < tables.index(
        "<td>after restoration</td>")


def test_a_machine_with_one_session_has_no_comparison(report):
    verdict = section(report, "Verdict")
    assert "Before and after" not in verdict
    assert "What each machine delivers" in verdict


def test_sessions_in_time_order_not_file_order():
    derived = pd.DataFrame({
        col.MACHINE: ["m", "m", "m", "n", "m"],
        col.SESSION: ["later", "earlier", "undated", "only", None],
        col.TIME: pd.to_datetime(["2026-03-01T10:00:00Z", "2026-01-01T10:00:00Z", None,
                                  "2026-02-01T10:00:00Z", "2026-02-01T10:00:00Z"]),
    })
    assert sessions_in_time_order(derived) == {"m": ["earlier", "", "later", "undated"],
                                               "n": ["only"]}
    assert sessions_in_time_order(pd.DataFrame()) == {}


def test_machines_are_described_in_words_not_keys(conservator, report):
    page, _derived, _findings = conservator
    machines = section(page, "Machines")
    assert ("Museum twin-disc is a twin-disc machine with metal sectors: two counter-rotating "
            "discs, charged zone from 26 to 44 cm diameter, sectors covering half of it; 1 unit "
            "(twin-disc with sectors = 1 unit in total (one disc delivers, the other acts as a "
            "moving inductor); common practice, no source).") in machines
    assert "Material: glass discs." in machines
    assert "Notes: Discs cleaned, sectors re-glued." in machines
    for document in (page, report):
        for key in ("outer_diameter", "inner_diameter", "sector_fill", "roller_diameter",
                    "active_length", "area_per_rev"):
            assert f"{key} =" not in document and f"{key}=" not in document


@pytest.mark.parametrize(("table", "words"), [
    # the trade's unit rules are common practice, no source (design notes)
    ({"carrier": "disc", "outer_diameter": "32 cm", "inner_diameter": "18 cm",
      "arrangement": "disc-stack", "discs": 6, "collectors": "split"},
     "a disc stack: 6 close-spaced counter-rotating discs without sectors, with split "
     "collectors (each collector's two halves angled toward the nearest neutraliser), charged "
     "zone from 18 to 32 cm diameter; 20 units (2 outer discs x 2 + 4 inner discs x 4 = 20 "
     "units; common practice, no source)"),
    ({"carrier": "disc", "outer_diameter": "17.5 in", "inner_diameter": "10 in",
      "arrangement": "twin-disc-sectorless"},
     "a sectorless twin-disc machine: two counter-rotating discs without sectors, charged zone "
     "from 10 to 17.5 in diameter; 2 units (sectorless twin-disc = 2 units; common practice, "
     "no source)"),
    ({"carrier": "disc", "outer_radius": "20 cm", "inner_radius": "0 cm",
      "arrangement": "single-disc"},
     "a single-disc machine: one disc turning past a fixed inductor plate, charged zone the "
     "whole disc, 20 cm radius; 1 unit (one disc past a fixed inductor plate = 1 unit; common "
     "practice, no source)"),
    ({"carrier": "belt", "width": "5 cm", "roller_diameter": "5 cm"},
     "a belt machine: a belt 5 cm wide, running over a roller of 5 cm diameter on which the "
     "speed is read; 1 unit (1 carrier x 1 charge load per revolution = 1 unit)"),
    ({"carrier": "cylinder", "diameter": "12 cm", "active_length": "30 cm", "carriers": 2},
     "a cylinder machine: 2 cylinders of 12 cm diameter, charged over 30 cm of its length; "
     "2 units (2 carriers x 1 charge load per revolution = 2 units)"),
    ({"carrier": "custom", "area_per_rev": "410 cm^2"},
     "a machine described by its charged area per revolution, 410 cm^2; 1 unit (1 carrier x "
     "1 charge load per revolution = 1 unit)"),
])
def test_describe_machine_in_the_trades_words(table, words):
    assert describe_machine(machine_from_table({"id": "m", **table})) == words


def test_every_machine_has_its_drawing(conservator, report_inputs, report):
    _derived, _findings, machines, _comparisons = report_inputs
    for page, expected in ((conservator[0], {"museum": 2}),
                           (report, {key: 2 if machine.kind == "disc" else 1
                                     for key, machine in machines.items()})):
        articles = page.split('<article class="machine">')[1:]
        assert len(articles) == len(expected)
        for article, count in zip(articles, expected.values(), strict=True):
            article = article[:article.index("</article>")]
            assert article.count('<div class="drawing">') == count
            assert article.count("Plotly.newPlot(") == count
            assert "<figcaption>" in article and "to scale" in article


def test_the_findings_table_fits_the_page(conservator, report):
    assert "table-layout: fixed" in html_report_style()
    assert "overflow-wrap: anywhere" in html_report_style()
    for page in (conservator[0], report):
        findings = section(page, "Findings")
        tables = re.findall(r"<table>.*?</table>", findings, flags=re.S)
        assert len(tables) >= 2
        for table in tables[:2]:
            header = re.search(r"<thead>(.*?)</thead>", table, flags=re.S).group(1)
            columns = header.count("<th>")
            assert columns <= 8
            widths = [float(width) for width in re.findall(r'<col style="width: ([\d.]+)%">',
                                                            table)]
            assert len(widths) == columns and sum(widths) == pytest.approx(100)
    # the notes sit under the table, numbered, and the row points to them
    findings = section(report, "Findings")
    assert '<a href="#finding-note-1">note 1</a>' in findings
    assert '<ol class="table-notes"><li id="finding-note-1">' in findings
    assert "&lt;script&gt;alert(1)&lt;/script&gt;</li>" in findings  # belt-b's notes


def html_report_style():
    from engine.report import _STYLE

    return _STYLE


def test_the_print_stylesheet(conservator):
    page = conservator[0]
    style = re.search(r"<style>(.*?)</style>", page, flags=re.S).group(1)
    assert "@page { size: A4;" in style
    print_rules = style[style.index("@media print"):]
    assert "break-before: page" in print_rules
    assert re.search(r"tr, th, td, figure, \.chart[^{]*\{\s*break-inside: avoid", print_rules)
    assert "thead { display: table-header-group; }" in print_rules
    assert ".modebar" in print_rules and "display: none" in print_rules
    # no chart controls, and every chart at a fixed size within an A4 page's text width
    # (210 mm less 2 x 15 mm margins = 180 mm = 680 CSS px at 96 px per inch, CSS 2.1)
    assert len(re.findall(r'"displayModeBar":\s*false', page)) == page.count("Plotly.newPlot(")
    sizes = re.findall(r'<div style="height:(\d+)px; width:(\d+)px;">', page)
    assert len(sizes) == page.count("Plotly.newPlot(")
    assert all(int(width) <= 680 for _height, width in sizes)
    drawing_row = 280 + 380  # a drawing beside its arrangement diagram
    assert drawing_row <= 680


def test_nothing_external_and_links_only_inside_the_document():
    hostile_url = "https://tracker.invalid/pixel.png"
    machines_text = CONSERVATOR_MACHINES.replace(
        'label = "Museum twin-disc"',
        f'label = "<img src={hostile_url}> <a href={hostile_url}>see</a>"')
    page, _derived, _findings = conservator_report(
        title=f"Report <link rel=stylesheet href={hostile_url}>",
        machines_text=machines_text, before=f"<img src={hostile_url}>")
    head_script = re.search(r"<script type=\"text/javascript\">.*?</script>", page, flags=re.S)
    assert "plotly.js v" in head_script.group(0)
    rest = page[:head_script.start()] + page[head_script.end():]
    tags = _Tags()
    tags.feed(re.sub(r"<script[^>]*>.*?</script>", "", rest, flags=re.S | re.I))
    assert {tag for tag, _ in tags.tags} & {"img", "link", "iframe", "object", "embed"} == set()
    for _tag, attributes in tags.tags:
        assert "src" not in attributes
        assert attributes.get("href", "#").startswith("#")
    # the charts' data: a user's text there is escaped, never a tag with an address
    decoded = rest.replace("\\u003c", "<").replace("\\u003e", ">").replace("\\u002f", "/")
    assert not re.search(r"<(img|a|link|script|iframe)\b[^>]*\b(src|href)\s*=\s*(?![\"']?#)",
                         decoded)
    assert f"&lt;img src={hostile_url}&gt;" in page  # shown as text, where the user put it


def test_hostile_titles_labels_and_sessions_are_escaped_in_the_verdict():
    machines_text = CONSERVATOR_MACHINES.replace('label = "Museum twin-disc"',
                                                 f"label = {json.dumps(ATTACK)}")
    page, _derived, _findings = conservator_report(title=ATTACK, machines_text=machines_text,
                                                   before=ATTACK, after="'><b>after</b>")
    assert "<script>alert" not in page.lower() and "<b>after</b>" not in page
    verdict = section(page, "Verdict")
    escaped = html.escape(ATTACK, quote=True)
    assert f"<strong>{escaped}</strong>, from &#x27;{escaped}&#x27; to " in verdict
    assert "to &#x27;&#x27;&gt;&lt;b&gt;after&lt;/b&gt;&#x27;" in verdict
    assert f"<h3>{escaped}</h3>" in section(page, "Machines")
    assert f"<h1>{escaped}</h1>" in page


@pytest.mark.parametrize(("title", "name"), [
    ("Museum twin-disc, before and after restoration",
     "museum-twin-disc-before-and-after-restoration-2026-02-03.html"),
    ("Café élève: Ölmühle", "cafe-eleve-olmuhle-2026-02-03.html"),
    ("../../etc/passwd", "etc-passwd-2026-02-03.html"),
    (ATTACK, "script-alert-1-script-2026-02-03.html"),
    ("   ", "ceiling-lab-report-2026-02-03.html"),
    ("日本語のレポート", "ceiling-lab-report-2026-02-03.html"),
    ("x" * 200, "x" * 60 + "-2026-02-03.html"),
])
def test_the_file_name_follows_the_title(title, name):
    assert report_file_name(title, date(2026, 2, 3)) == name
    assert re.fullmatch(r"[a-z0-9-]+\.html", name)


def test_the_report_page_names_the_file_after_its_title():
    # the page passes the title it shows to report_file_name (a download's name is not in
    # what AppTest sees; the browser test checks the downloaded name)
    source = (Path(__file__).resolve().parents[1] / "pages" / "report.py").read_text()
    assert "file_name=report.report_file_name(title)" in source


# --- printed by a real browser ---------------------------------------------------------------

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
CHROMIUM_FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--no-first-run"]
ARTIFACTS = Path(__file__).resolve().parents[1] / "tests" / "artifacts"
A4_TEXT_WIDTH_PX = 680  # 180 mm at 96 px per inch (CSS 2.1 reference pixel)


def _require_browser():
    if CHROMIUM is None:
        if os.environ.get("CEILING_LAB_REQUIRE_BROWSER") == "1":
            pytest.fail("chromium is required for the browser tests (apt-get install chromium)")
        pytest.skip("chromium is not installed")


@pytest.mark.browser
def test_the_report_prints_to_pdf_in_chromium(conservator, tmp_path):
    _require_browser()
    from playwright.sync_api import sync_playwright

    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    source = tmp_path / "report.html"
    source.write_text(conservator[0], encoding="utf-8")
    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=CHROMIUM, headless=True,
                                             args=CHROMIUM_FLAGS)
        try:
            page = browser.new_page(viewport={"width": A4_TEXT_WIDTH_PX, "height": 1000})
            failed = []
            page.on("requestfailed", lambda request: failed.append(request.url))
            requested = []
            page.on("request", lambda request: requested.append(request.url))
            page.goto(source.as_uri(), wait_until="load")
            page.emulate_media(media="print")
            # every chart and drawing drawn, nothing wider than an A4 page's text
            graphs = page.locator(".plotly-graph-div").count()
            assert graphs == conservator[0].count("Plotly.newPlot(") >= 6
            assert page.locator(".js-plotly-plot .main-svg").count() >= graphs
            assert page.evaluate("document.documentElement.scrollWidth") <= A4_TEXT_WIDTH_PX
            assert page.locator(".modebar").count() == 0 or not page.locator(
                ".modebar").first.is_visible()
            pdf = page.pdf(path=str(ARTIFACTS / "report-conservator.pdf"), format="A4",
                           print_background=True)
        finally:
            browser.close()
    assert requested == [source.as_uri()] and not failed  # nothing fetched from outside
    assert pdf.startswith(b"%PDF-")
    pages = len(re.findall(rb"/Type\s*/Page(?![s\w])", pdf))
    # verdict, machines, findings, charts (two pages), method: page breaks before each
    assert pages >= 6


def test_the_verdict_draws_before_against_after(conservator, report):
    verdict = section(conservator[0], "Verdict")
    assert verdict.count('<div class="chart">') == 1  # one machine with two sessions
    assert "After minus before at the same speed and humidity" in verdict
    assert '<div class="chart">' not in section(report, "Verdict")  # one session each
