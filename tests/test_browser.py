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


@pytest.mark.timeout(300)
def test_drifting_line_demo_offers_lag_depth(server, output_dir):
    # the reactor-log demo with lag depths compared, and the heat map over two chosen axes
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000})
            page.goto(server)
            page.get_by_text("Recommended:").first.wait_for(timeout=90_000)
            page.locator("[data-testid=stSidebar] [data-testid=stSelectbox]").first.click()
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
