"""What the pages share: the store, cached loaders, the machine form, safety text, formatting.

Pages call these and the engine; nothing here computes physics.
"""

from __future__ import annotations

import pandas as pd
import streamlit as st

from engine import analysis
from engine import columns as col
from engine.arrangements import ARRANGEMENT_LABELS, COLLECTOR_LABELS, delivery_sentence
from engine.carriers import CARRIER_KINDS, SPEC_KEYS
from engine.errors import InputError
from engine.figures import PALETTE
from engine.machines import Machine, MachineFile, dump_machines, machine_from_table
from engine.store import Store, default_store_path, open_store
from engine.store.cache import DerivedCache

# A page opened by a direct link as the first request after the server starts is run by
# Streamlit's older folder-based navigation (it sees the pages/ folder before app.py has called
# st.navigation), without the frame. Switch that off and run again through app.py.
try:
    from streamlit.runtime.pages_manager import PagesManager

    if PagesManager.uses_pages_directory:
        PagesManager.uses_pages_directory = False
        st.rerun()
except ImportError:  # a Streamlit without this internal: nothing to correct
    pass

SAFETY_SHORT = (
    "**High voltage.** Electrostatic generators make tens to hundreds of kilovolts, and charged "
    "capacitors can give a dangerous shock. Follow your institution's electrical safety rules "
    "and local codes: this tool computes, it does not make a set-up safe."
)

SAFETY_MARKDOWN = """
Electrostatic generators make tens to hundreds of kilovolts.

- **Capacitors store a dangerous charge.** With jars or other capacitors connected the stored
  energy can give a dangerous shock. Discharge every capacitor and terminal with an insulated
  grounding rod before touching the machine, and again after any pause.
- **Implanted medical devices.** Keep people with pacemakers or other implanted devices away from
  running machines and sparks.
- **Fire.** Sparks ignite flammable vapours and dust: no solvents, fuel or aerosols nearby.
- **Ozone.** Sparks and corona make ozone: ventilate closed rooms and limit long runs.
- **Instruments.** Protect meters, loggers and phones with a series resistor and a spark gap or
  gas-discharge protector; a direct spark destroys them.
- **X-rays.** Vacuum tubes driven at high voltage can emit X-rays: do not run them from these
  machines without shielding and the institution's approval.

Follow your institution's electrical safety rules, local codes and licensed practice. Ceiling Lab
computes; it does not make a set-up safe.
"""

#: Example values that the machine form starts with, one per geometry key.
FIELD_EXAMPLES = {
    "outer_diameter": "46 cm", "outer_radius": "", "inner_diameter": "30 cm",
    "inner_radius": "", "sector_fill": "1", "width": "5 cm", "roller_diameter": "5 cm",
    "loop_length": "", "radius": "", "diameter": "20 cm", "active_length": "40 cm",
    "area_per_rev": "0.12 m^2",
}
FIELD_HELP = {
    "outer_diameter": "of the charged zone; any unit: '46 cm', '18 in'",
    "inner_diameter": "where the charged zone (or the sectors) begins; '0 cm' for a disc "
                      "charged to its centre",
    "sector_fill": "fraction of the annulus covered by sectors, 1 for none (0.55 or '55 %')",
    "width": "charged width of the belt",
    "roller_diameter": "of the roller the speed is read on; leave empty for a belt speed in m/s",
    "loop_length": "length of the belt loop, when the speed counts belt circulations",
    "diameter": "of the cylinder",
    "active_length": "charged length of the cylinder",
    "area_per_rev": "charged area per revolution, e.g. '0.12 m^2'",
}
CARRIER_LABELS = {"disc": "disc (twin-disc, multi-disc stack, single disc)",
                  "belt": "belt", "cylinder": "cylinder", "custom": "custom (area given)"}

@st.cache_resource(show_spinner=False)
def _open_store(path: str) -> Store:
    return open_store(path)


def store() -> Store:
    """The lab's store (one shared, thread-safe connection per database file)."""
    return _open_store(str(default_store_path()))


def form_fields(kind: str) -> list[str]:
    """Geometry keys the machine form shows for a carrier kind, diameters preferred."""
    hidden = {"outer_radius", "inner_radius", "radius"}
    return [key for key in SPEC_KEYS[kind] if key not in hidden]


