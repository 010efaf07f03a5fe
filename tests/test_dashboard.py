"""AppTest tests of the dashboard: every page renders, and the numbers it shows are core's.

The expected numbers are produced by ``core.run.run_field`` on the same input in the test
itself: the dashboard must show core's numbers, not its own (the check is one of identity
between two paths through the program, not of the numbers' engineering correctness, which
the core tests cover against published sources).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

from core.decline import WellOverride
from core.production import load_production
from core.run import RunSettings, run_field

ROOT = Path(__file__).resolve().parents[1]
APP = str(ROOT / "dashboard" / "app.py")
SAMPLE = ROOT / "sample_wells" / "production.csv"
HEADER = ROOT / "sample_wells" / "well_header.csv"
PAGES = [
    "views/load.py", "views/overview.py", "views/well.py", "views/planning.py",
    "views/exports.py", "views/settings.py", "views/about.py",
]
APPLY_OVERRIDE = "FormSubmitter:override_form-Apply override"
APPLY_SETTINGS = "FormSubmitter:settings_form-Apply settings"
ADD_FLAG = "FormSubmitter:flag_form-Add the flag"


@pytest.fixture(autouse=True)
def _fresh_store(tmp_path, monkeypatch):
    # Every test gets its own empty store (no record leaks between tests or to $HOME).
    monkeypatch.setenv("DEPLETION_DESK_DB", str(tmp_path / "store"))
    monkeypatch.delenv("DEPLETION_DESK_MAX_UPLOAD_MB", raising=False)


def _sample_load():
    header = HEADER.read_bytes() if HEADER.exists() else None
    return load_production(SAMPLE.read_bytes(), file_name=SAMPLE.name, units="field", well_header=header)


@pytest.fixture(scope="module")
def sample_run():
    """core's own run of the bundled sample with default settings (the expected numbers)."""
    load = _sample_load()
    return load, run_field(load, settings=RunSettings())


@pytest.fixture(scope="module")
def limit_run(sample_run):
    """core's run of the sample with a 7.5 bbl/d economic limit."""
    load, _ = sample_run
    return run_field(load, settings=RunSettings(econ_limit_bopd=7.5))


def _split_sample() -> tuple[bytes, bytes]:
    """The sample file without its newest month, and a file with only the newest month."""
    lines = SAMPLE.read_bytes().splitlines()
    last = max(line.split(b",")[1] for line in lines[1:])
    earlier = b"\n".join(line for line in lines if line.split(b",")[1] != last) + b"\n"
    newest = b"\n".join([lines[0]] + [line for line in lines[1:] if line.split(b",")[1] == last]) + b"\n"
    return earlier, newest


@pytest.fixture(scope="module")
def earlier_run():
    """core's run of the sample without its newest month (uploaded as quillmere_2026-09.csv)."""
    earlier, _ = _split_sample()
    load = load_production(earlier, file_name="quillmere_2026-09.csv", units="field")
    return load, run_field(load, settings=RunSettings())


def _app() -> AppTest:
    at = AppTest.from_file(APP, default_timeout=120).run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def _metric(at: AppTest, label: str) -> str:
    found = [m.value for m in at.metric if m.label == label]
    assert found, f"no metric {label!r}; have {[m.label for m in at.metric]}"
    return found[0]


def _bbl(x: float) -> str:
    # The page's own format for volumes (thousands separators, no decimals).
    return f"{x:,.0f} bbl"


def _values(v):
    """Numbers of a plotly JSON array (a list, or a typed array {"dtype", "bdata"} in base64)."""
    import base64

    import numpy as np

    if isinstance(v, dict) and "bdata" in v:
        return np.frombuffer(base64.b64decode(v["bdata"]), dtype=np.dtype(v["dtype"])).astype(float)
    return np.asarray([np.nan if x is None else x for x in v], dtype=float)


def _frame_with(at: AppTest, column: str) -> pd.DataFrame:
    """The first dataframe shown with this column."""
    found = [d.value for d in at.dataframe if column in d.value.columns]
    assert found, f"no dataframe with column {column!r}"
    return found[0]


def _apply_fixed_b(at: AppTest, b: float, reason: str, author: str | None = None) -> None:
    """Apply a fixed-b override with a reason on the well page, as an engineer would."""
    at.checkbox(key="ov_fix_b").check()
    at.number_input(key="ov_b").set_value(b)
    at.text_input(key="ov_reason").input(reason)
    if author is not None:
        at.text_input(key="ov_author").input(author)
    at.button(key=APPLY_OVERRIDE).click().run()


