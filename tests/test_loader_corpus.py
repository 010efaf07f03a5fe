"""Loader corpus: one test per bad-data treatment and per hostile file (issues 2 and 9).

Every file lives in tests/data/loader (written by tests/data/make_corpus.py, invented wells)
except the large ones (200,000 rows, a huge line), generated here in tmp_path. Expected
outcomes are the treatments documented in core/production.py and the loader README; row
numbers are counted by hand from the corpus files (header = row 1).
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from core.production import (
    PRODUCTION_COLUMNS,
    REPORT_COLUMNS,
    WELL_COLUMNS,
    LoadResult,
    load_production,
)
from core.validation import InputError

DATA = Path(__file__).parent / "data" / "loader"
AS_OF = "2024-06"


def check_accounting(res: LoadResult) -> None:
    """Contract checks that hold for every file (DEVELOPERS.md, data contracts)."""
    assert res.rows_read == res.rows_used + res.rows_rejected
    rej = res.report.loc[res.report["action"] == "rejected", "row"]
    assert rej.notna().all()
    assert rej.nunique() == res.rows_rejected
    assert len(res.production) == res.rows_used
    assert list(res.production.columns) == PRODUCTION_COLUMNS
    assert list(res.report.columns) == REPORT_COLUMNS
    assert list(res.wells.columns) == WELL_COLUMNS
    p = res.production
    assert not p.duplicated(["well_id", "month"]).any()
    key = list(zip(p["well_id"], p["month"]))
    assert key == sorted(key)
    assert (p["month"].dt.day == 1).all()
    num = p.select_dtypes("number").to_numpy(dtype=float)
    assert not np.isinf(num).any()
    for c in ("oil_bbl", "days_on", "days_in_month", "oil_rate_cal_bbl_d", "cum_oil_bbl"):
        assert p[c].notna().all(), c
    assert set(res.wells["well_id"]) == set(p["well_id"])
    assert set(res.report["action"]) <= {"rejected", "altered", "info"}
    # used rows and rejected rows never overlap
    assert not set(p["source_row"]) & set(rej.astype(int))


def line(res: LoadResult, row: int | None, column: str | None = None, action: str | None = None) -> pd.DataFrame:
    r = res.report
    m = r["row"].isna() if row is None else (r["row"] == row).fillna(False)
    if column is not None:
        m &= r["column"] == column
    if action is not None:
        m &= r["action"] == action
    return r.loc[m]


@pytest.fixture(scope="module")
def bad() -> LoadResult:
    res = load_production(DATA / "bad_values.csv", as_of=AS_OF)
    check_accounting(res)
    return res


def test_bad_values_accounting(bad):
    # 16 data rows: rows 3, 4, 5, 6, 13, 14, 15, 16 rejected (counted by hand from the file)
    assert (bad.rows_read, bad.rows_used, bad.rows_rejected) == (16, 8, 8)
    assert sorted(bad.production["source_row"]) == [2, 7, 8, 9, 10, 11, 12, 17]


@pytest.mark.parametrize("row, value", [(3, ""), (4, "n/a")])
def test_blank_or_na_oil_rejected(bad, row, value):
    ln = line(bad, row, "oil_bbl", "rejected")
    assert len(ln) == 1 and ln["value"].iloc[0] == value
    assert "missing" in ln["reason"].iloc[0]


def test_text_in_number_rejected(bad):
    ln = line(bad, 5, "oil_bbl", "rejected")
    assert ln["value"].iloc[0] == "12x" and ln["reason"].iloc[0] == "not a number"
    assert len(line(bad, 16, "gas_mcf", "rejected")) == 1


def test_negative_volume_rejected(bad):
    ln = line(bad, 6, "oil_bbl", "rejected")
    assert ln["value"].iloc[0] == "-40" and "negative" in ln["reason"].iloc[0]


def test_null_and_dash_gas_water_set_to_zero(bad):
    assert line(bad, 7, "gas_mcf", "altered")["value"].iloc[0] == "NULL"
    assert line(bad, 7, "water_bbl", "altered")["value"].iloc[0] == "-"
    r = bad.production.set_index("source_row").loc[7]
    assert r["gas_mcf"] == 0.0 and r["water_bbl"] == 0.0 and r["gor_scf_stb"] == 0.0


def test_days_on_above_month_capped(bad):
    ln = line(bad, 8, "days_on", "altered")
    assert "capped at 31" in ln["reason"].iloc[0]
    r = bad.production.set_index("source_row").loc[8]
    assert r["days_on"] == 31.0 and bool(r["days_on_given"])


def test_days_on_zero_with_volume_uses_calendar_days(bad):
    assert len(line(bad, 9, "days_on", "altered")) == 1
    r = bad.production.set_index("source_row").loc[9]
    # August has 31 days (calendar); days_on_given False marks the substitution
    assert r["days_on"] == 31.0 and not bool(r["days_on_given"])
    assert r["oil_rate_bbl_d"] == pytest.approx(80.0 / 31.0)


def test_days_on_blank_uses_calendar_days(bad):
    assert len(line(bad, 10, "days_on", "altered")) == 1
    r = bad.production.set_index("source_row").loc[10]
    assert r["days_on"] == 30.0 and not bool(r["days_on_given"])  # September: 30 days


@pytest.mark.parametrize("row, value", [(11, "-150"), (12, "95000"), (17, "high")])
def test_bad_pressure_dropped_row_kept(bad, row, value):
    ln = line(bad, row, "pressure_psia", "altered")
    assert ln["value"].iloc[0] == value
    r = bad.production.set_index("source_row").loc[row]
    assert np.isnan(r["pressure_psia"])


def test_missing_well_id_rejected(bad):
    ln = line(bad, 13, "well", "rejected")
    assert ln["reason"].iloc[0] == "missing well id"


def test_unparseable_date_rejected(bad):
    ln = line(bad, 14, "month", "rejected")
    assert ln["value"].iloc[0] == "not a date" and "unparseable" in ln["reason"].iloc[0]


def test_future_month_rejected(bad):
    ln = line(bad, 15, "month", "rejected")
    assert "future" in ln["reason"].iloc[0] and "2024-06" in ln["reason"].iloc[0]
    # a later as-of month accepts the row
    res = load_production(DATA / "bad_values.csv", as_of="2099-12")
    check_accounting(res)
    assert 15 in set(res.production["source_row"])


def test_gaps_reported_per_well(bad):
    ln = line(bad, None, "month", "info")
    assert len(ln) == 1 and ln["value"].iloc[0] == "2021-02..2021-05, 2021-12"


def test_duplicates_exact_dropped_conflicting_rejected():
    res = load_production(DATA / "duplicates.csv", as_of=AS_OF)
    check_accounting(res)
    assert "exact duplicate of row 2" in line(res, 3, "Month", "rejected")["reason"].iloc[0]
    for r in (4, 5):
        assert "conflicting duplicate well-month (rows 4, 5)" in line(res, r, "Month", "rejected")["reason"].iloc[0]
    assert sorted(res.production["source_row"]) == [2, 6]


def test_out_of_order_sorted_and_gaps_reported():
    res = load_production(DATA / "order_and_gaps.csv", as_of=AS_OF)
    check_accounting(res)
    info = line(res, None, "Month", "info")
    assert any("sorted" in r for r in info["reason"])
    gap = info.loc[info["reason"].str.contains("missing month")]
    assert gap["value"].iloc[0] == "2020-03, 2020-05..2020-06"
    assert list(res.production["oil_bbl"]) == [430, 420, 400, 380, 370]


def test_one_row_and_all_zero_wells_kept_and_reported():
    res = load_production(DATA / "one_row_and_zeros.csv", as_of=AS_OF)
    check_accounting(res)
    assert res.rows_used == 4
    r = res.report.set_index("well_id")
    assert "only one month" in r.loc["Tern 6", "reason"]
    assert "all volumes are zero" in r.loc["Gull 7", "reason"]
    # GOR and water cut undefined when oil (and water) are zero: NaN, never inf
    g = res.production.loc[res.production["well_id"] == "Gull 7"]
    assert g["gor_scf_stb"].isna().all() and g["water_cut"].isna().all()


def test_truncated_last_line_rejected():
    res = load_production(DATA / "truncated.csv", as_of=AS_OF)
    check_accounting(res)
    ln = line(res, 4, action="rejected")
    assert "truncated" in ln["reason"].iloc[0]
    assert (res.rows_read, res.rows_used) == (3, 2)


def test_ragged_row_rejected_not_lost():
    res = load_production(DATA / "ragged.csv", as_of=AS_OF)
    check_accounting(res)
    ln = line(res, 3, action="rejected")
    assert "wrong number of fields" in ln["reason"].iloc[0]
    assert sorted(res.production["source_row"]) == [2, 4]


def test_fluid_columns_constant_check_and_bounds():
    res = load_production(DATA / "well_fluid_columns.csv", as_of=AS_OF)
    check_accounting(res)
    w = res.wells.set_index("well_id")
    assert w.loc["Finch 18", "api_gravity"] == 36.0  # first value in month order
    assert "not constant" in line(res, None, "api_gravity", "info")["reason"].iloc[0]
    assert np.isnan(w.loc["Finch 19", "bubble_point_psia"])  # 150000 psia is implausible
    assert len(line(res, None, "bubble_point_psia", "altered")) == 1


def test_well_header_file_wins_and_is_reported():
    res = load_production(DATA / "well_fluid_columns.csv", well_header=DATA / "well_header.csv", as_of=AS_OF)
    check_accounting(res)
    w = res.wells.set_index("well_id")
    assert w.loc["Finch 18", "api_gravity"] == 37.0
    assert w.loc["Finch 18", "unit"] == "North Lobe"
    assert w.loc["Finch 19", "unit"] == "unassigned"
    reasons = " | ".join(res.report["reason"])
    assert "well header value used" in reasons
    assert "not in the production file" in reasons and "not in the well header" in reasons


# ------------------------------------------------------------------ hostile files


def _raises(path_or_bytes, match: str, **kw) -> str:
    with pytest.raises(InputError) as ei:
        load_production(path_or_bytes, as_of=AS_OF, **kw)
    msg = str(ei.value)
    assert match in msg
    assert "Traceback" not in msg and "\n" not in msg
    assert type(ei.value) is InputError
    return msg


@pytest.mark.parametrize(
    "name, match",
    [
        ("empty.csv", "empty (0 bytes)"),
        ("header_only.csv", "header only"),
        ("binary.csv", "binary content"),
        ("fake.xlsx", "not an XLSX workbook"),
        ("legacy.xls", "old binary Excel"),
        ("no_oil_column.csv", "no recognisable oil volume column"),
        ("only_blank_lines.csv", "no text lines"),
        ("dates_ambiguous.csv", "ambiguous"),
    ],
)
def test_unreadable_files_one_clear_message(name, match):
    msg = _raises(DATA / name, match)
    assert name in msg


def test_over_size_limit():
    msg = _raises(DATA / "clean_comma.csv", "over the limit", max_bytes=100)
    assert "clean_comma.csv" in msg and "max_bytes" in msg
    # the same limit applies to uploads (bytes)
    _raises((DATA / "clean_comma.csv").read_bytes(), "over the limit", max_bytes=100, file_name="up.csv")


def test_wrong_sheet_names_the_sheets(tmp_path):
    import openpyxl

    wb = openpyxl.Workbook()
    wb.active.title = "Monthly"
    wb.active.append(["Well", "Month", "Oil"])
    wb.active.append(["A", "2021-01", 5])
    p = tmp_path / "wb.xlsx"
    wb.save(p)
    msg = _raises(p, "no sheet named 'Data'", sheet="Data")
    assert "'Monthly'" in msg and "wb.xlsx" in msg


def test_damaged_workbook(tmp_path):
    import openpyxl

    wb = openpyxl.Workbook()
    wb.active.append(["Well", "Month", "Oil"])
    buf = io.BytesIO()
    wb.save(buf)
    _raises(buf.getvalue()[:300], "XLSX", file_name="cut.xlsx")


def test_huge_single_line_without_break(tmp_path):
    p = tmp_path / "oneline.csv"
    p.write_bytes(b"Well,Month,Oil" + b",x" * 600_000)
    msg = _raises(p, "first line")
    assert "oneline.csv" in msg


def test_huge_data_line_is_rejected_row(tmp_path):
    p = tmp_path / "hugecell.csv"
    p.write_text("Well,Month,Oil\nA,2021-01,10\nA,2021-02," + "9" * 10 + "z" * 2_000_000 + "\nA,2021-03,8\n")
    res = load_production(p, as_of=AS_OF)
    check_accounting(res)
    ln = line(res, 3, "Oil", "rejected")
    assert ln["reason"].iloc[0] == "not a number" and len(ln["value"].iloc[0]) <= 80


def test_200000_rows_generated(tmp_path):
    rng = np.random.default_rng(11)
    n_wells, n_months = 1000, 200
    months = pd.date_range("2005-01-01", periods=n_months, freq="MS").strftime("%Y-%m")
    oil = np.round(rng.uniform(0, 5000, n_wells * n_months), 2)
    df = pd.DataFrame({"Well": np.repeat([f"G-{i:04d}" for i in range(n_wells)], n_months),
                       "Month": np.tile(months, n_wells), "Oil (bbl)": oil})
    df.loc[7, "Oil (bbl)"] = np.nan  # one blank oil -> one rejected row
    p = tmp_path / "big.csv"
    df.to_csv(p, index=False)
    res = load_production(p, as_of=AS_OF)
    check_accounting(res)
    assert (res.rows_read, res.rows_used, res.rows_rejected) == (200_000, 199_999, 1)
    assert res.production["oil_bbl"].sum() == pytest.approx(np.nansum(oil) - oil[7], rel=1e-12)
    assert line(res, 9, "Oil (bbl)", "rejected")["reason"].iloc[0].startswith("oil volume missing")


@pytest.mark.parametrize("name", sorted(p.name for p in DATA.iterdir()
                                        if p.suffix in (".csv", ".tsv", ".txt") and p.name not in {
                                            "empty.csv", "header_only.csv", "binary.csv", "no_oil_column.csv",
                                            "only_blank_lines.csv", "dates_ambiguous.csv", "well_header.csv"}))
def test_every_readable_corpus_file_keeps_the_accounting(name):
    res = load_production(DATA / name, as_of=AS_OF)
    check_accounting(res)


def test_pressure_above_initial_and_zero_gor_reported():
    csv = (b"Well,Month,Oil,Gas,Pressure (psia),Initial Pressure (psia)\n"
           b"Lark 30,2021-01,100,0,3100,3000\nLark 30,2021-02,90,0,2900,3000\n")
    res = load_production(csv, file_name="p.csv", as_of=AS_OF)
    check_accounting(res)
    ln = line(res, 2, "Pressure (psia)", "info")
    assert "above the initial pressure 3000" in ln["reason"].iloc[0]
    assert res.production["pressure_psia"].iloc[0] == 3100.0  # kept
    assert "GOR 0" in line(res, None, "Gas", "info")["reason"].iloc[0]


def test_numeric_well_ids_keep_leading_zeros():
    csv = b"API No,Month,Oil\n0042123456,2021-01,5\n0042123456,2021-02,4\n"
    res = load_production(csv, file_name="z.csv", as_of=AS_OF)
    assert list(res.production["well_id"]) == ["0042123456", "0042123456"]


def test_carriage_return_line_ends():
    res = load_production(DATA / "mac_cr.csv", as_of=AS_OF)
    check_accounting(res)
    assert list(res.production["source_row"]) == [2, 3] and list(res.production["oil_bbl"]) == [5.0, 4.0]


# ------------------------------------------------------------------ mutation property (issue 9)

from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

_SEEDS = [p.read_bytes() for p in sorted(DATA.iterdir())
          if p.suffix in (".csv", ".tsv", ".txt") and p.stat().st_size > 0 and p.name != "binary.csv"]
_MUT = st.lists(st.tuples(st.sampled_from(["del", "ins", "rep"]), st.integers(0, 10**6),
                          st.binary(min_size=1, max_size=4)
                          | st.sampled_from([b",", b";", b"\n", b"\r", b'"', b"\t", b"-", b"n/a", b"1e400", b"\xff",
                                             b"\x00", b"=", b"13/13/2021", b"2099-01"])), max_size=6)


def _mutate(data: bytes, muts) -> bytes:
    """Apply byte-level damage: (op, position, bytes) with op del / ins / rep."""
    b = bytearray(data)
    for op, pos, data in muts:
        pos %= len(b) + 1
        if op == "del":
            del b[pos:pos + len(data)]
        elif op == "ins":
            b[pos:pos] = data
        else:
            b[pos:pos + len(data)] = data
    return bytes(b)


@settings(max_examples=40, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.integers(0, len(_SEEDS) - 1), _MUT)
def test_mutated_files_load_or_give_one_clear_message(i, muts):
    """Any byte-level damage to a corpus file gives a LoadResult that keeps the accounting, or an
    InputError with a one-line message naming the file; never another exception."""
    b = _mutate(_SEEDS[i], muts)
    try:
        res = load_production(b, file_name="mutated.csv", as_of=AS_OF)
    except InputError as exc:
        assert str(exc).startswith("mutated.csv: ")
        assert "\n" not in str(exc)
        return
    check_accounting(res)


def _seed_workbook() -> bytes:
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["Well", "Month", "Oil", "Gas"])
    for i in range(12):
        ws.append(["Avocet 24", f"2021-{i + 1:02d}", 100 - i, "=C2*2" if i == 3 else 50])
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


_WB = _seed_workbook()


@settings(max_examples=25, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.lists(st.tuples(st.sampled_from(["del", "ins", "rep"]), st.integers(0, 10**6),
                          st.binary(min_size=1, max_size=8)), min_size=1, max_size=4))
def test_mutated_workbooks_load_or_give_one_clear_message(muts):
    """Damaged XLSX bytes (bad zip, bad deflate stream, bad XML) never escape as another exception."""
    b = _mutate(_WB, muts)
    try:
        res = load_production(b, file_name="mutated.xlsx", as_of=AS_OF)
    except InputError as exc:
        assert str(exc).startswith("mutated.xlsx: ") and "\n" not in str(exc)
        return
    check_accounting(res)


def test_wide_layout_named_as_such():
    csv = b"Well,2021-01,2021-02,2021-03\nA,10,9,8\n"
    msg = _raises(csv, "wide layout", file_name="wide.csv")
    assert msg.startswith("wide.csv: 3 column headers are months")