def machine_form_table(kind: str, prefix: str, values: dict | None = None) -> dict:
    """Draw text inputs for a carrier kind's geometry; return the table they describe.

    Radii stored in an existing machine are shown as diameters' alternatives: the form keeps
    whatever key the machine used.
    """
    values = values or {}
    table: dict[str, object] = {"carrier": kind}
    keys = form_fields(kind)
    for stored in values:
        if stored in SPEC_KEYS[kind] and stored not in keys:
            keys[keys.index(stored.replace("radius", "diameter"))] = stored
    columns = st.columns(min(3, len(keys)))
    for index, key in enumerate(keys):
        default = str(values.get(key, FIELD_EXAMPLES.get(key, "") if not values else ""))
        with columns[index % len(columns)]:
            text = st.text_input(key.replace("_", " "), default, key=f"{prefix}-{kind}-{key}",
                                 help=FIELD_HELP.get(key.replace("radius", "diameter")))
        if text.strip():
            table[key] = text.strip()
    return table


#: The units choices of a disc machine, in the user's words.
UNIT_CHOICES = {
    **{name: label[0].upper() + label[1:] for name, label in ARRANGEMENT_LABELS.items()},
    "units": "I'll give the number of units myself",
    "counted": "Count carriers and charge loads per revolution (older machine files)",
}


def units_form(kind: str, prefix: str, current: Machine | None = None) -> dict:
    """Draw the inputs that set a machine's units; return the machines-file keys they give.

    A disc machine chooses its arrangement (and collectors, and the discs of a stack), or gives
    its units; other carriers give carriers N and charge loads per revolution k.
    """
    table: dict[str, object] = {}
    if kind == "disc":
        if current is not None and current.kind == "disc":
            start = current.arrangement or ("units" if current.units_given is not None
                                            else "counted")
        else:
            start = "twin-disc"
        choices = list(UNIT_CHOICES)
        choice = st.radio("How the discs are arranged", choices, index=choices.index(start),
                          format_func=UNIT_CHOICES.get, key=f"{prefix}-arrangement",
                          help="Sets the units: how many one-disc ceilings the machine can "
                               "deliver, by the trade's rules")
        if choice in ARRANGEMENT_LABELS:
            table["arrangement"] = choice
            collectors = list(COLLECTOR_LABELS)
            chosen_collectors = (current.collectors if current is not None
                                 and current.collectors in collectors else "fixed")
            table["collectors"] = st.radio(
                "Collectors", collectors, index=collectors.index(chosen_collectors),
                format_func=lambda name: COLLECTOR_LABELS[name].capitalize(), horizontal=True,
                key=f"{prefix}-collectors")
            if choice == "disc-stack":
                table["discs"] = int(st.number_input(
                    "Discs in the stack", 3, 1000,
                    current.discs if current is not None and current.discs else 6,
                    key=f"{prefix}-discs"))
            return table
        if choice == "units":
            table["units"] = float(st.number_input(
                "Units (one-disc ceilings the machine delivers)", 0.1, 10_000.0,
                float(current.units) if current is not None else 1.0, step=0.5,
                key=f"{prefix}-units"))
            return table
    count_column, factor_column = st.columns(2)
    table["carriers"] = int(count_column.number_input(
        "Carriers that deliver charge (N)", 1, 1000,
        current.carriers if current is not None else 1, key=f"{prefix}-n",
        help="Belts, cylinders or discs that each carry charge to the collectors"))
    table["collection_factor"] = float(factor_column.number_input(
        "Charge loads per revolution of each (k)", 0.01, 100.0,
        current.collection_factor if current is not None else 1.0, step=0.1,
        key=f"{prefix}-k", help="How many times each carrier is charged and discharged per "
                                "revolution; 1 unless you know better. Units = N x k."))
    return table


def sketch_machine(table: dict, machine_id: str = "sketch") -> Machine:
    """A machine from form values; raises InputError with the field named."""
    return machine_from_table({"id": machine_id, **table})


def colours_for(machine_file: MachineFile) -> dict[str, str]:
    """One colour per machine id, the same on every chart and after adding a machine.

    Colours follow the order the machines were added, so a new machine takes the next colour
    and the others keep theirs.
    """
    return {machine.id: PALETTE[number % len(PALETTE)]
            for number, machine in enumerate(machine_file.machines)}


