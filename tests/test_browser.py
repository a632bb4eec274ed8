"""The dashboard in a real Chromium: upload a file, see the charts, download a PNG."""
from __future__ import annotations

import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

CHROMIUM = "/usr/bin/chromium"
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG signature, ISO/IEC 15948 section 5.2
LAUNCH_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
               "--disable-component-update", "--disable-sync", "--no-first-run"]

pytestmark = pytest.mark.browser

try:
    from playwright.sync_api import sync_playwright
except ImportError:  # pragma: no cover - depends on the machine
    sync_playwright = None


def _skip_reason() -> str | None:
    if sync_playwright is None:
        return "the playwright Python package is not installed"
    if not (os.path.exists(CHROMIUM) and os.access(CHROMIUM, os.X_OK)):
        return f"{CHROMIUM} is missing (run tests/ensure_browser.sh as root to install it)"
    return None


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _wait_healthy(url: str, proc: subprocess.Popen, timeout: float = 90.0) -> None:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if proc.poll() is not None:
            raise RuntimeError(f"the dashboard server stopped with code {proc.returncode}")
        try:
            with urllib.request.urlopen(url + "/_stcore/health", timeout=2) as r:
                if r.status == 200:
                    return
        except OSError:
            time.sleep(0.3)
    raise TimeoutError("the dashboard server did not answer in time")


def _full_screenshot(page, path: Path) -> None:
    """Screenshot of the whole page (Streamlit scrolls inside its main block)."""
    height = page.evaluate(
        "() => Math.max(document.body.scrollHeight, ...[...document.querySelectorAll("
        "'[data-testid=stMain], [data-testid=stSidebarContent]')].map(e => e.scrollHeight))")
    page.set_viewport_size({"width": 1400, "height": int(min(max(height, 900) + 40, 12000))})
    page.wait_for_timeout(1500)
    page.screenshot(path=str(path), full_page=True)
    page.set_viewport_size({"width": 1400, "height": 1000})


@pytest.fixture(scope="module")
def server(repo_root, tmp_path_factory):
    reason = _skip_reason()
    if reason:
        pytest.skip(reason)
    port = _free_port()
    log = tmp_path_factory.mktemp("server") / "streamlit.log"
    cmd = [sys.executable, "-m", "streamlit", "run", str(repo_root / "app.py"),
           "--server.address", "127.0.0.1", "--server.port", str(port),
           "--server.headless", "true", "--browser.gatherUsageStats", "false",
           "--server.fileWatcherType", "none"]
    with open(log, "wb") as fh:
        proc = subprocess.Popen(cmd, cwd=str(repo_root), stdout=fh, stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}"
    try:
        _wait_healthy(url, proc)
        yield url
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)
        text = log.read_text(errors="replace")
        assert "Traceback" not in text, text[-3000:]


@pytest.fixture()
def upload_csv(tmp_path) -> Path:
    rng = np.random.default_rng(11)
    x = np.sort(rng.uniform(0, 12, 150))
    frame = pd.DataFrame({"strain_pct": x,
                          "load_kg": 40 + 25 * x - 0.9 * x ** 2 + rng.normal(0, 3, x.size)})
    path = tmp_path / "bench_strain.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.mark.timeout(240)
