"""The one run (core.run.run_field) and the batch command end to end.

Checks: the output contract (columns, order, types) of wells / forecast_monthly / units;
every well of the file keeps a row; plausible values (EUR = cumulative + remaining >= cumulative,
monthly volumes non-negative and summing to the cumulative); no NaN or infinite number in any
output file; bad rows reported while good wells are still forecast; the run is deterministic
(twice -> identical tables; the dashboard calls this same function); the economic limit from
prices against the standard formula; exit codes of the command on real files.
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from core.cli import main
from core.export import FORMULA_TRIGGERS, tables_to_csv_bytes
from core.run import (
    MONTHLY_COLUMNS,
    STATUS_BELOW_LIMIT,
    STATUS_OK,
    UNITS_COLUMNS,
    WELLS_COLUMNS,
    RunSettings,
    decline_settings,
    run_field,
    run_from_files,
    load_inputs,
)
from core.validation import InputError

ROOT = Path(__file__).resolve().parents[1]
SAMPLE_PROD = ROOT / "sample_wells" / "production.csv"
SAMPLE_HEADER = ROOT / "sample_wells" / "well_header.csv"

FLUID_TYPES = {"bitumen", "heavy_oil", "black_oil", "volatile_oil", "gas_condensate", "wet_gas", "dry_gas", "unknown"}
MODELS = {"exponential", "hyperbolic", "harmonic", "modified_hyperbolic"}
PLANNING = {"window_ahead", "window_open", "window_closing", "window_passed", "not_applicable"}

# rows injected into the synthetic file (the loader's documented treatments reject them)
BAD_ROWS = [
    {"well_id": "SYN-002", "month": "2019-13", "oil_bbl": "100"},  # no such month
    {"well_id": "SYN-003", "month": "2030-01", "oil_bbl": "n/a"},  # not a number
    {"well_id": "GHOST-1", "month": "not a date", "oil_bbl": "abc"},  # a well with no usable row
]


@pytest.fixture(scope="module")
def field_files(tmp_path_factory):
    from core.well_model import synthetic_field

    d = tmp_path_factory.mktemp("field")
    f = synthetic_field(16, seed=11)
    prod = f.production.copy()
    # a well id a spreadsheet would execute: must be forecast like any other, exported neutralised
    prod["well_id"] = prod["well_id"].replace({"SYN-004": "=SYN-004"})
    prod["month"] = prod["month"].dt.strftime("%Y-%m")
    wells = f.wells.copy()
    wells["well_id"] = wells["well_id"].replace({"SYN-004": "=SYN-004"})
    clean = d / "production.csv"
    prod.to_csv(clean, index=False)
    header = d / "well_header.csv"
    wells.to_csv(header, index=False)
    bad = d / "production_bad.csv"
    extra = pd.DataFrame(BAD_ROWS).reindex(columns=prod.columns)
    pd.concat([prod.astype(object), extra], ignore_index=True).to_csv(bad, index=False)
    return {"clean": clean, "header": header, "bad": bad, "n_wells": prod["well_id"].nunique(), "rows": len(prod)}


@pytest.fixture(scope="module")
def result(field_files):
    return run_from_files(field_files["clean"], wells_path=field_files["header"], settings=RunSettings(econ_limit_bopd=2.0, workers=1))


@pytest.fixture(scope="module")
def bad_run(field_files, tmp_path_factory):
    """The batch command on the file with bad rows: (exit code, stdout, stderr, output folder)."""
    out = tmp_path_factory.mktemp("bad_out")
    stdout, stderr = io.StringIO(), io.StringIO()
    code = main(["forecast", str(field_files["bad"]), "--wells", str(field_files["header"]), "--out", str(out),
                 "--econ-limit-bopd", "2", "--workers", "1"], stdout=stdout, stderr=stderr)
    return code, stdout.getvalue(), stderr.getvalue(), out


# ------------------------------------------------------------------------------ contract
def test_wells_contract_columns_order_and_types(result):
    w = result.wells
    assert list(w.columns[: len(WELLS_COLUMNS)]) == WELLS_COLUMNS
    assert w["well_id"].is_unique
    for c in ("first_month", "last_month", "fit_start", "fit_end", "econ_limit_date", "bubble_point_date",
              "stage2_end_date", "gor_peak_date"):
        assert pd.api.types.is_datetime64_any_dtype(w[c]), c
    for c in ("cum_oil_bbl", "cum_gas_mcf", "cum_water_bbl", "qi_bopd", "di_annual_nominal", "b",
              "terminal_decline_annual_effective", "econ_limit_bopd", "remaining_oil_bbl", "eur_oil_bbl",
              "eur_gas_mcf", "rsi_scf_stb", "bubble_point_psia", "gor_peak_scf_stb"):
        assert pd.api.types.is_float_dtype(w[c]), c
    assert str(w["stage"].dtype) == "Int64"
    assert w["passed_gor_peak"].dtype == bool
    assert set(w["fluid_type"]) <= FLUID_TYPES
    assert set(w["planning_status"]) <= PLANNING
    ok = w["status"] == STATUS_OK
    assert set(w.loc[ok, "model"]) <= MODELS
    assert w["stage"].dropna().between(1, 4).all()


def test_monthly_and_units_contract(result):
    m = result.monthly
    assert list(m.columns) == MONTHLY_COLUMNS
    assert pd.api.types.is_datetime64_any_dtype(m["month"])
    assert set(m["kind"]) <= {"actual", "forecast"}
    for c in MONTHLY_COLUMNS[3:]:
        assert pd.api.types.is_float_dtype(m[c]), c
    assert not m.duplicated(["well_id", "month"]).any()
    u = result.units
    assert list(u.columns[: len(UNITS_COLUMNS)]) == UNITS_COLUMNS
    assert u["unit"].is_unique


def test_csv_headers_follow_the_contract(result):
    files = tables_to_csv_bytes(result)
    header = lambda name: next(csv.reader(io.StringIO(files[name].decode())))  # noqa: E731
    assert header("wells.csv")[: len(WELLS_COLUMNS)] == WELLS_COLUMNS
    assert header("forecast_monthly.csv") == MONTHLY_COLUMNS
    assert header("units.csv")[: len(UNITS_COLUMNS)] == UNITS_COLUMNS


# ------------------------------------------------------------------------------ values
def test_every_well_has_a_row_and_plausible_values(result, field_files):
    w = result.wells
    assert len(w) == field_files["n_wells"]
    ok = w["status"] == STATUS_OK
    assert ok.sum() >= 0.75 * len(w), w.loc[~ok, ["well_id", "status"]]
    f = w[ok]
    # EUR = cumulative + remaining (definition of EUR, SPE-PRMS 2018 glossary), remaining >= 0
    np.testing.assert_allclose(f["eur_oil_bbl"], f["cum_oil_bbl"] + f["remaining_oil_bbl"], rtol=1e-9)
    assert (f["remaining_oil_bbl"] >= 0).all() and (f["eur_oil_bbl"] >= f["cum_oil_bbl"]).all()
    assert (f["qi_bopd"] > 0).all() and (f["di_annual_nominal"] > 0).all()
    assert f["b"].between(0, 2).all()
    # the economic-limit month lies after the as-of month; blank only when the horizon came first
    reached = f["econ_limit_date"].notna()
    assert (f.loc[reached, "econ_limit_date"] > result.as_of).all()
    assert (f.loc[~reached, "forecast_end_reason"] == "horizon").all()
    assert (f.loc[reached, "forecast_end_reason"] == "economic_limit").all()
    assert (f["fit_start"] <= f["fit_end"]).all() and (f["fit_end"] <= f["last_month"]).all()
    # a not-forecast well keeps its row and says why
    assert (w.loc[~ok, "status"].str.len() > 0).all()
    below = w["status"] == STATUS_BELOW_LIMIT
    # below the limit already: nothing remains, EUR = cumulative; otherwise EUR unknown (blank)
    assert (w.loc[below, "remaining_oil_bbl"] == 0).all()
    np.testing.assert_allclose(w.loc[below, "eur_oil_bbl"], w.loc[below, "cum_oil_bbl"], rtol=1e-12)
    assert np.isnan(w.loc[~ok & ~below, "eur_oil_bbl"].to_numpy(dtype=float)).all()


def test_monthly_volumes_consistent_with_the_wells_table(result):
    m, w = result.monthly, result.wells.set_index("well_id")
    assert (m["oil_bbl"].dropna() >= 0).all()
    fc = m[m["kind"] == "forecast"]
    assert (fc["month"] > result.as_of).all()
    ok = w.index[w["status"] == STATUS_OK]
    sums = fc.groupby("well_id")["oil_bbl"].sum()
    # remaining oil = sum of the forecast months (closed-form identity of a monthly table)
    np.testing.assert_allclose(sums.reindex(ok).fillna(0.0), w.loc[ok, "remaining_oil_bbl"], rtol=1e-6, atol=1e-3)
    # cumulative at the last forecast month = EUR
    last = m.groupby("well_id")["cum_oil_bbl"].last()
    np.testing.assert_allclose(last.reindex(ok), w.loc[ok, "eur_oil_bbl"], rtol=1e-6)
    # cumulative never falls
    assert (m.groupby("well_id")["cum_oil_bbl"].diff().dropna() >= -1e-6).all()


def test_units_totals_match_the_wells(result):
    u, w = result.units, result.wells
    assert u["n_wells"].sum() == w["first_month"].notna().sum()  # wells with production
    ok = w["status"] == STATUS_OK
    assert u["eur_oil_bbl"].sum() == pytest.approx(w["eur_oil_bbl"].sum(), rel=1e-12)
    assert u["remaining_oil_bbl"].sum() == pytest.approx(w["remaining_oil_bbl"].sum(), rel=1e-12)
    assert u["cum_oil_bbl"].sum() == pytest.approx(w["cum_oil_bbl"].sum(), rel=1e-12)
    assert u["n_wells_forecast"].sum() == ok.sum()
    shares = u[["share_stage_1", "share_stage_2", "share_stage_3", "share_stage_4", "share_not_applicable"]].sum(axis=1)
    np.testing.assert_allclose(shares, 1.0, atol=1e-9)


def test_summary_counts(result):
    s, w = result.summary, result.wells
    assert s["wells_read"] == len(w)
    assert s["wells_forecast"] + s["wells_not_forecast"] == len(w)
    assert sum(s["not_forecast_reasons"].values()) == s["wells_not_forecast"]
    assert s["wells_past_gor_peak"] == int(w["passed_gor_peak"].sum())
    assert math.isfinite(s["eur_oil_bbl_total"]) and s["eur_oil_bbl_total"] >= 0


def test_run_twice_gives_identical_numbers(result, field_files):
    # the CLI and the dashboard both call run_field: same inputs must give the same tables
    load = load_inputs(field_files["clean"], wells_path=field_files["header"], settings=result.settings)
    again = run_field(load, settings=result.settings)
    for name in ("wells", "monthly", "units", "load_report"):
        pd.testing.assert_frame_equal(getattr(result, name), getattr(again, name), check_exact=True)


def test_as_of_ignores_later_months(field_files):
    settings = RunSettings(econ_limit_bopd=2.0, as_of="2024-06", workers=1)
    res = run_from_files(field_files["clean"], wells_path=field_files["header"], settings=settings)
    assert res.as_of == pd.Timestamp("2024-06-01")
    act = res.monthly[res.monthly["kind"] == "actual"]
    assert act["month"].max() <= pd.Timestamp("2024-06-01")
    assert (res.monthly.loc[res.monthly["kind"] == "forecast", "month"] > pd.Timestamp("2024-06-01")).all()
    assert res.inputs["months_after_as_of_ignored"] > 0


def test_as_of_before_the_data_is_an_input_error(field_files):
    with pytest.raises(InputError, match="before the first month"):
        run_from_files(field_files["clean"], settings=RunSettings(as_of="1950-01"))


def test_economic_limit_from_prices():
    # Standard reserves-practice economic limit (common practice; formula in core/economics.py):
    # q = WI * OPEX / (P * NRI * (1 - tax)) / 30.4375 d = 1.0 * 3000 / (70 * 0.8 * 0.95) / 30.4375
    #   = 1.852559... bbl/d (hand calculation).
    s = RunSettings(oil_price=70.0, opex_per_month=3000.0, nri=0.8, wi=1.0, severance_tax=0.05)
    ds = decline_settings(s)
    from core.economics import economic_limit_from_inputs

    q = float(economic_limit_from_inputs(ds.economics))
    assert q == pytest.approx(3000.0 / (70.0 * 0.8 * 0.95) / 30.4375, rel=1e-12)
    assert ds.econ_limit_bopd is None
    assert decline_settings(RunSettings(econ_limit_bopd=3.0)).econ_limit_bopd == 3.0


# ------------------------------------------------------------------------------ bad rows
def test_bad_rows_reported_good_wells_still_forecast(bad_run, result, field_files):
    code, _, err, out = bad_run
    assert code == 0, err
    rep = pd.read_csv(out / "load_report.csv", keep_default_na=False)
    rejected = rep[rep["action"] == "rejected"]
    assert len(rejected) >= len(BAD_ROWS)
    assert set(rejected["row"].astype(int)) >= {field_files["rows"] + 2 + i for i in range(len(BAD_ROWS))}  # header = row 1
    w = pd.read_csv(out / "wells.csv", keep_default_na=False).set_index("well_id")
    # the well whose every row was rejected keeps a row that says so
    assert "GHOST-1" in w.index and w.loc["GHOST-1", "status"] != STATUS_OK
    # the good wells are forecast as in the clean run
    good = result.wells.set_index("well_id")
    ok = ["'" + i if i.startswith("=") else i for i in good.index[good["status"] == STATUS_OK]]
    assert (w.loc[ok, "status"] == STATUS_OK).all()


def test_command_end_to_end_outputs(bad_run):
    code, text, err, out = bad_run
    assert code == 0, err
    for name in ("wells.csv", "forecast_monthly.csv", "units.csv", "load_report.csv", "forecast.xlsx"):
        assert (out / name).stat().st_size > 0
    assert "wells read: " in text and "wells forecast: " in text and "total EUR oil" in text
    assert "wells past the GOR peak" in text
    # no NaN / inf text and no executable cell in any CSV
    for name in ("wells.csv", "forecast_monthly.csv", "units.csv", "load_report.csv"):
        with open(out / name, newline="", encoding="utf-8") as fh:
            for row in csv.reader(fh):
                for cell in row:
                    assert cell.lower() not in {"nan", "inf", "-inf", "<na>", "nat"}, (name, row)
                    if cell and cell[0] in FORMULA_TRIGGERS:
                        float(cell)  # only a negative number may start with '-'
    wells = pd.read_csv(out / "wells.csv", keep_default_na=False)
    assert "'=SYN-004" in set(wells["well_id"])
    wb = openpyxl.load_workbook(out / "forecast.xlsx", read_only=True)
    assert wb.sheetnames[:2] == ["cover", "wells"]
    cells = [c for ws in wb.worksheets for row in ws.iter_rows() for c in row]
    assert not any(c.data_type == "f" for c in cells)
    assert "'=SYN-004" in {c.value for c in cells}
    wb.close()


def test_command_unreadable_file_exit_2(tmp_path):
    f = tmp_path / "empty.csv"
    f.write_bytes(b"")
    stderr = io.StringIO()
    code = main(["forecast", str(f), "--out", str(tmp_path / "o")], stdout=io.StringIO(), stderr=stderr)
    assert code == 2
    assert len(stderr.getvalue().strip().splitlines()) == 1 and "Traceback" not in stderr.getvalue()


def test_command_db_records_run_and_writes_changes(tmp_path, field_files):
    db = tmp_path / "store.sqlite"
    args = ["forecast", str(field_files["clean"]), "--wells", str(field_files["header"]), "--econ-limit-bopd", "2",
            "--workers", "1", "--db", str(db), "--field-name", "Test Field", "--no-xlsx"]
    assert main(args + ["--out", str(tmp_path / "a")], stdout=io.StringIO(), stderr=io.StringIO()) == 0
    assert not (tmp_path / "a" / "changes.csv").exists()
    args2 = [a if a != "2" else "3" for a in args]  # a higher limit: every EUR can only fall
    assert main(args2 + ["--out", str(tmp_path / "b")], stdout=io.StringIO(), stderr=io.StringIO()) == 0
    ch = pd.read_csv(tmp_path / "b" / "changes.csv", keep_default_na=False)
    assert {"well_id", "eur_oil_bbl_prev", "eur_oil_bbl_new"} <= set(ch.columns)
    assert len(ch) == field_files["n_wells"]


@pytest.mark.skipif(not SAMPLE_PROD.exists(), reason="sample field not generated yet")
def test_sample_field_run():
    res = run_from_files(SAMPLE_PROD, wells_path=SAMPLE_HEADER if SAMPLE_HEADER.exists() else None,
                         settings=RunSettings(workers=1))
    w = res.wells
    prod_ids = set(pd.read_csv(SAMPLE_PROD, usecols=[0]).iloc[:, 0].astype(str))
    assert set(w["well_id"]) >= prod_ids
    ok = w["status"] == STATUS_OK
    assert ok.sum() >= 0.7 * len(w)
    assert (w.loc[ok, "eur_oil_bbl"] >= w.loc[ok, "cum_oil_bbl"]).all()
    # the sample field has gas/condensate wells that must be recognised, not staged
    assert w.loc[w["fluid_type"].isin(["gas_condensate", "wet_gas", "dry_gas"]), "stage"].isna().all()
    for name, table in (("wells", w), ("monthly", res.monthly), ("units", res.units)):
        num = table.select_dtypes("number").to_numpy(dtype=float, na_value=np.nan)
        assert not np.isinf(num).any(), name


def test_command_on_an_xlsx_input_with_a_named_sheet(tmp_path, field_files, result):
    prod = pd.read_csv(field_files["clean"])
    x = tmp_path / "production.xlsx"
    with pd.ExcelWriter(x, engine="openpyxl") as xw:
        pd.DataFrame({"note": ["not this sheet"]}).to_excel(xw, sheet_name="Notes", index=False)
        prod.to_excel(xw, sheet_name="Monthly", index=False)
    base = ["forecast", str(x), "--wells", str(field_files["header"]), "--econ-limit-bopd", "2", "--workers", "1",
            "--no-xlsx"]
    err = io.StringIO()
    assert main(base + ["--out", str(tmp_path / "o"), "--sheet", "Monthly"], stdout=io.StringIO(), stderr=err) == 0, err.getvalue()
    w = pd.read_csv(tmp_path / "o" / "wells.csv", keep_default_na=False)
    assert len(w) == len(result.wells)
    assert not (tmp_path / "o" / "forecast.xlsx").exists()
    err = io.StringIO()
    assert main(base + ["--out", str(tmp_path / "p"), "--sheet", "Nope"], stdout=io.StringIO(), stderr=err) == 2
    assert "Nope" in err.getvalue() and len(err.getvalue().strip().splitlines()) == 1


def test_override_is_applied_and_named(field_files, result):
    from core.decline import WellOverride

    load = load_inputs(field_files["clean"], wells_path=field_files["header"], settings=result.settings)
    ov = {"SYN-001": WellOverride(b=0.0, reason="regional analogue", author="tester")}
    res = run_field(load, settings=result.settings, overrides=ov)
    w = res.wells.set_index("well_id")
    assert w.loc["SYN-001", "model"] == "exponential" and w.loc["SYN-001", "b"] == 0.0
    assert "b=0" in w.loc["SYN-001", "override"] and "regional analogue" in w.loc["SYN-001", "override"]
    others = w.index != "SYN-001"
    assert (w.loc[others, "override"] == "").all()
    # the other wells' numbers do not move (fits are per well)
    base = result.wells.set_index("well_id")
    pd.testing.assert_series_equal(w.loc[others, "eur_oil_bbl"], base.loc[w.index[others], "eur_oil_bbl"])


@pytest.mark.parametrize(
    "kwargs, words",
    [
        ({"b_max": "x"}, "b_max must be a number"),
        ({"workers": 1.5}, "whole number"),
        ({"terminal_decline": 6.0}, "terminal_decline must be in (0, 1)"),
        ({"units": "imperial"}, "units must be"),
        ({"as_of": "someday"}, "as_of must be a month"),
        ({"oil_price": 70.0, "nri": 0.8}, "missing: opex_per_month"),
    ],
)
def test_run_settings_reject_bad_values_with_one_message(kwargs, words):
    with pytest.raises(InputError, match=None) as exc:
        RunSettings(**kwargs)
    assert words in str(exc.value)


def test_run_settings_round_trip_through_a_plain_dict():
    # the dashboard and the store keep settings as a dict and rebuild them
    s = RunSettings(oil_price=70.0, gas_price=2.5, opex_per_month=3000.0, nri=0.8, as_of="2024-06", workers=2)
    d = s.as_dict()
    assert d["as_of"] == "2024-06"
    assert RunSettings(**d) == s


def test_override_for_an_unknown_well_is_reported(field_files, result):
    from core.decline import WellOverride

    load = load_inputs(field_files["clean"], wells_path=field_files["header"], settings=result.settings)
    res = run_field(load, settings=result.settings, overrides={"NO-SUCH-WELL": WellOverride(b=0.5)})
    assert any("NO-SUCH-WELL" in m for m in res.summary["messages"])
    rep = res.load_report
    assert ((rep["file"] == "(run)") & rep["reason"].str.contains("NO-SUCH-WELL")).sum() == 1


# ------------------------------------------------------------------------------ incremental re-runs
# Reference: the full run itself (run_field on the same load, settings and overrides). The
# incremental steps must give the same tables to the last bit (check_exact), which is the
# contract the dashboard relies on.
_TABLES = ("wells", "monthly", "units", "fits", "candidates", "load_report")


def _assert_same_run(inc, full):
    for name in _TABLES:
        pd.testing.assert_frame_equal(getattr(inc, name), getattr(full, name), check_exact=True, obj=name)
    assert inc.summary == full.summary


@pytest.fixture(scope="module")
def sample_base():
    if not SAMPLE_PROD.exists():
        pytest.skip("sample field not generated yet")
    s = RunSettings(workers=1)
    load = load_inputs(SAMPLE_PROD, wells_path=SAMPLE_HEADER, settings=s)
    return load, s, run_field(load, settings=s)


def test_fit_regime_source_names_the_stage_boundary_the_fit_starts_after(sample_base):
    """The fit window starts at or after the stage tracker's regime start, and the wells table
    names which boundary that is (GOR peak, GOR rise above Rsi, bubble-point crossing)."""
    _, _, res = sample_base
    w = res.wells.set_index("well_id")
    stg = res.stages.set_index("well_id")
    src = w["fit_regime_source"].astype(str)
    named = src[src.str.startswith("stage tracker: ")]
    assert len(named) >= 10  # the sample field's staged oil wells
    col = {"GOR peak": "gor_peak_date", "GOR rise above Rsi": "stage2_end_date",
           "bubble-point crossing": "bubble_point_date"}
    seen = set()
    for wid, text in named.items():
        event = text.removeprefix("stage tracker: ")
        seen.add(event)
        assert stg.loc[wid, col[event]] == stg.loc[wid, "regime_start"], wid
        assert w.loc[wid, "fit_start"] >= stg.loc[wid, "regime_start"], wid
    assert {"GOR peak", "bubble-point crossing"} <= seen


def test_stage_one_wells_carry_the_provisional_forecast_note(sample_base):
    # Decline character changes at the bubble point (near-exponential above, hyperbolic below):
    # a forecast fitted above it is provisional, and the wells table says so.
    from core.run import STAGE1_NOTE

    _, _, res = sample_base
    w = res.wells
    s1 = w["stage"].eq(1).fillna(False) & w["status"].eq("ok")
    assert s1.sum() >= 10  # the Upper Sand and the young North Lobe wells
    assert w.loc[s1, "forecast_note"].str.contains(STAGE1_NOTE, regex=False).all()
    assert not w.loc[~s1, "forecast_note"].astype(str).str.contains("stage 1:", regex=False).any()


def test_rerun_wells_equals_the_full_run_and_an_override_removed(sample_base):
    from core.decline import WellOverride
    from core.run import rerun_wells

    load, s, base = sample_base
    ok = base.wells.loc[base.wells["status"] == STATUS_OK, "well_id"].tolist()
    w1, w2, w3 = ok[2], ok[9], ok[15]
    months = load.production.loc[load.production["well_id"] == w3, "month"].sort_values()
    ovs = {
        w1: WellOverride(b=0.3, reason="analogue", author="t"),
        w2: WellOverride(model="exponential", fit_start=months.iloc[len(months) // 2] if w2 == w3 else None,
                         reason="forced", author="t"),
        w3: WellOverride(exclude_months=tuple(months.iloc[-6:-4]), fit_end=months.iloc[-2], reason="test", author="t"),
    }
    full = run_field(load, settings=s, overrides=ovs)
    inc = rerun_wells(base, load, settings=s, overrides=ovs, wells=[w1, w2, w3])
    _assert_same_run(inc, full)
    assert inc.timings["wells_refitted"] == 3
    assert "b=0.3" in inc.wells.set_index("well_id").loc[w1, "override"]
    # removing one override (the well is named): back to the full run without it
    fewer = {k: v for k, v in ovs.items() if k != w1}
    _assert_same_run(rerun_wells(inc, load, settings=s, overrides=fewer, wells=[w1]),
                     run_field(load, settings=s, overrides=fewer))
    # a changed override the caller forgot to name is found from the fits' override column
    _assert_same_run(rerun_wells(inc, load, settings=s, overrides=fewer, wells=[]),
                     run_field(load, settings=s, overrides=fewer))


def test_rerun_wells_when_the_override_widens_the_fit_batch(sample_base):
    from core.decline import WellOverride
    from core.run import rerun_wells

    load, s, base = sample_base
    # the longest history, fitted from its first month: more months than any fit window, so
    # the padded width of the whole batch changes and every fitted well is redone
    p = load.production
    longest = p.groupby("well_id")["month"].count().idxmax()
    first = p.loc[p["well_id"] == longest, "month"].min()
    ovs = {longest: WellOverride(fit_start=first, reason="whole life", author="t")}
    full = run_field(load, settings=s, overrides=ovs)
    assert full.fits["n_months_used"].max() > base.fits["n_months_used"].max()
    inc = rerun_wells(base, load, settings=s, overrides=ovs, wells=[longest])
    _assert_same_run(inc, full)
    assert inc.timings["wells_refitted"] > 1


def test_rerun_forecast_equals_the_full_run(sample_base):
    from core.run import rerun_forecast

    load, s, base = sample_base
    for s2 in (RunSettings(workers=1, econ_limit_bopd=4.0, horizon_years=25.0, terminal_decline=0.1, econ_limit_mcfd=20.0),
               RunSettings(workers=1, oil_price=65.0, gas_price=2.0, opex_per_month=2500.0, nri=0.8, severance_tax=0.05)):
        _assert_same_run(rerun_forecast(base, load, settings=s2), run_field(load, settings=s2))


def test_incremental_reruns_refuse_changes_that_need_a_refit(sample_base):
    from core.run import rerun_forecast, rerun_wells

    load, s, base = sample_base
    with pytest.raises(ValueError, match="b_max"):
        rerun_forecast(base, load, settings=RunSettings(workers=1, b_max=1.0))
    with pytest.raises(ValueError, match="as_of"):
        rerun_forecast(base, load, settings=RunSettings(workers=1, as_of="2025-01"))
    with pytest.raises(ValueError, match="econ_limit_bopd"):
        rerun_wells(base, load, settings=RunSettings(workers=1, econ_limit_bopd=3.0), overrides=None, wells=[])
    from core.decline import WellOverride

    w = base.wells["well_id"].iloc[0]
    with pytest.raises(ValueError, match="rerun_wells"):
        rerun_forecast(base, load, settings=s, overrides={w: WellOverride(b=0.2)})


# ------------------------------------------------------------------------------ probabilistic
def test_probabilistic_columns_when_samples_are_asked(field_files, result):
    from core.export import FIELD_PERCENTILES_FILE, run_to_xlsx_bytes
    from core.run import PROB_MONTHLY_COLUMNS, PROB_WELLS_COLUMNS

    s = RunSettings(econ_limit_bopd=2.0, workers=1, samples=40, seed=3)
    load = load_inputs(field_files["clean"], wells_path=field_files["header"], settings=s)
    res = run_field(load, settings=s)
    w = res.wells
    # the deterministic contract is untouched; the percentile columns follow it
    assert list(w.columns) == list(result.wells.columns) + PROB_WELLS_COLUMNS
    pd.testing.assert_frame_equal(w[result.wells.columns], result.wells, check_exact=True)
    ans = w[w["eur_oil_bbl"].notna()]
    assert len(ans) > 0
    # reserves convention (SPE-PRMS 2018): P90 (low) <= P50 <= P10 (high)
    for q in ("eur_oil_bbl", "remaining_oil_bbl"):
        assert (ans[f"{q}_p90"] <= ans[f"{q}_p50"] + 1e-9).all() and (ans[f"{q}_p50"] <= ans[f"{q}_p10"] + 1e-9).all()
    d = ans.dropna(subset=["econ_limit_date_p90", "econ_limit_date_p10"])
    assert (d["econ_limit_date_p90"] <= d["econ_limit_date_p10"]).all()
    # EUR percentile = cumulative + remaining percentile (EUR definition, SPE-PRMS 2018 glossary)
    np.testing.assert_allclose(ans["eur_oil_bbl_p50"], ans["cum_oil_bbl"] + ans["remaining_oil_bbl_p50"], rtol=1e-9)
    assert w.loc[w["eur_oil_bbl"].isna(), "eur_oil_bbl_p50"].isna().all()  # no answer, no range
    m = res.monthly
    assert list(m.columns) == MONTHLY_COLUMNS + PROB_MONTHLY_COLUMNS
    assert m.loc[m["kind"] == "actual", PROB_MONTHLY_COLUMNS].isna().all().all()
    fc = m[(m["kind"] == "forecast") & m["oil_bbl_p50"].notna()]
    assert len(fc) > 0 and (fc["oil_bbl_p90"] <= fc["oil_bbl_p10"] + 1e-9).all()
    # field totals: sample-wise sums, stated with their method, in the CSV files and workbook
    f = res.probabilistic.field.set_index("quantity")
    assert f.loc["eur_oil_bbl", "p90"] <= f.loc["eur_oil_bbl", "p50"] <= f.loc["eur_oil_bbl", "p10"]
    assert res.summary["eur_oil_bbl_field_p50"] == f.loc["eur_oil_bbl", "p50"]
    files = tables_to_csv_bytes(res)
    fp = pd.read_csv(io.BytesIO(files[FIELD_PERCENTILES_FILE]))
    assert set(fp["quantity"]) == {"remaining_oil_bbl", "eur_oil_bbl"} and fp["method"].str.contains("sum").all()
    wb = openpyxl.load_workbook(io.BytesIO(run_to_xlsx_bytes(res)), read_only=True)
    assert "field_percentiles" in wb.sheetnames
    cover = {r[0]: r[1] for r in wb["cover"].iter_rows(values_only=True) if len(r) >= 2}
    assert "bootstrap" in cover["probabilistic method"]
    wb.close()
    # the same seed gives the same numbers
    again = run_field(load, settings=s)
    pd.testing.assert_frame_equal(again.wells, res.wells, check_exact=True)


def test_probabilistic_field_totals_count_the_gas_wells_once():
    """Gas and condensate wells (forecast on their gas decline, no samples) join the field
    totals and the field months at their deterministic oil: a constant added to every
    sample shifts each percentile by that constant (closed form), so the field P90 month
    can never fall below the gas wells' own oil of that month."""
    sample = Path(__file__).resolve().parents[1] / "sample_wells"
    s = RunSettings(workers=1, samples=20, seed=1)
    load = load_inputs(sample / "production.csv", wells_path=sample / "well_header.csv", settings=s)
    res = run_field(load, settings=s)
    w = res.wells
    gas = w.loc[w["prob_method"].astype(str).str.startswith("deterministic (gas"), "well_id"].astype(str)
    assert len(gas) == 3  # the Deep Sand gas and condensate wells of the sample field
    f = res.probabilistic.field.set_index("quantity")
    assert int(f.loc["eur_oil_bbl", "n_wells"]) == int(w["eur_oil_bbl"].notna().sum())
    assert "gas wells added" in f.loc["eur_oil_bbl", "method"]
    # field P50 = median of the sample-wise sums of the oil wells, plus the gas wells' EUR
    gas_eur = w.loc[w["well_id"].astype(str).isin(set(gas)), "eur_oil_bbl"].sum()
    sums = res.probabilistic.eur_samples.sum(axis=0)
    assert f.loc["eur_oil_bbl", "p50"] == pytest.approx(np.median(sums) + gas_eur, rel=1e-9)
    m = res.monthly
    g = m[(m["kind"] == "forecast") & m["well_id"].astype(str).isin(set(gas))].groupby("month")["oil_bbl"].sum()
    fm = res.probabilistic.field_monthly.set_index("month")
    assert g.index.isin(fm.index).all()
    assert (fm.loc[g.index, "oil_bbl_p90"] >= g - 1e-6).all()


