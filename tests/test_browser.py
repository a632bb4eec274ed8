"""The dashboard in a real Chromium: upload a file, see the charts, download a PNG."""
from __future__ import annotations

import os
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


def _wait_for_chart(page, *texts: str, timeout: float = 60_000) -> None:
    """Wait until a drawn chart holds every one of ``texts`` (title, axis labels...)."""
    page.wait_for_function(
        "texts => [...document.querySelectorAll('[data-testid=stVegaLiteChart] svg')]"
        ".some(s => texts.every(t => s.textContent.includes(t)))", arg=list(texts),
        timeout=timeout)


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
            _wait_for_chart(page, "Validation curve", "of load, in kg")
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
            _wait_for_chart(page, "Fitted curves over the data")
            _full_screenshot(page, output_dir / "dashboard_side_by_side.png")
            assert not page.locator("[data-testid=stException]").count()
        finally:
            browser.close()


def _set_number(page, label: str, value: int) -> None:
    box = page.get_by_role("spinbutton", name=label)
    box.fill(str(value))
    box.press("Enter")


def _choose_option(page, open_list, option: str) -> None:
    """Open a list with ``open_list()`` and click ``option``; tried three times, because a
    rerun that redraws the box closes its list."""
    for attempt in range(3):
        open_list()
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


def _pick(page, label: str, option: str) -> None:
    box = page.locator("[data-testid=stSidebar] [data-testid=stSelectbox]").filter(
        has=page.get_by_text(label, exact=True)).first
    _choose_option(page, box.click, option)


