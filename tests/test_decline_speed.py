"""Tests of the decline engine's speed devices: each must give the answer of the plain way.

References are general-purpose libraries (numpy's LAPACK solve and datetime casts, pandas'
factorize) or the engine's own unblocked path (regression, said where used).
"""

import numpy as np
import pandas as pd
import pytest

import core.decline as dec
from core.decline import DeclineSettings, _factorize_runs, _month_days, _month_int, _solve_spd3, fit_field


def test_closed_form_cholesky_matches_lapack_solve():
    # Reference: numpy.linalg.solve (LAPACK gesv) on random SPD 3x3 systems
    rng = np.random.default_rng(3)
    k = 2000
    J = rng.normal(size=(k, 3, 8)) * np.exp(rng.normal(0, 2, (k, 3, 1)))  # badly scaled rows
    M = J @ J.transpose(0, 2, 1) + 1e-3 * np.eye(3)
    b = rng.normal(size=(k, 3))
    x = _solve_spd3(M, b)
    ref = np.linalg.solve(M, b[:, :, None])[:, :, 0]
    resid = np.abs(np.einsum("kij,kj->ki", M, x) - b).max(axis=1)
    scale = np.abs(M).max(axis=(1, 2)) * np.abs(x).max(axis=1) + np.abs(b).max(axis=1)
    assert np.all(resid <= 1e-10 * scale)
    assert np.allclose(x, ref, rtol=1e-6, atol=1e-12 * np.abs(ref).max())


def test_cholesky_falls_back_on_an_indefinite_system():
    # an indefinite matrix (the closed form takes a square root of a negative number):
    # the LAPACK fallback must still solve it exactly
    M = np.array([[[1.0, 2.0, 0.0], [2.0, 1.0, 0.0], [0.0, 0.0, 1.0]], np.eye(3)])
    b = np.array([[1.0, 1.0, 1.0], [1.0, 2.0, 3.0]])
    x = _solve_spd3(M, b)
    assert np.allclose(np.einsum("kij,kj->ki", M, x), b)


def test_month_and_day_numbers_match_numpy_casts():
    # Reference: numpy's datetime64 casts (ns -> M, M -> D), NaT included
    rng = np.random.default_rng(1)
    days = rng.integers(-20000, 40000, 50_000)
    ts = (days.astype("datetime64[D]") + rng.integers(0, 86_400, days.size).astype("timedelta64[s]")).astype("datetime64[ns]")
    ts[::997] = np.datetime64("NaT")
    assert np.array_equal(_month_int(ts), ts.astype("datetime64[M]").astype(np.int64))
    mi = rng.integers(-500, 1500, 50_000)
    assert np.array_equal(_month_days(mi), mi.astype("datetime64[M]").astype("datetime64[D]").astype(np.int64))


@pytest.mark.parametrize("dtype", ["str", "object", "category"])
def test_factorize_by_runs_matches_pandas(dtype):
    # Reference: pandas.factorize(sort=True), missing ids included
    rng = np.random.default_rng(2)
    names = np.array([f"W-{i:03d}" for i in rng.permutation(300)], dtype=object)
    ids = np.repeat(names, rng.integers(1, 60, names.size)).astype(object)
    ids[rng.integers(0, ids.size, 20)] = None
    s = pd.Series(ids, dtype=dtype)
    codes, uniques = _factorize_runs(s)
    ref_codes, ref_uniques = pd.factorize(s, sort=True)
    assert np.array_equal(codes, ref_codes)
    assert list(np.asarray(uniques)) == list(np.asarray(ref_uniques))


def _field(n, seed):
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(n):
        m = int(rng.integers(12, 90))
        t = (np.arange(m) + 0.5) / 12.0
        q = dec.arps_rate(t, rng.uniform(50, 900), rng.uniform(0.1, 2.0), rng.uniform(0, 2)) * np.exp(rng.normal(0, 0.1, m))
        months = pd.date_range("2015-01-01", periods=m, freq="MS")
        rows.append(pd.DataFrame({"well_id": f"B-{i:03d}", "month": months, "days_on": months.days_in_month,
                                  "days_in_month": months.days_in_month, "oil_rate_bbl_d": q}))
    return pd.concat(rows, ignore_index=True)


