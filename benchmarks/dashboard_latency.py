"""Time from uploading a 100,000 x 20 table to every chart of the dashboard being built.

The upload goes through the same path as the file uploader
(``st.session_state["upload"] = (name, bytes)``) and the page is run headless
with Streamlit's AppTest; the time covers reading the file, the sweep, the
checks, the learning curve, the side-by-side fits and building all five
charts with their data. A warm-up run on the bundled demo comes first, so the
number does not include importing Python packages.

With ``--browser`` the same upload is also timed in Chromium (file chosen in
the uploader -> validation curve drawn in the page).

Usage::

    .venv/bin/python benchmarks/dashboard_latency.py [--rows 100000] [--cols 20] [--browser]

The last three lines are ``upload_to_page_complete <seconds>s`` (the median
AppTest time until the page run is complete: intervals and prediction band
added), ``upload_to_warnings <seconds>s`` (until the warnings panel is filled;
target 4 s) and
``upload_to_charts <seconds>s``: the median over repeats of the AppTest time
until every chart has been sent to the page. In the browser only elements
without Streamlit's stale marker count, so the demo's chart or warnings still
on the page cannot satisfy the wait.
"""
from __future__ import annotations

import argparse
import io
import logging
import statistics
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))


def make_table(rows: int, cols: int, seed: int = 0) -> pd.DataFrame:
    """Invented plant log: ``cols - 1`` correlated channels and a target."""
    rng = np.random.default_rng(seed)
    d = cols - 1
    base = rng.normal(size=(rows, 3))
    mix = rng.normal(size=(3, d))
    X = base @ mix + 0.5 * rng.normal(size=(rows, d))
    w = rng.normal(size=d)
    y = X @ w + 0.3 * X[:, 0] ** 2 + rng.normal(0, 1.0, rows)
    frame = pd.DataFrame(X, columns=[f"channel_{j + 1:02d}" for j in range(d)])
    frame["output_pct"] = y
    return frame.round(5)


def engine_phases(raw: bytes, name: str) -> list[tuple[str, float]]:
    """Time each engine step the page runs, outside Streamlit, for the breakdown."""
    from engine import SchemeSpec, SweepSpec, analyse, learning_curve
    from engine import charts as C
    from engine.compare import fit_candidates
    from engine.loading import load_table, prepare

    out = []
    t = time.perf_counter()
    loaded = load_table(raw, name=name)
    out.append(("load_table", time.perf_counter() - t))
    numeric = loaded.report.numeric_columns
    target, inputs = numeric[-1], numeric[:-1]
    t = time.perf_counter()
    data = prepare(loaded.frame, target, inputs)
    out.append(("prepare", time.perf_counter() - t))
    spec = SweepSpec(target, tuple(inputs), max_order=1, scheme=SchemeSpec("kfold"))
    t = time.perf_counter()
    a = analyse(data, spec)
    out.append(("analyse (sweep)", time.perf_counter() - t))
    try:
        from engine import checks

        t = time.perf_counter()
        checks.run_checks(data, a)
        out.append(("run_checks", time.perf_counter() - t))
    except ImportError:
        pass
    rec = a.recommendation.recommended
    t = time.perf_counter()
    lc = learning_curve(data, spec, orders=[rec.order, 1])
    out.append(("learning_curve", time.perf_counter() - t))
    t = time.perf_counter()
    models = fit_candidates(data, spec, [(0, rec.penalty), (1, rec.penalty)])
    out.append(("fit_candidates", time.perf_counter() - t))
    t = time.perf_counter()
    charts = [
        C.validation_curve_chart(a.validation, rec.penalty, a.recommendation.best, rec, target),
        C.heatmap_chart(a.validation, a.recommendation.best, rec, target),
        C.learning_curve_chart(lc.table, [(rec.order, rec.penalty), (1, 0.0)], target),
        C.comparison_chart(data, models, target),
        C.coefficient_chart(a.sweep.coefficient_table(), rec.order, rec.penalty, target=target),
    ]
    for ch in charts:
        ch.to_json()
    out.append(("five charts built and serialised", time.perf_counter() - t))
    return out


def apptest_upload(raw: bytes, name: str) -> tuple[float, float, float, int]:
    """Seconds from handing over the upload to (a) the last chart sent, (b) the warnings
    panel filled, (c) the page done.

    (a) and (b) are read from the page's own stage marks
    (``st.session_state["_marks"]``, the same clock, as AppTest runs the page in
    this process); the page draws every chart before it fills in the warnings
    panel, whose checks run in the background meanwhile. (c) is the whole run:
    after the warnings the page adds the intervals ("How sure") and the
    prediction band of the side-by-side chart.
    """
    from streamlit.testing.v1 import AppTest

    at = AppTest.from_file(str(REPO / "app.py"), default_timeout=300)
    at.run()  # warm-up on the demo that opens first
    if at.exception:
        raise RuntimeError(str(at.exception[0].value))
    at.session_state["upload"] = (name, raw)
    t = time.perf_counter()
    at.run()
    elapsed = time.perf_counter() - t
    if at.exception or at.error:
        raise RuntimeError("the page showed a problem: "
                           + "; ".join([str(e.value) for e in at.exception]
                                       + [str(e.value) for e in at.error]))
    charts = at.get("vega_lite_chart")
    if len(charts) < 5:
        raise RuntimeError(f"only {len(charts)} charts were drawn")
    if not any(name in c.value.replace("\\", "") for c in at.caption):
        raise RuntimeError("the page does not show the uploaded file")
    marks = at.session_state["_marks"]
    print("    stages: " + ", ".join(f"{k} {v - t:.2f}s" for k, v in marks.items() if k != "start"))
    charts_at = marks["charts"] - t
    warnings_at = marks["checks"] - t
    return charts_at, warnings_at, elapsed, len(charts)


