"""The streamed run by blocks of wells (core.streamed) against the normal run.

Every check compares the streamed run's output files with the normal run's on the same input
(closed-form expectation: streaming changes where rows are held, not what is computed). The
normal run is the reference; no number here comes from a table typed in by hand.

Known, documented differences (core/streamed.py module notes, README text):
* a well's Arps fit is made in a batch with the other wells of its block; the decline
  engine's batch padding moves fits in their last bits, and the solver's stopping tolerance
  (1e-8) can carry that to about 1e-9 relative (numbers within ``RTOL`` are accepted; no
  text, date, status, stage or row may differ);
* the stage tracker's material-balance match fits one Corey set per PVT group of wells and
  fills header gaps with the unit's median, so a well's stage depends on its unit's wells:
  the streamed run keeps a unit whole when it fits in a block (both fields here), and then
  no text, date or stage may differ (``TEXT_MAY_DIFFER`` is empty).
"""

from __future__ import annotations

import io
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from core import streamed
from core.cli import main
from core.export import write_outputs
from core.run import RunSettings, run_from_files

ROOT = Path(__file__).resolve().parents[1]
SAMPLE = ROOT / "sample_wells" / "production.csv"
HEADER = ROOT / "sample_wells" / "well_header.csv"

KEYS = {
    "wells.csv": ["well_id"],
    "forecast_monthly.csv": ["well_id", "month", "kind"],
    "units.csv": ["unit"],
}
#: Tolerance on numbers: the decline engine's Levenberg-Marquardt stops at a relative step of
#: 1e-8 (core.decline ``tol``), so a fit whose batch padding differs in its last bits can land
#: elsewhere within that tolerance; 1e-6 relative (and 1e-6 bbl or Mcf absolute, for months
#: near zero) is well above that and far below anything an engineer reads.
RTOL, ATOL = 1e-6, 1e-6
#: Free-text columns allowed to differ (see the module docstring).
TEXT_MAY_DIFFER: set[str] = set()


def _read(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, dtype=str, keep_default_na=False)


def _same_table(a: pd.DataFrame, b: pd.DataFrame, keys: list[str], name: str) -> None:
    assert list(a.columns) == list(b.columns), name
    assert len(a) == len(b), f"{name}: {len(a)} rows normal, {len(b)} streamed"
    a = a.sort_values(keys, kind="stable").reset_index(drop=True)
    b = b.sort_values(keys, kind="stable").reset_index(drop=True)
    for c in a.columns:
        x, y = a[c], b[c]
        if (x == y).all() or c in TEXT_MAY_DIFFER:
            continue
        xn, yn = pd.to_numeric(x, errors="coerce"), pd.to_numeric(y, errors="coerce")
        differ = (x != y).to_numpy()
        # only numbers may differ, and only in their last bits (decline batch padding)
        assert xn[differ].notna().all() and yn[differ].notna().all(), (
            f"{name}.{c}: {x[differ].iloc[0]!r} vs {y[differ].iloc[0]!r}")
        np.testing.assert_allclose(yn[differ].to_numpy(float), xn[differ].to_numpy(float), rtol=RTOL, atol=ATOL,
                                   err_msg=f"{name}.{c}")


def _compare_dirs(normal: Path, stream: Path) -> None:
    for f, keys in KEYS.items():
        _same_table(_read(normal / f), _read(stream / f), keys, f)
    a, b = _read(normal / "load_report.csv"), _read(stream / "load_report.csv")
    a, b = a[a["file"] != "(run)"], b[b["file"] != "(run)"]
    _same_table(a, b, list(a.columns), "load_report.csv")
    # streamed rows come block by block; inside a block the normal order (well id, then month)
    m = _read(stream / "forecast_monthly.csv")
    for _, g in m.groupby("well_id", sort=False):
        assert g["month"].is_monotonic_increasing
    assert m["well_id"].ne(m["well_id"].shift()).sum() == m["well_id"].nunique(), "a well's months are contiguous"


def test_sample_field_streamed_equals_normal(tmp_path: Path) -> None:
    outs = {}
    for label, extra in (("normal", ["--block-wells", "0"]), ("streamed", ["--block-wells", "12"])):
        out = io.StringIO()
        code = main(["forecast", str(SAMPLE), "--wells", str(HEADER), "--out", str(tmp_path / label), *extra],
                    stdout=out, stderr=io.StringIO())
        assert code == 0
        outs[label] = out.getvalue()
    _compare_dirs(tmp_path / "normal", tmp_path / "streamed")
    assert "streamed run: 5 block(s)" in outs["streamed"]  # one per unit (9-10 wells each)
    # the summary lines (counts and totals) are the same
    keep = [ln for ln in outs["normal"].splitlines() if ln.startswith(("rows read", "wells", "total EUR", "economic"))]
    for ln in keep:
        assert ln in outs["streamed"], ln
    with zipfile.ZipFile(tmp_path / "streamed" / "forecast.xlsx") as zf:
        names = zf.namelist()
    assert "xl/worksheets/sheet5.xml" in names  # cover, wells, monthly, units, load_report