class _Walk:
    """One browser page walked through the sidebar: waits for each run, checks that no
    progress bar outlives it and no error is shown, and logs how long each step took."""

    def __init__(self, page, log: Path) -> None:
        self.page, self.log, self.times = page, log, []
        self.side = page.locator("[data-testid=stSidebar]")
        self.main = page.locator("[data-testid=stMain]")

    def idle(self, timeout: float = 120.0, recommended: bool = True) -> None:
        """Wait for the run a change started to end. A progress bar still shown 3 s after
        the script stopped running is a frozen bar: the walk fails at once."""
        self.page.wait_for_timeout(250)
        end = time.monotonic() + timeout
        stopped = None
        while True:
            running, bars = self.page.evaluate(
                "() => { const app = document.querySelector('[data-testid=stApp]');"
                " return [!app || app.getAttribute('data-test-script-state') === 'running',"
                " document.querySelectorAll('[data-testid=stProgress]').length]; }")
            if not running and not bars:
                break
            if not running:
                stopped = stopped or time.monotonic()
                assert time.monotonic() - stopped < 3.0, "a progress bar outlived its run"
            else:
                stopped = None
            assert time.monotonic() < end, "the page did not finish its run in time"
            self.page.wait_for_timeout(150)
        assert not self.page.locator("[data-testid=stException]").count()
        if recommended:
            self.page.get_by_text("Recommended:").first.wait_for(timeout=timeout * 1000)
            errors = self.page.locator("[data-testid=stAlertContentError]")
            assert errors.count() == 0, errors.first.inner_text()

    def step(self, name: str, action, **idle) -> None:
        t0 = time.monotonic()
        action()
        self.idle(**idle)
        self.times.append((name, time.monotonic() - t0))
        with open(self.log, "a", encoding="utf-8") as fh:
            fh.write(f"{time.monotonic() - t0:7.2f} s  {name}\n")

    # --- controls -------------------------------------------------------------
    def number(self, label: str, value: int) -> None:
        self.step(f"{label} = {value}", lambda: _set_number(self.page, label, value))

    def tick(self, label: str) -> None:
        self.step(f"click '{label}'", lambda: self.side.get_by_text(label, exact=True).click())

    def radio(self, group: str, option: str) -> None:
        box = self.side.locator("[data-testid=stRadio]").filter(
            has=self.page.get_by_text(group, exact=True)).first
        self.step(f"{group}: {option}", lambda: box.get_by_text(option, exact=True).click())

    def pick(self, label: str, option: str, **idle) -> None:
        self.step(f"{label}: {option}", lambda: _pick(self.page, label, option), **idle)

    def _multi(self, label: str):
        return self.side.locator("[data-testid=stMultiSelect]").filter(
            has=self.page.get_by_text(label, exact=True)).first

    def add(self, label: str, option: str) -> None:
        def type_it():
            self._multi(label).locator("input").first.click()
            self.page.keyboard.type(option)

        def act():
            _choose_option(self.page, type_it, option)
            self.page.keyboard.press("Escape")
        self.step(f"{label} + {option}", act)

    def drop_last(self, label: str) -> None:
        def act():
            self._multi(label).locator("input").first.click()
            self.page.keyboard.press("Backspace")
            self.page.keyboard.press("Escape")
        self.step(f"{label} - last", act)

    def slide(self, label: str, key: str = "ArrowRight") -> None:
        box = self.side.locator("[data-testid=stSlider]").filter(
            has=self.page.get_by_text(label, exact=True)).first
        self.step(f"{label} {key}", lambda: box.get_by_role("slider").first.press(key))

    # --- checks ---------------------------------------------------------------
    def nothing_from(self, names: tuple[str, ...]) -> None:
        """No text naming another data set's columns: no stale warning or caption."""
        for where, loc in (("page", self.main), ("sidebar", self.side)):
            text = loc.inner_text()
            stale = [n for n in names if n in text]
            assert not stale, f"the {where} still names {stale} from another data set"

    def scheme_named_alike(self, kind: str, tmp_path: Path, tag: str) -> dict:
        """The scheme's one name in the menu, its help, the plan on the page, the pack's
        summary.html and summary.md, and summary.json. Returns summary.json."""
        import io
        import json
        import zipfile

        from engine.labels import SCHEME_NAMES

        name = SCHEME_NAMES[kind]
        menu = self.side.locator("[data-testid=stSelectbox]").filter(
            has=self.page.get_by_text("How to hold data out", exact=True)).first
        assert menu.locator("input").first.input_value() == name          # the menu
        self.side.get_by_text(name + ":").first.wait_for(timeout=30_000)      # help
        self.main.get_by_text(name + ":").first.wait_for(timeout=30_000)      # the plan
        t0 = time.monotonic()
        with self.page.expect_download(timeout=180_000) as info:
            self.page.get_by_role("button", name="Meeting pack (ZIP)").click()
        blob = tmp_path / f"pack_{tag}.zip"
        info.value.save_as(str(blob))
        with open(self.log, "a", encoding="utf-8") as fh:
            fh.write(f"{time.monotonic() - t0:7.2f} s  meeting pack ({tag})\n")
        with zipfile.ZipFile(io.BytesIO(blob.read_bytes())) as z:
            assert "fitladder_pack/PROBLEM.txt" not in z.namelist()
            summary = json.loads(z.read("fitladder_pack/summary.json"))
            html = z.read("fitladder_pack/summary.html").decode()
            md = z.read("fitladder_pack/summary.md").decode()
        v = summary["validation"]
        assert v["scheme"] == kind and v["scheme_name"] == name
        assert v["when_to_use"].startswith(name + ":")
        assert v["description"].startswith(name + ":")
        assert name in html and name in md.replace("\\", "")
        return summary


CALIBRATION_NAMES = ("probe_mV", "bath_temp_C")
DRIFT_NAMES = ("inlet_temp_C", "jacket_temp_C", "stirrer_speed_rpm")
SPECTRA_NAMES = ("abs_400nm", "analyte_mg_L")


