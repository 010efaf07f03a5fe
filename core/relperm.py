"""Relative permeability models for the gas-oil system (Corey type).

Used by the solution-gas-drive predictor in :mod:`core.material_balance`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from core.validation import check_range

__all__ = ["CoreyGasOil", "corey_gas_oil"]


@dataclass(frozen=True)
class CoreyGasOil:
    """Parameters of a Corey-type gas-oil relative permeability set.

    Attributes
    ----------
    swc : float
        Connate (irreducible) water saturation. [-]
    sgc : float
        Critical gas saturation: free gas is immobile below it. [-]
    sorg : float
        Residual oil saturation to gas. [-]
    krg_max : float
        Gas relative permeability end point (at Sg = 1 - Swc - Sorg). [-]
    kro_max : float
        Oil relative permeability end point (at Sg = 0). [-]
    ng : float
        Corey exponent of the gas curve. [-]
    no : float
        Corey exponent of the oil curve. [-]
    """

    swc: float = 0.20
    sgc: float = 0.05
    sorg: float = 0.15
    krg_max: float = 0.8
    kro_max: float = 1.0
    ng: float = 2.0
    no: float = 3.0

    def __post_init__(self) -> None:
        check_range("swc", self.swc, 0.0, 1.0, hi_open=True)
        check_range("sgc", self.sgc, 0.0, 1.0, hi_open=True)
        check_range("sorg", self.sorg, 0.0, 1.0, hi_open=True)
        check_range("swc + sgc + sorg", self.swc + self.sgc + self.sorg, 0.0, 1.0, hi_open=True)
        check_range("krg_max", self.krg_max, 0.0, 1.0, lo_open=True)
        check_range("kro_max", self.kro_max, 0.0, 1.0, lo_open=True)
        check_range("ng", self.ng, 0.5, 10.0)
        check_range("no", self.no, 0.5, 10.0)

    def fast(self, sg: float | np.ndarray) -> tuple[float | np.ndarray, float | np.ndarray]:
        """``(krg, kro)`` without argument checks, for inner loops (``sg`` already valid)."""
        so_n = min(max((1.0 - self.swc - sg - self.sorg) / (1.0 - self.swc - self.sorg), 0.0), 1.0) \
            if np.ndim(sg) == 0 else np.clip((1.0 - self.swc - sg - self.sorg) / (1.0 - self.swc - self.sorg), 0.0, 1.0)
        sg_n = min(max((sg - self.sgc) / (1.0 - self.swc - self.sgc - self.sorg), 0.0), 1.0) \
            if np.ndim(sg) == 0 else np.clip((sg - self.sgc) / (1.0 - self.swc - self.sgc - self.sorg), 0.0, 1.0)
        return self.krg_max * sg_n**self.ng, self.kro_max * so_n**self.no

    def __call__(self, sg: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """Return ``(krg, kro)`` at gas saturation ``sg``; see :func:`corey_gas_oil`."""
        return corey_gas_oil(
            sg,
            swc=self.swc,
            sgc=self.sgc,
            sorg=self.sorg,
            krg_max=self.krg_max,
            kro_max=self.kro_max,
            ng=self.ng,
            no=self.no,
        )


def corey_gas_oil(
    sg: ArrayLike,
    *,
    swc: float,
    sgc: float,
    sorg: float,
    krg_max: float = 1.0,
    kro_max: float = 1.0,
    ng: float = 2.0,
    no: float = 3.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Gas and oil relative permeability of the gas-oil system by Corey's model.

    Parameters
    ----------
    sg : array_like
        Gas saturation, fraction of pore volume, in [0, 1]. [-]
    swc : float
        Connate water saturation. [-]
    sgc : float
        Critical gas saturation; ``krg = 0`` for ``sg <= sgc``. [-]
    sorg : float
        Residual oil saturation to gas; ``kro = 0`` when ``So <= sorg``. [-]
    krg_max, kro_max : float
        End-point relative permeabilities of gas and oil, in (0, 1]. [-]
    ng, no : float
        Corey exponents of the gas and oil curves, in [0.5, 10]. [-]

    Returns
    -------
    krg, kro : ndarray
        Gas and oil relative permeability at ``sg``, each in [0, end point]. [-]

    Raises
    ------
    ValueError
        If a saturation is outside [0, 1], ``swc + sgc + sorg >= 1``, or an end point or
        exponent is out of range.

    Notes
    -----
    Normalised power laws [1]_ (the Corey form as generalised with end points and free
    exponents, e.g. [2]_):

    kro = kro_max [(1 - Swc - Sg - Sorg) / (1 - Swc - Sorg)]^no,

    krg = krg_max [(Sg - Sgc) / (1 - Swc - Sgc - Sorg)]^ng for Sg > Sgc, else 0.

    Both normalised saturations are clipped to [0, 1].

    References
    ----------
    .. [1] A. T. Corey, "The Interrelation Between Gas and Oil Relative
       Permeabilities," Producers Monthly, vol. 19, no. 1, pp. 38-41, 1954.
    .. [2] T. Ahmed, *Reservoir Engineering Handbook*, Gulf Professional
       Publishing, chapter on relative permeability concepts.
    """
    s = check_range("sg", sg, 0.0, 1.0)
    check_range("swc", swc, 0.0, 1.0, hi_open=True)
    check_range("sgc", sgc, 0.0, 1.0, hi_open=True)
    check_range("sorg", sorg, 0.0, 1.0, hi_open=True)
    check_range("swc + sgc + sorg", swc + sgc + sorg, 0.0, 1.0, hi_open=True)
    check_range("krg_max", krg_max, 0.0, 1.0, lo_open=True)
    check_range("kro_max", kro_max, 0.0, 1.0, lo_open=True)
    check_range("ng", ng, 0.5, 10.0)
    check_range("no", no, 0.5, 10.0)
    # Normalised oil saturation (Corey 1954, oil curve)
    so_n = np.clip((1.0 - swc - s - sorg) / (1.0 - swc - sorg), 0.0, 1.0)
    # Normalised mobile gas saturation (Corey 1954, gas curve with a critical saturation)
    sg_n = np.clip((s - sgc) / (1.0 - swc - sgc - sorg), 0.0, 1.0)
    kro = kro_max * so_n**no
    krg = krg_max * sg_n**ng
    return krg, kro
