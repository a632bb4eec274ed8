"""The folder a meeting pack is written into: never clobbered, never half-written.

`PackFolder` guards ``--out``:

* a folder that exists and holds anything but a pack this program wrote is
  refused unless ``overwrite=True`` (the user's own files are then kept, the
  old pack's files replaced);
* a folder that cannot be written (or a file in the way) is refused before
  any computing starts;
* a lock (``fcntl.flock`` on a hidden file beside the folder) refuses a second
  run into the same folder while one is writing;
* the pack is written into a hidden temporary sibling and moved into place
  by `os.rename` at the end, so a killed run or a full disk never leaves a
  folder that looks complete or mixes files of two packs.

This module writes only on behalf of `engine.pack`.
"""
from __future__ import annotations

import errno
import fcntl
import json
import os
import re
import shutil
import tempfile
from pathlib import Path
from typing import Iterable

from .errors import InputProblem

__all__ = ["PackFolder", "is_pack_folder"]

_RECORD = "record.json"


def _record_format() -> str:
    from .record import RECORD_FORMAT
    return RECORD_FORMAT


def is_pack_folder(path: Path, pack_files: Iterable[str], also: re.Pattern | None = None) -> bool:
    """True when ``path`` holds only what a pack writes, with a record of this program.

    ``pack_files`` are the names a pack writes; ``also`` matches more names
    (folders of sub-packs).
    """
    names = {p.name for p in path.iterdir()}
    if not names:
        return True
    allowed = set(pack_files)
    if not all(n in allowed or (also is not None and also.fullmatch(n)) for n in names) \
            or _RECORD not in names:
        return False
    try:
        with open(path / _RECORD, "rb") as fh:
            head = json.loads(fh.read(1024 * 1024).decode("utf-8"))
    except (OSError, ValueError, UnicodeDecodeError, RecursionError):
        return False
    return isinstance(head, dict) and head.get("format") == _record_format()


def _oserror_words(exc: OSError) -> str:
    if exc.errno == errno.ENOSPC:
        return "the disk is full"
    if exc.errno == errno.EDQUOT:
        return "the disk quota is used up"
    if exc.errno in (errno.EACCES, errno.EPERM):
        return "permission denied"
    if exc.errno == errno.EROFS:
        return "the file system is read-only"
    return exc.strerror or str(exc)