def test_upload_charts_and_png_download(server, upload_csv, output_dir, tmp_path):
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000},
                                    accept_downloads=True)
            page.goto(server)
            page.get_by_text("Recommended:").first.wait_for(timeout=90_000)
            page.locator("[data-testid=stVegaLiteChart]").first.wait_for(timeout=60_000)
            _full_screenshot(page, output_dir / "dashboard_demo.png")

            page.locator("input[type=file]").set_input_files(str(upload_csv))
            page.get_by_text("bench_strain.csv · 150 of 150 rows used").wait_for(timeout=90_000)
            chart = page.locator("[data-testid=stVegaLiteChart]").first
            chart.wait_for(timeout=60_000)
            page.wait_for_function(
                "() => [...document.querySelectorAll('[data-testid=stVegaLiteChart] svg')]"
                ".some(s => s.textContent.includes('Validation curve')"
                " && s.textContent.includes('of load, in kg'))", timeout=60_000)
            heading = page.get_by_text("Recommended:").first.inner_text()
            assert "order" in heading

            with page.expect_download(timeout=60_000) as info:
                page.get_by_role("button", name="Validation curve (PNG)").click()
            download = info.value
            saved = tmp_path / download.suggested_filename
            download.save_as(str(saved))
            blob = saved.read_bytes()
            assert download.suggested_filename == "validation_curve.png"
            assert blob[:8] == PNG_MAGIC and len(blob) > 5000

            _full_screenshot(page, output_dir / "dashboard_upload.png")
            page.get_by_role("tab", name="Side by side").click()
            page.wait_for_function(
                "() => [...document.querySelectorAll('[data-testid=stVegaLiteChart] svg')]"
                ".some(s => s.textContent.includes('Fitted curves over the data'))",
                timeout=60_000)
            _full_screenshot(page, output_dir / "dashboard_side_by_side.png")
            assert not page.locator("[data-testid=stException]").count()
        finally:
            browser.close()


def _set_number(page, label: str, value: int) -> None:
    box = page.get_by_role("spinbutton", name=label)
    box.fill(str(value))
    box.press("Enter")


@pytest.mark.timeout(480)
def test_drifting_line_demo_offers_lag_depth(server, output_dir):
    # the reactor-log demo with lag depths compared, and the heat map over two chosen axes
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000})
            page.set_default_timeout(120_000)   # a loaded machine can take its time
            page.goto(server)
            page.get_by_text("Recommended:").first.wait_for(timeout=120_000)
            source = page.locator("[data-testid=stSidebar] [data-testid=stSelectbox]").first
            source.wait_for(timeout=120_000)
            source.click()
            page.get_by_text("Demo: reactor line log (3,000 rows)").click()
            page.get_by_text("drifting_line_sensors.csv ·").first.wait_for(timeout=90_000)
            page.get_by_text("Past values and input sets").click()
            _set_number(page, "Deepest input lag to compare", 2)
            page.get_by_text("Recommended:").first.wait_for(timeout=90_000)
            _set_number(page, "Deepest target lag to compare", 1)
            page.wait_for_function(
                "() => [...document.querySelectorAll('h4')].some(h => "
                "h.textContent.includes('Recommended:') && h.textContent.includes('target lags'))",
                timeout=120_000)
            heading = page.locator("h4", has_text="Recommended:").first.inner_text()
            assert "input lags" in heading and "target lags" in heading
            page.get_by_text("rows at the start left out for lags").first.wait_for(timeout=30_000)
            page.get_by_role("tab", name="Order × penalty heat map").click()
            page.wait_for_function(
                "() => [...document.querySelectorAll('[data-testid=stVegaLiteChart] svg')]"
                ".some(s => s.textContent.includes('Validation error over input lag depth'))",
                timeout=60_000)
            _full_screenshot(page, output_dir / "dashboard_drift_lags.png")
            assert not page.locator("[data-testid=stException]").count()
        finally:
            browser.close()


def _idle(page, timeout: float = 90_000) -> None:
    """Wait until the page has finished its run (no running indicator, no progress bar)."""
    page.wait_for_timeout(400)
    page.wait_for_function(
        "() => { const app = document.querySelector('[data-testid=stApp]');"
        " return app && app.getAttribute('data-test-script-state') !== 'running' && "
        "!document.querySelector('[data-testid=stProgress]'); }", timeout=timeout)
    page.get_by_text("Recommended:").first.wait_for(timeout=timeout)


def _pick(page, label: str, option: str) -> None:
    box = page.locator("[data-testid=stSidebar] [data-testid=stSelectbox]").filter(
        has=page.get_by_text(label, exact=True)).first
    for attempt in range(3):  # a rerun that redraws the box closes its list
        box.click()
        opt = page.get_by_role("option", name=option, exact=True).first
        try:
            opt.wait_for(timeout=8_000)
            opt.click()
            return
        except Exception:  # noqa: BLE001
            if attempt == 2:
                raise
            page.keyboard.press("Escape")
            page.wait_for_timeout(500)


