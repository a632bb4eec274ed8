"""Reading a user's table and preparing the chosen columns for a sweep.

`load_table` turns a file (path, raw bytes or an uploaded file object) into a
`pandas.DataFrame` plus a `LoadReport` that says what was read and what was
set aside. `prepare` picks the target and input columns out of such a frame,
drops rows with missing values (and counts them), and returns plain arrays.

Every problem a user can fix is raised as `InputProblem` with a ``code`` (see
``ERROR_CODES``); no other exception leaves these two functions for bad input.
This is the only module of the engine that reads files.
"""
from __future__ import annotations

import csv
import decimal
import io
import mmap
import os
import re
import unicodedata
import time
import warnings
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, BinaryIO, Iterable, Union

import numpy as np
import pandas as pd

from .errors import InputProblem
from .fingerprint import digest_alongside

__all__ = [
    "DEFAULT_MAX_BYTES",
    "NO_SIZE_LIMIT",
    "ERROR_CODES",
    "LoadReport",
    "LoadedTable",
    "PreparedData",
    "describe_drops",
    "load_table",
    "peek_table",
    "prepare",
]

DEFAULT_MAX_BYTES = 200 * 1024 * 1024
#: ``max_bytes`` meaning "no size limit" (the command line reading the user's own files).
NO_SIZE_LIMIT = 1 << 62

#: Codes `load_table` and `prepare` put on the `InputProblem` they raise.
ERROR_CODES = (
    "bad_source", "not_found", "too_large", "empty", "undecodable",
    "unsupported_format", "unreadable", "unknown_sheet", "malformed_rows",
    "duplicate_columns", "no_rows", "no_numeric", "infinite", "bad_decimal",
    "no_inputs", "duplicate_input", "target_is_input", "unknown_column",
    "non_numeric_target", "non_numeric_input", "bad_order_column",
    "constant_target", "too_few_rows", "formulas_without_values", "precision_lost",
)

Source = Union[str, os.PathLike, bytes, bytearray, memoryview, BinaryIO]

_TEXT_EXTENSIONS = frozenset({".csv", ".tsv", ".txt", ".tab", ".dat", ".psv"})
_XLSX_EXTENSIONS = frozenset({".xlsx", ".xlsm"})
_PARQUET_EXTENSIONS = frozenset({".parquet", ".pq"})
_SUPPORTED_TEXT = "CSV/TSV text (.csv, .tsv, .txt), Excel (.xlsx) or Parquet (.parquet)"

_ZIP_MAGIC = b"PK\x03\x04"
_PARQUET_MAGIC = b"PAR1"

_DELIMITERS = (",", ";", "\t", "|")
_DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}

#: Cell texts read as "no value" (compared after trimming, ignoring case).
_MISSING_TOKENS = frozenset({"", "na", "n/a", "nan", "null", "none", "#n/a", "missing"})

#: Share of filled cells that must be numbers for a column to count as numeric.
NUMERIC_SHARE = 0.9

#: Key of ``DataFrame.attrs`` under which loading lists cells that were not numbers.
UNPARSABLE_ATTR = "fitladder_unparsable"
#: Key of ``DataFrame.attrs`` listing workbook columns of formulas without saved results.
FORMULA_ATTR = "fitladder_formulas"

_COMMA_NUMBER = re.compile(r"^[+-]?\d+,\d+(?:[eE][+-]?\d+)?$")
_DOT_NUMBER = re.compile(r"^[+-]?\d*\.\d+(?:[eE][+-]?\d+)?$")


# ---------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------

@dataclass
class LoadReport:
    """What `load_table` read, and what it set aside.

    Attributes
    ----------
    source_name : file name shown to the user.
    file_format : ``'csv'`` (any delimited text), ``'xlsx'`` or ``'parquet'``.
    delimiter : field delimiter of a text file; ``None`` for workbooks, Parquet
        and single-column text.
    decimal : decimal mark used to read numbers written as text (``'.'`` or ``','``).
    rows_read : data rows in the table (header excluded).
    columns_read : columns in the table.
    numeric_columns : columns usable as target or inputs, in file order.
    ignored_columns : columns kept in the frame but not usable for modelling.
    ignored_reasons : a short reason for each ignored column.
    sha256 : hex SHA-256 of the raw bytes, to tie results to the exact file (a
        large file's is computed in a thread after the parse; reading it waits).
    size_bytes : size of the raw bytes.
    notes : plain sentences about anything the user should know.
    rows_estimate : for a sample (`peek_table`), the rows of the whole table:
        exact for Parquet, estimated from the sample's bytes per row for text,
        ``None`` when unknown; ``None`` for a whole table.
    """

    source_name: str
    file_format: str
    delimiter: str | None
    decimal: str
    rows_read: int
    columns_read: int
    numeric_columns: list[str]
    ignored_columns: list[str]
    ignored_reasons: dict[str, str]
    sha256: str
    size_bytes: int
    notes: list[str] = field(default_factory=list)
    rows_estimate: int | None = None

    def __getstate__(self) -> dict:
        state = dict(self.__dict__)
        state["_sha256"] = self.sha256   # a digest still being computed: waited for
        return state


def _get_sha256(report: LoadReport) -> str:
    value = report.__dict__["_sha256"]
    if callable(value):   # computed in a thread (`engine.fingerprint.digest_alongside`)
        value = value()
        report.__dict__["_sha256"] = value
    return value


def _set_sha256(report: LoadReport, value) -> None:
    report.__dict__["_sha256"] = value


# ``sha256`` may be given as a function that waits for the digest of a large file,
# computed in a thread while the table is prepared; it is called once, when the
# value is first read (set after the class is made, so that it stays a field).
LoadReport.sha256 = property(_get_sha256, _set_sha256,
                             doc="Hex SHA-256 of the raw bytes (waited for when first read).")


@dataclass
class LoadedTable:
    """A loaded table: the frame and the report on how it was read.

    Attributes
    ----------
    frame : all columns; numeric ones as float64 (cells that were not numbers
        are NaN), others as read.
    report : the `LoadReport`.
    """

    frame: pd.DataFrame
    report: LoadReport


@dataclass
class PreparedData:
    """The chosen columns as arrays, with rows that had missing values removed.

    Attributes
    ----------
    X : float64 array of shape (n, d), one column per input, in ``inputs`` order.
    y : float64 array of shape (n,), the target.
    inputs : names of the input columns.
    target : name of the target column.
    order : float64 order values (seconds for dates and times), or ``None``.
    groups : group labels, or ``None``.
    split : split labels, or ``None``.
    row_index : 0-based position in the original frame of each kept row, in
        the order of the arrays (sorted by the order column when one is given).
    rows_in : rows in the frame before dropping.
    rows_dropped : rows removed because a chosen column was missing.
    drop_counts : rows removed per column; a row is counted under the first
        chosen column (target, inputs, order, group, split) that is missing in
        it. Only columns that caused drops are listed.
    notes : plain sentences about anything the user should know.
    drop_reasons : per column of ``drop_counts``, how many of its rows were
        ``'empty'`` (no value in the file) and how many ``'not a number'``
        (a cell that could not be read as a number, e.g. ``1,204.50``).
    drop_examples : per column, the first cell that was not a number.
    """

    X: np.ndarray
    y: np.ndarray
    inputs: tuple[str, ...]
    target: str
    order: np.ndarray | None
    groups: np.ndarray | None
    split: np.ndarray | None
    row_index: np.ndarray
    rows_in: int
    rows_dropped: int
    drop_counts: dict[str, int]
    notes: list[str] = field(default_factory=list)
    drop_reasons: dict[str, dict[str, int]] = field(default_factory=dict)
    drop_examples: dict[str, str] = field(default_factory=dict)
    factors: dict = field(default_factory=dict)  # text input -> engine.categorical.Factor

    @property
    def n_rows(self) -> int:
        """Number of rows kept."""
        return int(self.y.shape[0])


# ---------------------------------------------------------------------------
# Small helpers
# ---------------------------------------------------------------------------

def _human_size(n: int) -> str:
    if n < 1024:
        return f"{n} bytes"
    if n < 1024 * 1024:
        return f"{n / 1024:.1f} KB"
    return f"{n / (1024 * 1024):.1f} MB"


def _quote_list(names: Iterable[str], limit: int = 12) -> str:
    names = list(names)
    shown = ", ".join(f"'{n}'" for n in names[:limit])
    if len(names) > limit:
        shown += f" and {len(names) - limit} more"
    return shown or "(none)"


def _plain_list(names: Iterable[str], limit: int = 12) -> str:
    names = list(names)
    shown = ", ".join(str(n) for n in names[:limit])
    if len(names) > limit:
        shown += f" and {len(names) - limit} more"
    return shown


def _plural(n: int, word: str, many: str | None = None) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {many or word + 's'}"


def _short(value: Any, limit: int = 30) -> str:
    text = str(value)
    return text if len(text) <= limit else text[: limit - 1] + "…"


# ---------------------------------------------------------------------------
# Getting the bytes
# ---------------------------------------------------------------------------

def _too_large(name: str, size: int | None, max_bytes: int) -> InputProblem:
    size_text = (f"is {_human_size(size)}" if size is not None
                 else "is more than the limit")
    return InputProblem(
        f"'{name}' {size_text}; the limit is {_human_size(max_bytes)}. "
        "Load a smaller file (for example only the columns or rows you need).",
        code="too_large")


#: Files from this size on are mapped into memory rather than copied into it: the
#: columnar text reader and the fingerprint read the pages the system already
#: holds for the file, and no copy of the whole file is made (see `_map_file`).
MAPPED_MIN_BYTES = 8 << 20
#: A file changed less than this many seconds ago is copied, not mapped (`_map_file`).
MAPPED_QUIET_SECONDS = 10.0


def _map_file(path: Path) -> "mmap.mmap | None":
    """The file mapped read-only into memory; None where mapping is not possible.

    A mapped file is read like bytes by the columnar text reader (`pyarrow`),
    by `hashlib` and by numpy; every other reader gets a copy
    (`_bytes_of`). A copy of a file of hundreds of megabytes costs more than
    the read itself on a machine where fresh memory is slow to hand out.

    A mapping fails hard (the system stops the process) if another program cuts
    the file short while it is read, so a file changed within the last
    `MAPPED_QUIET_SECONDS` (perhaps still being written) is copied instead.
    """
    try:
        if time.time() - path.stat().st_mtime < MAPPED_QUIET_SECONDS:
            return None
        with path.open("rb") as handle:
            return mmap.mmap(handle.fileno(), 0, access=mmap.ACCESS_READ)
    except (OSError, ValueError):
        return None


def _bytes_of(raw: "bytes | mmap.mmap") -> bytes:
    """``raw`` as bytes (a copy of a mapped file)."""
    return raw if isinstance(raw, bytes) else bytes(raw)


