"""The columnar (pyarrow) route of the text reader agrees with the hand-written one,
and the command line reads local files over the browser's upload cap."""
from __future__ import annotations

import os

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


# ---------------------------------------------------------------------------
# reading only the chosen columns of a wide table
# ---------------------------------------------------------------------------
def _wide_frame(rows: int = 30, columns: int = 300) -> pd.DataFrame:
    rng = np.random.default_rng(5)
    frame = pd.DataFrame(np.round(rng.normal(size=(rows, columns)), 3),
                         columns=[f"c{j:03d}" for j in range(columns)])
    frame["y"] = np.round(rng.normal(size=rows), 3)
    return frame


CHOSEN = ["y", "c007", "c250"]


@pytest.mark.parametrize("route", ["columnar", "hand-written"])
def test_chosen_columns_of_a_wide_text_table_equal_the_whole_reading(route, monkeypatch):
    raw = _wide_frame().to_csv(index=False).encode()
    monkeypatch.setattr(L, "COLUMNAR_MIN_BYTES", 0 if route == "columnar" else 1 << 62)
    whole = L.load_table(raw, name="t.csv")
    seen = {}
    real = pd.read_csv

    def spy(*a, **k):
        seen["usecols"] = k.get("usecols")
        return real(*a, **k)
    monkeypatch.setattr(L.pd, "read_csv", spy)
    part = L.load_table(raw, name="t.csv", columns=CHOSEN)
    assert list(part.frame.columns) == ["c007", "c250", "y"]          # file order
    pd.testing.assert_frame_equal(part.frame, whole.frame[["c007", "c250", "y"]])
    assert part.report.numeric_columns == ["c007", "c250", "y"]
    assert "298 other columns were left unread" in part.report.notes[-1]
    if route == "hand-written":
        assert seen["usecols"] == [7, 250, 300]   # pandas materialised only these


def test_chosen_columns_with_a_decimal_comma_and_messy_header():
    text = " a ;;c\n1,5;2,5;3,5\n4,5;5,5;6,5\n7,5;8,5;9,5\n"
    whole = L.load_table(text.encode(), name="t.csv", decimal=",")
    part = L.load_table(text.encode(), name="t.csv", decimal=",", columns=["a", "column_2"])
    assert list(part.frame.columns) == ["a", "column_2"]   # trimmed and named by position
    pd.testing.assert_frame_equal(part.frame, whole.frame[["a", "column_2"]])


@pytest.mark.parametrize("route", ["columnar", "hand-written"])
def test_ragged_rows_give_the_same_message_when_columns_are_chosen(route, monkeypatch):
    monkeypatch.setattr(L, "COLUMNAR_MIN_BYTES", 0 if route == "columnar" else 1 << 62)
    raw = (MALFORMED / "ragged_rows.csv").read_bytes()
    with pytest.raises(InputProblem) as whole:
        L.load_table(raw, name="ragged_rows.csv")
    with pytest.raises(InputProblem) as part:
        L.load_table(raw, name="ragged_rows.csv", columns=["x", "y"])
    assert (part.value.code, part.value.message) == (whole.value.code, whole.value.message)
    assert "line 4" in part.value.message


def test_an_unknown_chosen_name_reads_every_column():
    raw = _wide_frame(columns=5).to_csv(index=False).encode()
    part = L.load_table(raw, name="t.csv", columns=["y", "nope"])
    assert part.frame.shape[1] == 6


def test_chosen_columns_of_parquet_and_workbook(tmp_path):
    frame = _wide_frame(rows=12, columns=40)
    frame.to_parquet(tmp_path / "w.parquet", index=False)
    frame.to_excel(tmp_path / "w.xlsx", index=False)
    for name in ("w.parquet", "w.xlsx"):
        whole = L.load_table(tmp_path / name)
        part = L.load_table(tmp_path / name, columns=["y", "c007", "c025"])
        assert list(part.frame.columns) == ["c007", "c025", "y"], name
        pd.testing.assert_frame_equal(part.frame, whole.frame[["c007", "c025", "y"]])
        assert any("38 other columns were left unread" in n for n in part.report.notes)


