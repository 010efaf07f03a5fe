"""Export rules: formula neutralisation, blanks for NaN/inf, YYYY-MM months, yearly fallback.

The tables here are built by hand (not by a run) so each rule is checked on a known cell.
Formula-trigger characters follow the OWASP "CSV Injection" page (common practice).
"""

from __future__ import annotations

import csv
import io

import numpy as np
import openpyxl
import pandas as pd
import pytest

from core import __version__
from core.export import (
    CAUTIONS,
    FORMULA_TRIGGERS,
    neutralise_text,
    prepare_table,
    run_to_xlsx_bytes,
    table_to_csv_bytes,
    tables_to_csv_bytes,
    write_outputs,
    yearly_volumes,
)
from core.run import MONTHLY_COLUMNS, RunResult, RunSettings

HOSTILE = ["=1+1", "+SUM(A1)", "-2+3", "@cmd", "\tTAB", "\rCR", '=HYPERLINK("http://x","y")']


def _result(n_months: int = 3, wells=("W-1", "=EVIL()", "W3")) -> RunResult:
    months = pd.date_range("2020-01-01", periods=n_months, freq="MS")
    rows = []
    for w in wells:
        for i, m in enumerate(months):
            kind = "actual" if i < n_months // 2 else "forecast"
            rows.append((w, m, kind, 100.0 - i, np.nan if i == 0 else 50.0, np.inf if i == 1 else 5.0, 3.3, 100.0 * (i + 1)))
    monthly = pd.DataFrame(rows, columns=MONTHLY_COLUMNS)
    wells_t = pd.DataFrame(
        {
            "well_id": list(wells),
            "unit": ["@north", "south", None],
            "status": ["ok", "-too few months", "ok"],
            "eur_oil_bbl": [1.5e5, np.nan, np.inf],
            "stage": pd.array([2, pd.NA, 4], dtype="Int64"),
            "passed_gor_peak": [False, True, True],
            "gor_peak_date": pd.to_datetime(["2021-03-01", None, "2019-12-01"]),
        }
    )
    units = pd.DataFrame({"unit": ["@north", "south"], "n_wells": [1, 1], "eur_oil_bbl": [1.5e5, -np.inf]})
    report = pd.DataFrame(
        {
            "file": ["p.csv"],
            "row": pd.array([7], dtype="Int64"),
            "well_id": ["W-1"],
            "column": ["oil"],
            "value": ["=cmd|' /C calc'!A0"],
            "action": ["rejected"],
            "reason": ["not a number"],
        }
    )
    return RunResult(
        wells=wells_t,
        monthly=monthly,
        units=units,
        load_report=report,
        candidates=pd.DataFrame(),
        stages=pd.DataFrame(),
        settings=RunSettings(econ_limit_bopd=2.0),
        version=__version__,
        as_of=pd.Timestamp("2020-02-01"),
        summary={"wells_read": 3},
    )


def _csv_rows(data: bytes) -> list[list[str]]:
    return list(csv.reader(io.StringIO(data.decode("utf-8"), newline="")))


@pytest.mark.parametrize("text", HOSTILE)
def test_neutralise_prefixes_formula_triggers(text):
    # OWASP "CSV Injection" (common practice): cells starting with = + - @ TAB CR get a quote.
    assert neutralise_text(text) == "'" + text


@pytest.mark.parametrize("text", ["W1", "north", "1-2", "", "a=b"])
def test_neutralise_leaves_plain_text(text):
    assert neutralise_text(text) == text


def test_trigger_set_is_the_owasp_set():
    # OWASP "CSV Injection" lists =, +, -, @, tab (0x09) and carriage return (0x0D).
    assert set(FORMULA_TRIGGERS) == {"=", "+", "-", "@", "\t", "\r"}


