"""The batch run streamed by blocks of wells, for production files too large to hold at once.

The normal run (:func:`core.run.run_field`) holds the whole tidy table, every fit and every
forecast month in memory: about 0.12 GB per 1,000 wells of 24-240 months. The streamed run
holds one block of wells at a time:

**Pass 1 (split).** The file is read in chunks of whole lines. The loader's own detection
(delimiter, header line, columns, decimal mark: :func:`core.production.csv_layout`) runs
once on the first part of the file and is applied to every chunk; a chunk whose own lines
sniff differently is reported in the load report (``info`` line naming its rows), never
silently. Each line goes, verbatim, to the spill file of its well's sub-block: a well joins
the open sub-block of its reservoir unit (the production file's unit column, else the
well-header file's) when its id first appears, so every row of a well lands in one block and
duplicates and conflicts of a well are handled by the loader exactly as in the normal run.
Blocks are the units' sub-blocks packed up to ``block_wells`` wells, units in name order: a
unit that fits in a block is run whole (the stage tracker fills header gaps from the unit's
median and fits one material-balance Corey set per PVT group of wells, so a well's stage
depends on the other wells of its unit). The date order (day/month) is settled once from every distinct date
text of the file, as the loader does on the whole file; the encoding likewise (latin-1 for
every block when any byte is not UTF-8); a column that is text anywhere in the file is read
as text in every block. Rows with extra fields and a truncated last line are reported as the
loader reports them.

**Pass 2 (run).** Per block, the loader's validation (:func:`core.production.load_production`
on the block's cells, with the file's row numbers) and the same :func:`core.run.run_field`
the dashboard uses; ``wells.csv``, ``forecast_monthly.csv`` and ``load_report.csv`` are
appended block by block. Every block runs as of the same month (the file's last month). The
unit table is made at the end by the stage tracker's own ``track_units`` on the rows of
a few units at a time (each well's rows with its unit; the tracker's inputs: month, volumes,
days, pressure) read back from compact per-block files, with every well's stage and header;
unit totals and the summary come from the wells' rows in the normal run's order, so they
equal the normal run's.

Order of the rows: each block's wells and months come in the normal run's order (sorted by
well id); blocks follow the units in name order (a unit's wells in the order they first
appear in the file); wells whose every row was rejected come at the end of their block;
load-report lines come block by block. Numbers: the same, except that a well's Arps fit is
made in a batch of the wells of its block, and the decline engine's batch padding moves a fit
in its last bits (the solver's 1e-8 stopping tolerance can carry that to about 1e-9 relative;
see the tests); and a unit larger than a block (or a PVT group spread over units in
different blocks) is split, so its wells' material-balance match and header-gap fill see only
their block (stage evidence, and rarely a stage date, can then differ).

Not streamed (an :class:`InputError` says so and names ``--block-wells 0``): ``--samples``
(the probabilistic calibration pools every well of the field), ``--type-wells`` and ``--db``.
An XLSX input, a UTF-16 file, old Mac line ends or quoted line breaks inside cells make the
command fall back to the normal run (:class:`StreamUnsupported`, with a note).
"""

from __future__ import annotations

import dataclasses
import gc
import hashlib
import io
import os
import shutil
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import numpy as np
import pandas as pd

from core import __version__
from core.validation import InputError

#: Wells per block of the streamed run by default. A block of 2,500 wells of 24-240 months
#: (about 0.33 M rows) runs in well under 1 GB, in one process: the decline engine starts
#: worker processes only from 4,000 wells (measured, benchmarks/bench_run.py).
DEFAULT_BLOCK_WELLS = 2_500

#: Input files at least this large are streamed by the batch command unless ``--block-wells``
#: says otherwise [bytes] (256 MiB: about 4.6 M rows or 35,000 wells of the benchmark field,
#: which the normal run holds in about 4 GB).
STREAM_MIN_BYTES = 256 * 2**20

#: Bytes read per chunk in pass 1 (whole lines).
CHUNK_BYTES = 8 * 2**20

#: Bytes of the file's first part on which the layout is detected.
HEAD_BYTES = 2**20

#: Rows of the unit tracker's input read back at once when the unit table is made (a unit
#: larger than this is still done in one piece).
UNIT_BATCH_ROWS = 3_000_000

#: Columns of the tidy table the unit tracker reads (``core.stages.track_units``).
UNIT_ROW_COLUMNS = ["well_id", "unit", "month", "oil_bbl", "gas_mcf", "water_bbl", "days_on", "days_in_month",
                    "pressure_psia"]

#: Columns of the wells table the unit totals and the summary need.
SLIM_WELL_COLUMNS = ["well_id", "unit", "status", "fluid_type", "first_month", "cum_oil_bbl", "cum_gas_mcf",
                     "cum_water_bbl", "remaining_oil_bbl", "eur_oil_bbl", "eur_gas_mcf", "passed_gor_peak"]

#: ``status`` of a well whose every row was rejected (``core.run``).
_NO_ROWS = "no usable rows (see load_report)"

ProgressCallback = Callable[[float, str], None]


class StreamUnsupported(Exception):
    """The file cannot be streamed (the reason is the message); run it the normal way."""


