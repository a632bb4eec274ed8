"""Tests of engine.loading: reading tables and preparing the chosen columns."""
from __future__ import annotations

import hashlib
import importlib.util
import io
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from engine.errors import InputProblem
from engine.loading import (DEFAULT_MAX_BYTES, ERROR_CODES, LoadedTable, LoadReport, describe_drops,
                            PreparedData, load_table, prepare)

from test_hostile_input import says_what_to_do

MALFORMED = Path(__file__).resolve().parent / "malformed"
EXPECTED = json.loads((MALFORMED / "expected.json").read_text(encoding="utf-8"))
CORPUS_NAMES = sorted(EXPECTED)
#: files refused by the loader (the others are refused by a run's request budget)
LOAD_NAMES = sorted(n for n, e in EXPECTED.items() if e.get("stage") != "run")


def _load_corpus_script():
    spec = importlib.util.spec_from_file_location("make_malformed", MALFORMED / "make_malformed.py")
    module = importlib.util.module_from_spec(spec)
    assert spec.loader is not None
    spec.loader.exec_module(module)
    return module


def _run_case(source, entry: dict, name: str | None = None):
    """Load (and prepare, if the entry says so) and return the raised InputProblem."""
    with pytest.raises(InputProblem) as info:
        table = load_table(source, name=name, **entry.get("load", {}))
        if "prepare" in entry:
            args = dict(entry["prepare"])
            prepare(table.frame, args.pop("target"), args.pop("inputs"), **args)
    return info.value


def _check_problem(problem: InputProblem, entry: dict) -> None:
    assert type(problem) is InputProblem
    assert problem.code == entry["code"], problem.message
    wanted = entry["message"] if isinstance(entry["message"], list) else [entry["message"]]
    for text in wanted:
        assert text in problem.message
    if "column" in entry:
        assert problem.column == entry["column"]
    if "row" in entry:
        assert problem.row == entry["row"]
    assert says_what_to_do(problem.message), problem.message  # and what to do about it


def _csv(text: str) -> bytes:
    return text.encode("utf-8")


# ---------------------------------------------------------------------------
# The malformed corpus
# ---------------------------------------------------------------------------

def test_corpus_is_large_and_listed_exactly():
    on_disk = {p.name for p in MALFORMED.iterdir()
               if p.is_file() and p.name not in ("make_malformed.py", "expected.json")}
    assert len(on_disk) >= 72
    assert on_disk == set(EXPECTED)
    assert {EXPECTED[n]["code"] for n in LOAD_NAMES} <= set(ERROR_CODES)


def test_corpus_files_are_what_the_script_writes(tmp_path):
    module = _load_corpus_script()
    module.write(tmp_path)
    fresh = sorted(p.name for p in tmp_path.iterdir())
    committed = sorted(p.name for p in MALFORMED.iterdir()
                       if p.is_file() and p.name != "make_malformed.py")
    assert fresh == committed
    for name in fresh:
        assert (tmp_path / name).read_bytes() == (MALFORMED / name).read_bytes(), name


@pytest.mark.parametrize("file_name", LOAD_NAMES)
def test_malformed_file_from_path(file_name):
    entry = EXPECTED[file_name]
    _check_problem(_run_case(MALFORMED / file_name, entry), entry)


@pytest.mark.parametrize("file_name", LOAD_NAMES)
def test_malformed_file_from_bytes(file_name):
    entry = EXPECTED[file_name]
    raw = (MALFORMED / file_name).read_bytes()
    _check_problem(_run_case(raw, entry, name=file_name), entry)


# ---------------------------------------------------------------------------
# Text files
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("delimiter", [",", ";", "\t", "|"])
def test_delimiters_are_detected(delimiter):
    rows = [["time", "x", "y"], ["0", "1.5", "2"], ["1", "2.5", "4"], ["2", "-3e2", "8"]]
    raw = _csv("\n".join(delimiter.join(r) for r in rows) + "\n")
    table = load_table(raw, name="data.csv")
    assert isinstance(table, LoadedTable)
    assert isinstance(table.report, LoadReport)
    assert table.report.delimiter == delimiter
    assert table.report.file_format == "csv"
    assert list(table.frame.columns) == ["time", "x", "y"]
    assert table.frame["x"].tolist() == [1.5, 2.5, -300.0]
    assert table.report.numeric_columns == ["time", "x", "y"]
    assert table.report.rows_read == 3
    assert table.report.columns_read == 3