def _synthetic_csv(path: Path, *, ragged: bool, seed: int = 7) -> None:
    """16 oil wells in 3 units (Arps hyperbolic oil, GOR rising then falling, water), 30-60
    months each, written month by month (a well's rows spread over the whole file), with bad
    rows of every kind the loader reports and a run of 9 wells whose every row is bad."""
    rng = np.random.default_rng(seed)
    rows = []
    units = ["North Lobe", "South Lobe", "Keel Sand"]
    for w in range(16):
        n = int(rng.integers(30, 61))
        qi, di, b = rng.uniform(80, 400), rng.uniform(0.3, 1.2), rng.uniform(0.2, 1.0)
        rsi = rng.uniform(400, 900)
        start = pd.Period("2021-01", "M") + int(rng.integers(0, 8))
        for k in range(n):
            t = k / 12.0
            q = qi / (1 + b * di * t) ** (1 / b) * rng.lognormal(0, 0.05)
            days = 30.0
            oil = q * days
            gor = rsi * (1.0 + 2.0 * np.sin(np.pi * min(k / n, 1.0)) ** 2)
            rows.append({"well_id": f"TW-{w:03d}", "month": str(start + k), "unit": units[w % 3],
                         "oil_bbl": f"{oil:.1f}", "gas_mcf": f"{oil * gor / 1000:.1f}", "water_bbl": f"{oil * 0.3:.1f}",
                         "days_on": "30", "pressure_psia": f"{3500 - 20 * k:.0f}" if k % 12 == 0 else ""})
    for w in range(9):  # wells with no usable row at all
        for k in range(3):
            rows.append({"well_id": f"ZZ-BAD-{w}", "month": f"2022-{k + 1:02d}", "unit": "Keel Sand",
                         "oil_bbl": "-5", "gas_mcf": "1", "water_bbl": "1", "days_on": "30", "pressure_psia": ""})
    df = pd.DataFrame(rows)
    df = df.sort_values(["month", "well_id"], kind="stable").reset_index(drop=True)  # month by month
    bad = [
        {"well_id": "", "month": "2022-05", "oil_bbl": "10"},                     # missing well id
        {"well_id": "TW-003", "month": "2022-13", "oil_bbl": "10"},               # unparseable date
        {"well_id": "TW-004", "month": "2022-06", "oil_bbl": "lots"},             # text in oil
        {"well_id": "TW-005", "month": "2099-01", "oil_bbl": "10"},               # future month
        {"well_id": "TW-006", "month": "2022-02", "oil_bbl": "10", "days_on": "45"},  # days capped
    ]
    for r in bad:
        full = {c: "" for c in df.columns}
        full.update({"unit": "North Lobe", "gas_mcf": "1", "water_bbl": "1", "days_on": "30"})
        full.update(r)
        df = pd.concat([df, pd.DataFrame([full])], ignore_index=True)
    dup = df[df["well_id"] == "TW-010"].iloc[[5]]
    conflict = df[df["well_id"] == "TW-011"].iloc[[7]].assign(oil_bbl="1.0")
    df = pd.concat([df.iloc[:200], dup, df.iloc[200:500], conflict, df.iloc[500:]], ignore_index=True)
    text = df.to_csv(index=False, lineterminator="\n")
    if ragged:  # a row with extra fields: the loader reads such a file row by row
        lines = text.split("\n")
        lines.insert(500, "TW-012,2021-03,North Lobe,5,1,1,30,,EXTRA,FIELDS")
        text = "\n".join(lines)
    path.write_text(text)