def _ok(at: AppTest) -> None:
    assert not at.exception, [e.value for e in at.exception]
    assert not at.error, [e.value for e in at.error]


def test_every_page_renders_with_the_sample_field():
    at = _app()
    for page in PAGES:
        at.switch_page(page).run()
        _ok(at)
    # The caution is shown on the pages with forecasts and planning statuses.
    for page in ("views/overview.py", "views/well.py", "views/planning.py", "views/exports.py"):
        at.switch_page(page).run()
        assert any("reserves bookings and field decisions follow local regulations" in c.value for c in at.caption)


def test_load_page_shows_the_loaders_counts(sample_run):
    load, _ = sample_run
    at = _app()
    _ok(at)
    assert _metric(at, "Rows read") == f"{load.rows_read:,}"
    assert _metric(at, "Rows used") == f"{load.rows_used:,}"
    assert _metric(at, "Rows rejected") == f"{load.rows_rejected:,}"
    # Closed-form identity of the loader contract: read = used + rejected.
    assert load.rows_read == load.rows_used + load.rows_rejected
    assert _metric(at, "Wells") == f"{load.production['well_id'].nunique():,}"


def test_overview_numbers_equal_core_run(sample_run):
    _, run = sample_run
    at = _app()
    at.switch_page("views/overview.py").run()
    _ok(at)
    assert _metric(at, "Wells") == f"{len(run.wells):,}"
    assert _metric(at, "EUR oil") == _bbl(run.wells["eur_oil_bbl"].sum())
    assert _metric(at, "Remaining oil") == _bbl(run.wells["remaining_oil_bbl"].sum())
    assert _metric(at, "Cumulative oil") == _bbl(run.wells["cum_oil_bbl"].sum())
    assert _metric(at, "Wells past the GOR peak") == f"{int(run.wells['passed_gor_peak'].astype(bool).sum()):,}"
    table = at.dataframe[0].value
    assert len(table) == len(run.wells)
    merged = table.merge(run.wells, on="well_id", suffixes=("_shown", "_core"))
    pd.testing.assert_series_equal(merged["eur_oil_bbl_shown"], merged["eur_oil_bbl_core"], check_names=False)


def test_overview_filter_narrows_the_table(sample_run):
    _, run = sample_run
    at = _app()
    at.switch_page("views/overview.py").run()
    unit = str(run.wells["unit"].iloc[0])
    at.multiselect(key="filter_unit").select(unit).run()
    _ok(at)
    shown = at.dataframe[0].value
    assert set(shown["unit"]) == {unit}
    assert len(shown) == int((run.wells["unit"].astype(str) == unit).sum())


def test_settings_change_reruns_with_the_new_limit(limit_run):
    at = _app()
    at.switch_page("views/settings.py").run()
    at.number_input(key="set_econ_limit").set_value(7.5)
    at.button(key=APPLY_SETTINGS).click().run()
    _ok(at)
    at.switch_page("views/overview.py").run()
    _ok(at)
    expected = limit_run
    assert _metric(at, "EUR oil") == _bbl(expected.wells["eur_oil_bbl"].sum())
    assert set(expected.wells["econ_limit_bopd"].dropna()) <= {7.5}


def test_kept_run_and_the_change_report_equal_core(sample_run, limit_run):
    from core.changes import compare_runs, summarise_changes

    _, run0 = sample_run
    at = _app()
    at.switch_page("views/overview.py").run()
    at.button(key="save_run").click().run()
    _ok(at)
    assert any("Kept in the store as run" in s.value for s in at.success)
    at.switch_page("views/settings.py").run()
    at.number_input(key="set_econ_limit").set_value(7.5)
    at.button(key=APPLY_SETTINGS).click().run()
    at.switch_page("views/overview.py").run()
    _ok(at)
    s = summarise_changes(compare_runs(run0.wells, limit_run.wells))
    assert _metric(at, "EUR change") == f"{s['eur_change_bbl']:+,.0f} bbl"
    assert _metric(at, "Stage changes") == f"{s['n_stage_changed']:,}"


