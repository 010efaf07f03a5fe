"""Tests of the time-stepped well model and the synthetic field (core.well_model)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from core.relperm import CoreyGasOil
from core.well_model import (
    HEADER_COLUMNS,
    MONTHLY_COLUMNS,
    TRUTH_COLUMNS,
    FluidRock,
    depletion_curve,
    simulate_gas_well,
    simulate_well,
    synthetic_field,
)

FLUID = FluidRock(api=36.0, gamma_g=0.78, t_f=185.0, pb_psia=2400.0, pi_psia=3400.0, p_wf_psia=150.0,
                  relperm=CoreyGasOil(swc=0.20, sgc=0.06, sorg=0.15))


def _quiet_well(**kw):
    base = dict(start_month="2010-01-01", n_months=240, ooip_stb=1.5e6, productivity_bbl_d_psi=0.35, fluid=FLUID,
                seed=7, gor_noise=0.0, oil_noise=0.0, shut_in_prob=0.0, low_uptime_prob=0.0,
                survey_every_months=6, survey_noise_psia=0.0)
    base.update(kw)
    return simulate_well("W-1", **base)


def test_monthly_volumes_follow_the_material_balance_path():
    # Closed-form identity: cumulative oil / N is the recovery factor of the path, and the
    # cumulative gas equals Gp/N of the material balance at that recovery (noise off).
    w = _quiet_well()
    curve = depletion_curve(FLUID)
    nf = w.noise_free
    r = nf["np_over_n"].to_numpy()
    assert_allclose(np.cumsum(w.monthly["oil_bbl"]) / 1.5e6, r, rtol=1e-10, atol=1e-12)
    gp = np.interp(r, curve.r, curve.gp_scf_stb)
    assert_allclose(np.cumsum(w.monthly["gas_mcf"]) * 1000.0 / 1.5e6, gp, rtol=1e-8, atol=1e-9)


def test_oil_rate_obeys_the_productivity_relation_in_the_first_month():
    # Closed-form identity: above the bubble point, q = J (p - pwf) with mobility ratio ~1;
    # the first month's rate lies between J (p_end - pwf) and J (pi - pwf).
    w = _quiet_well()
    m = w.monthly.iloc[0]
    q = m["oil_bbl"] / m["days_on"]
    p_end = w.noise_free["pressure_psia"].iloc[0]
    assert 0.35 * (p_end - 150.0) * 0.98 < q <= 0.35 * (3400.0 - 150.0) * 1.0001


def test_truth_dates_agree_with_the_material_balance_result():
    # The truth months must be where the noise-free series crosses the material-balance
    # stage boundaries (our own predictor; consistency check between the two modules).
    w = _quiet_well()
    curve = depletion_curve(FLUID)
    nf = w.noise_free.set_index("month")
    t = w.truth
    assert t["final_stage"] == 4
    bp = t["bubble_point_month"]
    assert nf.loc[bp, "np_over_n"] > curve.r_bubble
    assert nf.loc[bp - pd.DateOffset(months=1), "np_over_n"] <= curve.r_bubble
    s2 = t["stage2_end_month"]
    assert nf.loc[s2, "gor_scf_stb"] > t["rsi_scf_stb"]
    before = nf.loc[bp:s2 - pd.DateOffset(months=1), "gor_scf_stb"].dropna()
    assert (before.iloc[1:] <= t["rsi_scf_stb"]).all()
    # the path crosses the GOR-back-above-Rsi recovery within a month of the truth date
    assert abs(nf.loc[s2, "np_over_n"] - curve.r_stage2_end) < 0.02
    pk = t["gor_peak_month"]
    assert nf["gor_scf_stb"].idxmax() == pk
    assert nf.loc[pk, "np_over_n"] == pytest.approx(curve.r_gor_peak, abs=0.01)
    # stage 1: GOR equals Rsi before the bubble point (Ahmed; check-values 5.3)
    first = nf.loc[: bp - pd.DateOffset(months=1), "gor_scf_stb"]
    assert_allclose(first, t["rsi_scf_stb"], rtol=1e-6)


def test_stage_one_well_has_no_stage_dates():
    w = _quiet_well(productivity_bbl_d_psi=0.002, n_months=36)
    assert w.truth["final_stage"] == 1
    assert pd.isna(w.truth["bubble_point_month"]) and pd.isna(w.truth["gor_peak_month"])


def test_deterministic_for_a_seed_and_different_across_seeds():
    a = simulate_well("W", start_month="2015-03", n_months=60, ooip_stb=1e6, productivity_bbl_d_psi=0.3, seed=3)
    b = simulate_well("W", start_month="2015-03", n_months=60, ooip_stb=1e6, productivity_bbl_d_psi=0.3, seed=3)
    c = simulate_well("W", start_month="2015-03", n_months=60, ooip_stb=1e6, productivity_bbl_d_psi=0.3, seed=4)
    pd.testing.assert_frame_equal(a.monthly, b.monthly)
    assert not a.monthly["gas_mcf"].equals(c.monthly["gas_mcf"])


def test_noise_shut_ins_workover_and_surveys():
    w = simulate_well("W", start_month="2008-01", n_months=200, ooip_stb=2e6, productivity_bbl_d_psi=0.3,
                      fluid=FLUID, seed=11, shut_in_prob=0.05, low_uptime_prob=0.1, workover_month=100,
                      workover_factor=1.6, survey_every_months=12)
    m = w.monthly
    assert list(m.columns) == list(MONTHLY_COLUMNS)
    for c in ("oil_bbl", "gas_mcf", "water_bbl", "days_on"):
        assert (m[c] >= 0).all()
    shut = m["days_on"] == 0
    assert shut.any() and (m.loc[shut, "oil_bbl"] == 0).all()
    assert (m["days_on"] <= m["month"].dt.days_in_month).all()
    n_surveys = m["pressure_psia"].notna().sum()
    assert 15 <= n_surveys <= 17
    # workover: producing-day rate steps up across month 100 (noise-free)
    nf = w.noise_free
    q = nf["oil_bbl"] / m["days_on"].replace(0, np.nan)
    before, after = q.iloc[95:100].dropna().iloc[-1], q.iloc[100:104].dropna().iloc[0]
    assert after / before > 1.4
    assert w.truth["workover_month"] == pd.Timestamp("2016-05-01")
    # water cut rises slowly and stays small (common practice for solution-gas drive)
    wc = m["water_bbl"] / (m["water_bbl"] + m["oil_bbl"])
    assert wc.dropna().max() < 0.2


def test_gas_condensate_well():
    w = simulate_gas_well("G", start_month="2018-01", n_months=80, qi_mcf_d=4000.0, di_1_yr=0.4, b=0.8,
                          initial_gor_scf_stb=7000.0, gor_rise_per_yr=0.05, api=50.0, seed=2)
    m = w.monthly
    gor = 1000 * m["gas_mcf"].iloc[:6].sum() / m["oil_bbl"].iloc[:6].sum()
    assert 6000 < gor < 8500
    assert pd.isna(w.truth["final_stage"]) and w.truth["fluid"] == "gas_condensate"
    assert np.isnan(w.header["bubble_point_psia"])


def test_synthetic_field_contract_and_stages():
    f = synthetic_field(120, seed=5)
    assert list(f.production.columns) == list(MONTHLY_COLUMNS)
    assert list(f.wells.columns) == list(HEADER_COLUMNS)
    assert list(f.truth.columns) == list(TRUTH_COLUMNS)
    assert f.production["month"].dtype == "datetime64[ns]"
    assert f.truth["bubble_point_month"].dtype == "datetime64[ns]"
    assert set(f.truth["final_stage"].dropna().unique()) == {1, 2, 3, 4}
    assert f.production.groupby("well_id")["month"].max().eq(pd.Timestamp("2026-10-01")).all()
    n_months = f.production.groupby("well_id").size()
    assert n_months.min() >= 24 and n_months.max() <= 240
    assert not f.production.duplicated(["well_id", "month"]).any()
    for c in ("oil_bbl", "gas_mcf", "water_bbl", "days_on"):
        assert (f.production[c] >= 0).all()
    # stage order where dates exist
    t = f.truth.dropna(subset=["gor_peak_month"])
    assert (t["bubble_point_month"] < t["stage2_end_month"]).all()
    assert (t["stage2_end_month"] < t["gor_peak_month"]).all()
    g = synthetic_field(120, seed=5)
    pd.testing.assert_frame_equal(f.production, g.production)
    pd.testing.assert_frame_equal(f.truth, g.truth)


@pytest.mark.parametrize("kw", [dict(n_months=0), dict(ooip_stb=-1.0), dict(productivity_bbl_d_psi=0.0),
                                dict(gor_noise=2.0)])
def test_bad_arguments_raise(kw):
    base = dict(start_month="2015-01", n_months=12, ooip_stb=1e6, productivity_bbl_d_psi=0.3)
    base.update(kw)
    with pytest.raises(ValueError):
        simulate_well("W", **base)


def test_fluid_rejects_pi_below_pb():
    with pytest.raises(ValueError, match="pi_psia"):
        FluidRock(pb_psia=3000.0, pi_psia=2500.0)


def _load_generator():
    import importlib.util
    from pathlib import Path

    path = Path(__file__).resolve().parents[1] / "sample_wells" / "generate.py"
    spec = importlib.util.spec_from_file_location("sample_generate", path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_sample_generator_is_deterministic_and_files_are_current(tmp_path):
    # Regenerating gives identical tables; the committed CSV files equal a fresh run
    # (regression against our own generator: if this fails, run python sample_wells/generate.py).
    gen = _load_generator()
    p1, h1, t1 = gen.build_with_truth()
    p2, h2 = gen.build()
    pd.testing.assert_frame_equal(p1, p2)
    pd.testing.assert_frame_equal(h1, h2)
    p1.to_csv(tmp_path / "production.csv", index=False, lineterminator="\n")
    h1.to_csv(tmp_path / "well_header.csv", index=False, lineterminator="\n")
    for name in ("production.csv", "well_header.csv"):
        committed = (gen.OUT_DIR / name).read_bytes()
        assert (tmp_path / name).read_bytes() == committed, f"{name} is stale: run python sample_wells/generate.py"
    # the scenario as laid out: 40-50 oil wells in 4 units, 3 non-oil wells, 2-20 years ending 2026-10
    oil = t1[t1["fluid"] == "black_oil"]
    assert 40 <= len(oil) <= 50 and oil["unit"].nunique() == 4
    assert set(t1.loc[t1["fluid"] != "black_oil", "fluid"]) == {"gas_condensate", "wet_gas"}
    months = pd.to_datetime(p1["Month"])
    assert months.max() == pd.Timestamp("2026-10-01")
    span = p1.assign(m=months).groupby("Well")["m"].agg(["min", "max", "size"])
    assert span["size"].between(24, 240).all()
    assert set(oil["final_stage"]) == {1, 2, 3, 4}


def test_synthetic_field_with_non_oil_wells():
    base = synthetic_field(60, seed=9)
    f = synthetic_field(60, seed=9, non_oil_share=0.2)
    gas = f.truth[f.truth["fluid"] != "black_oil"]
    assert 4 <= len(gas) <= 25
    assert gas["final_stage"].isna().all()
    assert set(gas["fluid"]) <= {"gas_condensate", "wet_gas"}
    gor0 = f.production.groupby("well_id").head(6).groupby("well_id")[["oil_bbl", "gas_mcf"]].sum()
    g = 1000 * gor0["gas_mcf"] / gor0["oil_bbl"]
    assert (g.loc[gas["well_id"]] > 3300).all()
    assert f.wells.loc[f.wells["well_id"].isin(gas["well_id"]), "bubble_point_psia"].isna().all()
    # the option leaves the field's other draws alone when off
    pd.testing.assert_frame_equal(base.truth, synthetic_field(60, seed=9, non_oil_share=0.0).truth)


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@settings(max_examples=15, deadline=None)
@given(n_months=st.integers(1, 240), j=st.floats(0.001, 20.0), ooip=st.floats(1e5, 5e7),
       gor_noise=st.floats(0.0, 0.3), shut=st.floats(0.0, 0.3), seed=st.integers(0, 10_000))
def test_volumes_stay_physical_for_any_knobs(n_months, j, ooip, gor_noise, shut, seed):
    # Physical bounds: volumes non-negative, days on within the month, no oil on a shut-in
    # month, cumulative true oil never beyond the material-balance recovery at abandonment.
    w = simulate_well("W", start_month="2010-01", n_months=n_months, ooip_stb=ooip, productivity_bbl_d_psi=j,
                      fluid=FLUID, seed=seed, gor_noise=gor_noise, shut_in_prob=shut)
    m = w.monthly
    assert (m[["oil_bbl", "gas_mcf", "water_bbl", "days_on"]] >= 0).all().all()
    assert (m["days_on"] <= m["month"].dt.days_in_month).all()
    assert (m.loc[m["days_on"] == 0, ["oil_bbl", "gas_mcf", "water_bbl"]] == 0).all().all()
    r = w.noise_free["np_over_n"].to_numpy()
    assert np.all(np.diff(r) >= 0)
    assert r[-1] <= depletion_curve(FLUID).prediction.recovery_at_abandonment + 1e-12
    assert 1 <= w.truth["final_stage"] <= 4


def test_productivity_drift_knob_of_the_synthetic_field():
    # Default (0, 0) leaves the field as before (own random stream); a falling productivity
    # index (-10 %/yr) produces less oil from the same wells, the first month unchanged
    # (drift factor exp(0) = 1).
    from core.well_model import synthetic_field

    a = synthetic_field(6, seed=3)
    b = synthetic_field(6, seed=3, j_drift_per_yr=(0.0, 0.0))
    pd.testing.assert_frame_equal(a.production, b.production)
    c = synthetic_field(6, seed=3, j_drift_per_yr=(-0.1, -0.1))
    first_a = a.production.groupby("well_id")["oil_bbl"].first()
    first_c = c.production.groupby("well_id")["oil_bbl"].first()
    assert np.allclose(first_a, first_c)
    assert (c.production.groupby("well_id")["oil_bbl"].sum() < a.production.groupby("well_id")["oil_bbl"].sum()).all()
    with pytest.raises(ValueError):
        synthetic_field(6, seed=3, j_drift_per_yr=(0.1, -0.1))
