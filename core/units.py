"""Metric-to-field unit conversions used by the loader.

Everything inside ``core`` is in field units (bbl, Mcf, psia, degF, d). Files in metric
units (m3, 10^3 m3 of gas, kPa, bar, MPa, degC) are converted on load with the factors
below. Every factor is derived from exact SI definitions, so the values carry no rounding:

* 1 in = 0.0254 m exactly, 1 ft = 0.3048 m exactly (NIST SP 811, 2008 ed., Appendix B.8,
  entries "inch" and "foot"; international yard and pound agreement, 1959).
* 1 U.S. gallon = 231 in^3 exactly; 1 barrel (for petroleum) = 42 U.S. gallons exactly
  (NIST SP 811, App. B.8, "barrel [for petroleum, 42 gallons (U.S.)] = 1.589873 E-01 m3";
  API MPMS Ch. 15 uses the same 42-gallon barrel).
* 1 lbf = 0.45359237 kg x 9.80665 m/s^2 = 4.4482216152605 N exactly, so
  1 psi = 6894.757293168... Pa (NIST SP 811, App. B.8, "pound-force per square inch (psi)
  = 6.894757 E+00 kPa"); 1 bar = 10^5 Pa exactly; 1 standard atmosphere = 101 325 Pa exactly.
* t/degF = 1.8 t/degC + 32 (NIST SP 811, 2008 ed., Sec. 4.2.1.1 and App. B.9).

Assumptions (documented in the loader's README section):

* Gas volumes: 1 m3 of gas at metric standard conditions (15 degC, 101.325 kPa) is converted
  as a plain volume (1 m3 = 35.31467 ft3). Field standard conditions (60 degF, 14.696 psia)
  differ from the metric ones by about 0.19 % by the ideal-gas law (288.706 K / 288.15 K);
  that correction is *not* applied (common practice in production reporting), and
  :data:`GAS_STD_TEMP_RATIO_60F_15C` is given so a caller can apply it.
* Pressure: a metric or field pressure is absolute unless its unit says gauge
  (``psig``, ``kPag``, ``barg``, ``MPag``); gauge values get one standard atmosphere added.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

# --- exact SI definitions (NIST SP 811, 2008 ed., App. B.8) -----------------------------
M_PER_IN = 0.0254  # exact
M_PER_FT = 0.3048  # exact
IN3_PER_US_GAL = 231.0  # exact, U.S. liquid gallon
US_GAL_PER_BBL = 42.0  # exact, petroleum barrel
KG_PER_LB = 0.45359237  # exact, avoirdupois pound
STANDARD_GRAVITY_M_S2 = 9.80665  # exact, standard acceleration of gravity
PA_PER_ATM = 101325.0  # exact, standard atmosphere
PA_PER_BAR = 1.0e5  # exact

# --- derived (closed form from the definitions above) -----------------------------------
#: 1 bbl = 42 x 231 x 0.0254^3 m3 = 0.158987294928 m3 exactly
M3_PER_BBL = US_GAL_PER_BBL * IN3_PER_US_GAL * M_PER_IN**3
#: 1 m3 = 6.289810770... bbl (NIST SP 811 lists 1 bbl = 1.589873 E-01 m3)
BBL_PER_M3 = 1.0 / M3_PER_BBL
#: 1 ft3 = 0.3048^3 m3 = 0.028316846592 m3 exactly
M3_PER_FT3 = M_PER_FT**3
#: 1 Mcf = 1000 ft3
M3_PER_MCF = 1000.0 * M3_PER_FT3
#: 1 10^3 m3 (e3m3) of gas = 35.31466672... Mcf
MCF_PER_E3M3 = 1000.0 / M3_PER_MCF
#: 1 m3 of gas = 0.03531466672... Mcf
MCF_PER_M3 = 1.0 / M3_PER_MCF
#: 1 psi = 1 lbf / in^2 = 6894.757293168361 Pa
PA_PER_PSI = KG_PER_LB * STANDARD_GRAVITY_M_S2 / M_PER_IN**2
#: 1 kPa = 0.1450377377... psi
PSI_PER_KPA = 1000.0 / PA_PER_PSI
#: 1 bar = 14.50377377... psi
PSI_PER_BAR = PA_PER_BAR / PA_PER_PSI
#: 1 MPa = 145.0377377... psi
PSI_PER_MPA = 1.0e6 / PA_PER_PSI
#: 1 standard atmosphere = 14.69594878... psi (added to gauge pressures)
PSI_PER_ATM = PA_PER_ATM / PA_PER_PSI
#: Ideal-gas volume ratio between field (60 degF) and metric (15 degC) standard temperature
#: at the same pressure: (60 + 459.67) / 1.8 K / 288.15 K. Not applied by the loader.
GAS_STD_TEMP_RATIO_60F_15C = ((60.0 + 459.67) / 1.8) / 288.15


def m3_to_bbl(v_m3: ArrayLike) -> np.ndarray:
    """Liquid volume from cubic metres to barrels.

    Parameters
    ----------
    v_m3 : array_like
        Volume. [m3]

    Returns
    -------
    ndarray
        Volume. [bbl]

    References
    ----------
    .. [1] NIST SP 811 (2008), App. B.8, "barrel (for petroleum, 42 gallons (U.S.))".
    """
    return np.asarray(v_m3, dtype=float) * BBL_PER_M3


def e3m3_to_mcf(v_e3m3: ArrayLike) -> np.ndarray:
    """Gas volume from thousands of cubic metres (10^3 m3) to Mcf (plain volume ratio).

    Parameters
    ----------
    v_e3m3 : array_like
        Gas volume. [10^3 m3]

    Returns
    -------
    ndarray
        Gas volume. [Mcf]

    Notes
    -----
    No correction between 15 degC and 60 degF standard conditions (module docstring).

    References
    ----------
    .. [1] NIST SP 811 (2008), App. B.8, "foot" and "cubic foot".
    """
    return np.asarray(v_e3m3, dtype=float) * MCF_PER_E3M3


def kpa_to_psi(p_kpa: ArrayLike, *, gauge: bool = False) -> np.ndarray:
    """Pressure from kPa to psia (``gauge=True`` adds one standard atmosphere).

    Parameters
    ----------
    p_kpa : array_like
        Pressure. [kPa]
    gauge : bool
        True when ``p_kpa`` is a gauge pressure.

    Returns
    -------
    ndarray
        Absolute pressure. [psia]

    References
    ----------
    .. [1] NIST SP 811 (2008), App. B.8, "pound-force per square inch (psi)".
    """
    p = np.asarray(p_kpa, dtype=float) * PSI_PER_KPA
    return p + PSI_PER_ATM if gauge else p


def bar_to_psi(p_bar: ArrayLike, *, gauge: bool = False) -> np.ndarray:
    """Pressure from bar to psia (``gauge=True`` adds one standard atmosphere).

    Parameters
    ----------
    p_bar : array_like
        Pressure. [bar]
    gauge : bool
        True when ``p_bar`` is a gauge pressure.

    Returns
    -------
    ndarray
        Absolute pressure. [psia]

    References
    ----------
    .. [1] NIST SP 811 (2008), App. B.8, "bar" and "pound-force per square inch (psi)".
    """
    p = np.asarray(p_bar, dtype=float) * PSI_PER_BAR
    return p + PSI_PER_ATM if gauge else p


def degc_to_degf(t_c: ArrayLike) -> np.ndarray:
    """Temperature from degC to degF: t_F = 1.8 t_C + 32 (NIST SP 811, Sec. 4.2.1.1).

    Parameters
    ----------
    t_c : array_like
        Temperature. [degC]

    Returns
    -------
    ndarray
        Temperature. [degF]
    """
    return np.asarray(t_c, dtype=float) * 1.8 + 32.0


#: Unit spellings found in column headers -> (quantity, scale, offset, label).
#: field value = scale * value + offset (offset applied after scaling, in the field unit).
#: Keys are normalised: lower case, no spaces, "^", "°", "³" or "_" ("10^3 m3" -> "103m3").
UNIT_TOKENS: dict[str, tuple[str, float, float, str]] = {
    # liquid volume -> bbl
    "bbl": ("liquid", 1.0, 0.0, "bbl"),
    "bbls": ("liquid", 1.0, 0.0, "bbl"),
    "stb": ("liquid", 1.0, 0.0, "bbl"),
    "bo": ("liquid", 1.0, 0.0, "bbl"),
    "bw": ("liquid", 1.0, 0.0, "bbl"),
    "barrels": ("liquid", 1.0, 0.0, "bbl"),
    "mbbl": ("liquid", 1000.0, 0.0, "Mbbl"),
    "m3": ("volume_m3", 1.0, 0.0, "m3"),
    "sm3": ("volume_m3", 1.0, 0.0, "m3"),
    # gas volume -> Mcf
    "mcf": ("gas", 1.0, 0.0, "Mcf"),
    "mscf": ("gas", 1.0, 0.0, "Mcf"),
    "mmcf": ("gas", 1000.0, 0.0, "MMcf"),
    "mmscf": ("gas", 1000.0, 0.0, "MMcf"),
    "scf": ("gas", 1.0e-3, 0.0, "scf"),
    "cf": ("gas", 1.0e-3, 0.0, "scf"),
    "ft3": ("gas", 1.0e-3, 0.0, "scf"),
    "e3m3": ("gas", MCF_PER_E3M3, 0.0, "10^3 m3"),
    "103m3": ("gas", MCF_PER_E3M3, 0.0, "10^3 m3"),
    "1000m3": ("gas", MCF_PER_E3M3, 0.0, "10^3 m3"),
    "km3": ("gas", MCF_PER_E3M3, 0.0, "10^3 m3"),
    "e3sm3": ("gas", MCF_PER_E3M3, 0.0, "10^3 m3"),
    "e6m3": ("gas", 1000.0 * MCF_PER_E3M3, 0.0, "10^6 m3"),
    "106m3": ("gas", 1000.0 * MCF_PER_E3M3, 0.0, "10^6 m3"),
    # pressure -> psia
    "psi": ("pressure", 1.0, 0.0, "psia"),
    "psia": ("pressure", 1.0, 0.0, "psia"),
    "psig": ("pressure", 1.0, PSI_PER_ATM, "psig"),
    "kpa": ("pressure", PSI_PER_KPA, 0.0, "kPa"),
    "kpaa": ("pressure", PSI_PER_KPA, 0.0, "kPa"),
    "kpag": ("pressure", PSI_PER_KPA, PSI_PER_ATM, "kPa gauge"),
    "bar": ("pressure", PSI_PER_BAR, 0.0, "bar"),
    "bara": ("pressure", PSI_PER_BAR, 0.0, "bar"),
    "barg": ("pressure", PSI_PER_BAR, PSI_PER_ATM, "bar gauge"),
    "mpa": ("pressure", PSI_PER_MPA, 0.0, "MPa"),
    "mpaa": ("pressure", PSI_PER_MPA, 0.0, "MPa"),
    "mpag": ("pressure", PSI_PER_MPA, PSI_PER_ATM, "MPa gauge"),
    # temperature -> degF
    "f": ("temperature", 1.0, 0.0, "degF"),
    "degf": ("temperature", 1.0, 0.0, "degF"),
    "c": ("temperature", 1.8, 32.0, "degC"),
    "degc": ("temperature", 1.8, 32.0, "degC"),
    # time on production -> d
    "days": ("time", 1.0, 0.0, "d"),
    "day": ("time", 1.0, 0.0, "d"),
    "d": ("time", 1.0, 0.0, "d"),
    "hours": ("time", 1.0 / 24.0, 0.0, "h"),
    "hrs": ("time", 1.0 / 24.0, 0.0, "h"),
    "hr": ("time", 1.0 / 24.0, 0.0, "h"),
    "h": ("time", 1.0 / 24.0, 0.0, "h"),
    # gravity
    "api": ("api", 1.0, 0.0, "degAPI"),
    "degapi": ("api", 1.0, 0.0, "degAPI"),
}
