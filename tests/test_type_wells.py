"""Type wells (issue 10 item 3): hand-made wells with known percentiles, alignment at first
production and at peak, normalisation, Arps fit of the P50 (closed-form recovery), CSV export."""

import io

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from core.type_wells import (
    CURVE_COLUMNS,
    TABLE_COLUMNS,
    type_well,
    type_well_table,
    type_well_to_csv,
    type_wells_by_unit,
)
from core.validation import InputError


def hyperbolic(n, qi=400.0, di=0.8, b=0.6):
    """Arps (1945) hyperbolic rate at mid-month of n months. [bbl/d]"""
    t = (np.arange(n) + 0.5) / 12.0
    return qi / (1.0 + b * di * t) ** (1.0 / b)


def table(wells):
    """Tidy monthly table from {well_id: (start, rates, unit, days_on)} (30 producing days)."""
    rows = []
    for wid, (start, rates, unit) in wells.items():
        months = pd.date_range(start, periods=len(rates), freq="MS")
        rows.append(pd.DataFrame({"well_id": wid, "month": months, "unit": unit,
                                  "oil_bbl": np.asarray(rates) * 30.0, "days_on": 30.0,
                                  "days_in_month": months.days_in_month}))
    return pd.concat(rows, ignore_index=True)


def test_three_identical_wells_all_percentiles_equal():
    # Closed form: identical samples -> every percentile equals the common value.
    q = hyperbolic(24)
    prod = table({f"W{i}": ("2020-01-01", q, "A") for i in range(3)})
    tw = type_well(prod, min_wells=3)
    c = tw.curve
    assert list(c.columns) == CURVE_COLUMNS
    assert_allclose(c["oil_rate_bbl_d_p90"], q, rtol=1e-12)
    assert_allclose(c["oil_rate_bbl_d_p50"], q, rtol=1e-12)
    assert_allclose(c["oil_rate_bbl_d_p10"], q, rtol=1e-12)
    assert (c["n_wells"] == 3).all()


def test_shifted_starts_align_at_first_production():
    # The same well started in three different years aligns to one curve.
    q = hyperbolic(18)
    prod = table({"A": ("2015-03-01", q, "U"), "B": ("2019-11-01", q, "U"), "C": ("2023-06-01", q, "U")})
    tw = type_well(prod, min_wells=3)
    assert_allclose(tw.curve["oil_rate_bbl_d_p50"], q, rtol=1e-12)
    assert len(tw.curve) == 18


def test_alignment_at_peak_drops_ramp_up():
    # Ramp-ups of 0, 2 and 5 months before the same decline: aligned at the peak they coincide.
    q = hyperbolic(20)
    ramps = {"A": [], "B": [50.0, 150.0], "C": [20.0, 40.0, 80.0, 120.0, 200.0]}
    prod = table({w: ("2021-01-01", np.r_[r, q], "U") for w, r in ramps.items()})
    tw = type_well(prod, align="peak", min_wells=3)
    assert_allclose(tw.curve["oil_rate_bbl_d_p50"], q, rtol=1e-12)
    # aligned at first production the ramp shows and the spread is not zero
    tw0 = type_well(prod, align="first_production", min_wells=3)
    assert (tw0.curve["oil_rate_bbl_d_p10"] > tw0.curve["oil_rate_bbl_d_p90"]).any()


def test_known_percentiles_of_five_scaled_wells():
    # Rates 1x..5x a shape: linear-interpolation percentiles (Hyndman & Fan 1996 type 7) of
    # {1,2,3,4,5}: 10th = 1 + 0.1*4 = 1.4, median 3, 90th = 1 + 0.9*4 = 4.6 (hand calculation).
    q = hyperbolic(12, qi=100.0)
    prod = table({f"W{k}": ("2022-01-01", k * q, "U") for k in range(1, 6)})
    c = type_well(prod).curve
    assert_allclose(c["oil_rate_bbl_d_p90"], 1.4 * q, rtol=1e-12)  # P90 = low
    assert_allclose(c["oil_rate_bbl_d_p50"], 3.0 * q, rtol=1e-12)
    assert_allclose(c["oil_rate_bbl_d_p10"], 4.6 * q, rtol=1e-12)  # P10 = high
    assert_allclose(c["oil_rate_bbl_d_mean"], 3.0 * q, rtol=1e-12)


def test_normalised_by_peak_rate_collapses_scaled_wells():
    q = hyperbolic(12, qi=100.0)
    prod = table({f"W{k}": ("2022-01-01", k * q, "U") for k in range(1, 6)})
    tw = type_well(prod, normalize="peak_rate")
    c = tw.curve
    # every well scaled to the median peak (3 x the shape's peak): no spread left
    assert_allclose(c["oil_rate_bbl_d_p90"], c["oil_rate_bbl_d_p10"], rtol=1e-12)
    assert_allclose(c["oil_rate_bbl_d_p50"], 3.0 * q, rtol=1e-12)
    assert tw.normalized_by == "peak_rate" and tw.normalized_to == pytest.approx(3.0 * q.max())


