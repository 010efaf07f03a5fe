"""Monthly forecast of every fitted well to its economic limit or the horizon cap.

Method
------
* Model: the fitted Arps decline, switched to the terminal exponential decline ``d_lim``
  whenever b > 0 (modified hyperbolic, Robertson 1988): the instantaneous decline
  D(t) = di/(1 + b di t) falls toward 0 for every b > 0, so the unconstrained tail keeps
  too much oil (for b >= 1 the cumulative does not even converge). Rule: the forecast
  decline is max(D(t), d_lim) for b > 0; an exponential fit (b = 0) keeps its own decline.
  A hyperbolic fit whose di is already below d_lim declines at d_lim from the start.
* Time origin: t = 0 at the start of the fit-start month (the fit's ``qi``); t in years of
  365.25 d.
* Calendar-day volumes: producing-day rate x the well's recent uptime, the share of
  calendar days produced (sum days_on / sum days_in_month over its last
  ``uptime_months`` months with days on; a month with days on but neither oil nor gas adds
  its calendar days but no producing days).
* Monthly volume = uptime x (Np(t_end of month) - Np(t_start of month)) from the closed-form
  cumulative (exact integral of the rate over the calendar month, not rate x days).
* End: the month in which the calendar-day oil rate reaches the economic limit (volume of
  that month counted up to the limit), or the horizon cap, whichever comes first.
* Gas: on its own fitted curve over the same months (the well stops at the oil limit);
  without a gas fit, gas = oil x the well's recent GOR; a well with a gas fit but no oil fit
  runs on gas to ``econ_limit_mcfd`` or the horizon.

References
----------
.. [1] J. J. Arps, "Analysis of Decline Curves," Trans. AIME 160, 228-247, 1945.
.. [2] S. Robertson, "Generalized Hyperbolic Equation," SPE-18731, 1988.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from core.decline import (
    DAYS_PER_YEAR,
    DeclineSettings,
    FieldFit,
    _TINY,
    _cum_unchecked,
    _log1p_over,
    _mh_cum_unchecked,
    _mh_rate_unchecked,
    _mh_time_unchecked,
    sorted_well_codes,
    switch_time,
)
from core.economics import economic_limit_from_inputs
from core.validation import InputError

#: Columns of the forecast summary (one row per well of the production table).
SUMMARY_COLUMNS = [
    "well_id", "status", "model", "fitted_model", "fit_start", "fit_end", "qi_bopd",
    "di_annual_nominal", "b", "terminal_decline_annual_effective", "terminal_switch_month",
    "econ_limit_bopd", "uptime_fraction", "last_actual_month", "cum_oil_bbl",
    "remaining_oil_bbl", "eur_oil_bbl", "econ_limit_date", "forecast_end_reason",
    "n_forecast_months", "cum_gas_mcf", "remaining_gas_mcf", "eur_gas_mcf", "gas_method",
]
#: Columns of the monthly forecast table.
MONTHLY_COLUMNS = [
    "well_id", "month", "kind", "oil_bbl", "gas_mcf", "oil_rate_bopd", "gas_rate_mcf_d",
    "cum_oil_bbl", "cum_gas_mcf",
]


def _mi(values) -> np.ndarray:
    return np.asarray(values, dtype="datetime64[M]").astype(np.int64)


def _mi_to_day(mi: np.ndarray) -> np.ndarray:
    """Day number (days since 1970-01-01) of the first day of each integer month."""
    mi = np.asarray(mi, dtype=np.int64)
    if mi.size == 0:
        return mi.copy()
    lo, hi = int(mi.min()), int(mi.max())
    table = np.arange(lo, hi + 1).astype("datetime64[M]").astype("datetime64[D]").astype(np.int64)
    return table[mi - lo]


def _mi_to_ts(mi: np.ndarray) -> np.ndarray:
    mi = np.asarray(mi, dtype=float)
    out = np.full(mi.shape, np.datetime64("NaT"), dtype="datetime64[ns]")
    ok = np.isfinite(mi)
    out[ok] = mi[ok].astype(np.int64).astype("datetime64[M]").astype("datetime64[ns]")
    return out


def _stream_params(fits: pd.DataFrame, wells: pd.Index, stream: str):
    if isinstance(wells, pd.CategoricalIndex):
        # the table's well ids as plain values: reindexing by a categorical index compares
        # all its categories (every well of the field when the table is a block of it)
        wells = pd.Index(wells.to_numpy())
    f = fits[fits["stream"] == stream].drop_duplicates("well_id", keep="last").set_index("well_id").reindex(wells)
    ok = f["forecastable"].fillna(False).to_numpy(bool).copy()
    ok &= np.isfinite(f["qi"].to_numpy(float)) & np.isfinite(f["di"].to_numpy(float))
    ok &= f["fit_start"].notna().to_numpy()
    qi = np.where(ok, f["qi"].to_numpy(float), 1.0)
    di = np.where(ok, f["di"].to_numpy(float), 1.0)
    b = np.where(ok, np.clip(f["b"].to_numpy(float), 0.0, 2.0), 0.0)
    fs = np.where(ok, _mi(f["fit_start"].to_numpy()), 0)
    return f, ok, qi, np.maximum(di, 1e-12), b, fs


def forecast_field(
    fits,
    production: pd.DataFrame,
    *,
    settings: DeclineSettings | None = None,
    as_of=None,
    monthly: bool = True,
    gas_econ_limit_mcfd=None,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Forecast every well's monthly oil and gas to the economic limit or the horizon.

    Parameters
    ----------
    fits : FieldFit or DataFrame
        :func:`core.decline.fit_field` result (or its ``fits`` table).
    production : DataFrame
        The loader's tidy monthly table (``well_id``, ``month``, ``oil_bbl``, ``gas_mcf``,
        ``days_on``, ``days_in_month``). Not modified.
    settings : DeclineSettings, optional
        Economic limit (``econ_limit_bopd`` or ``economics``), terminal decline, horizon,
        uptime window. Default: ``fits.settings`` or :class:`DeclineSettings`.
    as_of : month, optional
        Production after this month is ignored; the forecast starts the month after each
        well's last actual month up to ``as_of``. Pass the same cut table to ``fit_field``.
    monthly : bool
        False skips the monthly table (returned empty); the summary is the same (remaining
        volumes come from the closed-form cumulative either way).
    gas_econ_limit_mcfd : mapping or Series of well_id to float, optional
        Per-well economic limit of the wells forecast on gas (no oil forecast), replacing
        ``settings.econ_limit_mcfd`` for the wells it names. [Mcf/d]

    Returns
    -------
    summary : DataFrame
        One row per well (:data:`SUMMARY_COLUMNS`); volumes in bbl and Mcf, rates per
        calendar day (bbl/d), declines per year. A well not forecast has remaining 0,
        EUR = cumulative and its reason in ``status``.
    monthly : DataFrame
        Forecast months (:data:`MONTHLY_COLUMNS`, ``kind = "forecast"``).

    Notes
    -----
    See the module docstring for the method (modified hyperbolic rule, uptime, exact
    monthly integrals, end of forecast).
    """
    with np.errstate(over="ignore", under="ignore"):  # extreme inputs: results checked finite below
        return _forecast(fits, production, settings, as_of, monthly, gas_econ_limit_mcfd)


