"""Tests of core.stages: stage tracker and waterflood planning status.

Sources of the expected values are given beside each check. The four-stage GOR picture is
Tarner (1944) / Muskat (1945) as presented in Ahmed's Reservoir Engineering Handbook
(check-values 5.3); the planning rules cite check-values 8.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from core.stages import (
    PLANNING_RULES,
    PLANNING_STATUSES,
    REGIME_MIN_MONTHS,
    crossing_from_surveys,
    planning_status,
    regime_start_index,
    track_units,
    track_wells,
    unit_monthly,
)

WELL_COLUMNS = [
    "well_id", "stage", "stage_reason", "stage_confidence", "rsi_scf_stb", "bubble_point_psia",
    "bubble_point_date", "stage2_end_date", "gor_peak_date", "gor_peak_scf_stb", "passed_gor_peak",
    "planning_status", "planning_rule", "months_since_event", "months_to_gor_peak_est", "regime_start",
    "stage_evidence",
]


def _table(well_id, gor, *, start="2015-01-01", oil=None, days=None, pressure=None, unit="U1", gas=True):
    """A tidy monthly table for one well from a GOR series (scf/STB)."""
    n = len(gor)
    months = pd.date_range(start, periods=n, freq="MS")
    dim = months.days_in_month.to_numpy().astype(float)
    days = dim.copy() if days is None else np.asarray(days, float)
    oil = np.where(days > 0, 300.0 * days * np.exp(-0.01 * np.arange(n)), 0.0) if oil is None else np.asarray(oil, float)
    t = pd.DataFrame({
        "well_id": well_id, "month": months, "unit": unit, "oil_bbl": oil,
        "gas_mcf": np.where(oil > 0, oil * np.asarray(gor, float) / 1000.0, 0.0),
        "water_bbl": 0.0, "days_on": days, "days_in_month": dim,
        "pressure_psia": np.nan if pressure is None else np.asarray(pressure, float),
    })
    if not gas:
        t = t.drop(columns="gas_mcf")
    return t


def _shape(n, rsi, tb, d2, d3, *, dip=0.12, ratio=6.0, decline=0.5, d4=24.0):
    """Four-stage ln GOR shape with known dates (indices): crossing tb, stage-2 end tb+d2,
    peak tb+d2+d3 (a stand-in with the Tarner shape of check-values 5.3, not the
    material-balance model)."""
    t = np.arange(n, dtype=float)
    ln = np.full(n, np.log(rsi))
    s2 = (t >= tb) & (t < tb + d2)
    ln[s2] += np.log(1 - dip * np.sin(np.pi * (t[s2] - tb) / d2))
    s3 = (t >= tb + d2) & (t < tb + d2 + d3)
    ln[s3] += np.log(ratio) * np.sin(np.pi / 2 * (t[s3] - tb - d2) / d3)
    s4 = t >= tb + d2 + d3
    v = (t[s4] - tb - d2 - d3) / d4
    ln[s4] += np.log(ratio) - decline * np.log(ratio) * np.minimum(v, 1.0) ** 2
    return np.exp(ln)


def _noisy(gor, sigma, seed):
    rng = np.random.default_rng(seed)
    return gor * np.exp(rng.normal(0.0, sigma, len(gor)))


def _row(out, well):
    return out.set_index("well_id").loc[well]


# ---------------------------------------------------------------------------------------
# contract
# ---------------------------------------------------------------------------------------
def test_track_wells_contract_columns_and_types():
    prod = _table("A-1", _noisy(_shape(120, 600.0, 30, 15, 40), 0.08, 1))
    out = track_wells(prod, None, None)
    assert list(out.columns) == WELL_COLUMNS
    assert str(out["stage"].dtype) == "Int64"
    for c in ("bubble_point_date", "stage2_end_date", "gor_peak_date", "regime_start"):
        assert str(out[c].dtype).startswith("datetime64")
    assert out["passed_gor_peak"].dtype == bool
    assert set(out["planning_status"]) <= set(PLANNING_STATUSES)


def test_regime_start_is_the_latest_boundary_with_enough_months():
    # Our rule (common practice, see core.stages.REGIME_MIN_MONTHS): the fit starts at the
    # latest stage boundary passed at least REGIME_MIN_MONTHS months before the as-of month.
    k = REGIME_MIN_MONTHS
    as_of = 500
    stage = np.array([1, 2, 3, 3, 4, 4, 4, np.nan])
    bp = np.array([np.nan, 400, 300, 300, 200, 200, 200, 300])
    s2 = np.array([np.nan, np.nan, as_of - k, as_of - k + 1, 250, 250, as_of - k + 1, np.nan])
    pk = np.array([np.nan, np.nan, np.nan, np.nan, as_of - k, as_of - k + 1, as_of - 5, np.nan])
    got = regime_start_index(stage, bp, s2, pk, as_of)
    want = np.array([np.nan, 400, as_of - k, 300, as_of - k, 250, 200, np.nan])
    np.testing.assert_array_equal(got, want)


def test_four_clean_wells_get_their_stages_and_dates():
    # Stand-in shapes with known dates (see _shape); 5 % noise, GOR-only rules (no header).
    n = 150
    cases = {  # well: (tb, d2, d3, expected stage at month n-1)
        "S1": (200, 15, 40, 1),
        "S2": (120, 40, 40, 2),
        "S3": (60, 15, 120, 3),
        "S4": (30, 15, 40, 4),
    }
    prod = pd.concat([_table(w, _noisy(_shape(n, 700.0, *c[:3], dip=0.15), 0.05, k))
                      for k, (w, c) in enumerate(cases.items())], ignore_index=True)
    out = track_wells(prod, None, None)
    start = pd.Timestamp("2015-01-01")
    for w, (tb, d2, d3, st) in cases.items():
        r = _row(out, w)
        assert r["stage"] == st, (w, r["stage_evidence"])
        assert r["planning_status"] == planning_status([st])[0]
        if st >= 2:
            bp = start + pd.DateOffset(months=tb)
            assert abs((r["bubble_point_date"] - bp).days) <= 4 * 31, w
            # the fit starts at the latest stage boundary passed at least REGIME_MIN_MONTHS
            # before the last month (our rule, common practice), else at the bubble point
            last = prod.loc[prod["well_id"] == w, "month"].max()
            later = [r[c] for c in ("stage2_end_date", "gor_peak_date")[: st - 2]
                     if pd.notna(r[c]) and (last.year - r[c].year) * 12 + last.month - r[c].month >= REGIME_MIN_MONTHS]
            assert r["regime_start"] == (later[-1] if later else r["bubble_point_date"]), w
        else:
            assert pd.isna(r["regime_start"])
        if st >= 3:
            s2 = start + pd.DateOffset(months=tb + d2)
            assert abs((r["stage2_end_date"] - s2).days) <= 3 * 31, w
        if st == 4:
            pk = start + pd.DateOffset(months=tb + d2 + d3)
            assert r["passed_gor_peak"]
            assert abs((r["gor_peak_date"] - pk).days) <= 4 * 31, w
            # peak value: the smoothed GOR near 700 x 6 = 4200 scf/STB (shape definition)
            assert r["gor_peak_scf_stb"] == pytest.approx(4200.0, rel=0.1)
        else:
            assert not r["passed_gor_peak"] and pd.isna(r["gor_peak_date"])
    # Rsi from the early plateau: the stand-in's 700 scf/STB within the 5 % noise
    assert _row(out, "S1")["rsi_scf_stb"] == pytest.approx(700.0, rel=0.04)


# ---------------------------------------------------------------------------------------
# noise, spikes, gaps
# ---------------------------------------------------------------------------------------
def test_single_noisy_spike_does_not_declare_a_peak_or_stage_change():
    # Flat GOR (stage 1) with one month at 4x: a metering error, not a stage change.
    gor = _noisy(np.full(60, 500.0), 0.05, 3)
    gor[40] *= 4.0
    r = _row(track_wells(_table("SP-1", gor), None, None), "SP-1")
    assert r["stage"] == 1
    assert not r["passed_gor_peak"]
    assert pd.isna(r["stage2_end_date"]) and pd.isna(r["gor_peak_date"])


def test_single_spike_in_a_rising_gor_is_not_a_peak():
    # Stage 3 (rising GOR) with a one-month spike six months before the end.
    gor = _noisy(_shape(100, 600.0, 20, 15, 200), 0.05, 4)
    gor[93] *= 3.0
    r = _row(track_wells(_table("SP-2", gor), None, None), "SP-2")
    assert r["stage"] == 3
    assert not r["passed_gor_peak"]


def test_shut_in_gap_and_low_uptime_do_not_create_a_stage_change():
    # Flat GOR with an 8-month shut-in (oil 0, days_on 0), 6 missing months and low-uptime
    # months carrying distorted GOR: still stage 1, no crossing.
    n = 90
    gor = _noisy(np.full(n, 800.0), 0.06, 5)
    days = np.full(n, 30.0)
    days[30:38] = 0.0
    days[[50, 51]] = 3.0
    gor[[50, 51]] *= 0.4
    prod = _table("G-1", gor, days=days)
    prod = prod.drop(index=range(60, 66))
    r = _row(track_wells(prod, None, None), "G-1")
    assert r["stage"] == 1
    assert pd.isna(r["bubble_point_date"])
    assert r["planning_status"] == "window_ahead"


def test_gap_does_not_move_the_stage_dates():
    # The same stage-4 well with and without a 10-month shut-in in stage 3: stage-2 end
    # unchanged (before the gap), stage unchanged. Regression against the ungapped run.
    gor = _noisy(_shape(150, 700.0, 30, 15, 40), 0.05, 6)
    days = np.full(150, 30.0)
    days[70:80] = 0.0
    a = _row(track_wells(_table("H-1", gor), None, None), "H-1")
    b = _row(track_wells(_table("H-1", gor, days=days), None, None), "H-1")
    assert a["stage"] == b["stage"] == 4
    assert a["stage2_end_date"] == b["stage2_end_date"]


# ---------------------------------------------------------------------------------------
# not applicable
# ---------------------------------------------------------------------------------------
def test_gas_condensate_well_is_not_applicable_with_reason():
    prod = pd.concat([_table("GC-1", np.full(40, 12000.0)), _table("OIL-1", np.full(40, 600.0))])
    fluids = pd.DataFrame({"well_id": ["GC-1", "OIL-1"], "fluid_type": ["gas_condensate", "black_oil"]})
    out = track_wells(prod, None, fluids)
    r = _row(out, "GC-1")
    assert pd.isna(r["stage"])
    assert "not an oil well" in r["stage_reason"] and "gas_condensate" in r["stage_reason"]
    assert r["stage_confidence"] == ""
    assert r["planning_status"] == "not_applicable"
    assert _row(out, "OIL-1")["stage"] == 1


def test_well_without_gas_column_is_not_applicable_with_reason():
    r = _row(track_wells(_table("NG-1", np.full(30, 600.0), gas=False), None, None), "NG-1")
    assert pd.isna(r["stage"])
    assert "no gas data" in r["stage_reason"]
    assert r["planning_status"] == "not_applicable"
    assert np.isnan(r["months_since_event"])


def test_too_little_history_is_not_applicable():
    r = _row(track_wells(_table("SH-1", np.full(4, 600.0)), None, None), "SH-1")
    assert pd.isna(r["stage"]) and "too little history" in r["stage_reason"]


def test_missing_required_column_raises_input_error():
    with pytest.raises(ValueError, match="lacks column"):
        track_wells(pd.DataFrame({"well_id": ["A"], "month": [pd.Timestamp("2020-01-01")]}))


# ---------------------------------------------------------------------------------------
# pressure surveys
# ---------------------------------------------------------------------------------------
def test_crossing_linear_interpolation_hand_calculation():
    # Hand calculation: last survey above Pb at x = 100,000 bbl, 2,200 psia; first below at
    # 200,000 bbl, 2,000 psia; Pb 2,100 psia -> x* = 100,000 + (100/200) 100,000 = 150,000.
    s = pd.DataFrame({"sid": ["W", "W"], "x": [1.0e5, 2.0e5], "p": [2200.0, 2000.0]})
    r = crossing_from_surveys(s, pd.Series({"W": 2100.0})).loc["W"]
    assert r["x_cross"] == pytest.approx(150_000.0, rel=1e-12)
    assert "linear interpolation" in r["cross_rule"]


def test_crossing_trend_above_bubble_point_hand_calculation():
    # Points above Pb: (0, 3000) initial, (50,000, 2,750), (100,000, 2,500) psia: exact line
    # p = 3000 - 0.005 x. Pb 2,100 -> x* = 180,000 bbl (hand calculation), inside the
    # bracket [100,000, 300,000] of the first survey below.
    s = pd.DataFrame({"sid": ["W"] * 3, "x": [5.0e4, 1.0e5, 3.0e5], "p": [2750.0, 2500.0, 1800.0]})
    r = crossing_from_surveys(s, pd.Series({"W": 2100.0}), pd.Series({"W": 3000.0})).loc["W"]
    assert r["x_cross"] == pytest.approx(180_000.0, rel=1e-9)
    assert r["n_above"] == 3
    # no survey below: forward extrapolation allowed over at most the fitted span (100,000)
    s2 = s.iloc[:2]
    r2 = crossing_from_surveys(s2, pd.Series({"W": 2100.0}), pd.Series({"W": 3000.0})).loc["W"]
    assert r2["x_cross"] == pytest.approx(180_000.0, rel=1e-9)
    r3 = crossing_from_surveys(s2, pd.Series({"W": 1500.0}), pd.Series({"W": 3000.0})).loc["W"]
    assert np.isnan(r3["x_cross"])  # x* = 300,000 > 100,000 + 100,000: not extrapolated


def test_crossing_back_trend_below_bubble_point_hand_calculation():
    # One point above (2,300 psia at 100,000) then three below on p = 2,150 - 0.001 (x - 150,000)
    # -> back-extrapolated Pb 2,100 at x* = 200,000 (hand calculation), inside [100,000, 250,000].
    x = np.array([1.0e5, 2.5e5, 3.5e5, 4.5e5])
    p = np.array([2300.0, 2150.0 - 0.001 * 1.0e5, 2150.0 - 0.001 * 2.0e5, 2150.0 - 0.001 * 3.0e5])
    s = pd.DataFrame({"sid": "W", "x": x, "p": p})
    r = crossing_from_surveys(s, pd.Series({"W": 2100.0})).loc["W"]
    assert r["x_cross"] == pytest.approx(200_000.0, rel=1e-9)


def test_well_crossing_month_from_surveys_hand_calculation():
    # Constant 9,000 bbl/month (days_on given, 300 bbl/d x 30 d), surveys in month 10
    # (2,200 psia) and month 20 (2,000 psia), Pb 2,100, no initial pressure. Mid-month
    # cumulative: 9,000 (k + 0.5). Linear interpolation: x* = 9,000 x 15.5 = 139,500 bbl,
    # reached at the end of month index 15 (cumulative 144,000) -> 2016-04 (hand calculation).
    n = 40
    p = np.full(n, np.nan)
    p[10], p[20] = 2200.0, 2000.0
    prod = _table("P-1", _noisy(np.full(n, 600.0), 0.03, 7), oil=np.full(n, 9000.0),
                  days=np.full(n, 30.0), pressure=p)
    wells = pd.DataFrame({"well_id": ["P-1"], "bubble_point_psia": [2100.0]})
    r = _row(track_wells(prod, wells, None), "P-1")
    assert r["bubble_point_date"] == pd.Timestamp("2016-04-01")
    assert r["stage"] == 2 and r["planning_status"] == "window_open"
    assert "pressure surveys" in r["stage_evidence"]


# ---------------------------------------------------------------------------------------
# units
# ---------------------------------------------------------------------------------------
def test_unit_monthly_is_the_summed_volume_gor():
    # Closed-form identity: unit GOR = 1000 sum(gas) / sum(oil) = oil-weighted mean of the
    # wells' GORs; cumulative totals are plain sums.
    a = _table("A", np.full(12, 500.0), oil=np.full(12, 1000.0))
    b = _table("B", np.full(12, 2000.0), oil=np.full(12, 3000.0))
    prod = pd.concat([a, b], ignore_index=True)
    u = unit_monthly(prod)
    assert np.allclose(u["gor_scf_stb"], (1000 * 500 + 3000 * 2000) / 4000.0, rtol=1e-12)
    assert np.allclose(u["oil_bbl"], 4000.0)
    ws = track_wells(prod, None, None)
    ut = track_units(prod, ws, None).set_index("unit").loc["U1"]
    assert ut["cum_oil_bbl"] == pytest.approx(prod["oil_bbl"].sum(), rel=1e-12)
    assert ut["cum_gas_mcf"] == pytest.approx(prod["gas_mcf"].sum(), rel=1e-12)
    assert ut["n_wells"] == 2
    assert ut["gor_scf_stb"] == pytest.approx(1625.0, rel=1e-12)


def test_unit_leaves_out_not_applicable_wells_and_reports_shares():
    oil = _table("O", _noisy(np.full(48, 600.0), 0.05, 8))
    gc = _table("C", np.full(48, 15000.0))
    prod = pd.concat([oil, gc], ignore_index=True)
    fluids = pd.DataFrame({"well_id": ["O", "C"], "fluid_type": ["black_oil", "gas_condensate"]})
    ws = track_wells(prod, None, fluids)
    u = unit_monthly(prod, ws)
    assert np.allclose(u["gor_scf_stb"], 1000 * oil["gas_mcf"].to_numpy() / oil["oil_bbl"].to_numpy())
    ut = track_units(prod, ws, None).set_index("unit").loc["U1"]
    assert ut["share_stage_1"] == 0.5 and ut["share_not_applicable"] == 0.5
    assert ut["stage"] == 1 and ut["planning_status"] == "window_ahead"


# ---------------------------------------------------------------------------------------
# planning status
# ---------------------------------------------------------------------------------------
def test_planning_status_per_stage_and_rule_sources():
    # Vocabulary and sourcing per DEVELOPERS.md and check-values section 8.
    got = planning_status(pd.array([1, 2, 3, 4, pd.NA], dtype="Int64"))
    assert list(got) == ["window_ahead", "window_open", "window_closing", "window_passed", "not_applicable"]
    assert "Holmgren" in PLANNING_RULES["window_open"] and "RI 7911" in PLANNING_RULES["window_open"]
    assert "from memory" in PLANNING_RULES["window_closing"] and "common practice" in PLANNING_RULES["window_closing"]
    assert "common practice" in PLANNING_RULES["window_ahead"]
    assert "Craig" in PLANNING_RULES["window_passed"]


def test_months_since_event_and_months_to_peak():
    # Four stage-4 analogues (peak 40 producing months after the stage-2 end) and one well
    # 10 months into stage 3: estimate = median analogue duration - 10, within the
    # detection tolerance of the dates.
    n = 150
    wells = [_table(f"A{k}", _noisy(_shape(n, 700.0, 30, 15, 40), 0.04, 20 + k)) for k in range(4)]
    wells.append(_table("B", _noisy(_shape(n, 700.0, n - 26, 15, 40), 0.04, 30)))
    out = track_wells(pd.concat(wells, ignore_index=True), None, None)
    b = _row(out, "B")
    assert b["stage"] == 3
    assert b["months_since_event"] == pytest.approx(10.0, abs=3.0)
    assert b["months_to_gor_peak_est"] == pytest.approx(30.0, abs=6.0)
    a = _row(out, "A0")
    assert a["months_to_gor_peak_est"] == 0.0
    # peak at month index 85 by construction; the stand-in's top is flat (quadratic
    # decline: the GOR is within 1.5 % of the peak over +-4 months), so allow 6 months
    assert a["months_since_event"] == pytest.approx(n - 1 - 85, abs=6.0)


# ---------------------------------------------------------------------------------------
# accuracy on the material-balance well model (fixed seed, smaller than the script)
# ---------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def accuracy():
    from scripts.stage_accuracy import measure

    return measure(240, seed=11)


def test_accuracy_stage_at_end_of_history(accuracy):
    # Issue 5 target: stage at the end of history correct for >= 90 % of wells.
    assert accuracy["stage_correct"] >= 0.90


def test_accuracy_no_peak_declared_before_the_peak(accuracy):
    # Issue 5 target: no peak declared in >= 95 % of wells that have not reached one.
    assert accuracy["no_false_peak"] >= 0.95


def test_accuracy_bubble_point_month_with_surveys(accuracy):
    # Issue 5: bubble-point month within 3 months where surveys exist (no numeric target
    # given; 70 % is our floor, measured 87-90 % on the script's 600-well fields).
    assert accuracy["bp_within_3_surveys"] >= 0.70


def test_accuracy_gor_peak_month_within_3_months(accuracy):
    # Issue 5 target: GOR peak month within 3 months for >= 80 % of wells past the peak.
    # Measured 82.8 % on this set with the oil-rate term (78.1 % matching GOR and surveys only).
    assert accuracy["peak_within_3"] >= 0.80


def test_accuracy_gor_peak_month_with_productivity_drift():
    # The same set with each well's productivity index drifting by a random -5..+5 % a year
    # (skin build-up or clean-up, core.well_model j_drift_per_yr), which a rate match that
    # assumed a constant J mistook for depletion (measured 53-66 % at +-3-8 %/yr before the
    # drift term). Issue 5's 80 % must still hold; measured 84.7 % (GOR and surveys only 81.4 %).
    from scripts.stage_accuracy import measure

    r = measure(240, seed=11, j_drift=0.05)
    assert r["peak_within_3"] >= 0.80
    assert r["no_false_peak"] >= 0.95


# ---------------------------------------------------------------------------------------
# oil-rate term of the material-balance match
# ---------------------------------------------------------------------------------------
def _group_pwf(evidence: pd.Series) -> pd.Series:
    return evidence.str.extract(r"group flowing pressure (\d+) psia")[0].astype(float)


def test_rate_match_recovers_each_units_flowing_pressure(accuracy):
    # Known answer: the generator's minimum flowing pressure of each fluid/rock set
    # (core.well_model._default_fluids; unit U<k> uses set k-1), an input the tracker never
    # sees. It is fitted per PVT group from the shape of the oil rate late in life; measured
    # errors 4-10 psia on this set, so 40 psia is a wide tolerance.
    from core.well_model import _default_fluids

    w = accuracy["wells_table"]
    unit = accuracy["load"].production.groupby("well_id")["unit"].first()
    fitted = _group_pwf(w["stage_evidence"]).groupby(w["well_id"].map(unit)).median()
    sets = _default_fluids()
    assert len(fitted.dropna()) == 4
    for u, pwf in fitted.items():
        assert abs(pwf - sets[(int(u[1:]) - 1) % len(sets)].p_wf_psia) <= 40.0, (u, pwf)
    # the rates of the generator follow the model: the term is used for nearly every match
    assert accuracy["rate_used"] >= 0.9


def test_rate_match_dropped_for_a_well_whose_rate_does_not_follow_depletion():
    # A well whose rate per producing day swings with an operating cycle (its reported days
    # on scaled by 0.7 + 0.3 sin(month / 8): volumes, cumulative oil and GOR untouched)
    # cannot be placed on its path by the rate shape: the rate residual exceeds 1.6 x its
    # noise + 0.04 and the well is matched on GOR and surveys alone, said in its evidence.
    # The other wells keep the rate term.
    from core.production import load_production
    from core.well_model import synthetic_field

    field = synthetic_field(60, seed=3, non_oil_share=0.0)
    prod = field.production.copy()
    truth = field.truth.set_index("well_id")
    long_ = prod.groupby("well_id").size()
    target = truth.index[(truth["final_stage"] >= 3)].intersection(long_[long_ >= 120].index)[0]
    rows = (prod["well_id"] == target).to_numpy()
    k = np.arange(rows.sum())
    prod.loc[rows, "days_on"] = np.round(prod.loc[rows, "days_on"].to_numpy() * (0.7 + 0.3 * np.sin(k / 8.0)))
    load = load_production(prod, file_name="cycled.csv", well_header=field.wells)
    w = track_wells(load.production, load.wells, None).set_index("well_id")
    assert "stage and dates from a material-balance GOR match" in w.loc[target, "stage_evidence"]
    assert "oil rate not used" in w.loc[target, "stage_evidence"]
    others = w.drop(index=target)["stage_evidence"]
    assert others.str.contains("oil rate per producing day matched").mean() >= 0.8
    # switched off, no well mentions the rate
    w0 = track_wells(load.production, load.wells, None, rate_match=False)
    assert not w0["stage_evidence"].str.contains("oil rate").any()


def test_accuracy_gor_peak_month_error_distribution(accuracy):
    # Floors ours (regression on our own measurement, not a target of the issue): the
    # declared peak months of the wells past the peak, median error <= 2 months and 80th
    # percentile <= 5 months (measured 2 and 3.6 on this set, 1-2 and 3-4 on the 600-well fields).
    assert accuracy["peak_error_median"] <= 2.0
    assert accuracy["peak_error_p80"] <= 5.0


def test_tarner_path_peak_placed_between_pressure_steps():
    # The GOR maximum of a tabulated Tarner path is quantised to one pressure step; the path
    # used by the match (120 steps) places it at the vertex of the parabola through the three points
    # around the tabulated maximum. Check (convergence of our own Tarner stepping, values
    # from our code, core.material_balance.predict_depletion): a path 25x finer than the
    # coarse one (3000 steps) is the reference; the vertex of the 120-step path lies within
    # 0.02 % of it, closer than the 120-step tabulated maximum.
    import warnings

    from core.material_balance import predict_depletion
    from core.relperm import CoreyGasOil
    from core.stages import _mb_curve, _mb_pvt

    key, (sgc, swc, sorg) = (36.0, 0.78, 185.0, 2400.0, 3400.0), (0.06, 0.21, 0.15)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = predict_depletion(_mb_pvt(*key), CoreyGasOil(swc=swc, sgc=sgc, sorg=sorg), pi_psia=3400.0,
                                p_abandon_psia=96.0, dp_psia=(2400.0 - 96.0) / 3000.0, n_steps_above=20)
        c = _mb_curve(*key, sgc, swc, sorg)
    r_ref = ref.np_over_n_gor_peak
    r_tab = c["r"][int(np.argmax(c["gor"]))]
    assert abs(c["r_pk"] / r_ref - 1.0) < 2e-4
    assert abs(c["r_pk"] - r_ref) < abs(r_tab - r_ref)


def test_accuracy_gor_peak_month_against_the_flat_top_band(accuracy):
    # SECOND figure, not the target: the declared peak month within 3 months of the
    # band where the generator's noise-free GOR is within 1 % of its maximum (truth columns
    # gor_peak_band_start/end_month of core.well_model). Floor 85 % is ours (measured 92-100 %).
    assert accuracy["peak_band_within_3"] >= 0.85
    # the band is wide: the truth month is ill-posed to well beyond +-3 months
    assert accuracy["peak_band_width_median"] > 12


# ---------------------------------------------------------------------------------------
# evidence, confidence, invariance
# ---------------------------------------------------------------------------------------
def test_gor_rise_while_a_survey_reads_above_bubble_point_is_not_stage_3():
    # A GOR climbing 40 % above Rsi while the surveys still read above Pb cannot be solution
    # gas (check-values 5.3: stage 3 needs p < Pb); it is flagged, not staged.
    n = 60
    gor = _noisy(np.r_[np.full(40, 600.0), np.linspace(600.0, 840.0, 20)], 0.03, 9)
    p = np.full(n, np.nan)
    p[[5, 30, 58]] = [3000.0, 2800.0, 2600.0]
    wells = pd.DataFrame({"well_id": ["R-1"], "bubble_point_psia": [2100.0]})
    r = _row(track_wells(_table("R-1", gor, pressure=p), wells, None), "R-1")
    assert r["stage"] == 1
    assert "GOR rise above Rsi without a bubble-point crossing" in r["stage_evidence"]


def test_confidence_lower_for_short_noisy_history():
    # Same flat stage-1 well: 60 months at 4 % noise vs 10 months at 20 % noise (common practice:
    # more data and less noise -> more confidence).
    a = _row(track_wells(_table("C-1", _noisy(np.full(60, 600.0), 0.04, 10)), None, None), "C-1")
    b = _row(track_wells(_table("C-2", _noisy(np.full(10, 600.0), 0.20, 11)), None, None), "C-2")
    order = {"low": 0, "medium": 1, "high": 2}
    assert order[a["stage_confidence"]] > order[b["stage_confidence"]]


def test_as_of_cuts_the_history():
    # The stage-4 stand-in seen at month 60 (inside stage 3 by construction: peak at 85).
    gor = _noisy(_shape(150, 700.0, 30, 15, 40), 0.04, 12)
    r = _row(track_wells(_table("T-1", gor), None, None, as_of="2019-12-01"), "T-1")
    assert r["stage"] == 3 and not r["passed_gor_peak"]


def test_row_order_does_not_change_the_result():
    # Invariance: the tracker sorts internally; a shuffled table gives the same table.
    prod = pd.concat([_table(f"I{k}", _noisy(_shape(120, 650.0, 20 + 10 * k, 15, 40), 0.06, 40 + k))
                      for k in range(4)], ignore_index=True)
    a = track_wells(prod, None, None)
    b = track_wells(prod.sample(frac=1.0, random_state=3), None, None)
    pd.testing.assert_frame_equal(a.sort_values("well_id").reset_index(drop=True),
                                  b.sort_values("well_id").reset_index(drop=True))


def test_duplicate_well_months_are_summed_not_lost():
    # Off-contract input (the loader never emits it): a well-month split over two rows is
    # summed (grouped path), giving the same stage as the single-row table.
    t = _table("D-1", _noisy(np.full(30, 600.0), 0.04, 13))
    half = t.iloc[[10]].assign(oil_bbl=t["oil_bbl"].iloc[10] / 2, gas_mcf=t["gas_mcf"].iloc[10] / 2)
    t2 = pd.concat([t.drop(index=10), half, half], ignore_index=True)
    assert _row(track_wells(t2, None, None), "D-1")["stage"] == _row(track_wells(t, None, None), "D-1")["stage"] == 1


def test_surveys_far_above_bubble_point_keep_a_noisy_well_in_stage_1():
    # Full PVT header (material-balance match active), flat GOR with a noisy upturn at the
    # end, surveys 1,300-2,000 psi above Pb: stage 1 (check-values 5.3: stage 1 is p > Pb).
    n = 36
    gor = _noisy(np.full(n, 570.0), 0.08, 14)
    gor[-4:] *= 1.15
    p = np.full(n, np.nan)
    p[[10, 22, 35]] = [4110.0, 3740.0, 3365.0]
    wells = pd.DataFrame({"well_id": ["U-1"], "api_gravity": [38.0], "gas_specific_gravity": [0.8],
                          "reservoir_temp_f": [190.0], "initial_pressure_psia": [4300.0],
                          "bubble_point_psia": [2100.0]})
    r = _row(track_wells(_table("U-1", gor, pressure=p), wells, None), "U-1")
    assert r["stage"] == 1 and r["planning_status"] == "window_ahead"


def test_unit_without_applicable_wells_is_not_applicable():
    # Regression (empty unit series once crashed): a unit holding only a gas-condensate well.
    prod = pd.concat([_table("GC-9", np.full(30, 14000.0), unit="Gas Unit"),
                      _table("OIL-9", _noisy(np.full(30, 600.0), 0.05, 15), unit="Oil Unit")], ignore_index=True)
    fluids = pd.DataFrame({"well_id": ["GC-9", "OIL-9"], "fluid_type": ["gas_condensate", "black_oil"]})
    ws = track_wells(prod, None, fluids)
    u = track_units(prod, ws, None).set_index("unit")
    assert pd.isna(u.loc["Gas Unit", "stage"]) and u.loc["Gas Unit", "planning_status"] == "not_applicable"
    assert u.loc["Oil Unit", "stage"] == 1
    # the whole field without an applicable well: empty unit series
    gc = prod[prod["well_id"] == "GC-9"]
    u2 = track_units(gc, track_wells(gc, None, fluids), None)
    assert len(u2) == 1 and pd.isna(u2["stage"].iloc[0])


# ---------------------------------------------------------------------------------------
# stability on the sample field (one more month of data)
# ---------------------------------------------------------------------------------------
SAMPLE_CUTS = ("2026-06", "2026-07", "2026-08", "2026-09", "2026-10")


@pytest.fixture(scope="module")
def sample_runs():
    """Tracker at five consecutive cut-offs of the sample field, and the generator's truth."""
    import sys
    from pathlib import Path

    from core.fluids import classify_field
    from core.production import load_production

    root = Path(__file__).resolve().parents[1] / "sample_wells"
    sys.path.insert(0, str(root))
    try:
        from generate import build_with_truth
    finally:
        sys.path.remove(str(root))
    _, _, truth = build_with_truth()
    truth = truth.set_index("well_id")
    runs = {}
    for cut in SAMPLE_CUTS:
        load = load_production(root / "production.csv", well_header=root / "well_header.csv", as_of=cut)
        runs[cut] = track_wells(load.production, load.wells, classify_field(load.production, load.wells)
                                ).set_index("well_id")
    return runs, truth


