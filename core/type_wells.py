"""Type wells: P90/P50/P10 rate curves of a group of wells aligned in time, with an Arps fit.

Method
------
1. Selection: the wells of a reservoir unit, or a user list of well_ids.
2. Alignment: month index 0 is each well's first month with oil (``align="first_production"``)
   or its peak month (``align="peak"``: the highest 3-month centred running median of the rate,
   the same peak rule as the decline engine's fit window; months before it are dropped).
   Index k is the k-th calendar month after month 0; a month a well was shut in (no row, or
   no producing days) is missing for that well, not a zero.
3. Normalisation (optional): each well's rates times (reference / value), where value is the
   well's peak rate (``normalize="peak_rate"``) or a per-well column of the well header (e.g.
   a lateral length), and reference the median of those values over the selected wells (or
   ``normalize_to``). Rates stay in bbl/d, at the reference size.
4. Percentiles per month index over the wells producing in that month: reserves convention,
   P90 = low curve (10th percentile of the wells' rates), P50 median, P10 = high curve
   (90th percentile); linear interpolation between order statistics (numpy default, Hyndman
   & Fan 1996 type 7). ``n_wells`` counts the wells contributing at each month. The curve
   stops at the first month with fewer than ``min_wells`` wells (default 5, our choice): later
   months would describe only the longest-lived wells (survivor bias).
5. Arps fit to the P50 curve (:func:`core.decline.fit_arps`, rates at mid-month, from the P50's
   peak month on), giving qi, di, b of the type well.

References
----------
.. [1] J. J. Arps, "Analysis of Decline Curves," Trans. AIME 160, 228-247, 1945.
.. [2] R. J. Hyndman and Y. Fan, "Sample quantiles in statistical packages," The American
   Statistician 50(4), 361-365, 1996.
"""

from __future__ import annotations

import io
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from core.decline import fit_arps
from core.validation import InputError, check_range

ALIGNMENTS = ("first_production", "peak")
RATE_BASES = ("producing_day", "calendar_day")
DEFAULT_MIN_WELLS = 5  # fewest wells for a month of the curve (our choice, stated in the notes)

#: Columns of ``TypeWell.curve``.
CURVE_COLUMNS = [
    "month_index", "n_wells", "oil_rate_bbl_d_p90", "oil_rate_bbl_d_p50", "oil_rate_bbl_d_p10",
    "oil_rate_bbl_d_mean", "oil_rate_bbl_d_p50_fit",
]
#: Columns of :func:`type_well_table` (one row per type well and month).
TABLE_COLUMNS = ["type_well", "align", "normalized_by", "normalized_to", "rate_basis", "model", "qi_bopd",
                 "di_annual_nominal", "b", "fit_start_index"] + CURVE_COLUMNS


@dataclass(frozen=True)
class TypeWell:
    """A type well built by :func:`type_well`.

    name : label (the unit, or "selection").
    curve : :data:`CURVE_COLUMNS`, one row per month index (rates in bbl/d; the fitted P50 in
        ``oil_rate_bbl_d_p50_fit`` from ``fit_start_index`` on, NaN before).
    fit : the :class:`core.decline.ArpsFit` of the P50 curve (t = 0 at ``fit_start_index``).
    fit_start_index : month index where the fit's t = 0 (peak of the P50 curve).
    wells : well_ids used.
    align, normalized_by, normalized_to, rate_basis, min_wells : the settings used.
    notes : what was dropped and why.
    """

    name: str
    curve: pd.DataFrame
    fit: object
    fit_start_index: int
    wells: tuple[str, ...]
    align: str
    normalized_by: str
    normalized_to: float
    rate_basis: str
    min_wells: int
    notes: tuple[str, ...]


