"""Economic-limit rate: check-values.md section 2 (standard reserves-practice form)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from core.economics import EconomicInputs, economic_limit_from_inputs, economic_limit_rate


def test_worked_check_values_2():
    # check-values.md 2 ([D] from the standard form): OPEX 3000 $/month, P 60 $/bbl,
    # R 12.5 %, tx 0, WI 1 -> q_EL = 57.1429 bbl/month = 1.8774 bbl/d (tol 1e-9 on the exact value)
    q = economic_limit_rate(oil_price_per_bbl=60.0, opex_per_month=3000.0, royalty=0.125)
    assert_allclose(q * 30.4375, 3000.0 / (60.0 * 0.875), rtol=1e-9)
    assert_allclose(q * 30.4375, 57.1429, rtol=1e-6)
    assert_allclose(q, 1.8774, rtol=1e-4)


def test_working_interest_cancels():
    # check-values.md 2: WI cancels when NRI = WI (1 - R)
    base = economic_limit_rate(oil_price_per_bbl=70.0, opex_per_month=4500.0, royalty=0.2, severance_tax=0.05)
    half = economic_limit_rate(oil_price_per_bbl=70.0, opex_per_month=4500.0, royalty=0.2, severance_tax=0.05,
                               working_interest=0.5)
    assert_allclose(half, base, rtol=1e-12)
    # hand calculation: 4500 / (70 * 0.8 * 0.95) / 30.4375
    assert_allclose(base, 4500.0 / (70 * 0.8 * 0.95) / 30.4375, rtol=1e-12)


def test_gas_credit_and_explicit_nri():
    # check-values.md 2: gas revenue added per bbl: P + GOR * gas price * shrink
    q = economic_limit_rate(oil_price_per_bbl=60.0, opex_per_month=3000.0, royalty=0.125,
                            gor_scf_stb=2000.0, gas_price_per_mcf=3.0, gas_shrink=0.9)
    assert_allclose(q, 3000.0 / ((60.0 + 2.0 * 3.0 * 0.9) * 0.875) / 30.4375, rtol=1e-12)
    q2 = economic_limit_rate(oil_price_per_bbl=60.0, opex_per_month=3000.0, working_interest=0.75,
                             net_revenue_interest=0.6)
    assert_allclose(q2, 0.75 * 3000.0 / (60.0 * 0.6) / 30.4375, rtol=1e-12)


def test_vectorised_gor_and_dataclass():
    econ = EconomicInputs(oil_price_per_bbl=60.0, opex_per_month=3000.0, gas_price_per_mcf=2.0)
    gor = np.array([0.0, 1000.0, 5000.0])
    q = economic_limit_from_inputs(econ, gor_scf_stb=gor)
    assert q.shape == (3,)
    assert np.all(np.diff(q) < 0)  # more gas credit -> lower limit
    assert_allclose(q[0], 1.8774, rtol=1e-4)


@pytest.mark.parametrize("kw,match", [
    (dict(oil_price_per_bbl=0.0, opex_per_month=1.0), "oil_price_per_bbl"),
    (dict(oil_price_per_bbl=50.0, opex_per_month=1.0, royalty=1.0), "royalty"),
    (dict(oil_price_per_bbl=50.0, opex_per_month=-1.0), "opex_per_month"),
])
def test_rejects_bad_inputs(kw, match):
    with pytest.raises(ValueError, match=match):
        economic_limit_rate(**kw)