@pytest.mark.parametrize("delimiter", [";", "\t"])
def test_decimal_comma(delimiter):
    raw = _csv(f"x{delimiter}y\n1,5{delimiter}2,25\n-0,5{delimiter} 3 \n1,5E-3{delimiter}4,0\n")
    table = load_table(raw, name="data.csv", decimal=",")
    assert table.report.delimiter == delimiter
    assert table.report.decimal == ","
    assert table.frame["x"].tolist() == [1.5, -0.5, 0.0015]
    assert table.frame["y"].tolist() == [2.25, 3.0, 4.0]


def test_decimal_must_be_point_or_comma():
    with pytest.raises(InputProblem) as info:
        load_table(_csv("x,y\n1,2\n"), name="a.csv", decimal=":")
    assert info.value.code == "bad_decimal"


def test_utf8_byte_order_mark_is_removed():
    raw = b"\xef\xbb\xbf" + _csv("temp,y\n1,2\n3,4\n")
    table = load_table(raw, name="a.csv")
    assert list(table.frame.columns) == ["temp", "y"]
    assert table.report.numeric_columns == ["temp", "y"]


def test_windows_1252_text_is_read_with_a_note():
    raw = "temp °C;µm\n1;2\n3;4\n".encode("cp1252")
    table = load_table(raw, name="a.csv")
    assert list(table.frame.columns) == ["temp °C", "µm"]
    assert any("Windows-1252" in n for n in table.report.notes)


def test_utf16_with_byte_order_mark_is_read():
    raw = "x\ty\n1\t2\n3\t4\n".encode("utf-16")
    table = load_table(raw, name="export.txt")
    assert table.report.delimiter == "\t"
    assert table.frame["y"].tolist() == [2.0, 4.0]


def test_numbers_with_spaces_and_missing_markers():
    raw = _csv("x,y\n 1 ,  2\nNA,3\n3,null\n4,\n")
    table = load_table(raw, name="a.csv")
    assert table.frame["x"].tolist()[0] == 1.0
    assert np.isnan(table.frame["x"].iloc[1])
    assert np.isnan(table.frame["y"].iloc[2]) and np.isnan(table.frame["y"].iloc[3])
    # markers of missing values are not reported as stray text
    assert not any("not a number" in n for n in table.report.notes)


def test_stray_text_cells_become_missing_with_a_note():
    values = ["1", "2", "3", "oops", "5", "6", "7", "8", "9", "10"]  # 9 of 10 are numbers
    raw = _csv("x,y\n" + "\n".join(f"{i},{v}" for i, v in enumerate(values)) + "\n")
    table = load_table(raw, name="a.csv")
    assert "y" in table.report.numeric_columns
    assert np.isnan(table.frame["y"].iloc[3])
    assert table.frame["y"].notna().sum() == 9
    note = [n for n in table.report.notes if "'y'" in n]
    assert note and "1 cell" in note[0] and "data row 4" in note[0] and "oops" in note[0]


def test_column_below_ninety_percent_numbers_is_text():
    values = ["1", "2", "3", "oops", "5", "6", "7", "8", "9", "bad"]  # 8 of 10
    raw = _csv("x,y\n" + "\n".join(f"{i},{v}" for i, v in enumerate(values)) + "\n")
    table = load_table(raw, name="a.csv")
    assert table.report.numeric_columns == ["x"]
    assert table.report.ignored_columns == ["y"]
    assert "80%" in table.report.ignored_reasons["y"]
    assert table.frame["y"].iloc[3] == "oops"


def test_text_columns_are_kept_but_ignored_for_modelling():
    raw = _csv("name,site,x,y\nana,n,1,2\nben,s,2,4\ncai,,3,6\n")
    table = load_table(raw, name="a.csv")
    assert table.report.numeric_columns == ["x", "y"]
    assert table.report.ignored_columns == ["name", "site"]
    assert table.report.ignored_reasons == {"name": "text", "site": "text"}
    assert table.frame["name"].tolist() == ["ana", "ben", "cai"]
    assert pd.isna(table.frame["site"].iloc[2])
    assert any("2 columns" in n and "name, site" in n for n in table.report.notes)


