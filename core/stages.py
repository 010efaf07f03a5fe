"""Solution-gas-drive stage tracker and waterflood planning status.

Where each well and each reservoir unit stands in the four stages of solution-gas-drive
depletion, read from the monthly producing GOR and whatever pressure surveys exist:

1. p above the bubble point: producing GOR flat at Rsi.
2. p below the bubble point, gas saturation under critical: released gas is immobile and
   the producing GOR (= Rs(p)) dips below Rsi; the stage ends when the GOR climbs back
   above Rsi.
3. gas saturation above critical: free gas flows, GOR rises to a maximum; ends at the peak.
4. after the GOR peak: GOR falls, rates decline to the economic limit.

Stage description: Tarner (1944), Muskat (1945), as presented in T. Ahmed, *Reservoir
Engineering Handbook*, chapter on oil-reservoir performance prediction (see
check-values 5.3).

Method (all series are treated alike: a well, or a unit built from summed volumes):

* Producing months only: oil > 0, gas > 0 and known, days on > 0 and uptime
  (days_on / days_in_month) >= ``MIN_UPTIME``. Shut-ins, gaps and low-uptime months are
  dropped, so the time axis is *producing months*; they cannot create a stage change.
* Work on ln(GOR): field GOR noise is multiplicative. Smoothing: running median
  (``scipy.ndimage.median_filter``, removes isolated spikes such as a workover month)
  followed by a Savitzky-Golay filter (``scipy.signal.savgol_filter``, quadratic, keeps the
  position and height of a peak better than a moving mean).
* Noise level sigma: robust (MAD) scale of the second differences of ln(GOR) divided by
  sqrt(6) (unaffected by a linear trend).
* Bubble-point crossing from GOR: least-squares "hinge" fit (flat, then a straight decline)
  of ln(GOR) over the months before the GOR minimum; the hinge month is the crossing.
  All hinge positions of all series are scored at once from cumulative sums.
* Pressure surveys, when a bubble point is known, override the GOR estimate (rule in
  :func:`crossing_from_surveys`).
* Stage 2 ends at the first producing month from which the smoothed GOR stays above Rsi
  on its way to a confirmed rise (smoothed GOR above Rsi x exp(``RISE_MIN_LOG``) for
  ``RISE_HOLD_MONTHS`` months).
* GOR peak: the maximum of the smoothed GOR after stage 2 ends, searched only in the
  interior of the smoothed series (the last half-window of the Savitzky-Golay filter is an
  extrapolation, several times noisier), *confirmed* only when ``PEAK_HOLD_MONTHS``
  consecutive interior months after it lie below the peak by more than ``PEAK_DROP_K`` x
  the smoothed-noise level (and at least ``PEAK_DROP_MIN_LOG``) and the median raw GOR of
  the latest half-window is not back above the peak. One more month of data therefore
  cannot move the maximum by itself nor un-declare a peak through one noisy month.
* Where the well header gives the PVT (API, gas gravity, temperature, bubble point,
  initial pressure), the GOR history and the pressure surveys are matched against Tarner
  material-balance paths (one recovery factor per well, one Corey set per PVT group) and
  the stage and dates are read from the match (see ``_mb_fit``). For wells the oil rate
  per producing day enters the match too: along the path, at a steady flowing pressure,
  q_o = J (kro / (mu_o Bo)) (p - p_wf) (Fetkovich 1973), so the shape of the rate decline
  against cumulative oil also places the well on its path (one p_wf per PVT group, fitted;
  J free: a level, a slow drift and one step). A well whose rates do not follow that shape
  within their noise is matched on GOR and surveys only, and its evidence says so.

* A reservoir unit's stage is decided from its wells: the stage reached by the wells
  holding a majority of the unit's recent oil (common practice); its summed-volume GOR is
  analysed by the same rules and kept as evidence (see :func:`track_units`).

Everything is vectorised over series: the producing months are packed into a
(series x month) matrix and every step is a numpy/scipy operation on the whole matrix.
"""

from __future__ import annotations

import functools
import itertools
import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.ndimage import median_filter
from scipy.signal import savgol_filter

from core import pvt
from core.material_balance import PvtTable, predict_depletion
from core.relperm import CoreyGasOil
from core.validation import InputError

__all__ = [
    "OIL_FLUID_TYPES",
    "PLANNING_RULES",
    "PLANNING_STATUSES",
    "crossing_from_surveys",
    "planning_status",
    "track_units",
    "unit_monthly",
    "track_wells",
]

# ----------------------------------------------------------------------------------------
# Constants (tuned on synthetic wells, see scripts/stage_accuracy.py; common practice)
# ----------------------------------------------------------------------------------------
#: Fluid types the four-stage picture applies to (McCain's oils plus heavy oil).
OIL_FLUID_TYPES = ("black_oil", "volatile_oil", "heavy_oil")
#: Fluid types that are recognised but never forced into four stages.
NOT_OIL_FLUID_TYPES = ("gas_condensate", "wet_gas", "dry_gas", "bitumen")
#: Fewer producing months with a GOR than this: "too little history".
MIN_GOR_MONTHS = 6
#: Months with uptime (days_on / days_in_month) below this are left out of the GOR series.
MIN_UPTIME = 0.3
#: An early GOR plateau this long (producing months) gives Rsi directly.
MIN_PLATEAU_MONTHS = 6
#: Running-median window (months) and Savitzky-Golay windows by noise level.
MEDIAN_WINDOW = 5
SAVGOL_WINDOW_LOW_NOISE = 9
SAVGOL_WINDOW_HIGH_NOISE = 13
#: Noise (sigma of ln GOR) above which the long Savitzky-Golay window is used.
HIGH_NOISE_SIGMA = 0.09
#: Ratio of the smoothed-series noise to the raw noise for the median 5 + SG filter,
#: measured by Monte Carlo on white noise (own measurement, see readme).
SMOOTH_NOISE_FACTOR = {SAVGOL_WINDOW_LOW_NOISE: 0.42, SAVGOL_WINDOW_HIGH_NOISE: 0.35}
#: Default noise when a series is too short to measure it.
DEFAULT_SIGMA = 0.10
#: Dip (stage 2) significance: hinge slope t-statistic and minimum fitted drop in ln GOR.
DIP_T_MIN = 5.0
DIP_DROP_MIN_LOG = 0.03
DIP_DROP_K = 2.0
#: Rise (stage 3) confirmation: smoothed ln GOR above ln Rsi by this much (and K sigma) ...
RISE_MIN_LOG = math.log(1.15)
RISE_K = 4.0
#: ... for this many consecutive producing months.
RISE_HOLD_MONTHS = 3
#: A GOR rise this far above Rsi counts as stage 3 even without other crossing evidence.
UNEXPLAINED_RISE_LOG = math.log(1.5)
#: GOR peak confirmation (see module docstring).
PEAK_HOLD_MONTHS = 4
PEAK_DROP_K = 3.0
PEAK_DROP_MIN_LOG = math.log(1.05)
#: Peak must stand this far above Rsi to be a stage-3 peak at all.
PEAK_MIN_ABOVE_RSI_LOG = math.log(1.25)
#: Surveys below Pb used for the back-extrapolated trend when only one point lies above.
BELOW_TREND_POINTS = 3
#: Analogue wells needed to estimate months to the GOR peak.
MIN_ANALOGUES = 3
#: Window of "recent" oil for the unit stage (months up to and including the as-of month).
UNIT_RECENT_MONTHS = 12
#: Stage names used in the unit evidence.
_STAGE_EVENT = {2: "bubble-point crossing", 3: "GOR rise above Rsi", 4: "GOR peak"}

#: Months since a later regime began (stage 3: the GOR rise above Rsi; stage 4: the GOR peak)
#: before the decline fit starts there rather than at the bubble-point crossing (common
#: practice: about two years of a regime for a defensible Arps fit; the hindcast of
#: ``scripts/fit_window_check.py`` compares this rule with fitting from the bubble point).
REGIME_MIN_MONTHS = 24

PLANNING_STATUSES = ("window_ahead", "window_open", "window_closing", "window_passed", "not_applicable")

#: Rule text per planning status (sources: check-values section 8).
PLANNING_RULES = {
    "window_ahead": (
        "Stage 1, pressure above the bubble point: no free gas yet; plan the pressure-"
        "maintenance project now so it can start near the bubble point. Event: first "
        "production. [common practice]"
    ),
    "window_open": (
        "Stage 2, below the bubble point with free gas still immobile (GOR below Rsi): "
        "a small free-gas saturation at flood start can lower residual oil (Holmgren & "
        "Morse 1951, Trans. AIME 192) and combined recovery peaks at a gas saturation "
        "above zero (Land & Carlson, USBM RI 7911); fill-up volume is still small (Craig "
        "1971, SPE Monograph 3, from memory). Event: bubble-point crossing."
    ),
    "window_closing": (
        "Stage 3, free gas flowing and GOR rising to its peak: reservoir gas energy is "
        "being produced, fill-up volume and oil viscosity grow, so the flood response "
        "comes later and smaller the longer it waits (Craig 1971, SPE Monograph 3, from "
        "memory; the closing of the window past critical gas saturation is common "
        "practice). Event: GOR back above Rsi (end of stage 2)."
    ),
    "window_passed": (
        "Stage 4, after the GOR peak: gas energy largely spent, large fill-up volume, "
        "gas-stripped viscous oil; a flood now is late (Craig 1971, SPE Monograph 3, "
        "from memory; common practice). Event: GOR peak."
    ),
    "not_applicable": "No solution-gas-drive stage (see stage_reason).",
}
_STAGE_TO_STATUS = {1: "window_ahead", 2: "window_open", 3: "window_closing", 4: "window_passed"}

_EPOCH_MONTH = 1970 * 12

WELL_COLUMNS = [
    "well_id", "stage", "stage_reason", "stage_confidence", "rsi_scf_stb", "bubble_point_psia",
    "bubble_point_date", "stage2_end_date", "gor_peak_date", "gor_peak_scf_stb",
    "passed_gor_peak", "planning_status", "planning_rule", "months_since_event",
    "months_to_gor_peak_est", "regime_start", "stage_evidence",
]


# ----------------------------------------------------------------------------------------
# Small helpers
# ----------------------------------------------------------------------------------------
def _month_index(months: pd.Series) -> np.ndarray:
    m = pd.to_datetime(months)
    return (m.dt.year.to_numpy() * 12 + m.dt.month.to_numpy() - 1).astype(np.int64)


def _index_to_month(mi: np.ndarray) -> np.ndarray:
    """Integer month index (year*12 + month-1, may be float NaN) to datetime64[ns]."""
    mi = np.asarray(mi, dtype=float)
    out = np.full(mi.shape, np.datetime64("NaT"), dtype="datetime64[ns]")
    ok = np.isfinite(mi)
    out[ok] = (mi[ok].astype(np.int64) - _EPOCH_MONTH).astype("datetime64[M]").astype("datetime64[ns]")
    return out


def _fmt_month(mi: float) -> str:
    if not np.isfinite(mi):
        return "n/a"
    mi = int(mi)
    return f"{mi // 12:04d}-{mi % 12 + 1:02d}"


