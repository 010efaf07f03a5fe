"""Export of a forecast run: CSV files, an XLSX workbook, and the same as bytes in memory.

Every exported table follows the same rules, whatever the writer:

* field units (the run computes in field units; nothing is converted here);
* months and dates as ``YYYY-MM`` text;
* no ``NaN`` or infinite number is ever written: such cells are left blank;
* booleans as ``true`` / ``false``;
* text that a spreadsheet would execute as a formula (a cell starting with ``=``, ``+``,
  ``-``, ``@``, a tab or a carriage return) is neutralised by prefixing a single quote
  (the guidance of the OWASP "CSV Injection" page, common practice), in the CSV files and in
  the workbook alike; the workbook's cover sheet says so. The workbook writer stores text as
  inline strings and numbers as values and never writes a formula cell.

When the monthly table has more rows than a worksheet holds (1,048,576 rows including the
header), the workbook carries yearly volumes per well instead (and says so on its cover sheet)
while ``forecast_monthly.csv`` keeps every month.
"""

from __future__ import annotations

import io
import math
import re
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
#: Field totals of the probabilistic forecasts (written when the run has them).
FIELD_PERCENTILES_FILE = "field_percentiles.csv"
#: Type wells per reservoir unit (``python -m core forecast ... --type-wells``).
TYPE_WELLS_FILE = "type_wells.csv"

#: How the probabilistic field totals are made (cover sheet and README).
PROBABILISTIC_NOTE = (
    "P90/P50/P10 (P90 = low estimate, the 10th percentile of the samples): moving-block "
    "bootstrap of each well's log-rate decline residuals with a hindcast-measured level error "
    "(core.probabilistic). Field totals are sums over wells of each sample, then percentiles "
    "of those sums (not sums of well percentiles); wells are sampled independently. The "
    "monthly percentile columns cover each well's deterministic forecast months; P10 months "
    "after a well's deterministic end count in the EUR/remaining percentiles and field totals."
)


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


def _categorical(codes: np.ndarray, labels: list[str], index: pd.Index) -> pd.Series:
    """Text column as a categorical from per-row codes (-1 = blank) into ``labels``.

    Distinct values may share a label after formatting (e.g. two spellings of one month);
    the categories are made unique, blank ("") included.
    """
    lab = np.array(list(labels) + [""], dtype=object)
    lab_codes, lab_uniq = pd.factorize(lab)
    codes = np.asarray(codes)
    row_codes = lab_codes[np.where(codes < 0, len(lab) - 1, codes)]
    cat = pd.Categorical.from_codes(row_codes, categories=pd.Index(np.asarray(lab_uniq, dtype=object), dtype=object))
    return pd.Series(cat, index=index)


def _text_column(s: pd.Series) -> pd.Series:
    """Neutralised text (categorical); NA -> ""; formats the unique values only (fast)."""
    codes, uniques = pd.factorize(s, use_na_sentinel=True)
    return _categorical(codes, [neutralise_text(_cell_text(u)) for u in uniques], s.index)


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
    return _categorical(codes, list(pd.DatetimeIndex(uniques).strftime("%Y-%m")), s.index)


def _bool_column(s: pd.Series) -> pd.Series:
    known = ~pd.isna(s).to_numpy()
    vals = s.to_numpy(dtype=object)
    truth = np.zeros(len(s), dtype=bool)
    truth[known] = vals[known].astype(bool)
    codes = np.where(known, np.where(truth, 0, 1), -1)
    return _categorical(codes, ["true", "false"], s.index)


