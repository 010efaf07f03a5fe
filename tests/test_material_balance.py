"""Tests of the Corey relative permeability and the solution-gas-drive predictor.

Sources: /work/shared/reference/check-values.md sections 5.1-5.3 and 6 (Corey 1954;
Ahmed, Reservoir Engineering Handbook, Tarner example data set; Tarner 1944; Muskat 1945).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from core.material_balance import (
    PvtTable,
    instantaneous_gor,
    material_balance_closure,
    oil_saturation,
    predict_depletion,
    undersaturated_recovery,
)
from core.relperm import CoreyGasOil, corey_gas_oil


# --------------------------------------------------------------------------------------
# Fixtures
# --------------------------------------------------------------------------------------
def ahmed_tarner_example_pvt() -> PvtTable:
    """Ahmed, Reservoir Engineering Handbook, Tarner example PVT (check-values 5.2).

    pb = 2100 psi, pi = 2925 psi, T = 175 °F, N = 10 MMSTB, Swi = 0.15, cw = 3.6e-6,
    cf = 4.9e-6 /psi. Only mu_o/mu_g is given, so mu_g = 1 cP and mu_o = the ratio.
    """
    p = np.array([1300.0, 1500.0, 1800.0, 2100.0, 2925.0])
    bo = np.array([1.420, 1.440, 1.468, 1.480, 1.429])
    rs = np.array([1000.0, 1150.0, 1280.0, 1340.0, 1340.0])
    bg = np.array([0.00201, 0.001853, 0.001518, 0.001283, np.nan])
    ratio = np.array([45.2, 42.4, 38.3, 34.1, 34.1])
    return PvtTable(p, bo, rs, bg, ratio, np.array([1.0, 1.0, 1.0, 1.0, np.nan]), pb_psia=2100.0)


# Corey set of check-values 5.1 (derived from Corey 1954)
COREY_51 = CoreyGasOil(swc=0.15, sgc=0.05, sorg=0.10, krg_max=0.8, kro_max=1.0, ng=2.0, no=3.0)


def _ahmed_prediction(method: str = "tarner", dp: float = 10.0):
    return predict_depletion(ahmed_tarner_example_pvt(), COREY_51, pi_psia=2925.0, p_abandon_psia=1300.0,
                             swi=0.15, cf_1_psi=4.9e-6, cw_1_psi=3.6e-6, n_stb=10e6, dp_psia=dp, method=method)


@pytest.fixture(scope="module")
def correlation_pvt() -> PvtTable:
    # Standing-based black-oil table from core.pvt (35 °API, gas gravity 0.75, 180 °F).
    return PvtTable.from_correlations(api=35.0, gamma_g=0.75, t_f=180.0, pb_psia=2500.0, p_max_psia=3500.0,
                                      p_min_psia=100.0, n_points=121)


@pytest.fixture(scope="module")
def correlation_runs(correlation_pvt):
    rp = CoreyGasOil(swc=0.20, sgc=0.05, sorg=0.15)
    kw = dict(pi_psia=3500.0, p_abandon_psia=150.0, dp_psia=10.0)
    return (predict_depletion(correlation_pvt, rp, method="tarner", **kw),
            predict_depletion(correlation_pvt, rp, method="muskat", **kw))


# --------------------------------------------------------------------------------------
# Corey (check-values 5.1, derived from Corey 1954 with Swc 0.15, Sgc 0.05, Sorg 0.10,
# krg_max 0.8, kro_max 1.0, ng 2, no 3)
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("sg, krg, kro", [(0.03, 0.0, 0.884736), (0.10, 0.004082, 0.650963),
                                          (0.30, 0.102041, 0.216000)])
def test_corey_check_values(sg, krg, kro):
    g, o = corey_gas_oil(sg, swc=0.15, sgc=0.05, sorg=0.10, krg_max=0.8, kro_max=1.0, ng=2, no=3)
    assert_allclose(g, krg, atol=5e-7)
    assert_allclose(o, kro, atol=5e-7)
    g2, o2 = COREY_51(sg)
    assert_allclose([g2, o2], [g, o], rtol=0, atol=0)
    assert_allclose(COREY_51.fast(sg), [g, o], rtol=1e-15)


def test_corey_ratio_check_values():
    # check-values 5.1: krg/kro = 0.006270 at Sg 0.10 and 0.472411 at Sg 0.30
    g, o = COREY_51(np.array([0.10, 0.30]))
    assert_allclose(g / o, [0.006270, 0.472411], atol=5e-7)


def test_corey_end_points_and_vectorised():
    # Closed-form identity: kro = kro_max at Sg = 0, krg = krg_max at Sg = 1 - Swc - Sorg
    sg = np.array([0.0, 0.75, 0.9])
    g, o = COREY_51(sg)
    assert_allclose(g, [0.0, 0.8, 0.8])
    assert_allclose(o, [1.0, 0.0, 0.0])


@pytest.mark.parametrize("kw", [dict(swc=0.5, sgc=0.3, sorg=0.3), dict(sgc=-0.1), dict(krg_max=0.0),
                                dict(ng=20.0)])
def test_corey_rejects_bad_parameters(kw):
    with pytest.raises(ValueError):
        CoreyGasOil(**kw)


def test_corey_rejects_bad_saturation():
    with pytest.raises(ValueError, match="sg must be"):
        COREY_51(1.2)


# --------------------------------------------------------------------------------------
# Closed-form pieces on the Ahmed data set (check-values 5.2)
# --------------------------------------------------------------------------------------
def test_undersaturated_step_ahmed_data():
    # check-values 5.2 [D]: 2925 -> 2100 psi gives Np/N = 0.039558, Np = 395,575 STB
    r = undersaturated_recovery(2100.0, pi_psia=2925.0, bo_bbl_stb=1.480, boi_bbl_stb=1.429, swi=0.15,
                                cf_1_psi=4.9e-6, cw_1_psi=3.6e-6)
    assert_allclose(r, 0.039558, atol=5e-7)  # printed to 6 decimals
    # equivalent form Np/N = Boi ce (pi - p)/Bo with co = 4.3260e-5, ce = 4.9660e-5 /psi
    co = (1.480 - 1.429) / (1.429 * 825.0)
    ce = (co * 0.85 + 3.6e-6 * 0.15 + 4.9e-6) / 0.85
    assert_allclose([co, ce], [4.3260e-5, 4.9660e-5], rtol=1e-4)
    assert_allclose(r, 1.429 * ce * 825.0 / 1.480, rtol=1e-12)
    pred = _ahmed_prediction()
    row = pred.table.loc[pred.table["p_psia"] == 2100.0].iloc[0]
    assert_allclose(row["np_stb"], 395_575.0, atol=0.5)  # printed to the barrel


def test_instantaneous_gor_check_value():
    # check-values 5.2: R at 1800 psi with krg/kro = 0.05 is 3131.92 scf/STB
    r = instantaneous_gor(rs_scf_stb=1280.0, krg_over_kro=0.05, mu_o_cp=38.3, mu_g_cp=1.0, bo_bbl_stb=1.468,
                          bg_bbl_scf=0.001518)
    assert_allclose(r, 3131.92, atol=0.01)


def test_saturation_check_value():
    # check-values 5.2: Np/N = 0.05 at 1800 psi -> So = 0.82954, Sg = 0.02046 (Swi 0.15)
    so = oil_saturation(0.05, bo_bbl_stb=1.468, boi_bbl_stb=1.429, swi=0.15)
    assert_allclose(so, 0.82954, atol=5e-6)
    assert_allclose(1.0 - 0.15 - so, 0.02046, atol=5e-6)


# --------------------------------------------------------------------------------------
# Predictor on the Ahmed data set
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("method", ["tarner", "muskat"])
def test_gor_stage_behaviour_on_ahmed_data(method):
    # check-values 5.3 synthetic-test advice [C] / Ahmed's stage description [P]:
    # GOR = Rsi = 1340 down to 2100 psi, below 1340 just below 2100 psi, then above it.
    t = _ahmed_prediction(method).table
    above = t[t["p_psia"] >= 2100.0]
    assert_allclose(above["producing_gor_scf_stb"], 1340.0, rtol=1e-12)
    just_below = t[(t["p_psia"] < 2100.0) & (t["p_psia"] > 1950.0)]
    assert (just_below["producing_gor_scf_stb"] < 1340.0).all()
    assert t["producing_gor_scf_stb"].iloc[-1] > 1340.0
    assert np.all(np.diff(t["np_over_n"]) >= 0)


def test_material_balance_closes_at_every_step():
    # Closed-form identity (Havlena and Odeh 1963): F = N (Eo + Efw) at every step, and
    # So + Sg + Sw = 1 with Sg from the free-gas balance; Tarner solves it to round-off.
    c = material_balance_closure(_ahmed_prediction())
    assert np.abs(c["mbe_residual"]).max() < 1e-12
    assert np.abs(c["saturation_residual"]).max() < 1e-12
    assert (c["withdrawal_rb_per_stb"].iloc[1:] > 0).all()


def test_muskat_closes_to_integration_tolerance():
    c = material_balance_closure(_ahmed_prediction("muskat"))
    assert np.abs(c["mbe_residual"]).max() < 1e-6


def test_tarner_and_muskat_agree_on_ahmed_data():
    # check-values 5.3 advice [C]: Tarner and Muskat Np/N within 2 % at each pressure.
    a = _ahmed_prediction("tarner").table
    b = _ahmed_prediction("muskat").table
    below = a["p_psia"] < 2100.0
    assert_allclose(a.loc[below, "np_over_n"], b.loc[below, "np_over_n"], rtol=0.02)


def test_tarner_converges_with_step_size():
    # Numerical check: halving the step changes Np/N at 1300 psi by well under 0.5 %.
    coarse = _ahmed_prediction(dp=40.0).recovery_at_abandonment
    fine = _ahmed_prediction(dp=5.0).recovery_at_abandonment
    assert abs(coarse - fine) / fine < 0.005


def _muskat_textbook(pvt: PvtTable, rp: CoreyGasOil, pb: float, p_end: float, swi: float, n: int = 4000):
    """Muskat's equation as restated in check-values 5.1 (cf = cw = 0), by classical RK4."""
    def f(p, so):
        pr, sl = pvt.at(p), pvt.slopes(p)
        bo, bg, mo, mg = float(pr["bo"]), float(pr["bg"]), float(pr["mu_o"]), float(pr["mu_g"])
        sg = 1.0 - swi - so
        krg, kro = rp(max(sg, 0.0))
        k = float(krg / kro)
        lam = bg / bo * float(sl["drs"])
        eps = mo / mg / bo * float(sl["dbo"])
        eta = bg * float(sl["dinv_bg"])
        return (so * lam + so * eps * k + sg * eta) / (1.0 + mo / mg * k)

    ps = np.linspace(pb, p_end, n + 1)
    so = np.empty(n + 1)
    so[0] = 1.0 - swi
    for i in range(n):
        h = ps[i + 1] - ps[i]
        k1 = f(ps[i], so[i])
        k2 = f(ps[i] + h / 2, so[i] + h / 2 * k1)
        k3 = f(ps[i] + h / 2, so[i] + h / 2 * k2)
        k4 = f(ps[i + 1], so[i] + h * k3)
        so[i + 1] = so[i] + h / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
    bo = pvt.at(ps)["bo"]
    return ps, 1.0 - (bo[0] / bo) * so / (1.0 - swi)