def block_wells_for(path: str | Path, block_wells: int | None) -> int:
    """Wells per block for the batch command, 0 for the normal (unstreamed) run.

    The rule: ``block_wells`` when given (0 = never stream); otherwise
    :data:`DEFAULT_BLOCK_WELLS` when the input is a CSV text file of at least
    :data:`STREAM_MIN_BYTES`, else 0.
    """
    if block_wells is not None:
        if isinstance(block_wells, bool) or int(block_wells) != block_wells or block_wells < 0:
            raise InputError(f"--block-wells must be 0 (never stream) or a positive whole number, got {block_wells!r}")
        return int(block_wells)
    p = Path(path)
    try:
        size = p.stat().st_size
        with open(p, "rb") as fh:
            magic = fh.read(4)
    except OSError:
        return 0
    if size < STREAM_MIN_BYTES or magic.startswith(b"PK\x03\x04") or p.suffix.lower() in (".xlsx", ".xlsm"):
        return 0
    return DEFAULT_BLOCK_WELLS


# --------------------------------------------------------------------------------------------
# pass 1: split the file into blocks of wells
# --------------------------------------------------------------------------------------------
@dataclass
class Spill:
    """What pass 1 leaves for pass 2 (spill files and the file-wide reading decisions)."""

    work: Path
    name: str
    layout: Any
    mapping: dict
    n_blocks: int
    blocks: list  # block -> its sub-blocks (spill files), each holding wells of one unit
    rows_in_block: list  # per sub-block
    extra: dict  # sub-block -> list of report DataFrames
    object_cols: set
    slow: bool
    encoding: str
    sha256: str
    dayfirst: bool | None
    as_of_estimate: pd.Timestamp | None
    units_row: tuple | None  # (line bytes, file row)
    header_load: Any
    header_of_block: dict  # block -> list of well ids from the header file
    header_report_of_block: dict  # block -> the header file's report lines of its wells
    messages: list = field(default_factory=list)
    blank_lines: int = 0

    def lines_path(self, b: int) -> Path:
        return self.work / f"block_{b:05d}.csv"

    def rows_path(self, b: int) -> Path:
        return self.work / f"block_{b:05d}.rows"


def _pack(items: list, size_of: Callable[[Any], int], cap: int) -> list[list]:
    """Items in their order, packed into consecutive groups of total size at most ``cap``
    (an item larger than ``cap`` forms a group of its own)."""
    groups: list[list] = []
    cur: list = []
    n = 0
    for it in items:
        k = size_of(it)
        if cur and n + k > cap:
            groups.append(cur)
            cur, n = [], 0
        cur.append(it)
        n += k
    if cur:
        groups.append(cur)
    return groups


def _read_kw(layout: Any, dtype: dict) -> dict:
    return dict(sep=layout.delimiter, header=None, names=layout.header, dtype=dtype, keep_default_na=False,
                na_values=[""], skip_blank_lines=False, low_memory=False, quotechar='"',
                decimal="," if layout.decimal_comma else ".")


