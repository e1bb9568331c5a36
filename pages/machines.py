"""Machines: the lab's machines with their ceilings, a form to add or edit one, the TOML file."""

import pandas as pd
import streamlit as st

from engine.air import relative_air_density
from engine.carriers import SPEC_KEYS
from engine.ceiling import ceiling_figures
from engine.errors import InputError
from engine.figures import arrangement_diagram, carrier_drawing
from engine.machines import dump_machines, machine_from_table, parse_machines_text
from engine.report import describe_machine
from engine.units import parse_speed
from pages import _shared as shared

st.title("Machines")
shared.show_flash()
store = shared.store()
machine_file = store.machines()
site = machine_file.site

speed_text = st.text_input("Ceiling at the speed", "300 rpm", key="machines-speed",
                           help="A rotation rate ('300 rpm', '5 rev/s') or a belt speed ('6 m/s')")
try:
    speed, speed_kind = parse_speed(speed_text, "ceiling speed")
except InputError as error:
    shared.show_error(error)
    speed, speed_kind = None, None

if machine_file.machines:
    rows = []
    for machine in machine_file.machines:
        area = machine.carrier.area_per_rev_m2
        row = {
            "id": machine.id,
            "label": machine.label,
            "carrier": machine.kind,
            "ceiling [µA]": None,
            "area per rev [cm²]": None if area is None else area * 1e4,
            "units": machine.units,
            "how the units are counted": machine.unit_rule.text,
            "geometry": ", ".join(f"{key.replace('_', ' ')} {value}"
                                  for key, value in machine.spec.items()),
        }
        if speed is not None and speed_kind in machine.carrier.speed_kinds:
            row["ceiling [µA]"] = ceiling_figures(machine, speed, speed_kind, site.pressure_pa,
                                                  site.temperature_k)["ceiling_current_uA"]
        rows.append(row)
    st.dataframe(pd.DataFrame(rows), hide_index=True, key="machines-table",
                 column_config={"area per rev [cm²]": st.column_config.NumberColumn(format="%.1f"),
                                "ceiling [µA]": st.column_config.NumberColumn(format="%.3g"),
                                "how the units are counted":
                                    st.column_config.TextColumn(width="large"),
                                "geometry": st.column_config.TextColumn(width="large")})
    st.caption(f"{shared.site_words(site)} A blank ceiling means the machine needs the "
               "other kind of speed (rpm or m/s).")
else:
    st.info("No machines yet. Add one below, or import a machines file (TOML).")
if not site.spec and shared.active_lab() == "own":
    st.warning("**Where is your lab?** The ceiling depends on the air. Give the lab's altitude "
               "(or its barometer reading) in the tab **The lab's air** below; until then the "
               "reference atmosphere, 101.3 kPa and 20 °C, is used.")

if not shared.read_only_notice():
    st.download_button("Download the machines file", dump_machines(machine_file),
                       file_name="machines.toml", mime="application/toml",
                       key="machines-download-read-only")
    st.stop()

edit_tab, site_tab, file_tab = st.tabs(["Add or edit a machine", "The lab's air",
                                        "Machines file (TOML)"])

with site_tab:
    shared.site_form(store, site)

NEW = "(a new machine)"


class _NothingToDoError(Exception):
    """Nothing more to draw or save here (a new machine without sizes, a file imported)."""


def _delete(machine) -> None:
    """Delete a machine (its readings stay) and keep it for the undo button."""
    try:
        store.delete_machine(machine.id)
    except InputError as error:  # a callback: shown on the run that follows
        st.session_state.pop("machines-confirm-delete", None)
        shared.flash(str(error), error=True)
        return
    st.session_state["machines-undo"] = machine
    st.session_state.pop("machines-confirm-delete", None)
    st.session_state["machines-edit"] = NEW


