"""Downloads: the forecast tables of the run as CSV files and one XLSX workbook, for the
field, a selection of wells, or one well."""

import streamlit as st

from dashboard import state

st.title("Downloads")
run = state.require_run()
state.caution()
st.write(
    "The tables follow the batch command's output contract (field units, months as YYYY-MM). "
    "The workbook has a cover sheet with the inputs, the as-of month, the program version and the cautions."
)

with_prob = state.prob_run(run)
if with_prob is not None:
    run = with_prob
    st.caption(f"With the P90/P50/P10 columns ({run.settings.samples} samples per well, seed {run.settings.seed}).")
elif state.prob_settings()[0]:
    st.caption("The P90/P50/P10 columns are added once computed (Field overview or Well review page).")
scope = st.radio("What to download", ["Whole field", "A selection of wells", "One well"], key="export_scope", horizontal=True)
ids = state.well_ids(run)
wells = None
tag = "field"
if scope == "A selection of wells":
    wells = st.multiselect("Wells", ids, key="export_wells")
    tag = "selection"
    if not wells:
        st.info("Pick one or more wells.")
        st.stop()
elif scope == "One well":
    one = st.selectbox("Well", ids, index=ids.index(state.selected_well(run)), key="export_well")
    wells = [one]
    tag = state.safe_name(one)

st.download_button(
    "Forecast workbook (XLSX)", state.export_xlsx(run, wells), file_name=f"forecast_{tag}.xlsx",
    mime="application/vnd.openxmlformats-officedocument.spreadsheetml.sheet", key="download_xlsx", type="primary", on_click="ignore",
)
files = state.export_csv(run, wells)
cols = st.columns(len(files))
for col, (name, data) in zip(cols, files.items()):
    col.download_button(name, data, file_name=f"{tag}_{name}", mime="text/csv", key=f"download_{name}", on_click="ignore")