def split_file(
    path: str | Path,
    work: Path,
    *,
    block_wells: int,
    units: str = "field",
    unit_column: str | None = None,
    wells_path: str | Path | None = None,
    max_bytes: int | None = None,
    dayfirst: bool | None = None,
    progress: ProgressCallback | None = None,
    chunk_bytes: int = CHUNK_BYTES,
) -> Spill:
    """Pass 1: read ``path`` in chunks and spill its lines to one file per block of wells.

    Raises :class:`StreamUnsupported` for inputs the streamed run does not read (XLSX,
    UTF-16, old Mac line ends, quoted line breaks inside cells, unrecognised columns: the
    normal run reads and reports those) and :class:`InputError` as the loader does.
    """
    from core import production as P

    p = Path(path)
    name = p.name
    size = p.stat().st_size
    if max_bytes is not None and size > max_bytes:
        raise InputError(f"{name}: file is {size:,} bytes, over the limit of {max_bytes:,} bytes (max_bytes)")
    with open(p, "rb") as fh:
        head = fh.read(HEAD_BYTES)
    if not head:
        raise InputError(f"{name}: the file is empty (0 bytes)")
    if head.startswith(b"PK\x03\x04") or p.suffix.lower() in (".xlsx", ".xlsm"):
        raise StreamUnsupported("an XLSX workbook is read whole")
    if head.startswith((b"\xff\xfe", b"\xfe\xff")) or b"\x00" in head:
        raise StreamUnsupported("UTF-16 or binary content is read whole")
    if b"\r" in head and head.count(b"\r") != head.count(b"\r\n"):
        raise StreamUnsupported("old Mac (CR-only) line ends are read whole")
    if len(head) < size:
        cut = head.rfind(b"\n")
        if cut < 0:
            raise StreamUnsupported("no line break in the first MiB")
        head = head[:cut + 1]
    layout = P.csv_layout(head, name, unit_column=unit_column)
    mp = P._resolve_mapping(list(layout.header), None, name, unit_column)
    if any(k not in mp for k in ("well_id", "month", "oil_bbl")):
        raise StreamUnsupported("no recognisable well, month or oil column (the normal run reports it)")
    # byte offset of the first data line (after the header line)
    off = 0
    for _ in range(layout.header_line + 1):
        off = head.index(b"\n", off) + 1
    wcol, mcol = mp["well_id"], mp["month"]
    work.mkdir(parents=True, exist_ok=True)
    block_of: dict[str, int] = {}
    count: list[int] = []
    rows_in_block: list[int] = []
    extra: dict[int, list] = {}
    object_cols: set[str] = set()
    numeric = [c for c in layout.header if c not in layout.dtype]
    dates: set = set()
    slow = False
    utf8 = layout.encoding == "utf-8"
    sha = hashlib.sha256()
    messages: list[str] = list(layout.messages)
    units_row = None
    blank_total = 0

    open_of: dict[str, int] = {}
    unit_of_sub: list[str] = []
    header_unit: dict[str, str] = {}

    def assign(keys: np.ndarray, units: np.ndarray | None = None) -> np.ndarray:
        """Sub-block of each row's well: a well joins the open sub-block of its reservoir unit
        when its id first appears (sub-blocks hold wells of one unit, so a unit's wells stay
        together when the unit fits in a block)."""
        codes, uniq = pd.factorize(keys, use_na_sentinel=False)
        first = np.full(len(uniq), -1, dtype=np.int64)
        first[codes[::-1]] = np.arange(len(codes))[::-1]
        ub = np.empty(len(uniq), dtype=np.int64)
        for i, k in enumerate(uniq):
            b = block_of.get(k)
            if b is None:
                u = str(units[first[i]]) if units is not None else header_unit.get(k, "unassigned")
                b = open_of.get(u, -1)
                if b < 0 or count[b] >= block_wells:
                    b = len(count)
                    count.append(0)
                    rows_in_block.append(0)
                    unit_of_sub.append(u)
                    open_of[u] = b
                block_of[k] = b
                count[b] += 1
            ub[i] = b
        return ub[codes]

    def report_line(row: Any, well: str, column: str, value: str, action: str, reason: str) -> pd.DataFrame:
        return pd.DataFrame({"file": [name], "row": pd.array([row], dtype="Int64"), "well_id": [well],
                             "column": [column], "value": [value], "action": [action], "reason": [reason]})

    def add_extra(b: int, df: pd.DataFrame) -> None:
        extra.setdefault(int(b), []).append(df)

    header_load = None
    if wells_path is not None:
        kw = {} if max_bytes is None else {"max_bytes": int(max_bytes)}
        header_load = P.load_well_header(Path(wells_path), units=units, **kw)
        hw = header_load.wells
        hu = hw["unit"].where(hw["unit"].notna() & (hw["unit"].astype(str) != ""), "unassigned").astype(str)
        header_unit.update(zip(hw["well_id"].astype(str).str.strip(), hu))
    contradictions: list[pd.DataFrame] = []
    line_no = layout.header_line + 2  # file row (1-based) of the next data line
    first_chunk = True
    skip = off
    carry = b""
    done_bytes = 0
    with open(p, "rb") as fh:
        while True:
            data = fh.read(chunk_bytes)
            eof = len(data) < chunk_bytes
            sha.update(data)
            done_bytes += len(data)
            buf = carry + data
            if skip:
                take = min(skip, len(buf))
                buf = buf[take:]
                skip -= take
            if not eof:
                cut = buf.rfind(b"\n")
                if cut < 0:
                    carry = buf
                    continue
                chunk, carry = buf[:cut + 1], buf[cut + 1:]
            else:
                chunk, carry = buf, b""
            if chunk:
                st: dict = {}
                line_no = _split_chunk(
                    chunk, line_no, eof, layout, mp, name, first_chunk, assign, add_extra, report_line, object_cols,
                    numeric, dates, contradictions, work, rows_in_block, st,
                )
                first_chunk = False
                slow = slow or bool(st.get("slow"))
                utf8 = utf8 and st.get("utf8", True)
                if st.get("units_row") is not None:
                    units_row = st["units_row"]
                blank_total += st.get("blank", 0)
            if progress is not None:
                progress(min(done_bytes / max(size, 1), 1.0), f"splitting into blocks of {block_wells:,} wells")
            if eof:
                break
    if not block_of:
        raise InputError(f"{name}: header only, no data rows")
    for c in contradictions:
        add_extra(0, c)
    encoding = "utf-8" if utf8 else "latin-1"
    if not utf8 and layout.encoding == "utf-8":
        messages.append(f"{name}: not valid UTF-8 further into the file; read as latin-1 (ISO-8859-1)")
    # the date order, settled once on every distinct date text (as the loader does on the file)
    uniq = pd.Series(sorted(dates), dtype=object)
    dp = P._parse_dates(uniq, name, mcol, dayfirst)
    if dayfirst is None and dp.order:
        dayfirst = dp.order.startswith("day-first")
    now_mi = P._as_of_month(None)
    mi = dp.month_index[(dp.month_index >= 0) & (dp.month_index <= now_mi)]
    as_of = None
    if mi.size:
        m = int(mi.max())
        as_of = pd.Timestamp(year=m // 12, month=m % 12 + 1, day=1)
    # the well-header file: loaded once, each well's line given to its block
    header_of_block: dict[int, list] = {}
    if header_load is not None:
        ids = header_load.wells["well_id"].astype(str).str.strip().to_numpy(dtype=object)
        bl = assign(ids) if len(ids) else np.zeros(0, np.int64)
        for w, b in zip(ids, bl):
            header_of_block.setdefault(int(b), []).append(w)
        rep = header_load.report
        if len(rep):
            rid = rep["well_id"].fillna("").astype(str).str.strip() if "well_id" in rep.columns else pd.Series("", index=rep.index)
            rb = np.array([block_of.get(w, 0) if w else 0 for w in rid], dtype=np.int64)
            header_report_of_block = {int(b): rep[rb == b].reset_index(drop=True) for b in np.unique(rb)}
        else:
            header_report_of_block = {}
    else:
        header_report_of_block = {}
    # blocks: the sub-blocks of each unit in turn (units sorted), packed up to block_wells wells
    blocks = _pack(sorted(range(len(count)), key=lambda x: (unit_of_sub[x], x)), lambda sb: count[sb], block_wells)
    return Spill(work=work, name=name, layout=layout, mapping=mp, n_blocks=len(blocks), blocks=blocks,
                 rows_in_block=rows_in_block,
                 extra=extra, object_cols=object_cols, slow=slow, encoding=encoding, sha256=sha.hexdigest(),
                 dayfirst=dayfirst, as_of_estimate=as_of, units_row=units_row, header_load=header_load,
                 header_of_block=header_of_block, header_report_of_block=header_report_of_block,
                 messages=messages, blank_lines=blank_total)


def _split_chunk(chunk, line_no, eof, layout, mp, name, is_first, assign, add_extra, report_line, object_cols,
                 numeric, dates, contradictions, work, rows_in_block, st) -> int:
    """Parse one chunk of whole lines and append each line to its block's spill file;
    return the file row of the next line."""
    from core import production as P

    text = chunk.decode("latin-1")  # byte-faithful keys; the encoding is decided file-wide
    try:
        chunk.decode("utf-8")
    except UnicodeDecodeError:
        st["utf8"] = False
    lines = chunk.split(b"\n")
    if lines and lines[-1] == b"":
        lines.pop()
    n_lines = len(lines)
    # the layout of the first part, checked on this chunk's own lines
    sample = [ln.rstrip("\r") for ln in text[:1 << 16].split("\n")[:HEAD_LINES_CHECK]]
    d, dec = P.sniff_chunk(sample, layout.delimiter)
    if not is_first and (d != layout.delimiter or dec != layout.decimal_comma):
        what = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}
        contradictions.append(report_line(
            line_no, "", "", "", "info",
            f"the lines from row {line_no:,} look {what.get(d, d)}-delimited"
            + (" with a decimal comma" if dec else "")
            + f", unlike the file's first part ({what.get(layout.delimiter, layout.delimiter)}-delimited"
            + (", decimal comma" if layout.decimal_comma else "") + "); read as the first part"))
    kw = _read_kw(layout, layout.dtype)
    extra_df = None
    try:
        frame = pd.read_csv(io.StringIO(text), **kw)
        rownum = np.arange(len(frame), dtype=np.int64) + line_no
        if len(frame) != n_lines:
            raise StreamUnsupported("quoted line breaks inside cells are read whole")
    except (pd.errors.ParserError, ValueError) as exc:
        if isinstance(exc, StreamUnsupported):
            raise
        st["slow"] = True
        frame, extra_df, rel = P._read_csv_slow(text, name, layout.delimiter, layout.header, -1, layout.dtype,
                                                layout.decimal_comma, None)
        rownum = rel.astype(np.int64) + line_no - 1
        if extra_df is not None:
            extra_df = extra_df.assign(row=pd.array(extra_df["row"].to_numpy(np.int64) + line_no - 1, dtype="Int64"))
    if eof and extra_df is None and len(frame) and not chunk.endswith((b"\n", b"\r")):
        # truncated last line, as the loader reports it
        last = text[text.rfind("\n") + 1:]
        import csv as _csv

        flds = next(_csv.reader([last], delimiter=layout.delimiter), [])
        if 0 < len(flds) < len(layout.header):
            extra_df = pd.DataFrame({"file": [name], "row": pd.array([int(rownum[-1])], dtype="Int64"),
                                     "well_id": [flds[0].strip()], "column": [layout.header[len(flds) - 1]],
                                     "value": [last[:80]], "action": ["rejected"],
                                     "reason": [f"truncated last line: {len(flds)} of {len(layout.header)} fields"]})
            frame = frame.iloc[:-1]
            rownum = rownum[:-1]
    blank = frame.isna().all(axis=1).to_numpy()
    if blank.any():
        st["blank"] = int(blank.sum())
        frame = frame.loc[~blank]
        rownum = rownum[~blank]
    frame = frame.reset_index(drop=True)
    if is_first and len(frame) and P._units_row(frame, mp):
        li = int(rownum[0] - line_no)
        st["units_row"] = (lines[li].rstrip(b"\r"), int(rownum[0]))
        frame = frame.iloc[1:].reset_index(drop=True)
        rownum = rownum[1:]
    for c in numeric:
        if c in frame.columns and frame[c].dtype == object:
            object_cols.add(c)
    mc = frame[mp["month"]]
    dates.update(pd.unique(mc.astype(object).where(mc.notna(), "")).tolist())
    wc = frame[mp["well_id"]]
    keys = wc.astype(object).where(wc.notna(), "").astype(str).str.strip().to_numpy(dtype=object)
    if "unit" in mp:
        uc = frame[mp["unit"]]
        uu = uc.astype(object).where(uc.notna(), "").astype(str).str.strip()
        uu = uu.where(~uu.str.lower().isin(P.NA_TOKENS | {""}), "unassigned").to_numpy(dtype=object)
    else:
        uu = None
    blk = assign(keys, uu) if len(keys) else np.zeros(0, np.int64)
    if extra_df is not None and len(extra_df):
        ek = extra_df["well_id"].astype(str).str.strip().to_numpy(dtype=object)
        eb = assign(ek)
        for b in np.unique(eb):
            add_extra(int(b), extra_df[eb == b])
    if len(blk):
        arr = np.asarray(lines, dtype=object)
        order = np.argsort(blk, kind="stable")
        bs = blk[order]
        starts = np.flatnonzero(np.r_[True, bs[1:] != bs[:-1]])
        ends = np.r_[starts[1:], len(bs)]
        for s0, e0 in zip(starts, ends):
            b = int(bs[s0])
            sel = order[s0:e0]
            li = (rownum[sel] - line_no).astype(np.int64)
            data = b"\n".join(arr[li].tolist()) + b"\n"
            with open(work / f"block_{b:05d}.csv", "ab") as fh:
                fh.write(data)
            with open(work / f"block_{b:05d}.rows", "ab") as fh:
                fh.write(rownum[sel].astype(np.int64).tobytes())
            rows_in_block[b] += len(sel)
    return line_no + n_lines


