"""Export of a forecast run: CSV files, an XLSX workbook, and the same as bytes in memory.

Every exported table follows the same rules, whatever the writer:

* field units (the run computes in field units; nothing is converted here);
* months and dates as ``YYYY-MM`` text;
* no ``NaN`` or infinite number is ever written: such cells are left blank;
* booleans as ``true`` / ``false``;
* text that a spreadsheet would execute as a formula (a cell starting with ``=``, ``+``,
  ``-``, ``@``, a tab or a carriage return) is neutralised by prefixing a single quote
  (the guidance of the OWASP "CSV Injection" page, common practice), in the CSV files and in
  the workbook alike; the workbook's cover sheet says so. The workbook is also written with
  xlsxwriter's ``strings_to_formulas`` off, so no text is ever stored as a formula.

When the monthly table has more rows than a worksheet holds (1,048,576 rows including the
header), the workbook carries yearly volumes per well instead (and says so on its cover sheet)
while ``forecast_monthly.csv`` keeps every month.
"""

from __future__ import annotations

import io
import math
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

#: Rows per worksheet in the XLSX format (Office Open XML limit, header row included).
XLSX_MAX_ROWS = 1_048_576

#: First characters that make a spreadsheet treat a text cell as a formula (OWASP, CSV Injection).
FORMULA_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")

CAUTIONS = (
    "Forecasts are estimates. They extrapolate past production under the stated settings and "
    "carry uncertainty that grows with the forecast horizon. Reserves bookings and field "
    "decisions follow local regulations and licensed professional practice; this output is an "
    "engineering aid, not a reserves report."
)

NEUTRALISATION_NOTE = (
    "Text cells that a spreadsheet would execute as a formula (starting with =, +, -, @, a tab "
    "or a carriage return) are written with a leading single quote (') so they stay text."
)

#: Output file names, in the order they are written.
CSV_FILES = {
    "wells": "wells.csv",
    "monthly": "forecast_monthly.csv",
    "units": "units.csv",
    "load_report": "load_report.csv",
}
XLSX_FILE = "forecast.xlsx"
CHANGES_FILE = "changes.csv"


# --------------------------------------------------------------------------------------------
# cell rules
# --------------------------------------------------------------------------------------------
def neutralise_text(value: str) -> str:
    """Return ``value`` with a leading single quote when a spreadsheet would run it as a formula.

    Parameters
    ----------
    value : str
        Cell text.

    Returns
    -------
    str
        ``"'" + value`` when ``value`` starts with one of :data:`FORMULA_TRIGGERS`, else
        ``value`` unchanged.

    Notes
    -----
    Prefixing a quote is the mitigation given by the OWASP "CSV Injection" page (common
    practice); it keeps the text readable and stops execution in the common spreadsheet
    programs.
    """
    if value and value[0] in FORMULA_TRIGGERS:
        return "'" + value
    return value


def _text_column(s: pd.Series) -> pd.Series:
    """Object column of neutralised text; NA -> ""; works on the unique values only (fast)."""
    codes, uniques = pd.factorize(s, use_na_sentinel=True)
    labels = np.array([neutralise_text(_cell_text(u)) for u in uniques] + [""], dtype=object)
    return pd.Series(labels[codes], index=s.index, dtype=object)  # code -1 -> last label ""


def _cell_text(u: Any) -> str:
    if isinstance(u, (bool, np.bool_)):
        return "true" if u else "false"
    if isinstance(u, (pd.Timestamp, np.datetime64)):
        return pd.Timestamp(u).strftime("%Y-%m")
    if isinstance(u, float) and not math.isfinite(u):
        return ""
    return str(u)


def _month_column(s: pd.Series) -> pd.Series:
    codes, uniques = pd.factorize(s, use_na_sentinel=True)
    labels = np.array(list(pd.DatetimeIndex(uniques).strftime("%Y-%m")) + [""], dtype=object)
    return pd.Series(labels[codes], index=s.index, dtype=object)


def _bool_column(s: pd.Series) -> pd.Series:
    out = np.full(len(s), "", dtype=object)
    vals = s.to_numpy(dtype=object)
    known = ~pd.isna(s).to_numpy()
    truth = np.zeros(len(s), dtype=bool)
    truth[known] = vals[known].astype(bool)
    out[known & truth] = "true"
    out[known & ~truth] = "false"
    return pd.Series(out, index=s.index, dtype=object)


