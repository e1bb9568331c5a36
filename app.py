"""Ceiling Lab: the frame of the Streamlit app. It sets the page, the sidebar and the navigation;
each page is a short script in pages/."""

import streamlit as st

from engine.demo import load_demo
from pages import _shared as shared

st.set_page_config(page_title="Ceiling Lab", page_icon=":material/bolt:", layout="wide")

store = shared.store()
# The demo comes on first start only: not again once the user has removed it.
if (store.is_empty() and store.setting("demo") != "removed"
        and not st.session_state.get("demo-declined")):
    with st.spinner("First start: loading the demonstration lab..."):
        load_demo(store)

navigation = st.navigation(
    [
        st.Page("pages/overview.py", title="Overview", icon=":material/home:", default=True),
        st.Page("pages/machines.py", title="Machines", icon=":material/settings:"),
        st.Page("pages/readings.py", title="Readings", icon=":material/upload_file:"),
        st.Page("pages/compare.py", title="Compare", icon=":material/monitoring:"),
        st.Page("pages/sessions.py", title="Sessions", icon=":material/timeline:"),
        st.Page("pages/planner.py", title="Planner", icon=":material/straighten:"),
        st.Page("pages/report.py", title="Report", icon=":material/description:"),
        st.Page("pages/safety.py", title="Safety and method", icon=":material/warning:"),
    ]
)

with st.sidebar:
    counts = store.counts()
    st.markdown(f"**Ceiling Lab** · {counts['machines']} machines · {counts['readings']:,} "
                "readings")
    if store.has_demo():
        st.caption("The demonstration lab is loaded (invented data). Remove it on the Overview "
                   "page when you start your own.")
    st.caption(shared.SAFETY_SHORT)

navigation.run()
