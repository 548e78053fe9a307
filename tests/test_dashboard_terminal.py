"""`tankside demo` with its dashboard in a real pseudo-terminal, as `make demo` runs it.

The command runs as a user would start it: the CLI in a process of its own, on a pty
of 100x30 cells, with the simulated bench on 127.0.0.1 and the session in a child
process. Keys are typed into the terminal; the checks read the session file and the
text the command leaves on the terminal.
"""

from __future__ import annotations

import fcntl
import os
import pty
import re
import struct
import subprocess
import sys
import termios
import threading
import time

import pytest
from polling import committed_traces, wait_for

from tankside.monitor.record.store import SessionReader

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX pseudo-terminals")

# control sequences (ECMA-48 CSI and OSC) between the words on screen
_CONTROL = re.compile(r"\x1b\[[0-9;?<>=]*[ -/]*[@-~]"       # CSI
                      r"|\x1b\][^\x07\x1b]*(\x07|\x1b\\)"    # OSC, ended by BEL or ST
                      r"|\x1b[=>()][0-9A-Za-z]?")


class Terminal:
    """A command on a pty; everything it writes is collected by a reader thread."""

    def __init__(self, argv, *, cwd, env, cols=100, rows=30):
        self.master, slave = pty.openpty()
        fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", rows, cols, 0, 0))
        self.proc = subprocess.Popen(argv, cwd=cwd, env=env, stdin=slave, stdout=slave,
                                     stderr=slave, close_fds=True, start_new_session=True)
        os.close(slave)
        self._chunks: list[bytes] = []
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    def _read(self):
        while True:
            try:
                data = os.read(self.master, 65536)
            except OSError:
                return
            if not data:
                return
            self._chunks.append(data)

    @property
    def text(self) -> str:
        """What the command wrote, without control sequences."""
        raw = b"".join(self._chunks).decode("utf-8", errors="replace")
        return _CONTROL.sub("", raw)

    def type(self, keys: str) -> None:
        os.write(self.master, keys.encode())

    def wait_for(self, condition, timeout_s: float, what: str):
        try:
            return wait_for(condition, timeout_s, what, every_s=0.1,
                            give_up=lambda: self.proc.poll() is not None)
        except AssertionError as err:
            raise AssertionError(f"{err}; terminal:\n{self.text[-3000:]}") from None

    def close(self):
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait(10)
        os.close(self.master)
        self._reader.join(5)


def _committed(folder) -> int:
    return sum(committed_traces(db) for db in folder.glob("session-*.db"))


def test_demo_in_a_terminal_caution_keys_and_clean_quit(tmp_path):
    folder = tmp_path / "sessions"
    env = dict(os.environ, TERM="xterm-256color", TMPDIR=str(tmp_path), COLUMNS="100",
               LINES="30")
    term = Terminal([sys.executable, "-m", "tankside.monitor.cli", "demo",
                     "--sessions", str(folder), "--seed", "7"], cwd=tmp_path, env=env)
    try:
        # first run in an empty folder: the caution comes first and waits for Enter
        term.wait_for(lambda: "press Enter to continue" in term.text, 60, "the caution")
        # nothing reaches an instrument before the caution is acknowledged
        time.sleep(0.5)
        assert not list(folder.glob("session-*.db"))
        term.type("\r")
        term.wait_for(lambda: _committed(folder) >= 10, 60, "committed traces")
        term.type("m")
        term.wait_for(lambda: "note" in term.text.lower(), 10, "the mark dialog")
        term.type("from the terminal\r")
        time.sleep(0.5)           # keys typed before the dialog has closed would go into it
        term.type("cc")           # the method key asks, the second press confirms
        time.sleep(1.5)           # a second of traces converted with the new method
        term.type("q")
        time.sleep(0.3)
        assert term.proc.poll() is None      # one q only asks while recording
        term.type("q")
        code = term.proc.wait(60)
        term.wait_for(lambda: "session stopped" in term.text, 10, "the closing line")
    finally:
        term.close()
    text = term.text
    assert code == 0, text[-3000:]
    assert "Traceback" not in text
    assert "session stopped: operator" in text
    (db,) = folder.glob("session-*.db")
    with SessionReader(db) as reader:
        assert reader.integrity_check() == "ok" and reader.stopped_cleanly
        assert reader.stop["exit_status"] == "operator"
        events = reader.events()
        assert [e["detail"]["note"] for e in events if e["kind"] == "mark"] == [
            "from the terminal"]
        assert any(e["kind"] == "method-change" and e["detail"]["to"] == "deconvolve"
                   for e in events)
        assert reader.stop["counts"]["stored"] == len(reader.seqs()) >= 10
        # the demo alone switches its (simulated) drive on, after the caution, and says so
        drive = [(e["kind"], e["detail"]["cause"]) for e in events
                 if e["kind"] in ("drive-on", "drive-off")]
        assert drive == [("drive-off", "start"), ("drive-on", "demo (simulated generator)"),
                         ("drive-off", "end of session")]
    assert "output was switched on" in re.sub(r"[\s│▌▐]+", " ", text)   # the notice
    assert not list(tmp_path.glob("tankside-session-*.log"))   # the child's log removed