#: Lines of a chunk sniffed to check it against the file's first part.
HEAD_LINES_CHECK = 80


# --------------------------------------------------------------------------------------------
# pass 2: run the blocks
# --------------------------------------------------------------------------------------------
def _block_table(spill: Spill, subs: list) -> Any:
    """The block's cells as the loader's RawTable (file row numbers, file-wide decisions)."""
    from core import production as P

    data = b"".join(spill.lines_path(b).read_bytes() for b in subs if spill.lines_path(b).exists())
    rr = [np.fromfile(spill.rows_path(b), dtype=np.int64) for b in subs if spill.rows_path(b).exists()]
    rows = np.concatenate(rr) if rr else np.zeros(0, np.int64)
    if spill.units_row is not None:
        data = spill.units_row[0] + b"\n" + data
        rows = np.r_[np.int64(spill.units_row[1]), rows]
    text = data.decode("latin-1" if spill.encoding == "latin-1" else "utf-8")
    del data
    layout = spill.layout
    if spill.slow:
        dtype = {c: str for c in layout.header}
        frame, _, rel = P._read_csv_slow(text, spill.name, layout.delimiter, layout.header, -1, dtype,
                                         layout.decimal_comma, None)
        rows = rows[rel.astype(np.int64) - 1]
    else:
        dtype = dict(layout.dtype)
        dtype.update({c: str for c in spill.object_cols})
        if text:
            frame = pd.read_csv(io.StringIO(text), **_read_kw(layout, dtype))
        else:
            frame = pd.DataFrame({c: pd.Series(dtype=object) for c in layout.header})
    del text
    parts = [x for b in subs for x in spill.extra.get(b, [])]
    extra = pd.concat(parts, ignore_index=True) if parts else None
    return P.RawTable(frame, rows, spill.name, "csv", spill.sha256, layout.decimal_comma, [], extra)