def _read_source(source: Source, name: str | None, max_bytes: int
                 ) -> tuple["bytes | mmap.mmap", str]:
    """Return the raw bytes (a large file: mapped, `_map_file`) and the display name."""
    if isinstance(source, (bytes, bytearray, memoryview)):
        display = name or "uploaded data"
        raw = bytes(source)
        if len(raw) > max_bytes:
            raise _too_large(display, len(raw), max_bytes)
        return raw, display

    if isinstance(source, (str, os.PathLike)):
        path = Path(source)
        display = name or path.name or str(path)
        try:
            if not path.is_file():
                raise InputProblem(
                    f"No file found at '{path}'. Check the path and the file name.",
                    code="not_found")
            size = path.stat().st_size
            if size > max_bytes:
                raise _too_large(display, size, max_bytes)
            if size >= MAPPED_MIN_BYTES:
                mapped = _map_file(path)
                if mapped is not None:
                    return mapped, display
            with path.open("rb") as handle:
                raw = handle.read(min(size, max_bytes) + 1)
        except InputProblem:
            raise
        except (OSError, ValueError) as exc:
            raise InputProblem(
                f"Could not open '{display}': {exc}. Check that the file exists and can be read.",
                code="not_found") from None
        if len(raw) > max_bytes:
            raise _too_large(display, None, max_bytes)
        return raw, display

    reader = getattr(source, "read", None)
    if reader is None:
        raise InputProblem(
            f"Cannot read data from a {type(source).__name__}; give a file path, "
            "the file's bytes or an open binary file.", code="bad_source")
    attr_name = getattr(source, "name", None)
    display = name or (os.path.basename(str(attr_name)) if attr_name else "uploaded data")
    try:
        size = getattr(source, "size", None)
        if hasattr(source, "seek"):
            try:
                source.seek(0)
                if not isinstance(size, int):
                    source.seek(0, io.SEEK_END)
                    size = source.tell()
                    source.seek(0)
            except (OSError, ValueError, AttributeError):
                pass
        if isinstance(size, int) and size > max_bytes:
            raise _too_large(display, size, max_bytes)
        raw = reader(max_bytes + 1)
    except InputProblem:
        raise
    except Exception as exc:  # any failure of a foreign file object
        raise InputProblem(f"Could not read '{display}': {exc}.", code="unreadable") from None
    if isinstance(raw, str):
        raise InputProblem(
            f"'{display}' was opened as text; open it in binary mode ('rb') or pass its bytes.",
            code="bad_source")
    if not isinstance(raw, (bytes, bytearray, memoryview)):
        raise InputProblem(f"Reading '{display}' did not give bytes.", code="bad_source")
    raw = bytes(raw)
    if len(raw) > max_bytes:
        raise _too_large(display, None, max_bytes)
    return raw, display


_OTHER_KINDS = (
    (b"%PDF-", "a PDF document",
     "Export the table from the program that made the PDF as CSV or .xlsx, and load that."),
    (b"\x89PNG\r\n\x1a\n", "a PNG image", "Load the data file the picture was made from."),
    (b"\xff\xd8\xff", "a JPEG image", "Load the data file the picture was made from."),
    (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1", "an old-style Office file (.xls or .doc)",
     "Open it in your spreadsheet program and save it as .xlsx or CSV."),
    (b"SQLite format 3\x00", "an SQLite database",
     "Export the table you need as CSV (for example with the sqlite3 tool) and load that."),
)

_HTML_START = (b"<!doctype html", b"<html", b"<table", b"<head", b"<body", b"<?xml")


def _refuse_other_kinds(raw: bytes, display: str) -> None:
    """Recognise compressed files, archives, web pages and JSON by their bytes."""
    if raw.startswith(b"\x1f\x8b"):
        raise InputProblem(
            f"'{display}' is gzip-compressed data, not plain text. Decompress it first (for "
            "example 'gunzip' or your archive tool) and load the file inside.",
            code="unsupported_format")
    if raw.startswith((b"BZh", b"\xfd7zXZ\x00", b"\x28\xb5\x2f\xfd", b"7z\xbc\xaf")):
        raise InputProblem(
            f"'{display}' is compressed data (bzip2, xz, zstd or 7-Zip), not plain text. "
            "Decompress it first and load the file inside.", code="unsupported_format")
    for magic, what, fix in _OTHER_KINDS:
        if raw.startswith(magic):
            raise InputProblem(f"'{display}' is {what}, not a text table. {fix}",
                               code="unsupported_format")
    if raw.startswith(_ZIP_MAGIC):
        try:
            names = zipfile.ZipFile(io.BytesIO(raw)).namelist()
        except (zipfile.BadZipFile, OSError, ValueError):
            names = None
        if names is not None and "xl/workbook.xml" not in names:
            shown = ", ".join(repr(n) for n in names[:3]) + (" ..." if len(names) > 3 else "")
            raise InputProblem(
                f"'{display}' is a zip archive ({_plural(len(names), 'file')}: {shown}), not "
                "a table. Unzip it and load the table inside.", code="unsupported_format")
    head = raw[:4096].lstrip(b"\xef\xbb\xbf \t\r\n").lower()
    if head.startswith(_HTML_START) and (b"<html" in head or b"<table" in head
                                         or b"<body" in head or b"<head" in head):
        raise InputProblem(
            f"'{display}' is a web page (HTML), not a table file. Save or export the table as "
            "CSV (or .xlsx) from where it came, and load that.", code="unsupported_format")
    if head[:1] in (b"{", b"[") and len(raw) <= 50 * 1024 * 1024:
        try:
            import json
            json.loads(raw.decode("utf-8-sig"))
        except (ValueError, UnicodeDecodeError, RecursionError):
            return
        raise InputProblem(
            f"'{display}' holds JSON, not a table of rows and columns. Convert it to CSV "
            "(for example pandas.read_json(...).to_csv(...)) and load that.",
            code="unsupported_format")


def _choose_format(raw: bytes, display: str) -> tuple[str, list[str]]:
    """Pick 'csv', 'xlsx' or 'parquet' from the name, or the content when no extension."""
    notes: list[str] = []
    ext = Path(display).suffix.lower()
    magic_format = ("xlsx" if raw.startswith(_ZIP_MAGIC)
                    else "parquet" if raw.startswith(_PARQUET_MAGIC) else None)
    if ext in _XLSX_EXTENSIONS:
        return "xlsx", notes
    if ext in _PARQUET_EXTENSIONS:
        return "parquet", notes
    if ext in _TEXT_EXTENSIONS or ext == "" or ext[1:].isdigit():
        _refuse_other_kinds(raw, display)
        if magic_format is not None:
            if ext:
                label = "an Excel workbook" if magic_format == "xlsx" else "Parquet data"
                notes.append(f"'{display}' is named like a text file but holds {label}; "
                             "it was read as such.")
            return magic_format, notes
        return "csv", notes
    if ext == ".xls":
        raise InputProblem(
            f"'{display}' is an old-style Excel file (.xls), which is not supported. "
            "Open it in your spreadsheet program and save it as .xlsx or CSV.",
            code="unsupported_format")
    raise InputProblem(
        f"'{display}' has the extension '{ext}', which is not a supported table format. "
        f"Save the data as {_SUPPORTED_TEXT}.", code="unsupported_format")


# ---------------------------------------------------------------------------
# Text decoding and delimiter detection
# ---------------------------------------------------------------------------

def _control_share(text: str) -> float:
    """Share of characters that are control or unassigned (tab, CR, LF, FF excepted)."""
    if not text:
        return 0.0
    sample = text[:200_000]
    bad = 0
    for ch in sample:
        if ch in "\t\r\n\x0c\x1a":
            continue
        if unicodedata.category(ch) in ("Cc", "Cs", "Co", "Cn"):
            bad += 1
    return bad / len(sample)


def _not_text(display: str, detail: str) -> InputProblem:
    return InputProblem(
        f"'{display}' does not look like a text table: {detail}. If it is a spreadsheet, "
        "give it the .xlsx extension; otherwise export the data as CSV in UTF-8.",
        code="undecodable")


def _detect_encoding(raw: bytes) -> tuple[str, str] | None:
    """(text, encoding name) for text in a non-Western encoding (charset-normalizer).

    Western text is left to the Windows-1252 reading: it is tried first and kept
    unless most of its non-ASCII characters come from bytes 0x80-0x9F, the lead
    bytes of Shift-JIS, GBK and similar double-byte encodings (rare in Western text).
    """
    try:
        western = raw.decode("cp1252")
    except UnicodeDecodeError:
        western = None
    if western is not None:
        high = [b for b in raw[:200_000] if b >= 0x80]
        if not high or sum(1 for b in high if b < 0xA0) < 0.3 * len(high):
            return None
    try:
        from charset_normalizer import from_bytes
    except ImportError:  # pragma: no cover - listed in requirements.txt
        return None
    best = from_bytes(raw[:1_000_000]).best()
    if best is None or best.encoding in ("ascii", "utf_8", "cp1252", "latin_1"):
        return None
    try:
        text = raw.decode(best.encoding)
    except (UnicodeDecodeError, LookupError):
        return None
    names = {"cp932": "Shift-JIS (cp932)", "shift_jis": "Shift-JIS", "euc_jp": "EUC-JP",
             "gb18030": "GB18030", "gbk": "GBK", "big5": "Big5", "euc_kr": "EUC-KR",
             "cp949": "EUC-KR (cp949)", "cp1251": "Windows-1251", "koi8_r": "KOI8-R"}
    return text, names.get(best.encoding, best.encoding)


def _decode(raw: bytes, display: str) -> tuple[str, list[str]]:
    """Decode text bytes; raise InputProblem('undecodable') for binary content."""
    notes: list[str] = []
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            text = raw.decode("utf-16")
        except UnicodeDecodeError:
            raise _not_text(display, "it starts like UTF-16 text but does not decode as such") from None
        notes.append(f"'{display}' was read as UTF-16 text.")
    else:
        if b"\x00" in raw:
            raise _not_text(display, "it contains NUL bytes (binary data, or text saved "
                                     "as UTF-16 without a byte-order mark)")
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError:
            text = ""
            detected = _detect_encoding(raw)
            if detected is not None:
                text, label = detected
                notes.append(f"'{display}' is not UTF-8; it was read as {label} text (the "
                             "encoding was detected; if names look wrong, save the file as "
                             "UTF-8).")
            for encoding, label in (() if text else (("cp1252", "Windows-1252"),
                                                     ("latin-1", "Latin-1"))):
                try:
                    candidate = raw.decode(encoding)
                except UnicodeDecodeError:
                    continue
                non_ascii = sum(1 for ch in candidate[:200_000] if ord(ch) > 127)
                if (_control_share(candidate) <= 0.001
                        and non_ascii <= 0.3 * max(1, min(len(candidate), 200_000))):
                    text = candidate
                    notes.append(f"'{display}' is not UTF-8; it was read as {label} text.")
                    break
            if not text:
                raise _not_text(display, "its bytes are neither UTF-8 nor Windows-1252 text") from None
    if "\x00" in text or _control_share(text) > 0.001:
        raise _not_text(display, "it contains control characters that do not belong in text")
    return text, notes


def _sample(text: str, limit: int = 65536) -> str:
    if len(text) <= limit:
        return text
    sample = text[:limit]
    cut = sample.rfind("\n")
    return sample[:cut] if cut > 0 else sample  # the last line may be cut off