def _no_frozen_bar_or_error(page) -> None:
    page.wait_for_timeout(600)
    assert page.locator("[data-testid=stProgress]").count() == 0, "a progress bar outlived its run"
    assert not page.locator("[data-testid=stException]").count()
    errors = page.locator("[data-testid=stAlertContentError]")
    assert errors.count() == 0, errors.first.inner_text()


@pytest.mark.timeout(400)
def test_sidebar_walk_on_every_demo_and_an_upload_with_text(server, output_dir, tmp_path):
    """Every sidebar control on each demo and on an uploaded table with a text column: no
    frozen progress bar, no warning left from another data set, and the scheme's name
    the same in the menu, its help, the page, the pack and summary.json."""
    import io
    import json
    import zipfile

    from engine.labels import SCHEME_NAMES

    rng = np.random.default_rng(5)
    n = 90
    site = np.array(["north", "south", "east"])[rng.integers(0, 3, n)]
    temp = rng.uniform(10, 30, n)
    y = 3 + 0.5 * temp + np.select([site == "north", site == "south"], [1.0, -2.0], 0.0) \
        + rng.normal(0, 0.3, n)
    upload = tmp_path / "kiln_sites.csv"
    pd.DataFrame({"site": site, "temp_C": temp, "yield_pct": y}).to_csv(upload, index=False)

    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000},
                                    accept_downloads=True)
            page.goto(server)
            _idle(page)
            side = page.locator("[data-testid=stSidebar]")
            # --- calibration demo: numbers, switches and every scheme that needs no column
            _set_number(page, "Highest polynomial order", 6)
            _idle(page)
            _no_frozen_bar_or_error(page)
            side.get_by_text("Products of inputs (interactions)").click()
            _idle(page)
            # a range of the user's own: the count and "without a penalty" appear
            side.get_by_text("Penalty range from the data").click()
            _idle(page)
            _no_frozen_bar_or_error(page)
            _set_number(page, "Penalties in the range (log-spaced)", 8)
            _idle(page)
            side.get_by_text("Also fit without a penalty").click()
            _idle(page)
            _set_number(page, "Seed for the shuffles", 3)
            _idle(page)
            side.get_by_text("RMSE", exact=True).click()
            _idle(page)
            page.get_by_text("Validation error (RMSE)").first.wait_for(timeout=60_000)
            for kind in ("kfold", "repeated", "blocked", "holdout", "loo"):
                _pick(page, "How to hold data out", SCHEME_NAMES[kind])
                # help sentence and the plan's description start with the menu's name
                side.get_by_text(SCHEME_NAMES[kind] + ":").first.wait_for(timeout=60_000)
                page.locator("[data-testid=stMain]").get_by_text(
                    SCHEME_NAMES[kind] + ":").first.wait_for(timeout=60_000)
                _idle(page)
                _no_frozen_bar_or_error(page)
                if kind in ("kfold", "repeated", "blocked"):
                    _set_number(page, "Folds", 4)
                    _idle(page)
                if kind == "repeated":
                    _set_number(page, "Repeats", 2)
                    _idle(page)
                if kind == "blocked":
                    _set_number(page, "Gap (rows left out on each side of a block)", 1)
                    _idle(page)
                _no_frozen_bar_or_error(page)
            # schemes that need a column are not offered until one is chosen
            side.get_by_text(f"{SCHEME_NAMES['grouped']} and {SCHEME_NAMES['column']} appear "
                             "once their column is chosen").first.wait_for(timeout=10_000)
            calibration_warning = page.get_by_text("probe_mV").count()
            assert calibration_warning >= 1

            # --- the other demos: nothing from the calibration set stays on the page
            for title, file in (("Demo: reactor line log (3,000 rows)", "drifting_line_sensors"),
                                ("Demo: dye-bath spectra (60 rows, 150 channels)",
                                 "wide_spectra")):
                _pick(page, "Data set", title)
                page.get_by_text(f"{file}.csv ·").first.wait_for(timeout=120_000)
                _idle(page, 180_000)
                _no_frozen_bar_or_error(page)
                main = page.locator("[data-testid=stMain]")
                assert main.get_by_text("probe_mV").count() == 0, "stale text from another set"

            # --- an upload with a text column: the text column as an input and as groups
            page.locator("input[type=file]").set_input_files(str(upload))
            page.get_by_text("kiln_sites.csv ·").first.wait_for(timeout=90_000)
            _idle(page)
            ms = side.locator("[data-testid=stMultiSelect]").filter(
                has=page.get_by_text("Inputs", exact=True)).first
            ms.click()
            opt = page.get_by_role("option", name="site", exact=True).first
            opt.wait_for(timeout=20_000)
            opt.click()
            page.keyboard.press("Escape")
            _idle(page)
            _no_frozen_bar_or_error(page)
            assert page.get_by_text("reference level 'east'").count() >= 1
            _pick(page, "Group column (optional)", "site")
            _idle(page)
            _pick(page, "How to hold data out", SCHEME_NAMES["grouped"])
            _idle(page)
            _no_frozen_bar_or_error(page)
            folds = page.get_by_role("spinbutton", name="Folds")
            assert int(folds.input_value()) <= 3  # capped to the three sites
            name = SCHEME_NAMES["grouped"]
            assert side.get_by_text(name + ":").count() >= 1
            _full_screenshot(page, output_dir / "dashboard_walk_upload.png")

            with page.expect_download(timeout=120_000) as info:
                page.get_by_role("button", name="Meeting pack (ZIP)").click()
            blob = (tmp_path / "pack.zip")
            info.value.save_as(str(blob))
            with zipfile.ZipFile(io.BytesIO(blob.read_bytes())) as z:
                summary = json.loads(z.read("fitladder_pack/summary.json"))
                html = z.read("fitladder_pack/summary.html").decode()
            assert summary["validation"]["scheme"] == "grouped"
            assert summary["validation"]["scheme_name"] == name
            assert summary["validation"]["when_to_use"].startswith(name + ":")
            assert name in html
            assert summary["data"]["text_inputs"]["site"]["reference"] == "east"
        finally:
            browser.close()


