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

import multiprocessing
import os
from collections.abc import Mapping
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from core.economics import EconomicInputs
from core.validation import InputError, check_range

DAYS_PER_YEAR = 365.25  # d/yr, DEVELOPERS.md convention (Julian year)
DAYS_PER_MONTH = DAYS_PER_YEAR / 12.0  # 30.4375 d, mean calendar month

# Below these distances the exact expressions lose digits (0/0 or cancellation); the
# series expansions used instead are accurate to ~1e-12 relative there [common practice].
_SERIES_EPS = 1e-6

MODEL_NAMES = ("exponential", "harmonic", "hyperbolic")


# --------------------------------------------------------------------------------------
# numerically safe helpers
# --------------------------------------------------------------------------------------
_TINY = 1e-100  # log1p(1e-100 x)/1e-100 == x and expm1(1e-100 y)/1e-100 == y to rounding


def _log1p_over(b: np.ndarray, x: np.ndarray) -> np.ndarray:
    """log(1 + b x) / b, with the limit x at b = 0.

    b = 0 is replaced by 1e-100, for which the quotient equals x to rounding; for any other
    small b, log1p keeps full relative precision, so no series branch is needed.
    """
    b = np.asarray(b, dtype=float)
    b_eff = np.where(np.abs(b) < _TINY, _TINY, b)
    return np.log1p(b_eff * x) / b_eff


def _expm1_over(c: np.ndarray, y: np.ndarray) -> np.ndarray:
    """(exp(c y) - 1) / c, with the limit y at c = 0 (same device as :func:`_log1p_over`)."""
    c = np.asarray(c, dtype=float)
    c_eff = np.where(np.abs(c) < _TINY, _TINY, c)
    return np.expm1(c_eff * y) / c_eff


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
    ln_ratio = np.maximum(np.log(qi) - np.log(q), 0.0)
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
    t_tail = t_sw_f + np.maximum(np.log(q_sw) - np.log(q), 0.0) / dl
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


# ======================================================================================
# fitting engine
# ======================================================================================
# Parameters of every Arps candidate: theta = (ln qi, ln di, b); residuals are on log rate:
#   r = ln q_obs - (ln qi - log(1 + b di t)/b)
# Fitting on log rate makes a 10 % miss at 5 bbl/d count as much as at 500 bbl/d.
_LN_DI_MIN = np.log(1e-6)  # di >= 1e-6 1/yr (positive, "no decline" is flagged separately)
_LN_DI_MAX = np.log(1e3)  # di <= 1000 1/yr (a 99.9 % drop within the first ~3 days)
_LN_QI_SPAN = 50.0  # ln qi kept within +-50 of the data (guards against overflow only)
_SSE_FLOOR_RMS = 1e-6  # log-rate RMS below which two candidates are considered exact ties

LOSSES = ("linear", "soft_l1", "huber")
CRITERIA = ("aicc", "aic", "bic", "sse")
_N_PARAMS = {"exponential": 2, "harmonic": 2, "hyperbolic": 3}


def _rho(z: np.ndarray, loss: str) -> tuple[np.ndarray, np.ndarray]:
    """Robust loss rho(z) and rho'(z) of z = (r/s)^2 (scipy.optimize.least_squares convention)."""
    if loss == "linear":
        return z, np.ones_like(z)
    if loss == "soft_l1":
        s = z + 1.0
        np.sqrt(s, out=s)
        d = np.reciprocal(s)
        s -= 1.0
        s *= 2.0
        return s, d
    # huber
    big = z > 1.0
    sz = np.sqrt(np.where(big, z, 1.0))
    return np.where(big, 2.0 * sz - 1.0, z), np.where(big, 1.0 / sz, 1.0)


_B_EFF_MIN = 1e-100  # log1p(1e-100 x)/1e-100 == x to rounding: b = 0 needs no branch


def _resid(theta: np.ndarray, t: np.ndarray, y: np.ndarray, exp_only: bool = False) -> np.ndarray:
    """Log-rate residuals r = y - ln qi + log(1 + b di t)/b of padded wells (n, m)."""
    di = np.exp(theta[:, 1:2])
    if exp_only:
        return (y - theta[:, 0:1]) + di * t
    b = np.maximum(theta[:, 2:3], _B_EFF_MIN)
    x = t * (b * di)
    np.log1p(x, out=x)
    x /= b
    x += y
    x -= theta[:, 0:1]
    return x


def _resid_jac(theta: np.ndarray, t: np.ndarray, y: np.ndarray, need_b: bool, exp_only: bool):
    """Residuals and their exact derivatives w.r.t. (ln qi, ln di, b); d/d ln qi = -1.

    With u = b di t: r = y - ln qi + log(1 + u)/b; d r/d ln di = (u/(1 + u))/b;
    d r/d b = (u/(1 + u) - log(1 + u))/b^2 (series -x^2/2 + 2 b x^3/3 - 3 b^2 x^4/4 in
    x = di t for b < 1e-4, where the difference cancels).
    """
    r, j_u, j_b, s_u, s_b = _resid_jac_scaled(theta, t, y, need_b, exp_only)
    if s_u is not None:
        j_u = j_u * s_u
    if j_b is not None:
        j_b = j_b * s_b
    return r, j_u, j_b


def _resid_jac_scaled(theta, t, y, need_b, exp_only):
    """:func:`_resid_jac` with the per-well factors left out of the derivative arrays.

    Returns r, j_u', j_b', s_u, s_b with d r/d ln di = s_u j_u' and d r/d b = s_b j_b'
    (s_u, s_b of shape (n, 1), or None for 1): the factors 1/b and 1/b^2 are applied to the
    sums of the normal equations instead of to every month (two passes fewer).
    """
    di = np.exp(theta[:, 1:2])
    if exp_only:
        x = t * di
        r = y - theta[:, 0:1]
        r += x
        return r, x, None, None, None
    bt = theta[:, 2:3]
    b = np.maximum(bt, _B_EFF_MIN)
    unit_b = not need_b and bool(np.all(bt == 1.0))
    u = t * (b * di)
    lg = np.log1p(u)
    if unit_b:
        r = lg + y
        s_u = None
    else:
        inv_b = 1.0 / b
        r = lg * inv_b
        r += y
        s_u = inv_b
    r -= theta[:, 0:1]
    v = u + 1.0
    np.divide(u, v, out=v)  # u/(1 + u)
    if not need_b:
        return r, v, None, s_u, None
    np.subtract(v, lg, out=lg)  # u/(1 + u) - log(1 + u)
    s_b = inv_b * inv_b
    small = bt[:, 0] < 1e-4
    if small.any():
        xs = t[small] * di[small]
        bxs = xs * bt[small]
        lg[small] = xs * xs * (-0.5 + bxs * (2.0 / 3.0) - bxs * bxs * 0.75)
        s_b = np.where(small[:, None], 1.0, s_b)
    return r, v, lg, s_u, s_b


def _normal_eq(w, r, j_u, j_b, s_u=None, s_b=None, A=None, g=None):
    """J^T W J (k, 3, 3) and -J^T W r (k, 3) with d r/d ln qi = -1: :func:`_normal_eq_robust`
    with one weight for both (the IRLS weights).

    ``s_u``, ``s_b`` (k, 1): per-well factors of ``j_u`` and ``j_b`` (see
    :func:`_resid_jac_scaled`); ``A``, ``g``: output arrays (allocated when None).
    """
    return _normal_eq_robust(w, w, r, j_u, j_b, s_u, s_b, A, g)


_EPS_CURV = np.finfo(float).eps  # floor of a curvature weight (scipy.optimize.least_squares)


