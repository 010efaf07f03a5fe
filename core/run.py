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
        try:
            check_range("b_max", self.b_max, 0.0, 2.0, lo_open=True)
            check_range("terminal_decline", self.terminal_decline, 0.0, 1.0, unit="1/yr (effective annual)", lo_open=True, hi_open=True)
            check_range("horizon_years", self.horizon_years, 0.0, 200.0, unit="yr", lo_open=True)
            check_range("wi", self.wi, 0.0, 1.0, lo_open=True)
            check_range("severance_tax", self.severance_tax, 0.0, 1.0, hi_open=True)
            if self.workers is not None:
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
