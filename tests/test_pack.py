"""The meeting pack: every file, valid images, one printed page, exact numbers, safe text."""
from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import operator
import re
import struct
import xml.etree.ElementTree as ET
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from engine import ArrayData, SchemeSpec, SweepSpec, analyse, fit_cell
from engine.errors import InputProblem
from engine.loading import load_table, prepare
from engine.pack import (CHART_FILES, FORMULA_START, PACK_FILES, build_pack,
                         default_compare_orders, escape_csv_cell, load_pipeline, md_escape,
                         pack_zip_bytes, sklearn_pipeline)

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG signature, ISO/IEC 15948 section 5.2
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking"]

NASTY_X1 = '=HYPERLINK("x")'
NASTY_X2 = "@SUM(A1)"
NASTY_Y = "<script>alert(1)</script>"
NASTY_FILE = "<img src=x onerror=alert(2)>=cmd.csv"


def _reject_constant(name):
    raise AssertionError(f"summary.json holds the non-JSON constant {name}")


@pytest.fixture(scope="module")
def demo_pack(tmp_path_factory, demo_dir):
    """Pack of the calibration demo: k-fold, orders 0-8, a short penalty grid."""
    path = demo_dir / "calibration_curve.csv"
    loaded = load_table(path)
    data = prepare(loaded.frame, "bath_temp_C", ["probe_mV"])
    spec = SweepSpec("bath_temp_C", ("probe_mV",), max_order=8,
                     penalties=(0.0, 1e-3, 1e-1, 10.0), scheme=SchemeSpec("kfold"))
    out = tmp_path_factory.mktemp("demo_pack")
    res = build_pack(out, loaded=loaded, source_name=loaded.report.source_name, data=data,
                     spec=spec, load_options={"decimal": None, "sheet": None},
                     source_path=str(path))
    return res, data, spec, path


@pytest.fixture(scope="module")
def nasty_pack(tmp_path_factory):
    """Column and file names that are spreadsheet formulas and HTML; holdout (one split)."""
    rng = np.random.default_rng(7)
    n = 40
    x1 = rng.uniform(-2, 3, n)
    x2 = rng.uniform(10, 20, n)
    y = -5.0 + 2.0 * x1 - 0.3 * x1 * x2 + rng.normal(0, 0.2, n)
    folder = tmp_path_factory.mktemp("nasty_src")
    path = folder / NASTY_FILE
    pd.DataFrame({NASTY_X1: x1, NASTY_X2: x2, NASTY_Y: y}).to_csv(path, index=False)
    loaded = load_table(path)
    data = prepare(loaded.frame, NASTY_Y, [NASTY_X1, NASTY_X2])
    spec = SweepSpec(NASTY_Y, (NASTY_X1, NASTY_X2), orders=(0, 1, 2), interactions=True,
                     penalties=(0.0, 0.1), scheme=SchemeSpec("holdout", holdout_fraction=0.25))
    out = tmp_path_factory.mktemp("nasty_pack")
    res = build_pack(out, loaded=loaded, source_name=loaded.report.source_name, data=data,
                     spec=spec)
    return res, data, spec, path


# ---------------------------------------------------------------------------
# files and images
# ---------------------------------------------------------------------------
def test_pack_holds_every_file(demo_pack):
    res, *_ = demo_pack
    names = sorted(p.name for p in res.out_dir.iterdir())
    assert names == sorted(PACK_FILES)
    assert [p.name for p in res.files] == list(PACK_FILES)
    for p in res.files:
        assert p.stat().st_size > 0, p.name


def test_zip_holds_the_same_files(demo_pack):
    res, *_ = demo_pack
    blob = pack_zip_bytes(res.out_dir)
    with zipfile.ZipFile(io.BytesIO(blob)) as zf:
        assert zf.testzip() is None
        names = zf.namelist()
        assert names == [f"{res.out_dir.name}/{n}" for n in PACK_FILES]
        assert zf.read(f"{res.out_dir.name}/summary.json") == (res.out_dir / "summary.json").read_bytes()


