"""Reservoir-fluid typing from field data (McCain's criteria; DOE heavy-oil classes).

The primary key is the initial producing gas-oil ratio (McCain 1994: "initial
producing GOR is the primary indicator"); stock-tank API gravity and the oil
formation volume factor are confirmations, reported in the evidence text but never
overriding the GOR, except that a low-GOR oil below 22.3 degAPI is heavy oil
(U.S. DOE classes). Two published versions of McCain's GOR limits exist; the
version is a configuration (``criteria=``), see :data:`CRITERIA`.

Only ``black_oil`` and ``volatile_oil`` follow the four solution-gas-drive stages
(:data:`FOUR_STAGE_TYPES`); the stage tracker labels the others as not applicable.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from core.validation import check_range

__all__ = [
    "FLUID_TYPES",
    "FOUR_STAGE_TYPES",
    "CRITERIA",
    "DEFAULT_CRITERIA",
    "GorCriteria",
    "classify_fluid",
    "initial_gor",
    "classify_field",
]

FLUID_TYPES = (
    "bitumen",
    "heavy_oil",
    "black_oil",
    "volatile_oil",
    "gas_condensate",
    "wet_gas",
    "dry_gas",
    "unknown",
)
FOUR_STAGE_TYPES = ("black_oil", "volatile_oil")


@dataclass(frozen=True)
class GorCriteria:
    """Initial-producing-GOR limits of one published version of McCain's field rules.

    All limits in scf/STB. black oil: GOR < ``volatile_min``; volatile oil:
    ``volatile_min`` <= GOR <= ``condensate_min``; retrograde gas condensate:
    ``condensate_min`` < GOR <= ``wet_gas_min``; wet gas: ``wet_gas_min`` < GOR
    <= ``dry_gas_min``; dry gas: above ``dry_gas_min`` or no liquid at all.
    """

    name: str
    source: str
    volatile_min: float
    condensate_min: float
    wet_gas_min: float
    dry_gas_min: float


# Version A: McCain, W. D. Jr., "Heavy Components Control Reservoir Fluid Behavior",
# JPT 46(9), 1994, SPE-28214, table of five reservoir fluids. Limits recalled from
# memory (check-values 3.2 version A, unverified against the paper's table).
MCCAIN_1994 = GorCriteria(
    name="mccain_1994",
    source="McCain 1994, SPE-28214",
    volatile_min=1750.0,
    condensate_min=3200.0,
    wet_gas_min=15000.0,
    dry_gas_min=100000.0,
)
# Version B: McCain, W. D. Jr., The Properties of Petroleum Fluids, 2nd ed., PennWell,
# 1990, ch. 5 (textbook table as recalled; a secondary table gives black oil < 2,000,
# gas condensate > 3,200 and wet gas > 50,000 scf/STB; check-values 3.2 version B).
MCCAIN_1990 = GorCriteria(
    name="mccain_1990",
    source="McCain 1990, The Properties of Petroleum Fluids, ch. 5",
    volatile_min=2000.0,
    condensate_min=3300.0,
    wet_gas_min=50000.0,
    dry_gas_min=100000.0,
)
CRITERIA = {c.name: c for c in (MCCAIN_1994, MCCAIN_1990)}
DEFAULT_CRITERIA = "mccain_1994"

# Stock-tank API confirmations (McCain 1994 / 1990, both versions): black oil < 45,
# volatile oil and gas condensate > 40, wet gas up to 70.
BLACK_OIL_API_MAX = 45.0
VOLATILE_API_MIN = 40.0
WET_GAS_API_MAX = 70.0
# Oil FVF at the bubble point (McCain 1990 table): black oil < 2.0, volatile oil > 2.0 bbl/STB
BO_BLACK_VOLATILE = 2.0

# Heavy oil: U.S. DOE classes (Nehring et al. 1983, as cited in The Leading Edge
# 25(6), 742, 2006): heavy 10.0-22.3 degAPI, extra-heavy < 10.0 degAPI.
HEAVY_API_MAX = 22.3
EXTRA_HEAVY_API_MAX = 10.0
# Natural bitumen: gas-free viscosity at reservoir temperature > 10,000 cP
# (USGS, Meyer & Attanasi 2003; World Energy Council 2007/2010).
BITUMEN_VISCOSITY_CP = 10000.0

# Initial producing GOR from the production table (common practice, no single source):
# median monthly GOR over the first INITIAL_GOR_MONTHS producing months with gas known.
INITIAL_GOR_MONTHS = 6
# fewer producing months than this make the initial GOR "provisional" in the evidence
INITIAL_GOR_MIN_MONTHS = 3


def _fmt(x: float) -> str:
    if math.isinf(x):
        return "infinite"
    return f"{x:,.0f}" if abs(x) >= 100 else f"{x:,.3g}"


def _heavy(api: float, mu: float | None, gor_text: str) -> tuple[str, str]:
    if mu is not None and mu > BITUMEN_VISCOSITY_CP:
        api_txt = "API unknown" if math.isnan(api) else f"API {api:.1f}"
        return "bitumen", (
            f"{gor_text}; dead-oil viscosity {_fmt(mu)} cP > {BITUMEN_VISCOSITY_CP:,.0f} cP "
            f"(USGS natural-bitumen limit), {api_txt} -> bitumen"
        )
    if api < EXTRA_HEAVY_API_MAX:
        visc = (
            f"dead-oil viscosity {_fmt(mu)} cP <= {BITUMEN_VISCOSITY_CP:,.0f} cP"
            if mu is not None
            else f"viscosity unknown (bitumen if gas-free viscosity > {BITUMEN_VISCOSITY_CP:,.0f} cP)"
        )
        return "heavy_oil", (
            f"{gor_text}; API {api:.1f} < {EXTRA_HEAVY_API_MAX:g} (DOE extra-heavy oil), {visc} -> heavy_oil"
        )
    return "heavy_oil", (
        f"{gor_text}; API {api:.1f} in [{EXTRA_HEAVY_API_MAX:g}, {HEAVY_API_MAX:g}) "
        "(DOE heavy-oil class) -> heavy_oil"
    )


def classify_fluid(
    initial_gor_scf_stb: float | None,
    api: float | None = None,
    bo_bbl_stb: float | None = None,
    *,
    criteria: str = DEFAULT_CRITERIA,
    dead_oil_viscosity_cp: float | None = None,
) -> tuple[str, str]:
    """Reservoir-fluid type from initial producing GOR, with API and Bo as confirmations.

    Parameters
    ----------
    initial_gor_scf_stb : float or None
        Initial producing gas-oil ratio, >= 0; ``inf`` means gas with no liquid;
        None or NaN means unknown. [scf/STB]
    api : float, optional
        Stock-tank oil gravity, > 0. [degAPI]
    bo_bbl_stb : float, optional
        Oil formation volume factor at the bubble point, > 0. [bbl/STB]
    criteria : {"mccain_1994", "mccain_1990"}, optional
        Which published version of McCain's GOR limits to use (see
        :data:`CRITERIA`): ``"mccain_1994"`` (default; black oil < 1,750,
        volatile 1,750-3,200, condensate > 3,200, wet gas > 15,000 scf/STB) or
        ``"mccain_1990"`` (black oil < 2,000, volatile 2,000-3,300, condensate
        > 3,300, wet gas > 50,000 scf/STB). Dry gas > 100,000 scf/STB in both.
    dead_oil_viscosity_cp : float, optional
        Gas-free oil viscosity at reservoir temperature, > 0; separates bitumen
        (> 10,000 cP) from heavy oil. [cP]

    Returns
    -------
    fluid_type : str
        One of :data:`FLUID_TYPES`.
    evidence : str
        The numbers used and the rule applied, with its source.

    Notes
    -----
    Order of the rules: (1) GOR unknown: heavy oil / bitumen when API < 22.3,
    else ``unknown``; (2) GOR above the gas limits: dry gas, wet gas, gas
    condensate [1]_, [2]_; (3) GOR in the volatile-oil band: volatile oil;
    (4) GOR below it: heavy oil / bitumen when API < 22.3 (DOE classes [3]_; a
    gas-free viscosity > 10,000 cP is bitumen [4]_), else black oil. API and Bo
    that disagree with the type are named in the evidence, not used to
    override the GOR (McCain: GOR is the primary indicator).

    References
    ----------
    .. [1] W. D. McCain Jr., "Heavy Components Control Reservoir Fluid
       Behavior," JPT, vol. 46, no. 9, pp. 746-750, 1994, SPE-28214.
    .. [2] W. D. McCain Jr., The Properties of Petroleum Fluids, 2nd ed.,
       PennWell, Tulsa, 1990, ch. 5.
    .. [3] R. Nehring et al., 1983, U.S. DOE heavy-oil classes, as cited in
       "Heavy oils: a worldwide overview," The Leading Edge, 25(6), 742, 2006.
    .. [4] R. F. Meyer and E. D. Attanasi, "Heavy Oil and Natural Bitumen -
       Strategic Petroleum Resources," USGS Fact Sheet 70-03, 2003.

    Raises
    ------
    ValueError
        On a negative GOR, API <= 0, Bo <= 0, viscosity <= 0 or an unknown
        ``criteria``.
    """
    if criteria not in CRITERIA:
        raise ValueError(f"criteria must be one of {sorted(CRITERIA)}, got {criteria!r}")
    c = CRITERIA[criteria]
    gor = None if initial_gor_scf_stb is None or np.isnan(initial_gor_scf_stb) else float(initial_gor_scf_stb)
    if gor is not None:
        if gor < 0:
            raise ValueError(f"initial_gor_scf_stb must be in [0, inf] scf/STB, got {gor:g}")
    a = _opt(api, "api", "degAPI")
    bo = _opt(bo_bbl_stb, "bo_bbl_stb", "bbl/STB")
    mu = _opt(dead_oil_viscosity_cp, "dead_oil_viscosity_cp", "cP")

    if gor is None:
        if a is not None and a < HEAVY_API_MAX:
            return _heavy(a, mu, "initial GOR unknown, typed by API alone")
        if mu is not None and mu > BITUMEN_VISCOSITY_CP:
            return _heavy(a if a is not None else float("nan"), mu, "initial GOR unknown")
        api_txt = f"API {a:.1f} >= {HEAVY_API_MAX:g} (not heavy)" if a is not None else "API unknown"
        return "unknown", f"initial GOR unknown (no gas or no oil volumes to form it); {api_txt} -> unknown"

    g = _fmt(gor)
    notes: list[str] = []
    if gor > c.dry_gas_min:
        rule = (
            "gas with no liquid reported"
            if math.isinf(gor)
            else f"initial GOR {g} scf/STB > {c.dry_gas_min:,.0f}"
        )
        return "dry_gas", f"{rule} ({c.source}, dry gas for engineering purposes) -> dry_gas"
    if gor > c.wet_gas_min:
        if a is not None and a > WET_GAS_API_MAX:
            notes.append(f"API {a:.1f} above the wet-gas {WET_GAS_API_MAX:g} limit")
        return "wet_gas", _join(
            f"initial GOR {g} scf/STB in ({c.wet_gas_min:,.0f}, {c.dry_gas_min:,.0f}] ({c.source}) -> wet_gas", notes
        )
    if gor > c.condensate_min:
        if a is not None and a <= VOLATILE_API_MIN:
            notes.append(f"API {a:.1f} is not above the condensate {VOLATILE_API_MIN:g} guide")
        elif a is not None:
            notes.append(f"API {a:.1f} > {VOLATILE_API_MIN:g} consistent")
        return "gas_condensate", _join(
            f"initial GOR {g} scf/STB in ({c.condensate_min:,.0f}, {c.wet_gas_min:,.0f}] ({c.source}) "
            "-> gas_condensate (retrograde gas)",
            notes,
        )
    if gor >= c.volatile_min:
        if a is not None and a <= VOLATILE_API_MIN:
            notes.append(f"API {a:.1f} is not above the volatile-oil {VOLATILE_API_MIN:g} guide")
        elif a is not None:
            notes.append(f"API {a:.1f} > {VOLATILE_API_MIN:g} consistent")
        if bo is not None and bo < BO_BLACK_VOLATILE:
            notes.append(f"Bo {bo:.3f} bbl/STB below the volatile-oil {BO_BLACK_VOLATILE:g} guide")
        return "volatile_oil", _join(
            f"initial GOR {g} scf/STB in [{c.volatile_min:,.0f}, {c.condensate_min:,.0f}] ({c.source}) -> volatile_oil",
            notes,
        )
    # below the volatile-oil limit: an oil; heavy by API (DOE) or viscosity (USGS)
    gor_text = f"initial GOR {g} scf/STB < {c.volatile_min:,.0f} ({c.source})"
    if a is not None and a < HEAVY_API_MAX:
        return _heavy(a, mu, gor_text)
    if mu is not None and mu > BITUMEN_VISCOSITY_CP:
        return _heavy(a if a is not None else float("nan"), mu, gor_text)
    if a is None:
        notes.append("API unknown (heavy oil not excluded)")
    elif a >= BLACK_OIL_API_MAX:
        notes.append(f"API {a:.1f} not below the black-oil {BLACK_OIL_API_MAX:g} guide (check for volatile oil)")
    else:
        notes.append(f"API {a:.1f} in [{HEAVY_API_MAX:g}, {BLACK_OIL_API_MAX:g}) consistent")
    if bo is not None and bo >= BO_BLACK_VOLATILE:
        notes.append(f"Bo {bo:.3f} bbl/STB not below the black-oil {BO_BLACK_VOLATILE:g} guide")
    return "black_oil", _join(f"{gor_text} -> black_oil", notes)


def _opt(v: Any, name: str, unit: str) -> float | None:
    if v is None:
        return None
    x = float(v)
    if math.isnan(x):
        return None
    return float(check_range(name, x, 0.0, None, unit=unit, lo_open=True))


def _join(main: str, notes: list[str]) -> str:
    return main if not notes else main + "; " + "; ".join(notes)


def initial_gor(production: pd.DataFrame, *, n_months: int = INITIAL_GOR_MONTHS) -> pd.DataFrame:
    """Initial producing GOR per well from the tidy monthly table.

    Parameters
    ----------
    production : pandas.DataFrame
        Tidy monthly table (``well_id``, ``month``, ``oil_bbl``, ``gas_mcf``; see
        DEVELOPERS.md). Not modified.
    n_months : int, optional
        Number of early producing months to use, >= 1 (default 6).

    Returns
    -------
    pandas.DataFrame
        One row per well (sorted by ``well_id``): ``well_id``,
        ``initial_gor_scf_stb`` (NaN when unknown, ``inf`` when gas but no oil),
        ``gor_months_used``, ``gor_first_month``, ``oil_months``, ``gas_known``
        (bool: any gas volume reported), ``producing_months``.

    Notes
    -----
    Common practice, no single source: the first ``n_months`` producing months
    (oil > 0 or gas > 0) with the gas volume known are taken; the monthly GOR
    1000 gas_mcf / oil_bbl is formed (gas with no oil is an infinite GOR) and
    the median taken. Early months are used because above the bubble point the
    producing GOR equals the initial solution GOR; the median resists a single
    allocation or test-month spike. Months with both oil and gas zero
    (shut in) and months with the oil or gas volume unknown (NaN or negative)
    are skipped.
    """
    check_range("n_months", n_months, 1, None)
    cols = ["well_id", "initial_gor_scf_stb", "gor_months_used", "gor_first_month",
            "oil_months", "gas_known", "producing_months"]
    if production is None or len(production) == 0:
        return pd.DataFrame({c: pd.Series(dtype=float) for c in cols}).astype(
            {"well_id": object, "gor_first_month": "datetime64[ns]", "gas_known": bool}
        )
    df = production[["well_id", "month", "oil_bbl"]].copy()
    df["gas_mcf"] = production["gas_mcf"] if "gas_mcf" in production.columns else np.nan
    df = df.sort_values(["well_id", "month"], kind="stable")
    oil = df["oil_bbl"].to_numpy(float)
    gas = df["gas_mcf"].to_numpy(float)
    oil_known = np.isfinite(oil) & (oil >= 0)  # a missing or negative oil volume is unknown
    oil = np.where(oil_known, oil, 0.0)
    gas_known = np.isfinite(gas) & (gas >= 0)
    gpos = gas_known & (gas > 0)
    producing = (oil > 0) | gpos
    with np.errstate(divide="ignore", invalid="ignore"):
        gor = np.where(oil > 0, 1000.0 * np.where(gas_known, gas, np.nan) / np.where(oil > 0, oil, 1.0), np.inf)
    df["_gor"] = gor
    df["_use"] = producing & gas_known & oil_known
    df["_prod"] = producing
    df["_oilm"] = oil > 0
    df["_gask"] = gas_known
    base = df.groupby("well_id", sort=True).agg(
        producing_months=("_prod", "sum"), oil_months=("_oilm", "sum"), gas_known=("_gask", "any")
    )
    used = df[df["_use"]]
    used = used[used.groupby("well_id").cumcount() < n_months]
    agg = used.groupby("well_id", sort=True).agg(
        initial_gor_scf_stb=("_gor", "median"), gor_months_used=("_gor", "size"), gor_first_month=("month", "min")
    )
    out = base.join(agg, how="left").reset_index()
    out["gor_months_used"] = out["gor_months_used"].fillna(0).astype(int)
    out["producing_months"] = out["producing_months"].astype(int)
    out["oil_months"] = out["oil_months"].astype(int)
    out["gas_known"] = out["gas_known"].astype(bool)
    return out[cols]


def classify_field(
    production: pd.DataFrame,
    wells: pd.DataFrame | None = None,
    *,
    criteria: str = DEFAULT_CRITERIA,
    n_months: int = INITIAL_GOR_MONTHS,
) -> pd.DataFrame:
    """Fluid type per well, with the evidence.

    Parameters
    ----------
    production : pandas.DataFrame
        Tidy monthly table (DEVELOPERS.md contract). Not modified.
    wells : pandas.DataFrame, optional
        Well header; ``api_gravity`` is used when present (NaN = unknown), and
        optional columns ``bo_bbl_stb`` and ``dead_oil_viscosity_cp`` when a file
        supplies them. Wells missing from the header are typed on GOR alone.
    criteria : {"mccain_1994", "mccain_1990"}, optional
        Version of McCain's GOR limits, see :func:`classify_fluid`.
    n_months : int, optional
        Early producing months for the initial GOR, see :func:`initial_gor`.

    Returns
    -------
    pandas.DataFrame
        One row per well of ``production`` (sorted by ``well_id``):
        ``well_id``, ``fluid_type``, ``initial_gor_scf_stb``, ``fluid_evidence``.
        ``attrs["criteria"]`` names the GOR version used.

    Notes
    -----
    The initial GOR comes from :func:`initial_gor`; the type from
    :func:`classify_fluid`. A well with no gas volumes is typed by API alone
    (heavy oil) or ``unknown``; a well with gas but no oil in its early months
    has an infinite GOR and is dry gas. Bad values in the header (negative API
    and the like) are ignored and named in the evidence; this function never
    raises on data.
    """
    if criteria not in CRITERIA:
        raise ValueError(f"criteria must be one of {sorted(CRITERIA)}, got {criteria!r}")
    g = initial_gor(production, n_months=n_months)
    hdr = _header_columns(wells)
    # join on the text form of the id so a header read with another dtype still matches
    hdr = hdr.assign(_key=hdr["well_id"].astype(str)).drop(columns="well_id")
    g = g.assign(_key=g["well_id"].astype(str)).merge(hdr, on="_key", how="left").drop(columns="_key")
    types, evidence = [], []
    for row in g.itertuples(index=False):
        t, e = _classify_row(row, criteria, n_months)
        types.append(t)
        evidence.append(e)
    out = pd.DataFrame(
        {
            "well_id": g["well_id"].astype(object),
            "fluid_type": pd.Series(types, dtype=object),
            "initial_gor_scf_stb": g["initial_gor_scf_stb"].astype(float),
            "fluid_evidence": pd.Series(evidence, dtype=object),
        }
    )
    out.attrs["criteria"] = criteria
    return out


def _header_columns(wells: pd.DataFrame | None) -> pd.DataFrame:
    cols = {"api_gravity": "hdr_api", "bo_bbl_stb": "hdr_bo", "dead_oil_viscosity_cp": "hdr_mu"}
    if wells is None or len(wells) == 0 or "well_id" not in wells.columns:
        return pd.DataFrame({"well_id": pd.Series(dtype=object), **{v: pd.Series(dtype=float) for v in cols.values()}})
    w = wells.drop_duplicates("well_id")
    h = w[["well_id"]].copy()
    for src, dst in cols.items():
        h[dst] = pd.to_numeric(w[src], errors="coerce") if src in w.columns else np.nan
    return h


def _classify_row(row: Any, criteria: str, n_months: int) -> tuple[str, str]:
    bad: list[str] = []

    def clean(v: Any, name: str) -> float | None:
        if v is None or not np.isfinite(v):
            return None
        if v <= 0:
            bad.append(f"{name} {v:g} ignored (must be > 0)")
            return None
        return float(v)

    api, bo, mu = clean(row.hdr_api, "API"), clean(row.hdr_bo, "Bo"), clean(row.hdr_mu, "viscosity")
    gor = row.initial_gor_scf_stb
    gor = None if not (isinstance(gor, float) and not math.isnan(gor)) else gor
    if row.producing_months == 0:
        prefix = "no producing months (oil and gas zero or missing)"
        t, e = classify_fluid(None, api, bo, criteria=criteria, dead_oil_viscosity_cp=mu)
        return t, _join(f"{prefix}; {e}", bad)
    if not row.gas_known:
        prefix = "no gas volumes reported, so no GOR"
        t, e = classify_fluid(None, api, bo, criteria=criteria, dead_oil_viscosity_cp=mu)
        return t, _join(f"{prefix}; {e}", bad)
    n = int(row.gor_months_used)
    if gor is None:  # gas known somewhere, but not in any producing month
        t, e = classify_fluid(None, api, bo, criteria=criteria, dead_oil_viscosity_cp=mu)
        return t, _join(f"gas volume unknown in every producing month; {e}", bad)
    basis = f"median of {n} early producing month{'s' if n != 1 else ''} from {row.gor_first_month:%Y-%m}"
    if math.isinf(gor):
        basis += ", gas with no oil" if row.oil_months == 0 else ", mostly gas with no oil"
    if n < min(INITIAL_GOR_MIN_MONTHS, n_months):
        basis += f"; provisional: fewer than {INITIAL_GOR_MIN_MONTHS} months"
    t, e = classify_fluid(gor, api, bo, criteria=criteria, dead_oil_viscosity_cp=mu)
    return t, _join(f"{e} [GOR: {basis}]", bad)