def test_date_column_is_kept_and_usable_as_order():
    raw = _csv("when,x,y\n2024-03-01 10:00,1,2\n2024-03-01 09:00,2,5\n2024-03-01 11:00,3,7\n")
    table = load_table(raw, name="a.csv")
    assert table.report.ignored_reasons == {"when": "dates or times"}
    data = prepare(table.frame, "y", ["x"], order_column="when")
    assert data.row_index.tolist() == [1, 0, 2]
    assert np.diff(data.order).tolist() == [3600.0, 3600.0]
    assert data.order[0] == pd.Timestamp("2024-03-01 09:00").timestamp()


def test_blank_column_names_are_named_by_position():
    raw = _csv("x,,y, \n1,2,3,4\n5,6,7,8\n")
    table = load_table(raw, name="a.csv")
    assert list(table.frame.columns) == ["x", "column_2", "y", "column_4"]
    assert any("column_2, column_4" in n for n in table.report.notes)


def test_single_column_text_file():
    table = load_table(_csv("reading\n1\n2\n3\n"), name="a.csv")
    assert table.report.delimiter is None
    assert table.frame["reading"].tolist() == [1.0, 2.0, 3.0]


def test_quoted_fields_with_delimiters_inside():
    raw = _csv('label,x,y\n"a, b",1,2\n"c",3,4\n')
    table = load_table(raw, name="a.csv")
    assert table.report.delimiter == ","
    assert table.frame["label"].tolist() == ["a, b", "c"]


def test_line_endings_blank_lines_and_padded_names():
    for raw in (b"\n\n x , y \r\n1,2\r\n\r\n3,4\r\n", b"x;y\r1;2\r3;4\r"):
        table = load_table(raw, name="a.csv")
        assert list(table.frame.columns) == ["x", "y"]
        assert table.frame["y"].tolist() == [2.0, 4.0]


def test_quoted_header_spanning_two_lines():
    table = load_table(b'"supply\nvoltage",y\n1,2\n3,4\n', name="a.csv")
    assert table.report.delimiter == ","
    assert list(table.frame.columns) == ["supply\nvoltage", "y"]
    assert table.frame["y"].tolist() == [2.0, 4.0]


def test_trailing_delimiter_on_every_line_gives_an_empty_named_column():
    table = load_table(b"x,y,\n1,2,\n3,4,\n", name="a.csv")
    assert list(table.frame.columns) == ["x", "y", "column_3"]
    assert table.report.numeric_columns == ["x", "y"]
    assert table.report.ignored_reasons["column_3"] == "no values"


def test_true_false_column_is_ignored_with_reason():
    table = load_table(b"x,flag\n1,True\n2,False\n", name="a.csv")
    assert table.report.ignored_reasons == {"flag": "true/false values"}


def test_numeric_first_row_is_mentioned():
    table = load_table(b"1,2\n3,4\n5,6\n", name="a.csv")
    assert list(table.frame.columns) == ["1", "2"]
    assert any("first row holds only numbers" in n for n in table.report.notes)


def test_entirely_empty_rows_are_kept_and_mentioned():
    table = load_table(_csv("x,y\n1,2\n,\n3,4\n"), name="a.csv")
    assert table.report.rows_read == 3
    assert any("1 row has no values" in n for n in table.report.notes)


# ---------------------------------------------------------------------------
# Sources, sizes and formats
# ---------------------------------------------------------------------------

def test_path_bytes_and_file_object_give_the_same_table(tmp_path):
    raw = _csv("time;x;y;site\n0;1;2;a\n1;2;4,5;b\n2;3;6;c\n")
    path = tmp_path / "readings.csv"
    path.write_bytes(raw)

    class Upload(io.BytesIO):
        name = "readings.csv"

    upload = Upload(raw)
    upload.read()  # a file object already read to the end is read from the start
    from_path = load_table(path)
    from_str_path = load_table(str(path))
    from_bytes = load_table(raw, name="readings.csv")
    from_file = load_table(upload)
    for other in (from_str_path, from_bytes, from_file):
        pd.testing.assert_frame_equal(from_path.frame, other.frame)
        assert other.report == from_path.report
    assert from_path.report.source_name == "readings.csv"
    assert from_path.report.sha256 == hashlib.sha256(raw).hexdigest()
    assert from_path.report.size_bytes == len(raw)