def _field_counts(sample: str, delimiter: str, limit: int = 50) -> list[int]:
    """Fields per non-blank record of ``sample`` (quotes respected), for the first records."""
    counts: list[int] = []
    try:
        for record in csv.reader(io.StringIO(sample), delimiter=delimiter, quotechar='"',
                                 skipinitialspace=True):
            if record and any(f.strip() for f in record):
                counts.append(len(record))
                if len(counts) >= limit:
                    break
    except csv.Error:
        pass
    return counts


def _consistent(counts: list[int]) -> bool:
    if not counts or counts[0] < 2:
        return False
    agree = sum(1 for c in counts if c == counts[0])
    return agree >= 0.8 * len(counts)


def _detect_delimiter(text: str, decimal: str) -> str | None:
    """Find the field delimiter; ``None`` when the text has a single column.

    The standard library's sniffer is asked first; its answer is kept only if
    the header and most records then have the same number of fields (at least
    two). Otherwise each candidate is scored by how many records agree with the
    header's field count, then by that count.
    """
    candidates = (";", "\t") if decimal == "," else _DELIMITERS
    sample = _sample(text)
    counts = {d: _field_counts(sample, d) for d in candidates}
    try:
        sniffed = csv.Sniffer().sniff(sample, delimiters="".join(candidates)).delimiter
    except Exception:  # the sniffer gives up in several ways
        sniffed = None
    if sniffed in counts and _consistent(counts[sniffed]):
        return sniffed
    best: tuple[float, int] | None = None
    chosen: str | None = None
    for delim in candidates:
        found = counts[delim]
        if not found or found[0] < 2:
            continue
        agree = sum(1 for c in found if c == found[0]) / len(found)
        score = (agree, found[0])
        if best is None or score > best:
            best, chosen = score, delim
    return chosen


# ---------------------------------------------------------------------------
# Column names
# ---------------------------------------------------------------------------

def _clean_names(raw_names: list[Any], display: str) -> tuple[list[str], list[str]]:
    """Trim names, refuse duplicates, rename blank ones; return (names, notes)."""
    names = ["" if (v is None or (isinstance(v, float) and np.isnan(v))) else str(v).strip()
             for v in raw_names]
    seen: dict[str, int] = {}
    dupes: list[str] = []
    for n in names:
        if n:
            seen[n] = seen.get(n, 0) + 1
            if seen[n] == 2:
                dupes.append(n)
    if dupes:
        raise InputProblem(
            f"'{display}' has more than one column named {_quote_list(dupes)}. "
            "Give every column a different name in the header row and load the file again.",
            code="duplicate_columns", column=dupes[0])
    taken = set(names)
    renamed: list[str] = []
    for i, n in enumerate(names):
        if not n:
            new = f"column_{i + 1}"
            k = 2
            while new in taken:
                new = f"column_{i + 1}_{k}"
                k += 1
            names[i] = new
            taken.add(new)
            renamed.append(new)
    notes = []
    if renamed:
        notes.append(f"{_plural(len(renamed), 'column')} had no name and "
                     f"{'was' if len(renamed) == 1 else 'were'} named by position: "
                     f"{_plain_list(renamed)}.")
    return names, notes


# ---------------------------------------------------------------------------
# Numbers in cells
# ---------------------------------------------------------------------------

def _is_real_number(v: Any) -> bool:
    return (isinstance(v, (int, float, np.integer, np.floating, decimal.Decimal))
            and not isinstance(v, (bool, np.bool_)))


def _parse_text_numbers(texts: pd.Series, decimal: str) -> tuple[np.ndarray, np.ndarray]:
    """Parse strings (NaN allowed) as numbers; return (values, present)."""
    stripped = texts.astype("string").str.strip()
    present = ~(stripped.isna() | stripped.str.lower().isin(_MISSING_TOKENS))
    present_np = present.to_numpy(dtype=bool, na_value=False)
    if decimal == ",":
        usable = present & ~stripped.str.contains(".", regex=False).fillna(False).astype(bool)
        candidate = stripped.str.replace(",", ".", regex=False).where(usable)
    else:
        candidate = stripped.where(present)
    values = pd.to_numeric(candidate.astype(object), errors="coerce")
    values_np = np.array(values, dtype="float64", copy=True)
    values_np[~present_np] = np.nan
    return values_np, present_np


class _PrecisionLost(ValueError):
    pass


def _check_integer_precision(series: pd.Series, values: np.ndarray) -> None:
    """Refuse whole numbers that differ but become equal as 64-bit floats (beyond 2^53)."""
    finite = values[np.isfinite(values)]
    if not finite.size or np.max(np.abs(finite)) < 2.0 ** 53:
        return
    ints = series.dropna().to_numpy()
    if len(np.unique(ints)) != len(np.unique(values[~np.isnan(values)])):
        raise _PrecisionLost(str(series.name))


def _classify_values(series: pd.Series, decimal: str
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray, str]:
    """Return (values, present, parsed, kind); kind is 'number', 'text', 'datetime' or 'bool'."""
    dtype = series.dtype
    n = len(series)
    if pd.api.types.is_bool_dtype(dtype):
        present = series.notna().to_numpy(dtype=bool)
        return np.full(n, np.nan), present, np.zeros(n, dtype=bool), "bool"
    if (pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_complex_dtype(dtype)):
        if dtype == np.float64:   # already float64 (the columnar reader): no second copy
            values = np.asarray(series.to_numpy(dtype="float64", copy=False))
        else:
            values = np.array(series.to_numpy(dtype="float64", na_value=np.nan), copy=True)
        if pd.api.types.is_integer_dtype(dtype):
            _check_integer_precision(series, values)
        present = ~np.isnan(values)
        return values, present, present.copy(), "number"
    if pd.api.types.is_datetime64_any_dtype(dtype) or pd.api.types.is_timedelta64_dtype(dtype):
        present = series.notna().to_numpy(dtype=bool)
        return np.full(n, np.nan), present, np.zeros(n, dtype=bool), "datetime"
    if pd.api.types.is_string_dtype(dtype) and not pd.api.types.is_object_dtype(dtype):
        values, present = _parse_text_numbers(series, decimal)
        return values, present, ~np.isnan(values), "text"
    # object columns: a mix of numbers, strings, dates, booleans, None
    obj = series.to_numpy(dtype=object)
    values = np.full(n, np.nan)
    present = np.zeros(n, dtype=bool)
    is_str = np.zeros(n, dtype=bool)
    dates = 0
    bools = 0
    for i, v in enumerate(obj):
        if v is None or (isinstance(v, float) and np.isnan(v)) or v is pd.NA or v is pd.NaT:
            continue
        if isinstance(v, str):
            is_str[i] = True
        elif _is_real_number(v):
            values[i] = float(v)
            present[i] = True
        else:
            present[i] = True
            if isinstance(v, (bool, np.bool_)):
                bools += 1
            elif hasattr(v, "year") or hasattr(v, "hour"):
                dates += 1
    if is_str.any():
        text_vals, text_present = _parse_text_numbers(pd.Series(obj[is_str], dtype=object), decimal)
        values[is_str] = text_vals
        present[is_str] = text_present
    parsed = present & ~np.isnan(values)
    n_present = int(present.sum())
    kind = "text"
    if n_present and dates == n_present:
        kind = "datetime"
    elif n_present and bools == n_present:
        kind = "bool"
    return values, present, parsed, kind


def _decimal_hint(series: pd.Series, present: np.ndarray, decimal: str) -> str | None:
    texts = pd.Series(series.to_numpy(dtype=object)[present]).map(
        lambda v: v.strip() if isinstance(v, str) else "")
    if texts.empty:
        return None
    if decimal == "." and texts.str.match(_COMMA_NUMBER).mean() >= NUMERIC_SHARE:
        return "its values look like numbers with a decimal comma; load the file with decimal ','"
    if decimal == "," and texts.str.match(_DOT_NUMBER).mean() >= NUMERIC_SHARE:
        return "its values look like numbers with a decimal point; load the file with decimal '.'"
    return None


def _mostly_numbers(n_parsed: int, n_present: int) -> bool:
    """At least ``NUMERIC_SHARE`` of the filled cells are numbers (exact for 90%)."""
    return n_parsed * 10 >= n_present * round(NUMERIC_SHARE * 10)


_BOOL_WORDS = frozenset({"true", "false", "yes", "no", "y", "n", "t", "f"})


def _looks_boolean(series: pd.Series, present: np.ndarray, sample: int = 200) -> bool:
    """Whether the first filled cells are all true/false words (or Python booleans)."""
    values = series.to_numpy(dtype=object)[present][:sample]
    if not len(values):
        return False
    return all(isinstance(v, (bool, np.bool_))
               or (isinstance(v, str) and v.strip().lower() in _BOOL_WORDS) for v in values)


def _looks_like_dates(series: pd.Series, present: np.ndarray, sample: int = 50) -> bool:
    """Whether the first filled cells of a text column all read as dates or times.

    Cells longer than 64 characters are never dates: they are not parsed at all
    (date parsing of a long text cell costs seconds).
    """
    values = pd.Series(series.to_numpy(dtype=object)[present][:sample])
    if values.empty or not all(isinstance(v, str) and len(v) <= 64 for v in values):
        return False
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            parsed = pd.to_datetime(values, errors="coerce", format="mixed")
    except (ValueError, TypeError, OverflowError):
        return False
    return bool(parsed.notna().all())


