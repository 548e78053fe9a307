"""One session per instrument: an advisory lock per resource string.

Two sessions driving one digitiser corrupt each other's acquisitions (each arms and
fetches in the other's middle). Each instrument a session opens is locked first: a lock
file named after the resource string in the user's runtime folder, held with
``flock`` for as long as the session runs. The file records the holder (pid, session
file, start time) so a refusal can name it. A holder that died leaves its file behind
but not its lock (the operating system drops it with the process), so a stale file is
simply taken over.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
import time
from pathlib import Path
from typing import IO

from ..errors import InstrumentBusy

try:
    import fcntl
    HAVE_FLOCK = True
except ImportError:  # pragma: no cover - not a POSIX system: no locking there
    HAVE_FLOCK = False


def lock_folder() -> Path:
    """Where lock files live: ``$TANKSIDE_LOCK_DIR``, else the runtime or temp folder."""
    base = (os.environ.get("TANKSIDE_LOCK_DIR") or os.environ.get("XDG_RUNTIME_DIR")
            or tempfile.gettempdir())
    return Path(base) / "tankside-locks"


class InstrumentLock:
    """Holds the lock of one resource string while the session runs.

    Raises
    ------
    InstrumentBusy
        Another live process holds it (its pid and session file are named).
    """

    def __init__(self, resource: str, *, session_path: str = "", folder: Path | None = None):
        self.resource = resource
        digest = hashlib.sha256(resource.strip().encode("utf-8")).hexdigest()[:24]
        self.path = (folder or lock_folder()) / f"{digest}.lock"
        self._session_path = session_path
        self._file: IO[str] | None = None

    def acquire(self) -> None:
        if not HAVE_FLOCK:
            return
        self.path.parent.mkdir(parents=True, exist_ok=True)
        fh = open(self.path, "a+", encoding="utf-8")  # noqa: SIM115 - held while running
        try:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            fh.seek(0)
            holder = _holder_text(fh.read())
            fh.close()
            raise InstrumentBusy(f"{self.resource} is in use by another tankside session "
                                 f"({holder}); stop that one first") from None
        fh.seek(0)
        fh.truncate()
        json.dump({"pid": os.getpid(), "resource": self.resource,
                   "session": self._session_path, "since": time.strftime("%Y-%m-%d %H:%M:%S")},
                  fh)
        fh.flush()
        self._file = fh

    def release(self) -> None:
        fh, self._file = self._file, None
        if fh is None:
            return
        try:
            fh.seek(0)
            fh.truncate()
        finally:
            fh.close()             # closing drops the flock


def _holder_text(text: str) -> str:
    try:
        info = json.loads(text)
        return (f"pid {info.get('pid')}, session {info.get('session') or '?'}, "
                f"since {info.get('since')}")
    except (ValueError, AttributeError):
        return "holder unknown"