def test_sha256_of_excel_bytes(tmp_path):
    path = tmp_path / "t.xlsx"
    pd.DataFrame({"x": [1.0, 2.0], "y": [3.0, 5.0]}).to_excel(path, index=False)
    raw = path.read_bytes()
    assert load_table(path).report.sha256 == hashlib.sha256(raw).hexdigest()


def test_xlsx_round_trip(tmp_path):
    frame = pd.DataFrame({"x": [0.5, 1.5, 2.5], "y": [1.0, np.nan, 9.25],
                          "batch": ["a", "b", "a"], "n": [1, 2, 3]})
    path = tmp_path / "book.xlsx"
    with pd.ExcelWriter(path) as writer:
        frame.to_excel(writer, sheet_name="first", index=False)
        frame.assign(y=[7.0, 8.0, 9.0]).to_excel(writer, sheet_name="second", index=False)
    table = load_table(path)
    assert table.report.file_format == "xlsx"
    assert table.report.delimiter is None
    assert table.report.numeric_columns == ["x", "y", "n"]
    assert table.report.ignored_columns == ["batch"]
    np.testing.assert_array_equal(table.frame["x"].to_numpy(), frame["x"].to_numpy())
    np.testing.assert_array_equal(table.frame["y"].to_numpy(), frame["y"].to_numpy())
    assert table.frame["batch"].tolist() == ["a", "b", "a"]
    second = load_table(path, sheet="second")
    assert second.frame["y"].tolist() == [7.0, 8.0, 9.0]
    by_number = load_table(path, sheet=1)
    pd.testing.assert_frame_equal(second.frame, by_number.frame)
    with pytest.raises(InputProblem) as info:
        load_table(path, sheet="third")
    assert info.value.code == "unknown_sheet"
    assert "'first'" in info.value.message and "'second'" in info.value.message


def test_parquet_round_trip(tmp_path):
    frame = pd.DataFrame({"x": [0.5, 1.5, 2.5, 3.5], "y": [1.0, np.nan, 9.25, -2.0],
                          "count": pd.array([1, None, 3, 4], dtype="Int64"),
                          "site": ["n", "s", None, "n"]})
    path = tmp_path / "data.parquet"
    frame.to_parquet(path, index=False)
    table = load_table(path)
    assert table.report.file_format == "parquet"
    assert table.report.numeric_columns == ["x", "y", "count"]
    assert table.report.ignored_columns == ["site"]
    np.testing.assert_array_equal(table.frame["y"].to_numpy(), frame["y"].to_numpy())
    assert table.frame["count"].tolist()[2:] == [3.0, 4.0] and np.isnan(table.frame["count"][1])
    assert table.frame["site"].tolist()[:2] == ["n", "s"]


def test_parquet_decimal_columns_are_read_as_numbers(tmp_path):
    # fixed-point columns (pyarrow decimal128 / decimal256, as databases and Spark write
    # them) are numbers: each value equals Python's float() of the exact decimal
    # (the reference is the standard library's decimal module, not the loader)
    import decimal

    import pyarrow as pa
    import pyarrow.parquet as pq
    D = decimal.Decimal
    price = [D("12.50"), D("-0.01"), None, D("99999999.99"), D("0.10")]
    mass = [D("1.0000000001"), D("2.5"), D("-3.1415926535"), D("0"), None]
    wide = [D("123456789012345678901234.5"), D("1"), D("-2"), D("3"), D("4")]
    table = pa.table({"unit price": pa.array(price, pa.decimal128(10, 2)),
                      "mass_kg": pa.array(mass, pa.decimal128(38, 10)),
                      "big": pa.array(wide, pa.decimal256(40, 1)),
                      "y": [1.0, 2.0, 3.0, 4.5, 5.0]})
    path = tmp_path / "fixed_point.parquet"
    pq.write_table(table, path)
    loaded = load_table(path)
    assert loaded.report.numeric_columns == ["unit price", "mass_kg", "big", "y"]
    assert loaded.report.ignored_columns == []
    for name, values in (("unit price", price), ("mass_kg", mass), ("big", wide)):
        got = loaded.frame[name]
        assert got.dtype == np.float64, name
        expected = np.array([np.nan if v is None else float(v) for v in values])
        np.testing.assert_array_equal(got.to_numpy(), expected, err_msg=name)
    data = prepare(loaded.frame, "y", ["unit price", "mass_kg"])
    assert data.rows_dropped == 2 and data.inputs == ("unit price", "mass_kg")
    np.testing.assert_array_equal(data.X[:, 0], [12.5, -0.01, 99999999.99])
    assert data.X[1, 1] == float(D("2.5"))


