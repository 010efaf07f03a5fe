"""End-to-end test of the dashboard in a real headless Chromium, driven by Playwright.

One Streamlit server for the module (started as the README starts it, from the repository
root), one browser. The flow: upload a production file through the page, confirm it, wait
for the field overview, open a well, download the forecast workbook and read it back with
openpyxl, and save a screenshot of every page in ``test-artifacts/``.

Without Chromium the test is skipped, unless ``CI`` or ``REQUIRE_BROWSER=1`` is set: then it
fails, so CI cannot pass without really running it.
"""

from __future__ import annotations

import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parents[1]
ARTIFACTS = ROOT / "test-artifacts"
SAMPLE = ROOT / "sample_wells" / "production.csv"
HEADER = ROOT / "sample_wells" / "well_header.csv"
CHROMIUM_CANDIDATES = ("/usr/bin/chromium", "/usr/bin/chromium-browser", "/usr/bin/google-chrome")
LAUNCH_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
    "--disable-background-networking", "--disable-component-update", "--no-first-run", "--disable-sync",
]
TIMEOUT_MS = 60_000


def _chromium() -> str | None:
    for p in CHROMIUM_CANDIDATES:
        if Path(p).exists():
            return p
    return shutil.which("chromium")


def _require_browser() -> str:
    path = _chromium()
    if path is None:
        if os.environ.get("CI") or os.environ.get("REQUIRE_BROWSER") == "1":
            pytest.fail("chromium not found (required in CI): apt-get install -y chromium", pytrace=False)
        pytest.skip("chromium not found: apt-get install -y chromium")
    return path


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    _require_browser()
    port = _free_port()
    store = tmp_path_factory.mktemp("store")
    log_path = tmp_path_factory.mktemp("log") / "streamlit.log"
    env = dict(os.environ, DEPLETION_DESK_DB=str(store))
    with open(log_path, "w") as log:
        proc = subprocess.Popen(
            [sys.executable, "-m", "streamlit", "run", "dashboard/app.py",
             "--server.headless", "true", "--server.address", "127.0.0.1", "--server.port", str(port),
             "--browser.gatherUsageStats", "false", "--server.fileWatcherType", "none"],
            cwd=ROOT, stdout=log, stderr=subprocess.STDOUT, start_new_session=True, env=env,
        )
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 60
    while True:
        if proc.poll() is not None:
            pytest.fail(f"streamlit exited early:\n{log_path.read_text()}", pytrace=False)
        try:
            with urllib.request.urlopen(f"{url}/_stcore/health", timeout=2) as r:
                if r.status == 200:
                    break
        except OSError:
            pass
        if time.monotonic() > deadline:
            proc.terminate()
            pytest.fail(f"streamlit did not answer in 60 s:\n{log_path.read_text()}", pytrace=False)
        time.sleep(0.3)
    yield url
    proc.terminate()
    try:
        proc.wait(15)
    except subprocess.TimeoutExpired:
        proc.kill()


@pytest.fixture(scope="module")
def page(server):
    from playwright.sync_api import expect, sync_playwright

    expect.set_options(timeout=TIMEOUT_MS)
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=_require_browser(), headless=True, args=LAUNCH_ARGS)
        context = browser.new_context(viewport={"width": 1400, "height": 2200}, accept_downloads=True)
        pg = context.new_page()
        pg.set_default_timeout(TIMEOUT_MS)
        yield pg
        context.close()
        browser.close()


def _wait_idle(page) -> None:
    """Wait until Streamlit has finished the script run (no 'running' status widget)."""
    from playwright.sync_api import expect

    page.wait_for_timeout(300)
    expect(page.get_by_test_id("stStatusWidget")).to_have_count(0)


def _shot(page, name: str) -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    path = ARTIFACTS / f"{name}.png"
    page.screenshot(path=str(path), full_page=True)
    return path


def _open(page, server: str, title: str) -> None:
    """Open a page from the sidebar navigation and wait for its title."""
    from playwright.sync_api import expect

    page.get_by_test_id("stSidebarNav").get_by_text(title, exact=True).click()
    expect(page.get_by_role("heading", name=title if title != "About" else "About Depletion Desk").first).to_be_visible()
    _wait_idle(page)


def _metric_value(page, label: str) -> str:
    metric = page.get_by_test_id("stMetric").filter(has=page.get_by_text(label, exact=True)).first
    return metric.get_by_test_id("stMetricValue").inner_text()


