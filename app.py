"""Ceiling Lab: the frame of the Streamlit app (placeholder until the dashboard lands)."""

import streamlit as st

from engine.carriers import CARRIER_KINDS
from engine.ceiling import ceiling_figures
from engine.errors import InputError
from engine.machines import machine_from_table
from engine.units import parse_speed

st.set_page_config(page_title="Ceiling Lab", layout="wide")
st.title("Ceiling Lab")
st.warning(
    "High voltage: electrostatic generators make tens to hundreds of kilovolts, and charged "
    "capacitors can give a dangerous shock. Follow your institution's electrical safety rules "
    "and local codes; this tool computes, it does not make a set-up safe."
)
kind = st.selectbox("Carrier", CARRIER_KINDS, key="carrier")
fields = {
    "disc": ["outer_diameter", "inner_diameter", "sector_fill"],
    "belt": ["width", "roller_diameter"],
    "cylinder": ["diameter", "active_length"],
    "custom": ["area_per_rev"],
}[kind]
defaults = {"outer_diameter": "46 cm", "inner_diameter": "30 cm", "sector_fill": "1",
            "width": "5 cm", "roller_diameter": "5 cm", "diameter": "20 cm",
            "active_length": "40 cm", "area_per_rev": "0.12 m^2"}
table = {"id": "sketch", "carrier": kind}
for name in fields:
    value = st.text_input(name.replace("_", " "), defaults[name], key=name)
    if value.strip():
        table[name] = value
speed_text = st.text_input("speed", "300 rpm", key="speed")
try:
    speed, speed_kind = parse_speed(speed_text)
    figures = ceiling_figures(machine_from_table(table), speed, speed_kind)
    st.metric("Ceiling current", f"{figures['ceiling_current_uA']:.3g} uA")
except InputError as error:
    st.error(str(error))
