"""Opening a session file read-only, wherever it lies: beside its live writer, copied
alone after a crash, or on a read-only medium (an archive disc, a read-only share).

A session being written is in WAL mode: its latest commits are in ``FILE.db-wal``
until a checkpoint copies them into ``FILE.db`` (the store checkpoints right after the
start record and then periodically, so ``FILE.db`` alone is a session too, as of its
last checkpoint). SQLite reads a WAL-mode file through a shared-memory index,
``FILE.db-shm``, which it creates beside the file. Where the folder is read-only and
there is none:

- no ``-wal`` beside the file (or an empty one): nothing is waiting to be merged, the
  file cannot change, and it is opened as immutable;
- a ``-wal`` with data: the two files are copied together into a temporary folder and
  the copy is read (a reader says so in :attr:`OpenedSession.note`); when there is no
  room for the copy the error says what is needed.
"""

from __future__ import annotations

import os
import shutil
import sqlite3
import tempfile
from dataclasses import dataclass
from pathlib import Path

from ..errors import SessionFileError
from .cells import decode_text

__all__ = ["OpenedSession", "open_read_only", "wal_mode"]

_HEADER = b"SQLite format 3\x00"
_MB = 1 << 20


@dataclass
class OpenedSession:
    """A read-only connection and where it reads from."""

    conn: sqlite3.Connection
    working_copy: Path | None = None
    """The temporary folder holding the copy read, or None when the file itself is read."""
    note: str | None = None
    """A line for the user when the file is not read in place (None when it is)."""

    def close(self) -> None:
        self.conn.close()
        if self.working_copy is not None:
            shutil.rmtree(self.working_copy, ignore_errors=True)
            self.working_copy = None


def _connect(path: Path, options: str) -> sqlite3.Connection:
    conn = sqlite3.connect(f"{path.resolve().as_uri()}?{options}", uri=True,
                           check_same_thread=False)
    conn.text_factory = decode_text
    try:
        # the first read opens the WAL, if any, and is where a missing -shm shows
        conn.execute("SELECT COUNT(*) FROM sqlite_master").fetchone()
    except BaseException:
        conn.close()
        raise
    return conn


def _head(path: Path) -> bytes:
    try:
        with open(path, "rb") as fh:
            return fh.read(100)
    except OSError:
        return b""


def _is_sqlite(path: Path) -> bool:
    return _head(path).startswith(_HEADER)


def wal_mode(path: Path) -> bool:
    """Whether the file's header says WAL mode (bytes 18 and 19 are 2; SQLite file
    format, section 1.3)."""
    head = _head(path)
    return len(head) == 100 and head.startswith(_HEADER) and head[18] == head[19] == 2


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except FileNotFoundError:
        return -1


def open_read_only(path: Path) -> OpenedSession:
    """Open ``path`` read-only (see the module docstring for the read-only medium).

    Raises
    ------
    SessionFileError
        The file cannot be read, is not an SQLite file, or is on a read-only medium with
        a ``-wal`` that cannot be read in place nor copied; the message says which file
        or what room is missing.
    """
    if not os.access(path, os.R_OK):
        raise SessionFileError(f"{path}: no permission to read the session file")
    try:
        return OpenedSession(_connect(path, "mode=ro"))
    except (sqlite3.DatabaseError, UnicodeError) as err:
        # (a damaged schema can come back as text that is not UTF-8)
        first_error = err
    wal = Path(f"{path}-wal")
    shm = Path(f"{path}-shm")
    folder = path.parent
    if not _is_sqlite(path):
        raise SessionFileError(f"{path}: not a tankside session file "
                               f"({first_error})") from first_error
    if not wal_mode(path) or os.access(folder, os.W_OK):
        raise SessionFileError(f"{path}: cannot be opened as a session file "
                               f"({first_error})") from first_error
    # A WAL-mode file in a folder where SQLite cannot create its -shm.
    if _size(wal) <= 0:
        try:
            return OpenedSession(_connect(path, "mode=ro&immutable=1"))
        except (sqlite3.DatabaseError, UnicodeError) as err:
            raise SessionFileError(f"{path}: cannot be opened as a session file "
                                   f"({err})") from err
    return _working_copy(path, wal, shm, folder, first_error)


def _working_copy(path: Path, wal: Path, shm: Path, folder: Path,
                  first_error: Exception) -> OpenedSession:
    need = _size(path) + _size(wal)
    where = Path(tempfile.gettempdir())
    free = shutil.disk_usage(where).free
    if free < need + 16 * _MB:
        raise SessionFileError(
            f"{path}: its last commits are in {wal.name}, which SQLite reads only with a "
            f"{shm.name} beside it, and {folder} is read-only; a working copy needs "
            f"{need / _MB:.0f} MB in {where} ({free / _MB:.0f} MB free): copy {path.name} "
            f"and {wal.name} together to a writable folder") from first_error
    copy_dir = Path(tempfile.mkdtemp(prefix="tankside-read-"))
    try:
        copy = copy_dir / path.name
        shutil.copyfile(path, copy)
        shutil.copyfile(wal, Path(f"{copy}-wal"))
        conn = _connect(copy, "mode=ro")
    except (OSError, sqlite3.DatabaseError, UnicodeError) as err:
        shutil.rmtree(copy_dir, ignore_errors=True)
        raise SessionFileError(f"{path}: on a read-only medium with {wal.name}; a working "
                               f"copy in {copy_dir} could not be read ({err})") from err
    except BaseException:
        shutil.rmtree(copy_dir, ignore_errors=True)
        raise
    return OpenedSession(conn, copy_dir, (
        f"{path} is on a read-only medium with its {wal.name} and no {shm.name}: reading "
        f"a copy of both made in {copy_dir} ({need / _MB:.1f} MB, removed afterwards)"))
