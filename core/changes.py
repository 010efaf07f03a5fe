"""The monthly update: append next month's production, and what changed since the last run.

Two jobs, both pure functions on DataFrames (no database here; :mod:`core.storage` keeps
the tables):

* :func:`merge_production` appends a new file's tidy monthly table to the stored history of
  the same field. Months already held are compared value by value: exact repeats are dropped
  (and reported), differing months are *conflicts*, and the rule for them is fixed and
  documented: **the newer file wins** (operators restate allocations; the later statement
  supersedes the earlier one), each conflicting value is reported with the previous and the
  new number. Nothing is replaced silently.
* :func:`compare_runs` sets two runs' per-well tables side by side (previous and new EUR,
  remaining, stage, planning status) with change flags; :func:`summarise_changes` totals them.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
import pandas as pd

from core.validation import InputError, check_range

__all__ = [
    "MERGE_COMPARED_COLUMNS",
    "merge_production",
    "merge_well_headers",
    "merge_loads",
    "compare_runs",
    "compare_units",
    "summarise_changes",
    "status_transitions",
]

KEY = ["well_id", "month"]
# Columns that carry what the file said; derived columns (rates, GOR, cumulatives) follow
# from them and are recomputed after the merge.
MERGE_COMPARED_COLUMNS = ("unit", "oil_bbl", "gas_mcf", "water_bbl", "days_on", "pressure_psia")
# Two numbers are "the same" when they agree to 1e-9 relative (1e-6 absolute): a file
# re-exported through a unit conversion is not a restatement (our choice).
_RTOL = 1e-9
_ATOL = 1e-6

REPORT_COLUMNS = [
    "well_id", "month", "action", "column", "previous_value", "new_value", "kept",
    "n_months", "first_month", "last_month", "detail",
]


def _check_tidy(name: str, df: pd.DataFrame) -> None:
    if not isinstance(df, pd.DataFrame):
        raise InputError(f"{name} must be a DataFrame, got {type(df).__name__}")
    missing = [c for c in KEY if c not in df.columns]
    if missing:
        raise InputError(f"{name} lacks the column(s) {missing}")
    if len(df) and not pd.api.types.is_datetime64_any_dtype(df["month"]):
        raise InputError(f"{name}.month must be datetime months, got {df['month'].dtype}")
    dup = df.duplicated(KEY)
    if dup.any():
        r = df.loc[dup].iloc[0]
        raise InputError(
            f"{name} repeats well {r['well_id']!r} month {pd.Timestamp(r['month']):%Y-%m}: "
            "a tidy table holds one row per well and month"
        )


def _same(a: pd.Series, b: pd.Series) -> np.ndarray:
    """Elementwise equality with NaN == NaN; numbers within _RTOL/_ATOL."""
    if pd.api.types.is_numeric_dtype(a) and pd.api.types.is_numeric_dtype(b) \
            and not pd.api.types.is_bool_dtype(a) and not pd.api.types.is_bool_dtype(b):
        x = a.to_numpy(dtype=float, na_value=np.nan)
        y = b.to_numpy(dtype=float, na_value=np.nan)
        both_nan = np.isnan(x) & np.isnan(y)
        with np.errstate(invalid="ignore"):
            close = np.isclose(x, y, rtol=_RTOL, atol=_ATOL)
        return both_nan | close
    an, bn = a.isna().to_numpy(), b.isna().to_numpy()
    eq = (a.astype(object).to_numpy() == b.astype(object).to_numpy())
    return (an & bn) | (~an & ~bn & eq.astype(bool))


def _fmt(v: Any) -> str:
    if v is None or (not isinstance(v, str) and pd.isna(v)):
        return ""
    if isinstance(v, (float, np.floating)):
        return f"{float(v):.10g}"
    return str(v)


def _derive(df: pd.DataFrame) -> pd.DataFrame:
    """Recompute the derived columns of the tidy table that are present (DEVELOPERS.md
    contract): producing-day rates, calendar-day oil rate, GOR, water cut, cumulatives."""
    out = df
    has = set(out.columns)
    if "month" in has and "days_in_month" in has:
        out["days_in_month"] = out["month"].dt.days_in_month.astype(out["days_in_month"].dtype)
    if "days_on" in has:
        days = out["days_on"].to_numpy(dtype=float, na_value=np.nan)
        with np.errstate(divide="ignore", invalid="ignore"):
            for vol, rate in (("oil_bbl", "oil_rate_bbl_d"), ("gas_mcf", "gas_rate_mcf_d"),
                              ("water_bbl", "water_rate_bbl_d")):
                if vol in has and rate in has:
                    v = out[vol].to_numpy(dtype=float, na_value=np.nan)
                    out[rate] = np.where(days > 0, v / np.where(days > 0, days, 1.0), np.nan)
    if "oil_rate_cal_bbl_d" in has and "oil_bbl" in has:
        out["oil_rate_cal_bbl_d"] = out["oil_bbl"].to_numpy(dtype=float) / out["month"].dt.days_in_month.to_numpy(dtype=float)
    if "gor_scf_stb" in has and {"oil_bbl", "gas_mcf"} <= has:
        o = out["oil_bbl"].to_numpy(dtype=float, na_value=np.nan)
        g = out["gas_mcf"].to_numpy(dtype=float, na_value=np.nan)
        with np.errstate(divide="ignore", invalid="ignore"):
            out["gor_scf_stb"] = np.where(o > 0, 1000.0 * g / np.where(o > 0, o, 1.0), np.nan)
    if "water_cut" in has and {"oil_bbl", "water_bbl"} <= has:
        o = out["oil_bbl"].to_numpy(dtype=float, na_value=np.nan)
        w = out["water_bbl"].to_numpy(dtype=float, na_value=np.nan)
        tot = o + w
        with np.errstate(divide="ignore", invalid="ignore"):
            out["water_cut"] = np.where(tot > 0, w / np.where(tot > 0, tot, 1.0), np.nan)
    for vol, cum in (("oil_bbl", "cum_oil_bbl"), ("gas_mcf", "cum_gas_mcf"), ("water_bbl", "cum_water_bbl")):
        if vol in has and cum in has:
            v = out[vol].astype(float)
            c = v.fillna(0.0).groupby(out["well_id"], sort=False).cumsum()
            all_nan = v.isna().groupby(out["well_id"], sort=False).transform("all")
            out[cum] = c.where(~all_nan, np.nan)
    return out


def merge_production(
    previous_tidy: pd.DataFrame, new_tidy: pd.DataFrame
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Append a new file's tidy monthly table to the history held for the same field.

    Parameters
    ----------
    previous_tidy : DataFrame
        Stored history (``LoadResult.production`` contract: one row per ``well_id`` and
        ``month``).
    new_tidy : DataFrame
        The new file's tidy table (often one more month, possibly the whole history again).

    Returns
    -------
    merged : DataFrame
        Every well-month of both tables once, sorted by ``well_id``, ``month``, index 0..n-1;
        derived columns (rates, GOR, water cut, cumulatives) recomputed.
    report : DataFrame
        Columns ``well_id``, ``month``, ``action``, ``column``, ``previous_value``,
        ``new_value``, ``kept``, ``n_months``, ``first_month``, ``last_month``, ``detail``.
        ``action`` is one of

        * ``added``: months appended for a well (one line per well, ``n_months`` and range);
        * ``duplicate_dropped``: months repeated with the same values, the repeat dropped
          (one line per well);
        * ``conflict``: a month whose ``column`` differs, one line per month and column with
          both values; ``kept = "new"`` (rule: the newer file wins);
        * ``gap``: months missing between the held history and the new months of a well;
        * ``missing_from_new``: a well of the history with no row in the new file.

    Notes
    -----
    Values are compared over :data:`MERGE_COMPARED_COLUMNS` (what a production file states);
    numbers agreeing to 1e-9 relative count as equal. The newer file wins a conflict
    because a later production statement restates (supersedes) an earlier allocation
    (common practice). Inputs are not modified.
    """
    _check_tidy("previous_tidy", previous_tidy)
    _check_tidy("new_tidy", new_tidy)
    prev = previous_tidy.reset_index(drop=True)
    new = new_tidy.reset_index(drop=True)
    compared = [c for c in MERGE_COMPARED_COLUMNS if c in prev.columns and c in new.columns]

    keys = prev[KEY].merge(new[KEY].assign(_new_pos=np.arange(len(new))), on=KEY, how="outer",
                           indicator=True)
    prev_pos = prev[KEY].assign(_prev_pos=np.arange(len(prev)))
    keys = keys.merge(prev_pos, on=KEY, how="left")
    both = keys[keys["_merge"] == "both"]
    pp = both["_prev_pos"].to_numpy(dtype=int)
    npos = both["_new_pos"].to_numpy(dtype=int)

    differs = np.zeros(len(both), dtype=bool)
    conflict_rows = []
    for col in compared:
        a = prev[col].iloc[pp].reset_index(drop=True)
        b = new[col].iloc[npos].reset_index(drop=True)
        d = ~_same(a, b)
        differs |= d
        if d.any():
            idx = np.flatnonzero(d)
            conflict_rows.append(pd.DataFrame({
                "well_id": prev["well_id"].iloc[pp[idx]].to_numpy(),
                "month": prev["month"].iloc[pp[idx]].to_numpy(),
                "action": "conflict",
                "column": col,
                "previous_value": [_fmt(v) for v in a.iloc[idx]],
                "new_value": [_fmt(v) for v in b.iloc[idx]],
                "kept": "new",
                "detail": "restated month: the newer file wins",
            }))

    # Rows of the merged table: previous-only and exact repeats from the history,
    # conflicting and new months from the new file.
    take_prev = np.concatenate([
        keys.loc[keys["_merge"] == "left_only", "_prev_pos"].to_numpy(dtype=int), pp[~differs]])
    take_new = np.concatenate([
        keys.loc[keys["_merge"] == "right_only", "_new_pos"].to_numpy(dtype=int), npos[differs]])
    cols = list(prev.columns) + [c for c in new.columns if c not in prev.columns]
    parts = [prev.iloc[np.sort(take_prev)], new.iloc[np.sort(take_new)]]
    parts = [p.reindex(columns=cols) for p in parts if len(p)]
    if parts:
        merged = pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0].copy()
    else:
        merged = prev.reindex(columns=cols).iloc[:0].copy()
    merged = merged.sort_values(KEY, kind="stable").reset_index(drop=True)
    for c in cols:  # concat may widen a dtype when one side is empty or all-NA
        if c in prev.columns and merged[c].dtype != prev[c].dtype:
            try:
                merged[c] = merged[c].astype(prev[c].dtype)
            except (TypeError, ValueError):
                pass
    merged = _derive(merged)

    lines = []
    added = new.iloc[keys.loc[keys["_merge"] == "right_only", "_new_pos"].to_numpy(dtype=int)]
    prev_wells = set(prev["well_id"])
    if len(added):
        g = added.groupby("well_id", sort=True)["month"].agg(["size", "min", "max"]).reset_index()
        lines.append(pd.DataFrame({
            "well_id": g["well_id"], "action": "added", "n_months": g["size"],
            "first_month": g["min"], "last_month": g["max"],
            "detail": np.where(g["well_id"].isin(prev_wells), "months appended", "new well"),
        }))
        # Gaps between the held history and the first appended month after it.
        last_prev = prev.groupby("well_id")["month"].max()
        if last_prev.empty:
            last_prev = pd.Series(pd.NaT, index=pd.Index(["\0"]), dtype="datetime64[ns]")
        after = added.assign(_last=added["well_id"].map(last_prev))
        after = after[after["_last"].notna() & (after["month"] > after["_last"])]
        if len(after):
            first_after = after.groupby("well_id", sort=True).agg(first=("month", "min"), last=("_last", "first"))
            gap = ((first_after["first"].dt.year - first_after["last"].dt.year) * 12
                   + first_after["first"].dt.month - first_after["last"].dt.month - 1)
            gap = gap[gap > 0]
            if len(gap):
                # Months of the gap the new file fills itself are not gaps.
                lines.append(pd.DataFrame({
                    "well_id": gap.index, "action": "gap", "n_months": gap.to_numpy(),
                    "first_month": (first_after.loc[gap.index, "last"] + pd.offsets.MonthBegin(1)).to_numpy(),
                    "last_month": (first_after.loc[gap.index, "first"] - pd.offsets.MonthBegin(1)).to_numpy(),
                    "detail": "months missing between the held history and the new file (treated as shut in)",
                }))
    if len(both) and (~differs).any():
        dups = prev.iloc[pp[~differs]]
        g = dups.groupby("well_id", sort=True)["month"].agg(["size", "min", "max"]).reset_index()
        lines.append(pd.DataFrame({
            "well_id": g["well_id"], "action": "duplicate_dropped", "n_months": g["size"],
            "first_month": g["min"], "last_month": g["max"],
            "detail": "same values as held: repeat dropped",
        }))
    lines.extend(conflict_rows)
    absent = sorted(prev_wells - set(new["well_id"]))
    if absent and len(new):
        last_prev = prev.groupby("well_id")["month"].max()
        lines.append(pd.DataFrame({
            "well_id": absent, "action": "missing_from_new",
            "last_month": last_prev.loc[absent].to_numpy(),
            "detail": "no row in the new file; history kept",
        }))
    report = _report_frame(lines)
    return merged, report


