"""Readings: upload a meter/tachometer file and a humidity log, check them, save a session."""

import pandas as pd
import streamlit as st

from engine import analysis, report
from engine import columns as col
from engine.demo import DEMO_FOLDER
from engine.errors import InputError
from engine.readings import (
    ALIASES,
    ReadOptions,
    check_log_clock,
    default_session_name,
    merge_environment,
    name_sessions,
    unnamed_readings,
    workbook_sheets,
)
from engine.units import parse_quantity
from pages import _shared as shared

EXAMPLE = DEMO_FOLDER / "readings_belt.csv"

st.title("Readings")
shared.show_flash()
store = shared.store()
if not shared.read_only_notice():
    shared.stored_imports(store)
    st.stop()
machine_file = store.machines()
machine_ids = [machine.id for machine in machine_file.machines]

st.markdown("Upload the readings of one or more machines (CSV or XLSX). Columns: `machine`, "
            "`time`, `speed`, `current`, and any of `rh`, `temperature`, `pressure`, `session`, "
            "`voltage`, `note`. A unit in a header is used (`speed [rpm]`, `I/µA`), or in "
            "each cell (`12.3 uA`); loggers' notes above the header, summary lines and "
            "repeated headers are recognised. Everything the reader decides is listed below.")
upload = st.file_uploader("Readings file", type=["csv", "txt", "tsv", "xlsx"],
                          key="readings-upload")
log_upload = st.file_uploader("Humidity log (optional, its own clock)",
                              type=["csv", "txt", "tsv", "xlsx"], key="readings-log")

with st.expander("How the file is read", expanded=False):
    first, second, third = st.columns(3)
    separator = first.selectbox("Separator", ["detect", ",", ";", "tab"], key="readings-sep")
    decimal = second.selectbox("Decimal mark", ["detect", ".", ","], key="readings-decimal")
    encoding = third.selectbox("Encoding", ["detect", "utf-8", "utf-16", "cp1252", "latin-1"],
                               key="readings-enc")
    dates = first.selectbox("Dates such as 03/04/2026", ["detect", "day first", "month first"],
                            key="readings-dates")
    default_machine = second.selectbox("Machine, for a file without a machine column",
                                       ["(none)"] + machine_ids, key="readings-machine")
    tolerance_text = third.text_input("Log match within", "5 min", key="readings-tolerance")
    sheets = workbook_sheets(upload, name=upload.name) if upload is not None else []
    sheet_choice = first.selectbox("Sheet (workbooks)", ["detect", *sheets],
                                   key="readings-sheet", disabled=not sheets)
    st.caption("Columns of the file for each field (leave empty to detect); units for columns "
               "whose header has none.")
    mapping_columns = st.columns(4)
    mapping, units = {}, {}
    for index, field in enumerate(("machine", "time", "speed", "current", "rh", "temperature",
                                   "pressure", "session")):
        header = mapping_columns[index % 4].text_input(f"column for {field}", "",
                                                       key=f"readings-map-{field}")
        if header.strip():
            mapping[header.strip()] = field
    for index, field in enumerate(("speed", "current", "rh", "temperature")):
        unit = mapping_columns[index].text_input(f"unit of {field}", "",
                                                 key=f"readings-unit-{field}",
                                                 placeholder="rpm, uA, %, degC"
                                                 .split(", ")[index])
        if unit.strip():
            units[field] = unit.strip()

if upload is None:
    st.download_button("Download an example readings file", EXAMPLE.read_bytes(),
                       file_name="example-readings.csv", mime="text/csv",
                       key="readings-example")
    st.info("Choose a readings file to see how it is read. Accepted spellings of the columns: "
            + "; ".join(f"{field}: {', '.join(names[:3])}" for field, names in ALIASES.items()
                        if field in ("speed", "current", "rh", "temperature")))
    shared.stored_imports(store)
    st.stop()

# A new file starts its own import: its name and session follow the file, not the last one.
if st.session_state.get("readings-file") != (upload.name, upload.size):
    st.session_state["readings-file"] = (upload.name, upload.size)
    for stale in ("readings-name", "readings-session", "readings-save-again"):
        st.session_state.pop(stale, None)