def prepare_table(table: pd.DataFrame) -> pd.DataFrame:
    """Return a copy of ``table`` ready to write: the export rules of this module applied.

    Numbers stay numbers (float with NaN where the cell is blank; NaN/inf become NaN), dates
    become ``YYYY-MM`` text, booleans ``true``/``false``, and text is neutralised against
    formula execution. Every text column comes back as a categorical of str ("" = blank), so
    the writers handle each distinct value once. The input is not modified.
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


def _arrow_column(s: pd.Series) -> Any:
    """Arrow array of a prepared column: text by taking its categories (no per-row objects)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(s.dtype, pd.CategoricalDtype):
        cats = pa.array(np.asarray(s.cat.categories, dtype=object), type=pa.string())
        return pc.take(cats, pa.array(s.cat.codes.to_numpy(dtype=np.int32)))
    if isinstance(s.dtype, pd.Int64Dtype):
        return pa.array(s, type=pa.int64(), from_pandas=True)
    if pd.api.types.is_integer_dtype(s.dtype):
        return pa.array(s.to_numpy(dtype=np.int64))
    return pa.array(s.to_numpy(dtype=float, na_value=np.nan), from_pandas=True)  # NaN -> null


def _csv_chunk_bytes(part: pd.DataFrame, header: bool) -> bytes:
    """UTF-8 CSV bytes of an already prepared table (Arrow's C++ writer when available)."""
    try:
        import pyarrow as pa
        import pyarrow.csv as pacsv
    except ImportError:  # pragma: no cover - pyarrow ships with pandas/streamlit here
        return part.to_csv(index=False, header=header, na_rep="", lineterminator="\n").encode("utf-8")
    buf = io.BytesIO()
    names = [str(c) for c in part.columns]
    table = pa.Table.from_arrays([_arrow_column(part[c]) for c in part.columns], names=names)
    if header:  # header cells follow the same neutralisation rule
        table = table.rename_columns([neutralise_text(n) for n in names])
    pacsv.write_csv(table, buf, pacsv.WriteOptions(include_header=header, quoting_style="needed"))
    return buf.getvalue()


def csv_chunks(table: pd.DataFrame, *, threads: int = 2, header: bool = True):
    """Yield the CSV bytes of ``table`` under the export rules, a block of rows at a time.

    Numbers are written in their shortest round-trip form by Arrow's writer; text cells are
    quoted. Blocks are formatted by ``threads`` threads (Arrow's writer releases the
    interpreter lock) at most two blocks ahead of the consumer, and yielded in order.
    ``header=False`` leaves the header line out (rows appended to a file already started,
    as the streamed run does block by block). Every cell is formatted on its own, so a table
    written in parts gives the same bytes as written whole.
    """
    from collections import deque
    from concurrent.futures import ThreadPoolExecutor

    n = len(table)
    if n == 0:
        if header:
            yield _csv_chunk_bytes(prepare_table(table), True)
        return

    def block(start: int) -> bytes:
        return _csv_chunk_bytes(prepare_table(table.iloc[start : start + _CSV_CHUNK_ROWS]), header and start == 0)

    starts = list(range(0, n, _CSV_CHUNK_ROWS))
    if threads <= 1 or len(starts) == 1:
        for start in starts:
            yield block(start)
        return
    with ThreadPoolExecutor(max_workers=threads) as pool:
        pending: deque = deque()
        for start in starts:
            pending.append(pool.submit(block, start))
            if len(pending) > threads:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()


def write_csv(table: pd.DataFrame, target: str | Path | io.IOBase) -> None:
    """Write ``table`` as UTF-8 CSV (comma, header, no index) under the export rules.

    ``target`` is a path or a binary file object. Large tables are prepared and written in
    blocks of rows so memory stays bounded.
    """
    own = not hasattr(target, "write")
    fh = open(target, "wb") if own else target
    try:
        for chunk in csv_chunks(table):
            fh.write(chunk)
    finally:
        if own:
            fh.close()


def append_csv(table: pd.DataFrame, fh: Any, *, header: bool) -> None:
    """Append ``table``'s rows to the open binary file ``fh`` under the export rules, with
    the header line only when ``header`` (the first part of a table written in parts)."""
    for chunk in csv_chunks(table, header=header):
        fh.write(chunk)


def table_to_csv_bytes(table: pd.DataFrame) -> bytes:
    """CSV bytes (UTF-8) of one table under the export rules (for download buttons)."""
    return b"".join(csv_chunks(table))


def _file_name(key: str) -> str:
    return FIELD_PERCENTILES_FILE if key == "field_percentiles" else CSV_FILES[key]


