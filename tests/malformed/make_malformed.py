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
"""
from __future__ import annotations

import json
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
    return files


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