options = ReadOptions(
    separator=None if separator == "detect" else ("\t" if separator == "tab" else separator),
    decimal=None if decimal == "detect" else decimal,
    encoding=None if encoding == "detect" else encoding,
    day_first=None if dates == "detect" else dates == "day first",
    machine=None if default_machine == "(none)" else default_machine,
    mapping=mapping or None, units=units or None,
    sheet=None if sheet_choice == "detect" else sheet_choice,
)
try:
    with st.status("Reading the file...", expanded=False) as status:
        result = shared.read_upload(upload, options)
        frame = result.frame
        environment = None
        log_messages: list[str] = []
        log_decisions: list[str] = []
        clock = None
        if log_upload is not None:
            status.update(label="Matching the humidity log by time...")
            log = shared.read_upload(log_upload, ReadOptions(day_first=options.day_first),
                                     kind="environment")
            environment = log.frame
            log_messages = log.messages
            log_decisions = log.decisions
            tolerance_s = parse_quantity(tolerance_text, "duration", "log match within")
            clock = check_log_clock(frame, environment, tolerance_s, log_upload.name)
        status.update(label=f"Read {len(frame):,} readings from {upload.name}"
                      + (f" and the log {log_upload.name}" if log_upload is not None else ""),
                      state="complete")
except InputError as error:
    shared.show_error(error)
    st.stop()

log_offset_s = 0.0
if clock is not None:
    for message in clock.messages:
        st.warning(message, icon=":material/schedule:")
    offsets = [0.0] + ([clock.suggested_offset_s] if clock.suggested_offset_s else [])
    log_offset_s = st.radio(
        "Humidity log's clock", offsets, key="readings-log-offset", horizontal=True,
        format_func=lambda seconds: "as recorded" if not seconds
        else f"moved by {seconds / 3600:+g} h", disabled=len(offsets) == 1)
try:
    with st.status("Matching and computing...", expanded=False) as status:
        if environment is not None:
            frame = merge_environment(frame, environment, tolerance_s, log_offset_s)
        status.update(label="Computing ceilings for the preview...")
        derived = analysis.derive(frame, machine_file.by_id(), machine_file.site)
        status.update(label=f"Ceilings computed for {len(frame):,} readings", state="complete")
except InputError as error:
    shared.show_error(error)
    st.stop()

left, right = st.columns(2)
with left:
    st.subheader("Detected")
    names = {"file_type": "file type", "separator": "separator", "decimal": "decimal mark",
             "encoding": "text encoding", "units_row": "row of units under the header",
             "header_row": "header on line", "sheet": "sheet", "time_format": "times written as",
             "day_first": "dates day first"}
    words = {"\t": "tab", ",": "comma (,)", ";": "semicolon (;)", ".": "point (.)",
             True: "yes", False: "no"}
    # (only True/False and marks are put into words: a header on line 1 is not "yes")
    shown_format = {names.get(key, key): words.get(value, value)
                    if isinstance(value, (bool, str)) else value
                    for key, value in result.format.items() if value not in (None, "")}
    st.dataframe(pd.DataFrame({"setting": list(shown_format),
                               "value": [str(value) for value in shown_format.values()]}),
                 hide_index=True, key="readings-format")
with right:
    st.subheader("Columns used")
    st.dataframe(pd.DataFrame({"field": list(result.mapping),
                               "column in the file": list(result.mapping.values()),
                               "unit": [result.units.get(field, "") for field in result.mapping]}),
                 hide_index=True, key="readings-mapping")
st.subheader("What the reader decided")
decisions = result.decisions + log_decisions
# Shown as table cells: text from the file (headers, notes) is never read as Markdown.
st.dataframe(pd.DataFrame({"decision": decisions}), hide_index=True, key="readings-decisions")
notes = [message for message in result.messages + log_messages if message not in decisions]
with st.expander(f"Other notes ({len(notes)})", expanded=False):
    st.dataframe(pd.DataFrame({"note": notes}), hide_index=True, key="readings-notes")

st.subheader("Check")
flags = derived[col.FLAGS]
counts = flags[flags != ""].str.split(";").explode().value_counts()
clean = int((flags == "").sum())
metrics = st.columns(3)
metrics[0].metric("Readings", f"{len(derived):,}")
metrics[1].metric("Clean", f"{clean:,}")
metrics[2].metric("Flagged (kept, left out of fits)", f"{len(derived) - clean:,}")
if not counts.empty:
    st.dataframe(pd.DataFrame({"what is wrong": [col.FLAG_WORDS.get(code, code)
                                                 for code in counts.index],
                               "readings": counts.to_numpy(),
                               "meaning": [col.FLAG_CODES.get(code, "") for code in counts.index],
                               "flag": counts.index}),
                 hide_index=True, key="readings-flag-counts")
    if "above_ceiling" in counts.index:
        st.warning("Some readings are above 100 % of the ceiling: almost always a unit mistake "
                   "(rev/s written as rpm, mA as uA) or a wrong size. Check those rows.")