def _report_frame(lines: list[pd.DataFrame]) -> pd.DataFrame:
    empty = pd.DataFrame({
        "well_id": pd.Series([], dtype="str"), "month": pd.Series([], dtype="datetime64[ns]"),
        "action": pd.Series([], dtype="str"), "column": pd.Series([], dtype="str"),
        "previous_value": pd.Series([], dtype="str"), "new_value": pd.Series([], dtype="str"),
        "kept": pd.Series([], dtype="str"), "n_months": pd.Series([], dtype="Int64"),
        "first_month": pd.Series([], dtype="datetime64[ns]"),
        "last_month": pd.Series([], dtype="datetime64[ns]"), "detail": pd.Series([], dtype="str"),
    })
    lines = [ln for ln in lines if len(ln)]
    if not lines:
        return empty
    rep = pd.concat([ln.reindex(columns=REPORT_COLUMNS) for ln in lines], ignore_index=True)
    for c in ("well_id", "action", "column", "previous_value", "new_value", "kept", "detail"):
        rep[c] = rep[c].astype(object).where(rep[c].notna(), "").astype("str")
    for c in ("month", "first_month", "last_month"):
        rep[c] = pd.to_datetime(rep[c]).astype("datetime64[ns]")
    rep["n_months"] = pd.array(rep["n_months"], dtype="Int64")
    order = {"conflict": 0, "gap": 1, "missing_from_new": 2, "added": 3, "duplicate_dropped": 4}
    rep = rep.assign(_o=rep["action"].map(order)).sort_values(
        ["_o", "well_id", "month", "column"], kind="stable").drop(columns="_o")
    return rep.reset_index(drop=True)