def _true_stage_at(truth: pd.DataFrame, cut: str) -> pd.Series:
    """The generator's stage at a cut-off month, from its noise-free event months (the
    well model's truth; NA for the gas wells): 1 + crossed + stage 2 ended + peak passed."""
    c = pd.Timestamp(cut)
    st = (1 + (truth["bubble_point_month"] <= c).astype(int) + (truth["stage2_end_month"] <= c).astype(int)
          + (truth["gor_peak_month"] <= c).astype(int)).astype(float)
    return st.where(truth["final_stage"].notna())


def test_one_more_month_moves_stages_only_as_the_data_justify(sample_runs):
    # Rule (ours): from one monthly cut-off to the next, a well's stage never moves backward,
    # moves forward by at most one stage, and moves forward only onto or toward the stage
    # the generator's noise-free history has at the later cut-off (the data justify it).
    runs, truth = sample_runs
    for a, b in zip(SAMPLE_CUTS[:-1], SAMPLE_CUTS[1:]):
        sa = runs[a]["stage"].astype("float")
        sb = runs[b]["stage"].astype("float")
        true_b = _true_stage_at(truth, b).reindex(sb.index)
        moved = sa.ne(sb) & sa.notna()
        assert not (sb < sa).any(), (a, b, sb[sb < sa])
        assert not (sb - sa > 1).any(), (a, b)
        assert (sb[moved] <= true_b[moved]).all(), (a, b, pd.DataFrame({"from": sa, "to": sb, "true": true_b})[moved])


