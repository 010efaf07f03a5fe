"""Arps decline curves: closed forms, decline conversions and a batched fitting engine.

Units used throughout this module
---------------------------------
* ``t``: time since the start of the decline segment. [yr] (1 yr = 365.25 d)
* ``qi``, ``q``: rates per producing day. [bbl/d] for oil, [Mcf/d] for gas
* ``di``, ``d_lim``, ``D(t)``: nominal (instantaneous, logarithmic) declines. [1/yr]
* ``b``: Arps b-factor. [-]
* cumulative volumes: [bbl] for oil ([Mcf] for gas), i.e. the integral of the daily
  rate over years multiplied by 365.25 d/yr.

Every closed form broadcasts over arrays of ``t`` *and* arrays of parameters, so one call
evaluates many wells at once (e.g. ``t`` of shape ``(n_wells, n_months)`` and ``qi`` of
shape ``(n_wells, 1)``).

References
----------
.. [1] J. J. Arps, "Analysis of Decline Curves," Trans. AIME, vol. 160, pp. 228-247, 1945.
.. [2] Society of Petroleum Evaluation Engineers, Recommended Evaluation Practice No. 6,
   decline curve analysis (nominal, tangent-effective and secant-effective declines).
.. [3] S. Robertson, "Generalized Hyperbolic Equation," SPE-18731, 1988 (hyperbolic
   decline switched to a terminal exponential decline).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from core.validation import check_range

DAYS_PER_YEAR = 365.25  # d/yr, DEVELOPERS.md convention (Julian year)
DAYS_PER_MONTH = DAYS_PER_YEAR / 12.0  # 30.4375 d, mean calendar month

# Below these distances the exact expressions lose digits (0/0 or cancellation); the
# series expansions used instead are accurate to ~1e-12 relative there [common practice].
_SERIES_EPS = 1e-6

MODEL_NAMES = ("exponential", "harmonic", "hyperbolic")


# --------------------------------------------------------------------------------------
# numerically safe helpers
# --------------------------------------------------------------------------------------
def _log1p_over(b: np.ndarray, x: np.ndarray) -> np.ndarray:
    """log(1 + b x) / b, with the limit x at b = 0 (series for |b x| small)."""
    bx = b * x
    small = np.abs(bx) < _SERIES_EPS
    b_safe = np.where(small, 1.0, b)
    exact = np.log1p(np.where(small, 0.0, bx)) / b_safe
    # log1p(y)/b = x (1 - y/2 + y^2/3 - ...), y = b x
    series = x * (1.0 - bx / 2.0 + bx * bx / 3.0)
    return np.where(small, series, exact)


def _expm1_over(c: np.ndarray, y: np.ndarray) -> np.ndarray:
    """(exp(c y) - 1) / c, with the limit y at c = 0 (series for |c y| small)."""
    cy = c * y
    small = np.abs(cy) < _SERIES_EPS
    c_safe = np.where(small, 1.0, c)
    exact = np.expm1(np.where(small, 0.0, cy)) / c_safe
    series = y * (1.0 + cy / 2.0 + cy * cy / 6.0)
    return np.where(small, series, exact)


def _params(qi: ArrayLike, di: ArrayLike, b: ArrayLike) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    qi_a = check_range("qi", qi, 0.0, None, unit="bbl/d", lo_open=True)
    di_a = check_range("di", di, 0.0, None, unit="1/yr", lo_open=True)
    b_a = check_range("b", b, 0.0, 2.0 + 1e-12)
    return qi_a, di_a, b_a


def _time(t: ArrayLike) -> np.ndarray:
    return check_range("t", t, 0.0, None, unit="yr")


# --------------------------------------------------------------------------------------
# Arps closed forms
# --------------------------------------------------------------------------------------
def arps_rate(t: ArrayLike, qi: ArrayLike, di: ArrayLike, b: ArrayLike) -> np.ndarray:
    """Rate of an Arps decline at time ``t``.

    Parameters
    ----------
    t : array_like
        Time since the decline started. [yr]
    qi : array_like
        Rate at ``t = 0``. [bbl/d] or [Mcf/d]
    di : array_like
        Initial nominal decline. [1/yr]
    b : array_like
        Arps b-factor, 0 <= b <= 2; 0 is exponential, 1 harmonic. [-]

    Returns
    -------
    q : ndarray
        Rate at ``t`` (arguments broadcast), unit of ``qi``.

    Raises
    ------
    ValueError
        If ``t`` is negative, ``qi`` or ``di`` not positive or ``b`` outside [0, 2].

    Notes
    -----
    q = qi (1 + b di t)^(-1/b) [1]_ (Arps 1945, hyperbolic equation); written as
    qi exp(-log(1 + b di t)/b), whose b -> 0 limit is qi exp(-di t) (exponential).
    """
    t_a = _time(t)
    qi_a, di_a, b_a = _params(qi, di, b)
    return qi_a * np.exp(-_log1p_over(b_a, di_a * t_a))


def arps_cumulative(t: ArrayLike, qi: ArrayLike, di: ArrayLike, b: ArrayLike) -> np.ndarray:
    """Cumulative volume of an Arps decline from 0 to ``t``.

    Parameters are as in :func:`arps_rate`.

    Returns
    -------
    np_ : ndarray
        Cumulative volume. [bbl] for a rate in bbl/d ([Mcf] for Mcf/d); the integral of
        the rate over ``t`` in years times 365.25 d/yr.

    Notes
    -----
    Np = qi^b / ((1 - b) di) (qi^(1-b) - q^(1-b)) [1]_; exponential (qi - q)/di and
    harmonic (qi/di) ln(qi/q) are its limits. Evaluated as
    (qi/di) * (1 - exp(-(1-b) L)) / (1 - b) with L = log(1 + b di t)/b, using a series
    when (1 - b) L is small, so b near 0 and near 1 are exact to rounding.
    """
    t_a = _time(t)
    qi_a, di_a, b_a = _params(qi, di, b)
    return _cum_unchecked(t_a, qi_a, di_a, b_a)


def _cum_unchecked(t, qi, di, b):
    big_l = _log1p_over(b, di * t)
    # (1 - exp(-(1-b) L))/(1-b) = (exp(c L) - 1)/c with c = -(1-b)
    frac = _expm1_over(-(1.0 - b), big_l)
    return qi / di * frac * DAYS_PER_YEAR


def arps_time_to_rate(q: ArrayLike, qi: ArrayLike, di: ArrayLike, b: ArrayLike) -> np.ndarray:
    """Time at which an Arps decline reaches the rate ``q``.

    Parameters
    ----------
    q : array_like
        Target rate, 0 < q. [bbl/d] or [Mcf/d]
    qi, di, b : array_like
        As in :func:`arps_rate`.

    Returns
    -------
    t : ndarray
        Time from the start of the decline. [yr] 0 where ``q >= qi`` (already reached).

    Notes
    -----
    t = ((qi/q)^b - 1)/(b di) [1]_, evaluated as expm1(b ln(qi/q))/(b di); its b -> 0
    limit is ln(qi/q)/di.
    """
    q_a = check_range("q", q, 0.0, None, unit="bbl/d", lo_open=True)
    qi_a, di_a, b_a = _params(qi, di, b)
    return _time_unchecked(q_a, qi_a, di_a, b_a)


def _time_unchecked(q, qi, di, b):
    ln_ratio = np.maximum(np.log(qi / q), 0.0)
    return _expm1_over(b, ln_ratio) / di


def arps_decline(t: ArrayLike, di: ArrayLike, b: ArrayLike) -> np.ndarray:
    """Instantaneous nominal decline D(t) = -(dq/dt)/q of an Arps decline. [1/yr]

    Notes
    -----
    D(t) = di / (1 + b di t) [1]_ (loss-ratio definition).
    """
    t_a = _time(t)
    di_a = check_range("di", di, 0.0, None, unit="1/yr", lo_open=True)
    b_a = check_range("b", b, 0.0, 2.0 + 1e-12)
    return di_a / (1.0 + b_a * di_a * t_a)


# --------------------------------------------------------------------------------------
# modified hyperbolic: hyperbolic until D(t) falls to d_lim, exponential at d_lim after
# --------------------------------------------------------------------------------------
def switch_time(di: ArrayLike, b: ArrayLike, d_lim: ArrayLike) -> np.ndarray:
    """Time at which the hyperbolic decline D(t) falls to the terminal decline ``d_lim``.

    Returns
    -------
    t_sw : ndarray
        t_sw = (di/d_lim - 1)/(b di) [3]_; 0 when ``di <= d_lim`` (the terminal decline
        applies from the start), +inf when ``b = 0`` and ``di > d_lim`` (never). [yr]
    """
    di_a = np.asarray(di, dtype=float)
    b_a = np.asarray(b, dtype=float)
    dl = np.asarray(d_lim, dtype=float)
    num = np.maximum(di_a / dl - 1.0, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        t_sw = np.where(num <= 0.0, 0.0, np.where(b_a > 0.0, num / np.where(b_a > 0, b_a * di_a, 1.0), np.inf))
    return t_sw


def _mh_parts(t, qi, di, b, d_lim):
    t_sw = switch_time(di, b, d_lim)
    t_sw_f = np.where(np.isfinite(t_sw), t_sw, 0.0)
    q_sw = qi * np.exp(-_log1p_over(b, di * t_sw_f))
    np_sw = _cum_unchecked(t_sw_f, qi, di, b)
    return t_sw, t_sw_f, q_sw, np_sw


def modified_hyperbolic_rate(
    t: ArrayLike, qi: ArrayLike, di: ArrayLike, b: ArrayLike, d_lim: ArrayLike
) -> np.ndarray:
    """Rate of a hyperbolic decline switched to an exponential at the terminal decline.

    Parameters
    ----------
    t, qi, di, b : array_like
        As in :func:`arps_rate`. [yr], [bbl/d], [1/yr], [-]
    d_lim : array_like
        Terminal (limiting) nominal decline, > 0. [1/yr] (convert an effective terminal
        decline with :func:`nominal_from_tangent_effective`).

    Returns
    -------
    q : ndarray
        q = Arps rate for t <= t_sw; q_sw exp(-d_lim (t - t_sw)) after [3]_. [bbl/d]
    """
    t_a = _time(t)
    qi_a, di_a, b_a = _params(qi, di, b)
    dl = check_range("d_lim", d_lim, 0.0, None, unit="1/yr", lo_open=True)
    return _mh_rate_unchecked(t_a, qi_a, di_a, b_a, dl)


def _mh_rate_unchecked(t, qi, di, b, dl):
    t_sw, t_sw_f, q_sw, _ = _mh_parts(t, qi, di, b, dl)
    hyp = qi * np.exp(-_log1p_over(b, di * t))
    tail = q_sw * np.exp(-dl * np.maximum(t - t_sw_f, 0.0))
    return np.where(t <= t_sw, hyp, tail)


def modified_hyperbolic_cumulative(
    t: ArrayLike, qi: ArrayLike, di: ArrayLike, b: ArrayLike, d_lim: ArrayLike
) -> np.ndarray:
    """Cumulative volume of the modified hyperbolic decline from 0 to ``t``. [bbl]

    Notes
    -----
    Np = Np_hyp(t) for t <= t_sw; Np_hyp(t_sw) + (q_sw - q)/d_lim after [3]_ (times
    365.25 d/yr for barrels).
    """
    t_a = _time(t)
    qi_a, di_a, b_a = _params(qi, di, b)
    dl = check_range("d_lim", d_lim, 0.0, None, unit="1/yr", lo_open=True)
    return _mh_cum_unchecked(t_a, qi_a, di_a, b_a, dl)


def _mh_cum_unchecked(t, qi, di, b, dl):
    t_sw, t_sw_f, q_sw, np_sw = _mh_parts(t, qi, di, b, dl)
    hyp = _cum_unchecked(t, qi, di, b)
    dt = np.maximum(t - t_sw_f, 0.0)
    # (q_sw - q)/d_lim = q_sw (1 - exp(-d_lim dt))/d_lim
    tail = np_sw + q_sw * (-np.expm1(-dl * dt)) / dl * DAYS_PER_YEAR
    return np.where(t <= t_sw, hyp, tail)


def modified_hyperbolic_time_to_rate(
    q: ArrayLike, qi: ArrayLike, di: ArrayLike, b: ArrayLike, d_lim: ArrayLike
) -> np.ndarray:
    """Time at which the modified hyperbolic decline reaches the rate ``q``. [yr]"""
    q_a = check_range("q", q, 0.0, None, unit="bbl/d", lo_open=True)
    qi_a, di_a, b_a = _params(qi, di, b)
    dl = check_range("d_lim", d_lim, 0.0, None, unit="1/yr", lo_open=True)
    return _mh_time_unchecked(q_a, qi_a, di_a, b_a, dl)


def _mh_time_unchecked(q, qi, di, b, dl):
    t_sw, t_sw_f, q_sw, _ = _mh_parts(np.zeros(1), qi, di, b, dl)
    t_hyp = _time_unchecked(q, qi, di, b)
    t_tail = t_sw_f + np.maximum(np.log(q_sw / q), 0.0) / dl
    return np.where(q >= q_sw, t_hyp, t_tail)


def modified_hyperbolic_decline(t: ArrayLike, di: ArrayLike, b: ArrayLike, d_lim: ArrayLike) -> np.ndarray:
    """Instantaneous nominal decline of the modified hyperbolic: max(D_arps(t), d_lim). [1/yr]"""
    t_a = _time(t)
    di_a = check_range("di", di, 0.0, None, unit="1/yr", lo_open=True)
    b_a = check_range("b", b, 0.0, 2.0 + 1e-12)
    dl = check_range("d_lim", d_lim, 0.0, None, unit="1/yr", lo_open=True)
    return np.maximum(di_a / (1.0 + b_a * di_a * t_a), dl)


# --------------------------------------------------------------------------------------
# decline conversions (SPEE REP 6 convention)
# --------------------------------------------------------------------------------------
def tangent_effective_from_nominal(d: ArrayLike) -> np.ndarray:
    """Tangent effective decline over one period from a nominal decline.

    De = 1 - exp(-D) [2]_ (the exponential-equivalent drop over one period along the
    tangent at t = 0). ``d`` in 1/period (1/yr gives an annual effective decline). [-]
    """
    d_a = check_range("d", d, 0.0, None, unit="1/yr")
    return -np.expm1(-d_a)


def nominal_from_tangent_effective(de: ArrayLike) -> np.ndarray:
    """Nominal decline from a tangent effective decline: D = -ln(1 - De) [2]_. [1/yr]"""
    de_a = check_range("de", de, 0.0, 1.0, hi_open=True)
    return -np.log1p(-de_a)


def secant_effective_from_nominal(d: ArrayLike, b: ArrayLike) -> np.ndarray:
    """Secant effective decline over the first period of a hyperbolic decline.

    De_sec = 1 - (1 + b D)^(-1/b) [2]_, the actual fractional drop in rate over the first
    period; equals the tangent effective decline at b = 0. [-]
    """
    d_a = check_range("d", d, 0.0, None, unit="1/yr")
    b_a = check_range("b", b, 0.0, 2.0 + 1e-12)
    return -np.expm1(-_log1p_over(b_a, d_a))


def nominal_from_secant_effective(de: ArrayLike, b: ArrayLike) -> np.ndarray:
    """Initial nominal decline from a secant effective decline.

    Di = ((1 - De_sec)^(-b) - 1)/b [2]_; -ln(1 - De) at b = 0. [1/yr]
    """
    de_a = check_range("de", de, 0.0, 1.0, hi_open=True)
    b_a = check_range("b", b, 0.0, 2.0 + 1e-12)
    return _expm1_over(b_a, -np.log1p(-de_a))