def _build_columns(raw: pd.DataFrame, decimal: str, display: str
                   ) -> tuple[pd.DataFrame, list[str], list[str], dict[str, str], list[str]]:
    """Turn raw cells into the final frame; return (frame, numeric, ignored, reasons, notes)."""
    out: dict[str, Any] = {}
    numeric: list[str] = []
    ignored: list[str] = []
    reasons: dict[str, str] = {}
    notes: list[str] = []
    unparsable: dict[str, list[int]] = {}
    unparsable_first: dict[str, str] = {}
    for col in raw.columns:
        series = raw[col]
        try:
            values, present, parsed, kind = _classify_values(series, decimal)
        except _PrecisionLost:
            raise InputProblem(
                f"Column '{col}' in '{display}' holds whole numbers beyond 2^53 "
                "(9,007,199,254,740,992) that differ from each other but become equal as "
                "floating-point numbers, so their differences would be lost. Subtract a "
                "common offset (or divide by a unit) in the file, or leave the column out, "
                "and load it again.", code="precision_lost", column=str(col)) from None
        n_present = int(present.sum())
        n_parsed = int(parsed.sum())
        if n_present == 0:
            out[col] = np.full(len(series), np.nan)
            ignored.append(col)
            reasons[col] = "no values"
            notes.append(f"Column '{col}' has no values.")
            continue
        if kind == "number" or (kind == "text" and _mostly_numbers(n_parsed, n_present)):
            inf_rows = np.flatnonzero(np.isinf(values))
            if inf_rows.size:
                row = int(inf_rows[0]) + 1
                raise InputProblem(
                    f"Column '{col}' in '{display}' holds an infinite value at data row {row} "
                    f"({_plural(int(inf_rows.size), 'infinite cell')} in all). Replace infinite "
                    "values with real numbers, or leave those cells empty, and load the file again.",
                    code="infinite", column=col, row=row)
            stray = np.flatnonzero(present & ~parsed)
            if stray.size:
                unparsable[col] = [int(i) for i in stray]  # JSON-ready (shown frames carry attrs)
                first = int(stray[0])
                unparsable_first[col] = _short(series.iloc[first])
                notes.append(
                    f"Column '{col}': {_plural(int(stray.size), 'cell was', 'cells were')} not "
                    f"a number and {'is' if stray.size == 1 else 'are'} treated as missing "
                    f"(first at data row {first + 1}: '{_short(series.iloc[first])}').")
            out[col] = values
            numeric.append(col)
            continue
        ignored.append(col)
        if kind == "datetime":
            reasons[col] = "dates or times"
        elif kind == "bool":
            reasons[col] = "true/false values"
        elif n_parsed == 0:
            reasons[col] = (_decimal_hint(series, present, decimal)
                            or ("dates or times" if _looks_like_dates(series, present) else "text"))
        else:
            pct = int(100 * n_parsed / n_present)
            reasons[col] = (_decimal_hint(series, present, decimal)
                            or f"only {pct}% of its {n_present} filled cells are numbers "
                               f"({int(NUMERIC_SHARE * 100)}% needed)")
        kept = series.copy()
        if kind == "text":
            kept = kept.where(present)  # blank and missing-marker cells become missing
        out[col] = kept.reset_index(drop=True)
    frame = pd.DataFrame(out, index=pd.RangeIndex(len(raw)), copy=False)  # no second copy
    # which cells were set to missing because they were not numbers (row labels), so
    # that `prepare` can say why it drops a row
    frame.attrs[UNPARSABLE_ATTR] = {"rows": unparsable, "first": unparsable_first}
    if ignored:
        notes.append(f"{_plural(len(ignored), 'column')} without usable numbers "
                     f"ignored for modelling: {_plain_list(ignored)}.")
    return frame, numeric, ignored, reasons, notes


# ---------------------------------------------------------------------------
# Format readers (each returns raw cells with clean names)
# ---------------------------------------------------------------------------

_FIELDS_RE = re.compile(r"Expected (\d+) fields in line (\d+), saw (\d+)")
_ROW_RE = re.compile(r"row (\d+)")


def _na_tokens() -> list[str]:
    """Spellings of the missing-value markers that pandas should read as missing."""
    tokens: set[str] = set()
    for tok in _MISSING_TOKENS:
        tokens.update({tok, tok.upper(), tok.capitalize()})
    return sorted(tokens)


def _rows_out_of_line(display: str, sep: str, line: int | None, what: str) -> InputProblem:
    delim_name = _DELIMITER_NAMES.get(sep, repr(sep))
    return InputProblem(
        f"The rows do not line up: {what}. The file was read with the {delim_name} as "
        "delimiter. Fix that line (remove extra delimiters, quote text that contains one, "
        "or give the extra column a name in the header row) and load the file again.",
        code="malformed_rows", row=line)


def _split_header(text: str, sep: str, display: str) -> tuple[list[str], int]:
    """The header record (first non-blank one) and the number of lines up to its end."""
    reader = csv.reader(io.StringIO(text), delimiter=sep, quotechar='"',
                        skipinitialspace=True)
    try:
        for record in reader:
            if record and any(f.strip() for f in record):
                return record, reader.line_num
    except csv.Error as exc:
        raise _rows_out_of_line(display, sep, reader.line_num,
                                f"the header row could not be read ({exc})") from None
    return [], reader.line_num


def _chosen_positions(names: list[str], wanted: Iterable[str] | None) -> list[int] | None:
    """Positions of the ``wanted`` names in ``names`` (file order); None to read every column.

    Every column is read when nothing is chosen or a chosen name is not among
    ``names`` (so that the messages about it see the whole table).
    """
    if wanted is None:
        return None
    wanted = set(wanted)
    if not wanted or not wanted.issubset(names) or len(wanted) >= len(names):
        return None   # (every column chosen: the whole reading, without a note)
    return [i for i, n in enumerate(names) if n in wanted]


def _fields_line_up(text: str, sep: str) -> bool:
    """Whether no record of ``text`` (header included) has more fields than the header.

    pandas' reader ignores surplus fields when it reads chosen columns only, so
    they are looked for here, by pyarrow's CSV parser, which refuses them.
    """
    import pyarrow as pa
    import pyarrow.csv as pacsv
    try:
        pacsv.read_csv(pa.BufferReader(pa.py_buffer(text.encode("utf-8"))),
                       read_options=pacsv.ReadOptions(autogenerate_column_names=True),
                       parse_options=pacsv.ParseOptions(delimiter=sep, quote_char='"',
                                                        newlines_in_values=True,
                                                        ignore_empty_lines=True),
                       convert_options=pacsv.ConvertOptions(include_columns=["f0"],
                                                            column_types={"f0": pa.string()}))
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, pa.ArrowTypeError, ValueError):
        return False
    return True


def _read_text(raw: bytes, display: str, decimal: str, wanted: Iterable[str] | None = None
               ) -> tuple[pd.DataFrame, str | None, list[str]]:
    text, notes = _decode(raw, display)
    if not text.strip():
        raise InputProblem(f"'{display}' holds only blank space; there is no table in it. Choose the "
                           "file that holds the data.",
                           code="empty")
    text = text.replace("\r\n", "\n").replace("\r", "\n")
    delimiter = _detect_delimiter(text, decimal)
    if delimiter is None:
        sample = text[:65536]
        candidates = (";", "\t") if decimal == "," else _DELIMITERS
        sep = next((d for d in candidates if d not in sample), candidates[0])
    else:
        sep = delimiter

    header, header_lines = _split_header(text, sep, display)
    if not header:
        raise InputProblem(f"'{display}' holds no values, only delimiters and blank space. Choose the "
                           "file that holds the data.",
                           code="empty")
    names, name_notes = _clean_names(header, display)
    notes.extend(name_notes)
    cut = 0
    for _ in range(header_lines):
        nl = text.find("\n", cut)
        if nl < 0:
            cut = len(text)
            break
        cut = nl + 1
    body_text = text[cut:]
    keep = _chosen_positions(names, wanted)
    if keep is not None and not _fields_line_up(text, sep):
        keep = None   # lines that do not match the header: read everything, to name them
    def read_body(usecols):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return pd.read_csv(io.StringIO(body_text), sep=sep, header=None,
                               keep_default_na=False, na_values=_na_tokens(),
                               decimal=decimal, skipinitialspace=True,
                               skip_blank_lines=True, engine="c", quotechar='"',
                               low_memory=False, usecols=usecols)

    body = None
    if keep is not None:
        try:
            body = read_body(keep)
        except Exception:  # noqa: BLE001 - read everything below, with its messages
            body, keep = None, None
    try:
        if body is None:
            body = read_body(None)
    except pd.errors.EmptyDataError:
        body = pd.DataFrame({i: pd.Series([], dtype=float) for i in range(len(names))})
        keep = None
    except pd.errors.ParserError as exc:
        message = str(exc)
        m = _FIELDS_RE.search(message)
        if m:
            _, rel_line, saw = (int(g) for g in m.groups())
            line = header_lines + rel_line
            raise _rows_out_of_line(
                display, sep, line, f"line {line} of '{display}' has {saw} fields but the "
                                    f"header row has {len(names)}") from None
        m = _ROW_RE.search(message)
        if m:
            line = header_lines + int(m.group(1)) + 1
            raise _rows_out_of_line(
                display, sep, line,
                f"a quoted field starting on line {line} of '{display}' is never closed") from None
        raise _rows_out_of_line(
            display, sep, None,
            f"'{display}' could not be split into rows and columns ({message})") from None
    except Exception as exc:  # any other parser failure
        raise InputProblem(f"'{display}' could not be read as a table: {_short(exc, 120)}.",
                           code="unreadable") from None

    header_numbers = pd.to_numeric(pd.Series(names, dtype=object), errors="coerce")
    if len(names) and header_numbers.notna().all():
        notes.append("The first row holds only numbers but was read as column names; "
                     "add a header row if the file has none.")
    if keep is not None:   # the chosen columns only (surplus fields were looked for above)
        body.columns = [names[i] for i in keep]
        notes.append(_not_read_note(len(names) - len(keep)))
        return body.reset_index(drop=True), delimiter, notes
    width = body.shape[1]
    if width > len(names):
        offset = next((i for i, ln in enumerate(body_text.split("\n", 1000)) if ln.strip()), 0)
        line = header_lines + offset + 1
        raise _rows_out_of_line(display, sep, line,
                                f"line {line} of '{display}' has {width} fields but the header "
                                f"row has {len(names)}")
    for extra in range(width, len(names)):
        body[extra] = np.nan
    body.columns = names
    return body.reset_index(drop=True), delimiter, notes


#: Text files from this size on are first tried with pyarrow's columnar CSV reader.
COLUMNAR_MIN_BYTES = 1 << 20


def _not_read_note(n: int) -> str:
    return (f"Only the chosen columns were read; {n:,} other "
            f"{'column was' if n == 1 else 'columns were'} left unread.")


def _count(raw: "bytes | mmap.mmap", what: bytes, block: int = 8 << 20) -> int:
    """Occurrences of the single byte ``what`` in ``raw`` (a mapped file: block by block)."""
    if isinstance(raw, bytes):
        return raw.count(what)
    return sum(raw[i:i + block].count(what) for i in range(0, len(raw), block))


def _control_bytes(raw: "bytes | mmap.mmap", block: int = 1 << 20) -> int:
    """Bytes below 32 other than tab, line feed, form feed, carriage return and 0x1A."""
    data = np.frombuffer(raw, dtype=np.uint8)
    counts = np.zeros(256, dtype=np.int64)
    for i in range(0, data.size, block):   # a block at a time: counting widens each byte
        counts += np.bincount(data[i:i + block], minlength=256)
    return int(counts[:32].sum() - counts[[9, 10, 12, 13, 26]].sum())