def test_parquet_with_infinite_value(tmp_path):
    path = tmp_path / "inf.parquet"
    pd.DataFrame({"x": [1.0, 2.0], "y": [0.0, -np.inf]}).to_parquet(path, index=False)
    with pytest.raises(InputProblem) as info:
        load_table(path)
    assert (info.value.code, info.value.column, info.value.row) == ("infinite", "y", 2)


def test_format_is_recognised_from_content_without_extension(tmp_path):
    frame = pd.DataFrame({"x": [1.0, 2.0], "y": [3.0, 4.0]})
    frame.to_excel(tmp_path / "a.xlsx", index=False)
    frame.to_parquet(tmp_path / "a.parquet", index=False)
    as_xlsx = load_table((tmp_path / "a.xlsx").read_bytes())
    as_parquet = load_table((tmp_path / "a.parquet").read_bytes())
    as_text = load_table(_csv("x,y\n1,3\n2,4\n"))
    assert [t.report.file_format for t in (as_xlsx, as_parquet, as_text)] == [
        "xlsx", "parquet", "csv"]
    for t in (as_xlsx, as_parquet, as_text):
        assert t.frame["y"].tolist() == [3.0, 4.0]
        assert t.report.source_name == "uploaded data"


def test_workbook_named_csv_is_read_as_workbook(tmp_path):
    pd.DataFrame({"x": [1.0, 2.0], "y": [3.0, 4.0]}).to_excel(tmp_path / "a.xlsx", index=False)
    table = load_table((tmp_path / "a.xlsx").read_bytes(), name="a.csv")
    assert table.report.file_format == "xlsx"
    assert any("Excel workbook" in n for n in table.report.notes)


def test_too_large_from_every_kind_of_source(tmp_path):
    raw = _csv("x,y\n" + "1,2\n" * 50)
    path = tmp_path / "big.csv"
    path.write_bytes(raw)
    for source in (path, raw, io.BytesIO(raw)):
        with pytest.raises(InputProblem) as info:
            load_table(source, name="big.csv", max_bytes=100)
        assert info.value.code == "too_large"
        assert "the limit is 100 bytes" in info.value.message
        assert f"{len(raw)} bytes" in info.value.message
    assert DEFAULT_MAX_BYTES == 200 * 1024 * 1024


def test_bad_sources():
    with pytest.raises(InputProblem) as info:
        load_table(12345)
    assert info.value.code == "bad_source"
    with pytest.raises(InputProblem) as info:
        load_table(io.StringIO("x,y\n1,2\n"))
    assert info.value.code == "bad_source" and "binary" in info.value.message
    with pytest.raises(InputProblem) as info:
        load_table(Path("/no/such/dir/data.csv"))
    assert info.value.code == "not_found"


# ---------------------------------------------------------------------------
# prepare
# ---------------------------------------------------------------------------

def _frame_with_known_gaps() -> pd.DataFrame:
    nan = np.nan
    return pd.DataFrame({
        "y":     [1.0, nan, 3.0, 4.0, nan, 6.0, 7.0, 8.0, 9.0, 10.0],
        "a":     [1.0, nan, nan, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 10.0],
        "b":     [2.0, 1.0, 0.0, nan, 1.0, 2.0, nan, 5.0, 3.0, 1.0],
        "group": ["g1", "g1", "g2", "g2", "g3", "", "g3", None, "g4", "g4"],
        "unused": [nan] * 10,
    })


