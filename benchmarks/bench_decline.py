"""Speed and fit-quality benchmark of the batched decline engine.

Generates N synthetic Arps wells (24-240 months, lognormal rate noise), then in the same run
times:

1. the engine's fit on prepared arrays (three families, all wells, worker processes);
2. the engine end to end: ``fit_field`` on the tidy monthly table (fit window, batching,
   three families, tables) and ``forecast_field`` (monthly forecast to the limit);
3. the straightforward approach an engineer would write: pandas groupby over the same table
   and ``scipy.optimize.curve_fit`` per well and per family, same objective (log-rate
   residuals, same robust loss and scale, same bounds, same fit window), started from a
   log-linear regression. For large N it runs on a random subset and is scaled up (said
   in the output).

Prints wells/s for both, the ratio, fit-quality parity (share of wells whose robust cost is
within 0.1 % of, or below, the per-well fit, per family) and peak memory.

Usage::

    .venv/bin/python benchmarks/bench_decline.py                 # 10,000 wells
    .venv/bin/python benchmarks/bench_decline.py --wells 100000  # the large case
    .venv/bin/python benchmarks/bench_decline.py --big           # same as --wells 100000
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from scipy.optimize import OptimizeWarning, curve_fit  # noqa: E402

from core.decline import (  # noqa: E402
    MODEL_NAMES,
    DeclineSettings,
    _run_chunks,
    arps_rate,
    fit_field,
)
from core.forecast import forecast_field  # noqa: E402


def synthetic_table(n_wells: int, seed: int, noise: float) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Tidy monthly table (engine's columns) of N synthetic Arps wells, and their truth."""
    rng = np.random.default_rng(seed)
    n_m = rng.integers(24, 241, n_wells)
    qi = np.exp(rng.normal(np.log(300.0), 0.8, n_wells))
    di = rng.uniform(0.1, 2.5, n_wells)
    b = rng.uniform(0.0, 2.0, n_wells)
    b[rng.random(n_wells) < 0.15] = 0.0
    b[rng.random(n_wells) < 0.10] = 1.0
    start = (2000 - 1970) * 12 + rng.integers(0, 120, n_wells)  # first month (months since 1970-01)
    total = int(n_m.sum())
    w = np.repeat(np.arange(n_wells, dtype=np.int32), n_m)
    mi = start[w] + (np.arange(total) - np.repeat(np.cumsum(n_m) - n_m, n_m))
    month = mi.astype("datetime64[M]")
    del mi
    day0 = month.astype("datetime64[D]").astype(np.int64)
    dim = (month + 1).astype("datetime64[D]").astype(np.int64) - day0
    t = day0 - start[w].astype("datetime64[M]").astype("datetime64[D]").astype(np.int64)
    del day0
    t = (t + dim / 2) / 365.25
    q = arps_rate(t, qi[w], di[w], b[w])
    del t
    q *= np.exp(rng.normal(0.0, noise, total))
    ids = pd.array(np.array([f"SYN-{i:06d}" for i in range(n_wells)], dtype=object), dtype="str")
    table = pd.DataFrame({
        "well_id": ids.take(w),
        "month": month.astype("datetime64[ns]"),
        "days_on": dim.astype(float),
        "days_in_month": dim,
        "oil_bbl": q * dim,
        "oil_rate_bbl_d": q,
    })
    del w, month, dim, q
    truth = pd.DataFrame({"well_id": ids, "qi": qi, "di": di, "b": b, "months": n_m})
    return table, truth


def _model(family):
    def hyp(t, lq, ld, b):
        x = np.exp(ld) * t
        return lq - (np.log1p(b * x) / b if b > 1e-12 else x)

    def exp_(t, lq, ld):
        return lq - np.exp(ld) * t

    def harm(t, lq, ld):
        return lq - np.log1p(np.exp(ld) * t)

    return {"exponential": exp_, "harmonic": harm, "hyperbolic": hyp}[family]