def _block_header(spill: Spill, subs: list) -> Any:
    from core import production as P

    if spill.header_load is None:
        return None
    hl = spill.header_load
    ids = {w for b in subs for w in spill.header_of_block.get(b, [])}
    w = hl.wells[hl.wells["well_id"].astype(str).str.strip().isin(ids)].reset_index(drop=True)
    reps = [spill.header_report_of_block[b] for b in subs if b in spill.header_report_of_block]
    rep = pd.concat(reps, ignore_index=True) if reps else hl.report.iloc[0:0]
    return P.WellHeaderLoad(wells=w, report=rep, mapping=hl.mapping, file_name=hl.file_name,
                            messages=list(hl.messages) if 0 in subs else [])


def _wells_without_rows(load: Any) -> pd.DataFrame:
    """The wells rows of a block whose every row was rejected (as the normal run gives them)."""
    from core import run as R

    prod = load.production
    empty = lambda cols: pd.DataFrame({c: pd.Series(dtype=object) for c in cols})  # noqa: E731
    return R._assemble_wells(prod, load.wells, load.report, empty(["well_id", "fluid_type"]),
                             empty(["well_id"]), empty(["well_id", "stream"]), empty(["well_id"]),
                             R._actuals_per_well(prod))


@dataclass
class StreamedResult:
    """What the streamed run produced (the files are in the output folder). Carries the same
    ``summary``, ``version``, ``as_of``, ``settings`` and ``inputs`` as a :class:`RunResult`
    (for the command's summary and the cover sheet); ``units`` is the unit table."""

    summary: dict
    version: str
    as_of: pd.Timestamp | None
    settings: Any
    inputs: dict
    units: pd.DataFrame
    paths: dict
    timings: dict
    n_blocks: int
    probabilistic: Any = None


