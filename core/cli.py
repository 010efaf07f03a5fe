"""The batch command: ``python -m core forecast INPUT [--wells FILE] --out DIR [options]``.

Parses the options, calls :func:`core.run.run_from_files` (the same run the dashboard makes),
writes the output tables with :mod:`core.export`, optionally records the run in the store,
and prints a short summary on stdout. A progress bar goes to stderr when stderr is a terminal
(or with ``--progress``).

Exit codes: 0 success; 2 an input error (unreadable file, bad option, bad value), reported as
one message on stderr; 1 an internal error (message only; ``--debug`` adds the traceback).
"""

from __future__ import annotations

import argparse
import textwrap
import sys
import time
import traceback
import warnings
from collections import Counter
from pathlib import Path
from typing import Any, TextIO

from core import __version__

EXIT_OK = 0
EXIT_INTERNAL = 1
EXIT_INPUT = 2

#: Defaults of the streamed run (``core.streamed``), repeated here for the help text.
_DEFAULT_BLOCK_WELLS = 2_500
_STREAM_MIN_MB = 256

#: Largest input file the command reads by default [MiB] (a batch job reads big files; the
#: dashboard's upload limit is separate).
DEFAULT_MAX_FILE_MB = 4096.0

_DESCRIPTION = (
    "Depletion Desk batch command. Reads monthly production per well, fits Arps declines, "
    "forecasts each well to its economic limit, places each well and reservoir unit in the "
    "four stages of solution-gas-drive depletion, and writes the tables (CSV and XLSX, field "
    "units, months as YYYY-MM)."
)

_EPILOG = (
    "Outputs in DIR: wells.csv (one row per well), forecast_monthly.csv (actual and forecast "
    "months), units.csv (one row per reservoir unit), load_report.csv (rejected and altered "
    "rows), forecast.xlsx (the same tables plus a cover sheet), field_percentiles.csv with "
    "--samples, type_wells.csv with --type-wells, and changes.csv when --db "
    "already holds a run of the same field. Forecasts are estimates; reserves bookings and "
    "field decisions follow local regulations and licensed professional practice. "
    "Exit codes: 0 success, 2 input error, 1 internal error."
)


class UsageError(Exception):
    """A command-line usage error (unknown option, bad number, missing argument)."""

    def __init__(self, message: str, prog: str) -> None:
        super().__init__(message)
        self.prog = prog


