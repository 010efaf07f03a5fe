"""Economic limit rate of a producing well.

The economic limit is the oil rate at which the operator's share of net revenue just
pays its share of the lease operating cost. Standard form used in reserves practice
(common practice; no single source):

    NRI  = WI (1 - R)                                   (net revenue interest)
    q_EL = WI * OPEX / (P_eff * NRI * (1 - tx))         [bbl/month]
         = OPEX / (P_eff (1 - R)(1 - tx))               (WI cancels)
    P_eff = P_oil + GOR/1000 * P_gas * shrink            [$/bbl], gas revenue credited
    daily rate = q_EL / 30.4375 d                        [bbl/d]

The monthly operating cost here is the gross (8/8ths) lease operating cost.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from core.validation import check_range

DAYS_PER_MONTH = 365.25 / 12.0  # 30.4375 d, mean calendar month (DEVELOPERS.md: 1 yr = 365.25 d)


@dataclass(frozen=True)
class EconomicInputs:
    """Inputs of the economic-limit formula (all money in one currency, e.g. $).

    oil_price_per_bbl : oil price. [$/bbl]
    opex_per_month : gross (8/8ths) lease operating cost per well and month. [$/month]
    royalty : royalty plus overriding royalty fraction, [0, 1). [-]
    working_interest : working interest fraction, (0, 1]. [-]
    net_revenue_interest : NRI, (0, 1]; None -> WI (1 - royalty). [-]
    severance_tax : severance / production tax fraction of revenue, [0, 1). [-]
    gas_price_per_mcf : gas price credited per Mcf sold, 0 for no gas credit. [$/Mcf]
    gas_shrink : sales gas per produced gas (shrink), (0, 1]. [-]
    """

    oil_price_per_bbl: float
    opex_per_month: float
    royalty: float = 0.125
    working_interest: float = 1.0
    net_revenue_interest: float | None = None
    severance_tax: float = 0.0
    gas_price_per_mcf: float = 0.0
    gas_shrink: float = 1.0


def economic_limit_rate(
    *,
    oil_price_per_bbl: ArrayLike,
    opex_per_month: ArrayLike,
    royalty: ArrayLike = 0.125,
    working_interest: ArrayLike = 1.0,
    net_revenue_interest: ArrayLike | None = None,
    severance_tax: ArrayLike = 0.0,
    gor_scf_stb: ArrayLike = 0.0,
    gas_price_per_mcf: ArrayLike = 0.0,
    gas_shrink: ArrayLike = 1.0,
) -> np.ndarray:
    """Economic-limit oil rate per calendar day.

    Parameters
    ----------
    oil_price_per_bbl : array_like
        Oil price, > 0. [$/bbl]
    opex_per_month : array_like
        Gross (8/8ths) lease operating cost, >= 0. [$/month]
    royalty : array_like
        Royalty (plus overriding royalty) fraction, [0, 1). [-]
    working_interest : array_like
        Working interest, (0, 1]. [-]
    net_revenue_interest : array_like, optional
        Net revenue interest, (0, 1]; default WI (1 - royalty). [-]
    severance_tax : array_like
        Severance / production tax fraction, [0, 1). [-]
    gor_scf_stb : array_like
        Producing GOR used to credit gas revenue per barrel. [scf/STB]
    gas_price_per_mcf : array_like
        Gas price; 0 credits no gas revenue. [$/Mcf]
    gas_shrink : array_like
        Sales gas per produced gas, (0, 1]. [-]

    Returns
    -------
    q_el : ndarray
        Economic-limit oil rate. [bbl/d] (calendar-day rate; bbl/month / 30.4375 d)

    Notes
    -----
    q_EL = WI OPEX / (P_eff NRI (1 - tx)) bbl/month, P_eff = P + GOR/1000 P_gas shrink
    (standard reserves-practice form, common practice).
    """
    p = check_range("oil_price_per_bbl", oil_price_per_bbl, 0.0, None, unit="$/bbl", lo_open=True)
    opex = check_range("opex_per_month", opex_per_month, 0.0, None, unit="$/month")
    r = check_range("royalty", royalty, 0.0, 1.0, hi_open=True)
    wi = check_range("working_interest", working_interest, 0.0, 1.0, lo_open=True)
    if net_revenue_interest is None:
        nri = wi * (1.0 - r)
    else:
        nri = check_range("net_revenue_interest", net_revenue_interest, 0.0, 1.0, lo_open=True)
    tx = check_range("severance_tax", severance_tax, 0.0, 1.0, hi_open=True)
    gor = check_range("gor_scf_stb", gor_scf_stb, 0.0, None, unit="scf/STB")
    pg = check_range("gas_price_per_mcf", gas_price_per_mcf, 0.0, None, unit="$/Mcf")
    shrink = check_range("gas_shrink", gas_shrink, 0.0, 1.0, lo_open=True)
    p_eff = p + gor / 1000.0 * pg * shrink
    q_month = wi * opex / (p_eff * nri * (1.0 - tx))
    return q_month / DAYS_PER_MONTH


def economic_limit_from_inputs(econ: EconomicInputs, *, gor_scf_stb: ArrayLike = 0.0) -> np.ndarray:
    """:func:`economic_limit_rate` from an :class:`EconomicInputs`. [bbl/d]"""
    return economic_limit_rate(
        oil_price_per_bbl=econ.oil_price_per_bbl,
        opex_per_month=econ.opex_per_month,
        royalty=econ.royalty,
        working_interest=econ.working_interest,
        net_revenue_interest=econ.net_revenue_interest,
        severance_tax=econ.severance_tax,
        gor_scf_stb=gor_scf_stb,
        gas_price_per_mcf=econ.gas_price_per_mcf,
        gas_shrink=econ.gas_shrink,
    )