def test_normalised_by_header_column():
    # Rates proportional to lateral length; normalised to 5000 ft they coincide.
    q = hyperbolic(12, qi=100.0)
    lat = {"A": 4000.0, "B": 6000.0, "C": 10000.0}
    prod = table({w: ("2022-01-01", q * L / 5000.0, "U") for w, L in lat.items()})
    header = pd.DataFrame({"well_id": list(lat), "lateral_length_ft": list(lat.values())})
    tw = type_well(prod, normalize="lateral_length_ft", header=header, normalize_to=5000.0, min_wells=3)
    assert_allclose(tw.curve["oil_rate_bbl_d_p50"], q, rtol=1e-12)
    assert_allclose(tw.curve["oil_rate_bbl_d_p90"], q, rtol=1e-12)
    with pytest.raises(InputError, match="lateral"):
        type_well(prod, normalize="lateral_length_ft", min_wells=3)


def test_p50_arps_fit_recovers_the_hyperbolic():
    # Recovery: exact Arps (1945) hyperbolic rates at mid-month -> fitted qi, di, b.
    q = hyperbolic(60, qi=400.0, di=0.8, b=0.6)
    prod = table({f"W{i}": ("2020-01-01", q, "A") for i in range(3)})
    tw = type_well(prod, min_wells=3)
    assert tw.fit.model == "hyperbolic"
    assert_allclose([tw.fit.qi, tw.fit.di, tw.fit.b], [400.0, 0.8, 0.6], rtol=1e-4)
    assert_allclose(tw.curve["oil_rate_bbl_d_p50_fit"], q, rtol=1e-4)


def test_curve_stops_where_too_few_wells_and_says_so():
    q = hyperbolic(30)
    prod = table({"A": ("2020-01-01", q, "U"), "B": ("2020-01-01", q[:20], "U"),
                  "C": ("2020-01-01", q[:10], "U")})
    tw = type_well(prod, min_wells=2)
    assert len(tw.curve) == 20 and tw.curve["n_wells"].tolist() == [3] * 10 + [2] * 10
    assert any("fewer than 2 wells" in n for n in tw.notes)


def test_shut_in_month_is_missing_not_zero():
    q = hyperbolic(12)
    prod = table({f"W{i}": ("2020-01-01", q, "A") for i in range(3)})
    prod.loc[(prod["well_id"] == "W0") & (prod["month"] == "2020-05-01"), ["oil_bbl", "days_on"]] = 0.0
    c = type_well(prod, min_wells=2).curve
    assert c.loc[4, "n_wells"] == 2
    assert_allclose(c.loc[4, "oil_rate_bbl_d_p90"], q[4], rtol=1e-12)


def test_by_unit_selection_and_csv_export(tmp_path):
    q = hyperbolic(12)
    prod = table({**{f"A{i}": ("2020-01-01", q, "North") for i in range(3)},
                  **{f"B{i}": ("2021-01-01", 2 * q, "South") for i in range(3)}})
    tws = type_wells_by_unit(prod, min_wells=3)
    assert set(tws) == {"North", "South"}
    assert_allclose(tws["South"].curve["oil_rate_bbl_d_p50"], 2 * q, rtol=1e-12)
    sel = type_well(prod, wells=["A0", "A1", "B0", "ZZ"], min_wells=3)
    assert sel.wells == ("A0", "A1", "B0") and any("ZZ" in n for n in sel.notes)
    path = tmp_path / "type_wells.csv"
    type_well_to_csv(tws, path)
    back = pd.read_csv(path)
    assert list(back.columns) == TABLE_COLUMNS
    assert len(back) == 24 and set(back["type_well"]) == {"North", "South"}
    assert_allclose(back["oil_rate_bbl_d_p50"], type_well_table(tws)["oil_rate_bbl_d_p50"], rtol=1e-12)
    text = type_well_to_csv(tws["North"])
    assert pd.read_csv(io.StringIO(text)).shape == (12, len(TABLE_COLUMNS))


@pytest.mark.parametrize("kw", [{"align": "middle"}, {"rate_basis": "hourly"}, {"min_wells": 0}])
def test_bad_arguments_raise(kw):
    prod = table({"A": ("2020-01-01", hyperbolic(6), "U")})
    with pytest.raises(ValueError):
        type_well(prod, **kw)


def test_no_wells_raise():
    prod = table({"A": ("2020-01-01", hyperbolic(6), "U")})
    with pytest.raises(InputError):
        type_well(prod, unit="nowhere")
    with pytest.raises(InputError, match="wells"):
        type_well(prod, min_wells=3)