def test_charts_are_valid_png_and_svg(demo_pack):
    res, *_ = demo_pack
    for stem in CHART_FILES:
        png = (res.out_dir / f"{stem}.png").read_bytes()
        assert png[:8] == PNG_MAGIC, stem
        # IHDR is the first chunk: width and height as big-endian 32-bit (ISO/IEC 15948, 11.2.2)
        assert png[12:16] == b"IHDR"
        width, height = struct.unpack(">II", png[16:24])
        assert width > 200 and height > 100, (stem, width, height)
        root = ET.fromstring((res.out_dir / f"{stem}.svg").read_text(encoding="utf-8"))
        assert root.tag.split("}")[-1] == "svg", stem


# ---------------------------------------------------------------------------
# numbers
# ---------------------------------------------------------------------------
def test_summary_json_carries_full_precision_numbers(demo_pack):
    res, data, spec, path = demo_pack
    text = (res.out_dir / "summary.json").read_text(encoding="utf-8")
    s = json.loads(text, parse_constant=_reject_constant)
    a = res.analysis
    assert len(s["grid"]) == len(a.validation)
    for cell, (_, row) in zip(s["grid"], a.validation.iterrows()):
        for key in ("order", "penalty", "train_mse", "validation_mse", "validation_mse_se",
                    "validation_r2", "effective_df", "parameters"):
            assert cell[key] == row[key], key  # exact: no rounding on the way to JSON
    rec, best = a.recommendation.recommended, a.recommendation.best
    for key in ("order", "penalty", "validation_mse", "validation_mse_se", "parameters",
                "effective_df"):
        assert s["recommended"][key] == getattr(rec, key)
        assert s["best"][key] == getattr(best, key)
    # the record names the selection rule and the paired comparison behind the pick
    assert s["rule_name"] == a.recommendation.rule_name == "paired"
    assert s["recommended"]["paired_difference"] == rec.paired_difference
    assert [c["near_best"] for c in s["grid"]] == a.validation["near_best"].tolist()
    assert s["coefficients"]["terms"] == list(res.model.terms)
    assert s["coefficients"]["terms"][:2] == ["intercept", "probe_mV"]
    assert s["coefficients"]["values"] == [float(v) for v in res.model.coefficients]
    # SHA-256 computed independently with hashlib
    assert s["data"]["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert s["data"]["rows_used"] == 24 and s["data"]["rows_dropped"] == 0
    assert s["warnings"], "order 8 on 24 rows should draw at least one warning"
    for i, w in enumerate(s["warnings"], start=1):
        assert w["number"] == i and w["code"] and w["message"] and "value" in w


def test_nan_becomes_null(nasty_pack):
    res, *_ = nasty_pack
    text = (res.out_dir / "summary.json").read_text(encoding="utf-8")
    assert "NaN" not in text and "Infinity" not in text
    s = json.loads(text, parse_constant=_reject_constant)
    # one holdout split: the training error has no spread across splits (NaN -> null),
    # while the validation error's standard error comes from the held-out rows (never 0)
    assert all(c["train_mse_se"] is None for c in s["grid"])
    assert all(c["validation_mse_se"] > 0 for c in s["grid"])
    assert all(isinstance(c["validation_mse"], float) for c in s["grid"])


def _csv_columns(path: Path) -> dict[str, list[str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    return {name: [r[j] for r in rows[1:]] for j, name in enumerate(rows[0])}


def test_csv_tables_round_trip_exactly(demo_pack):
    res, *_ = demo_pack
    grid = _csv_columns(res.out_dir / "validation_grid.csv")
    a = res.analysis.validation
    assert list(grid) == list(a.columns)
    # Python's float() of the written text gives back the very same double
    assert [float(v) for v in grid["validation_mse"]] == list(a["validation_mse"])
    assert [float(v) for v in grid["train_mse"]] == list(a["train_mse"])
    coefs = _csv_columns(res.out_dir / "model_coefficients.csv")
    assert coefs["term"] == list(res.model.terms)
    assert [float(v) for v in coefs["coefficient"]] == list(res.model.coefficients)
    lc = pd.read_csv(res.out_dir / "learning_curve.csv")
    assert {"order", "penalty", "train_size", "validation_mse"} <= set(lc.columns)
    rec = res.analysis.recommendation.recommended
    assert ((lc["order"] == rec.order) & np.isclose(lc["penalty"], rec.penalty)).any()


def test_record_holds_what_a_rerun_needs(demo_pack):
    res, data, spec, path = demo_pack
    r = json.loads((res.out_dir / "record.json").read_text(encoding="utf-8"))
    assert SweepSpec.from_dict(r["spec"]) == spec
    assert r["seed"] == spec.seed
    assert r["data"]["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert r["data"]["file"] == "calibration_curve.csv" and r["data"]["rows_used"] == 24
    assert r["roles"]["target"] == "bath_temp_C" and r["roles"]["inputs"] == ["probe_mV"]
    assert set(r["versions"]) >= {"numpy", "pandas", "scikit-learn", "python", "fitladder"}
    assert set(r["load_options"]) == {"decimal", "sheet"}
    assert r["compare_cells"][0] == [res.model.order, res.model.penalty]


# ---------------------------------------------------------------------------
# the saved model
# ---------------------------------------------------------------------------
def _rel_gap(pred_a, pred_b, y) -> float:
    return float(np.max(np.abs(pred_a - pred_b)) / np.ptp(y))


def test_saved_pipeline_reproduces_predictions(demo_pack, nasty_pack):
    for res, data in ((demo_pack[0], demo_pack[1]), (nasty_pack[0], nasty_pack[1])):
        pipe = load_pipeline(res.out_dir / "model.skops")
        lo, hi = data.X.min(axis=0), data.X.max(axis=0)
        grid = np.random.default_rng(1).uniform(lo - 0.25 * (hi - lo), hi + 0.25 * (hi - lo),
                                                size=(300, data.X.shape[1]))
        for X in (data.X, grid):
            # the saved pipeline takes a table with the input columns by name (as a user
            # predicts from a DataFrame); the engine's model takes the array
            frame = pd.DataFrame(X, columns=list(data.inputs))
            assert _rel_gap(pipe.predict(frame), res.model.predict(X), data.y) <= 1e-9


@pytest.mark.parametrize("interactions,order,penalty", [
    (False, 0, 0.0), (False, 1, 0.0), (False, 3, 0.0), (False, 4, 0.5),
    (True, 2, 0.0), (True, 3, 0.01)])
def test_pipeline_matches_the_engine_for_several_inputs(interactions, order, penalty):
    rng = np.random.default_rng(3)
    X = rng.uniform([0.0, 100.0, -1.0], [5.0, 300.0, 1.0], size=(80, 3))
    y = 1 + X[:, 0] ** 2 - 0.01 * X[:, 1] + X[:, 0] * X[:, 2] + rng.normal(0, 0.1, 80)
    data = ArrayData(X, y, inputs=("a", "b", "c"))
    spec = SweepSpec("y", ("a", "b", "c"), interactions=interactions)
    model = fit_cell(data, spec, order, penalty)
    pipe = sklearn_pipeline(model)
    Xt = rng.uniform([-1.0, 50.0, -2.0], [6.0, 350.0, 2.0], size=(200, 3))
    frame = pd.DataFrame(Xt, columns=["a", "b", "c"])   # by name, as a user predicts
    assert _rel_gap(pipe.predict(frame), model.predict(Xt), y) <= 1e-9


def test_pipeline_agrees_with_an_independent_scikit_learn_fit(demo_pack):
    """Unpenalised order-2 fit: the exported pipeline against scikit-learn's own
    PolynomialFeatures + LinearRegression fitted on the same rows (external reference)."""
    from sklearn.linear_model import LinearRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import PolynomialFeatures

    _, data, spec, _ = demo_pack
    model = fit_cell(data, spec, 2, 0.0)
    ours = sklearn_pipeline(model)
    theirs = make_pipeline(PolynomialFeatures(2), LinearRegression()).fit(data.X, data.y)
    grid = np.linspace(data.X.min(), data.X.max(), 50)[:, None]
    frame = pd.DataFrame(grid, columns=list(data.inputs))
    assert _rel_gap(ours.predict(frame), theirs.predict(grid), data.y) <= 1e-9


def test_loading_refuses_foreign_objects(tmp_path):
    import skops.io as sio
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import FunctionTransformer

    unsafe = tmp_path / "unsafe.skops"
    sio.dump(Pipeline([("f", FunctionTransformer(operator.neg))]), str(unsafe))
    with pytest.raises(InputProblem, match="does not use"):
        load_pipeline(unsafe)
    other = tmp_path / "other.skops"
    sio.dump(Pipeline([("f", FunctionTransformer(np.log1p))]), str(other))
    with pytest.raises(InputProblem, match="not a Fitladder model"):
        load_pipeline(other)


# ---------------------------------------------------------------------------
# escaping
# ---------------------------------------------------------------------------
def test_escape_csv_cell_keeps_numbers_and_defuses_formulas():
    # common practice (OWASP "CSV injection"): a leading ' stops formula evaluation
    assert escape_csv_cell(-3.5) == -3.5
    assert escape_csv_cell(np.float64(-2.0)) == -2.0
    assert escape_csv_cell(7) == 7
    for text in ("=1+2", "+1", "-1+2", "@SUM(A1)", "\tx", "\rx"):
        assert escape_csv_cell(text) == "'" + text
    assert escape_csv_cell("probe_mV") == "probe_mV"


def _csv_cells(path: Path):
    with open(path, newline="", encoding="utf-8") as fh:
        for row in csv.reader(fh):
            yield from row


def _is_number(text: str) -> bool:
    try:
        return math.isfinite(float(text)) or text.lower() in ("nan", "inf", "-inf")
    except ValueError:
        return False


def test_csv_files_hold_no_live_formula(nasty_pack):
    res, *_ = nasty_pack
    negative_numbers = 0
    for name in PACK_FILES:
        if not name.endswith(".csv"):
            continue
        for cell in _csv_cells(res.out_dir / name):
            if cell.startswith(FORMULA_START):
                assert _is_number(cell), (name, cell)  # only plain numbers may start so
                negative_numbers += cell.startswith("-")
    assert negative_numbers > 0  # negative numbers stayed numbers, not quoted text
    terms = list(_csv_cells(res.out_dir / "model_coefficients.csv"))
    assert "'" + NASTY_X1 in terms and "'" + NASTY_X2 in terms
    assert f"'{NASTY_X1}*{NASTY_X2}" in terms


def test_summary_html_and_markdown_escape_names(nasty_pack):
    res, *_ = nasty_pack
    page = (res.out_dir / "summary.html").read_text(encoding="utf-8")
    assert "<script>alert" not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "<img src=x" not in page and "&lt;img src=x onerror=alert(2)&gt;=cmd.csv" in page
    assert '=HYPERLINK("x")' not in page and "=HYPERLINK(&quot;x&quot;)" in page
    md = (res.out_dir / "summary.md").read_text(encoding="utf-8")
    assert "<script>" not in md and "<img" not in md
    assert md_escape(NASTY_Y) in md and md_escape(NASTY_FILE) in md
    assert md_escape(NASTY_X1) == '=HYPERLINK("x")'
    assert md_escape("a_b*c") == r"a\_b\*c"


def test_svg_charts_carry_no_script(nasty_pack):
    res, *_ = nasty_pack
    for stem in CHART_FILES:
        root = ET.fromstring((res.out_dir / f"{stem}.svg").read_text(encoding="utf-8"))
        assert not [el for el in root.iter() if el.tag.split("}")[-1].lower() == "script"]


def test_markdown_summary_content(demo_pack):
    res, *_ = demo_pack
    md = (res.out_dir / "summary.md").read_text(encoding="utf-8")
    s = res.summary
    assert s["data"]["sha256"] in md
    assert "calibration\\_curve.csv" in md
    rec = s["recommended"]
    assert f"Recommended: order {rec['order']}" in md
    for w in s["warnings"]:
        assert f"{w['number']}. " in md
    assert "future data resemble" in md and "your organisation's own standards" in md


def test_dashboard_style_call_gives_the_same_pack(demo_pack, tmp_path):
    """The dashboard passes its finished analysis and its default orders; the command
    line passes neither. Same request, same data: the same summary and tables."""
    res, data, spec, path = demo_pack
    loaded = load_table(path)
    again = build_pack(tmp_path, loaded=loaded, source_name=loaded.report.source_name,
                       data=data, spec=spec, analysis=res.analysis,
                       compare_orders=default_compare_orders(res.analysis))
    for name in ("summary.json", "validation_grid.csv", "learning_curve.csv",
                 "model_coefficients.csv", "coefficients.csv", "warnings.csv"):
        assert (tmp_path / name).read_bytes() == (res.out_dir / name).read_bytes(), name
    assert again.summary["compared_cells"] == res.summary["compared_cells"]


def test_unknown_compare_order_is_refused(demo_pack, tmp_path):
    res, data, spec, _ = demo_pack
    with pytest.raises(InputProblem, match="not in this sweep"):
        build_pack(tmp_path, loaded=None, source_name="x.csv", data=data, spec=spec,
                   analysis=res.analysis, compare_orders=[12])


# ---------------------------------------------------------------------------
# in a real browser: one printed page, no script from the data runs
# ---------------------------------------------------------------------------
#: Paper sizes the summary must print on, with their heights in mm (ISO 216 A4,
#: ANSI/ASME Y14.1 Letter) and the summary's top and bottom page margins (5 mm each).
PAPERS = {"A4": 297.0, "Letter": 279.4}
PRINT_MARGINS_MM = 10.0


def _pdf_pages(pdf: bytes) -> int:
    # page objects carry "/Type /Page" (PDF 32000-1:2008, 7.7.3.3); "/Pages" is the tree node
    return len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", pdf))


@pytest.fixture(scope="module")
def browser():
    sync_api = pytest.importorskip("playwright.sync_api", reason="playwright is not installed")
    if not Path(CHROMIUM).exists():
        pytest.skip(f"chromium is not installed at {CHROMIUM}")
    with sync_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        yield b
        b.close()


@pytest.mark.browser
@pytest.mark.parametrize("which", ["demo_pack", "nasty_pack"])
def test_summary_prints_on_one_page(browser, which, request, output_dir):
    res = request.getfixturevalue(which)[0]
    url = (res.out_dir / "summary.html").as_uri()
    for js in (True, False):  # the layout fits without the script that shrinks overflow
        ctx = browser.new_context(java_script_enabled=js, viewport={"width": 900, "height": 1200})
        page = ctx.new_page()
        dialogs = []
        page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
        page.goto(url)
        page.wait_for_load_state("load")
        for paper in PAPERS:   # the page names no paper size: the printer's paper is used
            pdf = page.pdf(format=paper, print_background=True, prefer_css_page_size=True)
            assert pdf[:5] == b"%PDF-"
            assert _pdf_pages(pdf) == 1, (which, js, paper)
        if js:
            page.emulate_media(media="print")
            page.screenshot(path=str(output_dir / f"pack_summary_{which}.png"), full_page=True)
            body = page.inner_text("body")
            assert "Recommended:" in body and "Before relying on this model" in body
            if which == "nasty_pack":
                assert NASTY_Y in body and NASTY_FILE in body  # shown as text ...
                assert dialogs == []     # ... and never run
        ctx.close()


# Text-bearing elements whose boxes must not overlap on the printed page.
_TEXT_BOXES = """() => {
  const mm = 96 / 25.4;
  const sel = 'h1, h2, .sub, .big, .fig, dt, dd, td, th, figcaption, li, pre, .sev, p, ' +
              '.beforeuse, .foot, figure.chart img';
  const els = [...document.querySelectorAll(sel)];
  return els.map((e, i) => {
    const r = e.getBoundingClientRect();
    return {i: i, tag: e.tagName + '.' + e.className, text: (e.innerText || '').slice(0, 40),
            x: r.left / mm, y: r.top / mm, w: r.width / mm, h: r.height / mm,
            parents: els.map((o, j) => (o !== e && o.contains(e)) ? j : -1).filter(j => j >= 0)};
  });
}"""


@pytest.mark.browser
def test_page_pack_in_one_call_with_trust_and_a_readable_page_on_a4_and_letter(
        browser, demo_dir, tmp_path, output_dir):
    """The dashboard's pack: one `build_pack` call fed with what the page computed
    (sweep, checks, fits, learning curve, nested CV, stability) refits nothing,
    carries nested CV and stability, and prints on one A4 page and on one US Letter
    page with no overlapping text boxes and every chart at least 80 mm wide."""
    import engine.pack as P
    from engine import learning_curve, trust
    from engine.checks import run_checks
    from engine.compare import fit_candidates

    loaded = load_table(demo_dir / "calibration_curve.csv")
    data = prepare(loaded.frame, "bath_temp_C", ["probe_mV"])
    spec = SweepSpec("bath_temp_C", ("probe_mV",), max_order=10, scheme=SchemeSpec("loo"))
    analysis = analyse(data, spec)
    rec = analysis.recommendation.recommended
    cells = [(rec.order, rec.penalty), (10, rec.penalty), (2, 0.0), (10, 0.0)]
    models = fit_candidates(data, spec, cells)
    lc = learning_curve(data, spec, orders=[rec.order, 10])
    checks = run_checks(data, analysis)
    nested = trust.nested_cv(data, spec, 3, analysis=analysis)
    stab = trust.selection_stability(data, spec, 4, "repeated", None)

    def refit(*a, **k):
        raise AssertionError("the pack refitted something the page had computed")

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(P, "fit_candidates", refit)
        mp.setattr(P, "learning_curve", refit)
        mp.setattr(P, "analyse", refit)
        res = P.build_pack(tmp_path / "pack", loaded=loaded, source_name="calibration_curve.csv",
                           data=data, spec=spec, analysis=analysis, checks=checks,
                           compare_orders=cells, models=models, learning=lc,
                           trust=(nested, stab))
    s = res.summary
    assert s["nested_cv"]["outer_mse"] == pytest.approx(nested.outer_mse, rel=1e-12)
    assert s["selection_stability"]["repetitions"] == 4
    assert (tmp_path / "pack" / "nested_cv.csv").is_file()
    assert (tmp_path / "pack" / "selection_stability.csv").is_file()
    assert s["compared_cells"][:4] == [{"order": q, "penalty": a} for q, a in cells]
    html_text = (tmp_path / "pack" / "summary.html").read_text()
    assert "Nested cross-validation" in html_text and "Selection stability" in html_text
    assert "Use this model" in html_text

    ctx = browser.new_context(viewport={"width": 900, "height": 1200})
    page = ctx.new_page()
    page.goto((tmp_path / "pack" / "summary.html").as_uri())
    page.wait_for_load_state("load")
    page.emulate_media(media="print")
    for paper, height_mm in PAPERS.items():
        pdf = page.pdf(format=paper, print_background=True, prefer_css_page_size=True)
        assert _pdf_pages(pdf) == 1, paper
        if paper == "A4":
            page.screenshot(path=str(output_dir / "pack_summary_page_call.png"), full_page=True)
        boxes = page.evaluate(_TEXT_BOXES)
        printed = page.evaluate("() => document.querySelector('.page')"
                                ".getBoundingClientRect().height / (96 / 25.4)")
        assert printed <= height_mm - PRINT_MARGINS_MM, (paper, printed)
        _assert_readable(boxes, len(P.CHART_FILES))
    ctx.close()


def _assert_readable(boxes: list[dict], charts: int) -> None:
    """Every chart at least 80 mm wide; no two text boxes overlap (nested ones aside)."""
    imgs = [b for b in boxes if b["tag"].startswith("IMG")]
    assert len(imgs) == charts
    assert all(b["w"] >= 80.0 for b in imgs), [round(b["w"], 1) for b in imgs]
    eps = 0.05  # mm: touching edges are not an overlap
    shown = [b for b in boxes if b["w"] > 0 and b["h"] > 0]
    for i, a in enumerate(shown):
        for b in shown[i + 1:]:
            if a["i"] in b["parents"] or b["i"] in a["parents"]:
                continue
            apart = (a["x"] + a["w"] <= b["x"] + eps or b["x"] + b["w"] <= a["x"] + eps or
                     a["y"] + a["h"] <= b["y"] + eps or b["y"] + b["h"] <= a["y"] + eps)
            assert apart, (a["tag"], a["text"], b["tag"], b["text"])


def test_warnings_are_listed_most_severe_first():
    from engine.pack import _sorted_warnings

    ws = [{"number": 1, "severity": "note"}, {"number": 2, "severity": "caution"},
          {"number": 3, "severity": "serious"}, {"number": 4, "severity": "caution"}]
    assert [w["number"] for w in _sorted_warnings(ws)] == [3, 2, 4, 1]


def test_saved_pipeline_predicts_from_a_dataframe_without_warnings(demo_pack, tmp_path):
    import warnings

    res, data, spec, _ = demo_pack
    pipe = load_pipeline(res.out_dir / "model.skops")
    frame = pd.DataFrame({"probe_mV": [3.0, 8.0, 12.5]})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        got = pipe.predict(frame)
    np.testing.assert_allclose(got, res.model.predict(frame[["probe_mV"]].to_numpy()),
                               rtol=1e-9)
    use = res.summary["use"]
    assert len(use["python"]) == 3
    assert use["formula"].startswith("bath_temp_C = ")
    assert use["input_range"]["probe_mV"] == [float(data.X[:, 0].min()), float(data.X[:, 0].max())]


def test_pack_carries_intervals_and_the_larger_table_outlook(demo_pack, nasty_pack):
    res, data, spec, _ = demo_pack
    s = res.summary
    hs, mr = s["how_sure"], s["more_rows"]
    ei, pi = hs["error_interval"], hs["prediction_intervals"]
    assert ei["method"] == "nested cross-validation" and ei["low"] < ei["estimate"] < ei["high"]
    assert 0.0 <= pi["cvplus_coverage"] <= 1.0 and pi["checked_rows"] == data.n_rows
    assert set(mr["supported_order"]) == {"2x", "5x"} and mr["verdict"]
    md = (res.out_dir / "summary.md").read_text(encoding="utf-8")
    assert "## How sure" in md and "## More rows or a simpler model?" in md
    html = (res.out_dir / "summary.html").read_text(encoding="utf-8")
    assert "How sure:" in html
    cov = pd.read_csv(res.out_dir / "interval_coverage.csv")
    assert len(cov) == res.analysis.plan.n_splits and "cvplus_coverage" in cov
    assert len(pd.read_csv(res.out_dir / "more_rows.csv")) >= 1
    # one split (holdout): a real standard error from the validation rows, never ± 0
    nres = nasty_pack[0]
    nei = nres.summary["how_sure"]["error_interval"]
    assert nei["method"] == "validation rows" and nei["se"] > 0
    assert nres.summary["how_sure"]["prediction_intervals"]["checked_on"] == "later period"
