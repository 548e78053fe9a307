"""Output files that appear whole or not at all: exports and replay's new session.

:func:`output_file` hands out a temporary name beside the target (same folder, so the
same file system), and renames it onto the target only when everything is written and
flushed to disk. An error or Ctrl-C on the way removes the temporary file: nothing is
ever left under the target's name that looks complete and is not (an HDF5 file with
zero-filled rows, a 0-byte CSV). A missing folder, a full disk or a refused write is an
:class:`~tankside.monitor.errors.OutputFileError` naming the target.
"""

from __future__ import annotations

import errno
import os
import sqlite3
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from ..errors import OutputFileError

__all__ = ["output_file", "describe_os_error", "GuardedFile"]

# SQLite's companions of a database file: removed with a temporary session, and those
# of a replaced target removed before the rename (SQLite would take a stale -wal beside
# the new file for its own).
_SIDECARS = ("-wal", "-shm", "-journal")


def describe_os_error(err: BaseException) -> str:
    """The reason of a failed write in words (``no space left on the disk``...)."""
    code = getattr(err, "errno", None)
    if code in (errno.ENOSPC, errno.EDQUOT):
        return "no space left on the disk"
    if code == errno.EFBIG:
        return "file too large for this file system or limit"
    if code == errno.EROFS:
        return "the file system is read-only"
    if code in (errno.EACCES, errno.EPERM):
        return "permission denied"
    strerror = getattr(err, "strerror", None)
    return strerror or str(err)


def _remove(path: Path, sidecars: bool) -> None:
    for suffix in ("", *(_SIDECARS if sidecars else ())):
        try:
            os.unlink(f"{path}{suffix}")
        except FileNotFoundError:
            pass
        except OSError:
            pass  # nothing more to do for a file the system will not let go


