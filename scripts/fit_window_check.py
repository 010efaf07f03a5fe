"""Which fit window forecasts better: the current regime, or everything since the bubble point?

A hindcast on wells whose future is known: hide the last ``--hide`` months of every well,
run the whole program on the rest, and compare the forecast oil over the hidden months with
the hidden actual oil (per well: ln(forecast / actual)). Two fit-window rules are compared on
the same wells, grouped by the stage each well had reached at the cut:

* ``default``: the program's automatic window (the current regime, see
  ``core.stages.REGIME_MIN_MONTHS``);
* ``since_bubble_point``: every producing month since the bubble-point crossing (given to
  the run as a fit-start override for wells in stages 3 and 4).

Data sets: synthetic solution-gas-drive wells from ``core.well_model.synthetic_field``
(material balance with noise), and the bundled sample field (the hidden months are the
field's last months).

    .venv/bin/python scripts/fit_window_check.py                  # 400 synthetic wells, 60 months hidden
    .venv/bin/python scripts/fit_window_check.py --wells 800 --hide 36 --seed 5

Prints, per rule and stage, the number of wells, the median absolute ln error and the
median ln error (bias; negative = forecast too low).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from core.decline import WellOverride  # noqa: E402
from core.run import RunSettings, run_from_files  # noqa: E402
from core.well_model import synthetic_field  # noqa: E402


def _hidden_split(prod: pd.DataFrame, hide: int) -> tuple[pd.DataFrame, pd.DataFrame, pd.Timestamp]:
    month = pd.to_datetime(prod["month"])
    end = month.max()
    cut = end - pd.DateOffset(months=hide)
    return prod[month <= cut], prod[month > cut], cut


def _forecast_over(run, cut: pd.Timestamp, end: pd.Timestamp) -> pd.Series:
    m = run.monthly
    month = pd.to_datetime(m["month"])
    sel = (m["kind"] == "forecast") & (month > cut) & (month <= end)
    return m[sel].groupby("well_id")["oil_bbl"].sum()


def _score(fc: pd.Series, actual: pd.Series, stage: pd.Series) -> pd.DataFrame:
    d = pd.DataFrame({"fc": fc, "act": actual, "stage": stage}).dropna()
    d = d[(d["act"] > 0) & (d["fc"] > 0)]
    d["ln_err"] = np.log(d["fc"] / d["act"])
    d["abs_ln_err"] = d["ln_err"].abs()
    g = d.groupby(d["stage"].astype(int))
    out = pd.DataFrame({"wells": g.size(), "median_abs_ln_err": g["abs_ln_err"].median(),
                        "median_ln_err": g["ln_err"].median()})
    out.loc["all"] = [len(d), d["abs_ln_err"].median(), d["ln_err"].median()]
    return out


def compare(prod: pd.DataFrame, header: pd.DataFrame | None, hide: int, label: str) -> pd.DataFrame:
    """Hindcast both rules on one data set; return the score table (rows: rule x stage)."""
    hist, fut, cut = _hidden_split(prod, hide)
    end = pd.to_datetime(prod["month"]).max()
    actual = fut.groupby("well_id")["oil_bbl"].sum()
    settings = RunSettings(as_of=cut.strftime("%Y-%m"))
    with tempfile.TemporaryDirectory() as tmp:
        p = Path(tmp) / "production.csv"
        hist.to_csv(p, index=False)
        h = None
        if header is not None:
            h = Path(tmp) / "wells.csv"
            header.to_csv(h, index=False)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            base = run_from_files(p, wells_path=h, settings=settings)
            w = base.wells.set_index("well_id")
            stage = pd.to_numeric(w["stage"], errors="coerce")
            bp = pd.to_datetime(w["bubble_point_date"], errors="coerce")
            late = stage.isin([3, 4]) & bp.notna()
            ovs = {wid: WellOverride(fit_start=bp[wid], reason="fit-window check: since bubble point")
                   for wid in w.index[late]}
            alt = run_from_files(p, wells_path=h, settings=settings, overrides=ovs)
    rows = []
    for rule, run in (("default", base), ("since_bubble_point", alt)):
        s = _score(_forecast_over(run, cut, end), actual, stage)
        s.insert(0, "rule", rule)
        rows.append(s)
    out = pd.concat(rows)
    out.insert(0, "data", label)
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--wells", type=int, default=400, help="synthetic wells (default 400)")
    ap.add_argument("--hide", type=int, default=60, help="months hidden at the end (default 60)")
    ap.add_argument("--seed", type=int, default=11, help="seed of the synthetic field (default 11)")
    a = ap.parse_args(argv)
    f = synthetic_field(a.wells, seed=a.seed, min_years=a.hide / 12.0 + 3.0, max_years=25.0)
    tables = [compare(f.production, f.wells, a.hide, f"synthetic seed {a.seed}")]
    sample = ROOT / "sample_wells"
    from core.run import load_inputs

    load = load_inputs(sample / "production.csv", wells_path=sample / "well_header.csv", settings=RunSettings())
    sprod = load.production.copy()
    sprod["month"] = pd.to_datetime(sprod["month"]).dt.strftime("%Y-%m-%d")
    keep = [c for c in ("well_id", "month", "oil_bbl", "gas_mcf", "water_bbl", "days_on", "pressure_psia", "unit")
            if c in sprod.columns]
    tables.append(compare(sprod[keep], load.wells,
                          min(a.hide, 24), "sample field"))
    pd.set_option("display.width", 160)
    out = pd.concat(tables)
    print(f"hindcast: forecast oil over the hidden months vs the hidden actual (ln error), {a.hide} months "
          f"hidden on the synthetic wells, {min(a.hide, 24)} on the sample field")
    print(out.round(3).to_string())
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