def _walk_calibration(w: _Walk, tmp_path: Path) -> None:
    """Calibration demo (24 rows, leave-one-out): numbers, switches, every scheme that
    needs no column, families, the target."""
    from engine.labels import SCHEME_NAMES
    page = w.page
    w.number("Highest polynomial order", 3)
    w.tick("Products of inputs (interactions)")
    w.tick("Penalty range from the data")       # a range of the user's own
    w.slide("Ridge penalty range")
    w.number("Penalties in the range (log-spaced)", 6)
    w.tick("Also fit without a penalty")
    w.radio("How to pick the recommended cell", "unpaired")
    w.number("Seed for the shuffles", 3)
    w.radio("Errors shown as", "RMSE")
    page.get_by_text("Validation error (RMSE)").first.wait_for(timeout=30_000)
    w.radio("Are the rows in time order?", "No")
    w.pick("Order / time column (optional)", "probe_mV")
    for kind in ("loo", "repeated", "blocked", "holdout", "kfold"):
        if kind != "loo":
            w.pick("How to hold data out", SCHEME_NAMES[kind])
        w.side.get_by_text(SCHEME_NAMES[kind] + ":").first.wait_for(timeout=30_000)
        w.main.get_by_text(SCHEME_NAMES[kind] + ":").first.wait_for(timeout=30_000)
        if kind in ("kfold", "repeated", "blocked"):
            w.number("Folds", 4)
        if kind == "repeated":
            w.number("Repeats", 2)
        if kind == "blocked":
            w.number("Gap (rows left out on each side of a block)", 1)
        if kind == "holdout":
            w.slide("Share of rows held out at the end")
    # schemes that need a column are not offered until one is chosen
    w.side.get_by_text(f"{SCHEME_NAMES['grouped']} and {SCHEME_NAMES['column']} "
                       "appear once their column is chosen").first.wait_for(timeout=10_000)
    w.add("Penalty families", "lasso")
    w.radio("How to pick the recommended cell", "paired (default)")
    w.pick("Target: the column to predict", "probe_mV")
    w.scheme_named_alike("kfold", tmp_path, "calibration")


def _walk_reactor(w: _Walk, tmp_path: Path, output_dir: Path) -> None:
    """Reactor-log demo (3,000 rows, time blocks): more targets, inputs, gap, lag depths,
    ranked inputs."""
    page = w.page
    w.pick("Data set", "Demo: reactor line log (3,000 rows)", timeout=180.0)
    page.get_by_text("drifting_line_sensors.csv ·").first.wait_for(timeout=60_000)
    w.nothing_from(CALIBRATION_NAMES)
    w.number("Highest polynomial order", 2)
    w.add("More targets (optional)", "coolant_flow_L_min")
    page.get_by_text("Targets side by side").first.wait_for(timeout=60_000)
    w.drop_last("More targets (optional)")
    # unticked, the demo has no inputs chosen yet: the page asks for one, then two are added
    w.step("untick 'Use every other numeric column as an input'", lambda: w.side.get_by_text(
        "Use every other numeric column as an input", exact=True).click(), recommended=False)
    page.get_by_text("Choose at least one input column.").first.wait_for(timeout=30_000)
    w.add("Inputs", "inlet_temp_C")
    w.add("Inputs", "feed_flow_L_min")
    w.number("Gap (rows left out on each side of a block)", 30)
    w.step("open 'Past values and input sets'",
           lambda: w.side.get_by_text("Past values and input sets").click())
    w.number("Deepest input lag to compare", 2)
    w.number("Deepest target lag to compare", 1)
    page.wait_for_function(
        "() => [...document.querySelectorAll('h4')].some(h => "
        "h.textContent.includes('Recommended:') && h.textContent.includes('target lags'))",
        timeout=60_000)
    heading = page.locator("h4", has_text="Recommended:").first.inner_text()
    assert "input lags" in heading and "target lags" in heading
    page.get_by_text("rows at the start left out for lags").first.wait_for(timeout=30_000)
    page.get_by_role("tab", name="Order × penalty heat map").click()
    _wait_for_chart(page, "Validation error over input lag depth")
    _full_screenshot(page, output_dir / "dashboard_drift_lags.png")
    w.pick("Compare the first k inputs", "Yes, in the order the inputs are listed")
    w.scheme_named_alike("blocked", tmp_path, "reactor")


def _walk_spectra(w: _Walk, tmp_path: Path, output_dir: Path) -> None:
    """Spectra demo (60 rows x 150 channels, ridge and lasso): the lasso path."""
    import re
    page = w.page
    w.pick("Data set", "Demo: dye-bath spectra (60 rows, 150 channels)", timeout=180.0)
    page.get_by_text("wide_spectra.csv ·").first.wait_for(timeout=60_000)
    w.nothing_from(CALIBRATION_NAMES + DRIFT_NAMES)
    page.get_by_role("tab", name="Coefficient paths").click()
    _wait_for_chart(page, "Coefficient paths: lasso", timeout=120_000)
    kept = page.locator("p", has_text="Inputs kept by the recommended cell").first
    kept.wait_for(timeout=60_000)
    n_kept, n_all = [int(v) for v in
                     re.search(r"(\d+) of (\d+)", kept.inner_text()).groups()]
    assert n_all == 150 and 1 <= n_kept < 150
    _full_screenshot(page, output_dir / "dashboard_wide_lasso_path.png")
    w.radio("Errors shown as", "MSE")
    page.get_by_text("Validation error (MSE)").first.wait_for(timeout=30_000)
    w.scheme_named_alike("kfold", tmp_path, "spectra")


