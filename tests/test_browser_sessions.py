"""The dashboard in a real Chromium: several sessions at once, and names that look like markup."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from test_browser import CHROMIUM, LAUNCH_ARGS, _full_screenshot, server, sync_playwright  # noqa: F401

pytestmark = pytest.mark.browser

#: three tables with their own target, input and size
TABLES = [
    ("press_load.csv", "strain_pct", "load_kg", 120, lambda x: 40 + 25 * x - 0.9 * x ** 2),
    ("kiln_yield.csv", "temp_C", "yield_pct", 150, lambda x: 60 + 3 * x - 0.2 * x ** 2),
    ("probe_depth.csv", "depth_m", "signal_mV", 180, lambda x: 5 + 0.5 * x ** 3 - x),
]


def _write(tmp_path, name, x_name, y_name, n, f, seed):
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0, 10, n))
    frame = pd.DataFrame({x_name: x, y_name: f(x) + rng.normal(0, 1.0, n)})
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return path


@pytest.mark.timeout(480)
def test_three_sessions_uploading_at_once_each_see_their_own_results(server, tmp_path,
                                                                     output_dir):
    paths = [_write(tmp_path, *t, seed=i) for i, t in enumerate(TABLES)]
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS)
        try:
            pages = []
            for _ in TABLES:  # one browser context each: separate sessions, like three users
                ctx = browser.new_context(viewport={"width": 1400, "height": 1000})
                page = ctx.new_page()
                page.goto(server)
                pages.append(page)
            for page in pages:
                page.get_by_text("Recommended:").first.wait_for(timeout=90_000)
            # the three uploads go in back to back, so the server works on them at once
            for page, path in zip(pages, paths):
                page.locator("input[type=file]").set_input_files(str(path), timeout=120_000)
            for page, (name, x_name, y_name, n, _) in zip(pages, TABLES):
                page.get_by_text(f"{name} · {n} of {n} rows used").wait_for(timeout=120_000)
                page.get_by_text("Recommended:").first.wait_for(timeout=120_000)
            for i, (page, (name, x_name, y_name, n, _)) in enumerate(zip(pages, TABLES)):
                main = page.locator("[data-testid=stMain]").inner_text()
                assert f"{n} of {n} rows used" in main
                assert f"target {y_name} from 1 input" in main
                for j, other in enumerate(TABLES):
                    if j != i:  # nothing of the other sessions' tables on this page
                        assert other[0] not in main and other[2] not in main, (name, other[0])
                        assert f"{other[3]} of {other[3]} rows used" not in main
                assert not page.locator("[data-testid=stException]").count()
                _full_screenshot(page, output_dir / f"dashboard_session_{i + 1}.png")
        finally:
            browser.close()


NASTY_TARGET = "[click](http://evil.example) $x^2$ http://bare.example"


@pytest.mark.timeout(240)
def test_markdown_link_target_name_is_shown_as_text(server, tmp_path, output_dir):
    rng = np.random.default_rng(5)
    x = np.sort(rng.uniform(0, 10, 60))
    path = tmp_path / "see www.example.org.csv"
    pd.DataFrame({"dose": x, NASTY_TARGET: 2 + 0.5 * x + rng.normal(0, 0.2, x.size)}).to_csv(
        path, index=False)
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000})
            page.goto(server)
            page.get_by_text("Recommended:").first.wait_for(timeout=90_000)
            page.locator("input[type=file]").set_input_files(str(path), timeout=120_000)
            page.get_by_text("60 of 60 rows used").first.wait_for(timeout=90_000)
            page.get_by_text("Recommended:").first.wait_for(timeout=90_000)
            page.wait_for_timeout(2000)
            links = page.evaluate(
                "() => [...document.querySelectorAll('a')].map(a => a.href)")
            assert not [h for h in links if "example" in h], links  # no link element
            assert page.locator(".katex").count() == 0  # no typeset maths
            text = page.locator("[data-testid=stMain]").inner_text().replace("\u2060", "")
            assert f"target {NASTY_TARGET} from 1 input" in text  # shown as its characters
            _full_screenshot(page, output_dir / "dashboard_markup_name.png")
            assert not page.locator("[data-testid=stException]").count()
        finally:
            browser.close()
