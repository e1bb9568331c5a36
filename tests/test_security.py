"""Safe output and hostile input (issue 6): exports, the HTML report, the source, the server.

- Spreadsheet exports neutralise every text cell that a spreadsheet would run as a formula
  (text starting with ``=``, ``+``, ``-``, ``@``, tab or carriage return; OWASP, "CSV
  Injection"), for notes, labels, machine ids and session names, checked end to end: a
  readings file and a machines file written here, read, derived and exported.
- The HTML report escapes every user text: no tag or event handler of the user's survives.
- No eval, exec, pickle, marshal, yaml.load or shell in the source tree.
- The server binds to this computer, keeps cross-site request protection and has an upload
  limit; the reader has a row limit; quantity strings have a length limit and refuse exponent
  towers and units of the wrong kind, all quickly and with messages.

Tests elsewhere that this file does not repeat: direct-frame neutralisation of the output
table (tests/test_report.py, ``test_csv_neutralises_each_leading_character_and_keeps_numbers``
and ``test_xlsx_neutralises_each_leading_character_and_has_no_formulas``); bundle path tricks,
extra and missing members, damaged members (``test_damaged_bundles_are_refused_and_store_
nothing``), a zip bomb refused before anything is unpacked
(``test_a_zip_bomb_is_refused_before_anything_is_unpacked``) and a member larger than it claims
(``test_a_member_larger_than_it_claims_is_refused``), all in tests/test_store.py; random bundle
bytes are fuzzed in tests/test_fuzz.py.
"""

from __future__ import annotations

import ast
import contextlib
import csv
import html.parser
import io
import json
import time
import tomllib
import zipfile
from datetime import date
from pathlib import Path

import openpyxl
import pandas as pd
import pytest

from engine import analysis, report
from engine.__main__ import main
from engine.errors import InputError
from engine.machines import parse_machines_text
from engine.readings import MAX_ROWS, ReadOptions, read_environment, read_readings
from engine.store import open_store
from engine.units import MAX_QUANTITY_LENGTH, parse_quantity, parse_speed, parse_tolerance

ROOT = Path(__file__).resolve().parents[1]

#: Leading characters that make a spreadsheet read a cell as a formula (OWASP, "CSV Injection").
LEADERS = ("=", "+", "-", "@", "\t", "\r")
PAYLOAD = "cmd|' /C calc'!A0"


def _toml_text(value: str) -> str:
    return json.dumps(value, ensure_ascii=False)  # JSON escapes are TOML basic-string escapes


# --- a lab full of hostile text, read from files like a user's ---------------------------------
def hostile_machines_text() -> str:
    """One machine per leader, its label and notes starting with that leader; one id '-dash'."""
    parts = []
    for number, leader in enumerate(LEADERS):
        parts.append(
            f"[[machine]]\nid = \"m{number}\"\nlabel = {_toml_text(leader + PAYLOAD)}\n"
            f"carrier = \"disc\"\nouter_diameter = \"46 cm\"\ninner_diameter = \"20 cm\"\n"
            f"notes = {_toml_text(leader + 'notes <b>bold</b>')}\n"
            f"material = {_toml_text(leader + 'glass')}\n")
    parts.append("[[machine]]\nid = \"-dash\"\nlabel = \"-dash\"\ncarrier = \"belt\"\n"
                 "width = \"5 cm\"\nroller_diameter = \"5 cm\"\n")
    return "\n".join(parts)


