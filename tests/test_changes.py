"""Tests of core.changes: the monthly-update merge and the run-to-run change report.

Every expected value below is worked out by hand from small tables written here (hand
calculation from the DEVELOPERS.md contract definitions), unless marked otherwise.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from core.changes import (
    compare_runs,
    compare_units,
    merge_loads,
    merge_production,
    status_transitions,
    summarise_changes,
)
from core.validation import InputError

M = pd.Timestamp


def tidy(rows):
    """Tidy table with the contract's columns from (well, month, oil, gas, water, days)."""
    df = pd.DataFrame(rows, columns=["well_id", "month", "oil_bbl", "gas_mcf", "water_bbl", "days_on"])
    df["month"] = pd.to_datetime(df["month"]).astype("datetime64[ns]")
    df["well_id"] = df["well_id"].astype("str")
    df["unit"] = "U1"
    df["days_on_given"] = True
    df["days_in_month"] = df["month"].dt.days_in_month.astype("int64")
    df["pressure_psia"] = np.nan
    for c in ("oil_rate_bbl_d", "gas_rate_mcf_d", "water_rate_bbl_d", "oil_rate_cal_bbl_d",
              "gor_scf_stb", "water_cut", "cum_oil_bbl", "cum_gas_mcf", "cum_water_bbl"):
        df[c] = np.nan  # filled by the merge's recomputation
    df["source_row"] = np.arange(2, len(df) + 2)
    return df


PREV = tidy([
    ("W-1", "2026-07-01", 310.0, 620.0, 10.0, 31.0),
    ("W-1", "2026-08-01", 300.0, 630.0, 12.0, 30.0),
    ("W-1", "2026-09-01", 290.0, 640.0, 14.0, 29.0),
    ("W-2", "2026-08-01", 100.0, 50.0, 0.0, 31.0),
    ("W-2", "2026-09-01", 90.0, 45.0, 0.0, 30.0),
])


def test_merge_appends_next_month_and_recomputes_derived_columns():
    new = tidy([("W-1", "2026-10-01", 280.0, 700.0, 20.0, 31.0), ("W-2", "2026-10-01", 0.0, 0.0, 0.0, 0.0)])
    merged, report = merge_production(PREV, new)
    assert len(merged) == 7
    assert list(merged["well_id"]) == ["W-1"] * 4 + ["W-2"] * 3
    w1 = merged[merged["well_id"] == "W-1"]
    # Hand calculation: cumulative oil 310 + 300 + 290 + 280 = 1180 bbl.
    assert w1["cum_oil_bbl"].iloc[-1] == 1180.0
    # GOR = 1000 * 700 / 280 = 2500 scf/STB; producing-day rate 280 / 31 bbl/d.
    assert w1["gor_scf_stb"].iloc[-1] == pytest.approx(2500.0, rel=1e-12)
    assert w1["oil_rate_bbl_d"].iloc[-1] == pytest.approx(280.0 / 31.0, rel=1e-12)
    # Water cut 20 / (280 + 20).
    assert w1["water_cut"].iloc[-1] == pytest.approx(20.0 / 300.0, rel=1e-12)
    w2 = merged[merged["well_id"] == "W-2"]
    # Shut-in month: days_on = 0 -> producing-day rate NaN, GOR NaN (oil = 0), water cut NaN.
    assert np.isnan(w2["oil_rate_bbl_d"].iloc[-1]) and np.isnan(w2["gor_scf_stb"].iloc[-1])
    assert np.isnan(w2["water_cut"].iloc[-1])
    assert w2["cum_oil_bbl"].iloc[-1] == 190.0
    added = report[report["action"] == "added"]
    assert list(added["well_id"]) == ["W-1", "W-2"] and list(added["n_months"]) == [1, 1]
    assert set(report["action"]) == {"added"}
    assert merged["month"].dtype == "datetime64[ns]"
    # Inputs not modified.
    assert PREV["cum_oil_bbl"].isna().all()


def test_merge_drops_exact_duplicates_and_reports_them():
    # A new file holding the whole history again plus one month.
    new = pd.concat([PREV, tidy([("W-1", "2026-10-01", 280.0, 700.0, 20.0, 31.0)])], ignore_index=True)
    merged, report = merge_production(PREV, new)
    assert len(merged) == 6
    dup = report[report["action"] == "duplicate_dropped"].set_index("well_id")
    assert dup.loc["W-1", "n_months"] == 3 and dup.loc["W-2", "n_months"] == 2
    assert dup.loc["W-1", "first_month"] == M("2026-07-01") and dup.loc["W-1", "last_month"] == M("2026-09-01")
    assert (report["action"] == "conflict").sum() == 0


