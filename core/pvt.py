"""Black-oil PVT correlations in field units.

Every function implements one published method, is vectorised over its array
arguments (numpy broadcasting) and returns a float for all-scalar input, an
ndarray otherwise. Arguments outside physical limits raise ``ValueError``;
arguments outside a correlation's data range are computed and warned about with
:class:`core.validation.OutOfRangeWarning`.

Validity ranges are the data ranges of each correlation as commonly tabulated in
the secondary literature (Ahmed, *Reservoir Engineering Handbook*; McCain, *The
Properties of Petroleum Fluids*, 2nd ed. 1990). They were recalled, not re-read
against the original papers, and are meant as a warning trigger, not a hard rule.

Units: p psia, T degF (degR = degF + 459.67), Rs scf/STB, Bo bbl/STB, Bg bbl/scf or
ft3/scf, viscosity cP, co 1/psi, gas gravity air = 1.
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from core.validation import OutOfRangeWarning, check_range, warn_outside

__all__ = [
    "api_from_sg",
    "sg_from_api",
    "bubble_point_standing",
    "rs_standing",
    "gas_gravity_separator_vasquez_beggs",
    "bubble_point_vasquez_beggs",
    "rs_vasquez_beggs",
    "oil_fvf_standing",
    "oil_fvf_vasquez_beggs",
    "oil_compressibility_vasquez_beggs",
    "oil_fvf_undersaturated",
    "dead_oil_viscosity_beggs_robinson",
    "live_oil_viscosity_beggs_robinson",
    "undersaturated_oil_viscosity_vasquez_beggs",
    "pseudo_critical_sutton",
    "pseudo_critical_standing",
    "z_factor_hall_yarborough",
    "z_factor_dranchuk_abou_kassem",
    "gas_fvf",
    "gas_viscosity_lee_gonzalez_eakin",
    "z_factor",
    "black_oil_table",
    "BLACK_OIL_COLUMNS",
]

# --------------------------------------------------------------------------------------
# constants
# --------------------------------------------------------------------------------------
DEG_R_OFFSET = 459.67  # degR = degF + 459.67 (standard definition)
P_SC_PSIA = 14.696  # standard pressure, 1 atm [psia]
T_SC_DEGR = 519.67  # standard temperature, 60 degF [degR]
FT3_PER_BBL = 5.614583  # 1 bbl = 5.614583 ft3 (standard definition)
R_FIELD = 10.7316  # universal gas constant [psia ft3 / (lb-mol degR)]
M_AIR = 28.9625  # apparent molecular weight of air [lb/lb-mol] (standard value)
LBFT3_TO_GCC = 0.01601846  # 1 lb/ft3 = 0.01601846 g/cm3

# API gravity: API = 141.5 / SG - 131.5 (standard definition, API / ASTM D287)
API_A = 141.5
API_B = 131.5

# Standing (1947); equation forms as given by Standing (1981) and Ahmed's handbook.
STANDING_PB_COEF = 18.2
STANDING_PB_SHIFT = 1.4
STANDING_PB_EXP = 0.83  # Pb eq.: (Rs/gamma_g)^0.83
STANDING_RS_EXP = 1.2048  # Rs eq. exponent as printed (1/0.83 = 1.20482 rounded)
STANDING_X_API = 0.0125
STANDING_X_T = 0.00091
# Standing Bo, form 1 (Standing 1981, as given by Ahmed): 0.9759 + 0.000120 F^1.2
STANDING_BO_AHMED = (0.9759, 0.000120, 1.2)
# Standing Bo, form 2 (Craft & Hawkins, rev. Terry 1991): 0.972 + 0.000147 F^1.175
STANDING_BO_CRAFT_HAWKINS = (0.972, 0.000147, 1.175)
STANDING_BO_T = 1.25
# Data range of Standing (1947) (105 points, California oils)
STANDING_RANGE = {
    "p": (130.0, 7000.0),
    "t_f": (100.0, 258.0),
    "rs": (20.0, 1425.0),
    "api": (16.5, 63.8),
    "gamma_g": (0.59, 0.95),
}

# Vasquez & Beggs (1980), coefficient sets for API <= 30 and API > 30
VB_API_SPLIT = 30.0
VB_RS_LOW = (0.0362, 1.0937, 25.7240)  # C1, C2, C3 for API <= 30
VB_RS_HIGH = (0.0178, 1.1870, 23.931)  # C1, C2, C3 for API > 30
VB_BO_LOW = (4.677e-4, 1.751e-5, -1.811e-8)  # A1, A2, A3 for API <= 30
VB_BO_HIGH = (4.670e-4, 1.100e-5, 1.337e-9)  # A1, A2, A3 for API > 30
VB_SEP_COEF = 5.912e-5  # separator-gas-gravity correction
VB_SEP_REF_PSIA = 114.7  # reference separator pressure (100 psig)
# co = (-1433 + 5 Rsb + 17.2 T - 1180 gamma_gs + 12.61 API) / (1e5 p)
VB_CO = (-1433.0, 5.0, 17.2, -1180.0, 12.61, 1.0e5)
# mu_o = mu_ob (p/pb)^m, m = 2.6 p^1.187 exp(-11.513 - 8.98e-5 p)
VB_MU = (2.6, 1.187, -11.513, -8.98e-5)
VB_RANGE = {
    "p": (50.0, 5250.0),
    "t_f": (70.0, 295.0),
    "rs": (20.0, 2070.0),
    "api": (16.0, 58.0),
    "gamma_g": (0.56, 1.18),
}
VB_CO_RANGE = {
    "p": (126.0, 9500.0),
    "rs": (9.3, 2199.0),
    "t_f": (74.0, 320.0),
    "api": (15.3, 59.5),
    "gamma_g": (0.511, 1.351),
}
VB_MU_RANGE = {"p": (141.0, 9515.0), "mu": (0.117, 148.0)}
# lowest oil compressibility in the Vasquez-Beggs data (3.6e-6 1/psi); used by
# black_oil_table as a constant co when the correlation's numerator is not positive
VB_CO_MIN = 3.6e-6

# Beggs & Robinson (1975)
BR_Z = (3.0324, -0.02023)  # Z = 3.0324 - 0.02023 API
BR_X_EXP = -1.163  # X = Y T^-1.163
BR_A = (10.715, 100.0, -0.515)  # A = 10.715 (Rs + 100)^-0.515
BR_B = (5.44, 150.0, -0.338)  # B = 5.44 (Rs + 150)^-0.338
BR_RANGE = {"t_f": (70.0, 295.0), "api": (16.0, 58.0), "rs": (20.0, 2070.0), "p": (15.0, 5265.0)}

# Gas pseudo-critical properties (Tpc degR, ppc psia)
SUTTON_TPC = (169.2, 349.5, -74.0)
SUTTON_PPC = (756.8, -131.07, -3.6)
SUTTON_RANGE = (0.57, 1.68)
STANDING_1977_TPC = (168.0, 325.0, -12.5)
STANDING_1977_PPC = (677.0, 15.0, -37.5)
STANDING_1977_RANGE = (0.57, 1.7)

# Dranchuk & Abou-Kassem (1975) A1..A11
DAK_A = (0.3265, -1.0700, -0.5339, 0.01569, -0.05165, 0.5475, -0.7361, 0.1844, 0.1056, 0.6134, 0.7210)
DAK_RANGE = {"tpr": (1.0, 3.0), "ppr": (0.2, 30.0)}
# Hall & Yarborough (1973)
HY_RANGE = {"tpr": (1.2, 3.0), "ppr": (0.1, 24.0)}
Z_TOL = 1e-10  # convergence of the z-factor solvers (residual and step)

# Lee, Gonzalez & Eakin (1966): (k1, k2, k3, k4, k5, x1, x2, x3, y1, y2)
LGE_1966 = (9.4, 0.02, 209.0, 19.0, 1.5, 3.5, 986.0, 0.01, 2.4, 0.2)
# Refit by McCain, Spivey & Lenn, Petroleum Reservoir Fluid Property Correlations (2011), eqs 2.14-2.17
LGE_MCCAIN = (9.379, 0.01607, 209.2, 19.26, 1.5, 3.448, 986.4, 0.01009, 2.447, 0.2224)
LGE_RANGE = {"p": (100.0, 8000.0), "t_f": (100.0, 340.0)}

BLACK_OIL_COLUMNS = ("p_psia", "rs_scf_stb", "bo_bbl_stb", "bg_bbl_scf", "mu_o_cp", "mu_g_cp", "z")


# --------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------
def _out(x: np.ndarray, *args: Any) -> Any:
    """Return a float when every input was a scalar, else the ndarray."""
    if all(np.ndim(a) == 0 for a in args):
        return float(np.asarray(x))
    return np.asarray(x, dtype=float)


def _check_p(name: str, p: Any) -> np.ndarray:
    return check_range(name, p, 0.0, None, unit="psia", lo_open=True)


def _check_api(api: Any) -> np.ndarray:
    return check_range("api", api, 0.0, None, unit="degAPI", lo_open=True)


def _check_gamma_g(gamma_g: Any, name: str = "gamma_g") -> np.ndarray:
    return check_range(name, gamma_g, 0.5, 2.0, unit="(air = 1)", lo_open=True, hi_open=True)


def _check_t(t_f: Any) -> np.ndarray:
    return check_range("t_f", t_f, 32.0, 600.0, unit="degF")


def _check_rs(name: str, rs: Any) -> np.ndarray:
    return check_range(name, rs, 0.0, None, unit="scf/STB")


def _vb_set(api: np.ndarray, low: tuple, high: tuple) -> list[np.ndarray]:
    """Pick the Vasquez-Beggs coefficient set per element (API <= 30 vs > 30)."""
    hi = api > VB_API_SPLIT
    return [np.where(hi, h, lo_) for lo_, h in zip(low, high)]


# --------------------------------------------------------------------------------------
# gravity
# --------------------------------------------------------------------------------------
def api_from_sg(sg: ArrayLike) -> Any:
    """Stock-tank API gravity from oil specific gravity.

    Parameters
    ----------
    sg : array_like
        Oil specific gravity at 60 degF relative to water at 60 degF, > 0. [-]

    Returns
    -------
    api : float or ndarray
        API gravity. [degAPI]

    Notes
    -----
    API = 141.5 / SG - 131.5, the standard definition (API; ASTM D287). Water
    (SG = 1) is 10 degAPI.
    """
    s = check_range("sg", sg, 0.0, None, lo_open=True)
    return _out(API_A / s - API_B, sg)


def sg_from_api(api: ArrayLike) -> Any:
    """Oil specific gravity (60/60 degF) from API gravity.

    Parameters
    ----------
    api : array_like
        API gravity, > -131.5. [degAPI]

    Returns
    -------
    sg : float or ndarray
        Specific gravity relative to water. [-]

    Notes
    -----
    SG = 141.5 / (API + 131.5), the inverse of the standard definition.
    """
    a = check_range("api", api, -API_B, None, unit="degAPI", lo_open=True)
    return _out(API_A / (a + API_B), api)


# --------------------------------------------------------------------------------------
# bubble point and solution GOR
# --------------------------------------------------------------------------------------
def _standing_x(api: np.ndarray, t_f: np.ndarray) -> np.ndarray:
    return STANDING_X_API * api - STANDING_X_T * t_f


def _warn_standing(*, p=None, t_f=None, rs=None, api=None, gamma_g=None) -> None:
    src = "Standing (1947)"
    for name, v, unit in (("p", p, "psia"), ("t_f", t_f, "degF"), ("rs", rs, "scf/STB"),
                          ("api", api, "degAPI"), ("gamma_g", gamma_g, "-")):
        if v is not None:
            lo, hi = STANDING_RANGE[name]
            warn_outside(name, v, lo, hi, unit=unit, source=src)


def bubble_point_standing(rsb: ArrayLike, *, api: ArrayLike, gamma_g: ArrayLike, t_f: ArrayLike) -> Any:
    """Bubble point pressure by Standing's correlation.

    Parameters
    ----------
    rsb : array_like
        Solution GOR at the bubble point, >= 0. [scf/STB]
    api : array_like
        Stock-tank oil gravity, > 0. [degAPI]
    gamma_g : array_like
        Solution-gas specific gravity, in (0.5, 2). [air = 1]
    t_f : array_like
        Reservoir temperature, 32-600. [degF]

    Returns
    -------
    pb : float or ndarray
        Bubble point pressure. [psia]

    Notes
    -----
    Pb = 18.2 [(Rs/gamma_g)^0.83 10^(-x) - 1.4], x = 0.0125 API - 0.00091 T, the
    equation form of Standing's chart given by Standing (1981) [2]_. Data range
    (Standing 1947 [1]_): Pb 130-7000 psia, T 100-258 degF, Rs 20-1425 scf/STB,
    API 16.5-63.8, gamma_g 0.59-0.95. A very small Rs (far below the data range)
    makes the formula give Pb <= 0; such points are returned as NaN with an
    :class:`~core.validation.OutOfRangeWarning`, never as a negative pressure.

    References
    ----------
    .. [1] M. B. Standing, "A Pressure-Volume-Temperature Correlation for
       Mixtures of California Oils and Gases," Drilling and Production
       Practice, API, pp. 275-287, 1947.
    .. [2] M. B. Standing, Volumetric and Phase Behavior of Oil Field
       Hydrocarbon Systems, 9th printing, SPE, Dallas, 1981.
    """
    rs = _check_rs("rsb", rsb)
    a, g, t = _check_api(api), _check_gamma_g(gamma_g), _check_t(t_f)
    _warn_standing(t_f=t, rs=rs, api=a, gamma_g=g)
    pb = _bubble_point_standing_raw(rs, a, g, t)
    nonpos = pb <= 0.0
    if np.any(nonpos):
        warnings.warn(
            "Standing (1947) gives no positive bubble point for rsb = "
            f"{float(np.min(np.broadcast_to(rs, pb.shape)[nonpos])):g} scf/STB (too little gas); returned NaN",
            OutOfRangeWarning,
            stacklevel=2,
        )
        pb = np.where(nonpos, np.nan, pb)
    _warn_standing(p=pb)
    return _out(pb, rsb, api, gamma_g, t_f)


def _bubble_point_standing_raw(rs, api, gamma_g, t_f):
    # Standing (1981) form of the 1947 chart
    x = _standing_x(api, t_f)
    return STANDING_PB_COEF * ((rs / gamma_g) ** STANDING_PB_EXP * 10.0 ** (-x) - STANDING_PB_SHIFT)


def _rs_standing_raw(p, api, gamma_g, t_f):
    # Standing (1981) Rs form: Rs = gamma_g [(p/18.2 + 1.4) 10^x]^1.2048
    x = _standing_x(api, t_f)
    return gamma_g * ((p / STANDING_PB_COEF + STANDING_PB_SHIFT) * 10.0 ** x) ** STANDING_RS_EXP


def _pb_from_rs_standing_exact(rs, api, gamma_g, t_f):
    # exact inverse of _rs_standing_raw (exponent 1/1.2048), used by black_oil_table so
    # that Rs(pb) = Rsb holds to round-off
    x = _standing_x(api, t_f)
    return STANDING_PB_COEF * ((rs / gamma_g) ** (1.0 / STANDING_RS_EXP) * 10.0 ** (-x) - STANDING_PB_SHIFT)


def rs_standing(p: ArrayLike, *, api: ArrayLike, gamma_g: ArrayLike, t_f: ArrayLike) -> Any:
    """Solution GOR of saturated oil (p <= Pb) by Standing's correlation.

    Parameters
    ----------
    p : array_like
        Pressure, at or below the bubble point, > 0. [psia]
    api : array_like
        Stock-tank oil gravity, > 0. [degAPI]
    gamma_g : array_like
        Solution-gas specific gravity, in (0.5, 2). [air = 1]
    t_f : array_like
        Reservoir temperature, 32-600. [degF]

    Returns
    -------
    rs : float or ndarray
        Solution GOR. [scf/STB]

    Notes
    -----
    Rs = gamma_g [(p/18.2 + 1.4) 10^x]^1.2048, x = 0.0125 API - 0.00091 T, the
    inverse of :func:`bubble_point_standing` as printed [1]_, [2]_ (1.2048 is
    1/0.83 = 1.204819 rounded, so Pb(Rs(p)) returns p to about 1e-4 relative,
    not to round-off). Valid for saturated oil only: above Pb, Rs = Rsb. Data
    range as :func:`bubble_point_standing`.

    References
    ----------
    .. [1] M. B. Standing, Drilling and Production Practice, API, pp. 275-287, 1947.
    .. [2] M. B. Standing, Volumetric and Phase Behavior of Oil Field
       Hydrocarbon Systems, 9th printing, SPE, Dallas, 1981.
    """
    pp = _check_p("p", p)
    a, g, t = _check_api(api), _check_gamma_g(gamma_g), _check_t(t_f)
    _warn_standing(p=pp, t_f=t, api=a, gamma_g=g)
    return _out(_rs_standing_raw(pp, a, g, t), p, api, gamma_g, t_f)


def gas_gravity_separator_vasquez_beggs(
    gamma_g: ArrayLike, *, api: ArrayLike, t_sep_f: ArrayLike, p_sep_psia: ArrayLike
) -> Any:
    """Gas gravity corrected to a 100 psig separator (Vasquez & Beggs 1980).

    Parameters
    ----------
    gamma_g : array_like
        Gas gravity at the actual separator conditions, in (0.5, 2). [air = 1]
    api : array_like
        Stock-tank oil gravity, > 0. [degAPI]
    t_sep_f : array_like
        Separator temperature. [degF]
    p_sep_psia : array_like
        Separator pressure, > 0. [psia]

    Returns
    -------
    gamma_gs : float or ndarray
        Gas gravity referred to a 114.7 psia separator. [air = 1]

    Notes
    -----
    gamma_gs = gamma_g [1 + 5.912e-5 API T_sep log10(p_sep / 114.7)] [1]_.

    References
    ----------
    .. [1] M. E. Vasquez and H. D. Beggs, "Correlations for Fluid Physical
       Property Prediction," JPT, vol. 32, no. 6, pp. 968-970, 1980, SPE-6719.
    """
    g, a = _check_gamma_g(gamma_g), _check_api(api)
    ts = check_range("t_sep_f", t_sep_f, -100.0, 400.0, unit="degF")
    ps = _check_p("p_sep_psia", p_sep_psia)
    out = g * (1.0 + VB_SEP_COEF * a * ts * np.log10(ps / VB_SEP_REF_PSIA))
    return _out(out, gamma_g, api, t_sep_f, p_sep_psia)


def _warn_vb(rng: dict, src: str, **kw) -> None:
    units = {"p": "psia", "t_f": "degF", "rs": "scf/STB", "api": "degAPI", "gamma_g": "-"}
    for name, v in kw.items():
        if v is not None:
            lo, hi = rng[name]
            warn_outside(name, v, lo, hi, unit=units[name], source=src)


def _rs_vb_raw(p, api, gamma_gs, t_f):
    c1, c2, c3 = _vb_set(api, VB_RS_LOW, VB_RS_HIGH)
    # Vasquez & Beggs (1980), Rs = C1 gamma_gs p^C2 exp(C3 API / (T + 460))
    return c1 * gamma_gs * p**c2 * np.exp(c3 * api / (t_f + 460.0))


def _pb_vb_raw(rs, api, gamma_gs, t_f):
    c1, c2, c3 = _vb_set(api, VB_RS_LOW, VB_RS_HIGH)
    return (rs / (c1 * gamma_gs * np.exp(c3 * api / (t_f + 460.0)))) ** (1.0 / c2)


def rs_vasquez_beggs(p: ArrayLike, *, api: ArrayLike, gamma_gs: ArrayLike, t_f: ArrayLike) -> Any:
    """Solution GOR of saturated oil (p <= Pb) by Vasquez & Beggs.

    Parameters
    ----------
    p : array_like
        Pressure, at or below the bubble point, > 0. [psia]
    api : array_like
        Stock-tank oil gravity, > 0; API <= 30 and > 30 use different
        coefficient sets. [degAPI]
    gamma_gs : array_like
        Gas gravity referred to a 100 psig separator (see
        :func:`gas_gravity_separator_vasquez_beggs`; use the plain gas gravity
        when separator data are unknown), in (0.5, 2). [air = 1]
    t_f : array_like
        Reservoir temperature, 32-600. [degF]

    Returns
    -------
    rs : float or ndarray
        Solution GOR. [scf/STB]

    Notes
    -----
    Rs = C1 gamma_gs p^C2 exp[C3 API / (T + 460)]; API <= 30: C1 = 0.0362,
    C2 = 1.0937, C3 = 25.7240; API > 30: C1 = 0.0178, C2 = 1.1870, C3 = 23.931 [1]_.
    Data range: p 50-5250 psia, T 70-295 degF, Rs 20-2070 scf/STB, API 16-58,
    gamma_gs 0.56-1.18.

    References
    ----------
    .. [1] M. E. Vasquez and H. D. Beggs, "Correlations for Fluid Physical
       Property Prediction," JPT, vol. 32, no. 6, pp. 968-970, 1980, SPE-6719.
    """
    pp = _check_p("p", p)
    a, g, t = _check_api(api), _check_gamma_g(gamma_gs, "gamma_gs"), _check_t(t_f)
    _warn_vb(VB_RANGE, "Vasquez-Beggs (1980)", p=pp, t_f=t, api=a, gamma_g=g)
    return _out(_rs_vb_raw(pp, a, g, t), p, api, gamma_gs, t_f)


def bubble_point_vasquez_beggs(rsb: ArrayLike, *, api: ArrayLike, gamma_gs: ArrayLike, t_f: ArrayLike) -> Any:
    """Bubble point pressure by Vasquez & Beggs (algebraic inverse of the Rs equation).

    Parameters
    ----------
    rsb : array_like
        Solution GOR at the bubble point, >= 0. [scf/STB]
    api : array_like
        Stock-tank oil gravity, > 0. [degAPI]
    gamma_gs : array_like
        Gas gravity referred to a 100 psig separator, in (0.5, 2). [air = 1]
    t_f : array_like
        Reservoir temperature, 32-600. [degF]

    Returns
    -------
    pb : float or ndarray
        Bubble point pressure. [psia]

    Notes
    -----
    Pb = [Rsb / (C1 gamma_gs exp(C3 API / (T + 460)))]^(1/C2), coefficients and
    data range as :func:`rs_vasquez_beggs` [1]_.

    References
    ----------
    .. [1] M. E. Vasquez and H. D. Beggs, JPT, vol. 32, no. 6, pp. 968-970, 1980.
    """
    rs = _check_rs("rsb", rsb)
    a, g, t = _check_api(api), _check_gamma_g(gamma_gs, "gamma_gs"), _check_t(t_f)
    _warn_vb(VB_RANGE, "Vasquez-Beggs (1980)", rs=rs, t_f=t, api=a, gamma_g=g)
    pb = _pb_vb_raw(rs, a, g, t)
    _warn_vb(VB_RANGE, "Vasquez-Beggs (1980)", p=pb)
    return _out(pb, rsb, api, gamma_gs, t_f)


# --------------------------------------------------------------------------------------
# oil formation volume factor and compressibility
# --------------------------------------------------------------------------------------
def _bo_standing_raw(rs, api, gamma_g, t_f, form="ahmed"):
    if form == "ahmed":
        c0, c1, e = STANDING_BO_AHMED
    elif form == "craft_hawkins":
        c0, c1, e = STANDING_BO_CRAFT_HAWKINS
    else:
        raise ValueError(f"form must be 'ahmed' or 'craft_hawkins', got {form!r}")
    gamma_o = API_A / (api + API_B)
    f = rs * np.sqrt(gamma_g / gamma_o) + STANDING_BO_T * t_f
    return c0 + c1 * f**e


def oil_fvf_standing(
    rs: ArrayLike, *, api: ArrayLike, gamma_g: ArrayLike, t_f: ArrayLike, form: str = "ahmed"
) -> Any:
    """Oil formation volume factor of saturated oil (p <= Pb) by Standing.

    Parameters
    ----------
    rs : array_like
        Solution GOR at the pressure of interest, >= 0. [scf/STB]
    api : array_like
        Stock-tank oil gravity, > 0. [degAPI]
    gamma_g : array_like
        Solution-gas specific gravity, in (0.5, 2). [air = 1]
    t_f : array_like
        Reservoir temperature, 32-600. [degF]
    form : {"ahmed", "craft_hawkins"}, optional
        Which published equation form of Standing's Bo chart to use:
        ``"ahmed"`` (default): Bo = 0.9759 + 0.000120 F^1.2, Standing (1981) as
        given in Ahmed's *Reservoir Engineering Handbook* [2]_, [3]_;
        ``"craft_hawkins"``: Bo = 0.972 + 0.000147 F^1.175, as given by Craft &
        Hawkins, rev. Terry (1991) [4]_. The two differ by about 0.011 bbl/STB
        at Bo ~ 1.5.

    Returns
    -------
    bo : float or ndarray
        Oil formation volume factor. [bbl/STB]

    Notes
    -----
    F = Rs (gamma_g / gamma_o)^0.5 + 1.25 T, gamma_o = 141.5 / (API + 131.5)
    [1]_. Data range as :func:`bubble_point_standing`, Bo 1.024-2.15 bbl/STB.

    References
    ----------
    .. [1] M. B. Standing, Drilling and Production Practice, API, pp. 275-287, 1947.
    .. [2] M. B. Standing, Volumetric and Phase Behavior of Oil Field
       Hydrocarbon Systems, 9th printing, SPE, Dallas, 1981.
    .. [3] T. Ahmed, Reservoir Engineering Handbook, Gulf Professional
       Publishing, ch. 2.
    .. [4] B. C. Craft and M. F. Hawkins, Applied Petroleum Reservoir
       Engineering, 2nd ed., rev. R. E. Terry, Prentice Hall, 1991.
    """
    r = _check_rs("rs", rs)
    a, g, t = _check_api(api), _check_gamma_g(gamma_g), _check_t(t_f)
    _warn_standing(t_f=t, rs=r, api=a, gamma_g=g)
    return _out(_bo_standing_raw(r, a, g, t, form), rs, api, gamma_g, t_f)


def _bo_vb_raw(rs, api, gamma_gs, t_f):
    a1, a2, a3 = _vb_set(api, VB_BO_LOW, VB_BO_HIGH)
    # Vasquez & Beggs (1980): Bo = 1 + A1 Rs + (T - 60)(API / gamma_gs)(A2 + A3 Rs)
    return 1.0 + a1 * rs + (t_f - 60.0) * (api / gamma_gs) * (a2 + a3 * rs)


def oil_fvf_vasquez_beggs(rs: ArrayLike, *, api: ArrayLike, gamma_gs: ArrayLike, t_f: ArrayLike) -> Any:
    """Oil formation volume factor of saturated oil (p <= Pb) by Vasquez & Beggs.

    Parameters
    ----------
    rs : array_like
        Solution GOR at the pressure of interest, >= 0. [scf/STB]
    api : array_like
        Stock-tank oil gravity, > 0. [degAPI]
    gamma_gs : array_like
        Gas gravity referred to a 100 psig separator, in (0.5, 2). [air = 1]
    t_f : array_like
        Reservoir temperature, 32-600. [degF]

    Returns
    -------
    bo : float or ndarray
        Oil formation volume factor. [bbl/STB]

    Notes
    -----
    Bo = 1 + A1 Rs + (T - 60)(API / gamma_gs)(A2 + A3 Rs); API <= 30: A1 = 4.677e-4,
    A2 = 1.751e-5, A3 = -1.811e-8; API > 30: A1 = 4.670e-4, A2 = 1.100e-5,
    A3 = 1.337e-9 [1]_. Data range as :func:`rs_vasquez_beggs`.

    References
    ----------
    .. [1] M. E. Vasquez and H. D. Beggs, JPT, vol. 32, no. 6, pp. 968-970, 1980.
    """
    r = _check_rs("rs", rs)
    a, g, t = _check_api(api), _check_gamma_g(gamma_gs, "gamma_gs"), _check_t(t_f)
    _warn_vb(VB_RANGE, "Vasquez-Beggs (1980)", rs=r, t_f=t, api=a, gamma_g=g)
    return _out(_bo_vb_raw(r, a, g, t), rs, api, gamma_gs, t_f)


def _co_numerator_vb(rsb, api, gamma_gs, t_f):
    k0, k_rs, k_t, k_g, k_api, _ = VB_CO
    return k0 + k_rs * rsb + k_t * t_f + k_g * gamma_gs + k_api * api


def oil_compressibility_vasquez_beggs(
    p: ArrayLike, *, rsb: ArrayLike, api: ArrayLike, gamma_gs: ArrayLike, t_f: ArrayLike
) -> Any:
    """Isothermal compressibility of undersaturated oil (p >= Pb) by Vasquez & Beggs.

    Parameters
    ----------
    p : array_like
        Pressure, at or above the bubble point, > 0. [psia]
    rsb : array_like
        Solution GOR at the bubble point, >= 0. [scf/STB]
    api : array_like
        Stock-tank oil gravity, > 0. [degAPI]
    gamma_gs : array_like
        Gas gravity referred to a 100 psig separator, in (0.5, 2). [air = 1]
    t_f : array_like
        Reservoir temperature, 32-600. [degF]

    Returns
    -------
    co : float or ndarray
        Oil compressibility. [1/psi]

    Notes
    -----
    co = (-1433 + 5 Rsb + 17.2 T - 1180 gamma_gs + 12.61 API) / (1e5 p) [1]_.
    Data range: p 126-9500 psig, Rsb 9.3-2199 scf/STB, T 74-320 degF, API
    15.3-59.5, gamma_gs 0.511-1.351. A very light, gas-poor, cold oil can give a
    non-positive numerator (outside the data); the value is returned as computed.

    References
    ----------
    .. [1] M. E. Vasquez and H. D. Beggs, JPT, vol. 32, no. 6, pp. 968-970, 1980.
    """
    pp = _check_p("p", p)
    r = _check_rs("rsb", rsb)
    a, g, t = _check_api(api), _check_gamma_g(gamma_gs, "gamma_gs"), _check_t(t_f)
    _warn_vb(VB_CO_RANGE, "Vasquez-Beggs (1980) compressibility", p=pp, rs=r, t_f=t, api=a, gamma_g=g)
    co = _co_numerator_vb(r, a, g, t) / (VB_CO[5] * pp)
    return _out(co, p, rsb, api, gamma_gs, t_f)


def oil_fvf_undersaturated(
    p: ArrayLike,
    *,
    pb: ArrayLike,
    bob: ArrayLike,
    co: ArrayLike | None = None,
    rsb: ArrayLike | None = None,
    api: ArrayLike | None = None,
    gamma_gs: ArrayLike | None = None,
    t_f: ArrayLike | None = None,
) -> Any:
    """Oil formation volume factor above the bubble point.

    Parameters
    ----------
    p : array_like
        Pressure, > 0; values below ``pb`` are treated as ``pb`` (the result is
        then ``bob``). [psia]
    pb : array_like
        Bubble point pressure, > 0. [psia]
    bob : array_like
        Oil formation volume factor at the bubble point, > 0. [bbl/STB]
    co : array_like, optional
        Constant oil compressibility, >= 0. When given, Bo = Bob exp[co (pb - p)],
        the integral of the definition co = -(1/Bo) dBo/dp at constant co
        (e.g. Ahmed, *Reservoir Engineering Handbook*, ch. 2). [1/psi]
    rsb, api, gamma_gs, t_f : array_like, optional
        When ``co`` is None these are required: the Vasquez-Beggs co(p) = a / (1e5 p)
        is integrated exactly, Bo = Bob (pb / p)^(a / 1e5) [1]_. Units as in
        :func:`oil_compressibility_vasquez_beggs`.

    Returns
    -------
    bo : float or ndarray
        Oil formation volume factor. [bbl/STB]

    References
    ----------
    .. [1] M. E. Vasquez and H. D. Beggs, JPT, vol. 32, no. 6, pp. 968-970, 1980.
    """
    pp = _check_p("p", p)
    pbb = _check_p("pb", pb)
    b = check_range("bob", bob, 0.0, None, unit="bbl/STB", lo_open=True)
    pe = np.maximum(pp, pbb)
    if co is not None:
        c = check_range("co", co, 0.0, None, unit="1/psi")
        bo = b * np.exp(c * (pbb - pe))
        return _out(bo, p, pb, bob, co)
    if rsb is None or api is None or gamma_gs is None or t_f is None:
        raise ValueError("oil_fvf_undersaturated needs either co or all of rsb, api, gamma_gs, t_f")
    r = _check_rs("rsb", rsb)
    a, g, t = _check_api(api), _check_gamma_g(gamma_gs, "gamma_gs"), _check_t(t_f)
    _warn_vb(VB_CO_RANGE, "Vasquez-Beggs (1980) compressibility", p=pe, rs=r, t_f=t, api=a, gamma_g=g)
    if np.any(_co_numerator_vb(r, a, g, t) <= 0):
        warnings.warn(
            "Vasquez-Beggs (1980) compressibility is not positive for these inputs: Bo rises with pressure",
            OutOfRangeWarning,
            stacklevel=2,
        )
    bo = _bo_undersat_vb_raw(pe, pbb, b, r, a, g, t)
    return _out(bo, p, pb, bob, rsb, api, gamma_gs, t_f)


def _bo_undersat_vb_raw(p, pb, bob, rsb, api, gamma_gs, t_f):
    # integral of co = a/(1e5 p) from pb to p: Bo = Bob exp(-a/1e5 ln(p/pb))
    a = _co_numerator_vb(rsb, api, gamma_gs, t_f) / VB_CO[5]
    return bob * np.exp(-a * np.log(p / pb))


# --------------------------------------------------------------------------------------
# oil viscosity
# --------------------------------------------------------------------------------------
def _mu_od_br_raw(api, t_f):
    z = BR_Z[0] + BR_Z[1] * api
    x = 10.0**z * t_f**BR_X_EXP
    return 10.0**x - 1.0


def _mu_o_br_raw(mu_od, rs):
    a = BR_A[0] * (rs + BR_A[1]) ** BR_A[2]
    b = BR_B[0] * (rs + BR_B[1]) ** BR_B[2]
    return a * mu_od**b


def dead_oil_viscosity_beggs_robinson(*, api: ArrayLike, t_f: ArrayLike) -> Any:
    """Gas-free (dead) oil viscosity by Beggs & Robinson.

    Parameters
    ----------
    api : array_like
        Stock-tank oil gravity, > 0. [degAPI]
    t_f : array_like
        Temperature, 32-600. [degF]

    Returns
    -------
    mu_od : float or ndarray
        Dead-oil viscosity. [cP]

    Notes
    -----
    mu_od = 10^X - 1, X = Y T^-1.163, Y = 10^Z, Z = 3.0324 - 0.02023 API [1]_.
    Data range: API 16-58, T 70-295 degF.

    References
    ----------
    .. [1] H. D. Beggs and J. R. Robinson, "Estimating the Viscosity of Crude
       Oil Systems," JPT, vol. 27, no. 9, pp. 1140-1141, 1975, SPE-5434.
    """
    a, t = _check_api(api), _check_t(t_f)
    warn_outside("api", a, *BR_RANGE["api"], unit="degAPI", source="Beggs-Robinson (1975)")
    warn_outside("t_f", t, *BR_RANGE["t_f"], unit="degF", source="Beggs-Robinson (1975)")
    return _out(_mu_od_br_raw(a, t), api, t_f)


def live_oil_viscosity_beggs_robinson(rs: ArrayLike, *, api: ArrayLike, t_f: ArrayLike) -> Any:
    """Saturated (live) oil viscosity at p <= Pb by Beggs & Robinson.

    Parameters
    ----------
    rs : array_like
        Solution GOR at the pressure of interest, >= 0. [scf/STB]
    api : array_like
        Stock-tank oil gravity, > 0. [degAPI]
    t_f : array_like
        Temperature, 32-600. [degF]

    Returns
    -------
    mu_o : float or ndarray
        Live-oil viscosity. [cP]

    Notes
    -----
    mu_o = A mu_od^B, A = 10.715 (Rs + 100)^-0.515, B = 5.44 (Rs + 150)^-0.338,
    mu_od from :func:`dead_oil_viscosity_beggs_robinson` [1]_. Data range: Rs
    20-2070 scf/STB, API 16-58, T 70-295 degF, p 15-5265 psia.

    References
    ----------
    .. [1] H. D. Beggs and J. R. Robinson, JPT, vol. 27, no. 9, pp. 1140-1141,
       1975, SPE-5434.
    """
    r = _check_rs("rs", rs)
    a, t = _check_api(api), _check_t(t_f)
    src = "Beggs-Robinson (1975)"
    warn_outside("rs", r, *BR_RANGE["rs"], unit="scf/STB", source=src)
    warn_outside("api", a, *BR_RANGE["api"], unit="degAPI", source=src)
    warn_outside("t_f", t, *BR_RANGE["t_f"], unit="degF", source=src)
    return _out(_mu_o_br_raw(_mu_od_br_raw(a, t), r), rs, api, t_f)


def _mu_undersat_vb_raw(p, pb, mu_ob):
    c, e1, e2, e3 = VB_MU
    m = c * p**e1 * np.exp(e2 + e3 * p)
    return mu_ob * (p / pb) ** m


def undersaturated_oil_viscosity_vasquez_beggs(p: ArrayLike, *, pb: ArrayLike, mu_ob: ArrayLike) -> Any:
    """Oil viscosity above the bubble point by Vasquez & Beggs.

    Parameters
    ----------
    p : array_like
        Pressure, > 0; values below ``pb`` are treated as ``pb``. [psia]
    pb : array_like
        Bubble point pressure, > 0. [psia]
    mu_ob : array_like
        Oil viscosity at the bubble point, > 0. [cP]

    Returns
    -------
    mu_o : float or ndarray
        Undersaturated oil viscosity. [cP]

    Notes
    -----
    mu_o = mu_ob (p / pb)^m, m = 2.6 p^1.187 exp(-11.513 - 8.98e-5 p) [1]_. Data
    range: p 141-9515 psia, mu_o 0.117-148 cP.

    References
    ----------
    .. [1] M. E. Vasquez and H. D. Beggs, JPT, vol. 32, no. 6, pp. 968-970, 1980.
    """
    pp, pbb = _check_p("p", p), _check_p("pb", pb)
    mu = check_range("mu_ob", mu_ob, 0.0, None, unit="cP", lo_open=True)
    pe = np.maximum(pp, pbb)
    src = "Vasquez-Beggs (1980) viscosity"
    warn_outside("p", pe, *VB_MU_RANGE["p"], unit="psia", source=src)
    warn_outside("mu_ob", mu, *VB_MU_RANGE["mu"], unit="cP", source=src)
    return _out(_mu_undersat_vb_raw(pe, pbb, mu), p, pb, mu_ob)


# --------------------------------------------------------------------------------------
# gas: pseudo-criticals, z-factor, Bg, viscosity
# --------------------------------------------------------------------------------------
def pseudo_critical_sutton(gamma_g: ArrayLike) -> tuple[Any, Any]:
    """Pseudo-critical temperature and pressure of a natural gas by Sutton.

    Parameters
    ----------
    gamma_g : array_like
        Gas specific gravity, in (0.5, 2). [air = 1]

    Returns
    -------
    tpc : float or ndarray
        Pseudo-critical temperature. [degR]
    ppc : float or ndarray
        Pseudo-critical pressure. [psia]

    Notes
    -----
    Tpc = 169.2 + 349.5 gamma_g - 74.0 gamma_g^2; ppc = 756.8 - 131.07 gamma_g
    - 3.6 gamma_g^2 [1]_ (hydrocarbon gases, no correction for N2, CO2, H2S).
    Data range: gamma_g 0.57-1.68.

    References
    ----------
    .. [1] R. P. Sutton, "Compressibility Factors for High-Molecular-Weight
       Reservoir Gases," SPE-14265, SPE Annual Technical Conference, 1985.
    """
    g = _check_gamma_g(gamma_g)
    warn_outside("gamma_g", g, *SUTTON_RANGE, unit="-", source="Sutton (1985)")
    tpc, ppc = _pc_raw(g, "sutton")
    return _out(tpc, gamma_g), _out(ppc, gamma_g)


def pseudo_critical_standing(gamma_g: ArrayLike) -> tuple[Any, Any]:
    """Pseudo-critical temperature and pressure of a natural gas by Standing (1977).

    Parameters
    ----------
    gamma_g : array_like
        Gas specific gravity, in (0.5, 2). [air = 1]

    Returns
    -------
    tpc : float or ndarray
        Pseudo-critical temperature. [degR]
    ppc : float or ndarray
        Pseudo-critical pressure. [psia]

    Notes
    -----
    Natural-gas systems curve: Tpc = 168 + 325 gamma_g - 12.5 gamma_g^2;
    ppc = 677 + 15 gamma_g - 37.5 gamma_g^2 [1]_. Applied here for gamma_g
    0.57-1.7 (approximate extent of the chart).

    References
    ----------
    .. [1] M. B. Standing, Volumetric and Phase Behavior of Oil Field
       Hydrocarbon Systems, SPE, Dallas, 1977.
    """
    g = _check_gamma_g(gamma_g)
    warn_outside("gamma_g", g, *STANDING_1977_RANGE, unit="-", source="Standing (1977)")
    tpc, ppc = _pc_raw(g, "standing")
    return _out(tpc, gamma_g), _out(ppc, gamma_g)


def _pc_raw(g, method):
    if method == "sutton":
        ct, cp = SUTTON_TPC, SUTTON_PPC
    elif method == "standing":
        ct, cp = STANDING_1977_TPC, STANDING_1977_PPC
    else:
        raise ValueError(f"pc_method must be 'sutton' or 'standing', got {method!r}")
    return ct[0] + ct[1] * g + ct[2] * g**2, cp[0] + cp[1] * g + cp[2] * g**2


def _safeguarded_newton(f_df, lo, hi, x0, *, tol=Z_TOL, max_iter=200, skip=None):
    """Vectorised Newton with bisection fallback on a sign-changing bracket.

    ``f_df(x) -> (f, df)``; f(lo) < 0 < f(hi) for every element. Keeps the bracket,
    bisects when a Newton step leaves it. An element stops when its step is below
    tol relative. Elements where ``skip`` is True are returned as ``x0``.
    """
    lo, hi = lo.copy(), hi.copy()
    x = np.clip(x0, lo, hi).copy()
    x = np.where((x <= lo) | (x >= hi), 0.5 * (lo + hi), x)
    done = np.zeros(x.shape, dtype=bool) if skip is None else skip.copy()
    x = np.where(done, x0, x)
    for _ in range(max_iter):
        f, df = f_df(x)
        neg = f < 0
        lo = np.where(neg, x, lo)
        hi = np.where(neg, hi, x)
        with np.errstate(divide="ignore", invalid="ignore"):
            xn = x - f / df
        scale = np.maximum(1.0, np.abs(x))
        # a tiny step that leaves the bracket by round-off is clipped, not bisected
        tiny = np.isfinite(xn) & (np.abs(xn - x) <= 1e-8 * scale)
        xn = np.where(tiny, np.clip(xn, lo, hi), xn)
        bad = ~np.isfinite(xn) | (xn < lo) | (xn > hi)
        xn = np.where(bad, 0.5 * (lo + hi), xn)
        # converged when the Newton correction is below tol relative (near a simple root the
        # error in x is about that correction; the residual itself can stall near 1e-12 where
        # the Hall-Yarborough terms are large and cancel)
        conv = np.abs(xn - x) <= tol * scale
        # an element stops at its own convergence, so a point's result does not
        # depend on the other points in the batch
        x = np.where(done, x, xn)
        done |= conv
        if done.all():
            break
    else:  # pragma: no cover - not reached for Tpr >= 1 (tested); kept as a guard
        warnings.warn("z-factor solver did not converge to 1e-10 for every point", OutOfRangeWarning, stacklevel=3)
    return x


def _z_hy_raw(tpr, ppr):
    t = 1.0 / tpr
    # Hall & Yarborough (1973): A, B, C, D as functions of t = 1/Tpr
    a = 0.06125 * t * np.exp(-1.2 * (1.0 - t) ** 2)
    b = 14.76 * t - 9.76 * t**2 + 4.58 * t**3
    c = 90.7 * t - 242.2 * t**2 + 42.4 * t**3
    d = 2.18 + 2.82 * t
    pos = ppr > 0
    app = a * ppr

    def f_df(y):
        om = 1.0 - y
        f = -app + (y + y**2 + y**3 - y**4) / om**3 - b * y**2 + c * y**d
        df = (1 + 4 * y + 4 * y**2 - 4 * y**3 + y**4) / om**4 - 2 * b * y + c * d * y ** (d - 1.0)
        return f, df

    # start from the Dranchuk-Abou-Kassem density (a few % from the HY root; a plain
    # ideal-gas start needs many safeguarded steps near Tpr = 1)
    y0 = np.where(pos, np.clip(app / _z_dak_raw(tpr, ppr), 1e-8, 0.9), 0.5)
    lo = np.zeros_like(y0)
    hi = np.full_like(y0, 1.0 - 1e-12)
    y = _safeguarded_newton(f_df, lo, hi, y0, skip=~pos)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(pos, app / y, 1.0)
    return z


def _z_dak_raw(tpr, ppr):
    a1, a2, a3, a4, a5, a6, a7, a8, a9, a10, a11 = DAK_A
    # Dranchuk & Abou-Kassem (1975), eq. in reduced density rho_r = 0.27 ppr / (z Tpr)
    t1 = a1 + a2 / tpr + a3 / tpr**3 + a4 / tpr**4 + a5 / tpr**5
    t2 = a6 + a7 / tpr + a8 / tpr**2
    t3 = a9 * (a7 / tpr + a8 / tpr**2)
    t4 = a10 / tpr**3
    pos = ppr > 0
    kk = np.where(pos, 0.27 * ppr / tpr, 1.0)  # rho_r z = 0.27 ppr / Tpr

    def zeos(r):
        e = np.exp(-a11 * r**2)
        return 1.0 + t1 * r + t2 * r**2 - t3 * r**5 + t4 * r**2 * (1.0 + a11 * r**2) * e

    def f_df(r):
        e = np.exp(-a11 * r**2)
        z = 1.0 + t1 * r + t2 * r**2 - t3 * r**5 + t4 * r**2 * (1.0 + a11 * r**2) * e
        f = z - kk / r
        df = (t1 + 2 * t2 * r - 5 * t3 * r**4
              + t4 * e * (2 * r + 2 * a11 * r**3 - 2 * a11**2 * r**5) + kk / r**2)
        return f, df

    lo = np.full_like(kk, 1e-12)
    hi = np.full_like(kk, 3.0)
    # widen the upper bracket where needed so that f(hi) > 0
    for _ in range(10):
        need = (zeos(hi) - kk / hi) <= 0
        if not need.any():
            break
        hi = np.where(need, hi * 2.0, hi)
    r = _safeguarded_newton(f_df, lo, hi, kk, skip=~pos)  # start from z = 1
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(pos, kk / r, 1.0)
    return z


def _check_reduced(tpr, ppr):
    t = check_range("tpr", tpr, 0.0, None, lo_open=True)
    p = check_range("ppr", ppr, 0.0, None)
    return np.broadcast_arrays(t, p)


def z_factor_hall_yarborough(tpr: ArrayLike, ppr: ArrayLike) -> Any:
    """Gas compressibility factor by Hall & Yarborough.

    Parameters
    ----------
    tpr : array_like
        Pseudo-reduced temperature T / Tpc, > 0. [-]
    ppr : array_like
        Pseudo-reduced pressure p / ppc, >= 0 (0 gives z = 1). [-]

    Returns
    -------
    z : float or ndarray
        Gas deviation factor. [-]

    Notes
    -----
    Solves -A ppr + (y + y^2 + y^3 - y^4)/(1 - y)^3 - B y^2 + C y^D = 0 for the
    reduced density y (0 < y < 1) by a vectorised Newton iteration with
    bisection safeguard to 1e-10, then z = A ppr / y, with t = 1/Tpr,
    A = 0.06125 t exp(-1.2 (1 - t)^2), B = 14.76 t - 9.76 t^2 + 4.58 t^3,
    C = 90.7 t - 242.2 t^2 + 42.4 t^3, D = 2.18 + 2.82 t [1]_ (a fit of the
    Standing-Katz chart by the Starling-Carnahan equation of state). Range:
    Tpr 1.2-3.0, ppr 0.1-24 (below ppr 0.1 the ideal-gas limit z -> 1 is
    reproduced and no warning is given).

    References
    ----------
    .. [1] K. R. Hall and L. Yarborough, "A New Equation of State for
       Z-factor Calculations," Oil & Gas Journal, pp. 82-92, June 18, 1973.
    """
    t, p = _check_reduced(tpr, ppr)
    src = "Hall-Yarborough (1973)"
    warn_outside("tpr", t, *HY_RANGE["tpr"], unit="-", source=src)
    warn_outside("ppr", p, 0.0, HY_RANGE["ppr"][1], unit="-", source=src)
    return _out(_z_hy_raw(t, p), tpr, ppr)


def z_factor_dranchuk_abou_kassem(tpr: ArrayLike, ppr: ArrayLike) -> Any:
    """Gas compressibility factor by Dranchuk & Abou-Kassem.

    Parameters
    ----------
    tpr : array_like
        Pseudo-reduced temperature T / Tpc, > 0. [-]
    ppr : array_like
        Pseudo-reduced pressure p / ppc, >= 0 (0 gives z = 1). [-]

    Returns
    -------
    z : float or ndarray
        Gas deviation factor. [-]

    Notes
    -----
    The 11-constant fit of the Standing-Katz chart [1]_:
    z = 1 + (A1 + A2/Tpr + A3/Tpr^3 + A4/Tpr^4 + A5/Tpr^5) rho
    + (A6 + A7/Tpr + A8/Tpr^2) rho^2 - A9 (A7/Tpr + A8/Tpr^2) rho^5
    + A10 (1 + A11 rho^2)(rho^2/Tpr^3) exp(-A11 rho^2), rho = 0.27 ppr/(z Tpr),
    solved for rho by a vectorised Newton iteration with a bisection safeguard to
    1e-10. Range: 1.0 <= Tpr <= 3.0, 0.2 <= ppr <= 30 (below ppr 0.2 the
    ideal-gas limit is reproduced and no warning is given).

    References
    ----------
    .. [1] P. M. Dranchuk and J. H. Abou-Kassem, "Calculation of Z Factors for
       Natural Gases Using Equations of State," J. Can. Pet. Tech., vol. 14,
       no. 3, pp. 34-36, 1975.
    """
    t, p = _check_reduced(tpr, ppr)
    src = "Dranchuk-Abou-Kassem (1975)"
    warn_outside("tpr", t, *DAK_RANGE["tpr"], unit="-", source=src)
    warn_outside("ppr", p, 0.0, DAK_RANGE["ppr"][1], unit="-", source=src)
    return _out(_z_dak_raw(t, p), tpr, ppr)


def _z_raw(p, t_f, gamma_g, z_method, pc_method):
    tpc, ppc = _pc_raw(gamma_g, pc_method)
    tpr = (t_f + DEG_R_OFFSET) / tpc
    ppr = p / ppc
    tpr, ppr = np.broadcast_arrays(np.asarray(tpr, float), np.asarray(ppr, float))
    if z_method == "dak":
        return _z_dak_raw(tpr, ppr)
    if z_method == "hall_yarborough":
        return _z_hy_raw(tpr, ppr)
    raise ValueError(f"z_method must be 'dak' or 'hall_yarborough', got {z_method!r}")


def gas_fvf(
    p: ArrayLike, *, t_f: ArrayLike, z: ArrayLike, unit: str = "bbl/scf"
) -> Any:
    """Gas formation volume factor from the real-gas law.

    Parameters
    ----------
    p : array_like
        Pressure, > 0. [psia]
    t_f : array_like
        Temperature, 32-600. [degF]
    z : array_like
        Gas deviation factor, > 0. [-]
    unit : {"bbl/scf", "ft3/scf"}, optional
        Unit of the result (default reservoir bbl per scf).

    Returns
    -------
    bg : float or ndarray
        Gas FVF. [bbl/scf] or [ft3/scf]

    Notes
    -----
    Bg = (p_sc / T_sc) z T / p with p_sc = 14.696 psia, T_sc = 519.67 degR (60 degF),
    i.e. 0.02828 z T / p ft3/scf = 0.005037 z T / p bbl/scf (T in degR); the
    standard definition (e.g. Craft & Hawkins 1991, ch. 1; McCain 1990, ch. 3).
    """
    pp = _check_p("p", p)
    t = _check_t(t_f)
    zz = check_range("z", z, 0.0, None, lo_open=True)
    bg = P_SC_PSIA / T_SC_DEGR * zz * (t + DEG_R_OFFSET) / pp
    if unit == "bbl/scf":
        bg = bg / FT3_PER_BBL
    elif unit != "ft3/scf":
        raise ValueError(f"unit must be 'bbl/scf' or 'ft3/scf', got {unit!r}")
    return _out(bg, p, t_f, z)


def gas_viscosity_lee_gonzalez_eakin(
    p: ArrayLike, *, t_f: ArrayLike, gamma_g: ArrayLike, z: ArrayLike, constants: str = "lee_1966"
) -> Any:
    """Gas viscosity by Lee, Gonzalez & Eakin.

    Parameters
    ----------
    p : array_like
        Pressure, > 0. [psia]
    t_f : array_like
        Temperature, 32-600. [degF]
    gamma_g : array_like
        Gas specific gravity, in (0.5, 2). [air = 1]
    z : array_like
        Gas deviation factor at (p, T), > 0. [-]
    constants : {"lee_1966", "mccain_refit"}, optional
        ``"lee_1966"`` (default): the original constants of [1]_,
        K = (9.4 + 0.02 M) T^1.5 / (209 + 19 M + T), X = 3.5 + 986/T + 0.01 M,
        Y = 2.4 - 0.2 X. ``"mccain_refit"``: the refitted set of McCain, Spivey &
        Lenn [2]_ (eqs 2.14-2.17), K = (9.379 + 0.01607 M) T^1.5 /
        (209.2 + 19.26 M + T), X = 3.448 + 986.4/T + 0.01009 M, Y = 2.447 - 0.2224 X.
        The two differ by about 1-2 %.

    Returns
    -------
    mu_g : float or ndarray
        Gas viscosity. [cP]

    Notes
    -----
    mu_g = 1e-4 K exp(X rho^Y), rho = p M / (z R T) converted to g/cm3,
    M = 28.9625 gamma_g, T in degR. Data range: p 100-8000 psia, T 100-340 degF.

    References
    ----------
    .. [1] A. L. Lee, M. H. Gonzalez and B. E. Eakin, "The Viscosity of Natural
       Gases," JPT, vol. 18, no. 8, pp. 997-1000, 1966, SPE-1340.
    .. [2] W. D. McCain Jr., J. P. Spivey and C. P. Lenn, Petroleum Reservoir
       Fluid Property Correlations, PennWell, 2011.
    """
    pp = _check_p("p", p)
    t = _check_t(t_f)
    g = _check_gamma_g(gamma_g)
    zz = check_range("z", z, 0.0, None, lo_open=True)
    src = "Lee-Gonzalez-Eakin (1966)"
    warn_outside("p", pp, *LGE_RANGE["p"], unit="psia", source=src)
    warn_outside("t_f", t, *LGE_RANGE["t_f"], unit="degF", source=src)
    return _out(_mu_g_lge_raw(pp, t, g, zz, constants), p, t_f, gamma_g, z)


def _mu_g_lge_raw(p, t_f, gamma_g, z, constants="lee_1966"):
    if constants == "lee_1966":
        k1, k2, k3, k4, k5, x1, x2, x3, y1, y2 = LGE_1966
    elif constants == "mccain_refit":
        k1, k2, k3, k4, k5, x1, x2, x3, y1, y2 = LGE_MCCAIN
    else:
        raise ValueError(f"constants must be 'lee_1966' or 'mccain_refit', got {constants!r}")
    tr = t_f + DEG_R_OFFSET
    m = M_AIR * gamma_g
    rho = p * m / (z * R_FIELD * tr) * LBFT3_TO_GCC
    k = (k1 + k2 * m) * tr**k5 / (k3 + k4 * m + tr)
    x = x1 + x2 / tr + x3 * m
    y = y1 - y2 * x
    return 1e-4 * k * np.exp(x * rho**y)


def z_factor(p: ArrayLike, *, t_f: float, gamma_g: float, z_method: str = "dak", pc_method: str = "sutton") -> Any:
    """Gas z-factor at pressure ``p`` from gas gravity (convenience wrapper).

    Parameters
    ----------
    p : array_like
        Pressure, >= 0. [psia]
    t_f : float
        Temperature, 32-600. [degF]
    gamma_g : float
        Gas specific gravity, in (0.5, 2). [air = 1]
    z_method : {"dak", "hall_yarborough"}, optional
        :func:`z_factor_dranchuk_abou_kassem` (default) or
        :func:`z_factor_hall_yarborough`.
    pc_method : {"sutton", "standing"}, optional
        :func:`pseudo_critical_sutton` (default) or :func:`pseudo_critical_standing`.

    Returns
    -------
    z : float or ndarray
        Gas deviation factor. [-]
    """
    pp = check_range("p", p, 0.0, None, unit="psia")
    t, g = _check_t(t_f), _check_gamma_g(gamma_g)
    tpc, ppc = _pc_raw(g, pc_method)
    tpr = (t + DEG_R_OFFSET) / tpc
    ppr = pp / ppc
    if z_method == "dak":
        return z_factor_dranchuk_abou_kassem(tpr, ppr)
    if z_method == "hall_yarborough":
        return z_factor_hall_yarborough(tpr, ppr)
    raise ValueError(f"z_method must be 'dak' or 'hall_yarborough', got {z_method!r}")


# --------------------------------------------------------------------------------------
# black-oil table
# --------------------------------------------------------------------------------------
def black_oil_table(
    p_psia: ArrayLike,
    *,
    api: float,
    gamma_g: float,
    t_f: float,
    pb_psia: float | None = None,
    rsb_scf_stb: float | None = None,
    method: str = "standing",
    bo_form: str = "ahmed",
    z_method: str = "dak",
    pc_method: str = "sutton",
    mu_g_constants: str = "lee_1966",
) -> pd.DataFrame:
    """Black-oil property table over a pressure array.

    Parameters
    ----------
    p_psia : array_like
        Pressures, > 0 (any order; the table keeps the given order). [psia]
    api : float
        Stock-tank oil gravity, > 0. [degAPI]
    gamma_g : float
        Solution-gas specific gravity (used as the separator gas gravity for
        Vasquez-Beggs and as the free-gas gravity), in (0.5, 2). [air = 1]
    t_f : float
        Reservoir temperature, 32-600. [degF]
    pb_psia : float, optional
        Bubble point pressure. [psia] Give exactly one of ``pb_psia`` and
        ``rsb_scf_stb``; the other is derived by the chosen correlation so that
        Rs(pb) = Rsb to round-off (for Standing the exact inverse of the printed
        Rs equation is used, which differs from :func:`bubble_point_standing` by
        about 1e-4 relative).
    rsb_scf_stb : float, optional
        Solution GOR at the bubble point. [scf/STB]
    method : {"standing", "vasquez_beggs"}, optional
        Correlation family for Rs and saturated Bo (default Standing 1947, Bo
        form chosen by ``bo_form``).
    bo_form : {"ahmed", "craft_hawkins"}, optional
        Standing Bo equation form, see :func:`oil_fvf_standing`.
    z_method : {"dak", "hall_yarborough"}, optional
        z-factor correlation (default Dranchuk & Abou-Kassem 1975).
    pc_method : {"sutton", "standing"}, optional
        Pseudo-critical correlation (default Sutton 1985).
    mu_g_constants : {"lee_1966", "mccain_refit"}, optional
        Constant set of :func:`gas_viscosity_lee_gonzalez_eakin`.

    Returns
    -------
    table : pandas.DataFrame
        Columns ``p_psia``, ``rs_scf_stb``, ``bo_bbl_stb``, ``bg_bbl_scf``,
        ``mu_o_cp``, ``mu_g_cp``, ``z``; ``table.attrs`` holds ``pb_psia``,
        ``rsb_scf_stb``, ``bob_bbl_stb``, ``mu_ob_cp`` and the methods used.

    Notes
    -----
    At and below pb: Rs(p) by :func:`rs_standing` or :func:`rs_vasquez_beggs`, Bo
    by the matching saturated correlation, mu_o by
    :func:`live_oil_viscosity_beggs_robinson`. Above pb: Rs = Rsb, Bo by the
    Vasquez-Beggs compressibility integrated exactly
    (:func:`oil_fvf_undersaturated`), mu_o by
    :func:`undersaturated_oil_viscosity_vasquez_beggs`. Every column is
    continuous at pb. Where the Vasquez-Beggs compressibility numerator is not
    positive (light, gas-poor, cold oils outside its data) a constant
    co = 3.6e-6 1/psi (the low end of its data) is used, with a warning, so Bo
    never rises with pressure above pb. Gas: z by ``z_method`` with ``pc_method`` criticals, Bg by
    :func:`gas_fvf`, mu_g by :func:`gas_viscosity_lee_gonzalez_eakin`.

    Range warnings are given once per call for the fluid description (API, gas
    gravity, temperature, Rsb, pb) against the chosen Rs correlation's data range
    and for pressures above the upper limits; low pressures (down to stock-tank
    conditions) are not warned about, since the table must reach abandonment
    and every correlation tends to its physical low-pressure limit there.

    Raises
    ------
    ValueError
        On non-positive pressures, API <= 0, gamma_g outside (0.5, 2), t_f
        outside [32, 600] degF, not exactly one of pb_psia / rsb_scf_stb, a
        non-positive given or derived bubble point, or an unknown method name.
    """
    p = _check_p("p_psia", p_psia)
    if p.ndim > 1:
        raise ValueError(f"p_psia must be a scalar or 1-D array, got shape {p.shape}")
    p = np.atleast_1d(p)
    a = float(check_range("api", api, 0.0, None, unit="degAPI", lo_open=True))
    g = float(_check_gamma_g(gamma_g))
    t = float(_check_t(t_f))
    if (pb_psia is None) == (rsb_scf_stb is None):
        raise ValueError("give exactly one of pb_psia and rsb_scf_stb")
    if method not in ("standing", "vasquez_beggs"):
        raise ValueError(f"method must be 'standing' or 'vasquez_beggs', got {method!r}")
    if bo_form not in ("ahmed", "craft_hawkins"):
        raise ValueError(f"bo_form must be 'ahmed' or 'craft_hawkins', got {bo_form!r}")
    if z_method not in ("dak", "hall_yarborough"):
        raise ValueError(f"z_method must be 'dak' or 'hall_yarborough', got {z_method!r}")
    if pc_method not in ("sutton", "standing"):
        raise ValueError(f"pc_method must be 'sutton' or 'standing', got {pc_method!r}")
    if mu_g_constants not in ("lee_1966", "mccain_refit"):
        raise ValueError(f"mu_g_constants must be 'lee_1966' or 'mccain_refit', got {mu_g_constants!r}")

    if method == "standing":
        rs_f = lambda pp: _rs_standing_raw(pp, a, g, t)  # noqa: E731
        pb_f = lambda rs: _pb_from_rs_standing_exact(rs, a, g, t)  # noqa: E731
        bo_f = lambda rs: _bo_standing_raw(rs, a, g, t, bo_form)  # noqa: E731
        rng, src = STANDING_RANGE, "Standing (1947)"
    else:
        rs_f = lambda pp: _rs_vb_raw(pp, a, g, t)  # noqa: E731
        pb_f = lambda rs: _pb_vb_raw(rs, a, g, t)  # noqa: E731
        bo_f = lambda rs: _bo_vb_raw(rs, a, g, t)  # noqa: E731
        rng, src = VB_RANGE, "Vasquez-Beggs (1980)"

    if pb_psia is not None:
        pb = float(_check_p("pb_psia", pb_psia))
        rsb = float(rs_f(pb))
    else:
        rsb = float(check_range("rsb_scf_stb", rsb_scf_stb, 0.0, None, unit="scf/STB", lo_open=True))
        pb = float(pb_f(rsb))
        if not np.isfinite(pb) or pb <= 0.0:
            raise ValueError(
                f"rsb_scf_stb = {rsb:g} gives a non-positive bubble point by {src}; "
                "give pb_psia instead"
            )

    warn_outside("api", a, *rng["api"], unit="degAPI", source=src)
    warn_outside("gamma_g", g, *rng["gamma_g"], unit="-", source=src)
    warn_outside("t_f", t, *rng["t_f"], unit="degF", source=src)
    warn_outside("rsb_scf_stb", rsb, *rng["rs"], unit="scf/STB", source=src)
    warn_outside("pb_psia", pb, *rng["p"], unit="psia", source=src)
    pmax = float(p.max())
    if pmax > VB_CO_RANGE["p"][1]:
        warn_outside("p_psia", pmax, 0.0, VB_CO_RANGE["p"][1], unit="psia",
                     source="Vasquez-Beggs (1980) compressibility")
    if pmax > LGE_RANGE["p"][1]:
        warn_outside("p_psia", pmax, 0.0, LGE_RANGE["p"][1], unit="psia", source="Lee-Gonzalez-Eakin (1966)")

    sat = p <= pb
    ps = np.minimum(p, pb)
    rs = np.where(sat, rs_f(ps), rsb)
    bob = float(bo_f(rsb))
    bo_sat = bo_f(rs)
    pu = np.maximum(p, pb)
    co_num = float(_co_numerator_vb(rsb, a, g, t))
    if co_num > 0.0:
        bo_und = _bo_undersat_vb_raw(pu, pb, bob, rsb, a, g, t)
    else:
        if np.any(~sat):
            warnings.warn(
                f"Vasquez-Beggs (1980) compressibility is not positive for this oil (numerator {co_num:g}); "
                f"using a constant co = {VB_CO_MIN:g} 1/psi above pb",
                OutOfRangeWarning,
                stacklevel=2,
            )
        bo_und = bob * np.exp(VB_CO_MIN * (pb - pu))
    bo = np.where(sat, bo_sat, bo_und)

    mu_od = float(_mu_od_br_raw(a, t))
    mu_ob = float(_mu_o_br_raw(mu_od, rsb))
    mu_o = np.where(sat, _mu_o_br_raw(mu_od, rs), _mu_undersat_vb_raw(pu, pb, mu_ob))

    z = _z_raw(p, t, g, z_method, pc_method)
    bg = P_SC_PSIA / T_SC_DEGR * z * (t + DEG_R_OFFSET) / p / FT3_PER_BBL
    mu_g = _mu_g_lge_raw(p, t, g, z, mu_g_constants)

    out = pd.DataFrame(
        {
            "p_psia": p,
            "rs_scf_stb": rs,
            "bo_bbl_stb": bo,
            "bg_bbl_scf": bg,
            "mu_o_cp": mu_o,
            "mu_g_cp": mu_g,
            "z": z,
        }
    )
    out.attrs.update(
        pb_psia=pb, rsb_scf_stb=rsb, bob_bbl_stb=bob, mu_ob_cp=mu_ob, mu_od_cp=mu_od,
        method=method, bo_form=bo_form, z_method=z_method, pc_method=pc_method,
        mu_g_constants=mu_g_constants, api=a, gamma_g=g, t_f=t,
    )
    return out