class _Parser(argparse.ArgumentParser):
    """argparse that raises :class:`UsageError` instead of printing usage and exiting."""

    def error(self, message: str):  # type: ignore[override]
        raise UsageError(message, self.prog)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``python -m core`` (every option with its unit and default)."""
    from core.run import DEFAULT_ECON_LIMIT_BOPD, DEFAULT_HORIZON_YEARS, DEFAULT_TERMINAL_DECLINE

    parser = _Parser(
        prog="python -m core",
        description=_DESCRIPTION,
        epilog="Run 'python -m core forecast --help' for the forecast command's options.",
    )
    parser.add_argument("--version", action="version", version=f"Depletion Desk {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    f = sub.add_parser(
        "forecast",
        help="forecast every well of a production file to its economic limit and write the tables",
        description=_DESCRIPTION,
        epilog=_EPILOG,
    )
    f.add_argument("input", metavar="INPUT", help="production file: CSV (comma, semicolon or tab) or XLSX, one row per well and month")
    f.add_argument("--wells", metavar="FILE", help="well-header file (one row per well: well_id, unit, api_gravity, gas_specific_gravity, reservoir_temp_f, initial_pressure_psia, bubble_point_psia; any may be blank). Default: none; such columns may also sit in INPUT")
    f.add_argument("--out", metavar="DIR", required=True, help="output folder, created when missing (required)")
    f.add_argument("--sheet", metavar="NAME", help="worksheet to read when INPUT is XLSX. Default: the first sheet")

    e = f.add_argument_group("economic limit (give a rate, or prices and costs; default %g bbl/d)" % DEFAULT_ECON_LIMIT_BOPD)
    e.add_argument("--econ-limit-bopd", type=float, metavar="RATE", help=f"economic limit as an oil rate [bbl/d]. Default {DEFAULT_ECON_LIMIT_BOPD:g} when no prices are given")
    e.add_argument("--econ-limit-mcfd", type=float, metavar="RATE", help="economic limit of gas and condensate wells, which are forecast on their gas decline (condensate at the recent condensate-gas ratio) [Mcf/d]. Default: from the prices when given, else 10 (common practice)")
    e.add_argument("--oil-price", type=float, metavar="USD", help="oil price [$/bbl]; with --opex-per-month and --nri it sets the economic limit. Default: none")
    e.add_argument("--gas-price", type=float, metavar="USD", help="gas price [$/Mcf], credited at the well's recent GOR. Default: none (no gas credit)")
    e.add_argument("--opex-per-month", type=float, metavar="USD", help="gross operating cost per well and month [$/month]. Default: none")
    e.add_argument("--nri", type=float, metavar="FRAC", help="net revenue interest, fraction in (0, 1] [-]. Default: none")
    e.add_argument("--wi", type=float, default=1.0, metavar="FRAC", help="working interest, fraction in (0, 1] [-]. Default 1")
    e.add_argument("--severance-tax", type=float, default=0.0, metavar="FRAC", help="severance/production tax, fraction of revenue in [0, 1) [-]. Default 0")

    d = f.add_argument_group("decline and forecast")
    d.add_argument("--as-of", metavar="YYYY-MM", help="forecast as of this month; later production is ignored. Default: the last month in the data")
    d.add_argument("--b-max", type=float, default=2.0, metavar="B", help="upper bound of the Arps b-factor, in (0, 2] [-]. Default 2")
    d.add_argument("--terminal-decline", type=float, default=DEFAULT_TERMINAL_DECLINE, metavar="FRAC", help=f"terminal decline, effective annual fraction in (0, 1) [1/yr] (0.06 = 6 %%/yr). Default {DEFAULT_TERMINAL_DECLINE:g}")
    d.add_argument("--horizon-years", type=float, default=DEFAULT_HORIZON_YEARS, metavar="YEARS", help=f"forecast horizon cap after the as-of month [yr]. Default {DEFAULT_HORIZON_YEARS:g}")
    d.add_argument("--workers", type=int, metavar="N", help="worker processes for the fits. Default: chosen by the decline engine from the cores available")

    pgrp = f.add_argument_group("probabilistic forecasts (P90/P50/P10) and type wells")
    pgrp.add_argument("--samples", type=int, default=0, metavar="N", help="bootstrap samples per well for P90/P50/P10 of EUR, remaining oil and economic-limit month (20 to 100,000); adds field_percentiles.csv. Default 0 (off)")
    pgrp.add_argument("--seed", type=int, default=0, metavar="N", help="seed of the probabilistic samples (a well's samples depend only on the seed and its id). Default 0")
    pgrp.add_argument("--scheduler", metavar="ADDRESS|local", help="run the probabilistic samples on Dask: 'local' starts a local cluster of 2 workers, or give a scheduler address such as tcp://host:8786; the numbers are the same. Default: in this process")
    pgrp.add_argument("--type-wells", action="store_true", help="also write type_wells.csv: one P90/P50/P10 type well per reservoir unit (wells aligned at first production, producing-day oil rates, Arps fit to the P50; units with fewer than 5 wells at month 0 are left out). Default: not written")

    i = f.add_argument_group("input interpretation")
    i.add_argument("--units", choices=("field", "metric"), default="field", help="unit system of the input (outputs are always field units: bbl, Mcf, psia). Default field")
    i.add_argument("--pressure-kind", choices=("average_reservoir", "static_bhp"), default="average_reservoir", help="what the pressure column holds [psia]: average reservoir pressure or static bottom-hole pressure. Default average_reservoir")
    i.add_argument("--max-file-mb", type=float, default=DEFAULT_MAX_FILE_MB, metavar="MB", help=f"largest input file accepted [MiB]. Default {DEFAULT_MAX_FILE_MB:g}")
    i.add_argument("--date-order", choices=("dmy", "mdy"), help="day/month order of dates like 03/04/2021 when the data cannot resolve it: dmy (day first) or mdy (month first). Default: resolved from the data, else an input error")
    i.add_argument("--unit-column", metavar="NAME", help="input column holding the reservoir unit. Default: recognised from the header")
    i.add_argument("--block-wells", type=int, metavar="N", help=(
        "run streamed by blocks of N wells (memory bounded by the block, not the file; 0 = never stream). "
        "Default: streamed in blocks of {:,} wells when INPUT is a CSV file of {:,} MiB or more, else the normal "
        "run in one piece. The streamed run gives the same tables (numbers to floating-point rounding; a "
        "well's stage evidence text can differ, see the README); it does not take --samples, "
        "--type-wells or --db".format(_DEFAULT_BLOCK_WELLS, _STREAM_MIN_MB)))

    s = f.add_argument_group("store and output")
    s.add_argument("--db", metavar="PATH_OR_URL", help="record the run in this store (SQLite file path or database URL); writes changes.csv when it already holds a run of the same field. Default: not recorded")
    s.add_argument("--field-name", metavar="NAME", help="field name under which the run is recorded in --db. Default: the input file name without extension and trailing date")
    s.add_argument("--no-xlsx", action="store_true", help="skip forecast.xlsx (CSV files only). Default: write it")
    s.add_argument("--progress", action="store_true", help="show the progress bar on stderr even when stderr is not a terminal. Default: only on a terminal")
    s.add_argument("--quiet", action="store_true", help="print nothing on stdout. Default: print a short summary")
    s.add_argument("--debug", action="store_true", help="print the traceback of an internal error. Default: message only")
    # `python -m core --help` documents every option too: append the command's own help.
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.description = textwrap.fill(_DESCRIPTION, 88)
    parser.epilog = "The forecast command and its options:\n\n" + f.format_help()
    return parser


# --------------------------------------------------------------------------------------------
# progress bar
# --------------------------------------------------------------------------------------------
class ProgressBar:
    """A one-line text progress bar (``[#####.....]  50%  message``) on a stream."""

    def __init__(self, stream: TextIO, *, enabled: bool, width: int = 30) -> None:
        self.stream = stream
        self.enabled = enabled
        self.width = width
        self._last = -1.0
        self._shown = False

    def __call__(self, fraction: float, message: str = "") -> None:
        if not self.enabled:
            return
        fraction = min(max(float(fraction), 0.0), 1.0)
        now = time.monotonic()
        if fraction < 1.0 and now - self._last < 0.1:
            return
        self._last = now
        filled = int(round(fraction * self.width))
        line = f"\r[{'#' * filled}{'.' * (self.width - filled)}] {100 * fraction:3.0f}%  {message[:60]:<60}"
        self.stream.write(line)
        self.stream.flush()
        self._shown = True

    def close(self) -> None:
        if self.enabled and self._shown:
            self.stream.write("\n")
            self.stream.flush()
            self._shown = False


def _scaled(cb: ProgressBar, lo: float, hi: float):
    return lambda fraction, message="": cb(lo + (hi - lo) * min(max(float(fraction), 0.0), 1.0), message)


# --------------------------------------------------------------------------------------------
# summary
# --------------------------------------------------------------------------------------------
def format_summary(result: Any, paths: dict[str, Path] | None = None, *, changes: Path | None = None) -> str:
    """The short text summary the command prints on stdout."""
    s = result.summary
    as_of = "" if result.as_of is None else result.as_of.strftime("%Y-%m")
    lines = [f"Depletion Desk {result.version}: forecast as of {as_of}"]
    inputs = getattr(result, "inputs", {}) or {}
    if "rows_read" in inputs:
        lines.append(
            f"rows read {inputs['rows_read']:,}, used {inputs.get('rows_used', 0):,}, "
            f"rejected {inputs.get('rows_rejected', 0):,} (see load_report.csv)"
        )
    lines.append(f"wells read: {s.get('wells_read', 0):,}")
    lines.append(f"wells forecast: {s.get('wells_forecast', 0):,}")
    reasons = s.get("not_forecast_reasons", {}) or {}
    lines.append(f"wells not forecast: {s.get('wells_not_forecast', 0):,}")
    for reason, n in sorted(reasons.items(), key=lambda kv: (-kv[1], kv[0])):
        lines.append(f"  {n:>6,}  {reason}")
    lines.append(f"economic limit: {s.get('econ_limit', '')}")
    lines.append(
        f"total EUR oil: {_num(s.get('eur_oil_bbl_total'))} bbl "
        f"(cumulative {_num(s.get('cum_oil_bbl_total'))}, remaining {_num(s.get('remaining_oil_bbl_total'))})"
    )
    lines.append(f"wells past the GOR peak: {s.get('wells_past_gor_peak', 0):,}")
    if "store_field" in s:
        lines.append(
            f"store: field {s['store_field']!r}; overrides carried forward: {s.get('overrides_carried_forward', 0):,}; "
            f"months appended: {s.get('months_appended', 0):,}; conflicts: {s.get('merge_conflicts', 0):,} "
            "(newer file wins, each reported in load_report.csv)"
        )
    if "eur_oil_bbl_field_p50" in s:
        lines.append(
            f"field EUR oil P90 / P50 / P10: {_num(s.get('eur_oil_bbl_field_p90'))} / "
            f"{_num(s.get('eur_oil_bbl_field_p50'))} / {_num(s.get('eur_oil_bbl_field_p10'))} bbl "
            "(sample-wise sums over wells; see field_percentiles.csv)"
        )
    if "type_wells" in s:
        lines.append(f"type wells written: {s['type_wells']} (one per reservoir unit with enough wells)")
    for note in s.get("messages", []) or []:
        lines.append(f"note: {note}")
    if paths:
        folder = Path(next(iter(paths.values()))).parent
        lines.append(f"outputs in {folder}: {', '.join(paths)}")
    if changes is not None:
        lines.append(f"changes since the previous run: {changes}")
    return "\n".join(lines)


def _num(v: Any) -> str:
    try:
        return f"{float(v):,.0f}"
    except (TypeError, ValueError):
        return ""


# --------------------------------------------------------------------------------------------
# main
# --------------------------------------------------------------------------------------------
def _settings(args: argparse.Namespace):
    from core.run import RunSettings

    return RunSettings(
        econ_limit_bopd=args.econ_limit_bopd,
        econ_limit_mcfd=args.econ_limit_mcfd,
        oil_price=args.oil_price,
        gas_price=args.gas_price,
        opex_per_month=args.opex_per_month,
        nri=args.nri,
        wi=args.wi,
        severance_tax=args.severance_tax,
        as_of=args.as_of,
        b_max=args.b_max,
        terminal_decline=args.terminal_decline,
        horizon_years=args.horizon_years,
        workers=args.workers,
        units=args.units,
        unit_column=args.unit_column,
        samples=args.samples,
        seed=args.seed,
        scheduler=args.scheduler,
    )


def _err(stream: TextIO, message: str) -> None:
    text = " ".join(str(message).split())  # one line
    stream.write(f"error: {text}\n")
    stream.flush()


def main(argv: list[str] | None = None, *, stdout: TextIO | None = None, stderr: TextIO | None = None) -> int:
    """Run the batch command; return the exit code (0 ok, 2 input error, 1 internal error)."""
    out = stdout if stdout is not None else sys.stdout
    err = stderr if stderr is not None else sys.stderr
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except UsageError as exc:
        _err(err, f"{exc} (see '{exc.prog} --help')")
        return EXIT_INPUT
    except SystemExit as exc:  # argparse: --help / --version print and exit 0
        return EXIT_OK if exc.code in (0, None) else EXIT_INPUT
    if args.command != "forecast":
        _err(err, "give a command: 'python -m core forecast INPUT --out DIR' (see 'python -m core --help')")
        return EXIT_INPUT
    try:
        return _forecast(args, out, err)
    except KeyboardInterrupt:
        _err(err, "interrupted")
        return 130


def _forecast(args: argparse.Namespace, out: TextIO, err: TextIO) -> int:
    from core.validation import InputError

    bar = ProgressBar(err, enabled=bool(args.progress or (hasattr(err, "isatty") and err.isatty())))
    phase = "options"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            settings = _settings(args)
            out_dir = Path(args.out)
            if out_dir.exists() and not out_dir.is_dir():
                raise InputError(f"--out {out_dir} exists and is not a folder")
            for name, p in (("INPUT", args.input), ("--wells", args.wells)):
                if p is not None and not Path(p).is_file():
                    raise InputError(f"{name} file not found: {p}")
            phase = "load"
            from core.run import load_inputs, run_field

            if not args.max_file_mb > 0:
                raise InputError(f"--max-file-mb must be positive, got {args.max_file_mb:g}")
            phase = "run"
            streamed = _try_streamed(args, settings, out_dir, bar, err)
            if streamed is not None:
                bar.close()
                result, paths, changes = streamed, dict(streamed.paths), None
                phase = "done"

            if streamed is None:
                phase = "load"
                bar(0.0, "reading the production file")
                if not args.max_file_mb > 0:
                    raise InputError(f"--max-file-mb must be positive, got {args.max_file_mb:g}")
                load = load_inputs(
                    args.input, wells_path=args.wells, settings=settings, sheet=args.sheet,
                    pressure_kind=args.pressure_kind, max_bytes=int(args.max_file_mb * 2**20),
                    dayfirst=None if args.date_order is None else args.date_order == "dmy",
                )
                update = None
                overrides = None
                if args.db:
                    phase = "store"
                    bar(0.04, "appending to the history held in the store")
                    update = open_update(args.db, load, field_name=args.field_name)
                    load, overrides = update.load, update.overrides
                phase = "run"
                result = run_field(load, settings=settings, overrides=overrides or None, progress=_scaled(bar, 0.05, 0.85))
                if update is not None:
                    result.summary.update(update.summary())
                phase = "export"
                from core.export import write_outputs

                paths = write_outputs(result, out_dir, xlsx=not args.no_xlsx, progress=_scaled(bar, 0.85, 0.97))
                if args.type_wells:
                    bar(0.96, "building type wells")
                    tw_path, n_tw = write_type_wells(load, result, out_dir)
                    paths[tw_path.name] = tw_path
                    result.summary["type_wells"] = n_tw
                changes = None
                if update is not None:
                    phase = "store"
                    bar(0.97, "recording the run in the store")
                    changes = update.save(result, out_dir=out_dir)
                    if changes is not None:
                        paths[changes.name] = changes
                bar(1.0, "done")
                bar.close()
        except (InputError, ValueError, OSError) as exc:
            bar.close()
            if isinstance(exc, InputError) or phase in ("options", "load"):
                msg = str(exc) or type(exc).__name__
                if "dayfirst" in msg:  # the loader names its argument; say the option here
                    msg += " (on the command line: --date-order dmy or --date-order mdy)"
                _err(err, msg)
                return EXIT_INPUT
            if isinstance(exc, OSError) and phase in ("export", "store"):
                _err(err, f"cannot write the outputs: {exc}")
                return EXIT_INPUT
            return _internal(err, exc, args.debug, phase)
        except Exception as exc:  # noqa: BLE001 - the command must report, never crash
            bar.close()
            return _internal(err, exc, args.debug, phase)
    from core.validation import DepletionDeskWarning

    ours = [w for w in caught if issubclass(w.category, DepletionDeskWarning)]  # not library noise
    if ours:
        counts = Counter(f"{w.category.__name__}: {w.message}" for w in ours)
        err.write(f"{sum(counts.values())} warning(s) during the run:\n")
        for text, n in counts.most_common(5):
            err.write(f"  {n} x {' '.join(text.split())[:200]}\n")
    if not args.quiet:
        out.write(format_summary(result, paths, changes=changes) + "\n")
        out.flush()
    return EXIT_OK


def _try_streamed(args: argparse.Namespace, settings: Any, out_dir: Path, bar: ProgressBar, err: TextIO) -> Any:
    """The streamed run (``core.streamed``) when the rule picks it (``--block-wells``, or a CSV
    input of ``STREAM_MIN_BYTES`` or more); None for the normal run. A file the streamed run
    does not read (XLSX, UTF-16, quoted line breaks...) falls back to the normal run with a
    note on stderr."""
    from core import streamed as S
    from core.validation import InputError

    block = S.block_wells_for(args.input, args.block_wells)
    if block == 0:
        return None
    asked = args.block_wells is not None
    why = f"--block-wells {block}" if asked else f"the input is {S.STREAM_MIN_BYTES // 2**20} MiB or more"
    for flag, on in (("--samples", bool(args.samples)), ("--type-wells", bool(args.type_wells)), ("--db", bool(args.db))):
        if on:
            raise InputError(f"{flag} is not available in the streamed run by blocks of wells (chosen because "
                             f"{why}); give --block-wells 0 to run the whole file at once")
    if args.sheet is not None:
        raise InputError("--sheet reads an XLSX workbook, which the streamed run does not read; give --block-wells 0")
    try:
        return S.run_streamed(
            args.input, out_dir, settings=settings, block_wells=block, wells_path=args.wells,
            pressure_kind=args.pressure_kind, max_bytes=int(args.max_file_mb * 2**20),
            dayfirst=None if args.date_order is None else args.date_order == "dmy",
            xlsx=not args.no_xlsx, progress=bar,
        )
    except S.StreamUnsupported as exc:
        bar.close()
        err.write(f"note: not streamed ({exc}); running the whole file at once\n")
        return None


def _internal(err: TextIO, exc: BaseException, debug: bool, phase: str) -> int:
    _err(err, f"internal error during {phase}: {type(exc).__name__}: {exc}")
    if debug:
        traceback.print_exception(exc, file=err)
    else:
        err.write("(run again with --debug for the traceback)\n")
    return EXIT_INTERNAL


def write_type_wells(load: Any, result: Any, out_dir: Path) -> tuple[Path, int]:
    """Write ``type_wells.csv`` (one type well per reservoir unit, from the production up to
    the run's as-of month; :func:`core.type_wells.type_wells_by_unit` with its defaults) and
    return its path and the number of type wells."""
    from core.export import TYPE_WELLS_FILE
    from core.type_wells import type_well_to_csv, type_wells_by_unit

    prod = load.production
    if result.as_of is not None:
        prod = prod[prod["month"] <= result.as_of]
    tws = type_wells_by_unit(prod, b_max=float(result.settings.b_max))
    path = Path(out_dir) / TYPE_WELLS_FILE
    type_well_to_csv(tws, path)
    return path, len(tws)


#: ``file`` value of the load-report lines written by the monthly update.
MERGE_REPORT_FILE = "(monthly update)"


def merge_report_lines(merge_report: Any, columns: Any) -> Any:
    """The store's merge report (:meth:`core.storage.Store.append_load`) as load-report lines:
    every conflict (``altered``, the newer file's value kept, both values given), every gap and
    every well missing from the new file (``info``); months added and duplicates dropped as
    one ``info`` line each (counts)."""
    import pandas as pd

    rep = merge_report
    rows = []

    def month(v: Any) -> str:
        return "" if pd.isna(v) else pd.Timestamp(v).strftime("%Y-%m")

    for r in rep[rep["action"] == "conflict"].itertuples(index=False):
        rows.append({"well_id": r.well_id, "column": r.column, "value": r.new_value, "action": "altered",
                     "reason": f"monthly update: {month(r.month)} held {r.previous_value}, new file {r.new_value}; "
                               f"kept {r.kept or 'new'} (the newer file wins)"})
    for r in rep[rep["action"].isin(["gap", "missing_from_new"])].itertuples(index=False):
        what = ("months missing between the held history and the new file" if r.action == "gap"
                else "well has no row in the new file")
        span = f" {month(r.first_month)}..{month(r.last_month)}" if not pd.isna(r.first_month) else ""
        n = "" if pd.isna(r.n_months) else f"{int(r.n_months)} "
        rows.append({"well_id": r.well_id, "column": "", "value": "", "action": "info",
                     "reason": f"monthly update: {n}{what}{span}".strip() + (f" ({r.detail})" if r.detail else "")})
    for act, what in (("added", "well-months appended to the held history"),
                      ("duplicate_dropped", "well-months already held with the same values (dropped)")):
        n = int(pd.to_numeric(rep.loc[rep["action"] == act, "n_months"], errors="coerce").fillna(0).sum())
        if n:
            rows.append({"well_id": "", "column": "", "value": "", "action": "info",
                         "reason": f"monthly update: {n:,} {what}"})
    out = pd.DataFrame(rows, columns=["well_id", "column", "value", "action", "reason"])
    out.insert(0, "file", MERGE_REPORT_FILE)
    out.insert(1, "row", pd.array([pd.NA] * len(out), dtype="Int64"))
    return out.reindex(columns=columns)


class StoreUpdate:
    """The batch command's monthly cycle with ``--db``: before the run, the new load is
    appended to the history held for the field (conflicts reported) and the engineers'
    overrides are read; after it, the run is saved and ``changes.csv`` written."""

    def __init__(self, db: str, store: Any, field: str, load: Any, overrides: dict, merge_report: Any,
                 held: int | None, previous: Any) -> None:
        self.db, self.store, self.field = db, store, field
        self.load, self.overrides, self.merge_report = load, overrides, merge_report
        self.held, self.previous = held, previous

    def summary(self) -> dict[str, Any]:
        import pandas as pd

        rep = self.merge_report
        added = pd.to_numeric(rep.loc[rep["action"] == "added", "n_months"], errors="coerce").fillna(0).sum()
        return {
            "store_field": self.field,
            "overrides_carried_forward": len(self.overrides),
            "months_appended": int(added) if self.held is not None else 0,
            "merge_conflicts": int((rep["action"] == "conflict").sum()),
            "appended_to_dataset": self.held,
        }

    def save(self, result: Any, *, out_dir: Path) -> Path | None:
        from core.changes import compare_runs
        from core.export import CHANGES_FILE, write_csv
        from core.storage import StoreError
        from core.validation import InputError

        try:
            try:
                self.store.save_run(result, field=self.field, load=self.load, merged_from=self.held,
                                    inputs=dict(result.inputs), as_of_month=result.as_of)
            finally:
                self.store.close()
        except StoreError as exc:
            raise InputError(f"--db {self.db}: {exc}") from exc
        if self.previous is None:
            return None
        changes = compare_runs(self.previous.wells, result.wells)
        path = Path(out_dir) / CHANGES_FILE
        write_csv(changes, path)
        return path


def open_update(db: str, load: Any, *, field_name: str | None) -> StoreUpdate:
    """Open the store at ``db`` and prepare the monthly cycle for ``load``: the held history
    of the field plus the new months (``Store.append_load``; conflicts and gaps go to the
    load report), the overrides in force (``Store.well_overrides``) and the previous run
    (for ``changes.csv``). Store problems raise :class:`core.validation.InputError`."""
    import dataclasses

    import pandas as pd
    from core.validation import InputError

    try:
        from core.storage import StoreError, default_field_name, open_store
    except ImportError as exc:  # pragma: no cover - a build without the store
        raise InputError(f"--db: the store is not available in this build ({exc})") from exc
    name = field_name or default_field_name(getattr(load, "file_name", "") or "field")
    try:
        store = open_store(db)
    except StoreError as exc:
        raise InputError(f"--db {db}: {exc}") from exc
    try:
        previous = store.latest_run(name, tables=())  # its wells table is enough
        merged, merge_report, held = store.append_load(name, load)
        overrides = store.well_overrides(name)
    except StoreError as exc:
        store.close()
        raise InputError(f"--db {db}: {exc}") from exc
    except BaseException:
        store.close()
        raise
    lines = merge_report_lines(merge_report, merged.report.columns)
    if len(lines):
        report = pd.concat([merged.report, lines], ignore_index=True)
        merged = dataclasses.replace(merged, report=report)
    return StoreUpdate(db, store, name, merged, overrides, merge_report, held, previous)


def record_run(db: str, result: Any, load: Any, *, field_name: str | None, out_dir: Path) -> Path | None:
    """Record ``result`` (and its dataset) in the store at ``db``; write ``changes.csv`` in
    ``out_dir`` when the store already held a run of the same field.

    The command itself uses :func:`open_update` (which also appends the new months to the
    held history and carries the overrides forward); this plain recorder is kept for callers
    that made their run elsewhere.

    Returns the path of ``changes.csv`` or None. Store problems (locked, newer schema, not a
    store) raise :class:`core.validation.InputError` with the store's message.
    """
    from core.validation import InputError

    try:
        from core.changes import compare_runs
        from core.export import CHANGES_FILE, write_csv
        from core.storage import StoreError, default_field_name, open_store
    except ImportError as exc:  # pragma: no cover - a build without the store
        raise InputError(f"--db: the store is not available in this build ({exc})") from exc
    name = field_name or default_field_name(getattr(load, "file_name", "") or "field")
    try:
        store = open_store(db)
        try:
            previous = store.latest_run(name, tables=())  # its wells table is enough
            store.save_run(result, field=name, load=load, inputs=dict(result.inputs), as_of_month=result.as_of)
        finally:
            store.close()
    except StoreError as exc:
        raise InputError(f"--db {db}: {exc}") from exc
    if previous is None:
        return None
    changes = compare_runs(previous.wells, result.wells)
    path = Path(out_dir) / CHANGES_FILE
    write_csv(changes, path)
    return path
