"""Synthetic noisy Arps wells for calibration checks, tests and benchmarks.

Each well follows an Arps (1945) hyperbolic decline q(t) = qi (1 + b di t)^(-1/b) with two
kinds of log-rate error: an AR(1) month-to-month noise (coefficient ``phi``, marginal log
standard deviation ``sd``) and a slow random-walk drift of the curve itself (step standard
deviation ``drift_sd`` per month), so the well's trend wanders as real wells do and a
forecast's error grows with its horizon. Calendar days on, every month produced.

The generator is ours (common practice for synthetic decline data); it is deterministic for
a seed.

References
----------
.. [1] J. J. Arps, "Analysis of decline curves," Trans. AIME 160, 228-247, 1945.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.signal import lfilter

from core.validation import check_range


def noisy_arps_wells(n_wells: int, *, seed: int, end: str = "2026-10-01", phi: float = 0.7,
                     sd: float = 0.08, drift_sd: float = 0.012) -> pd.DataFrame:
    """The loader's tidy monthly table of ``n_wells`` noisy hyperbolic oil wells.

    Parameters
    ----------
    n_wells : int
        Number of wells (``NA-000``, ``NA-001``, ...), 1 to 100,000.
    seed : int
        Seed of the generator (the table is the same for the same arguments).
    end : str
        Last month of every well; each well has 60-149 months ending there.
    phi : float
        AR(1) coefficient of the monthly log-rate noise, [0, 1). [-]
    sd : float
        Marginal standard deviation of that noise. [-] (log rate)
    drift_sd : float
        Standard deviation of the random-walk step of the log rate per month. [-]

    Returns
    -------
    DataFrame
        :func:`core.production.load_production` output table (unit ``U1``); qi drawn in
        80-600 bbl/d, di in 0.3-1.2 1/yr, b in 0-1.4.
    """
    from core.production import load_production

    check_range("n_wells", n_wells, 1, 100_000)
    check_range("phi", phi, 0.0, 1.0, hi_open=True)
    check_range("sd", sd, 0.0, 3.0)
    check_range("drift_sd", drift_sd, 0.0, 1.0)
    rng = np.random.default_rng(seed)
    rows = []
    end_p = pd.Period(end, "M")
    for i in range(int(n_wells)):  # per well: one draw sequence per well keeps the table stable
        n = int(rng.integers(60, 150))
        months = pd.period_range(end=end_p, periods=n, freq="M").to_timestamp()
        qi, di, b = rng.uniform(80, 600), rng.uniform(0.3, 1.2), rng.uniform(0.0, 1.4)
        t = (np.arange(n) + 0.5) / 12.0
        base = np.log(qi) - np.log1p(max(b, 1e-9) * di * t) / max(b, 1e-9)
        innov = rng.normal(0.0, sd * np.sqrt(1 - phi**2), n)
        e0 = rng.normal(0.0, sd)
        # AR(1): e[0] = e0, e[k] = phi e[k-1] + innov[k], as a linear filter
        x = innov.copy()
        x[0] = e0
        e = lfilter([1.0], [1.0, -phi], x)
        drift = np.cumsum(rng.normal(0.0, drift_sd, n))
        rate = np.exp(base + e + drift)
        dim = months.days_in_month.to_numpy()
        rows.append(pd.DataFrame({"well_id": f"NA-{i:03d}", "month": months, "oil_bbl": rate * dim,
                                  "days_on": dim, "unit": "U1"}))
    return load_production(pd.concat(rows, ignore_index=True), file_name="noisy_arps").production