def test_prepare_counts_dropped_rows_per_column():
    data = prepare(_frame_with_known_gaps(), "y", ["a", "b"], group_column="group")
    assert isinstance(data, PreparedData)
    # row 1: y and a missing -> y; row 4: y -> y; row 2: a; rows 3, 6: b;
    # row 5: blank group; row 7: missing group
    assert data.drop_counts == {"y": 2, "a": 1, "b": 2, "group": 2}
    assert data.rows_in == 10
    assert data.rows_dropped == 7
    assert data.n_rows == 3
    assert data.row_index.tolist() == [0, 8, 9]
    np.testing.assert_array_equal(data.y, [1.0, 9.0, 10.0])
    np.testing.assert_array_equal(data.X, [[1.0, 2.0], [9.0, 3.0], [10.0, 1.0]])
    assert data.X.dtype == np.float64 and data.X.shape == (3, 2)
    assert data.groups.tolist() == ["g1", "g4", "g4"]
    assert data.inputs == ("a", "b") and data.target == "y"


def test_prepare_ignores_gaps_in_columns_not_chosen():
    data = prepare(_frame_with_known_gaps(), "a", ["y"])
    # a is missing in rows 1 and 2, y in rows 1 and 4: row 1 counts under a (chosen first)
    assert data.drop_counts == {"a": 2, "y": 1}
    assert data.rows_dropped == 3 and data.n_rows == 7


def test_prepare_sorts_by_order_column_and_keeps_row_positions():
    frame = pd.DataFrame({"t": [3.0, 1.0, np.nan, 2.0, 1.0, 0.5],
                          "x": [30.0, 10.0, 99.0, 20.0, 11.0, 5.0],
                          "y": [300.0, 100.0, 990.0, 200.0, 110.0, 50.0]})
    data = prepare(frame, "y", ["x"], order_column="t")
    assert data.row_index.tolist() == [5, 1, 4, 3, 0]  # ties keep their original order
    np.testing.assert_array_equal(data.order, [0.5, 1.0, 1.0, 2.0, 3.0])
    np.testing.assert_array_equal(data.y, frame["y"].to_numpy()[data.row_index])
    np.testing.assert_array_equal(data.X[:, 0], frame["x"].to_numpy()[data.row_index])
    assert data.drop_counts == {"t": 1}


def test_prepare_order_column_of_dates():
    frame = pd.DataFrame({"when": ["2024-01-01 00:00:10", "2024-01-01 00:00:00", "",
                                   "2024-01-01 00:01:00"],
                          "x": [1.0, 2.0, 3.0, 4.0], "y": [1.0, 4.0, 9.0, 16.0]})
    data = prepare(frame, "y", ["x"], order_column="when")
    assert data.row_index.tolist() == [1, 0, 3]
    assert np.diff(data.order).tolist() == [10.0, 50.0]
    assert data.order[0] == pd.Timestamp("2024-01-01").timestamp()
    assert data.drop_counts == {"when": 1}


def test_prepare_split_column_and_shared_columns():
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0], "y": [1.0, 2.0, 2.0, 5.0],
                          "fold": ["train", "test", np.nan, "train"]})
    data = prepare(frame, "y", "x", split_column="fold", order_column="x")
    assert data.split.tolist() == ["train", "test", "train"]
    assert data.inputs == ("x",)
    assert data.drop_counts == {"fold": 1}


def test_prepare_rejects_infinite_values_with_row():
    frame = pd.DataFrame({"x": [1.0, 2.0, np.inf], "y": [1.0, 2.0, 3.0]})
    with pytest.raises(InputProblem) as info:
        prepare(frame, "y", ["x"])
    assert (info.value.code, info.value.column, info.value.row) == ("infinite", "x", 3)


def test_prepare_notes_a_constant_input():
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0], "k": [7.0, 7.0, 7.0], "y": [1.0, 3.0, 2.0]})
    data = prepare(frame, "y", ["x", "k"])
    assert any("'k'" in n and "same value" in n for n in data.notes)