def per_well_approach(table: pd.DataFrame, fits: pd.DataFrame, wells: np.ndarray, st: DeclineSettings):
    """pandas groupby + scipy curve_fit per well and per family on the engine's windows."""
    win = fits.set_index("well_id")[["fit_start", "fit_end"]]
    sub = table[table.well_id.isin(set(wells))]
    out = {}
    lo3 = [-np.inf, np.log(1e-6), 0.0]
    hi3 = [np.inf, np.log(1e3), st.b_max]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", OptimizeWarning)
        warnings.simplefilter("ignore", RuntimeWarning)
        for wid, g in sub.groupby("well_id", sort=False):
            fs, fe = win.loc[wid, "fit_start"], win.loc[wid, "fit_end"]
            g = g[(g.month >= fs) & (g.month <= fe) & (g.oil_rate_bbl_d > 0)]
            t = ((g.month - fs).dt.days.to_numpy() + g.days_in_month.to_numpy() / 2) / 365.25
            y = np.log(g.oil_rate_bbl_d.to_numpy())
            slope, icpt = np.polyfit(t, y, 1)
            p_start = [icpt, np.log(np.clip(-slope, 1e-3, 1e2)), 0.5]
            res = {}
            for fam in MODEL_NAMES:
                f = _model(fam)
                k = 3 if fam == "hyperbolic" else 2
                try:
                    p, _ = curve_fit(f, t, y, p0=p_start[:k], bounds=(lo3[:k], hi3[:k]), method="trf",
                                     loss=st.loss, f_scale=st.loss_scale, max_nfev=2000)
                    r = y - f(t, *p)
                    z = (r / st.loss_scale) ** 2
                    rho = 2 * (np.sqrt(1 + z) - 1) if st.loss == "soft_l1" else z
                    res[fam] = 0.5 * st.loss_scale**2 * rho.sum()
                except (RuntimeError, ValueError):
                    res[fam] = np.inf
            out[wid] = res
    return out


