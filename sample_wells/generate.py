"""Generate the Quillmere demo field (invented) with the project's well model.

Run from the repository root:

    python sample_wells/generate.py

Writes ``sample_wells/production.csv`` (long format, one row per well and month) and
``sample_wells/well_header.csv``. Deterministic: the same code gives byte-identical files.
Every oil well follows the solution-gas-drive material balance of
``core.material_balance`` through ``core.well_model.simulate_well``; the gas wells come from
``core.well_model.simulate_gas_well``.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from core.relperm import CoreyGasOil  # noqa: E402
from core.well_model import FluidRock, depletion_curve, simulate_gas_well, simulate_well  # noqa: E402

END_MONTH = pd.Timestamp("2026-10-01")
SEED = 20261001
OUT_DIR = Path(__file__).resolve().parent

# Human-style headers of our own choosing
PRODUCTION_HEADERS = {
    "well_id": "Well", "month": "Month", "oil_bbl": "Oil (bbl)", "gas_mcf": "Gas (Mcf)",
    "water_bbl": "Water (bbl)", "days_on": "Days On", "pressure_psia": "Reservoir Pressure (psia)", "unit": "Unit",
}

# Reservoir units: fluid/rock set, well count, history length range [yr], where on the depletion
# path the wells should end (stage, or "mixed"), and well-name prefix.
UNITS = {
    "Upper Sand": dict(
        fluid=FluidRock(api=38.0, gamma_g=0.80, t_f=190.0, pb_psia=2100.0, pi_psia=4300.0, p_wf_psia=200.0,
                        relperm=CoreyGasOil(swc=0.20, sgc=0.05, sorg=0.15)),
        n=10, years=(2.0, 6.0), target="stage1", prefix="QM-U", ooip=(3.0e6, 8.0e6)),
    "Middle Sand": dict(
        fluid=FluidRock(api=34.0, gamma_g=0.75, t_f=175.0, pb_psia=2300.0, pi_psia=2900.0, p_wf_psia=150.0,
                        relperm=CoreyGasOil(swc=0.22, sgc=0.07, sorg=0.16)),
        n=12, years=(4.0, 10.0), target="stage2_3", prefix="QM-M", ooip=(0.8e6, 2.5e6)),
    "Lower Sand": dict(
        fluid=FluidRock(api=31.0, gamma_g=0.72, t_f=160.0, pb_psia=1800.0, pi_psia=2400.0, p_wf_psia=100.0,
                        relperm=CoreyGasOil(swc=0.25, sgc=0.04, sorg=0.18)),
        n=12, years=(12.0, 20.0), target="stage4", prefix="QM-L", ooip=(1.0e6, 3.0e6)),
    "North Lobe": dict(
        fluid=FluidRock(api=36.0, gamma_g=0.78, t_f=185.0, pb_psia=2500.0, pi_psia=3300.0, p_wf_psia=150.0,
                        relperm=CoreyGasOil(swc=0.20, sgc=0.06, sorg=0.15)),
        n=10, years=(2.0, 18.0), target="mixed", prefix="QM-N", ooip=(1.0e6, 3.0e6)),
}

# Workovers (well, month index from first production, productivity multiplier)
WORKOVERS = {"QM-L03": (110, 1.6), "QM-L08": (150, 1.45), "QM-M05": (50, 1.5), "QM-N06": (90, 1.7)}


def _target_recovery(curve, target: str, n_months: int, rng: np.random.Generator) -> float:
    """A recovery factor Np/N inside the requested part of the material-balance path."""
    rb, r2, rp, re = curve.r_bubble, curve.r_stage2_end, curve.r_gor_peak, curve.r[-1]
    if target == "mixed":  # young wells early on the path, old wells late (plausible rates)
        choices = ["stage1", "stage2_3"] if n_months < 60 else (
            ["stage2_3", "stage3"] if n_months < 120 else ["stage3", "stage4"])
        target = choices[int(rng.integers(0, 2))]
    if target == "stage1":
        return rb * rng.uniform(0.35, 0.9)
    if target == "stage2_3":
        return rng.uniform(rb + 0.7 * (r2 - rb), r2 + 0.3 * (rp - r2))
    if target == "stage3":
        return rng.uniform(r2 + 0.2 * (rp - r2), r2 + 0.85 * (rp - r2))
    return rng.uniform(rp + 0.15 * (re - rp), rp + 0.5 * (re - rp))


def build() -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return (production, well_header) frames with the file headers of this demo."""
    prod, header, _ = build_with_truth()
    return prod, header