def test_upper_sand_stage_follows_the_generator_truth(sample_runs):
    # Upper Sand wells: expected stage derived from the well model's truth at each cut-off
    # (not a hard-coded list); the tracker must agree well by well.
    runs, truth = sample_runs
    upper = truth.index[truth["unit"] == "Upper Sand"]
    assert len(upper) == 10
    for cut in ("2026-09", "2026-10"):
        expected = _true_stage_at(truth, cut).reindex(upper)
        got = runs[cut]["stage"].astype("float").reindex(upper)
        assert (got == expected).all(), (cut, pd.DataFrame({"got": got, "expected": expected}))


def test_header_gap_filled_from_the_unit_median(sample_runs):
    # sample_wells/README.md: QM-L11 has no temperature and QM-U04 no gas gravity in the
    # header. The gap is filled with the unit median (the unit shares one fluid: common
    # practice), the evidence says so, and the stage agrees with the generator's truth.
    runs, truth = sample_runs
    out = runs["2026-10"]
    expected = _true_stage_at(truth, "2026-10")
    for well, what in (("QM-L11", "temperature"), ("QM-U04", "gas gravity")):
        assert f"header gap filled with the unit median ({what})" in out.loc[well, "stage_evidence"]
        assert "material-balance GOR match (" in out.loc[well, "stage_evidence"]
        assert out.loc[well, "stage"] == expected[well]
    # wells with a complete header say nothing of the kind
    assert "header gap" not in out.loc["QM-L10", "stage_evidence"]


