"""Production loader: a user's monthly production file -> the tidy monthly table + load report.

One public entry point, :func:`load_production`, reads CSV (comma, semicolon or tab; UTF-8
with or without BOM, UTF-16 with BOM, latin-1 fallback) or XLSX (first or named sheet) in the
long layout (one row per well and month), recognises the columns from their headers, converts
metric units to field units (:mod:`core.units`), normalises every date to its month, derives
rates, GOR, water cut and cumulatives, and records every problem in the load report.

Treatments of bad data (each gives a load-report line: row, column, value, action, reason):

==========================================  =========  ==========================================
case                                        action     treatment
==========================================  =========  ==========================================
missing well id                             rejected   row dropped
unparseable / implausible date              rejected   row dropped
month after ``as_of``                       rejected   row dropped (future production)
oil blank or "n/a"                          rejected   row dropped (no oil volume is not zero)
text in oil/gas/water/days on               rejected   row dropped (a corrupted row is not used)
negative oil/gas/water/days on              rejected   row dropped (accounting adjustment?)
gas or water blank or "n/a"                 altered    set to 0 (nothing reported = none produced)
days on blank or "n/a"                      altered    calendar days, ``days_on_given`` False
days on above the days in the month         altered    capped at the days in the month
days on 0 with a volume above 0             altered    calendar days, ``days_on_given`` False
pressure text, <= 0 or above 30,000 psia    altered    pressure set to NaN, row kept
exact duplicate well-month                  rejected   later copies dropped, first kept
conflicting duplicate well-month            rejected   every copy dropped (no rule can pick one)
rows out of month order                     info       sorted; one line per well
missing months inside a well's life         info       not filled; one line per well (gaps)
well with one month / all volumes zero      info       kept; one line per well (not forecastable)
truncated last line (fewer fields)          rejected   row dropped
row with extra non-empty fields             rejected   row dropped (file read row by row)
volume above 1e9 per month                  rejected   row dropped (implausible)
XLSX formula without a saved value          rejected   row dropped (formulas are never evaluated)
pressure above the well's initial pressure  info       kept as given
gas zero in every month with oil            info       kept (gas may not be metered)
fluid column not constant within a well     info       first value (in month order) used
fluid value outside its plausible range     altered    set to NaN
==========================================  =========  ==========================================

A row of unit names right under the header ("", "", "bbl", "Mcf", ...) declares the column
units and is not a data row. Entirely blank lines are not rows.

A file that cannot be read at all raises :class:`core.validation.InputError` with one message
naming the file and the problem.
"""

from __future__ import annotations

import csv
import datetime as _dt
import hashlib
import io
import os
import re
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping

import numpy as np
import pandas as pd

from core import units as U
from core.validation import InputError

# ---------------------------------------------------------------------------------------------
# Constants
# ---------------------------------------------------------------------------------------------

#: Canonical production-file fields (mapping keys) in output order.
PRODUCTION_FIELDS = ("well_id", "month", "oil_bbl", "gas_mcf", "water_bbl", "days_on", "pressure_psia", "unit")
#: Well-header fields (mapping keys).
HEADER_FIELDS = ("api_gravity", "gas_specific_gravity", "reservoir_temp_f", "initial_pressure_psia", "bubble_point_psia")
CANONICAL_FIELDS = PRODUCTION_FIELDS + HEADER_FIELDS

PRODUCTION_COLUMNS = [
    "well_id", "month", "unit", "oil_bbl", "gas_mcf", "water_bbl", "days_on", "days_on_given",
    "days_in_month", "pressure_psia", "oil_rate_bbl_d", "gas_rate_mcf_d", "water_rate_bbl_d",
    "oil_rate_cal_bbl_d", "gor_scf_stb", "water_cut", "cum_oil_bbl", "cum_gas_mcf", "cum_water_bbl",
    "source_row",
]
WELL_COLUMNS = ["well_id", "unit", *HEADER_FIELDS]
REPORT_COLUMNS = ["file", "row", "well_id", "column", "value", "action", "reason"]

#: Upper bound for a plausible reservoir pressure; deep HPHT reservoirs reach ~25,000-30,000 psia
#: (common practice). Pressures above it, or <= 0, are dropped from the row.
PRESSURE_MAX_PSIA = 30000.0
#: Plausible ranges of well-header values (common practice; wider than any correlation's range).
HEADER_BOUNDS = {
    "api_gravity": (0.0, 100.0, "degAPI"),
    "gas_specific_gravity": (0.5, 3.0, "-"),
    "reservoir_temp_f": (32.0, 600.0, "degF"),
    "initial_pressure_psia": (14.0, PRESSURE_MAX_PSIA, "psia"),
    "bubble_point_psia": (14.0, PRESSURE_MAX_PSIA, "psia"),
}
#: Largest plausible monthly volume of one well (bbl or Mcf; days on in d are bounded by the
#: month). 1e9 bbl/month is ~33 million bbl/d, far above any well (common practice bound).
VOLUME_MAX = 1.0e9
DEFAULT_MAX_BYTES = 200 * 1024 * 1024
#: A header line longer than this is not a table header.
MAX_HEADER_BYTES = 64 * 1024
#: Rows scanned for the header line (title lines above it are skipped and reported).
HEADER_SCAN_ROWS = 30
#: Excel's day 0 for the 1900 date system, allowing for its 1900 leap-year bug (serials >= 61).
EXCEL_EPOCH = pd.Timestamp("1899-12-30")
EXCEL_SERIAL_MIN, EXCEL_SERIAL_MAX = 367, 73050  # 1901-01-01 .. 2099-12-31
YEAR_MIN, YEAR_MAX = 1900, 2100
#: Tokens that mean "no value" (case-insensitive), besides a blank cell.
NA_TOKENS = frozenset(
    {"n/a", "na", "-", "--", "---", "null", "none", "nan", "#n/a", "n.a.", "nil", "missing", "#value!",
     "#div/0!", "#ref!", "#num!", "#null!", "#name?", "?", "."}
)
_MONTHS = {m: i for i, m in enumerate(
    ["jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec"], start=1)}

# status codes of parsed numeric cells
_OK, _BLANK, _NA, _TEXT, _FORMULA = 0, 1, 2, 3, 4

# ---------------------------------------------------------------------------------------------
# Header recognition
# ---------------------------------------------------------------------------------------------

# Exact aliases (normalised header without its unit), in priority order per field.
_ALIASES: dict[str, tuple[str, ...]] = {
    "well_id": ("well id", "wellid", "well", "well name", "wellname", "well no", "well number",
                "well identifier", "uwi", "api no", "api number", "api well number", "api well no",
                "well api", "completion", "name"),
    "month": ("month", "date", "prod date", "production date", "production month", "prod month",
              "period", "prod period", "report date", "yearmonth", "year month", "yyyymm", "month year",
              "date month"),
    "oil_bbl": ("oil", "oil volume", "oil vol", "oil prod", "oil production", "oil produced", "monthly oil",
                "oil monthly", "net oil", "prod oil", "produced oil"),
    "gas_mcf": ("gas", "gas volume", "gas vol", "gas prod", "gas production", "gas produced", "monthly gas",
                "gas monthly", "net gas", "prod gas", "produced gas"),
    "water_bbl": ("water", "water volume", "water vol", "water prod", "water production", "water produced",
                  "wtr", "monthly water", "prod water", "produced water"),
    "days_on": ("days on", "days", "prod days", "producing days", "days produced", "on days",
                "days on production", "days producing", "days online", "hours on", "prod hours",
                "producing hours", "hours", "hrs on"),
    "pressure_psia": ("pressure", "avg reservoir pressure", "average reservoir pressure", "reservoir pressure",
                      "res pressure", "avg res pressure", "static bhp", "sbhp", "static bottom hole pressure",
                      "static bottomhole pressure", "bhp", "bottom hole pressure", "bottomhole pressure",
                      "pavg", "p avg", "avg pressure", "average pressure", "shut in bhp", "sibhp",
                      "survey pressure"),
    "unit": ("unit", "reservoir unit", "res unit", "reservoir", "zone", "formation", "pool", "horizon",
             "producing zone", "producing formation", "layer"),
    "api_gravity": ("api gravity", "oil gravity", "gravity api", "api grav", "oil api", "deg api",
                    "stock tank api", "api oil gravity", "oil api gravity"),
    "gas_specific_gravity": ("gas gravity", "gas specific gravity", "gas sg", "sg gas", "gas sp gr",
                             "specific gravity gas", "gamma g", "gas grav", "gas spec grav"),
    "reservoir_temp_f": ("reservoir temperature", "reservoir temp", "res temp", "temperature", "temp", "bht",
                         "bottom hole temperature", "formation temperature", "tres", "t res", "t f"),
    "initial_pressure_psia": ("initial pressure", "initial reservoir pressure", "original pressure", "pi",
                              "p initial", "original reservoir pressure", "initial res pressure", "p i"),
    "bubble_point_psia": ("bubble point", "bubble point pressure", "bubblepoint", "bubblepoint pressure", "pb",
                          "psat", "saturation pressure", "bubble pressure", "p b"),
}
_ALIAS_INDEX: dict[str, tuple[str, int]] = {}
for _f, _names in _ALIASES.items():
    for _i, _n in enumerate(_names):
        _ALIAS_INDEX.setdefault(_n, (_f, _i))

# Headers that look like a field but are not its monthly volume / survey value.
_EXCLUDE_TOKENS = frozenset({"cum", "cumulative", "rate", "inj", "injection", "injected", "cut", "ratio", "gor",
                             "wor", "wgr", "yield", "flowing", "fbhp", "pwf", "tubing", "casing", "thp", "chp",
                             "line", "separator", "lift", "fuel", "flared", "vented", "sales", "forecast"})
_USER_KEY_ALIASES = {"oil": "oil_bbl", "gas": "gas_mcf", "water": "water_bbl", "pressure": "pressure_psia",
                     "date": "month", "well": "well_id", "days": "days_on", "reservoir_unit": "unit",
                     "api": "api_gravity", "gas_gravity": "gas_specific_gravity", "temperature": "reservoir_temp_f",
                     "reservoir_temp": "reservoir_temp_f", "initial_pressure": "initial_pressure_psia",
                     "bubble_point": "bubble_point_psia"}


def _norm(text: str) -> str:
    t = str(text).replace("\ufeff", "").replace("#", " no ").replace("%", " pct ").lower()
    t = re.sub(r"[^a-z0-9]+", " ", t)
    return " ".join(t.split())


def _unit_key(text: str) -> str:
    t = str(text).lower().replace("³", "3").replace("°", "deg").replace("º", "deg")
    t = re.sub(r"/(month|mo|mth|mon)$", "", t.strip())
    t = re.sub(r"per month$", "", t).strip()
    return re.sub(r"[\s^_.\-]+", "", t)


def _split_header(header: Any) -> tuple[str, str | None, str | None]:
    """Return (normalised stem, unit key or None, raw unit text or None) of a column header."""
    raw = str(header)
    m = re.search(r"[\(\[\{]([^\)\]\}]*)[\)\]\}]", raw)
    if m:
        unit_txt = m.group(1).strip()
        stem = _norm(raw[: m.start()] + " " + raw[m.end():])
        key = _unit_key(unit_txt)
        return stem, (key if key in U.UNIT_TOKENS else None), unit_txt
    stem = _norm(raw)
    if stem in _ALIAS_INDEX:
        return stem, None, None
    toks = stem.split()
    for k in (3, 2, 1):
        if len(toks) > k:
            cand = "".join(toks[-k:])
            if cand in U.UNIT_TOKENS:
                return " ".join(toks[:-k]), cand, " ".join(toks[-k:])
    return stem, None, None


