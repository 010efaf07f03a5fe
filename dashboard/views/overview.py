"""Field overview: headline figures, the well table, stages per unit, the field forecast."""

import streamlit as st

from dashboard import charts, state

st.title("Field overview")
run = state.require_run()
state.caution()

h = state.headline(run)
top = st.columns(4)
top[0].metric("Wells", f"{h['wells']:,}", help="Wells in the file; forecast ones have status ok in the table.")
top[1].metric("Oil rate now", f"{h['oil_rate_now_bopd']:,.0f} bbl/d", help="Sum of each well's last producing-day oil rate.")
top[2].metric("Wells past the GOR peak", f"{h['wells_past_gor_peak']:,}")
top[3].metric("Wells forecast", state.number_text(h["wells_forecast"]))
low = st.columns(3)
low[0].metric("Cumulative oil", f"{h['cum_oil_bbl']:,.0f} bbl")
low[1].metric("Remaining oil", f"{h['remaining_oil_bbl']:,.0f} bbl", help="To each well's economic limit.")
low[2].metric("EUR oil", f"{h['eur_oil_bbl']:,.0f} bbl")

st.markdown("**Probabilistic forecast**")
prob = state.probabilistic_controls(run, where="overview")
if prob is not None:
    totals = state.prob_field_totals(prob).set_index("quantity")
    st.dataframe(state.prob_field_ranges(prob), hide_index=True, key="prob_field_ranges")
    st.caption(f"Field totals of {prob.samples} samples: {totals['method'].iloc[0]}. They are not sums of the wells' percentiles "
               f"(P90s do not add). {state.PROB_WORDING}")
    for message in prob.messages:
        st.caption(message)

left, right = st.columns(2)
with left:
    st.plotly_chart(charts.planning_status_figure(state.planning_counts(run)), key="chart_planning")
with right:
    st.plotly_chart(charts.stage_share_figure(run.units), key="chart_stage_share")
st.plotly_chart(charts.field_rate_figure(state.field_totals(run), band=state.prob_field_band(prob, run)), key="chart_field")

st.subheader("Wells")
w = run.wells
f1, f2, f3, f4, f5 = st.columns([2, 1, 2, 2, 2])
units = f1.multiselect("Unit", sorted(w["unit"].astype(str).unique()), key="filter_unit")
stages = f2.multiselect("Stage", ["1", "2", "3", "4", "n/a"], key="filter_stage")
statuses = f3.multiselect("Planning status", sorted(w["planning_status"].dropna().unique()), key="filter_status")
fluids = f4.multiselect("Fluid type", sorted(w["fluid_type"].dropna().unique()), key="filter_fluid")
search = f5.text_input("Well name contains", key="filter_search")
table = state.well_table(run, units=units, stages=stages, statuses=statuses, fluids=fluids, search=search, prob=prob)
st.caption(f"{len(table):,} of {len(w):,} wells. Click a column header to sort; pick a row to open the well.")
picked = st.dataframe(
    table,
    hide_index=True,
    key="well_table",
    on_select="rerun",
    selection_mode="single-row",
    column_config={
        "b": st.column_config.NumberColumn("b", format="%.2f"),
        "qi_bopd": st.column_config.NumberColumn("qi [bbl/d]", format="%.1f"),
        "di_annual_nominal": st.column_config.NumberColumn("di [1/yr]", format="%.3f"),
        **state.volume_column_config(),
        **state.prob_column_config(),
        "econ_limit_date": st.column_config.DateColumn("econ-limit month", format="YYYY-MM"),
        "fit_rmse_log": st.column_config.NumberColumn("fit RMSE (ln rate)", format="%.3f"),
    },
)
rows = picked.selection.rows if picked is not None else []
if rows:
    state.select_well(table.iloc[rows[0]]["well_id"])
    st.switch_page("views/well.py")

st.subheader("Keep this run and compare with the last one")
c1, c2 = st.columns([3, 1])
saved = state.saved_run_id()
with c1:
    who = st.text_input("Your name (recorded with the run)", key="save_author")
with c2:
    if saved is not None:
        st.success(f"Kept in the store as run {saved}.")
    elif st.button("Keep this run in the store", key="save_run"):
        try:
            saved = state.save_run_to_store(run, author=who)
        except (ValueError, OSError) as exc:
            st.error(f"The run was not kept: {exc}")
        else:
            st.success(f"Kept in the store as run {saved}.")
diff = state.changes_since_saved(run)
if diff is None:
    st.caption("No earlier run of this field in the store: keep this one to compare next month's against it.")
else:
    p, s = diff["previous"], diff["summary"]
    st.markdown(f"**Changes since run {p['id']}** (as of {p['as_of']}, kept {p['created']})")
    m = st.columns(5)
    m[0].metric("EUR change", f"{s['eur_change_bbl']:+,.0f} bbl")
    m[1].metric("Remaining change", f"{s['remaining_change_bbl']:+,.0f} bbl")
    m[2].metric("Stage changes", f"{s['n_stage_changed']:,}")
    m[3].metric("Newly past the GOR peak", f"{s['n_newly_past_gor_peak']:,}")
    m[4].metric("New planning statuses", f"{s['n_planning_status_changed']:,}")
    if diff["wells"].empty:
        st.caption("No well changed beyond the tolerances.")
    else:
        st.dataframe(diff["wells"], hide_index=True, key="changes_wells")
    if not diff["units"].empty:
        st.dataframe(diff["units"], hide_index=True, key="changes_units")