def run_streamed(
    production_path: str | Path,
    out_dir: str | Path,
    *,
    settings: Any,
    block_wells: int = DEFAULT_BLOCK_WELLS,
    wells_path: str | Path | None = None,
    pressure_kind: str = "average_reservoir",
    max_bytes: int | None = None,
    dayfirst: bool | None = None,
    xlsx: bool = True,
    row_limit: int | None = None,
    work_dir: str | Path | None = None,
    progress: ProgressCallback | None = None,
    chunk_bytes: int = CHUNK_BYTES,
) -> StreamedResult:
    """Run the batch forecast block by block and write every output file into ``out_dir``.

    Parameters
    ----------
    production_path, wells_path : path
        Production CSV file and optional well-header file.
    out_dir : path
        Output folder (created when missing): ``wells.csv``, ``forecast_monthly.csv``,
        ``units.csv``, ``load_report.csv``, ``forecast.xlsx``.
    settings : RunSettings
        As for :func:`core.run.run_field`; ``samples`` must be 0.
    block_wells : int
        Wells per block (memory grows with it: under 1 GB for 2,500 wells of 24-240 months).
    work_dir : path, optional
        Folder for the spill files (removed at the end); default a temporary folder beside
        the outputs.

    Raises
    ------
    StreamUnsupported
        The file is not streamed (see the module notes); the caller runs it the normal way.
    InputError
        As the normal run.
    """
    from core import export as E
    from core import run as R
    from core.production import load_production
    from core.stages import track_units

    if settings.samples:
        raise InputError("--samples needs the whole field at once (the calibration pools every well); "
                         "not available in the streamed run: give --block-wells 0")
    if not int(block_wells) >= 1:
        raise InputError(f"block_wells must be a positive whole number, got {block_wells!r}")
    prog = progress or R._noop_progress
    t0 = time.perf_counter()
    timings: dict[str, float] = {}
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    own_work = work_dir is None
    work = Path(tempfile.mkdtemp(prefix=".streamed_", dir=out)) if own_work else Path(work_dir)
    limit = E.XLSX_MAX_ROWS if row_limit is None else int(row_limit)
    cap = limit - 1
    try:
        t = time.perf_counter()
        spill = split_file(production_path, work / "blocks", block_wells=int(block_wells), units=settings.units,
                           unit_column=settings.unit_column, wells_path=wells_path, max_bytes=max_bytes,
                           dayfirst=dayfirst, progress=lambda f, m="": prog(0.15 * f, m), chunk_bytes=chunk_bytes)
        timings["split"] = time.perf_counter() - t
        as_of = settings.as_of if settings.as_of is not None else spill.as_of_estimate
        for attempt in range(2):
            res = _run_blocks(spill, out, work, settings, as_of, pressure_kind, cap, prog, R, E, load_production)
            if settings.as_of is not None or res["last_month"] == as_of or res["last_month"] is None:
                break
            as_of = res["last_month"]  # the rows of the latest month were all rejected: run again
        timings.update(res["timings"])
        paths = res["paths"]
        if res["last_month"] is None:
            raise InputError(f"{spill.name}: no usable rows (see the load report)")
        if settings.as_of is not None and res["first_month"] is not None and settings.as_of < res["first_month"]:
            raise InputError(f"as_of {settings.as_of:%Y-%m} is before the first month in the data "
                             f"({res['first_month']:%Y-%m})")
        # units: the stage tracker's own unit rule on the rows of a few units at a time
        prog(0.88, "summarising reservoir units")
        t = time.perf_counter()
        slim = pd.concat(res["slim"], ignore_index=True)
        rej = (slim["status"] == _NO_ROWS).to_numpy()
        order = np.lexsort((slim["well_id"].astype(str).to_numpy(), rej))
        slim = slim.iloc[order].reset_index(drop=True)
        stages = pd.concat(res["stages"], ignore_index=True) if res["stages"] else pd.DataFrame({"well_id": []})
        header = pd.concat(res["headers"], ignore_index=True) if res["headers"] else None
        # wells: months to the GOR peak from the field's analogues, then wells.csv block by block
        to_pk = field_months_to_peak(stages, as_of) if len(stages) else pd.Series(dtype=float)
        if len(stages):
            stages = stages.assign(months_to_gor_peak_est=to_pk.to_numpy())
        with open(paths["wells.csv"], "wb") as fh:
            for i, f in enumerate(res["wells_files"]):
                w = pd.read_parquet(f)
                w["months_to_gor_peak_est"] = R._finite_or_nan(
                    to_pk.reindex(w["well_id"].astype(str)).set_axis(w.index)).to_numpy()
                w.to_parquet(f, index=False)
                E.append_csv(w, fh, header=i == 0)
                del w
        units_stage = _units_stage(res["unit_files"], res["home"], stages, header, as_of, track_units)
        units = R._assemble_units(units_stage, slim)
        timings["units"] = time.perf_counter() - t
        # run notes (as the normal run: summary and run-level load-report lines)
        notes = list(dict.fromkeys(res["notes"]))
        notes.insert(0, f"streamed run: {spill.n_blocks:,} block(s) of up to {int(block_wells):,} wells "
                        f"(core.streamed); every block as of {as_of:%Y-%m}")
        with open(paths["units.csv"], "wb") as fh:
            E.append_csv(units, fh, header=True)
        note_rows = pd.DataFrame({"file": "(run)", "row": pd.array([pd.NA] * len(notes), dtype="Int64"),
                                  "well_id": "", "column": "", "value": "", "action": "info", "reason": notes})
        with open(paths["load_report.csv"], "ab") as fh:
            E.append_csv(note_rows, fh, header=False)
        report_files = res["report_files"] + [_to_parquet(note_rows, work / "report_notes.parquet")]
        rows_read, rows_used = res["rows_read"], res["rows_used"]
        load_like = SimpleNamespace(rows_read=rows_read, rows_rejected=rows_read - rows_used)
        summary = R._summary(slim, settings, as_of, load_like)
        summary["messages"] = notes
        inputs = {
            "file_name": spill.name, "content_sha256": spill.sha256, "rows_read": int(rows_read),
            "rows_used": int(rows_used), "rows_rejected": int(rows_read - rows_used), "pressure_kind": pressure_kind,
            "months_after_as_of_ignored": int(res["after_as_of"]), "streamed_blocks": int(spill.n_blocks),
            "block_wells": int(block_wells),
        }
        result = StreamedResult(summary=summary, version=__version__, as_of=as_of, settings=settings, inputs=inputs,
                                units=units, paths=paths, timings=timings, n_blocks=spill.n_blocks)
        if xlsx:
            prog(0.93, f"writing {E.XLSX_FILE}")
            t = time.perf_counter()
            wells_cols = res["wells_columns"]
            report_cols = list(note_rows.columns)
            p = out / E.XLSX_FILE
            E.write_xlsx_parts(
                p, E.cover_rows(result, []),
                wells=E.TableParts(wells_cols, res["wells_rows"], _reader(res["wells_files"])),
                monthly=(E.TableParts(_monthly_columns(), res["monthly_rows"], _reader(res["monthly_files"]))
                         if res["monthly_rows"] <= cap else None),
                yearly=(E.TableParts(list(E.YEARLY_COLUMNS), res["yearly_rows"], _reader(res["yearly_files"]))
                        if res["yearly_rows"] <= cap else None),
                n_monthly=res["monthly_rows"], n_yearly=res["yearly_rows"], units=units,
                load_report=E.TableParts(report_cols, res["report_rows"] + len(note_rows), _reader(report_files)),
                row_limit=limit,
            )
            paths[E.XLSX_FILE] = p
            timings["xlsx"] = time.perf_counter() - t
        timings["run_total"] = time.perf_counter() - t0
        prog(1.0, "done")
        return result
    finally:
        if own_work:
            shutil.rmtree(work, ignore_errors=True)


