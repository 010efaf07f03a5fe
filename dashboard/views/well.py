"""Well review: the fit and forecast of one well, its GOR and pressure history with the
stages, and the engineer's override."""

import pandas as pd
import streamlit as st

from dashboard import charts, state

st.title("Well review")
run = state.require_run()
state.caution()

ids = state.well_ids(run)
current = state.selected_well(run)
well = st.selectbox(
    "Well", ids, index=ids.index(current), key="well_pick",
    on_change=state.on_well_pick, help="Type to search.",
)
row = state.well_row(run, well)
history = state.well_history(well)
forecast = state.well_forecast(run, well)

c = st.columns(4)
c[0].metric("Status", str(row["status"]))
c[1].metric("Model", str(row["model"]) if pd.notna(row["model"]) else "none")
c[2].metric("b", "" if pd.isna(row["b"]) else f"{row['b']:.2f}")
c[3].metric("Stage", state.stage_text(row))
c = st.columns(4)
c[0].metric("EUR oil", "" if pd.isna(row["eur_oil_bbl"]) else f"{row['eur_oil_bbl']:,.0f} bbl")
c[1].metric("Remaining oil", "" if pd.isna(row["remaining_oil_bbl"]) else f"{row['remaining_oil_bbl']:,.0f} bbl")
c[2].metric("Economic-limit month", state.month_text(row["econ_limit_date"]) or "n/a")
c[3].metric("Cumulative oil", "" if pd.isna(row["cum_oil_bbl"]) else f"{row['cum_oil_bbl']:,.0f} bbl")
prob = state.probabilistic_controls(run, where="well")
prow = state.prob_well_row(prob, well)
if prow is not None:
    st.markdown("**Probabilistic forecast**")
    st.dataframe(state.prob_well_ranges(prow), hide_index=True, key="prob_well_ranges")
    st.caption(f"{state.text(prow['prob_method'])}; {prob.samples} samples, seed {prob.seed}. {state.PROB_WORDING} "
               "The P90 economic-limit month is the early one.")
st.caption(
    f"Unit {row['unit']} · fluid {row['fluid_type']} · planning status "
    f"{charts.PLANNING_LABELS.get(row['planning_status'], row['planning_status'])}"
    + (f" · override: {row['override']}" if state.text(row.get("override")) else "")
)
if state.text(row.get("forecast_note")):
    st.caption(f"Forecast note: {state.text(row.get('forecast_note'))}")

st.plotly_chart(
    charts.rate_time_figure(
        history,
        fitted=state.fitted_curve(run, well),
        forecast=forecast,
        excluded_months=state.excluded_months(run, well),
        fit_window=(row["fit_start"], row["fit_end"]),
        econ_limit_rate=row["econ_limit_bopd"],
        band=state.prob_well_band(prob, well),
        title=f"{well}: oil rate, fit and forecast",
    ),
    key="chart_rate_time",
)
left, right = st.columns(2)
with left:
    st.plotly_chart(charts.rate_cumulative_figure(history, forecast), key="chart_rate_cum")
with right:
    st.plotly_chart(
        charts.rate_time_figure(history, fitted=state.fitted_curve(run, well, stream="gas"), stream="gas",
                                title=f"{well}: gas rate"),
        key="chart_gas",
    )
st.plotly_chart(
    charts.gor_pressure_figure(
        history,
        periods=charts.stage_periods(
            row["first_month"], row["last_month"], bubble_point_date=row["bubble_point_date"],
            stage2_end_date=row["stage2_end_date"], gor_peak_date=row["gor_peak_date"],
        ) if state.stage_text(row) != "n/a" else [],
        rsi_scf_stb=row["rsi_scf_stb"],
        bubble_point_psia=row["bubble_point_psia"],
        events=state.well_stage_events(row),
        title=f"{well}: producing GOR and pressure",
    ),
    key="chart_gor_pressure",
)
st.caption("Stage evidence: " + (state.text(row.get("stage_evidence")) or state.text(row.get("stage_reason")) or "none given"))

st.subheader("Fit")
st.dataframe(state.fit_facts(row), hide_index=True, key="fit_facts")
st.markdown("**Alternatives** (every Arps family fitted to this well)")
st.dataframe(state.well_candidates(run, well), hide_index=True, key="fit_candidates")

st.subheader("Override the fit")
st.caption(
    "An override is an input to the run, never silent: it is named in the well's row and in the "
    f"exports, and recorded with its reason ({state.store_status()})."
)
months = state.month_choices(history)
ov = state.override_for(well)
with st.form("override_form"):
    a, b_col, d, e = st.columns(4)
    models = ["automatic", "exponential", "hyperbolic", "harmonic"]
    a.selectbox("Model", models, index=models.index(ov.model) if ov and ov.model in models else 0, key="ov_model")
    b_col.checkbox("Fix b", value=bool(ov and ov.b is not None), key="ov_fix_b")
    b_col.number_input(
        "b", min_value=0.0, max_value=float(state.settings()["b_max"]), step=0.05,
        value=float(ov.b) if ov and ov.b is not None else min(0.5, float(state.settings()["b_max"])), key="ov_b",
    )
    d.selectbox("Fit window start", ["automatic"] + months,
                        index=state.month_index(months, ov.fit_start if ov else None), key="ov_start")
    e.selectbox("Fit window end", ["automatic"] + months,
                      index=state.month_index(months, ov.fit_end if ov else None), key="ov_end")
    st.multiselect("Months to exclude from the fit", months,
                             default=[m for m in state.months_text(ov.exclude_months if ov else ()) if m in months],
                             key="ov_exclude")
    st.text_input("Reason (required)", value=ov.reason if ov else "", key="ov_reason")
    st.text_input("Your name", value=ov.author if ov else "", key="ov_author")
    # Callbacks apply the override before the page runs again, so the page is drawn once,
    # with the new forecast (no second run of the script).
    st.form_submit_button("Apply override", type="primary", on_click=state.on_override_submit, args=(well,))
problem = st.session_state.pop(state.OVERRIDE_PROBLEM, None)
if problem:
    st.error(problem)
if ov is not None:
    st.button("Remove this well's override", key="ov_remove", on_click=state.on_override_remove, args=(well,))

log = state.override_log(well)
if not log.empty:
    st.markdown("**Override record for this well**")
    st.dataframe(log, hide_index=True, key="override_log")
