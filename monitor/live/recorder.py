"""The writer thread: the only owner of the session store.

Items arrive in order on a bounded queue. The store batches commits (``maybe_commit``
about once a second), so at most about a second of data is at risk on power loss.
A store failure (full disk, I/O error) ends the writer; the session then stops.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from ..errors import StoreError
from ..outcome import ExitStatus
from ..record.benchstate import TraceBench
from ..record.scanpoints import PointRecord
from ..record.schema import EventKind

if TYPE_CHECKING:
    from ..record.store import SessionStore

END = object()


@dataclass
class TraceItem:
    raw: Any
    result: dict | None
    flags: dict
    error: str | None
    bench: TraceBench | None = None     # stage position and water reading (layout 3)
    point: tuple[int, bool, str] | None = None  # scan point, counted, why not (layout 4)


@dataclass
class PointItem:
    point: PointRecord


@dataclass
class AlertItem:
    local_id: int
    time_s: float
    rule: str
    severity: str
    message: str
    actions: tuple[str, ...]
    seq: int | None


@dataclass
class AckItem:
    local_id: int
    time_s: float


@dataclass
class EventItem:
    time_s: float
    kind: EventKind
    detail: dict
    seq: int | None = None


@dataclass
class CloseItem:
    exit_status: ExitStatus
    reason: str
    counts: Callable[[], dict]


class Writer:
    """Runs in its own thread; creates the store there (sqlite objects stay in one thread).

    Parameters
    ----------
    open_store : callable () -> store
        Creates the session store (``SessionStore.create(path, metadata, ...)``).
    items : queue.Queue
        Bounded queue of ``*Item`` objects; :data:`END` or a :class:`CloseItem` ends it.
    """

    def __init__(self, open_store: Callable[[], SessionStore], items: queue.Queue,
                 counts: Callable[[], dict]):
        self.open_store = open_store
        self.items = items
        self.counts = counts
        self.ready = threading.Event()
        self.store: SessionStore | None = None
        self.stored = 0             # traces written (committed or not)
        self.committed = 0          # traces known durable (at the last commit)
        self.error: StoreError | None = None
        self.open_error: BaseException | None = None
        self.closed = False
        self.close_error: StoreError | None = None
        self._ids: dict[int, int] = {}
        self._oldest_uncommitted_s: float | None = None

    def store_lag_s(self, now_s: float) -> float:
        """Age of the oldest trace written but not yet committed, s (0 when none)."""
        oldest = self._oldest_uncommitted_s
        return max(0.0, now_s - oldest) if oldest is not None else 0.0

    def _open_store(self) -> SessionStore:
        store = self.store
        if store is None:  # pragma: no cover - only called once run() has opened it
            raise RuntimeError("writer: the session store is not open")
        return store

    def _commit_maybe(self) -> None:
        if self._open_store().maybe_commit():
            self._oldest_uncommitted_s = None
            self.committed = self.stored

    def size_bytes(self) -> int:
        store = self.store
        try:
            return int(store.size_bytes()) if store is not None else 0
        except (StoreError, OSError):
            return 0

    def run(self) -> None:
        try:
            store = self.store = self.open_store()
        except BaseException as err:  # reported to start(), which raises it in its thread
            self.open_error = err
            self.ready.set()
            return
        self.ready.set()
        close: CloseItem | None = None
        try:
            while True:
                try:
                    item = self.items.get(timeout=0.25)
                except queue.Empty:
                    self._commit_maybe()
                    continue
                if item is END:
                    break
                if isinstance(item, CloseItem):
                    close = item
                    break
                self._handle(item)
                self._commit_maybe()
            store.commit()
            self._oldest_uncommitted_s = None
            self.committed = self.stored
            if close is not None:
                store.close(close.exit_status, close.reason, close.counts())
                self.closed = True
        except StoreError as err:
            self.error = err
            self._close_after_error(err)

    def _close_after_error(self, err: StoreError) -> None:
        # Try to leave a stop record; on a full disk this usually fails as well, and the
        # file then reads as "not stopped cleanly", which is the truth. The first error
        # is the one reported.
        try:
            self._open_store().close(ExitStatus.STORE_ERROR, str(err), self.counts())
            self.closed = True
        except StoreError as again:
            self.close_error = again

    def _handle(self, item: object) -> None:
        store = self._open_store()
        if isinstance(item, TraceItem):
            store.add_trace(item.raw, item.result, item.flags or None, item.error, item.bench,
                            item.point, getattr(item.raw, "monitor", None))
            self.stored += 1
            if self._oldest_uncommitted_s is None:
                self._oldest_uncommitted_s = float(item.raw.time_s)
        elif isinstance(item, AlertItem):
            self._ids[item.local_id] = store.add_alert(item.time_s, item.rule, item.severity,
                                                       item.message, list(item.actions),
                                                       seq=item.seq)
        elif isinstance(item, AckItem):
            stored_id = self._ids.get(item.local_id)
            if stored_id is not None:
                store.acknowledge_alert(stored_id, item.time_s)
        elif isinstance(item, EventItem):
            store.add_event(item.time_s, item.kind, item.detail, seq=item.seq)
        elif isinstance(item, PointItem):
            store.add_scan_point(item.point)
        else:  # pragma: no cover - a programming error, not a user's
            raise TypeError(f"writer: unexpected item {item!r}")