def merge_well_headers(previous_wells: pd.DataFrame | None, new_wells: pd.DataFrame | None) -> pd.DataFrame | None:
    """Well header after a monthly update: the new file's rows, plus wells only the history
    knows (the newer file wins for a well in both). Sorted by ``well_id``."""
    if previous_wells is None or len(previous_wells) == 0:
        return None if new_wells is None else new_wells.copy()
    if new_wells is None or len(new_wells) == 0:
        return previous_wells.copy()
    keep = previous_wells[~previous_wells["well_id"].isin(set(new_wells["well_id"]))]
    out = pd.concat([new_wells, keep.reindex(columns=new_wells.columns)], ignore_index=True) if len(keep) else new_wells.copy()
    return out.sort_values("well_id", kind="stable").reset_index(drop=True)


def merge_loads(previous_production: pd.DataFrame, previous_wells: pd.DataFrame | None, new_load: Any) -> tuple[Any, pd.DataFrame]:
    """A ``LoadResult`` for the monthly update: ``new_load`` with its ``production`` replaced
    by the merged history and its ``wells`` by the merged header (its row counts, file name,
    hash and report stay those of the new file). Returns ``(load, merge_report)``."""
    merged, report = merge_production(previous_production, new_load.production)
    wells = merge_well_headers(previous_wells, getattr(new_load, "wells", None))
    changes: dict[str, Any] = {"production": merged}
    if wells is not None:
        changes["wells"] = wells
    if dataclasses.is_dataclass(new_load):
        return dataclasses.replace(new_load, **changes), report
    clone = type(new_load)(**{**vars(new_load), **changes})
    return clone, report