def _solve_spd3(M: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve the damped normal equations M x = b, M (k, 3, 3) symmetric positive definite.

    Closed-form Cholesky factorisation M = L L^T per system, vectorised over the batch (a
    LAPACK call per 3 x 3 system costs more than the arithmetic). Systems where it fails
    (not numerically positive definite: a non-finite result) are solved by LAPACK, with the
    pseudo-inverse for a singular one.
    """
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        l11 = np.sqrt(M[:, 0, 0])
        l21 = M[:, 1, 0] / l11
        l31 = M[:, 2, 0] / l11
        l22 = np.sqrt(M[:, 1, 1] - l21 * l21)
        l32 = (M[:, 2, 1] - l31 * l21) / l22
        l33 = np.sqrt(M[:, 2, 2] - l31 * l31 - l32 * l32)
        z1 = b[:, 0] / l11
        z2 = (b[:, 1] - l21 * z1) / l22
        z3 = (b[:, 2] - l31 * z1 - l32 * z2) / l33
        x = np.empty_like(b)
        x[:, 2] = z3 / l33
        x[:, 1] = (z2 - l32 * x[:, 2]) / l22
        x[:, 0] = (z1 - l21 * x[:, 1] - l31 * x[:, 2]) / l11
    bad = ~np.isfinite(x).all(axis=1)
    if bad.any():
        Mb, bb = M[bad], b[bad][:, :, None]
        try:
            x[bad] = np.linalg.solve(Mb, bb)[:, :, 0]
        except np.linalg.LinAlgError:  # a singular system: pseudo-inverse
            x[bad] = (np.linalg.pinv(Mb) @ bb)[:, :, 0]
    return x


def _normal_eq_robust(w_g, w_h, r, j_u, j_b, s_u=None, s_b=None, A=None, g=None):
    """:func:`_normal_eq` with separate weights: ``w_h`` for J^T W J (the loss curvature),
    ``w_g`` for the gradient -J^T W r (the loss slope)."""
    k = w_g.shape[0]
    if A is None:
        A = np.empty((k, 3, 3))
    if g is None:
        g = np.empty((k, 3))
    su = 1.0 if s_u is None else s_u[:, 0]
    wr = w_g * r
    g[:, 0] = wr.sum(1)
    g[:, 1] = -np.einsum("ij,ij->i", wr, j_u) * su
    wj_u = w_h * j_u
    A[:, 0, 0] = w_h.sum(1)
    A[:, 0, 1] = A[:, 1, 0] = -wj_u.sum(1) * su
    A[:, 1, 1] = np.einsum("ij,ij->i", wj_u, j_u) * (su * su)
    if j_b is not None:
        sb = 1.0 if s_b is None else s_b[:, 0]
        g[:, 2] = -np.einsum("ij,ij->i", wr, j_b) * sb
        wj_b = w_h * j_b
        A[:, 0, 2] = A[:, 2, 0] = -wj_b.sum(1) * sb
        A[:, 1, 2] = A[:, 2, 1] = np.einsum("ij,ij->i", wj_u, j_b) * (su * sb)
        A[:, 2, 2] = np.einsum("ij,ij->i", wj_b, j_b) * (sb * sb)
    else:
        A[:, 0, 2] = A[:, 2, 0] = A[:, 1, 2] = A[:, 2, 1] = A[:, 2, 2] = 0.0
        g[:, 2] = 0.0
    return A, g


def _lm_batch(t, y, w0, theta0, free, *, b_max, loss, scale, max_iter, tol):
    """Batched projected Levenberg-Marquardt with IRLS robust weights.

    All arrays are padded per well: ``t``, ``y``, ``w0`` of shape (n, m) with ``w0 = 0`` on
    padding; ``theta0`` (n, 3) start values of (ln qi, ln di, b); ``free`` (n, 3) bool,
    False holds a parameter fixed (b = 0 for the exponential family, 1 for the harmonic).
    Minimises, per well, 0.5 s^2 sum w0 rho((r/s)^2) with r the log-rate residual, with
    exact analytic derivatives, per-well damping (Marquardt scaling by diag(J^T W J)) and
    bounds by projection with an active set; one model evaluation per iteration (residuals
    and Jacobian together, in cache-sized blocks of rows); wells leave the batch as they
    converge. When b is held at 0 or 1 for every well of the call, J^T W J carries the robust
    loss's curvature (rho' + 2 rho'' z, Triggs et al. 2000, as scipy.optimize.least_squares);
    otherwise the IRLS weights rho'.
    Returns theta, robust cost, final IRLS weights (n, m), residuals, iterations, converged.
    """
    n, m = t.shape
    theta = theta0.astype(float).copy()
    lo = np.array([-np.inf, _LN_DI_MIN, 0.0])
    hi = np.array([np.inf, _LN_DI_MAX, b_max])
    s2 = scale * scale
    exp_only = bool(np.all(~free[:, 2]) and np.all(theta[:, 2] == 0.0))
    need_b = bool(free[:, 2].any())
    fr_all = free.astype(float)
    # the robust loss's curvature term in J^T W J for the two-parameter families (b held at
    # 0 or 1): measured on 10,000 noisy wells, 3.0 instead of 7.4 iterations (exponential)
    # and 8.1 instead of 11.3 (harmonic), costs equal within 1e-4 (mostly lower); the
    # hyperbolic family keeps the IRLS weights, which took fewer iterations there
    curvature = exp_only or (not need_b and bool(np.all(theta[:, 2] == 1.0)))
    converged = np.zeros(n, dtype=bool)
    n_iter = np.zeros(n, dtype=int)

    def evaluate_block(th, tt, yy, ww, wsum, c_out, A_out, g_out):
        r, j_u, j_b, s_u, s_b = _resid_jac_scaled(th, tt, yy, need_b, exp_only)
        if loss == "linear":
            c_out[:] = 0.5 * np.einsum("ij,ij,ij->i", ww, r, r)
            w = ww
        elif loss == "soft_l1":
            # rho = 2 (sqrt(1 + z) - 1), rho' = 1/sqrt(1 + z), rho'' = -(1 + z)^(-3/2)/2,
            # z = (r/s)^2; gradient weight rho', curvature weight rho' + 2 rho'' z =
            # (1 + z)^(-3/2) (second-order correction of the robust loss, Triggs et al. 2000,
            # as scipy.optimize.least_squares applies it); fused in place
            z1 = r * r
            z1 *= 1.0 / s2
            z1 += 1.0
            sq = np.sqrt(z1)
            c_out[:] = s2 * (np.einsum("ij,ij->i", ww, sq) - wsum)
            np.divide(ww, sq, out=sq)
            w = sq
            if curvature:
                np.divide(w, z1, out=z1)
                _normal_eq_robust(w, z1, r, j_u, j_b, s_u, s_b, A_out, g_out)
                return
        else:
            z = (r * r) / s2
            rho, drho = _rho(z, loss)
            c_out[:] = 0.5 * s2 * np.einsum("ij,ij->i", ww, rho)
            w = ww * drho
            if loss == "huber" and curvature:
                # curvature weight rho' + 2 rho'' z: 1 inside the scale, 0 beyond (floored
                # as scipy.optimize.least_squares does)
                w_h = ww * np.where(z > 1.0, _EPS_CURV, 1.0)
                _normal_eq_robust(w, w_h, r, j_u, j_b, s_u, s_b, A_out, g_out)
                return
        _normal_eq(w, r, j_u, j_b, s_u, s_b, A_out, g_out)

    def evaluate(th, tt, yy, ww, wsum):
        # rows in blocks of about _BLOCK_ELEMENTS well-months: the work arrays of a block stay
        # in the processor cache (about twice as fast as whole-batch passes); every row's
        # arithmetic is the same whatever the block, so the result does not depend on it
        k = th.shape[0]
        c = np.empty(k)
        A = np.empty((k, 3, 3))
        g = np.empty((k, 3))
        rows = max(8, _BLOCK_ELEMENTS // max(m, 1))
        for i in range(0, k, rows):
            j = min(i + rows, k)
            evaluate_block(th[i:j], tt[i:j], yy[i:j], ww[i:j], wsum[i:j], c[i:j], A[i:j], g[i:j])
        return c, A, g

    idx = np.arange(n)
    tt, yy, ww = t, y, w0
    wsum = w0.sum(1)
    th = theta.copy()
    fr = fr_all
    cost, A, g = evaluate(th, tt, yy, ww, wsum)
    lam = np.full(n, LM_LAMBDA0)
    conv = np.zeros(n, dtype=bool)  # of the wells still in the batch
    nit = np.zeros(n, dtype=int)
    for it in range(max_iter):
        if idx.size == 0:
            break
        # active set: parameters held fixed, or at a bound with descent pointing outward
        f = fr.copy()
        at_lo = (th[:, 1:] <= lo[1:]) & (g[:, 1:] < 0.0)
        at_hi = (th[:, 1:] >= hi[1:]) & (g[:, 1:] > 0.0)
        f[:, 1:][at_lo | at_hi] = 0.0
        M = A * (f[:, :, None] * f[:, None, :])
        gf = g * f
        diag = M.reshape(-1, 9)[:, ::4]  # view of the diagonals
        dg = np.where(f > 0, np.maximum(diag, 1e-12 * (1.0 + diag.max(axis=1, keepdims=True))), 1.0)
        diag[...] = np.where(f > 0, diag + lam[:, None] * dg, 1.0)
        delta = _solve_spd3(M, gf)
        delta = np.where(np.isfinite(delta), delta, 0.0) * f
        cand = np.clip(th + delta, lo, hi)
        cand[:, 0] = np.clip(cand[:, 0], th[:, 0] - _LN_QI_SPAN, th[:, 0] + _LN_QI_SPAN)
        c_new, A_new, g_new = evaluate(cand, tt, yy, ww, wsum)
        was = conv  # converged earlier but not yet dropped: held still
        ok = np.isfinite(c_new) & (c_new <= cost) & ~was
        step = np.max(np.abs(cand - th), axis=1)
        step_small = step <= 1e-10 * (1.0 + np.max(np.abs(th), axis=1))
        rel = (cost - c_new) <= tol * (cost + 1e-300)
        done = (ok & (rel | step_small)) | (lam > 1e12) | (ok & (c_new <= 1e-28))
        np.copyto(th, cand, where=ok[:, None])
        np.copyto(cost, c_new, where=ok)
        np.copyto(A, A_new, where=ok[:, None, None])
        np.copyto(g, g_new, where=ok[:, None])
        lam = np.where(ok, np.maximum(lam * 0.2, 1e-12), lam * 8.0)
        nit = np.where(was, nit, it + 1)
        conv = was | done
        keep = ~conv
        if not keep.any():
            break
        # drop converged wells from the batch (copying the rest costs, so not for a few)
        if (~keep).sum() >= max(1, keep.size // 16):
            gone = idx[conv]
            theta[gone] = th[conv]
            n_iter[gone] = nit[conv]
            converged[gone] = True
            idx = idx[keep]
            th, cost, A, g, lam, fr, nit = th[keep], cost[keep], A[keep], g[keep], lam[keep], fr[keep], nit[keep]
            conv = conv[keep]
            tt, yy, ww, wsum = tt[keep], yy[keep], ww[keep], wsum[keep]
    if idx.size:
        theta[idx] = th
        n_iter[idx] = nit
        converged[idx] = conv
    # final residuals and IRLS weights for every well
    r = _resid(theta, t, y, exp_only)
    rho, drho = _rho((r * r) / s2, loss)
    if loss == "linear":
        cost_all = 0.5 * np.einsum("ij,ij,ij->i", w0, r, r)
    else:
        cost_all = 0.5 * s2 * np.einsum("ij,ij->i", w0, rho)
    del rho
    return theta, cost_all, drho, r, n_iter, converged


#: Well-months per block of rows evaluated at once in the solver (cache-sized work arrays).
_BLOCK_ELEMENTS = 16384

#: Starts of the hyperbolic candidate (best kept): from the exponential fit with b = 0.5, from
#: the harmonic fit with b = 1, and a high-b start (0.9 b_max, 3x the harmonic di).
HYPERBOLIC_STARTS = ("harm",)
LM_LAMBDA0 = 1e-3  # initial Marquardt damping (relative to diag(J^T W J))


def _loglinear_start(t, y, w0):
    """Weighted log-linear regression ln q = a - d t per well: the exponential start."""
    sw = np.maximum(w0.sum(1), 1e-300)
    tm = (w0 * t).sum(1) / sw
    ym = (w0 * y).sum(1) / sw
    dt = t - tm[:, None]
    stt = (w0 * dt * dt).sum(1)
    sty = (w0 * dt * (y - ym[:, None])).sum(1)
    slope = np.where(stt > 0, sty / np.where(stt > 0, stt, 1.0), 0.0)
    d = np.clip(-slope, 1e-4, 1e2)
    a = ym + d * tm
    return a, np.log(d)


def _harmonic_start(t, y, w0, a_exp, u_exp):
    """Harmonic start from the linear form 1/q = 1/qi + (di/qi) t (Arps 1945), regressed with
    weights q^2 so that it approximates the log-rate fit; the exponential start where the
    regression gives no positive intercept and slope."""
    z = np.exp(-y)
    w = w0 * np.exp(2.0 * y)
    sw = np.maximum(w.sum(1), 1e-300)
    tm = (w * t).sum(1) / sw
    zm = (w * z).sum(1) / sw
    dt = t - tm[:, None]
    stt = (w * dt * dt).sum(1)
    slope = np.where(stt > 0, (w * dt * (z - zm[:, None])).sum(1) / np.where(stt > 0, stt, 1.0), 0.0)
    c0 = zm - slope * tm
    good = (c0 > 0) & (slope > 0) & np.isfinite(c0) & np.isfinite(slope)
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.where(good, -np.log(np.where(good, c0, 1.0)), a_exp)
        u = np.where(good, np.log(np.where(good, slope / np.where(good, c0, 1.0), 1.0)), u_exp)
    return a, np.clip(u, _LN_DI_MIN, _LN_DI_MAX)


def _fit_families(t, y, w0, *, b_max, loss, scale, max_iter, tol, fixed_b=None):
    """Fit the exponential, harmonic and hyperbolic families to padded wells at once.

    ``fixed_b`` (n,) holds b for the hyperbolic candidate where it is fixed (NaN = free).
    Returns a dict family -> dict of arrays (theta, cost, sse, wsse, weights, resid,
    n_iter, converged).
    """
    n = t.shape[0]
    kw = dict(b_max=b_max, loss=loss, scale=scale, max_iter=max_iter, tol=tol)
    a0, u0 = _loglinear_start(t, y, w0)
    out = {}
    # exponential (b held at 0) and harmonic (b held at 1), each one batch
    a_h, u_h = _harmonic_start(t, y, w0, a0, u0)
    for fam, b_fix, a_s, u_s in (("exponential", 0.0, a0, u0), ("harmonic", 1.0, a_h, u_h)):
        th0 = np.column_stack([a_s, u_s, np.full(n, b_fix)])
        free = np.ones((n, 3), dtype=bool)
        free[:, 2] = False
        res = _lm_batch(t, y, w0, th0, free, **{**kw, "b_max": max(b_max, 1.0)})
        out[fam] = _pack(res, slice(None), w0, y)
    # hyperbolic: three starts (from the exponential, from the harmonic, high b), best kept
    fb = np.full(n, np.nan) if fixed_b is None else np.asarray(fixed_b, dtype=float)
    is_fixed = np.isfinite(fb)
    th_e, th_h = out["exponential"]["theta"], out["harmonic"]["theta"]
    b_hi = min(0.9 * b_max, 1.8)
    all_starts = {
        "exp": np.column_stack([th_e[:, 0], th_e[:, 1], np.full(n, min(0.5, b_max))]),
        "harm": np.column_stack([th_h[:, 0], th_h[:, 1], np.full(n, min(1.0, b_max))]),
        "high": np.column_stack([th_h[:, 0], th_h[:, 1] + np.log(3.0), np.full(n, b_hi)]),
    }
    starts = [all_starts[k] for k in HYPERBOLIC_STARTS]
    for s in starts:
        s[is_fixed, 2] = fb[is_fixed]
    ns = len(starts)
    th0 = np.concatenate(starts)
    free = np.ones((ns * n, 3), dtype=bool)
    free[:, 2] = ~np.tile(is_fixed, ns)
    if ns == 1:
        T3, Y3, W3 = t, y, w0
    else:
        T3, Y3, W3 = np.concatenate([t] * ns), np.concatenate([y] * ns), np.concatenate([w0] * ns)
    res_h = _lm_batch(T3, Y3, W3, th0, free, **kw)
    costs = res_h[1].reshape(ns, n)
    costs = np.where(np.isfinite(costs), costs, np.inf)
    best = np.argmin(costs, axis=0)
    rows = best * n + np.arange(n) if ns > 1 else slice(None)  # one start: no copy
    out["hyperbolic"] = _pack(res_h, rows, w0, y)
    return out


def _pack(res, rows, w0, y):
    theta, cost, drho, r, n_iter, conv = res
    r_ = r[rows]
    w = drho[rows]
    return {
        "theta": theta[rows],
        "cost": cost[rows],
        "sse": np.einsum("ij,ij->i", w0, r_ * r_),
        "wsse": np.einsum("ij,ij->i", w0 * w, r_ * r_),
        "weights": w,
        "resid": r_,
        "n_iter": n_iter[rows],
        "converged": conv[rows],
    }


def _criterion(wsse, n_used, k, criterion):
    """Model-choice criterion on (robust-weighted) log-rate residuals; lower is better.

    AICc = n ln(SSE/n) + 2k + 2k(k+1)/(n-k-1) (Hurvich & Tsai 1989); AIC without the last
    term; BIC = n ln(SSE/n) + k ln n. SSE is floored at n (1e-6)^2 so exact fits tie and the
    family with fewer parameters wins.
    """
    n = np.asarray(n_used, dtype=float)
    sse = np.maximum(wsse, n * _SSE_FLOOR_RMS**2)
    base = n * np.log(sse / np.maximum(n, 1.0))
    if criterion == "sse":
        return sse
    if criterion == "bic":
        return base + k * np.log(np.maximum(n, 1.0))
    aic = base + 2.0 * k
    if criterion == "aic":
        return aic
    denom = n - k - 1.0
    return np.where(denom > 0, aic + 2.0 * k * (k + 1.0) / np.where(denom > 0, denom, 1.0), aic + 1e6)


# ======================================================================================
# public fitting API
# ======================================================================================
@dataclass(frozen=True)
class DeclineSettings:
    """Settings of the decline engine and forecast (field units).

    Parameters
    ----------
    b_max : float
        Upper bound of the Arps b-factor, (0, 2]. Default 2. [-]
    terminal_decline_effective : float
        Terminal (limiting) decline, annual tangent-effective, (0, 1). Default 0.06
        (common practice, about 6 %/yr). [-] Applied in the forecast to every fit with b > 0
        (modified hyperbolic, see :mod:`core.forecast`).
    econ_limit_bopd : float or None
        Economic limit as an oil rate per calendar day. [bbl/d] None: from ``economics`` if
        given, else no rate limit (the horizon caps the forecast).
    econ_limit_mcfd : float or None
        Economic limit of a well forecast on gas only (no oil forecast). [Mcf/d]
    economics : EconomicInputs or None
        Price and cost inputs for :func:`core.economics.economic_limit_rate`; the gas credit
        uses each well's GOR over its last 12 producing months.
    horizon_years : float
        Forecast cap after the last actual month. Default 50. [yr]
    min_uptime_fraction : float
        Months with days_on / days_in_month below this are left out of the fit. Default 0.5.
    min_months : int
        Fewest months in the fit window for a fit. Default 6 (3 parameters need margin).
    loss : {"soft_l1", "huber", "linear"}
        Loss on log-rate residuals. Default "soft_l1".
    loss_scale : float
        Residual scale of the robust loss in log-rate units; 0.2 is a ~20 % miss. [-]
    downweight_below : float
        A month whose final robust weight falls below this is reported as down-weighted.
    criterion : {"aicc", "aic", "bic", "sse"}
        Model choice between the three families on the log-rate residuals. Default "aicc".
    detect_step_changes : bool
        Detect a sustained step up in rate (workover, re-completion) as a regime start.
    step_up_ratio : float
        Median rate over the next ``step_window_months`` over the median of the previous
        ones that counts as a step change. Default 1.5 (common practice). [-]
    step_window_months : int
        Window of the step test. Default 3.
    min_decline_nominal : float
        An exponential fit declining slower than this is "no decline". Default 0.005. [1/yr]
    uptime_months : int
        Months with days on whose uptime sets the forecast's calendar-day factor (days of a month
        with neither oil nor gas count as down time). Default 12.
    streams : tuple of str
        Streams fitted: "oil" and/or "gas". Default both.
    workers : int or None
        Worker processes for the fit (None: up to the CPU count for large fields; 1: in
        process).
    max_iter : int
        Levenberg-Marquardt iteration cap per well. Default 100.
    tol : float
        Relative cost change at convergence. Default 1e-8 (as scipy's least_squares ftol).
    chunk_wells : int
        Wells per batch (memory per batch ~ chunk x months x 100 bytes). Default 1024: the
        wells of a batch are padded to its longest fit window (wells sorted by length, so a
        smaller batch pads less); the solver works through a batch in cache-sized blocks.
    block_wells : int
        Wells prepared at a time (bounds the per-row work arrays). Default 10,000.
    """

    b_max: float = 2.0
    terminal_decline_effective: float = 0.06
    econ_limit_bopd: float | None = None
    econ_limit_mcfd: float | None = None
    economics: EconomicInputs | None = None
    horizon_years: float = 50.0
    min_uptime_fraction: float = 0.5
    min_months: int = 6
    loss: str = "soft_l1"
    loss_scale: float = 0.2
    downweight_below: float = 0.5
    criterion: str = "aicc"
    detect_step_changes: bool = True
    step_up_ratio: float = 1.5
    step_window_months: int = 3
    min_decline_nominal: float = 0.005
    uptime_months: int = 12
    streams: tuple[str, ...] = ("oil", "gas")
    workers: int | None = None
    max_iter: int = 100
    tol: float = 1e-8
    chunk_wells: int = 1024
    block_wells: int = 10_000

    def __post_init__(self) -> None:
        check_range("b_max", self.b_max, 0.0, 2.0, lo_open=True)
        check_range("terminal_decline_effective", self.terminal_decline_effective, 0.0, 1.0,
                    unit="(annual effective)", lo_open=True, hi_open=True)
        if self.econ_limit_bopd is not None:
            check_range("econ_limit_bopd", self.econ_limit_bopd, 0.0, None, unit="bbl/d")
        if self.econ_limit_mcfd is not None:
            check_range("econ_limit_mcfd", self.econ_limit_mcfd, 0.0, None, unit="Mcf/d")
        check_range("horizon_years", self.horizon_years, 0.0, 200.0, unit="yr", lo_open=True)
        check_range("min_uptime_fraction", self.min_uptime_fraction, 0.0, 1.0)
        check_range("min_months", self.min_months, 4, None)
        check_range("loss_scale", self.loss_scale, 0.0, None, lo_open=True)
        check_range("step_up_ratio", self.step_up_ratio, 1.0, None, lo_open=True)
        check_range("step_window_months", self.step_window_months, 1, 24)
        check_range("uptime_months", self.uptime_months, 1, 120)
        check_range("max_iter", self.max_iter, 1, 10000)
        check_range("chunk_wells", self.chunk_wells, 1, None)
        check_range("block_wells", self.block_wells, 1, None)
        if self.loss not in LOSSES:
            raise ValueError(f"loss must be one of {LOSSES}, got {self.loss!r}")
        if self.criterion not in CRITERIA:
            raise ValueError(f"criterion must be one of {CRITERIA}, got {self.criterion!r}")
        bad = [s for s in self.streams if s not in ("oil", "gas")]
        if bad or not self.streams:
            raise ValueError(f"streams must be a non-empty tuple of 'oil'/'gas', got {self.streams!r}")
        if self.workers is not None:
            check_range("workers", self.workers, 1, 512)

    @property
    def d_lim_nominal(self) -> float:
        """Terminal decline as a nominal decline. [1/yr]"""
        return float(-np.log1p(-self.terminal_decline_effective))


@dataclass(frozen=True)
class WellOverride:
    """An engineer's override of one well's fit (an input, always recorded in the output).

    model : "exponential", "harmonic" or "hyperbolic" to force the family, or None.
    b : a fixed b-factor in [0, b_max] (implies the hyperbolic family; 0 and 1 are the
        exponential and harmonic), or None.
    fit_start, fit_end : first / last month of the fit window (anything pandas reads as a
        date; the month containing it), or None for the automatic window.
    exclude_months : months left out of the fit.
    reason, author : free text, reported.
    """

    model: str | None = None
    b: float | None = None
    fit_start: object = None
    fit_end: object = None
    exclude_months: tuple = ()
    reason: str = ""
    author: str = ""

    def __post_init__(self) -> None:
        if self.model is not None and self.model not in MODEL_NAMES:
            raise InputError(f"override model must be one of {MODEL_NAMES}, got {self.model!r}")
        if self.b is not None:
            try:
                check_range("override b", self.b, 0.0, 2.0)
            except ValueError as exc:
                raise InputError(str(exc)) from exc
        for name in ("fit_start", "fit_end"):
            v = getattr(self, name)
            if v is not None:
                object.__setattr__(self, name, _month_start(v, name))
        object.__setattr__(self, "exclude_months",
                           tuple(_month_start(m, "exclude_months") for m in self.exclude_months))
        if self.fit_start is not None and self.fit_end is not None and self.fit_end < self.fit_start:
            raise InputError(f"override fit_end {self.fit_end:%Y-%m} is before fit_start {self.fit_start:%Y-%m}")

    def describe(self) -> str:
        """One-line text naming everything this override changes."""
        parts = []
        if self.model:
            parts.append(f"model={self.model}")
        if self.b is not None:
            parts.append(f"b={self.b:g}")
        if self.fit_start is not None:
            parts.append(f"fit_start={self.fit_start:%Y-%m}")
        if self.fit_end is not None:
            parts.append(f"fit_end={self.fit_end:%Y-%m}")
        if self.exclude_months:
            parts.append("exclude=" + ",".join(f"{m:%Y-%m}" for m in self.exclude_months))
        txt = "; ".join(parts) or "no change"
        if self.reason:
            txt += f" (reason: {self.reason})"
        if self.author:
            txt += f" [by {self.author}]"
        return txt


def _month_start(v, name: str) -> pd.Timestamp:
    try:
        ts = pd.Timestamp(v)
    except (ValueError, TypeError) as exc:
        raise InputError(f"{name} must be a month like 2024-06, got {v!r}") from exc
    if pd.isna(ts):
        raise InputError(f"{name} must be a month like 2024-06, got {v!r}")
    return pd.Timestamp(year=ts.year, month=ts.month, day=1)


@dataclass(frozen=True)
class ArpsFit:
    """Result of :func:`fit_arps` for one rate series.

    model : chosen family ("exponential", "harmonic", "hyperbolic"), "" when not fitted.
    qi [rate unit], di [1/yr nominal], b [-]: parameters of the chosen family (NaN when
    not fitted). sse_log: sum of squared log-rate residuals over the months used;
    rmse_log; robust_cost; criterion and criterion_value; n_used; down_weighted (indices
    into the input whose robust weight fell below the threshold); excluded (indices left
    out: non-positive, non-finite or zero weight); candidates (family -> dict of qi, di, b,
    sse_log, criterion_value, converged); status ("ok" or why not).
    """

    model: str
    qi: float
    di: float
    b: float
    sse_log: float
    rmse_log: float
    robust_cost: float
    criterion: str
    criterion_value: float
    n_used: int
    down_weighted: tuple[int, ...]
    excluded: tuple[int, ...]
    candidates: Mapping[str, Mapping[str, float]] = field(default_factory=dict)
    status: str = "ok"
    converged: bool = True


def _resolve_workers(workers, n_wells, settings_chunk):
    if workers is None:
        workers = min(os.cpu_count() or 1, 8) if n_wells >= 4000 else 1
    return max(1, int(workers))


def _choose(fams: dict, n_used: np.ndarray, criterion: str, forced: np.ndarray | None,
            fixed_b: np.ndarray):
    """Criterion per family (n, 3) and the index of the chosen family per well."""
    k_h = np.where(np.isfinite(fixed_b), 2.0, 3.0)
    crit = np.column_stack([
        _criterion(fams["exponential"]["wsse"], n_used, 2.0, criterion),
        _criterion(fams["harmonic"]["wsse"], n_used, 2.0, criterion),
        _criterion(fams["hyperbolic"]["wsse"], n_used, k_h, criterion),
    ])
    crit = np.where(np.isfinite(crit), crit, np.inf)
    choice = np.argmin(crit, axis=0 if crit.ndim == 1 else 1)
    if forced is not None:
        choice = np.where(forced >= 0, forced, choice)
    return crit, choice


def _fit_chunk(args):
    """Worker: fit the three families for one padded chunk (top level so it pickles).

    ``args`` is (t, y, w0, fixed_b, kw) or (t, y, w0, fixed_b, kw, downweight_below); with
    the threshold, each family returns ``low_weight`` (final robust weight below it, bool)
    in place of the float ``weights``, an eighth of the bytes to send back from a worker.
    Floating-point overflow on extreme inputs (e.g. a rate of 1e-313 bbl/d) is silenced
    here: non-finite trial costs are rejected by the solver and non-finite starts replaced.
    """
    t, y, w0, fixed_b, kw = args[:5]
    below = args[5] if len(args) > 5 else None
    with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
        fams = _fit_families(t, y, w0, fixed_b=fixed_b, **kw)
    keep = ("theta", "cost", "sse", "wsse", "n_iter", "converged")
    out = {f: {k: v[k] for k in keep} for f, v in fams.items()}
    for f, v in fams.items():
        if below is None:
            out[f]["weights"] = v["weights"]
        else:
            out[f]["low_weight"] = v["weights"] < below
    return out


#: Chunks handed to forked worker processes: set just before the pool starts, so the
#: workers inherit the arrays instead of receiving them pickled through a pipe.
_FORK_JOBS: list | None = None


def _fit_chunk_inherited(i: int):
    return _fit_chunk(_FORK_JOBS[i])


def _run_chunks(chunks, kw, workers):
    """Fit every chunk, in process or in ``workers`` processes; results in chunk order.

    The largest chunks go first (longest-processing-time-first order), so that the last
    chunks to finish are short and the processes end together. With the ``fork`` start
    method the workers inherit the chunks (no pickling of the inputs).
    """
    global _FORK_JOBS
    jobs = [(c["t"], c["y"], c["w"], c["fixed_b"], kw) + ((c["downweight_below"],)
                                                          if "downweight_below" in c else ())
            for c in chunks]
    if workers <= 1 or len(jobs) <= 1:
        return [_fit_chunk(j) for j in jobs]
    order = sorted(range(len(jobs)), key=lambda i: -jobs[i][0].size)
    methods = multiprocessing.get_all_start_methods()
    out = [None] * len(jobs)
    if "fork" in methods:
        ctx = multiprocessing.get_context("fork")
        _FORK_JOBS = jobs
        try:
            with ProcessPoolExecutor(max_workers=min(workers, len(jobs)), mp_context=ctx) as ex:
                for i, res in zip(order, ex.map(_fit_chunk_inherited, order)):
                    out[i] = res
        finally:
            _FORK_JOBS = None
        return out
    with ProcessPoolExecutor(max_workers=min(workers, len(jobs))) as ex:
        for i, res in zip(order, ex.map(_fit_chunk, [jobs[i] for i in order])):
            out[i] = res
    return out


def fit_arps(
    t_yr: ArrayLike,
    q: ArrayLike,
    *,
    b_max: float = 2.0,
    model: str | None = None,
    fixed_b: float | None = None,
    weights: ArrayLike | None = None,
    loss: str = "soft_l1",
    loss_scale: float = 0.2,
    criterion: str = "aicc",
    downweight_below: float = 0.5,
    min_points: int = 4,
    max_iter: int = 100,
    tol: float = 1e-8,
) -> ArpsFit:
    """Fit the Arps families to one rate series and choose one.

    Parameters
    ----------
    t_yr : array_like
        Time of each rate since the start of the decline segment (t = 0 is where ``qi``
        applies; a month's average rate is best placed at mid-month). [yr]
    q : array_like
        Rates. [bbl/d] or [Mcf/d] Non-positive or non-finite values are left out (reported
        in ``excluded``), never fitted as zeros.
    b_max : float
        Upper bound of b, (0, 2]. [-]
    model : {"exponential", "harmonic", "hyperbolic"}, optional
        Force the family (override); all three are still fitted and reported.
    fixed_b : float, optional
        Hold b at this value for the hyperbolic candidate (implies ``model="hyperbolic"``).
    weights : array_like, optional
        Non-negative weight per point (0 leaves it out).
    loss, loss_scale : robust loss on log-rate residuals and its scale. [-]
    criterion : {"aicc", "aic", "bic", "sse"}
        Model-choice criterion on the robust-weighted log-rate residuals.

    Returns
    -------
    ArpsFit

    Notes
    -----
    Arps (1945) rate q = qi (1 + b di t)^(-1/b) fitted on ln q by a Levenberg-Marquardt
    solver with exact derivatives and bounds 0 <= b <= b_max, di > 0, qi > 0; robust loss
    as scipy.optimize.least_squares defines it; the exponential (b = 0), harmonic (b = 1)
    and hyperbolic (free b) families are all fitted and compared by ``criterion``.
    """
    t_a = np.asarray(t_yr, dtype=float).ravel()
    q_a = np.asarray(q, dtype=float).ravel()
    if t_a.shape != q_a.shape:
        raise ValueError(f"t_yr and q must have the same length, got {t_a.size} and {q_a.size}")
    check_range("b_max", b_max, 0.0, 2.0, lo_open=True)
    if model is not None and model not in MODEL_NAMES:
        raise ValueError(f"model must be one of {MODEL_NAMES}, got {model!r}")
    if fixed_b is not None:
        check_range("fixed_b", fixed_b, 0.0, b_max)
    if loss not in LOSSES:
        raise ValueError(f"loss must be one of {LOSSES}, got {loss!r}")
    if criterion not in CRITERIA:
        raise ValueError(f"criterion must be one of {CRITERIA}, got {criterion!r}")
    w_in = np.ones_like(q_a) if weights is None else np.asarray(weights, dtype=float).ravel()
    if w_in.shape != q_a.shape:
        raise ValueError("weights must have the length of q")
    good = np.isfinite(t_a) & np.isfinite(q_a) & (q_a > 0) & np.isfinite(w_in) & (w_in > 0) & (t_a >= 0)
    excluded = tuple(int(i) for i in np.flatnonzero(~good))
    n_used = int(good.sum())
    nan = float("nan")
    if n_used < min_points:
        return ArpsFit("", nan, nan, nan, nan, nan, nan, criterion, nan, n_used, (), excluded,
                       {}, f"not fitted: {n_used} usable rates, at least {min_points} needed")
    t2 = t_a[good][None, :]
    y2 = np.log(q_a[good])[None, :]
    w2 = w_in[good][None, :]
    fb = np.array([np.nan if fixed_b is None else float(fixed_b)])
    with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
        fams = _fit_families(t2, y2, w2, b_max=b_max, loss=loss, scale=loss_scale, max_iter=max_iter,
                             tol=tol, fixed_b=fb)
    forced = None
    if fixed_b is not None or model is not None:
        forced = np.array([MODEL_NAMES.index(model or "hyperbolic")])
    crit, choice = _choose(fams, np.array([n_used]), criterion, forced, fb)
    fam = MODEL_NAMES[int(choice[0])]
    res = fams[fam]
    th = res["theta"][0]
    w_final = res["weights"][0]
    dw_local = np.flatnonzero(w_final < downweight_below) if loss != "linear" else np.array([], int)
    down = tuple(int(i) for i in np.flatnonzero(good)[dw_local])
    cands = {}
    for j, f in enumerate(MODEL_NAMES):
        tf = fams[f]["theta"][0]
        cands[f] = {"qi": float(np.exp(tf[0])), "di": float(np.exp(tf[1])), "b": float(tf[2]),
                    "sse_log": float(fams[f]["sse"][0]), "criterion_value": float(crit[0, j]),
                    "converged": bool(fams[f]["converged"][0])}
    sse = float(res["sse"][0])
    return ArpsFit(
        model=fam, qi=float(np.exp(th[0])), di=float(np.exp(th[1])), b=float(th[2]),
        sse_log=sse, rmse_log=float(np.sqrt(sse / n_used)), robust_cost=float(res["cost"][0]),
        criterion=criterion, criterion_value=float(crit[0, int(choice[0])]), n_used=n_used,
        down_weighted=down, excluded=excluded, candidates=cands, status="ok",
        converged=bool(res["converged"][0]),
    )


@dataclass(frozen=True)
class FieldFit:
    """Result of :func:`fit_field`.

    fits : one row per well and stream (columns in :data:`FIT_COLUMNS`).
    candidates : one row per well, stream and Arps family fitted (:data:`CANDIDATE_COLUMNS`).
    settings : the :class:`DeclineSettings` used.
    messages : notes on the inputs (e.g. overrides naming wells not in the table).
    """

    fits: pd.DataFrame
    candidates: pd.DataFrame
    settings: DeclineSettings
    messages: tuple[str, ...] = ()


#: Columns of ``FieldFit.fits``. ``qi`` is in bbl/d for oil and Mcf/d for gas (producing-day
#: rate at ``fit_start``), ``di`` nominal 1/yr at ``fit_start``.
FIT_COLUMNS = [
    "well_id", "stream", "status", "forecastable", "model", "qi", "di", "b",
    "fit_start", "fit_end", "peak_month", "regime_start", "regime_source",
    "n_months_used", "n_months_excluded", "n_months_down_weighted", "months_down_weighted",
    "sse_log", "rmse_log", "robust_cost", "criterion", "criterion_value", "converged",
    "n_iter", "override",
]
CANDIDATE_COLUMNS = [
    "well_id", "stream", "family", "qi", "di", "b", "n_params", "sse_log", "rmse_log",
    "robust_cost", "criterion_value", "converged", "chosen",
]
_STREAM_COLS = {"oil": ("oil_rate_bbl_d", "oil_bbl"), "gas": ("gas_rate_mcf_d", "gas_mcf")}


def _factorize_runs(ids: pd.Series):
    """``pd.factorize(ids, sort=True)``, faster when equal ids come in runs (a table grouped
    by well): only the first id of each run is hashed, the codes are repeated over the run."""
    n = len(ids)
    if n < 4096:
        return pd.factorize(ids, sort=True)
    try:
        # a missing id compares as a change: runs of one row (factorize gives them -1)
        change = np.array(ids.ne(ids.shift()).to_numpy(dtype=bool, na_value=True), dtype=bool)
    except (TypeError, ValueError):
        return pd.factorize(ids, sort=True)
    change[0] = True
    heads = np.flatnonzero(change)
    if heads.size > n // 4:
        return pd.factorize(ids, sort=True)
    h_codes, uniques = pd.factorize(ids.iloc[heads], sort=True)
    return np.repeat(h_codes, np.diff(np.r_[heads, n])), uniques


def sorted_well_codes(production: pd.DataFrame):
    """The table sorted by well and month (a view when already sorted), the sorted well ids,
    each row's well code and its month as an integer (months since 1970-01)."""
    codes, uniques = _factorize_runs(production["well_id"])
    mi = _month_int(pd.to_datetime(production["month"]).to_numpy())
    df = production
    if codes.size:
        dc = np.diff(codes)
        in_order = bool(codes[0] >= 0 and np.all(dc >= 0) and np.all((dc > 0) | (np.diff(mi) > 0)))
        del dc
        if not in_order:
            order = np.lexsort((mi, codes))
            order = order[codes[order] >= 0]  # rows without a well id cannot be placed
            df = production.take(order)
            codes, mi = codes[order], mi[order]
    return df, pd.Index(uniques), codes, mi


def _joined_month_labels(w: np.ndarray, mi: np.ndarray, out: np.ndarray) -> np.ndarray:
    """Per well, its months (integer months, in the order given) as "YYYY-MM" joined by
    commas; wells without months keep ``out``'s value.

    The labels of the span's months are made once and written as fixed-width bytes; each
    well's text is one slice of that buffer (the same text as joining each well's labels).
    """
    out = out.copy()
    order = np.argsort(w, kind="stable")
    w, mi = w[order], mi[order]
    lo, hi = int(mi.min()), int(mi.max())
    if not (-11_640 <= lo and hi < 96_000):  # years outside 1000-9969: four-digit years not assured
        lab = pd.Series(pd.DatetimeIndex(_int_to_month(mi)).strftime("%Y-%m"))
        joined = lab.groupby(w).agg(",".join)
        out[joined.index.to_numpy()] = joined.to_numpy()
        return out
    tab = pd.DatetimeIndex(_int_to_month(np.arange(lo, hi + 1))).strftime("%Y-%m,")
    tab = np.array([t.encode("ascii") for t in tab], dtype="S8").view(np.uint8).reshape(-1, 8)
    buf = tab[mi - lo].tobytes()
    seg = np.flatnonzero(np.r_[True, w[1:] != w[:-1]])
    ends = np.r_[seg[1:], w.size]
    out[w[seg]] = [buf[8 * a:8 * b - 1].decode("ascii") for a, b in zip(seg.tolist(), ends.tolist())]
    return out


def _median3(a: np.ndarray, b: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Element-wise median of three arrays (NaN propagates)."""
    return np.maximum(np.minimum(a, b), np.minimum(np.maximum(a, b), c))


def _month_int(month: pd.Series | np.ndarray) -> np.ndarray:
    """Months since 1970-01 of datetimes (NaT gives the int64 minimum, as numpy's cast).

    Large arrays go through days and a month-per-day table over their span (numpy's
    datetime-to-month cast is about five times slower); same result.
    """
    m = np.asarray(month)
    if m.dtype.kind == "M" and m.size >= 4096:
        d = m.astype("datetime64[D]").view(np.int64)
        nat = d == np.iinfo(np.int64).min
        has_nat = bool(nat.any())
        dv = d[~nat] if has_nat else d
        if dv.size:
            lo, hi = int(dv.min()), int(dv.max())
            if hi - lo <= 400_000:  # about 1,100 years of days
                table = np.arange(lo, hi + 1).astype("datetime64[D]").astype("datetime64[M]").astype(np.int64)
                if not has_nat:
                    return table[d - lo]
                out = np.full(d.shape, np.iinfo(np.int64).min)
                out[~nat] = table[dv - lo]
                return out
    return np.asarray(m, dtype="datetime64[M]").astype(np.int64)


def _month_days(mi: np.ndarray) -> np.ndarray:
    """Days since 1970-01-01 of the first day of integer months (months since 1970-01)."""
    mi = np.asarray(mi, dtype=np.int64)
    if mi.size >= 4096:
        lo, hi = int(mi.min()), int(mi.max())
        if hi - lo <= 20_000:
            table = np.arange(lo, hi + 1).astype("datetime64[M]").astype("datetime64[D]").astype(np.int64)
            return table[mi - lo]
    return mi.astype("datetime64[M]").astype("datetime64[D]").astype(np.int64)


def _int_to_month(mi: np.ndarray) -> np.ndarray:
    out = np.asarray(mi, dtype=np.float64)
    ok = np.isfinite(out)
    res = np.full(out.shape, np.datetime64("NaT"), dtype="datetime64[ns]")
    res[ok] = out[ok].astype(np.int64).astype("datetime64[M]").astype("datetime64[ns]")
    return res


def _regime_per_well(regime_start, wells: pd.Index) -> np.ndarray:
    """Stage tracker's regime start per well as integer months (NaN when none)."""
    out = np.full(len(wells), np.nan)
    if regime_start is None:
        return out
    if isinstance(regime_start, pd.DataFrame):
        if not {"well_id", "regime_start"} <= set(regime_start.columns):
            raise InputError("regime_start table needs columns well_id and regime_start")
        s = regime_start.set_index("well_id")["regime_start"]
    elif isinstance(regime_start, pd.Series):
        s = regime_start
    else:
        s = pd.Series(dict(regime_start))
    s = pd.to_datetime(s, errors="coerce")
    s = s[~s.index.duplicated(keep="last")].reindex(wells)
    ok = s.notna().to_numpy()
    out[ok] = _month_int(s[ok].to_numpy())
    return out


def _override_lookup(overrides, wells: pd.Index, stream: str):
    """Per-well override objects for one stream; a key (well_id, stream) beats well_id."""
    res: dict[int, WellOverride] = {}
    if not overrides:
        return res
    pos = pd.Series(np.arange(len(wells)), index=wells)
    for key, ov in overrides.items():
        if not isinstance(ov, WellOverride):
            raise InputError(f"override for {key!r} must be a WellOverride, got {type(ov).__name__}")
        if isinstance(key, tuple):
            wid, st = key
            if st != stream:
                continue
        else:
            wid = key
            if (wid, stream) in overrides:
                continue
        if wid in pos.index:
            res[int(pos[wid])] = ov
    return res


def _step_starts(w, lr, mi, k, ratio, n_wells):
    """Last sustained step up per well: median ln-rate of the next k producing months over
    that of the previous k exceeds ln(ratio). Integer month, NaN when none."""
    out = np.full(n_wells, -np.inf)
    n = lr.size
    if n < 2 * k:
        return np.full(n_wells, np.nan)
    first = np.r_[True, w[1:] != w[:-1]]
    start_idx = np.maximum.accumulate(np.where(first, np.arange(n), 0))
    pos = np.arange(n) - start_idx
    counts = np.bincount(w, minlength=n_wells)
    n_in = counts[w]
    if k == 3:  # median of lr[i-2 .. i]
        roll = np.full(n, np.nan)
        roll[2:] = _median3(lr[:-2], lr[1:-1], lr[2:])
    else:
        roll = pd.Series(lr).rolling(k).median().to_numpy()  # median of lr[i-k+1 .. i]
    prev = np.full(n, np.nan)
    prev[1:] = roll[:-1]
    prev[pos < k] = np.nan
    nxt = np.full(n, np.nan)
    nxt[: n - k + 1] = roll[k - 1:]
    nxt[pos + k > n_in] = np.nan
    step = (nxt - prev) > np.log(ratio)
    # overlapping windows flag a run of months around one jump: keep the run's first month
    step[1:] &= ~(step[:-1] & ~first[1:])
    if step.any():
        np.maximum.at(out, w[step], mi[step].astype(float))
    out[~np.isfinite(out)] = np.nan
    return out


def fit_field(
    production: pd.DataFrame,
    *,
    regime_start=None,
    settings: DeclineSettings | None = None,
    overrides: Mapping | None = None,
) -> FieldFit:
    """Fit the Arps families to every well and stream of a field in one batched pass.

    Parameters
    ----------
    production : DataFrame
        The loader's tidy monthly table (DEVELOPERS.md): ``well_id``, ``month``, ``days_on``,
        ``days_in_month``, ``oil_rate_bbl_d``, ``gas_rate_mcf_d`` (producing-day rates). Not
        modified.
    regime_start : Series, DataFrame or mapping, optional
        First month of each well's current decline regime from the stage tracker (Series
        indexed by well_id, a table with ``well_id`` and ``regime_start``, or a dict); NaT
        for none.
    settings : DeclineSettings, optional
        Engine settings; defaults as documented there.
    overrides : mapping, optional
        ``well_id`` or ``(well_id, stream)`` -> :class:`WellOverride`.

    Returns
    -------
    FieldFit
        ``fits`` (one row per well and stream, every well of the table) and ``candidates``.

    Notes
    -----
    Fit window (per well and stream): producing months (rate > 0, days_on > 0, uptime >=
    ``min_uptime_fraction``) from the peak of the 3-month running median of the rate, the
    peak searched from the later of the stage tracker's regime start and the last
    sustained step up in rate (workover), to the last producing month. t = 0 at the start
    of the ``fit_start`` month; each month's rate sits at mid-month. Arps (1945) families
    fitted on ln q with a robust loss by a batched Levenberg-Marquardt over all wells
    (exact derivatives, per-well damping, bounds 0 <= b <= b_max); the family with the
    lowest criterion (AICc by default, Hurvich & Tsai 1989) is chosen unless overridden.
    Wells whose exponential fit declines slower than ``min_decline_nominal`` are
    "no_decline": forecast by the conservative rule of an exponential at the terminal
    decline from the geometric-mean rate of their last 3 producing months.
    """
    st = settings or DeclineSettings()
    if not isinstance(production, pd.DataFrame):
        raise InputError("production must be the loader's monthly table (a DataFrame)")
    need = {"well_id", "month"}
    if not need <= set(production.columns):
        raise InputError(f"production table lacks columns {sorted(need - set(production.columns))}")
    df, wells, wcode, mi_all = sorted_well_codes(production)
    n_wells = len(wells)
    dim = (df["days_in_month"].to_numpy(float) if "days_in_month" in df
           else pd.to_datetime(df["month"]).dt.days_in_month.to_numpy(float))
    days_on = df["days_on"].to_numpy(float) if "days_on" in df else dim.copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        uptime = np.where(dim > 0, days_on / dim, 0.0)
    rs_stage = _regime_per_well(regime_start, wells)
    messages: list[str] = []
    if overrides:
        known = set(wells)
        unknown = sorted({str(k[0] if isinstance(k, tuple) else k) for k in overrides
                          if (k[0] if isinstance(k, tuple) else k) not in known})
        if unknown:
            messages.append("overrides for wells not in the table were not applied: " + ", ".join(unknown))
    kw = dict(b_max=st.b_max, loss=st.loss, scale=st.loss_scale, max_iter=st.max_iter, tol=st.tol)
    fit_tables, cand_tables = [], []
    for stream in st.streams:
        rate_col, vol_col = _STREAM_COLS[stream]
        if rate_col in df:
            rate = df[rate_col].to_numpy(float)
        elif vol_col in df:
            with np.errstate(divide="ignore", invalid="ignore"):
                rate = df[vol_col].to_numpy(float) / days_on
        else:
            continue
        if stream == "gas" and not np.isfinite(rate).any():
            continue  # the file has no gas column
        ovs = _override_lookup(overrides, wells, stream)
        # blocks of wells bound the memory of the per-row work arrays on very large fields
        for w0 in range(0, n_wells, st.block_wells):
            w1 = min(w0 + st.block_wells, n_wells)
            r0, r1 = np.searchsorted(wcode, [w0, w1])
            ovs_b = {k - w0: v for k, v in ovs.items() if w0 <= k < w1}
            fres = _fit_stream(stream, wells[w0:w1], wcode[r0:r1] - w0, mi_all[r0:r1], rate[r0:r1],
                               days_on[r0:r1], uptime[r0:r1], dim[r0:r1], rs_stage[w0:w1], ovs_b, st, kw)
            fit_tables.append(fres[0])
            cand_tables.append(fres[1])
    fits = (pd.concat(fit_tables, ignore_index=True) if fit_tables
            else pd.DataFrame({c: [] for c in FIT_COLUMNS}))
    cands = (pd.concat(cand_tables, ignore_index=True) if cand_tables
             else pd.DataFrame({c: [] for c in CANDIDATE_COLUMNS}))
    return FieldFit(fits=fits[FIT_COLUMNS], candidates=cands[CANDIDATE_COLUMNS], settings=st,
                    messages=tuple(messages))


def _fit_stream(stream, wells, wcode, mi_all, rate, days_on, uptime, dim, rs_stage, ovs, st, kw):
    n_wells = len(wells)
    finite = np.isfinite(rate)
    valid = finite & (rate > 0) & (days_on > 0) & (uptime >= st.min_uptime_fraction)
    # ---- overrides as arrays
    ov_start = np.full(n_wells, np.nan)
    ov_end = np.full(n_wells, np.nan)
    forced = np.full(n_wells, -1)
    fixed_b = np.full(n_wells, np.nan)
    ov_text = np.full(n_wells, "", dtype=object)
    excl_rows = np.zeros(rate.size, dtype=bool)
    if ovs:
        excl_pairs = []
        for wi_, ov in ovs.items():
            if ov.fit_start is not None:
                ov_start[wi_] = _month_int(np.array([ov.fit_start.to_datetime64()]))[0]
            if ov.fit_end is not None:
                ov_end[wi_] = _month_int(np.array([ov.fit_end.to_datetime64()]))[0]
            if ov.b is not None:
                fixed_b[wi_] = min(float(ov.b), st.b_max)
                forced[wi_] = 0 if ov.b == 0 else (1 if ov.b == 1 else 2)
            if ov.model is not None:
                forced[wi_] = MODEL_NAMES.index(ov.model)
            ov_text[wi_] = ov.describe()
            for m in ov.exclude_months:
                excl_pairs.append((wi_, _month_int(np.array([m.to_datetime64()]))[0]))
        if excl_pairs:
            key_all = wcode.astype(np.int64) * 100000 + mi_all
            key_ex = np.array([a * 100000 + b for a, b in excl_pairs], dtype=np.int64)
            excl_rows = np.isin(key_all, key_ex)
    # ---- regime start: stage tracker and detected step up
    vi = np.flatnonzero(valid)
    w_v, mi_v, lr_v = wcode[vi], mi_all[vi], np.log(rate[vi])
    if st.detect_step_changes:
        rs_step = _step_starts(w_v, lr_v, mi_v, st.step_window_months, st.step_up_ratio, n_wells)
    else:
        rs_step = np.full(n_wells, np.nan)
    rs = np.fmax(rs_stage, rs_step)
    src = np.where(np.isnan(rs), "none", np.where(rs == rs_stage, "stage tracker", "step change"))
    # ---- peak of the 3-month running median at or after the regime start
    sm = np.full(lr_v.size, np.nan)
    if lr_v.size >= 3:
        sm[1:-1] = _median3(lr_v[:-2], lr_v[1:-1], lr_v[2:])
    first = np.r_[True, w_v[1:] != w_v[:-1]] if w_v.size else np.zeros(0, bool)
    last = np.r_[w_v[1:] != w_v[:-1], True] if w_v.size else np.zeros(0, bool)
    sm = np.where(first | last | ~np.isfinite(sm), lr_v, sm)
    after = ~(mi_v < np.nan_to_num(rs[w_v], nan=-1e18))
    peak = np.full(n_wells, np.nan)
    if after.any():
        # first month of each well's largest running median (rows sorted by well and month)
        w_a, sm_a, mi_a = w_v[after], sm[after], mi_v[after]
        seg = np.flatnonzero(np.r_[True, w_a[1:] != w_a[:-1]])
        mx = np.maximum.reduceat(sm_a, seg)
        cnt = np.diff(np.r_[seg, w_a.size])
        hit = np.flatnonzero(sm_a == np.repeat(mx, cnt))
        first_hit = hit[np.r_[True, w_a[hit[1:]] != w_a[hit[:-1]]]]
        peak[w_a[first_hit]] = mi_a[first_hit]
    last_valid = np.full(n_wells, np.nan)
    if vi.size:
        last_valid[w_v[last]] = mi_v[last]  # rows sorted by well and month: the last row
    fs = np.where(np.isfinite(ov_start), ov_start, peak)
    fe = np.where(np.isfinite(ov_end), ov_end, last_valid)
    src = np.where(np.isfinite(ov_start), "override", src)
    # ---- window rows
    fs_r, fe_r = fs[wcode], fe[wcode]
    in_win = (mi_all >= fs_r) & (mi_all <= fe_r)
    use = valid & in_win & ~excl_rows
    n_used = np.bincount(wcode[use], minlength=n_wells)
    n_in_win = np.bincount(wcode[in_win], minlength=n_wells)
    # months since fit_start to mid-month, in years (calendar days / 365.25)
    fs_days = _month_days(np.where(np.isfinite(fs), fs, 0).astype(np.int64))
    m_days = _month_days(mi_all)
    t_all = (m_days - fs_days[wcode] + dim / 2.0) / DAYS_PER_YEAR
    # ---- batch the fittable wells, sorted by length, in chunks
    status = np.full(n_wells, "", dtype=object)
    fittable = n_used >= st.min_months
    n_any = np.bincount(wcode[finite & (rate > 0)], minlength=n_wells)
    status[n_any == 0] = "not fitted: no positive rates"
    few = (~fittable) & (n_any > 0)
    status[few] = [f"not fitted: {k} usable months in the fit window, at least {st.min_months} needed"
                   for k in n_used[few]]
    fw = np.flatnonzero(fittable)
    order = fw[np.argsort(n_used[fw], kind="stable")]
    cs = st.chunk_wells
    workers = _resolve_workers(st.workers, fw.size, cs)
    if workers > 1 and fw.size > 0:
        cs = min(cs, max(256, -(-fw.size // (6 * workers))))
    chunk_of = np.full(n_wells, -1)
    row_of = np.full(n_wells, -1)
    chunk_of[order] = np.arange(order.size) // cs
    row_of[order] = np.arange(order.size) % cs
    ur = np.flatnonzero(use & fittable[wcode])
    ckey = chunk_of[wcode[ur]]
    # stable sort by chunk; a 16-bit key takes numpy's radix sort (linear time)
    srt = np.argsort(ckey.astype(np.int16) if ckey.size and ckey.max() < 32767 else ckey, kind="stable")
    ur, ckey = ur[srt], ckey[srt]
    del srt
    wc_u = wcode[ur]
    first_u = np.r_[True, wc_u[1:] != wc_u[:-1]] if ur.size else np.zeros(0, bool)
    sidx = np.maximum.accumulate(np.where(first_u, np.arange(ur.size), 0)) if ur.size else ur
    pos_u = np.arange(ur.size) - sidx
    del first_u, sidx
    n_chunks = -(-order.size // cs) if order.size else 0
    bounds = np.searchsorted(ckey, np.arange(n_chunks + 1))
    chunks = []
    for c in range(n_chunks):
        rows = ur[bounds[c]:bounds[c + 1]]
        wells_c = order[c * cs:(c + 1) * cs]
        k, m = wells_c.size, int(n_used[wells_c].max())
        # flat position of each row in the padded (k, m) arrays
        lin = row_of[wc_u[bounds[c]:bounds[c + 1]]] * m + pos_u[bounds[c]:bounds[c + 1]]
        T = np.zeros((k, m))
        Y = np.zeros((k, m))
        W = np.zeros((k, m))
        MI = np.full((k, m), -1, dtype=np.int64)
        T.reshape(-1)[lin] = t_all[rows]
        Y.reshape(-1)[lin] = np.log(rate[rows])
        W.reshape(-1)[lin] = 1.0
        MI.reshape(-1)[lin] = mi_all[rows]
        chunks.append({"t": T, "y": Y, "w": W, "mi": MI, "wells": wells_c, "fixed_b": fixed_b[wells_c],
                       "downweight_below": st.downweight_below})
    results = _run_chunks(chunks, kw, workers)
    # ---- gather per well
    theta = {f: np.full((n_wells, 3), np.nan) for f in MODEL_NAMES}
    gat = {f: {k: np.full(n_wells, np.nan) for k in ("cost", "sse", "wsse", "n_iter", "converged")} for f in MODEL_NAMES}
    dw_w, dw_m = [], []
    for c, res in zip(chunks, results):
        wc = c["wells"]
        for f in MODEL_NAMES:
            theta[f][wc] = res[f]["theta"]
            for k in gat[f]:
                gat[f][k][wc] = res[f][k]
        c["res"] = res
    crit_all = np.full((n_wells, 3), np.nan)
    choice = np.full(n_wells, -1)
    if fw.size:
        fams_w = {f: {"wsse": gat[f]["wsse"][fw]} for f in MODEL_NAMES}
        crit, ch = _choose(fams_w, n_used[fw], st.criterion, forced[fw], fixed_b[fw])
        crit_all[fw] = crit
        choice[fw] = ch
    # down-weighted months of the chosen family
    if st.loss != "linear":
        for c in chunks:
            wc = c["wells"]
            chc = choice[wc]
            low = np.stack([c["res"][f]["low_weight"] for f in MODEL_NAMES])  # (3, k, m)
            lsel = low[chc, np.arange(wc.size)]
            rr, pp = np.nonzero(lsel & (c["w"] > 0))
            dw_w.append(wc[rr])
            dw_m.append(c["mi"][rr, pp])
    dw_w = np.concatenate(dw_w) if dw_w else np.zeros(0, int)
    dw_m = np.concatenate(dw_m) if dw_m else np.zeros(0, np.int64)
    n_dw = np.bincount(dw_w, minlength=n_wells)
    dw_text = np.full(n_wells, "", dtype=object)
    if dw_w.size:
        dw_text = _joined_month_labels(dw_w, dw_m, dw_text)
    # ---- chosen parameters
    qi = np.full(n_wells, np.nan)
    di = np.full(n_wells, np.nan)
    bb = np.full(n_wells, np.nan)
    model = np.full(n_wells, "", dtype=object)
    sse = np.full(n_wells, np.nan)
    rcost = np.full(n_wells, np.nan)
    conv = np.zeros(n_wells, dtype=bool)
    n_it = np.zeros(n_wells, dtype=int)
    for j, f in enumerate(MODEL_NAMES):
        sel = choice == j
        qi[sel] = np.exp(theta[f][sel, 0])
        di[sel] = np.exp(theta[f][sel, 1])
        bb[sel] = theta[f][sel, 2]
        model[sel] = f
        sse[sel] = gat[f]["sse"][sel]
        rcost[sel] = gat[f]["cost"][sel]
        conv[sel] = gat[f]["converged"][sel] > 0
        n_it[sel] = gat[f]["n_iter"][sel]
    crit_val = np.where(choice >= 0, crit_all[np.arange(n_wells), np.maximum(choice, 0)], np.nan)
    status[fittable] = "ok"
    # no decline: exponential candidate flatter than the threshold (and no forced model)
    flat = fittable & (np.exp(theta["exponential"][:, 1]) < st.min_decline_nominal) & (forced < 0)
    # rising: enough producing months since the regime start but the peak is too recent
    n_after = np.bincount(w_v[after], minlength=n_wells) if w_v.size else np.zeros(n_wells, int)
    rising = (~fittable) & (n_used >= 1) & (n_after >= st.min_months) & ~np.isfinite(ov_start)
    flat |= rising
    fs_out = fs.copy()
    if flat.any():
        # conservative rule: exponential at the terminal decline from the geometric-mean
        # rate of the last 3 months used, placed at the start of that 3-month span
        uu = np.flatnonzero(use & flat[wcode])
        wu = wcode[uu]
        lastn = np.r_[wu[1:] != wu[:-1], True]
        rank_from_end = np.zeros(uu.size, dtype=int)
        # position from the end within each well
        cnt = np.bincount(wu, minlength=n_wells)
        first_u2 = np.r_[True, wu[1:] != wu[:-1]]
        start2 = np.maximum.accumulate(np.where(first_u2, np.arange(uu.size), 0))
        rank_from_end = cnt[wu] - 1 - (np.arange(uu.size) - start2)
        tail = rank_from_end < 3
        del lastn
        s_lr = np.bincount(wu[tail], weights=np.log(rate[uu[tail]]), minlength=n_wells)
        n_t = np.bincount(wu[tail], minlength=n_wells)
        first_tail = np.full(n_wells, np.nan)
        ft = tail & (rank_from_end == np.minimum(cnt[wu], 3) - 1)  # first of the last 3 rows
        first_tail[wu[ft]] = mi_all[uu[ft]]
        fl = np.flatnonzero(flat)
        qi[fl] = np.exp(s_lr[fl] / n_t[fl])
        di[fl] = st.d_lim_nominal
        bb[fl] = 0.0
        model[fl] = "exponential"
        fs_out[fl] = first_tail[fl]
        status[fl] = ("no_decline: rates flat or rising over the fit window; forecast at the "
                      "terminal decline from the recent mean rate (conservative rule)")
        forecastable = fittable | flat
    else:
        forecastable = fittable
    bad_conv = fittable & ~flat & ~conv
    status[bad_conv] = "ok (solver stopped at the iteration cap)"
    fits = pd.DataFrame({
        "well_id": wells.to_numpy(),
        "stream": stream,
        "status": status,
        "forecastable": forecastable,
        "model": model,
        "qi": qi,
        "di": di,
        "b": bb,
        "fit_start": _int_to_month(fs_out),
        "fit_end": _int_to_month(np.where(forecastable | np.isfinite(ov_end), fe, np.nan)),
        "peak_month": _int_to_month(peak),
        "regime_start": _int_to_month(rs),
        "regime_source": src,
        "n_months_used": n_used,
        "n_months_excluded": n_in_win - n_used,
        "n_months_down_weighted": n_dw,
        "months_down_weighted": dw_text,
        "sse_log": sse,
        "rmse_log": np.sqrt(sse / np.maximum(n_used, 1)),
        "robust_cost": rcost,
        "criterion": st.criterion,
        "criterion_value": crit_val,
        "converged": conv,
        "n_iter": n_it,
        "override": ov_text,
    })
    # candidates: one row per fitted well and family, sorted by well and family
    cols = {"qi": [], "di": [], "b": [], "n_params": [], "sse_log": [], "rmse_log": [], "robust_cost": [],
            "criterion_value": [], "converged": [], "chosen": []}
    for j, f in enumerate(MODEL_NAMES):
        th = theta[f][fw]
        cols["qi"].append(np.exp(th[:, 0]))
        cols["di"].append(np.exp(th[:, 1]))
        cols["b"].append(th[:, 2])
        cols["n_params"].append(np.where(np.isfinite(fixed_b[fw]), 2, 3) if f == "hyperbolic"
                                else np.full(fw.size, 2))
        cols["sse_log"].append(gat[f]["sse"][fw])
        cols["rmse_log"].append(np.sqrt(gat[f]["sse"][fw] / np.maximum(n_used[fw], 1)))
        cols["robust_cost"].append(gat[f]["cost"][fw])
        cols["criterion_value"].append(crit_all[fw, j])
        cols["converged"].append(gat[f]["converged"][fw] > 0)
        cols["chosen"].append(choice[fw] == j)
    ids = wells.to_numpy()[fw]
    if fw.size and list(MODEL_NAMES) == sorted(MODEL_NAMES) and wells.is_monotonic_increasing and wells.is_unique:
        # the wells are sorted and unique (sorted_well_codes) and the family names are in
        # sorted order: the sorted table interleaves the families per well, no sort needed
        cands = pd.DataFrame({
            "well_id": np.repeat(ids, len(MODEL_NAMES)), "stream": stream,
            "family": np.tile(np.array(MODEL_NAMES, dtype=object), fw.size),
            **{k: np.column_stack(v).reshape(-1) for k, v in cols.items()},
        })
        return fits, cands
    parts = [pd.DataFrame({"well_id": ids, "stream": stream, "family": f,
                           **{k: v[j] for k, v in cols.items()}}) for j, f in enumerate(MODEL_NAMES)]
    cands = pd.concat(parts, ignore_index=True).sort_values(["well_id", "family"], kind="stable")
    return fits, cands.reset_index(drop=True)