def test_upload_overview_well_download_and_screenshots(server, page, tmp_path):
    from openpyxl import load_workbook
    from playwright.sync_api import expect

    page.goto(server)
    expect(page.get_by_role("heading", name="Load data").first).to_be_visible()
    _wait_idle(page)

    # Upload last month's file of the sample field (every row but the last month's: other
    # bytes than the bundled sample) with the sample's well-header file.
    upload = tmp_path / "upload_field.csv"
    lines = SAMPLE.read_bytes().splitlines()
    last = max(line.split(b",")[1] for line in lines[1:])
    upload.write_bytes(b"\n".join(line for line in lines if line.split(b",")[1] != last) + b"\n")
    uploaders = page.get_by_test_id("stFileUploader")
    uploaders.nth(1).locator("input[type=file]").set_input_files(str(HEADER))
    _wait_idle(page)
    uploaders.nth(0).locator("input[type=file]").set_input_files(str(upload))
    expect(page.get_by_text("How upload_field.csv was read")).to_be_visible()
    expect(page.get_by_test_id("stMetric").filter(has=page.get_by_text("Rows read", exact=True))).to_be_visible()
    page.get_by_role("button", name="Compute the forecast").click()
    expect(page.get_by_text("The forecast for these data is computed.")).to_be_visible()
    _wait_idle(page)
    _shot(page, "load_data")

    # Settings: turn the probabilistic forecast on (off by default).
    _open(page, server, "Settings")
    page.get_by_role("spinbutton", name="Samples per well (0 = off)").fill("100")
    page.get_by_role("button", name="Apply settings").click()
    expect(page.get_by_text("Settings applied.")).to_be_visible()
    _wait_idle(page)
    _shot(page, "settings")

    # Field overview: headline figures and charts drawn; the P90/P50/P10 computed on request.
    _open(page, server, "Field overview")
    wells_shown = _metric_value(page, "Wells")
    assert int(wells_shown.replace(",", "")) > 0
    page.get_by_role("button", name="Compute P90/P50/P10").click()
    expect(page.get_by_text("Field totals of 100 samples")).to_be_visible()
    _wait_idle(page)
    expect(page.get_by_test_id("stPlotlyChart").first.locator(".main-svg").first).to_be_visible()
    _shot(page, "field_overview")

    # Well review: the rate chart has the actual points, the fit, the forecast and the band.
    _open(page, server, "Well review")
    chart = page.get_by_test_id("stPlotlyChart").first
    expect(chart.locator(".main-svg").first).to_be_visible()
    assert chart.locator("g.trace").count() >= 4
    eur_text = _metric_value(page, "EUR oil")
    expect(page.get_by_text("100 samples, seed 0")).to_be_visible()
    _shot(page, "well_review")

    _open(page, server, "Unit planning")
    # the unit's material-balance history match is drawn once computed (its own spinner)
    expect(page.get_by_test_id("stPlotlyChart")).to_have_count(2)
    expect(page.get_by_text("Oil in place, history match").or_(page.get_by_text("No material-balance history match"))).to_be_visible()
    _wait_idle(page)
    _shot(page, "unit_planning")

    _open(page, server, "Type wells")
    expect(page.get_by_test_id("stPlotlyChart").first.locator(".main-svg").first).to_be_visible()
    _shot(page, "type_wells")

    # Downloads: the forecast workbook for the field, read back with openpyxl.
    _open(page, server, "Downloads")
    with page.expect_download() as info:
        page.get_by_test_id("stDownloadButton").filter(has_text="Forecast workbook (XLSX)").locator("button").click()
    book_path = tmp_path / "forecast.xlsx"
    info.value.save_as(str(book_path))
    wb = load_workbook(book_path, read_only=True)
    names = wb.sheetnames
    assert len(names) >= 4, names
    sheets = {n.lower(): wb[n] for n in names}
    wells_sheet = next(s for n, s in sheets.items() if n.startswith("well"))
    rows = list(wells_sheet.iter_rows(values_only=True))
    header = list(rows[0])
    assert "well_id" in header and "eur_oil_bbl" in header
    # the P90/P50/P10 were computed on the overview: the workbook carries their columns
    assert {"eur_oil_bbl_p90", "eur_oil_bbl_p50", "eur_oil_bbl_p10"} <= set(header)
    assert len(rows) - 1 == int(wells_shown.replace(",", ""))
    # The well shown on the Well review page has the same EUR in the workbook.
    eur_col = header.index("eur_oil_bbl")
    eurs = {f"{r[eur_col]:,.0f} bbl" for r in rows[1:] if isinstance(r[eur_col], (int, float))}
    assert eur_text in eurs
    cover = wb[names[0]]
    cover_text = " ".join(str(c) for row in cover.iter_rows(values_only=True) for c in row if c is not None)
    assert "local regulations" in cover_text
    wb.close()
    _shot(page, "downloads")

    _open(page, server, "About")
    _shot(page, "about")