def prepare_table(table: pd.DataFrame) -> pd.DataFrame:
    """Return a copy of ``table`` ready to write: the export rules of this module applied.

    Numbers stay numbers (float with NaN where the cell is blank; NaN/inf become NaN), dates
    become ``YYYY-MM`` text, booleans ``true``/``false``, and text is neutralised against
    formula execution. The input is not modified.
    """
    out = {}
    for name in table.columns:
        s = table[name]
        dt = s.dtype
        if isinstance(dt, pd.DatetimeTZDtype) or pd.api.types.is_datetime64_any_dtype(dt):
            out[name] = _month_column(s)
        elif pd.api.types.is_bool_dtype(dt):
            out[name] = _bool_column(s)
        elif pd.api.types.is_integer_dtype(dt) and not isinstance(dt, pd.CategoricalDtype):
            if s.isna().any():
                out[name] = s.astype("Int64")
            else:
                out[name] = s.astype(np.int64)
        elif pd.api.types.is_float_dtype(dt):
            v = s.to_numpy(dtype=float, na_value=np.nan)
            v = np.where(np.isfinite(v), v, np.nan)
            out[name] = pd.Series(v, index=s.index)
        elif pd.api.types.is_numeric_dtype(dt) and not isinstance(dt, pd.CategoricalDtype):
            v = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
            out[name] = pd.Series(np.where(np.isfinite(v), v, np.nan), index=s.index)
        else:
            out[name] = _text_column(s)
    return pd.DataFrame(out, index=table.index, columns=table.columns).reset_index(drop=True)


# --------------------------------------------------------------------------------------------
# CSV
# --------------------------------------------------------------------------------------------
_CSV_CHUNK_ROWS = 500_000


def write_csv(table: pd.DataFrame, target: str | Path | io.TextIOBase) -> None:
    """Write ``table`` as UTF-8 CSV (comma, header, no index) under the export rules.

    Large tables are prepared and written in chunks of rows so memory stays bounded.
    """
    own = not hasattr(target, "write")
    fh = open(target, "w", encoding="utf-8", newline="") if own else target
    try:
        n = len(table)
        if n == 0:
            prepare_table(table).to_csv(fh, index=False, na_rep="", lineterminator="\n")
            return
        for start in range(0, n, _CSV_CHUNK_ROWS):
            part = prepare_table(table.iloc[start : start + _CSV_CHUNK_ROWS])
            part.to_csv(fh, index=False, header=start == 0, na_rep="", lineterminator="\n")
    finally:
        if own:
            fh.close()


def table_to_csv_bytes(table: pd.DataFrame) -> bytes:
    """CSV bytes (UTF-8) of one table under the export rules (for download buttons)."""
    buf = io.StringIO()
    write_csv(table, buf)
    return buf.getvalue().encode("utf-8")


def _result_tables(result: Any, wells: Iterable[str] | None = None) -> dict[str, pd.DataFrame]:
    tables = {
        "wells": result.wells,
        "monthly": result.monthly,
        "units": result.units,
        "load_report": result.load_report,
    }
    if wells is not None:
        keep = set(map(str, wells))
        tables["wells"] = result.wells[result.wells["well_id"].astype(str).isin(keep)]
        tables["monthly"] = result.monthly[result.monthly["well_id"].astype(str).isin(keep)]
        rep = result.load_report
        if "well_id" in rep.columns:
            tables["load_report"] = rep[rep["well_id"].isna() | rep["well_id"].astype(str).isin(keep)]
    return tables


def tables_to_csv_bytes(result: Any, *, wells: Iterable[str] | None = None) -> dict[str, bytes]:
    """CSV bytes of every output table of a run, keyed by file name.

    Parameters
    ----------
    result : RunResult
        A run from :func:`core.run.run_field`.
    wells : iterable of str, optional
        Keep only these wells (their rows in the wells, monthly and load-report tables; the
        units table is kept whole). Default all.

    Returns
    -------
    dict
        ``{"wells.csv": b"...", "forecast_monthly.csv": ..., "units.csv": ..., "load_report.csv": ...}``
    """
    tables = _result_tables(result, wells)
    return {CSV_FILES[k]: table_to_csv_bytes(v) for k, v in tables.items()}