output = report.output_frame(derived)
# The same values in the words and units of the other pages (display only).
preview = pd.DataFrame({
    "line": (result.lines if len(result.lines) == len(derived)
             else derived[col.ROW].to_numpy()),
    "machine": output["machine"],
    "session": output.get("session", ""),
    "time": output["time"],
    "speed [rpm]": output["speed_rev_s"] * 60,
    "belt speed [m/s]": output["belt_speed_m_s"],
    "current [µA]": output["current_uA"],
    "ceiling [µA]": output["ceiling_uA"],
    "efficiency [%]": output["efficiency"] * 100,
    "RH [%]": output["rh_pct"],
    "flags": output["flags"],
    "what is wrong": col.flags_in_words(output["flags"]),
    "note": output.get("note", ""),
})
show_only_flagged = st.toggle("Show only flagged readings", not counts.empty,
                              key="readings-only-flagged")
if preview["belt speed [m/s]"].isna().all():
    preview = preview.drop(columns=["belt speed [m/s]"])
table = preview[preview["flags"] != ""] if show_only_flagged else preview
# A dash where there is no value (the note keeps what a bad cell held), never "None".
number_formats = {name: "{:.4g}" for name in ("speed [rpm]", "belt speed [m/s]",
                                              "current [µA]", "ceiling [µA]")}
number_formats |= {"efficiency [%]": "{:.1f}", "RH [%]": "{:.1f}"}
st.dataframe(table.head(500).style.format(
                 {name: pattern for name, pattern in number_formats.items()
                  if name in table.columns}, na_rep=shared.DASH),
             hide_index=True, key="readings-preview")
st.caption(f"Showing {min(len(table), 500):,} of {len(table):,} rows.")

st.subheader("Save")
name = st.text_input("Name of this import", upload.name.rsplit(".", 1)[0],
                     key="readings-name", max_chars=120)
unnamed = unnamed_readings(frame)
if unnamed:
    st.markdown(f"**{unnamed:,} readings have no session.** Name the session they belong to, so "
                "that they never merge with another import's readings (before and after a "
                "restoration, one lesson and the next).")
    session_name = st.text_input("Session", default_session_name(frame, name or upload.name),
                                 key="readings-session", max_chars=120,
                                 placeholder="e.g. before restoration")
else:
    session_name = ""
    sessions_found = sorted(set(frame[col.SESSION].astype("str")))
    st.caption(f"Sessions in the file: {shared.plain(', '.join(sessions_found[:12]))}"
               + (" ..." if len(sessions_found) > 12 else ""))
saved = st.session_state.get("readings-saved")
fingerprint = (upload.name, upload.size)
if saved is not None and saved[0] == fingerprint:
    st.success(f"This file is saved as '{shared.plain(saved[1])}'. Choose another file to "
               "import more, or "
               "open the Compare page.")
    allowed = False
else:
    imports = store.imports()
    same = imports[(imports["source"] == upload.name) & (imports["rows"] == len(frame))]
    allowed = True
    if not same.empty:
        st.warning(f"A file named {shared.plain(upload.name)} with {len(frame):,} readings was "
                   "saved before "
                   f"(as '{same['name'].iloc[0]}'). Saving it again counts the same readings "
                   "twice in every finding.")
        allowed = st.checkbox("Save it again anyway", False, key="readings-save-again")
if st.button("Save the readings", type="primary", key="readings-save", disabled=not allowed):
    try:
        to_save = name_sessions(frame, session_name) if unnamed else frame
        with st.spinner(f"Saving {len(frame):,} readings..."):
            import_id = store.import_readings(to_save, name or upload.name, source=upload.name,
                                              environment=environment)
    except InputError as error:
        shared.show_error(error)
        st.stop()
    st.session_state["readings-saved"] = (fingerprint, name or upload.name)
    shared.flash(f"Saved {len(frame):,} readings as '{name}' (import {import_id})"
                 + (f", session '{session_name.strip()}'" if unnamed else "")
                 + ". Open the Compare page to see them against their ceilings.")
    st.rerun()

shared.stored_imports(store)
