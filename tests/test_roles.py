"""Default roles for an uploaded table, on public tables with a known target.

Reference data (tests/reference/, copied from the shared reference sets):
- auto/auto.csv: Auto MPG as distributed with James, Witten, Hastie, Tibshirani,
  "An Introduction to Statistical Learning", 2nd ed. (2021), whose worked
  examples predict mpg; origin is a region code (1, 2, 3);
- prostate/prostate.tsv: Stamey et al. (1989) as used in Hastie, Tibshirani,
  Friedman, "The Elements of Statistical Learning", 2nd ed., Section 3.2.1,
  whose analysis predicts lpsa from eight inputs; id numbers the rows and train
  marks the book's training rows;
- nist/Longley.csv: NIST StRD Longley, response y, inputs x1..x6.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from engine.loading import load_table
from engine.roles import column_kind, default_roles, screen_inputs

REF = Path(__file__).resolve().parent / "reference"
DEMO = Path(__file__).resolve().parents[1] / "demo_data"


def _roles(path: Path):
    lt = load_table(path)
    return lt, default_roles(lt.frame, list(lt.report.numeric_columns))


def test_auto_default_target_is_mpg_not_the_region_code():
    lt, r = _roles(REF / "auto" / "auto.csv")
    assert lt.report.numeric_columns[-1] == "origin"   # the old rule's pick
    assert r.target != "origin"
    assert r.target == "mpg"
    assert "origin" in r.passed_over and "code" in r.passed_over["origin"]
    assert "year, origin at the end of the table" in r.target_reason
    assert set(r.inputs) == {"cylinders", "displacement", "horsepower", "weight",
                             "acceleration", "year", "origin"}


def test_prostate_default_target_is_lpsa_and_id_and_train_are_not_inputs():
    lt, r = _roles(REF / "prostate" / "prostate.tsv")
    assert r.target == "lpsa"
    # ESL Section 3.2.1: lpsa from these eight inputs
    assert list(r.inputs) == ["lcavol", "lweight", "age", "lbph", "svi", "lcp",
                              "gleason", "pgg45"]
    assert "train" not in r.inputs and r.target != "train"
    assert "row number" in r.left_out["id"]
    assert any("id (numbers the rows" in s for s in r.sentences())


def test_longley_target_named_y():
    _, r = _roles(REF / "nist" / "Longley.csv")
    assert r.target == "y" and list(r.inputs) == [f"x{j}" for j in range(1, 7)]


@pytest.mark.parametrize("file,target,order", [
    ("calibration_curve.csv", "bath_temp_C", None),
    ("drifting_line_sensors.csv", "yield_pct", "minute"),
    ("wide_spectra.csv", "analyte_mg_L", None),
])
def test_demo_tables_keep_their_natural_roles(file, target, order):
    _, r = _roles(DEMO / file)
    assert r.target == target and r.order_column == order
    assert r.inputs and not r.left_out


def test_log_copy_of_the_target_is_left_out_with_the_reason():
    lt = load_table(REF / "auto" / "auto.csv")
    frame = lt.frame.copy()
    frame["log_mpg"] = np.log(frame["mpg"])
    cols = ["cylinders", "displacement", "horsepower", "weight", "acceleration", "year",
            "origin", "log_mpg", "mpg"]
    r = default_roles(frame[cols], cols)
    assert r.target == "mpg"
    assert "log_mpg" not in r.inputs and len(r.inputs) == 7
    assert "log of mpg = a + b * log_mpg" in r.left_out["log_mpg"]


def _trade_balance(seed: int, n: int):
    """Invented trade table: ``balance`` is ``exports - imports`` rounded; ``rate`` unrelated."""
    import pandas as pd
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"exports": rng.normal(100, 10, n), "imports": rng.normal(90, 8, n),
                          "rate": rng.normal(3, 1, n)})
    frame["balance"] = (frame["exports"] - frame["imports"]).round(2)
    return frame


def test_target_equal_to_difference_of_two_inputs_leaves_both_out():
    frame = _trade_balance(3, 120)
    inputs, left = screen_inputs(frame, "balance", ["exports", "imports", "rate"])
    assert inputs == ["rate"]
    assert set(left) == {"exports", "imports"}
    assert "balance = a + b * exports + c * imports" in left["exports"]


def test_column_kinds():
    assert column_kind(np.arange(1, 50), "id") == "row_number"
    assert column_kind(np.arange(1947, 1963), "x6") == "measurement"   # a year column, all distinct
    assert column_kind(np.arange(0, 100, 2.0), "minute") == "clock"
    assert column_kind(np.tile([1, 2, 3], 30), "origin") == "code"
    assert column_kind(np.random.default_rng(0).normal(size=40), "x") == "measurement"


def test_command_line_leaves_a_log_copy_out_and_records_the_stated_row_order(tmp_path, capsys):
    import json
    from engine.cli import main
    frame = load_table(REF / "prostate" / "prostate.tsv").frame
    frame["log_lpsa_plus_5"] = np.log(frame["lpsa"] + 5.0)      # a transform of the target
    cols = ["id", "lcavol", "lweight", "age", "lbph", "svi", "lcp", "gleason", "pgg45",
            "log_lpsa_plus_5", "lpsa"]
    src = tmp_path / "prostate_leak.csv"
    frame[cols].to_csv(src, index=False)
    code = main(["run", str(src), "--target", "lpsa", "--max-order", "1", "--penalties", "none",
                 "--rows-in-time-order", "no", "--out", str(tmp_path / "pack")])
    assert code == 0
    err = capsys.readouterr().err
    assert "Left out of the default inputs: id (" in err and "log_lpsa_plus_5 (" in err
    s = json.loads((tmp_path / "pack" / "summary.json").read_text())
    assert s["roles"]["inputs"] == ["lcavol", "lweight", "age", "lbph", "svi", "lcp",
                                    "gleason", "pgg45"]
    assert any("log_lpsa_plus_5" in n for n in s["data"]["notes"])
    assert s["checks"]["row_order"]["status"] == "not_time"
    assert "target_leakage" not in [w["code"] for w in s["warnings"]]
    rec = json.loads((tmp_path / "pack" / "record.json").read_text())
    assert rec["spec"]["scheme"]["rows_in_time_order"] is False
    # a re-run from the record keeps the answer and the inputs
    assert main(["rerun", str(tmp_path / "pack" / "record.json"), "--data", str(src),
                 "--out", str(tmp_path / "again")]) == 0
    s2 = json.loads((tmp_path / "again" / "summary.json").read_text())
    assert s2["checks"]["row_order"]["status"] == "not_time"
    assert s2["roles"]["inputs"] == s["roles"]["inputs"]
    # the record's answer is typed: a string is refused with a message
    from engine.errors import InputProblem
    from engine.record import check_record
    bad = json.loads(json.dumps(rec))
    bad["spec"]["scheme"]["rows_in_time_order"] = "no"
    with pytest.raises(InputProblem):
        check_record(bad)


def test_screen_of_a_table_with_a_gap_equals_the_screen_of_its_complete_rows():
    # complete rows: the frame's columns are screened as they are; with a gap the
    # complete rows are gathered first; both leave out the same columns, same words
    frame = _trade_balance(5, 300)
    gap = frame.copy()
    gap.loc[7, "rate"] = np.nan
    full = screen_inputs(frame.drop(index=7).reset_index(drop=True), "balance",
                         ["exports", "imports", "rate"])
    assert screen_inputs(gap, "balance", ["exports", "imports", "rate"]) == full
    assert full[0] == ["rate"]
