"""Checks that read the row order as time: when they run, when they are skipped
(and say why), and what they assume without an order column.

Reference data: tests/reference/auto/auto.csv, the Auto MPG data as distributed
with James, Witten, Hastie, Tibshirani, "An Introduction to Statistical
Learning", 2nd ed. (2021); the file lists the cars by model year, an order that
is not an order of measurement.
"""
from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np

from engine import ArrayData, SchemeSpec, SweepSpec, analyse
from engine.checks import ROW_ORDER_CHECKS, row_order_basis, run_checks
from engine.loading import load_table, prepare

REF = Path(__file__).resolve().parent / "reference"


def _time_only(n: int = 400, seed: int = 2) -> ArrayData:
    """Time as the only input: a slow trend with AR(1) noise (r = 0.9), no order column."""
    rng = np.random.default_rng(seed)
    t = np.arange(n, dtype=float)
    e = np.zeros(n)
    for i in range(1, n):
        e[i] = 0.9 * e[i - 1] + rng.normal()
    return ArrayData(t, 5 + 0.01 * t + e, ("day",), "level")


def _run(data, scheme: SchemeSpec, max_order: int = 2):
    an = analyse(data, SweepSpec(data.target, data.inputs, max_order=max_order, scheme=scheme))
    return an, run_checks(data, an)


def test_time_only_input_with_later_period_holdout_counts_as_time_order():
    data = _time_only()
    an, rep = _run(data, SchemeSpec("holdout", holdout_fraction=0.25))
    assert row_order_basis(data, an).status == "time_scheme"
    assert rep.row_order["status"] == "time_scheme" and rep.row_order["used"]
    assert rep.skipped == []
    # the later quarter's days lie wholly outside the earlier range: the shift is seen
    shift = rep.by_code("period_shift")
    assert shift is not None and shift.severity == "serious"
    assert shift.details["share_outside"] == 1.0
    serial = rep.by_code("serial_dependence")
    assert serial is not None and serial.details["residual_lag1"] > 0.5
    assert "taken as the order in time" in serial.advice
    notes = rep.tables["summary"].set_index("code")["note"]
    assert notes["serial_dependence"] == "" and notes["period_shift"] == ""


def test_time_only_input_with_blocked_folds_counts_as_time_order():
    data = _time_only()
    an, rep = _run(data, SchemeSpec("blocked", folds=4, gap=10))
    assert rep.row_order["status"] == "time_scheme"
    assert "serial_dependence" in rep.codes()


def test_rows_sorted_by_an_input_under_shuffled_folds_are_skipped_and_say_why():
    data = _time_only()
    an, rep = _run(data, SchemeSpec("kfold", folds=5))
    assert rep.row_order["status"] == "sorted_by_input"
    assert not set(ROW_ORDER_CHECKS) & set(rep.codes())
    assert [x["code"] for x in rep.skipped] == list(ROW_ORDER_CHECKS)
    assert all("listed by the input day" in x["reason"] for x in rep.skipped)
    notes = rep.tables["summary"].set_index("code")["note"]
    assert notes["serial_dependence"].startswith("not used: ")
    assert rep.to_dict()["skipped"] == rep.skipped            # reaches summary.json


def test_stated_time_order_runs_the_checks_under_shuffled_folds():
    data = _time_only()
    scheme = SchemeSpec("kfold", folds=5, rows_in_time_order=True)
    an, rep = _run(data, scheme)
    assert rep.row_order["status"] == "stated" and rep.skipped == []
    f = rep.by_code("serial_dependence")
    assert f is not None and f.severity == "serious"      # known order, shuffled folds flatter


def test_stated_not_time_order_skips_them():
    data = _time_only()
    an, rep = _run(data, SchemeSpec("kfold", folds=5, rows_in_time_order=False))
    assert rep.row_order["status"] == "not_time"
    assert not set(ROW_ORDER_CHECKS) & set(rep.codes())
    assert [x["code"] for x in rep.skipped] == list(ROW_ORDER_CHECKS)
    assert "As stated" in rep.skipped[0]["reason"]