def test_samples_setting_is_checked():
    with pytest.raises(InputError, match="samples"):
        RunSettings(samples=5)
    with pytest.raises(InputError, match="seed"):
        RunSettings(samples=20, seed=-1)
    assert RunSettings(samples=20, seed=2, scheduler="local").as_dict()["samples"] == 20


@pytest.mark.skipif(not SAMPLE_PROD.exists(), reason="sample field not generated yet")
def test_command_samples_and_type_wells(tmp_path):
    out = tmp_path / "o"
    err = io.StringIO()
    text = io.StringIO()
    code = main(["forecast", str(SAMPLE_PROD), "--wells", str(SAMPLE_HEADER), "--out", str(out), "--workers", "1",
                 "--samples", "20", "--seed", "4", "--type-wells", "--no-xlsx"], stdout=text, stderr=err)
    assert code == 0, err.getvalue()
    w = pd.read_csv(out / "wells.csv", keep_default_na=False)
    for c in ("eur_oil_bbl_p90", "eur_oil_bbl_p50", "eur_oil_bbl_p10", "remaining_oil_bbl_p90",
              "remaining_oil_bbl_p50", "remaining_oil_bbl_p10", "econ_limit_date_p90", "econ_limit_date_p50",
              "econ_limit_date_p10"):
        assert c in w.columns
    a = w[w["eur_oil_bbl_p50"] != ""]
    p90, p50, p10 = (a[f"eur_oil_bbl_{k}"].astype(float) for k in ("p90", "p50", "p10"))
    assert (p90 <= p50 + 1e-6).all() and (p50 <= p10 + 1e-6).all()
    assert (out / "field_percentiles.csv").exists()
    tw = pd.read_csv(out / "type_wells.csv")
    units = pd.read_csv(out / "units.csv").set_index("unit")
    assert len(tw) > 0 and set(tw["type_well"]) <= set(units.index)
    # each month's curve is made of at least 5 wells (the documented minimum) of its own unit
    for u, g in tw.groupby("type_well"):
        assert g["n_wells"].between(5, units.loc[u, "n_wells"]).all()
        assert (g["oil_rate_bbl_d_p90"] <= g["oil_rate_bbl_d_p10"] + 1e-9).all()
    assert "field EUR oil P90 / P50 / P10" in text.getvalue() and "type wells written" in text.getvalue()