def _read_text_columnar(raw: "bytes | mmap.mmap", display: str, decimal: str,
                        wanted: Iterable[str] | None = None
                        ) -> tuple[pd.DataFrame, str | None, list[str]] | None:
    """The common case of a large text table, through pyarrow's CSV reader.

    Used for plain UTF-8 files without a byte order mark, a decimal point, a
    one-line header and the same number of fields on every line; the
    delimiter and the header are found exactly as `_read_text` finds them.
    Columns of numbers come out as float64 in one step; any other column is
    read again as text and classified as `_read_text` would. Returns None
    (the hand-written reader then takes over, with its messages) for anything
    else: a decimal comma, another encoding, ragged rows, quoted line breaks.
    """
    if decimal != "." or len(raw) < COLUMNAR_MIN_BYTES or raw[:3] == b"\xef\xbb\xbf":
        return None
    try:
        import pyarrow as pa
        import pyarrow.csv as pacsv
    except ImportError:  # pragma: no cover - pyarrow is a requirement
        return None
    if raw.find(b'"') >= 0 and _count(raw, b'"') % 2:   # (`find`: fast on a mapped file too)
        return None   # a quote never closed: the other reader names the line
    limit = 65536
    head = raw[:limit]
    while head.count(b"\n") < 2 and len(raw) > limit and limit < (64 << 20):
        limit *= 4   # a very wide header: take it and the line below it
        head = raw[:limit]
    cut = head.rfind(b"\n")
    if b"\x00" in head or cut <= 0:
        return None
    try:
        sample = head[:cut].decode("utf-8")
    except UnicodeDecodeError:
        return None
    if "\r" in sample.replace("\r\n", ""):
        return None
    sample = sample.replace("\r\n", "\n")
    delimiter = _detect_delimiter(sample, decimal)
    if delimiter is None:
        return None
    header, header_lines = _split_header(sample, delimiter, display)
    if not header or header_lines != 1:
        return None
    names, notes = _clean_names(header, display)
    if len(names) != len(header):
        return None
    keys = [f"c{i}" for i in range(len(header))]
    keep = _chosen_positions(names, wanted)
    if keep is not None:   # the parser still checks every line's field count
        keys_read = [keys[i] for i in keep]
        names_read = [names[i] for i in keep]
        notes.append(_not_read_note(len(names) - len(keep)))
    else:
        keys_read, names_read = keys, names
    source = pa.py_buffer(raw)

    def read(types=None, include=None):
        return pacsv.read_csv(
            pa.BufferReader(source),
            read_options=pacsv.ReadOptions(skip_rows=1, column_names=keys),
            parse_options=pacsv.ParseOptions(delimiter=delimiter, quote_char='"',
                                             newlines_in_values=False,
                                             ignore_empty_lines=True),
            convert_options=pacsv.ConvertOptions(
                null_values=_na_tokens(), strings_can_be_null=True,
                quoted_strings_can_be_null=True, column_types=types,
                include_columns=include))

    try:
        table = read(None, None if keep is None else keys_read)
        if any(pa.types.is_boolean(f.type) and table.column(f.name).null_count
               for f in table.schema):
            return None   # true/false with gaps: the other reader keeps them as read_csv does
        other = [k for k, f in zip(keys_read, table.schema)
                 if not (pa.types.is_floating(f.type) or pa.types.is_integer(f.type)
                         or pa.types.is_boolean(f.type))]
        if other:   # dates, true/false, text: as text, classified like the other reader's
            if _control_bytes(raw):   # (NUL included)
                return None   # control characters: the other reader explains them
            text = read({k: pa.string() for k in other}, other)
            for k in other:
                table = table.set_column(keys_read.index(k), k, text.column(k))
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, pa.ArrowTypeError, ValueError):
        return None
    if table.num_rows == 0:
        return None
    columns = {}
    for name, k, f in zip(names_read, keys_read, table.schema):
        col = table.column(k)
        if pa.types.is_floating(f.type) or pa.types.is_integer(f.type):
            columns[name] = col.to_numpy(zero_copy_only=False).astype(float, copy=False)
        elif pa.types.is_boolean(f.type):
            columns[name] = col.to_numpy(zero_copy_only=False).astype(bool)
        else:
            columns[name] = pd.Series(col.to_pylist())   # text dtype as read_csv infers it
    del table
    frame = pd.DataFrame(columns, index=pd.RangeIndex(len(next(iter(columns.values())))),
                         copy=False)
    header_numbers = pd.to_numeric(pd.Series(names, dtype=object), errors="coerce")
    if len(names) and header_numbers.notna().all():
        notes.append("The first row holds only numbers but was read as column names; "
                     "add a header row if the file has none.")
    return frame, delimiter, notes


#: Largest number of cells read from one worksheet.
XLSX_MAX_CELLS = 20_000_000


def _too_many_cells(display: str, sheet: str, cells: int) -> InputProblem:
    return InputProblem(
        f"Sheet '{sheet}' of '{display}' spans more than {XLSX_MAX_CELLS:,} cells (at least "
        f"{cells:,} with its empty ones); reading it would exhaust memory. Save only the rows "
        "and columns you need, as CSV or a smaller sheet, and load that.", code="too_large")


def _formula_columns(raw: bytes, sheet_name: str, names: list[str], empty: list[str],
                     positions: list[int] | None = None) -> list[str]:
    """Of the ``empty`` columns, those whose cells are formulas with no saved result."""
    import openpyxl
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            book = openpyxl.load_workbook(io.BytesIO(raw), read_only=True, data_only=False)
        try:
            ws = book[sheet_name]
            ws.reset_dimensions()
            where = {(positions[names.index(c)] if positions else names.index(c)): c
                     for c in empty}
            found: set[str] = set()
            for i, r in enumerate(ws.iter_rows(values_only=True)):
                if i > 10_000:
                    break
                for j, c in where.items():
                    if j < len(r) and isinstance(r[j], str) and r[j].startswith("="):
                        found.add(c)
        finally:
            book.close()
    except Exception:  # noqa: BLE001 - only a better message is at stake
        return []
    return [c for c in empty if c in found]


