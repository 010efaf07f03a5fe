"""Solution-gas-drive material-balance predictor for a volumetric oil reservoir.

A volumetric reservoir with no initial gas cap and no water influx, from an initial pressure
at or above the bubble point down to an abandonment pressure:

* above the bubble point the oil, connate water and rock expand (closed form);
* below it, dissolved gas comes out of solution; the recovery is found step by step by
  Tarner's method, and independently by integrating Muskat's differential equation.

Everything works on a :class:`PvtTable` (black-oil properties tabulated in pressure and
interpolated), so a laboratory table or a correlation table (``core.pvt.black_oil_table``)
can be used alike. Quantities are per stock-tank barrel of oil initially in place (N = 1)
unless ``n_stb`` is given.
"""

from __future__ import annotations

from bisect import bisect_right
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from core.relperm import CoreyGasOil
from core.validation import check_positive, check_range

__all__ = [
    "PvtTable",
    "DepletionPrediction",
    "undersaturated_recovery",
    "oil_saturation",
    "instantaneous_gor",
    "predict_depletion",
    "material_balance_closure",
]

# Smallest oil relative permeability used in krg/kro, so that R stays finite as So -> Sorg.
_KRO_FLOOR = 1e-12

# Columns of a predictor table (DepletionPrediction.table)
PREDICTION_COLUMNS = (
    "p_psia", "np_over_n", "gp_over_n_scf_stb", "np_stb", "gp_scf", "so", "sg", "sw",
    "krg", "kro", "rs_scf_stb", "bo_bbl_stb", "bg_bbl_scf", "mu_o_cp", "mu_g_cp",
    "producing_gor_scf_stb", "stage",
)