def _fsync(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fold_wal(path: Path) -> None:
    """Bring a session's -wal into the file itself, so that one file can be renamed (the
    store does this when it closes; this is for a close that could not)."""
    try:
        conn = sqlite3.connect(path, isolation_level=None)
        try:
            conn.execute("PRAGMA journal_mode=DELETE").fetchall()
        finally:
            conn.close()
    except sqlite3.Error as err:
        raise OSError(errno.EIO, f"cannot merge {path.name}-wal into the file ({err})") from err
    if Path(f"{path}-wal").exists():
        raise OSError(errno.EIO, f"{path.name}-wal is still beside the file")


@contextmanager
def output_file(target, *, session: bool = False) -> Iterator[Path]:
    """A temporary path beside ``target``, renamed onto it when the block ends well.

    Parameters
    ----------
    target : str or Path
        The file to write. An existing file is replaced only at the end (the caller
        decides whether it may be).
    session : bool
        The block writes an SQLite session there: the temporary name does not exist yet
        (the store creates it), and SQLite's companion files are handled with it.

    Raises
    ------
    OutputFileError
        The folder is missing, or creating, writing, flushing or renaming the file
        failed (the message names ``target`` and the reason); the temporary file is gone.
    """
    target = Path(target)
    folder = target.parent
    if not folder.is_dir():
        raise OutputFileError(f"{target}: the folder {folder} does not exist; nothing "
                              "written")
    if target.is_dir():
        raise OutputFileError(f"{target}: is a folder; nothing written")
    try:
        fd, name = tempfile.mkstemp(dir=folder, prefix=f".{target.name}.", suffix=".part")
        os.close(fd)
    except OSError as err:
        raise OutputFileError(f"{target}: cannot write in {folder} "
                              f"({describe_os_error(err)}); nothing written") from err
    tmp = Path(name)
    if session:
        os.unlink(tmp)
    try:
        yield tmp
        if session and Path(f"{tmp}-wal").exists():
            _fold_wal(tmp)
        _fsync(tmp)
        if session:
            for suffix in _SIDECARS:
                Path(f"{target}{suffix}").unlink(missing_ok=True)
        os.replace(tmp, target)
    except OSError as err:
        _remove(tmp, session)
        raise OutputFileError(f"{target}: writing failed ({describe_os_error(err)}); "
                              "nothing written under that name") from err
    except BaseException:
        _remove(tmp, session)
        raise


class GuardedFile:
    """A binary file for a library that writes through a file object (h5py's ``fileobj``
    driver) and does not survive its own failed writes, nor reading back what it wrote
    and was not stored.

    A write that fails is never reported to the library. The first error is kept in
    :attr:`failed` (and raised by :meth:`check`, which the writer calls between its
    steps); from then on, and after :meth:`abandon`, what the library writes is kept in
    memory, page by page, and read back from there, so that it sees a consistent file
    until it has closed it. Only what is written between the failure and the writer's
    next check, and the library's last flush, is held (a few MB).

    Parameters
    ----------
    raw : file
        Opened ``"w+b"`` without buffering (so that a write error shows at the write).
    """

    PAGE = 4096

    def __init__(self, raw):
        self.raw = raw
        self.failed: OSError | None = None
        self._pages: dict[int, bytearray] | None = None   # None: writing to the file
        self._size = 0

    def check(self) -> None:
        """Raise the first write error, if there was one."""
        if self.failed is not None:
            raise self.failed

    def abandon(self) -> None:
        """Write nothing more to the file (it is being thrown away)."""
        self._hold()

    def _hold(self) -> None:
        if self._pages is None:
            self._pages = {}
            self._size = os.fstat(self.raw.fileno()).st_size

    def _page(self, index: int) -> bytearray:
        assert self._pages is not None
        page = self._pages.get(index)
        if page is None:
            data = os.pread(self.raw.fileno(), self.PAGE, index * self.PAGE)
            page = bytearray(data.ljust(self.PAGE, b"\0"))
            self._pages[index] = page
        return page

    def write(self, data) -> int:
        view = memoryview(data).cast("B")
        size = len(view)
        if self._pages is None:
            try:
                while view:
                    view = view[self.raw.write(view):]
            except OSError as err:
                self.failed = err
                self._hold()
        if view:                     # held in memory from here on
            pos = self.raw.tell()
            done = 0
            while done < len(view):
                index, offset = divmod(pos + done, self.PAGE)
                take = min(self.PAGE - offset, len(view) - done)
                self._page(index)[offset:offset + take] = view[done:done + take]
                done += take
            self._size = max(self._size, pos + done)
            self.raw.seek(pos + done)
        return size

    def read(self, size: int = -1) -> bytes:
        if self._pages is None:
            return self.raw.read(size)
        pos = self.raw.tell()
        end = self._size if size < 0 else min(self._size, pos + size)
        out = bytearray()
        while pos + len(out) < end:
            index, offset = divmod(pos + len(out), self.PAGE)
            take = min(self.PAGE - offset, end - pos - len(out))
            page = self._pages.get(index)
            if page is None:
                chunk = os.pread(self.raw.fileno(), take, pos + len(out)).ljust(take, b"\0")
            else:
                chunk = bytes(page[offset:offset + take])
            out += chunk
        self.raw.seek(pos + len(out))
        return bytes(out)

    def readinto(self, buffer) -> int:
        data = self.read(len(memoryview(buffer).cast("B")))
        memoryview(buffer).cast("B")[:len(data)] = data
        return len(data)

    def seek(self, offset: int, whence: int = os.SEEK_SET) -> int:
        if whence == os.SEEK_END and self._pages is not None:
            return self.raw.seek(self._size + offset)
        return self.raw.seek(offset, whence)

    def tell(self) -> int:
        return self.raw.tell()

    def truncate(self, size: int | None = None) -> int:
        size = self.raw.tell() if size is None else size
        if self._pages is None:
            try:
                return self.raw.truncate(size)
            except OSError as err:
                self.failed = err
                self._hold()
        self._size = size
        return size

    def flush(self) -> None:
        if self._pages is None:
            try:
                self.raw.flush()
            except OSError as err:
                self.failed = err
                self._hold()