def test_settings_economic_limit_from_prices_equals_core(sample_run):
    load, _ = sample_run
    at = _app()
    at.switch_page("views/settings.py").run()
    at.radio(key="set_mode").set_value("prices and costs")
    at.number_input(key="set_oil_price").set_value(60.0)
    at.number_input(key="set_opex").set_value(2500.0)
    at.number_input(key="set_nri").set_value(0.8)
    at.button(key=APPLY_SETTINGS).click().run()
    _ok(at)
    at.switch_page("views/overview.py").run()
    _ok(at)
    expected = run_field(load, settings=RunSettings(oil_price=60.0, opex_per_month=2500.0, nri=0.8))
    assert _metric(at, "EUR oil") == _bbl(expected.wells["eur_oil_bbl"].sum())


def test_well_page_shows_the_forecast_note_of_a_stage_one_well(sample_run):
    _, run = sample_run
    w = run.wells
    s1 = w.loc[w["stage"].eq(1).fillna(False) & (w["forecast_note"] != ""), "well_id"].astype(str)
    assert len(s1)
    at = _app()
    at.switch_page("views/well.py").run()
    at.selectbox(key="well_pick").set_value(s1.iloc[0]).run()
    _ok(at)
    note = w.set_index("well_id").loc[s1.iloc[0], "forecast_note"]
    assert any(c.value == f"Forecast note: {note}" for c in at.caption)


def test_well_page_shows_core_numbers_and_an_override_refits_it(sample_run):
    load, run = sample_run
    at = _app()
    at.switch_page("views/well.py").run()
    _ok(at)
    well = at.selectbox(key="well_pick").value
    row = run.wells.set_index("well_id").loc[well]
    if pd.notna(row["eur_oil_bbl"]):
        assert _metric(at, "EUR oil") == _bbl(row["eur_oil_bbl"])
    charts = [json.loads(c.proto.spec) for c in at.get("plotly_chart")]
    names = {t.get("name") for c in charts for t in c["data"]}
    assert {"actual oil", "producing GOR"} <= names
    facts = dict(_frame_with(at, "item")[["item", "value"]].itertuples(index=False))
    assert facts["fit window starts after"] == str(row["fit_regime_source"])
    assert facts["fit window start"] == row["fit_start"].strftime("%Y-%m")
    # Apply an override: fixed b = 0.3, with a reason.
    _apply_fixed_b(at, 0.3, "b from the unit's analogue wells", author="A. Engineer")
    _ok(at)
    import core.run

    # with core's incremental step the override re-runs that well only, from the cached run
    if hasattr(core.run, "rerun_wells"):
        try:
            path = at.session_state["dd_run_path"][0]
        except KeyError:  # the run was already cached by an earlier test in this process
            path = "cached"
        assert path in ("re-run of 1 well", "cached")
    ov = WellOverride(b=0.3, reason="b from the unit's analogue wells", author="A. Engineer")
    expected = run_field(load, settings=RunSettings(), overrides={well: ov}).wells.set_index("well_id").loc[well]
    assert _metric(at, "b") == f"{expected['b']:.2f}"
    if pd.notna(expected["eur_oil_bbl"]):
        assert _metric(at, "EUR oil") == _bbl(expected["eur_oil_bbl"])
    # Recorded with its reason in the store's append-only trail.
    log = at.dataframe[-1].value
    assert "b from the unit's analogue wells" in set(log["reason"])
    assert "A. Engineer" in set(log["author"])


def test_override_without_reason_is_refused():
    at = _app()
    at.switch_page("views/well.py").run()
    at.checkbox(key="ov_fix_b").check()
    at.button(key=APPLY_OVERRIDE).click().run()
    assert not at.exception
    assert any("needs a reason" in e.value for e in at.error)
    assert at.session_state["dd_overrides"] == {}


def test_overrides_and_flags_survive_a_new_session():
    at = _app()
    at.switch_page("views/well.py").run()
    well = at.selectbox(key="well_pick").value
    _apply_fixed_b(at, 0.3, "workover in the window")
    _ok(at)
    at.switch_page("views/planning.py").run()
    at.text_area(key="flag_note").input("pressure support study")
    at.button(key=ADD_FLAG).click().run()
    _ok(at)
    # A new browser tab is a new session: the store gives back the override and the flag.
    again = _app()
    assert again.session_state["dd_overrides"][well].b == 0.3
    again.switch_page("views/planning.py").run()
    flags = [d.value for d in again.dataframe if "note" in d.value.columns]
    assert flags and "pressure support study" in set(flags[0]["note"])