def test_predictor_matches_textbook_muskat_without_compressibility():
    # Muskat (1945) in the textbook form (check-values 5.1), starting at the bubble point
    # with cf = cw = 0; our predictor (both methods) must reproduce it within 0.5 %.
    pvt = ahmed_tarner_example_pvt()
    ps, r_ref = _muskat_textbook(pvt, COREY_51, 2100.0, 1300.0, 0.15, n=400)
    for method in ("tarner", "muskat"):
        pred = predict_depletion(pvt, COREY_51, pi_psia=2100.0, p_abandon_psia=1300.0, swi=0.15, cf_1_psi=0.0,
                                 cw_1_psi=0.0, dp_psia=5.0, method=method)
        r = np.interp(ps[::-1], pred.table["p_psia"].to_numpy()[::-1], pred.table["np_over_n"].to_numpy()[::-1])
        assert_allclose(r[::-1][50:], r_ref[50:], rtol=5e-3)


# --------------------------------------------------------------------------------------
# Predictor on a correlation PVT table, down to abandonment
# --------------------------------------------------------------------------------------
def test_full_path_gor_dips_rises_peaks_and_falls(correlation_runs):
    # Ahmed's solution-gas-drive characteristics (check-values 5.3): flat at Rsi above pb,
    # below Rsi just below pb, back above it, one interior maximum, then falling.
    pred, _ = correlation_runs
    t = pred.table
    gor = t["producing_gor_scf_stb"].to_numpy()
    rsi = pred.rsi_scf_stb
    p = t["p_psia"].to_numpy()
    assert_allclose(gor[p >= pred.pb_psia], rsi, rtol=1e-12)
    assert gor[np.flatnonzero(p < pred.pb_psia)[0]] < rsi
    k = int(np.argmax(gor))
    assert 0 < k < len(gor) - 1 and gor[k] > rsi
    below = p < pred.pb_psia
    d = np.diff(gor[below])
    # after the dip, GOR rises monotonically to the peak then falls monotonically
    k_min = int(np.argmin(gor[below]))
    k_max = int(np.argmax(gor[below]))
    assert k_min < k_max
    assert np.all(d[k_min:k_max] > 0) and np.all(d[k_max:] < 0)
    assert np.all(np.diff(t["np_over_n"]) >= 0)
    assert pred.np_over_n_bubble < pred.np_over_n_sgc <= pred.np_over_n_stage2_end < pred.np_over_n_gor_peak
    assert list(t["stage"].drop_duplicates()) == [1, 2, 3, 4]


