"""Production loader: formats, header recognition, units, dates, derived columns, round trips.

Expected numbers come from hand calculation on the input rows (closed-form identities of
the derived columns as defined in DEVELOPERS.md), NIST SP 811 (2008) App. B.8 for the unit
factors, or the Gregorian calendar.
"""

from __future__ import annotations

import datetime as dt
import io
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from core.production import (
    PRODUCTION_COLUMNS,
    detect_columns,
    load_production,
    load_well_header,
    read_table,
)
from core.validation import InputError

DATA = Path(__file__).parent / "data" / "loader"
AS_OF = "2024-06"


def _accounting(res):
    assert res.rows_read == res.rows_used + res.rows_rejected
    assert res.report.loc[res.report["action"] == "rejected", "row"].nunique() == res.rows_rejected


# ------------------------------------------------------------------ header recognition


@pytest.mark.parametrize(
    "header, field",
    [
        ("Oil (bbl)", "oil_bbl"), ("OIL_BBL", "oil_bbl"), ("oil volume", "oil_bbl"), ("Oil (m3)", "oil_bbl"),
        ("Gas (Mcf)", "gas_mcf"), ("GAS_E3M3", "gas_mcf"), ("Gas [10^3 m3]", "gas_mcf"),
        ("Water (m3)", "water_bbl"), ("WTR", "water_bbl"),
        ("Days On", "days_on"), ("Prod Days", "days_on"), ("Hours On", "days_on"),
        ("Date", "month"), ("Month", "month"), ("Production Month", "month"),
        ("Well", "well_id"), ("Well Name", "well_id"), ("UWI", "well_id"), ("API No", "well_id"),
        ("API #", "well_id"),
        ("Unit", "unit"), ("Reservoir", "unit"), ("Zone", "unit"), ("Formation", "unit"),
        ("Pressure (psia)", "pressure_psia"), ("BHP", "pressure_psia"), ("Static BHP", "pressure_psia"),
        ("Avg Reservoir Pressure", "pressure_psia"), ("Pressure (kPa)", "pressure_psia"),
        ("API Gravity", "api_gravity"), ("Oil Gravity (API)", "api_gravity"),
        ("Gas SG", "gas_specific_gravity"), ("Gas Specific Gravity", "gas_specific_gravity"),
        ("Reservoir Temp (degF)", "reservoir_temp_f"), ("Initial Pressure (psia)", "initial_pressure_psia"),
        ("Bubble Point Pressure", "bubble_point_psia"), ("Pb (psia)", "bubble_point_psia"),
    ],
)
def test_detect_columns_spellings(header, field):
    assert detect_columns([header]) == {field: header}


@pytest.mark.parametrize("header", ["Oil Rate (bbl/d)", "BOPD", "Cum Oil", "Water Cut", "GOR", "Gas Injection",
                                    "Flowing BHP", "Tubing Pressure", "API"])
def test_detect_columns_ignores_rates_cumulatives_and_ambiguous(header):
    assert detect_columns([header]) == {}


def test_detect_columns_priority():
    got = detect_columns(["UWI", "Well Name", "Oil", "Oil Rate (bbl/d)", "Date"])
    assert got == {"well_id": "Well Name", "month": "Date", "oil_bbl": "Oil"}


def test_explicit_mapping_wins():
    csv = b"Name,Period,Prod,Gas,Oil\nA,2021-01,10,5,999\nA,2021-02,9,5,999\n"
    res = load_production(csv, file_name="m.csv", as_of=AS_OF,
                          mapping={"well_id": "Name", "month": "Period", "oil": "Prod"})
    assert res.mapping["oil_bbl"] == "Prod" and list(res.production["oil_bbl"]) == [10, 9]
    with pytest.raises(InputError, match="no such column"):
        load_production(csv, file_name="m.csv", mapping={"oil": "Nope"})
    with pytest.raises(InputError, match="not a known field"):
        load_production(csv, file_name="m.csv", mapping={"oily": "Prod"})


def test_unit_column_names_the_reservoir_unit():
    csv = b"Well,Month,Oil,Block\nA,2021-01,10,East\nA,2021-02,9,East\n"
    res = load_production(csv, file_name="u.csv", as_of=AS_OF, unit_column="Block")
    assert set(res.production["unit"]) == {"East"} and res.wells["unit"].iloc[0] == "East"


# ------------------------------------------------------------------ formats