def _monthly_columns() -> list[str]:
    from core.run import MONTHLY_COLUMNS

    return list(MONTHLY_COLUMNS)


def _to_parquet(df: pd.DataFrame, path: Path) -> Path:
    df.to_parquet(path, index=False)
    return path


def _reader(files: list[Path]) -> Callable:
    def read():
        for f in files:
            yield pd.read_parquet(f)
    return read


def _run_blocks(spill, out, work, settings, as_of, pressure_kind, cap, prog, R, E, load_production) -> dict:
    """Pass 2: load, run and write every block; keep the compact pieces the end needs."""
    paths = {name: out / name for name in ("wells.csv", "forecast_monthly.csv", "units.csv", "load_report.csv")}
    pieces = work / "pieces"
    if pieces.exists():
        shutil.rmtree(pieces)
    pieces.mkdir(parents=True)
    block_settings = dataclasses.replace(settings, as_of=as_of) if as_of is not None else settings
    acc: dict[str, Any] = {
        "slim": [], "stages": [], "headers": [], "unit_files": [], "home": [], "notes": [], "wells_files": [],
        "monthly_files": [], "yearly_files": [], "report_files": [], "wells_rows": 0, "monthly_rows": 0,
        "yearly_rows": 0, "report_rows": 0, "rows_read": 0, "rows_used": 0, "after_as_of": 0,
        "last_month": None, "first_month": None, "paths": paths, "wells_columns": None,
    }
    timings = {"load": 0.0, "run": 0.0, "write": 0.0}
    fh = {k: open(paths[k], "wb") for k in ("forecast_monthly.csv", "load_report.csv")}
    try:
        for b in range(spill.n_blocks):
            prog(0.15 + 0.73 * b / max(spill.n_blocks, 1), f"block {b + 1:,} of {spill.n_blocks:,}")
            t = time.perf_counter()
            subs = spill.blocks[b]
            rt = _block_table(spill, subs)
            load = load_production(
                rt, units=settings.units, unit_column=settings.unit_column,
                well_header=_block_header(spill, subs), pressure_kind=pressure_kind, dayfirst=spill.dayfirst,
                allow_no_rows=True,
            )
            del rt
            acc["rows_read"] += int(load.rows_read)
            acc["rows_used"] += int(load.rows_used)
            timings["load"] += time.perf_counter() - t
            t = time.perf_counter()
            prod_all = load.production
            if len(prod_all):
                lm = pd.Timestamp(prod_all["month"].max())
                fm = pd.Timestamp(prod_all["month"].min())
                acc["last_month"] = lm if acc["last_month"] is None else max(acc["last_month"], lm)
                acc["first_month"] = fm if acc["first_month"] is None else min(acc["first_month"], fm)
            prod = prod_all[prod_all["month"] <= as_of] if as_of is not None else prod_all
            acc["after_as_of"] += int(len(prod_all) - len(prod))
            if len(prod):
                res = R.run_field(load, settings=block_settings)
                wells, monthly, stages = res.wells, res.monthly, res.stages
                report = res.load_report
                is_run = (report["file"].astype(str) == "(run)").to_numpy()
                acc["notes"] += report.loc[is_run, "reason"].astype(str).tolist()
                report = report.loc[~is_run]
                del res
            else:
                wells = _wells_without_rows(load)
                monthly = pd.DataFrame({c: [] for c in R.MONTHLY_COLUMNS})
                stages = None
                report = load.report
            timings["run"] += time.perf_counter() - t
            t = time.perf_counter()
            first = b == 0
            if len(monthly) or first:
                E.append_csv(monthly, fh["forecast_monthly.csv"], header=first)
            if len(report) or first:
                E.append_csv(report, fh["load_report.csv"], header=first)
            acc["wells_columns"] = list(wells.columns)
            acc["wells_files"].append(_to_parquet(wells, pieces / f"wells_{b:05d}.parquet"))
            if len(report):
                acc["report_files"].append(_to_parquet(report.reset_index(drop=True), pieces / f"report_{b:05d}.parquet"))
            acc["wells_rows"] += len(wells)
            acc["report_rows"] += len(report)
            acc["monthly_rows"] += len(monthly)
            if acc["monthly_rows"] <= cap and len(monthly):
                acc["monthly_files"].append(_to_parquet(_plain(monthly), pieces / f"monthly_{b:05d}.parquet"))
            if acc["yearly_rows"] <= cap and len(monthly):
                y = E.yearly_volumes(monthly)
                acc["yearly_rows"] += len(y)
                if acc["yearly_rows"] <= cap:
                    acc["yearly_files"].append(_to_parquet(y, pieces / f"yearly_{b:05d}.parquet"))
            elif len(monthly):
                acc["yearly_rows"] += _yearly_count(monthly)
            acc["slim"].append(wells[SLIM_WELL_COLUMNS].copy())
            if stages is not None:
                acc["stages"].append(stages)
                acc["headers"].append(load.wells)
                ur = prod[UNIT_ROW_COLUMNS].reset_index(drop=True)
                ur = ur.assign(well_id=ur["well_id"].astype(str), unit=ur["unit"].astype(str))
                home = ur.groupby("well_id", sort=False)["unit"].first()
                acc["home"].append(home)
                acc["unit_files"].append(_to_parquet(ur, pieces / f"unitrows_{b:05d}.parquet"))
            timings["write"] += time.perf_counter() - t
            del load, prod, prod_all, wells, monthly, stages, report
            gc.collect()
    finally:
        for f in fh.values():
            f.close()
    acc["timings"] = timings
    return acc


