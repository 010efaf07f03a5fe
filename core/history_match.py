"""History match of a reservoir unit: oil in place and critical gas saturation.

The unit is treated as one volumetric solution-gas-drive tank. Given its monthly oil and gas
production, pressure surveys and producing GOR, the oil initially in place N and the critical
gas saturation Sgc are estimated by least squares over the material-balance predictor
(:func:`core.material_balance.predict_depletion`, Tarner's method): pressure residuals at the
survey months and log-GOR residuals for every producing month, each compared at the unit's
cumulative oil of that month. The fit reports its uncertainty from the Jacobian covariance and
from a profile over Sgc, and says plainly when the data do not constrain a parameter.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy.optimize import least_squares, minimize_scalar
from scipy.stats import chi2

from core.material_balance import DepletionPrediction, PvtTable, predict_depletion
from core.relperm import CoreyGasOil
from core.validation import DepletionDeskWarning, check_positive, check_range

__all__ = ["SolutionGasDriveMatch", "fit_solution_gas_drive", "unit_history", "history_match_unit",
           "HistoryMatchWarning"]

# Two-sided 80 % interval (P90-P10 style) from a normal approximation: z = 1.2816
_Z80 = 1.2815515655446004
# Profile likelihood level for one parameter, 80 % two-sided: chi-square(1) quantile
_CHI2_80 = float(chi2.ppf(0.80, 1))


class HistoryMatchWarning(DepletionDeskWarning):
    """The history match ran but a parameter is poorly or not constrained by the data."""


@dataclass(frozen=True, eq=False)
class SolutionGasDriveMatch:
    """Result of :func:`fit_solution_gas_drive`.

    Attributes
    ----------
    ooip_stb, sgc : float
        Best estimates of oil initially in place [STB] and critical gas saturation [-].
    ooip_low_stb, ooip_high_stb : float
        80 % interval of N from the Jacobian covariance (log-normal). [STB]
    sgc_low, sgc_high : float
        80 % interval of Sgc from the profile over Sgc (NaN when the profile does not
        close inside the searched range on that side). [-]
    ooip_rel_std, sgc_std : float
        Standard error of ln N and of Sgc from the Jacobian covariance (NaN if singular).
    recovery_factor_to_date : float
        Cumulative oil to the last month / N. [-]
    recovery_factor_low, recovery_factor_high : float
        Recovery factor to date at the high and low ends of the N interval. [-]
    constrained : dict
        ``{"ooip": bool, "sgc": bool}``: whether the data constrain each parameter.
    messages : tuple of str
        Plain statements about the fit (constraint warnings, bounds hit).
    expected_path : DataFrame
        ``np_stb``, ``np_over_n``, ``p_psia``, ``producing_gor_scf_stb``, ``stage`` of the fitted
        prediction, for plotting beside the observed.
    observed : DataFrame
        Per month: ``month``, ``cum_oil_bbl``, ``pressure_psia``, ``gor_scf_stb`` (observed),
        ``pressure_fit_psia``, ``gor_fit_scf_stb`` (fitted, monthly average).
    profile : DataFrame
        ``sgc``, ``ooip_stb`` (best N at that Sgc), ``cost`` (half the weighted SSE).
    prediction : DepletionPrediction
        The fitted material-balance prediction (scaled to N).
    rmse_pressure_psia, rmse_log_gor : float
        Root-mean-square misfit of pressure [psia] and of ln GOR [-].
    n_pressure, n_gor : int
        Number of pressure and GOR observations used.
    """

    ooip_stb: float
    sgc: float
    ooip_low_stb: float
    ooip_high_stb: float
    sgc_low: float
    sgc_high: float
    ooip_rel_std: float
    sgc_std: float
    recovery_factor_to_date: float
    recovery_factor_low: float
    recovery_factor_high: float
    constrained: dict
    messages: tuple[str, ...]
    expected_path: pd.DataFrame
    observed: pd.DataFrame
    profile: pd.DataFrame
    prediction: DepletionPrediction
    rmse_pressure_psia: float
    rmse_log_gor: float
    n_pressure: int
    n_gor: int


def _gor_between(x: np.ndarray, gp: np.ndarray, gor: np.ndarray, r0: np.ndarray, r1: np.ndarray) -> np.ndarray:
    """Average producing GOR between recovery factors r0 < r1: (Gp(r1) - Gp(r0)) / (r1 - r0)."""
    g1 = np.interp(r1, x, gp)
    g0 = np.interp(r0, x, gp)
    dr = r1 - r0
    inst = np.interp(0.5 * (r0 + r1), x, gor)
    with np.errstate(invalid="ignore", divide="ignore"):
        avg = (g1 - g0) / dr
    # beyond the end of the path (N too small for the production) the state is held at the end
    return np.where((dr > 1e-10) & (r1 <= x[-1]), avg, inst)


def _monthly_gor_from_path(pred: DepletionPrediction, r0: np.ndarray, r1: np.ndarray) -> np.ndarray:
    t = pred.table
    return _gor_between(t["np_over_n"].to_numpy(), t["gp_over_n_scf_stb"].to_numpy(),
                        t["producing_gor_scf_stb"].to_numpy(), r0, r1)


def fit_solution_gas_drive(
    cum_oil_bbl: ArrayLike,
    *,
    oil_bbl: ArrayLike,
    gor_scf_stb: ArrayLike,
    pressure_psia: ArrayLike,
    pvt: PvtTable,
    relperm: CoreyGasOil,
    pi_psia: float,
    months: ArrayLike | None = None,
    p_abandon_psia: float | None = None,
    cf_1_psi: float = 4e-6,
    cw_1_psi: float = 3e-6,
    pressure_sigma_psia: float = 50.0,
    gor_sigma_log: float = 0.10,
    sgc_bounds: tuple[float, float] = (0.0, 0.20),
    n_profile: int = 11,
    dp_psia: float | None = None,
) -> SolutionGasDriveMatch:
    """Estimate oil in place N and critical gas saturation Sgc of a solution-gas-drive unit.

    Parameters
    ----------
    cum_oil_bbl : array_like
        Cumulative oil to the end of each month, non-decreasing. [bbl]
    oil_bbl : array_like
        Oil produced in each month. [bbl]
    gor_scf_stb : array_like
        Observed producing GOR of each month; NaN where unknown (e.g. no oil). [scf/STB]
    pressure_psia : array_like
        Average reservoir pressure survey in the month; NaN where none. [psia]
    pvt : PvtTable
        Black-oil table covering ``p_abandon_psia`` to ``pi_psia``.
    relperm : CoreyGasOil
        Relative permeability set; its ``sgc`` is replaced by the fitted value.
    pi_psia : float
        Initial reservoir pressure. [psia]
    months : array_like, optional
        Month of each row, carried into ``observed``.
    p_abandon_psia : float, optional
        Last pressure of the predictor; default the lowest table pressure plus 1 %.
    cf_1_psi, cw_1_psi : float, optional
        Pore and water compressibility. [1/psi]
    pressure_sigma_psia, gor_sigma_log : float, optional
        Assumed error of a pressure survey [psia] and of ln GOR of a month [-]; they weight the
        two data kinds (the covariance is then rescaled by the residual variance).
    sgc_bounds : (float, float), optional
        Search range of Sgc. [-]
    n_profile : int, optional
        Number of Sgc values in the profile (a coarse global search before the fit).
    dp_psia : float, optional
        Pressure step of the predictor below the bubble point; default (pb - p_abandon)/150.

    Returns
    -------
    SolutionGasDriveMatch

    Notes
    -----
    Weighted nonlinear least squares (scipy.optimize.least_squares, trust-region reflective,
    bounds) in x = (ln N, Sgc) over the predictor of :mod:`core.material_balance` (Tarner
    1944, as in Ahmed's handbook). Pressure residual (p_fit(Np/N) - p_obs)/sigma_p at each
    survey, with Np at mid-month; GOR residual (ln R_fit - ln R_obs)/sigma_R with R_fit the
    month's average producing GOR on the predicted path. Start: a profile over ``n_profile``
    values of Sgc, each with its best N by a one-dimensional search, so the fit starts near the
    global minimum. Uncertainty: covariance s^2 (J^T J)^-1 with s^2 = SSE/(m - 2) (the
    Gauss-Newton approximation, e.g. Bates and Watts, *Nonlinear Regression Analysis and Its
    Applications*, Wiley, 1988, ch. 2), and an 80 % profile interval for Sgc where
    2 (cost - cost_min)/s^2 < chi-square(1) 0.80 quantile. A parameter is reported as not
    constrained when the data cannot inform it (no production below the bubble point for
    Sgc; neither pressure surveys nor a GOR departure from Rsi for N), when its relative
    standard error exceeds 50 %, or when it sits on a bound.
    """
    if not isinstance(pvt, PvtTable):
        raise ValueError("pvt must be a PvtTable")
    if not isinstance(relperm, CoreyGasOil):
        raise ValueError("relperm must be a CoreyGasOil")
    cum = check_range("cum_oil_bbl", cum_oil_bbl, 0.0, None, unit="bbl")
    n = cum.size
    if n < 3:
        raise ValueError(f"cum_oil_bbl must hold at least 3 months, got {n}")
    if np.any(np.diff(cum) < -1e-6):
        raise ValueError("cum_oil_bbl must not decrease")
    if cum[-1] <= 0:
        raise ValueError("cum_oil_bbl must end above 0 bbl")
    oil = np.asarray(oil_bbl, dtype=float)
    gor = np.asarray(gor_scf_stb, dtype=float)
    pres = np.asarray(pressure_psia, dtype=float)
    for name, a in (("oil_bbl", oil), ("gor_scf_stb", gor), ("pressure_psia", pres)):
        if a.shape != (n,):
            raise ValueError(f"{name} must have {n} values like cum_oil_bbl, got shape {a.shape}")
    if np.any(oil[np.isfinite(oil)] < 0):
        raise ValueError("oil_bbl must be >= 0")
    check_positive("pi_psia", pi_psia, unit="psia")
    check_positive("pressure_sigma_psia", pressure_sigma_psia, unit="psia")
    check_positive("gor_sigma_log", gor_sigma_log)
    lo_s, hi_s = (float(v) for v in check_range("sgc_bounds", sgc_bounds, 0.0, 1.0 - relperm.swc - relperm.sorg))
    if not lo_s < hi_s:
        raise ValueError(f"sgc_bounds must be increasing, got {sgc_bounds}")
    n_profile = int(check_range("n_profile", n_profile, 3, 200))
    pb = pvt.pb_psia
    p_ab = float(pvt.p_psia[0] * 1.01) if p_abandon_psia is None else float(p_abandon_psia)
    dp = max(2.0, (pb - p_ab) / 150.0) if dp_psia is None else float(dp_psia)
    month_col = np.arange(n) if months is None else np.asarray(months)

    oil = np.nan_to_num(oil, nan=0.0)
    cum_start = cum - oil
    cum_mid = cum - 0.5 * oil
    p_ok = np.isfinite(pres) & (pres > 0)
    g_ok = np.isfinite(gor) & (gor > 0) & (oil > 0)
    n_p, n_g = int(p_ok.sum()), int(g_ok.sum())
    if n_p + n_g < 3:
        raise ValueError(f"need at least 3 pressure or GOR observations, got {n_p + n_g}")
    ln_gor_obs = np.log(gor[g_ok])
    base = dict(swc=relperm.swc, sorg=relperm.sorg, krg_max=relperm.krg_max, kro_max=relperm.kro_max,
                ng=relperm.ng, no=relperm.no)
    cache: dict[float, DepletionPrediction] = {}

    def prediction(sgc: float) -> DepletionPrediction:
        key = round(float(sgc), 10)
        if key not in cache:
            cache[key] = predict_depletion(pvt, CoreyGasOil(sgc=key, **base), pi_psia=pi_psia, p_abandon_psia=p_ab,
                                           cf_1_psi=cf_1_psi, cw_1_psi=cw_1_psi, dp_psia=dp)
        return cache[key]

    arrays: dict[float, tuple[np.ndarray, ...]] = {}

    def path_arrays(sgc: float) -> tuple[np.ndarray, ...]:
        key = round(float(sgc), 10)
        if key not in arrays:
            t = prediction(key).table
            arrays[key] = tuple(t[c].to_numpy() for c in ("np_over_n", "p_psia", "gp_over_n_scf_stb",
                                                           "producing_gor_scf_stb"))
        return arrays[key]

    def residuals(x: np.ndarray) -> np.ndarray:
        n_oil = float(np.exp(x[0]))
        r_tab, p_tab, gp_tab, gor_tab = path_arrays(x[1])
        res_p = (np.interp(cum_mid[p_ok] / n_oil, r_tab, p_tab) - pres[p_ok]) / pressure_sigma_psia
        g_fit = _gor_between(r_tab, gp_tab, gor_tab, cum_start[g_ok] / n_oil, cum[g_ok] / n_oil)
        # beyond the end of the path (N too small) the fit is penalised through the clipped state
        res_g = (np.log(g_fit) - ln_gor_obs) / gor_sigma_log
        return np.concatenate([res_p, res_g])

    def cost(x: np.ndarray) -> float:
        r = residuals(x)
        return 0.5 * float(r @ r)

    # --- profile over Sgc: best N for each Sgc (1-D search in ln N) -----------------------
    ln_lo = float(np.log(cum[-1] / 0.6))  # no unit recovers 60 % by solution-gas drive
    ln_hi = float(np.log(cum[-1] / 1e-4))
    grid_n = np.linspace(ln_lo, ln_hi, 60)
    prof_s = np.linspace(lo_s, hi_s, n_profile)
    prof_n, prof_c = [], []
    for s in prof_s:
        c = np.array([cost(np.array([g, s])) for g in grid_n])
        k = int(np.argmin(c))
        a, b = grid_n[max(k - 1, 0)], grid_n[min(k + 1, grid_n.size - 1)]
        res = minimize_scalar(lambda g, s=s: cost(np.array([g, s])), bounds=(a, b), method="bounded",
                              options={"xatol": 1e-6})
        best = (res.x, res.fun) if res.fun <= c[k] else (grid_n[k], c[k])
        prof_n.append(float(np.exp(best[0])))
        prof_c.append(float(best[1]))
    prof_c_arr = np.array(prof_c)
    k0 = int(np.argmin(prof_c_arr))
    x0 = np.array([np.log(prof_n[k0]), prof_s[k0]])

    # --- least squares from the best profile point ------------------------------------------
    eps = 1e-9
    fit = least_squares(residuals, x0, bounds=([ln_lo, lo_s], [ln_hi, hi_s]), method="trf",
                        x_scale=np.array([0.1, 0.01]), diff_step=np.array([1e-4, 2e-3]), max_nfev=200)
    x = fit.x if fit.cost <= prof_c_arr[k0] + eps else x0
    n_hat, s_hat = float(np.exp(x[0])), float(x[1])
    r_final = residuals(x)
    m = r_final.size
    dof = max(m - 2, 1)
    s2 = float(r_final @ r_final) / dof
    jac = fit.jac if x is fit.x else least_squares(residuals, x0, max_nfev=1).jac
    try:
        cov = s2 * np.linalg.inv(jac.T @ jac)
        se = np.sqrt(np.clip(np.diag(cov), 0.0, None))
        if not np.all(np.isfinite(se)):
            raise np.linalg.LinAlgError
    except np.linalg.LinAlgError:
        se = np.array([np.nan, np.nan])
    se_ln_n, se_s = float(se[0]), float(se[1])
    j0 = float(jac[:, 0] @ jac[:, 0])
    if not np.isfinite(se_ln_n) and j0 > 0:
        # Sgc not informed (zero Jacobian column): standard error of ln N with Sgc held
        se_ln_n = float(np.sqrt(s2 / j0))

    # --- profile interval for Sgc (refined around the optimum) -------------------------------
    def profile_at(s: float, ln_n0: float) -> float:
        res = minimize_scalar(lambda g: cost(np.array([g, s])), bounds=(max(ln_lo, ln_n0 - 1.0),
                              min(ln_hi, ln_n0 + 1.0)), method="bounded", options={"xatol": 1e-6})
        return float(res.fun)

    step = max(se_s if np.isfinite(se_s) else 0.0, 0.002)
    extra = [s_hat + k * step for k in (-6, -4, -3, -2, -1.5, -1, -0.5, 0.5, 1, 1.5, 2, 3, 4, 6)]
    extra = [v for v in extra if lo_s <= v <= hi_s]
    prof_s_all = np.concatenate([prof_s, [s_hat], extra])
    prof_c_all = np.concatenate([prof_c_arr, [0.5 * float(r_final @ r_final)], [profile_at(v, x[0]) for v in extra]])
    order = np.argsort(prof_s_all)
    ps, pc = prof_s_all[order], prof_c_all[order]
    c_min = float(pc.min())
    level = 2.0 * (pc - c_min) / s2 - _CHI2_80  # <= 0 inside the 80 % profile interval
    k_best = int(np.argmin(pc))

    def crossing(direction: int) -> float:
        k = k_best
        while 0 <= k + direction < ps.size:
            j = k + direction
            if level[j] > 0:
                return float(ps[k] + (ps[j] - ps[k]) * (0.0 - level[k]) / (level[j] - level[k]))
            k = j
        return float("nan")  # interval open on this side within the search range

    sgc_low, sgc_high = crossing(-1), crossing(+1)

    # --- what the data can and cannot say ----------------------------------------------------
    pred = prediction(s_hat)
    messages: list[str] = []
    r_last = float(cum[-1] / n_hat)
    below_pb_obs = bool(np.any(pres[p_ok] < pb)) or r_last > pred.np_over_n_bubble
    gor_left_rsi = bool(n_g) and bool(np.any(np.abs(ln_gor_obs - np.log(pred.rsi_scf_stb)) > 2 * gor_sigma_log))
    con_n = (n_p > 0 or gor_left_rsi) and np.isfinite(se_ln_n) and se_ln_n < 0.5 \
        and not (np.isclose(x[0], ln_lo) or np.isclose(x[0], ln_hi))
    con_s = below_pb_obs and np.isfinite(se_s) and (se_s < 0.5 * max(s_hat, 0.02)) \
        and np.isfinite(sgc_low) and np.isfinite(sgc_high)
    if n_p == 0:
        messages.append("no pressure surveys: oil in place rests on the GOR path alone")
    if not below_pb_obs:
        messages.append("no production below the bubble point yet: the data say nothing about the critical gas "
                        "saturation, and oil in place rests on rock and fluid compressibility alone")
    elif pred.np_over_n_stage2_end is None or r_last < pred.np_over_n_stage2_end:
        messages.append("the producing GOR has not yet risen above Rsi: the critical gas saturation has only a "
                        "lower bound")
    if not con_n:
        messages.append("oil in place is not constrained by these data (wide or open interval)")
    if not con_s:
        messages.append("critical gas saturation is not constrained by these data (wide or open interval)")
    rms_p = float(np.sqrt(np.mean(r_final[:n_p] ** 2))) if n_p else 0.0
    rms_g = float(np.sqrt(np.mean(r_final[n_p:] ** 2))) if n_g else 0.0
    if max(rms_p, rms_g) > 2.0:
        messages.append(
            f"misfit well above the assumed errors (pressure {rms_p * pressure_sigma_psia:.0f} psi vs "
            f"{pressure_sigma_psia:g}; ln GOR {rms_g * gor_sigma_log:.2f} vs {gor_sigma_log:g}): the unit does not "
            "behave as one tank (wells at different depletion, or another drive); the intervals, which assume "
            "the tank model, are too narrow")
    if np.isclose(s_hat, lo_s) or np.isclose(s_hat, hi_s):
        messages.append(f"critical gas saturation sits on a search bound ({s_hat:.3f})")
    if messages:
        warnings.warn("; ".join(messages), HistoryMatchWarning, stacklevel=2)

    n_low = n_hat * np.exp(-_Z80 * se_ln_n) if np.isfinite(se_ln_n) else float("nan")
    n_high = n_hat * np.exp(_Z80 * se_ln_n) if np.isfinite(se_ln_n) else float("nan")
    t = pred.table
    path = pd.DataFrame({
        "np_stb": t["np_over_n"].to_numpy() * n_hat, "np_over_n": t["np_over_n"].to_numpy(),
        "p_psia": t["p_psia"].to_numpy(), "producing_gor_scf_stb": t["producing_gor_scf_stb"].to_numpy(),
        "stage": t["stage"].to_numpy(),
    })
    r_tab = t["np_over_n"].to_numpy()
    observed = pd.DataFrame({
        "month": month_col, "cum_oil_bbl": cum, "pressure_psia": np.where(p_ok, pres, np.nan),
        "gor_scf_stb": np.where(g_ok, gor, np.nan),
        "pressure_fit_psia": np.interp(cum_mid / n_hat, r_tab, t["p_psia"].to_numpy()),
        "gor_fit_scf_stb": _monthly_gor_from_path(pred, cum_start / n_hat, cum / n_hat),
    })
    res_p = r_final[:n_p] * pressure_sigma_psia
    res_g = r_final[n_p:] * gor_sigma_log
    return SolutionGasDriveMatch(
        ooip_stb=n_hat, sgc=s_hat, ooip_low_stb=float(n_low), ooip_high_stb=float(n_high), sgc_low=sgc_low,
        sgc_high=sgc_high, ooip_rel_std=se_ln_n, sgc_std=se_s, recovery_factor_to_date=r_last,
        recovery_factor_low=float(cum[-1] / n_high) if np.isfinite(n_high) else float("nan"),
        recovery_factor_high=float(cum[-1] / n_low) if np.isfinite(n_low) else float("nan"),
        constrained={"ooip": bool(con_n), "sgc": bool(con_s)}, messages=tuple(messages), expected_path=path,
        observed=observed, profile=pd.DataFrame({"sgc": prof_s, "ooip_stb": prof_n, "cost": prof_c_arr}),
        prediction=pred,
        rmse_pressure_psia=float(np.sqrt(np.mean(res_p**2))) if n_p else float("nan"),
        rmse_log_gor=float(np.sqrt(np.mean(res_g**2))) if n_g else float("nan"), n_pressure=n_p, n_gor=n_g,
    )


def unit_history(production: pd.DataFrame, unit: str) -> pd.DataFrame:
    """Monthly totals of one reservoir unit from the tidy monthly table.

    Returns ``month``, ``oil_bbl``, ``gas_mcf`` (sums over the unit's wells), ``cum_oil_bbl``,
    ``cum_gas_mcf``, ``gor_scf_stb`` (1000 gas / oil; NaN without oil or gas) and
    ``pressure_psia`` (mean of the surveys in the month; NaN when none).
    """
    need = {"unit", "month", "oil_bbl"}
    missing = need - set(production.columns)
    if missing:
        raise ValueError(f"production lacks columns {sorted(missing)}")
    d = production[production["unit"] == unit]
    if d.empty:
        raise ValueError(f"unit {unit!r} has no rows")
    agg = {"oil_bbl": ("oil_bbl", "sum")}
    if "gas_mcf" in d:
        agg["gas_mcf"] = ("gas_mcf", lambda s: s.sum(min_count=1))
    if "pressure_psia" in d:
        agg["pressure_psia"] = ("pressure_psia", "mean")
    g = d.groupby("month", sort=True).agg(**agg).reset_index()
    if "gas_mcf" not in g:
        g["gas_mcf"] = np.nan
    if "pressure_psia" not in g:
        g["pressure_psia"] = np.nan
    g["cum_oil_bbl"] = g["oil_bbl"].cumsum()
    g["cum_gas_mcf"] = g["gas_mcf"].fillna(0.0).cumsum()
    with np.errstate(invalid="ignore", divide="ignore"):
        g["gor_scf_stb"] = np.where(g["oil_bbl"] > 0, 1000.0 * g["gas_mcf"] / g["oil_bbl"], np.nan)
    return g[["month", "oil_bbl", "gas_mcf", "cum_oil_bbl", "cum_gas_mcf", "gor_scf_stb", "pressure_psia"]]


def history_match_unit(
    production: pd.DataFrame,
    wells: pd.DataFrame,
    unit: str,
    *,
    relperm: CoreyGasOil | None = None,
    **options: object,
) -> SolutionGasDriveMatch:
    """History match one unit of the tidy monthly table, fluid data from the well header.

    The unit's fluid is the median over its wells of ``api_gravity``, ``gas_specific_gravity``,
    ``reservoir_temp_f``, ``initial_pressure_psia`` and ``bubble_point_psia``; when the bubble
    point is unknown it is derived (Standing, via ``core.pvt.black_oil_table``) from the
    unit's producing GOR of its first six producing months taken as Rsi. The PVT table comes
    from :meth:`PvtTable.from_correlations`; other keyword options go to
    :func:`fit_solution_gas_drive`. Raises ``ValueError`` naming what is missing.
    """
    h = unit_history(production, unit)
    w = wells[wells["unit"] == unit] if "unit" in wells else wells.iloc[0:0]

    def med(col: str) -> float:
        return float(pd.to_numeric(w[col], errors="coerce").median()) if col in w and len(w) else float("nan")

    api, gg, t_f = med("api_gravity"), med("gas_specific_gravity"), med("reservoir_temp_f")
    pi, pb = med("initial_pressure_psia"), med("bubble_point_psia")
    for name, v in (("api_gravity", api), ("gas_specific_gravity", gg), ("reservoir_temp_f", t_f),
                    ("initial_pressure_psia", pi)):
        if not np.isfinite(v):
            raise ValueError(f"unit {unit!r}: {name} unknown in the well header; the history match needs it")
    if np.isfinite(pb):
        pvt = PvtTable.from_correlations(api=api, gamma_g=gg, t_f=t_f, pb_psia=min(pb, pi), p_max_psia=pi,
                                         p_min_psia=max(50.0, 0.03 * pb), n_points=161)
    else:
        first = h[h["oil_bbl"] > 0].head(6)
        rsi = float(1000.0 * first["gas_mcf"].sum() / first["oil_bbl"].sum())
        if not np.isfinite(rsi) or rsi <= 0:
            raise ValueError(f"unit {unit!r}: bubble point unknown and no early GOR to derive it from")
        pvt = PvtTable.from_correlations(api=api, gamma_g=gg, t_f=t_f, rsb_scf_stb=rsi, p_max_psia=pi,
                                         p_min_psia=50.0, n_points=161)
    rp = CoreyGasOil() if relperm is None else relperm
    return fit_solution_gas_drive(
        h["cum_oil_bbl"].to_numpy(), oil_bbl=h["oil_bbl"].to_numpy(), gor_scf_stb=h["gor_scf_stb"].to_numpy(),
        pressure_psia=h["pressure_psia"].to_numpy(), pvt=pvt, relperm=rp, pi_psia=max(pi, pvt.pb_psia),
        months=h["month"].to_numpy(), **options,
    )
