"""Report: results to file (CSV, XLSX), a self-contained HTML report, and the lab bundle."""

import streamlit as st

from engine import report
from engine.errors import InputError
from pages import _shared as shared

st.title("Report")
shared.show_flash()
store = shared.store()
machine_file = store.machines()
machines = machine_file.by_id()
# The lab's summary, shared with Overview, Compare and Sessions: enough for the choices, the
# count and the findings. The files read their readings on the click (below), so visiting
# Report adds little memory.
summary = shared.lab_summary()
imports = store.imports()

if summary.readings == 0:
    st.info("No readings to report yet. Import readings first, or restore a lab bundle below.")
else:
    labels = {machine.id: machine.label for machine in machine_file.machines}
    shared.undescribed_warning(machines, summary)
    present = set(summary.groups["machine"])
    machine_ids = [machine_id for machine_id in machines if machine_id in present]
    chosen = st.multiselect("Machines", machine_ids, default=machine_ids, key="report-machines",
                            format_func=lambda key: labels.get(key, key))
    sessions = summary.sessions_in_run_order(chosen)
    chosen_sessions = st.multiselect("Sessions", sessions, default=sessions,
                                     key="report-sessions",
                                     format_func=lambda name: name or "(no session)")
    title = st.text_input("Report title", "Ceiling Lab report", key="report-title",
                          max_chars=120)
    chosen_sessions = [str(name) for name in chosen_sessions]
    selected_count = int(summary.groups["readings"][summary.selected(chosen, chosen_sessions)]
                         .sum())
    if selected_count == 0:
        st.warning("Pick at least one machine and one session.")
    else:
        # Whole machine-session groups: the cached findings of all readings give them exactly.
        findings = shared.findings_of(summary, machine_file, chosen,
                                      chosen_sessions)[0]
        st.write(f"{selected_count:,} readings of {len(chosen)} machines in "
                 f"{len(chosen_sessions)} sessions.")
        chosen_machines = {key: machines[key] for key in chosen if key in machines}
        colours = shared.colours_for(machine_file)  # in the run: it reads the open lab
        st.caption("Each file is made when you click its button.")
        columns = st.columns(3)
        # Callables: each file is built on the click from the selection, read then from the
        # derived cache; the callables hold only the store and the choices, never the readings.
        # They run outside the page's run, so they are given the open lab's store.
        columns[0].download_button(
            "Results (CSV)", lambda: report.to_csv_bytes(report.output_frame(
                shared.read_selection(store, chosen, chosen_sessions))),
            file_name="ceiling-lab-results.csv", mime="text/csv", key="report-csv")
        columns[1].download_button(
            "Results and findings (XLSX)",
            lambda: report.to_xlsx_bytes(report.output_frame(
                shared.read_selection(store, chosen, chosen_sessions)), findings=findings),
            file_name="ceiling-lab-results.xlsx", key="report-xlsx",
            mime="application/vnd.openxmlformats-officedocument.spreadsheetml.sheet")
        columns[2].download_button(
            "HTML report", lambda: report.html_report(
                shared.read_selection(store, chosen, chosen_sessions), findings, chosen_machines,
                title, colours=colours).encode("utf-8"),
            file_name=report.report_file_name(title), mime="text/html", key="report-html",
            help="A document to file or print: the verdict first, the machines in words with "
                 "their drawings, the findings, the charts, the method and the references. "
                 "Open it in a browser and print it to PDF for a paper copy.")

st.subheader("Lab bundle")
st.caption("A zip of the machines file and every reading and humidity log, to move the lab to "
           "another copy of Ceiling Lab without loss.")
if not imports.empty:
    st.download_button("Download the lab bundle", store.export_bundle,
                       file_name="ceiling-lab-bundle.zip", mime="application/zip",
                       key="report-bundle")
bundle = (st.file_uploader("Restore a lab bundle", type=["zip"], key="report-bundle-upload")
          if shared.may_change() else None)
if bundle is not None:
    data = bundle.getvalue()
    try:
        preview = store.bundle_preview(data)
        replaced = preview["replaced"]
    except InputError as error:
        replaced = None
        shared.show_error(error)
    if replaced is not None and preview["already"]:
        st.info(f"{preview['already']} of the bundle's {preview['imports']} imports are in this "
                "lab already (same name, file and time saved): they are not added again.")
    if replaced is not None:
        confirmed = True
        if replaced:  # said before anything is replaced, as a machines-file import does
            st.warning(shared.plain(
                f"This bundle describes {len(replaced)} machine(s) of this lab differently: "
                f"{', '.join(replaced)}. Importing it replaces them with the bundle's."))
            confirmed = st.checkbox("Replace these machines with the bundle's",
                                    key="report-bundle-replace")
        if st.button("Import the bundle", key="report-bundle-import", disabled=not confirmed):
            try:
                new_ids = store.import_bundle(data, replace_machines=bool(replaced))
                shared.flash(f"Imported {len(new_ids)} imports from {bundle.name}.")
                st.rerun()
            except InputError as error:
                shared.show_error(error)
