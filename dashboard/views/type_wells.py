"""Type wells: P90/P50/P10 rate curves of a reservoir unit's wells, or of a selection of
wells, aligned in time, with the Arps fit of the P50 and a CSV download."""

import streamlit as st

from core.validation import InputError
from dashboard import charts, state

st.title("Type wells")
run = state.require_run()
state.caution()
st.write(
    "A type well summarises how a group of wells produced, month by month from a common start: "
    "the P90 (low), P50 and P10 (high) of the wells' oil rates in each month, the number of wells "
    "behind each month, and an Arps fit of the P50 for planning undrilled locations. "
    "The curve stops where too few wells remain (later months would describe only the longest-lived wells)."
)

a, b, c, d = st.columns([2, 2, 2, 1])
by = a.radio("Build", ["unit", "selection"], key="tw_by", horizontal=True,
             format_func=lambda v: {"unit": "one per reservoir unit", "selection": "from chosen wells"}[v])
align = b.radio("Align the wells at", list(state.TYPE_WELL_ALIGN), key="tw_align",
                format_func=state.TYPE_WELL_ALIGN.get)
basis = c.radio("Oil rate", list(state.TYPE_WELL_BASIS), key="tw_basis", format_func=state.TYPE_WELL_BASIS.get)
min_wells = d.number_input("Fewest wells per month", min_value=1, max_value=1000, value=5, step=1, key="tw_min_wells")
normalize = st.checkbox("Normalise each well by its peak rate (to the median peak of the wells)", key="tw_normalize")
chosen: list[str] = []
if by == "selection":
    chosen = st.multiselect("Wells", state.well_ids(run), key="tw_wells")
try:
    tws = state.type_wells(run, by=by, wells=chosen, align=align, normalize_peak=normalize, rate_basis=basis,
                           min_wells=int(min_wells))
except InputError as exc:
    st.info(str(exc))
    st.stop()

names = list(tws)
name = st.selectbox("Type well", names, key="tw_pick") if len(names) > 1 else names[0]
tw = tws[name]
st.plotly_chart(
    charts.type_well_figure(tw.curve, fit_label=state.type_well_fit_text(tw),
                            title=f"Type well {name}: {len(tw.wells)} wells, aligned at the "
                                  f"{state.TYPE_WELL_ALIGN[tw.align]}"),
    key="chart_type_well",
)
m = st.columns(4)
m[0].metric("Wells", f"{len(tw.wells):,}")
m[1].metric("Months in the curve", f"{len(tw.curve):,}")
m[2].metric("Arps fit of the P50", tw.fit.model or "not fitted")
m[3].metric("b", "n/a" if not tw.fit.model else f"{tw.fit.b:.2f}")
st.caption(f"P50 fit: {state.type_well_fit_text(tw)}, from month {tw.fit_start_index} (the P50's peak). "
           + (f"Rates normalised by peak rate to {tw.normalized_to:,.1f} bbl/d. " if tw.normalized_by else "")
           + "P90 = low curve (10th percentile of the wells' rates), P10 = high curve (90th percentile).")
for note in tw.notes:
    st.caption(note)
st.dataframe(tw.curve, hide_index=True, key="type_well_curve")
st.download_button("Download the type wells (CSV)", state.type_well_csv(tws), file_name="type_wells.csv",
                   mime="text/csv", key="download_type_wells")
