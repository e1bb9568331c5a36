"""Compare: every machine against its ceiling on one screen, with filters and the findings."""

import pandas as pd
import streamlit as st

from engine import columns as col
from engine import figures, report
from pages import _shared as shared

st.title("Compare")
# The lab's machine-session groups, their findings and a bounded set of readings to draw, kept
# beside the store: no page run reads every reading.
summary = shared.lab_summary()
machine_file = shared.store().machines()
machines = machine_file.by_id()
labels = {machine_id: machine.label for machine_id, machine in machines.items()}

if summary.readings == 0:
    st.info("No readings yet. Import readings on the Readings page, or keep the demonstration "
            "lab, to compare machines here.")
    st.page_link("pages/readings.py", label="Import readings", icon=":material/upload_file:")
    st.stop()

shared.undescribed_warning(machines, summary)
present = set(summary.groups["machine"])
machine_ids = [machine_id for machine_id in machines if machine_id in present]
if not machine_ids:
    st.info("No readings of a described machine yet: add the machines on the Machines page.")
    st.stop()

with st.container(border=True):
    chosen = st.multiselect("Machines", machine_ids, default=machine_ids,
                            format_func=labels.get, key="compare-machines",
                            placeholder="Choose machines")
    sessions = summary.sessions_in_run_order(chosen)
    # Sessions follow the machines: when the machines change, every session of the chosen
    # machines is selected again (a selection that would match nothing is never kept). Coming
    # back from another page, Streamlit has forgotten the sessions widget: all are selected.
    if st.session_state.get("compare-machines-seen") != chosen or \
            "compare-sessions" not in st.session_state:
        st.session_state["compare-machines-seen"] = list(chosen)
        st.session_state["compare-sessions"] = sessions
    chosen_sessions = st.multiselect("Sessions", sessions, key="compare-sessions",
                                     format_func=lambda name: name or "(no session)",
                                     placeholder="Choose sessions")
    first, second, third = st.columns([3, 3, 2])
    rh_lowest, rh_highest = summary.bounds(col.RH)
    rh_range = (0, 100)
    rh_whole = True  # the humidity filter keeps every reading
    if not pd.isna(rh_lowest):
        low = int(rh_lowest * 100)
        high = int(rh_highest * 100) + 1
        rh_bounds = (max(0, min(low, 100)), max(0, min(high, 100)))
        rh_range = first.slider("Relative humidity [%]", 0, 100, rh_bounds, key="compare-rh")
        rh_whole = rh_range[0] <= rh_bounds[0] and rh_range[1] >= rh_bounds[1]
    earliest, latest = summary.bounds(col.TIME)
    date_range = None
    if not pd.isna(earliest):
        first_day, last_day = earliest.date(), latest.date()
        if first_day < last_day:
            date_range = second.slider("Dates", first_day, last_day, (first_day, last_day),
                                       key="compare-dates")
            if date_range[0] <= first_day and date_range[1] >= last_day:
                date_range = None  # every day kept
    show_flagged = third.toggle("Show flagged", False, key="compare-flagged",
                                help="Draw the flagged readings too (grey crosses); they stay "
                                     "out of the fits")
    reference_rh = third.number_input("Compare efficiency at RH [%]", 0, 100, 45,
                                      key="compare-ref-rh") / 100

# Whole machine-session groups: their findings and counts come from the lab's summary; a
# humidity or date filter reads the readings of the chosen groups and fits them.
findings, shown_count, flagged = shared.findings_of(
    summary, machine_file, chosen, chosen_sessions, None if rh_whole else rh_range, date_range,
    reference_rh)
if shown_count == 0:
    st.warning("No readings match these filters: widen the humidity range or pick more "
               "machines or sessions.")
    st.stop()

colours = shared.colours_for(machine_file)
arguments = {"findings": findings, "machines": machines, "colours": colours,
             "show_flagged": show_flagged}
# The charts are drawn from the readings kept to draw (a bounded share of each group, filtered
# the same way); the fits and the table use every reading.
sample = summary.sample
in_sample = (sample[col.MACHINE].isin(chosen) & sample[col.SESSION].isin(chosen_sessions)
             ).to_numpy(dtype=bool)
in_sample = in_sample & shared.reading_filter(sample, None if rh_whole else rh_range, date_range)
drawn = figures.chart_sample(sample, rows=in_sample)
top_left, top_right = st.columns(2)
top_left.plotly_chart(figures.current_vs_speed(drawn, **arguments), key="compare-current")
top_right.plotly_chart(figures.efficiency_vs_speed(drawn, **arguments), key="compare-efficiency")
bottom_left, bottom_right = st.columns(2)
bottom_left.plotly_chart(figures.charge_per_rev(drawn, **arguments), key="compare-charge")
bottom_right.plotly_chart(figures.efficiency_vs_humidity(drawn, **arguments,
                                                        reference_rh_pct=reference_rh * 100),
                          key="compare-humidity")

if len(drawn) < shown_count:
    st.caption(f"The charts draw {len(drawn):,} of the {shown_count:,} readings, evenly spaced "
               "within each machine and session, so that the browser stays quick; the fits "
               "and the table use all of them.")
st.caption("Colour tells the machine; marker shape tells its sessions apart (hover a point "
           "for its session). " + shared.site_words(machine_file.site))
st.subheader("Findings")
st.caption(f"{shown_count:,} readings shown, {flagged:,} flagged and left out of the fits. "
           "One row per machine and session; intervals are 95 % confidence intervals.")
table = shared.show_findings(findings, machines, reference_rh, key="compare-findings")
st.download_button("Download these findings (CSV)", report.to_csv_bytes(table),
                   file_name="findings.csv", mime="text/csv", key="compare-download")