def store_signature() -> tuple:
    """Changes whenever the store's content changes; keys the cached loaders.

    The imports (id, time stored, readings) and the machines file: cheap to read, also with
    millions of readings (no count over the readings table).
    """
    current = store()
    imports = current.imports()
    return (tuple(zip(imports["id"].tolist(), imports["created_at"].tolist(),
                      imports["rows"].tolist(), strict=True)),
            dump_machines(current.machines()))


#: Columns of the derived readings of the whole store that the Overview, Compare and Sessions
#: pages read (the derived cache reads only these from disk): the findings' and the comparison
#: charts' columns, and the time.
DASHBOARD_COLUMNS = (
    col.MACHINE, col.SESSION, col.TIME, col.FLAGS, col.SPEED_REV_S, col.BELT_SPEED_M_S,
    col.CURRENT_A, col.RH, col.EFFICIENCY, col.EFFICIENCY_U, col.CHARGE_PER_REV_C,
    col.RELATIVE_AIR_DENSITY,
)
#: Columns of one machine's readings on the Sessions page (timeline, load line, flagged).
MACHINE_COLUMNS = (
    *DASHBOARD_COLUMNS, col.ROW, col.ELAPSED_S, col.TEMPERATURE_K, col.VOLTAGE_V, col.NOTE,
    col.CEILING_A,
)

_last_signature: list[tuple] = []


def _forget_older(signature: tuple) -> None:
    """Drop the cached frames of an older state of the store, so that they free memory."""
    if _last_signature and _last_signature[0] != signature:
        derived_readings.clear()
        _group_findings.clear()
        _machine_readings.clear()
    _last_signature[:] = [signature]


# cache_resource, not cache_data: the frame is shared as it is, never serialised and copied on a
# rerun. Pages only read it (filters make new frames).
@st.cache_resource(show_spinner="Reading the derived readings...", max_entries=3)
def derived_readings(path: str, signature: tuple,  # noqa: ARG001 - cache key
                     columns: tuple[str, ...] | None = None) -> pd.DataFrame:
    """Stored readings with their derived columns, from the derived cache beside the store.

    Only ``columns`` are read (None: all). The cache derives each import once and keeps it
    until a machine or the site changes.
    """
    current = store()
    return DerivedCache(current).read(columns=columns, machine_file=current.machines())


def load_derived(columns: tuple[str, ...] | None = None) -> pd.DataFrame:
    """Derived readings of the whole store (cached until the store changes); do not modify it.

    Parameters
    ----------
    columns : tuple of str, optional
        Columns to read; None reads every column (the Report page's tables).
    """
    signature = store_signature()
    _forget_older(signature)
    return derived_readings(str(default_store_path()), signature, columns)


@st.cache_resource(show_spinner="Reading the machine's readings...", max_entries=2)
def _machine_readings(path: str, signature: tuple,  # noqa: ARG001 - cache key
                      machine_id: str) -> pd.DataFrame:
    current = store()
    return DerivedCache(current).read(columns=MACHINE_COLUMNS, machines=[machine_id],
                                      machine_file=current.machines())


def load_machine(machine_id: str) -> pd.DataFrame:
    """One machine's derived readings with the columns of :data:`MACHINE_COLUMNS`, in stored
    order (cached until the store changes); do not modify it."""
    signature = store_signature()
    _forget_older(signature)
    return _machine_readings(str(default_store_path()), signature, str(machine_id))


@st.cache_resource(show_spinner="Fitting speed and humidity...", max_entries=8)
def _group_findings(path: str, signature: tuple,
                    reference_rh: float) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Findings per machine and session of all readings, and each group's first reading."""
    derived = derived_readings(path, signature, DASHBOARD_COLUMNS)
    machine_file = store().machines()
    return (analysis.findings(derived, machine_file.by_id(), by_session=True,
                              reference_rh=reference_rh),
            analysis.group_first_rows(derived))