def _ffill_rows(a: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """Forward-fill along axis 1 where ``valid`` is False (rows are left-aligned)."""
    idx = np.where(valid, np.arange(a.shape[1])[None, :], 0)
    np.maximum.accumulate(idx, axis=1, out=idx)
    return a[np.arange(a.shape[0])[:, None], idx]


def _run_length_forward(b: np.ndarray) -> np.ndarray:
    """Number of consecutive True values starting at each position (along axis 1)."""
    out = np.zeros(b.shape, dtype=np.int32)
    run = np.zeros(b.shape[0], dtype=np.int32)
    for j in range(b.shape[1] - 1, -1, -1):
        run = np.where(b[:, j], run + 1, 0)
        out[:, j] = run
    return out


def _first_true(b: np.ndarray) -> np.ndarray:
    """Index of the first True along axis 1, -1 when none."""
    has = b.any(axis=1)
    return np.where(has, b.argmax(axis=1), -1)


def _pvt_where_defined(func, x, gamma_g, api, t_f):
    """``func(x, api=, gamma_g=, t_f=)`` where every input is finite and ``x > 0``; NaN elsewhere.

    Correlation range warnings are not repeated per well here: the stage evidence names the
    source of Rsi and Pb instead.
    """
    x = np.asarray(x, float)
    out = np.full(x.shape, np.nan)
    ok = np.isfinite(x) & np.isfinite(gamma_g) & np.isfinite(api) & np.isfinite(t_f) & (x > 0)
    if ok.any():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                out[ok] = np.asarray(func(x[ok], api=api[ok], gamma_g=gamma_g[ok], t_f=t_f[ok]), float)
            except (TypeError, ValueError):
                out[ok] = np.nan
    return out


def _standing_bubble_point(rsi, gamma_g, api, t_f):
    """Bubble point from Rsi by Standing (1947), ``core.pvt.bubble_point_standing``. [psia]"""
    return _pvt_where_defined(pvt.bubble_point_standing, rsi, gamma_g, api, t_f)


def _standing_rs(p, gamma_g, api, t_f):
    """Solution GOR at ``p`` by Standing (1947), ``core.pvt.rs_standing``. [scf/STB]"""
    return _pvt_where_defined(pvt.rs_standing, p, gamma_g, api, t_f)


# ----------------------------------------------------------------------------------------
# Pressure surveys
# ----------------------------------------------------------------------------------------
def crossing_from_surveys(
    surveys: pd.DataFrame,
    bubble_point_psia: pd.Series,
    initial_pressure_psia: pd.Series | None = None,
) -> pd.DataFrame:
    """Depletion at which each series crosses its bubble point, from pressure surveys.

    Parameters
    ----------
    surveys : DataFrame
        Columns ``sid`` (series id), ``x`` (depletion at the survey: cumulative oil at the
        middle of the survey month [bbl]; any increasing depletion measure works, e.g. time
        when volumes are unknown) and ``p`` (survey pressure [psia]).
    bubble_point_psia : Series
        Bubble point per ``sid``. [psia]
    initial_pressure_psia : Series, optional
        Initial pressure per ``sid`` (a survey at ``x = 0``), NaN where unknown. [psia]

    Returns
    -------
    DataFrame indexed by ``sid``: ``x_cross`` (NaN when the surveys do not place it),
    ``cross_rule`` (text), ``x_last_above`` (last survey above Pb before any survey below
    it), ``x_first_below``, ``n_above`` (points used for the trend).

    Notes
    -----
    Above the bubble point a volumetric reservoir depletes along
    Np/N = Boi ce (pi - p) / Bo (check-values 5.1, Ahmed's handbook), so pressure is close
    to linear in cumulative oil, whatever the rate history (shut-ins and workovers do not
    bend it). Rules, in order:

    1. Trend: the points above Pb before the first survey below it (and the initial
       pressure at x = 0 when given) are fitted by least squares, p = a + b x (two or more
       points, b < 0); x* solves a + b x* = Pb.
       - a survey below Pb exists: x* is clipped into [last above, first below];
       - no survey below Pb: forward extrapolation is accepted only over at most the span
         of the fitted points (x* <= x_last + (x_last - x_first)); the caller also checks
         that x* has been produced (common practice: never extrapolate further than the
         data reach).
    2. One point above Pb and two or more below: the least-squares trend of the first
       ``BELOW_TREND_POINTS`` surveys below Pb is extrapolated back to Pb and clipped into
       the bracket (pressure falls far more slowly per barrel below Pb, so a straight line
       across the bracket would date the crossing late).
    3. One point above and one below: linear interpolation in x between them.
    4. First survey already below Pb and no point above: only an upper bound
       (``x_first_below``); ``x_cross`` stays NaN.
    """
    cols = ["x_cross", "cross_rule", "x_last_above", "x_first_below", "n_above"]
    s = surveys[["sid", "x", "p"]].copy()
    s["pb"] = s["sid"].map(bubble_point_psia)
    if initial_pressure_psia is not None:
        ini = pd.DataFrame({"sid": initial_pressure_psia.index, "x": 0.0,
                            "p": initial_pressure_psia.to_numpy(float)})
        ini["pb"] = ini["sid"].map(bubble_point_psia)
        ini = ini[np.isfinite(ini["p"].to_numpy(float)) & (ini["p"] > ini["pb"])]
        ini = ini[ini["sid"].isin(s["sid"])]
        s = pd.concat([ini, s], ignore_index=True)
    ok = np.isfinite(s["pb"].to_numpy(float)) & np.isfinite(s["p"].to_numpy(float)) & np.isfinite(
        s["x"].to_numpy(float))
    s = s[ok].sort_values(["sid", "x"], kind="stable").reset_index(drop=True)
    sids = pd.Index(pd.unique(s["sid"]), name="sid")
    res = pd.DataFrame({"x_cross": np.nan, "cross_rule": "", "x_last_above": np.nan,
                        "x_first_below": np.nan, "n_above": 0}, index=sids)[cols]
    if s.empty:
        return res
    sid = s["sid"].to_numpy()
    x, p, pb = s["x"].to_numpy(float), s["p"].to_numpy(float), s["pb"].to_numpy(float)
    above = p > pb
    below_count = pd.Series(~above).groupby(sid).cumsum().to_numpy()
    use = above & (below_count == 0)
    first_below = (~above) & (below_count == 1)
    g = pd.DataFrame({"sid": sid, "use": use, "x": np.where(use, x, np.nan), "p": np.where(use, p, np.nan)})
    g["xx"], g["xp"] = g["x"] ** 2, g["x"] * g["p"]
    agg = g.groupby("sid", sort=False).agg(n=("use", "sum"), sx=("x", "sum"), sp=("p", "sum"),
                                          sxx=("xx", "sum"), sxp=("xp", "sum"),
                                          xmin=("x", "min"), xmax=("x", "max")).reindex(sids)
    fb = pd.Series(x[first_below], index=sid[first_below]).reindex(sids).to_numpy(float)
    pfb = pd.Series(p[first_below], index=sid[first_below]).reindex(sids).to_numpy(float)
    pbs = bubble_point_psia.reindex(sids).to_numpy(float)
    n = agg["n"].to_numpy(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        den = n * agg["sxx"].to_numpy() - agg["sx"].to_numpy() ** 2
        b = (n * agg["sxp"].to_numpy() - agg["sx"].to_numpy() * agg["sp"].to_numpy()) / den
        a = (agg["sp"].to_numpy() - b * agg["sx"].to_numpy()) / n
        x_tr = (pbs - a) / b
    xla, xfirst = agg["xmax"].to_numpy(float), agg["xmin"].to_numpy(float)
    # the pressure of the last point above, for rule 2
    pla = pd.Series(np.where(use, p, np.nan)).groupby(sid).last().reindex(sids).to_numpy(float)
    trend_ok = (n >= 2) & (den > 0) & (b < 0) & np.isfinite(x_tr)
    x_cross = np.full(len(sids), np.nan)
    rule = np.full(len(sids), "", dtype=object)
    br = trend_ok & np.isfinite(fb)
    x_cross[br] = np.clip(x_tr[br], xla[br], fb[br])
    rule[br] = (f"pressure surveys: least-squares trend of the {'{n}'} points above Pb (p linear in "
                "cumulative oil), clipped into the bracket of the first survey below Pb")
    fw = trend_ok & ~np.isfinite(fb) & (x_tr <= xla + (xla - xfirst))
    x_cross[fw] = x_tr[fw]
    rule[fw] = ("pressure surveys: least-squares trend of the {n} points above Pb, extrapolated "
                "forward by at most the span of the fitted points")
    # below-Pb trend of the first surveys below (up to BELOW_TREND_POINTS), back to Pb
    bel = (~above) & (below_count <= BELOW_TREND_POINTS)
    h = pd.DataFrame({"x": np.where(bel, x, np.nan), "p": np.where(bel, p, np.nan)})
    h["xx"], h["xp"], h["n"] = h["x"] ** 2, h["x"] * h["p"], bel.astype(float)
    hb = h.groupby(sid, sort=False).sum(min_count=1).reindex(sids)
    nb = hb["n"].fillna(0).to_numpy(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        denb = nb * hb["xx"].to_numpy(float) - hb["x"].to_numpy(float) ** 2
        bb = (nb * hb["xp"].to_numpy(float) - hb["x"].to_numpy(float) * hb["p"].to_numpy(float)) / denb
        ab = (hb["p"].to_numpy(float) - bb * hb["x"].to_numpy(float)) / nb
        x_bt = (pbs - ab) / bb
    back = ~trend_ok & (n >= 1) & np.isfinite(fb) & (nb >= 2) & (denb > 0) & (bb < 0) & np.isfinite(x_bt)
    x_cross[back] = np.clip(x_bt[back], xla[back], fb[back])
    rule[back] = ("pressure surveys: trend of the first surveys below Pb extrapolated back to Pb, "
                  "clipped into the bracket of the last survey above")
    lin = ~trend_ok & ~back & (n >= 1) & np.isfinite(fb)
    with np.errstate(divide="ignore", invalid="ignore"):
        x_lin = xla + (pla - pbs) / (pla - pfb) * (fb - xla)
    x_cross[lin] = x_lin[lin]
    rule[lin] = "pressure surveys: linear interpolation in cumulative oil between the last survey above Pb and the first below"
    res["x_cross"] = x_cross
    res["cross_rule"] = [r.replace("{n}", str(int(k))) for r, k in zip(rule, n)]
    res["x_last_above"] = xla
    res["x_first_below"] = fb
    res["n_above"] = n.astype(int)
    return res


# ----------------------------------------------------------------------------------------
# The series engine
# ----------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _SeriesInput:
    """Long table of producing months plus per-series attributes (internal)."""

    months: pd.DataFrame  # sid, mi, z (ln GOR)
    surveys: pd.DataFrame  # sid, mi, p
    attrs: pd.DataFrame  # index sid: pb_given, api, gamma_g, t_f, pi, first_mi, last_mi, applicable, reason


def _prepare(production: pd.DataFrame, sid_col: str):
    """Producing-month ln GOR table, survey table, per-series counts and cumulative oil.

    Fast path (one sort, numpy only) when every (series, month) is unique, as the tidy
    monthly table guarantees; otherwise the grouped path sums duplicates.
    """
    prod = production
    mi = _month_index(prod["month"])
    sid = prod[sid_col].to_numpy()
    order = np.lexsort((mi, sid))
    sid_s, mi_s = sid[order], mi[order]
    dup = (sid_s[1:] == sid_s[:-1]) & (mi_s[1:] == mi_s[:-1])
    if dup.any():
        return _prepare_grouped(production, sid_col)

    def col(name, default=np.nan):
        if name in prod:
            return pd.to_numeric(prod[name], errors="coerce").to_numpy(float)[order]
        return np.full(len(prod), default)

    oil, gas = col("oil_bbl"), col("gas_mcf")
    dim = col("days_in_month") if "days_in_month" in prod else pd.to_datetime(
        prod["month"]).dt.days_in_month.to_numpy(float)[order]
    days = col("days_on") if "days_on" in prod else dim.copy()
    days = np.where(np.isfinite(days), days, dim)
    with np.errstate(divide="ignore", invalid="ignore"):
        uptime = days / dim
        gor = 1000.0 * gas / oil
    good = (oil > 0) & np.isfinite(gas) & (gas > 0) & (days > 0) & (uptime >= MIN_UPTIME) & np.isfinite(gor)
    oil0 = np.where(np.isfinite(oil) & (oil > 0), oil, 0.0)
    n = len(sid_s)
    new = np.r_[True, sid_s[1:] != sid_s[:-1]] if n else np.zeros(0, bool)
    starts = np.flatnonzero(new)
    csum = np.cumsum(oil0)
    base = np.repeat(csum[starts] - oil0[starts], np.diff(np.r_[starts, n]))
    cum_end = csum - base
    months = pd.DataFrame({"sid": sid_s[good], "mi": mi_s[good], "z": np.log(gor[good]),
                           "xs": (cum_end - oil0)[good], "xe": cum_end[good], "dy": days[good]})
    p = col("pressure_psia")
    okp = np.isfinite(p) & (p > 0)
    surveys = pd.DataFrame({"sid": sid_s[okp], "mi": mi_s[okp], "p": p[okp], "x": (cum_end - 0.5 * oil0)[okp]})
    ends = np.r_[starts[1:], n] - 1 if n else np.zeros(0, np.int64)
    gas_known = np.logical_or.reduceat(np.isfinite(gas), starts) if n else np.zeros(0, bool)
    n_gor = np.add.reduceat(good.astype(np.int64), starts) if n else np.zeros(0, np.int64)
    counts = pd.DataFrame({"first_mi": mi_s[starts], "last_mi": mi_s[ends], "gas_known": gas_known,
                           "n_gor": n_gor}, index=pd.Index(sid_s[starts], name="sid"))
    cumtab = pd.DataFrame({"sid": sid_s, "mi": mi_s, "cum_end": cum_end})
    return months, surveys, counts, cumtab


def _prepare_grouped(production: pd.DataFrame, sid_col: str):
    """:func:`_prepare` for tables with repeated (series, month) rows (volumes summed)."""
    prod = production
    mi = _month_index(prod["month"])
    oil = pd.to_numeric(prod["oil_bbl"], errors="coerce").to_numpy(float) if "oil_bbl" in prod else np.full(len(prod), np.nan)
    gas = (pd.to_numeric(prod["gas_mcf"], errors="coerce").to_numpy(float)
           if "gas_mcf" in prod else np.full(len(prod), np.nan))
    if "days_in_month" in prod:
        dim = pd.to_numeric(prod["days_in_month"], errors="coerce").to_numpy(float)
    else:
        dim = pd.to_datetime(prod["month"]).dt.days_in_month.to_numpy(float)
    days = (pd.to_numeric(prod["days_on"], errors="coerce").to_numpy(float)
            if "days_on" in prod else dim.copy())
    days = np.where(np.isfinite(days), days, dim)
    sid = prod[sid_col].to_numpy()
    with np.errstate(divide="ignore", invalid="ignore"):
        uptime = days / dim
        gor = 1000.0 * gas / oil
    good = (oil > 0) & np.isfinite(gas) & (gas > 0) & (days > 0) & (uptime >= MIN_UPTIME) & np.isfinite(gor)
    months = pd.DataFrame({"sid": sid[good], "mi": mi[good], "z": np.log(gor[good])})
    months = months.sort_values(["sid", "mi"], kind="stable")
    # several rows of one series in one month (unit tables are pre-summed; wells are unique)
    months = months.groupby(["sid", "mi"], sort=True, as_index=False)["z"].mean()
    # cumulative oil per series and month (all rows: shut-ins add nothing)
    oil0 = np.where(np.isfinite(oil) & (oil > 0), oil, 0.0)
    cum = pd.DataFrame({"sid": sid, "mi": mi, "oil": oil0}).groupby(["sid", "mi"], sort=True, as_index=False)["oil"].sum()
    cum["cum_end"] = cum.groupby("sid", sort=False)["oil"].cumsum()
    cum["x_mid"] = cum["cum_end"] - 0.5 * cum["oil"]
    if "pressure_psia" in prod:
        p = pd.to_numeric(prod["pressure_psia"], errors="coerce").to_numpy(float)
        okp = np.isfinite(p) & (p > 0)
        surveys = pd.DataFrame({"sid": sid[okp], "mi": mi[okp], "p": p[okp]})
        surveys = surveys.groupby(["sid", "mi"], sort=True, as_index=False)["p"].median()
    else:
        surveys = pd.DataFrame({"sid": pd.Series([], dtype=object), "mi": pd.Series([], dtype=np.int64),
                                "p": pd.Series([], dtype=float)})
    surveys = surveys.merge(cum[["sid", "mi", "x_mid"]], on=["sid", "mi"], how="left").rename(columns={"x_mid": "x"})
    info = pd.DataFrame({"sid": sid, "mi": mi, "gas_known": np.isfinite(gas)})
    g = info.groupby("sid", sort=True)
    counts = pd.DataFrame({
        "first_mi": g["mi"].min(),
        "last_mi": g["mi"].max(),
        "gas_known": g["gas_known"].any(),
    })
    counts["n_gor"] = months.groupby("sid").size().reindex(counts.index).fillna(0).astype(int)
    months = months.merge(cum[["sid", "mi", "cum_end", "oil"]], on=["sid", "mi"], how="left")
    months["xs"] = months["cum_end"] - months["oil"]
    months = months.rename(columns={"cum_end": "xe"}).drop(columns="oil")
    return months, surveys, counts, cum[["sid", "mi", "cum_end"]]


def _analyse(months: pd.DataFrame, surveys: pd.DataFrame, cumtab: pd.DataFrame, attrs: pd.DataFrame,
             as_of: int, mb_fit: bool = True, rate_term: bool = False) -> pd.DataFrame:
    """Stage analysis of every applicable series; returns one row per series in ``attrs``.

    ``attrs`` index sid; columns pb_given, api, gamma_g, t_f, pi, first_mi, applicable.
    """
    res = pd.DataFrame(index=attrs.index)
    for c in ("stage", "rsi", "pb", "bp_mi", "s2_mi", "pk_mi", "pk_gor", "sigma", "n_gor",
              "plateau_n", "dip_t", "last_mi_gor", "n_surveys", "last_gor", "peak_cand_mi"):
        res[c] = np.nan
    res["passed"] = False
    res["mb_ok"] = False
    res["mb_straddle"] = False
    res["odd_note"] = ""
    for c in ("rsi_src", "pb_src", "bp_src", "peak_note", "mb_note"):
        res[c] = ""
    app = attrs.index[attrs["applicable"].to_numpy(bool)]
    m = months[months["sid"].isin(app)]
    if m.empty:
        return res
    sids = pd.Index(pd.unique(m["sid"]))
    code = sids.get_indexer(m["sid"])
    pos = m.groupby("sid", sort=False).cumcount().to_numpy()
    n_i = np.bincount(code, minlength=len(sids))
    ns, L = len(sids), int(n_i.max())
    Z = np.full((ns, L), np.nan)
    MI = np.full((ns, L), np.nan)
    Z[code, pos] = m["z"].to_numpy(float)
    MI[code, pos] = m["mi"].to_numpy(float)
    XS = np.full((ns, L), np.nan)
    XE = np.full((ns, L), np.nan)
    XS[code, pos] = m["xs"].to_numpy(float)
    XE[code, pos] = m["xe"].to_numpy(float)
    J = np.arange(L)[None, :]
    V = J < n_i[:, None]
    Zf = _ffill_rows(Z, V)

    # noise: MAD of second differences / sqrt(6)
    if L >= 3:
        d2 = Z[:, 2:] - 2.0 * Z[:, 1:-1] + Z[:, :-2]
        with np.errstate(all="ignore"):

            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                sigma = 1.4826 * np.nanmedian(np.abs(d2), axis=1) / math.sqrt(6.0)
    else:
        sigma = np.full(ns, np.nan)
    sigma = np.where(np.isfinite(sigma) & (n_i >= 8), sigma, DEFAULT_SIGMA)
    sigma = np.maximum(sigma, 0.005)

    # smoothing: running median then Savitzky-Golay (quadratic); window by noise level
    med = median_filter(Zf, size=(1, min(MEDIAN_WINDOW, L)), mode="nearest") if L >= 3 else Zf.copy()
    S = med.copy()
    hi = sigma > HIGH_NOISE_SIGMA
    for w, rows in ((SAVGOL_WINDOW_LOW_NOISE, ~hi), (SAVGOL_WINDOW_HIGH_NOISE, hi)):
        if not rows.any():
            continue
        ww = min(w, L if L % 2 == 1 else L - 1)
        if ww >= 5:
            S[rows] = savgol_filter(med[rows], ww, 2, axis=1, mode="nearest")
    fac = np.where(hi, SMOOTH_NOISE_FACTOR[SAVGOL_WINDOW_HIGH_NOISE], SMOOTH_NOISE_FACTOR[SAVGOL_WINDOW_LOW_NOISE])
    sig_s = sigma * fac
    S = np.where(V, S, np.nan)

    # initial Rsi guess: median of the first months
    early = np.where(J < np.minimum(MIN_PLATEAU_MONTHS, n_i)[:, None], Z, np.nan)
    r0 = np.nanmedian(early, axis=1)

    def rise_index(r: np.ndarray) -> np.ndarray:
        thr = r + np.maximum(RISE_MIN_LOG, RISE_K * sig_s)
        b = (S > thr[:, None]) & V
        run = _run_length_forward(b)
        return _first_true((run >= RISE_HOLD_MONTHS) & V)

    jr = rise_index(r0)
    # dip window end: minimum of the smoothed GOR before the rise (or over the whole history)
    Smask = np.where(V & ((jr[:, None] < 0) | (J <= jr[:, None])), S, np.inf)
    E = np.argmin(Smask, axis=1)

    # hinge fit on raw ln GOR over [0, E]: flat, then linear decline from index k
    W = V & (J <= E[:, None])
    Zw = np.where(W, Z, 0.0)
    C = np.cumsum(Zw, axis=1)
    C2 = np.cumsum(Zw * Zw, axis=1)
    T1 = np.cumsum(Zw * J, axis=1)
    rows = np.arange(ns)
    Sy, Syy, T1E = C[rows, E], C2[rows, E], T1[rows, E]
    nE = (E + 1).astype(float)
    Cprev = np.concatenate([np.zeros((ns, 1)), C[:, :-1]], axis=1)
    Tprev = np.concatenate([np.zeros((ns, 1)), T1[:, :-1]], axis=1)
    k = J.astype(float)
    mk = (E[:, None] - J + 1).astype(float)
    Sx = mk * (mk - 1) / 2.0
    Sxx = (mk - 1) * mk * (2 * mk - 1) / 6.0
    Sxy = (T1E[:, None] - Tprev) - k * (Sy[:, None] - Cprev)
    cov = Sxy - Sx * Sy[:, None] / nE[:, None]
    var = Sxx - Sx * Sx / nE[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = cov / var
        sse = (Syy - Sy * Sy / nE)[:, None] - cov * cov / var
    okk = (mk >= 3) & (var > 0) & (slope < 0) & (J <= E[:, None])
    sse = np.where(okk, sse, np.inf)
    kbest = np.argmin(sse, axis=1)
    has_h = np.isfinite(sse[rows, kbest]) & (E >= 4)
    c_b = slope[rows, kbest]
    with np.errstate(divide="ignore", invalid="ignore"):
        s_res = np.sqrt(np.maximum(sse[rows, kbest], 0.0) / np.maximum(nE - 3.0, 1.0))
        s_res = np.maximum(s_res, 0.5 * sigma)
        t_dip = -c_b / (s_res / np.sqrt(var[rows, kbest]))
    drop = -c_b * (E - kbest)
    dip_sig = has_h & (t_dip > DIP_T_MIN) & (drop > np.maximum(DIP_DROP_MIN_LOG, DIP_DROP_K * sig_s))
    # after a confirmed rise the dip is accepted on weaker evidence (the crossing is certain)
    dip_use = dip_sig | (has_h & (jr >= 0) & (t_dip > 2.0))

    plateau_end = np.where(dip_use, kbest, np.where(jr >= 0, jr, n_i))
    plateau_end = np.maximum(plateau_end, 0)
    pl = np.where(J < np.maximum(plateau_end, 1)[:, None], Z, np.nan)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        rsi_gor = np.nanmedian(pl, axis=1)

    a = attrs.reindex(sids)
    rsi_pvt = _standing_rs(a["pb_given"].to_numpy(float), a["gamma_g"].to_numpy(float),
                           a["api"].to_numpy(float), a["t_f"].to_numpy(float))
    long_plateau = plateau_end >= MIN_PLATEAU_MONTHS
    use_pvt = ~long_plateau & np.isfinite(rsi_pvt)
    ln_rsi = np.where(use_pvt, np.log(np.where(use_pvt, rsi_pvt, 1.0)), rsi_gor)
    rsi_src = np.where(
        long_plateau,
        [f"median GOR of the {int(x)}-month early plateau" for x in plateau_end],
        np.where(use_pvt, "Standing (1947) Rs at the given bubble point (GOR plateau too short)",
                 "median of the first producing months (short plateau, low confidence)"),
    )

    # bubble point pressure: given, else Standing from Rsi
    pb = a["pb_given"].to_numpy(float)
    pb_src = np.where(np.isfinite(pb), "given", "")
    pb_corr = _standing_bubble_point(np.exp(ln_rsi), a["gamma_g"].to_numpy(float),
                                     a["api"].to_numpy(float), a["t_f"].to_numpy(float))
    use_corr = ~np.isfinite(pb) & np.isfinite(pb_corr)
    pb = np.where(use_corr, pb_corr, pb)
    pb_src = np.where(use_corr, "Standing (1947) correlation from Rsi, API, gas gravity, temperature", pb_src)

    # second pass with the final Rsi
    jr = rise_index(ln_rsi)
    has_rise = jr >= 0
    # stage 2 end: last month at or below Rsi before the rise, + 1 (back-dated crossing)
    below = V & (S <= ln_rsi[:, None]) & (J < np.where(has_rise, jr, 0)[:, None])
    last_below = np.where(below.any(axis=1), L - 1 - np.argmax(below[:, ::-1], axis=1), -1)
    j2 = np.where(has_rise, np.maximum(last_below + 1, 0), -1)
    j2 = np.where(has_rise, np.minimum(j2, jr), -1)

    # GOR peak after stage 2 end. Only the interior of the smoothed series is searched: the
    # last half-window of a Savitzky-Golay filter is an extrapolation whose noise is several
    # times the interior's, so one noisy last month would otherwise move the maximum (and
    # un-declare a confirmed peak when one more month of data arrives).
    half = np.where(hi, SAVGOL_WINDOW_HIGH_NOISE // 2, SAVGOL_WINDOW_LOW_NOISE // 2)
    interior = V & (J <= (n_i - 1 - half)[:, None])
    after2 = V & (J >= np.maximum(j2, 0)[:, None]) & has_rise[:, None]
    Sp = np.where(after2 & interior, S, -np.inf)
    jp = np.argmax(Sp, axis=1)
    s_pk = S[rows, np.minimum(jp, L - 1)]
    drop_thr = np.maximum(PEAK_DROP_MIN_LOG, PEAK_DROP_K * sig_s)
    # sustained decline: PEAK_HOLD_MONTHS consecutive interior smoothed months after the
    # maximum, each below it by more than drop_thr ...
    below_pk = interior & (J > jp[:, None]) & (S < (s_pk - drop_thr)[:, None])
    down = (_run_length_forward(below_pk) >= PEAK_HOLD_MONTHS).any(axis=1)
    # ... and the raw GOR of the latest months (median, robust to a spike) not back above it
    tail = V & (J >= (n_i - 1 - half)[:, None])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        z_tail = np.nanmedian(np.where(tail, Z, np.nan), axis=1)
    down &= z_tail < s_pk
    peak_ok = (has_rise & np.isfinite(Sp[rows, jp]) & down
               & (s_pk > ln_rsi + PEAK_MIN_ABOVE_RSI_LOG))
    # refine the peak month: vertex of a quadratic through the smoothed values around it
    jm, jpp = np.clip(jp - 1, 0, L - 1), np.clip(jp + 1, 0, L - 1)
    y0, y1, y2 = S[rows, jm], S[rows, jp], S[rows, jpp]
    den = y0 - 2 * y1 + y2
    with np.errstate(divide="ignore", invalid="ignore"):
        off = np.where((den < 0) & (jp > 0) & (jp < n_i - 1), 0.5 * (y0 - y2) / den, 0.0)
    off = np.clip(np.nan_to_num(off), -0.5, 0.5)
    mi_at = lambda j: MI[rows, np.clip(j, 0, L - 1)]  # noqa: E731
    pk_mi = np.where(peak_ok, np.round(mi_at(jp) + off), np.nan)

    # bubble point from GOR: the hinge month
    bp_gor = np.where(dip_use, mi_at(kbest), np.nan)
    # a well that shows a rise but no usable hinge: crossing before the stage-2 end, unknown
    bp_mi = bp_gor.copy()
    bp_src = np.where(dip_use, np.where(dip_sig, "GOR leaves its plateau downward (hinge fit)",
                                        "GOR hinge fit (weak dip, crossing implied by the GOR rise)"), "")
    bp_src = bp_src.astype(object)

    # material-balance shape fit where the PVT header is complete
    mb_ok = np.zeros(ns, bool)
    straddle = np.zeros(ns, bool)
    mb_stage = np.full(ns, np.nan)
    mb = None
    hdr = np.column_stack([a["api"].to_numpy(float), a["gamma_g"].to_numpy(float), a["t_f"].to_numpy(float),
                           pb, a["pi"].to_numpy(float)])
    hdr_ok = np.isfinite(hdr).all(axis=1) & (n_i >= MIN_GOR_MONTHS)
    if mb_fit and hdr_ok.any():
        cum_now = cumtab.groupby("sid")["cum_end"].max().reindex(sids).to_numpy(float)
        hdr_ok &= np.isfinite(cum_now) & (cum_now > 0)
        # blocks of consecutive producing months (block GOR = summed gas / summed oil)
        k_i = np.maximum(np.ceil(n_i / MB_MAX_BLOCKS), 1).astype(int)
        blk = (J // k_i[:, None])
        oil_m = np.where(V, XE - XS, 0.0)
        gas_m = oil_m * np.exp(np.where(V, Z, 0.0))
        nb = MB_MAX_BLOCKS
        Bo = np.zeros((ns, nb)); Bg = np.zeros((ns, nb)); Bn = np.zeros((ns, nb))
        Bs = np.full((ns, nb), np.inf); Be = np.full((ns, nb), -np.inf)
        rr = np.broadcast_to(rows[:, None], V.shape)[V]
        bb = blk[V]
        np.add.at(Bo, (rr, bb), oil_m[V]); np.add.at(Bg, (rr, bb), gas_m[V]); np.add.at(Bn, (rr, bb), 1.0)
        np.minimum.at(Bs, (rr, bb), XS[V]); np.maximum.at(Be, (rr, bb), XE[V])
        Bd = np.zeros((ns, nb))
        Bm = np.zeros((ns, nb))
        np.add.at(Bm, (rr, bb), MI[V])
        if "dy" in m:
            DY = np.full((ns, L), np.nan); DY[code, pos] = m["dy"].to_numpy(float)
            np.add.at(Bd, (rr, bb), DY[V])
        BV = (Bn > 0) & (Bo > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            BZ = np.where(BV, np.log(Bg / Bo), np.nan)
            FS = np.where(BV, Bs, 0.0) / cum_now[:, None]
            FE = np.where(BV, Be, 0.0) / cum_now[:, None]
            BQ = np.where(BV & (Bd > 0), np.log(Bo / Bd), np.nan)
            BT = np.where(BV, Bm / Bn / 12.0, 0.0)
        # PVT groups: header values rounded (MB_GROUP_STEP); the largest MB_MAX_GROUPS groups
        # are matched, wells of other groups keep the GOR-only rules
        step = np.array(MB_GROUP_STEP)
        hr = np.round(np.where(np.isfinite(hdr), hdr, 0.0) / step) * step
        kt = pd.Series([tuple(r) if ok_ else None for r, ok_ in zip(hr.tolist(), hdr_ok)], dtype=object)
        codes, uniq = pd.factorize(kt)
        if len(uniq) > MB_MAX_GROUPS:
            keep = np.argsort(-np.bincount(codes[codes >= 0], minlength=len(uniq)), kind="stable")[:MB_MAX_GROUPS]
            remap = np.full(len(uniq), -1)
            remap[keep] = np.arange(keep.size)
            codes = np.where(codes >= 0, remap[np.maximum(codes, 0)], -1)
            uniq = [uniq[k] for k in keep]
        sv_m = None
        if MB_USE_SURVEYS:
            s_ = surveys[surveys["sid"].isin(sids)]
            s_ = s_[np.isfinite(s_["x"].to_numpy(float))]
            # at most MB_MAX_SURVEYS per well (evenly thinned: keeps the matrices small when a
            # file carries a pressure every month)
            cnt = s_.groupby("sid", sort=False)["p"].transform("size").to_numpy()
            k_th = np.maximum(np.ceil(cnt / MB_MAX_SURVEYS), 1).astype(int)
            s_ = s_[(s_.groupby("sid", sort=False).cumcount().to_numpy() % k_th) == 0]
            sc = sids.get_indexer(s_["sid"])
            spos = s_.groupby("sid", sort=False).cumcount().to_numpy()
            ms = int(spos.max()) + 1 if len(s_) else 0
            PX = np.zeros((ns, ms)); PP = np.zeros((ns, ms)); PV = np.zeros((ns, ms), bool)
            if ms:
                with np.errstate(divide="ignore", invalid="ignore"):
                    PX[sc, spos] = s_["x"].to_numpy(float) / cum_now[sc]
                PP[sc, spos] = s_["p"].to_numpy(float)
                PV[sc, spos] = np.isfinite(PX[sc, spos])
                PX = np.nan_to_num(PX)
            sv_m = (PX, PP, PV)
        mb = _mb_fit(BZ, np.nan_to_num(FS), np.nan_to_num(FE), BV & np.isfinite(FS), Bn, sigma, codes,
                     [tuple(float(v) for v in u) for u in uniq], sv_m,
                     BQ if (MB_RATE_MATCH and rate_term and np.isfinite(BQ).any()) else None, BT)
        mb_ok = mb["ok"] & hdr_ok
        rn = mb["rnow"]
        lo_r = mb["lo"]
        bounds = np.column_stack([mb["r_b"], mb["r_s2"], mb["r_pk"]])
        straddle = ((bounds > lo_r[:, None]) & (bounds < mb["hi"][:, None])).any(axis=1)
        # a stage is declared only when the whole 2-sigma interval of the recovery factor is
        # past its start (the GOR data exclude the earlier stage); the best fit gives the dates
        mb_stage = np.select([lo_r < mb["r_b"], lo_r < mb["r_s2"], mb["lo_pk"] < mb["r_pk"]], [1, 2, 3],
                             default=4).astype(float)
        ncum = pd.Series(cum_now / rn, index=sids)
        mb_bp = _x_to_month(ncum * mb["r_b"], cumtab)
        mb_s2 = _x_to_month(ncum * mb["r_s2"], cumtab)
        mb_pk = _x_to_month(ncum * mb["r_pk"], cumtab)
        bp_pre, bp_src_pre = bp_mi.copy(), bp_src.copy()
        bp_mi = np.where(mb_ok & (mb_stage >= 2), mb_bp, bp_mi)
        bp_src = np.where(mb_ok & (mb_stage >= 2) & np.isfinite(mb_bp), "material-balance GOR match (" + mb["label"].astype(str) + ")",
                          bp_src).astype(object)

    # initial pressure at or below bubble point: crossed before first production
    pi_ = a["pi"].to_numpy(float)
    first_mi = a["first_mi"].to_numpy(float)
    below_init = np.isfinite(pi_) & np.isfinite(pb) & (pi_ <= pb)
    bp_mi = np.where(below_init, first_mi, bp_mi)
    bp_src = np.where(below_init, "initial pressure at or below the bubble point", bp_src).astype(object)

    # pressure surveys (depletion axis: cumulative oil)
    pb_s = pd.Series(pb, index=sids)
    sv = surveys[surveys["sid"].isin(sids)]
    cross = crossing_from_surveys(sv, pb_s, pd.Series(pi_, index=sids)).reindex(sids)
    c_mi = _x_to_month(cross["x_cross"], cumtab)
    rule = cross["cross_rule"].fillna("").to_numpy(object)
    la = _x_to_month(cross["x_last_above"], cumtab)
    fb = _x_to_month(cross["x_first_below"], cumtab)
    has_fb = np.isfinite(cross["x_first_below"].to_numpy(float))
    # a material-balance match that puts the crossing before a survey still above Pb
    # by more than MB_SURVEY_TOL_MONTHS contradicts a direct measurement: the match is dropped
    if mb is not None:
        mb_conflict = mb_ok & (mb_stage >= 2) & np.isfinite(la) & np.isfinite(mb_bp) & (la >= mb_bp + MB_SURVEY_TOL_MONTHS) & ~below_init
        mb_ok = mb_ok & ~mb_conflict
        bp_mi = np.where(mb_conflict, bp_pre, bp_mi)
        bp_src = np.where(mb_conflict, bp_src_pre, bp_src).astype(object)
    else:
        mb_conflict = np.zeros(ns, bool)
    bracket = np.isfinite(c_mi) & has_fb
    forward = np.isfinite(c_mi) & ~has_fb
    # order: initial pressure < Pb  >  bracketed surveys  >  GOR  >  forward extrapolation
    take = ~below_init & (bracket | (forward & ~np.isfinite(bp_mi)))
    # an accepted material-balance date inside the survey bracket is kept (the surveys bound
    # the crossing; the match places it within the bracket)
    mb_in = (take & bracket & mb_ok & (mb_stage >= 2) & np.isfinite(bp_mi) & np.isfinite(la)
             & (bp_mi >= la) & (bp_mi <= fb))
    take = take & ~mb_in
    bp_src = np.where(mb_in, bp_src + "; inside the bracket of the pressure surveys", bp_src).astype(object)
    bp_mi = np.where(take, c_mi, bp_mi)
    bp_src = np.where(take, rule, bp_src).astype(object)
    # first survey already below Pb: crossing no later than that survey
    upper = ~below_init & ~bracket & np.isfinite(fb)
    late = upper & (~np.isfinite(bp_mi) | (bp_mi > fb))
    bp_mi = np.where(late, fb, bp_mi)
    bp_src = np.where(late, "first survey already below Pb (crossing at or before it)", bp_src).astype(object)
    # a GOR dip dated before a survey still above Pb is pushed after that survey
    conflict = ~below_init & ~take & np.isfinite(bp_mi) & np.isfinite(la) & (bp_mi <= la)
    bp_mi = np.where(conflict, la + 1, bp_mi)
    bp_src = np.where(conflict, bp_src + "; moved after the last survey above Pb", bp_src).astype(object)
    # only a pressure signal or a GOR signal dated before the as-of month counts
    bp_mi = np.where(bp_mi > as_of, np.nan, bp_mi)

    # a GOR rise counts as stage 3 only when the bubble point is crossed by some evidence
    # (dip, surveys, initial pressure) or the rise is far beyond noise; a rise while a survey
    # still reads above Pb is not solution gas (gas cap, casing gas, leak: flagged)
    big = np.where(has_rise, np.where(after2, S, -np.inf).max(axis=1) - ln_rsi > UNEXPLAINED_RISE_LOG, False)
    rise_mi = np.where(has_rise, mi_at(jr), np.nan)
    contra = has_rise & np.isfinite(la) & (la >= rise_mi)
    odd = has_rise & (contra | (~np.isfinite(bp_mi) & ~big))
    has_rise = has_rise & ~odd
    peak_ok = peak_ok & has_rise
    pk_mi = np.where(has_rise, pk_mi, np.nan)
    odd_note = np.where(odd, "GOR rise above Rsi without a bubble-point crossing (survey above Pb or no "
                             "dip): not counted as stage 3; check for gas-cap, casing or leak gas", "")
    # stage at the end of history
    stage = np.where(peak_ok, 4, np.where(has_rise, 3, np.where(np.isfinite(bp_mi), 2, 1)))
    s2_mi = np.where(has_rise, mi_at(j2), np.nan)
    if mb is not None:
        stage = np.where(mb_ok, np.where((mb_stage == 1) & np.isfinite(bp_mi), 2, mb_stage), stage).astype(int)
        peak_ok = np.where(mb_ok, stage == 4, peak_ok)
        s2_mi = np.where(mb_ok, np.where(stage >= 3, mb_s2, np.nan), s2_mi)
        pk_mi = np.where(mb_ok, np.where(stage == 4, mb_pk, np.nan), pk_mi)
        # peak value: the observed smoothed GOR at the fitted peak month
        jpk = np.argmax(np.where(V, MI == pk_mi[:, None], False), axis=1)
        s_pk = np.where(mb_ok & (stage == 4), S[rows, jpk], s_pk)
    bp_mi = np.where((stage >= 3) & np.isfinite(bp_mi) & np.isfinite(s2_mi) & (bp_mi > s2_mi), s2_mi, bp_mi)

    res.loc[sids, "stage"] = stage
    res.loc[sids, "rsi"] = np.exp(ln_rsi)
    res.loc[sids, "pb"] = pb
    res.loc[sids, "bp_mi"] = bp_mi
    res.loc[sids, "s2_mi"] = s2_mi
    res.loc[sids, "pk_mi"] = pk_mi
    res.loc[sids, "pk_gor"] = np.where(peak_ok, np.exp(s_pk), np.nan)
    res.loc[sids, "passed"] = peak_ok
    res.loc[sids, "sigma"] = sigma
    res.loc[sids, "n_gor"] = n_i
    res.loc[sids, "plateau_n"] = plateau_end
    res.loc[sids, "dip_t"] = np.where(has_h, t_dip, np.nan)
    res.loc[sids, "last_mi_gor"] = mi_at(n_i - 1)
    res.loc[sids, "rsi_src"] = rsi_src
    res.loc[sids, "pb_src"] = pb_src
    res.loc[sids, "bp_src"] = bp_src
    res.loc[sids, "n_surveys"] = sv.groupby("sid").size().reindex(sids).fillna(0).to_numpy()
    res.loc[sids, "last_gor"] = np.exp(S[rows, n_i - 1])
    res.loc[sids, "peak_cand_mi"] = np.where(has_rise, mi_at(jp), np.nan)
    res.loc[sids, "mb_ok"] = mb_ok
    res.loc[sids, "mb_straddle"] = straddle if mb is not None else False
    res.loc[sids, "odd_note"] = odd_note
    res.loc[sids, "mb_note"] = ("" if mb is None else
                                np.where(mb_ok, "stage and dates from a material-balance GOR match ("
                                         + mb["label"].astype(str) + np.char.mod(", residual %.2f", np.nan_to_num(mb["scale"])).astype(object)
                                         + "); recovery factor to date " + np.char.mod("%.3f", np.nan_to_num(mb["rnow"])).astype(object)
                                         + " (2-sigma " + np.char.mod("%.3f", np.nan_to_num(mb["lo"])).astype(object) + "-"
                                         + np.char.mod("%.3f", np.nan_to_num(mb["hi"], posinf=0)).astype(object) + ")",
                                         np.where(np.isfinite(mb["scale"]),
                                                  "material-balance GOR match not used (residual "
                                                  + np.char.mod("%.2f", np.nan_to_num(mb["scale"])).astype(object)
                                                  + " vs noise " + np.char.mod("%.2f", sigma).astype(object)
                                                  + "): GOR-only rules", "")))
    if mb is not None and np.isfinite(mb["pwf"]).any():
        has_q = mb_ok & np.isfinite(mb["pwf"]) & np.isfinite(mb["rate_scale"])
        q_note = np.where(mb["rate_used"],
                          "; oil rate per producing day matched as well (group flowing pressure "
                          + np.char.mod("%.0f", np.nan_to_num(mb["pwf"])).astype(object) + " psia, rate residual "
                          + np.char.mod("%.2f", np.nan_to_num(mb["rate_scale"])).astype(object) + ")",
                          "; oil rate not used (it does not follow depletion at a steady flowing pressure: "
                          "residual " + np.char.mod("%.2f", np.nan_to_num(mb["rate_scale"])).astype(object)
                          + " vs noise " + np.char.mod("%.2f", np.nan_to_num(mb["rate_noise"])).astype(object) + ")")
        res.loc[sids[has_q], "mb_note"] = res.loc[sids[has_q], "mb_note"].to_numpy(object) + q_note[has_q]
    if mb is not None and mb["pwf_unresolved"].any():
        un = mb_ok & mb["pwf_unresolved"]
        res.loc[sids[un], "mb_note"] = (res.loc[sids[un], "mb_note"].to_numpy(object)
                                        + "; oil rate not used (the group's flowing pressure is not resolved "
                                          "by its rates: fewer than " + str(MB_RATE_MIN_WELLS) + " wells, or its "
                                          "2-sigma interval reaches the edge of 15 psia to 30 % of Pb)")
    if mb is not None and mb_conflict.any():
        res.loc[sids[mb_conflict], "mb_note"] = ("material-balance GOR match not used: it puts the "
                                                 "crossing before a survey still above Pb")
    res["n_surveys"] = res["n_surveys"].fillna(0)
    return res


# ----------------------------------------------------------------------------------------
# Material-balance shape fit (GOR type-curve match against a Tarner prediction)
# ----------------------------------------------------------------------------------------
#: Corey gas-oil sets tried per PVT group (Sgc x Swc x Sorg, 63 sets, every one; krg_max
#: 0.8, ng 2, no 3). The set with the lowest robust misfit over the group's 20 longest wells
#: is kept for all of them (wells of one reservoir share their rock curves; common
#: practice). Measured on the synthetic fields (600 wells, seeds 2026 / 7): this grid vs
#: Sgc 0.02-0.10 by 0.02 x Swc 0.18/0.24 (30 sets): peak month within 3 months 75 / 74 %
#: vs 70 / 65 %, stage unchanged (98 / 96 %). Note that the synthetic generator's own sets
#: include Sgc 0.03, which this grid contains. A coordinate-descent search of a still finer
#: grid (Sgc 0.02-0.12 by 0.01, Swc 0.15-0.30, Sorg 0.10-0.21) measured worse (stage 95 %,
#: peak 49 % on 300 wells): it can stop at a poor set when Swc and Sorg trade off.
MB_SGC_GRID = (0.02, 0.03, 0.04, 0.05, 0.06, 0.08, 0.10)
MB_SWC_GRID = (0.18, 0.21, 0.24)
MB_SORG_GRID = (0.12, 0.15, 0.18)
#: Rounding of the header (API, gas gravity, degF, Pb psia, pi psia) that groups wells into
#: one PVT path, and the most groups matched in one call (speed guard: each group costs
#: one Tarner run per Corey set).
MB_GROUP_STEP = (1.0, 0.02, 5.0, 50.0, 100.0)
MB_MAX_GROUPS = 12
#: A survey above Pb this many months after the matched crossing rejects the match.
MB_SURVEY_TOL_MONTHS = 6
#: Wells (most producing months first) used to choose the Corey set of a group.
MB_SELECT_WELLS = 20
#: Recovery-factor grid: MB_GRID_LOG_POINTS log-spaced up to the bubble point, then
#: MB_GRID_POINTS evenly spaced to the end of the path (a log grid is coarsest exactly where
#: the GOR moves most, late in life: measured stage 93 % -> 98 %, peak within 3 months
#: 39 % -> 68 % on 300 wells), then MB_REFINE_ROUNDS refinements of MB_REFINE_POINTS, each
#: dividing the step by 3. Two rounds left a step of coarse/9, 0.38-0.40 % of the peak
#: recovery factor on the default synthetic sets: as large as the ~0.4 % that dating the
#: flat GOR peak within 3 months allows. Four rounds (coarse/81, ~0.04 %) measured, 600
#: wells, peak month within 3 months 78.7 -> 84.0 % (seed 2026), 79.9 -> 81.2 % (7),
#: 76.1 -> 79.6 % (11), 81.5 -> 82.1 % (99), 76.9 -> 78.0 % (314), for 2 x 7 more misfit
#: evaluations per well.
MB_GRID_LOG_POINTS = 8
MB_GRID_POINTS = 30
MB_REFINE_POINTS = 7
MB_REFINE_ROUNDS = 4
#: At most this many blocks of consecutive producing months enter the fit (block GOR =
#: summed gas / summed oil, weighted by its number of months).
MB_MAX_BLOCKS = 48
#: Pressure surveys enter the match (p along the Tarner path at the survey's recovery
#: factor) with this error; each squared residual is clipped at 3 errors. Near the GOR
#: peak the GOR is flat but the pressure is not (it falls 110-160 psi across the band where
#: the GOR is within 1 % of its maximum, default synthetic sets), so surveys place the well
#: on its path where the GOR cannot.
MB_USE_SURVEYS = True
MB_SURVEY_SIGMA_PSIA = 40.0
MB_MAX_SURVEYS = 48
#: Wells per vectorised chunk of the misfit (keeps temporaries small).
MB_CHUNK = 256
#: Fit accepted when its robust residual scale is at most this multiple of the noise level
#: (plus MB_FIT_ABS_TOL); otherwise the GOR-only rules stand.
MB_FIT_TOL = 1.6
MB_FIT_ABS_TOL = 0.04
#: Profile interval: recovery factors whose misfit lies within MB_PROFILE_CHI2 x sigma^2 of
#: the best (about a 2-sigma interval for one parameter).
MB_PROFILE_CHI2 = 4.0
#: The GOR peak is declared passed when the interval at this level lies past the peak
#: (about 1 sigma, one-sided ~84 %).
MB_PEAK_CHI2 = 1.0
#: Oil rate in the match (wells only; ``track_wells(rate_match=...)``). Along the Tarner
#: path a well producing against a steady flowing pressure p_wf delivers, per producing
#: day, q_o = J (kro / (mu_o Bo))(p) (p - p_wf) (pseudo-steady inflow with the productivity
#: index scaled by the oil mobility: Fetkovich 1973; the classic way of putting a Tarner
#: prediction on a time axis, e.g. Craft and Hawkins 1959, ch. 9 - from memory). With J
#: free (a level and a slow drift in time, plus one step at a workover or a lift change)
#: the shape of ln q against Np/N places the well on its path, and that shape is sharpest
#: late in life, where the GOR is flat around its peak. Block rate noise: MAD of the second
#: differences of block ln q / sqrt(6); each block's squared residual is clipped at 3
#: noise units; a step costs MB_RATE_STEP_PENALTY (in units of that noise); the drift is a
#: ridge, a drift of MB_RATE_DRIFT_SD per year costing half a noise unit. Without the drift
#: term, wells whose J drifts by +-3-8 %/yr (skin) were dated within 3 months for only
#: 53-66 % (seeds 2026/7); with it 86-90 %. MB_RATE_DRIFT_SD chosen among 0 (free drift),
#: 0.008, 0.015, 0.03 on seeds 2026, 7 and the 240-well test set at drift 0 / 0.03 / 0.08:
#: worst case 82.5 / 81.8 / 82.8 / 81.2 %.
MB_RATE_MATCH = True
MB_RATE_MIN_SIGMA = 0.02
MB_RATE_STEP_PENALTY = 10.0
MB_RATE_DRIFT_SD = 0.015
#: Each block level of J needs at least this many blocks.
MB_RATE_MIN_SPLIT = 3
#: Group flowing pressure p_wf and Corey set, chosen together: the MB_RATE_TOP_SETS sets with
#: the lowest GOR (+ survey) misfit, and for each a grid of MB_RATE_PWF_POINTS pressures from
#: 15 psia to MB_RATE_PWF_MAX_FRAC x Pb then one refinement of 9 points, on the group's
#: MB_RATE_SELECT_WELLS longest wells; each well's recovery factor is searched on the
#: coarse-grid points within MB_RATE_LOCAL steps of its GOR (+ survey) best, then refined
#: MB_RATE_SELECT_ROUNDS times. p_wf counts as resolved when its ~2-sigma profile interval
#: (MB_PROFILE_CHI2, each well's misfit in units of its own noise) lies inside the range.
#: Measured before the drift term (scripts/stage_accuracy.py, 600 wells, GOR peak month
#: within 3 months, seeds 2026/7/11/99/314/1234): 20 selection wells 97.3/97.9/97.9/97.5/
#: 96.5/83.6 %, 40 wells 98.0/93.1/95.8/98.1/97.7/94.8 % (the flowing pressure is a group
#: property: more wells, steadier choice); 10 sets instead of 6: no change.
MB_RATE_TOP_SETS = 6
#: A group flowing pressure is fitted only on at least this many wells (common practice:
#: one well's rate shape confounds p_wf with its own productivity changes).
MB_RATE_MIN_WELLS = 5
MB_RATE_SELECT_WELLS = 40
MB_RATE_PWF_POINTS = 12
MB_RATE_PWF_MAX_FRAC = 0.3
MB_RATE_SELECT_ROUNDS = 2
MB_RATE_LOCAL = 3


@functools.lru_cache(maxsize=64)
def _mb_pvt(api: float, gamma_g: float, t_f: float, pb: float, pi: float):
    """Standing PVT table of a PVT group (core.material_balance.PvtTable), cached."""
    p_ab = max(50.0, 0.04 * pb)
    return PvtTable.from_correlations(api=api, gamma_g=gamma_g, t_f=t_f, pb_psia=pb, p_max_psia=max(pi, pb + 1.0),
                                      p_min_psia=p_ab - 1.0)


@functools.lru_cache(maxsize=1024)
def _mb_curve(api: float, gamma_g: float, t_f: float, pb: float, pi: float,
              sgc: float, swc: float, sorg: float) -> dict:
    """Tarner depletion path of one PVT group and Corey set (core.material_balance), cached.

    The GOR peak of the path is placed at the vertex of the parabola through the three path
    points around the highest tabulated GOR (the tabulated maximum alone is quantised to one
    pressure step; measured 0.06-0.08 % of Np/N on the default sets, 0.01 % after).
    """

    pi = max(pi, pb)
    p_ab = max(50.0, 0.04 * pb)
    pvt = _mb_pvt(api, gamma_g, t_f, pb, pi)
    rp = CoreyGasOil(swc=swc, sgc=sgc, sorg=sorg)
    pred = predict_depletion(pvt, rp, pi_psia=max(pi, pb + 1.0), p_abandon_psia=p_ab,
                             dp_psia=max(5.0, (pb - p_ab) / 120.0), n_steps_above=20)
    t = pred.table
    r = t["np_over_n"].to_numpy(float)
    gor = t["producing_gor_scf_stb"].to_numpy(float)
    r_pk = np.nan if pred.np_over_n_gor_peak is None else float(pred.np_over_n_gor_peak)
    k = int(np.argmax(gor))
    if np.isfinite(r_pk) and 0 < k < len(r) - 1:
        x0, x1, x2 = r[k - 1], r[k], r[k + 1]
        y0, y1, y2 = gor[k - 1], gor[k], gor[k + 1]
        den = (x0 - x1) * (x0 - x2) * (x1 - x2)
        if den != 0.0:
            qa = (x2 * (y1 - y0) + x1 * (y0 - y2) + x0 * (y2 - y1)) / den
            qb = (x2 * x2 * (y0 - y1) + x1 * x1 * (y2 - y0) + x0 * x0 * (y1 - y2)) / den
            if qa < 0.0:
                r_pk = float(np.clip(-qb / (2.0 * qa), x0, x2))
    return {
        "label": f"Tarner path, Corey Sgc {sgc:.2f} Swc {swc:.2f} Sorg {sorg:.2f}",
        "r": r, "gp": t["gp_over_n_scf_stb"].to_numpy(float),
        "gor": gor, "p": t["p_psia"].to_numpy(float),
        "lnmob": np.log(np.maximum(t["kro"].to_numpy(float), 1e-12) / (t["mu_o_cp"].to_numpy(float) * t["bo_bbl_stb"].to_numpy(float))),
        "r_b": float(pred.np_over_n_bubble),
        "r_s2": np.nan if pred.np_over_n_stage2_end is None else float(pred.np_over_n_stage2_end),
        "r_pk": r_pk,
        "gor_pk": np.nan if pred.gor_peak_scf_stb is None else float(pred.gor_peak_scf_stb),
    }


def _mb_grid(curve: dict) -> np.ndarray:
    """Recovery-factor candidates: ``MB_GRID_LOG_POINTS`` log-spaced from 0.001 to the bubble
    point (stage 1, where the GOR is flat and the misfit barely changes) and
    ``MB_GRID_POINTS`` evenly spaced from there to the end of the path (where the GOR moves)."""
    rb = min(max(curve["r_b"], 2e-3), 0.5 * curve["r"][-1])
    return np.r_[np.exp(np.linspace(np.log(1e-3), np.log(rb), MB_GRID_LOG_POINTS, endpoint=False)),
                 np.linspace(rb, curve["r"][-1], MB_GRID_POINTS)]


def _mb_loss(curve: dict, rnow: np.ndarray, fs: np.ndarray, fe: np.ndarray, z: np.ndarray,
             valid: np.ndarray, clip: np.ndarray, wt: np.ndarray, sv: tuple | None = None,
             rq: tuple | None = None) -> np.ndarray:
    """Robust misfit of ln GOR (plus pressure surveys when ``sv`` is given) for recovery
    factors ``rnow`` (wells x candidates), in chunks."""
    out = np.empty(rnow.shape)
    for a in range(0, rnow.shape[0], MB_CHUNK):
        b = slice(a, a + MB_CHUNK)
        out[b] = _mb_loss_chunk(curve, rnow[b], fs[b], fe[b], z[b], valid[b], clip[b], wt[b],
                                None if sv is None else tuple(x[b] for x in sv),
                                None if rq is None else tuple(x[b] if np.ndim(x) else x for x in rq))
    return out


def _mb_loss_chunk(curve: dict, rnow: np.ndarray, fs: np.ndarray, fe: np.ndarray, z: np.ndarray,
                   valid: np.ndarray, clip: np.ndarray, wt: np.ndarray, sv: tuple | None = None,
                   rq: tuple | None = None) -> np.ndarray:
    r, gp = curve["r"], curve["gp"]
    rmax = r[-1]
    w, k = rnow.shape
    rs = rnow[:, :, None] * fs[:, None, :]
    re = rnow[:, :, None] * fe[:, None, :]
    g_s = np.interp(rs, r, gp)
    g_e = np.interp(re, r, gp)
    dr = re - rs
    tiny = dr <= 1e-12
    with np.errstate(divide="ignore", invalid="ignore"):
        gor = (g_e - g_s) / dr
        if tiny.any():
            gor[tiny] = np.interp(re[tiny], r, curve["gor"])
        res = z[:, None, :] - np.log(gor)
    res = np.where(re > rmax, np.inf, res)
    sq = np.minimum(wt[:, None, :] * res * res, clip[:, None, None])
    sq = np.where(valid[:, None, :], sq, 0.0)
    tot = sq.sum(axis=2)
    if sv is not None and sv[0].shape[1] > 0:
        # pressure surveys: squared residual in units of the survey error, clipped at 3,
        # scaled by the GOR noise variance so both terms share the GOR misfit's units
        px, pp, pv, wp = sv
        p_pred = np.interp(rnow[:, :, None] * px[:, None, :], r, curve["p"])
        rp = np.minimum(((pp[:, None, :] - p_pred) / MB_SURVEY_SIGMA_PSIA) ** 2, 9.0)
        tot = tot + wp[:, None] * np.where(pv[:, None, :], rp, 0.0).sum(axis=2)
    if rq is not None:
        lq, qv, tq, wq, s2, pwf = rq
        tot = tot + s2[:, None] * _mb_rate_misfit(curve, rnow, 0.5 * (fs + fe), lq, qv, tq, wq, pwf)[0]
    return tot


def _mb_rate_misfit(curve: dict, rnow: np.ndarray, fm: np.ndarray, lq: np.ndarray, qv: np.ndarray,
                    tq: np.ndarray, wq: np.ndarray, pwf) -> tuple[np.ndarray, np.ndarray]:
    """Robust misfit of ln(oil rate per producing day) against the path's deliverability.

    ``fm``: block mid cumulative oil / cumulative oil to date; ``lq``: block ln(bbl/d);
    ``qv``: valid blocks; ``tq``: block mid time [yr]; ``wq``: 1 / (2 x block rate noise^2)
    per well; ``pwf`` [psia], one value or one per well.
    Model: ln q = ln J(t) + ln(kro / (mu_o Bo)) + ln(p - p_wf), with ln J(t) = a + g t (a slow
    productivity drift: skin build-up or clean-up) plus, when it lowers the misfit by more
    than MB_RATE_STEP_PENALTY, one step at the best block (workover, lift change). The drift
    and step are least squares in closed form (the step's gain for every split from
    cumulative sums; the split is chosen with the drift unpenalised, the ridge then applies
    to the drift at that split). Returns the misfit (wells x candidates, in units of the noise
    variance / 2) and the residuals at the fitted J(t).
    """
    r = curve["r"]
    rm = rnow[:, :, None] * fm[:, None, :]
    if np.ndim(pwf):
        lg = np.interp(rm, r, curve["lnmob"]) + np.log(np.maximum(np.interp(rm, r, curve["p"])
                                                                  - pwf[:, None, None], 1.0))
    else:
        lg = np.interp(rm, r, curve["lnmob"] + np.log(np.maximum(curve["p"] - pwf, 1.0)))
    q3 = qv[:, None, :]
    d = np.where(q3, lq[:, None, :] - lg, 0.0)
    nq = np.maximum(qv.sum(axis=1), 1).astype(float)
    tm = np.where(qv, tq, 0.0).sum(axis=1) / nq
    tc = np.where(qv, tq - tm[:, None], 0.0)                       # centred time, 0 off-block
    n = nq[:, None]
    stt = np.maximum((tc * tc).sum(axis=1), 1e-12)[:, None]
    sd = d.sum(axis=2)
    std = (d * tc[:, None, :]).sum(axis=2)
    # one step after block k: h = 1 on later blocks; its gain once level and drift are fitted
    cn = np.cumsum(qv, axis=1).astype(float)
    n2 = (n - cn)[:, None, :]
    st2 = -np.cumsum(tc, axis=1)[:, None, :]
    sd2 = sd[:, :, None] - np.cumsum(d, axis=2)
    hh = np.broadcast_to(n2 - n2 * n2 / n[:, :, None] - st2 * st2 / stt[:, :, None], d.shape)
    hd = sd2 - n2 * (sd / n)[:, :, None] - st2 * (std / stt)[:, :, None]
    ok_k = ((cn >= MB_RATE_MIN_SPLIT) & (n - cn >= MB_RATE_MIN_SPLIT))[:, None, :] & (hh > 1e-9)
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = np.where(ok_k, hd * hd / hh, -np.inf)
    ks = gain.argmax(axis=2)[:, :, None]
    g_k = np.take_along_axis(gain, ks, axis=2)[:, :, 0]
    step = np.isfinite(g_k) & (g_k * wq[:, None] > MB_RATE_STEP_PENALTY)
    # level, drift and step at the chosen split: the 2 x 2 normal equations of (drift, step)
    # once the level is profiled out (time is centred), the drift with its ridge
    n2k = np.take_along_axis(np.broadcast_to(n2, d.shape), ks, axis=2)[:, :, 0]
    st2k = np.take_along_axis(np.broadcast_to(st2, d.shape), ks, axis=2)[:, :, 0]
    sd2k = np.take_along_axis(sd2, ks, axis=2)[:, :, 0]
    hh0 = n2k - n2k * n2k / n
    hd0 = sd2k - n2k * sd / n
    lam = 1.0 / (2.0 * MB_RATE_DRIFT_SD ** 2 * wq[:, None]) if MB_RATE_DRIFT_SD > 0 else 0.0
    a11 = stt + lam
    with np.errstate(divide="ignore", invalid="ignore"):
        det = a11 * hh0 - st2k * st2k
        b1 = np.where(step, (std * hh0 - st2k * hd0) / det, std / a11)
        c = np.where(step, (a11 * hd0 - st2k * std) / det, 0.0)
    b0 = (sd - c * n2k) / n
    pen = np.where(step, MB_RATE_STEP_PENALTY, 0.0)
    if MB_RATE_DRIFT_SD > 0:
        # ridge: a drift of MB_RATE_DRIFT_SD per year costs half a noise unit
        pen = pen + b1 * b1 / (2.0 * MB_RATE_DRIFT_SD ** 2)
    pos = np.arange(d.shape[2])[None, None, :]
    fit = b0[:, :, None] + b1[:, :, None] * tc[:, None, :] + np.where(pos > ks, c[:, :, None], 0.0)
    e = np.where(q3, d - fit, np.nan)
    t = np.where(q3, np.minimum(e * e * wq[:, None, None], 9.0), 0.0).sum(axis=2)
    return t + pen, e


def _mb_fit(Z, FS, FE, V, W, sigma, groups: np.ndarray, group_keys: list, surveys: tuple | None = None,
            BQ: np.ndarray | None = None, BT: np.ndarray | None = None) -> dict:
    """Fit the current recovery factor of every well to its group's Tarner path.

    ``FS``/``FE``: cumulative oil at the start/end of each producing month divided by the
    well's cumulative oil to date; ``BQ``: block ln(oil per producing day) [ln(bbl/d)], or
    None for no rate term; ``BT``: block mid time [yr]. Returns arrays per well: ok, rnow, lo, hi, r_b, r_s2, r_pk,
    gor_pk, scale, label, and with ``BQ`` pwf (group flowing pressure, psia), rate_used,
    rate_scale and rate_noise.
    """
    ns = Z.shape[0]
    out = {k: np.full(ns, np.nan) for k in ("rnow", "lo", "hi", "lo_pk", "r_b", "r_s2", "r_pk", "gor_pk", "scale")}
    out["ok"] = np.zeros(ns, bool)
    out["label"] = np.full(ns, "", dtype=object)
    out["pwf"] = np.full(ns, np.nan)
    out["rate_scale"] = np.full(ns, np.nan)
    out["rate_noise"] = np.full(ns, np.nan)
    out["rate_used"] = np.zeros(ns, bool)
    out["pwf_unresolved"] = np.zeros(ns, bool)
    clip = (3.0 * sigma) ** 2
    Zc = np.where(V, Z, 0.0)
    if surveys is not None:
        wp_all = sigma ** 2

    def sv_of(idx):
        if surveys is None:
            return None
        return surveys[0][idx], surveys[1][idx], surveys[2][idx], wp_all[idx]

    nvalid = np.where(V, W, 0.0).sum(axis=1)

    def profile(c, grid, rows, pwf, rounds):
        """Best recovery factor per well: a coarse grid (one for all wells, or one row per
        well), then ``rounds`` refinements between the neighbours of the best point."""
        g2 = np.broadcast_to(grid, (rows.size, grid.shape[-1]))
        L = _mb_loss(c, g2, FS[rows], FE[rows], Zc[rows], V[rows], clip[rows], W[rows], sv_of(rows), rq_of(rows, pwf))
        kb = L.argmin(axis=1)
        idx = np.arange(rows.size)
        lo_g = g2[idx, np.maximum(kb - 1, 0)]
        hi_g = g2[idx, np.minimum(kb + 1, g2.shape[1] - 1)]
        allr, allL = [g2], [L]
        fine, Lf, kf = allr[0], L, kb
        for _ in range(rounds):
            fine = lo_g[:, None] + (hi_g - lo_g)[:, None] * np.linspace(0.0, 1.0, MB_REFINE_POINTS)[None, :]
            Lf = _mb_loss(c, fine, FS[rows], FE[rows], Zc[rows], V[rows], clip[rows], W[rows], sv_of(rows), rq_of(rows, pwf))
            kf = Lf.argmin(axis=1)
            allr.append(fine)
            allL.append(Lf)
            step = (hi_g - lo_g) / (MB_REFINE_POINTS - 1)
            mid = fine[idx, kf]
            lo_g, hi_g = np.maximum(mid - step, fine[:, 0]), np.minimum(mid + step, fine[:, -1])
        return fine[idx, kf], Lf[idx, kf], np.concatenate(allr, axis=1), np.concatenate(allL, axis=1)
    if BQ is not None:
        FM = 0.5 * (FS + FE)
        QV = V & np.isfinite(BQ)
        LQ = np.where(QV, BQ, 0.0)
        # block rate noise: MAD of second differences / sqrt(6)
        d2q = BQ[:, 2:] - 2.0 * BQ[:, 1:-1] + BQ[:, :-2]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            sq_ = 1.4826 * np.nanmedian(np.abs(d2q), axis=1) / math.sqrt(6.0)
        sq_ = np.where(np.isfinite(sq_), np.maximum(sq_, MB_RATE_MIN_SIGMA), np.inf)
        WQ = 1.0 / (2.0 * sq_ ** 2)

    def pwf_totals(c, grid, sel, cand):
        """Summed best misfit of the wells ``sel`` (coarse grid: one row per well), each in
        units of its own noise variance (a log-likelihood scale), for each flowing pressure
        in ``cand``; all (pressure, well) pairs in one batch."""
        lb = profile(c, np.tile(grid, (cand.size, 1)), np.tile(sel, cand.size), np.repeat(cand, sel.size),
                     MB_RATE_SELECT_ROUNDS)[1]
        return (lb.reshape(cand.size, sel.size) / sigma[sel] ** 2).sum(axis=1)

    def rq_of(idx, pwf):
        if BQ is None or pwf is None:
            return None
        return LQ[idx], QV[idx], BT[idx], WQ[idx], sigma[idx] ** 2, pwf
    for gi, key in enumerate(group_keys):
        rows = np.flatnonzero(groups == gi)
        if rows.size == 0:
            continue
        # choose the Corey set on the wells with the most data (every set of the grid: a
        # path costs ~10 ms, the misfit of MB_SELECT_WELLS wells less)
        sel = rows[np.argsort(-nvalid[rows], kind="stable")[:MB_SELECT_WELLS]]
        best_c, best_l = None, np.inf
        ranked = []
        for cs_ in itertools.product(MB_SGC_GRID, MB_SWC_GRID, MB_SORG_GRID):
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    c = _mb_curve(*key, *cs_)
            except (ValueError, ArithmeticError, RuntimeError):
                continue
            grid = _mb_grid(c)
            L = _mb_loss(c, np.broadcast_to(grid, (sel.size, grid.size)), FS[sel], FE[sel], Zc[sel], V[sel],
                         clip[sel], W[sel], sv_of(sel))
            tot = L.min(axis=1).sum()
            ranked.append((tot, c))
            if tot < best_l:
                best_c, best_l = c, tot
        if best_c is None:
            continue
        c = best_c
        grid = _mb_grid(c)
        pwf = None
        if BQ is not None and rows.size < MB_RATE_MIN_WELLS:
            out["pwf_unresolved"][rows] = True
        elif BQ is not None:
            # Corey set and flowing pressure together, on the GOR-ranked shortlist
            ranked.sort(key=lambda t: t[0])
            best_j = (np.inf, None, None, False)
            selq = rows[np.argsort(-nvalid[rows], kind="stable")[:MB_RATE_SELECT_WELLS]]
            for _, cc in ranked[:MB_RATE_TOP_SETS]:
                # recovery factors near each well's GOR (+ survey) best on the coarse grid
                g1 = _mb_grid(cc)
                kg = _mb_loss(cc, np.broadcast_to(g1, (selq.size, g1.size)), FS[selq], FE[selq], Zc[selq], V[selq],
                              clip[selq], W[selq], sv_of(selq)).argmin(axis=1)
                gg = g1[np.clip(kg[:, None] + np.arange(-MB_RATE_LOCAL, MB_RATE_LOCAL + 1)[None, :], 0, g1.size - 1)]
                cand = np.linspace(15.0, MB_RATE_PWF_MAX_FRAC * key[3], MB_RATE_PWF_POINTS)
                tots = pwf_totals(cc, gg, selq, cand)
                st_ = cand[1] - cand[0]
                k0 = int(tots.argmin())
                # resolved: the ~2-sigma profile interval of p_wf lies inside the range
                inner = bool(min(tots[0], tots[-1]) >= tots[k0] + MB_PROFILE_CHI2)
                cand = np.linspace(max(cand[k0] - st_, 15.0), cand[k0] + st_, 9)
                tots = pwf_totals(cc, gg, selq, cand)
                if tots.min() < best_j[0]:
                    best_j = (float(tots.min()), cc, float(cand[tots.argmin()]), inner)
            if best_j[3]:
                c, pwf = best_j[1], best_j[2]
                grid = _mb_grid(c)
            else:
                # the ~2-sigma interval of the flowing pressure reaches the edge of the search
                # range: the rates do not resolve it (wells early in life, p >> p_wf); GOR and
                # surveys only
                out["pwf_unresolved"][rows] = True
        rbest, lbest, allr, allL = profile(c, grid, rows, pwf, MB_REFINE_ROUNDS)
        if pwf is not None:
            # the rate term stays only where the rates follow the path within their noise
            # (same rule as the GOR: robust scale <= MB_FIT_TOL x noise + MB_FIT_ABS_TOL);
            # elsewhere (choked plateau, lift changes) the well is matched on GOR and surveys
            e = _mb_rate_misfit(c, rbest[:, None], FM[rows], LQ[rows], QV[rows], BT[rows], WQ[rows], pwf)[1][:, 0, :]
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                q_scale = 1.4826 * np.nanmedian(np.abs(e - np.nanmedian(e, axis=1)[:, None]), axis=1)
            q_noise = np.sqrt(0.5 / WQ[rows])
            rate_ok = np.isfinite(q_scale) & (q_scale <= MB_FIT_TOL * q_noise + MB_FIT_ABS_TOL)
            if (~rate_ok).any():
                redo = np.flatnonzero(~rate_ok)
                r2, l2, ar2, al2 = profile(c, grid, rows[redo], None, MB_REFINE_ROUNDS)
                rbest, lbest, allr, allL = rbest.copy(), lbest.copy(), allr.copy(), allL.copy()
                rbest[redo], lbest[redo], allr[redo], allL[redo] = r2, l2, ar2, al2
            out["pwf"][rows] = pwf
            out["rate_used"][rows] = rate_ok
            out["rate_scale"][rows] = q_scale
            out["rate_noise"][rows] = q_noise
        inside = allL <= (lbest + MB_PROFILE_CHI2 * sigma[rows] ** 2)[:, None]
        lo = np.where(inside, allr, np.inf).min(axis=1)
        hi = np.where(inside, allr, -np.inf).max(axis=1)
        inside_pk = allL <= (lbest + MB_PEAK_CHI2 * sigma[rows] ** 2)[:, None]
        lo_pk = np.where(inside_pk, allr, np.inf).min(axis=1)
        # robust residual scale at the best fit
        rs = rbest[:, None] * FS[rows]
        re = rbest[:, None] * FE[rows]
        dr = re - rs
        with np.errstate(divide="ignore", invalid="ignore"):
            gor = np.where(dr > 1e-12, (np.interp(re, c["r"], c["gp"]) - np.interp(rs, c["r"], c["gp"])) / dr,
                           np.interp(re, c["r"], c["gor"]))
            res = np.where(V[rows], Z[rows] - np.log(gor), np.nan)

            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                res = res * np.sqrt(W[rows])
                scale = 1.4826 * np.nanmedian(np.abs(res - np.nanmedian(res, axis=1)[:, None]), axis=1)
                bias = np.abs(np.nanmedian(res, axis=1))
        ok = np.isfinite(scale) & (scale <= MB_FIT_TOL * sigma[rows] + MB_FIT_ABS_TOL) & (bias <= 3.0 * sigma[rows] + MB_FIT_ABS_TOL)
        out["ok"][rows] = ok
        out["rnow"][rows] = rbest
        out["lo"][rows] = lo
        out["hi"][rows] = hi
        out["lo_pk"][rows] = lo_pk
        out["scale"][rows] = scale
        for k in ("r_b", "r_s2", "r_pk", "gor_pk"):
            out[k][rows] = c[k]
        out["label"][rows] = c["label"]
    return out


def _x_to_month(x: pd.Series, cumtab: pd.DataFrame) -> np.ndarray:
    """First month whose end-of-month cumulative oil reaches ``x`` (per sid); NaN if never.

    ``cumtab`` is sorted by sid then month (as ``_prepare`` builds it); one global binary
    search on the key (series rank x span + cumulative oil) serves every series at once.
    """
    xv = x.to_numpy(float)
    out = np.full(len(xv), np.nan)
    if not np.isfinite(xv).any() or cumtab.empty:
        return out
    sid_index = pd.Index(pd.unique(cumtab["sid"]))
    c_code = sid_index.get_indexer(cumtab["sid"]).astype(float)
    cum = cumtab["cum_end"].to_numpy(float)
    span = 2.0 * max(float(np.nanmax(np.abs(cum))), float(np.nanmax(np.abs(xv[np.isfinite(xv)])))) + 1.0
    key = c_code * span + cum
    x_code = sid_index.get_indexer(x.index)
    ok = np.isfinite(xv) & (x_code >= 0)
    q = x_code[ok] * span + np.maximum(xv[ok], 0.0)
    pos = np.searchsorted(key, q, side="left")
    inside = pos < key.size
    posc = np.minimum(pos, key.size - 1)
    good = inside & (c_code[posc] == x_code[ok])
    mi = cumtab["mi"].to_numpy(float)
    out[np.flatnonzero(ok)] = np.where(good, mi[posc], np.nan)
    return out


def _confidence(res: pd.DataFrame, as_of: int) -> np.ndarray:
    """high / medium / low from noise, data, the method that placed the stage and its margin.

    Score (our own weighting, common practice): noise sigma(ln GOR) < 0.07 -> +2, < 0.12 -> +1;
    >= 24 producing months with GOR -> +1; pressure surveys present -> +1; the latest stage
    event >= 6 months before the as-of month (or stage 1 with >= 12 months) -> +1; Rsi from a
    long plateau or PVT -> +1; stage from an accepted material-balance match -> +1; stage 3
    from the GOR-only rules (a flat peak may already be behind) -> -1; the match's 2-sigma
    interval spans a stage boundary -> -2. high >= 6, medium 4-5, low <= 3.
    """
    sig = res["sigma"].to_numpy(float)
    score = np.where(sig < 0.07, 2, np.where(sig < 0.12, 1, 0))
    score = score + (res["n_gor"].to_numpy(float) >= 24)
    score = score + (res["n_surveys"].to_numpy(float) > 0)
    ev = _event_mi(res).to_numpy(float)
    st = res["stage"].to_numpy(float)
    settled = np.where(st == 1, res["n_gor"].to_numpy(float) >= 12, (as_of - ev) >= 6)
    score = score + np.nan_to_num(settled).astype(int)
    score = score + ~res["rsi_src"].astype(str).str.startswith("median of the first").to_numpy()
    mb_ok = res["mb_ok"].fillna(False).to_numpy(bool)
    score = score + mb_ok - ((st == 3) & ~mb_ok) - 2 * (mb_ok & res["mb_straddle"].fillna(False).to_numpy(bool))
    return np.where(score >= 6, "high", np.where(score >= 4, "medium", "low"))


def _event_mi(res: pd.DataFrame) -> pd.Series:
    st = res["stage"]
    return pd.Series(
        np.select(
            [st == 1, st == 2, st == 3, st == 4],
            [res["first_mi"], res["bp_mi"], res["s2_mi"], res["pk_mi"]],
            default=np.nan,
        ),
        index=res.index,
    )


def planning_status(stage) -> np.ndarray:
    """Planning status for stage values (1-4; NA/NaN -> ``not_applicable``).

    Parameters
    ----------
    stage : array_like
        Depletion stage 1-4, NA when not applicable. [-]

    Returns
    -------
    status : ndarray of str
        One of :data:`PLANNING_STATUSES`; the rule for each is :data:`PLANNING_RULES`.
    """
    s = pd.to_numeric(pd.Series(stage, dtype=object), errors="coerce").to_numpy(float)
    out = np.full(s.shape, "not_applicable", dtype=object)
    for k, v in _STAGE_TO_STATUS.items():
        out[s == k] = v
    return out


def months_to_peak_from_analogues(res: pd.DataFrame, analog: pd.DataFrame, as_of: int) -> np.ndarray:
    """Months left to the GOR peak from analogue durations (wells that passed their peak).

    Stage 2: median (peak - bubble-point crossing) of the analogues minus months since the
    crossing; stage 3: median (peak - stage-2 end) minus months since the stage-2 end;
    floor 0 (the peak is due). Stage 4: 0. Stage 1 or fewer than ``MIN_ANALOGUES``
    analogues: NaN.

    ``res`` has per well ``stage`` and the event month indices ``bp_mi``, ``s2_mi`` (months
    since January of year 0, float, NaN when not reached); ``analog`` has ``pk_mi``, ``bp_mi``,
    ``s2_mi`` of the analogue wells; ``as_of`` is the as-of month index. Returns months [mo].
    Public so that a run by blocks of wells (``core.streamed``) uses the field's analogues.
    """
    d_bp = (analog["pk_mi"] - analog["bp_mi"]).dropna()
    d_s2 = (analog["pk_mi"] - analog["s2_mi"]).dropna()
    st = res["stage"].to_numpy(float)
    out = np.full(len(res), np.nan)
    if len(d_bp) >= MIN_ANALOGUES:
        v = float(np.median(d_bp)) - (as_of - res["bp_mi"].to_numpy(float))
        out = np.where(st == 2, np.maximum(v, 0.0), out)
    if len(d_s2) >= MIN_ANALOGUES:
        v = float(np.median(d_s2)) - (as_of - res["s2_mi"].to_numpy(float))
        out = np.where(st == 3, np.maximum(v, 0.0), out)
    out = np.where(st == 4, 0.0, out)
    return out


def _evidence(res: pd.DataFrame) -> list[str]:
    cols = ["stage", "rsi", "rsi_src", "pb", "pb_src", "bp_mi", "bp_src", "s2_mi", "pk_mi", "pk_gor",
            "peak_cand_mi", "sigma", "n_gor", "n_surveys", "last_gor", "mb_note", "odd_note", "mb_ok"]
    out = []
    for r in res[cols].itertuples(index=False):
        if not np.isfinite(r.stage):
            out.append("")
            continue
        parts = [f"Rsi {r.rsi:.0f} scf/STB ({r.rsi_src})"]
        parts.append(f"Pb {r.pb:.0f} psia ({r.pb_src})" if np.isfinite(r.pb) else "Pb unknown")
        if np.isfinite(r.bp_mi):
            parts.append(f"below Pb from {_fmt_month(r.bp_mi)} ({r.bp_src})")
        if np.isfinite(r.s2_mi):
            parts.append(f"smoothed GOR back above Rsi from {_fmt_month(r.s2_mi)}")
        if np.isfinite(r.pk_mi) and r.mb_ok:
            # declared by the match, not by the smoothed-GOR rule: say which
            parts.append(f"GOR peak {r.pk_gor:.0f} scf/STB in {_fmt_month(r.pk_mi)}, confirmed by the "
                         f"match (its ~1-sigma recovery-factor interval lies past the path's peak)")
        elif np.isfinite(r.pk_mi):
            parts.append(f"GOR peak {r.pk_gor:.0f} scf/STB in {_fmt_month(r.pk_mi)}, confirmed by a "
                         f"sustained decline ({PEAK_HOLD_MONTHS} months below the peak by > "
                         f"{PEAK_DROP_K:g} x smoothed noise)")
        elif np.isfinite(r.peak_cand_mi):
            parts.append(f"highest smoothed GOR so far in {_fmt_month(r.peak_cand_mi)}, peak not confirmed")
        if r.odd_note:
            parts.append(r.odd_note)
        if r.mb_note:
            parts.append(r.mb_note)
        parts.append(f"latest smoothed GOR {r.last_gor:.0f} scf/STB")
        parts.append(f"{int(r.n_gor)} producing months with GOR, noise {100 * r.sigma:.0f} %, "
                     f"{int(r.n_surveys)} pressure surveys")
        out.append("; ".join(parts))
    return out


def _coded(prod: pd.DataFrame, codes: np.ndarray) -> pd.DataFrame:
    """The columns the tracker reads, with an integer series id ``_sid``."""
    cols = [c for c in ("month", "oil_bbl", "gas_mcf", "days_on", "days_in_month", "pressure_psia") if c in prod]
    out = pd.DataFrame({c: prod[c].to_numpy() for c in cols})
    out["_sid"] = np.asarray(codes, dtype=np.int64)
    return out


def _attrs_from_wells(ids: pd.Index, wells: pd.DataFrame | None, key: str) -> pd.DataFrame:
    a = pd.DataFrame(index=ids)
    cols = {"bubble_point_psia": "pb_given", "api_gravity": "api", "gas_specific_gravity": "gamma_g",
            "reservoir_temp_f": "t_f", "initial_pressure_psia": "pi"}
    if wells is not None and len(wells) and key in wells:
        w = wells.drop_duplicates(key).set_index(key)
        for src, dst in cols.items():
            a[dst] = pd.to_numeric(w[src], errors="coerce").reindex(ids).to_numpy(float) if src in w else np.nan
    else:
        for dst in cols.values():
            a[dst] = np.nan
    return a


def _as_of_index(production: pd.DataFrame, as_of) -> int:
    if as_of is not None:
        return int(_month_index(pd.Series([pd.Timestamp(as_of)]))[0])
    return int(_month_index(production["month"]).max())


def _check_production(production: pd.DataFrame, need: tuple[str, ...]) -> None:
    if not isinstance(production, pd.DataFrame):
        raise InputError("production must be a DataFrame (the loader's tidy monthly table)")
    missing = [c for c in need if c not in production.columns]
    if missing:
        raise InputError(f"production table lacks column(s) {missing}; expected the tidy monthly table")


def regime_start_index(stage: np.ndarray, bp_mi: np.ndarray, s2_mi: np.ndarray, pk_mi: np.ndarray,
                       as_of_mi: int | np.ndarray) -> np.ndarray:
    """First month (month index) of the current decline regime, or NaN (stage 1 / none).

    Decline character changes at each stage boundary (near-exponential above the bubble point,
    hyperbolic below; steeper once free gas flows; another shape after the GOR peak), so the
    fit window starts at the latest boundary the well has passed: the GOR peak in stage 4 and
    the GOR rise above Rsi in stage 3, when at least :data:`REGIME_MIN_MONTHS` months have
    passed since it; otherwise the bubble-point crossing (stage >= 2).
    """
    st = np.asarray(stage, dtype=float)
    bp, s2, pk = (np.asarray(a, dtype=float) for a in (bp_mi, s2_mi, pk_mi))
    old_enough = lambda ev: np.isfinite(ev) & (np.asarray(as_of_mi, dtype=float) - ev >= REGIME_MIN_MONTHS)  # noqa: E731
    regime = np.where(st >= 2, bp, np.nan)
    regime = np.where((st >= 3) & old_enough(s2), s2, regime)
    return np.where((st >= 4) & old_enough(pk), pk, regime)


def _finish(res: pd.DataFrame, attrs: pd.DataFrame, as_of: int, analog: pd.DataFrame | None) -> pd.DataFrame:
    """Reasons, confidence, planning status and the contract columns (shared by wells/units)."""
    res = res.join(attrs[["first_mi", "applicable", "reason"]])
    app = res["applicable"].to_numpy(bool)
    short = app & (res["n_gor"].fillna(0).to_numpy() < MIN_GOR_MONTHS)
    reason = res["reason"].to_numpy(object).copy()
    reason[short] = [f"too little history ({int(n)} producing months with a GOR, need {MIN_GOR_MONTHS})"
                     for n in res["n_gor"].fillna(0).to_numpy()[short]]
    ok = app & ~short
    for c in ("stage", "bp_mi", "s2_mi", "pk_mi", "pk_gor", "rsi"):
        res.loc[~ok, c] = np.nan
    res.loc[~ok, "passed"] = False
    res["reason"] = np.where(ok, "", reason)
    conf = np.where(ok, _confidence(res, as_of), "")
    status = planning_status(res["stage"].to_numpy())
    ev = _event_mi(res)
    since = as_of - ev.to_numpy(float)
    analog_tab = res[res["passed"].astype(bool)] if analog is None else analog
    to_pk = months_to_peak_from_analogues(res, analog_tab, as_of)
    st = res["stage"].to_numpy(float)
    regime = regime_start_index(st, res["bp_mi"].to_numpy(float), res["s2_mi"].to_numpy(float),
                                res["pk_mi"].to_numpy(float), as_of)
    evidence = _evidence(res)
    out = pd.DataFrame({
        "stage": pd.array(np.where(np.isfinite(st), st, np.nan), dtype="Float64").astype("Int64"),
        "stage_reason": res["reason"].astype(str).to_numpy(),
        "stage_confidence": conf,
        "rsi_scf_stb": res["rsi"].to_numpy(float),
        "bubble_point_psia": res["pb"].to_numpy(float),
        "bubble_point_date": _index_to_month(res["bp_mi"].to_numpy(float)),
        "stage2_end_date": _index_to_month(res["s2_mi"].to_numpy(float)),
        "gor_peak_date": _index_to_month(res["pk_mi"].to_numpy(float)),
        "gor_peak_scf_stb": res["pk_gor"].to_numpy(float),
        "passed_gor_peak": res["passed"].to_numpy(bool),
        "planning_status": status,
        "planning_rule": [PLANNING_RULES[s] for s in status],
        "months_since_event": since,
        "months_to_gor_peak_est": to_pk,
        "regime_start": _index_to_month(regime),
        "stage_evidence": [e if e else r for e, r in zip(evidence, res["reason"].astype(str))],
    }, index=res.index)
    return out, res


# ----------------------------------------------------------------------------------------
# Public API
# ----------------------------------------------------------------------------------------
def track_wells(
    production: pd.DataFrame,
    wells: pd.DataFrame | None = None,
    fluids: pd.DataFrame | None = None,
    *,
    as_of=None,
    material_balance_fit: bool = True,
    rate_match: bool = True,
) -> pd.DataFrame:
    """Depletion stage, stage dates and waterflood planning status of every well.

    Parameters
    ----------
    production : DataFrame
        The loader's tidy monthly table. Used: ``well_id``, ``month``, ``oil_bbl`` [bbl],
        ``gas_mcf`` [Mcf], ``days_on`` [d], ``days_in_month`` [d], ``pressure_psia`` [psia]
        (missing optional columns are tolerated: no gas column gives "no gas data").
    wells : DataFrame, optional
        Well header: ``bubble_point_psia`` [psia], ``api_gravity`` [°API],
        ``gas_specific_gravity`` [-], ``reservoir_temp_f`` [°F], ``initial_pressure_psia``
        [psia]; NaN where unknown.
    fluids : DataFrame, optional
        ``core.fluids.classify_field`` output (``well_id``, ``fluid_type``). Wells typed as
        gas condensate, wet gas, dry gas or bitumen get stage NA; ``unknown`` or absent
        wells are tracked (their evidence says the fluid type is unknown).
    as_of : date-like, optional
        Month the status refers to; default the last month in ``production``.
    material_balance_fit : bool, optional
        Match each well's GOR history and pressure surveys against a Tarner
        material-balance path built from its PVT header (API, gas gravity, temperature,
        bubble point, initial pressure; a gap filled with the median of its unit's wells)
        and take the stage and dates from it where the match is good (see the module
        notes). Wells whose header cannot be completed use the GOR-only rules either way.
    rate_match : bool, optional
        Also match each well's oil rate per producing day against the path's deliverability
        at a steady flowing pressure (one flowing pressure per PVT group, fitted; the
        productivity index free as a level with a slow drift, plus one step). Used for a well
        only where its rates follow that shape within their noise (said in the evidence).

    Returns
    -------
    DataFrame
        One row per well with the columns of the DEVELOPERS.md stage-tracker contract.

    Notes
    -----
    Rsi: the median producing GOR of the early plateau when the plateau lasts
    ``MIN_PLATEAU_MONTHS`` or more (a direct field measurement at separator conditions,
    preferred to a correlation whose typical error is 10 % or more); otherwise Standing's
    Rs at the given bubble point (Standing 1947, via ``core.pvt.rs_standing``); otherwise
    the median of the first producing months (low confidence). Bubble point: given, else
    Standing (1947) from Rsi, API, gas gravity and temperature (``core.pvt``). The stage
    rules and the peak-confirmation rule are in the module docstring.

    References
    ----------
    .. [1] M. B. Standing, "A Pressure-Volume-Temperature Correlation for Mixtures of
       California Oils and Gases," Drill. & Prod. Prac., API, 1947, pp. 275-287.
    .. [2] T. Ahmed, Reservoir Engineering Handbook, Gulf Professional Publishing,
       chapter on oil-reservoir performance prediction (Tarner 1944, Muskat 1945).
    """
    _check_production(production, ("well_id", "month", "oil_bbl"))
    if len(production) == 0:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in WELL_COLUMNS})
    as_of_i = _as_of_index(production, as_of)
    prod = production[_month_index(production["month"]) <= as_of_i]
    all_ids = pd.Index(pd.unique(production["well_id"]), name="sid")
    # integer series ids inside (string keys make every merge and groupby slow)
    months, surveys, counts, cumtab = _prepare(_coded(prod, all_ids.get_indexer(prod["well_id"])), "_sid")
    ids = pd.RangeIndex(len(all_ids), name="sid")
    counts = counts.reindex(ids)
    attrs = _attrs_from_wells(all_ids, wells, "well_id").set_axis(ids)
    attrs["first_mi"] = counts["first_mi"].to_numpy(float)
    # a gap in a well's fluid header (API, gas gravity, temperature, initial pressure) is
    # filled with the median of the other wells of its reservoir unit, which share the
    # reservoir's fluid (common practice); said in the well's evidence. The bubble point is
    # not filled: it comes from Standing's correlation with the well's own Rsi.
    filled = pd.Series("", index=ids, dtype=object)
    if "unit" in prod.columns and len(prod):
        wunit = pd.Series(prod["unit"].astype(str).to_numpy(), index=prod["well_id"].to_numpy())
        wunit = wunit[~wunit.index.duplicated()].reindex(all_ids).fillna("unassigned").to_numpy(object)
        names = {"api": "API gravity", "gamma_g": "gas gravity", "t_f": "temperature", "pi": "initial pressure"}
        for c, name in names.items():
            col = attrs[c]
            med = col.groupby(wunit).transform("median")
            gap = col.isna() & med.notna() & pd.Series(wunit != "unassigned", index=ids)
            if gap.any():
                attrs.loc[gap, c] = med[gap]
                filled[gap] = filled[gap] + np.where(filled[gap] == "", "", ", ") + name
    ftype = pd.Series("unknown", index=ids, dtype=object)
    if fluids is not None and len(fluids) and "fluid_type" in fluids:
        f = fluids.drop_duplicates("well_id").set_index("well_id")["fluid_type"].astype(str)
        ftype = pd.Series(f.reindex(all_ids).fillna("unknown").to_numpy(object), index=ids)
    not_oil = ftype.isin(NOT_OIL_FLUID_TYPES).to_numpy()
    no_gas = ~counts["gas_known"].fillna(False).to_numpy(bool)
    reason = np.where(not_oil, "not an oil well by fluid type (" + ftype.to_numpy(str) + ")",
                      np.where(no_gas, "no gas data (gas volumes missing for every month)", ""))
    attrs["applicable"] = ~not_oil & ~no_gas
    attrs["reason"] = reason
    res = _analyse(months, surveys, cumtab, attrs, as_of_i, material_balance_fit, rate_term=rate_match)
    out, full = _finish(res, attrs, as_of_i, None)
    unknown = (ftype == "unknown").to_numpy() & (out["stage_reason"] == "").to_numpy()
    out.loc[unknown, "stage_evidence"] = "fluid type unknown, tracked as oil; " + out.loc[unknown, "stage_evidence"]
    fl_ = (filled.to_numpy(object) != "") & (out["stage_reason"] == "").to_numpy()
    out.loc[fl_, "stage_evidence"] = ("header gap filled with the unit median (" + filled.to_numpy(object)[fl_]
                                      + "); " + out.loc[fl_, "stage_evidence"])
    out.insert(0, "well_id", all_ids.to_numpy())
    return out.reset_index(drop=True)[WELL_COLUMNS]



def _majority_value(codes: np.ndarray, weight: np.ndarray, value: np.ndarray, n: int) -> np.ndarray:
    """Per group: the smallest value reached by a strict weight majority.

    For each group ``g`` in ``range(n)``, the smallest ``v`` such that the rows of ``g``
    with ``value <= v`` hold more than half of the group's weight (rows with NaN value are
    left out; ``+inf`` stands for "not reached"). NaN when no row of the group counts or
    the majority lies at ``+inf``. Vectorised (one lexsort).
    """
    out = np.full(n, np.nan)
    ok = ~np.isnan(value) & (codes >= 0) & (weight > 0)
    if not ok.any():
        return out
    c, w, v = codes[ok], weight[ok], value[ok]
    order = np.lexsort((v, c))
    c, w, v = c[order], w[order], v[order]
    tot = np.bincount(c, weights=w, minlength=n)
    start = np.r_[0, np.flatnonzero(np.diff(c)) + 1]
    cum = np.cumsum(w)
    base = np.repeat(cum[start] - w[start], np.diff(np.r_[start, c.size]))
    hit = (cum - base) > 0.5 * tot[c] * (1.0 + 1e-12)
    first = np.full(n, -1)
    idx = np.flatnonzero(hit)
    cg = c[idx]
    keep = np.r_[True, cg[1:] != cg[:-1]] if idx.size else np.zeros(0, bool)
    first[cg[keep]] = idx[keep]
    has = first >= 0
    out[has] = v[first[has]]
    out[~np.isfinite(out)] = np.nan
    return out


def _unit_from_wells(wtab: pd.DataFrame, n_units: int, as_of: int) -> dict:
    """Unit stage, dates and confidence from its staged wells (rule in :func:`track_units`).

    ``wtab`` has one row per staged well: ``u`` (unit code), ``w`` (weight: recent oil),
    ``stage`` (1-4), ``bp_mi``, ``s2_mi``, ``pk_mi``, ``pk_gor``, ``to_pk`` (months to the
    peak estimate), ``conf`` (high/medium/low).
    """
    u = wtab["u"].to_numpy(np.int64)
    w = wtab["w"].to_numpy(float)
    st = wtab["stage"].to_numpy(float)
    # stage reached by wells holding a strict majority of the weight: the largest k with
    # share(stage >= k) > 1/2 (= majority of the values -stage sorted ascending)
    stage = -_majority_value(u, w, -st, n_units)
    dates = {}
    for k, col in ((2, "bp_mi"), (3, "s2_mi"), (4, "pk_mi")):
        d = wtab[col].to_numpy(float)
        # wells short of stage k: not reached (+inf); reached but undated: left out
        v = np.where(st >= k, d, np.inf)
        m = _majority_value(u, w, v, n_units)
        dates[col] = np.where(stage >= k, m, np.nan)
    # projected peak month of each well: its peak (stage 4), as-of + its analogue estimate
    # (stages 2-3), not reached (stage 1 or no estimate)
    proj = np.where(st >= 4, wtab["pk_mi"].to_numpy(float),
                    np.where(np.isfinite(wtab["to_pk"].to_numpy(float)), as_of + wtab["to_pk"].to_numpy(float),
                             np.inf))
    proj = np.where(st >= 4, np.where(np.isfinite(proj), proj, as_of), proj)
    pk_proj = _majority_value(u, w, proj, n_units)
    to_pk = np.where(np.isfinite(pk_proj), np.maximum(pk_proj - as_of, 0.0), np.nan)
    to_pk = np.where(stage == 4, 0.0, np.where(np.isfinite(stage), to_pk, np.nan))
    pk_gor = np.where(stage == 4, _majority_value(u, w, np.where(st >= 4, wtab["pk_gor"].to_numpy(float), np.nan),
                                                  n_units), np.nan)
    tot = np.bincount(u, weights=w, minlength=n_units)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = {k: np.bincount(u, weights=w * (st == k), minlength=n_units) / tot for k in (1, 2, 3, 4)}
        score = {"high": 2.0, "medium": 1.0, "low": 0.0}
        cs = wtab["conf"].map(score).fillna(0.0).to_numpy(float)
        mean_conf = np.bincount(u, weights=w * cs, minlength=n_units) / tot
    agree = np.select([stage == k for k in (1, 2, 3, 4)], [share[k] for k in (1, 2, 3, 4)], default=np.nan)
    conf = np.where((mean_conf >= 1.5) & (agree >= 0.75), "high",
                    np.where((mean_conf >= 0.75) & (agree >= 0.5), "medium", "low"))
    conf = np.where(np.isfinite(stage), conf, "")
    return {"stage": stage, **dates, "to_pk": to_pk, "pk_gor": pk_gor, "share": share, "agree": agree,
            "conf": conf, "tot": tot}


def _unit_evidence(units, stage_u, by_wells, use_cum, fw, sum_stage, full, wtab, prod, wcodes, wname_idx,
                   unit_of, pmi, oil, summed_ev, app) -> list[str]:
    """Evidence text of each unit: the wells' rule, the oil shares, and the summed-volume
    analysis with the reason when the two disagree."""
    nu = len(units)
    col = {2: "bp_mi", 3: "s2_mi", 4: "pk_mi"}
    sum_dates = {k: full[c].to_numpy(float) for k, c in col.items()}
    # "leads" case: oil share, in the month the summed series dated its event, of the wells
    # that had reached that event by then (vectorised over all units)
    lead_share = np.full(nu, np.nan)
    lead = app & by_wells & np.isfinite(sum_stage) & (sum_stage > np.nan_to_num(stage_u, nan=0))
    if lead.any():
        well_u = units.get_indexer(unit_of.reindex(wname_idx).astype(str))
        m_u = np.where(lead, sum_stage, 0).astype(int)
        e_u = np.select([m_u == k for k in (2, 3, 4)], [sum_dates[k] for k in (2, 3, 4)], default=np.nan)
        well_ev = np.full(len(wname_idx), np.inf)
        staged_w = np.zeros(len(wname_idx), bool)
        pos = wtab["pos"].to_numpy(np.int64)
        staged_w[pos] = True
        mk = m_u[wtab["u"].to_numpy(np.int64)]
        ev = np.select([mk == k for k in (2, 3, 4)], [wtab[col[k]].to_numpy(float) for k in (2, 3, 4)],
                       default=np.nan)
        well_ev[pos] = np.where(np.isfinite(ev), ev, np.inf)
        ur = well_u[wcodes]
        er = np.where(ur >= 0, e_u[np.maximum(ur, 0)], np.nan)
        mask = staged_w[wcodes] & (pmi == er) & (ur >= 0)
        reached = well_ev[wcodes] <= er
        num = np.bincount(ur[mask], weights=(oil * reached)[mask], minlength=nu)
        den = np.bincount(ur[mask], weights=oil[mask], minlength=nu)
        with np.errstate(invalid="ignore", divide="ignore"):
            lead_share = np.where(den > 0, num / den, np.nan)
    out = []
    wt = wtab.assign(u=wtab["u"].to_numpy(np.int64))
    groups = {g: t for g, t in wt.groupby("u")}
    for i in range(nu):
        if not app[i] or not np.isfinite(stage_u[i]):
            out.append(str(summed_ev[i]))
            continue
        k = int(stage_u[i])
        if not by_wells[i]:
            out.append(f"unit stage {k} from the summed-volume GOR (no staged well with oil to weigh): "
                       + str(summed_ev[i]))
            continue
        basis = ("cumulative oil (no oil in the last "
                 f"{UNIT_RECENT_MONTHS} months)") if use_cum[i] else f"oil of the last {UNIT_RECENT_MONTHS} months"
        sh = [fw["share"][j][i] for j in (1, 2, 3, 4)]
        ge = sum(sh[k - 1:])
        t = groups.get(i)
        n_st = 0 if t is None else len(t)
        parts = [f"unit stage {k} by its wells: wells holding {100 * ge:.0f} % of the unit's {basis} "
                 f"have reached stage {k} or later (rule: the stage reached by the wells holding a majority of the "
                 f"unit's recent oil, common practice); {basis} by well stage 1/2/3/4: "
                 + "/".join(f"{100 * x:.0f}" for x in sh) + f" % over {n_st} staged wells"]
        if k >= 2 and t is not None:
            bp = t["bp_mi"].to_numpy(float)
            bp = bp[np.isfinite(bp)]
            if bp.size:
                parts.append(f"unit below Pb from {_fmt_month(fw['bp_mi'][i])} (month by which wells holding "
                             f"a majority of the recent oil had crossed; first well {_fmt_month(bp.min())})")
        if k == 4:
            parts.append(f"GOR peak {_fmt_month(fw['pk_mi'][i])} (month by which wells holding a majority of "
                         f"the recent oil had passed their peaks)")
        m = sum_stage[i]
        if not np.isfinite(m):
            parts.append("summed-volume GOR analysis gave no stage: " + str(summed_ev[i]))
        elif int(m) == k:
            parts.append(f"the summed-volume GOR analysis agrees (stage {k}): " + str(summed_ev[i]))
        elif m < k:
            ev_k = int(m) + 1
            d = t[col[ev_k]].to_numpy(float) if t is not None else np.array([])
            d = d[np.isfinite(d)]
            spread = (f" (their {_STAGE_EVENT[ev_k]} dates spread from {_fmt_month(d.min())} to "
                      f"{_fmt_month(d.max())})") if d.size else ""
            parts.append(f"DISAGREES: the summed-volume GOR says stage {int(m)}; it lags the wells because "
                         f"summing volumes averages wells at different points of their paths{spread}: a GOR "
                         f"rising in some wells offsets a GOR falling in others, so the unit series does not "
                         f"show the {_STAGE_EVENT[ev_k]} the wells show; summed-volume analysis: "
                         + str(summed_ev[i]))
        else:
            mm = int(m)
            ls = lead_share[i]
            when = _fmt_month(sum_dates[mm][i]) if np.isfinite(sum_dates[mm][i]) else "its event month"
            if np.isfinite(ls):
                mix = (f"in {when}, when the summed series dated its {_STAGE_EVENT[mm]}, {100 * ls:.0f} % of "
                       f"the unit's oil came from wells that had themselves reached it"
                       + (", so that date reflects the changing mix of wells (new wells coming on, old "
                          "wells declining), not the wells' own GORs" if ls < 0.5 else
                          ", so the summed series dated it when those wells dominated the unit's oil"))
            else:
                mix = f"the summed series dated its {_STAGE_EVENT[mm]} in {when}"
            parts.append(f"DISAGREES: the summed-volume GOR says stage {mm}, ahead of the wells: the summed GOR "
                         f"is an oil-weighted mean of the wells' GORs, so it moves with the mix of wells as "
                         f"well as with their GORs; {mix}; wells holding {100 * (1 - sum(sh[mm - 1:])):.0f} % of "
                         f"today's oil have not reached stage {mm}; summed-volume analysis: "
                         + str(summed_ev[i]))
        out.append("; ".join(parts))
    return out


def track_units(
    production: pd.DataFrame,
    well_stages: pd.DataFrame,
    wells: pd.DataFrame | None = None,
    *,
    as_of=None,
) -> pd.DataFrame:
    """Depletion stage and planning status of every reservoir unit.

    Parameters
    ----------
    production : DataFrame
        The loader's tidy monthly table (``unit`` column; volumes as in :func:`track_wells`).
    well_stages : DataFrame
        :func:`track_wells` output for the same production.
    wells : DataFrame, optional
        Well header; a unit's bubble point is the median of its wells' bubble points.
    as_of : date-like, optional
        Month the status refers to; default the last month in ``production``.

    Returns
    -------
    DataFrame
        One row per unit: ``unit``, ``stage``, ``stage_confidence``, ``n_wells``,
        ``share_stage_1`` .. ``share_stage_4``, ``share_not_applicable``,
        ``oil_share_stage_1`` .. ``oil_share_stage_4``, ``stage_summed_gor``,
        ``bubble_point_date``, ``months_since_bubble_point``, ``gor_peak_date``,
        ``months_to_gor_peak_est``, ``planning_status``, ``planning_rule``,
        ``months_since_event``, ``rsi_scf_stb``, ``bubble_point_psia``,
        ``stage2_end_date``, ``regime_start``, ``stage_evidence``, totals ``cum_oil_bbl``,
        ``cum_gas_mcf``, ``cum_water_bbl``, and the unit's latest ``gor_scf_stb``.

    Notes
    -----
    **Unit stage (decided from the wells; common practice).** The stage reached by the
    wells holding a strict majority of the unit's recent oil: weights are each staged
    well's oil over the last ``UNIT_RECENT_MONTHS`` months (cumulative oil if the unit's
    staged wells produced none in that window), and the unit stage is the largest k such
    that the wells at stage >= k hold more than half of that oil (an oil-weighted median
    stage; a 50/50 split gives the earlier stage). A unit's summed-volume GOR mixes wells
    at different points of their paths, so it lags the wells (staggered peaks smear into a
    flat top) or leads them (the oil weighting follows the mix of wells as well as their
    GORs); it is analysed as before (same rules as a well: unit GOR = 1000 sum gas / sum oil
    of its staged wells each month, pressure the median of its wells' surveys in a month)
    and kept as evidence: ``stage_summed_gor`` and ``stage_evidence``, which says when the
    two disagree and why. The summed-volume stage decides only when the wells give none.

    **Unit dates, same rule.** ``bubble_point_date``, ``stage2_end_date``,
    ``gor_peak_date``: the month by which the wells holding a majority of the recent oil
    had reached the event (a weighted median of the wells' event dates, wells short of the
    event counting as not reached), so a date exists exactly when the unit stage has
    passed the event. ``months_to_gor_peak_est``: months until the wells holding a
    majority of the recent oil are projected past their peaks (each well's own estimate;
    0 at stage 4; NaN when that majority includes wells without an estimate).
    ``gor_peak_scf_stb``: weighted median of the peak GORs of the wells past their peak.
    ``stage_confidence``: high when the oil-weighted mean of the wells' confidences
    (high 2, medium 1, low 0) is >= 1.5 and >= 75 % of the recent oil is in wells at the
    unit stage; medium at >= 0.75 and >= 50 %; else low. ``oil_share_stage_1..4``: the
    recent-oil shares by well stage (``share_stage_k`` are well-count shares).
    """
    _check_production(production, ("well_id", "month", "oil_bbl", "unit"))
    as_of_i = _as_of_index(production, as_of)
    prod = production[_month_index(production["month"]) <= as_of_i]
    ws = well_stages.set_index("well_id")
    wcodes, wnames = pd.factorize(prod["well_id"])
    ucodes_all, unames_all = pd.factorize(prod["unit"])
    unames_all = np.asarray([str(u) for u in unames_all], dtype=object)
    first_unit = pd.Series(ucodes_all).groupby(wcodes, sort=True).first()
    unit_of = pd.Series(unames_all[first_unit.to_numpy()], index=pd.Index(np.asarray(wnames, dtype=object)))
    units = pd.Index(sorted(set(unames_all)), name="sid")
    useries = unit_monthly(prod, well_stages)
    months, surveys, counts, cumtab = _prepare(_coded(useries, units.get_indexer(useries["unit"])), "_sid")
    counts = counts.set_axis(units[counts.index.to_numpy()])
    for t in (months, surveys, cumtab):
        t["sid"] = units[t["sid"].to_numpy()] if len(t) else t["sid"]
    latest_gor = useries.dropna(subset=["gor_scf_stb"]).groupby("unit")["gor_scf_stb"].last()
    counts = counts.reindex(units)
    attrs = _attrs_from_wells(units, None, "unit")
    if wells is not None and len(wells) and "bubble_point_psia" in wells:
        w = wells.drop_duplicates("well_id").set_index("well_id")
        wu = unit_of.reindex(w.index).astype(str)
        for src, dst in (("bubble_point_psia", "pb_given"), ("api_gravity", "api"),
                         ("gas_specific_gravity", "gamma_g"), ("reservoir_temp_f", "t_f"),
                         ("initial_pressure_psia", "pi")):
            if src in w:
                attrs[dst] = pd.to_numeric(w[src], errors="coerce").groupby(wu).median().reindex(units).to_numpy(float)
    # wells' bubble points where the header had none (Standing from Rsi)
    wpb = ws["bubble_point_psia"].groupby(unit_of.reindex(ws.index).astype(str)).median()
    attrs["pb_given"] = np.where(np.isfinite(attrs["pb_given"]), attrs["pb_given"],
                                 wpb.reindex(units).to_numpy(float))
    attrs["first_mi"] = counts["first_mi"].to_numpy(float)
    n_app = ws["stage"].notna().groupby(unit_of.reindex(ws.index).astype(str)).sum().reindex(units).fillna(0)
    attrs["applicable"] = (n_app > 0).to_numpy() & counts["gas_known"].fillna(False).to_numpy(bool)
    attrs["reason"] = np.where(n_app.to_numpy() > 0, "no gas data for the unit's oil wells",
                               "no well of the unit has an applicable stage")
    res = _analyse(months, surveys, cumtab, attrs, as_of_i)
    analog = pd.DataFrame({
        "pk_mi": _month_index_or_nan(ws["gor_peak_date"]),
        "bp_mi": _month_index_or_nan(ws["bubble_point_date"]),
        "s2_mi": _month_index_or_nan(ws["stage2_end_date"]),
    })
    analog = analog[np.isfinite(analog["pk_mi"])]
    out, full = _finish(res, attrs, as_of_i, analog)

    wu_all = unit_of.reindex(ws.index).astype(str)
    st = ws["stage"]
    n_wells = wu_all.groupby(wu_all).size().reindex(units).fillna(0).astype(int)
    shares = {}
    for k in (1, 2, 3, 4):
        shares[f"share_stage_{k}"] = (st == k).fillna(False).groupby(wu_all).mean().reindex(units).to_numpy(float)
    shares["share_not_applicable"] = st.isna().groupby(wu_all).mean().reindex(units).to_numpy(float)
    tot = {}
    for c in ("oil_bbl", "gas_mcf", "water_bbl"):
        if c in prod:
            t_ = pd.Series(pd.to_numeric(prod[c], errors="coerce").to_numpy(float)).groupby(ucodes_all).sum(min_count=1)
            tot["cum_" + c] = pd.Series(t_.to_numpy(), index=unames_all[t_.index.to_numpy()]).reindex(units).to_numpy(float)
        else:
            tot["cum_" + c] = np.full(len(units), np.nan)

    # ---- unit stage from its wells (the summed-volume analysis above is kept as evidence)
    nu = len(units)
    oil = np.clip(np.nan_to_num(pd.to_numeric(prod["oil_bbl"], errors="coerce").to_numpy(float)), 0.0, None)
    pmi = _month_index(prod["month"])
    recent = pmi > as_of_i - UNIT_RECENT_MONTHS
    w_recent = np.bincount(wcodes, weights=oil * recent, minlength=len(wnames))
    w_cum = np.bincount(wcodes, weights=oil, minlength=len(wnames))
    wname_idx = pd.Index(np.asarray(wnames, dtype=object))
    staged = ws[ws["stage"].notna()]
    pos = wname_idx.get_indexer(staged.index)
    staged = staged[pos >= 0]
    pos = pos[pos >= 0]
    su = units.get_indexer(unit_of.reindex(staged.index).astype(str))
    wr, wc = w_recent[pos], w_cum[pos]
    # weight: oil of the last UNIT_RECENT_MONTHS months; a unit whose staged wells produced
    # none in that window falls back to cumulative oil
    r_tot = np.bincount(np.maximum(su, 0), weights=wr * (su >= 0), minlength=nu)
    use_cum = (r_tot <= 0)
    wgt = np.where(use_cum[np.maximum(su, 0)], wc, wr)

    def _col_or(name, default):
        return staged[name] if name in staged else pd.Series(default, index=staged.index)

    wtab = pd.DataFrame({
        "u": su, "pos": pos, "w": wgt, "stage": staged["stage"].astype(float).to_numpy(),
        "bp_mi": _month_index_or_nan(_col_or("bubble_point_date", pd.NaT)),
        "s2_mi": _month_index_or_nan(_col_or("stage2_end_date", pd.NaT)),
        "pk_mi": _month_index_or_nan(_col_or("gor_peak_date", pd.NaT)),
        "pk_gor": pd.to_numeric(_col_or("gor_peak_scf_stb", np.nan), errors="coerce").to_numpy(float),
        "to_pk": pd.to_numeric(_col_or("months_to_gor_peak_est", np.nan), errors="coerce").to_numpy(float),
        "conf": _col_or("stage_confidence", "low").astype(str).to_numpy(object),
    })
    wtab = wtab[wtab["u"] >= 0]
    fw = _unit_from_wells(wtab, nu, as_of_i)
    sum_stage = full["stage"].to_numpy(float)
    app = out["stage_reason"].to_numpy(object) == ""
    # decided stage: the wells' majority; the summed-volume stage only when the wells give none
    by_wells = np.isfinite(fw["stage"]) & app
    stage_u = np.where(by_wells, fw["stage"], np.where(app, sum_stage, np.nan))
    bp_u = np.where(by_wells, fw["bp_mi"], full["bp_mi"].to_numpy(float))
    s2_u = np.where(by_wells, fw["s2_mi"], full["s2_mi"].to_numpy(float))
    pk_u = np.where(by_wells, fw["pk_mi"], full["pk_mi"].to_numpy(float))
    bp_u, s2_u, pk_u = (np.where(stage_u >= k, d, np.nan) for k, d in ((2, bp_u), (3, s2_u), (4, pk_u)))
    pk_gor_u = np.where(by_wells, fw["pk_gor"], full["pk_gor"].to_numpy(float))
    to_pk_u = np.where(by_wells, fw["to_pk"], out["months_to_gor_peak_est"].to_numpy(float))
    conf_u = np.where(by_wells, fw["conf"], out["stage_confidence"].to_numpy(object))
    first_u = full["first_mi"].to_numpy(float)
    ev_u = np.select([stage_u == 1, stage_u == 2, stage_u == 3, stage_u == 4], [first_u, bp_u, s2_u, pk_u],
                     default=np.nan)
    status_u = planning_status(stage_u)
    regime_u = regime_start_index(stage_u, bp_u, s2_u, pk_u, as_of_i)
    evidence = _unit_evidence(units, stage_u, by_wells, use_cum, fw, sum_stage, full, wtab, prod, wcodes,
                              wname_idx, unit_of, pmi, oil, out["stage_evidence"].to_numpy(object), app)
    table = pd.DataFrame({
        "unit": units.to_numpy(),
        "stage": pd.array(np.where(np.isfinite(stage_u), stage_u, np.nan), dtype="Float64").astype("Int64"),
        "stage_reason": out["stage_reason"].to_numpy(),
        "stage_confidence": np.where(np.isfinite(stage_u), conf_u, ""),
        "n_wells": n_wells.to_numpy(),
        **shares,
        **{f"oil_share_stage_{k}": np.where(by_wells, fw["share"][k], np.nan) for k in (1, 2, 3, 4)},
        "stage_summed_gor": pd.array(np.where(np.isfinite(sum_stage), sum_stage, np.nan),
                                     dtype="Float64").astype("Int64"),
        "rsi_scf_stb": out["rsi_scf_stb"].to_numpy(),
        "bubble_point_psia": out["bubble_point_psia"].to_numpy(),
        "bubble_point_date": _index_to_month(bp_u),
        "months_since_bubble_point": as_of_i - bp_u,
        "stage2_end_date": _index_to_month(s2_u),
        "gor_peak_date": _index_to_month(pk_u),
        "gor_peak_scf_stb": pk_gor_u,
        "months_to_gor_peak_est": to_pk_u,
        "planning_status": status_u,
        "planning_rule": [PLANNING_RULES[s_] for s_ in status_u],
        "months_since_event": as_of_i - ev_u,
        "regime_start": _index_to_month(regime_u),
        "gor_scf_stb": latest_gor.reindex(units).to_numpy(float),
        **tot,
        "stage_evidence": evidence,
    })
    table["stage"] = table["stage"].astype("Int64")
    return table


def unit_monthly(production: pd.DataFrame, well_stages: pd.DataFrame | None = None) -> pd.DataFrame:
    """Monthly series of each reservoir unit from the summed volumes of its wells.

    Parameters
    ----------
    production : DataFrame
        The loader's tidy monthly table (``unit``, ``month``, ``oil_bbl`` [bbl],
        ``gas_mcf`` [Mcf], ``water_bbl`` [bbl], ``days_on`` [d], ``pressure_psia`` [psia]).
    well_stages : DataFrame, optional
        :func:`track_wells` output; when given, wells with no applicable stage (gas
        condensates, wells without gas data) are left out of the sums.

    Returns
    -------
    DataFrame
        ``unit``, ``month``, ``oil_bbl``, ``gas_mcf``, ``water_bbl`` (sums; gas NaN when no
        well reported gas), ``days_on`` (largest of the wells) [d], ``days_in_month`` [d],
        ``pressure_psia`` (median of the surveys in the month) [psia], ``gor_scf_stb``
        (1000 sum gas / sum oil, the oil-weighted mean of the wells' GORs) [scf/STB],
        ``n_producing`` (wells with oil > 0).
    """
    prod = production
    if well_stages is not None and len(well_stages):
        ok = well_stages.loc[well_stages["stage"].notna(), "well_id"]
        prod = prod[prod["well_id"].isin(ok)]
    ucodes, unames = pd.factorize(prod["unit"], sort=True)
    unames = np.asarray([str(u) for u in unames], dtype=object)
    cols = [c for c in ("month", "oil_bbl", "gas_mcf", "water_bbl", "days_on", "days_in_month", "pressure_psia")
            if c in prod]
    prod = pd.DataFrame({c: prod[c].to_numpy() for c in cols}).assign(unit=ucodes)
    g = prod.groupby(["unit", "month"], sort=True)
    out = g["oil_bbl"].sum().rename("oil_bbl").to_frame()
    for c in ("gas_mcf", "water_bbl"):
        out[c] = g[c].sum(min_count=1) if c in prod else np.nan
    out["days_on"] = g["days_on"].max() if "days_on" in prod else np.nan
    if "days_in_month" in prod:
        out["days_in_month"] = g["days_in_month"].max()
    else:
        out["days_in_month"] = pd.to_datetime(out.index.get_level_values("month")).days_in_month.to_numpy()
    out["pressure_psia"] = g["pressure_psia"].median() if "pressure_psia" in prod else np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        gor = 1000.0 * out["gas_mcf"].to_numpy(float) / out["oil_bbl"].to_numpy(float)
    out["gor_scf_stb"] = np.where(out["oil_bbl"].to_numpy(float) > 0, gor, np.nan)
    out["n_producing"] = (pd.to_numeric(prod["oil_bbl"], errors="coerce") > 0).groupby(
        [prod["unit"], prod["month"]]).sum()
    out = out.reset_index()
    out["unit"] = np.asarray(unames, dtype=object)[out["unit"].to_numpy()]
    return out


def _month_index_or_nan(s: pd.Series) -> np.ndarray:
    d = pd.to_datetime(s)
    mi = d.dt.year.to_numpy(float) * 12 + d.dt.month.to_numpy(float) - 1
    return np.where(d.isna().to_numpy(), np.nan, mi)