def test_merge_conflict_newer_file_wins_and_is_reported_per_value():
    new = tidy([
        ("W-1", "2026-09-01", 295.0, 640.0, 14.0, 29.0),   # oil restated 290 -> 295
        ("W-2", "2026-09-01", 90.0, 45.0, 3.0, 28.0),      # water 0 -> 3 and days 30 -> 28
        ("W-2", "2026-08-01", 100.0, 50.0, 0.0, 31.0),     # exact repeat
    ])
    merged, report = merge_production(PREV, new)
    assert len(merged) == 5
    conf = report[report["action"] == "conflict"]
    got = set(zip(conf["well_id"], conf["column"], conf["previous_value"], conf["new_value"]))
    assert got == {("W-1", "oil_bbl", "290", "295"), ("W-2", "water_bbl", "0", "3"), ("W-2", "days_on", "30", "28")}
    assert (conf["kept"] == "new").all()
    kept = merged.set_index(["well_id", "month"])
    assert kept.loc[("W-1", M("2026-09-01")), "oil_bbl"] == 295.0
    assert kept.loc[("W-2", M("2026-09-01")), "days_on"] == 28.0
    # Cumulative follows the kept value: 310 + 300 + 295.
    assert kept.loc[("W-1", M("2026-09-01")), "cum_oil_bbl"] == 905.0
    assert report.loc[report["action"] == "duplicate_dropped", "n_months"].tolist() == [1]


def test_merge_reports_gap_new_well_and_missing_well():
    new = tidy([("W-1", "2026-12-01", 250.0, 700.0, 20.0, 31.0), ("W-3", "2026-12-01", 500.0, 400.0, 0.0, 31.0)])
    merged, report = merge_production(PREV, new)
    gap = report[report["action"] == "gap"].iloc[0]
    # W-1 held to 2026-09, new month 2026-12: October and November missing (2 months).
    assert gap["well_id"] == "W-1" and gap["n_months"] == 2
    assert gap["first_month"] == M("2026-10-01") and gap["last_month"] == M("2026-11-01")
    added = report[report["action"] == "added"].set_index("well_id")
    assert added.loc["W-3", "detail"] == "new well" and added.loc["W-1", "detail"] == "months appended"
    missing = report[report["action"] == "missing_from_new"]
    assert missing["well_id"].tolist() == ["W-2"] and missing["last_month"].iloc[0] == M("2026-09-01")
    assert len(merged) == 7


def test_merge_tolerates_float_noise_and_rejects_bad_tables():
    noisy = PREV.copy()
    noisy["oil_bbl"] = noisy["oil_bbl"] * (1 + 1e-12)  # re-export noise, not a restatement
    _, report = merge_production(PREV, noisy)
    assert (report["action"] == "conflict").sum() == 0
    with pytest.raises(InputError, match="repeats well 'W-1'"):
        merge_production(PREV, pd.concat([PREV.iloc[:1], PREV.iloc[:1]]))
    with pytest.raises(InputError, match="lacks"):
        merge_production(PREV, PREV.drop(columns="month"))


def test_merge_is_the_same_as_loading_everything_at_once():
    # Identity: history split at any month and merged back equals the whole table
    # (closed-form identity of an append without overlap).
    whole = tidy([(w, m, 100.0 + i, 200.0 + 2 * i, 5.0, 30.0)
                  for w in ("A", "B") for i, m in enumerate(pd.date_range("2025-01-01", periods=9, freq="MS"))])
    first = whole[whole["month"] < M("2025-06-01")].reset_index(drop=True)
    rest = whole[whole["month"] >= M("2025-06-01")].reset_index(drop=True)
    merged, _ = merge_production(first, rest)
    ref, _ = merge_production(whole.iloc[:0], whole)  # derived columns recomputed once
    pd.testing.assert_frame_equal(merged.drop(columns="source_row"), ref.drop(columns="source_row"))
    assert_allclose(merged.loc[merged["well_id"] == "A", "cum_oil_bbl"].iloc[-1], sum(100.0 + i for i in range(9)))


def test_merge_loads_keeps_counts_of_new_file():
    from dataclasses import dataclass

    @dataclass(frozen=True)
    class FakeLoad:
        production: pd.DataFrame
        wells: pd.DataFrame
        rows_read: int

    prev_wells = pd.DataFrame({"well_id": ["W-1", "W-2"], "api_gravity": [35.0, 36.0]})
    new_wells = pd.DataFrame({"well_id": ["W-1"], "api_gravity": [35.5]})
    new = FakeLoad(tidy([("W-1", "2026-10-01", 280.0, 700.0, 20.0, 31.0)]), new_wells, 1)
    load, report = merge_loads(PREV, prev_wells, new)
    assert load.rows_read == 1 and len(load.production) == 6
    assert load.wells.set_index("well_id")["api_gravity"].to_dict() == {"W-1": 35.5, "W-2": 36.0}


