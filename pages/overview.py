"""Overview: what the lab holds, the latest findings, and the next step."""

import streamlit as st

from engine.errors import InputError
from pages import _shared as shared

st.title("Ceiling Lab")
st.markdown(
    "How close does each machine come to what its geometry and speed allow, and why does it "
    "fall short? Ceiling Lab puts disc, belt and cylinder machines under one ceiling: the most "
    "current the air lets an insulating carrier deliver, corrected for air density."
)
shared.show_flash()
store = shared.store()
counts = shared.store_counts()  # counted once per state of the store
columns = st.columns(4)
columns[0].metric("Machines", counts["machines"])
columns[1].metric("Imports", counts["imports"])
columns[2].metric("Sessions", counts["sessions"])
columns[3].metric("Readings", f"{counts['readings']:,}")

if shared.active_lab() == "demo":
    st.info("You are looking at the **demonstration lab**: an invented science centre, school, "
            "workshop and open day, kept apart from your own lab. Explore it, then start your "
            "own; the demonstration lab stays available in the sidebar.")
    st.button("Start my own lab", type="primary", key="overview-own-lab",
              on_click=shared.open_lab, args=("own",))
elif store.has_demo() and store.may("remove_machines"):
    # Demonstration data that an earlier version loaded into the user's own lab.
    st.info("Your lab also holds demonstration data loaded by an earlier version of Ceiling Lab "
            "(marked as demo). The demonstration lab now lives apart, in the sidebar.")
    if st.button("Remove the demonstration data from my lab", key="overview-remove-demo"):
        st.session_state["overview-confirm-remove-demo"] = True
    if st.session_state.get("overview-confirm-remove-demo"):
        st.warning("This removes the machines, imports and readings marked as demo from your "
                   "lab; your own stay as they are. The demonstration lab in the sidebar keeps "
                   "its copy.")
        yes, no = st.columns(2)
        if yes.button("Yes, remove them", key="overview-remove-demo-yes"):
            st.session_state.pop("overview-confirm-remove-demo", None)
            try:
                removed = store.remove_demo()
                store.save_setting("demo", "removed")
            except InputError as error:
                shared.show_error(error)
                st.stop()
            shared.flash(f"Removed the demonstration data ({removed.get('readings', 0):,} "
                         "readings); the demonstration lab is still in the sidebar.")
            st.rerun()
        if no.button("Keep them", key="overview-remove-demo-no"):
            st.session_state.pop("overview-confirm-remove-demo", None)
            st.rerun()

st.subheader("Next steps")
steps = st.columns(3)
steps[0].page_link("pages/machines.py", label="Describe a machine", icon=":material/settings:")
steps[0].caption("Its carrier kind and sizes, in any unit.")
steps[1].page_link("pages/readings.py", label="Import readings", icon=":material/upload_file:")
steps[1].caption("Meter and tachometer log, with a humidity log if you have one.")
steps[2].page_link("pages/compare.py", label="Compare machines", icon=":material/monitoring:")
steps[2].caption("Efficiency, charge per revolution and humidity on one screen.")

st.subheader("Latest findings")
if counts["readings"] == 0:
    st.write("No readings yet. Import a readings file to see each machine against its ceiling.")
else:
    summary = shared.lab_summary()  # findings of every machine and session, kept
    machines = store.machines().by_id()
    shared.show_findings(summary.findings, machines, key="overview-findings")
    shared.undescribed_warning(machines, summary)
    st.caption("One row per machine and session. Efficiency is the measured current over the "
               "ceiling. Flagged readings are kept but left out of the fits; the Readings and "
               "Sessions pages show them.")