def hostile_readings_csv() -> bytes:
    """Readings whose notes, sessions and (unknown) machine ids start with each leader."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")  # quotes cells holding \r
    writer.writerow(["machine", "session", "time", "speed [rpm]", "current [uA]", "rh [%]",
                     "note"])
    minute = 0
    for number, leader in enumerate(LEADERS):
        for machine in (f"m{number}", "-dash", f"{leader}={PAYLOAD}"):
            for speed in (200, 300, 400):
                writer.writerow([machine, f"{leader}session {number}",
                                 f"2026-02-03T09:{minute // 60:02d}:{minute % 60:02d}",
                                 speed, speed / 100, 40 + number, f"{leader}{PAYLOAD}"])
                minute += 1
    return buffer.getvalue().encode("utf-8")


@pytest.fixture(scope="module")
def lab():
    machine_file = parse_machines_text(hostile_machines_text(), "hostile.toml")
    result = read_readings(hostile_readings_csv(), name="hostile.csv")
    derived = analysis.derive(result.frame, machine_file.by_id(), machine_file.site)
    findings = analysis.findings(derived, machine_file.by_id(), by_session=True)
    return machine_file, derived, findings


def _expected(value: str) -> str:
    return "'" + value if value.startswith(LEADERS) else value


def test_the_leaders_are_the_owasp_list():
    assert report.FORMULA_PREFIXES == LEADERS


def test_the_hostile_text_reaches_the_exports(lab):
    """The reader keeps the notes as written: all six leaders are there to be neutralised."""
    machine_file, derived, _findings = lab
    notes = set(derived["note"])
    assert notes == {leader + PAYLOAD for leader in LEADERS}
    assert {machine.label[0] for machine in machine_file.machines} >= set(LEADERS)
    # Machine ids and sessions are trimmed by the reader; "=", "+", "-", "@" stay in front.
    assert {value[0] for value in derived["session"]} == set(LEADERS[:4]) | {"s"}
    assert "-dash" in set(derived["machine"])


def test_csv_export_neutralises_notes_sessions_and_machine_ids(lab):
    _machine_file, derived, _findings = lab
    table = report.output_frame(derived)
    rows = list(csv.DictReader(io.StringIO(report.to_csv_bytes(table).decode("utf-8"),
                                           newline="")))
    assert len(rows) == len(derived) == 54
    for row, (_index, reading) in zip(rows, derived.iterrows(), strict=True):
        for column in ("machine", "session", "note"):
            assert row[column] == _expected(reading[column]), (column, row[column])
    _assert_no_formula_text([value for row in rows for value in row.values()])
    # every risky note was seen and changed: the test fails if neutralisation is skipped
    assert sum(row["note"].startswith("'") for row in rows) == len(rows)
    assert {row["machine"] for row in rows} >= {"'-dash", f"'={PAYLOAD}", f"'+={PAYLOAD}"}


def _assert_no_formula_text(cells):
    for cell in cells:
        if isinstance(cell, str) and cell.startswith((*LEADERS, "\n")):
            float(cell)  # only a number may start with '-' or '+' (then it is no formula)


def labelled_findings(findings, machine_file):
    """The findings with labels for machine ids, as the comparison page downloads them."""
    labels = {machine.id: machine.label for machine in machine_file.machines}
    return findings.assign(machine=[labels.get(value, value) for value in findings["machine"]])


def test_csv_export_of_findings_neutralises_labels(lab):
    machine_file, _derived, findings = lab
    table = labelled_findings(findings, machine_file)
    rows = list(csv.DictReader(io.StringIO(report.to_csv_bytes(table).decode("utf-8"),
                                           newline="")))
    labels = {row["machine"] for row in rows}
    for leader in LEADERS:
        assert "'" + leader + PAYLOAD in labels
    _assert_no_formula_text([value for row in rows for value in row.values()])


def test_xlsx_export_has_no_formula_cell_and_no_risky_text(lab):
    machine_file, derived, findings = lab
    data = report.to_xlsx_bytes(report.output_frame(derived),
                                findings=labelled_findings(findings, machine_file))
    book = openpyxl.load_workbook(io.BytesIO(data))
    assert book.sheetnames == ["readings", "findings"]
    texts = []
    for sheet in book.worksheets:
        for row in sheet.iter_rows():
            for cell in row:
                assert cell.data_type != "f", (sheet.title, cell.coordinate, cell.value)
                texts.append(cell.value)
    _assert_no_formula_text(texts)
    # XML reads a carriage return as a line feed (XML 1.0, section 2.11)
    notes = [value for value in texts if isinstance(value, str) and value.endswith(PAYLOAD)]
    assert {value[:2] for value in notes} >= {"'" + leader.replace("\r", "\n")
                                              for leader in LEADERS}


def test_machine_ids_and_sessions_with_tab_and_return_are_neutralised():
    """Tab and carriage return lead machine ids and sessions only from a store or bundle."""
    derived = pd.DataFrame({"machine": ["\tm", "\rm"], "session": ["\ts", "\rs"],
                            "note": ["", ""], "flags": ["", ""]})
    rows = list(csv.reader(io.StringIO(report.to_csv_bytes(
        report.output_frame(derived)).decode("utf-8"), newline="")))
    assert [row[0] for row in rows[1:]] == ["'\tm", "'\rm"]
    session = rows[0].index("session")
    assert [row[session] for row in rows[1:]] == ["'\ts", "'\rs"]


# --- the HTML report ----------------------------------------------------------------------------
ATTACKS = ["<script>alert(1)</script>", "<img src=x onerror=alert(2)>",
           "\"><svg onload=alert(3)>", "</title><script>alert(4)</script>",
           "</script><script>alert(5)</script>", "<iframe src=javascript:alert(6)>"]


class _Tags(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))


def _report_of(title, label, session, note, notes):
    machine_file = parse_machines_text(
        f"[[machine]]\nid = \"m1\"\nlabel = {_toml_text(label)}\ncarrier = \"disc\"\n"
        f"outer_diameter = \"46 cm\"\ninner_diameter = \"20 cm\"\nnotes = {_toml_text(note)}\n"
        f"material = {_toml_text(note)}\n", "report.toml")
    lines = ["machine,session,time,speed [rpm],current [uA],rh [%],note"]
    for number in range(12):
        lines.append(",".join(['m1', json.dumps(session), f"2026-02-03T09:{number:02d}:00",
                               str(200 + 20 * number), str(2 + number / 5),
                               str(30 + 3 * number), json.dumps(note)]))
    readings = read_readings("\n".join(lines).encode("utf-8"), name="report.csv").frame
    derived = analysis.derive(readings, machine_file.by_id(), machine_file.site)
    findings = analysis.findings(derived, machine_file.by_id(), by_session=True)
    comparisons = pd.DataFrame({"session": [session], "note": [note]})
    return report.html_report(derived, findings, machine_file.by_id(), title=title,
                              comparisons={session: comparisons}, notes=notes,
                              generated=date(2026, 2, 3))


@pytest.fixture(scope="module")
def benign_report():
    return _report_of("Lab report", "Twin disc", "morning", "dry day", ["a note", "another"])


@pytest.mark.parametrize("attack", ATTACKS)
def test_html_report_escapes_every_user_text(attack, benign_report):
    hostile = _report_of(f"Report {attack}", f"Disc {attack}", f"session {attack}",
                         f"note {attack}", [attack, f"second {attack}"])
    assert attack not in hostile
    # the charts' JSON writes "<" as \u003c: decoded, the labels in it are still escaped text
    # (plotly draws a subset of HTML in legends and hover labels)
    decoded = hostile.replace("\\u003c", "<").replace("\\u003e", ">").replace("\\u002f", "/")
    assert attack not in decoded
    benign_tags, hostile_tags = _Tags(), _Tags()
    benign_tags.feed(benign_report)
    hostile_tags.feed(hostile)
    # the same document structure: the user's text added no tag and no attribute
    assert [tag for tag, _ in hostile_tags.tags] == [tag for tag, _ in benign_tags.tags]
    for _tag, attributes in hostile_tags.tags:
        assert not any(name.startswith("on") for name in attributes)
    # the escaped text is shown where the user put it
    escaped = html.escape(attack, quote=True)
    assert f"<title>Report {escaped}</title>" in hostile
    assert f"<h1>Report {escaped}</h1>" in hostile
    assert f"<td>Disc {escaped}</td>" in hostile
    assert f"<p>{escaped}</p>" in hostile


# --- the source tree -----------------------------------------------------------------------------
def _source_files():
    files = sorted((ROOT / "engine").rglob("*.py")) + sorted((ROOT / "pages").glob("*.py"))
    return [*files, ROOT / "app.py"]


def dangerous_calls(source: str) -> list[str]:
    """What in a module would run user data as code or through a shell."""
    found = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            names = [alias.name for alias in node.names] + [getattr(node, "module", "") or ""]
            for name in names:
                if name.split(".")[0] in {"pickle", "cPickle", "marshal", "shelve", "dill",
                                          "cloudpickle", "joblib"}:
                    found.append(f"import {name}")
        if not isinstance(node, ast.Call):
            continue
        function = node.func
        name = function.id if isinstance(function, ast.Name) else (
            function.attr if isinstance(function, ast.Attribute) else "")
        owner = function.value.id if isinstance(function, ast.Attribute) and isinstance(
            function.value, ast.Name) else ""
        keywords = {keyword.arg: keyword.value for keyword in node.keywords}
        if isinstance(function, ast.Name) and name in {"eval", "exec", "compile",
                                                       "__import__"}:
            found.append(f"{name}()")
        elif name in {"eval", "read_pickle", "to_pickle", "unsafe_load", "full_load"}:
            found.append(f".{name}()")
        elif name == "query" and not (node.args and isinstance(node.args[0], ast.Constant)):
            found.append(".query() of a computed expression")
        elif owner == "yaml" and name == "load":
            found.append("yaml.load()")
        elif owner == "os" and name in {"system", "popen"}:
            found.append(f"os.{name}()")
        elif owner == "subprocess" and isinstance(keywords.get("shell"), ast.Constant) and \
                keywords["shell"].value:
            found.append("subprocess with shell=True")
        elif "shell" in keywords and not isinstance(keywords["shell"], ast.Constant):
            found.append("a computed shell= argument")
        elif name == "html" and owner in {"st", "components"}:
            found.append(f"{owner}.html()")
        if isinstance(keywords.get("unsafe_allow_html"), ast.Constant) and \
                keywords["unsafe_allow_html"].value:
            found.append("unsafe_allow_html=True")
    return found


def test_the_scanner_finds_what_it_looks_for():
    # a scanner that finds nothing in code written to be found would prove nothing
    bad = ("import pickle\nfrom marshal import loads\neval(text)\nexec(code)\nyaml.load(s)\n"
           "subprocess.run(c, shell=True)\nos.system(c)\nframe.query(user_text)\n"
           "pandas.read_pickle(path)\nst.markdown(text, unsafe_allow_html=True)\n"
           "components.html(page)\n")
    assert len(dangerous_calls(bad)) == 11
    assert dangerous_calls("re.compile('x')\nframe.query('a > 1')\nsubprocess.run([c])\n") == []


@pytest.mark.parametrize("path", _source_files(),
                         ids=lambda path: path.relative_to(ROOT).as_posix())
def test_no_eval_exec_pickle_or_shell_in_the_source(path):
    source = path.read_text(encoding="utf-8")
    assert dangerous_calls(source) == [], path
    assert "pickle" not in source and "marshal" not in source


def test_the_source_tree_is_scanned():
    names = {path.name for path in _source_files()}
    assert {"readers.py", "sqlite.py", "bundle.py", "report.py", "__main__.py", "app.py"} <= names
    assert len(names) >= 20


# --- the server's configuration ----------------------------------------------------------------
def test_server_config_binds_locally_with_xsrf_protection_and_an_upload_limit():
    config = tomllib.loads((ROOT / ".streamlit" / "config.toml").read_text(encoding="utf-8"))
    assert config["server"]["address"] == "127.0.0.1"
    assert config["server"]["enableXsrfProtection"] is True
    assert config["browser"]["gatherUsageStats"] is False
    upload_mb = config["server"]["maxUploadSize"]
    assert isinstance(upload_mb, int) and 1 <= upload_mb <= 1000
    # a page that fails shows a message, not the traceback (Streamlit's client option)
    assert config["client"]["showErrorDetails"] == "none"


# --- size limits of the reader -----------------------------------------------------------------
def test_the_row_limit_is_five_million_by_default():
    assert ReadOptions().max_rows == MAX_ROWS == 5_000_000


def test_a_file_above_the_row_limit_is_refused_quickly_with_a_message():
    rows = 200_000
    text = "machine,time,speed [rpm],current [uA]\n" + "d,,60,1\n" * rows
    start = time.perf_counter()
    with pytest.raises(InputError) as raised:
        read_readings(text.encode("utf-8"), ReadOptions(max_rows=1000), name="big.csv")
    assert time.perf_counter() - start < 3.0  # reading stops at the limit
    assert str(raised.value) == ("big.csv: has more than 1,000 data rows, the most read from one "
                                 "file; split it into smaller files")


def test_the_row_limit_holds_for_logs_and_workbooks():
    log = "time,rh [%]\n" + "".join(f"{number},40\n" for number in range(11))
    with pytest.raises(InputError, match="log.csv: has more than 10 data rows"):
        read_environment(log.encode("utf-8"), ReadOptions(max_rows=10), name="log.csv")
    book = openpyxl.Workbook()
    book.active.append(["machine", "speed [rpm]", "current [uA]"])
    for _ in range(11):
        book.active.append(["d", 60, 1])
    buffer = io.BytesIO()
    book.save(buffer)
    with pytest.raises(InputError, match="book.xlsx: has more than 10 data rows"):
        read_readings(buffer.getvalue(), ReadOptions(max_rows=10), name="book.xlsx")
    assert len(read_readings(buffer.getvalue(), ReadOptions(max_rows=11),
                             name="book.xlsx").frame) == 11


def far_cell_workbook(row: int, column: int) -> bytes:
    """A tiny workbook with one cell far away (XFD1048576 is the last cell of a sheet)."""
    book = openpyxl.Workbook()
    book.active.append(["machine", "time", "speed [rpm]", "current [uA]"])
    book.active.append(["d", "2026-02-03T09:00", 60, 1])
    book.active.cell(row=row, column=column, value="far")
    buffer = io.BytesIO()
    book.save(buffer)
    return buffer.getvalue()


def test_a_workbook_with_a_far_away_cell_is_refused_quickly():
    """Found by the fuzz tests: one cell at XFD1048576 used to make 17 billion cells."""
    data = far_cell_workbook(1_048_576, 16_384)
    assert len(data) < 10_000
    start = time.perf_counter()
    with pytest.raises(InputError, match=r"far.xlsx: sheet 'Sheet', row 1048576 has a cell "
                                         r"beyond column 1,000; delete the cells far"):
        read_readings(data, name="far.xlsx")
    assert time.perf_counter() - start < 3.0
    # a stray cell far below, within the width, is a row like any other (flagged, not lost)
    frame = read_readings(far_cell_workbook(5_000, 6), name="below.xlsx").frame
    assert len(frame) == 2 and frame["flags"].iloc[1] == "missing_value"


def test_an_infinite_cell_in_a_workbook_is_flagged_not_fatal():
    """Found by the fuzz tests: one overflowing cell made the whole sheet unreadable."""
    book = openpyxl.Workbook()
    book.active.append(["machine", "speed [rpm]", "current [uA]"])
    book.active.append(["d", 60, 1])
    book.active.append(["d", 60, 2])
    buffer = io.BytesIO()
    book.save(buffer)
    with zipfile.ZipFile(io.BytesIO(buffer.getvalue())) as source:
        members = {name: source.read(name) for name in source.namelist()}
    sheet = "xl/worksheets/sheet1.xml"
    members[sheet] = members[sheet].replace(b"<v>2</v>", b"<v>1e999</v>")
    damaged = io.BytesIO()
    with zipfile.ZipFile(damaged, "w") as target:
        for name, content in members.items():
            target.writestr(name, content)
    frame = read_readings(damaged.getvalue(), name="inf.xlsx").frame
    assert frame["flags"].tolist() == ["", "not_a_number"]
    assert frame["current_a"].isna().tolist() == [False, True]


# --- quantity strings ----------------------------------------------------------------------------
@pytest.mark.parametrize(("parse", "text", "message"), [
    # over-long: refused before any parsing
    (lambda text: parse_quantity(text, "length", "outer radius"), "1" * 70 + " mm",
     "outer radius: the value is 73 characters long; at most 64 are accepted"),
    (lambda text: parse_quantity(text, "length", "outer radius"),
     "1 " + "m" * MAX_QUANTITY_LENGTH, f"is {MAX_QUANTITY_LENGTH + 2} characters long"),
    # exponent towers, in every spelling
    (lambda text: parse_quantity(text, "length", "width"), "2 m^(10^10)", "a number or a power"),
    (lambda text: parse_quantity(text, "area", "area"), "1 m**2**2**2", "area needs an area"),
    (lambda text: parse_speed(text), "10**10**10 rpm", "a number or a power where a unit"),
    (lambda text: parse_quantity(text, "length", "width"), "1e99999 m", "too large"),
    # overflow on conversion to SI
    (lambda text: parse_quantity(text, "length", "width"), "1e308 km",
     "width: the number in '1e308 km' is too large"),
    (lambda text: parse_tolerance(text, "length", "t"), "1e308 km", "too large"),
    # a unit pint accepts but that makes no sense here
    (lambda text: parse_quantity(text, "current", "current"), "12 kg",
     "current needs a current, e.g. '12 uA', got '12 kg'"),
    (lambda text: parse_quantity(text, "rotation_rate", "speed"), "300 rpm*rad",
     r"speed needs a rotation rate, e.g. '300 rpm', got '300 rpm\*rad'"),
    (lambda text: parse_speed(text), "5 %/s", "needs a rotation rate .* or a linear speed"),
    (lambda text: parse_speed(text), "5 sr/s", "needs a rotation rate .* or a linear speed"),
    (lambda text: parse_quantity(text, "fraction", "sector_fill"), "2 rad",
     "sector_fill needs a plain number or a percentage"),
    (lambda text: parse_quantity(text, "length", "width"), "5 rad*cm", "width needs a length"),
    # malformed unit expressions that pint's own parser fails on
    (lambda text: parse_quantity(text, "length", "width"), "5 m)", "not a unit this tool knows"),
    (lambda text: parse_quantity(text, "length", "width"), "5 (m", "not a unit this tool knows"),
    (lambda text: parse_quantity(text, "length", "width"), "5 m/", "not a unit this tool knows"),
    (lambda text: parse_speed(text), "5 ()", "not a unit this tool knows"),
])
def test_hostile_quantities_are_refused_quickly_with_a_message(parse, text, message):
    start = time.perf_counter()
    with pytest.raises(InputError, match=message):
        parse(text)
    assert time.perf_counter() - start < 0.5


# --- the command line shows one message for each ------------------------------------------------
def _evaluate(tmp_path, machines_text: str, readings: bytes, suffix: str = ".csv"):
    machines = tmp_path / "machines.toml"
    machines.write_text(machines_text, encoding="utf-8")
    path = tmp_path / f"readings{suffix}"
    path.write_bytes(readings)
    # stdout with a binary buffer, as a terminal's: the command writes CSV bytes to it
    out, err = io.TextIOWrapper(io.BytesIO(), encoding="utf-8", newline=""), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main(["evaluate", str(machines), str(path)])
    out.flush()
    return status, out.buffer.getvalue().decode("utf-8"), err.getvalue()


GOOD_MACHINES = ("[[machine]]\nid = \"d\"\ncarrier = \"disc\"\nouter_diameter = \"46 cm\"\n"
                 "inner_diameter = \"20 cm\"\n")
GOOD_READINGS = b"machine,time,speed [rpm],current [uA]\nd,2026-02-03T09:00,300,5\n"


@pytest.mark.parametrize(("machines_text", "readings", "suffix", "message"), [
    (GOOD_MACHINES.replace("46 cm", "1" * 70 + " cm"), GOOD_READINGS, ".csv",
     "characters long"),
    (GOOD_MACHINES.replace("46 cm", "1 cm**10**10"), GOOD_READINGS, ".csv",
     "a number or a power"),
    (GOOD_MACHINES.replace("46 cm", "46 kg"), GOOD_READINGS, ".csv", "needs a length"),
    (GOOD_MACHINES.replace("46 cm", "46 cm)"), GOOD_READINGS, ".csv", "not a unit"),
    (GOOD_MACHINES, GOOD_READINGS.replace(b"[uA]", b"[kg]"), ".csv", "does not fit"),
    (GOOD_MACHINES, GOOD_READINGS.decode().encode("utf-32"), ".csv", "binary data"),
    (GOOD_MACHINES, far_cell_workbook(1_048_576, 16_384), ".xlsx", "beyond column"),
    (GOOD_MACHINES, b"PK\x03\x04" + bytes(200), ".xlsx", "not a readable XLSX"),
])
def test_the_command_line_shows_one_message_never_a_traceback(tmp_path, machines_text,
                                                              readings, suffix, message):
    status, out, err = _evaluate(tmp_path, machines_text, readings, suffix)
    assert status == 2
    assert out == ""
    assert err.startswith("error: ") and err.count("\n") == 1 and err.endswith("\n")
    assert message in err
    assert "Traceback" not in err


def test_the_command_line_exports_formula_text_neutralised(tmp_path):
    readings = (b"machine,session,time,speed [rpm],current [uA],note\n"
                b"d,=cmd|' /C calc'!A0,2026-02-03T09:00,300,5,@SUM(A1)\n")
    status, out, _err = _evaluate(tmp_path, GOOD_MACHINES, readings)
    assert status == 0
    (row,) = list(csv.DictReader(io.StringIO(out, newline="")))
    assert row["session"] == "'=cmd|' /C calc'!A0"
    assert row["note"] == "'@SUM(A1)"


# --- bundles --------------------------------------------------------------------------------------
def test_a_bundle_whose_member_names_climb_out_is_refused_whatever_the_spelling(tmp_path):
    """Path tricks not covered in tests/test_store.py: backslashes, drive letters, dots."""
    with open_store(tmp_path / "lab.sqlite3") as store:
        for name in ("..\\readings.csv", "C:/readings.csv", "./readings.csv",
                     "readings.csv/../../x", "readings.csv\\..\\x"):
            buffer = io.BytesIO()
            with zipfile.ZipFile(buffer, "w") as bundle:
                for member in ("manifest.json", "machines.toml", "readings.csv"):
                    bundle.writestr(name if member == "readings.csv" else member, b"x")
            with pytest.raises(InputError, match="not a file of a lab bundle"):
                store.import_bundle(buffer.getvalue())
        assert store.is_empty()


def _workbook_with_shared_strings(entries: int) -> bytes:
    """A tiny workbook whose table of texts holds ``entries`` entries that no cell uses."""
    book = openpyxl.Workbook()
    book.active.append(["machine", "time", "speed [rpm]", "current [uA]"])
    book.active.append(["m", "2026-01-01T10:00", 300, 1.0])
    buffer = io.BytesIO()
    book.save(buffer)
    source = zipfile.ZipFile(io.BytesIO(buffer.getvalue()))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as archive:
        for info in source.infolist():
            data = source.read(info.filename)
            if info.filename == "[Content_Types].xml":
                data = data.replace(b"</Types>", b'<Override PartName="/xl/sharedStrings.xml" '
                                    b'ContentType="application/vnd.openxmlformats-officedocument'
                                    b'.spreadsheetml.sharedStrings+xml"/></Types>')
            if info.filename == "xl/_rels/workbook.xml.rels":
                data = data.replace(b"</Relationships>", b'<Relationship Id="rId99" Type="http://'
                                    b'schemas.openxmlformats.org/officeDocument/2006/relationships'
                                    b'/sharedStrings" Target="sharedStrings.xml"/></Relationships>')
            archive.writestr(info, data)
        archive.writestr("xl/sharedStrings.xml", (
            '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n<sst xmlns="http://schemas.'
            f'openxmlformats.org/spreadsheetml/2006/main" count="{entries}" '
            f'uniqueCount="{entries}">' + "<si><t>x</t></si>" * entries + "</sst>").encode())
    return out.getvalue()


@pytest.mark.timeout(60)
def test_a_tiny_workbook_with_a_huge_table_of_texts_is_refused_at_once(tmp_path):
    hostile = _workbook_with_shared_strings(3_000_000)
    assert len(hostile) < 500_000  # under half a megabyte on disk
    with pytest.raises(InputError, match="far larger than its sheets could use"):
        read_readings(hostile, name="tiny.xlsx")
    # on the command line: one line, status 2
    path = tmp_path / "tiny.xlsx"
    path.write_bytes(hostile)
    machines = tmp_path / "m.toml"
    machines.write_text(GOOD_MACHINES, encoding="utf-8")
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        status = main(["evaluate", str(machines), str(path)])
    assert status == 2 and "far larger than its sheets could use" in err.getvalue()
    # A workbook with a table its sheets can use reads as before.
    assert len(read_readings(_workbook_with_shared_strings(50), name="small.xlsx").frame) == 1