# --------------------------------------------------------------------------------------
# PVT table
# --------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class PvtTable:
    """Black-oil properties tabulated in pressure, interpolated for the predictor.

    Attributes
    ----------
    p_psia : ndarray
        Pressures, strictly increasing. [psia]
    bo_bbl_stb, rs_scf_stb, mu_o_cp : ndarray
        Oil formation volume factor [bbl/STB], solution GOR [scf/STB], oil viscosity [cP].
    bg_bbl_scf, mu_g_cp : ndarray
        Gas formation volume factor [bbl/scf] and gas viscosity [cP]; may be NaN above the
        bubble point, where no free gas exists.
    pb_psia : float
        Bubble point pressure. [psia]

    Notes
    -----
    Bo, Rs, mu_o and mu_g are interpolated linearly in pressure; Bg is interpolated through
    1/Bg, which is nearly linear in pressure (1/Bg is proportional to p/z). Pressures outside
    the table are not extrapolated: the predictor refuses them.
    """

    p_psia: np.ndarray
    bo_bbl_stb: np.ndarray
    rs_scf_stb: np.ndarray
    bg_bbl_scf: np.ndarray
    mu_o_cp: np.ndarray
    mu_g_cp: np.ndarray
    pb_psia: float

    def __post_init__(self) -> None:
        p = check_positive("p_psia", self.p_psia, unit="psia")
        if p.ndim != 1 or p.size < 2:
            raise ValueError(f"p_psia must hold at least 2 pressures, got {p.size}")
        if np.any(np.diff(p) <= 0):
            raise ValueError("p_psia must be strictly increasing")
        n = p.size
        arrays = {}
        for name in ("bo_bbl_stb", "rs_scf_stb", "bg_bbl_scf", "mu_o_cp", "mu_g_cp"):
            a = np.asarray(getattr(self, name), dtype=float)
            if a.shape != (n,):
                raise ValueError(f"{name} must have {n} values like p_psia, got shape {a.shape}")
            arrays[name] = a
        pb = float(check_range("pb_psia", self.pb_psia, p[0], p[-1], unit="psia"))
        below = p <= pb + 1e-9
        check_range("bo_bbl_stb", arrays["bo_bbl_stb"], 0.0, None, lo_open=True, unit="bbl/STB")
        check_range("rs_scf_stb", arrays["rs_scf_stb"], 0.0, None, unit="scf/STB")
        check_positive("mu_o_cp", arrays["mu_o_cp"], unit="cP")
        check_positive("bg_bbl_scf at and below the bubble point", arrays["bg_bbl_scf"][below], unit="bbl/scf")
        check_positive("mu_g_cp at and below the bubble point", arrays["mu_g_cp"][below], unit="cP")
        object.__setattr__(self, "p_psia", p.copy())
        for name, a in arrays.items():
            object.__setattr__(self, name, a.copy())
        object.__setattr__(self, "pb_psia", pb)

    # -- constructors -------------------------------------------------------------------
    @classmethod
    def from_frame(cls, frame: pd.DataFrame, *, pb_psia: float) -> "PvtTable":
        """Build from a frame with the columns of ``core.pvt.black_oil_table``.

        Columns used: ``p_psia``, ``bo_bbl_stb``, ``rs_scf_stb``, ``bg_bbl_scf``, ``mu_o_cp``,
        ``mu_g_cp``; rows are sorted by pressure and duplicate pressures dropped.
        """
        need = ["p_psia", "bo_bbl_stb", "rs_scf_stb", "bg_bbl_scf", "mu_o_cp", "mu_g_cp"]
        missing = [c for c in need if c not in frame.columns]
        if missing:
            raise ValueError(f"PVT frame lacks columns {missing}")
        f = frame[need].astype(float).sort_values("p_psia").drop_duplicates("p_psia")
        return cls(*(f[c].to_numpy() for c in need), pb_psia=pb_psia)

    @classmethod
    def from_correlations(
        cls,
        *,
        api: float,
        gamma_g: float,
        t_f: float,
        p_max_psia: float,
        pb_psia: float | None = None,
        rsb_scf_stb: float | None = None,
        p_min_psia: float = 14.7,
        n_points: int = 241,
        method: str = "standing",
    ) -> "PvtTable":
        """Tabulate ``core.pvt.black_oil_table`` between ``p_min_psia`` and ``p_max_psia``.

        Give ``pb_psia`` or ``rsb_scf_stb`` (the other follows from the correlation). The
        grid holds the bubble point exactly. See :mod:`core.pvt` for the correlations.
        """
        from core.pvt import black_oil_table  # imported here: core.pvt is a sibling module

        if (pb_psia is None) == (rsb_scf_stb is None):
            raise ValueError("give exactly one of pb_psia and rsb_scf_stb")
        if pb_psia is None:
            probe = black_oil_table(np.array([p_max_psia]), api=api, gamma_g=gamma_g, t_f=t_f,
                                    rsb_scf_stb=rsb_scf_stb, method=method)
            pb_psia = float(probe.attrs["pb_psia"])
        check_range("p_min_psia", p_min_psia, 0.0, pb_psia, lo_open=True, unit="psia")
        check_range("p_max_psia", p_max_psia, pb_psia, None, unit="psia")
        n_points = int(check_range("n_points", n_points, 10, 100000))
        n_below = max(int(n_points * 0.85), 10)
        grid = np.linspace(p_min_psia, pb_psia, n_below)
        if p_max_psia > pb_psia:
            n_above = max(n_points - n_below, 3)
            grid = np.concatenate([grid, np.linspace(pb_psia, p_max_psia, n_above)[1:]])
        frame = black_oil_table(grid, api=api, gamma_g=gamma_g, t_f=t_f, pb_psia=pb_psia, method=method)
        return cls.from_frame(frame, pb_psia=pb_psia)

    # -- evaluation ---------------------------------------------------------------------
    def _seg(self, p: np.ndarray) -> np.ndarray:
        return np.clip(np.searchsorted(self.p_psia, p, side="right") - 1, 0, self.p_psia.size - 2)

    def at(self, p_psia: ArrayLike) -> dict[str, np.ndarray]:
        """Interpolated properties at ``p_psia`` (inside the table): bo, rs, bg, mu_o, mu_g."""
        p = np.asarray(p_psia, dtype=float)
        tab = self.p_psia
        inv_bg = np.interp(p, tab, 1.0 / self.bg_bbl_scf) if np.all(np.isfinite(self.bg_bbl_scf)) else None
        if inv_bg is None:
            ok = np.isfinite(self.bg_bbl_scf)
            inv_bg = np.interp(p, tab[ok], 1.0 / self.bg_bbl_scf[ok])
            okm = np.isfinite(self.mu_g_cp)
            mu_g = np.interp(p, tab[okm], self.mu_g_cp[okm])
        else:
            mu_g = np.interp(p, tab, self.mu_g_cp)
        return {
            "bo": np.interp(p, tab, self.bo_bbl_stb),
            "rs": np.interp(p, tab, self.rs_scf_stb),
            "bg": 1.0 / inv_bg,
            "mu_o": np.interp(p, tab, self.mu_o_cp),
            "mu_g": mu_g,
        }

    def slopes(self, p_psia: ArrayLike) -> dict[str, np.ndarray]:
        """Pressure derivatives of the interpolants: dbo, drs [1/psia units], dinv_bg."""
        p = np.asarray(p_psia, dtype=float)
        ok = np.isfinite(self.bg_bbl_scf)
        out = {}
        i = self._seg(p)
        dp = self.p_psia[i + 1] - self.p_psia[i]
        out["dbo"] = (self.bo_bbl_stb[i + 1] - self.bo_bbl_stb[i]) / dp
        out["drs"] = (self.rs_scf_stb[i + 1] - self.rs_scf_stb[i]) / dp
        pg = self.p_psia[ok]
        ig = 1.0 / self.bg_bbl_scf[ok]
        j = np.clip(np.searchsorted(pg, p, side="right") - 1, 0, pg.size - 2)
        out["dinv_bg"] = (ig[j + 1] - ig[j]) / (pg[j + 1] - pg[j])
        return out