def field_percentiles_table(result: Any) -> pd.DataFrame | None:
    """Field totals of the run's probabilistic forecasts (quantity, p90, p50, p10, mean,
    n_wells, n_samples, method), or None when the run has none."""
    prob = getattr(result, "probabilistic", None)
    if prob is None:
        return None
    return prob.field


def _result_tables(result: Any, wells: Iterable[str] | None = None) -> dict[str, pd.DataFrame]:
    tables = {
        "wells": result.wells,
        "monthly": result.monthly,
        "units": result.units,
        "load_report": result.load_report,
    }
    fp = field_percentiles_table(result)
    if fp is not None and wells is None:
        tables["field_percentiles"] = fp
    if wells is not None:
        keep = sorted(set(map(str, wells)))
        tables["wells"] = result.wells[_isin(result.wells["well_id"], keep)]
        tables["monthly"] = result.monthly[_isin(result.monthly["well_id"], keep)]
        rep = result.load_report
        if "well_id" in rep.columns:
            tables["load_report"] = rep[rep["well_id"].isna() | _isin(rep["well_id"], keep)]
    return tables


def _isin(s: pd.Series, keep: list[str]) -> pd.Series:
    """``s`` (ids as text or categorical text) is one of ``keep``; no per-row string copies."""
    if isinstance(s.dtype, pd.CategoricalDtype) or pd.api.types.is_string_dtype(s.dtype):
        return s.isin(keep)
    return s.astype(str).isin(keep)


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
        ``{"wells.csv": b"...", "forecast_monthly.csv": ..., "units.csv": ..., "load_report.csv": ...}``,
        plus ``"field_percentiles.csv"`` for the whole field when the run has probabilistic
        forecasts (field totals are not split by well).
    """
    tables = _result_tables(result, wells)
    return {_file_name(k): table_to_csv_bytes(v) for k, v in tables.items()}


# --------------------------------------------------------------------------------------------
# yearly summary for the workbook
# --------------------------------------------------------------------------------------------
def _codes(s: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Integer codes and their values; a categorical's own codes (category order) are used.

    For text ids the codes follow the sorted order of the values, so that "sorted by well"
    can be checked on the codes.
    """
    if isinstance(s.dtype, pd.CategoricalDtype):
        cats = s.cat.categories
        codes = s.cat.codes.to_numpy().astype(np.int64)
        if not cats.is_monotonic_increasing:
            rank = np.argsort(np.argsort(np.asarray(cats.astype(str), dtype=object), kind="stable"), kind="stable")
            return rank[codes], np.asarray(cats.astype(str), dtype=object)[np.argsort(rank)]
        return codes, np.asarray(cats.astype(str), dtype=object)
    codes, uniq = pd.factorize(s, sort=True)
    return codes.astype(np.int64), np.asarray(uniq, dtype=object)


YEARLY_COLUMNS = ["well_id", "year", "kind", "months", "oil_bbl", "gas_mcf", "water_bbl", "cum_oil_bbl"]