# ------------------------------------------------------------------------------ monthly cycle with --db
@pytest.mark.skipif(not SAMPLE_PROD.exists(), reason="sample field not generated yet")
def test_command_monthly_cycle_appends_carries_overrides_and_reports_changes(tmp_path):
    from core.storage import open_store

    raw = pd.read_csv(SAMPLE_PROD, dtype=str, keep_default_na=False)
    sep = tmp_path / "quillmere_2026-09.csv"
    raw[raw["Month"] <= "2026-09"].to_csv(sep, index=False)
    octo = tmp_path / "quillmere_2026-10.csv"
    raw[raw["Month"] == "2026-10"].to_csv(octo, index=False)  # the new month only
    db = tmp_path / "store"
    base = ["--wells", str(SAMPLE_HEADER), "--workers", "1", "--db", str(db), "--field-name", "Quillmere", "--no-xlsx"]
    out1 = io.StringIO()
    assert main(["forecast", str(sep), "--out", str(tmp_path / "sep"), *base], stdout=out1, stderr=io.StringIO()) == 0
    assert "overrides carried forward: 0" in out1.getvalue()
    w1 = pd.read_csv(tmp_path / "sep" / "wells.csv", keep_default_na=False).set_index("well_id")
    # an engineer forces an exponential decline on a hyperbolic well between the two runs
    target = w1.index[(w1["model"] != "exponential") & (w1["status"] == STATUS_OK) & (w1["b"].replace("", "0").astype(float) > 0.3)][0]
    store = open_store(db)
    store.add_override("Quillmere", target, "b", 0.0, reason="analogue wells decline exponentially", author="engineer")
    store.close()
    out2, err2 = io.StringIO(), io.StringIO()
    assert main(["forecast", str(octo), "--out", str(tmp_path / "oct"), *base], stdout=out2, stderr=err2) == 0, err2.getvalue()
    text = out2.getvalue()
    n_wells_oct = raw.loc[raw["Month"] == "2026-10", "Well"].nunique()
    assert "overrides carried forward: 1" in text and f"months appended: {n_wells_oct}" in text and "conflicts: 0" in text
    w2 = pd.read_csv(tmp_path / "oct" / "wells.csv", keep_default_na=False).set_index("well_id")
    # the run covers the whole held history plus the new month, with the override applied
    assert (w2["last_month"].replace("", np.nan).dropna() <= "2026-10").all() and (w2["last_month"] == "2026-10").sum() == n_wells_oct
    assert w2.loc[target, "b"] == 0 or float(w2.loc[target, "b"]) == 0.0
    assert "b=0" in w2.loc[target, "override"] and (w2.drop(index=target)["override"] == "").all()
    ch = pd.read_csv(tmp_path / "oct" / "changes.csv", keep_default_na=False).set_index("well_id")
    assert str(ch.loc[target, "eur_changed"]).lower() == "true"
    # every flag agrees with the two wells tables: EUR moved by more than 1 % and 1 bbl
    # (core.changes default tolerance, our documented rule)
    e1 = w1["eur_oil_bbl"].replace("", np.nan).astype(float)
    e2 = w2["eur_oil_bbl"].replace("", np.nan).astype(float).reindex(e1.index)
    moved = ((e2 - e1).abs() > np.maximum(0.01 * e1.abs(), 1.0)) | (e1.isna() != e2.isna())
    flagged = ch["eur_changed"].astype(str).str.lower() == "true"
    assert set(moved[moved].index) == set(flagged[flagged].index)
    # a restated month is a conflict: reported in load_report.csv, the newer file wins
    restated = raw[raw["Month"] == "2026-10"].copy()
    restated.loc[restated.index[0], "Oil (bbl)"] = str(int(float(restated.iloc[0]["Oil (bbl)"])) + 100)
    nov = tmp_path / "quillmere_restated.csv"
    restated.to_csv(nov, index=False)
    out3 = io.StringIO()
    assert main(["forecast", str(nov), "--out", str(tmp_path / "nov"), *base], stdout=out3, stderr=io.StringIO()) == 0
    assert "conflicts: 1" in out3.getvalue() and "months appended: 0" in out3.getvalue()
    rep = pd.read_csv(tmp_path / "nov" / "load_report.csv", keep_default_na=False)
    conflict = rep[(rep["file"] == "(monthly update)") & (rep["action"] == "altered")]
    assert len(conflict) == 1 and conflict["well_id"].iloc[0] == restated.iloc[0]["Well"]