def _forecast(fits, production, settings, as_of, monthly, gas_limit=None):
    if isinstance(fits, FieldFit):
        st = settings or fits.settings
        fit_table = fits.fits
    elif isinstance(fits, pd.DataFrame):
        st = settings or DeclineSettings()
        fit_table = fits
    else:
        raise InputError("fits must be a FieldFit or its fits table")
    need = {"well_id", "month"}
    if not need <= set(production.columns):
        raise InputError(f"production table lacks columns {sorted(need - set(production.columns))}")
    df, wells, code, mi = sorted_well_codes(production)
    n_w = len(wells)
    if as_of is not None:
        cut = pd.Timestamp(as_of)
        keep = mi <= (cut.year - 1970) * 12 + cut.month - 1
        if not keep.all():
            df, code, mi = df[keep], code[keep], mi[keep]
    oil = np.nan_to_num(df["oil_bbl"].to_numpy(float), nan=0.0, posinf=0.0) if "oil_bbl" in df else np.zeros(len(df))
    gas = np.nan_to_num(df["gas_mcf"].to_numpy(float), nan=0.0, posinf=0.0) if "gas_mcf" in df else np.zeros(len(df))
    oil, gas = np.maximum(oil, 0.0), np.maximum(gas, 0.0)
    dim = (df["days_in_month"].to_numpy(float) if "days_in_month" in df
           else pd.to_datetime(df["month"]).dt.days_in_month.to_numpy(float))
    don = np.nan_to_num(df["days_on"].to_numpy(float), nan=0.0) if "days_on" in df else dim.copy()
    # ---- history per well
    cum_oil = np.bincount(code, weights=oil, minlength=n_w)
    cum_gas = np.bincount(code, weights=gas, minlength=n_w)
    last_mi = np.full(n_w, np.nan)
    if code.size:
        lastrow = np.r_[code[1:] != code[:-1], True]  # rows sorted by well and month
        last_mi[code[lastrow]] = mi[lastrow]
    has_hist = np.isfinite(last_mi)
    # recent uptime and GOR over the last `uptime_months` months on production (days on > 0);
    # days of a month on production that gave no oil and no gas count as down time
    prod_rows = np.flatnonzero(don > 0)
    pc = code[prod_rows]
    cnt = np.bincount(pc, minlength=n_w)
    first = np.r_[True, pc[1:] != pc[:-1]] if pc.size else np.zeros(0, bool)
    start = np.maximum.accumulate(np.where(first, np.arange(pc.size), 0)) if pc.size else pc
    from_end = cnt[pc] - 1 - (np.arange(pc.size) - start)
    rec = prod_rows[from_end < st.uptime_months]
    rc = code[rec]
    gave = (oil[rec] > 0) | (gas[rec] > 0)
    s_don = np.bincount(rc, weights=np.where(gave, np.minimum(don[rec], dim[rec]), 0.0), minlength=n_w)
    s_dim = np.bincount(rc, weights=dim[rec], minlength=n_w)
    uptime = np.where(s_dim > 0, s_don / np.where(s_dim > 0, s_dim, 1.0), 1.0)
    uptime = np.clip(uptime, 1e-3, 1.0)
    s_oil = np.bincount(rc, weights=oil[rec], minlength=n_w)
    s_gas = np.bincount(rc, weights=gas[rec], minlength=n_w)
    gor = np.where(s_oil > 0, 1000.0 * s_gas / np.where(s_oil > 0, s_oil, 1.0), 0.0)  # scf/STB
    # ---- economic limit per well [bbl/d calendar]
    if st.econ_limit_bopd is not None:
        q_el = np.full(n_w, float(st.econ_limit_bopd))
    elif st.economics is not None:
        q_el = np.broadcast_to(economic_limit_from_inputs(st.economics, gor_scf_stb=gor), (n_w,)).astype(float)
    else:
        q_el = np.zeros(n_w)
    q_el_gas = np.full(n_w, float(st.econ_limit_mcfd or 0.0))
    if gas_limit is not None:
        given = pd.to_numeric(pd.Series(gas_limit, dtype=float), errors="coerce").reindex(wells).to_numpy(float)
        if (np.isfinite(given) & (given < 0)).any():
            raise InputError("gas_econ_limit_mcfd must be 0 or more Mcf/d")
        q_el_gas = np.where(np.isfinite(given), given, q_el_gas)
    d_lim = st.d_lim_nominal
    # ---- stream parameters
    fo, ok_o, qi_o, di_o, b_o, fs_o = _stream_params(fit_table, wells, "oil")
    fg, ok_g, qi_g, di_g, b_g, fs_g = _stream_params(fit_table, wells, "gas")
    ok_o &= has_hist
    ok_g &= has_hist
    dl_o = np.where(b_o > 0, d_lim, di_o)  # exponential fits keep their own decline
    dl_g = np.where(b_g > 0, d_lim, di_g)
    start_mi = np.where(has_hist, np.nan_to_num(last_mi, nan=0).astype(np.int64) + 1, 0)
    start_day = _mi_to_day(start_mi)
    h_months = int(round(st.horizon_years * 12))
    horizon_end_day = _mi_to_day(start_mi + h_months)  # exclusive
    fsd_o, fsd_g = _mi_to_day(fs_o), _mi_to_day(fs_g)
    # driver stream: oil when fitted, else gas
    drv_oil = ok_o
    drv_gas = ~ok_o & ok_g
    fc = drv_oil | drv_gas
    qi_d = np.where(drv_oil, qi_o, qi_g)
    di_d = np.where(drv_oil, di_o, di_g)
    b_d = np.where(drv_oil, b_o, b_g)
    dl_d = np.where(drv_oil, dl_o, dl_g)
    fsd_d = np.where(drv_oil, fsd_o, fsd_g)
    lim_d = np.where(drv_oil, q_el, q_el_gas) / uptime  # producing-day rate at the limit
    t0 = np.maximum((start_day - fsd_d) / DAYS_PER_YEAR, 0.0)
    q0 = _mh_rate_unchecked(t0, qi_d, di_d, b_d, dl_d)
    with np.errstate(divide="ignore", invalid="ignore"):
        t_el = np.where(lim_d > 0, _mh_time_unchecked(np.where(lim_d > 0, lim_d, 1.0), qi_d, di_d, b_d, dl_d), np.inf)
    t_h = (horizon_end_day - fsd_d) / DAYS_PER_YEAR
    below = fc & (q0 <= lim_d)
    reach = fc & ~below & (t_el < t_h)
    t_end = np.where(reach, t_el, t_h)
    end_day = fsd_d + t_end * DAYS_PER_YEAR
    end_mi = np.floor(end_day - 1e-7).astype(np.int64).astype("datetime64[D]").astype("datetime64[M]").astype(np.int64)
    n_k = np.where(fc & ~below, np.clip(end_mi - start_mi + 1, 0, h_months), 0)
    # ---- remaining per well: closed-form cumulative between the forecast start and end
    def remaining(okm, qi, di, b, dl, fsd):
        tst = np.maximum((start_day - fsd) / DAYS_PER_YEAR, 0.0)
        ten = np.maximum((end_day - fsd) / DAYS_PER_YEAR, tst)
        rem = (_mh_cum_unchecked(ten, qi, di, b, dl) - _mh_cum_unchecked(tst, qi, di, b, dl)) * uptime
        rem = np.where(okm & (n_k > 0) & np.isfinite(rem), np.maximum(rem, 0.0), 0.0)
        return rem

    rem_o = remaining(ok_o, qi_o, di_o, b_o, dl_o, fsd_o)
    rem_g = remaining(ok_g, qi_g, di_g, b_g, dl_g, fsd_g)
    gas_by_gor = ok_o & ~ok_g & (gor > 0)
    rem_g = np.where(gas_by_gor, rem_o * gor / 1000.0, rem_g)
    if monthly:
        monthly_table = _monthly_rows(wells, n_w, n_k, start_mi, start_day, end_day, uptime, cum_oil, cum_gas,
                                      gor, gas_by_gor, (ok_o, qi_o, di_o, b_o, dl_o, fsd_o),
                                      (ok_g, qi_g, di_g, b_g, dl_g, fsd_g))
    else:
        monthly_table = pd.DataFrame({c: [] for c in MONTHLY_COLUMNS})
    # ---- summary
    status = np.full(n_w, "", dtype=object)
    fo_status = fo["status"].fillna("not fitted: no fit for this well").to_numpy(object)
    fg_status = fg["status"].fillna("not fitted: no fit for this well").to_numpy(object)
    status[:] = "not forecast: " + fo_status
    status[drv_oil] = fo_status[drv_oil]
    status[drv_gas] = "forecast on gas (oil: " + fo_status[drv_gas] + ")"
    status[~has_hist] = "not forecast: no production months up to the as-of month"
    status[below] = status[below] + "; below the economic limit at the start of the forecast"
    terminal_applies = fc & (b_d > 0)
    sw = switch_time(di_d, b_d, dl_d)
    sw_day = fsd_d + np.where(np.isfinite(sw), sw, 0.0) * DAYS_PER_YEAR
    switched = terminal_applies & (sw_day < end_day)
    sw_mi = np.floor(sw_day).astype(np.int64).astype("datetime64[D]").astype("datetime64[M]").astype(np.int64)
    fitted_model = np.where(drv_oil, fo["model"].fillna("").to_numpy(object), np.where(drv_gas, fg["model"].fillna("").to_numpy(object), ""))
    model = np.where(switched, "modified_hyperbolic", fitted_model)
    reason = np.where(~fc, "not_forecast", np.where(below, "below_limit_at_start",
                      np.where(reach, "economic_limit", "horizon")))
    el_date = np.where(reach, end_mi.astype(float), np.where(below, np.nan_to_num(last_mi, nan=0.0), np.nan))
    el_date = np.where(fc & (reach | below), el_date, np.nan)
    nan = np.nan
    summary = pd.DataFrame({
        "well_id": wells.to_numpy(),
        "status": status,
        "model": np.where(fc, model, ""),
        "fitted_model": np.where(fc, fitted_model, ""),
        "fit_start": np.where(drv_oil, fo["fit_start"].to_numpy("datetime64[ns]"),
                              np.where(drv_gas, fg["fit_start"].to_numpy("datetime64[ns]"), np.datetime64("NaT"))),
        "fit_end": np.where(drv_oil, fo["fit_end"].to_numpy("datetime64[ns]"),
                            np.where(drv_gas, fg["fit_end"].to_numpy("datetime64[ns]"), np.datetime64("NaT"))),
        "qi_bopd": np.where(drv_oil, qi_o, nan),
        "di_annual_nominal": np.where(drv_oil, di_o, nan),
        "b": np.where(drv_oil, b_o, nan),
        "terminal_decline_annual_effective": np.where(terminal_applies, st.terminal_decline_effective, nan),
        "terminal_switch_month": _mi_to_ts(np.where(switched, sw_mi.astype(float), nan)),
        "econ_limit_bopd": q_el,
        "uptime_fraction": uptime,
        "last_actual_month": _mi_to_ts(last_mi),
        "cum_oil_bbl": cum_oil,
        "remaining_oil_bbl": rem_o,
        "eur_oil_bbl": cum_oil + rem_o,
        "econ_limit_date": _mi_to_ts(el_date),
        "forecast_end_reason": reason,
        "n_forecast_months": n_k,
        "cum_gas_mcf": cum_gas,
        "remaining_gas_mcf": rem_g,
        "eur_gas_mcf": cum_gas + rem_g,
        "gas_method": np.where(ok_g & fc, "own decline", np.where(gas_by_gor, "oil x recent GOR", "none")),
    })
    return summary[SUMMARY_COLUMNS], monthly_table