# --------------------------------------------------------------------------- run comparison

_WELL_COLS = ["well_id", "eur_oil_bbl", "remaining_oil_bbl", "stage", "planning_status", "passed_gor_peak"]


def _prep_wells(name: str, df: pd.DataFrame) -> pd.DataFrame:
    if not isinstance(df, pd.DataFrame):
        raise InputError(f"{name} must be a DataFrame, got {type(df).__name__}")
    if "well_id" not in df.columns:
        raise InputError(f"{name} lacks the column 'well_id'")
    if df["well_id"].duplicated().any():
        raise InputError(f"{name} repeats well {df.loc[df['well_id'].duplicated(), 'well_id'].iloc[0]!r}")
    out = pd.DataFrame({"well_id": df["well_id"].astype("str")})
    for c in ("eur_oil_bbl", "remaining_oil_bbl"):
        out[c] = pd.to_numeric(df[c], errors="coerce").astype(float).to_numpy() if c in df.columns else np.nan
    out["stage"] = pd.array(df["stage"], dtype="Int64") if "stage" in df.columns else pd.array([pd.NA] * len(df), dtype="Int64")
    out["planning_status"] = (df["planning_status"].astype(object).where(df["planning_status"].notna(), "")
                              .astype("str").to_numpy() if "planning_status" in df.columns else "")
    out["passed_gor_peak"] = (pd.array(df["passed_gor_peak"], dtype="boolean") if "passed_gor_peak" in df.columns
                              else pd.array([pd.NA] * len(df), dtype="boolean"))
    return out