# ---------------------------------------------------------------------------------------
# unit stage from its wells (rule: the stage reached by the wells holding a strict majority
# of the unit's oil of the last 12 months; common practice)
# ---------------------------------------------------------------------------------------
def _expected_unit_stage(prod: pd.DataFrame, ws: pd.DataFrame, unit: str, months: int = 12):
    """Plain-loop statement of the rule, independent of the vectorised code: weights are
    each staged well's oil over the last ``months`` months; the unit stage is the largest
    k such that the wells at stage >= k hold more than half of that oil. Returns the stage
    and the oil share by well stage."""
    as_of = pd.Timestamp(prod["month"].max())
    cut = as_of - pd.DateOffset(months=months - 1)
    p = prod[(prod["unit"] == unit) & (prod["month"] >= cut)]
    recent = p.groupby("well_id")["oil_bbl"].sum()
    stage = ws.set_index("well_id")["stage"]
    w = {well: float(recent.get(well, 0.0)) for well in stage.index
         if pd.notna(stage[well]) and well in set(prod.loc[prod["unit"] == unit, "well_id"])}
    total = sum(w.values())
    share = {k: sum(v for well, v in w.items() if stage[well] == k) / total for k in (1, 2, 3, 4)}
    for k in (4, 3, 2, 1):
        if sum(v for well, v in w.items() if stage[well] >= k) > 0.5 * total:
            return k, share
    raise AssertionError("no stage")