@pytest.mark.timeout(300)
def test_wide_spectra_demo_shows_lasso_path_and_inputs_kept(server, output_dir):
    # the spectra demo sweeps ridge and lasso: the coefficient-path tab draws the lasso
    # path with the recommended penalty and says how many channels the lasso keeps
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000})
            page.goto(server)
            page.get_by_text("Recommended:").first.wait_for(timeout=90_000)
            page.locator("[data-testid=stSidebar] [data-testid=stSelectbox]").first.click()
            page.get_by_text("Demo: dye-bath spectra (60 rows, 150 channels)").click()
            page.get_by_text("wide_spectra.csv ·").first.wait_for(timeout=90_000)
            page.get_by_text("Recommended:").first.wait_for(timeout=120_000)
            page.get_by_role("tab", name="Coefficient paths").click()
            page.wait_for_function(
                "() => [...document.querySelectorAll('[data-testid=stVegaLiteChart] svg')]"
                ".some(s => s.textContent.includes('Coefficient paths: lasso'))",
                timeout=120_000)
            page.wait_for_function(
                "() => [...document.querySelectorAll('[data-testid=stVegaLiteChart] svg')]"
                ".some(s => s.textContent.includes('How many inputs the data carry'))",
                timeout=60_000)
            kept = page.locator("p", has_text="Inputs kept by the recommended cell").first
            kept.wait_for(timeout=60_000)
            import re
            n_kept, n_all = [int(v) for v in
                             re.search(r"(\d+) of (\d+)", kept.inner_text()).groups()]
            assert n_all == 150 and 1 <= n_kept < 150
            _full_screenshot(page, output_dir / "dashboard_wide_lasso_path.png")
            assert not page.locator("[data-testid=stException]").count()
        finally:
            browser.close()
