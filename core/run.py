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
from collections.abc import Callable, Mapping, Sequence
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

#: Columns added to ``wells`` (after the others) when the run has probabilistic forecasts.
PROB_WELLS_COLUMNS = [
    "eur_oil_bbl_p90", "eur_oil_bbl_p50", "eur_oil_bbl_p10",
    "remaining_oil_bbl_p90", "remaining_oil_bbl_p50", "remaining_oil_bbl_p10",
    "econ_limit_date_p90", "econ_limit_date_p50", "econ_limit_date_p10",
    "prob_method", "prob_samples",
]
#: Columns added to ``monthly`` (forecast months; blank in actual months) with probabilistic
#: forecasts. They cover the deterministic forecast months; P10 months beyond a well's
#: deterministic end are counted in the EUR/remaining percentiles and the field totals only.
PROB_MONTHLY_COLUMNS = ["oil_bbl_p90", "oil_bbl_p50", "oil_bbl_p10"]

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
        Economic limit of gas and condensate wells, which are forecast on their gas decline
        (:func:`gas_limits_mcfd`). [Mcf/d] Default: from the prices when given, else
        :data:`DEFAULT_ECON_LIMIT_MCFD`.
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
    samples : int, optional
        Bootstrap samples per well for the P90/P50/P10 forecasts
        (:func:`core.probabilistic.probabilistic_field`); 0 (default) turns them off, else
        20 to 100,000.
    seed : int, optional
        Seed of the probabilistic forecasts (a well's samples depend only on seed and well
        id). Default 0.
    scheduler : str, optional
        Where the probabilistic chunks run: None (default) in this process, ``"local"`` a
        local Dask cluster, or a Dask scheduler address (``tcp://host:8786``). Results are
        the same.
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
    samples: int = 0
    seed: int = 0
    scheduler: str | None = None

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
        for name in ("samples", "seed"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)):
                raise InputError(f"{name} must be a whole number, got {v!r}")
        if self.samples != 0 and not 20 <= self.samples <= 100_000:
            raise InputError(f"samples must be 0 (off) or from 20 to 100,000, got {self.samples}")
        if self.seed < 0:
            raise InputError(f"seed must be 0 or more, got {self.seed}")
        if self.scheduler is not None and (not isinstance(self.scheduler, str) or not self.scheduler.strip()):
            raise InputError(f"scheduler must be 'local' or a Dask scheduler address, got {self.scheduler!r}")

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
    probabilistic : ProbabilisticResult or None
        The P90/P50/P10 forecasts (:mod:`core.probabilistic`) when ``settings.samples > 0``;
        their per-well and per-month percentiles are also merged into ``wells`` and
        ``monthly`` (:data:`PROB_WELLS_COLUMNS`, :data:`PROB_MONTHLY_COLUMNS`).
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
    probabilistic: Any = None


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
    """One-line description of the economic limits the run used (oil wells; gas wells)."""
    if settings.econ_limit_mcfd is not None:
        gas_txt = f"; gas and condensate wells {settings.econ_limit_mcfd:g} Mcf/d (given)"
    elif settings.uses_economics:
        gas_txt = "; gas and condensate wells from the same prices and costs per Mcf"
    else:
        gas_txt = f"; gas and condensate wells {DEFAULT_ECON_LIMIT_MCFD:g} Mcf/d (default)"
    if settings.econ_limit_bopd is not None:
        return f"{settings.econ_limit_bopd:g} bbl/d (given)" + gas_txt
    if settings.uses_economics:
        gas = f", gas {settings.gas_price:g} $/Mcf credited at each well's recent GOR" if settings.gas_price else ""
        return (
            f"from oil {settings.oil_price:g} $/bbl{gas}, opex {settings.opex_per_month:g} $/month, "
            f"NRI {settings.nri:g}, WI {settings.wi:g}, severance tax {settings.severance_tax:g}" + gas_txt
        )
    return f"{DEFAULT_ECON_LIMIT_BOPD:g} bbl/d (default)" + gas_txt


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
    regime = _regime(stages)
    ff = fit_field(prod, regime_start=regime, settings=dsettings, overrides=dict(overrides) if overrides else None)
    timings["fit"] = time.perf_counter() - t

    prog(0.65, "forecasting to the economic limit")
    t = time.perf_counter()
    fsummary, fmonthly = _forecast(ff.fits, prod, fluids, dsettings, as_of)
    timings["forecast"] = time.perf_counter() - t

    prog(0.85, "summarising reservoir units")
    t = time.perf_counter()
    units_stage = track_units(prod, stages, header, as_of=as_of)
    timings["units"] = time.perf_counter() - t
    t = time.perf_counter()
    wells = _assemble_wells(prod, header, report, fluids, stages, ff.fits, fsummary, actual)
    monthly = _assemble_monthly(prod, fmonthly, actual)
    timings["assemble"] = time.perf_counter() - t
    notes = list(getattr(ff, "messages", ()) or ())
    prob = None
    if settings.samples:
        prog(0.9, f"probabilistic forecasts ({settings.samples} samples per well)")
        t = time.perf_counter()
        wells, monthly, prob, pnotes = _add_probabilistic(wells, monthly, prod, ff.fits, settings, dsettings, as_of,
                                                          overrides, regime, fluids)
        notes += pnotes
        timings["probabilistic"] = time.perf_counter() - t
    return _finish(
        load, settings, overrides, prod_all, prod, as_of, report, wells, monthly, units_stage, stages,
        ff.fits, getattr(ff, "candidates", pd.DataFrame()), fluids, notes, timings, t0, prog, prob,
    )