def _majority_date(ws: pd.DataFrame, weights: dict, col: str, k: int):
    """Month by which the wells holding a strict majority of the weight had reached
    event k (wells short of stage k count as not reached): plain loop."""
    st = ws.set_index("well_id")
    total = sum(weights.values())
    dated = sorted((st.loc[w, col], v) for w, v in weights.items() if st.loc[w, "stage"] >= k)
    acc = 0.0
    for d, v in dated:
        acc += v
        if acc > 0.5 * total:
            return d
    return pd.NaT


def _staggered_unit():
    """Eight stage-4 wells started 12 months apart (stand-in shapes, 4 % noise, oil rate
    declining 1 %/month): every well is past its GOR peak, the last one 16 months ago,
    while the unit's summed-volume GOR stays within a few % of its maximum (young wells'
    high GOR in the oil-weighted sum offsets the old wells' fall)."""
    wells = []
    n_end = 7 * 12 + 65 + 16
    for k in range(8):
        m = n_end - 12 * k
        g = _noisy(_shape(m, 700.0, 10, 15, 40, d4=12, decline=0.15), 0.04, 50 + k)
        oil = 9000.0 * np.exp(-0.01 * np.arange(m))
        wells.append(_table(f"ST{k}", g, start=pd.Timestamp("2000-01-01") + pd.DateOffset(months=12 * k),
                            unit="Stagger", oil=oil, days=np.full(m, 30.0)))
    return pd.concat(wells, ignore_index=True)