# ------------------------------------------------------------------------------ gas and condensate wells
def _recent_cgr_by_hand(prod, well):
    """Condensate-gas ratio over the last 12 producing months, straight from the loaded table."""
    p = prod[(prod["well_id"] == well) & (prod["gas_mcf"] > 0) & (prod["days_on"] > 0)].sort_values("month").tail(12)
    return p["oil_bbl"].sum() / p["gas_mcf"].sum()


def test_gas_wells_run_on_their_gas_decline(sample_base):
    from core.run import GAS_FLUID_TYPES

    load, s, base = sample_base
    w = base.wells.set_index("well_id")
    gas = w.index[w["fluid_type"].isin(GAS_FLUID_TYPES) & (w["status"] == STATUS_OK)]
    assert len(gas) >= 2  # the sample field's Deep Sand wells
    prod = load.production
    for wid in gas:
        assert "forecast on its gas decline to 10 Mcf/d (default, common practice)" in w.loc[wid, "forecast_note"]
        assert np.isfinite(w.loc[wid, "eur_oil_bbl"])
        # condensate follows gas at the recent condensate-gas ratio in every forecast month
        fc = base.monthly[(base.monthly["well_id"] == wid) & (base.monthly["kind"] == "forecast")]
        np.testing.assert_allclose(fc["oil_bbl"], fc["gas_mcf"] * _recent_cgr_by_hand(prod, wid), rtol=1e-9)
        np.testing.assert_allclose(fc["oil_bbl"].sum(), w.loc[wid, "remaining_oil_bbl"], rtol=1e-6)
    # a gas limit the wells reach: every one ends at its limit, before the horizon cap
    s2 = RunSettings(workers=1, econ_limit_mcfd=150.0)
    r2 = run_field(load, settings=s2)
    w2 = r2.wells.set_index("well_id")
    horizon_end = base.as_of + pd.DateOffset(years=50)
    for wid in gas:
        assert w2.loc[wid, "forecast_end_reason"] == "economic_limit", w2.loc[wid, "forecast_note"]
        assert w2.loc[wid, "econ_limit_date"] < horizon_end
        assert w2.loc[wid, "eur_oil_bbl"] < w.loc[wid, "eur_oil_bbl"]
        assert "150 Mcf/d (given)" in w2.loc[wid, "forecast_note"]
    # the oil wells do not move (their forecast runs on oil)
    oil = w.index.difference(gas)
    pd.testing.assert_series_equal(w2.loc[oil, "eur_oil_bbl"], w.loc[oil, "eur_oil_bbl"])


