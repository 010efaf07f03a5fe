"""Hindcast calibration of the probabilistic forecast (issue 10 item 2).

Hides the last 24 months of a field, forecasts them from the rest with
core.probabilistic.probabilistic_field and prints how often the hidden actual oil over those
months falls inside the forecast P90-P10 range (target close to 80 %, acceptable 70-90 %) and how
far the P50 misses (median absolute percentage error and median signed error = bias), for:

* the invented sample field (sample_wells/production.csv + well_header.csv),
* a synthetic field of core.well_model.synthetic_field (solution-gas-drive wells with stage
  changes, workovers, shut-ins),
* noisy Arps wells: hyperbolic declines with AR(1) log-rate noise and a random-walk drift.

Each set is scored with the plain block bootstrap (level_error=None) and with the level error
measured by the nested hindcast (level_error="auto", the default of the run).

Usage: python scripts/hindcast_calibration.py [--samples 200] [--seed 0] [--synthetic-wells 200]
       [--hide 24] [--quick]
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from core.probabilistic import hindcast, hindcast_scores  # noqa: E402
from core.production import load_production  # noqa: E402
from core.well_model import synthetic_field  # noqa: E402


def noisy_arps_wells(n_wells: int, *, seed: int, end: str = "2026-10-01", phi: float = 0.7,
                     sd: float = 0.08, drift_sd: float = 0.012) -> pd.DataFrame:
    """Hyperbolic wells, AR(1) log noise (phi, marginal sd) plus a random-walk drift per month."""
    rng = np.random.default_rng(seed)
    rows = []
    end_p = pd.Period(end, "M")
    for i in range(n_wells):
        n = int(rng.integers(60, 150))
        months = pd.period_range(end=end_p, periods=n, freq="M").to_timestamp()
        qi, di, b = rng.uniform(80, 600), rng.uniform(0.3, 1.2), rng.uniform(0.0, 1.4)
        t = (np.arange(n) + 0.5) / 12.0
        base = np.log(qi) - np.log1p(max(b, 1e-9) * di * t) / max(b, 1e-9)
        e = np.zeros(n)
        innov = rng.normal(0.0, sd * np.sqrt(1 - phi**2), n)
        e[0] = rng.normal(0.0, sd)
        for k in range(1, n):
            e[k] = phi * e[k - 1] + innov[k]
        rate = np.exp(base + e + np.cumsum(rng.normal(0.0, drift_sd, n)))
        dim = months.days_in_month.to_numpy()
        rows.append(pd.DataFrame({"well_id": f"NA-{i:03d}", "month": months, "oil_bbl": rate * dim,
                                  "days_on": dim, "unit": "U1"}))
    return load_production(pd.concat(rows, ignore_index=True), file_name="noisy_arps").production


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=200)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--synthetic-wells", type=int, default=200)
    ap.add_argument("--arps-wells", type=int, default=200)
    ap.add_argument("--hide", type=int, default=24, help="months hidden [months]")
    ap.add_argument("--quick", action="store_true", help="100 samples, 60 wells per synthetic set")
    a = ap.parse_args(argv)
    if a.quick:
        a.samples, a.synthetic_wells, a.arps_wells = 100, 60, 60
    warnings.simplefilter("ignore")
    sets = {
        "sample field": load_production(ROOT / "sample_wells" / "production.csv",
                                        well_header=ROOT / "sample_wells" / "well_header.csv").production,
        f"synthetic_field({a.synthetic_wells}, seed=7)":
            load_production(synthetic_field(a.synthetic_wells, seed=7).production, file_name="synthetic").production,
        f"noisy Arps ({a.arps_wells}, seed=2026)": noisy_arps_wells(a.arps_wells, seed=2026),
    }
    print(f"hindcast: last {a.hide} months hidden, {a.samples} samples, seed {a.seed}")
    print(f"{'set':38s} {'method':22s} {'wells':>5s} {'in P90-P10':>10s} {'<P90':>6s} {'>P10':>6s} "
          f"{'P50 MdAPE':>9s} {'P50 bias':>8s} {'time':>6s}")
    for name, prod in sets.items():
        for label, lvl in (("block bootstrap", None), ("+ level error (auto)", "auto")):
            t0 = time.perf_counter()
            h = hindcast(prod, hide_months=a.hide, samples=a.samples, seed=a.seed, level_error=lvl)
            s = hindcast_scores(h)
            print(f"{name:38s} {label:22s} {s['n_wells']:5d} {s['coverage_pct']:9.1f}% "
                  f"{s['below_p90_pct']:5.1f}% {s['above_p10_pct']:5.1f}% {s['p50_mdape_pct']:8.1f}% "
                  f"{s['p50_bias_pct']:7.1f}% {time.perf_counter() - t0:5.1f}s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
