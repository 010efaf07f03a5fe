"""Time-stepped solution-gas-drive well model and synthetic fields with known answers.

A well drains its own volumetric oil reservoir (or a share of a unit). Its state follows the
material-balance path of :func:`core.material_balance.predict_depletion` (the path depends only
on the recovery factor Np/N), and its rate follows a productivity relation

    q_o = J (kro / (mu_o Bo)) / (kro / (mu_o Bo))_i (p - p_wf),

oil rate proportional to the productivity index, the oil mobility and the drawdown above a
minimum flowing pressure (Darcy's law for pseudo-steady radial inflow, with the productivity
index scaled by the oil mobility below the bubble point as in Fetkovich [1]_ and in the
two-phase inflow reasoning of Vogel [2]_). Because dNp/dt = q_o(Np/N) is autonomous, the time
to reach a recovery factor is a single integral, computed once per fluid/rock set:

    tau(r) = integral_0^r dr' / g(r'),   g = q_o / J  [psi],

and a well with producing days d_k and productivity J_k reaches r_k = tau^-1(sum J_k d_k / N).
That maps calendar time onto the precomputed path, so a 1,000-well field takes a second or two.

Reported volumes carry measurement noise (oil and GOR, lognormal), uptime losses, shut-ins,
an optional workover (productivity step-up) and a slowly rising water cut; the known answers
(``truth``) are computed from the noise-free series.

References
----------
.. [1] M. J. Fetkovich, "The Isochronal Testing of Oil Wells," SPE-4529, 1973.
.. [2] J. V. Vogel, "Inflow Performance Relationships for Solution-Gas Drive Wells,"
   JPT, vol. 20, no. 1, pp. 83-92, 1968.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any

import numpy as np
import pandas as pd

from core.material_balance import DepletionPrediction, PvtTable, predict_depletion
from core.relperm import CoreyGasOil
from core.validation import check_positive, check_range

__all__ = [
    "FluidRock",
    "DepletionCurve",
    "depletion_curve",
    "SyntheticWell",
    "SyntheticField",
    "simulate_well",
    "simulate_gas_well",
    "synthetic_field",
    "MONTHLY_COLUMNS",
    "HEADER_COLUMNS",
    "TRUTH_COLUMNS",
]

MONTHLY_COLUMNS = ("well_id", "month", "oil_bbl", "gas_mcf", "water_bbl", "days_on", "pressure_psia", "unit")
HEADER_COLUMNS = ("well_id", "unit", "api_gravity", "gas_specific_gravity", "reservoir_temp_f",
                  "initial_pressure_psia", "bubble_point_psia")
TRUTH_COLUMNS = ("well_id", "unit", "fluid", "rsi_scf_stb", "bubble_point_psia", "bubble_point_month",
                 "stage2_end_month", "gor_peak_month", "final_stage", "ooip_stb", "sgc",
                 "np_over_n_final", "workover_month", "gor_peak_band_start_month", "gor_peak_band_end_month")


#: Relative width of the "flat top" band reported with the GOR peak truth: the producing
#: months whose noise-free GOR lies within this fraction of the maximum (truth columns
#: ``gor_peak_band_start_month`` / ``gor_peak_band_end_month``).
PEAK_BAND_REL = 0.01

# --------------------------------------------------------------------------------------
# Fluid/rock set and its precomputed depletion curve
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class FluidRock:
    """Everything that fixes a well's material-balance path (hashable, so curves are cached).

    Attributes
    ----------
    api : float
        Stock-tank oil gravity. [°API]
    gamma_g : float
        Gas specific gravity (air = 1). [-]
    t_f : float
        Reservoir temperature. [°F]
    pb_psia : float
        Bubble point pressure. [psia]
    pi_psia : float
        Initial reservoir pressure, at or above ``pb_psia``. [psia]
    p_wf_psia : float
        Minimum flowing bottom-hole pressure, below ``pb_psia``. [psia]
    relperm : CoreyGasOil
        Gas-oil relative permeability set (Sgc, Sorg, Swc, ...).
    cf_1_psi, cw_1_psi : float
        Pore and water compressibility. [1/psi]
    pvt_method : str
        Correlation family passed to ``core.pvt.black_oil_table``.
    """

    api: float = 35.0
    gamma_g: float = 0.75
    t_f: float = 180.0
    pb_psia: float = 2500.0
    pi_psia: float = 3500.0
    p_wf_psia: float = 150.0
    relperm: CoreyGasOil = field(default_factory=CoreyGasOil)
    cf_1_psi: float = 4e-6
    cw_1_psi: float = 3e-6
    pvt_method: str = "standing"

    def __post_init__(self) -> None:
        check_range("api", self.api, 10.0, 60.0, unit="°API")
        check_range("gamma_g", self.gamma_g, 0.55, 1.5)
        check_range("t_f", self.t_f, 60.0, 350.0, unit="°F")
        check_range("pb_psia", self.pb_psia, 300.0, 8000.0, unit="psia")
        check_range("pi_psia", self.pi_psia, self.pb_psia, 15000.0, unit="psia")
        check_range("p_wf_psia", self.p_wf_psia, 14.7, 0.5 * self.pb_psia, unit="psia")


@dataclass(frozen=True, eq=False)
class DepletionCurve:
    """Material-balance path of a fluid/rock set with the deliverability time integral.

    Arrays along the path (decreasing pressure): ``r`` (Np/N), ``p_psia``, ``gp_scf_stb``
    (Gp/N), ``gor_scf_stb`` (instantaneous), ``tau_1_psi`` (the integral of dr / g with
    g = q_o/J in psi; the producing time in days is tau N / J). ``r_bubble``,
    ``r_stage2_end``, ``r_gor_peak`` are the stage boundaries (NaN when not reached).
    """

    fluid: FluidRock
    prediction: DepletionPrediction
    r: np.ndarray
    p_psia: np.ndarray
    gp_scf_stb: np.ndarray
    gor_scf_stb: np.ndarray
    tau_1_psi: np.ndarray
    rsi_scf_stb: float
    r_bubble: float
    r_stage2_end: float
    r_gor_peak: float

    def tau_at(self, r: float) -> float:
        """Deliverability time integral at recovery factor ``r`` (NaN when r is NaN)."""
        if not np.isfinite(r):
            return float("nan")
        return float(np.interp(r, self.r, self.tau_1_psi))


@lru_cache(maxsize=128)
def depletion_curve(fluid: FluidRock) -> DepletionCurve:
    """Precompute (and cache) the depletion path and time integral of ``fluid``.

    The PVT comes from ``core.pvt.black_oil_table`` (Standing by default), the path from
    :func:`core.material_balance.predict_depletion` (Tarner), down to a reservoir pressure
    just above the minimum flowing pressure.
    """
    p_ab = fluid.p_wf_psia + max(10.0, 0.02 * (fluid.pb_psia - fluid.p_wf_psia))
    pvt = PvtTable.from_correlations(api=fluid.api, gamma_g=fluid.gamma_g, t_f=fluid.t_f, pb_psia=fluid.pb_psia,
                                     p_max_psia=fluid.pi_psia, p_min_psia=min(fluid.p_wf_psia, p_ab - 1.0),
                                     method=fluid.pvt_method)
    dp = max(2.0, (fluid.pb_psia - p_ab) / 300.0)
    pred = predict_depletion(pvt, fluid.relperm, pi_psia=fluid.pi_psia, p_abandon_psia=p_ab,
                             cf_1_psi=fluid.cf_1_psi, cw_1_psi=fluid.cw_1_psi, dp_psia=dp, n_steps_above=40)
    t = pred.table
    r = t["np_over_n"].to_numpy()
    p = t["p_psia"].to_numpy()
    mob = t["kro"].to_numpy() / (t["mu_o_cp"].to_numpy() * t["bo_bbl_stb"].to_numpy())
    g = mob / mob[0] * (p - fluid.p_wf_psia)  # q_o / J [psi]
    inv = 1.0 / g
    tau = np.concatenate([[0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(r))])
    nan = float("nan")
    return DepletionCurve(
        fluid=fluid, prediction=pred, r=r, p_psia=p, gp_scf_stb=t["gp_over_n_scf_stb"].to_numpy(),
        gor_scf_stb=t["producing_gor_scf_stb"].to_numpy(), tau_1_psi=tau, rsi_scf_stb=pred.rsi_scf_stb,
        r_bubble=pred.np_over_n_bubble,
        r_stage2_end=nan if pred.np_over_n_stage2_end is None else pred.np_over_n_stage2_end,
        r_gor_peak=nan if pred.np_over_n_gor_peak is None else pred.np_over_n_gor_peak,
    )


# --------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class SyntheticWell:
    """One simulated well: ``monthly`` (loader input columns), ``header`` (dict of the
    well-header fields), ``truth`` (dict of the known answers, see ``TRUTH_COLUMNS``) and
    ``noise_free`` (monthly true oil, gas, GOR, pressure and Np/N)."""

    well_id: str
    monthly: pd.DataFrame
    header: dict[str, Any]
    truth: dict[str, Any]
    noise_free: pd.DataFrame


@dataclass(frozen=True, eq=False)
class SyntheticField:
    """A synthetic field: ``production`` (long monthly table, loader input columns),
    ``wells`` (well header, one row per well) and ``truth`` (one row per well)."""

    production: pd.DataFrame
    wells: pd.DataFrame
    truth: pd.DataFrame


# --------------------------------------------------------------------------------------
# Core of the simulation (arrays; shared by simulate_well and synthetic_field)
# --------------------------------------------------------------------------------------
def _month_index(start_month: Any, n_months: int) -> tuple[np.ndarray, np.ndarray]:
    """Month starts (datetime64[ns]) and their calendar days, for ``n_months`` months."""
    start = np.datetime64(pd.Timestamp(start_month).to_period("M").to_timestamp(), "M")
    m = start + np.arange(n_months)
    days = ((m + 1).astype("datetime64[D]") - m.astype("datetime64[D]")).astype(float)
    return m.astype("datetime64[ns]"), days


def _simulate_arrays(
    curve: DepletionCurve,
    months: np.ndarray,
    dim: np.ndarray,
    *,
    ooip_stb: float,
    productivity_bbl_d_psi: float,
    rng: np.random.Generator,
    gor_noise: float,
    oil_noise: float,
    shut_in_prob: float,
    low_uptime_prob: float,
    workover_month: int | None,
    workover_factor: float,
    survey_every_months: int | None,
    survey_noise_psia: float,
    water_cut_start: float,
    water_cut_rise_per_yr: float,
    j_drift_per_yr: float = 0.0,
) -> dict[str, Any]:
    n = len(months)
    # Uptime: a day or two lost in most months, occasional low-uptime and shut-in months
    lost = np.minimum(rng.poisson(0.8, n), 5).astype(float)
    days = dim - lost
    low = rng.random(n) < low_uptime_prob
    days[low] = np.round(dim[low] * rng.uniform(0.15, 0.6, low.sum()))
    shut = rng.random(n) < shut_in_prob
    # a shut-in sometimes lasts two or three months
    for k in np.flatnonzero(shut):
        shut[k: k + int(rng.integers(1, 4))] = True
    shut[0] = False
    days[shut] = 0.0
    days[0] = np.round(days[0] * rng.uniform(0.3, 1.0))  # first month: on line part-way
    days[0] = max(days[0], 1.0)
    mult = np.ones(n)
    if workover_month is not None and 0 < workover_month < n:
        mult[workover_month:] = workover_factor
    if j_drift_per_yr:
        # slow productivity drift (skin build-up or clean-up): J x exp(drift x years)
        mult = mult * np.exp(j_drift_per_yr * np.arange(n) / 12.0)
    # Effective producing time -> recovery factor along the precomputed path
    s = np.cumsum(productivity_bbl_d_psi * mult * days) / ooip_stb  # [1/psi]
    r_end = np.interp(s, curve.tau_1_psi, curve.r)
    r_start = np.concatenate([[0.0], r_end[:-1]])
    gp_end = np.interp(r_end, curve.r, curve.gp_scf_stb)
    gp_start = np.concatenate([[0.0], gp_end[:-1]])
    oil_true = ooip_stb * (r_end - r_start)
    gas_true_scf = ooip_stb * (gp_end - gp_start)
    with np.errstate(invalid="ignore", divide="ignore"):
        gor_true = np.where(oil_true > 1e-9, gas_true_scf / np.where(oil_true > 1e-9, oil_true, 1.0), np.nan)
    p_mid = np.interp(0.5 * (r_start + r_end), curve.r, curve.p_psia)
    # Reported volumes: multiplicative lognormal noise on oil and on the GOR
    eps_o = np.exp(rng.normal(0.0, oil_noise, n) - 0.5 * oil_noise**2) if oil_noise > 0 else np.ones(n)
    eps_g = np.exp(rng.normal(0.0, gor_noise, n) - 0.5 * gor_noise**2) if gor_noise > 0 else np.ones(n)
    oil = np.where(days > 0, oil_true * eps_o, 0.0)
    gas_mcf = np.where(days > 0, oil * np.nan_to_num(gor_true) * eps_g / 1000.0, 0.0)
    years = np.arange(n) / 12.0
    wc = np.clip(water_cut_start + water_cut_rise_per_yr * years, 0.0, 0.6)
    water = np.where(days > 0, oil * wc / (1.0 - wc), 0.0)
    # Sparse pressure surveys
    pressure = np.full(n, np.nan)
    if survey_every_months:
        first = int(rng.integers(0, survey_every_months))
        idx = np.arange(first, n, survey_every_months)
        pressure[idx] = p_mid[idx] + rng.normal(0.0, survey_noise_psia, idx.size)
        pressure = np.where(np.isfinite(pressure), np.maximum(pressure, 14.7), np.nan)

    # Truth from the noise-free series
    prod = oil_true > 1e-9
    nat = pd.NaT
    rsi = curve.rsi_scf_stb

    def first(mask: np.ndarray) -> int | None:
        k = np.flatnonzero(mask)
        return int(k[0]) if k.size else None

    k_bp = first(r_end > curve.r_bubble + 1e-12)
    k_s2 = k_pk = None
    if k_bp is not None:
        after_bp = np.arange(n) > k_bp
        gor0 = np.where(prod, gor_true, 0.0)
        k_s2 = first(after_bp & prod & (gor0 > rsi * (1.0 + 1e-9)))
    k_b0 = k_b1 = None
    if np.isfinite(curve.r_gor_peak) and r_end[-1] > curve.r_gor_peak and k_s2 is not None:
        g_pk = np.where(prod, gor_true, -np.inf)
        k_pk = int(np.argmax(g_pk))
        # the flat top: the producing months around the peak whose noise-free GOR is within
        # PEAK_BAND_REL of the maximum (the peak month is not identifiable closer than this)
        near = prod & (gor_true >= (1.0 - PEAK_BAND_REL) * g_pk[k_pk])
        k_b0, k_b1 = k_pk, k_pk
        while k_b0 > 0 and (near[k_b0 - 1] or not prod[k_b0 - 1]):
            k_b0 -= 1
        while k_b1 < n - 1 and (near[k_b1 + 1] or not prod[k_b1 + 1]):
            k_b1 += 1
        while not prod[k_b0]:
            k_b0 += 1
        while not prod[k_b1]:
            k_b1 -= 1

    def month_at(k: int | None) -> Any:
        return nat if k is None else pd.Timestamp(months[k])

    bp_month, s2_month, peak_month = month_at(k_bp), month_at(k_s2), month_at(k_pk)
    if bp_month is nat:
        final_stage = 1
    elif s2_month is nat:
        final_stage = 2
    elif peak_month is nat:
        final_stage = 3
    else:
        final_stage = 4
    return {
        "days": days, "oil": oil, "gas_mcf": gas_mcf, "water": water, "pressure": pressure,
        "oil_true": oil_true, "gas_true_mcf": gas_true_scf / 1000.0, "gor_true": gor_true, "p_mid": p_mid,
        "r_end": r_end, "bubble_point_month": bp_month, "stage2_end_month": s2_month,
        "gor_peak_month": peak_month, "final_stage": final_stage,
        "gor_peak_band": (month_at(k_b0), month_at(k_b1)),
    }


def _check_knobs(gor_noise: float, oil_noise: float, shut_in_prob: float, low_uptime_prob: float,
                 workover_factor: float, survey_noise_psia: float, water_cut_start: float,
                 water_cut_rise_per_yr: float) -> None:
    check_range("gor_noise", gor_noise, 0.0, 1.0)
    check_range("oil_noise", oil_noise, 0.0, 1.0)
    check_range("shut_in_prob", shut_in_prob, 0.0, 0.5)
    check_range("low_uptime_prob", low_uptime_prob, 0.0, 0.5)
    check_range("workover_factor", workover_factor, 0.1, 10.0)
    check_range("survey_noise_psia", survey_noise_psia, 0.0, 1000.0, unit="psia")
    check_range("water_cut_start", water_cut_start, 0.0, 0.5)
    check_range("water_cut_rise_per_yr", water_cut_rise_per_yr, 0.0, 0.2, unit="1/yr")


def _simulate_record(well_id: str, *, fluid: FluidRock, start_month: Any, n_months: int, ooip: float, j: float,
                     unit: str, seed: int, workover_month: int | None, **knobs: Any
                     ) -> tuple[dict[str, Any], dict[str, Any], dict[str, Any]]:
    """Arrays, header and truth of one oil well (no DataFrame: the field builder's hot path)."""
    curve = depletion_curve(fluid)
    months, dim = _month_index(start_month, n_months)
    rng = np.random.default_rng(seed)
    a = _simulate_arrays(curve, months, dim, ooip_stb=ooip, productivity_bbl_d_psi=j, rng=rng,
                         workover_month=workover_month, **knobs)
    a["months"] = months
    header = {"well_id": well_id, "unit": unit, "api_gravity": fluid.api, "gas_specific_gravity": fluid.gamma_g,
              "reservoir_temp_f": fluid.t_f, "initial_pressure_psia": fluid.pi_psia,
              "bubble_point_psia": fluid.pb_psia}
    wo = pd.Timestamp(months[workover_month]) if workover_month is not None and 0 < workover_month < n_months else pd.NaT
    truth = {"well_id": well_id, "unit": unit, "fluid": "black_oil", "rsi_scf_stb": curve.rsi_scf_stb,
             "bubble_point_psia": fluid.pb_psia, "bubble_point_month": a["bubble_point_month"],
             "stage2_end_month": a["stage2_end_month"], "gor_peak_month": a["gor_peak_month"],
             "final_stage": a["final_stage"], "ooip_stb": ooip, "sgc": fluid.relperm.sgc,
             "np_over_n_final": float(a["r_end"][-1]), "workover_month": wo,
             "gor_peak_band_start_month": a["gor_peak_band"][0], "gor_peak_band_end_month": a["gor_peak_band"][1]}
    return a, header, truth


def simulate_well(
    well_id: str,
    *,
    start_month: Any,
    n_months: int,
    ooip_stb: float,
    productivity_bbl_d_psi: float,
    fluid: FluidRock | None = None,
    unit: str = "unassigned",
    seed: int = 0,
    gor_noise: float = 0.08,
    oil_noise: float = 0.05,
    shut_in_prob: float = 0.02,
    low_uptime_prob: float = 0.04,
    workover_month: int | None = None,
    workover_factor: float = 1.5,
    survey_every_months: int | None = 12,
    survey_noise_psia: float = 30.0,
    water_cut_start: float = 0.01,
    water_cut_rise_per_yr: float = 0.005,
) -> SyntheticWell:
    """Simulate the monthly history of one solution-gas-drive oil well.

    Parameters
    ----------
    well_id : str
        Well identifier.
    start_month : date-like
        First producing month (normalised to the month start).
    n_months : int
        Months of history, 1 to 1200.
    ooip_stb : float
        Oil initially in place in the well's drainage volume. [STB]
    productivity_bbl_d_psi : float
        Productivity index J at initial conditions. [bbl/d/psi]
    fluid : FluidRock, optional
        Fluid, rock and pressure set; ``FluidRock()`` when omitted.
    unit : str, optional
        Reservoir unit name written into the table.
    seed : int, optional
        Seed of the noise generator (deterministic for a seed).
    gor_noise, oil_noise : float, optional
        Standard deviation of the log of the multiplicative GOR and oil-volume noise. [-]
    shut_in_prob, low_uptime_prob : float, optional
        Monthly probability of a shut-in (1-3 months, days on 0) and of a low-uptime month.
    workover_month : int, optional
        Month index (0-based) from which the productivity index is multiplied by
        ``workover_factor``; None for no workover.
    survey_every_months : int or None, optional
        Pressure survey interval in months (random first month); None for no surveys.
    survey_noise_psia : float, optional
        Standard deviation of the survey pressure error. [psia]
    water_cut_start, water_cut_rise_per_yr : float, optional
        Water cut in the first month and its yearly rise (capped at 0.6). [-], [1/yr]

    Returns
    -------
    SyntheticWell
        ``monthly`` with ``MONTHLY_COLUMNS``, ``header`` with ``HEADER_COLUMNS``, ``truth``
        with ``TRUTH_COLUMNS`` (months as Timestamps, NaT when not reached).

    Notes
    -----
    See the module docstring for the model. Truth: ``bubble_point_month`` is the month during
    which the average reservoir pressure falls below the bubble point; ``stage2_end_month`` the
    first later producing month whose noise-free GOR exceeds Rsi; ``gor_peak_month`` the month
    of the highest noise-free monthly GOR once the path has passed the material-balance GOR
    maximum (NaT otherwise); ``gor_peak_band_start_month`` / ``gor_peak_band_end_month`` the
    first and last producing month of the contiguous band around it whose noise-free GOR is
    within ``PEAK_BAND_REL`` (1 %) of the maximum (the flat top, inside which the month of the
    maximum is not identifiable from noisy data); ``final_stage`` 1-4 at the last month.
    """
    fluid = FluidRock() if fluid is None else fluid
    if not isinstance(fluid, FluidRock):
        raise ValueError("fluid must be a FluidRock")
    n_months = int(check_range("n_months", n_months, 1, 1200))
    ooip = float(check_positive("ooip_stb", ooip_stb, unit="STB"))
    j = float(check_positive("productivity_bbl_d_psi", productivity_bbl_d_psi, unit="bbl/d/psi"))
    _check_knobs(gor_noise, oil_noise, shut_in_prob, low_uptime_prob, workover_factor, survey_noise_psia,
                 water_cut_start, water_cut_rise_per_yr)
    if survey_every_months is not None:
        survey_every_months = int(check_range("survey_every_months", survey_every_months, 1, 600))
    a, header, truth = _simulate_record(
        well_id, fluid=fluid, start_month=start_month, n_months=n_months, ooip=ooip, j=j, unit=unit, seed=seed,
        gor_noise=gor_noise, oil_noise=oil_noise, shut_in_prob=shut_in_prob, low_uptime_prob=low_uptime_prob,
        workover_month=workover_month, workover_factor=workover_factor, survey_every_months=survey_every_months,
        survey_noise_psia=survey_noise_psia, water_cut_start=water_cut_start,
        water_cut_rise_per_yr=water_cut_rise_per_yr)
    months = a["months"]
    monthly = pd.DataFrame({
        "well_id": well_id, "month": months, "oil_bbl": a["oil"], "gas_mcf": a["gas_mcf"],
        "water_bbl": a["water"], "days_on": a["days"], "pressure_psia": a["pressure"], "unit": unit,
    })
    noise_free = pd.DataFrame({
        "month": months, "oil_bbl": a["oil_true"], "gas_mcf": a["gas_true_mcf"], "gor_scf_stb": a["gor_true"],
        "pressure_psia": a["p_mid"], "np_over_n": a["r_end"],
    })
    return SyntheticWell(well_id=well_id, monthly=monthly, header=header, truth=truth, noise_free=noise_free)


def simulate_gas_well(
    well_id: str,
    *,
    start_month: Any,
    n_months: int,
    qi_mcf_d: float,
    di_1_yr: float,
    b: float,
    initial_gor_scf_stb: float,
    gor_rise_per_yr: float = 0.0,
    api: float = 50.0,
    gamma_g: float = 0.75,
    t_f: float = 220.0,
    pi_psia: float = 5000.0,
    unit: str = "unassigned",
    fluid: str = "gas_condensate",
    seed: int = 0,
    noise: float = 0.06,
    survey_every_months: int | None = None,
) -> SyntheticWell:
    """Simulate a gas or gas-condensate well (not a solution-gas-drive oil well).

    Gas rate follows the Arps hyperbolic form q = qi (1 + b Di t)^(-1/b) (Arps 1945, J. J.
    Arps, Trans. AIME 160, 228-247) on producing time; liquid follows from the producing
    GOR, which grows by ``gor_rise_per_yr`` (fraction per year) as liquid drops out in the
    reservoir (retrograde condensation below the dew point). Truth ``final_stage`` is NA
    and ``fluid`` names the fluid type. The header leaves the bubble point blank.

    Parameters are in field units: ``qi_mcf_d`` [Mcf/d], ``di_1_yr`` [1/yr], ``b`` [-],
    ``initial_gor_scf_stb`` [scf/STB], ``api`` [°API], ``t_f`` [°F], ``pi_psia`` [psia].
    """
    n_months = int(check_range("n_months", n_months, 1, 1200))
    qi = float(check_positive("qi_mcf_d", qi_mcf_d, unit="Mcf/d"))
    di = float(check_positive("di_1_yr", di_1_yr, unit="1/yr"))
    b = float(check_range("b", b, 0.0, 2.0))
    gor0 = float(check_range("initial_gor_scf_stb", initial_gor_scf_stb, 2000.0, 1e7, unit="scf/STB"))
    check_range("gor_rise_per_yr", gor_rise_per_yr, 0.0, 2.0, unit="1/yr")
    check_range("noise", noise, 0.0, 1.0)
    months, dim = _month_index(start_month, n_months)
    rng = np.random.default_rng(seed)
    days = dim - np.minimum(rng.poisson(0.8, n_months), 5)
    days[0] = max(1.0, np.round(days[0] * rng.uniform(0.3, 1.0)))
    t_mid = (np.cumsum(days) - 0.5 * days) / 365.25
    q = qi * np.exp(-di * t_mid) if b < 1e-6 else qi * (1.0 + b * di * t_mid) ** (-1.0 / b)
    gas = q * days * np.exp(rng.normal(0.0, noise, n_months))
    gor = gor0 * (1.0 + gor_rise_per_yr * np.arange(n_months) / 12.0)
    oil = gas * 1000.0 / gor * np.exp(rng.normal(0.0, noise, n_months))
    water = oil * 0.02
    pressure = np.full(n_months, np.nan)
    if survey_every_months:
        idx = np.arange(int(rng.integers(0, survey_every_months)), n_months, survey_every_months)
        frac = np.cumsum(gas)[idx] / (qi * 365.25 * 30.0)
        pressure[idx] = np.maximum(pi_psia * (1.0 - np.clip(frac, 0.0, 0.9)), 14.7)
    monthly = pd.DataFrame({"well_id": well_id, "month": months, "oil_bbl": oil, "gas_mcf": gas, "water_bbl": water,
                            "days_on": days, "pressure_psia": pressure, "unit": unit})
    header = {"well_id": well_id, "unit": unit, "api_gravity": api, "gas_specific_gravity": gamma_g,
              "reservoir_temp_f": t_f, "initial_pressure_psia": pi_psia, "bubble_point_psia": np.nan}
    nat = pd.NaT
    truth = {"well_id": well_id, "unit": unit, "fluid": fluid, "rsi_scf_stb": gor0, "bubble_point_psia": np.nan,
             "bubble_point_month": nat, "stage2_end_month": nat, "gor_peak_month": nat, "final_stage": pd.NA,
             "ooip_stb": np.nan, "sgc": np.nan, "np_over_n_final": np.nan, "workover_month": nat,
             "gor_peak_band_start_month": nat, "gor_peak_band_end_month": nat}
    noise_free = pd.DataFrame({"month": months, "oil_bbl": q * days * 1000.0 / gor, "gas_mcf": q * days,
                               "gor_scf_stb": gor, "pressure_psia": np.nan, "np_over_n": np.nan})
    return SyntheticWell(well_id=well_id, monthly=monthly, header=header, truth=truth, noise_free=noise_free)


# --------------------------------------------------------------------------------------
# Synthetic field
# --------------------------------------------------------------------------------------
def _default_fluids() -> tuple[FluidRock, ...]:
    """A small family of fluid/rock sets (Standing PVT), from lean to rich black oil."""
    return (
        FluidRock(api=32.0, gamma_g=0.72, t_f=165.0, pb_psia=1900.0, pi_psia=2600.0, p_wf_psia=120.0,
                  relperm=CoreyGasOil(swc=0.22, sgc=0.04, sorg=0.15)),
        FluidRock(api=36.0, gamma_g=0.78, t_f=185.0, pb_psia=2400.0, pi_psia=3400.0, p_wf_psia=150.0,
                  relperm=CoreyGasOil(swc=0.20, sgc=0.06, sorg=0.15)),
        FluidRock(api=40.0, gamma_g=0.80, t_f=200.0, pb_psia=2900.0, pi_psia=3300.0, p_wf_psia=180.0,
                  relperm=CoreyGasOil(swc=0.18, sgc=0.08, sorg=0.12)),
        FluidRock(api=28.0, gamma_g=0.70, t_f=150.0, pb_psia=1500.0, pi_psia=3000.0, p_wf_psia=100.0,
                  relperm=CoreyGasOil(swc=0.25, sgc=0.03, sorg=0.18)),
    )


def synthetic_field(
    n_wells: int,
    *,
    seed: int,
    end_month: Any = "2026-10-01",
    min_years: float = 2.0,
    max_years: float = 20.0,
    fluids: tuple[FluidRock, ...] | None = None,
    n_units: int = 4,
    gor_noise: tuple[float, float] = (0.05, 0.15),
    oil_noise: float = 0.05,
    shut_in_prob: float = 0.02,
    low_uptime_prob: float = 0.04,
    workover_share: float = 0.15,
    survey_share: float = 0.7,
    stage_weights: tuple[float, float, float, float] = (0.2, 0.25, 0.3, 0.25),
    non_oil_share: float = 0.0,
    j_drift_per_yr: tuple[float, float] = (0.0, 0.0),
) -> SyntheticField:
    """A field of solution-gas-drive oil wells at all four depletion stages, with answers.

    Parameters
    ----------
    n_wells : int
        Number of wells, 1 to 100,000.
    seed : int
        Seed; the same seed gives the same field.
    end_month : date-like, optional
        Last month of every well's history.
    min_years, max_years : float, optional
        Range of history lengths (uniform). [yr]
    fluids : tuple of FluidRock, optional
        Fluid/rock sets to draw from (unit ``k`` uses ``fluids[k % len(fluids)]``);
        ``_default_fluids()`` when omitted.
    n_units : int, optional
        Number of reservoir units (``"U1"`` ...).
    gor_noise : (float, float), optional
        Range of the per-well GOR noise level (log standard deviation). [-]
    oil_noise, shut_in_prob, low_uptime_prob : float, optional
        As in :func:`simulate_well`.
    workover_share, survey_share : float, optional
        Share of wells with a workover, and with pressure surveys (every 6-24 months).
    stage_weights : 4 floats, optional
        Target share of wells ending in stage 1..4. Each well's productivity-to-volume ratio
        J/N is chosen so that its history ends at a drawn point of its depletion path inside
        the drawn stage (the path itself is pure material balance).
    non_oil_share : float, optional
        Share of wells simulated as gas-condensate (initial GOR 4,000-12,000 scf/STB) or
        wet-gas (25,000-90,000 scf/STB) wells by :func:`simulate_gas_well`; their truth has
        ``fluid`` set and ``final_stage`` NA. Default 0 (all solution-gas-drive oil wells).
    j_drift_per_yr : (float, float), optional
        Range of a slow drift of each oil well's productivity index, J x exp(drift x years),
        drawn per well (uniform; skin build-up < 0, clean-up > 0). [1/yr] Default (0, 0): none;
        drawn from its own random stream, so the other wells' draws do not change.

    Returns
    -------
    SyntheticField
        ``production`` (``MONTHLY_COLUMNS``), ``wells`` (``HEADER_COLUMNS``), ``truth``
        (``TRUTH_COLUMNS``).
    """
    n_wells = int(check_range("n_wells", n_wells, 1, 100_000))
    check_range("min_years", min_years, 1.0 / 12.0, 100.0, unit="yr")
    check_range("max_years", max_years, min_years, 100.0, unit="yr")
    n_units = int(check_range("n_units", n_units, 1, 1000))
    w = check_range("stage_weights", stage_weights, 0.0, None)
    if w.shape != (4,) or w.sum() <= 0:
        raise ValueError("stage_weights must be 4 non-negative numbers with a positive sum")
    w = w / w.sum()
    fluids = _default_fluids() if fluids is None else tuple(fluids)
    if not fluids or not all(isinstance(f, FluidRock) for f in fluids):
        raise ValueError("fluids must be a non-empty tuple of FluidRock")
    _check_knobs(gor_noise[1], oil_noise, shut_in_prob, low_uptime_prob, 1.5, 30.0, 0.01, 0.005)
    check_range("gor_noise", gor_noise, 0.0, 1.0)
    end = pd.Timestamp(end_month).to_period("M").to_timestamp()
    check_range("non_oil_share", non_oil_share, 0.0, 1.0)
    rng = np.random.default_rng(seed)
    rng_gas = np.random.default_rng([int(seed), 1])  # own stream: oil wells unchanged by the option
    drift = check_range("j_drift_per_yr", j_drift_per_yr, -0.5, 0.5, unit="1/yr")
    if drift.shape != (2,) or drift[0] > drift[1]:
        raise ValueError("j_drift_per_yr must be (low, high) with low <= high")
    rng_drift = np.random.default_rng([int(seed), 2]) if drift.any() else None
    curves = [depletion_curve(f) for f in fluids]
    ndig = max(3, len(str(n_wells)))

    cols: dict[str, list] = {c: [] for c in MONTHLY_COLUMNS}
    headers, truths = [], []
    for i in range(n_wells):
        well_id = f"SYN-{i + 1:0{ndig}d}"
        u = int(rng.integers(0, n_units))
        unit = f"U{u + 1}"
        curve = curves[u % len(curves)]
        fl = curve.fluid
        n_months = int(rng.integers(int(round(min_years * 12)), int(round(max_years * 12)) + 1))
        start = end - pd.DateOffset(months=n_months - 1)
        if non_oil_share > 0 and rng_gas.random() < non_oil_share:
            wet = rng_gas.random() < 0.4
            gw = simulate_gas_well(
                well_id, start_month=start, n_months=n_months, qi_mcf_d=float(rng_gas.uniform(1500.0, 8000.0)),
                di_1_yr=float(rng_gas.uniform(0.2, 0.6)), b=float(rng_gas.uniform(0.5, 1.1)),
                initial_gor_scf_stb=float(rng_gas.uniform(25000.0, 90000.0) if wet else rng_gas.uniform(4000.0, 12000.0)),
                gor_rise_per_yr=float(rng_gas.uniform(0.0, 0.06)), api=float(rng_gas.uniform(55.0, 65.0) if wet else
                                                                             rng_gas.uniform(45.0, 55.0)),
                gamma_g=float(rng_gas.uniform(0.62, 0.8)), unit=unit, fluid="wet_gas" if wet else "gas_condensate",
                seed=int(rng_gas.integers(0, 2**31 - 1)), survey_every_months=int(rng_gas.integers(12, 37)),
            )
            for c in MONTHLY_COLUMNS:
                cols[c].append(gw.monthly[c].to_numpy())
            headers.append(gw.header)
            truths.append(gw.truth)
            continue
        # target end point on the path: a stage, then a position inside it
        stage = int(rng.choice(4, p=w)) + 1
        bounds = [0.0, curve.r_bubble, curve.r_stage2_end, curve.r_gor_peak, curve.r[-1]]
        bounds = [b if np.isfinite(b) else curve.r[-1] for b in bounds]
        lo, hi = bounds[stage - 1], bounds[stage]
        if stage == 4:
            hi = lo + 0.6 * (hi - lo)
        r_target = lo + rng.uniform(0.15, 0.85) * (hi - lo)
        tau_target = curve.tau_at(r_target)
        exp_days = n_months * 30.4375 * 0.93  # expected producing days before uptime losses
        workover = None
        wo_factor = 1.0
        if rng.random() < workover_share and n_months >= 24:
            workover = int(rng.integers(n_months // 3, n_months - 6))
            wo_factor = float(rng.uniform(1.3, 1.8))
            exp_days = (workover + (n_months - workover) * wo_factor) * 30.4375 * 0.93
        # initial rate 60-1200 bbl/d fixes J; N follows from the target point, kept in a
        # plausible drainage range (then J is re-derived from N)
        q0 = float(np.exp(rng.uniform(np.log(60.0), np.log(1200.0))))
        j = q0 / (fl.pi_psia - fl.p_wf_psia)
        ooip = float(np.clip(j * exp_days / tau_target, 2e5, 8e6))
        j = tau_target * ooip / exp_days
        surveys = int(rng.integers(6, 25)) if rng.random() < survey_share else None
        a, header, truth = _simulate_record(
            well_id, fluid=fl, start_month=start, n_months=n_months, ooip=ooip, j=j, unit=unit,
            seed=int(rng.integers(0, 2**31 - 1)), gor_noise=float(rng.uniform(*gor_noise)),
            oil_noise=oil_noise, shut_in_prob=shut_in_prob, low_uptime_prob=low_uptime_prob,
            workover_month=workover, workover_factor=wo_factor if workover is not None else 1.5,
            survey_every_months=surveys, survey_noise_psia=float(rng.uniform(15.0, 50.0)),
            water_cut_start=float(rng.uniform(0.0, 0.03)), water_cut_rise_per_yr=float(rng.uniform(0.0, 0.012)),
            j_drift_per_yr=0.0 if rng_drift is None else float(rng_drift.uniform(*drift)),
        )
        m = len(a["months"])
        cols["well_id"].append(np.full(m, well_id, dtype=object))
        cols["month"].append(a["months"])
        cols["oil_bbl"].append(a["oil"])
        cols["gas_mcf"].append(a["gas_mcf"])
        cols["water_bbl"].append(a["water"])
        cols["days_on"].append(a["days"])
        cols["pressure_psia"].append(a["pressure"])
        cols["unit"].append(np.full(m, unit, dtype=object))
        headers.append(header)
        truths.append(truth)
    production = pd.DataFrame({c: np.concatenate(v) for c, v in cols.items()})
    production["month"] = production["month"].astype("datetime64[ns]")
    wells = pd.DataFrame(headers, columns=list(HEADER_COLUMNS))
    truth = pd.DataFrame(truths, columns=list(TRUTH_COLUMNS))
    for c in ("bubble_point_month", "stage2_end_month", "gor_peak_month", "workover_month",
              "gor_peak_band_start_month", "gor_peak_band_end_month"):
        truth[c] = pd.to_datetime(truth[c]).astype("datetime64[ns]")
    truth["final_stage"] = truth["final_stage"].astype("Int64")
    return SyntheticField(production=production, wells=wells, truth=truth)
