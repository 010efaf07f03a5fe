"""Unit planning: where each reservoir unit stands, its expected and observed path, and the
team's waterflood planning flags."""

import streamlit as st

from core.validation import InputError
from dashboard import charts, state

st.title("Unit planning")
run = state.require_run()
state.caution()
st.write(
    "Pressure maintenance works best before free gas flows: a unit whose window is open is the "
    "first to study for waterflood; a closing window means the GOR is rising to its peak."
)

st.dataframe(state.units_table(run), hide_index=True, key="units_table",
             column_config=state.units_column_config())
st.plotly_chart(charts.stage_share_figure(run.units), key="chart_unit_stages")

names = state.unit_names(run)
if names:
    current = state.selected_unit(run)
    unit = st.selectbox("Unit", names, index=names.index(current), key="unit_pick", on_change=state.on_unit_pick)
    row = state.unit_row(run, unit)
    c = st.columns([1, 3, 2, 2, 1])
    c[0].metric("Stage", state.stage_text(row))
    c[1].metric("Planning status", charts.PLANNING_LABELS.get(row["planning_status"], str(row["planning_status"])))
    c[2].metric("Months since bubble point", state.number_text(row.get("months_since_bubble_point"), "{:.0f}"))
    c[3].metric("Est. months to GOR peak", state.number_text(row.get("months_to_gor_peak_est"), "{:.0f}"))
    c[4].metric("Wells", f"{int(row['n_wells'])}")
    oil_unit = row.get("planning_status") != "not_applicable"
    match = state.unit_history_match(unit) if oil_unit else {
        "error": "not a solution-gas-drive oil unit (gas or condensate wells, or stage unknown)"}
    expected = match.get("expected") if match else None
    st.plotly_chart(
        charts.gor_pressure_figure(
            state.unit_observed(unit),
            expected=expected,
            rsi_scf_stb=row.get("rsi_scf_stb"),
            events={"bubble point": row.get("bubble_point_date"), "GOR peak": row.get("gor_peak_date")},
            title=f"Unit {unit}: observed GOR and pressure beside the material-balance history match",
        ),
        key="chart_unit_path",
    )
    if expected is None:
        st.caption("No material-balance history match for this unit: " + match.get("error", "not available"))
    else:
        m = st.columns(3)
        m[0].metric("Oil in place, history match", f"{match['ooip_stb']:,.0f} STB",
                    help=f"80 % interval {match['ooip_low_stb']:,.0f} to {match['ooip_high_stb']:,.0f} STB")
        m[1].metric("Critical gas saturation", f"{match['sgc']:.3f}")
        m[2].metric("Recovery to date", f"{match['recovery_factor_to_date']:.1%}")
        for message in match["messages"]:
            st.caption(f"History match: {message}")

st.subheader("Waterflood planning flags")
with st.form("flag_form"):
    a, b = st.columns([1, 3])
    kind = a.radio("Flag a", ["unit", "well"], key="flag_kind", horizontal=True)
    target = b.selectbox("Unit or well", names + state.well_ids(run), key="flag_target",
                         help="Units first, then wells.")
    note = st.text_area("Note (required)", key="flag_note")
    author = st.text_input("Your name", key="flag_author")
    if st.form_submit_button("Add the flag"):
        try:
            state.add_flag(kind, target, note, author)
        except InputError as exc:
            st.error(str(exc))
        else:
            st.success(f"{kind} {target} flagged for waterflood planning.")
flags = state.flags_table()
if flags.empty:
    st.caption("No flags yet.")
else:
    st.dataframe(flags, hide_index=True, key="flags_table")
    st.download_button("Download the flag list (CSV)", state.flags_csv(), file_name="waterflood_flags.csv",
                       mime="text/csv", key="download_flags")
st.download_button("Download the unit table (CSV)", state.units_csv(run), file_name="units.csv",
                   mime="text/csv", key="download_units")