def _is_rate(header: Any, unit_txt: str | None) -> bool:
    h = str(header).lower()
    return bool(re.search(r"/\s*(d|day|cd|pd)\b|\bper day\b|\bbopd\b|\bbwpd\b|\bmcfd\b|\bmcf/d\b|\bm3/d\b", h)) or (
        unit_txt is not None and bool(re.search(r"/\s*d", unit_txt.lower()))
    )


def _field_of(header: Any) -> tuple[str | None, int]:
    """Canonical field of one header and a priority (lower is better); (None, 999) when none."""
    stem, _, unit_txt = _split_header(header)
    if _is_rate(header, unit_txt):
        return None, 999
    hit = _ALIAS_INDEX.get(stem)
    if hit is not None:
        return hit
    toks = set(stem.split())
    if not toks or toks & _EXCLUDE_TOKENS:
        return None, 999
    if "bubble" in toks:
        return "bubble_point_psia", 100
    if ("initial" in toks or "original" in toks) and "pressure" in toks:
        return "initial_pressure_psia", 100
    if "gas" in toks and toks & {"gravity", "sg", "specific", "grav"}:
        return "gas_specific_gravity", 100
    if "api" in toks and toks & {"gravity", "grav", "oil"}:
        return "api_gravity", 100
    if toks & {"temperature", "temp"}:
        return "reservoir_temp_f", 100
    if "oil" in toks and not toks & {"gravity", "api", "sg", "density", "gas", "water"}:
        return "oil_bbl", 100
    if "gas" in toks and not toks & {"oil", "water", "gravity"}:
        return "gas_mcf", 100
    if toks & {"water", "wtr"} and not toks & {"oil", "gas", "salinity"}:
        return "water_bbl", 100
    if toks & {"days", "day", "hours", "hrs"}:
        return "days_on", 100
    if "pressure" in toks or "bhp" in toks:
        return "pressure_psia", 100
    if "well" in toks or "uwi" in toks:
        return "well_id", 100
    if toks & {"date", "month"}:
        return "month", 100
    if toks & {"reservoir", "zone", "formation", "pool"}:
        return "unit", 100
    return None, 999


def detect_columns(columns: Any) -> dict[str, str]:
    """Recognise the canonical fields among a file's column headers.

    Parameters
    ----------
    columns : iterable of str
        Column headers as in the file.

    Returns
    -------
    dict
        Canonical field name (``well_id``, ``month``, ``oil_bbl``, ``gas_mcf``, ``water_bbl``,
        ``days_on``, ``pressure_psia``, ``unit``, ``api_gravity``, ``gas_specific_gravity``,
        ``reservoir_temp_f``, ``initial_pressure_psia``, ``bubble_point_psia``) -> source header.
        When several headers fit one field, the best-ranked (exact alias first, then alias order,
        then left-most) wins. The bare header "API" is ambiguous (well number or oil gravity)
        and is not mapped.

    Notes
    -----
    Recognition ignores case, spacing, punctuation and unit suffixes ("Oil (bbl)", "OIL_BBL",
    "oil volume", "Gas [e3m3]"); rate columns ("bbl/d", "BOPD") and cumulative, injection or
    ratio columns are never taken for monthly volumes.
    """
    best: dict[str, tuple[int, int, str]] = {}
    for pos, col in enumerate(columns):
        f, prio = _field_of(col)
        if f is None:
            continue
        if f not in best or (prio, pos) < best[f][:2]:
            best[f] = (prio, pos, col)
    return {f: best[f][2] for f in CANONICAL_FIELDS if f in best}


# ---------------------------------------------------------------------------------------------
# Result types
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LoadResult:
    """A loaded production file: tidy monthly table, well header, load report (DEVELOPERS.md)."""

    production: pd.DataFrame
    wells: pd.DataFrame
    report: pd.DataFrame
    mapping: dict
    rows_read: int
    rows_used: int
    rows_rejected: int
    file_name: str
    content_sha256: str
    pressure_kind: str
    messages: list = field(default_factory=list)


@dataclass(frozen=True)
class WellHeaderLoad:
    """A loaded well-header file: one row per well (``WELL_COLUMNS``) and its report."""

    wells: pd.DataFrame
    report: pd.DataFrame
    mapping: dict
    file_name: str
    messages: list = field(default_factory=list)


@dataclass(frozen=True)
class RawTable:
    """A file read as a table before interpretation.

    ``frame`` has the file's headers as columns; ``first_row`` is the file row number
    (1-based line or sheet row) of ``frame``'s first row; ``row_numbers`` the file row of
    every frame row.
    """

    frame: pd.DataFrame
    row_numbers: np.ndarray
    file_name: str
    kind: str
    content_sha256: str
    decimal_comma: bool
    messages: list = field(default_factory=list)
    extra_report: pd.DataFrame | None = None


# ---------------------------------------------------------------------------------------------
# Reading bytes and tables
# ---------------------------------------------------------------------------------------------


def _read_source(source: Any, file_name: str | None, max_bytes: int) -> tuple[bytes, str]:
    if isinstance(source, (bytes, bytearray, memoryview)):
        raw = bytes(source)
        name = file_name or "uploaded file"
    elif isinstance(source, (str, os.PathLike)):
        p = Path(source)
        name = file_name or p.name
        if not p.is_file():
            raise InputError(f"{name}: file not found ({p})")
        size = p.stat().st_size
        if size > max_bytes:
            raise InputError(f"{name}: file is {size:,} bytes, over the limit of {max_bytes:,} bytes (max_bytes)")
        try:
            raw = p.read_bytes()
        except OSError as exc:
            raise InputError(f"{name}: cannot be read ({exc.strerror or type(exc).__name__})") from None
    elif hasattr(source, "read"):
        name = file_name or str(getattr(source, "name", "uploaded file"))
        raw = source.read(max_bytes + 1)
        if isinstance(raw, str):
            raw = raw.encode("utf-8")
    else:
        raise InputError(f"source must be a file path or bytes, got {type(source).__name__}")
    if len(raw) > max_bytes:
        raise InputError(f"{name}: file is {len(raw):,} bytes or more, over the limit of {max_bytes:,} bytes (max_bytes)")
    if len(raw) == 0:
        raise InputError(f"{name}: the file is empty (0 bytes)")
    return raw, name


def _decode(raw: bytes, name: str, messages: list) -> tuple[str, str]:
    """Return (text, encoding label)."""
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return raw.decode("utf-16"), "utf-16"
        except UnicodeDecodeError:
            raise InputError(f"{name}: starts with a UTF-16 mark but is not valid UTF-16 text") from None
    head = raw[:65536]
    if b"\x00" in head:
        raise InputError(f"{name}: binary content (NUL bytes), not a CSV text file or XLSX workbook")
    ctrl = sum(head.count(bytes([c])) for c in (*range(0, 9), 11, 12, *range(14, 32), 127))
    if ctrl > max(8, len(head) // 100):
        raise InputError(f"{name}: binary content (control characters), not a CSV text file or XLSX workbook")
    try:
        text = raw.decode("utf-8-sig")
        return text, "utf-8"
    except UnicodeDecodeError as exc:
        messages.append(f"{name}: not valid UTF-8 (byte {exc.start}); read as latin-1 (ISO-8859-1)")
        return raw.decode("latin-1"), "latin-1"


def _head_table(text: str, name: str, mapping) -> tuple[str, list[list[str]], int, list[str]]:
    """Delimiter, the first lines split by it, the header line index and the header of a
    decoded delimited text (the first ``HEADER_SCAN_ROWS`` + 50 lines are read).

    The header line index counts blank lines too (csv.reader yields [] for them). Raises
    :class:`InputError` when there are no text lines or no header of two or more columns.
    """
    head_lines: list[str] = []
    pos = 0
    while len(head_lines) < HEADER_SCAN_ROWS + 50 and pos < len(text):
        j = text.find("\n", pos)
        j = len(text) if j < 0 else j
        head_lines.append(text[pos:min(j, pos + MAX_HEADER_BYTES)].rstrip("\r"))
        pos = j + 1
    non_blank = [ln for ln in head_lines if ln.strip()]
    if not non_blank:
        raise InputError(f"{name}: the file has no text lines (only blanks)")
    delim = _sniff_delimiter(non_blank)
    try:
        sample = list(csv.reader(head_lines, delimiter=delim))
    except csv.Error as exc:
        raise InputError(f"{name}: the first lines cannot be read as {delim!r}-delimited text ({exc})") from None
    hdr = _find_header(sample, mapping)
    header = _dedupe(sample[hdr]) if sample[hdr] else []
    if len(header) < 2:
        raise InputError(f"{name}: no table header found (the first line has {len(header)} column(s) "
                         f"with delimiter {delim!r})")
    return delim, sample, hdr, header


def _sniff_delimiter(lines: list[str]) -> str:
    best, best_score = ",", (-1, -1)
    for d in (",", ";", "\t", "|"):
        try:
            counts = [len(r) for r in csv.reader(lines, delimiter=d) if len(r) > 1]
        except csv.Error:
            continue
        if not counts:
            continue
        vals, freq = np.unique(counts, return_counts=True)
        mode = int(vals[np.argmax(freq)])
        score = (int(freq.max()), mode)
        if score > best_score:
            best, best_score = d, score
    return best


_RE_EU = re.compile(r"^[+-]?\d+,(\d{1,2}|\d{4,})$|^[+-]?\d{1,3}(\.\d{3})+,\d+$|^[+-]?\d+,\d+[eE][+-]?\d+$")
_RE_US = re.compile(r"^[+-]?\d+\.(\d{1,2}|\d{4,})$|^[+-]?\d{1,3}(,\d{3})+\.\d+$|^[+-]?\d+\.\d+[eE][+-]?\d+$")


def _decimal_comma(rows: list[list[str]], delim: str) -> bool:
    if delim == ",":
        return False
    cells = [c.strip() for r in rows for c in r]
    eu = sum(1 for c in cells if _RE_EU.match(c))
    us = sum(1 for c in cells if _RE_US.match(c))
    if us:
        return False
    if eu:
        return True
    return delim == ";" and any(re.match(r"^[+-]?\d+,\d+$", c) for c in cells)


def _find_header(rows: list[list[Any]], mapping: Mapping[str, str] | None) -> int:
    """Index of the first row that holds the required headers (0 when none does)."""
    user_cols = set((mapping or {}).values())
    for i, r in enumerate(rows[:HEADER_SCAN_ROWS]):
        cells = [str(c) for c in r if c is not None and str(c).strip() != ""]
        if len(cells) < 2:
            continue
        found = detect_columns(cells)
        have = set(found) | {k for k, v in (mapping or {}).items() if v in cells}
        if {"well_id", "month", "oil_bbl"} <= {_USER_KEY_ALIASES.get(k, k) for k in have}:
            return i
        if user_cols and user_cols <= set(cells):
            return i
    return 0


def _dedupe(cols: list[str]) -> list[str]:
    seen: dict[str, int] = {}
    out = []
    for c in cols:
        c = str(c).strip() if c is not None else ""
        c = c or "column"
        if c in seen:
            seen[c] += 1
            out.append(f"{c}.{seen[c]}")
        else:
            seen[c] = 0
            out.append(c)
    return out


def _read_csv(raw: bytes, name: str, *, mapping: Mapping[str, str] | None,
              text_fields: Callable[[list[str]], set[str]] | None, nrows: int | None = None) -> RawTable:
    messages: list[str] = []
    sha = hashlib.sha256(raw).hexdigest()
    text, enc = _decode(raw, name, messages)
    cr_fixed = False
    if "\r" in text and text.count("\r") != text.count("\r\n"):
        # old Mac (CR-only) or mixed line ends: one line break convention for every reader
        text = text.replace("\r\n", "\n").replace("\r", "\n")
        cr_fixed = True
        messages.append(f"{name}: carriage-return line ends read as line breaks")
    nl = text.find("\n")
    first_len = len(text) if nl < 0 else nl
    if first_len > MAX_HEADER_BYTES:
        raise InputError(f"{name}: the first line is {first_len:,} characters long with no line break "
                         f"in the first {MAX_HEADER_BYTES:,}; not a delimited table")
    delim, sample, hdr, header = _head_table(text, name, mapping)
    if hdr:
        messages.append(f"{name}: {hdr} line(s) above the header skipped (header on line {hdr + 1})")
    dec = _decimal_comma(sample[hdr + 1:], delim)
    text_cols = set(text_fields(header)) if text_fields else set(header)
    dtype = {c: str for c in header if c in text_cols}
    kw = dict(sep=delim, header=None, names=header, skiprows=hdr + 1, dtype=dtype, keep_default_na=False,
              na_values=[""], skip_blank_lines=False, low_memory=False, quotechar='"', nrows=nrows,
              decimal="," if dec else ".")
    body = text if (enc != "utf-8" or cr_fixed) else None
    tail = text[-MAX_HEADER_BYTES:]
    del text  # the parser reads the bytes (or body); the rare slow path decodes again
    try:
        if body is None:
            frame = pd.read_csv(io.BytesIO(raw), encoding="utf-8-sig", **kw)
        else:
            frame = pd.read_csv(io.StringIO(body), **kw)
        extra = None
        rownum = np.arange(len(frame), dtype=np.int64) + hdr + 2
    except (pd.errors.ParserError, ValueError, csv.Error) as exc:
        messages.append(f"{name}: rows with extra fields found ({(str(exc).splitlines() or [''])[0][:120]}); "
                        "read row by row")
        try:
            full = body if body is not None else raw.decode("utf-8-sig")
            frame, extra, rownum = _read_csv_slow(full, name, delim, header, hdr, dtype, dec, nrows)
            del full
        except csv.Error as exc2:
            raise InputError(f"{name}: cannot be read as {delim!r}-delimited text ({exc2})") from None
    # truncated last line: the file does not end with a line break and the last row is short
    del body
    if len(frame) and not tail.endswith(("\n", "\r")) and extra is None:
        last = tail[tail.rfind("\n") + 1:]
        flds = next(csv.reader([last], delimiter=delim), [])
        if 0 < len(flds) < len(header):
            trunc = pd.DataFrame({"file": [name], "row": [int(rownum[-1])], "well_id": [flds[0].strip()],
                                  "column": [header[len(flds) - 1]], "value": [last[:80]],
                                  "action": ["rejected"],
                                  "reason": [f"truncated last line: {len(flds)} of {len(header)} fields"]})
            frame = frame.iloc[:-1]
            rownum = rownum[:-1]
            extra = trunc
    # entirely blank rows carry no data: not counted as rows
    blank = frame.isna().all(axis=1).to_numpy()
    if blank.any():
        messages.append(f"{name}: {int(blank.sum())} blank line(s) ignored")
        frame = frame.loc[~blank]
        rownum = rownum[~blank]
    frame = frame.reset_index(drop=True)
    d_label = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}[delim]
    messages.insert(0, f"{name}: CSV, {d_label}-delimited, {enc}"
                       + (", decimal comma" if dec else "") + f", {len(frame):,} data row(s)")
    return RawTable(frame, rownum, name, "csv", sha, dec, messages, extra)