def compare_runs(
    previous_wells: pd.DataFrame,
    new_wells: pd.DataFrame,
    *,
    eur_rel_tol: float = 0.01,
    eur_abs_tol_bbl: float = 1.0,
) -> pd.DataFrame:
    """Per-well changes between two runs' well tables.

    Parameters
    ----------
    previous_wells, new_wells : DataFrame
        ``RunResult.wells`` of the previous and the new run; the columns used are
        ``well_id``, ``eur_oil_bbl``, ``remaining_oil_bbl``, ``stage``, ``planning_status``,
        ``passed_gor_peak`` (missing ones count as unknown).
    eur_rel_tol : float
        EUR counts as changed when it moves by more than this fraction of the previous EUR
        (default 1 %, our choice: one more month of data moves a fit a little). [-]
    eur_abs_tol_bbl : float
        ...and by more than this many barrels. [bbl]

    Returns
    -------
    DataFrame
        One row per well of either run, sorted by ``well_id``: ``eur_oil_bbl_prev``,
        ``eur_oil_bbl_new``, ``eur_change_bbl``, ``eur_change_frac``,
        ``remaining_oil_bbl_prev``, ``remaining_oil_bbl_new``, ``remaining_change_bbl``,
        ``stage_prev``, ``stage_new``, ``planning_status_prev``, ``planning_status_new``,
        ``passed_gor_peak_prev``, ``passed_gor_peak_new``, the flags ``new_well``,
        ``dropped_well``, ``eur_changed``, ``stage_changed``, ``newly_past_gor_peak``,
        ``planning_status_changed``, ``any_change`` (bool), and ``change`` (text listing the
        flags raised, "" when none).

    Notes
    -----
    For a well in both runs: ``eur_changed`` when ``|dEUR| > max(eur_abs_tol_bbl,
    eur_rel_tol |EUR_prev|)`` or when one EUR is known and the other not; ``stage_changed``
    when the stages differ (unknown vs known counts); ``newly_past_gor_peak`` when the
    previous run had not passed the GOR peak (False or unknown) and the new one has;
    ``planning_status_changed`` when the status text differs. New and dropped wells carry only
    ``new_well`` / ``dropped_well``.
    """
    check_range("eur_rel_tol", eur_rel_tol, 0.0, None)
    check_range("eur_abs_tol_bbl", eur_abs_tol_bbl, 0.0, None, unit="bbl")
    a = _prep_wells("previous_wells", previous_wells)
    b = _prep_wells("new_wells", new_wells)
    m = a.merge(b, on="well_id", how="outer", suffixes=("_prev", "_new"), indicator=True, sort=True)
    in_both = (m["_merge"] == "both").to_numpy()
    out = pd.DataFrame({"well_id": m["well_id"].astype("str")})
    for c in ("eur_oil_bbl", "remaining_oil_bbl"):
        out[f"{c}_prev"] = m[f"{c}_prev"].astype(float)
        out[f"{c}_new"] = m[f"{c}_new"].astype(float)
    out["eur_change_bbl"] = out["eur_oil_bbl_new"] - out["eur_oil_bbl_prev"]
    with np.errstate(divide="ignore", invalid="ignore"):
        out["eur_change_frac"] = np.where(out["eur_oil_bbl_prev"].abs() > 0,
                                          out["eur_change_bbl"] / out["eur_oil_bbl_prev"].abs(), np.nan)
    out["remaining_change_bbl"] = out["remaining_oil_bbl_new"] - out["remaining_oil_bbl_prev"]
    out["stage_prev"] = pd.array(m["stage_prev"], dtype="Int64")
    out["stage_new"] = pd.array(m["stage_new"], dtype="Int64")
    out["planning_status_prev"] = m["planning_status_prev"].astype(object).where(m["planning_status_prev"].notna(), "").astype("str")
    out["planning_status_new"] = m["planning_status_new"].astype(object).where(m["planning_status_new"].notna(), "").astype("str")
    out["passed_gor_peak_prev"] = pd.array(m["passed_gor_peak_prev"], dtype="boolean")
    out["passed_gor_peak_new"] = pd.array(m["passed_gor_peak_new"], dtype="boolean")

    out["new_well"] = (m["_merge"] == "right_only").to_numpy()
    out["dropped_well"] = (m["_merge"] == "left_only").to_numpy()
    ep = out["eur_oil_bbl_prev"].to_numpy()
    en = out["eur_oil_bbl_new"].to_numpy()
    known_p, known_n = np.isfinite(ep), np.isfinite(en)
    tol = np.maximum(eur_abs_tol_bbl, eur_rel_tol * np.abs(np.where(known_p, ep, 0.0)))
    with np.errstate(invalid="ignore"):
        moved = known_p & known_n & (np.abs(en - ep) > tol)
    out["eur_changed"] = in_both & (moved | (known_p != known_n))
    sp, sn = out["stage_prev"], out["stage_new"]
    stage_diff = (sp.isna() != sn.isna()) | (sp.notna() & sn.notna() & (sp.fillna(0) != sn.fillna(0)))
    out["stage_changed"] = in_both & stage_diff.to_numpy(dtype=bool)
    out["newly_past_gor_peak"] = in_both & (
        out["passed_gor_peak_new"].fillna(False).to_numpy(dtype=bool)
        & ~out["passed_gor_peak_prev"].fillna(False).to_numpy(dtype=bool))
    out["planning_status_changed"] = in_both & (out["planning_status_prev"] != out["planning_status_new"]).to_numpy()
    flags = ["new_well", "dropped_well", "eur_changed", "stage_changed", "newly_past_gor_peak",
             "planning_status_changed"]
    out["any_change"] = out[flags].any(axis=1)
    out["change"] = _change_text(out)
    return out.reset_index(drop=True)