def test_unit_of_staggered_stage_4_wells_is_stage_4():
    prod = _staggered_unit()
    ws = track_wells(prod, None, None)
    # preconditions, from the well table and the summed series: every well stage 4, and the
    # summed-volume GOR of the last 12 months within 5 % of that of the 12 months before
    # (flat), so the summed-volume analysis alone does not confirm a peak
    assert (ws["stage"] == 4).all(), ws[["well_id", "stage"]]
    um = unit_monthly(prod, ws)
    yr1 = um["gas_mcf"].iloc[-12:].sum() / um["oil_bbl"].iloc[-12:].sum()
    yr0 = um["gas_mcf"].iloc[-24:-12].sum() / um["oil_bbl"].iloc[-24:-12].sum()
    assert abs(yr1 / yr0 - 1.0) < 0.05
    u = track_units(prod, ws, None).set_index("unit").loc["Stagger"]
    assert u["stage_summed_gor"] < 4
    # the unit stage follows its wells
    assert u["stage"] == 4 and u["planning_status"] == "window_passed"
    assert u["months_to_gor_peak_est"] == 0.0
    assert u["oil_share_stage_4"] == pytest.approx(1.0)
    assert "DISAGREES" in u["stage_evidence"] and "lags the wells" in u["stage_evidence"]
    # unit dates: month by which the wells holding a majority of the recent oil had
    # crossed / passed the peak (plain-loop statement of the rule)
    as_of = prod["month"].max()
    rec = prod[prod["month"] > as_of - pd.DateOffset(months=12)].groupby("well_id")["oil_bbl"].sum().to_dict()
    assert u["gor_peak_date"] == _majority_date(ws, rec, "gor_peak_date", 4)
    assert u["bubble_point_date"] == _majority_date(ws, rec, "bubble_point_date", 2)
    assert u["months_since_bubble_point"] == pytest.approx(
        (as_of.year - u["bubble_point_date"].year) * 12 + as_of.month - u["bubble_point_date"].month)