# --------------------------------------------------------------------------------------
# Closed-form pieces
# --------------------------------------------------------------------------------------
def _effective_pore_compressibility(swi: float, cf: float, cw: float) -> float:
    """(cw Swi + cf)/(1 - Swi): water and rock expansion per unit hydrocarbon volume [1/psi]."""
    return (cw * swi + cf) / (1.0 - swi)


def undersaturated_recovery(
    p_psia: ArrayLike,
    *,
    pi_psia: float,
    bo_bbl_stb: ArrayLike,
    boi_bbl_stb: float,
    swi: float,
    cf_1_psi: float,
    cw_1_psi: float,
) -> np.ndarray:
    """Recovery factor Np/N of an undersaturated volumetric reservoir at pressure ``p``.

    Parameters
    ----------
    p_psia : array_like
        Average reservoir pressure, between the bubble point and ``pi_psia``. [psia]
    pi_psia : float
        Initial reservoir pressure. [psia]
    bo_bbl_stb : array_like
        Oil formation volume factor at ``p``. [bbl/STB]
    boi_bbl_stb : float
        Oil formation volume factor at ``pi``. [bbl/STB]
    swi : float
        Initial (connate) water saturation. [-]
    cf_1_psi, cw_1_psi : float
        Pore (formation) and water compressibility. [1/psi]

    Returns
    -------
    np_over_n : ndarray
        Cumulative oil produced per stock-tank barrel initially in place. [-]

    Notes
    -----
    Material balance above the bubble point with rock and water expansion (Ahmed, eq. for
    undersaturated oil reservoirs [1]_; Dake [2]_ ch. 3):

    Np/N = (Boi/Bo) [(Bo - Boi)/Boi + (cw Swi + cf)(pi - p)/(1 - Swi)].

    References
    ----------
    .. [1] T. Ahmed, *Reservoir Engineering Handbook*, Gulf Professional Publishing,
       chapter on oil reservoir performance (undersaturated oil reservoirs).
    .. [2] L. P. Dake, *Fundamentals of Reservoir Engineering*, Elsevier, 1978, ch. 3.
    """
    p = check_positive("p_psia", p_psia, unit="psia")
    check_positive("pi_psia", pi_psia, unit="psia")
    if np.any(p > pi_psia + 1e-9):
        raise ValueError(f"p_psia must not exceed pi_psia = {pi_psia:g} psia")
    bo = check_positive("bo_bbl_stb", bo_bbl_stb, unit="bbl/STB")
    boi = float(check_positive("boi_bbl_stb", boi_bbl_stb, unit="bbl/STB"))
    check_range("swi", swi, 0.0, 1.0, hi_open=True)
    check_range("cf_1_psi", cf_1_psi, 0.0, 1e-3, unit="1/psi")
    check_range("cw_1_psi", cw_1_psi, 0.0, 1e-3, unit="1/psi")
    c_eff = _effective_pore_compressibility(swi, cf_1_psi, cw_1_psi)
    return (boi / bo) * ((bo - boi) / boi + c_eff * (pi_psia - p))


def oil_saturation(
    np_over_n: ArrayLike,
    *,
    bo_bbl_stb: ArrayLike,
    boi_bbl_stb: float,
    swi: float,
    cf_1_psi: float = 0.0,
    dp_psia: ArrayLike = 0.0,
) -> np.ndarray:
    """Oil saturation of a volumetric reservoir after producing ``np_over_n`` of its oil.

    Parameters
    ----------
    np_over_n : array_like
        Recovery factor Np/N, in [0, 1). [-]
    bo_bbl_stb : array_like
        Oil formation volume factor at the current pressure. [bbl/STB]
    boi_bbl_stb : float
        Oil formation volume factor at the initial pressure. [bbl/STB]
    swi : float
        Initial water saturation. [-]
    cf_1_psi : float, optional
        Pore compressibility; 0 (the default) gives the textbook form. [1/psi]
    dp_psia : array_like, optional
        Pressure drop from the initial pressure, used with ``cf_1_psi``. [psia]

    Returns
    -------
    so : ndarray
        Oil saturation, fraction of the current pore volume. [-]

    Notes
    -----
    So = (1 - Swi)(1 - Np/N)(Bo/Boi) (Ahmed [1]_, saturation equation of the Tarner and
    Muskat methods), divided by the pore-volume factor 1 - cf (pi - p) when the pore
    compressibility is kept.

    References
    ----------
    .. [1] T. Ahmed, *Reservoir Engineering Handbook*, Gulf Professional Publishing,
       chapter on predicting oil reservoir performance.
    """
    r = check_range("np_over_n", np_over_n, 0.0, 1.0, hi_open=True)
    bo = check_positive("bo_bbl_stb", bo_bbl_stb, unit="bbl/STB")
    boi = float(check_positive("boi_bbl_stb", boi_bbl_stb, unit="bbl/STB"))
    check_range("swi", swi, 0.0, 1.0, hi_open=True)
    check_range("cf_1_psi", cf_1_psi, 0.0, 1e-3, unit="1/psi")
    dp = check_range("dp_psia", dp_psia, 0.0, None, unit="psia")
    return (1.0 - swi) * (1.0 - r) * (bo / boi) / (1.0 - cf_1_psi * dp)


