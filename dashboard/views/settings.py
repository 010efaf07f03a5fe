"""Settings: the economic limit (a rate, or prices and costs), the decline bounds, the input
units. Applying them re-runs the forecast; the loaded file is not read again unless the input
units change."""

import streamlit as st

from core.validation import InputError
from dashboard import state

st.title("Settings")
s = state.settings()
with st.form("settings_form"):
    st.markdown("**Economic limit**")
    mode = st.radio(
        "Economic limit from", ["an oil rate", "prices and costs"],
        index=1 if s.get("oil_price") is not None and s.get("econ_limit_bopd") is None else 0,
        key="set_mode", horizontal=True,
    )
    a, b, c = st.columns(3)
    econ = a.number_input("Economic limit [bbl/d]", min_value=0.01, value=float(s.get("econ_limit_bopd") or state.DEFAULT_LIMIT),
                          step=0.5, key="set_econ_limit")
    oil_price = b.number_input("Oil price [$/bbl]", min_value=0.01, value=float(s.get("oil_price") or 70.0), key="set_oil_price")
    gas_price = c.number_input("Gas price [$/Mcf]", min_value=0.0, value=float(s.get("gas_price") or 0.0), key="set_gas_price")
    d, e, f, g = st.columns(4)
    opex = d.number_input("Operating cost per well [$/month]", min_value=0.0, value=float(s.get("opex_per_month") or 3000.0),
                          step=100.0, key="set_opex")
    nri = e.number_input("Net revenue interest [-]", min_value=0.01, max_value=1.0, value=float(s.get("nri") or 0.8),
                         key="set_nri")
    wi = f.number_input("Working interest [-]", min_value=0.01, max_value=1.0, value=float(s.get("wi") or 1.0), key="set_wi")
    tax = g.number_input("Severance tax [-]", min_value=0.0, max_value=0.99, value=float(s.get("severance_tax") or 0.0),
                         key="set_tax")
    st.markdown("**Decline**")
    h, i, j, k = st.columns(4)
    b_max = h.number_input("Maximum b [-]", min_value=0.05, max_value=2.0, value=float(s["b_max"]), step=0.1, key="set_b_max")
    term = i.number_input("Terminal decline, effective [%/yr]", min_value=0.1, max_value=99.0,
                          value=state.terminal_decline_pct(), step=0.5, key="set_terminal")
    horizon = j.number_input("Forecast horizon cap [yr]", min_value=1.0, max_value=200.0, value=float(s["horizon_years"]),
                             key="set_horizon")
    as_of = k.text_input("As-of month (YYYY-MM, blank = last month in the data)", value=s.get("as_of") or "", key="set_as_of")
    st.markdown("**Probabilistic forecast (P90 / P50 / P10)**")
    samples_now, seed_now = state.prob_settings()
    p1, p2 = st.columns(2)
    samples = p1.number_input(
        "Samples per well (0 = off)", min_value=0, max_value=100_000, value=samples_now, step=50, key="set_samples",
        help=f"Off by default so the first pages stay fast. {state.SUGGESTED_PROB_SAMPLES} is a usual choice "
        f"(at least {state.MIN_PROB_SAMPLES}); the P90/P50/P10 are computed when asked for on the Field "
        "overview or Well review page.",
    )
    seed = p2.number_input("Seed", min_value=0, max_value=2**31 - 1, value=seed_now, step=1, key="set_seed",
                           help="The same seed gives the same samples.")
    st.markdown("**Input file**")
    units = st.radio("Units of the input file", ["field", "metric"], index=0 if s.get("units", "field") == "field" else 1,
                     key="set_units", horizontal=True, help="Outputs are always in field units.")
    applied = st.form_submit_button("Apply settings", type="primary")
if applied:
    values = state.settings_from_form(
        mode=mode, econ_limit_bopd=econ, oil_price=oil_price, gas_price=gas_price, opex_per_month=opex,
        nri=nri, wi=wi, severance_tax=tax, b_max=b_max, terminal_decline_pct=term, horizon_years=horizon,
        as_of=as_of, units=units,
    )
    try:
        state.check_prob_settings(samples, seed)  # both checked before either is applied
        state.apply_settings(values)
        state.apply_prob_settings(samples, seed)
    except InputError as exc:
        st.error(str(exc))
    else:
        st.success("Settings applied. The forecast is re-run with them on the next page you open.")
st.caption(state.settings_note())
st.json({**state.settings(), "probabilistic_samples": state.prob_settings()[0],
         "probabilistic_seed": state.prob_settings()[1]}, expanded=False)