def test_unit_with_mixed_stages_takes_the_stage_of_the_majority_of_recent_oil():
    # Four wells in stages 4, 3, 2, 1 (cases of test_four_clean_wells) at 30/25/25/20 % of
    # the oil: stage >= 3 holds 55 % (a majority), stage 4 30 % -> unit stage 3 (hand
    # calculation). By well count the shares are 25 % each and stage >= 3 is no majority
    # (50 %): the rule weighs by oil, not by wells.
    n = 150
    cases = {"M4": ((30, 15, 40), 3000.0), "M3": ((60, 15, 120), 2500.0),
             "M2": ((120, 40, 40), 2500.0), "M1": ((200, 15, 40), 2000.0)}
    prod = pd.concat([_table(w, _noisy(_shape(n, 700.0, *c, dip=0.15), 0.05, k), unit="Mix",
                             oil=np.full(n, q), days=np.full(n, 30.0))
                      for k, (w, (c, q)) in enumerate(cases.items())], ignore_index=True)
    ws = track_wells(prod, None, None)
    assert ws.set_index("well_id")["stage"].to_dict() == {"M4": 4, "M3": 3, "M2": 2, "M1": 1}
    u = track_units(prod, ws, None).set_index("unit").loc["Mix"]
    expected, share = _expected_unit_stage(prod, ws, "Mix")
    assert expected == 3
    assert u["stage"] == expected and u["planning_status"] == "window_closing"
    for k in (1, 2, 3, 4):
        assert u[f"oil_share_stage_{k}"] == pytest.approx(share[k], rel=1e-9)
        assert u[f"share_stage_{k}"] == 0.25
    rec = {w: 150.0 * q for w, (_, q) in cases.items()}  # equal months: weights prop. to rate
    assert u["bubble_point_date"] == _majority_date(ws, rec, "bubble_point_date", 2)
    assert u["stage2_end_date"] == _majority_date(ws, rec, "stage2_end_date", 3)
    assert pd.isna(u["gor_peak_date"])


@pytest.fixture(scope="module")
def sample_full():
    from pathlib import Path

    from core.fluids import classify_field
    from core.production import load_production

    root = Path(__file__).resolve().parents[1] / "sample_wells"
    load = load_production(root / "production.csv", well_header=root / "well_header.csv")
    ws = track_wells(load.production, load.wells, classify_field(load.production, load.wells))
    return load.production, ws, track_units(load.production, ws, load.wells)


def test_sample_field_unit_stages_follow_their_wells(sample_full):
    # Expectations derived from the well table (plain-loop rule above), not a list.
    prod, ws, units = sample_full
    for _, u in units.iterrows():
        staged = ws[ws["well_id"].isin(prod.loc[prod["unit"] == u["unit"], "well_id"]) & ws["stage"].notna()]
        if staged.empty:
            assert pd.isna(u["stage"]) and u["planning_status"] == "not_applicable"
            continue
        expected, share = _expected_unit_stage(prod, ws, u["unit"])
        assert u["stage"] == expected, (u["unit"], u["stage_evidence"])
        assert u["planning_status"] == planning_status([expected])[0]
        for k in (1, 2, 3, 4):
            assert u[f"oil_share_stage_{k}"] == pytest.approx(share[k], abs=1e-9)
            if u[f"share_stage_{k}"] == 1.0:  # all wells in one stage -> that stage
                assert u["stage"] == k
        # dates present exactly for the events the unit stage has passed
        assert pd.notna(u["bubble_point_date"]) == (expected >= 2)
        assert pd.notna(u["stage2_end_date"]) == (expected >= 3)
        assert pd.notna(u["gor_peak_date"]) == (expected >= 4)
        # the summed-volume analysis is kept as evidence; a disagreement is said
        disagree = pd.notna(u["stage_summed_gor"]) and u["stage_summed_gor"] != u["stage"]
        assert ("DISAGREES" in u["stage_evidence"]) == disagree
    lower = units.set_index("unit").loc["Lower Sand"]
    assert lower["share_stage_4"] == 1.0 and lower["stage"] == 4 and lower["planning_status"] == "window_passed"


