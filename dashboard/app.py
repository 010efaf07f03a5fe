"""Depletion Desk dashboard: the router and the controls every page shares.

Start from the repository root: ``python -m streamlit run dashboard/app.py``.
"""

from __future__ import annotations

import sys
from pathlib import Path

# The repository root must be importable (``core`` and ``dashboard``) however streamlit is
# started: its console script puts only this file's folder on sys.path.
_ROOT = str(Path(__file__).absolute().parents[1])
if _ROOT not in sys.path:
    sys.path.append(_ROOT)

import streamlit as st  # noqa: E402

from dashboard import state  # noqa: E402

st.set_page_config(page_title="Depletion Desk", layout="wide")
state.init_state()

PAGES = [
    st.Page("views/load.py", title="Load data", icon=":material/upload_file:", default=True),
    st.Page("views/overview.py", title="Field overview", icon=":material/dashboard:"),
    st.Page("views/well.py", title="Well review", icon=":material/show_chart:"),
    st.Page("views/planning.py", title="Unit planning", icon=":material/water_drop:"),
    st.Page("views/type_wells.py", title="Type wells", icon=":material/stacked_line_chart:"),
    st.Page("views/exports.py", title="Downloads", icon=":material/download:"),
    st.Page("views/settings.py", title="Settings", icon=":material/tune:"),
    st.Page("views/about.py", title="About", icon=":material/info:"),
]
nav = st.navigation(PAGES)

with st.sidebar:
    st.markdown("**Depletion Desk**")
    src = state.current_source()
    if src is None:
        st.caption("No data loaded.")
    else:
        st.caption(f"Data: {src.name}" + (f" + {src.header_name}" if src.header_name else ""))
        st.caption("Forecast: " + ("computed" if state.has_run() else "waiting for confirmation on Load data"))
    st.caption(state.settings_summary())
    st.caption(f"Overrides and flags: {state.store_status()}")
    st.caption(state.CAUTION)

nav.run()

# Problems met while the page ran (store locked or unreadable, a record kept in this session
# only): said once, in the sidebar.
problem = state.pop_problem()
if problem:
    st.sidebar.warning(problem)