def test_recovery_at_abandonment_in_trade_range(correlation_runs):
    # Solution-gas drive recovers 5-30 % of OOIP (check-values 6, common practice); the
    # rock-and-liquid-expansion part above pb is under 5 %.
    pred, _ = correlation_runs
    assert 0.05 <= pred.recovery_at_abandonment <= 0.30
    assert pred.np_over_n_bubble < 0.05


def test_tarner_and_muskat_agree_on_correlation_table(correlation_runs):
    # check-values 5.3 advice [C]: within 2 % at each pressure below the bubble point.
    a, b = correlation_runs
    below = a.table["p_psia"] < a.pb_psia
    assert_allclose(a.table.loc[below, "np_over_n"], b.table.loc[below, "np_over_n"], rtol=0.02)
    assert_allclose(a.np_over_n_gor_peak, b.np_over_n_gor_peak, rtol=0.02)


def test_larger_critical_gas_saturation_delays_stage_three(correlation_pvt):
    # Physical expectation (Ahmed's stage description): immobile gas up to Sgc, so a larger
    # Sgc ends stage 2 later and gives a higher recovery at the same abandonment pressure.
    runs = [predict_depletion(correlation_pvt, CoreyGasOil(swc=0.2, sgc=s, sorg=0.15), pi_psia=3500.0,
                              p_abandon_psia=300.0, dp_psia=20.0) for s in (0.02, 0.06, 0.10)]
    ends = [r.np_over_n_stage2_end for r in runs]
    rfs = [r.recovery_at_abandonment for r in runs]
    assert ends[0] < ends[1] < ends[2]
    assert rfs[0] < rfs[1] < rfs[2]