def test_clean_file_derived_columns_by_hand():
    res = load_production(DATA / "clean_comma.csv", as_of=AS_OF)
    _accounting(res)
    assert res.rows_used == 6 and len(res.report) == 0
    k = res.production.loc[res.production["well_id"] == "Wrenfold 1"].reset_index(drop=True)
    # hand calculation from rows 2-4 of clean_comma.csv
    assert list(k["days_in_month"]) == [31, 28, 31]  # Gregorian calendar, 2021 not leap
    np.testing.assert_allclose(k["oil_rate_bbl_d"], [3100 / 31, 2800 / 28, 3000 / 31], rtol=1e-14)
    np.testing.assert_allclose(k["gas_rate_mcf_d"], [1550 / 31, 1400 / 28, 1500 / 31], rtol=1e-14)
    np.testing.assert_allclose(k["oil_rate_cal_bbl_d"], [3100 / 31, 2800 / 28, 3000 / 31], rtol=1e-14)
    np.testing.assert_allclose(k["gor_scf_stb"], [500.0, 500.0, 500.0], rtol=1e-14)  # 1000 x Mcf / bbl
    np.testing.assert_allclose(k["water_cut"], [31 / 3131, 56 / 2856, 90 / 3090], rtol=1e-14)
    np.testing.assert_allclose(k["cum_oil_bbl"], [3100, 5900, 8900])
    np.testing.assert_allclose(k["cum_water_bbl"], [31, 87, 177])
    assert k["pressure_psia"].iloc[0] == 2450 and k["pressure_psia"].isna().sum() == 2
    assert res.wells.set_index("well_id").loc["Heron 2", "unit"] == "Lower Marl"
    assert res.pressure_kind == "average_reservoir" and len(res.content_sha256) == 64
    assert list(res.production.columns) == PRODUCTION_COLUMNS


def test_semicolon_decimal_comma_bom():
    res = load_production(DATA / "semicolon_decimal_comma.csv", as_of=AS_OF)
    _accounting(res)
    p = res.production
    assert list(p["oil_bbl"]) == [1234.5, 1100.0, 999.9]
    assert list(p["gas_mcf"]) == [678.25, 600.75, 550.0]
    assert list(p["days_on"]) == [31.0, 28.0, 30.5]
    assert "decimal comma" in res.messages[0] and res.mapping["well_id"] == "WELL"


def test_tab_with_thousands_separators():
    res = load_production(DATA / "tab_thousands.tsv", as_of=AS_OF)
    assert list(res.production["oil_bbl"]) == [12345.0, 11000.0]
    assert list(res.production["gas_mcf"]) == [6789.5, 6000.0]


def test_latin1_fallback_reported():
    res = load_production(DATA / "latin1.csv", as_of=AS_OF)
    assert res.production["well_id"].iloc[0] == "Cigüeña 21"
    assert any("latin-1" in m for m in res.messages)


def test_utf16_tab_text():
    res = load_production(DATA / "utf16_tab.txt", as_of=AS_OF)
    assert list(res.production["oil_bbl"]) == [10.0, 9.0]


def test_title_lines_above_header_skipped():
    res = load_production(DATA / "preamble.csv", as_of=AS_OF)
    assert list(res.production["source_row"]) == [5, 6]  # header on line 4
    assert any("above the header" in m for m in res.messages)


def test_bytes_upload_and_file_object():
    raw = (DATA / "clean_comma.csv").read_bytes()
    a = load_production(raw, file_name="upload.csv", as_of=AS_OF)
    b = load_production(io.BytesIO(raw), file_name="upload.csv", as_of=AS_OF)
    c = load_production(DATA / "clean_comma.csv", as_of=AS_OF)
    pd.testing.assert_frame_equal(a.production, c.production)
    pd.testing.assert_frame_equal(b.production, c.production)
    assert a.file_name == "upload.csv" and a.content_sha256 == c.content_sha256


def _xlsx(rows_by_sheet: dict[str, list[list]]) -> bytes:
    wb = openpyxl.Workbook()
    wb.remove(wb.active)
    for name, rows in rows_by_sheet.items():
        ws = wb.create_sheet(name)
        for r in rows:
            ws.append(r)
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


def test_xlsx_first_and_named_sheet_with_real_dates():
    data = _xlsx({
        "Cover": [["Invented field: Amber Flats"]],
        "Monthly": [["Well", "Month", "Oil (bbl)", "Days On"],
                    ["K-1", dt.datetime(2021, 1, 31), 100, 31],
                    ["K-1", dt.date(2021, 2, 1), 90.5, 28],
                    ["K-1", 44256, 80, 31]],  # Excel serial 44256 = 2021-03-01
    })
    res = load_production(data, file_name="wb.xlsx", sheet="Monthly", as_of=AS_OF)
    _accounting(res)
    assert list(res.production["month"].dt.strftime("%Y-%m")) == ["2021-01", "2021-02", "2021-03"]
    assert list(res.production["oil_bbl"]) == [100.0, 90.5, 80.0]
    assert list(res.production["source_row"]) == [2, 3, 4]
    res1 = load_production(data, file_name="wb.xlsx", sheet=1, as_of=AS_OF)
    pd.testing.assert_frame_equal(res1.production, res.production)
    with pytest.raises(InputError, match="header only|no recognisable"):
        load_production(data, file_name="wb.xlsx", as_of=AS_OF)  # first sheet is the cover