def _walk_upload(w: _Walk, tmp_path: Path, output_dir: Path, upload: Path) -> None:
    """An upload with a text column: decimal comma, inputs, target, order, own split and
    group columns."""
    from engine.labels import SCHEME_NAMES
    page = w.page
    w.step("upload kiln_sites.csv",
           lambda: page.locator("input[type=file]").set_input_files(str(upload)))
    page.get_by_text("kiln_sites.csv ·").first.wait_for(timeout=60_000)
    w.nothing_from(CALIBRATION_NAMES + DRIFT_NAMES + SPECTRA_NAMES)
    # a comma-separated file read with a decimal comma is refused, with a message
    w.step("click 'Numbers use a decimal comma'", lambda: w.side.get_by_text(
        "Numbers use a decimal comma (1,5 = one and a half)").click(),
        recommended=False)
    page.get_by_text("Pick a demo data set or upload another file in the sidebar.").first \
        .wait_for(timeout=30_000)
    w.step("untick 'Numbers use a decimal comma'", lambda: w.side.get_by_text(
        "Numbers use a decimal comma (1,5 = one and a half)").click())
    assert page.locator("[data-testid=stAlertContentError]").count() == 0
    w.add("Inputs", "site")
    assert page.get_by_text("reference level 'east'").count() >= 1
    w.pick("Target: the column to predict", "kiln_temp_C")
    w.pick("Target: the column to predict", "strength_MPa")
    w.pick("Order / time column (optional)", "fired_min")
    w.pick("How to hold data out", SCHEME_NAMES["holdout"])
    w.pick("Split column (optional)", "lot")
    w.pick("How to hold data out", SCHEME_NAMES["column"])
    w.pick("Group column (optional)", "site")
    w.pick("How to hold data out", SCHEME_NAMES["grouped"])
    folds = page.get_by_role("spinbutton", name="Folds")
    assert int(folds.input_value()) <= 3  # capped to the three sites
    _full_screenshot(page, output_dir / "dashboard_walk_upload.png")
    summary = w.scheme_named_alike("grouped", tmp_path, "upload")
    assert summary["data"]["text_inputs"]["site"]["reference"] == "east"


@pytest.mark.timeout(420)
def test_sidebar_walk_on_every_demo_and_an_upload_with_text(server, output_dir, tmp_path):
    """Every sidebar control on the demos and on an uploaded table with a text column: no
    frozen progress bar, no warning left from another data set, and the scheme's name
    the same in the menu, its help, the page, the pack and summary.json on each data set.
    Also: lag depths on the reactor-log demo, the lasso path on the spectra demo. Step
    times are written to test-output/browser_walk_steps.txt."""
    rng = np.random.default_rng(5)
    n = 90
    site = np.array(["north", "south", "east"])[rng.integers(0, 3, n)]
    temp = rng.uniform(900, 1100, n)
    strength = 3 + 0.05 * temp + np.select([site == "north", site == "south"], [1.0, -2.0], 0.0) \
        + rng.normal(0, 0.3, n)
    upload = tmp_path / "kiln_sites.csv"
    pd.DataFrame({"fired_min": np.arange(n) * 7.0, "lot": np.arange(n) % 3 + 1, "site": site,
                  "kiln_temp_C": temp, "strength_MPa": strength}).to_csv(upload, index=False)
    log = output_dir / "browser_walk_steps.txt"
    log.write_text("")
    started = time.monotonic()
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000},
                                    accept_downloads=True)
            w = _Walk(page, log)
            w.step("open the page (calibration demo)", lambda: page.goto(server))
            _walk_calibration(w, tmp_path)
            _walk_reactor(w, tmp_path, output_dir)
            _walk_spectra(w, tmp_path, output_dir)
            _walk_upload(w, tmp_path, output_dir, upload)
        finally:
            browser.close()
    with open(log, "a", encoding="utf-8") as fh:
        fh.write(f"{time.monotonic() - started:7.2f} s  whole walk\n")
