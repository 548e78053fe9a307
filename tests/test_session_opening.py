"""FILE.db alone is a session (the store checkpoints after the start record and then
periodically), and a session opens read-only on a read-only medium, with or without its
-wal and -shm beside it, or the error says exactly what is missing.

The read-only medium is real: a read-only bind mount in a private mount namespace
(``unshare -m``, as root), or a folder without write permission for anyone else.
"""

from __future__ import annotations

import csv
import os
import shutil
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
from session_samples import make_raw

from tankside.monitor.errors import SessionFileError
from tankside.monitor.record.store import SessionReader, SessionStore, session_metadata

TESTS = Path(__file__).resolve().parent
ROOT = TESTS.parent

_WRITER = textwrap.dedent("""
    import sys
    sys.path.insert(0, {tests!r})
    from session_samples import make_raw
    from tankside.monitor.record.store import SessionStore, session_metadata
    path, interval = sys.argv[1], float(sys.argv[2])
    store = SessionStore.create(path, session_metadata(configuration={{}}, instruments={{}}),
                                checkpoint_interval_s=interval)
    seq = checkpointed = 0
    while True:
        for _ in range(5):
            store.add_trace(make_raw(seq, n=4000), None)
            seq += 1
        before = store.checkpoints
        store.commit()
        if store.checkpoints > before:
            checkpointed = seq
        if store.checkpoints >= 3 and seq >= 60:
            print(seq, checkpointed, flush=True)
            sys.stdin.readline()             # hold the file open while the test copies it
""")


def _meta():
    return session_metadata(configuration={"digitiser": {"range_v": 0.5}}, instruments={})


class TestFileAlone:
    def test_right_after_the_start_record(self, tmp_path):
        path = tmp_path / "live.db"
        store = SessionStore.create(path, _meta())
        try:
            store.add_trace(make_raw(0, n=64), None)      # written, not committed
            (tmp_path / "copy").mkdir()
            shutil.copyfile(path, tmp_path / "copy" / "live.db")   # the file alone
        finally:
            store.close("ok", "test", {"traces": 1})
        with SessionReader(tmp_path / "copy" / "live.db") as reader:
            assert reader.metadata["configuration"] == {"digitiser": {"range_v": 0.5}}
            assert reader.trace_count() == 0 and not reader.stopped_cleanly

    def test_copied_while_a_writer_holds_it_and_after_kill_9(self, tmp_path):
        path = tmp_path / "live.db"
        proc = subprocess.Popen([sys.executable, "-c", _WRITER.format(tests=str(TESTS)),
                                 str(path), "0.05"], stdin=subprocess.PIPE,
                                stdout=subprocess.PIPE, text=True)
        try:
            committed, checkpointed = map(int, proc.stdout.readline().split())
            assert Path(f"{path}-wal").stat().st_size > 0   # the writer has it open in WAL
            held = tmp_path / "held"
            held.mkdir()
            shutil.copyfile(path, held / "live.db")
            os.kill(proc.pid, signal.SIGKILL)
            proc.wait(timeout=10)
        finally:
            if proc.poll() is None:
                proc.kill()
            proc.stdin.close()
            proc.stdout.close()
        assert checkpointed >= 5
        crashed = tmp_path / "crashed"
        crashed.mkdir()
        shutil.copyfile(path, crashed / "live.db")
        for copy in (held / "live.db", crashed / "live.db"):
            with SessionReader(copy) as reader:
                n = reader.trace_count()
                assert checkpointed <= n <= committed
                assert reader.integrity_check() == "ok"
                assert reader.trace(n - 1).raw.codes.tobytes() == make_raw(
                    n - 1, n=4000).codes.tobytes()
        with SessionReader(path) as reader:               # with its -wal: everything
            assert reader.trace_count() == committed

    def test_an_old_file_copied_without_its_wal_says_so(self, tmp_path):
        import sqlite3

        path = tmp_path / "old.db"
        conn = sqlite3.connect(path, isolation_level=None)
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA wal_autocheckpoint=0")      # as before: no early checkpoint
        conn.execute("CREATE TABLE session_start (id INTEGER PRIMARY KEY)")
        (tmp_path / "copy").mkdir()
        shutil.copyfile(path, tmp_path / "copy" / "old.db")
        conn.close()
        with pytest.raises(SessionFileError, match="old.db-wal until its first checkpoint"):
            SessionReader(tmp_path / "copy" / "old.db")


# -- read-only media ---------------------------------------------------------------------

