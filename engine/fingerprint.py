"""Fingerprints of data sources: the SHA-256 that ties a pack to the exact bytes it read.

A table read whole carries its SHA-256 in `engine.loading.LoadReport`. A
streamed source (a file read in record batches, or a folder of Parquet files)
is never held in memory, so its fingerprint is computed here by reading the
bytes once more, in a background thread while the rows are streamed
(`hashlib` releases the interpreter lock on large blocks, so the two overlap).

A folder's fingerprint is the SHA-256 of one line per Parquet file the
streaming reader takes, in the order it takes them::

    <path relative to the folder> TAB <size in bytes> TAB <SHA-256 of the file> LF

so renaming, adding, removing or changing any file changes it.
"""
from __future__ import annotations

import hashlib
import threading
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, TypeVar

_BLOCK = 1 << 20
T = TypeVar("T")


@dataclass(frozen=True)
class SourceFingerprint:
    """SHA-256 and size of a data file, or of a folder of Parquet files.

    Attributes
    ----------
    sha256 : hex SHA-256 (of the file's bytes, or of the folder's file list, see module notes).
    size_bytes : bytes in the file, or in all the folder's files together.
    files : number of files covered (1 for a file).
    kind : ``'file'`` or ``'folder'``.
    """

    sha256: str
    size_bytes: int
    files: int
    kind: str


def file_digest(path: str | Path) -> str:
    """Hex SHA-256 of a file's bytes, read in 1 MiB blocks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(_BLOCK), b""):
            h.update(block)
    return h.hexdigest()


def folder_files(folder: str | Path) -> list[Path]:
    """The Parquet files of a folder in the order the streaming reader takes them."""
    folder = Path(folder)
    return sorted(p for p in folder.rglob("*") if p.is_file()
                  and p.suffix.lower() in (".parquet", ".pq"))


def source_fingerprint(path: str | Path) -> SourceFingerprint:
    """Fingerprint of a local data file or a folder of Parquet files.

    Parameters
    ----------
    path : a regular file, or a folder (its ``.parquet``/``.pq`` files, found
        recursively, are covered; other files in it are not read by the
        streaming path and do not count).

    Returns
    -------
    SourceFingerprint
    """
    p = Path(path)
    if p.is_dir():
        lines = []
        total = 0
        files = folder_files(p)
        for f in files:
            size = f.stat().st_size
            total += size
            rel = f.relative_to(p).as_posix()
            lines.append(f"{rel}\t{size}\t{file_digest(f)}\n")
        digest = hashlib.sha256("".join(lines).encode("utf-8")).hexdigest()
        return SourceFingerprint(digest, total, len(files), "folder")
    return SourceFingerprint(file_digest(p), p.stat().st_size, 1, "file")


def in_background(fn: Callable[..., T], *args, name: str = "fitladder-fingerprint"
                  ) -> Callable[[], T]:
    """Start ``fn(*args)`` in a daemon thread (called ``name``); returns a function that
    waits for its result.

    The returned function re-raises any error the thread met (a file removed
    while it was read, say).
    """
    box: dict = {}

    def work() -> None:
        try:
            box["value"] = fn(*args)
        except BaseException as exc:  # noqa: BLE001 - handed back to the caller
            box["error"] = exc

    thread = threading.Thread(target=work, name=name, daemon=True)
    thread.start()

    def result() -> T:
        thread.join()
        if "error" in box:
            raise box["error"]
        return box["value"]

    return result


def fingerprint_in_background(path: str | Path) -> Callable[[], SourceFingerprint]:
    """Start fingerprinting ``path`` in a thread (`source_fingerprint`); returns a function
    that waits for it."""
    return in_background(source_fingerprint, path)


#: Bytes from which `digest_alongside` hashes in a thread rather than at once.
THREADED_DIGEST_BYTES = 8 << 20


def digest_alongside(raw: bytes) -> Callable[[], str]:
    """Hex SHA-256 of ``raw``; for large inputs computed in a thread while the caller parses.

    Returns a function that gives the digest (waiting for the thread when needed).
    `hashlib` releases the interpreter lock on large buffers, so on a machine with
    a second core the hash costs no wall time beside the parser.
    """
    if len(raw) < THREADED_DIGEST_BYTES:
        value = hashlib.sha256(raw).hexdigest()
        return lambda: value
    return in_background(lambda: hashlib.sha256(raw).hexdigest())
