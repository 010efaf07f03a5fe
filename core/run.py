"""The one forecast run: production load -> fluids -> stages -> Arps fits -> forecast -> tables.

:func:`run_field` is the single function that turns a loaded production file into the output
tables. The batch command (``python -m core forecast``) and the dashboard both call it, so they
give identical numbers for the same inputs and settings.

Output contract (field units; see the README "Batch command" section):

* ``wells`` -- one row per well (every well of the file, forecast or not), columns
  :data:`WELLS_COLUMNS` first, in that order, then :data:`WELLS_EXTRA_COLUMNS`;
* ``monthly`` -- the actual months (``kind = "actual"``) then the forecast months
  (``kind = "forecast"``) of each well, columns :data:`MONTHLY_COLUMNS`;
* ``units`` -- one row per reservoir unit, columns :data:`UNITS_COLUMNS`.
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from core import __version__
from core.validation import InputError, check_range

# --------------------------------------------------------------------------------------------
# the output contract
# --------------------------------------------------------------------------------------------
#: Columns of ``RunResult.wells`` / ``wells.csv`` that the batch-output contract fixes, in order.
WELLS_COLUMNS = [
    "well_id",
    "unit",
    "fluid_type",
    "status",
    "first_month",
    "last_month",
    "cum_oil_bbl",
    "cum_gas_mcf",
    "cum_water_bbl",
    "model",
    "fit_start",
    "fit_end",
    "qi_bopd",
    "di_annual_nominal",
    "b",
    "terminal_decline_annual_effective",
    "econ_limit_bopd",
    "remaining_oil_bbl",
    "eur_oil_bbl",
    "econ_limit_date",
    "eur_gas_mcf",
    "rsi_scf_stb",
    "bubble_point_psia",
    "stage",
    "stage_confidence",
    "bubble_point_date",
    "stage2_end_date",
    "gor_peak_date",
    "gor_peak_scf_stb",
    "passed_gor_peak",
    "planning_status",
]

#: Further columns of ``wells`` (after the contract columns, in this order).
WELLS_EXTRA_COLUMNS = [
    "months_produced",
    "last_oil_rate_bopd",
    "remaining_gas_mcf",
    "forecast_end_reason",
    "forecast_note",
    "uptime_fraction",
    "terminal_switch_month",
    "fitted_model",
    "gas_method",
    "fit_status",
    "fit_regime_source",
    "fit_months_used",
    "fit_months_excluded",
    "fit_months_down_weighted",
    "fit_rmse_log",
    "fit_criterion",
    "gas_model",
    "gas_qi_mcf_d",
    "gas_di_annual_nominal",
    "gas_b",
    "override",
    "initial_gor_scf_stb",
    "fluid_evidence",
    "stage_reason",
    "stage_evidence",
    "planning_rule",
    "months_since_event",
    "months_to_gor_peak_est",
    "regime_start",
]

#: Columns of ``RunResult.monthly`` / ``forecast_monthly.csv``, in order.
MONTHLY_COLUMNS = ["well_id", "month", "kind", "oil_bbl", "gas_mcf", "water_bbl", "oil_rate_bopd", "cum_oil_bbl"]

#: Columns of ``RunResult.units`` / ``units.csv``, in order.
UNITS_COLUMNS = [
    "unit",
    "stage",
    "stage_confidence",
    "n_wells",
    "share_stage_1",
    "share_stage_2",
    "share_stage_3",
    "share_stage_4",
    "share_not_applicable",
    "planning_status",
    "bubble_point_date",
    "months_since_bubble_point",
    "gor_peak_date",
    "months_to_gor_peak_est",
    "n_wells_forecast",
    "n_wells_past_gor_peak",
    "cum_oil_bbl",
    "cum_gas_mcf",
    "cum_water_bbl",
    "remaining_oil_bbl",
    "eur_oil_bbl",
    "eur_gas_mcf",
]

#: Further columns of ``units`` (after :data:`UNITS_COLUMNS`, in this order).
UNITS_EXTRA_COLUMNS = [
    "planning_rule",
    "rsi_scf_stb",
    "bubble_point_psia",
    "stage2_end_date",
    "latest_gor_scf_stb",
    "stage_evidence",
]

#: ``status`` of a forecast well.
STATUS_OK = "ok"

#: Days per month used to turn a monthly economic-limit volume into a daily rate (365.25 / 12).
DAYS_PER_MONTH = 365.25 / 12.0

#: Default economic limit when neither a rate nor economic inputs are given [bbl/d]
#: (common practice: a low-rate stripper well's limit is of order 1-2 bbl/d).
DEFAULT_ECON_LIMIT_BOPD = 1.0

#: Default forecast horizon cap [yr] (common practice: reserves forecasts rarely run past 50 yr).
DEFAULT_HORIZON_YEARS = 50.0

#: Default terminal decline, effective annual [-] (common practice, about 6 %/yr; SPEE REP 6
#: discusses limiting declines, value from memory).
DEFAULT_TERMINAL_DECLINE = 0.06

ProgressCallback = Callable[[float, str], None]


# --------------------------------------------------------------------------------------------
# settings
# --------------------------------------------------------------------------------------------
def _month(value: Any, name: str) -> pd.Timestamp | None:
    if value is None or (isinstance(value, str) and not value.strip()):
        return None
    try:
        ts = pd.Timestamp(value.strip() if isinstance(value, str) else value)
    except (ValueError, TypeError) as exc:
        raise InputError(f"{name} must be a month like 2024-06, got {value!r}") from exc
    if ts is pd.NaT:
        raise InputError(f"{name} must be a month like 2024-06, got {value!r}")
    return pd.Timestamp(year=ts.year, month=ts.month, day=1)


@dataclass(frozen=True)
class RunSettings:
    """Every setting a forecast run takes (field units).

    Parameters
    ----------
    econ_limit_bopd : float, optional
        Economic limit as an oil rate. [bbl/d] Give this *or* the economic inputs below;
        with neither, :data:`DEFAULT_ECON_LIMIT_BOPD` is used.
    econ_limit_mcfd : float, optional
        Economic limit of a well forecast on gas only (a gas or condensate well). [Mcf/d]
        Default none: the horizon caps such forecasts.
    oil_price : float, optional
        Oil price. [$/bbl]
    gas_price : float, optional
        Gas price, credited per barrel of oil at the well's recent GOR when given. [$/Mcf]
    opex_per_month : float, optional
        Gross (8/8ths) operating cost per well and month. [$/month]
    nri : float, optional
        Net revenue interest, fraction in (0, 1]. [-]
    wi : float, optional
        Working interest, fraction in (0, 1]; default 1. [-]
    severance_tax : float, optional
        Severance / production tax as a fraction of revenue, in [0, 1); default 0. [-]
    as_of : month, optional
        Forecast as of this month (``"2024-06"``): later production is ignored. Default the
        last month in the data.
    b_max : float, optional
        Upper bound of the Arps b-factor, in (0, 2]; default 2. [-]
    terminal_decline : float, optional
        Terminal decline, effective annual, in (0, 1); default 0.06. [1/yr]
    horizon_years : float, optional
        Forecast horizon cap after the as-of month; default 50. [yr]
    workers : int, optional
        Worker processes for the fits; ``None`` lets the decline engine choose.
    units : {"field", "metric"}, optional
        Unit system of the *input* file (outputs are always field units). Default "field".
    unit_column : str, optional
        Name of the input column holding the reservoir unit. Default: recognised by the loader.
    """

    econ_limit_bopd: float | None = None
    econ_limit_mcfd: float | None = None
    oil_price: float | None = None
    gas_price: float | None = None
    opex_per_month: float | None = None
    nri: float | None = None
    wi: float = 1.0
    severance_tax: float = 0.0
    as_of: pd.Timestamp | str | None = None
    b_max: float = 2.0
    terminal_decline: float = DEFAULT_TERMINAL_DECLINE
    horizon_years: float = DEFAULT_HORIZON_YEARS
    workers: int | None = None
    units: str = "field"
    unit_column: str | None = None

    def __post_init__(self) -> None:
        # normalise and validate once; errors are InputError (a ValueError) with one message
        object.__setattr__(self, "as_of", _month(self.as_of, "as_of"))
        for name in ("econ_limit_bopd", "econ_limit_mcfd", "oil_price", "gas_price", "opex_per_month", "nri",
                     "wi", "severance_tax", "b_max", "terminal_decline", "horizon_years", "workers"):
            value = getattr(self, name)
            if value is None and name not in ("wi", "severance_tax", "b_max", "terminal_decline", "horizon_years"):
                continue
            if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
                raise InputError(f"{name} must be a number, got {value!r}")
        try:
            check_range("b_max", self.b_max, 0.0, 2.0, lo_open=True)
            check_range("terminal_decline", self.terminal_decline, 0.0, 1.0, unit="1/yr (effective annual)", lo_open=True, hi_open=True)
            check_range("horizon_years", self.horizon_years, 0.0, 200.0, unit="yr", lo_open=True)
            check_range("wi", self.wi, 0.0, 1.0, lo_open=True)
            check_range("severance_tax", self.severance_tax, 0.0, 1.0, hi_open=True)
            if self.econ_limit_mcfd is not None:
                check_range("econ_limit_mcfd", self.econ_limit_mcfd, 0.0, None, unit="Mcf/d", lo_open=True)
            if self.workers is not None:
                if isinstance(self.workers, bool) or int(self.workers) != self.workers:
                    raise InputError(f"workers must be a whole number of processes, got {self.workers!r}")
                check_range("workers", self.workers, 1, 512)
            econ = [self.oil_price, self.opex_per_month, self.nri]
            if self.econ_limit_bopd is not None:
                check_range("econ_limit_bopd", self.econ_limit_bopd, 0.0, None, unit="bbl/d", lo_open=True)
                if any(v is not None for v in econ + [self.gas_price]):
                    raise InputError(
                        "give either econ_limit_bopd or the economic inputs (oil_price, "
                        "opex_per_month, nri), not both"
                    )
            elif any(v is not None for v in econ + [self.gas_price]):
                missing = [n for n, v in zip(("oil_price", "opex_per_month", "nri"), econ) if v is None]
                if missing:
                    raise InputError(
                        "the economic limit from prices needs oil_price, opex_per_month and nri; "
                        f"missing: {', '.join(missing)}"
                    )
                check_range("oil_price", self.oil_price, 0.0, None, unit="$/bbl", lo_open=True)
                check_range("opex_per_month", self.opex_per_month, 0.0, None, unit="$/month")
                check_range("nri", self.nri, 0.0, 1.0, lo_open=True)
                if self.gas_price is not None:
                    check_range("gas_price", self.gas_price, 0.0, None, unit="$/Mcf")
        except InputError:
            raise
        except ValueError as exc:
            raise InputError(str(exc)) from exc
        if self.units not in ("field", "metric"):
            raise InputError(f"units must be 'field' or 'metric', got {self.units!r}")

    @property
    def uses_economics(self) -> bool:
        """True when the economic limit comes from prices and costs."""
        return self.econ_limit_bopd is None and self.oil_price is not None

    def as_dict(self) -> dict[str, Any]:
        """Settings as plain values (as-of month as ``YYYY-MM``), for records and cover sheets."""
        d = dataclasses.asdict(self)
        d["as_of"] = None if self.as_of is None else self.as_of.strftime("%Y-%m")
        return d


# --------------------------------------------------------------------------------------------
# result
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RunResult:
    """Everything one forecast run produced (field units; months as datetime64 month starts).

    Attributes
    ----------
    wells : DataFrame
        One row per well, :data:`WELLS_COLUMNS` then :data:`WELLS_EXTRA_COLUMNS`.
    monthly : DataFrame
        Actual then forecast months per well, :data:`MONTHLY_COLUMNS`.
    units : DataFrame
        One row per reservoir unit, :data:`UNITS_COLUMNS`.
    load_report : DataFrame
        The loader's report (rejected / altered rows with reasons), plus any run-level lines.
    candidates : DataFrame
        Every Arps family fitted per well and stream, with its fit quality (decline engine).
    stages : DataFrame
        The stage tracker's per-well table as returned by ``core.stages.track_wells``.
    settings : RunSettings
        The settings of the run.
    version : str
        Program version (``core.__version__``).
    as_of : Timestamp
        The as-of month (the last month in the data unless set).
    summary : dict
        Counts and totals for reports: wells read / forecast / not forecast, reasons with
        counts, total EUR and remaining, wells past the GOR peak, economic limit used.
    fits : DataFrame
        The decline engine's per-well, per-stream fit table as returned.
    fluids : DataFrame
        The fluid typing table as returned by ``core.fluids.classify_field``.
    inputs : dict
        Input description: file name, content SHA-256, rows read/used/rejected, pressure kind.
    timings : dict
        Wall time per phase [s] (not part of the numbers; differs between runs).
    """

    wells: pd.DataFrame
    monthly: pd.DataFrame
    units: pd.DataFrame
    load_report: pd.DataFrame
    candidates: pd.DataFrame
    stages: pd.DataFrame
    settings: RunSettings
    version: str
    as_of: pd.Timestamp | None
    summary: dict[str, Any]
    fits: pd.DataFrame = field(default_factory=pd.DataFrame)
    fluids: pd.DataFrame = field(default_factory=pd.DataFrame)
    inputs: dict[str, Any] = field(default_factory=dict)
    timings: dict[str, float] = field(default_factory=dict)


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------
def _noop_progress(fraction: float, message: str = "") -> None:
    return None


def _col(df: pd.DataFrame, *names: str, default: Any = np.nan) -> pd.Series:
    """First column of ``df`` named in ``names``; else a column of ``default``."""
    for n in names:
        if n in df.columns:
            return df[n]
    return pd.Series(default, index=df.index, dtype=object if isinstance(default, str) else None)


def _finite_or_nan(s: pd.Series) -> pd.Series:
    v = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    return pd.Series(np.where(np.isfinite(v), v, np.nan), index=s.index)


def _month_start(s: pd.Series) -> pd.Series:
    v = pd.to_datetime(s, errors="coerce")
    return v.dt.to_period("M").dt.to_timestamp().astype("datetime64[ns]")


def econ_limit_text(settings: RunSettings) -> str:
    """One-line description of the economic limit the run used."""
    if settings.econ_limit_bopd is not None:
        return f"{settings.econ_limit_bopd:g} bbl/d (given)"
    if settings.uses_economics:
        gas = f", gas {settings.gas_price:g} $/Mcf credited at each well's recent GOR" if settings.gas_price else ""
        return (
            f"from oil {settings.oil_price:g} $/bbl{gas}, opex {settings.opex_per_month:g} $/month, "
            f"NRI {settings.nri:g}, WI {settings.wi:g}, severance tax {settings.severance_tax:g}"
        )
    return f"{DEFAULT_ECON_LIMIT_BOPD:g} bbl/d (default)"


def _actuals_per_well(prod: pd.DataFrame) -> pd.DataFrame:
    """First/last month, months produced, cumulatives and last calendar-day rate per well."""
    cols = ["well_id", "first_month", "last_month", "months_produced", "cum_oil_bbl", "cum_gas_mcf",
            "cum_water_bbl", "last_oil_rate_bopd"]
    if prod.empty:
        return pd.DataFrame(columns=cols)
    g = prod.groupby("well_id", sort=False, observed=True)
    out = pd.DataFrame(
        {
            "first_month": g["month"].min(),
            "last_month": g["month"].max(),
            "months_produced": (prod["oil_bbl"] > 0).groupby(prod["well_id"], sort=False, observed=True).sum(),
            "cum_oil_bbl": g["cum_oil_bbl"].last(),
            "cum_gas_mcf": g["cum_gas_mcf"].last() if "cum_gas_mcf" in prod else np.nan,
            "cum_water_bbl": g["cum_water_bbl"].last() if "cum_water_bbl" in prod else np.nan,
            "last_oil_rate_bopd": g["oil_rate_cal_bbl_d"].last() if "oil_rate_cal_bbl_d" in prod else np.nan,
        }
    )
    out.index.name = "well_id"
    return out.reset_index()[cols]


def _status_text(s: Any) -> str:
    if s is None or (isinstance(s, float) and math.isnan(s)) or s is pd.NA:
        return ""
    return " ".join(str(s).split())


# --------------------------------------------------------------------------------------------
# the run
# --------------------------------------------------------------------------------------------
def load_inputs(
    production_path: str | Path,
    *,
    wells_path: str | Path | None = None,
    settings: RunSettings,
    sheet: str | None = None,
    pressure_kind: str = "average_reservoir",
    max_bytes: int | None = None,
    dayfirst: bool | None = None,
) -> Any:
    """Load a production file (and optional well-header file) with the run's input settings.

    Parameters
    ----------
    production_path, wells_path : path
        Production file and optional well-header file (CSV or XLSX).
    settings : RunSettings
        ``units`` and ``unit_column`` are used here.
    sheet : str, optional
        Worksheet of an XLSX production file.
    pressure_kind : {"average_reservoir", "static_bhp"}
        What the pressure column holds.
    max_bytes : int, optional
        Largest file accepted [bytes]; default the loader's limit.
    dayfirst : bool, optional
        Day/month order of dates like 03/04/2021 when the data cannot resolve it.

    Returns the loader's ``LoadResult``. Raises :class:`InputError` when a file cannot be used.
    """
    from core.production import load_production

    kwargs: dict[str, Any] = dict(
        sheet=sheet,
        units=settings.units,
        unit_column=settings.unit_column,
        well_header=None if wells_path is None else Path(wells_path),
        pressure_kind=pressure_kind,
        dayfirst=dayfirst,
    )
    if max_bytes is not None:
        kwargs["max_bytes"] = int(max_bytes)
    return load_production(Path(production_path), **kwargs)


def run_from_files(
    production_path: str | Path,
    *,
    wells_path: str | Path | None = None,
    settings: RunSettings,
    overrides: Mapping[str, Any] | None = None,
    sheet: str | None = None,
    pressure_kind: str = "average_reservoir",
    max_bytes: int | None = None,
    dayfirst: bool | None = None,
    progress: ProgressCallback | None = None,
) -> RunResult:
    """Load the files and run: :func:`load_inputs` then :func:`run_field` (used by the CLI)."""
    load = load_inputs(
        production_path, wells_path=wells_path, settings=settings, sheet=sheet,
        pressure_kind=pressure_kind, max_bytes=max_bytes, dayfirst=dayfirst,
    )
    return run_field(load, settings=settings, overrides=overrides, progress=progress)


def run_field(
    load: Any,
    *,
    settings: RunSettings,
    overrides: Mapping[str, Any] | None = None,
    progress: ProgressCallback | None = None,
) -> RunResult:
    """Run the whole forecast on a loaded production file: the one run of the program.

    Parameters
    ----------
    load : LoadResult
        From :func:`core.production.load_production` (tidy monthly table, well header, load
        report). Not modified.
    settings : RunSettings
        Economic limit, decline bounds, as-of month, horizon, workers.
    overrides : mapping of str to WellOverride, optional
        Engineer overrides per well id (fixed model, b, fit window, excluded months); each
        applied override is named in the well's ``override`` column.
    progress : callable, optional
        ``progress(fraction, message)`` with ``fraction`` in [0, 1], called between phases.

    Returns
    -------
    RunResult
        Tables ``wells``, ``monthly``, ``units``, ``load_report``, ``candidates``, ``stages``
        and the ``summary``; same inputs give the same numbers (the CLI and the dashboard both
        call this function).

    Raises
    ------
    InputError
        When the production table holds no usable month up to the as-of month.
    """
    from core.decline import fit_field
    from core.fluids import classify_field
    from core.forecast import forecast_field
    from core.stages import track_units, track_wells

    prog = progress or _noop_progress
    timings: dict[str, float] = {}
    t0 = time.perf_counter()

    prod_all: pd.DataFrame = load.production
    header: pd.DataFrame = load.wells
    report: pd.DataFrame = load.report.copy()
    if prod_all.empty:
        raise InputError("the production file has no usable rows (see the load report)")
    last_month = pd.Timestamp(prod_all["month"].max())
    as_of = settings.as_of if settings.as_of is not None else last_month
    prod = prod_all[prod_all["month"] <= as_of] if settings.as_of is not None else prod_all
    if prod.empty:
        first = pd.Timestamp(prod_all["month"].min()).strftime("%Y-%m")
        raise InputError(f"as_of {as_of:%Y-%m} is before the first month in the data ({first})")

    prog(0.02, "typing fluids")
    t = time.perf_counter()
    fluids = classify_field(prod, header)
    timings["fluids"] = time.perf_counter() - t

    prog(0.10, "tracking depletion stages")
    t = time.perf_counter()
    stages = track_wells(prod, header, fluids, as_of=as_of)
    timings["stages"] = time.perf_counter() - t

    actual = _actuals_per_well(prod)
    dsettings = decline_settings(settings)

    prog(0.25, "fitting Arps declines")
    t = time.perf_counter()
    regime = stages.set_index("well_id")["regime_start"] if "regime_start" in stages.columns else None
    ff = fit_field(prod, regime_start=regime, settings=dsettings, overrides=dict(overrides) if overrides else None)
    timings["fit"] = time.perf_counter() - t

    prog(0.65, "forecasting to the economic limit")
    t = time.perf_counter()
    fsummary, fmonthly = forecast_field(ff.fits, prod, settings=dsettings, as_of=as_of)
    timings["forecast"] = time.perf_counter() - t

    prog(0.85, "summarising reservoir units")
    t = time.perf_counter()
    units_stage = track_units(prod, stages, header, as_of=as_of)
    timings["units"] = time.perf_counter() - t
    t = time.perf_counter()
    wells = _assemble_wells(prod, header, report, fluids, stages, ff.fits, fsummary, actual)
    monthly = _assemble_monthly(prod, fmonthly, actual)
    units = _assemble_units(units_stage, wells)
    summary = _summary(wells, settings, as_of, load)
    # notes of the decline engine (e.g. overrides naming wells not in the table) are never
    # silent: they go to the summary and, as run-level "info" lines, to the load report
    notes = [str(m) for m in getattr(ff, "messages", ()) or ()]
    summary["messages"] = notes
    if notes:
        extra = pd.DataFrame(
            {
                "file": "(run)",
                "row": pd.array([pd.NA] * len(notes), dtype="Int64"),
                "well_id": "",
                "column": "",
                "value": "",
                "action": "info",
                "reason": notes,
            }
        )
        report = pd.concat([report, extra.reindex(columns=report.columns)], ignore_index=True)
    timings["assemble"] = time.perf_counter() - t
    timings["run_total"] = time.perf_counter() - t0
    prog(1.0, "run complete")

    inputs = {
        "file_name": getattr(load, "file_name", ""),
        "content_sha256": getattr(load, "content_sha256", ""),
        "rows_read": int(getattr(load, "rows_read", len(prod_all))),
        "rows_used": int(getattr(load, "rows_used", len(prod_all))),
        "rows_rejected": int(getattr(load, "rows_rejected", 0)),
        "pressure_kind": getattr(load, "pressure_kind", ""),
        "months_after_as_of_ignored": int(len(prod_all) - len(prod)),
    }
    return RunResult(
        wells=wells,
        monthly=monthly,
        units=units,
        load_report=report,
        candidates=getattr(ff, "candidates", pd.DataFrame()),
        stages=stages,
        settings=settings,
        version=__version__,
        as_of=as_of,
        summary=summary,
        fits=ff.fits,
        fluids=fluids,
        inputs=inputs,
        timings=timings,
    )


def decline_settings(settings: RunSettings) -> Any:
    """The decline engine's :class:`core.decline.DeclineSettings` for these run settings.

    The economic limit goes to the engine either as a rate (``econ_limit_bopd``; the default
    :data:`DEFAULT_ECON_LIMIT_BOPD` when nothing is given) or as price and cost inputs
    (:class:`core.economics.EconomicInputs`), from which the engine computes each well's limit
    with its recent GOR for the gas credit.
    """
    from core.decline import DeclineSettings

    kwargs: dict[str, Any] = dict(
        b_max=float(settings.b_max),
        terminal_decline_effective=float(settings.terminal_decline),
        horizon_years=float(settings.horizon_years),
        workers=settings.workers,
        econ_limit_mcfd=settings.econ_limit_mcfd,
    )
    if settings.uses_economics:
        from core.economics import EconomicInputs

        kwargs["economics"] = EconomicInputs(
            oil_price_per_bbl=float(settings.oil_price),
            opex_per_month=float(settings.opex_per_month),
            working_interest=float(settings.wi),
            net_revenue_interest=float(settings.nri),
            severance_tax=float(settings.severance_tax),
            gas_price_per_mcf=float(settings.gas_price or 0.0),
        )
    else:
        kwargs["econ_limit_bopd"] = float(
            settings.econ_limit_bopd if settings.econ_limit_bopd is not None else DEFAULT_ECON_LIMIT_BOPD
        )
    names = {f.name for f in dataclasses.fields(DeclineSettings)}
    return DeclineSettings(**{k: v for k, v in kwargs.items() if k in names})


def _stream_rows(fits: pd.DataFrame, stream: str) -> pd.DataFrame:
    if "stream" in fits.columns:
        fits = fits[fits["stream"].astype(str) == stream]
    return fits.drop_duplicates("well_id", keep="first").set_index("well_id")


def _by_well(df: pd.DataFrame) -> pd.DataFrame:
    return df.assign(well_id=df["well_id"].astype(str)).drop_duplicates("well_id").set_index("well_id")


#: ``forecast_end_reason`` values of :func:`core.forecast.forecast_field` meaning "forecast".
_FORECAST_REASONS = ("economic_limit", "horizon")
_BELOW_LIMIT = "below_limit_at_start"
STATUS_BELOW_LIMIT = "below the economic limit at the as-of month"


def _assemble_wells(prod, header, report, fluids, stages, fits, fsummary, actual) -> pd.DataFrame:
    # every well the user gave: header, production, and wells whose every row was rejected
    ids = pd.Index(pd.unique(pd.concat([header["well_id"], prod["well_id"]], ignore_index=True).astype(str)))
    rej_ids: pd.Index = pd.Index([], dtype=object)
    if "well_id" in report.columns and len(report):
        r = report.loc[report["well_id"].notna(), "well_id"].astype(str)
        r = r[r.str.strip() != ""]
        rej_ids = pd.Index(pd.unique(r)).difference(ids)
    ids = ids.append(rej_ids)
    w = pd.DataFrame(index=ids)
    w.index.name = "well_id"

    hdr = _by_well(header)
    act = _by_well(actual)
    flu = _by_well(fluids)
    stg = _by_well(stages)
    fits_s = fits.assign(well_id=fits["well_id"].astype(str))
    f_oil = _stream_rows(fits_s, "oil")
    f_gas = _stream_rows(fits_s, "gas")
    fs = _by_well(fsummary).reindex(ids)

    unit_from_prod = prod.groupby("well_id", sort=False, observed=True)["unit"].last()
    unit_from_prod.index = unit_from_prod.index.astype(str)
    w["unit"] = _col(hdr, "unit").reindex(ids)
    w["unit"] = w["unit"].where(w["unit"].notna(), unit_from_prod.reindex(ids)).fillna("unassigned").astype(str)
    w["fluid_type"] = _col(flu, "fluid_type", default="unknown").reindex(ids).fillna("unknown")

    # status: "ok" when forecast; otherwise the first reason found along the pipeline
    in_prod = ids.isin(act.index)
    reason = _col(fs, "forecast_end_reason", default="").fillna("").astype(str)
    fc_txt = _col(fs, "status", default="").map(_status_text)
    fc_txt = fc_txt.str.replace(r"^not forecast: ", "", regex=True)
    ok = (in_prod & reason.isin(_FORECAST_REASONS)).to_numpy()
    below = (in_prod & (reason == _BELOW_LIMIT)).to_numpy()
    status = pd.Series(STATUS_OK, index=ids, dtype=object)
    other = ~ok & ~below
    status[other] = fc_txt[other].where(fc_txt[other] != "", "not forecast")
    status[below] = STATUS_BELOW_LIMIT
    status[~in_prod] = "no production up to the as-of month"
    status[ids.isin(rej_ids)] = "no usable rows (see load_report)"

    for c in ("first_month", "last_month", "cum_oil_bbl", "cum_gas_mcf", "cum_water_bbl"):
        w[c] = act[c].reindex(ids) if c in act.columns else np.nan
    has_numbers = ok | below  # wells with a forecast answer (remaining 0 when below the limit)

    w["model"] = _col(fs, "model", default="").where(ok, "").fillna("")
    w["fit_start"] = _month_start(_col(fs, "fit_start")).where(ok)
    w["fit_end"] = _month_start(_col(fs, "fit_end")).where(ok)
    w["qi_bopd"] = _finite_or_nan(_col(fs, "qi_bopd")).where(ok)
    w["di_annual_nominal"] = _finite_or_nan(_col(fs, "di_annual_nominal")).where(ok)
    w["b"] = _finite_or_nan(_col(fs, "b")).where(ok)
    w["terminal_decline_annual_effective"] = _finite_or_nan(_col(fs, "terminal_decline_annual_effective")).where(ok)
    w["econ_limit_bopd"] = _finite_or_nan(_col(fs, "econ_limit_bopd"))
    w["remaining_oil_bbl"] = _finite_or_nan(_col(fs, "remaining_oil_bbl")).where(has_numbers)
    w["eur_oil_bbl"] = w["cum_oil_bbl"] + w["remaining_oil_bbl"]  # EUR = cumulative + remaining
    w["econ_limit_date"] = _month_start(_col(fs, "econ_limit_date")).where(has_numbers)
    w["eur_gas_mcf"] = _finite_or_nan(_col(fs, "eur_gas_mcf")).where(has_numbers)
    for c in ("rsi_scf_stb", "bubble_point_psia"):
        w[c] = _finite_or_nan(_col(stg, c).reindex(ids))
    bp_hdr = _finite_or_nan(_col(hdr, "bubble_point_psia").reindex(ids))
    w["bubble_point_psia"] = w["bubble_point_psia"].where(w["bubble_point_psia"].notna(), bp_hdr)
    w["stage"] = pd.array(pd.to_numeric(_col(stg, "stage").reindex(ids), errors="coerce"), dtype="Int64")
    w["stage_confidence"] = _col(stg, "stage_confidence", default="").reindex(ids).fillna("")
    for c in ("bubble_point_date", "stage2_end_date", "gor_peak_date"):
        w[c] = _month_start(_col(stg, c).reindex(ids))
    w["gor_peak_scf_stb"] = _finite_or_nan(_col(stg, "gor_peak_scf_stb").reindex(ids))
    w["passed_gor_peak"] = _col(stg, "passed_gor_peak", default=False).reindex(ids).fillna(False).astype(bool)
    w["planning_status"] = _col(stg, "planning_status", default="not_applicable").reindex(ids).fillna("not_applicable")

    # further columns
    w["months_produced"] = _finite_or_nan(_col(act, "months_produced").reindex(ids))
    w["last_oil_rate_bopd"] = _finite_or_nan(_col(act, "last_oil_rate_bopd").reindex(ids))
    w["remaining_gas_mcf"] = _finite_or_nan(_col(fs, "remaining_gas_mcf")).where(has_numbers)
    w["forecast_end_reason"] = reason.where(in_prod, "")
    w["forecast_note"] = fc_txt.where(ok & (fc_txt != STATUS_OK).to_numpy(), "")
    w["uptime_fraction"] = _finite_or_nan(_col(fs, "uptime_fraction"))
    w["terminal_switch_month"] = _month_start(_col(fs, "terminal_switch_month")).where(ok)
    w["fitted_model"] = _col(fs, "fitted_model", default="").where(ok, "").fillna("")
    w["gas_method"] = _col(fs, "gas_method", default="").fillna("")
    w["fit_status"] = _col(f_oil, "status", default="").reindex(ids).map(_status_text)
    w["fit_regime_source"] = _col(f_oil, "regime_source", default="").reindex(ids).fillna("")
    w["fit_months_used"] = _finite_or_nan(_col(f_oil, "n_months_used").reindex(ids))
    w["fit_months_excluded"] = _finite_or_nan(_col(f_oil, "n_months_excluded").reindex(ids))
    w["fit_months_down_weighted"] = _finite_or_nan(_col(f_oil, "n_months_down_weighted").reindex(ids))
    w["fit_rmse_log"] = _finite_or_nan(_col(f_oil, "rmse_log").reindex(ids))
    w["fit_criterion"] = _col(f_oil, "criterion", default="").reindex(ids).fillna("")
    w["gas_model"] = _col(f_gas, "model", default="").reindex(ids).fillna("")
    w["gas_qi_mcf_d"] = _finite_or_nan(_col(f_gas, "qi").reindex(ids))
    w["gas_di_annual_nominal"] = _finite_or_nan(_col(f_gas, "di").reindex(ids))
    w["gas_b"] = _finite_or_nan(_col(f_gas, "b").reindex(ids))
    ov_oil = _col(f_oil, "override", default="").reindex(ids).fillna("").astype(str)
    ov_gas = _col(f_gas, "override", default="").reindex(ids).fillna("").astype(str)
    w["override"] = np.where(
        (ov_gas != "") & (ov_gas != ov_oil),
        np.where(ov_oil != "", "oil: " + ov_oil + "; gas: " + ov_gas, "gas: " + ov_gas),
        ov_oil,
    )
    w["initial_gor_scf_stb"] = _finite_or_nan(_col(flu, "initial_gor_scf_stb").reindex(ids))
    w["fluid_evidence"] = _col(flu, "fluid_evidence", default="").reindex(ids).fillna("")
    for c in ("stage_reason", "stage_evidence", "planning_rule"):
        w[c] = _col(stg, c, default="").reindex(ids).fillna("")
    w["months_since_event"] = _finite_or_nan(_col(stg, "months_since_event").reindex(ids))
    w["months_to_gor_peak_est"] = _finite_or_nan(_col(stg, "months_to_gor_peak_est").reindex(ids))
    w["regime_start"] = _month_start(_col(stg, "regime_start").reindex(ids))

    # guard (never expected): a forecast well must carry a finite remaining >= 0
    rem = w["remaining_oil_bbl"].to_numpy(dtype=float)
    bad = has_numbers & ~(np.isfinite(rem) & (rem >= 0))
    if bad.any():
        status[bad] = "forecast rejected: remaining oil not a finite non-negative number"
        for c in ("remaining_oil_bbl", "eur_oil_bbl", "eur_gas_mcf", "remaining_gas_mcf"):
            w.loc[bad, c] = np.nan
    w["status"] = status.to_numpy()
    out = w.reset_index()
    return out[WELLS_COLUMNS + WELLS_EXTRA_COLUMNS]


def _assemble_monthly(prod: pd.DataFrame, fmonthly: pd.DataFrame, actual: pd.DataFrame) -> pd.DataFrame:
    """Actual months from the tidy table, then forecast months, per well (wells sorted).

    Built with numpy takes (no concat + sort of the whole table): each well's actual months
    come first, then its forecast months (all after the as-of month). ``well_id`` and ``kind``
    are categoricals (text values; small in memory for millions of rows).
    """
    # codes through the unique ids only (hashing millions of strings once each)
    ca, ua = pd.factorize(prod["well_id"])
    cf, uf = pd.factorize(fmonthly["well_id"])
    ua, uf = pd.Index(ua).astype(str), pd.Index(uf).astype(str)
    wells = ua.union(uf).sort_values()
    a_code = wells.get_indexer(ua)[ca] if len(ca) else ca
    f_code = wells.get_indexer(uf)[cf] if len(cf) else cf
    n_a, n_f = len(a_code), len(f_code)
    code = np.concatenate([a_code, f_code])
    month = np.concatenate([
        prod["month"].to_numpy(dtype="datetime64[ns]"),
        pd.to_datetime(fmonthly["month"]).to_numpy(dtype="datetime64[ns]"),
    ])
    # stable sort by (well, month); actual months precede forecast months of the same well
    order = np.lexsort((month, code))

    def col(a_vals: Any, f_vals: Any) -> np.ndarray:
        v = np.concatenate([np.asarray(a_vals, dtype=float), np.asarray(f_vals, dtype=float)])[order]
        return np.where(np.isfinite(v), v, np.nan)

    kind_code = np.concatenate([np.zeros(n_a, dtype=np.int8), np.ones(n_f, dtype=np.int8)])[order]
    out = pd.DataFrame(
        {
            "well_id": pd.Categorical.from_codes(code[order], categories=wells),
            "month": month[order],
            "kind": pd.Categorical.from_codes(kind_code, categories=["actual", "forecast"]),
            "oil_bbl": col(prod["oil_bbl"], _col(fmonthly, "oil_bbl")),
            "gas_mcf": col(_col(prod, "gas_mcf"), _col(fmonthly, "gas_mcf")),
            "water_bbl": col(_col(prod, "water_bbl"), _col(fmonthly, "water_bbl")),
            "oil_rate_bopd": col(_col(prod, "oil_rate_cal_bbl_d"), _col(fmonthly, "oil_rate_bopd")),
            "cum_oil_bbl": col(prod["cum_oil_bbl"], _col(fmonthly, "cum_oil_bbl")),
        }
    )
    return out[MONTHLY_COLUMNS]


def _assemble_units(units_stage: pd.DataFrame, wells: pd.DataFrame) -> pd.DataFrame:
    """Unit table: the stage tracker's unit view plus forecast totals from the wells table.

    Wells with no production month (every row rejected, or none up to the as-of month) belong
    to no unit's totals; they keep their row in the wells table.
    """
    w = wells[wells["first_month"].notna()]
    w = w.assign(unit=w["unit"].astype(str))
    ok = w["status"] == STATUS_OK
    g = w.groupby("unit", sort=True)
    totals = pd.DataFrame(
        {
            "n_wells_all": g.size(),
            "n_wells_forecast": ok.groupby(w["unit"]).sum(),
            "n_wells_past_gor_peak": w["passed_gor_peak"].astype(bool).groupby(w["unit"]).sum(),
            "cum_oil_bbl": g["cum_oil_bbl"].sum(min_count=1),
            "cum_gas_mcf": g["cum_gas_mcf"].sum(min_count=1),
            "cum_water_bbl": g["cum_water_bbl"].sum(min_count=1),
            # sums over the wells with an answer: forecast wells and wells already below the limit
            "remaining_oil_bbl": g["remaining_oil_bbl"].sum(min_count=1),
            "eur_oil_bbl": g["eur_oil_bbl"].sum(min_count=1),
            "eur_gas_mcf": g["eur_gas_mcf"].sum(min_count=1),
        }
    )
    us = units_stage.assign(unit=units_stage["unit"].astype(str)).drop_duplicates("unit").set_index("unit")
    idx = us.index.union(totals.index)
    u = pd.DataFrame(index=idx)
    u.index.name = "unit"
    u["stage"] = pd.array(pd.to_numeric(_col(us, "stage").reindex(idx), errors="coerce"), dtype="Int64")
    u["stage_confidence"] = _col(us, "stage_confidence", default="").reindex(idx).fillna("")
    n_stage = pd.to_numeric(_col(us, "n_wells").reindex(idx), errors="coerce")
    u["n_wells"] = n_stage.where(n_stage.notna(), totals["n_wells_all"].reindex(idx)).fillna(0).astype(int)
    for c in ("share_stage_1", "share_stage_2", "share_stage_3", "share_stage_4", "share_not_applicable"):
        u[c] = _finite_or_nan(_col(us, c).reindex(idx))
    u["planning_status"] = _col(us, "planning_status", default="not_applicable").reindex(idx).fillna("not_applicable")
    u["bubble_point_date"] = _month_start(_col(us, "bubble_point_date").reindex(idx))
    u["months_since_bubble_point"] = _finite_or_nan(_col(us, "months_since_bubble_point").reindex(idx))
    u["gor_peak_date"] = _month_start(_col(us, "gor_peak_date").reindex(idx))
    u["months_to_gor_peak_est"] = _finite_or_nan(_col(us, "months_to_gor_peak_est").reindex(idx))
    for c in ("n_wells_forecast", "n_wells_past_gor_peak"):
        u[c] = totals[c].reindex(idx).fillna(0).astype(int)
    for c in ("cum_oil_bbl", "cum_gas_mcf", "cum_water_bbl", "remaining_oil_bbl", "eur_oil_bbl", "eur_gas_mcf"):
        u[c] = _finite_or_nan(totals[c].reindex(idx))
    u["planning_rule"] = _col(us, "planning_rule", default="").reindex(idx).fillna("")
    u["rsi_scf_stb"] = _finite_or_nan(_col(us, "rsi_scf_stb").reindex(idx))
    u["bubble_point_psia"] = _finite_or_nan(_col(us, "bubble_point_psia").reindex(idx))
    u["stage2_end_date"] = _month_start(_col(us, "stage2_end_date").reindex(idx))
    u["latest_gor_scf_stb"] = _finite_or_nan(_col(us, "gor_scf_stb", "latest_gor_scf_stb").reindex(idx))
    u["stage_evidence"] = _col(us, "stage_evidence", default="").reindex(idx).fillna("")
    return u.reset_index()[UNITS_COLUMNS + UNITS_EXTRA_COLUMNS]


def _summary(wells: pd.DataFrame, settings: RunSettings, as_of: pd.Timestamp, load: Any) -> dict[str, Any]:
    ok = wells["status"] == STATUS_OK
    reasons = wells.loc[~ok, "status"].value_counts()
    fluid_counts = wells["fluid_type"].value_counts()

    def total(col: str, mask: pd.Series | None = None) -> float:
        s = wells[col] if mask is None else wells.loc[mask, col]
        v = float(np.nansum(s.to_numpy(dtype=float)))
        return v if math.isfinite(v) else 0.0

    return {
        "as_of": as_of.strftime("%Y-%m"),
        "wells_read": int(len(wells)),
        "wells_forecast": int(ok.sum()),
        "wells_not_forecast": int((~ok).sum()),
        "not_forecast_reasons": {str(k): int(v) for k, v in reasons.items()},
        "fluid_types": {str(k): int(v) for k, v in fluid_counts.items()},
        "econ_limit": econ_limit_text(settings),
        "cum_oil_bbl_total": total("cum_oil_bbl"),
        # totals over the wells with an answer (forecast, or already below the limit)
        "eur_oil_bbl_total": total("eur_oil_bbl"),
        "remaining_oil_bbl_total": total("remaining_oil_bbl"),
        "eur_gas_mcf_total": total("eur_gas_mcf"),
        "wells_below_limit": int((wells["status"] == STATUS_BELOW_LIMIT).sum()),
        "wells_past_gor_peak": int(wells["passed_gor_peak"].astype(bool).sum()),
        "rows_read": int(getattr(load, "rows_read", 0)),
        "rows_rejected": int(getattr(load, "rows_rejected", 0)),
    }