def test_peek_reads_a_bounded_sample_with_kinds_and_a_row_estimate(tmp_path, monkeypatch):
    frame = _wide_frame(rows=400, columns=20)
    frame["note"] = "text"
    frame.to_csv(tmp_path / "t.csv", index=False)
    frame.to_parquet(tmp_path / "t.parquet", index=False)
    monkeypatch.setattr(L, "SAMPLE_BYTES", 4096)
    csv_head = L.peek_table(tmp_path / "t.csv", rows=50)
    assert 1 <= csv_head.report.rows_read <= 50
    assert (tmp_path / "t.csv").stat().st_size > 4096
    assert csv_head.report.numeric_columns == list(frame.columns[:-1])
    assert csv_head.report.ignored_columns == ["note"]
    assert abs(csv_head.report.rows_estimate - 400) < 40     # from bytes per line
    pq_head = L.peek_table(tmp_path / "t.parquet", rows=50)
    assert pq_head.report.rows_read == 50 and pq_head.report.rows_estimate == 400
    assert pq_head.report.numeric_columns == list(frame.columns[:-1])
    # a file that cannot be sampled on its own: None, and the whole reading says why
    (tmp_path / "bad.csv").write_bytes(b"\x1f\x8b" + bytes(100))
    assert L.peek_table(tmp_path / "bad.csv") is None


def test_wide_file_refused_for_too_many_terms_before_its_cells_are_read(tmp_path, monkeypatch,
                                                                        capsys):
    path = tmp_path / "wide.csv"
    _wide_frame(rows=20, columns=400).to_csv(path, index=False)
    calls = []
    real = L.load_table

    def spy(*a, **k):
        calls.append(k.get("columns"))
        return real(*a, **k)
    monkeypatch.setattr(L, "load_table", spy)
    code = main(["run", str(path), "--target", "y", "--out", str(tmp_path / "pack")])
    err = capsys.readouterr().err
    assert code == 2 and "too large to sweep" in err and "from 400 inputs" in err
    assert "about 20 rows" in err
    assert calls == []                       # refused from the header and the sample
    code = main(["run", str(path), "--target", "y", "--inputs", "c001,c002", "--max-order", "2",
                 "--penalties", "0,0.1", "--out", str(tmp_path / "pack")])
    assert code == 0, capsys.readouterr().err
    assert calls == [["y", "c001", "c002"]]  # only the chosen columns were materialised


def test_choosing_every_column_is_the_whole_reading():
    raw = _wide_frame(columns=4).to_csv(index=False).encode()
    whole = L.load_table(raw, name="t.csv")
    every = L.load_table(raw, name="t.csv", columns=["y", "c000", "c001", "c002", "c003"])
    pd.testing.assert_frame_equal(every.frame, whole.frame)
    assert every.report.notes == whole.report.notes   # no note about unread columns


def test_wide_workbook_refusal_counts_its_sample_rows_as_a_lower_bound(tmp_path, capsys):
    path = tmp_path / "wide.xlsx"
    _wide_frame(rows=30, columns=400).to_excel(path, index=False)
    code = main(["run", str(path), "--target", "y", "--out", str(tmp_path / "pack")])
    err = capsys.readouterr().err
    assert code == 2 and "from 400 inputs" in err and "at least 30 rows" in err


# ---------------------------------------------------------------------------
# large files: mapped into memory, fingerprinted in a thread
# ---------------------------------------------------------------------------

def _mapped(monkeypatch):
    """Every file counts as large and settled: mapped (not copied) and read by the
    columnar route."""
    monkeypatch.setattr(L, "MAPPED_MIN_BYTES", 0)
    monkeypatch.setattr(L, "COLUMNAR_MIN_BYTES", 0)
    monkeypatch.setattr(L, "MAPPED_QUIET_SECONDS", 0.0)