def _plain(monthly: pd.DataFrame) -> pd.DataFrame:
    return monthly.assign(well_id=monthly["well_id"].astype(str), kind=monthly["kind"].astype(str))


def _yearly_count(monthly: pd.DataFrame) -> int:
    w = monthly["well_id"].cat.codes.to_numpy() if hasattr(monthly["well_id"], "cat") else pd.factorize(monthly["well_id"])[0]
    k = monthly["kind"].cat.codes.to_numpy() if hasattr(monthly["kind"], "cat") else pd.factorize(monthly["kind"])[0]
    y = pd.DatetimeIndex(monthly["month"]).year.to_numpy()
    if len(w) == 0:
        return 0
    change = np.r_[True, (w[1:] != w[:-1]) | (y[1:] != y[:-1]) | (k[1:] != k[:-1])]
    return int(change.sum())


def _units_stage(unit_files: list[Path], homes: list[pd.Series], stages: pd.DataFrame, header: pd.DataFrame | None,
                 as_of: pd.Timestamp, track_units: Callable) -> pd.DataFrame:
    """``track_units`` on the unit tracker's inputs read back a few units at a time: the rows
    of each batch's units plus every row of the wells whose first row is in one of them, in
    the normal run's order (well id, month); every well's stage and header row.

    Well ids are replaced by their rank among the sorted ids (the same order; the unit table
    names no well) so the rows take 4 bytes of id each."""
    if not unit_files:
        return pd.DataFrame({"unit": []})
    home = pd.concat(homes)
    ids = pd.Index(np.sort(stages["well_id"].astype(str).unique()))
    st_c = stages.assign(well_id=ids.get_indexer(stages["well_id"].astype(str)))
    hd_c = None
    if header is not None:
        hc = ids.get_indexer(header["well_id"].astype(str))
        hd_c = header.assign(well_id=hc)[hc >= 0]
    sizes: dict[str, int] = {}
    for f in unit_files:
        u = pd.read_parquet(f, columns=["unit"])["unit"].astype(str).value_counts()
        for k, v in u.items():
            sizes[str(k)] = sizes.get(str(k), 0) + int(v)
    all_units = sorted(sizes)
    batches = _pack(all_units, sizes.__getitem__, UNIT_BATCH_ROWS)
    ucat = pd.CategoricalDtype(all_units)
    tables = []
    for units in batches:
        wells_home = home.index[home.isin(units).to_numpy()].astype(str)
        parts = []
        for f in unit_files:
            t = pd.read_parquet(f)
            w = t["well_id"].astype(str)
            keep = t["unit"].astype(str).isin(units).to_numpy() | w.isin(wells_home).to_numpy()
            if keep.any():
                t = t.loc[keep]
                t = t.assign(well_id=ids.get_indexer(w[keep]).astype(np.int64),
                             unit=t["unit"].astype(str).astype(ucat))
                parts.append(t)
            del t, w
        rows = pd.concat(parts, ignore_index=True)
        del parts
        order = np.lexsort((rows["month"].to_numpy(dtype="datetime64[ns]"), rows["well_id"].to_numpy()))
        rows = rows.iloc[order].reset_index(drop=True)
        gc.collect()
        tu = track_units(rows, st_c, hd_c, as_of=as_of)
        tables.append(tu[tu["unit"].astype(str).isin(units)])
        del rows
        gc.collect()
    return pd.concat(tables, ignore_index=True)


def field_months_to_peak(stages: pd.DataFrame, as_of: pd.Timestamp) -> pd.Series:
    """``months_to_gor_peak_est`` of every well from the field's analogue wells (the wells
    past their GOR peak), as the stage tracker makes it on the whole field
    (``core.stages.months_to_peak_from_analogues``, public for this): a block's own analogues would give other medians."""
    from core import stages as S

    def mi(c: str) -> np.ndarray:
        d = pd.to_datetime(stages[c])
        v = d.dt.year.to_numpy(float) * 12 + d.dt.month.to_numpy(float) - 1
        return np.where(d.isna().to_numpy(), np.nan, v)

    res = pd.DataFrame({"stage": pd.to_numeric(stages["stage"], errors="coerce").to_numpy(float),
                        "bp_mi": mi("bubble_point_date"), "s2_mi": mi("stage2_end_date"), "pk_mi": mi("gor_peak_date")})
    passed = stages["passed_gor_peak"].fillna(False).astype(bool).to_numpy()
    as_of_i = as_of.year * 12 + as_of.month - 1
    v = S.months_to_peak_from_analogues(res, res.loc[passed, ["pk_mi", "bp_mi", "s2_mi"]], as_of_i)
    return pd.Series(v, index=stages["well_id"].astype(str).to_numpy())