def test_xlsx_formula_without_cached_value_reported():
    data = _xlsx({"S": [["Well", "Month", "Oil"], ["A", "2021-01", 10], ["A", "2021-02", "=B2*2"],
                        ["A", "2021-03", 8]]})
    res = load_production(data, file_name="f.xlsx", as_of=AS_OF)
    _accounting(res)
    ln = res.report.loc[res.report["row"] == 3]
    assert ln["action"].iloc[0] == "rejected" and ln["value"].iloc[0] == "=B2*2"
    assert "never evaluated" in ln["reason"].iloc[0]


# ------------------------------------------------------------------ units


def test_metric_headers_converted():
    res = load_production(DATA / "metric_headers.csv", as_of=AS_OF)
    r = res.production.iloc[0]
    # NIST SP 811 (2008) App. B.8: 1 bbl = 0.158987294928 m3; 1 ft3 = 0.028316846592 m3;
    # 1 psi = 6.894757293168 kPa; degF = 1.8 degC + 32
    assert r["oil_bbl"] == pytest.approx(100 / 0.158987294928, rel=1e-12)
    assert r["gas_mcf"] == pytest.approx(10_000 / 28.316846592, rel=1e-12)
    assert r["water_bbl"] == pytest.approx(5 / 0.158987294928, rel=1e-12)
    assert r["pressure_psia"] == pytest.approx(10_000 / 6.894757293168361, rel=1e-12)
    assert r["days_on"] == 31.0  # 744 h / 24
    assert res.wells["reservoir_temp_f"].iloc[0] == pytest.approx(176.0)
    assert r["gor_scf_stb"] == pytest.approx(1000 * (10_000 / 28.316846592) / (100 / 0.158987294928))


def test_metric_gauge_pressure_adds_atmosphere():
    res = load_production(DATA / "metric_bar_gauge.csv", as_of=AS_OF)
    p = res.production["pressure_psia"].to_numpy()
    # 100 bar gauge = (100 + 1.01325) bar absolute; 0 barg = 1 atm = 14.69595 psia (NIST SP 811)
    assert p[0] == pytest.approx(101.01325e5 / 6894.757293168361, rel=1e-12)
    assert p[1] == pytest.approx(14.69595, rel=1e-6)


def test_units_metric_for_whole_file():
    csv = b"Well,Month,Oil,Gas,Pressure\nA,2021-01,1,1,100\n"
    res = load_production(csv, file_name="x.csv", units="metric", as_of=AS_OF)
    r = res.production.iloc[0]
    assert r["oil_bbl"] == pytest.approx(6.289810770432105)  # 1 / 0.158987294928
    assert r["gas_mcf"] == pytest.approx(35.31466672148859)  # 1000 / 28.316846592
    assert r["pressure_psia"] == pytest.approx(14.503773773020924)  # 100 kPa
    field = load_production(csv, file_name="x.csv", units="field", as_of=AS_OF)
    assert field.production["oil_bbl"].iloc[0] == 1.0
    with pytest.raises(InputError, match="units must be"):
        load_production(csv, file_name="x.csv", units="SI")


def test_unit_that_contradicts_the_column():
    csv = b"Well,Month,Oil (Mcf)\nA,2021-01,1\n"
    with pytest.raises(InputError, match="not a liquid unit"):
        load_production(csv, file_name="x.csv", as_of=AS_OF)


# ------------------------------------------------------------------ dates


def test_many_date_forms_land_on_the_month():
    res = load_production(DATA / "dates_many_forms.csv", as_of=AS_OF)
    assert res.rows_used == 10
    assert set(res.production["month"]) == {pd.Timestamp("2021-03-01")}


def test_day_first_resolved_from_a_day_above_12():
    res = load_production(DATA / "dates_dayfirst.csv", as_of=AS_OF)
    assert list(res.production["month"].dt.strftime("%Y-%m")) == ["2021-03", "2021-04"]
    assert any("day-first" in m for m in res.messages)


