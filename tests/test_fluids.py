"""Tests of fluid typing (core.fluids).

Expected types follow McCain's field rules and the DOE / USGS heavy-oil classes as
restated in /work/shared/reference/check-values.md sections 3.2 and 3.3.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from core import fluids
from core.fluids import classify_field, classify_fluid, initial_gor


# --------------------------------------------------------------------------------------
# classify_fluid: clear textbook cases (check-values 3.2 test advice [C], both versions)
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("criteria", ["mccain_1994", "mccain_1990"])
@pytest.mark.parametrize(
    "gor, api, expected",
    [
        (500.0, 35.0, "black_oil"),  # McCain 1994 / 1990: GOR < 1,750 (2,000), API < 45
        (2600.0, 45.0, "volatile_oil"),  # inside 1,750-3,200 and 2,000-3,300
        (8000.0, 52.0, "gas_condensate"),  # > 3,300 and below the wet-gas limits
        (60000.0, 60.0, "wet_gas"),  # > 50,000 (both versions), < 100,000
        (float("inf"), None, "dry_gas"),  # no liquid: dry gas
        (150000.0, None, "dry_gas"),  # > 100,000 for engineering purposes
    ],
)
def test_textbook_cases_both_versions(criteria, gor, api, expected):
    t, evidence = classify_fluid(gor, api, criteria=criteria)
    assert t == expected
    assert t in evidence


@pytest.mark.parametrize(
    "gor, v1994, v1990",
    [
        # disputed bands (check-values 3.2): 1,750-2,000 and 3,200-3,300 scf/STB,
        # and the wet-gas limit 15,000 (McCain 1994) vs 50,000 (McCain 1990)
        (1800.0, "volatile_oil", "black_oil"),
        (1999.0, "volatile_oil", "black_oil"),
        (3250.0, "gas_condensate", "volatile_oil"),
        (20000.0, "wet_gas", "gas_condensate"),
    ],
)
def test_disputed_bands_follow_configured_version(gor, v1994, v1990):
    assert classify_fluid(gor, 42.0, criteria="mccain_1994")[0] == v1994
    assert classify_fluid(gor, 42.0, criteria="mccain_1990")[0] == v1990
    # the default is McCain 1994
    assert classify_fluid(gor, 42.0)[0] == v1994


def test_boundaries_are_as_documented():
    # McCain 1994 table: black oil < 1,750; volatile 1,750-3,200 (inclusive); condensate > 3,200
    c = fluids.CRITERIA["mccain_1994"]
    assert classify_fluid(np.nextafter(c.volatile_min, 0), 40.0)[0] == "black_oil"
    assert classify_fluid(c.volatile_min, 42.0)[0] == "volatile_oil"
    assert classify_fluid(c.condensate_min, 42.0)[0] == "volatile_oil"
    assert classify_fluid(np.nextafter(c.condensate_min, np.inf), 42.0)[0] == "gas_condensate"


def test_evidence_names_numbers_rule_and_source():
    t, e = classify_fluid(1234.0, 38.0, 1.45)
    assert t == "black_oil"
    assert "1,234" in e and "1,750" in e and "McCain 1994" in e and "API 38.0" in e
    t, e = classify_fluid(2600.0, 45.0, criteria="mccain_1990")
    assert "2,000" in e and "3,300" in e and "McCain 1990" in e


def test_confirmations_are_reported_not_overriding():
    # McCain: GOR is the primary indicator; API and Bo only confirm (check-values 3.2)
    t, e = classify_fluid(1000.0, 47.0, 2.3)
    assert t == "black_oil"
    assert "45 guide" in e and "Bo 2.300" in e
    t, e = classify_fluid(2500.0, 35.0, 1.6)
    assert t == "volatile_oil"
    assert "not above the volatile-oil 40 guide" in e and "Bo 1.600" in e


# --------------------------------------------------------------------------------------
# heavy oil and bitumen (check-values 3.3: DOE 10 / 22.3 API; USGS 10,000 cP)
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "gor, api, mu, expected",
    [
        (150.0, 18.0, None, "heavy_oil"),  # DOE heavy 10-22.3 API
        (150.0, 22.29, None, "heavy_oil"),
        (150.0, 22.3, None, "black_oil"),  # API >= 22.3 is not heavy (DOE)
        (50.0, 8.0, None, "heavy_oil"),  # extra-heavy, viscosity unknown: named in evidence
        (50.0, 8.0, 5000.0, "heavy_oil"),  # extra-heavy oil <= 10,000 cP (WEC)
        (50.0, 8.0, 50000.0, "bitumen"),  # > 10,000 cP (USGS natural bitumen)
        (50.0, 12.0, 20000.0, "bitumen"),  # viscosity decides bitumen (USGS)
        (None, 15.0, None, "heavy_oil"),  # no GOR: DOE classes are by API alone
        (None, None, 30000.0, "bitumen"),
        (None, 30.0, None, "unknown"),
        (None, None, None, "unknown"),
    ],
)
def test_heavy_oil_and_bitumen(gor, api, mu, expected):
    t, e = classify_fluid(gor, api, dead_oil_viscosity_cp=mu)
    assert t == expected
    if expected == "heavy_oil" and api is not None and api < 10:
        assert "extra-heavy" in e


def test_gas_types_win_over_low_api():
    # a high GOR well is gas whatever the reported API (GOR primary, McCain 1994)
    assert classify_fluid(8000.0, 18.0)[0] == "gas_condensate"


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(initial_gor_scf_stb=-1.0), "initial_gor_scf_stb must be"),
        (dict(initial_gor_scf_stb=500.0, api=0.0), "api must be"),
        (dict(initial_gor_scf_stb=500.0, bo_bbl_stb=-1.0), "bo_bbl_stb must be"),
        (dict(initial_gor_scf_stb=500.0, dead_oil_viscosity_cp=0.0), "dead_oil_viscosity_cp must be"),
        (dict(initial_gor_scf_stb=500.0, criteria="other"), "criteria must be"),
    ],
)
def test_classify_fluid_rejects_bad_arguments(kwargs, match):
    with pytest.raises(ValueError, match=match):
        classify_fluid(**kwargs)


def test_nan_gor_is_unknown():
    assert classify_fluid(float("nan"), 35.0)[0] == "unknown"


# --------------------------------------------------------------------------------------
# initial GOR and classify_field on a hand-made production table
# --------------------------------------------------------------------------------------
def _well(well_id, oil, gas, start="2020-01-01"):
    n = len(oil)
    return pd.DataFrame(
        {
            "well_id": well_id,
            "month": pd.date_range(start, periods=n, freq="MS"),
            "unit": "upper",
            "oil_bbl": np.asarray(oil, float),
            "gas_mcf": np.asarray(gas, float),
            "water_bbl": 0.0,
        }
    )


@pytest.fixture
def hand_field():
    """Invented wells, one per case; GOR = 1000 gas / oil by construction."""
    parts = [
        # black oil: GOR 600 for 4 months, a 5,000 spike in month 3, then rising (stage 2/3)
        _well("AX-1", [1000, 900, 800, 700, 650, 600, 550, 500],
              [600, 540, 4000, 420, 390, 360, 800, 1200]),
        # volatile oil: GOR 2,500
        _well("AX-2", [400, 380, 360, 340], [1000, 950, 900, 850]),
        # gas condensate: GOR 10,000 after two shut-in months
        _well("AX-3", [0, 0, 50, 40, 30], [0, 0, 500, 400, 300]),
        # dry gas: gas and never oil
        _well("AX-4", [0, 0, 0], [3000, 2800, 2600]),
        # no gas data at all (gas column NaN), 35 API -> unknown
        _well("AX-5", [500, 450, 400], [np.nan, np.nan, np.nan]),
        # no gas data, 15 API -> heavy oil by API alone
        _well("AX-6", [200, 190, 180], [np.nan, np.nan, np.nan]),
        # never produced
        _well("AX-7", [0, 0], [0, 0]),
        # 1,850 scf/STB: disputed band (volatile in McCain 1994, black oil in McCain 1990)
        _well("AX-8", [1000, 1000, 1000], [1850, 1850, 1850]),
        # one producing month only
        _well("AX-9", [300], [150]),
    ]
    prod = pd.concat(parts, ignore_index=True)
    wells = pd.DataFrame(
        {
            "well_id": ["AX-1", "AX-2", "AX-3", "AX-4", "AX-5", "AX-6", "AX-7", "AX-8", "AX-9"],
            "api_gravity": [36.0, 44.0, 55.0, np.nan, 35.0, 15.0, np.nan, 42.0, -3.0],
        }
    )
    return prod, wells


def test_initial_gor_median_of_early_months(hand_field):
    prod, _ = hand_field
    g = initial_gor(prod).set_index("well_id")
    # AX-1: first 6 producing months GOR = 600, 600, 5000, 600, 600, 600 -> median 600
    # (hand calculation; the spike is rejected by the median)
    assert g.loc["AX-1", "initial_gor_scf_stb"] == pytest.approx(600.0)
    assert g.loc["AX-1", "gor_months_used"] == 6
    assert g.loc["AX-2", "initial_gor_scf_stb"] == pytest.approx(2500.0)
    assert g.loc["AX-3", "initial_gor_scf_stb"] == pytest.approx(10000.0)
    assert g.loc["AX-3", "gor_first_month"] == pd.Timestamp("2020-03-01")
    assert np.isinf(g.loc["AX-4", "initial_gor_scf_stb"])
    assert np.isnan(g.loc["AX-5", "initial_gor_scf_stb"])
    assert np.isnan(g.loc["AX-7", "initial_gor_scf_stb"])
    # with 3 months the AX-1 spike is still outvoted: 600, 600, 5000 -> 600
    assert initial_gor(prod, n_months=3).set_index("well_id").loc["AX-1", "initial_gor_scf_stb"] == pytest.approx(600.0)


def test_classify_field_contract_and_types(hand_field):
    prod, wells = hand_field
    before = prod.copy()
    out = classify_field(prod, wells)
    assert list(out.columns) == ["well_id", "fluid_type", "initial_gor_scf_stb", "fluid_evidence"]
    assert list(out.well_id) == sorted(prod.well_id.unique())
    assert set(out.fluid_type) <= set(fluids.FLUID_TYPES)
    t = out.set_index("well_id")["fluid_type"].to_dict()
    assert t == {
        "AX-1": "black_oil",
        "AX-2": "volatile_oil",
        "AX-3": "gas_condensate",
        "AX-4": "dry_gas",
        "AX-5": "unknown",
        "AX-6": "heavy_oil",
        "AX-7": "unknown",
        "AX-8": "volatile_oil",
        "AX-9": "black_oil",
    }
    ev = out.set_index("well_id")["fluid_evidence"]
    assert "median of 6 early producing months" in ev["AX-1"]
    assert "no gas volumes" in ev["AX-5"]
    assert "no producing months" in ev["AX-7"]
    assert "gas with no oil" in ev["AX-4"]
    assert "provisional" in ev["AX-9"] and "API -3 ignored" in ev["AX-9"]
    pd.testing.assert_frame_equal(prod, before)  # input not modified
    assert out.attrs["criteria"] == "mccain_1994"


def test_classify_field_criteria_switch(hand_field):
    prod, wells = hand_field
    out = classify_field(prod, wells, criteria="mccain_1990").set_index("well_id")
    assert out.loc["AX-8", "fluid_type"] == "black_oil"  # 1,850 < 2,000 (McCain 1990)
    assert "McCain 1990" in out.loc["AX-8", "fluid_evidence"]


def test_classify_field_without_header_or_gas_column(hand_field):
    prod, _ = hand_field
    out = classify_field(prod.drop(columns="gas_mcf"), None)
    assert (out.fluid_type == "unknown").all()
    out2 = classify_field(prod, None).set_index("well_id")
    assert out2.loc["AX-6", "fluid_type"] == "unknown"  # no API, no gas: nothing to type on
    assert "API unknown" in out2.loc["AX-1", "fluid_evidence"]


def test_classify_field_empty_and_row_order(hand_field):
    prod, wells = hand_field
    empty = classify_field(prod.iloc[0:0], wells)
    assert list(empty.columns) == ["well_id", "fluid_type", "initial_gor_scf_stb", "fluid_evidence"]
    assert len(empty) == 0
    shuffled = prod.sample(frac=1.0, random_state=7)
    pd.testing.assert_frame_equal(classify_field(shuffled, wells), classify_field(prod, wells))


def test_classify_field_matches_classify_fluid(hand_field):
    # the field function is the per-well function applied to the initial GOR (consistency)
    prod, wells = hand_field
    out = classify_field(prod, wells)
    w = wells.set_index("well_id")["api_gravity"]
    for row in out.itertuples():
        api = w[row.well_id]
        api = None if not np.isfinite(api) or api <= 0 else api
        if np.isfinite(row.initial_gor_scf_stb) or np.isinf(row.initial_gor_scf_stb):
            assert classify_fluid(row.initial_gor_scf_stb, api)[0] == row.fluid_type


def test_classify_field_header_with_other_id_dtype_and_duplicates():
    # bad header data never raises: integer ids still match, duplicates use the first row
    prod = pd.concat([_well("101", [500, 500, 500], [300, 300, 300])], ignore_index=True)
    wells = pd.DataFrame({"well_id": [101, 101], "api_gravity": [15.0, 40.0]})
    out = classify_field(prod, wells)
    assert out.fluid_type.iloc[0] == "heavy_oil"  # GOR 600, API 15 (DOE heavy)


def test_initial_gor_skips_months_with_unknown_oil():
    # a month with gas but oil missing is not read as "gas with no oil" (no infinite GOR)
    prod = _well("BX-1", [np.nan, 500, 500, 500], [900, 300, 300, 300])
    g = initial_gor(prod)
    assert g.initial_gor_scf_stb.iloc[0] == pytest.approx(600.0)  # 1000 * 300 / 500
    assert g.gor_months_used.iloc[0] == 3