def yearly_volumes(monthly: pd.DataFrame) -> pd.DataFrame:
    """Volumes per well, calendar year and kind (actual / forecast) from the monthly table.

    Columns: ``well_id``, ``year``, ``kind``, ``months``, ``oil_bbl``, ``gas_mcf``,
    ``water_bbl``, ``cum_oil_bbl`` (cumulative oil at the end of the last month of the group).
    Sums skip blank months (a stream with no value at all in the group stays blank). Groups
    come in the order of the monthly table (well, then month); vectorised with numpy
    (``reduceat`` over runs of equal keys).
    """
    n = len(monthly)
    if n == 0:
        return pd.DataFrame({c: [] for c in YEARLY_COLUMNS})
    w_codes, w_uniq = _codes(monthly["well_id"])
    k_codes, k_uniq = _codes(monthly["kind"])
    months = pd.DatetimeIndex(monthly["month"])
    year = months.year.to_numpy().astype(np.int64)
    # group keys must come in runs: sort by (well, month) unless already so (the run's order)
    mi = months.asi8
    ok = (w_codes[1:] > w_codes[:-1]) | ((w_codes[1:] == w_codes[:-1]) & (mi[1:] >= mi[:-1]))
    order = None
    if not ok.all():
        order = np.lexsort((mi, w_codes))
        w_codes, k_codes, year = w_codes[order], k_codes[order], year[order]
    change = np.ones(n, dtype=bool)
    change[1:] = (w_codes[1:] != w_codes[:-1]) | (year[1:] != year[:-1]) | (k_codes[1:] != k_codes[:-1])
    starts = np.flatnonzero(change)
    ends = np.r_[starts[1:], n] - 1

    def values(name: str) -> np.ndarray:
        v = monthly[name].to_numpy(dtype=float, na_value=np.nan)
        return v if order is None else v[order]

    out = {
        "well_id": np.asarray(w_uniq, dtype=object)[w_codes[starts]],
        "year": year[starts],
        "kind": np.asarray(k_uniq, dtype=object)[k_codes[starts]],
        "months": np.diff(np.r_[starts, n]),
    }
    for name in ("oil_bbl", "gas_mcf", "water_bbl"):
        v = values(name)
        known = np.isfinite(v)
        total = np.add.reduceat(np.where(known, v, 0.0), starts)
        count = np.add.reduceat(known.astype(np.int64), starts)
        out[name] = np.where(count > 0, total, np.nan)
    out["cum_oil_bbl"] = values("cum_oil_bbl")[ends]
    return pd.DataFrame(out, columns=YEARLY_COLUMNS)


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
            value = "; ".join(f"{k}: {v}" for k, v in value.items()) or "none"
        rows.append((f"summary: {key}", value))
    settings = getattr(result, "settings", None)
    if settings is not None:
        items = settings.as_dict() if hasattr(settings, "as_dict") else dict(vars(settings))
        for key, value in items.items():
            if key == "as_of" and value is None:
                value = "the last month in the data"
            rows.append((f"input: {key}", "" if value is None else value))
    inputs = getattr(result, "inputs", None) or {}
    for key, value in inputs.items():
        rows.append((f"input: {key}", "" if value is None else value))
    if getattr(result, "probabilistic", None) is not None:
        rows.append(("probabilistic method", PROBABILISTIC_NOTE))
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


# A workbook is a zip of SpreadsheetML parts (ECMA-376 Part 1). The sheets are written here
# directly, cell XML built column-wise by Arrow's vectorised string kernels, because a
# cell-by-cell writer needs minutes for the millions of cells of a large field. Text is
# written as inline strings (t="inlineStr"), numbers as <v> values; no cell is ever a formula.
_NS_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
_NS_REL = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_NS_PKG_REL = "http://schemas.openxmlformats.org/package/2006/relationships"
_XML_HEAD = '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
_STYLES = (
    _XML_HEAD + f'<styleSheet xmlns="{_NS_MAIN}">'
    '<fonts count="2"><font><sz val="11"/><name val="Calibri"/></font>'
    '<font><b/><sz val="11"/><name val="Calibri"/></font></fonts>'
    '<fills count="2"><fill><patternFill patternType="none"/></fill>'
    '<fill><patternFill patternType="gray125"/></fill></fills>'
    '<borders count="1"><border><left/><right/><top/><bottom/><diagonal/></border></borders>'
    '<cellStyleXfs count="1"><xf numFmtId="0" fontId="0" fillId="0" borderId="0"/></cellStyleXfs>'
    '<cellXfs count="3"><xf numFmtId="0" fontId="0" fillId="0" borderId="0" xfId="0"/>'
    '<xf numFmtId="0" fontId="0" fillId="0" borderId="0" xfId="0" applyAlignment="1">'
    '<alignment wrapText="1" vertical="top"/></xf>'
    '<xf numFmtId="0" fontId="1" fillId="0" borderId="0" xfId="0" applyFont="1"/></cellXfs>'
    '<cellStyles count="1"><cellStyle name="Normal" xfId="0" builtinId="0"/></cellStyles>'
    "</styleSheet>"
)
_STYLE_WRAP, _STYLE_BOLD = 1, 2
#: Longest text a spreadsheet cell holds (Excel specification limit).
XLSX_MAX_TEXT = 32_767
_XLSX_BLOCK_ROWS = 100_000
# characters XML 1.0 does not allow (Python re syntax; RE2 syntax for Arrow)
_BAD_XML_RE = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")
_BAD_XML_RE2 = r"[\x00-\x08\x0b\x0c\x0e-\x1f\x{FFFE}\x{FFFF}]"


