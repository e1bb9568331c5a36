"""What the pages share: the store, cached loaders, the machine form, safety text, formatting.

Pages call these and the engine; nothing here computes physics.
"""

from __future__ import annotations

import hashlib
import math
import re

import numpy as np
import pandas as pd
import streamlit as st

from engine import analysis
from engine import columns as col
from engine.air import relative_air_density
from engine.arrangements import ARRANGEMENT_LABELS, COLLECTOR_LABELS, delivery_sentence
from engine.carriers import CARRIER_KINDS, SPEC_KEYS
from engine.demo import demo_lab_path, open_demo_lab
from engine.errors import InputError
from engine.figures import PALETTE
from engine.machines import (
    Machine,
    MachineFile,
    dump_machines,
    machine_from_table,
    site_from_table,
)
from engine.store import Store, default_store_path, open_store
from engine.store import summary as summaries
from engine.store.base import is_server_location, store_location
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
    "inner_radius": "", "sector_fill": "1", "width": "5 cm",
    "roller_diameter": "5 cm", "loop_length": "", "radius": "", "diameter": "20 cm",
    "active_length": "40 cm",
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
def app_icon():
    """The browser tab's icon, drawn here (a spark between two balls): an icon by name would
    make the browser fetch it from a font server, and the app asks nothing of the internet."""
    from PIL import Image, ImageDraw

    icon = Image.new("RGBA", (64, 64), (0, 0, 0, 0))
    draw = ImageDraw.Draw(icon)
    draw.ellipse((2, 22, 22, 42), fill=(0, 114, 178, 255))
    draw.ellipse((42, 22, 62, 42), fill=(0, 114, 178, 255))
    draw.line([(22, 32), (30, 24), (34, 40), (42, 32)], fill=(230, 159, 0, 255), width=5)
    return icon


#: Session key of the lab that is open: "own" (the user's) or "demo" (the demonstration lab).
LAB_KEY = "lab"
LAB_NAMES = {"own": "My lab", "demo": "Demonstration lab (invented)"}


@st.cache_resource(show_spinner=False)
def _open_store(location: str) -> Store:
    return open_store(location)


@st.cache_resource(show_spinner="Opening the demonstration lab...")
def _open_demo_store(path: str) -> Store:
    return open_demo_lab(path)


def _own_location() -> str:
    """The user's own lab: ``CEILING_LAB_DB`` (a file or a PostgreSQL URL), else the default
    file. Used as a cache key only, never shown (a URL may hold a password)."""
    return str(store_location())


def _own_store() -> Store:
    """The user's own lab, opened once per app process (an error opening it reaches the app's
    frame, which shows it: :func:`lab_failed`)."""
    return _open_store(_own_location())


def lab_failed(error: InputError) -> None:
    """What the app shows when the open lab cannot be opened or read: the message, what to do,
    and a way to the demonstration lab meanwhile."""
    show_error(error)
    if active_lab_chosen() == "demo":
        return
    st.markdown("Fix what the message says, then reload the page. A lab on a server may be "
                "down or out of reach for a moment: reload when it is back. Meanwhile the "
                "demonstration lab works.")
    if st.button("Open the demonstration lab", key="lab-open-demo-instead"):
        st.session_state[LAB_KEY] = "demo"
        st.rerun()


def active_lab_chosen() -> str | None:
    """The lab chosen in this browser session, if one was (no store is opened to tell)."""
    return st.session_state.get(LAB_KEY)


def active_lab() -> str:
    """Which lab is open: the one chosen in the sidebar; on a first start with an empty lab of
    the user's own, the demonstration lab."""
    chosen = st.session_state.get(LAB_KEY)
    if chosen in LAB_NAMES:
        return chosen
    if st.session_state.get("demo-declined"):
        return "own"
    own = _own_store()
    return "demo" if own.is_empty() and own.setting("lab-opened") != "yes" else "own"