def findings_of(shown: pd.DataFrame, machine_ids, sessions, whole_groups: bool,
                reference_rh: float = 0.45) -> pd.DataFrame:
    """Findings per machine and session of the readings shown.

    When the filters keep whole machine-session groups (``whole_groups``), they are taken from
    the cached findings of all readings (:func:`engine.analysis.findings_of_groups`, the same
    values); otherwise computed from ``shown``.
    """
    machine_file = store().machines()
    if not whole_groups:
        return analysis.findings(shown, machine_file.by_id(), by_session=True,
                                 reference_rh=reference_rh)
    signature = store_signature()
    _forget_older(signature)
    by_session, first_rows = _group_findings(str(default_store_path()), signature,
                                             float(reference_rh))
    return analysis.findings_of_groups(by_session, first_rows, machine_file.by_id(),
                                       list(machine_ids), list(sessions))


def show_error(error: Exception) -> None:
    """Show an engine error as the message it carries."""
    st.error(str(error) if isinstance(error, InputError) else f"Something went wrong: {error}")


def carrier_choices() -> tuple[str, ...]:
    """Carrier kinds in the order the forms offer them."""
    return CARRIER_KINDS


def flash(message: str) -> None:
    """Keep a success message for the next run (a save is followed by st.rerun)."""
    st.session_state["_flash"] = message


def show_flash() -> None:
    """Show and forget the message kept by :func:`flash`."""
    message = st.session_state.pop("_flash", None)
    if message:
        st.success(message)


@st.cache_data(show_spinner="Fitting speed and humidity...", max_entries=16)
def _findings(path: str, signature: tuple, by_session: bool,
              reference_rh: float) -> pd.DataFrame:
    machine_file = store().machines()
    return analysis.findings(derived_readings(path, signature, DASHBOARD_COLUMNS),
                             machine_file.by_id(), by_session=by_session,
                             reference_rh=reference_rh)


def load_findings(by_session: bool = False, reference_rh: float = 0.45) -> pd.DataFrame:
    """Findings of the whole store (cached until the store changes; a small frame)."""
    signature = store_signature()
    _forget_older(signature)
    if by_session:  # the same table the Compare page starts from: computed once for both
        return _group_findings(str(default_store_path()), signature, float(reference_rh))[0]
    return _findings(str(default_store_path()), signature, by_session, reference_rh)


def _interval_text(interval, scale: float = 1.0) -> str:
    if interval is None or (isinstance(interval, float) and pd.isna(interval)):
        return ""
    low, high = interval
    return f"{low * scale:,.4g} to {high * scale:,.4g}".replace("e+0", "e")


def findings_table(findings: pd.DataFrame, labels: dict[str, str] | None = None,
                   reference_rh: float = 0.45) -> pd.DataFrame:
    """Findings in display units with plain column names (formatting only)."""
    labels = labels or {}
    rh_text = f"{reference_rh * 100:g} % RH"
    table = pd.DataFrame({
        "machine": [labels.get(machine, machine) for machine in findings["machine"]],
        "session": findings["session"].fillna("all"),
        "efficiency median [%]": findings["efficiency_median"] * 100,
        "units delivered": [delivery_sentence(observed, expected, basis) for
                            observed, expected, basis in zip(
                                findings["observed_units"], findings["units"],
                                findings["units_basis"], strict=True)],
        f"efficiency at {rh_text} [%]": findings["efficiency_at_reference_rh"] * 100,
        "humidity effect [% points per +10 % RH]": findings["humidity_slope_per_10pct"] * 100,
        "charge per revolution [nC]": findings["charge_per_rev_nC"],
        "95 % interval [nC]": [_interval_text(value) for value in
                               findings["charge_per_rev_ci_nC"]],
        "readings used": findings["readings_used"],
        "flagged": findings["readings_flagged"],
        "carrier": findings["carrier"].fillna("(not described)"),
        "notes": findings["notes"].fillna(""),
    })
    return table


def findings_formats(reference_rh: float = 0.45) -> dict:
    """Number formats for the columns of :func:`findings_table`."""
    return {
        "efficiency median [%]": st.column_config.NumberColumn(format="%.1f"),
        f"efficiency at {reference_rh * 100:g} % RH [%]":
            st.column_config.NumberColumn(format="%.1f"),
        "charge per revolution [nC]": st.column_config.NumberColumn(format="%.4g"),
        "humidity effect [% points per +10 % RH]": st.column_config.NumberColumn(format="%+.1f"),
    }


def machine_labels() -> dict[str, str]:
    """Machine id -> label."""
    return {machine.id: machine.label for machine in store().machines().machines}