def test_upload_through_the_page_then_compute(earlier_run):
    _, expected = earlier_run
    earlier, _ = _split_sample()
    at = _app()
    at.file_uploader(key="upload_production").set_value(("quillmere_2026-09.csv", earlier, "text/csv")).run()
    _ok(at)
    # The report is shown before anything is computed.
    assert [b for b in at.button if b.key == "run_forecast"]
    assert _metric(at, "Rows read") == f"{len(earlier.splitlines()) - 1:,}"
    at.button(key="run_forecast").click().run()
    _ok(at)
    at.switch_page("views/overview.py").run()
    _ok(at)
    assert _metric(at, "Wells") == f"{len(expected.wells):,}"
    assert _metric(at, "EUR oil") == _bbl(expected.wells["eur_oil_bbl"].sum())


def test_unreadable_upload_gives_one_clear_message():
    at = _app()
    at.file_uploader(key="upload_production").set_value(("empty.csv", b"", "text/csv")).run()
    assert not at.exception
    assert len(at.error) == 1
    assert "empty.csv" in at.error[0].value


def test_upload_above_the_limit_is_refused_with_a_message(monkeypatch):
    monkeypatch.setenv("DEPLETION_DESK_MAX_UPLOAD_MB", "0.001")
    at = _app()
    at.file_uploader(key="upload_production").set_value(("big.csv", b"x" * 5000, "text/csv")).run()
    assert not at.exception
    assert any("upload limit" in e.value and "big.csv" in e.value for e in at.error)


def test_exports_page_offers_the_workbook_and_the_csv_tables():
    at = _app()
    at.switch_page("views/exports.py").run()
    _ok(at)
    labels = {b.proto.label for b in at.get("download_button")}
    assert {"Forecast workbook (XLSX)", "wells.csv", "forecast_monthly.csv", "units.csv", "load_report.csv"} <= labels
    at.radio(key="export_scope").set_value("One well").run()
    _ok(at)


def test_planning_page_shows_core_unit_table(sample_run):
    _, run = sample_run
    at = _app()
    at.switch_page("views/planning.py").run()
    _ok(at)
    units = at.dataframe[0].value
    assert list(units["unit"]) == list(run.units["unit"])
    assert list(units["n_wells"]) == list(run.units["n_wells"])


def test_monthly_update_appends_to_the_kept_history_and_reopens(sample_run, earlier_run):
    earlier, newest = _split_sample()
    # Last month: the file without its newest month, computed and kept in the store.
    at = _app()
    at.file_uploader(key="upload_production").set_value(("quillmere_2026-09.csv", earlier, "text/csv")).run()
    at.button(key="run_forecast").click().run()
    at.switch_page("views/overview.py").run()
    assert _metric(at, "EUR oil") == _bbl(earlier_run[1].wells["eur_oil_bbl"].sum())
    at.button(key="save_run").click().run()
    _ok(at)
    # This month: a new session reopens the kept run; a file with only the newest month is
    # appended to the kept history.
    at = _app()
    assert at.session_state["dd_source"].kind == "stored"
    at.file_uploader(key="upload_production").set_value(("quillmere_2026-10.csv", newest, "text/csv")).run()
    at.checkbox(key="append_history").check().run()
    _ok(at)
    at.button(key="run_forecast").click().run()
    at.switch_page("views/overview.py").run()
    _ok(at)
    # The appended history is the whole sample again, so the run is core's run of the sample
    # (the production tables are compared first; the sample here has no well-header file).
    from core.changes import merge_loads

    prev = earlier_run[0]
    merged, _ = merge_loads(prev.production, prev.wells, load_production(newest, file_name="n.csv", units="field"))
    full = load_production(SAMPLE.read_bytes(), file_name=SAMPLE.name, units="field")
    cols = ["well_id", "month", "oil_bbl", "gas_mcf", "water_bbl", "days_on", "cum_oil_bbl"]
    pd.testing.assert_frame_equal(merged.production[cols].reset_index(drop=True), full.production[cols].reset_index(drop=True))
    expected = run_field(full, settings=RunSettings())
    assert _metric(at, "EUR oil") == _bbl(expected.wells["eur_oil_bbl"].sum())
    s = _metric(at, "EUR change")
    assert s.endswith(" bbl")