def _add_probabilistic(wells: pd.DataFrame, monthly: pd.DataFrame, prod: pd.DataFrame, fits: pd.DataFrame,
                       settings: RunSettings, dsettings: Any, as_of: pd.Timestamp,
                       overrides: Mapping[str, Any] | None, regime: Any, fluids: pd.DataFrame | None = None):
    """P90/P50/P10 forecasts (:func:`core.probabilistic.probabilistic_field`) merged into the
    wells and monthly tables; returns (wells, monthly, ProbabilisticResult, notes).

    Wells without a deterministic answer (not forecast) get blank percentiles. The monthly
    percentile columns fill the forecast months of ``monthly``; P10 months after a well's
    deterministic end (a sample that lasts longer) have no row there: they are counted in the
    EUR and remaining percentiles and in the field totals, and a note gives their number.
    """
    from core.probabilistic import add_fixed_wells, probabilistic_field

    # gas and condensate wells run on their gas decline (deterministic here): they leave the
    # bootstrap of oil declines and join the field totals at their deterministic volumes
    gw = _gas_wells(fits, fluids)
    gas_rows = prod["well_id"].astype(str).isin(set(gw))
    pr = probabilistic_field(
        prod[~gas_rows] if len(gw) else prod, fits[~fits["well_id"].astype(str).isin(set(gw))] if len(gw) else fits,
        settings=dsettings, samples=int(settings.samples), seed=int(settings.seed),
        scheduler=settings.scheduler, as_of=as_of, overrides=dict(overrides) if overrides else None,
        regime_start=regime,
    )
    pw = pr.wells.assign(well_id=pr.wells["well_id"].astype(str)).set_index("well_id").reindex(
        wells["well_id"].astype(str))
    answered = wells["eur_oil_bbl"].notna().to_numpy()
    is_gas = wells["well_id"].astype(str).isin(set(gw)).to_numpy()
    if is_gas.any():
        wg = wells.assign(well_id=wells["well_id"].astype(str)).set_index("well_id")
        g_ids = wg.index[is_gas]
        for lab in ("p90", "p50", "p10"):
            pw.loc[g_ids, f"eur_oil_bbl_{lab}"] = wg.loc[g_ids, "eur_oil_bbl"].to_numpy(float)
            pw.loc[g_ids, f"remaining_oil_bbl_{lab}"] = wg.loc[g_ids, "remaining_oil_bbl"].to_numpy(float)
            pw.loc[g_ids, f"econ_limit_date_{lab}"] = wg.loc[g_ids, "econ_limit_date"].to_numpy()
        pw.loc[g_ids, "prob_method"] = "deterministic (gas well forecast on its gas decline)"
        gas_months = monthly[(monthly["kind"] == "forecast").to_numpy()
                             & monthly["well_id"].astype(str).isin(set(g_ids)).to_numpy()]
        pr = add_fixed_wells(pr, wg.loc[g_ids, ["remaining_oil_bbl", "eur_oil_bbl"]].reset_index(),
                             gas_months[["month", "oil_bbl"]],
                             note="gas wells added at their deterministic volumes")
    out = wells.copy()
    for c in PROB_WELLS_COLUMNS:
        v = pw[c] if c in pw.columns else pd.Series(np.nan, index=pw.index)
        if c.startswith("econ_limit_date"):
            out[c] = _month_start(v).where(answered).to_numpy()
        elif c == "prob_method":
            out[c] = v.fillna("").astype(object).where(answered, "").to_numpy()
        elif c == "prob_samples":
            out[c] = pd.array(np.where(answered, int(settings.samples), 0), dtype="Int64")
            out.loc[~answered, c] = pd.NA
        else:
            out[c] = _finite_or_nan(v).where(answered).to_numpy()
    # monthly: match (well, month) of the forecast rows
    m = monthly[MONTHLY_COLUMNS].copy()
    cats = m["well_id"].cat.categories
    mi = m["month"].to_numpy(dtype="datetime64[M]").astype(np.int64)
    key_m = m["well_id"].cat.codes.to_numpy().astype(np.int64) * 100_000 + mi
    pm = pr.monthly
    pc = cats.get_indexer(pd.Index(pm["well_id"].astype(str))).astype(np.int64)
    key_p = pc * 100_000 + pd.to_datetime(pm["month"]).to_numpy(dtype="datetime64[M]").astype(np.int64)
    at = pd.Index(key_m).get_indexer(key_p)
    is_fc = (m["kind"] == "forecast").to_numpy()
    hit = at >= 0
    hit[hit] &= is_fc[at[hit]]
    gas_fc = is_fc & m["well_id"].astype(str).isin(set(gw)).to_numpy() if len(gw) else np.zeros(len(m), bool)
    for c in PROB_MONTHLY_COLUMNS:
        arr = np.full(len(m), np.nan)
        arr[at[hit]] = pm[c].to_numpy(dtype=float)[hit]
        arr[gas_fc] = m["oil_bbl"].to_numpy(dtype=float)[gas_fc]  # deterministic: no spread
        m[c] = arr
    notes = [f"probabilistic forecasts: {int(settings.samples)} samples per well, seed {int(settings.seed)}; "
             f"field totals by {pr.field['method'].iloc[0] if len(pr.field) else 'sample-wise sums'}"]
    notes += [str(x) for x in pr.messages]
    tail = int((~hit).sum())
    if tail:
        notes.append(
            f"{tail:,} well-months of the P10 forecast lie after the wells' deterministic forecast end; "
            "they are in the EUR and remaining percentiles and in field_percentiles, not in the "
            "monthly percentile columns"
        )
    return out, m, pr, notes


def _regime(stages: pd.DataFrame) -> pd.Series | None:
    return stages.set_index("well_id")["regime_start"] if "regime_start" in stages.columns else None


#: Fluid types forecast on their gas decline (McCain's classification: gases and condensates).
GAS_FLUID_TYPES = ("gas_condensate", "wet_gas", "dry_gas")

#: Default economic limit of a gas well when neither a gas rate limit nor prices are given
#: [Mcf/d] (common practice: small gas wells are plugged at a few to a few tens of Mcf/d).
DEFAULT_ECON_LIMIT_MCFD = 10.0

#: Producing months whose condensate-gas ratio the condensate forecast follows (as the
#: decline engine's recent GOR and uptime window).
CGR_MONTHS = 12


