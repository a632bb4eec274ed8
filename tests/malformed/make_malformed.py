"""Write the corpus of malformed data files and their expected outcomes.

Every file is malformed in one clear way. The content is fixed in this script
(no clocks, no unseeded randomness), so running it again gives byte-identical
files; ``tests/test_loading.py`` checks that. Run from anywhere:

    python tests/malformed/make_malformed.py

``expected.json`` maps each file name to:

* ``code``: the `InputProblem` code the engine must raise;
* ``message``: text (or list of texts) the message must contain;
* ``column`` / ``row`` (optional): the column and 1-based data row the problem
  must name;
* ``load`` (optional): keyword arguments for ``load_table``;
* ``prepare`` (optional): arguments for ``prepare`` for files that load
  cleanly but cannot be used as asked.
* ``args`` (optional): command-line options for ``fitladder run FILE`` (the
  whole-run test in tests/test_hostile_input.py);
* ``stage`` (optional): ``"run"`` for requests refused only by a run (the
  request budget), which ``load_table``/``prepare`` alone accept.

Every message must name the cause (``message``) and say what to do (checked in
the tests by an instruction verb opening a clause).
"""
from __future__ import annotations

import bz2
import gzip
import json
import lzma
import random
import sys
import zipfile
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent

_FIXED_TIME = (2024, 1, 1, 0, 0, 0)
_MAIN_NS = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
_REL_NS = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
_PKG_REL_NS = "http://schemas.openxmlformats.org/package/2006/relationships"