def test_every_loader_corpus_file_through_the_page_gives_a_report_or_one_message():
    # The loader's corpus of messy and hostile files (tests/data/loader, made by us): through
    # the page, each is either read (rows read = used + rejected shown) or refused with one
    # clear message naming the file; never a traceback.
    corpus = sorted((ROOT / "tests" / "data" / "loader").glob("*.*"))
    assert corpus
    at = _app()
    for path in corpus:
        at.file_uploader(key="upload_production").set_value((path.name, path.read_bytes(), "text/csv")).run()
        assert not at.exception, (path.name, [e.value for e in at.exception])
        if at.error:
            assert len(at.error) == 1 and path.name in at.error[0].value, (path.name, [e.value for e in at.error])
        else:
            read, used, rejected = (int(_metric(at, k).replace(",", "")) for k in ("Rows read", "Rows used", "Rows rejected"))
            assert read == used + rejected, path.name


def test_an_unusable_store_is_said_once_and_the_app_still_works(tmp_path, monkeypatch):
    bad = tmp_path / "not_a_store.sqlite"
    bad.write_bytes(b"this is not a database")
    monkeypatch.setenv("DEPLETION_DESK_DB", str(bad))
    at = _app()
    assert any("cannot be opened" in w.value for w in at.sidebar.warning)
    at.switch_page("views/overview.py").run()
    assert not at.exception
    assert _metric(at, "Wells")