def lab_path() -> str:
    """The open lab's cache key for the loaders: its store file, or for a server lab a digest
    of its URL (so that no password is kept even in a cache key). Never shown."""
    if active_lab() == "demo":
        return str(demo_lab_path(default_store_path()))
    location = _own_location()
    if is_server_location(location):
        return "server-" + hashlib.sha256(location.encode("utf-8")).hexdigest()[:24]
    return location


def store() -> Store:
    """The open lab's store (one shared, thread-safe connection per lab). A lab that cannot be
    opened stops the page with :func:`lab_failed` (the app's frame does the same for errors
    later in a page)."""
    try:
        if active_lab() == "demo":
            return _open_demo_store(lab_path())
        return _own_store()
    except InputError as error:
        lab_failed(error)
        st.stop()
        raise  # st.stop ends the run


def may_change() -> bool:
    """Whether the open lab's account may add and change things (a viewer account of a shared
    lab may not)."""
    return store().may("change")


def read_only_notice() -> bool:
    """Say so when the open lab cannot be changed with this account; returns whether it can."""
    if may_change():
        return True
    st.info("This lab is open **read-only** (a viewer account of a shared lab): you can look at "
            "everything and download it, but not add, change or remove anything. Ask the lab's "
            "keeper for a bench account to save readings.")
    return False


def lab_words() -> str:
    """The open lab for the sidebar: which lab, where (a server lab's database and host, never
    its password) and whether it is read-only."""
    if active_lab() == "demo":
        return LAB_NAMES["demo"]
    current = _own_store()
    if is_server_location(_own_location()):
        account = getattr(current, "account", "")
        words = f"Shared lab: {current.location}" + (f", as {account}" if account else "")
        return words + ("" if current.may("change") else " (read-only)")
    return LAB_NAMES["own"]


def lab_warnings() -> None:
    """Warnings about how the open lab is reached (a password written into its address)."""
    if active_lab() == "demo" or not is_server_location(_own_location()):
        return
    if getattr(_own_store(), "password_in_address", False):
        st.warning("The lab's password is written in CEILING_LAB_DB. It works, but anyone who "
                   "sees this computer's settings sees it: put it in the password file "
                   "~/.pgpass instead (README, 'A lab for a classroom').")


#: Seconds between two looks at a shared lab for what other benches saved.
FOLLOW_EVERY_S = 15


def follow_lab() -> None:
    """For a lab on a server: look every :data:`FOLLOW_EVERY_S` seconds whether another bench
    saved (or removed) something, and run the page again when one did, so that the teacher's
    Compare page shows every bench's readings as they are saved. A switch in the sidebar turns
    it off."""
    if active_lab() != "own" or not is_server_location(_own_location()):
        return
    following = st.toggle("Show new readings as benches save them", value=True,
                          key="lab-follow", help="Looks at the shared lab every "
                          f"{FOLLOW_EVERY_S} s; turn it off to keep the page still.")
    st.session_state["lab-seen"] = store_signature()
    if following:
        _look_for_changes()


@st.fragment(run_every=FOLLOW_EVERY_S)
def _look_for_changes() -> None:
    signature = store_signature()
    if st.session_state.get("lab-seen") != signature:
        st.session_state["lab-seen"] = signature
        st.rerun(scope="app")


def open_lab(name: str) -> None:
    """Open a lab ("own" or "demo") from now on in this browser session; once the user has
    opened their own lab, later starts open it too, even while it is still empty."""
    st.session_state[LAB_KEY] = name
    if name == "own":
        own = _own_store()
        if own.may("change") and own.setting("lab-opened") != "yes":
            own.save_setting("lab-opened", "yes")


def _switched() -> None:
    open_lab(st.session_state["lab-switch"])


def lab_switch() -> None:
    """The sidebar's choice of lab."""
    # A lab opened by a button elsewhere: the switch follows it.
    st.session_state["lab-switch"] = active_lab()
    st.radio("Lab", list(LAB_NAMES), format_func=LAB_NAMES.get, key="lab-switch",
             on_change=_switched, help="The demonstration lab is invented data kept apart from "
             "yours: switching to it or away never touches your machines.")