def _change_text(out: pd.DataFrame) -> pd.Series:
    parts = []
    frac = out["eur_change_frac"]
    eur_txt = np.where(frac.notna(), "EUR " + (100.0 * frac).map(lambda x: f"{x:+.1f}") + " %", "EUR now/no longer forecast")
    def _s(col: str) -> pd.Series:
        return pd.Series([("n/a" if pd.isna(v) else str(v)) for v in out[col].astype(object)],
                         index=out.index, dtype=object)

    stage_txt = "stage " + _s("stage_prev") + " -> " + _s("stage_new")
    plan_txt = ("planning " + out["planning_status_prev"].astype(object).replace({"": "none"}) + " -> "
                + out["planning_status_new"].astype(object).replace({"": "none"}))
    for flag, text in (("new_well", "new well"), ("dropped_well", "dropped well"), ("eur_changed", eur_txt),
                       ("stage_changed", stage_txt), ("newly_past_gor_peak", "past the GOR peak"),
                       ("planning_status_changed", plan_txt)):
        t = pd.Series(text, index=out.index) if isinstance(text, str) else pd.Series(np.asarray(text, dtype=object), index=out.index)
        parts.append(t.where(out[flag].to_numpy(dtype=bool), ""))
    joined = parts[0]
    for p in parts[1:]:
        joined = joined.str.cat(p, sep="; ")
    return joined.str.replace(r"(; )+", "; ", regex=True).str.strip("; ").astype("str")