def _gas_wells(fits: pd.DataFrame, fluids: pd.DataFrame) -> pd.Index:
    """Gas and condensate wells (fluid typing) with a forecastable gas decline fit."""
    if fluids is None or fluids.empty or "fluid_type" not in fluids.columns:
        return pd.Index([], dtype=object)
    gas_type = set(fluids.loc[fluids["fluid_type"].isin(GAS_FLUID_TYPES), "well_id"].astype(str))
    if not gas_type:
        return pd.Index([], dtype=object)
    g = fits[fits["stream"].astype(str) == "gas"]
    ok = (g["forecastable"].fillna(False).astype(bool) & np.isfinite(pd.to_numeric(g["qi"], errors="coerce"))
          & np.isfinite(pd.to_numeric(g["di"], errors="coerce")) & g["fit_start"].notna())
    ids = g.loc[ok, "well_id"].astype(str)
    return pd.Index(sorted(set(ids) & gas_type))


def recent_cgr(prod: pd.DataFrame, *, months: int = CGR_MONTHS) -> pd.Series:
    """Condensate-gas ratio per well over its last ``months`` producing months [bbl/Mcf]:
    sum of oil (condensate) over sum of gas, months with gas > 0 and days on > 0."""
    gas = pd.to_numeric(prod["gas_mcf"], errors="coerce") if "gas_mcf" in prod else pd.Series(np.nan, index=prod.index)
    oil = pd.to_numeric(prod["oil_bbl"], errors="coerce").fillna(0.0).clip(lower=0.0)
    don = pd.to_numeric(prod["days_on"], errors="coerce").fillna(0.0) if "days_on" in prod else pd.Series(1.0, index=prod.index)
    use = (gas > 0) & (don > 0)
    sub = pd.DataFrame({"well_id": prod["well_id"].astype(str), "month": prod["month"], "oil": oil, "gas": gas})[use]
    sub = sub.sort_values(["well_id", "month"], kind="stable").groupby("well_id", sort=True).tail(months)
    g = sub.groupby("well_id", sort=True)
    return g["oil"].sum() / g["gas"].sum()


def gas_limits_mcfd(dsettings: Any, cgr: pd.Series) -> tuple[pd.Series, str]:
    """Economic limit of gas wells [Mcf/d] and where it comes from.

    ``econ_limit_mcfd`` when given; else, with price inputs, the standard economic-limit
    form (``core.economics``) with the revenue per Mcf = gas price x shrink + CGR x oil price,
    i.e. q_gas = WI OPEX / ((P_gas shrink + CGR P_oil) NRI (1 - tax)) / 30.4375 d; else
    :data:`DEFAULT_ECON_LIMIT_MCFD` (common practice)."""
    if dsettings.econ_limit_mcfd is not None:
        return pd.Series(float(dsettings.econ_limit_mcfd), index=cgr.index), "given"
    econ = dsettings.economics
    if econ is not None:
        from core.economics import economic_limit_from_inputs

        q_oil0 = float(np.asarray(economic_limit_from_inputs(econ, gor_scf_stb=0.0)).ravel()[0])  # bbl/d, no gas credit
        p_oil = float(econ.oil_price_per_bbl)
        rev = float(econ.gas_price_per_mcf) * float(getattr(econ, "gas_shrink", 1.0)) + cgr.fillna(0.0) * p_oil
        q = pd.Series(np.where(rev > 0, q_oil0 * p_oil / np.where(rev > 0, rev, 1.0), DEFAULT_ECON_LIMIT_MCFD),
                      index=cgr.index)
        return q, "from prices and costs"
    return pd.Series(DEFAULT_ECON_LIMIT_MCFD, index=cgr.index), "default, common practice"