def test_sample_field_flowing_pressure_fitted_late_in_life_only(sample_full):
    # Known answer: sample_wells/generate.py's minimum flowing pressures (Lower Sand 100 psia,
    # North Lobe 150 psia), never shown to the tracker. The late-life units resolve it within
    # 40 psia; the Upper Sand wells are all above the bubble point (p >> p_wf), where the rate
    # cannot resolve p_wf: their evidence says the rate was not used, and why.
    prod, ws, _ = sample_full
    unit = prod.groupby("well_id")["unit"].first()
    ev = ws.set_index("well_id")["stage_evidence"]
    pwf = _group_pwf(ev).groupby(ev.index.map(unit)).median()
    assert abs(pwf["Lower Sand"] - 100.0) <= 40.0
    assert abs(pwf["North Lobe"] - 150.0) <= 40.0
    upper = ev[ev.index.map(unit) == "Upper Sand"]
    assert upper.str.contains("flowing pressure is not resolved").all()


def test_peak_evidence_names_the_rule_that_declared_it(sample_full):
    # The evidence must say which rule confirmed a peak: the material-balance match (profile
    # interval past the path's peak) or, without a match, the smoothed-GOR sustained decline.
    from core.fluids import classify_field

    prod, ws, _ = sample_full
    ev4 = ws.loc[ws["passed_gor_peak"].astype(bool), "stage_evidence"]
    assert len(ev4) > 0
    matched = ev4.str.contains("stage and dates from a material-balance GOR match")
    assert matched.any()
    assert ev4[matched].str.contains("confirmed by the match").all()
    assert not ev4[matched].str.contains("sustained decline").any()
    gor_only = track_wells(prod, None, classify_field(prod, None), material_balance_fit=False)
    ev_g = gor_only.loc[gor_only["passed_gor_peak"].astype(bool), "stage_evidence"]
    assert len(ev_g) > 0 and ev_g.str.contains("confirmed by a sustained decline").all()


@pytest.mark.parametrize("drift_sd", [0.0, 0.015])
def test_rate_misfit_levels_match_numpy_least_squares(monkeypatch, drift_sd):
    # Check against a reference library: the closed-form level, drift and one-step fit of
    # core.stages._mb_rate_misfit (cumulative sums over every split) gives the residuals of
    # numpy.linalg.lstsq on the design [1, t, step] at the best split found by brute force
    # (ridge on the drift as one extra row sqrt(lam) x b1 = 0), and the same clipped misfit.
    import core.stages as st

    monkeypatch.setattr(st, "MB_RATE_DRIFT_SD", drift_sd)
    c = st._mb_curve(32.0, 0.72, 165.0, 1900.0, 2600.0, 0.04, 0.21, 0.15)
    rng = np.random.default_rng(4)
    nb = 30
    fm = np.sort(rng.uniform(0.02, 1.0, nb))[None, :]
    tq = (np.arange(nb) * 0.4 + rng.uniform(0, 0.1, nb))[None, :]
    qv = np.ones((1, nb), bool)
    qv[0, [4, 17]] = False                       # two blocks without a rate
    rnow = np.array([[0.08, 0.12]])
    wq = np.array([1.0 / (2 * 0.03 ** 2)])
    lg = np.interp(rnow[0, 0] * fm[0], c["r"], c["lnmob"] + np.log(np.maximum(c["p"] - 150.0, 1.0)))
    step_at = 20
    lq = (lg + 5.0 - 0.04 * tq[0] + np.where(np.arange(nb) > step_at, 0.4, 0.0)
          + rng.normal(0, 0.03, nb))[None, :]
    lq = np.where(qv, lq, 0.0)
    misfit, e = st._mb_rate_misfit(c, rnow, fm, lq, qv, tq, wq, 150.0)
    for j in range(rnow.shape[1]):
        g = np.interp(rnow[0, j] * fm[0], c["r"], c["lnmob"] + np.log(np.maximum(c["p"] - 150.0, 1.0)))
        ok = qv[0]
        d, t = (lq[0] - g)[ok], tq[0][ok]
        tc = t - t.mean()
        lam = 0.0 if drift_sd == 0 else 1.0 / (2 * drift_sd ** 2 * wq[0])
        pos = np.flatnonzero(ok)

        def solve(X):
            A, y = X, d
            if lam:
                A = np.vstack([X, np.r_[0.0, np.sqrt(lam), np.zeros(X.shape[1] - 2)]])
                y = np.r_[d, 0.0]
            b = np.linalg.lstsq(A, y, rcond=None)[0]
            return b, d - X @ b

        # brute-force best split (unpenalised drift, as the closed form chooses it)
        best = None
        for k in range(nb):
            n1 = (pos <= k).sum()
            if n1 < st.MB_RATE_MIN_SPLIT or ok.sum() - n1 < st.MB_RATE_MIN_SPLIT:
                continue
            X = np.column_stack([np.ones_like(tc), tc, (pos > k).astype(float)])
            sse = ((d - X @ np.linalg.lstsq(X, d, rcond=None)[0]) ** 2).sum()
            if best is None or sse < best[0] - 1e-12:
                best = (sse, k)
        X0 = np.column_stack([np.ones_like(tc), tc])
        sse0 = ((d - X0 @ np.linalg.lstsq(X0, d, rcond=None)[0]) ** 2).sum()
        use_step = (sse0 - best[0]) * wq[0] > st.MB_RATE_STEP_PENALTY
        X = np.column_stack([X0, (pos > best[1]).astype(float)]) if use_step else X0
        b, res = solve(X)
        assert np.allclose(e[0, j][ok], res, atol=1e-9)
        expect = np.minimum(res ** 2 * wq[0], 9.0).sum() + (st.MB_RATE_STEP_PENALTY if use_step else 0.0)
        if lam:
            expect += b[1] ** 2 / (2 * drift_sd ** 2)
        assert misfit[0, j] == pytest.approx(expect, rel=1e-9)
        if j == 0:
            # at the true recovery factor the step branch is exercised, where it was put
            assert use_step and abs(best[1] - step_at) <= 1