def summarise_changes(changes: pd.DataFrame) -> dict[str, float | int]:
    """Totals of :func:`compare_runs`.

    Keys: ``n_wells_prev``, ``n_wells_new``, ``n_new_wells``, ``n_dropped_wells``,
    ``n_eur_changed``, ``n_stage_changed``, ``n_newly_past_gor_peak``,
    ``n_planning_status_changed``, ``n_any_change``, ``eur_oil_bbl_prev``,
    ``eur_oil_bbl_new``, ``eur_change_bbl``, ``eur_change_existing_bbl`` (wells in both runs),
    ``eur_oil_new_wells_bbl``, ``eur_oil_dropped_wells_bbl``, ``remaining_oil_bbl_prev``,
    ``remaining_oil_bbl_new``, ``remaining_change_bbl`` (sums skip unknown values). [bbl]
    """
    c = changes
    both = ~(c["new_well"] | c["dropped_well"])
    s: dict[str, float | int] = {
        "n_wells_prev": int((~c["new_well"]).sum()),
        "n_wells_new": int((~c["dropped_well"]).sum()),
        "n_new_wells": int(c["new_well"].sum()),
        "n_dropped_wells": int(c["dropped_well"].sum()),
    }
    for f in ("eur_changed", "stage_changed", "newly_past_gor_peak", "planning_status_changed", "any_change"):
        s[f"n_{f}"] = int(c[f].sum())
    s["eur_oil_bbl_prev"] = float(c["eur_oil_bbl_prev"].sum())
    s["eur_oil_bbl_new"] = float(c["eur_oil_bbl_new"].sum())
    s["eur_change_bbl"] = s["eur_oil_bbl_new"] - s["eur_oil_bbl_prev"]
    s["eur_change_existing_bbl"] = float((c.loc[both, "eur_oil_bbl_new"].fillna(0.0)
                                          - c.loc[both, "eur_oil_bbl_prev"].fillna(0.0)).sum())
    s["eur_oil_new_wells_bbl"] = float(c.loc[c["new_well"], "eur_oil_bbl_new"].sum())
    s["eur_oil_dropped_wells_bbl"] = float(c.loc[c["dropped_well"], "eur_oil_bbl_prev"].sum())
    s["remaining_oil_bbl_prev"] = float(c["remaining_oil_bbl_prev"].sum())
    s["remaining_oil_bbl_new"] = float(c["remaining_oil_bbl_new"].sum())
    s["remaining_change_bbl"] = s["remaining_oil_bbl_new"] - s["remaining_oil_bbl_prev"]
    return s