class PackFolder:
    """Safe writing into ``out``: check, lock, temporary sibling, rename.

    Parameters
    ----------
    out : the folder the user asked for.
    pack_files : names of the files a pack writes (`engine.pack.PACK_FILES`).
    overwrite : replace a folder that holds other files (they are kept).
    also : a pattern of more names a pack writes (folders of sub-packs).

    Use as a context manager; write into ``work``; call `commit` at the end.
    Leaving the block without `commit` (an error, a signal turned into an
    exception) removes the temporary folder and leaves ``out`` as it was.
    """

    def __init__(self, out: str | os.PathLike, pack_files: Iterable[str], *,
                 overwrite: bool = False, also: re.Pattern | None = None) -> None:
        self.out = Path(out)
        self.pack_files = tuple(pack_files)
        self.also = also
        self.overwrite = bool(overwrite)
        self.work: Path | None = None
        self._lock_fd: int | None = None
        self._lock_path: Path | None = None
        self.committed = False

    def _ours(self, name: str) -> bool:
        return name in self.pack_files or bool(self.also and self.also.fullmatch(name))

    def __fspath__(self) -> str:
        return os.fspath(self.out)

    # -- checks ------------------------------------------------------------
    def check(self) -> None:
        """Refuse an ``out`` that cannot or must not be written (raises `InputProblem`)."""
        out = self.out
        if out.exists() and not out.is_dir():
            raise InputProblem(f"'{out}' is a file, not a folder. Give --out a folder name "
                               "(a new one is created).", code="bad_out")
        if out.is_dir():
            try:
                ours = is_pack_folder(out, self.pack_files, self.also)
            except OSError as exc:
                raise InputProblem(f"The folder '{out}' cannot be read ({_oserror_words(exc)}). "
                                   "Choose another folder for --out.", code="bad_out") from None
            if not ours and not self.overwrite:
                names = sorted(p.name for p in out.iterdir())
                others = [n for n in names if not self._ours(n)]
                theirs = (others or names)[:5]  # with no record of ours, pack names are theirs
                raise InputProblem(
                    f"The folder '{out}' already holds files this program did not write "
                    f"({', '.join(repr(n) for n in theirs) or 'files of another pack'}). "
                    "Choose a new or empty folder for --out, or add --overwrite to replace "
                    "the pack files there (your other files are kept).", code="out_not_empty")
        base = out.absolute().parent
        while not base.exists() and base != base.parent:  # the folders to be created
            base = base.parent
        if not base.is_dir() or not os.access(base, os.W_OK | os.X_OK):
            raise InputProblem(f"Cannot write into '{base}' (permission denied or not a "
                               f"folder), so the pack '{out.name}' cannot be made there. Choose "
                               "a folder you can write to for --out.", code="cannot_write")

    # -- lifecycle ---------------------------------------------------------
    def __enter__(self) -> "PackFolder":
        self.check()
        parent = self.out.absolute().parent
        name = self.out.name or "pack"
        try:
            parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise InputProblem(f"Cannot create the folder '{parent}' for --out "
                               f"({_oserror_words(exc)}). Choose a folder you can write to.",
                               code="cannot_write") from None
        self._lock_path = parent / f".{name}.fitladder-lock"
        try:
            fd = os.open(self._lock_path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise InputProblem(f"Cannot write into '{parent}' ({_oserror_words(exc)}). Choose "
                               "a folder you can write to for --out.",
                               code="cannot_write") from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            raise InputProblem(f"Another run is writing a pack into '{self.out}' right now. "
                               "Wait for it to finish, or choose another folder for --out.",
                               code="out_locked") from None
        self._lock_fd = fd
        try:
            self.work = Path(tempfile.mkdtemp(prefix=f".{name}.partial-", dir=parent))
        except OSError as exc:
            self._release()
            raise InputProblem(f"Cannot write into '{parent}' ({_oserror_words(exc)}). Choose "
                               "a folder you can write to for --out.",
                               code="cannot_write") from None
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if self.work is not None and self.work.exists():
            shutil.rmtree(self.work, ignore_errors=True)
        self._release()

    def _release(self) -> None:
        if self._lock_fd is not None:
            try:
                if self._lock_path is not None:
                    self._lock_path.unlink(missing_ok=True)
            finally:
                fcntl.flock(self._lock_fd, fcntl.LOCK_UN)
                os.close(self._lock_fd)
                self._lock_fd = None

    def commit(self) -> Path:
        """Move the finished pack into place; return the folder's path."""
        assert self.work is not None, "commit() outside the with-block"
        out = self.out
        # the files reach the disk before the folder is moved; flushed side by side by a
        # few threads (the disk takes the requests together: measured about five times
        # faster than one after another for a pack's files)
        files = [p for p in self.work.rglob("*") if p.is_file()]
        if files:
            from concurrent.futures import ThreadPoolExecutor

            with ThreadPoolExecutor(max_workers=min(8, len(files)),
                                    thread_name_prefix="fitladder-fsync") as pool:
                list(pool.map(_flush_to_disk, files))
        old: Path | None = None
        if out.is_dir():
            old = Path(tempfile.mkdtemp(prefix=f".{out.name}.old-", dir=out.parent))
            os.rename(out, old / "pack")  # the old pack leaves as one piece
            old_pack = old / "pack"
        os.rename(self.work, out)
        self.work = None
        if old is not None:
            for p in old_pack.iterdir():  # the user's own files stay with the new pack
                if not self._ours(p.name) and not (out / p.name).exists():
                    os.rename(p, out / p.name)
            shutil.rmtree(old, ignore_errors=True)
        self.committed = True
        return out


def _flush_to_disk(path: Path) -> None:
    with open(path, "rb") as fh:
        os.fsync(fh.fileno())


def write_problem(out: Path, exc: OSError) -> InputProblem:
    """The message for a pack that could not be written."""
    return InputProblem(f"Could not write the pack to '{out}': {_oserror_words(exc)}. Nothing "
                        "was left there; free some space or choose a folder you can write to, "
                        "and run again.", code="cannot_write")