@dataclass(frozen=True)
class CsvLayout:
    """How a delimited production file is laid out, detected once on its first part
    (:func:`csv_layout`) and applied to every later chunk by the streamed run.

    ``header_line`` is the 0-based line index of the header (lines above it are skipped);
    ``dtype`` the columns read as text (the loader's rule: every column not mapped to a
    number); ``encoding`` "utf-8" or "latin-1".
    """

    delimiter: str
    header: list
    header_line: int
    decimal_comma: bool
    encoding: str
    dtype: dict
    messages: list = field(default_factory=list)


def csv_layout(head: bytes, name: str, *, mapping: Mapping[str, str] | None = None,
               unit_column: str | None = None) -> CsvLayout:
    """Detect delimiter, header line, columns and decimal mark on the first part of a CSV
    file, as :func:`load_production` does on the whole file (same helpers, same rules).

    Parameters
    ----------
    head : bytes
        The first part of the file (whole lines; at least the header and the
        ``HEADER_SCAN_ROWS + 50`` lines the loader sniffs).
    name : str
        File name for messages.
    mapping, unit_column : optional
        As for :func:`load_production` (they decide which columns are read as text).

    Raises
    ------
    InputError
        The part read holds no table header (the loader's messages).
    """
    messages: list[str] = []
    text, enc = _decode(head, name, messages)
    delim, sample, hdr, header = _head_table(text, name, mapping)
    dec = _decimal_comma(sample[hdr + 1:], delim)
    text_cols = set(_text_fields_for(mapping, unit_column)(header))
    dtype = {c: str for c in header if c in text_cols}
    return CsvLayout(delim, header, hdr, dec, enc, dtype, messages)


def sniff_chunk(lines: list[str], delimiter: str) -> tuple[str, bool]:
    """Delimiter and decimal mark the loader's rules find on a chunk's lines (to check a
    later chunk against the layout of the file's first part)."""
    non_blank = [ln for ln in lines if ln.strip()]
    if not non_blank:
        return delimiter, False
    d = _sniff_delimiter(non_blank)
    try:
        rows = list(csv.reader(non_blank, delimiter=d))
    except csv.Error:
        rows = []
    return d, _decimal_comma(rows, d)


def _read_csv_slow(text: str, name: str, delim: str, header: list[str], hdr: int, dtype: dict, dec: bool,
                   nrows: int | None) -> tuple[pd.DataFrame, pd.DataFrame | None, np.ndarray]:
    """Row-by-row fallback for files with ragged rows (rare path; rows with extra fields rejected)."""
    n = len(header)
    keep: list[list[str]] = []
    lines: list[int] = []
    bad: list[tuple[int, str, str]] = []
    reader = csv.reader(io.StringIO(text, newline=None), delimiter=delim)
    for i, r in enumerate(reader):
        if i <= hdr:
            continue
        if nrows is not None and len(keep) >= nrows:
            break
        line = reader.line_num
        if len(r) > n and any(c.strip() for c in r[n:]):
            bad.append((line, r[0].strip() if r else "", f"{len(r)} fields, header has {n}"))
            continue
        keep.append((r + [""] * n)[:n])
        lines.append(line)
    frame = pd.DataFrame(keep, columns=header, dtype=object)
    frame = frame.where(frame.apply(lambda c: c.str.strip() != ""), np.nan)
    extra = None
    if bad:
        extra = pd.DataFrame({"file": name, "row": [b[0] for b in bad], "well_id": [b[1] for b in bad],
                              "column": "", "value": "", "action": "rejected",
                              "reason": [f"wrong number of fields: {b[2]}" for b in bad]})
    return frame, extra, np.asarray(lines, dtype=np.int64)


def _cell_str(v: Any) -> Any:
    if v is None:
        return np.nan
    if isinstance(v, bool):
        return "TRUE" if v else "FALSE"
    if isinstance(v, float):
        if not np.isfinite(v):
            return str(v)
        return str(int(v)) if v.is_integer() and abs(v) < 1e15 else repr(v)
    if isinstance(v, int):
        return str(v)
    if isinstance(v, (_dt.datetime, _dt.date)):
        return v.isoformat()
    if isinstance(v, _dt.time):
        return v.isoformat()
    s = str(v)
    return s if s.strip() else np.nan


def _read_xlsx(raw: bytes, name: str, *, sheet: str | int | None, mapping: Mapping[str, str] | None,
               max_bytes: int, nrows: int | None = None) -> RawTable:
    import openpyxl  # local: only XLSX needs it

    sha = hashlib.sha256(raw).hexdigest()
    try:
        zf = zipfile.ZipFile(io.BytesIO(raw))
        infos = zf.infolist()
    except Exception:  # noqa: BLE001 - any failure to open the archive is one clear message
        raise InputError(f"{name}: not a valid XLSX workbook (not a readable zip archive)") from None
    names = {i.filename for i in infos}
    if "xl/workbook.xml" not in names:
        raise InputError(f"{name}: a zip archive but not an XLSX workbook (no xl/workbook.xml inside)")
    unpacked = sum(i.file_size for i in infos)
    if unpacked > 10 * max_bytes:
        raise InputError(f"{name}: workbook unpacks to {unpacked:,} bytes, over 10 x max_bytes; refused")
    has_formula = False
    try:
        for i in infos:
            if i.filename.startswith("xl/worksheets/") and i.filename.endswith(".xml"):
                with zf.open(i) as fh:
                    chunk = fh.read()
                if b"<f>" in chunk or b"<f " in chunk or b":f>" in chunk:
                    has_formula = True
                    break
    except Exception:  # noqa: BLE001 - zlib, zipfile and struct errors of a damaged archive
        raise InputError(f"{name}: the workbook is damaged (a sheet cannot be unpacked)") from None

    def open_wb(data_only: bool):
        try:
            return openpyxl.load_workbook(io.BytesIO(raw), read_only=True, data_only=data_only, keep_links=False)
        except Exception as exc:  # noqa: BLE001 - any failure of the reader is one clear message
            raise InputError(f"{name}: not a readable XLSX workbook ({type(exc).__name__})") from None

    def rows_of(wb) -> list[tuple]:
        names_ = wb.sheetnames
        if sheet is None:
            ws = wb[names_[0]]
        elif isinstance(sheet, int):
            if not 0 <= sheet < len(names_):
                raise InputError(f"{name}: no sheet number {sheet}; the workbook has {len(names_)} sheet(s): "
                                 + ", ".join(repr(s) for s in names_))
            ws = wb[names_[sheet]]
        else:
            if sheet not in names_:
                raise InputError(f"{name}: no sheet named {sheet!r}; sheets are: " + ", ".join(repr(s) for s in names_))
            ws = wb[sheet]
        try:
            out = []
            for r in ws.iter_rows(min_row=1, values_only=True):
                out.append(r)
                if nrows is not None and len(out) > nrows + HEADER_SCAN_ROWS:
                    break
            return out
        except InputError:
            raise
        except Exception as exc:  # noqa: BLE001
            raise InputError(f"{name}: the sheet cannot be read ({type(exc).__name__})") from None

    wb = open_wb(True)
    try:
        rows = rows_of(wb)
        sheet_name = wb.sheetnames[0] if sheet is None else (wb.sheetnames[sheet] if isinstance(sheet, int) else sheet)
    finally:
        wb.close()
    messages = [f"{name}: XLSX sheet {sheet_name!r}; formulas are never evaluated, external links not followed"]
    if has_formula:
        wb2 = open_wb(False)
        try:
            frows = rows_of(wb2)
        finally:
            wb2.close()
        n_uncached = 0
        for i, (r, fr) in enumerate(zip(rows, frows)):
            if any(v is None and isinstance(f, str) and f.startswith("=") for v, f in zip(r, fr)):
                rows[i] = tuple(f if (v is None and isinstance(f, str) and f.startswith("=")) else v
                                for v, f in zip(r, fr))
                n_uncached += 1
        if n_uncached:
            messages.append(f"{name}: {n_uncached} row(s) hold formulas with no saved value (not evaluated)")
    if not rows or all(all(v is None for v in r) for r in rows):
        raise InputError(f"{name}: sheet {sheet_name!r} is empty")
    width = max(len(r) for r in rows)
    rows = [tuple(r) + (None,) * (width - len(r)) for r in rows]
    hdr = _find_header([[_cell_str(c) if c is not None else "" for c in r] for r in rows], mapping)
    header = _dedupe([_cell_str(c) if c is not None else "" for c in rows[hdr]])
    # trim trailing unnamed empty columns
    while header and header[-1].startswith("column") and all(r[len(header) - 1] is None for r in rows[hdr:]):
        header.pop()
    if hdr:
        messages.append(f"{name}: {hdr} row(s) above the header skipped (header on row {hdr + 1})")
    body = rows[hdr + 1:]
    if nrows is not None:
        body = body[:nrows]
    frame = pd.DataFrame([[_cell_str(c) for c in r[: len(header)]] for r in body], columns=header, dtype=object)
    rownum = np.arange(len(frame), dtype=np.int64) + hdr + 2
    blank = frame.isna().all(axis=1).to_numpy() if len(frame) else np.zeros(0, bool)
    if blank.any():
        frame = frame.loc[~blank].reset_index(drop=True)
        rownum = rownum[~blank]
    return RawTable(frame, rownum, name, "xlsx", sha, False, messages, None)


