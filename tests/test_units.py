"""Unit conversion factors against NIST SP 811 (2008 ed.) and closed-form identities."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from core import units


def test_barrel_is_42_us_gallons_exactly():
    # Closed-form identity: 1 bbl = 42 gal x 231 in3 x (0.0254 m/in)^3 = 0.158987294928 m3
    # exactly (NIST SP 811, 2008, App. B.8: gallon (U.S.) = 231 in3; barrel = 42 gal).
    assert units.M3_PER_BBL == pytest.approx(0.158987294928, rel=1e-15)


def test_barrel_matches_nist_sp811_table():
    # NIST SP 811 (2008), App. B.8: barrel [for petroleum, 42 gallons (U.S.)] = 1.589873 E-01 m3
    assert_allclose(units.M3_PER_BBL, 1.589873e-01, rtol=5e-7)
    # and the inverse usually quoted in metric production reporting: 1 m3 = 6.289811 bbl
    # (NIST SP 811 factor inverted, 7 significant figures).
    assert_allclose(units.m3_to_bbl(1.0), 6.289811, rtol=1e-7)


def test_gas_volume_factor():
    # NIST SP 811 (2008), App. B.8: cubic foot = 2.831685 E-02 m3; hence
    # 10^3 m3 = 1000 / 28.31685 Mcf = 35.31467 Mcf (7 s.f.).
    assert_allclose(units.M3_PER_FT3, 2.831685e-02, rtol=5e-7)
    assert_allclose(units.e3m3_to_mcf(1.0), 35.31467, rtol=2e-7)
    # closed-form identity: 0.3048^3 m3 exactly
    assert units.M3_PER_FT3 == pytest.approx(0.028316846592, rel=1e-15)


def test_pressure_factors_match_nist_sp811():
    # NIST SP 811 (2008), App. B.8: psi = 6.894757 E+00 kPa; bar = 1.0 E+05 Pa exactly.
    assert_allclose(units.PA_PER_PSI / 1000.0, 6.894757, rtol=1e-7)
    assert_allclose(units.kpa_to_psi(1.0), 0.1450377, rtol=5e-7)
    assert_allclose(units.bar_to_psi(1.0), 14.50377, rtol=5e-7)
    # closed-form identity: 1 psi = 0.45359237 kg x 9.80665 m/s2 / 0.0254^2 m2
    assert units.PA_PER_PSI == pytest.approx(6894.757293168361, rel=1e-14)


def test_gauge_pressure_adds_one_atmosphere():
    # Standard atmosphere = 101 325 Pa exactly (NIST SP 811, App. B.8) = 14.69595 psi.
    assert_allclose(units.PSI_PER_ATM, 14.69595, rtol=5e-7)
    assert_allclose(units.kpa_to_psi(0.0, gauge=True), units.PSI_PER_ATM)
    # closed-form identity: 101.325 kPa absolute is 0 kPa gauge
    assert_allclose(units.kpa_to_psi(101.325), units.kpa_to_psi(0.0, gauge=True), rtol=1e-14)
    assert_allclose(units.bar_to_psi(1.01325), units.PSI_PER_ATM, rtol=1e-14)


@pytest.mark.parametrize("c, f", [(-40.0, -40.0), (0.0, 32.0), (100.0, 212.0), (15.0, 59.0)])
def test_degc_to_degf(c, f):
    # NIST SP 811 (2008) Sec. 4.2.1.1: t/degF = 1.8 t/degC + 32 (fixed points of water; -40 identity)
    assert units.degc_to_degf(c) == pytest.approx(f, abs=1e-12)


def test_unit_tokens_are_consistent_with_functions():
    # Closed-form identity: header-token factors equal the conversion functions.
    assert units.UNIT_TOKENS["e3m3"][1] == pytest.approx(float(units.e3m3_to_mcf(1.0)))
    assert units.UNIT_TOKENS["kpa"][1] == pytest.approx(float(units.kpa_to_psi(1.0)))
    assert units.UNIT_TOKENS["barg"][2] == pytest.approx(units.PSI_PER_ATM)
    assert units.UNIT_TOKENS["degc"][1:3] == (1.8, 32.0)


def test_gas_standard_temperature_ratio():
    # Ideal gas, same pressure: V(60 degF) / V(15 degC) = 288.7056 K / 288.15 K (closed form).
    assert_allclose(units.GAS_STD_TEMP_RATIO_60F_15C, 288.70556 / 288.15, rtol=1e-7)


def test_arrays_and_inputs_unchanged():
    x = np.array([1.0, 2.0])
    y = units.m3_to_bbl(x)
    assert_allclose(y, x / 0.158987294928, rtol=1e-14)  # closed-form identity
    assert_allclose(x, [1.0, 2.0])
