"""Planner: a machine's ceiling against speed and air density, and the inverse questions."""

import numpy as np
import streamlit as st

from engine.air import (
    REFERENCE_TEMPERATURE_K,
    pressure_for_relative_density,
    pressure_from_altitude,
    relative_air_density,
)
from engine.ceiling import SIZES_HELD, ceiling_figures, size_for_current, speed_for_current
from engine.errors import InputError
from engine.figures import planner_curve
from engine.sparks import (
    DISCHARGE_ADVICE,
    gap_for_voltage,
    spark_breakdown,
    stored_energy,
    threshold_text,
    thresholds_reached,
)
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
        table = shared.machine_form_table(kind, "planner", examples_as_values=True)
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
        left.metric(f"Ceiling at {shared.plain(top_text)}", f"{here['ceiling_current_uA']:.3g} µA",
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
        measured = shared.measured_efficiency(machine.id) if choice == "a stored machine" \
            else None
        if measured is not None:
            efficiency, low, high, session = measured
            speeds_needed = speed_for_current(machine, target_a, top_kind, pressure_pa,
                                              temperature_k, [efficiency, high, low])

            def shown_speed(value: float) -> str:
                return (f"{value:.3g} m/s" if top_kind == "linear"
                        else f"{to_display(value, 'rotation_rate', 'rpm'):,.0f} rpm")

            target_column.info(
                f"At its measured efficiency ({efficiency * 100:.1f} %, 95 % interval "
                f"{low * 100:.1f} to {high * 100:.1f} %, from its latest session "
                f"'{shared.plain(session)}') it needs about "
                f"**{shown_speed(speeds_needed[0])}** ({shown_speed(speeds_needed[1])} to "
                f"{shown_speed(speeds_needed[2])}).")
        elif choice == "a stored machine":
            target_column.caption("With readings of this machine the planner also answers at "
                                  "its measured efficiency.")
        at_text = speed_column.text_input("At the speed", top_text, key="planner-at-speed")
        at_speed, at_kind = parse_speed(at_text, "at the speed")
        what, size = size_for_current(machine, target_a, at_speed, at_kind, pressure_pa,
                                      temperature_k)
        if what == "outer radius":  # the form asks for diameters
            what, size = "outer diameter", 2 * size
        shown = f"{size:.4g} m²" if what == "area per revolution" else f"{size * 100:.4g} cm"
        speed_column.success(f"{what.capitalize()} needed at {shared.plain(at_text)}: **{shown}** "
                             f"({SIZES_HELD[machine.kind]}).")
    except InputError as error:
        shared.show_error(error)

st.header("Spark length, voltage and stored energy")
st.caption("The breakdown voltage of an air gap by a named, published model, held to its range; "
           "and the energy your terminals and jars store at that voltage.")
site_density = float(relative_air_density(machine_file.site.pressure_pa,
                                          machine_file.site.temperature_k))
voltage_v = None
try:
    ask = st.radio("Ask for", ["the voltage of a spark length", "the spark length for a voltage"],
                   horizontal=True, key="planner-spark-ask")
    kind = st.radio("Electrodes", ["uniform field (plates, or balls much larger than the gap)",
                                   "two equal balls"], horizontal=True,
                    key="planner-spark-electrodes")
    electrodes = "spheres" if kind == "two equal balls" else "uniform"
    diameter = (parse_quantity(st.text_input("Ball diameter", "5 cm",
                                             key="planner-spark-diameter"),
                               "length", "ball diameter") if electrodes == "spheres" else None)
    if ask == "the voltage of a spark length":
        gap = parse_quantity(st.text_input("Spark length", "1 cm", key="planner-spark-gap"),
                             "length", "spark length")
    else:
        wanted = parse_quantity(st.text_input("Voltage", "30 kV", key="planner-spark-voltage"),
                                "voltage", "voltage")
        gap = gap_for_voltage(wanted, electrodes, diameter, site_density)
    spark = spark_breakdown(gap, electrodes, diameter, site_density)
    voltage_v = float(spark.breakdown_voltage_v)
    left, middle, right = st.columns(3)
    left.metric("Spark length", f"{gap * 1e3:.3g} mm")
    middle.metric("Breakdown voltage", f"{voltage_v / 1e3:.3g} kV")
    right.metric("Mean field in the gap", f"{float(spark.mean_field_v_m) / 1e6:.3g} MV/m")
    st.caption(f"Air of the lab's site: relative density {site_density:.3f}. "
               f"Model: {spark.model}. Valid for {spark.valid_range}.")
except InputError as error:
    shared.show_error(error)

st.subheader("Stored energy")
try:
    capacitance = parse_quantity(st.text_input("Capacitance of terminals and jars", "200 pF",
                                               key="planner-capacitance"),
                                 "capacitance", "capacitance")
    voltage_text = st.text_input("At the voltage", f"{voltage_v / 1e3:.3g} kV" if voltage_v
                                 else "30 kV", key="planner-energy-voltage",
                                 help="Defaults to the breakdown voltage above.")
    at_voltage = parse_quantity(voltage_text, "voltage", "voltage")
    energy = float(stored_energy(capacitance, at_voltage))
    st.metric("Stored energy ½ C V²", f"{energy:.3g} J",
              help=f"Charge C V = {capacitance * at_voltage * 1e6:.3g} µC")
    reached = thresholds_reached(capacitance, at_voltage)
    for threshold in reached:
        st.warning(f"Above {threshold_text(threshold)}: {threshold.meaning} "
                   f"({threshold.source}).")
    if not reached:
        st.info("Below the thresholds listed on the Safety and method page; a discharge still "
                "startles, and a startled person falls or drops things.")
    st.warning(DISCHARGE_ADVICE)
except InputError as error:
    shared.show_error(error)