def _forecast(fits: pd.DataFrame, prod: pd.DataFrame, fluids: pd.DataFrame, dsettings: Any,
              as_of: pd.Timestamp) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The forecast of every well of ``prod`` from its fits (per well: results of a well do
    not depend on the other wells in the table, which the incremental re-runs rely on).

    Oil wells run on their oil decline to the oil economic limit (``core.forecast``). Gas and
    condensate wells (:data:`GAS_FLUID_TYPES`) with a gas decline fit run on their gas decline
    to a gas economic limit (:func:`gas_limits_mcfd`); their condensate follows the gas at the
    recent condensate-gas ratio (:func:`recent_cgr`), and ``status`` says so. (On its own
    condensate decline such a well often never reaches the oil limit and runs to the horizon
    cap, which inflates the field forecast.)
    """
    from core.forecast import forecast_field

    fsum, fmon = forecast_field(fits, prod, settings=dsettings, as_of=as_of)
    gw = _gas_wells(fits, fluids)
    if gw.empty:
        return fsum, fmon
    gw_list = list(gw)
    sub = prod[prod["well_id"].astype(str).isin(gw_list)]
    cgr = recent_cgr(sub).reindex(gw).fillna(0.0)
    lim, source = gas_limits_mcfd(dsettings, cgr)
    gf = fits[fits["well_id"].astype(str).isin(gw_list)].copy()
    is_oil = (gf["stream"].astype(str) == "oil").to_numpy()
    fa = gf["forecastable"].to_numpy(dtype=bool, copy=True)
    fa[is_oil] = False  # drive by the gas decline
    gf["forecastable"] = fa
    gs, gm = forecast_field(gf, sub, settings=dsettings, as_of=as_of, gas_econ_limit_mcfd=lim)
    ids = gs["well_id"].astype(str)
    c = cgr.reindex(ids).to_numpy(float)
    rem_gas = gs["remaining_gas_mcf"].to_numpy(float)
    gs["remaining_oil_bbl"] = rem_gas * c
    gs["eur_oil_bbl"] = gs["cum_oil_bbl"].to_numpy(float) + gs["remaining_oil_bbl"].to_numpy(float)
    gs["econ_limit_bopd"] = np.nan
    ftype = fluids.assign(well_id=fluids["well_id"].astype(str)).drop_duplicates("well_id").set_index("well_id")["fluid_type"]
    note = pd.Series(
        [f"gas well ({ftype.get(w, 'gas')}): forecast on its gas decline to {lim[w]:.3g} Mcf/d ({source}); "
         f"condensate at the recent condensate-gas ratio {1000.0 * cgr[w]:.1f} bbl/MMcf" for w in ids],
        index=gs.index,
    )
    below = gs["forecast_end_reason"].astype(str) == "below_limit_at_start"
    gs["status"] = note.where(~below, note + "; below the economic limit at the start of the forecast")
    gs["gas_method"] = "own decline (condensate at the recent CGR)"
    if len(gm):
        wid = gm["well_id"].astype(str)
        cg = cgr.reindex(wid).to_numpy(float)
        oil = gm["gas_mcf"].to_numpy(float) * cg
        days = pd.to_datetime(gm["month"]).dt.days_in_month.to_numpy(float)
        hist = gs.set_index(ids)["cum_oil_bbl"].reindex(wid).to_numpy(float)
        gm = gm.assign(oil_bbl=oil, oil_rate_bopd=oil / days,
                       cum_oil_bbl=hist + pd.Series(oil, index=gm.index).groupby(wid.to_numpy(), sort=False).cumsum().to_numpy())
    keep = ~fsum["well_id"].astype(str).isin(gw_list)
    pos = pd.Index(fsum["well_id"].astype(str))
    out = fsum.copy()
    at = pos.get_indexer(ids)
    for col in gs.columns:
        vals = out[col].to_numpy(copy=True) if out[col].dtype != object else out[col].to_numpy(dtype=object, copy=True)
        try:
            vals[at] = gs[col].to_numpy(dtype=vals.dtype)
        except (TypeError, ValueError):
            vals = vals.astype(object)
            vals[at] = gs[col].to_numpy(dtype=object)
        out[col] = vals
    del keep
    fm_keep = fmon[~fmon["well_id"].astype(str).isin(gw_list)]
    fmon2 = pd.concat([fm_keep, gm], ignore_index=True) if len(gm) else fm_keep
    return out, fmon2


def _finish(load, settings, overrides, prod_all, prod, as_of, report, wells, monthly, units_stage, stages,
            fits, candidates, fluids, notes, timings, t0, prog, prob=None) -> RunResult:
    """Units, summary, run-level notes and the :class:`RunResult` (shared by the full run and
    the incremental re-runs, so all give the same tables)."""
    t = time.perf_counter()
    units = _assemble_units(units_stage, wells)
    summary = _summary(wells, settings, as_of, load)
    # notes of the decline engine (e.g. overrides naming wells not in the table) are never
    # silent: they go to the summary and, as run-level "info" lines, to the load report
    notes = [str(m) for m in notes]
    summary["messages"] = notes
    if prob is not None and len(prob.field):
        for _, r in prob.field.iterrows():
            for lab in ("p90", "p50", "p10"):
                summary[f"{r['quantity']}_field_{lab}"] = float(r[lab])
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
    timings["assemble"] = timings.get("assemble", 0.0) + time.perf_counter() - t
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
        candidates=candidates,
        stages=stages,
        settings=settings,
        version=__version__,
        as_of=as_of,
        summary=summary,
        fits=fits,
        fluids=fluids,
        inputs=inputs,
        timings=timings,
        probabilistic=prob,
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
    note = fc_txt.where(ok & (fc_txt != STATUS_OK).to_numpy(), "").astype(object)
    s1 = ok & (w["stage"] == 1).fillna(False).to_numpy(bool)
    note[s1] = [f"{t}; {STAGE1_NOTE}" if t else STAGE1_NOTE for t in note[s1]]
    w["forecast_note"] = note
    w["uptime_fraction"] = _finite_or_nan(_col(fs, "uptime_fraction"))
    w["terminal_switch_month"] = _month_start(_col(fs, "terminal_switch_month")).where(ok)
    w["fitted_model"] = _col(fs, "fitted_model", default="").where(ok, "").fillna("")
    w["gas_method"] = _col(fs, "gas_method", default="").fillna("")
    w["fit_status"] = _col(f_oil, "status", default="").reindex(ids).map(_status_text)
    w["fit_regime_source"] = _regime_source_text(_col(f_oil, "regime_source", default="").reindex(ids).fillna(""),
                                                 stg.reindex(ids))
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


#: Forecast note of a stage-1 well (above the bubble point): its decline will change.
STAGE1_NOTE = ("stage 1: fitted above the bubble point; the decline changes once the pressure crosses it, "
               "so this forecast is provisional")

#: Stage-tracker dates a regime start can be, latest boundary first (``core.stages.regime_start_index``).
_REGIME_EVENTS = (("gor_peak_date", "GOR peak"), ("stage2_end_date", "GOR rise above Rsi"),
                  ("bubble_point_date", "bubble-point crossing"))


def _regime_source_text(source: pd.Series, stg: pd.DataFrame) -> pd.Series:
    """The fit's regime source, naming the stage boundary when the stage tracker set it
    (e.g. ``stage tracker: GOR peak``)."""
    out = source.astype(object).copy()
    if "regime_start" not in stg.columns:
        return out
    rs = pd.to_datetime(stg["regime_start"], errors="coerce").to_numpy()
    name = np.full(len(out), "", dtype=object)
    for col, label in reversed(_REGIME_EVENTS):  # the latest boundary wins when dates coincide
        if col in stg.columns:
            d = pd.to_datetime(stg[col], errors="coerce").to_numpy()
            name = np.where(pd.notna(d) & (d == rs), label, name)
    tracker = (out == "stage tracker").to_numpy() & (name != "")
    out[tracker] = [f"stage tracker: {n}" for n in name[tracker]]
    return out


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


# --------------------------------------------------------------------------------------------
# incremental re-runs
# --------------------------------------------------------------------------------------------
#: Settings that change the fits (or the tables the fits are made from): a change needs a
#: full :func:`run_field`. ``workers`` is here because it sets the fit batches, and the batch
#: padding moves a fit in its last bits.
FIT_SETTINGS = ("as_of", "b_max", "units", "unit_column", "workers")

#: Settings that change only the forecast: :func:`rerun_forecast` keeps the fits. The
#: terminal decline is one of them although the "no decline" wells' fits carry it as their
#: decline (the decline engine's conservative rule); those fits are updated in place.
FORECAST_SETTINGS = ("econ_limit_bopd", "econ_limit_mcfd", "oil_price", "gas_price", "opex_per_month", "nri",
                     "wi", "severance_tax", "terminal_decline", "horizon_years", "samples", "seed", "scheduler")

_PAD_WELL = "\x00padding-well"  # sorts before any well id; never in a loader's table


def _settings_diff(a: RunSettings, b: RunSettings) -> list[str]:
    return [f.name for f in dataclasses.fields(RunSettings) if getattr(a, f.name) != getattr(b, f.name)]


def _check_reusable(previous: RunResult) -> None:
    """The previous run must carry the tables an incremental re-run reuses."""
    need = {"fits": {"well_id", "stream", "n_months_used", "override", "status"}, "stages": {"well_id"},
            "fluids": {"well_id", "fluid_type"}, "candidates": {"well_id"}, "units": {"unit"}}
    for name, cols in need.items():
        t = getattr(previous, name, None)
        if t is None or not isinstance(t, pd.DataFrame) or not cols <= set(t.columns):
            raise ValueError(f"the previous run has no usable {name} table (an incremental re-run reuses it): use run_field")


def _check_same_load(previous: RunResult, load: Any) -> None:
    prev = previous.inputs or {}
    for key in ("content_sha256", "rows_used"):
        old, new = prev.get(key), getattr(load, key, None)
        if old not in (None, "") and new not in (None, "") and old != new:
            raise ValueError(
                f"the load differs from the previous run's ({key}: {old!r} then {new!r}); "
                "an incremental re-run needs the same production table: use run_field"
            )


def _prod_cut(load: Any, settings: RunSettings) -> tuple[pd.DataFrame, pd.DataFrame, pd.Timestamp]:
    prod_all: pd.DataFrame = load.production
    if prod_all.empty:
        raise InputError("the production file has no usable rows (see the load report)")
    as_of = settings.as_of if settings.as_of is not None else pd.Timestamp(prod_all["month"].max())
    prod = prod_all[prod_all["month"] <= as_of] if settings.as_of is not None else prod_all
    return prod_all, prod, as_of


def _override_key_well(key: Any) -> str:
    return str(key[0] if isinstance(key, tuple) else key)


def _override_texts(overrides: Mapping[str, Any] | None, wells: pd.Index, stream: str) -> pd.Series:
    """The ``override`` text each well's ``stream`` fit would carry (as the decline engine
    writes it: ``WellOverride.describe()``; a ``(well, stream)`` key beats the well's key)."""
    out = pd.Series("", index=wells, dtype=object)
    if not overrides:
        return out
    for key, ov in overrides.items():
        if isinstance(key, tuple):
            if key[1] != stream:
                continue
        elif (key, stream) in overrides:
            continue
        w = _override_key_well(key)
        if w in out.index:
            out[w] = ov.describe()
    return out