# --------------------------------------------------------------------------------------------
# yearly summary for the workbook
# --------------------------------------------------------------------------------------------
def yearly_volumes(monthly: pd.DataFrame) -> pd.DataFrame:
    """Volumes per well, calendar year and kind (actual / forecast) from the monthly table.

    Columns: ``well_id``, ``year``, ``kind``, ``months``, ``oil_bbl``, ``gas_mcf``,
    ``water_bbl``, ``cum_oil_bbl`` (cumulative oil at the end of the last month of the group).
    Sums skip blank months (a stream with no value at all in the group stays blank).
    """
    if monthly.empty:
        return pd.DataFrame(
            columns=["well_id", "year", "kind", "months", "oil_bbl", "gas_mcf", "water_bbl", "cum_oil_bbl"]
        )
    year = pd.DatetimeIndex(monthly["month"]).year.to_numpy()
    df = pd.DataFrame(
        {
            "well_id": monthly["well_id"].to_numpy(),
            "year": year,
            "kind": monthly["kind"].astype(str).to_numpy(),
            "oil_bbl": monthly["oil_bbl"].to_numpy(dtype=float),
            "gas_mcf": monthly["gas_mcf"].to_numpy(dtype=float),
            "water_bbl": monthly["water_bbl"].to_numpy(dtype=float),
            "cum_oil_bbl": monthly["cum_oil_bbl"].to_numpy(dtype=float),
        }
    )
    g = df.groupby(["well_id", "year", "kind"], sort=False, observed=True)
    out = g.agg(
        months=("oil_bbl", "size"),
        oil_bbl=("oil_bbl", lambda s: s.sum(min_count=1)),
        gas_mcf=("gas_mcf", lambda s: s.sum(min_count=1)),
        water_bbl=("water_bbl", lambda s: s.sum(min_count=1)),
        cum_oil_bbl=("cum_oil_bbl", "last"),
    ) if len(df) < 50_000 else _fast_yearly(df, g)
    out = out.reset_index()
    return out[["well_id", "year", "kind", "months", "oil_bbl", "gas_mcf", "water_bbl", "cum_oil_bbl"]]


def _fast_yearly(df: pd.DataFrame, g: Any) -> pd.DataFrame:
    # Same result as the lambda aggregation, built from built-in (vectorised) reductions.
    sums = g[["oil_bbl", "gas_mcf", "water_bbl"]].sum(min_count=1)
    out = pd.DataFrame({"months": g.size()})
    out[["oil_bbl", "gas_mcf", "water_bbl"]] = sums
    out["cum_oil_bbl"] = g["cum_oil_bbl"].last()
    return out


# --------------------------------------------------------------------------------------------
# XLSX
# --------------------------------------------------------------------------------------------
def _cover_rows(result: Any, notes: list[str]) -> list[tuple[str, Any]]:
    rows: list[tuple[str, Any]] = [
        ("Depletion Desk forecast run", ""),
        ("program version", getattr(result, "version", "")),
        ("as-of month", _fmt_month(getattr(result, "as_of", None))),
        ("units", "field units: bbl, Mcf, scf/STB, psia, bbl/d, 1/yr; months as YYYY-MM"),
    ]
    summary = getattr(result, "summary", None) or {}
    for key, value in summary.items():
        if isinstance(value, Mapping):
            value = "; ".join(f"{k}: {v}" for k, v in value.items())
        rows.append((f"summary: {key}", value))
    settings = getattr(result, "settings", None)
    if settings is not None:
        items = settings.as_dict() if hasattr(settings, "as_dict") else dict(vars(settings))
        for key, value in items.items():
            rows.append((f"input: {key}", "" if value is None else value))
    inputs = getattr(result, "inputs", None) or {}
    for key, value in inputs.items():
        rows.append((f"input: {key}", "" if value is None else value))
    rows.append(("cautions", CAUTIONS))
    rows.append(("formula neutralisation", NEUTRALISATION_NOTE))
    for note in notes:
        rows.append(("note", note))
    return rows


def _fmt_month(m: Any) -> str:
    if m is None or (isinstance(m, float) and math.isnan(m)) or m is pd.NaT:
        return ""
    return pd.Timestamp(m).strftime("%Y-%m")


def _cover_value(v: Any) -> Any:
    if isinstance(v, (bool, np.bool_)):
        return "true" if v else "false"
    if isinstance(v, (pd.Timestamp, np.datetime64)):
        return _fmt_month(v)
    if isinstance(v, (int, float, np.integer, np.floating)):
        f = float(v)
        return f if math.isfinite(f) else ""
    if isinstance(v, (list, tuple)):
        v = ", ".join(map(str, v))
    return neutralise_text(str(v))


def _write_sheet(wb: Any, name: str, table: pd.DataFrame) -> None:
    ws = wb.add_worksheet(name)
    prepared = prepare_table(table)
    header = [neutralise_text(str(c)) for c in prepared.columns]
    ws.write_row(0, 0, header)
    cols = []
    for c in prepared.columns:
        s = prepared[c]
        if s.dtype == object:
            cols.append(s.to_numpy())
        else:
            v = s.to_numpy(dtype=float, na_value=np.nan)
            o = v.astype(object)
            o[~np.isfinite(v)] = None
            cols.append(o)
    if not cols:
        return
    rows = zip(*cols)
    write_string, write_number = ws.write_string, ws.write_number
    for r, row in enumerate(rows, start=1):
        for c, v in enumerate(row):
            if v is None or v == "":
                continue
            if isinstance(v, str):
                write_string(r, c, v)
            else:
                write_number(r, c, v)
    ws.freeze_panes(1, 0)