@pytest.mark.parametrize("target, inputs, kwargs, code", [
    ("nope", ["x"], {}, "unknown_column"),
    ("y", ["nope"], {}, "unknown_column"),
    ("y", ["x"], {"group_column": "nope"}, "unknown_column"),
    ("y", [], {}, "no_inputs"),
    ("y", ["x", "x"], {}, "duplicate_input"),
    ("y", ["y"], {}, "target_is_input"),
    ("site", ["x"], {}, "non_numeric_target"),
    ("y", ["flag"], {}, "non_numeric_input"),
    ("y", ["x"], {"order_column": "site"}, "bad_order_column"),
])
def test_prepare_rejects_bad_requests(target, inputs, kwargs, code):
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0], "y": [1.0, 3.0, 2.0],
                          "site": ["a", "b", "c"], "flag": [True, False, True]})
    with pytest.raises(InputProblem) as info:
        prepare(frame, target, inputs, **kwargs)
    assert info.value.code == code
    if code == "unknown_column":
        assert "'x', 'y'" in info.value.message  # the numeric columns are listed


def test_prepare_on_loaded_table():
    raw = _csv("time,x,y,site\n2,1,2,a\n1,2,,b\n0,3,6,c\n3,4,8,\n")
    table = load_table(raw, name="a.csv")
    data = prepare(table.frame, "y", ["x"], order_column="time", group_column="site")
    assert data.row_index.tolist() == [2, 0]
    assert data.drop_counts == {"y": 1, "site": 1}


# ---------------------------------------------------------------------------
# Properties
# ---------------------------------------------------------------------------

_cells = st.one_of(st.floats(min_value=-1e6, max_value=1e6, allow_nan=False), st.just(np.nan))


@st.composite
def _frames_and_choices(draw):
    n_rows = draw(st.integers(min_value=0, max_value=12))
    n_cols = draw(st.integers(min_value=2, max_value=5))
    names = [f"c{j}" for j in range(n_cols)]
    frame = pd.DataFrame({name: draw(st.lists(_cells, min_size=n_rows, max_size=n_rows))
                          for name in names})
    target = draw(st.sampled_from(names))
    others = [n for n in names if n != target]
    inputs = draw(st.lists(st.sampled_from(others), min_size=1, max_size=len(others),
                           unique=True))
    order = draw(st.one_of(st.none(), st.sampled_from(names)))
    group = draw(st.one_of(st.none(), st.sampled_from(names)))
    return frame, target, inputs, order, group


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_frames_and_choices())
def test_prepare_property(case):
    frame, target, inputs, order, group = case
    try:
        data = prepare(frame, target, inputs, order_column=order, group_column=group)
    except InputProblem:
        return
    assert data.rows_dropped + data.n_rows == data.rows_in == len(frame)
    assert sum(data.drop_counts.values()) == data.rows_dropped
    assert data.X.shape == (data.n_rows, len(inputs))
    assert np.isfinite(data.X).all() and np.isfinite(data.y).all()
    assert len(set(data.row_index.tolist())) == data.n_rows
    np.testing.assert_array_equal(data.y, frame[target].to_numpy()[data.row_index])
    if order is not None:
        assert np.all(np.diff(data.order) >= 0)


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(raw=st.binary(max_size=400),
       name=st.sampled_from([None, "a.csv", "a.xlsx", "a.parquet", "a.tsv", "a"]))
def test_load_table_random_bytes_raise_only_input_problem(raw, name):
    try:
        table = load_table(raw, name=name)
    except InputProblem as problem:
        assert problem.code in ERROR_CODES
        return
    assert table.report.numeric_columns
    assert table.report.size_bytes == len(raw)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(text=st.text(alphabet=st.sampled_from(list("0123456789.,;|\t\n\r -eEinfaNx\"'")),
                    max_size=200),
       decimal=st.sampled_from([None, ","]))