@pytest.mark.parametrize("ragged", [False, True])
def test_synthetic_multiunit_bad_rows_blocks_of_7(tmp_path: Path, ragged: bool) -> None:
    src = tmp_path / "field.csv"
    _synthetic_csv(src, ragged=ragged)
    s = RunSettings()
    normal = run_from_files(src, settings=s)
    write_outputs(normal, tmp_path / "normal", xlsx=False)
    res = streamed.run_streamed(src, tmp_path / "streamed", settings=s, block_wells=7, xlsx=False,
                                chunk_bytes=4096)  # many chunks: lines of one well in many of them
    assert res.n_blocks >= 4
    _compare_dirs(tmp_path / "normal", tmp_path / "streamed")
    # the load report stays complete: rows read = used + rejected, over all blocks
    for k in ("rows_read", "rows_used", "rows_rejected"):
        assert res.inputs[k] == normal.inputs[k], k
    assert res.inputs["rows_read"] == res.inputs["rows_used"] + res.inputs["rows_rejected"]
    assert normal.inputs["rows_rejected"] > 0
    w = _read(tmp_path / "streamed" / "wells.csv")
    bad = w[w["well_id"].str.startswith("ZZ-BAD")]
    assert len(bad) == 9 and (bad["status"] == "no usable rows (see load_report)").all()
    for k in ("wells_read", "wells_forecast", "eur_oil_bbl_total", "not_forecast_reasons", "wells_past_gor_peak"):
        assert res.summary[k] == normal.summary[k], k


def test_later_chunk_that_sniffs_differently_is_reported(tmp_path: Path) -> None:
    src = tmp_path / "mixed.csv"
    lines = ["well_id,month,unit,oil_bbl"]
    for w in range(4):
        for k in range(30):
            unit = "A" if k < 20 else '"x;y;z;w;v;u"'  # later lines hold semicolons in a text cell
            lines.append(f"W{w},{2020 + k // 12}-{k % 12 + 1:02d},{unit},{1000 - 10 * k}")
    src.write_text("\n".join(lines) + "\n")
    res = streamed.run_streamed(src, tmp_path / "out", settings=RunSettings(), block_wells=2, xlsx=False,
                                chunk_bytes=600)
    rep = _read(tmp_path / "out" / "load_report.csv")
    hit = rep[rep["reason"].str.contains("look semicolon-delimited")]
    assert len(hit) >= 1 and (hit["action"] == "info").all()
    assert res.inputs["rows_read"] == 120


def _small_field(path: Path) -> None:
    lines = ["well_id,month,unit,oil_bbl,gas_mcf"]
    for w in range(4):
        for k in range(30):
            lines.append(f"W{w},{2020 + k // 12}-{k % 12 + 1:02d},U{w % 2},{3000 * 0.97 ** k:.1f},{2000 * 0.97 ** k:.1f}")
    path.write_text("\n".join(lines) + "\n")


def test_workbook_volume_sheet_rule(tmp_path: Path) -> None:
    """Monthly rows over the sheet limit: yearly volumes; yearly over it too: no volume sheet,
    said on the cover sheet; a table over the limit goes over numbered sheets."""
    import openpyxl

    from core.export import yearly_volumes

    src = tmp_path / "small.csv"
    _small_field(src)
    streamed.run_streamed(src, tmp_path / "csv", settings=RunSettings(), block_wells=2, xlsx=False)
    m = pd.read_csv(tmp_path / "csv" / "forecast_monthly.csv", parse_dates=["month"])
    n_m, n_y = len(m), len(yearly_volumes(m))
    assert n_y + 1 < n_m
    for limit, yearly_sheet, note in ((n_y + 1, True, "sheet 'yearly' carries yearly volumes"),
                                      (3, False, "the workbook carries no volume sheet")):
        out = tmp_path / f"x{limit}"
        res = streamed.run_streamed(src, out, settings=RunSettings(), block_wells=2, row_limit=limit)
        wb = openpyxl.load_workbook(out / "forecast.xlsx", read_only=True)
        names = wb.sheetnames
        assert "forecast_monthly" not in names
        assert ("yearly" in names) == yearly_sheet
        cover = [str(r[1]) for r in wb["cover"].iter_rows(values_only=True) if r[0] == "note"]
        assert any(note in c for c in cover), cover
        rows = sum(sum(1 for _ in wb[n].iter_rows()) - 1 for n in names if n.startswith("wells"))
        assert rows == res.summary["wells_read"] == 4
        if limit == 3:  # 2 data rows per sheet: wells_1, wells_2
            assert {"wells_1", "wells_2"} <= set(names)
        if yearly_sheet:
            assert sum(1 for _ in wb["yearly"].iter_rows()) - 1 == n_y


def test_block_rule(tmp_path: Path) -> None:
    assert streamed.block_wells_for(SAMPLE, None) == 0  # small file: normal run
    assert streamed.block_wells_for(SAMPLE, 0) == 0
    assert streamed.block_wells_for(SAMPLE, 12) == 12
    with pytest.raises(ValueError):
        streamed.block_wells_for(SAMPLE, -1)