def _is_xlsx(raw: bytes, name: str) -> bool:
    return raw[:4] == b"PK\x03\x04" or name.lower().endswith((".xlsx", ".xlsm"))


def _read_any(raw: bytes, name: str, *, sheet: Any, mapping: Mapping[str, str] | None, max_bytes: int,
              text_fields: Callable[[list[str]], set[str]] | None, nrows: int | None = None) -> RawTable:
    if raw[:8] == b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1":
        raise InputError(f"{name}: an old binary Excel (.xls) or other OLE file; save it as XLSX or CSV")
    if _is_xlsx(raw, name):
        t = _read_xlsx(raw, name, sheet=sheet, mapping=mapping, max_bytes=max_bytes, nrows=nrows)
    else:
        if sheet is not None:
            raise InputError(f"{name}: a sheet ({sheet!r}) was asked for but the file is not an XLSX workbook")
        t = _read_csv(raw, name, mapping=mapping, text_fields=text_fields, nrows=nrows)
    if len(t.frame) == 0 and (t.extra_report is None or len(t.extra_report) == 0):
        where = f" ({t.messages[0].split(': ', 1)[-1].split(';')[0]})" if t.kind == "xlsx" else ""
        raise InputError(f"{name}: header only, no data rows{where}")
    return t


def read_table(source: Any, *, file_name: str | None = None, sheet: str | int | None = None,
               nrows: int | None = None, max_bytes: int = DEFAULT_MAX_BYTES) -> RawTable:
    """Read a CSV or XLSX file as a raw table of text cells (for previews and mapping screens).

    Parameters
    ----------
    source : path, bytes or binary file object
        The file.
    file_name : str, optional
        Name used in messages (defaults to the path's name).
    sheet : str or int, optional
        XLSX sheet name or 0-based number; the first sheet when omitted.
    nrows : int, optional
        Read at most this many data rows.
    max_bytes : int
        Refuse files larger than this. [bytes]

    Returns
    -------
    RawTable
        Cells as text (blank cells NaN), the file row of every row, and reading messages.

    Raises
    ------
    InputError
        The file cannot be read as a table (empty, binary, not a workbook, wrong sheet, too large).
    """
    raw, name = _read_source(source, file_name, max_bytes)
    return _read_any(raw, name, sheet=sheet, mapping=None, max_bytes=max_bytes, text_fields=None, nrows=nrows)


# ---------------------------------------------------------------------------------------------
# Cell parsing (vectorised)
# ---------------------------------------------------------------------------------------------

_RE_THOUS_US = r"^[+-]?\d{1,3}(?:,\d{3})+(?:\.\d*)?$"
_RE_THOUS_EU = r"^[+-]?\d{1,3}(?:\.\d{3})+(?:,\d*)?$"
_RE_THOUS_SP = r"^[+-]?\d{1,3}(?:[ \u00a0\u202f']\d{3})+(?:[.,]\d*)?$"


def _parse_numbers(col: pd.Series, decimal_comma: bool) -> tuple[np.ndarray, np.ndarray]:
    """Parse a column to float; return (values, status) with status codes _OK/_BLANK/_NA/_TEXT/_FORMULA."""
    n = len(col)
    if pd.api.types.is_numeric_dtype(col.dtype) and not pd.api.types.is_bool_dtype(col.dtype):
        v = np.array(col.to_numpy(dtype=float, na_value=np.nan), dtype=float)
        st = np.where(np.isnan(v), _BLANK, _OK).astype(np.int8)
        inf = np.isinf(v)
        st[inf] = _TEXT
        v = np.where(inf, np.nan, v)
        return v, st
    s = col.astype(object)
    isnull = s.isna().to_numpy()
    v = np.array(pd.to_numeric(s, errors="coerce").to_numpy(dtype=float, na_value=np.nan), dtype=float) if not decimal_comma \
        else np.full(n, np.nan)
    st = np.zeros(n, dtype=np.int8)
    todo = ~isnull & ~np.isfinite(v)
    if todo.any():
        sub = s[todo].astype(str).str.strip()
        low = sub.str.lower()
        blank = (sub == "").to_numpy()
        na = low.isin(NA_TOKENS).to_numpy()
        formula = sub.str.startswith("=").to_numpy()
        c = sub
        if decimal_comma:
            m_eu = c.str.match(_RE_THOUS_EU)
            c = c.where(~m_eu, c.str.replace(".", "", regex=False))
            c = c.str.replace(",", ".", regex=False)
        else:
            m_us = c.str.match(_RE_THOUS_US)
            c = c.where(~m_us, c.str.replace(",", "", regex=False))
        m_sp = sub.str.match(_RE_THOUS_SP)
        if m_sp.any():
            csp = sub[m_sp].str.replace(r"[ \u00a0\u202f']", "", regex=True)
            csp = csp.str.replace(",", ".", regex=False) if decimal_comma else csp.str.replace(",", "", regex=False)
            c = c.where(~m_sp, csp)
        vv = np.array(pd.to_numeric(c, errors="coerce").to_numpy(dtype=float, na_value=np.nan), dtype=float)
        vv[~np.isfinite(vv)] = np.nan
        sst = np.where(blank, _BLANK, np.where(na, _NA, np.where(formula, _FORMULA,
                       np.where(np.isnan(vv), _TEXT, _OK)))).astype(np.int8)
        v[todo] = vv
        st[todo] = sst
    st[isnull] = _BLANK
    v[isnull] = np.nan
    return v, st


def _two_digit_year(y: np.ndarray) -> np.ndarray:
    # POSIX strptime %y pivot: 69-99 -> 19xx, 00-68 -> 20xx (common practice)
    return np.where(y < 100, np.where(y >= 69, 1900 + y, 2000 + y), y)


def _month_index(y: np.ndarray, m: np.ndarray) -> np.ndarray:
    return y * 12 + (m - 1)


def _days_in(y: np.ndarray, m: np.ndarray) -> np.ndarray:
    y = np.asarray(y, dtype=np.int64)
    m = np.asarray(m, dtype=np.int64)
    base = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31])[np.clip(m, 1, 12) - 1]
    leap = ((y % 4 == 0) & (y % 100 != 0)) | (y % 400 == 0)
    return base + ((m == 2) & leap)


def _month_name(s: pd.Series) -> pd.Series:
    low = s.str.lower()
    num = low.str[:3].map(_MONTHS)
    full = ["january", "february", "march", "april", "may", "june", "july", "august", "september",
            "october", "november", "december"]
    ok = pd.Series([isinstance(w, str) and 3 <= len(w) and any(f.startswith(w) for f in full) or w == "sept"
                    for w in low], index=s.index)
    return num.where(ok)


@dataclass
class _DateParse:
    month_index: np.ndarray  # y*12 + m - 1 per unique, -1 when invalid
    reason: list[str]
    order: str  # "", "day-first", "month-first"


def _parse_dates(uniq: pd.Series, name: str, column: str, dayfirst: bool | None) -> _DateParse:
    """Parse unique date strings to month indices (vectorised over the unique values)."""
    s = uniq.astype(str).str.strip()
    n = len(s)
    y = np.full(n, -1, dtype=np.int64)
    m = np.full(n, -1, dtype=np.int64)
    d = np.full(n, -1, dtype=np.int64)  # -1 = no day given
    done = np.zeros(n, dtype=bool)
    reason = np.array([""] * n, dtype=object)

    def take(mask, yy, mm, dd=None):
        nonlocal done
        mask = np.asarray(mask, dtype=bool) & ~done
        y[mask] = np.asarray(yy)[mask]
        m[mask] = np.asarray(mm)[mask]
        if dd is not None:
            d[mask] = np.asarray(dd)[mask]
        done |= mask

    def ints(x: pd.Series) -> np.ndarray:
        return pd.to_numeric(x, errors="coerce").fillna(-1).to_numpy(dtype=np.int64)

    # ISO: 2021-03-01, 2021-03, 2021/03, 2021.03, with optional time part
    g = s.str.extract(r"^(\d{4})[-/.](\d{1,2})(?:[-/.](\d{1,2}))?(?:[ T].*)?$")
    take(g[0].notna().to_numpy(), ints(g[0]), ints(g[1]), ints(g[2]))
    # 202103 and 20210331
    g = s.str.extract(r"^(\d{4})(\d{2})(\d{2})?(?:\.0+)?$")
    yy = ints(g[0])
    ok = g[0].notna().to_numpy() & (yy >= YEAR_MIN) & (yy <= YEAR_MAX)
    take(ok, yy, ints(g[1]), ints(g[2]))
    # month/year: 03/2021, 3-2021
    g = s.str.extract(r"^(\d{1,2})[-/.](\d{4})$")
    take(g[0].notna().to_numpy(), ints(g[1]), ints(g[0]))
    # month-name forms: Mar-2021, March 2021, Mar-21, 2021-Mar, 01-Mar-2021, March 1, 2021
    g = s.str.extract(r"^([A-Za-z]{3,9})\.?[-/ ,]*(\d{4}|\d{2})$")
    mn = _month_name(g[0].fillna("")).fillna(-1).to_numpy(dtype=np.int64)
    take(g[0].notna().to_numpy() & (mn > 0), _two_digit_year(ints(g[1])), mn)
    g = s.str.extract(r"^(\d{4})[-/ ]([A-Za-z]{3,9})$")
    mn = _month_name(g[1].fillna("")).fillna(-1).to_numpy(dtype=np.int64)
    take(g[0].notna().to_numpy() & (mn > 0), ints(g[0]), mn)
    g = s.str.extract(r"^(\d{1,2})[-/ ]([A-Za-z]{3,9})\.?[-/ ,]*(\d{4}|\d{2})$")
    mn = _month_name(g[1].fillna("")).fillna(-1).to_numpy(dtype=np.int64)
    take(g[0].notna().to_numpy() & (mn > 0), _two_digit_year(ints(g[2])), mn, ints(g[0]))
    g = s.str.extract(r"^([A-Za-z]{3,9})\.? (\d{1,2}),? (\d{4})$")
    mn = _month_name(g[0].fillna("")).fillna(-1).to_numpy(dtype=np.int64)
    take(g[0].notna().to_numpy() & (mn > 0), ints(g[2]), mn, ints(g[1]))
    # Excel serial day numbers (also as plain numbers in CSV)
    num = pd.to_numeric(s.where(s.str.match(r"^\d+(\.\d+)?$")), errors="coerce").to_numpy(dtype=float,
                                                                                     na_value=np.nan)
    ser = ~done & np.isfinite(num)
    year_only = ser & (num >= YEAR_MIN) & (num <= YEAR_MAX) & (np.floor(num) == num)
    reason[year_only] = "a year alone is not a month"
    ser &= ~year_only & (num >= EXCEL_SERIAL_MIN) & (num <= EXCEL_SERIAL_MAX)
    if ser.any():
        ts = EXCEL_EPOCH + pd.to_timedelta(np.floor(num[ser]), unit="D")
        take_mask = np.zeros(n, dtype=bool)
        take_mask[ser] = True
        yy = np.full(n, -1, dtype=np.int64)
        mm = np.full(n, -1, dtype=np.int64)
        yy[ser] = ts.year.to_numpy()
        mm[ser] = ts.month.to_numpy()
        take(take_mask, yy, mm)
    # a/b/yyyy: day/month order to be resolved from the data
    g = s.str.extract(r"^(\d{1,2})[-/.](\d{1,2})[-/.](\d{4}|\d{2})(?:[ T].*)?$")
    amb = g[0].notna().to_numpy() & ~done
    order = ""
    if amb.any():
        a = ints(g[0])[amb]
        b = ints(g[1])[amb]
        yr = _two_digit_year(ints(g[2])[amb])
        if dayfirst is None:
            ev_df = bool((a > 12).any())
            ev_mf = bool((b > 12).any())
            if ev_df and ev_mf:
                ex1 = s[amb][a > 12].iloc[0]
                ex2 = s[amb][b > 12].iloc[0]
                raise InputError(f"{name}: column {column!r} mixes day-first ({ex1!r}) and month-first ({ex2!r}) "
                                 "dates; fix the file or pass dayfirst=True/False")
            if ev_df or ev_mf:
                dayfirst = ev_df
                how = "a first field above 12" if ev_df else "a second field above 12"
            else:
                mf_ok = bool(np.all(b == 1) or np.all(b == _days_in(yr, a)))
                df_ok = bool(np.all(a == 1) or np.all(a == _days_in(yr, b)))
                if np.all(a == b):
                    dayfirst, how = False, "day equals month in every date"
                elif mf_ok and not df_ok:
                    dayfirst, how = False, "every date is the first or last day of its month read month-first"
                elif df_ok and not mf_ok:
                    dayfirst, how = True, "every date is the first or last day of its month read day-first"
                else:
                    ex = s[amb].iloc[0]
                    raise InputError(f"{name}: dates in column {column!r} such as {ex!r} are ambiguous "
                                     "(day/month order) and the data does not resolve it; pass dayfirst=True "
                                     "(dd/mm/yyyy) or dayfirst=False (mm/dd/yyyy)")
            order = ("day-first" if dayfirst else "month-first") + f" (resolved: {how})"
        else:
            order = ("day-first" if dayfirst else "month-first") + " (as given)"
        dd, mm = (a, b) if dayfirst else (b, a)
        yy_all = np.full(n, -1, dtype=np.int64)
        mm_all = np.full(n, -1, dtype=np.int64)
        dd_all = np.full(n, -1, dtype=np.int64)
        yy_all[amb], mm_all[amb], dd_all[amb] = yr, mm, dd
        take(amb, yy_all, mm_all, dd_all)
    # validate
    valid = done & (m >= 1) & (m <= 12) & (y >= YEAR_MIN) & (y <= YEAR_MAX)
    dim = _days_in(np.where(valid, y, 2000), np.where(valid, m, 1))
    valid &= (d == -1) | ((d >= 1) & (d <= dim))
    reason[~valid & (reason == "")] = "unparseable date"
    reason[done & ~valid & ((y < YEAR_MIN) | (y > YEAR_MAX))] = f"date outside {YEAR_MIN}-{YEAR_MAX}"
    mi = np.where(valid, _month_index(y, m), -1)
    return _DateParse(mi, list(reason), order)


