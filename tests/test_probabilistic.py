"""Probabilistic forecasts (issue 10 items 1-2): moving-block bootstrap structure (Künsch 1989),
percentile convention (SPE-PRMS: P90 = low estimate), field totals as sample-wise sums, a
noiseless well against the Arps closed form, determinism, and the hindcast coverage guard."""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from core.decline import DAYS_PER_YEAR, DeclineSettings, arps_cumulative, fit_field
from core.forecast import forecast_field
from core.probabilistic import (
    MONTHLY_COLUMNS,
    WELL_COLUMNS,
    LevelCalibration,
    add_fixed_wells,
    block_length,
    fit_error_growth,
    hindcast,
    hindcast_scores,
    moving_block_indices,
    probabilistic_field,
    well_seed,
)
from core.production import load_production
from core.synthetic_arps import noisy_arps_wells


@pytest.fixture(scope="module")
def field():
    prod = noisy_arps_wells(12, seed=11)
    st = DeclineSettings(econ_limit_bopd=5.0, streams=("oil",), horizon_years=30.0)
    ff = fit_field(prod, settings=st)
    return prod, st, ff


@pytest.fixture(scope="module")
def result(field):
    prod, st, ff = field
    return probabilistic_field(prod, ff, settings=st, samples=60, seed=5, level_error=0.1, cum_months=24)