def wells_table(rows):
    return pd.DataFrame({
        "well_id": pd.Series([r[0] for r in rows], dtype="str"),
        "eur_oil_bbl": [r[1] for r in rows],
        "remaining_oil_bbl": [r[2] for r in rows],
        "stage": pd.array([r[3] for r in rows], dtype="Int64"),
        "planning_status": pd.Series([r[4] for r in rows], dtype="str"),
        "passed_gor_peak": [r[5] for r in rows],
    })


PREV_W = wells_table([
    ("A", 100_000.0, 40_000.0, 2, "window_open", False),
    ("B", 50_000.0, 10_000.0, 3, "window_closing", False),
    ("C", 80_000.0, 30_000.0, 4, "window_passed", True),
    ("D", 20_000.0, 5_000.0, 1, "window_ahead", False),
])
NEW_W = wells_table([
    ("A", 100_500.0, 39_500.0, 2, "window_open", False),   # +0.5 %: under the 1 % default
    ("B", 45_000.0, 4_000.0, 4, "window_passed", True),    # -10 %, stage 3 -> 4, past peak
    ("C", 80_000.0, 29_000.0, 4, "window_passed", True),   # no change
    ("E", 60_000.0, 60_000.0, pd.NA, "not_applicable", False),  # new well
])


def test_compare_runs_flags_by_hand():
    ch = compare_runs(PREV_W, NEW_W).set_index("well_id")
    assert list(ch.index) == ["A", "B", "C", "D", "E"]
    assert ch["new_well"].tolist() == [False, False, False, False, True]
    assert ch["dropped_well"].tolist() == [False, False, False, True, False]
    assert ch["eur_changed"].tolist() == [False, True, False, False, False]
    assert ch["stage_changed"].tolist() == [False, True, False, False, False]
    assert ch["newly_past_gor_peak"].tolist() == [False, True, False, False, False]
    assert ch["planning_status_changed"].tolist() == [False, True, False, False, False]
    assert ch["any_change"].tolist() == [False, True, False, True, True]
    # Hand calculation: B's EUR 50,000 -> 45,000 bbl is -5,000 bbl, -10 %.
    assert ch.loc["B", "eur_change_bbl"] == -5000.0
    assert ch.loc["B", "eur_change_frac"] == pytest.approx(-0.10, rel=1e-12)
    assert ch.loc["B", "change"] == ("EUR -10.0 %; stage 3 -> 4; past the GOR peak; "
                                     "planning window_closing -> window_passed")
    assert ch.loc["E", "change"] == "new well" and ch.loc["C", "change"] == ""
    assert pd.isna(ch.loc["E", "eur_oil_bbl_prev"]) and ch.loc["D", "planning_status_new"] == ""
    # A tighter tolerance makes A's +0.5 % a change.
    assert compare_runs(PREV_W, NEW_W, eur_rel_tol=0.001).set_index("well_id").loc["A", "eur_changed"]


def test_compare_runs_unknown_values_count_as_change():
    prev = wells_table([("A", np.nan, np.nan, pd.NA, "not_applicable", False)])
    new = wells_table([("A", 1000.0, 500.0, 2, "window_open", False)])
    ch = compare_runs(prev, new).iloc[0]
    assert ch["eur_changed"] and ch["stage_changed"] and ch["planning_status_changed"]
    assert ch["change"].startswith("EUR now/no longer forecast; stage n/a -> 2")


def test_summarise_changes_totals_and_identity():
    ch = compare_runs(PREV_W, NEW_W)
    s = summarise_changes(ch)
    assert (s["n_wells_prev"], s["n_wells_new"], s["n_new_wells"], s["n_dropped_wells"]) == (4, 4, 1, 1)
    assert (s["n_eur_changed"], s["n_stage_changed"], s["n_newly_past_gor_peak"]) == (1, 1, 1)
    # Hand sums: previous EUR 250,000; new EUR 285,500 bbl.
    assert s["eur_oil_bbl_prev"] == 250_000.0 and s["eur_oil_bbl_new"] == 285_500.0
    # Identity: total change = change on wells in both + new wells - dropped wells.
    assert s["eur_change_bbl"] == pytest.approx(
        s["eur_change_existing_bbl"] + s["eur_oil_new_wells_bbl"] - s["eur_oil_dropped_wells_bbl"], abs=1e-9)
    assert s["eur_change_existing_bbl"] == -4500.0
    assert s["remaining_change_bbl"] == (39_500 + 4_000 + 29_000 + 60_000) - (40_000 + 10_000 + 30_000 + 5_000)
    tr = status_transitions(ch)
    assert tr.to_dict("records") == [
        {"planning_status_prev": "window_closing", "planning_status_new": "window_passed", "n_wells": 1}]