def _monthly_rows(wells, n_w, n_k, start_mi, start_day, end_day, uptime, cum_oil, cum_gas, gor, gas_by_gor,
                  oil_p, gas_p) -> pd.DataFrame:
    """The monthly forecast rows of every well (vectorised over all well-months)."""
    # ---- monthly rows
    N = int(n_k.sum())
    rep = np.repeat(np.arange(n_w), n_k)
    offs = np.cumsum(n_k) - n_k
    # each row's month as an index into a table over the forecast's span of months, so the
    # first day, the next month's first day and the days of each month are gathered from
    # that table instead of being computed per row (integers: the same values)
    m_lo = int((start_mi[n_k > 0]).min()) if N else 0
    m_hi = int((start_mi + n_k).max()) if N else 0
    day_tab = _mi_to_day(np.arange(m_lo, m_hi + 1))
    mrow = np.arange(N)
    mrow += (start_mi - m_lo - offs)[rep]  # month index of each row: start + position
    day_lo_tab = day_tab[:-1]
    hi_day = day_tab[1:].astype(float)[mrow]  # first day of the next month
    np.minimum(hi_day, end_day[rep], out=hi_day)
    days_m = np.diff(day_tab).astype(float)[mrow]  # days in each month
    up = uptime[rep]

    first_row = np.zeros(N, dtype=bool)
    first_row[offs[n_k > 0]] = True

    def stream_volumes(okm, qi, di, b, dl, fsd):
        """Calendar volumes and cumulative-since-start of one stream on the monthly rows.

        Np is evaluated once per month end; a month's volume is the difference with the
        previous month end (the forecast start for the first month): exact integrals.
        Each month end is evaluated on its own branch only (hyperbolic before the switch to
        the terminal decline, exponential tail after), with the per-well factors gathered
        once per branch.
        """
        if N == 0 or not okm[rep].any():
            return np.zeros(N), np.zeros(N)
        wsel = okm & (n_k > 0)
        t_sw = switch_time(di, b, dl)
        t_sw_f = np.where(np.isfinite(t_sw), t_sw, 0.0)
        q_sw = qi * np.exp(-_log1p_over(b, di * t_sw_f))
        np_sw = _cum_unchecked(t_sw_f, qi, di, b)
        tst = np.maximum((start_day - fsd) / DAYS_PER_YEAR, 0.0)
        np_st = _mh_cum_unchecked(tst, qi, di, b, dl)
        # per-well factors of Np_hyp(t) = qi/di (exp(c L) - 1)/c, L = log(1 + b di t)/b,
        # c = b - 1 (Arps 1945), with the same b = 0 and c = 0 devices as core.decline
        b_eff = np.where(np.abs(b) < _TINY, _TINY, b)
        c = -(1.0 - b)
        c_eff = np.where(np.abs(c) < _TINY, _TINY, c)
        f_u = b_eff * di
        f_l = c_eff / b_eff
        f_np = qi / di / c_eff * DAYS_PER_YEAR
        f_tail = q_sw / dl * DAYS_PER_YEAR
        sel = wsel[rep]
        if sel.all():  # every row (the usual case): no gather of the row arrays
            rows, r = slice(None), rep
        else:
            rows = np.flatnonzero(sel)
            r = rep[rows]
        del sel
        # per-well factors are gathered onto the rows into one scratch buffer (np.take with
        # out=, mode="clip": indices are in range, so no buffering), and the month-end
        # times' buffer is reused for the previous month end: fewer fresh row-sized arrays
        n_r = r.size
        g = np.empty(n_r)
        th = np.take(fsd.astype(float), r, mode="clip")
        np.subtract(hi_day[rows], th, out=th)
        th /= DAYS_PER_YEAR
        np.maximum(th, np.take(tst, r, out=g, mode="clip"), out=th)
        np_hi = np.empty(n_r)
        on_h = th <= np.take(t_sw, r, out=g, mode="clip")
        h = np.flatnonzero(on_h)
        rh = r[h]
        gh = g[:h.size]
        x = th[h]
        x *= np.take(f_u, rh, out=gh, mode="clip")
        np.log1p(x, out=x)
        x *= np.take(f_l, rh, out=gh, mode="clip")
        np.expm1(x, out=x)
        x *= np.take(f_np, rh, out=gh, mode="clip")
        np_hi[h] = x
        del x, h, rh, gh
        tl = np.flatnonzero(~on_h)
        rt = r[tl]
        gt = g[:tl.size]
        y = th[tl]
        y -= np.take(t_sw_f, rt, out=gt, mode="clip")
        np.negative(np.take(dl, rt, out=gt, mode="clip"), out=gt)
        y *= gt
        np.expm1(y, out=y)
        np.negative(np.take(f_tail, rt, out=gt, mode="clip"), out=gt)
        y *= gt
        y += np.take(np_sw, rt, out=gt, mode="clip")
        np_hi[tl] = y
        del y, tl, rt, gt, on_h
        np_lo = th  # the month-end times are no longer needed: their buffer takes Np at the previous month end
        del th
        np_lo[1:] = np_hi[:-1]
        fr = first_row[rows]
        np_lo[fr] = np_st[r[fr]]
        upr = up[rows]
        np.subtract(np_hi, np_lo, out=np_lo)
        np.maximum(np_lo, 0.0, out=np_lo)
        np_lo *= upr
        np_hi -= np.take(np_st, r, out=g, mode="clip")
        del g
        np.maximum(np_hi, 0.0, out=np_hi)
        np_hi *= upr
        if isinstance(rows, slice):
            return np_lo, np_hi
        vol = np.zeros(N)
        since = np.zeros(N)
        vol[rows] = np_lo
        since[rows] = np_hi
        return vol, since

    oil_v, oil_since = stream_volumes(*oil_p)
    gas_v, gas_since = stream_volumes(*gas_p)
    # gas without its own fit: oil x recent GOR
    if gas_by_gor.any():
        gg = gas_by_gor[rep]
        gas_v = np.where(gg, oil_v * gor[rep] / 1000.0, gas_v)
        gas_since = np.where(gg, oil_since * gor[rep] / 1000.0, gas_since)
    # guard: finite (the closed forms are finite for valid parameters)
    for arr in (oil_v, gas_v, oil_since, gas_since):
        bad = ~np.isfinite(arr)
        if bad.any():
            arr[bad] = 0.0
    # the float columns written into one (6, N) block that the frame takes over without a
    # copy (a frame built from separate columns stacks them, a copy of every value)
    vals = np.empty((6, N))
    vals[0] = oil_v
    vals[1] = gas_v
    np.divide(oil_v, days_m, out=vals[2])
    np.divide(gas_v, days_m, out=vals[3])
    np.take(cum_oil, rep, out=vals[4], mode="clip")  # gathered in place, then added
    vals[4] += oil_since
    np.take(cum_gas, rep, out=vals[5], mode="clip")
    vals[5] += gas_since
    del oil_v, gas_v, oil_since, gas_since
    monthly = pd.DataFrame(vals.T, columns=MONTHLY_COLUMNS[3:], copy=False)
    monthly.insert(0, "well_id", pd.array(wells.to_numpy(), dtype="str").take(rep))
    monthly.insert(1, "month", (day_lo_tab * 86_400_000_000_000)[mrow].view("datetime64[ns]"))
    monthly.insert(2, "kind", pd.array(np.full(1, "forecast", dtype=object), dtype="str").take(np.zeros(N, np.intp)))
    return monthly