def _crashed_session(folder: Path, n_checkpointed: int = 20, n_more: int = 30) -> Path:
    """A session whose writer died: some traces checkpointed into FILE.db, more only in
    FILE.db-wal (the files copied away from the writer, as a rescue copy would be)."""
    work = folder / "work"
    work.mkdir()
    path = work / "s.db"
    now = [0.0]
    store = SessionStore.create(path, _meta(), checkpoint_interval_s=5.0,
                                clock=lambda: now[0])
    for seq in range(n_checkpointed):
        store.add_trace(make_raw(seq, n=2000), None)
    now[0] = 10.0
    store.commit()                                         # checkpointed
    for seq in range(n_checkpointed, n_checkpointed + n_more):
        store.add_trace(make_raw(seq, n=2000), None)
    store.commit()                                         # in the WAL only
    medium = folder / "medium"
    medium.mkdir()
    for suffix in ("", "-wal", "-shm"):
        shutil.copyfile(f"{path}{suffix}", medium / f"s.db{suffix}")
    store.close("ok", "test", {})
    return medium / "s.db"


def _how_read_only() -> str | None:
    if os.geteuid() != 0:
        return "chmod"
    if shutil.which("unshare") is None:
        return None
    probe = subprocess.run(["unshare", "-m", "sh", "-c", "mount --bind -o ro / / 2>&1 || "
                            "mount -o remount,bind,ro / /"], capture_output=True)
    return "mount" if probe.returncode == 0 else None


HOW = _how_read_only()
needs_read_only = pytest.mark.skipif(HOW is None, reason="no way to make a read-only folder "
                                     "here (root without mount namespaces)")


def run_on_read_only(folder: Path, argv: list[str], *, tmpfs_mb: int | None = None,
                     tmp: Path | None = None) -> subprocess.CompletedProcess:
    """Run ``tankside argv`` with ``folder`` read-only (and TMPDIR a small tmpfs when
    asked)."""
    env = dict(os.environ)
    command = [sys.executable, "-m", "tankside.monitor.cli", *argv]
    if HOW == "chmod":
        os.chmod(folder, 0o555)
        try:
            return subprocess.run(command, capture_output=True, text=True, timeout=120,
                                  env=env)
        finally:
            os.chmod(folder, 0o755)
    script = f"mount --bind -o ro {folder} {folder}"
    if tmpfs_mb is not None:
        assert tmp is not None
        tmp.mkdir(exist_ok=True)
        script += f" && mount -t tmpfs -o size={tmpfs_mb}m tankside-test {tmp}"
        env["TMPDIR"] = str(tmp)
    script += ' && exec "$@"'
    return subprocess.run(["unshare", "-m", "sh", "-c", script, "sh", *command],
                          capture_output=True, text=True, timeout=120, env=env)


def _rows(csv_path: Path) -> list[int]:
    with open(csv_path, newline="") as fh:
        return [int(r["seq"]) for r in csv.DictReader(fh)]


@needs_read_only
class TestReadOnlyMedium:
    def test_with_wal_and_shm_it_is_read_in_place(self, tmp_path):
        path = _crashed_session(tmp_path)
        out = tmp_path / "r.csv"
        proc = run_on_read_only(path.parent, ["export", str(path), "--results", str(out)])
        assert proc.returncode == 0, proc.stderr
        assert _rows(out) == list(range(50)) and "copy" not in proc.stderr

    def test_with_wal_and_no_shm_a_working_copy_is_read(self, tmp_path):
        path = _crashed_session(tmp_path)
        Path(f"{path}-shm").unlink()
        out = tmp_path / "r.csv"
        proc = run_on_read_only(path.parent, ["export", str(path), "--results", str(out)])
        assert proc.returncode == 0, proc.stderr
        assert _rows(out) == list(range(50))                   # the WAL's traces too
        assert "read-only medium with its s.db-wal and no s.db-shm" in proc.stderr
        assert sorted(p.name for p in path.parent.iterdir()) == ["s.db", "s.db-wal"]

    def test_file_alone_is_read_as_of_its_last_checkpoint(self, tmp_path):
        path = _crashed_session(tmp_path)
        Path(f"{path}-shm").unlink()
        Path(f"{path}-wal").unlink()
        out = tmp_path / "r.csv"
        proc = run_on_read_only(path.parent, ["export", str(path), "--results", str(out)])
        assert proc.returncode == 0, proc.stderr
        assert _rows(out) == list(range(20))

    def test_no_room_for_a_working_copy_says_what_is_missing(self, tmp_path):
        if HOW != "mount":
            pytest.skip("a small temporary folder needs a tmpfs mount")
        path = _crashed_session(tmp_path)
        Path(f"{path}-shm").unlink()
        proc = run_on_read_only(path.parent, ["export", str(path), "--results",
                                              str(tmp_path / "r.csv")],
                                tmpfs_mb=1, tmp=tmp_path / "small-tmp")
        assert proc.returncode == 2
        err = proc.stderr.strip()
        assert len(err.splitlines()) == 1 and "Traceback" not in err
        assert "its last commits are in s.db-wal, which SQLite reads only with a s.db-shm " \
               "beside it" in err
        assert f"{path.parent} is read-only" in err and "copy s.db and s.db-wal together" in err
        assert not (tmp_path / "r.csv").exists()