def test_compare_runs_rejects_bad_input():
    with pytest.raises(InputError, match="repeats well"):
        compare_runs(pd.concat([PREV_W, PREV_W.iloc[:1]]), NEW_W)
    with pytest.raises(ValueError, match="eur_rel_tol"):
        compare_runs(PREV_W, NEW_W, eur_rel_tol=-0.1)


# --------------------------------------------------------------------------- the monthly cycle end to end


def _sample_field():
    """The demo field's files when present, else the generator they come from (seeded)."""
    from pathlib import Path

    prod_file = Path("sample_wells/production.csv")
    header_file = Path("sample_wells/well_header.csv")
    if prod_file.exists():
        raw = pd.read_csv(prod_file)
        header = pd.read_csv(header_file) if header_file.exists() else None
        return raw, header, "sample_wells/production.csv"
    well_model = pytest.importorskip("core.well_model")
    f = well_model.synthetic_field(6, seed=11, end_month="2026-10-01", min_years=2.0, max_years=6.0)
    return f.production, f.wells, "core.well_model.synthetic_field(6, seed=11)"


def test_monthly_update_two_months_of_the_sample_field(tmp_path):
    """Run on data to 2026-09, store it, append 2026-10, carry an override, re-run, compare.

    Checks against an independent implementation: the loader's own derived columns for the
    whole file (core.production) must equal the merge's recomputation; the change flags must
    equal direct comparisons of the two stored well tables.
    """
    production = pytest.importorskip("core.production")
    run = pytest.importorskip("core.run")
    from core.storage import open_store

    raw, header, source = _sample_field()
    months = pd.to_datetime(raw["month"] if "month" in raw.columns else raw.iloc[:, 1])
    assert months.max() >= M("2026-10-01"), source
    settings = run.RunSettings(workers=1)
    load9 = production.load_production(raw, file_name="lone_mesa_2026-09.csv", well_header=header, as_of="2026-09")
    full10 = production.load_production(raw, file_name="lone_mesa_2026-10.csv", well_header=header, as_of="2026-10")
    assert load9.production["month"].max() == M("2026-09-01")

    store = open_store(tmp_path / "desk")
    field = "Lone Mesa"
    r9 = run.run_field(load9, settings=settings)
    rid9 = store.save_run(r9, field=field, load=load9, author="ana")
    well = str(r9.wells["well_id"].iloc[0])
    store.add_override(field, well, "b", 0.5, reason="analogue wells", author="ana")

    # Next month: the operator's file holds the whole history again plus October.
    held = store.latest_dataset(field)
    merged, report = merge_loads(held.production, held.wells, full10)
    n_wells = load9.production["well_id"].nunique()
    added = report[report["action"] == "added"]
    assert (added["n_months"] == 1).all() and (added["first_month"] == M("2026-10-01")).all()
    assert len(report[report["action"] == "duplicate_dropped"]) == n_wells
    assert (report["action"] == "conflict").sum() == 0
    # Independent reference: the loader's table of the whole file (derived columns included).
    pd.testing.assert_frame_equal(merged.production.drop(columns="source_row"),
                                  full10.production.drop(columns="source_row"), check_dtype=False)

    overrides = store.well_overrides(field)
    assert set(overrides) == {well} and overrides[well].b == 0.5
    r10 = run.run_field(merged, settings=settings, overrides=overrides)
    assert r10.wells.set_index("well_id").loc[well, "override"] != ""
    rid10 = store.save_run(r10, field=field, load=merged, merged_from=held.id, author="ana")

    prev = store.previous_run(field, before=rid10)
    assert prev.id == rid9
    pd.testing.assert_frame_equal(prev.wells, r9.wells)
    assert prev.run_settings() == settings
    again = prev.to_run_result()  # what the dashboard shows when reopened
    for name in ("wells", "monthly", "units", "load_report", "candidates", "stages", "fits", "fluids"):
        pd.testing.assert_frame_equal(getattr(again, name), getattr(r9, name))
    assert again.as_of == r9.as_of and again.settings == r9.settings and again.version == r9.version
    assert again.summary == r9.summary
    new = store.load_run(rid10)
    assert new.as_of_month == M("2026-10-01") and prev.as_of_month == M("2026-09-01")
    assert new.inputs["override_entry_ids"] != []

    ch = compare_runs(prev.wells, new.wells).set_index("well_id")
    a = r9.wells.set_index("well_id")
    b = r10.wells.set_index("well_id").reindex(a.index)
    assert not ch["new_well"].any() and not ch["dropped_well"].any()
    ea, eb = a["eur_oil_bbl"].astype(float), b["eur_oil_bbl"].astype(float)
    expect_eur = ((eb - ea).abs() > np.maximum(1.0, 0.01 * ea.abs())) | (ea.isna() != eb.isna())
    assert ch.loc[a.index, "eur_changed"].tolist() == expect_eur.tolist()
    # -1 stands for "no stage" (NA), which no real stage (1-4) equals.
    expect_stage = a["stage"].astype("Int64").fillna(-1) != b["stage"].astype("Int64").fillna(-1)
    assert ch.loc[a.index, "stage_changed"].tolist() == expect_stage.tolist()
    cu = compare_units(prev.units, new.units)
    assert not cu["new_unit"].any() and not cu["dropped_unit"].any()
    assert len(cu) == r9.units["unit"].nunique()
    s = summarise_changes(ch.reset_index())
    assert s["eur_oil_bbl_new"] == pytest.approx(float(eb.sum()), rel=1e-12)
    assert s["eur_oil_bbl_prev"] == pytest.approx(float(ea.sum()), rel=1e-12)
    store.close()