def status_transitions(changes: pd.DataFrame) -> pd.DataFrame:
    """Count of wells per (previous, new) planning status among wells in both runs whose
    status changed: ``planning_status_prev``, ``planning_status_new``, ``n_wells``."""
    c = changes[changes["planning_status_changed"]]
    g = c.groupby(["planning_status_prev", "planning_status_new"], sort=True).size()
    return g.rename("n_wells").reset_index()


def compare_units(previous_units: pd.DataFrame, new_units: pd.DataFrame) -> pd.DataFrame:
    """Per reservoir unit: previous and new stage, planning status, EUR and remaining.

    Uses the ``unit``, ``stage``, ``planning_status``, ``eur_oil_bbl`` and
    ``remaining_oil_bbl`` columns of ``RunResult.units`` (missing ones count as unknown).
    Returns one row per unit of either run, sorted by ``unit``: ``stage_prev``,
    ``stage_new``, ``planning_status_prev``, ``planning_status_new``, ``eur_oil_bbl_prev``,
    ``eur_oil_bbl_new``, ``eur_change_bbl``, ``remaining_oil_bbl_prev``,
    ``remaining_oil_bbl_new``, ``remaining_change_bbl`` and the flags ``new_unit``,
    ``dropped_unit``, ``stage_changed``, ``planning_status_changed``.
    """
    def prep(name: str, df: pd.DataFrame) -> pd.DataFrame:
        if not isinstance(df, pd.DataFrame) or "unit" not in df.columns:
            raise InputError(f"{name} must be a units table with a 'unit' column")
        return _prep_wells(name, df.drop(columns=["well_id"], errors="ignore").rename(columns={"unit": "well_id"}))

    a, b = prep("previous_units", previous_units), prep("new_units", new_units)
    m = a.merge(b, on="well_id", how="outer", suffixes=("_prev", "_new"), indicator=True, sort=True)
    in_both = (m["_merge"] == "both").to_numpy()
    out = pd.DataFrame({"unit": m["well_id"].astype("str")})
    out["stage_prev"] = pd.array(m["stage_prev"], dtype="Int64")
    out["stage_new"] = pd.array(m["stage_new"], dtype="Int64")
    for side in ("prev", "new"):
        col = m[f"planning_status_{side}"]
        out[f"planning_status_{side}"] = col.astype(object).where(col.notna(), "").astype("str")
    for c in ("eur_oil_bbl", "remaining_oil_bbl"):
        out[f"{c}_prev"] = m[f"{c}_prev"].astype(float)
        out[f"{c}_new"] = m[f"{c}_new"].astype(float)
    out["eur_change_bbl"] = out["eur_oil_bbl_new"] - out["eur_oil_bbl_prev"]
    out["remaining_change_bbl"] = out["remaining_oil_bbl_new"] - out["remaining_oil_bbl_prev"]
    out["new_unit"] = (m["_merge"] == "right_only").to_numpy()
    out["dropped_unit"] = (m["_merge"] == "left_only").to_numpy()
    sp, sn = out["stage_prev"].fillna(-1), out["stage_new"].fillna(-1)  # -1: no stage
    out["stage_changed"] = in_both & (sp != sn).to_numpy(dtype=bool)
    out["planning_status_changed"] = in_both & (out["planning_status_prev"] != out["planning_status_new"]).to_numpy()
    return out.reset_index(drop=True)