def test_gas_limit_from_prices_follows_the_standard_formula(sample_base):
    from core.run import GAS_FLUID_TYPES

    load, _, base = sample_base
    s = RunSettings(workers=1, oil_price=70.0, gas_price=3.0, opex_per_month=9000.0, nri=0.8, severance_tax=0.05)
    w = run_field(load, settings=s).wells.set_index("well_id")
    gas = w.index[w["fluid_type"].isin(GAS_FLUID_TYPES) & (w["status"] == STATUS_OK)]
    for wid in gas:
        cgr = _recent_cgr_by_hand(load.production, wid)
        # standard reserves-practice economic limit (common practice, as core/economics.py), with
        # the revenue per Mcf = gas price + CGR x oil price: q = WI*OPEX/(rev*NRI*(1-tax))/30.4375 d
        q = 1.0 * 9000.0 / ((3.0 + cgr * 70.0) * 0.8 * 0.95) / 30.4375
        assert f"to {q:.3g} Mcf/d (from prices and costs)" in w.loc[wid, "forecast_note"]


def test_reruns_with_probabilistic_forecasts_equal_the_full_run(field_files):
    from core.decline import WellOverride
    from core.run import rerun_forecast, rerun_wells

    s = RunSettings(econ_limit_bopd=2.0, workers=1, samples=20, seed=5)
    load = load_inputs(field_files["clean"], wells_path=field_files["header"], settings=s)
    base = run_field(load, settings=s)
    ov = {"SYN-001": WellOverride(b=0.5, reason="test", author="t")}
    inc = rerun_wells(base, load, settings=s, overrides=ov, wells=["SYN-001"])
    full = run_field(load, settings=s, overrides=ov)
    _assert_same_run(inc, full)
    pd.testing.assert_frame_equal(inc.probabilistic.field, full.probabilistic.field, check_exact=True)
    s2 = RunSettings(econ_limit_bopd=3.0, workers=1, samples=20, seed=6)
    _assert_same_run(rerun_forecast(full, load, settings=s2, overrides=ov), run_field(load, settings=s2, overrides=ov))


def test_reruns_refuse_a_previous_run_without_its_fits(sample_base):
    import dataclasses

    from core.run import rerun_forecast, rerun_wells

    load, s, base = sample_base
    bare = dataclasses.replace(base, fits=pd.DataFrame())  # e.g. a stored run without its fit table
    with pytest.raises(ValueError, match="fits"):
        rerun_wells(bare, load, settings=s, overrides=None, wells=[])
    with pytest.raises(ValueError, match="fits"):
        rerun_forecast(bare, load, settings=s)