def _month_from_index(mi: np.ndarray) -> np.ndarray:
    """Month index (year * 12 + month - 1) -> datetime64[ns] month starts."""
    return (np.asarray(mi, dtype=np.int64) - 1970 * 12).astype("datetime64[M]").astype("datetime64[ns]")


# ---------------------------------------------------------------------------------------------
# Report helpers
# ---------------------------------------------------------------------------------------------


class _Report:
    def __init__(self, file: str):
        self.file = file
        self.parts: list[pd.DataFrame] = []

    def add(self, rows: Any, well: Any, column: str, value: Any, action: str, reason: Any) -> None:
        rows_arr = pd.array(np.asarray(rows, dtype=object) if np.ndim(rows) else [rows], dtype="Int64")
        k = len(rows_arr)
        if k == 0:
            return
        def _vec(x):
            if isinstance(x, (str, type(None))) or np.ndim(x) == 0:
                return [("" if x is None else str(x))] * k
            return [("" if (v is None or (isinstance(v, float) and np.isnan(v))) else str(v)) for v in x]
        self.parts.append(pd.DataFrame({
            "file": self.file, "row": rows_arr, "well_id": _vec(well), "column": column,
            "value": _vec(value), "action": action, "reason": _vec(reason)}))

    def frame(self) -> pd.DataFrame:
        if not self.parts:
            return _empty_report()
        out = pd.concat(self.parts, ignore_index=True)
        out["row"] = out["row"].astype("Int64")
        for c in ("file", "well_id", "column", "value", "action", "reason"):
            out[c] = out[c].astype(object)
        return out[REPORT_COLUMNS]


def _empty_report() -> pd.DataFrame:
    return pd.DataFrame({"file": pd.Series(dtype=object), "row": pd.Series(dtype="Int64"),
                         "well_id": pd.Series(dtype=object), "column": pd.Series(dtype=object),
                         "value": pd.Series(dtype=object), "action": pd.Series(dtype=object),
                         "reason": pd.Series(dtype=object)})


def _raw_values(col: pd.Series, idx: np.ndarray) -> list[str]:
    vals = col.iloc[np.asarray(idx)].to_numpy(dtype=object)
    out = []
    for v in vals:  # report lines only (few), not the main path
        if v is None or (isinstance(v, float) and np.isnan(v)):
            out.append("")
        elif isinstance(v, (float, np.floating)) and float(v).is_integer() and abs(v) < 1e15:
            out.append(str(int(v)))
        else:
            out.append(str(v)[:80])
    return out


# ---------------------------------------------------------------------------------------------
# Mapping and units
# ---------------------------------------------------------------------------------------------


def _resolve_mapping(columns: list[str], mapping: Mapping[str, str] | None, name: str,
                     unit_column: str | None = None) -> dict[str, str]:
    found = detect_columns(columns)
    user: dict[str, str] = {}
    for k, v in (mapping or {}).items():
        key = _USER_KEY_ALIASES.get(k, k)
        if key not in CANONICAL_FIELDS:
            raise InputError(f"{name}: mapping key {k!r} is not a known field; known: " + ", ".join(CANONICAL_FIELDS))
        if v is None:
            found.pop(key, None)
            continue
        if v not in columns:
            raise InputError(f"{name}: mapping {k!r} -> {v!r}: no such column; columns are: "
                             + ", ".join(repr(c) for c in columns[:40]))
        user[key] = v
    if unit_column is not None:
        if unit_column not in columns:
            raise InputError(f"{name}: unit_column {unit_column!r}: no such column; columns are: "
                             + ", ".join(repr(c) for c in columns[:40]))
        user["unit"] = unit_column
    # an explicit mapping wins; a column taken by the user is not also used elsewhere
    taken = set(user.values())
    out = {k: v for k, v in found.items() if v not in taken}
    out.update(user)
    return {f: out[f] for f in CANONICAL_FIELDS if f in out}


_QUANTITY_OF = {"oil_bbl": "liquid", "water_bbl": "liquid", "gas_mcf": "gas", "days_on": "time",
                "pressure_psia": "pressure", "initial_pressure_psia": "pressure", "bubble_point_psia": "pressure",
                "reservoir_temp_f": "temperature"}
_METRIC_DEFAULT = {"liquid": "m3", "gas": "e3m3", "pressure": "kpa", "temperature": "degc", "time": "days"}


def _conversion(field_: str, header: str, units: str, name: str, messages: list,
                unit_row: Mapping[str, str] | None = None) -> tuple[float, float]:
    """(scale, offset) turning the column's values into the field unit of ``field_``."""
    q = _QUANTITY_OF.get(field_)
    if q is None:
        return 1.0, 0.0
    _, key, unit_txt = _split_header(header)
    if key is None and unit_row and field_ in unit_row:
        key = unit_row[field_]
        unit_txt = key
    if key is None and q == "time" and re.search(r"\b(hours|hrs|hr)\b", str(header).lower()):
        key = "hours"
    if key is None:
        if unit_txt and q != "time":
            messages.append(f"{name}: column {header!r}: unit {unit_txt!r} not recognised; "
                            + ("metric assumed" if units == "metric" else "field units assumed"))
        if units == "metric":
            key = _METRIC_DEFAULT[q]
        else:
            return 1.0, 0.0
    quantity, scale, offset, label = U.UNIT_TOKENS[key]
    if quantity == "volume_m3":
        quantity = "liquid" if q == "liquid" else ("gas" if q == "gas" else quantity)
        scale = U.BBL_PER_M3 if q == "liquid" else U.MCF_PER_M3
    if field_ == "days_on" and quantity != "time":
        quantity = "time"  # a stray token like "d"; days anyway
        scale, offset = 1.0, 0.0
    if quantity != q:
        raise InputError(f"{name}: column {header!r} is read as {field_} but its unit {label!r} is not a "
                         f"{q} unit; give the right column in the mapping")
    if scale != 1.0 or offset != 0.0:
        target = {"liquid": "bbl", "gas": "Mcf", "pressure": "psia", "temperature": "degF", "time": "d"}[q]
        messages.append(f"{name}: column {header!r} converted from {label} to {target} (x {scale:.7g}"
                        + (f" + {offset:.7g}" if offset else "") + ")")
    return scale, offset


def _units_row(f: pd.DataFrame, mp: Mapping[str, str]) -> dict[str, str]:
    """Unit keys of a units row right under the header ("", "", "bbl", "Mcf", ...), else {}."""
    if len(f) == 0:
        return {}
    first = f.iloc[0]
    out: dict[str, str] = {}
    for k in ("oil_bbl", "gas_mcf", "water_bbl", "days_on", "pressure_psia", *HEADER_FIELDS):
        if k not in mp:
            continue
        v = first[mp[k]]
        if isinstance(v, str) and v.strip():
            key = _unit_key(v.strip().strip("()[]{}"))
            if key not in U.UNIT_TOKENS:
                return {}
            out[k] = key
        elif v is not None and not (isinstance(v, float) and np.isnan(v)):
            return {}
    return out if "oil_bbl" in out else {}


def _as_of_month(as_of: Any) -> int:
    if as_of is None:
        ts = pd.Timestamp.now(tz="UTC").tz_localize(None)
    else:
        try:
            ts = pd.Timestamp(str(as_of) if not isinstance(as_of, (pd.Timestamp, _dt.date)) else as_of)
        except (ValueError, TypeError):
            raise InputError(f"as_of must be a month like '2024-06', got {as_of!r}") from None
    return int(ts.year) * 12 + int(ts.month) - 1


# ---------------------------------------------------------------------------------------------
# Loading
# ---------------------------------------------------------------------------------------------


def _text_fields_for(mapping: Mapping[str, str] | None, unit_column: str | None) -> Callable[[list[str]], set[str]]:
    def f(columns: list[str]) -> set[str]:
        mp = _resolve_mapping_lenient(columns, mapping, unit_column)
        num = {mp[k] for k in ("oil_bbl", "gas_mcf", "water_bbl", "days_on", "pressure_psia", *HEADER_FIELDS)
               if k in mp}
        return set(columns) - num
    return f


def _resolve_mapping_lenient(columns, mapping, unit_column):
    try:
        return _resolve_mapping(list(columns), mapping, "file", unit_column)
    except InputError:
        return detect_columns(columns)


def _per_well_constant(df: pd.DataFrame, col: str, rep: _Report, column_label: str) -> pd.Series:
    """First non-null value per well (in month order); report wells where it is not constant."""
    sub = df[["well_id", col]].dropna()
    if sub.empty:
        return pd.Series(dtype=float)
    g = sub.groupby("well_id", sort=False)[col]
    first = g.first()
    lo, hi, nun = g.min(), g.max(), g.nunique()
    bad = nun[nun > 1].index
    if len(bad):
        rep.add([pd.NA] * len(bad), list(bad), column_label,
                [f"{lo[w]:g}..{hi[w]:g}" for w in bad], "info",
                [f"{column_label} not constant within the well ({int(nun[w])} values); first value in month "
                 f"order used ({first[w]:g})" for w in bad])
    return first


