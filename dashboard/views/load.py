"""Load data: upload a production file (and a well-header file) or open the sample field;
check the recognised columns and the load report, then compute the forecast."""

import streamlit as st

from core.validation import InputError
from dashboard import state

st.title("Load data")
st.write(
    "Monthly production per well (oil, gas, water, days on, pressure surveys), as CSV or XLSX, "
    "one row per well and month. A well-header file with fluid data is optional. Nothing is "
    "computed until you have seen how the file was read."
)

limit = state.upload_limit_mb()
left, right = st.columns(2)
with left:
    prod = st.file_uploader(
        "Production file", type=["csv", "txt", "tsv", "xlsx", "xls"], key="upload_production",
        help=f"CSV (comma, semicolon or tab) or XLSX, up to {limit:g} MB.",
    )
with right:
    header = st.file_uploader(
        "Well-header file (optional)", type=["csv", "txt", "tsv", "xlsx", "xls"], key="upload_header",
        help="One row per well: unit, API gravity, gas gravity, reservoir temperature, "
        "initial pressure, bubble point.",
    )
st.caption(f"Upload limit {limit:g} MB per file.")
if st.button("Open the sample field", key="use_sample"):
    state.set_source(state.sample_source())
    st.rerun()

if prod is not None:
    too_big = state.check_upload_size(prod.name, prod.size) or (
        state.check_upload_size(header.name, header.size) if header is not None else None
    )
    if too_big:
        st.error(too_big)
        st.stop()
    state.use_upload(prod, header)

src = state.current_source()
if src is None:
    st.info("Upload a production file or open the sample field.")
    st.stop()

if src.kind == "stored":
    st.info(f"Reopened from the store: {state.reopened_note() or src.name}, with the team's overrides and "
            "flags. Upload next month's file to update it, or open the sample field.")
st.subheader(f"How {src.name} was read")
if src.header_name:
    st.caption(f"Well-header file: {src.header_name}")
try:
    load = state.current_load()
except InputError as exc:
    st.error(str(exc))
    st.stop()

c1, c2, c3, c4 = st.columns(4)
c1.metric("Rows read", f"{load.rows_read:,}")
c2.metric("Rows used", f"{load.rows_used:,}")
c3.metric("Rows rejected", f"{load.rows_rejected:,}")
c4.metric("Wells", f"{state.load_well_count(load):,}")
for message in load.messages:
    st.info(message)
kinds = ["average_reservoir", "static_bhp"]
kind = st.radio(
    "The pressure column holds", kinds, index=kinds.index(st.session_state[state.PRESSURE_KIND]),
    format_func=lambda k: {"average_reservoir": "average reservoir pressure", "static_bhp": "static bottom-hole pressure"}[k],
    key="pressure_kind", horizontal=True, disabled=src.kind == "stored",
)
if kind != st.session_state[state.PRESSURE_KIND]:
    state.set_pressure_kind(kind)
    st.rerun()

held = state.stored_history()
if held is not None:
    append = st.checkbox(
        f"Monthly update: append this file to the history kept for this field ({held['file_name']}, "
        f"to {held['last_month']})",
        value=st.session_state.get(state.APPEND) == held["id"], key="append_history",
        help="Months already held are compared: repeats are dropped, conflicting values are "
        "reported and the newer file wins; overrides and flags carry forward.",
    )
    state.set_append(held["id"] if append else None)
    load = state.current_load()
    merge = state.merge_report()
    if merge is not None:
        st.markdown("**Monthly update: how the file joins the kept history**")
        st.dataframe(merge, hide_index=True, key="merge_report_view")

st.markdown("**Recognised columns**")
st.dataframe(state.mapping_table(load), hide_index=True, key="mapping_view")
with st.expander("Correct the column mapping"):
    columns = state.file_columns()
    current = load.mapping
    with st.form("mapping_form"):
        chosen = {}
        for name in state.canonical_columns():
            options = ["(not in file)"] + columns
            now = current.get(name)
            chosen[name] = st.selectbox(
                name, options, index=options.index(now) if now in options else 0, key=f"map_{name}",
            )
        if st.form_submit_button("Read the file with this mapping"):
            state.set_mapping({k: (None if v == "(not in file)" else v) for k, v in chosen.items()})
            st.rerun()

st.markdown("**Load report** (rejected and altered rows, with the reason)")
if load.report.empty:
    st.success("No row was rejected or altered.")
else:
    st.dataframe(load.report, hide_index=True, key="load_report_view")

st.divider()
if state.is_confirmed():
    state.require_run()
    st.success("The forecast for these data is computed.")
    st.page_link("views/overview.py", label="Open the field overview", icon=":material/dashboard:")
else:
    # The callback confirms before the rerun, so this run already draws the computed state.
    st.button("Compute the forecast", type="primary", key="run_forecast", on_click=state.confirm_current_load)