def _col_letter(j: int) -> str:
    s = ""
    j += 1
    while j:
        j, r = divmod(j - 1, 26)
        s = chr(65 + r) + s
    return s


def _xml_escape_text(value: str) -> str:
    value = value[:XLSX_MAX_TEXT]
    value = value.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;").replace("\r", "&#13;")
    return _BAD_XML_RE.sub("\ufffd", value)


def _arrow_text_xml(values: np.ndarray) -> Any:
    """Arrow string array of XML-escaped text ("" -> null) from an object array of str."""
    import pyarrow as pa
    import pyarrow.compute as pc

    arr = pa.array(values, type=pa.string())
    arr = pc.if_else(pc.equal(arr, ""), pa.scalar(None, pa.string()), arr)
    arr = pc.utf8_slice_codeunits(arr, 0, XLSX_MAX_TEXT)
    for old, new in (("&", "&amp;"), ("<", "&lt;"), (">", "&gt;"), ("\r", "&#13;")):
        arr = pc.replace_substring(arr, old, new)
    return pc.replace_substring_regex(arr, _BAD_XML_RE2, "\ufffd")


def _arrow_bytes(arr: Any) -> bytes:
    """The concatenated UTF-8 bytes of a non-null Arrow string array."""
    import pyarrow as pa

    if pa.types.is_large_string(arr.type):
        off_dtype = np.int64
    else:
        off_dtype = np.int32
    bufs = arr.buffers()
    offsets = np.frombuffer(bufs[1], dtype=off_dtype)[arr.offset : arr.offset + len(arr) + 1]
    if len(offsets) == 0:
        return b""
    return bytes(memoryview(bufs[2])[int(offsets[0]) : int(offsets[-1])])


def _rows_xml(prepared: pd.DataFrame, first_row: int) -> bytes:
    """``<row>`` elements (1-based row numbers from ``first_row``) of a prepared table block."""
    import pyarrow as pa
    import pyarrow.compute as pc

    n = len(prepared)
    if n == 0:
        return b""
    rownum = pc.cast(pa.array(np.arange(first_row, first_row + n, dtype=np.int64)), pa.string())
    cells = []
    for j, name in enumerate(prepared.columns):
        ref = _col_letter(j)
        s = prepared[name]
        if isinstance(s.dtype, pd.CategoricalDtype):
            # escape each distinct text once, then take per row
            x_cats = _arrow_text_xml(np.asarray(s.cat.categories, dtype=object))
            x = pc.take(x_cats, pa.array(s.cat.codes.to_numpy(dtype=np.int32)))
            cell = pc.binary_join_element_wise(
                '<c r="', ref, rownum, '" t="inlineStr"><is><t xml:space="preserve">', x, "</t></is></c>", "",
                null_handling="emit_null",
            )
        else:
            v = _arrow_column(s)
            cell = pc.binary_join_element_wise(
                '<c r="', ref, rownum, '"><v>', pc.cast(v, pa.string()), "</v></c>", "", null_handling="emit_null"
            )
        cells.append(pc.fill_null(cell, ""))
    rows = pc.binary_join_element_wise('<row r="', rownum, '">', *cells, "</row>", "")
    return _arrow_bytes(rows)


def _header_xml(columns: list[str], *, style: int = _STYLE_BOLD) -> str:
    cells = "".join(
        f'<c r="{_col_letter(j)}1" s="{style}" t="inlineStr"><is><t xml:space="preserve">'
        f"{_xml_escape_text(neutralise_text(str(c)))}</t></is></c>"
        for j, c in enumerate(columns)
    )
    return f'<row r="1">{cells}</row>'