def _check_header_bounds(w: pd.DataFrame, rep: _Report, rows: Any = None) -> pd.DataFrame:
    w = w.copy()
    for c, (lo, hi, u) in HEADER_BOUNDS.items():
        if c not in w:
            continue
        v = w[c].to_numpy(dtype=float)
        bad = np.isfinite(v) & ((v < lo) | (v > hi))
        if bad.any():
            rr = [pd.NA] * int(bad.sum()) if rows is None else np.asarray(rows)[bad]
            rep.add(rr, w["well_id"].to_numpy()[bad], c, [f"{x:g}" for x in v[bad]], "altered",
                    f"outside the plausible range [{lo:g}, {hi:g}] {u}; set to unknown (NaN)")
            v = np.where(bad, np.nan, v)
            w[c] = v
    if "initial_pressure_psia" in w and "bubble_point_psia" in w:
        pi, pb = w["initial_pressure_psia"].to_numpy(float), w["bubble_point_psia"].to_numpy(float)
        bad = np.isfinite(pi) & np.isfinite(pb) & (pb > pi * 1.0001)
        if bad.any():
            rep.add([pd.NA] * int(bad.sum()), w["well_id"].to_numpy()[bad], "bubble_point_psia",
                    [f"{x:g}" for x in pb[bad]], "info",
                    "bubble point above the initial pressure (a reservoir is never above its saturation "
                    "pressure at discovery unless a gas cap is present); kept as given")
    return w


def load_well_header(source: Any, *, file_name: str | None = None, sheet: str | int | None = None,
                     mapping: Mapping[str, str] | None = None, units: str = "auto",
                     max_bytes: int = DEFAULT_MAX_BYTES) -> WellHeaderLoad:
    """Load a well-header file: one row per well with its fluid data.

    Parameters
    ----------
    source : path, bytes, binary file object or DataFrame
        The file (CSV or XLSX) or a table already in memory.
    file_name : str, optional
        Name used in messages and the report.
    sheet : str or int, optional
        XLSX sheet; the first when omitted.
    mapping : dict, optional
        Canonical field -> source column; wins over recognition.
    units : {"auto", "field", "metric"}
        Unit system of columns whose header carries no unit.
    max_bytes : int
        Size limit. [bytes]

    Returns
    -------
    WellHeaderLoad
        ``wells`` with ``WELL_COLUMNS`` (API gravity [degAPI], gas specific gravity [-],
        reservoir temperature [degF], initial and bubble point pressure [psia]; NaN unknown;
        ``unit`` NaN when the file has none) and the report of what was changed.

    Raises
    ------
    InputError
        The file cannot be read or has no well identifier column.
    """
    _check_units(units)
    if isinstance(source, pd.DataFrame):
        name = file_name or "well header table"
        frame = source.reset_index(drop=True).copy()
        frame.columns = _dedupe([str(c) for c in frame.columns])
        t = RawTable(frame, np.arange(len(frame), dtype=np.int64) + 2, name, "frame", "", False, [], None)
    else:
        raw, name = _read_source(source, file_name, max_bytes)
        t = _read_any(raw, name, sheet=sheet, mapping=mapping, max_bytes=max_bytes,
                      text_fields=_text_fields_for(mapping, None))
    messages = list(t.messages)
    mp = _resolve_mapping(list(t.frame.columns), mapping, name)
    mp = {k: v for k, v in mp.items() if k in ("well_id", "unit", *HEADER_FIELDS)}
    if "well_id" not in mp:
        raise InputError(f"{name}: no recognisable well identifier column; columns are: "
                         + ", ".join(repr(c) for c in t.frame.columns[:40]) + "; give a mapping")
    rep = _Report(name)
    f = t.frame
    wid = f[mp["well_id"]].astype(object).where(f[mp["well_id"]].notna(), "").astype(str).str.strip()
    out = pd.DataFrame({"well_id": wid})
    out["unit"] = (f[mp["unit"]].astype(object).where(f[mp["unit"]].notna(), "").astype(str).str.strip()
                   .replace("", np.nan)) if "unit" in mp else np.nan
    for c in HEADER_FIELDS:
        if c in mp:
            v, st = _parse_numbers(f[mp[c]], t.decimal_comma)
            bad = st >= _TEXT
            if bad.any():
                idx = np.flatnonzero(bad)
                rep.add(t.row_numbers[idx], wid.to_numpy()[idx], c, _raw_values(f[mp[c]], idx), "altered",
                        "not a number; set to unknown (NaN)")
            scale, off = _conversion(c, mp[c], units, name, messages)
            out[c] = v * scale + off
        else:
            out[c] = np.nan
    missing = (wid == "").to_numpy()
    if missing.any():
        idx = np.flatnonzero(missing)
        rep.add(t.row_numbers[idx], "", "well_id", "", "rejected", "missing well id")
    out["_row"] = t.row_numbers
    out = out.loc[~missing]
    dup = out.duplicated("well_id", keep="first").to_numpy()
    if dup.any():
        d = out.loc[dup]
        rep.add(d["_row"].to_numpy(), d["well_id"].to_numpy(), "well_id", d["well_id"].to_numpy(), "rejected",
                "well listed again in the well header; first row kept")
        out = out.loc[~dup]
    out = _check_header_bounds(out, rep, rows=out["_row"].to_numpy())
    wells = out[WELL_COLUMNS].reset_index(drop=True)
    return WellHeaderLoad(wells, rep.frame(), mp, name, messages)


def _check_units(units: str) -> None:
    if units not in ("auto", "field", "metric"):
        raise InputError(f"units must be 'auto', 'field' or 'metric', got {units!r}")