def cpu_s() -> float:
    """CPU seconds (user + system) of this process and its finished worker processes."""
    a = resource.getrusage(resource.RUSAGE_SELF)
    b = resource.getrusage(resource.RUSAGE_CHILDREN)
    return a.ru_utime + a.ru_stime + b.ru_utime + b.ru_stime


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--wells", type=int, default=10_000)
    ap.add_argument("--big", action="store_true", help="100,000 wells")
    ap.add_argument("--subset", type=int, default=300, help="wells timed with the per-well approach")
    ap.add_argument("--workers", type=int, default=None)
    ap.add_argument("--noise", type=float, default=0.10, help="lognormal sigma of the rate noise")
    ap.add_argument("--seed", type=int, default=20261201)
    ap.add_argument("--econ-limit", type=float, default=2.0, help="bbl/d for the forecast")
    ap.add_argument("--no-monthly", action="store_true",
                    help="forecast summary only (default above 20,000 wells: the monthly table "
                         "alone would hold ~300 rows per well)")
    ap.add_argument("--skip-fit-only", action="store_true",
                    help="skip the separate fitting-only timing (default above 20,000 wells)")
    args = ap.parse_args(argv)
    n = 100_000 if args.big else args.wells
    workers = args.workers or os.cpu_count() or 1
    print(f"machine: {os.cpu_count()} CPUs, load average before {os.getloadavg()}")
    t0 = time.perf_counter()
    table, truth = synthetic_table(n, args.seed, args.noise)
    print(f"generated {n:,} wells, {len(table):,} well-months in {time.perf_counter() - t0:.1f} s; "
          f"table {table.memory_usage(deep=True).sum() / 2**20:,.0f} MB, max RSS so far "
          f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:,.0f} MB")
    st = DeclineSettings(workers=workers, streams=("oil",), econ_limit_bopd=args.econ_limit)

    # ---- end to end: fit_field and forecast_field
    c1, t1 = cpu_s(), time.perf_counter()
    ff = fit_field(table, settings=st)
    t_fit_field, c_fit_field = time.perf_counter() - t1, cpu_s() - c1
    c2, t2 = cpu_s(), time.perf_counter()
    with_monthly = not (args.no_monthly or n > 20_000)
    summary, monthly = forecast_field(ff, table, settings=st, monthly=with_monthly)
    t_forecast, c_forecast = time.perf_counter() - t2, cpu_s() - c2
    fits = ff.fits

    # ---- fitting only, on the same prepared arrays (rebuilt here exactly as fit_field does)
    from core import decline as dec

    captured = {"chunks": [], "kw": None}
    orig = dec._run_chunks

    def capture(chunks, kw, w):
        captured["chunks"].extend(chunks)
        captured["kw"] = kw
        return orig(chunks, kw, w)

    skip_fit_only = args.skip_fit_only or n > 20_000
    t_engine = c_engine = float("nan")
    rng = np.random.default_rng(args.seed + 1)
    ok_wells = fits.loc[fits.forecastable & fits.status.eq("ok"), "well_id"].to_numpy()
    m = min(args.subset, ok_wells.size)
    pick = rng.choice(ok_wells, m, replace=False)
    if not skip_fit_only:
        dec._run_chunks = capture
        try:
            fit_field(table, settings=st)
        finally:
            dec._run_chunks = orig
        chunks = captured["chunks"]
        c3, t3 = cpu_s(), time.perf_counter()
        res = _run_chunks(chunks, captured["kw"], workers)
        t_engine, c_engine = time.perf_counter() - t3, cpu_s() - c3
        del res

    # ---- straightforward approach on a random subset
    c4, t4 = cpu_s(), time.perf_counter()
    ref = per_well_approach(table, fits, pick, st)
    t_ref, c_ref = time.perf_counter() - t4, cpu_s() - c4
    ref_rate = m / t_ref

    # ---- parity: engine robust cost per family (candidates table) vs the per-well fit
    cost = ff.candidates.set_index(["well_id", "family"])["robust_cost"]
    share = {}
    for fam in MODEL_NAMES:
        share[fam] = sum(cost[(w, fam)] <= ref[w][fam] * (1 + 1e-3) + 1e-12 for w in pick) / m
    all3 = sum(all(cost[(w, f)] <= ref[w][f] * (1 + 1e-3) + 1e-12 for f in MODEL_NAMES) for w in pick) / m
    n_chunks = len(captured["chunks"])
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    kids = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    if skip_fit_only:
        print("engine fitting only: skipped (above 20,000 wells or --skip-fit-only)")
    else:
        print(f"engine fitting only (3 families, {n_chunks} batches, {workers} processes): "
              f"{t_engine:.2f} s wall = {n / t_engine:,.0f} wells/s ({c_engine:.2f} CPU s)")
    print(f"engine end to end: fit_field {t_fit_field:.2f} s ({c_fit_field:.2f} CPU s) + forecast_field "
          f"{t_forecast:.2f} s ({c_forecast:.2f} CPU s, "
          f"{f'{len(monthly):,} forecast months' if with_monthly else 'summary only'}) = "
          f"{t_fit_field + t_forecast:.2f} s = {n / (t_fit_field + t_forecast):,.0f} wells/s")
    print(f"per-well approach (pandas groupby + curve_fit x 3 families), random subset of {m} wells, "
          f"one process: {t_ref:.2f} s wall ({c_ref:.2f} CPU s) = {ref_rate:,.1f} wells/s; "
          f"scaled to {n:,} wells: {n / ref_rate:,.0f} s")
    fit_only = ("" if skip_fit_only else
                f"fitting only {n / t_engine / ref_rate:,.0f}x wall, {(n / c_engine) / (m / c_ref):,.0f}x per CPU s; ")
    print(f"ratio engine/per-well: {fit_only}fit_field end to end {n / t_fit_field / ref_rate:,.0f}x wall, "
          f"{(n / c_fit_field) / (m / c_ref):,.0f}x per CPU s")
    print("parity (robust cost within 0.1 % of, or below, the per-well fit): "
          + ", ".join(f"{f} {100 * share[f]:.2f} %" for f in MODEL_NAMES)
          + f"; all three {100 * all3:.2f} %")
    print(f"status counts: {fits.status.str.split(':').str[0].value_counts().to_dict()}")
    print(f"peak memory (max RSS): main process {own:,.0f} MB, largest worker {kids:,.0f} MB")
    print(f"load average after {os.getloadavg()}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