def _sheet_open(*, freeze_header: bool, widths: dict[int, float] | None = None) -> str:
    view = (
        '<sheetViews><sheetView workbookViewId="0"><pane ySplit="1" topLeftCell="A2" '
        'activePane="bottomLeft" state="frozen"/></sheetView></sheetViews>'
        if freeze_header
        else '<sheetViews><sheetView workbookViewId="0"/></sheetViews>'
    )
    cols = ""
    if widths:
        cols = "<cols>" + "".join(
            f'<col min="{j + 1}" max="{j + 1}" width="{w:g}" customWidth="1"/>' for j, w in sorted(widths.items())
        ) + "</cols>"
    return _XML_HEAD + f'<worksheet xmlns="{_NS_MAIN}" xmlns:r="{_NS_REL}">{view}<sheetFormatPr defaultRowHeight="15"/>{cols}<sheetData>'


_SHEET_CLOSE = "</sheetData></worksheet>"


class TableParts:
    """A table held in parts outside memory (e.g. one file per block of wells), for the
    workbook writer: ``read()`` yields the parts (DataFrames with ``columns``) in order, one
    at a time, so a sheet is written without the whole table in memory.

    Parameters
    ----------
    columns : list of str
        Column names, in order.
    n_rows : int
        Rows over all parts.
    read : callable
        ``read()`` -> iterator of DataFrames.
    """

    def __init__(self, columns: list[str], n_rows: int, read: Any, start: int = 0, stop: int | None = None) -> None:
        self.columns = list(columns)
        self._read = read
        self._start = int(start)
        self._stop = int(n_rows) if stop is None else int(stop)
        self._n = int(n_rows)

    def __len__(self) -> int:
        return max(0, min(self._stop, self._n) - self._start)

    def window(self, start: int, stop: int) -> "TableParts":
        """Rows ``start`` to ``stop`` (of this view) as a new view."""
        a = self._start + int(start)
        return TableParts(self.columns, self._n, self._read, a, min(self._start + int(stop), self._stop))

    def parts(self):
        pos = 0
        for part in self._read():
            n = len(part)
            lo, hi = max(self._start - pos, 0), min(self._stop - pos, n)
            if hi > lo:
                yield part.iloc[lo:hi].reindex(columns=self.columns)
            pos += n
            if pos >= self._stop:
                break


def _write_table_sheet(fh: Any, table: Any, *, threads: int = 2) -> None:
    from collections import deque
    from concurrent.futures import ThreadPoolExecutor

    fh.write(_sheet_open(freeze_header=True).encode("utf-8"))
    fh.write(_header_xml([str(c) for c in table.columns]).encode("utf-8"))
    if isinstance(table, TableParts):  # one part in memory at a time
        row = 2
        for part in table.parts():
            for start in range(0, len(part), _XLSX_BLOCK_ROWS):
                sub = part.iloc[start : start + _XLSX_BLOCK_ROWS]
                fh.write(_rows_xml(prepare_table(sub), row))
                row += len(sub)
        fh.write(_SHEET_CLOSE.encode("utf-8"))
        return

    def block(start: int) -> bytes:
        return _rows_xml(prepare_table(table.iloc[start : start + _XLSX_BLOCK_ROWS]), start + 2)

    # blocks formatted in threads (Arrow kernels release the interpreter lock), written in
    # order while the zip stream compresses the previous one
    with ThreadPoolExecutor(max_workers=max(1, threads)) as pool:
        pending: deque = deque()
        for start in range(0, len(table), _XLSX_BLOCK_ROWS):
            pending.append(pool.submit(block, start))
            if len(pending) > threads:
                fh.write(pending.popleft().result())
        while pending:
            fh.write(pending.popleft().result())
    fh.write(_SHEET_CLOSE.encode("utf-8"))