def instantaneous_gor(
    *,
    rs_scf_stb: ArrayLike,
    krg_over_kro: ArrayLike,
    mu_o_cp: ArrayLike,
    mu_g_cp: ArrayLike,
    bo_bbl_stb: ArrayLike,
    bg_bbl_scf: ArrayLike,
) -> np.ndarray:
    """Instantaneous producing gas-oil ratio of a solution-gas-drive reservoir.

    Parameters
    ----------
    rs_scf_stb : array_like
        Solution GOR at the current pressure. [scf/STB]
    krg_over_kro : array_like
        Gas-oil relative permeability ratio at the current saturation. [-]
    mu_o_cp, mu_g_cp : array_like
        Oil and gas viscosity. [cP]
    bo_bbl_stb : array_like
        Oil formation volume factor. [bbl/STB]
    bg_bbl_scf : array_like
        Gas formation volume factor. [bbl/scf]

    Returns
    -------
    R : ndarray
        Producing GOR. [scf/STB]

    Notes
    -----
    R = Rs + (krg/kro)(mu_o Bo)/(mu_g Bg) (Ahmed [1]_, instantaneous GOR equation; Craft
    and Hawkins [2]_).

    References
    ----------
    .. [1] T. Ahmed, *Reservoir Engineering Handbook*, Gulf Professional Publishing,
       chapter on predicting oil reservoir performance.
    .. [2] B. C. Craft and M. F. Hawkins, *Applied Petroleum Reservoir Engineering*,
       Prentice Hall, 1959.
    """
    rs = check_range("rs_scf_stb", rs_scf_stb, 0.0, None, unit="scf/STB")
    k = check_range("krg_over_kro", krg_over_kro, 0.0, None)
    mo = check_positive("mu_o_cp", mu_o_cp, unit="cP")
    mg = check_positive("mu_g_cp", mu_g_cp, unit="cP")
    bo = check_positive("bo_bbl_stb", bo_bbl_stb, unit="bbl/STB")
    bg = check_positive("bg_bbl_scf", bg_bbl_scf, unit="bbl/scf")
    return rs + k * (mo * bo) / (mg * bg)


# --------------------------------------------------------------------------------------
# Predictor
# --------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class DepletionPrediction:
    """Result of :func:`predict_depletion`.

    ``table`` has one row per pressure step (decreasing pressure) with the columns in
    ``PREDICTION_COLUMNS``. Stage boundaries are given as recovery factors Np/N and
    pressures; ``None`` when the path does not reach them before abandonment.
    """

    table: pd.DataFrame
    method: str
    pi_psia: float
    pb_psia: float
    p_abandon_psia: float
    rsi_scf_stb: float
    boi_bbl_stb: float
    swi: float
    cf_1_psi: float
    cw_1_psi: float
    n_stb: float
    relperm: CoreyGasOil
    np_over_n_bubble: float
    np_over_n_sgc: float | None
    p_sgc_psia: float | None
    np_over_n_stage2_end: float | None
    p_stage2_end_psia: float | None
    np_over_n_gor_peak: float | None
    p_gor_peak_psia: float | None
    gor_peak_scf_stb: float | None
    recovery_at_abandonment: float
    notes: tuple[str, ...] = field(default_factory=tuple)

    def at_recovery(self, np_over_n: ArrayLike) -> pd.DataFrame:
        """State of the reservoir at recovery factors ``np_over_n`` (interpolated, clipped).

        Returns a frame with ``np_over_n``, ``p_psia``, ``gp_over_n_scf_stb``,
        ``producing_gor_scf_stb``, ``so``, ``sg``, ``kro``, ``bo_bbl_stb``, ``mu_o_cp``,
        ``rs_scf_stb``.
        """
        r = np.atleast_1d(np.asarray(np_over_n, dtype=float))
        t = self.table
        x = t["np_over_n"].to_numpy()
        out = {"np_over_n": r}
        for c in ("p_psia", "gp_over_n_scf_stb", "producing_gor_scf_stb", "so", "sg", "kro",
                  "bo_bbl_stb", "mu_o_cp", "rs_scf_stb"):
            out[c] = np.interp(r, x, t[c].to_numpy())
        return pd.DataFrame(out)


def _pressure_grid(pi: float, pb: float, p_ab: float, dp_below: float, n_above: int) -> np.ndarray:
    above = np.linspace(pi, pb, n_above + 1) if pi > pb else np.array([pb])
    n_below = max(int(np.ceil((pb - p_ab) / dp_below)), 2)
    below = np.linspace(pb, p_ab, n_below + 1)[1:]
    return np.concatenate([above, below])