def test_prepare_table_blanks_months_bools():
    t = _result().wells
    p = prepare_table(t)
    assert p["gor_peak_date"].tolist() == ["2021-03", "", "2019-12"]
    assert p["passed_gor_peak"].tolist() == ["false", "true", "true"]
    assert p["well_id"].tolist() == ["W-1", "'=EVIL()", "W3"]
    assert p["status"].tolist() == ["ok", "'-too few months", "ok"]
    assert p["unit"].tolist() == ["'@north", "south", ""]
    v = p["eur_oil_bbl"].to_numpy()
    assert v[0] == 1.5e5 and np.isnan(v[1]) and np.isnan(v[2])  # inf -> blank
    assert t["eur_oil_bbl"].iloc[2] == np.inf  # input not modified


def test_csv_has_no_nan_inf_and_neutralised_text():
    data = tables_to_csv_bytes(_result())
    assert set(data) == {"wells.csv", "forecast_monthly.csv", "units.csv", "load_report.csv"}
    for name, raw in data.items():
        rows = _csv_rows(raw)
        for row in rows:
            for cell in row:
                assert cell.lower() not in {"nan", "inf", "-inf", "infinity", "<na>", "nat", "none"}, (name, row)
                if cell:
                    assert cell[0] not in FORMULA_TRIGGERS or _is_number(cell), (name, cell)
    wells = _csv_rows(data["wells.csv"])
    assert wells[0][:3] == ["well_id", "unit", "status"]
    assert wells[2][0] == "'=EVIL()"
    assert wells[2][3] == ""  # NaN EUR -> blank
    assert wells[3][3] == ""  # inf EUR -> blank
    assert wells[1][4] == "2"  # Int64 stage written as an integer
    rep = _csv_rows(data["load_report.csv"])
    assert rep[1][4] == "'=cmd|' /C calc'!A0"
    monthly = _csv_rows(data["forecast_monthly.csv"])
    assert monthly[0] == MONTHLY_COLUMNS
    assert monthly[1][1] == "2020-01"