@settings(max_examples=12, deadline=None)
@given(sgc=st.floats(0.0, 0.15), sorg=st.floats(0.05, 0.3), ng=st.floats(1.0, 4.0), no=st.floats(1.5, 4.0),
       cf=st.floats(0.0, 1e-5))
def test_closure_and_monotone_recovery_for_any_corey_set(sgc, sorg, ng, no, cf):
    # Closed-form identity (material balance) and monotone Np/N for random relperm sets.
    pvt = ahmed_tarner_example_pvt()
    rp = CoreyGasOil(swc=0.15, sgc=sgc, sorg=sorg, ng=ng, no=no)
    pred = predict_depletion(pvt, rp, pi_psia=2925.0, p_abandon_psia=1300.0, cf_1_psi=cf, dp_psia=25.0)
    c = material_balance_closure(pred)
    assert np.abs(c["mbe_residual"]).max() < 1e-11
    assert np.all(np.diff(pred.table["np_over_n"]) >= -1e-15)
    assert (pred.table["so"] >= sorg - 1e-9).all()


# --------------------------------------------------------------------------------------
# Argument checks
# --------------------------------------------------------------------------------------
def test_bad_arguments():
    pvt = ahmed_tarner_example_pvt()
    with pytest.raises(ValueError, match="pi_psia"):
        predict_depletion(pvt, COREY_51, pi_psia=2000.0, p_abandon_psia=1500.0)
    with pytest.raises(ValueError, match="p_abandon_psia"):
        predict_depletion(pvt, COREY_51, pi_psia=2925.0, p_abandon_psia=1000.0)
    with pytest.raises(ValueError, match="method"):
        predict_depletion(pvt, COREY_51, pi_psia=2925.0, p_abandon_psia=1500.0, method="euler")
    with pytest.raises(ValueError, match="strictly increasing"):
        PvtTable(np.array([2.0, 1.0]), np.ones(2), np.ones(2), np.ones(2), np.ones(2), np.ones(2), pb_psia=1.5)
    with pytest.raises(ValueError, match="np_over_n"):
        oil_saturation(1.2, bo_bbl_stb=1.4, boi_bbl_stb=1.4, swi=0.2)
    with pytest.raises(ValueError, match="p_psia must not exceed"):
        undersaturated_recovery(3000.0, pi_psia=2925.0, bo_bbl_stb=1.4, boi_bbl_stb=1.43, swi=0.15,
                                cf_1_psi=4e-6, cw_1_psi=3e-6)


def test_state_at_recovery_interpolates_the_path(correlation_runs):
    # Closed-form identity: at the table's own recovery factors the state is the table row.
    pred, _ = correlation_runs
    t = pred.table
    rows = t.iloc[[5, 40, 120, 200]]
    s = pred.at_recovery(rows["np_over_n"].to_numpy())
    assert_allclose(s["p_psia"], rows["p_psia"], rtol=1e-12)
    assert_allclose(s["producing_gor_scf_stb"], rows["producing_gor_scf_stb"], rtol=1e-12)
    # beyond the end of the path the state is held at abandonment
    assert pred.at_recovery(0.99)["p_psia"].iloc[0] == pytest.approx(pred.p_abandon_psia)