def predict_depletion(
    pvt: PvtTable,
    relperm: CoreyGasOil,
    *,
    pi_psia: float,
    p_abandon_psia: float,
    swi: float | None = None,
    cf_1_psi: float = 4e-6,
    cw_1_psi: float = 3e-6,
    n_stb: float = 1.0,
    dp_psia: float = 10.0,
    n_steps_above: int = 20,
    method: str = "tarner",
) -> DepletionPrediction:
    """Predict the depletion path of a volumetric solution-gas-drive oil reservoir.

    Parameters
    ----------
    pvt : PvtTable
        Black-oil properties covering ``p_abandon_psia`` to ``pi_psia``.
    relperm : CoreyGasOil
        Gas-oil relative permeability set (holds Sgc, Sorg, Swc, end points, exponents).
    pi_psia : float
        Initial reservoir pressure, at or above the bubble point. [psia]
    p_abandon_psia : float
        Last pressure of the prediction, below the bubble point. [psia]
    swi : float, optional
        Initial water saturation; defaults to the connate water ``relperm.swc``. [-]
    cf_1_psi, cw_1_psi : float, optional
        Pore and water compressibility, kept above and below the bubble point. [1/psi]
    n_stb : float, optional
        Stock-tank oil initially in place, scales ``np_stb`` and ``gp_scf``. [STB]
    dp_psia : float, optional
        Pressure step below the bubble point. [psia]
    n_steps_above : int, optional
        Number of steps from ``pi`` to ``pb`` (the undersaturated part is closed form).
    method : {"tarner", "muskat"}
        Saturated part by Tarner's trial-and-error method [1]_ or Muskat's equation [2]_.

    Returns
    -------
    DepletionPrediction

    Notes
    -----
    Above the bubble point: closed form (:func:`undersaturated_recovery`). Below it, the
    general material balance for a volumetric reservoir without gas cap or water influx
    (Havlena and Odeh form [3]_),

    Np [Bt + (Rp - Rsi) Bg] = N [(Bt - Bti) + Boi (cw Swi + cf)(pi - p)/(1 - Swi)],
    Bt = Bo + (Rsi - Rs) Bg,

    is solved for each pressure step j -> j+1 by Tarner's method [1]_ as restated by
    Ahmed [4]_: the cumulative gas from the material balance must equal
    Gp_j + (Np - Np_j)(R_j + R_{j+1})/2, where R = Rs + (krg/kro)(mu_o Bo)/(mu_g Bg) and
    krg/kro is taken at the saturation implied by Np (:func:`oil_saturation`, pore volume
    shrinking by cf). The root in Np is bracketed and found by Brent's method, so the
    material balance closes to round-off at every step (:func:`material_balance_closure`).

    Muskat's method [2]_ integrates dSo/dp = [So lambda + So epsilon krg/kro + Sg eta] /
    [1 + (mu_o/mu_g) krg/kro], lambda = (Bg/Bo) dRs/dp, epsilon = (mu_o/mu_g)(1/Bo) dBo/dp,
    eta = Bg d(1/Bg)/dp, here written for the oil volume per initial pore volume so that
    the same rock and water expansion terms are kept (it reduces to Muskat's form when
    cf = cw = 0); scipy's adaptive Runge-Kutta integrator, relative tolerance 1e-9.

    References
    ----------
    .. [1] J. Tarner, "How different size gas caps and pressure maintenance programs
       affect amount of recoverable oil," Oil Weekly, vol. 144, pp. 32-44, June 12, 1944.
    .. [2] M. Muskat, "The production histories of oil producing gas-drive reservoirs,"
       J. Applied Physics, vol. 16, pp. 147-159, 1945.
    .. [3] D. Havlena and A. S. Odeh, "The Material Balance as an Equation of a Straight
       Line," JPT, vol. 15, no. 8, pp. 896-900, 1963.
    .. [4] T. Ahmed, *Reservoir Engineering Handbook*, Gulf Professional Publishing,
       chapter on predicting oil reservoir performance.
    """
    if not isinstance(pvt, PvtTable):
        raise ValueError("pvt must be a PvtTable")
    if not isinstance(relperm, CoreyGasOil):
        raise ValueError("relperm must be a CoreyGasOil")
    if method not in ("tarner", "muskat"):
        raise ValueError(f"method must be 'tarner' or 'muskat', got {method!r}")
    pb = pvt.pb_psia
    pi = float(check_range("pi_psia", pi_psia, pb, pvt.p_psia[-1], unit="psia"))
    p_ab = float(check_range("p_abandon_psia", p_abandon_psia, pvt.p_psia[0], pb, unit="psia", hi_open=True))
    swi = relperm.swc if swi is None else float(check_range("swi", swi, 0.0, 1.0, hi_open=True))
    cf = float(check_range("cf_1_psi", cf_1_psi, 0.0, 1e-4, unit="1/psi"))
    cw = float(check_range("cw_1_psi", cw_1_psi, 0.0, 1e-4, unit="1/psi"))
    n_stb = float(check_positive("n_stb", n_stb, unit="STB"))
    dp_step = float(check_range("dp_psia", dp_psia, 0.1, 500.0, unit="psia"))
    n_above = int(check_range("n_steps_above", n_steps_above, 1, 10000))
    if swi + relperm.sorg >= 1.0:
        raise ValueError(f"swi + sorg must be below 1, got {swi + relperm.sorg:g}")

    grid = _pressure_grid(pi, pb, p_ab, dp_step, n_above)
    props = pvt.at(grid)
    bo, rs, bg, mu_o, mu_g = props["bo"], props["rs"], props["bg"], props["mu_o"], props["mu_g"]
    boi = float(pvt.at(pi)["bo"])
    rsi = float(pvt.at(pb)["rs"])
    c_eff = _effective_pore_compressibility(swi, cf, cw)
    dpi = pi - grid
    v = 1.0 - cf * dpi                      # pore volume / initial pore volume
    w = swi * (1.0 + cw * dpi)              # water volume / initial pore volume
    n = grid.size
    r = np.zeros(n)
    gp = np.zeros(n)
    i_b = int(np.flatnonzero(grid == pb)[0])

    # Undersaturated part: closed form
    r[: i_b + 1] = undersaturated_recovery(grid[: i_b + 1], pi_psia=pi, bo_bbl_stb=bo[: i_b + 1],
                                           boi_bbl_stb=boi, swi=swi, cf_1_psi=cf, cw_1_psi=cw)
    gp[: i_b + 1] = r[: i_b + 1] * rsi

    # plain Python floats for the scalar inner loop (Tarner iterations)
    bo_l, rs_l, v_l, w_l = bo.tolist(), rs.tolist(), v.tolist(), w.tolist()
    with np.errstate(invalid="ignore", divide="ignore"):
        mob_l = ((mu_o * bo) / (mu_g * bg)).tolist()

    # Corey (1954) constants for the scalar inner loop (same formula as core.relperm)
    c_swc, c_sgc, c_sorg = relperm.swc, relperm.sgc, relperm.sorg
    c_den_o = 1.0 - c_swc - c_sorg
    c_den_g = 1.0 - c_swc - c_sgc - c_sorg
    c_krg, c_kro, c_ng, c_no = relperm.krg_max, relperm.kro_max, relperm.ng, relperm.no
    so_factor = (1.0 - swi) / boi

    def gor_at(j: int, rj: float) -> float:
        so = so_factor * (1.0 - rj) * bo_l[j] / v_l[j]
        sg = 1.0 - so - w_l[j] / v_l[j]
        sg_n = (sg - c_sgc) / c_den_g
        if sg_n <= 0.0:
            return rs_l[j]
        so_n = (1.0 - c_swc - sg - c_sorg) / c_den_o
        kro = c_kro * so_n**c_no if so_n > 0.0 else 0.0
        krg = c_krg * (sg_n if sg_n < 1.0 else 1.0) ** c_ng
        return rs_l[j] + krg / (kro if kro > _KRO_FLOOR else _KRO_FLOOR) * mob_l[j]

    if method == "tarner":
        r_j, gp_j = r[i_b], gp[i_b]
        R_j = rsi
        for j in range(i_b + 1, n):
            # Eo + Efw: oil + dissolved-gas expansion and rock/water expansion per STB in place
            # (Havlena and Odeh 1963, general material balance with m = 0, We = Wp = 0)
            expansion = (bo[j] - boi) + (rsi - rs[j]) * bg[j] + boi * c_eff * dpi[j]

            # Tarner (1944) as restated by Ahmed: Gp from the material balance,
            # Gp = [N (Eo + Efw) - Np (Bo - Rs Bg)] / Bg, must equal Gp from the GOR
            # integral, Gp_j + (Np - Np_j)(R_j + R)/2 (trapezoid); f is monotone decreasing in Np.
            def f(rr: float, j: int = j, r_j: float = r_j, gp_j: float = gp_j, R_j: float = R_j,
                  expansion: float = expansion) -> float:
                gp_mbe = (expansion - rr * (bo[j] - rs[j] * bg[j])) / bg[j]
                gp_gor = gp_j + (rr - r_j) * 0.5 * (R_j + gor_at(j, rr))
                return gp_mbe - gp_gor

            # upper bracket: oil saturation down to the residual oil
            r_hi = 1.0 - relperm.sorg * v[j] * boi / ((1.0 - swi) * bo[j])
            r_hi = min(max(r_hi, r_j), 1.0 - 1e-12)
            f_lo = f(r_j)
            f_hi = f(r_hi)
            if f_lo <= 0.0:
                rr = r_j
            elif f_hi >= 0.0:
                rr = r_hi
            else:
                rr = brentq(f, r_j, r_hi, xtol=1e-14, rtol=1e-13, maxiter=200)
            R_new = gor_at(j, rr)
            gp_new = (expansion - rr * (bo[j] - rs[j] * bg[j])) / bg[j]
            r[j], gp[j] = rr, gp_new
            r_j, gp_j, R_j = rr, gp_new, R_new
    else:
        r, gp = _muskat(pvt, relperm, grid, i_b, r, gp, boi=boi, rsi=rsi, swi=swi, cf=cf, cw=cw, pi=pi)

    # saturations: So = (1 - Swi)(1 - Np/N)(Bo/Boi) / (pore-volume factor) (Ahmed; check-values 5.1)
    so = (1.0 - swi) * (1.0 - r) * (bo / boi) / v
    sw = w / v
    sg = np.clip(1.0 - so - sw, 0.0, 1.0)
    sg[: i_b + 1] = 0.0
    krg, kro = relperm(sg)
    gor = np.full(n, rsi)
    below = np.arange(n) > i_b
    ratio = krg[below] / np.maximum(kro[below], _KRO_FLOOR)
    # instantaneous producing GOR, R = Rs + (krg/kro)(mu_o Bo)/(mu_g Bg) (Ahmed; Craft and Hawkins)
    gor[below] = rs[below] + ratio * (mu_o[below] * bo[below]) / (mu_g[below] * bg[below])

    # Stage boundaries read off the path
    notes: list[str] = []
    r_sgc = p_sgc = None
    idx = np.flatnonzero(below & (sg > relperm.sgc))
    if idx.size:
        k = idx[0]
        frac = (relperm.sgc - sg[k - 1]) / (sg[k] - sg[k - 1]) if sg[k] != sg[k - 1] else 1.0
        r_sgc = float(r[k - 1] + frac * (r[k] - r[k - 1]))
        p_sgc = float(grid[k - 1] + frac * (grid[k] - grid[k - 1]))
    r_s2 = p_s2 = None
    idx = np.flatnonzero(below & (gor > rsi))
    if idx.size:
        k = idx[0]
        frac = (rsi - gor[k - 1]) / (gor[k] - gor[k - 1])
        r_s2 = float(r[k - 1] + frac * (r[k] - r[k - 1]))
        p_s2 = float(grid[k - 1] + frac * (grid[k] - grid[k - 1]))
    else:
        notes.append("producing GOR stays below Rsi down to the abandonment pressure")
    r_pk = p_pk = gor_pk = None
    k = int(np.argmax(gor))
    if gor[k] > rsi and k < n - 1:
        r_pk, p_pk, gor_pk = float(r[k]), float(grid[k]), float(gor[k])
    else:
        notes.append("the producing GOR maximum is not reached before the abandonment pressure")

    stage = np.ones(n, dtype=int)
    stage[below] = 2
    if r_s2 is not None:
        stage[below & (r > r_s2)] = 3
    if r_pk is not None:
        stage[below & (r > r_pk)] = 4

    table = pd.DataFrame({
        "p_psia": grid, "np_over_n": r, "gp_over_n_scf_stb": gp, "np_stb": r * n_stb,
        "gp_scf": gp * n_stb, "so": so, "sg": sg, "sw": sw, "krg": krg, "kro": kro,
        "rs_scf_stb": rs, "bo_bbl_stb": bo, "bg_bbl_scf": np.where(below | (grid == pb), bg, np.nan),
        "mu_o_cp": mu_o, "mu_g_cp": np.where(below | (grid == pb), mu_g, np.nan),
        "producing_gor_scf_stb": gor, "stage": stage,
    })
    return DepletionPrediction(
        table=table, method=method, pi_psia=pi, pb_psia=pb, p_abandon_psia=p_ab, rsi_scf_stb=rsi,
        boi_bbl_stb=boi, swi=swi, cf_1_psi=cf, cw_1_psi=cw, n_stb=n_stb, relperm=relperm,
        np_over_n_bubble=float(r[i_b]), np_over_n_sgc=r_sgc, p_sgc_psia=p_sgc,
        np_over_n_stage2_end=r_s2, p_stage2_end_psia=p_s2, np_over_n_gor_peak=r_pk,
        p_gor_peak_psia=p_pk, gor_peak_scf_stb=gor_pk, recovery_at_abandonment=float(r[-1]),
        notes=tuple(notes),
    )


