"""About: what the program does, its methods and sources, the version."""

import streamlit as st

from dashboard import state

st.title("About Depletion Desk")
st.caption(f"Version {state.version()}")
st.warning(
    "Forecasts, EURs and planning statuses are engineering estimates from production history and "
    "published correlations, not reserves. " + state.CAUTION
)
st.markdown(state.ABOUT_TEXT)
