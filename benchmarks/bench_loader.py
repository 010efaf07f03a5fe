"""Loader speed: writes a synthetic long-layout CSV (10,000 wells x 24-240 months, about 1.3
million rows) in a temporary folder, loads it with core.production.load_production and prints
rows per second. Run on demand: .venv/bin/python benchmarks/bench_loader.py [n_wells]
"""

from __future__ import annotations

import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from core.production import load_production  # noqa: E402


def make_file(path: Path, n_wells: int, seed: int = 7) -> int:
    rng = np.random.default_rng(seed)
    n_months = rng.integers(24, 241, size=n_wells)
    start = rng.integers(0, 120, size=n_wells)  # months after 2000-01
    wid = np.repeat(np.array([f"DD-{i:05d}" for i in range(n_wells)]), n_months)
    k = np.concatenate([np.arange(m) for m in n_months])
    mi = np.repeat(start, n_months) + k + 2000 * 12
    months = pd.to_datetime(pd.DataFrame({"year": mi // 12, "month": mi % 12 + 1, "day": 1}))
    qi = np.repeat(rng.uniform(50, 800, n_wells), n_months)
    oil = np.round(qi * 30.4 * np.exp(-0.02 * k), 1)
    df = pd.DataFrame({
        "Well Name": wid, "Date": months.dt.strftime("%Y-%m-%d"), "Oil (bbl)": oil,
        "Gas (Mcf)": np.round(oil * rng.uniform(0.4, 2.0, len(k)), 1), "Water (bbl)": np.round(oil * 0.3, 1),
        "Days On": rng.integers(20, 29, len(k)), "Reservoir": np.repeat(rng.choice(["Upper", "Lower", "East"], n_wells), n_months),
    })
    df.to_csv(path, index=False)
    return len(df)


def main(argv: list[str]) -> int:
    n_wells = int(argv[0]) if argv else 10_000
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "bench.csv"
        t0 = time.perf_counter()
        n = make_file(p, n_wells)
        t1 = time.perf_counter()
        rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        res = load_production(p, as_of="2030-12")
        t2 = time.perf_counter()
        rss1 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        size_mb = p.stat().st_size / 1e6
    print(f"wrote {n:,} rows ({size_mb:.1f} MB) for {n_wells:,} wells in {t1 - t0:.1f} s")
    print(f"load_production: {t2 - t1:.2f} s, {n / (t2 - t1):,.0f} rows/s; rows used {res.rows_used:,}, "
          f"rejected {res.rows_rejected:,}, report lines {len(res.report):,}")
    print(f"peak resident memory: {rss0:,.0f} MB after writing the file, {rss1:,.0f} MB after loading "
          f"(high-water mark of the whole process)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
