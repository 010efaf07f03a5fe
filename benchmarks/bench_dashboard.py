"""Speed of the dashboard with a large field: prints figures for the README (run on demand).

A synthetic field (``core.well_model.synthetic_field``, default 1,000 wells) is written to
CSV in memory and driven through the real app with Streamlit's AppTest (in-process, no
browser: browser rendering time is not included):

* upload: the file handed to the page until the column mapping and load report are shown;
* compute: "Compute the forecast" clicked until the run is done (``core.run.run_field``);
* overview: the Field overview page drawn from the cached run;
* well switch: another well picked on the Well review page (mean and max of several);
* override: a fixed-b override applied on the Well review page (through
  ``core.run.rerun_wells`` when core has it, else a field re-run; the path taken is printed);
* a forecast-only setting (the economic limit) applied (``core.run.rerun_forecast`` when
  core has it, else a field re-run);
* cached revisit: the overview opened again with nothing changed;
* with ``--samples N``: the P90/P50/P10 computed from the overview (N samples per well).

Usage: ``python benchmarks/bench_dashboard.py [--wells 1000] [--seed 11] [--samples 0]``
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--wells", type=int, default=1000)
    ap.add_argument("--seed", type=int, default=11)
    ap.add_argument("--switches", type=int, default=5)
    ap.add_argument("--samples", type=int, default=0, help="probabilistic samples per well (0: not timed)")
    args = ap.parse_args(argv)

    os.environ["DEPLETION_DESK_DB"] = tempfile.mkdtemp(prefix="dd_bench_store_")
    from streamlit.testing.v1 import AppTest

    from core.well_model import synthetic_field

    t = time.perf_counter()
    field = synthetic_field(args.wells, seed=args.seed)
    prod = field.production.copy()
    prod["month"] = prod["month"].dt.strftime("%Y-%m")
    data = prod.to_csv(index=False).encode()
    print(f"synthetic field: {args.wells} wells, {len(prod):,} rows, {len(data) / 1e6:.1f} MB CSV "
          f"(made in {time.perf_counter() - t:.1f} s)")

    app = str(ROOT / "dashboard" / "app.py")
    at = AppTest.from_file(app, default_timeout=900).run()  # first start: the bundled sample

    def timed(step):
        t0 = time.perf_counter()
        step()
        dt = time.perf_counter() - t0
        if at.exception:
            raise SystemExit(f"app raised: {[e.value for e in at.exception]}")
        return dt

    figures = {}
    figures["upload to load report"] = timed(
        lambda: at.file_uploader(key="upload_production").set_value(("bench_field.csv", data, "text/csv")).run()
    )
    figures["compute (run_field, all wells)"] = timed(lambda: at.button(key="run_forecast").click().run())
    figures["overview drawn"] = timed(lambda: at.switch_page("views/overview.py").run())
    ready = figures["upload to load report"] + figures["compute (run_field, all wells)"] + figures["overview drawn"]
    figures["overview ready after upload (sum)"] = ready
    figures["overview revisited (cached)"] = timed(lambda: at.switch_page("views/overview.py").run())

    at.switch_page("views/well.py").run()
    ids = at.selectbox(key="well_pick").options
    switches = []
    for w in ids[1: 1 + args.switches]:
        switches.append(timed(lambda w=w: at.selectbox(key="well_pick").select(w).run()))
    figures["well switch, mean"] = statistics.mean(switches)
    figures["well switch, max"] = max(switches)

    def override():
        at.checkbox(key="ov_fix_b").check()
        at.number_input(key="ov_b").set_value(0.4)
        at.text_input(key="ov_reason").input("benchmark override")
        at.button(key="FormSubmitter:override_form-Apply override").click().run()

    figures["override applied"] = timed(override)
    path = at.session_state["dd_run_path"]
    figures["override: back to the cached well view"] = timed(lambda: at.switch_page("views/well.py").run())

    def limit():
        at.switch_page("views/settings.py").run()
        at.number_input(key="set_econ_limit").set_value(2.5)
        at.button(key="FormSubmitter:settings_form-Apply settings").click().run()
        at.switch_page("views/overview.py").run()

    figures["economic limit changed, overview redrawn"] = timed(limit)
    limit_path = at.session_state["dd_run_path"]
    if args.samples:
        def prob():
            at.switch_page("views/settings.py").run()
            at.number_input(key="set_samples").set_value(args.samples)
            at.button(key="FormSubmitter:settings_form-Apply settings").click().run()
            at.switch_page("views/overview.py").run()
            at.button(key="prob_compute_overview").click().run()

        figures[f"P90/P50/P10 computed ({args.samples} samples)"] = timed(prob)

    width = max(map(len, figures))
    print(f"dashboard timings, {args.wells} wells, AppTest in-process ({os.cpu_count()} CPUs):")
    for name, value in figures.items():
        print(f"  {name:<{width}}  {value:7.2f} s")
    print(f"override path: {path[0]} ({path[1]:.2f} s in core); economic-limit path: {limit_path[0]} "
          f"({limit_path[1]:.2f} s in core)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