def write_xlsx(
    result: Any,
    target: str | Path | io.BytesIO,
    *,
    wells: Iterable[str] | None = None,
    row_limit: int = XLSX_MAX_ROWS,
) -> list[str]:
    """Write the run's tables as a workbook with a cover sheet; return the cover notes.

    Parameters
    ----------
    result : RunResult
        A run from :func:`core.run.run_field`.
    target : path or binary file
        Where to write.
    wells : iterable of str, optional
        Keep only these wells. Default all.
    row_limit : int, optional
        Rows a worksheet may hold, header included (default the XLSX limit 1,048,576; tests
        lower it). A monthly table with more data rows than ``row_limit - 1`` is replaced in
        the workbook by yearly volumes per well; if even those do not fit, the workbook
        carries no volume sheet and points to the CSV file. Other tables larger than the limit
        are split over numbered sheets.
    """
    import xlsxwriter

    tables = _result_tables(result, wells)
    notes: list[str] = []
    monthly = tables["monthly"]
    cap = int(row_limit) - 1
    if len(monthly) > cap:
        yearly = yearly_volumes(monthly)
        if len(yearly) <= cap:
            notes.append(
                f"The monthly table has {len(monthly):,} rows, more than a worksheet holds "
                f"({cap:,} data rows); sheet 'yearly' carries yearly volumes per well and kind "
                f"instead. {CSV_FILES['monthly']} carries every month."
            )
            volume_sheet = ("yearly", yearly)
        else:
            notes.append(
                f"The monthly table has {len(monthly):,} rows and the yearly table {len(yearly):,}, "
                f"both more than a worksheet holds ({cap:,} data rows); the workbook carries no "
                f"volume sheet. {CSV_FILES['monthly']} carries every month."
            )
            volume_sheet = None
    else:
        volume_sheet = ("forecast_monthly", monthly)

    options = {
        "strings_to_formulas": False,
        "strings_to_numbers": False,
        "strings_to_urls": False,
        "constant_memory": True,
        "in_memory": False,
    }
    own = not hasattr(target, "write")
    wb = xlsxwriter.Workbook(str(target) if own else target, options)
    try:
        cover = wb.add_worksheet("cover")
        cover.set_column(0, 0, 34)
        cover.set_column(1, 1, 100)
        wrap = wb.add_format({"text_wrap": True, "valign": "top"})
        for r, (k, v) in enumerate(_cover_rows(result, notes)):
            cover.write_string(r, 0, neutralise_text(str(k)))
            v = _cover_value(v)
            if isinstance(v, str):
                cover.write_string(r, 1, v, wrap)
            else:
                cover.write_number(r, 1, v)
        sheets: list[tuple[str, pd.DataFrame]] = [("wells", tables["wells"])]
        if volume_sheet is not None:
            sheets.append(volume_sheet)
        sheets += [("units", tables["units"]), ("load_report", tables["load_report"])]
        for name, table in sheets:
            if len(table) <= cap:
                _write_sheet(wb, name, table)
            else:
                for i, start in enumerate(range(0, len(table), cap), start=1):
                    _write_sheet(wb, f"{name}_{i}", table.iloc[start : start + cap])
    finally:
        wb.close()
    return notes


def run_to_xlsx_bytes(result: Any, *, wells: Iterable[str] | None = None, row_limit: int = XLSX_MAX_ROWS) -> bytes:
    """Workbook bytes of a run (for download buttons); ``wells`` selects a subset of wells."""
    buf = io.BytesIO()
    write_xlsx(result, buf, wells=wells, row_limit=row_limit)
    return buf.getvalue()


# --------------------------------------------------------------------------------------------
# everything
# --------------------------------------------------------------------------------------------
def write_outputs(
    result: Any,
    out_dir: str | Path,
    *,
    xlsx: bool = True,
    row_limit: int = XLSX_MAX_ROWS,
    progress: Any = None,
) -> dict[str, Path]:
    """Write every output file of a run into ``out_dir`` (created when missing).

    Returns ``{file name: path}``: ``wells.csv``, ``forecast_monthly.csv``, ``units.csv``,
    ``load_report.csv`` and ``forecast.xlsx``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths: dict[str, Path] = {}
    tables = _result_tables(result)
    steps = len(tables) + (1 if xlsx else 0)
    for i, (key, table) in enumerate(tables.items()):
        if progress is not None:
            progress(i / steps, f"writing {CSV_FILES[key]}")
        p = out / CSV_FILES[key]
        write_csv(table, p)
        paths[CSV_FILES[key]] = p
    if xlsx:
        if progress is not None:
            progress(len(tables) / steps, f"writing {XLSX_FILE}")
        p = out / XLSX_FILE
        write_xlsx(result, p, row_limit=row_limit)
        paths[XLSX_FILE] = p
    if progress is not None:
        progress(1.0, "outputs written")
    return paths