def test_car_table_listed_by_model_year_is_never_serious_without_being_told():
    # Auto MPG (ISLR): rows listed by model year; mpg from horsepower and weight,
    # year not an input, so nothing marks the listing as a sort by an input
    frame = load_table(REF / "auto" / "auto.csv").frame
    assert np.all(np.diff(frame["year"].to_numpy()) >= 0)
    inputs = ["horsepower", "weight"]
    data = prepare(frame, "mpg", inputs)
    an, rep = _run(data, SchemeSpec("kfold", folds=5))
    assert rep.row_order["status"] == "assumed"
    fired = [f for f in rep.findings if f.code in ROW_ORDER_CHECKS]
    assert fired                                          # the listing does look like a trend
    assert all(f.severity == "caution" for f in fired)
    assert all("assumes the file's row order is time order" in f.advice for f in fired)
    assert any("assume the file's row order is time order" in n for n in rep.notes)
    # told that the rows are in time order, the same numbers become serious
    an2, rep2 = _run(data, replace(an.spec.scheme, rows_in_time_order=True))
    assert "serious" in {f.severity for f in rep2.findings if f.code in ROW_ORDER_CHECKS}


def test_order_column_is_known_time_order():
    data = _time_only()
    data.order = np.arange(len(data.y), dtype=float)
    an, rep = _run(data, SchemeSpec("kfold", folds=5, order_column="day_no"))
    assert rep.row_order["status"] == "order_column" and rep.skipped == []
    assert "day_no" in rep.row_order["sentence"]


def test_pack_says_which_checks_were_skipped_and_why(tmp_path):
    import json
    from engine.pack import build_pack
    data = _time_only(n=200)
    spec = SweepSpec("level", ("day",), max_order=2, penalties=(0.0, 1.0),
                     scheme=SchemeSpec("kfold", folds=4))
    build_pack(tmp_path, loaded=None, source_name="levels.csv", data=data, spec=spec)
    s = json.loads((tmp_path / "summary.json").read_text())
    assert [x["code"] for x in s["checks"]["skipped"]] == list(ROW_ORDER_CHECKS)
    assert s["checks"]["row_order"]["status"] == "sorted_by_input"
    md = (tmp_path / "summary.md").read_text()   # names escaped: a word joiner after ':'
    assert "Not used as warnings" in md and "serial dependence and period shift." in md
    assert "listed by the input day" in md
    html = (tmp_path / "summary.html").read_text()
    assert "Not used as warnings: serial dependence and period shift." in html


def test_pack_states_the_row_order_assumption(tmp_path):
    import json
    from engine.pack import build_pack
    rng = np.random.default_rng(5)
    x = rng.uniform(0, 10, 150)
    data = ArrayData(x, 1 + 2 * x + rng.normal(size=150), ("dose",), "response")
    spec = SweepSpec("response", ("dose",), max_order=2, penalties=(0.0, 1.0),
                     scheme=SchemeSpec("kfold", folds=4))
    build_pack(tmp_path, loaded=None, source_name="doses.csv", data=data, spec=spec)
    s = json.loads((tmp_path / "summary.json").read_text())
    assert s["checks"]["row_order"]["status"] == "assumed" and s["checks"]["skipped"] == []
    md = (tmp_path / "summary.md").read_text()
    assert "Row order" in md and "No order column was given" in md
    assert "assume the file's row order is time order" in md


def test_prostate_listed_by_its_target_is_not_read_as_time():
    # ESL's prostate table (tests/reference/prostate, Hastie, Tibshirani, Friedman,
    # 2nd ed., Section 3.2.1) lists the subjects by increasing lpsa, the target
    frame = load_table(REF / "prostate" / "prostate.tsv").frame
    assert np.all(np.diff(frame["lpsa"].to_numpy()) >= 0)
    inputs = ["lcavol", "lweight", "age", "lbph", "svi", "lcp", "gleason", "pgg45"]
    data = prepare(frame, "lpsa", inputs)
    an, rep = _run(data, SchemeSpec("kfold", folds=10), max_order=1)
    assert rep.row_order["status"] == "sorted_by_target"
    assert not set(ROW_ORDER_CHECKS) & set(rep.codes())
    assert "listed by the target lpsa" in rep.skipped[0]["reason"]
    # a later-period holdout on the same listing says what it holds out
    an2, rep2 = _run(data, SchemeSpec("holdout", holdout_fraction=0.3), max_order=1)
    assert rep2.row_order["status"] == "time_scheme"
    assert "listed by lpsa, so the later rows are those with its largest" in \
        rep2.row_order["sentence"]
