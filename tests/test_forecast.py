"""Forecast to the economic limit: check-values.md 1.3/1.4 worked examples, exact monthly
integrals (scipy.integrate.quad, scipy 1.17.1), uptime, economics, horizon, and hypothesis
properties over arbitrary non-negative rate histories (issue 9 item 2)."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings, strategies as hs
from numpy.testing import assert_allclose
from scipy.integrate import quad

from core.decline import (
    DAYS_PER_YEAR,
    DeclineSettings,
    arps_cumulative,
    fit_field,
    modified_hyperbolic_cumulative,
    modified_hyperbolic_rate,
    nominal_from_tangent_effective,
)
from core.economics import EconomicInputs, economic_limit_rate
from core.forecast import MONTHLY_COLUMNS, SUMMARY_COLUMNS, forecast_field


def one_well(qi, di, b, *, start="2020-01-01", n_hist=1, uptime=1.0, d_lim=None, gas_factor=None):
    """Fit table and matching production history whose volumes are the exact integrals."""
    fits = pd.DataFrame([{
        "well_id": "W-1", "stream": "oil", "status": "ok", "forecastable": True,
        "model": "hyperbolic" if 0 < b < 1 or b > 1 else ("exponential" if b == 0 else "harmonic"),
        "qi": qi, "di": di, "b": b, "fit_start": pd.Timestamp(start), "fit_end": pd.Timestamp(start),
    }])
    months = pd.date_range(start, periods=n_hist, freq="MS")
    dim = months.days_in_month.to_numpy()
    edges = np.r_[0.0, np.cumsum(dim)] / DAYS_PER_YEAR
    if d_lim is None:
        cum = arps_cumulative(edges, qi, di, b)
    else:
        cum = modified_hyperbolic_cumulative(edges, qi, di, b, d_lim)
    oil = np.diff(cum) * uptime
    prod = pd.DataFrame({"well_id": "W-1", "month": months, "oil_bbl": oil,
                         "gas_mcf": oil * (gas_factor or 0.0), "days_on": dim * uptime,
                         "days_in_month": dim})
    if gas_factor:
        g = fits.copy()
        g["stream"] = "gas"
        g["qi"] = qi * gas_factor
        fits = pd.concat([fits, g], ignore_index=True)
    return fits, prod


def test_check_values_1_3_case_a_economic_limit_month_and_eur():
    # check-values.md 1.3 case A: qi 1000, Di 0.5, b 0, start 2020-01-01, limit 10 bbl/d:
    # t_el = 9.210340 yr (2029-03-18) -> monthly forecast ends March 2029; EUR 723,195.0 bbl
    fits, prod = one_well(1000.0, 0.5, 0.0)
    s, m = forecast_field(fits, prod, settings=DeclineSettings(econ_limit_bopd=10.0))
    row = s.iloc[0]
    assert row.econ_limit_date == pd.Timestamp("2029-03-01")
    assert row.forecast_end_reason == "economic_limit"
    assert m.month.iloc[-1] == pd.Timestamp("2029-03-01")
    assert_allclose(row.eur_oil_bbl, 723_195.0, rtol=1e-7)
    assert row.model == "exponential"  # exponential fits keep their own decline


def test_check_values_1_3_case_b_without_terminal_reaches_36_years():
    # check-values.md 1.3 case B (b 0.5, limit 10 bbl/d): t_el 36 yr, EUR 1,314,900 bbl for
    # the unmodified hyperbolic; a terminal decline below the tail's D(36) = 0.0455 /yr keeps
    # the pure hyperbolic (switch never reached before the limit)
    fits, prod = one_well(1000.0, 0.5, 0.5)
    st = DeclineSettings(econ_limit_bopd=10.0, terminal_decline_effective=0.04)  # D_lim 0.0408
    s, _ = forecast_field(fits, prod, settings=st)
    assert_allclose(s.eur_oil_bbl.iloc[0], 1_314_900.0, rtol=1e-7)
    # 2020-01-01 + 36 x 365.25 d is exactly 2056-01-01 00:00: the last month produced is 2055-12
    assert s.econ_limit_date.iloc[0] == pd.Timestamp("2055-12-01")
    assert s.model.iloc[0] == "hyperbolic"


def test_check_values_1_4_modified_hyperbolic_eur():
    # check-values.md 1.4: qi 1000, Di 1.5, b 1.2, terminal 6 %/yr effective, limit 5 bbl/d:
    # t_el 55.6041 yr, EUR 1,238,477 bbl (1e-6)
    d_lim = nominal_from_tangent_effective(0.06)
    fits, prod = one_well(1000.0, 1.5, 1.2, d_lim=d_lim)
    s, m = forecast_field(fits, prod, settings=DeclineSettings(econ_limit_bopd=5.0, horizon_years=80))
    row = s.iloc[0]
    assert_allclose(row.eur_oil_bbl, 1_238_477.0, rtol=1e-6)
    assert row.model == "modified_hyperbolic"
    # switch at 12.9124 yr (check-values 1.4) after 2020-01-01: 4716.3 d -> 2032-11-29
    assert row.terminal_switch_month == pd.Timestamp("2032-11-01")
    end = pd.Timestamp("2020-01-01") + pd.Timedelta(days=55.6041 * 365.25)
    assert row.econ_limit_date == pd.Timestamp(year=end.year, month=end.month, day=1)


def test_monthly_volumes_are_exact_integrals():
    # Closed-form identity: each month's volume = integral of the rate over the calendar
    # month (scipy.integrate.quad), with the terminal switch inside the forecast
    d_lim = nominal_from_tangent_effective(0.06)
    fits, prod = one_well(800.0, 2.0, 1.5, d_lim=d_lim, n_hist=3)
    s, m = forecast_field(fits, prod, settings=DeclineSettings(econ_limit_bopd=2.0))
    t0 = pd.Timestamp("2020-01-01")
    for i in (0, 7, 100, 150):
        mo = m.month.iloc[i]
        a = (mo - t0).days / DAYS_PER_YEAR
        b_ = (mo + pd.offsets.MonthBegin(1) - t0).days / DAYS_PER_YEAR
        ref, _ = quad(lambda t: float(modified_hyperbolic_rate(t, 800.0, 2.0, 1.5, d_lim)), a, b_, epsrel=1e-12)
        assert_allclose(m.oil_bbl.iloc[i], ref * DAYS_PER_YEAR, rtol=1e-9)


def test_uptime_scales_volumes_and_economic_limit():
    # Common practice: calendar-day volume = producing-day rate x uptime; the limit is on the
    # calendar-day rate, so half uptime reaches a given limit earlier
    full_f, full_p = one_well(300.0, 0.4, 0.0, n_hist=12)
    half_f, half_p = one_well(300.0, 0.4, 0.0, n_hist=12, uptime=0.5)
    st = DeclineSettings(econ_limit_bopd=20.0)
    sf, mf = forecast_field(full_f, full_p, settings=st)
    sh, mh = forecast_field(half_f, half_p, settings=st)
    assert_allclose(sh.uptime_fraction.iloc[0], 0.5, rtol=1e-12)
    assert_allclose(mh.oil_bbl.iloc[0], 0.5 * mf.oil_bbl.iloc[0], rtol=1e-12)
    # exponential: t_el = ln(qi/(q_el/u))/di -> 300/40 vs 300/20
    assert_allclose(np.log(300 / 20) / 0.4 - np.log(300 / 40) / 0.4, np.log(2) / 0.4)
    assert sh.econ_limit_date.iloc[0] < sf.econ_limit_date.iloc[0]


def test_months_on_without_volumes_count_as_down_time():
    # Uptime = producing days / calendar days over the last 12 months on production (our
    # rule, common practice for calendar-day forecasts). Three of the last twelve months
    # report full days on but no oil and no gas: those days produced nothing, so the uptime
    # is 9/12 of the calendar days (with their own month lengths), not 1.
    fits, prod = one_well(300.0, 0.4, 0.0, n_hist=24)
    zero = prod.index[-12:][[2, 5, 9]]
    prod.loc[zero, ["oil_bbl", "gas_mcf"]] = 0.0
    st = DeclineSettings(econ_limit_bopd=20.0)
    sh, mh = forecast_field(fits, prod, settings=st)
    last12 = prod.iloc[-12:]
    want = last12["days_in_month"].drop(zero).sum() / last12["days_in_month"].sum()
    assert_allclose(sh.uptime_fraction.iloc[0], want, rtol=1e-12)
    sf, mf = forecast_field(*one_well(300.0, 0.4, 0.0, n_hist=24), settings=st)
    assert_allclose(mh.oil_bbl.iloc[0], want * mf.oil_bbl.iloc[0], rtol=1e-12)
    # a shut-in month (no days on) is not a month on production: it leaves the window
    fits2, prod2 = one_well(300.0, 0.4, 0.0, n_hist=24)
    prod2.loc[zero, ["oil_bbl", "gas_mcf", "days_on"]] = 0.0
    s2, _ = forecast_field(fits2, prod2, settings=st)
    assert_allclose(s2.uptime_fraction.iloc[0], 1.0, rtol=1e-12)


def test_economic_inputs_and_gas():
    econ = EconomicInputs(oil_price_per_bbl=60.0, opex_per_month=3000.0, royalty=0.125)
    fits, prod = one_well(200.0, 0.3, 0.8, n_hist=6, gas_factor=2.0)
    s, m = forecast_field(fits, prod, settings=DeclineSettings(economics=econ))
    # check-values.md 2: 1.8774 bbl/d for these inputs (no gas credit)
    assert_allclose(s.econ_limit_bopd.iloc[0], economic_limit_rate(oil_price_per_bbl=60.0, opex_per_month=3000.0,
                                                                   royalty=0.125), rtol=1e-12)
    assert s.gas_method.iloc[0] == "own decline"
    # gas on its own curve, 2x the oil curve here -> 2x the oil volumes
    assert_allclose(m.gas_mcf.to_numpy(), 2.0 * m.oil_bbl.to_numpy(), rtol=1e-9)
    # gas without its own fit: oil x recent GOR (2000 scf/STB here)
    s2, m2 = forecast_field(fits[fits.stream == "oil"], prod, settings=DeclineSettings(economics=econ))
    assert s2.gas_method.iloc[0] == "oil x recent GOR"
    assert_allclose(m2.gas_mcf.to_numpy(), 2.0 * m2.oil_bbl.to_numpy(), rtol=1e-9)


def test_horizon_cap_and_below_limit_at_start_and_as_of():
    fits, prod = one_well(100.0, 0.01, 0.0, n_hist=24)
    s, m = forecast_field(fits, prod, settings=DeclineSettings(horizon_years=10))
    assert s.n_forecast_months.iloc[0] == 120 and s.forecast_end_reason.iloc[0] == "horizon"
    assert pd.isna(s.econ_limit_date.iloc[0])
    s2, m2 = forecast_field(fits, prod, settings=DeclineSettings(econ_limit_bopd=150.0))
    assert s2.forecast_end_reason.iloc[0] == "below_limit_at_start" and len(m2) == 0
    assert s2.remaining_oil_bbl.iloc[0] == 0 and s2.eur_oil_bbl.iloc[0] == s2.cum_oil_bbl.iloc[0]
    s3, m3 = forecast_field(fits, prod, settings=DeclineSettings(horizon_years=1), as_of="2020-06")
    assert m3.month.iloc[0] == pd.Timestamp("2020-07-01")
    assert_allclose(s3.cum_oil_bbl.iloc[0], prod.oil_bbl.iloc[:6].sum())


def test_columns_and_unforecast_well():
    fits, prod = one_well(100.0, 0.5, 0.5, n_hist=6)
    extra = pd.DataFrame({"well_id": "W-2", "month": pd.date_range("2020-01-01", periods=3, freq="MS"),
                          "oil_bbl": 0.0, "gas_mcf": 0.0, "days_on": 0.0, "days_in_month": 31})
    s, m = forecast_field(fits, pd.concat([prod, extra]), settings=DeclineSettings(econ_limit_bopd=1.0))
    assert list(s.columns) == SUMMARY_COLUMNS and list(m.columns) == MONTHLY_COLUMNS
    w2 = s.set_index("well_id").loc["W-2"]
    assert w2.status.startswith("not forecast") and w2.remaining_oil_bbl == 0.0
    assert set(m.well_id) == {"W-1"} and (m.kind == "forecast").all()


# ------------------------------------------------------------- properties (issue 9 item 2)
rates = hs.lists(hs.one_of(hs.just(0.0), hs.floats(min_value=0.0, max_value=1e5, allow_nan=False)),
                 min_size=1, max_size=60)


@settings(max_examples=25, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(hs.lists(rates, min_size=1, max_size=4), hs.floats(min_value=0.0, max_value=50.0))
def test_any_nonnegative_history_gives_valid_fit_or_reason(histories, limit):
    parts = []
    for i, q in enumerate(histories):
        months = pd.date_range("2018-01-01", periods=len(q), freq="MS")
        dim = months.days_in_month.to_numpy()
        q = np.asarray(q, float)
        parts.append(pd.DataFrame({"well_id": f"P-{i}", "month": months, "days_on": dim.astype(float),
                                   "days_in_month": dim, "oil_bbl": q * dim, "gas_mcf": q * dim * 0.5,
                                   "oil_rate_bbl_d": q, "gas_rate_mcf_d": q * 0.5}))
    prod = pd.concat(parts, ignore_index=True)
    st = DeclineSettings(workers=1, econ_limit_bopd=limit if limit > 0 else None, horizon_years=30)
    ff = fit_field(prod, settings=st)
    f = ff.fits
    ok = f.forecastable.to_numpy(bool)
    assert (f.status.str.len() > 0).all()
    assert np.isfinite(f.loc[ok, ["qi", "di", "b"]].to_numpy(float)).all()
    assert (f.loc[ok, "qi"] > 0).all() and (f.loc[ok, "di"] > 0).all()
    assert ((f.loc[ok, "b"] >= 0) & (f.loc[ok, "b"] <= st.b_max)).all()
    assert f.loc[~ok, "status"].str.startswith("not fitted").all()
    s, m = forecast_field(ff, prod)
    num = m[["oil_bbl", "gas_mcf", "oil_rate_bopd", "gas_rate_mcf_d", "cum_oil_bbl", "cum_gas_mcf"]].to_numpy(float)
    assert np.isfinite(num).all() and (num >= 0).all()
    vals = s[["cum_oil_bbl", "remaining_oil_bbl", "eur_oil_bbl", "eur_gas_mcf", "remaining_gas_mcf"]].to_numpy(float)
    assert np.isfinite(vals).all() and (vals >= 0).all()
    assert (s.eur_oil_bbl >= s.cum_oil_bbl).all()
    for _, g in m.groupby("well_id"):
        assert (np.diff(g.oil_rate_bopd.to_numpy()) <= 1e-9 * (1 + g.oil_rate_bopd.max())).all()
        assert (np.diff(g.cum_oil_bbl.to_numpy()) >= 0).all()
        assert (np.diff(g.cum_gas_mcf.to_numpy()) >= 0).all()


def test_monthly_sums_equal_summary_and_summary_only_mode():
    # Closed-form identity: the monthly volumes telescope to the remaining volume of the summary
    d_lim = nominal_from_tangent_effective(0.06)
    fits, prod = one_well(600.0, 1.2, 1.1, d_lim=d_lim, n_hist=5, gas_factor=3.0, uptime=0.8)
    st = DeclineSettings(econ_limit_bopd=3.0)
    s, m = forecast_field(fits, prod, settings=st)
    assert_allclose(m.oil_bbl.sum(), s.remaining_oil_bbl.iloc[0], rtol=1e-9)
    assert_allclose(m.gas_mcf.sum(), s.remaining_gas_mcf.iloc[0], rtol=1e-9)
    assert_allclose(m.cum_oil_bbl.iloc[-1], s.eur_oil_bbl.iloc[0], rtol=1e-9)
    s2, m2 = forecast_field(fits, prod, settings=st, monthly=False)
    pd.testing.assert_frame_equal(s, s2)
    assert len(m2) == 0 and list(m2.columns) == MONTHLY_COLUMNS