def test_load_table_random_text_raises_only_input_problem(text, decimal):
    try:
        table = load_table(text.encode("utf-8"), name="a.csv", decimal=decimal)
    except InputProblem as problem:
        assert problem.code in ERROR_CODES
        return
    frame = table.frame
    for col in table.report.numeric_columns:
        values = frame[col].to_numpy(dtype=float)
        assert not np.isinf(values).any()
    assert table.report.rows_read == len(frame) > 0


def test_drops_say_empty_apart_from_not_a_number():
    # "1,204.50" among plain numbers: a thousands separator, not a number to this reader
    rows = ["x,y"] + [f"{i},{2 * i + 1}" for i in range(12)]
    rows[4] = '3,"1,204.50"'
    rows[6] = "5,"
    rows[7] = "6,NA"
    table = load_table(_csv("\n".join(rows) + "\n"), name="a.csv")
    data = prepare(table.frame, "y", ["x"])
    assert data.rows_dropped == 3 and data.drop_counts == {"y": 3}
    assert data.drop_reasons == {"y": {"empty": 2, "not a number": 1}}
    assert data.drop_examples == {"y": "1,204.50"}
    text = describe_drops(data)
    assert text == ("3 of 12 rows dropped: 2 with 'y' empty; 1 with 'y' not a number "
                    "(first: '1,204.50').")
    # a slice of the frame keeps the labels of the unparsable cells
    part = prepare(table.frame.iloc[4:], "y", ["x"])
    assert part.drop_reasons == {"y": {"empty": 2, "not a number": 0}}
    assert describe_drops(prepare(table.frame.iloc[:3], "y", ["x"])) == ""


def _prepared_fields(data: PreparedData) -> dict:
    return {k: (v.tolist() if isinstance(v, np.ndarray) else v)
            for k, v in vars(data).items() if k != "factors"}


@pytest.mark.parametrize("roles", [{}, {"group_column": "g"}, {"split_column": "s"}])
def test_prepare_of_a_complete_table_equals_the_counting_route(roles, monkeypatch):
    """With nothing missing, the columns are copied straight into the arrays; every
    field equals what the route that counts missing cells gives."""
    import engine.loading as L

    rng = np.random.default_rng(3)
    n = 40_000   # several blocks of rows
    frame = pd.DataFrame({
        "x": rng.normal(size=n), "k": rng.integers(-5, 5, n),            # float64, int64
        "f": pd.array(rng.normal(size=n), dtype="Float64"),               # nullable floats
        "c": np.full(n, 2.5),                                             # constant input
        "level": rng.choice(["lo", "hi"], n),                             # text -> indicator
        "g": rng.choice(["a", "b", "c"], n), "s": rng.integers(0, 3, n),
        "y": rng.normal(size=n)})
    direct = prepare(frame, "y", ["x", "k", "f", "c", "level"], **roles)
    monkeypatch.setattr(L, "_complete_columns", lambda *a, **k: None)
    counted = prepare(frame, "y", ["x", "k", "f", "c", "level"], **roles)
    assert _prepared_fields(direct) == _prepared_fields(counted)
    assert direct.X.dtype == np.float64 and direct.X.flags.c_contiguous
    assert direct.row_index.dtype == counted.row_index.dtype == np.int64
    assert any("same value (2.5)" in note for note in direct.notes)
    # the arrays are the table's numbers (numpy), and not the table's own memory
    np.testing.assert_array_equal(direct.X[:, 0], frame["x"].to_numpy())
    np.testing.assert_array_equal(direct.y, frame["y"].to_numpy())
    assert not np.shares_memory(direct.y, frame["y"].to_numpy())
    assert not np.shares_memory(direct.X, frame["x"].to_numpy())


def test_prepare_of_a_complete_table_refuses_the_same_way():
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0], "y": [4.0, 4.0, 4.0]})
    with pytest.raises(InputProblem) as exc:
        prepare(frame, "y", ["x"])
    assert exc.value.code == "constant_target"
    with pytest.raises(InputProblem) as exc:
        prepare(pd.DataFrame({"x": [1.0], "y": [2.0]}), "y", ["x"])
    assert exc.value.code == "too_few_rows"
    with pytest.raises(InputProblem) as exc:
        prepare(pd.DataFrame({"x": [], "y": []}, dtype=float), "y", ["x"])
    assert exc.value.code == "no_rows"
