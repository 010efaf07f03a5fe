"""Arps closed forms, modified hyperbolic and decline conversions.

Sources: Arps (1945) equations; worked values from /work/shared/reference/check-values.md
sections 1.1, 1.3, 1.4 (tagged [D] there: derived from the published closed-form
equations and confirmed by numerical integration); numerical integration with
scipy.integrate.quad (scipy 1.17.1) for the cumulative identity.
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.integrate import quad

from core.decline import (
    DAYS_PER_YEAR,
    arps_cumulative,
    arps_decline,
    arps_rate,
    arps_time_to_rate,
    modified_hyperbolic_cumulative,
    modified_hyperbolic_decline,
    modified_hyperbolic_rate,
    modified_hyperbolic_time_to_rate,
    nominal_from_secant_effective,
    nominal_from_tangent_effective,
    secant_effective_from_nominal,
    switch_time,
    tangent_effective_from_nominal,
)


# check-values.md 1.3, cases A-D: (qi bbl/d, Di 1/yr, b, t yr, q(t), Np bbl/d*yr, D(t))
CHECK_VALUES_1_3 = [
    ("A", 1000.0, 0.5, 0.0, 5.0, 82.0850, 1835.8300, 0.5),
    ("B", 1000.0, 0.5, 0.5, 5.0, 197.5309, 2222.2222, 0.222222),
    ("C", 1000.0, 0.5, 1.0, 5.0, 285.7143, 2505.5259, 0.142857),
    ("D", 500.0, 2.0, 1.2, 10.0, 34.1995, 887.4699, 0.080000),
]


@pytest.mark.parametrize("case", CHECK_VALUES_1_3, ids=[c[0] for c in CHECK_VALUES_1_3])
def test_arps_worked_examples_check_values_1_3(case):
    # check-values.md 1.3 (tabulated to 4-6 significant digits, so rtol 1e-6)
    _, qi, di, b, t, q, np_, d = case
    assert_allclose(arps_rate(t, qi, di, b), q, rtol=1e-6)
    assert_allclose(arps_cumulative(t, qi, di, b) / DAYS_PER_YEAR, np_, rtol=1e-6)
    assert_allclose(arps_decline(t, di, b), d, rtol=1e-5)


@pytest.mark.parametrize(
    "qi,di,b,t_el,eur_bbl",
    [
        (1000.0, 0.5, 0.0, 2 * np.log(100.0), 723_195.0),  # case A: t_el = 2 ln 100
        (1000.0, 0.5, 0.5, 36.0, 1_314_900.0),  # case B: exactly 36 yr
        (1000.0, 0.5, 1.0, 198.0, 3_364_076.8),  # case C: exactly 198 yr
    ],
)
def test_time_to_economic_limit_and_eur_check_values_1_3(qi, di, b, t_el, eur_bbl):
    # check-values.md 1.3, second table, q_el = 10 bbl/d
    t = arps_time_to_rate(10.0, qi, di, b)
    assert_allclose(t, t_el, rtol=1e-9)
    assert_allclose(arps_cumulative(t, qi, di, b), eur_bbl, rtol=1e-7)


def test_hand_calculation_style_example():
    # Hand calculation from the Arps (1945) hyperbolic equation (STYLE.md example):
    # 1000 / (1 + 0.5 * 0.5 * 2) ** 2 = 444.444...
    assert_allclose(arps_rate(2.0, qi=1000.0, di=0.5, b=0.5), 4000.0 / 9.0, rtol=1e-12)


@pytest.mark.parametrize("b", [0.0, 1e-9, 1e-7, 0.3, 1.0 - 1e-9, 1.0, 1.0 + 1e-8, 1.5, 2.0])
def test_cumulative_equals_integral_of_rate(b):
    # Closed-form identity: Np(t) = integral_0^t q dt (scipy.integrate.quad, scipy 1.17.1)
    qi, di = 850.0, 1.3
    for t in (0.01, 0.7, 4.0, 30.0):
        ref, _ = quad(lambda s: float(arps_rate(s, qi, di, b)), 0.0, t, epsabs=0, epsrel=1e-13, limit=200)
        assert_allclose(arps_cumulative(t, qi, di, b), ref * DAYS_PER_YEAR, rtol=1e-10)


def test_near_b_zero_and_one_match_limits():
    # Closed-form identities: b -> 0 exponential, b -> 1 harmonic (Arps 1945)
    t = np.linspace(0.0, 20.0, 41)
    qi, di = 500.0, 0.8
    exp_q = qi * np.exp(-di * t)
    exp_np = qi / di * (1 - np.exp(-di * t)) * DAYS_PER_YEAR
    # b = 1e-12 differs from b = 0 by ~b (di t)^2 / 2 in the exponent, hence rtol 1e-8
    assert_allclose(arps_rate(t, qi, di, 1e-12), exp_q, rtol=1e-8)
    assert_allclose(arps_cumulative(t, qi, di, 1e-12), exp_np, rtol=1e-8)
    assert_allclose(arps_rate(t, qi, di, 0.0), exp_q, rtol=1e-14)
    harm_np = qi / di * np.log1p(di * t) * DAYS_PER_YEAR
    assert_allclose(arps_cumulative(t, qi, di, 1.0 - 1e-12), harm_np, rtol=1e-10)
    assert_allclose(arps_cumulative(t, qi, di, 1.0 + 1e-12), harm_np, rtol=1e-10)
    assert np.all(np.isfinite(arps_time_to_rate(np.array([1.0, 100.0]), qi, di, 1e-14)))


def test_time_to_rate_inverts_rate():
    # Closed-form identity: q(t(q)) = q
    qi, di = 700.0, np.array([[0.2], [1.0], [3.0]])
    b = np.array([[0.0], [0.7], [1.9]])
    q = np.array([500.0, 50.0, 2.0])
    t = arps_time_to_rate(q, qi, di, b)
    assert t.shape == (3, 3)
    assert_allclose(arps_rate(t, qi, di, b), np.broadcast_to(q, (3, 3)), rtol=1e-10)


def test_broadcasting_many_wells_equals_scalar_calls():
    # Invariance: vector over wells x times equals scalar evaluation
    rng = np.random.default_rng(1)
    qi = rng.uniform(10, 1000, (5, 1))
    di = rng.uniform(0.05, 3, (5, 1))
    b = rng.uniform(0, 2, (5, 1))
    t = np.linspace(0, 10, 7)[None, :]
    q = arps_rate(t, qi, di, b)
    cum = arps_cumulative(t, qi, di, b)
    for i in range(5):
        for j in range(7):
            assert_allclose(q[i, j], arps_rate(t[0, j], qi[i, 0], di[i, 0], b[i, 0]), rtol=1e-14)
            assert_allclose(cum[i, j], arps_cumulative(t[0, j], qi[i, 0], di[i, 0], b[i, 0]), rtol=1e-14)


@pytest.mark.parametrize("b", [-0.1, 2.5])
def test_rejects_bad_b(b):
    with pytest.raises(ValueError, match="b must be"):
        arps_rate(1.0, qi=100.0, di=0.3, b=b)


def test_rejects_bad_qi_di_t():
    with pytest.raises(ValueError, match="qi must be"):
        arps_rate(1.0, qi=0.0, di=0.3, b=0.5)
    with pytest.raises(ValueError, match="di must be"):
        arps_cumulative(1.0, qi=10.0, di=-0.3, b=0.5)
    with pytest.raises(ValueError, match="t must be"):
        arps_rate(-1.0, qi=10.0, di=0.3, b=0.5)
    with pytest.raises(ValueError, match="must be finite"):
        arps_rate(np.nan, qi=10.0, di=0.3, b=0.5)


# ---- modified hyperbolic: check-values.md 1.4 ([D], tolerance 1e-6 relative)
MH = dict(qi=1000.0, di=1.5, b=1.2)


def test_modified_hyperbolic_check_values_1_4():
    d_lim = nominal_from_tangent_effective(0.06)
    assert_allclose(d_lim, 0.061875, rtol=1e-5)
    t_sw = switch_time(MH["di"], MH["b"], d_lim)
    assert_allclose(t_sw, 12.9124, rtol=1e-5)
    assert_allclose(modified_hyperbolic_rate(t_sw, **MH, d_lim=d_lim), 70.1761, rtol=1e-6)
    assert_allclose(modified_hyperbolic_cumulative(t_sw, **MH, d_lim=d_lim) / DAYS_PER_YEAR, 2337.422, rtol=1e-6)
    table = [(1, 424.0024, 624.022), (5, 146.7799, 1559.331), (10, 85.9750, 2111.748),
             (20, 45.2615, 2740.079), (30, 24.3785, 3077.580)]
    for t, q, np_ in table:
        # tabulated to 6-7 significant figures: rtol 5e-6 covers the rounding
        assert_allclose(modified_hyperbolic_rate(t, **MH, d_lim=d_lim), q, rtol=5e-6)
        assert_allclose(modified_hyperbolic_cumulative(t, **MH, d_lim=d_lim) / DAYS_PER_YEAR, np_, rtol=5e-6)
    t_el = modified_hyperbolic_time_to_rate(5.0, **MH, d_lim=d_lim)
    assert_allclose(t_el, 55.6041, rtol=1e-6)
    assert_allclose(modified_hyperbolic_cumulative(t_el, **MH, d_lim=d_lim), 1_238_477.0, rtol=1e-6)


def test_modified_hyperbolic_continuity_at_switch():
    # check-values.md 1.2: rate and its first derivative are continuous at t_sw
    d_lim = nominal_from_tangent_effective(0.06)
    t_sw = float(switch_time(MH["di"], MH["b"], d_lim))
    h = 1e-6
    q_lo = modified_hyperbolic_rate(t_sw - h, **MH, d_lim=d_lim)
    q_hi = modified_hyperbolic_rate(t_sw + h, **MH, d_lim=d_lim)
    q_0 = modified_hyperbolic_rate(t_sw, **MH, d_lim=d_lim)
    assert_allclose(q_lo, q_hi, rtol=1e-6)
    slope_lo = (q_0 - q_lo) / h
    slope_hi = (q_hi - q_0) / h
    assert_allclose(slope_lo, slope_hi, rtol=1e-4)
    # decline at the switch equals d_lim from both sides
    assert_allclose(modified_hyperbolic_decline(t_sw, MH["di"], MH["b"], d_lim), d_lim, rtol=1e-12)
    assert_allclose(-slope_hi / q_0, d_lim, rtol=1e-4)


def test_modified_hyperbolic_cumulative_is_integral():
    # Closed-form identity vs scipy.integrate.quad across the switch
    d_lim = nominal_from_tangent_effective(0.06)
    for t in (5.0, 40.0):
        ref, _ = quad(lambda s: float(modified_hyperbolic_rate(s, **MH, d_lim=d_lim)), 0, t,
                      points=[12.9124], epsrel=1e-12, limit=200)
        assert_allclose(modified_hyperbolic_cumulative(t, **MH, d_lim=d_lim), ref * DAYS_PER_YEAR, rtol=1e-9)


def test_modified_hyperbolic_below_terminal_from_start():
    # Rule (documented in core.decline.switch_time): di <= d_lim -> exponential at d_lim from t = 0
    t = np.array([0.0, 3.0])
    q = modified_hyperbolic_rate(t, 100.0, 0.03, 1.0, 0.0619)
    assert_allclose(q, 100.0 * np.exp(-0.0619 * t), rtol=1e-12)


# ---- decline conversions: check-values.md 1.1 (SPEE REP 6 convention; [D], 1e-6)
@pytest.mark.parametrize("de,d", [(0.10, 0.105361), (0.25, 0.287682), (0.50, 0.693147)])
def test_exponential_effective_to_nominal(de, d):
    # tabulated to 6 significant figures: rtol 5e-6 covers the rounding
    assert_allclose(nominal_from_tangent_effective(de), d, rtol=5e-6)
    assert_allclose(tangent_effective_from_nominal(d), de, rtol=1e-5)


@pytest.mark.parametrize(
    "de_sec,b,di,de_tan",
    [(0.85, 1.5, 10.808840, 0.999980), (0.70, 0.5, 1.651484, 0.808235), (0.50, 1.0, 1.0, 0.632121)],
)
def test_secant_effective_to_nominal(de_sec, b, di, de_tan):
    assert_allclose(nominal_from_secant_effective(de_sec, b), di, rtol=1e-6)
    assert_allclose(tangent_effective_from_nominal(di), de_tan, rtol=1e-6)
    assert_allclose(secant_effective_from_nominal(di, b), de_sec, rtol=1e-6)


def test_secant_effective_from_nominal_values():
    # check-values.md 1.1: Di = 1.0, b = 0.5 -> 1 - 1/1.5^2; Di = 0.5, b = 0 -> 0.393469
    assert_allclose(secant_effective_from_nominal(1.0, 0.5), 1 - 1 / 1.5**2, rtol=1e-12)
    assert_allclose(secant_effective_from_nominal(0.5, 0.0), 0.393469, rtol=1e-6)
    assert_allclose(tangent_effective_from_nominal(0.5), 0.393469, rtol=1e-6)


def test_nominal_monthly_and_effective():
    # check-values.md 1.1: nominal 0.6/yr -> 0.05/month; annual eff 0.451188; monthly eff 0.048771
    assert_allclose(tangent_effective_from_nominal(0.6), 0.451188, rtol=1e-6)
    assert_allclose(tangent_effective_from_nominal(0.6 / 12), 0.048771, rtol=1e-5)


def test_conversion_rejects_effective_of_one():
    with pytest.raises(ValueError, match="de must be"):
        nominal_from_tangent_effective(1.0)