def _rates(production: pd.DataFrame, rate_basis: str) -> pd.DataFrame:
    df = production.sort_values(["well_id", "month"], kind="stable")
    months = pd.to_datetime(df["month"])
    dim = (df["days_in_month"].to_numpy(float) if "days_in_month" in df else months.dt.days_in_month.to_numpy(float))
    days_on = df["days_on"].to_numpy(float) if "days_on" in df else dim
    oil = df["oil_bbl"].to_numpy(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        if rate_basis == "producing_day":
            q = np.where(days_on > 0, oil / days_on, np.nan)
        else:
            q = oil / dim
    q = np.where(np.isfinite(q) & (q > 0), q, np.nan)
    mi = np.asarray(months.to_numpy(), dtype="datetime64[M]").astype(np.int64)
    return pd.DataFrame({"well_id": df["well_id"].to_numpy(), "mi": mi, "q": q})


def type_well(
    production: pd.DataFrame,
    *,
    wells: Iterable[str] | None = None,
    unit: str | None = None,
    align: str = "first_production",
    normalize: str | None = None,
    header: pd.DataFrame | None = None,
    normalize_to: float | None = None,
    min_wells: int = DEFAULT_MIN_WELLS,
    max_months: int | None = None,
    rate_basis: str = "producing_day",
    b_max: float = 2.0,
    name: str | None = None,
) -> TypeWell:
    """Build a P90/P50/P10 type well from aligned well histories and fit Arps to its P50.

    Parameters
    ----------
    production : DataFrame
        The loader's tidy monthly table (``well_id``, ``month``, ``oil_bbl``, ``days_on``,
        ``days_in_month``, ``unit``). Not modified.
    wells : iterable of str, optional
        Wells to use (a user selection). Default: all wells (of ``unit`` when given).
    unit : str, optional
        Reservoir unit whose wells are used.
    align : {"first_production", "peak"}
        Month 0 of each well (module docstring).
    normalize : None, "peak_rate" or a column name of ``header``
        Scale each well's rates by reference/value (e.g. ``"lateral_length_ft"``).
    header : DataFrame, optional
        Per-well values for a column normalisation (``well_id`` + the column).
    normalize_to : float, optional
        Reference value of the normalisation; default the median over the selected wells.
        [unit of the normalising quantity]
    min_wells : int
        Fewest wells producing at a month for the month to be kept, >= 1. Default 5.
    max_months : int, optional
        Longest curve. [months]
    rate_basis : {"producing_day", "calendar_day"}
        Rate per producing day (oil / days_on, as the decline engine fits) or per calendar
        day (includes downtime). [bbl/d]
    b_max : float
        Upper bound of b for the P50 fit. [-]
    name : str, optional
        Label; default the unit or "selection".

    Returns
    -------
    TypeWell

    Raises
    ------
    InputError
        No wells selected, an unknown normalising column, or no month with enough wells.
    """
    if align not in ALIGNMENTS:
        raise ValueError(f"align must be one of {ALIGNMENTS}, got {align!r}")
    if rate_basis not in RATE_BASES:
        raise ValueError(f"rate_basis must be one of {RATE_BASES}, got {rate_basis!r}")
    check_range("min_wells", min_wells, 1, None)
    if max_months is not None:
        check_range("max_months", max_months, 1, 2400, unit="months")
    if not {"well_id", "month", "oil_bbl"} <= set(production.columns):
        raise InputError("production table needs columns well_id, month and oil_bbl")
    prod = production
    if unit is not None:
        if "unit" not in prod.columns:
            raise InputError("production table has no unit column")
        prod = prod[prod["unit"] == unit]
    if wells is not None:
        sel = [str(w) for w in wells]
        missing = sorted(set(sel) - set(prod["well_id"].astype(str)))
        prod = prod[prod["well_id"].astype(str).isin(sel)]
    else:
        missing = []
    notes: list[str] = []
    if missing:
        notes.append("wells not found (left out): " + ", ".join(missing))
    r = _rates(prod, rate_basis)
    r = r[np.isfinite(r["q"])]
    if r.empty:
        raise InputError("no producing months for the selected wells")
    # ---- month 0 per well
    if align == "first_production":
        m0 = r.groupby("well_id", sort=True)["mi"].min()
    else:
        sm = r.groupby("well_id", sort=False)["q"].transform(
            lambda s: s.rolling(3, center=True, min_periods=1).median())
        idx = sm.groupby(r["well_id"], sort=True).idxmax()
        m0 = r.loc[idx.to_numpy()].set_index("well_id")["mi"]
    k = r["mi"].to_numpy() - r["well_id"].map(m0).to_numpy()
    r = r.assign(k=k)
    r = r[r["k"] >= 0]
    if max_months is not None:
        r = r[r["k"] < int(max_months)]
    used = tuple(sorted(r["well_id"].astype(str).unique()))
    # ---- normalisation
    norm_by, norm_to = "", float("nan")
    if normalize is not None:
        if normalize == "peak_rate":
            val = r.groupby("well_id")["q"].max()
        else:
            if header is None or normalize not in header.columns or "well_id" not in header.columns:
                raise InputError(f"normalize={normalize!r} needs a header table with well_id and {normalize!r}")
            val = pd.to_numeric(header.drop_duplicates("well_id", keep="last").set_index("well_id")[normalize],
                                errors="coerce").reindex(pd.Index(used))
        val = val[np.isfinite(val) & (val > 0)]
        dropped = sorted(set(used) - set(val.index.astype(str)))
        if dropped:
            notes.append(f"no positive {normalize} (left out): " + ", ".join(dropped))
            r = r[r["well_id"].isin(val.index)]
            used = tuple(sorted(r["well_id"].astype(str).unique()))
        norm_to = float(normalize_to) if normalize_to is not None else float(np.median(val.to_numpy()))
        check_range("normalize_to", norm_to, 0.0, None, lo_open=True)
        r = r.assign(q=r["q"].to_numpy() * norm_to / r["well_id"].map(val).to_numpy(float))
        norm_by = normalize
    if not used:
        raise InputError("no wells left for the type well")
    # ---- percentiles per month index
    g = r.groupby("k")["q"]
    counts = g.size()
    ks = counts.index.to_numpy()
    short = counts.to_numpy() < min_wells
    if short.all():
        raise InputError(f"no month has {min_wells} or more producing wells (wells selected: {len(used)})")
    # stop at the first month (from month 0 on) with too few wells (survivor bias after it)
    expected = np.arange(ks.max() + 1)
    full = counts.reindex(expected, fill_value=0).to_numpy()
    bad = np.flatnonzero(full < min_wells)
    end = int(bad[0]) if bad.size else expected.size
    if end == 0:
        raise InputError(f"fewer than {min_wells} wells produce in month 0 of the alignment")
    if end < expected.size:
        notes.append(f"curve ends at month {end}: fewer than {min_wells} wells produce in month {end} "
                     f"(later months would describe only the longest-lived wells)")
    r = r[r["k"] < end]
    arr = r.sort_values(["k", "well_id"], kind="stable")
    grp = arr.groupby("k")["q"]
    pct = grp.quantile([0.1, 0.5, 0.9]).unstack()
    curve = pd.DataFrame({
        "month_index": np.arange(end),
        "n_wells": grp.size().reindex(np.arange(end)).to_numpy(int),
        "oil_rate_bbl_d_p90": pct[0.1].to_numpy(),
        "oil_rate_bbl_d_p50": pct[0.5].to_numpy(),
        "oil_rate_bbl_d_p10": pct[0.9].to_numpy(),
        "oil_rate_bbl_d_mean": grp.mean().to_numpy(),
    })
    # ---- Arps fit of the P50 from its peak
    p50 = curve["oil_rate_bbl_d_p50"].to_numpy()
    k0 = int(np.argmax(p50))
    t_yr = (np.arange(end - k0) + 0.5) / 12.0
    fit = fit_arps(t_yr, p50[k0:], b_max=b_max)
    fitted = np.full(end, np.nan)
    if fit.model:
        t_all = (np.arange(end - k0) + 0.5) / 12.0
        bb = max(fit.b, 1e-12)
        fitted[k0:] = fit.qi * np.exp(-np.log1p(bb * fit.di * t_all) / bb)
    else:
        notes.append(f"P50 curve not fitted: {fit.status}")
    curve["oil_rate_bbl_d_p50_fit"] = fitted
    label = name or (str(unit) if unit is not None else "selection")
    return TypeWell(name=label, curve=curve[CURVE_COLUMNS], fit=fit, fit_start_index=k0, wells=used,
                    align=align, normalized_by=norm_by, normalized_to=norm_to, rate_basis=rate_basis,
                    min_wells=int(min_wells), notes=tuple(notes))


def type_wells_by_unit(production: pd.DataFrame, **kwargs) -> dict[str, TypeWell]:
    """One :func:`type_well` per reservoir unit (``unit`` column); units without a month of
    ``min_wells`` producing wells are left out. Keyword arguments as :func:`type_well`."""
    if "unit" not in production.columns:
        raise InputError("production table has no unit column")
    out = {}
    for u in sorted(production["unit"].dropna().astype(str).unique()):
        try:
            out[u] = type_well(production, unit=u, **kwargs)
        except InputError:
            continue
    return out


def type_well_table(type_wells: TypeWell | Sequence[TypeWell] | dict) -> pd.DataFrame:
    """Export table of one or more type wells (:data:`TABLE_COLUMNS`), one row per month."""
    if isinstance(type_wells, TypeWell):
        items = [type_wells]
    elif isinstance(type_wells, dict):
        items = list(type_wells.values())
    else:
        items = list(type_wells)
    parts = []
    for tw in items:
        c = tw.curve.copy()
        f = tw.fit
        c.insert(0, "type_well", tw.name)
        c.insert(1, "align", tw.align)
        c.insert(2, "normalized_by", tw.normalized_by)
        c.insert(3, "normalized_to", tw.normalized_to)
        c.insert(4, "rate_basis", tw.rate_basis)
        c.insert(5, "model", f.model)
        c.insert(6, "qi_bopd", f.qi)
        c.insert(7, "di_annual_nominal", f.di)
        c.insert(8, "b", f.b)
        c.insert(9, "fit_start_index", tw.fit_start_index)
        parts.append(c)
    if not parts:
        return pd.DataFrame({c: [] for c in TABLE_COLUMNS})
    return pd.concat(parts, ignore_index=True)[TABLE_COLUMNS]


def type_well_to_csv(type_wells: TypeWell | Sequence[TypeWell] | dict, path: str | Path | None = None) -> str | None:
    """Write :func:`type_well_table` as CSV to ``path`` (returns None), or return the text."""
    table = type_well_table(type_wells)
    if path is None:
        buf = io.StringIO()
        table.to_csv(buf, index=False)
        return buf.getvalue()
    table.to_csv(path, index=False)
    return None