def _write_cover_sheet(fh: Any, rows: list[tuple[str, Any]]) -> None:
    out = [_sheet_open(freeze_header=False, widths={0: 34, 1: 100})]
    for r, (k, v) in enumerate(rows, start=1):
        key = _xml_escape_text(neutralise_text(str(k)))
        cells = f'<c r="A{r}" s="{_STYLE_BOLD}" t="inlineStr"><is><t xml:space="preserve">{key}</t></is></c>'
        v = _cover_value(v)
        if isinstance(v, str):
            if v:
                cells += (f'<c r="B{r}" s="{_STYLE_WRAP}" t="inlineStr"><is><t xml:space="preserve">'
                          f"{_xml_escape_text(v)}</t></is></c>")
        else:
            num = int(v) if float(v).is_integer() and abs(v) < 2**53 else float(v)
            cells += f'<c r="B{r}" s="{_STYLE_WRAP}"><v>{num!r}</v></c>'
        out.append(f'<row r="{r}">{cells}</row>')
    out.append(_SHEET_CLOSE)
    fh.write("".join(out).encode("utf-8"))


def _write_workbook(target: Any, cover_rows: list[tuple[str, Any]], sheets: list[tuple[str, pd.DataFrame]]) -> None:
    """Write an .xlsx package: the cover sheet then one worksheet per table."""
    import zipfile

    names = ["cover"] + [n for n, _ in sheets]
    n = len(names)
    content_types = (
        _XML_HEAD + '<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
        '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.relationships+xml"/>'
        '<Default Extension="xml" ContentType="application/xml"/>'
        '<Override PartName="/xl/workbook.xml" '
        'ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml"/>'
        '<Override PartName="/xl/styles.xml" '
        'ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.styles+xml"/>'
        + "".join(
            f'<Override PartName="/xl/worksheets/sheet{i}.xml" '
            'ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"/>'
            for i in range(1, n + 1)
        )
        + "</Types>"
    )
    root_rels = (
        _XML_HEAD + f'<Relationships xmlns="{_NS_PKG_REL}"><Relationship Id="rId1" '
        f'Type="{_NS_REL}/officeDocument" Target="xl/workbook.xml"/></Relationships>'
    )
    workbook = (
        _XML_HEAD + f'<workbook xmlns="{_NS_MAIN}" xmlns:r="{_NS_REL}"><bookViews><workbookView/></bookViews><sheets>'
        + "".join(
            f'<sheet name="{_xml_escape_text(nm)}" sheetId="{i}" r:id="rId{i}"/>' for i, nm in enumerate(names, start=1)
        )
        + "</sheets></workbook>"
    )
    wb_rels = (
        _XML_HEAD + f'<Relationships xmlns="{_NS_PKG_REL}">'
        + "".join(
            f'<Relationship Id="rId{i}" Type="{_NS_REL}/worksheet" Target="worksheets/sheet{i}.xml"/>'
            for i in range(1, n + 1)
        )
        + f'<Relationship Id="rId{n + 1}" Type="{_NS_REL}/styles" Target="styles.xml"/></Relationships>'
    )
    with zipfile.ZipFile(target, "w", compression=zipfile.ZIP_DEFLATED, compresslevel=1) as zf:
        zf.writestr("[Content_Types].xml", content_types)
        zf.writestr("_rels/.rels", root_rels)
        zf.writestr("xl/workbook.xml", workbook)
        zf.writestr("xl/_rels/workbook.xml.rels", wb_rels)
        zf.writestr("xl/styles.xml", _STYLES)
        with zf.open("xl/worksheets/sheet1.xml", "w", force_zip64=True) as fh:
            _write_cover_sheet(fh, cover_rows)
        for i, (_, table) in enumerate(sheets, start=2):
            with zf.open(f"xl/worksheets/sheet{i}.xml", "w", force_zip64=True) as fh:
                _write_table_sheet(fh, table)


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

    sheets: list[tuple[str, pd.DataFrame]] = [("wells", tables["wells"])]
    if volume_sheet is not None:
        sheets.append(volume_sheet)
    sheets += [("units", tables["units"]), ("load_report", tables["load_report"])]
    if "field_percentiles" in tables:
        sheets.append(("field_percentiles", tables["field_percentiles"]))
    split: list[tuple[str, pd.DataFrame]] = []
    for name, table in sheets:
        if len(table) <= cap:
            split.append((name, table))
        else:  # a table larger than a worksheet goes over numbered sheets
            for i, start in enumerate(range(0, len(table), cap), start=1):
                split.append((f"{name}_{i}", table.iloc[start : start + cap]))
    _write_workbook(target if not hasattr(target, "write") else target, _cover_rows(result, notes), split)
    return notes


