"""Benchmark of the batch command end to end: file -> load -> fluids -> stages -> fits ->
forecast -> all output files.

Generates a synthetic field of N wells (24-240 months each; Arps oil decline, a solution-gas
GOR path with dip, rise and fall, water, days on, sparse pressure surveys) as a CSV file,
then runs ``python -m core forecast`` in a fresh process (in-process ``core.cli.main`` there)
and prints the wall time per phase and the peak resident memory (``ru_maxrss`` of that process
and of its worker processes).

    .venv/bin/python benchmarks/bench_run.py                 # 10,000 wells
    .venv/bin/python benchmarks/bench_run.py --wells 100000  # the memory target
    .venv/bin/python benchmarks/bench_run.py --large         # same as --wells 100000
    .venv/bin/python benchmarks/bench_run.py --rerun --wells 1000   # incremental re-runs

Targets (issue 6): 10,000 wells file-to-outputs under 30 s on the 2-core machine; 100,000
wells within 2 GB. The figures depend on the machine's load: say so when you quote them.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]


def synthetic_field_csv(path: Path, n_wells: int, *, seed: int = 20261201) -> int:
    """Write a synthetic production CSV of ``n_wells`` wells; return the number of rows.

    Each well: 24-240 months ending 2026-10; oil from an Arps hyperbolic decline (qi 50-800
    bbl/d, Di 0.2-1.5 /yr, b 0-1.2) with 5 % lognormal noise; GOR flat at Rsi (300-1200
    scf/STB), dipping 10 % below it, rising to 2-4 Rsi and falling, at random points of the
    life; water cut rising from 2 % to 40-90 %; days on 25-31 with 2 % shut-in months;
    a pressure survey every 12 months falling from 3,000-4,500 psia.
    """
    rng = np.random.default_rng(seed)
    n_months = rng.integers(24, 241, n_wells)
    total = int(n_months.sum())
    well_idx = np.repeat(np.arange(n_wells), n_months)
    starts = np.cumsum(n_months) - n_months
    k = np.arange(total) - np.repeat(starts, n_months)  # month index within the well
    end = pd.Period("2026-10", "M").ordinal
    first = end - n_months + 1
    ordinal = np.repeat(first, n_months) + k
    months = pd.PeriodIndex.from_ordinals(ordinal, freq="M").strftime("%Y-%m")

    qi = rng.uniform(50, 800, n_wells)[well_idx]
    di = rng.uniform(0.2, 1.5, n_wells)[well_idx]
    b = rng.uniform(0.0, 1.2, n_wells)[well_idx]
    t = k / 12.0
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.where(b > 1e-6, qi / np.power(1 + b * di * t, 1 / np.where(b > 1e-6, b, 1.0)), qi * np.exp(-di * t))
    q *= rng.lognormal(0.0, 0.05, total)
    days = rng.uniform(25, 31, total).round(0)
    shut = rng.random(total) < 0.02
    days[shut] = 0.0
    oil = q * days

    rsi = rng.uniform(300, 1200, n_wells)[well_idx]
    frac = k / np.repeat(n_months, n_months)
    pb_at = rng.uniform(0.0, 0.4, n_wells)[well_idx]
    peak_at = pb_at + rng.uniform(0.2, 0.6, n_wells)[well_idx]
    peak = rng.uniform(2.0, 4.0, n_wells)[well_idx]
    gor = np.where(
        frac < pb_at,
        rsi,
        np.where(
            frac < peak_at,
            rsi * (0.9 + (peak - 0.9) * np.clip((frac - pb_at) / np.maximum(peak_at - pb_at, 1e-9), 0, 1) ** 2),
            rsi * peak * np.exp(-2.0 * (frac - peak_at)),
        ),
    )
    gas = oil * gor / 1000.0 * rng.lognormal(0.0, 0.03, total)
    wc_end = rng.uniform(0.4, 0.9, n_wells)[well_idx]
    wc = 0.02 + (wc_end - 0.02) * frac
    water = oil * wc / (1 - wc)
    pi = rng.uniform(3000, 4500, n_wells)[well_idx]
    p = pi * (1 - 0.6 * frac)
    pressure = np.where(k % 12 == 0, p.round(0), np.nan)

    ids = np.char.add("DD-", np.char.zfill(np.arange(1, n_wells + 1).astype(str), 6))
    units = np.array(["Upper Wrenfold", "Lower Wrenfold", "Marrow Sand", "Tamsin Dolomite"])
    df = pd.DataFrame(
        {
            "well_id": ids[well_idx],
            "month": months,
            "unit": units[np.arange(n_wells) % 4][well_idx],
            "oil_bbl": oil.round(1),
            "gas_mcf": gas.round(1),
            "water_bbl": water.round(1),
            "days_on": days,
            "pressure_psia": pressure,
        }
    )
    df.to_csv(path, index=False, chunksize=500_000)
    return total


class _TreeMemory:
    """Peak of the summed resident memory of this process and all its children (sampled by a
    thread every 0.1 s through psutil when it is installed), next to ``ru_maxrss``."""

    def __init__(self, interval_s: float = 0.1) -> None:
        import threading

        self.peak_total = 0.0
        self.peak_self = 0.0
        self.peak_children = 0.0
        self._stop = threading.Event()
        self._interval = interval_s
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        try:
            import psutil
        except ImportError:  # pragma: no cover
            return
        me = psutil.Process()
        while not self._stop.is_set():
            try:
                own = me.memory_info().rss
                kids = 0
                for c in me.children(recursive=True):
                    try:
                        kids += c.memory_info().rss
                    except psutil.Error:
                        pass
            except psutil.Error:
                own, kids = 0, 0
            self.peak_self = max(self.peak_self, own / 2**20)
            self.peak_children = max(self.peak_children, kids / 2**20)
            self.peak_total = max(self.peak_total, (own + kids) / 2**20)
            self._stop.wait(self._interval)

    def __enter__(self) -> "_TreeMemory":
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()
        self._thread.join()


def _child(input_csv: str, out_dir: str, workers: str | None, block_wells: str | None = None) -> None:
    """Run the command in this process, timing each phase; print one JSON line."""
    sys.path.insert(0, str(ROOT))
    import core.export as export_mod
    import core.run as run_mod
    from core.cli import main

    timings: dict[str, float] = {}
    holder: dict[str, object] = {}
    orig_load, orig_run, orig_write = run_mod.load_inputs, run_mod.run_field, export_mod.write_outputs

    def load(*a, **k):
        t = time.perf_counter()
        r = orig_load(*a, **k)
        timings["load"] = time.perf_counter() - t
        return r

    def run(*a, **k):
        r = orig_run(*a, **k)
        holder["result"] = r
        return r

    def write(*a, **k):
        t = time.perf_counter()
        r = orig_write(*a, **k)
        timings["export"] = time.perf_counter() - t
        return r

    run_mod.load_inputs, run_mod.run_field, export_mod.write_outputs = load, run, write
    import core.streamed as streamed_mod

    orig_stream = streamed_mod.run_streamed

    phase_log = os.environ.get("DD_BENCH_PHASES")

    def stream(*a, **k):
        if phase_log:  # phases with times, to read beside the parent's memory samples
            fh = open(phase_log, "w")
            last = [""]

            def log(fraction, message=""):
                if message != last[0]:
                    last[0] = message
                    fh.write(f"{time.time():.2f}\t{message}\n")
                    fh.flush()

            k["progress"] = log
        r = orig_stream(*a, **k)
        holder["streamed"] = r
        return r

    streamed_mod.run_streamed = stream
    argv = ["forecast", input_csv, "--out", out_dir, "--quiet"]
    if workers:
        argv += ["--workers", workers]
    if block_wells is not None:
        argv += ["--block-wells", block_wells]
    t0 = time.perf_counter()
    with _TreeMemory() as mem:
        code = main(argv)
    wall = time.perf_counter() - t0
    res = holder.get("result")
    st = holder.get("streamed")
    if st is not None:
        timings = dict(st.timings)
        n_wells = int(st.summary.get("wells_read", 0))
        n_fc = int(st.summary.get("wells_forecast", 0))
        with open(Path(out_dir) / "forecast_monthly.csv", "rb") as fh:
            n_monthly = sum(buf.count(b"\n") for buf in iter(lambda: fh.read(1 << 24), b"")) - 1
    elif res is not None:
        for k2, v in res.timings.items():
            timings[k2] = v
        n_wells, n_fc, n_monthly = int(len(res.wells)), int(res.summary.get("wells_forecast", 0)), int(len(res.monthly))
    else:
        n_wells = n_fc = n_monthly = None
    # VmHWM: this process's own high-water mark (ru_maxrss survives exec and would report the
    # launching process's size at fork when that was larger)
    ru_self = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                ru_self = float(line.split()[1]) / 1024.0
    except OSError:  # pragma: no cover - not Linux
        pass
    ru_children = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
    out = {
        "exit_code": code,
        "wall_s": wall,
        "timings_s": timings,
        "streamed": st is not None,
        "blocks": None if st is None else st.n_blocks,
        "peak_rss_mib": ru_self,
        "peak_rss_children_mib": ru_children,
        "peak_tree_mib": mem.peak_total,
        "peak_tree_self_mib": mem.peak_self,
        "peak_tree_children_mib": mem.peak_children,
        "wells": n_wells,
        "wells_forecast": n_fc,
        "monthly_rows": n_monthly,
    }
    print(json.dumps(out))


def bench_rerun(csv_path: Path, workers: str | None) -> None:
    """Incremental re-runs against the full run on the same field: a one-well override
    (``core.run.rerun_wells``) and a new economic limit (``core.run.rerun_forecast``); checks
    that each equals the full run (``assert_frame_equal``, exact) and prints the times."""
    sys.path.insert(0, str(ROOT))
    from core.decline import WellOverride
    from core.run import RunSettings, load_inputs, rerun_forecast, rerun_wells, run_field

    s = RunSettings(workers=int(workers) if workers else None)
    load = load_inputs(csv_path, settings=s)
    t = time.perf_counter()
    base = run_field(load, settings=s)
    print(f"full run: {time.perf_counter() - t:.2f} s")
    ok = base.wells.loc[base.wells["status"] == "ok", "well_id"].tolist()
    ov = {ok[len(ok) // 2]: WellOverride(b=0.4, reason="benchmark", author="bench")}
    t = time.perf_counter()
    inc = rerun_wells(base, load, settings=s, overrides=ov, wells=list(ov))
    t_inc = time.perf_counter() - t
    print(f"rerun_wells, one-well override: {t_inc:.3f} s ({inc.timings.get('wells_refitted', 0):.0f} wells re-fitted; "
          + ", ".join(f"{k} {v:.3f} s" for k, v in inc.timings.items() if k in ("fit", "forecast", "assemble")) + ")")
    t = time.perf_counter()
    full = run_field(load, settings=s, overrides=ov)
    print(f"full run with the override: {time.perf_counter() - t:.2f} s")
    for n in ("wells", "monthly", "units"):
        pd.testing.assert_frame_equal(getattr(inc, n), getattr(full, n), check_exact=True)
    print("rerun_wells result identical to the full run: True")
    s2 = RunSettings(workers=s.workers, econ_limit_bopd=5.0, horizon_years=30.0)
    t = time.perf_counter()
    inc2 = rerun_forecast(full, load, settings=s2, overrides=ov)
    print(f"rerun_forecast, new economic limit and horizon: {time.perf_counter() - t:.2f} s")
    full2 = run_field(load, settings=s2, overrides=ov)
    for n in ("wells", "monthly", "units"):
        pd.testing.assert_frame_equal(getattr(inc2, n), getattr(full2, n), check_exact=True)
    print("rerun_forecast result identical to the full run: True")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--wells", type=int, default=10_000, help="number of wells (default 10,000)")
    ap.add_argument("--large", action="store_true", help="100,000 wells (the memory target)")
    ap.add_argument("--workers", default=None, help="--workers passed to the command")
    ap.add_argument("--keep", metavar="DIR", help="keep the input and outputs in DIR")
    ap.add_argument("--rerun", action="store_true", help="time the incremental re-runs (one-well override, new economic limit) in this process")
    ap.add_argument("--block-wells", default=None, metavar="N",
                    help="--block-wells passed to the command (0 = normal run; default: the command's rule, "
                         "which streams the 100,000-well file and not the 10,000-well one)")
    ap.add_argument("--input", metavar="CSV", help="use this production file instead of generating one")
    ap.add_argument("--child", nargs=2, metavar=("INPUT", "OUT"), help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        _child(args.child[0], args.child[1], args.workers, args.block_wells)
        return 0
    n = 100_000 if args.large else args.wells
    work = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="dd_bench_"))
    work.mkdir(parents=True, exist_ok=True)
    if args.input:
        csv_path = Path(args.input)
        print(f"input {csv_path} ({csv_path.stat().st_size / 2**20:,.0f} MiB)")
    else:
        csv_path = work / f"field_{n}.csv"
        t = time.perf_counter()
        rows = synthetic_field_csv(csv_path, n)
        gen = time.perf_counter() - t
        print(f"generated {n:,} wells, {rows:,} rows, {csv_path.stat().st_size / 2**20:,.0f} MiB in {gen:.1f} s (not timed below)")
    la = os.getloadavg()
    print(f"machine: {os.cpu_count()} logical cores, load average {la[0]:.2f} {la[1]:.2f} {la[2]:.2f} at the start "
          "(shared machine: figures vary with load)")
    if args.rerun:
        bench_rerun(csv_path, args.workers)
        return 0
    cmd = [sys.executable, str(Path(__file__).resolve()), "--child", str(csv_path), str(work / "out")]
    if args.workers:
        cmd += ["--workers", args.workers]
    if args.block_wells is not None:
        cmd += ["--block-wells", str(args.block_wells)]
    phases = work / "phases.tsv"
    env = dict(os.environ, DD_BENCH_PHASES=str(phases))
    # the parent samples the child's process tree from outside (a thread inside the child
    # cannot run while the child holds the interpreter lock in a long C call)
    samples: list[tuple[float, float]] = []
    with open(work / "child.out", "w") as out_fh, open(work / "child.err", "w") as err_fh:
        proc = subprocess.Popen(cmd, stdout=out_fh, stderr=err_fh, text=True, cwd=ROOT, env=env)
        try:
            import psutil

            me = psutil.Process(proc.pid)
            while proc.poll() is None:
                try:
                    total = me.memory_info().rss + sum(c.memory_info().rss for c in me.children(recursive=True))
                    samples.append((time.time(), total / 2**20))
                except psutil.Error:
                    pass
                time.sleep(0.05)
        except ImportError:  # pragma: no cover
            proc.wait()
        proc.wait()
    proc.stdout = (work / "child.out").read_text()
    proc.stderr = (work / "child.err").read_text()
    lines = [ln for ln in proc.stdout.splitlines() if ln.startswith("{")]
    if proc.returncode != 0 or not lines:
        print(proc.stdout)
        print(proc.stderr, file=sys.stderr)
        return 1
    r = json.loads(lines[-1])
    print(f"exit code {r['exit_code']}; wells {r['wells']:,}, forecast {r['wells_forecast']:,}; monthly rows {r['monthly_rows']:,}")
    print("run: " + (f"streamed, {r['blocks']:,} blocks" if r["streamed"] else "normal (one piece)"))
    for phase in ("split", "load", "fluids", "stages", "fit", "forecast", "units", "assemble", "run", "write",
                  "export", "xlsx"):
        if phase in r["timings_s"]:
            print(f"  {phase:<10} {r['timings_s'][phase]:8.2f} s")
    print(f"  {'total':<10} {r['wall_s']:8.2f} s  (file to all outputs, in-process CLI)")
    print(f"peak memory (VmHWM / ru_maxrss): {r['peak_rss_mib']:,.0f} MiB command process, "
          f"{r['peak_rss_children_mib']:,.0f} MiB largest worker process")
    print(f"peak memory of the process tree (sampled every 0.1 s): {r['peak_tree_mib']:,.0f} MiB in all "
          f"(process {r['peak_tree_self_mib']:,.0f} MiB, workers {r['peak_tree_children_mib']:,.0f} MiB at most)")
    if samples:
        peak_t, peak = max(samples, key=lambda x: x[1])
        print(f"peak memory of the process tree sampled from outside every 0.05 s: {peak:,.0f} MiB")
        if phases.exists():
            marks = [ln.split("\t", 1) for ln in phases.read_text().splitlines() if "\t" in ln]
            by_phase: dict[str, float] = {}
            for t_s, mib in samples:
                name = "start"
                for t_m, msg in marks:
                    if float(t_m) <= t_s:
                        name = msg.split(" of ")[0] if msg.startswith("block ") else msg
                by_phase[name if not name.startswith("block ") else "blocks"] = max(
                    by_phase.get(name if not name.startswith("block ") else "blocks", 0.0), mib)
            for name, mib in by_phase.items():
                print(f"  peak during {name[:60]:<60} {mib:8,.0f} MiB")
    la = os.getloadavg()
    print(f"load average at the end: {la[0]:.2f} {la[1]:.2f} {la[2]:.2f}")
    if not args.keep:
        import shutil

        shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
