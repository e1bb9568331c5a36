"""Compare: every machine against its ceiling on one screen, with filters and the findings."""

import streamlit as st

from engine import analysis, figures, report
from engine import columns as col
from pages import _shared as shared

st.title("Compare")
derived = shared.load_derived()
machine_file = shared.store().machines()
machines = machine_file.by_id()
labels = {machine_id: machine.label for machine_id, machine in machines.items()}

if derived.empty:
    st.info("No readings yet. Import readings on the Readings page, or keep the demonstration "
            "lab, to compare machines here.")
    st.page_link("pages/readings.py", label="Import readings", icon=":material/upload_file:")
    st.stop()

described = derived[derived[col.MACHINE].isin(list(machines))]
shared.undescribed_warning(derived, machines)
if described.empty:
    st.info("No readings of a described machine yet: add the machines on the Machines page.")
    st.stop()

with st.container(border=True):
    machine_ids = [machine_id for machine_id in machines
                   if machine_id in set(described[col.MACHINE])]
    chosen = st.multiselect("Machines", machine_ids, default=machine_ids,
                            format_func=labels.get, key="compare-machines",
                            placeholder="Choose machines")
    sessions = list(dict.fromkeys(
        described.loc[described[col.MACHINE].isin(chosen)].sort_values(col.TIME)[col.SESSION]))
    # Sessions follow the machines: when the machines change, every session of the chosen
    # machines is selected again (a selection that would match nothing is never kept).
    if st.session_state.get("compare-machines-seen") != chosen:
        st.session_state["compare-machines-seen"] = list(chosen)
        st.session_state["compare-sessions"] = sessions
    chosen_sessions = st.multiselect("Sessions", sessions, key="compare-sessions",
                                     format_func=lambda name: name or "(no session)",
                                     placeholder="Choose sessions")
    first, second, third = st.columns([3, 3, 2])
    rh_known = described[col.RH].dropna()
    rh_range = (0, 100)
    if not rh_known.empty:
        low = int(rh_known.min() * 100)
        high = int(rh_known.max() * 100) + 1
        rh_range = first.slider("Relative humidity [%]", 0, 100,
                                (max(0, min(low, 100)), max(0, min(high, 100))),
                                key="compare-rh")
    times = described[col.TIME].dropna()
    date_range = None
    if not times.empty:
        first_day, last_day = times.min().date(), times.max().date()
        if first_day < last_day:
            date_range = second.slider("Dates", first_day, last_day, (first_day, last_day),
                                       key="compare-dates")
    show_flagged = third.toggle("Show flagged", False, key="compare-flagged",
                                help="Draw the flagged readings too (grey crosses); they stay "
                                     "out of the fits")
    reference_rh = third.number_input("Compare efficiency at RH [%]", 0, 100, 45,
                                      key="compare-ref-rh") / 100

derived = described
mask = derived[col.MACHINE].isin(chosen) & derived[col.SESSION].isin(chosen_sessions)
rh_percent = derived[col.RH] * 100
# The slider stops at 0 and 100 %: readings outside (flagged) stay with the nearest end.
mask &= (rh_percent.isna() | rh_percent.between(*rh_range)
         | ((rh_range[1] == 100) & (rh_percent > 100)) | ((rh_range[0] == 0) & (rh_percent < 0)))
if date_range is not None:
    days = derived[col.TIME].dt.date
    mask &= days.isna() | ((days >= date_range[0]) & (days <= date_range[1]))
shown = derived[mask]
if shown.empty:
    st.warning("No readings match these filters: widen the humidity range or pick more "
               "machines or sessions.")
    st.stop()

findings = analysis.findings(shown, machines, by_session=True, reference_rh=reference_rh)
colours = shared.colours_for(machine_file)
arguments = {"findings": findings, "machines": machines, "colours": colours,
             "show_flagged": show_flagged}
top_left, top_right = st.columns(2)
top_left.plotly_chart(figures.current_vs_speed(shown, **arguments), key="compare-current")
top_right.plotly_chart(figures.efficiency_vs_speed(shown, **arguments), key="compare-efficiency")
bottom_left, bottom_right = st.columns(2)
bottom_left.plotly_chart(figures.charge_per_rev(shown, **arguments), key="compare-charge")
bottom_right.plotly_chart(figures.efficiency_vs_humidity(shown, **arguments,
                                                        reference_rh_pct=reference_rh * 100),
                          key="compare-humidity")

if len(shown) > figures.MAX_DRAWN_POINTS:
    st.caption(f"The charts draw at most {figures.MAX_DRAWN_POINTS:,} evenly spaced readings per "
               "machine so that the browser stays quick; the fits and the table use all "
               f"{len(shown):,}.")
st.caption(shared.site_words(machine_file.site))
flagged = int((shown[col.FLAGS] != "").sum())
st.subheader("Findings")
st.caption(f"{len(shown):,} readings shown, {flagged:,} flagged and left out of the fits. "
           "One row per machine and session; intervals are 95 % confidence intervals.")
table = shared.show_findings(findings, machines, reference_rh, key="compare-findings")
st.download_button("Download these findings (CSV)", report.to_csv_bytes(table),
                   file_name="findings.csv", mime="text/csv", key="compare-download")
