"""Speed of the probabilistic run: one process versus a local Dask cluster (issue 10 item 4).

Builds N noisy Arps wells (hyperbolic declines, AR(1) log-rate noise, 60-150 months each),
fits them with core.decline.fit_field, then times core.probabilistic.probabilistic_field with
S samples in this process and on a local Dask cluster (2 worker processes, 1 thread each),
checks the two results are identical and prints the times.

Usage: python benchmarks/bench_probabilistic.py [--wells 10000] [--samples 200] [--workers 2]
       [--level-error auto|none] [--skip-single] [--skip-dask]

Prints ``uptime`` before each timed step: the machine is shared, quote the load with a time.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def noisy_arps_table(n_wells: int, seed: int = 1) -> pd.DataFrame:
    """Loader-shaped monthly table of n noisy hyperbolic wells (vectorised; no loader pass)."""
    rng = np.random.default_rng(seed)
    n = rng.integers(60, 151, n_wells)
    wid = np.repeat(np.arange(n_wells), n)
    k = np.arange(n.sum()) - np.repeat(np.cumsum(n) - n, n)
    end = np.datetime64("2026-10", "M")
    mi = end - (np.repeat(n, n) - 1 - k)
    qi, di, b = rng.uniform(80, 600, n_wells), rng.uniform(0.3, 1.2, n_wells), rng.uniform(0.01, 1.4, n_wells)
    t = (k + 0.5) / 12.0
    lq = np.log(qi[wid]) - np.log1p(b[wid] * di[wid] * t) / b[wid]
    e = rng.normal(0.0, 0.06, wid.size)  # i.i.d. part; AR(1) by a short filter below
    e = pd.Series(e).groupby(wid).transform(lambda s: s.ewm(alpha=0.4).mean()).to_numpy()
    months = mi.astype("datetime64[ns]")
    dim = pd.DatetimeIndex(months).days_in_month.to_numpy().astype(float)
    rate = np.exp(lq + e)
    oil = rate * dim
    return pd.DataFrame({
        "well_id": np.char.add("BW-", np.char.zfill(wid.astype(str), 5)), "month": months, "unit": "U1",
        "oil_bbl": oil, "gas_mcf": np.nan, "water_bbl": 0.0, "days_on": dim, "days_on_given": True,
        "days_in_month": dim.astype(int), "pressure_psia": np.nan, "oil_rate_bbl_d": rate,
        "gas_rate_mcf_d": np.nan, "water_rate_bbl_d": 0.0, "oil_rate_cal_bbl_d": rate,
    })


def uptime() -> str:
    """The machine's load (``uptime``; the cores are shared with other jobs)."""
    try:
        return subprocess.run(["uptime"], capture_output=True, text=True, timeout=10).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        return "load average %.2f, %.2f, %.2f" % os.getloadavg()


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--wells", type=int, default=10000)
    ap.add_argument("--samples", type=int, default=200)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--level-error", default="auto", choices=["auto", "none"],
                    help="auto: the run's default (level and trend error by hindcasts); none: plain bootstrap")
    ap.add_argument("--skip-single", action="store_true")
    ap.add_argument("--skip-dask", action="store_true")
    a = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    from core.decline import DeclineSettings, fit_field
    from core.probabilistic import probabilistic_field
    from core.scale import dask_client

    print(f"machine: {os.cpu_count()} logical CPUs (shared); wells {a.wells}, samples {a.samples}, "
          f"level error {a.level_error}")
    print(f"uptime: {uptime()}")
    t = time.perf_counter()
    prod = noisy_arps_table(a.wells)
    print(f"build table: {time.perf_counter() - t:7.1f} s ({len(prod)} well-months)")
    st = DeclineSettings(econ_limit_bopd=5.0, streams=("oil",), workers=1)
    t = time.perf_counter()
    ff = fit_field(prod, settings=st)
    print(f"deterministic fit (1 process): {time.perf_counter() - t:7.1f} s")
    kw = dict(settings=st, samples=a.samples, seed=0, level_error=None if a.level_error == "none" else "auto")
    single = dist = None
    if not a.skip_single:
        print(f"uptime before the single-process run: {uptime()}", flush=True)
        t = time.perf_counter()
        single = probabilistic_field(prod, ff, **kw)
        ts = time.perf_counter() - t
        if single.calibration is not None:
            print(f"calibration: {single.calibration.method}")
        print(f"probabilistic, one process: {ts:7.1f} s  ({1e3 * ts / a.wells:.1f} ms per well, "
              f"{len(single.monthly)} monthly rows)")
    if not a.skip_dask:
        print(f"uptime before the local cluster run: {uptime()}", flush=True)
        t = time.perf_counter()
        with dask_client("local", n_workers=a.workers) as client:
            t_up = time.perf_counter() - t
            t = time.perf_counter()
            dist = probabilistic_field(prod, ff, scheduler=client, **kw)
            td = time.perf_counter() - t
        print(f"local cluster start ({a.workers} workers): {t_up:7.1f} s")
        print(f"probabilistic, local cluster: {td:7.1f} s  ({1e3 * td / a.wells:.1f} ms per well)")
        print(f"uptime after: {uptime()}")
    if single is not None and dist is not None:
        same = (single.wells.equals(dist.wells) and single.monthly.equals(dist.monthly)
                and single.field.equals(dist.field) and single.field_monthly.equals(dist.field_monthly)
                and np.array_equal(single.remaining_samples, dist.remaining_samples)
                and np.array_equal(single.eur_samples, dist.eur_samples))
        print(f"identical results: {same}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