def clear_widgets(marker: str) -> None:
    """Forget the values of the widgets whose key contains ``marker`` (a form starts clean)."""
    for key in [key for key in st.session_state if isinstance(key, str) and marker in key]:
        del st.session_state[key]


def form_fields(kind: str) -> list[str]:
    """Geometry keys the machine form shows for a carrier kind, diameters preferred."""
    hidden = {"outer_radius", "inner_radius", "radius"}
    return [key for key in SPEC_KEYS[kind] if key not in hidden]


def machine_form_table(kind: str, prefix: str, values: dict | None = None,
                       examples_as_values: bool = False) -> dict:
    """Draw text inputs for a carrier kind's geometry; return the table they describe.

    Radii stored in an existing machine are shown as diameters' alternatives: the form keeps
    whatever key the machine used. A new machine's fields start empty with an example as
    placeholder; a sketch (``examples_as_values``) starts from the examples.
    """
    values = values or {}
    table: dict[str, object] = {"carrier": kind}
    keys = form_fields(kind)
    for stored in values:
        if stored in SPEC_KEYS[kind] and stored not in keys:
            keys[keys.index(stored.replace("radius", "diameter"))] = stored
    columns = st.columns(min(3, len(keys)))
    for index, key in enumerate(keys):
        example = FIELD_EXAMPLES.get(key, "")
        default = str(values.get(key, example if examples_as_values and not values else ""))
        with columns[index % len(columns)]:
            text = st.text_input(key.replace("_", " "), default, key=f"{prefix}-{kind}-{key}",
                                 placeholder=f"e.g. {example}" if example else "optional",
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
    """One colour per machine id for life: the same on every chart, after adding, removing or
    putting back a machine.

    A machine takes the first colour no other machine of the lab holds when it is first drawn,
    and the lab remembers it (a setting per machine id).
    """
    current = store()
    colours: dict[str, str] = {}
    taken: set[int] = set()
    unassigned = []
    for machine in machine_file.machines:
        stored = current.setting(f"colour:{machine.id}")
        if stored is not None and stored.isdigit():
            colours[machine.id] = PALETTE[int(stored) % len(PALETTE)]
            taken.add(int(stored) % len(PALETTE))
        else:
            unassigned.append(machine.id)
    writable = current.may("change")
    for machine_id in unassigned:
        free = [index for index in range(len(PALETTE)) if index not in taken]
        index = free[0] if free else len(colours) % len(PALETTE)
        taken.add(index)
        colours[machine_id] = PALETTE[index]
        if not writable:
            continue
        try:
            current.save_setting(f"colour:{machine_id}", str(index))
        except Exception:  # noqa: BLE001 - a lab that cannot be written keeps them for this run
            pass
    return colours


def site_words(site) -> str:
    """The air that the lab's ceilings use, in words."""
    where = plain(", ".join(f"{key} {value}" for key, value in site.spec.items()))
    return (f"Air for these ceilings: {site.pressure_pa / 1e3:.4g} kPa, "
            f"{site.temperature_k - 273.15:.1f} °C ("
            + (f"the lab's site: {where})." if where else
               "the reference atmosphere: no site given yet).")
            + " Readings with their own pressure and temperature use theirs.")


def site_form(current_store: Store, site) -> None:
    """The form for the lab's air: altitude or barometer reading, and temperature (for an
    account that may not set it, the air in words)."""
    if not current_store.may("change_site"):
        st.markdown(plain(site_words(site)))
        st.caption("In a shared lab the lab's keeper sets the air; every bench's ceilings use "
                   "it.")
        return
    st.markdown("The ceiling scales with the density of the air. Give where the lab is; "
                "readings that carry their own pressure and temperature use theirs.")
    spec = dict(site.spec)
    by = st.radio("Give the lab's", ["altitude", "pressure"], horizontal=True,
                  index=1 if "pressure" in spec else 0, key="site-by",
                  format_func={"altitude": "altitude above sea level",
                               "pressure": "barometer reading (absolute pressure)"}.get)
    left, right = st.columns(2)
    value = left.text_input("Altitude" if by == "altitude" else "Pressure",
                            spec.get(by, ""), key=f"site-{by}",
                            placeholder="e.g. 350 m" if by == "altitude" else "e.g. 97.2 kPa")
    temperature = right.text_input("Usual room temperature", spec.get("temperature", ""),
                                   key="site-temperature", placeholder="e.g. 20 degC (default)")
    new_spec = {}
    if value.strip():
        new_spec[by] = value.strip()
    if temperature.strip():
        new_spec["temperature"] = temperature.strip()
    try:
        preview = site_from_table(new_spec, "the lab's air")
        st.caption(f"That is {preview.pressure_pa / 1e3:.4g} kPa and "
                   f"{preview.temperature_k - 273.15:.1f} °C: a relative air density of "
                   f"{relative_air_density(preview.pressure_pa, preview.temperature_k):.3f} "
                   "against the reference atmosphere (101.3 kPa, 20 °C).")
        if st.button("Save the lab's air", key="site-save", disabled=new_spec == spec):
            current_store.save_site(new_spec)
            flash("Saved the lab's air; every ceiling now uses it.")
            st.rerun()
    except InputError as error:
        show_error(error)


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


@st.cache_data(show_spinner=False, max_entries=4)
def _store_counts(path: str, signature: tuple) -> dict[str, int]:  # noqa: ARG001 - cache key
    return store().counts()


def store_counts() -> dict[str, int]:
    """The store's counts (machines, imports, sessions, readings), counted once per state of
    the store: the distinct sessions are a count over every reading, too slow for each run of
    the Overview page with millions of readings. The signature (imports and machines) decides
    every count, so a cached count is never stale."""
    return _store_counts(str(lab_path()), store_signature())


#: Columns of the derived readings that the Overview, Compare and Sessions pages draw and filter
#: on (the charts' readings are kept per import with these columns).
DASHBOARD_COLUMNS = summaries.DASHBOARD_COLUMNS
#: Columns of one machine's readings on the Sessions page (timeline, load line, flagged).
MACHINE_COLUMNS = (
    *DASHBOARD_COLUMNS, col.ROW, col.ELAPSED_S, col.TEMPERATURE_K, col.VOLTAGE_V, col.NOTE,
    col.CEILING_A,
)

_last_signature: list[tuple] = []


def _forget_older(signature: tuple) -> None:
    """Drop the cached frames of an older state of the store, so that they free memory."""
    if _last_signature and _last_signature[0] != signature:
        _lab_summary.clear()
        _session_readings.clear()
        _filtered_findings.clear()
    _last_signature[:] = [signature]


# cache_resource, not cache_data: the summary is shared as it is, never serialised and copied on
# a rerun. Pages only read it (filters make new frames).
@st.cache_resource(show_spinner="Reading the lab's summary...", max_entries=2)
def _lab_summary(path: str, signature: tuple) -> summaries.LabSummary:  # noqa: ARG001 - key
    current = store()
    return DerivedCache(current).summary(current.machines())


def lab_summary() -> summaries.LabSummary:
    """The lab's machine-session groups, their findings and the readings kept to draw
    (:class:`engine.store.summary.LabSummary`), read once per state of the store from the
    files the derived cache keeps beside each import; do not modify it."""
    signature = store_signature()
    _forget_older(signature)
    return _lab_summary(str(lab_path()), signature)


def read_selection(current: Store, machine_ids, sessions,
                   columns: tuple[str, ...] | None = None, rows=None) -> pd.DataFrame:
    """The derived readings of some machines and sessions, read now from the derived cache of
    ``current`` and not kept (the Report page's files build from it on the click).

    The store is given, not looked up: a download's callable runs outside the page's run, where
    the session (and so the lab the user opened) is not known.

    Rows in stored order (those of the whole store's derived readings of these machines and
    sessions, "" for readings without a session), with a fresh index 0..n-1; ``columns`` (None:
    every column) and ``import_id``; ``rows`` keeps only the readings it is true for (an Arrow
    expression, see :meth:`engine.store.cache.DerivedCache.read`).
    """
    return DerivedCache(current).read(columns=columns,
                                      machines=[str(key) for key in machine_ids],
                                      sessions=[str(name) for name in sessions],
                                      machine_file=current.machines(), rows=rows)


@st.cache_resource(show_spinner="Reading the session's readings...", max_entries=2)
def _session_readings(path: str, signature: tuple,  # noqa: ARG001 - cache key
                      machine_id: str, sessions: tuple[str, ...]) -> pd.DataFrame:
    return read_selection(store(), [machine_id], sessions, MACHINE_COLUMNS)


def load_sessions(machine_id: str, sessions) -> pd.DataFrame:
    """The readings of some sessions of one machine with the columns of
    :data:`MACHINE_COLUMNS`, in stored order (cached until the store changes); do not modify
    it."""
    signature = store_signature()
    _forget_older(signature)
    return _session_readings(str(lab_path()), signature, str(machine_id),
                             tuple(str(name) for name in sessions))


def reading_filter(readings: pd.DataFrame, rh_range: tuple[float, float] | None = None,
                   date_range: tuple[object, object] | None = None) -> np.ndarray:
    """Which readings the Compare page's humidity and date filters keep (bool per reading).

    Parameters
    ----------
    readings : pandas.DataFrame
        Readings with ``rh`` and ``time``.
    rh_range : (float, float), optional
        Relative humidity kept [%], ends included; readings without humidity are kept, and the
        slider's ends at 0 and 100 % keep readings beyond them. None keeps every reading.
    date_range : (datetime.date, datetime.date), optional
        First and last day kept, whole days in the times' own zone; readings without a time
        are kept. None keeps every day.
    """
    kept = np.ones(len(readings), dtype=bool)
    if rh_range is not None:
        rh_percent = readings[col.RH].to_numpy(dtype=float) * 100
        with np.errstate(invalid="ignore"):
            kept &= (np.isnan(rh_percent)
                     | ((rh_percent >= rh_range[0]) & (rh_percent <= rh_range[1]))
                     | ((rh_range[1] == 100) & (rh_percent > 100))
                     | ((rh_range[0] == 0) & (rh_percent < 0)))
    if date_range is not None:
        # Whole days in the times' own zone, compared as times (no date object per reading).
        time_column = readings[col.TIME]
        zone = getattr(time_column.dt, "tz", None)
        start = pd.Timestamp(date_range[0]).tz_localize(zone)
        stop = (pd.Timestamp(date_range[1]) + pd.Timedelta(days=1)).tz_localize(zone)
        kept &= (time_column.isna() | ((time_column >= start)
                                       & (time_column < stop))).to_numpy(dtype=bool)
    return kept


@st.cache_data(show_spinner="Fitting speed and humidity...", max_entries=8)
def _filtered_findings(path: str, signature: tuple,  # noqa: ARG001 - cache key
                       machine_ids: tuple[str, ...], sessions: tuple[str, ...],
                       rh_range, date_range, reference_rh: float
                       ) -> tuple[pd.DataFrame, int, int]:
    current = store()
    columns = (*analysis.FINDINGS_INPUT_COLUMNS, col.TIME)
    # The humidity range is applied as the files are read (only the readings kept are made
    # into a frame: at 10^7 readings that halves the memory), the dates on the frame.
    rows = None if rh_range is None else summaries.humidity_condition(rh_range)
    readings = read_selection(current, machine_ids, sessions, columns, rows=rows)
    kept = reading_filter(readings, None, date_range)
    if not kept.all():
        readings = readings[kept].reset_index(drop=True)
    flagged = int(np.count_nonzero(~analysis._flag_free(readings)))  # noqa: SLF001
    found = analysis.findings(readings, current.machines().by_id(), by_session=True,
                              reference_rh=reference_rh)
    return found, len(readings), flagged


def findings_of(summary: summaries.LabSummary, machine_file: MachineFile, machine_ids,
                sessions, rh_range=None, date_range=None,
                reference_rh: float = analysis.REFERENCE_RH) -> tuple[pd.DataFrame, int, int]:
    """Findings per machine and session of the readings the filters keep, with the number of
    readings kept and of those flagged.

    Whole machine-session groups at the reference humidity the summary was made at come from
    the lab's summary (:meth:`engine.store.summary.LabSummary.findings_of`, the same values as
    fitting their readings); otherwise the kept readings are read from the derived cache and
    fitted (a small result, kept for the next run). ``summary`` and ``machine_file`` are the
    ones the page read.
    """
    if rh_range is None and date_range is None and reference_rh == analysis.REFERENCE_RH:
        chosen = summary.groups[summary.selected(machine_ids, sessions)]
        return (summary.findings_of(machine_file, machine_ids, sessions),
                int(chosen["readings"].sum()), int(chosen["flagged"].sum()))
    return _filtered_findings(str(lab_path()), store_signature(),
                              tuple(str(key) for key in machine_ids),
                              tuple(str(name) for name in sessions), rh_range, date_range,
                              float(reference_rh))


_MARKDOWN_MARKS = re.compile(r"([\\`*_{}\[\]()#+\-.!|<>~$:])")


def plain(text: object) -> str:
    """Text from a user's file or form, made safe for elements that render Markdown: every mark
    that could make a link, an image, emphasis, a heading or a colour directive is escaped, so
    the text shows as it was written and the browser fetches nothing."""
    return _MARKDOWN_MARKS.sub(r"\\\1", str(text))


def show_error(error: Exception) -> None:
    """Show an engine error as the message it carries (it may quote a file: shown as text)."""
    st.error(plain(error) if isinstance(error, InputError) else
             f"Something went wrong: {plain(error)}")


def carrier_choices() -> tuple[str, ...]:
    """Carrier kinds in the order the forms offer them."""
    return CARRIER_KINDS


def flash(message: str, error: bool = False) -> None:
    """Keep a message for the next run (a save is followed by st.rerun): a success, or an
    error (a callback's, which cannot show one itself)."""
    st.session_state["_flash"] = (message, error)


def show_flash() -> None:
    """Show and forget the message kept by :func:`flash`."""
    kept = st.session_state.pop("_flash", None)
    if kept:
        message, error = kept if isinstance(kept, tuple) else (kept, False)
        (st.error if error else st.success)(plain(message))


def load_findings() -> pd.DataFrame:
    """Findings per machine and session of the whole store (a small frame, kept until the store
    changes)."""
    return lab_summary().findings


DASH = "—"


def _number_text(value, pattern: str, scale: float = 1.0) -> str:
    """A number for a table cell, or a dash where there is none (never 'None' or 'nan')."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return DASH
    return format(value * scale, pattern)


def _interval_text(interval, scale: float = 1.0) -> str:
    if interval is None or (isinstance(interval, float) and pd.isna(interval)):
        return DASH
    low, high = interval
    return f"{low * scale:,.4g} to {high * scale:,.4g}".replace("e+0", "e")


def described_findings(findings: pd.DataFrame, machines) -> pd.DataFrame:
    """Findings of the machines the lab describes (readings of other machine ids are not
    findings: :func:`undescribed_warning` tells about them)."""
    return findings[findings["machine"].isin(list(machines))].reset_index(drop=True)


def findings_table(findings: pd.DataFrame, labels: dict[str, str] | None = None,
                   reference_rh: float = 0.45) -> pd.DataFrame:
    """Findings in display units and plain words, as text cells (formatting only): a dash
    where a figure could not be computed, the notes numbered and listed under the table."""
    labels = labels or {}
    rh_text = f"{reference_rh * 100:g} % RH"
    notes = findings["notes"].fillna("")
    return pd.DataFrame({
        "machine": [labels.get(machine, machine) for machine in findings["machine"]],
        "session": findings["session"].fillna("all sessions"),
        "efficiency, median [%]": [_number_text(value, ".1f", 100)
                                   for value in findings["efficiency_median"]],
        "units delivered": [delivery_sentence(observed, expected, basis) or DASH for
                            observed, expected, basis in zip(
                                findings["observed_units"], findings["units"],
                                findings["units_basis"], strict=True)],
        f"efficiency at {rh_text} [%]": [_number_text(value, ".1f", 100) for value in
                                         findings["efficiency_at_reference_rh"]],
        "change per +10 % RH [percentage points]": [_number_text(value, "+.1f", 100) for value in
                                           findings["humidity_slope_per_10pct"]],
        "charge per revolution [nC]": [_number_text(value, ",.4g")
                                       for value in findings["charge_per_rev_nC"]],
        "its 95 % interval [nC]": [_interval_text(value)
                                   for value in findings["charge_per_rev_ci_nC"]],
        "readings used": findings["readings_used"].astype("Int64").astype("str"),
        "flagged, left out": findings["readings_flagged"].astype("Int64").astype("str"),
        "notes": [f"see note {number}" if text else DASH
                  for number, text in enumerate(notes, 1)],
    })


def show_findings(findings: pd.DataFrame, machines, reference_rh: float = 0.45,
                  key: str = "findings") -> pd.DataFrame:
    """The findings table of the described machines, tall enough for every row, with its notes
    below it (table cells, never Markdown: notes quote text from files). Returns the table."""
    described = described_findings(findings, machines)
    labels = {machine_id: machine.label for machine_id, machine in dict(machines).items()}
    table = findings_table(described, labels, reference_rh)
    # An empty table still draws its header and an "empty" row: room for both.
    st.dataframe(table, hide_index=True, key=key,
                 height=min(35 * (max(len(table), 1) + 1) + 3, 620),
                 column_config={"units delivered": st.column_config.TextColumn(width="large")})
    notes = described["notes"].fillna("")
    if (notes != "").any():
        with st.expander("Notes on these findings"):
            st.dataframe(pd.DataFrame({
                "note": [str(number) for number, text in enumerate(notes, 1) if text],
                "machine and session": [f"{table['machine'][index]}, {table['session'][index]}"
                                        for index, text in enumerate(notes) if text],
                "what it says": [text for text in notes if text]}),
                hide_index=True, key=f"{key}-notes",
                column_config={"what it says": st.column_config.TextColumn(width="large")})
    return table


def undescribed_warning(machines, summary: summaries.LabSummary) -> None:
    """Readings of machine ids the lab does not describe: a warning with the fix, not findings.
    ``summary`` is the lab's summary the page read."""
    counts = summary.machine_counts()
    unknown = counts[~counts.index.astype("str").isin(list(machines)) & (counts > 0)]
    if unknown.empty:
        return
    listed = ", ".join(f"'{plain(machine_id)}' ({count:,} reading{'s' if count != 1 else ''})"
                       for machine_id, count in unknown.head(10).items())
    planted = (" In the demonstration lab this is a typing slip planted on purpose, to show "
               "the check." if active_lab() == "demo" else "")
    st.warning(f"Readings name machines the lab does not describe: {listed}. They have no "
               "ceiling and are not in the findings. Add a machine with that id on the Machines "
               "page, or correct the id in the file and import it again." + planted)


def machine_labels() -> dict[str, str]:
    """Machine id -> label."""
    return {machine.id: machine.label for machine in store().machines().machines}


def when(text: object) -> str:
    """A stored ISO time as people write it: '2 Dec 2026, 06:17' (local to the store: UTC)."""
    stamp = pd.to_datetime(text, errors="coerce", utc=True)
    return "" if pd.isna(stamp) else f"{stamp:%-d %b %Y, %H:%M} UTC"


def stored_imports(current_store: Store) -> None:
    """The lab's imports, with a removal that asks first and offers a copy to restore (for an
    account that may remove imports)."""
    imports = current_store.imports()
    st.subheader("Stored imports")
    if imports.empty:
        st.write("Nothing stored yet.")
        return
    table = pd.DataFrame({
        "import": imports["id"], "name": imports["name"], "file": imports["source"],
        "saved": [when(value) for value in imports["created_at"]],
        "readings": imports["rows"], "machines": imports["machines"],
        "sessions": imports["sessions"],
    })
    if "saved_by" in imports.columns:  # a shared lab: which account saved it
        table["saved by"] = imports["saved_by"]
    st.dataframe(table, hide_index=True, key="readings-imports")
    if not current_store.may("remove_imports"):
        return
    names = imports.set_index("id")
    remove = st.selectbox("Remove an import", [None] + imports["id"].tolist(),
                          format_func=lambda key: "(none)" if key is None else
                          f"{names.loc[key, 'name']} (import {key})", key="readings-remove")
    if remove is None:
        return
    row = names.loc[remove]
    st.warning(f"Removing '{plain(row['name'])}' deletes its {int(row['rows']):,} readings "
               f"(machines {plain(row['machines'] or '-')}; sessions "
               f"{plain(row['sessions'] or '-')}) and its humidity "
               "log from the lab. The machines stay. Keep a copy first: the bundle below puts "
               "the import back when restored on the Report page.")
    copy, yes, no = st.columns(3)
    copy.download_button("Keep a copy (lab bundle)",
                         lambda: current_store.export_bundle([int(remove)]),
                         file_name=f"import-{int(remove)}.zip", mime="application/zip",
                         key="readings-remove-copy")
    if yes.button("Yes, remove it", key="readings-remove-do"):
        try:
            current_store.delete_import(int(remove))
        except InputError as error:
            show_error(error)
            st.stop()
        flash(f"Removed import '{row['name']}' with its {int(row['rows']):,} readings.")
        st.rerun()
    no.button("Keep it", key="readings-remove-keep", on_click=st.session_state.pop,
              args=("readings-remove", None))


def measured_efficiency(machine_id: str) -> tuple[float, float, float, str] | None:
    """A machine's measured efficiency in its latest session with a speed fit: observed units
    over its units, with the 95 % interval of the observed units, and the session's name; None
    without a speed fit. (A restored machine is planned by what it does now.)"""
    findings = load_findings()
    rows = findings[findings["machine"] == machine_id]
    for _index, row in rows.iloc[::-1].iterrows():  # sessions in the order they were run
        observed, units, interval = (row["observed_units"], row["units"],
                                     row["observed_units_ci"])
        if isinstance(interval, tuple) and math.isfinite(observed) and units > 0:
            return (observed / units, interval[0] / units, interval[1] / units,
                    str(row["session"] or ""))
    return None


@st.cache_resource(max_entries=2, show_spinner=False)
def _read_upload(digest: str, name: str, options, kind: str, _data: bytes):  # noqa: ARG001
    from engine.readings import read_environment, read_readings

    reader = read_readings if kind == "readings" else read_environment
    return reader(_data, options, name=name)


def read_upload(upload, options, kind: str = "readings"):
    """An uploaded file read once per content and options (a rerun, a toggle, does not read
    it again): the engine's read result, shared, never changed by the pages."""
    import hashlib

    data = upload.getvalue()
    digest = hashlib.sha256(data).hexdigest()
    return _read_upload(digest, upload.name, options, kind, data)