def load_production(
    source: Any,
    *,
    file_name: str | None = None,
    sheet: str | int | None = None,
    mapping: Mapping[str, str] | None = None,
    units: str = "auto",
    unit_column: str | None = None,
    well_header: Any = None,
    pressure_kind: str = "average_reservoir",
    max_bytes: int = DEFAULT_MAX_BYTES,
    as_of: Any = None,
    dayfirst: bool | None = None,
    well_header_name: str | None = None,
    allow_no_rows: bool = False,
) -> LoadResult:
    """Load a monthly production file into the tidy monthly table, well header and load report.

    Parameters
    ----------
    source : path, bytes, binary file object or DataFrame
        The production file (CSV or XLSX, long layout: one row per well and month).
    file_name : str, optional
        Name used in messages and the report (uploads); defaults to the path's name.
    sheet : str or int, optional
        XLSX sheet name or 0-based number; the first sheet when omitted.
    mapping : dict, optional
        Canonical field (see :func:`detect_columns`) -> source column. Always wins over
        recognition; map a field to None to ignore a recognised column.
    units : {"auto", "field", "metric"}
        Unit system of columns whose header declares no unit. "auto" and "field" take field
        units (bbl, Mcf, psia, degF); "metric" takes m3, 10^3 m3, kPa (absolute), degC. A unit
        in a header ("Oil (m3)", "Gas (e3m3)", "Pressure (kPag)") always applies.
    unit_column : str, optional
        Column holding the reservoir unit (shortcut for ``mapping={"unit": ...}``).
    well_header : path, bytes or DataFrame, optional
        Well-header file with per-well fluid data (:func:`load_well_header`); its values win
        over constant per-well columns of the production file.
    pressure_kind : {"average_reservoir", "static_bhp"}
        What the pressure column holds.
    max_bytes : int
        Refuse larger files with a clear message. [bytes]
    as_of : str or date, optional
        Months after this month are future production and rejected; default the current
        month (UTC).
    dayfirst : bool, optional
        Day/month order of dates like 03/04/2021 when the data cannot resolve it.
    well_header_name : str, optional
        Name of the well-header file in messages (when ``well_header`` is bytes).
    allow_no_rows : bool, optional
        Return a result with an empty production table (and the full report) instead of
        raising when every data row is rejected. Default False. The streamed run
        (:mod:`core.streamed`) loads a file block by block, and one block may hold only bad
        rows while the file as a whole does not.

    ``source`` may also be a :class:`RawTable` already read (the streamed run reads a file in
    chunks with the layout detected once on its first part, :func:`csv_layout`): its cells,
    file row numbers, decimal mark, content hash and reading report are used as given.

    Returns
    -------
    LoadResult
        See DEVELOPERS.md ("Data contracts"). ``rows_read = rows_used + rows_rejected``.

    Raises
    ------
    InputError
        The file cannot be used at all (empty, header only, binary, not a workbook, wrong sheet,
        over ``max_bytes``, no well/month/oil column, ambiguous date order, no usable row).
    """
    _check_units(units)
    if pressure_kind not in ("average_reservoir", "static_bhp"):
        raise InputError(f"pressure_kind must be 'average_reservoir' or 'static_bhp', got {pressure_kind!r}")
    as_of_mi = _as_of_month(as_of)

    if isinstance(source, RawTable):
        t = source
        name = file_name or t.file_name
    elif isinstance(source, pd.DataFrame):
        name = file_name or "production table"
        frame = source.reset_index(drop=True)
        frame = frame.set_axis(_dedupe([str(c) for c in frame.columns]), axis=1)
        sha = hashlib.sha256(pd.util.hash_pandas_object(frame, index=False).to_numpy().tobytes()).hexdigest()
        t = RawTable(frame, np.arange(len(frame), dtype=np.int64) + 2, name, "frame", sha, False, [], None)
        if len(frame) == 0:
            raise InputError(f"{name}: no data rows")
    else:
        raw, name = _read_source(source, file_name, max_bytes)
        t = _read_any(raw, name, sheet=sheet, mapping=mapping, max_bytes=max_bytes,
                      text_fields=_text_fields_for(mapping, unit_column))
        del raw
    messages = list(t.messages)
    f = t.frame
    columns = list(f.columns)
    mp = _resolve_mapping(columns, mapping, name, unit_column)
    missing_req = [k for k in ("well_id", "month", "oil_bbl") if k not in mp]
    if missing_req:
        try:
            dp = _parse_dates(pd.Series([str(c) for c in columns], dtype=object), name, "header", False)
            n_date_cols = int((dp.month_index >= 0).sum())
        except InputError:
            n_date_cols = 0
        if n_date_cols >= 3:
            raise InputError(f"{name}: {n_date_cols} column headers are months (a wide layout, one column per "
                             "month); the loader reads the long layout, one row per well and month")
        label = {"well_id": "well identifier", "month": "month/date", "oil_bbl": "oil volume"}
        raise InputError(f"{name}: no recognisable " + " or ".join(label[k] for k in missing_req)
                         + " column; columns are: " + ", ".join(repr(c) for c in columns[:40])
                         + "; give the mapping explicitly")
    if any(_norm(c) == "api" for c in columns) and "api_gravity" not in mp and "api" not in (mapping or {}):
        messages.append(f"{name}: column 'API' is ambiguous (well number or oil gravity) and was not used; "
                        "map it explicitly")
    messages.append(f"{name}: columns used: " + ", ".join(f"{k} <- {v!r}" for k, v in mp.items()))
    if "pressure_psia" in mp:
        pn = _norm(mp["pressure_psia"])
        if pressure_kind == "average_reservoir" and re.search(r"\b(bhp|sbhp|bottom|bottomhole|sibhp)\b", pn):
            messages.append(f"{name}: pressure column {mp['pressure_psia']!r} looks like a bottom-hole pressure; "
                            "read as average reservoir pressure as asked (pressure_kind)")
    rep = _Report(name)
    if t.extra_report is not None and len(t.extra_report):
        rep.parts.append(t.extra_report)
    rows = t.row_numbers
    unit_row = _units_row(f, mp)
    if unit_row:
        messages.append(f"{name}: row {int(rows[0])} holds the units of the columns above it ("
                        + ", ".join(f"{mp[k]!r}: {v}" for k, v in unit_row.items()) + "); not a data row")
        f = f.iloc[1:].reset_index(drop=True)
        rows = rows[1:]
        if len(f) == 0:
            raise InputError(f"{name}: header and units rows only, no data rows")
    n = len(f)
    reject = np.zeros(n, dtype=bool)

    # well id
    wcol = f[mp["well_id"]]
    wcodes, wuniq = pd.factorize(wcol, use_na_sentinel=True)
    wu = pd.Series(np.asarray(wuniq, dtype=object)).astype(str).str.strip()
    wu_bad = (wu == "") | wu.str.lower().isin(NA_TOKENS)
    wu_np = np.append(wu.to_numpy(dtype=object), "")
    wid_np = wu_np[np.where(wcodes >= 0, wcodes, len(wu))]
    # rank of the cleaned id in sorted order (ids equal after trimming share a rank)
    wu_sorted = np.unique(wu.to_numpy(dtype=str)) if len(wu) else np.array([], dtype=str)
    wrank_u = np.append(np.searchsorted(wu_sorted, wu.to_numpy(dtype=str)), -1)
    wrank = wrank_u[np.where(wcodes >= 0, wcodes, len(wu))].astype(np.int64)
    bad = (wcodes < 0) | np.append(wu_bad.to_numpy(), True)[np.where(wcodes >= 0, wcodes, len(wu))]
    if bad.any():
        idx = np.flatnonzero(bad)
        rep.add(rows[idx], "", mp["well_id"], _raw_values(wcol, idx), "rejected", "missing well id")
        reject |= bad
    wu_formula = np.append(wu.str.startswith("=").to_numpy(dtype=bool), False)
    fbad = wu_formula[np.where(wcodes >= 0, wcodes, len(wu))] & ~reject
    if fbad.any():
        idx = np.flatnonzero(fbad)
        rep.add(rows[idx], "", mp["well_id"], _raw_values(wcol, idx), "rejected",
                "well id starts with '=' (a spreadsheet formula, never evaluated), not a name")
        reject |= fbad

    # month
    mcol = f[mp["month"]]
    if pd.api.types.is_datetime64_any_dtype(mcol.dtype):
        mc = pd.DatetimeIndex(mcol)
        mi = np.where(mc.isna(), -1, mc.year * 12 + mc.month - 1).astype(np.int64)
        mi[(mc.year < YEAR_MIN) | (mc.year > YEAR_MAX)] = -1
        mreason = np.where(mi < 0, "unparseable date", "")
    else:
        codes, uniq = pd.factorize(mcol.astype(object).where(mcol.notna(), ""), sort=False)
        dp = _parse_dates(pd.Series(uniq, dtype=object), name, mp["month"], dayfirst)
        if dp.order:
            messages.append(f"{name}: dates in {mp['month']!r} read {dp.order}")
        ucodes = np.asarray(codes)
        mi = np.where(ucodes >= 0, dp.month_index[np.maximum(ucodes, 0)], -1)
        ur = np.asarray(dp.reason, dtype=object)
        mreason = np.where(ucodes >= 0, ur[np.maximum(ucodes, 0)], "blank date")
        mreason = np.where(mreason == "", "unparseable date", mreason)
        blank_m = np.asarray([u == "" for u in uniq])[np.maximum(ucodes, 0)] if len(uniq) else np.zeros(n, bool)
        mreason = np.where(blank_m, "blank date", mreason)
    bad = (mi < 0) & ~reject
    if bad.any():
        idx = np.flatnonzero(bad)
        rep.add(rows[idx], wid_np[idx], mp["month"], _raw_values(mcol, idx), "rejected", mreason[idx])
        reject |= bad
    fut = (mi > as_of_mi) & ~reject
    if fut.any():
        idx = np.flatnonzero(fut)
        asof_txt = f"{as_of_mi // 12:04d}-{as_of_mi % 12 + 1:02d}"
        rep.add(rows[idx], wid_np[idx], mp["month"], _raw_values(mcol, idx), "rejected",
                f"month after the as-of month {asof_txt} (future production)")
        reject |= fut

    # volumes and days
    vals: dict[str, np.ndarray] = {}
    for k in ("oil_bbl", "gas_mcf", "water_bbl", "days_on"):
        if k not in mp:
            continue
        col = f[mp[k]]
        v, st = _parse_numbers(col, t.decimal_comma)
        scale, off = _conversion(k, mp[k], units, name, messages, unit_row)
        v = v * scale + off
        textish = (st == _TEXT) & ~reject
        if textish.any():
            idx = np.flatnonzero(textish)
            rep.add(rows[idx], wid_np[idx], mp[k], _raw_values(col, idx), "rejected", "not a number")
            reject |= textish
        fm = (st == _FORMULA) & ~reject
        if fm.any():
            idx = np.flatnonzero(fm)
            rep.add(rows[idx], wid_np[idx], mp[k], _raw_values(col, idx), "rejected",
                    "formula with no saved value (formulas are never evaluated)")
            reject |= fm
        neg = (st == _OK) & (v < 0) & ~reject
        if neg.any():
            idx = np.flatnonzero(neg)
            rep.add(rows[idx], wid_np[idx], mp[k], _raw_values(col, idx), "rejected",
                    "negative value (accounting correction?); row not used")
            reject |= neg
        huge = (st == _OK) & (v > VOLUME_MAX) & ~reject
        if huge.any():
            idx = np.flatnonzero(huge)
            rep.add(rows[idx], wid_np[idx], mp[k], _raw_values(col, idx), "rejected",
                    f"implausibly large (above {VOLUME_MAX:g} per month); row not used")
            reject |= huge
        empty = ((st == _BLANK) | (st == _NA)) & ~reject
        if empty.any():
            idx = np.flatnonzero(empty)
            if k == "oil_bbl":
                rep.add(rows[idx], wid_np[idx], mp[k], _raw_values(col, idx), "rejected",
                        "oil volume missing (blank or n/a is not zero)")
                reject |= empty
            elif k == "days_on":
                rep.add(rows[idx], wid_np[idx], mp[k], _raw_values(col, idx), "altered",
                        "days on missing; calendar days used")
            else:
                rep.add(rows[idx], wid_np[idx], mp[k], _raw_values(col, idx), "altered",
                        f"{k.split('_')[0]} volume missing; set to 0")
                v = np.where(empty, 0.0, v)
        vals[k] = v

    # pressure (sparse): bad values dropped, row kept
    pres = np.full(n, np.nan)
    if "pressure_psia" in mp:
        col = f[mp["pressure_psia"]]
        v, st = _parse_numbers(col, t.decimal_comma)
        scale, off = _conversion("pressure_psia", mp["pressure_psia"], units, name, messages, unit_row)
        v = v * scale + off
        txt = (st >= _TEXT) & ~reject
        if txt.any():
            idx = np.flatnonzero(txt)
            rep.add(rows[idx], wid_np[idx], mp["pressure_psia"], _raw_values(col, idx), "altered",
                    "pressure not a number; dropped (row kept)")
        out_rng = (st == _OK) & ((v <= 0) | (v > PRESSURE_MAX_PSIA)) & ~reject
        if out_rng.any():
            idx = np.flatnonzero(out_rng)
            rep.add(rows[idx], wid_np[idx], mp["pressure_psia"], _raw_values(col, idx), "altered",
                    f"pressure outside (0, {PRESSURE_MAX_PSIA:g}] psia; dropped (row kept)")
        pres = np.where((st == _OK) & ~out_rng, v, np.nan)

    # reservoir unit
    if "unit" in mp:
        ucol = f[mp["unit"]]
        ucodes_, uuniq = pd.factorize(ucol, use_na_sentinel=True)
        uu = pd.Series(np.asarray(uuniq, dtype=object)).astype(str).str.strip()
        uu = uu.where(~uu.str.lower().isin(NA_TOKENS | {""}), "unassigned")
        unit = np.append(uu.to_numpy(dtype=object), "unassigned")[np.where(ucodes_ >= 0, ucodes_, len(uu))]
    else:
        unit = np.full(n, "unassigned", dtype=object)

    keep = ~reject
    kidx = np.flatnonzero(keep)
    mi_k = mi[kidx]
    yy, mm = mi_k // 12, mi_k % 12 + 1
    dim = _days_in(yy, mm).astype(np.int64)
    oil = vals["oil_bbl"][kidx]
    gas = vals["gas_mcf"][kidx] if "gas_mcf" in vals else np.full(len(kidx), np.nan)
    water = vals["water_bbl"][kidx] if "water_bbl" in vals else np.full(len(kidx), np.nan)
    if "days_on" in vals:
        days = vals["days_on"][kidx].copy()
        given = np.isfinite(days)
        over = given & (days > dim)
        if over.any():
            i2 = np.flatnonzero(over)
            dcol = f[mp["days_on"]]
            rep.add(rows[kidx[i2]], wid_np[kidx[i2]], mp["days_on"], _raw_values(dcol, kidx[i2]), "altered",
                    [f"days on above the {d} days in the month; capped at {d}" for d in dim[i2]])
            days = np.where(over, dim, days)
        vol = np.nan_to_num(oil) + np.nan_to_num(gas) + np.nan_to_num(water)
        zero_prod = given & (days == 0) & (vol > 0)
        if zero_prod.any():
            i2 = np.flatnonzero(zero_prod)
            rep.add(rows[kidx[i2]], wid_np[kidx[i2]], mp["days_on"], "0", "altered",
                    "days on 0 but volumes reported; calendar days used")
            given &= ~zero_prod
        days = np.where(given, days, dim).astype(float)
    else:
        days = dim.astype(float)
        given = np.zeros(len(kidx), dtype=bool)
        messages.append(f"{name}: no days-on column; rates are per calendar day")

    prod = pd.DataFrame({
        "well_id": pd.Series(wid_np[kidx], dtype=object), "wrank": wrank[kidx], "month_i": mi_k, "unit": pd.Series(unit[kidx], dtype=object), "oil_bbl": oil,
        "gas_mcf": gas, "water_bbl": water, "days_on": days, "days_on_given": given, "days_in_month": dim,
        "pressure_psia": pres[kidx], "source_row": rows[kidx].astype(np.int64)})
    extra_cols = [k for k in HEADER_FIELDS if k in mp]
    for k in extra_cols:
        v, st = _parse_numbers(f[mp[k]], t.decimal_comma)
        sc, off = _conversion(k, mp[k], units, name, messages, unit_row)
        prod[k] = (v * sc + off)[kidx]
    content_sha256 = t.content_sha256
    # the raw table is no longer needed: free it before the derived columns (memory on big files)
    col = ucol = dcol = None
    del f, t, vals, wcol, mcol, col, ucol, dcol, wid_np, mi, pres, unit, oil, gas, water, days, given

    # duplicates
    dupmask = prod.duplicated(["wrank", "month_i"], keep=False).to_numpy()
    if dupmask.any():
        d = prod.loc[dupmask].copy()
        valcols = ["unit", "oil_bbl", "gas_mcf", "water_bbl", "days_on", "pressure_psia"]
        d["_h"] = pd.util.hash_pandas_object(d[valcols], index=False).to_numpy()
        grp = d.groupby(["wrank", "month_i"], sort=False)
        nh = grp["_h"].transform("nunique").to_numpy()
        first_row = grp["source_row"].transform("min").to_numpy()
        allrows = grp["source_row"].transform(lambda s: ", ".join(map(str, sorted(s)))).to_numpy()
        exact_later = (nh == 1) & (d["source_row"].to_numpy() != first_row)
        conflict = nh > 1
        drop = np.zeros(len(prod), dtype=bool)
        di = np.flatnonzero(dupmask)
        if exact_later.any():
            dd = d.loc[exact_later]
            rep.add(dd["source_row"].to_numpy(), dd["well_id"].to_numpy(), mp["month"],
                    _ym(dd["month_i"].to_numpy()), "rejected",
                    [f"exact duplicate of row {r}; dropped" for r in first_row[exact_later]])
            drop[di[exact_later]] = True
        if conflict.any():
            dd = d.loc[conflict]
            rep.add(dd["source_row"].to_numpy(), dd["well_id"].to_numpy(), mp["month"],
                    _ym(dd["month_i"].to_numpy()), "rejected",
                    [f"conflicting duplicate well-month (rows {r}): all copies rejected" for r in allrows[conflict]])
            drop[di[conflict]] = True
        prod = prod.loc[~drop]

    # order
    prod = prod.reset_index(drop=True)
    order = np.lexsort((prod["month_i"].to_numpy(), prod["wrank"].to_numpy()))
    prod = prod.iloc[order].reset_index(drop=True)
    w = prod["well_id"].to_numpy()
    wr = prod["wrank"].to_numpy()
    same = np.r_[False, wr[1:] == wr[:-1]]
    sr = prod["source_row"].to_numpy()
    ooo = same & (np.r_[0, np.diff(sr)] < 0)
    if ooo.any():
        ws = pd.unique(w[ooo])
        rep.add([pd.NA] * len(ws), ws, mp["month"], "", "info", "rows not in month order; sorted by month")
    # gaps
    mik = prod["month_i"].to_numpy()
    step = np.r_[0, np.diff(mik)]
    gap = same & (step > 1)
    if gap.any():
        gi = np.flatnonzero(gap)
        a, b = mik[gi - 1] + 1, mik[gi] - 1
        txt = [(_ym1(x) if x == y else f"{_ym1(x)}..{_ym1(y)}") for x, y in zip(a, b)]
        gdf = pd.DataFrame({"w": w[gi], "t": txt, "n": b - a + 1})
        agg = gdf.groupby("w", sort=True).agg(t=("t", lambda s: ", ".join(list(s)[:6]) + (" ..." if len(s) > 6 else "")),
                                               n=("n", "sum"))
        rep.add([pd.NA] * len(agg), agg.index.to_numpy(), mp["month"], agg["t"].to_numpy(), "info",
                [f"{int(k)} missing month(s) inside the well's history; not filled (treated as shut in)"
                 for k in agg["n"]])

    if len(prod) == 0 and allow_no_rows:
        report = rep.frame()
        empty = {c: pd.Series(dtype=object) for c in PRODUCTION_COLUMNS}
        production = pd.DataFrame(empty)
        wells = pd.DataFrame({c: pd.Series(dtype=object if c in ("well_id", "unit") else float)
                              for c in WELL_COLUMNS})
        rows_read = n + (int((report["reason"].str.startswith(("truncated last line", "wrong number of fields"))).sum())
                         if len(report) else 0)
        return LoadResult(
            production=production, wells=wells, report=report, mapping=dict(mp), rows_read=int(rows_read),
            rows_used=0, rows_rejected=int(rows_read), file_name=name, content_sha256=content_sha256,
            pressure_kind=pressure_kind, messages=messages)
    if len(prod) == 0:
        summary = rep.frame()
        top = summary.loc[summary["action"] == "rejected", "reason"].value_counts().head(3)
        why = "; ".join(f"{r} ({c})" for r, c in top.items()) or "no data"
        raise InputError(f"{name}: no usable rows; all {n:,} data row(s) were rejected: {why}")

    # derived
    prod["month"] = _month_from_index(mik)
    dd_ = prod["days_on"].to_numpy()
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for vcol, rcol in (("oil_bbl", "oil_rate_bbl_d"), ("gas_mcf", "gas_rate_mcf_d"), ("water_bbl", "water_rate_bbl_d")):
            prod[rcol] = np.where(dd_ > 0, prod[vcol].to_numpy() / np.where(dd_ > 0, dd_, 1.0), np.nan)
        o = prod["oil_bbl"].to_numpy()
        g_ = prod["gas_mcf"].to_numpy()
        wt = prod["water_bbl"].to_numpy()
        prod["oil_rate_cal_bbl_d"] = o / prod["days_in_month"].to_numpy()
        gor = np.where((o > 0) & np.isfinite(g_), 1000.0 * g_ / np.where(o > 0, o, 1.0), np.nan)
        prod["gor_scf_stb"] = np.where(np.isfinite(gor), gor, np.nan)  # tiny oil volumes: no inf
        s_ow = o + wt
        prod["water_cut"] = np.where(np.isfinite(s_ow) & (s_ow > 0), wt / np.where(s_ow > 0, s_ow, 1.0), np.nan)
    grp = prod.groupby("wrank", sort=False)
    prod["cum_oil_bbl"] = grp["oil_bbl"].cumsum(skipna=False)
    prod["cum_gas_mcf"] = grp["gas_mcf"].cumsum(skipna=False)
    prod["cum_water_bbl"] = grp["water_bbl"].cumsum(skipna=False)

    # well-level checks
    stats = grp.agg(wname=("well_id", "first"), n=("oil_bbl", "size"), o=("oil_bbl", "sum"), g=("gas_mcf", "sum"),
                    wt=("water_bbl", "sum")).set_index("wname")
    one = stats.index[stats["n"] == 1]
    if len(one):
        rep.add([pd.NA] * len(one), one.to_numpy(), "", "", "info", "only one month of production; too short to forecast")
    allzero = stats.index[(stats["o"].fillna(0) + stats["g"].fillna(0) + stats["wt"].fillna(0)) == 0]
    if len(allzero):
        rep.add([pd.NA] * len(allzero), allzero.to_numpy(), "", "", "info", "all volumes are zero; nothing to forecast")
    nooil = stats.index[(stats["o"] == 0) & (stats["g"].fillna(0) > 0)]
    if len(nooil):
        rep.add([pd.NA] * len(nooil), nooil.to_numpy(), mp["oil_bbl"], "", "info", "no oil in any month, gas only")

    # well header
    wfirst = np.r_[True, ~same[1:]] if len(same) else np.zeros(0, bool)
    wells = pd.DataFrame({"well_id": pd.Series(prod["well_id"].to_numpy()[wfirst], dtype=object)})
    ugrp = prod.groupby("wrank", sort=False)["unit"]
    last_unit = pd.Series(ugrp.last().to_numpy(), index=wells["well_id"].to_numpy())
    nun = pd.Series(ugrp.nunique().to_numpy(), index=wells["well_id"].to_numpy())
    changed = nun[nun > 1].index
    if len(changed):
        rep.add([pd.NA] * len(changed), changed.to_numpy(), mp.get("unit", "unit"), "", "info",
                "well has rows in more than one reservoir unit; latest unit used in the well header")
    wells["unit"] = wells["well_id"].map(last_unit)
    for k in HEADER_FIELDS:
        if k in prod:
            wells[k] = wells["well_id"].map(_per_well_constant(prod, k, rep, k)).astype(float)
        else:
            wells[k] = np.nan
    wells = _check_header_bounds(wells, rep)
    if well_header is not None:
        wh = well_header if isinstance(well_header, WellHeaderLoad) else load_well_header(
            well_header, file_name=well_header_name, units=units, max_bytes=max_bytes)
        messages.extend(wh.messages)
        if len(wh.report):
            rep.parts.append(wh.report)
        hdr = wh.wells.set_index("well_id")
        known = wells["well_id"].isin(hdr.index).to_numpy()
        for k in HEADER_FIELDS:
            hv = wells["well_id"].map(hdr[k]).astype(float).to_numpy()
            pv = wells[k].to_numpy(dtype=float)
            differ = np.isfinite(hv) & np.isfinite(pv) & ~np.isclose(hv, pv, rtol=1e-6)
            if differ.any():
                rep.add([pd.NA] * int(differ.sum()), wells["well_id"].to_numpy()[differ], k,
                        [f"{a:g} vs {b:g}" for a, b in zip(pv[differ], hv[differ])], "info",
                        "production file and well header disagree; well header value used")
            wells[k] = np.where(np.isfinite(hv), hv, pv)
        if "unit" not in mp:
            hu = wells["well_id"].map(hdr["unit"])
            hu = hu.where(hu.notna() & (hu.astype(str) != ""), "unassigned")
            wells["unit"] = hu.to_numpy()
            prod["unit"] = prod["well_id"].map(dict(zip(wells["well_id"], wells["unit"]))).to_numpy()
        if (~known).any():
            miss = wells["well_id"].to_numpy()[~known]
            rep.add([pd.NA] * len(miss), miss, "well_id", "", "info", "well not in the well header; fluid data unknown")
        extra = sorted(set(hdr.index) - set(wells["well_id"]))
        if extra:
            rep.add([pd.NA] * len(extra), extra, "well_id", "", "info",
                    "well in the well header but not in the production file; ignored")
    # pressure surveys above the well's initial pressure: kept, reported per row
    pi_row = prod["well_id"].map(dict(zip(wells["well_id"], wells["initial_pressure_psia"]))).to_numpy(dtype=float)
    pr = prod["pressure_psia"].to_numpy(dtype=float)
    above = np.isfinite(pr) & np.isfinite(pi_row) & (pr > pi_row * 1.0001)
    if above.any():
        i2 = np.flatnonzero(above)
        rep.add(prod["source_row"].to_numpy()[i2], prod["well_id"].to_numpy()[i2], mp.get("pressure_psia", ""),
                [f"{x:g}" for x in pr[i2]], "info",
                [f"pressure above the initial pressure {x:g} psia; kept as given" for x in pi_row[i2]])
    # gas column present but zero in every month with oil: GOR 0 throughout
    if "gas_mcf" in mp:
        has_oil = prod["oil_bbl"].to_numpy() > 0
        gsum = pd.Series(np.where(has_oil, prod["gas_mcf"].to_numpy(), 0.0)).groupby(prod["wrank"].to_numpy()).sum()
        osum = pd.Series(has_oil.astype(int)).groupby(prod["wrank"].to_numpy()).sum()
        zero_gor = (gsum.to_numpy() == 0) & (osum.to_numpy() > 0)
        if zero_gor.any():
            wz = wells["well_id"].to_numpy()[zero_gor]
            rep.add([pd.NA] * len(wz), wz, mp["gas_mcf"], "0", "info",
                    "gas is zero in every month with oil (GOR 0): gas may not be metered")
    unassigned = int((prod["unit"] == "unassigned").sum())
    if unassigned:
        messages.append(f"{name}: {unassigned:,} row(s) with no reservoir unit: 'unassigned'")

    cols: dict[str, Any] = {c: prod[c].to_numpy() for c in PRODUCTION_COLUMNS}
    cols["well_id"] = pd.Series(cols["well_id"], dtype=object)
    cols["unit"] = pd.Series(cols["unit"], dtype=object)
    cols["month"] = cols["month"].astype("datetime64[ns]")
    cols["days_in_month"] = cols["days_in_month"].astype(np.int64)
    cols["days_on_given"] = cols["days_on_given"].astype(bool)
    production = pd.DataFrame(cols)
    del cols
    wells = wells[WELL_COLUMNS].reset_index(drop=True)
    wells["well_id"] = wells["well_id"].astype(object)
    wells["unit"] = wells["unit"].astype(object)
    report = rep.frame()
    rows_read = n + (int((report["reason"].str.startswith(("truncated last line", "wrong number of fields"))).sum())
                     if len(report) else 0)
    rows_used = len(production)
    return LoadResult(
        production=production, wells=wells, report=report, mapping=dict(mp), rows_read=int(rows_read),
        rows_used=int(rows_used), rows_rejected=int(rows_read - rows_used), file_name=name,
        content_sha256=content_sha256, pressure_kind=pressure_kind, messages=messages)


def _ym1(mi: int) -> str:
    return f"{int(mi) // 12:04d}-{int(mi) % 12 + 1:02d}"


def _ym(mi: np.ndarray) -> list[str]:
    return [_ym1(x) for x in mi]
