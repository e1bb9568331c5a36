"""Compare: every machine against its ceiling on one screen, with filters and the findings."""

import pandas as pd
import streamlit as st

from engine import columns as col
from engine import figures, report
from pages import _shared as shared

st.title("Compare")
derived = shared.load_derived(shared.DASHBOARD_COLUMNS)
machine_file = shared.store().machines()
machines = machine_file.by_id()
labels = {machine_id: machine.label for machine_id, machine in machines.items()}

if derived.empty:
    st.info("No readings yet. Import readings on the Readings page, or keep the demonstration "
            "lab, to compare machines here.")
    st.page_link("pages/readings.py", label="Import readings", icon=":material/upload_file:")
    st.stop()

shared.undescribed_warning(derived, machines)
present = set(derived[col.MACHINE].unique())
machine_ids = [machine_id for machine_id in machines if machine_id in present]
if not machine_ids:
    st.info("No readings of a described machine yet: add the machines on the Machines page.")
    st.stop()

with st.container(border=True):
    chosen = st.multiselect("Machines", machine_ids, default=machine_ids,
                            format_func=labels.get, key="compare-machines",
                            placeholder="Choose machines")
    sessions = shared.dashboard_sessions_in_run_order(chosen)
    # Sessions follow the machines: when the machines change, every session of the chosen
    # machines is selected again (a selection that would match nothing is never kept).
    if st.session_state.get("compare-machines-seen") != chosen:
        st.session_state["compare-machines-seen"] = list(chosen)
        st.session_state["compare-sessions"] = sessions
    chosen_sessions = st.multiselect("Sessions", sessions, key="compare-sessions",
                                     format_func=lambda name: name or "(no session)",
                                     placeholder="Choose sessions")
    first, second, third = st.columns([3, 3, 2])
    rh_lowest, rh_highest = shared.dashboard_bounds(col.RH)
    rh_range = (0, 100)
    rh_whole = True  # the humidity filter keeps every reading
    if not pd.isna(rh_lowest):
        low = int(rh_lowest * 100)
        high = int(rh_highest * 100) + 1
        rh_bounds = (max(0, min(low, 100)), max(0, min(high, 100)))
        rh_range = first.slider("Relative humidity [%]", 0, 100, rh_bounds, key="compare-rh")
        rh_whole = rh_range[0] <= rh_bounds[0] and rh_range[1] >= rh_bounds[1]
    earliest, latest = shared.dashboard_bounds(col.TIME)
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

mask = derived[col.MACHINE].isin(chosen) & derived[col.SESSION].isin(chosen_sessions)
if not rh_whole:
    rh_percent = derived[col.RH] * 100
    # The slider stops at 0 and 100 %: readings outside (flagged) stay with the nearest end.
    mask &= (rh_percent.isna() | rh_percent.between(*rh_range)
             | ((rh_range[1] == 100) & (rh_percent > 100))
             | ((rh_range[0] == 0) & (rh_percent < 0)))
if date_range is not None:
    # Whole days in the times' own zone, compared as times (no date object per reading).
    time_column = derived[col.TIME]
    zone = getattr(time_column.dt, "tz", None)
    start = pd.Timestamp(date_range[0]).tz_localize(zone)
    stop = (pd.Timestamp(date_range[1]) + pd.Timedelta(days=1)).tz_localize(zone)
    mask &= time_column.isna() | ((time_column >= start) & (time_column < stop))
# Whole machine-session groups: their findings come from the cache of all readings.
whole_groups = rh_whole and date_range is None
selected = mask.to_numpy(dtype=bool)
shown_count = int(selected.sum())
# The readings shown are copied out only when their findings must be computed from them.
shown = derived if shown_count == len(derived) else None if whole_groups else derived[selected]
if shown_count == 0:
    st.warning("No readings match these filters: widen the humidity range or pick more "
               "machines or sessions.")
    st.stop()

findings = shared.findings_of(shown, chosen, chosen_sessions, whole_groups, reference_rh)
colours = shared.colours_for(machine_file)
arguments = {"findings": findings, "machines": machines, "colours": colours,
             "show_flagged": show_flagged}
# The charts are built from a bounded sample; the fits and the table use every reading.
drawn = figures.chart_sample(derived, rows=selected)
top_left, top_right = st.columns(2)
top_left.plotly_chart(figures.current_vs_speed(drawn, **arguments), key="compare-current")
top_right.plotly_chart(figures.efficiency_vs_speed(drawn, **arguments), key="compare-efficiency")
bottom_left, bottom_right = st.columns(2)
bottom_left.plotly_chart(figures.charge_per_rev(drawn, **arguments), key="compare-charge")
bottom_right.plotly_chart(figures.efficiency_vs_humidity(drawn, **arguments,
                                                        reference_rh_pct=reference_rh * 100),
                          key="compare-humidity")

if len(drawn) < shown_count:
    st.caption(f"The charts draw {len(drawn):,} evenly spaced readings so that the browser "
               f"stays quick; the fits and the table use all {shown_count:,}.")
st.caption("Colour tells the machine; marker shape tells its sessions apart (hover a point "
           "for its session). " + shared.site_words(machine_file.site))
flagged = int(((derived[col.FLAGS] != "").to_numpy(dtype=bool) & selected).sum())
st.subheader("Findings")
st.caption(f"{shown_count:,} readings shown, {flagged:,} flagged and left out of the fits. "
           "One row per machine and session; intervals are 95 % confidence intervals.")
table = shared.show_findings(findings, machines, reference_rh, key="compare-findings")
st.download_button("Download these findings (CSV)", report.to_csv_bytes(table),
                   file_name="findings.csv", mime="text/csv", key="compare-download")