def _is_number(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


def test_csv_subset_of_wells():
    data = tables_to_csv_bytes(_result(), wells=["W3"])
    wells = _csv_rows(data["wells.csv"])
    assert [r[0] for r in wells[1:]] == ["W3"]
    assert {r[0] for r in _csv_rows(data["forecast_monthly.csv"])[1:]} == {"W3"}


def test_xlsx_read_back_has_no_formula_and_cover_sheet():
    raw = run_to_xlsx_bytes(_result())
    wb = openpyxl.load_workbook(io.BytesIO(raw))
    assert wb.sheetnames == ["cover", "wells", "forecast_monthly", "units", "load_report"]
    for ws in wb.worksheets:
        for row in ws.iter_rows():
            for c in row:
                assert c.data_type != "f", (ws.title, c.coordinate, c.value)
                if isinstance(c.value, str) and c.value:
                    assert c.value[0] not in FORMULA_TRIGGERS, (ws.title, c.value)
                if isinstance(c.value, float):
                    assert np.isfinite(c.value)
    ws = wb["wells"]
    assert ws["A3"].value == "'=EVIL()"
    assert ws["D3"].value is None  # NaN -> blank cell
    assert ws["D4"].value is None  # inf -> blank cell
    cover = {r[0].value: r[1].value for r in wb["cover"].iter_rows()}
    assert cover["program version"] == __version__
    assert cover["as-of month"] == "2020-02"
    assert cover["cautions"] == CAUTIONS
    assert "single quote" in cover["formula neutralisation"]
    assert cover["input: econ_limit_bopd"] == 2.0
    assert wb["load_report"]["E2"].value == "'=cmd|' /C calc'!A0"


def test_xlsx_yearly_fallback_when_monthly_exceeds_row_limit():
    # 3 wells x 24 months = 72 monthly rows; a row limit of 50 forces yearly volumes.
    res = _result(n_months=24)
    raw = run_to_xlsx_bytes(res, row_limit=50)
    wb = openpyxl.load_workbook(io.BytesIO(raw))
    assert "forecast_monthly" not in wb.sheetnames and "yearly" in wb.sheetnames
    notes = [r[1].value for r in wb["cover"].iter_rows() if r[0].value == "note"]
    assert len(notes) == 1 and "yearly volumes" in notes[0] and "72" in notes[0]
    ws = wb["yearly"]
    header = [c.value for c in ws[1]]
    assert header[:4] == ["well_id", "year", "kind", "months"]
    body = [[c.value for c in row] for row in ws.iter_rows(min_row=2)]
    # yearly oil sums equal the monthly sums (conservation), per well
    for w in ("W-1", "W3"):
        monthly_sum = res.monthly.loc[res.monthly.well_id == w, "oil_bbl"].sum()
        yearly_sum = sum(r[4] for r in body if r[0] == w)
        assert yearly_sum == pytest.approx(monthly_sum, rel=1e-12)
    # the CSV still carries every month
    rows = _csv_rows(tables_to_csv_bytes(res)["forecast_monthly.csv"])
    assert len(rows) == 1 + 72


def test_yearly_volumes_split_by_kind_and_keep_blank_streams():
    res = _result(n_months=24)
    y = yearly_volumes(res.monthly)
    w1 = y[y.well_id == "W-1"]
    # 24 months from 2020-01: 2020 actual (12), 2021 forecast (12) -- months 0-11 actual
    assert w1[["year", "kind", "months"]].values.tolist() == [[2020, "actual", 12], [2021, "forecast", 12]]
    # cumulative at the end of the group is the last month's cumulative
    assert w1["cum_oil_bbl"].tolist() == [1200.0, 2400.0]


def test_yearly_volumes_match_a_pandas_groupby():
    # reference: pandas groupby sums (min_count=1, blank when no month is known) and last values
    rng = np.random.default_rng(3)
    n_w, per = 50, 120
    n = n_w * per
    m = pd.DataFrame(
        {
            "well_id": np.repeat([f"W{i:03d}" for i in range(n_w)], per),
            "month": np.tile(pd.date_range("2000-07-01", periods=per, freq="MS"), n_w),
            "kind": np.tile(["actual"] * 60 + ["forecast"] * 60, n_w),
            "oil_bbl": rng.random(n),
            "gas_mcf": np.where(rng.random(n) < 0.3, np.nan, rng.random(n)),
            "water_bbl": np.nan,
            "oil_rate_bopd": rng.random(n),
            "cum_oil_bbl": rng.random(n),
        }
    )
    got = yearly_volumes(m.sample(frac=1.0, random_state=1))  # any row order
    ref = m.assign(year=m["month"].dt.year).groupby(["well_id", "year", "kind"], sort=True).agg(
        months=("oil_bbl", "size"),
        oil_bbl=("oil_bbl", lambda s: s.sum(min_count=1)),
        gas_mcf=("gas_mcf", lambda s: s.sum(min_count=1)),
        water_bbl=("water_bbl", lambda s: s.sum(min_count=1)),
        cum_oil_bbl=("cum_oil_bbl", "last"),
    ).reset_index()
    got = got.sort_values(["well_id", "year", "kind"], ignore_index=True)
    pd.testing.assert_frame_equal(got, ref[got.columns], check_dtype=False, rtol=1e-12)


def test_write_outputs_writes_every_file(tmp_path):
    paths = write_outputs(_result(), tmp_path / "out")
    assert sorted(paths) == ["forecast.xlsx", "forecast_monthly.csv", "load_report.csv", "units.csv", "wells.csv"]
    for p in paths.values():
        assert p.exists() and p.stat().st_size > 0
    assert (tmp_path / "out" / "wells.csv").read_bytes() == table_to_csv_bytes(_result().wells)


def test_xlsx_text_round_trip_escaping_and_limits():
    # XML 1.0 (W3C 2008) forbids most control characters: they become U+FFFD; '&', '<', '>'
    # and CR survive as escapes; a cell holds at most 32,767 characters (Excel specification).
    res = _result()
    texts = ["a & b < c > d", "\rCR inside", "tab\there", "bell\x07", "ünïcødé 油井", "x" * 40_000]
    wells = pd.DataFrame({"well_id": [f"T{i}" for i in range(len(texts))], "note": texts})
    res = RunResult(**{**res.__dict__, "wells": wells})
    wb = openpyxl.load_workbook(io.BytesIO(run_to_xlsx_bytes(res)))
    got = [wb["wells"].cell(row=r, column=2).value for r in range(2, 2 + len(texts))]
    assert got[0] == "a & b < c > d"
    assert got[1] == "'\rCR inside"  # neutralised (starts with CR) and kept
    assert got[2] == "tab\there"
    assert got[3] == "bell\ufffd"
    assert got[4] == "ünïcødé 油井"
    assert got[5] == "x" * 32_767


def test_xlsx_numbers_keep_full_precision():
    # numbers are written in shortest round-trip form: read back bit-identical
    vals = [1.0 / 3.0, 123456789.123456789, 1e-300, 2.5e17, 0.1 + 0.2]
    res = _result()
    res = RunResult(**{**res.__dict__, "units": pd.DataFrame({"unit": list("abcde"), "x": vals})})
    wb = openpyxl.load_workbook(io.BytesIO(run_to_xlsx_bytes(res)))
    assert [wb["units"].cell(row=r, column=2).value for r in range(2, 7)] == vals
    rows = _csv_rows(tables_to_csv_bytes(res)["units.csv"])
    assert [float(r[1]) for r in rows[1:]] == vals


def test_xlsx_subset_of_wells():
    wb = openpyxl.load_workbook(io.BytesIO(run_to_xlsx_bytes(_result(), wells=["W3", "'=EVIL()"])))
    assert [r[0] for r in wb["wells"].iter_rows(min_row=2, values_only=True)] == ["W3"]
    assert {r[0] for r in wb["forecast_monthly"].iter_rows(min_row=2, values_only=True)} == {"W3"}
    assert wb["load_report"].max_row == 1  # the report line of W-1 is left out


def test_yearly_volumes_same_for_text_and_categorical_ids():
    # regression between two representations of the same table (our own code on both sides)
    res = _result(n_months=30, wells=("W-b", "W-a", "W-c"))
    m = res.monthly.sort_values(["well_id", "month"], ignore_index=True)
    cat = m.assign(
        well_id=pd.Categorical(m["well_id"], categories=["W-c", "W-a", "W-b"]),  # categories not sorted
        kind=pd.Categorical(m["kind"]),
    )
    pd.testing.assert_frame_equal(yearly_volumes(cat), yearly_volumes(m), check_dtype=False)


def test_csv_blocks_threaded_equal_sequential(monkeypatch):
    # the threaded block writer yields the same bytes in the same order (regression, our code)
    import core.export as export

    monkeypatch.setattr(export, "_CSV_CHUNK_ROWS", 7)
    res = _result(n_months=24)
    seq = b"".join(export.csv_chunks(res.monthly, threads=1))
    thr = b"".join(export.csv_chunks(res.monthly, threads=2))
    assert seq == thr and seq.count(b"\n") == 1 + len(res.monthly)


def test_xlsx_package_parts_are_well_formed():
    # ECMA-376 Part 2 (Open Packaging Conventions): every part is XML and listed in
    # [Content_Types].xml; the workbook names each sheet once (read with Python's zipfile/ElementTree)
    import zipfile
    import xml.etree.ElementTree as ET

    z = zipfile.ZipFile(io.BytesIO(run_to_xlsx_bytes(_result())))
    names = set(z.namelist())
    assert {"[Content_Types].xml", "_rels/.rels", "xl/workbook.xml", "xl/_rels/workbook.xml.rels", "xl/styles.xml"} <= names
    for n in names:
        ET.fromstring(z.read(n))  # raises on malformed XML
    ct = z.read("[Content_Types].xml").decode()
    sheets = sorted(n for n in names if n.startswith("xl/worksheets/"))
    assert len(sheets) == 5 and all(f'PartName="/{s}"' in ct for s in sheets)