def write_xlsx_parts(
    target: str | Path | io.BytesIO,
    cover_rows: list[tuple[str, Any]],
    *,
    wells: Any,
    monthly: Any | None,
    yearly: Any | None,
    n_monthly: int,
    n_yearly: int,
    units: pd.DataFrame,
    load_report: Any,
    row_limit: int = XLSX_MAX_ROWS,
) -> list[str]:
    """The workbook of :func:`write_xlsx` from tables held in parts (:class:`TableParts`) or
    in memory: the streamed run's writer. Same sheets, same volume rule: the monthly table
    when it fits a worksheet, else yearly volumes per well when those fit, else no volume
    sheet (the cover sheet says which and why). ``monthly``/``yearly`` may be None when
    they do not fit (the caller stops keeping them past the limit). Returns the notes added
    to the cover sheet (already in the written workbook).
    """
    cap = int(row_limit) - 1
    notes: list[str] = []
    if n_monthly <= cap and monthly is not None:
        volume_sheet = ("forecast_monthly", monthly)
    elif n_yearly <= cap and yearly is not None:
        notes.append(
            f"The monthly table has {n_monthly:,} rows, more than a worksheet holds "
            f"({cap:,} data rows); sheet 'yearly' carries yearly volumes per well and kind "
            f"instead. {CSV_FILES['monthly']} carries every month."
        )
        volume_sheet = ("yearly", yearly)
    else:
        notes.append(
            f"The monthly table has {n_monthly:,} rows and the yearly table {n_yearly:,}, "
            f"both more than a worksheet holds ({cap:,} data rows); the workbook carries no "
            f"volume sheet. {CSV_FILES['monthly']} carries every month."
        )
        volume_sheet = None
    sheets: list[tuple[str, Any]] = [("wells", wells)]
    if volume_sheet is not None:
        sheets.append(volume_sheet)
    sheets += [("units", units), ("load_report", load_report)]
    split: list[tuple[str, Any]] = []
    for name, table in sheets:
        if len(table) <= cap:
            split.append((name, table))
        else:  # a table larger than a worksheet goes over numbered sheets
            for i, start in enumerate(range(0, len(table), cap), start=1):
                part = (table.window(start, start + cap) if isinstance(table, TableParts)
                        else table.iloc[start : start + cap])
                split.append((f"{name}_{i}", part))
    _write_workbook(target, list(cover_rows) + [("note", n) for n in notes], split)
    return notes


def cover_rows(result: Any, notes: list[str]) -> list[tuple[str, Any]]:
    """The cover sheet's rows of a run (or of a run-like object with ``version``, ``as_of``,
    ``summary``, ``settings``, ``inputs``), with ``notes`` at the end."""
    return _cover_rows(result, notes)


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
    ``load_report.csv``, ``field_percentiles.csv`` (when the run has probabilistic forecasts)
    and ``forecast.xlsx``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths: dict[str, Path] = {}
    tables = _result_tables(result)
    steps = len(tables) + (1 if xlsx else 0)
    for i, (key, table) in enumerate(tables.items()):
        if progress is not None:
            progress(i / steps, f"writing {_file_name(key)}")
        p = out / _file_name(key)
        write_csv(table, p)
        paths[_file_name(key)] = p
    if xlsx:
        if progress is not None:
            progress(len(tables) / steps, f"writing {XLSX_FILE}")
        p = out / XLSX_FILE
        write_xlsx(result, p, row_limit=row_limit)
        paths[XLSX_FILE] = p
    if progress is not None:
        progress(1.0, "outputs written")
    return paths