def test_first_of_month_resolves_order():
    res = load_production(DATA / "dates_first_of_month_dmy.csv", as_of=AS_OF)
    assert list(res.production["month"].dt.strftime("%Y-%m")) == ["2021-02", "2021-03", "2021-04"]


def test_month_end_us_dates():
    res = load_production(DATA / "dates_month_end_us.csv", as_of=AS_OF)
    assert list(res.production["month"].dt.strftime("%Y-%m")) == ["2021-01", "2021-02", "2021-03"]


def test_ambiguous_dates_need_dayfirst():
    with pytest.raises(InputError, match="dayfirst"):
        load_production(DATA / "dates_ambiguous.csv", as_of=AS_OF)
    res = load_production(DATA / "dates_ambiguous.csv", as_of=AS_OF, dayfirst=True)
    assert list(res.production["month"].dt.strftime("%Y-%m")) == ["2021-04", "2021-06"]
    res = load_production(DATA / "dates_ambiguous.csv", as_of=AS_OF, dayfirst=False)
    assert list(res.production["month"].dt.strftime("%Y-%m")) == ["2021-03", "2021-05"]


def test_mixed_date_orders_refused():
    csv = b"Well,Date,Oil\nA,13/02/2021,1\nA,02/13/2021,1\n"
    with pytest.raises(InputError, match="mixes day-first"):
        load_production(csv, file_name="mix.csv", as_of=AS_OF)


def test_tiny_oil_gives_finite_gor_and_huge_volume_rejected():
    csv = b"Well,Month,Oil,Gas\nA,2021-01,1e-300,1e7\nA,2021-02,5e12,1\nA,2021-03,10,1\n"
    res = load_production(csv, file_name="t.csv", as_of=AS_OF)
    _accounting(res)
    assert np.isnan(res.production["gor_scf_stb"].iloc[0])  # 1e10 / 1e-300 overflows: NaN, never inf
    assert "implausibly large" in res.report.set_index("row").loc[3, "reason"]


def test_invalid_calendar_dates_rejected():
    csv = b"Well,Date,Oil\nA,2021-02-30,1\nA,2021-13,1\nA,1850-01,1\nA,2021,1\nA,2021-03,1\n"
    res = load_production(csv, file_name="d.csv", as_of=AS_OF)
    _accounting(res)
    assert res.rows_used == 1 and sorted(res.report.loc[res.report["action"] == "rejected", "row"]) == [2, 3, 4, 5]


# ------------------------------------------------------------------ options, other inputs


def test_pressure_kind_and_as_of_validation():
    res = load_production(DATA / "clean_comma.csv", pressure_kind="static_bhp", as_of=AS_OF)
    assert res.pressure_kind == "static_bhp"
    with pytest.raises(InputError, match="pressure_kind"):
        load_production(DATA / "clean_comma.csv", pressure_kind="flowing")
    with pytest.raises(InputError, match="as_of"):
        load_production(DATA / "clean_comma.csv", as_of="someday")


def test_dataframe_input_and_missing_file():
    df = pd.DataFrame({"well_id": ["A", "A"], "month": pd.to_datetime(["2021-01-01", "2021-02-01"]),
                       "oil_bbl": [10.0, 9.0], "gas_mcf": [5.0, 5.0]})
    res = load_production(df, as_of=AS_OF)
    assert list(res.production["oil_bbl"]) == [10.0, 9.0]
    assert list(df.columns) == ["well_id", "month", "oil_bbl", "gas_mcf"]  # input unchanged
    with pytest.raises(InputError, match="file not found"):
        load_production(DATA / "does_not_exist.csv")


def test_load_well_header_alone():
    wh = load_well_header(DATA / "well_header.csv")
    w = wh.wells.set_index("well_id")
    assert w.loc["Finch 20", "bubble_point_psia"] == 1900.0
    assert w.loc["Finch 18", "gas_specific_gravity"] == 0.76
    assert wh.mapping["api_gravity"] == "Oil Gravity (API)"  # the bare "API" column is ambiguous
    with pytest.raises(InputError, match="well identifier"):
        load_well_header(b"Label,API Gravity\nX,30\n", file_name="h.csv")


def test_read_table_preview():
    t = read_table(DATA / "clean_comma.csv", nrows=2)
    assert list(t.frame.columns)[:3] == ["Well Name", "Date", "Oil (bbl)"]
    assert len(t.frame) == 2 and list(t.row_numbers) == [2, 3]


# ------------------------------------------------------------------ round trips (hypothesis)

_ids = st.from_regex(r"[A-Z][A-Za-z]{0,6}[ -]?[0-9]{1,4}", fullmatch=True)
_vol = st.floats(min_value=0.0, max_value=1e7, allow_nan=False, allow_infinity=False, allow_subnormal=False)


