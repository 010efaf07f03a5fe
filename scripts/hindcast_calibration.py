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

Usage: python scripts/hindcast_calibration.py [--samples 200] [--seed 0] [--set-seed N] [--hide 24 48]
       [--sets sample synthetic arps] [--plain] [--quick]
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from core.probabilistic import hindcast, hindcast_scores  # noqa: E402
from core.production import load_production  # noqa: E402
from core.synthetic_arps import noisy_arps_wells  # noqa: E402
from core.well_model import synthetic_field  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=200)
    ap.add_argument("--seed", type=int, default=0, help="seed of the bootstrap")
    ap.add_argument("--synthetic-wells", type=int, default=200)
    ap.add_argument("--arps-wells", type=int, default=200)
    ap.add_argument("--set-seed", type=int, default=None,
                    help="seed of the synthetic sets (default: 7 for the well model, 2026 for noisy Arps)")
    ap.add_argument("--hide", type=int, nargs="+", default=[24, 48], help="months hidden [months]")
    ap.add_argument("--sets", nargs="+", default=["sample", "synthetic", "arps"],
                    choices=["sample", "synthetic", "arps"])
    ap.add_argument("--plain", action="store_true", help="also score the plain block bootstrap")
    ap.add_argument("--quick", action="store_true", help="100 samples, 60 wells per synthetic set")
    a = ap.parse_args(argv)
    if a.quick:
        a.samples, a.synthetic_wells, a.arps_wells = 100, 60, 60
    warnings.simplefilter("ignore")
    s_syn = 7 if a.set_seed is None else a.set_seed
    s_arps = 2026 if a.set_seed is None else a.set_seed
    sets = {}
    if "sample" in a.sets:
        sets["sample field"] = lambda: load_production(
            ROOT / "sample_wells" / "production.csv", well_header=ROOT / "sample_wells" / "well_header.csv").production
    if "synthetic" in a.sets:
        sets[f"synthetic_field({a.synthetic_wells}, seed={s_syn})"] = lambda: load_production(
            synthetic_field(a.synthetic_wells, seed=s_syn).production, file_name="synthetic").production
    if "arps" in a.sets:
        sets[f"noisy Arps ({a.arps_wells}, seed={s_arps})"] = lambda: noisy_arps_wells(a.arps_wells, seed=s_arps)
    print(f"hindcast: last {a.hide} months hidden, {a.samples} samples, bootstrap seed {a.seed}")
    print(f"{'set':36s} {'hide':>4s} {'method':22s} {'wells':>5s} {'in P90-P10':>10s} {'<P90':>6s} {'>P10':>6s} "
          f"{'P50 MdAPE':>9s} {'P50 bias':>8s} {'level sd':>8s} {'trend sd':>8s} {'time':>6s}")
    methods = ((("block bootstrap", None),) if a.plain else ()) + (("+ level/trend (auto)", "auto"),)
    for name, make in sets.items():
        prod = make()
        for hide in a.hide:
            for label, lvl in methods:
                t0 = time.perf_counter()
                h = hindcast(prod, hide_months=hide, samples=a.samples, seed=a.seed, level_error=lvl)
                s = hindcast_scores(h)
                cal = h.attrs.get("calibration")
                sd_a = f"{cal.sd:8.3f}" if cal is not None else f"{'-':>8s}"
                sd_g = f"{cal.trend_sd:8.3f}" if cal is not None else f"{'-':>8s}"
                print(f"{name:36s} {hide:4d} {label:22s} {s['n_wells']:5d} {s['coverage_pct']:9.1f}% "
                      f"{s['below_p90_pct']:5.1f}% {s['above_p10_pct']:5.1f}% {s['p50_mdape_pct']:8.1f}% "
                      f"{s['p50_bias_pct']:7.1f}% {sd_a} {sd_g} {time.perf_counter() - t0:5.1f}s", flush=True)
                if cal is not None and cal.windows is not None:
                    for _, r in cal.windows.iterrows():
                        print(f"{'':36s}      window {int(r.start_month):2d}-{int(r.stop_month):2d} m: "
                              f"origin {int(r.origin_months)}, {int(r.n_wells)} wells, miss sd {r.miss_sd:.3f}, bootstrap sd {r.bootstrap_sd:.3f}, "
                              f"excess var {r.excess_var:+.4f}, model {r.model_var:.4f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