def _muskat(pvt: PvtTable, relperm: CoreyGasOil, grid: np.ndarray, i_b: int, r: np.ndarray,
            gp: np.ndarray, *, boi: float, rsi: float, swi: float, cf: float, cw: float,
            pi: float) -> tuple[np.ndarray, np.ndarray]:
    """Muskat (1945) equation in pressure for x = V So (oil volume / initial pore volume)."""
    r = r.copy()
    gp = gp.copy()

    # Scalar interpolation on plain lists (the integrator calls rhs thousands of times);
    # same interpolants as PvtTable.at / PvtTable.slopes: linear in p, Bg through 1/Bg.
    ok = np.isfinite(pvt.bg_bbl_scf) & np.isfinite(pvt.mu_g_cp)
    tp = pvt.p_psia[ok].tolist()
    t_bo = pvt.bo_bbl_stb[ok].tolist()
    t_rs = pvt.rs_scf_stb[ok].tolist()
    t_ig = (1.0 / pvt.bg_bbl_scf[ok]).tolist()
    t_mo = pvt.mu_o_cp[ok].tolist()
    t_mg = pvt.mu_g_cp[ok].tolist()
    n_tab = len(tp)

    def rhs(p: float, y: np.ndarray) -> np.ndarray:
        x = float(y[0])
        i = min(max(bisect_right(tp, p) - 1, 0), n_tab - 2)
        h = tp[i + 1] - tp[i]
        f = (p - tp[i]) / h
        dbo = (t_bo[i + 1] - t_bo[i]) / h
        drs = (t_rs[i + 1] - t_rs[i]) / h
        dinv_bg = (t_ig[i + 1] - t_ig[i]) / h
        bo = t_bo[i] + f * (t_bo[i + 1] - t_bo[i])
        rs = t_rs[i] + f * (t_rs[i + 1] - t_rs[i])
        bg = 1.0 / (t_ig[i] + f * (t_ig[i + 1] - t_ig[i]))
        mu_o = t_mo[i] + f * (t_mo[i + 1] - t_mo[i])
        mu_g = t_mg[i] + f * (t_mg[i + 1] - t_mg[i])
        dpi = pi - p
        v = 1.0 - cf * dpi
        w = swi * (1.0 + cw * dpi)
        sg = min(max((v - w - x) / v, 0.0), 1.0)
        krg, kro = relperm.fast(sg)
        k = float(krg) / max(float(kro), _KRO_FLOOR)
        m = mu_o / mu_g
        # dV/dp = cf, dW/dp = -Swi cw
        num = x * bg * drs / bo + x * k * m * dbo / bo + (v - w - x) * bg * dinv_bg + (cf + swi * cw)
        dx = num / (1.0 + k * m)
        # r = 1 - x Boi / (Bo (1 - Swi));  dGp/dp = R dr/dp
        dr = -(boi / (1.0 - swi)) * (dx / bo - x * dbo / bo**2)
        R = rs + k * mu_o * bo / (mu_g * bg)
        return np.array([dx, R * dr])

    pb = grid[i_b]
    dpb = pi - pb
    x0 = (1.0 - cf * dpb) - swi * (1.0 + cw * dpb)
    sol = solve_ivp(rhs, (pb, grid[-1]), [x0, gp[i_b]], t_eval=grid[i_b:], rtol=1e-9, atol=1e-12,
                    method="RK45", max_step=max((pb - grid[-1]) / 50.0, 1.0))
    if not sol.success:  # pragma: no cover - integrator failure is reported, not hidden
        raise ValueError(f"Muskat integration failed: {sol.message}")
    x = sol.y[0]
    bo = pvt.at(grid[i_b:])["bo"]
    r[i_b:] = 1.0 - x * boi / (bo * (1.0 - swi))
    gp[i_b:] = sol.y[1]
    return r, gp


