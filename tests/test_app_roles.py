"""The page's default roles and its row-order question, driven headless with AppTest.

Reference data: tests/reference/auto/auto.csv (Auto MPG, as distributed with
James, Witten, Hastie, Tibshirani, "An Introduction to Statistical Learning",
2nd ed., 2021; listed by model year) and tests/reference/prostate/prostate.tsv
(Stamey et al. 1989, as used in Hastie, Tibshirani, Friedman, "The Elements of
Statistical Learning", 2nd ed., Section 3.2.1; listed by lpsa).
"""
from __future__ import annotations

from pathlib import Path

from streamlit.testing.v1 import AppTest

REF = Path(__file__).resolve().parent / "reference"


def _upload(repo_root, path: Path) -> AppTest:
    at = AppTest.from_file(str(repo_root / "app.py"), default_timeout=90).run()
    at.session_state["upload"] = (path.name, path.read_bytes())
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    assert not [e.value for e in at.error], [e.value for e in at.error]
    return at


def _captions(at) -> str:
    return "\n".join(c.value for c in at.caption).replace("\u2060", "")


def _warnings(at) -> list[str]:
    return [w.value for w in at.warning] + [i.value for i in at.info]


def test_car_table_defaults_and_the_row_order_question(repo_root):
    at = _upload(repo_root, REF / "auto" / "auto.csv")
    assert at.selectbox(key="target").value == "mpg"          # not the region code 'origin'
    assert "Default target mpg" in _captions(at)
    radio = at.radio(key="rows_time")
    assert radio.value == "Not said" and list(radio.options) == ["Not said", "Yes", "No"]
    # with year among the inputs, rows listed by year are not read as time, and the page says so
    assert "listed by the input year" in _captions(at)
    assert not any("neighbouring rows move together" in w for w in _warnings(at))
    # the user says the rows are in time order: the row-order checks are used
    radio.set_value("Yes").run()
    assert not at.exception
    assert "listed by the input year" not in _captions(at)


def test_prostate_defaults_leave_out_the_row_number_with_the_reason(repo_root):
    at = _upload(repo_root, REF / "prostate" / "prostate.tsv")
    assert at.selectbox(key="target").value == "lpsa"
    assert list(at.multiselect(key="inputs").value) == [
        "lcavol", "lweight", "age", "lbph", "svi", "lcp", "gleason", "pgg45"]
    caps = _captions(at)
    assert "Left out of the inputs: id (numbers the rows" in caps