def _read_xlsx(raw: bytes, display: str, sheet: str | int | None,
               wanted: Iterable[str] | None = None, max_rows: int | None = None
               ) -> tuple[pd.DataFrame, list[str]]:
    """Cells of one sheet with clean names; only the ``wanted`` columns (when all of
    them are named in the header row), only the first ``max_rows`` data rows (a sample)."""
    try:
        import openpyxl
    except ImportError:  # pragma: no cover - openpyxl is a requirement
        raise InputProblem("Reading Excel files needs the openpyxl package; save the sheet "
                           "as CSV instead.", code="unsupported_format") from None
    notes: list[str] = []
    if not zipfile.is_zipfile(io.BytesIO(raw)):
        raise InputProblem(
            f"'{display}' is not a valid Excel workbook (it is not a zip archive; it may be "
            "cut short or be another kind of file with an .xlsx name). Save it again from "
            "your spreadsheet program, or export it as CSV.", code="unreadable")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            book = openpyxl.load_workbook(io.BytesIO(raw), read_only=True, data_only=True)
    except Exception as exc:
        raise InputProblem(
            f"'{display}' could not be opened as an Excel workbook ({type(exc).__name__}: "
            f"{_short(exc, 120)}). Save it again from your spreadsheet program, or export "
            "it as CSV.", code="unreadable") from None
    try:
        sheets = book.sheetnames
        if not sheets:
            raise InputProblem(f"'{display}' has no worksheets. Save a workbook with the table "
                               "in a sheet, or export it as CSV.", code="empty")
        if sheet is None:
            sheet_name = sheets[0]
        elif isinstance(sheet, int) and not isinstance(sheet, bool):
            if not 0 <= sheet < len(sheets):
                raise InputProblem(
                    f"'{display}' has {_plural(len(sheets), 'sheet')}; sheet number {sheet} "
                    f"does not exist (numbers start at 0). Sheets: {_quote_list(sheets)}.",
                    code="unknown_sheet")
            sheet_name = sheets[sheet]
        elif str(sheet) in sheets:
            sheet_name = str(sheet)
        else:
            raise InputProblem(
                f"'{display}' has no sheet named '{sheet}'. Sheets: {_quote_list(sheets)}.",
                code="unknown_sheet")
        ws = book[sheet_name]
        if not hasattr(ws, "iter_rows"):
            raise InputProblem(f"Sheet '{sheet_name}' of '{display}' is a chart, not a table; "
                               "choose a sheet with data.", code="unknown_sheet")
        declared_rows, declared_cols = ws.max_row or 0, ws.max_column or 0
        if declared_rows * declared_cols > XLSX_MAX_CELLS and hasattr(ws, "reset_dimensions"):
            # the sheet's own size claim is not trusted: read only the cells it holds
            ws.reset_dimensions()
            notes.append(f"Sheet '{sheet_name}' declares {declared_rows:,} rows x "
                         f"{declared_cols:,} columns; only the cells it holds were read.")
        try:
            rows = []
            cells = 0
            keep: list[int] | None = None   # positions of the chosen columns, once known
            seen = -1                       # data rows below the header so far
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                for r in ws.iter_rows(values_only=True):
                    cells += len(r)
                    if cells > XLSX_MAX_CELLS:
                        raise _too_many_cells(display, sheet_name, cells)
                    if keep is not None:
                        rows.append([r[j] if j < len(r) else None for j in keep])
                    else:
                        rows.append(list(r))
                    if seen < 0 and any(not (v is None or (isinstance(v, str)
                                                            and not v.strip())) for v in r):
                        seen = 0   # the header row
                        if max_rows is not None:
                            max_rows = max(1, min(max_rows, SAMPLE_CELLS // max(len(r), 1)))
                        if wanted is not None:
                            header_names = _clean_names(list(r), display)[0]
                            keep = _chosen_positions(header_names, wanted)
                            if keep is not None:
                                rows[-1] = [r[j] for j in keep]
                    elif seen >= 0:
                        seen += 1
                        if max_rows is not None and seen >= max_rows:
                            break
        except InputProblem:
            raise
        except Exception as exc:
            raise InputProblem(
                f"Sheet '{sheet_name}' of '{display}' could not be read "
                f"({type(exc).__name__}: {_short(exc, 120)}). Save the workbook again, or "
                "export the sheet as CSV.", code="unreadable") from None
    finally:
        try:
            book.close()
        except Exception:  # pragma: no cover - closing never matters for the result
            pass

    def blank(v: Any) -> bool:
        return v is None or (isinstance(v, str) and not v.strip())

    def empty_row(r: list[Any]) -> bool:
        return all(blank(v) for v in r)

    first = next((i for i, r in enumerate(rows) if not empty_row(r)), None)
    if first is None:
        raise InputProblem(f"Sheet '{sheet_name}' of '{display}' is empty; choose the sheet "
                           "that holds the table.", code="empty")
    if first:
        notes.append(f"Skipped {_plural(first, 'empty row')} above the header in sheet '{sheet_name}'.")
    rows = rows[first:]
    last = len(rows)
    while last > 1 and empty_row(rows[last - 1]):
        last -= 1
    if last < len(rows):
        notes.append(f"Skipped {_plural(len(rows) - last, 'empty row')} at the end of sheet "
                     f"'{sheet_name}'.")
    rows = rows[:last]
    if keep is not None:
        names = [header_names[j] for j in keep]
        body = pd.DataFrame(rows[1:], columns=names, dtype=object)
        empty = [c for c in names if body[c].isna().all()] if len(body) else []
        if empty:
            body.attrs[FORMULA_ATTR] = _formula_columns(raw, sheet_name, names, empty, keep)
        notes.append(_not_read_note(len(header_names) - len(keep)))
        if sheet is not None or len(sheets) > 1:
            notes.append(f"Read sheet '{sheet_name}' ({len(sheets)} in the workbook).")
        return body, notes
    width = max(len(r) for r in rows)
    if width * len(rows) > XLSX_MAX_CELLS:
        raise _too_many_cells(display, sheet_name, width * len(rows))
    rows = [r + [None] * (width - len(r)) for r in rows]
    # drop columns at the right that have neither a name nor any value
    while width > 1 and all(blank(r[width - 1]) for r in rows):
        width -= 1
    rows = [r[:width] for r in rows]
    names, name_notes = _clean_names(rows[0], display)
    notes.extend(name_notes)
    body = pd.DataFrame(rows[1:], columns=names, dtype=object)
    empty = [c for c in names if body[c].isna().all()] if len(body) else []
    if empty:
        body.attrs[FORMULA_ATTR] = _formula_columns(raw, sheet_name, names, empty)
    if sheet is not None or len(sheets) > 1:
        notes.append(f"Read sheet '{sheet_name}' ({len(sheets)} in the workbook).")
    return body, notes


def _decimals_as_floats(table):
    """Fixed-point (decimal) columns as float64, each value correctly rounded.

    Through the decimal's exact text, which pyarrow parses to the nearest
    float64 (the same value as Python's ``float(Decimal)``); pyarrow's direct
    decimal-to-float cast is off by one unit in the last place for a few values.
    """
    import pyarrow as pa
    for i, f in enumerate(table.schema):
        if pa.types.is_decimal(f.type):
            col = table.column(i).cast(pa.string()).cast(pa.float64())
            table = table.set_column(i, f.name, col)
    return table


def _read_parquet(raw: bytes, display: str, wanted: Iterable[str] | None = None,
                  max_rows: int | None = None) -> tuple[pd.DataFrame, list[str]]:
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:  # pragma: no cover - pyarrow is a requirement
        raise InputProblem("Reading Parquet files needs the pyarrow package; save the data "
                           "as CSV instead.", code="unsupported_format") from None
    if isinstance(raw, Path):   # a sample (`peek_table`): only the pages it needs are read
        raw = pa.OSFile(str(raw))
    elif len(raw) < 12 or not (raw.startswith(_PARQUET_MAGIC) and raw.endswith(_PARQUET_MAGIC)):
        raise InputProblem(
            f"'{display}' is not a valid Parquet file (its first or last bytes are wrong; "
            "it may be cut short or be another kind of file). Write it again, or export "
            "the data as CSV.", code="unreadable")
    try:
        file = pq.ParquetFile(raw if isinstance(raw, pa.NativeFile) else pa.BufferReader(raw))
        all_names = list(file.schema_arrow.names)
        names, notes = _clean_names(all_names, display)
        keep = _chosen_positions(names, wanted) if names else None
        columns = None if keep is None else [all_names[i] for i in keep]
        if max_rows is not None:
            max_rows = max(1, min(max_rows, SAMPLE_CELLS // max(len(names), 1)))
            # a few hundred columns at a time: a row group is decoded whole
            every = columns or all_names
            parts = []
            for start in range(0, len(every), 256):
                part = every[start:start + 256]
                batch = next(file.iter_batches(batch_size=max_rows, columns=part,
                                               use_threads=False), None)
                parts.append(pa.Table.from_batches([batch]) if batch is not None
                             else file.schema_arrow.empty_table().select(part))
            table = pa.Table.from_arrays(
                [c for t in parts for c in t.columns],
                names=[n for t in parts for n in t.column_names]) if parts else \
                file.schema_arrow.empty_table()
        else:
            table = file.read(columns=columns)
    except InputProblem:
        raise
    except Exception as exc:
        raise InputProblem(
            f"'{display}' could not be read as Parquet ({type(exc).__name__}: "
            f"{_short(exc, 120)}). Write it again, or export the data as CSV.",
            code="unreadable") from None
    if not names:
        raise InputProblem(f"'{display}' holds no columns. Write the table again with its "
                           "columns, or export it as CSV.", code="empty")
    if keep is not None:
        notes.append(_not_read_note(len(names) - len(keep)))
        names = [names[i] for i in keep]
    try:
        table = _decimals_as_floats(table)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            frame = table.to_pandas(ignore_metadata=True)
    except Exception as exc:
        raise InputProblem(
            f"The columns of '{display}' could not be converted ({type(exc).__name__}: "
            f"{_short(exc, 120)}). Store plain numbers and text, or export as CSV.",
            code="unreadable") from None
    frame.columns = names
    return frame.reset_index(drop=True), notes


# ---------------------------------------------------------------------------
# Public: load_table
# ---------------------------------------------------------------------------

def load_table(source: Source, *, name: str | None = None, decimal: str | None = None,
               sheet: str | int | None = None,
               max_bytes: int | None = None,
               columns: Iterable[str] | None = None) -> LoadedTable:
    """Read a table from a file, bytes or an uploaded file object.

    Parameters
    ----------
    source : path (str or `os.PathLike`), raw bytes, or a binary file-like
        object with ``read()`` (and optionally ``name``, ``seek``, ``size``).
    name : file name to show and to choose the format by; needed for bytes.
        Without an extension the format is recognised from the content.
    decimal : decimal mark of numbers written as text, ``'.'`` (default) or
        ``','``. With ``','`` the delimiter must be a semicolon or a tab, and
        values containing ``'.'`` are not read as numbers.
    sheet : worksheet name or 0-based number for Excel files; default the first.
    max_bytes : largest size accepted; default `DEFAULT_MAX_BYTES` (the
        browser's upload cap); `NO_SIZE_LIMIT` for none.
    columns : names (as `LoadReport` gives them: trimmed, blank ones named by
        position) of the only columns to materialise, e.g. the target and the
        inputs of a wide table; the header is read first and the other columns'
        cells are never converted (pyarrow ``include_columns``, pandas
        ``usecols``, Parquet column projection, workbook cells dropped per
        row). The frame and the report then hold these columns only, and a
        note says how many were left unread. When a name is not in the
        header, every column is read (so that messages see the whole table).

    Returns
    -------
    LoadedTable
        The frame (numeric columns as float64) and its `LoadReport`.

    Raises
    ------
    InputProblem
        For anything wrong with the file; ``code`` is one of ``ERROR_CODES``.
    """
    if decimal in (None, "."):
        dec = "."
    elif decimal == ",":
        dec = ","
    else:
        raise InputProblem(f"The decimal mark must be '.' or ',' (got {decimal!r}).",
                           code="bad_decimal")
    if max_bytes is None:
        max_bytes = DEFAULT_MAX_BYTES
    try:
        limit = int(max_bytes)
    except (TypeError, ValueError):
        raise InputProblem(f"The size limit must be a whole number of bytes (got {max_bytes!r}).",
                           code="bad_source") from None
    raw, display = _read_source(source, name, limit)
    return _load_raw(raw, display, dec, sheet, columns=columns)


def _load_raw(raw: bytes, display: str, dec: str, sheet: str | int | None, *,
              columns: Iterable[str] | None = None, max_rows: int | None = None,
              digest: str | None = None, file_format: str | None = None,
              columnar: bool = True) -> LoadedTable:
    """`load_table` on bytes already read; ``max_rows`` reads a sample (`peek_table`),
    for which ``raw`` may be the path of a Parquet file (``file_format='parquet'``)."""
    notes: list[str] = []
    if file_format is None:
        if not raw:
            raise InputProblem(f"'{display}' is empty (0 bytes). Choose the file that holds "
                               "the data.", code="empty")
        head = raw
        if isinstance(raw, mmap.mmap):   # a large file, mapped: its kind from its first bytes
            head = raw[:65536]
            bare = head[:4096].lstrip(b"\xef\xbb\xbf \t\r\n")
            if head.startswith((_ZIP_MAGIC, _PARQUET_MAGIC)) or bare[:1] in (b"{", b"["):
                raw = head = bytes(raw)   # archives, JSON: their checks read every byte
        file_format, notes = _choose_format(head, display)
    if columns is not None:
        columns = [str(c) for c in columns]
    sha256 = (lambda: digest) if digest else None
    delimiter: str | None = None
    try:
        if file_format == "csv":
            fast = _read_text_columnar(raw, display, dec, columns) if columnar else None
            cells, delimiter, more = (fast if fast is not None
                                      else _read_text(_bytes_of(raw), display, dec, columns))
        elif file_format == "xlsx":
            cells, more = _read_xlsx(_bytes_of(raw), display, sheet, columns, max_rows)
        else:
            cells, more = _read_parquet(raw if isinstance(raw, Path) else _bytes_of(raw),
                                        display, columns, max_rows)
        # the fingerprint of a large file is taken in a thread from here on, beside the
        # single-threaded work that follows the parse (the parser's threads are done);
        # the report waits for it only when its ``sha256`` is first read
        if sha256 is None:
            sha256 = digest_alongside(raw)
        notes.extend(more)
        frame, numeric, ignored, reasons, col_notes = _build_columns(cells, dec, display)
        if cells.attrs.get(FORMULA_ATTR):
            frame.attrs[FORMULA_ATTR] = list(cells.attrs[FORMULA_ATTR])
            for c in cells.attrs[FORMULA_ATTR]:
                reasons[c] = "formulas without saved results"
    except InputProblem:
        raise
    except Exception as exc:  # a reader failed in a way not foreseen above
        raise InputProblem(
            f"'{display}' could not be read ({type(exc).__name__}: {_short(exc, 120)}). "
            "Check that it is a plain table, or export it as CSV.", code="unreadable") from None
    notes.extend(col_notes)

    if len(frame) == 0:
        raise InputProblem(
            f"'{display}' has a header row but no data rows. Add the data, or choose "
            "another file.", code="no_rows")
    if frame.shape[1] and all(reasons.get(c) == "no values" for c in frame.columns):
        raise InputProblem(
            f"'{display}' has a header row but every data cell is empty. Add the data, or "
            "choose another file.", code="no_rows")
    if not numeric:
        why = "; ".join(f"'{c}': {reasons[c]}" for c in ignored[:8])
        if file_format != "csv":
            how = ""
        elif delimiter is None:
            how = f" It was read as a single column with decimal '{dec}'."
        else:
            how = (f" It was read with the {_DELIMITER_NAMES[delimiter]} as delimiter "
                   f"and decimal '{dec}'.")
        raise InputProblem(
            f"'{display}' has no column of numbers, so there is nothing to model ({why}).{how} "
            "Check the decimal mark and that the file has a header row with numbers below it.",
            code="no_numeric")
    empty_rows = int(frame.isna().all(axis=1).sum())
    if empty_rows:
        notes.append(f"{_plural(empty_rows, 'row has', 'rows have')} no values at all.")

    report = LoadReport(
        source_name=display, file_format=file_format, delimiter=delimiter, decimal=dec,
        rows_read=int(len(frame)), columns_read=int(frame.shape[1]),
        numeric_columns=list(numeric), ignored_columns=list(ignored),
        ignored_reasons=dict(reasons), sha256=sha256,
        size_bytes=raw.stat().st_size if isinstance(raw, Path) else len(raw), notes=notes)
    return LoadedTable(frame=frame, report=report)


#: A sample (`peek_table`) holds at most this many data rows ...
SAMPLE_ROWS = 1000
#: ... and, for text, the lines within this many bytes (more only for the header and one row);
SAMPLE_BYTES = 4 << 20
#: Parquet and workbook samples stop at this many cells (at least one row).
SAMPLE_CELLS = 200_000


def _text_head(path: Path, rows: int) -> tuple[bytes, bool] | None:
    """The header and up to ``rows`` whole lines of a text file; (bytes, whole file?)."""
    with path.open("rb") as fh:
        head = fh.read(SAMPLE_BYTES)
        whole = len(head) < SAMPLE_BYTES or not fh.peek(1)
        while not whole and head.count(b"\n") < 2 and len(head) < 16 * SAMPLE_BYTES:
            more = fh.read(SAMPLE_BYTES)   # one line longer than the sample (very wide)
            head += more
            whole = not more or len(more) < SAMPLE_BYTES
    if whole:
        return head, True
    ends = [m.end() for m in re.finditer(b"\n", head[: SAMPLE_BYTES * 16])][: rows + 1]
    if len(ends) < 2:
        return None
    return head[: ends[-1]], False


def peek_table(source: str | os.PathLike, *, decimal: str | None = None,
               sheet: str | int | None = None, rows: int = SAMPLE_ROWS) -> LoadedTable | None:
    """The header and the first ``rows`` data rows of a file, read the way `load_table`
    reads the whole of it: names, kinds of column (which are numbers) and a sample.

    Reads a bounded part of the file: for text, at most `SAMPLE_BYTES` (more only
    when the header and one row are longer); for Parquet, the footer and the
    first rows; for a workbook, the first rows of the sheet. The report's
    ``rows_estimate`` is the number of rows of the whole table (exact for
    Parquet, from the sample's bytes per line for text, ``None`` for a workbook).

    Parameters
    ----------
    source : path of the file.
    decimal, sheet : as for `load_table`.
    rows : data rows in the sample.

    Returns
    -------
    LoadedTable or None
        The sample; ``None`` when it cannot be read on its own (a quoted field
        across the cut, an encoding that needs the whole file, a problem with
        the file): `load_table` on the whole file then says what is wrong.
    """
    dec = "," if decimal == "," else "."
    path = Path(source)
    display = path.name or str(path)
    try:
        size = path.stat().st_size
        with path.open("rb") as fh:
            magic = fh.read(8)
        suffix = path.suffix.lower()
        if suffix in _PARQUET_EXTENSIONS or (suffix not in _XLSX_EXTENSIONS
                                             and magic.startswith(_PARQUET_MAGIC)):
            import pyarrow.parquet as pq
            sample = _load_raw(path, display, dec, sheet, max_rows=rows, digest="-",
                               file_format="parquet")
            sample.report.rows_estimate = int(pq.ParquetFile(path).metadata.num_rows)
        elif suffix in _XLSX_EXTENSIONS or magic.startswith(_ZIP_MAGIC):
            sample = _load_raw(path.read_bytes(), display, dec, sheet, max_rows=rows,
                               digest="-")
        else:
            found = _text_head(path, rows)
            if found is None:
                return None
            head, whole = found
            # pandas' parser: a few MB of a very wide table cost pyarrow's parser
            # several times more memory
            sample = _load_raw(head, display, dec, sheet, digest="-", columnar=False)
            lines = head.count(b"\n") or 1
            sample.report.rows_estimate = (
                sample.report.rows_read if whole
                else int(round(size / len(head) * lines)) - 1)
            sample.report.size_bytes = size
    except InputProblem:
        return None
    except (OSError, ValueError, ImportError):
        return None
    return sample


# ---------------------------------------------------------------------------
# Public: prepare
# ---------------------------------------------------------------------------

def _usable_numeric(series: pd.Series) -> bool:
    dtype = series.dtype
    return (pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)
            and not pd.api.types.is_complex_dtype(dtype))


def _first_non_number(series: pd.Series) -> tuple[int, Any] | None:
    obj = series.to_numpy(dtype=object)
    for i, v in enumerate(obj):
        if v is None or v is pd.NA or v is pd.NaT or (isinstance(v, float) and np.isnan(v)):
            continue
        if _is_real_number(v):
            continue
        if isinstance(v, str):
            try:
                float(v.strip())
                continue
            except ValueError:
                pass
        return i, v
    return None


def _missing_mask(series: pd.Series) -> np.ndarray:
    mask = np.array(series.isna().to_numpy(dtype=bool), copy=True)
    if pd.api.types.is_object_dtype(series.dtype) or pd.api.types.is_string_dtype(series.dtype):
        blank = series.map(lambda v: isinstance(v, str) and not v.strip())
        mask |= blank.to_numpy(dtype=bool, na_value=False)
    return mask


def _as_float(series: pd.Series) -> np.ndarray:
    return np.array(series.to_numpy(dtype="float64", na_value=np.nan), copy=True)


def _float_values(series: pd.Series) -> np.ndarray:
    """The column as float64, NaN for missing; no copy of a float64 column (read only)."""
    return np.asarray(series.to_numpy(dtype="float64", na_value=np.nan))


#: Rows per block when columns are laid side by side into one array (a block of
#: every column stays in the processor's cache).
_STACK_ROWS = 16384


def _complete_columns(frame: pd.DataFrame, target: Any, inputs: tuple, group_column: Any,
                      split_column: Any) -> tuple[np.ndarray, np.ndarray, list] | None:
    """``(y, X, input columns)`` when no chosen cell is missing or infinite, else None.

    Then no row is dropped, so the arrays are the columns themselves: each is
    looked at once (one finiteness test) and copied once, block by block, into
    ``X``; `prepare` takes its longer road (counting what is missing and why)
    only when this gives None.
    """
    values = [_float_values(frame[c]) for c in (target, *inputs)]
    if not all(np.isfinite(v).all() for v in values):
        return None
    for col in (group_column, split_column):
        if col is not None and _missing_mask(frame[col]).any():
            return None
    y = np.array(values[0], dtype="float64", copy=True)
    x_columns = values[1:]
    n = y.shape[0]
    X = np.empty((n, len(x_columns)))
    for a in range(0, n, _STACK_ROWS):
        b = min(a + _STACK_ROWS, n)
        np.stack([v[a:b] for v in x_columns], axis=1, out=X[a:b])
    return y, X, x_columns


def _order_values(frame: pd.DataFrame, col: str, notes: list[str]) -> np.ndarray:
    series = frame[col]
    dtype = series.dtype
    if _usable_numeric(series):
        return _as_float(series)
    if pd.api.types.is_timedelta64_dtype(dtype):
        notes.append(f"Order column '{col}' holds durations; they are used as seconds.")
        return np.array(series.dt.total_seconds().to_numpy(dtype="float64", na_value=np.nan),
                        copy=True)
    if pd.api.types.is_datetime64_any_dtype(dtype):
        stamps = series
    elif pd.api.types.is_bool_dtype(dtype):
        raise InputProblem(f"Order column '{col}' holds true/false values; choose a column of "
                           "numbers, dates or times.", code="bad_order_column", column=col)
    else:
        missing = _missing_mask(series)
        stamps = None
        for fmt in (None, "mixed"):
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    attempt = pd.to_datetime(series.where(~missing), errors="coerce",
                                             format=fmt, utc=True)
            except (ValueError, TypeError, OverflowError):
                continue
            if not (attempt.isna().to_numpy() & ~missing).any():
                stamps = attempt
                break
        if stamps is None:
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    attempt = pd.to_datetime(series.where(~missing), errors="coerce",
                                             format="mixed", utc=True)
                bad = np.flatnonzero(attempt.isna().to_numpy() & ~missing)
            except (ValueError, TypeError, OverflowError):
                bad = np.flatnonzero(~missing)
            row = int(bad[0]) + 1 if bad.size else None
            where = (f" (data row {row}: '{_short(series.iloc[row - 1])}')" if row else "")
            raise InputProblem(
                f"Order column '{col}' holds values that are neither numbers nor dates{where}. "
                "Choose a column of numbers, dates or times, or fix those cells.",
                code="bad_order_column", column=col, row=row)
        notes.append(f"Order column '{col}' was read as dates and times; they are used as "
                     "seconds since 1970-01-01 (UTC).")
    if getattr(stamps.dt, "tz", None) is not None:
        stamps = stamps.dt.tz_convert("UTC").dt.tz_localize(None)
    if not (pd.api.types.is_object_dtype(dtype) or pd.api.types.is_string_dtype(dtype)):
        notes.append(f"Order column '{col}' holds dates and times; they are used as "
                     "seconds since 1970-01-01.")
    nat = stamps.isna().to_numpy()
    seconds = np.array((stamps - pd.Timestamp("1970-01-01")).dt.total_seconds().to_numpy(
        dtype="float64", na_value=np.nan), copy=True)
    seconds[nat] = np.nan
    return seconds


def _drop_reasons(frame: pd.DataFrame, chosen: list[Any], masks: dict[Any, np.ndarray]
                  ) -> tuple[dict[str, dict[str, int]], dict[str, str]]:
    """Split each column's dropped rows into 'empty' and 'not a number' (loading's record)."""
    info = frame.attrs.get(UNPARSABLE_ATTR) or {}
    bad_rows = info.get("rows", {}) if isinstance(info, dict) else {}
    firsts = info.get("first", {}) if isinstance(info, dict) else {}
    already = np.zeros(len(frame), dtype=bool)
    reasons: dict[str, dict[str, int]] = {}
    examples: dict[str, str] = {}
    for col in chosen:
        fresh = masks[col] & ~already
        already |= masks[col]
        if not fresh.any():
            continue
        labels = bad_rows.get(col)
        bad = (frame.index.isin(labels) if labels is not None and len(labels)
               else np.zeros(len(frame), dtype=bool))
        n_bad = int((fresh & bad).sum())
        reasons[str(col)] = {"empty": int(fresh.sum()) - n_bad, "not a number": n_bad}
        if n_bad and col in firsts:
            examples[str(col)] = str(firsts[col])
    return reasons, examples


def describe_drops(data: PreparedData) -> str:
    """One sentence on the rows `prepare` dropped and why; ``''`` when none were.

    Parameters
    ----------
    data : the result of `prepare`.

    Returns
    -------
    str
        e.g. ``"5 of 120 rows dropped: 3 with 'y' empty; 2 with 'y' not a number
        (first: '1,204.50')."``
    """
    if not getattr(data, "rows_dropped", 0):
        return ""
    parts = []
    for col, n in data.drop_counts.items():
        why = data.drop_reasons.get(col) or {"empty": n}
        if why.get("empty"):
            parts.append(f"{why['empty']:,} with '{col}' empty")
        if why.get("not a number"):
            first = data.drop_examples.get(col)
            parts.append(f"{why['not a number']:,} with '{col}' not a number"
                         + (f" (first: '{first}')" if first else ""))
    return (f"{data.rows_dropped:,} of {data.rows_in:,} rows dropped: "
            f"{'; '.join(parts)}.")


def _expand_text_inputs(frame: pd.DataFrame, input_names: tuple, target: Any
                        ) -> tuple[pd.DataFrame, tuple, dict]:
    """Text inputs with few levels become indicator columns (`engine.categorical`).

    Indicator names (``column[level]``, as a record lists them) are read back
    as their text column. Other inputs are left for the numeric checks.
    """
    from .categorical import base_column, indicator_columns, make_factor, usable_factor

    try:
        cols = list(frame.columns)
    except Exception:  # pragma: no cover
        return frame, input_names, {}
    wanted: list = []
    for name in input_names:
        base = base_column(name, cols) if name not in cols else None
        if base is None:
            wanted.append(name)  # repeated names stay, for the duplicate check
        elif base not in wanted:
            wanted.append(base)
    factors: dict = {}
    out_names: list = []
    extra: dict = {}
    for name in wanted:
        if (name in cols and cols.count(name) == 1 and name != target
                and wanted.count(name) == 1 and usable_factor(frame[name])):
            f = make_factor(str(name), frame[name])
            factors[str(name)] = f
            extra.update(indicator_columns(f, frame[name]))
            out_names.extend(f.names)
        else:
            out_names.append(name)
    if not factors:
        return frame, tuple(wanted) if len(wanted) != len(input_names) else input_names, {}
    clash = [n for n in extra if n in cols]
    if clash:
        from .errors import InputProblem
        raise InputProblem(f"Column '{clash[0]}' has the name an indicator term of a text "
                           "input would get; rename it.", code="duplicate_columns",
                           column=str(clash[0]))
    return frame.assign(**extra), tuple(out_names), factors


def prepare(frame: pd.DataFrame, target: str, inputs: Iterable[str] | str, *,
            order_column: str | None = None, group_column: str | None = None,
            split_column: str | None = None) -> PreparedData:
    """Pick the target and inputs, drop rows with missing values, return arrays.

    Parameters
    ----------
    frame : the table, usually ``load_table(...).frame``.
    target : name of the numeric column to predict.
    inputs : names of the input columns (a single name is accepted): numeric
        columns, or text columns with few levels, which become indicator terms
        ``column[level]`` (`engine.categorical`; the reference level is named
        in ``notes`` and ``factors``).
    order_column : optional column giving the order of rows in time: numbers,
        or dates/times (used as seconds). Rows are sorted by it, stably.
    group_column : optional column of group labels (any type).
    split_column : optional column of fold labels (any type).

    Returns
    -------
    PreparedData
        Arrays for fitting, the kept rows' original positions, and counts of
        dropped rows per column.

    Raises
    ------
    InputProblem
        For unknown or unusable columns, infinite values, no rows left, or a
        target that does not vary.
    """
    if not isinstance(frame, pd.DataFrame):
        raise InputProblem("The data must be a table (a pandas DataFrame); load a file first.",
                           code="bad_source")
    if isinstance(inputs, str):
        inputs = (inputs,)
    try:
        input_names = tuple(inputs)
        hash((target, order_column, group_column, split_column) + input_names)
    except TypeError:
        raise InputProblem("The target, inputs and other columns must be given as column "
                           "names.", code="no_inputs") from None
    rows_in = int(len(frame))
    numeric_available = [str(c) for c in frame.columns if _usable_numeric(frame[c])]
    frame, input_names, factors = _expand_text_inputs(frame, input_names, target)

    if not input_names:
        raise InputProblem("Choose at least one input column.", code="no_inputs")
    if len(set(input_names)) != len(input_names):
        twice = sorted({n for n in input_names if input_names.count(n) > 1}, key=str)
        raise InputProblem(f"Input {_quote_list(twice)} is listed more than once; list each "
                           "input once.", code="duplicate_input", column=str(twice[0]))
    if target in input_names:
        raise InputProblem(f"Column '{target}' is both the target and an input; remove it "
                           "from the inputs.", code="target_is_input", column=str(target))

    columns = list(frame.columns)

    def check_exists(col: Any, role: str) -> None:
        try:
            count = columns.count(col)
        except Exception:  # pragma: no cover - exotic column labels
            count = 0
        if count == 0:
            raise InputProblem(
                f"There is no column named '{col}' (chosen as {role}). Numeric columns in "
                f"the table: {_quote_list(numeric_available)}. Check the spelling, or choose "
                "one of these.",
                code="unknown_column", column=str(col))
        if count > 1:
            raise InputProblem(f"More than one column is named '{col}'; rename them so "
                               "each name is used once.", code="duplicate_columns",
                               column=str(col))

    def check_numeric(col: str, role: str, code: str) -> None:
        series = frame[col]
        if col in (frame.attrs.get(FORMULA_ATTR) or ()) and bool(series.isna().all()):
            raise InputProblem(
                f"Column '{col}' holds formulas whose results were not saved in the workbook "
                f"(a program wrote the formulas without calculating them), so it cannot be "
                f"{role}. Open the workbook in a spreadsheet program, let it calculate and "
                "save it again (or export the sheet as CSV), then load it again.",
                code="formulas_without_values", column=str(col))
        if _usable_numeric(series):
            return
        others = [c for c in numeric_available if c != col]
        found = _first_non_number(series)
        present = ~_missing_mask(series)
        formulas = (frame.attrs.get(FORMULA_ATTR) or ())
        fix = f"Choose a numeric column: {_quote_list(others)}."
        row = None
        if col in formulas:
            what = "formulas whose results were not saved in the workbook"
            fix = ("Open the workbook in a spreadsheet program, let it calculate and save it "
                   "again (or export the sheet as CSV), then load it again. " + fix)
        elif pd.api.types.is_bool_dtype(series.dtype) or _looks_boolean(series, present):
            what = "true/false values"
            fix = "Write them as 1 and 0 in the file to use them as numbers, or " + fix[0].lower() + fix[1:]
        elif (pd.api.types.is_datetime64_any_dtype(series.dtype)
              or _looks_like_dates(series, present)):
            what = "dates or times"
            fix = ("Give it as the order/time column to put the rows in time "
                   "order, or turn it into numbers in the file (for example days since the "
                   "first row). " + fix)
        elif found is not None:
            what = f"text (data row {found[0] + 1}: '{_short(found[1])}')"
            row = found[0] + 1
        else:
            what = "values that are not stored as numbers"
        raise InputProblem(
            f"Column '{col}' holds {what}, so it cannot be {role}. {fix}", code=code,
            column=str(col), row=row)

    check_exists(target, "the target")
    check_numeric(target, "the target", "non_numeric_target")
    for col in input_names:
        check_exists(col, "an input")
        check_numeric(col, "an input", "non_numeric_input")
    for col, role in ((order_column, "the order column"), (group_column, "the group column"),
                      (split_column, "the split column")):
        if col is not None:
            check_exists(col, role)

    notes: list[str] = []
    complete = (_complete_columns(frame, target, input_names, group_column, split_column)
                if order_column is None and rows_in else None)
    if complete is not None:   # no row to drop, none to reorder: the columns as they are
        y, X, x_columns = complete
        row_index = np.arange(rows_in, dtype=np.int64)
        order = None
        rows_dropped, drop_counts, drop_reasons, drop_examples = 0, {}, {}, {}
    else:
        y_all = _as_float(frame[target])
        x_all = [(_as_float(frame[c])) for c in input_names]
        order_all = (_order_values(frame, order_column, notes) if order_column is not None
                     else None)

        for col, values in [(target, y_all), *zip(input_names, x_all),
                            *([(order_column, order_all)] if order_all is not None else [])]:
            bad = np.flatnonzero(np.isinf(values))
            if bad.size:
                row = int(bad[0]) + 1
                raise InputProblem(
                    f"Column '{col}' holds an infinite value at data row {row} "
                    f"({_plural(int(bad.size), 'infinite cell')} in all). Replace it with a real "
                    "number or leave the cell empty.", code="infinite", column=str(col), row=row)

        # missing values, counted under the first chosen column that is missing
        chosen: list[Any] = []
        masks: dict[Any, np.ndarray] = {}
        for col, mask in [(target, np.isnan(y_all)),
                          *[(c, np.isnan(v)) for c, v in zip(input_names, x_all)],
                          *([(order_column, np.isnan(order_all))]
                            if order_all is not None else []),
                          *([(group_column, _missing_mask(frame[group_column]))]
                            if group_column is not None else []),
                          *([(split_column, _missing_mask(frame[split_column]))]
                            if split_column is not None else [])]:
            if col in masks:
                masks[col] = masks[col] | mask
            else:
                chosen.append(col)
                masks[col] = mask
        already = np.zeros(rows_in, dtype=bool)
        drop_counts: dict[str, int] = {}
        for col in chosen:
            fresh = masks[col] & ~already
            if fresh.any():
                drop_counts[str(col)] = int(fresh.sum())
            already |= masks[col]
        keep = ~already
        rows_dropped = int(already.sum())
        drop_reasons, drop_examples = _drop_reasons(frame, chosen, masks)

        if not keep.any():
            if rows_in == 0:
                raise InputProblem("The table has no rows; load a file with data rows.",
                                   code="no_rows")
            worst = max(chosen, key=lambda c: int(masks[c].sum()))
            raise InputProblem(
                f"No rows are left: every row has a missing value in at least one chosen column. "
                f"Column '{worst}' is missing in {int(masks[worst].sum())} of {rows_in} rows. "
                "Choose other columns or fill in the missing values.",
                code="no_rows", column=str(worst))

        row_index = np.flatnonzero(keep).astype(np.int64)
        order = None
        if order_all is not None:
            order_kept = order_all[row_index]
            sort = np.argsort(order_kept, kind="stable")
            row_index = row_index[sort]
            order = order_kept[sort]

        y = y_all[row_index]
        if len(x_all):
            X = np.column_stack([v[row_index] for v in x_all]).astype("float64", copy=False)
        else:  # pragma: no cover - guarded by the no_inputs check
            X = np.empty((len(row_index), 0))
        x_columns = [X[:, j] for j in range(X.shape[1])]
    if y.shape[0] < 2:
        raise InputProblem(
            f"Only {_plural(int(y.shape[0]), 'row')} {'is' if y.shape[0] == 1 else 'are'} usable "
            f"(of {rows_in}, after dropping rows with missing values); at least 2 are needed. "
            "Add rows or choose columns with fewer missing values.",
            code="too_few_rows")
    if np.all(y == y[0]):
        raise InputProblem(
            f"The target '{target}' has the same value ({y[0]:g}) in all {y.shape[0]} rows "
            "used, so there is nothing to predict. Choose another target.",
            code="constant_target", column=str(target))
    for col, values in zip(input_names, x_columns):
        if np.all(values == values[0]):
            notes.append(f"Input '{col}' has the same value ({values[0]:g}) in every row used; "
                         "it carries no information.")

    def labels(col):
        if col is None:
            return None
        values = frame[col].to_numpy()
        return np.array(values, copy=True) if complete is not None else values[row_index]

    groups, split = labels(group_column), labels(split_column)
    return PreparedData(
        X=X, y=y, inputs=tuple(str(c) for c in input_names), target=str(target), order=order,
        groups=groups, split=split, row_index=row_index, rows_in=rows_in,
        rows_dropped=rows_dropped, drop_counts=drop_counts,
        notes=[f.describe() for f in factors.values()] + notes,
        drop_reasons=drop_reasons, drop_examples=drop_examples, factors=factors)