def test_a_file_changed_moments_ago_is_copied_not_mapped(tmp_path, monkeypatch):
    # a file perhaps still being written is never mapped (a mapping cut short stops
    # the process); the same table comes from the copy
    _mapped(monkeypatch)
    monkeypatch.setattr(L, "MAPPED_QUIET_SECONDS", 10.0)
    raw = TABLES[sorted(TABLES)[0]].encode()
    path = tmp_path / "t.csv"
    path.write_bytes(raw)
    assert isinstance(L._read_source(str(path), None, L.NO_SIZE_LIMIT)[0], bytes)
    fresh = L.load_table(str(path))
    old = path.stat().st_mtime - 60
    os.utime(path, (old, old))
    assert isinstance(L._read_source(str(path), None, L.NO_SIZE_LIMIT)[0], L.mmap.mmap)
    _same(fresh, L.load_table(str(path)))


@pytest.mark.parametrize("label", sorted(TABLES))
def test_a_mapped_file_gives_the_table_and_digest_of_its_bytes(label, tmp_path, monkeypatch):
    import hashlib
    import pickle

    raw = TABLES[label].encode()
    path = tmp_path / "t.csv"
    path.write_bytes(raw)
    _mapped(monkeypatch)
    assert isinstance(L._read_source(str(path), None, L.NO_SIZE_LIMIT)[0], L.mmap.mmap)
    from_path = L.load_table(str(path))
    from_bytes = L.load_table(raw, name="t.csv")
    _same(from_path, from_bytes)
    # the digest, computed in a thread, is the SHA-256 of the file's bytes (hashlib)
    assert from_path.report.sha256 == hashlib.sha256(raw).hexdigest()
    assert from_path.report.size_bytes == len(raw)
    # a report whose digest is still being computed is pickled (page cache) with the digest
    fresh = L.load_table(str(path))
    again = pickle.loads(pickle.dumps(fresh))
    assert again.report.sha256 == hashlib.sha256(raw).hexdigest()


def test_a_mapped_file_the_columnar_route_declines_is_read_from_a_copy(tmp_path, monkeypatch):
    # a line break inside quotes and a decimal comma: the hand-written reader's cases
    _mapped(monkeypatch)
    quoted = b'name,value\n"two\nlines",1\n"c",2\n'
    (tmp_path / "q.csv").write_bytes(quoted)
    got = L.load_table(str(tmp_path / "q.csv"))
    assert list(got.frame["value"]) == [1.0, 2.0]
    assert got.frame["name"].iloc[0] == "two\nlines"
    comma = b"a;b\n1,5;2,5\n3,5;4,5\n"
    (tmp_path / "c.csv").write_bytes(comma)
    got = L.load_table(str(tmp_path / "c.csv"), decimal=",")
    assert list(got.frame["a"]) == [1.5, 3.5]


@pytest.mark.parametrize("content, code", [
    (b'{"a": [1, 2], "b": [3, 4]}', "unsupported_format"),   # JSON: refused, whole file read
    (b"\x1f\x8b\x08\x00rest", "unsupported_format"),          # gzip
    (b"a,b\n1,\x00\n", "undecodable"),                         # NUL byte in text
    (b'a,b\n1,2\n"3,4\n5,6\n', "malformed_rows"),             # a quote never closed
])
def test_a_mapped_file_is_refused_as_the_same_file_from_bytes(content, code, tmp_path,
                                                            monkeypatch):
    _mapped(monkeypatch)
    path = tmp_path / "t.csv"
    path.write_bytes(content)
    with pytest.raises(InputProblem) as from_path:
        L.load_table(str(path))
    with pytest.raises(InputProblem) as from_bytes:
        L.load_table(content, name="t.csv")
    assert from_path.value.code == from_bytes.value.code == code
    assert from_path.value.message == from_bytes.value.message


def test_quotes_in_a_mapped_file_are_counted_a_block_at_a_time_as_in_bytes(tmp_path,
                                                                           monkeypatch):
    # the unclosed quote itself is refused like the same bytes (parametrised test above)
    _mapped(monkeypatch)
    raw = b'a,b\n1,2\n"3,4\n5,6\n'
    path = tmp_path / "t.csv"
    path.write_bytes(raw)
    assert L._count(L._map_file(path), b'"', block=3) == raw.count(b'"') == 1
