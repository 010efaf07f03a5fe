"""Tests of the pure plotly builders in ``dashboard/charts.py`` (no Streamlit needed).

The tables are small, hand-made, in the shape of the data contracts in DEVELOPERS.md.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from dashboard import charts
from dashboard.charts import PALETTE


def _history(n=12, start="2020-01-01"):
    months = pd.date_range(start, periods=n, freq="MS")
    rate = 100.0 * np.exp(-0.05 * np.arange(n))
    rate[3] = 0.0  # a shut-in month: a log axis cannot show it
    days = np.where(rate > 0, 30.0, 0.0)
    oil = rate * days
    return pd.DataFrame(
        {
            "well_id": "W-1",
            "month": months,
            "oil_bbl": oil,
            "oil_rate_bbl_d": np.where(days > 0, rate, np.nan),
            "gas_rate_mcf_d": np.where(days > 0, rate * 0.6, np.nan),
            "gor_scf_stb": np.linspace(600, 900, n),
            "pressure_psia": [3000.0] + [np.nan] * (n - 2) + [1800.0],
            "cum_oil_bbl": np.cumsum(oil),
        }
    )


def _trace(fig, name):
    found = [t for t in fig.data if t.name == name]
    assert found, f"no trace named {name!r}; have {[t.name for t in fig.data]}"
    return found[0]


def test_palette_is_okabe_ito_and_not_the_trade_colour_code():
    # Okabe & Ito (2008), "Color Universal Design", the eight CUD colours (hex values as
    # published in their web guide): black, orange, sky blue, bluish green, yellow, blue,
    # vermillion, reddish purple.
    okabe_ito = {"#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
    for key in ("oil", "gas", "water", "fitted", "forecast", "gor", "pressure"):
        assert PALETTE[key] in okabe_ito, key
    assert set(PALETTE["stage"][s] for s in (1, 2, 3, 4)) <= okabe_ito
    # Four stages and the three streams must be told apart.
    assert len({PALETTE["stage"][s] for s in (1, 2, 3, 4)}) == 4
    assert len({PALETTE["oil"], PALETTE["gas"], PALETTE["water"]}) == 3
    # Our own mapping: not green oil / red gas / blue water (common practice in the trade).
    assert PALETTE["oil"] != "#009E73"
    assert PALETTE["gas"] not in {"#D55E00", "#FF0000"}
    assert PALETTE["water"] not in {"#0072B2", "#56B4E9", "#0000FF"}


def test_rate_time_figure_log_axis_drops_zero_rates_and_splits_excluded():
    h = _history()
    excluded = [pd.Timestamp("2020-06-01"), pd.Timestamp("2020-07-01")]
    fig = charts.rate_time_figure(h, excluded_months=excluded, fit_window=("2020-02-01", "2020-12-01"))
    assert fig.layout.yaxis.type == "log"
    used = _trace(fig, "actual oil")
    left = _trace(fig, "excluded from fit")
    # 12 months, one shut-in (rate NaN) dropped, two excluded: 9 + 2 points.
    assert len(used.x) == 9
    assert len(left.x) == 2
    assert all(y > 0 for y in used.y)
    # The fit window is one shaded rectangle.
    assert len(fig.layout.shapes) == 1


def test_rate_time_figure_draws_fit_forecast_and_limit():
    h = _history()
    fitted = pd.DataFrame({"month": h["month"], "rate": 99.0 * np.exp(-0.05 * np.arange(12))})
    fc_months = pd.date_range("2021-01-01", periods=24, freq="MS")
    forecast = pd.DataFrame({"month": fc_months, "rate": np.linspace(50, 5, 24)})
    fig = charts.rate_time_figure(h, fitted=fitted, forecast=forecast, econ_limit_rate=5.0)
    assert len(_trace(fig, "fitted curve").x) == 12
    assert len(_trace(fig, "forecast").x) == 24
    assert _trace(fig, "forecast").line.color == PALETTE["forecast"]
    # The economic limit is a horizontal line at 5 bbl/d.
    assert any(s.y0 == 5.0 and s.y1 == 5.0 for s in fig.layout.shapes)


def test_rate_time_figure_gas_stream_uses_gas_rates():
    h = _history()
    fig = charts.rate_time_figure(h, stream="gas")
    tr = _trace(fig, "actual gas")
    np.testing.assert_allclose(sorted(tr.y), sorted(h["gas_rate_mcf_d"].dropna()))
    assert "Mcf/d" in fig.layout.yaxis.title.text


def test_rate_time_figure_without_data_says_so():
    h = _history().assign(oil_rate_bbl_d=np.nan)
    fig = charts.rate_time_figure(h)
    assert len(fig.data) == 0
    assert "No positive oil rates" in fig.layout.annotations[0].text


def test_rate_cumulative_figure_uses_cumulative_on_x():
    h = _history()
    fc = pd.DataFrame({"cum_oil_bbl": [40000.0, 41000.0], "rate": [40.0, 38.0]})
    fig = charts.rate_cumulative_figure(h, fc)
    actual = _trace(fig, "actual oil")
    assert list(actual.x) == list(h.loc[h["oil_rate_bbl_d"] > 0, "cum_oil_bbl"])
    assert list(_trace(fig, "forecast").x) == [40000.0, 41000.0]


def test_stage_periods_follow_the_detected_dates():
    p = charts.stage_periods(
        "2010-01-01", "2020-12-01",
        bubble_point_date="2012-05-01", stage2_end_date="2014-01-01", gor_peak_date=pd.NaT,
    )
    assert [s for s, _, _ in p] == [1, 2, 3]
    assert p[0][2] == pd.Timestamp("2012-05-01")
    assert p[-1][2] == pd.Timestamp("2020-12-01")
    # No dates at all: the well is in stage 1 over its whole life.
    p = charts.stage_periods("2010-01-01", "2011-01-01")
    assert p == [(1, pd.Timestamp("2010-01-01"), pd.Timestamp("2011-01-01"))]
    assert charts.stage_periods(pd.NaT, "2011-01-01") == []


def test_gor_pressure_figure_has_two_axes_shading_and_reference_lines():
    h = _history()
    periods = charts.stage_periods("2020-01-01", "2020-12-01", bubble_point_date="2020-05-01")
    expected = pd.DataFrame({"month": h["month"], "gor_scf_stb": 650.0, "pressure_psia": 2500.0})
    fig = charts.gor_pressure_figure(
        h, periods=periods, rsi_scf_stb=600.0, bubble_point_psia=2200.0,
        events={"bubble point": pd.Timestamp("2020-05-01")}, expected=expected,
    )
    assert _trace(fig, "pressure survey").yaxis == "y2"
    assert len(_trace(fig, "pressure survey").x) == 2  # two surveys
    assert _trace(fig, "expected pressure (history match)").yaxis == "y2"
    assert fig.layout.yaxis2.overlaying == "y"
    rects = [s for s in fig.layout.shapes if s.type == "rect"]
    assert len(rects) == 2  # stage 1 and stage 2
    assert rects[0].fillcolor == PALETTE["stage"][1]
    hlines = [s for s in fig.layout.shapes if s.type == "line" and s.y0 == s.y1]
    assert {s.y0 for s in hlines} == {600.0, 2200.0}
    assert any(a.text == "bubble point" for a in fig.layout.annotations)


def test_stage_share_figure_stacks_shares_per_unit():
    units = pd.DataFrame(
        {
            "unit": ["North", "South"],
            "n_wells": [4, 2],
            "share_stage_1": [0.25, 0.0],
            "share_stage_2": [0.25, 0.0],
            "share_stage_3": [0.5, 0.5],
            "share_stage_4": [0.0, 0.0],
            "share_not_applicable": [0.0, 0.5],
        }
    )
    fig = charts.stage_share_figure(units)
    assert fig.layout.barmode == "stack"
    assert len(fig.data) == 5
    s3 = [t for t in fig.data if t.name.startswith("Stage 3")][0]
    assert list(s3.x) == [0.5, 0.5]
    assert list(s3.y) == ["North (4 wells)", "South (2 wells)"]
    # Closed-form identity: each unit's shares add to one.
    totals = np.sum([np.asarray(t.x, dtype=float) for t in fig.data], axis=0)
    np.testing.assert_allclose(totals, 1.0)


def test_planning_status_figure_colours_by_status():
    counts = pd.DataFrame({"planning_status": ["window_open", "window_passed"], "wells": [3, 5]})
    fig = charts.planning_status_figure(counts)
    bar = fig.data[0]
    assert list(bar.y) == [3, 5]
    assert list(bar.marker.color) == [PALETTE["planning"]["window_open"], PALETTE["planning"]["window_passed"]]


def test_field_rate_figure_splits_actual_and_forecast():
    months = pd.date_range("2020-01-01", periods=6, freq="MS")
    field = pd.DataFrame(
        {"month": months, "kind": ["actual"] * 3 + ["forecast"] * 3, "oil_rate_bopd": [9, 8, 7, 6, 5, 4.0]}
    )
    fig = charts.field_rate_figure(field)
    assert list(_trace(fig, "field oil rate, actual").y) == [9, 8, 7]
    assert list(_trace(fig, "field oil rate, forecast").y) == [6, 5, 4]


@pytest.mark.parametrize(
    "builder",
    [
        lambda: charts.stage_share_figure(pd.DataFrame()),
        lambda: charts.planning_status_figure(pd.DataFrame()),
        lambda: charts.field_rate_figure(pd.DataFrame()),
        lambda: charts.gor_pressure_figure(pd.DataFrame({"month": [], "gor_scf_stb": []})),
        lambda: charts.type_well_figure(pd.DataFrame()),
    ],
)
def test_empty_inputs_give_a_message_not_an_error(builder):
    fig = builder()
    assert len(fig.data) == 0
    assert fig.layout.annotations[0].text.startswith("No ")


def test_calendar_day_rates_divide_by_the_days_of_each_month():
    # Calendar identity: January has 31 days, February 2024 29 (leap year), April 30.
    m = pd.DataFrame({"month": pd.to_datetime(["2025-01-01", "2024-02-01", "2025-04-01"]),
                      "oil_bbl_p90": [3100.0, 290.0, 0.0], "oil_bbl_p50": [6200.0, 580.0, 30.0],
                      "oil_bbl_p10": [9300.0, 870.0, 60.0]})
    r = charts.calendar_day_rates(m)
    assert list(r["rate_p90"]) == [100.0, 10.0, 0.0]
    assert list(r["rate_p50"]) == [200.0, 20.0, 1.0]
    assert list(r["rate_p10"]) == [300.0, 30.0, 2.0]


def test_log_ticks_carry_full_values_at_1_2_5_steps():
    t = charts.log_ticks([1.2, 130.0])
    # 1-2-5 steps per decade (common practice for log scales), every label the full number
    assert [1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0, 200.0] == t["tickvals"]
    assert t["ticktext"] == ["1", "2", "5", "10", "20", "50", "100", "200"]
    assert charts.log_ticks([]) == {}
    fig = charts.rate_time_figure(_history())
    assert fig.layout.yaxis.tickmode == "array" and all(not str(x).startswith("2,") for x in fig.layout.yaxis.ticktext)


def test_rate_time_figure_band_and_the_forecast_ends_at_the_limit():
    h = _history()
    fc = pd.DataFrame({"month": pd.date_range("2021-01-01", periods=4, freq="MS"),
                       "rate": [40.0, 30.0, 20.0, 3.0]})  # last month: a part month below the limit
    band = pd.DataFrame({"month": fc["month"], "rate_p90": [30.0, 20.0, 0.0, 0.0],
                         "rate_p50": [40.0, 30.0, 20.0, 0.0], "rate_p10": [50.0, 40.0, 30.0, 10.0]})
    fig = charts.rate_time_figure(h, forecast=fc, econ_limit_rate=10.0, band=band)
    assert list(_trace(fig, "forecast").y) == [40.0, 30.0, 20.0]
    low = _trace(fig, "P90-P10 range")
    assert low.fill == "tonexty"
    # drawn down to the limit and no lower: a P90 under it at the limit, a P50 under it left off
    assert list(low.y) == [30.0, 20.0, 10.0, 10.0]
    mid = list(_trace(fig, "P50").y)
    assert mid[:3] == [40.0, 30.0, 20.0] and np.isnan(mid[3])
    # without a limit: zeros (not drawable on a log axis) are gaps
    free = charts.rate_time_figure(h, forecast=fc, band=band)
    assert list(_trace(free, "P90-P10 range").y[:2]) == [30.0, 20.0] and all(np.isnan(v) for v in _trace(free, "P90-P10 range").y[2:])
    # without a limit the forecast is drawn whole
    assert len(_trace(charts.rate_time_figure(h, forecast=fc), "forecast").y) == 4


def test_field_rate_figure_draws_the_field_band():
    field = pd.DataFrame({"month": pd.date_range("2020-01-01", periods=2, freq="MS"), "kind": ["actual", "forecast"],
                          "oil_rate_bopd": [9.0, 8.0]})
    band = pd.DataFrame({"month": field["month"], "rate_p90": [7.0, 6.0], "rate_p50": [8.0, 7.0], "rate_p10": [9.0, 8.0]})
    fig = charts.field_rate_figure(field, band=band)
    assert list(_trace(fig, "field P90-P10 range").y) == [7.0, 6.0]


def test_type_well_figure_draws_percentiles_counts_and_fit():
    curve = pd.DataFrame({"month_index": [0, 1, 2], "n_wells": [9, 8, 6],
                          "oil_rate_bbl_d_p90": [50.0, 40.0, 30.0], "oil_rate_bbl_d_p50": [100.0, 80.0, 60.0],
                          "oil_rate_bbl_d_p10": [200.0, 150.0, 120.0], "oil_rate_bbl_d_mean": [110.0, 90.0, 70.0],
                          "oil_rate_bbl_d_p50_fit": [98.0, 81.0, 61.0]})
    fig = charts.type_well_figure(curve, fit_label="hyperbolic")
    assert list(_trace(fig, "wells contributing").y) == [9, 8, 6]
    assert _trace(fig, "wells contributing").yaxis == "y2"
    assert list(_trace(fig, "P90 (low)").y) == [50.0, 40.0, 30.0]
    assert list(_trace(fig, "P10 (high)").y) == [200.0, 150.0, 120.0]
    assert list(_trace(fig, "Arps fit of the P50 (hyperbolic)").y) == [98.0, 81.0, 61.0]
    assert fig.layout.yaxis.type == "log"


def test_economic_limit_label_sits_on_its_line_on_the_log_axis():
    # plotly positions annotations on a log axis by log10 of the value (plotly.js axis
    # reference: "if the axis type is log, then you must take the log of your desired range")
    fig = charts.rate_time_figure(_history(), econ_limit_rate=5.0)
    label = [a for a in fig.layout.annotations if a.text.startswith("economic limit")][0]
    line = [s for s in fig.layout.shapes if s.type == "line"][0]
    assert line.y0 == 5.0
    assert label.y == pytest.approx(np.log10(5.0))
