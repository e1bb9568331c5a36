"""Exports: the output table in display units, spreadsheets safe from formulas, the HTML report."""

import csv
import io
import math
import re
from datetime import date

import numpy as np
import openpyxl
import pandas as pd
import pytest

from engine import columns as col
from engine.report import (
    FORMULA_PREFIXES,
    OUTPUT_COLUMNS,
    TRACE_OUTPUT_COLUMNS,
    VOLTAGE_OUTPUT_COLUMNS,
    html_report,
    iso_text,
    neutralise_formula,
    neutralise_frame,
    output_frame,
    to_csv_bytes,
    to_xlsx_bytes,
)
from tests.test_figures import MACHINE_TABLES, make_derived, make_findings, make_machines

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
    assert report.count('class="plotly-graph-div"') == 4
    assert report.count("Plotly.newPlot(") == 4
    for title in ("Measured current and ceiling against speed", "Efficiency against speed",
                  "Charge per revolution against the ceiling per revolution",
                  "Efficiency against relative humidity"):
        assert title in report


def test_report_sections_method_references_and_safety(report):
    text = re.sub(r"\s+", " ", report)
    for heading in ("<h2>Machines</h2>", "<h2>Findings</h2>", "<h2>Comparisons</h2>",
                    "<h2>Notes</h2>", "<h2>Charts</h2>", "<h2>Method</h2>", "<h2>Safety</h2>"):
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


def test_report_tables_carry_machines_and_findings(report, report_inputs):
    _derived, findings, machines, _comparisons = report_inputs
    for machine in machines.values():
        assert f"<td>{machine.id}</td>" in report
    assert "Charged area per revolution [cm²]" in report
    # the six-disc stack's area per revolution is 410 cm^2 per disc, shown to 4 digits;
    # the twin disc's is pi (22^2 - 13^2) * 0.5 = 494.8 cm^2 (hand-worked)
    assert "<td>410.0</td>" in report and "<td>494.8</td>" in report
    assert report.count("<tr>") >= len(machines) + len(findings) + 2
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
    page = html_report(frame_of(one_reading()), findings, machines, "Units",
                       generated=date(2026, 2, 3))
    # hand-worked: fractions x 100 to one decimal, nC to three significant digits without
    # exponent, R^2 to three decimals, RH at half output to whole percent
    expected = ["<td>98</td>", "<td>23.8 (22.9 to 24.3)</td>", "<td>1391 (1376 to 1407)</td>",
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
