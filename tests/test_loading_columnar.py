"""The columnar (pyarrow) route of the text reader agrees with the hand-written one,
and the command line reads local files over the browser's upload cap."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import engine.loading as L
from engine.cli import main
from engine.errors import InputProblem

from test_loading import EXPECTED, LOAD_NAMES, MALFORMED, _check_problem, _run_case


def _both(raw: bytes, monkeypatch, **kw):
    """Load ``raw`` by the columnar route (size switch at 0) and by the hand-written one."""
    monkeypatch.setattr(L, "COLUMNAR_MIN_BYTES", 0)
    fast = L.load_table(raw, name="t.csv", **kw)
    assert L._read_text_columnar(raw, "t.csv", kw.get("decimal") or ".") is not None
    monkeypatch.setattr(L, "COLUMNAR_MIN_BYTES", 1 << 62)
    slow = L.load_table(raw, name="t.csv", **kw)
    return fast, slow


def _same(fast, slow):
    pd.testing.assert_frame_equal(fast.frame, slow.frame, check_dtype=True)
    a, b = fast.report, slow.report
    assert (a.numeric_columns, a.ignored_columns, a.ignored_reasons, a.delimiter, a.notes,
            a.rows_read, a.sha256) == (b.numeric_columns, b.ignored_columns,
                                       b.ignored_reasons, b.delimiter, b.notes, b.rows_read,
                                       b.sha256)


@pytest.mark.parametrize("file_name", LOAD_NAMES)
def test_malformed_corpus_gives_the_same_messages_with_the_columnar_route_first(
        file_name, monkeypatch):
    monkeypatch.setattr(L, "COLUMNAR_MIN_BYTES", 0)
    entry = EXPECTED[file_name]
    _check_problem(_run_case(MALFORMED / file_name, entry), entry)


TABLES = {
    "numbers": "a,b,c\n1,2.5,-3e-4\n4,5,6\n7,,9\n",
    "missing markers and blank lines": "x;y;z\n1;NA;3\n\n4;n/a;missing\n7;8;9\n",
    "text, dates and true/false": ("when,batch,ok,y\n2024-01-01,A,true,1.5\n2024-01-02,B,false,2\n"
                                   "2024-01-03,A,true,2.5\n"),
    "stray text in a numeric column": "t\tv\n1\t2\n2\toops\n3\t4\n4\t5\n5\t6\n6\t7\n7\t8\n8\t9\n9\t10\n10\t11\n11\t12\n",
    "quoted fields": 'name,value\n"a, b",1\n"c",2\n',
    "numeric header": "1,2\n3,4\n5,6\n",
    "padded names": " a ,b \n1,2\n3,4\n",
}


@pytest.mark.parametrize("label", sorted(TABLES))
def test_columnar_and_hand_written_routes_give_the_same_table(label, monkeypatch):
    _same(*_both(TABLES[label].encode(), monkeypatch))


@settings(max_examples=25, deadline=None)
@given(st.lists(st.lists(st.one_of(st.floats(-1e12, 1e12, allow_nan=False, width=64),
                                   st.integers(-10**9, 10**9), st.just(None)),
                         min_size=3, max_size=3), min_size=1, max_size=30))
def test_random_numeric_tables_agree(rows):
    # hypothesis runs this body many times; monkeypatch is per test, so switch by hand
    text = "a,b,c\n" + "".join(",".join("" if v is None else repr(v) for v in r) + "\n"
                               for r in rows)
    raw = text.encode()
    keep = L.COLUMNAR_MIN_BYTES
    try:
        L.COLUMNAR_MIN_BYTES = 0
        try:
            fast = L.load_table(raw, name="t.csv")
        except InputProblem as exc:
            fast = exc
        L.COLUMNAR_MIN_BYTES = 1 << 62
        try:
            slow = L.load_table(raw, name="t.csv")
        except InputProblem as exc:
            slow = exc
    finally:
        L.COLUMNAR_MIN_BYTES = keep
    if isinstance(slow, InputProblem):
        assert isinstance(fast, InputProblem) and (fast.code, fast.message) == (slow.code, slow.message)
    else:
        _same(fast, slow)


def test_decimal_comma_stays_with_the_hand_written_reader():
    raw = b"a;b\n1,5;2,5\n3,5;4,5\n"
    assert L._read_text_columnar(raw * 1, "t.csv", ",") is None


def test_command_line_reads_a_local_file_over_the_upload_cap(tmp_path, monkeypatch, capsys):
    rng = np.random.default_rng(0)
    x = rng.uniform(0, 10, 200)
    frame = pd.DataFrame({"x": x, "y": 1 + 2 * x + rng.normal(0, 0.1, x.size)})
    path = tmp_path / "local.csv"
    frame.to_csv(path, index=False)
    size = path.stat().st_size
    monkeypatch.setattr(L, "DEFAULT_MAX_BYTES", size // 2)   # the browser's cap, made small
    with pytest.raises(InputProblem) as info:                # the page's default is refused
        L.load_table(path)
    assert info.value.code == "too_large"
    status = main(["run", str(path), "--target", "y", "--max-order", "2", "--penalties", "none",
                   "--out", str(tmp_path / "pack")])
    assert status == 0, capsys.readouterr().err
    assert (tmp_path / "pack" / "summary.json").is_file()