with edit_tab:
    existing = {machine.id: machine for machine in machine_file.machines}
    undo = st.session_state.get("machines-undo")
    if undo is not None:
        note, put_back = st.columns([3, 1])
        note.info(f"Deleted machine '{shared.plain(undo.id)}'. Its readings stay in the lab.")
        if put_back.button(f"Undo: put '{undo.id}' back", key="machines-undo-button"):
            store.save_machine(undo)
            st.session_state.pop("machines-undo", None)
            shared.flash(f"Put machine '{undo.id}' back.")
            st.rerun()
    chosen = st.selectbox("Machine", [NEW] + list(existing), key="machines-edit",
                          format_func=lambda key: ("(a new machine)" if key == NEW else
                                                   f"{existing[key].label} ({key}): edit"))
    current = existing.get(chosen)
    kinds = list(SPEC_KEYS)
    kind = st.selectbox("Carrier", kinds, key=f"machines-kind-{chosen}",
                        index=kinds.index(current.kind) if current else 0,
                        format_func=shared.CARRIER_LABELS.get)
    left, right = st.columns(2)
    machine_id = left.text_input("Id (letters, digits, '-' and '_')",
                                 current.id if current else "", key=f"machines-id-{chosen}",
                                 disabled=current is not None, placeholder="e.g. gallery-twin")
    taken = current is None and machine_id.strip() in existing
    if taken:
        st.error(f"A machine with the id '{shared.plain(machine_id.strip())}' is already in the "
                 "lab. Give the "
                 "new machine another id, or choose that machine above to edit it.")
    label = right.text_input("Name shown on charts", current.label if current else "",
                             key=f"machines-label-{chosen}",
                             placeholder="e.g. Gallery twin-disc machine")
    table = shared.machine_form_table(kind, f"machines-{chosen}",
                                      dict(current.spec) if current and current.kind == kind
                                      else None)
    table.update(shared.units_form(kind, f"machines-{chosen}-{kind}", current))
    material = st.text_input("Material", current.material if current else "",
                             key=f"machines-material-{chosen}",
                             placeholder="acrylic, glass, polyester film")
    field_column, notes_column = st.columns([1, 2])
    breakdown_text = field_column.text_input(
        "Breakdown field of air", current.breakdown_field_text if current else "",
        key=f"machines-field-{chosen}", placeholder="3.0 MV/m (the default)")
    gap_text = field_column.text_input(
        "or air gap to the nearest conductor", current.air_gap_text if current else "",
        key=f"machines-air-gap-{chosen}", placeholder="e.g. 2 mm",
        help="Distance from the carrier to the inductors or neutralisers: the breakdown field "
             "then follows the gap (about 4.6 MV/m at 1 mm) instead of the flat 3 MV/m.")
    notes_text = notes_column.text_input("Notes", current.notes if current else "",
                                         key=f"machines-notes-{chosen}", max_chars=500)
    with st.expander("Tolerances (optional, one standard uncertainty)"):
        tolerance = {}
        tolerance_columns = st.columns(3)
        tolerance_keys = ([key for key in table if key in SPEC_KEYS[kind]]
                          + ["speed", "current", "breakdown_field"])
        for index, key in enumerate(tolerance_keys):
            stored_text = (current.tolerance_spec.get(key, "") if current else "")
            text = tolerance_columns[index % 3].text_input(
                key.replace("_", " "), stored_text, key=f"machines-tol-{chosen}-{kind}-{key}",
                placeholder="'1 mm' or '2 %'")
            if text.strip():
                tolerance[key] = text.strip()
    if breakdown_text.strip():
        table["breakdown_field"] = breakdown_text.strip()
    if gap_text.strip():
        table["air_gap"] = gap_text.strip()
    if notes_text.strip():
        table["notes"] = notes_text.strip()
    if label.strip():
        table["label"] = label.strip()
    if material.strip():
        table["material"] = material.strip()
    if tolerance:
        table["tolerance"] = tolerance
    sizes_given = any(key in table for key in SPEC_KEYS[kind])
    if current is None and not sizes_given:
        st.info("Fill in the sizes above, in any unit, to see the carrier drawn to scale, its "
                "units and its ceiling.")
    try:
        if current is None and not sizes_given:
            raise _NothingToDoError
        machine = machine_from_table({"id": machine_id.strip() or "new-machine", **table})
        st.info(shared.plain(f"In words: {describe_machine(machine)}."))
        drawing_column, figures_column = st.columns([3, 2])
        drawing_column.plotly_chart(carrier_drawing(machine), key=f"machines-drawing-{chosen}")
        if machine.kind == "disc":
            drawing_column.plotly_chart(arrangement_diagram(machine),
                                        key=f"machines-arrangement-{chosen}")
        area = machine.carrier.area_per_rev_m2
        figures_column.metric("Charged area per revolution",
                              "belt speed only" if area is None else f"{area * 1e4:.1f} cm²")
        figures_column.metric("Units", f"{machine.units:g}", help=machine.unit_rule.text)
        figures_column.caption(f"Units: {machine.unit_rule.text}.")
        if speed is not None and speed_kind in machine.carrier.speed_kinds:
            figures = ceiling_figures(machine, speed, speed_kind, site.pressure_pa,
                                      site.temperature_k)
            figures_column.metric(f"Ceiling at {shared.plain(speed_text)}",
                                  "{:.3g} µA".format(figures["ceiling_current_uA"]))
            figures_column.caption("{:g} x {:.3g} µA, the ceiling of one carrier's charged "
                                   "area (one unit)".format(figures["units"],
                                                           figures["single_carrier_ceiling_uA"]))
        field_mv_m = float(machine.breakdown_field_at(
            relative_air_density(site.pressure_pa, site.temperature_k))) / 1e6
        figures_column.metric("Breakdown field at the site", f"{field_mv_m:.3g} MV/m")
        if machine.air_gap_m is not None:
            figures_column.caption(
                f"With an air gap of {machine.air_gap_text} the breakdown field follows the "
                "uniform-field relation for air at that gap: short gaps hold more than the "
                "3 MV/m of centimetre gaps, so the ceiling is higher (see Safety and method).")
        save_column, delete_column = st.columns(2)
        if save_column.button("Save changes" if current else "Add this machine", type="primary",
                              key=f"machines-save-{chosen}", disabled=taken):
            if not machine_id.strip():
                raise InputError("give the machine an id first, e.g. 'school-belt'")
            store.save_machine(machine)
            shared.flash(f"Saved machine '{machine.id}'.")
            if current is None:
                shared.clear_widgets(NEW)  # the next new machine starts from a clean form
            st.rerun()
        if current and store.may("remove_machines") and \
                delete_column.button("Delete machine…", key=f"machines-delete-{chosen}"):
            st.session_state["machines-confirm-delete"] = current.id
        if current and st.session_state.get("machines-confirm-delete") == current.id:
            readings = int(shared.lab_summary().machine_counts().get(current.id, 0))
            what = (f"its {readings:,} readings stay in the lab, shown as readings of a machine "
                    "that is not described" if readings else "it has no readings")
            st.warning(f"Delete machine '{shared.plain(current.id)}' "
                       f"({shared.plain(current.label)})? Its description goes; "
                       f"{what}. You can undo this right after.")
            yes, no = st.columns(2)
            yes.button("Yes, delete it", key=f"machines-delete-yes-{chosen}",
                       on_click=_delete, args=(current,))
            no.button("Keep it", key=f"machines-delete-no-{chosen}",
                      on_click=st.session_state.pop, args=("machines-confirm-delete", None))
    except _NothingToDoError:
        pass
    except InputError as error:
        shared.show_error(error)