def test_fit_window_and_excluded_months_override_equals_core_then_removal(sample_run):
    load, run = sample_run
    at = _app()
    at.switch_page("views/well.py").run()
    well = at.selectbox(key="well_pick").value
    months = at.selectbox(key="ov_start").options[1:]  # after "automatic"
    start, excluded = months[len(months) // 3], months[len(months) // 2]
    at.selectbox(key="ov_start").select(start)
    at.multiselect(key="ov_exclude").select(excluded)
    at.text_input(key="ov_reason").input("workover: fit after it; one bad allocation month")
    at.button(key=APPLY_OVERRIDE).click().run()
    _ok(at)
    ov = WellOverride(fit_start=pd.Timestamp(start), exclude_months=(pd.Timestamp(excluded),),
                      reason="workover: fit after it; one bad allocation month")
    expected = run_field(load, settings=RunSettings(), overrides={well: ov}).wells.set_index("well_id").loc[well]
    assert expected["fit_start"] >= pd.Timestamp(start)
    assert _metric(at, "EUR oil") == _bbl(expected["eur_oil_bbl"])
    charts = [json.loads(c.proto.spec) for c in at.get("plotly_chart")]
    excluded_traces = [t for c in charts for t in c["data"] if t.get("name") == "excluded from fit"]
    assert excluded_traces and len(excluded_traces[0]["x"]) == 1
    # Removing the override gives core's run without it back, and the removal is recorded.
    at.button(key="ov_remove").click().run()
    _ok(at)
    assert at.session_state["dd_overrides"] == {}
    assert _metric(at, "EUR oil") == _bbl(run.wells.set_index("well_id").loc[well, "eur_oil_bbl"])
    log = at.dataframe[-1].value
    assert "cleared" in set(log["entry_type"])


# ---- probabilistic forecasts, type wells, incremental re-runs ------------------------------------
APPLY_SETTINGS_KEY = APPLY_SETTINGS


def test_probabilistic_forecast_is_off_by_default_then_equals_core(sample_run):
    """P90/P50/P10 shown on the overview and the well page equal core's run with the same
    samples (``run_field`` with ``samples=40``, the batch command's path), the band equals core's
    monthly volumes over the days of each month, the field totals are core's sample-wise sums
    (not sums of percentiles), and the downloads then carry the percentile columns."""
    load, run = sample_run
    at = _app()
    at.switch_page("views/overview.py").run()
    _ok(at)
    assert not [b for b in at.button if b.key == "prob_compute_overview"]  # off by default
    assert any("Probabilistic forecasts (P90/P50/P10) are off" in c.value for c in at.caption)
    at.switch_page("views/settings.py").run()
    # below core's minimum of 20 samples (core.probabilistic): refused with a message, nothing applied
    at.number_input(key="set_samples").set_value(5)
    at.number_input(key="set_econ_limit").set_value(4.0)
    at.button(key=APPLY_SETTINGS).click().run()
    assert any("at least 20" in e.value for e in at.error)
    assert at.session_state["dd_settings"]["econ_limit_bopd"] is None
    at.number_input(key="set_econ_limit").set_value(1.0)
    at.number_input(key="set_samples").set_value(40)
    at.button(key=APPLY_SETTINGS).click().run()
    _ok(at)
    at.switch_page("views/overview.py").run()
    at.button(key="prob_compute_overview").click().run()
    _ok(at)
    core_run = run_field(load, settings=RunSettings(samples=40, seed=0))
    expected = core_run.probabilistic
    f = expected.field.set_index("quantity")
    rem = f.loc["remaining_oil_bbl"]
    shown = _frame_with(at, "P90 (low)").set_index("quantity")
    assert list(shown.loc["Remaining oil [bbl]", ["P90 (low)", "P50", "P10 (high)", "mean"]]) == [
        f"{rem[k]:,.0f}" for k in ("p90", "p50", "p10", "mean")]
    # The field P50 is the median of the sample-wise sums, not the sum of the wells' P50s.
    assert rem["p50"] != pytest.approx(expected.wells["remaining_oil_bbl_p50"].sum(), rel=1e-9)
    # The field band: core's sample-wise field months, which include the gas wells'
    # deterministic oil (core keeps them out of the bootstrap and adds them as constants).
    specs = [json.loads(c.proto.spec) for c in at.get("plotly_chart")]
    field_p50 = next(t for c in specs for t in c["data"] if t.get("name") == "field P50")
    fm = expected.field_monthly.iloc[0]
    gas = set(core_run.wells.loc[core_run.wells["prob_method"].astype(str).str.startswith("deterministic (gas"), "well_id"])
    mo = core_run.monthly
    add = mo.loc[(mo["kind"] == "forecast") & mo["well_id"].astype(str).isin(gas) & (mo["month"] == fm["month"]), "oil_bbl"].sum()
    assert add > 0 and fm["oil_bbl_p90"] >= add
    assert _values(field_p50["y"])[0] == pytest.approx(fm["oil_bbl_p50"] / fm["month"].days_in_month, rel=1e-12)
    table = _frame_with(at, "well_id").merge(core_run.wells, on="well_id", suffixes=("_shown", "_core"))
    pd.testing.assert_series_equal(table["eur_oil_bbl_p50_shown"], table["eur_oil_bbl_p50_core"], check_names=False)
    # Well page: the well's ranges and the band on its rate chart.
    at.switch_page("views/well.py").run()
    _ok(at)
    well = at.selectbox(key="well_pick").value
    w = core_run.wells.set_index("well_id").loc[well]
    ranges = _frame_with(at, "P90 (low)").set_index("quantity")
    assert list(ranges.loc["EUR oil [bbl]", ["P90 (low)", "P50", "P10 (high)"]]) == [
        f"{w[f'eur_oil_bbl_{k}']:,.0f}" for k in ("p90", "p50", "p10")]
    assert ranges.loc["Economic-limit month", "P50"] == (
        w["econ_limit_date_p50"].strftime("%Y-%m") if pd.notna(w["econ_limit_date_p50"]) else "beyond horizon")
    # Reserves convention (SPE-PRMS 2018): P90 low <= P50 <= P10 high.
    assert w["eur_oil_bbl_p90"] <= w["eur_oil_bbl_p50"] <= w["eur_oil_bbl_p10"]
    chart = json.loads(at.get("plotly_chart")[0].proto.spec)
    band = next(t for t in chart["data"] if t.get("name") == "P90-P10 range")
    m = expected.monthly.loc[expected.monthly["well_id"] == well]
    days = m["month"].dt.days_in_month.to_numpy(float)
    shown = _values(band["y"])
    limit = float(run.wells.set_index("well_id").loc[well, "econ_limit_bopd"])
    high = m["oil_bbl_p10"].to_numpy() / days
    want = m["oil_bbl_p90"].to_numpy() / days
    # drawn down to the economic limit, no lower (months with the P10 under the limit left off)
    keep = (high > 0) & (high >= 0.999 * limit)
    assert shown == pytest.approx(np.maximum(want[keep], limit), rel=1e-12)
    # Downloads: the wells table with the percentile columns, as the batch command writes it.
    at.switch_page("views/exports.py").run()
    _ok(at)
    assert any("With the P90/P50/P10 columns" in c.value for c in at.caption)


def test_type_wells_page_equals_core_and_downloads(sample_run):
    from core.type_wells import type_well, type_wells_by_unit

    load, run = sample_run
    at = _app()
    at.switch_page("views/type_wells.py").run()
    _ok(at)
    expected = type_wells_by_unit(load.production, align="first_production", min_wells=5, b_max=run.settings.b_max)
    first = list(expected)[0]
    assert _metric(at, "Wells") == f"{len(expected[first].wells):,}"
    curve = at.dataframe[0].value
    pd.testing.assert_frame_equal(curve.reset_index(drop=True), expected[first].curve.reset_index(drop=True))
    chart = json.loads(at.get("plotly_chart")[0].proto.spec)
    assert {"P90 (low)", "P50", "P10 (high)", "wells contributing"} <= {t.get("name") for t in chart["data"]}
    assert any(str(t.get("name", "")).startswith("Arps fit of the P50") for t in chart["data"])
    assert {b.proto.label for b in at.get("download_button")} >= {"Download the type wells (CSV)"}
    # A user selection aligned at the peak and normalised by peak rate.
    ids = sorted(run.wells["well_id"].astype(str))[:8]
    at.radio(key="tw_by").set_value("selection").run()
    at.multiselect(key="tw_wells").set_value(ids).run()
    at.radio(key="tw_align").set_value("peak").run()
    at.checkbox(key="tw_normalize").check().run()
    _ok(at)
    exp = type_well(load.production, wells=ids, align="peak", normalize="peak_rate", min_wells=5,
                    b_max=run.settings.b_max)
    pd.testing.assert_frame_equal(at.dataframe[0].value.reset_index(drop=True), exp.curve.reset_index(drop=True))


def test_override_goes_through_core_rerun_wells_when_core_has_it(sample_run, monkeypatch):
    """With ``core.run.rerun_wells`` present, an override re-runs only its well from the cached
    full run; the numbers shown equal a full run_field with the same override (here the
    stand-in for rerun_wells is run_field itself: the test checks the dashboard's wiring)."""
    import core.run

    load, run = sample_run
    calls = []

    def rerun_wells(previous, load_, *, settings, overrides, wells):
        calls.append((previous, dict(overrides or {}), list(wells)))
        return run_field(load_, settings=settings, overrides=overrides)

    monkeypatch.setattr(core.run, "rerun_wells", rerun_wells, raising=False)
    at = _app()
    at.switch_page("views/well.py").run()
    well = at.selectbox(key="well_pick").value
    _apply_fixed_b(at, 0.45, "analogue b")
    _ok(at)
    assert len(calls) == 1
    previous, overrides, wells = calls[0]
    assert wells == [well] and overrides[well].b == 0.45
    # the starting point is a cached run of the same field and settings (the newest one)
    assert list(previous.wells["well_id"]) == list(run.wells["well_id"])
    assert "0.45" not in str(previous.wells.set_index("well_id").loc[well, "override"])
    assert at.session_state["dd_run_path"][0] == "re-run of 1 well"
    expected = run_field(load, settings=RunSettings(), overrides={well: WellOverride(b=0.45, reason="x")})
    row = expected.wells.set_index("well_id").loc[well]
    assert _metric(at, "b") == f"{row['b']:.2f}"
    assert _metric(at, "EUR oil") == _bbl(row["eur_oil_bbl"])


def test_forecast_only_setting_goes_through_core_rerun_forecast(sample_run, monkeypatch):
    import core.run

    load, _ = sample_run
    calls = []

    def rerun_forecast(previous, load_, *, settings, overrides=None):
        calls.append((previous.settings, settings))
        return run_field(load_, settings=settings, overrides=overrides)

    monkeypatch.setattr(core.run, "rerun_forecast", rerun_forecast, raising=False)
    at = _app()
    at.switch_page("views/overview.py").run()
    at.switch_page("views/settings.py").run()
    at.number_input(key="set_econ_limit").set_value(3.25)
    at.button(key=APPLY_SETTINGS).click().run()
    at.switch_page("views/overview.py").run()
    _ok(at)
    assert len(calls) == 1 and calls[0][1].econ_limit_bopd == 3.25
    expected = run_field(load, settings=RunSettings(econ_limit_bopd=3.25))
    assert _metric(at, "EUR oil") == _bbl(expected.wells["eur_oil_bbl"].sum())
    # b max changes the fits: a full run, not a forecast re-run.
    at.switch_page("views/settings.py").run()
    at.number_input(key="set_b_max").set_value(1.5)
    at.button(key=APPLY_SETTINGS).click().run()
    at.switch_page("views/overview.py").run()
    _ok(at)
    assert len(calls) == 1
    assert at.session_state["dd_run_path"][0] == "full run"
