"""Planner: a machine's ceiling against speed and air density, and the inverse questions."""

import numpy as np
import streamlit as st

from engine.air import (
    REFERENCE_TEMPERATURE_K,
    pressure_for_relative_density,
    pressure_from_altitude,
)
from engine.ceiling import SIZES_HELD, ceiling_figures, size_for_current, speed_for_current
from engine.errors import InputError
from engine.figures import planner_curve
from engine.units import parse_quantity, parse_speed, to_display
from pages import _shared as shared

st.title("Planner")
st.caption("What a machine could deliver: its ceiling against speed, at your altitude, and what "
           "speed or size reaches a target current.")

machine_file = shared.store().machines()
stored = {machine.id: machine for machine in machine_file.machines}
choice = st.radio("Machine", ["a stored machine", "a sketch"], horizontal=True,
                  key="planner-source", index=0 if stored else 1)
machine = None
try:
    if choice == "a stored machine":
        if not stored:
            st.info("No machines are stored yet: sketch one here, or add one on the Machines page.")
        else:
            machine_id = st.selectbox("Stored machine", list(stored), key="planner-machine",
                                      format_func=lambda key: f"{stored[key].label} ({key})")
            machine = stored[machine_id]
    if choice == "a sketch" or machine is None and not stored:
        kind = st.selectbox("Carrier", shared.carrier_choices(), key="planner-kind",
                            format_func=shared.CARRIER_LABELS.get)
        table = shared.machine_form_table(kind, "planner")
        table.update(shared.units_form(kind, f"planner-{kind}"))
        machine = shared.sketch_machine(table)
except InputError as error:
    shared.show_error(error)

if machine is not None:
    st.subheader("Air")
    air_mode = st.radio("Air density from", ["the lab's site", "an altitude",
                                             "a relative air density"],
                        horizontal=True, key="planner-air")
    pressure_pa, temperature_k = machine_file.site.pressure_pa, machine_file.site.temperature_k
    try:
        if air_mode == "an altitude":
            altitude = parse_quantity(st.text_input("Altitude", "1500 m", key="planner-altitude"),
                                      "length", "altitude")
            pressure_pa = float(pressure_from_altitude(altitude))
            temperature_k = REFERENCE_TEMPERATURE_K
        elif air_mode == "a relative air density":
            delta = st.slider("Relative air density", 0.5, 1.2, 0.83, 0.01,
                              key="planner-delta")
            temperature_k = REFERENCE_TEMPERATURE_K
            pressure_pa = float(pressure_for_relative_density(delta, temperature_k))

        speed_kind = "linear" if "rotation" not in machine.carrier.speed_kinds else "rotation"
        top_text = st.text_input("Speeds up to", "6 m/s" if speed_kind == "linear"
                                 else "600 rpm", key="planner-top-speed")
        top_speed, top_kind = parse_speed(top_text, "speeds up to")
        if top_kind not in machine.carrier.speed_kinds:
            raise InputError("speeds up to: this machine needs "
                             + ("a rotation rate such as '600 rpm'" if top_kind == "linear"
                                else "a belt speed such as '6 m/s'"))
        if not top_speed > 0:
            raise InputError("speeds up to: give a speed above zero")
        here = ceiling_figures(machine, top_speed, top_kind, pressure_pa, temperature_k)
        reference = ceiling_figures(machine, top_speed, top_kind)
        density = here["relative_air_density"]
        speeds = np.linspace(0.0, top_speed, 200)
        if top_kind == "rotation":
            st.plotly_chart(planner_curve(machine, speeds, sorted({1.0, round(density, 4)})),
                            key="planner-chart")
        else:
            st.info("The curve is drawn against rotation rate; give this belt a roller diameter "
                    "to see it. The figures below use the belt speed.")
        left, right = st.columns(2)
        left.metric(f"Ceiling at {top_text}", f"{here['ceiling_current_uA']:.3g} µA",
                    delta=f"{(density - 1) * 100:+.1f} % against sea-level reference air",
                    delta_color="off")
        right.metric("Charge density limit here", f"{here['charge_density_limit_uC_m2']:.3g} µC/m²",
                     help=f"Reference air: {reference['charge_density_limit_uC_m2']:.3g} µC/m²")

        st.subheader("What reaches a target current?")
        target_column, speed_column = st.columns(2)
        target_a = parse_quantity(target_column.text_input("Target current", "20 uA",
                                                           key="planner-target"),
                                  "current", "target current")
        needed = speed_for_current(machine, target_a, top_kind, pressure_pa, temperature_k)
        needed_text = (f"{needed:.3g} m/s" if top_kind == "linear"
                       else f"{to_display(needed, 'rotation_rate', 'rpm'):.4g} rpm")
        target_column.success(f"Speed needed for the ceiling to reach it: **{needed_text}**")
        at_text = speed_column.text_input("At the speed", top_text, key="planner-at-speed")
        at_speed, at_kind = parse_speed(at_text, "at the speed")
        what, size = size_for_current(machine, target_a, at_speed, at_kind, pressure_pa,
                                      temperature_k)
        shown = f"{size:.4g} m²" if what == "area per revolution" else f"{size * 100:.4g} cm"
        speed_column.success(f"{what.capitalize()} needed at {at_text}: **{shown}** "
                             f"({SIZES_HELD[machine.kind]}).")
    except InputError as error:
        shared.show_error(error)