with file_tab:
    st.download_button("Download the machines file", dump_machines(machine_file),
                       file_name="machines.toml", mime="application/toml",
                       key="machines-download", disabled=not machine_file.machines)
    upload = st.file_uploader("Import a machines file", type=["toml"], key="machines-upload")
    if upload is not None:
        try:
            raw = upload.getvalue()
            try:
                text = raw.decode("utf-8-sig")
            except UnicodeDecodeError:
                raise InputError(f"{upload.name}: a machines file must be UTF-8 text") from None
            imported = parse_machines_text(text, upload.name)
            st.write(shared.plain(f"{len(imported.machines)} machines in {upload.name}: "
                                  + ", ".join(machine.id for machine in imported.machines)))
            fingerprint = (upload.name, upload.size)
            if st.session_state.get("machines-imported") == fingerprint:
                st.success(shared.plain(f"{upload.name} is imported. Choose another file to "
                                        "import more."))
                raise _NothingToDoError  # nothing more to do with this file
            replaced = [machine.id for machine in imported.machines if machine.id in existing]
            if replaced:
                st.warning("These will replace the stored machines of the same id: "
                           + shared.plain(", ".join(replaced)))
            take_air = False
            if imported.site.spec and dict(imported.site.spec) != dict(site.spec):
                theirs = ", ".join(f"{key} {value}" for key, value in imported.site.spec.items())
                ours = (", ".join(f"{key} {value}" for key, value in site.spec.items())
                        or "the reference atmosphere")
                take_air = st.checkbox(
                    shared.plain(f"Also take the file's air ({theirs}) instead of the lab's "
                                 f"({ours}); every ceiling and efficiency of the lab follows it"),
                    False, key="machines-import-air")
            if st.button("Import these machines", key="machines-import"):
                for machine in imported.machines:
                    store.save_machine(machine)
                if take_air or (imported.site.spec and not site.spec):
                    store.save_site(dict(imported.site.spec))
                st.session_state["machines-imported"] = fingerprint
                shared.flash(f"Imported {len(imported.machines)} machines.")
                st.rerun()
        except _NothingToDoError:
            pass
        except InputError as error:
            shared.show_error(error)