@settings(max_examples=15, deadline=None)
@given(
    n_wells=st.integers(1, 3), n_months=st.integers(1, 8), split=st.integers(0, 8),
    overlap=st.integers(0, 3), seed=st.integers(0, 2**16),
)
def test_merge_of_overlapping_parts_rebuilds_the_whole(n_wells, n_months, split, overlap, seed):
    # Identity (closed form): any split of a history into an earlier part and a later part
    # that repeats up to `overlap` months merges back to the whole, with every repeated
    # well-month reported once as a duplicate and no conflict.
    rng = np.random.default_rng(seed)
    months = pd.date_range("2024-01-01", periods=n_months, freq="MS")
    rows = [(f"W{w}", m, float(rng.integers(0, 900)), float(rng.integers(0, 900)), float(rng.integers(0, 50)),
             float(rng.integers(0, 31))) for w in range(n_wells) for m in months]
    whole = tidy(rows)
    cut = min(split, n_months)
    first = whole[whole["month"] < months[0] + pd.DateOffset(months=cut)]
    later = whole[whole["month"] >= months[0] + pd.DateOffset(months=max(cut - overlap, 0))]
    merged, report = merge_production(first, later)
    ref, _ = merge_production(whole.iloc[:0], whole)
    pd.testing.assert_frame_equal(merged.drop(columns="source_row"), ref.drop(columns="source_row"))
    n_repeated = len(first.merge(later[["well_id", "month"]], on=["well_id", "month"]))
    assert int(report.loc[report["action"] == "duplicate_dropped", "n_months"].sum()) == n_repeated
    assert (report["action"] == "conflict").sum() == 0


def test_compare_units_by_hand():
    prev = pd.DataFrame({"unit": ["North", "South"], "stage": pd.array([2, 3], dtype="Int64"),
                         "planning_status": ["window_open", "window_closing"],
                         "eur_oil_bbl": [1.0e6, 5.0e5], "remaining_oil_bbl": [4.0e5, 1.0e5]})
    new = pd.DataFrame({"unit": ["North", "West"], "stage": pd.array([3, pd.NA], dtype="Int64"),
                        "planning_status": ["window_closing", "not_applicable"],
                        "eur_oil_bbl": [0.98e6, 2.0e5], "remaining_oil_bbl": [3.7e5, 2.0e5]})
    ch = compare_units(prev, new).set_index("unit")
    assert list(ch.index) == ["North", "South", "West"]
    assert ch["stage_changed"].tolist() == [True, False, False]
    assert ch["planning_status_changed"].tolist() == [True, False, False]
    assert ch["new_unit"].tolist() == [False, False, True] and ch["dropped_unit"].tolist() == [False, True, False]
    # Hand calculation: 980,000 - 1,000,000 = -20,000 bbl; 370,000 - 400,000 = -30,000 bbl.
    assert ch.loc["North", "eur_change_bbl"] == pytest.approx(-20_000.0, abs=1e-6)
    assert ch.loc["North", "remaining_change_bbl"] == pytest.approx(-30_000.0, abs=1e-6)