def material_balance_closure(prediction: DepletionPrediction) -> pd.DataFrame:
    """Check the material balance of a prediction at every pressure step.

    Returns a frame with ``p_psia``, ``withdrawal_rb_per_stb`` (F/N =
    Np/N [Bt + (Rp - Rsi) Bg], underground withdrawal per STB in place),
    ``expansion_rb_per_stb`` (Eo + Boi (cw Swi + cf) dp/(1 - Swi), Havlena and Odeh 1963),
    ``mbe_residual`` ((F - E)/Boi, dimensionless), and ``saturation_residual``
    (So + Sg + Sw - 1, with Sg computed from the free-gas volume, not by difference).
    A closed balance has both residuals at round-off.
    """
    t = prediction.table
    p = t["p_psia"].to_numpy()
    r = t["np_over_n"].to_numpy()
    gp = t["gp_over_n_scf_stb"].to_numpy()
    bo = t["bo_bbl_stb"].to_numpy()
    rs = t["rs_scf_stb"].to_numpy()
    bg = np.nan_to_num(t["bg_bbl_scf"].to_numpy(), nan=0.0)
    boi, rsi, swi = prediction.boi_bbl_stb, prediction.rsi_scf_stb, prediction.swi
    cf, cw = prediction.cf_1_psi, prediction.cw_1_psi
    dpi = prediction.pi_psia - p
    c_eff = _effective_pore_compressibility(swi, cf, cw)
    # F = Np [Bo + (Rp - Rs) Bg] per N (Havlena-Odeh); Rp = Gp/Np
    withdrawal = r * bo + (gp - r * rs) * bg
    expansion = (bo - boi) + (rsi - rs) * bg + boi * c_eff * dpi
    # Saturations: free gas from the gas balance, in pore volumes
    pv = (boi / (1.0 - swi)) * (1.0 - cf * dpi)       # pore volume per STB in place
    free_gas_rb = (rsi - (1.0 - r) * rs - gp) * bg
    so = (1.0 - r) * bo / pv
    sw = swi * (1.0 + cw * dpi) * (boi / (1.0 - swi)) / pv
    sg = free_gas_rb / pv
    return pd.DataFrame({
        "p_psia": p,
        "withdrawal_rb_per_stb": withdrawal,
        "expansion_rb_per_stb": expansion,
        "mbe_residual": (withdrawal - expansion) / boi,
        "saturation_residual": so + sg + sw - 1.0,
    })