def _zip(entries: list[tuple[str, str | bytes]]) -> bytes:
    """A zip archive with fixed timestamps, so the bytes never change."""
    import io

    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        for name, data in entries:
            info = zipfile.ZipInfo(name, date_time=_FIXED_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            zf.writestr(info, data.encode("utf-8") if isinstance(data, str) else data)
    return buf.getvalue()


def _cell(ref: str, value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, (int, float)):
        return f'<c r="{ref}"><v>{value}</v></c>'
    text = str(value).replace("&", "&amp;").replace("<", "&lt;")
    return f'<c r="{ref}" t="inlineStr"><is><t>{text}</t></is></c>'


def minimal_xlsx(rows: list[list[Any]], sheet_name: str = "Sheet1") -> bytes:
    """A small but valid workbook with one sheet holding ``rows``."""
    letters = "ABCDEFGHIJKLMNOPQRSTUVWXYZ"
    xml_rows = []
    for i, row in enumerate(rows, start=1):
        cells = "".join(_cell(f"{letters[j]}{i}", v) for j, v in enumerate(row))
        xml_rows.append(f'<row r="{i}">{cells}</row>')
    head = '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
    sheet = (f'{head}<worksheet xmlns="{_MAIN_NS}"><sheetData>'
             f'{"".join(xml_rows)}</sheetData></worksheet>')
    workbook = (f'{head}<workbook xmlns="{_MAIN_NS}" xmlns:r="{_REL_NS}"><sheets>'
                f'<sheet name="{sheet_name}" sheetId="1" r:id="rId1"/></sheets></workbook>')
    workbook_rels = (f'{head}<Relationships xmlns="{_PKG_REL_NS}"><Relationship Id="rId1" '
                     f'Type="{_REL_NS}/worksheet" Target="worksheets/sheet1.xml"/>'
                     '</Relationships>')
    root_rels = (f'{head}<Relationships xmlns="{_PKG_REL_NS}"><Relationship Id="rId1" '
                 f'Type="{_REL_NS}/officeDocument" Target="xl/workbook.xml"/></Relationships>')
    ct = "application/vnd.openxmlformats-officedocument.spreadsheetml"
    content_types = (
        f'{head}<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
        '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.'
        'relationships+xml"/><Default Extension="xml" ContentType="application/xml"/>'
        f'<Override PartName="/xl/workbook.xml" ContentType="{ct}.sheet.main+xml"/>'
        f'<Override PartName="/xl/worksheets/sheet1.xml" ContentType="{ct}.worksheet+xml"/>'
        '</Types>')
    return _zip([
        ("[Content_Types].xml", content_types),
        ("_rels/.rels", root_rels),
        ("xl/workbook.xml", workbook),
        ("xl/_rels/workbook.xml.rels", workbook_rels),
        ("xl/worksheets/sheet1.xml", sheet),
    ])


def _lines(*lines: str) -> bytes:
    return ("\n".join(lines) + "\n").encode("utf-8")


def corpus() -> dict[str, tuple[bytes, dict[str, Any]]]:
    """File name -> (content, expected outcome)."""
    good_rows = [["x", "y"], [1, 2.1], [2, 3.9], [3, 6.2]]
    rng = random.Random(20240101)
    garbage = bytes(rng.randrange(256) for _ in range(600))
    # high bytes and control bytes, but no NUL: not UTF-8, and not plausible text
    control_mix = bytes(rng.choice(list(range(1, 9)) + list(range(14, 32)) + list(range(128, 256)))
                        for _ in range(400))
    xlsx = minimal_xlsx(good_rows)

    files: dict[str, tuple[bytes, dict[str, Any]]] = {
        # --- nothing to read -------------------------------------------------
        "empty.csv": (b"", {"code": "empty", "message": "0 bytes"}),
        "whitespace_only.csv": (b"   \n\t \r\n  \n\n", {"code": "empty", "message": "blank space"}),
        "bom_only.csv": (b"\xef\xbb\xbf", {"code": "empty", "message": "blank space"}),
        "header_only.csv": (_lines("temperature,reading"),
                            {"code": "no_rows", "message": "no data rows"}),
        "blank_data_rows.csv": (_lines("x,y", ",", " , "),
                                {"code": "no_rows", "message": "every data cell is empty"}),
        "no_numeric.csv": (_lines("operator,site,shift", "ana,north,early", "ben,south,late",
                                  "cai,north,late"),
                           {"code": "no_numeric", "message": "no column of numbers"}),
        # --- names -----------------------------------------------------------
        "duplicate_columns.csv": (_lines("time,voltage,current,voltage", "0,1.0,0.1,1.1",
                                         "1,1.2,0.2,1.3"),
                                  {"code": "duplicate_columns", "message": "'voltage'",
                                   "column": "voltage"}),
        "duplicate_columns_padded.csv": (_lines("x, y,y ", "1,2,3", "4,5,6"),
                                         {"code": "duplicate_columns", "message": "'y'",
                                          "column": "y"}),
        # --- infinite values -------------------------------------------------
        "inf_values.csv": (_lines("x,y", "1,2", "2,4", "3,inf", "4,8"),
                           {"code": "infinite", "message": "data row 3", "column": "y", "row": 3}),
        "neg_inf_values.tsv": (_lines("x\ty", "1\t2", "-Infinity\t4", "3\t6"),
                               {"code": "infinite", "message": "'x'", "column": "x", "row": 2}),
        "overflow_values.csv": (_lines("x,y", "1,2", "2,1e999"),
                                {"code": "infinite", "message": "'y'", "column": "y", "row": 2}),
        # --- not text --------------------------------------------------------
        "binary_garbage.csv": (garbage, {"code": "undecodable",
                                         "message": "does not look like a text table"}),
        "nul_bytes.csv": (b"x,y\n1,2\n\x00\x00\x003,4\n",
                          {"code": "undecodable", "message": "NUL bytes"}),
        "utf16_no_bom.csv": ("x,y\n1,2\n3,4\n".encode("utf-16-le"),
                             {"code": "undecodable", "message": "UTF-16"}),
        "control_chars.csv": (control_mix, {"code": "undecodable",
                                            "message": "does not look like a text table"}),
        # --- broken workbooks and Parquet ------------------------------------
        "truncated.xlsx": (xlsx[:100], {"code": "unreadable",
                                        "message": "not a valid Excel workbook"}),
        "fake.xlsx": (_lines("x,y", "1,2", "3,4"),
                      {"code": "unreadable", "message": "not a valid Excel workbook"}),
        "not_a_workbook.xlsx": (_zip([("readme.txt", "this archive holds no workbook\n")]),
                                {"code": "unreadable",
                                 "message": "could not be opened as an Excel workbook"}),
        "empty_sheet.xlsx": (minimal_xlsx([]), {"code": "empty", "message": "is empty"}),
        "duplicate_columns.xlsx": (minimal_xlsx([["x", "y", "x"], [1, 2, 3], [4, 5, 6]]),
                                   {"code": "duplicate_columns", "message": "'x'",
                                    "column": "x"}),
        "header_only.xlsx": (minimal_xlsx([["x", "y"]]),
                             {"code": "no_rows", "message": "no data rows"}),
        "corrupt.parquet": (b"PAR1" + bytes(rng.randrange(256) for _ in range(200)) + b"PAR1",
                            {"code": "unreadable", "message": "could not be read as Parquet"}),
        "bad_magic.parquet": (b"PAX9" + bytes(rng.randrange(256) for _ in range(120)),
                              {"code": "unreadable", "message": "not a valid Parquet file"}),
        # --- rows that do not line up ----------------------------------------
        "ragged_rows.csv": (_lines("x,y,z", "1,2,3", "4,5,6", "7,8,9,10", "11,12,13"),
                            {"code": "malformed_rows", "message": "line 4", "row": 4}),
        "trailing_delimiter_rows.csv": (_lines("x,y", "1,2,", "3,4,", "5,6,"),
                                        {"code": "malformed_rows",
                                         "message": "line 2 of 'trailing_delimiter_rows.csv' "
                                                    "has 3 fields but the header row has 2",
                                         "row": 2}),
        "unclosed_quote.csv": (_lines("x,y,label", "1,2,a", '3,4,"b', "5,6,c", "7,8,d"),
                               {"code": "malformed_rows", "message": "never closed", "row": 3}),
        # --- wrong kind of file ----------------------------------------------
        "report.pdf": (b"%PDF-1.4\n1 0 obj\n<< /Type /Catalog >>\nendobj\n%%EOF\n",
                       {"code": "unsupported_format", "message": "'.pdf'"}),
        "notes.docx": (_zip([("word/document.xml", "<document/>")]),
                       {"code": "unsupported_format", "message": "'.docx'"}),
        "legacy.xls": (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + bytes(56),
                       {"code": "unsupported_format", "message": "save it as .xlsx or CSV"}),
        # --- decimal mark ----------------------------------------------------
        "decimal_comma_not_chosen.csv": (_lines("x;y", "1,5;2,25", "2,5;6,25", "3,5;12,25"),
                                         {"code": "no_numeric", "message": "decimal ','"}),
        "decimal_point_with_comma_chosen.csv": (
            _lines("x;y", "1.5;2.25", "2.5;6.25", "3.5;12.25"),
            {"code": "no_numeric", "message": "decimal '.'", "load": {"decimal": ","}}),
        # --- loads, but cannot be used as asked ------------------------------
        "all_missing_target.csv": (_lines("x,y", "1,", "2,", "3,NA", "4,"),
                                   {"code": "no_rows", "message": "'y' is missing in 4 of 4",
                                    "column": "y",
                                    "prepare": {"target": "y", "inputs": ["x"]}}),
        "constant_target.csv": (_lines("x,y", "1,5", "2,5", "3,5", "4,5"),
                                {"code": "constant_target", "message": "same value",
                                 "column": "y", "prepare": {"target": "y", "inputs": ["x"]}}),
        "text_target.csv": (_lines("x,y", "1,low", "2,low", "3,high", "4,high"),
                            {"code": "non_numeric_target", "message": "'y'", "column": "y",
                             "row": 1, "prepare": {"target": "y", "inputs": ["x"]}}),
        "text_input.csv": (_lines("site,y", "north,1.5", "south,2.5", "east,3.0"),
                           {"code": "non_numeric_input", "message": "'site'", "column": "site",
                            "prepare": {"target": "y", "inputs": ["site"]}}),
        "misspelled_target.csv": (_lines("load,yeild", "1,2", "2,4", "3,5"),
                                  {"code": "unknown_column", "message": ["'yield'", "'yeild'"],
                                   "column": "yield",
                                   "prepare": {"target": "yield", "inputs": ["load"]}}),
        "bad_order_column.csv": (_lines("time,x,y", "2024-01-01 00:00,1,2",
                                        "2024-01-01 00:10,2,4", "soon,3,7"),
                                 {"code": "bad_order_column", "message": "data row 3",
                                  "column": "time", "row": 3,
                                  "prepare": {"target": "y", "inputs": ["x"],
                                              "order_column": "time"}}),
        "single_row.csv": (_lines("x,y", "1,2"),
                           {"code": "too_few_rows", "message": "at least 2",
                            "prepare": {"target": "y", "inputs": ["x"]}}),
    }
    files.update(hostile_files(rng))
    return files


def _formula_xlsx(n: int = 50) -> bytes:
    """A workbook whose column y holds formulas without saved results (as libraries write)."""
    rows = ['<row r="1"><c r="A1" t="inlineStr"><is><t>x</t></is></c>'
            '<c r="B1" t="inlineStr"><is><t>y</t></is></c></row>']
    for i in range(2, n + 2):
        rows.append(f'<row r="{i}"><c r="A{i}"><v>{i - 1}</v></c><c r="B{i}"><f>A{i}*2+1</f>'
                    '</c></row>')
    return _sheet_xlsx("".join(rows))


def _sheet_xlsx(sheet_data: str, dimension: str | None = None) -> bytes:
    book = minimal_xlsx([["x"]])
    import io
    src = zipfile.ZipFile(io.BytesIO(book))
    entries = []
    for name in src.namelist():
        data = src.read(name)
        if name == "xl/worksheets/sheet1.xml":
            dim = f'<dimension ref="{dimension}"/>' if dimension else ""
            data = (f'<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
                    f'<worksheet xmlns="{_MAIN_NS}">{dim}<sheetData>{sheet_data}</sheetData>'
                    '</worksheet>').encode("utf-8")
        entries.append((name, data))
    return _zip(entries)


def _parquet(columns: dict[str, Any]) -> bytes:
    import io

    import pyarrow as pa
    import pyarrow.parquet as pq
    buf = io.BytesIO()
    pq.write_table(pa.table(columns), buf, compression="none")
    return buf.getvalue()


def hostile_files(rng: random.Random) -> dict[str, tuple[bytes, dict[str, Any]]]:
    """Files that are other kinds of data, or that trap memory, time or precision."""
    import decimal
    small = _lines("x,y", "1,2.1", "2,3.9", "3,6.2")
    html = (b"<!DOCTYPE html>\n<html><head><title>Export</title></head><body><table>"
            b"<tr><th>x</th><th>y</th></tr><tr><td>1</td><td>2</td></tr></table></body></html>\n")
    jp_rows = ["\u6e29\u5ea6,\u5de5\u7a0b"] + [f"{i},\u30e9\u30a4\u30f3{i % 3}" for i in range(40)]
    wide = ["c" + str(j) for j in range(2000)]
    wide_rows = [",".join(wide + ["y"])] + [",".join(str((i * 7 + j) % 13) for j in range(2001))
                                            for i in range(5)]
    inter = ["c" + str(j) for j in range(150)]
    inter_rows = [",".join(inter + ["y"])] + [",".join(f"{rng.random():.2f}" for _ in range(151))
                                              for _ in range(30)]
    big = 2 ** 62
    return {
        # --- other kinds of file named like a table, recognised by their bytes ----------
        "gzip_named.csv": (gzip.compress(small, mtime=0),
                           {"code": "unsupported_format", "message": "gzip-compressed"}),
        "bzip2_named.csv": (bz2.compress(small),
                            {"code": "unsupported_format", "message": "compressed data"}),
        "xz_named.csv": (lzma.compress(small), {"code": "unsupported_format",
                                                 "message": "compressed data"}),
        "zip_named.csv": (_zip([("data.csv", small), ("readme.txt", "two tables\n")]),
                          {"code": "unsupported_format", "message": ["zip archive", "'data.csv'"]}),
        "zip_named.txt": (_zip([("inner/results.csv", small)]),
                          {"code": "unsupported_format", "message": "zip archive"}),
        "web_page.csv": (html, {"code": "unsupported_format", "message": "web page (HTML)"}),
        "web_page.tsv": (b"  \n<html><body><p>Not found</p></body></html>",
                         {"code": "unsupported_format", "message": "web page (HTML)"}),
        "records.csv": (b'[{"x": 1, "y": 2}, {"x": 2, "y": 4}]\n',
                        {"code": "unsupported_format", "message": "holds JSON"}),
        "object.txt": (b'{"x": [1, 2, 3], "y": [2, 4, 6]}',
                       {"code": "unsupported_format", "message": "holds JSON"}),
        "report_named.csv": (b"%PDF-1.7\n%\xe2\xe3\xcf\xd3\n1 0 obj\n<<>>\nendobj\n",
                             {"code": "unsupported_format", "message": "a PDF document"}),
        "picture_named.csv": (b"\x89PNG\r\n\x1a\n" + bytes(40),
                              {"code": "unsupported_format", "message": "a PNG image"}),
        "photo_named.csv": (b"\xff\xd8\xff\xe0" + bytes(40),
                            {"code": "unsupported_format", "message": "a JPEG image"}),
        "old_excel_named.csv": (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + bytes(120),
                                {"code": "unsupported_format", "message": "old-style Office"}),
        "database_named.csv": (b"SQLite format 3\x00" + bytes(100),
                               {"code": "unsupported_format", "message": "an SQLite database"}),
        "zstd_named.csv": (b"\x28\xb5\x2f\xfd" + bytes(30),
                           {"code": "unsupported_format", "message": "compressed data"}),
        "sevenzip_named.csv": (b"7z\xbc\xaf\x27\x1c" + bytes(30),
                               {"code": "unsupported_format", "message": "compressed data"}),
        "gzip_no_extension": (gzip.compress(small, mtime=0),
                              {"code": "unsupported_format", "message": "gzip-compressed"}),
        "web_page_no_extension": (html, {"code": "unsupported_format",
                                         "message": "web page (HTML)"}),
        "bzip2_no_extension": (bz2.compress(small),
                               {"code": "unsupported_format", "message": "compressed data"}),
        # --- encodings: names read right, so the message quotes them right ---------------
        "shift_jis_text_target.csv": (
            ("\n".join(jp_rows) + "\n").encode("shift_jis"),
            {"code": "non_numeric_target", "message": "'\u5de5\u7a0b'", "column": "\u5de5\u7a0b",
             "prepare": {"target": "\u5de5\u7a0b", "inputs": ["\u6e29\u5ea6"]}}),
        # --- kinds of values that are not numbers ------------------------------------------
        "dates_as_input.csv": (_lines("when,y", "2024-01-01,1.5", "2024-01-02,2.5",
                                      "2024-01-03,3.1", "2024-01-04,4.4"),
                               {"code": "non_numeric_input", "message": "dates or times",
                                "column": "when",
                                "prepare": {"target": "y", "inputs": ["when"]}}),
        "booleans_as_input.csv": (_lines("valve_open,y", "true,1.5", "false,2.5", "TRUE,3.1",
                                         "false,4.4"),
                                  {"code": "non_numeric_input", "message": "true/false values",
                                   "column": "valve_open",
                                   "prepare": {"target": "y", "inputs": ["valve_open"]}}),
        "table_fragment.txt": (b"<table><tr><th>x</th><th>y</th></tr><tr><td>1</td><td>2</td>"
                               b"</tr></table>\n",
                               {"code": "unsupported_format", "message": "web page (HTML)"}),
        "dates_as_target.csv": (_lines("x,when", "1,2024-03-01 10:00", "2,2024-03-01 11:00",
                                       "3,2024-03-01 12:30"),
                                {"code": "non_numeric_target", "message": "dates or times",
                                 "column": "when",
                                 "prepare": {"target": "when", "inputs": ["x"]}}),
        "formula_without_values.xlsx": (_formula_xlsx(),
                                        {"code": "formulas_without_values",
                                         "message": "formulas whose results were not saved",
                                         "column": "y",
                                         "prepare": {"target": "y", "inputs": ["x"]}}),
        "whole_numbers_near_2_63.parquet": (
            _parquet({"x": [1, 2, 3, 4], "y": [big, big + 1, big + 2, big + 3]}),
            {"code": "precision_lost", "message": "beyond 2^53", "column": "y"}),
        "decimal_target_constant.parquet": (
            _parquet({"x": [1.0, 2.0, 3.0],
                      "y": [decimal.Decimal("2.50"), decimal.Decimal("2.50"),
                            decimal.Decimal("2.50")]}),
            {"code": "constant_target", "message": "same value (2.5)",
             "prepare": {"target": "y", "inputs": ["x"]}}),
        "long_text_cell.csv": (
            ("note,y\n" + "x" * 1_000_000 + ",1\nshort,2\nshort,3\n").encode("ascii"),
            {"code": "non_numeric_target", "message": "'note'",
             "prepare": {"target": "note", "inputs": ["y"]}}),
        # --- sizes: refused before anything large is allocated -----------------------------
        "huge_declared_sheet.xlsx": (
            _sheet_xlsx('<row r="1"><c r="A1" t="inlineStr"><is><t>x</t></is></c>'
                        '<c r="B1" t="inlineStr"><is><t>y</t></is></c></row>',
                        dimension="A1:XFD1048576"),
            {"code": "no_rows", "message": "no data rows"}),
        "sparse_far_cell.xlsx": (
            _sheet_xlsx('<row r="1"><c r="A1" t="inlineStr"><is><t>x</t></is></c></row>'
                        + "".join(f'<row r="{r}"><c r="XFD{r}"><v>1</v></c></row>'
                                  for r in range(2, 1400))),
            {"code": "too_large", "message": "more than 20,000,000 cells"}),
        "two_thousand_columns.csv": (("\n".join(wide_rows) + "\n").encode("ascii"),
                                     {"code": "too_many_terms", "message": "terms at order",
                                      "stage": "run", "args": ["--target", "y"]}),
        "interactions_blow_up.csv": (("\n".join(inter_rows) + "\n").encode("ascii"),
                                     {"code": "too_many_terms", "message": "with interactions",
                                      "stage": "run", "args": ["--target", "y", "--max-order",
                                                               "4", "--interactions"]}),
        "many_repeats.csv": (small + _lines(*[f"{i},{i * 1.9:.1f}" for i in range(4, 40)])[4:],
                             {"code": "too_slow", "message": "longer than allowed",
                              "stage": "run",
                              "args": ["--target", "y", "--scheme", "repeated", "--repeats",
                                       "200000", "--time-limit", "30"]}),
        "many_penalties_memory.csv": (
            ("\n".join(inter_rows[:12]) + "\n").encode("ascii"),
            {"code": "too_much_memory", "message": "more memory than allowed", "stage": "run",
             "args": ["--target", "y", "--max-order", "1", "--memory-limit", "100"]}),
    }


def write(dest: Path) -> list[Path]:
    """Write every corpus file and ``expected.json`` into ``dest``."""
    dest.mkdir(parents=True, exist_ok=True)
    written = []
    expected: dict[str, Any] = {}
    for name, (content, outcome) in sorted(corpus().items()):
        path = dest / name
        path.write_bytes(content)
        written.append(path)
        expected[name] = outcome
    exp_path = dest / "expected.json"
    exp_path.write_text(json.dumps(expected, indent=2, sort_keys=True, ensure_ascii=True) + "\n",
                        encoding="utf-8")
    written.append(exp_path)
    return written


def main(argv: list[str]) -> int:
    dest = Path(argv[1]) if len(argv) > 1 else HERE
    paths = write(dest)
    print(f"wrote {len(paths)} files to {dest}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
