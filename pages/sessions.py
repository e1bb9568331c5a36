"""Sessions: one humidity-logged session over time, and two sessions of a machine compared."""

import pandas as pd
import streamlit as st

from engine import analysis, figures
from engine import columns as col
from engine.errors import InputError
from pages import _shared as shared

st.title("Sessions")
summary = shared.lab_summary()  # the lab's machine-session groups
machine_file = shared.store().machines()
labels = {machine.id: machine.label for machine in machine_file.machines}
if summary.readings == 0:
    st.info("No readings yet: import a session on the Readings page.")
    st.stop()

shared.undescribed_warning(labels, summary)
machine_ids = [machine_id for machine_id in labels
               if machine_id in set(summary.groups["machine"])]
if not machine_ids:
    st.info("No readings of a described machine yet: add the machines on the Machines page.")
    st.stop()
machine_id = st.selectbox("Machine", machine_ids, key="sessions-machine",
                          format_func=lambda key: labels.get(key, key))
# Sessions in the order they were run (first reading first), so "before" comes before "after";
# ties in name order.
groups = summary.groups[summary.groups["machine"] == machine_id]
first_times = groups.groupby("session")["time_min"].min()
sessions = [str(name) for name in first_times.sort_values(kind="stable",
                                                          na_position="last").index]
session = st.selectbox("Session", sessions, key="sessions-session",
                       format_func=lambda name: name or "(no session)")
# Only this session's readings, with the columns of its charts and tables, from the cache.
one_session = shared.load_sessions(machine_id, [session])
flagged = one_session[one_session[col.FLAGS] != ""]
# Charts from a bounded sample of the session; the fits use all its readings.
drawn = figures.chart_sample(one_session, figures.MAX_SESSION_CHART_POINTS)
st.plotly_chart(figures.session_timeline(drawn, machine_id,
                                         shared.colours_for(machine_file),
                                         label=labels.get(machine_id), session=session),
                key="sessions-timeline")
st.caption(f"{len(one_session):,} readings, {len(flagged):,} flagged (marked with x).")
if not flagged.empty:
    with st.expander(f"Flagged readings ({len(flagged)})"):
        st.dataframe(pd.DataFrame({
            "row in its file": flagged[col.ROW].to_numpy(),
            "time": [f"{value:%-d %b %Y, %H:%M:%S}" if value == value else shared.DASH
                     for value in flagged[col.TIME]],
            "what is wrong": col.flags_in_words(flagged[col.FLAGS]).to_numpy(),
            "note": flagged[col.NOTE].fillna("").to_numpy()}),
            hide_index=True, key="sessions-flagged")

if one_session[col.VOLTAGE_V].notna().any():
    st.subheader("Load line: current against terminal voltage")
    load_line = analysis.load_line_findings(one_session).iloc[0].to_dict()
    st.plotly_chart(figures.load_line_chart(drawn, machine_id, load_line,
                                            machine_file.by_id().get(machine_id), session,
                                            shared.colours_for(machine_file),
                                            label=labels.get(machine_id)),
                    key="sessions-load-line")
    if load_line["short_circuit_current_uA"] == load_line["short_circuit_current_uA"]:
        shown = st.columns(4)
        for column, (name, key, unit) in zip(shown, (
                ("Short-circuit current", "short_circuit_current", "uA"),
                ("Leakage resistance", "leakage_resistance", "GOhm"),
                ("Open-circuit voltage", "open_circuit_voltage", "kV"),
                ("Largest output power", "max_output_power", "W")), strict=True):
            value, interval = load_line[f"{key}_{unit}"], load_line[f"{key}_ci_{unit}"]
            shown_unit = {"uA": "µA", "GOhm": "GΩ"}.get(unit, unit)
            scale = 1.0
            if unit == "W" and value == value and abs(value) < 1:
                shown_unit, scale = "mW", 1e3
            column.metric(name, "n/a" if value != value else f"{value * scale:.3g} {shown_unit}",
                          help=None if interval is None else
                          f"95 % CI {interval[0] * scale:.3g} to {interval[1] * scale:.3g} "
                          f"{shown_unit}")
    for note in filter(None, load_line["load_line_notes"].split("; ")):
        st.caption(note)
    st.caption("Fit: least squares I = q·f + I0 − V / R_leak over this session's clean readings "
               "(speed a second term when it varies); the open-circuit voltage's interval is "
               "Fieller's, the power's by first-order propagation. Where the line bends, corona "
               "takes a share that grows with voltage.")

st.subheader("Two sessions compared")
if len(sessions) < 2:
    st.write("This machine has one session. Import another (for example after restoration) to "
             "compare them at the same speed and humidity.")
else:
    left, right = st.columns(2)
    first = left.selectbox("Before", sessions, index=0, key="sessions-a",
                           format_func=lambda name: name or "(no session)")
    second = right.selectbox("After", sessions, index=len(sessions) - 1, key="sessions-b",
                             format_func=lambda name: name or "(no session)")
    try:
        of_machine = shared.load_sessions(machine_id, [first, second]) if first != second \
            else one_session  # the two sessions' readings (the same one is refused below)
        comparison = analysis.compare_sessions(of_machine, machine_id, first, second)
        st.success(shared.plain(comparison["verdict"]))
        st.plotly_chart(figures.sessions_compared(of_machine, machine_id, first, second,
                                                  comparison, labels.get(machine_id)),
                        key="sessions-compared")
        metrics = st.columns(3)
        metrics[0].metric(f"Mean efficiency, {shared.plain(first)}",
                          f"{comparison['mean_a'] * 100:.1f} %")
        metrics[1].metric(f"Mean efficiency, {shared.plain(second)}",
                          f"{comparison['mean_b'] * 100:.1f} %",
                          delta=f"{comparison['raw_difference'] * 100:+.1f} points",
                          help="Mean over the clean readings; the findings tables show medians.")
        adjusted = comparison.get("adjusted_difference")
        if adjusted is not None and adjusted == adjusted:
            low, high = comparison["adjusted_difference_ci"]
            terms = comparison["adjusted_for"]
            metrics[2].metric(("At the same " + " and ".join(terms) if terms else "Adjusted")
                              + ", percentage points", f"{adjusted * 100:+.1f}",
                              help=f"95 % CI {low * 100:+.1f} to {high * 100:+.1f} percentage "
                              "points; "
                              f"adjusted for {', '.join(comparison['adjusted_for']) or 'nothing'}")
        for note in comparison.get("notes", []):
            st.caption(note)
    except InputError as error:
        shared.show_error(error)