@st.composite
def tidy_tables(draw, max_wells=5, max_months=18):
    ids = draw(st.lists(_ids, min_size=1, max_size=max_wells, unique=True))
    rows = []
    for w in ids:
        start = draw(st.integers(1990 * 12, 2023 * 12))
        n = draw(st.integers(1, max_months))
        for k in range(n):
            mi = start + k
            rows.append({"Well": w, "Month": f"{mi // 12:04d}-{mi % 12 + 1:02d}", "Oil": draw(_vol),
                         "Gas": draw(_vol), "Water": draw(_vol), "Days": draw(st.integers(1, 28))})
    return pd.DataFrame(rows)


def _compare(df: pd.DataFrame, res) -> None:
    _accounting(res)
    assert res.rows_rejected == 0
    exp = df.assign(month=pd.to_datetime(df["Month"] + "-01")).sort_values(["Well", "month"]).reset_index(drop=True)
    p = res.production
    assert list(p["well_id"]) == list(exp["Well"])
    assert list(p["month"]) == list(exp["month"])
    for a, b in (("oil_bbl", "Oil"), ("gas_mcf", "Gas"), ("water_bbl", "Water"), ("days_on", "Days")):
        np.testing.assert_array_equal(p[a].to_numpy(float), exp[b].to_numpy(float))


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tidy_tables())
def test_round_trip_csv_exact(df):
    res = load_production(df.to_csv(index=False).encode(), file_name="rt.csv", as_of="2030-01")
    _compare(df, res)


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tidy_tables())
def test_round_trip_semicolon_decimal_comma_exact(df):
    raw = df.to_csv(index=False, sep=";", decimal=",").encode()
    res = load_production(raw, file_name="rt.csv", as_of="2030-01")
    _compare(df, res)


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tidy_tables(max_wells=2, max_months=6))
def test_round_trip_xlsx_exact(df):
    # Excel keeps 15 significant digits (Microsoft, "Excel specifications and limits"), and the
    # writer may drop the 17th: volumes are rounded to 4 decimals (<= 12 digits) for this case.
    df = df.assign(Oil=df["Oil"].round(4), Gas=df["Gas"].round(4), Water=df["Water"].round(4))
    data = _xlsx({"P": [list(df.columns)] + df.astype(object).values.tolist()})
    res = load_production(data, file_name="rt.xlsx", as_of="2030-01")
    _compare(df, res)


def test_xlsx_formula_in_well_id_not_taken_as_a_name():
    data = _xlsx({"S": [["Well", "Month", "Oil"], ["A", "2021-01", 10], ['=UPPER("b")', "2021-02", 9]]})
    res = load_production(data, file_name="g.xlsx", as_of=AS_OF)
    _accounting(res)
    assert list(res.production["well_id"]) == ["A"]
    assert "formula" in res.report.set_index("row").loc[3, "reason"]


def test_well_header_bytes_named_in_messages():
    raw = (DATA / "clean_comma.csv").read_bytes()
    hdr = (DATA / "well_header.csv").read_bytes()
    r2 = load_production(raw, file_name="p.csv", well_header=hdr, well_header_name="hdr.csv", as_of=AS_OF)
    assert any(m.startswith("hdr.csv:") for m in r2.messages)


def test_units_row_under_the_header():
    csv = b"Well,Month,Oil,Gas,Pressure\n,,m3,e3m3,kPa\nA,2021-01,100,10,1000\nA,2021-02,90,9,\n"
    res = load_production(csv, file_name="ur.csv", as_of=AS_OF)
    _accounting(res)
    assert res.rows_read == 2 and list(res.production["source_row"]) == [3, 4]
    r = res.production.iloc[0]
    # NIST SP 811 (2008) App. B.8 factors, closed form
    assert r["oil_bbl"] == pytest.approx(100 / 0.158987294928, rel=1e-12)
    assert r["gas_mcf"] == pytest.approx(10_000 / 28.316846592, rel=1e-12)
    assert r["pressure_psia"] == pytest.approx(1000 / 6.894757293168361, rel=1e-12)
    assert any("holds the units" in m for m in res.messages)


def test_decimal_comma_with_exponent_only():
    # found by the round-trip property: pandas writes 1.175494e-38 as "1,175494e-38" with decimal=","
    raw = b"Well;Month;Oil;Gas\nA0;1990-01;1,175494e-38;2,5e+03\n"
    res = load_production(raw, file_name="e.csv", as_of=AS_OF)
    assert list(res.production["oil_bbl"]) == [1.175494e-38] and list(res.production["gas_mcf"]) == [2500.0]