# ---------------------------------------------------------------- block bootstrap pieces
def test_moving_block_indices_are_runs_of_consecutive_months():
    # Künsch (1989): blocks of L consecutive observations starting anywhere in [0, n - L].
    rng = np.random.default_rng(0)
    n, length, block = 30, 47, 4
    idx = moving_block_indices(rng, n, length, 200, block)
    assert idx.shape == (200, length)
    assert idx.min() >= 0 and idx.max() <= n - 1
    blocks = idx[:, : (length // block) * block].reshape(200, -1, block)
    assert np.all(np.diff(blocks, axis=2) == 1)
    # every start 0 .. n - L occurs (uniform starts; 200 x 12 draws over 27 values)
    assert set(np.unique(blocks[:, :, 0])) == set(range(n - block + 1))


@pytest.mark.parametrize(("n", "expected"), [(64, 4), (1000, 10), (65, 5), (6, 2), (2, 1)])
def test_block_length_rule(n, expected):
    # Closed form: ceil(n^(1/3)) (Hall, Horowitz & Jing 1995 rate), bounded by [1, n/2].
    assert int(block_length(n)) == expected


def test_block_length_given_is_capped_at_half_the_series():
    assert int(block_length(10, 8)) == 5
    assert int(block_length(100, 8)) == 8


def test_well_seed_is_stable_and_distinct():
    # BLAKE2b digest: the same (seed, well) gives the same seed in any process (no PYTHONHASHSEED).
    assert well_seed(0, "W-1") == well_seed(0, "W-1")
    assert len({well_seed(0, "W-1"), well_seed(1, "W-1"), well_seed(0, "W-2")}) == 3


# ---------------------------------------------------------------- result tables
def test_columns_and_percentile_order(result):
    w = result.wells
    assert list(w.columns[: len(WELL_COLUMNS)]) == WELL_COLUMNS
    assert list(result.monthly.columns) == MONTHLY_COLUMNS
    for q in ("eur_oil_bbl", "remaining_oil_bbl", "oil_next_24m_bbl"):
        # SPE-PRMS convention: P90 (low) <= P50 (best) <= P10 (high)
        assert (w[f"{q}_p90"] <= w[f"{q}_p50"] + 1e-9).all()
        assert (w[f"{q}_p50"] <= w[f"{q}_p10"] + 1e-9).all()
        assert (w[f"{q}_p10"] > w[f"{q}_p90"]).any()
    d = w.dropna(subset=["econ_limit_date_p90", "econ_limit_date_p10"])
    assert (d["econ_limit_date_p90"] <= d["econ_limit_date_p50"]).all()
    assert (d["econ_limit_date_p50"] <= d["econ_limit_date_p10"]).all()
    m = result.monthly
    assert ((m["oil_bbl_p90"] <= m["oil_bbl_p50"]) & (m["oil_bbl_p50"] <= m["oil_bbl_p10"])).all()
    f = result.field
    assert ((f["p90"] <= f["p50"]) & (f["p50"] <= f["p10"])).all()


def test_no_nan_inf_or_negative(result):
    num = result.wells.select_dtypes("number")
    assert np.isfinite(num.to_numpy()).all() and (num.to_numpy() >= 0).all()
    mv = result.monthly[["oil_bbl_p90", "oil_bbl_p50", "oil_bbl_p10"]].to_numpy()
    assert np.isfinite(mv).all() and (mv >= 0).all()
    assert np.isfinite(result.remaining_samples).all() and (result.remaining_samples >= 0).all()
    fm = result.field_monthly[["oil_bbl_p90", "oil_bbl_p50", "oil_bbl_p10"]].to_numpy()
    assert np.isfinite(fm).all() and (fm >= 0).all()


def test_well_percentiles_are_the_sample_percentiles(result):
    # Definition (SPE-PRMS): P90 = value exceeded with 90 % probability = 10th percentile.
    r = result.remaining_samples
    assert_allclose(result.wells["remaining_oil_bbl_p90"], np.percentile(r, 10, axis=1), rtol=1e-12)
    assert_allclose(result.wells["remaining_oil_bbl_p10"], np.percentile(r, 90, axis=1), rtol=1e-12)


def test_field_total_is_percentile_of_samplewise_sums(result):
    # Identity: field sample s = sum over wells of sample s; then percentiles of those sums.
    tot = result.remaining_samples.sum(axis=0)
    row = result.field.set_index("quantity").loc["remaining_oil_bbl"]
    assert_allclose([row["p90"], row["p50"], row["p10"]], np.percentile(tot, [10, 50, 90]), rtol=1e-12)
    assert_allclose(row["mean"], tot.mean(), rtol=1e-12)
    # and it is not the sum of the well percentiles (P90s do not add: the field P90 is higher)
    assert row["p90"] > result.wells["remaining_oil_bbl_p90"].sum()
    eur = result.field.set_index("quantity").loc["eur_oil_bbl"]
    assert_allclose(eur["p50"], np.percentile(result.eur_samples.sum(axis=0), 50), rtol=1e-12)


def test_deterministic_for_a_seed_and_different_for_another(field, result):
    prod, st, ff = field
    again = probabilistic_field(prod, ff, settings=st, samples=60, seed=5, level_error=0.1, cum_months=24)
    pd.testing.assert_frame_equal(again.wells, result.wells, check_exact=True)
    pd.testing.assert_frame_equal(again.monthly, result.monthly, check_exact=True)
    other = probabilistic_field(prod, ff, settings=st, samples=60, seed=6, level_error=0.1)
    assert not np.array_equal(other.remaining_samples, result.remaining_samples)


def test_a_well_does_not_depend_on_the_other_wells(field, result):
    # Seeds come from (seed, well_id), not from row order: one well alone gets the same draws.
    prod, st, ff = field
    wid = "NA-003"
    one = probabilistic_field(prod[prod["well_id"] == wid], ff.fits[ff.fits["well_id"] == wid],
                              settings=st, samples=60, seed=5, level_error=0.1, cum_months=24)
    a = one.wells.iloc[0]
    b = result.wells.set_index("well_id").loc[wid]
    # equal up to the padding of the batch (summation order): rtol 1e-9
    assert_allclose(a["remaining_oil_bbl_p50"], b["remaining_oil_bbl_p50"], rtol=1e-9)
    assert_allclose(a["oil_next_24m_bbl_p10"], b["oil_next_24m_bbl_p10"], rtol=1e-9)


def _noise_free_exponential_well(qi: float, di: float) -> pd.DataFrame:
    """48 months of an exact Arps (1945) exponential well (monthly volumes from the closed-form
    cumulative), loaded; volume / days_on is the rate at about mid-month."""
    months = pd.date_range("2020-01-01", periods=48, freq="MS")
    edges = np.r_[0.0, np.cumsum(months.days_in_month.to_numpy())] / DAYS_PER_YEAR
    oil = np.diff(arps_cumulative(edges, qi, di, 0.0))
    raw = pd.DataFrame({"well_id": "EX-1", "month": months, "oil_bbl": oil,
                        "days_on": months.days_in_month.to_numpy(), "unit": "U1"})
    return load_production(raw, file_name="ex").production


def test_noiseless_exponential_well_matches_closed_form():
    # A noise-free exponential decline: every bootstrap sample refits the same curve, so
    # P90 = P50 = P10 = the deterministic remaining volume, which is the Arps (1945)
    # exponential cumulative from the forecast start to the economic limit (closed form).
    qi, di = 300.0, 0.4  # bbl/d, 1/yr
    prod = _noise_free_exponential_well(qi, di)
    st = DeclineSettings(econ_limit_bopd=20.0, streams=("oil",), loss="linear")
    ff = fit_field(prod, settings=st)
    res = probabilistic_field(prod, ff, settings=st, samples=40, seed=1, level_error=None,
                              future_noise=False)
    w = res.wells.iloc[0]
    summary, _ = forecast_field(ff, prod, settings=st)
    det = summary.iloc[0]["remaining_oil_bbl"]
    # the monthly average rate differs from the mid-month rate by ~(di/12)^2/24 ~ 5e-5 in log,
    # the only "noise" resampled: samples agree with the deterministic value to 1e-5
    assert_allclose([w["remaining_oil_bbl_p90"], w["remaining_oil_bbl_p10"]], det, rtol=1e-5)
    f = ff.fits.iloc[0]
    t0 = (pd.Timestamp("2024-01-01") - f["fit_start"]).days / DAYS_PER_YEAR
    q0 = f["qi"] * np.exp(-f["di"] * t0)
    # Arps exponential: Np = (q0 - q_el)/D x 365.25, the limit reached inside the last month
    closed = (q0 - 20.0) / f["di"] * DAYS_PER_YEAR
    assert_allclose(w["remaining_oil_bbl_p50"], closed, rtol=2e-3)
    assert w["econ_limit_date_p90"] == w["econ_limit_date_p10"] == summary.iloc[0]["econ_limit_date"]


def test_unfitted_well_is_deterministic_with_zero_spread():
    months = pd.date_range("2026-06-01", periods=3, freq="MS")
    raw = pd.DataFrame({"well_id": "NEW-1", "month": months, "oil_bbl": [900.0, 850.0, 800.0],
                        "days_on": 30.0, "unit": "U1"})
    extra = noisy_arps_wells(3, seed=2)
    prod = pd.concat([load_production(raw, file_name="n").production, extra], ignore_index=True)
    st = DeclineSettings(econ_limit_bopd=5.0, streams=("oil",), horizon_years=10.0)
    ff = fit_field(prod, settings=st)
    res = probabilistic_field(prod, ff, settings=st, samples=20, seed=0, level_error=None)
    w = res.wells.set_index("well_id").loc["NEW-1"]
    assert w["prob_method"].startswith("deterministic")
    assert w["eur_oil_bbl_p90"] == w["eur_oil_bbl_p10"] == pytest.approx(2550.0)  # cum of 3 months
    assert any("deterministic" in m for m in res.messages)


@pytest.mark.parametrize("kw", [{"samples": 5}, {"spread": 0.0}, {"level_error": "wide"},
                                {"block_months": 0}, {"level_error": -0.1}])
def test_bad_arguments_raise(field, kw):
    prod, st, ff = field
    with pytest.raises(ValueError):
        probabilistic_field(prod, ff, settings=st, **kw)


def test_bad_fit_argument_raises(field):
    prod, st, _ = field
    with pytest.raises(ValueError, match="FieldFit"):
        probabilistic_field(prod, [1, 2], settings=st)


# ---------------------------------------------------------------- level and trend error
def _calibration(level_sd, trend_sd):
    from scipy.stats import norm

    q = norm.ppf((np.arange(99) + 0.5) / 99)
    return LevelCalibration(q * level_sd, level_sd, 0, float("nan"), float("nan"), None, 24, "test",
                            q * trend_sd if trend_sd else None, trend_sd)


def test_fit_error_growth_recovers_level_and_trend():
    # Closed-form identity: e(h) = a + g h with independent a, g has Var = sd_a^2 + sd_g^2 h^2;
    # exact variances at four horizons give the two standard deviations back.
    h = np.array([0.25, 0.5, 0.75, 1.0, 2.0])
    sd_a, sd_g = fit_error_growth(h, 0.07**2 + 0.09**2 * h**2, weights=[40, 40, 40, 40, 20])
    assert_allclose([sd_a, sd_g], [0.07, 0.09], rtol=1e-9)
    # no growth: the trend is zero (non-negative least squares), the level the constant
    sd_a, sd_g = fit_error_growth(h, np.full(h.size, 0.01))
    assert_allclose([sd_a, sd_g], [0.1, 0.0], atol=1e-9)


def test_window_samples_are_the_samples_of_the_windows(field):
    # Identity: the window (0, 24) holds the same per-sample oil as oil_next_24m.
    prod, st, ff = field
    res = probabilistic_field(prod, ff, settings=st, samples=40, seed=3, level_error=0.05,
                              cum_months=24, windows=[(0, 12), (0, 24), (12, 24)])
    ws = res.window_samples
    assert ws.shape == (len(res.wells), 40, 3)
    assert_allclose(np.percentile(ws[:, :, 1], 10, axis=1), res.wells["oil_next_24m_bbl_p90"], rtol=1e-12)
    assert_allclose(ws[:, :, 0] + ws[:, :, 2], ws[:, :, 1], rtol=1e-12)


def test_trend_error_widens_the_range_with_the_horizon(field):
    # A trend error g adds g h to the log rate: its spread grows with the horizon h (closed
    # form sd = sd_g h), a level error's does not. Log width ln(P10/P90) of the oil to 12
    # and to 48 months, median over wells.
    prod, st, ff = field
    kw = dict(settings=st, samples=80, seed=4, windows=[(0, 12), (0, 48)])
    lvl = probabilistic_field(prod, ff, level_error=_calibration(0.1, 0.0), **kw).window_samples
    trd = probabilistic_field(prod, ff, level_error=_calibration(0.1, 0.15), **kw).window_samples

    alive = (np.percentile(lvl[:, :, 1], 10, axis=1) > 0) & (np.percentile(trd[:, :, 1], 10, axis=1) > 0)
    assert alive.sum() >= 6

    def width(ws, j):
        q = np.percentile(ws[alive, :, j], [10, 90], axis=1)
        return float(np.median(np.log(q[1] / q[0])))

    grow_lvl = width(lvl, 1) - width(lvl, 0)
    grow_trd = width(trd, 1) - width(trd, 0)
    # a level error alone keeps the log width constant (a constant factor per sample)
    assert abs(grow_lvl) < 0.02, grow_lvl
    # sd_g = 0.15/yr from 12 to 48 months would widen by ~0.25 in log width for exponential
    # wells (closed form 2 x 1.2816 x sd_g x change of mean horizon); on hyperbolic wells the
    # decline error's effect on the log rate is damped by 1/(1 + b D0 t) (Arps 1945) and the
    # decline is floored at the terminal decline, so less: clearly more than zero
    assert grow_trd > grow_lvl + 0.05, (grow_lvl, grow_trd)


def test_trend_error_never_takes_the_decline_below_the_terminal_decline():
    # Every sample gets a trend error of +5/yr (far more than the decline): the decline at
    # the forecast start is floored at the terminal decline d_lim, so every sample is the
    # Arps (1945) exponential at d_lim: Np = (q0 - q_el)/d_lim x 365.25 (closed form).
    qi, di = 300.0, 0.4  # bbl/d, 1/yr
    prod = _noise_free_exponential_well(qi, di)
    st = DeclineSettings(econ_limit_bopd=20.0, streams=("oil",), loss="linear", horizon_years=50.0)
    ff = fit_field(prod, settings=st)
    big = LevelCalibration(np.zeros(5), 0.0, 0, float("nan"), float("nan"), None, 24, "test",
                           np.full(5, 5.0), 5.0)
    res = probabilistic_field(prod, ff, settings=st, samples=20, seed=1, level_error=big, future_noise=False)
    w = res.wells.iloc[0]
    f = ff.fits.iloc[0]
    t0 = (pd.Timestamp("2024-01-01") - f["fit_start"]).days / DAYS_PER_YEAR
    q0 = f["qi"] * np.exp(-f["di"] * t0)
    closed = (q0 - 20.0) / st.d_lim_nominal * DAYS_PER_YEAR
    assert_allclose([w["remaining_oil_bbl_p90"], w["remaining_oil_bbl_p10"]], closed, rtol=2e-3)


def test_add_fixed_wells_shifts_every_percentile_by_the_constant(result):
    # Closed form: adding a constant c to every sample shifts each quantile and the mean by c.
    extra = pd.DataFrame({"well_id": ["G-1", "G-2", "G-3"], "remaining_oil_bbl": [1000.0, 500.0, 0.0],
                          "eur_oil_bbl": [5000.0, 2500.0, np.nan]})  # G-3 has no answer: left out
    m0 = result.field_monthly["month"].iloc[0]
    gm = pd.DataFrame({"well_id": ["G-1", "G-2", "G-1"], "month": [m0, m0, m0 + pd.offsets.MonthBegin(1)],
                       "oil_bbl": [30.0, 20.0, 29.0]})
    out = add_fixed_wells(result, extra, gm)
    f0, f1 = result.field.set_index("quantity"), out.field.set_index("quantity")
    for c in ("p90", "p50", "p10", "mean"):
        assert f1.loc["remaining_oil_bbl", c] == pytest.approx(f0.loc["remaining_oil_bbl", c] + 1500.0, rel=1e-12)
        assert f1.loc["eur_oil_bbl", c] == pytest.approx(f0.loc["eur_oil_bbl", c] + 7500.0, rel=1e-12)
    assert f1.loc["eur_oil_bbl", "n_wells"] == f0.loc["eur_oil_bbl", "n_wells"] + 2
    fm0, fm1 = result.field_monthly.set_index("month"), out.field_monthly.set_index("month")
    assert fm1.loc[m0, "oil_bbl_p50"] == pytest.approx(fm0.loc[m0, "oil_bbl_p50"] + 50.0, rel=1e-12)
    assert fm1.loc[m0 + pd.offsets.MonthBegin(1), "oil_bbl_p10"] == pytest.approx(
        fm0.loc[m0 + pd.offsets.MonthBegin(1), "oil_bbl_p10"] + 29.0, rel=1e-12)
    pd.testing.assert_frame_equal(out.wells, result.wells)


def test_field_eur_counts_the_same_wells_as_the_deterministic_total():
    # The run's deterministic field EUR sums the wells with an answer; a well not forecast
    # (here one with 3 months) has no EUR and its cumulative is left out of the field EUR.
    months = pd.date_range("2026-06-01", periods=3, freq="MS")
    raw = pd.DataFrame({"well_id": "NEW-1", "month": months, "oil_bbl": [900.0, 850.0, 800.0],
                        "days_on": 30.0, "unit": "U1"})
    prod = pd.concat([load_production(raw, file_name="n").production, noisy_arps_wells(3, seed=2)],
                     ignore_index=True)
    st = DeclineSettings(econ_limit_bopd=5.0, streams=("oil",), horizon_years=10.0)
    ff = fit_field(prod, settings=st)
    summary, _ = forecast_field(ff, prod, settings=st)
    assert summary.set_index("well_id").loc["NEW-1", "forecast_end_reason"] == "not_forecast"
    res = probabilistic_field(prod, ff, settings=st, samples=20, seed=0, level_error=None)
    keep = (res.wells["well_id"] != "NEW-1").to_numpy()
    row = res.field.set_index("quantity").loc["eur_oil_bbl"]
    assert_allclose(row["p50"], np.percentile(res.eur_samples[keep].sum(axis=0), 50), rtol=1e-12)
    assert row["n_wells"] == 3


# ---------------------------------------------------------------- calibration guard
def test_hindcast_coverage_in_range_on_seeded_wells():
    # Issue 10 target: hidden 24-month volumes inside the P90-P10 range for 70-90 % of wells
    # (80 % by the definition of P90/P10, SPE-PRMS). 60 seeded noisy Arps wells x 100
    # samples; level and trend error measured by the nested hindcasts (level_error="auto").
    # Measured when written: 83.3 % (our own run; the bounds are the target).
    prod = noisy_arps_wells(60, seed=2026)
    h = hindcast(prod, samples=100, seed=0)
    s = hindcast_scores(h)
    assert s["n_wells"] >= 55
    assert 70.0 <= s["coverage_pct"] <= 90.0, s
    # the median P50 miss is within the noise (AR(1) sd 8 % + drift)
    assert abs(s["p50_bias_pct"]) < 10.0, s
    assert h.attrs["calibration"].trend_sd > 0.0  # the drift of these wells is seen as a trend


def test_hindcast_coverage_at_48_months_holds_with_the_trend_error():
    # The range must grow with the horizon: 48 hidden months, same wells. Target as above
    # (70-90 %); the plain block bootstrap is far below it (31.7 % measured, our own run).
    prod = noisy_arps_wells(60, seed=2026)
    s = hindcast_scores(hindcast(prod, hide_months=48, samples=100, seed=0))
    plain = hindcast_scores(hindcast(prod, hide_months=48, samples=100, seed=0, level_error=None))
    assert 70.0 <= s["coverage_pct"] <= 90.0, s
    assert plain["coverage_pct"] < 60.0, plain
