"""Ceiling Lab: the frame of the Streamlit app. It sets the page, the sidebar and the navigation;
each page is a short script in pages/."""

import streamlit as st

from engine.errors import InputError
from pages import _shared as shared

st.set_page_config(page_title="Ceiling Lab", page_icon=shared.app_icon(), layout="wide")

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

try:
    # On a first start (an empty lab of the user's own) the app opens on the demonstration
    # lab, a store of its own: see shared.active_lab.
    store = shared.store()
    with st.sidebar:
        shared.lab_switch()
        counts = store.counts()
        st.markdown(f"**{shared.plain(shared.lab_words())}** · {counts['machines']} machines "
                    f"· {counts['readings']:,} readings")
        shared.lab_warnings()
        shared.follow_lab()
        if shared.active_lab() == "demo":
            st.caption("Invented data to explore, kept apart from your own lab. Switch to "
                       "**My lab** above to start yours; the demonstration lab stays here.")
        st.caption(shared.SAFETY_SHORT)
    navigation.run()
except InputError as error:
    # The lab cannot be opened or was lost (a server down or out of reach, a damaged file):
    # what happened and what to do, never a traceback.
    shared.lab_failed(error)