def build_with_truth() -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """As :func:`build`, plus the well model's known answers per well (not written to disk)."""
    rng = np.random.default_rng(SEED)
    monthly, headers, truths = [], [], []
    for unit, spec in UNITS.items():
        fluid = spec["fluid"]
        curve = depletion_curve(fluid)
        for k in range(spec["n"]):
            well = f"{spec['prefix']}{k + 1:02d}"
            n_months = int(rng.integers(int(spec["years"][0] * 12), int(spec["years"][1] * 12) + 1))
            start = END_MONTH - pd.DateOffset(months=n_months - 1)
            ooip = float(rng.uniform(*spec["ooip"]))
            r_target = _target_recovery(curve, spec["target"], n_months, rng)
            wo_month, wo_factor = WORKOVERS.get(well, (None, 1.5))
            if wo_month is not None and wo_month >= n_months - 6:
                wo_month = None
            months_eff = n_months if wo_month is None else wo_month + (n_months - wo_month) * wo_factor
            producing_days = months_eff * 30.4375 * 0.95
            j = curve.tau_at(r_target) * ooip / producing_days
            w = simulate_well(
                well, start_month=start, n_months=n_months, ooip_stb=ooip, productivity_bbl_d_psi=j, fluid=fluid,
                unit=unit, seed=int(rng.integers(0, 2**31 - 1)), gor_noise=float(rng.uniform(0.05, 0.12)),
                oil_noise=0.05, shut_in_prob=0.015, low_uptime_prob=0.04, workover_month=wo_month,
                workover_factor=wo_factor,
                survey_every_months=[None, 6, 12, 12, 18, 24][int(rng.integers(0, 6))],
                survey_noise_psia=float(rng.uniform(15.0, 40.0)), water_cut_start=float(rng.uniform(0.0, 0.02)),
                water_cut_rise_per_yr=float(rng.uniform(0.001, 0.008)),
            )
            monthly.append(w.monthly)
            headers.append(w.header)
            truths.append(w.truth)

    gas_wells = [
        dict(well_id="QM-D01", n_months=88, qi_mcf_d=3800.0, di_1_yr=0.45, b=0.9, initial_gor_scf_stb=7400.0,
             gor_rise_per_yr=0.06, api=51.0, gamma_g=0.74, t_f=235.0, pi_psia=5600.0, fluid="gas_condensate"),
        dict(well_id="QM-D02", n_months=52, qi_mcf_d=5200.0, di_1_yr=0.55, b=1.0, initial_gor_scf_stb=8600.0,
             gor_rise_per_yr=0.05, api=49.5, gamma_g=0.76, t_f=240.0, pi_psia=5800.0, fluid="gas_condensate"),
        dict(well_id="QM-D03", n_months=130, qi_mcf_d=6500.0, di_1_yr=0.30, b=0.7, initial_gor_scf_stb=62000.0,
             gor_rise_per_yr=0.02, api=58.0, gamma_g=0.66, t_f=225.0, pi_psia=5200.0, fluid="wet_gas"),
    ]
    for g in gas_wells:
        n_months = g.pop("n_months")
        w = simulate_gas_well(g.pop("well_id"), start_month=END_MONTH - pd.DateOffset(months=n_months - 1),
                              n_months=n_months, unit="Deep Sand", seed=int(rng.integers(0, 2**31 - 1)),
                              survey_every_months=24, **g)
        monthly.append(w.monthly)
        headers.append(w.header)
        truths.append(w.truth)

    prod = pd.concat(monthly, ignore_index=True)
    header = pd.DataFrame(headers)
    # A real header file is never complete: blank a few fluid fields
    header.loc[header["well_id"].isin(["QM-M07", "QM-N09"]), "bubble_point_psia"] = np.nan
    header.loc[header["well_id"] == "QM-L11", "reservoir_temp_f"] = np.nan
    header.loc[header["well_id"] == "QM-U04", "gas_specific_gravity"] = np.nan
    return _format_production(prod), _format_header(header), pd.DataFrame(truths)


def _format_production(prod: pd.DataFrame) -> pd.DataFrame:
    out = pd.DataFrame({
        "well_id": prod["well_id"],
        "month": pd.to_datetime(prod["month"]).dt.strftime("%Y-%m"),
        "oil_bbl": prod["oil_bbl"].round(0).astype(int),
        "gas_mcf": prod["gas_mcf"].round(0).astype(int),
        "water_bbl": prod["water_bbl"].round(0).astype(int),
        "days_on": prod["days_on"].round(0).astype(int),
        "pressure_psia": prod["pressure_psia"].round(0).astype("Int64"),
        "unit": prod["unit"],
    })
    return out.rename(columns=PRODUCTION_HEADERS)


def _format_header(header: pd.DataFrame) -> pd.DataFrame:
    h = header.copy()
    h["api_gravity"] = h["api_gravity"].round(1)
    h["gas_specific_gravity"] = h["gas_specific_gravity"].round(3)
    for c in ("reservoir_temp_f", "initial_pressure_psia", "bubble_point_psia"):
        h[c] = h[c].round(0).astype("Int64")
    return h[["well_id", "unit", "api_gravity", "gas_specific_gravity", "reservoir_temp_f", "initial_pressure_psia",
              "bubble_point_psia"]]


def main() -> int:
    prod, header = build()
    prod.to_csv(OUT_DIR / "production.csv", index=False, lineterminator="\n")
    header.to_csv(OUT_DIR / "well_header.csv", index=False, lineterminator="\n")
    sys.stdout.write(f"wrote {len(prod)} rows for {prod['Well'].nunique()} wells to {OUT_DIR}\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