def test_cache_blocks_do_not_change_the_fits(monkeypatch):
    # Regression against the engine's own unblocked pass (one block per batch): blocking
    # the rows must not change a single bit of any fit
    table = _field(60, 4)
    st = DeclineSettings(workers=1, streams=("oil",))
    blocked = fit_field(table, settings=st)
    monkeypatch.setattr(dec, "_BLOCK_ELEMENTS", 10**9)
    whole = fit_field(table, settings=st)
    pd.testing.assert_frame_equal(blocked.fits, whole.fits, check_exact=True)
    pd.testing.assert_frame_equal(blocked.candidates, whole.candidates, check_exact=True)


def test_worker_processes_give_the_in_process_fits():
    # Regression: the forked workers (inherited batches, largest first, boolean down-weight
    # masks) return exactly what the in-process path returns
    table = _field(40, 6)
    one = fit_field(table, settings=DeclineSettings(workers=1, streams=("oil",), chunk_wells=16))
    two = fit_field(table, settings=DeclineSettings(workers=2, streams=("oil",), chunk_wells=16))
    pd.testing.assert_frame_equal(one.fits, two.fits, check_exact=True)
    pd.testing.assert_frame_equal(one.candidates, two.candidates, check_exact=True)


def test_down_weighted_month_labels_match_pandas_join():
    # Reference: pandas strftime("%Y-%m") joined with "," per well (groupby, sorted wells,
    # months in the order given), the plain way; both the byte-buffer path and the fallback
    # for months outside the four-digit-year span
    rng = np.random.default_rng(5)
    for lo, hi in ((300, 700), (-12_000, -11_000)):
        w = rng.integers(0, 400, 5_000)
        mi = rng.integers(lo, hi, w.size)
        out = dec._joined_month_labels(w, mi, np.full(450, "", dtype=object))
        lab = pd.Series(pd.DatetimeIndex(dec._int_to_month(mi)).strftime("%Y-%m"))
        ref = lab.groupby(w).agg(",".join)
        assert list(out[ref.index.to_numpy()]) == list(ref.to_numpy())
        untouched = np.setdiff1d(np.arange(450), ref.index.to_numpy())
        assert untouched.size and all(out[untouched] == "")


def test_candidates_come_sorted_by_well_and_family():
    # Reference: pandas sort_values(["well_id", "family"]) of the candidates table, for a
    # table whose wells are not in name order
    table = _field(30, 8)
    names = np.array([f"Z-{i:03d}" for i in np.random.default_rng(8).permutation(30)])
    table["well_id"] = names[table["well_id"].str[2:].astype(int)]
    cands = fit_field(table, settings=DeclineSettings(workers=1, streams=("oil",))).candidates
    ref = cands.sort_values(["well_id", "family"], kind="stable").reset_index(drop=True)
    pd.testing.assert_frame_equal(cands, ref, check_exact=True)
    assert len(cands) == 3 * 30


def test_forecast_of_a_block_with_categorical_ids_equals_plain_ids():
    # Regression against the same wells with plain string ids: a block of a larger field
    # whose well_id is categorical (unused categories included) forecasts the same
    from core.forecast import forecast_field

    table = _field(25, 9)
    st = DeclineSettings(workers=1, streams=("oil",), econ_limit_bopd=2.0)
    table["oil_bbl"] = table["oil_rate_bbl_d"] * table["days_on"]
    cat = table.copy()
    cats = pd.Index([f"B-{i:03d}" for i in range(400)])
    cat["well_id"] = pd.Categorical(table["well_id"], categories=cats)
    s1, m1 = forecast_field(fit_field(table, settings=st), table, settings=st, monthly=True)
    s2, m2 = forecast_field(fit_field(cat, settings=st), cat, settings=st, monthly=True)
    pd.testing.assert_frame_equal(s1, s2, check_exact=True)
    pd.testing.assert_frame_equal(m1, m2, check_exact=True)
    assert (s1["remaining_oil_bbl"] > 0).all()