#: A chart or panel counts only when no stale marker sits on it: Streamlit marks the
#: previous run's elements with data-stale="true" until the new run replaces them, so
#: the demo's validation curve and warnings still on the page do not count.
_FRESH_CHART_JS = """(word) => [...document.querySelectorAll('[data-testid=stVegaLiteChart]')]
  .filter(c => !c.closest('[data-stale=true]'))
  .some(c => { const s = c.querySelector('svg');
               return s && s.textContent.includes('Validation curve')
                        && s.textContent.toLowerCase().includes(word); })"""
_FRESH_WARNINGS_JS = """() => {
  const fresh = e => !e.closest('[data-stale=true]');
  if ([...document.querySelectorAll('[data-testid=stSpinner]')].filter(fresh)
        .some(s => s.textContent.includes('warning signs'))) return false;
  return [...document.querySelectorAll('[data-testid=stAlert], [data-testid=stExpander]')]
    .filter(fresh)
    .some(e => e.textContent.includes('No warnings from the checks')
               || /Warnings \\(\\d/.test(e.textContent)); }"""


def browser_upload(path: Path, target_word: str = "output") -> tuple[float, float]:
    """Seconds from choosing the file in Chromium to (a) the new validation curve drawn,
    (b) the new warnings panel filled. Only elements without Streamlit's stale marker
    count, and the validation curve must name the new table's target."""
    import socket
    import subprocess
    import urllib.request

    from playwright.sync_api import sync_playwright

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    proc = subprocess.Popen([sys.executable, "-m", "streamlit", "run", str(REPO / "app.py"),
                             "--server.address", "127.0.0.1", "--server.port", str(port),
                             "--server.headless", "true", "--server.fileWatcherType", "none"],
                            cwd=str(REPO), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    url = f"http://127.0.0.1:{port}"
    try:
        for _ in range(300):
            try:
                urllib.request.urlopen(url + "/_stcore/health", timeout=1)
                break
            except OSError:
                time.sleep(0.2)
        with sync_playwright() as p:
            b = p.chromium.launch(executable_path="/usr/bin/chromium",
                                  args=["--no-sandbox", "--disable-gpu",
                                        "--disable-background-networking",
                                        "--disable-component-update", "--disable-sync",
                                        "--no-first-run"])
            page = b.new_page(viewport={"width": 1400, "height": 1000})
            page.goto(url)
            page.get_by_text("Recommended:").first.wait_for(timeout=120_000)
            page.locator("[data-testid=stVegaLiteChart]").first.wait_for(timeout=120_000)
            t = time.perf_counter()
            page.locator("input[type=file]").set_input_files(str(path))
            page.get_by_text(f"{path.name} · ").first.wait_for(timeout=300_000)
            page.wait_for_function(_FRESH_CHART_JS, arg=target_word, timeout=300_000)
            charts = time.perf_counter() - t
            page.wait_for_function(_FRESH_WARNINGS_JS, timeout=300_000)
            warned = time.perf_counter() - t
            b.close()
        return charts, warned
    finally:
        proc.terminate()
        proc.wait(timeout=20)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    ap.add_argument("--cols", type=int, default=20)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--browser", action="store_true")
    args = ap.parse_args()
    logging.getLogger("streamlit").setLevel(logging.ERROR)
    warnings.filterwarnings("ignore")

    frame = make_table(args.rows, args.cols)
    buf = io.StringIO()
    frame.to_csv(buf, index=False)
    raw = buf.getvalue().encode()
    name = f"plant_log_{args.rows}x{args.cols}.csv"
    print(f"table: {args.rows:,} rows x {args.cols} columns, CSV {len(raw) / 1e6:.1f} MB")

    print("engine steps (outside the page, same defaults):")
    for step, sec in engine_phases(raw, name):
        print(f"  {step:<34s} {sec:7.3f}s")

    times, warns, wholes = [], [], []
    for i in range(args.repeats):
        # a fresh name and one changed byte each time, so nothing is served from the cache
        variant = raw.replace(b"\n", b"\n", 1) + b"\n" * i
        sec, warned, whole, n = apptest_upload(variant, name.replace(".csv", f"_{i}.csv"))
        times.append(sec)
        warns.append(warned)
        wholes.append(whole)
        print(f"AppTest run {i + 1}: all {n} charts sent after {sec:.3f}s; warnings panel "
              f"filled after {warned:.3f}s; page complete (intervals, prediction band) after "
              f"{whole:.3f}s")
    if args.browser:
        path = Path("/tmp") / name
        path.write_bytes(raw)
        charts, warned = browser_upload(path)
        print(f"browser (choose file -> new validation curve drawn): {charts:.3f}s; "
              f"-> new warnings panel filled: {warned:.3f}s")
    print(f"upload_to_page_complete {statistics.median(wholes):.3f}s")
    print(f"upload_to_warnings {statistics.median(warns):.3f}s")
    print(f"upload_to_charts {statistics.median(times):.3f}s")


if __name__ == "__main__":
    main()