def _unknown_override_note(overrides: Mapping[str, Any] | None, known: pd.Index) -> list[str]:
    if not overrides:
        return []
    k = set(known)
    unknown = sorted({_override_key_well(key) for key in overrides if _override_key_well(key) not in k})
    return ["overrides for wells not in the table were not applied: " + ", ".join(unknown)] if unknown else []


def _batch_widths(n_used: np.ndarray, st: Any) -> np.ndarray:
    """Padded width of each well's fit batch as ``core.decline.fit_field`` lays the batches out
    (blocks of ``block_wells`` wells; fittable wells sorted by months used, in chunks of
    ``chunk_wells``, smaller with several workers); 0 for a well in no batch. A fit depends on
    its batch only through this width (the padding changes the summation order)."""
    from core.decline import _resolve_workers

    n = n_used.size
    out = np.zeros(n, dtype=np.int64)
    for w0 in range(0, n, st.block_wells):
        nu = n_used[w0:w0 + st.block_wells]
        fw = np.flatnonzero(nu >= st.min_months)
        if fw.size == 0:
            continue
        order = fw[np.argsort(nu[fw], kind="stable")]
        cs = st.chunk_wells
        workers = _resolve_workers(st.workers, fw.size, cs)
        if workers > 1:
            cs = min(cs, max(256, -(-fw.size // (6 * workers))))
        starts = np.arange(0, order.size, cs)
        width = np.maximum.reduceat(nu[order], starts)
        out[w0 + order] = width[np.arange(order.size) // cs]
    return out


def _padding_rows(widths: dict[str, int], columns: pd.Index, has_gas: bool) -> pd.DataFrame:
    """A made-up well whose fit window holds exactly ``widths[stream]`` months per stream: fitted
    with the re-run wells, it pads their batch to the width of the full run's batch, so their
    fits are the full run's to the last bit. Its rows are dropped from every result."""
    w_oil = max(int(widths.get("oil", 0)), 6)
    w_gas = max(int(widths.get("gas", 0)), 6)
    n = max(w_oil, w_gas)
    months = pd.date_range("1900-01-01", periods=n, freq="MS")
    k = np.arange(n, dtype=float)
    dim = months.days_in_month.to_numpy(float)
    oil = np.where(k >= n - w_oil, 100.0 * np.exp(-0.05 * k), 0.0)  # declining: peak first
    gas = np.where(k >= n - w_gas, 300.0 * np.exp(-0.05 * k), 0.0) if has_gas else np.full(n, np.nan)
    df = pd.DataFrame({
        "well_id": _PAD_WELL, "month": months.to_numpy(dtype="datetime64[ns]"), "unit": "unassigned",
        "oil_bbl": oil * dim, "gas_mcf": gas * dim, "water_bbl": 0.0, "days_on": dim, "days_on_given": True,
        "days_in_month": dim.astype(int), "oil_rate_bbl_d": oil, "gas_rate_mcf_d": gas,
        "oil_rate_cal_bbl_d": oil,
    })
    return df.reindex(columns=columns)


def _stream_table(fits: pd.DataFrame, stream: str) -> pd.DataFrame:
    return fits[fits["stream"].astype(str) == stream]


def _refit(prod: pd.DataFrame, fits_prev: pd.DataFrame, regime: Any, dsettings: Any,
           overrides: Mapping[str, Any] | None, wells: list[str]) -> tuple[pd.DataFrame, pd.DataFrame, list[str]]:
    """Fit ``wells`` as the full run would (same batch widths); returns their fits and
    candidates, and every well whose fit had to be redone (the named ones plus any whose
    batch width moves because the named wells' windows changed)."""
    from core.decline import fit_field

    stream_col = fits_prev["stream"].astype(str).to_numpy()
    streams = [s for s in dsettings.streams if (stream_col == s).any()]
    has_gas = "gas" in streams
    tables = {s: fits_prev[stream_col == s] for s in streams}
    order = {s: tables[s]["well_id"].astype(str).to_numpy() for s in streams}
    n_prev = {s: tables[s]["n_months_used"].to_numpy(dtype=np.int64) for s in streams}
    w_prev = {s: _batch_widths(n_prev[s], dsettings) for s in streams}
    pos = {s: pd.Index(order[s]) for s in streams}
    ov_all = dict(overrides) if overrides else {}

    def fit(ws: list[str], widths: dict[str, int] | None):
        sub = prod[prod["well_id"].isin(ws)]
        if widths is not None:
            sub = pd.concat([_padding_rows(widths, prod.columns, has_gas), sub], ignore_index=True)
        ov = {k: v for k, v in ov_all.items() if _override_key_well(k) in set(ws)}
        ff = fit_field(sub, regime_start=regime, settings=dsettings, overrides=ov or None)
        keep = ff.fits["well_id"].astype(str) != _PAD_WELL
        keep_c = ff.candidates["well_id"].astype(str) != _PAD_WELL
        return ff.fits[keep], ff.candidates[keep_c]

    todo = sorted(set(wells))
    guess = {w: {s: int(w_prev[s][pos[s].get_loc(w)]) if w in pos[s] else 0 for s in streams} for w in todo}
    for _ in range(3):
        # fit with the guessed widths, grouped by width
        groups: dict[tuple, list[str]] = {}
        for w in todo:
            groups.setdefault(tuple(guess[w][s] for s in streams), []).append(w)
        parts_f, parts_c = [], []
        for key, ws in groups.items():
            f, c = fit(ws, dict(zip(streams, key)))
            parts_f.append(f)
            parts_c.append(c)
        new_f = pd.concat(parts_f, ignore_index=True)
        new_c = pd.concat(parts_c, ignore_index=True)
        # the widths of the full run with these wells' new windows
        ok = True
        redo: set[str] = set(todo)
        new_stream = new_f["stream"].astype(str).to_numpy()
        w_news = {}
        for s in streams:
            nf = new_f[new_stream == s]
            n_new = n_prev[s].copy()
            ix = pos[s].get_indexer(pd.Index(nf["well_id"].astype(str)))
            n_new[ix] = nf["n_months_used"].to_numpy(dtype=np.int64)
            w_news[s] = w_new = _batch_widths(n_new, dsettings)
            moved = set(order[s][w_new != w_prev[s]]) - set(todo)
            redo |= moved
            for w in todo:
                if w in pos[s] and guess[w][s] != int(w_new[pos[s].get_loc(w)]):
                    ok = False
        # every well to redo gets a width guess for every stream (a well moved in one
        # stream's layout may not have been in the re-fit before)
        for w in redo:
            for s in streams:
                guess.setdefault(w, {})[s] = int(w_news[s][pos[s].get_loc(w)]) if w in pos[s] else 0
        if ok and redo == set(todo):
            return new_f, new_c, todo
        todo = sorted(redo)
    raise RuntimeError("incremental re-fit did not settle on the batch layout")  # pragma: no cover


def _replace_rows(prev: pd.DataFrame, new: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    """``prev`` with the rows matching ``new`` on ``keys`` replaced in place (same order,
    same dtypes)."""
    if new.empty:
        return prev
    pk = pd.MultiIndex.from_frame(prev[keys].astype(str)) if len(keys) > 1 else pd.Index(prev[keys[0]].astype(str))
    nk = pd.MultiIndex.from_frame(new[keys].astype(str)) if len(keys) > 1 else pd.Index(new[keys[0]].astype(str))
    at = pk.get_indexer(nk)
    if (at < 0).any():
        raise ValueError("a re-run row has no place in the previous run's table")
    cols = {}
    for c in prev.columns:
        col = prev[c]
        if isinstance(col.dtype, np.dtype):
            arr = col.to_numpy(copy=True)
            arr[at] = new[c].to_numpy(dtype=arr.dtype)
        else:
            arr = col.array.copy()
            arr[at] = new[c].array
        cols[c] = pd.Series(arr, index=prev.index, dtype=col.dtype, copy=False)
    return pd.DataFrame(cols, index=prev.index, copy=False)


def _replace_candidates(prev: pd.DataFrame, new: pd.DataFrame, wells: list[str], streams: list[str]) -> pd.DataFrame:
    """Candidates with the re-fitted wells' rows swapped, in the full run's order (stream, then
    well id and family within each block of wells)."""
    keep = prev[~prev["well_id"].astype(str).isin(wells)]
    both = pd.concat([keep, new], ignore_index=True)
    s_rank = both["stream"].astype(str).map({s: i for i, s in enumerate(streams)}).fillna(len(streams))
    key = pd.DataFrame({"s": s_rank.to_numpy(), "w": both["well_id"].astype(str).to_numpy(),
                        "f": both["family"].astype(str).to_numpy()})
    order = key.sort_values(["s", "w", "f"], kind="stable").index.to_numpy()
    return both.take(order).reset_index(drop=True)


def _forecast_rows(fmonthly: pd.DataFrame) -> dict[str, np.ndarray]:
    def col(v: Any) -> np.ndarray:
        v = np.asarray(v, dtype=float)
        return np.where(np.isfinite(v), v, np.nan)

    return {
        "month": pd.to_datetime(fmonthly["month"]).to_numpy(dtype="datetime64[ns]"),
        "oil_bbl": col(_col(fmonthly, "oil_bbl")),
        "gas_mcf": col(_col(fmonthly, "gas_mcf")),
        "water_bbl": col(_col(fmonthly, "water_bbl")),
        "oil_rate_bopd": col(_col(fmonthly, "oil_rate_bopd")),
        "cum_oil_bbl": col(_col(fmonthly, "cum_oil_bbl")),
    }


def _splice_monthly(prev: pd.DataFrame, fmonthly: pd.DataFrame, wells: list[str]) -> pd.DataFrame:
    """``prev`` (the assembled monthly table) with the forecast months of ``wells`` replaced by
    ``fmonthly`` (their new forecast), placed after each well's actual months as the full
    assembly places them."""
    cats = prev["well_id"].cat.categories
    codes = prev["well_id"].cat.codes.to_numpy()
    kind = prev["kind"].cat.codes.to_numpy()
    fc_code = int(list(prev["kind"].cat.categories).index("forecast"))
    wcodes = cats.get_indexer(pd.Index(wells))
    wcodes = wcodes[wcodes >= 0]
    drop = np.isin(codes, wcodes) & (kind == fc_code)
    keep = np.flatnonzero(~drop)
    k_codes = codes[keep]
    new_codes = cats.get_indexer(pd.Index(fmonthly["well_id"].astype(str)))
    if (new_codes < 0).any():
        raise ValueError("a re-run forecast names a well that the previous run does not have")
    order = np.lexsort((pd.to_datetime(fmonthly["month"]).to_numpy(dtype="datetime64[ns]"), new_codes))
    fm = fmonthly.iloc[order]
    new_codes = new_codes[order]
    at = np.searchsorted(k_codes, new_codes, side="right")
    rows = _forecast_rows(fm)
    out = {
        "well_id": pd.Categorical.from_codes(np.insert(k_codes, at, new_codes), categories=cats),
        "month": np.insert(prev["month"].to_numpy()[keep], at, rows["month"]),
        "kind": pd.Categorical.from_codes(np.insert(kind[keep], at, np.full(len(fm), fc_code, dtype=kind.dtype)),
                                          categories=prev["kind"].cat.categories),
    }
    for c in ("oil_bbl", "gas_mcf", "water_bbl", "oil_rate_bopd", "cum_oil_bbl"):
        out[c] = np.insert(prev[c].to_numpy()[keep], at, rows[c])
    return pd.DataFrame(out)[MONTHLY_COLUMNS]


def _deterministic_tables(previous: RunResult) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The previous wells and monthly tables without the probabilistic columns."""
    w = previous.wells
    m = previous.monthly
    if any(c in w.columns for c in PROB_WELLS_COLUMNS):
        w = w[[c for c in w.columns if c not in PROB_WELLS_COLUMNS]]
    if list(m.columns) != MONTHLY_COLUMNS:
        m = m[MONTHLY_COLUMNS]
    return w, m


def _units_stage_view(previous: RunResult) -> pd.DataFrame:
    """The stage tracker's unit view as kept in the previous run's units table (stage columns
    do not depend on the fits)."""
    return previous.units


def _rerun_notes_and_ranges(wells, monthly, prod, fits, settings, dsettings, as_of, overrides, previous, timings):
    """Notes on unknown overrides and, with ``settings.samples``, the P90/P50/P10 of a re-run
    (shared by :func:`rerun_wells` and :func:`rerun_forecast`); returns (wells, monthly,
    probabilistic result or None, notes). The level-error calibration pools every well's
    hindcast miss, so one well's new fit moves every well's samples: the probabilistic part
    is recomputed for the whole field."""
    notes = _unknown_override_note(overrides, pd.Index(pd.unique(prod["well_id"].astype(str))))
    prob = None
    if settings.samples:
        t = time.perf_counter()
        wells, monthly, prob, pnotes = _add_probabilistic(wells, monthly, prod, fits, settings, dsettings, as_of,
                                                          overrides, _regime(previous.stages), previous.fluids)
        notes += pnotes
        timings["probabilistic"] = time.perf_counter() - t
    return wells, monthly, prob, notes


def rerun_wells(
    previous: RunResult,
    load: Any,
    *,
    settings: RunSettings,
    overrides: Mapping[str, Any] | None,
    wells: Sequence[str],
) -> RunResult:
    """Re-fit and re-forecast only ``wells`` (e.g. after an override changed), keeping every
    other well of ``previous``.

    The result equals a full :func:`run_field` with the same load, settings and overrides,
    table for table: the fluid typing, stages and regime starts are reused (they do not
    depend on the fits or overrides); the named wells are fitted in a batch padded to the
    width of their batch in a full run (so their fits match to the last bit); a well whose
    batch width moves because of the change is re-fitted too, and so is any well whose
    override in ``overrides`` differs from the one its previous fit carries. Unit totals,
    the summary and the run notes are recomputed.

    Parameters
    ----------
    previous : RunResult
        A run of the same load (same content and rows) and settings.
    load : LoadResult
        The loaded production (the one ``previous`` was made from).
    settings : RunSettings
        Must equal ``previous.settings``; for forecast-only changes use :func:`rerun_forecast`.
    overrides : mapping of str to WellOverride, or None
        The complete override set of the new run (not only the changed wells).
    wells : sequence of str
        Wells to re-fit (wells not in the production table are ignored).

    Raises
    ------
    ValueError
        When the settings or the load differ from the previous run's.
    """
    t0 = time.perf_counter()
    diff = _settings_diff(previous.settings, settings)
    if diff:
        raise ValueError(
            "rerun_wells keeps the other wells' forecasts, so the settings must equal the previous "
            f"run's; these differ: {', '.join(diff)} (use rerun_forecast or run_field)"
        )
    _check_reusable(previous)
    _check_same_load(previous, load)
    prod_all, prod, as_of = _prod_cut(load, settings)
    dsettings = decline_settings(settings)
    fits_prev = previous.fits
    streams = [s for s in dsettings.streams if (fits_prev["stream"].astype(str) == s).any()]
    # wells named, plus wells whose override changed without being named
    named = {str(w) for w in wells}
    for s in streams:
        ft = _stream_table(fits_prev, s)
        ids = pd.Index(ft["well_id"].astype(str))
        want = _override_texts(overrides, ids, s)
        have = ft["override"].fillna("").astype(str).to_numpy()
        named |= set(ids[want.to_numpy() != have])
    in_prod = set(_stream_table(fits_prev, streams[0])["well_id"].astype(str)) if streams else set()
    named = sorted(w for w in named if w in in_prod)
    timings: dict[str, float] = {}
    t = time.perf_counter()
    if named:
        new_f, new_c, refit = _refit(prod, fits_prev, _regime(previous.stages), dsettings, overrides, named)
        fits = _replace_rows(fits_prev, new_f, ["well_id", "stream"])
        cands = _replace_candidates(previous.candidates, new_c, refit, streams)
    else:
        refit, fits, cands = [], fits_prev, previous.candidates
    timings["fit"] = time.perf_counter() - t
    t = time.perf_counter()
    wells_t, monthly = _deterministic_tables(previous)
    if refit:
        sub = prod[prod["well_id"].isin(refit)]
        sub_fits = fits[fits["well_id"].astype(str).isin(refit)]
        fluids = previous.fluids
        fsum, fmon = _forecast(sub_fits, sub, fluids[fluids["well_id"].astype(str).isin(refit)], dsettings, as_of)
        timings["forecast"] = time.perf_counter() - t
        t = time.perf_counter()
        header = load.wells
        report0 = load.report.iloc[0:0]
        stg = previous.stages
        new_w = _assemble_wells(
            sub, header[header["well_id"].astype(str).isin(refit)], report0,
            fluids[fluids["well_id"].astype(str).isin(refit)], stg[stg["well_id"].astype(str).isin(refit)],
            sub_fits, fsum, _actuals_per_well(sub),
        )
        wells_t = _replace_rows(wells_t, new_w, ["well_id"])
        monthly = _splice_monthly(monthly, fmon, refit)
        timings["assemble"] = time.perf_counter() - t
    wells_t, monthly, prob, notes = _rerun_notes_and_ranges(wells_t, monthly, prod, fits, settings, dsettings,
                                                            as_of, overrides, previous, timings)
    res = _finish(
        load, settings, overrides, prod_all, prod, as_of, load.report.copy(), wells_t, monthly,
        _units_stage_view(previous), previous.stages, fits, cands, previous.fluids, notes, timings, t0,
        _noop_progress, prob,
    )
    res.timings["wells_refitted"] = float(len(refit))
    return res


def rerun_forecast(
    previous: RunResult,
    load: Any,
    *,
    settings: RunSettings,
    overrides: Mapping[str, Any] | None = None,
) -> RunResult:
    """Re-forecast every well from the previous run's fits after a forecast-only change
    (:data:`FORECAST_SETTINGS`: economic limit or its inputs, horizon, terminal decline).

    The fits, fit candidates, fluid typing and stages are kept; the result equals a full
    :func:`run_field` with the same inputs. A changed terminal decline also updates the
    decline of the "no decline" wells' fits, which the decline engine sets to the terminal
    decline (its conservative rule); nothing else in a fit depends on it.

    Raises
    ------
    ValueError
        When a setting that changes the fits differs (:data:`FIT_SETTINGS`: as-of month,
        b max, input units, unit column, workers), naming it; when the overrides differ from
        the ones the previous fits carry (use :func:`rerun_wells`); when the load differs.
    """
    t0 = time.perf_counter()
    diff = _settings_diff(previous.settings, settings)
    refit_needed = [d for d in diff if d not in FORECAST_SETTINGS]
    if refit_needed:
        raise ValueError(
            "these settings change the fits, so the forecast cannot be re-run on the kept fits: "
            f"{', '.join(refit_needed)} (use run_field)"
        )
    _check_reusable(previous)
    _check_same_load(previous, load)
    fits = previous.fits
    for s in ("oil", "gas"):
        ft = _stream_table(fits, s)
        if ft.empty:
            continue
        want = _override_texts(overrides, pd.Index(ft["well_id"].astype(str)), s).to_numpy()
        bad = ft["well_id"].astype(str).to_numpy()[want != ft["override"].fillna("").astype(str).to_numpy()]
        if bad.size:
            raise ValueError(
                "the overrides differ from the ones the previous fits carry for "
                f"{', '.join(sorted(set(bad))[:10])}: use rerun_wells for those wells first"
            )
    prod_all, prod, as_of = _prod_cut(load, settings)
    dsettings = decline_settings(settings)
    timings: dict[str, float] = {}
    if settings.terminal_decline != previous.settings.terminal_decline:
        # the decline engine's conservative rule: "no decline" wells decline at the terminal decline
        flat = fits["status"].fillna("").astype(str).str.startswith("no_decline").to_numpy()
        if flat.any():
            fits = fits.copy()
            di = fits["di"].to_numpy(dtype=float, copy=True)
            di[flat] = dsettings.d_lim_nominal
            fits["di"] = di
    t = time.perf_counter()
    fsummary, fmonthly = _forecast(fits, prod, previous.fluids, dsettings, as_of)
    timings["forecast"] = time.perf_counter() - t
    t = time.perf_counter()
    wells = _assemble_wells(prod, load.wells, load.report, previous.fluids, previous.stages, fits, fsummary,
                            _actuals_per_well(prod))
    monthly = _assemble_monthly(prod, fmonthly, None)
    timings["assemble"] = time.perf_counter() - t
    wells, monthly, prob, notes = _rerun_notes_and_ranges(wells, monthly, prod, fits, settings, dsettings, as_of,
                                                          overrides, previous, timings)
    return _finish(
        load, settings, overrides, prod_all, prod, as_of, load.report.copy(), wells, monthly,
        _units_stage_view(previous), previous.stages, fits, previous.candidates, previous.fluids, notes,
        timings, t0, _noop_progress, prob,
    )
